//! The built-in vocabulary: units with SI prefixes, physical constants and function names.

use std::f64::consts::PI;

use super::dim::Dim;

/// A unit or constant resolved to its SI value.
#[derive(Clone, Copy, Debug, PartialEq)]
pub(super) struct Known {
    /// Value in SI base units.
    pub value: f64,
    /// Its dimension.
    pub dim: Dim,
    /// A unit (as opposed to a constant): only units trigger unit-first resolution of the
    /// identifier after them.
    pub is_unit: bool,
    /// A Hz-based unit (Hz, kHz, MHz, …), for the "Hz without 2π" warning.
    pub is_hz: bool,
    /// π or h: a product containing either uses its Hz unit deliberately (`2π × 5 MHz` is
    /// angular, `h × 5 MHz` is an energy), which clears that warning.
    pub clears_hz: bool,
}

/// Planck constant in J·s, exact by the definition of the SI (SI brochure, 9th ed., 2019).
const PLANCK: f64 = 6.626_070_15e-34;
/// Elementary charge in C, exact by the definition of the SI (SI brochure, 9th ed., 2019).
const ELEMENTARY_CHARGE: f64 = 1.602_176_634e-19;
/// Atomic mass constant in kg, CODATA 2018 recommended value.
const ATOMIC_MASS: f64 = 1.660_539_066_60e-27;

/// (names, value in SI, dimension, clears the Hz warning). Values are CODATA 2018 recommended values
/// (E. Tiesinga et al., Rev. Mod. Phys. 93, 025010 (2021)); h, c, e and k_B are exact by the
/// 2019 definition of the SI (SI brochure, 9th ed.).
const CONSTANTS: &[(&[&str], f64, Dim, bool)] = &[
    (&["π", "pi"], PI, Dim::DIMENSIONLESS, true),
    (&["ħ", "ℏ", "hbar"], PLANCK / (2.0 * PI), Dim::ACTION, false),
    (&["h"], PLANCK, Dim::ACTION, true),
    // Speed of light in m/s, exact.
    (&["c"], 299_792_458.0, Dim::VELOCITY, false),
    // Vacuum permittivity in F/m, CODATA 2018 (measured since 2019).
    (
        &["ε₀", "eps0"],
        8.854_187_812_8e-12,
        Dim([4, -3, -1, 2, 0]),
        false,
    ),
    (&["e"], ELEMENTARY_CHARGE, Dim::CHARGE, false),
    // Bohr radius in m, CODATA 2018.
    (&["a₀", "a0"], 5.291_772_109_03e-11, Dim::LENGTH, false),
    // Bohr magneton in J/T, CODATA 2018.
    (
        &["μ_B", "µ_B", "mu_B"],
        9.274_010_078_3e-24,
        Dim::MAGNETIC_MOMENT,
        false,
    ),
    // Boltzmann constant in J/K, exact.
    (&["k_B", "kB"], 1.380_649e-23, Dim([-2, 2, 1, 0, -1]), false),
    // Electron mass in kg, CODATA 2018.
    (&["m_e"], 9.109_383_701_5e-31, Dim::MASS, false),
];

/// (name, SI factor, dimension, takes SI prefixes). Bare `g` is deliberately absent: `kg` is
/// the SI unit, and `g` would clash with names people give parameters.
const UNITS: &[(&str, f64, Dim, bool)] = &[
    ("s", 1.0, Dim::TIME, true),
    ("m", 1.0, Dim::LENGTH, true),
    ("kg", 1.0, Dim::MASS, false),
    ("Hz", 1.0, Dim::FREQUENCY, true),
    ("rad", 1.0, Dim::DIMENSIONLESS, true),
    ("deg", PI / 180.0, Dim::DIMENSIONLESS, false),
    ("V", 1.0, Dim::VOLTAGE, true),
    ("W", 1.0, Dim::POWER, true),
    ("J", 1.0, Dim::ENERGY, true),
    ("eV", ELEMENTARY_CHARGE, Dim::ENERGY, true),
    ("C", 1.0, Dim::CHARGE, true),
    ("A", 1.0, Dim::CURRENT, true),
    ("T", 1.0, Dim::MAGNETIC_FIELD, true),
    // Gauss: 1 G = 10⁻⁴ T by definition of the CGS-Gaussian unit.
    ("G", 1e-4, Dim::MAGNETIC_FIELD, true),
    ("K", 1.0, Dim::TEMPERATURE, true),
    ("N", 1.0, Dim::FORCE, true),
    ("F", 1.0, Dim::CAPACITANCE, true),
    ("amu", ATOMIC_MASS, Dim::MASS, false),
    ("Da", ATOMIC_MASS, Dim::MASS, false),
];

/// SI prefixes (SI brochure, 9th ed., table 7, plus ronto/quecto from 2022). `u` stands in
/// for micro; both the micro sign U+00B5 and Greek mu U+03BC are accepted.
const PREFIXES: &[(&str, f64)] = &[
    ("q", 1e-30),
    ("r", 1e-27),
    ("y", 1e-24),
    ("z", 1e-21),
    ("a", 1e-18),
    ("f", 1e-15),
    ("p", 1e-12),
    ("n", 1e-9),
    ("µ", 1e-6),
    ("μ", 1e-6),
    ("u", 1e-6),
    ("m", 1e-3),
    ("c", 1e-2),
    ("d", 1e-1),
    ("k", 1e3),
    ("M", 1e6),
    ("G", 1e9),
    ("T", 1e12),
    ("P", 1e15),
];

/// Centi and deci are only used on metres (`cm`, `dm`): elsewhere they would turn likely
/// parameter names such as `dT` or `dV` into units.
fn prefix_allowed(prefix: &str, unit: &str) -> bool {
    !matches!(prefix, "c" | "d") || unit == "m"
}

/// The constant with this name.
pub(super) fn constant(name: &str) -> Option<Known> {
    CONSTANTS
        .iter()
        .find(|(names, ..)| names.contains(&name))
        .map(|&(_, value, dim, clears_hz)| Known {
            value,
            dim,
            is_unit: false,
            is_hz: false,
            clears_hz,
        })
}

/// The unit with this name: an exact unit name first (so `G` is gauss and `m` is metre), then
/// an SI prefix followed by a prefixable unit (`GHz`, `mG`, `µs`, `cm`).
pub(super) fn unit(name: &str) -> Option<Known> {
    let make = |factor: f64, dim: Dim, base: &str| Known {
        value: factor,
        dim,
        is_unit: true,
        is_hz: base == "Hz",
        clears_hz: false,
    };
    if let Some(&(base, factor, dim, _)) = UNITS.iter().find(|u| u.0 == name) {
        return Some(make(factor, dim, base));
    }
    PREFIXES.iter().find_map(|&(prefix, scale)| {
        let rest = name.strip_prefix(prefix)?;
        let &(base, factor, dim, prefixable) = UNITS.iter().find(|u| u.0 == rest)?;
        (prefixable && prefix_allowed(prefix, base)).then(|| make(scale * factor, dim, base))
    })
}

/// How many arguments a function takes.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(super) enum Arity {
    One,
    AtLeastTwo,
}

/// The built-in functions.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(super) enum Func {
    Sqrt,
    Exp,
    Ln,
    Log10,
    Sin,
    Cos,
    Tan,
    Tanh,
    Sech,
    Erf,
    Erfc,
    Abs,
    Min,
    Max,
}

const FUNCTIONS: &[(&str, Func)] = &[
    ("sqrt", Func::Sqrt),
    ("exp", Func::Exp),
    ("ln", Func::Ln),
    ("log10", Func::Log10),
    ("sin", Func::Sin),
    ("cos", Func::Cos),
    ("tan", Func::Tan),
    ("tanh", Func::Tanh),
    ("sech", Func::Sech),
    ("erf", Func::Erf),
    ("erfc", Func::Erfc),
    ("abs", Func::Abs),
    ("min", Func::Min),
    ("max", Func::Max),
];

impl Func {
    /// The function with this name.
    pub(super) fn named(name: &str) -> Option<Func> {
        FUNCTIONS.iter().find(|f| f.0 == name).map(|f| f.1)
    }

    /// Its name as written.
    pub(super) fn name(self) -> &'static str {
        FUNCTIONS.iter().find(|f| f.1 == self).map_or("?", |f| f.0)
    }

    pub(super) fn arity(self) -> Arity {
        match self {
            Func::Min | Func::Max => Arity::AtLeastTwo,
            _ => Arity::One,
        }
    }

    /// Whether the argument must be a number without dimension.
    pub(super) fn needs_dimensionless(self) -> bool {
        !matches!(self, Func::Sqrt | Func::Abs | Func::Min | Func::Max)
    }

    /// The function of one argument on plain numbers (min and max fold pairwise instead).
    pub(super) fn apply(self, x: f64) -> f64 {
        match self {
            Func::Sqrt => x.sqrt(),
            Func::Exp => x.exp(),
            Func::Ln => x.ln(),
            Func::Log10 => x.log10(),
            Func::Sin => x.sin(),
            Func::Cos => x.cos(),
            Func::Tan => x.tan(),
            Func::Tanh => x.tanh(),
            // cosh overflows to inf for |x| > 710, and 1/inf = 0 is the right limit.
            Func::Sech => 1.0 / x.cosh(),
            Func::Erf => fieldbook_runtime::envelope::erf(x),
            // 1 − erf keeps ~1e-16 absolute accuracy, so relative accuracy fades beyond x ≈ 5.
            Func::Erfc => 1.0 - fieldbook_runtime::envelope::erf(x),
            Func::Abs => x.abs(),
            Func::Min => x,
            Func::Max => x,
        }
    }

    /// The pairwise fold for min and max.
    pub(super) fn fold(self, a: f64, b: f64) -> f64 {
        if self == Func::Min {
            a.min(b)
        } else {
            a.max(b)
        }
    }
}

/// All function names, for messages.
pub(super) fn function_names() -> Vec<&'static str> {
    FUNCTIONS.iter().map(|f| f.0).collect()
}

/// Every name the language knows without an environment: constants, units (with the
/// prefixed forms people typically mistype) and functions, for "did you mean" suggestions.
pub(super) fn builtin_names() -> Vec<String> {
    let mut names: Vec<String> = CONSTANTS
        .iter()
        .flat_map(|c| c.0.iter().map(|n| n.to_string()))
        .collect();
    for &(base, _, _, prefixable) in UNITS {
        names.push(base.to_string());
        if prefixable {
            for &(prefix, _) in PREFIXES {
                if prefix_allowed(prefix, base) {
                    names.push(format!("{prefix}{base}"));
                }
            }
        }
    }
    names.extend(FUNCTIONS.iter().map(|f| f.0.to_string()));
    names
}

/// The candidate closest to `word`, if it is close enough to be a plausible typo. A
/// case-insensitive match wins outright, the one needing fewest case changes first (`Mhz` →
/// `MHz`, not `mHz`); otherwise the edit distance must be
/// small for the word's length, so one-letter names get no far-fetched suggestions.
pub(super) fn closest(word: &str, candidates: &[String]) -> Option<String> {
    let lower = word.to_lowercase();
    let same_letters = candidates
        .iter()
        .filter(|c| c.as_str() != word && c.to_lowercase() == lower)
        .min_by_key(|c| strsim::osa_distance(word, c));
    if let Some(c) = same_letters {
        return Some(c.clone());
    }
    let len = word.chars().count();
    let limit = match len {
        0..=2 => return None,
        3..=5 => 1,
        _ => 2,
    };
    candidates
        .iter()
        .map(|c| (strsim::osa_distance(word, c), c))
        .filter(|(d, _)| *d <= limit && *d > 0)
        .min_by_key(|(d, _)| *d)
        .map(|(_, c)| c.clone())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn si(name: &str) -> f64 {
        unit(name).map_or(f64::NAN, |k| k.value)
    }

    fn close(a: f64, b: f64) -> bool {
        (a - b).abs() <= 1e-12 * b.abs()
    }

    #[test]
    fn exact_names_win_over_prefixes() {
        assert_eq!(unit("G").map(|k| k.dim), Some(Dim::MAGNETIC_FIELD));
        assert_eq!(unit("T").map(|k| k.dim), Some(Dim::MAGNETIC_FIELD));
        assert_eq!(unit("m").map(|k| k.dim), Some(Dim::LENGTH));
        assert!(close(si("G"), 1e-4));
        assert!(close(si("mG"), 1e-7));
        assert!(close(si("GHz"), 1e9));
        assert!(close(si("THz"), 1e12));
        assert!(close(si("cm"), 1e-2));
        assert!(close(si("nm"), 1e-9));
        assert!(close(si("mm"), 1e-3));
        assert!(close(si("keV"), 1e3 * ELEMENTARY_CHARGE));
        assert!(close(si("rad"), 1.0));
        assert!(close(si("deg"), PI / 180.0));
    }

    #[test]
    fn all_three_micro_spellings() {
        for name in ["µs", "μs", "us"] {
            assert!(close(si(name), 1e-6), "{name}");
        }
        assert!(close(si("µK"), 1e-6));
        assert!(constant("µ_B").is_some() && constant("μ_B") == constant("µ_B"));
    }

    #[test]
    fn names_that_are_not_units() {
        for name in ["g", "mg", "dT", "cs", "kB", "kkg", "mamu", "Hzz", "", "µ"] {
            assert_eq!(unit(name), None, "{name}");
        }
        assert!(unit("Hz").is_some_and(|k| k.is_hz));
        assert!(unit("kHz").is_some_and(|k| k.is_hz));
        assert!(unit("kV").is_some_and(|k| !k.is_hz));
        assert!(constant("pi").is_some_and(|k| k.clears_hz));
        assert!(constant("hbar").is_some_and(|k| !k.clears_hz));
    }

    #[test]
    fn suggestions() {
        let names = builtin_names();
        assert_eq!(closest("Mhz", &names).as_deref(), Some("MHz"));
        assert_eq!(closest("hbarr", &names).as_deref(), Some("hbar"));
        assert_eq!(closest("sqr", &names).as_deref(), Some("sqrt"));
        assert_eq!(closest("x", &names), None);
        assert_eq!(closest("zzzzzz", &names), None);
    }
}
