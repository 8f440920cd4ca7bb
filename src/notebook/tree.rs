//! A scenario block's TOML body as a tree whose every key and value carries its byte span in
//! the run-file, so that later stages can point at any offending piece.

use toml::de::{DeTable, DeValue};

use super::diag::Diagnostic;
use super::source::Span;

/// Deepest bracket nesting accepted in a body; deeper input is refused before parsing.
pub const MAX_DEPTH: usize = 32;

/// A TOML key with its span.
#[derive(Clone, Debug, PartialEq)]
pub struct Key {
    /// The key as written (unquoted).
    pub name: String,
    /// Where it is in the run-file.
    pub span: Span,
}

/// A TOML value with its span in the run-file.
#[derive(Clone, Debug, PartialEq)]
pub struct Node {
    /// The value.
    pub value: Value,
    /// Where it is, delimiters included.
    pub span: Span,
}

/// The kinds of TOML value a body can hold.
#[derive(Clone, Debug, PartialEq)]
pub enum Value {
    /// A string; `content` is the run-file offset of its first character when the text between
    /// the quotes is the value itself (no escapes), so positions inside it can be mapped.
    Str {
        /// The decoded string.
        text: String,
        /// Run-file offset of the first character of `text`, when it maps one to one.
        content: Option<usize>,
    },
    /// An integer.
    Int(i64),
    /// A finite float.
    Float(f64),
    /// A boolean.
    Bool(bool),
    /// An array.
    Array(Vec<Node>),
    /// A table (inline or not), keys in source order.
    Table(Vec<(Key, Node)>),
    /// A TOML date or time, which no block accepts.
    Datetime,
    /// A value already reported as invalid (a non-finite float, an integer too large); readers
    /// skip it without a second message.
    Invalid,
}

impl Value {
    /// The TOML type's name, for messages.
    pub fn type_name(&self) -> &'static str {
        match self {
            Value::Str { .. } => "a string",
            Value::Int(_) => "an integer",
            Value::Float(_) => "a float",
            Value::Bool(_) => "a boolean",
            Value::Array(_) => "an array",
            Value::Table(_) => "a table",
            Value::Datetime => "a date",
            Value::Invalid => "an invalid value",
        }
    }
}

impl Node {
    /// The entries if this is a table.
    pub fn as_table(&self) -> Option<&[(Key, Node)]> {
        match &self.value {
            Value::Table(t) => Some(t),
            _ => None,
        }
    }

    /// The string if this is one.
    pub fn as_str(&self) -> Option<&str> {
        match &self.value {
            Value::Str { text, .. } => Some(text),
            _ => None,
        }
    }
}

/// Parse a body that starts at run-file offset `base`. Every TOML error becomes a diagnostic;
/// on error the tree is `None`.
pub fn parse(body: &str, base: usize) -> (Option<Vec<(Key, Node)>>, Vec<Diagnostic>) {
    if let Some(at) = too_deep(body) {
        return (
            None,
            vec![
                Diagnostic::error(
                    base + at..base + at + 1,
                    format!("the TOML here is nested more than {MAX_DEPTH} levels deep"),
                )
                .with_hint("scenario blocks need at most three or four levels of nesting"),
            ],
        );
    }
    match DeTable::parse(body) {
        Ok(table) => {
            let mut diags = Vec::new();
            let entries = convert_table(table.get_ref(), body, base, &mut diags);
            (Some(entries), diags)
        }
        Err(e) => {
            let span = e.span().unwrap_or(0..0);
            let span = base + span.start..base + span.end.max(span.start + 1).min(body.len());
            let msg = e.message().trim_end_matches('.').to_string();
            (
                None,
                vec![
                    Diagnostic::error(span, format!("TOML syntax: {msg}")).with_hint(
                        "block bodies are TOML: `key = \"value\"`, strings in double quotes",
                    ),
                ],
            )
        }
    }
}

/// Offset of the first bracket that opens level `MAX_DEPTH + 1`, skipping strings and comments.
fn too_deep(body: &str) -> Option<usize> {
    let bytes = body.as_bytes();
    let (mut depth, mut i) = (0usize, 0usize);
    while i < bytes.len() {
        match bytes[i] {
            b'"' | b'\'' => {
                let q = bytes[i];
                i += 1;
                while i < bytes.len() && bytes[i] != q && bytes[i] != b'\n' {
                    if q == b'"' && bytes[i] == b'\\' {
                        i += 1;
                    }
                    i += 1;
                }
            }
            b'#' => {
                while i < bytes.len() && bytes[i] != b'\n' {
                    i += 1;
                }
            }
            b'[' | b'{' => {
                depth += 1;
                if depth > MAX_DEPTH {
                    return Some(i);
                }
            }
            b']' | b'}' => depth = depth.saturating_sub(1),
            _ => {}
        }
        i += 1;
    }
    None
}

fn convert_table(
    t: &DeTable<'_>,
    body: &str,
    base: usize,
    diags: &mut Vec<Diagnostic>,
) -> Vec<(Key, Node)> {
    t.iter()
        .map(|(k, v)| {
            let ks = k.span();
            let key = Key {
                name: k.get_ref().to_string(),
                span: base + ks.start..base + ks.end,
            };
            (key, convert(v.get_ref(), v.span(), body, base, diags))
        })
        .collect()
}

fn convert(
    v: &DeValue<'_>,
    span: Span,
    body: &str,
    base: usize,
    diags: &mut Vec<Diagnostic>,
) -> Node {
    let abs = base + span.start..base + span.end;
    let value = match v {
        DeValue::String(s) => {
            let raw = body.get(span.clone()).unwrap_or("");
            let delim = if raw.starts_with("\"\"\"") || raw.starts_with("'''") {
                3
            } else {
                1
            };
            let content = (raw.len() >= 2 * delim
                && raw.get(delim..raw.len() - delim) == Some(s.as_ref()))
            .then_some(abs.start + delim);
            Value::Str {
                text: s.to_string(),
                content,
            }
        }
        DeValue::Integer(i) => {
            let text = i.as_str().replace('_', "");
            let parsed = match i.radix() {
                10 => text.parse::<i64>().ok(),
                r => i64::from_str_radix(text.trim_start_matches(['0', 'x', 'o', 'b']), r).ok(),
            };
            match parsed {
                Some(n) => Value::Int(n),
                None => {
                    diags.push(
                        Diagnostic::error(
                            abs.clone(),
                            format!("the integer `{text}` does not fit in 64 bits"),
                        )
                        .with_hint("write large numbers as floats, e.g. `1e20`"),
                    );
                    Value::Invalid
                }
            }
        }
        DeValue::Float(f) => {
            let text = f.as_str().replace('_', "");
            match text.parse::<f64>() {
                Ok(x) if x.is_finite() => Value::Float(x),
                _ => {
                    diags.push(
                        Diagnostic::error(abs.clone(), format!("`{text}` is not a finite number"))
                            .with_hint("NaN and infinite values have no physical meaning here; give a finite value"),
                    );
                    Value::Invalid
                }
            }
        }
        DeValue::Boolean(b) => Value::Bool(*b),
        DeValue::Datetime(_) => Value::Datetime,
        DeValue::Array(a) => Value::Array(
            a.iter()
                .map(|x| convert(x.get_ref(), x.span(), body, base, diags))
                .collect(),
        ),
        DeValue::Table(t) => Value::Table(convert_table(t, body, base, diags)),
    };
    Node { value, span: abs }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn spans_are_absolute_and_string_contents_map() {
        let body = "rabi = \"2π × 5 MHz\"\nn = 3\n[sweep.delta]\nfrom = 1.5\n";
        let (t, d) = parse(body, 100);
        assert!(d.is_empty());
        let t = t.unwrap();
        assert_eq!(t[0].0.name, "rabi");
        assert_eq!(t[0].0.span, 100..104);
        match &t[0].1.value {
            Value::Str { text, content } => {
                assert_eq!(text, "2π × 5 MHz");
                assert_eq!(*content, Some(108));
            }
            v => panic!("{v:?}"),
        }
        assert_eq!(t[1].1.value, Value::Int(3));
        let sweep = t[2].1.as_table().unwrap();
        assert_eq!(sweep[0].0.name, "delta");
    }

    #[test]
    fn escaped_strings_do_not_claim_a_mapping() {
        let (t, _) = parse("a = \"x\\ty\"", 0);
        assert!(matches!(
            t.unwrap()[0].1.value,
            Value::Str { content: None, .. }
        ));
    }

    #[test]
    fn syntax_errors_and_non_finite_numbers_are_diagnostics() {
        let (t, d) = parse("a = \nb = 2", 10);
        assert!(t.is_none());
        assert!(d[0].message.starts_with("TOML syntax"), "{:?}", d);
        assert!(d[0].span.start >= 10);
        let (_, d) = parse("a = nan\nb = inf", 0);
        assert_eq!(d.len(), 2);
    }

    #[test]
    fn deep_nesting_is_refused_before_parsing() {
        let body = format!("a = {}{}", "[".repeat(10_000), "]".repeat(10_000));
        let (t, d) = parse(&body, 0);
        assert!(t.is_none());
        assert!(d[0].message.contains("nested"));
    }
}
