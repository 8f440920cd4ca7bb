//! Evaluation to quantities, and the dimension rules that compilation shares.

use super::dim::Dim;
use super::format::format_quantity;
use super::parser::{AddOp, MulOp, Name, Node};
use super::units::{self, Func, Known};
use super::{Env, ErrorKind, ExprError, Quantity, Span};

/// What evaluation needs besides the tree: the source for quoting, and the parameters.
pub(super) struct Ctx<'a> {
    src: &'a str,
    pub env: &'a dyn Env,
}

impl<'a> Ctx<'a> {
    pub(super) fn new(src: &'a str, env: &'a dyn Env) -> Ctx<'a> {
        Ctx { src, env }
    }

    /// The source text at `span`, for quoting in messages.
    pub(super) fn text(&self, span: &Span) -> &'a str {
        self.src.get(span.clone()).unwrap_or("")
    }
}

/// An intermediate value: a quantity plus whether its product contains π (or h), which
/// decides whether a Hz unit in it is flagged.
#[derive(Clone, Debug)]
pub(super) struct Val {
    /// SI value.
    pub value: f64,
    pub dim: Dim,
    pub bare_hz: Option<Span>,
    pub clears_hz: bool,
}

impl Val {
    fn number(value: f64) -> Val {
        Val {
            value,
            dim: Dim::DIMENSIONLESS,
            bare_hz: None,
            clears_hz: false,
        }
    }

    fn known(known: &Known, span: &Span) -> Val {
        Val {
            value: known.value,
            dim: known.dim,
            bare_hz: known.is_hz.then(|| span.clone()),
            clears_hz: known.clears_hz,
        }
    }
}

/// A name after resolution against the environment.
pub(super) enum Resolved {
    Time,
    Value(Val),
}

/// Resolves a name: `t`; a unit in unit-first position; a parameter from the environment;
/// a constant or unit. A parameter keeps the Hz flag of its own expression.
pub(super) fn resolve(name: &Name, span: &Span, ctx: &Ctx) -> Result<Resolved, ExprError> {
    let text = ctx.text(span);
    let param = || -> Result<Option<Val>, ExprError> {
        let Some(q) = ctx.env.lookup(text) else {
            return Ok(None);
        };
        if !q.value.is_finite() {
            return Err(ExprError::new(
                ErrorKind::NotFinite,
                span.clone(),
                format!("the parameter `{text}` has no finite value"),
            ));
        }
        Ok(Some(Val {
            value: q.value,
            dim: q.dim,
            bare_hz: q.bare_hz.filter(|_| q.value != 0.0),
            clears_hz: false,
        }))
    };
    let val = match name {
        Name::Time => return Ok(Resolved::Time),
        Name::Unit(known) => Val::known(known, span),
        Name::Builtin(known) => param()?.unwrap_or_else(|| Val::known(known, span)),
        Name::Parameter => match param()? {
            Some(val) => val,
            None => return Err(unknown_name(text, span, ctx)),
        },
    };
    Ok(Resolved::Value(val))
}

fn unknown_name(text: &str, span: &Span, ctx: &Ctx) -> ExprError {
    let mut candidates = ctx.env.names();
    candidates.extend(units::builtin_names());
    let error = ExprError::new(
        ErrorKind::UnknownName,
        span.clone(),
        format!("`{text}` is not a parameter, constant or unit"),
    );
    if matches!(text.to_lowercase().as_str(), "nan" | "inf" | "infinity") {
        return error.hint("there are no `nan` or `inf` values; every value is a finite number");
    }
    match units::closest(text, &candidates) {
        Some(near) => error.hint(format!("did you mean `{near}`?")),
        None => error.hint(format!(
            "define a parameter `{text}`, or check the spelling"
        )),
    }
}

/// The error for `t` where only constants are allowed.
pub(super) fn time_not_allowed(span: &Span) -> ExprError {
    ExprError::new(
        ErrorKind::TimeNotAllowed,
        span.clone(),
        "the time variable `t` is only available in envelope and chirp formulas",
    )
    .hint("for a fixed time, use a number with a unit or a parameter such as `t0`")
}

/// Evaluates a tree with no time variable.
pub(super) fn eval(node: &Node, ctx: &Ctx) -> Result<Val, ExprError> {
    let mut val = match node {
        Node::Num { value, .. } => Val::number(*value),
        Node::Name { name, span } => match resolve(name, span, ctx)? {
            Resolved::Time => return Err(time_not_allowed(span)),
            Resolved::Value(val) => val,
        },
        Node::Group { inner, .. } => eval(inner, ctx)?,
        Node::Neg { arg, .. } => {
            let val = eval(arg, ctx)?;
            Val {
                value: -val.value,
                ..val
            }
        }
        Node::Sum { first, rest, .. } => {
            let mut acc = eval(first, ctx)?;
            let mut acc_span = first.span();
            for (op, op_span, rhs) in rest {
                let right = eval(rhs, ctx)?;
                let dim = add_dim(
                    ctx,
                    *op,
                    op_span,
                    (acc.dim, &acc_span),
                    (right.dim, &rhs.span()),
                )?;
                acc_span.end = rhs.span().end;
                let value = match op {
                    AddOp::Add => acc.value + right.value,
                    AddOp::Sub => acc.value - right.value,
                };
                acc = Val {
                    value: finite(ctx, value, &acc_span)?,
                    dim,
                    bare_hz: acc.bare_hz.or(right.bare_hz),
                    // A sum is free of the warning only if both sides were.
                    clears_hz: acc.clears_hz && right.clears_hz,
                };
            }
            acc
        }
        Node::Product { first, rest, .. } => {
            let mut acc = eval(first, ctx)?;
            let mut acc_span = first.span();
            for (op, _, rhs) in rest {
                let right = eval(rhs, ctx)?;
                acc_span.end = rhs.span().end;
                let dim = mul_dim(ctx, *op, acc.dim, right.dim, &acc_span)?;
                let value = match op {
                    MulOp::Mul => acc.value * right.value,
                    MulOp::Div if right.value == 0.0 => {
                        return Err(division_by_zero(ctx, &rhs.span()));
                    }
                    MulOp::Div => acc.value / right.value,
                };
                let clears_hz = acc.clears_hz || right.clears_hz;
                acc = Val {
                    value: finite(ctx, value, &acc_span)?,
                    dim,
                    bare_hz: if clears_hz {
                        None
                    } else {
                        acc.bare_hz.or(right.bare_hz)
                    },
                    clears_hz,
                };
            }
            acc
        }
        Node::Pow { base, exp, span } => {
            let b = eval(base, ctx)?;
            let e = eval(exp, ctx)?;
            let (power, dim) = exponent(ctx, (b.dim, &base.span()), (e.dim, e.value, &exp.span()))?;
            Val {
                value: finite(ctx, power.apply(b.value), span)?,
                dim,
                ..b
            }
        }
        Node::Call {
            func,
            first,
            rest,
            span,
        } => {
            let args = std::iter::once(&**first)
                .chain(rest)
                .map(|arg| Ok((eval(arg, ctx)?, arg.span())))
                .collect::<Result<Vec<_>, ExprError>>()?;
            let dims: Vec<(Dim, Span)> = args.iter().map(|(v, s)| (v.dim, s.clone())).collect();
            let dim = call_dim(ctx, *func, &dims)?;
            call_value(ctx, *func, &args, dim, span)?
        }
    };
    // An exact zero is the same in every reading, so it never carries the Hz warning.
    if val.value == 0.0 {
        val.bare_hz = None;
    }
    Ok(val)
}

fn call_value(
    ctx: &Ctx,
    func: Func,
    args: &[(Val, Span)],
    dim: Dim,
    span: &Span,
) -> Result<Val, ExprError> {
    let mut values = args.iter().map(|(v, _)| v.value);
    let first = values.next().unwrap_or(f64::NAN);
    if let Some((arg, arg_span)) = args.first() {
        let needs = match func {
            Func::Sqrt if arg.value < 0.0 => Some("an argument of at least zero"),
            Func::Ln | Func::Log10 if arg.value <= 0.0 => Some("a positive argument"),
            _ => None,
        };
        if let Some(needs) = needs {
            return Err(ExprError::new(
                ErrorKind::Domain,
                arg_span.clone(),
                format!(
                    "`{}` needs {needs}, but `{}` is {}",
                    func.name(),
                    ctx.text(arg_span),
                    format_quantity(arg.value, arg.dim)
                ),
            ));
        }
    }
    let value = values.fold(func.apply(first), |acc, x| func.fold(acc, x));
    let (bare_hz, clears_hz) = match func {
        // These keep the argument's reading in rad/s.
        Func::Sqrt | Func::Abs => args
            .first()
            .map_or((None, false), |(v, _)| (v.bare_hz.clone(), v.clears_hz)),
        Func::Min | Func::Max => (
            args.iter().find_map(|(v, _)| v.bare_hz.clone()),
            args.iter().all(|(v, _)| v.clears_hz),
        ),
        _ => (None, false),
    };
    Ok(Val {
        value: finite(ctx, value, span)?,
        dim,
        bare_hz,
        clears_hz,
    })
}

/// The error for dividing by `divisor`, which is zero.
pub(super) fn division_by_zero(ctx: &Ctx, divisor: &Span) -> ExprError {
    ExprError::new(
        ErrorKind::DivisionByZero,
        divisor.clone(),
        format!("division by zero: `{}` is zero", ctx.text(divisor)),
    )
}

/// Fails on infinite or NaN results, quoting the sub-expression.
fn finite(ctx: &Ctx, value: f64, span: &Span) -> Result<f64, ExprError> {
    if value.is_finite() {
        return Ok(value);
    }
    let text = ctx.text(span);
    let message = if value.is_nan() {
        format!("`{text}` is not a real number")
    } else {
        format!("`{text}` is too large (beyond about 1.8×10³⁰⁸ in SI units)")
    };
    Err(ExprError::new(ErrorKind::NotFinite, span.clone(), message))
}

/// The dimension of a sum or difference: both sides must agree.
pub(super) fn add_dim(
    ctx: &Ctx,
    op: AddOp,
    op_span: &Span,
    (left, left_span): (Dim, &Span),
    (right, right_span): (Dim, &Span),
) -> Result<Dim, ExprError> {
    if left == right {
        return Ok(left);
    }
    let (message, symbol) = match op {
        AddOp::Add => (
            format!("cannot add {} to {}", right.describe(), left.describe()),
            "+",
        ),
        AddOp::Sub => (
            format!(
                "cannot subtract {} from {}",
                right.describe(),
                left.describe()
            ),
            "-",
        ),
    };
    Err(
        ExprError::new(ErrorKind::DimensionMismatch, op_span.clone(), message).hint(format!(
            "`{}` is {} and `{}` is {}; both sides of `{symbol}` need the same dimension",
            ctx.text(left_span),
            left.describe(),
            ctx.text(right_span),
            right.describe()
        )),
    )
}

/// The dimension of a product or quotient.
pub(super) fn mul_dim(
    ctx: &Ctx,
    op: MulOp,
    left: Dim,
    right: Dim,
    span: &Span,
) -> Result<Dim, ExprError> {
    let dim = match op {
        MulOp::Mul => left.checked_mul(right),
        MulOp::Div => left.checked_div(right),
    };
    dim.ok_or_else(|| dimension_overflow(ctx, span))
}

fn dimension_overflow(ctx: &Ctx, span: &Span) -> ExprError {
    ExprError::new(
        ErrorKind::DimensionOverflow,
        span.clone(),
        format!(
            "the dimension of `{}` has an exponent beyond ±127",
            ctx.text(span)
        ),
    )
}

/// How a power is computed, shared by evaluation and compilation so both give the same bits.
#[derive(Clone, Copy, Debug, PartialEq)]
pub(super) enum Power {
    /// `x*x`, the common case in Gaussians, exactly rounded.
    Square,
    /// Small integer powers by repeated multiplication.
    Int(i32),
    Real(f64),
}

impl Power {
    fn of(p: f64) -> Power {
        if p == 2.0 {
            Power::Square
        } else if p.fract() == 0.0 && p.abs() <= 64.0 {
            // In range, so the cast is exact.
            Power::Int(p as i32)
        } else {
            Power::Real(p)
        }
    }

    /// `x` raised to this power.
    pub(super) fn apply(self, x: f64) -> f64 {
        match self {
            Power::Square => x * x,
            Power::Int(n) => x.powi(n),
            Power::Real(p) => x.powf(p),
        }
    }
}

/// Checks an exponent and gives the power's kind and dimension. The exponent must be a
/// number without dimension; on a dimensioned base it must be a whole or half number, and a
/// half power needs even exponents in the base's dimension.
pub(super) fn exponent(
    ctx: &Ctx,
    (base, base_span): (Dim, &Span),
    (exp_dim, p, exp_span): (Dim, f64, &Span),
) -> Result<(Power, Dim), ExprError> {
    if !exp_dim.is_dimensionless() {
        return Err(ExprError::new(
            ErrorKind::BadExponent,
            exp_span.clone(),
            format!(
                "the exponent `{}` must be a number without dimension, but it is {}",
                ctx.text(exp_span),
                exp_dim.describe()
            ),
        )
        .hint("divide it by a quantity of the same kind, like `t/tau`"));
    }
    let power = Power::of(p);
    if base.is_dimensionless() {
        return Ok((power, base));
    }
    let halves = 2.0 * p;
    if halves.fract() != 0.0 || halves.abs() > 1e4 {
        let text = ctx.text(exp_span);
        // Quote the value too when the exponent is a formula such as `1/3`.
        let value = if text.trim().parse::<f64>().is_ok() {
            String::new()
        } else {
            format!(" (= {})", format_quantity(p, Dim::DIMENSIONLESS))
        };
        return Err(ExprError::new(
            ErrorKind::BadExponent,
            exp_span.clone(),
            format!(
                "`{}` is {}, so its exponent must be a whole or half number, not `{text}`{value}",
                ctx.text(base_span),
                base.describe(),
            ),
        ));
    }
    // Bounded above, so the cast is exact.
    let halves = halves as i64;
    let odd = halves % 2 != 0 && base.0.iter().any(|d| d % 2 != 0);
    if odd {
        return Err(ExprError::new(
            ErrorKind::OddDimension,
            exp_span.clone(),
            format!(
                "a half power of `{}` has no whole dimension: {} ({base}) has an odd exponent",
                ctx.text(base_span),
                base.describe()
            ),
        ));
    }
    let span = base_span.start..exp_span.end;
    let dim = base
        .pow_halves(halves)
        .ok_or_else(|| dimension_overflow(ctx, &span))?;
    Ok((power, dim))
}

/// Checks a call's argument dimensions and gives the result's dimension.
pub(super) fn call_dim(ctx: &Ctx, func: Func, args: &[(Dim, Span)]) -> Result<Dim, ExprError> {
    let Some((dim, span)) = args.first() else {
        return Ok(Dim::DIMENSIONLESS);
    };
    let (dim, text) = (*dim, ctx.text(span));
    match func {
        Func::Sqrt => dim.pow_halves(1).ok_or_else(|| {
            ExprError::new(
                ErrorKind::OddDimension,
                span.clone(),
                format!(
                    "the square root of `{text}` has no whole dimension: {} ({dim}) has an odd exponent",
                    dim.describe()
                ),
            )
            .hint("check the units inside `sqrt(…)`")
        }),
        Func::Abs => Ok(dim),
        Func::Min | Func::Max => {
            for (other, other_span) in args.iter().skip(1) {
                if *other != dim {
                    return Err(ExprError::new(
                        ErrorKind::DimensionMismatch,
                        other_span.clone(),
                        format!(
                            "cannot compare {} with {} in `{}`",
                            other.describe(),
                            dim.describe(),
                            func.name()
                        ),
                    )
                    .hint(format!(
                        "`{}` is {} and `{text}` is {}; every argument of `{}` needs the same dimension",
                        ctx.text(other_span),
                        other.describe(),
                        dim.describe(),
                        func.name()
                    )));
                }
            }
            Ok(dim)
        }
        _ if func.needs_dimensionless() && !dim.is_dimensionless() => {
            let hint = match func {
                Func::Sin | Func::Cos | Func::Tan => {
                    "angles are numbers in rad; a phase is a frequency times a time, like `2π × 5 MHz × t`"
                }
                _ => "divide by a quantity of the same kind, like `t/tau`",
            };
            Err(ExprError::new(
                ErrorKind::DimensionedArgument,
                span.clone(),
                format!(
                    "the argument of `{}` must be a number without dimension, but `{text}` is {}",
                    func.name(),
                    dim.describe()
                ),
            )
            .hint(hint))
        }
        _ => Ok(Dim::DIMENSIONLESS),
    }
}

/// Converts for the public API.
impl From<Val> for Quantity {
    fn from(val: Val) -> Quantity {
        Quantity {
            value: val.value,
            dim: val.dim,
            bare_hz: val.bare_hz,
        }
    }
}
