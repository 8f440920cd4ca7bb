//! No input makes reading or checking a run-file panic: random bytes, mutated examples and
//! token soups go through `load`, `parse`, `session::check` and diagnostic rendering, seeded and
//! deterministic, each failing input reported minimised.

use std::cell::{Cell, RefCell};
use std::panic::{self, AssertUnwindSafe};
use std::path::Path;
use std::sync::Once;
use std::time::{Duration, Instant};

use fieldbook::kernel::session;
use fieldbook::notebook;

/// SplitMix64: tiny, seeded, good enough to pick mutations.
struct Rng(u64);

impl Rng {
    fn next(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }

    /// Uniform in `0..n` (`n > 0`).
    fn below(&mut self, n: usize) -> usize {
        (self.next() % n as u64) as usize
    }

    fn chance(&mut self, percent: u64) -> bool {
        self.next() % 100 < percent
    }

    fn pick<'a, T>(&mut self, items: &'a [T]) -> &'a T {
        &items[self.below(items.len())]
    }
}

thread_local! {
    /// Whether this thread is running a probe (panics expected, recorded quietly).
    static PROBING: Cell<bool> = const { Cell::new(false) };
    /// Where the last probe panic on this thread happened, written by the panic hook.
    static LAST_PANIC: RefCell<(String, String)> = const { RefCell::new((String::new(), String::new())) };
}

/// Install a panic hook that records a probe's panic message and location instead of printing
/// them, so that thousands of probe runs during minimisation stay quiet; other panics (the
/// test's own assertions) print as usual.
fn quiet_panics() {
    static ONCE: Once = Once::new();
    ONCE.call_once(|| {
        let default = panic::take_hook();
        panic::set_hook(Box::new(move |info| {
            if !PROBING.with(Cell::get) {
                return default(info);
            }
            let msg = info
                .payload()
                .downcast_ref::<&str>()
                .map(|s| s.to_string())
                .or_else(|| info.payload().downcast_ref::<String>().cloned())
                .unwrap_or_else(|| "(non-string payload)".to_string());
            let at = info
                .location()
                .map(|l| format!("{}:{}", l.file(), l.line()))
                .unwrap_or_default();
            LAST_PANIC.with(|p| *p.borrow_mut() = (at, msg));
        }));
    });
}

/// Everything `fieldbook check` does with a file's bytes, short of printing.
fn pipeline(bytes: &[u8]) {
    match notebook::load("fuzz.md", bytes) {
        Err(bad) => {
            let (src, d) = *bad;
            let _ = d.render(&src);
        }
        Ok(src) => {
            let (doc, diags) = notebook::parse(src);
            let outcome = session::check(&doc, &[]);
            for d in diags.iter().chain(&outcome.diags) {
                let _ = d.render(&doc.source);
                let _ = d.location(&doc.source);
            }
        }
    }
}

/// `Some((location, message))` if the pipeline panics on `bytes`.
fn panics(bytes: &[u8]) -> Option<(String, String)> {
    PROBING.with(|p| p.set(true));
    let outcome = panic::catch_unwind(AssertUnwindSafe(|| pipeline(bytes)));
    PROBING.with(|p| p.set(false));
    match outcome {
        Ok(()) => None,
        Err(_) => Some(LAST_PANIC.with(|p| p.borrow().clone())),
    }
}

/// Shrink a panicking input: drop whole lines, then ever smaller byte ranges, while it still
/// panics at the same place. Bounded, so a slow case cannot stall the test.
fn minimise(input: &[u8], site: &str) -> Vec<u8> {
    let same = |b: &[u8]| panics(b).is_some_and(|(at, _)| at == site);
    let mut cur = input.to_vec();
    let mut budget = 3000;
    // Lines first.
    let mut i = 0;
    loop {
        let lines: Vec<&[u8]> = cur.split_inclusive(|&b| b == b'\n').collect();
        if i >= lines.len() || budget == 0 {
            break;
        }
        let cand: Vec<u8> = lines
            .iter()
            .enumerate()
            .filter(|&(j, _)| j != i)
            .flat_map(|(_, l)| l.iter().copied())
            .collect();
        budget -= 1;
        if same(&cand) {
            cur = cand;
        } else {
            i += 1;
        }
    }
    // Then byte ranges, halving the chunk size.
    let mut chunk = cur.len().next_power_of_two() / 2;
    while chunk >= 1 && budget > 0 {
        let mut at = 0;
        while at < cur.len() && budget > 0 {
            let end = (at + chunk).min(cur.len());
            let mut cand = cur[..at].to_vec();
            cand.extend_from_slice(&cur[end..]);
            budget -= 1;
            if same(&cand) {
                cur = cand;
            } else {
                at += chunk;
            }
        }
        chunk /= 2;
    }
    cur
}

fn seeds() -> Vec<(String, Vec<u8>)> {
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let mut out = Vec::new();
    for dir in ["notebooks-spec/examples", "tests/bad-inputs"] {
        let Ok(entries) = std::fs::read_dir(root.join(dir)) else {
            continue;
        };
        let mut files: Vec<_> = entries.map(|e| e.unwrap().path()).collect();
        files.sort();
        for p in files {
            // Caches of earlier runs may sit beside the examples.
            if p.is_dir() || p.file_name().is_some_and(|n| n == "expected.txt") {
                continue;
            }
            let bytes = std::fs::read(&p).unwrap();
            out.push((p.display().to_string(), bytes));
        }
    }
    assert!(
        out.len() >= 8,
        "the examples are the fuzzer's seeds; found {}",
        out.len()
    );
    out
}

/// Bytes worth flipping in: the format's delimiters, and some that break encodings.
const SPECIAL: &[u8] = b"\"'`=[]{}()#\n\r\t ,.->^*/+-0123456789e_\\\x00\xff\xc3\xb5";

/// Token fragments for insertions and soups.
const TOKENS: &[&str] = &[
    "```",
    "```params",
    "```atom a",
    "```light l",
    "```sequence s",
    "```evolve e",
    "```plot",
    "```table",
    "```check",
    "```rust",
    "```data",
    "```evolv e",
    "```param",
    "~~~params",
    "\n",
    "\n\n",
    "> ",
    "   ",
    " = ",
    "=",
    "\"",
    "'",
    "\"\"\"",
    "[",
    "]",
    "{",
    "}",
    "[[step]]",
    "[levels]",
    "[decay]",
    "[transitions]",
    "[dephasing]",
    ",",
    "#",
    "drives",
    "rabi",
    "detuning",
    "frequency",
    "intensity",
    "field",
    "phase",
    "polarization",
    "chirp",
    "rate",
    "formula",
    "pulse",
    "wait",
    "duration",
    "shape",
    "gaussian",
    "sech",
    "tanh",
    "ramp",
    "steps",
    "values",
    "durations",
    "table",
    "times",
    "area",
    "scale",
    "at",
    "sequence",
    "steady",
    "lights",
    "start",
    "mixture",
    "superposition",
    "thermal",
    "temperature",
    "frame",
    "cutoff",
    "method",
    "rtol",
    "atol",
    "max_steps",
    "observe",
    "samples",
    "sweep.d",
    "sweep.t",
    "average.d",
    "doppler",
    "mass",
    "wavelength",
    "sigma",
    "from",
    "to",
    "points",
    "log",
    "seed",
    "x",
    "y",
    "z",
    "columns",
    "near",
    "within",
    "rel",
    "below",
    "above",
    "g",
    "e",
    "r",
    "a",
    "l",
    "s",
    "d",
    "t",
    "g -> e",
    "e -> g",
    "->",
    "population(e)",
    "population(g, e)",
    "coherence(g, e)",
    "bloch(g, e)",
    "fidelity(e)",
    "scattering",
    "norm",
    "e.final.population(e)",
    "e.final.bloch(g, e).w",
    "e.trace.population(e)",
    "e.time",
    "e.d",
    "argmax(",
    "max(",
    " at d = 0 Hz",
    " at time = 1 µs",
    "`= e.final.population(e)`",
    "`=",
    "2π × ",
    "2π",
    "π",
    "pi",
    "×",
    "·",
    "−",
    "*",
    "/",
    "^",
    "+",
    "-",
    "(",
    ")",
    "sqrt(",
    "exp(",
    "ln(",
    "sin(",
    "erf(",
    "min(",
    "max(1, ",
    "1",
    "0",
    "-1",
    "2.5",
    "1e-3",
    "1e308",
    "1e-320",
    "6.02E23",
    "99999999999999999999",
    "1_000",
    "0x10",
    "nan",
    "inf",
    "-inf",
    "true",
    "false",
    "1979-05-27",
    "Hz",
    "kHz",
    "MHz",
    "GHz",
    "s",
    "µs",
    "us",
    "ns",
    "mW/cm^2",
    "V/m",
    "K",
    "µK",
    "amu",
    "e a0",
    "ħ",
    "c",
    "k_B",
    "sigma+",
    "sigma-",
    "rotating",
    "exact",
    "auto",
    "eigen",
    "dp54",
    "dop853",
    "magnus4",
    "liouvillian",
    "quadrature",
    "monte-carlo",
    "square",
    "blackman",
    "sin2",
    "µ",
    "Δ",
    "\u{1F600}",
    "\u{0301}",
    "\t",
    "\r\n",
    "\\u00e9",
    "\\",
];

/// One random mutation of `buf`, sometimes borrowing lines from another seed.
fn mutate(rng: &mut Rng, buf: &mut Vec<u8>, seeds: &[(String, Vec<u8>)]) {
    let len = buf.len();
    match rng.below(8) {
        // Flip a byte (to a random or a meaningful one).
        0 if len > 0 => {
            let i = rng.below(len);
            buf[i] = if rng.chance(50) {
                *rng.pick(SPECIAL)
            } else {
                rng.next() as u8
            };
        }
        // Delete a range.
        1 if len > 0 => {
            let i = rng.below(len);
            let most = if rng.chance(80) { 8 } else { 200 };
            let n = 1 + rng.below(most);
            buf.drain(i..(i + n).min(len));
        }
        // Duplicate a range in place or elsewhere.
        2 if len > 0 => {
            let i = rng.below(len);
            let n = 1 + rng.below(64);
            let piece = buf[i..(i + n).min(len)].to_vec();
            let at = if rng.chance(50) {
                i
            } else {
                rng.below(len + 1)
            };
            buf.splice(at..at, piece);
        }
        // Insert a token.
        3 | 4 => {
            let at = rng.below(len + 1);
            let t = rng.pick(TOKENS).as_bytes().to_vec();
            buf.splice(at..at, t);
        }
        // Splice lines of another file in, replacing some of ours.
        5 | 6 => {
            let other = &rng.pick(seeds).1;
            let theirs: Vec<&[u8]> = other.split_inclusive(|&b| b == b'\n').collect();
            let ours: Vec<Vec<u8>> = buf
                .split_inclusive(|&b| b == b'\n')
                .map(|l| l.to_vec())
                .collect();
            if theirs.is_empty() {
                return;
            }
            let from = rng.below(theirs.len());
            let take = 1 + rng.below(6);
            let at = rng.below(ours.len() + 1);
            let drop = if rng.chance(50) { rng.below(4) } else { 0 };
            let mut out: Vec<u8> = Vec::with_capacity(len + 256);
            for l in &ours[..at] {
                out.extend_from_slice(l);
            }
            for l in theirs.iter().skip(from).take(take) {
                out.extend_from_slice(l);
            }
            for l in ours.iter().skip(at + drop) {
                out.extend_from_slice(l);
            }
            *buf = out;
        }
        // Swap two lines.
        _ => {
            let mut lines: Vec<Vec<u8>> = buf
                .split_inclusive(|&b| b == b'\n')
                .map(|l| l.to_vec())
                .collect();
            if lines.len() >= 2 {
                let (a, b) = (rng.below(lines.len()), rng.below(lines.len()));
                lines.swap(a, b);
                *buf = lines.concat();
            }
        }
    }
}

fn random_bytes(rng: &mut Rng) -> Vec<u8> {
    let n = rng.below(600);
    match rng.below(3) {
        // Anything at all.
        0 => (0..n).map(|_| rng.next() as u8).collect(),
        // Printable ASCII with line breaks.
        1 => (0..n)
            .map(|_| {
                if rng.chance(8) {
                    b'\n'
                } else {
                    32 + rng.below(95) as u8
                }
            })
            .collect(),
        // Random bodies inside a scenario fence, so they reach the TOML and block readers.
        _ => {
            let kind = rng.pick(&[
                "params",
                "atom a",
                "light l",
                "sequence s",
                "evolve e",
                "check",
            ]);
            let mut v = format!("# fuzz\n\n```{kind}\n").into_bytes();
            v.extend((0..n).map(|_| *rng.pick(SPECIAL)));
            v.extend_from_slice(b"\n```\n");
            v
        }
    }
}

/// A quoted expression built from fragments.
fn expr_soup(rng: &mut Rng) -> String {
    let parts = [
        "2π × ", "1", "0", "2.5", "1e-3", "1e308", "kHz", "MHz", "µs", "s", "Hz", " + ", " - ",
        " / ", " * ", "^2", "(", ")", "sqrt(", "exp(", "d", "t", "rabi", "tau", "π", "e", "c", "ħ",
        " × ", "mW/cm^2", "K", "amu", "a0", ",", "−", "·",
    ];
    let n = 1 + rng.below(8);
    let mut s = String::from("\"");
    for _ in 0..n {
        s.push_str(rng.pick::<&str>(&parts));
    }
    s.push('"');
    s
}

fn value_soup(rng: &mut Rng, depth: usize) -> String {
    match rng.below(if depth > 2 { 5 } else { 8 }) {
        0..=2 => expr_soup(rng),
        3 => rng
            .pick(&["1", "0", "-3", "201", "2.5", "true", "nan", "1e400"])
            .to_string(),
        4 => format!("\"{}\"", rng.pick(TOKENS)),
        5 => {
            let n = rng.below(4);
            let items: Vec<String> = (0..n).map(|_| value_soup(rng, depth + 1)).collect();
            format!("[{}]", items.join(", "))
        }
        _ => {
            let n = rng.below(4);
            let items: Vec<String> = (0..n)
                .map(|_| format!("{} = {}", rng.pick(TOKENS), value_soup(rng, depth + 1)))
                .collect();
            format!("{{ {} }}", items.join(", "))
        }
    }
}

/// A run-file-shaped soup: fences with kinds and names, lines of `key = value`, some prose.
fn token_soup(rng: &mut Rng) -> Vec<u8> {
    if rng.chance(25) {
        // Unstructured: any tokens in any order.
        let n = rng.below(120);
        return (0..n)
            .map(|_| *rng.pick(TOKENS))
            .collect::<String>()
            .into_bytes();
    }
    let kinds = [
        "params", "atom", "light", "sequence", "evolve", "plot", "table", "check", "rust", "evolv",
    ];
    let names = ["a", "l", "s", "e", "d", "t", "2x", "rabi", ""];
    let keys = [
        "d",
        "t",
        "rabi",
        "drives",
        "detuning",
        "intensity",
        "[levels]",
        "g",
        "e",
        "[decay]",
        "\"e -> g\"",
        "[[step]]",
        "pulse",
        "wait",
        "duration",
        "shape",
        "area",
        "sequence",
        "observe",
        "start",
        "samples",
        "sweep.d",
        "sweep.t",
        "average.d",
        "x",
        "y",
        "z",
        "columns",
        "\"e.final.population(e)\"",
        "\"e.final.population(e) at d = 0 Hz\"",
        "rtol",
        "frame",
        "steady",
        "lights",
        "atom",
        "bogus",
    ];
    let mut s = String::from("# soup\n\n");
    for _ in 0..1 + rng.below(8) {
        let name = rng.pick(&names);
        s.push_str(&format!("```{} {}\n", rng.pick(&kinds), name));
        for _ in 0..rng.below(7) {
            let key = rng.pick(&keys);
            if key.starts_with('[') {
                s.push_str(key);
            } else {
                s.push_str(&format!("{key} = {}", value_soup(rng, 0)));
            }
            s.push('\n');
        }
        s.push_str("```\n");
        if rng.chance(30) {
            s.push_str("Prose with `= e.final.population(e)` inline.\n");
        }
        s.push('\n');
    }
    s.into_bytes()
}

/// A panic: where, what it said (for the smallest input), that input, and the family of the
/// first input that reached it, with how many inputs did.
struct Failure {
    site: String,
    message: String,
    input: Vec<u8>,
    family: &'static str,
    hits: usize,
}

/// Run one input; on a panic at a site not seen before, keep the input, minimised.
/// Returns how long the input took (minimisation not counted).
fn probe(bytes: Vec<u8>, family: &'static str, failures: &mut Vec<Failure>) -> Duration {
    let t0 = Instant::now();
    let outcome = panics(&bytes);
    let took = t0.elapsed();
    let Some((site, _)) = outcome else {
        return took;
    };
    if let Some(f) = failures.iter_mut().find(|f| f.site == site) {
        f.hits += 1;
        return took;
    }
    let input = minimise(&bytes, &site);
    let message = panics(&input).map(|(_, m)| m).unwrap_or_default();
    failures.push(Failure {
        site,
        message,
        input,
        family,
        hits: 1,
    });
    took
}

/// Escape an input for the failure report.
fn show(bytes: &[u8]) -> String {
    match std::str::from_utf8(bytes) {
        Ok(s) => format!("{s:?}"),
        Err(_) => format!("bytes {bytes:?}"),
    }
}

#[test]
fn no_input_makes_check_panic() {
    quiet_panics();
    let seeds = seeds();
    let t0 = Instant::now();
    // Deterministic by default; `FIELDBOOK_FUZZ_SEED=N` and `FIELDBOOK_FUZZ_SCALE=K` (K times
    // the cases) explore further by hand.
    let env = |k: &str| std::env::var(k).ok().and_then(|v| v.parse::<u64>().ok());
    let mut rng = Rng(env("FIELDBOOK_FUZZ_SEED").unwrap_or(0x00F1_E1DB_0015));
    let scale = env("FIELDBOOK_FUZZ_SCALE").unwrap_or(1).max(1) as usize;
    let mut failures: Vec<Failure> = Vec::new();
    let mut counts = [0usize; 3];
    let mut slowest = Duration::ZERO;
    // (i) random bytes
    for _ in 0..6000 * scale {
        let b = random_bytes(&mut rng);
        slowest = slowest.max(probe(b, "random bytes", &mut failures));
        counts[0] += 1;
    }
    // (ii) mutations of every seed file, one to five at a time
    for round in 0..12000 * scale {
        let mut b = seeds[round % seeds.len()].1.clone();
        for _ in 0..1 + rng.below(5) {
            mutate(&mut rng, &mut b, &seeds);
        }
        slowest = slowest.max(probe(b, "mutated example", &mut failures));
        counts[1] += 1;
    }
    // (iii) token soups
    for _ in 0..9000 * scale {
        let b = token_soup(&mut rng);
        slowest = slowest.max(probe(b, "token soup", &mut failures));
        counts[2] += 1;
    }
    let elapsed = t0.elapsed();
    println!(
        "fuzz: {} random, {} mutated, {} soups in {:.2} s (slowest case {:.1} ms)",
        counts[0],
        counts[1],
        counts[2],
        elapsed.as_secs_f64(),
        slowest.as_secs_f64() * 1e3
    );
    assert!(
        failures.is_empty(),
        "{} distinct panic(s):\n{}",
        failures.len(),
        failures
            .iter()
            .map(|f| format!(
                "- at {}: {}\n  {} input(s), the first a {}; minimised: {}",
                f.site,
                f.message,
                f.hits,
                f.family,
                show(&f.input)
            ))
            .collect::<Vec<_>>()
            .join("\n")
    );
}
