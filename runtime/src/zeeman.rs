//! Hyperfine structure in a magnetic field: the magnetic-dipole and electric-quadrupole
//! hyperfine Hamiltonian plus the Zeeman Hamiltonian of a fine-structure level J with nuclear
//! spin I, diagonalised in the uncoupled basis |m_J, m_I⟩ for any field, and the Breit–Rabi
//! closed form for J = 1/2.
//!
//! Energies are angular frequencies (rad/s, E/ħ) like every level energy of the runtime; fields
//! in tesla. Angular momenta are doubled (2J, 2I, 2m) as in [`crate::angular`].
//!
//! The Hamiltonian (D. A. Steck, *Rubidium 87 D Line Data*, rev. 2.2, 2021, eqs. 16 and 30):
//!
//! ```text
//! H/ħ = A I·J + B [3(I·J)² + (3/2)(I·J) − I(I+1)J(J+1)] / [2I(2I−1)J(2J−1)]
//!       + (μ_B/ħ)(g_J J_z + g_I I_z) B_z
//! ```
//!
//! with the quadrupole term present only for I ≥ 1 and J ≥ 1.

use nalgebra::DMatrix;

use crate::error::Error;
use crate::field::HBAR;

/// Bohr magneton μ_B (J/T), CODATA 2018.
pub const BOHR_MAGNETON: f64 = 9.274_010_078_3e-24;

/// The electron spin g-factor |g_S| (CODATA 2018).
pub const G_SPIN: f64 = 2.002_319_304_362_56;

/// The Landé factor of a fine-structure level from doubled L, S and J (LS coupling, g_L = 1,
/// g_S = [`G_SPIN`]): g_J = g_L [J(J+1) − S(S+1) + L(L+1)] / 2J(J+1) + g_S [J(J+1) + S(S+1) −
/// L(L+1)] / 2J(J+1) (Steck, *Rubidium 87 D Line Data*, rev. 2.2, 2021, eq. 21, with the
/// nuclear-mass correction to g_L neglected). `None` for J = 0 (no moment) or when J is not in
/// |L − S| … L + S. Measured g_J differ in the fourth digit (QED and relativistic corrections);
/// give the measured value where precision matters.
pub fn lande_g_j(two_l: i32, two_s: i32, two_j: i32) -> Option<f64> {
    if two_j <= 0
        || two_l < 0
        || two_s < 0
        || two_j < (two_l - two_s).abs()
        || two_j > two_l + two_s
        || (two_l + two_s + two_j) % 2 != 0
    {
        return None;
    }
    let x = |t: i32| {
        let v = f64::from(t) / 2.0;
        v * (v + 1.0)
    };
    let (jj, ss, ll) = (x(two_j), x(two_s), x(two_l));
    Some(((jj - ss + ll) + G_SPIN * (jj + ss - ll)) / (2.0 * jj))
}

/// The constants of one hyperfine manifold J ⊗ I.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Hyperfine {
    /// 2J.
    pub two_j: i32,
    /// 2I.
    pub two_i: i32,
    /// Magnetic-dipole constant A (rad/s).
    pub a: f64,
    /// Electric-quadrupole constant B (rad/s); ignored unless I ≥ 1 and J ≥ 1.
    pub b: f64,
    /// Electronic g-factor g_J.
    pub g_j: f64,
    /// Nuclear g-factor g_I (in units of μ_B, Steck's sign convention).
    pub g_i: f64,
}

/// One eigenstate of the hyperfine + Zeeman Hamiltonian.
#[derive(Clone, Debug, PartialEq)]
pub struct Sublevel {
    /// Energy E/ħ (rad/s), relative to the hyperfine centroid.
    pub energy: f64,
    /// 2(m_J + m_I), conserved along the field.
    pub two_m: i32,
    /// 2F of the zero-field hyperfine level the state connects to.
    pub two_f: i32,
    /// Amplitudes on the uncoupled basis, ordered as [`Hyperfine::basis`].
    pub amplitudes: Vec<f64>,
}

/// How the magnetic field enters the sublevels.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub enum ZeemanModel {
    /// The hyperfine + Zeeman Hamiltonian diagonalised at the field: right at any field.
    #[default]
    Full,
    /// The weak-field limit: the zero-field states |F, m⟩ with energies E_F + g_F m μ_B B (no
    /// mixing of F levels); for comparison with the linear approximation people often use.
    Linear,
}

impl Hyperfine {
    /// The uncoupled basis (2m_J, 2m_I), m_J outer, both descending.
    pub fn basis(&self) -> Vec<(i32, i32)> {
        let mut v = Vec::new();
        for mj in (-self.two_j..=self.two_j).rev().step_by(2) {
            for mi in (-self.two_i..=self.two_i).rev().step_by(2) {
                v.push((mj, mi));
            }
        }
        v
    }

    /// H/ħ (rad/s) in the uncoupled basis at field `b_field` (T) along the quantisation axis.
    pub fn hamiltonian(&self, b_field: f64) -> DMatrix<f64> {
        let basis = self.basis();
        let n = basis.len();
        let (j, i) = (f64::from(self.two_j) / 2.0, f64::from(self.two_i) / 2.0);
        // I·J in the uncoupled basis: I_z J_z + (I₊J₋ + I₋J₊)/2.
        let mut ij = DMatrix::<f64>::zeros(n, n);
        let ladder = |jj: f64, m: f64| (jj * (jj + 1.0) - m * (m + 1.0)).max(0.0).sqrt();
        for (c, &(mj, mi)) in basis.iter().enumerate() {
            let (mjf, mif) = (f64::from(mj) / 2.0, f64::from(mi) / 2.0);
            ij[(c, c)] += mjf * mif;
            // I₊J₋ |mJ, mI⟩ = c₊(I, mI) c₋(J, mJ) |mJ − 1, mI + 1⟩.
            if let Some(r) = basis.iter().position(|&x| x == (mj - 2, mi + 2)) {
                ij[(r, c)] += 0.5 * ladder(i, mif) * ladder(j, mjf - 1.0);
            }
            if let Some(r) = basis.iter().position(|&x| x == (mj + 2, mi - 2)) {
                ij[(r, c)] += 0.5 * ladder(i, mif - 1.0) * ladder(j, mjf);
            }
        }
        let mut h = &ij * self.a;
        if self.two_i >= 2 && self.two_j >= 2 && self.b != 0.0 {
            let id = DMatrix::<f64>::identity(n, n);
            let q = (&ij * &ij) * 3.0 + &ij * 1.5 - id * (i * (i + 1.0) * j * (j + 1.0));
            h += q * (self.b / (2.0 * i * (2.0 * i - 1.0) * j * (2.0 * j - 1.0)));
        }
        let mu = BOHR_MAGNETON / HBAR * b_field;
        for (c, &(mj, mi)) in basis.iter().enumerate() {
            h[(c, c)] += mu * (self.g_j * f64::from(mj) + self.g_i * f64::from(mi)) / 2.0;
        }
        h
    }

    /// Refuses negative J or I and non-finite constants or field.
    fn check(&self, b_field: f64) -> Result<(), Error> {
        if self.two_j < 0
            || self.two_i < 0
            || !b_field.is_finite()
            || !self.a.is_finite()
            || !self.b.is_finite()
        {
            return Err(Error::OutOfRange {
                what: "the hyperfine manifold".into(),
                value: b_field,
                hint: "J, I ≥ 0 and finite A, B and field",
            });
        }
        Ok(())
    }

    /// Every sublevel at field `b_field` (T), sorted by energy.
    pub fn sublevels(&self, b_field: f64) -> Result<Vec<Sublevel>, Error> {
        self.check(b_field)?;
        let basis = self.basis();
        let h = self.hamiltonian(b_field);
        // H conserves m = m_J + m_I: diagonalise each m block on its own, so that every
        // eigenstate has a definite m even where levels of different m cross.
        let mut out = Vec::with_capacity(basis.len());
        for two_m in (-(self.two_j + self.two_i)..=self.two_j + self.two_i).step_by(2) {
            let idx: Vec<usize> = (0..basis.len())
                .filter(|&k| basis[k].0 + basis[k].1 == two_m)
                .collect();
            let block = DMatrix::from_fn(idx.len(), idx.len(), |r, c| h[(idx[r], idx[c])]);
            let eig = block.symmetric_eigen();
            for k in 0..idx.len() {
                let mut amplitudes = vec![0.0; basis.len()];
                for (r, &row) in idx.iter().enumerate() {
                    amplitudes[row] = eig.eigenvectors[(r, k)];
                }
                out.push(Sublevel {
                    energy: eig.eigenvalues[k],
                    two_m,
                    two_f: 0,
                    amplitudes,
                });
            }
        }
        out.sort_by(|a, b| a.energy.total_cmp(&b.energy));
        self.label_zero_field(&mut out);
        Ok(out)
    }

    /// Sets each sublevel's zero-field 2F. Within one m block levels never cross as the field
    /// grows (they share every symmetry), so the k-th lowest sublevel of a block belongs to the
    /// k-th lowest zero-field level F ≥ |m| ([`Hyperfine::zero_field_energy`]).
    fn label_zero_field(&self, levels: &mut [Sublevel]) {
        let energy = |two_f: i32| self.zero_field_energy(two_f).unwrap_or(0.0);
        for two_m in (-(self.two_j + self.two_i)..=self.two_j + self.two_i).step_by(2) {
            let mut fs: Vec<i32> = self
                .two_fs()
                .into_iter()
                .filter(|f| two_m.abs() <= *f)
                .collect();
            fs.sort_by(|a, b| energy(*a).total_cmp(&energy(*b)));
            let mut idx: Vec<usize> = (0..levels.len())
                .filter(|&k| levels[k].two_m == two_m)
                .collect();
            idx.sort_by(|&a, &b| levels[a].energy.total_cmp(&levels[b].energy));
            for (k, f) in idx.into_iter().zip(fs) {
                levels[k].two_f = f;
            }
        }
    }

    /// The weak-field Landé factor of hyperfine level 2F:
    /// g_F = g_J [F(F+1) − I(I+1) + J(J+1)] / 2F(F+1) + g_I [F(F+1) + I(I+1) − J(J+1)] / 2F(F+1)
    /// (Steck, *Rubidium 87 D Line Data*, rev. 2.2, 2021, eq. 23; g_I in units of μ_B as here).
    /// `None` when F is not a level of the manifold; 0 for F = 0.
    pub fn g_f(&self, two_f: i32) -> Option<f64> {
        if !self.two_fs().contains(&two_f) {
            return None;
        }
        if two_f == 0 {
            return Some(0.0);
        }
        let x = |t: i32| {
            let v = f64::from(t) / 2.0;
            v * (v + 1.0)
        };
        let (ff, ii, jj) = (x(two_f), x(self.two_i), x(self.two_j));
        Some((self.g_j * (ff - ii + jj) + self.g_i * (ff + ii - jj)) / (2.0 * ff))
    }

    /// The sublevels in the given [`ZeemanModel`], sorted by energy.
    pub fn sublevels_with(&self, model: ZeemanModel, b_field: f64) -> Result<Vec<Sublevel>, Error> {
        match model {
            ZeemanModel::Full => self.sublevels(b_field),
            ZeemanModel::Linear => self.sublevels_linear(b_field),
        }
    }

    /// The weak-field sublevels |F, m⟩ = Σ ⟨J m_J I m_I|F m⟩ |m_J, m_I⟩ with energies
    /// E_F + g_F m μ_B B/ħ ([`ZeemanModel::Linear`]), sorted by energy.
    pub fn sublevels_linear(&self, b_field: f64) -> Result<Vec<Sublevel>, Error> {
        // The full model's checks of the constants, without its diagonalisation.
        self.check(0.0)?;
        if !b_field.is_finite() {
            return Err(Error::NonFinite {
                what: "the magnetic field".into(),
            });
        }
        let basis = self.basis();
        let mu = BOHR_MAGNETON / HBAR * b_field;
        let mut out = Vec::with_capacity(basis.len());
        for two_f in self.two_fs() {
            let (e0, g) = (
                self.zero_field_energy(two_f).unwrap_or(0.0),
                self.g_f(two_f).unwrap_or(0.0),
            );
            for two_m in (-two_f..=two_f).step_by(2) {
                let amplitudes = basis
                    .iter()
                    .map(|&(mj, mi)| {
                        if mj + mi == two_m {
                            crate::angular::clebsch_gordan(
                                self.two_j, mj, self.two_i, mi, two_f, two_m,
                            )
                        } else {
                            0.0
                        }
                    })
                    .collect();
                out.push(Sublevel {
                    energy: e0 + g * mu * f64::from(two_m) / 2.0,
                    two_m,
                    two_f,
                    amplitudes,
                });
            }
        }
        out.sort_by(|a, b| a.energy.total_cmp(&b.energy));
        Ok(out)
    }

    /// The 2F of every hyperfine level, |J − I| ≤ F ≤ J + I, ascending.
    pub fn two_fs(&self) -> Vec<i32> {
        ((self.two_j - self.two_i).abs()..=self.two_j + self.two_i)
            .step_by(2)
            .collect()
    }

    /// The zero-field energy E/ħ (rad/s) of hyperfine level 2F relative to the centroid:
    /// E_F = A K/2 + B [3K(K+1)/2 − 2I(I+1)J(J+1)] / [4I(2I−1)J(2J−1)],
    /// K = F(F+1) − I(I+1) − J(J+1) (Steck, *Rubidium 87 D Line Data*, rev. 2.2, 2021, eq. 16;
    /// the B term only for I ≥ 1 and J ≥ 1). `None` when F is not a level of this manifold.
    pub fn zero_field_energy(&self, two_f: i32) -> Option<f64> {
        if !self.two_fs().contains(&two_f) {
            return None;
        }
        let (i, j) = (f64::from(self.two_i) / 2.0, f64::from(self.two_j) / 2.0);
        let f = f64::from(two_f) / 2.0;
        let k = f * (f + 1.0) - i * (i + 1.0) - j * (j + 1.0);
        let quad = if self.two_i >= 2 && self.two_j >= 2 {
            self.b * (1.5 * k * (k + 1.0) - 2.0 * i * (i + 1.0) * j * (j + 1.0))
                / (4.0 * i * (2.0 * i - 1.0) * j * (2.0 * j - 1.0))
        } else {
            0.0
        };
        Some(self.a * k / 2.0 + quad)
    }

    /// The Breit–Rabi energies (rad/s) of the F = I ± 1/2 sublevel with 2m_F = `two_m` for
    /// J = 1/2 (Breit & Rabi, Phys. Rev. 38, 2082 (1931); Steck eq. 31):
    /// E = −ΔE/(2(2I+1)) + g_I μ_B m B ± (ΔE/2) √(1 + 4mx/(2I+1) + x²), x = (g_J − g_I)μ_B B/ΔE,
    /// with ΔE = A(I + 1/2). `upper` picks F = I + 1/2. For the stretched state m = ±(I + 1/2)
    /// the root is taken with its sign, 1 ± x, so the formula stays exact through the crossing.
    pub fn breit_rabi(&self, b_field: f64, two_m: i32, upper: bool) -> Option<f64> {
        if self.two_j != 1 {
            return None;
        }
        let i = f64::from(self.two_i) / 2.0;
        let m = f64::from(two_m) / 2.0;
        let de = self.a * (i + 0.5);
        let mu = BOHR_MAGNETON / HBAR * b_field;
        let x = (self.g_j - self.g_i) * mu / de;
        let base = -de / (2.0 * (2.0 * i + 1.0)) + self.g_i * mu * m;
        if (m.abs() - (i + 0.5)).abs() < 1e-12 {
            let s = m.signum();
            return Some(base + de / 2.0 * (1.0 + s * x));
        }
        let root = (1.0 + 4.0 * m * x / (2.0 * i + 1.0) + x * x).sqrt();
        Some(
            base + if upper {
                de / 2.0 * root
            } else {
                -de / 2.0 * root
            },
        )
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::f64::consts::TAU;

    /// ⁸⁷Rb 5²S₁/₂: A = h × 3.417 341 305 452 15 GHz, g_J = 2.002 331 13, g_I = −0.000 995 141 4
    /// (Steck, *Rubidium 87 D Line Data*, rev. 2.2, 2021, tables 3 and 4; recalled from there).
    fn rb87_ground() -> Hyperfine {
        Hyperfine {
            two_j: 1,
            two_i: 3,
            a: TAU * 3.417_341_305_452_15e9,
            b: 0.0,
            g_j: 2.002_331_13,
            g_i: -0.000_995_141_4,
        }
    }

    #[test]
    fn zero_field_splitting_is_a_times_i_plus_half() {
        let s = rb87_ground().sublevels(0.0).unwrap();
        assert_eq!(s.len(), 8);
        let split = s[7].energy - s[0].energy;
        assert!(
            (split / (TAU * 6.834_682_610_904_29e9) - 1.0).abs() < 1e-12,
            "{}",
            split / TAU
        );
    }

    /// The full diagonalisation reproduces Breit–Rabi for J = 1/2 at fields from 0.1 G to 1 T,
    /// through the level crossings (relative 1e-10 of the hyperfine splitting).
    #[test]
    fn diagonalisation_matches_breit_rabi() {
        let h = rb87_ground();
        let de = h.a * 2.0;
        for b in [1e-5, 1e-3, 0.05, 0.2, 1.0] {
            let levels = h.sublevels(b).unwrap();
            for two_m in (-4i32..=4).step_by(2) {
                let mut want: Vec<f64> = [true, false]
                    .iter()
                    .filter(|&&up| up || two_m.abs() < 4)
                    .filter_map(|&up| h.breit_rabi(b, two_m, up))
                    .collect();
                want.sort_by(f64::total_cmp);
                let mut got: Vec<f64> = levels
                    .iter()
                    .filter(|l| l.two_m == two_m)
                    .map(|l| l.energy)
                    .collect();
                got.sort_by(f64::total_cmp);
                assert_eq!(got.len(), want.len(), "B = {b}, 2m = {two_m}");
                for (g, w) in got.iter().zip(&want) {
                    assert!(
                        ((g - w) / de).abs() < 1e-10,
                        "B = {b} T, 2m = {two_m}: {g} vs {w}"
                    );
                }
            }
        }
    }

    /// At weak field the F = 2 sublevels split linearly with g_F ≈ g_J/4 (Landé, neglecting g_I:
    /// g_F = g_J [F(F+1) − I(I+1) + J(J+1)]/(2F(F+1)) = g_J/4 for F = 2), to the size of the
    /// neglected nuclear term and the quadratic shift.
    #[test]
    fn weak_field_is_linear_with_lande_g() {
        let h = rb87_ground();
        let b = 1e-7;
        let levels = h.sublevels(b).unwrap();
        let upper: Vec<&Sublevel> = levels.iter().rev().take(5).collect();
        let slope = (upper.iter().map(|l| l.energy).fold(f64::MIN, f64::max)
            - upper.iter().map(|l| l.energy).fold(f64::MAX, f64::min))
            / (4.0 * BOHR_MAGNETON / HBAR * b);
        assert!((slope - h.g_j / 4.0).abs() < 2e-3, "g_F = {slope}");
    }

    /// The quadrupole term shifts the F levels of a J = 3/2 manifold as Steck's closed form
    /// E_F = A K/2 + B [3K(K+1)/2 − 2I(I+1)J(J+1)] / [4I(2I−1)J(2J−1)], K = F(F+1) − I(I+1) − J(J+1)
    /// (Steck eq. 16), here for ⁸⁷Rb 5²P₃/₂ (A = h × 84.7185 MHz, B = h × 12.4965 MHz).
    #[test]
    fn quadrupole_term_matches_the_closed_form() {
        let h = Hyperfine {
            two_j: 3,
            two_i: 3,
            a: TAU * 84.7185e6,
            b: TAU * 12.4965e6,
            g_j: 1.3362,
            g_i: -0.000_995_141_4,
        };
        let levels = h.sublevels(0.0).unwrap();
        let (i, j) = (1.5f64, 1.5f64);
        for f in [0.0f64, 1.0, 2.0, 3.0] {
            let k = f * (f + 1.0) - i * (i + 1.0) - j * (j + 1.0);
            let e = h.a * k / 2.0
                + h.b * (1.5 * k * (k + 1.0) - 2.0 * i * (i + 1.0) * j * (j + 1.0))
                    / (4.0 * i * (2.0 * i - 1.0) * j * (2.0 * j - 1.0));
            let n = (2.0 * f + 1.0) as usize;
            let hits = levels
                .iter()
                .filter(|l| ((l.energy - e) / h.a).abs() < 1e-9)
                .count();
            assert_eq!(hits, n, "F = {f}: E = {e}");
        }
    }

    /// The Landé formula against the measured g_J of the species table (Steck's and Tiecke's
    /// compilations, `notebooks-spec/SPECIES.md`): S₁/₂ ≈ g_S, P₁/₂ ≈ 2/3, P₃/₂ ≈ 4/3, within
    /// 3e-3 — the size of the QED and relativistic corrections the formula leaves out.
    #[test]
    fn lande_factors_match_measured_values() {
        for s in crate::species::SPECIES {
            let pairs = [
                (lande_g_j(0, 1, 1), s.ground.g_j),
                (lande_g_j(2, 1, 1), s.p12.g_j),
                (lande_g_j(2, 1, 3), s.p32.g_j),
            ];
            for (calc, measured) in pairs {
                let calc = calc.unwrap();
                assert!(
                    (calc - measured).abs() < 3e-3,
                    "{}: {calc} vs {measured}",
                    s.name
                );
            }
        }
        assert_eq!(
            lande_g_j(2, 1, 5),
            None,
            "J = 5/2 is not in L ⊗ S = 1 ⊗ 1/2"
        );
        assert_eq!(lande_g_j(2, 2, 0), None, "J = 0 has no moment");
        // ³P₁ (L = S = J = 1): g = 3/2 with g_S = 2 (common practice); with the real g_S, 1.50116.
        assert!((lande_g_j(2, 2, 2).unwrap() - (1.0 + G_SPIN) / 2.0).abs() < 1e-15);
    }

    /// The closed-form zero-field energies are the eigenvalues at B = 0, quadrupole included
    /// (⁸⁷Rb 5²P₃/₂ of the species table).
    #[test]
    fn zero_field_energies_match_the_diagonalisation() {
        let rb = crate::species::Species::named("87Rb").unwrap();
        let p32 = rb.line(crate::species::DLine::D2).unwrap().excited;
        let levels = p32.sublevels(0.0).unwrap();
        for two_f in p32.two_fs() {
            let e = p32.zero_field_energy(two_f).unwrap();
            let n = levels
                .iter()
                .filter(|l| (l.energy - e).abs() < 1e-9 * p32.a.abs())
                .count();
            assert_eq!(n as i32, two_f + 1, "2F = {two_f}: E = {e}");
        }
        assert_eq!(p32.two_fs(), vec![0, 2, 4, 6]);
        assert_eq!(p32.zero_field_energy(8), None);
    }

    /// The weak-field g_F is the slope of the full diagonalisation at small fields, for every
    /// hyperfine level of every manifold of the species table (Steck's eq. 23 against his
    /// Hamiltonian; the slope over ±10 nT, where the quadratic term is below 1e-6 of it).
    #[test]
    fn g_f_is_the_weak_field_slope() {
        for s in crate::species::SPECIES {
            for line in [crate::species::DLine::D1, crate::species::DLine::D2] {
                let l = s.line(line).unwrap();
                for h in [l.ground, l.excited] {
                    let b = 1e-8;
                    let (up, down) = (h.sublevels(b).unwrap(), h.sublevels(-b).unwrap());
                    for two_f in h.two_fs() {
                        let g = h.g_f(two_f).unwrap();
                        let two_m = two_f;
                        let find = |v: &[Sublevel]| {
                            v.iter()
                                .find(|x| x.two_f == two_f && x.two_m == two_m)
                                .unwrap()
                                .energy
                        };
                        let slope = (find(&up) - find(&down))
                            / (2.0 * b * BOHR_MAGNETON / HBAR * f64::from(two_m).max(1.0) / 2.0);
                        let want = if two_f == 0 { 0.0 } else { g };
                        assert!(
                            (slope - want).abs() < 1e-5 * g.abs().max(1.0),
                            "{} 2F = {two_f}: slope {slope} vs g_F {g}",
                            s.name
                        );
                    }
                }
            }
        }
        assert_eq!(rb87_ground().g_f(6), None);
    }

    /// The linear model holds the zero-field states |F, m⟩ (normalised, definite m) at energies
    /// E_F + g_F m μ_B B, and agrees with the full one to second order in the field.
    #[test]
    fn linear_model_is_the_weak_field_limit() {
        let h = rb87_ground();
        let b = 1e-6;
        let lin = h.sublevels_linear(b).unwrap();
        let full = h.sublevels(b).unwrap();
        assert_eq!(lin.len(), 8);
        for l in &lin {
            let norm: f64 = l.amplitudes.iter().map(|a| a * a).sum();
            assert!((norm - 1.0).abs() < 1e-14);
            let want = h.zero_field_energy(l.two_f).unwrap()
                + h.g_f(l.two_f).unwrap() * BOHR_MAGNETON / HBAR * b * f64::from(l.two_m) / 2.0;
            assert!((l.energy - want).abs() < 1e-9 * want.abs());
            let f = full
                .iter()
                .find(|x| x.two_f == l.two_f && x.two_m == l.two_m)
                .unwrap();
            // The second-order shift (g_J μ_B B)²/(2ΔE_hf) ≈ 2π × 0.3 Hz here.
            assert!(
                (l.energy - f.energy).abs() < TAU * 1.0,
                "{}",
                l.energy - f.energy
            );
        }
        assert_eq!(
            h.sublevels_with(ZeemanModel::Linear, b).unwrap(),
            h.sublevels_linear(b).unwrap()
        );
    }
}
