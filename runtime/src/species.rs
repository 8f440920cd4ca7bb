//! A table of published constants for the alkali D lines, from which [`Species::line`] builds a
//! [`Line`] ready to expand into Zeeman sublevels.
//!
//! Sources, cited per species below: D. A. Steck's D-line data notes (*Cesium D Line Data*,
//! *Rubidium 87 D Line Data*, *Rubidium 85 D Line Data*, *Sodium D Line Data*); T. G. Tiecke,
//! *Properties of Potassium* (2011); M. E. Gehm, *Properties of ⁶Li* (2003); E. Arimondo,
//! M. Inguscio and P. Violino, Rev. Mod. Phys. 49, 31 (1977) for hyperfine constants; the NIST
//! atomic spectra database for wavelengths; the AME2016 atomic mass evaluation (via those notes)
//! for masses. **Every number here was recalled from those compilations, not copied from a file
//! at hand**: the tests check what can be checked against the outside world (masses against the
//! `periodictable` package, the Cs clock frequency that defines the second, the ⁸⁷Rb saturation
//! intensity), and the rest should be verified against the cited tables before precision work.
//!
//! Units as everywhere: hyperfine constants as angular frequencies (stored here as h × MHz and
//! converted), wavelengths in vacuum (m), lifetimes (s), masses in unified atomic mass units.

use std::f64::consts::TAU;

use crate::error::Error;
use crate::field::C_LIGHT;
use crate::manifold::Line;
use crate::zeeman::Hyperfine;

/// The unified atomic mass unit (kg), CODATA 2018.
pub const ATOMIC_MASS_UNIT: f64 = 1.660_539_066_60e-27;

/// Which D line.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum DLine {
    /// n²S₁/₂ → n²P₁/₂.
    D1,
    /// n²S₁/₂ → n²P₃/₂.
    D2,
}

/// Constants of one fine-structure level.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct LevelData {
    /// Magnetic-dipole hyperfine constant A/h (MHz).
    pub a_mhz: f64,
    /// Electric-quadrupole constant B/h (MHz); 0 for J = 1/2.
    pub b_mhz: f64,
    /// Landé g_J.
    pub g_j: f64,
}

/// Constants of one optical line.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct LineData {
    /// Vacuum wavelength (nm).
    pub lambda_nm: f64,
    /// Excited-state lifetime (ns).
    pub tau_ns: f64,
}

/// One species.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Species {
    /// Name, e.g. `87Rb`.
    pub name: &'static str,
    /// Atomic mass (u).
    pub mass_u: f64,
    /// 2I.
    pub two_i: i32,
    /// Nuclear g-factor g_I (units of μ_B, Steck's sign convention).
    pub g_i: f64,
    /// n²S₁/₂.
    pub ground: LevelData,
    /// n²P₁/₂.
    pub p12: LevelData,
    /// n²P₃/₂.
    pub p32: LevelData,
    /// D1.
    pub d1: LineData,
    /// D2.
    pub d2: LineData,
    /// Where the numbers come from.
    pub source: &'static str,
}

const fn lv(a_mhz: f64, b_mhz: f64, g_j: f64) -> LevelData {
    LevelData { a_mhz, b_mhz, g_j }
}

const fn ln(lambda_nm: f64, tau_ns: f64) -> LineData {
    LineData { lambda_nm, tau_ns }
}

/// The table. Values recalled from the sources named in each entry (see the module docs).
pub const SPECIES: &[Species] = &[
    Species {
        name: "6Li",
        mass_u: 6.015_122_887_4,
        two_i: 2,
        g_i: -0.000_447_654_0,
        ground: lv(152.136_840_7, 0.0, 2.002_301_0),
        p12: lv(17.386, 0.0, 0.666_8),
        p32: lv(-1.155, -0.10, 1.335),
        d1: ln(670.991_6, 27.102),
        d2: ln(670.976_6, 27.102),
        source: "Gehm, Properties of 6Li (2003); Arimondo et al. 1977",
    },
    Species {
        name: "7Li",
        mass_u: 7.016_003_436_6,
        two_i: 3,
        g_i: -0.001_182_213,
        ground: lv(401.752_043_3, 0.0, 2.002_301_0),
        p12: lv(45.914, 0.0, 0.666_8),
        p32: lv(-3.055, -0.221, 1.335),
        d1: ln(670.976_2, 27.102),
        d2: ln(670.961_2, 27.102),
        source: "Arimondo et al. 1977; NIST ASD",
    },
    Species {
        name: "23Na",
        mass_u: 22.989_769_282,
        two_i: 3,
        g_i: -0.000_804_610_8,
        ground: lv(885.813_064_4, 0.0, 2.002_296_00),
        p12: lv(94.44, 0.0, 0.665_81),
        p32: lv(18.534, 2.724, 1.334_2),
        d1: ln(589.755_814_7, 16.299),
        d2: ln(589.158_326_4, 16.249_2),
        source: "Steck, Sodium D Line Data (rev. 2.2)",
    },
    Species {
        name: "39K",
        mass_u: 38.963_706_486_4,
        two_i: 3,
        g_i: -0.000_141_934_89,
        ground: lv(230.859_860_1, 0.0, 2.002_294_21),
        p12: lv(27.775, 0.0, 0.665_8),
        p32: lv(6.093, 2.786, 1.334_1),
        d1: ln(770.108_385_049, 26.72),
        d2: ln(766.700_921_822, 26.37),
        source: "Tiecke, Properties of Potassium (2011)",
    },
    Species {
        name: "40K",
        mass_u: 39.963_998_166,
        two_i: 8,
        g_i: 0.000_176_490,
        ground: lv(-285.730_8, 0.0, 2.002_294_21),
        p12: lv(-34.523, 0.0, 0.665_8),
        p32: lv(-7.585, -3.445, 1.334_1),
        d1: ln(770.108_136_507, 26.72),
        d2: ln(766.700_674_872, 26.37),
        source: "Tiecke, Properties of Potassium (2011)",
    },
    Species {
        name: "85Rb",
        mass_u: 84.911_789_737_9,
        two_i: 5,
        g_i: -0.000_293_640_0,
        ground: lv(1_011.910_813_0, 0.0, 2.002_331_13),
        p12: lv(120.527, 0.0, 0.666),
        p32: lv(25.002_0, 25.790, 1.336_2),
        d1: ln(794.979_014_933, 27.679),
        d2: ln(780.241_368_271, 26.234_8),
        source: "Steck, Rubidium 85 D Line Data (rev. 2.2)",
    },
    Species {
        name: "87Rb",
        mass_u: 86.909_180_531_0,
        two_i: 3,
        g_i: -0.000_995_141_4,
        ground: lv(3_417.341_305_452_15, 0.0, 2.002_331_13),
        p12: lv(408.328, 0.0, 0.666),
        p32: lv(84.718_5, 12.496_5, 1.336_2),
        d1: ln(794.978_851_156, 27.679),
        d2: ln(780.241_209_686, 26.234_8),
        source: "Steck, Rubidium 87 D Line Data (rev. 2.2)",
    },
    Species {
        name: "133Cs",
        mass_u: 132.905_451_961,
        two_i: 7,
        g_i: -0.000_398_853_95,
        ground: lv(2_298.157_942_5, 0.0, 2.002_540_32),
        p12: lv(291.920_1, 0.0, 0.665_90),
        p32: lv(50.288_27, -0.493_4, 1.334_00),
        d1: ln(894.592_959_86, 34.894),
        d2: ln(852.347_275_82, 30.473),
        source: "Steck, Cesium D Line Data (rev. 2.2)",
    },
];

impl Species {
    /// The species called `name` (e.g. `87Rb`, also `Rb87` or `rb87`).
    pub fn named(name: &str) -> Option<&'static Species> {
        let norm = |s: &str| {
            let lower = s.to_lowercase();
            let digits: String = lower.chars().filter(|c| c.is_ascii_digit()).collect();
            let letters: String = lower.chars().filter(|c| c.is_ascii_alphabetic()).collect();
            format!("{digits}{letters}")
        };
        SPECIES.iter().find(|s| norm(s.name) == norm(name))
    }

    /// Atomic mass (kg).
    pub fn mass(&self) -> f64 {
        self.mass_u * ATOMIC_MASS_UNIT
    }

    fn manifold(&self, l: LevelData, two_j: i32) -> Hyperfine {
        Hyperfine {
            two_j,
            two_i: self.two_i,
            a: TAU * l.a_mhz * 1e6,
            b: TAU * l.b_mhz * 1e6,
            g_j: l.g_j,
            g_i: self.g_i,
        }
    }

    /// The D1 or D2 line as a [`Line`]: ω from the vacuum wavelength, Γ = 1/τ.
    pub fn line(&self, which: DLine) -> Result<Line, Error> {
        let (excited, data) = match which {
            DLine::D1 => (self.manifold(self.p12, 1), self.d1),
            DLine::D2 => (self.manifold(self.p32, 3), self.d2),
        };
        Ok(Line {
            ground: self.manifold(self.ground, 1),
            excited,
            omega: TAU * C_LIGHT / (data.lambda_nm * 1e-9),
            gamma: 1.0 / (data.tau_ns * 1e-9),
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The ¹³³Cs ground-state splitting defines the second: A(I + 1/2) = 9 192 631 770 Hz exactly
    /// (SI brochure, 9th ed., 2019).
    #[test]
    fn cesium_clock_frequency() {
        let cs = Species::named("Cs133").unwrap();
        let split_hz = cs.ground.a_mhz * 1e6 * (f64::from(cs.two_i) / 2.0 + 0.5);
        assert!((split_hz - 9_192_631_770.0).abs() < 1.0, "{split_hz}");
    }

    /// The ⁸⁷Rb ground splitting 6 834 682 610.904 Hz (Steck, table 4, a measured value) and the
    /// D2 line's σ⁺ saturation intensity 1.669 mW/cm² (Steck, table 7) from the table's entries.
    #[test]
    fn rubidium_87_from_the_table() {
        let rb = Species::named("rb87").unwrap();
        assert!((rb.ground.a_mhz * 2.0 / 6_834.682_610_904 - 1.0).abs() < 1e-12);
        let line = rb.line(DLine::D2).unwrap();
        let d = line.reduced_dipole();
        // I_sat = c ε₀ Γ² ħ² / (4 |d_cyc|²) with |d_cyc|² = |⟨J‖er‖J'⟩|²/2 for the stretched pair.
        let isat =
            C_LIGHT * crate::field::EPSILON_0 * line.gamma.powi(2) * crate::field::HBAR.powi(2)
                / (2.0 * d * d);
        assert!((isat / 16.69 - 1.0).abs() < 2e-3, "{} mW/cm²", isat / 10.0);
    }

    /// Every line of every species expands at 1 G into a consistent atom (branching sums to one)
    /// with (2I+1)(2J+1) sublevels on each side.
    #[test]
    fn every_line_expands() {
        for s in SPECIES {
            for which in [DLine::D1, DLine::D2] {
                let line = s.line(which).unwrap();
                let la = line
                    .expand(1e-4, |_| true, |_| true)
                    .unwrap_or_else(|e| panic!("{} {which:?}: {e}", s.name));
                let two_jp = if which == DLine::D1 { 1 } else { 3 };
                let n_e = ((s.two_i + 1) * (two_jp + 1)) as usize;
                let n_g = ((s.two_i + 1) * 2) as usize;
                assert_eq!(
                    la.labels.iter().filter(|l| l.excited).count(),
                    n_e,
                    "{}",
                    s.name
                );
                assert_eq!(
                    la.labels.iter().filter(|l| !l.excited).count(),
                    n_g,
                    "{}",
                    s.name
                );
            }
        }
        assert!(Species::named("Xe131").is_none());
    }
}
