//! Physical dimensions: integer exponents of the SI base dimensions s, m, kg, A, K.

use std::fmt;

/// Integer exponents of the SI base dimensions, in the order second, metre, kilogram, ampere,
/// kelvin. Radians are dimensionless, so an angular frequency has the dimension of `FREQUENCY`.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub struct Dim(pub [i8; 5]);

/// Index of each base dimension inside [`Dim`]'s array.
const S: usize = 0;
const M: usize = 1;
const KG: usize = 2;
const A: usize = 3;
const K: usize = 4;

/// Symbols in the order the formula prints them: mass first reads like `kg·m²·s⁻²`, the way
/// derived units are usually written out.
const PRINT_ORDER: [(usize, &str); 5] = [(KG, "kg"), (M, "m"), (S, "s"), (A, "A"), (K, "K")];

impl Dim {
    /// A pure number (also angles in rad).
    pub const DIMENSIONLESS: Dim = Dim([0, 0, 0, 0, 0]);
    /// Seconds.
    pub const TIME: Dim = Dim([1, 0, 0, 0, 0]);
    /// s⁻¹: cycle and angular frequencies share it because rad is dimensionless.
    pub const FREQUENCY: Dim = Dim([-1, 0, 0, 0, 0]);
    /// s⁻²: a chirp rate, angular frequency per time.
    pub const FREQUENCY_RATE: Dim = Dim([-2, 0, 0, 0, 0]);
    /// Metres.
    pub const LENGTH: Dim = Dim([0, 1, 0, 0, 0]);
    /// Kilograms.
    pub const MASS: Dim = Dim([0, 0, 1, 0, 0]);
    /// Amperes.
    pub const CURRENT: Dim = Dim([0, 0, 0, 1, 0]);
    /// Kelvin.
    pub const TEMPERATURE: Dim = Dim([0, 0, 0, 0, 1]);
    /// Coulombs, A·s.
    pub const CHARGE: Dim = Dim([1, 0, 0, 1, 0]);
    /// Joules, kg·m²·s⁻².
    pub const ENERGY: Dim = Dim([-2, 2, 1, 0, 0]);
    /// Watts, kg·m²·s⁻³.
    pub const POWER: Dim = Dim([-3, 2, 1, 0, 0]);
    /// Newtons, kg·m·s⁻².
    pub const FORCE: Dim = Dim([-2, 1, 1, 0, 0]);
    /// Volts, kg·m²·s⁻³·A⁻¹.
    pub const VOLTAGE: Dim = Dim([-3, 2, 1, -1, 0]);
    /// Farads, kg⁻¹·m⁻²·s⁴·A².
    pub const CAPACITANCE: Dim = Dim([4, -2, -1, 2, 0]);
    /// V/m, kg·m·s⁻³·A⁻¹.
    pub const ELECTRIC_FIELD: Dim = Dim([-3, 1, 1, -1, 0]);
    /// W/m², kg·s⁻³.
    pub const INTENSITY: Dim = Dim([-3, 0, 1, 0, 0]);
    /// Tesla, kg·s⁻²·A⁻¹.
    pub const MAGNETIC_FIELD: Dim = Dim([-2, 0, 1, -1, 0]);
    /// An electric dipole moment, C·m = m·s·A.
    pub const DIPOLE: Dim = Dim([1, 1, 0, 1, 0]);
    /// A magnetic moment, J/T = m²·A.
    pub const MAGNETIC_MOMENT: Dim = Dim([0, 2, 0, 1, 0]);
    /// An action such as ħ, J·s = kg·m²·s⁻¹.
    pub const ACTION: Dim = Dim([-1, 2, 1, 0, 0]);
    /// A speed, m/s.
    pub const VELOCITY: Dim = Dim([-1, 1, 0, 0, 0]);

    /// Whether every exponent is zero.
    pub fn is_dimensionless(self) -> bool {
        self == Dim::DIMENSIONLESS
    }

    /// The dimension of a product, or `None` if an exponent leaves the `i8` range.
    pub fn checked_mul(self, other: Dim) -> Option<Dim> {
        self.zip(other, i8::checked_add)
    }

    /// The dimension of a quotient, or `None` if an exponent leaves the `i8` range.
    pub fn checked_div(self, other: Dim) -> Option<Dim> {
        self.zip(other, i8::checked_sub)
    }

    /// The dimension raised to `halves / 2`: `halves = 2` is the identity, `1` a square root.
    /// `None` if an exponent would be fractional or leave the `i8` range.
    pub fn pow_halves(self, halves: i64) -> Option<Dim> {
        let mut out = [0i8; 5];
        for (slot, &d) in out.iter_mut().zip(self.0.iter()) {
            let twice = i64::from(d).checked_mul(halves)?;
            if twice % 2 != 0 {
                return None;
            }
            *slot = i8::try_from(twice / 2).ok()?;
        }
        Some(Dim(out))
    }

    fn zip(self, other: Dim, op: fn(i8, i8) -> Option<i8>) -> Option<Dim> {
        let mut out = [0i8; 5];
        for (slot, (&a, &b)) in out.iter_mut().zip(self.0.iter().zip(other.0.iter())) {
            *slot = op(a, b)?;
        }
        Some(Dim(out))
    }

    /// A phrase for messages: "a time", "an angular frequency", …; for dimensions without a
    /// name, the SI formula such as "kg·m·s⁻³·A⁻¹".
    pub fn describe(self) -> String {
        let phrase = match self {
            Dim::DIMENSIONLESS => "a number without dimension",
            Dim::TIME => "a time",
            Dim::FREQUENCY => "an angular frequency",
            Dim::FREQUENCY_RATE => "a chirp rate (angular frequency per time)",
            Dim::LENGTH => "a length",
            Dim::MASS => "a mass",
            Dim::CURRENT => "an electric current",
            Dim::TEMPERATURE => "a temperature",
            Dim::CHARGE => "an electric charge",
            Dim::ENERGY => "an energy",
            Dim::POWER => "a power",
            Dim::FORCE => "a force",
            Dim::VOLTAGE => "a voltage",
            Dim::CAPACITANCE => "a capacitance",
            Dim::ELECTRIC_FIELD => "an electric field",
            Dim::INTENSITY => "an intensity",
            Dim::MAGNETIC_FIELD => "a magnetic field",
            Dim::DIPOLE => "a dipole moment",
            Dim::MAGNETIC_MOMENT => "a magnetic moment",
            Dim::ACTION => "an action (energy × time)",
            Dim::VELOCITY => "a velocity",
            _ => return self.to_string(),
        };
        phrase.to_string()
    }
}

/// Writes `n` with Unicode superscript digits and minus, e.g. `-3` → `⁻³`.
pub(super) fn superscript(n: i64) -> String {
    const DIGITS: [char; 10] = ['⁰', '¹', '²', '³', '⁴', '⁵', '⁶', '⁷', '⁸', '⁹'];
    let mut out = String::new();
    if n < 0 {
        out.push('⁻');
    }
    for c in n.unsigned_abs().to_string().chars() {
        // `to_string` of an integer yields only ASCII digits.
        let digit = c.to_digit(10).unwrap_or(0) as usize;
        out.push(DIGITS[digit]);
    }
    out
}

/// The SI base-unit formula, e.g. `kg·m·s⁻³·A⁻¹`; `1` when dimensionless.
impl fmt::Display for Dim {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let mut parts = Vec::new();
        for (index, symbol) in PRINT_ORDER {
            match self.0[index] {
                0 => {}
                1 => parts.push(symbol.to_string()),
                e => parts.push(format!("{symbol}{}", superscript(i64::from(e)))),
            }
        }
        if parts.is_empty() {
            f.write_str("1")
        } else {
            f.write_str(&parts.join("·"))
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn derived_dimensions_are_consistent() {
        // V/m = W/A/m and W/m² = W·m⁻²: the named constants must agree with their definitions.
        assert_eq!(
            Dim::VOLTAGE.checked_div(Dim::LENGTH),
            Some(Dim::ELECTRIC_FIELD)
        );
        assert_eq!(Dim::POWER.checked_div(Dim::CURRENT), Some(Dim::VOLTAGE));
        let area = Dim::LENGTH.checked_mul(Dim::LENGTH).unwrap();
        assert_eq!(Dim::POWER.checked_div(area), Some(Dim::INTENSITY));
        assert_eq!(
            Dim::ENERGY.checked_div(Dim::MAGNETIC_FIELD),
            Some(Dim::MAGNETIC_MOMENT)
        );
        assert_eq!(Dim::CHARGE.checked_mul(Dim::LENGTH), Some(Dim::DIPOLE));
        assert_eq!(
            Dim::CHARGE.checked_div(Dim::VOLTAGE),
            Some(Dim::CAPACITANCE)
        );
        assert_eq!(Dim::ENERGY.checked_mul(Dim::TIME), Some(Dim::ACTION));
        assert_eq!(
            Dim::FREQUENCY.checked_div(Dim::TIME),
            Some(Dim::FREQUENCY_RATE)
        );
    }

    #[test]
    fn describe_and_display() {
        assert_eq!(Dim::TIME.describe(), "a time");
        assert_eq!(Dim::FREQUENCY.describe(), "an angular frequency");
        assert_eq!(Dim::INTENSITY.describe(), "an intensity");
        assert_eq!(Dim::DIMENSIONLESS.describe(), "a number without dimension");
        assert_eq!(
            Dim::FREQUENCY_RATE.describe(),
            "a chirp rate (angular frequency per time)"
        );
        assert_eq!(Dim::ELECTRIC_FIELD.to_string(), "kg·m·s⁻³·A⁻¹");
        assert_eq!(Dim::FREQUENCY.to_string(), "s⁻¹");
        assert_eq!(Dim::DIMENSIONLESS.to_string(), "1");
        let odd = Dim([-5, 3, 0, 0, 2]);
        assert_eq!(odd.describe(), "m³·s⁻⁵·K²");
    }

    #[test]
    fn powers_and_overflow() {
        assert_eq!(Dim::ENERGY.pow_halves(4), Some(Dim([-4, 4, 2, 0, 0])));
        assert_eq!(Dim::FREQUENCY_RATE.pow_halves(1), Some(Dim::FREQUENCY));
        assert_eq!(Dim::TIME.pow_halves(1), None);
        assert_eq!(
            Dim([100, 0, 0, 0, 0]).checked_mul(Dim([100, 0, 0, 0, 0])),
            None
        );
        assert_eq!(Dim::LENGTH.pow_halves(2 * 200), None);
        assert_eq!(superscript(-12), "⁻¹²");
    }
}
