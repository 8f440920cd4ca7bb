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

/// Text as it appears in HTML.
fn html_text(s: &str) -> String {
    s.replace('&', "&amp;")
        .replace('<', "&lt;")
        .replace('>', "&gt;")
        .replace('"', "&quot;")
        .replace('\'', "&#39;")
}

/// `fieldbook diff A B EXTRA… --html OUT`.
fn diff_page(a: &Path, b: &Path, out: &Path, extra: &[&std::ffi::OsStr]) -> std::process::Output {
    bin()
        .arg("diff")
        .arg(a)
        .arg(b)
        .args(extra)
        .arg("--html")
        .arg(out)
        .output()
        .unwrap()
}

/// Runs `example` into `dir/a`, re-runs it with `set` into `dir/b`, and returns both records.
fn two_versions(dir: &Path, example: &str, set: &str) -> (std::path::PathBuf, std::path::PathBuf) {
    let f = dir.join(example);
    std::fs::copy(
        Path::new(env!("CARGO_MANIFEST_DIR"))
            .join("notebooks-spec/examples")
            .join(example),
        &f,
    )
    .unwrap();
    let o = bin()
        .arg("run")
        .arg(&f)
        .arg("--out")
        .arg(dir.join("a"))
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", text(&o));
    let stem = f.file_stem().unwrap().to_string_lossy().into_owned();
    let ra = dir.join("a").join(format!("{stem}.record.json"));
    let o = bin()
        .arg("rerun")
        .arg(&ra)
        .args(["--set", set, "--out"])
        .arg(dir.join("b"))
        .output()
        .unwrap();
    assert!(o.status.code().is_some_and(|c| c < 2), "{}", text(&o));
    (ra, dir.join("b").join(format!("{stem}.html")))
}

#[test]
fn the_diff_page_lists_every_change_and_overlays_the_curves() {
    let dir = temp_dir("page");
    let (ra, rb) = two_versions(&dir, "steady-state-line.md", "rabi=2π × 9 MHz");
    let out = dir.join("diff.html");
    // The new side is the HTML report: diff reads the record embedded in it.
    let o = diff_page(&ra, &rb, &out, &[]);
    let t = text(&o);
    assert_eq!(o.status.code(), Some(1), "{t}");
    assert!(t.contains(&format!("diff page: {}", out.display())), "{t}");
    let page = std::fs::read_to_string(&out).unwrap();
    // The count and every change the terminal shows.
    let n: usize = t
        .lines()
        .find_map(|l| {
            l.split(": ")
                .last()?
                .strip_suffix(" difference(s)")?
                .parse()
                .ok()
        })
        .expect("a count");
    assert!(page.contains(&format!("{n} differences")), "{n}");
    let listed: Vec<&str> = t.lines().filter(|l| l.starts_with("  ")).collect();
    assert_eq!(listed.len(), n);
    for l in listed {
        let (subject, rest) = l.trim().split_once(": ").unwrap();
        let shown = format!("<code>{}</code>: {}", html_text(subject), html_text(rest));
        assert!(page.contains(&shown), "missing {shown}");
    }
    // A re-run says so, and the curve appears in both versions on one figure.
    assert!(page.contains("is a re-run of the old one"));
    assert_eq!(page.matches("<svg").count(), 1);
    assert!(page.contains("population(e) · old"));
    assert!(page.contains("population(e) · new"));
    assert!(
        page.contains("stroke-dasharray=\"7 5\""),
        "the old curve is dashed"
    );
    assert!(!page.contains("<script") && !page.contains("http://") && !page.contains("https://"));
    assert!(!page.contains("url("));

    // Equal records: exit 0 and a page that says so; the page is replaced, being ours.
    let o = diff_page(&ra, &ra, &out, &[]);
    assert_eq!(o.status.code(), Some(0), "{}", text(&o));
    let page = std::fs::read_to_string(&out).unwrap();
    assert!(page.contains("Equal: the records agree within tolerance"));
    assert!(!page.contains("class=\"fb-changes\" id=\"parameter\""));

    // Anything else at that path is kept: a record, or a page of one's own.
    let before = std::fs::read(&ra).unwrap();
    let o = diff_page(&ra, &rb, &ra, &[]);
    assert_eq!(o.status.code(), Some(2), "{}", text(&o));
    assert!(text(&o).contains("--force"), "{}", text(&o));
    assert_eq!(std::fs::read(&ra).unwrap(), before);
    let mine = dir.join("mine.html");
    std::fs::write(&mine, "<p>notes</p>").unwrap();
    let o = diff_page(&ra, &rb, &mine, &[]);
    assert_eq!(o.status.code(), Some(2));
    assert_eq!(std::fs::read_to_string(&mine).unwrap(), "<p>notes</p>");
    let o = diff_page(&ra, &rb, &mine, &["--force".as_ref()]);
    assert_eq!(o.status.code(), Some(1), "{}", text(&o));
    assert!(
        std::fs::read_to_string(&mine)
            .unwrap()
            .contains("differences")
    );

    // --html belongs to diff; a template folder replaces the page's layout.
    let o = bin()
        .arg("run")
        .arg(&ra)
        .arg("--html")
        .arg(&out)
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(2));
    let tpl = dir.join("tpl");
    std::fs::create_dir_all(&tpl).unwrap();
    std::fs::write(tpl.join("diff.html"), "<main>house diff {{summary}}</main>").unwrap();
    let o = diff_page(&ra, &rb, &out, &["--templates".as_ref(), tpl.as_os_str()]);
    assert_eq!(o.status.code(), Some(1));
    let page = std::fs::read_to_string(&out).unwrap();
    assert!(
        page.starts_with("<main>house diff <section class=\"fb-banner fb-failed\">"),
        "{page}"
    );
}

#[test]
fn heat_maps_are_compared_side_by_side_and_by_their_difference() {
    let dir = temp_dir("maps");
    let (ra, rb) = two_versions(&dir, "rabi-chevron.md", "rabi=2π × 30 kHz");
    let out = dir.join("maps.html");
    let o = diff_page(&ra, &rb, &out, &[]);
    assert_eq!(o.status.code(), Some(1), "{}", text(&o));
    let page = std::fs::read_to_string(&out).unwrap();
    assert_eq!(
        page.matches("<svg").count(),
        3,
        "old, new and their difference"
    );
    assert!(page.contains("Transfer versus detuning and pulse length (old)"));
    assert!(page.contains("Transfer versus detuning and pulse length (new)"));
    assert!(page.contains("Transfer versus detuning and pulse length: new − old"));
    // A check that flipped is named with both outcomes, and a moved value with its change.
    assert!(page.contains("held → FAILED"), "a check that failed");
    assert!(page.contains(" %)"), "a relative change");
}
