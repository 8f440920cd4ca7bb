//! Structural properties on seeded random models — unitarity and time reversal of pure-state
//! evolution, trace/hermiticity/positivity of density matrices, thread-count independence of
//! sweeps — and the errors (never panics) that bad inputs must produce.

mod common;

use std::f64::consts::PI;

use common::*;
use fieldbook_runtime::lindblad::check_density;
use fieldbook_runtime::prelude::*;

/// A random pulse of a random shape; `reversed` gives its mirror image in time.
#[derive(Clone, Debug)]
struct RandomPulse {
    field: usize,
    start: f64,
    duration: f64,
    shape: u8,
    param: f64,
    scale: f64,
    phase: f64,
}

impl RandomPulse {
    fn draw(rng: &mut Rng, fields: usize, window: f64) -> Self {
        let duration = rng.range(0.1, 0.5) * window;
        Self {
            field: rng.index(fields),
            start: rng.range(0.0, window - duration),
            duration,
            shape: rng.index(5) as u8,
            param: rng.range(0.1, 1.0),
            scale: rng.range(0.3, 1.5),
            phase: rng.range(-PI, PI),
        }
    }
    fn envelope(&self, reversed: bool) -> Envelope {
        let d = self.duration;
        let shape = match self.shape {
            0 => Shape::Square,
            1 => Shape::Gaussian {
                sigma: 0.2 * d * self.param + 0.05 * d,
            },
            2 => Shape::SinSquared,
            3 => Shape::Blackman,
            // The only asymmetric shape: its mirror image swaps the end values.
            _ if reversed => Shape::LinearRamp {
                from: self.param,
                to: 1.0 - 0.5 * self.param,
            },
            _ => Shape::LinearRamp {
                from: 1.0 - 0.5 * self.param,
                to: self.param,
            },
        };
        Envelope::new(shape, d).unwrap()
    }
}

/// A random 4-level ladder g–e–r–s with transitions of Δm = 0, +1, −1 driven by π, σ⁺, σ⁻ light:
/// each field drives its own transition only (the others see at most counter-rotating terms, which
/// the rotating frame drops), so H is a chain with static couplings.
struct Ladder {
    atom: Atom,
    detunings: [f64; 3],
    rabis: [f64; 3],
    phases: [f64; 3],
    pulses: Vec<RandomPulse>,
    window: f64,
}

impl Ladder {
    fn draw(rng: &mut Rng) -> Self {
        let mut b = Atom::builder();
        let g = b.level("g", 0.0);
        let e = b.level("e", TAU * 3.1e9);
        let r = b.level("r", TAU * 7.4e9);
        let s = b.level("s", TAU * 12.9e9);
        b.transition(g, e);
        b.transition_with_dipole(e, r, sigma_plus_dipole());
        b.transition_with_dipole(r, s, sigma_minus_dipole());
        let window = 3e-6;
        let mut f = || rng.range(-1.0, 1.0);
        let detunings = [f(), f(), f()].map(|x| TAU * 2e6 * x);
        let rabis = [f(), f(), f()].map(|x| TAU * 1e6 * (1.2 + x));
        let phases = [f(), f(), f()].map(|x| PI * x);
        let pulses = (0..6).map(|_| RandomPulse::draw(rng, 3, window)).collect();
        Self {
            atom: b.build().unwrap(),
            detunings,
            rabis,
            phases,
            pulses,
            window,
        }
    }

    /// The problem, or with `mirror` its mirror image with H → −H: pulses reversed in time,
    /// detunings negated and π added to every coupling's phase, so that U_mirror = U†.
    fn problem(&self, initial: State, mirror: bool) -> Problem {
        let pols = [
            Polarization::pi(),
            Polarization::sigma_plus(),
            Polarization::sigma_minus(),
        ];
        let sign = if mirror { -1.0 } else { 1.0 };
        let fields = (0..3)
            .map(|k| {
                Field::new(
                    format!("f{k}"),
                    Carrier::Detuning {
                        transition: k,
                        detuning: sign * self.detunings[k],
                    },
                    Strength::Rabi {
                        transition: k,
                        rabi: self.rabis[k],
                    },
                )
                .with_polarization(pols[k])
                .with_phase(self.phases[k] + if mirror { PI } else { 0.0 })
            })
            .collect();
        let mut seq = Sequence::builder();
        for p in &self.pulses {
            let start = if mirror {
                self.window - p.start - p.duration
            } else {
                p.start
            };
            seq.at(
                start,
                Pulse::new(p.field, p.envelope(mirror))
                    .scale(p.scale)
                    .phase(p.phase),
            );
        }
        // Both directions last exactly one window.
        seq.wait(self.window);
        Problem::new(
            self.atom.clone(),
            fields,
            seq.build().unwrap(),
            initial,
            vec![Observable::Norm],
        )
    }
}

fn final_amplitudes(p: &Problem) -> Vec<C64> {
    let sol = solve(p).unwrap();
    assert_eq!(
        sol.frame.with_fate(Fate::TimeDependent).count(),
        0,
        "polarisations must isolate the transitions: {:?}",
        sol.frame
    );
    match sol.final_state {
        State::Pure(c) => c,
        State::Mixed(_) => panic!("pure state expected"),
    }
}

/// The propagator of random shaped-pulse sequences is unitary: its columns (evolutions of the
/// basis states) are orthonormal, |U†U − I| < 1e-9 for DOP853 and Magnus4 at rtol 1e-11 (the
/// schemes are not norm-preserving by construction; their local error is ~rtol per step).
#[test]
fn propagators_are_unitary() {
    let mut rng = Rng::new(0x5eed_0001);
    let mut worst = 0.0f64;
    for _ in 0..4 {
        let model = Ladder::draw(&mut rng);
        for method in [Method::DormandPrince853, Method::Magnus4] {
            let cols: Vec<Vec<C64>> = (0..4)
                .map(|k| {
                    let mut p = model.problem(State::level(&model.atom, k).unwrap(), false);
                    p.method = method;
                    p.tolerance = Tolerance {
                        rtol: 1e-11,
                        atol: 1e-13,
                    };
                    final_amplitudes(&p)
                })
                .collect();
            for i in 0..4 {
                for j in 0..4 {
                    let dot: C64 = cols[i]
                        .iter()
                        .zip(&cols[j])
                        .map(|(a, b)| a.conj() * b)
                        .sum();
                    let want = if i == j { 1.0 } else { 0.0 };
                    worst = worst.max((dot - want).norm());
                }
            }
        }
    }
    println!("unitarity: worst |U†U − I| = {worst:.1e} (tol 1e-9)");
    assert!(worst < 1e-9);
}

/// Running a sequence and then its mirror image under −H returns any state to itself
/// (U(T)† U(T) = 1): |ψ_back − ψ₀| < 1e-8 at rtol 1e-11 (two solves' errors add).
#[test]
fn mirror_sequence_reverses_time() {
    let mut rng = Rng::new(0x5eed_0002);
    let mut worst = 0.0f64;
    for _ in 0..4 {
        let model = Ladder::draw(&mut rng);
        let amps: Vec<(LevelId, C64)> = (0..4)
            .map(|k| (k, C64::new(rng.range(-1.0, 1.0), rng.range(-1.0, 1.0))))
            .collect();
        let start = State::superposition(&model.atom, &amps).unwrap();
        let State::Pure(c0) = start.clone() else {
            unreachable!()
        };
        for method in [Method::Auto, Method::DormandPrince853, Method::Magnus4] {
            let tol = Tolerance {
                rtol: 1e-11,
                atol: 1e-13,
            };
            let mut fwd = model.problem(start.clone(), false);
            fwd.method = method;
            fwd.tolerance = tol;
            let c1 = final_amplitudes(&fwd);
            // The evolution must do something, or the check would be empty.
            let moved: f64 = c1.iter().zip(&c0).map(|(a, b)| (a - b).norm()).sum();
            assert!(moved > 0.1, "the random sequence barely acts ({moved})");
            let mut back = model.problem(State::Pure(c1), true);
            back.method = method;
            back.tolerance = tol;
            let c2 = final_amplitudes(&back);
            let err = c2
                .iter()
                .zip(&c0)
                .map(|(a, b)| (a - b).norm())
                .fold(0.0, f64::max);
            worst = worst.max(err);
            assert!(err < 1e-8, "{}: |ψ_back − ψ₀| = {err:e}", method.name());
        }
    }
    println!("time reversal: worst |ψ_back − ψ₀| = {worst:.1e} (tol 1e-8)");
}

/// Along random open three-level models (decays, dephasing, shaped drives, mixed starts) every
/// recorded ρ(t) keeps Tr ρ = 1, ρ = ρ† and ρ ≥ 0 (`lindblad::check_density`). Tolerances 1e-9
/// at rtol 1e-10: a Runge–Kutta step on ρ preserves the trace and hermiticity to rounding (the
/// Lindblad right-hand side is traceless and Hermitian-preserving), positivity only to its error.
#[test]
fn density_matrices_stay_physical() {
    let mut rng = Rng::new(0x5eed_0003);
    let (mut tr_err, mut herm, mut min_eig) = (0.0f64, 0.0f64, f64::INFINITY);
    for _ in 0..6 {
        let mut b = Atom::builder();
        let g = b.level("g", 0.0);
        let m = b.level("m", TAU * 2.0e9);
        let e = b.level("e", TAU * 9.0e9);
        let ge = b.transition(g, e);
        let me = b.transition_with_dipole(m, e, sigma_plus_dipole());
        let gamma = TAU * rng.range(0.2e6, 3e6);
        let branch = rng.range(0.1, 0.9);
        b.decay(e, g, gamma * branch);
        b.decay(e, m, gamma * (1.0 - branch));
        b.decay(m, g, TAU * rng.range(0.0, 0.3e6));
        b.dephasing(m, TAU * rng.range(0.0, 0.5e6));
        let atom = b.build().unwrap();
        let t_end = 4e-6;
        let fields = vec![
            drive(ge, TAU * rng.range(-2e6, 2e6), TAU * rng.range(0.5e6, 3e6)),
            Field::new(
                "c",
                Carrier::Detuning {
                    transition: me,
                    detuning: TAU * rng.range(-2e6, 2e6),
                },
                Strength::Rabi {
                    transition: me,
                    rabi: TAU * rng.range(0.5e6, 3e6),
                },
            )
            .with_polarization(Polarization::sigma_plus()),
        ];
        let seq = Sequence::builder()
            .at(
                0.0,
                Pulse::new(
                    0,
                    Envelope::new(Shape::Gaussian { sigma: 0.8e-6 }, t_end).unwrap(),
                ),
            )
            .at(
                0.5e-6,
                Pulse::new(1, Envelope::new(Shape::SinSquared, 2.5e-6).unwrap()),
            )
            .build()
            .unwrap();
        let w = [rng.unit(), rng.unit(), rng.unit()];
        let initial = State::mixture(&atom, &[(g, w[0]), (m, w[1]), (e, w[2])]).unwrap();
        let levels = [g, m, e];
        let mut p = Problem::new(
            atom,
            fields,
            seq,
            initial,
            levels
                .iter()
                .flat_map(|&i| levels.iter().map(move |&j| Observable::Coherence(i, j)))
                .collect(),
        );
        p.samples = Samples::Uniform(41);
        p.method = Method::Auto;
        p.tolerance = Tolerance {
            rtol: 1e-10,
            atol: 1e-12,
        };
        let sol = solve(&p).unwrap();
        let flat = flatten(&sol);
        for k in 0..sol.times.len() {
            let rho: Vec<C64> = (0..9)
                .map(|q| C64::new(flat[k * 18 + 2 * q], flat[k * 18 + 2 * q + 1]))
                .collect();
            let rep = check_density(3, &rho).unwrap();
            tr_err = tr_err.max((rep.trace - 1.0).norm());
            herm = herm.max(rep.hermiticity);
            min_eig = min_eig.min(rep.min_eigenvalue);
        }
    }
    println!(
        "density checks: |Tr ρ − 1| ≤ {tr_err:.1e}, hermiticity ≤ {herm:.1e}, min eigenvalue {min_eig:.1e} (tol 1e-9)"
    );
    assert!(tr_err < 1e-9 && herm < 1e-9 && min_eig > -1e-9);
}

/// `sweep::run_grid` over solve calls gives bit-identical results on 1 and 2 threads.
#[test]
fn sweeps_are_bit_identical_across_thread_counts() {
    let grid = Grid::new(vec![
        Axis::linspace("detuning", -TAU * 3e6, TAU * 3e6, 13).unwrap(),
        Axis::linspace("rabi", TAU * 0.5e6, TAU * 2e6, 5).unwrap(),
    ])
    .unwrap();
    let (atom, g, e, tr) = two_level(TAU * 1e9);
    let point = |x: &[f64]| -> Result<Vec<f64>, Error> {
        let env = Envelope::new(Shape::Gaussian { sigma: 0.3e-6 }, 1.5e-6)?;
        let seq = Sequence::builder().then(Pulse::new(0, env)).build()?;
        let mut p = Problem::new(
            atom.clone(),
            vec![drive(tr, x[0], x[1])],
            seq,
            State::level(&atom, g)?,
            vec![Observable::Population(e), Observable::Coherence(e, g)],
        );
        p.samples = Samples::Uniform(5);
        Ok(flatten(&solve(&p)?))
    };
    let run = |threads| {
        run_grid(
            &grid,
            &SweepOptions {
                threads: Some(threads),
                ..SweepOptions::default()
            },
            point,
        )
        .unwrap()
    };
    let (one, two) = (run(1), run(2));
    let bits = |v: &[Vec<f64>]| -> Vec<u64> { v.iter().flatten().map(|x| x.to_bits()).collect() };
    assert_eq!(one.len(), grid.len());
    assert_eq!(bits(&one), bits(&two));
}

// ---------------------------------------------------------------------------------------------
// Errors, never panics.

fn simple(delta: f64, rabi: f64, env: Envelope) -> Problem {
    let (atom, g, e, tr) = two_level(TAU * 1e9);
    Problem::new(
        atom.clone(),
        vec![drive(tr, delta, rabi)],
        Sequence::builder()
            .then(Pulse::new(0, env))
            .build()
            .unwrap(),
        State::level(&atom, g).unwrap(),
        vec![Observable::Population(e)],
    )
}

#[test]
fn nan_parameters_are_errors() {
    let sq = square(1e-6);
    let r = solve(&simple(f64::NAN, TAU * 1e6, sq.clone()));
    assert!(
        matches!(r, Err(Error::NonFinite { .. })),
        "NaN detuning: {r:?}"
    );
    let r = solve(&simple(0.0, f64::NAN, sq.clone()));
    assert!(matches!(r, Err(Error::NonFinite { .. })), "NaN Rabi: {r:?}");
    let mut p = simple(0.0, TAU * 1e6, sq.clone());
    p.fields[0] = p.fields[0].clone().with_phase(f64::NAN);
    assert!(matches!(solve(&p), Err(Error::NonFinite { .. })));
    let mut p = simple(0.0, TAU * 1e6, sq);
    p.tolerance.rtol = f64::NAN;
    assert!(matches!(solve(&p), Err(Error::OutOfRange { .. })));
    assert!(Envelope::new(Shape::Gaussian { sigma: f64::NAN }, 1e-6).is_err());
    assert!(Envelope::new(Shape::Square, f64::NAN).is_err());
    let mut b = Atom::builder();
    let g = b.level("g", 0.0);
    let e = b.level("e", 1e9);
    b.decay(e, g, f64::NAN);
    assert!(matches!(b.build(), Err(Error::NonFinite { .. })));
}

/// 1 s in the exact frame at 1 GHz would need ~4e10 steps: refused up front.
#[test]
fn exact_frame_too_costly_is_refused() {
    let mut p = simple(0.0, TAU * 1e3, square(1.0));
    p.frame = Frame::exact();
    let r = solve(&p);
    assert!(
        matches!(r, Err(Error::ExactFrameTooCostly { steps, .. }) if steps > 1e10),
        "{r:?}"
    );
}

#[test]
fn steady_state_without_decay_is_an_error() {
    let (atom, _, e, tr) = two_level(TAU * 1e9);
    let r = steady_state(&SteadyProblem {
        atom,
        fields: vec![drive(tr, 0.0, TAU * 1e6)],
        cutoff: f64::INFINITY,
        observables: vec![Observable::Population(e)],
    });
    assert!(matches!(r, Err(Error::Inconsistent { .. })), "{r:?}");
}

#[test]
fn eigen_on_a_shaped_pulse_is_unsuitable() {
    let env = Envelope::new(Shape::Gaussian { sigma: 0.2e-6 }, 1e-6).unwrap();
    let mut p = simple(0.0, TAU * 1e6, env);
    p.method = Method::Eigen;
    let r = solve(&p);
    assert!(matches!(r, Err(Error::MethodUnsuitable { .. })), "{r:?}");
}

#[test]
fn sample_times_out_of_range_are_errors() {
    for times in [
        vec![0.0, 2e-6],
        vec![-1e-9],
        vec![f64::NAN],
        vec![0.5e-6, 0.2e-6],
        vec![],
    ] {
        let mut p = simple(0.0, TAU * 1e6, square(1e-6));
        p.samples = Samples::Times(times.clone());
        let r = solve(&p);
        assert!(
            matches!(r, Err(Error::OutOfRange { .. })),
            "{times:?}: {r:?}"
        );
    }
    let mut p = simple(0.0, TAU * 1e6, square(1e-6));
    p.samples = Samples::Uniform(1);
    assert!(matches!(solve(&p), Err(Error::OutOfRange { .. })));
}

/// Liouvillian exponential requested for a pure state of a closed atom: the method must either
/// solve it (as a density matrix) or refuse it with `MethodUnsuitable`, not fail with an internal
/// length mismatch.
#[test]
fn liouvillian_exp_on_a_pure_closed_problem() {
    // A pure start is lifted to a density matrix and propagated exactly; the Rabi formula holds
    // (Allen & Eberly 1975, ch. 3).
    let mut p = simple(0.3e6, TAU * 1e6, square(1e-6));
    p.method = Method::LiouvillianExp;
    let sol = solve(&p).expect("a pure closed problem is propagated as a density matrix");
    let want = rabi_pe(TAU * 1e6, 0.3e6, 1e-6);
    assert!((sol.final_values()[0] - want).abs() < 1e-12);
    assert!(matches!(sol.final_state, State::Mixed(_)));
}

/// A detuning of 2π × 1.5 MHz on an optical transition (2π × 384 THz) reaches the rotating-frame
/// Hamiltonian intact: H_ee = −Δ to 1e-12 relative. The frame computes ω_field = ω₀ + Δ and then
/// ω_field − ω₀, which, done naively, loses ulp(ω₀) ≈ 0.5 rad/s (3e-8 relative), enough to
/// dephase a 1 s optical Ramsey or clock simulation by a quarter radian.
#[test]
fn detunings_survive_optical_frequencies() {
    let w0 = TAU * 384.230_484_468_5e12;
    let delta = TAU * 1.5e6;
    let (atom, g, e, tr) = two_level(w0);
    let p = Problem::new(
        atom.clone(),
        vec![drive(tr, delta, TAU * 1e6)],
        Sequence::builder()
            .then(Pulse::new(0, square(1e-6)))
            .build()
            .unwrap(),
        State::level(&atom, g).unwrap(),
        vec![],
    );
    let prepared = Prepared::new(&p).unwrap();
    let h_ee = prepared.hamiltonian().diagonal()[e];
    let rel = (h_ee + delta).abs() / delta;
    println!(
        "optical detuning: H_ee = {h_ee:.9e}, −Δ = {:.9e}, relative error {rel:.1e} (tol 1e-12)",
        -delta
    );
    assert!(rel < 1e-12, "H_ee = {h_ee:e} instead of {:e}", -delta);
}

/// A pulse that starts after an idle gap, integrated by DOP853: the step ending exactly at the
/// gap's end must not see the pulse already on (the envelope is closed at both ends), or no step
/// size satisfies the error test and the solve fails with a step underflow.
#[test]
fn dop853_handles_a_pulse_after_an_idle_gap() {
    let (atom, g, e, tr) = two_level(TAU * 1e9);
    for start in [1e-7, 2.5e-7, 3e-7] {
        let mut s = Sequence::builder();
        s.at(start, Pulse::new(0, square(1e-6)));
        let mut p = Problem::new(
            atom.clone(),
            vec![drive(tr, 1e6, TAU * 1e6)],
            s.build().unwrap(),
            State::level(&atom, g).unwrap(),
            vec![Observable::Population(e)],
        );
        p.method = Method::DormandPrince853;
        p.tolerance = Tolerance {
            rtol: 1e-11,
            atol: 1e-13,
        };
        let pe = solve(&p)
            .unwrap_or_else(|e| panic!("pulse at {start:e} s: {e}"))
            .final_values()[0];
        let want = rabi_pe(TAU * 1e6, 1e6, 1e-6);
        assert!(
            (pe - want).abs() < 1e-9,
            "pulse at {start:e} s: {pe} vs {want}"
        );
    }
}

/// Uniform samples whose last time t_end·i/(k−1) rounds one ulp past the end (10 × 1e-6 s with
/// 201 samples does) are all recorded, by every kind of segment: exact, Liouvillian and adaptive.
#[test]
fn uniform_samples_reach_the_end_despite_rounding() {
    let t_end = 10.0 * 1e-6;
    assert!(
        t_end * 200.0 / 200.0 > t_end,
        "the rounding this test is about"
    );
    let (atom, _, e, tr) = decaying_two_level(TAU * 1e14, TAU * 1e5);
    for method in [Method::Auto, Method::DormandPrince54] {
        for open in [false, true] {
            let atom = if open {
                atom.clone()
            } else {
                two_level(TAU * 1e14).0
            };
            let mut b = Sequence::builder();
            b.then(Pulse::new(0, square(t_end)));
            let mut p = Problem::new(
                atom.clone(),
                vec![drive(tr, 0.0, TAU * 1e5)],
                b.build().unwrap(),
                State::level(&atom, 0).unwrap(),
                vec![Observable::Population(e)],
            );
            p.samples = Samples::Uniform(201);
            p.method = method;
            let sol = solve(&p).unwrap();
            assert_eq!(sol.series[0].values.len(), 201, "{method:?}, open: {open}");
            assert_eq!(*sol.times.last().unwrap(), t_end);
            assert_eq!(sol.final_values().len(), 1);
        }
    }
}
