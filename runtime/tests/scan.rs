//! Detuning scans (`Prepared::scan`, `SteadyPrepared::scan`): the stacked integration of a chunk
//! of points must agree with solving each point alone, hold each point to its tolerance, and not
//! depend on the number of threads.

mod common;

use common::*;
use fieldbook_runtime::prelude::*;

/// The shared STIRAP Λ model (counter-intuitive order), observing P_r and the g–r Bloch vector,
/// with the Stokes field retuned across the two-photon resonance.
fn stirap() -> (Prepared, Vec<f64>) {
    let mut p = stirap_lambda(TAU * 5e6, 1e-6, 5.5e-6, 4.5e-6, 10e-6);
    p.observables.push(Observable::Bloch { lower: 0, upper: 1 });
    p.tolerance = Tolerance {
        rtol: 1e-10,
        atol: 1e-12,
    };
    let shifts = (0..70)
        .map(|i| TAU * (-2e6 + 4e6 * i as f64 / 69.0))
        .collect();
    (Prepared::new(&p).unwrap(), shifts)
}

#[test]
fn stacked_scan_matches_point_by_point_solves() {
    let (base, shifts) = stirap();
    let table = base.scan(1, &shifts).unwrap();
    assert_eq!((table.len(), table.width()), (shifts.len(), 4));
    let mut worst = 0.0f64;
    for (i, &s) in shifts.iter().enumerate() {
        let mut q = base.clone();
        q.retune(1, s);
        let alone = q.run_final().unwrap();
        for (a, b) in table.row(i).iter().zip(&alone) {
            worst = worst.max((a - b).abs());
        }
    }
    // Both are held to rtol 1e-10 per point; their difference is a few times that.
    assert!(worst < 1e-8, "stacked vs alone: {worst:e}");
}

#[test]
fn scans_do_not_depend_on_the_thread_count() {
    let (base, shifts) = stirap();
    let run = |threads| {
        rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .unwrap()
            .install(|| base.scan(1, &shifts).unwrap())
    };
    let one = run(1);
    let two = run(2);
    let bits = |t: &ScanTable| t.values().iter().map(|v| v.to_bits()).collect::<Vec<_>>();
    assert_eq!(bits(&one), bits(&two));
}

/// Two-level steady state ρ_ee = (s/2)/(1 + s + 4Δ²/Γ²), s = 2Ω²/Γ² (Foot, Atomic Physics, OUP
/// 2005, ch. 7), across a scan, and equal to the one-point solver.
#[test]
fn steady_scan_matches_the_formula_and_single_solves() {
    let (gamma, omega) = (TAU * 6e6, TAU * 4e6);
    let (atom, _, e, tr) = decaying_two_level(TAU * 6.8e9, gamma);
    let field = drive(tr, 0.0, omega);
    let problem = SteadyProblem {
        atom,
        fields: vec![field],
        cutoff: f64::INFINITY,
        observables: vec![Observable::Population(e)],
    };
    let sp = SteadyPrepared::new(&problem).unwrap();
    let deltas: Vec<f64> = (0..1500)
        .map(|i| TAU * (-50e6 + 100e6 * i as f64 / 1499.0))
        .collect();
    let table = sp.scan(0, &deltas).unwrap();
    for (i, &d) in deltas.iter().enumerate() {
        let want = steady_rho_ee(omega, d, gamma);
        assert!(
            (table.row(i)[0] - want).abs() < 1e-13,
            "Δ = {d}: {} vs {want}",
            table.row(i)[0]
        );
    }
    let mut one = sp.clone();
    one.retune(0, deltas[700]);
    assert_eq!(
        one.values().unwrap()[0].to_bits(),
        table.row(700)[0].to_bits()
    );
}

#[test]
fn scanning_an_unknown_field_is_an_error() {
    let (base, shifts) = stirap();
    assert!(matches!(
        base.scan(7, &shifts),
        Err(Error::UnknownIndex { index: 7, .. })
    ));
}
