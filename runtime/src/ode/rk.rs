//! The adaptive stepping loop: stages, error norm, step-size control and dense output.

use std::ops::Range;

use num_complex::Complex64 as C64;

use super::tableau::{ErrorEstimate, MAX_STAGES, Tableau};
use super::{OdeError, RkConfig, RkStats, Scheme, System};

/// Integrates `y' = f(t, y)` from `t0` to `t1 > t0`; `y` holds the initial
/// state on entry and `y(t1)` on success (the last accepted state on error).
///
/// `samples` must be sorted (repeats allowed) and lie in `[t0, t1]`. For
/// each sample, in order, `on_sample(index, t, y_t)` is called with the
/// scheme's interpolant, so sample times never shorten the steps; samples at
/// `t0` or exactly on a step end get the state itself.
///
/// All work buffers are allocated once per call; the step loop allocates
/// nothing. Returns work counters; see [`OdeError`] for failure modes.
#[allow(clippy::too_many_arguments)] // The argument list is the crate's fixed public API.
pub fn integrate<S: System>(
    scheme: Scheme,
    sys: &S,
    t0: f64,
    t1: f64,
    y: &mut [C64],
    samples: &[f64],
    cfg: &RkConfig,
    on_sample: &mut dyn FnMut(usize, f64, &[C64]),
) -> Result<RkStats, OdeError> {
    #[cfg(target_arch = "x86_64")]
    {
        if std::is_x86_feature_detected!("avx2") && std::is_x86_feature_detected!("fma") {
            // SAFETY: the CPU supports the features the function is compiled for.
            return unsafe { integrate_avx2(scheme, sys, t0, t1, y, samples, cfg, on_sample) };
        }
    }
    integrate_impl(scheme, sys, t0, t1, y, samples, cfg, on_sample)
}

/// [`integrate`] compiled for AVX2 and FMA (detected at run time): the same arithmetic in wider
/// registers for the stage combinations, which dominate the cost of large or stacked systems.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2,fma")]
#[allow(clippy::too_many_arguments)] // As `integrate`.
fn integrate_avx2<S: System>(
    scheme: Scheme,
    sys: &S,
    t0: f64,
    t1: f64,
    y: &mut [C64],
    samples: &[f64],
    cfg: &RkConfig,
    on_sample: &mut dyn FnMut(usize, f64, &[C64]),
) -> Result<RkStats, OdeError> {
    integrate_impl(scheme, sys, t0, t1, y, samples, cfg, on_sample)
}

/// The body of [`integrate`], inlined into each instruction-set variant.
#[inline(always)]
#[allow(clippy::too_many_arguments)] // As `integrate`.
fn integrate_impl<S: System>(
    scheme: Scheme,
    sys: &S,
    t0: f64,
    t1: f64,
    y: &mut [C64],
    samples: &[f64],
    cfg: &RkConfig,
    on_sample: &mut dyn FnMut(usize, f64, &[C64]),
) -> Result<RkStats, OdeError> {
    validate(sys.dim(), t0, t1, y, samples, cfg)?;
    let tab = scheme.tableau();
    let n = y.len();
    let s = tab.stages;
    let fsal = s * n..(s + 1) * n;
    // The error estimate of DP5 needs f(t + h, y_new); DOP853's does not, so
    // there that evaluation is spent only on accepted steps.
    let fsal_in_error = tab.error.uses_stage(s);

    let zero = C64::new(0.0, 0.0);
    let mut k = vec![zero; tab.total_stages() * n];
    let mut y_new = vec![zero; n];
    let mut tmp = vec![zero; n];
    let mut tmp2 = vec![zero; n];
    let mut sums = vec![(0.0, 0.0); cfg.blocks.max(1)];
    let mut stats = RkStats::default();

    if !all_finite(y) {
        return Err(OdeError::NonFinite { t: t0 });
    }
    sys.rhs(t0, y, &mut k[..n]);
    stats.rhs_evals += 1;
    if !all_finite(&k[..n]) {
        return Err(OdeError::NonFinite { t: t0 });
    }

    let mut next = 0;
    while next < samples.len() && samples[next] == t0 {
        on_sample(next, t0, y);
        next += 1;
    }

    let exponent = -1.0 / (f64::from(tab.error_order) + 1.0);
    let mut h = match cfg.h_init {
        Some(h) => h.min(cfg.h_max),
        None => {
            stats.rhs_evals += 1;
            let (f0, f1) = k.split_at_mut(n);
            initial_step(
                sys,
                t0,
                t1 - t0,
                y,
                f0,
                tab.error_order,
                cfg,
                &mut tmp,
                &mut f1[..n],
            )?
        }
    };

    let mut t = t0;
    let mut after_reject = false;
    while t < t1 {
        let attempts = stats.steps + stats.rejected;
        if attempts >= cfg.max_steps {
            return Err(OdeError::StepLimit { t, steps: attempts });
        }
        // Below ~10 ulp of t the step no longer moves t in f64.
        let floor = cfg.h_min.max(10.0 * (t.next_up() - t));
        if h < floor {
            return Err(OdeError::StepUnderflow { t, h });
        }
        // Stretch a step that would leave a sliver before t1 (as DOPRI5 does).
        let last = t + 1.01 * h >= t1;
        let hs = if last { t1 - t } else { h };

        eval_stages(tab, sys, 1..s, t, hs, y, &mut k, &mut tmp);
        combine(&mut y_new, y, &k[..s * n], tab.b, hs);
        stats.rhs_evals += (s - 1) as u64;
        if fsal_in_error {
            sys.rhs(t + hs, &y_new, &mut k[fsal.clone()]);
            stats.rhs_evals += 1;
        }
        let err = error_norm(tab, hs, y, &y_new, &k, cfg, &mut tmp, &mut tmp2, &mut sums);
        if !err.is_finite() {
            return Err(OdeError::NonFinite { t });
        }
        let h_next = next_step_size(hs, err, exponent, after_reject, cfg);
        if err > 1.0 {
            stats.rejected += 1;
            after_reject = true;
            h = h_next;
            continue;
        }

        if !fsal_in_error {
            sys.rhs(t + hs, &y_new, &mut k[fsal.clone()]);
            stats.rhs_evals += 1;
        }
        let t_new = if last { t1 } else { t + hs };
        let mut extras_ready = false;
        while next < samples.len() && samples[next] <= t_new {
            let ts = samples[next];
            if ts == t_new {
                on_sample(next, ts, &y_new);
            } else {
                if !extras_ready {
                    let extras = s + 1..tab.total_stages();
                    stats.rhs_evals += extras.len() as u64;
                    eval_stages(tab, sys, extras, t, hs, y, &mut k, &mut tmp);
                    extras_ready = true;
                }
                dense_eval(tab, (ts - t) / hs, hs, y, &y_new, &k, &mut tmp);
                on_sample(next, ts, &tmp);
            }
            next += 1;
        }

        y.copy_from_slice(&y_new);
        k.copy_within(fsal.clone(), 0);
        t = t_new;
        stats.steps += 1;
        stats.last_h = hs;
        after_reject = false;
        h = h_next;
    }
    // The error norm cannot see an overflow to infinity in the very last
    // y_new (its scale becomes infinite too), so check the result once.
    if !all_finite(y) {
        return Err(OdeError::NonFinite { t: t1 });
    }
    Ok(stats)
}

/// Rejects every argument combination the loop cannot handle sensibly, so
/// that the loop itself never has to panic or spin.
fn validate(
    dim: usize,
    t0: f64,
    t1: f64,
    y: &[C64],
    samples: &[f64],
    cfg: &RkConfig,
) -> Result<(), OdeError> {
    let bad = |what| Err(OdeError::InvalidInput { what });
    if dim != y.len() {
        return bad("state length differs from System::dim()");
    }
    if y.is_empty() {
        return bad("state vector is empty");
    }
    if !t0.is_finite() || !t1.is_finite() {
        return bad("t0 and t1 must be finite");
    }
    if t1 <= t0 {
        return bad("t1 must be greater than t0");
    }
    if samples.iter().any(|&ts| !(t0..=t1).contains(&ts)) {
        return bad("sample times must lie in [t0, t1]");
    }
    if samples.windows(2).any(|w| w[1] < w[0]) {
        return bad("sample times must be sorted in increasing order");
    }
    if !(cfg.rtol.is_finite() && cfg.rtol >= 0.0) {
        return bad("rtol must be finite and >= 0");
    }
    if !(cfg.atol.is_finite() && cfg.atol > 0.0) {
        return bad("atol must be finite and > 0");
    }
    if cfg.h_init.is_some_and(|h| !(h.is_finite() && h > 0.0)) {
        return bad("h_init must be finite and > 0");
    }
    if !(cfg.h_min.is_finite() && cfg.h_min >= 0.0) {
        return bad("h_min must be finite and >= 0");
    }
    if !(cfg.h_max > 0.0 && cfg.h_max >= cfg.h_min) {
        return bad("h_max must be > 0 and >= h_min");
    }
    if cfg.max_steps == 0 {
        return bad("max_steps must be at least 1");
    }
    if cfg.blocks == 0 || !y.len().is_multiple_of(cfg.blocks) {
        return bad("blocks must be at least 1 and divide the state length");
    }
    if !(cfg.safety > 0.0 && cfg.safety <= 1.0) {
        return bad("safety must lie in (0, 1]");
    }
    if !(cfg.fac_min > 0.0 && cfg.fac_min <= 1.0) {
        return bad("fac_min must lie in (0, 1]");
    }
    if !(cfg.fac_max.is_finite() && cfg.fac_max >= 1.0) {
        return bad("fac_max must be finite and >= 1");
    }
    Ok(())
}

/// The step-size controller, the only place step sizes are chosen after the
/// first: the classical `h · safety · err^(-1/(q+1))` (Hairer, Nørsett &
/// Wanner, Solving ODEs I, 2nd ed., Sec. II.4, eq. 4.13), bounded by
/// `fac_min`/`fac_max` and `h_max`, and not allowed to grow right after a
/// rejection (which would likely be rejected again).
fn next_step_size(h: f64, err: f64, exponent: f64, after_reject: bool, cfg: &RkConfig) -> f64 {
    let ideal = if err == 0.0 {
        cfg.fac_max
    } else {
        cfg.safety * err.powf(exponent)
    };
    let mut fac = ideal.max(cfg.fac_min).min(cfg.fac_max);
    if after_reject {
        fac = fac.min(1.0);
    }
    (h * fac).min(cfg.h_max)
}

/// Hairer's starting-step heuristic (Solving ODEs I, 2nd ed., Sec. II.4,
/// "Starting step size"): balance an explicit Euler step against the
/// tolerance and the size of the second derivative. Costs one evaluation.
#[allow(clippy::too_many_arguments)] // Buffers are passed in to avoid allocating.
fn initial_step<S: System>(
    sys: &S,
    t0: f64,
    span: f64,
    y0: &[C64],
    f0: &[C64],
    error_order: u32,
    cfg: &RkConfig,
    y1: &mut [C64],
    f1: &mut [C64],
) -> Result<f64, OdeError> {
    let n = y0.len() as f64;
    let scale = |z: C64| cfg.atol + cfg.rtol * z.norm();
    let (mut d0, mut d1) = (0.0, 0.0);
    for (&y, &f) in y0.iter().zip(f0) {
        let sc2 = scale(y).powi(2);
        d0 += y.norm_sqr() / sc2;
        d1 += f.norm_sqr() / sc2;
    }
    let (d0, d1) = ((d0 / n).sqrt(), (d1 / n).sqrt());
    let h0 = if d0 < 1e-5 || d1 < 1e-5 {
        1e-6
    } else {
        0.01 * d0 / d1
    }
    .min(span);
    combine(y1, y0, f0, &[1.0], h0);
    sys.rhs(t0 + h0, y1, f1);
    let mut d2 = 0.0;
    for ((&y, &a), &b) in y0.iter().zip(f0).zip(f1.iter()) {
        d2 += (b - a).norm_sqr() / scale(y).powi(2);
    }
    let d2 = (d2 / n).sqrt() / h0;
    if !d2.is_finite() {
        return Err(OdeError::NonFinite { t: t0 });
    }
    let h1 = if d1.max(d2) <= 1e-15 {
        (h0 * 1e-3).max(1e-6)
    } else {
        (0.01 / d1.max(d2)).powf(1.0 / (f64::from(error_order) + 1.0))
    };
    Ok((100.0 * h0).min(h1).min(span).min(cfg.h_max))
}

/// Evaluates stages `rows`: `k_i = f(t + c_i h, y + h Σ_j a_ij k_j)`.
#[allow(clippy::too_many_arguments)] // Buffers are passed in to avoid allocating.
#[inline(always)]
fn eval_stages<S: System>(
    tab: &Tableau,
    sys: &S,
    rows: Range<usize>,
    t: f64,
    h: f64,
    y: &[C64],
    k: &mut [C64],
    tmp: &mut [C64],
) {
    let n = y.len();
    for i in rows {
        let (done, rest) = k.split_at_mut(i * n);
        combine(tmp, y, done, tab.a[i], h);
        sys.rhs(t + tab.c[i] * h, tmp, &mut rest[..n]);
    }
}

/// `out = base + h Σ_j w_j k_j` over the stage vectors stored back to back in `k`; the copy of
/// `base` is fused with the first stage's pass.
#[inline(always)]
fn combine(out: &mut [C64], base: &[C64], k: &[C64], weights: &[f64], h: f64) {
    let n = out.len();
    let first = weights.iter().position(|&w| w != 0.0);
    match first {
        Some(j) => {
            let hw = h * weights[j];
            for ((o, &b), &x) in out.iter_mut().zip(base).zip(&k[j * n..(j + 1) * n]) {
                *o = b + x * hw;
            }
            accumulate(out, &k[(j + 1) * n..], &weights[j + 1..], h);
        }
        None => out.copy_from_slice(base),
    }
}

/// `out = h Σ_j w_j k_j`, written by the first stage's pass rather than after zeroing `out`.
#[inline(always)]
fn weighted_sum(out: &mut [C64], k: &[C64], weights: &[f64], h: f64) {
    let n = out.len();
    match weights.iter().position(|&w| w != 0.0) {
        Some(j) => {
            let hw = h * weights[j];
            for (o, &x) in out.iter_mut().zip(&k[j * n..(j + 1) * n]) {
                *o = x * hw;
            }
            accumulate(out, &k[(j + 1) * n..], &weights[j + 1..], h);
        }
        None => out.fill(C64::new(0.0, 0.0)),
    }
}

/// `out += h Σ_j w_j k_j`, up to four stages per pass over the components so each output is
/// loaded and stored once per four stages; zero weights are skipped since the DOP853 rows are
/// sparse.
#[inline(always)]
fn accumulate(out: &mut [C64], k: &[C64], weights: &[f64], h: f64) {
    let n = out.len();
    // Gather the non-zero stages, then add them four, two or one at a time.
    let mut rows: [&[C64]; MAX_STAGES] = [&[]; MAX_STAGES];
    let mut hw = [0.0f64; MAX_STAGES];
    let mut m = 0;
    for (kj, &w) in k.chunks_exact(n).zip(weights) {
        if w != 0.0 {
            rows[m] = kj;
            hw[m] = h * w;
            m += 1;
        }
    }
    let mut s = 0;
    while s + 4 <= m {
        let (a, b, c, d) = (rows[s], rows[s + 1], rows[s + 2], rows[s + 3]);
        let (wa, wb, wc, wd) = (hw[s], hw[s + 1], hw[s + 2], hw[s + 3]);
        for ((((o, &xa), &xb), &xc), &xd) in out.iter_mut().zip(a).zip(b).zip(c).zip(d) {
            *o += xa * wa + xb * wb + xc * wc + xd * wd;
        }
        s += 4;
    }
    if s + 2 <= m {
        let (a, b, wa, wb) = (rows[s], rows[s + 1], hw[s], hw[s + 1]);
        for ((o, &xa), &xb) in out.iter_mut().zip(a).zip(b) {
            *o += xa * wa + xb * wb;
        }
        s += 2;
    }
    if s < m {
        let (a, wa) = (rows[s], hw[s]);
        for (o, &xa) in out.iter_mut().zip(a) {
            *o += xa * wa;
        }
    }
}

/// Error scale of one component, `atol + rtol · max(|y|, |y_new|)`. The
/// comparison is written so that a NaN in `y_new` propagates into the norm
/// (f64::max would silently drop it).
#[inline(always)]
fn scale(cfg: &RkConfig, y: C64, y_new: C64) -> f64 {
    let (a, b) = (y.norm_sqr(), y_new.norm_sqr());
    cfg.atol + cfg.rtol * (if a > b { a } else { b }).sqrt()
}

/// Scaled RMS norm of the local error estimate; accept the step iff <= 1.
#[allow(clippy::too_many_arguments)] // Buffers are passed in to avoid allocating.
#[inline(always)]
fn error_norm(
    tab: &Tableau,
    h: f64,
    y: &[C64],
    y_new: &[C64],
    k: &[C64],
    cfg: &RkConfig,
    e1: &mut [C64],
    e2: &mut [C64],
    sums: &mut [(f64, f64)],
) -> f64 {
    let blocks = cfg.blocks.max(1);
    let nb = (y.len() / blocks) as f64;
    // Per-system sums; systems are interleaved (component i belongs to system i mod blocks).
    sums.iter_mut().for_each(|s| *s = (0.0, 0.0));
    let worst = |sums: &[(f64, f64)], f: &dyn Fn(f64, f64) -> f64| {
        sums.iter()
            .map(|&(a, b)| f(a, b))
            .fold(0.0f64, |w, x| if x <= w { w } else { x })
    };
    match tab.error {
        ErrorEstimate::Embedded { e } => {
            weighted_sum(e1, k, e, h);
            for (i, ((&err, &a), &b)) in e1.iter().zip(y).zip(y_new).enumerate() {
                sums[i % blocks].0 += err.norm_sqr() / scale(cfg, a, b).powi(2);
            }
            worst(sums, &|s, _| (s / nb).sqrt())
        }
        ErrorEstimate::Blended { e5, e3 } => {
            // As scipy's DOP853._estimate_error_norm and Hairer's DOP853, per system.
            weighted_sum(e1, k, e5, 1.0);
            weighted_sum(e2, k, e3, 1.0);
            for (i, (((&r5, &r3), &a), &b)) in
                e1.iter().zip(e2.iter()).zip(y).zip(y_new).enumerate()
            {
                let inv = scale(cfg, a, b).powi(-2);
                let s = &mut sums[i % blocks];
                s.0 += r5.norm_sqr() * inv;
                s.1 += r3.norm_sqr() * inv;
            }
            worst(sums, &|s5, s3| {
                if s5 == 0.0 && s3 == 0.0 {
                    0.0
                } else {
                    h.abs() * s5 / ((s5 + 0.01 * s3) * nb).sqrt()
                }
            })
        }
    }
}

/// Writes the interpolant at `t + θh` into `out` (extra stages already evaluated).
#[inline(always)]
fn dense_eval(
    tab: &Tableau,
    theta: f64,
    h: f64,
    y: &[C64],
    y_new: &[C64],
    k: &[C64],
    out: &mut [C64],
) {
    let mut w = [0.0; MAX_STAGES];
    let alpha = tab.dense_weights(theta, &mut w);
    combine(out, y, k, &w[..tab.total_stages()], h);
    if alpha != 0.0 {
        for ((o, &a), &b) in out.iter_mut().zip(y).zip(y_new) {
            *o += (b - a) * alpha;
        }
    }
}

fn all_finite(v: &[C64]) -> bool {
    v.iter().all(|z| z.is_finite())
}

#[cfg(test)]
mod tests {
    use super::*;

    const SCHEMES: [Scheme; 2] = [Scheme::DormandPrince54, Scheme::DormandPrince853];

    /// `y' = λ y`, exact solution `y0 exp(λ t)`.
    struct Linear(C64);
    impl System for Linear {
        fn dim(&self) -> usize {
            1
        }
        fn rhs(&self, _t: f64, y: &[C64], dy: &mut [C64]) {
            dy[0] = self.0 * y[0];
        }
    }

    /// Two-level atom in the rotating frame, `y' = -i H y` with
    /// `H = [[0, Ω/2], [Ω/2, -Δ]]` (ħ = 1).
    struct Rabi {
        omega: f64,
        delta: f64,
    }
    impl System for Rabi {
        fn dim(&self) -> usize {
            2
        }
        fn rhs(&self, _t: f64, y: &[C64], dy: &mut [C64]) {
            let mi = C64::new(0.0, -1.0);
            dy[0] = mi * (0.5 * self.omega * y[1]);
            dy[1] = mi * (0.5 * self.omega * y[0] - self.delta * y[1]);
        }
    }

    /// Right-hand side that turns NaN once t passes `bad_after`.
    struct NanAfter(f64);
    impl System for NanAfter {
        fn dim(&self) -> usize {
            1
        }
        fn rhs(&self, t: f64, y: &[C64], dy: &mut [C64]) {
            dy[0] = if t > self.0 {
                C64::new(f64::NAN, 0.0)
            } else {
                -y[0]
            };
        }
    }

    /// `y' = y²`, `y(0) = 1`: `y = 1/(1 - t)` blows up at t = 1.
    struct Blowup;
    impl System for Blowup {
        fn dim(&self) -> usize {
            1
        }
        fn rhs(&self, _t: f64, y: &[C64], dy: &mut [C64]) {
            dy[0] = y[0] * y[0];
        }
    }

    const LAMBDA: C64 = C64::new(-0.3, 5.0);

    fn uniform(t0: f64, t1: f64, m: usize) -> Vec<f64> {
        (0..m)
            .map(|i| t0 + (t1 - t0) * i as f64 / (m - 1) as f64)
            .collect()
    }

    /// Every `on_sample` call as (index, t, state).
    type Sampled = Vec<(usize, f64, Vec<C64>)>;

    fn run<S: System>(
        scheme: Scheme,
        sys: &S,
        t1: f64,
        y: &mut [C64],
        samples: &[f64],
        cfg: &RkConfig,
    ) -> (Result<RkStats, OdeError>, Sampled) {
        let mut got = Vec::new();
        let r = integrate(scheme, sys, 0.0, t1, y, samples, cfg, &mut |i, t, v| {
            got.push((i, t, v.to_vec()))
        });
        (r, got)
    }

    #[test]
    fn linear_complex_decay_matches_exponential() {
        // Exact solution y = exp(λ t) of y' = λ y. Both the end point and the
        // dense output at 50 times must be within 10·rtol of it (|y| <= 1;
        // over about 8 oscillation periods the global error may exceed the
        // per-step tolerance; observed: at most 1.3·rtol).
        let t1 = 10.0;
        let samples = uniform(0.0, t1, 50);
        for scheme in SCHEMES {
            for rtol in [1e-6, 1e-10] {
                let cfg = RkConfig::with_tolerances(rtol, rtol * 1e-3);
                let mut y = [C64::new(1.0, 0.0)];
                let (r, got) = run(scheme, &Linear(LAMBDA), t1, &mut y, &samples, &cfg);
                let stats = r.unwrap();
                let end_err = (y[0] - (LAMBDA * t1).exp()).norm();
                assert_eq!(got.len(), samples.len());
                let mut dense_err: f64 = 0.0;
                for (j, (i, t, v)) in got.iter().enumerate() {
                    assert_eq!((*i, *t), (j, samples[j]));
                    dense_err = dense_err.max((v[0] - (LAMBDA * *t).exp()).norm());
                }
                eprintln!(
                    "{scheme:?} rtol {rtol:e}: end {end_err:.2e} dense {dense_err:.2e} {stats:?}"
                );
                assert!(end_err < 10.0 * rtol, "{scheme:?} rtol {rtol}: {end_err:e}");
                assert!(
                    dense_err < 10.0 * rtol,
                    "{scheme:?} rtol {rtol}: {dense_err:e}"
                );
            }
        }
    }

    #[test]
    fn rabi_populations_and_norm() {
        // P_e(t) = Ω²/(Ω²+Δ²) sin²(√(Ω²+Δ²) t/2) for a ground-state start
        // (Rabi, Phys. Rev. 51, 652 (1937); Allen & Eberly, Optical Resonance
        // and Two-Level Atoms, 1975, ch. 3). -iH is anti-Hermitian, so the norm
        // is conserved exactly; the integrator must keep it to ~rtol per period.
        let (omega, delta) = (1.3, 0.7);
        let sys = Rabi { omega, delta };
        let w2 = omega * omega + delta * delta;
        let t1 = 20.0;
        let samples = uniform(0.0, t1, 50);
        for scheme in SCHEMES {
            let rtol = 1e-9;
            let cfg = RkConfig::with_tolerances(rtol, 1e-12);
            let mut y = [C64::new(1.0, 0.0), C64::new(0.0, 0.0)];
            let (r, got) = run(scheme, &sys, t1, &mut y, &samples, &cfg);
            r.unwrap();
            let (mut pop_err, mut norm_err): (f64, f64) = (0.0, 0.0);
            for (_, t, v) in &got {
                let exact = omega * omega / w2 * (0.5 * w2.sqrt() * t).sin().powi(2);
                pop_err = pop_err.max((v[1].norm_sqr() - exact).abs());
                norm_err = norm_err.max((v[0].norm_sqr() + v[1].norm_sqr() - 1.0).abs());
            }
            eprintln!("{scheme:?}: population {pop_err:.2e} norm {norm_err:.2e}");
            assert!(pop_err < 20.0 * rtol, "{scheme:?}: {pop_err:e}");
            assert!(norm_err < 20.0 * rtol, "{scheme:?}: {norm_err:e}");
        }
    }

    #[test]
    fn fixed_step_convergence_order() {
        // With an unreachable tolerance and fac_max = 1 the controller keeps
        // h = h_init, so the global error must scale like h^p (Hairer,
        // Nørsett & Wanner, Solving ODEs I, Thm. II.3.6). Step counts keep the
        // error well above round-off.
        let t1 = 2.0;
        for (scheme, p, n0) in [
            (Scheme::DormandPrince54, 5.0, 20),
            (Scheme::DormandPrince853, 8.0, 10),
        ] {
            let err_at = |steps: u32| {
                let cfg = RkConfig {
                    rtol: 1e6,
                    atol: 1e6,
                    h_init: Some(t1 / f64::from(steps)),
                    fac_max: 1.0,
                    ..RkConfig::default()
                };
                let mut y = [C64::new(1.0, 0.0)];
                let (r, _) = run(scheme, &Linear(LAMBDA), t1, &mut y, &[], &cfg);
                assert_eq!(r.unwrap().steps, u64::from(steps));
                (y[0] - (LAMBDA * t1).exp()).norm()
            };
            let (e1, e2) = (err_at(n0), err_at(2 * n0));
            let observed = (e1 / e2).log2();
            eprintln!("{scheme:?}: errors {e1:.2e} -> {e2:.2e}, order {observed:.2}");
            assert!(
                (observed - p).abs() < 0.5,
                "{scheme:?}: observed order {observed}"
            );
        }
    }

    #[test]
    fn tolerance_proportionality() {
        // For an order-q error estimate the number of steps grows like
        // tol^(-1/(q+1)) (Hairer, Nørsett & Wanner, Sec. II.4); check the
        // ratio over four decades against q = 4 (DP5) and q = 7 (DOP853).
        for (scheme, q) in [
            (Scheme::DormandPrince54, 4.0),
            (Scheme::DormandPrince853, 7.0),
        ] {
            let steps = |rtol: f64| {
                let mut y = [C64::new(1.0, 0.0)];
                let cfg = RkConfig::with_tolerances(rtol, rtol * 1e-3);
                let (r, _) = run(scheme, &Linear(LAMBDA), 50.0, &mut y, &[], &cfg);
                r.unwrap().steps as f64
            };
            let ratio = steps(1e-11) / steps(1e-7);
            let expected = 1e4_f64.powf(1.0 / (q + 1.0));
            eprintln!("{scheme:?}: step ratio {ratio:.2}, expected {expected:.2}");
            assert!((ratio / expected - 1.0).abs() < 0.2, "{scheme:?}: {ratio}");
        }
    }

    #[test]
    fn samples_do_not_change_the_steps() {
        // Dense output must not clip steps: the trajectory and the final state
        // are bit-identical with and without samples.
        for scheme in SCHEMES {
            let cfg = RkConfig::default();
            let mut y_plain = [C64::new(1.0, 0.0)];
            let (plain, _) = run(scheme, &Linear(LAMBDA), 5.0, &mut y_plain, &[], &cfg);
            let mut y_sampled = [C64::new(1.0, 0.0)];
            let samples = [0.0, 0.0, 0.37, 1.0, 1.0, 2.5, 5.0];
            let (sampled, got) = run(scheme, &Linear(LAMBDA), 5.0, &mut y_sampled, &samples, &cfg);
            let (plain, sampled) = (plain.unwrap(), sampled.unwrap());
            assert_eq!(plain.steps, sampled.steps);
            assert_eq!(y_plain, y_sampled);
            let idx: Vec<usize> = got.iter().map(|g| g.0).collect();
            assert_eq!(idx, [0, 1, 2, 3, 4, 5, 6]);
            // Samples at t0 and t1 are the states themselves.
            assert_eq!(got[0].2[0], C64::new(1.0, 0.0));
            assert_eq!(got[6].2[0], y_sampled[0]);
        }
    }

    #[test]
    fn rhs_evaluation_bookkeeping() {
        // Stage counts of the tableaux (Dormand & Prince 1980; DOP853).
        // Per attempt: DP5 uses 6 evaluations (FSAL); DOP853 11, plus 1 per
        // accepted step, plus 3 dense-output stages for a step holding a sample.
        // Both add 1 for the initial f(t0, y0) and 1 for the starting-step heuristic.
        let cfg = RkConfig::default();
        let mut y = [C64::new(1.0, 0.0)];
        let s = run(
            Scheme::DormandPrince54,
            &Linear(LAMBDA),
            3.0,
            &mut y,
            &[],
            &cfg,
        )
        .0
        .unwrap();
        assert_eq!(s.rhs_evals, 2 + 6 * (s.steps + s.rejected));
        let mut y = [C64::new(1.0, 0.0)];
        let s = run(
            Scheme::DormandPrince853,
            &Linear(LAMBDA),
            3.0,
            &mut y,
            &[1.5],
            &cfg,
        )
        .0
        .unwrap();
        assert_eq!(s.rhs_evals, 2 + 11 * (s.steps + s.rejected) + s.steps + 3);
        assert!(s.last_h > 0.0);
    }

    #[test]
    fn nan_rhs_is_non_finite() {
        // Error contract of `integrate` (OdeError::NonFinite docs).
        for scheme in SCHEMES {
            let cfg = RkConfig::default();
            // NaN from the start (caught at f(t0, y0)).
            let mut y = [C64::new(1.0, 0.0)];
            let (r, _) = run(scheme, &NanAfter(-1.0), 1.0, &mut y, &[], &cfg);
            assert_eq!(r, Err(OdeError::NonFinite { t: 0.0 }));
            // NaN mid-way: reported at the start of the failing step, which
            // precedes t = 0.5, and y keeps the last good state.
            let mut y = [C64::new(1.0, 0.0)];
            let (r, _) = run(scheme, &NanAfter(0.5), 1.0, &mut y, &[], &cfg);
            match r {
                Err(OdeError::NonFinite { t }) => {
                    assert!(t > 0.0 && t <= 0.5, "{t}");
                    assert!((y[0] - (-t).exp()).norm() < 1e-7);
                }
                other => panic!("{other:?}"),
            }
            // NaN in the initial state.
            let mut y = [C64::new(0.0, f64::NAN)];
            let (r, _) = run(scheme, &Linear(LAMBDA), 1.0, &mut y, &[], &cfg);
            assert_eq!(r, Err(OdeError::NonFinite { t: 0.0 }));
        }
    }

    #[test]
    fn step_limit_and_underflow() {
        // Error contract of `integrate` (RkConfig::max_steps and h_min docs).
        for scheme in SCHEMES {
            let cfg = RkConfig {
                max_steps: 3,
                ..RkConfig::default()
            };
            let mut y = [C64::new(1.0, 0.0)];
            let (r, _) = run(scheme, &Linear(LAMBDA), 10.0, &mut y, &[], &cfg);
            assert!(
                matches!(r, Err(OdeError::StepLimit { steps: 3, .. })),
                "{r:?}"
            );
            // Integrating through the pole of y = 1/(1 - t) must stop at it (a
            // step may land just beyond it, on the continuation 1/(1 - t) < 0).
            let mut y = [C64::new(1.0, 0.0)];
            let (r, _) = run(scheme, &Blowup, 2.0, &mut y, &[], &RkConfig::default());
            match r {
                Err(OdeError::StepUnderflow { t, h }) => {
                    assert!((1.0 - t).abs() < 1e-6 && h < 1e-14, "{t} {h}")
                }
                other => panic!("{other:?}"),
            }
        }
    }

    #[test]
    fn invalid_inputs_are_rejected() {
        // Argument checks of `validate`; messages carry no trailing period.
        let sys = Linear(LAMBDA);
        let ok = RkConfig::default();
        let cases: [(f64, f64, &[f64], RkConfig, usize); 12] = [
            (0.0, 0.0, &[], ok.clone(), 1),
            (1.0, 0.0, &[], ok.clone(), 1),
            (0.0, f64::NAN, &[], ok.clone(), 1),
            (0.0, 1.0, &[1.5], ok.clone(), 1),
            (0.0, 1.0, &[-0.1], ok.clone(), 1),
            (0.0, 1.0, &[0.5, 0.2], ok.clone(), 1),
            (0.0, 1.0, &[f64::NAN], ok.clone(), 1),
            (0.0, 1.0, &[], ok.clone(), 2),
            (
                0.0,
                1.0,
                &[],
                RkConfig {
                    atol: 0.0,
                    ..ok.clone()
                },
                1,
            ),
            (
                0.0,
                1.0,
                &[],
                RkConfig {
                    rtol: f64::NAN,
                    ..ok.clone()
                },
                1,
            ),
            (
                0.0,
                1.0,
                &[],
                RkConfig {
                    h_init: Some(-1.0),
                    ..ok.clone()
                },
                1,
            ),
            (
                0.0,
                1.0,
                &[],
                RkConfig {
                    fac_min: 2.0,
                    ..ok.clone()
                },
                1,
            ),
        ];
        for (i, (t0, t1, samples, cfg, len)) in cases.into_iter().enumerate() {
            let mut y = vec![C64::new(1.0, 0.0); len];
            let r = integrate(
                Scheme::DormandPrince54,
                &sys,
                t0,
                t1,
                &mut y,
                samples,
                &cfg,
                &mut |_, _, _| {},
            );
            match r {
                Err(e @ OdeError::InvalidInput { .. }) => assert!(!e.to_string().ends_with('.')),
                other => panic!("case {i}: {other:?}"),
            }
        }
    }
}
