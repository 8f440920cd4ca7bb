//! The `fieldbook` command line: `check` and `run` run-files. Exit codes are mapped here, in
//! one place: 0 ok, 1 a check failed, 2 input error, 3 runtime failure (the largest applies when
//! several files are given).

use std::io::IsTerminal;
use std::path::{Path, PathBuf};
use std::process::ExitCode;
use std::sync::Mutex;
use std::time::Instant;

use fieldbook::kernel::cache::Cache;
use fieldbook::kernel::session::{self, RunOptions};
use fieldbook::notebook::{self, diag::Severity};
use fieldbook::record;
use fieldbook::summary;

/// Exit codes.
const OK: u8 = 0;
const CHECK_FAILED: u8 = 1;
const INPUT_ERROR: u8 = 2;
const RUNTIME_FAILURE: u8 = 3;

const USAGE: &str =
    "usage: fieldbook check FILE…                  validate run-files without simulating
       fieldbook run FILE… [OPTIONS]          run them and print results and checks
options of run and check:
       --set NAME=EXPR      override a parameter (repeatable), e.g. --set rabi=\"2π × 300 kHz\"
options of run:
       --no-cache           recompute every evolve block
       --cache DIR          keep cached results in DIR (default: .fieldbook-cache beside each file)
       --out DIR            write DIR/NAME.record.json (atomically)
       --force              replace a record of a different input in --out
       fieldbook --version";

struct Args {
    command: String,
    files: Vec<PathBuf>,
    overrides: Vec<(String, String)>,
    cache: Option<Option<PathBuf>>,
    out: Option<PathBuf>,
    force: bool,
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
        force: false,
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
        } else if a == "--force" {
            out.force = true;
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
    Ok(out)
}

fn main() -> ExitCode {
    let raw: Vec<String> = std::env::args().skip(1).collect();
    match raw.first().map(String::as_str) {
        Some("--version") => {
            println!("fieldbook {}", env!("CARGO_PKG_VERSION"));
            return ExitCode::SUCCESS;
        }
        Some("--help") | Some("-h") | Some("help") => {
            println!("{USAGE}");
            return ExitCode::SUCCESS;
        }
        Some("check") | Some("run") => {}
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
    let code = args
        .files
        .iter()
        .map(|f| one_file(&args, f))
        .max()
        .unwrap_or(OK);
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
    let t0 = Instant::now();
    let source = match notebook::load(&name, &bytes) {
        Ok(s) => s,
        Err(bad) => {
            let (src, d) = *bad;
            eprint!("{}", d.render(&src));
            return INPUT_ERROR;
        }
    };
    let (doc, mut diags) = notebook::parse(source);
    let outcome = session::check(&doc, &args.overrides);
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
        println!(
            "{name}: ok ({} blocks, {warnings} warning(s), {:.1} ms)",
            doc.blocks().count(),
            t0.elapsed().as_secs_f64() * 1e3
        );
        return OK;
    }
    let cache = match &args.cache {
        Some(None) => None,
        Some(Some(dir)) => Some(Cache::new(dir)),
        None => Some(Cache::beside(path)),
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
            println!(
                "set {} = {} (--set, instead of the file's value)",
                p.name,
                fieldbook::notebook::expr::format_quantity(q.value, q.dim)
            );
        }
    }
    print!(
        "{}",
        summary::text(&doc, &result, t0.elapsed().as_secs_f64())
    );
    for e in &result.errors {
        let d = notebook::diag::Diagnostic::error(e.span.clone(), e.message.clone());
        eprint!("{}", d.render(&doc.source));
    }
    if let Some(dir) = &args.out {
        let rec = record::build(&doc, &checked, &result, &diags, record::utc_now());
        match record::io::write(dir, &rec, args.force) {
            Ok(p) => println!("record: {}", p.display()),
            Err(e) => {
                eprintln!("error: {e}");
                return INPUT_ERROR;
            }
        }
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
