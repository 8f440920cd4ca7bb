//! Helpers shared by the end-to-end tests: the binary, scratch folders, output text, examples.
// Each test crate uses its own subset of these.
#![allow(dead_code)]

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

/// The `fieldbook` binary under test.
pub fn bin() -> Command {
    Command::new(env!("CARGO_BIN_EXE_fieldbook"))
}

/// An empty scratch folder named after the test crate, `name` and the process.
pub fn temp_dir(name: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!(
        "fieldbook-{}-{name}-{}",
        env!("CARGO_CRATE_NAME"),
        std::process::id()
    ));
    let _ = std::fs::remove_dir_all(&d);
    std::fs::create_dir_all(&d).unwrap();
    d
}

/// Everything a command printed, stdout then stderr.
pub fn text(o: &Output) -> String {
    format!(
        "{}{}",
        String::from_utf8_lossy(&o.stdout),
        String::from_utf8_lossy(&o.stderr)
    )
}

/// The path of example run-file `file` (with its `.md`).
pub fn example_path(file: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("notebooks-spec/examples")
        .join(file)
}

/// The text of example run-file `file` (with its `.md`).
pub fn example(file: &str) -> String {
    std::fs::read_to_string(example_path(file)).unwrap()
}

/// Every example run-file, sorted.
pub fn examples() -> Vec<PathBuf> {
    let mut v: Vec<PathBuf> = std::fs::read_dir(example_path(""))
        .unwrap()
        .map(|e| e.unwrap().path())
        .filter(|p| p.extension().is_some_and(|x| x == "md"))
        .collect();
    v.sort();
    v
}
