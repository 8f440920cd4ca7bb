//! Fieldbook's expression language: quantities with units, constants and formulas in `t`.
//!
//! A run-file value such as `2π × 250 kHz`, `10 mW/cm^2` or `exp(-(t - t0)^2 / (2 sigma^2))`
//! is parsed once with [`parse`] into an [`Expr`], whose [`Expr::references`] name the
//! parameters it depends on. [`Expr::eval`] then gives a [`Quantity`] in SI units with its
//! [`Dim`]ension; [`Expr::compile`] turns a formula in the time `t` into a fast [`Compiled`]
//! function for the integrator. Every failure is an [`ExprError`] with a byte span into the
//! source, never a panic.
//!
//! ```text
//! let mut params = HashMap::new();
//! params.insert("sigma".to_string(), Quantity::new(1e-6, Dim::TIME));
//! let rabi = parse("2π × 250 kHz")?.eval(&params)?;          // 1.5708e6 rad/s, FREQUENCY
//! let envelope = parse("exp(-t^2 / (2 sigma^2))")?.compile(&params)?;
//! envelope.eval(0.0)                                          // 1.0
//! ```
//!
//! Grammar, loosest first: `+ -`; `* / × ·`; unary `-`; juxtaposition (`2π`, `5 MHz`);
//! `^` (right-associative). So `10 mW/cm^2` is (10 mW)/(cm²), `h/2π` is h/(2π), `-x^2` is
//! −(x²).

mod compile;
mod dim;
mod eval;
mod format;
mod lexer;
mod parser;
#[cfg(test)]
mod tests;
mod units;

use std::collections::HashMap;
use std::fmt;
use std::ops::Range;

pub use compile::Compiled;
pub use dim::Dim;
pub use format::{bare_hz_warning, format_quantity};

/// Byte offsets within the expression string.
pub type Span = Range<usize>;

/// A value in SI units with its dimension.
#[derive(Clone, Debug, PartialEq)]
pub struct Quantity {
    /// The value in SI base units (rad/s for angular frequencies, s, m, kg, W/m², …).
    pub value: f64,
    /// Its dimension.
    pub dim: Dim,
    /// The span of a Hz-based unit in a product without π (or h), so the
    /// value may be a cycle frequency mistaken for an angular one; see [`bare_hz_warning`].
    /// When inherited through a parameter, the span lies in that parameter's own expression.
    pub bare_hz: Option<Span>,
}

impl Quantity {
    /// A quantity with `value` in SI units and no Hz warning.
    pub fn new(value: f64, dim: Dim) -> Quantity {
        Quantity {
            value,
            dim,
            bare_hz: None,
        }
    }
}

/// What went wrong, for callers that react to the kind rather than the message.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[non_exhaustive]
pub enum ErrorKind {
    /// The string is empty or only whitespace.
    Empty,
    /// A character the language does not use.
    UnexpectedCharacter,
    /// A token where it cannot stand, such as two numbers in a row.
    UnexpectedToken,
    /// The string ends where a value is expected.
    UnexpectedEnd,
    /// A `(` never closed, or a `)` never opened.
    UnbalancedParenthesis,
    /// A literal number too large for an `f64`.
    NumberTooLarge,
    /// Parentheses, signs or powers nested deeper than the parser allows.
    TooDeep,
    /// A name that is no parameter, constant or unit.
    UnknownName,
    /// A call to a function that does not exist.
    UnknownFunction,
    /// A function name used without parentheses.
    MissingCall,
    /// A function called with the wrong number of arguments.
    ArgumentCount,
    /// Adding, subtracting or comparing quantities of different dimensions.
    DimensionMismatch,
    /// A function that needs a number without dimension was given a dimensioned one.
    DimensionedArgument,
    /// A square root or half power of a dimension with an odd exponent.
    OddDimension,
    /// An exponent that is dimensioned, depends on `t`, or is fractional on a dimensioned base.
    BadExponent,
    /// A dimension exponent beyond ±127.
    DimensionOverflow,
    /// Division by a value that is zero.
    DivisionByZero,
    /// The square root of a negative number or the logarithm of a non-positive one.
    Domain,
    /// A result that is infinite or not a number.
    NotFinite,
    /// The time variable `t` outside an envelope or chirp formula.
    TimeNotAllowed,
    /// A quantity whose dimension is not the one expected (see [`expect_dim`]).
    WrongDimension,
}

/// An error located in the expression string.
#[derive(Clone, Debug, PartialEq)]
pub struct ExprError {
    /// What went wrong.
    pub kind: ErrorKind,
    /// Byte offsets of the offending token or sub-expression.
    pub span: Span,
    /// Lowercase, no trailing period, quoting the offending text in backticks.
    pub message: String,
    /// A suggested fix, such as "did you mean `rabi`?".
    pub hint: Option<String>,
}

impl ExprError {
    fn new(kind: ErrorKind, span: Span, message: impl Into<String>) -> ExprError {
        ExprError {
            kind,
            span,
            message: message.into(),
            hint: None,
        }
    }

    fn hint(mut self, hint: impl Into<String>) -> ExprError {
        self.hint = Some(hint.into());
        self
    }
}

/// The message alone; the hint is a separate field so diagnostics can place it.
impl fmt::Display for ExprError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(&self.message)
    }
}

impl std::error::Error for ExprError {}

/// Parameters visible to an expression.
pub trait Env {
    /// The parameter's value, or `None` if there is no parameter of that name.
    fn lookup(&self, name: &str) -> Option<Quantity>;
    /// All parameter names, for "did you mean" suggestions.
    fn names(&self) -> Vec<String>;
}

/// A plain map of parameter names to values.
impl Env for HashMap<String, Quantity> {
    fn lookup(&self, name: &str) -> Option<Quantity> {
        self.get(name).cloned()
    }

    fn names(&self) -> Vec<String> {
        let mut names: Vec<String> = self.keys().cloned().collect();
        names.sort();
        names
    }
}

/// A parsed expression with spans into its source.
#[derive(Clone, Debug)]
pub struct Expr {
    source: String,
    root: parser::Node,
}

/// Parses `src`. Names are classified here (unit, constant, time or parameter), so
/// [`Expr::references`] works before any parameter has a value.
pub fn parse(src: &str) -> Result<Expr, ExprError> {
    let root = parser::parse(src)?;
    Ok(Expr {
        source: src.to_string(),
        root,
    })
}

impl Expr {
    /// The text this expression was parsed from; spans index into it.
    pub fn source(&self) -> &str {
        &self.source
    }

    /// Parameter references in source order, duplicates kept: every name that is not a
    /// constant, unit, function or `t`, and so must come from the environment.
    pub fn references(&self) -> Vec<(String, Span)> {
        let mut out = Vec::new();
        self.root.visit_names(&mut |span, class| {
            if class == parser::NameClass::Parameter {
                out.push((self.text(span).to_string(), span.clone()));
            }
        });
        out
    }

    /// Every name the environment is consulted for, in source order: the references plus
    /// constants and units that a parameter of the same name would shadow (a parameter `N`
    /// hides the unit newton). A caller that allows such parameter names builds its
    /// dependency graph from these, keeping the ones that are declared parameters.
    pub fn lookups(&self) -> Vec<(String, Span)> {
        let mut out = Vec::new();
        self.root.visit_names(&mut |span, class| {
            if matches!(
                class,
                parser::NameClass::Parameter | parser::NameClass::Shadowable
            ) {
                out.push((self.text(span).to_string(), span.clone()));
            }
        });
        out
    }

    fn text(&self, span: &Span) -> &str {
        self.source.get(span.clone()).unwrap_or("")
    }

    /// Whether the expression mentions the time variable `t`.
    pub fn uses_time(&self) -> bool {
        self.root.uses_time()
    }

    /// Evaluates to a quantity in SI units. Parameters come from `env` and shadow constants
    /// and units of the same name, except for a unit right after a number or unit (`5 m`).
    /// The time `t` is an error here, and so is any result that is infinite or not a number.
    pub fn eval(&self, env: &dyn Env) -> Result<Quantity, ExprError> {
        eval::eval(&self.root, &eval::Ctx::new(&self.source, env)).map(Quantity::from)
    }

    /// Compiles a formula in the time `t` (dimension [`Dim::TIME`], seconds) into a fast
    /// function, folding parameters and constants in. Dimensions are checked here once, so
    /// the compiled function does no checking per call.
    pub fn compile(&self, env: &dyn Env) -> Result<Compiled, ExprError> {
        compile::compile(&self.root, &eval::Ctx::new(&self.source, env))
    }
}

/// Checks that `q` has the `expected` dimension; `what` names the value in the message, e.g.
/// "`rabi` has the dimension of a time; an angular frequency is expected".
pub fn expect_dim(q: &Quantity, expected: Dim, what: &str, span: Span) -> Result<(), ExprError> {
    if q.dim == expected {
        return Ok(());
    }
    let error = ExprError::new(
        ErrorKind::WrongDimension,
        span,
        format!(
            "`{what}` has the dimension of {}; {} is expected",
            q.dim.describe(),
            expected.describe()
        ),
    );
    let hint = match format::example(expected) {
        Some(example) => format!("write it like `{example}`"),
        None => format!("write it in units of {expected}"),
    };
    Err(error.hint(hint))
}
