//! Open-system checks against published results: free radiative decay, the two-level steady state
//! with its power-broadened line, the scipy steady-state fixture, and relaxation of a long
//! Lindblad evolution to that steady state.

mod common;

use common::*;
use fieldbook_runtime::prelude::*;

/// ρ_ee(t) = e^{−Γt} from e with no field (Weisskopf & Wigner, Z. Phys. 63, 54 (1930)), by Auto
/// (the Liouvillian exponential on the constant segment) and by DOP853, and the scattering-rate
/// observable equal to Γ ρ_ee. Tolerances: 1e-12 for the exponential (rounding), 1e-10 for
/// DOP853 at rtol 1e-12 over 8 decay times; the rate relative to Γ likewise.
#[test]
fn free_decay_is_exponential() {
    let gamma = TAU * 6.07e6;
    let (atom, _, e, _) = decaying_two_level(TAU * 384e12, gamma);
    let t_end = 8.0 / gamma;
    let times = uniform(t_end, 81);
    for (method, tol) in [(Method::Auto, 1e-12), (Method::DormandPrince853, 1e-10)] {
        let mut p = Problem::new(
            atom.clone(),
            vec![],
            Sequence::builder().wait(t_end).build().unwrap(),
            State::level(&atom, e).unwrap(),
            vec![Observable::Population(e), Observable::ScatteringRate],
        );
        p.samples = Samples::Times(times.clone());
        p.method = method;
        p.tolerance = tight();
        let sol = solve(&p).unwrap();
        let (mut err_p, mut err_r) = (0.0f64, 0.0f64);
        for (k, &t) in times.iter().enumerate() {
            let pe = sol.series[0].values[k];
            let rate = sol.series[1].values[k];
            err_p = err_p.max((pe - (-gamma * t).exp()).abs());
            err_r = err_r.max((rate - gamma * pe).abs() / gamma);
        }
        println!(
            "free decay {} ({}): |Δρ_ee| = {err_p:.1e}, |ΔR|/Γ = {err_r:.1e} (tol {tol:.0e})",
            method.name(),
            sol.diagnostics.method
        );
        assert!(
            err_p < tol && err_r < tol,
            "{}: {err_p:e} {err_r:e}",
            method.name()
        );
    }
}

/// Steady ρ_ee and ρ_eg. The transition is at 2π × 1 GHz, not optical: at optical frequencies
/// the detuning loses ~0.25 rad/s to rounding (see properties.rs), which would show at 1e-12.
fn steady(omega: f64, delta: f64, gamma: f64) -> (f64, C64) {
    let (atom, g, e, tr) = decaying_two_level(TAU * 1e9, gamma);
    let sol = steady_state(&SteadyProblem {
        atom,
        fields: vec![drive(tr, delta, omega)],
        cutoff: f64::INFINITY,
        observables: vec![Observable::Population(e)],
    })
    .unwrap();
    (sol.values[0], sol.state.rho(e, g))
}

/// ρ_ee = (s/2)/(1 + s + 4Δ²/Γ²) with s = 2Ω²/Γ² (Foot, Atomic Physics, OUP 2005, ch. 7; Metcalf
/// & van der Straten, Laser Cooling and Trapping, 1999, ch. 2) over a grid of Ω and Δ of both
/// signs; tolerance 1e-12 (a direct linear solve).
#[test]
fn two_level_steady_state_formula() {
    let gamma = TAU * 6e6;
    let mut worst = 0.0f64;
    for o in [0.1, 0.7, 2.0, 9.0] {
        for d in [-12.0, -1.0, -0.3, 0.0, 0.5, 4.0] {
            let (omega, delta) = (o * gamma, d * gamma);
            let (pe, _) = steady(omega, delta, gamma);
            worst = worst.max((pe - steady_rho_ee(omega, delta, gamma)).abs());
        }
    }
    println!("steady state ρ_ee: worst error {worst:.1e} (tol 1e-12)");
    assert!(worst < 1e-12);
}

/// The steady-state line ρ_ee(Δ) is a Lorentzian of FWHM Γ√(1 + s) (power broadening; Foot 2005
/// ch. 7). The half-maximum detuning is found by bisection on the solver's ρ_ee to 1e-12
/// relative, so the tolerance is 1e-9 relative.
#[test]
fn power_broadened_linewidth() {
    let gamma = TAU * 6e6;
    for o in [0.3, 1.0, 4.0] {
        let omega = o * gamma;
        let s = 2.0 * omega * omega / (gamma * gamma);
        let peak = steady(omega, 0.0, gamma).0;
        let (mut lo, mut hi) = (0.0, 10.0 * gamma * (1.0 + s).sqrt());
        for _ in 0..80 {
            let mid = 0.5 * (lo + hi);
            if steady(omega, mid, gamma).0 > 0.5 * peak {
                lo = mid;
            } else {
                hi = mid;
            }
        }
        let fwhm = lo + hi; // 2 × the half-width
        let expect = gamma * (1.0 + s).sqrt();
        let rel = (fwhm - expect).abs() / expect;
        println!(
            "power broadening Ω/Γ = {o}: FWHM/Γ = {:.9}, √(1+s) = {:.9}, rel. error {rel:.1e} (tol 1e-9)",
            fwhm / gamma,
            expect / gamma
        );
        assert!(rel < 1e-9);
    }
}

/// ρ_ee and ρ_eg against runtime/tests/fixtures/steady_two_level.json (scipy null space of the
/// Liouvillian; same H = [[0, Ω/2], [Ω/2, −Δ]] and ρ_eg = ⟨e|ρ|g⟩). Tolerance 1e-12 absolute:
/// the fixture agrees with the closed form to 2.3e-16.
#[test]
fn steady_state_fixture() {
    let fx = fixture("steady_two_level.json");
    let gamma = num(&fx["gamma"]);
    let mut worst = 0.0f64;
    for case in fx["cases"].as_array().unwrap() {
        let (omega, delta) = (num(&case["omega"]), num(&case["delta"]));
        let (pe, eg) = steady(omega, delta, gamma);
        let want = nums(&case["rho_eg"]);
        let err = (pe - num(&case["rho_ee"]))
            .abs()
            .max((eg - C64::new(want[0], want[1])).norm());
        assert!(err < 1e-12, "Ω = {omega:e}, Δ = {delta:e}: error {err:e}");
        worst = worst.max(err);
    }
    println!("steady fixture: worst error {worst:.1e} (tol 1e-12)");
}

/// A long Lindblad evolution from g under a constant drive relaxes to the steady state: by DOP853
/// (Runge–Kutta on ρ) and by Auto (Liouvillian exponential) over 60/Γ. The slowest relaxation
/// rate of the optical Bloch equations is ≥ Γ/2, so the transient left is ≲ e^{−30} ≈ 1e-13;
/// tolerance 1e-9 covers the RK error at rtol 1e-11.
#[test]
fn long_evolution_relaxes_to_the_steady_state() {
    let gamma = TAU * 6e6;
    for (o, d) in [(1.0, 0.0), (2.5, -1.5), (0.4, 0.7)] {
        let (omega, delta) = (o * gamma, d * gamma);
        let (atom, g, e, tr) = decaying_two_level(TAU * 1e9, gamma);
        let (pe_ss, eg_ss) = steady(omega, delta, gamma);
        let t_end = 60.0 / gamma;
        for method in [Method::DormandPrince853, Method::Auto] {
            let mut p = Problem::new(
                atom.clone(),
                vec![drive(tr, delta, omega)],
                Sequence::builder()
                    .then(Pulse::new(0, square(t_end)))
                    .build()
                    .unwrap(),
                State::level(&atom, g).unwrap(),
                vec![Observable::Population(e), Observable::Coherence(e, g)],
            );
            p.method = method;
            p.tolerance = Tolerance {
                rtol: 1e-11,
                atol: 1e-13,
            };
            let v = solve(&p).unwrap().final_values();
            let err = (v[0] - pe_ss)
                .abs()
                .max((C64::new(v[1], v[2]) - eg_ss).norm());
            println!(
                "relaxation Ω/Γ = {o}, Δ/Γ = {d}, {}: |ρ(60/Γ) − ρ_ss| = {err:.1e} (tol 1e-9)",
                method.name()
            );
            assert!(err < 1e-9, "{}: {err:e}", method.name());
        }
    }
}
