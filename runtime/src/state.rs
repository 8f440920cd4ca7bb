//! Quantum states of the atom: pure amplitude vectors and density matrices, checked at construction.

use crate::atom::{Atom, LevelId};
use crate::error::Error;
use crate::field::HBAR;
use crate::linalg::C64;
use crate::sweep::BOLTZMANN as K_B;

/// A normalised state: amplitudes c_k, or a density matrix ρ (row-major, `ρ[i*n + j]` = ρ_ij).
#[derive(Clone, Debug, PartialEq)]
pub enum State {
    /// Pure state amplitudes, Σ|c_k|² = 1.
    Pure(Vec<C64>),
    /// Density matrix: Hermitian, unit trace, positive semi-definite.
    Mixed(Vec<C64>),
}

/// The tolerance on normalisation, hermiticity and positivity of user-given states.
const STATE_TOL: f64 = 1e-9;

impl State {
    /// All population in one level.
    pub fn level(atom: &Atom, level: LevelId) -> Result<Self, Error> {
        Self::superposition(atom, &[(level, C64::new(1.0, 0.0))])
    }

    /// A coherent superposition Σ a_k |k⟩, normalised here.
    pub fn superposition(atom: &Atom, amplitudes: &[(LevelId, C64)]) -> Result<Self, Error> {
        let n = atom.n();
        let mut c = vec![C64::new(0.0, 0.0); n];
        for &(k, a) in amplitudes {
            if k >= n {
                return Err(Error::UnknownLevel {
                    what: "the initial state".into(),
                    index: k,
                    count: n,
                });
            }
            if !a.re.is_finite() || !a.im.is_finite() {
                return Err(Error::NonFinite {
                    what: "an initial amplitude".into(),
                });
            }
            c[k] += a;
        }
        let norm = c.iter().map(|z| z.norm_sqr()).sum::<f64>().sqrt();
        if norm == 0.0 {
            return Err(Error::BadState {
                hint: "all amplitudes are zero".into(),
            });
        }
        Ok(State::Pure(c.into_iter().map(|z| z / norm).collect()))
    }

    /// An incoherent mixture Σ p_k |k⟩⟨k| with weights normalised here.
    pub fn mixture(atom: &Atom, weights: &[(LevelId, f64)]) -> Result<Self, Error> {
        let n = atom.n();
        let mut rho = vec![C64::new(0.0, 0.0); n * n];
        let mut total = 0.0;
        for &(k, p) in weights {
            if k >= n {
                return Err(Error::UnknownLevel {
                    what: "the initial mixture".into(),
                    index: k,
                    count: n,
                });
            }
            if !p.is_finite() || p < 0.0 {
                return Err(Error::BadState {
                    hint: format!(
                        "mixture weight {p} of level #{k} must be finite and non-negative"
                    ),
                });
            }
            rho[k * n + k] += p;
            total += p;
        }
        if total == 0.0 {
            return Err(Error::BadState {
                hint: "all mixture weights are zero".into(),
            });
        }
        rho.iter_mut().for_each(|z| *z /= total);
        Ok(State::Mixed(rho))
    }

    /// A thermal mixture over a set of levels at temperature T (K), weights e^{−ħE_k/k_B T}
    /// relative to the lowest of them.
    pub fn thermal(atom: &Atom, levels: &[LevelId], temperature: f64) -> Result<Self, Error> {
        if !temperature.is_finite() || temperature <= 0.0 {
            return Err(Error::OutOfRange {
                what: "the temperature".into(),
                value: temperature,
                hint: "a positive, finite temperature in kelvin",
            });
        }
        let n = atom.n();
        if let Some(&k) = levels.iter().find(|&&k| k >= n) {
            return Err(Error::UnknownLevel {
                what: "the thermal state".into(),
                index: k,
                count: n,
            });
        }
        let e0 = levels
            .iter()
            .map(|&k| atom.levels()[k].energy())
            .fold(f64::INFINITY, f64::min);
        let w: Vec<(LevelId, f64)> = levels
            .iter()
            .map(|&k| {
                (
                    k,
                    (-(atom.levels()[k].energy() - e0) * HBAR / (K_B * temperature)).exp(),
                )
            })
            .collect();
        Self::mixture(atom, &w)
    }

    /// A density matrix given in full (row-major); checked for trace, hermiticity and positivity.
    pub fn density(atom: &Atom, rho: Vec<C64>) -> Result<Self, Error> {
        let n = atom.n();
        if rho.len() != n * n {
            return Err(Error::Shape {
                what: "the initial density matrix",
                expected: n * n,
                got: rho.len(),
            });
        }
        if rho.iter().any(|z| !z.re.is_finite() || !z.im.is_finite()) {
            return Err(Error::NonFinite {
                what: "an initial density-matrix entry".into(),
            });
        }
        let report = crate::lindblad::check_density(n, &rho)?;
        if (report.trace - 1.0).norm() > STATE_TOL {
            return Err(Error::BadState {
                hint: format!("the density matrix has trace {} instead of 1", report.trace),
            });
        }
        if report.hermiticity > STATE_TOL {
            return Err(Error::BadState {
                hint: format!(
                    "the density matrix is not Hermitian (deviation {:e})",
                    report.hermiticity
                ),
            });
        }
        if report.min_eigenvalue < -STATE_TOL {
            return Err(Error::BadState {
                hint: format!(
                    "the density matrix has a negative eigenvalue {:e}",
                    report.min_eigenvalue
                ),
            });
        }
        Ok(State::Mixed(rho))
    }

    /// Dimension.
    pub fn n(&self) -> usize {
        match self {
            State::Pure(c) => c.len(),
            State::Mixed(r) => (r.len() as f64).sqrt().round() as usize,
        }
    }

    /// ρ_ij of this state.
    pub fn rho(&self, i: usize, j: usize) -> C64 {
        match self {
            State::Pure(c) => c[i] * c[j].conj(),
            State::Mixed(r) => r[i * self.n() + j],
        }
    }

    /// The density matrix of this state (row-major).
    pub fn to_density(&self) -> Vec<C64> {
        match self {
            State::Mixed(r) => r.clone(),
            State::Pure(c) => {
                let n = c.len();
                let mut r = vec![C64::new(0.0, 0.0); n * n];
                for i in 0..n {
                    for j in 0..n {
                        r[i * n + j] = c[i] * c[j].conj();
                    }
                }
                r
            }
        }
    }

    /// Norm (pure) or trace (mixed): 1 for an exact evolution.
    pub fn norm(&self) -> f64 {
        match self {
            State::Pure(c) => c.iter().map(|z| z.norm_sqr()).sum(),
            State::Mixed(r) => {
                let n = self.n();
                (0..n).map(|k| r[k * n + k].re).sum()
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn atom3() -> Atom {
        let mut b = Atom::builder();
        b.level("a", 0.0);
        b.level("b", 2.0 * std::f64::consts::PI * 1e9);
        b.level("c", 2.0 * std::f64::consts::PI * 2e9);
        b.build().unwrap()
    }

    #[test]
    fn thermal_weights_follow_boltzmann() {
        // p_b/p_a = exp(−h ν / k_B T) (Boltzmann distribution; common practice).
        let atom = atom3();
        let t = 0.05;
        let s = State::thermal(&atom, &[0, 1, 2], t).unwrap();
        let ratio = s.rho(1, 1).re / s.rho(0, 0).re;
        let expect = (-(HBAR * 2.0 * std::f64::consts::PI * 1e9) / (K_B * t)).exp();
        assert!((ratio - expect).abs() < 1e-12);
        assert!((s.norm() - 1.0).abs() < 1e-14);
    }

    #[test]
    fn rejects_bad_states() {
        let atom = atom3();
        assert!(State::level(&atom, 7).is_err());
        assert!(State::superposition(&atom, &[(0, C64::new(0.0, 0.0))]).is_err());
        assert!(State::mixture(&atom, &[(0, -1.0)]).is_err());
        assert!(State::thermal(&atom, &[0, 1], -3.0).is_err());
        let mut rho = vec![C64::new(0.0, 0.0); 9];
        rho[0] = C64::new(1.5, 0.0);
        rho[4] = C64::new(-0.5, 0.0);
        assert!(matches!(
            State::density(&atom, rho),
            Err(Error::BadState { .. })
        ));
        assert!(State::density(&atom, vec![C64::new(1.0, 0.0)]).is_err());
    }
}
