//! Solving a scenario: the problem description, method choice, the propagation segment by segment
//! (exact eigen-propagation, Runge–Kutta, commutator-free Magnus, Liouvillian exponential), the
//! steady state, and the diagnostics every result carries.

use std::cell::RefCell;
use std::sync::Arc;

use crate::atom::Atom;
use crate::error::Error;
use crate::field::Field;
use crate::frame::{self, Frame, FrameReport};
use crate::hamiltonian::{BatchScratch, Hamiltonian, Segment};
use crate::linalg::{C64, HermitianEigen, matmul, matmul_adjoint};
use crate::lindblad::{self, Dephasing, Dissipator, Jump};
use crate::observe::Observable;
use crate::ode::{self, RkConfig, Scheme};
use crate::sequence::{Pulse, Sequence};
use crate::state::State;

/// How to propagate.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[non_exhaustive]
pub enum Method {
    /// Choose per segment: exact propagation where H is constant (for an open atom the
    /// Liouvillian exponential, when at most 144 entries of ρ can become non-zero), Runge–Kutta
    /// elsewhere.
    Auto,
    /// Exact propagation of piecewise-constant Hamiltonians by Hermitian eigendecomposition
    /// (pure or closed mixed states).
    Eigen,
    /// Dormand–Prince 5(4), adaptive.
    DormandPrince54,
    /// Dormand–Prince 8(5,3) (DOP853), adaptive.
    DormandPrince853,
    /// Fourth-order commutator-free Magnus integrator with step doubling (pure states).
    Magnus4,
    /// exp(𝓛t) of the constant Liouvillian on each segment (density matrices).
    LiouvillianExp,
}

impl Method {
    /// Short name used in diagnostics.
    pub fn name(self) -> &'static str {
        match self {
            Method::Auto => "auto",
            Method::Eigen => "eigen",
            Method::DormandPrince54 => "dp54",
            Method::DormandPrince853 => "dop853",
            Method::Magnus4 => "magnus4",
            Method::LiouvillianExp => "liouvillian-exp",
        }
    }
}

/// Error tolerances of the adaptive methods.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Tolerance {
    /// Relative tolerance.
    pub rtol: f64,
    /// Absolute tolerance (on amplitudes or density-matrix entries).
    pub atol: f64,
}

impl Default for Tolerance {
    fn default() -> Self {
        Self {
            rtol: 1e-8,
            atol: 1e-10,
        }
    }
}

/// When to record observables.
#[derive(Clone, Debug, PartialEq)]
pub enum Samples {
    /// At the end of the sequence only.
    Final,
    /// At these times (s), sorted, within [0, duration].
    Times(Vec<f64>),
    /// At `n` equally spaced times from 0 to the end (n ≥ 2).
    Uniform(usize),
}

/// Everything needed to evolve one scenario.
#[derive(Clone, Debug)]
pub struct Problem {
    /// The atom.
    pub atom: Atom,
    /// The fields; pulses refer to them by index.
    pub fields: Vec<Field>,
    /// The pulse sequence.
    pub sequence: Sequence,
    /// The frame.
    pub frame: Frame,
    /// The initial state.
    pub initial: State,
    /// What to record.
    pub observables: Vec<Observable>,
    /// When to record it.
    pub samples: Samples,
    /// The method.
    pub method: Method,
    /// Tolerances of adaptive methods.
    pub tolerance: Tolerance,
    /// Step limit of adaptive methods (per solve).
    pub max_steps: u64,
}

impl Problem {
    /// A problem in the rotating frame, method auto, default tolerances, final sample only.
    pub fn new(
        atom: Atom,
        fields: Vec<Field>,
        sequence: Sequence,
        initial: State,
        observables: Vec<Observable>,
    ) -> Self {
        Self {
            atom,
            fields,
            sequence,
            frame: Frame::rotating(),
            initial,
            observables,
            samples: Samples::Final,
            method: Method::Auto,
            tolerance: Tolerance::default(),
            max_steps: 10_000_000,
        }
    }
}

/// One recorded observable over the sample times.
#[derive(Clone, Debug, PartialEq)]
pub struct Series {
    /// Label, e.g. `population(e)`.
    pub label: String,
    /// Real components per sample.
    pub width: usize,
    /// `width` values per sample, sample-major.
    pub values: Vec<f64>,
}

/// How a result was computed and how far it can be trusted.
#[derive(Clone, Debug, PartialEq)]
pub struct Diagnostics {
    /// The method(s) actually used, e.g. `eigen` or `eigen+dop853`.
    pub method: String,
    /// Why, when chosen automatically.
    pub reason: String,
    /// Relative tolerance of adaptive steps (0 when none were taken).
    pub rtol: f64,
    /// Absolute tolerance of adaptive steps.
    pub atol: f64,
    /// Accepted steps of adaptive methods (when any ran), else the number of exactly
    /// propagated segments.
    pub steps: u64,
    /// Rejected steps.
    pub rejected: u64,
    /// Hamiltonian or right-hand-side evaluations.
    pub evaluations: u64,
    /// Worst |norm − 1| (pure) or |Tr ρ − 1| (mixed) seen at the samples and the end.
    pub norm_drift: f64,
}

/// The outcome of [`solve`].
#[derive(Clone, Debug)]
pub struct Solution {
    /// Sample times (s).
    pub times: Vec<f64>,
    /// One series per observable, in the problem's order.
    pub series: Vec<Series>,
    /// The state at the end of the sequence.
    pub final_state: State,
    /// Method and accuracy figures.
    pub diagnostics: Diagnostics,
    /// Every term of the frame and what was done with it (shared by every run of a
    /// [`Prepared`] problem).
    pub frame: Arc<FrameReport>,
}

impl Solution {
    /// The final values of every observable, concatenated.
    pub fn final_values(&self) -> Vec<f64> {
        let k = self.times.len();
        self.series
            .iter()
            .flat_map(|s| s.values[(k - 1) * s.width..k * s.width].iter().copied())
            .collect()
    }
}

/// A problem with its frame built and checked, ready to run many times (e.g. across a
/// detuning sweep with [`Prepared::retune`]).
///
/// Cloning is cheap: the parts a retuning never changes (atom, frame report, observables, sample
/// times) are shared.
#[derive(Clone, Debug)]
pub struct Prepared {
    atom: Arc<Atom>,
    ham: Hamiltonian,
    report: Arc<FrameReport>,
    dissipator: Option<Dissipator>,
    initial: State,
    observables: Arc<[Observable]>,
    samples: Arc<[f64]>,
    method: Method,
    tolerance: Tolerance,
    max_steps: u64,
}

/// The dissipator of an atom plus the laser-linewidth dephasing of the fields in this frame;
/// `None` when there is no dissipation at all.
fn dissipator(
    atom: &Atom,
    fields: &[Field],
    ham: &Hamiltonian,
    frame: Frame,
    active: &[Pulse],
) -> Result<Option<Dissipator>, Error> {
    let jumps: Vec<Jump> = atom
        .decays()
        .iter()
        .filter(|d| d.rate > 0.0)
        .map(|d| Jump {
            from: d.from,
            to: d.to,
            rate: d.rate,
        })
        .collect();
    let dephasing: Vec<Dephasing> = atom
        .dephasing()
        .iter()
        .filter(|d| d.rate > 0.0)
        .map(|d| Dephasing {
            level: d.level,
            rate: d.rate,
        })
        .collect();
    let mut noise = Vec::new();
    for (fi, f) in fields.iter().enumerate() {
        if f.linewidth() == 0.0 || !active.iter().any(|p| p.field() == fi) {
            continue;
        }
        if !f.linewidth().is_finite() || f.linewidth() < 0.0 {
            return Err(Error::OutOfRange {
                what: format!("the linewidth of field `{}`", f.name()),
                value: f.linewidth(),
                hint: "a finite, non-negative FWHM in rad/s",
            });
        }
        if !matches!(frame, Frame::Rotating { .. }) {
            return Err(Error::MethodUnsuitable {
                method: "exact frame",
                hint: format!(
                    "field `{}` has a linewidth, which is modelled as phase diffusion in the rotating frame; use the rotating frame",
                    f.name()
                ),
            });
        }
        let weights: Vec<f64> = ham
            .frame_phases()
            .iter()
            .map(|row| row[fi] as f64)
            .collect();
        noise.push(lindblad::PhaseNoise {
            rate: f.linewidth(),
            weights,
        });
    }
    if jumps.is_empty() && dephasing.is_empty() && noise.is_empty() {
        return Ok(None);
    }
    Ok(Some(
        Dissipator::new(atom.n(), jumps, dephasing)?.with_phase_noise(noise)?,
    ))
}

impl Prepared {
    /// Build the frame, the dissipator and the sample list; check every input.
    pub fn new(p: &Problem) -> Result<Self, Error> {
        let n = p.atom.n();
        if p.initial.n() != n || matches!(&p.initial, State::Mixed(r) if r.len() != n * n) {
            return Err(Error::Shape {
                what: "the initial state",
                expected: n,
                got: p.initial.n(),
            });
        }
        let (rtol, atol) = (p.tolerance.rtol, p.tolerance.atol);
        if !(rtol.is_finite() && rtol > 0.0 && rtol < 1.0 && atol.is_finite() && atol > 0.0) {
            return Err(Error::OutOfRange {
                what: "a solver tolerance".into(),
                value: if rtol.is_finite() && rtol > 0.0 && rtol < 1.0 {
                    atol
                } else {
                    rtol
                },
                hint: "0 < rtol < 1 and atol > 0",
            });
        }
        let observables = p
            .observables
            .iter()
            .map(|o| o.checked(&p.atom))
            .collect::<Result<Vec<_>, _>>()?;
        let (ham, report) = frame::build(&p.atom, &p.fields, &p.sequence, p.frame)?;
        let dissipator = dissipator(&p.atom, &p.fields, &ham, p.frame, p.sequence.pulses())?;
        let t_end = p.sequence.duration();
        let samples = match &p.samples {
            Samples::Final => vec![t_end],
            Samples::Uniform(k) => {
                if *k < 2 {
                    return Err(Error::OutOfRange {
                        what: "the number of samples".into(),
                        value: *k as f64,
                        hint: "at least 2 (start and end)",
                    });
                }
                // t_end·i/(k−1) can round one ulp past t_end (10 × 1e-6 · 200 / 200 does),
                // which would leave the last sample outside the last segment.
                (0..*k)
                    .map(|i| (t_end * i as f64 / (*k - 1) as f64).min(t_end))
                    .collect()
            }
            Samples::Times(ts) => {
                if ts.is_empty() {
                    return Err(Error::OutOfRange {
                        what: "the number of samples".into(),
                        value: 0.0,
                        hint: "give at least one sample time",
                    });
                }
                for (i, &t) in ts.iter().enumerate() {
                    if !t.is_finite() || t < 0.0 || t > t_end * (1.0 + 1e-12) {
                        return Err(Error::OutOfRange {
                            what: format!("sample time #{i}"),
                            value: t,
                            hint: "sample times lie within the sequence, from 0 to its end",
                        });
                    }
                    if i > 0 && t < ts[i - 1] {
                        return Err(Error::OutOfRange {
                            what: format!("sample time #{i}"),
                            value: t,
                            hint: "sample times must be sorted in increasing order",
                        });
                    }
                }
                ts.iter().map(|&t| t.min(t_end)).collect()
            }
        };
        Ok(Self {
            atom: Arc::new(p.atom.clone()),
            ham,
            report: Arc::new(report),
            dissipator,
            initial: p.initial.clone(),
            observables: observables.into(),
            samples: samples.into(),
            method: p.method,
            tolerance: p.tolerance,
            max_steps: p.max_steps,
        })
    }

    /// A problem whose Hamiltonian is given directly (e.g. [`Hamiltonian::constant`]); the atom
    /// supplies the level count, decays and dephasing. The frame report is empty.
    #[allow(clippy::too_many_arguments)] // mirrors the fields of `Problem`
    pub fn with_hamiltonian(
        atom: Atom,
        ham: Hamiltonian,
        initial: State,
        observables: Vec<Observable>,
        samples: Samples,
        method: Method,
        tolerance: Tolerance,
        max_steps: u64,
    ) -> Result<Self, Error> {
        if ham.n() != atom.n() {
            return Err(Error::Shape {
                what: "the Hamiltonian's dimension",
                expected: atom.n(),
                got: ham.n(),
            });
        }
        let seq = Sequence::builder().wait(ham.duration()).build()?;
        let mut p = Problem::new(atom, vec![], seq, initial, observables);
        p.samples = samples;
        p.method = method;
        p.tolerance = tolerance;
        p.max_steps = max_steps;
        let mut prepared = Self::new(&p)?;
        prepared.ham = ham;
        Ok(prepared)
    }

    /// Final observable values with field `field` retuned by each of `shifts` (rad/s), in
    /// parallel over fixed chunks (so the result does not depend on the thread count).
    ///
    /// Pure-state problems integrate each chunk as one stacked system whose error control
    /// holds every point to the tolerance on its own (the norm is the worst point's), sharing
    /// envelope evaluations and steps; others run point by point.
    pub fn scan(&self, field: usize, shifts: &[f64]) -> Result<ScanTable, Error> {
        check_field(field, self.ham.shifts.len())?;
        let width = self.observables.iter().map(Observable::width).sum();
        let density = self.is_density();
        let batchable = matches!(
            self.method,
            Method::Auto | Method::DormandPrince54 | Method::DormandPrince853
        );
        if density || !batchable {
            return scan_chunks(self, shifts, SCAN_CHUNK, width, |p, s, out| {
                p.retune(field, s);
                out.extend(p.run_final()?);
                Ok(())
            });
        }
        use rayon::prelude::*;
        let chunks: Vec<Result<Vec<f64>, Error>> = shifts
            .par_chunks(SCAN_CHUNK)
            .map(|c| self.run_final_batch(field, c))
            .collect();
        let mut values = Vec::with_capacity(shifts.len() * width);
        for c in chunks {
            values.extend(c?);
        }
        Ok(ScanTable { width, values })
    }

    /// Final observables of K pure-state copies with `field` retuned to each shift.
    fn run_final_batch(&self, field: usize, shifts: &[f64]) -> Result<Vec<f64>, Error> {
        let n = self.atom.n();
        let k = shifts.len();
        let State::Pure(c0) = &self.initial else {
            return Err(Error::MethodUnsuitable {
                method: "scan",
                hint: "stacked scans take pure states".into(),
            });
        };
        // Level-major interleaving: y[j·K + c] is amplitude j of copy c.
        let mut y: Vec<C64> = c0.iter().flat_map(|&a| std::iter::repeat_n(a, k)).collect();
        let mut copy = vec![C64::new(0.0, 0.0); n];
        let mut copies: Option<Vec<Hamiltonian>> = None;
        let tunes = self.ham.tunes_rotation(field);
        let cfg = RkConfig {
            rtol: self.tolerance.rtol,
            atol: self.tolerance.atol,
            max_steps: self.max_steps,
            blocks: k,
            ..RkConfig::default()
        };
        let mut h_init = None;
        for w in self.ham.breakpoints().windows(2) {
            let (a, b) = (w[0], w[1]);
            if b <= a {
                continue;
            }
            let constant = self.ham.is_constant_on(a, b) && !tunes;
            match self.segment_method(constant, false, false)? {
                Method::Eigen => {
                    let hams = copies.get_or_insert_with(|| {
                        shifts
                            .iter()
                            .map(|&s| {
                                let mut h = self.ham.clone();
                                h.retune(field, s);
                                h
                            })
                            .collect()
                    });
                    for (c, h) in hams.iter().enumerate() {
                        for j in 0..n {
                            copy[j] = y[j * k + c];
                        }
                        eigen_pure(h, a, b, &mut copy, &[], |_, _, _| {})?;
                        for j in 0..n {
                            y[j * k + c] = copy[j];
                        }
                    }
                }
                m => {
                    let scheme = if m == Method::DormandPrince54 {
                        Scheme::DormandPrince54
                    } else {
                        Scheme::DormandPrince853
                    };
                    let sys = BatchSystem {
                        ham: &self.ham,
                        seg: self.ham.segment(a, b),
                        field,
                        shifts,
                        scratch: RefCell::new(BatchScratch::default()),
                    };
                    let cfg = RkConfig {
                        h_init,
                        h_max: b - a,
                        ..cfg.clone()
                    };
                    let s =
                        ode::integrate(scheme, &sys, a, b, &mut y, &[], &cfg, &mut |_, _, _| {})?;
                    h_init = Some(s.last_h);
                }
            }
        }
        let mut out = Vec::with_capacity(
            k * self
                .observables
                .iter()
                .map(Observable::width)
                .sum::<usize>(),
        );
        for c in 0..k {
            for j in 0..n {
                copy[j] = y[j * k + c];
            }
            for o in self.observables.iter() {
                o.evaluate_pure(&self.atom, &copy, &mut out);
            }
        }
        Ok(out)
    }

    /// Set a field's carrier to its declared value plus `shift` (rad/s) (see
    /// [`Hamiltonian::retune`]).
    pub fn retune(&mut self, field: usize, shift: f64) {
        self.ham.retune(field, shift);
    }

    /// The Hamiltonian in the chosen frame.
    pub fn hamiltonian(&self) -> &Hamiltonian {
        &self.ham
    }

    /// Run and keep every sample.
    pub fn run(&self) -> Result<Solution, Error> {
        let mut rec = Recorder::new(&self.atom, &self.observables, self.samples.len());
        let (final_state, diagnostics) = self.propagate(&mut rec)?;
        let series = self
            .observables
            .iter()
            .zip(rec.values)
            .map(|(o, values)| Series {
                label: o.label(&self.atom),
                width: o.width(),
                values,
            })
            .collect();
        Ok(Solution {
            times: self.samples.to_vec(),
            series,
            final_state,
            diagnostics,
            frame: self.report.clone(),
        })
    }

    /// Run and return only the final values of the observables (what a large sweep keeps).
    pub fn run_final(&self) -> Result<Vec<f64>, Error> {
        let mut rec = Recorder::final_only(&self.atom, &self.observables);
        let (state, _) = self.propagate(&mut rec)?;
        let mut out = Vec::new();
        for o in self.observables.iter() {
            o.evaluate(&self.atom, &state, &mut out);
        }
        Ok(out)
    }

    fn propagate(&self, rec: &mut Recorder) -> Result<(State, Diagnostics), Error> {
        let density = self.is_density();
        let n = self.atom.n();
        let mut stats = Stats::default();
        let cfg = RkConfig {
            rtol: self.tolerance.rtol,
            atol: self.tolerance.atol,
            max_steps: self.max_steps,
            ..RkConfig::default()
        };
        let mut y = match &self.initial {
            State::Pure(c) if !density => c.clone(),
            s => s.to_density(),
        };
        let bps = self.ham.breakpoints();
        let mut next = 0; // next sample index
        while next < self.samples.len() && self.samples[next] <= bps[0] {
            rec.record(next, &y, density);
            next += 1;
        }
        let mut h_init = None;
        for w in bps.windows(2) {
            let (a, b) = (w[0], w[1]);
            if b <= a {
                continue;
            }
            let first = next;
            while next < self.samples.len() && self.samples[next] <= b {
                next += 1;
            }
            let samples = &self.samples[first..next];
            let constant = self.ham.is_constant_on(a, b);
            let small = density && constant && self.exp_is_small(a, b, &y)?;
            let method = self.segment_method(constant, density, small)?;
            stats.used(method);
            let mut on_sample =
                |i: usize, _t: f64, state: &[C64]| rec.record(first + i, state, density);
            match method {
                // Called with a closure of its own so the per-sample recording inlines.
                Method::Eigen if !density => {
                    eigen_pure(&self.ham, a, b, &mut y, samples, |i, _, state| {
                        rec.record(first + i, state, false)
                    })?
                }
                Method::Eigen => eigen_mixed(&self.ham, a, b, &mut y, samples, &mut on_sample)?,
                Method::LiouvillianExp => {
                    let d = self
                        .dissipator
                        .clone()
                        .unwrap_or(Dissipator::new(n, vec![], vec![])?);
                    liouvillian_exp(&self.ham, &d, a, b, &mut y, samples, &mut on_sample)?
                }
                Method::Magnus4 => {
                    let s = magnus4(
                        &self.ham,
                        a,
                        b,
                        &mut y,
                        samples,
                        &self.tolerance,
                        self.max_steps,
                        &mut h_init,
                        &mut on_sample,
                    )?;
                    stats.add(s.0, s.1, s.2);
                }
                Method::DormandPrince54 | Method::DormandPrince853 | Method::Auto => {
                    let scheme = if method == Method::DormandPrince54 {
                        Scheme::DormandPrince54
                    } else {
                        Scheme::DormandPrince853
                    };
                    let cfg = RkConfig {
                        h_init,
                        h_max: b - a,
                        ..cfg.clone()
                    };
                    let s = if density {
                        let sys = LindbladSystem::new(&self.ham, a, b, self.dissipator.as_ref());
                        ode::integrate(scheme, &sys, a, b, &mut y, samples, &cfg, &mut on_sample)
                    } else {
                        ode::integrate(
                            scheme,
                            &SchrodingerSystem {
                                ham: &self.ham,
                                seg: self.ham.segment(a, b),
                            },
                            a,
                            b,
                            &mut y,
                            samples,
                            &cfg,
                            &mut on_sample,
                        )
                    }?;
                    h_init = Some(s.last_h);
                    stats.add(s.steps, s.rejected, s.rhs_evals);
                }
            }
            stats.segments += 1;
            if y.iter().any(|z| !z.re.is_finite() || !z.im.is_finite()) {
                return Err(Error::NonFinite {
                    what: format!("the state at t = {b:e} s"),
                });
            }
        }
        let state = if density {
            State::Mixed(y)
        } else {
            State::Pure(y)
        };
        let drift = rec.drift.max((state.norm() - 1.0).abs());
        let diagnostics = Diagnostics {
            method: stats.names.join("+"),
            reason: self.reason(density),
            rtol: if stats.adaptive {
                self.tolerance.rtol
            } else {
                0.0
            },
            atol: if stats.adaptive {
                self.tolerance.atol
            } else {
                0.0
            },
            steps: if stats.adaptive {
                stats.steps
            } else {
                stats.segments
            },
            rejected: stats.rejected,
            evaluations: stats.evaluations,
            norm_drift: drift,
        };
        Ok((state, diagnostics))
    }

    /// Whether the state must be a density matrix: dissipation, a mixed start, or a method that
    /// only propagates density matrices.
    fn is_density(&self) -> bool {
        self.dissipator.is_some()
            || matches!(self.initial, State::Mixed(_))
            || self.method == Method::LiouvillianExp
    }

    fn reason(&self, density: bool) -> String {
        if self.method != Method::Auto {
            return format!("{} as requested", self.method.name());
        }
        let kind = if density {
            "density matrix (decay, dephasing or a mixed start)"
        } else {
            "pure state"
        };
        let exact = if density && self.dissipator.is_some() {
            "the Liouvillian exponential on constant segments where at most 144 entries of ρ are reachable"
        } else {
            "exact propagation on constant segments"
        };
        format!(
            "auto: {kind}; {exact}, {} elsewhere",
            self.adaptive_scheme().name()
        )
    }

    fn adaptive_scheme(&self) -> Method {
        if self.tolerance.rtol < 1e-6 {
            Method::DormandPrince853
        } else {
            Method::DormandPrince54
        }
    }

    /// Whether `Auto` should exponentiate the Liouvillian on the constant segment (a, b) of an
    /// open system starting from `rho`: when the part of vec(ρ) it can reach
    /// ([`lindblad::reachable`]) has at most [`AUTO_EXP_DIM`] entries.
    fn exp_is_small(&self, a: f64, b: f64, rho: &[C64]) -> Result<bool, Error> {
        let (Method::Auto, Some(d)) = (self.method, &self.dissipator) else {
            return Ok(false);
        };
        let n = self.atom.n();
        if n * n <= AUTO_EXP_DIM {
            return Ok(true);
        }
        let mut h = vec![C64::new(0.0, 0.0); n * n];
        self.ham.fill(0.5 * (a + b), &mut h);
        Ok(lindblad::reachable(n, &h, d, rho)?.len() <= AUTO_EXP_DIM)
    }

    /// The method for one segment; `small_exp` is [`Prepared::exp_is_small`]'s verdict.
    fn segment_method(
        &self,
        constant: bool,
        density: bool,
        small_exp: bool,
    ) -> Result<Method, Error> {
        let open = self.dissipator.is_some();
        let m = match self.method {
            Method::Auto => match (constant, density, open) {
                (true, false, _) | (true, true, false) => Method::Eigen,
                (true, true, true) if small_exp => Method::LiouvillianExp,
                _ => self.adaptive_scheme(),
            },
            Method::Eigen => {
                if !constant {
                    return Err(Error::MethodUnsuitable { method: "eigen", hint: "the Hamiltonian changes within a segment (shaped pulse, chirp or rotating term); use auto, dop853 or magnus4".into() });
                }
                if open {
                    return Err(Error::MethodUnsuitable {
                        method: "eigen",
                        hint: "the atom decays or dephases; use liouvillian-exp or auto".into(),
                    });
                }
                Method::Eigen
            }
            Method::LiouvillianExp => {
                if !constant {
                    return Err(Error::MethodUnsuitable {
                        method: "liouvillian-exp",
                        hint: "the Hamiltonian changes within a segment; use auto or dop853".into(),
                    });
                }
                Method::LiouvillianExp
            }
            Method::Magnus4 => {
                if density {
                    return Err(Error::MethodUnsuitable { method: "magnus4", hint: "it propagates pure states only; with decay or a mixed start use auto or dop853".into() });
                }
                Method::Magnus4
            }
            m => m,
        };
        Ok(m)
    }
}

/// The result of a scan: one row of observable values per point, stored flat.
#[derive(Clone, Debug, PartialEq)]
pub struct ScanTable {
    width: usize,
    values: Vec<f64>,
}

impl ScanTable {
    /// Values per point (the observables' widths summed).
    pub fn width(&self) -> usize {
        self.width
    }
    /// Number of points.
    pub fn len(&self) -> usize {
        self.values.len().checked_div(self.width).unwrap_or(0)
    }
    /// Whether the scan had no points.
    pub fn is_empty(&self) -> bool {
        self.values.is_empty()
    }
    /// The values of point `i` (panics when `i ≥ len()`, like slice indexing).
    pub fn row(&self, i: usize) -> &[f64] {
        &self.values[i * self.width..(i + 1) * self.width]
    }
    /// All values, point-major.
    pub fn values(&self) -> &[f64] {
        &self.values
    }
}

/// Largest reachable part of vec(ρ) (entries) for which `Auto` exponentiates the Liouvillian of
/// a constant segment rather than integrating it: 12², so every model of up to 12 levels
/// qualifies, as before reachability was taken into account, and larger ones do when a
/// conserved quantity confines ρ to a small block (the exponential then costs no more than a
/// 12-level one, ~15 products of 144 × 144 matrices, whatever the segment's length).
const AUTO_EXP_DIM: usize = 144;

/// Points per parallel task of a scan: fixed, so results never depend on the thread count.
const SCAN_CHUNK: usize = 64;
/// Points per parallel task of a steady-state scan: each point is a cheap linear solve, so the
/// chunks are larger to amortise the per-task clone.
const STEADY_SCAN_CHUNK: usize = 256;

/// A scan must name one of the problem's fields.
fn check_field(field: usize, count: usize) -> Result<(), Error> {
    if field < count {
        Ok(())
    } else {
        Err(Error::UnknownIndex {
            what: "a scan".into(),
            kind: "field",
            index: field,
            count,
        })
    }
}

/// Map `f` over `shifts` with one clone of `base` per fixed-size chunk, in parallel; `f` appends
/// each point's `width` values to the chunk's buffer.
fn scan_chunks<P: Clone + Sync + Send>(
    base: &P,
    shifts: &[f64],
    chunk: usize,
    width: usize,
    f: impl Fn(&mut P, f64, &mut Vec<f64>) -> Result<(), Error> + Sync,
) -> Result<ScanTable, Error> {
    use rayon::prelude::*;
    let chunks: Vec<Result<Vec<f64>, Error>> = shifts
        .par_chunks(chunk)
        .map(|chunk| {
            let mut p = base.clone();
            let mut out = Vec::with_capacity(chunk.len() * width);
            for &s in chunk {
                f(&mut p, s, &mut out)?;
            }
            Ok(out)
        })
        .collect();
    let mut values = Vec::with_capacity(shifts.len() * width);
    for c in chunks {
        values.extend(c?);
    }
    Ok(ScanTable { width, values })
}

/// Evolve a problem and record its observables.
pub fn solve(p: &Problem) -> Result<Solution, Error> {
    Prepared::new(p)?.run()
}

#[derive(Default)]
struct Stats {
    names: Vec<&'static str>,
    adaptive: bool,
    steps: u64,
    rejected: u64,
    evaluations: u64,
    segments: u64,
}

impl Stats {
    fn used(&mut self, m: Method) {
        if !self.names.contains(&m.name()) {
            self.names.push(m.name());
        }
    }
    fn add(&mut self, steps: u64, rejected: u64, evals: u64) {
        self.adaptive = true;
        self.steps += steps;
        self.rejected += rejected;
        self.evaluations += evals;
    }
}

/// Collects observable values at sample indices.
struct Recorder<'a> {
    atom: &'a Atom,
    observables: &'a [Observable],
    values: Vec<Vec<f64>>,
    keep: bool,
    drift: f64,
}

impl<'a> Recorder<'a> {
    fn new(atom: &'a Atom, observables: &'a [Observable], samples: usize) -> Self {
        let values = observables
            .iter()
            .map(|o| Vec::with_capacity(o.width() * samples))
            .collect();
        Self {
            atom,
            observables,
            values,
            keep: true,
            drift: 0.0,
        }
    }
    fn final_only(atom: &'a Atom, observables: &'a [Observable]) -> Self {
        Self {
            atom,
            observables,
            values: Vec::new(),
            keep: false,
            drift: 0.0,
        }
    }
    #[inline]
    fn record(&mut self, _index: usize, y: &[C64], density: bool) {
        let n = self.atom.n();
        let norm: f64 = if density {
            (0..n).map(|k| y[k * n + k].re).sum()
        } else {
            y.iter().map(|z| z.norm_sqr()).sum()
        };
        self.drift = self.drift.max((norm - 1.0).abs());
        if !self.keep {
            return;
        }
        for (o, v) in self.observables.iter().zip(&mut self.values) {
            if density {
                o.evaluate_mixed(self.atom, y, v);
            } else {
                o.evaluate_pure(self.atom, y, v);
            }
        }
    }
}

/// i ċ = H(t) c inside one segment.
struct SchrodingerSystem<'a> {
    ham: &'a Hamiltonian,
    seg: Segment,
}

impl ode::System for SchrodingerSystem<'_> {
    fn dim(&self) -> usize {
        self.ham.n()
    }
    #[inline]
    fn rhs(&self, t: f64, y: &[C64], dy: &mut [C64]) {
        self.ham.apply(Some(&self.seg), t, y, dy);
    }
}

/// i ċ_c = H_c(t) c_c for copies that differ in one field's tuning.
struct BatchSystem<'a> {
    ham: &'a Hamiltonian,
    seg: Segment,
    field: usize,
    shifts: &'a [f64],
    scratch: RefCell<BatchScratch>,
}

impl ode::System for BatchSystem<'_> {
    fn dim(&self) -> usize {
        self.ham.n() * self.shifts.len()
    }
    fn rhs(&self, t: f64, y: &[C64], dy: &mut [C64]) {
        self.ham.apply_batch(
            Some(&self.seg),
            t,
            self.field,
            self.shifts,
            y,
            dy,
            &mut self.scratch.borrow_mut(),
        );
    }
}

/// dρ/dt = −i[H(t), ρ] + D(ρ), on row-major ρ.
struct LindbladSystem<'a> {
    ham: &'a Hamiltonian,
    seg: Segment,
    diss: Option<&'a Dissipator>,
    /// H(t) as a dense matrix, or (when the Hamiltonian is sparse enough) as its diagonal and
    /// couplings.
    h: RefCell<HamiltonianBuffer>,
}

/// Where [`LindbladSystem`] writes H(t) at each evaluation.
enum HamiltonianBuffer {
    Dense(Vec<C64>),
    Sparse(Vec<f64>, Vec<lindblad::Coupling>),
}

impl<'a> LindbladSystem<'a> {
    fn new(ham: &'a Hamiltonian, a: f64, b: f64, diss: Option<&'a Dissipator>) -> Self {
        let n = ham.n();
        let h = if ham.prefers_sparse() {
            HamiltonianBuffer::Sparse(Vec::with_capacity(n), Vec::new())
        } else {
            HamiltonianBuffer::Dense(vec![C64::new(0.0, 0.0); n * n])
        };
        Self {
            ham,
            seg: ham.segment(a, b),
            diss,
            h: RefCell::new(h),
        }
    }
}

impl ode::System for LindbladSystem<'_> {
    fn dim(&self) -> usize {
        self.ham.n() * self.ham.n()
    }
    fn rhs(&self, t: f64, rho: &[C64], drho: &mut [C64]) {
        let n = self.ham.n();
        let commuted = match &mut *self.h.borrow_mut() {
            HamiltonianBuffer::Dense(h) => {
                self.ham.fill_in(Some(&self.seg), t, h);
                lindblad::commutator_hermitian(n, h, rho, drho).is_ok()
            }
            HamiltonianBuffer::Sparse(diag, couplings) => {
                self.ham.sparse_in(Some(&self.seg), t, diag, couplings);
                lindblad::commutator_sparse_hermitian(n, diag, couplings, rho, drho);
                true
            }
        };
        let ok = commuted && self.diss.is_none_or(|d| d.add_to(rho, drho).is_ok());
        if !ok {
            // Sizes are fixed at construction, so this cannot happen; poison the step so the
            // integrator reports it rather than continuing silently.
            drho.fill(C64::new(f64::NAN, 0.0));
        }
    }
}

fn midpoint_eigen(ham: &Hamiltonian, a: f64, b: f64) -> Result<HermitianEigen, Error> {
    let n = ham.n();
    let mut h = vec![C64::new(0.0, 0.0); n * n];
    ham.fill(0.5 * (a + b), &mut h);
    HermitianEigen::new(n, &h)
}

type OnSample<'a> = dyn FnMut(usize, f64, &[C64]) + 'a;

fn eigen_pure(
    ham: &Hamiltonian,
    a: f64,
    b: f64,
    y: &mut [C64],
    samples: &[f64],
    mut on: impl FnMut(usize, f64, &[C64]),
) -> Result<(), Error> {
    let e = midpoint_eigen(ham, a, b)?;
    let n = ham.n();
    let mut w = vec![C64::new(0.0, 0.0); n];
    let mut out = vec![C64::new(0.0, 0.0); n];
    e.to_eigenbasis(y, &mut w);
    if let Some(dt) = uniform_step(samples) {
        e.sample_uniform(&w, samples[0] - a, dt, samples.len(), |i, c| {
            on(i, samples[i], c)
        });
    } else {
        for (i, &t) in samples.iter().enumerate() {
            e.evolve_from_eigenbasis(&w, t - a, &mut out);
            on(i, t, &out);
        }
    }
    e.evolve_from_eigenbasis(&w, b - a, y);
    Ok(())
}

/// The spacing of equally spaced sample times (to 1e-12 relative), if there are at least 3.
fn uniform_step(samples: &[f64]) -> Option<f64> {
    if samples.len() < 3 {
        return None;
    }
    let dt = (samples[samples.len() - 1] - samples[0]) / (samples.len() - 1) as f64;
    let tol = 1e-12 * samples[samples.len() - 1].abs().max(dt.abs());
    let uniform = dt > 0.0
        && samples
            .iter()
            .enumerate()
            .all(|(i, &t)| (t - (samples[0] + i as f64 * dt)).abs() <= tol);
    uniform.then_some(dt)
}

fn eigen_mixed(
    ham: &Hamiltonian,
    a: f64,
    b: f64,
    rho: &mut [C64],
    samples: &[f64],
    on: &mut OnSample,
) -> Result<(), Error> {
    let e = midpoint_eigen(ham, a, b)?;
    let n = ham.n();
    let mut tmp = vec![C64::new(0.0, 0.0); n * n];
    let mut out = vec![C64::new(0.0, 0.0); n * n];
    let mut conj = |u: &[C64], rho: &[C64], out: &mut [C64]| {
        matmul(n, u, rho, &mut tmp);
        matmul_adjoint(n, &tmp, u, out);
    };
    for (i, &t) in samples.iter().enumerate() {
        conj(&e.propagator(t - a), rho, &mut out);
        on(i, t, &out);
    }
    conj(&e.propagator(b - a), rho, &mut out);
    rho.copy_from_slice(&out);
    Ok(())
}

fn liouvillian_exp(
    ham: &Hamiltonian,
    d: &Dissipator,
    a: f64,
    b: f64,
    rho: &mut [C64],
    samples: &[f64],
    on: &mut OnSample,
) -> Result<(), Error> {
    let n = ham.n();
    let mut h = vec![C64::new(0.0, 0.0); n * n];
    ham.fill(0.5 * (a + b), &mut h);
    let mut times: Vec<f64> = samples.iter().map(|t| (t - a).max(0.0)).collect();
    times.push(b - a);
    let states = lindblad::propagate_lindblad(n, &h, d, rho, &times)?;
    for (i, (&t, s)) in samples.iter().zip(&states).enumerate() {
        on(i, t, s);
    }
    if let Some(last) = states.last() {
        rho.copy_from_slice(last);
    }
    Ok(())
}

/// One fourth-order commutator-free Magnus step y ← exp(−ih B₂) exp(−ih B₁) y with
/// B₁ = α₂H₁ + α₁H₂, B₂ = α₁H₁ + α₂H₂ at the Gauss nodes (Blanes & Moan, Appl. Numer. Math. 56,
/// 1519 (2006); Alvermann & Fehske, J. Comput. Phys. 230, 5930 (2011), eq. 8).
fn cf4_step(
    ham: &Hamiltonian,
    seg: &Segment,
    t: f64,
    h: f64,
    y: &mut [C64],
    buf: &mut Cf4Buffers,
) -> Result<(), Error> {
    let s3 = 3f64.sqrt();
    let (c1, c2) = (0.5 - s3 / 6.0, 0.5 + s3 / 6.0);
    let (a1, a2) = ((3.0 - 2.0 * s3) / 12.0, (3.0 + 2.0 * s3) / 12.0);
    ham.fill_in(Some(seg), t + c1 * h, &mut buf.h1);
    ham.fill_in(Some(seg), t + c2 * h, &mut buf.h2);
    let n = ham.n();
    for (x, y1) in [(a2, a1), (a1, a2)] {
        for k in 0..n * n {
            buf.b[k] = buf.h1[k] * x + buf.h2[k] * y1;
        }
        let e = HermitianEigen::new(n, &buf.b)?;
        e.to_eigenbasis(y, &mut buf.w);
        e.evolve_from_eigenbasis(&buf.w, h, y);
    }
    Ok(())
}

struct Cf4Buffers {
    h1: Vec<C64>,
    h2: Vec<C64>,
    b: Vec<C64>,
    w: Vec<C64>,
}

/// Adaptive CF4 on [a, b] with step doubling (local error ≈ |y_{h/2,h/2} − y_h| / 15), landing
/// exactly on sample times. Returns (steps, rejected, Hamiltonian evaluations).
#[allow(clippy::too_many_arguments)] // one segment's whole context; grouping would only rename it
fn magnus4(
    ham: &Hamiltonian,
    a: f64,
    b: f64,
    y: &mut [C64],
    samples: &[f64],
    tol: &Tolerance,
    max_steps: u64,
    h_init: &mut Option<f64>,
    on: &mut OnSample,
) -> Result<(u64, u64, u64), Error> {
    let n = ham.n();
    let z = C64::new(0.0, 0.0);
    let mut buf = Cf4Buffers {
        h1: vec![z; n * n],
        h2: vec![z; n * n],
        b: vec![z; n * n],
        w: vec![z; n],
    };
    let (mut big, mut half) = (vec![z; n], vec![z; n]);
    let seg = ham.segment(a, b);
    let mut h = h_init
        .unwrap_or_else(|| (b - a).min(1.0 / ham.fastest_rate().max(1e-300)))
        .min(b - a);
    let (mut t, mut steps, mut rejected, mut evals) = (a, 0u64, 0u64, 0u64);
    let mut next = 0;
    while next < samples.len() && samples[next] <= t {
        on(next, samples[next], y);
        next += 1;
    }
    while t < b {
        if steps + rejected >= max_steps {
            return Err(Error::StepFailure {
                method: "magnus4",
                t,
                hint: format!("step limit {max_steps} reached; raise it or loosen rtol"),
            });
        }
        let target = if next < samples.len() {
            samples[next].min(b)
        } else {
            b
        };
        let hs = h.min(target - t);
        big.copy_from_slice(y);
        half.copy_from_slice(y);
        cf4_step(ham, &seg, t, hs, &mut big, &mut buf)?;
        cf4_step(ham, &seg, t, 0.5 * hs, &mut half, &mut buf)?;
        cf4_step(ham, &seg, t + 0.5 * hs, 0.5 * hs, &mut half, &mut buf)?;
        evals += 6;
        let err = (half
            .iter()
            .zip(&big)
            .zip(y.iter())
            .map(|((p, q), y0)| {
                ((p - q).norm() / (tol.atol + tol.rtol * y0.norm().max(p.norm()))).powi(2)
            })
            .sum::<f64>()
            / n as f64)
            .sqrt()
            / 15.0;
        if !err.is_finite() {
            return Err(Error::NonFinite {
                what: format!("the magnus4 error estimate at t = {t:e} s"),
            });
        }
        let factor = (0.9 * err.max(1e-300).powf(-0.2)).clamp(0.2, 5.0);
        if err <= 1.0 {
            y.copy_from_slice(&half);
            t = if hs == target - t { target } else { t + hs };
            steps += 1;
            while next < samples.len() && samples[next] <= t {
                on(next, samples[next], y);
                next += 1;
            }
            // Only grow from a full step, so landing on a sample does not shrink the next one.
            if hs == h || factor < 1.0 {
                h = hs * factor;
            }
        } else {
            rejected += 1;
            h = hs * factor;
            if h < 1e-14 * (b - a).max(t.abs()) {
                return Err(Error::StepFailure {
                    method: "magnus4",
                    t,
                    hint: format!(
                        "step size underflow (h = {h:e} s); the Hamiltonian may jump inside the segment, or rtol is too tight"
                    ),
                });
            }
        }
    }
    *h_init = Some(h);
    Ok((steps, rejected, evals))
}

/// A continuous-wave steady state: every field on at full strength, forever.
#[derive(Clone, Debug)]
pub struct SteadyProblem {
    /// The atom; it must decay, or the steady state is not unique.
    pub atom: Atom,
    /// The fields, all on continuously.
    pub fields: Vec<Field>,
    /// Largest residual rotation kept in the rotating frame (rad/s); a kept rotating term makes
    /// the problem time-dependent and is refused.
    pub cutoff: f64,
    /// What to compute from the steady state.
    pub observables: Vec<Observable>,
}

/// A steady-state problem with its frame built, ready to be re-solved after retuning a field.
#[derive(Clone, Debug)]
pub struct SteadyPrepared {
    atom: Atom,
    ham: Hamiltonian,
    report: FrameReport,
    dissipator: Dissipator,
    observables: Vec<Observable>,
    h: Vec<C64>,
    solver: lindblad::SteadyStateSolver,
}

/// The outcome of a steady-state solve.
#[derive(Clone, Debug)]
pub struct SteadySolution {
    /// ρ_ss.
    pub state: State,
    /// Observable values, concatenated in order.
    pub values: Vec<f64>,
    /// The frame report.
    pub frame: FrameReport,
}

impl SteadyPrepared {
    /// Build the time-independent frame Hamiltonian and the dissipator.
    pub fn new(p: &SteadyProblem) -> Result<Self, Error> {
        let mut seq = Sequence::builder();
        let cw = crate::envelope::Envelope::new(crate::envelope::Shape::Square, 1.0)?;
        for f in 0..p.fields.len() {
            seq.at(0.0, Pulse::new(f, cw.clone()));
        }
        if p.fields.is_empty() {
            seq.wait(1.0);
        }
        let seq = seq.build()?;
        let frame = Frame::Rotating { cutoff: p.cutoff };
        let (ham, report) = frame::build(&p.atom, &p.fields, &seq, frame)?;
        if let Some(t) = ham.terms().iter().find(|t| !t.is_static()) {
            let name = |k: usize| p.atom.levels()[k].name().to_string();
            return Err(Error::TimeDependentSteadyState {
                term: format!("the coupling {} -> {}", name(t.lower), name(t.upper)),
                nu_hz: t.nu / (2.0 * std::f64::consts::PI),
            });
        }
        let dissipator = dissipator(&p.atom, &p.fields, &ham, frame, seq.pulses())?.ok_or_else(|| Error::Inconsistent {
            what: "the steady state".into(),
            hint: "the atom neither decays nor dephases, so no unique steady state exists; add a decay".into(),
        })?;
        let observables = p
            .observables
            .iter()
            .map(|o| o.checked(&p.atom))
            .collect::<Result<Vec<_>, _>>()?;
        let n = p.atom.n();
        Ok(Self {
            atom: p.atom.clone(),
            ham,
            report,
            dissipator,
            observables,
            h: vec![C64::new(0.0, 0.0); n * n],
            solver: lindblad::SteadyStateSolver::new(n)?,
        })
    }

    /// Set a field's carrier to its declared value plus `shift` (rad/s).
    pub fn retune(&mut self, field: usize, shift: f64) {
        self.ham.retune(field, shift);
    }

    /// Steady observable values with field `field` retuned by each of `shifts` (rad/s), in
    /// parallel over fixed chunks.
    pub fn scan(&self, field: usize, shifts: &[f64]) -> Result<ScanTable, Error> {
        check_field(field, self.ham.shifts.len())?;
        let width = self.observables.iter().map(Observable::width).sum();
        scan_chunks(self, shifts, STEADY_SCAN_CHUNK, width, |p, s, out| {
            p.retune(field, s);
            p.values_into(out)
        })
    }

    fn rho(&mut self) -> Result<&[C64], Error> {
        // Retuning can set a coincidentally static term rotating; the steady state needs none.
        if let Some(t) = self.ham.terms().iter().find(|t| !t.is_static()) {
            let name = |k: usize| self.atom.levels()[k].name().to_string();
            return Err(Error::TimeDependentSteadyState {
                term: format!("the coupling {} -> {}", name(t.lower), name(t.upper)),
                nu_hz: t.nu / (2.0 * std::f64::consts::PI),
            });
        }
        self.ham.fill(0.5, &mut self.h);
        Ok(self.solver.solve(&self.h, &self.dissipator)?)
    }

    /// The observables' steady values, concatenated.
    pub fn values(&mut self) -> Result<Vec<f64>, Error> {
        let mut out = Vec::with_capacity(self.observables.iter().map(Observable::width).sum());
        self.values_into(&mut out)?;
        Ok(out)
    }

    /// Append the observables' steady values to `out`.
    pub fn values_into(&mut self, out: &mut Vec<f64>) -> Result<(), Error> {
        self.rho()?;
        let rho = self.solver.solution();
        for o in &self.observables {
            o.evaluate_mixed(&self.atom, rho, out);
        }
        Ok(())
    }

    /// The full steady state with its observables.
    pub fn solve(&mut self) -> Result<SteadySolution, Error> {
        let values = self.values()?;
        Ok(SteadySolution {
            state: State::Mixed(self.solver_state().to_vec()),
            values,
            frame: self.report.clone(),
        })
    }

    fn solver_state(&self) -> &[C64] {
        self.solver.solution()
    }
}

/// The steady state of continuously driven, decaying atoms, by a linear solve of 𝓛ρ = 0 with
/// Tr ρ = 1.
pub fn steady_state(p: &SteadyProblem) -> Result<SteadySolution, Error> {
    SteadyPrepared::new(p)?.solve()
}
