//! Prose cells: Markdown → HTML with TeX math as MathML and inline values filled in, then one
//! sanitising pass over each cell's whole HTML, so raw HTML split across Markdown events cannot
//! slip through piecewise.

use std::collections::HashSet;

use std::panic::AssertUnwindSafe;

use math_core::{LatexToMathML, MathCoreConfig, MathDisplay};
use pulldown_cmark::{CowStr, Event, Options, Parser};

use super::escape;
use crate::record::InlineRecord;

/// The MathML elements math-core writes (read from its emitter, version 0.7); everything else in
/// the MathML namespace is removed.
const MATHML_TAGS: [&str; 25] = [
    "math",
    "mrow",
    "mi",
    "mn",
    "mo",
    "mtext",
    "mspace",
    "mfrac",
    "msqrt",
    "mroot",
    "msub",
    "msup",
    "msubsup",
    "munder",
    "mover",
    "munderover",
    "mmultiscripts",
    "mprescripts",
    "mtable",
    "mtr",
    "mtd",
    "mpadded",
    "mphantom",
    "menclose",
    "merror",
];

/// Presentation attributes math-core writes on those elements; none of them can carry a URL or
/// script. `style` is kept only through [`safe_style`].
const MATHML_ATTRIBUTES: [&str; 21] = [
    "display",
    "mathvariant",
    "stretchy",
    "form",
    "minsize",
    "maxsize",
    "accent",
    "accentunder",
    "linethickness",
    "width",
    "height",
    "displaystyle",
    "scriptlevel",
    "lspace",
    "rspace",
    "largeop",
    "movablelimits",
    "symmetric",
    "notation",
    "class",
    "style",
];

/// CSS properties math-core sets inline (negative spaces, colours, padding, table rules and
/// alignment); a declaration of any other property is dropped.
const STYLE_PROPERTIES: [&str; 13] = [
    "color",
    "font-size",
    "margin-left",
    "width",
    "padding-left",
    "padding-right",
    "border-left",
    "border-right",
    "border-top",
    "text-align",
    "justify-items",
    "math-shift",
    "font-variant-caps",
];

/// Formulas longer than this (bytes) are shown as TeX: the converter recurses once per nesting
/// level, and this bounds the depth so that [`CONVERTER_STACK`] always suffices.
const MAX_TEX: usize = 4000;

/// Stack of the thread that converts TeX. Measured with nested `\sqrt{` and `{`: under 2 KiB per
/// level in optimised builds and under 50 KiB in unoptimised ones, so [`MAX_TEX`] levels fit.
/// The memory is reserved, not touched, unless a formula nests that deep.
const CONVERTER_STACK: usize = 256 << 20;

/// The declarations of an inline `style` on a MathML element whose property is one math-core
/// writes and whose value is plain lengths, colours and keywords. No parentheses, quotes,
/// backslashes or slashes pass, so no `url(…)`, `image-set(…)` or escape can fetch anything.
fn safe_style(value: &str) -> Option<String> {
    let plain = |v: &str| {
        v.chars()
            .all(|c| c.is_ascii_alphanumeric() || matches!(c, ' ' | '#' | '.' | '%' | '-'))
    };
    let kept: Vec<String> = value
        .split(';')
        .filter_map(|d| {
            let (p, v) = d.split_once(':')?;
            let (p, v) = (p.trim().to_ascii_lowercase(), v.trim());
            (STYLE_PROPERTIES.contains(&p.as_str()) && plain(v)).then(|| format!("{p}:{v}"))
        })
        .collect();
    (!kept.is_empty()).then(|| kept.join(";"))
}

/// The sanitiser for prose: ammonia's defaults (no script, style, event handlers or
/// `javascript:` URLs) plus MathML, inline-value spans, and no images from elsewhere, since the
/// report must open without fetching anything.
pub(crate) fn sanitizer() -> ammonia::Builder<'static> {
    let mut b = ammonia::Builder::default();
    b.add_tags(MATHML_TAGS);
    for tag in MATHML_TAGS {
        b.add_tag_attributes(tag, MATHML_ATTRIBUTES);
    }
    b.add_tag_attributes("span", ["class", "title"]);
    b.add_tag_attributes("code", ["class"]);
    b.attribute_filter(|element, attribute, value| match (element, attribute) {
        ("img", "src") if !value.starts_with("data:") => None,
        (_, "style") => safe_style(value).map(Into::into),
        _ => Some(value.into()),
    });
    b
}

/// A formula shown as its TeX, where it cannot be converted.
fn as_tex(tex: &str) -> String {
    format!("<code class=\"math\">{}</code>", escape(tex))
}

/// TeX to MathML, or the TeX itself in a `<code class="math">` when the converter refuses it
/// (or, should it ever panic, fails).
fn math(converter: &LatexToMathML, tex: &str, display: bool) -> String {
    let mode = if display {
        MathDisplay::Block
    } else {
        MathDisplay::Inline
    };
    let converted = (tex.len() <= MAX_TEX)
        .then(|| {
            std::panic::catch_unwind(AssertUnwindSafe(|| {
                converter.convert_with_local_state(tex, mode)
            }))
        })
        .and_then(|r| r.ok()?.ok());
    converted.map_or_else(|| as_tex(tex), |r| r.mathml)
}

/// Every formula of `formulas` (TeX, display) as MathML, converted on one thread with a stack
/// deep enough for any formula [`math`] accepts.
fn convert_all(formulas: &[(&str, bool)]) -> Vec<String> {
    let fallback = || formulas.iter().map(|(tex, _)| as_tex(tex)).collect();
    if formulas.is_empty() {
        return vec![];
    }
    std::thread::scope(|s| {
        std::thread::Builder::new()
            .name("tex".into())
            .stack_size(CONVERTER_STACK)
            .spawn_scoped(s, || {
                let Ok(converter) = LatexToMathML::new(MathCoreConfig::default()) else {
                    return fallback();
                };
                formulas
                    .iter()
                    .map(|(tex, display)| math(&converter, tex, *display))
                    .collect()
            })
            .ok()
            .and_then(|h| h.join().ok())
            .unwrap_or_else(fallback)
    })
}

/// One prose cell as sanitised HTML. `first_line` is the cell's first line in the run-file, so
/// that inline values (keyed by path and line) land in the right code span.
pub(crate) fn render(
    markdown: &str,
    first_line: usize,
    inline: &[InlineRecord],
    clean: &ammonia::Builder<'_>,
) -> String {
    let options = Options::ENABLE_TABLES | Options::ENABLE_MATH;
    // Line starts, to turn an event's byte offset into its line.
    let newlines: Vec<usize> = markdown
        .bytes()
        .enumerate()
        .filter(|(_, b)| *b == b'\n')
        .map(|(i, _)| i)
        .collect();
    let parsed: Vec<_> = Parser::new_ext(markdown, options)
        .into_offset_iter()
        .collect();
    let formulas: Vec<(&str, bool)> = parsed
        .iter()
        .filter_map(|(e, _)| match e {
            Event::InlineMath(tex) => Some((tex.as_ref(), false)),
            Event::DisplayMath(tex) => Some((tex.as_ref(), true)),
            _ => None,
        })
        .collect();
    let mut mathml = convert_all(&formulas).into_iter();
    let mut used = HashSet::new();
    let events = parsed.into_iter().map(|(event, range)| match event {
        Event::InlineMath(_) | Event::DisplayMath(_) => {
            Event::InlineHtml(mathml.next().unwrap_or_default().into())
        }
        Event::Code(code) if code.starts_with('=') => {
            let path = code[1..].trim();
            let line = first_line + newlines.partition_point(|&n| n < range.start);
            match inline
                .iter()
                .enumerate()
                .find(|(i, v)| v.path == path && v.line == line && !used.contains(i))
            {
                Some((i, v)) => {
                    used.insert(i);
                    Event::InlineHtml(CowStr::from(format!(
                        "<span class=\"value\" title=\"{}\">{}</span>",
                        escape(path),
                        escape(&v.shown)
                    )))
                }
                None => Event::Code(code),
            }
        }
        other => other,
    });
    let mut html = String::new();
    pulldown_cmark::html::push_html(&mut html, events);
    clean.clean(&html).to_string()
}

#[cfg(test)]
mod tests {
    use super::*;

    fn prose(md: &str) -> String {
        render(md, 1, &[], &sanitizer())
    }

    #[test]
    fn scripts_handlers_and_javascript_urls_are_removed() {
        let html = prose(
            "Hi <script>alert(1)</script> <b onclick=\"x()\">b</b> \
             [l](javascript:alert(2)) <a href=\"javascript:y()\">a</a>",
        );
        assert!(!html.contains("<script"), "{html}");
        assert!(!html.contains("onclick"), "{html}");
        assert!(!html.contains("javascript:"), "{html}");
        assert!(html.contains("<b>b</b>"), "{html}");
    }

    #[test]
    fn math_becomes_mathml_and_survives_sanitising() {
        let html = prose("Rabi: $\\Omega^2/(\\Omega^2 + \\Delta^2)$ and\n\n$$\\sqrt{x}$$");
        assert!(html.contains("<math"), "{html}");
        assert!(html.contains("<msup>"), "{html}");
        assert!(html.contains("<msqrt>"), "{html}");
    }

    /// The MathML of one inline formula after sanitising, without the paragraph around it.
    fn formula(tex: &str) -> String {
        let html = prose(&format!("${tex}$"));
        let start = html.find("<math").expect("a formula");
        let end = html.rfind("</math>").expect("closed") + "</math>".len();
        html[start..end].to_string()
    }

    #[test]
    fn formulas_have_the_expected_mathml_structure() {
        assert_eq!(
            formula("\\frac{a}{b}"),
            "<math><mfrac><mi>a</mi><mi>b</mi></mfrac></math>"
        );
        assert_eq!(
            formula("x_i"),
            "<math><msub><mi>x</mi><mi>i</mi></msub></math>"
        );
        // Sub- and superscript together: base, subscript, superscript, in that order.
        assert_eq!(
            formula("x^{2}_{1}"),
            "<math><msubsup><mi>x</mi><mn>1</mn><mn>2</mn></msubsup></math>"
        );
        assert_eq!(
            formula("\\hbar\\omega"),
            "<math><mi>ℏ</mi><mi>ω</mi></math>"
        );
        // Upright capital Greek survives with its mathvariant.
        let omega = formula("\\Omega_R");
        assert!(omega.starts_with("<math><msub><mrow>"), "{omega}");
        assert!(
            omega.contains("<mi mathvariant=\"normal\">Ω</mi>"),
            "{omega}"
        );
        assert!(omega.ends_with("<mi>R</mi></msub></math>"), "{omega}");
        // `\ni` is "contains as member" (U+220B), not "not an element of" (U+2209).
        assert_eq!(
            formula("a \\ni b"),
            "<math><mi>a</mi><mo>∋</mo><mi>b</mi></math>"
        );
        assert!(formula("a \\notin b").contains("<mo>∉</mo>"));
    }

    #[test]
    fn spacing_and_colour_styles_survive_but_urls_do_not() {
        assert!(formula("\\hspace{-1em}x").contains("style=\"margin-left:-1em\""));
        assert!(formula("\\color{red}x").contains("style=\"color:#FF0000\""));
        let html = prose(
            "<math><mi style=\"background:url(https://example.invalid/a)\">x</mi>\
             <mi style=\"color:red;background-image:image-set('b.png' 1x)\">y</mi></math>",
        );
        assert!(!html.contains("example.invalid"), "{html}");
        assert!(!html.contains("image-set"), "{html}");
        assert!(html.contains("<mi style=\"color:red\">y</mi>"), "{html}");
    }

    #[test]
    fn deeply_nested_and_overlong_tex_neither_crashes_nor_vanishes() {
        let braces = format!("{}x{}", "{".repeat(1990), "}".repeat(1990));
        assert!(prose(&format!("${braces}$")).contains("<math"));
        let roots = format!("{}x{}", "\\sqrt{".repeat(550), "}".repeat(550));
        assert!(prose(&format!("${roots}$")).contains("<msqrt>"));
        let long = "x+".repeat(MAX_TEX);
        let html = prose(&format!("${long}x$"));
        assert!(
            html.contains("<code class=\"math\">x+x+"),
            "{}",
            &html[..80]
        );
    }

    #[test]
    fn tex_the_converter_refuses_stays_visible_as_code() {
        let html = prose("broken $\\left( x$ here");
        assert!(
            html.contains("<code class=\"math\">\\left( x</code>"),
            "{html}"
        );
    }

    #[test]
    fn remote_images_are_dropped() {
        let html = prose("![x](https://example.invalid/a.png)");
        assert!(!html.contains("example.invalid"), "{html}");
    }

    #[test]
    fn inline_values_are_filled_in_on_their_line() {
        let inline = [InlineRecord {
            path: "a.final.population(e)".into(),
            line: 11,
            shown: "0.5000".into(),
        }];
        let html = render(
            "x\n\nvalue `= a.final.population(e)` here",
            9,
            &inline,
            &sanitizer(),
        );
        assert!(html.contains("<span class=\"value\""), "{html}");
        assert!(html.contains("0.5000"), "{html}");
    }
}
