//! Names and scoping: every block name and parameter is defined once, a block sees only what is
//! defined above it, parameters are ordered by their dependencies (cycles refused), and `--set`
//! overrides replace a parameter's definition.

use std::collections::{BTreeMap, HashMap};

use crate::notebook::Document;
use crate::notebook::blocks::{Block, Ex};
use crate::notebook::diag::{Diagnostic, did_you_mean};
use crate::notebook::expr;
use crate::notebook::schema::list;
use crate::notebook::source::Span;

/// A parameter ready for evaluation.
#[derive(Clone, Debug)]
pub struct Param {
    /// Its name.
    pub name: String,
    /// The span of its name in the run-file.
    pub span: Span,
    /// Its definition (the override's, when overridden).
    pub ex: Ex,
    /// The `--set` text, when overridden.
    pub overridden: Option<String>,
    /// Parameters it refers to.
    pub deps: Vec<String>,
    /// Position of the defining block among the scenario blocks.
    pub order: usize,
}

/// What a name is bound to.
#[derive(Clone, Debug)]
pub struct Def {
    /// `parameter` or the block kind.
    pub what: &'static str,
    /// Where it is defined.
    pub span: Span,
    /// Position of the defining block among the scenario blocks.
    pub order: usize,
}

/// The names of a run-file and its parameters in evaluation order.
#[derive(Clone, Debug, Default)]
pub struct Scope {
    /// Parameters, each after everything it depends on.
    pub params: Vec<Param>,
    /// Every defined name.
    pub names: HashMap<String, Def>,
}

impl Scope {
    /// Parameter names defined before block `order` (or within it), sorted.
    pub fn params_before(&self, order: usize) -> Vec<&str> {
        let mut v: Vec<&str> = self
            .params
            .iter()
            .filter(|p| p.order <= order)
            .map(|p| p.name.as_str())
            .collect();
        v.sort_unstable();
        v
    }

    /// The definition of block `name` of kind `kind` visible from block `order`, or a
    /// diagnostic saying why not.
    pub fn block(
        &self,
        name: &str,
        span: &Span,
        kind: &'static str,
        order: usize,
    ) -> Result<&Def, Diagnostic> {
        match self.names.get(name) {
            Some(d) if d.what == kind && d.order < order => Ok(d),
            Some(d) if d.what == kind => Err(Diagnostic::error(span.clone(), format!("the {kind} `{name}` is defined below this block"))
                .with_hint("a block sees only names defined above it; move this block down or the definition up")),
            Some(d) => Err(Diagnostic::error(span.clone(), format!("`{name}` is a {}, not a `{kind}` block", d.what))),
            None => {
                let cands: Vec<&str> = self.names.iter().filter(|(_, d)| d.what == kind && d.order < order).map(|(n, _)| n.as_str()).collect();
                let hint = match did_you_mean(name, cands.iter().copied()) {
                    Some(c) => format!("did you mean `{c}`?"),
                    None if cands.is_empty() => format!("no `{kind}` block is defined above this one"),
                    None => format!("{kind} blocks defined above: {}", list(&sorted(cands))),
                };
                Err(Diagnostic::error(span.clone(), format!("no `{kind}` block named `{name}`")).with_hint(hint))
            }
        }
    }

    /// Check that every parameter `ex` refers to is defined above block `order`.
    pub fn check_refs(&self, ex: &Ex, order: usize, diags: &mut Vec<Diagnostic>) -> bool {
        let mut ok = true;
        let is_param = |n: &str| self.names.get(n).is_some_and(|d| d.what == "parameter");
        for (name, span) in param_refs(ex, is_param) {
            match self.names.get(&name) {
                Some(d) if d.what == "parameter" && d.order < order => {}
                Some(d) if d.what == "parameter" => {
                    ok = false;
                    diags.push(
                        Diagnostic::error(
                            ex.at(&span),
                            format!("the parameter `{name}` is defined below this block"),
                        )
                        .with_hint(
                            "a block sees only names defined above it; move the parameter up",
                        ),
                    );
                }
                _ => {
                    ok = false;
                    diags.push(self.undefined(&name, ex.at(&span), order, &[]));
                }
            }
        }
        ok
    }

    /// "not defined", suggesting a parameter visible from block `order` (or one of `local`, the
    /// block's own), else a unit, constant or function the expression language knows.
    fn undefined(&self, name: &str, span: Span, order: usize, local: &[&str]) -> Diagnostic {
        let mut cands = self.params_before(order);
        cands.extend(local.iter().copied().filter(|l| *l != name));
        cands.sort_unstable();
        let builtin = || {
            expr::parse(name)
                .and_then(|e| e.eval(&HashMap::<String, expr::Quantity>::new()))
                .err()
                .and_then(|e| e.hint)
        };
        let hint = match did_you_mean(name, cands.iter().copied()) {
            Some(c) => format!("did you mean `{c}`?"),
            None => match builtin() {
                Some(h) if h.contains("did you mean") => h,
                _ if cands.is_empty() => "define it in a `params` block above".to_string(),
                _ => format!("parameters defined above: {}", list(&cands)),
            },
        };
        Diagnostic::error(
            span,
            format!("`{name}` is not a parameter, constant or unit"),
        )
        .with_hint(hint)
    }
}

/// The names `ex` refers to as parameters: every name it could not resolve otherwise, plus the
/// constants and units it mentions that `is_param` says a parameter shadows.
pub fn param_refs(ex: &Ex, is_param: impl Fn(&str) -> bool) -> Vec<(String, Span)> {
    let plain = ex.expr.references();
    ex.expr
        .lookups()
        .into_iter()
        .filter(|(n, s)| is_param(n) || plain.iter().any(|(m, t)| m == n && t == s))
        .collect()
}

fn sorted(mut v: Vec<&str>) -> Vec<&str> {
    v.sort_unstable();
    v
}

/// Collect the names of `doc`, order its parameters and apply `overrides` (`name`, `EXPR`).
/// Override problems are returned as plain messages (they are not in the file).
pub fn resolve(
    doc: &Document,
    overrides: &[(String, String)],
) -> (Scope, Vec<Diagnostic>, Vec<String>) {
    let mut scope = Scope::default();
    let mut diags = Vec::new();
    let mut cli = Vec::new();
    let define = |scope: &mut Scope,
                  diags: &mut Vec<Diagnostic>,
                  name: &str,
                  span: &Span,
                  what: &'static str,
                  order: usize| {
        if let Some(prev) = scope.names.get(name) {
            let (line, _) = doc.source.line_col(prev.span.start);
            diags.push(
                Diagnostic::error(
                    span.clone(),
                    format!(
                        "`{name}` is already defined (as a {} on line {line})",
                        prev.what
                    ),
                )
                .with_hint("block names and parameters share one namespace; choose another name"),
            );
            return false;
        }
        scope.names.insert(
            name.to_string(),
            Def {
                what,
                span: span.clone(),
                order,
            },
        );
        true
    };
    for (order, cell) in doc.blocks().enumerate() {
        if let Some((name, span)) = &cell.raw.name {
            let what: &'static str = match cell.raw.kind.as_str() {
                "params" => "params",
                "atom" => "atom",
                "light" => "light",
                "sequence" => "sequence",
                "evolve" => "evolve",
                "plot" => "plot",
                "table" => "table",
                _ => "check",
            };
            define(&mut scope, &mut diags, name, span, what, order);
        }
        let Some(Block::Params(p)) = &cell.block else {
            continue;
        };
        for name in &p.broken {
            define(
                &mut scope,
                &mut diags,
                &name.name,
                &name.span,
                "parameter",
                order,
            );
        }
        let mut local = Vec::new();
        for (name, ex) in &p.entries {
            if !define(
                &mut scope,
                &mut diags,
                &name.name,
                &name.span,
                "parameter",
                order,
            ) {
                continue;
            }
            local.push(Param {
                name: name.name.clone(),
                span: name.span.clone(),
                ex: ex.clone(),
                overridden: None,
                deps: vec![],
                order,
            });
        }
        for p in &mut local {
            if let Some((_, text)) = overrides.iter().rev().find(|(n, _)| *n == p.name) {
                match expr::parse(text) {
                    Ok(e) => {
                        p.ex = Ex {
                            expr: e,
                            span: p.ex.span.clone(),
                            content: None,
                        };
                        p.overridden = Some(text.clone());
                    }
                    Err(e) => cli.push(format!("--set {}={text}: {}", p.name, e.message)),
                }
            }
        }
        let names: Vec<String> = local.iter().map(|p| p.name.clone()).collect();
        for p in &mut local {
            let is_param = |n: &str| {
                names.iter().any(|m| m == n)
                    || scope.names.get(n).is_some_and(|d| d.what == "parameter")
            };
            p.deps = param_refs(&p.ex, is_param)
                .into_iter()
                .map(|(n, _)| n)
                .collect();
        }
        order_block(&mut scope, local, order, &mut diags, &mut cli);
    }
    let known: Vec<&str> = sorted(scope.params.iter().map(|p| p.name.as_str()).collect());
    for (name, _) in overrides {
        if !known.contains(&name.as_str()) {
            let hint = match did_you_mean(name, known.iter().copied()) {
                Some(c) => format!("did you mean `{c}`?"),
                None => format!("the parameters are {}", list(&known)),
            };
            cli.push(format!("--set {name}: no parameter of that name ({hint})"));
        }
    }
    (scope, diags, cli)
}

/// Append one block's parameters to `scope.params` in dependency order, reporting undefined,
/// forward and cyclic references.
fn order_block(
    scope: &mut Scope,
    local: Vec<Param>,
    order: usize,
    diags: &mut Vec<Diagnostic>,
    cli: &mut Vec<String>,
) {
    let index: BTreeMap<&str, usize> = local
        .iter()
        .enumerate()
        .map(|(i, p)| (p.name.as_str(), i))
        .collect();
    let mut good = vec![true; local.len()];
    for (i, p) in local.iter().enumerate() {
        let is_param = |n: &str| {
            index.contains_key(n) || scope.names.get(n).is_some_and(|d| d.what == "parameter")
        };
        for (name, span) in param_refs(&p.ex, is_param) {
            if index.contains_key(name.as_str()) {
                continue;
            }
            let ok = matches!(scope.names.get(&name), Some(d) if d.what == "parameter" && d.order < order);
            if !ok {
                good[i] = false;
                let d = match scope.names.get(&name) {
                    Some(d) if d.what == "parameter" => Diagnostic::error(
                        p.ex.at(&span),
                        format!("the parameter `{name}` is defined below this block"),
                    )
                    .with_hint("a block sees only names defined above it; move the parameter up"),
                    _ => {
                        let local: Vec<&str> = index.keys().copied().collect();
                        scope.undefined(&name, p.ex.at(&span), order, &local)
                    }
                };
                match &p.overridden {
                    Some(t) => cli.push(format!("--set {}={t}: {}", p.name, d.message)),
                    None => diags.push(d),
                }
            }
        }
    }
    // Depth-first topological order; a grey node met again closes a cycle.
    #[derive(Clone, Copy, PartialEq)]
    enum Mark {
        White,
        Grey,
        Black,
    }
    let mut mark = vec![Mark::White; local.len()];
    let mut out = Vec::new();
    fn visit(
        i: usize,
        local: &[Param],
        index: &BTreeMap<&str, usize>,
        mark: &mut [Mark],
        stack: &mut Vec<usize>,
        out: &mut Vec<usize>,
        diags: &mut Vec<Diagnostic>,
    ) {
        if mark[i] == Mark::Black {
            return;
        }
        if mark[i] == Mark::Grey {
            let from = stack.iter().position(|&s| s == i).unwrap_or(0);
            let cycle: Vec<&str> = stack[from..]
                .iter()
                .chain(std::iter::once(&i))
                .map(|&k| local[k].name.as_str())
                .collect();
            diags.push(
                Diagnostic::error(
                    local[i].span.clone(),
                    format!(
                        "the parameters depend on each other in a cycle: {}",
                        cycle.join(" → ")
                    ),
                )
                .with_hint("define one of them without referring to the others"),
            );
            return;
        }
        mark[i] = Mark::Grey;
        stack.push(i);
        for d in &local[i].deps {
            if let Some(&j) = index.get(d.as_str()) {
                visit(j, local, index, mark, stack, out, diags);
            }
        }
        stack.pop();
        mark[i] = Mark::Black;
        out.push(i);
    }
    let before = diags.len();
    for i in 0..local.len() {
        let mut stack = Vec::new();
        visit(i, &local, &index, &mut mark, &mut stack, &mut out, diags);
    }
    // Only cycles are reported by the walk, and one cycle is met again from each of its
    // members: keep the first report.
    diags.truncate(before + 1);
    let cyclic = diags.len() > before;
    for i in out {
        if good[i] && !cyclic {
            scope.params.push(local[i].clone());
        }
    }
}
