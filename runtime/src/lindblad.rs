//! Lindblad master-equation machinery for N-level density matrices: dissipators, the commutator hot loop, the dense Liouvillian, propagation by matrix exponential, steady states and density-matrix checks.
//!
//! Conventions (ħ = 1, so H is an angular frequency in rad/s):
//!
//! dρ/dt = −i[H, ρ] + Σ_k (L_k ρ L_k† − ½{L_k†L_k, ρ})
//!
//! (Lindblad, Commun. Math. Phys. 48, 119 (1976); Gorini, Kossakowski & Sudarshan,
//! J. Math. Phys. 17, 821 (1976)).
//!
//! * Density matrices and Hamiltonians passed as slices are dense and row-major:
//!   `rho[i * n + j]` is ρ_ij, so a slice has `n * n` entries.
//! * A [`Jump`] `{ from, to, rate: Γ }` is L = √Γ |to⟩⟨from|: population leaves `from`
//!   at rate Γ and arrives in `to`, and every coherence with `from` decays at Γ/2.
//! * A [`Dephasing`] `{ level: k, rate: γ }` is L = √(2γ) |k⟩⟨k|: every coherence ρ_kj
//!   (j ≠ k) decays at rate γ and populations are untouched. Dephasing on two levels k
//!   and j adds: ρ_kj then decays at γ_k + γ_j.
//! * The Liouvillian superoperator acts on the row-major vectorisation vec(ρ), whose
//!   entry `i * n + j` is ρ_ij.

use std::fmt;

use nalgebra::{DMatrix, DVector, SymmetricEigen};
use num_complex::Complex64 as C64;

/// Largest level count accepted by the dense superoperator methods ([`liouvillian`],
/// [`steady_state`], [`SteadyStateSolver`]): the N²×N² complex matrix for N = 64 already
/// takes 256 MiB, and an LU solve of it takes minutes on a small machine.
pub const MAX_DENSE_LEVELS: usize = 64;

/// Entries of H may differ from the conjugate of their transpose by this much, relative
/// to the largest |H_ij|, before H is rejected as non-Hermitian: loose enough for a
/// Hamiltonian assembled in floating point, tight enough to catch a sign or index error.
const HERMITICITY_TOLERANCE: f64 = 1e-10;

/// Relative mismatch between a requested output time and the grid point a reused
/// propagator reaches below which the grid point is taken (256 ε ≈ 6e-14): it absorbs
/// the rounding of times built by `t0 + k*dt` or by repeated addition, while a
/// genuinely different increment gets its own exponential.
const TIME_GRID_TOLERANCE: f64 = 256.0 * f64::EPSILON;

/// The ways the Lindblad routines reject their input or fail.
#[derive(Debug, Clone, Copy, PartialEq)]
#[non_exhaustive]
pub enum LindbladError {
    /// A model with no levels was given.
    NoLevels,
    /// A level index is not below the number of levels.
    BadLevel {
        /// The offending index.
        index: usize,
        /// The number of levels of the model.
        n: usize,
    },
    /// A jump starts and ends on the same level (that would be dephasing, not decay).
    SelfJump {
        /// The level given as both `from` and `to`.
        level: usize,
    },
    /// A decay or dephasing rate is negative.
    NegativeRate {
        /// Which channel carries the rate.
        channel: Channel,
        /// The rate given, in 1/s.
        rate: f64,
    },
    /// An input holds NaN or an infinity (or a product of inputs overflowed).
    NonFinite {
        /// What the value belongs to.
        what: &'static str,
        /// Flat index of the first bad value within it.
        index: usize,
    },
    /// A slice or matrix has the wrong number of entries.
    LengthMismatch {
        /// What has the wrong length.
        what: &'static str,
        /// The length required.
        expected: usize,
        /// The length given.
        found: usize,
    },
    /// The dissipator was built for a different number of levels than the Hamiltonian.
    LevelCountMismatch {
        /// Levels of the Hamiltonian / density matrix.
        expected: usize,
        /// Levels of the dissipator.
        found: usize,
    },
    /// The Hamiltonian is not Hermitian.
    NotHermitian {
        /// Row of the worst entry.
        row: usize,
        /// Column of the worst entry.
        col: usize,
        /// |H_row,col − conj(H_col,row)| in rad/s.
        deviation: f64,
    },
    /// Too many levels for a dense N²×N² superoperator.
    TooManyLevels {
        /// Levels requested.
        n: usize,
        /// Largest level count supported ([`MAX_DENSE_LEVELS`]).
        max: usize,
    },
    /// An output time is negative.
    NegativeTime {
        /// Position in the list of times.
        index: usize,
        /// The time given, in s.
        time: f64,
    },
    /// The output times are not in non-decreasing order.
    UnsortedTimes {
        /// Position of the first time that is earlier than the one before it.
        index: usize,
        /// The time before it, in s.
        previous: f64,
        /// The time at `index`, in s.
        time: f64,
    },
    /// The steady-state equations have no unique solution.
    Singular {
        /// Levels of the model.
        n: usize,
        /// Smallest elimination pivot relative to the largest entry of the system.
        relative_pivot: f64,
    },
    /// The Hermitian eigensolver did not converge.
    EigenNoConvergence {
        /// Levels of the density matrix.
        n: usize,
    },
}

/// A dissipation channel, named in [`LindbladError::NegativeRate`].
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Channel {
    /// The jump `from` → `to`.
    Jump {
        /// Level the population leaves.
        from: usize,
        /// Level the population arrives in.
        to: usize,
    },
    /// Pure dephasing of one level.
    Dephasing {
        /// The dephased level.
        level: usize,
    },
    /// A phase-noise channel, by its position in the list given.
    PhaseNoise {
        /// Position in the list.
        index: usize,
    },
}

impl fmt::Display for Channel {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Channel::Jump { from, to } => write!(f, "jump {from} -> {to}"),
            Channel::Dephasing { level } => write!(f, "dephasing of level {level}"),
            Channel::PhaseNoise { index } => write!(f, "phase-noise channel #{index}"),
        }
    }
}

impl fmt::Display for LindbladError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match *self {
            LindbladError::NoLevels => {
                write!(f, "the model has no levels: give at least one level")
            }
            LindbladError::BadLevel { index, n } => write!(
                f,
                "level index {index} is out of range for a {n}-level model (valid indices are 0 to {})",
                n.saturating_sub(1)
            ),
            LindbladError::SelfJump { level } => write!(
                f,
                "jump from level {level} to itself: use a Dephasing channel for level {level} instead"
            ),
            LindbladError::NegativeRate { channel, rate } => write!(
                f,
                "{channel} has negative rate {rate} 1/s: rates must be zero or positive"
            ),
            LindbladError::NonFinite { what, index } => write!(
                f,
                "{what} has a non-finite value (NaN or infinity) at flat index {index}: check the inputs it was built from"
            ),
            LindbladError::LengthMismatch {
                what,
                expected,
                found,
            } => write!(
                f,
                "{what} has {found} entries but {expected} are needed (n*n row-major for an n-level matrix)"
            ),
            LindbladError::LevelCountMismatch { expected, found } => write!(
                f,
                "the dissipator was built for {found} levels but the Hamiltonian has {expected}: build both for the same level count"
            ),
            LindbladError::NotHermitian {
                row,
                col,
                deviation,
            } => write!(
                f,
                "the Hamiltonian is not Hermitian: H[{row}][{col}] differs from conj(H[{col}][{row}]) by {deviation:e} rad/s; set each coupling and its conjugate together"
            ),
            LindbladError::TooManyLevels { n, max } => write!(
                f,
                "{n} levels is too many for the dense N^2 x N^2 Liouvillian (at most {max}): integrate the master equation in time with commutator and Dissipator::add_to instead"
            ),
            LindbladError::NegativeTime { index, time } => write!(
                f,
                "output time {index} is negative ({time} s): times are measured from the start of the segment and must be >= 0"
            ),
            LindbladError::UnsortedTimes {
                index,
                previous,
                time,
            } => write!(
                f,
                "output times are not sorted: time {index} ({time} s) comes after {previous} s; sort them in increasing order"
            ),
            LindbladError::Singular { n, relative_pivot } => write!(
                f,
                "the steady-state equations of this {n}-level model are singular (relative pivot {relative_pivot:.1e}): it has more than one steady state, usually because some levels are coupled to the rest neither by the Hamiltonian nor by decay; connect every level, or propagate from a definite initial state with propagate_constant"
            ),
            LindbladError::EigenNoConvergence { n } => write!(
                f,
                "the eigenvalues of the {n}x{n} density matrix did not converge: check it for huge or denormal entries"
            ),
        }
    }
}

impl std::error::Error for LindbladError {}

/// Spontaneous decay `from` → `to` at partial rate `rate` (Γ, 1/s): L = √Γ |to⟩⟨from|.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Jump {
    /// Level the population leaves.
    pub from: usize,
    /// Level the population arrives in.
    pub to: usize,
    /// Partial decay rate Γ in 1/s (≥ 0).
    pub rate: f64,
}

/// Pure dephasing of one level at rate `rate` (γ, 1/s): L = √(2γ) |k⟩⟨k|, so every
/// coherence ρ_kj (j ≠ k) decays as e^{−γt} and populations are unchanged.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Dephasing {
    /// The dephased level k.
    pub level: usize,
    /// Dephasing rate γ of the coherences of level k, in 1/s (≥ 0).
    pub rate: f64,
}

/// The dissipative part D(ρ) = Σ_k (L_k ρ L_k† − ½{L_k†L_k, ρ}) of the master equation,
/// built from jumps and dephasing channels and applied without ever forming dense L_k.
#[derive(Debug, Clone, PartialEq)]
pub struct Dissipator {
    n: usize,
    jumps: Vec<Jump>,
    dephasing: Vec<Dephasing>,
    /// Σ_to Γ for each level: the total decay rate out of it (diagonal of Σ L_k†L_k from jumps).
    out_rate: Vec<f64>,
    /// Σ γ of the dephasing channels on each level.
    dephasing_rate: Vec<f64>,
    /// out_rate/2 + dephasing_rate for each level: ρ_ij (i ≠ j) decays at half_width_i + half_width_j.
    half_width: Vec<f64>,
    /// Extra damping of ρ_ij from phase noise, n×n row-major (empty when there is none).
    noise: Vec<f64>,
}

/// Phase noise of a drive whose phase enters level k's frame phase with weight w_k:
/// L = √γ Σ_k w_k |k⟩⟨k|, so ρ_ij decays at (γ/2)(w_i − w_j)². A laser of Lorentzian FWHM γ
/// (phase diffusion, ⟨Δφ²⟩ = γ|t|) gives exactly this in a rotating frame in which all of that
/// laser's kept couplings are static.
#[derive(Debug, Clone, PartialEq)]
pub struct PhaseNoise {
    /// γ, the FWHM of the drive's line (1/s, ≥ 0).
    pub rate: f64,
    /// w_k for every level.
    pub weights: Vec<f64>,
}

impl Dissipator {
    /// Checks and stores the channels of an `n`-level model. Repeated channels add up.
    ///
    /// Errors: `NoLevels` if `n == 0`, `BadLevel` for an index ≥ n, `SelfJump` for
    /// `from == to`, `NonFinite` / `NegativeRate` for a bad rate.
    pub fn new(
        n: usize,
        jumps: Vec<Jump>,
        dephasing: Vec<Dephasing>,
    ) -> Result<Self, LindbladError> {
        if n == 0 {
            return Err(LindbladError::NoLevels);
        }
        let mut out_rate = vec![0.0; n];
        let mut dephasing_rate = vec![0.0; n];
        for (index, jump) in jumps.iter().enumerate() {
            for level in [jump.from, jump.to] {
                if level >= n {
                    return Err(LindbladError::BadLevel { index: level, n });
                }
            }
            if jump.from == jump.to {
                return Err(LindbladError::SelfJump { level: jump.from });
            }
            check_rate(
                jump.rate,
                Channel::Jump {
                    from: jump.from,
                    to: jump.to,
                },
                "jump rate",
                index,
            )?;
            out_rate[jump.from] += jump.rate;
        }
        for (index, channel) in dephasing.iter().enumerate() {
            if channel.level >= n {
                return Err(LindbladError::BadLevel {
                    index: channel.level,
                    n,
                });
            }
            check_rate(
                channel.rate,
                Channel::Dephasing {
                    level: channel.level,
                },
                "dephasing rate",
                index,
            )?;
            dephasing_rate[channel.level] += channel.rate;
        }
        let half_width = out_rate
            .iter()
            .zip(&dephasing_rate)
            .map(|(g, d)| 0.5 * g + d)
            .collect();
        Ok(Self {
            n,
            jumps,
            dephasing,
            out_rate,
            dephasing_rate,
            half_width,
            noise: Vec::new(),
        })
    }

    /// Add phase-noise channels (see [`PhaseNoise`]).
    ///
    /// Errors: `LengthMismatch` for a weight list of the wrong length, `NonFinite` /
    /// `NegativeRate` for a bad rate or weight.
    pub fn with_phase_noise(mut self, channels: Vec<PhaseNoise>) -> Result<Self, LindbladError> {
        let n = self.n;
        for (index, c) in channels.iter().enumerate() {
            check_len("phase-noise weights", c.weights.len(), n)?;
            check_rate(
                c.rate,
                Channel::PhaseNoise { index },
                "phase-noise rate",
                index,
            )?;
            if c.weights.iter().any(|w| !w.is_finite()) {
                return Err(LindbladError::NonFinite {
                    what: "phase-noise weights",
                    index,
                });
            }
            if c.rate == 0.0 {
                continue;
            }
            if self.noise.is_empty() {
                self.noise = vec![0.0; n * n];
            }
            for i in 0..n {
                for j in 0..n {
                    let dw = c.weights[i] - c.weights[j];
                    self.noise[i * n + j] += 0.5 * c.rate * dw * dw;
                }
            }
        }
        Ok(self)
    }

    /// Number of levels the dissipator was built for.
    pub fn n(&self) -> usize {
        self.n
    }

    /// True when there is no jump and no dephasing channel.
    pub fn is_empty(&self) -> bool {
        self.jumps.is_empty() && self.dephasing.is_empty() && self.noise.is_empty()
    }

    /// The jump channels, as given.
    pub fn jumps(&self) -> &[Jump] {
        &self.jumps
    }

    /// The dephasing channels, as given.
    pub fn dephasing(&self) -> &[Dephasing] {
        &self.dephasing
    }

    /// Total decay rate out of each level, Σ_to Γ(from → to), in 1/s: the population
    /// of level i times entry i is its photon-scattering rate.
    pub fn total_rates(&self) -> Vec<f64> {
        self.out_rate.clone()
    }

    /// Decay rate of the matrix element ρ_ij under this dissipator alone (−D acting on
    /// |i⟩⟨j| projected back on |i⟩⟨j|), in 1/s.
    fn damping(&self, i: usize, j: usize) -> f64 {
        let noise = self.noise.get(i * self.n + j).copied().unwrap_or(0.0);
        if i == j {
            self.out_rate[i]
        } else {
            self.half_width[i] + self.half_width[j] + noise
        }
    }

    /// Adds D(ρ) to `drho` (both n×n row-major) in O(N² + number of channels).
    ///
    /// Each jump f → t feeds Γρ_ff into ρ_tt and damps row and column f by Γ/2; each
    /// dephasing of level k damps row and column k (off the diagonal) by γ. Summing the
    /// per-level widths first makes the damping one pass over ρ whatever the channel count.
    ///
    /// Errors: `LengthMismatch` if either slice is not n*n long.
    pub fn add_to(&self, rho: &[C64], drho: &mut [C64]) -> Result<(), LindbladError> {
        let n = self.n;
        let len = n * n;
        check_len("density matrix", rho.len(), len)?;
        check_len("derivative buffer", drho.len(), len)?;
        for (i, (row_out, row_in)) in drho
            .chunks_exact_mut(n)
            .zip(rho.chunks_exact(n))
            .enumerate()
        {
            let wi = self.half_width[i];
            for ((d, &r), &wj) in row_out.iter_mut().zip(row_in).zip(&self.half_width) {
                *d -= r * (wi + wj);
            }
            // The diagonal decays at the out-rate only: dephasing leaves populations alone,
            // so give back the 2γ_i the row pass took from ρ_ii.
            row_out[i] += row_in[i] * (2.0 * self.dephasing_rate[i]);
        }
        for jump in &self.jumps {
            drho[jump.to * n + jump.to] += rho[jump.from * n + jump.from] * jump.rate;
        }
        for ((d, &r), &w) in drho.iter_mut().zip(rho).zip(&self.noise) {
            *d -= r * w;
        }
        Ok(())
    }
}

fn check_rate(
    rate: f64,
    channel: Channel,
    what: &'static str,
    index: usize,
) -> Result<(), LindbladError> {
    if !rate.is_finite() {
        Err(LindbladError::NonFinite { what, index })
    } else if rate < 0.0 {
        Err(LindbladError::NegativeRate { channel, rate })
    } else {
        Ok(())
    }
}

fn check_len(what: &'static str, found: usize, expected: usize) -> Result<(), LindbladError> {
    if found == expected {
        Ok(())
    } else {
        Err(LindbladError::LengthMismatch {
            what,
            expected,
            found,
        })
    }
}

/// n*n, or an error if that overflows (a level count no slice could match anyway).
fn square_len(what: &'static str, n: usize, found: usize) -> Result<usize, LindbladError> {
    n.checked_mul(n).ok_or(LindbladError::LengthMismatch {
        what,
        expected: usize::MAX,
        found,
    })
}

/// Sets `drho = −i(Hρ − ρH)` for dense row-major n×n `h` and `rho`.
///
/// Works for any square `h` and `rho` (Hermitian or not) with 2N³ complex
/// multiply-adds, looping i-k-j so the inner loop streams contiguous rows of ρ and H.
/// When both are Hermitian, [`commutator_hermitian`] does the same in half the work.
///
/// Errors: `LengthMismatch` if a slice is not n*n long.
pub fn commutator(n: usize, h: &[C64], rho: &[C64], drho: &mut [C64]) -> Result<(), LindbladError> {
    let len = square_len("Hamiltonian", n, h.len())?;
    check_len("Hamiltonian", h.len(), len)?;
    check_len("density matrix", rho.len(), len)?;
    check_len("derivative buffer", drho.len(), len)?;
    if n == 0 {
        return Ok(());
    }
    let minus_i = C64::new(0.0, -1.0);
    for ((out, h_row), rho_row) in drho
        .chunks_exact_mut(n)
        .zip(h.chunks_exact(n))
        .zip(rho.chunks_exact(n))
    {
        out.fill(C64::new(0.0, 0.0));
        // (−i)(Hρ − ρH)_ij = Σ_k [(−i H_ik) ρ_kj + (i ρ_ik) H_kj]: folding ±i into the
        // two scalars keeps the inner loop at two complex multiply-adds.
        for (((&h_ik, &rho_ik), rho_k), h_k) in h_row
            .iter()
            .zip(rho_row)
            .zip(rho.chunks_exact(n))
            .zip(h.chunks_exact(n))
        {
            let a = minus_i * h_ik;
            let b = -minus_i * rho_ik;
            for ((o, &r), &hh) in out.iter_mut().zip(rho_k).zip(h_k) {
                *o += a * r + b * hh;
            }
        }
    }
    Ok(())
}

/// out = H·ρ (row-major, n × n), the O(N³) part of the commutator; on x86-64 with AVX2 and FMA
/// (detected at run time) the same loops are compiled for the wider registers.
fn product_into(n: usize, h: &[C64], rho: &[C64], out: &mut [C64]) {
    #[cfg(target_arch = "x86_64")]
    {
        if std::is_x86_feature_detected!("avx2") && std::is_x86_feature_detected!("fma") {
            // SAFETY: the CPU supports the features the function is compiled for.
            unsafe { product_into_avx2(n, h, rho, out) };
            return;
        }
    }
    product_into_portable(n, h, rho, out)
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2,fma")]
fn product_into_avx2(n: usize, h: &[C64], rho: &[C64], out: &mut [C64]) {
    product_into_portable(n, h, rho, out)
}

#[inline(always)]
fn product_into_portable(n: usize, h: &[C64], rho: &[C64], out: &mut [C64]) {
    for (row, h_row) in out.chunks_exact_mut(n).zip(h.chunks_exact(n)) {
        row.fill(C64::new(0.0, 0.0));
        for (&h_ik, rho_k) in h_row.iter().zip(rho.chunks_exact(n)) {
            for (o, &r) in row.iter_mut().zip(rho_k) {
                *o += h_ik * r;
            }
        }
    }
}

/// One off-diagonal entry of a sparse Hermitian H: (upper, lower, H[upper, lower] in rad/s), its
/// conjugate standing at H[lower, upper].
pub(crate) type Coupling = (usize, usize, C64);

/// out = H·ρ (row-major, n × n) for H given by its real diagonal and its couplings (upper, lower,
/// H[upper, lower]), each with its conjugate at H[lower, upper]: row i of the product is
/// H_ii ρ[i, :] plus H_ul ρ[l, :] for every coupling into row u = i, so every inner loop streams
/// one contiguous row. On x86-64 with AVX2 and FMA (detected at run time) the same loops are
/// compiled for the wider registers.
fn sparse_product_into(
    n: usize,
    diag: &[f64],
    couplings: &[Coupling],
    rho: &[C64],
    out: &mut [C64],
) {
    #[cfg(target_arch = "x86_64")]
    {
        if std::is_x86_feature_detected!("avx2") && std::is_x86_feature_detected!("fma") {
            // SAFETY: the CPU supports the features the function is compiled for.
            unsafe { sparse_product_into_avx2(n, diag, couplings, rho, out) };
            return;
        }
    }
    sparse_product_into_portable(n, diag, couplings, rho, out)
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2,fma")]
fn sparse_product_into_avx2(
    n: usize,
    diag: &[f64],
    couplings: &[Coupling],
    rho: &[C64],
    out: &mut [C64],
) {
    sparse_product_into_portable(n, diag, couplings, rho, out)
}

#[inline(always)]
fn sparse_product_into_portable(
    n: usize,
    diag: &[f64],
    couplings: &[Coupling],
    rho: &[C64],
    out: &mut [C64],
) {
    for ((row, rho_row), &d) in out.chunks_exact_mut(n).zip(rho.chunks_exact(n)).zip(diag) {
        for (o, &r) in row.iter_mut().zip(rho_row) {
            *o = r * d;
        }
    }
    for &(u, l, v) in couplings {
        for (row, from, value) in [(u, l, v), (l, u, v.conj())] {
            let src = &rho[from * n..(from + 1) * n];
            for (o, &r) in out[row * n..(row + 1) * n].iter_mut().zip(src) {
                *o += value * r;
            }
        }
    }
}

/// Overwrites M (row-major n × n) with −i(M − M†), Hermitian by construction.
fn minus_i_anti_hermitian_part(n: usize, m: &mut [C64]) {
    for i in 0..n {
        let m_ii = m[i * n + i];
        m[i * n + i] = C64::new(2.0 * m_ii.im, 0.0);
        for j in (i + 1)..n {
            let m_ij = m[i * n + j];
            let m_ji = m[j * n + i];
            let diff = m_ij - m_ji.conj();
            let d_ij = C64::new(diff.im, -diff.re);
            m[i * n + j] = d_ij;
            m[j * n + i] = d_ij.conj();
        }
    }
}

/// Sets `drho = −i(Hρ − ρH)` for a Hermitian H given sparsely — its real diagonal `diag`
/// (rad/s) and its `couplings` (upper, lower, H[upper, lower]) with upper ≠ lower, entries for
/// the same pair adding — and a Hermitian ρ, in N(N + 2·couplings) complex multiply-adds
/// instead of the N³ of [`commutator_hermitian`]. An atom in a few fields has a handful of
/// couplings per level (the 24 sublevels of a D line in two beams have about 20 in all), so
/// this is the master equation's hot loop for large sparse models.
///
/// Callers pass slices of the right lengths and indices below n (the solver builds them from a
/// checked Hamiltonian); anything else panics on indexing.
pub(crate) fn commutator_sparse_hermitian(
    n: usize,
    diag: &[f64],
    couplings: &[Coupling],
    rho: &[C64],
    drho: &mut [C64],
) {
    debug_assert!(diag.len() == n && rho.len() == n * n && drho.len() == n * n);
    debug_assert!(couplings.iter().all(|&(u, l, _)| u < n && l < n && u != l));
    sparse_product_into(n, diag, couplings, rho, drho);
    minus_i_anti_hermitian_part(n, drho);
}

/// Sets `drho = −i(Hρ − ρH)` assuming both `h` and `rho` are Hermitian, in N³ complex
/// multiply-adds instead of 2N³.
///
/// For Hermitian H and ρ, ρH = (Hρ)†, so only M = Hρ is formed and
/// −i(M − M†) is read off it. The result is exactly Hermitian, even when rounding has
/// made ρ very slightly non-Hermitian. With a non-Hermitian argument the result is
/// −i(Hρ − ρ†H†), not the commutator: use [`commutator`] then.
///
/// Errors: `LengthMismatch` if a slice is not n*n long.
pub fn commutator_hermitian(
    n: usize,
    h: &[C64],
    rho: &[C64],
    drho: &mut [C64],
) -> Result<(), LindbladError> {
    let len = square_len("Hamiltonian", n, h.len())?;
    check_len("Hamiltonian", h.len(), len)?;
    check_len("density matrix", rho.len(), len)?;
    check_len("derivative buffer", drho.len(), len)?;
    if n == 0 {
        return Ok(());
    }
    product_into(n, h, rho, drho);
    // drho holds M = Hρ; overwrite in place with −i(M − M†).
    minus_i_anti_hermitian_part(n, drho);
    Ok(())
}

/// Checks a Hamiltonian slice for the dense superoperator routines: length, finiteness,
/// Hermiticity, and that the dissipator has the same level count.
fn check_model(n: usize, h: &[C64], d: &Dissipator) -> Result<(), LindbladError> {
    if n == 0 {
        return Err(LindbladError::NoLevels);
    }
    if n > MAX_DENSE_LEVELS {
        return Err(LindbladError::TooManyLevels {
            n,
            max: MAX_DENSE_LEVELS,
        });
    }
    check_len("Hamiltonian", h.len(), n * n)?;
    if d.n() != n {
        return Err(LindbladError::LevelCountMismatch {
            expected: n,
            found: d.n(),
        });
    }
    if let Some(index) = h
        .iter()
        .position(|z| !z.re.is_finite() || !z.im.is_finite())
    {
        return Err(LindbladError::NonFinite {
            what: "Hamiltonian",
            index,
        });
    }
    // |re| + |im| bounds the modulus within √2 and avoids a hypot per entry on the hot path of
    // steady-state sweeps.
    let scale = h.iter().map(|z| z.l1_norm()).fold(0.0, f64::max);
    let mut worst = (0, 0, 0.0);
    for i in 0..n {
        for j in i..n {
            let dev = (h[i * n + j] - h[j * n + i].conj()).l1_norm();
            if dev > worst.2 {
                worst = (i, j, dev);
            }
        }
    }
    if worst.2 > HERMITICITY_TOLERANCE * scale {
        return Err(LindbladError::NotHermitian {
            row: worst.0,
            col: worst.1,
            deviation: worst.2,
        });
    }
    Ok(())
}

/// Calls `add(row, col, value)` for every nonzero contribution to the Liouvillian of
/// (h, d) in the row-major vec(ρ) basis; contributions to the same entry must be summed.
///
/// Row-major vec obeys vec(AXB) = (A ⊗ Bᵀ) vec(X), so −iHρ gives −iH_ik at
/// ((i,j),(k,j)) and +iρH gives +iH_kj at ((i,j),(i,k)).
fn for_each_liouvillian_entry(
    n: usize,
    h: &[C64],
    d: &Dissipator,
    mut add: impl FnMut(usize, usize, C64),
) {
    for i in 0..n {
        for j in 0..n {
            let p = i * n + j;
            for k in 0..n {
                let h_ik = h[i * n + k];
                if h_ik != C64::new(0.0, 0.0) {
                    add(p, k * n + j, C64::new(h_ik.im, -h_ik.re));
                }
                let h_kj = h[k * n + j];
                if h_kj != C64::new(0.0, 0.0) {
                    add(p, i * n + k, C64::new(-h_kj.im, h_kj.re));
                }
            }
            let w = d.damping(i, j);
            if w != 0.0 {
                add(p, p, C64::new(-w, 0.0));
            }
        }
    }
    for jump in d.jumps() {
        add(
            jump.to * n + jump.to,
            jump.from * n + jump.from,
            C64::new(jump.rate, 0.0),
        );
    }
}

/// The Liouvillian superoperator 𝓛 (N²×N²) of the master equation with Hamiltonian `h`
/// (n×n row-major, Hermitian, rad/s) and dissipator `d`, acting on the row-major
/// vec(ρ) (entry `i * n + j` is ρ_ij): d vec(ρ)/dt = 𝓛 vec(ρ).
///
/// Errors: `NoLevels`, `TooManyLevels` (n > [`MAX_DENSE_LEVELS`]), `LengthMismatch`,
/// `LevelCountMismatch`, `NonFinite`, `NotHermitian`.
pub fn liouvillian(n: usize, h: &[C64], d: &Dissipator) -> Result<DMatrix<C64>, LindbladError> {
    check_model(n, h, d)?;
    let m = n * n;
    let mut l = DMatrix::<C64>::zeros(m, m);
    for_each_liouvillian_entry(n, h, d, |row, col, v| l[(row, col)] += v);
    Ok(l)
}

/// Checks output times: finite, ≥ 0, non-decreasing.
fn check_times(times: &[f64]) -> Result<(), LindbladError> {
    let mut previous = 0.0;
    for (index, &time) in times.iter().enumerate() {
        if !time.is_finite() {
            return Err(LindbladError::NonFinite {
                what: "output times",
                index,
            });
        }
        if time < 0.0 {
            return Err(LindbladError::NegativeTime { index, time });
        }
        if time < previous {
            return Err(LindbladError::UnsortedTimes {
                index,
                previous,
                time,
            });
        }
        previous = time;
    }
    Ok(())
}

/// A dense complex matrix held as separate real and imaginary parts, so that products
/// run on nalgebra's cache-blocked real GEMM: four real products are an order of
/// magnitude faster than nalgebra's generic complex product (about 4 ms against
/// 50 ms for 256×256), and the Padé exponential is made of nothing but such products.
struct Split {
    re: DMatrix<f64>,
    im: DMatrix<f64>,
}

impl Split {
    fn mul(&self, rhs: &Split) -> Split {
        let m = self.re.nrows();
        let mut re = DMatrix::zeros(m, m);
        let mut im = DMatrix::zeros(m, m);
        re.gemm(1.0, &self.re, &rhs.re, 0.0);
        re.gemm(-1.0, &self.im, &rhs.im, 1.0);
        im.gemm(1.0, &self.re, &rhs.im, 0.0);
        im.gemm(1.0, &self.im, &rhs.re, 1.0);
        Split { re, im }
    }

    /// `identity * I + Σ c·X` over `terms`.
    fn combine(identity: f64, terms: &[(f64, &Split)]) -> Split {
        let m = terms[0].1.re.nrows();
        let mut re = DMatrix::identity(m, m) * identity;
        let mut im = DMatrix::zeros(m, m);
        for &(coef, x) in terms {
            re.zip_apply(&x.re, |e, v| *e += coef * v);
            im.zip_apply(&x.im, |e, v| *e += coef * v);
        }
        Split { re, im }
    }

    fn plus(mut self, rhs: &Split) -> Split {
        self.re += &rhs.re;
        self.im += &rhs.im;
        self
    }

    /// Makes the propagator exactly trace preserving: for every column, the entries in the
    /// rows of the populations ρ_ii must sum to 1 on population columns and to 0 elsewhere;
    /// the defect is spread evenly over the population rows.
    fn restore_trace(&mut self, trace: &TraceRows) {
        let m = self.re.nrows();
        let inv = 1.0 / trace.rows.len() as f64;
        for q in 0..m {
            let target = if trace.is_row[q] { 1.0 } else { 0.0 };
            let (mut re, mut im) = (-target, 0.0);
            for &r in &trace.rows {
                re += self.re[(r, q)];
                im += self.im[(r, q)];
            }
            for &r in &trace.rows {
                self.re[(r, q)] -= re * inv;
                self.im[(r, q)] -= im * inv;
            }
        }
    }

    fn one_norm(&self) -> f64 {
        let m = self.re.nrows();
        (0..m)
            .map(|j| {
                (0..m)
                    .map(|i| self.re[(i, j)].hypot(self.im[(i, j)]))
                    .sum::<f64>()
            })
            .fold(0.0, f64::max)
    }
}

/// Where the populations ρ_ii sit in a (possibly reduced) vec(ρ) whose propagator preserves
/// their sum, the trace.
#[derive(Debug, Clone)]
struct TraceRows {
    /// Their positions.
    rows: Vec<usize>,
    /// For every position, whether it holds a population.
    is_row: Vec<bool>,
}

impl TraceRows {
    /// The populations among the vec(ρ) indices `kept` (row-major i·n + j) of n×n matrices;
    /// `None` when none is kept (then there is no trace to preserve).
    fn new(n: usize, kept: impl Iterator<Item = usize>) -> Option<Self> {
        let is_row: Vec<bool> = kept.map(|k| k % (n + 1) == 0).collect();
        let rows: Vec<usize> = (0..is_row.len()).filter(|&p| is_row[p]).collect();
        (!rows.is_empty()).then_some(Self { rows, is_row })
    }
}

/// Padé coefficients b_0..b_m of the diagonal [m/m] approximant to eˣ, and the largest
/// ‖A‖₁ for which each order reaches double precision (Higham, SIAM J. Matrix Anal.
/// Appl. 26, 1179 (2005), Table 2.3).
const PADE_3: [f64; 4] = [120.0, 60.0, 12.0, 1.0];
const PADE_5: [f64; 6] = [30240.0, 15120.0, 3360.0, 420.0, 30.0, 1.0];
const PADE_7: [f64; 8] = [
    17297280.0, 8648640.0, 1995840.0, 277200.0, 25200.0, 1512.0, 56.0, 1.0,
];
const PADE_9: [f64; 10] = [
    17643225600.0,
    8821612800.0,
    2075673600.0,
    302702400.0,
    30270240.0,
    2162160.0,
    110880.0,
    3960.0,
    90.0,
    1.0,
];
const PADE_13: [f64; 14] = [
    64764752532480000.0,
    32382376266240000.0,
    7771770303897600.0,
    1187353796428800.0,
    129060195264000.0,
    10559470521600.0,
    670442572800.0,
    33522128640.0,
    1323241920.0,
    40840800.0,
    960960.0,
    16380.0,
    182.0,
    1.0,
];
const THETA: [f64; 5] = [
    1.495585217958292e-2,
    2.539_398_330_063_23e-1,
    9.504178996162932e-1,
    2.097847961257068e0,
    5.371920351148152e0,
];

/// exp(𝓛·dt) by scaling and squaring with a diagonal Padé approximant of order 3, 5, 7,
/// 9 or 13 (Higham, SIAM J. Matrix Anal. Appl. 26, 1179 (2005), Algorithm 2.3). `step`
/// is the index of the output time that needs it, for the error.
///
/// With `trace` given (𝓛 is known to preserve the sum of the populations at those rows)
/// the approximant and every square are projected back onto trace preservation: each
/// squaring would otherwise double the rounding error of the eigenvalue 1 that carries
/// the steady state, so a step of ‖𝓛·dt‖ ~ 10¹⁸ would lose the whole population.
fn exp_step(
    l: &DMatrix<C64>,
    dt: f64,
    step: usize,
    trace: Option<&TraceRows>,
) -> Result<DMatrix<C64>, LindbladError> {
    let m = l.nrows();
    let mut a = Split {
        re: l.map(|z| z.re * dt),
        im: l.map(|z| z.im * dt),
    };
    let norm = a.one_norm();
    let overflow = LindbladError::NonFinite {
        what: "propagator exp(L*dt) (L*dt overflowed); output time",
        index: step,
    };
    if !norm.is_finite() {
        return Err(overflow);
    }
    let mut squarings = 0;
    let (u, v) = if let Some(order) = THETA[..4].iter().position(|&theta| norm <= theta) {
        let b: &[f64] = [&PADE_3[..], &PADE_5, &PADE_7, &PADE_9][order];
        // Even powers A², A⁴, … as far as this order needs.
        let a2 = a.mul(&a);
        let mut powers = vec![a2];
        while powers.len() < b.len() / 2 - 1 {
            let next = powers[powers.len() - 1].mul(&powers[0]);
            powers.push(next);
        }
        let odd: Vec<(f64, &Split)> = powers
            .iter()
            .enumerate()
            .map(|(k, p)| (b[2 * k + 3], p))
            .collect();
        let even: Vec<(f64, &Split)> = powers
            .iter()
            .enumerate()
            .map(|(k, p)| (b[2 * k + 2], p))
            .collect();
        (
            a.mul(&Split::combine(b[1], &odd)),
            Split::combine(b[0], &even),
        )
    } else {
        // norm is finite, so this is at most ~1030 and the cast cannot truncate.
        squarings = (norm / THETA[4]).log2().ceil().max(0.0) as i32;
        let scale = 2f64.powi(-squarings);
        a.re *= scale;
        a.im *= scale;
        let b = &PADE_13;
        let a2 = a.mul(&a);
        let a4 = a2.mul(&a2);
        let a6 = a4.mul(&a2);
        let u_high = Split::combine(0.0, &[(b[13], &a6), (b[11], &a4), (b[9], &a2)]);
        let u_inner = a6.mul(&u_high).plus(&Split::combine(
            b[1],
            &[(b[7], &a6), (b[5], &a4), (b[3], &a2)],
        ));
        let v_high = Split::combine(0.0, &[(b[12], &a6), (b[10], &a4), (b[8], &a2)]);
        let v = a6.mul(&v_high).plus(&Split::combine(
            b[0],
            &[(b[6], &a6), (b[4], &a4), (b[2], &a2)],
        ));
        (a.mul(&u_inner), v)
    };
    // r = (V − U)⁻¹ (V + U), solved row-major with the same elimination as the steady state.
    let mut q = vec![C64::new(0.0, 0.0); m * m];
    let mut x = vec![C64::new(0.0, 0.0); m * m];
    for i in 0..m {
        for j in 0..m {
            let uu = C64::new(u.re[(i, j)], u.im[(i, j)]);
            let vv = C64::new(v.re[(i, j)], v.im[(i, j)]);
            q[i * m + j] = vv - uu;
            x[i * m + j] = vv + uu;
        }
    }
    eliminate(&mut q, &mut x, m, m);
    let mut r = Split {
        re: DMatrix::from_fn(m, m, |i, j| x[i * m + j].re),
        im: DMatrix::from_fn(m, m, |i, j| x[i * m + j].im),
    };
    if let Some(t) = trace {
        r.restore_trace(t);
    }
    for _ in 0..squarings {
        r = r.mul(&r);
        if let Some(t) = trace {
            r.restore_trace(t);
        }
    }
    let p = DMatrix::from_fn(m, m, |i, j| C64::new(r.re[(i, j)], r.im[(i, j)]));
    if p.iter().all(|z| z.re.is_finite() && z.im.is_finite()) {
        Ok(p)
    } else {
        Err(overflow)
    }
}

/// The level count n if `l` is an n²×n² superoperator that preserves the trace (its
/// diagonal rows sum to zero in every column, to rounding), as every Lindblad
/// Liouvillian does.
fn trace_preserving_levels(l: &DMatrix<C64>) -> Option<usize> {
    let m = l.nrows();
    let n = m.isqrt();
    if n == 0 || n * n != m {
        return None;
    }
    let scale = l.iter().map(|z| z.norm()).fold(0.0, f64::max);
    let preserving = (0..m).all(|q| {
        let defect: C64 = (0..n).map(|i| l[(i * (n + 1), q)]).sum();
        defect.norm() <= 1e-12 * scale
    });
    preserving.then_some(n)
}

/// Propagates vec(ρ₀) under the constant Liouvillian `l`, returning ρ (n×n row-major,
/// as a flat vector) at each of `times` (s, sorted, ≥ 0, measured from the start of the
/// segment).
///
/// An increment between consecutive times is exponentiated once (scaling and squaring
/// Padé, Higham 2005) and reused for as long as the later times stay on its grid
/// (within ~6e-14 relative, the rounding of the times themselves), so a uniform grid
/// costs one matrix exponential plus one N²×N² matrix-vector product per point. Grid
/// points are computed as start + k·dt, so reuse never accumulates drift; an
/// increment off the grid just gets its own exponential. Cost of one exponential:
/// ~10–20 N²×N² complex products (about 1 ms for N = 8, 50 ms for N = 16).
///
/// Errors: `LengthMismatch` (non-square `l`, or `rho0` not matching it), `NonFinite`,
/// `NegativeTime`, `UnsortedTimes`.
pub fn propagate_constant(
    l: &DMatrix<C64>,
    rho0: &[C64],
    times: &[f64],
) -> Result<Vec<Vec<C64>>, LindbladError> {
    let m = l.nrows();
    check_len("Liouvillian columns", l.ncols(), m)?;
    check_len("initial density matrix", rho0.len(), m)?;
    check_times(times)?;
    let finite = |z: &C64| z.re.is_finite() && z.im.is_finite();
    if let Some(index) = l.iter().position(|z| !finite(z)) {
        return Err(LindbladError::NonFinite {
            what: "Liouvillian (column-major)",
            index,
        });
    }
    if let Some(index) = rho0.iter().position(|z| !finite(z)) {
        return Err(LindbladError::NonFinite {
            what: "initial density matrix",
            index,
        });
    }
    if m == 0 {
        return Ok(vec![Vec::new(); times.len()]);
    }

    let trace = trace_preserving_levels(l).and_then(|n| TraceRows::new(n, 0..m));
    propagate_checked(l, rho0, times, trace.as_ref())
}

/// [`propagate_constant`] on checked input, with the trace rows of `l` if it preserves a trace.
fn propagate_checked(
    l: &DMatrix<C64>,
    rho0: &[C64],
    times: &[f64],
    trace: Option<&TraceRows>,
) -> Result<Vec<Vec<C64>>, LindbladError> {
    let m = l.nrows();
    let mut state = DVector::from_column_slice(rho0);
    let mut next = DVector::<C64>::zeros(m);
    let mut reached = 0.0;
    // The cached propagator exp(𝓛·dt), with the time `anchor` it was first applied from
    // and how often since: grid points are anchor + steps·dt by multiplication, so a
    // long uniform run never accumulates rounding drift.
    let mut cached: Option<(DMatrix<C64>, f64, f64, f64)> = None;
    let mut out = Vec::with_capacity(times.len());
    for (index, &t) in times.iter().enumerate() {
        let tolerance = TIME_GRID_TOLERANCE * t;
        if t - reached > tolerance {
            let grid_point = cached
                .as_ref()
                .map(|&(_, dt, anchor, steps)| anchor + (steps + 1.0) * dt)
                .filter(|&g| (g - t).abs() <= tolerance);
            match (&mut cached, grid_point) {
                (Some((_, _, _, steps)), Some(g)) => {
                    *steps += 1.0;
                    reached = g;
                }
                _ => {
                    let dt = t - reached;
                    cached = Some((exp_step(l, dt, index, trace)?, dt, reached, 1.0));
                    reached = t;
                }
            }
            if let Some((p, ..)) = &cached {
                next.gemv(C64::new(1.0, 0.0), p, &state, C64::new(0.0, 0.0));
                std::mem::swap(&mut state, &mut next);
            }
        }
        out.push(state.as_slice().to_vec());
    }
    Ok(out)
}

/// The entries of vec(ρ) (row-major indices i·n + j, sorted) that the master equation with
/// Hamiltonian `h` (n×n row-major, rad/s) and dissipator `d` can make non-zero from `rho0`:
/// those reachable from ρ₀'s non-zero entries along the Liouvillian's non-zero entries. All
/// others stay exactly zero at every time, because every power of 𝓛 maps vectors supported
/// on the reachable set into it. A conserved quantity makes the set small: with σ⁺ light on
/// Zeeman sublevels, a ρ₀ diagonal in the levels couples only the coherences between levels
/// of equal m_lower (m of a lower level, m − 1 of an upper one).
///
/// The pattern is read off H and the jumps, not off a built Liouvillian: ρ_ij feeds ρ_kj when
/// H_ki ≠ 0 and ρ_ik when H_jk ≠ 0 (k ≠ i, j; each such entry of 𝓛 is one entry of H, so
/// none vanishes by cancellation), and a jump f → t feeds ρ_tt from ρ_ff. Dephasing and phase
/// noise only damp.
///
/// Errors: `LengthMismatch` for slices that are not n*n long.
pub fn reachable(
    n: usize,
    h: &[C64],
    d: &Dissipator,
    rho0: &[C64],
) -> Result<Vec<usize>, LindbladError> {
    let m = square_len("Hamiltonian", n, h.len())?;
    check_len("Hamiltonian", h.len(), m)?;
    check_len("initial density matrix", rho0.len(), m)?;
    if d.n() != n {
        return Err(LindbladError::LevelCountMismatch {
            expected: n,
            found: d.n(),
        });
    }
    let zero = C64::new(0.0, 0.0);
    // neighbours[i]: every k ≠ i with H_ki ≠ 0 (or H_ik ≠ 0: H is Hermitian).
    let neighbours: Vec<Vec<usize>> = (0..n)
        .map(|i| {
            (0..n)
                .filter(|&k| k != i && (h[k * n + i] != zero || h[i * n + k] != zero))
                .collect()
        })
        .collect();
    let mut feeds: Vec<Vec<usize>> = vec![Vec::new(); n];
    for jump in d.jumps().iter().filter(|j| j.rate != 0.0) {
        feeds[jump.from].push(jump.to);
    }
    let mut seen = vec![false; m];
    let mut stack: Vec<usize> = (0..m).filter(|&p| rho0[p] != zero).collect();
    for &p in &stack {
        seen[p] = true;
    }
    let mut visit = |p: usize, stack: &mut Vec<usize>| {
        if !seen[p] {
            seen[p] = true;
            stack.push(p);
        }
    };
    while let Some(p) = stack.pop() {
        let (i, j) = (p / n, p % n);
        for &k in &neighbours[i] {
            visit(k * n + j, &mut stack);
        }
        for &k in &neighbours[j] {
            visit(i * n + k, &mut stack);
        }
        if i == j {
            for &t in &feeds[i] {
                visit(t * n + t, &mut stack);
            }
        }
    }
    Ok((0..m).filter(|&p| seen[p]).collect())
}

/// ρ (n×n row-major) at each of `times` (s, sorted, ≥ 0) under the master equation with the
/// constant Hamiltonian `h` (rad/s) and dissipator `d`, from `rho0`: [`propagate_constant`]
/// of the [`liouvillian`], restricted to the [`reachable`] part of vec(ρ). The rest is zero
/// at every time, so this is exact, and it costs the cube of the reachable dimension instead
/// of N⁶: for σ⁺ pumping on the 24 sublevels of the ⁸⁷Rb D2 line from a diagonal ρ₀, 102 of
/// the 576 entries, about 180 times less work.
///
/// Errors: those of [`liouvillian`] and [`propagate_constant`].
pub fn propagate_lindblad(
    n: usize,
    h: &[C64],
    d: &Dissipator,
    rho0: &[C64],
    times: &[f64],
) -> Result<Vec<Vec<C64>>, LindbladError> {
    check_model(n, h, d)?;
    let m = n * n;
    check_len("initial density matrix", rho0.len(), m)?;
    check_times(times)?;
    if let Some(index) = rho0
        .iter()
        .position(|z| !z.re.is_finite() || !z.im.is_finite())
    {
        return Err(LindbladError::NonFinite {
            what: "initial density matrix",
            index,
        });
    }
    let kept = reachable(n, h, d, rho0)?;
    if kept.len() == m {
        let trace = TraceRows::new(n, 0..m);
        return propagate_checked(&liouvillian(n, h, d)?, rho0, times, trace.as_ref());
    }
    let mut position = vec![usize::MAX; m];
    for (p, &k) in kept.iter().enumerate() {
        position[k] = p;
    }
    let r = kept.len();
    let mut block = DMatrix::<C64>::zeros(r, r);
    for_each_liouvillian_entry(n, h, d, |row, col, v| {
        let (a, b) = (position[row], position[col]);
        if a != usize::MAX && b != usize::MAX {
            block[(a, b)] += v;
        }
    });
    let start: Vec<C64> = kept.iter().map(|&k| rho0[k]).collect();
    // 𝓛 maps the reachable set into itself, so the populations kept there carry the whole
    // trace and the block preserves their sum.
    let trace = TraceRows::new(n, kept.iter().copied());
    let states = if r == 0 {
        vec![Vec::new(); times.len()]
    } else {
        propagate_checked(&block, &start, times, trace.as_ref())?
    };
    Ok(states
        .into_iter()
        .map(|v| {
            let mut full = vec![C64::new(0.0, 0.0); m];
            for (&k, z) in kept.iter().zip(v) {
                full[k] = z;
            }
            full
        })
        .collect())
}

/// Reusable workspace for steady states of models with a fixed level count: holds the
/// N²×N² system and its right-hand side so repeated solves (e.g. a detuning sweep)
/// allocate nothing.
#[derive(Debug, Clone)]
pub struct SteadyStateSolver {
    n: usize,
    /// Row-major N²×N² real system in the Hermitian parameterisation, overwritten by the
    /// elimination.
    a: Vec<f64>,
    /// Right-hand side, overwritten by the real unknowns r.
    r: Vec<f64>,
    /// The solution vec(ρ), row-major.
    x: Vec<C64>,
    /// (i, j) of each vec index i·n + j, so the assembly needs no integer division.
    pairs: Vec<(usize, usize)>,
    /// The last model's system without the contribution of H's diagonal, with the off-diagonal
    /// part of H and the dissipator it was built from: a detuning scan changes only the
    /// diagonal, so the assembly is reused and patched.
    cache: Option<(Vec<C64>, Dissipator, Vec<f64>)>,
}

impl SteadyStateSolver {
    /// The last solution, vec(ρ) row-major (zeros before the first solve).
    pub fn solution(&self) -> &[C64] {
        &self.x
    }

    /// A workspace for `n`-level models.
    ///
    /// Errors: `NoLevels`, `TooManyLevels` (n > [`MAX_DENSE_LEVELS`]).
    pub fn new(n: usize) -> Result<Self, LindbladError> {
        if n == 0 {
            return Err(LindbladError::NoLevels);
        }
        if n > MAX_DENSE_LEVELS {
            return Err(LindbladError::TooManyLevels {
                n,
                max: MAX_DENSE_LEVELS,
            });
        }
        let m = n * n;
        Ok(Self {
            n,
            a: vec![0.0; m * m],
            r: vec![0.0; m],
            x: vec![C64::new(0.0, 0.0); m],
            pairs: (0..n).flat_map(|i| (0..n).map(move |j| (i, j))).collect(),
            cache: None,
        })
    }

    /// Number of levels this workspace solves for.
    pub fn n(&self) -> usize {
        self.n
    }

    /// Add the real-parameterised Liouvillian of (h, d) to `a` (see `solve`).
    /// A steady state is Hermitian, so solve for N² real unknowns r instead of N² complex
    /// ones: r[a·n+a] = ρ_aa, and for a < b r[a·n+b] = Re ρ_ab, r[b·n+a] = Im ρ_ab. The
    /// equations are Re (𝓛ρ)_ij (slot i·n+j) and Im (𝓛ρ)_ij (slot j·n+i) for i ≤ j; the rows
    /// i > j are their complex conjugates. A real system of size N² costs an eighth of the
    /// complex one.
    fn assemble(n: usize, pairs: &[(usize, usize)], h: &[C64], d: &Dissipator, a: &mut [f64]) {
        let m = n * n;
        for_each_liouvillian_entry(n, h, d, |p, q, v| {
            let (i, j) = pairs[p];
            if i > j {
                return;
            }
            let (ka, kb) = pairs[q];
            // ρ_q in terms of r: ρ_aa = r_aa; ρ_ab = r_ab + i r_ba (a < b); ρ_ba = r_ab − i r_ba.
            // Each coefficient is v, i·v or −i·v, written out to avoid complex products.
            let re_row = (i * n + j) * m;
            let im_row = (j * n + i) * m;
            let mut add = |slot: usize, c_re: f64, c_im: f64| {
                a[re_row + slot] += c_re;
                if i < j {
                    a[im_row + slot] += c_im;
                }
            };
            match ka.cmp(&kb) {
                std::cmp::Ordering::Equal => add(q, v.re, v.im),
                std::cmp::Ordering::Less => {
                    add(ka * n + kb, v.re, v.im);
                    add(kb * n + ka, -v.im, v.re);
                }
                std::cmp::Ordering::Greater => {
                    add(kb * n + ka, v.re, v.im);
                    add(ka * n + kb, v.im, -v.re);
                }
            }
        });
    }

    /// Solves 𝓛 vec(ρ) = 0 with Tr ρ = 1 for Hamiltonian `h` (n×n row-major, Hermitian,
    /// rad/s) and dissipator `d`, returning the hermitised ρ (n×n row-major), which
    /// stays valid until the next solve.
    ///
    /// The equation for ρ_00 is replaced by the trace condition: the population
    /// equations sum to zero (trace preservation), so that row is redundant. The system
    /// is solved by Gaussian elimination with partial pivoting, skipping the many zero
    /// entries of the sparse Liouvillian.
    ///
    /// Errors: those of [`liouvillian`], plus `Singular` when the model has no unique
    /// steady state (e.g. decoupled subspaces, or no dissipation at all).
    pub fn solve(&mut self, h: &[C64], d: &Dissipator) -> Result<&[C64], LindbladError> {
        let n = self.n;
        let m = n * n;
        let off_diagonal_equal = |cached: &[C64]| {
            (0..n).all(|i| (0..n).all(|j| i == j || cached[i * n + j] == h[i * n + j]))
        };
        // A finite, real diagonal on an unchanged rest of the model reuses the assembly.
        let real_diagonal = h.len() == m
            && (0..n).all(|k| {
                let z = h[k * n + k];
                z.re.is_finite() && z.im == 0.0
            });
        let hit = real_diagonal
            && self
                .cache
                .as_ref()
                .is_some_and(|(ch, cd, _)| cd == d && off_diagonal_equal(ch));
        if !hit {
            // Full checks (sizes, finiteness, hermiticity); a diagonal imaginary part within
            // the hermiticity tolerance is rounding and is dropped below.
            check_model(n, h, d)?;
            let mut h_off = h.to_vec();
            for k in 0..n {
                h_off[k * n + k] = C64::new(0.0, 0.0);
            }
            self.a.fill(0.0);
            Self::assemble(n, &self.pairs, &h_off, d, &mut self.a);
            self.cache = Some((h_off, d.clone(), self.a.clone()));
        }
        let a = &mut self.a;
        if let Some((_, _, base)) = &self.cache {
            a.copy_from_slice(base);
        }
        // H's diagonal enters only −i(H_ii − H_jj)ρ_ij: with ρ_ij = x + iy, the real equation of
        // (i, j) gains (H_ii − H_jj)·y and the imaginary one −(H_ii − H_jj)·x.
        for i in 0..n {
            for j in i + 1..n {
                let dw = h[i * n + i].re - h[j * n + j].re;
                a[(i * n + j) * m + (j * n + i)] += dw;
                a[(j * n + i) * m + (i * n + j)] -= dw;
            }
        }

        // Replace the ρ_00 equation by the trace condition (the population equations sum to
        // zero, so it is redundant), scaled like the rest so pivoting treats it fairly.
        let scale = a.iter().fold(0.0f64, |s, v| s.max(v.abs()));
        let scale = if scale > 0.0 { scale } else { 1.0 };
        a[..m].fill(0.0);
        for i in 0..n {
            a[i * n + i] = scale;
        }
        let r = &mut self.r;
        r.fill(0.0);
        r[0] = scale;

        let min_pivot = eliminate_real(a, r, m);
        let relative_pivot = min_pivot / scale;
        // A pivot at rounding level means a rank-deficient system (several steady states).
        if relative_pivot <= m as f64 * f64::EPSILON {
            return Err(LindbladError::Singular { n, relative_pivot });
        }
        let x = &mut self.x;
        for i in 0..n {
            x[i * n + i] = C64::new(r[i * n + i], 0.0);
            for j in i + 1..n {
                let z = C64::new(r[i * n + j], r[j * n + i]);
                x[i * n + j] = z;
                x[j * n + i] = z.conj();
            }
        }
        let trace: f64 = (0..n).map(|i| x[i * n + i].re).sum();
        // A genuine density matrix has |ρ_ij| ≤ 1; anything else is the numerical
        // signature of a nearly singular system.
        let plausible = trace.is_finite()
            && trace > 0.0
            && x.iter().all(|z| {
                z.re.is_finite() && z.im.is_finite() && z.norm_sqr() <= (1.0 + 1e-6) * (1.0 + 1e-6)
            });
        if !plausible {
            return Err(LindbladError::Singular { n, relative_pivot });
        }
        for z in x.iter_mut() {
            *z /= trace;
        }
        Ok(x)
    }
}

/// Solves a·y = x in place for a real row-major m×m `a` by Gaussian elimination with partial
/// pivoting, skipping zero entries; returns the smallest |pivot| (0 if `a` is exactly
/// singular, in which case `x` is left unspecified).
fn eliminate_real(a: &mut [f64], x: &mut [f64], m: usize) -> f64 {
    let mut min_pivot = f64::INFINITY;
    for k in 0..m {
        let mut pivot_row = k;
        let mut pivot_size = a[k * m + k].abs();
        for i in k + 1..m {
            let s = a[i * m + k].abs();
            if s > pivot_size {
                pivot_row = i;
                pivot_size = s;
            }
        }
        min_pivot = min_pivot.min(pivot_size);
        if pivot_size == 0.0 {
            return 0.0;
        }
        if pivot_row != k {
            for col in k..m {
                a.swap(k * m + col, pivot_row * m + col);
            }
            x.swap(k, pivot_row);
        }
        let (upper, lower) = a.split_at_mut((k + 1) * m);
        let pivot_tail = &upper[k * m + k..k * m + m];
        let inv = 1.0 / pivot_tail[0];
        let xk = x[k];
        for (off, row) in lower.chunks_exact_mut(m).enumerate() {
            let a_ik = row[k];
            if a_ik == 0.0 {
                continue;
            }
            let factor = a_ik * inv;
            for (e, &p) in row[k..].iter_mut().zip(pivot_tail) {
                *e -= factor * p;
            }
            x[k + 1 + off] -= factor * xk;
        }
    }
    for k in (0..m).rev() {
        let row = &a[k * m..(k + 1) * m];
        let mut acc = x[k];
        for (j, &a_kj) in row.iter().enumerate().skip(k + 1) {
            acc -= a_kj * x[j];
        }
        x[k] = acc / row[k];
    }
    min_pivot
}

/// Solves a·y = x in place by Gaussian elimination with partial pivoting: `a` is
/// row-major m×m, `x` row-major m×r (r right-hand sides) and receives y. Returns the
/// smallest |pivot| (1-norm of the complex value), 0 if `a` is exactly singular (then
/// `x` is meaningless). Rows are updated only where the multiplier is nonzero, which
/// skips most of the work for a sparse Liouvillian.
fn eliminate(a: &mut [C64], x: &mut [C64], m: usize, r: usize) -> f64 {
    let mut min_pivot = f64::INFINITY;
    for k in 0..m {
        let (pivot_row, pivot_size) =
            (k..m)
                .map(|i| (i, a[i * m + k].l1_norm()))
                .fold(
                    (k, -1.0),
                    |best, cur| if cur.1 > best.1 { cur } else { best },
                );
        min_pivot = min_pivot.min(pivot_size);
        if pivot_size == 0.0 {
            return 0.0;
        }
        if pivot_row != k {
            for col in k..m {
                a.swap(k * m + col, pivot_row * m + col);
            }
            for col in 0..r {
                x.swap(k * r + col, pivot_row * r + col);
            }
        }
        let (a_upper, a_lower) = a.split_at_mut((k + 1) * m);
        let pivot_tail = &a_upper[k * m + k..k * m + m];
        let inv_pivot = pivot_tail[0].inv();
        let (x_upper, x_lower) = x.split_at_mut((k + 1) * r);
        let x_k = &x_upper[k * r..];
        for (row, x_row) in a_lower.chunks_exact_mut(m).zip(x_lower.chunks_exact_mut(r)) {
            let a_ik = row[k];
            if a_ik == C64::new(0.0, 0.0) {
                continue;
            }
            let factor = a_ik * inv_pivot;
            for (e, &p) in row[k..].iter_mut().zip(pivot_tail) {
                *e -= factor * p;
            }
            for (e, &p) in x_row.iter_mut().zip(x_k) {
                *e -= factor * p;
            }
        }
    }
    for k in (0..m).rev() {
        let row = &a[k * m..(k + 1) * m];
        let (x_head, x_tail) = x.split_at_mut((k + 1) * r);
        let x_k = &mut x_head[k * r..];
        for (&a_kj, x_j) in row[k + 1..].iter().zip(x_tail.chunks_exact(r)) {
            if a_kj != C64::new(0.0, 0.0) {
                for (e, &p) in x_k.iter_mut().zip(x_j) {
                    *e -= a_kj * p;
                }
            }
        }
        let inv = row[k].inv();
        x_k.iter_mut().for_each(|e| *e *= inv);
    }
    min_pivot
}

/// Steady state ρ (n×n row-major, Tr ρ = 1, Hermitian) of the master equation with
/// Hamiltonian `h` (n×n row-major, rad/s) and dissipator `d`. For many solves at one
/// level count use a [`SteadyStateSolver`], which this wraps.
///
/// Errors: as [`SteadyStateSolver::solve`].
pub fn steady_state(n: usize, h: &[C64], d: &Dissipator) -> Result<Vec<C64>, LindbladError> {
    let mut solver = SteadyStateSolver::new(n)?;
    solver.solve(h, d).map(<[C64]>::to_vec)
}

/// Invariants of a density matrix, from [`check_density`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct DensityReport {
    /// Tr ρ (should be 1).
    pub trace: C64,
    /// max_ij |ρ_ij − conj(ρ_ji)| (should be 0).
    pub hermiticity: f64,
    /// Smallest eigenvalue of the Hermitian part (ρ + ρ†)/2 (should be ≥ 0).
    pub min_eigenvalue: f64,
}

/// Trace, Hermiticity deviation and smallest eigenvalue of ρ (n×n row-major).
///
/// Errors: `NoLevels`, `LengthMismatch`, `NonFinite`, `EigenNoConvergence`.
pub fn check_density(n: usize, rho: &[C64]) -> Result<DensityReport, LindbladError> {
    if n == 0 {
        return Err(LindbladError::NoLevels);
    }
    let len = square_len("density matrix", n, rho.len())?;
    check_len("density matrix", rho.len(), len)?;
    if let Some(index) = rho
        .iter()
        .position(|z| !z.re.is_finite() || !z.im.is_finite())
    {
        return Err(LindbladError::NonFinite {
            what: "density matrix",
            index,
        });
    }
    let trace = (0..n).map(|i| rho[i * n + i]).sum();
    let mut hermiticity: f64 = 0.0;
    let herm = DMatrix::from_fn(n, n, |i, j| {
        hermiticity = hermiticity.max((rho[i * n + j] - rho[j * n + i].conj()).norm());
        0.5 * (rho[i * n + j] + rho[j * n + i].conj())
    });
    // A bounded iteration count turns a pathological input into an error, not a hang.
    let eigen = SymmetricEigen::try_new(herm, f64::EPSILON, 1000 * n)
        .ok_or(LindbladError::EigenNoConvergence { n })?;
    let min_eigenvalue = eigen
        .eigenvalues
        .iter()
        .copied()
        .fold(f64::INFINITY, f64::min);
    Ok(DensityReport {
        trace,
        hermiticity,
        min_eigenvalue,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::time::Instant;

    const Z: C64 = C64::new(0.0, 0.0);

    fn c(re: f64) -> C64 {
        C64::new(re, 0.0)
    }

    /// SplitMix64 (Steele, Lea & Flood, "Fast splittable pseudorandom number
    /// generators", OOPSLA 2014): deterministic seeded inputs without a dependency.
    struct SplitMix64(u64);

    impl SplitMix64 {
        fn next_u64(&mut self) -> u64 {
            self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
            let mut z = self.0;
            z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
            z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
            z ^ (z >> 31)
        }

        /// Uniform in [0, 1).
        fn uniform(&mut self) -> f64 {
            (self.next_u64() >> 11) as f64 / (1u64 << 53) as f64
        }

        /// Uniform in [−1, 1).
        fn symmetric(&mut self) -> f64 {
            2.0 * self.uniform() - 1.0
        }

        fn complex(&mut self) -> C64 {
            C64::new(self.symmetric(), self.symmetric())
        }
    }

    fn random_hermitian(rng: &mut SplitMix64, n: usize, scale: f64) -> Vec<C64> {
        let mut h = vec![Z; n * n];
        for i in 0..n {
            h[i * n + i] = c(scale * rng.symmetric());
            for j in (i + 1)..n {
                let z = rng.complex() * scale;
                h[i * n + j] = z;
                h[j * n + i] = z.conj();
            }
        }
        h
    }

    /// ρ = AA†/Tr(AA†): positive, Hermitian, unit trace.
    fn random_density(rng: &mut SplitMix64, n: usize) -> Vec<C64> {
        let a: Vec<C64> = (0..n * n).map(|_| rng.complex()).collect();
        let mut rho = vec![Z; n * n];
        for i in 0..n {
            for j in 0..n {
                rho[i * n + j] = (0..n).map(|k| a[i * n + k] * a[j * n + k].conj()).sum();
            }
        }
        let tr: f64 = (0..n).map(|i| rho[i * n + i].re).sum();
        rho.iter_mut().for_each(|z| *z /= tr);
        rho
    }

    fn random_dissipator(rng: &mut SplitMix64, n: usize) -> Dissipator {
        let mut jumps = Vec::new();
        for from in 0..n {
            for to in 0..n {
                if from != to && rng.uniform() < 0.5 {
                    jumps.push(Jump {
                        from,
                        to,
                        rate: 0.1 + rng.uniform(),
                    });
                }
            }
        }
        let mut dephasing = Vec::new();
        for level in 0..n {
            if rng.uniform() < 0.5 {
                dephasing.push(Dephasing {
                    level,
                    rate: 0.5 * rng.uniform(),
                });
            }
        }
        Dissipator::new(n, jumps, dephasing).unwrap()
    }

    fn two_level(delta: f64, omega: f64) -> Vec<C64> {
        vec![Z, c(omega / 2.0), c(omega / 2.0), c(-delta)]
    }

    fn decay(gamma: f64) -> Dissipator {
        Dissipator::new(
            2,
            vec![Jump {
                from: 1,
                to: 0,
                rate: gamma,
            }],
            vec![],
        )
        .unwrap()
    }

    fn max_diff(a: &[C64], b: &[C64]) -> f64 {
        a.iter()
            .zip(b)
            .map(|(x, y)| (x - y).norm())
            .fold(0.0, f64::max)
    }

    /// Free decay of an excited two-level atom: ρ_ee(t) = e^{−Γt} and ρ_eg(t) =
    /// ρ_eg(0) e^{−Γt/2} (Weisskopf & Wigner, Z. Phys. 63, 54 (1930); Foot, Atomic
    /// Physics, OUP 2005, ch. 7).
    #[test]
    fn free_decay_is_exponential() {
        let gamma = 2.0 * std::f64::consts::PI * 6.0e6;
        let d = decay(gamma);
        let l = liouvillian(2, &[Z; 4], &d).unwrap();
        // Start in a superposition with ρ_ee = 0.8 so the coherence is tested too.
        let rho0 = [c(0.2), c(0.4), c(0.4), c(0.8)];
        let tau = 1.0 / gamma;
        let times: Vec<f64> = (0..=200).map(|k| k as f64 * 0.05 * tau).collect();
        let out = propagate_constant(&l, &rho0, &times).unwrap();
        for (t, rho) in times.iter().zip(&out) {
            let ee = 0.8 * (-gamma * t).exp();
            let eg = 0.4 * (-0.5 * gamma * t).exp();
            assert!((rho[3].re - ee).abs() <= 1e-12 * ee + 1e-15, "t={t}");
            assert!((rho[1].re - eg).abs() <= 1e-12 * eg + 1e-15, "t={t}");
            assert!((rho[0].re + rho[3].re - 1.0).abs() < 1e-13);
        }
        // Irregular times take the per-increment path and must agree.
        let irregular = [0.0, 0.3 * tau, 0.31 * tau, 2.0 * tau, 2.0 * tau, 7.5 * tau];
        let out = propagate_constant(&l, &rho0, &irregular).unwrap();
        for (t, rho) in irregular.iter().zip(&out) {
            let ee = 0.8 * (-gamma * t).exp();
            assert!((rho[3].re - ee).abs() <= 1e-12 * ee, "t={t}");
        }
    }

    /// The hand-written Padé exponential (Higham, SIAM J. Matrix Anal. Appl. 26, 1179
    /// (2005)) agrees with nalgebra's independent implementation of Al-Mohy & Higham,
    /// SIAM J. Matrix Anal. Appl. 31, 970 (2009), at step sizes that select every Padé
    /// order and several squarings.
    #[test]
    fn pade_exponential_matches_reference() {
        let mut rng = SplitMix64(31);
        for n in [2, 3, 4] {
            let h = random_hermitian(&mut rng, n, 2.0);
            let d = random_dissipator(&mut rng, n);
            let l = liouvillian(n, &h, &d).unwrap();
            let norm = l.one_norm();
            for target in [1e-3, 0.1, 0.5, 1.5, 4.0, 50.0, 3000.0] {
                let dt = target / norm;
                let reference = (&l * c(dt)).exp();
                for trace in [None, TraceRows::new(n, 0..n * n)] {
                    let ours = exp_step(&l, dt, 0, trace.as_ref()).unwrap();
                    let err = (&ours - &reference).one_norm() / reference.one_norm();
                    // Rounding grows with the number of squarings, ~log2(‖L dt‖).
                    assert!(err < 1e-12, "n={n} |L dt|={target}: {err:e}");
                }
            }
        }
    }

    /// Undamped Rabi flopping from the ground state: ρ_ee = sin²(Ωt/2) on resonance
    /// (Rabi, Phys. Rev. 51, 652 (1937)); over 30 periods this checks that the
    /// matrix exponential and its reuse do not accumulate phase error.
    #[test]
    fn rabi_flopping_stays_accurate() {
        let omega = 2.0 * std::f64::consts::PI * 1.0e6;
        let d = Dissipator::new(2, vec![], vec![]).unwrap();
        let l = liouvillian(2, &two_level(0.0, omega), &d).unwrap();
        let rho0 = [c(1.0), Z, Z, Z];
        let times: Vec<f64> = (0..=3000).map(|k| k as f64 * 1e-8).collect();
        let out = propagate_constant(&l, &rho0, &times).unwrap();
        for (t, rho) in times.iter().zip(&out) {
            let expected = (0.5 * omega * t).sin().powi(2);
            assert!((rho[3].re - expected).abs() < 1e-11, "t={t}");
        }
    }

    fn rho_ee_analytic(delta: f64, omega: f64, gamma: f64) -> f64 {
        let s = 2.0 * omega * omega / (gamma * gamma);
        0.5 * s / (1.0 + s + 4.0 * delta * delta / (gamma * gamma))
    }

    /// Two-level steady state ρ_ee = (s/2)/(1 + s + 4Δ²/Γ²), s = 2Ω²/Γ² (Foot, Atomic
    /// Physics, OUP 2005, ch. 7; Metcalf & van der Straten, Laser Cooling and Trapping,
    /// Springer 1999, ch. 2), on a 10 001-point detuning sweep for several Ω, through
    /// the reusable workspace.
    #[test]
    fn two_level_steady_state_matches_bloch_solution() {
        let gamma = 2.0 * std::f64::consts::PI * 6.0e6;
        let d = decay(gamma);
        let mut solver = SteadyStateSolver::new(2).unwrap();
        let mut worst: f64 = 0.0;
        let start = Instant::now();
        for omega in [0.01 * gamma, 0.3 * gamma, gamma, 5.0 * gamma] {
            for k in 0..=10_000 {
                let delta = (k as f64 - 5000.0) * 4e-3 * gamma;
                let rho = solver.solve(&two_level(delta, omega), &d).unwrap();
                let expected = rho_ee_analytic(delta, omega, gamma);
                worst = worst.max((rho[3].re - expected).abs() / expected);
                assert!((rho[0].re + rho[3].re - 1.0).abs() < 1e-14);
            }
        }
        eprintln!(
            "steady state N=2: 4 x 10001 solves in {:?}, worst relative error {worst:.2e}",
            start.elapsed()
        );
        assert!(worst < 1e-12, "worst relative error {worst:e}");
        // The one-shot wrapper agrees with the workspace.
        let one = steady_state(2, &two_level(0.7 * gamma, gamma), &d).unwrap();
        let again = solver.solve(&two_level(0.7 * gamma, gamma), &d).unwrap();
        assert_eq!(one.as_slice(), again);
    }

    /// Power broadening: the FWHM of ρ_ee(Δ) is Γ√(1 + s) (Foot, Atomic Physics, OUP
    /// 2005, ch. 7; Metcalf & van der Straten, Laser Cooling and Trapping, Springer 1999).
    #[test]
    fn power_broadened_linewidth() {
        let gamma = 1.0e7;
        let d = decay(gamma);
        let mut solver = SteadyStateSolver::new(2).unwrap();
        for omega in [0.1 * gamma, gamma, 3.0 * gamma] {
            let s = 2.0 * omega * omega / (gamma * gamma);
            let mut ee = |delta: f64| solver.solve(&two_level(delta, omega), &d).unwrap()[3].re;
            let half = 0.5 * ee(0.0);
            // ρ_ee falls monotonically for Δ > 0: bisect for the half-maximum point.
            let (mut lo, mut hi) = (0.0, 100.0 * gamma);
            for _ in 0..200 {
                let mid = 0.5 * (lo + hi);
                if ee(mid) > half {
                    lo = mid;
                } else {
                    hi = mid;
                }
            }
            let fwhm = lo + hi; // 2 × the half-width at half maximum
            let expected = gamma * (1.0 + s).sqrt();
            assert!((fwhm - expected).abs() < 1e-9 * expected, "Ω={omega}");
        }
    }

    /// Pure dephasing: coherences of the dephased level decay as e^{−γt}, populations
    /// and other coherences stay (Breuer & Petruccione, The Theory of Open Quantum
    /// Systems, OUP 2002, pure-dephasing generator).
    #[test]
    fn dephasing_damps_coherences_only() {
        let gamma = 3.0e5;
        let n = 3;
        let d = Dissipator::new(
            n,
            vec![],
            vec![Dephasing {
                level: 0,
                rate: gamma,
            }],
        )
        .unwrap();
        let l = liouvillian(n, &[Z; 9], &d).unwrap();
        let mut rng = SplitMix64(7);
        let rho0 = random_density(&mut rng, n);
        let times: Vec<f64> = (0..=50).map(|k| k as f64 * 1e-6).collect();
        let out = propagate_constant(&l, &rho0, &times).unwrap();
        for (t, rho) in times.iter().zip(&out) {
            let f = (-gamma * t).exp();
            for i in 0..n {
                for j in 0..n {
                    let factor = if (i == 0) != (j == 0) { f } else { 1.0 };
                    let expected = rho0[i * n + j] * factor;
                    assert!(
                        (rho[i * n + j] - expected).norm() < 1e-13,
                        "t={t} ({i},{j})"
                    );
                }
            }
        }
    }

    /// The superoperator must reproduce the matrix form entrywise: row-major vec obeys
    /// vec(AXB) = (A ⊗ Bᵀ) vec(X) (Horn & Johnson, Topics in Matrix Analysis, CUP 1991,
    /// ch. 4). Also checks both commutator kernels against each other.
    #[test]
    fn liouvillian_matches_matrix_form() {
        let mut rng = SplitMix64(2024);
        for n in 2..=6 {
            let h = random_hermitian(&mut rng, n, 3.0);
            let d = random_dissipator(&mut rng, n);
            // A general (non-Hermitian) ρ exercises every entry of the superoperator.
            let rho: Vec<C64> = (0..n * n).map(|_| rng.complex()).collect();
            let mut direct = vec![Z; n * n];
            commutator(n, &h, &rho, &mut direct).unwrap();
            d.add_to(&rho, &mut direct).unwrap();
            let l = liouvillian(n, &h, &d).unwrap();
            let via_l = &l * DVector::from_column_slice(&rho);
            assert!(max_diff(&direct, via_l.as_slice()) < 1e-12, "n={n}");

            let rho_h = random_density(&mut rng, n);
            let mut full = vec![Z; n * n];
            let mut fast = vec![Z; n * n];
            commutator(n, &h, &rho_h, &mut full).unwrap();
            commutator_hermitian(n, &h, &rho_h, &mut fast).unwrap();
            assert!(max_diff(&full, &fast) < 1e-13, "n={n}");
        }
    }

    /// A random Hermitian H with `k` couplings (some on the same pair, which add), as a dense
    /// matrix and in the sparse form of [`commutator_sparse_hermitian`].
    fn random_sparse_hermitian(
        rng: &mut SplitMix64,
        n: usize,
        k: usize,
    ) -> (Vec<C64>, Vec<f64>, Vec<Coupling>) {
        let diag: Vec<f64> = (0..n).map(|_| 3.0 * rng.symmetric()).collect();
        let mut h = vec![Z; n * n];
        for (i, &d) in diag.iter().enumerate() {
            h[i * n + i] = c(d);
        }
        let mut couplings = Vec::new();
        while couplings.len() < k {
            let (u, l) = (
                (rng.uniform() * n as f64) as usize,
                (rng.uniform() * n as f64) as usize,
            );
            if u == l {
                continue;
            }
            let v = rng.complex();
            h[u * n + l] += v;
            h[l * n + u] += v.conj();
            couplings.push((u, l, v));
        }
        (h, diag, couplings)
    }

    /// The sparse commutator agrees with the dense Hermitian kernel (the same product,
    /// regrouped) on random sparse models, repeated pairs included.
    #[test]
    fn sparse_commutator_matches_dense() {
        let mut rng = SplitMix64(4242);
        for (n, k) in [(2, 1), (3, 4), (7, 5), (24, 22), (24, 60)] {
            let (h, diag, couplings) = random_sparse_hermitian(&mut rng, n, k);
            let rho = random_density(&mut rng, n);
            let (mut dense, mut sparse) = (vec![Z; n * n], vec![Z; n * n]);
            commutator_hermitian(n, &h, &rho, &mut dense).unwrap();
            commutator_sparse_hermitian(n, &diag, &couplings, &rho, &mut sparse);
            assert!(max_diff(&dense, &sparse) < 1e-14, "n={n} k={k}");
        }
    }

    /// Speed sanity, not a timed assertion: the sparse and the dense kernel side by side at
    /// N = 24 for a growing number of couplings, printed with --nocapture; the break-even sets
    /// `Hamiltonian::prefers_sparse`.
    #[test]
    fn sparse_commutator_speed_sanity() {
        let n = 24;
        let mut rng = SplitMix64(77);
        let rho = random_density(&mut rng, n);
        let mut drho = vec![Z; n * n];
        let reps = 2000;
        for k in [22, 72, 144, 288] {
            let (h, diag, couplings) = random_sparse_hermitian(&mut rng, n, k);
            let start = Instant::now();
            for _ in 0..reps {
                commutator_hermitian(n, std::hint::black_box(&h), &rho, &mut drho).unwrap();
            }
            let dense = start.elapsed().as_secs_f64() / reps as f64;
            let start = Instant::now();
            for _ in 0..reps {
                commutator_sparse_hermitian(
                    n,
                    std::hint::black_box(&diag),
                    &couplings,
                    &rho,
                    &mut drho,
                );
            }
            let sparse = start.elapsed().as_secs_f64() / reps as f64;
            eprintln!(
                "N = {n}, {k} couplings (N²/(N + 2k) = {:.1}): dense {:.2} us, sparse {:.2} us",
                (n * n) as f64 / (n + 2 * k) as f64,
                1e6 * dense,
                1e6 * sparse
            );
        }
        assert!(drho.iter().all(|z| z.re.is_finite()));
    }

    /// Three driven pairs (0, 3), (1, 4), (2, 5) whose upper levels decay into two lower ones
    /// each, like σ light on Zeeman sublevels: from a diagonal ρ₀ only the six populations and
    /// the six coherences within the pairs can grow.
    fn three_pairs(rng: &mut SplitMix64) -> (Vec<C64>, Dissipator) {
        let n = 6;
        let mut h = vec![Z; n * n];
        for k in 0..n {
            h[k * n + k] = c(rng.symmetric());
        }
        for (l, u) in [(0, 3), (1, 4), (2, 5)] {
            let v = rng.complex();
            h[u * n + l] = v;
            h[l * n + u] = v.conj();
        }
        let jump = |from, to, rate| Jump { from, to, rate };
        let d = Dissipator::new(
            n,
            vec![
                jump(3, 0, 0.7),
                jump(3, 1, 0.3),
                jump(4, 1, 0.5),
                jump(4, 2, 0.5),
                jump(5, 2, 1.0),
            ],
            vec![Dephasing {
                level: 1,
                rate: 0.2,
            }],
        )
        .unwrap();
        (h, d)
    }

    /// `reachable` finds exactly the block a conserved quantity allows, and propagating that
    /// block alone agrees with the full Liouvillian's exponential (the same Padé algorithm on a
    /// block-diagonal matrix, so to rounding) while the rest stays exactly zero; a ρ₀ with every
    /// entry non-zero takes the full path.
    #[test]
    fn reachable_block_propagation_matches_full() {
        let mut rng = SplitMix64(606);
        let (h, d) = three_pairs(&mut rng);
        let n = 6;
        let mut rho0 = vec![Z; n * n];
        for (k, p) in [(0, 0.5), (1, 0.3), (2, 0.2)] {
            rho0[k * n + k] = c(p);
        }
        let kept = reachable(n, &h, &d, &rho0).unwrap();
        let mut want: Vec<usize> = (0..n).map(|k| k * (n + 1)).collect();
        for (l, u) in [(0, 3), (1, 4), (2, 5)] {
            want.extend([u * n + l, l * n + u]);
        }
        want.sort_unstable();
        assert_eq!(kept, want);
        let times = [0.0, 0.4, 0.8, 1.2, 7.0, 300.0];
        let full = propagate_constant(&liouvillian(n, &h, &d).unwrap(), &rho0, &times).unwrap();
        let block = propagate_lindblad(n, &h, &d, &rho0, &times).unwrap();
        for (a, b) in full.iter().zip(&block) {
            assert!(max_diff(a, b) < 1e-13, "{}", max_diff(a, b));
            for (k, z) in b.iter().enumerate() {
                assert!(kept.contains(&k) || *z == Z, "entry {k} left the block");
            }
            assert!(((0..n).map(|i| b[i * n + i].re).sum::<f64>() - 1.0).abs() < 1e-13);
        }
        let dense = random_density(&mut rng, n);
        assert_eq!(reachable(n, &h, &d, &dense).unwrap().len(), n * n);
        let full = propagate_constant(&liouvillian(n, &h, &d).unwrap(), &dense, &times).unwrap();
        let same = propagate_lindblad(n, &h, &d, &dense, &times).unwrap();
        assert_eq!(full, same);
        assert!(propagate_lindblad(n, &h, &d, &dense[1..], &times).is_err());
        assert!(reachable(n, &h, &decay(1.0), &dense).is_err());
    }

    /// A Lindblad generator is trace preserving and completely positive (Lindblad,
    /// Commun. Math. Phys. 48, 119 (1976); Gorini, Kossakowski & Sudarshan, J. Math.
    /// Phys. 17, 821 (1976)): propagated states keep unit trace, Hermiticity and
    /// non-negative eigenvalues.
    #[test]
    fn propagation_keeps_density_matrix_properties() {
        let mut rng = SplitMix64(99);
        for n in 3..=5 {
            for _ in 0..3 {
                let h = random_hermitian(&mut rng, n, 2.0);
                let d = random_dissipator(&mut rng, n);
                let l = liouvillian(n, &h, &d).unwrap();
                let rho0 = random_density(&mut rng, n);
                let mut times: Vec<f64> = (0..40).map(|k| k as f64 * 0.25).collect();
                times.extend([10.1, 13.0, 40.0, 400.0]);
                for rho in propagate_constant(&l, &rho0, &times).unwrap() {
                    let report = check_density(n, &rho).unwrap();
                    assert!((report.trace - c(1.0)).norm() < 1e-12, "{report:?}");
                    assert!(report.hermiticity < 1e-12, "{report:?}");
                    assert!(report.min_eigenvalue >= -1e-12, "{report:?}");
                }
                // The long-time limit of propagation is the steady state when unique.
                let rho_ss = steady_state(n, &h, &d);
                if let Ok(rho_ss) = rho_ss {
                    let report = check_density(n, &rho_ss).unwrap();
                    assert!(report.min_eigenvalue >= -1e-12, "{report:?}");
                    let mut drho = vec![Z; n * n];
                    commutator(n, &h, &rho_ss, &mut drho).unwrap();
                    d.add_to(&rho_ss, &mut drho).unwrap();
                    assert!(drho.iter().all(|z| z.norm() < 1e-11), "n={n}");
                }
            }
        }
    }

    /// Decoupled subspaces have several steady states (Spohn, Rep. Math. Phys. 10, 189
    /// (1976), on uniqueness of the stationary state): the solver must refuse them.
    #[test]
    fn several_steady_states_are_reported() {
        // Level 2 is coupled to nothing.
        let d = Dissipator::new(
            3,
            vec![Jump {
                from: 1,
                to: 0,
                rate: 1.0,
            }],
            vec![],
        )
        .unwrap();
        let mut h = vec![Z; 9];
        h[1] = c(0.5);
        h[3] = c(0.5);
        let err = steady_state(3, &h, &d).unwrap_err();
        assert!(matches!(err, LindbladError::Singular { n: 3, .. }), "{err}");
        // Coherent drive without any dissipation.
        let empty = Dissipator::new(2, vec![], vec![]).unwrap();
        let err = steady_state(2, &two_level(0.3, 1.0), &empty).unwrap_err();
        assert!(matches!(err, LindbladError::Singular { .. }), "{err}");
        // Two independent decaying pairs 1→0 and 3→2.
        let d = Dissipator::new(
            4,
            vec![
                Jump {
                    from: 1,
                    to: 0,
                    rate: 1.0,
                },
                Jump {
                    from: 3,
                    to: 2,
                    rate: 2.0,
                },
            ],
            vec![],
        )
        .unwrap();
        let err = steady_state(4, &[Z; 16], &d).unwrap_err();
        assert!(matches!(err, LindbladError::Singular { .. }), "{err}");
    }

    /// Bad input gives errors (never panics) whose messages end without a period.
    #[test]
    fn bad_input_is_rejected() {
        let jump = |from, to, rate| Jump { from, to, rate };
        let errors = [
            Dissipator::new(0, vec![], vec![]).unwrap_err(),
            Dissipator::new(2, vec![jump(2, 0, 1.0)], vec![]).unwrap_err(),
            Dissipator::new(2, vec![jump(1, 1, 1.0)], vec![]).unwrap_err(),
            Dissipator::new(2, vec![jump(1, 0, -1.0)], vec![]).unwrap_err(),
            Dissipator::new(2, vec![jump(1, 0, f64::NAN)], vec![]).unwrap_err(),
            Dissipator::new(
                2,
                vec![],
                vec![Dephasing {
                    level: 5,
                    rate: 1.0,
                }],
            )
            .unwrap_err(),
            commutator(2, &[Z; 4], &[Z; 3], &mut [Z; 4]).unwrap_err(),
            commutator(usize::MAX, &[], &[], &mut []).unwrap_err(),
            commutator_hermitian(2, &[Z; 4], &[Z; 4], &mut [Z; 5]).unwrap_err(),
            decay(1.0).add_to(&[Z; 9], &mut [Z; 4]).unwrap_err(),
            liouvillian(3, &[Z; 9], &decay(1.0)).unwrap_err(),
            liouvillian(2, &[Z, c(1.0), c(2.0), Z], &decay(1.0)).unwrap_err(),
            liouvillian(2, &[Z, Z, Z, c(f64::INFINITY)], &decay(1.0)).unwrap_err(),
            steady_state(65, &[], &decay(1.0)).unwrap_err(),
            check_density(2, &[c(f64::NAN), Z, Z, Z]).unwrap_err(),
            check_density(0, &[]).unwrap_err(),
        ];
        let l = liouvillian(2, &[Z; 4], &decay(1.0)).unwrap();
        let rho0 = [Z, Z, Z, c(1.0)];
        let more = [
            propagate_constant(&l, &rho0, &[1.0, 0.5]).unwrap_err(),
            propagate_constant(&l, &rho0, &[-1.0]).unwrap_err(),
            propagate_constant(&l, &rho0, &[f64::NAN]).unwrap_err(),
            propagate_constant(&l, &[Z; 3], &[1.0]).unwrap_err(),
            propagate_constant(&DMatrix::zeros(4, 3), &rho0, &[1.0]).unwrap_err(),
            propagate_constant(&(&l * c(f64::MAX)), &rho0, &[1e300]).unwrap_err(),
        ];
        for err in errors.iter().chain(&more) {
            let msg = err.to_string();
            assert!(!msg.ends_with('.') && !msg.is_empty(), "{msg}");
        }
        // Very long steps (60 squarings) still end in the ground state with unit trace.
        let far = propagate_constant(&l, &rho0, &[1e6, 1e18]).unwrap();
        for rho in &far {
            assert!(
                (rho[0].re - 1.0).abs() < 1e-12 && rho[3].norm() < 1e-12,
                "{rho:?}"
            );
        }
        assert!(propagate_constant(&l, &rho0, &[]).unwrap().is_empty());
    }

    /// total_rates sums the partial rates out of each level (branching ratios add up to
    /// the natural linewidth; Foot, Atomic Physics, OUP 2005, ch. 7), and the scattering
    /// rate Γρ_ee of a weakly driven atom on resonance is Γ s/2 / (1 + s).
    #[test]
    fn total_rates_sum_partial_rates() {
        let d = Dissipator::new(
            3,
            vec![
                Jump {
                    from: 2,
                    to: 0,
                    rate: 2.0,
                },
                Jump {
                    from: 2,
                    to: 1,
                    rate: 3.0,
                },
                Jump {
                    from: 1,
                    to: 0,
                    rate: 0.5,
                },
            ],
            vec![Dephasing {
                level: 0,
                rate: 1.0,
            }],
        )
        .unwrap();
        assert_eq!(d.total_rates(), vec![0.0, 0.5, 5.0]);
        assert!(!d.is_empty() && d.n() == 3 && d.jumps().len() == 3 && d.dephasing().len() == 1);
        let gamma = 2.0;
        let rho = steady_state(2, &two_level(0.0, 0.4), &decay(gamma)).unwrap();
        let s = 2.0 * 0.4f64.powi(2) / gamma.powi(2);
        let scattering = decay(gamma).total_rates()[1] * rho[3].re;
        assert!((scattering - gamma * 0.5 * s / (1.0 + s)).abs() < 1e-14);
    }

    /// Speed sanity, not a timed assertion: the N = 32 commutator does 2N³ complex
    /// multiply-adds (8 flops each; Golub & Van Loan, Matrix Computations, 4th ed.,
    /// JHU Press 2013, ch. 1 flop counts); print the achieved rate so a regression far
    /// below a few GFLOP/s is visible with --nocapture.
    #[test]
    fn commutator_speed_sanity() {
        let n = 32;
        let mut rng = SplitMix64(5);
        let h = random_hermitian(&mut rng, n, 1.0);
        let rho = random_density(&mut rng, n);
        let mut drho = vec![Z; n * n];
        let reps = 300;
        let flops = (reps * 2 * n * n * n * 8) as f64;
        let start = Instant::now();
        for _ in 0..reps {
            commutator(n, std::hint::black_box(&h), &rho, &mut drho).unwrap();
        }
        let full = start.elapsed().as_secs_f64();
        let start = Instant::now();
        for _ in 0..reps {
            commutator_hermitian(n, std::hint::black_box(&h), &rho, &mut drho).unwrap();
        }
        let half = start.elapsed().as_secs_f64();
        eprintln!(
            "commutator N=32: {:.1} us/call, {:.2} GFLOP/s; commutator_hermitian: {:.1} us/call",
            1e6 * full / reps as f64,
            flops / full / 1e9,
            1e6 * half / reps as f64
        );
        assert!(drho.iter().all(|z| z.re.is_finite()));
    }
}
