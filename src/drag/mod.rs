//! Hydrodynamic drag on a trapped sphere: Stokes drag, wall corrections and the characteristic
//! frequencies of the frequency-dependent drag.
//!
//! The trap stiffness from a power spectrum is kappa = 2 pi gamma f_c, so every calibration
//! needs the drag coefficient gamma of the bead. Far from surfaces it is Stokes' 6 pi eta R; near
//! the coverslip it grows, differently for motion parallel (Faxen) and perpendicular (Brenner)
//! to the surface. Heights `height_m` are always from the surface to the bead **centre**, so
//! `height_m > radius_m` for a bead that does not touch the surface. SI units throughout.

use std::f64::consts::PI;

#[cfg(test)]
mod tests;

/// Density of polystyrene beads, in kg/m3 (from memory, unverified: 1.04 to 1.06 g/cm3, the
/// middle value is used).
pub const POLYSTYRENE_DENSITY_KG_PER_M3: f64 = 1050.0;

/// Density of silica beads, in kg/m3 (from memory, unverified: fused silica is 2.20 g/cm3, and
/// colloidal silica grown in solution is less dense, about 1.8 to 2.0 g/cm3; 2.0 is used, and
/// `bead_density_kg_per_m3` gives a measured value). It enters only the bead's inertia in the
/// frequency-dependent drag, where a 10 % error moves the inertial frequency by a few per cent.
pub const SILICA_DENSITY_KG_PER_M3: f64 = 2000.0;

/// Smallest surface-to-bead gap, as a fraction of the radius, accepted by
/// [`brenner_axial_factor`].
///
/// Below it the series needs very many terms and loses precision, and the gap (1 pm for a 1 um
/// bead) is far below the scale where continuum hydrodynamics holds (common practice).
pub const BRENNER_MIN_GAP_OVER_RADIUS: f64 = 1e-6;

/// Smallest ratio h/R of centre height to radius at which [`faxen_lateral_factor`] is trusted;
/// see [`faxen_valid`].
pub const FAXEN_MIN_HEIGHT_OVER_RADIUS: f64 = 1.5;

/// Below this R/h, [`brenner_axial_factor`] uses the leading reflection term instead of the
/// series; the neglected terms are O((R/h)^3) < 1e-18, below double precision.
const BRENNER_FAR_FIELD_RADIUS_OVER_HEIGHT: f64 = 1e-6;

/// Errors of the drag layer: a geometry the drag formulas cannot be used for.
#[derive(Debug, Clone, Copy, PartialEq, thiserror::Error)]
pub enum DragError {
    /// The radius is NaN, infinite, zero or negative.
    #[error(
        "bead radius_m {radius_m:e} is not a positive finite length; give the bead radius in metres (half the diameter)"
    )]
    InvalidRadius {
        /// The value that was given, in m.
        radius_m: f64,
    },
    /// The height is NaN, infinite, zero or negative.
    #[error(
        "bead height_m {height_m:e} is not a positive finite length; give the distance from the surface to the bead centre in metres, or none far from any surface"
    )]
    InvalidHeight {
        /// The value that was given, in m.
        height_m: f64,
    },
    /// The centre height is not larger than the radius: the bead would touch or cross the surface.
    #[error(
        "bead height_m {height_m:e} m is not above radius_m {radius_m:e} m, so the bead would touch or cross the surface; height_m is measured from the surface to the bead centre and must exceed the radius"
    )]
    HeightNotAboveRadius {
        /// The centre height that was given, in m.
        height_m: f64,
        /// The radius that was given, in m.
        radius_m: f64,
    },
    /// The gap between bead and surface is below [`BRENNER_MIN_GAP_OVER_RADIUS`] times the
    /// radius, where the exact series is not evaluated.
    #[error(
        "gap of {gap_m:e} m between bead and surface (height_m {height_m:e} m minus radius_m {radius_m:e} m) is below {min_gap_over_radius} of the radius, where continuum hydrodynamics does not apply; check that height_m is the centre height in metres"
    )]
    GapTooSmall {
        /// The gap h - R, in m.
        gap_m: f64,
        /// The centre height that was given, in m.
        height_m: f64,
        /// The radius that was given, in m.
        radius_m: f64,
        /// The smallest accepted gap over radius.
        min_gap_over_radius: f64,
    },
}

/// Direction of bead motion relative to the nearby surface.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum AxisOrientation {
    /// Parallel to the surface (the x and y axes of a trap above a coverslip).
    Lateral,
    /// Perpendicular to the surface (the z axis, along the beam).
    Axial,
}

/// Stokes drag coefficient of a sphere in an unbounded fluid, gamma0 = 6 pi eta R, in kg/s
/// (= N s/m), from the viscosity in Pa s and the radius in m (Stokes 1851; Happel & Brenner,
/// Low Reynolds Number Hydrodynamics).
///
/// No check is made; the caller validates its inputs (for instance with [`wall_factor`]). For
/// non-finite or negative inputs the result is non-finite or negative.
pub fn stokes_drag_kg_per_s(viscosity_pa_s: f64, radius_m: f64) -> f64 {
    6.0 * PI * viscosity_pa_s * radius_m
}

/// Checks a radius and a centre height and returns the gap h - R over the radius.
fn gap_over_radius(radius_m: f64, height_m: f64) -> Result<f64, DragError> {
    check_radius(radius_m)?;
    if !(height_m.is_finite() && height_m > 0.0) {
        return Err(DragError::InvalidHeight { height_m });
    }
    if height_m <= radius_m {
        return Err(DragError::HeightNotAboveRadius { height_m, radius_m });
    }
    Ok((height_m - radius_m) / radius_m)
}

/// Checks that a radius is a positive finite length.
fn check_radius(radius_m: f64) -> Result<(), DragError> {
    if radius_m.is_finite() && radius_m > 0.0 {
        Ok(())
    } else {
        Err(DragError::InvalidRadius { radius_m })
    }
}

/// Faxen's correction gamma_par / gamma0 for a sphere moving parallel to a plane wall, with
/// `height_m` the distance from the wall to the sphere centre (Faxen 1923; Happel & Brenner,
/// Low Reynolds Number Hydrodynamics):
///
/// gamma_par / gamma0 = 1 / [1 - (9/16) x + (1/8) x^3 - (45/256) x^4 - (1/16) x^5], x = R/h.
///
/// It is a truncated series in R/h and becomes inaccurate as the gap closes: at h/R = 1.1 it
/// gives 2.36 where lubrication theory gives about 2.19 (Goldman, Cox & Brenner, Chem. Eng. Sci.
/// 22, 637 (1967); from memory, unverified). Use [`faxen_valid`] to know whether to trust it.
///
/// Errors: non-positive or non-finite radius or height, or a height not above the radius.
pub fn faxen_lateral_factor(radius_m: f64, height_m: f64) -> Result<f64, DragError> {
    gap_over_radius(radius_m, height_m)?;
    Ok(faxen_denominator(radius_m / height_m).recip())
}

/// The denominator of Faxen's formula, 1 - (9/16) x + (1/8) x^3 - (45/256) x^4 - (1/16) x^5.
fn faxen_denominator(x: f64) -> f64 {
    // Horner's scheme, highest power first.
    let coefficients = [-1.0 / 16.0, -45.0 / 256.0, 1.0 / 8.0, 0.0, -9.0 / 16.0, 1.0];
    coefficients
        .iter()
        .fold(0.0_f64, |acc, &c| acc.mul_add(x, c))
}

/// Whether Faxen's lateral formula is accurate enough at this geometry: `h / R >=`
/// [`FAXEN_MIN_HEIGHT_OVER_RADIUS`] (1.5), for a valid radius and height.
///
/// Choice of threshold (common practice: the last retained term of a truncated series as its
/// error estimate): at h/R = 1.5 the last term of Faxen's denominator, (1/16)(R/h)^5, is 1.3% of
/// the denominator, and it falls below 0.3% at h/R = 2. Closer to the surface the truncation error
/// grows quickly (8% at h/R = 1.1 against lubrication theory), so a caller should warn there.
/// Returns false for inputs that [`faxen_lateral_factor`] refuses.
pub fn faxen_valid(radius_m: f64, height_m: f64) -> bool {
    gap_over_radius(radius_m, height_m).is_ok()
        && height_m >= FAXEN_MIN_HEIGHT_OVER_RADIUS * radius_m
}

/// Brenner's exact correction gamma_perp / gamma0 for a sphere moving perpendicular to a plane
/// wall, with `height_m` the distance from the wall to the sphere centre (Brenner, Chem. Eng.
/// Sci. 16, 242 (1961)). With alpha = arccosh(h/R):
///
/// gamma_perp / gamma0 = (4/3) sinh(alpha) sum_{n>=1} n(n+1)/((2n-1)(2n+3)) {
///     [2 sinh((2n+1) alpha) + (2n+1) sinh(2 alpha)]
///     / [4 sinh^2((n+1/2) alpha) - (2n+1)^2 sinh^2(alpha)] - 1 }.
///
/// Numerics: with m = 2n+1 the braces are rewritten exactly as
/// [2 (1 - e^(-m alpha)) + m sinh(2 alpha) + m^2 sinh^2(alpha)]
/// / [4 sinh^2(m alpha / 2) - m^2 sinh^2(alpha)], whose numerator does not grow with n, so there
/// is no cancellation between two huge numbers. The sum stops when a term falls below 1e-18 of
/// the partial sum, and always before m alpha > 700, where sinh^2(m alpha / 2) would overflow.
/// For R/h <= 1e-6 the leading reflection result 1 / (1 - (9/8) R/h) (Lorentz 1907, year from
/// memory, unverified; Happel & Brenner) is returned, exact to double precision there.
///
/// Errors: non-positive or non-finite radius or height, a height not above the radius, or a gap
/// below [`BRENNER_MIN_GAP_OVER_RADIUS`] times the radius.
pub fn brenner_axial_factor(radius_m: f64, height_m: f64) -> Result<f64, DragError> {
    let gap_ratio = gap_over_radius(radius_m, height_m)?;
    if gap_ratio < BRENNER_MIN_GAP_OVER_RADIUS {
        return Err(DragError::GapTooSmall {
            gap_m: height_m - radius_m,
            height_m,
            radius_m,
            min_gap_over_radius: BRENNER_MIN_GAP_OVER_RADIUS,
        });
    }
    let x = radius_m / height_m;
    if x <= BRENNER_FAR_FIELD_RADIUS_OVER_HEIGHT {
        return Ok((-9.0 / 8.0_f64).mul_add(x, 1.0).recip());
    }
    Ok(brenner_series(gap_ratio))
}

/// Brenner's series as a function of the gap over the radius, epsilon = h/R - 1 > 0.
fn brenner_series(gap_ratio: f64) -> f64 {
    // cosh(alpha) = 1 + epsilon, sinh(alpha) = sqrt(epsilon (2 + epsilon)), computed from epsilon
    // directly to keep precision near contact.
    let cosh_alpha = 1.0 + gap_ratio;
    let sinh_alpha = (gap_ratio * (2.0 + gap_ratio)).sqrt();
    let alpha = (gap_ratio + sinh_alpha).ln_1p();
    let sinh_2alpha = 2.0 * sinh_alpha * cosh_alpha;
    let sinh_alpha_squared = sinh_alpha * sinh_alpha;

    let mut sum = 0.0_f64;
    let mut n = 1.0_f64;
    loop {
        let m = 2.0_f64.mul_add(n, 1.0);
        let m_alpha = m * alpha;
        if m_alpha > 700.0 {
            break;
        }
        // n(n+1)/((2n-1)(2n+3)), with 2n-1 = m-2 and 2n+3 = m+2.
        let weight = n * (n + 1.0) / ((m - 2.0) * (m + 2.0));
        let half_sinh = (0.5 * m_alpha).sinh();
        let m2_sinh2 = m * m * sinh_alpha_squared;
        // 2 (1 - e^(-m alpha)) = -2 expm1(-m alpha), accurate for small m alpha.
        let numerator = (-2.0_f64).mul_add((-m_alpha).exp_m1(), m.mul_add(sinh_2alpha, m2_sinh2));
        let denominator = (4.0 * half_sinh).mul_add(half_sinh, -m2_sinh2);
        let term = weight * numerator / denominator;
        sum += term;
        if term.abs() <= 1e-18 * sum.abs() {
            break;
        }
        n += 1.0;
    }
    4.0 / 3.0 * sinh_alpha * sum
}

/// Schaffer, Norrelykke & Howard's closed-form approximation to Brenner's perpendicular wall
/// correction (Langmuir 23, 3654 (2007)):
///
/// gamma_perp / gamma0 = 1 / [1 - (9/8) x + (1/2) x^3 - (57/100) x^4 + (1/5) x^5
///     + (7/200) x^11 - (1/25) x^12], x = R/h.
///
/// It is within 0.1% of [`brenner_axial_factor`] for h/R >= 1.1 and within 0.35% down to
/// h/R = 1.02 (checked in the unit tests), and it diverges at contact as the exact result does.
///
/// Errors: non-positive or non-finite radius or height, or a height not above the radius.
pub fn schaffer_axial_factor(radius_m: f64, height_m: f64) -> Result<f64, DragError> {
    gap_over_radius(radius_m, height_m)?;
    let x = radius_m / height_m;
    // Horner's scheme for the coefficients of x^12 down to x^0.
    let coefficients = [
        -1.0 / 25.0,
        7.0 / 200.0,
        0.0,
        0.0,
        0.0,
        0.0,
        0.0,
        1.0 / 5.0,
        -57.0 / 100.0,
        1.0 / 2.0,
        0.0,
        -9.0 / 8.0,
        1.0,
    ];
    let denominator = coefficients
        .iter()
        .fold(0.0_f64, |acc, &c| acc.mul_add(x, c));
    Ok(denominator.recip())
}

/// The wall correction gamma / gamma0 for motion along `orientation`: Faxen's formula
/// ([`faxen_lateral_factor`]) for [`AxisOrientation::Lateral`], Brenner's exact series
/// ([`brenner_axial_factor`]) for [`AxisOrientation::Axial`], and exactly 1 when `height_m` is
/// `None` (no surface nearby).
///
/// Errors: as for the chosen formula; the radius is checked even when `height_m` is `None`.
pub fn wall_factor(
    orientation: AxisOrientation,
    radius_m: f64,
    height_m: Option<f64>,
) -> Result<f64, DragError> {
    check_radius(radius_m)?;
    match (orientation, height_m) {
        (_, None) => Ok(1.0),
        (AxisOrientation::Lateral, Some(height_m)) => faxen_lateral_factor(radius_m, height_m),
        (AxisOrientation::Axial, Some(height_m)) => brenner_axial_factor(radius_m, height_m),
    }
}

/// Characteristic frequencies of the frequency-dependent drag on a sphere (Stokes 1851), in the
/// form used by Berg-Sorensen & Flyvbjerg, Rev. Sci. Instrum. 75, 594 (2004).
///
/// For a sphere oscillating at frequency f the drag is
/// gamma(f) = gamma0 [1 + (1 - i) (f/f_nu)^(1/2) - i (2/9) (f/f_nu)], and the inertia of bead and
/// entrained fluid enters the spectrum through f_m.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct HydroFrequencies {
    /// f_nu = nu / (pi R^2), with nu = eta / rho_fluid the kinematic viscosity, in Hz: the
    /// frequency at which the vorticity diffuses over one radius per cycle.
    pub f_nu_hz: f64,
    /// f_m = gamma0 / (2 pi m*), with m* = m_bead + m_fluid / 2 the bead mass plus half the mass
    /// of the displaced fluid (the added mass), in Hz: the inertial cut-off.
    pub f_m_hz: f64,
}

/// The characteristic frequencies f_nu and f_m (see [`HydroFrequencies`]) of a sphere of radius
/// `radius_m` (m) and density `bead_density_kg_per_m3` in a fluid of viscosity `viscosity_pa_s`
/// (Pa s) and density `fluid_density_kg_per_m3` (Berg-Sorensen & Flyvbjerg 2004):
///
/// f_nu = eta / (pi rho_fluid R^2),
/// f_m = 6 pi eta R / (2 pi (4/3) pi R^3 (rho_bead + rho_fluid / 2)).
///
/// No check is made; inputs must be positive and finite, otherwise the frequencies are
/// non-finite or meaningless.
pub fn hydrodynamic_frequencies(
    viscosity_pa_s: f64,
    fluid_density_kg_per_m3: f64,
    bead_density_kg_per_m3: f64,
    radius_m: f64,
) -> HydroFrequencies {
    let radius_squared_m2 = radius_m * radius_m;
    let kinematic_viscosity_m2_per_s = viscosity_pa_s / fluid_density_kg_per_m3;
    let f_nu_hz = kinematic_viscosity_m2_per_s / (PI * radius_squared_m2);
    let volume_m3 = 4.0 / 3.0 * PI * radius_squared_m2 * radius_m;
    let effective_mass_kg =
        volume_m3 * fluid_density_kg_per_m3.mul_add(0.5, bead_density_kg_per_m3);
    let f_m_hz = stokes_drag_kg_per_s(viscosity_pa_s, radius_m) / (2.0 * PI * effective_mass_kg);
    HydroFrequencies { f_nu_hz, f_m_hz }
}
