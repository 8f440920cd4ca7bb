//! The bad-input corpus: every broken run-file in `tests/bad-inputs/` is refused by `fieldbook
//! check` with exit code 2, its first error at the place and with the words `expected.txt` lists,
//! and never with a panic; plus an oversized file and a file with several independent mistakes.

use std::collections::BTreeSet;
use std::io::Read;
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

/// The longest a single `check` may take before the test calls it hung.
const TIMEOUT: Duration = Duration::from_secs(30);

fn corpus_dir() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/bad-inputs")
}

/// One line of `expected.txt`.
#[derive(Debug)]
struct Case {
    file: String,
    location: String,
    message: String,
    line_no: usize,
}

fn expected() -> Vec<Case> {
    let path = corpus_dir().join("expected.txt");
    let text = std::fs::read_to_string(&path).expect("tests/bad-inputs/expected.txt");
    let mut cases = Vec::new();
    for (i, line) in text.lines().enumerate() {
        if line.trim().is_empty() || line.starts_with('#') {
            continue;
        }
        let fields: Vec<&str> = line.split('\t').collect();
        assert_eq!(
            fields.len(),
            3,
            "expected.txt:{}: want FILE<TAB>LINE:COL<TAB>MESSAGE, got {line:?}",
            i + 1
        );
        let (l, c) = fields[1]
            .split_once(':')
            .unwrap_or_else(|| panic!("expected.txt:{}: bad LINE:COL {:?}", i + 1, fields[1]));
        assert!(
            l.parse::<usize>().is_ok_and(|n| n > 0) && c.parse::<usize>().is_ok_and(|n| n > 0),
            "expected.txt:{}: bad LINE:COL {:?}",
            i + 1,
            fields[1]
        );
        assert!(
            !fields[2].trim().is_empty(),
            "expected.txt:{}: empty message part",
            i + 1
        );
        cases.push(Case {
            file: fields[0].to_string(),
            location: fields[1].to_string(),
            message: fields[2].to_string(),
            line_no: i + 1,
        });
    }
    cases
}

/// What one run of the command did.
struct Ran {
    code: Option<i32>,
    stderr: String,
    stdout: String,
    elapsed: Duration,
}

/// Run `fieldbook check FILE` in `dir`, reading both pipes while waiting and giving up after
/// [`TIMEOUT`].
fn check(dir: &Path, file: &str) -> Ran {
    let t0 = Instant::now();
    let mut child = Command::new(env!("CARGO_BIN_EXE_fieldbook"))
        .arg("check")
        .arg(file)
        .current_dir(dir)
        .stdin(Stdio::null())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("start fieldbook");
    let drain = |mut r: Box<dyn Read + Send>| {
        std::thread::spawn(move || {
            let mut buf = Vec::new();
            let _ = r.read_to_end(&mut buf);
            String::from_utf8_lossy(&buf).into_owned()
        })
    };
    let out = drain(Box::new(child.stdout.take().unwrap()));
    let err = drain(Box::new(child.stderr.take().unwrap()));
    let status = loop {
        if let Some(s) = child.try_wait().expect("wait for fieldbook") {
            break Some(s);
        }
        if t0.elapsed() > TIMEOUT {
            let _ = child.kill();
            let _ = child.wait();
            break None;
        }
        std::thread::sleep(Duration::from_millis(2));
    };
    Ran {
        code: status.and_then(|s| s.code()),
        stdout: out.join().unwrap(),
        stderr: err.join().unwrap(),
        elapsed: t0.elapsed(),
    }
}

/// The diagnostics of a run, each the text from one `error: ` line up to the next `error: ` or
/// `warning: ` line.
fn errors(stderr: &str) -> Vec<String> {
    let mut out: Vec<String> = Vec::new();
    let mut in_error = false;
    for line in stderr.lines() {
        if line.starts_with("error: ") {
            out.push(String::new());
            in_error = true;
        } else if line.starts_with("warning: ") {
            in_error = false;
        }
        if in_error {
            let last = out.last_mut().unwrap();
            last.push_str(line);
            last.push('\n');
        }
    }
    out
}

/// Problems shared by every case: the command must end on its own, never panic, and exit 2.
fn refused_cleanly(ran: &Ran) -> Result<(), String> {
    let Some(code) = ran.code else {
        return Err(format!(
            "did not finish within {TIMEOUT:?} (or was killed by a signal)"
        ));
    };
    if code == 101 || ran.stderr.contains("panicked") {
        return Err(format!("panicked (exit code {code})"));
    }
    if code != 2 {
        return Err(format!("exit code {code}, expected 2"));
    }
    Ok(())
}

#[test]
fn every_bad_input_is_refused_at_the_right_place() {
    let dir = corpus_dir();
    let cases = expected();
    let mut failures = Vec::new();
    let mut slowest = (Duration::ZERO, String::new());
    for case in &cases {
        let ran = check(&dir, &case.file);
        if ran.elapsed > slowest.0 {
            slowest = (ran.elapsed, case.file.clone());
        }
        let want = format!("{}:{}", case.file, case.location);
        let first = errors(&ran.stderr).into_iter().next().unwrap_or_default();
        let problem = refused_cleanly(&ran).err().or_else(|| {
            if first.is_empty() {
                Some("no `error:` printed".to_string())
            } else if !first.contains(&format!("--> {want}\n")) {
                Some(format!("the first error is not at {want}"))
            } else if !first.contains(&case.message) {
                Some(format!(
                    "the first error does not mention {:?}",
                    case.message
                ))
            } else {
                None
            }
        });
        if let Some(p) = problem {
            failures.push(format!(
                "{} (expected.txt:{}): {p}\n--- stderr ---\n{}{}",
                case.file, case.line_no, ran.stderr, ran.stdout
            ));
        }
    }
    println!(
        "{} bad inputs, slowest {} in {:.1} ms",
        cases.len(),
        slowest.1,
        slowest.0.as_secs_f64() * 1e3
    );
    assert!(
        failures.is_empty(),
        "{} of {} bad inputs were not reported as expected:\n\n{}",
        failures.len(),
        cases.len(),
        failures.join("\n")
    );
}

#[test]
fn corpus_and_expected_list_match() {
    let cases = expected();
    assert!(
        cases.len() >= 40,
        "only {} cases in expected.txt",
        cases.len()
    );
    let listed: Vec<&str> = cases.iter().map(|c| c.file.as_str()).collect();
    let unique: BTreeSet<&str> = listed.iter().copied().collect();
    assert_eq!(
        unique.len(),
        listed.len(),
        "a file is listed twice in expected.txt"
    );
    let on_disk: BTreeSet<String> = std::fs::read_dir(corpus_dir())
        .unwrap()
        .map(|e| e.unwrap())
        .filter(|e| e.file_type().unwrap().is_file())
        .map(|e| e.file_name().to_string_lossy().into_owned())
        .filter(|n| n != "expected.txt" && !n.starts_with('.'))
        .collect();
    let unlisted: Vec<&String> = on_disk
        .iter()
        .filter(|n| !unique.contains(n.as_str()))
        .collect();
    let missing: Vec<&&str> = unique.iter().filter(|n| !on_disk.contains(**n)).collect();
    assert!(
        unlisted.is_empty(),
        "files without a line in expected.txt: {unlisted:?}"
    );
    assert!(
        missing.is_empty(),
        "lines in expected.txt without a file: {missing:?}"
    );
    for name in &on_disk {
        let (num, rest) = name.split_once('-').unwrap_or(("", ""));
        assert!(
            num.len() == 2 && num.bytes().all(|b| b.is_ascii_digit()) && !rest.is_empty(),
            "{name}: corpus files are named NN-short-description.EXT"
        );
    }
}

#[test]
fn an_oversized_file_is_refused_with_its_size() {
    let dir = std::env::temp_dir().join(format!("fieldbook-bad-inputs-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    // A lab note with a pasted data dump: a valid start, then 10 MB of measured points.
    let mut text = String::from(
        "# Transfer data of the Scoter horn\n\n*Invented scenario.*\n\n```params\nrabi = \"2π × 10 kHz\"\n```\n\nMeasured points:\n\n",
    );
    let target = 10 * 1000 * 1000;
    let mut i = 0u64;
    while text.len() < target {
        text.push_str(&format!(
            "| {:>8} | {:.6} |\n",
            i,
            (i as f64 * 1e-3).sin().powi(2)
        ));
        i += 1;
    }
    let name = "10-megabytes.md";
    std::fs::write(dir.join(name), &text).unwrap();
    let ran = check(&dir, name);
    let _ = std::fs::remove_dir_all(&dir);
    refused_cleanly(&ran).unwrap_or_else(|p| panic!("{p}\n{}", ran.stderr));
    let first = errors(&ran.stderr).into_iter().next().unwrap_or_default();
    assert!(
        first.contains(&format!("--> {name}:1:1\n")),
        "the size error points at the start of the file:\n{}",
        ran.stderr
    );
    assert!(
        first.contains("9.5 MiB") && first.contains("limited to 8 MiB"),
        "the message gives the file's size and the limit:\n{}",
        ran.stderr
    );
    assert!(
        ran.elapsed < Duration::from_secs(2),
        "refusing a big file took {:?}",
        ran.elapsed
    );
}

#[test]
fn several_independent_mistakes_are_reported_in_one_pass() {
    // A function typo in a parameter, a key typo in a light and a level typo in an evolve block:
    // none depends on another, so all three must come out of one `check`, and nothing else.
    let file = "53-several-independent-mistakes.md";
    let want = [
        ("7:14", "`sqr` is not a known function"),
        ("18:1", "unknown key `detunning`"),
        ("30:25", "has no level `x`"),
    ];
    let ran = check(&corpus_dir(), file);
    refused_cleanly(&ran).unwrap_or_else(|p| panic!("{p}\n{}", ran.stderr));
    let found = errors(&ran.stderr);
    let mut problems = Vec::new();
    for (loc, msg) in want {
        let at = format!("--> {file}:{loc}\n");
        if !found.iter().any(|e| e.contains(&at) && e.contains(msg)) {
            problems.push(format!("no error at {loc} mentioning {msg:?}"));
        }
    }
    if found.len() != want.len() {
        problems.push(format!(
            "{} `error:` lines, expected {}",
            found.len(),
            want.len()
        ));
    }
    assert!(
        problems.is_empty(),
        "{}\n--- stderr ---\n{}",
        problems.join("\n"),
        ran.stderr
    );
}
