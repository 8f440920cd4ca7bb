//! The catalogue harness: every closed-form model of `common::catalogue` is solved by every method
//! that can treat it and compared with its analytic answer; unsuitable methods must be refused
//! with `Error::MethodUnsuitable` (style of the diffsol crate's test models).

mod common;

use common::{ALL_METHODS, catalogue, flatten, tight};
use fieldbook_runtime::prelude::*;

#[test]
fn every_method_on_every_closed_form_model() {
    let mut report = Vec::new();
    let mut failures = Vec::new();
    for model in catalogue() {
        for method in ALL_METHODS {
            let mut p = model.problem.clone();
            p.method = method;
            p.tolerance = tight();
            let result = solve(&p);
            match ((model.tolerance)(method), result) {
                (Some((tol, why)), Ok(sol)) => {
                    let got = flatten(&sol);
                    assert_eq!(got.len(), model.analytic.len(), "{}", model.name);
                    // Absolute error for O(1) quantities, relative for large ones (a scattering
                    // rate in photons/s).
                    let err = got
                        .iter()
                        .zip(&model.analytic)
                        .map(|(x, a)| (x - a).abs() / a.abs().max(1.0))
                        .fold(0.0, f64::max);
                    report.push(format!(
                        "{:<22} {:<16} err {err:.1e} (tol {tol:.0e}: {why}) [{}]",
                        model.name,
                        method.name(),
                        model.source
                    ));
                    // A NaN error must fail too.
                    if err.is_nan() || err > tol {
                        failures.push(format!(
                            "{} / {}: error {err:e} > {tol:e}",
                            model.name,
                            method.name()
                        ));
                    }
                }
                (Some(_), Err(e)) => {
                    failures.push(format!("{} / {}: failed: {e}", model.name, method.name()))
                }
                (None, Err(Error::MethodUnsuitable { .. })) => {}
                (None, Err(e)) => failures.push(format!(
                    "{} / {}: expected MethodUnsuitable, got {e:?}",
                    model.name,
                    method.name()
                )),
                (None, Ok(_)) => failures.push(format!(
                    "{} / {}: expected MethodUnsuitable, but it solved",
                    model.name,
                    method.name()
                )),
            }
        }
    }
    println!("{}", report.join("\n"));
    assert!(failures.is_empty(), "\n{}", failures.join("\n"));
}
