//! The calibration result as the world sees it: the JSON document (wire types, versioned by the
//! `schema` field) and the plain-text summary table.
//!
//! Core types do not derive Serialize; this module owns the wire shape and converts, once, from
//! SI to the trade's units (pN/nm, nm/V, pN s/nm, um, mPa s). The CLI's `--json` output, the
//! service's stored result and its responses all use `CalibrationReport` unchanged.

mod inspection;
mod summary;
#[cfg(test)]
mod tests;

pub use inspection::{inspection_json, inspection_text};
pub use summary::summary_table;

use crate::calibration::{
    ActiveCalibration, AnalysisOptions, AxisCalibration, AxisCoupling, Calibration, DragSource,
    Estimate, RunConditions,
};
use crate::drag::AxisOrientation;
use crate::equipartition::Detrend;
use crate::recording::{PositionUnit, Recording};
use crate::spectrum::FilterSetting;
use serde::{Deserialize, Serialize};

/// Version of the JSON shape; bumped only for incompatible changes.
pub const SCHEMA: &str = "trapwise.calibration/1";

/// A value with its standard error, in the unit its field name states.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct ValueSe {
    pub value: f64,
    pub se: f64,
}

impl From<Estimate> for ValueSe {
    fn from(e: Estimate) -> Self {
        ValueSe {
            value: e.value,
            se: e.se,
        }
    }
}

/// The wire form of an axis's active calibration (`u` the recording's unit, `nm` or `V`).
fn active_report(act: &ActiveCalibration, u: &str) -> Option<ActiveReport> {
    let volts = u == "V";
    Some(ActiveReport {
        drive_frequency_hz: act.drive_frequency_hz,
        drive_amplitude_nm: act.drive_amplitude_m / 1e-9,
        spike_power: act.spike_power.into(),
        power_unit: format!("{u}^2"),
        sensitivity_nm_per_v: volts.then(|| scaled(act.metres_per_unit, 1e9)),
        scale_factor: (!volts).then(|| scaled(act.metres_per_unit, 1e9)),
        drag_pn_s_per_nm: scaled(act.drag_kg_per_s, 1e3),
        drag_ratio: act.drag_ratio.into(),
        stiffness_pn_per_nm: act.stiffness_pn_per_nm?.into(),
    })
}

fn scaled(e: Estimate, factor: f64) -> ValueSe {
    ValueSe {
        value: e.value * factor,
        se: e.se * factor,
    }
}

/// The whole result of calibrating one recording.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct CalibrationReport {
    pub schema: String,
    pub software: Software,
    pub input: InputInfo,
    pub conditions: ConditionsInfo,
    pub options: OptionsInfo,
    /// kB T, pN nm.
    pub thermal_energy_pn_nm: f64,
    /// Bulk Stokes drag 6 pi eta R (no wall correction), pN s/nm; each axis carries its own
    /// wall-corrected drag.
    pub drag_pn_s_per_nm: ValueSe,
    pub axes: Vec<AxisReport>,
    /// The zero-lag correlation of every pair of calibrated axes (empty for one axis).
    #[serde(default)]
    pub axes_coupling: Vec<CouplingReport>,
    /// The rotation to the trap's principal axes, when `principal_axes` was asked for.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub principal_axes: Option<PrincipalAxesReport>,
}

/// The correlation of two axes.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct CouplingReport {
    pub first: String,
    pub second: String,
    /// Zero-lag correlation coefficient; its `se` is the one it would have were the axes
    /// independent (Bartlett's formula).
    pub correlation: ValueSe,
    /// correlation / se.
    pub z: f64,
    /// |z| beyond the two-sided limit of `false_alarm_rate`.
    pub significant: bool,
    pub false_alarm_rate: f64,
    /// Rotation from these axes to the principal axes of their plane, degrees, from `first`
    /// towards `second`; for significant pairs of nanometre data, otherwise null.
    pub principal_angle_deg: Option<ValueSe>,
}

/// Which detector axes were replaced by the trap's principal axes, and the angle.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct PrincipalAxesReport {
    pub detector_axes: [String; 2],
    /// The names the rotated axes carry in `axes` (`x'` is the principal axis nearest `x`).
    pub rotated_axes: [String; 2],
    /// Rotation from the detector axes to the principal axes, degrees, from the first detector
    /// axis towards the second (at most 45 in size).
    pub angle_deg: ValueSe,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Software {
    pub name: String,
    pub version: String,
    /// The version of the calibration's models and defaults (`calibration::MODEL_VERSION`):
    /// results computed under different model versions may differ for the same file and
    /// settings. Documents stored before the field existed were computed under version 1.
    #[serde(default = "model_version_one")]
    pub model_version: u32,
}

fn model_version_one() -> u32 {
    1
}

/// What was read.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct InputInfo {
    pub file_name: String,
    /// SHA-256 of the file's bytes, lower-case hex.
    pub sha256: String,
    pub format: String,
    pub n_samples: usize,
    pub sample_rate_hz: f64,
    pub duration_s: f64,
    /// `nm` or `V`.
    pub unit: String,
    pub axes: Vec<String>,
}

/// The run conditions used, echoed in the trade's units.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct ConditionsInfo {
    pub bead_diameter_um: f64,
    pub bead_diameter_se_um: f64,
    pub temperature_c: f64,
    pub temperature_se_c: f64,
    pub viscosity_mpa_s: f64,
    /// Standard error of the viscosity, mPa s (0 when none was given; documents stored
    /// before it existed read as 0).
    #[serde(default)]
    pub viscosity_se_mpa_s: f64,
    /// `water-iapws-2008` (computed from the temperature) or `given`.
    pub viscosity_source: String,
    pub height_um: Option<f64>,
    pub height_se_um: f64,
    pub bead_density_kg_per_m3: f64,
    /// Density of the medium in the hydrodynamic model, kg/m^3 (water's at the temperature
    /// unless given); absent from documents stored before it was recorded.
    #[serde(default)]
    pub medium_density_kg_per_m3: Option<f64>,
}

/// The analysis options used.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct OptionsInfo {
    /// Segments asked for; null when chosen automatically (the number used is in
    /// `spectrum_fit.windows`).
    pub windows: Option<usize>,
    /// `none`, `fixed` or `fitted`.
    pub detector_filter: String,
    pub hydrodynamics: bool,
    /// The camera's exposure time modelled (motion blur), s; absent for instantaneous samples
    /// (and in documents written before it existed).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub exposure_time_s: Option<f64>,
    /// `mean` or `linear`.
    pub detrend: String,
    pub exclude_peaks: bool,
    pub target_relative_precision: f64,
    pub axial_axes: Vec<String>,
    /// Whether the lateral axes were calibrated along the trap's principal axes.
    #[serde(default)]
    pub principal_axes: bool,
}

/// The calibration of one axis.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct AxisReport {
    pub axis: String,
    /// `lateral` or `axial`.
    pub orientation: String,
    /// gamma / gamma0 from the wall correction (1 in bulk).
    pub wall_factor: f64,
    /// The drag every method of this axis uses: assumed from the run conditions, or measured
    /// by a stage drive.
    pub drag_pn_s_per_nm: AxisDragReport,
    /// From the spectral fit; null when that method failed (a `method-failed` finding says why).
    pub corner_frequency_hz: Option<ValueSe>,
    /// From the autocorrelation fit; null when that method failed.
    pub relaxation_time_s: Option<ValueSe>,
    /// Fitted diffusion coefficient in `diffusion_unit` (one-sided spectrum convention); null
    /// when the spectral fit failed.
    pub diffusion: Option<ValueSe>,
    /// `nm^2/s` or `V^2/s`.
    pub diffusion_unit: String,
    /// Einstein's kB T / gamma, nm^2/s.
    pub diffusion_theory_nm2_per_s: f64,
    pub stiffness_pn_per_nm: StiffnessReport,
    /// Displacement sensitivity, nm/V; null for nanometre data.
    pub sensitivity_nm_per_v: Option<ValueSe>,
    /// `consistent` or `inconsistent`.
    pub verdict: String,
    pub verdict_reasons: Vec<String>,
    pub discrepancies: Vec<DiscrepancyReport>,
    pub findings: Vec<FindingReport>,
    /// Whether the standard errors include the run conditions' uncertainties.
    pub errors_include_conditions: bool,
    /// Each method's own fit; null for a method that failed.
    pub spectrum_fit: Option<SpectrumFitReport>,
    pub autocorrelation_fit: Option<AcfFitReport>,
    pub equipartition: Option<EquipartitionReport>,
    /// The white noise floor of the spectral model and its likelihood-ratio test; null with
    /// `noise_floor` off or without a spectral fit.
    #[serde(default)]
    pub noise_floor: Option<NoiseFloorReport>,
    /// The active calibration by a stage drive; null for an axis the stage did not drive (and
    /// in documents written before it existed).
    #[serde(default)]
    pub active: Option<ActiveReport>,
    /// The overlapping Allan deviation of the record against the fitted model's curve and
    /// band (a diagnostic, not a stiffness estimate); null in documents made before it existed.
    #[serde(default)]
    pub allan: Option<AllanReport>,
    /// Arrays for plotting; omitted where a caller asked for the summary only.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub plots: Option<Plots>,
}

/// An axis's drag, pN s/nm, and where it comes from.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct AxisDragReport {
    pub value: f64,
    pub se: f64,
    /// `assumed` (from the bead diameter, viscosity and height) or `measured` (by a stage
    /// drive); documents written before it existed read as `assumed`.
    #[serde(default = "assumed_source")]
    pub source: String,
}

fn assumed_source() -> String {
    DragSource::Assumed.name().to_string()
}

/// What the stage drive measured on one axis (Tolic-Norrelykke et al., Rev. Sci. Instrum. 77,
/// 103101 (2006)).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct ActiveReport {
    pub drive_frequency_hz: f64,
    /// Stage amplitude, zero to peak, nm.
    pub drive_amplitude_nm: f64,
    /// The spike's power in the record (mean square of the driven motion, the background at
    /// the drive frequency subtracted), in `power_unit`.
    pub spike_power: ValueSe,
    /// `V^2` or `nm^2`.
    pub power_unit: String,
    /// beta = sqrt(W_th / W_ex), nm/V, for volt data; null for nanometre data.
    pub sensitivity_nm_per_v: Option<ValueSe>,
    /// The same ratio for nanometre data: true nanometres per recorded nanometre (1 when the
    /// camera's or detector's nanometre calibration is right); null for volt data.
    pub scale_factor: Option<ValueSe>,
    /// The measured drag kB T / D, pN s/nm.
    pub drag_pn_s_per_nm: ValueSe,
    /// Measured drag over the drag expected from the given bead diameter, viscosity and height.
    pub drag_ratio: ValueSe,
    /// The spectral stiffness with the measured drag, pN/nm (the psd estimate of this axis).
    pub stiffness_pn_per_nm: ValueSe,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct StiffnessReport {
    /// Each method's estimate; null for a method that failed on this record.
    pub psd: Option<ValueSe>,
    pub acf: Option<ValueSe>,
    pub equipartition: Option<ValueSe>,
    pub consensus: ValueSe,
    /// False for volt data: equipartition then uses beta from the spectral fit and is left out
    /// of the consensus.
    pub equipartition_independent: bool,
    pub consensus_weights: MethodTriple,
    /// Correlation matrix of (psd, acf, equipartition).
    pub correlation: [[f64; 3]; 3],
    /// Methods left out of the consensus, each with the reason (its value stands, its weight is
    /// zero): its own fit was rejected, or its model cannot describe what the data hold.
    #[serde(default)]
    pub excluded: std::collections::BTreeMap<String, String>,
}

#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct MethodTriple {
    pub psd: f64,
    pub acf: f64,
    pub equipartition: f64,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct DiscrepancyReport {
    pub first: String,
    pub second: String,
    pub difference_pn_per_nm: f64,
    pub difference_se_pn_per_nm: f64,
    /// difference / its standard error.
    pub z: f64,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct FindingReport {
    pub code: String,
    /// `info`, `warning` or `error`.
    pub severity: String,
    pub message: String,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct SpectrumFitReport {
    pub fit_min_hz: f64,
    pub fit_max_hz: f64,
    pub chi_square: f64,
    pub degrees_of_freedom: usize,
    pub p_value: f64,
    pub correlation_fc_diffusion: f64,
    pub blocks: usize,
    pub iterations: usize,
    pub resolution_hz: f64,
    /// Periodogram segments averaged.
    pub windows: usize,
    pub detector_filter: Option<FilterReport>,
    pub excluded_peaks: Vec<PeakReport>,
    /// The fitted 1/f drift term's one-sided density at 1 Hz, signal-unit^2/Hz, when the
    /// likelihood-ratio test kept it (absent otherwise, and in documents written before it
    /// existed).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub drift_1f_density_at_1_hz: Option<ValueSe>,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct FilterReport {
    pub f3db_hz: ValueSe,
    pub alpha: ValueSe,
    /// True when fitted, false when given.
    pub fitted: bool,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct PeakReport {
    pub frequency_hz: f64,
    pub peak_ratio: f64,
    /// Mean square of the interference, in the signal unit squared.
    pub excess_power: f64,
    pub mains_hz: Option<f64>,
    pub harmonic: Option<u32>,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct AcfFitReport {
    pub first_lag: usize,
    pub last_lag: usize,
    pub lags_used: usize,
    pub chi_square: f64,
    pub degrees_of_freedom: usize,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct EquipartitionReport {
    /// Variance in `variance_unit`.
    pub variance: ValueSe,
    /// `nm^2` or `V^2`.
    pub variance_unit: String,
    pub mean: f64,
    pub slope_per_s: f64,
    pub detrend: String,
    /// Sinusoids fitted and subtracted before the autocorrelation and equipartition methods.
    pub lines_removed: Vec<LineReport>,
}

/// The white noise floor of one axis.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct NoiseFloorReport {
    /// `auto` or `fit`.
    pub mode: String,
    /// Whether the floor is in the spectral model (and subtracted from equipartition's variance).
    pub included: bool,
    /// Likelihood-ratio statistic of the fit with the floor against the fit without it (0 when
    /// the floor's best value is zero), the critical value `auto` compares it with, and its
    /// p-value under the 50:50 mixture of chi-square with 0 and 1 degrees of freedom.
    pub lr_statistic: f64,
    pub critical_value: f64,
    pub p_value: f64,
    /// One-sided level P_n in `level_unit`; null when the floor is not in the model.
    pub level: Option<ValueSe>,
    /// `nm^2/Hz` or `V^2/Hz`.
    pub level_unit: String,
    /// The white noise variance P_n f_s / 2 in the equipartition variance's unit.
    pub variance: Option<ValueSe>,
    /// That variance over the measured variance.
    pub variance_share: Option<f64>,
}

/// The Allan deviation of one axis, in the recording's unit, at octave-spaced averaging times
/// up to a third of the record.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct AllanReport {
    /// Averaging times, s.
    pub tau_s: Vec<f64>,
    /// Measured overlapping Allan deviation, `unit`.
    pub deviation: Vec<f64>,
    /// The deviation the fitted spectral model of the bead's motion predicts (without a fitted
    /// 1/f drift term), and the edges of the central 99.8 % band of the overlapping estimator
    /// around it, `unit`; null when the spectral fit failed.
    pub expected: Option<Vec<f64>>,
    pub expected_low: Option<Vec<f64>>,
    pub expected_high: Option<Vec<f64>>,
    /// `nm` or `V`.
    pub unit: String,
    /// The start, s, of the last run of averaging times where the measured deviation lies
    /// above the band, when every later one stays above the expected curve; null when there is
    /// none (or no fit).
    pub drift_onset_s: Option<f64>,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct LineReport {
    pub frequency_hz: f64,
    /// Amplitude in the signal unit.
    pub amplitude: f64,
}

/// Arrays for plotting.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Plots {
    /// Null where the method behind the plot failed.
    pub spectrum: Option<SpectrumPlot>,
    pub autocorrelation: Option<AcfPlot>,
    pub histogram: Option<HistogramPlot>,
}

/// The blocked one-sided spectrum and the fitted model at the same frequencies; residual =
/// (data - model) / (model / sqrt(n_averaged)), in standard errors.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct SpectrumPlot {
    pub frequency_hz: Vec<f64>,
    /// Unit^2/Hz.
    pub psd: Vec<f64>,
    pub model: Vec<f64>,
    pub n_averaged: Vec<usize>,
    pub residual: Vec<f64>,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct AcfPlot {
    pub lag_s: Vec<f64>,
    /// Unit^2.
    pub autocovariance: Vec<f64>,
    pub model: Vec<f64>,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct HistogramPlot {
    /// Bin centres relative to the mean, signal unit.
    pub centre: Vec<f64>,
    pub bin_width: f64,
    pub count: Vec<u64>,
    /// Counts expected from the Gaussian of equipartition.
    pub expected: Vec<f64>,
}

/// Facts about the input that only the caller knows.
#[derive(Clone, Debug, PartialEq)]
pub struct InputFacts {
    pub file_name: String,
    pub sha256: String,
    pub format: String,
}

fn orientation_name(o: AxisOrientation) -> &'static str {
    match o {
        AxisOrientation::Lateral => "lateral",
        AxisOrientation::Axial => "axial",
    }
}

/// SHA-256 of bytes as lower-case hex.
pub fn sha256_hex(bytes: &[u8]) -> String {
    use sha2::Digest;
    format!("{:x}", sha2::Sha256::digest(bytes))
}

/// Builds the wire report. `with_plots` adds the plotting arrays.
pub fn build(
    calibration: &Calibration,
    recording: &Recording,
    facts: &InputFacts,
    conditions: &RunConditions,
    options: &AnalysisOptions,
    with_plots: bool,
) -> CalibrationReport {
    let phys = &calibration.physics;
    CalibrationReport {
        schema: SCHEMA.to_string(),
        software: Software {
            name: "trapwise".into(),
            version: env!("CARGO_PKG_VERSION").into(),
            model_version: crate::calibration::MODEL_VERSION,
        },
        input: InputInfo {
            file_name: facts.file_name.clone(),
            sha256: facts.sha256.clone(),
            format: facts.format.clone(),
            n_samples: recording.n_samples(),
            sample_rate_hz: recording.sample_rate_hz,
            duration_s: recording.duration_s(),
            unit: recording.unit.suffix().into(),
            axes: recording.axes.iter().map(|a| a.name.clone()).collect(),
        },
        conditions: ConditionsInfo {
            bead_diameter_um: conditions.bead_diameter_m * 1e6,
            bead_diameter_se_um: conditions.bead_diameter_se_m * 1e6,
            temperature_c: conditions.temperature_c,
            temperature_se_c: conditions.temperature_se_c,
            viscosity_mpa_s: phys.viscosity_pa_s * 1e3,
            viscosity_se_mpa_s: conditions.viscosity_se_pa_s * 1e3,
            viscosity_source: if phys.viscosity_from_water {
                "water-iapws-2008".into()
            } else {
                "given".into()
            },
            height_um: conditions.height_m.map(|h| h * 1e6),
            height_se_um: conditions.height_se_m * 1e6,
            bead_density_kg_per_m3: conditions.bead_density_kg_per_m3,
            medium_density_kg_per_m3: Some(phys.fluid_density_kg_per_m3),
        },
        options: OptionsInfo {
            windows: options.n_windows,
            detector_filter: match options.filter {
                FilterSetting::None => "none",
                FilterSetting::Fixed(_) => "fixed",
                FilterSetting::Fitted(_) => "fitted",
            }
            .into(),
            hydrodynamics: options.hydrodynamics,
            exposure_time_s: options.exposure_time_s,
            detrend: match options.detrend {
                Detrend::Mean => "mean",
                Detrend::Linear => "linear",
            }
            .into(),
            exclude_peaks: options.exclude_peaks,
            target_relative_precision: options.target_relative_precision,
            axial_axes: options.axial_axes.clone(),
            principal_axes: options.principal_axes,
        },
        thermal_energy_pn_nm: phys.thermal_energy_j * 1e21,
        drag_pn_s_per_nm: scaled(phys.stokes_drag_kg_per_s, 1e3),
        axes: calibration
            .axes
            .iter()
            .map(|a| axis_report(a, recording.unit, options, with_plots))
            .collect(),
        axes_coupling: calibration.coupling.iter().map(coupling_report).collect(),
        principal_axes: calibration
            .principal_axes
            .as_ref()
            .map(|r| PrincipalAxesReport {
                detector_axes: r.detector_axes.clone(),
                rotated_axes: r.rotated_axes.clone(),
                angle_deg: degrees(r.angle_rad),
            }),
    }
}

fn degrees(e: Estimate) -> ValueSe {
    ValueSe {
        value: e.value.to_degrees(),
        se: e.se.to_degrees(),
    }
}

fn coupling_report(c: &AxisCoupling) -> CouplingReport {
    CouplingReport {
        first: c.first.clone(),
        second: c.second.clone(),
        correlation: c.correlation.into(),
        z: c.z,
        significant: c.significant,
        false_alarm_rate: crate::calibration::principal::COUPLING_FALSE_ALARM,
        principal_angle_deg: c.principal_angle_rad.map(degrees),
    }
}

fn axis_report(
    a: &AxisCalibration,
    unit: PositionUnit,
    options: &AnalysisOptions,
    with_plots: bool,
) -> AxisReport {
    let s = &a.stiffness_pn_per_nm;
    let u = unit.suffix();
    let detector_filter = match (
        options.filter,
        a.spectrum.as_ref().and_then(|f| f.fitted_filter),
    ) {
        (FilterSetting::Fitted(_), Some(f)) => Some(FilterReport {
            f3db_hz: ValueSe {
                value: f.f3db_hz,
                se: f.f3db_se_hz,
            },
            alpha: ValueSe {
                value: f.alpha,
                se: f.alpha_se,
            },
            fitted: true,
        }),
        (FilterSetting::Fixed(f), _) => Some(FilterReport {
            f3db_hz: ValueSe {
                value: f.f3db_hz,
                se: 0.0,
            },
            alpha: ValueSe {
                value: f.alpha,
                se: 0.0,
            },
            fitted: false,
        }),
        _ => None,
    };
    let plots = with_plots.then(|| plots(a));
    AxisReport {
        axis: a.axis.clone(),
        orientation: orientation_name(a.orientation).into(),
        wall_factor: a.wall_factor,
        drag_pn_s_per_nm: AxisDragReport {
            value: a.drag_kg_per_s.value * 1e3,
            se: a.drag_kg_per_s.se * 1e3,
            source: a.drag_source.name().to_string(),
        },
        active: a.active.as_ref().and_then(|act| active_report(act, u)),
        corner_frequency_hz: a.corner_frequency_hz.map(Into::into),
        relaxation_time_s: a.relaxation_time_s.map(Into::into),
        diffusion: a.diffusion.map(Into::into),
        diffusion_unit: format!("{u}^2/s"),
        diffusion_theory_nm2_per_s: a.diffusion_theory_m2_per_s * 1e18,
        stiffness_pn_per_nm: StiffnessReport {
            psd: s.psd.map(Into::into),
            acf: s.acf.map(Into::into),
            equipartition: s.equipartition.map(Into::into),
            consensus: s.consensus.into(),
            equipartition_independent: s.equipartition_independent,
            consensus_weights: MethodTriple {
                psd: s.consensus_weights[0],
                acf: s.consensus_weights[1],
                equipartition: s.consensus_weights[2],
            },
            correlation: s.correlation,
            excluded: s
                .excluded
                .iter()
                .zip(crate::calibration::METHODS)
                .filter_map(|(r, m)| r.as_ref().map(|r| (m.to_string(), r.clone())))
                .collect(),
        },
        sensitivity_nm_per_v: a.sensitivity_nm_per_v.map(ValueSe::from),
        verdict: a.verdict.name().into(),
        verdict_reasons: a.verdict_reasons.clone(),
        discrepancies: a
            .discrepancies
            .iter()
            .map(|d| DiscrepancyReport {
                first: d.first.into(),
                second: d.second.into(),
                difference_pn_per_nm: d.difference,
                difference_se_pn_per_nm: d.difference_se,
                z: d.z,
            })
            .collect(),
        findings: a
            .findings
            .iter()
            .map(|f| FindingReport {
                code: f.code.into(),
                severity: f.severity.name().into(),
                message: f.message.clone(),
            })
            .collect(),
        errors_include_conditions: a.includes_input_errors,
        spectrum_fit: a.spectrum.as_ref().map(|fit| SpectrumFitReport {
            fit_min_hz: fit.f_min_hz,
            fit_max_hz: fit.f_max_hz,
            chi_square: fit.chi_square,
            degrees_of_freedom: fit.degrees_of_freedom,
            p_value: fit.p_value,
            correlation_fc_diffusion: fit.correlation_fc_diffusion,
            blocks: fit.blocks.len(),
            iterations: fit.iterations,
            resolution_hz: a.resolution_hz,
            windows: a.n_windows,
            detector_filter,
            excluded_peaks: a
                .peaks
                .iter()
                .map(|p| PeakReport {
                    frequency_hz: p.frequency_hz,
                    peak_ratio: p.peak_ratio,
                    excess_power: p.excess_power,
                    mains_hz: p.mains.map(|m| m.0),
                    harmonic: p.mains.map(|m| m.1),
                })
                .collect(),
            drift_1f_density_at_1_hz: fit.flicker.map(|t| ValueSe {
                value: t.density_at_1_hz,
                se: t.density_at_1_hz_se,
            }),
        }),
        autocorrelation_fit: a.acf.as_ref().map(|acf| AcfFitReport {
            first_lag: acf.lags.first().copied().unwrap_or(0),
            last_lag: acf.lags.last().copied().unwrap_or(0),
            lags_used: acf.lags.len(),
            chi_square: acf.chi_square,
            degrees_of_freedom: acf.degrees_of_freedom,
        }),
        equipartition: a.variance.as_ref().map(|variance| EquipartitionReport {
            variance: ValueSe {
                value: variance.variance,
                se: variance.variance_se,
            },
            variance_unit: format!("{u}^2"),
            mean: variance.mean,
            slope_per_s: variance.slope_per_s,
            lines_removed: a
                .lines_removed
                .iter()
                .map(|l| LineReport {
                    frequency_hz: l.frequency_hz,
                    amplitude: l.amplitude,
                })
                .collect(),
            detrend: match options.detrend {
                Detrend::Mean => "mean",
                Detrend::Linear => "linear",
            }
            .into(),
        }),
        noise_floor: a.noise_floor.as_ref().map(|n| NoiseFloorReport {
            mode: match n.test.mode {
                crate::spectrum::NoiseFloorMode::Fit => "fit",
                crate::spectrum::NoiseFloorMode::Auto => "auto",
                crate::spectrum::NoiseFloorMode::Off => "off",
            }
            .into(),
            included: n.test.included,
            lr_statistic: n.test.lr_statistic,
            critical_value: crate::spectrum::NOISE_FLOOR_CRITICAL_LR,
            p_value: n.test.p_value,
            level: n.level.map(|l| ValueSe {
                value: l.level,
                se: l.level_se,
            }),
            level_unit: format!("{u}^2/Hz"),
            variance: n.level.map(|l| ValueSe {
                value: l.variance,
                se: l.variance_se,
            }),
            variance_share: n.variance_share,
        }),
        allan: Some(allan_report(&a.allan, u)),
        plots,
    }
}

fn allan_report(curve: &crate::allan::AllanCurve, unit: &str) -> AllanReport {
    let expected = curve.expected.as_ref();
    AllanReport {
        tau_s: curve.tau_s.clone(),
        deviation: curve.deviation.clone(),
        expected: expected.map(|e| e.deviation.clone()),
        expected_low: expected.map(|e| e.low.clone()),
        expected_high: expected.map(|e| e.high.clone()),
        unit: unit.to_string(),
        drift_onset_s: expected.and_then(|e| e.drift_onset_s),
    }
}

fn plots(a: &AxisCalibration) -> Plots {
    Plots {
        spectrum: a.spectrum.as_ref().map(|fit| SpectrumPlot {
            frequency_hz: fit.blocks.iter().map(|b| b.frequency_hz).collect(),
            psd: fit.blocks.iter().map(|b| b.psd).collect(),
            model: fit.model_psd.clone(),
            n_averaged: fit.blocks.iter().map(|b| b.n_averaged).collect(),
            residual: fit
                .blocks
                .iter()
                .zip(&fit.model_psd)
                .map(|(b, m)| (b.psd - m) / (m / (b.n_averaged as f64).sqrt()))
                .collect(),
        }),
        autocorrelation: a.acf.as_ref().map(|acf| AcfPlot {
            lag_s: acf
                .lags
                .iter()
                .map(|&k| k as f64 / a.sample_rate_hz)
                .collect(),
            autocovariance: acf.acov.clone(),
            model: acf.model.clone(),
        }),
        histogram: a.histogram.as_ref().map(|h| HistogramPlot {
            centre: h.centres.clone(),
            bin_width: h.bin_width,
            count: h.counts.clone(),
            expected: h.expected.clone(),
        }),
    }
}
