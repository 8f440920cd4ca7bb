//! Observables: what is recorded from the state at each sample time.

use crate::atom::{Atom, LevelId};
use crate::error::Error;
use crate::linalg::C64;
use crate::state::State;

/// A quantity computed from the state. Each has a fixed number of real components
/// ([`Observable::width`]).
#[derive(Clone, Debug, PartialEq)]
pub enum Observable {
    /// ρ_kk of one level.
    Population(LevelId),
    /// Σ ρ_kk over a group of levels.
    PopulationSum(Vec<LevelId>),
    /// ρ_ij in the solver's frame: two components, real and imaginary part.
    Coherence(LevelId, LevelId),
    /// Bloch vector (u, v, w) = (⟨σx⟩, ⟨σy⟩, ⟨σz⟩) of the pair (lower, upper), with
    /// σ₊ = |upper⟩⟨lower|: u = 2 Re ρ_ul, v = −2 Im ρ_ul, w = ρ_uu − ρ_ll.
    Bloch {
        /// The lower level of the pair.
        lower: LevelId,
        /// The upper level of the pair.
        upper: LevelId,
    },
    /// Fidelity ⟨ψ|ρ|ψ⟩ to a target pure state (normalised when the observable is checked).
    Fidelity(Vec<C64>),
    /// Tr(ρA) of a Hermitian operator A (row-major): one real component.
    Expectation(Vec<C64>),
    /// Photon scattering rate Σ_decays Γ ρ_from,from (photons/s).
    ScatteringRate,
    /// Norm (pure) or trace (mixed) of the state.
    Norm,
}

impl Observable {
    /// Number of real components.
    pub fn width(&self) -> usize {
        match self {
            Observable::Coherence(..) => 2,
            Observable::Bloch { .. } => 3,
            _ => 1,
        }
    }

    /// A short label, with level names.
    pub fn label(&self, atom: &Atom) -> String {
        let name = |k: &LevelId| atom.levels().get(*k).map_or("?", |l| l.name()).to_string();
        match self {
            Observable::Population(k) => format!("population({})", name(k)),
            Observable::PopulationSum(ks) => format!(
                "population({})",
                ks.iter().map(name).collect::<Vec<_>>().join("+")
            ),
            Observable::Coherence(i, j) => format!("coherence({},{})", name(i), name(j)),
            Observable::Bloch { lower, upper } => format!("bloch({},{})", name(lower), name(upper)),
            Observable::Fidelity(_) => "fidelity".into(),
            Observable::Expectation(_) => "expectation".into(),
            Observable::ScatteringRate => "scattering_rate".into(),
            Observable::Norm => "norm".into(),
        }
    }

    /// Check indices and operators against the atom; normalise a fidelity target.
    pub fn checked(&self, atom: &Atom) -> Result<Observable, Error> {
        let n = atom.n();
        let lvl = |k: LevelId| {
            if k < n {
                Ok(())
            } else {
                Err(Error::UnknownLevel {
                    what: "an observable".into(),
                    index: k,
                    count: n,
                })
            }
        };
        match self {
            Observable::Population(k) => lvl(*k)?,
            Observable::PopulationSum(ks) => ks.iter().try_for_each(|&k| lvl(k))?,
            Observable::Coherence(i, j) => {
                lvl(*i)?;
                lvl(*j)?
            }
            Observable::Bloch { lower, upper } => {
                lvl(*lower)?;
                lvl(*upper)?;
                if lower == upper {
                    return Err(Error::Inconsistent {
                        what: "a Bloch vector".into(),
                        hint: "needs two different levels".into(),
                    });
                }
            }
            Observable::Fidelity(psi) => {
                if psi.len() != n {
                    return Err(Error::Shape {
                        what: "a fidelity target",
                        expected: n,
                        got: psi.len(),
                    });
                }
                let norm = psi.iter().map(|z| z.norm_sqr()).sum::<f64>().sqrt();
                if !norm.is_finite() || norm == 0.0 {
                    return Err(Error::BadState {
                        hint: "the fidelity target must be a non-zero, finite vector".into(),
                    });
                }
                return Ok(Observable::Fidelity(psi.iter().map(|z| z / norm).collect()));
            }
            Observable::Expectation(a) => {
                if a.len() != n * n {
                    return Err(Error::Shape {
                        what: "an expectation operator",
                        expected: n * n,
                        got: a.len(),
                    });
                }
                let scale = a.iter().fold(0.0f64, |m, z| m.max(z.norm()));
                if !scale.is_finite() {
                    return Err(Error::NonFinite {
                        what: "an expectation operator entry".into(),
                    });
                }
                let dev = crate::linalg::hermiticity_deviation(n, a);
                if dev > 1e-10 * scale.max(1e-300) {
                    return Err(Error::NotHermitian {
                        what: "the expectation operator".into(),
                        deviation: dev / scale,
                    });
                }
            }
            Observable::ScatteringRate | Observable::Norm => {}
        }
        Ok(self.clone())
    }

    /// Append this observable's components for a state to `out`.
    pub fn evaluate(&self, atom: &Atom, state: &State, out: &mut Vec<f64>) {
        match state {
            State::Pure(c) => self.eval_with(atom, c.len(), |i, j| c[i] * c[j].conj(), out),
            State::Mixed(r) => {
                let n = state.n();
                self.eval_with(atom, n, |i, j| r[i * n + j], out)
            }
        }
    }

    /// Evaluate from amplitudes without building a `State` (the hot path of pure-state sweeps).
    pub fn evaluate_pure(&self, atom: &Atom, c: &[C64], out: &mut Vec<f64>) {
        self.eval_with(atom, c.len(), |i, j| c[i] * c[j].conj(), out)
    }

    /// Evaluate from a row-major density matrix.
    pub fn evaluate_mixed(&self, atom: &Atom, rho: &[C64], out: &mut Vec<f64>) {
        let n = atom.n();
        self.eval_with(atom, n, |i, j| rho[i * n + j], out)
    }

    fn eval_with(
        &self,
        atom: &Atom,
        n: usize,
        rho: impl Fn(usize, usize) -> C64,
        out: &mut Vec<f64>,
    ) {
        match self {
            Observable::Population(k) => out.push(rho(*k, *k).re),
            Observable::PopulationSum(ks) => out.push(ks.iter().map(|&k| rho(k, k).re).sum()),
            Observable::Coherence(i, j) => {
                let z = rho(*i, *j);
                out.push(z.re);
                out.push(z.im);
            }
            Observable::Bloch { lower, upper } => {
                let z = rho(*upper, *lower);
                out.push(2.0 * z.re);
                out.push(-2.0 * z.im);
                out.push(rho(*upper, *upper).re - rho(*lower, *lower).re);
            }
            Observable::Fidelity(psi) => {
                let mut acc = C64::new(0.0, 0.0);
                for i in 0..n {
                    for j in 0..n {
                        acc += psi[i].conj() * rho(i, j) * psi[j];
                    }
                }
                out.push(acc.re);
            }
            Observable::Expectation(a) => {
                let mut acc = C64::new(0.0, 0.0);
                for i in 0..n {
                    for j in 0..n {
                        acc += rho(i, j) * a[j * n + i];
                    }
                }
                out.push(acc.re);
            }
            Observable::ScatteringRate => out.push(
                atom.decays()
                    .iter()
                    .map(|d| d.rate * rho(d.from, d.from).re)
                    .sum(),
            ),
            Observable::Norm => out.push((0..n).map(|k| rho(k, k).re).sum()),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn bloch_vector_of_equal_superposition() {
        // |ψ⟩ = (|l⟩ + e^{iφ}|u⟩)/√2 with |u⟩ as spin up: ⟨σx⟩ = cos φ, ⟨σy⟩ = −sin φ for the
        // Pauli matrices σy = [[0, −i], [i, 0]] in the basis (u, l) (common practice).
        let mut b = Atom::builder();
        b.level("l", 0.0);
        b.level("u", 1.0);
        let atom = b.build().unwrap();
        let phi: f64 = 0.7;
        let s = State::superposition(
            &atom,
            &[(0, C64::new(1.0, 0.0)), (1, C64::new(phi.cos(), phi.sin()))],
        )
        .unwrap();
        let mut out = Vec::new();
        Observable::Bloch { lower: 0, upper: 1 }.evaluate(&atom, &s, &mut out);
        assert!(
            (out[0] - phi.cos()).abs() < 1e-14
                && (out[1] + phi.sin()).abs() < 1e-14
                && out[2].abs() < 1e-14
        );
        let mixed = State::Mixed(s.to_density());
        let mut out2 = Vec::new();
        Observable::Bloch { lower: 0, upper: 1 }.evaluate(&atom, &mixed, &mut out2);
        assert_eq!(out.len(), out2.len());
        for (a, b) in out.iter().zip(&out2) {
            assert!((a - b).abs() < 1e-14);
        }
        let sz = vec![
            C64::new(-1.0, 0.0),
            C64::new(0.0, 0.0),
            C64::new(0.0, 0.0),
            C64::new(1.0, 0.0),
        ];
        let mut out3 = Vec::new();
        Observable::Expectation(sz)
            .checked(&atom)
            .unwrap()
            .evaluate(&atom, &s, &mut out3);
        assert!(out3[0].abs() < 1e-14);
        assert!(Observable::Population(3).checked(&atom).is_err());
        assert!(
            Observable::Expectation(vec![C64::new(0.0, 1.0); 4])
                .checked(&atom)
                .is_err()
        );
    }
}
