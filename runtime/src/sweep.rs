//! Parameter sweeps: grids of parameter values, ensembles over a distributed parameter,
//! and their deterministic parallel execution.
//!
//! Coordinates and nodes carry whatever unit the caller's parameter has (rad/s for a
//! detuning, s for a duration, ...); nothing here converts units. Results come back in
//! grid (or node) order and are bit-identical whatever the number of threads, because
//! every point is computed independently and nothing is summed across threads.

use std::convert::Infallible;
use std::fmt;
use std::sync::atomic::{AtomicBool, AtomicUsize, Ordering};

use nalgebra::{DMatrix, SymmetricEigen};
use rayon::prelude::*;

/// Largest number of points a [`Grid`] may have (2³¹ ≈ 2.1·10⁹): past this even one
/// `f64` per point needs 16 GiB, so a larger grid is almost surely a mistake.
pub const MAX_GRID_POINTS: usize = 1 << 31;

/// Largest number of worker threads [`SweepOptions::threads`] accepts.
pub const MAX_THREADS: usize = 1024;

/// Largest Gauss–Hermite rule [`Ensemble::gauss_hermite`] builds.
pub const MAX_GAUSS_HERMITE_NODES: usize = 100;

/// Boltzmann constant k_B in J/K (exact in the SI since 2019; CODATA 2018).
pub const BOLTZMANN: f64 = 1.380_649e-23;

/// What went wrong in building or running a sweep.
///
/// `E` is the error type of the function being swept; construction errors (axes,
/// grids, ensembles) use the default `E = Infallible` and convert to any other `E`
/// with [`SweepError::widen`].
#[non_exhaustive]
#[derive(Debug, Clone, PartialEq)]
pub enum SweepError<E = Infallible> {
    /// The swept function failed at one point; the sweep stopped there.
    Point {
        /// Index of the point in grid order (or node order for ensembles).
        index: usize,
        /// The point's coordinates, one per axis (a single node for ensembles).
        coords: Vec<f64>,
        /// The function's own error.
        error: E,
    },
    /// The cancel flag was raised before all points were computed.
    Cancelled {
        /// How many points had been computed when the sweep stopped.
        done: usize,
    },
    /// The grid has more points than [`MAX_GRID_POINTS`].
    TooLarge {
        /// The number of points requested (saturated at `u128::MAX`).
        points: u128,
        /// The largest number accepted.
        limit: usize,
    },
    /// An axis is unusable.
    InvalidAxis {
        /// The axis name.
        name: String,
        /// What is wrong with it.
        why: &'static str,
    },
    /// A scalar parameter (thread count, mean, σ, node count, axis end point) is out of range.
    InvalidParameter {
        /// The parameter's name.
        name: &'static str,
        /// The rejected value (counts are converted to `f64`).
        value: f64,
        /// What the value must satisfy.
        why: &'static str,
    },
    /// The grid itself is unusable (for example it has no axes).
    InvalidGrid {
        /// What is wrong with it.
        why: &'static str,
    },
    /// An ensemble has no nodes to average over.
    EmptyEnsemble,
    /// The swept function returned vectors of different lengths at two ensemble nodes.
    ResultLength {
        /// Node index of the offending result.
        index: usize,
        /// Length of the result at node 0.
        expected: usize,
        /// Length of the offending result.
        found: usize,
    },
    /// The worker thread pool could not be started.
    ThreadPool {
        /// The operating system's or rayon's reason.
        why: String,
    },
    /// The memory for the results could not be reserved.
    OutOfMemory {
        /// The number of results that did not fit.
        points: usize,
    },
    /// The Gauss–Hermite eigenproblem did not converge (should not happen for n ≤ 100).
    NoConvergence {
        /// The number of nodes requested.
        nodes: usize,
    },
}

impl SweepError<Infallible> {
    /// Re-type a construction error (which never holds a function error) for a sweep
    /// whose function errors are `E`, e.g. to use `?` in a function returning
    /// `Result<_, SweepError<E>>`.
    pub fn widen<E>(self) -> SweepError<E> {
        match self {
            SweepError::Point { error, .. } => match error {},
            SweepError::Cancelled { done } => SweepError::Cancelled { done },
            SweepError::TooLarge { points, limit } => SweepError::TooLarge { points, limit },
            SweepError::InvalidAxis { name, why } => SweepError::InvalidAxis { name, why },
            SweepError::InvalidParameter { name, value, why } => {
                SweepError::InvalidParameter { name, value, why }
            }
            SweepError::InvalidGrid { why } => SweepError::InvalidGrid { why },
            SweepError::EmptyEnsemble => SweepError::EmptyEnsemble,
            SweepError::ResultLength {
                index,
                expected,
                found,
            } => SweepError::ResultLength {
                index,
                expected,
                found,
            },
            SweepError::ThreadPool { why } => SweepError::ThreadPool { why },
            SweepError::OutOfMemory { points } => SweepError::OutOfMemory { points },
            SweepError::NoConvergence { nodes } => SweepError::NoConvergence { nodes },
        }
    }
}

impl<E: fmt::Display> fmt::Display for SweepError<E> {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            SweepError::Point {
                index,
                coords,
                error,
            } => write!(
                f,
                "sweep point {index} at coordinates {coords:?} failed: {error}"
            ),
            SweepError::Cancelled { done } => {
                write!(f, "sweep cancelled after {done} points were computed")
            }
            SweepError::TooLarge { points, limit } => write!(
                f,
                "grid has {points} points, more than the limit of {limit}; use fewer points per axis or split the sweep"
            ),
            SweepError::InvalidAxis { name, why } => write!(f, "axis \"{name}\": {why}"),
            SweepError::InvalidParameter { name, value, why } => {
                write!(f, "sweep parameter {name} = {value}: {why}")
            }
            SweepError::InvalidGrid { why } => write!(f, "invalid grid: {why}"),
            SweepError::EmptyEnsemble => {
                write!(
                    f,
                    "ensemble has no nodes to average over; use at least one sample"
                )
            }
            SweepError::ResultLength {
                index,
                expected,
                found,
            } => write!(
                f,
                "ensemble node {index} returned {found} values but node 0 returned {expected}; return the same number at every node"
            ),
            SweepError::ThreadPool { why } => {
                write!(f, "could not start the sweep's worker threads: {why}")
            }
            SweepError::OutOfMemory { points } => write!(
                f,
                "not enough memory for {points} results; use a coarser grid or split the sweep"
            ),
            SweepError::NoConvergence { nodes } => write!(
                f,
                "Gauss-Hermite eigenproblem for {nodes} nodes did not converge; use fewer nodes"
            ),
        }
    }
}

impl<E: fmt::Display + fmt::Debug> std::error::Error for SweepError<E> {}

/// One named parameter axis: a non-empty list of finite values (the parameter's unit).
#[derive(Debug, Clone, PartialEq)]
pub struct Axis {
    name: String,
    values: Vec<f64>,
}

impl Axis {
    /// An axis with the given values, in the given order (duplicates allowed).
    /// Errors if `values` is empty or holds NaN or ±∞.
    pub fn new(name: impl Into<String>, values: Vec<f64>) -> Result<Self, SweepError> {
        let name = name.into();
        if values.is_empty() {
            return Err(SweepError::InvalidAxis {
                name,
                why: "an axis needs at least one value",
            });
        }
        if values.iter().any(|v| !v.is_finite()) {
            return Err(SweepError::InvalidAxis {
                name,
                why: "axis values must be finite (no NaN or infinity)",
            });
        }
        Ok(Axis { name, values })
    }

    /// `points` equally spaced values from `from` to `to` inclusive (`[from]` when
    /// `points` is 1). The end points are exact; value k is from + (to − from)·k/(points − 1).
    pub fn linspace(
        name: impl Into<String>,
        from: f64,
        to: f64,
        points: usize,
    ) -> Result<Self, SweepError> {
        let name = name.into();
        check_span(&name, from, to, points)?;
        if !(to - from).is_finite() {
            return Err(SweepError::InvalidAxis {
                name,
                why: "the axis span to - from overflows; use smaller end points",
            });
        }
        let last = points - 1;
        let values = (0..points)
            .map(|k| {
                if k == 0 {
                    from
                } else if k == last {
                    to
                } else {
                    from + (to - from) * (k as f64 / last as f64)
                }
            })
            .collect();
        Axis::new(name, values)
    }

    /// `points` geometrically spaced values from `from` to `to` inclusive, both > 0
    /// (the end points themselves, not their logarithms): value k is
    /// from·(to/from)^(k/(points − 1)). The end points are exact.
    pub fn logspace(
        name: impl Into<String>,
        from: f64,
        to: f64,
        points: usize,
    ) -> Result<Self, SweepError> {
        let name = name.into();
        check_span(&name, from, to, points)?;
        if !(from > 0.0 && to > 0.0) {
            return Err(SweepError::InvalidAxis {
                name,
                why: "a logarithmic axis needs both end points positive",
            });
        }
        let last = points - 1;
        let ratio = to / from;
        let values = (0..points)
            .map(|k| {
                if k == 0 {
                    from
                } else if k == last {
                    to
                } else {
                    from * ratio.powf(k as f64 / last as f64)
                }
            })
            .collect();
        Axis::new(name, values)
    }

    /// The axis name.
    pub fn name(&self) -> &str {
        &self.name
    }

    /// The axis values (the parameter's unit).
    pub fn values(&self) -> &[f64] {
        &self.values
    }

    /// Number of values (at least 1).
    pub fn len(&self) -> usize {
        self.values.len()
    }

    /// Always false: an axis has at least one value.
    pub fn is_empty(&self) -> bool {
        self.values.is_empty()
    }
}

fn check_span(name: &str, from: f64, to: f64, points: usize) -> Result<(), SweepError> {
    if points == 0 {
        return Err(SweepError::InvalidAxis {
            name: name.to_owned(),
            why: "an axis needs at least one point",
        });
    }
    if !(from.is_finite() && to.is_finite()) {
        return Err(SweepError::InvalidAxis {
            name: name.to_owned(),
            why: "axis end points must be finite",
        });
    }
    Ok(())
}

/// An N-dimensional grid: every combination of its axes' values, in row-major order
/// (the last axis varies fastest).
#[derive(Debug, Clone, PartialEq)]
pub struct Grid {
    axes: Vec<Axis>,
    len: usize,
}

impl Grid {
    /// A grid over `axes` (at least one, names distinct). Errors with
    /// [`SweepError::TooLarge`] when the product of the axis lengths exceeds
    /// [`MAX_GRID_POINTS`]; the product is formed with checked arithmetic.
    pub fn new(axes: Vec<Axis>) -> Result<Self, SweepError> {
        if axes.is_empty() {
            return Err(SweepError::InvalidGrid {
                why: "a grid needs at least one axis",
            });
        }
        for (k, axis) in axes.iter().enumerate() {
            if axes[..k].iter().any(|a| a.name == axis.name) {
                return Err(SweepError::InvalidAxis {
                    name: axis.name.clone(),
                    why: "two axes share this name; give each swept parameter its own name",
                });
            }
        }
        let points = axes
            .iter()
            .try_fold(1_u128, |acc, a| acc.checked_mul(a.len() as u128))
            .unwrap_or(u128::MAX);
        match usize::try_from(points) {
            Ok(len) if len <= MAX_GRID_POINTS => Ok(Grid { axes, len }),
            _ => Err(SweepError::TooLarge {
                points,
                limit: MAX_GRID_POINTS,
            }),
        }
    }

    /// The axes, in order.
    pub fn axes(&self) -> &[Axis] {
        &self.axes
    }

    /// Number of points: the product of the axis lengths.
    pub fn len(&self) -> usize {
        self.len
    }

    /// Always false: every axis has at least one value.
    pub fn is_empty(&self) -> bool {
        self.len == 0
    }

    /// The axis lengths, in order.
    pub fn shape(&self) -> Vec<usize> {
        self.axes.iter().map(Axis::len).collect()
    }

    /// Coordinates of point `index` (one per axis, in axis order), or `None` past the end.
    pub fn point(&self, index: usize) -> Option<Vec<f64>> {
        if index >= self.len {
            return None;
        }
        let mut coords = Vec::with_capacity(self.axes.len());
        self.fill_point(index, &mut coords);
        Some(coords)
    }

    /// Write the coordinates of point `index` (< len) into `out`, reusing its memory.
    fn fill_point(&self, index: usize, out: &mut Vec<f64>) {
        out.clear();
        out.resize(self.axes.len(), 0.0);
        let mut rest = index;
        // Row-major: peel off the last (fastest) axis first.
        for (slot, axis) in out.iter_mut().zip(&self.axes).rev() {
            let n = axis.values.len();
            *slot = axis.values[rest % n];
            rest /= n;
        }
    }
}

/// How to run a sweep. `Default` gives the current rayon pool, no progress, no cancel.
#[derive(Clone, Copy, Default)]
pub struct SweepOptions<'a> {
    /// Number of worker threads (1 ..= [`MAX_THREADS`]) in a pool built for this sweep;
    /// `None` runs in the current rayon pool (the global one unless called inside another).
    pub threads: Option<usize>,
    /// Called as `progress(done, total)` from worker threads, about a thousand times
    /// per sweep at most (more often only when points are few), and a last time with
    /// `done == total` when the sweep succeeds. Calls from different threads may
    /// arrive slightly out of order.
    pub progress: Option<&'a (dyn Fn(usize, usize) + Sync)>,
    /// When this flag becomes true no new point is started and the sweep returns
    /// [`SweepError::Cancelled`]. Points already running finish first.
    pub cancel: Option<&'a AtomicBool>,
}

impl fmt::Debug for SweepOptions<'_> {
    // By hand because the progress callback has no Debug of its own.
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.debug_struct("SweepOptions")
            .field("threads", &self.threads)
            .field("progress", &self.progress.map(|_| "<callback>"))
            .field("cancel", &self.cancel)
            .finish()
    }
}

/// Results are gathered this many points at a time, so that only the final `Vec<T>`
/// is sized by the grid; each chunk's temporary per-point slots are reused.
const CHUNK: usize = 1 << 14;

/// Aim for at most this many progress calls in a sweep.
const PROGRESS_CALLS: usize = 1000;

/// Run `f` at every point of `grid` in parallel, returning the results in grid order.
///
/// Results are bit-identical for any thread count: each point is computed on its own
/// from its coordinates, and no floating-point value is combined across threads. If
/// `f` fails anywhere, the sweep stops starting new points and returns the failure at
/// the lowest failing index — the same one whatever the thread count — as
/// [`SweepError::Point`] with its coordinates. See [`SweepOptions`] for threads,
/// progress and cancellation. Memory beyond the results is a fixed-size buffer.
pub fn run_grid<T: Send, E: Send>(
    grid: &Grid,
    opts: &SweepOptions<'_>,
    f: impl Fn(&[f64]) -> Result<T, E> + Sync,
) -> Result<Vec<T>, SweepError<E>> {
    run_indexed(
        grid.len(),
        grid.axes.len(),
        opts,
        &|i, buf| {
            grid.fill_point(i, buf);
            f(buf)
        },
        &|i| grid.point(i).unwrap_or_default(),
    )
}

/// Evaluate `eval(i, scratch)` for i in 0..total with the threading, progress,
/// cancellation and first-error rules of [`run_grid`]; `coords(i)` names a failing point.
fn run_indexed<T: Send, E: Send>(
    total: usize,
    dims: usize,
    opts: &SweepOptions<'_>,
    eval: &(impl Fn(usize, &mut Vec<f64>) -> Result<T, E> + Sync),
    coords: &(impl Fn(usize) -> Vec<f64> + Sync),
) -> Result<Vec<T>, SweepError<E>> {
    match opts.threads {
        None => run_here(total, dims, opts, eval, coords),
        Some(n) if n == 0 || n > MAX_THREADS => Err(SweepError::InvalidParameter {
            name: "threads",
            value: n as f64,
            why: "the thread count must be between 1 and 1024; use None for the default pool",
        }),
        Some(n) => {
            let pool = rayon::ThreadPoolBuilder::new()
                .num_threads(n)
                .build()
                .map_err(|e| SweepError::ThreadPool { why: e.to_string() })?;
            pool.install(|| run_here(total, dims, opts, eval, coords))
        }
    }
}

/// The body of [`run_indexed`], in whatever rayon pool is current.
fn run_here<T: Send, E: Send>(
    total: usize,
    dims: usize,
    opts: &SweepOptions<'_>,
    eval: &(impl Fn(usize, &mut Vec<f64>) -> Result<T, E> + Sync),
    coords: &(impl Fn(usize) -> Vec<f64> + Sync),
) -> Result<Vec<T>, SweepError<E>> {
    let mut out: Vec<T> = Vec::new();
    out.try_reserve_exact(total)
        .map_err(|_| SweepError::OutOfMemory { points: total })?;
    let done = AtomicUsize::new(0);
    // Lowest failing index so far: points above it are skipped, points below it still
    // run, so the reported failure is the lowest one in the grid whatever the timing.
    let first_error = AtomicUsize::new(usize::MAX);
    let stride = total.div_ceil(PROGRESS_CALLS).max(1);
    // Count completions in blocks to keep the shared counter off the per-point path,
    // but never in blocks longer than the progress stride.
    let block = stride.min(64);
    let cancelled = || opts.cancel.is_some_and(|c| c.load(Ordering::Relaxed));
    let mut slots: Vec<Option<Result<T, E>>> = Vec::new();
    let mut start = 0;
    while start < total {
        if cancelled() {
            return Err(SweepError::Cancelled {
                done: done.load(Ordering::Relaxed),
            });
        }
        let end = total.min(start + CHUNK);
        slots.clear();
        slots.resize_with(end - start, || None);
        slots.par_chunks_mut(block).enumerate().for_each_init(
            || Vec::with_capacity(dims),
            |buf, (b, chunk)| {
                let base = start + b * block;
                let mut finished = 0;
                for (k, slot) in chunk.iter_mut().enumerate() {
                    let i = base + k;
                    if i > first_error.load(Ordering::Relaxed) || cancelled() {
                        break;
                    }
                    let r = eval(i, buf);
                    if r.is_err() {
                        first_error.fetch_min(i, Ordering::Relaxed);
                    }
                    *slot = Some(r);
                    finished += 1;
                }
                let before = done.fetch_add(finished, Ordering::Relaxed);
                let after = before + finished;
                if let Some(progress) = opts.progress
                    && after / stride > before / stride
                    && after < total
                {
                    progress(after, total);
                }
            },
        );
        let mut skipped = false;
        for (k, slot) in slots.drain(..).enumerate() {
            match slot {
                Some(Ok(v)) => out.push(v),
                // Slots are scanned in index order, so this is the lowest failing index.
                Some(Err(error)) => {
                    let index = start + k;
                    return Err(SweepError::Point {
                        index,
                        coords: coords(index),
                        error,
                    });
                }
                None => skipped = true,
            }
        }
        if skipped {
            // Only cancellation leaves a slot empty without a failure before it.
            return Err(SweepError::Cancelled {
                done: done.load(Ordering::Relaxed),
            });
        }
        start = end;
    }
    if let Some(progress) = opts.progress {
        progress(total, total);
    }
    Ok(out)
}

/// A discrete distribution of one parameter: nodes (the parameter's unit) with
/// non-negative weights summing to 1, for averaging results over, e.g., a Doppler
/// spread of detunings or shot-to-shot intensity noise.
#[derive(Debug, Clone, PartialEq)]
pub struct Ensemble {
    nodes: Vec<f64>,
    weights: Vec<f64>,
}

impl Ensemble {
    /// An ensemble from explicit nodes and weights; the weights (finite, ≥ 0, not all
    /// zero) are rescaled to sum to 1.
    pub fn new(nodes: Vec<f64>, weights: Vec<f64>) -> Result<Self, SweepError> {
        if nodes.is_empty() {
            return Err(SweepError::EmptyEnsemble);
        }
        if nodes.len() != weights.len() {
            return Err(SweepError::InvalidParameter {
                name: "weights",
                value: weights.len() as f64,
                why: "there must be exactly one weight per node",
            });
        }
        if let Some(&bad) = nodes.iter().find(|x| !x.is_finite()) {
            return Err(SweepError::InvalidParameter {
                name: "nodes",
                value: bad,
                why: "ensemble nodes must be finite",
            });
        }
        if let Some(&bad) = weights.iter().find(|w| !(w.is_finite() && **w >= 0.0)) {
            return Err(SweepError::InvalidParameter {
                name: "weights",
                value: bad,
                why: "ensemble weights must be finite and non-negative",
            });
        }
        let sum: f64 = weights.iter().sum();
        if !(sum > 0.0 && sum.is_finite()) {
            return Err(SweepError::InvalidParameter {
                name: "weights",
                value: sum,
                why: "ensemble weights must have a positive, finite sum",
            });
        }
        let weights = weights.into_iter().map(|w| w / sum).collect();
        Ok(Ensemble { nodes, weights })
    }

    /// The n-point Gauss–Hermite rule for a normal distribution N(mean, σ²), n in
    /// 1 ..= [`MAX_GAUSS_HERMITE_NODES`], nodes ascending: Σ wᵢ p(xᵢ) = E[p(x)] exactly
    /// for every polynomial p of degree ≤ 2n − 1 (Abramowitz & Stegun 25.4.46).
    ///
    /// Built by the Golub–Welsch method (Math. Comp. 23, 221 (1969)): the nodes are the
    /// eigenvalues of the Jacobi matrix of the probabilists' Hermite polynomials
    /// (zero diagonal, off-diagonal √k), and each weight is the squared first component
    /// of the normalised eigenvector. σ = 0 puts every node at the mean.
    pub fn gauss_hermite(mean: f64, sigma: f64, n: usize) -> Result<Self, SweepError> {
        if !mean.is_finite() {
            return Err(SweepError::InvalidParameter {
                name: "mean",
                value: mean,
                why: "the mean must be finite",
            });
        }
        if !(sigma.is_finite() && sigma >= 0.0) {
            return Err(SweepError::InvalidParameter {
                name: "sigma",
                value: sigma,
                why: "the standard deviation must be finite and non-negative",
            });
        }
        if n == 0 || n > MAX_GAUSS_HERMITE_NODES {
            return Err(SweepError::InvalidParameter {
                name: "n",
                value: n as f64,
                why: "a Gauss-Hermite rule needs between 1 and 100 nodes",
            });
        }
        let jacobi = DMatrix::from_fn(n, n, |r, c| {
            if r.abs_diff(c) == 1 {
                (r.max(c) as f64).sqrt()
            } else {
                0.0
            }
        });
        let eigen = SymmetricEigen::try_new(jacobi, f64::EPSILON, 100 * n)
            .ok_or(SweepError::NoConvergence { nodes: n })?;
        let mut rule: Vec<(f64, f64)> = (0..n)
            .map(|k| {
                let v0 = eigen.eigenvectors[(0, k)];
                (eigen.eigenvalues[k], v0 * v0)
            })
            .collect();
        if rule.iter().any(|(x, w)| !(x.is_finite() && w.is_finite())) {
            return Err(SweepError::NoConvergence { nodes: n });
        }
        rule.sort_by(|a, b| a.0.total_cmp(&b.0));
        // The exact rule is symmetric about 0: average each node with its mirror so
        // odd central moments vanish exactly and rounding is shared evenly.
        let mirrored: Vec<(f64, f64)> = (0..n)
            .map(|k| {
                let (x, w) = rule[k];
                let (xm, wm) = rule[n - 1 - k];
                (0.5 * (x - xm), 0.5 * (w + wm))
            })
            .collect();
        let sum: f64 = mirrored.iter().map(|r| r.1).sum();
        let nodes: Vec<f64> = mirrored.iter().map(|r| mean + sigma * r.0).collect();
        if nodes.iter().any(|x| !x.is_finite()) {
            return Err(SweepError::InvalidParameter {
                name: "sigma",
                value: sigma,
                why: "mean + sigma * node overflows; use a smaller standard deviation",
            });
        }
        let weights = mirrored.iter().map(|r| r.1 / sum).collect();
        Ok(Ensemble { nodes, weights })
    }

    /// `n` pseudo-random samples of N(mean, σ²) with equal weights 1/n, reproducible
    /// bit for bit on every platform for a given `seed`.
    ///
    /// Uniforms come from xoshiro256** (Blackman & Vigna, ACM Trans. Math. Softw. 47,
    /// 36 (2021)) seeded through SplitMix64 (Steele, Lea & Flood, OOPSLA 2014); normals
    /// from Marsaglia's polar form of the Box–Muller transform (Marsaglia & Bray, SIAM
    /// Rev. 6, 260 (1964)), using only IEEE-exact arithmetic and a logarithm written
    /// here rather than the platform's. The sign of σ does not matter; `n = 0` gives an
    /// empty ensemble (whose [`Ensemble::average`] is an error), and non-finite mean
    /// or σ give non-finite nodes.
    pub fn monte_carlo_normal(mean: f64, sigma: f64, n: usize, seed: u64) -> Self {
        let mut rng = Xoshiro256StarStar::new(seed);
        let mut nodes = Vec::with_capacity(n);
        while nodes.len() < n {
            let (z1, z2) = rng.normal_pair();
            nodes.push(mean + sigma * z1);
            if nodes.len() < n {
                nodes.push(mean + sigma * z2);
            }
        }
        let weights = vec![1.0 / n as f64; n];
        Ensemble { nodes, weights }
    }

    /// The nodes (the parameter's unit).
    pub fn nodes(&self) -> &[f64] {
        &self.nodes
    }

    /// The weights (dimensionless, summing to 1).
    pub fn weights(&self) -> &[f64] {
        &self.weights
    }

    /// Number of nodes.
    pub fn len(&self) -> usize {
        self.nodes.len()
    }

    /// True when there are no nodes (only from `monte_carlo_normal` with n = 0).
    pub fn is_empty(&self) -> bool {
        self.nodes.is_empty()
    }

    /// Weighted average Σ wᵢ f(xᵢ) of a vector-valued `f` over the nodes.
    ///
    /// `f` runs in parallel under `opts` exactly as in [`run_grid`] (a failure is
    /// reported with its node index and `coords = [node]`); the weighted sum is then
    /// taken in node order on one thread, so the result is bit-identical for any
    /// thread count. Every call of `f` must return the same number of values.
    pub fn average<E: Send>(
        &self,
        opts: &SweepOptions<'_>,
        f: impl Fn(f64) -> Result<Vec<f64>, E> + Sync,
    ) -> Result<Vec<f64>, SweepError<E>> {
        if self.nodes.is_empty() {
            return Err(SweepError::EmptyEnsemble);
        }
        let results = run_indexed(self.nodes.len(), 0, opts, &|i, _| f(self.nodes[i]), &|i| {
            vec![self.nodes[i]]
        })?;
        let expected = results.first().map_or(0, Vec::len);
        let mut acc = vec![0.0; expected];
        for (index, (w, r)) in self.weights.iter().zip(&results).enumerate() {
            if r.len() != expected {
                return Err(SweepError::ResultLength {
                    index,
                    expected,
                    found: r.len(),
                });
            }
            for (a, x) in acc.iter_mut().zip(r) {
                *a += w * x;
            }
        }
        Ok(acc)
    }
}

/// rms Doppler detuning spread k·√(k_B T / m) in rad/s, for wave number `wavenumber`
/// k (rad/m), temperature `temperature` T (K) and atomic mass `mass` m (kg): the
/// standard deviation of k·v for a Maxwell–Boltzmann velocity component v.
/// Negative or non-finite inputs give NaN (or ±∞), never a panic.
pub fn doppler_sigma(wavenumber: f64, temperature: f64, mass: f64) -> f64 {
    wavenumber * (BOLTZMANN * temperature / mass).sqrt()
}

/// xoshiro256** generator, written out so that a seed gives the same stream everywhere.
struct Xoshiro256StarStar {
    s: [u64; 4],
}

impl Xoshiro256StarStar {
    /// Fill the state from SplitMix64, which never yields the forbidden all-zero state
    /// for four consecutive outputs.
    fn new(seed: u64) -> Self {
        let mut x = seed;
        let mut splitmix = || {
            x = x.wrapping_add(0x9e37_79b9_7f4a_7c15);
            let mut z = x;
            z = (z ^ (z >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
            z = (z ^ (z >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
            z ^ (z >> 31)
        };
        Xoshiro256StarStar {
            s: [splitmix(), splitmix(), splitmix(), splitmix()],
        }
    }

    fn next_u64(&mut self) -> u64 {
        let s = &mut self.s;
        let result = s[1].wrapping_mul(5).rotate_left(7).wrapping_mul(9);
        let t = s[1] << 17;
        s[2] ^= s[0];
        s[3] ^= s[1];
        s[1] ^= s[2];
        s[0] ^= s[3];
        s[2] ^= t;
        s[3] = s[3].rotate_left(45);
        result
    }

    /// Uniform on [−1, 1) from the top 53 bits.
    fn symmetric_uniform(&mut self) -> f64 {
        (self.next_u64() >> 11) as f64 * (2.0 / (1u64 << 53) as f64) - 1.0
    }

    /// Two independent standard normals by the polar method.
    fn normal_pair(&mut self) -> (f64, f64) {
        loop {
            let u = self.symmetric_uniform();
            let v = self.symmetric_uniform();
            let s = u * u + v * v;
            if s > 0.0 && s < 1.0 {
                let factor = (-2.0 * portable_ln(s) / s).sqrt();
                return (u * factor, v * factor);
            }
        }
    }
}

/// Natural logarithm of a positive, finite, normal (not subnormal) `x` using only +, −, ×, ÷ (all
/// correctly rounded under IEEE 754, so identical on every platform), accurate to a
/// few ulp. The platform's `ln` comes from its C library and may differ in the last
/// bit between systems, which would break seeded reproducibility.
fn portable_ln(x: f64) -> f64 {
    // ln 2 split so that e·LN2_HI is exact for |e| < 2¹¹.
    const LN2_HI: f64 = 6.931_471_803_691_238e-1;
    const LN2_LO: f64 = 1.908_214_929_270_587_7e-10;
    let bits = x.to_bits();
    let mut e = ((bits >> 52) & 0x7ff) as i64 - 1023;
    // Mantissa m ∈ [1, 2), then moved to [√½, √2) so that |s| below is ≤ 0.172.
    let mut m = f64::from_bits((bits & 0x000f_ffff_ffff_ffff) | 0x3ff0_0000_0000_0000);
    if m > std::f64::consts::SQRT_2 {
        m *= 0.5;
        e += 1;
    }
    // ln m = 2 atanh(s) = 2 (s + s³/3 + s⁵/5 + …), s = (m − 1)/(m + 1).
    let s = (m - 1.0) / (m + 1.0);
    let s2 = s * s;
    let mut term = s;
    let mut series = 0.0;
    for k in 0..12 {
        series += term / (2 * k + 1) as f64;
        term *= s2;
    }
    let e = e as f64;
    e * LN2_HI + (2.0 * series + e * LN2_LO)
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::f64::consts::{FRAC_1_SQRT_2, SQRT_2};
    use std::sync::Mutex;

    fn grid_2d() -> Grid {
        Grid::new(vec![
            Axis::linspace("detuning", -1.0, 1.0, 7).unwrap(),
            Axis::logspace("power", 1e-3, 10.0, 5).unwrap(),
        ])
        .unwrap()
    }

    #[test]
    fn axes_are_built_and_validated() {
        let a = Axis::linspace("x", 0.0, 1.0, 5).unwrap();
        assert_eq!(a.values(), &[0.0, 0.25, 0.5, 0.75, 1.0]);
        assert_eq!(Axis::linspace("x", 2.0, 3.0, 1).unwrap().values(), &[2.0]);
        let l = Axis::logspace("p", 1e3, 1e6, 4).unwrap();
        for (v, e) in l.values().iter().zip([1e3, 1e4, 1e5, 1e6]) {
            assert!((v - e).abs() <= 1e-12 * e);
        }
        assert_eq!(*l.values().last().unwrap(), 1e6);
        assert!(Axis::new("x", vec![]).is_err());
        assert!(Axis::new("x", vec![1.0, f64::NAN]).is_err());
        assert!(Axis::linspace("x", 0.0, 1.0, 0).is_err());
        assert!(Axis::linspace("x", f64::NEG_INFINITY, 1.0, 3).is_err());
        assert!(Axis::linspace("x", -f64::MAX, f64::MAX, 3).is_err());
        assert!(Axis::logspace("x", 0.0, 1.0, 3).is_err());
        assert!(Axis::logspace("x", -1.0, -10.0, 3).is_err());
        let e = Axis::new("rabi", vec![]).unwrap_err().to_string();
        assert!(e.contains("rabi") && !e.ends_with('.'), "{e}");
    }

    #[test]
    fn grid_points_are_row_major_with_the_last_axis_fastest() {
        let g = Grid::new(vec![
            Axis::new("a", vec![1.0, 2.0]).unwrap(),
            Axis::new("b", vec![10.0, 20.0, 30.0]).unwrap(),
        ])
        .unwrap();
        assert_eq!(g.len(), 6);
        assert_eq!(g.shape(), vec![2, 3]);
        assert_eq!(g.point(0), Some(vec![1.0, 10.0]));
        assert_eq!(g.point(1), Some(vec![1.0, 20.0]));
        assert_eq!(g.point(3), Some(vec![2.0, 10.0]));
        assert_eq!(g.point(5), Some(vec![2.0, 30.0]));
        assert_eq!(g.point(6), None);
        assert_eq!(g.point(usize::MAX), None);
    }

    #[test]
    fn absurd_or_malformed_grids_are_refused() {
        let big = |name: &str| Axis::linspace(name, 0.0, 1.0, 1 << 16).unwrap();
        let mut axes = vec![big("a"), big("b")];
        // 2³² points: over the limit but no overflow.
        match Grid::new(axes.clone()) {
            Err(SweepError::TooLarge { points, limit }) => {
                assert_eq!(points, 1 << 32);
                assert_eq!(limit, MAX_GRID_POINTS);
            }
            other => panic!("{other:?}"),
        }
        // 2^(16·9) overflows even u128: still an error, not a wrap-around.
        axes = (0..9).map(|k| big(&format!("x{k}"))).collect();
        assert!(matches!(
            Grid::new(axes),
            Err(SweepError::TooLarge {
                points: u128::MAX,
                ..
            })
        ));
        assert!(matches!(
            Grid::new(vec![]),
            Err(SweepError::InvalidGrid { .. })
        ));
        let same = Axis::new("x", vec![1.0]).unwrap();
        assert!(matches!(
            Grid::new(vec![same.clone(), same]),
            Err(SweepError::InvalidAxis { .. })
        ));
    }

    #[test]
    fn results_are_bit_identical_for_any_thread_count() {
        let g = Grid::new(vec![
            Axis::linspace("a", -3.0, 3.0, 101).unwrap(),
            Axis::linspace("b", 0.1, 2.0, 97).unwrap(),
        ])
        .unwrap();
        // Enough floating-point work per point that any reordering would show.
        let f = |c: &[f64]| -> Result<f64, String> {
            let mut acc = 0.0;
            for k in 1..50 {
                acc += (c[0] * k as f64).sin() / (c[1] + k as f64).sqrt();
            }
            Ok(acc)
        };
        let bits = |threads| -> Vec<u64> {
            let opts = SweepOptions {
                threads: Some(threads),
                ..Default::default()
            };
            run_grid(&g, &opts, f)
                .unwrap()
                .into_iter()
                .map(f64::to_bits)
                .collect()
        };
        let one = bits(1);
        assert_eq!(one.len(), g.len());
        assert_eq!(one, bits(2));
        assert_eq!(one, bits(3));
        let default = run_grid(&g, &SweepOptions::default(), f).unwrap();
        assert_eq!(
            one,
            default.into_iter().map(f64::to_bits).collect::<Vec<_>>()
        );
        // Grid order: result k belongs to point k.
        let coords = run_grid(&g, &SweepOptions::default(), |c| {
            Ok::<_, Infallible>(c.to_vec())
        })
        .unwrap();
        assert_eq!(coords[1234], g.point(1234).unwrap());
    }

    #[test]
    fn the_lowest_failing_point_is_reported_with_its_coordinates() {
        let g = grid_2d();
        for threads in [1, 2, 3] {
            let opts = SweepOptions {
                threads: Some(threads),
                ..Default::default()
            };
            let err = run_grid(&g, &opts, |c| {
                if c[0] > 0.0 && c[1] > 0.5 {
                    Err(format!("diverged at {c:?}"))
                } else {
                    Ok(1.0)
                }
            })
            .unwrap_err();
            match &err {
                SweepError::Point {
                    index,
                    coords,
                    error,
                } => {
                    // First point with detuning > 0 (1/3, index 4 of 7) and power > 0.5
                    // (1, index 3 of 5).
                    assert_eq!(*index, 4 * 5 + 3);
                    assert_eq!(coords, &g.point(23).unwrap());
                    assert!(error.starts_with("diverged"));
                }
                other => panic!("{other:?}"),
            }
            let text = err.to_string();
            assert!(text.contains("23") && !text.ends_with('.'), "{text}");
        }
    }

    #[test]
    fn cancellation_stops_early() {
        let g = Grid::new(vec![Axis::linspace("x", 0.0, 1.0, 100_000).unwrap()]).unwrap();
        let cancel = AtomicBool::new(false);
        let calls = AtomicUsize::new(0);
        let opts = SweepOptions {
            threads: Some(2),
            cancel: Some(&cancel),
            ..Default::default()
        };
        let err = run_grid(&g, &opts, |c| {
            if calls.fetch_add(1, Ordering::Relaxed) == 1000 {
                cancel.store(true, Ordering::Relaxed);
            }
            Ok::<_, Infallible>(c[0])
        })
        .unwrap_err();
        let n = calls.load(Ordering::Relaxed);
        match err {
            SweepError::Cancelled { done } => {
                assert!(done >= 1000 && done <= n, "done {done}, calls {n}")
            }
            other => panic!("{other:?}"),
        }
        assert!(n < 2000, "{n} points ran after cancelling at 1000");
        // Already cancelled: nothing runs.
        let err = run_grid(&g, &opts, |_| Ok::<_, Infallible>(0.0)).unwrap_err();
        assert_eq!(err, SweepError::Cancelled { done: 0 });
    }

    #[test]
    fn progress_is_batched_and_ends_at_total() {
        let g = Grid::new(vec![
            Axis::linspace("a", 0.0, 1.0, 300).unwrap(),
            Axis::linspace("b", 0.0, 1.0, 301).unwrap(),
        ])
        .unwrap();
        let seen = Mutex::new(Vec::new());
        let progress = |done: usize, total: usize| seen.lock().unwrap().push((done, total));
        let opts = SweepOptions {
            threads: Some(2),
            progress: Some(&progress),
            ..Default::default()
        };
        run_grid(&g, &opts, |c| Ok::<_, Infallible>(c[0] + c[1])).unwrap();
        let seen = seen.into_inner().unwrap();
        assert!(
            seen.len() >= 10 && seen.len() <= PROGRESS_CALLS + 1,
            "{}",
            seen.len()
        );
        assert_eq!(*seen.last().unwrap(), (g.len(), g.len()));
        assert!(seen.iter().all(|&(d, t)| d <= t && t == g.len()));
        // Few points: every point is reported.
        let small = Grid::new(vec![Axis::linspace("a", 0.0, 1.0, 5).unwrap()]).unwrap();
        let count = AtomicUsize::new(0);
        let progress = |_: usize, _: usize| {
            count.fetch_add(1, Ordering::Relaxed);
        };
        let opts = SweepOptions {
            progress: Some(&progress),
            ..Default::default()
        };
        run_grid(&small, &opts, |_| Ok::<_, Infallible>(())).unwrap();
        assert_eq!(count.load(Ordering::Relaxed), 5);
    }

    #[test]
    fn a_million_points_run_quickly_into_an_exactly_sized_result() {
        let g = Grid::new(vec![
            Axis::linspace("a", 0.0, 1.0, 1000).unwrap(),
            Axis::linspace("b", 0.0, 1.0, 1000).unwrap(),
        ])
        .unwrap();
        let t0 = std::time::Instant::now();
        let r = run_grid(&g, &SweepOptions::default(), |c| {
            Ok::<_, Infallible>(c[0] * c[1])
        })
        .unwrap();
        assert_eq!(r.len(), 1_000_000);
        // Results only: 8 MB, reserved once.
        assert_eq!(r.capacity(), 1_000_000);
        assert_eq!(r[999_999], 1.0);
        assert!(t0.elapsed().as_secs_f64() < 5.0, "{:?}", t0.elapsed());
    }

    #[test]
    fn bad_thread_counts_are_refused() {
        let g = grid_2d();
        for threads in [0, MAX_THREADS + 1] {
            let opts = SweepOptions {
                threads: Some(threads),
                ..Default::default()
            };
            assert!(matches!(
                run_grid(&g, &opts, |_| Ok::<_, Infallible>(0)),
                Err(SweepError::InvalidParameter {
                    name: "threads",
                    ..
                })
            ));
        }
    }

    /// E[z^k] for a standard normal: (k − 1)!! for even k, 0 for odd k.
    fn normal_moment(k: u32) -> f64 {
        if k % 2 == 1 {
            0.0
        } else {
            (1..k).step_by(2).map(f64::from).product()
        }
    }

    #[test]
    fn gauss_hermite_small_rules_match_their_closed_forms() {
        // A&S 25.4.46 nodes for n = 2, 3, rescaled to the unit normal: ±1; 0, ±√3.
        let r2 = Ensemble::gauss_hermite(0.0, 1.0, 2).unwrap();
        assert!((r2.nodes()[1] - 1.0).abs() < 1e-15 && (r2.nodes()[0] + 1.0).abs() < 1e-15);
        assert!(r2.weights().iter().all(|w| (w - 0.5).abs() < 1e-15));
        let r3 = Ensemble::gauss_hermite(0.0, 1.0, 3).unwrap();
        assert!((r3.nodes()[2] - 3.0_f64.sqrt()).abs() < 1e-15);
        assert!(r3.nodes()[1].abs() < 1e-15);
        assert!((r3.weights()[1] - 2.0 / 3.0).abs() < 1e-15);
        assert!((r3.weights()[0] - 1.0 / 6.0).abs() < 1e-15);
        let r1 = Ensemble::gauss_hermite(4.0, 2.0, 1).unwrap();
        assert_eq!((r1.nodes(), r1.weights()), (&[4.0][..], &[1.0][..]));
    }

    #[test]
    fn gauss_hermite_integrates_polynomials_to_degree_2n_minus_1() {
        let (mean, sigma) = (0.7, 1.3);
        for n in [2, 5, 10, 20, 40] {
            let rule = Ensemble::gauss_hermite(mean, sigma, n).unwrap();
            assert!((rule.weights().iter().sum::<f64>() - 1.0).abs() < 1e-15);
            assert!(rule.nodes().windows(2).all(|w| w[0] < w[1]));
            // Central moments E[(x − μ)^k] = σ^k (k − 1)!! — here to degree min(2n − 1, 19)
            // so the check is not swamped by the rounding of huge high moments.
            for k in 0..=(2 * n as u32 - 1).min(19) {
                let z = |x: &f64| ((x - mean) / sigma).powi(k as i32);
                let sum: f64 = rule
                    .nodes()
                    .iter()
                    .zip(rule.weights())
                    .map(|(x, w)| w * z(x))
                    .sum();
                // Rounding scale: the same sum of absolute values (odd moments are 0).
                let scale: f64 = rule
                    .nodes()
                    .iter()
                    .zip(rule.weights())
                    .map(|(x, w)| w * z(x).abs())
                    .sum();
                let exact = normal_moment(k);
                assert!(
                    (sum - exact).abs() <= 1e-13 * scale.max(1.0),
                    "n {n} k {k}: {sum} vs {exact}"
                );
            }
            // Raw moments E[x] = μ, E[x²] = μ² + σ².
            let m1: f64 = rule
                .nodes()
                .iter()
                .zip(rule.weights())
                .map(|(x, w)| w * x)
                .sum();
            let m2: f64 = rule
                .nodes()
                .iter()
                .zip(rule.weights())
                .map(|(x, w)| w * x * x)
                .sum();
            assert!((m1 - mean).abs() < 1e-14);
            assert!((m2 - (mean * mean + sigma * sigma)).abs() < 1e-13);
        }
        // The largest rule still builds with positive weights summing to 1.
        let big = Ensemble::gauss_hermite(0.0, 1.0, 100).unwrap();
        assert!(big.weights().iter().all(|&w| w >= 0.0));
        let var: f64 = big
            .nodes()
            .iter()
            .zip(big.weights())
            .map(|(x, w)| w * x * x)
            .sum();
        assert!((var - 1.0).abs() < 1e-13, "{var}");
    }

    #[test]
    fn gauss_hermite_averages_a_cosine_to_its_characteristic_function() {
        let sigma = 0.8;
        let rule = Ensemble::gauss_hermite(0.0, sigma, 30).unwrap();
        for a in [0.5, 1.0, 2.5] {
            let avg = rule
                .average(&SweepOptions::default(), |x| {
                    Ok::<_, Infallible>(vec![(a * x).cos(), (a * x).sin()])
                })
                .unwrap();
            let exact = (-0.5 * a * a * sigma * sigma).exp();
            assert!(
                (avg[0] - exact).abs() < 1e-14,
                "a {a}: {} vs {exact}",
                avg[0]
            );
            assert!(avg[1].abs() < 1e-15);
        }
    }

    #[test]
    fn gauss_hermite_rejects_bad_parameters() {
        assert!(Ensemble::gauss_hermite(0.0, 1.0, 0).is_err());
        assert!(Ensemble::gauss_hermite(0.0, 1.0, 101).is_err());
        assert!(Ensemble::gauss_hermite(f64::NAN, 1.0, 5).is_err());
        assert!(Ensemble::gauss_hermite(0.0, -1.0, 5).is_err());
        assert!(Ensemble::gauss_hermite(0.0, f64::INFINITY, 5).is_err());
        assert!(Ensemble::gauss_hermite(0.0, f64::MAX / 2.0, 20).is_err());
        let cold = Ensemble::gauss_hermite(3.0, 0.0, 4).unwrap();
        assert!(cold.nodes().iter().all(|&x| x == 3.0));
    }

    #[test]
    fn monte_carlo_is_reproducible_and_statistically_sound() {
        let (mean, sigma, n) = (-2.0, 0.5, 200_000);
        let a = Ensemble::monte_carlo_normal(mean, sigma, n, 42);
        let b = Ensemble::monte_carlo_normal(mean, sigma, n, 42);
        let c = Ensemble::monte_carlo_normal(mean, sigma, n, 43);
        assert_eq!(a, b);
        assert_ne!(a.nodes(), c.nodes());
        assert_eq!(a.len(), n);
        let m = a.nodes().iter().sum::<f64>() / n as f64;
        let v = a.nodes().iter().map(|x| (x - m) * (x - m)).sum::<f64>() / (n - 1) as f64;
        // 5 standard errors: σ/√n for the mean, σ²√(2/n) for the variance.
        assert!(
            (m - mean).abs() < 5.0 * sigma / (n as f64).sqrt(),
            "mean {m}"
        );
        assert!(
            (v - sigma * sigma).abs() < 5.0 * sigma * sigma * (2.0 / n as f64).sqrt(),
            "variance {v}"
        );
        // Fourth central moment 3σ⁴ within a loose statistical bound.
        let k4 = a.nodes().iter().map(|x| (x - m).powi(4)).sum::<f64>() / n as f64;
        assert!((k4 / (sigma.powi(4)) - 3.0).abs() < 0.1, "{k4}");
        // Odd sample counts and n = 0 work.
        assert_eq!(Ensemble::monte_carlo_normal(0.0, 1.0, 7, 1).len(), 7);
        let empty = Ensemble::monte_carlo_normal(0.0, 1.0, 0, 1);
        assert!(empty.is_empty());
        assert_eq!(
            empty.average(&SweepOptions::default(), |_| Ok::<_, Infallible>(vec![1.0])),
            Err(SweepError::EmptyEnsemble)
        );
    }

    #[test]
    fn monte_carlo_stream_is_pinned() {
        // SplitMix64 from seed 0 first yields 0xe220a8397b1dcdaf (the published
        // reference output); the xoshiro256** outputs that follow were checked against
        // an independent re-implementation of the reference algorithm. Pinning them
        // makes any change to the generator, and so to every seeded ensemble, visible.
        let mut rng = Xoshiro256StarStar::new(0);
        assert_eq!(rng.s[0], 0xe220_a839_7b1d_cdaf);
        let first: Vec<u64> = (0..3).map(|_| rng.next_u64()).collect();
        assert_eq!(
            first,
            [
                0x99ec_5f36_cb75_f2b4,
                0xbf6e_1f78_4956_452a,
                0x1a5f_849d_4933_e6e0
            ]
        );
    }

    #[test]
    fn portable_ln_agrees_with_the_platform_logarithm() {
        let mut x = 1e-300;
        while x < 1.0 {
            let (mine, std) = (portable_ln(x), x.ln());
            assert!(
                (mine - std).abs() <= 4.0 * f64::EPSILON * std.abs().max(1.0),
                "{x}"
            );
            x *= 1.37;
        }
        for x in [
            0.5,
            FRAC_1_SQRT_2,
            SQRT_2,
            0.999_999_9,
            1.0 - f64::EPSILON,
            1.0,
            1.5,
        ] {
            let (mine, std) = (portable_ln(x), x.ln());
            assert!(
                (mine - std).abs() <= 2.0 * f64::EPSILON * std.abs().max(1e-300),
                "{x}"
            );
        }
    }

    #[test]
    fn ensemble_average_is_weighted_deterministic_and_checks_lengths() {
        let e = Ensemble::new(vec![1.0, 2.0, 4.0], vec![1.0, 1.0, 2.0]).unwrap();
        assert_eq!(e.weights(), &[0.25, 0.25, 0.5]);
        let avg = e
            .average(&SweepOptions::default(), |x| {
                Ok::<_, Infallible>(vec![x, x * x])
            })
            .unwrap();
        assert_eq!(avg, vec![2.75, 9.25]);
        let mc = Ensemble::monte_carlo_normal(0.0, 1.0, 1001, 9);
        let run = |threads| {
            let opts = SweepOptions {
                threads: Some(threads),
                ..Default::default()
            };
            mc.average(&opts, |x| Ok::<_, Infallible>(vec![x.sin(), x.exp()]))
                .unwrap()
                .into_iter()
                .map(f64::to_bits)
                .collect::<Vec<_>>()
        };
        assert_eq!(run(1), run(2));
        assert_eq!(run(1), run(3));
        let err = e
            .average(&SweepOptions::default(), |x| {
                Ok::<_, Infallible>(vec![0.0; if x > 3.0 { 1 } else { 2 }])
            })
            .unwrap_err();
        assert_eq!(
            err,
            SweepError::ResultLength {
                index: 2,
                expected: 2,
                found: 1
            }
        );
        let err = e
            .average(&SweepOptions::default(), |x| {
                if x == 2.0 { Err("no") } else { Ok(vec![x]) }
            })
            .unwrap_err();
        assert_eq!(
            err,
            SweepError::Point {
                index: 1,
                coords: vec![2.0],
                error: "no"
            }
        );
        assert!(Ensemble::new(vec![], vec![]).is_err());
        assert!(Ensemble::new(vec![1.0], vec![1.0, 2.0]).is_err());
        assert!(Ensemble::new(vec![1.0], vec![-1.0]).is_err());
        assert!(Ensemble::new(vec![1.0, 2.0], vec![0.0, 0.0]).is_err());
        assert!(Ensemble::new(vec![f64::NAN], vec![1.0]).is_err());
    }

    #[test]
    fn construction_errors_widen_for_use_with_question_mark() {
        fn build() -> Result<Vec<f64>, SweepError<String>> {
            let g = Grid::new(vec![Axis::new("x", vec![]).map_err(SweepError::widen)?])
                .map_err(SweepError::widen)?;
            run_grid(&g, &SweepOptions::default(), |c| Ok(c[0]))
        }
        assert!(matches!(build(), Err(SweepError::InvalidAxis { .. })));
    }

    #[test]
    fn doppler_width_of_rubidium_87_at_room_temperature() {
        // ⁸⁷Rb (86.909180527 u) on the 780.241 nm D2 line at 300 K:
        // √(k_B T / m) = 169.41 m/s, k = 2π/λ.
        let u = 1.660_539_066_60e-27;
        let m = 86.909_180_527 * u;
        let k = 2.0 * std::f64::consts::PI / 780.241_209_686e-9;
        let v = (BOLTZMANN * 300.0 / m).sqrt();
        assert!((v - 169.412).abs() < 1e-3, "{v}");
        let s = doppler_sigma(k, 300.0, m);
        assert!((s - k * v).abs() <= 1e-15 * s);
        // σ/2π = v/λ ≈ 217.13 MHz.
        assert!((s / (2.0 * std::f64::consts::PI) / 1e6 - 217.128).abs() < 1e-3);
        assert_eq!(doppler_sigma(k, 0.0, m), 0.0);
        assert!(doppler_sigma(k, -1.0, m).is_nan());
    }
}
