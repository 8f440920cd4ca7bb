//! Compilation of formulas in `t` to closures, with everything independent of `t` folded.

use std::fmt;
use std::sync::Arc;

use super::dim::Dim;
use super::eval::{self, Ctx, Power, Resolved};
use super::parser::{AddOp, MulOp, Node};
use super::units::Func;
use super::{ErrorKind, ExprError};

type Fun = Arc<dyn Fn(f64) -> f64 + Send + Sync>;

/// Compiled code. Keeping constants and the bare time variable apart from closures lets a
/// binary operation capture a constant operand by value instead of calling a closure for it.
#[derive(Clone)]
enum Code {
    Const(f64),
    Time,
    Dyn(Fun),
}

/// A formula in the time `t`, dimension-checked once and ready to evaluate many times.
#[derive(Clone)]
pub struct Compiled {
    dim: Dim,
    code: Code,
}

impl Compiled {
    /// The dimension of the result.
    pub fn dim(&self) -> Dim {
        self.dim
    }

    /// The value in SI units if the formula does not depend on `t`.
    pub fn constant(&self) -> Option<f64> {
        match self.code {
            Code::Const(value) => Some(value),
            _ => None,
        }
    }

    /// The value in SI units at time `t` in seconds. No checks: a NaN or infinite result is
    /// returned as is, for the integrator to detect.
    #[inline]
    pub fn eval(&self, t: f64) -> f64 {
        match &self.code {
            Code::Const(value) => *value,
            Code::Time => t,
            Code::Dyn(f) => f(t),
        }
    }

    /// The formula as a shareable function of `t` in seconds, giving SI units.
    pub fn into_fn(self) -> Arc<dyn Fn(f64) -> f64 + Send + Sync> {
        match self.code {
            Code::Const(value) => Arc::new(move |_| value),
            Code::Time => Arc::new(|t| t),
            Code::Dyn(f) => f,
        }
    }
}

/// Shows the dimension and, when known, the constant value.
impl fmt::Debug for Compiled {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let mut out = f.debug_struct("Compiled");
        out.field("dim", &self.dim);
        match self.code {
            Code::Const(value) => out.field("constant", &value),
            _ => out.field("constant", &None::<f64>),
        };
        out.finish()
    }
}

/// Compiles a tree in which `t` is allowed.
pub(super) fn compile(node: &Node, ctx: &Ctx) -> Result<Compiled, ExprError> {
    let (code, dim) = build(node, ctx)?;
    Ok(Compiled { dim, code })
}

fn build(node: &Node, ctx: &Ctx) -> Result<(Code, Dim), ExprError> {
    // Fold whatever does not depend on `t` by evaluating it, which also checks it for
    // division by zero and overflow once.
    if !node.uses_time() {
        let val = eval::eval(node, ctx)?;
        return Ok((Code::Const(val.value), val.dim));
    }
    Ok(match node {
        Node::Num { value, .. } => (Code::Const(*value), Dim::DIMENSIONLESS),
        Node::Name { name, span } => match eval::resolve(name, span, ctx)? {
            Resolved::Time => (Code::Time, Dim::TIME),
            Resolved::Value(val) => (Code::Const(val.value), val.dim),
        },
        Node::Group { inner, .. } => build(inner, ctx)?,
        Node::Neg { arg, .. } => {
            let (code, dim) = build(arg, ctx)?;
            (unary(code, |x| -x), dim)
        }
        Node::Sum { first, rest, .. } => {
            let (mut code, mut dim) = build(first, ctx)?;
            let mut span = first.span();
            for (op, op_span, rhs) in rest {
                let (right, right_dim) = build(rhs, ctx)?;
                dim = eval::add_dim(ctx, *op, op_span, (dim, &span), (right_dim, &rhs.span()))?;
                span.end = rhs.span().end;
                code = match op {
                    AddOp::Add => binary(code, right, |a, b| a + b),
                    AddOp::Sub => binary(code, right, |a, b| a - b),
                };
            }
            (code, dim)
        }
        Node::Product { first, rest, .. } => {
            let (mut code, mut dim) = build(first, ctx)?;
            let mut span = first.span();
            for (op, _, rhs) in rest {
                let (right, right_dim) = build(rhs, ctx)?;
                span.end = rhs.span().end;
                dim = eval::mul_dim(ctx, *op, dim, right_dim, &span)?;
                // A constant zero divisor is a mistake whatever `t` is.
                if *op == MulOp::Div && matches!(right, Code::Const(v) if v == 0.0) {
                    return Err(eval::division_by_zero(ctx, &rhs.span()));
                }
                code = match op {
                    MulOp::Mul => binary(code, right, |a, b| a * b),
                    MulOp::Div => binary(code, right, |a, b| a / b),
                };
            }
            (code, dim)
        }
        Node::Pow { base, exp, .. } => {
            if exp.uses_time() {
                return Err(ExprError::new(
                    ErrorKind::BadExponent,
                    exp.span(),
                    format!(
                        "the exponent `{}` depends on the time `t`; exponents must be constant",
                        ctx.text(&exp.span())
                    ),
                )
                .hint("for a power that changes in time, write `exp(… × ln(base))`"));
            }
            let (code, base_dim) = build(base, ctx)?;
            let e = eval::eval(exp, ctx)?;
            let (power, dim) =
                eval::exponent(ctx, (base_dim, &base.span()), (e.dim, e.value, &exp.span()))?;
            let code = match power {
                Power::Square => unary(code, |x| x * x),
                Power::Int(_) | Power::Real(_) => unary(code, move |x| power.apply(x)),
            };
            (code, dim)
        }
        Node::Call {
            func, first, rest, ..
        } => {
            let mut codes = Vec::new();
            let mut dims = Vec::new();
            for arg in std::iter::once(&**first).chain(rest) {
                let (code, dim) = build(arg, ctx)?;
                codes.push(code);
                dims.push((dim, arg.span()));
            }
            let dim = eval::call_dim(ctx, *func, &dims)?;
            let func = *func;
            let mut codes = codes.into_iter();
            let first = codes.next().unwrap_or(Code::Const(f64::NAN));
            let code = match func {
                Func::Min | Func::Max => codes.fold(first, |acc, code| {
                    binary(acc, code, move |a, b| func.fold(a, b))
                }),
                // The common envelope function gets its own closure without a dispatch.
                Func::Exp => unary(first, f64::exp),
                _ => unary(first, move |x| func.apply(x)),
            };
            (code, dim)
        }
    })
}

fn dynamic(f: impl Fn(f64) -> f64 + Send + Sync + 'static) -> Code {
    Code::Dyn(Arc::new(f))
}

/// `f` applied to compiled code.
fn unary(code: Code, f: impl Fn(f64) -> f64 + Copy + Send + Sync + 'static) -> Code {
    match code {
        Code::Const(x) => Code::Const(f(x)),
        Code::Time => dynamic(f),
        Code::Dyn(g) => dynamic(move |t| f(g(t))),
    }
}

/// `f` applied to two pieces of compiled code, specialised so that constants and `t` are
/// read directly rather than through a closure call.
fn binary(a: Code, b: Code, f: impl Fn(f64, f64) -> f64 + Copy + Send + Sync + 'static) -> Code {
    match (a, b) {
        (Code::Const(x), Code::Const(y)) => Code::Const(f(x, y)),
        (Code::Time, Code::Const(y)) => dynamic(move |t| f(t, y)),
        (Code::Const(x), Code::Time) => dynamic(move |t| f(x, t)),
        (Code::Time, Code::Time) => dynamic(move |t| f(t, t)),
        (Code::Dyn(g), Code::Const(y)) => dynamic(move |t| f(g(t), y)),
        (Code::Const(x), Code::Dyn(h)) => dynamic(move |t| f(x, h(t))),
        (Code::Dyn(g), Code::Time) => dynamic(move |t| f(g(t), t)),
        (Code::Time, Code::Dyn(h)) => dynamic(move |t| f(t, h(t))),
        (Code::Dyn(g), Code::Dyn(h)) => dynamic(move |t| f(g(t), h(t))),
    }
}
