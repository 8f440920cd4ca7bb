//! The plain-text summary of a run printed by `fieldbook run`: each cell's outputs in order,
//! check results and inline values.

use std::fmt::Write as _;

use crate::kernel::results::PathValue;
use crate::kernel::session::{Output, RunOutcome};
use crate::notebook::Document;
use crate::notebook::expr::{Dim, format_quantity};

/// Most rows printed for a table; the record keeps them all.
const MAX_ROWS: usize = 12;

fn value(v: &PathValue) -> String {
    match v {
        PathValue::Scalar(x, d) => format_quantity(*x, *d),
        PathValue::Series {
            axis,
            x,
            x_dim,
            y,
            y_dim,
        } => {
            let (lo, hi) = y
                .iter()
                .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), v| {
                    (a.min(*v), b.max(*v))
                });
            format!(
                "{} points over {axis} from {} to {}; values from {} to {}",
                y.len(),
                format_quantity(x[0], *x_dim),
                format_quantity(x[x.len() - 1], *x_dim),
                format_quantity(lo, *y_dim),
                format_quantity(hi, *y_dim)
            )
        }
        PathValue::Map { axes, z, dim } => {
            let (lo, hi) = z
                .iter()
                .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), v| {
                    (a.min(*v), b.max(*v))
                });
            format!(
                "{} × {} map over {} and {}; values from {} to {}",
                axes[0].1.len(),
                axes[1].1.len(),
                axes[0].0,
                axes[1].0,
                format_quantity(lo, *dim),
                format_quantity(hi, *dim)
            )
        }
    }
}

/// Render `outcome` of `doc` as text.
pub fn text(doc: &Document, outcome: &RunOutcome, seconds: f64) -> String {
    let mut s = String::new();
    let name = doc.source.name();
    let mut checks = (0, 0);
    for (_, o) in &outcome.outputs {
        match o {
            Output::Evolve {
                name,
                result,
                cached,
                seconds,
            } => {
                let points: usize = result.axes.iter().map(|a| a.values.len()).product();
                let how = if *cached {
                    "from cache".to_string()
                } else {
                    format!("{:.3} s", seconds)
                };
                let _ = writeln!(
                    s,
                    "evolve {name}: {} point(s), {}, {how}, norm drift {:.1e}",
                    points, result.solver.method, result.solver.norm_drift
                );
                for line in &result.solver.frame {
                    let _ = writeln!(s, "  frame: {line}");
                }
                if result.axes.is_empty() && result.times.is_none() {
                    for ob in &result.observables {
                        let vals: Vec<String> = ob
                            .finals
                            .iter()
                            .map(|v| format_quantity(*v, Dim(ob.dim)))
                            .collect();
                        let _ = writeln!(s, "  {} = {}", ob.label, vals.join(", "));
                    }
                }
            }
            Output::Plot { title, series, .. } => {
                let _ = writeln!(s, "plot: {title}");
                for (label, v) in series.iter().skip(1) {
                    let _ = writeln!(s, "  {label}: {}", value(v));
                }
            }
            Output::Table { title, columns } => {
                let _ = writeln!(
                    s,
                    "table{}",
                    title.as_ref().map(|t| format!(": {t}")).unwrap_or_default()
                );
                let _ = writeln!(
                    s,
                    "  {}",
                    columns
                        .iter()
                        .map(|(l, _)| l.as_str())
                        .collect::<Vec<_>>()
                        .join(" | ")
                );
                let rows = columns
                    .iter()
                    .map(|(_, v)| match v {
                        PathValue::Series { y, .. } => y.len(),
                        _ => 1,
                    })
                    .max()
                    .unwrap_or(0);
                for r in 0..rows.min(MAX_ROWS) {
                    let cells: Vec<String> = columns
                        .iter()
                        .map(|(_, v)| match v {
                            PathValue::Scalar(x, d) => format_quantity(*x, *d),
                            PathValue::Series { y, y_dim, .. } => y
                                .get(r)
                                .map_or(String::new(), |x| format_quantity(*x, *y_dim)),
                            PathValue::Map { .. } => "(map)".into(),
                        })
                        .collect();
                    let _ = writeln!(s, "  {}", cells.join(" | "));
                }
                if rows > MAX_ROWS {
                    let _ = writeln!(s, "  … {} more rows", rows - MAX_ROWS);
                }
            }
            Output::Checks(rs) => {
                for r in rs {
                    let mark = if r.passed { "held" } else { "FAILED" };
                    if r.passed {
                        checks.0 += 1
                    } else {
                        checks.1 += 1
                    }
                    let (line, _) = doc.source.line_col(r.span.start);
                    let _ = writeln!(
                        s,
                        "check {mark}: {} = {} (expected {}) [line {line}]",
                        r.path,
                        format_quantity(r.got, r.dim),
                        r.expected
                    );
                }
            }
        }
    }
    for (path, span, v) in &outcome.inline {
        let (line, _) = doc.source.line_col(span.start);
        match v {
            Ok(v) => {
                let _ = writeln!(s, "inline [line {line}]: {path} = {}", value(v));
            }
            Err(e) => {
                let _ = writeln!(s, "inline [line {line}]: {path}: {e}");
            }
        }
    }
    let verdict = match (checks.1, outcome.errors.len()) {
        (_, e) if e > 0 => format!("{e} block(s) failed to run"),
        (0, _) => format!("all {} check(s) held", checks.0),
        (f, _) => format!("{f} of {} check(s) FAILED", checks.0 + f),
    };
    let _ = writeln!(s, "{name}: {verdict} ({seconds:.2} s)");
    s
}
