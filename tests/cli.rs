//! End-to-end tests of the `fieldbook` command: every example checks and runs with its checks
//! holding, exit codes, `--set`, and the result cache.

mod common;
use common::*;

use std::path::Path;
use std::time::Instant;

#[test]
fn every_example_checks_clean_and_fast() {
    let files = examples();
    assert!(files.len() >= 8, "{} examples", files.len());
    for f in &files {
        let o = bin().arg("check").arg(f).output().unwrap();
        assert_eq!(o.status.code(), Some(0), "{}:\n{}", f.display(), text(&o));
        assert!(
            !text(&o).contains("warning:"),
            "{}:\n{}",
            f.display(),
            text(&o)
        );
    }
    // An editor's on-save check: the best of three runs over all examples, per file.
    let best = (0..3)
        .map(|_| {
            let t = Instant::now();
            let o = bin().arg("check").args(&files).output().unwrap();
            assert!(o.status.success());
            t.elapsed().as_secs_f64() / files.len() as f64
        })
        .fold(f64::INFINITY, f64::min);
    println!(
        "check: {:.1} ms per example (target < 20 ms, process start included)",
        best * 1e3
    );
    assert!(best < 0.020, "check took {best} s per file");
}

#[test]
fn every_example_runs_with_its_checks_holding() {
    let cache = temp_dir("examples");
    for f in examples() {
        let o = bin()
            .arg("run")
            .arg(&f)
            .arg("--cache")
            .arg(&cache)
            .output()
            .unwrap();
        let t = text(&o);
        println!("{t}");
        assert_eq!(o.status.code(), Some(0), "{}:\n{t}", f.display());
        assert!(t.contains("check(s) held"), "{}:\n{t}", f.display());
        assert!(!t.contains("FAILED"), "{}:\n{t}", f.display());
    }
}

#[test]
fn a_failing_check_exits_1_and_a_bad_set_exits_2() {
    let dir = temp_dir("codes");
    let f = dir.join("line.md");
    std::fs::copy(
        Path::new(env!("CARGO_MANIFEST_DIR")).join("notebooks-spec/examples/steady-state-line.md"),
        &f,
    )
    .unwrap();
    // The checks follow `s`, so a stronger probe still passes them …
    let o = bin()
        .args(["run", "--no-cache"])
        .arg(&f)
        .args(["--set", "rabi=2π × 9 MHz"])
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(0), "{}", text(&o));
    // … while a hard-coded wrong expectation fails.
    let broken = std::fs::read_to_string(&f).unwrap().replace(
        "{ near = \"(s/2) / (1 + s)\", within = 1e-9 }",
        "{ near = 0.3, within = 1e-9 }",
    );
    std::fs::write(&f, broken).unwrap();
    let o = bin().args(["run", "--no-cache"]).arg(&f).output().unwrap();
    assert_eq!(o.status.code(), Some(1), "{}", text(&o));
    assert!(text(&o).contains("FAILED"));
    let o = bin()
        .args(["check"])
        .arg(&f)
        .args(["--set", "rabbi=1 Hz"])
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(2), "{}", text(&o));
    assert!(text(&o).contains("did you mean `rabi`"), "{}", text(&o));
    let o = bin()
        .args(["check"])
        .arg(&f)
        .args(["--set", "rabi=3 s"])
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(2), "{}", text(&o));
    let o = bin().args(["check", "/nonexistent/x.md"]).output().unwrap();
    assert_eq!(o.status.code(), Some(2));
    let o = bin().args(["frobnicate"]).output().unwrap();
    assert_eq!(o.status.code(), Some(2));
}

#[test]
fn a_runtime_failure_exits_3() {
    let dir = temp_dir("runtime");
    let f = dir.join("exact.md");
    let src = std::fs::read_to_string(
        Path::new(env!("CARGO_MANIFEST_DIR")).join("notebooks-spec/examples/bloch-siegert.md"),
    )
    .unwrap();
    std::fs::write(
        &f,
        src.replace("rtol     = 1e-10", "max_steps = 5\nrtol     = 1e-10"),
    )
    .unwrap();
    let o = bin().args(["run", "--no-cache"]).arg(&f).output().unwrap();
    assert_eq!(o.status.code(), Some(3), "{}", text(&o));
    assert!(text(&o).contains("exact.md:"), "{}", text(&o));
}

#[test]
fn a_prose_edit_recomputes_nothing_and_a_block_edit_only_its_dependents() {
    let dir = temp_dir("cache");
    let f = dir.join("stirap.md");
    let src = std::fs::read_to_string(
        Path::new(env!("CARGO_MANIFEST_DIR")).join("notebooks-spec/examples/stirap.md"),
    )
    .unwrap();
    std::fs::write(&f, &src).unwrap();
    let o = bin().arg("run").arg(&f).output().unwrap();
    assert!(o.status.success(), "{}", text(&o));
    assert!(!text(&o).contains("from cache"));
    assert!(dir.join(".fieldbook-cache").is_dir());
    std::fs::write(
        &f,
        src.replace("We move the atoms", "This week we move the atoms"),
    )
    .unwrap();
    let best = (0..3)
        .map(|_| {
            let t = Instant::now();
            let o = bin().arg("run").arg(&f).output().unwrap();
            assert!(o.status.success(), "{}", text(&o));
            assert_eq!(text(&o).matches("from cache").count(), 2, "{}", text(&o));
            t.elapsed().as_secs_f64()
        })
        .fold(f64::INFINITY, f64::min);
    println!(
        "prose-only re-run of stirap.md: {:.1} ms (target < 50 ms)",
        best * 1e3
    );
    assert!(best < 0.050, "re-run took {best} s");
    // Changing only the intuitive-order sequence recomputes `wrong_order` and not `transfer`.
    let edited = src.replace("```sequence intuitive\n[[step]]\npulse = \"pump\"\nshape = { gaussian = \"sigma\" }\nduration = \"8 sigma\"", "```sequence intuitive\n[[step]]\npulse = \"pump\"\nshape = { gaussian = \"sigma\" }\nduration = \"7 sigma\"");
    assert_ne!(edited, src);
    std::fs::write(&f, edited).unwrap();
    let o = bin().arg("run").arg(&f).output().unwrap();
    let t = text(&o);
    assert!(
        t.lines()
            .any(|l| l.starts_with("evolve transfer") && l.contains("from cache")),
        "{t}"
    );
    assert!(
        t.lines()
            .any(|l| l.starts_with("evolve wrong_order") && !l.contains("from cache")),
        "{t}"
    );
}

#[test]
fn a_cycle_frequency_without_2pi_warns_with_both_readings() {
    let dir = temp_dir("hz");
    let f = dir.join("hz.md");
    let src = std::fs::read_to_string(
        Path::new(env!("CARGO_MANIFEST_DIR")).join("notebooks-spec/examples/rabi-chevron.md"),
    )
    .unwrap();
    std::fs::write(
        &f,
        src.replace("rabi  = \"2π × 25 kHz\"", "rabi  = \"25 kHz\""),
    )
    .unwrap();
    let o = bin().arg("check").arg(&f).output().unwrap();
    let t = text(&o);
    assert_eq!(o.status.code(), Some(0), "{t}");
    assert!(
        t.contains(
            "warning: the Rabi frequency (through `rabi`): `25 kHz` is read as 2.5×10⁴ rad/s"
        ),
        "{t}"
    );
    assert!(t.contains("write `2π × 25 kHz`"), "{t}");
    // Zero and properly written values do not warn.
    let o = bin()
        .arg("check")
        .arg(Path::new(env!("CARGO_MANIFEST_DIR")).join("notebooks-spec/examples/rabi-chevron.md"))
        .output()
        .unwrap();
    assert!(!text(&o).contains("warning:"), "{}", text(&o));
}

/// Formulas in `t`: a Gaussian written as an envelope formula with area π inverts the atom on
/// resonance (area theorem, McCall & Hahn, Phys. Rev. 183, 457 (1969)), and a linear chirp
/// written as a formula gives Zener's transfer 1 − exp(−πΩ²/2α) like the built-in linear chirp
/// (Zener, Proc. R. Soc. A 137, 696 (1932); tolerance 5e-3 for the finite sweep).
#[test]
fn formulas_in_t_drive_envelopes_and_chirps() {
    let dir = temp_dir("formula");
    let f = dir.join("formula.md");
    std::fs::write(
        &f,
        r#"# Formula envelope and chirp

```params
rabi  = "2π × 50 kHz"
sigma = "2 µs"
rate  = "2π × 10 kHz / 1 µs"
span  = "2π × 16 MHz"
```

```atom a
[levels]
g = "0 Hz"
e = "2π × 1 GHz"
```

```light drive
drives = "g -> e"
rabi   = "rabi"
```

```light sweep
drives   = "g -> e"
detuning = "-span / 2"
rabi     = "rabi"
chirp    = { formula = "rate * t" }
```

```sequence gauss
[[step]]
pulse    = "drive"
shape    = { formula = "exp(-(t - 4 sigma)^2 / (2 sigma^2))" }
duration = "8 sigma"
area     = "π"
```

```sequence chirped
[[step]]
pulse    = "sweep"
duration = "span / rate"
```

```evolve pi
sequence = "gauss"
observe  = ["population(e)"]
rtol     = 1e-10
atol     = 1e-12
```

```evolve lz
sequence = "chirped"
observe  = ["population(e)"]
rtol     = 1e-9
atol     = 1e-11
```

```check
"pi.final.population(e)" = { near = 1, within = 1e-6 }
"lz.final.population(e)" = { near = "1 - exp(-π rabi^2 / (2 rate))", within = 5e-3 }
```
"#,
    )
    .unwrap();
    let o = bin().args(["run", "--no-cache"]).arg(&f).output().unwrap();
    assert_eq!(o.status.code(), Some(0), "{}", text(&o));
    assert!(text(&o).contains("all 2 check(s) held"), "{}", text(&o));
}
