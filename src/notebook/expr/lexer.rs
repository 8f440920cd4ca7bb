//! The lexer: splits an expression string into numbers, names and operators with byte spans.

use super::{ErrorKind, ExprError, Span};

/// What a token is.
#[derive(Clone, Copy, Debug, PartialEq)]
pub(super) enum Tok {
    /// A literal number, already checked to be finite.
    Num(f64),
    /// A name; its text is the source slice at the token's span.
    Ident,
    Plus,
    Minus,
    /// `*`, `×`, `·` or `⋅`.
    Star,
    Slash,
    /// `^` or `**`.
    Caret,
    LParen,
    RParen,
    Comma,
}

/// A token and where it stands.
#[derive(Clone, Debug, PartialEq)]
pub(super) struct Token {
    pub tok: Tok,
    pub span: Span,
}

/// π always stands alone, so `2πf` and `πτ` read as products without spaces.
const PI: char = 'π';

/// Letters that may start a name: ASCII, Greek (without π), the micro sign, ħ and ℏ.
fn starts_name(c: char) -> bool {
    c.is_ascii_alphabetic()
        || c == '_'
        || (('\u{0391}'..='\u{03C9}').contains(&c) && c != PI)
        || matches!(c, 'ϑ' | 'ϕ' | 'ϵ' | 'µ' | 'ħ' | 'ℏ')
}

/// Characters that may continue a name: also digits and subscript digits (`ε₀`, `Ω₁`).
fn continues_name(c: char) -> bool {
    starts_name(c) || c.is_ascii_digit() || ('₀'..='₉').contains(&c)
}

/// Splits `src` into tokens. Fails on a character the language does not use and on a literal
/// number that overflows to infinity.
pub(super) fn lex(src: &str) -> Result<Vec<Token>, ExprError> {
    let mut tokens = Vec::new();
    let mut chars = src.char_indices().peekable();
    while let Some(&(start, c)) = chars.peek() {
        if c.is_whitespace() {
            chars.next();
            continue;
        }
        let char_span = start..start + c.len_utf8();
        let single = |tok| Token {
            tok,
            span: char_span.clone(),
        };
        let token = match c {
            '0'..='9' | '.' => lex_number(src, start)?,
            PI => single(Tok::Ident),
            c if starts_name(c) => {
                let end = src[start..]
                    .char_indices()
                    .find(|&(_, c)| !continues_name(c))
                    .map_or(src.len(), |(i, _)| start + i);
                Token {
                    tok: Tok::Ident,
                    span: start..end,
                }
            }
            '+' => single(Tok::Plus),
            '-' | '−' => single(Tok::Minus),
            '*' if src[start..].starts_with("**") => Token {
                tok: Tok::Caret,
                span: start..start + 2,
            },
            '*' | '×' | '·' | '⋅' => single(Tok::Star),
            '/' => single(Tok::Slash),
            '^' => single(Tok::Caret),
            '(' => single(Tok::LParen),
            ')' => single(Tok::RParen),
            ',' => single(Tok::Comma),
            other => return Err(unexpected_char(other, char_span)),
        };
        // Skip the characters the token covered.
        while chars.peek().is_some_and(|&(i, _)| i < token.span.end) {
            chars.next();
        }
        tokens.push(token);
    }
    Ok(tokens)
}

/// Digits, an optional fraction and an optional exponent. `e` only starts an exponent when a
/// digit (after an optional sign) follows, so `2e` and `2 eV` keep the name.
fn lex_number(src: &str, start: usize) -> Result<Token, ExprError> {
    let bytes = src.as_bytes();
    let digits_from = |mut i: usize| {
        while bytes.get(i).is_some_and(u8::is_ascii_digit) {
            i += 1;
        }
        i
    };
    let mut end = digits_from(start);
    if bytes.get(end) == Some(&b'.') {
        end = digits_from(end + 1);
    }
    let mantissa_digits = src[start..end].bytes().filter(u8::is_ascii_digit).count();
    if mantissa_digits == 0 {
        return Err(ExprError::new(
            ErrorKind::UnexpectedCharacter,
            start..end,
            "unexpected character `.`",
        )
        .hint("write decimals with a digit, like `0.5`"));
    }
    let mut text = src[start..end].to_string();
    if matches!(bytes.get(end), Some(b'e' | b'E')) {
        let rest = &src[end + 1..];
        let (sign, sign_len) = if rest.starts_with('+') {
            ("", 1)
        } else if rest.starts_with('-') {
            ("-", 1)
        } else if rest.starts_with('−') {
            ("-", '−'.len_utf8())
        } else {
            ("", 0)
        };
        let exp_start = end + 1 + sign_len;
        let exp_end = digits_from(exp_start);
        if exp_end > exp_start {
            text.push('e');
            text.push_str(sign);
            text.push_str(&src[exp_start..exp_end]);
            end = exp_end;
        }
    }
    let span = start..end;
    let value: f64 = text.parse().map_err(|_| {
        ExprError::new(
            ErrorKind::UnexpectedToken,
            span.clone(),
            format!("`{}` is not a number", &src[span.clone()]),
        )
    })?;
    if !value.is_finite() {
        return Err(ExprError::new(
            ErrorKind::NumberTooLarge,
            span.clone(),
            format!("the number `{}` is too large", &src[span.clone()]),
        )
        .hint("numbers must stay below about 1.8×10³⁰⁸; use a unit prefix or a smaller exponent"));
    }
    Ok(Token {
        tok: Tok::Num(value),
        span,
    })
}

fn unexpected_char(c: char, span: Span) -> ExprError {
    let error = ExprError::new(
        ErrorKind::UnexpectedCharacter,
        span,
        format!("unexpected character `{c}`"),
    );
    match c {
        '²' | '³' | '¹' | '⁴' | '⁻' => error.hint("write powers with `^`, like `cm^2`"),
        '√' => error.hint("write square roots as `sqrt(…)`"),
        '[' | ']' | '{' | '}' => error.hint("group with round parentheses `(` and `)`"),
        '"' | '\'' | '`' => error.hint("the value is already a string; leave out the quotes"),
        '÷' => error.hint("write division as `/`"),
        '=' => error.hint("write only the value, without `=`"),
        _ => error,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn kinds(src: &str) -> Vec<Tok> {
        lex(src).unwrap().into_iter().map(|t| t.tok).collect()
    }

    fn spans(src: &str) -> Vec<Span> {
        lex(src).unwrap().into_iter().map(|t| t.span).collect()
    }

    #[test]
    fn numbers() {
        assert_eq!(kinds("1e-3"), [Tok::Num(1e-3)]);
        assert_eq!(kinds("2.5E6"), [Tok::Num(2.5e6)]);
        assert_eq!(kinds("1e−3"), [Tok::Num(1e-3)]);
        assert_eq!(kinds(".5"), [Tok::Num(0.5)]);
        assert_eq!(kinds("5."), [Tok::Num(5.0)]);
        // `e` without digits after it is a name: the elementary charge, or the start of `eV`.
        assert_eq!(kinds("2e"), [Tok::Num(2.0), Tok::Ident]);
        assert_eq!(kinds("2eV"), [Tok::Num(2.0), Tok::Ident]);
        assert_eq!(
            kinds("2e-x"),
            [Tok::Num(2.0), Tok::Ident, Tok::Minus, Tok::Ident]
        );
    }

    #[test]
    fn unicode_spans_are_bytes() {
        // π, ×, µ are two bytes each; ₀ is three.
        assert_eq!(spans("2π × 5 µs"), [0..1, 1..3, 4..6, 7..8, 9..12]);
        let name = |span| {
            vec![Token {
                tok: Tok::Ident,
                span,
            }]
        };
        assert_eq!(lex("ε₀").unwrap(), name(0..5));
        assert_eq!(
            kinds("a − b · c ⋅ d ** 2"),
            [
                Tok::Ident,
                Tok::Minus,
                Tok::Ident,
                Tok::Star,
                Tok::Ident,
                Tok::Star,
                Tok::Ident,
                Tok::Caret,
                Tok::Num(2.0)
            ]
        );
    }

    #[test]
    fn pi_stands_alone() {
        assert_eq!(spans("2πf"), [0..1, 1..3, 3..4]);
        assert_eq!(spans("σπ"), [0..2, 2..4]);
        assert_eq!(
            lex("pi").unwrap(),
            [Token {
                tok: Tok::Ident,
                span: 0..2
            }]
        );
    }

    #[test]
    fn errors() {
        let e = lex("1 µs²").unwrap_err();
        assert_eq!((e.kind, e.span), (ErrorKind::UnexpectedCharacter, 5..7));
        assert!(e.hint.unwrap().contains('^'));
        let e = lex("3 $").unwrap_err();
        assert_eq!(
            (e.span, e.message.as_str()),
            (2..3, "unexpected character `$`")
        );
        let e = lex("x + 1e400").unwrap_err();
        assert_eq!((e.kind, e.span), (ErrorKind::NumberTooLarge, 4..9));
        assert_eq!(e.message, "the number `1e400` is too large");
        let e = lex("1 + .").unwrap_err();
        assert_eq!((e.kind, e.span), (ErrorKind::UnexpectedCharacter, 4..5));
    }
}
