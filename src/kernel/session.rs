//! One session per run-file: `check` resolves every name and builds every scenario at the
//! nominal parameters without simulating; `run` then executes the cells top to bottom, keeping
//! each cell's outputs with it and reusing cached evolve results whose inputs are unchanged.

use std::collections::{HashMap, HashSet};
use std::sync::atomic::{AtomicUsize, Ordering};

use fieldbook_runtime::frame::TermNote;
use fieldbook_runtime::prelude::*;
use fieldbook_runtime::sweep::SweepError;

use super::build::{self, Built, EvolveInputs, Values};
use super::cache::Cache;
use super::results::{self, AxisResult, EvolveResult, ObsResult, PathValue, SolverInfo};
use super::scope::{self, Scope};
use crate::notebook::Document;
use crate::notebook::blocks::{
    AtomBlock, AxisValues, Block, CheckBlock, Condition, EvolveBlock, Ex, LightBlock, LineSource,
    PathRef, PolarizationDef, SequenceBlock, StepDef, Tol, WidthDef,
};
use crate::notebook::diag::Diagnostic;
use crate::notebook::expr::{self, Dim};
use crate::notebook::path::{ObsSpec, Reduce, Target};
use crate::notebook::source::Span;

/// Largest sweep accepted (grid points × average nodes), refused before anything is allocated.
pub const MAX_POINTS: u128 = 4_000_000;

/// What an evolve block exposes to later blocks, known before it runs.
#[derive(Clone, Debug)]
struct Meta {
    order: usize,
    observed: Vec<ObsSpec>,
    axes: Vec<(String, Dim)>,
    /// The sweep grid, so that `at` selections are checked before running.
    grid: HashMap<String, Vec<f64>>,
    traced: bool,
}

/// An evolve block, checked and ready to run.
#[derive(Clone, Debug)]
pub struct EvolvePlan {
    /// Block name.
    pub name: String,
    /// Block span.
    pub span: Span,
    /// Index into the document's blocks.
    pub block: usize,
    atom: String,
    lights: Vec<String>,
    sequence: Option<String>,
    axes: Vec<(String, Vec<f64>, Dim)>,
    /// Averaged parameter, node offsets from its value (SI) and weights.
    average: Option<(String, Vec<f64>, Vec<f64>)>,
    /// Cache key: a hash of everything the result depends on.
    pub key: String,
}

/// One executable cell.
#[derive(Clone, Debug)]
pub enum Step {
    /// Compute.
    Evolve(Box<EvolvePlan>),
    /// Show curves (index into the document's blocks).
    Plot(usize),
    /// Show a table.
    Table(usize),
    /// Evaluate checks.
    Check(usize),
}

/// A checked run-file.
pub struct Checked<'d> {
    /// The document.
    pub doc: &'d Document,
    /// Its names.
    pub scope: Scope,
    /// Nominal parameter values.
    pub values: Values,
    /// Its cells in order.
    pub steps: Vec<Step>,
    atoms: HashMap<String, (&'d AtomBlock, Span)>,
    lights: HashMap<String, (&'d LightBlock, String)>,
    sequences: HashMap<String, &'d SequenceBlock>,
    evolves: HashMap<String, &'d EvolveBlock>,
}

/// The outcome of checking: the plan if there were no errors, all diagnostics, and problems
/// with the command line's `--set` overrides.
pub struct CheckOutcome<'d> {
    /// Ready to run when `Some`.
    pub checked: Option<Checked<'d>>,
    /// Errors and warnings in the file.
    pub diags: Vec<Diagnostic>,
    /// Problems with `--set`.
    pub cli: Vec<String>,
}

fn block_at(doc: &Document, i: usize) -> Option<&Block> {
    doc.blocks().nth(i).and_then(|b| b.block.as_ref())
}

/// Resolve and validate `doc` without simulating.
pub fn check<'d>(doc: &'d Document, overrides: &[(String, String)]) -> CheckOutcome<'d> {
    let (scope, mut diags, cli) = scope::resolve(doc, overrides);
    let values = build::eval_params(&scope, &[], None, &mut diags);
    let mut c = Checked {
        doc,
        scope,
        values,
        steps: vec![],
        atoms: HashMap::new(),
        lights: HashMap::new(),
        sequences: HashMap::new(),
        evolves: HashMap::new(),
    };
    let mut metas: HashMap<String, Meta> = HashMap::new();
    let mut last_atom: Option<String> = None;
    let blocks: Vec<_> = doc.blocks().collect();
    for (order, cell) in blocks.iter().enumerate() {
        let Some(block) = &cell.block else {
            // A broken atom is still the atom that lights below it refer to (its errors are
            // reported already), so they do not add "no atom above" to them.
            if cell.raw.kind == "atom"
                && let Some((n, _)) = &cell.raw.name
            {
                last_atom = Some(n.clone());
            }
            continue;
        };
        let name = cell
            .raw
            .name
            .as_ref()
            .map(|(n, _)| n.clone())
            .unwrap_or_default();
        let span = cell.raw.span.clone();
        match block {
            Block::Params(_) => {}
            Block::Atom(a) => {
                for ex in atom_exprs(a) {
                    c.scope.check_refs(ex, order, &mut diags);
                }
                let mut b = build::Builder {
                    values: &c.values,
                    diags: &mut diags,
                    warn: true,
                };
                b.atom(&name, a, &span, &[]);
                c.atoms.insert(name.clone(), (a, span));
                last_atom = Some(name);
            }
            Block::Light(l) => {
                let atom = match &l.atom {
                    Some(a) => match c.scope.block(&a.name, &a.span, "atom", order) {
                        Ok(_) => Some(a.name.clone()),
                        Err(d) => {
                            diags.push(d);
                            None
                        }
                    },
                    None => {
                        if last_atom.is_none() {
                            diags.push(Diagnostic::error(cell.raw.kind_span.clone(), "no `atom` block above this light").with_hint("define the atom first; a block sees only names defined above it"));
                        }
                        last_atom.clone()
                    }
                };
                let refs_ok = light_exprs(l)
                    .iter()
                    .all(|ex| c.scope.check_refs(ex, order, &mut diags));
                if let (Some(atom), true) = (atom, refs_ok) {
                    if let Some((ab, aspan)) = c.atoms.get(&atom) {
                        let mut b = build::Builder {
                            values: &c.values,
                            diags: &mut diags,
                            warn: true,
                        };
                        if let Some(built) = b.atom(&atom, ab, aspan, &[l]) {
                            b.field(&name, l, &built, &atom);
                        }
                    }
                    c.lights.insert(name, (l, atom));
                }
            }
            Block::Sequence(s) => {
                let mut ok = true;
                let mut atom: Option<(String, &Span)> = None;
                for step in &s.steps {
                    let exs: Vec<&Ex> = match step {
                        StepDef::Wait { duration } => vec![duration],
                        StepDef::Pulse {
                            light,
                            duration,
                            area,
                            scale,
                            phase,
                            at,
                            shape,
                            ..
                        } => {
                            match c.scope.block(&light.name, &light.span, "light", order) {
                                Err(d) => {
                                    diags.push(d);
                                    ok = false;
                                }
                                Ok(_) => {
                                    if let Some((_, a)) = c.lights.get(&light.name) {
                                        match &atom {
                                            Some((first, _)) if first != a => {
                                                diags.push(Diagnostic::error(light.span.clone(), format!("the light `{}` drives the atom `{a}`, but earlier pulses of this sequence drive `{first}`", light.name)));
                                                ok = false;
                                            }
                                            Some(_) => {}
                                            None => atom = Some((a.clone(), &light.span)),
                                        }
                                    }
                                }
                            }
                            let mut v: Vec<&Ex> = [duration, area, scale, phase, at]
                                .into_iter()
                                .flatten()
                                .collect();
                            v.extend(shape_exprs(shape));
                            v
                        }
                    };
                    for ex in exs {
                        ok &= c.scope.check_refs(ex, order, &mut diags);
                    }
                }
                if ok {
                    let lights = sequence_lights(s);
                    let index: HashMap<String, usize> = lights
                        .iter()
                        .enumerate()
                        .map(|(i, n)| (n.clone(), i))
                        .collect();
                    let mut b = build::Builder {
                        values: &c.values,
                        diags: &mut diags,
                        warn: true,
                    };
                    b.sequence(s, &index);
                    c.sequences.insert(name, s);
                }
            }
            Block::Evolve(e) => {
                if let Some(plan) = check_evolve(
                    &mut c,
                    &name,
                    e,
                    order,
                    &span,
                    last_atom.as_deref(),
                    &mut diags,
                ) {
                    metas.insert(
                        name.clone(),
                        Meta {
                            order,
                            observed: e.observe.iter().map(|(o, _, _)| o.clone()).collect(),
                            axes: plan.axes.iter().map(|(n, _, d)| (n.clone(), *d)).collect(),
                            grid: plan
                                .axes
                                .iter()
                                .map(|(n, v, _)| (n.clone(), v.clone()))
                                .collect(),
                            traced: e.samples.is_some(),
                        },
                    );
                    c.evolves.insert(name, e);
                    c.steps.push(Step::Evolve(Box::new(plan)));
                }
            }
            Block::Plot(p) => {
                let mut ok = true;
                for path in std::iter::once(&p.x).chain(&p.y).chain(&p.z) {
                    ok &= check_path(path, &metas, order, &c, &mut diags).is_some();
                }
                if ok {
                    c.steps.push(Step::Plot(order));
                }
            }
            Block::Table(t) => {
                let ok = t
                    .columns
                    .iter()
                    .all(|p| check_path(p, &metas, order, &c, &mut diags).is_some());
                if ok {
                    c.steps.push(Step::Table(order));
                }
            }
            Block::Check(k) => {
                if check_checks(k, &metas, order, &c, &mut diags) {
                    c.steps.push(Step::Check(order));
                }
            }
        }
    }
    let end = blocks.len();
    for iv in &doc.inline {
        match crate::notebook::path::parse_path(&iv.path) {
            Ok(p) => {
                let pr = PathRef {
                    path: p,
                    text: iv.path.clone(),
                    span: iv.span.clone(),
                    content: Some(iv.start),
                };
                check_path(&pr, &metas, end, &c, &mut diags);
            }
            Err(e) => diags.push(
                Diagnostic::error(iv.start + e.span.start..iv.start + e.span.end, e.message)
                    .with_hint_opt(e.hint),
            ),
        }
    }
    let failed = diags.iter().any(Diagnostic::is_error)
        || !cli.is_empty()
        || blocks
            .iter()
            .any(|b| b.block.is_none() && crate::notebook::schema::kind(&b.raw.kind).is_some());
    diags.sort_by_key(|d| d.span.start);
    // A block built twice (on its own and inside an evolve) reports a problem once.
    diags.dedup_by(|a, b| a.span == b.span && a.message == b.message);
    CheckOutcome {
        checked: (!failed).then_some(c),
        diags,
        cli,
    }
}

fn atom_exprs(a: &AtomBlock) -> Vec<&Ex> {
    let mut v: Vec<&Ex> = a.levels.iter().map(|l| &l.energy).collect();
    v.extend(a.transitions.iter().filter_map(|t| t.dipole.as_ref()));
    v.extend(a.decays.iter().map(|d| &d.rate));
    v.extend(a.dephasing.iter().map(|d| &d.rate));
    if let Some(z) = &a.zeeman {
        v.extend(&z.magnetic_field);
        if let LineSource::Manifolds {
            lower,
            upper,
            frequency,
            width,
            ..
        } = &z.source
        {
            v.extend([frequency, width]);
            for m in [lower, upper] {
                v.extend(m.a.iter().chain(&m.b));
            }
        }
    }
    v
}

fn light_exprs(l: &LightBlock) -> Vec<&Ex> {
    let mut v: Vec<&Ex> = [&l.detuning, &l.frequency, &l.phase, &l.linewidth]
        .into_iter()
        .flatten()
        .collect();
    v.push(&l.strength.1);
    match &l.polarization {
        PolarizationDef::Angle(e) => v.push(e),
        PolarizationDef::Vector {
            ellipticity: Some(e),
            ..
        } => v.push(e),
        _ => {}
    }
    match &l.chirp {
        Some(crate::notebook::blocks::ChirpDef::Rate(e))
        | Some(crate::notebook::blocks::ChirpDef::Formula(e)) => v.push(e),
        None => {}
    }
    v
}

fn shape_exprs(s: &crate::notebook::blocks::ShapeDef) -> Vec<&Ex> {
    use crate::notebook::blocks::ShapeDef as S;
    match s {
        S::Gaussian(e) | S::Sech(e) | S::Formula(e) | S::Tanh { width: e, .. } => vec![e],
        S::Steps { durations, .. } => durations.iter().collect(),
        S::Table { times, .. } => times.iter().collect(),
        _ => vec![],
    }
}

/// The names a plot shows for its x, y… and z paths: those given in the block (`xlabel`,
/// `labels`, `ylabel` of a heat map's vertical axis, `zlabel`), else the paths shortened, with
/// their block named when the curves come from several.
fn plot_names(p: &crate::notebook::blocks::PlotBlock) -> Vec<String> {
    let several = p.y.iter().any(|y| y.path.block != p.y[0].path.block);
    let mut out = vec![
        p.xlabel
            .clone()
            .unwrap_or_else(|| p.x.path.short_name(false)),
    ];
    for (k, y) in p.y.iter().enumerate() {
        let given = if p.z.is_some() {
            p.ylabel.clone()
        } else {
            p.labels.get(k).cloned()
        };
        out.push(given.unwrap_or_else(|| y.path.short_name(several && p.z.is_none())));
    }
    if let Some(z) = &p.z {
        out.push(p.zlabel.clone().unwrap_or_else(|| z.path.short_name(false)));
    }
    out
}

/// Light names in order of first use.
fn sequence_lights(s: &SequenceBlock) -> Vec<String> {
    let mut out: Vec<String> = Vec::new();
    for step in &s.steps {
        if let StepDef::Pulse { light, .. } = step
            && !out.contains(&light.name)
        {
            out.push(light.name.clone());
        }
    }
    out
}

fn param_dim(c: &Checked<'_>, name: &str) -> Option<Dim> {
    c.values.get(name).map(|q| q.dim)
}

fn check_evolve(
    c: &mut Checked<'_>,
    name: &str,
    e: &EvolveBlock,
    order: usize,
    span: &Span,
    last_atom: Option<&str>,
    diags: &mut Vec<Diagnostic>,
) -> Option<EvolvePlan> {
    let block_index = order;
    let atom = match &e.atom {
        Some(a) => {
            if let Err(d) = c.scope.block(&a.name, &a.span, "atom", order) {
                diags.push(d);
                return None;
            }
            a.name.clone()
        }
        None => match last_atom {
            Some(a) => a.to_string(),
            None => {
                diags.push(
                    Diagnostic::error(
                        span.start..span.start + 3,
                        "no `atom` block above this evolve block",
                    )
                    .with_hint("define the atom first"),
                );
                return None;
            }
        },
    };
    let mut sequence = None;
    let lights: Vec<String> = if e.steady {
        match &e.lights {
            Some(ls) => {
                let mut v = vec![];
                for l in ls {
                    match c.scope.block(&l.name, &l.span, "light", order) {
                        Ok(_) => v.push(l.name.clone()),
                        Err(d) => diags.push(d),
                    }
                }
                v
            }
            None => {
                let mut v: Vec<(usize, String)> = c
                    .lights
                    .iter()
                    .filter(|(_, (_, a))| *a == atom)
                    .map(|(n, _)| (c.scope.names[n].order, n.clone()))
                    .collect();
                v.sort();
                v.into_iter().map(|(_, n)| n).collect()
            }
        }
    } else {
        let s = e.sequence.as_ref()?;
        if let Err(d) = c.scope.block(&s.name, &s.span, "sequence", order) {
            diags.push(d);
            return None;
        }
        let Some(seq) = c.sequences.get(&s.name) else {
            check_atom_only(c, e, &atom, span, diags);
            return None;
        };
        sequence = Some(s.name.clone());
        sequence_lights(seq)
    };
    for l in &lights {
        if let Some((_, a)) = c.lights.get(l)
            && *a != atom
        {
            let at = e.sequence.as_ref().map_or(span.clone(), |s| s.span.clone());
            diags.push(
                Diagnostic::error(
                    at,
                    format!(
                        "the light `{l}` drives the atom `{a}`, but this block evolves `{atom}`"
                    ),
                )
                .with_hint("use lights of the same atom, or name it with `atom = ...`"),
            );
            return None;
        }
    }
    if lights.iter().any(|l| !c.lights.contains_key(l)) {
        check_atom_only(c, e, &atom, span, diags);
        return None;
    }
    if let Some(cut) = &e.cutoff {
        c.scope.check_refs(cut, order, diags);
    }
    for v in e.velocity.iter().flat_map(|(v, _)| v) {
        c.scope.check_refs(v, order, diags);
    }
    // The nominal problem: every name, level and expression checked here.
    let before = diags.len();
    let inputs = inputs_for(c, e, span, &atom, &lights, sequence.as_deref())?;
    let built = build::problem(&inputs, &c.values, diags, false);
    if built.is_none() && diags.len() == before {
        diags.push(Diagnostic::error(
            span.start..span.start + 3,
            format!("the scenario of `{name}` could not be built"),
        ));
    }
    let built_ok = built.is_some();
    if e.steady && e.samples.is_some() {
        diags.push(
            Diagnostic::error(
                e.samples
                    .as_ref()
                    .map(|s| s.1.clone())
                    .unwrap_or(span.clone()),
                "a steady state has no time trace",
            )
            .with_hint("drop `samples`"),
        );
        return None;
    }
    let mut axes = Vec::new();
    let mut total: u128 = 1;
    let mut ok = true;
    for ax in &e.sweep {
        let pname = &ax.param.name;
        let Some(pdim) = param_dim(c, pname) else {
            match c.scope.names.get(pname) {
                Some(d) if d.what == "parameter" && d.order >= order => diags.push(
                    Diagnostic::error(
                        ax.param.span.clone(),
                        format!("the parameter `{pname}` is defined below this block"),
                    )
                    .with_hint("a block sees only names defined above it"),
                ),
                _ => {
                    let names = c.scope.params_before(order);
                    let hint =
                        match crate::notebook::diag::did_you_mean(pname, names.iter().copied()) {
                            Some(s) => format!("did you mean `{s}`?"),
                            None => format!(
                                "only parameters can be swept; defined above: {}",
                                crate::notebook::schema::list(&names)
                            ),
                        };
                    diags.push(
                        Diagnostic::error(
                            ax.param.span.clone(),
                            format!("cannot sweep `{pname}`: it is not a parameter"),
                        )
                        .with_hint(hint),
                    );
                }
            }
            ok = false;
            continue;
        };
        let mut b = build::Builder {
            values: &c.values,
            diags,
            warn: false,
        };
        let what = format!("the sweep of `{pname}`");
        let vals = match &ax.values {
            AxisValues::Range {
                from,
                to,
                points: (n, nspan),
                log,
            } => {
                if *n < 1 {
                    b.diags.push(
                        Diagnostic::error(
                            nspan.clone(),
                            format!("a sweep needs at least one point, not {n}"),
                        )
                        .with_hint("e.g. `points = 101`"),
                    );
                    ok = false;
                    continue;
                }
                total = total.saturating_mul(*n as u128);
                if total > MAX_POINTS {
                    b.diags.push(
                        Diagnostic::error(
                            nspan.clone(),
                            format!(
                                "this sweep has {total} points or more; the limit is {MAX_POINTS}"
                            ),
                        )
                        .with_hint("use fewer points, or split the scan into several blocks"),
                    );
                    return None;
                }
                let (Some(a), Some(z)) =
                    (b.quantity(from, pdim, &what), b.quantity(to, pdim, &what))
                else {
                    ok = false;
                    continue;
                };
                let n = *n as usize;
                if *log {
                    if a <= 0.0 || z <= 0.0 {
                        b.diags.push(Diagnostic::error(
                            from.span.start..to.span.end,
                            "a logarithmic sweep needs positive `from` and `to`",
                        ));
                        ok = false;
                        continue;
                    }
                    Axis::logspace(pname.clone(), a, z, n)
                        .map(|x| x.values().to_vec())
                        .unwrap_or_default()
                } else {
                    Axis::linspace(pname.clone(), a, z, n)
                        .map(|x| x.values().to_vec())
                        .unwrap_or_else(|_| vec![a])
                }
            }
            AxisValues::List(list) => {
                total = total.saturating_mul(list.len() as u128);
                let v: Option<Vec<f64>> = list.iter().map(|x| b.quantity(x, pdim, &what)).collect();
                match v {
                    Some(v) => v,
                    None => {
                        ok = false;
                        continue;
                    }
                }
            }
        };
        if axes
            .iter()
            .any(|(n, _, _): &(String, Vec<f64>, Dim)| n == pname)
        {
            diags.push(Diagnostic::error(
                ax.param.span.clone(),
                format!("`{pname}` is swept twice"),
            ));
            ok = false;
            continue;
        }
        axes.push((pname.clone(), vals, pdim));
    }
    if !axes.is_empty() && e.samples.is_some() {
        diags.push(Diagnostic::error(e.samples.as_ref().map(|s| s.1.clone()).unwrap_or(span.clone()), "time traces (`samples`) cannot be combined with a sweep").with_hint("keep final values over the sweep, or trace in a separate evolve block without `sweep`"));
        ok = false;
    }
    let mut average = None;
    if let Some(av) = &e.average {
        let pname = &av.param.name;
        match param_dim(c, pname) {
            None => {
                diags.push(Diagnostic::error(
                    av.param.span.clone(),
                    format!("cannot average over `{pname}`: it is not a parameter defined above"),
                ));
                ok = false;
            }
            Some(pdim) => {
                let (n, nspan) = &av.points;
                if !(1..=10_000).contains(n) {
                    diags.push(Diagnostic::error(
                        nspan.clone(),
                        format!("an average needs between 1 and 10000 points, not {n}"),
                    ));
                    return None;
                }
                total = total.saturating_mul(*n as u128);
                if total > MAX_POINTS {
                    diags.push(
                        Diagnostic::error(
                            nspan.clone(),
                            format!(
                                "sweep × average has {total} points; the limit is {MAX_POINTS}"
                            ),
                        )
                        .with_hint("use fewer points"),
                    );
                    return None;
                }
                let mut b = build::Builder {
                    values: &c.values,
                    diags,
                    warn: false,
                };
                let sigma = match &av.width {
                    WidthDef::Sigma(s) => b.quantity(s, pdim, &format!("the width of `{pname}`")),
                    WidthDef::Doppler {
                        temperature,
                        mass,
                        wavelength,
                    } => {
                        if pdim != Dim::FREQUENCY {
                            b.diags.push(Diagnostic::error(av.param.span.clone(), format!("a Doppler average needs a detuning (an angular frequency), but `{pname}` is {}", pdim.describe())));
                            None
                        } else {
                            let t = b.quantity(temperature, Dim::TEMPERATURE, "the temperature");
                            let m = b.quantity(mass, Dim::MASS, "the mass");
                            let l = b.quantity(wavelength, Dim::LENGTH, "the wavelength");
                            match (t, m, l) {
                                (Some(t), Some(m), Some(l)) if t > 0.0 && m > 0.0 && l > 0.0 => {
                                    Some(fieldbook_runtime::sweep::doppler_sigma(
                                        2.0 * std::f64::consts::PI / l,
                                        t,
                                        m,
                                    ))
                                }
                                (Some(_), Some(_), Some(_)) => {
                                    b.diags.push(Diagnostic::error(
                                        av.param.span.clone(),
                                        "temperature, mass and wavelength must be positive",
                                    ));
                                    None
                                }
                                _ => None,
                            }
                        }
                    }
                };
                let mean = c.values.get(pname).map_or(0.0, |q| q.value);
                if let Some(sigma) = sigma {
                    let ens = match av.monte_carlo {
                        Some(seed) => {
                            Ok(Ensemble::monte_carlo_normal(mean, sigma, *n as usize, seed))
                        }
                        None => Ensemble::gauss_hermite(mean, sigma, *n as usize),
                    };
                    match ens {
                        Ok(ens) => {
                            // Offsets from the centre, so that the average follows a sweep of
                            // the same parameter.
                            let offsets = ens.nodes().iter().map(|x| x - mean).collect();
                            average = Some((pname.clone(), offsets, ens.weights().to_vec()))
                        }
                        Err(err) => {
                            diags.push(Diagnostic::error(
                                av.param.span.clone(),
                                format!("cannot average over `{pname}`: {err}"),
                            ));
                            ok = false;
                        }
                    }
                } else {
                    ok = false;
                }
            }
        }
    }
    if !ok || !built_ok {
        return None;
    }
    let key = super::cache::key(
        c,
        name,
        block_index,
        &atom,
        &lights,
        sequence.as_deref(),
        &axes,
        &average,
    );
    Some(EvolvePlan {
        name: name.to_string(),
        span: span.clone(),
        block: block_index,
        atom,
        lights,
        sequence,
        axes,
        average,
        key,
    })
}

/// When an evolve block's lights or sequence failed (already reported), still check what it asks
/// of the atom alone: its observables and its initial state.
fn check_atom_only(
    c: &Checked<'_>,
    e: &EvolveBlock,
    atom: &str,
    span: &Span,
    diags: &mut Vec<Diagnostic>,
) {
    if let Some((ab, aspan)) = c.atoms.get(atom) {
        let mut b = build::Builder {
            values: &c.values,
            diags,
            warn: false,
        };
        if let Some(built) = b.atom(atom, ab, aspan, &[]) {
            b.observables(&e.observe, &built, atom);
            b.start(&e.start, &built, atom, span);
        }
    }
}

fn inputs_for<'a>(
    c: &'a Checked<'_>,
    e: &'a EvolveBlock,
    span: &Span,
    atom: &'a str,
    lights: &'a [String],
    sequence: Option<&str>,
) -> Option<EvolveInputs<'a>> {
    let (ab, aspan) = c.atoms.get(atom)?;
    let ls: Option<Vec<(&str, &LightBlock)>> = lights
        .iter()
        .map(|l| c.lights.get(l).map(|(lb, _)| (l.as_str(), *lb)))
        .collect();
    let seq = match sequence {
        Some(s) => Some(*c.sequences.get(s)?),
        None => None,
    };
    Some(EvolveInputs {
        evolve: e,
        span: span.clone(),
        atom: (atom, ab, aspan.clone()),
        lights: ls?,
        sequence: seq,
    })
}

/// The dimension a path will have, or a diagnostic; checks block, observable, axes and `at`.
fn check_path(
    p: &PathRef,
    metas: &HashMap<String, Meta>,
    order: usize,
    c: &Checked<'_>,
    diags: &mut Vec<Diagnostic>,
) -> Option<(Dim, usize)> {
    let path = &p.path;
    let Some(meta) = metas.get(&path.block).filter(|m| m.order < order) else {
        let d = match c.scope.names.get(&path.block) {
            Some(d) if d.what == "evolve" && d.order >= order => Diagnostic::error(
                p.at(&path.block_span),
                format!("`{}` is defined below this block", path.block),
            )
            .with_hint("a block sees only names defined above it"),
            Some(d) if d.what == "evolve" => return None,
            Some(d) => Diagnostic::error(
                p.at(&path.block_span),
                format!(
                    "`{}` is a {} block; results come from `evolve` blocks",
                    path.block, d.what
                ),
            ),
            None => {
                let names: Vec<&str> = metas
                    .iter()
                    .filter(|(_, m)| m.order < order)
                    .map(|(n, _)| n.as_str())
                    .collect();
                let hint = crate::notebook::diag::did_you_mean(&path.block, names.iter().copied())
                    .map_or_else(
                        || {
                            format!(
                                "evolve blocks above: {}",
                                crate::notebook::schema::list(&names)
                            )
                        },
                        |s| format!("did you mean `{s}`?"),
                    );
                Diagnostic::error(
                    p.at(&path.block_span),
                    format!("no evolve block named `{}`", path.block),
                )
                .with_hint(hint)
            }
        };
        diags.push(d);
        return None;
    };
    let mut axes: Vec<(String, Dim)> = meta.axes.clone();
    let dim = match &path.target {
        Target::Final(o, _) | Target::Trace(o, _) => {
            if !meta.observed.contains(o) {
                diags.push(
                    Diagnostic::error(
                        // Past `final.` or `trace.`: the observable itself.
                        p.at(&(path.target_span.start + 6..path.target_span.end)),
                        format!("`{}` is not observed by `{}`", o.canonical(), path.block),
                    )
                    .with_hint(format!("add \"{}\" to its `observe` list", o.canonical())),
                );
                return None;
            }
            if matches!(path.target, Target::Trace(..)) {
                if !meta.traced {
                    diags.push(Diagnostic::error(p.at(&path.target_span), format!("`{}` records no time trace", path.block)).with_hint("set `samples = N` in the evolve block (without a sweep), or use `final`"));
                    return None;
                }
                axes = vec![("time".into(), Dim::TIME)];
            }
            results::obs_dim(o)
        }
        Target::Time => {
            if !meta.traced {
                diags.push(
                    Diagnostic::error(
                        p.at(&path.target_span),
                        format!("`{}` records no time trace", path.block),
                    )
                    .with_hint("set `samples = N` in the evolve block"),
                );
                return None;
            }
            axes = vec![("time".into(), Dim::TIME)];
            Dim::TIME
        }
        Target::Axis(a) => match meta.axes.iter().find(|(n, _)| n == a) {
            Some((_, d)) => {
                axes = vec![(a.clone(), *d)];
                *d
            }
            None => {
                let names: Vec<&str> = meta.axes.iter().map(|(n, _)| n.as_str()).collect();
                diags.push(
                    Diagnostic::error(
                        p.at(&path.target_span),
                        format!("`{}` has no sweep axis `{a}`", path.block),
                    )
                    .with_hint(if names.is_empty() {
                        "it sweeps nothing".to_string()
                    } else {
                        format!("its axes are {}", crate::notebook::schema::list(&names))
                    }),
                );
                return None;
            }
        },
    };
    for (name, nspan, text, vspan) in &path.at {
        let Some(i) = axes.iter().position(|(n, _)| n == name) else {
            diags.push(
                Diagnostic::error(
                    p.at(nspan),
                    format!("`{name}` is not an axis of this result"),
                )
                .with_hint(format!(
                    "axes: {}",
                    axes.iter()
                        .map(|(n, _)| n.as_str())
                        .collect::<Vec<_>>()
                        .join(", ")
                )),
            );
            return None;
        };
        let adim = axes[i].1;
        match expr::parse(text).and_then(|e| e.eval(&c.values)) {
            Ok(q) if q.dim == adim => {
                if let Some(vals) = meta.grid.get(name)
                    && let Err(hint) = results::grid_index(vals, q.value, adim)
                {
                    diags.push(
                        Diagnostic::error(
                            p.at(vspan),
                            format!(
                                "{} is not a point of the `{name}` axis",
                                expr::format_quantity(q.value, adim)
                            ),
                        )
                        .with_hint(hint),
                    );
                    return None;
                }
            }
            Ok(q) => {
                diags.push(Diagnostic::error(
                    p.at(vspan),
                    format!(
                        "`{text}` is {}, but `{name}` is {}",
                        q.dim.describe(),
                        adim.describe()
                    ),
                ));
                return None;
            }
            Err(e) => {
                diags.push(
                    Diagnostic::error(
                        p.at(&(vspan.start + e.span.start..vspan.start + e.span.end)),
                        e.message,
                    )
                    .with_hint_opt(e.hint),
                );
                return None;
            }
        }
        axes.remove(i);
    }
    let (dim, rank) = match path.reduce {
        None => (dim, axes.len()),
        Some(r) => {
            if axes.len() != 1 {
                diags.push(
                    Diagnostic::error(
                        p.span.clone(),
                        "`max`, `min`, `argmax` and `argmin` need a one-dimensional series",
                    )
                    .with_hint("select the other axes with `at AXIS = VALUE`"),
                );
                return None;
            }
            match r {
                Reduce::ArgMax | Reduce::ArgMin => (axes[0].1, 0),
                _ => (dim, 0),
            }
        }
    };
    Some((dim, rank))
}

fn check_checks(
    k: &CheckBlock,
    metas: &HashMap<String, Meta>,
    order: usize,
    c: &Checked<'_>,
    diags: &mut Vec<Diagnostic>,
) -> bool {
    let mut ok = true;
    for item in &k.items {
        let Some((dim, rank)) = check_path(&item.path, metas, order, c, diags) else {
            ok = false;
            continue;
        };
        if rank != 0 {
            diags.push(Diagnostic::error(item.path.span.clone(), format!("`{}` is not a single number (it has {rank} axis/axes)", item.path.text)).with_hint("select a point with `at AXIS = VALUE`, or reduce with `max(...)`, `argmax(...)`"));
            ok = false;
            continue;
        }
        let exs: Vec<&Ex> = match &item.condition {
            Condition::Near(v, Tol::Abs(t)) => vec![v, t],
            Condition::Near(v, Tol::Rel(_)) => vec![v],
            Condition::Below(v) | Condition::Above(v) => vec![v],
            Condition::Between(a, b) => vec![a, b],
        };
        for ex in exs {
            if !c.scope.check_refs(ex, order, diags) {
                ok = false;
                continue;
            }
            let mut b = build::Builder {
                values: &c.values,
                diags,
                warn: false,
            };
            ok &= b
                .quantity(
                    ex,
                    dim,
                    &format!("the expected value of `{}`", item.path.text),
                )
                .is_some();
        }
    }
    ok
}

/// What one check found.
#[derive(Clone, Debug, PartialEq)]
pub struct CheckResult {
    /// The path checked.
    pub path: String,
    /// Where.
    pub span: Span,
    /// The value found (SI) and its dimension.
    pub got: f64,
    /// Dimension of `got`.
    pub dim: Dim,
    /// The condition, in words with values.
    pub expected: String,
    /// Whether it held.
    pub passed: bool,
}

/// The output of one cell.
#[derive(Clone, Debug)]
pub enum Output {
    /// An evolve block's results, and whether they came from the cache.
    Evolve {
        /// Block name.
        name: String,
        /// Results.
        result: EvolveResult,
        /// From the cache.
        cached: bool,
        /// Wall time (s).
        seconds: f64,
    },
    /// Curves of a plot (title, x path, series).
    Plot {
        /// Title or a generated one.
        title: String,
        /// Series: label and value; the first is the x axis (for a heat map: x, y, z).
        series: Vec<(String, PathValue)>,
        /// The series' names for a reader, one per series: given in the block or shortened
        /// from the paths.
        titles: Vec<String>,
        /// The vertical axis's name: given, or the one quantity all curves show.
        y_title: Option<String>,
        /// Logarithmic x axis.
        log_x: bool,
        /// Logarithmic y axis.
        log_y: bool,
        /// A heat map (`z` given) rather than curves.
        map: bool,
    },
    /// Table columns.
    Table {
        /// Title.
        title: Option<String>,
        /// Columns: label and value.
        columns: Vec<(String, PathValue)>,
    },
    /// Check results.
    Checks(Vec<CheckResult>),
}

/// A failure while running (the runtime refused or failed).
#[derive(Clone, Debug)]
pub struct RunError {
    /// The block that failed.
    pub span: Span,
    /// What happened.
    pub message: String,
}

/// Everything a run produced.
#[derive(Clone, Debug, Default)]
pub struct RunOutcome {
    /// Cell outputs in order, each with the index of its block among the document's blocks.
    pub outputs: Vec<(usize, Output)>,
    /// Inline values: their path text, span and value.
    pub inline: Vec<(String, Span, Result<PathValue, String>)>,
    /// Runtime failures.
    pub errors: Vec<RunError>,
}

impl RunOutcome {
    /// Number of checks that failed.
    pub fn failed_checks(&self) -> usize {
        self.outputs
            .iter()
            .map(|(_, o)| match o {
                Output::Checks(c) => c.iter().filter(|r| !r.passed).count(),
                _ => 0,
            })
            .sum()
    }
}

/// A progress callback: (block name, points done, points in all).
pub type ProgressFn<'a> = dyn Fn(&str, usize, usize) + Sync + 'a;

/// Options of a run.
#[derive(Default)]
pub struct RunOptions<'a> {
    /// Where evolve results are cached, if anywhere.
    pub cache: Option<&'a Cache>,
    /// Called with (block name, done, total) during sweeps.
    pub progress: Option<&'a ProgressFn<'a>>,
}

/// Run a checked file.
pub fn run(c: &Checked<'_>, opts: &RunOptions<'_>) -> RunOutcome {
    let mut out = RunOutcome::default();
    let mut results: HashMap<String, EvolveResult> = HashMap::new();
    let mut failed: HashSet<String> = HashSet::new();
    for step in &c.steps {
        match step {
            Step::Evolve(plan) => {
                let t0 = std::time::Instant::now();
                if let Some(r) = opts.cache.and_then(|k| k.load(&plan.key)) {
                    results.insert(plan.name.clone(), r.clone());
                    out.outputs.push((
                        plan.block,
                        Output::Evolve {
                            name: plan.name.clone(),
                            result: r,
                            cached: true,
                            seconds: t0.elapsed().as_secs_f64(),
                        },
                    ));
                    continue;
                }
                match execute(c, plan, opts) {
                    Ok(r) => {
                        if let Some(k) = opts.cache {
                            k.store(&plan.key, &r);
                        }
                        results.insert(plan.name.clone(), r.clone());
                        out.outputs.push((
                            plan.block,
                            Output::Evolve {
                                name: plan.name.clone(),
                                result: r,
                                cached: false,
                                seconds: t0.elapsed().as_secs_f64(),
                            },
                        ));
                    }
                    Err(message) => {
                        failed.insert(plan.name.clone());
                        out.errors.push(RunError {
                            span: plan.span.clone(),
                            message,
                        });
                    }
                }
            }
            Step::Plot(i) => {
                let Some(Block::Plot(p)) = block_at(c.doc, *i) else {
                    continue;
                };
                let names = plot_names(p);
                let mut series = Vec::new();
                let mut titles = Vec::new();
                for (path, name) in std::iter::once(&p.x).chain(&p.y).chain(&p.z).zip(names) {
                    if failed.contains(&path.path.block) {
                        continue;
                    }
                    if let Ok(v) = results::eval(&path.path, &results, &c.values) {
                        series.push((path.text.clone(), v));
                        titles.push(name);
                    }
                }
                let quantity = p.y.first().map(|y| y.path.quantity());
                let y_title = match (&p.ylabel, &p.z) {
                    (Some(l), _) => Some(l.clone()),
                    (None, None) => {
                        quantity.filter(|q| p.y.iter().all(|y| y.path.quantity() == *q))
                    }
                    (None, Some(_)) => None,
                };
                let title = p.title.clone().unwrap_or_else(|| {
                    format!(
                        "{} vs {}",
                        p.y.iter()
                            .map(|y| y.text.as_str())
                            .collect::<Vec<_>>()
                            .join(", "),
                        p.x.text
                    )
                });
                out.outputs.push((
                    *i,
                    Output::Plot {
                        title,
                        series,
                        titles,
                        y_title,
                        log_x: p.log_x,
                        log_y: p.log_y,
                        map: p.z.is_some(),
                    },
                ));
            }
            Step::Table(i) => {
                let Some(Block::Table(t)) = block_at(c.doc, *i) else {
                    continue;
                };
                let columns = t
                    .columns
                    .iter()
                    .filter(|p| !failed.contains(&p.path.block))
                    .filter_map(|p| {
                        results::eval(&p.path, &results, &c.values)
                            .ok()
                            .map(|v| (p.text.clone(), v))
                    })
                    .collect();
                out.outputs.push((
                    *i,
                    Output::Table {
                        title: t.title.clone(),
                        columns,
                    },
                ));
            }
            Step::Check(i) => {
                let Some(Block::Check(k)) = block_at(c.doc, *i) else {
                    continue;
                };
                let mut rs = Vec::new();
                for item in &k.items {
                    if failed.contains(&item.path.path.block) {
                        continue;
                    }
                    match results::eval(&item.path.path, &results, &c.values) {
                        Ok(PathValue::Scalar(got, dim)) => {
                            rs.push(evaluate_check(c, item, got, dim))
                        }
                        Ok(_) => {}
                        Err((span, message, _)) => out.errors.push(RunError {
                            span: item.path.at(&span),
                            message,
                        }),
                    }
                }
                out.outputs.push((*i, Output::Checks(rs)));
            }
        }
    }
    for iv in &c.doc.inline {
        let v = crate::notebook::path::parse_path(&iv.path)
            .map_err(|e| e.message)
            .and_then(|p| results::eval(&p, &results, &c.values).map_err(|e| e.1));
        out.inline.push((iv.path.clone(), iv.span.clone(), v));
    }
    out
}

fn evaluate_check(
    c: &Checked<'_>,
    item: &crate::notebook::blocks::CheckItem,
    got: f64,
    dim: Dim,
) -> CheckResult {
    let val = |ex: &Ex| ex.expr.eval(&c.values).map(|q| q.value).unwrap_or(f64::NAN);
    let f = |x: f64| expr::format_quantity(x, dim);
    let (passed, expected) = match &item.condition {
        Condition::Near(v, tol) => {
            let v = val(v);
            let t = match tol {
                Tol::Abs(t) => val(t),
                Tol::Rel(r) => r * v.abs(),
            };
            ((got - v).abs() <= t, format!("{} ± {}", f(v), f(t)))
        }
        Condition::Below(b) => (got <= val(b), format!("≤ {}", f(val(b)))),
        Condition::Above(a) => (got >= val(a), format!("≥ {}", f(val(a)))),
        Condition::Between(a, b) => (
            got >= val(a) && got <= val(b),
            format!("between {} and {}", f(val(a)), f(val(b))),
        ),
    };
    CheckResult {
        path: item.path.text.clone(),
        span: item.path.span.clone(),
        got,
        dim,
        expected,
        passed: passed && got.is_finite(),
    }
}

/// Values at one sweep point (grid coordinates plus an average node).
fn point_values(
    c: &Checked<'_>,
    plan: &EvolvePlan,
    coords: &[f64],
    node: Option<f64>,
) -> Result<Values, String> {
    let fixed: Vec<(String, f64)> = plan
        .axes
        .iter()
        .zip(coords)
        .map(|((n, _, _), v)| (n.clone(), *v))
        .collect();
    let shift = match (&plan.average, node) {
        (Some((n, _, _)), Some(x)) => Some((n.as_str(), x)),
        _ => None,
    };
    let mut diags = Vec::new();
    let v = build::eval_params(&c.scope, &fixed, shift, &mut diags);
    match diags.first() {
        Some(d) => Err(d.message.clone()),
        None => Ok(v),
    }
}

/// What a sweep keeps of each point: final values and two accuracy figures, so that a sweep of
/// a million points stays small.
struct PointOut {
    values: Vec<f64>,
    steps: u64,
    drift: f64,
}

/// What is kept of one representative solve: how it was computed and its time trace.
struct SolveInfo {
    method: String,
    reason: String,
    frame: Vec<String>,
    trace: Option<(Vec<f64>, Vec<Vec<f64>>)>,
}

fn solve_at(
    c: &Checked<'_>,
    plan: &EvolvePlan,
    values: &Values,
    keep: bool,
) -> Result<(PointOut, Option<SolveInfo>), String> {
    let e = c
        .evolves
        .get(&plan.name)
        .ok_or("internal: evolve block missing")?;
    let inputs = inputs_for(
        c,
        e,
        &plan.span,
        &plan.atom,
        &plan.lights,
        plan.sequence.as_deref(),
    )
    .ok_or("internal: inputs missing")?;
    let mut diags = Vec::new();
    let built = build::problem(&inputs, values, &mut diags, false);
    let Some(built) = built else {
        return Err(diags
            .first()
            .map_or("the scenario could not be built".into(), |d| {
                d.message.clone()
            }));
    };
    match built {
        Built::Evolve(p) => {
            let sol = solve(&p).map_err(|e| e.to_string())?;
            let info = keep.then(|| SolveInfo {
                method: sol.diagnostics.method.clone(),
                reason: sol.diagnostics.reason.clone(),
                frame: frame_lines(&sol.frame),
                trace: Some((
                    sol.times.clone(),
                    sol.series.iter().map(|s| s.values.clone()).collect(),
                )),
            });
            let point = PointOut {
                values: sol.final_values(),
                steps: sol.diagnostics.steps,
                drift: sol.diagnostics.norm_drift,
            };
            Ok((point, info))
        }
        Built::Steady(p) => {
            let sol = steady_state(&p).map_err(|e| e.to_string())?;
            let tr: f64 = (0..sol.state.n()).map(|i| sol.state.rho(i, i).re).sum();
            let info = keep.then(|| SolveInfo {
                method: "steady-state".into(),
                reason: "steady = true: linear solve of L ρ = 0 with Tr ρ = 1".into(),
                frame: frame_lines(&sol.frame),
                trace: None,
            });
            let point = PointOut {
                values: sol.values,
                steps: 1,
                drift: (tr - 1.0).abs(),
            };
            Ok((point, info))
        }
    }
}

/// The frame report in words: every term that is not static, one line each, except that a
/// field's terms of one fate are summed up in one line when there are more than
/// [`FRAME_LINES_PER_FATE`] of them (a Zeeman atom has dozens).
fn frame_lines(r: &FrameReport) -> Vec<String> {
    let mut out = Vec::new();
    let mut fields: Vec<&str> = Vec::new();
    for n in &r.notes {
        if !fields.contains(&n.field.as_str()) {
            fields.push(&n.field);
        }
    }
    let freq = |w: f64| expr::format_quantity(w, Dim::FREQUENCY);
    for field in fields {
        for (fate, words) in [
            (Fate::TimeDependent, "kept, rotating"),
            (Fate::BeyondCutoff, "dropped (beyond the cutoff)"),
            (Fate::CounterRotating, "dropped (counter-rotating)"),
        ] {
            let notes: Vec<&TermNote> = r
                .notes
                .iter()
                .filter(|n| n.field == field && n.fate == fate)
                .collect();
            if notes.len() <= FRAME_LINES_PER_FATE {
                out.extend(notes.iter().map(|n| {
                    format!(
                        "{field} on {}: {words}, ν = {}",
                        n.transition,
                        freq(n.rotation)
                    )
                }));
            } else {
                let (lo, hi) = notes.iter().fold((f64::INFINITY, 0.0f64), |(lo, hi), n| {
                    (lo.min(n.rotation.abs()), hi.max(n.rotation.abs()))
                });
                out.push(format!(
                    "{field}: {} terms {words}, |ν| from {} to {}",
                    notes.len(),
                    freq(lo),
                    freq(hi)
                ));
            }
        }
    }
    out
}

/// How many terms of one field and fate the frame report lists one by one.
const FRAME_LINES_PER_FATE: usize = 4;

/// Run one evolve block: a single solve, or a parallel sweep, each point optionally averaged.
fn execute(
    c: &Checked<'_>,
    plan: &EvolvePlan,
    opts: &RunOptions<'_>,
) -> Result<EvolveResult, String> {
    let e = c
        .evolves
        .get(&plan.name)
        .ok_or("internal: evolve block missing")?;
    // `keep`: also return how the point was solved (and its trace, without an average).
    let at_point = |coords: &[f64], keep: bool| -> Result<(PointOut, Option<SolveInfo>), String> {
        match &plan.average {
            None => solve_at(c, plan, &point_values(c, plan, coords, None)?, keep),
            Some((_, nodes, weights)) => {
                let mut acc: Option<PointOut> = None;
                let mut info = None;
                for (k, (x, w)) in nodes.iter().zip(weights).enumerate() {
                    let (r, i) = solve_at(
                        c,
                        plan,
                        &point_values(c, plan, coords, Some(*x))?,
                        keep && k == 0,
                    )?;
                    if let Some(mut i) = i {
                        i.trace = None;
                        info = Some(i);
                    }
                    match &mut acc {
                        None => {
                            acc = Some(PointOut {
                                values: r.values.iter().map(|v| v * w).collect(),
                                ..r
                            })
                        }
                        Some(a) => {
                            for (s, v) in a.values.iter_mut().zip(&r.values) {
                                *s += w * v;
                            }
                            a.steps += r.steps;
                            a.drift = a.drift.max(r.drift);
                        }
                    }
                }
                acc.map(|a| (a, info))
                    .ok_or_else(|| "an empty average".to_string())
            }
        }
    };
    let widths: Vec<usize> = e
        .observe
        .iter()
        .map(|(o, _, _)| match o {
            ObsSpec::Coherence(..) => 2,
            ObsSpec::Bloch(..) => 3,
            _ => 1,
        })
        .collect();
    let (points, info): (Vec<PointOut>, Option<SolveInfo>) = if plan.axes.is_empty() {
        let (p, info) = at_point(&[], true)?;
        (vec![p], info)
    } else {
        let axes: Result<Vec<Axis>, _> = plan
            .axes
            .iter()
            .map(|(n, v, _)| Axis::new(n.clone(), v.clone()))
            .collect();
        let grid = Grid::new(axes.map_err(|e| e.to_string())?).map_err(|e| e.to_string())?;
        let done = AtomicUsize::new(0);
        let report = |d: usize, t: usize| {
            done.store(d, Ordering::Relaxed);
            if let Some(p) = opts.progress {
                p(&plan.name, d, t);
            }
        };
        let sopts = SweepOptions {
            threads: None,
            progress: Some(&report),
            cancel: None,
        };
        // The first point, solved once more on its own, tells how the sweep was solved.
        let first: Vec<f64> = plan.axes.iter().map(|(_, v, _)| v[0]).collect();
        let (_, mut info) = at_point(&first, true)?;
        if let Some(i) = &mut info {
            i.trace = None;
        }
        let points = run_grid(&grid, &sopts, |coords| at_point(coords, false).map(|r| r.0))
            .map_err(|err| match err {
                SweepError::Point { coords, error, .. } => {
                    let at: Vec<String> = plan
                        .axes
                        .iter()
                        .zip(&coords)
                        .map(|((n, _, d), v)| format!("{n} = {}", expr::format_quantity(*v, *d)))
                        .collect();
                    format!("at {}: {error}", at.join(", "))
                }
                other => other.to_string(),
            })?;
        (points, info)
    };
    let info = info.ok_or("internal: no solve information")?;
    let trace = info.trace.as_ref().filter(|_| e.samples.is_some());
    let mut observables = Vec::new();
    let mut offset = 0;
    for ((o, _, _), w) in e.observe.iter().zip(&widths) {
        let finals: Vec<f64> = points
            .iter()
            .flat_map(|p| p.values[offset..offset + w].to_vec())
            .collect();
        let trace = trace.map(|(_, s)| s[observables.len()].clone());
        observables.push(ObsResult {
            label: o.canonical(),
            width: *w,
            dim: results::obs_dim(o).0,
            finals,
            trace,
        });
        offset += w;
    }
    let (rtol, atol) = (e.rtol.unwrap_or(1e-8), e.atol.unwrap_or(1e-10));
    Ok(EvolveResult {
        axes: plan
            .axes
            .iter()
            .map(|(n, v, d)| AxisResult {
                name: n.clone(),
                dim: d.0,
                values: v.clone(),
            })
            .collect(),
        times: trace.map(|(t, _)| t.clone()),
        observables,
        solver: SolverInfo {
            method: info.method.clone(),
            reason: info.reason.clone(),
            rtol,
            atol,
            steps: points.iter().map(|p| p.steps).sum(),
            norm_drift: points.iter().map(|p| p.drift).fold(0.0, f64::max),
            frame: info.frame.clone(),
        },
        steady: e.steady,
    })
}
