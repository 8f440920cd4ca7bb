//! End to end as a person works: run → rerun with a changed parameter → diff shows exactly that
//! parameter, what depends on it and the results it moved, and nothing else; a record compared
//! with itself or with an unchanged re-run is equal.

mod common;
use common::*;

use std::path::Path;

#[test]
fn rerun_then_diff_shows_the_change_and_only_the_change() {
    let dir = temp_dir("flow");
    let f = dir.join("line.md");
    std::fs::copy(
        Path::new(env!("CARGO_MANIFEST_DIR")).join("notebooks-spec/examples/steady-state-line.md"),
        &f,
    )
    .unwrap();
    let (a, b, c) = (dir.join("a"), dir.join("b"), dir.join("c"));
    let o = bin()
        .arg("run")
        .arg(&f)
        .arg("--out")
        .arg(&a)
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", text(&o));
    let ra = a.join("line.record.json");

    // Re-run with a stronger probe: the checks follow s, so they still hold.
    let o = bin()
        .arg("rerun")
        .arg(&ra)
        .args(["--set", "rabi=2π × 9 MHz", "--out"])
        .arg(&b)
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", text(&o));
    assert!(text(&o).contains("with rabi = 2π × 9 MHz"), "{}", text(&o));
    let rb = b.join("line.record.json");
    let parent: serde_json::Value = serde_json::from_slice(&std::fs::read(&ra).unwrap()).unwrap();
    let child: serde_json::Value = serde_json::from_slice(&std::fs::read(&rb).unwrap()).unwrap();
    assert_eq!(
        child["lineage"]["parent"],
        parent["lineage"]["results_sha256"]
    );
    assert_eq!(child["lineage"]["changes"][0], "rabi = 2π × 9 MHz");

    let o = bin().arg("diff").arg(&ra).arg(&rb).output().unwrap();
    let t = text(&o);
    assert_eq!(o.status.code(), Some(1), "{t}");
    // The parameter, and the ones computed from it, and nothing else among the parameters.
    let params: Vec<&str> = t
        .lines()
        .skip_while(|l| !l.starts_with("parameters"))
        .skip(1)
        .take_while(|l| l.starts_with("  "))
        .collect();
    assert_eq!(params.len(), 3, "{t}");
    assert!(
        params[0].contains("rabi: 2π × 6.000 MHz → 2π × 9.000 MHz (--set)"),
        "{t}"
    );
    assert!(
        params.iter().any(|l| l.trim_start().starts_with("s: ")),
        "{t}"
    );
    assert!(
        params.iter().any(|l| l.trim_start().starts_with("width: ")),
        "{t}"
    );
    assert!(!t.contains("sources ("), "the source did not change:\n{t}");
    assert!(
        t.contains("line.final.population(e): largest deviation"),
        "{t}"
    );
    assert!(!t.contains("solvers ("), "{t}");

    // A record equals itself, and an unchanged re-run equals its parent.
    let o = bin().arg("diff").arg(&ra).arg(&ra).output().unwrap();
    assert_eq!(o.status.code(), Some(0), "{}", text(&o));
    assert!(text(&o).contains("agree"));
    let o = bin()
        .arg("rerun")
        .arg(&ra)
        .arg("--out")
        .arg(&c)
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", text(&o));
    let o = bin()
        .arg("diff")
        .arg(&ra)
        .arg(c.join("line.record.json"))
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(0), "{}", text(&o));

    // A changed re-run into the parent's own folder would replace it: refused, and kept.
    let before = std::fs::read(&ra).unwrap();
    let o = bin()
        .arg("rerun")
        .arg(&ra)
        .args(["--set", "rabi=2π × 1 MHz", "--out"])
        .arg(&a)
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(2), "{}", text(&o));
    assert_eq!(std::fs::read(&ra).unwrap(), before);

    // Bad input to diff.
    let o = bin()
        .arg("diff")
        .arg(&ra)
        .arg(dir.join("missing.json"))
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(2));
    let o = bin().arg("diff").arg(&f).arg(&ra).output().unwrap();
    assert_eq!(o.status.code(), Some(2));
    assert!(text(&o).contains("not a Fieldbook record"), "{}", text(&o));
}
