//! The index of a folder of reports: one row per record in the folder with its title, checks,
//! warnings, date and a link to its report, so a folder written by `run --out` opens at one page.

use std::fmt::Write as _;
use std::path::Path;

use super::{PageKind, RenderError, STYLE, escape, fill, template_file, title};
use crate::record::Record;

/// The page template built in; an `index.html` in the `templates` folder replaces it.
const TEMPLATE: &str = include_str!("../../templates/index.html");

/// One row of the index.
#[derive(Clone, Debug, PartialEq)]
pub struct Entry {
    /// The record's name, which names its files (`NAME.record.json`, `NAME.html`).
    pub name: String,
    /// The run-file's title.
    pub title: String,
    /// The run-file as it was given.
    pub file: String,
    /// What its record holds; `None` when there is no readable record.
    pub counts: Option<Counts>,
    /// When it ran (UTC, ISO 8601).
    pub date: String,
    /// Whether `NAME.html` is beside the record, to link to.
    pub report: bool,
    /// Why this row is not the latest run's, or why its record could not be read.
    pub note: Option<String>,
}

/// The outcome of a run, counted.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Counts {
    /// Checks that held.
    pub held: usize,
    /// Checks that failed.
    pub failed: usize,
    /// Runtime errors.
    pub errors: usize,
    /// Warnings.
    pub warnings: usize,
}

impl Entry {
    /// The row of `record`; `report` says whether its HTML report exists beside it.
    pub fn of(record: &Record, report: bool) -> Entry {
        let failed = record.checks.iter().filter(|c| !c.passed).count();
        Entry {
            name: record.name.clone(),
            title: title(record),
            file: record.source.file.clone(),
            counts: Some(Counts {
                held: record.checks.len() - failed,
                failed,
                errors: record.errors.len(),
                warnings: record.warnings.len(),
            }),
            date: record.volatile.date.clone(),
            report,
            note: None,
        }
    }

    /// A row for a name without a readable record, saying why.
    pub fn missing(name: &str, file: &str, note: String) -> Entry {
        Entry {
            name: name.into(),
            title: name.into(),
            file: file.into(),
            counts: None,
            date: String::new(),
            report: false,
            note: Some(note),
        }
    }
}

/// `text` as one segment of a relative URL: unreserved characters kept, every other byte
/// percent-encoded, so a name with spaces, `#` or `?` still links to its file.
fn url_segment(text: &str) -> String {
    let mut out = String::with_capacity(text.len());
    for b in text.bytes() {
        if b.is_ascii_alphanumeric() || matches!(b, b'-' | b'.' | b'_' | b'~') {
            out.push(char::from(b));
        } else {
            let _ = write!(out, "%{b:02X}");
        }
    }
    out
}

/// The index page of the folder called `folder` with `entries` in order. `templates` is a
/// folder whose `index.html` and `style.css`, where present, replace the built-in ones.
pub fn page(
    folder: &str,
    entries: &[Entry],
    templates: Option<&Path>,
) -> Result<String, RenderError> {
    let template = template_file(templates, "index.html", TEMPLATE)?;
    let style = template_file(templates, "style.css", STYLE)?;
    let failing = entries
        .iter()
        .filter(|e| e.note.is_some() || e.counts.is_none_or(|c| c.failed > 0 || c.errors > 0))
        .count();
    let warned = entries
        .iter()
        .filter(|e| e.counts.is_some_and(|c| c.warnings > 0))
        .count();
    let (class, headline) = match (entries.len(), failing) {
        (0, _) => ("fb-none", "No reports in this folder".to_string()),
        (n, 0) => (
            "fb-held",
            format!("{n} run-file{}, every check held", plural(n)),
        ),
        (n, f) => (
            "fb-failed",
            format!("{f} of {n} run-file{} need attention", plural(n)),
        ),
    };
    let summary = format!(
        "<section class=\"fb-banner {class}\"><p class=\"fb-headline\">{}</p><p>{}</p></section>",
        escape(&headline),
        match warned {
            0 => "No warnings".to_string(),
            w => format!("{w} with warnings"),
        }
    );
    let mut rows = String::from(
        "<table class=\"fb-index\"><tr><th>run-file</th><th>checks</th><th>warnings</th>\
         <th>errors</th><th>run</th></tr>",
    );
    for e in entries {
        let title = if e.report {
            format!(
                "<a href=\"{}.html\">{}</a>",
                escape(&url_segment(&e.name)),
                escape(&e.title)
            )
        } else {
            escape(&e.title)
        };
        let note = e.note.as_ref().map_or(String::new(), |n| {
            format!("<br><span class=\"fb-overridden\">{}</span>", escape(n))
        });
        let checks = match e.counts.map(|c| (c.held, c.failed)) {
            None => ("", "—".to_string()),
            Some((0, 0)) => ("", "none".to_string()),
            Some((h, 0)) => ("", format!("{h} held")),
            Some((h, f)) => ("fb-failed", format!("{f} of {} failed", h + f)),
        };
        let cell = |n: Option<usize>, class: &str| match n {
            None => "<td class=\"fb-num\">—</td>".to_string(),
            Some(0) => "<td class=\"fb-num\">0</td>".to_string(),
            Some(n) => format!("<td class=\"fb-num {class}\">{n}</td>"),
        };
        let _ = write!(
            rows,
            "<tr><td>{title}<br><code>{}</code>{note}</td><td class=\"{}\">{}</td>{}{}<td>{}</td></tr>",
            escape(&e.file),
            checks.0,
            escape(&checks.1),
            cell(e.counts.map(|c| c.warnings), "fb-warned"),
            cell(e.counts.map(|c| c.errors), "fb-failed"),
            escape(&e.date)
        );
    }
    rows.push_str("</table>");
    let (mut page, _) = fill(
        &template,
        &[
            ("title", &escape(folder)),
            ("style", &style),
            ("summary", &summary),
            ("rows", &rows),
        ],
    );
    page.push_str(PageKind::Index.mark());
    Ok(page)
}

fn plural(n: usize) -> &'static str {
    if n == 1 { "" } else { "s" }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn names_become_safe_relative_links() {
        assert_eq!(url_segment("rabi-chevron_2.v1"), "rabi-chevron_2.v1");
        assert_eq!(url_segment("a b#c?d"), "a%20b%23c%3Fd");
        assert_eq!(url_segment("Ω"), "%CE%A9");
    }

    #[test]
    fn rows_link_only_to_reports_that_exist_and_flag_failures() {
        let ok = Entry {
            name: "a b".into(),
            title: "Line <A>".into(),
            file: "notes/a b.md".into(),
            counts: Some(Counts {
                held: 3,
                failed: 0,
                errors: 0,
                warnings: 2,
            }),
            date: "2026-01-01T00:00:00Z".into(),
            report: true,
            note: None,
        };
        let gone = Entry::missing("c", "c.md", "input error: no report".into());
        let page = page("out", &[ok, gone], None).unwrap();
        assert!(
            page.contains("<a href=\"a%20b.html\">Line &lt;A&gt;</a>"),
            "{page}"
        );
        assert!(!page.contains("href=\"c.html\""));
        assert!(page.contains("input error: no report"));
        assert!(page.contains("1 of 2 run-files need attention"));
        assert!(page.contains("<td class=\"fb-num fb-warned\">2</td>"));
        assert!(page.trim_end().ends_with("<!-- fieldbook index page -->"));
    }
}
