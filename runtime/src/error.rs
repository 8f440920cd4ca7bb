//! The runtime's error type: every way a model, a state or a solve can fail, with the fields a
//! physicist needs to act on it.

use crate::envelope::EnvelopeError;
use crate::lindblad::LindbladError;
use crate::ode::OdeError;

/// Everything the runtime can refuse or fail at. Messages name the offending object and say
/// what to change.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum Error {
    /// The atom has no levels.
    #[error("the atom has no levels; declare at least one")]
    EmptyModel,
    /// Two levels share a name.
    #[error("level `{name}` is declared twice; level names must be unique")]
    DuplicateLevel {
        /// The repeated name.
        name: String,
    },
    /// A level index is out of range.
    #[error("{what} refers to level index {index}, but the atom has {count} levels")]
    UnknownLevel {
        /// What referred to it.
        what: String,
        /// The bad index.
        index: usize,
        /// Number of levels.
        count: usize,
    },
    /// A field, pulse or transition index is out of range.
    #[error("{what} refers to {kind} index {index}, but there are {count}")]
    UnknownIndex {
        /// What referred to it.
        what: String,
        /// "field", "transition", "pulse" …
        kind: &'static str,
        /// The bad index.
        index: usize,
        /// How many exist.
        count: usize,
    },
    /// A number is NaN or infinite.
    #[error("{what} is not a finite number")]
    NonFinite {
        /// Which quantity.
        what: String,
    },
    /// A quantity is outside its allowed range.
    #[error("{what} = {value:e} is out of range: {hint}")]
    OutOfRange {
        /// Which quantity.
        what: String,
        /// The value given.
        value: f64,
        /// What is allowed.
        hint: &'static str,
    },
    /// Inconsistent model structure (a transition or decay that cannot exist).
    #[error("{what}: {hint}")]
    Inconsistent {
        /// The offending object.
        what: String,
        /// What to change.
        hint: String,
    },
    /// A slice has the wrong length.
    #[error("{what} has {got} entries where {expected} are needed")]
    Shape {
        /// Which input.
        what: &'static str,
        /// Entries needed.
        expected: usize,
        /// Entries given.
        got: usize,
    },
    /// A matrix that must be Hermitian is not.
    #[error(
        "{what} is not Hermitian (largest |H − H†| relative to its largest entry: {deviation:e})"
    )]
    NotHermitian {
        /// Which matrix.
        what: String,
        /// Relative deviation.
        deviation: f64,
    },
    /// A state is not a valid quantum state.
    #[error("invalid initial state: {hint}")]
    BadState {
        /// What is wrong.
        hint: String,
    },
    /// The field's polarisation does not drive the transition its strength refers to.
    #[error(
        "field `{field}` cannot be given a Rabi frequency on transition {transition}: its polarisation does not drive that transition; change the polarisation or the reference transition"
    )]
    ReferenceNotDriven {
        /// The field's name.
        field: String,
        /// The transition, as `lower -> upper`.
        transition: String,
    },
    /// A pulse area needs a reference transition and the field has none.
    #[error(
        "a pulse of field `{field}` is given by its area, but the field has no reference transition; give its strength as a Rabi frequency on a transition or its carrier as a detuning from one"
    )]
    NoReference {
        /// The field's name.
        field: String,
    },
    /// The exact frame would take too many steps.
    #[error(
        "the exact frame would need about {steps:.1e} steps: the fastest term rotates at 2π × {fastest_hz:.4e} Hz over {duration:.3e} s (limit {limit:.1e}); use the rotating frame, or raise the step limit if you really need the counter-rotating terms"
    )]
    ExactFrameTooCostly {
        /// Estimated steps.
        steps: f64,
        /// Fastest rotation, in Hz (ν/2π).
        fastest_hz: f64,
        /// Sequence duration (s).
        duration: f64,
        /// The configured limit.
        limit: f64,
    },
    /// A steady state was asked for a Hamiltonian that depends on time in the chosen frame.
    #[error(
        "a steady state needs a time-independent Hamiltonian, but {term} still rotates at 2π × {nu_hz:.4e} Hz in the rotating frame; remove the field or lower the frame's cutoff so the term is dropped"
    )]
    TimeDependentSteadyState {
        /// The offending term.
        term: String,
        /// Its rotation (Hz).
        nu_hz: f64,
    },
    /// The chosen method cannot treat this problem.
    #[error("method {method} cannot solve this problem: {hint}")]
    MethodUnsuitable {
        /// The method's name.
        method: &'static str,
        /// Why, and what to use instead.
        hint: String,
    },
    /// A step-size-controlled method could not reach its tolerance.
    #[error("method {method} failed at t = {t:e} s: {hint}")]
    StepFailure {
        /// The method's name.
        method: &'static str,
        /// Time of failure (s).
        t: f64,
        /// What happened and what to do.
        hint: String,
    },
    /// An envelope is invalid.
    #[error("pulse envelope: {0}")]
    Envelope(#[from] EnvelopeError),
    /// The Runge–Kutta integrator failed.
    #[error("Runge–Kutta integration: {0}")]
    Ode(#[from] OdeError),
    /// The master-equation machinery failed.
    #[error("master equation: {0}")]
    Lindblad(#[from] LindbladError),
    /// The computation was cancelled.
    #[error("cancelled")]
    Cancelled,
}
