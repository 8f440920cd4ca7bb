//! A run-file's text with its name, and the byte offset → line:column mapping diagnostics use.

use std::ops::Range;

/// Byte range within a run-file's text.
pub type Span = Range<usize>;

/// One run-file as read from disk (already checked to be UTF-8).
#[derive(Clone, Debug)]
pub struct Source {
    name: String,
    text: String,
    line_starts: Vec<usize>,
}

impl Source {
    /// Wrap `text`, read from the file called `name` (as the user typed the path).
    pub fn new(name: impl Into<String>, text: impl Into<String>) -> Self {
        let text = text.into();
        let mut line_starts = vec![0];
        line_starts.extend(text.match_indices('\n').map(|(i, _)| i + 1));
        Self {
            name: name.into(),
            text,
            line_starts,
        }
    }

    /// The file name as given.
    pub fn name(&self) -> &str {
        &self.name
    }

    /// The whole text.
    pub fn text(&self) -> &str {
        &self.text
    }

    /// 1-based line and column (in characters) of byte offset `at`, clamped to the text.
    pub fn line_col(&self, at: usize) -> (usize, usize) {
        let at = self.floor_char(at.min(self.text.len()));
        let line = self.line_starts.partition_point(|&s| s <= at) - 1;
        let col = self.text[self.line_starts[line]..at].chars().count() + 1;
        (line + 1, col)
    }

    /// The text of 1-based line `line` without its line ending.
    pub fn line_text(&self, line: usize) -> &str {
        let start = self.line_starts[line - 1];
        let end = self
            .line_starts
            .get(line)
            .map_or(self.text.len(), |&e| e - 1);
        self.text[start..end].trim_end_matches('\r')
    }

    /// Byte offset where 1-based line `line` starts.
    pub fn line_start(&self, line: usize) -> usize {
        self.line_starts[line - 1]
    }

    /// The largest char boundary ≤ `at`.
    pub fn floor_char(&self, mut at: usize) -> usize {
        while at > 0 && !self.text.is_char_boundary(at) {
            at -= 1;
        }
        at
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn columns_count_characters_not_bytes() {
        let s = Source::new("x.md", "ab\nµs = 1\n\nlast");
        assert_eq!(s.line_col(0), (1, 1));
        assert_eq!(s.line_col(3), (2, 1));
        // `s` after the two-byte µ is the second character of line 2.
        assert_eq!(s.line_col(5), (2, 2));
        assert_eq!(s.line_col(s.text().len()), (4, 5));
        assert_eq!(s.line_text(2), "µs = 1");
        assert_eq!(s.line_text(3), "");
        // An offset inside a multi-byte character falls back to its start.
        assert_eq!(s.line_col(4), (2, 1));
    }
}
