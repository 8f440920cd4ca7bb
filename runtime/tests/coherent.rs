//! Coherent (pure-state) dynamics against published closed forms: Rabi oscillations in the rotating
//! and the exact frame, Rosen–Zener, Landau–Zener, the Bloch–Siegert shift, Ramsey fringes with
//! the AC Stark shift, the area theorem and STIRAP.

mod common;

use std::f64::consts::PI;

use common::*;
use fieldbook_runtime::prelude::*;

fn pe_series(sol: &Solution) -> &[f64] {
    &sol.series[0].values
}

// ---------------------------------------------------------------------------------------------
// 1. Rabi oscillations.

/// P_e(t) for detuned square pulses in the rotating frame, at 201 sample times over several
/// generalised Rabi periods, for Δ of both signs, by every pure-state method at tight tolerance.
/// Source: Allen & Eberly, Optical Resonance and Two-Level Atoms (1975), ch. 3; Foot, Atomic
/// Physics (OUP 2005), ch. 7. Tolerance 1e-10 absolute: the closed form is exact for
/// H = [[0, Ω/2], [Ω/2, −Δ]], so only integration error (≲ 1e-12 at rtol 1e-12) remains.
#[test]
fn rabi_formula_rotating_frame() {
    let omega = TAU * 1e6;
    let mut worst = 0.0f64;
    for delta in [0.0, 0.3 * omega, -0.3 * omega, 1.7 * omega, -2.5 * omega] {
        let (atom, g, e, tr) = two_level(TAU * 6.8e9);
        let t_end = 4.0 * TAU / omega;
        let seq = Sequence::builder()
            .then(Pulse::new(0, square(t_end)))
            .build()
            .unwrap();
        let times = uniform(t_end, 201);
        for method in [
            Method::Auto,
            Method::Eigen,
            Method::DormandPrince853,
            Method::Magnus4,
        ] {
            let mut p = Problem::new(
                atom.clone(),
                vec![drive(tr, delta, omega)],
                seq.clone(),
                State::level(&atom, g).unwrap(),
                vec![Observable::Population(e)],
            );
            p.samples = Samples::Times(times.clone());
            p.method = method;
            p.tolerance = tight();
            let sol = solve(&p).unwrap();
            let err = times
                .iter()
                .zip(pe_series(&sol))
                .map(|(&t, &pe)| (pe - rabi_pe(omega, delta, t)).abs())
                .fold(0.0, f64::max);
            assert!(
                err < 1e-10,
                "Δ/Ω = {}, {}: error {err:e}",
                delta / omega,
                method.name()
            );
            worst = worst.max(err);
        }
    }
    println!("rabi rotating frame: worst |ΔP_e| = {worst:.2e} (tol 1e-10)");
}

/// The same formula in the exact frame (full Ω cos ωt, counter-rotating terms kept) with
/// ω₀ = 2π × 1 GHz and Ω = 2π × 1 MHz. The rotating-wave approximation drops terms rotating at
/// ω + ω₀ ≈ 2ω₀ with strength Ω/2; they add a fast wiggle of the amplitudes of relative size
/// ~Ω/(4ω₀) and a Bloch–Siegert detuning Ω²/(4ω₀) (negligible over a few Rabi periods: a phase of
/// 2π × 250 Hz × 3 µs ≈ 5e-3 rad enters P_e only at second order on resonance, first order
/// × sin elsewhere ≲ 5e-3 × Ω/Ω'). Tolerance 3 Ω/ω₀ = 3e-3 covers both with margin.
#[test]
fn rabi_formula_exact_frame() {
    let (w0, omega) = (TAU * 1e9, TAU * 1e6);
    let tol = 3.0 * omega / w0;
    let mut worst = 0.0f64;
    for delta in [0.0, 0.5 * omega, -1.2 * omega] {
        let (atom, g, e, tr) = two_level(w0);
        let t_end = 2.0 * TAU / omega;
        let seq = Sequence::builder()
            .then(Pulse::new(0, square(t_end)))
            .build()
            .unwrap();
        // Sample times incommensurate with the 1 GHz period: on a stroboscopic grid (multiples
        // of 2π/ω₀ here) the counter-rotating wiggle would be invisible.
        let times: Vec<f64> = (0..41).map(|k| t_end * (k as f64 + 0.37) / 41.0).collect();
        let mut p = Problem::new(
            atom.clone(),
            vec![drive(tr, delta, omega)],
            seq,
            State::level(&atom, g).unwrap(),
            vec![Observable::Population(e)],
        );
        p.frame = Frame::exact();
        p.samples = Samples::Times(times.clone());
        p.method = Method::DormandPrince853;
        p.tolerance = Tolerance {
            rtol: 1e-10,
            atol: 1e-12,
        };
        let sol = solve(&p).unwrap();
        // Both parts are kept (the co-rotating one is static on resonance); nothing is dropped.
        let kept = sol.frame.with_fate(Fate::TimeDependent).count()
            + sol.frame.with_fate(Fate::Static).count();
        assert!(
            kept == 2 && sol.frame.notes.len() == 2,
            "exact frame keeps co- and counter-rotating terms: {:?}",
            sol.frame
        );
        let err = times
            .iter()
            .zip(pe_series(&sol))
            .map(|(&t, &pe)| (pe - rabi_pe(omega, delta, t)).abs())
            .fold(0.0, f64::max);
        assert!(
            err < tol,
            "Δ/Ω = {}: error {err:e} ≥ {tol:e}",
            delta / omega
        );
        // The error must be there at all (the counter-rotating terms are kept) …
        if delta == 0.0 {
            assert!(err > 0.01 * omega / w0, "suspiciously small: {err:e}");
        }
        worst = worst.max(err);
    }
    println!(
        "rabi exact frame: worst |ΔP_e| = {worst:.2e} = {:.2} Ω/ω0 (tol 3 Ω/ω0)",
        worst / (omega / w0)
    );
}

// ---------------------------------------------------------------------------------------------
// 2. Rosen–Zener.

/// Ω(t) = Ω₀ sech((t − t₀)/T) gives P = sin²(πΩ₀T/2) sech²(πΔT/2) for the infinite pulse (Rosen &
/// Zener, Phys. Rev. 40, 502 (1932)). The window is ±30 T: the truncated tails carry an area
/// ~4Ω₀T e^{−30} ≈ 4e-13 Ω₀T, so the formula holds to ~1e-12; tolerance 1e-9 is set by
/// rtol 1e-12 over the many detuning oscillations of the long window.
#[test]
fn rosen_zener_sech_pulse() {
    let w = 0.1e-6;
    let mut worst = 0.0f64;
    for (a, d) in [(1.0, 0.0), (0.5, 0.8), (1.5, 1.6), (2.2, -0.4), (3.0, 3.0)] {
        let (o0, delta) = (a / w, d / w);
        let (atom, g, e, tr) = two_level(TAU * 1e9);
        let env = Envelope::new(Shape::Sech { width: w }, 60.0 * w).unwrap();
        let seq = Sequence::builder()
            .then(Pulse::new(0, env))
            .build()
            .unwrap();
        for method in [Method::Auto, Method::DormandPrince853, Method::Magnus4] {
            let mut p = Problem::new(
                atom.clone(),
                vec![drive(tr, delta, o0)],
                seq.clone(),
                State::level(&atom, g).unwrap(),
                vec![Observable::Population(e)],
            );
            p.method = method;
            p.tolerance = tight();
            let pe = solve(&p).unwrap().final_values()[0];
            let expect = rosen_zener(o0, w, delta);
            let err = (pe - expect).abs();
            assert!(
                err < 1e-9,
                "Ω₀T = {a}, ΔT = {d}, {}: P = {pe}, RZ {expect}, error {err:e}",
                method.name()
            );
            worst = worst.max(err);
        }
    }
    println!("rosen-zener: worst |ΔP| = {worst:.2e} (tol 1e-9)");
}

// ---------------------------------------------------------------------------------------------
// 3. Landau–Zener.

/// A linear chirp Δ(t) = α(t − T/2) through resonance, from g: the probability of staying in the
/// diabatic state g is exp(−πΩ²/(2|α|)) for H = [[0, Ω/2], [Ω/2, −αt]] over infinite times (Zener,
/// Proc. R. Soc. A 137, 696 (1932)). Over a finite sweep ±D the final P oscillates about the
/// asymptote with an amplitude ≈ 2√(P(1−P)) · Ω/(2D) from each end, where the state is not yet
/// (or no longer) diabatic (Vitanov & Garraway, Phys. Rev. A 53, 4288 (1996)); with D = 400 Ω the
/// bound is ≈ 2.5e-3 and the tolerance is 1.5 Ω/D = 3.75e-3.
#[test]
fn landau_zener_linear_chirp() {
    let omega = TAU * 1e6;
    let d_end = 400.0 * omega;
    let tol = 1.5 * omega / d_end;
    let mut worst = 0.0f64;
    for (x, sign) in [(0.5, 1.0), (1.0, -1.0), (2.0, 1.0)] {
        // x = πΩ²/(2|α|).
        let alpha = sign * PI * omega * omega / (2.0 * x);
        let t_end = 2.0 * d_end / alpha.abs();
        let (atom, g, _, tr) = two_level(TAU * 10e9);
        let field = drive(tr, 0.0, omega).with_chirp(Chirp::Linear {
            start: -alpha * 0.5 * t_end,
            rate: alpha,
        });
        let seq = Sequence::builder()
            .then(Pulse::new(0, square(t_end)))
            .build()
            .unwrap();
        let mut p = Problem::new(
            atom.clone(),
            vec![field],
            seq,
            State::level(&atom, g).unwrap(),
            vec![Observable::Population(g)],
        );
        p.method = Method::DormandPrince853;
        p.tolerance = Tolerance {
            rtol: 1e-10,
            atol: 1e-12,
        };
        let pg = solve(&p).unwrap().final_values()[0];
        let expect = (-x).exp();
        let err = (pg - expect).abs();
        assert!(
            err < tol,
            "πΩ²/2α = {x}, sign {sign}: P = {pg}, LZ {expect}, error {err:e} ≥ {tol:e}"
        );
        worst = worst.max(err);
    }
    println!("landau-zener: worst |ΔP| = {worst:.2e} (tol {tol:.2e})");
}

// ---------------------------------------------------------------------------------------------
// 4. Bloch–Siegert shift.

/// Quasi-energy splitting (rad/s) of the exact-frame two-level atom under a constant
/// linearly polarised drive at detuning Δ: the eigenphases of the one-period lab-frame propagator.
fn floquet_splitting(w0: f64, omega: f64, delta: f64) -> f64 {
    let (atom, g, e, tr) = two_level(w0);
    let w = w0 + delta;
    let period = TAU / w;
    let seq = Sequence::builder()
        .then(Pulse::new(0, square(period)))
        .build()
        .unwrap();
    let mut u = [[C64::new(0.0, 0.0); 2]; 2];
    for (col, start) in [g, e].into_iter().enumerate() {
        let mut p = Problem::new(
            atom.clone(),
            vec![drive(tr, delta, omega)],
            seq.clone(),
            State::level(&atom, start).unwrap(),
            vec![],
        );
        p.frame = Frame::exact();
        p.method = Method::DormandPrince853;
        p.tolerance = Tolerance {
            rtol: 1e-13,
            atol: 1e-15,
        };
        let sol = solve(&p).unwrap();
        let State::Pure(c) = sol.final_state else {
            panic!("pure state expected")
        };
        // Interaction picture → lab: c_k^lab = e^{−iE_k T} c_k.
        for (row, energy) in [0.0, w0].into_iter().enumerate() {
            u[row][col] = c[row] * C64::from_polar(1.0, -energy * period);
        }
    }
    // Eigenvalues of the 2×2 unitary: λ = tr/2 ± √(tr²/4 − det).
    let tr = u[0][0] + u[1][1];
    let det = u[0][0] * u[1][1] - u[0][1] * u[1][0];
    let root = (tr * tr * 0.25 - det).sqrt();
    let (l1, l2) = (tr * 0.5 + root, tr * 0.5 - root);
    // In rad/s: per period the splitting would carry a factor 1/ω that moves its minimum.
    (l1 * l2.conj()).arg().abs() / period
}

/// The resonance of a linearly polarised drive, located as the minimum of the Floquet
/// quasi-energy splitting over the drive frequency, sits at ω₀ + Ω²/(4ω₀) (Bloch & Siegert, Phys.
/// Rev. 57, 522 (1940)). With Ω/ω₀ = 0.05 the next order, O(Ω⁴/ω₀³), is a relative correction
/// ~(Ω/ω₀)² ≈ 2.5e-3 of the shift; the golden-section search resolves the minimum to ~1e-3 of
/// the shift at rtol 1e-13; tolerance 2 % of the shift. The rotating-wave splitting would be
/// minimal at Δ = 0, a miss of 100 %.
#[test]
fn bloch_siegert_shift() {
    let w0 = TAU * 100e6;
    let omega = 0.05 * w0;
    let shift = omega * omega / (4.0 * w0);
    let found = golden_min(
        |d| floquet_splitting(w0, omega, d),
        -2.0 * shift,
        4.0 * shift,
        40,
    );
    let rel = (found - shift).abs() / shift;
    println!(
        "bloch-siegert: resonance at Δ = {:.6e} rad/s, Ω²/4ω0 = {shift:.6e}; relative error {rel:.2e} (tol 2e-2)",
        found
    );
    assert!(rel < 0.02, "found {found:e}, expected {shift:e}");
}

// ---------------------------------------------------------------------------------------------
// 5. Ramsey fringes and the AC Stark shift.

/// Ramsey's formula for two square pulses separated by a free time, over a scan of the detuning
/// across several fringes (Ramsey, Phys. Rev. 78, 695 (1950)); exact for the rotating-frame
/// Hamiltonian, so the tolerance 1e-11 is rounding of the eigen-propagation.
#[test]
fn ramsey_fringes_formula() {
    let omega = TAU * 1e6;
    let tau_p = 0.25 / 1e6; // π/2 pulses
    let free = 5e-6;
    let mut worst = 0.0f64;
    for k in 0..41 {
        let delta = TAU * (-0.8e6 + 0.04e6 * k as f64);
        let (atom, g, e, tr) = two_level(TAU * 9.2e9);
        let seq = Sequence::builder()
            .then(Pulse::new(0, square(tau_p)))
            .wait(free)
            .then(Pulse::new(0, square(tau_p)))
            .build()
            .unwrap();
        let p = Problem::new(
            atom.clone(),
            vec![drive(tr, delta, omega)],
            seq,
            State::level(&atom, g).unwrap(),
            vec![Observable::Population(e)],
        );
        let pe = solve(&p).unwrap().final_values()[0];
        let err = (pe - ramsey_pe(omega, delta, tau_p, free)).abs();
        assert!(err < 1e-11, "δ = {delta:e}: error {err:e}");
        worst = worst.max(err);
    }
    println!("ramsey formula: worst |ΔP| = {worst:.2e} (tol 1e-11)");
}

/// Phase φ₀ (rad) of the Ramsey fringe P_e(φ) = ½(1 + C cos(φ − φ₀)) in the phase φ of the second
/// π/2 pulse, on g–e of a ladder g–e–r, with an optional light-shift beam on e–r during the free
/// evolution. With resonant pulses and e shifted by s during a wait τ, φ₀ = sτ (derived from
/// H_eg = (Ω/2)e^{−iφ}: after the wait c_e ∝ −i e^{−isτ}, and the second pulse gives
/// P_e = ½(1 + cos(φ − sτ))).
fn ramsey_phase(beam: Option<(f64, f64)>, free: f64) -> f64 {
    let mut b = Atom::builder();
    let g = b.level("g", 0.0);
    let e = b.level("e", TAU * 6.8e9);
    let r = b.level("r", TAU * 400e12);
    // g–e is a π transition; e–r is Δm = +1 and is driven by σ⁺ light only, so neither beam
    // couples the other transition.
    let ge = b.transition(g, e);
    let er = b.transition_with_dipole(e, r, sigma_plus_dipole());
    let atom = b.build().unwrap();
    let omega = TAU * 1e6;
    let tau_p = 0.25 / 1e6;
    let (delta_l, omega_l) = beam.unwrap_or((TAU * 1e9, 0.0));
    let light = Field::new(
        "light-shift",
        Carrier::Detuning {
            transition: er,
            detuning: delta_l,
        },
        Strength::Rabi {
            transition: er,
            rabi: omega_l,
        },
    )
    .with_polarization(Polarization::sigma_plus());
    let fringe = |phase: f64| {
        let mut s = Sequence::builder();
        s.then(Pulse::new(0, square(tau_p)));
        s.at(tau_p, Pulse::new(1, square(free)));
        s.wait(free);
        s.then(Pulse::new(0, square(tau_p)).phase(phase));
        let p = Problem::new(
            atom.clone(),
            vec![drive(ge, 0.0, omega), light.clone()],
            s.build().unwrap(),
            State::level(&atom, g).unwrap(),
            vec![Observable::Population(e)],
        );
        let sol = solve(&p).unwrap();
        assert_eq!(
            sol.frame.with_fate(Fate::TimeDependent).count(),
            0,
            "cross-couplings must vanish by polarisation: {:?}",
            sol.frame
        );
        sol.final_values()[0]
    };
    let (c, s) = (2.0 * fringe(0.0) - 1.0, 2.0 * fringe(0.5 * PI) - 1.0);
    s.atan2(c)
}

/// A far-detuned beam on e–r shifts e (the lower level of its transition) by Ω²/(4Δ): up for a
/// blue beam, down for a red one (Grimm, Weidemüller & Ovchinnikov, Adv. At. Mol. Opt. Phys. 42,
/// 95 (2000); the sign of the dipole trap). A Ramsey sequence on g–e with the beam on during the
/// free evolution moves its fringe by exactly sτ, with that sign. Ω/Δ = 8e-3, so the next order
/// (−Ω⁴/(16Δ³), relative (Ω/2Δ)² = 1.6e-5) and the non-adiabatic switching (population
/// (Ω/2Δ)² left in r) are below the tolerance 1e-4 relative.
#[test]
fn ramsey_fringe_moves_by_the_light_shift() {
    let free = 10e-6;
    let bare = ramsey_phase(None, free);
    assert!(bare.abs() < 1e-10, "resonant Ramsey fringe phase {bare}");
    for sign in [1.0, -1.0] {
        let delta_l = sign * TAU * 1e9;
        let omega_l = TAU * 8e6;
        let s = omega_l * omega_l / (4.0 * delta_l);
        let phi = ramsey_phase(Some((delta_l, omega_l)), free);
        let measured = (phi - bare) / free;
        let rel = (measured - s).abs() / s.abs();
        println!(
            "light shift, Δ_L = {:+.0e}: fringe moved by {measured:.6e} rad/s, Ω²/4Δ = {s:.6e}, relative error {rel:.1e} (tol 1e-4)",
            delta_l
        );
        assert!(
            measured.signum() == sign,
            "wrong sign: {measured:e} for Δ = {delta_l:e}"
        );
        assert!(rel < 1e-4, "shift {measured:e}, expected {s:e}");
    }
}

// ---------------------------------------------------------------------------------------------
// 6. Area theorem.

/// On resonance the Bloch vector of a two-level atom rotates by the pulse area whatever the
/// envelope: area π inverts, 2π returns (McCall & Hahn, Phys. Rev. 183, 457 (1969)). Tolerance
/// 1e-8 on 1 − P_e (resp. P_e): errors of rtol 1e-11 integration are ~1e-12.
#[test]
fn area_theorem_for_many_shapes() {
    let d = 2e-6;
    let times: Vec<f64> = (0..=40).map(|k| d * k as f64 / 40.0).collect();
    let bump: Vec<f64> = times
        .iter()
        .map(|&t| (PI * t / d).sin().powf(1.5) * (1.0 + 0.3 * (5.0 * t / d).cos()).abs())
        .collect();
    let shapes: Vec<(&str, Envelope)> = vec![
        (
            "gaussian",
            Envelope::new(Shape::Gaussian { sigma: 0.25e-6 }, d).unwrap(),
        ),
        ("blackman", Envelope::new(Shape::Blackman, d).unwrap()),
        ("sin²", Envelope::new(Shape::SinSquared, d).unwrap()),
        (
            "sech",
            Envelope::new(Shape::Sech { width: 0.15e-6 }, d).unwrap(),
        ),
        ("tabulated", Envelope::tabulated(times, bump).unwrap()),
    ];
    let mut worst = 0.0f64;
    for (name, env) in shapes {
        for (area, target) in [(PI, 1.0), (2.0 * PI, 0.0)] {
            for method in [Method::Auto, Method::DormandPrince853, Method::Magnus4] {
                let (atom, g, e, tr) = two_level(TAU * 1e9);
                let seq = Sequence::builder()
                    .then(Pulse::new(0, env.clone()).area(area))
                    .build()
                    .unwrap();
                let mut p = Problem::new(
                    atom.clone(),
                    vec![drive(tr, 0.0, TAU * 1e6)],
                    seq,
                    State::level(&atom, g).unwrap(),
                    vec![Observable::Population(e)],
                );
                p.method = method;
                p.tolerance = Tolerance {
                    rtol: 1e-11,
                    atol: 1e-13,
                };
                let pe = solve(&p).unwrap().final_values()[0];
                let err = (pe - target).abs();
                assert!(
                    err < 1e-8,
                    "{name}, area {area}, {}: P_e = {pe}",
                    method.name()
                );
                worst = worst.max(err);
            }
        }
    }
    println!("area theorem: worst |ΔP_e| = {worst:.2e} (tol 1e-8)");
}

// ---------------------------------------------------------------------------------------------
// 7. STIRAP and the three-level fixture.

/// A resonant ladder g–e–r with π light on g–e and σ⁺ light on e–r (so each beam drives one
/// transition only), Gaussian pulses given as custom envelopes on [0, T] (untruncated shape,
/// centred at t_p and t_c): the model of `three_level.json`.
#[allow(clippy::too_many_arguments)] // the fixture's nine parameters, named as there
fn ladder_problem(
    omega_p0: f64,
    omega_c0: f64,
    delta_1: f64,
    delta_2: f64,
    sigma_p: f64,
    sigma_c: f64,
    t_p: f64,
    t_c: f64,
    t_final: f64,
) -> (Problem, [LevelId; 3]) {
    let mut b = Atom::builder();
    let g = b.level("g", 0.0);
    // Microwave-scale level energies: ω_field − ω_transition is then exact to ~1e-5 rad/s (see
    // `detunings_survive_optical_frequencies` in properties.rs for optical ones).
    let e = b.level("e", TAU * 6.8e9);
    let r = b.level("r", TAU * (6.8e9 + 9.2e9));
    let ge = b.transition(g, e);
    let er = b.transition_with_dipole(e, r, sigma_plus_dipole());
    let atom = b.build().unwrap();
    // Rotating frame: H_ee = −Δ_p, H_rr = −(Δ_p + Δ_c), so Δ_c = δ − Δ for the fixture's
    // H_rr = −δ.
    let pump = drive(ge, delta_1, omega_p0);
    let stokes = Field::new(
        "stokes",
        Carrier::Detuning {
            transition: er,
            detuning: delta_2 - delta_1,
        },
        Strength::Rabi {
            transition: er,
            rabi: omega_c0,
        },
    )
    .with_polarization(Polarization::sigma_plus());
    let gauss = |t0: f64, s: f64| {
        Envelope::new(
            Shape::custom(move |t| (-(t - t0) * (t - t0) / (2.0 * s * s)).exp()),
            t_final,
        )
        .unwrap()
    };
    let seq = Sequence::builder()
        .at(0.0, Pulse::new(0, gauss(t_p, sigma_p)))
        .at(0.0, Pulse::new(1, gauss(t_c, sigma_c)))
        .build()
        .unwrap();
    let p = Problem::new(
        atom.clone(),
        vec![pump, stokes],
        seq,
        State::level(&atom, g).unwrap(),
        vec![Observable::Population(r)],
    );
    (p, [g, e, r])
}

/// Counter-intuitive order (Stokes before pump) transfers g → r adiabatically, P_r → 1 as Ω₀σ
/// grows; intuitive order does not (Vitanov, Rangelov, Shore & Bergmann, Rev. Mod. Phys. 89,
/// 015006 (2017)). Equal Gaussians of rms width σ, delay 2σ, resonant. Thresholds: at Ω₀σ = 5
/// the transfer is visibly incomplete (P_r < 0.999); over the scan Ω₀σ ∈ [20, 40] counter-intuitive
/// P_r > 0.999 at every point, while intuitive order only makes Rabi-like oscillations whose P_r
/// drops below 0.5 somewhere in the same scan.
#[test]
fn stirap_counterintuitive_transfers() {
    let sigma = 1e-6;
    let delay = 2.0 * sigma;
    let t_final = 12.0 * sigma;
    let mid = 0.5 * t_final;
    let run = |a: f64, tp: f64, tc: f64| {
        let o0 = a / sigma;
        let (mut p, _) = ladder_problem(o0, o0, 0.0, 0.0, sigma, sigma, tp, tc, t_final);
        p.tolerance = Tolerance {
            rtol: 1e-9,
            atol: 1e-11,
        };
        solve(&p).unwrap().final_values()[0]
    };
    let (early, late) = (mid - 0.5 * delay, mid + 0.5 * delay);
    let weak = run(5.0, late, early);
    println!("stirap Ω0σ = 5: counter-intuitive P_r = {weak:.6}");
    assert!(weak < 0.999, "Ω0σ = 5 is not adiabatic yet, P_r = {weak}");
    let (mut worst_counter, mut worst_intuitive) = (1.0f64, 1.0f64);
    for k in 0..9 {
        let a = 20.0 + 2.5 * k as f64;
        let counter = run(a, late, early);
        let intuitive = run(a, early, late);
        worst_counter = worst_counter.min(counter);
        worst_intuitive = worst_intuitive.min(intuitive);
        println!(
            "stirap Ω0σ = {a}: counter-intuitive P_r = {counter:.7}, intuitive P_r = {intuitive:.4}"
        );
        assert!(counter > 0.999, "Ω0σ = {a}: P_r = {counter}");
    }
    assert!(
        worst_intuitive < 0.5,
        "intuitive order transferred robustly (min P_r {worst_intuitive})"
    );
    println!(
        "stirap: min counter-intuitive P_r over Ω0σ ∈ [20, 40] = {worst_counter:.7} (> 0.999); min intuitive {worst_intuitive:.3}"
    );
}

/// The three-level fixture (scipy DOP853, rtol 1e-12; runtime/tests/fixtures/README.md): every
/// ρ_ij = c_i c_j* at the 31 sample times and the final amplitudes (global phase included), by
/// DOP853 and Magnus4 at rtol 1e-12. Tolerance 1e-9 (the README's advice): the fixture's own
/// error is ≤ 2.1e-12, ours ~1e-11 over ~100 rad of phase.
#[test]
fn three_level_fixture() {
    let fx = fixture("three_level.json");
    let mut worst = 0.0f64;
    for case in fx["cases"].as_array().unwrap() {
        let q = &case["params"];
        let f = |k: &str| num(&q[k]);
        let (mut p, levels) = ladder_problem(
            f("omega_p0"),
            f("omega_c0"),
            f("delta_1"),
            f("delta_2"),
            f("sigma_p"),
            f("sigma_c"),
            f("t_p"),
            f("t_c"),
            f("t_final"),
        );
        let times = nums(&case["t_samples"]);
        let amps: Vec<Vec<C64>> = case["amplitudes"]["re"]
            .as_array()
            .unwrap()
            .iter()
            .zip(case["amplitudes"]["im"].as_array().unwrap())
            .map(|(re, im)| {
                nums(re)
                    .into_iter()
                    .zip(nums(im))
                    .map(|(a, b)| C64::new(a, b))
                    .collect()
            })
            .collect();
        p.observables = levels
            .iter()
            .flat_map(|&i| levels.iter().map(move |&j| Observable::Coherence(i, j)))
            .collect();
        p.samples = Samples::Times(times.clone());
        p.tolerance = tight();
        let final_amps = cvec(&case["final"]);
        for method in [Method::DormandPrince853, Method::Magnus4] {
            p.method = method;
            let sol = solve(&p).unwrap();
            let flat = flatten(&sol);
            let mut err = 0.0f64;
            for (k, c) in amps.iter().enumerate() {
                for i in 0..3 {
                    for j in 0..3 {
                        let rho = c[i] * c[j].conj();
                        let at = k * 18 + (i * 3 + j) * 2;
                        err = err.max((C64::new(flat[at], flat[at + 1]) - rho).norm());
                    }
                }
            }
            let State::Pure(c) = &sol.final_state else {
                panic!("pure state expected")
            };
            for (x, y) in c.iter().zip(&final_amps) {
                err = err.max((x - y).norm());
            }
            println!(
                "three-level fixture {} / {}: max error {err:.2e} (tol 1e-9)",
                case["label"],
                method.name()
            );
            assert!(err < 1e-9, "{} / {}: {err:e}", case["label"], method.name());
            worst = worst.max(err);
        }
    }
    println!("three-level fixture: worst {worst:.2e}");
}
