//! Side-by-side benchmark: each problem solved by the runtime and by the numpy/scipy reference
//! (`benches/reference/problems.py`), alternating A/B in one run; prints times, ratios and the
//! accuracy each side reached. Run with `cargo bench -p fieldbook-runtime --bench compare`
//! (optionally followed by `-- p1 p2 …` to pick problems; `-- p5-dump` writes the P5 model
//! for the reference).

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

/// P5: σ⁺ optical pumping on the whole ⁸⁷Rb D2 manifold (24 sublevels; the tests' scenario,
/// `common::rb87_d2_pumping`), both beams on for 10 µs from the uniform ground mixture, the
/// stretched population recorded at 11 equally spaced times.
const P5_DURATION: f64 = 10e-6;
/// Sample times of P5, 0 to 10 µs inclusive.
const P5_SAMPLES: usize = 11;

fn p5_setup(method: Method) -> (common::Pumping, Problem, Prepared) {
    let s = common::rb87_d2_pumping(0.0);
    let mut p = s.problem(P5_DURATION, vec![Observable::Population(s.stretched)]);
    p.samples = Samples::Uniform(P5_SAMPLES);
    p.method = method;
    p.tolerance = Tolerance {
        rtol: 1e-8,
        atol: 1e-10,
    };
    let prepared = Prepared::new(&p).expect("p5 problem");
    (s, p, prepared)
}

/// The P5 model exactly as the runtime solves it: H in the rotating frame (rad/s, row-major,
/// constant while both beams are on), the jumps √Γ|to⟩⟨from|, ρ₀'s diagonal and the sample times.
fn p5_model_json(s: &common::Pumping, p: &Problem, prepared: &Prepared) -> Value {
    let atom = &s.line.atom;
    let n = atom.n();
    let mut h = vec![C64::new(0.0, 0.0); n * n];
    prepared.hamiltonian().fill(0.5 * P5_DURATION, &mut h);
    let jumps: Vec<Value> = atom
        .decays()
        .iter()
        .filter(|d| d.rate > 0.0)
        .map(|d| serde_json::json!({"from": d.from, "to": d.to, "rate": d.rate}))
        .collect();
    let rho0: Vec<f64> = s
        .line
        .labels
        .iter()
        .map(|l| if l.excited { 0.0 } else { 0.125 })
        .collect();
    let times: Vec<f64> = (0..P5_SAMPLES)
        .map(|i| P5_DURATION * i as f64 / (P5_SAMPLES - 1) as f64)
        .collect();
    let fields: Vec<Value> = s
        .fields
        .iter()
        .map(|f| {
            let tr = f.reference().expect("referenced field");
            serde_json::json!({
                "name": f.name(),
                "transition": atom.transition_label(tr),
                "polarization": "sigma+",
                "detuning_rad_per_s": 0.0,
                "rabi_rad_per_s": match f.strength() { Strength::Rabi { rabi, .. } => *rabi, _ => f64::NAN },
            })
        })
        .collect();
    let (_, report) = fieldbook_runtime::frame::build(&p.atom, &p.fields, &p.sequence, p.frame)
        .expect("p5 frame");
    let count = |fate| report.with_fate(fate).count();
    serde_json::json!({
        "problem": "p5",
        "made_by": "cargo bench -p fieldbook-runtime --bench compare -- p5-dump",
        "description": "87Rb D2 (species table), all 24 sublevels at 0.1 G along z; sigma+ pump on F=2 -> F'=3 (s = 1) and sigma+ repumper on F=1 -> F'=2, both resonant, with decay; rotating frame with cutoff 2pi x 1 GHz",
        "n": n,
        "sublevels": s.line.labels.iter().map(|l| serde_json::json!({"name": l.name, "excited": l.excited, "two_f": l.two_f, "two_m": l.two_m})).collect::<Vec<_>>(),
        "stretched_index": s.stretched,
        "h": {"n": n, "re": h.iter().map(|z| z.re).collect::<Vec<_>>(), "im": h.iter().map(|z| z.im).collect::<Vec<_>>()},
        "jumps": jumps,
        "jump_operators": "sqrt(rate) |to><from|",
        "rho0_diagonal": rho0,
        "sample_times": times,
        "t_final": P5_DURATION,
        "gamma": s.gamma,
        "b_field_tesla": common::PUMPING_FIELD,
        "cutoff_rad_per_s": s.cutoff,
        "fields": fields,
        "frame_terms": {"static": count(Fate::Static), "time_dependent": count(Fate::TimeDependent), "beyond_cutoff": count(Fate::BeyondCutoff), "counter_rotating": count(Fate::CounterRotating)},
        "units": "rad/s, s, 1/s; hbar = 1",
        "storage": "matrices row-major flat: M[i,j] = re[i*n+j] + 1j*im[i*n+j]",
    })
}

fn p5_model_path() -> PathBuf {
    reference_dir().join("p5_model.json")
}

/// Refuse to compare when the committed model is not the one the runtime builds now (a changed
/// species table, frame or scenario): both sides must solve the identical problem.
fn p5_check_model(fresh: &Value) {
    let stale = "runtime/benches/reference/p5_model.json is stale or missing: run `cargo bench -p fieldbook-runtime --bench compare -- p5-dump`, then `python3 runtime/benches/reference/problems.py p5 --make-reference`";
    let text = std::fs::read_to_string(p5_model_path()).expect(stale);
    let committed: Value = serde_json::from_str(&text).expect(stale);
    let (_, h_new) = common::cmat(&fresh["h"]);
    let (_, h_old) = common::cmat(&committed["h"]);
    let scale = h_new.iter().map(|z| z.norm()).fold(0.0, f64::max);
    let same_h = h_new.len() == h_old.len()
        && h_new
            .iter()
            .zip(&h_old)
            .all(|(a, b)| (a - b).norm() <= 1e-12 * scale);
    let rates = |v: &Value| -> Vec<(u64, u64, f64)> {
        v["jumps"]
            .as_array()
            .expect(stale)
            .iter()
            .map(|j| {
                (
                    j["from"].as_u64().unwrap_or(0),
                    j["to"].as_u64().unwrap_or(0),
                    common::num(&j["rate"]),
                )
            })
            .collect()
    };
    let (a, b) = (rates(fresh), rates(&committed));
    let same_jumps = a.len() == b.len()
        && a.iter()
            .zip(&b)
            .all(|(x, y)| x.0 == y.0 && x.1 == y.1 && (x.2 - y.2).abs() <= 1e-12 * x.2);
    let same_rest = [
        "rho0_diagonal",
        "sample_times",
        "stretched_index",
        "sublevels",
    ]
    .iter()
    .all(|k| fresh[*k] == committed[*k]);
    assert!(same_h && same_jumps && same_rest, "{stale}");
}

/// The tight reference of P5 (`problems.py p5 --make-reference`): the stretched population at
/// every sample and the final ρ.
fn p5_reference() -> (Vec<f64>, Vec<C64>) {
    let path = reference_dir().join("p5_reference.json");
    let v: Value = serde_json::from_str(&std::fs::read_to_string(&path).unwrap_or_else(|e| {
        panic!(
            "{}: {e}; run problems.py p5 --make-reference",
            path.display()
        )
    }))
    .expect("p5 reference");
    (
        common::nums(&v["stretched_population"]),
        common::cmat(&v["rho_final"]).1,
    )
}

/// max over samples of |ΔP_stretched| and over the final ρ of |Δρ_ij|, as the reference reports.
fn p5_error(sol: &Solution, reference: &(Vec<f64>, Vec<C64>)) -> f64 {
    let pop = sol.series[0]
        .values
        .iter()
        .zip(&reference.0)
        .map(|(a, b)| (a - b).abs())
        .fold(0.0, f64::max);
    let rho = match &sol.final_state {
        State::Mixed(r) => r
            .iter()
            .zip(&reference.1)
            .map(|(a, b)| (a - b).norm())
            .fold(0.0, f64::max),
        State::Pure(_) => f64::NAN,
    };
    pop.max(rho)
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
    if args.first().map(String::as_str) == Some("p5-dump") {
        let (s, p, prepared) = p5_setup(Method::Auto);
        let path = p5_model_path();
        let mut text = serde_json::to_string(&p5_model_json(&s, &p, &prepared)).expect("json");
        text.push('\n');
        std::fs::write(&path, text).expect("write p5 model");
        println!("wrote {}", path.display());
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
    if want("p5") {
        let reference = p5_reference();
        // The same integrator on both sides; the exponential against scipy's on the whole
        // Liouvillian (what a user writes); and against an expert's reduction to the block the
        // conserved m selects, the reduction the runtime makes by itself.
        for (method, python_method, name) in [
            (
                Method::DormandPrince853,
                "ivp",
                "P5 D2 pump dop853 / solve_ivp",
            ),
            (
                Method::LiouvillianExp,
                "expm",
                "P5 D2 pump exp(𝓛t) / expm 576²",
            ),
            (
                Method::LiouvillianExp,
                "expm-block",
                "P5 D2 pump exp(𝓛t) / expm block",
            ),
        ] {
            let (s, p, prepared) = p5_setup(method);
            p5_check_model(&p5_model_json(&s, &p, &prepared));
            let (mut row, _) = compare(
                name,
                "p5",
                &["--method", python_method],
                f64::NAN,
                || prepared.run().unwrap(),
                |sol| p5_error(sol, &reference),
                "max_error",
            );
            let diag = prepared.run().map(|s| s.diagnostics).ok();
            row.note = format!(
                "{} steps {}, one solve on 1 Rust thread; {}",
                diag.as_ref().map_or("", |d| d.method.as_str()),
                diag.as_ref().map_or(0, |d| d.steps),
                row.note
            );
            rows.push(row);
        }
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
