//! The result cache: evolve results stored under a hash of everything they depend on (the
//! block's own text, the atom, lights and sequence it uses, and the values of every parameter
//! those mention), so a prose edit recomputes nothing and a change recomputes only what it
//! touches. Files are written atomically; a damaged entry is ignored and recomputed.

use std::collections::BTreeSet;
use std::path::{Path, PathBuf};

use sha2::{Digest, Sha256};

use super::results::EvolveResult;
use super::session::Checked;
use crate::notebook::expr::Dim;

/// Bumped whenever the meaning of a cached result changes.
const CACHE_VERSION: &str = "fieldbook-cache-2";

/// A folder of cached results.
#[derive(Clone, Debug)]
pub struct Cache {
    dir: PathBuf,
}

impl Cache {
    /// A cache in `dir` (created on first store).
    pub fn new(dir: impl Into<PathBuf>) -> Self {
        Self { dir: dir.into() }
    }

    /// The default cache folder for a run-file: `.fieldbook-cache` beside it.
    pub fn beside(file: &Path) -> Self {
        let parent = file
            .parent()
            .filter(|p| !p.as_os_str().is_empty())
            .unwrap_or(Path::new("."));
        Self::new(parent.join(".fieldbook-cache"))
    }

    fn file(&self, key: &str) -> PathBuf {
        self.dir.join(format!("{key}.json"))
    }

    /// The cached result for `key`, if present and readable.
    pub fn load(&self, key: &str) -> Option<EvolveResult> {
        let text = std::fs::read(self.file(key)).ok()?;
        serde_json::from_slice(&text).ok()
    }

    /// Store a result; failures only cost a recomputation next time, so they are ignored.
    pub fn store(&self, key: &str, r: &EvolveResult) {
        let Ok(json) = serde_json::to_vec(r) else {
            return;
        };
        if std::fs::create_dir_all(&self.dir).is_err() {
            return;
        }
        let tmp = self.dir.join(format!(".{key}.{}.tmp", std::process::id()));
        if std::fs::write(&tmp, json).is_ok() && std::fs::rename(&tmp, self.file(key)).is_err() {
            let _ = std::fs::remove_file(&tmp);
        }
    }
}

/// Identifier-like words of `text`, for finding which parameters a block mentions.
fn words(text: &str) -> impl Iterator<Item = &str> {
    text.split(|c: char| !(c.is_alphanumeric() || c == '_'))
        .filter(|w| !w.is_empty())
}

/// The cache key of evolve block `name`: a SHA-256 over the texts of the blocks it uses and
/// the nominal values of every parameter they mention (transitively), plus the sweep grid.
#[allow(clippy::too_many_arguments)]
pub fn key(
    c: &Checked<'_>,
    name: &str,
    block: usize,
    atom: &str,
    lights: &[String],
    sequence: Option<&str>,
    axes: &[(String, Vec<f64>, Dim)],
    average: &Option<(String, Vec<f64>, Vec<f64>)>,
) -> String {
    let mut h = Sha256::new();
    h.update(CACHE_VERSION);
    h.update(env!("CARGO_PKG_VERSION"));
    let mut texts: Vec<&str> = Vec::new();
    let blocks: Vec<_> = c.doc.blocks().collect();
    if let Some(b) = blocks.get(block) {
        texts.push(&b.raw.body);
    }
    let mut used: Vec<&str> = vec![atom];
    used.extend(lights.iter().map(String::as_str));
    used.extend(sequence);
    for b in &blocks {
        if let Some((n, _)) = &b.raw.name
            && used.contains(&n.as_str())
        {
            texts.push(&b.raw.body);
        }
    }
    h.update(name);
    for t in &texts {
        h.update((t.len() as u64).to_le_bytes());
        h.update(t);
    }
    // Parameters mentioned, closed over their own dependencies.
    let mut wanted: BTreeSet<String> = texts
        .iter()
        .flat_map(|t| words(t))
        .map(str::to_string)
        .collect();
    loop {
        let more: Vec<String> = c
            .scope
            .params
            .iter()
            .filter(|p| wanted.contains(&p.name))
            .flat_map(|p| p.deps.clone())
            .filter(|d| !wanted.contains(d))
            .collect();
        if more.is_empty() {
            break;
        }
        wanted.extend(more);
    }
    for p in &c.scope.params {
        if wanted.contains(&p.name)
            && let Some(q) = c.values.get(&p.name)
        {
            h.update(p.name.as_bytes());
            h.update(q.value.to_bits().to_le_bytes());
            h.update(q.dim.0.map(|x| x as u8));
            // A formula parameter also matters through its text.
            h.update(p.ex.text());
        }
    }
    for (n, v, _) in axes {
        h.update(n.as_bytes());
        v.iter().for_each(|x| h.update(x.to_bits().to_le_bytes()));
    }
    if let Some((n, nodes, weights)) = average {
        h.update(n.as_bytes());
        nodes
            .iter()
            .chain(weights)
            .for_each(|x| h.update(x.to_bits().to_le_bytes()));
    }
    h.finalize().iter().map(|b| format!("{b:02x}")).collect()
}
