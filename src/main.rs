//! The `fieldbook` command line. For now it runs a built-in demonstration scenario through the
//! runtime; run-files arrive with the format.

use std::f64::consts::PI;
use std::process::ExitCode;

use fieldbook_runtime::prelude::*;

fn main() -> ExitCode {
    let args: Vec<String> = std::env::args().skip(1).collect();
    match args.first().map(String::as_str) {
        Some("demo") => match demo() {
            Ok(()) => ExitCode::SUCCESS,
            Err(e) => {
                eprintln!("error: {e}");
                ExitCode::from(3)
            }
        },
        Some("--version") => {
            println!("fieldbook {}", env!("CARGO_PKG_VERSION"));
            ExitCode::SUCCESS
        }
        _ => {
            eprintln!(
                "usage: fieldbook demo      run the built-in Rabi-chevron and STIRAP demonstration"
            );
            eprintln!("       fieldbook --version");
            ExitCode::from(2)
        }
    }
}

/// The microwave clock pair of the fictional Larkspur Hollow trap: a detuned π pulse, then
/// STIRAP across its Λ system.
fn demo() -> Result<(), Error> {
    let mut b = Atom::builder();
    let g = b.level("g", 0.0);
    let e = b.level("e", 2.0 * PI * 6.834e9);
    let tr = b.transition(g, e);
    let atom = b.build()?;
    let rabi = 2.0 * PI * 25e3;
    println!(
        "Rabi chevron, Ω = 2π × 25 kHz, π pulse of {:.2} µs",
        0.5e6 / 25e3
    );
    println!("{:>14} {:>12}", "Δ/2π (kHz)", "P(e)");
    for k in -4..=4 {
        let delta = 2.0 * PI * 10e3 * k as f64;
        let field = Field::new(
            "mw",
            Carrier::Detuning {
                transition: tr,
                detuning: delta,
            },
            Strength::Rabi {
                transition: tr,
                rabi,
            },
        );
        let seq = Sequence::builder()
            .then(Pulse::new(0, Envelope::new(Shape::Square, PI / rabi)?))
            .build()?;
        let sol = solve(&Problem::new(
            atom.clone(),
            vec![field],
            seq,
            State::level(&atom, g)?,
            vec![Observable::Population(e)],
        ))?;
        println!(
            "{:>14.1} {:>12.6}",
            delta / (2.0 * PI * 1e3),
            sol.final_values()[0]
        );
    }

    let mut b = Atom::builder();
    let g = b.level("g", 0.0);
    let r = b.level("r", 2.0 * PI * 6.834e9);
    let x = b.level("x", 2.0 * PI * 384.23e12);
    // The pump drives g → x with σ⁺ light and the Stokes beam r → x with σ⁻ light, so each beam
    // couples only its own leg of the Λ.
    let (z, d) = (
        C64::new(0.0, 0.0),
        C64::new(fieldbook_runtime::atom::E_A0, 0.0),
    );
    let p_tr = b.transition_with_dipole(g, x, [z, z, d]);
    let s_tr = b.transition_with_dipole(r, x, [d, z, z]);
    let atom = b.build()?;
    let omega = 2.0 * PI * 5e6;
    let sigma = 1e-6;
    let pump = Field::new(
        "pump",
        Carrier::Detuning {
            transition: p_tr,
            detuning: 0.0,
        },
        Strength::Rabi {
            transition: p_tr,
            rabi: omega,
        },
    )
    .with_polarization(Polarization::sigma_plus());
    let stokes = Field::new(
        "stokes",
        Carrier::Detuning {
            transition: s_tr,
            detuning: 0.0,
        },
        Strength::Rabi {
            transition: s_tr,
            rabi: omega,
        },
    )
    .with_polarization(Polarization::sigma_minus());
    let gauss = Envelope::new(Shape::Gaussian { sigma }, 10e-6)?;
    // Counter-intuitive order: the Stokes pulse peaks 1 µs before the pump.
    let seq = Sequence::builder()
        .at(0.0, Pulse::new(1, gauss.clone()))
        .at(1e-6, Pulse::new(0, gauss))
        .build()?;
    let sol = solve(&Problem::new(
        atom.clone(),
        vec![pump, stokes],
        seq,
        State::level(&atom, g)?,
        vec![Observable::Population(r), Observable::Population(x)],
    ))?;
    let v = sol.final_values();
    println!(
        "STIRAP g → r: P(r) = {:.6}, P(x) = {:.2e} ({}; {} steps, norm drift {:.1e})",
        v[0], v[1], sol.diagnostics.method, sol.diagnostics.steps, sol.diagnostics.norm_drift
    );
    for note in &sol.frame.notes {
        println!(
            "  frame: {} on {}: {:?} (rotation 2π × {:.4e} Hz)",
            note.field,
            note.transition,
            note.fate,
            note.rotation / (2.0 * PI)
        );
    }
    Ok(())
}
