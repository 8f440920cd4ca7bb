//! Optical pumping and dark states from atoms expanded out of hyperfine manifolds
//! (`manifold::Line::expand`): the steady states against their analytic populations.

use std::f64::consts::TAU;

use fieldbook_runtime::manifold::Line;
use fieldbook_runtime::prelude::*;
use fieldbook_runtime::species::{DLine, Species};
use fieldbook_runtime::zeeman::Hyperfine;

fn transition(atom: &Atom, lower: usize, upper: usize) -> usize {
    atom.transitions()
        .iter()
        .position(|t| t.lower() == lower && t.upper() == upper)
        .expect("transition")
}

/// ⁸⁷Rb D2 (the species table, `notebooks-spec/SPECIES.md`), F = 2 → F' = 3
/// only (the closed cycling manifold), at zero field. σ⁺ light pumps every F = 2 sublevel into the stretched |2, 2⟩, which then
/// cycles on |2, 2⟩ ↔ |3', 3'⟩ as a two-level atom (common practice): in the steady state
/// ρ(3', 3') = (s/2)/(1 + s + 4Δ²/Γ²) with s = 2Ω²/Γ² (Foot, *Atomic Physics*, 2005, ch. 7),
/// ρ(2, 2) the rest, every other sublevel empty. Tolerance 1e-9: a linear solve.
#[test]
fn sigma_plus_pumps_into_the_stretched_state() {
    let line = Species::named("87Rb").unwrap().line(DLine::D2).unwrap();
    let la = line
        .expand(0.0, |two_f| two_f == 4, |two_fp| two_fp == 6)
        .unwrap();
    let (g22, e33) = (
        la.level(false, 4, 4).unwrap(),
        la.level(true, 6, 6).unwrap(),
    );
    let cyc = transition(&la.atom, g22, e33);
    for (rabi, delta) in [(0.5, 0.0), (1.0, 0.7), (2.0, -1.3)] {
        let (rabi, delta) = (rabi * line.gamma, delta * line.gamma);
        let field = Field::new(
            "pump",
            Carrier::Detuning {
                transition: cyc,
                detuning: delta,
            },
            Strength::Rabi {
                transition: cyc,
                rabi,
            },
        )
        .with_polarization(Polarization::sigma_plus());
        let obs: Vec<Observable> = (0..la.atom.n()).map(Observable::Population).collect();
        let sol = steady_state(&SteadyProblem {
            atom: la.atom.clone(),
            fields: vec![field],
            cutoff: f64::INFINITY,
            observables: obs,
        })
        .unwrap();
        let s = 2.0 * rabi * rabi / (line.gamma * line.gamma);
        let pe = (s / 2.0) / (1.0 + s + 4.0 * delta * delta / (line.gamma * line.gamma));
        for (k, p) in sol.values.iter().enumerate() {
            let want = if k == e33 {
                pe
            } else if k == g22 {
                1.0 - pe
            } else {
                0.0
            };
            assert!(
                (p - want).abs() < 1e-9,
                "{}: {p} vs {want}",
                la.labels[k].name
            );
        }
    }
}

/// π light on a J = 1 → J' = 1 line (no nuclear spin, so F = J): ⟨1 0; 1 0|1 0⟩ = 0, so m = 0 is
/// dark and the steady state holds every atom there (common practice; the Clebsch–Gordan zero
/// of Edmonds 1957, eq. 3.5.15 with j1 + j2 + J odd). Tolerance 1e-9.
#[test]
fn pi_light_on_f1_to_f1_leaves_m0_dark() {
    let level = |g_j| Hyperfine {
        two_j: 2,
        two_i: 0,
        a: 0.0,
        b: 0.0,
        g_j,
        g_i: 0.0,
    };
    let line = Line {
        ground: level(1.5),
        excited: level(1.5),
        omega: TAU * 400e12,
        gamma: TAU * 5e6,
    };
    let la = line.expand(0.0, |_| true, |_| true).unwrap();
    let (g0, gp, ep) = (
        la.level(false, 2, 0).unwrap(),
        la.level(false, 2, 2).unwrap(),
        la.level(true, 2, 2).unwrap(),
    );
    assert!(
        la.atom
            .transitions()
            .iter()
            .all(|t| !(t.lower() == g0 && t.dipole()[1].norm() > 0.0)),
        "m = 0 → m' = 0 is forbidden"
    );
    let tr = transition(&la.atom, gp, ep);
    let field = Field::new(
        "probe",
        Carrier::Detuning {
            transition: tr,
            detuning: 0.0,
        },
        Strength::Rabi {
            transition: tr,
            rabi: line.gamma,
        },
    );
    let obs: Vec<Observable> = (0..la.atom.n()).map(Observable::Population).collect();
    let sol = steady_state(&SteadyProblem {
        atom: la.atom.clone(),
        fields: vec![field],
        cutoff: f64::INFINITY,
        observables: obs,
    })
    .unwrap();
    for (k, p) in sol.values.iter().enumerate() {
        let want = if k == g0 { 1.0 } else { 0.0 };
        assert!((p - want).abs() < 1e-9, "{}: {p}", la.labels[k].name);
    }
}
