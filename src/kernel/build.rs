//! From typed blocks and parameter values to runtime objects: evaluating expressions with their
//! expected dimensions, and building the atom, fields, sequence and problem of an `evolve` block.
//! The same code runs once at the nominal parameters (where every problem becomes a located
//! diagnostic) and again at every sweep point.

use std::collections::{HashMap, HashSet};

use fieldbook_runtime::prelude::*;
use fieldbook_runtime::state::State as RtState;

use super::scope::Scope;
use crate::notebook::blocks::{
    AtomBlock, ChirpDef, EvolveBlock, Ex, LightBlock, MethodName, SequenceBlock, ShapeDef,
    StartDef, StepDef, StrengthKind,
};
use crate::notebook::diag::Diagnostic;
use crate::notebook::expr::{self, Dim, Quantity};
use crate::notebook::path::ObsSpec;
use crate::notebook::source::Span;

/// Parameter values at one point of parameter space.
#[derive(Clone, Debug, Default)]
pub struct Values {
    map: HashMap<String, Quantity>,
    failed: HashSet<String>,
    /// Run-file span of the bare Hz token behind a parameter's value, where it is the
    /// parameter's own text, so that the 2π warning can point at the definition.
    hz_at: HashMap<String, Span>,
}

impl expr::Env for Values {
    fn lookup(&self, name: &str) -> Option<Quantity> {
        self.map.get(name).cloned()
    }
    fn names(&self) -> Vec<String> {
        self.map.keys().cloned().collect()
    }
}

impl Values {
    /// The value of parameter `name`.
    pub fn get(&self, name: &str) -> Option<&Quantity> {
        self.map.get(name)
    }

    /// Whether `ex` refers to a parameter that could not be evaluated (so its own failure
    /// would only repeat an earlier diagnostic).
    pub fn poisoned(&self, ex: &Ex) -> bool {
        ex.expr
            .lookups()
            .iter()
            .any(|(n, _)| self.failed.contains(n))
            || ex
                .expr
                .references()
                .iter()
                .any(|(n, _)| !self.map.contains_key(n))
    }
}

/// Evaluate every parameter of `scope` in order, with `fixed` values replacing some (sweep
/// coordinates, SI) and `shift` added to one (an average's offset from the centre, SI).
/// Problems go to `diags`.
pub fn eval_params(
    scope: &Scope,
    fixed: &[(String, f64)],
    shift: Option<(&str, f64)>,
    diags: &mut Vec<Diagnostic>,
) -> Values {
    let mut v = Values::default();
    for p in &scope.params {
        if v.poisoned(&p.ex) {
            v.failed.insert(p.name.clone());
            continue;
        }
        match expr::Expr::eval(&p.ex.expr, &v) {
            Ok(mut q) => {
                if let Some((_, x)) = fixed.iter().find(|(n, _)| *n == p.name) {
                    q.value = *x;
                    q.bare_hz = None;
                }
                if let Some((_, dx)) = shift.filter(|(n, _)| *n == p.name) {
                    q.value += dx;
                }
                if let Some(s) = &q.bare_hz
                    && p.ex
                        .text()
                        .get(s.clone())
                        .is_some_and(|t| t.ends_with("Hz"))
                {
                    v.hz_at.insert(p.name.clone(), p.ex.at(s));
                }
                v.map.insert(p.name.clone(), q);
            }
            Err(e) => {
                v.failed.insert(p.name.clone());
                let d = match &p.overridden {
                    Some(t) => Diagnostic::error(
                        p.span.clone(),
                        format!("--set {}={t}: {}", p.name, e.message),
                    ),
                    None => p.ex.diag(&e),
                };
                diags.push(d.with_hint_opt(e.hint.clone()));
            }
        }
    }
    v
}

/// An atom built from its block, with its name tables.
#[derive(Clone, Debug)]
pub struct BuiltAtom {
    /// The runtime atom.
    pub atom: Atom,
    /// Level ids by name.
    pub levels: HashMap<String, LevelId>,
    /// Transition ids by (lower, upper).
    pub transitions: HashMap<(LevelId, LevelId), TransitionId>,
}

/// Evaluates expressions against one set of values, reporting problems.
pub struct Builder<'a> {
    /// Parameter values.
    pub values: &'a Values,
    /// Problems found.
    pub diags: &'a mut Vec<Diagnostic>,
    /// Report "Hz without 2π" warnings (only at the nominal point).
    pub warn: bool,
}

impl Builder<'_> {
    /// Evaluate `ex` expecting dimension `dim`; `what` names it in messages.
    pub fn quantity(&mut self, ex: &Ex, dim: Dim, what: &str) -> Option<f64> {
        if self.values.poisoned(ex) {
            return None;
        }
        let q = match ex.expr.eval(self.values) {
            Ok(q) => q,
            Err(e) => {
                self.diags.push(ex.diag(&e));
                return None;
            }
        };
        if let Err(e) = expr::expect_dim(&q, dim, what, 0..ex.text().len()) {
            let msg = format!(
                "{what} `{}` is {}; {} is expected",
                ex.text(),
                q.dim.describe(),
                dim.describe()
            );
            self.diags
                .push(Diagnostic::error(ex.span.clone(), msg).with_hint_opt(e.hint));
            return None;
        }
        if self.warn
            && dim == Dim::FREQUENCY
            && let Some((span, msg)) = expr::bare_hz_warning(&q)
        {
            // The Hz token is in this expression, or in a parameter it uses.
            let via = ex.expr.references().into_iter().find_map(|(n, _)| {
                let from = self.values.get(&n)?;
                (from.bare_hz == q.bare_hz)
                    .then(|| self.values.hz_at.get(&n).map(|s| (n, s.clone())))?
            });
            let (at, msg) = match via {
                Some((name, s)) => (s, format!("{what} (through `{name}`): {msg}")),
                None if ex
                    .text()
                    .get(span.clone())
                    .is_some_and(|t| t.ends_with("Hz")) =>
                {
                    (ex.at(&span), format!("{what}: {msg}"))
                }
                None => (ex.span.clone(), format!("{what}: {msg}")),
            };
            self.diags.push(Diagnostic::warning(at, msg));
        }
        Some(q.value)
    }

    fn positive(&mut self, ex: &Ex, dim: Dim, what: &str) -> Option<f64> {
        let v = self.quantity(ex, dim, what)?;
        if v > 0.0 {
            Some(v)
        } else {
            self.diags.push(
                Diagnostic::error(
                    ex.span.clone(),
                    format!(
                        "{what} must be positive, but `{}` is {}",
                        ex.text(),
                        expr::format_quantity(v, dim)
                    ),
                )
                .with_hint("give a value greater than zero"),
            );
            None
        }
    }

    fn non_negative(&mut self, ex: &Ex, dim: Dim, what: &str) -> Option<f64> {
        let v = self.quantity(ex, dim, what)?;
        if v >= 0.0 {
            Some(v)
        } else {
            self.diags.push(Diagnostic::error(
                ex.span.clone(),
                format!(
                    "{what} cannot be negative, but `{}` is {}",
                    ex.text(),
                    expr::format_quantity(v, dim)
                ),
            ));
            None
        }
    }

    fn level(
        &mut self,
        atom: &BuiltAtom,
        name: &str,
        span: &Span,
        atom_name: &str,
    ) -> Option<LevelId> {
        if let Some(&l) = atom.levels.get(name) {
            return Some(l);
        }
        let names: Vec<&str> = atom.atom.levels().iter().map(|l| l.name()).collect();
        let hint = match crate::notebook::diag::did_you_mean(name, names.iter().copied()) {
            Some(c) => format!("did you mean `{c}`?"),
            None => format!(
                "the levels of `{atom_name}` are {}",
                crate::notebook::schema::list(&names)
            ),
        };
        self.diags.push(
            Diagnostic::error(
                span.clone(),
                format!("the atom `{atom_name}` has no level `{name}`"),
            )
            .with_hint(hint),
        );
        None
    }

    /// Build an atom; `drives` adds a default transition for each light's reference pair that
    /// the block does not declare.
    pub fn atom(
        &mut self,
        name: &str,
        block: &AtomBlock,
        span: &Span,
        drives: &[&LightBlock],
    ) -> Option<BuiltAtom> {
        let mut b = Atom::builder();
        let mut levels = HashMap::new();
        let mut ok = true;
        for l in &block.levels {
            let e = self.quantity(
                &l.energy,
                Dim::FREQUENCY,
                &format!("the energy of level `{}`", l.name.name),
            );
            levels.insert(
                l.name.name.clone(),
                b.level(l.name.name.clone(), e.unwrap_or(0.0)),
            );
            ok &= e.is_some();
        }
        let mut partial = BuiltAtom {
            atom: b.build().ok()?,
            levels,
            transitions: HashMap::new(),
        };
        let mut pairs: Vec<(LevelId, LevelId, [C64; 3])> = Vec::new();
        for t in &block.transitions {
            let lo = self.level(&partial, &t.pair.from.name, &t.pair.from.span, name);
            let up = self.level(&partial, &t.pair.to.name, &t.pair.to.span, name);
            let d = t
                .dipole
                .as_ref()
                .map_or(Some(fieldbook_runtime::atom::E_A0), |d| {
                    self.quantity(d, Dim::DIPOLE, "a dipole matrix element")
                });
            let (Some(lo), Some(up), Some(d)) = (lo, up, d) else {
                ok = false;
                continue;
            };
            if pairs.iter().any(|p| (p.0, p.1) == (lo, up)) {
                self.diags.push(Diagnostic::error(
                    t.pair.span.clone(),
                    format!(
                        "the transition `{} -> {}` is declared twice",
                        t.pair.from.name, t.pair.to.name
                    ),
                ));
                ok = false;
                continue;
            }
            let mut comp = [C64::new(0.0, 0.0); 3];
            comp[(t.q + 1) as usize] = C64::new(d, 0.0);
            pairs.push((lo, up, comp));
        }
        for light in drives {
            let (Some(lo), Some(up)) = (
                partial.levels.get(&light.drives.from.name),
                partial.levels.get(&light.drives.to.name),
            ) else {
                continue;
            };
            if !pairs.iter().any(|p| (p.0, p.1) == (*lo, *up)) {
                let mut comp = [C64::new(0.0, 0.0); 3];
                comp[(light.polarization + 1) as usize] =
                    C64::new(fieldbook_runtime::atom::E_A0, 0.0);
                pairs.push((*lo, *up, comp));
            }
        }
        for (lo, up, d) in &pairs {
            let id = b.transition_with_dipole(*lo, *up, *d);
            partial.transitions.insert((*lo, *up), id);
        }
        for d in &block.decays {
            let from = self.level(&partial, &d.key.from.name, &d.key.from.span, name);
            let to = self.level(&partial, &d.key.to.name, &d.key.to.span, name);
            let r = self.non_negative(&d.rate, Dim::FREQUENCY, "a decay rate");
            match (from, to, r) {
                (Some(f), Some(t), Some(r)) => {
                    b.decay(f, t, r);
                }
                _ => ok = false,
            }
        }
        for d in &block.dephasing {
            let l = self.level(&partial, &d.key.name, &d.key.span, name);
            let r = self.non_negative(&d.rate, Dim::FREQUENCY, "a dephasing rate");
            match (l, r) {
                (Some(l), Some(r)) => {
                    b.dephasing(l, r);
                }
                _ => ok = false,
            }
        }
        if !ok {
            return None;
        }
        match b.build() {
            Ok(atom) => Some(BuiltAtom { atom, ..partial }),
            Err(e) => {
                self.diags.push(Diagnostic::error(
                    span.clone(),
                    format!("the atom `{name}` is inconsistent: {e}"),
                ));
                None
            }
        }
    }

    /// Build a field from a light block on a built atom.
    pub fn field(
        &mut self,
        name: &str,
        light: &LightBlock,
        atom: &BuiltAtom,
        atom_name: &str,
    ) -> Option<Field> {
        let lo = self.level(
            atom,
            &light.drives.from.name,
            &light.drives.from.span,
            atom_name,
        );
        let up = self.level(
            atom,
            &light.drives.to.name,
            &light.drives.to.span,
            atom_name,
        );
        let (lo, up) = (lo?, up?);
        let Some(&tr) = atom.transitions.get(&(lo, up)) else {
            self.diags.push(Diagnostic::error(
                light.drives.span.clone(),
                format!(
                    "`{} -> {}` is not a transition of `{atom_name}`",
                    light.drives.from.name, light.drives.to.name
                ),
            ));
            return None;
        };
        // Every value is evaluated before any failure returns, so that all of a light's problems
        // are reported at once.
        let carrier = match (&light.detuning, &light.frequency) {
            (_, Some(f)) => self
                .positive(f, Dim::FREQUENCY, "the light's frequency")
                .map(Carrier::Frequency),
            (Some(d), None) => self
                .quantity(d, Dim::FREQUENCY, "the detuning")
                .map(|detuning| Carrier::Detuning {
                    transition: tr,
                    detuning,
                }),
            (None, None) => Some(Carrier::Detuning {
                transition: tr,
                detuning: 0.0,
            }),
        };
        let (kind, ex) = &light.strength;
        let strength = match kind {
            StrengthKind::Rabi => self
                .non_negative(ex, Dim::FREQUENCY, "the Rabi frequency")
                .map(|rabi| Strength::Rabi {
                    transition: tr,
                    rabi,
                }),
            StrengthKind::Field => self
                .non_negative(ex, Dim::ELECTRIC_FIELD, "the field amplitude")
                .map(Strength::ElectricField),
            StrengthKind::Intensity => self
                .non_negative(ex, Dim::INTENSITY, "the intensity")
                .map(Strength::Intensity),
        };
        let phase = light
            .phase
            .as_ref()
            .map(|p| self.quantity(p, Dim::DIMENSIONLESS, "the phase"));
        let linewidth = light
            .linewidth
            .as_ref()
            .map(|w| self.non_negative(w, Dim::FREQUENCY, "the linewidth"));
        let chirp = match &light.chirp {
            None => None,
            Some(ChirpDef::Rate(r)) => Some(
                self.quantity(r, Dim::FREQUENCY_RATE, "the chirp rate")
                    .map(|rate| Chirp::Linear { start: 0.0, rate }),
            ),
            Some(ChirpDef::Formula(f)) => Some(
                self.compiled(f, Dim::FREQUENCY, "the chirp formula")
                    .map(|c| Chirp::Custom {
                        detuning: c,
                        phase: None,
                    }),
            ),
        };
        let mut pol = [C64::new(0.0, 0.0); 3];
        pol[(light.polarization + 1) as usize] = C64::new(1.0, 0.0);
        let mut field =
            Field::new(name, carrier?, strength?).with_polarization(Polarization::new(pol).ok()?);
        if let Some(p) = phase {
            field = field.with_phase(p?);
        }
        if let Some(w) = linewidth {
            field = field.with_linewidth(w?);
        }
        if let Some(c) = chirp {
            field = field.with_chirp(c?);
        }
        Some(field)
    }

    fn compiled(
        &mut self,
        ex: &Ex,
        dim: Dim,
        what: &str,
    ) -> Option<std::sync::Arc<dyn Fn(f64) -> f64 + Send + Sync>> {
        if self.values.poisoned(ex) {
            return None;
        }
        match ex.expr.compile(self.values) {
            Ok(c) if c.dim() == dim => Some(c.into_fn()),
            Ok(c) => {
                self.diags.push(Diagnostic::error(
                    ex.span.clone(),
                    format!(
                        "{what} `{}` is {}; {} is expected",
                        ex.text(),
                        c.dim().describe(),
                        dim.describe()
                    ),
                ));
                None
            }
            Err(e) => {
                self.diags.push(ex.diag(&e));
                None
            }
        }
    }

    fn envelope(
        &mut self,
        shape: &ShapeDef,
        duration: Option<&Ex>,
        span: &Span,
    ) -> Option<Envelope> {
        let dur = |b: &mut Self| duration.map(|d| b.positive(d, Dim::TIME, "the pulse duration"));
        let need = |b: &mut Self, what: &str| -> Option<f64> {
            match dur(b) {
                Some(d) => d,
                None => {
                    b.diags.push(
                        Diagnostic::error(
                            span.clone(),
                            format!("a {what} pulse needs a `duration`"),
                        )
                        .with_hint("e.g. `duration = \"10 µs\"`"),
                    );
                    None
                }
            }
        };
        let result = match shape {
            ShapeDef::Square => Envelope::new(Shape::Square, need(self, "square")?),
            ShapeDef::Blackman => Envelope::new(Shape::Blackman, need(self, "Blackman")?),
            ShapeDef::SinSquared => Envelope::new(Shape::SinSquared, need(self, "sin²")?),
            ShapeDef::Gaussian(s) => {
                let sigma = self.positive(s, Dim::TIME, "the Gaussian width σ")?;
                let d = dur(self).unwrap_or(Some(8.0 * sigma))?;
                Envelope::new(Shape::Gaussian { sigma }, d)
            }
            ShapeDef::Sech(w) => {
                let width = self.positive(w, Dim::TIME, "the sech width")?;
                let d = dur(self).unwrap_or(Some(20.0 * width))?;
                Envelope::new(Shape::Sech { width }, d)
            }
            ShapeDef::Tanh { width, from, to } => {
                let width = self.positive(width, Dim::TIME, "the tanh width")?;
                Envelope::new(
                    Shape::TanhRamp {
                        from: *from,
                        to: *to,
                        width,
                    },
                    need(self, "tanh")?,
                )
            }
            ShapeDef::Ramp { from, to } => Envelope::new(
                Shape::LinearRamp {
                    from: *from,
                    to: *to,
                },
                need(self, "ramp")?,
            ),
            ShapeDef::Formula(f) => {
                let c = self.compiled(f, Dim::DIMENSIONLESS, "the envelope formula")?;
                Envelope::new(Shape::Custom(c), need(self, "formula")?)
            }
            ShapeDef::Steps { values, durations } => {
                let d: Option<Vec<f64>> = durations
                    .iter()
                    .map(|e| self.positive(e, Dim::TIME, "a step length"))
                    .collect();
                Envelope::piecewise(values.clone(), d?)
            }
            ShapeDef::Table { times, values } => {
                let t: Option<Vec<f64>> = times
                    .iter()
                    .map(|e| self.quantity(e, Dim::TIME, "a knot time"))
                    .collect();
                Envelope::tabulated(t?, values.clone())
            }
        };
        match result {
            Ok(e) => Some(e),
            Err(e) => {
                self.diags.push(Diagnostic::error(
                    span.clone(),
                    format!("this pulse's envelope is invalid: {e}"),
                ));
                None
            }
        }
    }

    /// Build a sequence; `lights` maps light names to field indices.
    pub fn sequence(
        &mut self,
        block: &SequenceBlock,
        lights: &HashMap<String, usize>,
    ) -> Option<Sequence> {
        let mut b = Sequence::builder();
        let mut ok = true;
        for step in &block.steps {
            match step {
                StepDef::Wait { duration } => match self.positive(duration, Dim::TIME, "a wait") {
                    Some(d) => {
                        b.wait(d);
                    }
                    None => ok = false,
                },
                StepDef::Pulse {
                    light,
                    shape,
                    duration,
                    area,
                    scale,
                    phase,
                    at,
                    span,
                } => {
                    let Some(&fi) = lights.get(&light.name) else {
                        ok = false;
                        continue;
                    };
                    let Some(env) = self.envelope(shape, duration.as_ref(), span) else {
                        ok = false;
                        continue;
                    };
                    let mut p = Pulse::new(fi, env);
                    if let Some(a) = area {
                        match self.quantity(a, Dim::DIMENSIONLESS, "the pulse area") {
                            Some(a) => p = p.area(a),
                            None => ok = false,
                        }
                    }
                    if let Some(s) = scale {
                        match self.quantity(s, Dim::DIMENSIONLESS, "the amplitude scale") {
                            Some(s) => p = p.scale(s),
                            None => ok = false,
                        }
                    }
                    if let Some(ph) = phase {
                        match self.quantity(ph, Dim::DIMENSIONLESS, "the pulse phase") {
                            Some(ph) => p = p.phase(ph),
                            None => ok = false,
                        }
                    }
                    match at {
                        Some(t) => match self.non_negative(t, Dim::TIME, "the start time") {
                            Some(t) => {
                                b.at(t, p);
                            }
                            None => ok = false,
                        },
                        None => {
                            b.then(p);
                        }
                    }
                }
            }
        }
        if !ok {
            return None;
        }
        b.build().ok()
    }

    /// The initial state.
    pub fn start(
        &mut self,
        start: &StartDef,
        atom: &BuiltAtom,
        atom_name: &str,
        span: &Span,
    ) -> Option<RtState> {
        let r = match start {
            StartDef::Default => RtState::level(&atom.atom, 0),
            StartDef::Level(n) => {
                RtState::level(&atom.atom, self.level(atom, &n.name, &n.span, atom_name)?)
            }
            StartDef::Mixture(w) => {
                let ws: Option<Vec<(LevelId, f64)>> = w
                    .iter()
                    .map(|(n, x)| Some((self.level(atom, &n.name, &n.span, atom_name)?, *x)))
                    .collect();
                RtState::mixture(&atom.atom, &ws?)
            }
            StartDef::Superposition(w) => {
                let ws: Option<Vec<(LevelId, C64)>> = w
                    .iter()
                    .map(|(n, x)| {
                        Some((
                            self.level(atom, &n.name, &n.span, atom_name)?,
                            C64::new(*x, 0.0),
                        ))
                    })
                    .collect();
                RtState::superposition(&atom.atom, &ws?)
            }
            StartDef::Thermal {
                levels,
                temperature,
            } => {
                let ls: Option<Vec<LevelId>> = levels
                    .iter()
                    .map(|n| self.level(atom, &n.name, &n.span, atom_name))
                    .collect();
                let t = self.positive(temperature, Dim::TEMPERATURE, "the temperature")?;
                RtState::thermal(&atom.atom, &ls?, t)
            }
        };
        match r {
            Ok(s) => Some(s),
            Err(e) => {
                self.diags.push(Diagnostic::error(
                    span.clone(),
                    format!("the initial state is invalid: {e}"),
                ));
                None
            }
        }
    }

    /// Runtime observables for `observe`.
    pub fn observables(
        &mut self,
        obs: &[(ObsSpec, Span, Vec<Span>)],
        atom: &BuiltAtom,
        atom_name: &str,
    ) -> Option<Vec<Observable>> {
        let mut out = Vec::new();
        let mut ok = true;
        for (o, span, level_spans) in obs {
            let mut ids = Vec::new();
            for (k, l) in o.levels().into_iter().enumerate() {
                match atom.levels.get(l) {
                    Some(&id) => ids.push(id),
                    None => {
                        self.level(atom, l, level_spans.get(k).unwrap_or(span), atom_name);
                        ok = false;
                    }
                }
            }
            if !ok {
                continue;
            }
            out.push(match o {
                ObsSpec::Population(ls) if ls.len() == 1 => Observable::Population(ids[0]),
                ObsSpec::Population(_) => Observable::PopulationSum(ids),
                ObsSpec::Coherence(..) => Observable::Coherence(ids[0], ids[1]),
                ObsSpec::Bloch(..) => Observable::Bloch {
                    lower: ids[0],
                    upper: ids[1],
                },
                ObsSpec::Fidelity(_) => {
                    let mut v = vec![C64::new(0.0, 0.0); atom.atom.n()];
                    v[ids[0]] = C64::new(1.0, 0.0);
                    Observable::Fidelity(v)
                }
                ObsSpec::Scattering => Observable::ScatteringRate,
                ObsSpec::Norm => Observable::Norm,
            });
        }
        ok.then_some(out)
    }
}

/// Everything an `evolve` block needs, found by name.
pub struct EvolveInputs<'a> {
    /// The evolve block.
    pub evolve: &'a EvolveBlock,
    /// Its span.
    pub span: Span,
    /// Atom name and block.
    pub atom: (&'a str, &'a AtomBlock, Span),
    /// The lights used, in field order.
    pub lights: Vec<(&'a str, &'a LightBlock)>,
    /// The sequence, unless steady.
    pub sequence: Option<&'a SequenceBlock>,
}

/// A built scenario, ready for the runtime.
pub enum Built {
    /// Time evolution.
    Evolve(Problem),
    /// Steady state.
    Steady(SteadyProblem),
}

/// Build the runtime problem of an evolve block at `values`.
pub fn problem(
    inputs: &EvolveInputs<'_>,
    values: &Values,
    diags: &mut Vec<Diagnostic>,
    warn: bool,
) -> Option<Built> {
    let mut b = Builder {
        values,
        diags,
        warn,
    };
    let ev = inputs.evolve;
    let drives: Vec<&LightBlock> = inputs.lights.iter().map(|(_, l)| *l).collect();
    let (atom_name, atom_block, atom_span) = &inputs.atom;
    let atom = b.atom(atom_name, atom_block, atom_span, &drives)?;
    // Each part is built before any failure returns, so that all problems are reported at once.
    let fields: Vec<Option<Field>> = inputs
        .lights
        .iter()
        .map(|(n, l)| b.field(n, l, &atom, atom_name))
        .collect();
    let observables = b.observables(&ev.observe, &atom, atom_name);
    let cutoff = match &ev.cutoff {
        Some(c) => b.positive(c, Dim::FREQUENCY, "the cutoff"),
        None => Some(f64::INFINITY),
    };
    let fields: Option<Vec<Field>> = fields.into_iter().collect();
    let (fields, observables, cutoff) = (fields, observables, cutoff);
    if ev.steady {
        return Some(Built::Steady(SteadyProblem {
            atom: atom.atom,
            fields: fields?,
            cutoff: cutoff?,
            observables: observables?,
        }));
    }
    let index: HashMap<String, usize> = inputs
        .lights
        .iter()
        .enumerate()
        .map(|(i, (n, _))| (n.to_string(), i))
        .collect();
    let sequence = inputs.sequence.and_then(|s| b.sequence(s, &index));
    let initial = b.start(&ev.start, &atom, atom_name, &inputs.span);
    let (fields, observables, cutoff, sequence, initial) =
        (fields?, observables?, cutoff?, sequence?, initial?);
    let mut p = Problem::new(atom.atom, fields, sequence, initial, observables);
    p.frame = if ev.exact {
        Frame::exact()
    } else {
        Frame::Rotating { cutoff }
    };
    p.method = match ev.method {
        MethodName::Auto => Method::Auto,
        MethodName::Eigen => Method::Eigen,
        MethodName::Dp54 => Method::DormandPrince54,
        MethodName::Dop853 => Method::DormandPrince853,
        MethodName::Magnus4 => Method::Magnus4,
        MethodName::Liouvillian => Method::LiouvillianExp,
    };
    if let Some(r) = ev.rtol {
        p.tolerance.rtol = r;
    }
    if let Some(a) = ev.atol {
        p.tolerance.atol = a;
    }
    if let Some(m) = ev.max_steps {
        p.max_steps = m;
    }
    if let Some((n, _)) = ev.samples {
        p.samples = Samples::Uniform(n);
    }
    Some(Built::Evolve(p))
}
