//! Times the HTML report of a record with a 201 × 201 heat map and four line plots (three
//! 201-point curves each), the size the report must handle in under 150 ms; prints the best of
//! ten renders and the page size (`cargo bench -p fieldbook --bench render`).

use std::f64::consts::TAU;
use std::time::Instant;

use fieldbook::kernel::results::{AxisResult, EvolveResult, ObsResult, SolverInfo};
use fieldbook::record::{
    self, CellOutput, CellRecord, Column, Lineage, NamedResult, Record, SourceInfo, Volatile,
};

fn column(label: &str, dim: [i8; 5], values: Vec<f64>) -> Column {
    Column {
        label: label.into(),
        title: None,
        dim,
        values,
    }
}

fn cell(kind: &str, line: usize, output: CellOutput) -> CellRecord {
    CellRecord {
        kind: kind.into(),
        name: None,
        line,
        text: format!("```{kind}\n```"),
        output: Some(output),
    }
}

/// The record: a Rabi chevron over 201 × 201 points (stored under `results` and in the map, as
/// a real run stores it) and four plots of sin² curves.
fn record() -> Record {
    let (n, freq, time) = (201, [-1, 0, 0, 0, 0], [1, 0, 0, 0, 0]);
    let delta: Vec<f64> = (0..n).map(|i| TAU * (-100e3 + 1e3 * i as f64)).collect();
    let len: Vec<f64> = (0..n).map(|j| 1e-6 + 0.295e-6 * j as f64).collect();
    let rabi = TAU * 25e3;
    let z: Vec<f64> = delta
        .iter()
        .flat_map(|d| {
            len.iter().map(move |t| {
                let w = (rabi * rabi + d * d).sqrt();
                rabi * rabi / (w * w) * (w * t / 2.0).sin().powi(2)
            })
        })
        .collect();
    let mut cells = vec![cell(
        "plot",
        1,
        CellOutput::Map {
            title: "chevron".into(),
            x: column("chevron.delta", freq, delta.clone()),
            y: column("len", time, len.clone()),
            z: column("chevron.final.population(e)", [0; 5], z.clone()),
        },
    )];
    let t: Vec<f64> = (0..n).map(|i| i as f64 * 5e-8).collect();
    for p in 0..4 {
        let curves = (1..=3)
            .map(|c| {
                let values = t
                    .iter()
                    .map(|t| (c as f64 * 1e6 * t).sin().powi(2))
                    .collect();
                column(&format!("e{p}.population(l{c})"), [0; 5], values)
            })
            .collect();
        let output = CellOutput::Curves {
            y_title: None,
            title: format!("plot {p}"),
            x: column("time", time, t.clone()),
            curves,
            log_x: false,
            log_y: false,
        };
        cells.push(cell("plot", 2 + p, output));
    }
    let axis = |name: &str, dim, values| AxisResult {
        name: name.into(),
        dim,
        values,
    };
    Record {
        format: record::FORMAT.into(),
        version: record::VERSION,
        name: "bench".into(),
        source: SourceInfo {
            file: "bench.md".into(),
            text: String::new(),
            sha256: record::sha256(b""),
        },
        cells,
        parameters: vec![],
        results: vec![NamedResult {
            block: "chevron".into(),
            result: EvolveResult {
                axes: vec![axis("delta", freq, delta), axis("len", time, len)],
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
                    reason: String::new(),
                    rtol: 1e-8,
                    atol: 1e-10,
                    steps: 40401,
                    norm_drift: 0.0,
                    frame: vec![],
                },
                steady: false,
            },
        }],
        checks: vec![],
        inline: vec![],
        warnings: vec![],
        errors: vec![],
        lineage: Lineage::default(),
        volatile: Volatile {
            date: String::new(),
            tool_version: String::new(),
            commit: String::new(),
            platform: String::new(),
            timings: vec![],
        },
    }
}

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let rec = record();
    let mut best = f64::INFINITY;
    let mut size = 0;
    for _ in 0..10 {
        let start = Instant::now();
        let html = fieldbook::render::report(&rec, None)?;
        best = best.min(start.elapsed().as_secs_f64());
        size = html.len();
    }
    println!(
        "report, 201 × 201 map + 4 line plots: best of 10 {:.1} ms (target 150 ms), {:.2} MB",
        best * 1e3,
        size as f64 / 1e6
    );
    Ok(())
}
