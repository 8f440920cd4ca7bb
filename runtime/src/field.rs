//! Classical fields: carrier frequency, polarisation, strength, phase, chirp and linewidth.

use std::sync::Arc;

use crate::atom::{Atom, TransitionId};
use crate::error::Error;
use crate::linalg::C64;

/// Reduced Planck constant ħ (J·s), CODATA 2018 (exact since the 2019 SI).
pub const HBAR: f64 = 1.054_571_817e-34;
/// Speed of light c (m/s), exact.
pub const C_LIGHT: f64 = 299_792_458.0;
/// Vacuum permittivity ε₀ (F/m), CODATA 2018.
pub const EPSILON_0: f64 = 8.854_187_812_8e-12;

/// Where the field's carrier sits.
#[derive(Clone, Debug, PartialEq)]
pub enum Carrier {
    /// Absolute angular frequency ω (rad/s).
    Frequency(f64),
    /// Detuning Δ = ω − ω_transition (rad/s) from a transition of the atom; positive is blue.
    Detuning {
        /// The reference transition.
        transition: TransitionId,
        /// Δ (rad/s).
        detuning: f64,
    },
}

/// Spherical components ε^q (q = −1, 0, +1, in that order) of the unit polarisation vector, so
/// that ε = Σ_q ε^q e_q with e_±1 = ∓(x ± iy)/√2 and e_0 = z along the quantisation axis.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Polarization([C64; 3]);

impl Polarization {
    /// Linear along the quantisation axis (drives Δm = 0).
    pub fn pi() -> Self {
        Self([C64::new(0.0, 0.0), C64::new(1.0, 0.0), C64::new(0.0, 0.0)])
    }
    /// σ⁺ (drives Δm = +1).
    pub fn sigma_plus() -> Self {
        Self([C64::new(0.0, 0.0), C64::new(0.0, 0.0), C64::new(1.0, 0.0)])
    }
    /// σ⁻ (drives Δm = −1).
    pub fn sigma_minus() -> Self {
        Self([C64::new(1.0, 0.0), C64::new(0.0, 0.0), C64::new(0.0, 0.0)])
    }
    /// Any polarisation from its spherical components; normalised here. Fails on a zero or
    /// non-finite vector.
    pub fn new(components: [C64; 3]) -> Result<Self, Error> {
        let norm: f64 = components.iter().map(|z| z.norm_sqr()).sum::<f64>().sqrt();
        if !norm.is_finite() {
            return Err(Error::NonFinite {
                what: "a polarisation component".into(),
            });
        }
        if norm == 0.0 {
            return Err(Error::OutOfRange {
                what: "the polarisation vector's length".into(),
                value: 0.0,
                hint: "give at least one non-zero component",
            });
        }
        Ok(Self(components.map(|z| z / norm)))
    }
    /// The spherical components of a polarisation given as a Cartesian (Jones) vector `e` in the
    /// lab frame, relative to the quantisation axis `axis` (e.g. the magnetic field's direction).
    /// The lab frame is turned so that `axis` becomes z (the x axis of the new frame is the
    /// component of lab x — or of lab y when the axis is along x — perpendicular to `axis`), and
    /// then ε^q = e_q*·ε: ε^{+1} = −(ε_x − iε_y)/√2, ε^0 = ε_z, ε^{−1} = (ε_x + iε_y)/√2 (the basis
    /// of the type docs). Linear light along the axis is π; circular light turning
    /// anticlockwise about the axis, ε = −(x + iy)/√2, is σ⁺. Fails on zero or non-finite input.
    pub fn from_cartesian(e: [C64; 3], axis: [f64; 3]) -> Result<Self, Error> {
        let norm = |v: [f64; 3]| (v[0] * v[0] + v[1] * v[1] + v[2] * v[2]).sqrt();
        let n = norm(axis);
        if !(n.is_finite() && n > 0.0) {
            return Err(Error::OutOfRange {
                what: "the quantisation axis's length".into(),
                value: n,
                hint: "a finite, non-zero direction",
            });
        }
        let z = axis.map(|c| c / n);
        // A lab vector not parallel to z, made perpendicular to it: the new x.
        let seed = if z[0].abs() < 0.9 {
            [1.0, 0.0, 0.0]
        } else {
            [0.0, 1.0, 0.0]
        };
        let dot = seed[0] * z[0] + seed[1] * z[1] + seed[2] * z[2];
        let xr = [
            seed[0] - dot * z[0],
            seed[1] - dot * z[1],
            seed[2] - dot * z[2],
        ];
        let xn = norm(xr);
        let x = xr.map(|c| c / xn);
        let y = [
            z[1] * x[2] - z[2] * x[1],
            z[2] * x[0] - z[0] * x[2],
            z[0] * x[1] - z[1] * x[0],
        ];
        let proj = |u: [f64; 3]| e[0] * u[0] + e[1] * u[1] + e[2] * u[2];
        let (ex, ey, ez) = (proj(x), proj(y), proj(z));
        let i = C64::new(0.0, 1.0);
        let s = std::f64::consts::FRAC_1_SQRT_2;
        Self::new([(ex + i * ey) * s, ez, -(ex - i * ey) * s])
    }

    /// Linear polarisation at angle `theta` (rad) from the quantisation axis, tilted towards the
    /// axis frame's x: ε = cos θ e_z + sin θ e_x, so ε^0 = cos θ and ε^{±1} = ∓ sin θ / √2
    /// (e_x = (e_{−1} − e_{+1})/√2 in the basis of the type docs). θ = 0 is π light, θ = 90° an
    /// equal mix of σ⁺ and σ⁻. Fails on a non-finite angle.
    pub fn linear_at(theta: f64) -> Result<Self, Error> {
        if !theta.is_finite() {
            return Err(Error::NonFinite {
                what: "the polarisation angle".into(),
            });
        }
        let s = theta.sin() * std::f64::consts::FRAC_1_SQRT_2;
        Self::new([
            C64::new(s, 0.0),
            C64::new(theta.cos(), 0.0),
            C64::new(-s, 0.0),
        ])
    }

    /// Elliptical light travelling along `direction` (lab frame) with its major axis along
    /// `major` (perpendicular to `direction`) and ellipticity angle `chi` (rad):
    /// ε = cos χ â + i sin χ (k̂ × â). χ = 0 is linear along `major`; χ = +45° is circular with
    /// positive helicity about k̂ (σ⁺ when k̂ points along the quantisation axis, σ⁻ when
    /// against it); χ = −45° the opposite. Returned relative to the quantisation axis `axis` as
    /// by [`Polarization::from_cartesian`]. Fails when a vector is zero or non-finite, or when
    /// `major` is not perpendicular to `direction` (to 1e-9 of their lengths).
    pub fn elliptical(
        major: [f64; 3],
        direction: [f64; 3],
        chi: f64,
        axis: [f64; 3],
    ) -> Result<Self, Error> {
        let a = unit(major, "the polarisation's major axis")?;
        let k = unit(direction, "the beam direction")?;
        if !chi.is_finite() {
            return Err(Error::NonFinite {
                what: "the ellipticity angle".into(),
            });
        }
        let dot = a[0] * k[0] + a[1] * k[1] + a[2] * k[2];
        if dot.abs() > 1e-9 {
            return Err(Error::OutOfRange {
                what: "the angle between the polarisation and the beam direction (cosine)".into(),
                value: dot,
                hint: "light is transverse: give a polarisation vector perpendicular to the beam direction",
            });
        }
        let b = cross(k, a);
        let (c, s) = (chi.cos(), chi.sin());
        let e = [0, 1, 2].map(|i| C64::new(c * a[i], s * b[i]));
        Self::from_cartesian(e, axis)
    }

    /// The components ε^q, q = −1, 0, +1.
    pub fn components(&self) -> [C64; 3] {
        self.0
    }
    /// ⟨upper|d·ε|lower⟩ = Σ_q ε^q d_q: the absorbing (co-rotating) coupling.
    pub fn absorbing(&self, dipole: &[C64; 3]) -> C64 {
        (0..3).map(|q| self.0[q] * dipole[q]).sum()
    }
    /// ⟨upper|d·ε*|lower⟩ = Σ_q (ε^q)* (−1)^q d_{−q}: the counter-rotating coupling, zero for
    /// circular light on a Δm = ±1 transition.
    pub fn counter(&self, dipole: &[C64; 3]) -> C64 {
        // index 0 ↔ q = −1, 1 ↔ 0, 2 ↔ +1; (−1)^q is −1 for q = ±1.
        -(self.0[0].conj() * dipole[2]) + self.0[1].conj() * dipole[1]
            - self.0[2].conj() * dipole[0]
    }
}

/// `v` divided by its length; fails on a zero or non-finite vector named `what`.
pub(crate) fn unit(v: [f64; 3], what: &str) -> Result<[f64; 3], Error> {
    let n = (v[0] * v[0] + v[1] * v[1] + v[2] * v[2]).sqrt();
    if !n.is_finite() {
        return Err(Error::NonFinite { what: what.into() });
    }
    if n == 0.0 {
        return Err(Error::OutOfRange {
            what: format!("the length of {what}"),
            value: 0.0,
            hint: "give a non-zero direction",
        });
    }
    Ok(v.map(|c| c / n))
}

fn cross(a: [f64; 3], b: [f64; 3]) -> [f64; 3] {
    [
        a[1] * b[2] - a[2] * b[1],
        a[2] * b[0] - a[0] * b[2],
        a[0] * b[1] - a[1] * b[0],
    ]
}

/// The saturation intensity (W/m²) of a transition whose upper level decays at `gamma` (1/s),
/// for light whose coupling element is `d` = ⟨u|d·ε|l⟩ (C·m): I_sat = c ε₀ Γ² ħ² / (4 |d|²), so
/// that I / I_sat = 2 Ω² / Γ² (Steck, *Rubidium 87 D Line Data*, rev. 2.2, 2021, eqs. 49–50;
/// from memory). For the σ⁺ cycling line of ⁸⁷Rb D2 this is 1.669 mW/cm².
pub fn saturation_intensity(gamma: f64, d: C64) -> f64 {
    C_LIGHT * EPSILON_0 * gamma * gamma * HBAR * HBAR / (4.0 * d.norm_sqr())
}

/// How strong the field is.
#[derive(Clone, Debug, PartialEq)]
pub enum Strength {
    /// Rabi frequency Ω (rad/s) on a transition; the field's phase is referenced so that Ω is
    /// real and positive there at phase 0.
    Rabi {
        /// The reference transition.
        transition: TransitionId,
        /// Ω (rad/s).
        rabi: f64,
    },
    /// Peak electric-field amplitude E₀ (V/m) of E(t) = E₀ Re[ε e^{−i(ωt+φ)}].
    ElectricField(f64),
    /// Intensity I = ½ c ε₀ E₀² (W/m²).
    Intensity(f64),
    /// Saturation parameter s = I / I_sat of a transition (dimensionless), with I_sat that of
    /// the transition for this field's polarisation ([`saturation_intensity`]) and Γ the total
    /// decay rate of its upper level: the Rabi frequency there is Ω = Γ √(s/2), real and
    /// positive at phase 0 as for [`Strength::Rabi`].
    Saturation {
        /// The reference transition.
        transition: TransitionId,
        /// s = I / I_sat.
        s: f64,
    },
}

/// A time-dependent frequency offset δ(t) (rad/s) of the carrier; its phase χ(t) = ∫₀ᵗ δ.
#[derive(Clone)]
pub enum Chirp {
    /// δ(t) = start + rate·t.
    Linear {
        /// δ at t = 0 (rad/s).
        start: f64,
        /// dδ/dt (rad/s²).
        rate: f64,
    },
    /// An arbitrary δ(t); its phase is integrated numerically unless `phase` is given.
    Custom {
        /// δ(t) (rad/s).
        detuning: Arc<dyn Fn(f64) -> f64 + Send + Sync>,
        /// χ(t) = ∫₀ᵗ δ (rad), if known in closed form.
        phase: Option<Arc<dyn Fn(f64) -> f64 + Send + Sync>>,
    },
}

impl std::fmt::Debug for Chirp {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Chirp::Linear { start, rate } => write!(f, "Linear {{ start: {start}, rate: {rate} }}"),
            Chirp::Custom { .. } => write!(f, "Custom"),
        }
    }
}

impl Chirp {
    /// δ(t) (rad/s).
    #[inline]
    pub fn detuning(&self, t: f64) -> f64 {
        match self {
            Chirp::Linear { start, rate } => start + rate * t,
            Chirp::Custom { detuning, .. } => detuning(t),
        }
    }
    /// χ(t) = ∫₀ᵗ δ(t') dt' (rad).
    pub fn phase(&self, t: f64) -> f64 {
        match self {
            Chirp::Linear { start, rate } => start * t + 0.5 * rate * t * t,
            Chirp::Custom { phase: Some(p), .. } => p(t),
            Chirp::Custom {
                detuning,
                phase: None,
            } => integrate_gauss_legendre(&**detuning, t),
        }
    }
}

/// ∫₀ᵗ f by composite 8-point Gauss–Legendre on 64 panels (nodes: Abramowitz & Stegun,
/// Handbook of Mathematical Functions, 1964, Table 25.4): exact for polynomials of degree 15 per
/// panel, ample for the smooth chirps people write.
fn integrate_gauss_legendre(f: &dyn Fn(f64) -> f64, t: f64) -> f64 {
    const X: [f64; 4] = [
        0.183_434_642_495_649_8,
        0.525_532_409_916_329,
        0.796_666_477_413_626_7,
        0.960_289_856_497_536_3,
    ];
    const W: [f64; 4] = [
        0.362_683_783_378_362,
        0.313_706_645_877_887_3,
        0.222_381_034_453_374_5,
        0.101_228_536_290_376_3,
    ];
    let panels = 64;
    let h = t / panels as f64;
    let mut sum = 0.0;
    for p in 0..panels {
        let mid = (p as f64 + 0.5) * h;
        for k in 0..4 {
            let dx = 0.5 * h * X[k];
            sum += W[k] * (f(mid - dx) + f(mid + dx));
        }
    }
    0.5 * h * sum
}

/// A classical field: laser or microwave.
#[derive(Clone, Debug)]
pub struct Field {
    name: String,
    carrier: Carrier,
    polarization: Polarization,
    strength: Strength,
    phase: f64,
    chirp: Option<Chirp>,
    linewidth: f64,
    direction: Option<[f64; 3]>,
}

impl Field {
    /// A field with π polarisation, phase 0, no chirp and zero linewidth.
    pub fn new(name: impl Into<String>, carrier: Carrier, strength: Strength) -> Self {
        Self {
            name: name.into(),
            carrier,
            polarization: Polarization::pi(),
            strength,
            phase: 0.0,
            chirp: None,
            linewidth: 0.0,
            direction: None,
        }
    }
    /// Set the polarisation.
    pub fn with_polarization(mut self, p: Polarization) -> Self {
        self.polarization = p;
        self
    }
    /// Set the phase φ (rad) of E₀ Re[ε e^{−i(ωt+φ)}].
    pub fn with_phase(mut self, phase: f64) -> Self {
        self.phase = phase;
        self
    }
    /// Add a chirp δ(t).
    pub fn with_chirp(mut self, chirp: Chirp) -> Self {
        self.chirp = Some(chirp);
        self
    }
    /// Set the laser linewidth (FWHM of a Lorentzian line from phase diffusion, rad/s).
    pub fn with_linewidth(mut self, linewidth: f64) -> Self {
        self.linewidth = linewidth;
        self
    }
    /// Set the beam direction (lab frame; normalised here), which gives the Doppler shift of a
    /// moving atom ([`Field::doppler_shifted`]). Fails on a zero or non-finite vector.
    pub fn with_direction(mut self, direction: [f64; 3]) -> Result<Self, Error> {
        self.direction = Some(unit(direction, "the beam direction")?);
        Ok(self)
    }
    /// The beam direction (unit vector, lab frame), if set.
    pub fn direction(&self) -> Option<[f64; 3]> {
        self.direction
    }

    /// The field as an atom moving at `velocity` (m/s, lab frame) sees it: the carrier shifted by
    /// the first-order Doppler shift −k·v, k = (ω/c) k̂ (common practice; the second-order
    /// shift, of relative size v²/2c², is neglected). A detuning-referenced carrier keeps its
    /// reference and changes its detuning. Fails when the field has no direction and the
    /// velocity is not zero, or when a value is not finite.
    pub fn doppler_shifted(&self, atom: &Atom, velocity: [f64; 3]) -> Result<Field, Error> {
        if velocity.iter().any(|v| !v.is_finite()) {
            return Err(Error::NonFinite {
                what: format!("the atom's velocity seen by field `{}`", self.name),
            });
        }
        if velocity == [0.0; 3] {
            return Ok(self.clone());
        }
        let Some(k) = self.direction else {
            return Err(Error::Inconsistent {
                what: format!(
                    "field `{}` has no direction, so a moving atom's Doppler shift is undefined",
                    self.name
                ),
                hint: "give the field a beam direction".into(),
            });
        };
        let w = self.frequency(atom)?;
        let shift = -w / C_LIGHT * (k[0] * velocity[0] + k[1] * velocity[1] + k[2] * velocity[2]);
        let mut out = self.clone();
        out.carrier = match &self.carrier {
            Carrier::Frequency(w) => Carrier::Frequency(w + shift),
            Carrier::Detuning {
                transition,
                detuning,
            } => Carrier::Detuning {
                transition: *transition,
                detuning: detuning + shift,
            },
        };
        Ok(out)
    }
    /// The field's name.
    pub fn name(&self) -> &str {
        &self.name
    }
    /// Carrier.
    pub fn carrier(&self) -> &Carrier {
        &self.carrier
    }
    /// Polarisation.
    pub fn polarization(&self) -> Polarization {
        self.polarization
    }
    /// Strength.
    pub fn strength(&self) -> &Strength {
        &self.strength
    }
    /// Phase φ (rad).
    pub fn phase(&self) -> f64 {
        self.phase
    }
    /// Chirp, if any.
    pub fn chirp(&self) -> Option<&Chirp> {
        self.chirp.as_ref()
    }
    /// Linewidth (FWHM, rad/s).
    pub fn linewidth(&self) -> f64 {
        self.linewidth
    }

    /// The transition the field is referenced to (by its strength, else by its carrier).
    pub fn reference(&self) -> Option<TransitionId> {
        match (&self.strength, &self.carrier) {
            (Strength::Rabi { transition, .. }, _)
            | (Strength::Saturation { transition, .. }, _) => Some(*transition),
            (_, Carrier::Detuning { transition, .. }) => Some(*transition),
            _ => None,
        }
    }

    /// Carrier angular frequency ω (rad/s) for this atom.
    pub fn frequency(&self, atom: &Atom) -> Result<f64, Error> {
        let w = match &self.carrier {
            Carrier::Frequency(w) => *w,
            Carrier::Detuning {
                transition,
                detuning,
            } => atom.transition_frequency(*transition)? + detuning,
        };
        if !w.is_finite() {
            return Err(Error::NonFinite {
                what: format!("the carrier frequency of field `{}`", self.name),
            });
        }
        if w < 0.0 {
            return Err(Error::OutOfRange {
                what: format!("the carrier frequency of field `{}`", self.name),
                value: w,
                hint: "an angular frequency of a field is non-negative; check the detuning's sign and size",
            });
        }
        Ok(w)
    }

    /// ⟨u|d·ε|l⟩ on the reference transition of a Rabi frequency or saturation parameter;
    /// fails when the polarisation does not drive it.
    fn reference_coupling(&self, atom: &Atom, transition: TransitionId) -> Result<C64, Error> {
        let a = self
            .polarization
            .absorbing(&atom.transition(transition)?.dipole());
        if a.norm() == 0.0 {
            return Err(Error::ReferenceNotDriven {
                field: self.name.clone(),
                transition: atom.transition_label(transition),
            });
        }
        Ok(a)
    }

    /// The complex field factor F (rad/s per C·m): the Rabi frequency on any transition is
    /// Ω = F·⟨u|d·ε|l⟩ (co-rotating) and Ω_cr = F*·⟨u|d·ε*|l⟩ (counter-rotating). For a field
    /// given by E₀, F = −E₀/ħ (so Ω = −⟨d·E₀⟩/ħ); for a Rabi frequency, F carries the reference
    /// phase that makes Ω real and positive on its transition.
    pub fn field_factor(&self, atom: &Atom) -> Result<C64, Error> {
        let check = |what: &str, v: f64| -> Result<f64, Error> {
            if !v.is_finite() {
                Err(Error::NonFinite {
                    what: format!("the {what} of field `{}`", self.name),
                })
            } else if v < 0.0 {
                Err(Error::OutOfRange {
                    what: format!("the {what} of field `{}`", self.name),
                    value: v,
                    hint: "field strengths are non-negative; put a sign into the phase instead",
                })
            } else {
                Ok(v)
            }
        };
        if !self.phase.is_finite() {
            return Err(Error::NonFinite {
                what: format!("the phase of field `{}`", self.name),
            });
        }
        match &self.strength {
            Strength::Rabi { transition, rabi } => {
                let rabi = check("Rabi frequency", *rabi)?;
                Ok(rabi / self.reference_coupling(atom, *transition)?)
            }
            Strength::Saturation { transition, s } => {
                let s = check("saturation parameter", *s)?;
                let a = self.reference_coupling(atom, *transition)?;
                let upper = atom.transition(*transition)?.upper();
                let gamma = atom.total_decay_rates()[upper];
                if gamma <= 0.0 {
                    return Err(Error::OutOfRange {
                        what: format!(
                            "the decay rate of the upper level of {}, which a saturation parameter needs",
                            atom.transition_label(*transition)
                        ),
                        value: gamma,
                        hint: "give the strength as a Rabi frequency, a field or an intensity, or let the upper level decay",
                    });
                }
                Ok(gamma * (s / 2.0).sqrt() / a)
            }
            Strength::ElectricField(e0) => Ok(C64::new(-check("electric field", *e0)? / HBAR, 0.0)),
            Strength::Intensity(i) => {
                let i = check("intensity", *i)?;
                Ok(C64::new(
                    -(2.0 * i / (C_LIGHT * EPSILON_0)).sqrt() / HBAR,
                    0.0,
                ))
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn c(re: f64, im: f64) -> C64 {
        C64::new(re, im)
    }

    /// Linear along the axis is π, linear across it is an equal mix of σ±, circular light about
    /// the axis is pure σ⁺ or σ⁻, and tilting linear light by θ gives cos θ of π (the spherical
    /// basis of Steck's alkali D-line notes; common practice).
    #[test]
    fn cartesian_polarisations_relative_to_the_axis() {
        let z = [0.0, 0.0, 1.0];
        let close = |p: Polarization, want: [C64; 3]| {
            p.components()
                .iter()
                .zip(&want)
                .all(|(a, b)| (a - b).norm() < 1e-15)
        };
        let s = std::f64::consts::FRAC_1_SQRT_2;
        assert!(close(
            Polarization::from_cartesian([c(0., 0.), c(0., 0.), c(1., 0.)], z).unwrap(),
            Polarization::pi().components()
        ));
        let sp = Polarization::from_cartesian([c(-s, 0.), c(0., -s), c(0., 0.)], z).unwrap();
        assert!(close(sp, Polarization::sigma_plus().components()));
        let sm = Polarization::from_cartesian([c(s, 0.), c(0., -s), c(0., 0.)], z).unwrap();
        assert!(close(sm, Polarization::sigma_minus().components()));
        let across = Polarization::from_cartesian([c(1., 0.), c(0., 0.), c(0., 0.)], z)
            .unwrap()
            .components();
        assert!(
            (across[0].norm() - s).abs() < 1e-15
                && (across[2].norm() - s).abs() < 1e-15
                && across[1].norm() < 1e-15
        );
        // The axis along lab x: light polarised along x is π there.
        let px = Polarization::from_cartesian([c(1., 0.), c(0., 0.), c(0., 0.)], [2.0, 0.0, 0.0])
            .unwrap()
            .components();
        assert!((px[1].norm() - 1.0).abs() < 1e-15);
        let th: f64 = 0.3;
        let tilted = Polarization::from_cartesian([c(th.sin(), 0.), c(0., 0.), c(th.cos(), 0.)], z)
            .unwrap()
            .components();
        assert!((tilted[1].norm() - th.cos()).abs() < 1e-15);
        assert!(Polarization::from_cartesian([c(1., 0.), c(0., 0.), c(0., 0.)], [0.0; 3]).is_err());
    }

    use crate::atom::E_A0;

    fn two_level() -> Atom {
        let mut b = Atom::builder();
        let g = b.level("g", 0.0);
        let e = b.level("e", 2.0e15);
        b.transition(g, e);
        b.build().unwrap()
    }

    #[test]
    fn rabi_reference_is_real_positive() {
        let atom = two_level();
        let f = Field::new(
            "probe",
            Carrier::Detuning {
                transition: 0,
                detuning: 1e6,
            },
            Strength::Rabi {
                transition: 0,
                rabi: 3e6,
            },
        );
        let ff = f.field_factor(&atom).unwrap();
        let omega = ff * f.polarization().absorbing(&atom.transitions()[0].dipole());
        assert!((omega - C64::new(3e6, 0.0)).norm() < 1e-6);
        assert_eq!(f.frequency(&atom).unwrap(), 2.0e15 + 1e6);
    }

    #[test]
    fn intensity_and_field_agree() {
        // I = ½ c ε₀ E₀² (Jackson, Classical Electrodynamics, 3rd ed., 1999, eq. 7.13 for the
        // time-averaged Poynting vector of a plane wave).
        let atom = two_level();
        let e0 = 1234.5;
        let i = 0.5 * C_LIGHT * EPSILON_0 * e0 * e0;
        let a = Field::new("a", Carrier::Frequency(1e15), Strength::ElectricField(e0))
            .field_factor(&atom)
            .unwrap();
        let b = Field::new("b", Carrier::Frequency(1e15), Strength::Intensity(i))
            .field_factor(&atom)
            .unwrap();
        assert!((a - b).norm() < 1e-12 * a.norm());
        // Ω = −d E₀/ħ for a π dipole d = e a₀ (sign convention of CONVENTIONS.md).
        let omega = a * E_A0;
        assert!((omega.re + E_A0 * e0 / HBAR).abs() < 1e-9 * omega.norm());
    }

    #[test]
    fn circular_light_has_no_counter_rotating_part_on_its_transition() {
        let d = [C64::new(0.0, 0.0), C64::new(0.0, 0.0), C64::new(1.0, 0.0)]; // Δm = +1
        let s = Polarization::sigma_plus();
        assert_eq!(s.absorbing(&d), C64::new(1.0, 0.0));
        assert_eq!(s.counter(&d), C64::new(0.0, 0.0));
        let p = Polarization::pi();
        let d0 = [C64::new(0.0, 0.0), C64::new(2.0, 0.0), C64::new(0.0, 0.0)];
        assert_eq!(p.absorbing(&d0), p.counter(&d0));
    }

    #[test]
    fn chirp_phase_integrates_detuning() {
        let lin = Chirp::Linear {
            start: 3.0,
            rate: 2.0,
        };
        let custom = Chirp::Custom {
            detuning: Arc::new(|t| 3.0 + 2.0 * t),
            phase: None,
        };
        assert!((lin.phase(1.5) - custom.phase(1.5)).abs() < 1e-12);
        let c2 = Chirp::Custom {
            detuning: Arc::new(|t: f64| t.cos()),
            phase: None,
        };
        assert!((c2.phase(2.0) - 2.0f64.sin()).abs() < 1e-13);
    }

    #[test]
    fn bad_strengths_are_errors() {
        let atom = two_level();
        let f = Field::new(
            "x",
            Carrier::Frequency(1.0),
            Strength::Rabi {
                transition: 0,
                rabi: f64::NAN,
            },
        );
        assert!(matches!(
            f.field_factor(&atom),
            Err(Error::NonFinite { .. })
        ));
        let f = Field::new(
            "x",
            Carrier::Frequency(1.0),
            Strength::Rabi {
                transition: 0,
                rabi: 1.0,
            },
        )
        .with_polarization(Polarization::sigma_plus());
        assert!(matches!(
            f.field_factor(&atom),
            Err(Error::ReferenceNotDriven { .. })
        ));
        let f = Field::new(
            "x",
            Carrier::Detuning {
                transition: 0,
                detuning: -3e15,
            },
            Strength::Intensity(1.0),
        );
        assert!(matches!(f.frequency(&atom), Err(Error::OutOfRange { .. })));
        assert!(Polarization::new([C64::new(0.0, 0.0); 3]).is_err());
    }

    /// Linear light tilted by θ from the axis: |ε^0|² = cos²θ and |ε^{±1}|² = sin²θ/2 (the
    /// rank-1 rotation matrix d¹_{q0}(θ), Edmonds, *Angular Momentum in Quantum Mechanics*,
    /// 1957, table 4.1), and the same as the Cartesian vector (sin θ, 0, cos θ).
    #[test]
    fn linear_polarisation_at_an_angle() {
        for theta in [0.0, 0.3, 1.0, std::f64::consts::FRAC_PI_2] {
            let p = Polarization::linear_at(theta).unwrap().components();
            assert!((p[1].norm_sqr() - theta.cos().powi(2)).abs() < 1e-15);
            for q in [0, 2] {
                assert!((p[q].norm_sqr() - theta.sin().powi(2) / 2.0).abs() < 1e-15);
            }
            let v = Polarization::from_cartesian(
                [c(theta.sin(), 0.0), c(0.0, 0.0), c(theta.cos(), 0.0)],
                [0.0, 0.0, 1.0],
            )
            .unwrap()
            .components();
            for q in 0..3 {
                assert!((p[q] - v[q]).norm() < 1e-15, "{theta}: {p:?} vs {v:?}");
            }
        }
        assert!(Polarization::linear_at(f64::NAN).is_err());
    }

    /// Positive helicity about the beam is σ⁺ for a beam along the quantisation axis and σ⁻ for
    /// one against it; χ = 0 is linear; the polarisation must be transverse (common practice).
    #[test]
    fn elliptical_light_and_helicity() {
        let z = [0.0, 0.0, 1.0];
        let q45 = std::f64::consts::FRAC_PI_4;
        let weights = |p: Polarization| p.components().map(|x| x.norm_sqr());
        let close = |a: [f64; 3], b: [f64; 3]| (0..3).all(|i| (a[i] - b[i]).abs() < 1e-15);
        let along = Polarization::elliptical([1.0, 0.0, 0.0], z, q45, z).unwrap();
        assert!(close(weights(along), [0.0, 0.0, 1.0]));
        let against = Polarization::elliptical([1.0, 0.0, 0.0], [0.0, 0.0, -2.0], q45, z).unwrap();
        assert!(close(weights(against), [1.0, 0.0, 0.0]));
        let neg = Polarization::elliptical([0.0, 1.0, 0.0], z, -q45, z).unwrap();
        assert!(close(weights(neg), [1.0, 0.0, 0.0]));
        // A beam along x, linear along z: π light.
        let lin = Polarization::elliptical(z, [1.0, 0.0, 0.0], 0.0, z).unwrap();
        assert!(close(weights(lin), [0.0, 1.0, 0.0]));
        // Ellipticity χ: the σ± weights are (1 ± sin 2χ)/2 for a beam along the axis.
        let chi = 0.2;
        let e = Polarization::elliptical([1.0, 0.0, 0.0], z, chi, z).unwrap();
        let w = weights(e);
        assert!((w[2] - (1.0 + (2.0 * chi).sin()) / 2.0).abs() < 1e-15);
        assert!((w[0] - (1.0 - (2.0 * chi).sin()) / 2.0).abs() < 1e-15);
        assert!(Polarization::elliptical([1.0, 0.0, 0.1], z, 0.0, z).is_err());
        assert!(Polarization::elliptical([0.0; 3], z, 0.0, z).is_err());
    }

    /// A moving atom sees the carrier at ω − k·v (first-order Doppler shift, common practice):
    /// an atom moving towards the source (v antiparallel to k) sees it blue-shifted by ω v/c.
    #[test]
    fn doppler_shift_of_a_moving_atom() {
        let atom = two_level();
        let f = Field::new(
            "probe",
            Carrier::Detuning {
                transition: 0,
                detuning: 1e6,
            },
            Strength::Intensity(1.0),
        );
        assert!(f.doppler_shifted(&atom, [0.0, 0.0, 1.0]).is_err());
        assert!(f.doppler_shifted(&atom, [0.0; 3]).is_ok());
        let f = f.with_direction([0.0, 0.0, 3.0]).unwrap();
        let w = f.frequency(&atom).unwrap();
        let v = 0.25;
        let towards = f.doppler_shifted(&atom, [0.0, 0.0, -v]).unwrap();
        // Compared on the detuning: the absolute frequencies would cancel to 1e-7.
        let Carrier::Detuning { detuning, .. } = towards.carrier() else {
            panic!("the carrier keeps its reference")
        };
        let shift = detuning - 1e6;
        assert!((shift / (w * v / C_LIGHT) - 1.0).abs() < 1e-9, "{shift}");
        // Perpendicular motion: no first-order shift.
        let across = f.doppler_shifted(&atom, [v, 0.0, 0.0]).unwrap();
        assert_eq!(across.frequency(&atom).unwrap(), w);
        let abs = Field::new("x", Carrier::Frequency(w), Strength::Intensity(1.0))
            .with_direction([1.0, 0.0, 0.0])
            .unwrap()
            .doppler_shifted(&atom, [v, 0.0, 0.0])
            .unwrap();
        assert!((abs.frequency(&atom).unwrap() - (w - w * v / C_LIGHT)).abs() < 1.0);
        assert!(
            Field::new("x", Carrier::Frequency(w), Strength::Intensity(1.0))
                .with_direction([0.0; 3])
                .is_err()
        );
    }

    /// A saturation parameter s gives Ω = Γ √(s/2) on the reference transition, i.e.
    /// s = 2Ω²/Γ² (Steck, *Rubidium 87 D Line Data*, rev. 2.2, 2021, eq. 49; from memory), and
    /// it is the same field as the intensity s · I_sat.
    #[test]
    fn saturation_parameter_sets_the_rabi_frequency() {
        let gamma = 2.0e7;
        let mut b = Atom::builder();
        let g = b.level("g", 0.0);
        let e = b.level("e", 2.0e15);
        b.transition(g, e);
        b.decay(e, g, gamma);
        let atom = b.build().unwrap();
        let s = 3.0;
        let f = Field::new(
            "probe",
            Carrier::Detuning {
                transition: 0,
                detuning: 0.0,
            },
            Strength::Saturation { transition: 0, s },
        );
        let d = atom.transitions()[0].dipole();
        let factor = f.field_factor(&atom).unwrap();
        let rabi = factor * f.polarization().absorbing(&d);
        assert!((rabi.re / (gamma * (s / 2.0).sqrt()) - 1.0).abs() < 1e-14 && rabi.im.abs() < 1e-6);
        let isat = saturation_intensity(gamma, f.polarization().absorbing(&d));
        let by_intensity = Field::new(
            "probe",
            Carrier::Frequency(2.0e15),
            Strength::Intensity(s * isat),
        )
        .field_factor(&atom)
        .unwrap();
        assert!((by_intensity.norm() / factor.norm() - 1.0).abs() < 1e-12);
        // No decay, no saturation intensity.
        let undamped = two_level();
        assert!(f.field_factor(&undamped).is_err());
    }
}
