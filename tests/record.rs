//! The record as a wire format: written atomically by `run --out`, deterministic across runs
//! (volatile fields aside), readable with independently declared types, never silently replaced
//! by the record of another input, and left intact by a killed run.

mod common;
use common::*;

use std::path::Path;

use serde::Deserialize;

// Declared here, apart from `src/record`, so that a change of the wire format shows up as a
// failing test rather than drifting silently (the fields RECORD.md promises).
#[derive(Deserialize)]
struct Rec {
    format: String,
    version: u32,
    name: String,
    source: Src,
    parameters: Vec<Param>,
    results: Vec<Named>,
    checks: Vec<Check>,
    lineage: Lineage,
    volatile: serde_json::Value,
}
#[derive(Deserialize)]
struct Src {
    text: String,
    sha256: String,
}
#[derive(Deserialize)]
struct Param {
    name: String,
    value: f64,
    dim: [i8; 5],
    overridden: bool,
}
#[derive(Deserialize)]
struct Named {
    block: String,
    result: Res,
}
#[derive(Deserialize)]
struct Res {
    axes: Vec<Axis>,
    observables: Vec<Obs>,
    solver: serde_json::Value,
}
#[derive(Deserialize)]
struct Axis {
    name: String,
    values: Vec<f64>,
}
#[derive(Deserialize)]
struct Obs {
    label: String,
    width: usize,
    finals: Vec<f64>,
}
#[derive(Deserialize)]
struct Check {
    path: String,
    passed: bool,
    got: f64,
    bounds: Option<Bounds>,
    selection: Option<Selection>,
}
#[derive(Deserialize)]
struct Bounds {
    lo: Option<f64>,
    hi: Option<f64>,
    near: Option<f64>,
}
#[derive(Deserialize)]
struct Selection {
    series: String,
    reduce: Option<String>,
    at: Vec<At>,
}
#[derive(Deserialize)]
struct At {
    axis: String,
    value: f64,
}
#[derive(Deserialize)]
struct Lineage {
    results_sha256: String,
}

fn run(file: &Path, out: &Path, extra: &[&str]) -> std::process::Output {
    bin()
        .arg("run")
        .arg(file)
        .arg("--out")
        .arg(out)
        .args(extra)
        .output()
        .unwrap()
}

#[test]
fn records_are_deterministic_and_readable_with_independent_types() {
    let dir = temp_dir("det");
    let f = dir.join("steady-state-line.md");
    std::fs::write(&f, example("steady-state-line.md")).unwrap();
    let out = dir.join("out");
    let o = run(&f, &out, &["--no-cache"]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let path = out.join("steady-state-line.record.json");
    let first: serde_json::Value = serde_json::from_slice(&std::fs::read(&path).unwrap()).unwrap();
    // Again, this time through the cache: identical but for the volatile part.
    let o = run(&f, &out, &[]);
    assert!(o.status.success());
    let text = std::fs::read(&path).unwrap();
    let mut second: serde_json::Value = serde_json::from_slice(&text).unwrap();
    let mut first_stripped = first.clone();
    first_stripped["volatile"] = serde_json::Value::Null;
    second["volatile"] = serde_json::Value::Null;
    assert_eq!(first_stripped, second);
    let rec: Rec = serde_json::from_slice(&text).unwrap();
    assert_eq!(rec.format, "fieldbook-record");
    assert_eq!(rec.version, 1);
    assert_eq!(rec.name, "steady-state-line");
    assert_eq!(rec.source.text, example("steady-state-line.md"));
    assert_eq!(rec.source.sha256.len(), 64);
    assert_eq!(rec.lineage.results_sha256.len(), 64);
    assert!(rec.volatile["date"].as_str().unwrap().ends_with('Z'));
    let gamma = rec.parameters.iter().find(|p| p.name == "gamma").unwrap();
    assert!((gamma.value - 2.0 * std::f64::consts::PI * 6e6).abs() < 1e-3);
    assert_eq!(gamma.dim, [-1, 0, 0, 0, 0]);
    assert!(!gamma.overridden);
    let line = rec.results.iter().find(|r| r.block == "line").unwrap();
    assert_eq!(line.result.axes[0].name, "delta");
    assert_eq!(line.result.axes[0].values.len(), 241);
    let pe = &line.result.observables[0];
    assert_eq!(
        (pe.label.as_str(), pe.width, pe.finals.len()),
        ("population(e)", 1, 241)
    );
    assert!(line.result.solver["method"].is_string());
    assert!(rec.checks.iter().all(|c| c.passed && !c.path.is_empty()));
    // Each check carries its accepted range and what it selects, in numbers.
    let tau = std::f64::consts::TAU;
    for c in &rec.checks {
        let b = c.bounds.as_ref().expect("bounds");
        let (lo, hi) = (b.lo.unwrap(), b.hi.unwrap());
        assert!(
            lo <= c.got && c.got <= hi,
            "{}: {lo} {} {hi}",
            c.path,
            c.got
        );
        assert!((b.near.unwrap() - (lo + hi) / 2.0).abs() <= 1e-9 * hi.abs().max(1.0));
    }
    let off = &rec.checks[1];
    let sel = off.selection.as_ref().unwrap();
    assert_eq!(sel.series, "line.final.population(e)");
    assert_eq!(sel.reduce, None);
    assert_eq!(sel.at.len(), 1);
    assert_eq!(sel.at[0].axis, "delta");
    assert!((sel.at[0].value - tau * 5.25e6).abs() < 1e-3);
    let (near, hi) = (
        off.bounds.as_ref().unwrap().near.unwrap(),
        off.bounds.as_ref().unwrap().hi.unwrap(),
    );
    assert!((hi - near - 1e-9).abs() < 1e-15, "within 1e-9");
    let scattering = rec.checks[2].selection.as_ref().unwrap();
    assert_eq!(scattering.series, "line.final.scattering");
    let peak = rec.checks[4].selection.as_ref().unwrap();
    assert_eq!(peak.reduce.as_deref(), Some("argmax"));
    assert!(peak.at.is_empty());
    let width = rec.checks[4].bounds.as_ref().unwrap();
    assert!(
        (width.hi.unwrap() - tau).abs() < 1e-9,
        "2π × 1 Hz, in rad/s"
    );
}

#[test]
fn a_record_of_another_input_is_kept_unless_forced() {
    let dir = temp_dir("force");
    let f = dir.join("line.md");
    std::fs::write(&f, example("steady-state-line.md")).unwrap();
    let out = dir.join("out");
    assert!(run(&f, &out, &[]).status.success());
    let path = out.join("line.record.json");
    let before = std::fs::read(&path).unwrap();
    std::fs::write(
        &f,
        example("steady-state-line.md").replace("higher power", "twice the power"),
    )
    .unwrap();
    let o = run(&f, &out, &[]);
    assert_eq!(o.status.code(), Some(2));
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(
        err.contains("different input") && err.contains("--force"),
        "{err}"
    );
    assert_eq!(
        std::fs::read(&path).unwrap(),
        before,
        "the earlier record was changed"
    );
    let o = run(&f, &out, &["--force", "--set", "rabi=2π × 3 MHz"]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let rec: Rec = serde_json::from_slice(&std::fs::read(&path).unwrap()).unwrap();
    assert!(
        rec.parameters
            .iter()
            .any(|p| p.name == "rabi" && p.overridden)
    );
    // No temporary files are left behind.
    let leftovers: Vec<_> = std::fs::read_dir(&out)
        .unwrap()
        .map(|e| e.unwrap().file_name())
        .collect();
    // The record, its report and the folder's index, and nothing else.
    let mut leftovers: Vec<String> = leftovers
        .iter()
        .map(|n| n.to_string_lossy().into_owned())
        .collect();
    leftovers.sort();
    assert_eq!(
        leftovers,
        ["index.html", "line.html", "line.record.json"],
        "{leftovers:?}"
    );
}

#[test]
fn a_killed_run_leaves_the_previous_record_intact() {
    let dir = temp_dir("kill");
    let f = dir.join("chevron.md");
    std::fs::write(&f, example("rabi-chevron.md")).unwrap();
    let out = dir.join("out");
    assert!(run(&f, &out, &[]).status.success());
    let path = out.join("chevron.record.json");
    let before = std::fs::read(&path).unwrap();
    // A longer version of the scan (a million points, seconds of work), forced over the
    // record and killed while it computes.
    let long = example("rabi-chevron.md")
        .replace("points = 60 }", "points = 2500 }")
        .replace("points = 81 }", "points = 400 }");
    std::fs::write(&f, long).unwrap();
    let mut child = bin()
        .arg("run")
        .arg(&f)
        .args(["--no-cache", "--force", "--out"])
        .arg(&out)
        .stdout(std::process::Stdio::null())
        .stderr(std::process::Stdio::null())
        .spawn()
        .unwrap();
    std::thread::sleep(std::time::Duration::from_millis(300));
    child.kill().unwrap();
    let status = child.wait().unwrap();
    assert!(
        !status.success(),
        "the run finished before it could be killed"
    );
    assert_eq!(std::fs::read(&path).unwrap(), before);
    let names: Vec<_> = std::fs::read_dir(&out)
        .unwrap()
        .map(|e| e.unwrap().file_name())
        .collect();
    let mut names: Vec<String> = names
        .iter()
        .map(|n| n.to_string_lossy().into_owned())
        .collect();
    names.sort();
    assert_eq!(
        names,
        ["chevron.html", "chevron.record.json", "index.html"],
        "{names:?}"
    );
}

/// `--csv` writes every plotted or tabulated series next to the record, with units in the
/// headers and the record's own numbers in the rows.
#[test]
fn csv_export_holds_the_recorded_series() {
    let dir = temp_dir("csv");
    let f = dir.join("chevron.md");
    std::fs::write(&f, example("rabi-chevron.md")).unwrap();
    let out = dir.join("out");
    let o = run(&f, &out, &["--csv"]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let csv = std::fs::read_to_string(out.join("chevron-plot-line45.csv")).unwrap();
    let mut lines = csv.lines();
    assert_eq!(
        lines.next(),
        Some("\"chevron.delta [s⁻¹]\",\"len [s]\",\"chevron.final.population(e)\"")
    );
    let rows: Vec<Vec<f64>> = lines
        .map(|l| l.split(',').map(|x| x.parse().unwrap()).collect())
        .collect();
    assert_eq!(rows.len(), 81 * 60);
    let rec: serde_json::Value =
        serde_json::from_slice(&std::fs::read(out.join("chevron.record.json")).unwrap()).unwrap();
    let finals = &rec["results"][0]["result"]["observables"][0]["finals"];
    // The map is stored delta-major like the sweep (delta is the outer axis), so row k is point k.
    for k in [0, 1, 777, 4859] {
        assert_eq!(rows[k][2], finals[k].as_f64().unwrap());
    }
    let o = bin().arg("run").arg(&f).arg("--csv").output().unwrap();
    assert_eq!(o.status.code(), Some(2), "--csv without --out is refused");
}
