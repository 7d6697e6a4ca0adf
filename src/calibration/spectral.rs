//! Stage two of an axis calibration: the periodogram, its narrow peaks, the spectral model of
//! this axis and its maximum-likelihood fit; and the removal of the sinusoids behind the peaks,
//! which the time-domain stage needs.

use super::drift::{self, FlickerTest};
use super::{AnalysisOptions, CalibrationError, Physics, RunConditions};
use crate::drag;
use crate::spectrum::{
    self, HydroTerms, NarrowPeak, NoiseFloorTest, Periodogram, SpectralLine, SpectrumFit,
    SpectrumFitOptions, SpectrumModel,
};

/// What the spectral stage found. The periodogram always exists (a record too short for one
/// stops the calibration); the fit may fail without sinking the other methods.
#[derive(Clone, Debug)]
pub(crate) struct SpectralStage {
    /// The periodogram the fit saw: of the record with its lines subtracted, when there were
    /// any.
    pub(crate) periodogram: Periodogram,
    /// The sinusoids behind the narrow peaks, fitted and subtracted from the record.
    pub(crate) lines: LineRemoval,
    /// Narrow peaks at or above the fit range's lower end.
    pub(crate) peaks: Vec<NarrowPeak>,
    /// The one model of this axis's measured spectrum.
    pub(crate) model: SpectrumModel,
    pub(crate) fit: Result<SpectrumFit, CalibrationError>,
    /// The likelihood-ratio test of a 1/f drift term in the fit (`drift::flicker_refit`); when
    /// it adopted the term, `fit` is the fit with it.
    pub(crate) flicker_test: Option<FlickerTest>,
    /// The white noise floor's test, when the mode is not `off` and the fit worked.
    pub(crate) noise_floor_test: Option<NoiseFloorTest>,
}

/// The model of the measured spectrum these options and conditions describe.
pub(crate) fn spectrum_model(
    sample_rate_hz: f64,
    conditions: &RunConditions,
    physics: &Physics,
    options: &AnalysisOptions,
) -> SpectrumModel {
    let hydro = options
        .hydrodynamics
        .then(|| hydro_terms(conditions, physics));
    SpectrumModel {
        sample_rate_hz,
        aliasing: true,
        filter: options.filter,
        hydro,
        exposure_s: options.exposure_time_s,
        noise_floor: false,
    }
}

/// The frequency scales of the drag on the bead under these conditions (bulk form).
pub(crate) fn hydro_terms(conditions: &RunConditions, physics: &Physics) -> HydroTerms {
    let h = drag::hydrodynamic_frequencies(
        physics.viscosity_pa_s,
        physics.fluid_density_kg_per_m3,
        conditions.bead_density_kg_per_m3,
        conditions.bead_diameter_m / 2.0,
    );
    HydroTerms {
        f_nu_hz: h.f_nu_hz,
        f_m_hz: h.f_m_hz,
    }
}

/// Periodogram, peaks and the spectral fit of one axis.
///
/// Strong sinusoids (mains harmonics, mechanical lines, a stage drive), on or off the Fourier
/// grid, are fitted and subtracted from the record before the periodogram the fit sees: masking
/// their bins alone is not enough, because an off-grid line leaks into dozens of neighbouring
/// bins (the Dirichlet kernel of an untapered segment falls off only as 1/k^2). The few bins at
/// each line are still left out of the fit, since the subtraction takes two degrees of freedom
/// (amplitude and phase) there.
pub(crate) fn spectral_stage(
    name: &str,
    samples: &[f64],
    model: SpectrumModel,
    options: &AnalysisOptions,
    drive_hz: Option<f64>,
) -> Result<SpectralStage, CalibrationError> {
    let n_windows = options
        .n_windows
        .unwrap_or_else(|| super::default_windows(samples.len()));
    let too_short = || CalibrationError::TooShort {
        axis: name.to_string(),
        n_samples: samples.len(),
    };
    let plain =
        spectrum::periodogram(samples, model.sample_rate_hz, n_windows).ok_or_else(too_short)?;
    let mut fit_options = SpectrumFitOptions::new(model);
    fit_options.range = options.fit_range;
    // Peaks below the fit range are drift, which has its own finding.
    let (f_min_hz, f_max_hz) = fit_options.resolved_range(&plain);
    let peaks: Vec<NarrowPeak> = spectrum::find_narrow_peaks(&plain, 0.01)
        .into_iter()
        .filter(|p| p.frequency_hz >= f_min_hz)
        .collect();
    let lines = remove_lines(samples, model.sample_rate_hz, &peaks, &plain);
    let switch_hz = switch_frequency_hz(&plain, f_min_hz, f_max_hz);
    let periodogram = spectrum::switched_periodogram(
        lines.cleaned.as_deref().unwrap_or(samples),
        model.sample_rate_hz,
        n_windows,
        switch_hz,
    )
    .ok_or_else(too_short)?;
    if options.exclude_peaks {
        fit_options.excluded_bins = excluded_bins(&peaks, periodogram.psd.len());
    }
    // A stage drive was subtracted before: its bins lost two degrees of freedom and stay out
    // of the fit whatever the peak setting (PHYSICS.md section 9: leave the spike's bin out).
    if let Some(fd) = drive_hz {
        let resolution = periodogram.resolution_hz();
        fit_options.excluded_bins.extend(
            (0..periodogram.psd.len())
                .filter(|&k| (periodogram.frequency_hz(k) - fd).abs() <= 1.5 * resolution),
        );
        fit_options.excluded_bins.sort_unstable();
        fit_options.excluded_bins.dedup();
    }
    // Low-frequency drift reaches into the fit range: a 1/f term is tried beside the model and
    // kept when the data ask for it (see `drift`). This runs before the noise floor's test, since
    // a floor would otherwise take up the drift's power at high frequencies; the drift test
    // itself is guarded against a floor by its confirmation below the fit range.
    let base = spectrum::fit_spectrum(&periodogram, &fit_options, None).map_err(|e| {
        CalibrationError::Spectrum {
            axis: name.to_string(),
            cause: e,
        }
    });
    let mut flicker_test = None;
    let base = match base {
        Ok(plain_fit) => {
            let (adopted, test) = drift::flicker_refit(&periodogram, &fit_options, &plain_fit);
            flicker_test = test;
            if adopted.is_some() {
                fit_options.flicker = true;
            }
            Ok(adopted.unwrap_or(plain_fit))
        }
        Err(e) => Err(e),
    };
    // The white noise floor enters the model when the mode and the likelihood-ratio test say so
    // (`spectrum::fit_spectrum_with_floor`); the stage's model is then the one with the floor,
    // whose theta the fit holds.
    let (fit, noise_floor_test) = match base {
        Ok(base) => match spectrum::fit_spectrum_with_floor(
            &periodogram,
            &fit_options,
            options.noise_floor,
            Some(base),
        ) {
            Ok((fit, test)) => (Ok(fit), test),
            Err(e) => (
                Err(CalibrationError::Spectrum {
                    axis: name.to_string(),
                    cause: e,
                }),
                None,
            ),
        },
        Err(e) => (Err(e), None),
    };
    let fit = match fit {
        Ok(f) => Ok(drift::retest_beside_floor(&periodogram, &fit_options, &f).unwrap_or(f)),
        Err(e) => Err(e),
    };
    let model = fit.as_ref().map_or(model, |f| f.model);
    Ok(SpectralStage {
        periodogram,
        lines,
        peaks,
        model,
        fit,
        flicker_test,
        noise_floor_test,
    })
}

/// Where the fitted periodogram turns from plain segments to recoloured differences (see
/// `spectrum::switched_periodogram`): near the corner frequency, estimated by the analytic
/// weighted least-squares fit of a plain Lorentzian to the plain periodogram (Berg-Sorensen &
/// Flyvbjerg 2004), kept at or above the fit range's lower end so that the bins below it, which
/// the drift check reads, stay plain.
fn switch_frequency_hz(plain: &Periodogram, f_min_hz: f64, f_max_hz: f64) -> f64 {
    let blocks = spectrum::block_periodogram(plain, f_min_hz, f_max_hz, &[], 32, 120);
    let fc = spectrum::plain_lorentzian_wls(&blocks)
        .map(|f| f.corner_frequency_hz)
        .filter(|fc| fc.is_finite() && *fc > 0.0)
        .unwrap_or(plain.sample_rate_hz / 10.0);
    fc.clamp(f_min_hz, plain.sample_rate_hz / 4.0)
}

/// Bins of the narrow peaks, widened by one bin on each side, to leave out of the fit.
fn excluded_bins(peaks: &[NarrowPeak], n_bins: usize) -> Vec<usize> {
    let mut out = Vec::new();
    for p in peaks {
        let lo = p.first_bin.saturating_sub(1);
        let hi = (p.last_bin + 1).min(n_bins.saturating_sub(1));
        out.extend(lo..=hi);
    }
    out
}

/// Most lines removed from one axis.
const MAX_LINES: usize = 10;
/// Work budget of line removal in sample-evaluations (a line costs about (6 n_windows + 32) N:
/// the grid scan, a dozen or so evaluations of Brent's method, the final fit and the
/// subtraction); past it the lines stay in and a finding says so.
const LINE_BUDGET: f64 = 6e8;

/// The record with the sinusoids behind the narrow peaks fitted and subtracted.
#[derive(Clone, Debug, Default)]
pub(crate) struct LineRemoval {
    /// The cleaned, mean-removed samples, or `None` when nothing was removed.
    pub(crate) cleaned: Option<Vec<f64>>,
    pub(crate) removed: Vec<SpectralLine>,
    /// Peaks left in (over the work budget).
    pub(crate) kept: usize,
}

/// Fits and subtracts the sinusoids behind the narrow peaks.
fn remove_lines(
    samples: &[f64],
    sample_rate_hz: f64,
    peaks: &[NarrowPeak],
    periodogram: &Periodogram,
) -> LineRemoval {
    if peaks.is_empty() {
        return LineRemoval::default();
    }
    let n = samples.len() as f64;
    let per_line = 6.0f64.mul_add(periodogram.n_windows as f64, 32.0) * n;
    let affordable = ((LINE_BUDGET / per_line).floor() as usize).min(MAX_LINES);
    let mut strongest: Vec<&NarrowPeak> = peaks.iter().collect();
    strongest.sort_by(|a, b| b.excess_power.total_cmp(&a.excess_power));
    strongest.truncate(affordable);
    if strongest.is_empty() {
        return LineRemoval {
            kept: peaks.len(),
            ..LineRemoval::default()
        };
    }
    let mean = samples.iter().sum::<f64>() / n;
    let mut y: Vec<f64> = samples.iter().map(|v| v - mean).collect();
    let half_width = 0.75 * periodogram.resolution_hz();
    let removed: Vec<SpectralLine> = strongest
        .iter()
        .map(|p| spectrum::fit_line(&y, sample_rate_hz, p.frequency_hz, half_width))
        .collect();
    spectrum::subtract_lines(&mut y, sample_rate_hz, &removed);
    LineRemoval {
        kept: peaks.len() - removed.len(),
        cleaned: Some(y),
        removed,
    }
}
