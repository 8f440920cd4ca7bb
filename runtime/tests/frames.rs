//! The automatic rotating frame on a closed loop of couplings: which terms it keeps static, which
//! it keeps rotating (at the loop's three-photon detuning), which it drops, and that the dynamics
//! do not depend on the frame it chose.

mod common;

use common::*;
use fieldbook_runtime::ode::{self, RkConfig, Scheme, System};
use fieldbook_runtime::prelude::*;

/// A Δ (loop) system: g–e driven by σ⁺ light (f1), r–e by σ⁻ light (f2), g–r by a π microwave
/// (f3); each field drives only its own transition.
fn loop_problem(d1: f64, d2: f64, d3: f64, cutoff: f64) -> Problem {
    let mut b = Atom::builder();
    let g = b.level("g", 0.0);
    let r = b.level("r", TAU * 6.8e9);
    let e = b.level("e", TAU * 384.0e12);
    let ge = b.transition_with_dipole(g, e, sigma_plus_dipole());
    let re = b.transition_with_dipole(r, e, sigma_minus_dipole());
    let gr = b.transition(g, r);
    let atom = b.build().unwrap();
    let field = |name: &str, tr, d, rabi, pol| {
        Field::new(
            name,
            Carrier::Detuning {
                transition: tr,
                detuning: d,
            },
            Strength::Rabi {
                transition: tr,
                rabi,
            },
        )
        .with_polarization(pol)
    };
    let fields = vec![
        field("f1", ge, d1, TAU * 1.0e6, Polarization::sigma_plus()),
        field("f2", re, d2, TAU * 0.8e6, Polarization::sigma_minus()),
        field("f3", gr, d3, TAU * 0.5e6, Polarization::pi()),
    ];
    let seq = Sequence::builder()
        .at(0.0, Pulse::new(0, square(2e-6)))
        .at(0.0, Pulse::new(1, square(2e-6)))
        .at(0.0, Pulse::new(2, square(2e-6)))
        .build()
        .unwrap();
    let mut p = Problem::new(
        atom.clone(),
        fields,
        seq,
        State::level(&atom, g).unwrap(),
        vec![
            Observable::Population(g),
            Observable::Population(r),
            Observable::Population(e),
        ],
    );
    p.frame = Frame::Rotating { cutoff };
    p.tolerance = tight();
    p
}

/// The same loop written by hand in the frame where g–e and g–r are static: H_gg = 0,
/// H_ee = −Δ1, H_rr = −Δ3, H_eg = Ω1/2, H_rg = Ω3/2, H_er = (Ω2/2)·e^{i(Δ1 − Δ2 − Δ3)t}
/// (from U = diag(e^{iθ_k}), θ_e = ω1 t, θ_r = ω3 t; common practice).
struct HandWritten {
    d: [f64; 3],
    o: [f64; 3],
}

impl System for HandWritten {
    fn dim(&self) -> usize {
        3
    }
    fn rhs(&self, t: f64, y: &[C64], dy: &mut [C64]) {
        // Basis order (g, r, e) as in the atom above.
        let delta = self.d[0] - self.d[1] - self.d[2];
        let her = C64::from_polar(0.5 * self.o[1], delta * t);
        let h = [
            [
                C64::new(0.0, 0.0),
                C64::new(0.5 * self.o[2], 0.0),
                C64::new(0.5 * self.o[0], 0.0),
            ],
            [
                C64::new(0.5 * self.o[2], 0.0),
                C64::new(-self.d[2], 0.0),
                her.conj(),
            ],
            [
                C64::new(0.5 * self.o[0], 0.0),
                her,
                C64::new(-self.d[0], 0.0),
            ],
        ];
        for i in 0..3 {
            let s: C64 = (0..3).map(|j| h[i][j] * y[j]).sum();
            dy[i] = C64::new(s.im, -s.re);
        }
    }
}

#[test]
fn a_loop_keeps_one_term_rotating_at_the_three_photon_detuning() {
    let (d1, d2, d3) = (TAU * 0.1e6, TAU * 0.3e6, TAU * 2.0e6);
    let sol = solve(&loop_problem(d1, d2, d3, f64::INFINITY)).unwrap();
    let report = &sol.frame;
    assert_eq!(report.with_fate(Fate::Static).count(), 2, "{report:?}");
    let rotating: Vec<_> = report.with_fate(Fate::TimeDependent).collect();
    assert_eq!(rotating.len(), 1, "{report:?}");
    // The most detuned coupling (f3) closes the loop and turns at ±(Δ1 − Δ2 − Δ3).
    assert_eq!(rotating[0].field, "f3");
    let expect = (d1 - d2 - d3).abs();
    assert!(
        (rotating[0].rotation.abs() - expect).abs() < 1e-9 * expect,
        "{} vs {expect}",
        rotating[0].rotation
    );
    // Counter-rotating parts: the π microwave on its own transition, and each circular beam on
    // the other optical leg (the e^{+iωt} half of σ⁺ light has σ⁻ character and meets the Δm = −1
    // dipole); a circular beam has none on its own Δm leg.
    let counter: Vec<_> = report
        .with_fate(Fate::CounterRotating)
        .map(|n| (n.field.as_str(), n.transition.as_str()))
        .collect();
    assert_eq!(
        counter,
        vec![("f1", "r -> e"), ("f2", "g -> e"), ("f3", "g -> r")],
        "{report:?}"
    );

    // Populations do not depend on the frame: compare with the hand-written frame.
    let sys = HandWritten {
        d: [d1, d2, d3],
        o: [TAU * 1.0e6, TAU * 0.8e6, TAU * 0.5e6],
    };
    let mut y = vec![C64::new(1.0, 0.0), C64::new(0.0, 0.0), C64::new(0.0, 0.0)];
    ode::integrate(
        Scheme::DormandPrince853,
        &sys,
        0.0,
        2e-6,
        &mut y,
        &[],
        &RkConfig::with_tolerances(1e-12, 1e-14),
        &mut |_, _, _| {},
    )
    .unwrap();
    let got = sol.final_values();
    for (k, want) in y.iter().map(|c| c.norm_sqr()).enumerate() {
        assert!(
            (got[k] - want).abs() < 1e-9,
            "level {k}: {} vs {want}",
            got[k]
        );
    }
}

#[test]
fn a_cutoff_below_the_loop_detuning_drops_the_closing_term() {
    let (d1, d2, d3) = (TAU * 0.1e6, TAU * 0.3e6, TAU * 2.0e6);
    // Cutoff between the tree edges' detunings and the loop's: the f3 coupling goes.
    let sol = solve(&loop_problem(d1, d2, d3, TAU * 1.0e6)).unwrap();
    let dropped: Vec<_> = sol.frame.with_fate(Fate::BeyondCutoff).collect();
    assert_eq!(dropped.len(), 1, "{:?}", sol.frame);
    assert_eq!(dropped[0].field, "f3");
    assert_eq!(sol.frame.with_fate(Fate::TimeDependent).count(), 0);
    // Without f3 the level r is reached only through e, as a two-photon Λ transfer; the
    // populations still sum to one.
    let v = sol.final_values();
    assert!((v.iter().sum::<f64>() - 1.0).abs() < 1e-10);
}
