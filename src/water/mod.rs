//! Properties of liquid water at atmospheric pressure: viscosity and density versus temperature.
//!
//! The drag on a trapped bead is proportional to the viscosity of the medium, so the calibration
//! needs it at the temperature of the experiment. This module gives the IAPWS 2008 viscosity
//! formulation evaluated at the density of liquid water at 0.1 MPa over 0 to 99 °C (the Tanaka
//! et al. (2001) formula up to 40 °C, Kell's (1975) above, joined continuously at 40 °C), and
//! the Boltzmann constant. Everything is in SI units; temperatures in degrees Celsius carry `_c`
//! in their name and absolute temperatures carry `_k`.

#[cfg(test)]
mod tests;

/// Boltzmann constant k_B in J/K, exact since the 2019 SI redefinition
/// (BIPM, The International System of Units (SI Brochure), 9th ed., 2019).
pub const BOLTZMANN_J_PER_K: f64 = 1.380649e-23;

/// The Celsius zero in kelvin, exact by definition of the Celsius scale
/// (BIPM SI Brochure, 9th ed., 2019): T/K = t/°C + 273.15.
pub const ZERO_CELSIUS_K: f64 = 273.15;

/// Lowest temperature (°C) accepted by [`water_viscosity_pa_s`] and [`water_density_kg_per_m3`].
///
/// This is the lower end of the range of the Tanaka et al. (2001) density formula (supercooled
/// water is not covered).
pub const WATER_MIN_TEMPERATURE_C: f64 = 0.0;

/// Highest temperature (°C) accepted by [`water_viscosity_pa_s`] and [`water_density_kg_per_m3`].
///
/// Liquid water at 0.101325 MPa boils at about 99.97 °C; the formulas are checked against the
/// IAPWS-95 and IAPWS 2008 fixture up to 99 °C, and nothing above is accepted.
pub const WATER_MAX_TEMPERATURE_C: f64 = 99.0;

/// Temperature (°C) where the density switches from the Tanaka et al. (2001) formula (below and
/// at it) to Kell's (1975) formula (above it): the upper end of Tanaka's range.
pub const DENSITY_JOIN_TEMPERATURE_C: f64 = 40.0;

/// Errors of the water-property layer: a temperature the formulas cannot be used at.
#[derive(Debug, Clone, Copy, PartialEq, thiserror::Error)]
pub enum WaterError {
    /// The temperature is NaN or infinite.
    #[error(
        "water temperature_c is not a finite number (got {temperature_c}); give the sample temperature in degrees Celsius, or give --viscosity in Pa s directly"
    )]
    NonFiniteTemperature {
        /// The value that was given, in °C.
        temperature_c: f64,
    },
    /// The temperature lies outside 0 to 99 °C, the liquid range at atmospheric pressure that
    /// the built-in density and viscosity formulas cover.
    #[error(
        "water temperature_c {temperature_c} °C is outside the valid range {min_c} to {max_c} °C of the built-in water formulas; give the temperature in degrees Celsius (not kelvin), or give --viscosity in Pa s directly"
    )]
    TemperatureOutOfRange {
        /// The value that was given, in °C.
        temperature_c: f64,
        /// Lowest accepted temperature, in °C.
        min_c: f64,
        /// Highest accepted temperature, in °C.
        max_c: f64,
    },
}

/// Checks that a temperature in °C lies in the range of the built-in formulas.
fn check_temperature_c(temperature_c: f64) -> Result<(), WaterError> {
    if !temperature_c.is_finite() {
        return Err(WaterError::NonFiniteTemperature { temperature_c });
    }
    if !(WATER_MIN_TEMPERATURE_C..=WATER_MAX_TEMPERATURE_C).contains(&temperature_c) {
        return Err(WaterError::TemperatureOutOfRange {
            temperature_c,
            min_c: WATER_MIN_TEMPERATURE_C,
            max_c: WATER_MAX_TEMPERATURE_C,
        });
    }
    Ok(())
}

/// Dynamic viscosity of air-free liquid water at 101.325 kPa, in Pa s, at `temperature_c` (°C).
///
/// This is the IAPWS 2008 formulation (Huber et al., J. Phys. Chem. Ref. Data 38, 101 (2009),
/// doi:10.1063/1.3088050; see [`iapws2008_viscosity_pa_s`]) with the critical enhancement
/// factor set to 1, which is immaterial far from the critical point.
/// The density it needs is taken from [`water_density_kg_per_m3`] (Tanaka et al., Metrologia 38,
/// 301 (2001), up to 40 °C; Kell, J. Chem. Eng. Data 20, 97 (1975), above).
///
/// Accuracy: the release states an uncertainty from under 1% up to 7% depending on the state;
/// for the liquid at atmospheric pressure it is 1% or better (from memory, unverified). This is
/// the uncertainty of the formulation against real water, and it dominates: against the
/// formulation itself (IAPWS 2008 at the IAPWS-95 density, computed with the `iapws` package in
/// tests/data/water/) this function agrees to 3e-6 relative over 0.5 to 99 °C, the effect of the
/// density formulas' own small differences (the unit tests check 1e-5). In 20 to 40 °C it also
/// agrees with the independent Kestin, Sokolov & Wakeham (1978) correlation to about 0.04%,
/// which the unit tests check to 0.1%.
///
/// Valid range: [`WATER_MIN_TEMPERATURE_C`] to [`WATER_MAX_TEMPERATURE_C`] inclusive (0 to 99 °C,
/// the liquid at 0.1 MPa); outside it, or for NaN, this returns a [`WaterError`].
pub fn water_viscosity_pa_s(temperature_c: f64) -> Result<f64, WaterError> {
    let density_kg_per_m3 = water_density_kg_per_m3(temperature_c)?;
    Ok(iapws2008_viscosity_pa_s(
        temperature_c + ZERO_CELSIUS_K,
        density_kg_per_m3,
    ))
}

/// Density of air-free water at 101.325 kPa, in kg/m3, at `temperature_c` (°C, ITS-90).
///
/// From 0 to 40 °C ([`DENSITY_JOIN_TEMPERATURE_C`]) the formula of Tanaka et al., Metrologia 38,
/// 301 (2001):
///
/// rho(t) = a5 [1 - (t + a1)^2 (t + a2) / (a3 (t + a4))],
///
/// with a1 = -3.983035 °C, a2 = 301.797 °C, a3 = 522528.9 °C^2, a4 = 69.34881 °C and
/// a5 = 999.974950 kg/m3, for water of standard mean ocean water isotopic composition (from
/// memory, unverified). Against IAPWS-95 (the fixture of tests/data/water/) it agrees to
/// 1.2e-3 kg/m3 (1.2e-6 relative) over 0.5 to 40 °C (checked in the unit tests to 2e-3).
///
/// Above 40 °C, up to [`WATER_MAX_TEMPERATURE_C`], Kell's polynomial (see
/// [`kell1975_density_kg_per_m3`]), shifted by the constant that makes it equal Tanaka's formula
/// at 40 °C: the join is continuous in value by construction, and the slopes of the two sides
/// differ there by 1.7e-4 kg/m3/K against a slope of -0.38 kg/m3/K (4.4e-4 relative; the
/// unit tests check 1e-3). The shift is 3.1e-3 kg/m3 (3e-6 relative), the size of the offset
/// between Kell's 1975 density scale and IAPWS-95's; with it the formula agrees with IAPWS-95
/// to 1.6e-3 kg/m3 (1.6e-6 relative) over 40 to 99 °C (checked in the unit tests to 2.5e-3).
///
/// Outside 0 to 99 °C, or for NaN, this returns a [`WaterError`].
pub fn water_density_kg_per_m3(temperature_c: f64) -> Result<f64, WaterError> {
    check_temperature_c(temperature_c)?;
    if temperature_c <= DENSITY_JOIN_TEMPERATURE_C {
        return Ok(tanaka2001_density_kg_per_m3(temperature_c));
    }
    let shift_kg_per_m3 = tanaka2001_density_kg_per_m3(DENSITY_JOIN_TEMPERATURE_C)
        - kell1975_density_kg_per_m3(DENSITY_JOIN_TEMPERATURE_C);
    Ok(kell1975_density_kg_per_m3(temperature_c) + shift_kg_per_m3)
}

/// Kell's density of air-free water at 1 atm, in kg/m3, at `temperature_c` (°C, ITS-90), without
/// a range check and without the shift that [`water_density_kg_per_m3`] applies above 40 °C.
///
/// Kell, J. Chem. Eng. Data 20, 97 (1975), valid 0 to 150 °C on the IPTS-68 scale:
///
/// rho = (999.83952 + 16.945176 t - 7.9870401e-3 t^2 - 46.170461e-6 t^3 + 105.56302e-9 t^4
///        - 280.54253e-12 t^5) / (1 + 16.879850e-3 t),  t = t68 in °C
///
/// (coefficients recalled from memory, unverified except through the fixture check below). The
/// ITS-90 temperature is converted with t68 = 1.00024 t90, the usual approximation over 0 to
/// 100 °C (recalled from memory, unverified). Checked: against IAPWS-95 at 0.101325 MPa (the
/// `iapws` fixture in tests/data/water/) the unshifted formula is within 4.7e-3 kg/m3 (5e-6
/// relative) over 0.5 to 99 °C, an offset nearly constant in temperature.
pub fn kell1975_density_kg_per_m3(temperature_c: f64) -> f64 {
    // Coefficients of Kell (1975), numerator highest power first, then the denominator's.
    const NUMERATOR: [f64; 6] = [
        -280.54253e-12,
        105.56302e-9,
        -46.170461e-6,
        -7.9870401e-3,
        16.945176,
        999.83952,
    ];
    const DENOMINATOR_SLOPE_PER_C: f64 = 16.879850e-3;
    // ITS-90 to IPTS-68 (see the doc comment).
    const IPTS68_PER_ITS90: f64 = 1.00024;
    let t68 = IPTS68_PER_ITS90 * temperature_c;
    let numerator = NUMERATOR
        .iter()
        .fold(0.0_f64, |acc, &c| acc.mul_add(t68, c));
    numerator / DENOMINATOR_SLOPE_PER_C.mul_add(t68, 1.0)
}

/// The Tanaka et al. (2001) density formula without a range check (see
/// [`water_density_kg_per_m3`]).
fn tanaka2001_density_kg_per_m3(temperature_c: f64) -> f64 {
    // Coefficients of Tanaka et al., Metrologia 38, 301 (2001), for air-free SMOW.
    const A1_C: f64 = -3.983035;
    const A2_C: f64 = 301.797;
    const A3_C2: f64 = 522528.9;
    const A4_C: f64 = 69.34881;
    const A5_KG_PER_M3: f64 = 999.974950;
    let t = temperature_c;
    let shifted = t + A1_C;
    A5_KG_PER_M3 * (1.0 - shifted * shifted * (t + A2_C) / (A3_C2 * (t + A4_C)))
}

/// The IAPWS 2008 viscosity of H2O, in Pa s, at absolute temperature `temperature_k` (K) and
/// density `density_kg_per_m3`, with the critical enhancement mu2 set to 1.
///
/// Huber et al., J. Phys. Chem. Ref. Data 38, 101 (2009), doi:10.1063/1.3088050, the basis of
/// the IAPWS 2008 viscosity release. With reduced variables
/// Tb = T / 647.096 K and rb = rho / 322 kg/m3, and mu* = 1 uPa s:
///
/// mu = mu* mu0(Tb) mu1(Tb, rb),
/// mu0 = 100 sqrt(Tb) / sum_{i=0..3} H_i / Tb^i,
/// mu1 = exp[rb sum_{i=0..5} (1/Tb - 1)^i sum_{j=0..6} H_ij (rb - 1)^j].
///
/// No range check is made: this is the bare formula, exposed so that it can be checked against
/// the release's check values. Use [`water_viscosity_pa_s`] for ambient liquid water.
pub fn iapws2008_viscosity_pa_s(temperature_k: f64, density_kg_per_m3: f64) -> f64 {
    // Reducing constants of the release.
    const CRITICAL_TEMPERATURE_K: f64 = 647.096;
    const CRITICAL_DENSITY_KG_PER_M3: f64 = 322.0;
    const REFERENCE_VISCOSITY_PA_S: f64 = 1.0e-6;
    // Coefficients H_i of the dilute-gas term mu0 (Huber et al. 2009).
    const H0: [f64; 4] = [1.67752, 2.20462, 0.6366564, -0.241605];
    // Coefficients H_ij of the residual term mu1 (Huber et al. 2009); row i, column j.
    const H1: [[f64; 7]; 6] = [
        [
            0.520094, 0.222531, -0.281378, 0.161913, -0.0325372, 0.0, 0.0,
        ],
        [0.0850895, 0.999115, -0.906851, 0.257399, 0.0, 0.0, 0.0],
        [-1.08374, 1.88797, -0.772479, 0.0, 0.0, 0.0, 0.0],
        [
            -0.289555,
            1.26613,
            -0.489837,
            0.0,
            0.0698452,
            0.0,
            -0.00435673,
        ],
        [0.0, 0.0, -0.257040, 0.0, 0.0, 0.00872102, 0.0],
        [0.0, 0.120573, 0.0, 0.0, 0.0, 0.0, -0.000593264],
    ];

    let t_reduced = temperature_k / CRITICAL_TEMPERATURE_K;
    let rho_reduced = density_kg_per_m3 / CRITICAL_DENSITY_KG_PER_M3;

    // sum_i H_i / Tb^i, by Horner's scheme in 1/Tb.
    let inv_t = t_reduced.recip();
    let dilute_denominator = H0
        .iter()
        .rev()
        .fold(0.0_f64, |acc, &h| acc.mul_add(inv_t, h));
    let mu0 = 100.0 * t_reduced.sqrt() / dilute_denominator;

    // Double Horner scheme: outer in (1/Tb - 1), inner in (rb - 1).
    let tau = inv_t - 1.0;
    let delta = rho_reduced - 1.0;
    let exponent_sum = H1.iter().rev().fold(0.0_f64, |acc_i, row| {
        let inner = row
            .iter()
            .rev()
            .fold(0.0_f64, |acc_j, &h| acc_j.mul_add(delta, h));
        acc_i.mul_add(tau, inner)
    });
    let mu1 = (rho_reduced * exponent_sum).exp();

    REFERENCE_VISCOSITY_PA_S * mu0 * mu1
}
