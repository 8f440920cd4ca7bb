//! Matrix exponentials against scipy (runtime/tests/fixtures/expm.json): the Hermitian
//! eigen-propagator for the unitary cases and the Liouvillian propagator `propagate_constant`
//! (which takes any square matrix) for every case, column by column.

mod common;

use common::*;
use fieldbook_runtime::linalg::HermitianEigen;
use fieldbook_runtime::lindblad::propagate_constant;
use fieldbook_runtime::prelude::*;
use nalgebra::DMatrix;

/// Largest |ours − scipy| relative to max|scipy| (the README's advice: ~1e-12 relative).
fn rel_diff(ours: &[C64], want: &[C64]) -> f64 {
    let scale = want.iter().fold(0.0f64, |m, z| m.max(z.norm()));
    ours.iter()
        .zip(want)
        .map(|(a, b)| (a - b).norm())
        .fold(0.0, f64::max)
        / scale
}

/// exp(−iHt) from `HermitianEigen::propagator` for the five unitary cases (n = 2, 3, 4, 8, and
/// ‖Ht‖₁ ≈ 44). Tolerance 1e-12 relative: scipy and the eigen route agree to 1.2e-14 (README).
#[test]
fn unitary_cases_by_eigen_propagator() {
    let fx = fixture("expm.json");
    for case in fx["cases"].as_array().unwrap() {
        if case["kind"] != "unitary" {
            continue;
        }
        let (n, h) = cmat(&case["h"]);
        let t = num(&case["t"]);
        let (_, want) = cmat(&case["output"]);
        let u = HermitianEigen::new(n, &h).unwrap().propagator(t);
        let d = rel_diff(&u, &want);
        println!(
            "expm {} (eigen): rel. diff {d:.1e} (tol 1e-12)",
            case["label"]
        );
        assert!(d < 1e-12, "{}: {d:e}", case["label"]);
    }
}

/// exp(A) for all twelve cases (unitary, general non-normal, ‖A‖₁ = 50 with entries ~1e8,
/// nilpotent, Jordan block) via `propagate_constant(A, e_j, &[1.0])`, which returns column j.
/// It accepts any square matrix, not only n²×n² Liouvillians. Tolerance 1e-12 relative, also
/// for ‖A‖₁ = 50 too (entries ~1e8), where the squarings could have amplified rounding.
#[test]
fn all_cases_by_propagate_constant() {
    let fx = fixture("expm.json");
    for case in fx["cases"].as_array().unwrap() {
        let (n, a) = cmat(&case["input"]);
        let (_, want) = cmat(&case["output"]);
        let l = DMatrix::from_fn(n, n, |i, j| a[i * n + j]);
        let mut ours = vec![C64::new(0.0, 0.0); n * n];
        for j in 0..n {
            let mut e = vec![C64::new(0.0, 0.0); n];
            e[j] = C64::new(1.0, 0.0);
            let col = propagate_constant(&l, &e, &[1.0]).unwrap();
            for i in 0..n {
                ours[i * n + j] = col[0][i];
            }
        }
        let tol = 1e-12;
        let d = rel_diff(&ours, &want);
        println!(
            "expm {} (propagate_constant): rel. diff {d:.1e} (tol {tol:.0e})",
            case["label"]
        );
        assert!(d < tol, "{}: {d:e}", case["label"]);
    }
}
