//! What an `evolve` block produced, in a form the cache and (later) the record can store, and
//! the evaluation of result paths against it.

use std::collections::HashMap;

use serde::{Deserialize, Serialize};

use crate::notebook::expr::{self, Dim};
use crate::notebook::path::{ObsSpec, Reduce, ResultPath, Target};
use crate::notebook::source::Span;

/// One sweep axis.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct AxisResult {
    /// The swept parameter.
    pub name: String,
    /// Its dimension exponents (s, m, kg, A, K).
    pub dim: [i8; 5],
    /// Its values (SI).
    pub values: Vec<f64>,
}

/// One observable's values.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct ObsResult {
    /// Canonical text, e.g. `population(e)`.
    pub label: String,
    /// Real components per value.
    pub width: usize,
    /// Dimension exponents.
    pub dim: [i8; 5],
    /// Final (or steady-state) values, grid-point-major, `width` per point.
    pub finals: Vec<f64>,
    /// Values at the sample times, sample-major, `width` per sample (no sweep only).
    pub trace: Option<Vec<f64>>,
}

/// How the numbers were computed.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct SolverInfo {
    /// Method(s) used.
    pub method: String,
    /// Why, when chosen automatically.
    pub reason: String,
    /// Relative tolerance.
    pub rtol: f64,
    /// Absolute tolerance.
    pub atol: f64,
    /// Steps (or exactly propagated segments), summed over points.
    pub steps: u64,
    /// Worst norm or trace drift over all points.
    pub norm_drift: f64,
    /// Frame terms dropped or kept rotating, one line each.
    pub frame: Vec<String>,
}

/// The results of one `evolve` block.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct EvolveResult {
    /// Sweep axes, outermost first (empty without a sweep).
    pub axes: Vec<AxisResult>,
    /// Sample times (s), when traced.
    pub times: Option<Vec<f64>>,
    /// Observables in `observe` order.
    pub observables: Vec<ObsResult>,
    /// Solver figures.
    pub solver: SolverInfo,
    /// Whether this is a steady state.
    pub steady: bool,
}

/// A value a path evaluates to.
#[derive(Clone, Debug, PartialEq)]
pub enum PathValue {
    /// One number.
    Scalar(f64, Dim),
    /// A curve: axis name, axis values and dimension, values and dimension.
    Series {
        /// Axis name.
        axis: String,
        /// Axis values.
        x: Vec<f64>,
        /// Axis dimension.
        x_dim: Dim,
        /// Values.
        y: Vec<f64>,
        /// Value dimension.
        y_dim: Dim,
    },
    /// A 2-D map over two axes (x outer, y inner): values row-major.
    Map {
        /// The two axes: names, values, dims.
        axes: [(String, Vec<f64>, Dim); 2],
        /// Values, `axes[0].len() × axes[1].len()`.
        z: Vec<f64>,
        /// Value dimension.
        dim: Dim,
    },
}

/// A path problem at a span within the path text.
pub type PathErr = (Span, String, Option<String>);

fn component(comp: Option<&str>, values: &[f64], width: usize) -> Vec<f64> {
    let k = match comp {
        Some("re") | Some("u") | None => 0,
        Some("im") | Some("v") => 1,
        Some("w") => 2,
        Some("abs") => usize::MAX,
        Some(_) => 0,
    };
    values
        .chunks(width)
        .map(|c| {
            if k == usize::MAX {
                c[0].hypot(c[1])
            } else {
                c[k]
            }
        })
        .collect()
}

/// The dimension of an observable's values.
pub fn obs_dim(obs: &ObsSpec) -> Dim {
    match obs {
        ObsSpec::Scattering => Dim::FREQUENCY,
        _ => Dim::DIMENSIONLESS,
    }
}

/// Evaluate `path` against `results`; `at` values are evaluated with `env`.
pub fn eval(
    path: &ResultPath,
    results: &HashMap<String, EvolveResult>,
    env: &dyn expr::Env,
) -> Result<PathValue, PathErr> {
    let r = results.get(&path.block).ok_or_else(|| {
        (
            path.block_span.clone(),
            format!("`{}` has no results", path.block),
            None,
        )
    })?;
    let find_obs = |o: &ObsSpec| {
        r.observables
            .iter()
            .find(|x| x.label == o.canonical())
            .ok_or_else(|| {
                (
                    path.target_span.clone(),
                    format!("`{}` is not observed by `{}`", o.canonical(), path.block),
                    Some(format!("add \"{}\" to its `observe` list", o.canonical())),
                )
            })
    };
    let no_trace = || {
        (
            path.target_span.clone(),
            format!("`{}` recorded no time trace", path.block),
            Some("set `samples = N` in the evolve block (without a sweep)".to_string()),
        )
    };
    let time_axis = || {
        r.times.as_ref().ok_or_else(no_trace).map(|t| AxisResult {
            name: "time".into(),
            dim: Dim::TIME.0,
            values: t.clone(),
        })
    };
    // Values over a grid of axes (shape), then `at` selections cut it down.
    let (mut axes, mut data, dim): (Vec<AxisResult>, Vec<f64>, Dim) = match &path.target {
        Target::Final(o, c) => {
            let x = find_obs(o)?;
            (
                r.axes.clone(),
                component(c.as_deref(), &x.finals, x.width),
                Dim(x.dim),
            )
        }
        Target::Trace(o, c) => {
            let x = find_obs(o)?;
            let ax = time_axis()?;
            let tr = x.trace.as_ref().ok_or_else(no_trace)?;
            (vec![ax], component(c.as_deref(), tr, x.width), Dim(x.dim))
        }
        Target::Time => {
            let ax = time_axis()?;
            (vec![ax.clone()], ax.values, Dim::TIME)
        }
        Target::Axis(a) => {
            let Some(ax) = r.axes.iter().find(|x| &x.name == a) else {
                let names: Vec<&str> = r.axes.iter().map(|x| x.name.as_str()).collect();
                return Err((
                    path.target_span.clone(),
                    format!("`{}` has no sweep axis or result `{a}`", path.block),
                    Some(if names.is_empty() {
                        "it sweeps nothing".to_string()
                    } else {
                        format!("its axes are {}", crate::notebook::schema::list(&names))
                    }),
                ));
            };
            (vec![ax.clone()], ax.values.clone(), Dim(ax.dim))
        }
    };
    for (name, nspan, text, vspan) in &path.at {
        let Some(ai) = axes.iter().position(|a| &a.name == name) else {
            return Err((
                nspan.clone(),
                format!("`{name}` is not an axis of this result"),
                Some(format!(
                    "axes: {}",
                    axes.iter()
                        .map(|a| a.name.as_str())
                        .collect::<Vec<_>>()
                        .join(", ")
                )),
            ));
        };
        let e = expr::parse(text).map_err(|e| {
            (
                vspan.start + e.span.start..vspan.start + e.span.end,
                e.message,
                e.hint,
            )
        })?;
        let q = e.eval(env).map_err(|e| {
            (
                vspan.start + e.span.start..vspan.start + e.span.end,
                e.message,
                e.hint,
            )
        })?;
        let ad = Dim(axes[ai].dim);
        expr::expect_dim(&q, ad, &format!("the value of `{name}`"), 0..text.len())
            .map_err(|e| (vspan.clone(), e.message, e.hint))?;
        let k = grid_index(&axes[ai].values, q.value, ad).map_err(|hint| {
            (
                vspan.clone(),
                format!(
                    "{} is not a point of the `{name}` axis",
                    expr::format_quantity(q.value, ad)
                ),
                Some(hint),
            )
        })?;
        // Keep only index k along axis ai.
        let shape: Vec<usize> = axes.iter().map(|a| a.values.len()).collect();
        let inner: usize = shape[ai + 1..].iter().product();
        let outer: usize = shape[..ai].iter().product();
        let n = shape[ai];
        let mut cut = Vec::with_capacity(outer * inner);
        for o in 0..outer {
            let base = o * n * inner + k * inner;
            cut.extend_from_slice(&data[base..base + inner]);
        }
        data = cut;
        axes.remove(ai);
    }
    let value = match axes.len() {
        0 => PathValue::Scalar(data[0], dim),
        1 => {
            let a = axes.remove(0);
            PathValue::Series {
                axis: a.name,
                x: a.values,
                x_dim: Dim(a.dim),
                y: data,
                y_dim: dim,
            }
        }
        2 => {
            let b = axes.remove(1);
            let a = axes.remove(0);
            PathValue::Map {
                axes: [
                    (a.name, a.values, Dim(a.dim)),
                    (b.name, b.values, Dim(b.dim)),
                ],
                z: data,
                dim,
            }
        }
        n => {
            return Err((
                path.target_span.clone(),
                format!("this result still has {n} axes"),
                Some("select points with `at AXIS = VALUE`".into()),
            ));
        }
    };
    match (path.reduce, value) {
        (None, v) => Ok(v),
        (
            Some(red),
            PathValue::Series {
                x, x_dim, y, y_dim, ..
            },
        ) => Ok(reduce(red, &x, x_dim, &y, y_dim)),
        (Some(_), _) => Err((
            path.target_span.clone(),
            "`max`, `min`, `argmax` and `argmin` need a one-dimensional series".into(),
            Some("select the other axes with `at AXIS = VALUE`".into()),
        )),
    }
}

/// The index of the grid point equal to `x` (to 10⁻⁹ of the axis's largest magnitude), or a hint
/// naming the nearest point.
pub fn grid_index(vals: &[f64], x: f64, dim: Dim) -> Result<usize, String> {
    let scale = vals
        .iter()
        .fold(0.0f64, |m, v| m.max(v.abs()))
        .max(f64::MIN_POSITIVE);
    vals.iter()
        .position(|v| (v - x).abs() <= 1e-9 * scale)
        .ok_or_else(|| {
            let nearest = vals
                .iter()
                .min_by(|a, b| (*a - x).abs().total_cmp(&(*b - x).abs()))
                .copied()
                .unwrap_or(f64::NAN);
            format!(
                "the nearest point is {}",
                expr::format_quantity(nearest, dim)
            )
        })
}

/// Apply a reduction to a series. `argmax`/`argmin` refine the extremum by the parabola through
/// it and its two neighbours (common practice for locating a resonance on a grid).
pub fn reduce(red: Reduce, x: &[f64], x_dim: Dim, y: &[f64], y_dim: Dim) -> PathValue {
    let sign = match red {
        Reduce::Max | Reduce::ArgMax => 1.0,
        Reduce::Min | Reduce::ArgMin => -1.0,
    };
    let k = (0..y.len())
        .max_by(|&a, &b| (sign * y[a]).total_cmp(&(sign * y[b])))
        .unwrap_or(0);
    match red {
        Reduce::Max | Reduce::Min => PathValue::Scalar(y[k], y_dim),
        Reduce::ArgMax | Reduce::ArgMin => {
            let mut at = x[k];
            if k > 0 && k + 1 < y.len() {
                let (y0, y1, y2) = (y[k - 1], y[k], y[k + 1]);
                let denom = y0 - 2.0 * y1 + y2;
                let h = 0.5 * (x[k + 1] - x[k - 1]);
                if denom != 0.0 && (x[k] - x[k - 1] - h).abs() <= 1e-9 * h.abs() {
                    at = x[k] + h * 0.5 * (y0 - y2) / denom;
                }
            }
            PathValue::Scalar(at, x_dim)
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn argmax_refines_a_parabola_exactly() {
        // y = 1 − (x − 0.3)² sampled at integers: the parabola through the top three points is
        // the function itself, so the refined peak is exact.
        let x: Vec<f64> = (-3..=3).map(f64::from).collect();
        let y: Vec<f64> = x.iter().map(|v| 1.0 - (v - 0.3) * (v - 0.3)).collect();
        match reduce(Reduce::ArgMax, &x, Dim::FREQUENCY, &y, Dim::DIMENSIONLESS) {
            PathValue::Scalar(v, d) => {
                assert!((v - 0.3).abs() < 1e-12, "{v}");
                assert_eq!(d, Dim::FREQUENCY);
            }
            v => panic!("{v:?}"),
        }
        assert_eq!(
            reduce(Reduce::Min, &x, Dim::FREQUENCY, &y, Dim::DIMENSIONLESS),
            PathValue::Scalar(y[0], Dim::DIMENSIONLESS)
        );
    }
}
