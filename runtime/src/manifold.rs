//! An optical line between two hyperfine manifolds, expanded into Zeeman sublevels: an [`Atom`]
//! whose levels are the eigenstates of the hyperfine + Zeeman Hamiltonian at a given field,
//! whose dipoles come from the reduced matrix element by the Wigner–Eckart theorem (transformed
//! into that eigenbasis), and whose spontaneous decay is split over every lower sublevel by the
//! same matrix elements — so optical pumping and dark states follow from the model.
//!
//! Conventions (`notebooks-spec/CONVENTIONS.md` §13): the reduced element ⟨J‖e r‖J'⟩ follows from
//! the line's decay rate, Γ = ω³ (2J+1) |⟨J‖e r‖J'⟩|² / (3π ε₀ ħ c³ (2J'+1)) (Steck, *Rubidium 87 D
//! Line Data*, rev. 2.2, 2021, eq. 38); transitions store ⟨upper|d_q|lower⟩, the element σ⁺ light
//! (q = +1) drives upward.

use crate::angular::wigner_3j;
use crate::atom::Atom;
use crate::error::Error;
use crate::field::{C_LIGHT, EPSILON_0, HBAR};
use crate::linalg::C64;
use crate::zeeman::{Hyperfine, ZeemanModel};

/// An electric-dipole line J → J' between two hyperfine manifolds.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Line {
    /// The lower manifold.
    pub ground: Hyperfine,
    /// The upper manifold.
    pub excited: Hyperfine,
    /// Angular frequency between the two hyperfine centroids (rad/s).
    pub omega: f64,
    /// Decay rate Γ of every excited sublevel (1/s).
    pub gamma: f64,
}

/// What one level of the expanded atom is.
#[derive(Clone, Debug, PartialEq)]
pub struct SublevelLabel {
    /// On the upper manifold.
    pub excited: bool,
    /// 2F of the hyperfine level it connects to at zero field (largest overlap).
    pub two_f: i32,
    /// 2m_F (exact: m is conserved along the field).
    pub two_m: i32,
    /// The level's name in the atom: `g` (lower manifold) or `e` (upper), F, `_m`, m, with
    /// half-integers as fractions: `g2_m-1`, `e3_m3`, `g9/2_m-7/2`.
    pub name: String,
}

/// The largest fraction of an excited sublevel's decay that may lead out of the kept levels and
/// be returned to the kept ones instead. In a field, hyperfine levels of equal m mix: at 0.1 G
/// about 5 × 10⁻⁸ of ⁸⁷Rb's |3', m⟩ decay goes to F = 1 through its F' = 2 admixture, which a
/// model keeping only F = 2 and F' = 3 cannot hold. A larger loss means that a decay channel
/// was dropped, and the expansion is refused.
pub const LEAK_TOLERANCE: f64 = 1e-6;

/// An atom expanded from a [`Line`] with the labels of its levels, in the atom's order.
#[derive(Clone, Debug)]
pub struct LineAtom {
    /// The atom.
    pub atom: Atom,
    /// One label per level.
    pub labels: Vec<SublevelLabel>,
    /// The largest fraction of a kept excited sublevel's decay that led to levels not kept and
    /// was returned to the kept ones (at most [`LEAK_TOLERANCE`]; zero when nothing leaks).
    pub leaked: f64,
}

impl LineAtom {
    /// The index of the level with this 2F and 2m on the given manifold.
    pub fn level(&self, excited: bool, two_f: i32, two_m: i32) -> Option<usize> {
        self.labels
            .iter()
            .position(|l| l.excited == excited && l.two_f == two_f && l.two_m == two_m)
    }
}

/// A doubled angular momentum as written in level names: `2`, `-1`, `3/2`, `-1/2`.
pub fn half_name(twice: i32) -> String {
    if twice % 2 == 0 {
        format!("{}", twice / 2)
    } else {
        format!("{twice}/2")
    }
}

/// The name of a hyperfine level, the prefix of its sublevels' names: `g2`, `e3/2`.
pub fn group_name(excited: bool, two_f: i32) -> String {
    format!("{}{}", if excited { 'e' } else { 'g' }, half_name(two_f))
}

/// ⟨J m_J|e r_q|J' m_J'⟩ / ⟨J‖e r‖J'⟩ (doubled arguments), Steck's Wigner–Eckart form.
fn fine_element(two_j: i32, two_mj: i32, two_jp: i32, two_mjp: i32, q: i32) -> f64 {
    let w = wigner_3j(two_jp, 2, two_j, two_mjp, 2 * q, -two_mj);
    if w == 0.0 {
        return 0.0;
    }
    let e = (two_jp - 2 + two_mj) / 2;
    let sign = if e.rem_euclid(2) == 0 { 1.0 } else { -1.0 };
    sign * f64::from(two_j + 1).sqrt() * w
}

impl Line {
    /// The zero-field angular frequency (rad/s) of the hyperfine transition 2F → 2F' (the
    /// line's centroid frequency plus the two levels' hyperfine shifts); `None` when either is
    /// not a level of its manifold.
    pub fn hyperfine_frequency(&self, two_f: i32, two_fp: i32) -> Option<f64> {
        Some(
            self.omega + self.excited.zero_field_energy(two_fp)?
                - self.ground.zero_field_energy(two_f)?,
        )
    }

    /// |⟨J‖e r‖J'⟩| (C·m) from Γ and ω.
    pub fn reduced_dipole(&self) -> f64 {
        let (j, jp) = (
            f64::from(self.ground.two_j + 1),
            f64::from(self.excited.two_j + 1),
        );
        (self.gamma * 3.0 * std::f64::consts::PI * EPSILON_0 * HBAR * C_LIGHT.powi(3) * jp
            / (self.omega.powi(3) * j))
            .sqrt()
    }

    /// Expand into sublevels at field `b_field` (T), keeping the hyperfine levels whose 2F
    /// `keep_ground` and 2F' `keep_excited` accept. A kept excited sublevel must decay only to
    /// kept ground sublevels (e.g. F' = F + 1 of an alkali D2 line needs only F), up to
    /// [`LEAK_TOLERANCE`] of its rate, which is returned to the kept levels in proportion and
    /// reported in [`LineAtom::leaked`]; otherwise the expansion is refused.
    pub fn expand(
        &self,
        b_field: f64,
        keep_ground: impl Fn(i32) -> bool,
        keep_excited: impl Fn(i32) -> bool,
    ) -> Result<LineAtom, Error> {
        self.expand_with(ZeemanModel::Full, b_field, keep_ground, keep_excited)
    }

    /// [`Line::expand`] with the sublevels of the given [`ZeemanModel`].
    pub fn expand_with(
        &self,
        model: ZeemanModel,
        b_field: f64,
        keep_ground: impl Fn(i32) -> bool,
        keep_excited: impl Fn(i32) -> bool,
    ) -> Result<LineAtom, Error> {
        if !(self.omega > 0.0
            && self.gamma > 0.0
            && self.omega.is_finite()
            && self.gamma.is_finite())
        {
            return Err(Error::OutOfRange {
                what: "the line's frequency and decay rate".into(),
                value: self.gamma,
                hint: "both finite and positive",
            });
        }
        let d_red = self.reduced_dipole();
        let (g, e) = (&self.ground, &self.excited);
        let (gb, eb) = (g.basis(), e.basis());
        let gl = g.sublevels_with(model, b_field)?;
        let el = e.sublevels_with(model, b_field)?;
        let mut b = Atom::builder();
        let mut labels = Vec::new();
        let mut g_ids = Vec::new();
        for s in &gl {
            let f = s.two_f;
            if !keep_ground(f) {
                continue;
            }
            let name = format!("{}_m{}", group_name(false, f), half_name(s.two_m));
            g_ids.push((b.level(name.clone(), s.energy), s));
            labels.push(SublevelLabel {
                excited: false,
                two_f: f,
                two_m: s.two_m,
                name,
            });
        }
        let mut e_ids = Vec::new();
        for s in &el {
            let f = s.two_f;
            if !keep_excited(f) {
                continue;
            }
            let name = format!("{}_m{}", group_name(true, f), half_name(s.two_m));
            e_ids.push((b.level(name.clone(), self.omega + s.energy), s));
            labels.push(SublevelLabel {
                excited: true,
                two_f: f,
                two_m: s.two_m,
                name,
            });
        }
        // ⟨upper|d_q|lower⟩ = (−1)^q ⟨lower|d_{−q}|upper⟩ in units of ⟨J‖e r‖J'⟩, summed over the
        // uncoupled components of both eigenstates (the nuclear projection is a spectator).
        let norm = f64::from(g.two_j + 1) / f64::from(e.two_j + 1);
        let mut leaked = 0.0f64;
        for (ei, es) in &e_ids {
            let mut branches = Vec::new();
            for (gi, gs) in &g_ids {
                let mut d = [0.0f64; 3];
                for (qi, q) in (-1..=1).enumerate() {
                    let mut sum = 0.0;
                    for (a, &(mj, mi)) in gb.iter().enumerate() {
                        if gs.amplitudes[a] == 0.0 {
                            continue;
                        }
                        for (k, &(mjp, mip)) in eb.iter().enumerate() {
                            if mi != mip || es.amplitudes[k] == 0.0 {
                                continue;
                            }
                            sum += gs.amplitudes[a]
                                * es.amplitudes[k]
                                * fine_element(g.two_j, mj, e.two_j, mjp, -q);
                        }
                    }
                    d[qi] = if q % 2 == 0 { sum } else { -sum };
                }
                let strength: f64 = d.iter().map(|x| x * x).sum();
                if strength < 1e-24 {
                    continue;
                }
                b.transition_with_dipole(*gi, *ei, d.map(|x| C64::new(x * d_red, 0.0)));
                branches.push((*gi, strength / norm));
            }
            // The fractions sum to one by the sum rule Σ_{g,q} |d_q|² = (2J+1)/(2J'+1); a larger
            // miss than rounding means inconsistent input (or a kept sublevel decaying out of
            // the model), which is refused rather than hidden. The last ulps are renormalised
            // so that the builder's check of Σ = 1 holds exactly.
            let total: f64 = branches.iter().map(|x| x.1).sum();
            if !(1.0 - LEAK_TOLERANCE..=1.0 + 1e-9).contains(&total) {
                return Err(Error::OutOfRange {
                    what: "the decay branching of an excited sublevel into the kept levels".into(),
                    value: total,
                    hint: "the partial rates from the matrix elements should sum to the line's rate; keep every lower level the kept upper ones decay to",
                });
            }
            leaked = leaked.max(1.0 - total);
            {
                let fractions: Vec<(usize, f64)> =
                    branches.iter().map(|&(l, f)| (l, f / total)).collect();
                b.decay_branched(*ei, self.gamma, &fractions);
            }
        }
        Ok(LineAtom {
            atom: b.build()?,
            labels,
            leaked: leaked.max(0.0),
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::atom::E_A0;

    /// ⁸⁷Rb D2 from the species table (Steck's ⁸⁷Rb notes, recalled; `notebooks-spec/SPECIES.md`).
    pub(crate) fn rb87_d2() -> Line {
        crate::species::Species::named("87Rb")
            .and_then(|s| s.line(crate::species::DLine::D2).ok())
            .expect("87Rb D2 in the species table")
    }

    /// The reduced element and the σ⁺ cycling saturation intensity of ⁸⁷Rb D2:
    /// ⟨J‖e r‖J'⟩ = 4.227 e a₀ and I_sat = c ε₀ Γ² ħ² / (4 |d_cyc|²) = 1.669 mW/cm² (Steck,
    /// tables 7 and the σ± cycling entry; eq. 50). Tolerance 0.3 %: Γ and λ are rounded above.
    #[test]
    fn rb87_d2_reduced_dipole_and_saturation_intensity() {
        let line = rb87_d2();
        let d = line.reduced_dipole();
        assert!((d / E_A0 / 4.227 - 1.0).abs() < 3e-3, "{}", d / E_A0);
        let la = line.expand(0.0, |_| true, |f| f == 6).unwrap();
        let (g, e) = (
            la.level(false, 4, 4).unwrap(),
            la.level(true, 6, 6).unwrap(),
        );
        let tr = la
            .atom
            .transitions()
            .iter()
            .find(|t| t.lower() == g && t.upper() == e)
            .unwrap();
        let dq = tr.dipole();
        assert!(
            dq[0].norm() < 1e-40 && dq[1].norm() < 1e-40,
            "only σ⁺ reaches the stretched state"
        );
        let isat =
            C_LIGHT * EPSILON_0 * line.gamma.powi(2) * HBAR.powi(2) / (4.0 * dq[2].norm_sqr());
        assert!(
            (isat / 16.69 - 1.0).abs() < 3e-3,
            "I_sat = {} mW/cm²",
            isat / 10.0
        );
    }

    /// Every excited sublevel decays at Γ in all, whatever the field, and the stretched
    /// |3', 3'⟩ decays only to |2, 2⟩ (common practice: the cycling transition is closed).
    #[test]
    fn decay_comes_out_of_the_matrix_elements() {
        let line = rb87_d2();
        for b in [0.0, 1e-4, 0.05] {
            let la = line.expand(b, |_| true, |_| true).unwrap();
            let total = la.atom.total_decay_rates();
            for (k, l) in la.labels.iter().enumerate() {
                if l.excited {
                    assert!(
                        (total[k] / line.gamma - 1.0).abs() < 1e-12,
                        "{}: {}",
                        l.name,
                        total[k]
                    );
                }
            }
        }
        let la = line.expand(1e-4, |_| true, |_| true).unwrap();
        // F' = 2 decays to F = 1 as well: keeping only F = 2 is refused.
        assert!(line.expand(0.0, |f| f == 4, |f| f == 4).is_err());
        let top = la.level(true, 6, 6).unwrap();
        let to: Vec<usize> = la
            .atom
            .decays()
            .iter()
            .filter(|d| d.from == top && d.rate > 1e-9 * line.gamma)
            .map(|d| d.to)
            .collect();
        assert_eq!(to, vec![la.level(false, 4, 4).unwrap()]);
        // The full D2 manifold: 8 ground and 16 excited sublevels.
        assert_eq!(la.labels.iter().filter(|l| !l.excited).count(), 8);
        assert_eq!(la.labels.iter().filter(|l| l.excited).count(), 16);
    }

    /// The F = 2 → F' = 3 line of ⁸⁷Rb D2 sits 2563.006 MHz − 193.741 MHz below the centroid
    /// (Steck, *Rubidium 87 D Line Data*, rev. 2.2, 2021, fig. 2, values recalled from memory;
    /// 50 kHz for the rounding there), and equals the level spacing of the expansion at B = 0.
    #[test]
    fn hyperfine_transition_frequency() {
        let line = rb87_d2();
        let w = line.hyperfine_frequency(4, 6).unwrap();
        let offset_mhz = (w - line.omega) / std::f64::consts::TAU / 1e6;
        assert!(
            (offset_mhz - (193.7408 - 2563.0060)).abs() < 0.05,
            "{offset_mhz}"
        );
        let la = line.expand(0.0, |_| true, |_| true).unwrap();
        let e = la.atom.levels()[la.level(true, 6, 0).unwrap()].energy();
        let g = la.atom.levels()[la.level(false, 4, 0).unwrap()].energy();
        assert!((e - g - w).abs() < 1e-6 * line.gamma, "{}", e - g - w);
        assert_eq!(line.hyperfine_frequency(4, 8), None);
    }

    /// In a field, F' = 3 mixes with F' = 2 of equal m, so a model keeping only F = 2 and F' = 3
    /// loses a small part of the decay to F = 1; it is returned and reported, and the total
    /// rate stays Γ. At zero field nothing leaks (the cycling manifold is closed).
    #[test]
    fn small_leaks_out_of_the_kept_levels_are_returned_and_reported() {
        let line = rb87_d2();
        let closed = line.expand(0.0, |f| f == 4, |f| f == 6).unwrap();
        assert!(closed.leaked < 1e-12, "{}", closed.leaked);
        let la = line.expand(1e-5, |f| f == 4, |f| f == 6).unwrap();
        assert!(
            la.leaked > 1e-9 && la.leaked < LEAK_TOLERANCE,
            "{}",
            la.leaked
        );
        let total = la.atom.total_decay_rates();
        for (k, l) in la.labels.iter().enumerate() {
            if l.excited {
                assert!((total[k] / line.gamma - 1.0).abs() < 1e-12);
            }
        }
        // At 100 G the mixing is far larger: refused.
        assert!(line.expand(1e-2, |f| f == 4, |f| f == 6).is_err());
    }
}
