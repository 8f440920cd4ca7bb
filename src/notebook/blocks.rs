//! Typed scenario blocks: each block's TOML tree read into a struct whose values are parsed
//! expressions, names and result paths, each with its span. Reading reports every problem it
//! finds and keeps going; nothing here evaluates an expression.
// Blocks are read once per file and never stored in bulk; boxing their larger variants would
// only add noise.
#![allow(clippy::large_enum_variant)]

use super::diag::{Diagnostic, did_you_mean};
use super::expr::{self, Expr};
use super::markdown::is_name;
use super::path::{self, ObsSpec, ResultPath};
use super::schema::list;
use super::source::Span;
use super::tree::{Key, Node, Value};

/// A parsed expression and where its text sits in the run-file.
#[derive(Clone, Debug)]
pub struct Ex {
    /// The parsed expression.
    pub expr: Expr,
    /// The TOML value's span.
    pub span: Span,
    /// Run-file offset of the expression text's first byte, when it maps one to one.
    pub content: Option<usize>,
}

impl Ex {
    /// The run-file span of a byte range within the expression text.
    pub fn at(&self, inner: &expr::Span) -> Span {
        match self.content {
            Some(c) => c + inner.start..c + inner.end.max(inner.start),
            None => self.span.clone(),
        }
    }

    /// The expression text.
    pub fn text(&self) -> &str {
        self.expr.source()
    }

    /// Turn an expression error into a diagnostic at the right place.
    pub fn diag(&self, e: &expr::ExprError) -> Diagnostic {
        Diagnostic::error(self.at(&e.span), e.message.clone()).with_hint_opt(e.hint.clone())
    }
}

/// A name used in a block (of a level, light, block …) with its span.
#[derive(Clone, Debug, PartialEq)]
pub struct Name {
    /// The name.
    pub name: String,
    /// Where it is.
    pub span: Span,
}

/// `"LOWER -> UPPER"` with spans of both names.
#[derive(Clone, Debug, PartialEq)]
pub struct Pair {
    /// The first level.
    pub from: Name,
    /// The second level.
    pub to: Name,
    /// The whole key or string.
    pub span: Span,
}

/// A `params` block.
#[derive(Clone, Debug)]
pub struct ParamsBlock {
    /// The parameters in source order.
    pub entries: Vec<(Name, Ex)>,
    /// Parameters whose definition could not be read (already reported); later references to
    /// them are not reported again.
    pub broken: Vec<Name>,
}

/// One level of an atom.
#[derive(Clone, Debug)]
pub struct LevelDef {
    /// Its name.
    pub name: Name,
    /// E/ħ (rad/s).
    pub energy: Ex,
}

/// One dipole transition.
#[derive(Clone, Debug)]
pub struct TransitionDef {
    /// Lower → upper.
    pub pair: Pair,
    /// ⟨upper|d_q|lower⟩ (C·m), default e·a₀.
    pub dipole: Option<Ex>,
    /// Spherical component q.
    pub q: i8,
}

/// A rate attached to a pair of levels or to one level.
#[derive(Clone, Debug)]
pub struct RateDef<K> {
    /// Which channel.
    pub key: K,
    /// The rate (1/s).
    pub rate: Ex,
}

/// An `atom` block.
#[derive(Clone, Debug)]
pub struct AtomBlock {
    /// Levels in order.
    pub levels: Vec<LevelDef>,
    /// Declared transitions.
    pub transitions: Vec<TransitionDef>,
    /// Decay channels.
    pub decays: Vec<RateDef<Pair>>,
    /// Dephasing rates.
    pub dephasing: Vec<RateDef<Name>>,
}

/// How a light's strength is given.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum StrengthKind {
    /// Peak Rabi frequency on the reference transition (rad/s).
    Rabi,
    /// Peak field amplitude (V/m).
    Field,
    /// Peak intensity (W/m²).
    Intensity,
}

/// A light's chirp.
#[derive(Clone, Debug)]
pub enum ChirpDef {
    /// δ(t) = rate·t (rad/s²).
    Rate(Ex),
    /// δ(t) as a formula in t (rad/s).
    Formula(Ex),
}

/// A `light` block.
#[derive(Clone, Debug)]
pub struct LightBlock {
    /// The atom named by `atom`, if given.
    pub atom: Option<Name>,
    /// The reference transition.
    pub drives: Pair,
    /// Detuning Δ (rad/s).
    pub detuning: Option<Ex>,
    /// Absolute carrier frequency (rad/s).
    pub frequency: Option<Ex>,
    /// Strength and how it is given.
    pub strength: (StrengthKind, Ex),
    /// Phase (rad).
    pub phase: Option<Ex>,
    /// Spherical polarisation component.
    pub polarization: i8,
    /// FWHM linewidth (rad/s).
    pub linewidth: Option<Ex>,
    /// Chirp.
    pub chirp: Option<ChirpDef>,
}

/// An envelope shape.
#[derive(Clone, Debug)]
pub enum ShapeDef {
    /// Rectangular.
    Square,
    /// Blackman window.
    Blackman,
    /// sin².
    SinSquared,
    /// Gaussian of rms width σ (s).
    Gaussian(Ex),
    /// sech of width w (s).
    Sech(Ex),
    /// tanh ramp of width w (s) between two values.
    Tanh {
        /// Width (s).
        width: Ex,
        /// Start value.
        from: f64,
        /// End value.
        to: f64,
    },
    /// Linear ramp.
    Ramp {
        /// Start value.
        from: f64,
        /// End value.
        to: f64,
    },
    /// A formula in t.
    Formula(Ex),
    /// Piecewise-constant steps.
    Steps {
        /// Heights.
        values: Vec<f64>,
        /// Lengths (s).
        durations: Vec<Ex>,
    },
    /// Interpolated table.
    Table {
        /// Knot times (s).
        times: Vec<Ex>,
        /// Values.
        values: Vec<f64>,
    },
}

/// One step of a sequence.
#[derive(Clone, Debug)]
pub enum StepDef {
    /// A pulse of a light.
    Pulse {
        /// The light.
        light: Name,
        /// Envelope.
        shape: ShapeDef,
        /// Length (s).
        duration: Option<Ex>,
        /// Area (rad).
        area: Option<Ex>,
        /// Amplitude factor.
        scale: Option<Ex>,
        /// Extra phase (rad).
        phase: Option<Ex>,
        /// Absolute start (s).
        at: Option<Ex>,
        /// The step's table.
        span: Span,
    },
    /// A wait.
    Wait {
        /// Length (s).
        duration: Ex,
    },
}

/// A `sequence` block.
#[derive(Clone, Debug)]
pub struct SequenceBlock {
    /// Steps in order.
    pub steps: Vec<StepDef>,
}

/// The initial state of an evolution.
#[derive(Clone, Debug)]
pub enum StartDef {
    /// The first level of the atom.
    Default,
    /// One level.
    Level(Name),
    /// Incoherent weights.
    Mixture(Vec<(Name, f64)>),
    /// Real amplitudes.
    Superposition(Vec<(Name, f64)>),
    /// Boltzmann mixture.
    Thermal {
        /// Over these levels.
        levels: Vec<Name>,
        /// At this temperature (K).
        temperature: Ex,
    },
}

/// One sweep axis.
#[derive(Clone, Debug)]
pub enum AxisValues {
    /// Evenly (or logarithmically) spaced.
    Range {
        /// First value.
        from: Ex,
        /// Last value.
        to: Ex,
        /// Number of points.
        points: (i64, Span),
        /// Logarithmic spacing.
        log: bool,
    },
    /// Explicit values.
    List(Vec<Ex>),
}

/// A swept parameter.
#[derive(Clone, Debug)]
pub struct AxisDef {
    /// The parameter.
    pub param: Name,
    /// Its values.
    pub values: AxisValues,
}

/// The width of an averaged distribution.
#[derive(Clone, Debug)]
pub enum WidthDef {
    /// rms width, in the parameter's unit.
    Sigma(Ex),
    /// Doppler width from temperature, mass and wavelength.
    Doppler {
        /// K.
        temperature: Ex,
        /// kg.
        mass: Ex,
        /// m.
        wavelength: Ex,
    },
}

/// An ensemble average over one parameter.
#[derive(Clone, Debug)]
pub struct AverageDef {
    /// The parameter.
    pub param: Name,
    /// Its distribution's width.
    pub width: WidthDef,
    /// Nodes or draws.
    pub points: (i64, Span),
    /// Seeded Monte Carlo instead of Gauss–Hermite quadrature.
    pub monte_carlo: Option<u64>,
}

/// The propagation method as named in the run-file.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum MethodName {
    /// auto
    Auto,
    /// eigen
    Eigen,
    /// dp54
    Dp54,
    /// dop853
    Dop853,
    /// magnus4
    Magnus4,
    /// liouvillian
    Liouvillian,
}

/// An `evolve` block.
#[derive(Clone, Debug)]
pub struct EvolveBlock {
    /// Named atom.
    pub atom: Option<Name>,
    /// Named sequence.
    pub sequence: Option<Name>,
    /// Steady state instead of time evolution.
    pub steady: bool,
    /// Lights of a steady state.
    pub lights: Option<Vec<Name>>,
    /// Initial state.
    pub start: StartDef,
    /// Exact frame instead of rotating.
    pub exact: bool,
    /// Rotating-frame cutoff (rad/s).
    pub cutoff: Option<Ex>,
    /// Method.
    pub method: MethodName,
    /// Relative tolerance.
    pub rtol: Option<f64>,
    /// Absolute tolerance.
    pub atol: Option<f64>,
    /// Step limit.
    pub max_steps: Option<u64>,
    /// Observables with their spans.
    pub observe: Vec<(ObsSpec, Span, Vec<Span>)>,
    /// Number of samples (time traces).
    pub samples: Option<(usize, Span)>,
    /// Sweep axes.
    pub sweep: Vec<AxisDef>,
    /// Ensemble average.
    pub average: Option<AverageDef>,
}

/// A result path with its span and, when the text maps, its offset.
#[derive(Clone, Debug)]
pub struct PathRef {
    /// Parsed.
    pub path: ResultPath,
    /// The path's text.
    pub text: String,
    /// The TOML value or key span.
    pub span: Span,
    /// Run-file offset of the text, when it maps one to one.
    pub content: Option<usize>,
}

impl PathRef {
    /// The run-file span of a range within the path text.
    pub fn at(&self, inner: &Span) -> Span {
        match self.content {
            Some(c) => c + inner.start..c + inner.end,
            None => self.span.clone(),
        }
    }
}

/// A `plot` block.
#[derive(Clone, Debug)]
pub struct PlotBlock {
    /// Horizontal axis.
    pub x: PathRef,
    /// Curves (or the vertical axis of a heat map).
    pub y: Vec<PathRef>,
    /// Heat-map colour.
    pub z: Option<PathRef>,
    /// Title.
    pub title: Option<String>,
    /// Log x.
    pub log_x: bool,
    /// Log y.
    pub log_y: bool,
}

/// A `table` block.
#[derive(Clone, Debug)]
pub struct TableBlock {
    /// Columns.
    pub columns: Vec<PathRef>,
    /// Title.
    pub title: Option<String>,
}

/// A tolerance.
#[derive(Clone, Debug)]
pub enum Tol {
    /// Absolute, in the result's unit.
    Abs(Ex),
    /// Relative.
    Rel(f64),
}

/// What a checked value must satisfy.
#[derive(Clone, Debug)]
pub enum Condition {
    /// |got − value| ≤ tolerance.
    Near(Ex, Tol),
    /// got ≤ bound.
    Below(Ex),
    /// got ≥ bound.
    Above(Ex),
    /// Both bounds.
    Between(Ex, Ex),
}

/// One check.
#[derive(Clone, Debug)]
pub struct CheckItem {
    /// The checked result.
    pub path: PathRef,
    /// The condition.
    pub condition: Condition,
}

/// A `check` block.
#[derive(Clone, Debug)]
pub struct CheckBlock {
    /// Checks in order.
    pub items: Vec<CheckItem>,
}

/// Any typed block.
#[derive(Clone, Debug)]
pub enum Block {
    /// params
    Params(ParamsBlock),
    /// atom
    Atom(AtomBlock),
    /// light
    Light(LightBlock),
    /// sequence
    Sequence(SequenceBlock),
    /// evolve
    Evolve(Box<EvolveBlock>),
    /// plot
    Plot(PlotBlock),
    /// table
    Table(TableBlock),
    /// check
    Check(CheckBlock),
}

/// Reads values out of a TOML table, collecting diagnostics.
pub struct Reader<'a> {
    diags: &'a mut Vec<Diagnostic>,
    /// Top-level keys the kind does not accept (already reported).
    typos: Vec<String>,
    /// Span of the whole block, for "missing key" errors.
    block: Span,
    kind: &'static str,
}

type Entries = [(Key, Node)];

fn get<'t>(t: &'t Entries, key: &str) -> Option<&'t Node> {
    t.iter().find(|(k, _)| k.name == key).map(|(_, v)| v)
}

fn key_span(t: &Entries, key: &str) -> Option<Span> {
    t.iter()
        .find(|(k, _)| k.name == key)
        .map(|(k, _)| k.span.clone())
}

impl<'a> Reader<'a> {
    /// A reader for a block of `kind` spanning `block`.
    pub fn new(diags: &'a mut Vec<Diagnostic>, block: Span, kind: &'static str) -> Self {
        Self {
            diags,
            typos: vec![],
            block,
            kind,
        }
    }

    /// Tell the reader which top-level keys were unknown, so that a missing required key that
    /// one of them misspells is not reported twice.
    pub fn with_typos(mut self, typos: Vec<String>) -> Self {
        self.typos = typos;
        self
    }

    fn error(&mut self, span: Span, msg: impl Into<String>, hint: impl Into<String>) {
        let hint = hint.into();
        let d = Diagnostic::error(span, msg);
        self.diags.push(if hint.is_empty() {
            d
        } else {
            d.with_hint(hint)
        });
    }

    fn missing(&mut self, key: &str, hint: &str) {
        // An unknown key that looks like this one was already reported as a typo.
        if self.typos.iter().any(|t| strsim::levenshtein(t, key) <= 2) {
            return;
        }
        let span = self.block.start..self.block.start + 3;
        self.error(
            span,
            format!("this `{}` block needs `{key}`", self.kind),
            hint,
        );
    }

    fn wrong_type(&mut self, key: &str, node: &Node, expected: &str) {
        if node.value == Value::Invalid {
            return;
        }
        self.error(
            node.span.clone(),
            format!("`{key}` must be {expected}, not {}", node.value.type_name()),
            "",
        );
    }

    /// An expression from a string, or from a plain number (dimensionless).
    pub fn expr(&mut self, key: &str, node: &Node) -> Option<Ex> {
        let (text, content) = match &node.value {
            Value::Str { text, content } => (text.clone(), *content),
            Value::Int(i) => (i.to_string(), None),
            Value::Float(x) => (format!("{x:e}"), None),
            _ => {
                self.wrong_type(
                    key,
                    node,
                    "a string holding an expression, such as \"2π × 5 MHz\"",
                );
                return None;
            }
        };
        match expr::parse(&text) {
            Ok(expr) => Some(Ex {
                expr,
                span: node.span.clone(),
                content,
            }),
            Err(e) => {
                let ex_span = match content {
                    Some(c) => c + e.span.start..c + e.span.end.max(e.span.start),
                    None => node.span.clone(),
                };
                self.diags
                    .push(Diagnostic::error(ex_span, e.message).with_hint_opt(e.hint));
                None
            }
        }
    }

    fn opt_expr(&mut self, t: &Entries, key: &str) -> Option<Ex> {
        get(t, key).and_then(|n| self.expr(key, n))
    }

    fn string<'n>(&mut self, key: &str, node: &'n Node) -> Option<(&'n str, Span)> {
        match &node.value {
            Value::Str { text, content } => {
                let span = match content {
                    Some(c) => *c..*c + text.len(),
                    None => node.span.clone(),
                };
                Some((text.as_str(), span))
            }
            _ => {
                self.wrong_type(key, node, "a string");
                None
            }
        }
    }

    fn name(&mut self, key: &str, node: &Node) -> Option<Name> {
        let (s, span) = self.string(key, node)?;
        let trimmed = s.trim();
        if !is_name(trimmed) {
            self.error(
                span,
                format!("`{s}` is not a valid name"),
                "names start with a letter and hold letters, digits, `_` and `-`",
            );
            return None;
        }
        Some(Name {
            name: trimmed.to_string(),
            span,
        })
    }

    fn opt_name(&mut self, t: &Entries, key: &str) -> Option<Name> {
        get(t, key).and_then(|n| self.name(key, n))
    }

    fn bool(&mut self, t: &Entries, key: &str) -> bool {
        match get(t, key) {
            None => false,
            Some(Node {
                value: Value::Bool(b),
                ..
            }) => *b,
            Some(n) => {
                self.wrong_type(key, n, "`true` or `false`");
                false
            }
        }
    }

    fn number(&mut self, key: &str, node: &Node) -> Option<f64> {
        match node.value {
            Value::Int(i) => Some(i as f64),
            Value::Float(x) => Some(x),
            _ => {
                self.wrong_type(key, node, "a number");
                None
            }
        }
    }

    fn opt_number(&mut self, t: &Entries, key: &str) -> Option<f64> {
        get(t, key).and_then(|n| self.number(key, n))
    }

    fn integer(&mut self, key: &str, node: &Node) -> Option<(i64, Span)> {
        match node.value {
            Value::Int(i) => Some((i, node.span.clone())),
            _ => {
                self.wrong_type(key, node, "an integer");
                None
            }
        }
    }

    fn table<'n>(&mut self, key: &str, node: &'n Node) -> Option<&'n Entries> {
        match &node.value {
            Value::Table(t) => Some(t),
            _ => {
                self.wrong_type(key, node, "a table");
                None
            }
        }
    }

    fn array<'n>(&mut self, key: &str, node: &'n Node) -> Option<&'n [Node]> {
        match &node.value {
            Value::Array(a) => Some(a),
            _ => {
                self.wrong_type(key, node, "an array");
                None
            }
        }
    }

    fn choice(&mut self, key: &str, node: &Node, options: &[&'static str]) -> Option<&'static str> {
        let (s, span) = self.string(key, node)?;
        match options.iter().find(|o| **o == s) {
            Some(o) => Some(o),
            None => {
                let hint = match did_you_mean(s, options.iter().copied()) {
                    Some(o) => format!("did you mean `{o}`? (choose one of {})", list(options)),
                    None => format!("choose one of {}", list(options)),
                };
                self.error(span, format!("`{s}` is not a valid `{key}`"), hint);
                None
            }
        }
    }

    fn polarization(&mut self, key: &str, node: Option<&Node>) -> i8 {
        match node.and_then(|n| self.choice(key, n, &["pi", "sigma+", "sigma-"])) {
            Some("sigma+") => 1,
            Some("sigma-") => -1,
            _ => 0,
        }
    }

    /// `"A -> B"` from text at `span` (content offset `content` when it maps).
    fn pair(&mut self, text: &str, span: Span, content: Option<usize>) -> Option<Pair> {
        let Some(arrow) = text.find("->") else {
            self.error(
                span,
                format!("`{text}` is not a level pair"),
                "write `\"LOWER -> UPPER\"`, e.g. `\"g -> e\"`",
            );
            return None;
        };
        let piece = |s: &str, off: usize| -> Option<Name> {
            let t = s.trim();
            let lead = s.len() - s.trim_start().len();
            is_name(t).then(|| Name {
                name: t.to_string(),
                span: match content {
                    Some(c) => c + off + lead..c + off + lead + t.len(),
                    None => span.clone(),
                },
            })
        };
        match (
            piece(&text[..arrow], 0),
            piece(&text[arrow + 2..], arrow + 2),
        ) {
            (Some(from), Some(to)) => Some(Pair { from, to, span }),
            _ => {
                self.error(
                    span,
                    format!("`{text}` is not a level pair"),
                    "write `\"LOWER -> UPPER\"` with two level names",
                );
                None
            }
        }
    }

    fn pair_node(&mut self, key: &str, node: &Node) -> Option<Pair> {
        match &node.value {
            Value::Str { text, content } => self.pair(text, node.span.clone(), *content),
            _ => {
                self.wrong_type(key, node, "a string such as \"g -> e\"");
                None
            }
        }
    }

    fn pair_key(&mut self, key: &Key) -> Option<Pair> {
        // Quoted keys start one byte after their span start; bare keys cannot hold `->`.
        self.pair(&key.name, key.span.clone(), Some(key.span.start + 1))
    }

    fn path(&mut self, key: &str, node: &Node) -> Option<PathRef> {
        let (text, _) = self.string(key, node)?;
        let content = match &node.value {
            Value::Str { content, .. } => *content,
            _ => None,
        };
        self.path_text(text, node.span.clone(), content)
    }

    fn path_text(&mut self, text: &str, span: Span, content: Option<usize>) -> Option<PathRef> {
        match path::parse_path(text) {
            Ok(p) => Some(PathRef {
                path: p,
                text: text.to_string(),
                span,
                content,
            }),
            Err(e) => {
                let at = match content {
                    Some(c) => c + e.span.start..c + e.span.end,
                    None => span,
                };
                self.diags
                    .push(Diagnostic::error(at, e.message).with_hint_opt(e.hint));
                None
            }
        }
    }

    /// Read a `params` body.
    pub fn params(&mut self, t: &Entries) -> ParamsBlock {
        let mut entries = Vec::new();
        let mut broken = Vec::new();
        for (k, v) in t {
            if !is_name(&k.name) || k.name.contains('-') {
                self.error(
                    k.span.clone(),
                    format!("`{}` is not a valid parameter name", k.name),
                    "parameter names start with a letter and hold letters, digits and `_`",
                );
                continue;
            }
            let name = Name {
                name: k.name.clone(),
                span: k.span.clone(),
            };
            match self.expr(&k.name, v) {
                Some(e) => entries.push((name, e)),
                None => broken.push(name),
            }
        }
        ParamsBlock { entries, broken }
    }

    /// Read an `atom` body.
    pub fn atom(&mut self, t: &Entries) -> AtomBlock {
        let mut atom = AtomBlock {
            levels: vec![],
            transitions: vec![],
            decays: vec![],
            dephasing: vec![],
        };
        match get(t, "levels") {
            None => self.missing("levels", "add `[levels]` with lines such as `g = \"0 Hz\"`"),
            Some(node) => {
                if let Some(levels) = self.table("levels", node) {
                    if levels.is_empty() {
                        self.error(
                            node.span.clone(),
                            "an atom needs at least one level",
                            "add lines such as `g = \"0 Hz\"` under `[levels]`",
                        );
                    }
                    for (k, v) in levels {
                        if !is_name(&k.name) {
                            self.error(
                                k.span.clone(),
                                format!("`{}` is not a valid level name", k.name),
                                "names start with a letter and hold letters, digits, `_` and `-`",
                            );
                            continue;
                        }
                        let energy = match &v.value {
                            Value::Table(lt) => match get(lt, "energy") {
                                Some(e) => self.expr("energy", e),
                                None => {
                                    self.error(
                                        v.span.clone(),
                                        format!("level `{}` needs an `energy`", k.name),
                                        "e.g. `{ energy = \"2π × 6.8 GHz\" }`",
                                    );
                                    None
                                }
                            },
                            _ => self.expr(&k.name, v),
                        };
                        if let Some(energy) = energy {
                            atom.levels.push(LevelDef {
                                name: Name {
                                    name: k.name.clone(),
                                    span: k.span.clone(),
                                },
                                energy,
                            });
                        }
                    }
                }
            }
        }
        if let Some(node) = get(t, "transitions")
            && let Some(tt) = self.table("transitions", node)
        {
            for (k, v) in tt {
                let Some(pair) = self.pair_key(k) else {
                    continue;
                };
                let Some(vt) = self.table(&k.name, v) else {
                    continue;
                };
                let dipole = self.opt_expr(vt, "dipole");
                let q = self.polarization("q", get(vt, "q"));
                atom.transitions.push(TransitionDef { pair, dipole, q });
            }
        }
        if let Some(node) = get(t, "decay")
            && let Some(dt) = self.table("decay", node)
        {
            for (k, v) in dt {
                let Some(pair) = self.pair_key(k) else {
                    continue;
                };
                if let Some(rate) = self.expr(&k.name, v) {
                    atom.decays.push(RateDef { key: pair, rate });
                }
            }
        }
        if let Some(node) = get(t, "dephasing")
            && let Some(dt) = self.table("dephasing", node)
        {
            for (k, v) in dt {
                if let Some(rate) = self.expr(&k.name, v) {
                    atom.dephasing.push(RateDef {
                        key: Name {
                            name: k.name.clone(),
                            span: k.span.clone(),
                        },
                        rate,
                    });
                }
            }
        }
        atom
    }

    /// Read a `light` body.
    pub fn light(&mut self, t: &Entries) -> Option<LightBlock> {
        let atom = self.opt_name(t, "atom");
        let drives = match get(t, "drives") {
            Some(n) => self.pair_node("drives", n),
            None => {
                self.missing(
                    "drives",
                    "name the reference transition, e.g. `drives = \"g -> e\"`",
                );
                None
            }
        };
        let detuning = self.opt_expr(t, "detuning");
        let frequency = self.opt_expr(t, "frequency");
        if let (Some(_), Some(s)) = (&detuning, key_span(t, "frequency")) {
            self.error(
                s,
                "give either `detuning` or `frequency`, not both",
                "the detuning is measured from the `drives` transition",
            );
        }
        let kinds = [
            ("rabi", StrengthKind::Rabi),
            ("field", StrengthKind::Field),
            ("intensity", StrengthKind::Intensity),
        ];
        let given: Vec<_> = kinds.iter().filter(|(k, _)| get(t, k).is_some()).collect();
        let strength = match given.as_slice() {
            [] => {
                self.missing(
                    "rabi",
                    "give the strength as `rabi`, `field` or `intensity`",
                );
                None
            }
            [(k, kind)] => self.opt_expr(t, k).map(|e| (*kind, e)),
            [_, (k2, _), ..] => {
                let s = key_span(t, k2).unwrap_or(self.block.clone());
                self.error(
                    s,
                    "give one of `rabi`, `field` and `intensity`",
                    "they are three ways to say the same thing",
                );
                None
            }
        };
        let phase = self.opt_expr(t, "phase");
        let polarization = self.polarization("polarization", get(t, "polarization"));
        let linewidth = self.opt_expr(t, "linewidth");
        let chirp = match get(t, "chirp") {
            None => None,
            Some(n) => {
                let ct = self.table("chirp", n)?;
                match (get(ct, "rate"), get(ct, "formula")) {
                    (Some(r), None) => self.expr("rate", r).map(ChirpDef::Rate),
                    (None, Some(f)) => self.expr("formula", f).map(ChirpDef::Formula),
                    _ => {
                        self.error(
                            n.span.clone(),
                            "a chirp needs exactly one of `rate` and `formula`",
                            "e.g. `chirp = { rate = \"2π × 1 MHz / 1 µs\" }`",
                        );
                        None
                    }
                }
            }
        };
        Some(LightBlock {
            atom,
            drives: drives?,
            detuning,
            frequency,
            strength: strength?,
            phase,
            polarization,
            linewidth,
            chirp,
        })
    }

    fn shape(&mut self, node: Option<&Node>) -> Option<ShapeDef> {
        let Some(node) = node else {
            return Some(ShapeDef::Square);
        };
        match &node.value {
            Value::Str { .. } => match self.choice(
                "shape",
                node,
                &[
                    "square", "blackman", "sin2", "gaussian", "sech", "tanh", "ramp", "formula",
                ],
            )? {
                "square" => Some(ShapeDef::Square),
                "blackman" => Some(ShapeDef::Blackman),
                "sin2" => Some(ShapeDef::SinSquared),
                other => {
                    self.error(
                        node.span.clone(),
                        format!("the `{other}` shape needs a parameter"),
                        format!("write it as a table, e.g. `shape = {{ {other} = ... }}`"),
                    );
                    None
                }
            },
            Value::Table(st) => {
                let forms = [
                    "gaussian", "sech", "tanh", "ramp", "formula", "steps", "table",
                ];
                let present: Vec<&str> = forms
                    .iter()
                    .copied()
                    .filter(|f| get(st, f).is_some())
                    .collect();
                if present.len() != 1 {
                    self.error(node.span.clone(), "a shape table needs exactly one of `gaussian`, `sech`, `tanh`, `ramp`, `formula`, `steps` and `table`", "e.g. `shape = { gaussian = \"1.2 µs\" }`");
                    return None;
                }
                let v = get(st, present[0])?;
                match present[0] {
                    "gaussian" => self.expr("gaussian", v).map(ShapeDef::Gaussian),
                    "sech" => self.expr("sech", v).map(ShapeDef::Sech),
                    "formula" => self.expr("formula", v).map(ShapeDef::Formula),
                    "tanh" => {
                        let width = self.expr("tanh", v)?;
                        let from = self.opt_number(st, "from").unwrap_or(0.0);
                        let to = self.opt_number(st, "to").unwrap_or(1.0);
                        Some(ShapeDef::Tanh { width, from, to })
                    }
                    "ramp" => {
                        let a = self.array("ramp", v)?;
                        if a.len() != 2 {
                            self.error(
                                v.span.clone(),
                                "`ramp` takes two numbers, [from, to]",
                                "e.g. `ramp = [0, 1]`",
                            );
                            return None;
                        }
                        Some(ShapeDef::Ramp {
                            from: self.number("ramp", &a[0])?,
                            to: self.number("ramp", &a[1])?,
                        })
                    }
                    "steps" | "table" => {
                        let sub = self.table(present[0], v)?;
                        let (tk, vk) = if present[0] == "steps" {
                            ("durations", "values")
                        } else {
                            ("times", "values")
                        };
                        let (Some(tn), Some(vn)) = (get(sub, tk), get(sub, vk)) else {
                            self.error(
                                v.span.clone(),
                                format!("`{}` needs `{tk}` and `{vk}`", present[0]),
                                "",
                            );
                            return None;
                        };
                        let times: Option<Vec<Ex>> = self
                            .array(tk, tn)?
                            .iter()
                            .map(|n| self.expr(tk, n))
                            .collect();
                        let values: Option<Vec<f64>> = self
                            .array(vk, vn)?
                            .iter()
                            .map(|n| self.number(vk, n))
                            .collect();
                        let (times, values) = (times?, values?);
                        if times.len() != values.len() || times.is_empty() {
                            self.error(
                                v.span.clone(),
                                format!(
                                    "`{tk}` and `{vk}` need the same, non-zero, number of entries"
                                ),
                                "",
                            );
                            return None;
                        }
                        Some(if present[0] == "steps" {
                            ShapeDef::Steps {
                                values,
                                durations: times,
                            }
                        } else {
                            ShapeDef::Table { times, values }
                        })
                    }
                    _ => None,
                }
            }
            _ => {
                self.wrong_type("shape", node, "a string or a table");
                None
            }
        }
    }

    /// Read a `sequence` body.
    pub fn sequence(&mut self, t: &Entries) -> SequenceBlock {
        let mut steps = Vec::new();
        let Some(node) = get(t, "step") else {
            self.missing(
                "step",
                "add `[[step]]` tables with `pulse = \"LIGHT\"` or `wait = \"10 µs\"`",
            );
            return SequenceBlock { steps };
        };
        let Some(items) = self.array("step", node) else {
            return SequenceBlock { steps };
        };
        if items.is_empty() {
            self.error(node.span.clone(), "a sequence needs at least one step", "");
        }
        for item in items {
            let Some(st) = self.table("step", item) else {
                continue;
            };
            match (get(st, "pulse"), get(st, "wait")) {
                (Some(p), None) => {
                    let Some(light) = self.name("pulse", p) else {
                        continue;
                    };
                    let shape = self.shape(get(st, "shape"));
                    let duration = self.opt_expr(st, "duration");
                    let area = self.opt_expr(st, "area");
                    let scale = self.opt_expr(st, "scale");
                    let phase = self.opt_expr(st, "phase");
                    let at = self.opt_expr(st, "at");
                    if let Some(shape) = shape {
                        steps.push(StepDef::Pulse {
                            light,
                            shape,
                            duration,
                            area,
                            scale,
                            phase,
                            at,
                            span: item.span.clone(),
                        });
                    }
                }
                (None, Some(w)) => {
                    for extra in ["shape", "duration", "area", "scale", "phase", "at"] {
                        if let Some(s) = key_span(st, extra) {
                            self.error(
                                s,
                                format!("`{extra}` belongs to a pulse, not a wait"),
                                "a wait step holds only `wait = \"DURATION\"`",
                            );
                        }
                    }
                    if let Some(duration) = self.expr("wait", w) {
                        steps.push(StepDef::Wait { duration });
                    }
                }
                (Some(_), Some(_)) => self.error(
                    key_span(st, "wait").unwrap_or(item.span.clone()),
                    "a step cannot hold both `pulse` and `wait`",
                    "put the wait in a `[[step]]` of its own",
                ),
                _ => self.error(
                    item.span.clone(),
                    "each step needs exactly one of `pulse` and `wait`",
                    "e.g. `pulse = \"probe\"` or `wait = \"5 µs\"`",
                ),
            }
        }
        SequenceBlock { steps }
    }

    fn weights(&mut self, key: &str, node: &Node) -> Vec<(Name, f64)> {
        let Some(t) = self.table(key, node) else {
            return vec![];
        };
        t.iter()
            .filter_map(|(k, v)| {
                Some((
                    Name {
                        name: k.name.clone(),
                        span: k.span.clone(),
                    },
                    self.number(&k.name, v)?,
                ))
            })
            .collect()
    }

    /// Read an `evolve` body.
    pub fn evolve(&mut self, t: &Entries) -> EvolveBlock {
        let atom = self.opt_name(t, "atom");
        let sequence = self.opt_name(t, "sequence");
        let steady = self.bool(t, "steady");
        if !steady && sequence.is_none() && get(t, "sequence").is_none() {
            self.missing("sequence", "name a `sequence` block above, or set `steady = true` for a continuous-wave steady state");
        }
        let lights = get(t, "lights").and_then(|n| {
            let a = self.array("lights", n)?;
            a.iter().map(|x| self.name("lights", x)).collect()
        });
        let start = match get(t, "start") {
            None => StartDef::Default,
            Some(n) => match &n.value {
                Value::Str { .. } => self
                    .name("start", n)
                    .map_or(StartDef::Default, StartDef::Level),
                Value::Table(st) => {
                    if let Some(m) = get(st, "mixture") {
                        StartDef::Mixture(self.weights("mixture", m))
                    } else if let Some(m) = get(st, "superposition") {
                        StartDef::Superposition(self.weights("superposition", m))
                    } else if let Some(th) = get(st, "thermal") {
                        let tt = self.table("thermal", th).unwrap_or(&[]);
                        let levels = get(tt, "levels")
                            .and_then(|l| self.array("levels", l).map(|a| a.to_vec()))
                            .map(|a| a.iter().filter_map(|x| self.name("levels", x)).collect())
                            .unwrap_or_default();
                        match self.opt_expr(tt, "temperature") {
                            Some(temperature) => StartDef::Thermal {
                                levels,
                                temperature,
                            },
                            None => {
                                self.error(th.span.clone(), "`thermal` needs `levels` and `temperature`", "e.g. `thermal = { levels = [\"a\", \"b\"], temperature = \"300 K\" }`");
                                StartDef::Default
                            }
                        }
                    } else {
                        self.error(
                            n.span.clone(),
                            "`start` as a table needs `mixture`, `superposition` or `thermal`",
                            "or give a level name: `start = \"g\"`",
                        );
                        StartDef::Default
                    }
                }
                _ => {
                    self.wrong_type("start", n, "a level name or a table");
                    StartDef::Default
                }
            },
        };
        let exact = get(t, "frame").and_then(|n| self.choice("frame", n, &["rotating", "exact"]))
            == Some("exact");
        let cutoff = self.opt_expr(t, "cutoff");
        let method = match get(t, "method").and_then(|n| {
            self.choice(
                "method",
                n,
                &["auto", "eigen", "dp54", "dop853", "magnus4", "liouvillian"],
            )
        }) {
            Some("eigen") => MethodName::Eigen,
            Some("dp54") => MethodName::Dp54,
            Some("dop853") => MethodName::Dop853,
            Some("magnus4") => MethodName::Magnus4,
            Some("liouvillian") => MethodName::Liouvillian,
            _ => MethodName::Auto,
        };
        let positive = |r: &mut Self, key: &str| -> Option<f64> {
            let v = r.opt_number(t, key)?;
            if v > 0.0 && v < 1.0 {
                Some(v)
            } else {
                let span = get(t, key)
                    .map(|n| n.span.clone())
                    .unwrap_or(r.block.clone());
                r.error(
                    span,
                    format!("`{key}` must lie between 0 and 1, not {v}"),
                    "typical values are 1e-6 to 1e-10",
                );
                None
            }
        };
        let rtol = positive(self, "rtol");
        let atol = positive(self, "atol");
        let max_steps = get(t, "max_steps").and_then(|n| {
            let (v, s) = self.integer("max_steps", n)?;
            if v < 1 {
                self.error(s, "`max_steps` must be at least 1", "");
                return None;
            }
            Some(v as u64)
        });
        let mut observe = Vec::new();
        match get(t, "observe") {
            None => self.missing(
                "observe",
                "list what to record, e.g. `observe = [\"population(e)\"]`",
            ),
            Some(n) => {
                if let Some(items) = self.array("observe", n) {
                    if items.is_empty() {
                        self.error(
                            n.span.clone(),
                            "`observe` is empty",
                            "list what to record, e.g. `[\"population(e)\"]`",
                        );
                    }
                    for item in items {
                        let Some((s, span)) = self.string("observe", item) else {
                            continue;
                        };
                        match path::parse_observable(s) {
                            Ok(o) => {
                                // Where each level name sits, for "no such level" errors.
                                let exact = span.len() == s.len();
                                let mut pos = s.find('(').unwrap_or(0);
                                let mut spans = Vec::new();
                                for l in o.levels() {
                                    match s[pos..].find(l).filter(|_| exact) {
                                        Some(i) => {
                                            let at = span.start + pos + i;
                                            spans.push(at..at + l.len());
                                            pos += i + l.len();
                                        }
                                        None => spans.push(span.clone()),
                                    }
                                }
                                observe.push((o, span, spans))
                            }
                            Err(e) => {
                                let at = span.start + e.span.start..span.start + e.span.end;
                                let at = if span.len() == s.len() {
                                    at
                                } else {
                                    span.clone()
                                };
                                self.diags
                                    .push(Diagnostic::error(at, e.message).with_hint_opt(e.hint));
                            }
                        }
                    }
                }
            }
        }
        let samples = get(t, "samples").and_then(|n| {
            let (v, s) = self.integer("samples", n)?;
            if !(2..=1_000_000).contains(&v) {
                self.error(
                    s,
                    format!("`samples` must lie between 2 and 1000000, not {v}"),
                    "samples are equally spaced times from the start to the end of the sequence",
                );
                return None;
            }
            Some((v as usize, key_span(t, "samples").unwrap_or(n.span.clone())))
        });
        let mut sweep = Vec::new();
        if let Some(n) = get(t, "sweep")
            && let Some(st) = self.table("sweep", n)
        {
            for (k, v) in st {
                let Some(at) = self.table(&k.name, v) else {
                    continue;
                };
                let param = Name {
                    name: k.name.clone(),
                    span: k.span.clone(),
                };
                let values = if let Some(list) = get(at, "values") {
                    let Some(items) = self.array("values", list) else {
                        continue;
                    };
                    if items.is_empty() {
                        self.error(
                            list.span.clone(),
                            format!("the sweep over `{}` has no values", k.name),
                            "",
                        );
                        continue;
                    }
                    let Some(exs) = items
                        .iter()
                        .map(|x| self.expr("values", x))
                        .collect::<Option<Vec<_>>>()
                    else {
                        continue;
                    };
                    AxisValues::List(exs)
                } else {
                    let from = self.opt_expr(at, "from");
                    let to = self.opt_expr(at, "to");
                    let points = get(at, "points").and_then(|p| self.integer("points", p));
                    let (Some(from), Some(to), Some(points)) = (from, to, points) else {
                        // A misspelt key was reported already; do not add a second message.
                        let typo = at.iter().any(|(k, _)| {
                            !["from", "to", "points", "log", "values"].contains(&k.name.as_str())
                        });
                        if !typo
                            && (get(at, "from").is_none()
                                || get(at, "to").is_none()
                                || get(at, "points").is_none())
                        {
                            self.error(v.span.clone(), format!("the sweep over `{}` needs `from`, `to` and `points` (or `values`)", k.name), "e.g. `{ from = \"-2π × 1 MHz\", to = \"2π × 1 MHz\", points = 201 }`");
                        }
                        continue;
                    };
                    let log = self.bool(at, "log");
                    AxisValues::Range {
                        from,
                        to,
                        points,
                        log,
                    }
                };
                sweep.push(AxisDef { param, values });
            }
        }
        let mut average = None;
        if let Some(n) = get(t, "average")
            && let Some(avt) = self.table("average", n)
        {
            if avt.len() > 1 {
                self.error(
                    avt[1].0.span.clone(),
                    "only one parameter can be averaged per block",
                    "sweep the others instead",
                );
            }
            if let Some((k, v)) = avt.first()
                && let Some(at) = self.table(&k.name, v)
            {
                let width = match (get(at, "sigma"), get(at, "doppler")) {
                    (Some(s), None) => self.expr("sigma", s).map(WidthDef::Sigma),
                    (None, Some(d)) => self.table("doppler", d).and_then(|dt| {
                        let temperature = self.opt_expr(dt, "temperature");
                        let mass = self.opt_expr(dt, "mass");
                        let wavelength = self.opt_expr(dt, "wavelength");
                        match (temperature, mass, wavelength) {
                            (Some(temperature), Some(mass), Some(wavelength)) => Some(WidthDef::Doppler { temperature, mass, wavelength }),
                            _ => {
                                self.error(d.span.clone(), "`doppler` needs `temperature`, `mass` and `wavelength`", "e.g. `doppler = { temperature = \"140 µK\", mass = \"87 amu\", wavelength = \"780 nm\" }`");
                                None
                            }
                        }
                    }),
                    _ => {
                        self.error(v.span.clone(), "an average needs exactly one of `sigma` and `doppler`", "");
                        None
                    }
                };
                let points = get(at, "points")
                    .and_then(|p| self.integer("points", p))
                    .unwrap_or((15, v.span.clone()));
                let mc = get(at, "method")
                    .and_then(|m| self.choice("method", m, &["quadrature", "monte-carlo"]))
                    == Some("monte-carlo");
                let seed = get(at, "seed")
                    .and_then(|s| self.integer("seed", s))
                    .map_or(1, |(s, _)| s as u64);
                if let Some(width) = width {
                    average = Some(AverageDef {
                        param: Name {
                            name: k.name.clone(),
                            span: k.span.clone(),
                        },
                        width,
                        points,
                        monte_carlo: mc.then_some(seed),
                    });
                }
            }
        }
        EvolveBlock {
            atom,
            sequence,
            steady,
            lights,
            start,
            exact,
            cutoff,
            method,
            rtol,
            atol,
            max_steps,
            observe,
            samples,
            sweep,
            average,
        }
    }

    fn path_list(&mut self, key: &str, node: &Node) -> Vec<PathRef> {
        match &node.value {
            Value::Array(items) => items.iter().filter_map(|n| self.path(key, n)).collect(),
            _ => self.path(key, node).into_iter().collect(),
        }
    }

    fn title(&mut self, t: &Entries) -> Option<String> {
        get(t, "title").and_then(|n| self.string("title", n).map(|(s, _)| s.to_string()))
    }

    /// Read a `plot` body.
    pub fn plot(&mut self, t: &Entries) -> Option<PlotBlock> {
        let x = match get(t, "x") {
            Some(n) => self.path("x", n),
            None => {
                self.missing("x", "e.g. `x = \"scan.delta\"`");
                None
            }
        };
        let y = match get(t, "y") {
            Some(n) => self.path_list("y", n),
            None => {
                self.missing("y", "e.g. `y = \"scan.final.population(e)\"`");
                vec![]
            }
        };
        let z = get(t, "z").and_then(|n| self.path("z", n));
        let title = self.title(t);
        let log_x = self.bool(t, "log_x");
        let log_y = self.bool(t, "log_y");
        if y.is_empty() {
            return None;
        }
        Some(PlotBlock {
            x: x?,
            y,
            z,
            title,
            log_x,
            log_y,
        })
    }

    /// Read a `table` body.
    pub fn table_block(&mut self, t: &Entries) -> Option<TableBlock> {
        let columns = match get(t, "columns") {
            Some(n) => self.path_list("columns", n),
            None => {
                self.missing(
                    "columns",
                    "e.g. `columns = [\"scan.delta\", \"scan.final.population(e)\"]`",
                );
                return None;
            }
        };
        let title = self.title(t);
        (!columns.is_empty()).then_some(TableBlock { columns, title })
    }

    /// Read a `check` body.
    pub fn check(&mut self, t: &Entries) -> CheckBlock {
        let mut items = Vec::new();
        if t.is_empty() {
            self.error(self.block.clone(), "this `check` block checks nothing", "add lines such as `\"scan.final.population(e) at delta = 0 Hz\" = { near = 1, within = 1e-3 }`");
        }
        for (k, v) in t {
            let Some(path) = self.path_text(
                &k.name,
                k.span.clone(),
                Some(k.span.start + 1).filter(|_| k.span.len() == k.name.len() + 2),
            ) else {
                continue;
            };
            let Some(ct) = self.table(&k.name, v) else {
                continue;
            };
            let near = self.opt_expr(ct, "near");
            let below = self.opt_expr(ct, "below");
            let above = self.opt_expr(ct, "above");
            let condition = match (near, below, above) {
                (Some(n), None, None) => {
                    let tol = match (get(ct, "within"), get(ct, "rel")) {
                        (Some(w), None) => self.expr("within", w).map(Tol::Abs),
                        (None, Some(r)) => self.number("rel", r).map(Tol::Rel),
                        _ => {
                            self.error(v.span.clone(), "`near` needs exactly one of `within` (absolute) and `rel` (relative)", "e.g. `{ near = 1.0, within = 1e-3 }`");
                            None
                        }
                    };
                    tol.map(|tol| Condition::Near(n, tol))
                }
                (None, Some(b), None) => Some(Condition::Below(b)),
                (None, None, Some(a)) => Some(Condition::Above(a)),
                (None, Some(b), Some(a)) => Some(Condition::Between(a, b)),
                (None, None, None) => {
                    self.error(
                        v.span.clone(),
                        "a check needs `near`, `below` or `above`",
                        "e.g. `{ near = 1.0, within = 1e-3 }`",
                    );
                    None
                }
                _ => {
                    self.error(
                        v.span.clone(),
                        "`near` cannot be combined with `below` or `above`",
                        "",
                    );
                    None
                }
            };
            if let Some(condition) = condition {
                items.push(CheckItem { path, condition });
            }
        }
        CheckBlock { items }
    }
}
