//! The atom: levels with energies, dipole transitions per spherical component, decay channels and
//! pure dephasing. Built once through [`AtomBuilder`], which checks the scheme is consistent.

use crate::error::Error;
use crate::linalg::C64;

/// Elementary charge times the Bohr radius, e·a₀ (C·m): the default dipole of a hand-made
/// transition. CODATA 2018: e = 1.602176634e-19 C (exact), a₀ = 5.29177210903e-11 m.
pub const E_A0: f64 = 1.602176634e-19 * 5.29177210903e-11;

/// Index of a level in its atom.
pub type LevelId = usize;

/// Index of a transition in its atom.
pub type TransitionId = usize;

/// One internal state.
#[derive(Clone, Debug, PartialEq)]
pub struct Level {
    name: String,
    energy: f64,
}

impl Level {
    /// The level's name.
    pub fn name(&self) -> &str {
        &self.name
    }
    /// Energy as an angular frequency E/ħ (rad/s).
    pub fn energy(&self) -> f64 {
        self.energy
    }
}

/// An electric-dipole transition `lower → upper`, with the spherical components
/// d_q = ⟨upper| d·e_q |lower⟩ (C·m) for q = −1, 0, +1 (stored in that order). Light of spherical
/// polarisation component ε^q drives it through Σ_q ε^q d_q (see CONVENTIONS.md).
#[derive(Clone, Debug, PartialEq)]
pub struct Transition {
    lower: LevelId,
    upper: LevelId,
    dipole: [C64; 3],
}

impl Transition {
    /// Lower level.
    pub fn lower(&self) -> LevelId {
        self.lower
    }
    /// Upper level.
    pub fn upper(&self) -> LevelId {
        self.upper
    }
    /// d_q for q = −1, 0, +1 (C·m).
    pub fn dipole(&self) -> [C64; 3] {
        self.dipole
    }
}

/// Spontaneous decay `from → to` at a partial rate (1/s).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Decay {
    /// Decaying level.
    pub from: LevelId,
    /// Receiving level.
    pub to: LevelId,
    /// Partial rate Γ (1/s).
    pub rate: f64,
}

/// Pure dephasing of one level: every coherence ρ_kj (j ≠ k) decays at `rate` (1/s).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Dephasing {
    /// The dephased level.
    pub level: LevelId,
    /// Coherence decay rate γ (1/s).
    pub rate: f64,
}

/// A checked level scheme.
#[derive(Clone, Debug)]
pub struct Atom {
    levels: Vec<Level>,
    transitions: Vec<Transition>,
    decays: Vec<Decay>,
    dephasing: Vec<Dephasing>,
}

impl Atom {
    /// Start building an atom.
    pub fn builder() -> AtomBuilder {
        AtomBuilder::default()
    }
    /// Number of levels.
    pub fn n(&self) -> usize {
        self.levels.len()
    }
    /// The levels, in index order.
    pub fn levels(&self) -> &[Level] {
        &self.levels
    }
    /// The transitions.
    pub fn transitions(&self) -> &[Transition] {
        &self.transitions
    }
    /// The decay channels.
    pub fn decays(&self) -> &[Decay] {
        &self.decays
    }
    /// The dephasing terms.
    pub fn dephasing(&self) -> &[Dephasing] {
        &self.dephasing
    }
    /// Whether the atom has any decay or dephasing (then only density matrices describe it).
    pub fn is_open(&self) -> bool {
        self.decays.iter().any(|d| d.rate > 0.0) || self.dephasing.iter().any(|d| d.rate > 0.0)
    }
    /// This atom with pure dephasing of `level` at rate γ (1/s) added, checked as
    /// [`AtomBuilder::build`] checks it. For atoms built elsewhere, e.g. expanded from a line.
    pub fn with_dephasing(&self, level: LevelId, rate: f64) -> Result<Atom, Error> {
        let Some(l) = self.levels.get(level) else {
            return Err(Error::UnknownLevel {
                what: "a dephasing term".into(),
                index: level,
                count: self.n(),
            });
        };
        if !rate.is_finite() || rate < 0.0 {
            return Err(Error::OutOfRange {
                what: format!("the dephasing rate of level `{}`", l.name),
                value: rate,
                hint: "dephasing rates are finite and non-negative",
            });
        }
        let mut out = self.clone();
        out.dephasing.push(Dephasing { level, rate });
        Ok(out)
    }
    /// The level with this name.
    pub fn level_id(&self, name: &str) -> Option<LevelId> {
        self.levels.iter().position(|l| l.name == name)
    }
    /// Transition angular frequency ω_upper − ω_lower (rad/s).
    pub fn transition_frequency(&self, t: TransitionId) -> Result<f64, Error> {
        let tr = self.transition(t)?;
        Ok(self.levels[tr.upper].energy - self.levels[tr.lower].energy)
    }
    /// A transition, checked.
    pub fn transition(&self, t: TransitionId) -> Result<&Transition, Error> {
        self.transitions.get(t).ok_or_else(|| Error::UnknownIndex {
            what: "a field".into(),
            kind: "transition",
            index: t,
            count: self.transitions.len(),
        })
    }
    /// `lower -> upper`, for messages.
    pub fn transition_label(&self, t: TransitionId) -> String {
        match self.transitions.get(t) {
            Some(tr) => format!(
                "{} -> {}",
                self.levels[tr.lower].name, self.levels[tr.upper].name
            ),
            None => format!("#{t}"),
        }
    }
    /// Total decay rate out of each level (1/s).
    pub fn total_decay_rates(&self) -> Vec<f64> {
        let mut out = vec![0.0; self.n()];
        for d in &self.decays {
            out[d.from] += d.rate;
        }
        out
    }
}

/// A decay given by its total rate and branching fractions: (from, total rate, [(to, fraction)]).
type BranchedDecay = (LevelId, f64, Vec<(LevelId, f64)>);

/// Collects levels, transitions and decays; [`AtomBuilder::build`] checks them all at once.
#[derive(Clone, Debug, Default)]
pub struct AtomBuilder {
    levels: Vec<Level>,
    transitions: Vec<Transition>,
    decays: Vec<Decay>,
    dephasing: Vec<Dephasing>,
    branched: Vec<BranchedDecay>,
}

impl AtomBuilder {
    /// Add a level with energy E/ħ (rad/s); returns its index.
    pub fn level(&mut self, name: impl Into<String>, energy: f64) -> LevelId {
        self.levels.push(Level {
            name: name.into(),
            energy,
        });
        self.levels.len() - 1
    }
    /// Add a transition with a π dipole of e·a₀, for hand-made schemes whose fields are given
    /// by their Rabi frequency (the dipole's size then cancels).
    pub fn transition(&mut self, lower: LevelId, upper: LevelId) -> TransitionId {
        self.transition_with_dipole(
            lower,
            upper,
            [C64::new(0.0, 0.0), C64::new(E_A0, 0.0), C64::new(0.0, 0.0)],
        )
    }
    /// Add a transition with explicit spherical components d_q, q = −1, 0, +1 (C·m).
    pub fn transition_with_dipole(
        &mut self,
        lower: LevelId,
        upper: LevelId,
        dipole: [C64; 3],
    ) -> TransitionId {
        self.transitions.push(Transition {
            lower,
            upper,
            dipole,
        });
        self.transitions.len() - 1
    }
    /// Add a decay channel `from → to` at partial rate Γ (1/s).
    pub fn decay(&mut self, from: LevelId, to: LevelId, rate: f64) -> &mut Self {
        self.decays.push(Decay { from, to, rate });
        self
    }
    /// Add the decay of `from` at total rate Γ (1/s), split over `branches` (level, fraction);
    /// the fractions must sum to one.
    pub fn decay_branched(
        &mut self,
        from: LevelId,
        total_rate: f64,
        branches: &[(LevelId, f64)],
    ) -> &mut Self {
        self.branched.push((from, total_rate, branches.to_vec()));
        self
    }
    /// Add pure dephasing of a level at rate γ (1/s).
    pub fn dephasing(&mut self, level: LevelId, rate: f64) -> &mut Self {
        self.dephasing.push(Dephasing { level, rate });
        self
    }

    /// Check and freeze the scheme.
    pub fn build(&self) -> Result<Atom, Error> {
        let n = self.levels.len();
        if n == 0 {
            return Err(Error::EmptyModel);
        }
        for (i, l) in self.levels.iter().enumerate() {
            if !l.energy.is_finite() {
                return Err(Error::NonFinite {
                    what: format!("the energy of level `{}`", l.name),
                });
            }
            if self.levels[..i].iter().any(|m| m.name == l.name) {
                return Err(Error::DuplicateLevel {
                    name: l.name.clone(),
                });
            }
        }
        let check = |what: &str, i: LevelId| -> Result<(), Error> {
            if i >= n {
                Err(Error::UnknownLevel {
                    what: what.into(),
                    index: i,
                    count: n,
                })
            } else {
                Ok(())
            }
        };
        for (k, t) in self.transitions.iter().enumerate() {
            check(&format!("transition #{k}"), t.lower)?;
            check(&format!("transition #{k}"), t.upper)?;
            let name = format!(
                "transition {} -> {}",
                self.levels[t.lower].name, self.levels[t.upper].name
            );
            if t.lower == t.upper {
                return Err(Error::Inconsistent {
                    what: name,
                    hint: "a transition joins two different levels".into(),
                });
            }
            if self.levels[t.upper].energy < self.levels[t.lower].energy {
                return Err(Error::Inconsistent {
                    what: name,
                    hint: "the upper level lies below the lower one; swap them".into(),
                });
            }
            if t.dipole
                .iter()
                .any(|d| !d.re.is_finite() || !d.im.is_finite())
            {
                return Err(Error::NonFinite {
                    what: format!("the dipole of {name}"),
                });
            }
            if t.dipole.iter().all(|d| d.norm() == 0.0) {
                return Err(Error::Inconsistent {
                    what: name,
                    hint: "all three dipole components are zero; no light can drive it".into(),
                });
            }
            if self.transitions[..k].iter().any(|o| {
                (o.lower, o.upper) == (t.lower, t.upper) || (o.lower, o.upper) == (t.upper, t.lower)
            }) {
                return Err(Error::Inconsistent {
                    what: name,
                    hint: "declared twice; give one transition per pair of levels".into(),
                });
            }
        }
        let mut decays = self.decays.clone();
        for (from, total, branches) in &self.branched {
            let sum: f64 = branches.iter().map(|b| b.1).sum();
            if !sum.is_finite() || (sum - 1.0).abs() > 1e-9 || branches.iter().any(|b| b.1 < 0.0) {
                return Err(Error::Inconsistent {
                    what: format!("the decay of level #{from}"),
                    hint: format!(
                        "branching fractions must be non-negative and sum to 1 (they sum to {sum})"
                    ),
                });
            }
            for &(to, f) in branches {
                decays.push(Decay {
                    from: *from,
                    to,
                    rate: total * f,
                });
            }
        }
        for d in &decays {
            check("a decay", d.from)?;
            check("a decay", d.to)?;
            let name = format!(
                "decay {} -> {}",
                self.levels[d.from].name, self.levels[d.to].name
            );
            if !d.rate.is_finite() {
                return Err(Error::NonFinite {
                    what: format!("the rate of {name}"),
                });
            }
            if d.rate < 0.0 {
                return Err(Error::OutOfRange {
                    what: format!("the rate of {name}"),
                    value: d.rate,
                    hint: "decay rates are non-negative",
                });
            }
            if d.from == d.to {
                return Err(Error::Inconsistent {
                    what: name,
                    hint: "a level cannot decay into itself; use dephasing for phase noise".into(),
                });
            }
            if self.levels[d.to].energy > self.levels[d.from].energy {
                return Err(Error::Inconsistent {
                    what: name,
                    hint: "spontaneous decay goes to a lower level; check the energies or swap the levels".into(),
                });
            }
        }
        for d in &self.dephasing {
            check("a dephasing term", d.level)?;
            if !d.rate.is_finite() || d.rate < 0.0 {
                return Err(Error::OutOfRange {
                    what: format!(
                        "the dephasing rate of level `{}`",
                        self.levels[d.level].name
                    ),
                    value: d.rate,
                    hint: "dephasing rates are finite and non-negative",
                });
            }
        }
        Ok(Atom {
            levels: self.levels.clone(),
            transitions: self.transitions.clone(),
            decays,
            dephasing: self.dephasing.clone(),
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn builds_a_lambda_scheme_with_branching() {
        let mut b = Atom::builder();
        let g = b.level("g", 0.0);
        let r = b.level("r", 1e9);
        let e = b.level("e", 1e15);
        b.transition(g, e);
        b.transition(r, e);
        b.decay_branched(e, 6e7, &[(g, 0.5), (r, 0.5)]);
        let atom = b.build().unwrap();
        assert_eq!(atom.n(), 3);
        assert_eq!(atom.total_decay_rates()[e], 6e7);
        assert!(atom.is_open());
        assert_eq!(atom.level_id("r"), Some(r));
    }

    #[test]
    fn rejects_inconsistent_schemes() {
        let mut b = Atom::builder();
        let g = b.level("g", 0.0);
        b.level("g", 1.0);
        assert!(matches!(b.build(), Err(Error::DuplicateLevel { .. })));

        let mut b = Atom::builder();
        let g2 = b.level("g", 0.0);
        let e = b.level("e", 1.0);
        b.decay(g2, e, 1.0);
        assert!(matches!(b.build(), Err(Error::Inconsistent { .. })));

        let mut b = Atom::builder();
        b.level("g", 0.0);
        b.transition(g, 5);
        assert!(matches!(
            b.build(),
            Err(Error::UnknownLevel { index: 5, .. })
        ));

        let mut b = Atom::builder();
        let a = b.level("a", 0.0);
        let c = b.level("c", 1.0);
        b.decay_branched(c, 1.0, &[(a, 0.7)]);
        assert!(matches!(b.build(), Err(Error::Inconsistent { .. })));

        assert!(matches!(Atom::builder().build(), Err(Error::EmptyModel)));
        let mut b = Atom::builder();
        b.level("x", f64::NAN);
        assert!(matches!(b.build(), Err(Error::NonFinite { .. })));
    }

    /// Dephasing added to a built atom is checked like the builder's and makes the atom open.
    #[test]
    fn dephasing_added_after_building() {
        let mut b = Atom::builder();
        let g = b.level("g", 0.0);
        let e = b.level("e", 1.0);
        b.transition(g, e);
        let atom = b.build().unwrap();
        assert!(!atom.is_open());
        let d = atom.with_dephasing(e, 2.0).unwrap();
        assert!(d.is_open());
        assert_eq!(
            d.dephasing(),
            &[Dephasing {
                level: e,
                rate: 2.0
            }]
        );
        assert!(matches!(
            atom.with_dephasing(7, 1.0),
            Err(Error::UnknownLevel { index: 7, .. })
        ));
        assert!(atom.with_dephasing(g, -1.0).is_err());
        assert!(atom.with_dephasing(g, f64::NAN).is_err());
    }
}
