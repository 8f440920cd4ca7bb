//! The record: the machine-readable result of running a run-file, a versioned JSON wire format
//! (documented in `notebooks-spec/RECORD.md`). Its types are separate from the runtime's and the
//! kernel's; everything a re-run or a diff needs is here, and everything that changes from run to
//! run without the input changing (date, timings, platform) sits in `volatile`.

pub mod csv;
pub mod diff;
pub mod io;

use serde::{Deserialize, Serialize};
use sha2::{Digest, Sha256};

use crate::kernel::build::Values;
use crate::kernel::results::{EvolveResult, PathValue};
use crate::kernel::session::{Checked, Output, RunOutcome};
use crate::notebook::Document;
use crate::notebook::blocks::{Block, Condition, Ex, Tol};
use crate::notebook::diag::{Diagnostic, Severity};
use crate::notebook::expr::{self, format_quantity};
use crate::notebook::path::{Reduce, ResultPath, Target};
use crate::notebook::source::Span;

/// The `format` field of every record.
pub const FORMAT: &str = "fieldbook-record";
/// The schema version this build writes; bumped on any incompatible change.
pub const VERSION: u32 = 1;

/// A whole record.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct Record {
    /// Always [`FORMAT`].
    pub format: String,
    /// Schema version.
    pub version: u32,
    /// The run-file's name without extension.
    pub name: String,
    /// The source text and its hash.
    pub source: SourceInfo,
    /// The document in order: prose and blocks, with what each block showed.
    pub cells: Vec<CellRecord>,
    /// Every parameter at its resolved value, in evaluation order.
    pub parameters: Vec<ParamRecord>,
    /// Results of every evolve block that ran, in order.
    pub results: Vec<NamedResult>,
    /// Check outcomes, in order.
    pub checks: Vec<CheckRecord>,
    /// Inline values in the prose.
    pub inline: Vec<InlineRecord>,
    /// Warnings of the run-file.
    pub warnings: Vec<Message>,
    /// Runtime failures.
    pub errors: Vec<Message>,
    /// Where this record comes from.
    pub lineage: Lineage,
    /// Everything that varies between identical runs; diff ignores it.
    pub volatile: Volatile,
}

/// The run-file's text.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct SourceInfo {
    /// The file name as given.
    pub file: String,
    /// The whole text.
    pub text: String,
    /// SHA-256 of the text, hex.
    pub sha256: String,
}

/// One cell of the document.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct CellRecord {
    /// `prose`, or the block kind.
    pub kind: String,
    /// The block's name, if it has one.
    pub name: Option<String>,
    /// First line in the source (1-based).
    pub line: usize,
    /// The Markdown of the prose, or the block's whole text with its fences.
    pub text: String,
    /// What the block showed, for `plot`, `table`, `check` and `evolve` blocks that ran.
    pub output: Option<CellOutput>,
}

/// A labelled series of numbers with its dimension.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct Column {
    /// The result path it came from.
    pub label: String,
    /// Its name for a reader (a plot's legend or axis), when it differs from the path: given in
    /// the plot block or shortened from the path. Absent in records of older builds.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub title: Option<String>,
    /// Dimension exponents.
    pub dim: [i8; 5],
    /// Values (SI).
    pub values: Vec<f64>,
}

/// What a block showed.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
#[serde(tag = "type", rename_all = "snake_case")]
pub enum CellOutput {
    /// Curves over a common x axis.
    Curves {
        /// Title.
        title: String,
        /// The x axis.
        x: Column,
        /// The curves, each as long as `x`.
        curves: Vec<Column>,
        /// The vertical axis's name, when the plot block gives one.
        #[serde(default, skip_serializing_if = "Option::is_none")]
        y_title: Option<String>,
        /// Logarithmic x axis.
        log_x: bool,
        /// Logarithmic y axis.
        log_y: bool,
    },
    /// A heat map over two sweep axes: `z.values[i * y.len() + j]` is at (x[i], y[j]).
    Map {
        /// Title.
        title: String,
        /// Horizontal axis.
        x: Column,
        /// Vertical axis.
        y: Column,
        /// Colour values.
        z: Column,
    },
    /// A table of columns (scalars give one-element columns).
    Table {
        /// Title.
        title: Option<String>,
        /// Columns.
        columns: Vec<Column>,
    },
    /// Checks of this block: indices into the record's `checks`.
    Checks {
        /// Indices.
        indices: Vec<usize>,
    },
    /// An evolve block's results: the name under `results`.
    Results {
        /// Block name.
        block: String,
    },
}

/// One resolved parameter.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct ParamRecord {
    /// Its name.
    pub name: String,
    /// Its value in SI units.
    pub value: f64,
    /// Dimension exponents of s, m, kg, A, K.
    pub dim: [i8; 5],
    /// The value as a person reads it, e.g. `2π × 25.00 kHz`.
    pub shown: String,
    /// The expression it was evaluated from.
    pub expr: String,
    /// True when `--set` replaced the file's definition.
    pub overridden: bool,
}

/// An evolve block's results.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct NamedResult {
    /// The block name.
    pub block: String,
    /// Its results.
    pub result: EvolveResult,
}

/// One check.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct CheckRecord {
    /// The result path.
    pub path: String,
    /// Line of the check in the source.
    pub line: usize,
    /// The value found (SI).
    pub got: f64,
    /// Its dimension exponents.
    pub dim: [i8; 5],
    /// The value as printed.
    pub shown: String,
    /// The condition with its numbers.
    pub expected: String,
    /// Whether it held.
    pub passed: bool,
    /// The accepted values as numbers; `None` in records written before this field existed.
    #[serde(default)]
    pub bounds: Option<Bounds>,
    /// What the path reads, for drawing the check on a plot of that series; `None` for checks
    /// of a time or axis value, and in records written before this field existed.
    #[serde(default)]
    pub selection: Option<Selection>,
}

/// The values a check accepts, SI, in the dimension of the checked value: `lo ≤ got ≤ hi`,
/// either side open when `None`; `near` is the value a `near` condition aims at.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct Bounds {
    /// Lower bound.
    pub lo: Option<f64>,
    /// Upper bound.
    pub hi: Option<f64>,
    /// The value aimed at by `near`.
    pub near: Option<f64>,
}

/// A checked path taken apart: the series it reads, then a reduction or point selections.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct Selection {
    /// The series before selection and reduction, in canonical form, e.g.
    /// `line.final.population(e)` or `run.trace.bloch(g, e).w` (see [`series_key`]).
    pub series: String,
    /// `max`, `min`, `argmax` or `argmin`.
    pub reduce: Option<String>,
    /// The `at` selections with their values evaluated.
    pub at: Vec<AtValue>,
}

/// One `at AXIS = VALUE` selection.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct AtValue {
    /// The axis (`time` for a trace).
    pub axis: String,
    /// The selected coordinate (SI).
    pub value: f64,
}

/// One inline value.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct InlineRecord {
    /// The result path.
    pub path: String,
    /// Line in the source.
    pub line: usize,
    /// The value as printed, or the reason it has none.
    pub shown: String,
}

/// A located message.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct Message {
    /// 1-based line.
    pub line: usize,
    /// 1-based column (characters).
    pub column: usize,
    /// The text.
    pub message: String,
}

/// Parentage of a record.
#[derive(Clone, Debug, Default, Serialize, Deserialize, PartialEq)]
pub struct Lineage {
    /// The parent record's `results_sha256`, when this is a re-run.
    pub parent: Option<String>,
    /// The parameters changed relative to the parent, as `name = EXPR`.
    pub changes: Vec<String>,
    /// SHA-256 of everything in the record but `volatile` and `lineage`, hex: equal inputs and
    /// equal results give equal hashes.
    pub results_sha256: String,
}

/// What varies between identical runs.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct Volatile {
    /// UTC date and time of the run, ISO 8601.
    pub date: String,
    /// `fieldbook` version.
    pub tool_version: String,
    /// The commit the tool was built from, if known.
    pub commit: String,
    /// Operating system and architecture.
    pub platform: String,
    /// Wall time per evolve block (s), and whether it came from the cache.
    pub timings: Vec<Timing>,
}

/// One block's timing.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct Timing {
    /// Block name.
    pub block: String,
    /// Wall time (s).
    pub seconds: f64,
    /// Served from the cache.
    pub cached: bool,
}

/// The canonical text of the series a path reads, without reduction or selections:
/// `BLOCK.final.OBS[.COMP]` or `BLOCK.trace.OBS[.COMP]` with the observable as `observe` lists
/// it; `None` for a time or axis path. Checks and plot curves are matched by this key.
pub fn series_key(path: &ResultPath) -> Option<String> {
    let (part, obs, comp) = match &path.target {
        Target::Final(o, c) => ("final", o, c),
        Target::Trace(o, c) => ("trace", o, c),
        Target::Time | Target::Axis(_) => return None,
    };
    let comp = comp.as_ref().map_or(String::new(), |c| format!(".{c}"));
    Some(format!("{}.{part}.{}{comp}", path.block, obs.canonical()))
}

/// A finite value, else `None` (JSON has no NaN or infinity).
fn finite(x: f64) -> Option<f64> {
    x.is_finite().then_some(x)
}

/// The bounds a condition puts on the checked value, evaluated as the check was.
fn bounds(condition: &Condition, values: &Values) -> Bounds {
    let val = |ex: &Ex| ex.expr.eval(values).ok().and_then(|q| finite(q.value));
    match condition {
        Condition::Near(v, tol) => {
            let near = val(v);
            let width = match tol {
                Tol::Abs(t) => val(t),
                Tol::Rel(r) => near.map(|v| r * v.abs()),
            };
            let (lo, hi) = match (near, width) {
                (Some(v), Some(w)) => (Some(v - w), Some(v + w)),
                _ => (None, None),
            };
            Bounds { lo, hi, near }
        }
        Condition::Below(b) => Bounds {
            lo: None,
            hi: val(b),
            near: None,
        },
        Condition::Above(a) => Bounds {
            lo: val(a),
            hi: None,
            near: None,
        },
        Condition::Between(a, b) => Bounds {
            lo: val(a),
            hi: val(b),
            near: None,
        },
    }
}

/// The selection of a checked path, with its `at` values evaluated; `None` when the path reads
/// no series or a value cannot be evaluated.
fn selection(path: &ResultPath, values: &Values) -> Option<Selection> {
    let at = path
        .at
        .iter()
        .map(|(axis, _, text, _)| {
            let value = expr::parse(text).ok()?.eval(values).ok()?.value;
            Some(AtValue {
                axis: axis.clone(),
                value: finite(value)?,
            })
        })
        .collect::<Option<Vec<_>>>()?;
    let reduce = path.reduce.map(|r| {
        match r {
            Reduce::Max => "max",
            Reduce::Min => "min",
            Reduce::ArgMax => "argmax",
            Reduce::ArgMin => "argmin",
        }
        .to_string()
    });
    Some(Selection {
        series: series_key(path)?,
        reduce,
        at,
    })
}

/// Bounds and selection of the check whose path sits at `span`.
fn check_detail(
    doc: &Document,
    values: &Values,
    span: &Span,
) -> (Option<Bounds>, Option<Selection>) {
    doc.blocks()
        .filter_map(|b| match &b.block {
            Some(Block::Check(k)) => Some(k),
            _ => None,
        })
        .flat_map(|k| &k.items)
        .find(|item| item.path.span == *span)
        .map_or((None, None), |item| {
            (
                Some(bounds(&item.condition, values)),
                selection(&item.path.path, values),
            )
        })
}

fn hex(bytes: &[u8]) -> String {
    bytes.iter().map(|b| format!("{b:02x}")).collect()
}

/// SHA-256 of `text`, hex.
pub fn sha256(text: &[u8]) -> String {
    hex(&Sha256::digest(text))
}

fn message(doc: &Document, span_start: usize, text: &str) -> Message {
    let (line, column) = doc.source.line_col(span_start);
    Message {
        line,
        column,
        message: text.to_string(),
    }
}

fn shown(v: &PathValue) -> String {
    match v {
        PathValue::Scalar(x, d) => format_quantity(*x, *d),
        PathValue::Series { y, .. } => format!("a series of {} values", y.len()),
        PathValue::Map { z, .. } => format!("a map of {} values", z.len()),
    }
}

fn column(label: &str, v: &PathValue) -> Option<(Column, Option<Column>)> {
    match v {
        PathValue::Scalar(x, d) => Some((
            Column {
                label: label.into(),
                title: None,
                dim: d.0,
                values: vec![*x],
            },
            None,
        )),
        PathValue::Series {
            axis,
            x,
            x_dim,
            y,
            y_dim,
        } => Some((
            Column {
                label: label.into(),
                title: None,
                dim: y_dim.0,
                values: y.clone(),
            },
            Some(Column {
                label: axis.clone(),
                title: None,
                dim: x_dim.0,
                values: x.clone(),
            }),
        )),
        PathValue::Map { .. } => None,
    }
}

/// A plot's data as a record output: curves over x, or a heat map oriented as the plot asks.
/// `titles` name the series for a reader, one per series (x first).
fn plot_output(
    title: &str,
    series: &[(String, PathValue)],
    titles: &[String],
    y_title: Option<&String>,
    (log_x, log_y): (bool, bool),
    map: bool,
) -> Option<CellOutput> {
    let named = |k: usize| titles.get(k).cloned();
    let (x_label, x_value) = series.first()?;
    if map {
        let (_, PathValue::Map { axes, z, dim }) = series.last()? else {
            return None;
        };
        let (z_label, _) = series.last()?;
        let x_name = match x_value {
            PathValue::Series { axis, .. } => axis.clone(),
            _ => return None,
        };
        let (nx, ny) = (axes[0].1.len(), axes[1].1.len());
        // Stored outer-axis-major; transpose when the plot puts the inner axis along x.
        let (xa, ya, zs) = if axes[0].0 == x_name {
            (&axes[0], &axes[1], z.clone())
        } else {
            let mut t = vec![0.0; z.len()];
            for i in 0..nx {
                for j in 0..ny {
                    t[j * nx + i] = z[i * ny + j];
                }
            }
            (&axes[1], &axes[0], t)
        };
        let col = |a: &(String, Vec<f64>, crate::notebook::expr::Dim), title| Column {
            label: a.0.clone(),
            title,
            dim: a.2.0,
            values: a.1.clone(),
        };
        return Some(CellOutput::Map {
            title: title.into(),
            x: Column {
                label: x_label.clone(),
                ..col(xa, named(0))
            },
            y: col(ya, named(1)),
            z: Column {
                label: z_label.clone(),
                title: named(series.len() - 1),
                dim: dim.0,
                values: zs,
            },
        });
    }
    let x = match x_value {
        PathValue::Series { y, y_dim, .. } => Column {
            label: x_label.clone(),
            title: named(0),
            dim: y_dim.0,
            values: y.clone(),
        },
        _ => return None,
    };
    let curves = series[1..]
        .iter()
        .enumerate()
        .filter_map(|(k, (l, v))| {
            column(l, v).map(|c| Column {
                title: named(k + 1),
                ..c.0
            })
        })
        .collect();
    Some(CellOutput::Curves {
        title: title.into(),
        x,
        curves,
        y_title: y_title.cloned(),
        log_x,
        log_y,
    })
}

/// The document's cells with the outputs of the blocks that ran.
fn cells(doc: &Document, outcome: &RunOutcome) -> Vec<CellRecord> {
    let mut out = Vec::new();
    let mut block = 0;
    let mut check_base = 0;
    for cell in &doc.cells {
        match cell {
            crate::notebook::DocCell::Prose(span) => out.push(CellRecord {
                kind: "prose".into(),
                name: None,
                line: doc.source.line_col(span.start).0,
                text: doc.source.text()[span.clone()].to_string(),
                output: None,
            }),
            crate::notebook::DocCell::Block(b) => {
                let output =
                    outcome
                        .outputs
                        .iter()
                        .find(|(i, _)| *i == block)
                        .and_then(|(_, o)| match o {
                            Output::Evolve { name, .. } => Some(CellOutput::Results {
                                block: name.clone(),
                            }),
                            Output::Plot {
                                title,
                                series,
                                titles,
                                y_title,
                                log_x,
                                log_y,
                                map,
                            } => plot_output(
                                title,
                                series,
                                titles,
                                y_title.as_ref(),
                                (*log_x, *log_y),
                                *map,
                            ),
                            Output::Table { title, columns } => Some(CellOutput::Table {
                                title: title.clone(),
                                columns: columns
                                    .iter()
                                    .filter_map(|(l, v)| column(l, v).map(|c| c.0))
                                    .collect(),
                            }),
                            Output::Checks(cs) => {
                                let indices = (check_base..check_base + cs.len()).collect();
                                check_base += cs.len();
                                Some(CellOutput::Checks { indices })
                            }
                        });
                out.push(CellRecord {
                    kind: b.raw.kind.clone(),
                    name: b.raw.name.as_ref().map(|(n, _)| n.clone()),
                    line: doc.source.line_col(b.raw.span.start).0,
                    text: doc.source.text()[b.raw.span.clone()].to_string(),
                    output,
                });
                block += 1;
            }
        }
    }
    out
}

/// Assemble the record of a run. `date` is the run's UTC time in ISO 8601.
pub fn build(
    doc: &Document,
    checked: &Checked<'_>,
    outcome: &RunOutcome,
    diags: &[Diagnostic],
    date: String,
) -> Record {
    let name = std::path::Path::new(doc.source.name())
        .file_stem()
        .map_or("run".into(), |s| s.to_string_lossy().into_owned());
    let parameters = checked
        .scope
        .params
        .iter()
        .filter_map(|p| {
            let q = checked.values.get(&p.name)?;
            Some(ParamRecord {
                name: p.name.clone(),
                value: q.value,
                dim: q.dim.0,
                shown: format_quantity(q.value, q.dim),
                expr: p.ex.text().to_string(),
                overridden: p.overridden.is_some(),
            })
        })
        .collect();
    let mut results = Vec::new();
    let mut checks = Vec::new();
    let mut timings = Vec::new();
    for (_, o) in &outcome.outputs {
        match o {
            Output::Evolve {
                name,
                result,
                cached,
                seconds,
            } => {
                results.push(NamedResult {
                    block: name.clone(),
                    result: result.clone(),
                });
                timings.push(Timing {
                    block: name.clone(),
                    seconds: *seconds,
                    cached: *cached,
                });
            }
            Output::Checks(cs) => checks.extend(cs.iter().map(|c| {
                let (bounds, selection) = check_detail(doc, &checked.values, &c.span);
                CheckRecord {
                    path: c.path.clone(),
                    line: doc.source.line_col(c.span.start).0,
                    got: c.got,
                    dim: c.dim.0,
                    shown: format_quantity(c.got, c.dim),
                    expected: c.expected.clone(),
                    passed: c.passed,
                    bounds,
                    selection,
                }
            })),
            Output::Plot { .. } | Output::Table { .. } => {}
        }
    }
    let inline = outcome
        .inline
        .iter()
        .map(|(path, span, v)| InlineRecord {
            path: path.clone(),
            line: doc.source.line_col(span.start).0,
            shown: match v {
                Ok(v) => shown(v),
                Err(e) => format!("({e})"),
            },
        })
        .collect();
    let warnings = diags
        .iter()
        .filter(|d| d.severity == Severity::Warning)
        .map(|d| message(doc, d.span.start, &d.message))
        .collect();
    let errors = outcome
        .errors
        .iter()
        .map(|e| message(doc, e.span.start, &e.message))
        .collect();
    let cells = cells(doc, outcome);
    let mut r = Record {
        format: FORMAT.into(),
        version: VERSION,
        name,
        source: SourceInfo {
            file: doc.source.name().to_string(),
            text: doc.source.text().to_string(),
            sha256: sha256(doc.source.text().as_bytes()),
        },
        cells,
        parameters,
        results,
        checks,
        inline,
        warnings,
        errors,
        lineage: Lineage::default(),
        volatile: Volatile {
            date,
            tool_version: env!("CARGO_PKG_VERSION").into(),
            commit: option_env!("FIELDBOOK_COMMIT").unwrap_or("unknown").into(),
            platform: format!("{}-{}", std::env::consts::OS, std::env::consts::ARCH),
            timings,
        },
    };
    r.lineage.results_sha256 = r.content_hash();
    r
}

impl Record {
    /// SHA-256 over the record without `volatile` and `lineage`.
    pub fn content_hash(&self) -> String {
        let mut copy = self.clone();
        copy.lineage = Lineage::default();
        copy.volatile.date.clear();
        copy.volatile.timings.clear();
        copy.volatile.platform.clear();
        copy.volatile.commit.clear();
        copy.volatile.tool_version.clear();
        let json = serde_json::to_vec(&copy).unwrap_or_default();
        sha256(&json)
    }
}

/// The current UTC time as `YYYY-MM-DDTHH:MM:SSZ` (civil-from-days conversion of H. Hinnant,
/// "chrono-compatible low-level date algorithms", 2013, common practice).
pub fn utc_now() -> String {
    let secs = std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .map_or(0, |d| d.as_secs()) as i64;
    iso8601(secs)
}

/// Seconds since 1970-01-01T00:00:00Z as ISO 8601 UTC.
pub fn iso8601(secs: i64) -> String {
    let (days, rem) = (secs.div_euclid(86_400), secs.rem_euclid(86_400));
    let z = days + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z - era * 146_097;
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let d = doy - (153 * mp + 2) / 5 + 1;
    let m = if mp < 10 { mp + 3 } else { mp - 9 };
    let y = yoe + era * 400 + i64::from(m <= 2);
    format!(
        "{y:04}-{m:02}-{d:02}T{:02}:{:02}:{:02}Z",
        rem / 3600,
        rem % 3600 / 60,
        rem % 60
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn checks_written_before_bounds_existed_still_read() {
        let old = r#"{"path": "a.final.norm", "line": 3, "got": 1.0, "dim": [0, 0, 0, 0, 0],
            "shown": "1.000", "expected": "≥ 0.9", "passed": true}"#;
        let c: CheckRecord = serde_json::from_str(old).unwrap();
        assert_eq!((c.bounds, c.selection), (None, None));
    }

    #[test]
    fn series_keys_are_canonical() {
        let key = |p: &str| series_key(&crate::notebook::path::parse_path(p).unwrap());
        assert_eq!(
            key("max( run.trace.population(g,r) ) at x = 1").as_deref(),
            Some("run.trace.population(g, r)")
        );
        assert_eq!(
            key("s.final.bloch(g, e).w").as_deref(),
            Some("s.final.bloch(g, e).w")
        );
        assert_eq!(key("run.time"), None);
        assert_eq!(key("s.delta"), None);
    }

    #[test]
    fn utc_dates_follow_the_civil_calendar() {
        // Reference instants from Python's datetime.fromtimestamp(s, timezone.utc).
        assert_eq!(iso8601(0), "1970-01-01T00:00:00Z");
        assert_eq!(iso8601(951_782_400), "2000-02-29T00:00:00Z");
        assert_eq!(iso8601(1_796_215_599), "2026-12-02T12:46:39Z");
        assert_eq!(iso8601(-1), "1969-12-31T23:59:59Z");
    }
}
