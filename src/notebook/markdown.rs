//! Splitting a run-file into cells: prose, scenario blocks (fenced blocks whose info string is
//! `KIND [NAME]`) and inline values (inline code starting with `=`), all with source offsets.

use pulldown_cmark::{CodeBlockKind, Event, Options, Parser, Tag, TagEnd};

use super::diag::Diagnostic;
use super::source::Span;

/// A block's kind, its span and its optional name with span, as read from an info string.
type Info = (String, Span, Option<(String, Span)>);

/// Every block kind the format knows, in the order SPEC.md lists them.
pub const KINDS: &[&str] = &[
    "params", "atom", "light", "sequence", "evolve", "plot", "table", "check", "rust", "data",
];

/// Kinds reserved for a later version.
pub const RESERVED: &[&str] = &["rust", "data"];

/// A fenced scenario block as found in the Markdown.
#[derive(Clone, Debug, PartialEq)]
pub struct RawBlock {
    /// The block kind (one of [`KINDS`]).
    pub kind: String,
    /// Span of the kind word in the info string.
    pub kind_span: Span,
    /// The name after the kind, with its span.
    pub name: Option<(String, Span)>,
    /// The whole fenced block, fences included.
    pub span: Span,
    /// The body between the fences.
    pub body: String,
    /// Run-file offset of the body's first byte; body offsets map one to one from here.
    pub body_start: usize,
}

/// Inline code starting with `=`: a result to print inside the prose.
#[derive(Clone, Debug, PartialEq)]
pub struct InlineValue {
    /// The text after `=`, trimmed.
    pub path: String,
    /// Run-file offset of `path`'s first byte.
    pub start: usize,
    /// The whole inline code span, backticks included.
    pub span: Span,
}

/// One cell of the document, in order.
#[derive(Clone, Debug, PartialEq)]
pub enum Cell {
    /// Markdown prose (including ordinary code blocks) between scenario blocks.
    Prose(Span),
    /// A scenario block.
    Block(RawBlock),
}

/// The run-file split into cells plus its inline values.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct Cells {
    /// Prose and blocks in document order; together they cover the file.
    pub cells: Vec<Cell>,
    /// Inline values in document order.
    pub inline: Vec<InlineValue>,
}

/// Split `text` into cells. Problems in info strings become diagnostics; the block is then
/// left out (and its text counted as prose).
pub fn split(text: &str) -> (Cells, Vec<Diagnostic>) {
    let mut out = Cells::default();
    let mut diags = Vec::new();
    let mut prose_from = 0;
    let mut open: Option<(Info, usize)> = None;
    let mut body_range: Option<Span> = None;
    let mut text_len = 0;
    let parser = Parser::new_ext(text, Options::empty()).into_offset_iter();
    for (event, range) in parser {
        match event {
            Event::Start(Tag::CodeBlock(CodeBlockKind::Fenced(info))) => {
                if let Some(found) = classify(text, &range, &info, &mut diags) {
                    open = Some((found, range.start));
                    body_range = None;
                    text_len = 0;
                }
            }
            Event::Text(t) if open.is_some() => {
                text_len += t.len();
                body_range = Some(match body_range.take() {
                    Some(r) => r.start..range.end,
                    None => range.clone(),
                });
            }
            Event::End(TagEnd::CodeBlock) => {
                if let Some(((kind, kind_span, name), start)) = open.take() {
                    // An empty body sits right after the opening fence's line.
                    let after_fence = text[start..range.end]
                        .find('\n')
                        .map_or(range.end, |i| start + i + 1);
                    let body = body_range.take().unwrap_or(after_fence..after_fence);
                    // Inside a block quote or a list item the body's lines carry markers or
                    // indentation that are not part of it; such blocks are refused rather than
                    // read with positions that would point at the wrong characters.
                    let crs = text[body.clone()].matches("\r\n").count();
                    if body.len() != text_len && body.len() - crs != text_len {
                        diags.push(
                            Diagnostic::error(
                                kind_span.clone(),
                                format!("this `{kind}` block sits inside a block quote or a list item"),
                            )
                            .with_hint("scenario blocks must start at the left margin, outside quotes and lists"),
                        );
                        continue;
                    }
                    if prose_from < start {
                        out.cells.push(Cell::Prose(prose_from..start));
                    }
                    out.cells.push(Cell::Block(RawBlock {
                        kind,
                        kind_span,
                        name,
                        span: start..range.end,
                        body: text[body.clone()].to_string(),
                        body_start: body.start,
                    }));
                    prose_from = range.end;
                }
            }
            Event::Code(code) if code.starts_with('=') => {
                let raw = &text[range.clone()];
                let lead = raw.find('=').map_or(range.start, |i| range.start + i + 1);
                let path = code[1..].trim();
                let start = text[lead..].find(path).map_or(lead, |i| lead + i);
                out.inline.push(InlineValue {
                    path: path.to_string(),
                    start,
                    span: range,
                });
            }
            _ => {}
        }
    }
    if prose_from < text.len() {
        out.cells.push(Cell::Prose(prose_from..text.len()));
    }
    (out, diags)
}

/// Decide whether a fenced block with info string `info` is a scenario block. Returns its kind
/// and name, or `None` for ordinary code (and for errors, which are pushed).
fn classify(text: &str, range: &Span, info: &str, diags: &mut Vec<Diagnostic>) -> Option<Info> {
    let info_start = text[range.clone()]
        .find(info)
        .map_or(range.start, |i| range.start + i);
    let mut words = Vec::new();
    let mut at = 0;
    for w in info.split_whitespace() {
        let off = info[at..].find(w).map_or(at, |i| at + i);
        words.push((w, info_start + off..info_start + off + w.len()));
        at = off + w.len();
    }
    let (kind, kind_span) = words.first().cloned()?;
    if !KINDS.contains(&kind) {
        if let Some(k) = near_kind(kind) {
            diags.push(
                Diagnostic::error(kind_span, format!("unknown block kind `{kind}`"))
                    .with_hint(format!("did you mean `{k}`? (to keep an ordinary code block, give it another language, such as `text`)")),
            );
        }
        return None;
    }
    if RESERVED.contains(&kind) {
        diags.push(
            Diagnostic::error(kind_span, format!("`{kind}` blocks are not available yet"))
                .with_hint("this kind is reserved for a later version of Fieldbook; use `text` as the info string to keep the block as prose"),
        );
        return None;
    }
    let name = match words.get(1) {
        None => None,
        Some((n, span)) => {
            if !is_name(n) {
                diags.push(
                    Diagnostic::error(span.clone(), format!("`{n}` is not a valid block name"))
                        .with_hint(
                            "names start with a letter and hold letters, digits, `_` and `-`",
                        ),
                );
                return None;
            }
            Some((n.to_string(), span.clone()))
        }
    };
    if let Some((extra, span)) = words.get(2) {
        diags.push(
            Diagnostic::error(
                span.clone(),
                format!("unexpected `{extra}` after the block name"),
            )
            .with_hint("the info string is `KIND [NAME]`"),
        );
        return None;
    }
    Some((kind.to_string(), kind_span, name))
}

/// A block kind within a small edit distance of `word`, for typos like `evolv` or `param`.
fn near_kind(word: &str) -> Option<&'static str> {
    let lower = word.to_lowercase();
    KINDS
        .iter()
        .copied()
        .filter(|k| !RESERVED.contains(k))
        .map(|k| (strsim::levenshtein(&lower, k), k))
        .filter(|&(d, k)| d <= if k.len() >= 5 { 2 } else { 1 })
        .min_by_key(|&(d, _)| d)
        .map(|(_, k)| k)
}

/// Whether `s` is a valid block, level or parameter name.
pub fn is_name(s: &str) -> bool {
    let mut chars = s.chars();
    chars.next().is_some_and(|c| c.is_alphabetic())
        && chars.all(|c| c.is_alphanumeric() || c == '_' || c == '-')
}

/// Whether `s` can name a level: a name, or a Zeeman sublevel or group whose half-integers are
/// written as fractions (`g9/2_m-7/2`, `e3/2`), where a `/` sits between digits.
pub fn is_level_name(s: &str) -> bool {
    let b = s.as_bytes();
    let slashes_ok = b.iter().enumerate().all(|(i, &c)| {
        c != b'/'
            || (i > 0
                && b[i - 1].is_ascii_digit()
                && b.get(i + 1).is_some_and(|d| d.is_ascii_digit()))
    });
    slashes_ok && is_name(&s.replace('/', "_"))
}

#[cfg(test)]
mod tests {
    use super::*;

    const DOC: &str = "# Title\n\nSome prose `= x.final.population(e)` here.\n\n```params\nrabi = \"1 Hz\"\n```\n\n```python\nprint(1)\n```\n\n```evolve run1\n```\nend\n";

    #[test]
    fn blocks_prose_and_inline_values_with_offsets() {
        let (cells, diags) = split(DOC);
        assert!(diags.is_empty(), "{diags:?}");
        let blocks: Vec<&RawBlock> = cells
            .cells
            .iter()
            .filter_map(|c| match c {
                Cell::Block(b) => Some(b),
                Cell::Prose(_) => None,
            })
            .collect();
        assert_eq!(blocks.len(), 2);
        assert_eq!(blocks[0].kind, "params");
        assert_eq!(blocks[0].body, "rabi = \"1 Hz\"\n");
        assert_eq!(&DOC[blocks[0].body_start..blocks[0].body_start + 4], "rabi");
        assert_eq!(blocks[1].name.as_ref().unwrap().0, "run1");
        assert_eq!(blocks[1].body, "");
        assert_eq!(cells.inline.len(), 1);
        let iv = &cells.inline[0];
        assert_eq!(iv.path, "x.final.population(e)");
        assert_eq!(&DOC[iv.start..iv.start + 1], "x");
        // Prose and blocks tile the whole file.
        let mut at = 0;
        for c in &cells.cells {
            let span = match c {
                Cell::Prose(s) => s.clone(),
                Cell::Block(b) => b.span.clone(),
            };
            assert_eq!(span.start, at);
            at = span.end;
        }
        assert_eq!(at, DOC.len());
    }

    #[test]
    fn typos_reserved_kinds_and_bad_names() {
        let (_, d) = split("```evolv x\n```\n");
        assert!(d[0].hint.as_deref().unwrap().contains("`evolve`"));
        let (_, d) = split("```rust\nfn main() {}\n```\n");
        assert!(d[0].message.contains("not available yet"));
        let (_, d) = split("```atom 3x\n```\n");
        assert!(d[0].message.contains("not a valid block name"));
        let (_, d) = split("```atom a b\n```\n");
        assert!(d[0].message.contains("unexpected `b`"));
        let (c, d) = split("```text\nanything\n```\n```sh\nls\n```\n");
        assert!(d.is_empty());
        assert!(matches!(c.cells[..], [Cell::Prose(_)]));
    }
}
