//! # fieldbook-runtime
//!
//! Coherent and open-system dynamics of N-level atoms in classical laser and microwave fields:
//! the physics and numerics behind Fieldbook's run-files. This crate does no I/O and knows nothing
//! of Markdown, TOML, HTML or the command line.
//!
//! The model is an [`atom::Atom`] (levels, dipole transitions, decay, dephasing), some
//! [`field::Field`]s and a [`sequence::Sequence`] of pulses. [`frame::build`] writes the
//! Hamiltonian in the exact interaction picture or in an automatic rotating frame;
//! [`solve::solve`] propagates a state and records [`observe::Observable`]s; [`sweep`] runs
//! parameter grids and ensemble averages in parallel. Units are SI throughout, and every
//! frequency is an angular frequency (rad/s).
//!
//! ```
//! use fieldbook_runtime::prelude::*;
//! use std::f64::consts::PI;
//!
//! // A resonant π pulse on a two-level atom inverts it.
//! let mut b = Atom::builder();
//! let g = b.level("g", 0.0);
//! let e = b.level("e", 2.0 * PI * 6.8e9);
//! let tr = b.transition(g, e);
//! let atom = b.build()?;
//! let rabi = 2.0 * PI * 50e3;
//! let field = Field::new("mw", Carrier::Detuning { transition: tr, detuning: 0.0 }, Strength::Rabi { transition: tr, rabi });
//! let pulse = Pulse::new(0, Envelope::new(Shape::Square, PI / rabi)?);
//! let seq = Sequence::builder().then(pulse).build()?;
//! let initial = State::level(&atom, g)?;
//! let sol = solve(&Problem::new(atom, vec![field], seq, initial, vec![Observable::Population(e)]))?;
//! assert!((sol.final_values()[0] - 1.0).abs() < 1e-12);
//! # Ok::<(), fieldbook_runtime::error::Error>(())
//! ```
#![deny(missing_docs)]
// Index loops below mirror the matrix formulas they implement (ρ_ij, H_kn); iterator chains
// would hide the indices the physics is written in.
#![allow(clippy::needless_range_loop)]

pub mod angular;
pub mod atom;
pub mod envelope;
pub mod error;
pub mod field;
pub mod frame;
pub mod hamiltonian;
pub mod linalg;
pub mod lindblad;
pub mod manifold;
pub mod observe;
pub mod ode;
pub mod sequence;
pub mod solve;
pub mod species;
pub mod state;
pub mod sweep;
pub mod zeeman;

/// The names most scenarios need.
pub mod prelude {
    pub use crate::atom::{Atom, AtomBuilder, LevelId, TransitionId};
    pub use crate::envelope::{Envelope, Shape};
    pub use crate::error::Error;
    pub use crate::field::{Carrier, Chirp, Field, Polarization, Strength};
    pub use crate::frame::{Fate, Frame, FrameReport};
    pub use crate::linalg::C64;
    pub use crate::observe::Observable;
    pub use crate::sequence::{Pulse, Sequence};
    pub use crate::solve::{
        Method, Prepared, Problem, Samples, ScanTable, Solution, SteadyPrepared, SteadyProblem,
        Tolerance, solve, steady_state,
    };
    pub use crate::state::State;
    pub use crate::sweep::{Axis, Ensemble, Grid, SweepOptions, run_grid};
}
