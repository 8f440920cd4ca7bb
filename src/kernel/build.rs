//! From typed blocks and parameter values to runtime objects: evaluating expressions with their
//! expected dimensions, and building the atom, fields, sequence and problem of an `evolve` block.
//! The same code runs once at the nominal parameters (where every problem becomes a located
//! diagnostic) and again at every sweep point.

use std::collections::{HashMap, HashSet};

use fieldbook_runtime::manifold::{Line, group_name, half_name};
use fieldbook_runtime::prelude::*;
use fieldbook_runtime::species::{DLine, SPECIES, Species};
use fieldbook_runtime::state::State as RtState;
use fieldbook_runtime::zeeman::{Hyperfine, ZeemanModel, lande_g_j};

use super::scope::Scope;
use crate::notebook::blocks::{
    AtomBlock, ChirpDef, EvolveBlock, Ex, LightBlock, LineSource, ManifoldDef, MethodName,
    PolarizationDef, SequenceBlock, ShapeDef, StartDef, StepDef, StrengthKind, ZeemanDef,
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
    /// Named groups of levels, in atom order: on a Zeeman atom `g` and `e` (each manifold) and
    /// `g2`, `e3`, `g3/2` … (each hyperfine level); none on a hand-made atom.
    pub groups: HashMap<String, Vec<LevelId>>,
    /// The quantisation axis (lab frame).
    pub axis: [f64; 3],
    /// A Zeeman atom's line, for the zero-field frequencies of hyperfine pairs.
    pub line: Option<Line>,
}

impl BuiltAtom {
    /// The levels a name stands for: one level, or every level of a group.
    pub fn resolve(&self, name: &str) -> Option<Vec<LevelId>> {
        match self.levels.get(name) {
            Some(&l) => Some(vec![l]),
            None => self.groups.get(name).cloned(),
        }
    }
}

/// A group name `g2`, `e3/2`, `g`, `e` as (upper manifold?, 2F), with `None` for a whole
/// manifold.
fn parse_group(name: &str) -> Option<(bool, Option<i32>)> {
    let excited = match name.as_bytes().first()? {
        b'g' => false,
        b'e' => true,
        _ => return None,
    };
    let rest = &name[1..];
    if rest.is_empty() {
        return Some((excited, None));
    }
    let two_f = match rest.split_once('/') {
        Some((n, "2")) => n.parse::<i32>().ok().filter(|n| n % 2 == 1)?,
        Some(_) => return None,
        None => rest.parse::<i32>().ok()?.checked_mul(2)?,
    };
    (two_f >= 0).then_some((excited, Some(two_f)))
}

/// What a light's detuning and strength refer to.
#[derive(Clone, Copy, Debug)]
enum Reference {
    /// A transition of the atom.
    Transition(TransitionId),
    /// A hyperfine pair of a Zeeman atom, by its zero-field angular frequency (rad/s).
    Hyperfine(f64),
}

/// The most sublevels a Zeeman atom may expand into (a density matrix of 256² entries).
const MAX_SUBLEVELS: usize = 256;

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

    /// The levels `name` stands for (a level or a group), or a diagnostic at `span`.
    fn levels_of(
        &mut self,
        atom: &BuiltAtom,
        name: &str,
        span: &Span,
        atom_name: &str,
    ) -> Option<Vec<LevelId>> {
        match atom.resolve(name) {
            Some(ls) => Some(ls),
            None => self.level(atom, name, span, atom_name).map(|l| vec![l]),
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
        if atom.groups.contains_key(name) {
            self.diags.push(
                Diagnostic::error(
                    span.clone(),
                    format!(
                        "`{name}` is a group of levels of `{atom_name}`; one level is needed here"
                    ),
                )
                .with_hint(format!(
                    "name one sublevel, e.g. `{}`",
                    atom.groups[name]
                        .last()
                        .map_or("", |&l| atom.atom.levels()[l].name())
                )),
            );
            return None;
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
        if let Some(z) = &block.zeeman {
            return self.zeeman_atom(name, block, z, span);
        }
        let axis = block.axis.as_ref().map_or([0.0, 0.0, 1.0], |a| a.0);
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
            groups: HashMap::new(),
            axis,
            line: None,
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
                // d_q = e a₀ (ε^q)*, so that the light's own coupling is e a₀ whatever its
                // polarisation; a polarisation that fails to build is reported by the light.
                let mut scratch = Vec::new();
                let pol = Builder {
                    values: self.values,
                    diags: &mut scratch,
                    warn: false,
                }
                .polarization(light, axis)
                .unwrap_or_else(Polarization::pi);
                let comp = pol
                    .components()
                    .map(|e| e.conj() * fieldbook_runtime::atom::E_A0);
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

    /// A Zeeman atom: the line's manifolds expanded into hyperfine + Zeeman sublevels at the
    /// block's magnetic field, with its groups.
    fn zeeman_atom(
        &mut self,
        name: &str,
        block: &AtomBlock,
        z: &ZeemanDef,
        span: &Span,
    ) -> Option<BuiltAtom> {
        let axis = block.axis.as_ref().map_or([0.0, 0.0, 1.0], |a| a.0);
        let b_field = match &z.magnetic_field {
            Some(e) => self.quantity(e, Dim::MAGNETIC_FIELD, "the magnetic field"),
            None => Some(0.0),
        };
        let line = match &z.source {
            LineSource::Species { species, line } => match Species::named(&species.0) {
                Some(sp) => sp.line(if *line == 1 { DLine::D1 } else { DLine::D2 }).ok(),
                None => {
                    let names: Vec<&str> = SPECIES.iter().map(|s| s.name).collect();
                    self.diags.push(
                        Diagnostic::error(
                            species.1.clone(),
                            format!("`{}` is not in the species table", species.0),
                        )
                        .with_hint(format!(
                            "the table holds {} (notebooks-spec/SPECIES.md); describe other atoms by `lower` and `upper`",
                            crate::notebook::schema::list(&names)
                        )),
                    );
                    None
                }
            },
            LineSource::Manifolds {
                lower,
                upper,
                frequency,
                wavelength,
                width,
                lifetime,
            } => {
                let in_field = b_field.is_some_and(|b| b != 0.0);
                let lo = self.hyperfine(lower, "lower", in_field);
                let up = self.hyperfine(upper, "upper", in_field);
                let omega = if *wavelength {
                    self.positive(frequency, Dim::LENGTH, "the wavelength")
                        .map(|l| std::f64::consts::TAU * fieldbook_runtime::field::C_LIGHT / l)
                } else {
                    self.positive(frequency, Dim::FREQUENCY, "the line's frequency")
                };
                let gamma = if *lifetime {
                    self.positive(width, Dim::TIME, "the lifetime")
                        .map(|t| 1.0 / t)
                } else {
                    self.positive(width, Dim::FREQUENCY, "the linewidth")
                };
                Some(Line {
                    ground: lo?,
                    excited: up?,
                    omega: omega?,
                    gamma: gamma?,
                })
            }
        };
        let (line, b_field) = (line?, b_field?);
        // The groups to keep, checked against the manifolds' hyperfine levels.
        let mut keep_g: Vec<i32> = Vec::new();
        let mut keep_e: Vec<i32> = Vec::new();
        let mut ok = true;
        for k in &z.keep {
            let manifolds = [(false, &line.ground), (true, &line.excited)];
            let hit = parse_group(&k.name).and_then(|(excited, f)| {
                let m = manifolds[usize::from(excited)].1;
                match f {
                    None => Some((excited, m.two_fs())),
                    Some(f) => m.two_fs().contains(&f).then(|| (excited, vec![f])),
                }
            });
            match hit {
                Some((false, fs)) => keep_g.extend(fs),
                Some((true, fs)) => keep_e.extend(fs),
                None => {
                    let mut names = Vec::new();
                    for (excited, m) in manifolds {
                        for f in m.two_fs() {
                            names.push(group_name(excited, f));
                        }
                    }
                    let names: Vec<&str> = names.iter().map(String::as_str).collect();
                    self.diags.push(
                        Diagnostic::error(
                            k.span.clone(),
                            format!("`{}` is not a hyperfine level of `{name}`", k.name),
                        )
                        .with_hint(format!(
                            "its hyperfine levels are {}",
                            crate::notebook::schema::list(&names)
                        )),
                    );
                    ok = false;
                }
            }
        }
        if !ok {
            return None;
        }
        let kept = |keep: &[i32], f: i32| keep.is_empty() || keep.contains(&f);
        let count: i32 = line
            .ground
            .two_fs()
            .into_iter()
            .filter(|f| kept(&keep_g, *f))
            .chain(
                line.excited
                    .two_fs()
                    .into_iter()
                    .filter(|f| kept(&keep_e, *f)),
            )
            .map(|f| f + 1)
            .sum();
        if count as usize > MAX_SUBLEVELS {
            self.diags.push(
                Diagnostic::error(
                    span.start..span.start + 3,
                    format!(
                        "the atom `{name}` expands into {count} sublevels; at most {MAX_SUBLEVELS} are supported"
                    ),
                )
                .with_hint("keep fewer hyperfine levels with `keep = [...]`"),
            );
            return None;
        }
        let model = if z.linear {
            ZeemanModel::Linear
        } else {
            ZeemanModel::Full
        };
        let la = match line.expand_with(model, b_field, |f| kept(&keep_g, f), |f| kept(&keep_e, f))
        {
            Ok(la) => la,
            Err(e) => {
                let at = z
                    .keep
                    .first()
                    .map_or(span.start..span.start + 3, |k| k.span.clone());
                self.diags.push(
                    Diagnostic::error(at, format!("the atom `{name}` cannot be expanded: {e}"))
                        .with_hint(
                            "keep every lower hyperfine level that a kept upper one decays to",
                        ),
                );
                return None;
            }
        };
        if self.warn && la.leaked > 1e-12 {
            let at = z
                .keep
                .first()
                .map_or(span.start..span.start + 3, |k| k.span.clone());
            self.diags.push(Diagnostic::warning(
                at,
                format!(
                    "in this field up to {:.1e} of a kept upper sublevel's decay leads to lower levels that are not kept; it is returned to the kept ones",
                    la.leaked
                ),
            ));
        }
        let mut levels = HashMap::new();
        let mut groups: HashMap<String, Vec<LevelId>> = HashMap::new();
        for (id, l) in la.labels.iter().enumerate() {
            levels.insert(l.name.clone(), id);
            groups
                .entry(if l.excited { "e" } else { "g" }.to_string())
                .or_default()
                .push(id);
            groups
                .entry(group_name(l.excited, l.two_f))
                .or_default()
                .push(id);
        }
        let transitions = la
            .atom
            .transitions()
            .iter()
            .enumerate()
            .map(|(k, t)| ((t.lower(), t.upper()), k))
            .collect();
        let mut built = BuiltAtom {
            atom: la.atom,
            levels,
            transitions,
            groups,
            axis,
            line: Some(line),
        };
        for d in &block.dephasing {
            let ls = self.levels_of(&built, &d.key.name, &d.key.span, name);
            let r = self.non_negative(&d.rate, Dim::FREQUENCY, "a dephasing rate");
            let (Some(ls), Some(r)) = (ls, r) else {
                ok = false;
                continue;
            };
            for l in ls {
                match built.atom.with_dephasing(l, r) {
                    Ok(a) => built.atom = a,
                    Err(e) => {
                        self.diags
                            .push(Diagnostic::error(d.rate.span.clone(), e.to_string()));
                        ok = false;
                    }
                }
            }
        }
        ok.then_some(built)
    }

    /// One manifold's constants from its quantum numbers; g_J from L and S when not given, and
    /// required (one way or the other) in a magnetic field.
    fn hyperfine(&mut self, m: &ManifoldDef, side: &str, in_field: bool) -> Option<Hyperfine> {
        let a = match &m.a {
            Some(e) => self.quantity(e, Dim::FREQUENCY, "the hyperfine constant A"),
            None => Some(0.0),
        };
        let b = match &m.b {
            Some(e) => self.quantity(e, Dim::FREQUENCY, "the hyperfine constant B"),
            None => Some(0.0),
        };
        let lande = match (&m.l, &m.s) {
            (Some(l), Some(s)) => {
                match lande_g_j(l.0, s.0, m.j.0) {
                    Some(g) => Some(g),
                    None => {
                        self.diags.push(
                        Diagnostic::error(
                            m.j.1.clone(),
                            format!(
                                "J = {} cannot come from L = {} and S = {}",
                                half_name(m.j.0),
                                half_name(l.0),
                                half_name(s.0)
                            ),
                        )
                        .with_hint("|L − S| ≤ J ≤ L + S, and J = 0 has no magnetic moment; or give `g_J`"),
                    );
                        return None;
                    }
                }
            }
            _ => None,
        };
        let g_j = match (m.g_j, lande) {
            (Some(g), _) | (None, Some(g)) => g,
            (None, None) if in_field => {
                self.diags.push(
                    Diagnostic::error(
                        m.span.clone(),
                        format!(
                            "the {side} manifold needs `g_J` (or `L` and `S`) in a magnetic field"
                        ),
                    )
                    .with_hint("e.g. `g_J = 2.0023`, or `L = 0, S = \"1/2\"` for the Landé value"),
                );
                return None;
            }
            (None, None) => 0.0,
        };
        Some(Hyperfine {
            two_j: m.j.0,
            two_i: m.i,
            a: a?,
            b: b?,
            g_j,
            g_i: m.g_i,
        })
    }

    /// A light's polarisation relative to the quantisation axis `axis`.
    pub fn polarization(&mut self, light: &LightBlock, axis: [f64; 3]) -> Option<Polarization> {
        let (r, span) = match &light.polarization {
            PolarizationDef::Spherical(q) => {
                let mut c = [C64::new(0.0, 0.0); 3];
                c[(q + 1) as usize] = C64::new(1.0, 0.0);
                return Polarization::new(c).ok();
            }
            PolarizationDef::Angle(ex) => {
                let theta = self.quantity(ex, Dim::DIMENSIONLESS, "the polarisation angle")?;
                (Polarization::linear_at(theta), ex.span.clone())
            }
            PolarizationDef::Vector {
                vector,
                span,
                ellipticity,
            } => {
                let chi = match ellipticity {
                    Some(e) => self.quantity(e, Dim::DIMENSIONLESS, "the ellipticity")?,
                    None => 0.0,
                };
                match &light.direction {
                    Some((k, _)) => (
                        Polarization::elliptical(*vector, *k, chi, axis),
                        span.clone(),
                    ),
                    None if chi != 0.0 => {
                        let at = ellipticity
                            .as_ref()
                            .map_or(span.clone(), |e| e.span.clone());
                        self.diags.push(
                            Diagnostic::error(at, "elliptical light needs the light's `direction`")
                                .with_hint("the helicity is defined about the beam, e.g. `direction = [0, 0, 1]`"),
                        );
                        return None;
                    }
                    None => (
                        Polarization::from_cartesian(vector.map(|x| C64::new(x, 0.0)), axis),
                        span.clone(),
                    ),
                }
            }
        };
        match r {
            Ok(p) => Some(p),
            Err(e) => {
                self.diags.push(Diagnostic::error(
                    span,
                    format!("the polarisation is invalid: {e}"),
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
        let reference = self.reference(light, atom, atom_name)?;
        let tr = match reference {
            Reference::Transition(tr) => Some(tr),
            Reference::Hyperfine(_) => None,
        };
        // Every value is evaluated before any failure returns, so that all of a light's problems
        // are reported at once.
        let carrier = match (&light.detuning, &light.frequency) {
            (_, Some(f)) => self
                .positive(f, Dim::FREQUENCY, "the light's frequency")
                .map(Carrier::Frequency),
            (d, None) => {
                let detuning = match d {
                    Some(d) => self.quantity(d, Dim::FREQUENCY, "the detuning"),
                    None => Some(0.0),
                };
                detuning.map(|detuning| match reference {
                    Reference::Transition(transition) => Carrier::Detuning {
                        transition,
                        detuning,
                    },
                    Reference::Hyperfine(w) => Carrier::Frequency(w + detuning),
                })
            }
        };
        let (kind, ex) = &light.strength;
        let needs_transition = |b: &mut Self, what: &str| -> Option<TransitionId> {
            if tr.is_none() {
                b.diags.push(
                    Diagnostic::error(
                        ex.span.clone(),
                        format!(
                            "{what} needs one sublevel transition as `drives`; `{} -> {}` is a pair of hyperfine levels",
                            light.drives.from.name, light.drives.to.name
                        ),
                    )
                    .with_hint("give `intensity` or `field`, or drive a sublevel pair such as `g2_m2 -> e3_m3`"),
                );
            }
            tr
        };
        let strength = match kind {
            StrengthKind::Rabi => {
                let rabi = self.non_negative(ex, Dim::FREQUENCY, "the Rabi frequency");
                let transition = needs_transition(self, "a Rabi frequency");
                rabi.zip(transition)
                    .map(|(rabi, transition)| Strength::Rabi { transition, rabi })
            }
            StrengthKind::Saturation => {
                let s = self.non_negative(ex, Dim::DIMENSIONLESS, "the saturation parameter");
                let transition = needs_transition(self, "a saturation parameter");
                s.zip(transition)
                    .map(|(s, transition)| Strength::Saturation { transition, s })
            }
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
        let pol = self.polarization(light, atom.axis);
        let mut field = Field::new(name, carrier?, strength?).with_polarization(pol?);
        if let Some((k, span)) = &light.direction {
            match field.with_direction(*k) {
                Ok(f) => field = f,
                Err(e) => {
                    self.diags.push(Diagnostic::error(
                        span.clone(),
                        format!("the direction is invalid: {e}"),
                    ));
                    return None;
                }
            }
        }
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

    /// What a light's `drives` names: a transition, or on a Zeeman atom a pair of hyperfine
    /// levels (`g2 -> e3`), whose zero-field frequency its detuning is measured from.
    fn reference(
        &mut self,
        light: &LightBlock,
        atom: &BuiltAtom,
        atom_name: &str,
    ) -> Option<Reference> {
        let (from, to) = (&light.drives.from, &light.drives.to);
        if let Some(line) = &atom.line
            && (atom.groups.contains_key(&from.name) || atom.groups.contains_key(&to.name))
        {
            let pair = match (parse_group(&from.name), parse_group(&to.name)) {
                (Some((false, Some(f))), Some((true, Some(fp))))
                    if atom.groups.contains_key(&from.name)
                        && atom.groups.contains_key(&to.name) =>
                {
                    line.hyperfine_frequency(f, fp)
                }
                _ => None,
            };
            return match pair {
                Some(w) => Some(Reference::Hyperfine(w)),
                None => {
                    self.diags.push(
                        Diagnostic::error(
                            light.drives.span.clone(),
                            format!(
                                "`{} -> {}` is neither a sublevel transition nor a pair of kept hyperfine levels of `{atom_name}`",
                                from.name, to.name
                            ),
                        )
                        .with_hint("write a lower and an upper hyperfine level, e.g. `\"g2 -> e3\"`, or two sublevels, e.g. `\"g2_m2 -> e3_m3\"`"),
                    );
                    None
                }
            };
        }
        let lo = self.level(atom, &from.name, &from.span, atom_name);
        let up = self.level(atom, &to.name, &to.span, atom_name);
        let (lo, up) = (lo?, up?);
        match atom.transitions.get(&(lo, up)) {
            Some(&tr) => Some(Reference::Transition(tr)),
            None => {
                let hint = if atom.line.is_some() {
                    "a dipole couples m to m and m ± 1, and only lower to upper sublevels"
                } else {
                    "declare it under `[transitions]`"
                };
                self.diags.push(
                    Diagnostic::error(
                        light.drives.span.clone(),
                        format!(
                            "`{} -> {}` is not a transition of `{atom_name}`",
                            from.name, to.name
                        ),
                    )
                    .with_hint(hint),
                );
                None
            }
        }
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
            StartDef::Level(n) => match self.levels_of(atom, &n.name, &n.span, atom_name)?[..] {
                [l] => RtState::level(&atom.atom, l),
                ref group => {
                    let ws: Vec<(LevelId, f64)> = group.iter().map(|&l| (l, 1.0)).collect();
                    RtState::mixture(&atom.atom, &ws)
                }
            },
            StartDef::Mixture(w) => {
                // A group's weight is spread evenly over its sublevels.
                let mut ws: Vec<(LevelId, f64)> = Vec::new();
                let mut ok = true;
                for (n, x) in w {
                    match self.levels_of(atom, &n.name, &n.span, atom_name) {
                        Some(ls) => {
                            let share = *x / ls.len() as f64;
                            ws.extend(ls.into_iter().map(|l| (l, share)));
                        }
                        None => ok = false,
                    }
                }
                if !ok {
                    return None;
                }
                RtState::mixture(&atom.atom, &ws)
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
                let ls: Option<Vec<Vec<LevelId>>> = levels
                    .iter()
                    .map(|n| self.levels_of(atom, &n.name, &n.span, atom_name))
                    .collect();
                let t = self.positive(temperature, Dim::TEMPERATURE, "the temperature")?;
                let mut ls: Vec<LevelId> = ls?.into_iter().flatten().collect();
                ls.sort_unstable();
                ls.dedup();
                RtState::thermal(&atom.atom, &ls, t)
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
            let populations = matches!(o, ObsSpec::Population(_));
            for (k, l) in o.levels().into_iter().enumerate() {
                let at = level_spans.get(k).unwrap_or(span);
                // A population may sum a group; the other observables need single levels.
                let found = if populations {
                    self.levels_of(atom, l, at, atom_name)
                } else {
                    self.level(atom, l, at, atom_name).map(|l| vec![l])
                };
                match found {
                    Some(ls) => ids.extend(ls),
                    None => ok = false,
                }
            }
            if !ok {
                continue;
            }
            out.push(match o {
                ObsSpec::Population(_) if ids.len() == 1 => Observable::Population(ids[0]),
                ObsSpec::Population(_) => {
                    // A set of levels: one named twice (directly and in a group) counts once.
                    ids.sort_unstable();
                    ids.dedup();
                    Observable::PopulationSum(ids)
                }
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
    // `None` when the velocity could not be evaluated (reported), `Some(None)` at rest.
    let velocity: Option<Option<([f64; 3], &Span)>> = match &ev.velocity {
        Some((exs, span)) => {
            let v: Option<Vec<f64>> = exs
                .iter()
                .map(|e| b.quantity(e, Dim::VELOCITY, "the velocity"))
                .collect();
            v.map(|v| Some(([v[0], v[1], v[2]], span)))
        }
        None => Some(None),
    };
    let mut fields: Option<Vec<Field>> = fields.into_iter().collect();
    // A moving atom sees each light Doppler shifted.
    if let (Some(fs), Some(Some((v, vspan)))) = (&mut fields, velocity) {
        for (f, (lname, light)) in fs.iter_mut().zip(&inputs.lights) {
            if light.direction.is_none() {
                b.diags.push(
                    Diagnostic::error(
                        vspan.clone(),
                        format!("the light `{lname}` has no `direction`, so its Doppler shift is undefined"),
                    )
                    .with_hint("give every light of a moving atom its beam direction, e.g. `direction = [0, 0, 1]`"),
                );
                return None;
            }
            match f.doppler_shifted(&atom.atom, v) {
                Ok(shifted) => *f = shifted,
                Err(e) => {
                    b.diags.push(Diagnostic::error(
                        vspan.clone(),
                        format!("the Doppler shift of `{lname}` failed: {e}"),
                    ));
                    return None;
                }
            }
        }
    }
    velocity?;
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
