//! Comparing two records: parameters, source lines, results (scalars by relative change, series
//! by their largest deviation), checks and solver settings. The `volatile` part is ignored.

use std::fmt::Write as _;

use super::Record;
use crate::kernel::results::EvolveResult;
use crate::notebook::expr::{Dim, format_quantity};

/// When two numbers count as equal: |a − b| ≤ atol + rtol · max(|a|, |b|).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Tolerance {
    /// Relative tolerance.
    pub rtol: f64,
    /// Absolute tolerance (in the quantity's SI unit).
    pub atol: f64,
}

impl Default for Tolerance {
    fn default() -> Self {
        Self {
            rtol: 1e-9,
            atol: 1e-12,
        }
    }
}

impl Tolerance {
    fn same(&self, a: f64, b: f64) -> bool {
        (a - b).abs() <= self.atol + self.rtol * a.abs().max(b.abs()) || (a.is_nan() && b.is_nan())
    }
}

/// One difference, in words.
#[derive(Clone, Debug, PartialEq)]
pub struct Change {
    /// `parameter`, `source`, `result`, `check`, `solver` or `structure`.
    pub kind: &'static str,
    /// What changed, e.g. `rabi: 2π × 25.00 kHz → 2π × 30.00 kHz`.
    pub text: String,
}

fn change(kind: &'static str, text: String) -> Change {
    Change { kind, text }
}

/// Lines removed from and added to `a` to make `b`, by a longest common subsequence
/// (quadratic; run-files are short). Each entry is `(-|+, line number, text)`.
pub fn line_diff(a: &str, b: &str) -> Vec<(char, usize, String)> {
    let (x, y): (Vec<&str>, Vec<&str>) = (a.lines().collect(), b.lines().collect());
    let (n, m) = (x.len(), y.len());
    if n.saturating_mul(m) > 25_000_000 {
        return vec![(
            '~',
            0,
            format!("the sources differ ({n} and {m} lines; too long to align)"),
        )];
    }
    let mut l = vec![0u32; (n + 1) * (m + 1)];
    for i in (0..n).rev() {
        for j in (0..m).rev() {
            l[i * (m + 1) + j] = if x[i] == y[j] {
                l[(i + 1) * (m + 1) + j + 1] + 1
            } else {
                l[(i + 1) * (m + 1) + j].max(l[i * (m + 1) + j + 1])
            };
        }
    }
    let (mut i, mut j, mut out) = (0, 0, Vec::new());
    while i < n || j < m {
        if i < n && j < m && x[i] == y[j] {
            i += 1;
            j += 1;
        } else if j < m && (i == n || l[i * (m + 1) + j + 1] > l[(i + 1) * (m + 1) + j]) {
            out.push(('+', j + 1, y[j].to_string()));
            j += 1;
        } else {
            out.push(('-', i + 1, x[i].to_string()));
            i += 1;
        }
    }
    out
}

/// Linear interpolation of (x, y) at `t`; `None` outside the range.
fn interp(x: &[f64], y: &[f64], t: f64) -> Option<f64> {
    let (lo, hi) = (x.first()?.min(*x.last()?), x.first()?.max(*x.last()?));
    if t < lo - 1e-12 * lo.abs().max(hi.abs()) || t > hi + 1e-12 * lo.abs().max(hi.abs()) {
        return None;
    }
    let k = x
        .windows(2)
        .position(|w| (w[0] <= t && t <= w[1]) || (w[1] <= t && t <= w[0]))?;
    let (x0, x1) = (x[k], x[k + 1]);
    if x1 == x0 {
        return Some(y[k]);
    }
    Some(y[k] + (y[k + 1] - y[k]) * (t - x0) / (x1 - x0))
}

/// The relative change from `a` to `b` in words, e.g. ` (+12.5 %)`, or nothing when `a` is
/// zero or either is not finite.
fn relative(a: f64, b: f64) -> String {
    let r = (b - a) / a.abs();
    if a == 0.0 || !r.is_finite() {
        return String::new();
    }
    let percent = 100.0 * r;
    match percent.abs() {
        p if p >= 100.0 => format!(" ({percent:+.0} %)"),
        p if p >= 10.0 => format!(" ({percent:+.1} %)"),
        p if p >= 0.1 => format!(" ({percent:+.2} %)"),
        _ => format!(" (relative change {r:+.2e})"),
    }
}

fn compare_results(
    name: &str,
    a: &EvolveResult,
    b: &EvolveResult,
    tol: Tolerance,
    out: &mut Vec<Change>,
) {
    let same_axes = a.axes.len() == b.axes.len()
        && a.axes.iter().zip(&b.axes).all(|(p, q)| {
            p.name == q.name
                && p.values.len() == q.values.len()
                && p.values
                    .iter()
                    .zip(&q.values)
                    .all(|(u, v)| tol.same(*u, *v))
        });
    if !same_axes {
        let shape = |r: &EvolveResult| {
            r.axes
                .iter()
                .map(|x| format!("{} × {}", x.name, x.values.len()))
                .collect::<Vec<_>>()
                .join(", ")
        };
        out.push(change(
            "structure",
            format!("{name}: sweep grid {} → {}", shape(a), shape(b)),
        ));
    }
    for oa in &a.observables {
        let Some(ob) = b.observables.iter().find(|o| o.label == oa.label) else {
            out.push(change(
                "structure",
                format!("{name}.{}: no longer observed", oa.label),
            ));
            continue;
        };
        let dim = Dim(oa.dim);
        // Same grid: point by point. A 1-D sweep on another grid: the new curve interpolated
        // onto the old points where both are defined. Otherwise only the sizes are compared.
        let pairs: Vec<(f64, f64)> = if same_axes && oa.finals.len() == ob.finals.len() {
            oa.finals
                .iter()
                .copied()
                .zip(ob.finals.iter().copied())
                .collect()
        } else if a.axes.len() == 1
            && b.axes.len() == 1
            && a.axes[0].name == b.axes[0].name
            && oa.width == 1
            && ob.width == 1
        {
            a.axes[0]
                .values
                .iter()
                .zip(&oa.finals)
                .filter_map(|(t, ya)| Some((*ya, interp(&b.axes[0].values, &ob.finals, *t)?)))
                .collect()
        } else {
            continue;
        };
        let worst = pairs
            .iter()
            .filter(|(u, v)| !tol.same(*u, *v))
            .map(|(u, v)| (u - v).abs())
            .fold(0.0f64, f64::max);
        if worst > 0.0 {
            let what = if pairs.len() == 1 {
                format!(
                    "{name}.final.{}: {} → {}{}",
                    oa.label,
                    format_quantity(pairs[0].0, dim),
                    format_quantity(pairs[0].1, dim),
                    relative(pairs[0].0, pairs[0].1)
                )
            } else {
                format!(
                    "{name}.final.{}: largest deviation {} over {} points",
                    oa.label,
                    format_quantity(worst, dim),
                    pairs.len()
                )
            };
            out.push(change("result", what));
        }
    }
    for ob in &b.observables {
        if !a.observables.iter().any(|o| o.label == ob.label) {
            out.push(change(
                "structure",
                format!("{name}.{}: newly observed", ob.label),
            ));
        }
    }
    let (sa, sb) = (&a.solver, &b.solver);
    if sa.method != sb.method || sa.rtol != sb.rtol || sa.atol != sb.atol {
        out.push(change(
            "solver",
            format!(
                "{name}: {} (rtol {:e}, atol {:e}) → {} (rtol {:e}, atol {:e})",
                sa.method, sa.rtol, sa.atol, sb.method, sb.rtol, sb.atol
            ),
        ));
    }
}

/// Every difference between `a` and `b` beyond `tol`.
pub fn diff(a: &Record, b: &Record, tol: Tolerance) -> Vec<Change> {
    let mut out = Vec::new();
    for pa in &a.parameters {
        match b.parameters.iter().find(|p| p.name == pa.name) {
            None => out.push(change(
                "parameter",
                format!("{}: removed (was {})", pa.name, pa.shown),
            )),
            Some(pb) if pa.dim != pb.dim || !tol.same(pa.value, pb.value) => {
                let how = if pb.overridden { " (--set)" } else { "" };
                out.push(change(
                    "parameter",
                    format!("{}: {} → {}{how}", pa.name, pa.shown, pb.shown),
                ));
            }
            Some(_) => {}
        }
    }
    for pb in &b.parameters {
        if !a.parameters.iter().any(|p| p.name == pb.name) {
            out.push(change(
                "parameter",
                format!("{}: new, {}", pb.name, pb.shown),
            ));
        }
    }
    if a.source.sha256 != b.source.sha256 {
        for (sign, line, text) in line_diff(&a.source.text, &b.source.text) {
            out.push(change("source", format!("{sign} {line}: {text}")));
        }
    }
    for ra in &a.results {
        match b.results.iter().find(|r| r.block == ra.block) {
            None => out.push(change(
                "structure",
                format!("{}: no results in the second record", ra.block),
            )),
            Some(rb) => compare_results(&ra.block, &ra.result, &rb.result, tol, &mut out),
        }
    }
    for rb in &b.results {
        if !a.results.iter().any(|r| r.block == rb.block) {
            out.push(change(
                "structure",
                format!("{}: no results in the first record", rb.block),
            ));
        }
    }
    for ca in &a.checks {
        match b.checks.iter().find(|c| c.path == ca.path) {
            None => out.push(change("check", format!("{}: removed", ca.path))),
            Some(cb) => {
                if ca.passed != cb.passed {
                    let word = |p: bool| if p { "held" } else { "FAILED" };
                    out.push(change(
                        "check",
                        format!(
                            "{}: {} → {} ({} → {})",
                            ca.path,
                            word(ca.passed),
                            word(cb.passed),
                            ca.shown,
                            cb.shown
                        ),
                    ));
                } else if !tol.same(ca.got, cb.got) {
                    out.push(change(
                        "check",
                        format!(
                            "{}: {} → {}{}",
                            ca.path,
                            ca.shown,
                            cb.shown,
                            relative(ca.got, cb.got)
                        ),
                    ));
                }
            }
        }
    }
    for cb in &b.checks {
        if !a.checks.iter().any(|c| c.path == cb.path) {
            out.push(change(
                "check",
                format!(
                    "{}: new ({})",
                    cb.path,
                    if cb.passed { "held" } else { "FAILED" }
                ),
            ));
        }
    }
    out
}

/// The terminal summary of a diff.
pub fn summary(a_name: &str, b_name: &str, changes: &[Change]) -> String {
    let mut s = String::new();
    if changes.is_empty() {
        let _ = writeln!(s, "{a_name} and {b_name} agree within tolerance");
        return s;
    }
    for kind in [
        "parameter",
        "source",
        "structure",
        "result",
        "check",
        "solver",
    ] {
        let these: Vec<&Change> = changes.iter().filter(|c| c.kind == kind).collect();
        if these.is_empty() {
            continue;
        }
        let _ = writeln!(s, "{kind}s ({}):", these.len());
        for c in these.iter().take(40) {
            let _ = writeln!(s, "  {}", c.text);
        }
        if these.len() > 40 {
            let _ = writeln!(s, "  … {} more", these.len() - 40);
        }
    }
    let _ = writeln!(s, "{a_name} → {b_name}: {} difference(s)", changes.len());
    s
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn line_diff_finds_the_edited_lines() {
        let d = line_diff("a\nb\nc\nd\n", "a\nB\nc\nd\ne\n");
        assert_eq!(
            d,
            vec![
                ('-', 2, "b".into()),
                ('+', 2, "B".into()),
                ('+', 5, "e".into())
            ]
        );
        assert!(line_diff("x\ny", "x\ny").is_empty());
    }

    #[test]
    fn interpolation_is_linear_and_bounded() {
        let x = [0.0, 1.0, 2.0];
        let y = [0.0, 10.0, 0.0];
        assert_eq!(interp(&x, &y, 0.5), Some(5.0));
        assert_eq!(interp(&x, &y, 1.5), Some(5.0));
        assert_eq!(interp(&x, &y, 2.5), None);
    }

    #[test]
    fn relative_changes_read_as_percentages() {
        assert_eq!(relative(2.0, 3.0), " (+50.0 %)");
        assert_eq!(relative(-2.0, -3.0), " (-50.0 %)");
        assert_eq!(relative(1.0, 1.002), " (+0.20 %)");
        assert_eq!(relative(1.0, 1.0 + 2e-7), " (relative change +2.00e-7)");
        assert_eq!(relative(1.0, 5.0), " (+400 %)");
        assert_eq!(relative(0.0, 1.0), "");
    }

    #[test]
    fn tolerance_is_absolute_plus_relative() {
        let t = Tolerance {
            rtol: 1e-3,
            atol: 1e-6,
        };
        assert!(t.same(1.0, 1.0009));
        assert!(!t.same(1.0, 1.002));
        assert!(t.same(0.0, 1e-7));
    }
}
