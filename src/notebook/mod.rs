//! The run-file format: reading a Markdown file into typed scenario blocks, with every problem
//! reported as a located [`Diagnostic`]. Parsing never fails: it returns the document *and* the
//! diagnostics. Nothing here evaluates an expression or calls the runtime.

pub mod blocks;
pub mod diag;
pub mod expr;
pub mod markdown;
pub mod path;
pub mod schema;
pub mod source;
pub mod tree;

use blocks::{Block, Reader};
use diag::Diagnostic;
use markdown::{Cell, InlineValue, RawBlock};
use schema::Naming;
use source::{Source, Span};

/// Largest run-file accepted, in bytes. Run-files are lab notes; anything bigger is almost
/// certainly a data file passed by mistake, and the record embeds the whole source.
pub const MAX_FILE_BYTES: usize = 8 << 20;

/// A scenario block: its raw text and, when it read cleanly, its typed form.
#[derive(Clone, Debug)]
pub struct BlockCell {
    /// As found in the Markdown.
    pub raw: RawBlock,
    /// The typed block, `None` when its body had errors.
    pub block: Option<Block>,
}

/// One cell of a parsed document.
#[derive(Clone, Debug)]
// A handful of cells per file; boxing the block would only add noise.
#[allow(clippy::large_enum_variant)]
pub enum DocCell {
    /// Prose.
    Prose(Span),
    /// A scenario block.
    Block(BlockCell),
}

/// A parsed run-file.
#[derive(Clone, Debug)]
pub struct Document {
    /// The text.
    pub source: Source,
    /// Cells in order.
    pub cells: Vec<DocCell>,
    /// Inline values in the prose.
    pub inline: Vec<InlineValue>,
}

impl Document {
    /// The scenario blocks, in order.
    pub fn blocks(&self) -> impl Iterator<Item = &BlockCell> {
        self.cells.iter().filter_map(|c| match c {
            DocCell::Block(b) => Some(b),
            DocCell::Prose(_) => None,
        })
    }
}

/// Decode raw file bytes into a [`Source`], refusing what is not a run-file.
pub fn load(name: &str, bytes: &[u8]) -> Result<Source, Box<(Source, Diagnostic)>> {
    if bytes.len() > MAX_FILE_BYTES {
        let src = Source::new(name, "");
        let mb = bytes.len() as f64 / (1 << 20) as f64;
        return Err(Box::new((
            src,
            Diagnostic::error(0..0, format!("the file is {mb:.1} MiB; run-files are limited to {} MiB", MAX_FILE_BYTES >> 20))
                .with_hint("keep measured data in separate files; a run-file is the lab note that describes the scenario"),
        )));
    }
    match std::str::from_utf8(bytes) {
        Ok(text) => {
            let src = Source::new(name, text);
            if let Some(at) = text.find('\0') {
                return Err(Box::new((
                    src,
                    Diagnostic::error(
                        at..at + 1,
                        "the file holds a NUL byte; this looks like a binary file, not a run-file",
                    )
                    .with_hint("run-files are Markdown text"),
                )));
            }
            if text.trim().is_empty() {
                return Err(Box::new((
                    src,
                    Diagnostic::error(0..0, "the run-file is empty")
                        .with_hint("a run-file is Markdown with fenced blocks such as ```params, ```atom, ```evolve; see notebooks-spec/SPEC.md"),
                )));
            }
            Ok(src)
        }
        Err(e) => {
            let good = e.valid_up_to();
            // The valid prefix is shown so that line:column point at the bad byte.
            let src = Source::new(name, String::from_utf8_lossy(&bytes[..good]).into_owned());
            Err(Box::new((
                src,
                Diagnostic::error(
                    good..good,
                    format!("the file is not valid UTF-8 (byte {good} starts an invalid sequence)"),
                )
                .with_hint("save the run-file as UTF-8"),
            )))
        }
    }
}

/// Parse a run-file into cells and typed blocks, collecting every diagnostic.
pub fn parse(source: Source) -> (Document, Vec<Diagnostic>) {
    let (cells, mut diags) = markdown::split(source.text());
    let mut out = Vec::with_capacity(cells.cells.len());
    for cell in cells.cells {
        match cell {
            Cell::Prose(span) => out.push(DocCell::Prose(span)),
            Cell::Block(raw) => {
                let block = read_block(&raw, &mut diags);
                out.push(DocCell::Block(BlockCell { raw, block }));
            }
        }
    }
    (
        Document {
            source,
            cells: out,
            inline: cells.inline,
        },
        diags,
    )
}

fn read_block(raw: &RawBlock, diags: &mut Vec<Diagnostic>) -> Option<Block> {
    let def = schema::kind(&raw.kind)?;
    if def.naming == Naming::Required && raw.name.is_none() {
        diags.push(
            Diagnostic::error(
                raw.kind_span.clone(),
                format!("a `{}` block needs a name", raw.kind),
            )
            .with_hint(format!(
                "write the info string as `{} NAME`; other blocks refer to it by that name",
                raw.kind
            )),
        );
    }
    let (tree, mut d) = tree::parse(&raw.body, raw.body_start);
    let failed = !d.is_empty() || tree.is_none();
    diags.append(&mut d);
    let table = tree?;
    let before = diags.len();
    schema::check_keys(def, "", &table, diags);
    let span = raw.span.clone();
    let typos = schema::unknown_top(def, &table);
    let mut r = Reader::new(diags, span, def.kind).with_typos(typos);
    let block = match def.kind {
        "params" => Some(Block::Params(r.params(&table))),
        "atom" => Some(Block::Atom(r.atom(&table))),
        "light" => r.light(&table).map(Block::Light),
        "sequence" => Some(Block::Sequence(r.sequence(&table))),
        "evolve" => Some(Block::Evolve(Box::new(r.evolve(&table)))),
        "plot" => r.plot(&table).map(Block::Plot),
        "table" => r.table_block(&table).map(Block::Table),
        "check" => Some(Block::Check(r.check(&table))),
        _ => None,
    };
    let clean = !failed && diags[before..].iter().all(|d| !d.is_error());
    // A params block with a broken entry still defines its other parameters, so that their
    // uses further down are not reported as undefined.
    let partial = matches!(block, Some(Block::Params(_))) && !failed;
    if (clean || partial) && (def.naming == Naming::Optional || raw.name.is_some()) {
        block
    } else {
        None
    }
}
