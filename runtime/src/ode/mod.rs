//! Adaptive embedded Runge–Kutta integrators for complex-valued ODE systems.
//!
//! Two schemes are provided, both with local-error control and dense output:
//!
//! * [`Scheme::DormandPrince54`] — Dormand–Prince 5(4) with FSAL and
//!   Shampine's 4th-order continuous extension; cheap per step, good for
//!   moderate tolerances.
//! * [`Scheme::DormandPrince853`] — Hairer & Wanner's DOP853, order 8 with a
//!   blended 5th/3rd-order error estimate and a 7th-order interpolant; the
//!   better choice for tight tolerances or long, smooth propagations.
//!
//! Output at requested times comes from the interpolant, so sample times
//! never shorten the steps the controller chooses.
//!
//! # Error norm
//! Tolerances act on the modulus of each complex component: with
//! `sc_i = atol + rtol · max(|y_i|, |y_new_i|)` the step is accepted when
//! `sqrt(1/n · Σ_i |err_i / sc_i|²) <= 1` (Hairer, Nørsett & Wanner, Solving
//! ODEs I, 2nd ed., Sec. II.4, with `|·|` the complex modulus, as scipy's
//! `solve_ivp` does). An amplitude is thus controlled as one number rather
//! than as separate real and imaginary parts, so its phase does not change
//! the tolerance it gets.
//!
//! # Example
//! ```
//! # use num_complex::Complex64 as C64;
//! # use fieldbook_runtime::ode::{integrate, RkConfig, Scheme, System};
//! struct Decay;
//! impl System for Decay {
//!     fn dim(&self) -> usize { 1 }
//!     fn rhs(&self, _t: f64, y: &[C64], dy: &mut [C64]) { dy[0] = C64::new(-1.0, 2.0) * y[0]; }
//! }
//! let mut y = [C64::new(1.0, 0.0)];
//! let stats = integrate(Scheme::DormandPrince853, &Decay, 0.0, 1.0, &mut y, &[],
//!                       &RkConfig::default(), &mut |_, _, _| {}).unwrap();
//! assert!((y[0] - C64::new(-1.0, 2.0).exp()).norm() < 1e-8);
//! assert!(stats.steps > 0);
//! ```

use std::fmt;

use num_complex::Complex64 as C64;

mod rk;
pub mod tableau;

pub use rk::integrate;
pub use tableau::Tableau;

/// A first-order system `y' = f(t, y)` with a complex state vector.
pub trait System {
    /// Length of the state vector.
    fn dim(&self) -> usize;
    /// Writes `f(t, y)` into `dy`; both slices have length [`System::dim`].
    fn rhs(&self, t: f64, y: &[C64], dy: &mut [C64]);
}

/// Which embedded Runge–Kutta pair to use.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Scheme {
    /// Dormand–Prince 5(4), 6 right-hand-side evaluations per step (FSAL).
    DormandPrince54,
    /// DOP853, order 8, 12 evaluations per step plus 3 per step that holds
    /// sample times (for the dense output).
    DormandPrince853,
}

impl Scheme {
    /// The Butcher tableau of this scheme.
    pub fn tableau(self) -> &'static Tableau {
        match self {
            Self::DormandPrince54 => tableau::dormand_prince_54(),
            Self::DormandPrince853 => tableau::dormand_prince_853(),
        }
    }
}

/// Tolerances and step-size controller settings.
#[derive(Debug, Clone, PartialEq)]
pub struct RkConfig {
    /// Relative tolerance (>= 0).
    pub rtol: f64,
    /// Absolute tolerance (> 0, so components passing through zero stay
    /// controllable).
    pub atol: f64,
    /// First step size; `None` selects it with Hairer's heuristic.
    pub h_init: Option<f64>,
    /// Smallest step allowed before giving up with
    /// [`OdeError::StepUnderflow`]. The floor actually used is
    /// `max(h_min, 10 ulp(t))`, because smaller steps no longer advance `t`.
    pub h_min: f64,
    /// Largest step allowed (may be infinite).
    pub h_max: f64,
    /// Maximum number of step attempts (accepted plus rejected).
    pub max_steps: u64,
    /// Safety factor applied to the optimal step-size ratio, in (0, 1].
    pub safety: f64,
    /// Smallest factor by which one step may shrink the step size, in (0, 1].
    pub fac_min: f64,
    /// Largest factor by which one step may grow the step size, >= 1.
    pub fac_max: f64,
    /// Number of independent systems interleaved in the state (1 = one system): component i
    /// belongs to system i mod `blocks`. The error norm is the largest of the systems' norms, so
    /// each meets the tolerance as if it were integrated alone while all share one step sequence.
    pub blocks: usize,
}

impl Default for RkConfig {
    fn default() -> Self {
        Self {
            rtol: 1e-8,
            atol: 1e-10,
            h_init: None,
            h_min: 1e-18,
            h_max: f64::INFINITY,
            max_steps: 10_000_000,
            safety: 0.9,
            fac_min: 0.2,
            fac_max: 10.0,
            blocks: 1,
        }
    }
}

impl RkConfig {
    /// Default settings with the given relative and absolute tolerances.
    pub fn with_tolerances(rtol: f64, atol: f64) -> Self {
        Self {
            rtol,
            atol,
            ..Self::default()
        }
    }
}

/// Work counters of one [`integrate`] call.
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct RkStats {
    /// Accepted steps.
    pub steps: u64,
    /// Rejected step attempts.
    pub rejected: u64,
    /// Right-hand-side evaluations, including the initial-step heuristic and
    /// the dense-output stages.
    pub rhs_evals: u64,
    /// Size of the last accepted step (0 if none was taken).
    pub last_h: f64,
}

/// Why an integration stopped early. On any error the state passed to
/// [`integrate`] holds the last accepted state.
#[derive(Debug, Clone, Copy, PartialEq)]
#[non_exhaustive]
pub enum OdeError {
    /// The controller asked for a step below the floor set by
    /// [`RkConfig::h_min`].
    StepUnderflow {
        /// Time reached.
        t: f64,
        /// Rejected step size.
        h: f64,
    },
    /// [`RkConfig::max_steps`] step attempts were used up.
    StepLimit {
        /// Time reached.
        t: f64,
        /// Step attempts made.
        steps: u64,
    },
    /// The state or the right-hand side contained NaN or infinity.
    NonFinite {
        /// Start of the step (or the initial time) where it was detected.
        t: f64,
    },
    /// An argument was out of range; `what` says which and why.
    InvalidInput {
        /// Description of the offending argument.
        what: &'static str,
    },
}

impl fmt::Display for OdeError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match *self {
            Self::StepUnderflow { t, h } => write!(
                f,
                "step size {h:e} fell below the minimum step at t = {t}: the solution may be \
                 singular or very stiff there, or rtol/atol are too tight for f64"
            ),
            Self::StepLimit { t, steps } => write!(
                f,
                "gave up at t = {t} after {steps} step attempts (max_steps): raise max_steps, \
                 loosen rtol/atol, or shorten the interval"
            ),
            Self::NonFinite { t } => write!(
                f,
                "state or right-hand side became NaN or infinite near t = {t}: check the initial \
                 state and the right-hand side for overflow or division by zero"
            ),
            Self::InvalidInput { what } => write!(f, "invalid integrator input: {what}"),
        }
    }
}

impl std::error::Error for OdeError {}
