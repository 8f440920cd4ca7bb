//! The time-dependent Hamiltonian in a chosen frame, as the solvers see it: a constant diagonal,
//! chirp-driven diagonal terms and pulse-driven couplings with their residual rotation.

use crate::envelope::{Envelope, Shape};
use crate::error::Error;
use crate::field::Chirp;
use crate::linalg::C64;
use crate::sequence::{Pulse, Sequence};

/// One coupling: H[upper, lower] += amp · env_p(t) · exp(−i(ν t + Σ_f m_f χ_f(t))), plus its
/// Hermitian conjugate at H[lower, upper].
#[derive(Clone, Debug)]
pub struct Term {
    /// Row index (the upper level).
    pub upper: usize,
    /// Column index (the lower level).
    pub lower: usize,
    /// Complex amplitude (rad/s), including ½Ω, the pulse's phase and amplitude factor.
    pub amp: C64,
    /// Index of the pulse whose envelope multiplies it.
    pub pulse: usize,
    /// Residual rotation ν (rad/s); 0 for a term that is static in the frame.
    pub nu: f64,
    /// ν at the declared carriers (before any [`Hamiltonian::retune`]).
    pub nu0: f64,
    /// Chirp phases entering the rotation: (field index, multiplicity m_f).
    pub chirp: Vec<(usize, i32)>,
    /// dν/dω_f for every field f whose carrier moves ν: (field, ±1) for the term's own field in
    /// the exact frame, (f, −m_f) in the rotating frame.
    pub tuning: Vec<(usize, i32)>,
}

impl Term {
    /// Whether the term has no residual time dependence besides its envelope.
    pub fn is_static(&self) -> bool {
        self.nu == 0.0 && self.chirp.is_empty()
    }
}

/// Which pulses act inside one segment between breakpoints ([`Hamiltonian::segment`]).
#[derive(Clone, Debug)]
pub struct Segment {
    active: Vec<bool>,
}

/// Reusable buffers of [`Hamiltonian::apply_batch`].
#[derive(Clone, Debug, Default)]
pub struct BatchScratch {
    /// dν/dω_field of each term.
    tuning: Vec<i32>,
    /// Multiplicity of the field in each level's frame phase.
    mult: Vec<f64>,
    /// Each copy's shift relative to the current tuning (rad/s).
    offsets: Vec<f64>,
}

/// A chirp-driven diagonal term: H[level, level] −= multiplicity · δ_field(t).
#[derive(Clone, Debug)]
pub struct DiagChirp {
    /// Level index.
    pub level: usize,
    /// Field index.
    pub field: usize,
    /// How many times the field's frequency enters the level's frame phase.
    pub multiplicity: i32,
}

/// H(t)/ħ in rad/s for one scenario in one frame.
#[derive(Clone, Debug)]
pub struct Hamiltonian {
    pub(crate) n: usize,
    /// frame_phases[k][f]: how many times field f's phase enters level k's frame phase.
    pub(crate) frame_phases: Vec<Vec<i32>>,
    pub(crate) diag: Vec<f64>,
    /// The diagonal at the declared carriers.
    pub(crate) diag0: Vec<f64>,
    /// Current carrier shift of each field (rad/s), see [`Hamiltonian::retune`].
    pub(crate) shifts: Vec<f64>,
    pub(crate) diag_chirps: Vec<DiagChirp>,
    pub(crate) terms: Vec<Term>,
    pub(crate) pulses: Vec<Pulse>,
    pub(crate) chirps: Vec<Option<Chirp>>,
    pub(crate) duration: f64,
    pub(crate) breakpoints: Vec<f64>,
}

impl Hamiltonian {
    /// A constant Hamiltonian given as a dense row-major `n × n` Hermitian matrix (rad/s), on for
    /// `duration` seconds: for models that are not built from fields (effective Hamiltonians,
    /// benchmarks, code cells).
    pub fn constant(n: usize, h: &[C64], duration: f64) -> Result<Self, Error> {
        if n == 0 || h.len() != n * n {
            return Err(Error::Shape {
                what: "a dense Hamiltonian",
                expected: n * n,
                got: h.len(),
            });
        }
        // Decomposing checks finiteness and hermiticity once, with the crate's tolerance.
        crate::linalg::HermitianEigen::new(n, h)?;
        let seq = Sequence::builder()
            .then(Pulse::new(0, Envelope::new(Shape::Square, duration)?))
            .build()?;
        let mut terms = Vec::new();
        for i in 0..n {
            for j in 0..i {
                let amp = h[i * n + j];
                if amp != C64::new(0.0, 0.0) {
                    terms.push(Term {
                        upper: i,
                        lower: j,
                        amp,
                        pulse: 0,
                        nu: 0.0,
                        nu0: 0.0,
                        chirp: vec![],
                        tuning: vec![],
                    });
                }
            }
        }
        let diag: Vec<f64> = (0..n).map(|k| h[k * n + k].re).collect();
        Ok(Self {
            n,
            frame_phases: vec![vec![0]; n],
            diag0: diag.clone(),
            shifts: vec![0.0],
            diag,
            diag_chirps: vec![],
            terms,
            pulses: seq.pulses().to_vec(),
            chirps: vec![None],
            duration: seq.duration(),
            breakpoints: seq.breakpoints(),
        })
    }

    /// Dimension.
    pub fn n(&self) -> usize {
        self.n
    }
    /// Constant diagonal (rad/s).
    pub fn diagonal(&self) -> &[f64] {
        &self.diag
    }
    /// The couplings kept in this frame.
    pub fn terms(&self) -> &[Term] {
        &self.terms
    }
    /// How many times each field's phase enters each level's frame phase (`[level][field]`);
    /// all zero in the exact frame. Laser phase noise of field f dephases coherence ρ_kj in
    /// proportion to (n_kf − n_jf)².
    pub fn frame_phases(&self) -> &[Vec<i32>] {
        &self.frame_phases
    }
    /// Duration of the sequence (s).
    pub fn duration(&self) -> f64 {
        self.duration
    }
    /// Times where the Hamiltonian may jump or kink, sorted, from 0 to the end.
    pub fn breakpoints(&self) -> &[f64] {
        &self.breakpoints
    }

    /// The pulses acting inside the segment (a, b) between two breakpoints. Evaluating H "from
    /// inside" a segment matters at its ends: a pulse that starts exactly at b must not be seen
    /// by the last Runge–Kutta stage of (a, b), nor one that ends at a by the first.
    pub fn segment(&self, a: f64, b: f64) -> Segment {
        Segment {
            active: self
                .pulses
                .iter()
                .map(|p| p.start() < b && p.end() > a)
                .collect(),
        }
    }

    #[inline]
    fn term_value(&self, term: &Term, t: f64, seg: Option<&Segment>) -> C64 {
        let p = &self.pulses[term.pulse];
        let env = match seg {
            Some(s) if !s.active[term.pulse] => 0.0,
            Some(_) => p
                .envelope()
                .value((t - p.start()).clamp(0.0, p.envelope().duration())),
            None => p.value_at(t),
        };
        if env == 0.0 {
            return C64::new(0.0, 0.0);
        }
        if term.is_static() {
            return term.amp * env;
        }
        let mut phase = term.nu * t;
        for &(f, m) in &term.chirp {
            if let Some(c) = &self.chirps[f] {
                phase += m as f64 * c.phase(t);
            }
        }
        let (s, c) = phase.sin_cos();
        term.amp * env * C64::new(c, -s)
    }

    #[inline]
    fn diag_value(&self, k: usize, t: f64) -> f64 {
        let mut d = self.diag[k];
        for dc in &self.diag_chirps {
            if dc.level == k
                && let Some(c) = &self.chirps[dc.field]
            {
                d -= dc.multiplicity as f64 * c.detuning(t);
            }
        }
        d
    }

    /// Write H(t) (rad/s) into a dense row-major `n × n` buffer; a pulse counts as on at both
    /// of its ends.
    pub fn fill(&self, t: f64, h: &mut [C64]) {
        self.fill_in(None, t, h)
    }

    /// [`Hamiltonian::fill`] as seen from inside a segment (see [`Hamiltonian::segment`]).
    pub fn fill_in(&self, seg: Option<&Segment>, t: f64, h: &mut [C64]) {
        let n = self.n;
        h[..n * n].fill(C64::new(0.0, 0.0));
        for k in 0..n {
            h[k * n + k] = C64::new(self.diag_value(k, t), 0.0);
        }
        for term in &self.terms {
            let v = self.term_value(term, t, seg);
            h[term.upper * n + term.lower] += v;
            h[term.lower * n + term.upper] += v.conj();
        }
    }

    /// H(t) in sparse form, as seen from inside a segment when one is given: the diagonal
    /// (rad/s) into `diag` and every non-zero coupling as (upper, lower, H[upper, lower]) into
    /// `couplings` (both cleared first; several terms on one pair are listed separately).
    pub(crate) fn sparse_in(
        &self,
        seg: Option<&Segment>,
        t: f64,
        diag: &mut Vec<f64>,
        couplings: &mut Vec<crate::lindblad::Coupling>,
    ) {
        diag.clear();
        diag.extend((0..self.n).map(|k| self.diag_value(k, t)));
        couplings.clear();
        for term in &self.terms {
            let v = self.term_value(term, t, seg);
            if v != C64::new(0.0, 0.0) {
                couplings.push((term.upper, term.lower, v));
            }
        }
    }

    /// Whether a commutator with H is cheaper from its sparse form than from a dense matrix: the
    /// sparse product takes N(N + 2·terms) complex multiply-adds against the dense kernel's N³.
    /// At N = 24 the sparse kernel measured faster down to equal counts
    /// (`lindblad::tests::sparse_commutator_speed_sanity`); asking for a factor 2 keeps a margin
    /// for the dense kernel's better vectorisation on other machines.
    pub(crate) fn prefers_sparse(&self) -> bool {
        let n = self.n;
        2 * (n + 2 * self.terms.len()) <= n * n
    }

    /// dy = −i H(t) y for a state vector, from the sparse terms (no dense matrix), as seen from
    /// inside a segment when one is given (see [`Hamiltonian::segment`]).
    #[inline]
    pub fn apply(&self, seg: Option<&Segment>, t: f64, y: &[C64], dy: &mut [C64]) {
        if self.diag_chirps.is_empty() {
            for k in 0..self.n {
                dy[k] = y[k] * self.diag[k];
            }
        } else {
            for k in 0..self.n {
                dy[k] = y[k] * self.diag_value(k, t);
            }
        }
        for term in &self.terms {
            let v = self.term_value(term, t, seg);
            if v == C64::new(0.0, 0.0) {
                continue;
            }
            dy[term.upper] += v * y[term.lower];
            dy[term.lower] += v.conj() * y[term.upper];
        }
        for d in dy.iter_mut().take(self.n) {
            *d = C64::new(d.im, -d.re); // multiply by −i
        }
    }

    /// Set field `field`'s carrier to its declared frequency plus `shift` (rad/s), without
    /// rebuilding the frame: the levels it dresses move on the diagonal and the residual
    /// rotations follow, exactly. Which terms are kept (the spanning forest and the cutoff) stays
    /// as decided at the declared carriers, and so does the frame report; rebuild the problem
    /// when a retuning should change those decisions. The shift is absolute (calling twice with
    /// the same value changes nothing); an index beyond the fields changes nothing either.
    pub fn retune(&mut self, field: usize, shift: f64) {
        let Some(old) = self.shifts.get_mut(field) else {
            return;
        };
        *old = shift;
        for k in 0..self.n {
            let m = self.frame_phases[k].get(field).copied().unwrap_or(0);
            if m != 0 {
                self.diag[k] = self.diag0[k]
                    - (0..self.shifts.len())
                        .map(|f| self.frame_phases[k][f] as f64 * self.shifts[f])
                        .sum::<f64>();
            }
        }
        for term in &mut self.terms {
            if term.tuning.iter().any(|&(f, _)| f == field) {
                term.nu = term.nu0
                    + term
                        .tuning
                        .iter()
                        .map(|&(f, m)| m as f64 * self.shifts[f])
                        .sum::<f64>();
            }
        }
    }

    /// How a field's carrier moves term `i`'s rotation (dν/dω_field).
    fn tuning_of(&self, i: usize, field: usize) -> i32 {
        self.terms[i]
            .tuning
            .iter()
            .find(|&&(f, _)| f == field)
            .map_or(0, |&(_, m)| m)
    }

    /// Whether retuning `field` can change the Hamiltonian's time dependence.
    pub fn tunes_rotation(&self, field: usize) -> bool {
        (0..self.terms.len()).any(|i| self.tuning_of(i, field) != 0)
    }

    /// dy = −i H_c(t) y_c for K copies of the state, interleaved level-major
    /// (`y[k·K + c]` is amplitude k of copy c), copy c having field `field` retuned by
    /// `shifts[c]` relative to the current tuning. Envelopes and chirps are evaluated once for
    /// all copies, and every inner loop runs over the copies, contiguous in memory.
    #[allow(clippy::too_many_arguments)] // the batch, its segment and its scratch space
    pub fn apply_batch(
        &self,
        seg: Option<&Segment>,
        t: f64,
        field: usize,
        shifts: &[f64],
        y: &[C64],
        dy: &mut [C64],
        scratch: &mut BatchScratch,
    ) {
        #[cfg(target_arch = "x86_64")]
        {
            if std::is_x86_feature_detected!("avx2") && std::is_x86_feature_detected!("fma") {
                // SAFETY: the CPU supports the features the function is compiled for.
                unsafe { self.apply_batch_avx2(seg, t, field, shifts, y, dy, scratch) };
                return;
            }
        }
        self.apply_batch_impl(seg, t, field, shifts, y, dy, scratch)
    }

    /// [`Hamiltonian::apply_batch`] compiled for AVX2 and FMA: the same arithmetic, wider
    /// registers for the loops over copies.
    #[cfg(target_arch = "x86_64")]
    #[target_feature(enable = "avx2,fma")]
    #[allow(clippy::too_many_arguments)] // as apply_batch
    fn apply_batch_avx2(
        &self,
        seg: Option<&Segment>,
        t: f64,
        field: usize,
        shifts: &[f64],
        y: &[C64],
        dy: &mut [C64],
        scratch: &mut BatchScratch,
    ) {
        self.apply_batch_impl(seg, t, field, shifts, y, dy, scratch)
    }

    #[allow(clippy::too_many_arguments)] // as apply_batch
    #[inline(always)]
    fn apply_batch_impl(
        &self,
        seg: Option<&Segment>,
        t: f64,
        field: usize,
        shifts: &[f64],
        y: &[C64],
        dy: &mut [C64],
        scratch: &mut BatchScratch,
    ) {
        let n = self.n;
        let kk = shifts.len();
        let minus_i = C64::new(0.0, -1.0);
        if scratch.tuning.len() != self.terms.len() {
            scratch.tuning = (0..self.terms.len())
                .map(|i| self.tuning_of(i, field))
                .collect();
            scratch.mult = (0..n)
                .map(|k| self.frame_phases[k].get(field).copied().unwrap_or(0) as f64)
                .collect();
            let current = self.shifts.get(field).copied().unwrap_or(0.0);
            scratch.offsets = shifts.iter().map(|s| s - current).collect();
        }
        for k in 0..n {
            let dk = self.diag_value(k, t);
            let mk = scratch.mult[k];
            let (yk, dyk) = (&y[k * kk..(k + 1) * kk], &mut dy[k * kk..(k + 1) * kk]);
            for ((o, &a), &d) in dyk.iter_mut().zip(yk).zip(&scratch.offsets) {
                // −i·(diag − m·δ_c)·y
                *o = C64::new(a.im, -a.re) * (dk - mk * d);
            }
        }
        for (i, term) in self.terms.iter().enumerate() {
            let v = self.term_value(term, t, seg);
            if v == C64::new(0.0, 0.0) {
                continue;
            }
            let (vm, vmc) = (minus_i * v, minus_i * v.conj());
            let (u, l) = (term.upper, term.lower);
            let m = scratch.tuning[i] as f64;
            // Rows u and l of dy are disjoint (u ≠ l), so they can be borrowed together.
            let (du, dl) = if u > l {
                let (lo, hi) = dy.split_at_mut(u * kk);
                (&mut hi[..kk], &mut lo[l * kk..(l + 1) * kk])
            } else {
                let (lo, hi) = dy.split_at_mut(l * kk);
                (&mut lo[u * kk..(u + 1) * kk], &mut hi[..kk])
            };
            let (yu, yl) = (&y[u * kk..(u + 1) * kk], &y[l * kk..(l + 1) * kk]);
            if m == 0.0 {
                for (o, &a) in du.iter_mut().zip(yl) {
                    *o += vm * a;
                }
                for (o, &a) in dl.iter_mut().zip(yu) {
                    *o += vmc * a;
                }
            } else {
                for (((o, p), (&a, &b)), &d) in du
                    .iter_mut()
                    .zip(dl.iter_mut())
                    .zip(yl.iter().zip(yu))
                    .zip(&scratch.offsets)
                {
                    let ph = C64::from_polar(1.0, -m * d * t);
                    *o += vm * ph * a;
                    *p += vmc * ph.conj() * b;
                }
            }
        }
    }

    /// Whether H is constant on [a, b]: every term active there is static with a constant
    /// envelope, and no chirp moves the diagonal.
    pub fn is_constant_on(&self, a: f64, b: f64) -> bool {
        if !self.diag_chirps.is_empty() {
            return false;
        }
        let tol = 1e-12 * self.duration.max(1e-300);
        self.terms.iter().all(|term| {
            let p = &self.pulses[term.pulse];
            if p.end() <= a + tol || p.start() >= b - tol {
                return true; // inactive on the segment
            }
            if !term.is_static() {
                return false;
            }
            match p.envelope().constant_pieces() {
                Some(pieces) => pieces
                    .iter()
                    .any(|&(s, e, _)| s + p.start() <= a + tol && e + p.start() >= b - tol),
                None => false,
            }
        })
    }

    /// The fastest rotation of any term or diagonal entry plus the largest coupling (rad/s): an
    /// upper bound on the frequencies a step must resolve.
    pub fn fastest_rate(&self) -> f64 {
        let nu = self.terms.iter().map(|t| t.nu.abs()).fold(0.0, f64::max);
        let d = self.diag.iter().map(|d| d.abs()).fold(0.0, f64::max);
        let amp: f64 = self
            .terms
            .iter()
            .map(|t| t.amp.norm() * self.pulses[t.pulse].envelope().max_abs())
            .fold(0.0, f64::max);
        nu.max(d) + 2.0 * amp
    }
}
