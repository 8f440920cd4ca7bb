//! Prose cells: Markdown → HTML with TeX math as MathML and inline values filled in, then one
//! sanitising pass over each cell's whole HTML, so raw HTML split across Markdown events cannot
//! slip through piecewise.

use std::collections::HashSet;

use pulldown_cmark::{CowStr, Event, Options, Parser};

use super::escape;
use crate::record::InlineRecord;

/// The MathML elements latex2mathml writes; everything else in the MathML namespace is removed.
const MATHML_TAGS: [&str; 23] = [
    "math",
    "semantics",
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
    "mstyle",
    "mtable",
    "mtr",
    "mtd",
    "mpadded",
];

/// Presentation attributes of those elements; none of them can carry a URL or script.
const MATHML_ATTRIBUTES: [&str; 14] = [
    "display",
    "mathvariant",
    "stretchy",
    "form",
    "fence",
    "separator",
    "minsize",
    "maxsize",
    "accent",
    "accentunder",
    "linethickness",
    "width",
    "displaystyle",
    "columnalign",
];

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
    b.attribute_filter(|element, attribute, value| {
        if element == "img" && attribute == "src" && !value.starts_with("data:") {
            None
        } else {
            Some(value.into())
        }
    });
    b
}

/// TeX to MathML, or the TeX itself in a `<code class="math">` when the converter refuses it.
fn math(tex: &str, display: bool) -> String {
    let style = if display {
        latex2mathml::DisplayStyle::Block
    } else {
        latex2mathml::DisplayStyle::Inline
    };
    match latex2mathml::latex_to_mathml(tex, style) {
        Ok(m) => m,
        Err(_) => format!("<code class=\"math\">{}</code>", escape(tex)),
    }
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
    let mut used = HashSet::new();
    let events = Parser::new_ext(markdown, options)
        .into_offset_iter()
        .map(|(event, range)| match event {
            Event::InlineMath(tex) => Event::InlineHtml(math(&tex, false).into()),
            Event::DisplayMath(tex) => Event::InlineHtml(math(&tex, true).into()),
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
