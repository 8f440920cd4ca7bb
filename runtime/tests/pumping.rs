//! Optical pumping and dark states from atoms expanded out of hyperfine manifolds
//! (`manifold::Line::expand`): the steady states against their analytic populations, and the
//! time-dependent σ⁺ pumping of the whole ⁸⁷Rb D2 line into its stretched state.

mod common;

use std::f64::consts::TAU;

use fieldbook_runtime::lindblad::check_density;
use fieldbook_runtime::manifold::Line;
use fieldbook_runtime::prelude::*;
use fieldbook_runtime::species::{DLine, Species};
use fieldbook_runtime::zeeman::Hyperfine;

fn transition(atom: &Atom, lower: usize, upper: usize) -> usize {
    atom.transitions()
        .iter()
        .position(|t| t.lower() == lower && t.upper() == upper)
        .expect("transition")
}

/// ⁸⁷Rb D2 (the species table, `notebooks-spec/SPECIES.md`), F = 2 → F' = 3
/// only (the closed cycling manifold), at zero field. σ⁺ light pumps every F = 2 sublevel into the stretched |2, 2⟩, which then
/// cycles on |2, 2⟩ ↔ |3', 3'⟩ as a two-level atom (common practice): in the steady state
/// ρ(3', 3') = (s/2)/(1 + s + 4Δ²/Γ²) with s = 2Ω²/Γ² (Foot, *Atomic Physics*, 2005, ch. 7),
/// ρ(2, 2) the rest, every other sublevel empty. Tolerance 1e-9: a linear solve.
#[test]
fn sigma_plus_pumps_into_the_stretched_state() {
    let line = Species::named("87Rb").unwrap().line(DLine::D2).unwrap();
    let la = line
        .expand(0.0, |two_f| two_f == 4, |two_fp| two_fp == 6)
        .unwrap();
    let (g22, e33) = (
        la.level(false, 4, 4).unwrap(),
        la.level(true, 6, 6).unwrap(),
    );
    let cyc = transition(&la.atom, g22, e33);
    for (rabi, delta) in [(0.5, 0.0), (1.0, 0.7), (2.0, -1.3)] {
        let (rabi, delta) = (rabi * line.gamma, delta * line.gamma);
        let field = Field::new(
            "pump",
            Carrier::Detuning {
                transition: cyc,
                detuning: delta,
            },
            Strength::Rabi {
                transition: cyc,
                rabi,
            },
        )
        .with_polarization(Polarization::sigma_plus());
        let obs: Vec<Observable> = (0..la.atom.n()).map(Observable::Population).collect();
        let sol = steady_state(&SteadyProblem {
            atom: la.atom.clone(),
            fields: vec![field],
            cutoff: f64::INFINITY,
            observables: obs,
        })
        .unwrap();
        let s = 2.0 * rabi * rabi / (line.gamma * line.gamma);
        let pe = (s / 2.0) / (1.0 + s + 4.0 * delta * delta / (line.gamma * line.gamma));
        for (k, p) in sol.values.iter().enumerate() {
            let want = if k == e33 {
                pe
            } else if k == g22 {
                1.0 - pe
            } else {
                0.0
            };
            assert!(
                (p - want).abs() < 1e-9,
                "{}: {p} vs {want}",
                la.labels[k].name
            );
        }
    }
}

/// π light on a J = 1 → J' = 1 line (no nuclear spin, so F = J): ⟨1 0; 1 0|1 0⟩ = 0, so m = 0 is
/// dark and the steady state holds every atom there (common practice; the Clebsch–Gordan zero
/// of Edmonds 1957, eq. 3.5.15 with j1 + j2 + J odd). Tolerance 1e-9.
#[test]
fn pi_light_on_f1_to_f1_leaves_m0_dark() {
    let level = |g_j| Hyperfine {
        two_j: 2,
        two_i: 0,
        a: 0.0,
        b: 0.0,
        g_j,
        g_i: 0.0,
    };
    let line = Line {
        ground: level(1.5),
        excited: level(1.5),
        omega: TAU * 400e12,
        gamma: TAU * 5e6,
    };
    let la = line.expand(0.0, |_| true, |_| true).unwrap();
    let (g0, gp, ep) = (
        la.level(false, 2, 0).unwrap(),
        la.level(false, 2, 2).unwrap(),
        la.level(true, 2, 2).unwrap(),
    );
    assert!(
        la.atom
            .transitions()
            .iter()
            .all(|t| !(t.lower() == g0 && t.dipole()[1].norm() > 0.0)),
        "m = 0 → m' = 0 is forbidden"
    );
    let tr = transition(&la.atom, gp, ep);
    let field = Field::new(
        "probe",
        Carrier::Detuning {
            transition: tr,
            detuning: 0.0,
        },
        Strength::Rabi {
            transition: tr,
            rabi: line.gamma,
        },
    );
    let obs: Vec<Observable> = (0..la.atom.n()).map(Observable::Population).collect();
    let sol = steady_state(&SteadyProblem {
        atom: la.atom.clone(),
        fields: vec![field],
        cutoff: f64::INFINITY,
        observables: obs,
    })
    .unwrap();
    for (k, p) in sol.values.iter().enumerate() {
        let want = if k == g0 { 1.0 } else { 0.0 };
        assert!((p - want).abs() < 1e-9, "{}: {p}", la.labels[k].name);
    }
}

/// The full ⁸⁷Rb D2 line (24 sublevels, `common::rb87_d2_pumping`) under a σ⁺ pump at s = 1 on
/// F = 2 → F' = 3 and a σ⁺ repumper on F = 1 → F' = 2: every atom ends in the closed cycle
/// |2, 2⟩ ↔ |3', 3'⟩, a two-level atom with ρ(3', 3') = (s/2)/(1 + s) = 1/4 on resonance
/// (Foot, *Atomic Physics*, 2005, ch. 7) and ρ(2, 2) = 3/4 (common practice: σ⁺ light cannot
/// leave the stretched pair, and the repumper empties F = 1).
///
/// * The steady-state solver gives exactly that, coherence included, to 1e-12 (a linear solve).
/// * Evolving from the uniform ground mixture for 30 µs (`Auto`: the Liouvillian exponential of
///   the part of ρ the initial state reaches) ends on that steady state, every entry of ρ to
///   1e-10: the slowest relaxation rate of this Liouvillian is 1.22 µs⁻¹ (its eigenvalue
///   nearest zero after the steady state's, from `numpy.linalg.eigvals` of the bench's exported
///   model, runtime/benches/reference/p5_model.json), so the transient left is ~e^{−36.6}
///   ≈ 1e-16, and the exponential's rounding is ~1e-13.
/// * Mid-way through the pumping (2 µs) DOP853 at rtol 1e-10 (the right-hand side on the sparse
///   Hamiltonian) agrees with the exponential to 1e-8 (its global error at that tolerance), and
///   both states keep unit trace (1e-12) and no eigenvalue below −1e-12 (a Lindblad evolution
///   is completely positive and trace preserving: Lindblad, Commun. Math. Phys. 48, 119
///   (1976)). The stretched population at 2 µs is still well below its final value: the
///   pumping takes microseconds, so the long-time comparison above is not trivially met.
#[test]
fn sigma_plus_pumps_the_full_d2_line_into_its_stretched_state() {
    let s = common::rb87_d2_pumping(0.0);
    let n = s.line.atom.n();
    assert_eq!(n, 24);
    let obs = vec![
        Observable::Population(s.stretched),
        Observable::Population(s.cycling),
    ];
    let ss = steady_state(&s.steady(obs.clone())).unwrap();
    let pe = common::steady_rho_ee(s.pump_rabi, 0.0, s.gamma);
    assert!((pe - 0.25).abs() < 1e-12, "s = 1 gives 1/4: {pe}");
    // On resonance the pair's coherence is ρ_eg = −iΩ/(Γ(1 + s)) (the steady optical Bloch
    // equations, Foot 2005 ch. 7, in CONVENTIONS §4's frame, where H_eg = Ω/2 is real).
    let s_par = 2.0 * s.pump_rabi * s.pump_rabi / (s.gamma * s.gamma);
    let eg = C64::new(0.0, -s.pump_rabi / (s.gamma * (1.0 + s_par)));
    let rho_ss = ss.state.to_density();
    for i in 0..n {
        for j in 0..n {
            let (e, g) = (s.cycling, s.stretched);
            let want = match (i, j) {
                _ if (i, j) == (g, g) => C64::new(1.0 - pe, 0.0),
                _ if (i, j) == (e, e) => C64::new(pe, 0.0),
                _ if (i, j) == (e, g) => eg,
                _ if (i, j) == (g, e) => eg.conj(),
                _ => C64::new(0.0, 0.0),
            };
            let got = rho_ss[i * n + j];
            assert!(
                (got - want).norm() < 1e-12,
                "ρ[{i}][{j}] = {got}, want {want}"
            );
        }
    }

    let mut p = s.problem(30e-6, vec![Observable::Norm]);
    p.samples = Samples::Uniform(31);
    let sol = solve(&p).unwrap();
    assert!(
        sol.diagnostics.method.contains("liouvillian-exp"),
        "{:?}",
        sol.diagnostics
    );
    let rho_t = sol.final_state.to_density();
    let worst = rho_t
        .iter()
        .zip(&rho_ss)
        .map(|(a, b)| (a - b).norm())
        .fold(0.0, f64::max);
    let trace_drift = sol.series[0]
        .values
        .iter()
        .map(|t| (t - 1.0).abs())
        .fold(0.0, f64::max);
    println!(
        "D2 σ⁺ pumping: |ρ(30 µs) − ρ_ss| = {worst:.1e} (tol 1e-10), trace drift {trace_drift:.1e}, \
         ρ(2,2) = {:.12}",
        rho_t[s.stretched * (n + 1)].re
    );
    assert!(worst < 1e-10, "{worst:e}");
    assert!(trace_drift < 1e-12, "{trace_drift:e}");

    let mid = |method| {
        let mut p = s.problem(2e-6, obs.clone());
        p.method = method;
        p.tolerance = Tolerance {
            rtol: 1e-10,
            atol: 1e-12,
        };
        solve(&p).unwrap()
    };
    let (exact, rk) = (mid(Method::Auto), mid(Method::DormandPrince853));
    let (a, b) = (exact.final_state.to_density(), rk.final_state.to_density());
    let diff = a
        .iter()
        .zip(&b)
        .map(|(x, y)| (x - y).norm())
        .fold(0.0, f64::max);
    println!(
        "D2 σ⁺ pumping at 2 µs: ρ(2,2) = {:.9}, |ρ_exp − ρ_dop853| = {diff:.1e} (tol 1e-8)",
        a[s.stretched * (n + 1)].re
    );
    assert!(diff < 1e-8, "{diff:e}");
    for (name, rho) in [("exponential", &a), ("dop853", &b)] {
        let r = check_density(n, rho).unwrap();
        assert!(
            (r.trace.re - 1.0).abs() < 1e-12 && r.min_eigenvalue > -1e-12,
            "{name}: {r:?}"
        );
    }
    assert!(a[s.stretched * (n + 1)].re < 0.7, "still pumping at 2 µs");
}

/// A small π admixture ε in the pump (polarisation ∝ e₊₁ + ε e₀) lets atoms leave the closed
/// cycle, so the steady population of the cycling pair |2, 2⟩ + |3', 3'⟩ falls below 1. The
/// model is symmetric under rotations about the field (z): turning by π flips the sign of the
/// π component relative to σ⁺ and leaves every population unchanged, so the populations are
/// even in ε and the loss is aε² + O(ε⁴) (second-order perturbation theory of the steady state,
/// common practice). Checked: the loss vanishes at ε = 0 (to 1e-12), is positive, and grows by
/// 4 within 1e-3 when ε doubles from 10⁻³: the O(ε⁴) term shifts the ratio by O(ε²) ~ 1e-6
/// times an O(1) factor, and the loss, ~1e-6, is resolved by the linear solve to ~1e-13.
/// No rate-equation value for a is asserted: the π light drives |2, 2⟩ → |3', 2'⟩ from a state
/// the σ⁺ light saturates, which simple rate equations do not capture.
#[test]
fn pi_admixture_lowers_the_stretched_population_quadratically() {
    let loss = |eps: f64| {
        let s = common::rb87_d2_pumping(eps);
        let v = steady_state(&s.steady(vec![Observable::PopulationSum(vec![
            s.stretched,
            s.cycling,
        ])]))
        .unwrap()
        .values[0];
        1.0 - v
    };
    let (l0, l1, l2) = (loss(0.0), loss(1e-3), loss(2e-3));
    println!(
        "π admixture: cycling-pair loss {l0:.1e} (ε = 0), {l1:.4e} (1e-3), {l2:.4e} (2e-3), ratio {:.6}",
        l2 / l1
    );
    assert!(l0.abs() < 1e-12, "closed cycle without π light: {l0:e}");
    assert!(l1 > 1e-9, "π light opens the cycle: {l1:e}");
    assert!((l2 / l1 - 4.0).abs() < 1e-3, "ratio {}", l2 / l1);
}
