//! Typed scenario blocks: each block's TOML tree read into a struct whose values are parsed
//! expressions, names and result paths, each with its span. Reading reports every problem it
//! finds and keeps going; nothing here evaluates an expression.
// Blocks are read once per file and never stored in bulk; boxing their larger variants would
// only add noise.
#![allow(clippy::large_enum_variant)]

use super::diag::{Diagnostic, did_you_mean};
use super::expr::{self, Expr};
use super::markdown::{is_level_name, is_name};
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
    /// Levels in order (hand-made atoms).
    pub levels: Vec<LevelDef>,
    /// Declared transitions (hand-made atoms).
    pub transitions: Vec<TransitionDef>,
    /// Decay channels (hand-made atoms).
    pub decays: Vec<RateDef<Pair>>,
    /// Dephasing rates.
    pub dephasing: Vec<RateDef<Name>>,
    /// A line between two manifolds expanded into Zeeman sublevels, instead of `levels`.
    pub zeeman: Option<ZeemanDef>,
    /// The quantisation axis in the lab frame, with its span.
    pub axis: Option<([f64; 3], Span)>,
}

/// A doubled angular momentum (2J, so that half-integers are exact) and where it is written.
pub type Twice = (i32, Span);

/// One manifold given by its quantum numbers.
#[derive(Clone, Debug)]
pub struct ManifoldDef {
    /// 2J.
    pub j: Twice,
    /// 2I.
    pub i: i32,
    /// 2L, for the Landé factor.
    pub l: Option<Twice>,
    /// 2S, for the Landé factor.
    pub s: Option<Twice>,
    /// g_J as given.
    pub g_j: Option<f64>,
    /// g_I (units of μ_B).
    pub g_i: f64,
    /// Hyperfine A/ħ (rad/s).
    pub a: Option<Ex>,
    /// Hyperfine B/ħ (rad/s).
    pub b: Option<Ex>,
    /// The manifold's table.
    pub span: Span,
}

/// Where a Zeeman atom's line comes from.
#[derive(Clone, Debug)]
pub enum LineSource {
    /// A species of the table and one of its D lines.
    Species {
        /// The species as written, with its span.
        species: (String, Span),
        /// 1 or 2 (D1 or D2).
        line: u8,
    },
    /// Two manifolds by quantum numbers.
    Manifolds {
        /// Lower manifold.
        lower: ManifoldDef,
        /// Upper manifold.
        upper: ManifoldDef,
        /// Centroid frequency (rad/s), or the wavelength (m) when `wavelength` is set.
        frequency: Ex,
        /// `frequency` holds a wavelength.
        wavelength: bool,
        /// Linewidth Γ (1/s), or the lifetime (s) when `lifetime` is set.
        width: Ex,
        /// `width` holds a lifetime.
        lifetime: bool,
    },
}

/// A line expanded into Zeeman sublevels.
#[derive(Clone, Debug)]
pub struct ZeemanDef {
    /// The line.
    pub source: LineSource,
    /// Magnetic field B (T) along the axis.
    pub magnetic_field: Option<Ex>,
    /// Hyperfine levels to keep (groups such as `g2`), empty for all.
    pub keep: Vec<Name>,
    /// The weak-field (linear) Zeeman model instead of the full diagonalisation.
    pub linear: bool,
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
    /// Saturation parameter s = I/I_sat of the reference transition.
    Saturation,
}

/// A light's polarisation as written.
#[derive(Clone, Debug)]
pub enum PolarizationDef {
    /// One spherical component q relative to the quantisation axis.
    Spherical(i8),
    /// Linear at an angle (rad) from the quantisation axis.
    Angle(Ex),
    /// Linear along a lab-frame vector, or elliptical with that major axis.
    Vector {
        /// The vector.
        vector: [f64; 3],
        /// Where it is written.
        span: Span,
        /// Ellipticity angle χ (rad).
        ellipticity: Option<Ex>,
    },
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
    /// Polarisation.
    pub polarization: PolarizationDef,
    /// Beam direction (lab frame), with its span.
    pub direction: Option<([f64; 3], Span)>,
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
    /// The atom's velocity (m/s, three components), with the span of the array.
    pub velocity: Option<(Vec<Ex>, Span)>,
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
    /// The horizontal axis's name.
    pub xlabel: Option<String>,
    /// The vertical axis's name.
    pub ylabel: Option<String>,
    /// A heat map colour's name.
    pub zlabel: Option<String>,
    /// Legend names, one per curve (empty: derived from the paths).
    pub labels: Vec<String>,
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
        self.checked_name(
            key,
            node,
            is_name,
            "name",
            "names start with a letter and hold letters, digits, `_` and `-`",
        )
    }

    /// The trimmed string at `node` if `valid` accepts it, else an error naming `what`.
    fn checked_name(
        &mut self,
        key: &str,
        node: &Node,
        valid: fn(&str) -> bool,
        what: &str,
        hint: &str,
    ) -> Option<Name> {
        let (s, span) = self.string(key, node)?;
        let trimmed = s.trim();
        if !valid(trimmed) {
            self.error(span, format!("`{s}` is not a valid {what}"), hint);
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

    /// A level name, which on a Zeeman atom may hold fractions (`g3/2_m1/2`).
    fn level_name(&mut self, key: &str, node: &Node) -> Option<Name> {
        self.checked_name(
            key,
            node,
            is_level_name,
            "level name",
            "level names start with a letter and hold letters, digits, `_`, `-`, and `/` between digits",
        )
    }

    /// A non-negative whole or half-integer (a number or a string such as `"3/2"`), doubled.
    fn twice(&mut self, key: &str, node: &Node) -> Option<Twice> {
        let doubled = match &node.value {
            Value::Int(i) => i.checked_mul(2),
            Value::Float(x) if (2.0 * x).fract() == 0.0 && x.abs() < 1e6 => Some((2.0 * x) as i64),
            Value::Str { text, .. } => {
                let t = text.trim();
                match t.split_once('/') {
                    Some((n, "2")) => n.trim().parse::<i64>().ok().filter(|n| n % 2 != 0),
                    Some(_) => None,
                    None => t.parse::<i64>().ok().and_then(|n| n.checked_mul(2)),
                }
            }
            _ => {
                self.wrong_type(key, node, "a number or a string such as \"3/2\"");
                return None;
            }
        };
        match doubled.filter(|d| (0..=200).contains(d)) {
            Some(d) => Some((d as i32, node.span.clone())),
            None => {
                self.error(
                    node.span.clone(),
                    format!("`{key}` must be a whole or half-integer from 0 to 100"),
                    "e.g. `1`, `1.5` or `\"3/2\"`",
                );
                None
            }
        }
    }

    /// Three finite numbers, not all zero.
    fn vector(&mut self, key: &str, node: &Node) -> Option<([f64; 3], Span)> {
        let items = self.array(key, node)?;
        let nums: Option<Vec<f64>> = items.iter().map(|x| self.number(key, x)).collect();
        let nums = nums?;
        if nums.len() != 3 || nums.iter().all(|x| *x == 0.0) {
            self.error(
                node.span.clone(),
                format!("`{key}` must be three numbers, not all zero"),
                "a direction in the lab frame, e.g. `[0, 0, 1]`",
            );
            return None;
        }
        Some(([nums[0], nums[1], nums[2]], node.span.clone()))
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

    /// A light's polarisation: a spherical component, or a table with `angle`, or `vector`
    /// and an optional `ellipticity`.
    fn light_polarization(&mut self, node: Option<&Node>) -> PolarizationDef {
        let Some(node) = node else {
            return PolarizationDef::Spherical(0);
        };
        let Value::Table(t) = &node.value else {
            return PolarizationDef::Spherical(self.polarization("polarization", Some(node)));
        };
        match (get(t, "angle"), get(t, "vector")) {
            (Some(a), None) => {
                if let Some(s) = key_span(t, "ellipticity") {
                    self.error(
                        s,
                        "`ellipticity` goes with `vector`, not `angle`",
                        "elliptical light needs its major axis as a `vector` and the light's `direction`",
                    );
                }
                self.expr("angle", a)
                    .map_or(PolarizationDef::Spherical(0), PolarizationDef::Angle)
            }
            (None, Some(v)) => match self.vector("vector", v) {
                Some((vector, span)) => PolarizationDef::Vector {
                    vector,
                    span,
                    ellipticity: self.opt_expr(t, "ellipticity"),
                },
                None => PolarizationDef::Spherical(0),
            },
            _ => {
                self.error(
                    node.span.clone(),
                    "a polarisation table needs exactly one of `angle` and `vector`",
                    "e.g. `{ angle = \"5 deg\" }` or `{ vector = [1, 0, 0], ellipticity = \"45 deg\" }`",
                );
                PolarizationDef::Spherical(0)
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
            is_level_name(t).then(|| Name {
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

    /// Read an `atom` body: hand-made `levels`, or a line (`species`, or `lower` and `upper`)
    /// expanded into Zeeman sublevels.
    pub fn atom(&mut self, t: &Entries) -> AtomBlock {
        let mut atom = AtomBlock {
            levels: vec![],
            transitions: vec![],
            decays: vec![],
            dephasing: vec![],
            zeeman: None,
            axis: None,
        };
        atom.axis = get(t, "axis").and_then(|n| self.vector("axis", n));
        let line_keys = ["species", "lower", "upper"];
        if line_keys.iter().any(|k| get(t, k).is_some()) {
            if let Some(s) = key_span(t, "levels") {
                self.error(
                    s,
                    "give either hand-made `levels` or a line (`species`, or `lower` and `upper`), not both",
                    "a line's sublevels are named for you: `g2_m-1`, `e3_m3`, …",
                );
            }
            for key in ["transitions", "decay"] {
                if let Some(s) = key_span(t, key) {
                    self.error(
                        s,
                        format!("`{key}` is for hand-made levels; a line's dipoles and decays come from its matrix elements"),
                        "remove it, or describe the atom by `levels`",
                    );
                }
            }
            atom.zeeman = self.zeeman(t);
        } else {
            for key in [
                "line",
                "frequency",
                "wavelength",
                "linewidth",
                "lifetime",
                "magnetic_field",
                "keep",
                "zeeman",
            ] {
                if let Some(s) = key_span(t, key) {
                    self.error(
                        s,
                        format!(
                            "`{key}` belongs to a line given by `species` or by `lower` and `upper`"
                        ),
                        "hand-made levels have fixed energies and explicit couplings",
                    );
                }
            }
            match get(t, "levels") {
                None => self.missing(
                    "levels",
                    "add `[levels]` with lines such as `g = \"0 Hz\"`, or name a `species` and its `line`",
                ),
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
        }
        if let Some(node) = get(t, "transitions").filter(|_| atom.zeeman.is_none())
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
        if let Some(node) = get(t, "decay").filter(|_| atom.zeeman.is_none())
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

    /// The line of a Zeeman atom; every problem is reported before giving up.
    fn zeeman(&mut self, t: &Entries) -> Option<ZeemanDef> {
        let source = if let Some(sp) = get(t, "species") {
            for key in [
                "lower",
                "upper",
                "frequency",
                "wavelength",
                "linewidth",
                "lifetime",
            ] {
                if let Some(s) = key_span(t, key) {
                    self.error(
                        s,
                        format!("`{key}` comes from the species table here"),
                        "drop it, or describe the line by `lower` and `upper` instead of `species`",
                    );
                }
            }
            let species = self
                .string("species", sp)
                .map(|(n, span)| (n.trim().to_string(), span));
            let line = match get(t, "line") {
                None => {
                    self.missing("line", "pick the line: `line = \"D1\"` or `line = \"D2\"`");
                    None
                }
                Some(n) => self
                    .choice("line", n, &["D1", "D2"])
                    .map(|c| if c == "D1" { 1 } else { 2 }),
            };
            LineSource::Species {
                species: species?,
                line: line?,
            }
        } else {
            if let Some(s) = key_span(t, "line") {
                self.error(
                    s,
                    "`line` picks a line of a `species`",
                    "with `lower` and `upper` the line is given by `frequency` and `linewidth`",
                );
            }
            let lower = self.manifold(t, "lower");
            let upper = self.manifold(t, "upper");
            let frequency = self.one_of(
                t,
                ("frequency", "wavelength"),
                "the line's centroid, e.g. `frequency = \"2π × 384.23 THz\"` or `wavelength = \"780.24 nm\"`",
            );
            let width = self.one_of(
                t,
                ("linewidth", "lifetime"),
                "the upper manifold's decay, e.g. `linewidth = \"2π × 6.07 MHz\"` or `lifetime = \"26.2 ns\"`",
            );
            let ((frequency, wavelength), (width, lifetime)) = (frequency?, width?);
            LineSource::Manifolds {
                lower: lower?,
                upper: upper?,
                frequency,
                wavelength,
                width,
                lifetime,
            }
        };
        let magnetic_field = self.opt_expr(t, "magnetic_field");
        let keep = get(t, "keep")
            .and_then(|n| self.array("keep", n).map(<[Node]>::to_vec))
            .map(|a| {
                a.iter()
                    .filter_map(|x| self.level_name("keep", x))
                    .collect()
            })
            .unwrap_or_default();
        let linear = get(t, "zeeman").and_then(|n| self.choice("zeeman", n, &["full", "linear"]))
            == Some("linear");
        Some(ZeemanDef {
            source,
            magnetic_field,
            keep,
            linear,
        })
    }

    /// Exactly one of two keys holding an expression; the flag tells whether it was the second.
    fn one_of(&mut self, t: &Entries, keys: (&str, &str), hint: &str) -> Option<(Ex, bool)> {
        match (get(t, keys.0), get(t, keys.1)) {
            (Some(a), None) => self.expr(keys.0, a).map(|e| (e, false)),
            (None, Some(b)) => self.expr(keys.1, b).map(|e| (e, true)),
            (Some(_), Some(_)) => {
                let span = key_span(t, keys.1).unwrap_or(self.block.clone());
                self.error(
                    span,
                    format!("give either `{}` or `{}`, not both", keys.0, keys.1),
                    "",
                );
                None
            }
            (None, None) => {
                self.missing(keys.0, hint);
                None
            }
        }
    }

    /// One manifold by its quantum numbers.
    fn manifold(&mut self, t: &Entries, side: &str) -> Option<ManifoldDef> {
        let Some(node) = get(t, side) else {
            self.missing(
                side,
                &format!("describe the {side} manifold, e.g. `{side} = {{ J = \"1/2\", L = 0, S = \"1/2\" }}`"),
            );
            return None;
        };
        let mt = self.table(side, node)?;
        let j = match get(mt, "J") {
            Some(n) => self.twice("J", n),
            None => {
                self.error(
                    node.span.clone(),
                    format!("the {side} manifold needs `J`"),
                    "e.g. `J = \"1/2\"`",
                );
                None
            }
        };
        let i = get(mt, "I").map(|n| self.twice("I", n).map(|x| x.0));
        let l = get(mt, "L").and_then(|n| self.twice("L", n));
        if let Some((two_l, span)) = &l
            && two_l % 2 != 0
        {
            self.error(span.clone(), "`L` must be a whole number", "");
        }
        let spin = get(mt, "S").and_then(|n| self.twice("S", n));
        if get(mt, "L").is_some() != get(mt, "S").is_some() {
            self.error(
                node.span.clone(),
                "give both `L` and `S` (for the Landé factor), or `g_J`",
                "",
            );
        }
        let g_j = get(mt, "g_J").and_then(|n| self.number("g_J", n));
        let g_i = get(mt, "g_I").map(|n| self.number("g_I", n));
        let a = self.opt_expr(mt, "A");
        let b = self.opt_expr(mt, "B");
        Some(ManifoldDef {
            j: j?,
            i: i.unwrap_or(Some(0))?,
            l,
            s: spin,
            g_j,
            g_i: g_i.unwrap_or(Some(0.0))?,
            a,
            b,
            span: node.span.clone(),
        })
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
            ("saturation", StrengthKind::Saturation),
        ];
        let given: Vec<_> = kinds.iter().filter(|(k, _)| get(t, k).is_some()).collect();
        let strength = match given.as_slice() {
            [] => {
                self.missing(
                    "rabi",
                    "give the strength as `rabi`, `field`, `intensity` or `saturation`",
                );
                None
            }
            [(k, kind)] => self.opt_expr(t, k).map(|e| (*kind, e)),
            [_, (k2, _), ..] => {
                let s = key_span(t, k2).unwrap_or(self.block.clone());
                self.error(
                    s,
                    "give one of `rabi`, `field`, `intensity` and `saturation`",
                    "they are four ways to say the same thing",
                );
                None
            }
        };
        let phase = self.opt_expr(t, "phase");
        let polarization = self.light_polarization(get(t, "polarization"));
        let direction = get(t, "direction").and_then(|n| self.vector("direction", n));
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
            direction,
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
                    .level_name("start", n)
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
                            .map(|a| {
                                a.iter()
                                    .filter_map(|x| self.level_name("levels", x))
                                    .collect()
                            })
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
        let velocity = get(t, "velocity").and_then(|n| {
            let items = self.array("velocity", n)?;
            if items.len() != 3 {
                self.error(
                    n.span.clone(),
                    "`velocity` needs three components",
                    "e.g. `velocity = [\"0 m/s\", \"0 m/s\", \"v\"]`",
                );
                return None;
            }
            let exs: Option<Vec<Ex>> = items.iter().map(|x| self.expr("velocity", x)).collect();
            Some((exs?, n.span.clone()))
        });
        EvolveBlock {
            velocity,
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
        let text = |r: &mut Self, key: &str| {
            get(t, key).and_then(|n| r.string(key, n).map(|(s, _)| s.to_string()))
        };
        let (xlabel, ylabel, zlabel) = (
            text(self, "xlabel"),
            text(self, "ylabel"),
            text(self, "zlabel"),
        );
        let mut labels = Vec::new();
        if let Some(n) = get(t, "labels")
            && let Some(items) = self.array("labels", n)
        {
            labels = items
                .iter()
                .filter_map(|x| self.string("labels", x).map(|(s, _)| s.to_string()))
                .collect();
            if labels.len() != y.len() && !y.is_empty() {
                self.error(
                    n.span.clone(),
                    format!(
                        "`labels` names {} curve(s) but `y` has {}",
                        labels.len(),
                        y.len()
                    ),
                    "give one legend name per path of `y`, in the same order",
                );
            }
            if z.is_some() {
                self.error(
                    n.span.clone(),
                    "a heat map has no legend",
                    "name its colour with `zlabel`",
                );
            }
        }
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
            xlabel,
            ylabel,
            zlabel,
            labels,
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
