//! Side-by-side benchmark: each problem solved by the runtime and by the numpy/scipy reference
//! (`benches/reference/problems.py`), alternating A/B in one run; prints times, ratios and the
//! accuracy each side reached. Run with `cargo bench -p fieldbook-runtime --bench compare`
//! (optionally followed by `-- p1 p2 …` to pick problems).

use std::f64::consts::PI;
use std::path::PathBuf;
use std::process::Command;
use std::time::Instant;

use fieldbook_runtime::hamiltonian::Hamiltonian;
use fieldbook_runtime::prelude::*;
use serde_json::Value;

#[path = "../tests/common/mod.rs"]
mod common;

/// Rust threads used for every sweep (fixed so results are comparable run to run).
const THREADS: usize = 2;
/// A/B rounds per problem.
const ROUNDS: usize = 5;

fn reference_dir() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("benches/reference")
}

/// Run the reference once; returns its JSON line.
fn python(problem: &str, extra: &[&str], blas_threads: Option<&str>) -> Option<Value> {
    let mut cmd = Command::new("python3");
    cmd.arg(reference_dir().join("problems.py"))
        .arg(problem)
        .args(extra)
        .args(["--repeat", "3"]);
    if let Some(t) = blas_threads {
        cmd.env("OPENBLAS_NUM_THREADS", t);
    } else {
        cmd.env_remove("OPENBLAS_NUM_THREADS");
    }
    let out = cmd.output().ok()?;
    if !out.status.success() {
        eprintln!(
            "reference {problem} failed: {}",
            String::from_utf8_lossy(&out.stderr)
        );
        return None;
    }
    let text = String::from_utf8_lossy(&out.stdout);
    serde_json::from_str(text.lines().last()?).ok()
}

fn min_seconds(v: &Value, key: &str) -> f64 {
    v[key].as_array().map_or(f64::NAN, |a| {
        a.iter()
            .filter_map(Value::as_f64)
            .fold(f64::INFINITY, f64::min)
    })
}

/// Time `f` (best of 3; only the computation, as the reference does) and return (seconds, the
/// error figure `check` computes from its result afterwards).
fn time<R>(f: &mut impl FnMut() -> R, check: &impl Fn(&R) -> f64) -> (f64, f64) {
    let mut best = f64::INFINITY;
    let mut err = 0.0;
    for _ in 0..3 {
        let t0 = Instant::now();
        let r = f();
        best = best.min(t0.elapsed().as_secs_f64());
        err = check(&r);
    }
    (best, err)
}

struct Row {
    name: String,
    ours: f64,
    ours_err: f64,
    reference: f64,
    reference_err: f64,
    target: f64,
    note: String,
}

/// Alternate Rust and Python runs; keep the best of each (the reference with 1 BLAS thread and
/// with default threads, whichever was faster).
#[allow(clippy::too_many_arguments)] // one row of the table: names, target, computation, check
fn compare<R>(
    name: &str,
    problem: &str,
    extra: &[&str],
    target: f64,
    mut ours: impl FnMut() -> R,
    check: impl Fn(&R) -> f64,
    reference_err_key: &str,
) -> (Row, Option<Value>) {
    let (mut best_ours, mut ours_err) = (f64::INFINITY, 0.0);
    let (mut best_ref, mut ref_err, mut last) = (f64::INFINITY, f64::NAN, None);
    let mut threads_note = String::new();
    for _ in 0..ROUNDS {
        let (t, e) = time(&mut ours, &check);
        if t < best_ours {
            best_ours = t;
            ours_err = e;
        }
        for blas in [Some("1"), None] {
            if let Some(v) = python(problem, extra, blas) {
                let s = min_seconds(&v, "seconds");
                if s < best_ref {
                    best_ref = s;
                    ref_err = v[reference_err_key].as_f64().unwrap_or(f64::NAN);
                    threads_note = format!("BLAS threads {}", blas.unwrap_or("default"));
                }
                last = Some(v);
            }
        }
    }
    (
        Row {
            name: name.into(),
            ours: best_ours,
            ours_err,
            reference: best_ref,
            reference_err: ref_err,
            target,
            note: threads_note,
        },
        last,
    )
}

/// The catalogue's two-level atom (g at 0, e at 2π × 6.8 GHz) with a resonant drive of Rabi
/// frequency `rabi`, decaying at Γ when given.
fn two_level(rabi: f64, decay: Option<f64>) -> (Atom, Field) {
    let w0 = 2.0 * PI * 6.8e9;
    let (atom, _, _, tr) = match decay {
        Some(gamma) => common::decaying_two_level(w0, gamma),
        None => common::two_level(w0),
    };
    (atom, common::drive(tr, 0.0, rabi))
}

fn linspace(a: f64, b: f64, n: usize) -> Vec<f64> {
    (0..n)
        .map(|i| a + (b - a) * i as f64 / (n - 1) as f64)
        .collect()
}

/// P1: 201 detunings × 201 durations of a square pulse; returns the detunings, durations and
/// P_e for each.
fn p1_setup() -> (Prepared, Vec<f64>, Vec<f64>, f64) {
    let omega = 2.0 * PI * 1e6;
    let (atom, field) = two_level(omega, None);
    let times = linspace(0.0, 3e-6, 201);
    let seq = Sequence::builder()
        .then(Pulse::new(0, Envelope::new(Shape::Square, 3e-6).unwrap()))
        .build()
        .unwrap();
    let mut p = Problem::new(
        atom.clone(),
        vec![field],
        seq,
        State::level(&atom, 0).unwrap(),
        vec![Observable::Population(1)],
    );
    p.samples = Samples::Times(times.clone());
    p.method = Method::Eigen;
    let deltas = linspace(-2.0 * PI * 5e6, 2.0 * PI * 5e6, 201);
    (Prepared::new(&p).unwrap(), deltas, times, omega)
}

fn p1_run(base: &Prepared, deltas: &[f64]) -> Vec<Vec<f64>> {
    use rayon::prelude::*;
    deltas
        .par_iter()
        .with_min_len(16)
        .map(|&d| {
            let mut q = base.clone();
            q.retune(0, d);
            q.run().unwrap().series.swap_remove(0).values
        })
        .collect()
}

/// Worst deviation from the Rabi formula (Allen & Eberly, Optical Resonance and Two-Level Atoms,
/// 1975, ch. 3).
fn p1_error(rows: &[Vec<f64>], deltas: &[f64], times: &[f64], omega: f64) -> f64 {
    let mut worst = 0.0f64;
    for (d, row) in deltas.iter().zip(rows) {
        let w = (omega * omega + d * d).sqrt();
        for (t, p) in times.iter().zip(row) {
            let exact = omega * omega / (w * w) * (0.5 * w * t).sin().powi(2);
            worst = worst.max((p - exact).abs());
        }
    }
    worst
}

/// P2: STIRAP in a Λ system (the test catalogue's model), 1001 two-photon detunings, final P_r;
/// error vs the reference's tight-tolerance values.
fn p2_setup() -> (Prepared, Vec<f64>) {
    let mut p = common::stirap_lambda(2.0 * PI * 5e6, 1e-6, 5.5e-6, 4.5e-6, 10e-6);
    p.tolerance = Tolerance {
        rtol: 1e-8,
        atol: 1e-10,
    };
    p.method = Method::DormandPrince853;
    // H_rr = −δ in the reference: the Stokes carrier sits at −δ from its transition.
    let shifts = linspace(-2.0 * PI * 2e6, 2.0 * PI * 2e6, 1001)
        .into_iter()
        .map(|d| -d)
        .collect();
    (Prepared::new(&p).unwrap(), shifts)
}

fn p3_model(n: usize) -> (Prepared, Vec<C64>) {
    let path = reference_dir().join(format!("p3_model_{n}.json"));
    let v: Value =
        serde_json::from_str(&std::fs::read_to_string(path).expect("p3 model file")).unwrap();
    let mat = |m: &Value| -> Vec<C64> {
        let re = m["re"].as_array().unwrap();
        let im = m["im"].as_array().unwrap();
        re.iter()
            .zip(im)
            .map(|(a, b)| C64::new(a.as_f64().unwrap(), b.as_f64().unwrap()))
            .collect()
    };
    let h = mat(&v["h"]);
    let gamma = v["gamma"].as_f64().unwrap();
    let t_final = v["t_final"].as_f64().unwrap();
    let start = v["rho0_index"].as_u64().unwrap() as usize;
    let mut b = Atom::builder();
    for k in 0..n {
        b.level(format!("l{k}"), k as f64);
    }
    for k in 1..n {
        b.decay(k, k - 1, gamma);
    }
    let atom = b.build().unwrap();
    let ham = Hamiltonian::constant(n, &h, t_final).unwrap();
    let initial = State::mixture(&atom, &[(start, 1.0)]).unwrap();
    let prepared = Prepared::with_hamiltonian(
        atom,
        ham,
        initial,
        vec![],
        Samples::Final,
        Method::Auto,
        Tolerance {
            rtol: 1e-8,
            atol: 1e-10,
        },
        10_000_000,
    )
    .unwrap();
    (prepared, mat(&v["rho_final_reference"]))
}

fn p4_setup() -> (SteadyPrepared, Vec<f64>, f64, f64) {
    let (gamma, omega) = (2.0 * PI * 6e6, 2.0 * PI * 4e6);
    let (atom, field) = two_level(omega, Some(gamma));
    let sp = SteadyPrepared::new(&SteadyProblem {
        atom,
        fields: vec![field],
        cutoff: f64::INFINITY,
        observables: vec![Observable::Population(1)],
    })
    .unwrap();
    (
        sp,
        linspace(-2.0 * PI * 50e6, 2.0 * PI * 50e6, 10_001),
        gamma,
        omega,
    )
}

/// Peak resident memory of this process (kB), from /proc (Linux).
fn peak_rss_kb() -> Option<u64> {
    let s = std::fs::read_to_string("/proc/self/status").ok()?;
    s.lines()
        .find(|l| l.starts_with("VmHWM"))?
        .split_whitespace()
        .nth(1)?
        .parse()
        .ok()
}

/// 10⁶-point final-population sweep (run in a child process so its peak memory is its own).
fn memory_child() {
    let (atom, field) = two_level(2.0 * PI * 1e6, None);
    let seq = Sequence::builder()
        .then(Pulse::new(0, Envelope::new(Shape::Square, 0.5e-6).unwrap()))
        .build()
        .unwrap();
    let p = Problem::new(
        atom.clone(),
        vec![field],
        seq,
        State::level(&atom, 0).unwrap(),
        vec![Observable::Population(1)],
    );
    let base = Prepared::new(&p).unwrap();
    let grid = Grid::new(vec![
        Axis::linspace("delta", -2.0 * PI * 5e6, 2.0 * PI * 5e6, 1_000_000).unwrap(),
    ])
    .unwrap();
    let t0 = Instant::now();
    let out = run_grid(&grid, &SweepOptions::default(), |x| {
        let mut q = base.clone();
        q.retune(0, x[0]);
        q.run_final().map(|v| v[0])
    })
    .unwrap();
    let sum: f64 = out.iter().sum();
    println!(
        "{} {} {}",
        peak_rss_kb().unwrap_or(0),
        t0.elapsed().as_secs_f64(),
        sum
    );
}

fn main() {
    let args: Vec<String> = std::env::args()
        .skip(1)
        .filter(|a| !a.starts_with('-'))
        .collect();
    if args.first().map(String::as_str) == Some("memory-child") {
        memory_child();
        return;
    }
    rayon::ThreadPoolBuilder::new()
        .num_threads(THREADS)
        .build_global()
        .expect("thread pool");
    let want = |p: &str| args.is_empty() || args.iter().any(|a| a == p);
    let mut rows = Vec::new();
    println!(
        "fieldbook-runtime vs numpy/scipy reference ({THREADS} Rust threads; best of {ROUNDS} A/B rounds × 3)"
    );

    if want("p1") {
        let (base, deltas, times, omega) = p1_setup();
        let (row, _) = compare(
            "P1 chevron 201×201 (eigen)",
            "p1",
            &[],
            0.5,
            || p1_run(&base, &deltas),
            |r| p1_error(r, &deltas, &times, omega),
            "max_error",
        );
        let per_point = row.ours / 40401.0;
        rows.push(row);
        if let Some(v) = python("p1-expm", &[], Some("1")) {
            let expm = min_seconds(&v, "per_point_seconds");
            println!(
                "P1 per grid point: fieldbook {:.3e} s, scipy.linalg.expm {:.3e} s: {:.0}× faster (target ≥ 1000×)",
                per_point,
                expm,
                expm / per_point
            );
        }
    }
    if want("p2") {
        let (base, shifts) = p2_setup();
        let idx: Vec<usize> = (0..11).map(|k| k * 100).collect();
        let reference = python("p2", &[], Some("1"));
        let ref_values: Vec<f64> = reference
            .as_ref()
            .and_then(|v| v["reference_values"].as_array().cloned())
            .unwrap_or_default()
            .iter()
            .filter_map(Value::as_f64)
            .collect();
        let (row, _) = compare(
            "P2 STIRAP 1001 δ (dop853, rtol 1e-8)",
            "p2",
            &[],
            0.2,
            || base.scan(1, &shifts).unwrap(),
            |out| {
                idx.iter()
                    .zip(&ref_values)
                    .map(|(&i, r)| (out.row(i)[0] - r).abs())
                    .fold(0.0, f64::max)
            },
            "max_error",
        );
        rows.push(row);
    }
    for n in [4usize, 8, 16, 32] {
        if !want("p3") {
            break;
        }
        let (prepared, reference) = p3_model(n);
        let target = if n <= 8 {
            0.2
        } else if n == 32 {
            1.0
        } else {
            f64::NAN
        };
        let ns = n.to_string();
        let (mut row, _) = compare(
            &format!("P3 Lindblad N={n}"),
            "p3",
            &["--n", &ns],
            target,
            || prepared.run().unwrap(),
            |sol| match &sol.final_state {
                State::Mixed(r) => r
                    .iter()
                    .zip(&reference)
                    .map(|(a, b)| (a - b).norm())
                    .fold(0.0, f64::max),
                State::Pure(_) => f64::NAN,
            },
            "max_error",
        );
        row.note = format!(
            "{}; {}",
            prepared
                .run()
                .map(|s| s.diagnostics.method)
                .unwrap_or_default(),
            row.note
        );
        rows.push(row);
    }
    if want("p4") {
        let (sp, deltas, gamma, omega) = p4_setup();
        // Two-level steady state ρ_ee = (s/2)/(1 + s + 4Δ²/Γ²), s = 2Ω²/Γ² (Foot, Atomic
        // Physics, OUP 2005, ch. 7).
        let s = 2.0 * omega * omega / (gamma * gamma);
        let (row, _) = compare(
            "P4 steady state 10 001 Δ",
            "p4",
            &[],
            0.3,
            || sp.scan(0, &deltas).unwrap(),
            |out| {
                deltas
                    .iter()
                    .zip(out.values())
                    .map(|(d, v)| (v - (s / 2.0) / (1.0 + s + 4.0 * d * d / (gamma * gamma))).abs())
                    .fold(0.0, f64::max)
            },
            "max_error",
        );
        rows.push(row);
    }

    println!(
        "\n{:<40} {:>12} {:>12} {:>8} {:>8} {:>10} {:>10}  notes",
        "problem", "fieldbook s", "reference s", "ratio", "target", "our err", "ref err"
    );
    for r in &rows {
        let ratio = r.ours / r.reference;
        let verdict = if r.target.is_nan() {
            ""
        } else if ratio <= r.target {
            "met"
        } else {
            "MISSED"
        };
        println!(
            "{:<40} {:>12.3e} {:>12.3e} {:>8.3} {:>8} {:>10.1e} {:>10.1e}  {} {}",
            r.name,
            r.ours,
            r.reference,
            ratio,
            if r.target.is_nan() {
                "-".to_string()
            } else {
                format!("≤{}", r.target)
            },
            r.ours_err,
            r.reference_err,
            verdict,
            r.note
        );
    }
    if want("memory") {
        let exe = std::env::current_exe().expect("own path");
        if let Ok(out) = Command::new(exe).arg("memory-child").output() {
            let text = String::from_utf8_lossy(&out.stdout);
            let f: Vec<&str> = text.split_whitespace().collect();
            if f.len() >= 2 {
                println!(
                    "memory: 10⁶-point two-level final-population sweep: peak RSS {:.1} MB, {} s (target < 100 MB)",
                    f[0].parse::<f64>().unwrap_or(0.0) / 1024.0,
                    f[1]
                );
            }
        }
    }
}
