//! Angular-momentum coupling coefficients: Wigner 3j and 6j symbols and Clebsch–Gordan
//! coefficients, exact up to the final rounding to `f64`.
//!
//! Angular momenta are passed **doubled** (`two_j = 2j`, `two_m = 2m`) so that half-integers are
//! exact integers. The Racah sums are evaluated in exact integer arithmetic: every term is put
//! over the common denominator Π (largest factorial)!, the signed integer numerators are summed
//! as big integers, and only the final value — that sum times the square root of a ratio of
//! factorials, kept as prime exponents — is rounded. There is no cancellation error, so the
//! symbols keep full double precision for any j this crate's users meet (tested to j = 20, and
//! usable far beyond: the cost grows only with the number of terms).
//!
//! Formulas: A. R. Edmonds, *Angular Momentum in Quantum Mechanics*, Princeton 1957, eq.
//! (3.7.3) for the 3j symbol (Racah's form) and eq. (6.3.7) for the 6j symbol; the
//! Clebsch–Gordan coefficient ⟨j1 m1 j2 m2|J M⟩ = (−1)^{j1−j2+M} √(2J+1) (j1 j2 J; m1 m2 −M)
//! (Edmonds eq. 3.7.3 with 3.6.10).

/// Smallest prime factor table up to `n`, for factorising factorials.
fn primes_up_to(n: usize) -> Vec<usize> {
    let mut sieve = vec![true; n + 1];
    let mut out = Vec::new();
    for p in 2..=n {
        if sieve[p] {
            out.push(p);
            let mut k = p * p;
            while k <= n {
                sieve[k] = false;
                k += p;
            }
        }
    }
    out
}

/// The exponent of prime `p` in n! (Legendre's formula).
fn legendre(n: usize, p: usize) -> i64 {
    let (mut e, mut q) = (0i64, p);
    while q <= n {
        e += (n / q) as i64;
        q = q.saturating_mul(p);
    }
    e
}

/// A non-negative big integer, little-endian base 2³².
#[derive(Clone, Debug, PartialEq, Eq)]
struct Big(Vec<u32>);

impl Big {
    fn one() -> Self {
        Big(vec![1])
    }

    fn mul_small(&mut self, k: u32) {
        let mut carry = 0u64;
        for limb in &mut self.0 {
            let v = u64::from(*limb) * u64::from(k) + carry;
            *limb = v as u32;
            carry = v >> 32;
        }
        if carry > 0 {
            self.0.push(carry as u32);
        }
    }

    fn add(&mut self, other: &Big) {
        if self.0.len() < other.0.len() {
            self.0.resize(other.0.len(), 0);
        }
        let mut carry = 0u64;
        for i in 0..self.0.len() {
            let v = u64::from(self.0[i]) + u64::from(*other.0.get(i).unwrap_or(&0)) + carry;
            self.0[i] = v as u32;
            carry = v >> 32;
        }
        if carry > 0 {
            self.0.push(carry as u32);
        }
    }

    fn trim(&mut self) {
        while self.0.len() > 1 && self.0.last() == Some(&0) {
            self.0.pop();
        }
    }

    fn cmp(&self, other: &Big) -> std::cmp::Ordering {
        let (mut a, mut b) = (self.clone(), other.clone());
        a.trim();
        b.trim();
        a.0.len()
            .cmp(&b.0.len())
            .then_with(|| a.0.iter().rev().cmp(b.0.iter().rev()))
    }

    /// self − other, for self ≥ other.
    fn sub(&mut self, other: &Big) {
        let mut borrow = 0i64;
        for i in 0..self.0.len() {
            let v = i64::from(self.0[i]) - i64::from(*other.0.get(i).unwrap_or(&0)) - borrow;
            if v < 0 {
                self.0[i] = (v + (1i64 << 32)) as u32;
                borrow = 1;
            } else {
                self.0[i] = v as u32;
                borrow = 0;
            }
        }
        self.trim();
    }

    /// Nearest f64 up to one rounding per limb (relative error ≲ 1e-16 · limbs).
    fn to_f64(&self) -> f64 {
        self.0
            .iter()
            .rev()
            .fold(0.0, |acc, &limb| acc * 4_294_967_296.0 + f64::from(limb))
    }
}

/// Σ_k (−1)^k / Π_i (a_i + s_i k)! over the k where every factorial argument is ≥ 0, for
/// `lo ≤ k ≤ hi`, exactly: returns the signed numerator over the common denominator
/// Π_i (max_k argument_i)! and that denominator's factorial arguments.
fn racah_sum(
    lo: i64,
    hi: i64,
    args: &[(i64, i64)],
    sign_k: bool,
    extra_num: Option<(i64, i64)>,
) -> (bool, Big, Vec<i64>, Option<i64>) {
    // Largest value of each factorial argument over the range.
    let maxes: Vec<i64> = args
        .iter()
        .map(|&(a, s)| (a + s * lo).max(a + s * hi))
        .collect();
    let (mut pos, mut neg) = (Big(vec![0]), Big(vec![0]));
    // A factorial in the numerator, (c + d k)!, is divided by its smallest value over the range.
    let num_min = extra_num.map(|(c, d)| (c + d * lo).min(c + d * hi));
    for k in lo..=hi {
        // term = Π_i max_i!/(x_i)!  ×  (num)!/(num_min)!
        let mut t = Big::one();
        for (i, &(a, s)) in args.iter().enumerate() {
            for f in (a + s * k + 1)..=maxes[i] {
                t.mul_small(f as u32);
            }
        }
        if let (Some((c, d)), Some(m)) = (extra_num, num_min) {
            for f in (m + 1)..=(c + d * k) {
                t.mul_small(f as u32);
            }
        }
        if sign_k && k % 2 != 0 {
            neg.add(&t);
        } else {
            pos.add(&t);
        }
    }
    if pos.cmp(&neg) == std::cmp::Ordering::Less {
        neg.sub(&pos);
        (true, neg, maxes, num_min)
    } else {
        pos.sub(&neg);
        (false, pos, maxes, num_min)
    }
}

/// √(Π num! / Π den!) / Π inv! as a product of prime powers, times `scale`.
fn assemble(scale: f64, sqrt_num: &[i64], sqrt_den: &[i64], inv: &[i64], num: &[i64]) -> f64 {
    let top = sqrt_num
        .iter()
        .chain(sqrt_den)
        .chain(inv)
        .chain(num)
        .copied()
        .max()
        .unwrap_or(0)
        .max(1) as usize;
    let mut v = scale;
    for p in primes_up_to(top) {
        // Exponent of p, doubled so that the square root stays an integer power.
        let e2: i64 = sqrt_num
            .iter()
            .map(|&n| legendre(n as usize, p))
            .sum::<i64>()
            - sqrt_den
                .iter()
                .map(|&n| legendre(n as usize, p))
                .sum::<i64>()
            - 2 * inv.iter().map(|&n| legendre(n as usize, p)).sum::<i64>()
            + 2 * num.iter().map(|&n| legendre(n as usize, p)).sum::<i64>();
        if e2 == 0 {
            continue;
        }
        let pf = p as f64;
        v *= pf.powi((e2 / 2) as i32);
        if e2 % 2 != 0 {
            v *= if e2 > 0 { pf.sqrt() } else { 1.0 / pf.sqrt() };
        }
    }
    v
}

/// Whether three doubled momenta obey the triangle rule with an integer sum.
pub fn triangle(two_a: i32, two_b: i32, two_c: i32) -> bool {
    two_a >= 0
        && two_b >= 0
        && two_c >= 0
        && (two_a + two_b + two_c) % 2 == 0
        && two_c <= two_a + two_b
        && two_c >= (two_a - two_b).abs()
}

/// The Wigner 3j symbol (j1 j2 j3; m1 m2 m3), arguments doubled. Zero whenever a selection
/// rule fails: m1 + m2 + m3 = 0, the triangle rule, |m_i| ≤ j_i with j_i − m_i integer.
pub fn wigner_3j(
    two_j1: i32,
    two_j2: i32,
    two_j3: i32,
    two_m1: i32,
    two_m2: i32,
    two_m3: i32,
) -> f64 {
    let ok_m = |j: i32, m: i32| m.abs() <= j && (j - m) % 2 == 0;
    if two_m1 + two_m2 + two_m3 != 0
        || !triangle(two_j1, two_j2, two_j3)
        || !ok_m(two_j1, two_m1)
        || !ok_m(two_j2, two_m2)
        || !ok_m(two_j3, two_m3)
    {
        return 0.0;
    }
    // Work in plain integers: every combination below is an integer once the selection rules
    // hold.
    let h = |x: i32| i64::from(x / 2);
    let (j1, j2, j3) = (two_j1, two_j2, two_j3);
    let (m1, m2, m3) = (two_m1, two_m2, two_m3);
    let a = [
        h(j3 - j2 + m1), // k + this
        h(j3 - j1 - m2),
        h(j1 + j2 - j3), // this − k
        h(j1 - m1),
        h(j2 + m2),
    ];
    let lo = 0.max(-a[0]).max(-a[1]);
    let hi = a[2].min(a[3]).min(a[4]);
    if lo > hi {
        return 0.0;
    }
    let args = [
        (0, 1),
        (a[0], 1),
        (a[1], 1),
        (a[2], -1),
        (a[3], -1),
        (a[4], -1),
    ];
    let (negative, sum, maxes, _) = racah_sum(lo, hi, &args, true, None);
    let sign_exp = h(j1 - j2 - m3) + i64::from(negative);
    let sign = if sign_exp.rem_euclid(2) == 0 {
        1.0
    } else {
        -1.0
    };
    let sqrt_num = [
        h(j1 + j2 - j3),
        h(j1 - j2 + j3),
        h(-j1 + j2 + j3),
        h(j1 + m1),
        h(j1 - m1),
        h(j2 + m2),
        h(j2 - m2),
        h(j3 + m3),
        h(j3 - m3),
    ];
    let sqrt_den = [h(j1 + j2 + j3) + 1];
    assemble(sign * sum.to_f64(), &sqrt_num, &sqrt_den, &maxes, &[])
}

/// The Clebsch–Gordan coefficient ⟨j1 m1 j2 m2 | J M⟩, arguments doubled (Condon–Shortley
/// phases).
pub fn clebsch_gordan(
    two_j1: i32,
    two_m1: i32,
    two_j2: i32,
    two_m2: i32,
    two_j: i32,
    two_m: i32,
) -> f64 {
    let w = wigner_3j(two_j1, two_j2, two_j, two_m1, two_m2, -two_m);
    if w == 0.0 {
        return 0.0;
    }
    let phase = (two_j1 - two_j2 + two_m) / 2;
    let sign = if phase.rem_euclid(2) == 0 { 1.0 } else { -1.0 };
    sign * f64::from(two_j + 1).sqrt() * w
}

/// The Wigner 6j symbol {j1 j2 j3; j4 j5 j6}, arguments doubled. Zero unless the four triads
/// (j1 j2 j3), (j1 j5 j6), (j4 j2 j6), (j4 j5 j3) obey the triangle rule with integer sums.
pub fn wigner_6j(
    two_j1: i32,
    two_j2: i32,
    two_j3: i32,
    two_j4: i32,
    two_j5: i32,
    two_j6: i32,
) -> f64 {
    let (j1, j2, j3, j4, j5, j6) = (two_j1, two_j2, two_j3, two_j4, two_j5, two_j6);
    let triads = [(j1, j2, j3), (j1, j5, j6), (j4, j2, j6), (j4, j5, j3)];
    if !triads.iter().all(|&(a, b, c)| triangle(a, b, c)) {
        return 0.0;
    }
    let h = |x: i32| i64::from(x / 2);
    let a: Vec<i64> = triads.iter().map(|&(x, y, z)| h(x + y + z)).collect();
    let b = [
        h(j1 + j2 + j4 + j5),
        h(j2 + j3 + j5 + j6),
        h(j3 + j1 + j6 + j4),
    ];
    let lo = *a.iter().max().unwrap_or(&0);
    let hi = *b.iter().min().unwrap_or(&0);
    if lo > hi {
        return 0.0;
    }
    let args = [
        (-a[0], 1),
        (-a[1], 1),
        (-a[2], 1),
        (-a[3], 1),
        (b[0], -1),
        (b[1], -1),
        (b[2], -1),
    ];
    let (negative, sum, maxes, num_min) = racah_sum(lo, hi, &args, true, Some((1, 1)));
    let sign = if negative { -1.0 } else { 1.0 };
    let mut sqrt_num = Vec::new();
    let mut sqrt_den = Vec::new();
    for &(x, y, z) in &triads {
        sqrt_num.extend([h(x + y - z), h(x - y + z), h(-x + y + z)]);
        sqrt_den.push(h(x + y + z) + 1);
    }
    assemble(
        sign * sum.to_f64(),
        &sqrt_num,
        &sqrt_den,
        &maxes,
        &[num_min.unwrap_or(0)],
    )
}

/// The relative strength S_{FF'} = (2F'+1)(2J+1) {J J' 1; F' F I}² of the hyperfine component
/// F → F' of a fine-structure line J → J' with nuclear spin I (arguments doubled). For each F the
/// S_{FF'} sum to 1 over F'. Definition of D. A. Steck's alkali D-line data notes (e.g.
/// *Rubidium 87 D Line Data*, revision 2.2, 2021, eq. 41).
pub fn hyperfine_strength(two_j: i32, two_jp: i32, two_i: i32, two_f: i32, two_fp: i32) -> f64 {
    let w = wigner_6j(two_j, two_jp, 2, two_fp, two_f, two_i);
    f64::from((two_fp + 1) * (two_j + 1)) * w * w
}

/// The dipole matrix element ⟨F m_F| e r_q |F' m_F'⟩ in units of the reduced element
/// ⟨J‖e r‖J'⟩ of the fine-structure line (arguments doubled; q = −1, 0, +1), by the
/// Wigner–Eckart theorem and the J → F decomposition in Steck's convention (*Rubidium 87 D Line
/// Data*, rev. 2.2, 2021, eqs. 35–36):
///
/// ```text
/// ⟨F m_F|e r_q|F' m_F'⟩ = ⟨F‖e r‖F'⟩ (−1)^{F'−1+m_F} √(2F+1) (F' 1 F; m_F' q −m_F)
/// ⟨F‖e r‖F'⟩ = ⟨J‖e r‖J'⟩ (−1)^{F'+J+1+I} √((2F'+1)(2J+1)) {J J' 1; F' F I}
/// ```
///
/// Summed over F, m_F and q, |⟨F m_F|e r_q|F' m_F'⟩|² is (2J+1)/(2J'+1) |⟨J‖e r‖J'⟩|² for every
/// excited sublevel, so that each decays at the line's full rate (tested).
#[allow(clippy::too_many_arguments)]
pub fn hyperfine_dipole(
    two_j: i32,
    two_jp: i32,
    two_i: i32,
    two_f: i32,
    two_mf: i32,
    two_fp: i32,
    two_mfp: i32,
    q: i32,
) -> f64 {
    let sign = |twice: i32| {
        if (twice / 2).rem_euclid(2) == 0 {
            1.0
        } else {
            -1.0
        }
    };
    let three_j = wigner_3j(two_fp, 2, two_f, two_mfp, 2 * q, -two_mf);
    if three_j == 0.0 {
        return 0.0;
    }
    let reduced = sign(two_fp + two_j + 2 + two_i)
        * f64::from((two_fp + 1) * (two_j + 1)).sqrt()
        * wigner_6j(two_j, two_jp, 2, two_fp, two_f, two_i);
    reduced * sign(two_fp - 2 + two_mf) * f64::from(two_f + 1).sqrt() * three_j
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn closed_forms() {
        // (1/2 1/2 1; 1/2 −1/2 0) = 1/√6 and (1 1 0; 0 0 0) = −1/√3 (Edmonds, table 2).
        assert!((wigner_3j(1, 1, 2, 1, -1, 0) - 1.0 / 6f64.sqrt()).abs() < 1e-15);
        assert!((wigner_3j(2, 2, 0, 0, 0, 0) + 1.0 / 3f64.sqrt()).abs() < 1e-15);
        // ⟨1/2 1/2 1/2 −1/2|1 0⟩ = 1/√2, ⟨1/2 1/2 1/2 −1/2|0 0⟩ = 1/√2 (Condon–Shortley).
        assert!((clebsch_gordan(1, 1, 1, -1, 2, 0) - 0.5f64.sqrt()).abs() < 1e-15);
        assert!((clebsch_gordan(1, 1, 1, -1, 0, 0) - 0.5f64.sqrt()).abs() < 1e-15);
        // {a b c; b a 0} = (−1)^{a+b+c}/√((2a+1)(2b+1)) and {a b c; 0 c b} = (−1)^{a+b+c}/√((2b+1)(2c+1))
        // (Edmonds, eq. 6.3.2).
        assert!((wigner_6j(1, 1, 2, 1, 1, 0) - 0.5).abs() < 1e-15);
        assert!((wigner_6j(4, 2, 2, 0, 2, 2) - 1.0 / 3.0).abs() < 1e-15);
        // Selection rules.
        assert_eq!(wigner_3j(2, 2, 2, 2, 2, 0), 0.0);
        assert_eq!(wigner_3j(2, 2, 6, 0, 0, 0), 0.0);
        assert_eq!(wigner_6j(2, 2, 6, 2, 2, 2), 0.0);
    }

    /// Every excited sublevel of the ⁸⁷Rb D2 and ¹³³Cs D1 lines decays at the line's full rate:
    /// Σ_{F m_F q} |⟨F m_F|e r_q|F' m_F'⟩|² = (2J+1)/(2J'+1) in units of |⟨J‖e r‖J'⟩|² (Steck, eq. 40
    /// and the sum rule after it), and the σ⁺ cycling transition |2, 2⟩ ↔ |3', 3'⟩ has
    /// |⟨2 2|e r₋₁|3' 3'⟩|² = 1/2 of |⟨J‖e r‖J'⟩|²: the stretched excited state can only decay
    /// back to |2, 2⟩, so its one element carries the whole (2J+1)/(2J'+1).
    #[test]
    fn every_excited_sublevel_decays_at_the_line_rate() {
        for (two_j, two_jp, two_i) in [(1, 3, 3), (1, 1, 7), (1, 3, 5)] {
            let want = f64::from(two_j + 1) / f64::from(two_jp + 1);
            let fs = |two_jj: i32| ((two_i - two_jj).abs()..=(two_i + two_jj)).step_by(2);
            for two_fp in fs(two_jp) {
                for two_mfp in (-two_fp..=two_fp).step_by(2) {
                    let mut sum = 0.0;
                    for two_f in fs(two_j) {
                        for two_mf in (-two_f..=two_f).step_by(2) {
                            for q in -1..=1 {
                                sum += hyperfine_dipole(
                                    two_j, two_jp, two_i, two_f, two_mf, two_fp, two_mfp, q,
                                )
                                .powi(2);
                            }
                        }
                    }
                    assert!(
                        (sum - want).abs() < 1e-14,
                        "2J' = {two_jp}, 2F' = {two_fp}, 2m' = {two_mfp}: {sum}"
                    );
                }
            }
        }
        // The stretched (cycling) element carries the whole line strength of its sublevel.
        let cycling = hyperfine_dipole(1, 3, 3, 4, 4, 6, 6, -1).powi(2);
        assert!((cycling - 0.5).abs() < 1e-15, "{cycling}");
    }

    /// The ⁸⁷Rb D2 line (J = 1/2 → J' = 3/2, I = 3/2): the relative hyperfine strengths of
    /// Steck, *Rubidium 87 D Line Data* (rev. 2.2, 2021), its table of relative hyperfine
    /// transition strength factors: S₂₃ = 7/10, S₂₂ = 1/4,
    /// S₂₁ = 1/20, S₁₂ = 5/12, S₁₁ = 5/12, S₁₀ = 1/6 (values recalled from that table).
    #[test]
    fn rb87_d2_hyperfine_strengths() {
        let s = |f: i32, fp: i32| hyperfine_strength(1, 3, 3, 2 * f, 2 * fp);
        let table = [
            (2, 3, 0.7),
            (2, 2, 0.25),
            (2, 1, 0.05),
            (1, 2, 5.0 / 12.0),
            (1, 1, 5.0 / 12.0),
            (1, 0, 1.0 / 6.0),
        ];
        for (f, fp, want) in table {
            assert!((s(f, fp) - want).abs() < 1e-15, "S_{f}{fp} = {}", s(f, fp));
        }
        // Forbidden ΔF = 2 component, and the D1 sum rule for ¹³³Cs (I = 7/2).
        assert_eq!(s(2, 0), 0.0);
        for two_f in [6, 8] {
            let sum: f64 = [6, 8]
                .iter()
                .map(|&fp| hyperfine_strength(1, 1, 7, two_f, fp))
                .sum();
            assert!((sum - 1.0).abs() < 1e-14);
        }
    }

    #[test]
    fn big_integers_add_subtract_and_convert() {
        let mut a = Big::one();
        for k in 1..=30u32 {
            a.mul_small(k);
        }
        // 30! = 265252859812191058636308480000000.
        assert!((a.to_f64() / 2.652_528_598_121_910_6e32 - 1.0).abs() < 1e-15);
        let mut b = a.clone();
        b.add(&a);
        b.sub(&a);
        assert_eq!(b.cmp(&a), std::cmp::Ordering::Equal);
    }
}
