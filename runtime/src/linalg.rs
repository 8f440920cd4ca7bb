//! Small dense complex linear algebra shared by the solvers: the complex type, row-major helpers and
//! the Hermitian eigendecomposition used for exact propagation.

use nalgebra::DMatrix;
pub use num_complex::Complex64 as C64;

use crate::error::Error;

/// The imaginary unit.
pub const I: C64 = C64 { re: 0.0, im: 1.0 };

/// Largest |H − H†| entry, for a row-major `n × n` matrix.
pub fn hermiticity_deviation(n: usize, h: &[C64]) -> f64 {
    let mut worst = 0.0f64;
    for i in 0..n {
        for j in i..n {
            worst = worst.max((h[i * n + j] - h[j * n + i].conj()).norm());
        }
    }
    worst
}

/// The eigendecomposition H = V diag(λ) V† of a Hermitian matrix, kept to propagate
/// exp(−iHt) for many t at the cost of one decomposition.
#[derive(Clone, Debug)]
pub struct HermitianEigen {
    n: usize,
    /// Eigenvalues λ_k (rad/s).
    values: Vec<f64>,
    /// Eigenvectors, row-major: `vectors[i * n + k]` = V_ik (column k is eigenvector k).
    vectors: Vec<C64>,
}

impl HermitianEigen {
    /// Decompose a row-major Hermitian matrix (rad/s). Fails on non-finite entries or a matrix
    /// that is not Hermitian to a relative 1e-10.
    pub fn new(n: usize, h: &[C64]) -> Result<Self, Error> {
        if h.len() != n * n || n == 0 {
            return Err(Error::Shape {
                what: "Hamiltonian",
                expected: n * n,
                got: h.len(),
            });
        }
        if h.iter().any(|z| !z.re.is_finite() || !z.im.is_finite()) {
            return Err(Error::NonFinite {
                what: "Hamiltonian entry".into(),
            });
        }
        let scale = h.iter().fold(0.0f64, |m, z| m.max(z.norm())).max(1e-300);
        let dev = hermiticity_deviation(n, h);
        if dev > 1e-10 * scale {
            return Err(Error::NotHermitian {
                what: "Hamiltonian".into(),
                deviation: dev / scale,
            });
        }
        if n == 2 {
            return Ok(Self::two_by_two(h));
        }
        let m = DMatrix::from_fn(n, n, |i, j| h[i * n + j]);
        let eig = nalgebra::SymmetricEigen::new(m);
        let values = eig.eigenvalues.iter().copied().collect();
        let mut vectors = vec![C64::new(0.0, 0.0); n * n];
        for i in 0..n {
            for k in 0..n {
                vectors[i * n + k] = eig.eigenvectors[(i, k)];
            }
        }
        Ok(Self { n, values, vectors })
    }

    /// Closed form for 2 × 2: the hot path of every two-level sweep.
    fn two_by_two(h: &[C64]) -> Self {
        let a = h[0].re;
        let d = h[3].re;
        let b = h[1];
        let mean = 0.5 * (a + d);
        let half = 0.5 * (a - d);
        let r = (half * half + b.norm_sqr()).sqrt();
        let values = vec![mean - r, mean + r];
        // Eigenvectors from the rotation angle; stable whatever the sign of `half`.
        let vectors = if b.norm() == 0.0 {
            if a <= d {
                vec![
                    C64::new(1.0, 0.0),
                    C64::new(0.0, 0.0),
                    C64::new(0.0, 0.0),
                    C64::new(1.0, 0.0),
                ]
            } else {
                vec![
                    C64::new(0.0, 0.0),
                    C64::new(1.0, 0.0),
                    C64::new(1.0, 0.0),
                    C64::new(0.0, 0.0),
                ]
            }
        } else {
            let phase = b / b.norm(); // e^{iφ}, h01 = |b| e^{iφ}
            let cos2 = half / r; // cos θ with tan θ = |b|/half
            // cos(θ/2) and sin(θ/2): take the larger from the half-angle formula and the smaller
            // from sin θ = 2 sin(θ/2) cos(θ/2), so neither loses digits to cancellation.
            let sin_theta = b.norm() / r;
            let (c, s) = if cos2 >= 0.0 {
                let c = ((1.0 + cos2) * 0.5).sqrt();
                (c, sin_theta / (2.0 * c))
            } else {
                let s = ((1.0 - cos2) * 0.5).sqrt();
                (sin_theta / (2.0 * s), s)
            };
            // upper eigenvector (λ+) = (c e^{iφ}, s), lower (λ−) = (−s e^{iφ}, c)
            vec![-phase * s, phase * c, C64::new(c, 0.0), C64::new(s, 0.0)]
        };
        Self {
            n: 2,
            values,
            vectors,
        }
    }

    /// Dimension.
    pub fn n(&self) -> usize {
        self.n
    }

    /// Eigenvalues (rad/s), ascending.
    pub fn values(&self) -> &[f64] {
        &self.values
    }

    /// Project a state on the eigenbasis: w = V† c.
    pub fn to_eigenbasis(&self, c: &[C64], w: &mut [C64]) {
        let n = self.n;
        for (k, wk) in w.iter_mut().enumerate().take(n) {
            let mut acc = C64::new(0.0, 0.0);
            for i in 0..n {
                acc += self.vectors[i * n + k].conj() * c[i];
            }
            *wk = acc;
        }
    }

    /// c(t) = V diag(e^{−iλt}) w for eigenbasis amplitudes `w` (t in s).
    pub fn evolve_from_eigenbasis(&self, w: &[C64], t: f64, out: &mut [C64]) {
        let n = self.n;
        out[..n].fill(C64::new(0.0, 0.0));
        for k in 0..n {
            let (s, c) = (self.values[k] * t).sin_cos();
            let f = C64::new(c, -s) * w[k];
            for i in 0..n {
                out[i] += self.vectors[i * n + k] * f;
            }
        }
    }

    /// c = V w: back from eigenbasis amplitudes (already carrying their phases).
    #[inline]
    pub fn from_eigenbasis(&self, w: &[C64], out: &mut [C64]) {
        let n = self.n;
        for (i, o) in out.iter_mut().enumerate().take(n) {
            let row = &self.vectors[i * n..(i + 1) * n];
            *o = row.iter().zip(w).map(|(v, x)| v * x).sum();
        }
    }

    /// c(t₀ + i·dt) for i = 0 … count−1, handed to `on(i, c)`: the eigenphases advance by one
    /// fixed factor per sample and are re-anchored exactly every 32 samples, so rounding never
    /// exceeds ~32 ulps. Two-level systems take an unrolled path (the hot loop of chevrons).
    pub fn sample_uniform(
        &self,
        w: &[C64],
        t0: f64,
        dt: f64,
        count: usize,
        mut on: impl FnMut(usize, &[C64]),
    ) {
        const ANCHOR: usize = 32;
        let n = self.n;
        if n == 2 {
            let v = &self.vectors;
            let (s0, s1) = (
                C64::from_polar(1.0, -self.values[0] * dt),
                C64::from_polar(1.0, -self.values[1] * dt),
            );
            let (mut a0, mut a1) = (C64::new(0.0, 0.0), C64::new(0.0, 0.0));
            let mut out = [C64::new(0.0, 0.0); 2];
            for i in 0..count {
                if i % ANCHOR == 0 {
                    let t = t0 + i as f64 * dt;
                    a0 = w[0] * C64::from_polar(1.0, -self.values[0] * t);
                    a1 = w[1] * C64::from_polar(1.0, -self.values[1] * t);
                } else {
                    a0 *= s0;
                    a1 *= s1;
                }
                out[0] = v[0] * a0 + v[1] * a1;
                out[1] = v[2] * a0 + v[3] * a1;
                on(i, &out);
            }
            return;
        }
        let step: Vec<C64> = self
            .values
            .iter()
            .map(|l| C64::from_polar(1.0, -l * dt))
            .collect();
        let mut wt = vec![C64::new(0.0, 0.0); n];
        let mut out = vec![C64::new(0.0, 0.0); n];
        for i in 0..count {
            if i % ANCHOR == 0 {
                let t = t0 + i as f64 * dt;
                for k in 0..n {
                    wt[k] = w[k] * C64::from_polar(1.0, -self.values[k] * t);
                }
            } else {
                for k in 0..n {
                    wt[k] *= step[k];
                }
            }
            self.from_eigenbasis(&wt, &mut out);
            on(i, &out);
        }
    }

    /// The propagator U(t) = exp(−iHt), row-major.
    pub fn propagator(&self, t: f64) -> Vec<C64> {
        let n = self.n;
        let mut u = vec![C64::new(0.0, 0.0); n * n];
        for k in 0..n {
            let (s, c) = (self.values[k] * t).sin_cos();
            let ph = C64::new(c, -s);
            for i in 0..n {
                let vik = self.vectors[i * n + k] * ph;
                for j in 0..n {
                    u[i * n + j] += vik * self.vectors[j * n + k].conj();
                }
            }
        }
        u
    }
}

/// out = A·B for row-major square matrices.
pub fn matmul(n: usize, a: &[C64], b: &[C64], out: &mut [C64]) {
    out[..n * n].fill(C64::new(0.0, 0.0));
    for i in 0..n {
        for k in 0..n {
            let aik = a[i * n + k];
            if aik == C64::new(0.0, 0.0) {
                continue;
            }
            for j in 0..n {
                out[i * n + j] += aik * b[k * n + j];
            }
        }
    }
}

/// out = A·B† for row-major square matrices.
pub fn matmul_adjoint(n: usize, a: &[C64], b: &[C64], out: &mut [C64]) {
    for i in 0..n {
        for j in 0..n {
            let mut acc = C64::new(0.0, 0.0);
            for k in 0..n {
                acc += a[i * n + k] * b[j * n + k].conj();
            }
            out[i * n + j] = acc;
        }
    }
}

/// y = A·x for a row-major square matrix.
pub fn matvec(n: usize, a: &[C64], x: &[C64], y: &mut [C64]) {
    for i in 0..n {
        let row = &a[i * n..(i + 1) * n];
        let mut acc = C64::new(0.0, 0.0);
        for (aij, xj) in row.iter().zip(x) {
            acc += aij * xj;
        }
        y[i] = acc;
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn reconstruct(e: &HermitianEigen) -> Vec<C64> {
        let n = e.n();
        let mut h = vec![C64::new(0.0, 0.0); n * n];
        for i in 0..n {
            for j in 0..n {
                for k in 0..n {
                    h[i * n + j] +=
                        e.vectors[i * n + k] * e.values[k] * e.vectors[j * n + k].conj();
                }
            }
        }
        h
    }

    #[test]
    fn two_by_two_closed_form_reconstructs() {
        // Reconstruction H = V Λ V† is the defining property of the decomposition.
        for (a, d, b) in [
            (0.0, -3.0, C64::new(0.5, 0.0)),
            (2.0, 1.0, C64::new(-0.3, 0.7)),
            (-1.0, 4.0, C64::new(0.0, -2.0)),
            (1.0, 1.0, C64::new(0.0, 0.0)),
            (3.0, -1.0, C64::new(0.0, 0.0)),
        ] {
            let h = [C64::new(a, 0.0), b, b.conj(), C64::new(d, 0.0)];
            let e = HermitianEigen::new(2, &h).unwrap();
            let r = reconstruct(&e);
            for (x, y) in r.iter().zip(&h) {
                assert!((x - y).norm() < 1e-13, "{x} vs {y}");
            }
        }
    }

    #[test]
    fn general_reconstructs_and_propagator_is_unitary() {
        let n = 4;
        let mut h = vec![C64::new(0.0, 0.0); n * n];
        for i in 0..n {
            for j in 0..n {
                let v = C64::new(
                    ((i * 7 + j * 3) % 5) as f64 - 2.0,
                    ((i + 2 * j) % 3) as f64 - 1.0,
                );
                if i == j {
                    h[i * n + j] += C64::new(v.re, 0.0);
                } else {
                    h[i * n + j] += v;
                    h[j * n + i] += v.conj();
                }
            }
        }
        let e = HermitianEigen::new(n, &h).unwrap();
        for (x, y) in reconstruct(&e).iter().zip(&h) {
            assert!((x - y).norm() < 1e-12);
        }
        let u = e.propagator(0.37);
        let mut uu = vec![C64::new(0.0, 0.0); n * n];
        matmul_adjoint(n, &u, &u, &mut uu);
        for i in 0..n {
            for j in 0..n {
                let id = if i == j { 1.0 } else { 0.0 };
                assert!((uu[i * n + j] - id).norm() < 1e-13);
            }
        }
    }

    #[test]
    fn rejects_non_hermitian_and_nan() {
        let h = [
            C64::new(0.0, 0.0),
            C64::new(1.0, 0.0),
            C64::new(2.0, 0.0),
            C64::new(0.0, 0.0),
        ];
        assert!(matches!(
            HermitianEigen::new(2, &h),
            Err(Error::NotHermitian { .. })
        ));
        let h = [
            C64::new(f64::NAN, 0.0),
            C64::new(0.0, 0.0),
            C64::new(0.0, 0.0),
            C64::new(0.0, 0.0),
        ];
        assert!(matches!(
            HermitianEigen::new(2, &h),
            Err(Error::NonFinite { .. })
        ));
    }
}
