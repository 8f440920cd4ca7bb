//! # fieldbook
//!
//! The `fieldbook` tool as a library: [`notebook`] reads Markdown run-files into typed scenario
//! blocks with located diagnostics; [`kernel`] resolves names, builds runtime problems and runs
//! the cells top to bottom with a result cache; [`summary`] prints what a run produced and [`record`] keeps it as versioned JSON. The
//! physics lives in the `fieldbook-runtime` crate, which knows nothing of files or Markdown.
//! [`render`] draws the self-contained HTML report from a record alone.
#![deny(missing_docs)]

pub mod kernel;
pub mod notebook;
pub mod record;
pub mod render;
pub mod summary;
