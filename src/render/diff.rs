//! The HTML diff page, drawn from two records alone: a summary, every change grouped by kind,
//! the source as a line diff, and each plot the two records share with the old and new
//! versions on the same axes (line plots overlaid, heat maps side by side on one colour scale,
//! with their difference when the grids agree).

use std::fmt::Write as _;
use std::path::Path;

use super::plot::{self, MapStyle, PAIR_WIDTH, Trace};
use super::{PageKind, RenderError, STYLE, escape, fill, lineage_changes, template_file};
use crate::record::diff::{Change, Tolerance};
use crate::record::{CellOutput, CellRecord, Column, Record};

/// The page template built in; a `diff.html` in the `templates` folder replaces it.
const TEMPLATE: &str = include_str!("../../templates/diff.html");

/// The kinds of change in the order the page lists them, with their headings.
const KINDS: [(&str, &str); 6] = [
    ("parameter", "Parameters"),
    ("structure", "Structure"),
    ("result", "Results"),
    ("check", "Checks"),
    ("solver", "Solver settings"),
    ("source", "Source"),
];

/// One side of the comparison: the record and the file it was read from.
pub struct Side<'a> {
    /// The record.
    pub record: &'a Record,
    /// The path as given on the command line.
    pub path: &'a str,
}

/// The whole diff page of `old` → `new` with the `changes` found at tolerance `tol`.
/// `templates` is a folder whose `diff.html` and `style.css`, where present, replace the
/// built-in ones.
pub fn page(
    old: &Side<'_>,
    new: &Side<'_>,
    changes: &[Change],
    tol: Tolerance,
    templates: Option<&Path>,
) -> Result<String, RenderError> {
    let template = template_file(templates, "diff.html", TEMPLATE)?;
    let style = template_file(templates, "style.css", STYLE)?;
    let title = if old.record.name == new.record.name {
        escape(&old.record.name)
    } else {
        escape(&format!("{} → {}", old.record.name, new.record.name))
    };
    let summary = summary(changes, tol);
    let files = files(old, new);
    let listed = listed(changes);
    let plots = plots(old, new)?;
    let (mut page, _) = fill(
        &template,
        &[
            ("title", &title),
            ("style", &style),
            ("summary", &summary),
            ("files", &files),
            ("changes", &listed),
            ("plots", &plots),
        ],
    );
    page.push_str(PageKind::Diff.mark());
    Ok(page)
}

/// The banner: equal within tolerance, or how many differences of which kinds.
fn summary(changes: &[Change], tol: Tolerance) -> String {
    let within = format!("rtol {:e}, atol {:e}", tol.rtol, tol.atol);
    if changes.is_empty() {
        return format!(
            "<section class=\"fb-banner fb-held\"><p class=\"fb-headline\">Equal: the records \
             agree within tolerance</p><p>{within}; dates, timings and platform are not compared</p></section>"
        );
    }
    let counts: Vec<String> = KINDS
        .iter()
        .filter_map(|(kind, heading)| {
            let n = changes.iter().filter(|c| c.kind == *kind).count();
            (n > 0).then(|| format!("<a href=\"#{kind}\">{} {n}</a>", heading.to_lowercase()))
        })
        .collect();
    let n = changes.len();
    format!(
        "<section class=\"fb-banner fb-failed\"><p class=\"fb-headline\">{n} difference{}</p>\
         <p>{}</p><p>{within}</p></section>",
        if n == 1 { "" } else { "s" },
        counts.join(" · ")
    )
}

/// The two files side by side: path, run-file, hashes, date, tool; and the lineage between them.
fn files(old: &Side<'_>, new: &Side<'_>) -> String {
    let mut out =
        String::from("<table class=\"fb-files\"><tr><th></th><th>old</th><th>new</th></tr>");
    let short = |h: &str| h.chars().take(12).collect::<String>();
    let facts = |s: &Side<'_>| {
        let r = s.record;
        [
            ("file", s.path.to_string()),
            ("run-file", r.source.file.clone()),
            ("input sha256", short(&r.source.sha256)),
            ("results sha256", short(&r.lineage.results_sha256)),
            ("date", r.volatile.date.clone()),
            (
                "tool",
                format!(
                    "fieldbook {} ({})",
                    r.volatile.tool_version, r.volatile.commit
                ),
            ),
        ]
    };
    for ((name, a), (_, b)) in facts(old).into_iter().zip(facts(new)) {
        let _ = write!(
            out,
            "<tr><th>{name}</th><td><code>{}</code></td><td><code>{}</code></td></tr>",
            escape(&a),
            escape(&b)
        );
    }
    out.push_str("</table>");
    if new.record.lineage.parent.as_deref() == Some(old.record.lineage.results_sha256.as_str()) {
        let _ = write!(
            out,
            "<p class=\"fb-note\">The new record is a re-run of the old one ({}) with {}.</p>",
            escape(&short(&old.record.lineage.results_sha256)),
            lineage_changes(new.record)
        );
    }
    out
}

/// Every change, grouped by kind; the source's as a line diff.
fn listed(changes: &[Change]) -> String {
    let mut out = String::new();
    for (kind, heading) in KINDS {
        let these: Vec<&Change> = changes.iter().filter(|c| c.kind == kind).collect();
        if these.is_empty() {
            continue;
        }
        let _ = write!(
            out,
            "<section class=\"fb-changes\" id=\"{kind}\"><h2>{heading} <span class=\"fb-count\">{}</span></h2>",
            these.len()
        );
        if kind == "source" {
            out.push_str("<pre class=\"fb-linediff\">");
            for c in these {
                let class = match c.text.chars().next() {
                    Some('+') => "fb-add",
                    Some('-') => "fb-del",
                    _ => "fb-note",
                };
                // The line break inside the block: copied text keeps its lines, and no empty
                // line appears between the blocks.
                let _ = write!(out, "<span class=\"{class}\">{}\n</span>", escape(&c.text));
            }
            out.push_str("</pre>");
        } else {
            out.push_str("<ul>");
            for c in these {
                let _ = write!(out, "<li>{}</li>", change_html(&c.text));
            }
            out.push_str("</ul>");
        }
        out.push_str("</section>");
    }
    out
}

/// A change's text with the subject before its first `: ` set as code.
fn change_html(text: &str) -> String {
    match text.split_once(": ") {
        Some((subject, rest)) => format!("<code>{}</code>: {}", escape(subject), escape(rest)),
        None => escape(text),
    }
}

/// How plots are paired across the records: by block name, else by title.
fn plot_key(cell: &CellRecord) -> Option<String> {
    let title = match cell.output.as_ref()? {
        CellOutput::Curves { title, .. } | CellOutput::Map { title, .. } => title,
        _ => return None,
    };
    Some(cell.name.clone().unwrap_or_else(|| title.clone()))
}

/// The plots of a record with their keys.
fn plots_of(r: &Record) -> Vec<(String, &CellRecord)> {
    r.cells
        .iter()
        .filter_map(|c| plot_key(c).map(|k| (k, c)))
        .collect()
}

/// Each plot present in both records drawn once with both versions, then those in one only.
fn plots(old: &Side<'_>, new: &Side<'_>) -> Result<String, RenderError> {
    let (a, b) = (plots_of(old.record), plots_of(new.record));
    if a.is_empty() && b.is_empty() {
        return Ok(String::new());
    }
    let mut out = String::from(
        "<section class=\"fb-changes\" id=\"plots\"><h2>Plots</h2>\
         <p class=\"fb-note\">Old: dashed and lighter. New: solid. Heat maps share one colour scale.</p>",
    );
    for (key, cb) in &b {
        let Some((_, ca)) = a.iter().find(|(k, _)| k == key) else {
            continue;
        };
        let figure = |r: Result<String, plot::PlotError>| {
            r.map_err(|source| RenderError::Figure {
                line: cb.line,
                source,
            })
        };
        match (&ca.output, &cb.output) {
            (
                Some(CellOutput::Curves {
                    x: xa, curves: ya, ..
                }),
                Some(CellOutput::Curves {
                    title,
                    x: xb,
                    curves: yb,
                    y_title,
                    log_x,
                    log_y,
                }),
            ) => {
                if xa.dim != xb.dim {
                    let _ = write!(
                        out,
                        "<p>{}: the x axis changed dimension; not overlaid.</p>",
                        escape(title)
                    );
                    continue;
                }
                let traces = overlaid(xa, ya, xb, yb);
                let axes = plot::Axes {
                    x_label: plot::shown(xb),
                    y_label: y_title.as_deref(),
                    log_x: *log_x,
                    log_y: *log_y,
                };
                let svg = figure(plot::line_plot(title, &traces, axes, &[]))?;
                let _ = write!(out, "<figure class=\"fb-figure\">{svg}</figure>");
            }
            (
                Some(CellOutput::Map {
                    x: xa,
                    y: ya,
                    z: za,
                    ..
                }),
                Some(CellOutput::Map { title, x, y, z }),
            ) => {
                let shared = span(za.values.iter().chain(&z.values).copied());
                let style = MapStyle {
                    range: shared,
                    diverging: false,
                    width: PAIR_WIDTH,
                };
                let old_svg = figure(plot::heat_map(&format!("{title} (old)"), xa, ya, za, style))?;
                let new_svg = figure(plot::heat_map(&format!("{title} (new)"), x, y, z, style))?;
                let _ = write!(
                    out,
                    "<div class=\"fb-pair\"><figure class=\"fb-figure fb-map\">{old_svg}</figure>\
                     <figure class=\"fb-figure fb-map\">{new_svg}</figure></div>"
                );
                if xa.values == x.values
                    && ya.values == y.values
                    && za.values.len() == z.values.len()
                {
                    let delta = Column {
                        label: format!("{} (new − old)", z.label),
                        title: Some(format!("{} (new − old)", plot::shown(z))),
                        dim: z.dim,
                        values: za
                            .values
                            .iter()
                            .zip(&z.values)
                            .map(|(u, v)| v - u)
                            .collect(),
                    };
                    let m = delta
                        .values
                        .iter()
                        .filter(|v| v.is_finite())
                        .fold(0.0f64, |m, v| m.max(v.abs()));
                    let style = MapStyle {
                        range: (m > 0.0).then_some((-m, m)),
                        diverging: true,
                        ..MapStyle::default()
                    };
                    let svg = figure(plot::heat_map(
                        &format!("{title}: new − old"),
                        x,
                        y,
                        &delta,
                        style,
                    ))?;
                    let _ = write!(
                        out,
                        "<figure class=\"fb-figure fb-map fb-delta\">{svg}</figure>"
                    );
                } else {
                    out.push_str(
                        "<p class=\"fb-note\">The grids differ, so no difference map.</p>",
                    );
                }
            }
            _ => {
                let _ = write!(
                    out,
                    "<p>{}: changed between a line plot and a heat map.</p>",
                    escape(key)
                );
            }
        }
    }
    let only = |these: &[(String, &CellRecord)], others: &[(String, &CellRecord)]| {
        these
            .iter()
            .filter(|(k, _)| !others.iter().any(|(o, _)| o == k))
            .map(|(k, _)| format!("<code>{}</code>", escape(k)))
            .collect::<Vec<_>>()
    };
    for (which, names) in [("old", only(&a, &b)), ("new", only(&b, &a))] {
        if !names.is_empty() {
            let _ = write!(
                out,
                "<p class=\"fb-note\">Only in the {which} record: {}.</p>",
                names.join(", ")
            );
        }
    }
    out.push_str("</section>");
    Ok(out)
}

/// The finite range of `values`, if they have one wider than a point.
fn span(values: impl Iterator<Item = f64>) -> Option<(f64, f64)> {
    let (lo, hi) = values
        .filter(|v| v.is_finite())
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(l, h), v| {
            (l.min(v), h.max(v))
        });
    (hi > lo).then_some((lo, hi))
}

/// The old curves (dashed) and the new ones, a curve keeping its colour across versions.
fn overlaid<'a>(
    xa: &'a Column,
    ya: &'a [Column],
    xb: &'a Column,
    yb: &'a [Column],
) -> Vec<Trace<'a>> {
    let mut labels: Vec<&str> = yb.iter().map(|c| c.label.as_str()).collect();
    for c in ya {
        if !labels.contains(&c.label.as_str()) {
            labels.push(&c.label);
        }
    }
    let colour = |label: &str| labels.iter().position(|l| *l == label).unwrap_or(0);
    let side = |x: &'a Column, ys: &'a [Column], old: bool| {
        ys.iter().map(move |y| Trace {
            x,
            y,
            name: format!("{} · {}", plot::shown(y), if old { "old" } else { "new" }),
            colour: colour(&y.label),
            old,
        })
    };
    side(xa, ya, true).chain(side(xb, yb, false)).collect()
}
