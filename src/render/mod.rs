//! The HTML report, drawn from a [`Record`] alone so that a fresh run and an archived one share
//! one path. The page is self-contained: style inlined, figures as inline SVG, math as MathML,
//! no script but the embedded record (JSON, read back by [`extract_record`]), nothing fetched.

pub mod diff;
pub mod index;
mod plot;
mod prose;
mod units;

use std::fmt::Write as _;
use std::path::{Path, PathBuf};

pub use plot::PlotError;

use crate::notebook::expr::{Dim, format_quantity};
use crate::notebook::path::{Target, parse_path};
use crate::record::{
    CellOutput, CellRecord, CheckRecord, Column, FORMAT, Record, VERSION, series_key,
};

/// The page template built in; a `report.html` in the `templates` folder replaces it.
const TEMPLATE: &str = include_str!("../../templates/report.html");
/// The style sheet built in; a `style.css` in the `templates` folder replaces it.
const STYLE: &str = include_str!("../../templates/style.css");
/// The opening tag of the embedded record; [`extract_record`] looks for exactly this.
const RECORD_OPEN: &str = "<script type=\"application/json\" id=\"fieldbook-record\">";
const RECORD_CLOSE: &str = "</script>";

/// Why a report could not be written or a record not be read back from one.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum RenderError {
    /// A template file exists but could not be read.
    #[error("template {path}: {source}")]
    Template {
        /// The file.
        path: PathBuf,
        /// The cause.
        source: std::io::Error,
    },
    /// A block's figure could not be drawn from its data.
    #[error("the figure of the block at line {line}: {source}")]
    Figure {
        /// The block's first line in the run-file.
        line: usize,
        /// The cause.
        source: PlotError,
    },
    /// The record could not be written as JSON.
    #[error("the record could not be serialised: {0}")]
    Serialise(serde_json::Error),
    /// The HTML holds no embedded record.
    #[error("the page holds no embedded Fieldbook record")]
    NoRecord,
    /// The embedded record is not one this build reads.
    #[error("the embedded record cannot be read: {0}")]
    BadRecord(String),
}

/// The pages written beside records that a later run may replace without asking: each ends
/// with its kind's mark, and any other file at their path is left alone unless forced.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum PageKind {
    /// A diff page (`fieldbook diff --html`).
    Diff,
    /// The index of a folder of reports (`fieldbook run --out`).
    Index,
}

impl PageKind {
    /// The comment that ends every page of this kind.
    fn mark(self) -> &'static str {
        match self {
            PageKind::Diff => "\n<!-- fieldbook diff page -->\n",
            PageKind::Index => "\n<!-- fieldbook index page -->\n",
        }
    }

    /// Whether a page of this kind may be written to `path`: nothing is there, or a page of
    /// the same kind.
    pub fn may_replace(self, path: &Path) -> std::io::Result<bool> {
        match std::fs::read(path) {
            Ok(bytes) => Ok(bytes
                .trim_ascii_end()
                .ends_with(self.mark().trim().as_bytes())),
            Err(e) if e.kind() == std::io::ErrorKind::NotFound => Ok(true),
            Err(e) => Err(e),
        }
    }
}

/// Text or attribute value made safe for HTML.
pub(crate) fn escape(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            c => out.push(c),
        }
    }
    out
}

/// The built-in file, or the one in `dir` when it exists there.
fn template_file(dir: Option<&Path>, name: &str, builtin: &str) -> Result<String, RenderError> {
    let Some(dir) = dir else {
        return Ok(builtin.to_string());
    };
    let path = dir.join(name);
    match std::fs::read_to_string(&path) {
        Ok(text) => Ok(text),
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => Ok(builtin.to_string()),
        Err(source) => Err(RenderError::Template { path, source }),
    }
}

/// Replaces each `{{name}}` of `template` by its part, in one pass so that inserted text (which
/// may itself contain braces) is never scanned. Unknown names stay as written. Returns the page
/// and whether `{{record}}` occurred.
fn fill(template: &str, parts: &[(&str, &str)]) -> (String, bool) {
    let mut out =
        String::with_capacity(template.len() + parts.iter().map(|p| p.1.len()).sum::<usize>());
    let mut rest = template;
    let mut record_used = false;
    while let Some(open) = rest.find("{{") {
        out.push_str(&rest[..open]);
        let after = &rest[open + 2..];
        let hit = after.find("}}").and_then(|close| {
            let key = after[..close].trim();
            parts
                .iter()
                .find(|(k, _)| *k == key)
                .map(|(k, v)| (close, *k, *v))
        });
        match hit {
            Some((close, key, value)) => {
                record_used |= key == "record";
                out.push_str(value);
                rest = &after[close + 2..];
            }
            None => {
                out.push_str("{{");
                rest = after;
            }
        }
    }
    out.push_str(rest);
    (out, record_used)
}

/// The record as JSON inside a script element. `</` becomes `<\/` and every other `<` becomes
/// `\u003c`, the same JSON strings, so nothing in it can end the element, open a comment or
/// read as another `<script`; `<` occurs only inside JSON strings, so this is exact.
fn embedded(record: &Record) -> Result<String, RenderError> {
    let json = serde_json::to_string(record).map_err(RenderError::Serialise)?;
    let mut out = String::with_capacity(json.len() + RECORD_OPEN.len() + RECORD_CLOSE.len() + 64);
    out.push_str(RECORD_OPEN);
    let mut rest = json.as_str();
    while let Some(at) = rest.find('<') {
        out.push_str(&rest[..at]);
        if rest[at + 1..].starts_with('/') {
            out.push_str("<\\/");
            rest = &rest[at + 2..];
        } else {
            out.push_str("\\u003c");
            rest = &rest[at + 1..];
        }
    }
    out.push_str(rest);
    out.push_str(RECORD_CLOSE);
    Ok(out)
}

/// The record embedded in a report written by [`report`], checked for format and version.
pub fn extract_record(html: &str) -> Result<Record, RenderError> {
    let start = html.find(RECORD_OPEN).ok_or(RenderError::NoRecord)? + RECORD_OPEN.len();
    let len = html[start..]
        .find(RECORD_CLOSE)
        .ok_or_else(|| RenderError::BadRecord("its script element is not closed".into()))?;
    let value: serde_json::Value = serde_json::from_str(&html[start..start + len])
        .map_err(|e| RenderError::BadRecord(e.to_string()))?;
    if value.get("format").and_then(|f| f.as_str()) != Some(FORMAT) {
        return Err(RenderError::BadRecord(format!(
            "its `format` is not `{FORMAT}`"
        )));
    }
    let version = value.get("version").and_then(|v| v.as_u64()).unwrap_or(0);
    if version != u64::from(VERSION) {
        return Err(RenderError::BadRecord(format!(
            "schema version {version}; this build reads version {VERSION}"
        )));
    }
    serde_json::from_value(value).map_err(|e| RenderError::BadRecord(e.to_string()))
}

/// The whole report as one self-contained HTML page. `templates` is a folder whose
/// `report.html` and `style.css`, where present, replace the built-in ones.
pub fn report(record: &Record, templates: Option<&Path>) -> Result<String, RenderError> {
    let template = template_file(templates, "report.html", TEMPLATE)?;
    let style = template_file(templates, "style.css", STYLE)?;
    let clean = prose::sanitizer();
    let mut body = String::new();
    for cell in &record.cells {
        if cell.kind == "prose" {
            body.push_str(&prose::render(
                &cell.text,
                cell.line,
                &record.inline,
                &clean,
            ));
            let list = messages(record, cell);
            if !list.is_empty() {
                let _ = write!(body, "<div id=\"line-{}\">{list}</div>", cell.line);
            }
            body.push('\n');
        } else {
            block(&mut body, record, cell)?;
        }
    }
    let title = escape(&title(record));
    let name = escape(&record.name);
    let banner = banner(record);
    let lineage = lineage(record);
    let provenance = provenance(record);
    let json = embedded(record)?;
    let (mut page, record_used) = fill(
        &template,
        &[
            ("title", &title),
            ("name", &name),
            ("style", &style),
            ("banner", &banner),
            ("lineage", &lineage),
            ("body", &body),
            ("provenance", &provenance),
            ("record", &json),
        ],
    );
    // A template without the record still yields a page that rerun and diff can read.
    if !record_used {
        match page.rfind("</body>") {
            Some(at) => page.insert_str(at, &json),
            None => page.push_str(&json),
        }
    }
    Ok(page)
}

/// The first level-one heading of the prose, else the run-file's name.
fn title(record: &Record) -> String {
    record
        .cells
        .iter()
        .filter(|c| c.kind == "prose")
        .flat_map(|c| c.text.lines())
        .find_map(|l| l.strip_prefix("# ").map(|t| t.trim().to_string()))
        .filter(|t| !t.is_empty())
        .unwrap_or_else(|| record.name.clone())
}

/// The summary at the top: runtime errors, failed checks, warnings.
fn banner(record: &Record) -> String {
    let failed = record.checks.iter().filter(|c| !c.passed).count();
    let total = record.checks.len();
    let (class, headline) = if !record.errors.is_empty() {
        (
            "fb-failed",
            format!(
                "{} runtime error(s): results are incomplete",
                record.errors.len()
            ),
        )
    } else if failed > 0 {
        ("fb-failed", format!("{failed} of {total} checks failed"))
    } else if total > 0 {
        ("fb-held", format!("All {total} checks held"))
    } else {
        ("fb-none", "This run has no checks".to_string())
    };
    let mut out = format!(
        "<section class=\"fb-banner {class}\"><p class=\"fb-headline\">{}</p>",
        escape(&headline)
    );
    if !record.errors.is_empty() && failed > 0 {
        let _ = write!(out, "<p>{failed} of {total} checks failed</p>");
    }
    let warnings = match record.warnings.len() {
        0 => "No warnings".to_string(),
        1 => "1 warning".to_string(),
        n => format!("{n} warnings"),
    };
    let _ = write!(out, "<p>{warnings}</p>");
    let messages: Vec<String> = record
        .errors
        .iter()
        .map(|m| ("error", m))
        .chain(record.warnings.iter().map(|m| ("warning", m)))
        .map(|(kind, m)| {
            let place = format!("line {}:{}", m.line, m.column);
            let place = match record
                .cells
                .iter()
                .find(|c| cell_lines(c).contains(&m.line))
            {
                Some(c) => format!("<a href=\"#line-{}\">{place}</a>", c.line),
                None => place,
            };
            format!("<li>{kind}, {place}: {}</li>", escape(&m.message))
        })
        .collect();
    if !messages.is_empty() {
        let _ = write!(out, "<ul>{}</ul>", messages.concat());
    }
    out.push_str("</section>");
    out
}

/// "Derived from" a parent record, for a re-run: the parent's short hash and the changes.
fn lineage(record: &Record) -> String {
    let Some(parent) = &record.lineage.parent else {
        return String::new();
    };
    let short: String = parent.chars().take(12).collect();
    format!(
        "<p class=\"fb-lineage\">Derived from <code title=\"{}\">{}</code> with {}</p>",
        escape(parent),
        escape(&short),
        lineage_changes(record)
    )
}

/// The parameters a re-run changed, as HTML: `<code>rabi = …</code>, …`.
fn lineage_changes(record: &Record) -> String {
    if record.lineage.changes.is_empty() {
        return "no parameter changes".to_string();
    }
    record
        .lineage
        .changes
        .iter()
        .map(|c| format!("<code>{}</code>", escape(c)))
        .collect::<Vec<_>>()
        .join(", ")
}

/// The source lines a cell spans.
fn cell_lines(cell: &CellRecord) -> std::ops::Range<usize> {
    cell.line..cell.line + cell.text.lines().count().max(1)
}

/// The runtime errors and warnings located in `cell`, as a list (empty when there are none).
fn messages(record: &Record, cell: &CellRecord) -> String {
    let lines = cell_lines(cell);
    let items: Vec<String> = record
        .errors
        .iter()
        .map(|m| ("error", m))
        .chain(record.warnings.iter().map(|m| ("warning", m)))
        .filter(|(_, m)| lines.contains(&m.line))
        .map(|(kind, m)| {
            format!(
                "<li class=\"fb-{kind}\"><b>{kind}</b>, line {}:{}: {}</li>",
                m.line,
                m.column,
                escape(&m.message)
            )
        })
        .collect();
    if items.is_empty() {
        String::new()
    } else {
        format!("<ul class=\"fb-messages\">{}</ul>", items.concat())
    }
}

/// How long an evolve block took, for its heading: ` · 12.30 ms` or ` · from the cache`.
fn timing(record: &Record, cell: &CellRecord) -> String {
    let found = record
        .volatile
        .timings
        .iter()
        .find(|t| cell.kind == "evolve" && cell.name.as_deref() == Some(t.block.as_str()));
    match found {
        Some(t) if t.cached => " · from the cache".to_string(),
        Some(t) => format!(" · {}", escape(&format_quantity(t.seconds, Dim::TIME))),
        None => String::new(),
    }
}

/// The checks of `record` that can be drawn on a line plot of `curves` over `x`, numbered from
/// 1: a check of a value at one x, of a curve's extremum, or of where it lies. A curve is
/// matched by its series (a curve drawn with its own `at` or reduction is not), and `x` must be
/// the axis (or time) of the same block.
fn plot_marks<'r>(
    record: &'r Record,
    x: &Column,
    curves: &[Column],
) -> Vec<(plot::Mark, &'r CheckRecord)> {
    let Ok(xp) = parse_path(&x.label) else {
        return vec![];
    };
    let axis = match &xp.target {
        Target::Axis(a) => a.as_str(),
        Target::Time => "time",
        _ => return vec![],
    };
    let plotted: Vec<String> = curves
        .iter()
        .filter_map(|c| parse_path(&c.label).ok())
        .filter(|p| p.block == xp.block && p.reduce.is_none() && p.at.is_empty())
        .filter_map(|p| series_key(&p))
        .collect();
    let mut out = Vec::new();
    for c in &record.checks {
        let (Some(sel), Some(b)) = (&c.selection, &c.bounds) else {
            continue;
        };
        if !plotted.contains(&sel.series) {
            continue;
        }
        let place = match (sel.reduce.as_deref(), sel.at.as_slice()) {
            (None, [at]) if at.axis == axis => plot::Place::At(at.value),
            (Some("max" | "min"), []) => plot::Place::Level,
            (Some("argmax" | "argmin"), []) => plot::Place::Position,
            _ => continue,
        };
        let mark = plot::Mark {
            number: out.len() + 1,
            place,
            lo: b.lo,
            hi: b.hi,
            near: b.near,
            passed: c.passed,
        };
        out.push((mark, c));
    }
    out
}

/// The style class and the word for a check's outcome.
fn status(passed: bool) -> (&'static str, &'static str) {
    if passed {
        ("fb-held", "held")
    } else {
        ("fb-failed", "FAILED")
    }
}

/// The caption under a plot that lists the checks drawn on it.
fn marks_caption(marks: &[(plot::Mark, &CheckRecord)]) -> String {
    if marks.is_empty() {
        return String::new();
    }
    let mut out = String::from("<figcaption class=\"fb-marks\">Checks drawn on this plot:<ol>");
    for (m, c) in marks {
        let (class, word) = status(c.passed);
        let _ = write!(
            out,
            "<li class=\"{class}\" value=\"{}\"><code>{}</code> (line {}): expected {}, got {}, <b>{word}</b></li>",
            m.number,
            escape(&c.path),
            c.line,
            escape(&c.expected),
            escape(&c.shown)
        );
    }
    out.push_str("</ol></figcaption>");
    out
}

/// One scenario block: a heading line, its source folded, then what it showed.
fn block(out: &mut String, record: &Record, cell: &CellRecord) -> Result<(), RenderError> {
    let name = cell
        .name
        .as_deref()
        .map_or(String::new(), |n| format!(" {}", escape(n)));
    let _ = write!(
        out,
        "<section class=\"fb-block\" id=\"line-{line}\"><p class=\"fb-block-head\"><b>{}{name}</b> · line {line}{}</p>\
         <details class=\"fb-source\"><summary>Source</summary><pre><code>{}</code></pre></details>{}",
        escape(&cell.kind),
        timing(record, cell),
        escape(&cell.text),
        messages(record, cell),
        line = cell.line,
    );
    let figure = |r: Result<String, PlotError>| {
        r.map_err(|source| RenderError::Figure {
            line: cell.line,
            source,
        })
    };
    match &cell.output {
        None => {}
        Some(CellOutput::Curves {
            title,
            x,
            curves,
            y_title,
            log_x,
            log_y,
        }) => {
            let marks = plot_marks(record, x, curves);
            let drawn: Vec<plot::Mark> = marks.iter().map(|(m, _)| m.clone()).collect();
            let axes = plot::Axes {
                x_label: plot::shown(x),
                y_label: y_title.as_deref(),
                log_x: *log_x,
                log_y: *log_y,
            };
            let svg = figure(plot::curves(title, x, curves, axes, &drawn))?;
            let _ = write!(
                out,
                "<figure class=\"fb-figure\">{svg}{}</figure>",
                marks_caption(&marks)
            );
        }
        Some(CellOutput::Map { title, x, y, z }) => {
            let svg = figure(plot::heat_map(title, x, y, z, plot::MapStyle::default()))?;
            let _ = write!(out, "<figure class=\"fb-figure fb-map\">{svg}</figure>");
        }
        Some(CellOutput::Table { title, columns }) => table(out, title.as_deref(), columns),
        Some(CellOutput::Checks { indices }) => checks(out, record, indices),
        Some(CellOutput::Results { block }) => results(out, record, block),
    }
    out.push_str("</section>\n");
    Ok(())
}

/// A table block: scalars as name/value rows, columns of equal length side by side.
fn table(out: &mut String, title: Option<&str>, columns: &[Column]) {
    out.push_str("<table class=\"fb-table\">");
    if let Some(t) = title {
        let _ = write!(out, "<caption>{}</caption>", escape(t));
    }
    if columns.iter().all(|c| c.values.len() <= 1) {
        out.push_str("<tr><th>quantity</th><th>value</th></tr>");
        for c in columns {
            let v = c
                .values
                .first()
                .map_or("—".into(), |v| format_quantity(*v, Dim(c.dim)));
            let _ = write!(
                out,
                "<tr><td><code>{}</code></td><td class=\"fb-num\">{}</td></tr>",
                escape(&c.label),
                escape(&v)
            );
        }
    } else {
        out.push_str("<tr>");
        for c in columns {
            let _ = write!(out, "<th><code>{}</code></th>", escape(&c.label));
        }
        out.push_str("</tr>");
        let rows = columns.iter().map(|c| c.values.len()).max().unwrap_or(0);
        for r in 0..rows {
            out.push_str("<tr>");
            for c in columns {
                let v = c
                    .values
                    .get(r)
                    .map_or(String::new(), |v| format_quantity(*v, Dim(c.dim)));
                let _ = write!(out, "<td class=\"fb-num\">{}</td>", escape(&v));
            }
            out.push_str("</tr>");
        }
    }
    out.push_str("</table>");
}

/// A check block's outcomes, failures marked.
fn checks(out: &mut String, record: &Record, indices: &[usize]) {
    out.push_str(
        "<table class=\"fb-checks\"><tr><th>outcome</th><th>result</th><th>expected</th>\
         <th>got</th><th>line</th></tr>",
    );
    for c in indices.iter().filter_map(|&i| record.checks.get(i)) {
        let (class, word) = status(c.passed);
        let _ = write!(
            out,
            "<tr class=\"{class}\"><td><span class=\"fb-status\">{word}</span></td>\
             <td><code>{}</code></td><td>{}</td><td class=\"fb-num\">{}</td><td>{}</td></tr>",
            escape(&c.path),
            escape(&c.expected),
            escape(&c.shown),
            c.line
        );
    }
    out.push_str("</table>");
}

/// The labels of an observable's real components.
fn components(width: usize) -> Vec<String> {
    match width {
        2 => vec!["re".into(), "im".into()],
        3 => vec!["u".into(), "v".into(), "w".into()],
        n => (0..n).map(|i| i.to_string()).collect(),
    }
}

/// An evolve block: its final values without a sweep, else the grid it covered.
fn results(out: &mut String, record: &Record, name: &str) {
    let Some(r) = record.results.iter().find(|r| r.block == name) else {
        return;
    };
    let r = &r.result;
    let what = if r.steady { "steady state" } else { "final" };
    if r.axes.is_empty() {
        let _ = write!(
            out,
            "<table class=\"fb-table\"><tr><th>observable</th><th>{what}</th></tr>"
        );
        for o in &r.observables {
            let values: Vec<String> = o
                .finals
                .iter()
                .map(|v| format_quantity(*v, Dim(o.dim)))
                .collect();
            let shown = if o.width > 1 {
                components(o.width)
                    .iter()
                    .zip(&values)
                    .map(|(c, v)| format!("{c} = {v}"))
                    .collect::<Vec<_>>()
                    .join(", ")
            } else {
                values.join(", ")
            };
            let _ = write!(
                out,
                "<tr><td><code>{}</code></td><td class=\"fb-num\">{}</td></tr>",
                escape(&o.label),
                escape(&shown)
            );
        }
        out.push_str("</table>");
    } else {
        let grid: Vec<String> = r
            .axes
            .iter()
            .map(|a| format!("{} ({} points)", a.name, a.values.len()))
            .collect();
        let observed: Vec<&str> = r.observables.iter().map(|o| o.label.as_str()).collect();
        let _ = write!(
            out,
            "<p class=\"fb-note\">Swept over {}; {what} values of {}.</p>",
            escape(&grid.join(" × ")),
            escape(&observed.join(", "))
        );
    }
    let _ = write!(
        out,
        "<p class=\"fb-note\">Solver: {} ({} steps); details under Provenance.</p>",
        escape(&r.solver.method),
        r.solver.steps
    );
}

/// Where the numbers come from: tool, input, parameters, solvers, timings, inline values.
fn provenance(record: &Record) -> String {
    let v = &record.volatile;
    let mut out = String::from("<h2>Provenance</h2><dl>");
    let mut item = |k: &str, val: &str| {
        let _ = write!(out, "<dt>{k}</dt><dd>{}</dd>", escape(val));
    };
    item("tool", &format!("fieldbook {}", v.tool_version));
    item("commit", &v.commit);
    item("run-file", &record.source.file);
    item("input sha256", &record.source.sha256);
    item("results sha256", &record.lineage.results_sha256);
    item("date", &v.date);
    item("platform", &v.platform);
    if let Some(p) = &record.lineage.parent {
        item("re-run of", p);
        item("changes", &record.lineage.changes.join("; "));
    }
    out.push_str("</dl>");

    out.push_str(
        "<h3>Parameters</h3><table><tr><th>name</th><th>value</th><th>expression</th><th></th></tr>",
    );
    for p in &record.parameters {
        let mark = if p.overridden {
            "<span class=\"fb-overridden\">set with --set</span>"
        } else {
            ""
        };
        let _ = write!(
            out,
            "<tr><td><code>{}</code></td><td class=\"fb-num\">{}</td><td><code>{}</code></td><td>{mark}</td></tr>",
            escape(&p.name),
            escape(&p.shown),
            escape(&p.expr)
        );
    }
    out.push_str("</table>");

    if !record.results.is_empty() {
        out.push_str(
            "<h3>Solvers</h3><table><tr><th>block</th><th>method</th><th>rtol</th><th>atol</th>\
             <th>steps</th><th>norm drift</th><th>frame</th></tr>",
        );
        for r in &record.results {
            let s = &r.result.solver;
            let method = if s.reason.is_empty() {
                escape(&s.method)
            } else {
                format!(
                    "{}<br><span class=\"fb-note\">{}</span>",
                    escape(&s.method),
                    escape(&s.reason)
                )
            };
            let frame: Vec<String> = s.frame.iter().map(|l| escape(l)).collect();
            let _ = write!(
                out,
                "<tr><td><code>{}</code></td><td>{method}</td><td class=\"fb-num\">{:e}</td>\
                 <td class=\"fb-num\">{:e}</td><td class=\"fb-num\">{}</td><td class=\"fb-num\">{:.2e}</td><td>{}</td></tr>",
                escape(&r.block),
                s.rtol,
                s.atol,
                s.steps,
                s.norm_drift,
                frame.join("<br>")
            );
        }
        out.push_str("</table>");
    }

    if !v.timings.is_empty() {
        out.push_str("<h3>Timings</h3><table><tr><th>block</th><th>wall time</th><th></th></tr>");
        for t in &v.timings {
            let _ = write!(
                out,
                "<tr><td><code>{}</code></td><td class=\"fb-num\">{}</td><td>{}</td></tr>",
                escape(&t.block),
                escape(&format_quantity(t.seconds, Dim::TIME)),
                if t.cached { "from the cache" } else { "" }
            );
        }
        out.push_str("</table>");
    }

    if !record.inline.is_empty() {
        out.push_str(
            "<h3>Inline values</h3><table><tr><th>result</th><th>value</th><th>line</th></tr>",
        );
        for i in &record.inline {
            let _ = write!(
                out,
                "<tr><td><code>{}</code></td><td class=\"fb-num\">{}</td><td>{}</td></tr>",
                escape(&i.path),
                escape(&i.shown),
                i.line
            );
        }
        out.push_str("</table>");
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn placeholders_are_filled_once_and_unknown_ones_kept() {
        let (page, used) = fill("a{{x}}b{{ y }}c{{z}}", &[("x", "{{y}}"), ("y", "Y")]);
        assert_eq!(page, "a{{y}}bYc{{z}}");
        assert!(!used);
        let (_, used) = fill("{{record}}", &[("record", "")]);
        assert!(used);
    }

    #[test]
    fn escaping_covers_markup_and_quotes() {
        assert_eq!(
            escape("<a href=\"x\">&'"),
            "&lt;a href=&quot;x&quot;&gt;&amp;&#39;"
        );
    }

    #[test]
    fn pages_without_a_record_are_refused() {
        assert!(matches!(
            extract_record("<html></html>"),
            Err(RenderError::NoRecord)
        ));
        let bad = format!("{RECORD_OPEN}{{\"format\":\"other\"}}{RECORD_CLOSE}");
        assert!(matches!(
            extract_record(&bad),
            Err(RenderError::BadRecord(_))
        ));
    }
}
