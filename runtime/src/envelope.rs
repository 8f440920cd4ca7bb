//! Pulse envelopes: dimensionless shapes on a pulse's local time τ ∈ [0, T], zero outside.
//!
//! An [`Envelope`] multiplies a field amplitude (a Rabi frequency in rad/s, a detuning in
//! rad/s, ...). Time τ is in whatever unit the caller uses for the duration T (the crate
//! uses seconds); every shape parameter with a time dimension (σ, widths, step durations,
//! table times) is in that same unit. [`Envelope::integral`] is in that unit too, which
//! is what the area theorem needs: amplitude = area / integral.

use std::f64::consts::{PI, TAU};
use std::fmt;
use std::sync::Arc;

/// The functional form of an envelope, evaluated on local time τ ∈ [0, T].
///
/// T is the envelope's duration (same time unit as every time-like parameter here).
/// Every shape is zero outside [0, T]. Construct an [`Envelope`] from a shape with
/// [`Envelope::new`], which checks the parameters.
#[non_exhaustive]
#[derive(Clone)]
pub enum Shape {
    /// Rectangular pulse: f(τ) = 1 on [0, T].
    Square,
    /// Gaussian centred on the pulse: f(τ) = exp(−(τ − T/2)² / (2σ²)), truncated to
    /// [0, T] (not shifted to zero at the edges). `sigma` is the rms width (time unit), > 0.
    Gaussian {
        /// rms width σ (time unit), finite and > 0.
        sigma: f64,
    },
    /// Blackman window: f(τ) = 0.42 − 0.5 cos(2πτ/T) + 0.08 cos(4πτ/T); zero at both
    /// ends, peak 1 at T/2.
    Blackman,
    /// Squared sine: f(τ) = sin²(πτ/T); zero at both ends, peak 1 at T/2.
    SinSquared,
    /// Hyperbolic secant centred on the pulse: f(τ) = sech((τ − T/2)/w), truncated to
    /// [0, T].
    Sech {
        /// Width w (time unit), finite and > 0; the intensity FWHM of sech² is 1.7627 w.
        width: f64,
    },
    /// Linear ramp: f(τ) = from + (to − from) τ/T.
    LinearRamp {
        /// Value at τ = 0 (dimensionless), finite.
        from: f64,
        /// Value at τ = T (dimensionless), finite.
        to: f64,
    },
    /// Smooth ramp centred on the pulse:
    /// f(τ) = from + (to − from) (1 + tanh((τ − T/2)/w)) / 2.
    TanhRamp {
        /// Asymptotic value before the centre (dimensionless), finite.
        from: f64,
        /// Asymptotic value after the centre (dimensionless), finite.
        to: f64,
        /// Ramp width w (time unit), finite and > 0.
        width: f64,
    },
    /// Piecewise constant steps: `values[k]` holds for a time `durations[k]`, in order;
    /// T = Σ durations. Steps are closed on the left: at a step boundary the later
    /// step's value applies (and the last value at τ = T).
    Piecewise {
        /// Step heights (dimensionless), finite.
        values: Vec<f64>,
        /// Step lengths (time unit), finite and > 0, summing to T.
        durations: Vec<f64>,
    },
    /// Linear interpolation of a table: knots `times` strictly increasing from 0 to T.
    Tabulated {
        /// Knot times (time unit): first exactly 0, strictly increasing, last equal to T.
        times: Vec<f64>,
        /// Values at the knots (dimensionless), finite, as many as `times`.
        values: Vec<f64>,
    },
    /// Any function of τ (time unit in, dimensionless out). Called only for τ ∈ [0, T].
    Custom(Arc<dyn Fn(f64) -> f64 + Send + Sync>),
}

impl Shape {
    /// Wrap a closure of τ (time unit) as a [`Shape::Custom`].
    pub fn custom(f: impl Fn(f64) -> f64 + Send + Sync + 'static) -> Self {
        Shape::Custom(Arc::new(f))
    }
}

impl fmt::Debug for Shape {
    // By hand because a closure has no Debug of its own.
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Shape::Square => f.write_str("Square"),
            Shape::Gaussian { sigma } => f.debug_struct("Gaussian").field("sigma", sigma).finish(),
            Shape::Blackman => f.write_str("Blackman"),
            Shape::SinSquared => f.write_str("SinSquared"),
            Shape::Sech { width } => f.debug_struct("Sech").field("width", width).finish(),
            Shape::LinearRamp { from, to } => f
                .debug_struct("LinearRamp")
                .field("from", from)
                .field("to", to)
                .finish(),
            Shape::TanhRamp { from, to, width } => f
                .debug_struct("TanhRamp")
                .field("from", from)
                .field("to", to)
                .field("width", width)
                .finish(),
            Shape::Piecewise { values, durations } => f
                .debug_struct("Piecewise")
                .field("values", values)
                .field("durations", durations)
                .finish(),
            Shape::Tabulated { times, values } => f
                .debug_struct("Tabulated")
                .field("times", times)
                .field("values", values)
                .finish(),
            Shape::Custom(_) => f.write_str("Custom(<closure>)"),
        }
    }
}

/// Why an envelope could not be built.
#[non_exhaustive]
#[derive(Debug, Clone, PartialEq)]
pub enum EnvelopeError {
    /// The duration T is NaN, infinite, zero or negative.
    Duration {
        /// The rejected duration (time unit).
        duration: f64,
    },
    /// A scalar shape parameter is out of range.
    Parameter {
        /// Parameter name as spelled in [`Shape`].
        name: &'static str,
        /// The rejected value.
        value: f64,
        /// What the value must satisfy.
        why: &'static str,
    },
    /// Two lists that pair up element by element have different lengths.
    LengthMismatch {
        /// Name of the first list.
        first: &'static str,
        /// Its length.
        first_len: usize,
        /// Name of the second list.
        second: &'static str,
        /// Its length.
        second_len: usize,
    },
    /// A list is shorter than the shape needs.
    TooShort {
        /// Name of the list.
        name: &'static str,
        /// Its length.
        len: usize,
        /// The least length accepted.
        min: usize,
    },
    /// One element of a list is out of range.
    Element {
        /// Name of the list.
        name: &'static str,
        /// Position of the offending element.
        index: usize,
        /// The offending value.
        value: f64,
        /// What the element must satisfy.
        why: &'static str,
    },
    /// The shape's own time span (Σ step durations, last table time) is not the duration.
    SpanMismatch {
        /// What was summed or read (`"sum of durations"`, `"last of times"`).
        what: &'static str,
        /// The duration T given (time unit).
        duration: f64,
        /// The span the shape implies (time unit).
        span: f64,
    },
}

impl fmt::Display for EnvelopeError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            EnvelopeError::Duration { duration } => write!(
                f,
                "pulse duration must be finite and positive, got {duration}"
            ),
            EnvelopeError::Parameter { name, value, why } => {
                write!(f, "envelope parameter {name} = {value}: {why}")
            }
            EnvelopeError::LengthMismatch {
                first,
                first_len,
                second,
                second_len,
            } => write!(
                f,
                "envelope lists {first} ({first_len} entries) and {second} ({second_len} entries) must have the same length"
            ),
            EnvelopeError::TooShort { name, len, min } => write!(
                f,
                "envelope list {name} has {len} entries, needs at least {min}"
            ),
            EnvelopeError::Element {
                name,
                index,
                value,
                why,
            } => write!(f, "envelope list {name}[{index}] = {value}: {why}"),
            EnvelopeError::SpanMismatch {
                what,
                duration,
                span,
            } => write!(
                f,
                "envelope {what} is {span} but the duration is {duration}; make them equal"
            ),
        }
    }
}

impl std::error::Error for EnvelopeError {}

/// A validated pulse envelope: a [`Shape`] on local time τ ∈ [0, T], zero outside.
#[derive(Clone, Debug)]
pub struct Envelope {
    shape: Shape,
    duration: f64,
    /// Step boundaries 0 = e₀ < e₁ < … < eₙ = T for [`Shape::Piecewise`] (empty otherwise),
    /// precomputed so that `value` is a binary search rather than a running sum.
    edges: Vec<f64>,
}

/// Relative tolerance for "the shape's own span equals the duration": allows the
/// rounding of a sum of step durations or of a computed last knot, nothing more.
fn span_tolerance(n: usize, duration: f64) -> f64 {
    (1e-12_f64).max(4.0 * n as f64 * f64::EPSILON) * duration
}

fn check_positive(name: &'static str, value: f64) -> Result<(), EnvelopeError> {
    if value.is_finite() && value > 0.0 {
        Ok(())
    } else {
        Err(EnvelopeError::Parameter {
            name,
            value,
            why: "must be finite and positive",
        })
    }
}

fn check_finite(name: &'static str, value: f64) -> Result<(), EnvelopeError> {
    if value.is_finite() {
        Ok(())
    } else {
        Err(EnvelopeError::Parameter {
            name,
            value,
            why: "must be finite",
        })
    }
}

fn check_all_finite(name: &'static str, list: &[f64]) -> Result<(), EnvelopeError> {
    match list.iter().position(|v| !v.is_finite()) {
        None => Ok(()),
        Some(index) => Err(EnvelopeError::Element {
            name,
            index,
            value: list[index],
            why: "must be finite",
        }),
    }
}

fn check_same_len(
    first: &'static str,
    a: &[f64],
    second: &'static str,
    b: &[f64],
) -> Result<(), EnvelopeError> {
    if a.len() == b.len() {
        Ok(())
    } else {
        Err(EnvelopeError::LengthMismatch {
            first,
            first_len: a.len(),
            second,
            second_len: b.len(),
        })
    }
}

/// Check a piecewise step list against T and return its step boundaries.
fn piecewise_edges(
    values: &[f64],
    durations: &[f64],
    duration: f64,
) -> Result<Vec<f64>, EnvelopeError> {
    check_same_len("values", values, "durations", durations)?;
    if values.is_empty() {
        return Err(EnvelopeError::TooShort {
            name: "durations",
            len: 0,
            min: 1,
        });
    }
    check_all_finite("values", values)?;
    if let Some(index) = durations.iter().position(|d| !(d.is_finite() && *d > 0.0)) {
        return Err(EnvelopeError::Element {
            name: "durations",
            index,
            value: durations[index],
            why: "step durations must be finite and positive",
        });
    }
    let mut edges = Vec::with_capacity(durations.len() + 1);
    let mut t = 0.0;
    edges.push(t);
    for d in durations {
        t += d;
        edges.push(t);
    }
    if !t.is_finite() || (t - duration).abs() > span_tolerance(durations.len(), duration) {
        return Err(EnvelopeError::SpanMismatch {
            what: "sum of durations",
            duration,
            span: t,
        });
    }
    // Pin the last edge to T so that the steps tile [0, T] exactly.
    if let Some(last) = edges.last_mut() {
        *last = duration;
    }
    if edges.windows(2).any(|w| w[1] <= w[0]) {
        // A step shorter than the rounding of the running sum cannot be located.
        return Err(EnvelopeError::Parameter {
            name: "durations",
            value: durations.iter().copied().fold(f64::INFINITY, f64::min),
            why: "steps are too short compared with the total duration to be resolved in double precision",
        });
    }
    Ok(edges)
}

fn check_table(times: &[f64], values: &[f64], duration: f64) -> Result<(), EnvelopeError> {
    check_same_len("times", times, "values", values)?;
    if times.len() < 2 {
        return Err(EnvelopeError::TooShort {
            name: "times",
            len: times.len(),
            min: 2,
        });
    }
    check_all_finite("times", times)?;
    check_all_finite("values", values)?;
    if times[0] != 0.0 {
        return Err(EnvelopeError::Element {
            name: "times",
            index: 0,
            value: times[0],
            why: "the table must start at local time 0",
        });
    }
    if let Some(k) = times.windows(2).position(|w| w[1] <= w[0]) {
        return Err(EnvelopeError::Element {
            name: "times",
            index: k + 1,
            value: times[k + 1],
            why: "times must be strictly increasing",
        });
    }
    let last = times[times.len() - 1];
    if (last - duration).abs() > span_tolerance(times.len(), duration) {
        return Err(EnvelopeError::SpanMismatch {
            what: "last of times",
            duration,
            span: last,
        });
    }
    Ok(())
}

impl Envelope {
    /// Build an envelope of `shape` lasting `duration` (time unit, finite and > 0).
    ///
    /// Checks every parameter: σ and widths finite and positive, ramp levels finite,
    /// piecewise steps positive and summing to the duration (to rounding), tables of
    /// equal lengths (≥ 2) with times strictly increasing from exactly 0 to the
    /// duration (to rounding). Never panics.
    pub fn new(shape: Shape, duration: f64) -> Result<Self, EnvelopeError> {
        if !(duration.is_finite() && duration > 0.0) {
            return Err(EnvelopeError::Duration { duration });
        }
        let mut edges = Vec::new();
        match &shape {
            Shape::Square | Shape::Blackman | Shape::SinSquared | Shape::Custom(_) => {}
            Shape::Gaussian { sigma } => check_positive("sigma", *sigma)?,
            Shape::Sech { width } => check_positive("width", *width)?,
            Shape::LinearRamp { from, to } => {
                check_finite("from", *from)?;
                check_finite("to", *to)?;
            }
            Shape::TanhRamp { from, to, width } => {
                check_finite("from", *from)?;
                check_finite("to", *to)?;
                check_positive("width", *width)?;
            }
            Shape::Piecewise { values, durations } => {
                edges = piecewise_edges(values, durations, duration)?;
            }
            Shape::Tabulated { times, values } => check_table(times, values, duration)?,
        }
        Ok(Envelope {
            shape,
            duration,
            edges,
        })
    }

    /// Piecewise constant steps with T = Σ `durations` (time unit); see [`Shape::Piecewise`].
    pub fn piecewise(values: Vec<f64>, durations: Vec<f64>) -> Result<Self, EnvelopeError> {
        let total: f64 = durations.iter().sum();
        if !(total.is_finite() && total > 0.0) {
            // Name the offending step rather than the total it spoiled.
            piecewise_edges(&values, &durations, 1.0)?;
        }
        Envelope::new(Shape::Piecewise { values, durations }, total)
    }

    /// Linearly interpolated table with T = the last of `times` (time unit); see
    /// [`Shape::Tabulated`].
    pub fn tabulated(times: Vec<f64>, values: Vec<f64>) -> Result<Self, EnvelopeError> {
        let Some(&last) = times.last() else {
            return Err(EnvelopeError::TooShort {
                name: "times",
                len: 0,
                min: 2,
            });
        };
        Envelope::new(Shape::Tabulated { times, values }, last)
    }

    /// Duration T (time unit).
    pub fn duration(&self) -> f64 {
        self.duration
    }

    /// The shape this envelope was built from.
    pub fn shape(&self) -> &Shape {
        &self.shape
    }

    /// Envelope value (dimensionless) at local time `tau` (time unit); 0 outside
    /// [0, T] and for NaN. Allocation-free; tables and steps use binary search.
    #[inline]
    pub fn value(&self, tau: f64) -> f64 {
        let t = self.duration;
        // Also rejects NaN, so no shape below sees a τ outside [0, T].
        if !(0.0..=t).contains(&tau) {
            return 0.0;
        }
        match &self.shape {
            Shape::Square => 1.0,
            Shape::Gaussian { sigma } => {
                let x = (tau - 0.5 * t) / sigma;
                (-0.5 * x * x).exp()
            }
            Shape::Blackman => {
                // cos(4πτ/T) = 2c² − 1 with c = cos(2πτ/T): one cosine instead of two.
                let c = (TAU * tau / t).cos();
                0.42 - 0.5 * c + 0.08 * (2.0 * c * c - 1.0)
            }
            Shape::SinSquared => {
                let s = (PI * tau / t).sin();
                s * s
            }
            Shape::Sech { width } => 1.0 / ((tau - 0.5 * t) / width).cosh(),
            Shape::LinearRamp { from, to } => from + (to - from) * (tau / t),
            Shape::TanhRamp { from, to, width } => {
                from + (to - from) * 0.5 * (1.0 + ((tau - 0.5 * t) / width).tanh())
            }
            Shape::Piecewise { values, .. } => {
                // Interior edges e₁ … eₙ₋₁; the count of those ≤ τ is the step index.
                let interior = &self.edges[1..self.edges.len() - 1];
                values[interior.partition_point(|&e| e <= tau)]
            }
            Shape::Tabulated { times, values } => {
                let k = times.partition_point(|&x| x <= tau);
                if k >= times.len() {
                    // τ at (or, within the accepted rounding, past) the last knot.
                    return values[values.len() - 1];
                }
                // k ≥ 1 because times[0] = 0 ≤ τ.
                let (t0, t1) = (times[k - 1], times[k]);
                let (v0, v1) = (values[k - 1], values[k]);
                v0 + (v1 - v0) * ((tau - t0) / (t1 - t0))
            }
            Shape::Custom(f) => f(tau),
        }
    }

    /// ∫₀ᵀ f(τ) dτ (time unit): the pulse area per unit amplitude.
    ///
    /// Closed forms for every shape but [`Shape::Custom`], which is integrated by
    /// adaptive 15-point Gauss–Kronrod quadrature to 1e-12 relative (non-finite if the
    /// closure returns non-finite values).
    pub fn integral(&self) -> f64 {
        let t = self.duration;
        match &self.shape {
            Shape::Square => t,
            Shape::Gaussian { sigma } => {
                // ∫₋ₐᵃ exp(−u²/2σ²) du = σ √(2π) erf(a / (σ√2)) with a = T/2.
                sigma * (2.0 * PI).sqrt() * erf(0.5 * t / (sigma * std::f64::consts::SQRT_2))
            }
            // The cosine terms integrate to zero over whole periods.
            Shape::Blackman => 0.42 * t,
            Shape::SinSquared => 0.5 * t,
            // ∫ sech(u/w) du = w·atan(sinh(u/w)), odd, evaluated at ±T/2.
            Shape::Sech { width } => 2.0 * width * (0.5 * t / width).sinh().atan(),
            Shape::LinearRamp { from, to } => 0.5 * (from + to) * t,
            // tanh is odd about T/2, so only the mean level survives.
            Shape::TanhRamp { from, to, .. } => 0.5 * (from + to) * t,
            Shape::Piecewise { values, .. } => values
                .iter()
                .zip(self.edges.windows(2))
                .map(|(v, e)| v * (e[1] - e[0]))
                .sum(),
            Shape::Tabulated { times, values } => {
                let trapezoids: f64 = times
                    .windows(2)
                    .zip(values.windows(2))
                    .map(|(x, v)| 0.5 * (v[0] + v[1]) * (x[1] - x[0]))
                    .sum();
                // The last knot may differ from T by rounding; `value` holds the last
                // value there, so account for that sliver to match it exactly.
                let last = times[times.len() - 1];
                trapezoids + values[values.len() - 1] * (t - last)
            }
            Shape::Custom(f) => adaptive_gauss_kronrod(|x| f(x), 0.0, t, 1e-12),
        }
    }

    /// Interior local times (time unit, increasing, strictly inside (0, T)) where the
    /// envelope or its first derivative jumps: step boundaries of [`Shape::Piecewise`]
    /// and interior knots of [`Shape::Tabulated`]. ODE integrators restart there.
    /// Empty for smooth shapes and for [`Shape::Custom`], whose kinks are unknown.
    pub fn breakpoints(&self) -> Vec<f64> {
        let t = self.duration;
        let interior =
            |xs: &[f64]| -> Vec<f64> { xs.iter().copied().filter(|&x| x > 0.0 && x < t).collect() };
        match &self.shape {
            Shape::Piecewise { .. } => interior(&self.edges),
            Shape::Tabulated { times, .. } => interior(times),
            _ => Vec::new(),
        }
    }

    /// `(τ_start, τ_end, value)` triples (time unit, time unit, dimensionless) tiling
    /// [0, T] when the envelope is piecewise constant — [`Shape::Square`],
    /// [`Shape::Piecewise`], and ramps whose two levels are equal — else `None`.
    pub fn constant_pieces(&self) -> Option<Vec<(f64, f64, f64)>> {
        let t = self.duration;
        match &self.shape {
            Shape::Square => Some(vec![(0.0, t, 1.0)]),
            Shape::LinearRamp { from, to } | Shape::TanhRamp { from, to, .. } if from == to => {
                Some(vec![(0.0, t, *from)])
            }
            Shape::Piecewise { values, .. } => Some(
                self.edges
                    .windows(2)
                    .zip(values)
                    .map(|(e, &v)| (e[0], e[1], v))
                    .collect(),
            ),
            _ => None,
        }
    }

    /// Peak |f(τ)| over [0, T] (dimensionless). Exact for every shape but
    /// [`Shape::Custom`], which is sampled at 10 001 equally spaced points and then
    /// refined around the largest sample by golden-section search (a feature narrower
    /// than T/10⁴ can still be missed; NaN samples are ignored).
    pub fn max_abs(&self) -> f64 {
        let peak = |xs: &[f64]| xs.iter().fold(0.0_f64, |m, v| m.max(v.abs()));
        match &self.shape {
            // All peak at exactly 1: at T/2 for the centred shapes.
            Shape::Square
            | Shape::Gaussian { .. }
            | Shape::Blackman
            | Shape::SinSquared
            | Shape::Sech { .. } => 1.0,
            // Monotone ramps peak at an end.
            Shape::LinearRamp { .. } | Shape::TanhRamp { .. } => {
                self.value(0.0).abs().max(self.value(self.duration).abs())
            }
            Shape::Piecewise { values, .. } => peak(values),
            // Linear interpolation peaks at a knot.
            Shape::Tabulated { values, .. } => peak(values),
            Shape::Custom(f) => {
                const SAMPLES: usize = 10_000;
                let t = self.duration;
                let at = |k: usize| t * (k as f64 / SAMPLES as f64);
                let (best_k, best) = (0..=SAMPLES)
                    .map(|k| (k, f(at(k)).abs()))
                    .fold((0, 0.0_f64), |m, s| if s.1 > m.1 { s } else { m });
                // Polish the best sample: golden-section search for the peak of |f|
                // between its neighbours, so smooth peaks are found to rounding.
                let (mut a, mut b) = (at(best_k.saturating_sub(1)), at((best_k + 1).min(SAMPLES)));
                let g = |x: f64| f(x).abs();
                let r = 0.5 * (5.0_f64.sqrt() - 1.0);
                let (mut x1, mut x2) = (b - r * (b - a), a + r * (b - a));
                let (mut g1, mut g2) = (g(x1), g(x2));
                for _ in 0..60 {
                    if g1 >= g2 {
                        b = x2;
                        (x2, g2) = (x1, g1);
                        x1 = b - r * (b - a);
                        g1 = g(x1);
                    } else {
                        a = x1;
                        (x1, g1) = (x2, g2);
                        x2 = a + r * (b - a);
                        g2 = g(x2);
                    }
                }
                best.max(g1).max(g2)
            }
        }
    }
}

/// Error function erf(x) = (2/√π) ∫₀ˣ exp(−t²) dt, to within a few units in the last place.
///
/// W. J. Cody's rational Chebyshev approximations (Math. Comp. 23, 631 (1969)) on
/// |x| ≤ 0.46875, 0.46875 < |x| ≤ 4 and |x| > 4. NaN gives NaN, ±∞ gives ±1.
pub fn erf(x: f64) -> f64 {
    const A: [f64; 5] = [
        3.161_123_743_870_565_6,
        1.138_641_541_510_501_6e2,
        3.774_852_376_853_02e2,
        3.209_377_589_138_469_5e3,
        1.857_777_061_846_031_5e-1,
    ];
    const B: [f64; 4] = [
        2.360_129_095_234_412e1,
        2.440_246_379_344_441_7e2,
        1.282_616_526_077_372_3e3,
        2.844_236_833_439_171e3,
    ];
    const C: [f64; 9] = [
        5.641_884_969_886_701e-1,
        8.883_149_794_388_376,
        6.611_919_063_714_163e1,
        2.986_351_381_974_001e2,
        8.819_522_212_417_69e2,
        1.712_047_612_634_070_6e3,
        2.051_078_377_826_071_5e3,
        1.230_339_354_797_997_2e3,
        2.153_115_354_744_038_5e-8,
    ];
    const D: [f64; 8] = [
        1.574_492_611_070_983_5e1,
        1.176_939_508_913_125e2,
        5.371_811_018_620_099e2,
        1.621_389_574_566_690_2e3,
        3.290_799_235_733_459_6e3,
        4.362_619_090_143_247e3,
        3.439_367_674_143_721_6e3,
        1.230_339_354_803_749_4e3,
    ];
    const P: [f64; 6] = [
        3.053_266_349_612_323_4e-1,
        3.603_448_999_498_044_4e-1,
        1.257_817_261_112_292_5e-1,
        1.608_378_514_874_228e-2,
        6.587_491_615_298_378e-4,
        1.631_538_713_730_21e-2,
    ];
    const Q: [f64; 5] = [
        2.568_520_192_289_822,
        1.872_952_849_923_460_5,
        5.279_051_029_514_284e-1,
        6.051_834_131_244_132e-2,
        2.335_204_976_268_691_9e-3,
    ];
    /// 1/√π.
    const FRAC_1_SQRT_PI: f64 = 0.564_189_583_547_756_3;

    if x.is_nan() {
        return x;
    }
    let y = x.abs();
    if y <= 0.46875 {
        let z = y * y;
        let mut num = A[4] * z;
        let mut den = z;
        for k in 0..3 {
            num = (num + A[k]) * z;
            den = (den + B[k]) * z;
        }
        return x * (num + A[3]) / (den + B[3]);
    }
    // erfc(y) = exp(−y²)·R(y) on the two outer intervals.
    let erfc = if y >= 26.6 {
        // exp(−y²) underflows; erf is ±1 to double precision long before that.
        0.0
    } else {
        let r = if y <= 4.0 {
            let mut num = C[8] * y;
            let mut den = y;
            for k in 0..7 {
                num = (num + C[k]) * y;
                den = (den + D[k]) * y;
            }
            (num + C[7]) / (den + D[7])
        } else {
            let z = 1.0 / (y * y);
            let mut num = P[5] * z;
            let mut den = z;
            for k in 0..4 {
                num = (num + P[k]) * z;
                den = (den + Q[k]) * z;
            }
            (FRAC_1_SQRT_PI - z * (num + P[4]) / (den + Q[4])) / y
        };
        // Split y² = s² + (y−s)(y+s) with s = y rounded down to 1/16, so that the large
        // part s² is exact and exp(−y²) keeps full relative precision.
        let s = (16.0 * y).trunc() / 16.0;
        let del = (y - s) * (y + s);
        (-s * s).exp() * (-del).exp() * r
    };
    // (0.5 − erfc) + 0.5 rounds better than 1 − erfc when erfc is near 0.5.
    let e = (0.5 - erfc) + 0.5;
    if x < 0.0 { -e } else { e }
}

/// Gauss–Kronrod 7/15 nodes on [−1, 1] (positive half, descending, last is 0).
const GK15_NODES: [f64; 8] = [
    0.991_455_371_120_812_6,
    0.949_107_912_342_758_5,
    0.864_864_423_359_769_1,
    0.741_531_185_599_394_4,
    0.586_087_235_467_691_1,
    0.405_845_151_377_397_2,
    0.207_784_955_007_898_5,
    0.0,
];
/// Kronrod weights for [`GK15_NODES`].
const GK15_WEIGHTS: [f64; 8] = [
    0.022_935_322_010_529_225,
    0.063_092_092_629_978_55,
    0.104_790_010_322_250_18,
    0.140_653_259_715_525_92,
    0.169_004_726_639_267_9,
    0.190_350_578_064_785_4,
    0.204_432_940_075_298_9,
    0.209_482_141_084_727_83,
];
/// 7-point Gauss weights for the odd-indexed Kronrod nodes 1, 3, 5 and the centre.
const G7_WEIGHTS: [f64; 4] = [
    0.129_484_966_168_869_7,
    0.279_705_391_489_276_7,
    0.381_830_050_505_118_9,
    0.417_959_183_673_469_4,
];

/// One Gauss–Kronrod 7/15 panel on [a, b]: (Kronrod estimate, |Kronrod − Gauss|, ∫|f| estimate).
fn gk15(f: &impl Fn(f64) -> f64, a: f64, b: f64) -> (f64, f64, f64) {
    let c = 0.5 * (a + b);
    let h = 0.5 * (b - a);
    let fc = f(c);
    let mut kronrod = GK15_WEIGHTS[7] * fc;
    let mut gauss = G7_WEIGHTS[3] * fc;
    let mut abs = GK15_WEIGHTS[7] * fc.abs();
    for k in 0..7 {
        let dx = h * GK15_NODES[k];
        let (f1, f2) = (f(c - dx), f(c + dx));
        kronrod += GK15_WEIGHTS[k] * (f1 + f2);
        abs += GK15_WEIGHTS[k] * (f1.abs() + f2.abs());
        if k % 2 == 1 {
            gauss += G7_WEIGHTS[k / 2] * (f1 + f2);
        }
    }
    (kronrod * h, ((kronrod - gauss) * h).abs(), abs * h.abs())
}

/// Globally adaptive Gauss–Kronrod 7/15 quadrature of f over [a, b] to relative
/// tolerance `rel`: bisects the panel with the largest error until the summed error
/// estimate is below `rel`·|∫f| (or a tiny fraction of ∫|f| when the integral cancels),
/// or a panel budget is spent, so it always terminates.
fn adaptive_gauss_kronrod(f: impl Fn(f64) -> f64, a: f64, b: f64, rel: f64) -> f64 {
    // 2000 panels = 30 000 evaluations: far beyond what a smooth or kinked pulse needs.
    const MAX_PANELS: usize = 2000;
    let (i0, e0, abs0) = gk15(&f, a, b);
    // Panels as (a, b, integral, error, ∫|f|).
    let mut panels = vec![(a, b, i0, e0, abs0)];
    loop {
        let (total, error, abs) = panels.iter().fold((0.0, 0.0, 0.0), |acc, p| {
            (acc.0 + p.2, acc.1 + p.3, acc.2 + p.4)
        });
        let target = (rel * total.abs()).max(1e-3 * rel * abs);
        if !total.is_finite() || error <= target || panels.len() >= MAX_PANELS {
            // Re-sum in position order so the result does not depend on the split history.
            panels.sort_by(|p, q| p.0.total_cmp(&q.0));
            return panels.iter().map(|p| p.2).sum();
        }
        let worst = panels
            .iter()
            .enumerate()
            .max_by(|p, q| p.1.3.total_cmp(&q.1.3))
            .map_or(0, |(k, _)| k);
        let (pa, pb, _, _, _) = panels.swap_remove(worst);
        let mid = 0.5 * (pa + pb);
        if !(mid > pa && mid < pb) {
            // The panel cannot be split further in double precision: accept what we have.
            let (i, _, s) = gk15(&f, pa, pb);
            panels.push((pa, pb, i, 0.0, s));
            continue;
        }
        for (lo, hi) in [(pa, mid), (mid, pb)] {
            let (i, e, s) = gk15(&f, lo, hi);
            panels.push((lo, hi, i, e, s));
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Composite Simpson rule with `n` (even) intervals on every smooth piece between
    /// breakpoints: the dense reference every closed form is checked against.
    fn simpson(env: &Envelope, n: usize) -> f64 {
        let mut cuts = vec![0.0];
        cuts.extend(env.breakpoints());
        cuts.push(env.duration());
        let mut total = 0.0;
        for w in cuts.windows(2) {
            let (a, b) = (w[0], w[1]);
            let h = (b - a) / n as f64;
            // Sample just inside the piece so a step's value at its left edge is used.
            let g = |k: usize| {
                let x = a + h * k as f64;
                let x = x.clamp(a + 1e-14 * (b - a), b - 1e-14 * (b - a));
                env.value(x)
            };
            let mut s = g(0) + g(n);
            for k in 1..n {
                s += if k % 2 == 1 { 4.0 } else { 2.0 } * g(k);
            }
            total += s * h / 3.0;
        }
        total
    }

    fn rel_err(a: f64, b: f64) -> f64 {
        (a - b).abs() / b.abs().max(1e-300)
    }

    fn all_shapes() -> Vec<Envelope> {
        let t = 2.5;
        vec![
            Envelope::new(Shape::Square, t).unwrap(),
            Envelope::new(Shape::Gaussian { sigma: 0.4 }, t).unwrap(),
            Envelope::new(Shape::Gaussian { sigma: 3.0 }, t).unwrap(),
            Envelope::new(Shape::Blackman, t).unwrap(),
            Envelope::new(Shape::SinSquared, t).unwrap(),
            Envelope::new(Shape::Sech { width: 0.3 }, t).unwrap(),
            Envelope::new(
                Shape::LinearRamp {
                    from: -1.0,
                    to: 3.0,
                },
                t,
            )
            .unwrap(),
            Envelope::new(
                Shape::TanhRamp {
                    from: 0.5,
                    to: -2.0,
                    width: 0.2,
                },
                t,
            )
            .unwrap(),
            Envelope::piecewise(vec![1.0, -0.5, 2.0], vec![0.5, 1.5, 0.5]).unwrap(),
            Envelope::tabulated(vec![0.0, 0.3, 1.0, 2.5], vec![0.0, 1.0, -0.25, 0.5]).unwrap(),
            Envelope::new(Shape::custom(|x: f64| (3.0 * x).sin() * (-x).exp()), t).unwrap(),
        ]
    }

    #[test]
    fn integrals_match_dense_quadrature_for_every_shape() {
        for env in all_shapes() {
            let closed = env.integral();
            let dense = simpson(&env, 20_000);
            assert!(
                rel_err(closed, dense) < 1e-11,
                "{:?}: closed {closed} vs dense {dense}",
                env.shape()
            );
        }
    }

    #[test]
    fn closed_forms_have_the_documented_values() {
        let t = 4.0;
        let b = Envelope::new(Shape::Blackman, t).unwrap();
        assert!(rel_err(b.integral(), 0.42 * t) < 1e-15);
        let s = Envelope::new(Shape::SinSquared, t).unwrap();
        assert!(rel_err(s.integral(), 0.5 * t) < 1e-15);
        // A Gaussian far inside its window has the full area σ√(2π).
        let g = Envelope::new(Shape::Gaussian { sigma: 0.2 }, t).unwrap();
        assert!(rel_err(g.integral(), 0.2 * (2.0 * PI).sqrt()) < 1e-15);
        // A sech far inside its window has the full area πw.
        let h = Envelope::new(Shape::Sech { width: 0.05 }, t).unwrap();
        assert!(rel_err(h.integral(), PI * 0.05) < 1e-15);
    }

    #[test]
    fn custom_integrals_reach_tight_tolerance_on_hard_integrands() {
        let cases: Vec<(Shape, f64)> = vec![
            // A kink inside the panel.
            (Shape::custom(|x: f64| (x - 0.3).abs()), 0.29),
            // An infinite derivative at the left end.
            (Shape::custom(f64::sqrt), 2.0 / 3.0),
            // A narrow peak.
            (
                Shape::custom(|x: f64| 1.0 / (1.0 + 1e6 * (x - 0.5) * (x - 0.5))),
                2.0 * (500.0_f64).atan() / 1000.0,
            ),
        ];
        for (shape, exact) in cases {
            let env = Envelope::new(shape, 1.0).unwrap();
            assert!(
                rel_err(env.integral(), exact) < 1e-12,
                "{:?}: {} vs {exact}",
                env.shape(),
                env.integral()
            );
        }
        // An integrand that cancels to zero terminates and is tiny.
        let odd = Envelope::new(Shape::custom(|x: f64| x - 0.5), 1.0).unwrap();
        assert!(odd.integral().abs() < 1e-15);
        // A closure returning NaN gives NaN, not a hang or a panic.
        let bad = Envelope::new(Shape::custom(|_| f64::NAN), 1.0).unwrap();
        assert!(bad.integral().is_nan());
    }

    #[test]
    fn gauss_kronrod_rule_is_exact_for_polynomials_to_degree_22() {
        // Validates the tabulated nodes and weights themselves.
        for degree in 0..=22 {
            let (k, _, _) = gk15(&|x: f64| x.powi(degree), -1.0, 1.0);
            let exact = if degree % 2 == 0 {
                2.0 / (degree as f64 + 1.0)
            } else {
                0.0
            };
            assert!((k - exact).abs() < 2e-16, "degree {degree}: {k} vs {exact}");
        }
        for degree in 0..=13 {
            // The embedded 7-point Gauss rule is exact to degree 13: estimate ≈ 0.
            let (_, e, _) = gk15(&|x: f64| x.powi(degree), -1.0, 1.0);
            assert!(e < 2e-16, "degree {degree}: Gauss/Kronrod differ by {e}");
        }
    }

    #[test]
    fn erf_matches_abramowitz_stegun_table_7_1() {
        // Abramowitz & Stegun, Handbook of Mathematical Functions (1964), Table 7.1.
        for (x, v) in [
            (0.5, 0.520_499_877_813_046_5),
            (1.0, 0.842_700_792_949_714_9),
            (2.0, 0.995_322_265_018_952_7),
        ] {
            assert!((erf(x) - v).abs() < 1e-14, "erf({x}) = {} vs {v}", erf(x));
            assert!((erf(-x) + v).abs() < 1e-14);
        }
    }

    #[test]
    fn erf_is_accurate_across_all_three_intervals() {
        // Reference values computed to 30 digits with arbitrary-precision arithmetic.
        let reference = [
            (1e-10, 1.128_379_167_095_512_6e-10),
            (0.1, 0.112_462_916_018_284_9),
            (0.46875, 0.492_613_473_217_937_97),
            (0.47, 0.493_745_050_886_082_1),
            (3.0, 0.999_977_909_503_001_4),
            (4.0, 0.999_999_984_582_742_1),
            (5.0, 0.999_999_999_998_462_5),
        ];
        for (x, v) in reference {
            assert!(
                rel_err(erf(x), v) < 1e-15,
                "erf({x}) = {:e} vs {v:e}",
                erf(x)
            );
        }
        assert_eq!(erf(0.0), 0.0);
        assert_eq!(erf(30.0), 1.0);
        assert_eq!(erf(f64::INFINITY), 1.0);
        assert_eq!(erf(f64::NEG_INFINITY), -1.0);
        assert!(erf(f64::NAN).is_nan());
    }

    #[test]
    fn values_follow_the_formulas_and_vanish_outside() {
        let t = 2.0;
        let g = Envelope::new(Shape::Gaussian { sigma: 0.5 }, t).unwrap();
        assert_eq!(g.value(1.0), 1.0);
        assert!(rel_err(g.value(1.5), (-0.5_f64).exp()) < 1e-15);
        let b = Envelope::new(Shape::Blackman, t).unwrap();
        assert!(b.value(0.0).abs() < 1e-16 && (b.value(1.0) - 1.0).abs() < 1e-15);
        let x = 0.3;
        let direct = 0.42 - 0.5 * (TAU * x / t).cos() + 0.08 * (2.0 * TAU * x / t).cos();
        assert!((b.value(x) - direct).abs() < 1e-15);
        let r = Envelope::new(
            Shape::TanhRamp {
                from: 1.0,
                to: 3.0,
                width: 0.1,
            },
            t,
        )
        .unwrap();
        assert_eq!(r.value(1.0), 2.0);
        for env in all_shapes() {
            let t = env.duration();
            for tau in [-1e-12, t * (1.0 + 1e-12), f64::NAN, f64::INFINITY, -5.0] {
                assert_eq!(env.value(tau), 0.0, "{:?} at {tau}", env.shape());
            }
        }
    }

    #[test]
    fn piecewise_steps_and_tables_are_located_by_binary_search() {
        let p = Envelope::piecewise(vec![1.0, 2.0, 3.0], vec![1.0, 1.0, 1.0]).unwrap();
        assert_eq!(p.value(0.0), 1.0);
        assert_eq!(p.value(0.999), 1.0);
        assert_eq!(p.value(1.0), 2.0);
        assert_eq!(p.value(2.5), 3.0);
        assert_eq!(p.value(3.0), 3.0);
        assert_eq!(p.breakpoints(), vec![1.0, 2.0]);
        assert_eq!(
            p.constant_pieces().unwrap(),
            vec![(0.0, 1.0, 1.0), (1.0, 2.0, 2.0), (2.0, 3.0, 3.0)]
        );
        assert_eq!(p.integral(), 6.0);
        assert_eq!(p.max_abs(), 3.0);

        let tab = Envelope::tabulated(vec![0.0, 1.0, 3.0], vec![0.0, 2.0, -2.0]).unwrap();
        assert_eq!(tab.value(0.5), 1.0);
        assert_eq!(tab.value(1.0), 2.0);
        assert_eq!(tab.value(2.0), 0.0);
        assert_eq!(tab.value(3.0), -2.0);
        assert_eq!(tab.breakpoints(), vec![1.0]);
        assert_eq!(tab.integral(), 1.0 + 0.0);
        assert_eq!(tab.max_abs(), 2.0);
        assert!(tab.constant_pieces().is_none());
    }

    #[test]
    fn pieces_peaks_and_breakpoints_of_smooth_shapes() {
        let sq = Envelope::new(Shape::Square, 1.5).unwrap();
        assert_eq!(sq.constant_pieces(), Some(vec![(0.0, 1.5, 1.0)]));
        let flat = Envelope::new(Shape::LinearRamp { from: 0.7, to: 0.7 }, 1.5).unwrap();
        assert_eq!(flat.constant_pieces(), Some(vec![(0.0, 1.5, 0.7)]));
        for env in all_shapes() {
            let dense = (0..=100_000)
                .map(|k| env.value(env.duration() * k as f64 / 1e5).abs())
                .fold(0.0_f64, f64::max);
            assert!(
                env.max_abs() >= dense - 1e-12 && env.max_abs() <= dense + 1e-6,
                "{:?}: max_abs {} vs dense {dense}",
                env.shape(),
                env.max_abs()
            );
            if !matches!(
                env.shape(),
                Shape::Piecewise { .. } | Shape::Tabulated { .. }
            ) {
                assert!(env.breakpoints().is_empty());
            }
        }
        let ramp = Envelope::new(
            Shape::LinearRamp {
                from: -4.0,
                to: 1.0,
            },
            1.0,
        )
        .unwrap();
        assert_eq!(ramp.max_abs(), 4.0);
        assert!(ramp.constant_pieces().is_none());
    }

    #[test]
    fn invalid_inputs_are_errors_not_panics() {
        for d in [0.0, -1.0, f64::NAN, f64::INFINITY, f64::NEG_INFINITY] {
            assert!(matches!(
                Envelope::new(Shape::Square, d),
                Err(EnvelopeError::Duration { .. })
            ));
        }
        let bad_shapes = vec![
            Shape::Gaussian { sigma: 0.0 },
            Shape::Gaussian { sigma: -1.0 },
            Shape::Gaussian { sigma: f64::NAN },
            Shape::Sech {
                width: f64::INFINITY,
            },
            Shape::LinearRamp {
                from: f64::NAN,
                to: 1.0,
            },
            Shape::TanhRamp {
                from: 0.0,
                to: 1.0,
                width: 0.0,
            },
            Shape::Piecewise {
                values: vec![1.0],
                durations: vec![1.0, 1.0],
            },
            Shape::Piecewise {
                values: vec![],
                durations: vec![],
            },
            Shape::Piecewise {
                values: vec![1.0, 2.0],
                durations: vec![1.0, 0.0],
            },
            Shape::Piecewise {
                values: vec![1.0, f64::NAN],
                durations: vec![1.0, 1.0],
            },
            // Sums to 2, not the duration 3.
            Shape::Piecewise {
                values: vec![1.0, 2.0],
                durations: vec![1.0, 1.0],
            },
            Shape::Tabulated {
                times: vec![0.0, 1.0],
                values: vec![1.0],
            },
            Shape::Tabulated {
                times: vec![0.0],
                values: vec![1.0],
            },
            Shape::Tabulated {
                times: vec![0.1, 3.0],
                values: vec![1.0, 1.0],
            },
            Shape::Tabulated {
                times: vec![0.0, 2.0, 2.0, 3.0],
                values: vec![1.0, 1.0, 1.0, 1.0],
            },
            Shape::Tabulated {
                times: vec![0.0, 2.5],
                values: vec![1.0, 1.0],
            },
            Shape::Tabulated {
                times: vec![0.0, f64::NAN, 3.0],
                values: vec![1.0, 1.0, 1.0],
            },
        ];
        for shape in bad_shapes {
            let err = Envelope::new(shape.clone(), 3.0);
            assert!(err.is_err(), "{shape:?} was accepted");
            let text = err.unwrap_err().to_string();
            assert!(!text.ends_with('.'), "{text}");
        }
        assert!(Envelope::piecewise(vec![], vec![]).is_err());
        assert!(matches!(
            Envelope::piecewise(vec![1.0, 1.0], vec![1.0, f64::NAN]),
            Err(EnvelopeError::Element {
                name: "durations",
                index: 1,
                ..
            })
        ));
        assert!(Envelope::piecewise(vec![1.0], vec![f64::INFINITY]).is_err());
        assert!(Envelope::tabulated(vec![], vec![]).is_err());
        assert!(Envelope::tabulated(vec![0.0, -1.0], vec![1.0, 1.0]).is_err());
        // A rounded sum of many steps is accepted and tiles [0, T] exactly.
        let p = Envelope::new(
            Shape::Piecewise {
                values: vec![1.0; 10],
                durations: vec![0.1; 10],
            },
            1.0,
        )
        .unwrap();
        assert_eq!(p.constant_pieces().unwrap().last().unwrap().1, 1.0);
        assert_eq!(p.value(1.0), 1.0);
    }
}
