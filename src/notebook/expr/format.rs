//! Human-readable quantities and the "Hz without 2π" warning.

use std::f64::consts::TAU;

use super::dim::{Dim, superscript};
use super::{Quantity, Span};

/// Prefixes for printing, from femto to peta; outside that range numbers go scientific.
const PRINT_PREFIXES: [&str; 11] = ["f", "p", "n", "µ", "m", "", "k", "M", "G", "T", "P"];

/// `|v|` rounded to 4 significant figures, as a mantissa in [1, 10) and a power of ten.
fn sig4(v: f64) -> (f64, i32) {
    let text = format!("{:.3e}", v.abs());
    let (mantissa, exponent) = text.split_once('e').unwrap_or((&text, "0"));
    (
        mantissa.parse().unwrap_or(0.0),
        exponent.parse().unwrap_or(0),
    )
}

/// Drops trailing zeros after a decimal point: `5.000` → `5`, `2.500` → `2.5`.
fn trim_zeros(s: String) -> String {
    if s.contains('.') {
        s.trim_end_matches('0').trim_end_matches('.').to_string()
    } else {
        s
    }
}

fn sign(v: f64) -> &'static str {
    if v < 0.0 { "-" } else { "" }
}

/// `m` scaled by `10^shift` (0, 1 or 2) with 4 significant figures in all.
fn digits(m: f64, shift: i32, trim: bool) -> String {
    let decimals = usize::try_from(3 - shift).unwrap_or(0);
    let text = format!("{:.decimals$}", m * 10f64.powi(shift));
    if trim { trim_zeros(text) } else { text }
}

/// 4 significant figures in scientific notation: `3.142×10⁷`.
fn scientific(v: f64, trim: bool) -> String {
    let (m, e) = sig4(v);
    let mantissa = digits(m, 0, trim);
    if e == 0 {
        format!("{}{mantissa}", sign(v))
    } else {
        format!("{}{mantissa}×10{}", sign(v), superscript(i64::from(e)))
    }
}

/// 4 significant figures without an exponent when the value is between 10⁻³ and 10⁴.
fn plain(v: f64, trim: bool) -> String {
    if v == 0.0 {
        return "0".to_string();
    }
    let (m, e) = sig4(v);
    if !(-3..=3).contains(&e) {
        return scientific(v, trim);
    }
    let decimals = usize::try_from(3 - e).unwrap_or(0);
    let text = format!("{}{:.decimals$}", sign(v), m * 10f64.powi(e));
    if trim { trim_zeros(text) } else { text }
}

/// `v` in `unit` with an SI prefix so that 1 ≤ mantissa < 1000: `780.2 nm`.
fn prefixed(v: f64, unit: &str, trim: bool) -> String {
    if v == 0.0 {
        return format!("0 {unit}");
    }
    let (m, e) = sig4(v);
    let group = e.div_euclid(3);
    // Index 5 is the empty prefix.
    match usize::try_from(group + 5)
        .ok()
        .and_then(|i| PRINT_PREFIXES.get(i))
    {
        Some(prefix) => format!(
            "{}{} {prefix}{unit}",
            sign(v),
            digits(m, e - 3 * group, trim)
        ),
        None => format!("{} {unit}", scientific(v, trim)),
    }
}

/// A value for people: 4 significant figures with a fitting unit and prefix. Angular
/// frequencies (rad/s) print as `2π × 5.000 MHz`, chirp rates as `2π × 1.000 THz/s`, times as
/// `1.200 µs`, lengths as `780.2 nm`, intensities as `10.00 mW/cm²`, temperatures as
/// `300.0 µK`, numbers as `0.9999`; other dimensions as a number and their SI formula.
pub fn format_quantity(value: f64, dim: Dim) -> String {
    if !value.is_finite() {
        return format!("{value} {dim}");
    }
    match dim {
        Dim::DIMENSIONLESS => plain(value, false),
        Dim::FREQUENCY if value == 0.0 => "0 rad/s".to_string(),
        Dim::FREQUENCY => format!(
            "{}2π × {}",
            sign(value),
            prefixed(value.abs() / TAU, "Hz", false)
        ),
        Dim::FREQUENCY_RATE if value == 0.0 => "0 rad/s²".to_string(),
        Dim::FREQUENCY_RATE => format!(
            "{}2π × {}",
            sign(value),
            prefixed(value.abs() / TAU, "Hz/s", false)
        ),
        Dim::TIME => prefixed(value, "s", false),
        Dim::LENGTH => prefixed(value, "m", false),
        Dim::TEMPERATURE => prefixed(value, "K", false),
        // Bias and trap fields are quoted in gauss: 1 G = 10⁻⁴ T.
        Dim::MAGNETIC_FIELD => prefixed(value * 1e4, "G", false),
        Dim::ELECTRIC_FIELD => prefixed(value, "V/m", false),
        Dim::VOLTAGE => prefixed(value, "V", false),
        Dim::POWER => prefixed(value, "W", false),
        Dim::CURRENT => prefixed(value, "A", false),
        // 1 W/m² = 10⁻⁴ W/cm², the unit laser intensities are quoted in.
        Dim::INTENSITY => prefixed(value * 1e-4, "W/cm²", false),
        Dim::ENERGY => format!("{} J", scientific(value, false)),
        Dim::MASS => format!("{} kg", scientific(value, false)),
        Dim::DIPOLE => format!("{} C·m", scientific(value, false)),
        _ => format!("{} {dim}", scientific(value, false)),
    }
}

/// A warning for an angular frequency (or chirp rate) written in Hz with no 2π, if `q`
/// carries that flag and is not zero; other dimensions never warn, since `h × 5 MHz` or
/// `5 MHz × 1 µs` use Hz deliberately. The span is that of the Hz unit, in the source of the
/// expression that wrote it. The message names both readings, e.g. "`5 MHz` is read as
/// 5×10⁶ rad/s (an angular frequency of 2π × 795.8 kHz); if you meant a cycle frequency of
/// 5 MHz, write `2π × 5 MHz`".
pub fn bare_hz_warning(q: &Quantity) -> Option<(Span, String)> {
    let span = q.bare_hz.clone()?;
    if q.value == 0.0 || !q.value.is_finite() {
        return None;
    }
    let message = match q.dim {
        Dim::FREQUENCY => {
            let cycles = prefixed(q.value, "Hz", true);
            let magnitude = prefixed(q.value.abs(), "Hz", true);
            format!(
                "`{cycles}` is read as {} rad/s (an angular frequency of {}); if you meant a cycle frequency of {cycles}, write `{}2π × {magnitude}`",
                plain(q.value, true),
                format_quantity(q.value, Dim::FREQUENCY),
                sign(q.value)
            )
        }
        Dim::FREQUENCY_RATE => format!(
            "a chirp rate of {} written without 2π is read as {} rad/s² ({}); if you meant cycles, multiply it by `2π`",
            prefixed(q.value, "Hz/s", true),
            plain(q.value, true),
            format_quantity(q.value, Dim::FREQUENCY_RATE)
        ),
        _ => return None,
    };
    Some((span, message))
}

/// A typical way to write a value of this dimension, for hints.
pub(super) fn example(dim: Dim) -> Option<&'static str> {
    Some(match dim {
        Dim::DIMENSIONLESS => "0.5",
        Dim::TIME => "1.2 µs",
        Dim::FREQUENCY => "2π × 250 kHz",
        Dim::FREQUENCY_RATE => "2π × 1 MHz/µs",
        Dim::LENGTH => "780.24 nm",
        Dim::MASS => "87 amu",
        Dim::TEMPERATURE => "300 µK",
        Dim::MAGNETIC_FIELD => "3 G",
        Dim::ELECTRIC_FIELD => "6.0 V/m",
        Dim::INTENSITY => "10 mW/cm^2",
        Dim::ENERGY => "h × 5 MHz",
        Dim::DIPOLE => "2.5 e a0",
        _ => return None,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn formats() {
        let two_pi_5mhz = TAU * 5e6;
        assert_eq!(
            format_quantity(two_pi_5mhz, Dim::FREQUENCY),
            "2π × 5.000 MHz"
        );
        assert_eq!(
            format_quantity(-two_pi_5mhz, Dim::FREQUENCY),
            "-2π × 5.000 MHz"
        );
        assert_eq!(format_quantity(1.2e-6, Dim::TIME), "1.200 µs");
        assert_eq!(format_quantity(780.24e-9, Dim::LENGTH), "780.2 nm");
        assert_eq!(format_quantity(100.0, Dim::INTENSITY), "10.00 mW/cm²");
        assert_eq!(format_quantity(300e-6, Dim::TEMPERATURE), "300.0 µK");
        assert_eq!(format_quantity(0.99991, Dim::DIMENSIONLESS), "0.9999");
        assert_eq!(format_quantity(12346.0, Dim::DIMENSIONLESS), "1.235×10⁴");
        assert_eq!(format_quantity(0.0, Dim::TIME), "0 s");
        assert_eq!(format_quantity(3e-4, Dim::MAGNETIC_FIELD), "3.000 G");
        assert_eq!(format_quantity(1e-5, Dim::MAGNETIC_FIELD), "100.0 mG");
        // Rounding up to the next prefix: 999.96 ns is 1.000 µs at 4 figures.
        assert_eq!(format_quantity(999.96e-9, Dim::TIME), "1.000 µs");
        assert_eq!(format_quantity(1.443e-25, Dim::MASS), "1.443×10⁻²⁵ kg");
        assert_eq!(
            format_quantity(2.0, Dim([1, 1, 1, 1, 1])),
            "2.000 kg·m·s·A·K"
        );
        assert_eq!(format_quantity(1e-20, Dim::TIME), "1.000×10⁻²⁰ s");
    }

    #[test]
    fn warning_names_both_readings() {
        let q = Quantity {
            value: 5e6,
            dim: Dim::FREQUENCY,
            bare_hz: Some(2..5),
        };
        let (span, message) = bare_hz_warning(&q).unwrap();
        assert_eq!(span, 2..5);
        assert_eq!(
            message,
            "`5 MHz` is read as 5×10⁶ rad/s (an angular frequency of 2π × 795.8 kHz); \
             if you meant a cycle frequency of 5 MHz, write `2π × 5 MHz`"
        );
        let negative = Quantity {
            value: -2.5e3,
            ..q.clone()
        };
        let (_, message) = bare_hz_warning(&negative).unwrap();
        assert!(message.ends_with("write `-2π × 2.5 kHz`"), "{message}");
        let zero = Quantity {
            value: 0.0,
            ..q.clone()
        };
        assert_eq!(bare_hz_warning(&zero), None);
        let energy = Quantity {
            dim: Dim::ENERGY,
            ..q.clone()
        };
        assert_eq!(bare_hz_warning(&energy), None);
        let chirp = Quantity {
            value: 1e12,
            dim: Dim::FREQUENCY_RATE,
            ..q
        };
        let (_, message) = bare_hz_warning(&chirp).unwrap();
        assert_eq!(
            message,
            "a chirp rate of 1 THz/s written without 2π is read as 1×10¹² rad/s² \
             (2π × 159.2 GHz/s); if you meant cycles, multiply it by `2π`"
        );
    }
}
