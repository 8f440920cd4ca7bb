//! The parser: tokens to a syntax tree with spans, classifying every name as it goes.

use super::lexer::{self, Tok, Token};
use super::units::{self, Arity, Func, Known};
use super::{ErrorKind, ExprError, Span};

/// How deeply parentheses, calls, signs and powers may nest. The evaluator recurses over the
/// tree, so this bound is what keeps hostile input from overflowing the stack.
pub(super) const MAX_DEPTH: usize = 64;

/// `+` or `-`.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(super) enum AddOp {
    Add,
    Sub,
}

/// `*` (also juxtaposition) or `/`.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(super) enum MulOp {
    Mul,
    Div,
}

/// What a name was resolved to at parse time.
#[derive(Clone, Debug, PartialEq)]
pub(super) enum Name {
    /// The time variable `t`.
    Time,
    /// A unit right after a number or unit (`5 MHz`, `m/s`): parameters cannot shadow it.
    Unit(Known),
    /// A constant or unit elsewhere: a parameter of the same name takes precedence.
    Builtin(Known),
    /// Anything else must be a parameter.
    Parameter,
}

/// The coarse class of a name, for [`Node::visit_names`].
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(super) enum NameClass {
    Time,
    Fixed,
    Shadowable,
    Parameter,
}

/// A syntax-tree node; every node knows the span of the text it came from. Chains of `+`/`-`
/// and of `*`/`/` are flat lists, so a long sum does not make the tree deep.
#[derive(Clone, Debug)]
pub(super) enum Node {
    Num {
        value: f64,
        span: Span,
    },
    Name {
        name: Name,
        span: Span,
    },
    /// Parentheses, kept so messages can quote `(t - t0)` whole.
    Group {
        inner: Box<Node>,
        span: Span,
    },
    Neg {
        arg: Box<Node>,
        span: Span,
    },
    /// `first op₁ x₁ op₂ x₂ …`, each op with its span.
    Sum {
        first: Box<Node>,
        rest: Vec<(AddOp, Span, Node)>,
        span: Span,
    },
    /// Like `Sum`; juxtaposition is `Mul` with the gap between the factors as its span.
    Product {
        first: Box<Node>,
        rest: Vec<(MulOp, Span, Node)>,
        span: Span,
    },
    Pow {
        base: Box<Node>,
        exp: Box<Node>,
        span: Span,
    },
    /// A call; the parser guarantees the argument count, and the first argument is held
    /// apart so that every call has one.
    Call {
        func: Func,
        first: Box<Node>,
        rest: Vec<Node>,
        span: Span,
    },
}

impl Node {
    /// The span of the text this node came from.
    pub(super) fn span(&self) -> Span {
        match self {
            Node::Num { span, .. }
            | Node::Name { span, .. }
            | Node::Group { span, .. }
            | Node::Neg { span, .. }
            | Node::Sum { span, .. }
            | Node::Product { span, .. }
            | Node::Pow { span, .. }
            | Node::Call { span, .. } => span.clone(),
        }
    }

    /// The direct children, in source order.
    fn children(&self) -> Vec<&Node> {
        match self {
            Node::Num { .. } | Node::Name { .. } => Vec::new(),
            Node::Group { inner: arg, .. } | Node::Neg { arg, .. } => vec![arg],
            Node::Sum { first, rest, .. } => std::iter::once(&**first)
                .chain(rest.iter().map(|r| &r.2))
                .collect(),
            Node::Product { first, rest, .. } => std::iter::once(&**first)
                .chain(rest.iter().map(|r| &r.2))
                .collect(),
            Node::Pow { base, exp, .. } => vec![base, exp],
            Node::Call { first, rest, .. } => std::iter::once(&**first).chain(rest).collect(),
        }
    }

    /// Whether `t` occurs anywhere below.
    pub(super) fn uses_time(&self) -> bool {
        match self {
            Node::Name { name, .. } => *name == Name::Time,
            _ => self.children().into_iter().any(Node::uses_time),
        }
    }

    /// Calls `f` with the span and class of every name, in source order.
    pub(super) fn visit_names(&self, f: &mut dyn FnMut(&Span, NameClass)) {
        match self {
            Node::Name { name, span } => {
                let class = match name {
                    Name::Time => NameClass::Time,
                    Name::Unit(_) => NameClass::Fixed,
                    Name::Builtin(_) => NameClass::Shadowable,
                    Name::Parameter => NameClass::Parameter,
                };
                f(span, class);
            }
            _ => {
                for child in self.children() {
                    child.visit_names(f);
                }
            }
        }
    }
}

/// Parses `src` into a tree.
pub(super) fn parse(src: &str) -> Result<Node, ExprError> {
    let toks = lexer::lex(src)?;
    if toks.is_empty() {
        return Err(
            ExprError::new(ErrorKind::Empty, 0..src.len(), "an empty expression")
                .hint("write a value such as `2π × 250 kHz`"),
        );
    }
    let mut parser = Parser {
        src,
        toks,
        pos: 0,
        depth: 0,
    };
    let node = parser.sum()?;
    match parser.peek() {
        None => Ok(node),
        Some(tok) => Err(parser.unexpected(&tok)),
    }
}

struct Parser<'a> {
    src: &'a str,
    toks: Vec<Token>,
    pos: usize,
    depth: usize,
}

fn span_of(first: &Node, last: Option<&Node>) -> Span {
    first.span().start..last.unwrap_or(first).span().end
}

/// Whether a node ends in a unit (`mW`, `cm^2`, `kg m`), so that a name after `*` or `/`
/// is tried as a unit first: `mW/cm^2`, `V/m`.
fn ends_in_unit(node: &Node) -> bool {
    match node {
        Node::Name {
            name: Name::Unit(_),
            ..
        } => true,
        Node::Name {
            name: Name::Builtin(known),
            ..
        } => known.is_unit,
        Node::Pow { base, .. } => ends_in_unit(base),
        Node::Product { first, rest, .. } => ends_in_unit(rest.last().map_or(first, |r| &r.2)),
        _ => false,
    }
}

/// Whether a name juxtaposed after this node is tried as a unit first: after a number
/// (`5 MHz`, `10^6 Hz`) or a unit (`kg m`). After `/` only units count, so `1/T` stays a
/// parameter `T`.
fn juxtaposed_unit_first(node: &Node) -> bool {
    match node {
        Node::Num { .. } => true,
        Node::Pow { base, .. } if matches!(**base, Node::Num { .. }) => true,
        _ => ends_in_unit(node),
    }
}

/// Resolves a name as far as possible without an environment.
fn classify(text: &str, unit_first: bool) -> Name {
    if unit_first && let Some(known) = units::unit(text) {
        return Name::Unit(known);
    }
    if text == "t" {
        return Name::Time;
    }
    match units::constant(text).or_else(|| units::unit(text)) {
        Some(known) => Name::Builtin(known),
        None => Name::Parameter,
    }
}

impl Parser<'_> {
    fn peek(&self) -> Option<Token> {
        self.toks.get(self.pos).cloned()
    }

    fn text(&self, span: &Span) -> &str {
        self.src.get(span.clone()).unwrap_or("")
    }

    /// Counts one level of nesting; fails past [`MAX_DEPTH`].
    fn enter(&mut self, span: &Span) -> Result<(), ExprError> {
        self.depth += 1;
        if self.depth > MAX_DEPTH {
            return Err(ExprError::new(
                ErrorKind::TooDeep,
                span.clone(),
                format!(
                    "the expression is nested too deeply (more than {MAX_DEPTH} levels of parentheses, signs or powers)"
                ),
            )
            .hint("split it into parameters"));
        }
        Ok(())
    }

    fn leave(&mut self) {
        self.depth -= 1;
    }

    fn sum(&mut self) -> Result<Node, ExprError> {
        let first = self.term()?;
        let mut rest = Vec::new();
        while let Some(tok) = self.peek() {
            let op = match tok.tok {
                Tok::Plus => AddOp::Add,
                Tok::Minus => AddOp::Sub,
                _ => break,
            };
            self.pos += 1;
            rest.push((op, tok.span, self.term()?));
        }
        if rest.is_empty() {
            return Ok(first);
        }
        let span = span_of(&first, rest.last().map(|r| &r.2));
        Ok(Node::Sum {
            first: Box::new(first),
            rest,
            span,
        })
    }

    fn term(&mut self) -> Result<Node, ExprError> {
        let first = self.signed(false)?;
        let mut rest: Vec<(MulOp, Span, Node)> = Vec::new();
        while let Some(tok) = self.peek() {
            let op = match tok.tok {
                Tok::Star => MulOp::Mul,
                Tok::Slash => MulOp::Div,
                _ => break,
            };
            self.pos += 1;
            let unit_first = ends_in_unit(rest.last().map_or(&first, |r| &r.2));
            let rhs = self.signed(unit_first)?;
            rest.push((op, tok.span, rhs));
        }
        if rest.is_empty() {
            return Ok(first);
        }
        let span = span_of(&first, rest.last().map(|r| &r.2));
        Ok(Node::Product {
            first: Box::new(first),
            rest,
            span,
        })
    }

    /// Unary signs, which bind looser than juxtaposition and `^`: `-x^2` is −(x²).
    fn signed(&mut self, unit_first: bool) -> Result<Node, ExprError> {
        match self.peek() {
            Some(tok) if matches!(tok.tok, Tok::Minus | Tok::Plus) => {
                self.pos += 1;
                self.enter(&tok.span)?;
                let arg = self.signed(false)?;
                self.leave();
                if tok.tok == Tok::Plus {
                    return Ok(arg);
                }
                let span = tok.span.start..arg.span().end;
                Ok(Node::Neg {
                    arg: Box::new(arg),
                    span,
                })
            }
            _ => self.juxtaposed(unit_first),
        }
    }

    /// Implicit multiplication: factors side by side, binding tighter than `*` and `/`. A
    /// number cannot follow (`2 3` is an error), since that is more likely a typo.
    fn juxtaposed(&mut self, unit_first: bool) -> Result<Node, ExprError> {
        let first = self.power(unit_first)?;
        let mut rest: Vec<(MulOp, Span, Node)> = Vec::new();
        while let Some(tok) = self.peek() {
            if !matches!(tok.tok, Tok::Ident | Tok::LParen) {
                break;
            }
            let left = rest.last().map_or(&first, |r| &r.2);
            let gap = left.span().end..tok.span.start;
            let unit_first = juxtaposed_unit_first(left);
            let rhs = self.power(unit_first)?;
            rest.push((MulOp::Mul, gap, rhs));
        }
        if rest.is_empty() {
            return Ok(first);
        }
        let span = span_of(&first, rest.last().map(|r| &r.2));
        Ok(Node::Product {
            first: Box::new(first),
            rest,
            span,
        })
    }

    /// `base ^ exponent`, right-associative, with an optional sign on the exponent (`2^-1`).
    fn power(&mut self, unit_first: bool) -> Result<Node, ExprError> {
        let base = self.primary(unit_first)?;
        match self.peek() {
            Some(tok) if tok.tok == Tok::Caret => {
                self.pos += 1;
                self.enter(&tok.span)?;
                let exp = self.exponent()?;
                self.leave();
                let span = span_of(&base, Some(&exp));
                Ok(Node::Pow {
                    base: Box::new(base),
                    exp: Box::new(exp),
                    span,
                })
            }
            _ => Ok(base),
        }
    }

    fn exponent(&mut self) -> Result<Node, ExprError> {
        match self.peek() {
            Some(tok) if matches!(tok.tok, Tok::Minus | Tok::Plus) => {
                self.pos += 1;
                self.enter(&tok.span)?;
                let arg = self.exponent()?;
                self.leave();
                if tok.tok == Tok::Plus {
                    return Ok(arg);
                }
                let span = tok.span.start..arg.span().end;
                Ok(Node::Neg {
                    arg: Box::new(arg),
                    span,
                })
            }
            _ => self.power(false),
        }
    }

    fn primary(&mut self, unit_first: bool) -> Result<Node, ExprError> {
        let Some(tok) = self.peek() else {
            return Err(self.unexpected_end());
        };
        match tok.tok {
            Tok::Num(value) => {
                self.pos += 1;
                Ok(Node::Num {
                    value,
                    span: tok.span,
                })
            }
            Tok::Ident => {
                self.pos += 1;
                self.name(tok.span, unit_first)
            }
            Tok::LParen => {
                self.pos += 1;
                self.enter(&tok.span)?;
                let inner = self.sum()?;
                let close = self.close(&tok.span)?;
                self.leave();
                Ok(Node::Group {
                    inner: Box::new(inner),
                    span: tok.span.start..close.end,
                })
            }
            _ => Err(ExprError::new(
                ErrorKind::UnexpectedToken,
                tok.span.clone(),
                format!("a value is expected before `{}`", self.text(&tok.span)),
            )),
        }
    }

    /// A name, or a call if it is a function. A name followed directly by `(` that is not a
    /// function is an unknown function; with a space between, it is a product (`a (b + c)`).
    fn name(&mut self, span: Span, unit_first: bool) -> Result<Node, ExprError> {
        let text = self.text(&span).to_string();
        let next = self.peek();
        let paren_next = next.as_ref().filter(|n| n.tok == Tok::LParen);
        if let Some(func) = Func::named(&text) {
            return match paren_next {
                Some(open) => self.call(func, span, open.span.clone()),
                None => Err(ExprError::new(
                    ErrorKind::MissingCall,
                    span,
                    format!("`{text}` is a function, so its argument goes in parentheses"),
                )
                .hint(format!("write `{text}(…)`"))),
            };
        }
        if let Some(open) = paren_next.filter(|open| open.span.start == span.end) {
            let names: Vec<String> = units::function_names()
                .into_iter()
                .map(str::to_string)
                .collect();
            let hint = match units::closest(&text, &names) {
                Some(near) => format!("did you mean `{near}`?"),
                None => format!(
                    "the functions are {}; to multiply, write `{text}*(…)` or put a space before `(`",
                    units::function_names().join(", ")
                ),
            };
            return Err(ExprError::new(
                ErrorKind::UnknownFunction,
                span.start..open.span.end,
                format!("`{text}` is not a known function"),
            )
            .hint(hint));
        }
        Ok(Node::Name {
            name: classify(&text, unit_first),
            span,
        })
    }

    fn call(&mut self, func: Func, name: Span, open: Span) -> Result<Node, ExprError> {
        self.pos += 1;
        self.enter(&open)?;
        let mut args = Vec::new();
        if self.peek().is_none_or(|tok| tok.tok != Tok::RParen) {
            args.push(self.sum()?);
            while self.peek().is_some_and(|tok| tok.tok == Tok::Comma) {
                self.pos += 1;
                args.push(self.sum()?);
            }
        }
        let close = self.close(&open)?;
        self.leave();
        let span = name.start..close.end;
        let (count_ok, wanted) = match func.arity() {
            Arity::One => (args.len() == 1, "1 argument"),
            Arity::AtLeastTwo => (args.len() >= 2, "2 or more arguments"),
        };
        let given = match args.len() {
            1 => "1 was".to_string(),
            n => format!("{n} were"),
        };
        let mut args = args.into_iter();
        match (count_ok, args.next()) {
            (true, Some(first)) => Ok(Node::Call {
                func,
                first: Box::new(first),
                rest: args.collect(),
                span,
            }),
            _ => Err(ExprError::new(
                ErrorKind::ArgumentCount,
                span,
                format!("`{}` takes {wanted}, but {given} given", func.name()),
            )),
        }
    }

    /// Consumes the `)` matching the `(` at `open`, returning its span.
    fn close(&mut self, open: &Span) -> Result<Span, ExprError> {
        match self.peek() {
            Some(tok) if tok.tok == Tok::RParen => {
                self.pos += 1;
                Ok(tok.span)
            }
            Some(tok) => Err(self.unexpected(&tok)),
            None => Err(ExprError::new(
                ErrorKind::UnbalancedParenthesis,
                open.clone(),
                "the `(` is never closed",
            )
            .hint("add a `)` where the group ends")),
        }
    }

    /// A token that cannot follow a complete value.
    fn unexpected(&self, tok: &Token) -> ExprError {
        let text = self.text(&tok.span);
        match tok.tok {
            Tok::RParen => ExprError::new(
                ErrorKind::UnbalancedParenthesis,
                tok.span.clone(),
                "the `)` has no matching `(`",
            )
            .hint("remove it, or add a `(` where the group starts"),
            Tok::Num(_) => ExprError::new(
                ErrorKind::UnexpectedToken,
                tok.span.clone(),
                format!("unexpected number `{text}` right after a value"),
            )
            .hint("put an operator such as `*` before it"),
            Tok::Comma => ExprError::new(
                ErrorKind::UnexpectedToken,
                tok.span.clone(),
                "unexpected `,` outside a function call",
            ),
            _ => ExprError::new(
                ErrorKind::UnexpectedToken,
                tok.span.clone(),
                format!("unexpected `{text}`"),
            ),
        }
    }

    fn unexpected_end(&self) -> ExprError {
        let span = self
            .toks
            .last()
            .map_or(0..self.src.len(), |t| t.span.clone());
        ExprError::new(
            ErrorKind::UnexpectedEnd,
            span,
            format!(
                "the expression ends after `{}`; a value is expected",
                tail(self.src.trim_end(), 40)
            ),
        )
    }
}

/// The last `max` characters of `s`, marked with `…` when cut.
fn tail(s: &str, max: usize) -> String {
    let count = s.chars().count();
    if count <= max {
        return s.to_string();
    }
    let cut: String = s.chars().skip(count - max).collect();
    format!("…{cut}")
}
