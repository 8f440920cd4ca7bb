//! Shared helpers of the integration tests: small atoms and fields, closed-form physics, a seeded
//! random generator, fixture loading, and the catalogue of closed-form models (each returns its
//! `Problem` together with the analytic answer) that `physics.rs` runs through every method.

// Each test binary compiles this module and uses only part of it; unused helpers are expected.
#![allow(dead_code)]

use std::f64::consts::PI;

use fieldbook_runtime::atom::E_A0;
use fieldbook_runtime::prelude::*;

/// 2π, to write frequencies as 2π × (value in Hz).
pub const TAU: f64 = 2.0 * PI;

/// Tight adaptive tolerances, for comparisons with closed forms at the 1e-10 level.
pub fn tight() -> Tolerance {
    Tolerance {
        rtol: 1e-12,
        atol: 1e-14,
    }
}

/// A two-level atom g (energy 0), e (energy `w0`) with one π transition.
pub fn two_level(w0: f64) -> (Atom, LevelId, LevelId, TransitionId) {
    let mut b = Atom::builder();
    let g = b.level("g", 0.0);
    let e = b.level("e", w0);
    let tr = b.transition(g, e);
    (b.build().expect("two-level atom"), g, e, tr)
}

/// A two-level atom with decay e → g at rate Γ.
pub fn decaying_two_level(w0: f64, gamma: f64) -> (Atom, LevelId, LevelId, TransitionId) {
    let mut b = Atom::builder();
    let g = b.level("g", 0.0);
    let e = b.level("e", w0);
    let tr = b.transition(g, e);
    b.decay(e, g, gamma);
    (b.build().expect("decaying atom"), g, e, tr)
}

/// Dipole with only the spherical component q = +1 (a Δm = +1 transition), so that only σ⁺ light
/// drives it and π light on a neighbouring transition does not.
pub fn sigma_plus_dipole() -> [C64; 3] {
    [C64::new(0.0, 0.0), C64::new(0.0, 0.0), C64::new(E_A0, 0.0)]
}

/// Dipole with only q = −1.
pub fn sigma_minus_dipole() -> [C64; 3] {
    [C64::new(E_A0, 0.0), C64::new(0.0, 0.0), C64::new(0.0, 0.0)]
}

/// A field given by its Rabi frequency Ω and detuning Δ on one transition (π polarised).
pub fn drive(tr: TransitionId, detuning: f64, rabi: f64) -> Field {
    beam("drive", tr, detuning, rabi, Polarization::pi())
}

/// A field named `name` with Rabi frequency Ω and detuning Δ on transition `tr`, polarised `pol`.
pub fn beam(name: &str, tr: TransitionId, detuning: f64, rabi: f64, pol: Polarization) -> Field {
    Field::new(
        name,
        Carrier::Detuning {
            transition: tr,
            detuning,
        },
        Strength::Rabi {
            transition: tr,
            rabi,
        },
    )
    .with_polarization(pol)
}

/// A square envelope of duration `d` (s).
pub fn square(d: f64) -> Envelope {
    Envelope::new(Shape::Square, d).expect("square envelope")
}

/// Rabi's formula for a detuned square pulse from g: P_e = Ω²/Ω'² sin²(Ω' t/2), Ω' = √(Ω²+Δ²)
/// (Allen & Eberly, Optical Resonance and Two-Level Atoms, 1975, ch. 3; Foot, Atomic Physics,
/// OUP 2005, ch. 7).
pub fn rabi_pe(omega: f64, delta: f64, t: f64) -> f64 {
    let w = (omega * omega + delta * delta).sqrt();
    (omega / w).powi(2) * (0.5 * w * t).sin().powi(2)
}

/// Ramsey's formula for two square pulses of length τ_p and Rabi frequency Ω separated by a free
/// time T, at detuning δ, from g (Ramsey, Phys. Rev. 78, 695 (1950)):
/// P_e = 4 (Ω/Ω')² sin²(Ω'τ_p/2) [cos(Ω'τ_p/2) cos(δT/2) − (δ/Ω') sin(Ω'τ_p/2) sin(δT/2)]².
pub fn ramsey_pe(omega: f64, delta: f64, tau_p: f64, free: f64) -> f64 {
    let w = (omega * omega + delta * delta).sqrt();
    let (s, c) = (0.5 * w * tau_p).sin_cos();
    let (sd, cd) = (0.5 * delta * free).sin_cos();
    4.0 * (omega / w).powi(2) * s * s * (c * cd - delta / w * s * sd).powi(2)
}

/// Two-level steady state ρ_ee = (s/2)/(1 + s + 4Δ²/Γ²), s = 2Ω²/Γ² (Foot 2005, ch. 7).
pub fn steady_rho_ee(omega: f64, delta: f64, gamma: f64) -> f64 {
    let s = 2.0 * omega * omega / (gamma * gamma);
    0.5 * s / (1.0 + s + 4.0 * delta * delta / (gamma * gamma))
}

/// Golden-section search for the minimum of `f` on [a, b]; `iters` iterations shrink the bracket
/// by 0.618 each.
pub fn golden_min(mut f: impl FnMut(f64) -> f64, mut a: f64, mut b: f64, iters: usize) -> f64 {
    let r = 0.5 * (5f64.sqrt() - 1.0);
    let (mut x1, mut x2) = (b - r * (b - a), a + r * (b - a));
    let (mut f1, mut f2) = (f(x1), f(x2));
    for _ in 0..iters {
        if f1 <= f2 {
            b = x2;
            (x2, f2) = (x1, f1);
            x1 = b - r * (b - a);
            f1 = f(x1);
        } else {
            a = x1;
            (x1, f1) = (x2, f2);
            x2 = a + r * (b - a);
            f2 = f(x2);
        }
    }
    0.5 * (a + b)
}

/// SplitMix64 (Steele, Lea & Flood, OOPSLA 2014): a tiny seeded generator, so every random test
/// is reproducible without a dependency.
pub struct Rng(u64);

impl Rng {
    /// A generator from a seed.
    pub fn new(seed: u64) -> Self {
        Self(seed)
    }
    /// The next 64 random bits.
    pub fn next_u64(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9e37_79b9_7f4a_7c15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
        z ^ (z >> 31)
    }
    /// Uniform in [0, 1).
    pub fn unit(&mut self) -> f64 {
        (self.next_u64() >> 11) as f64 / (1u64 << 53) as f64
    }
    /// Uniform in [lo, hi).
    pub fn range(&mut self, lo: f64, hi: f64) -> f64 {
        lo + (hi - lo) * self.unit()
    }
    /// Uniform index in 0..n.
    pub fn index(&mut self, n: usize) -> usize {
        (self.next_u64() % n as u64) as usize
    }
}

/// A fixture from runtime/tests/fixtures.
pub fn fixture(name: &str) -> serde_json::Value {
    let path = format!("{}/tests/fixtures/{name}", env!("CARGO_MANIFEST_DIR"));
    let text = std::fs::read_to_string(&path).unwrap_or_else(|e| panic!("{path}: {e}"));
    serde_json::from_str(&text).unwrap_or_else(|e| panic!("{path}: {e}"))
}

/// A float from JSON.
pub fn num(v: &serde_json::Value) -> f64 {
    v.as_f64()
        .unwrap_or_else(|| panic!("expected a number, got {v}"))
}

/// A list of floats from JSON.
pub fn nums(v: &serde_json::Value) -> Vec<f64> {
    v.as_array()
        .unwrap_or_else(|| panic!("expected a list, got {v}"))
        .iter()
        .map(num)
        .collect()
}

/// A complex vector stored as {"re": [...], "im": [...]}.
pub fn cvec(v: &serde_json::Value) -> Vec<C64> {
    nums(&v["re"])
        .into_iter()
        .zip(nums(&v["im"]))
        .map(|(re, im)| C64::new(re, im))
        .collect()
}

/// A complex n×n matrix stored as {"n", "re", "im"} (row-major).
pub fn cmat(v: &serde_json::Value) -> (usize, Vec<C64>) {
    let n = v["n"].as_u64().expect("matrix size") as usize;
    let m = cvec(v);
    assert_eq!(m.len(), n * n, "matrix of size {n}");
    (n, m)
}

/// Every method the crate offers, for harnesses that try them all.
pub const ALL_METHODS: [Method; 6] = [
    Method::Auto,
    Method::Eigen,
    Method::DormandPrince54,
    Method::DormandPrince853,
    Method::Magnus4,
    Method::LiouvillianExp,
];

/// One closed-form model of the catalogue: a problem, its analytic answer for every observable
/// component at every sample, and for each method either the tolerance it must meet (with the
/// reason) or `None` when the method cannot treat the model (the solve must then fail with
/// `Error::MethodUnsuitable`, not panic).
pub struct Model {
    /// Short name for messages.
    pub name: &'static str,
    /// The problem (its `method` and `tolerance` are overwritten by the harness).
    pub problem: Problem,
    /// Analytic values, sample-major, observables concatenated (as `Solution::series` flattened).
    pub analytic: Vec<f64>,
    /// Tolerance per method, `None` if the method is unsuitable.
    pub tolerance: fn(Method) -> Option<(f64, &'static str)>,
    /// Source of the analytic answer.
    pub source: &'static str,
}

/// Flatten a solution's series sample-major, in the order `Model::analytic` uses.
pub fn flatten(sol: &Solution) -> Vec<f64> {
    let mut out = Vec::new();
    for k in 0..sol.times.len() {
        for s in &sol.series {
            out.extend_from_slice(&s.values[k * s.width..(k + 1) * s.width]);
        }
    }
    out
}

/// Sample times 0, T/(k−1), …, T.
pub fn uniform(t_end: f64, k: usize) -> Vec<f64> {
    (0..k).map(|i| t_end * i as f64 / (k - 1) as f64).collect()
}

// Tolerance tables. Exact propagators (eigen, Liouvillian exponential, and CF4 Magnus, which is
// exact for a constant H) meet rounding-level errors; adaptive RK at rtol 1e-12 accumulates
// ~1e-12 per unit of phase over tens of radians, so 1e-10 leaves a factor > 10 of margin; DP54 at
// the same rtol takes many more, smaller steps and loses a little more to rounding.
fn tol_square_pure(m: Method) -> Option<(f64, &'static str)> {
    match m {
        Method::Auto | Method::Eigen => Some((1e-12, "exact eigen-propagation: rounding only")),
        // The state is lifted to a density matrix and propagated by exp(𝓛t).
        Method::LiouvillianExp => {
            Some((1e-12, "Padé exponential of the Liouvillian: rounding only"))
        }
        Method::Magnus4 => Some((
            1e-11,
            "CF4 is exact for constant H; rounding over many steps",
        )),
        Method::DormandPrince853 => Some((1e-10, "rtol 1e-12 over ~30 rad of phase")),
        Method::DormandPrince54 => Some((1e-9, "rtol 1e-12, 5th order: many small steps")),
        _ => None,
    }
}

fn tol_shaped_pure(m: Method) -> Option<(f64, &'static str)> {
    match m {
        // Auto picks DOP853 on shaped segments (rtol < 1e-6).
        Method::Auto | Method::DormandPrince853 => Some((1e-9, "rtol 1e-12, shaped pulse")),
        Method::Magnus4 => Some((1e-9, "CF4 with step doubling at rtol 1e-12")),
        Method::DormandPrince54 => Some((1e-8, "rtol 1e-12, 5th order")),
        _ => None,
    }
}

fn tol_open_constant(m: Method) -> Option<(f64, &'static str)> {
    match m {
        Method::Auto | Method::LiouvillianExp => {
            Some((1e-12, "Padé exponential of the Liouvillian: rounding only"))
        }
        Method::DormandPrince853 => Some((1e-10, "rtol 1e-12 on ρ over 5 decay times")),
        Method::DormandPrince54 => Some((1e-9, "rtol 1e-12, 5th order")),
        _ => None,
    }
}

/// The catalogue of closed-form models.
pub fn catalogue() -> Vec<Model> {
    let mut out = Vec::new();

    // Detuned Rabi oscillation, sampled over three generalised Rabi periods.
    {
        let (omega, delta) = (TAU * 1e6, TAU * 0.7e6);
        let (atom, g, e, tr) = two_level(TAU * 1e9);
        let t_end = 3.0 * TAU / (omega * omega + delta * delta).sqrt();
        let seq = Sequence::builder()
            .then(Pulse::new(0, square(t_end)))
            .build()
            .unwrap();
        let times = uniform(t_end, 61);
        let analytic = times
            .iter()
            .flat_map(|&t| {
                let pe = rabi_pe(omega, delta, t);
                [pe, 1.0 - pe]
            })
            .collect();
        let mut p = Problem::new(
            atom.clone(),
            vec![drive(tr, delta, omega)],
            seq,
            State::level(&atom, g).unwrap(),
            vec![Observable::Population(e), Observable::Population(g)],
        );
        p.samples = Samples::Times(times);
        out.push(Model {
            name: "rabi_detuned_square",
            problem: p,
            analytic,
            tolerance: tol_square_pure,
            source: "Allen & Eberly 1975 ch. 3; Foot 2005 ch. 7",
        });
    }

    // The same Rabi oscillation from a mixed (density-matrix) start |g⟩⟨g|, with no dissipation:
    // the density-matrix paths (eigen on ρ, Liouvillian exponential, RK on ρ) must agree.
    {
        let (omega, delta) = (TAU * 1e6, -TAU * 1.1e6);
        let (atom, g, e, tr) = two_level(TAU * 1e9);
        let t_end = 2.5 * TAU / (omega * omega + delta * delta).sqrt();
        let seq = Sequence::builder()
            .then(Pulse::new(0, square(t_end)))
            .build()
            .unwrap();
        let times = uniform(t_end, 26);
        let analytic = times.iter().map(|&t| rabi_pe(omega, delta, t)).collect();
        let mut p = Problem::new(
            atom.clone(),
            vec![drive(tr, delta, omega)],
            seq,
            State::mixture(&atom, &[(g, 1.0)]).unwrap(),
            vec![Observable::Population(e)],
        );
        p.samples = Samples::Times(times);
        out.push(Model {
            name: "rabi_mixed_start",
            problem: p,
            analytic,
            tolerance: |m| match m {
                Method::Auto | Method::Eigen | Method::LiouvillianExp => {
                    Some((1e-12, "exact propagation of ρ: rounding only"))
                }
                Method::DormandPrince853 => Some((1e-10, "rtol 1e-12 on ρ")),
                Method::DormandPrince54 => Some((1e-9, "rtol 1e-12, 5th order")),
                // CF4 propagates pure states only.
                _ => None,
            },
            source: "Allen & Eberly 1975 ch. 3; Foot 2005 ch. 7",
        });
    }

    // Ramsey fringes: π/2 – wait – π/2 at a detuning comparable to 1/T.
    {
        let (omega, delta) = (TAU * 1e6, TAU * 0.13e6);
        let (atom, g, e, tr) = two_level(TAU * 1e9);
        let tau_p = 0.25e-6;
        let free = 3e-6;
        let seq = Sequence::builder()
            .then(Pulse::new(0, square(tau_p)))
            .wait(free)
            .then(Pulse::new(0, square(tau_p)))
            .build()
            .unwrap();
        let mut p = Problem::new(
            atom.clone(),
            vec![drive(tr, delta, omega)],
            seq,
            State::level(&atom, g).unwrap(),
            vec![Observable::Population(e)],
        );
        p.samples = Samples::Final;
        out.push(Model {
            name: "ramsey_square_pulses",
            problem: p,
            analytic: vec![ramsey_pe(omega, delta, tau_p, free)],
            tolerance: tol_square_pure,
            source: "Ramsey, Phys. Rev. 78, 695 (1950)",
        });
    }

    // Rosen–Zener: a sech pulse of 50 widths on each side (tail area ~ 4e-22 relative).
    {
        let (w, o0, delta) = (0.2e-6, 1.3 / (0.2e-6), 2.0 / (0.2e-6));
        let (atom, g, e, tr) = two_level(TAU * 1e9);
        let env = Envelope::new(Shape::Sech { width: w }, 100.0 * w).unwrap();
        let seq = Sequence::builder()
            .then(Pulse::new(0, env))
            .build()
            .unwrap();
        let p = Problem::new(
            atom.clone(),
            vec![drive(tr, delta, o0)],
            seq,
            State::level(&atom, g).unwrap(),
            vec![Observable::Population(e)],
        );
        out.push(Model {
            name: "rosen_zener_sech",
            problem: p,
            analytic: vec![rosen_zener(o0, w, delta)],
            tolerance: tol_shaped_pure,
            source: "Rosen & Zener, Phys. Rev. 40, 502 (1932)",
        });
    }

    // Resonant Gaussian of area π (area theorem for a two-level atom on resonance).
    {
        let (atom, g, e, tr) = two_level(TAU * 1e9);
        let env = Envelope::new(Shape::Gaussian { sigma: 0.1e-6 }, 1e-6).unwrap();
        let seq = Sequence::builder()
            .then(Pulse::new(0, env).area(PI))
            .build()
            .unwrap();
        let p = Problem::new(
            atom.clone(),
            vec![drive(tr, 0.0, TAU * 1e6)],
            seq,
            State::level(&atom, g).unwrap(),
            vec![Observable::Population(e)],
        );
        out.push(Model {
            name: "gaussian_pi_pulse",
            problem: p,
            analytic: vec![1.0],
            tolerance: tol_shaped_pure,
            source: "McCall & Hahn, Phys. Rev. 183, 457 (1969)",
        });
    }

    // Free decay of e and the scattering rate Γ ρ_ee.
    {
        let gamma = TAU * 6e6;
        let (atom, g, e, _) = decaying_two_level(TAU * 1e9, gamma);
        let t_end = 5.0 / gamma;
        let seq = Sequence::builder().wait(t_end).build().unwrap();
        let times = uniform(t_end, 21);
        let analytic = times
            .iter()
            .flat_map(|&t| {
                let pe = (-gamma * t).exp();
                [pe, 1.0 - pe, gamma * pe]
            })
            .collect();
        let mut p = Problem::new(
            atom.clone(),
            vec![],
            seq,
            State::level(&atom, e).unwrap(),
            vec![
                Observable::Population(e),
                Observable::Population(g),
                Observable::ScatteringRate,
            ],
        );
        p.samples = Samples::Times(times);
        out.push(Model {
            name: "free_decay",
            problem: p,
            analytic,
            // The scattering rate (~4e7 /s) is compared relative to its size by the harness.
            tolerance: tol_open_constant,
            source: "Weisskopf & Wigner, Z. Phys. 63, 54 (1930)",
        });
    }

    // Pure dephasing plus decay: |ρ_eg| = ½ e^{−(Γ/2 + γ)t} from (g + e)/√2 (the Bloch equations'
    // 1/T₂ = Γ/2 + γ; Allen & Eberly 1975 ch. 2).
    {
        let (gamma, deph) = (TAU * 1e6, TAU * 0.4e6);
        let mut b = Atom::builder();
        let g = b.level("g", 0.0);
        let e = b.level("e", TAU * 1e9);
        b.transition(g, e);
        b.decay(e, g, gamma);
        b.dephasing(e, deph);
        let atom = b.build().unwrap();
        let t_end = 3.0 / gamma;
        let seq = Sequence::builder().wait(t_end).build().unwrap();
        let times = uniform(t_end, 11);
        let analytic = times
            .iter()
            .flat_map(|&t| {
                let c = 0.5 * (-(0.5 * gamma + deph) * t).exp();
                [c, 0.0, 0.5 * (-gamma * t).exp()]
            })
            .collect();
        let initial =
            State::superposition(&atom, &[(g, C64::new(1.0, 0.0)), (e, C64::new(1.0, 0.0))])
                .unwrap();
        let mut p = Problem::new(
            atom,
            vec![],
            seq,
            initial,
            vec![Observable::Coherence(e, g), Observable::Population(e)],
        );
        p.samples = Samples::Times(times);
        out.push(Model {
            name: "decay_and_dephasing",
            problem: p,
            analytic,
            tolerance: tol_open_constant,
            source: "Allen & Eberly 1975 ch. 2 (optical Bloch equations)",
        });
    }
    out
}

/// Rosen–Zener transition probability for Ω(t) = Ω₀ sech(t/T) at detuning Δ:
/// P = sin²(πΩ₀T/2) sech²(πΔT/2) (Rosen & Zener, Phys. Rev. 40, 502 (1932)).
pub fn rosen_zener(o0: f64, w: f64, delta: f64) -> f64 {
    (0.5 * PI * o0 * w).sin().powi(2) / (0.5 * PI * delta * w).cosh().powi(2)
}

/// A STIRAP Λ system (Vitanov et al., Rev. Mod. Phys. 89, 015006 (2017)): g → x by a σ⁺ pump,
/// r → x by a σ⁻ Stokes beam (each drives only its own leg), both with Rabi frequency `omega`
/// and Gaussian envelopes of rms width `sigma` peaking at `t_pump` and `t_stokes` within a window
/// [0, `t_end`] (untruncated inside it, as a hand-written reference would have them). Observes
/// P_r. The Stokes field is field 1: retuning it by −δ sets the two-photon detuning δ
/// (H_rr = −δ).
pub fn stirap_lambda(omega: f64, sigma: f64, t_pump: f64, t_stokes: f64, t_end: f64) -> Problem {
    let mut b = Atom::builder();
    let g = b.level("g", 0.0);
    let r = b.level("r", TAU * 6.834e9);
    let x = b.level("x", TAU * 384.23e12);
    let tp = b.transition_with_dipole(g, x, sigma_plus_dipole());
    let ts = b.transition_with_dipole(r, x, sigma_minus_dipole());
    let atom = b.build().expect("Λ atom");
    let gauss = |centre: f64| {
        Envelope::new(
            Shape::custom(move |t: f64| (-(t - centre).powi(2) / (2.0 * sigma * sigma)).exp()),
            t_end,
        )
        .expect("envelope")
    };
    let seq = Sequence::builder()
        .at(0.0, Pulse::new(0, gauss(t_pump)))
        .at(0.0, Pulse::new(1, gauss(t_stokes)))
        .build()
        .expect("sequence");
    let initial = State::level(&atom, g).expect("state");
    Problem::new(
        atom,
        vec![
            beam("pump", tp, 0.0, omega, Polarization::sigma_plus()),
            beam("stokes", ts, 0.0, omega, Polarization::sigma_minus()),
        ],
        seq,
        initial,
        vec![Observable::Population(r)],
    )
}

/// σ⁺ optical pumping on the whole ⁸⁷Rb D2 line (8 ground + 16 excited sublevels from the species
/// table, expanded at 0.1 G along z): a pump on F = 2 → F' = 3 and a repumper on F = 1 → F' = 2,
/// both σ⁺ and resonant with their stretched transitions, with spontaneous decay. Shared by
/// `pumping.rs` and the bench's problem p5.
pub struct Pumping {
    /// The expanded atom with its sublevel labels.
    pub line: fieldbook_runtime::manifold::LineAtom,
    /// Pump (field 0) and repumper (field 1).
    pub fields: Vec<Field>,
    /// The rotating frame's cutoff (rad/s): 2π × 1 GHz keeps every coupling of a beam to its own
    /// ground level and drops each beam's coupling to the other ground level, 6.8 GHz away
    /// (`BeyondCutoff` in the frame report; their light shifts are ~(Ω/2)²/(2π × 6.6 GHz),
    /// about 10⁻⁴ Γ).
    pub cutoff: f64,
    /// Natural linewidth Γ (1/s).
    pub gamma: f64,
    /// Pump Rabi frequency on |2, 2⟩ → |3', 3'⟩ (rad/s).
    pub pump_rabi: f64,
    /// |F = 2, m = 2⟩, the stretched ground state.
    pub stretched: LevelId,
    /// |F' = 3, m' = 3⟩, its cycling partner.
    pub cycling: LevelId,
}

/// Bias field of the pumping scenario (T): 0.1 G, enough to name the quantisation axis, with
/// Zeeman shifts (≲ 2π × 0.3 MHz) far below Γ = 2π × 6.07 MHz.
pub const PUMPING_FIELD: f64 = 1e-5;

/// The pumping scenario. The pump has Ω = Γ/√2 on the cycling transition, i.e. s = 2Ω²/Γ² = 1,
/// the saturation intensity I_sat = 1.669 mW/cm² (Steck, *Rubidium 87 D Line Data*, σ± cycling
/// value, recalled; `species.rs` checks the model against it); the repumper Ω = Γ/2 on
/// |1, 1⟩ → |2', 2'⟩. `pi_admixture` ε adds a π component to the pump, polarisation
/// ∝ e₊₁ + ε e₀, with the cycling Rabi frequency kept at Γ/√2.
pub fn rb87_d2_pumping(pi_admixture: f64) -> Pumping {
    use fieldbook_runtime::species::{DLine, Species};
    let line = Species::named("87Rb")
        .and_then(|s| s.line(DLine::D2).ok())
        .expect("87Rb D2 in the species table");
    let la = line
        .expand(PUMPING_FIELD, |_| true, |_| true)
        .expect("87Rb D2 expands");
    let level = |excited, two_f, two_m| la.level(excited, two_f, two_m).expect("sublevel");
    let transition = |lower, upper| {
        la.atom
            .transitions()
            .iter()
            .position(|t| t.lower() == lower && t.upper() == upper)
            .expect("transition")
    };
    let (stretched, cycling) = (level(false, 4, 4), level(true, 6, 6));
    let repump_tr = transition(level(false, 2, 2), level(true, 4, 4));
    let cycling_tr = transition(stretched, cycling);
    let gamma = line.gamma;
    let pump_rabi = gamma / 2f64.sqrt();
    let z = C64::new(0.0, 0.0);
    let pump_pol = Polarization::new([z, C64::new(pi_admixture, 0.0), C64::new(1.0, 0.0)])
        .expect("pump polarisation");
    Pumping {
        fields: vec![
            beam("pump", cycling_tr, 0.0, pump_rabi, pump_pol),
            beam(
                "repump",
                repump_tr,
                0.0,
                0.5 * gamma,
                Polarization::sigma_plus(),
            ),
        ],
        line: la,
        cutoff: TAU * 1e9,
        gamma,
        pump_rabi,
        stretched,
        cycling,
    }
}

impl Pumping {
    /// Both beams on from 0 to `t_end` (s), from the uniform mixture of the 8 ground sublevels,
    /// recording `observables`.
    pub fn problem(&self, t_end: f64, observables: Vec<Observable>) -> Problem {
        let atom = &self.line.atom;
        let on = || Envelope::new(Shape::Square, t_end).expect("square envelope");
        let seq = Sequence::builder()
            .at(0.0, Pulse::new(0, on()))
            .at(0.0, Pulse::new(1, on()))
            .build()
            .expect("sequence");
        let ground: Vec<(LevelId, f64)> = self
            .line
            .labels
            .iter()
            .enumerate()
            .filter(|(_, l)| !l.excited)
            .map(|(k, _)| (k, 1.0))
            .collect();
        let mut p = Problem::new(
            atom.clone(),
            self.fields.clone(),
            seq,
            State::mixture(atom, &ground).expect("ground mixture"),
            observables,
        );
        p.frame = Frame::Rotating {
            cutoff: self.cutoff,
        };
        p
    }

    /// The continuous-wave steady state of the same beams.
    pub fn steady(&self, observables: Vec<Observable>) -> SteadyProblem {
        SteadyProblem {
            atom: self.line.atom.clone(),
            fields: self.fields.clone(),
            cutoff: self.cutoff,
            observables,
        }
    }
}
