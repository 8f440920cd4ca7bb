//! Ensemble averages over a distribution of one parameter, checked against an outside reference:
//! a Doppler-broadened two-level line against scipy's Voigt profile.

mod common;

use common::*;
use fieldbook_runtime::prelude::*;
use fieldbook_runtime::sweep::doppler_sigma;

/// The saturated two-level steady state is an exact Lorentzian in Δ (HWHM Γ√(1+s)/2, Foot,
/// Atomic Physics, OUP 2005, ch. 7); averaged over the Gaussian Doppler detunings of a thermal
/// cloud it becomes a Voigt profile (Olivero & Longbothum, J. Quant. Spectrosc. Radiat. Transfer
/// 17, 233 (1977)). Reference values: scipy.special.voigt_profile, in `doppler_voigt.json`.
#[test]
fn doppler_average_is_a_voigt_profile() {
    let fx = fixture("doppler_voigt.json");
    let sigma = doppler_sigma(
        num(&fx["wavenumber"]),
        num(&fx["temperature"]),
        num(&fx["mass"]),
    );
    // The runtime's rms Doppler detuning k·sqrt(k_B T/m) against the fixture's numpy value.
    assert!(
        (sigma / num(&fx["sigma"]) - 1.0).abs() < 1e-12,
        "{sigma} vs {}",
        num(&fx["sigma"])
    );
    let (gamma, omega) = (num(&fx["gamma"]), num(&fx["omega"]));
    let (atom, _, e, tr) = decaying_two_level(TAU * 384.23e12, gamma);
    let problem = SteadyProblem {
        atom,
        fields: vec![drive(tr, 0.0, omega)],
        cutoff: f64::INFINITY,
        observables: vec![Observable::Population(e)],
    };
    let sp = SteadyPrepared::new(&problem).unwrap();
    let opts = SweepOptions::default();
    let line = |ensemble: &Ensemble, delta: f64| {
        ensemble
            .average(&opts, |v| {
                let mut p = sp.clone();
                p.retune(0, delta - v);
                p.values()
            })
            .unwrap()[0]
    };
    // Gauss–Hermite quadrature converges geometrically here (the Lorentzian's poles sit γ ≈ 1.2σ
    // off the real axis); 80 nodes reach ~1e-9 of the peak.
    let gh = Ensemble::gauss_hermite(0.0, sigma, 80).unwrap();
    // Seeded Monte Carlo: statistical error ≈ std(ρ_ee)/√N ≲ 0.1/√N; 5 standard errors allowed.
    let n_mc = 20_000;
    let mc = Ensemble::monte_carlo_normal(0.0, sigma, n_mc, 7);
    let mc_tol = 5.0 * 0.1 / (n_mc as f64).sqrt();
    let (mut worst_gh, mut worst_mc) = (0.0f64, 0.0f64);
    for (delta, want) in nums(&fx["deltas"]).into_iter().zip(nums(&fx["rho_ee"])) {
        worst_gh = worst_gh.max((line(&gh, delta) - want).abs());
        worst_mc = worst_mc.max((line(&mc, delta) - want).abs());
    }
    println!(
        "Doppler/Voigt: Gauss–Hermite worst {worst_gh:.2e}, Monte Carlo worst {worst_mc:.2e} (tol {mc_tol:.1e})"
    );
    assert!(worst_gh < 1e-8, "Gauss–Hermite: {worst_gh:e}");
    assert!(worst_mc < mc_tol, "Monte Carlo: {worst_mc:e}");
}

/// Intensity noise on a resonant π pulse: with the Rabi frequency scaled by (1 + x), x ~ N(0, ε²),
/// P_e = ⟨sin²(π(1 + x)/2)⟩ = ½(1 + e^{−π²ε²/2}) (the characteristic function of a Gaussian,
/// e.g. Abramowitz & Stegun, Handbook of Mathematical Functions, 1964, 7.4.6).
#[test]
fn intensity_noise_average_of_a_pi_pulse() {
    let omega = TAU * 50e3;
    let (atom, g, e, tr) = two_level(TAU * 6.8e9);
    let opts = SweepOptions::default();
    for eps in [0.02, 0.1, 0.3] {
        let ensemble = Ensemble::gauss_hermite(0.0, eps, 40).unwrap();
        let avg = ensemble
            .average(&opts, |x| {
                let seq = Sequence::builder()
                    .then(Pulse::new(0, square(std::f64::consts::PI / omega)).scale(1.0 + x))
                    .build()
                    .unwrap();
                let p = Problem::new(
                    atom.clone(),
                    vec![drive(tr, 0.0, omega)],
                    seq,
                    State::level(&atom, g).unwrap(),
                    vec![Observable::Population(e)],
                );
                solve(&p).map(|s| s.final_values())
            })
            .unwrap()[0];
        let want = 0.5 * (1.0 + (-(std::f64::consts::PI * eps).powi(2) / 2.0).exp());
        assert!((avg - want).abs() < 1e-10, "ε = {eps}: {avg} vs {want}");
    }
}
