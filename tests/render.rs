//! The HTML report as a reader and an archive see it: run examples with `--out`, render their
//! records, then check that each page is self-contained (no script but the record, no outside address), shows its figures
//! and checks, embeds exactly the record beside it, and can be re-run and diffed; hostile prose
//! is sanitised, math becomes MathML; a large synthetic record renders fast and stays small.

mod common;
use common::*;

use std::path::{Path, PathBuf};
use std::time::Instant;

use fieldbook::kernel::results::{AxisResult, EvolveResult, ObsResult, SolverInfo};
use fieldbook::record::{
    self, CellOutput, CellRecord, CheckRecord, Column, Lineage, NamedResult, ParamRecord, Record,
    SourceInfo, Timing, Volatile,
};
use fieldbook::render;

fn example(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join(format!("notebooks-spec/examples/{name}.md"))
}

/// Runs `file` with `--out dir` (cache inside `dir`), renders the record it wrote with
/// `templates`, and writes the report beside it as `NAME.html`, returning the page.
fn run(file: &Path, dir: &Path, templates: Option<&Path>) -> String {
    let o = bin()
        .arg("run")
        .arg(file)
        .arg("--out")
        .arg(dir)
        .arg("--cache")
        .arg(dir.join("cache"))
        .output()
        .unwrap();
    let stem = file.file_stem().unwrap().to_string_lossy().into_owned();
    let rec = record::io::read(&dir.join(format!("{stem}.record.json")))
        .unwrap_or_else(|e| panic!("{e}\n{}", text(&o)));
    let html = render::report(&rec, templates).unwrap();
    record::io::write_atomic(&dir.join(format!("{stem}.html")), html.as_bytes()).unwrap();
    html
}

/// The page without its embedded record, i.e. everything the renderer wrote itself.
fn without_record(html: &str) -> String {
    let open = "<script type=\"application/json\" id=\"fieldbook-record\">";
    let start = html.find(open).expect("an embedded record");
    let end = start + html[start..].find("</script>").expect("closed") + "</script>".len();
    format!("{}{}", &html[..start], &html[end..])
}

/// `rec` written as JSON and read back, as its embedded copy was: serde_json's default float
/// parser can miss a value in the last bit, so a record read from a file and embedded again is
/// compared after the same trip.
fn reparsed(rec: &Record) -> Record {
    serde_json::from_str(&serde_json::to_string(rec).unwrap()).unwrap()
}

/// A page that names no outside address and runs no script.
fn assert_nothing_outside(own: &str) {
    assert!(!own.contains("http://") && !own.contains("https://"));
    assert!(!own.contains("<script"), "a script besides the record");
    assert!(!own.contains("<link") && !own.contains("@import") && !own.contains("url("));
}

fn assert_self_contained(html: &str) {
    assert_nothing_outside(&without_record(html));
    assert_eq!(html.matches("<script").count(), 1);
}

#[test]
fn example_reports_are_self_contained_and_embed_their_record() {
    let dir = temp_dir("examples");
    for name in [
        "rabi-chevron",
        "stirap",
        "landau-zener",
        "ramsey-light-shift",
    ] {
        let html = run(&example(name), &dir, None);
        assert_self_contained(&html);
        assert!(html.contains("fb-banner"), "{name}: no banner");
        assert!(
            html.contains("<table class=\"fb-checks\">"),
            "{name}: no checks"
        );
        assert!(
            html.contains("<details class=\"fb-source\">"),
            "{name}: no sources"
        );
        assert!(
            html.contains("<h2>Provenance</h2>"),
            "{name}: no provenance"
        );
        let json = record::io::read(&dir.join(format!("{name}.record.json"))).unwrap();
        assert!(
            render::extract_record(&html).unwrap() == reparsed(&json),
            "{name}: round trip"
        );
        if name != "landau-zener" {
            let svg = html.find("<svg").expect("a figure");
            let tag = &html[svg..svg + html[svg..].find('>').unwrap()];
            assert!(
                tag.contains("width=\"") && tag.contains("height=\""),
                "{tag}"
            );
        }
    }
    let chevron = std::fs::read_to_string(dir.join("rabi-chevron.html")).unwrap();
    assert!(chevron.contains("fb-figure fb-map"));
    assert!(
        chevron.contains("detuning Δ/2π (kHz)"),
        "frequency axis in kHz"
    );
    assert!(chevron.contains("pulse length (µs)"), "time axis in µs");
    assert!(chevron.contains("All 3 checks held"));
}

#[test]
fn rerun_and_diff_accept_the_html_report() {
    let dir = temp_dir("rerun");
    run(&example("landau-zener"), &dir, None);
    let html = dir.join("landau-zener.html");
    let json = dir.join("landau-zener.record.json");
    let o = bin().arg("diff").arg(&html).arg(&json).output().unwrap();
    assert_eq!(o.status.code(), Some(0), "{}", text(&o));
    let again = dir.join("again");
    let o = bin()
        .arg("rerun")
        .arg(&html)
        .arg("--out")
        .arg(&again)
        .arg("--cache")
        .arg(dir.join("cache"))
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(0), "{}", text(&o));
    let child = record::io::read(&again.join("landau-zener.record.json")).unwrap();
    let parent = record::io::read(&json).unwrap();
    assert_eq!(
        child.lineage.parent.as_deref(),
        Some(parent.lineage.results_sha256.as_str())
    );
    let o = bin()
        .arg("diff")
        .arg(&html)
        .arg(again.join("landau-zener.record.json"))
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(0), "{}", text(&o));
    let not_a_report = dir.join("plain.html");
    std::fs::write(&not_a_report, "<html><body>hi</body></html>").unwrap();
    let o = bin()
        .arg("diff")
        .arg(&not_a_report)
        .arg(&json)
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(2), "{}", text(&o));
}

#[test]
fn hostile_prose_is_sanitised_and_math_renders() {
    let dir = temp_dir("prose");
    let f = dir.join("hostile.md");
    std::fs::write(
        &f,
        "# Hostile prose\n\n\
         Text <script>alert(1)</script> and <b onclick=\"steal()\">bold</b>,\n\
         [a link](javascript:alert(2)) and <a href=\"javascript:alert(3)\">another</a>.\n\
         <img src=\"https://example.invalid/x.png\"> </script><script>alert(4)</script> <!-- c --> \\\\<x\n\n\
         Inline $\\Omega^2/(\\Omega^2 + \\Delta^2)$ and display\n\n$$P = \\sin^2(\\theta/2)$$\n\n\
         ```params\nrabi = \"2π × 1 MHz\"\n```\n",
    )
    .unwrap();
    let html = run(&f, &dir, None);
    let own = without_record(&html);
    assert!(!own.contains("<script"), "{own}");
    assert!(!own.contains("alert("), "{own}");
    assert!(!own.contains("onclick"), "{own}");
    assert!(!own.contains("javascript:"), "{own}");
    assert!(!own.contains("example.invalid"), "{own}");
    assert!(own.contains("<b>bold</b>"));
    assert!(own.matches("<math").count() >= 2, "{own}");
    assert!(own.contains("display=\"block\""));
    // The record keeps the source as written and still reads back.
    let rec = record::io::read(&dir.join("hostile.record.json")).unwrap();
    assert!(render::extract_record(&html).unwrap() == reparsed(&rec));
    assert!(
        html.contains("<\\/script>"),
        "the source's </script> is escaped in the record"
    );
    assert_eq!(html.matches("<script").count(), 1);
}

#[test]
fn a_templates_folder_replaces_the_built_in_files() {
    let dir = temp_dir("templates");
    let t = dir.join("tpl");
    std::fs::create_dir_all(&t).unwrap();
    std::fs::write(t.join("style.css"), "/* house style marker */").unwrap();
    std::fs::write(
        t.join("report.html"),
        "<html><head><style>{{style}}</style></head><body><h1>{{title}}</h1>{{body}}</body></html>",
    )
    .unwrap();
    let html = run(&example("landau-zener"), &dir, Some(&t));
    assert!(html.contains("house style marker"));
    assert!(html.contains("<h1>Landau–Zener sweep of the Plover RF coil</h1>"));
    // The template has no record placeholder; the record is embedded all the same.
    assert!(render::extract_record(&html).is_ok());
}

fn column(label: &str, dim: [i8; 5], values: Vec<f64>) -> Column {
    Column {
        label: label.into(),
        title: None,
        dim,
        values,
    }
}

/// A record with a 201 × 201 heat map and four line plots of three 201-point curves each, with
/// the map's values also under `results` as a real run has them. The embedded record (about
/// 1.7 MB of JSON, the map's grid stored twice) is most of the page.
fn large_record() -> Record {
    let n = 201;
    let freq = [-1, 0, 0, 0, 0];
    let time = [1, 0, 0, 0, 0];
    let tau = std::f64::consts::TAU;
    let delta: Vec<f64> = (0..n)
        .map(|i| tau * (-100e3 + 200e3 * i as f64 / (n - 1) as f64))
        .collect();
    let len: Vec<f64> = (0..n)
        .map(|j| 1e-6 + 59e-6 * j as f64 / (n - 1) as f64)
        .collect();
    let rabi = tau * 25e3;
    let z: Vec<f64> = delta
        .iter()
        .flat_map(|d| {
            len.iter().map(move |t| {
                let w = (rabi * rabi + d * d).sqrt();
                rabi * rabi / (w * w) * (w * t / 2.0).sin().powi(2)
            })
        })
        .collect();
    let mut cells = vec![CellRecord {
        kind: "prose".into(),
        name: None,
        line: 1,
        text: "# Synthetic\n\nA large report with $\\Omega t$.\n".into(),
        output: None,
    }];
    cells.push(CellRecord {
        kind: "plot".into(),
        name: None,
        line: 5,
        text: "```plot\n```".into(),
        output: Some(CellOutput::Map {
            title: "chevron".into(),
            x: column("chevron.delta", freq, delta.clone()),
            y: column("len", time, len.clone()),
            z: column("chevron.final.population(e)", [0; 5], z.clone()),
        }),
    });
    let t: Vec<f64> = (0..201).map(|i| i as f64 * 5e-8).collect();
    for p in 0..4 {
        let curves = (0..3)
            .map(|c| {
                let f = (c + 1) as f64 * 1e6;
                column(
                    &format!("e{p}.population(l{c})"),
                    [0; 5],
                    t.iter().map(|t| (f * t).sin().powi(2)).collect(),
                )
            })
            .collect();
        cells.push(CellRecord {
            kind: "plot".into(),
            name: None,
            line: 10 + p,
            text: "```plot\n```".into(),
            output: Some(CellOutput::Curves {
                y_title: None,
                title: format!("plot {p}"),
                x: column("time", time, t.clone()),
                curves,
                log_x: false,
                log_y: p == 3,
            }),
        });
    }
    cells.push(CellRecord {
        kind: "check".into(),
        name: None,
        line: 20,
        text: "```check\n```".into(),
        output: Some(CellOutput::Checks { indices: vec![0] }),
    });
    let result = EvolveResult {
        axes: vec![
            AxisResult {
                name: "delta".into(),
                dim: freq,
                values: delta,
            },
            AxisResult {
                name: "len".into(),
                dim: time,
                values: len,
            },
        ],
        times: None,
        observables: vec![ObsResult {
            label: "population(e)".into(),
            width: 1,
            dim: [0; 5],
            finals: z,
            trace: None,
        }],
        solver: SolverInfo {
            method: "eigen".into(),
            reason: "constant Hamiltonian".into(),
            rtol: 1e-8,
            atol: 1e-10,
            steps: 40401,
            norm_drift: 1e-15,
            frame: vec![],
        },
        steady: false,
    };
    Record {
        format: record::FORMAT.into(),
        version: record::VERSION,
        name: "synthetic".into(),
        source: SourceInfo {
            file: "synthetic.md".into(),
            text: "# Synthetic\n".into(),
            sha256: record::sha256(b"# Synthetic\n"),
        },
        cells,
        parameters: vec![ParamRecord {
            name: "rabi".into(),
            value: rabi,
            dim: freq,
            shown: "2π × 25.00 kHz".into(),
            expr: "2π × 25 kHz".into(),
            overridden: true,
        }],
        results: vec![NamedResult {
            block: "chevron".into(),
            result,
        }],
        checks: vec![CheckRecord {
            path: "chevron.final.population(e)".into(),
            line: 21,
            got: 0.5,
            dim: [0; 5],
            shown: "0.5000".into(),
            expected: "near 1 within 1e-6".into(),
            passed: false,
            bounds: None,
            selection: None,
        }],
        inline: vec![],
        warnings: vec![],
        errors: vec![],
        lineage: Lineage::default(),
        volatile: Volatile {
            date: "2026-01-01T00:00:00Z".into(),
            tool_version: "0.1.0".into(),
            commit: "unknown".into(),
            platform: "test".into(),
            timings: vec![Timing {
                block: "chevron".into(),
                seconds: 0.25,
                cached: false,
            }],
        },
    }
}

#[test]
fn a_large_report_renders_fast_and_stays_small() {
    let rec = large_record();
    let _warm = render::report(&rec, None).unwrap();
    let best = (0..3)
        .map(|_| {
            let t0 = Instant::now();
            let html = render::report(&rec, None).unwrap();
            (t0.elapsed().as_secs_f64(), html)
        })
        .min_by(|a, b| a.0.total_cmp(&b.0))
        .unwrap();
    let (seconds, html) = best;
    println!(
        "201 × 201 map + 4 line plots: {:.1} ms, {:.2} MB ({} bytes; test profile)",
        seconds * 1e3,
        html.len() as f64 / 1e6,
        html.len()
    );
    assert!(html.len() < 2_000_000, "{} bytes", html.len());
    assert!(seconds < 1.5, "{seconds} s");
    assert_self_contained(&html);
    assert!(html.contains("1 of 1 checks failed"));
    assert!(html.contains("set with --set"));
    assert!(
        render::extract_record(&html).unwrap() == reparsed(&rec),
        "round trip"
    );
}

/// The section of the block that starts at `line`.
fn section(html: &str, line: usize) -> &str {
    let start = html
        .find(&format!("<section class=\"fb-block\" id=\"line-{line}\">"))
        .unwrap_or_else(|| panic!("no block at line {line}"));
    let end = start + html[start..].find("</section>").unwrap();
    &html[start..end]
}

#[test]
fn blocks_show_their_own_warnings_timings_and_checks() {
    let dir = temp_dir("blocks");
    let f = dir.join("line.md");
    // A bare `MHz` Rabi frequency is warned about, at the light block.
    let text = common::example("steady-state-line.md")
        .replace("rabi     = \"rabi\"", "rabi     = \"38 MHz\"");
    std::fs::write(&f, &text).unwrap();
    let html = run(&f, &dir, None);
    let rec = record::io::read(&dir.join("line.record.json")).unwrap();
    let light_line = text
        .lines()
        .position(|l| l.starts_with("```light"))
        .unwrap()
        + 1;
    assert_eq!(rec.warnings.len(), 1, "{:?}", rec.warnings);
    assert_eq!(rec.warnings[0].line, light_line + 3);
    let light = section(&html, light_line);
    assert!(
        light.contains("<ul class=\"fb-messages\"><li class=\"fb-warning\">"),
        "{light}"
    );
    assert!(light.contains(&format!("line {}:", light_line + 3)));
    // Only there: no other block lists it, and the banner links to the block.
    assert_eq!(html.matches("class=\"fb-warning\"").count(), 1);
    assert!(html.contains(&format!(
        "<a href=\"#line-{light_line}\">line {}:",
        light_line + 3
    )));
    // The evolve block names its own wall time.
    let evolve_line = text
        .lines()
        .position(|l| l.starts_with("```evolve"))
        .unwrap()
        + 1;
    let seconds = rec.volatile.timings[0].seconds;
    let head = section(&html, evolve_line);
    let shown =
        fieldbook::notebook::expr::format_quantity(seconds, fieldbook::notebook::expr::Dim::TIME);
    assert!(
        head.contains(&format!(
            "<b>evolve line</b> · line {evolve_line} · {shown}</p>"
        )),
        "{head}"
    );
    // The four checks of the plotted curve are drawn on it and listed under it; the check of
    // the scattering rate, which is not plotted, is not.
    let plot_line = text.lines().position(|l| l.starts_with("```plot")).unwrap() + 1;
    let plot = section(&html, plot_line);
    let g = &plot[plot
        .find("<g class=\"fb-marks\"")
        .expect("marks on the plot")..];
    assert_eq!(g.matches("<text").count(), 4, "{g}");
    assert_eq!(plot.matches("<li class=\"fb-").count(), 4);
    assert!(!plot.contains("line.final.scattering"));
    // Each listed as held or failed, as the record has it.
    let drawn = rec.checks.iter().filter(|c| !c.path.contains("scattering"));
    let held = drawn.filter(|c| c.passed).count();
    assert_eq!(plot.matches("<li class=\"fb-held\"").count(), held);
}

#[test]
fn a_rerun_says_what_it_was_derived_from() {
    let dir = temp_dir("lineage");
    let f = dir.join("line.md");
    std::fs::write(&f, common::example("steady-state-line.md")).unwrap();
    let first = run(&f, &dir, None);
    assert!(
        !first.contains("<p class=\"fb-lineage\">"),
        "a first run has no parent"
    );
    let again = dir.join("again");
    let o = bin()
        .arg("rerun")
        .arg(dir.join("line.record.json"))
        .args(["--set", "rabi=2π × 9 MHz", "--out"])
        .arg(&again)
        .arg("--cache")
        .arg(dir.join("cache"))
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", text(&o));
    let parent = record::io::read(&dir.join("line.record.json")).unwrap();
    let html = std::fs::read_to_string(again.join("line.html")).unwrap();
    let short = &parent.lineage.results_sha256[..12];
    assert!(
        html.contains(&format!(
            "Derived from <code title=\"{}\">{short}</code> with <code>rabi = 2π × 9 MHz</code>",
            parent.lineage.results_sha256
        )),
        "{}",
        without_record(&html)
    );
}

#[test]
fn run_out_writes_an_index_of_every_report_in_the_folder() {
    let dir = temp_dir("index");
    let out = dir.join("out");
    let broken = dir.join("broken.md");
    std::fs::write(&broken, "# Broken\n\n```params\nx = \"1 +\"\n```\n").unwrap();
    let o = bin()
        .arg("run")
        .arg(example("steady-state-line"))
        .arg(example("stirap"))
        .arg(&broken)
        .arg("--out")
        .arg(&out)
        .arg("--cache")
        .arg(dir.join("cache"))
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(2), "{}", text(&o));
    let index = std::fs::read_to_string(out.join("index.html")).unwrap();
    assert_nothing_outside(&index);
    for name in ["steady-state-line", "stirap"] {
        let rec = record::io::read(&out.join(format!("{name}.record.json"))).unwrap();
        let title = rec
            .cells
            .iter()
            .find_map(|c| c.text.lines().find_map(|l| l.strip_prefix("# ")))
            .unwrap();
        assert!(
            index.contains(&format!("<a href=\"{name}.html\">{title}</a>")),
            "{name}: {index}"
        );
        assert!(index.contains(&format!("{} held", rec.checks.len())));
    }
    assert!(
        index.contains("input error: nothing was written"),
        "{index}"
    );
    assert!(!index.contains("href=\"broken.html\""));
    assert!(index.contains("1 of 3 run-files need attention"));

    // A later run of one file keeps the other rows: the index is the folder's.
    let o = bin()
        .arg("run")
        .arg(example("landau-zener"))
        .arg("--out")
        .arg(&out)
        .arg("--cache")
        .arg(dir.join("cache"))
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", text(&o));
    let index = std::fs::read_to_string(out.join("index.html")).unwrap();
    for name in ["landau-zener", "steady-state-line", "stirap"] {
        assert!(index.contains(&format!("href=\"{name}.html\"")), "{name}");
    }
    assert!(index.contains("3 run-files, every check held"), "{index}");

    // An index.html that Fieldbook did not write is kept, unless forced.
    let other = dir.join("site");
    std::fs::create_dir_all(&other).unwrap();
    std::fs::write(other.join("index.html"), "<h1>our group</h1>").unwrap();
    let run_into = |extra: &[&str]| {
        bin()
            .arg("run")
            .arg(example("landau-zener"))
            .arg("--out")
            .arg(&other)
            .args(extra)
            .arg("--cache")
            .arg(dir.join("cache"))
            .output()
            .unwrap()
    };
    let o = run_into(&[]);
    assert_eq!(o.status.code(), Some(2), "{}", text(&o));
    assert!(
        text(&o).contains("not a page Fieldbook wrote"),
        "{}",
        text(&o)
    );
    assert_eq!(
        std::fs::read_to_string(other.join("index.html")).unwrap(),
        "<h1>our group</h1>"
    );
    assert!(
        other.join("landau-zener.html").is_file(),
        "the report is still written"
    );
    let o = run_into(&["--force"]);
    assert!(o.status.success(), "{}", text(&o));
    assert!(
        std::fs::read_to_string(other.join("index.html"))
            .unwrap()
            .contains("landau-zener.html")
    );
}

/// Axes and legends read as quantities, not internal paths: names given in the plot block
/// (`xlabel`, `ylabel`, `labels`) with the unit added, else the paths shortened (no block, no
/// `final`), with the block named only when curves come from several.
#[test]
fn plots_name_their_axes_and_curves_for_a_reader() {
    let dir = temp_dir("names");
    let f = dir.join("names.md");
    let body = common::example("steady-state-line.md").replace(
        "title = \"Steady-state excited population across the line\"",
        "title = \"Steady-state excited population across the line\"\nxlabel = \"probe detuning Δ\"\nylabel = \"excited population\"\nlabels = [\"ρ_ee\"]",
    );
    assert!(body.contains("xlabel"), "the example's plot block changed");
    std::fs::write(&f, body).unwrap();
    let html = run(&f, &dir, None);
    assert!(html.contains("probe detuning Δ/2π (MHz)"), "x axis");
    assert!(html.contains("excited population"), "y axis");
    let rec = record::io::read(&dir.join("names.record.json")).unwrap();
    let Some(CellOutput::Curves {
        x, curves, y_title, ..
    }) = rec.cells.iter().find_map(|c| {
        c.output
            .clone()
            .filter(|o| matches!(o, CellOutput::Curves { .. }))
    })
    else {
        panic!("no curves");
    };
    assert_eq!(x.label, "line.delta", "the path stays for machines");
    assert_eq!(x.title.as_deref(), Some("probe detuning Δ"));
    assert_eq!(curves[0].title.as_deref(), Some("ρ_ee"));
    assert_eq!(y_title.as_deref(), Some("excited population"));

    // Without names: shortened paths, the quantity on the y axis, blocks named when mixed.
    let bare: String = common::example("dark-state-impurity.md")
        .lines()
        .filter(|l| {
            !l.starts_with("xlabel") && !l.starts_with("ylabel") && !l.starts_with("labels")
        })
        .map(|l| format!("{l}\n"))
        .collect();
    let f = dir.join("dark.md");
    std::fs::write(&f, bare).unwrap();
    let html = run(&f, &dir.join("dark"), None);
    assert!(html.contains("theta"), "x axis from the sweep axis");
    assert!(
        !html.contains("nofield.theta/"),
        "no block prefix on the x axis"
    );
    assert!(html.contains("nofield: population(g1_m0)"));
    assert!(html.contains("infield: population(g1_m0) at bias = 100 mG"));
    assert!(
        html.contains(">population<") || html.contains("population\n</text>"),
        "y axis is the quantity"
    );
}
