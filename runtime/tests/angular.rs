//! Wigner 3j and 6j symbols and Clebsch–Gordan coefficients against sympy.physics.wigner
//! (fixture `fixtures/wigner.json`, made by `fixtures/make_wigner.py`), their symmetries, and
//! orthogonality relations out to j = 20.

use fieldbook_runtime::angular::{clebsch_gordan, triangle, wigner_3j, wigner_6j};

fn fixture() -> serde_json::Value {
    let text = std::fs::read_to_string(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/tests/fixtures/wigner.json"
    ))
    .unwrap();
    serde_json::from_str(&text).unwrap()
}

fn args(row: &serde_json::Value, n: usize) -> (Vec<i32>, f64) {
    let a: Vec<i32> = (0..n).map(|i| row[i].as_i64().unwrap() as i32).collect();
    (a, row[n].as_f64().unwrap())
}

/// Every allowed 3j symbol with j1 ≤ j2 ≤ j3 ≤ 6 against sympy's exact values, to 2e-15
/// absolute (the symbols are at most 1 in magnitude; the error is the final rounding). Each is
/// also checked under the permutation and sign symmetries (Edmonds 1957, eqs. 3.7.5–3.7.6):
/// an odd permutation or flipping every m multiplies by (−1)^{j1+j2+j3}.
#[test]
fn three_j_matches_sympy_and_its_symmetries() {
    let f = fixture();
    let rows = f["three_j"].as_array().unwrap();
    assert!(rows.len() > 5000);
    let mut worst = 0.0f64;
    for row in rows {
        let (a, want) = args(row, 6);
        let got = wigner_3j(a[0], a[1], a[2], a[3], a[4], a[5]);
        worst = worst.max((got - want).abs());
        let sign = if ((a[0] + a[1] + a[2]) / 2) % 2 == 0 {
            1.0
        } else {
            -1.0
        };
        let cyclic = wigner_3j(a[1], a[2], a[0], a[4], a[5], a[3]);
        let odd = wigner_3j(a[1], a[0], a[2], a[4], a[3], a[5]);
        let flipped = wigner_3j(a[0], a[1], a[2], -a[3], -a[4], -a[5]);
        assert!(
            (cyclic - got).abs() < 1e-15
                && (odd - sign * got).abs() < 1e-15
                && (flipped - sign * got).abs() < 1e-15,
            "{a:?}"
        );
    }
    println!(
        "3j vs sympy: {} symbols, worst |error| {worst:.2e} (tol 2e-15)",
        rows.len()
    );
    assert!(worst < 2e-15);
}

/// Every allowed 6j symbol with all j ≤ 3, and 3000 seeded ones with j ≤ 6, against sympy, to
/// 2e-15 absolute; plus the tetrahedral symmetry of swapping columns (Edmonds eq. 6.2.4).
#[test]
fn six_j_matches_sympy() {
    let f = fixture();
    let rows = f["six_j"].as_array().unwrap();
    let mut worst = 0.0f64;
    for row in rows {
        let (a, want) = args(row, 6);
        let got = wigner_6j(a[0], a[1], a[2], a[3], a[4], a[5]);
        worst = worst.max((got - want).abs());
        let swapped = wigner_6j(a[1], a[0], a[2], a[4], a[3], a[5]);
        assert!((swapped - got).abs() < 1e-15, "{a:?}");
    }
    println!(
        "6j vs sympy: {} symbols, worst |error| {worst:.2e} (tol 2e-15)",
        rows.len()
    );
    assert!(worst < 2e-15);
}

/// Orthogonality of the 3j symbols, Σ_{m1 m2} (2j3+1)(j1 j2 j3; m1 m2 m3)(j1 j2 j3'; m1 m2 m3)
/// = δ_{j3 j3'} (Edmonds eq. 3.7.7), for j1, j2 up to 20 (doubled 40): exact arithmetic keeps it
/// to rounding, 1e-12.
#[test]
fn three_j_orthogonality_to_j_20() {
    let mut worst = 0.0f64;
    for (j1, j2) in [(40i32, 40i32), (39, 21), (40, 17), (30, 30)] {
        for j3 in ((j1 - j2).abs()..=(j1 + j2))
            .step_by(2)
            .filter(|j| j % 4 == 0 || *j > 70)
        {
            for j3b in [j3, (j3 + 2).min(j1 + j2)] {
                let m3 = if j3 % 2 == 0 { 0 } else { 1 };
                if m3 > j3b {
                    continue;
                }
                let mut s = 0.0;
                for m1 in (-j1..=j1).step_by(2) {
                    let m2 = -m1 - m3;
                    if m2.abs() > j2 {
                        continue;
                    }
                    s += f64::from(j3 + 1)
                        * wigner_3j(j1, j2, j3, m1, m2, m3)
                        * wigner_3j(j1, j2, j3b, m1, m2, m3);
                }
                let want = if j3 == j3b { 1.0 } else { 0.0 };
                worst = worst.max((s - want).abs());
            }
        }
    }
    println!("3j orthogonality to j = 20: worst {worst:.2e} (tol 1e-12)");
    assert!(worst < 1e-12);
}

/// Clebsch–Gordan unitarity Σ_{J M} ⟨j1 m1 j2 m2|J M⟩⟨j1 m1' j2 m2'|J M⟩ = δ δ for j1 = 19/2,
/// j2 = 3 (Edmonds eq. 3.5.4), and one closed form: ⟨j1 j1 j2 j2|j1+j2 j1+j2⟩ = 1.
#[test]
fn clebsch_gordan_unitarity() {
    let (j1, j2): (i32, i32) = (19, 6);
    let mut worst = 0.0f64;
    for m1 in (-j1..=j1).step_by(2) {
        for m2 in (-j2..=j2).step_by(2) {
            for m1b in (-j1..=j1).step_by(2) {
                let m2b = m1 + m2 - m1b;
                if m2b.abs() > j2 {
                    continue;
                }
                let mut s = 0.0;
                for jj in ((j1 - j2).abs()..=(j1 + j2)).step_by(2) {
                    let m = m1 + m2;
                    s += clebsch_gordan(j1, m1, j2, m2, jj, m)
                        * clebsch_gordan(j1, m1b, j2, m2b, jj, m);
                }
                let want = if m1 == m1b { 1.0 } else { 0.0 };
                worst = worst.max((s - want).abs());
            }
        }
    }
    assert!(worst < 1e-13, "{worst:e}");
    assert!((clebsch_gordan(19, 19, 6, 6, 25, 25) - 1.0).abs() < 1e-15);
}

/// Orthogonality of the 6j symbols, Σ_x (2x+1)(2y+1) {a b x; c d y}{a b x; c d y'} = δ_{yy'}
/// for y, y' allowed by the triads (a d y), (c b y) (Edmonds eq. 6.2.9), with momenta up to 20.
#[test]
fn six_j_orthogonality_to_j_20() {
    let mut worst = 0.0f64;
    let mut sums = 0;
    for (a, b, c, d) in [(40, 38, 36, 40), (21, 19, 20, 18), (12, 40, 30, 22)] {
        let allowed = |y: i32| triangle(a, d, y) && triangle(c, b, y);
        for y in (0..=80).filter(|&y| allowed(y)) {
            for y2 in [y, y + 2].into_iter().filter(|&y2| allowed(y2)) {
                let s: f64 = (0..=80)
                    .map(|x| {
                        f64::from((x + 1) * (y + 1))
                            * wigner_6j(a, b, x, c, d, y)
                            * wigner_6j(a, b, x, c, d, y2)
                    })
                    .sum();
                let want = if y == y2 { 1.0 } else { 0.0 };
                worst = worst.max((s - want).abs());
                sums += 1;
            }
        }
    }
    println!("6j orthogonality to j = 20: {sums} sums, worst {worst:.2e} (tol 1e-12)");
    assert!(sums > 50);
    assert!(worst < 1e-12);
}
