//! Axis units for figures: each SI column is shown in a unit a person reads (angular frequencies
//! divided by 2π in Hz, times in µs, …) with one prefix for the whole axis.

use std::f64::consts::TAU;

use crate::notebook::expr::Dim;

/// Prefixes from femto to peta; index 5 is none. The same range as the text summary's.
const PREFIXES: [&str; 11] = ["f", "p", "n", "µ", "m", "", "k", "M", "G", "T", "P"];

/// How an axis shows SI values: multiply by `factor`, then read in `unit`.
#[derive(Clone, Debug, PartialEq)]
pub(crate) struct Scale {
    /// Shown value = SI value × factor.
    pub factor: f64,
    /// The unit with its prefix, empty for pure numbers.
    pub unit: String,
    /// The axis shows the quantity divided by 2π (angular frequencies and chirp rates).
    pub per_2pi: bool,
}

/// The base unit of a dimension, with the factor from SI to it and whether 2π is divided out;
/// `None` for pure numbers.
fn base(dim: Dim) -> Option<(f64, String, bool)> {
    let unit = |u: &str| Some((1.0, u.to_string(), false));
    match dim {
        Dim::DIMENSIONLESS => None,
        Dim::FREQUENCY => Some((1.0 / TAU, "Hz".into(), true)),
        Dim::FREQUENCY_RATE => Some((1.0 / TAU, "Hz/s".into(), true)),
        Dim::TIME => unit("s"),
        Dim::LENGTH => unit("m"),
        Dim::TEMPERATURE => unit("K"),
        // Bias fields are quoted in gauss: 1 T = 10⁴ G.
        Dim::MAGNETIC_FIELD => Some((1e4, "G".into(), false)),
        Dim::ELECTRIC_FIELD => unit("V/m"),
        Dim::VOLTAGE => unit("V"),
        Dim::POWER => unit("W"),
        Dim::CURRENT => unit("A"),
        // Laser intensities are quoted per cm²: 1 W/m² = 10⁻⁴ W/cm².
        Dim::INTENSITY => Some((1e-4, "W/cm²".into(), false)),
        // Without a named unit the SI formula is shown, unprefixed, as the summary does.
        other => Some((f64::NAN, other.to_string(), false)),
    }
}

/// The scale for values of `dim` whose largest magnitude is `max_abs` (SI).
pub(crate) fn scale(dim: [i8; 5], max_abs: f64) -> Scale {
    let Some((factor, unit, per_2pi)) = base(Dim(dim)) else {
        return Scale {
            factor: 1.0,
            unit: String::new(),
            per_2pi: false,
        };
    };
    if factor.is_nan() {
        return Scale {
            factor: 1.0,
            unit,
            per_2pi,
        };
    }
    let top = max_abs * factor;
    let group = if top.is_finite() && top > 0.0 {
        (top.log10().floor() as i32).div_euclid(3).clamp(-5, 5)
    } else {
        0
    };
    let prefix = usize::try_from(group + 5)
        .ok()
        .and_then(|i| PREFIXES.get(i))
        .copied()
        .unwrap_or("");
    Scale {
        factor: factor * 10f64.powi(-3 * group),
        unit: format!("{prefix}{unit}"),
        per_2pi,
    }
}

/// The scale fitting all finite `values` of `dim`.
pub(crate) fn scale_for(dim: [i8; 5], values: &[f64]) -> Scale {
    let max_abs = values
        .iter()
        .filter(|v| v.is_finite())
        .fold(0.0f64, |m, v| m.max(v.abs()));
    scale(dim, max_abs)
}

/// An axis title: `delta/2π (kHz)`, `len (µs)`, or the bare label for pure numbers.
pub(crate) fn axis_title(label: &str, s: &Scale) -> String {
    let quantity = if s.per_2pi {
        format!("{label}/2π")
    } else {
        label.to_string()
    };
    if s.unit.is_empty() {
        quantity
    } else {
        format!("{quantity} ({})", s.unit)
    }
}

/// A tick label: at most 4 significant figures, without trailing zeros.
pub(crate) fn tick(v: f64) -> String {
    if v == 0.0 || !v.is_finite() {
        return if v.is_finite() {
            "0".into()
        } else {
            v.to_string()
        };
    }
    let rounded: f64 = format!("{v:.3e}").parse().unwrap_or(v);
    if (1e-3..1e5).contains(&rounded.abs()) {
        rounded.to_string()
    } else {
        format!("{rounded:e}")
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn angular_frequencies_read_in_hz_with_a_prefix() {
        let s = scale([-1, 0, 0, 0, 0], TAU * 100e3);
        assert_eq!(s.unit, "kHz");
        assert!((s.factor * TAU * 100e3 - 100.0).abs() < 1e-9);
        assert_eq!(axis_title("delta", &s), "delta/2π (kHz)");
    }

    #[test]
    fn times_numbers_and_other_dimensions() {
        let t = scale([1, 0, 0, 0, 0], 60e-6);
        assert_eq!(axis_title("time", &t), "time (µs)");
        assert!((t.factor - 1e6).abs() < 1e-3);
        assert_eq!(
            axis_title("population(e)", &scale([0; 5], 1.0)),
            "population(e)"
        );
        let odd = scale([2, 0, 0, 0, 0], 3.0);
        assert_eq!(odd.factor, 1.0);
        assert!(!odd.unit.is_empty());
    }

    #[test]
    fn ticks_keep_four_figures() {
        assert_eq!(tick(0.0), "0");
        assert_eq!(tick(12.345678), "12.35");
        assert_eq!(tick(-2.5), "-2.5");
        assert_eq!(tick(1.5e-7), "1.5e-7");
    }
}
