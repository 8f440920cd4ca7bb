//! Reading and writing records. Writes are atomic — a temporary file in the same folder, fsync,
//! rename, fsync of the folder — so a record is never half-written, even if the process is
//! killed; an existing record of a *different* input is not replaced without `force`.

use std::fs::{self, File};
use std::io::Write;
use std::path::{Path, PathBuf};

use super::{FORMAT, Record, VERSION};

/// Why a record could not be written or read.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum RecordError {
    /// The file system refused.
    #[error("{path}: {source}")]
    Io {
        /// The file.
        path: PathBuf,
        /// The cause.
        source: std::io::Error,
    },
    /// An existing record belongs to another input.
    #[error(
        "{path} holds the record of a different input (other source text or other --set values; source sha256 {existing:.12}…, this run {new:.12}…); pass --force to replace it, or choose another --out folder"
    )]
    Different {
        /// The existing record.
        path: PathBuf,
        /// Its source hash.
        existing: String,
        /// This run's source hash.
        new: String,
    },
    /// The file is not a record this build can read.
    #[error("{path} is not a Fieldbook record: {reason}")]
    NotARecord {
        /// The file.
        path: PathBuf,
        /// What is wrong.
        reason: String,
    },
}

fn io(path: &Path) -> impl Fn(std::io::Error) -> RecordError + '_ {
    move |source| RecordError::Io {
        path: path.to_path_buf(),
        source,
    }
}

/// Read a record from a `.record.json` file, or the record embedded in an HTML report (`.html`).
pub fn read(path: &Path) -> Result<Record, RecordError> {
    let text = fs::read(path).map_err(io(path))?;
    if path
        .extension()
        .is_some_and(|e| e.eq_ignore_ascii_case("html"))
    {
        let html = String::from_utf8_lossy(&text);
        return crate::render::extract_record(&html).map_err(|e| RecordError::NotARecord {
            path: path.to_path_buf(),
            reason: e.to_string(),
        });
    }
    let value: serde_json::Value =
        serde_json::from_slice(&text).map_err(|e| RecordError::NotARecord {
            path: path.to_path_buf(),
            reason: e.to_string(),
        })?;
    if value.get("format").and_then(|f| f.as_str()) != Some(FORMAT) {
        return Err(RecordError::NotARecord {
            path: path.to_path_buf(),
            reason: format!("its `format` is not `{FORMAT}`"),
        });
    }
    let version = value.get("version").and_then(|v| v.as_u64()).unwrap_or(0);
    if version != u64::from(VERSION) {
        return Err(RecordError::NotARecord {
            path: path.to_path_buf(),
            reason: format!("schema version {version}; this build reads version {VERSION}"),
        });
    }
    serde_json::from_value(value).map_err(|e| RecordError::NotARecord {
        path: path.to_path_buf(),
        reason: e.to_string(),
    })
}

/// Write `record` to `dir/NAME.record.json` atomically and return the path. An existing record
/// of a different source is refused unless `force`.
pub fn write(dir: &Path, record: &Record, force: bool) -> Result<PathBuf, RecordError> {
    fs::create_dir_all(dir).map_err(io(dir))?;
    let path = dir.join(format!("{}.record.json", record.name));
    if !force
        && path.exists()
        && let Ok(existing) = read(&path)
        && input_of(&existing) != input_of(record)
    {
        return Err(RecordError::Different {
            path,
            existing: existing.source.sha256,
            new: record.source.sha256.clone(),
        });
    }
    let mut json = serde_json::to_vec_pretty(record).map_err(|e| RecordError::Io {
        path: path.clone(),
        source: std::io::Error::other(e),
    })?;
    json.push(b'\n');
    write_atomic(&path, &json)?;
    Ok(path)
}

/// What makes two runs the same input: the source text and the `--set` overrides.
fn input_of(r: &Record) -> (&str, Vec<(&str, &str)>) {
    let sets = r
        .parameters
        .iter()
        .filter(|p| p.overridden)
        .map(|p| (p.name.as_str(), p.expr.as_str()))
        .collect();
    (r.source.sha256.as_str(), sets)
}

/// Replace `path` by `bytes` so that readers see either the old or the new file, never a part.
pub fn write_atomic(path: &Path, bytes: &[u8]) -> Result<(), RecordError> {
    let dir = path.parent().unwrap_or(Path::new("."));
    let name = path
        .file_name()
        .map_or("record".into(), |n| n.to_string_lossy().into_owned());
    let tmp = dir.join(format!(".{name}.{}.tmp", std::process::id()));
    let result = (|| {
        let mut f = File::create(&tmp)?;
        f.write_all(bytes)?;
        f.sync_all()?;
        fs::rename(&tmp, path)?;
        // The rename itself is made durable by syncing the folder (where the platform allows).
        if let Ok(d) = File::open(dir) {
            let _ = d.sync_all();
        }
        Ok(())
    })();
    if result.is_err() {
        let _ = fs::remove_file(&tmp);
    }
    result.map_err(io(path))
}
