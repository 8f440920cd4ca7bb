//! Diagnostics: a problem found in a run-file, where it is, and how to fix it; rendered as
//! `file:line:column` with the offending text underlined.

use std::fmt::Write as _;

use super::source::{Source, Span};

/// How bad a problem is.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord)]
pub enum Severity {
    /// Worth reading; the file still runs.
    Warning,
    /// The file cannot run until this is fixed.
    Error,
}

/// One problem, located in the run-file.
#[derive(Clone, Debug, PartialEq)]
pub struct Diagnostic {
    /// Error or warning.
    pub severity: Severity,
    /// Byte range of the offending text in the run-file.
    pub span: Span,
    /// What is wrong, lowercase, no trailing period.
    pub message: String,
    /// How to fix it, if we know.
    pub hint: Option<String>,
}

impl Diagnostic {
    /// An error at `span`.
    pub fn error(span: Span, message: impl Into<String>) -> Self {
        Self {
            severity: Severity::Error,
            span,
            message: message.into(),
            hint: None,
        }
    }

    /// A warning at `span`.
    pub fn warning(span: Span, message: impl Into<String>) -> Self {
        Self {
            severity: Severity::Warning,
            span,
            message: message.into(),
            hint: None,
        }
    }

    /// Attach a hint.
    pub fn with_hint(mut self, hint: impl Into<String>) -> Self {
        self.hint = Some(hint.into());
        self
    }

    /// Attach a hint if there is one.
    pub fn with_hint_opt(mut self, hint: Option<String>) -> Self {
        self.hint = hint;
        self
    }

    /// Whether this stops the run.
    pub fn is_error(&self) -> bool {
        self.severity == Severity::Error
    }

    /// `file:line:column` of the start of the span.
    pub fn location(&self, src: &Source) -> String {
        let (line, col) = src.line_col(self.span.start);
        format!("{}:{line}:{col}", src.name())
    }

    /// The diagnostic as text: a header line, the source line with the span underlined
    /// (first line of a multi-line span only), and the hint.
    pub fn render(&self, src: &Source) -> String {
        let kind = match self.severity {
            Severity::Error => "error",
            Severity::Warning => "warning",
        };
        let mut out = format!("{kind}: {}\n  --> {}\n", self.message, self.location(src));
        let (line, col) = src.line_col(self.span.start);
        let text = src.line_text(line);
        let line_end = src.line_start(line) + text.len();
        // The span may start in a trimmed line ending (`\r`); underline from within the line.
        let start = src.floor_char(self.span.start.min(line_end));
        let end = src.floor_char(self.span.end.clamp(start, line_end));
        let width = src.text()[start..end].chars().count().max(1);
        let gutter = line.to_string().len();
        let shown: String = text
            .chars()
            .map(|c| if c == '\t' { ' ' } else { c })
            .collect();
        let _ = writeln!(out, "{:gutter$} |", "");
        let _ = writeln!(out, "{line} | {shown}");
        let _ = writeln!(
            out,
            "{:gutter$} | {:pad$}{}",
            "",
            "",
            "^".repeat(width),
            pad = col - 1
        );
        if let Some(h) = &self.hint {
            let _ = writeln!(out, "{:gutter$} = hint: {h}", "");
        }
        out
    }
}

/// The closest of `candidates` to `word`, if it is close enough to be a likely typo.
pub fn did_you_mean<'a>(
    word: &str,
    candidates: impl IntoIterator<Item = &'a str>,
) -> Option<&'a str> {
    candidates
        .into_iter()
        .map(|c| (strsim::jaro_winkler(word, c), c))
        .filter(|(score, _)| *score > 0.8)
        .max_by(|a, b| a.0.total_cmp(&b.0))
        .map(|(_, c)| c)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn renders_location_underline_and_hint() {
        let src = Source::new(
            "lab/rabi.md",
            "# Title\n\n```light probe\ndetunning = \"0 Hz\"\n```\n",
        );
        let start = src.text().find("detunning").unwrap();
        let d = Diagnostic::error(
            start..start + 9,
            "unknown key `detunning` in a `light` block",
        )
        .with_hint("did you mean `detuning`?");
        let text = d.render(&src);
        assert!(text.contains("--> lab/rabi.md:4:1"), "{text}");
        assert!(text.contains("4 | detunning = \"0 Hz\""), "{text}");
        assert!(text.contains("  | ^^^^^^^^^\n"), "{text}");
        assert!(text.contains("= hint: did you mean `detuning`?"), "{text}");
    }

    #[test]
    fn suggestions_need_a_close_match() {
        assert_eq!(
            did_you_mean("detunning", ["rabi", "detuning"]),
            Some("detuning")
        );
        assert_eq!(did_you_mean("xyz", ["rabi", "detuning"]), None);
    }
}
