//! The kernel: resolves a parsed run-file's names, builds runtime problems from its blocks and
//! runs them top to bottom in one session, with a content-keyed result cache.

pub mod build;
pub mod cache;
pub mod results;
pub mod scope;
pub mod session;
