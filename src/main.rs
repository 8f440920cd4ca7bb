//! The `fieldbook` command line: `check` and `run` run-files, `rerun` records, `diff` two of
//! them. Exit codes are mapped here, in one place: 0 ok, 1 a check failed (for `diff`: the
//! records differ), 2 input error, 3 runtime failure (the largest applies when several files are
//! given).

use std::io::IsTerminal;
use std::path::{Path, PathBuf};
use std::process::ExitCode;
use std::sync::Mutex;
use std::time::Instant;

use fieldbook::kernel::cache::Cache;
use fieldbook::kernel::session::{self, RunOptions};
use fieldbook::notebook::{self, diag::Severity};
use fieldbook::record;
use fieldbook::render;
use fieldbook::summary;

/// `println!` that ignores a closed stdout (e.g. `fieldbook diff a b | head`) instead of
/// panicking: the output is a courtesy, the exit code is what matters.
macro_rules! say {
    ($($t:tt)*) => {{
        use std::io::Write as _;
        let _ = writeln!(std::io::stdout(), $($t)*);
    }};
}

/// `print!` with the same tolerance as [`say!`].
macro_rules! say_raw {
    ($($t:tt)*) => {{
        use std::io::Write as _;
        let _ = write!(std::io::stdout(), $($t)*);
    }};
}

/// Exit codes.
const OK: u8 = 0;
const CHECK_FAILED: u8 = 1;
const INPUT_ERROR: u8 = 2;
const RUNTIME_FAILURE: u8 = 3;

const USAGE: &str =
    "usage: fieldbook check FILE…                  validate run-files without simulating
       fieldbook run FILE… [OPTIONS]          run them and print results and checks
       fieldbook rerun RECORD… [OPTIONS]      re-run a record's source (writes to --out, default .)
       fieldbook diff A B [--rtol R] [--atol A] [--html OUT]
                                              compare two records (or reports); exit 1 when
                                              they differ; --html also writes a diff page
options of run and check:
       --set NAME=EXPR      override a parameter (repeatable), e.g. --set rabi=\"2π × 300 kHz\"
options of run:
       --no-cache           recompute every evolve block
       --cache DIR          keep cached results in DIR (default: .fieldbook-cache beside each file)
       --out DIR            write DIR/NAME.record.json, the report DIR/NAME.html and the
                            index DIR/index.html of every report there (atomically)
       --templates DIR      take report.html, index.html, diff.html and style.css from DIR
                            where present (also for diff --html)
       --force              replace a record of a different input in --out, or a file at
                            DIR/index.html or at the diff --html path that Fieldbook did not write
       --csv                with --out: also write every plotted or tabulated series as CSV
       fieldbook --version";

struct Args {
    command: String,
    files: Vec<PathBuf>,
    overrides: Vec<(String, String)>,
    cache: Option<Option<PathBuf>>,
    out: Option<PathBuf>,
    templates: Option<PathBuf>,
    force: bool,
    csv: bool,
    tolerance: record::diff::Tolerance,
    html: Option<PathBuf>,
}

fn parse_args(args: Vec<String>) -> Result<Args, String> {
    let mut it = args.into_iter();
    let command = it.next().ok_or("no command given")?;
    let mut out = Args {
        command,
        files: vec![],
        overrides: vec![],
        cache: None,
        out: None,
        templates: None,
        force: false,
        csv: false,
        tolerance: record::diff::Tolerance::default(),
        html: None,
    };
    while let Some(a) = it.next() {
        if let Some(rest) = a.strip_prefix("--set") {
            let kv = match rest.strip_prefix('=') {
                Some(kv) => kv.to_string(),
                None if rest.is_empty() => it.next().ok_or("--set needs NAME=EXPR")?,
                None => return Err(format!("unknown option `{a}`")),
            };
            let (k, v) = kv
                .split_once('=')
                .ok_or_else(|| format!("--set {kv}: expected NAME=EXPR"))?;
            out.overrides
                .push((k.trim().to_string(), v.trim().to_string()));
        } else if a == "--no-cache" {
            out.cache = Some(None);
        } else if a == "--out" {
            out.out = Some(it.next().ok_or("--out needs a folder")?.into());
        } else if a == "--templates" {
            out.templates = Some(it.next().ok_or("--templates needs a folder")?.into());
        } else if a == "--rtol" || a == "--atol" {
            let v = it.next().ok_or_else(|| format!("{a} needs a number"))?;
            let x: f64 = v
                .parse()
                .ok()
                .filter(|x: &f64| x.is_finite() && *x >= 0.0)
                .ok_or_else(|| format!("{a} {v}: expected a non-negative number"))?;
            if a == "--rtol" {
                out.tolerance.rtol = x;
            } else {
                out.tolerance.atol = x;
            }
        } else if a == "--html" {
            out.html = Some(it.next().ok_or("--html needs a file name")?.into());
        } else if a == "--force" {
            out.force = true;
        } else if a == "--csv" {
            out.csv = true;
        } else if a == "--cache" {
            out.cache = Some(Some(it.next().ok_or("--cache needs a folder")?.into()));
        } else if a.starts_with("--") {
            return Err(format!("unknown option `{a}`"));
        } else {
            out.files.push(a.into());
        }
    }
    if out.files.is_empty() {
        return Err(format!("`{}` needs at least one run-file", out.command));
    }
    if out.html.is_some() && out.command != "diff" {
        return Err("--html is an option of `diff`".into());
    }
    Ok(out)
}

fn main() -> ExitCode {
    let raw: Vec<String> = std::env::args().skip(1).collect();
    match raw.first().map(String::as_str) {
        Some("--version") => {
            say!("fieldbook {}", env!("CARGO_PKG_VERSION"));
            return ExitCode::SUCCESS;
        }
        Some("--help") | Some("-h") | Some("help") => {
            say!("{USAGE}");
            return ExitCode::SUCCESS;
        }
        Some("check") | Some("run") | Some("rerun") | Some("diff") => {}
        other => {
            if let Some(c) = other {
                eprintln!("error: unknown command `{c}`");
            }
            eprintln!("{USAGE}");
            return ExitCode::from(INPUT_ERROR);
        }
    }
    let args = match parse_args(raw) {
        Ok(a) => a,
        Err(e) => {
            eprintln!("error: {e}\n{USAGE}");
            return ExitCode::from(INPUT_ERROR);
        }
    };
    let code = match args.command.as_str() {
        "rerun" => args
            .files
            .iter()
            .map(|f| rerun(&args, f))
            .max()
            .unwrap_or(OK),
        "diff" => diff(&args),
        _ => {
            let codes: Vec<u8> = args.files.iter().map(|f| one_file(&args, f)).collect();
            let mut code = codes.iter().copied().max().unwrap_or(OK);
            if args.command == "run"
                && let Some(dir) = &args.out
            {
                let stopped: Vec<&Path> = args
                    .files
                    .iter()
                    .zip(&codes)
                    .filter(|(_, c)| **c == INPUT_ERROR)
                    .map(|(f, _)| f.as_path())
                    .collect();
                code = code.max(write_index(&args, dir, &stopped));
            }
            code
        }
    };
    ExitCode::from(code)
}

fn one_file(args: &Args, path: &Path) -> u8 {
    let name = path.display().to_string();
    let bytes = match std::fs::read(path) {
        Ok(b) => b,
        Err(e) => {
            eprintln!("error: cannot read {name}: {e}");
            return INPUT_ERROR;
        }
    };
    run_source(args, &name, &bytes, &args.overrides, None)
}

/// Re-run the source embedded in a record with its earlier overrides plus the new `--set`s.
fn rerun(args: &Args, path: &Path) -> u8 {
    let parent = match record::io::read(path) {
        Ok(r) => r,
        Err(e) => {
            eprintln!("error: {e}");
            return INPUT_ERROR;
        }
    };
    let mut overrides: Vec<(String, String)> = parent
        .parameters
        .iter()
        .filter(|p| p.overridden)
        .map(|p| (p.name.clone(), p.expr.clone()))
        .collect();
    overrides.extend(args.overrides.iter().cloned());
    let changes: Vec<String> = args
        .overrides
        .iter()
        .map(|(k, v)| format!("{k} = {v}"))
        .collect();
    say!(
        "re-running {} (record {:.12}…){}",
        parent.source.file,
        parent.lineage.results_sha256,
        if changes.is_empty() {
            String::new()
        } else {
            format!(" with {}", changes.join(", "))
        }
    );
    let lineage = record::Lineage {
        parent: Some(parent.lineage.results_sha256.clone()),
        changes,
        results_sha256: String::new(),
    };
    run_source(
        args,
        &parent.source.file,
        parent.source.text.as_bytes(),
        &overrides,
        Some(lineage),
    )
}

/// Compare two records.
fn diff(args: &Args) -> u8 {
    let [a, b] = args.files.as_slice() else {
        eprintln!("error: `diff` takes two records\n{USAGE}");
        return INPUT_ERROR;
    };
    let read = |p: &PathBuf| record::io::read(p).map_err(|e| eprintln!("error: {e}"));
    let (Ok(ra), Ok(rb)) = (read(a), read(b)) else {
        return INPUT_ERROR;
    };
    let changes = record::diff::diff(&ra, &rb, args.tolerance);
    let (a_name, b_name) = (a.display().to_string(), b.display().to_string());
    say_raw!("{}", record::diff::summary(&a_name, &b_name, &changes));
    if let Some(out) = &args.html {
        let old = render::diff::Side {
            record: &ra,
            path: &a_name,
        };
        let new = render::diff::Side {
            record: &rb,
            path: &b_name,
        };
        let page = render::diff::page(
            &old,
            &new,
            &changes,
            args.tolerance,
            args.templates.as_deref(),
        )
        .map_err(|e| e.to_string());
        match page.and_then(|p| write_page(out, &p, render::PageKind::Diff, args.force)) {
            Ok(()) => say!("diff page: {}", out.display()),
            Err(e) => {
                eprintln!("error: diff page {}: {e}", out.display());
                return INPUT_ERROR;
            }
        }
    }
    if changes.is_empty() { OK } else { CHECK_FAILED }
}

/// Writes `dir/index.html`: a row for every record in `dir`, and for each of `stopped` (files
/// of this run that wrote nothing because of an input error) a row saying so. Nothing is
/// written when `dir` does not exist (no file of this run got that far).
fn write_index(args: &Args, dir: &Path, stopped: &[&Path]) -> u8 {
    let Ok(listing) = std::fs::read_dir(dir) else {
        return OK;
    };
    let mut names: Vec<String> = listing
        .filter_map(|e| e.ok()?.file_name().into_string().ok())
        .filter_map(|n| n.strip_suffix(".record.json").map(str::to_string))
        .filter(|n| !n.starts_with('.'))
        .collect();
    names.sort();
    let mut entries: Vec<render::index::Entry> = names
        .iter()
        .map(|n| {
            let path = dir.join(format!("{n}.record.json"));
            match record::io::read(&path) {
                Ok(r) => {
                    let report = dir.join(format!("{}.html", r.name)).is_file();
                    render::index::Entry::of(&r, report)
                }
                Err(e) => render::index::Entry::missing(
                    n,
                    &path.display().to_string(),
                    format!("unreadable: {e}"),
                ),
            }
        })
        .collect();
    for file in stopped {
        let stem = file
            .file_stem()
            .map_or(String::new(), |s| s.to_string_lossy().into_owned());
        match entries.iter_mut().find(|e| e.name == stem) {
            Some(e) => {
                e.note = Some(format!(
                    "this run stopped with an input error; the report is the earlier one of {}",
                    e.date
                ))
            }
            None => entries.push(render::index::Entry::missing(
                &stem,
                &file.display().to_string(),
                "input error: nothing was written (see the messages of the run)".into(),
            )),
        }
    }
    let path = dir.join("index.html");
    let written = render::index::page(
        &dir.display().to_string(),
        &entries,
        args.templates.as_deref(),
    )
    .map_err(|e| e.to_string())
    .and_then(|page| write_page(&path, &page, render::PageKind::Index, args.force));
    match written {
        Ok(()) => {
            say!("index: {}", path.display());
            OK
        }
        Err(e) => {
            eprintln!("error: index {}: {e}", path.display());
            INPUT_ERROR
        }
    }
}

/// Writes a diff or index page atomically, unless `path` holds something else (a record, a
/// report, a page of the user's own) and `force` is not given.
fn write_page(path: &Path, page: &str, kind: render::PageKind, force: bool) -> Result<(), String> {
    let ours = kind.may_replace(path).map_err(|e| e.to_string())?;
    if !ours && !force {
        return Err(format!(
            "{} exists and is not a page Fieldbook wrote there; pass --force to replace it, or choose another name",
            path.display()
        ));
    }
    record::io::write_atomic(path, page.as_bytes()).map_err(|e| e.to_string())
}

/// Check (and, for `run` and `rerun`, execute) one run-file's text.
fn run_source(
    args: &Args,
    name: &str,
    bytes: &[u8],
    overrides: &[(String, String)],
    lineage: Option<record::Lineage>,
) -> u8 {
    let t0 = Instant::now();
    let source = match notebook::load(name, bytes) {
        Ok(s) => s,
        Err(bad) => {
            let (src, d) = *bad;
            eprint!("{}", d.render(&src));
            return INPUT_ERROR;
        }
    };
    let (doc, mut diags) = notebook::parse(source);
    let outcome = session::check(&doc, overrides);
    diags.extend(outcome.diags);
    diags.sort_by_key(|d| d.span.start);
    for d in &diags {
        eprint!("{}", d.render(&doc.source));
    }
    for c in &outcome.cli {
        eprintln!("error: {c}");
    }
    let errors = diags
        .iter()
        .filter(|d| d.severity == Severity::Error)
        .count()
        + outcome.cli.len();
    let Some(checked) = outcome.checked.filter(|_| errors == 0) else {
        eprintln!("{name}: {errors} error(s); nothing was run");
        return INPUT_ERROR;
    };
    if args.command == "check" {
        let warnings = diags.len();
        say!(
            "{name}: ok ({} blocks, {warnings} warning(s), {:.1} ms)",
            doc.blocks().count(),
            t0.elapsed().as_secs_f64() * 1e3
        );
        return OK;
    }
    let cache = match &args.cache {
        Some(None) => None,
        Some(Some(dir)) => Some(Cache::new(dir)),
        None if lineage.is_some() => Some(Cache::new(
            args.out
                .clone()
                .unwrap_or_else(|| PathBuf::from("."))
                .join(".fieldbook-cache"),
        )),
        None => Some(Cache::beside(Path::new(name))),
    };
    let bar = Progress::new();
    let progress = |block: &str, done: usize, total: usize| bar.update(block, done, total);
    let opts = RunOptions {
        cache: cache.as_ref(),
        progress: Some(&progress),
    };
    let result = session::run(&checked, &opts);
    bar.finish();
    for p in checked
        .scope
        .params
        .iter()
        .filter(|p| p.overridden.is_some())
    {
        if let Some(q) = checked.values.get(&p.name) {
            say!(
                "set {} = {} (--set, instead of the file's value)",
                p.name,
                fieldbook::notebook::expr::format_quantity(q.value, q.dim)
            );
        }
    }
    say_raw!(
        "{}",
        summary::text(&doc, &result, t0.elapsed().as_secs_f64())
    );
    for e in &result.errors {
        let d = notebook::diag::Diagnostic::error(e.span.clone(), e.message.clone());
        eprint!("{}", d.render(&doc.source));
    }
    // A re-run writes into the current folder unless told otherwise.
    let out_dir = args
        .out
        .clone()
        .or_else(|| lineage.as_ref().map(|_| PathBuf::from(".")));
    if let Some(dir) = &out_dir {
        let mut rec = record::build(&doc, &checked, &result, &diags, record::utc_now());
        if let Some(l) = &lineage {
            rec.lineage.parent = l.parent.clone();
            rec.lineage.changes = l.changes.clone();
        }
        match record::io::write(dir, &rec, args.force) {
            Ok(p) => say!("record: {}", p.display()),
            Err(e) => {
                eprintln!("error: {e}");
                return INPUT_ERROR;
            }
        }
        // Written only once the record is, so a refused record (another input) keeps its report.
        let html = dir.join(format!("{}.html", rec.name));
        let written = fieldbook::render::report(&rec, args.templates.as_deref())
            .map_err(|e| e.to_string())
            .and_then(|page| {
                record::io::write_atomic(&html, page.as_bytes()).map_err(|e| e.to_string())
            });
        match written {
            Ok(()) => say!("report: {}", html.display()),
            Err(e) => {
                eprintln!("error: report {}: {e}", html.display());
                return INPUT_ERROR;
            }
        }
        if args.csv {
            match record::csv::write_all(dir, &rec) {
                Ok(paths) => paths.iter().for_each(|p| say!("csv: {}", p.display())),
                Err(e) => {
                    eprintln!("error: {e}");
                    return INPUT_ERROR;
                }
            }
        }
    } else if args.csv {
        eprintln!("error: --csv needs --out DIR");
        return INPUT_ERROR;
    }
    if !result.errors.is_empty() {
        RUNTIME_FAILURE
    } else if result.failed_checks() > 0 {
        CHECK_FAILED
    } else {
        OK
    }
}

/// A progress bar on stderr for sweeps that run longer than a second, only on a terminal.
struct Progress {
    start: Instant,
    on: bool,
    shown: Mutex<bool>,
}

impl Progress {
    fn new() -> Self {
        Self {
            start: Instant::now(),
            on: std::io::stderr().is_terminal(),
            shown: Mutex::new(false),
        }
    }

    fn update(&self, block: &str, done: usize, total: usize) {
        if !self.on || self.start.elapsed().as_secs_f64() < 1.0 || total == 0 {
            return;
        }
        let width = 30;
        let filled = done * width / total;
        eprint!(
            "\r  {block} [{}{}] {done}/{total}",
            "#".repeat(filled),
            ".".repeat(width - filled)
        );
        if let Ok(mut s) = self.shown.lock() {
            *s = true;
        }
    }

    fn finish(&self) {
        if self.shown.lock().map(|s| *s).unwrap_or(false) {
            eprintln!();
        }
    }
}
