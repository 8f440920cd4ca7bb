//! Frames: the exact interaction picture (full cos(ωt + φ) fields, no rotating-wave approximation)
//! and the automatic rotating frame derived from the coupling graph, with a report of every term.

use crate::atom::Atom;
use crate::error::Error;
use crate::field::{Carrier, Field};
use crate::hamiltonian::{DiagChirp, Hamiltonian, Term};
use crate::linalg::C64;
use crate::sequence::{Amplitude, Sequence};

/// Which frame to write the equations in.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Frame {
    /// Interaction picture with respect to the bare level energies: i ċ_k = Σ_n c_n e^{iω_kn t}
    /// ⟨k|V(t)|n⟩/ħ with the lab-frame coupling V(t) = −d·E(t) of the full field, co- and
    /// counter-rotating terms alike.
    Exact {
        /// Refuse when the estimated number of steps exceeds this.
        max_steps: f64,
    },
    /// Rotating frame from the coupling graph: co-rotating terms kept, counter-rotating terms
    /// dropped, couplings detuned by at most `cutoff` from their transition and left rotating at
    /// |ν| ≤ `cutoff` kept with their e^{−iνt}, the others dropped.
    Rotating {
        /// Largest residual rotation kept (rad/s); `f64::INFINITY` keeps all.
        cutoff: f64,
    },
}

impl Frame {
    /// The exact frame with the default step limit (5 × 10⁷ steps).
    pub fn exact() -> Self {
        Frame::Exact { max_steps: 5e7 }
    }
    /// The rotating frame keeping every co-rotating term.
    pub fn rotating() -> Self {
        Frame::Rotating {
            cutoff: f64::INFINITY,
        }
    }
}

/// What happened to one term when the frame was built.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Fate {
    /// Kept, constant apart from its envelope.
    Static,
    /// Kept with its residual rotation.
    TimeDependent,
    /// Dropped: counter-rotating (rotating-wave approximation).
    CounterRotating,
    /// Dropped: rotates faster than the cutoff.
    BeyondCutoff,
}

/// One line of the frame report.
#[derive(Clone, Debug, PartialEq)]
pub struct TermNote {
    /// Field name.
    pub field: String,
    /// Transition, as `lower -> upper`.
    pub transition: String,
    /// Residual rotation ν (rad/s) in the frame, at the declared carriers (for dropped terms:
    /// the rotation they would have had in this frame).
    pub rotation: f64,
    /// What was done with it.
    pub fate: Fate,
}

/// Every term considered when building the frame.
#[derive(Clone, Debug, PartialEq)]
pub struct FrameReport {
    /// The frame used.
    pub frame: Frame,
    /// One note per (field, transition, co- or counter-rotating part).
    pub notes: Vec<TermNote>,
}

impl FrameReport {
    /// Notes with the given fate.
    pub fn with_fate(&self, fate: Fate) -> impl Iterator<Item = &TermNote> {
        self.notes.iter().filter(move |n| n.fate == fate)
    }
}

/// A field–transition coupling before the frame is chosen.
struct Edge {
    field: usize,
    transition: usize,
    lower: usize,
    upper: usize,
    /// ω_field − ω_transition (rad/s).
    detuning: f64,
    /// Co-rotating Rabi frequency Ω = F·⟨u|d·ε|l⟩ (rad/s).
    omega: C64,
    /// Counter-rotating Rabi frequency Ω_cr = F*·⟨u|d·ε*|l⟩ (rad/s).
    omega_counter: C64,
}

/// ω_field − ω_transition without passing through the absolute carrier when the field is given
/// by its detuning: at optical frequencies ω ≈ 10¹⁵ rad/s has an ulp of ~0.1 rad/s, which would
/// otherwise round every detuning.
fn edge_detuning(atom: &Atom, field: &Field, omega: f64, transition: usize) -> Result<f64, Error> {
    Ok(match field.carrier() {
        Carrier::Detuning {
            transition: reference,
            detuning,
        } if *reference == transition => *detuning,
        Carrier::Detuning {
            transition: reference,
            detuning,
        } => {
            detuning
                + (atom.transition_frequency(*reference)?
                    - atom.transition_frequency(transition)?)
        }
        Carrier::Frequency(_) => omega - atom.transition_frequency(transition)?,
    })
}

/// Per-pulse amplitude factor: the pulse's scale, or the one its area demands.
fn pulse_factors(
    atom: &Atom,
    fields: &[Field],
    factors: &[C64],
    seq: &Sequence,
) -> Result<Vec<f64>, Error> {
    seq.pulses()
        .iter()
        .map(|p| {
            let f = &fields[p.field()];
            match p.amplitude() {
                Amplitude::Scale(s) => Ok(s),
                Amplitude::Area(area) => {
                    let tr = f.reference().ok_or_else(|| Error::NoReference { field: f.name().into() })?;
                    let d = atom.transition(tr)?.dipole();
                    let omega = (factors[p.field()] * f.polarization().absorbing(&d)).norm();
                    let integral = p.envelope().integral();
                    if omega == 0.0 || integral == 0.0 || !integral.is_finite() {
                        return Err(Error::Inconsistent {
                            what: format!("a pulse of field `{}`", f.name()),
                            hint: "its area cannot be set: the envelope integrates to zero or the field does not drive its reference transition".into(),
                        });
                    }
                    Ok(area / (omega * integral))
                }
            }
        })
        .collect()
}

/// Build H(t) for a scenario in a frame, with the report of every term.
pub fn build(
    atom: &Atom,
    fields: &[Field],
    seq: &Sequence,
    frame: Frame,
) -> Result<(Hamiltonian, FrameReport), Error> {
    let n = atom.n();
    for p in seq.pulses() {
        if p.field() >= fields.len() {
            return Err(Error::UnknownIndex {
                what: "a pulse".into(),
                kind: "field",
                index: p.field(),
                count: fields.len(),
            });
        }
    }
    let omegas: Vec<f64> = fields
        .iter()
        .map(|f| f.frequency(atom))
        .collect::<Result<_, _>>()?;
    let factors: Vec<C64> = fields
        .iter()
        .map(|f| f.field_factor(atom))
        .collect::<Result<_, _>>()?;
    let scale = pulse_factors(atom, fields, &factors, seq)?;
    let active: Vec<bool> = (0..fields.len())
        .map(|f| seq.pulses().iter().any(|p| p.field() == f))
        .collect();

    let mut edges = Vec::new();
    for (fi, f) in fields.iter().enumerate() {
        if !active[fi] {
            continue;
        }
        for (ti, tr) in atom.transitions().iter().enumerate() {
            let d = tr.dipole();
            let omega = factors[fi] * f.polarization().absorbing(&d);
            let omega_counter = factors[fi].conj() * f.polarization().counter(&d);
            if omega.norm() == 0.0 && omega_counter.norm() == 0.0 {
                continue;
            }
            edges.push(Edge {
                field: fi,
                transition: ti,
                lower: tr.lower(),
                upper: tr.upper(),
                detuning: edge_detuning(atom, f, omegas[fi], ti)?,
                omega,
                omega_counter,
            });
        }
    }

    let label = |e: &Edge| {
        (
            fields[e.field].name().to_string(),
            atom.transition_label(e.transition),
        )
    };
    let mut notes = Vec::new();
    let mut terms = Vec::new();
    let mut diag = vec![0.0; n];
    let mut diag_chirps = Vec::new();
    let energies: Vec<f64> = atom.levels().iter().map(|l| l.energy()).collect();

    let push_terms = |terms: &mut Vec<Term>,
                      e: &Edge,
                      amp: C64,
                      counter: bool,
                      nu: f64,
                      chirp: Vec<(usize, i32)>,
                      tuning: Vec<(usize, i32)>| {
        for (pi, p) in seq.pulses().iter().enumerate() {
            if p.field() != e.field {
                continue;
            }
            let phase = fields[e.field].phase() + p.extra_phase();
            let rot = if counter {
                C64::new(phase.cos(), phase.sin())
            } else {
                C64::new(phase.cos(), -phase.sin())
            };
            terms.push(Term {
                upper: e.upper,
                lower: e.lower,
                amp: amp * 0.5 * scale[pi] * rot,
                pulse: pi,
                nu,
                nu0: nu,
                chirp: chirp.clone(),
                tuning: tuning.clone(),
            });
        }
    };

    match frame {
        Frame::Exact { max_steps } => {
            for e in &edges {
                let (field, transition) = label(e);
                let w_ul = energies[e.upper] - energies[e.lower];
                let chirped = fields[e.field].chirp().is_some();
                if e.omega.norm() > 0.0 {
                    let nu = e.detuning;
                    push_terms(
                        &mut terms,
                        e,
                        e.omega,
                        false,
                        nu,
                        if chirped { vec![(e.field, 1)] } else { vec![] },
                        vec![(e.field, 1)],
                    );
                    notes.push(TermNote {
                        field: field.clone(),
                        transition: transition.clone(),
                        rotation: nu,
                        fate: if nu == 0.0 && !chirped {
                            Fate::Static
                        } else {
                            Fate::TimeDependent
                        },
                    });
                }
                if e.omega_counter.norm() > 0.0 {
                    let nu = -(omegas[e.field] + w_ul);
                    push_terms(
                        &mut terms,
                        e,
                        e.omega_counter,
                        true,
                        nu,
                        if chirped { vec![(e.field, -1)] } else { vec![] },
                        vec![(e.field, -1)],
                    );
                    notes.push(TermNote {
                        field,
                        transition,
                        rotation: nu,
                        fate: Fate::TimeDependent,
                    });
                }
            }
            let ham = assemble(
                n,
                diag,
                diag_chirps,
                terms,
                fields,
                seq,
                vec![vec![0; fields.len()]; n],
            );
            let rate = ham.fastest_rate();
            // Common practice: an explicit high-order RK step resolves a rotation in ~20 steps.
            let steps = 20.0 * rate * seq.duration() / (2.0 * std::f64::consts::PI);
            if steps > max_steps {
                return Err(Error::ExactFrameTooCostly {
                    steps,
                    fastest_hz: rate / (2.0 * std::f64::consts::PI),
                    duration: seq.duration(),
                    limit: max_steps,
                });
            }
            Ok((ham, FrameReport { frame, notes }))
        }
        Frame::Rotating { cutoff } => {
            if cutoff.is_nan() || cutoff < 0.0 {
                return Err(Error::OutOfRange {
                    what: "the rotating frame's cutoff".into(),
                    value: cutoff,
                    hint: "a non-negative angular frequency (rad/s), or infinity to keep every term",
                });
            }
            let nf = fields.len();
            // Frame phase of each level as an integer combination of field phases (ω_f t + χ_f).
            let mut mult = vec![vec![0i32; nf]; n];
            let mut comp: Vec<usize> = (0..n).collect();
            let mut order: Vec<usize> = (0..edges.len())
                .filter(|&i| edges[i].omega.norm() > 0.0)
                .collect();
            order.sort_by(|&a, &b| {
                edges[a]
                    .detuning
                    .abs()
                    .total_cmp(&edges[b].detuning.abs())
                    .then(a.cmp(&b))
            });
            // Spanning forest, most resonant couplings first: along a tree edge the frame follows
            // the field exactly, so its term is static.
            for &i in &order {
                let e = &edges[i];
                if e.detuning.abs() > cutoff || comp[e.lower] == comp[e.upper] {
                    continue;
                }
                let (cl, cu) = (comp[e.lower], comp[e.upper]);
                let shift: Vec<i32> = (0..nf)
                    .map(|f| mult[e.lower][f] + i32::from(f == e.field) - mult[e.upper][f])
                    .collect();
                // Along a tree edge H_uu − H_ll = ω_ul − ω_f = −Δ: build the diagonal from the
                // detunings themselves, never from differences of absolute frequencies.
                let dshift = diag[e.lower] - e.detuning - diag[e.upper];
                for k in 0..n {
                    if comp[k] == cu {
                        comp[k] = cl;
                        diag[k] += dshift;
                        for f in 0..nf {
                            mult[k][f] += shift[f];
                        }
                    }
                }
            }
            // Each group of coupled levels gets its lowest level as its zero of energy.
            for c in 0..n {
                let members: Vec<usize> = (0..n).filter(|&k| comp[k] == c).collect();
                if let Some(&low) = members
                    .iter()
                    .min_by(|&&a, &&b| energies[a].total_cmp(&energies[b]).then(a.cmp(&b)))
                {
                    let zero = diag[low];
                    for &k in &members {
                        diag[k] -= zero;
                    }
                }
            }
            for k in 0..n {
                for f in 0..nf {
                    if mult[k][f] != 0 && fields[f].chirp().is_some() {
                        diag_chirps.push(DiagChirp {
                            level: k,
                            field: f,
                            multiplicity: mult[k][f],
                        });
                    }
                }
            }
            for e in &edges {
                let (field, transition) = label(e);
                if e.omega.norm() > 0.0 {
                    // Residual: e^{i(θ_u − θ_l)} e^{−i(ω_f t + χ_f)} = e^{i m·(ωt + χ)}.
                    let m: Vec<i32> = (0..nf)
                        .map(|f| mult[e.upper][f] - mult[e.lower][f] - i32::from(f == e.field))
                        .collect();
                    // ν = −m·ω = (H_uu − H_ll) + Δ, from small numbers (see `edge_detuning`).
                    let nu = if m.iter().all(|&x| x == 0) {
                        0.0
                    } else if comp[e.upper] == comp[e.lower] {
                        diag[e.upper] - diag[e.lower] + e.detuning
                    } else {
                        -(0..nf).map(|f| m[f] as f64 * omegas[f]).sum::<f64>()
                    };
                    let chirp: Vec<(usize, i32)> = (0..nf)
                        .filter(|&f| m[f] != 0 && fields[f].chirp().is_some())
                        .map(|f| (f, -m[f]))
                        .collect();
                    let fate = if m.iter().all(|&x| x == 0) {
                        Fate::Static
                    } else if nu.abs() <= cutoff && e.detuning.abs() <= cutoff {
                        Fate::TimeDependent
                    } else {
                        Fate::BeyondCutoff
                    };
                    if fate != Fate::BeyondCutoff {
                        let tuning = (0..nf).filter(|&f| m[f] != 0).map(|f| (f, -m[f])).collect();
                        push_terms(&mut terms, e, e.omega, false, nu, chirp, tuning);
                    }
                    notes.push(TermNote {
                        field: field.clone(),
                        transition: transition.clone(),
                        rotation: nu,
                        fate,
                    });
                }
                if e.omega_counter.norm() > 0.0 {
                    // e^{+i(ω_f t)} e^{i(θ_u − θ_l)}: the counter-rotating part turns at
                    // −(ω_f + (n_u − n_l)·ω) in this frame (−2ω_f along a tree edge).
                    let frame: f64 = (0..nf)
                        .map(|f| (mult[e.upper][f] - mult[e.lower][f]) as f64 * omegas[f])
                        .sum();
                    notes.push(TermNote {
                        field,
                        transition,
                        rotation: -(omegas[e.field] + frame),
                        fate: Fate::CounterRotating,
                    });
                }
            }
            Ok((
                assemble(n, diag, diag_chirps, terms, fields, seq, mult),
                FrameReport { frame, notes },
            ))
        }
    }
}

fn assemble(
    n: usize,
    diag: Vec<f64>,
    diag_chirps: Vec<DiagChirp>,
    terms: Vec<Term>,
    fields: &[Field],
    seq: &Sequence,
    frame_phases: Vec<Vec<i32>>,
) -> Hamiltonian {
    Hamiltonian {
        n,
        frame_phases,
        diag0: diag.clone(),
        shifts: vec![0.0; fields.len()],
        diag,
        diag_chirps,
        terms,
        pulses: seq.pulses().to_vec(),
        chirps: fields.iter().map(|f| f.chirp().cloned()).collect(),
        duration: seq.duration(),
        breakpoints: seq.breakpoints(),
    }
}
