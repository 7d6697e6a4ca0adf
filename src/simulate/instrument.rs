//! A realistic recording of one axis as plain data: the bead's Ornstein-Uhlenbeck motion plus
//! what a real instrument does to it and adds to it, and exact synthetic records of it.
//!
//! Every term except the deterministic ones is a stationary Gaussian signal independent of the
//! others, so the recording is one stationary Gaussian process whose aliased one-sided spectrum
//! is the sum of the terms' spectra ([`InstrumentAxis::one_sided_psd`]); records are drawn from
//! that spectrum by exact random-phase synthesis ([`SynthesisGrid`]), and the sinusoidal lines
//! and the linear drift are added afterwards in the time domain, at any frequency (on the
//! Fourier grid of the record or not). Units: the output unit of the recording ("unit": nm, or V
//! for detector data) for every amplitude, unit^2 for variances, unit^2 / Hz for densities.

use super::spectra::{self, OuComponent};
use super::synthesis::SynthesisGrid;
use crate::spectrum::{DetectorFilter, HydroTerms};
use std::f64::consts::PI;

/// 1/f ("flicker") drift of the recording: a one-sided density S(f) = A (1 Hz) / max(f, f_low),
/// with A = `density_at_1_hz` the density at 1 Hz in unit^2 / Hz and f_low = `low_cut_hz`, below
/// which the density stays at A / f_low so that the variance, A (1 + ln(fs / (2 f_low))), is
/// finite.
///
/// The choice of a density at 1 Hz (not a ratio to the thermal plateau) keeps the drift a
/// property of the instrument, independent of the trap; `trapwise simulate` sets f_low to
/// 1 / (record duration), the lowest frequency the record resolves. The drift is a slow
/// process of the sampled signal: its density is defined directly on [0, fs/2] and not aliased
/// (a 1/f density would make the image sum diverge).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct FlickerDrift {
    /// One-sided density at 1 Hz, unit^2 / Hz.
    pub density_at_1_hz: f64,
    /// Frequency below which the density is flat, Hz.
    pub low_cut_hz: f64,
}

impl FlickerDrift {
    /// One-sided density at `f_hz`, unit^2 / Hz.
    pub fn one_sided_psd(&self, f_hz: f64) -> f64 {
        self.density_at_1_hz / f_hz.max(self.low_cut_hz)
    }
}

/// A sinusoidal line (mains pickup, a vibration, a modulation): `amplitude` sin(2 pi
/// `frequency_hz` t + `phase_rad`), t = j / fs, added to every sample. Its one-sided power is
/// amplitude^2 / 2.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Sinusoid {
    /// Frequency, Hz, in [0, fs/2].
    pub frequency_hz: f64,
    /// Peak amplitude, unit.
    pub amplitude: f64,
    /// Phase at t = 0, radians.
    pub phase_rad: f64,
}

/// One axis of a realistic recording (see the module docs). Build it with
/// [`InstrumentAxis::new`] and set the fields of the terms wanted; every term is off by default.
#[derive(Clone, Debug, PartialEq)]
pub struct InstrumentAxis {
    /// Corner frequency of the bead's motion, fc = kappa / (2 pi gamma0), Hz (gamma0 the
    /// zero-frequency drag).
    pub corner_frequency_hz: f64,
    /// Variance of the bead's motion, kB T / kappa, unit^2 (equipartition; the detector filter,
    /// the exposure and the added terms change the variance of the record, not this).
    pub variance: f64,
    /// The photodiode's parasitic low-pass filter, acting before sampling.
    pub detector_filter: Option<DetectorFilter>,
    /// Frequency-dependent drag of the fluid (bulk form, no wall).
    pub hydrodynamics: Option<HydroTerms>,
    /// Box-car exposure of a camera, seconds, 0 < W <= 1 / fs, ending within each frame.
    pub exposure_time_s: Option<f64>,
    /// White noise floor added after sampling, rms in unit: one-sided density 2 rms^2 / fs.
    pub noise_floor_rms: f64,
    /// 1/f drift.
    pub flicker: Option<FlickerDrift>,
    /// Sinusoidal lines, added in the time domain.
    pub lines: Vec<Sinusoid>,
    /// Linear drift, unit per second, added in the time domain (zero at t = 0).
    pub linear_drift_per_s: f64,
}

/// Errors of the simulation layer: a description no exact record can be made of.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum SimulateError {
    /// A quantity that must be positive and finite is not.
    #[error("{field} {value} must be a positive finite number{hint}")]
    NotPositive {
        /// The field, with its unit in the name.
        field: &'static str,
        /// The value given.
        value: f64,
        /// What to give instead (may be empty).
        hint: &'static str,
    },
    /// A quantity that must be zero or positive and finite is not.
    #[error("{field} {value} must be zero or a positive finite number")]
    Negative {
        /// The field, with its unit in the name.
        field: &'static str,
        /// The value given.
        value: f64,
    },
    /// A quantity that may have any sign is not finite.
    #[error("{field} {value} must be a finite number")]
    NotFinite {
        /// The field, with its unit in the name.
        field: &'static str,
        /// The value given.
        value: f64,
    },
    /// The filter's alpha lies outside (0, 1].
    #[error(
        "detector filter alpha {alpha} is outside (0, 1]; alpha is the amplitude fraction of the signal the photodiode passes instantly (about 0.3 to 0.5 for silicon at 1064 nm)"
    )]
    FilterAlpha {
        /// The value given.
        alpha: f64,
    },
    /// The exposure is longer than the frame interval.
    #[error(
        "exposure_time_s {exposure_time_s} s is longer than the frame interval {frame_interval_s} s (1 / sample rate); an exposure must fit within its frame"
    )]
    ExposureTooLong {
        /// The exposure given, s.
        exposure_time_s: f64,
        /// 1 / sample rate, s.
        frame_interval_s: f64,
    },
    /// A line's frequency lies outside [0, fs/2].
    #[error(
        "line frequency {frequency_hz} Hz is outside 0 to the Nyquist frequency {nyquist_hz} Hz; a line above it shows at its alias, so give the alias frequency"
    )]
    LineFrequency {
        /// The frequency given, Hz.
        frequency_hz: f64,
        /// fs / 2, Hz.
        nyquist_hz: f64,
    },
    /// A line's amplitude or phase is not finite.
    #[error("line at {frequency_hz} Hz has a non-finite amplitude or phase")]
    LineNotFinite {
        /// The line's frequency, Hz.
        frequency_hz: f64,
    },
}

fn positive(field: &'static str, value: f64, hint: &'static str) -> Result<(), SimulateError> {
    if value.is_finite() && value > 0.0 {
        Ok(())
    } else {
        Err(SimulateError::NotPositive { field, value, hint })
    }
}

fn non_negative(field: &'static str, value: f64) -> Result<(), SimulateError> {
    if value.is_finite() && value >= 0.0 {
        Ok(())
    } else {
        Err(SimulateError::Negative { field, value })
    }
}

impl InstrumentAxis {
    /// The plain Ornstein-Uhlenbeck axis: corner frequency (Hz) and variance (unit^2), no other
    /// term.
    pub fn new(corner_frequency_hz: f64, variance: f64) -> InstrumentAxis {
        InstrumentAxis {
            corner_frequency_hz,
            variance,
            detector_filter: None,
            hydrodynamics: None,
            exposure_time_s: None,
            noise_floor_rms: 0.0,
            flicker: None,
            lines: Vec::new(),
            linear_drift_per_s: 0.0,
        }
    }

    /// Diffusion coefficient of the bead, D = 2 pi fc variance = kB T / gamma0, unit^2 / s.
    pub fn diffusion(&self) -> f64 {
        2.0 * PI * self.corner_frequency_hz * self.variance
    }

    /// Whether any term has no exact AR(1) form, so that records need the spectral synthesis:
    /// the filter, frequency-dependent drag, an exposure or 1/f drift. (White noise, lines and a
    /// linear drift can be added to an AR(1) record.)
    pub fn needs_spectral_synthesis(&self) -> bool {
        self.detector_filter.is_some()
            || self.hydrodynamics.is_some()
            || self.exposure_time_s.is_some()
            || self.flicker.is_some()
    }

    /// Checks that the description can be simulated at `sample_rate_hz`.
    pub fn validate(&self, sample_rate_hz: f64) -> Result<(), SimulateError> {
        positive("sample_rate_hz", sample_rate_hz, "")?;
        positive(
            "corner_frequency_hz",
            self.corner_frequency_hz,
            "; give a positive stiffness",
        )?;
        positive("variance", self.variance, "; give a positive stiffness")?;
        if let Some(f) = &self.detector_filter {
            positive(
                "detector filter f3db_hz",
                f.f3db_hz,
                "; give the corner frequency of the filter's slow part in Hz",
            )?;
            if !(f.alpha > 0.0 && f.alpha <= 1.0) {
                return Err(SimulateError::FilterAlpha { alpha: f.alpha });
            }
        }
        if let Some(h) = &self.hydrodynamics {
            positive("hydrodynamic f_nu_hz", h.f_nu_hz, "")?;
            positive("hydrodynamic f_m_hz", h.f_m_hz, "")?;
        }
        if let Some(w) = self.exposure_time_s {
            positive("exposure_time_s", w, "; give the exposure in seconds")?;
            let frame_interval_s = 1.0 / sample_rate_hz;
            if w > frame_interval_s {
                return Err(SimulateError::ExposureTooLong {
                    exposure_time_s: w,
                    frame_interval_s,
                });
            }
        }
        non_negative("noise_floor_rms", self.noise_floor_rms)?;
        if let Some(d) = &self.flicker {
            non_negative("drift_1f_density_at_1_hz", d.density_at_1_hz)?;
            positive("drift_1f_low_cut_hz", d.low_cut_hz, "")?;
        }
        let nyquist_hz = sample_rate_hz / 2.0;
        for line in &self.lines {
            if !(line.frequency_hz >= 0.0 && line.frequency_hz <= nyquist_hz) {
                return Err(SimulateError::LineFrequency {
                    frequency_hz: line.frequency_hz,
                    nyquist_hz,
                });
            }
            if !(line.amplitude.is_finite() && line.phase_rad.is_finite()) {
                return Err(SimulateError::LineNotFinite {
                    frequency_hz: line.frequency_hz,
                });
            }
        }
        if !self.linear_drift_per_s.is_finite() {
            return Err(SimulateError::NotFinite {
                field: "linear_drift_per_s",
                value: self.linear_drift_per_s,
            });
        }
        Ok(())
    }

    /// The unaliased one-sided spectrum of the bead's motion at `f_hz` >= 0 as the sampler sees
    /// it, unit^2 / Hz: the Lorentzian D / (pi^2 (fc^2 + f^2)), or with frequency-dependent drag
    /// (Berg-Sorensen & Flyvbjerg 2004, one-sided)
    /// (D / pi^2) (1 + s) / ((fc - f s - f^2 / f_m)^2 + (f + f s)^2), s = sqrt(f / f_nu);
    /// times the filter's gain g(f), times `blur`(f) (sinc^2(pi f W), or its mean in the tail).
    fn unaliased_thermal(&self, f_hz: f64, blur: f64) -> f64 {
        let fc = self.corner_frequency_hz;
        let d = self.diffusion();
        let f = f_hz.abs();
        let bead = match &self.hydrodynamics {
            Some(h) => {
                let s = (f / h.f_nu_hz).sqrt();
                let re = f.mul_add(-s, fc) - f * f / h.f_m_hz;
                let im = f.mul_add(s, f);
                d / (PI * PI) * (1.0 + s) / re.mul_add(re, im * im)
            }
            None => d / (PI * PI * fc.mul_add(fc, f * f)),
        };
        let gain = self.detector_filter.as_ref().map_or(1.0, |g| g.gain(f));
        bead * gain * blur
    }

    /// The aliased one-sided spectrum of the bead's motion alone (filtered, with
    /// frequency-dependent drag, averaged over the exposure, as set) at `f_hz` in [0, fs/2],
    /// unit^2 / Hz, sampled at `sample_rate_hz`.
    ///
    /// Without frequency-dependent drag this is a closed form: the aliased Lorentzian
    /// (Berg-Sorensen & Flyvbjerg 2004), its blurred form (Wong & Halvorsen, Opt. Express 14,
    /// 12517 (2006)), and for the filter their sums over the two partial fractions of the
    /// filtered Lorentzian (see `spectra.rs`). With it, or with f3dB within 1e-4 of fc, the
    /// images sum_n H(|f + n fs|) of the unaliased spectrum are summed numerically, each
    /// weighted by sinc^2(pi (f + n fs) W) under an exposure: 64 images a side (more with a short
    /// exposure) plus an Euler-Maclaurin integral for the rest. Measured against the closed forms
    /// it is accurate to 1e-11 relative without an exposure and 4e-8 with one (the tail takes
    /// sinc^2 at its mean); against a brute-force sum of 20,000 images a side for the
    /// hydrodynamic spectrum to 1e-11; its integral is the equipartition variance to 5e-9 (the
    /// unit tests check all three).
    pub fn thermal_one_sided_psd(&self, f_hz: f64, sample_rate_hz: f64) -> f64 {
        let components = if self.hydrodynamics.is_none() {
            spectra::ou_components(
                self.corner_frequency_hz,
                self.variance,
                self.detector_filter.as_ref(),
            )
        } else {
            None
        };
        match components {
            Some(c) => {
                spectra::components_one_sided(&c, f_hz, sample_rate_hz, self.exposure_time_s)
            }
            None => self.thermal_by_image_sum(f_hz, sample_rate_hz),
        }
    }

    /// [`InstrumentAxis::thermal_one_sided_psd`] by the numerical image sum, whatever the terms
    /// (the closed forms check it in the unit tests).
    pub(crate) fn thermal_by_image_sum(&self, f_hz: f64, sample_rate_hz: f64) -> f64 {
        let images = spectra::images_for(sample_rate_hz, self.exposure_time_s);
        match self.exposure_time_s {
            None => spectra::image_sum(
                |f| self.unaliased_thermal(f, 1.0),
                |f| self.unaliased_thermal(f, 1.0),
                f_hz,
                sample_rate_hz,
                images,
            ),
            Some(w) => spectra::image_sum(
                |f| {
                    let x = PI * f * w;
                    let sinc = if x == 0.0 { 1.0 } else { x.sin() / x };
                    self.unaliased_thermal(f, sinc * sinc)
                },
                |f| {
                    let x = PI * f * w;
                    self.unaliased_thermal(f, 0.5 / (x * x))
                },
                f_hz,
                sample_rate_hz,
                images,
            ),
        }
    }

    /// The whole aliased one-sided spectrum of the stationary Gaussian part of the recording at
    /// `f_hz` in [0, fs/2], unit^2 / Hz: [`InstrumentAxis::thermal_one_sided_psd`] plus the noise
    /// floor 2 rms^2 / fs (white noise of variance rms^2, Parseval) plus the 1/f drift. The lines
    /// and the linear drift are deterministic and not part of it.
    pub fn one_sided_psd(&self, f_hz: f64, sample_rate_hz: f64) -> f64 {
        let floor = 2.0 * self.noise_floor_rms * self.noise_floor_rms / sample_rate_hz;
        let flicker = self.flicker.map_or(0.0, |d| d.one_sided_psd(f_hz));
        self.thermal_one_sided_psd(f_hz, sample_rate_hz) + floor + flicker
    }

    /// Prepares records of `n_samples` samples at `sample_rate_hz`: validates, samples the
    /// spectrum on the synthesis grid once, and keeps the lines and drift.
    pub fn plan(&self, sample_rate_hz: f64, n_samples: usize) -> Result<RecordPlan, SimulateError> {
        self.validate(sample_rate_hz)?;
        let grid = SynthesisGrid::new(
            |f| self.one_sided_psd(f, sample_rate_hz),
            sample_rate_hz,
            n_samples,
        );
        Ok(RecordPlan {
            grid,
            lines: self.lines.clone(),
            linear_drift_per_s: self.linear_drift_per_s,
        })
    }
}

/// Everything needed to draw records of one [`InstrumentAxis`]: its spectrum on the synthesis
/// grid, its lines and its linear drift. Draw as many records as wanted with
/// [`RecordPlan::record`].
#[derive(Clone, Debug)]
pub struct RecordPlan {
    grid: SynthesisGrid,
    lines: Vec<Sinusoid>,
    linear_drift_per_s: f64,
}

impl RecordPlan {
    /// The synthesis grid (period, sampling rate, record length).
    pub fn grid(&self) -> &SynthesisGrid {
        &self.grid
    }

    /// One exact record: the stationary Gaussian part by random-phase synthesis, then the lines
    /// and the drift added.
    pub fn record<R: rand::Rng + ?Sized>(&self, rng: &mut R) -> Vec<f64> {
        let mut x = self.grid.record(rng);
        let fs = self.grid.sample_rate_hz();
        add_lines(&mut x, fs, &self.lines);
        if self.linear_drift_per_s != 0.0 {
            for (j, v) in x.iter_mut().enumerate() {
                *v = self.linear_drift_per_s.mul_add(j as f64 / fs, *v);
            }
        }
        x
    }
}

/// Adds each line amplitude sin(2 pi f j / fs + phase) to the samples x_j. The phase of each
/// sample is reduced exactly (f j / fs modulo 1 by its integer and fractional parts) so that it
/// stays accurate over long records.
pub fn add_lines(samples: &mut [f64], sample_rate_hz: f64, lines: &[Sinusoid]) {
    for line in lines {
        if line.amplitude == 0.0 {
            continue;
        }
        let cycles_per_sample = line.frequency_hz / sample_rate_hz;
        for (j, v) in samples.iter_mut().enumerate() {
            let cycles = (j as f64 * cycles_per_sample).fract();
            let angle = (2.0 * PI).mul_add(cycles, line.phase_rad);
            *v = line.amplitude.mul_add(angle.sin(), *v);
        }
    }
}

/// Records of several axes (independent processes drawn in order from one stream seeded with
/// `seed`), each of `n_samples` samples at `sample_rate_hz`.
pub fn simulate_instrument_axes(
    axes: &[InstrumentAxis],
    sample_rate_hz: f64,
    n_samples: usize,
    seed: u64,
) -> Result<Vec<Vec<f64>>, SimulateError> {
    let mut rng = super::generator(seed);
    axes.iter()
        .map(|axis| Ok(axis.plan(sample_rate_hz, n_samples)?.record(&mut rng)))
        .collect()
}

/// The autocovariance of the bead's motion as the detector records it at lag `lag_s` (s),
/// unit^2, when it has a closed form (no frequency-dependent drag, no exposure): the sum of the
/// components' exponentials (shared/PHYSICS.md section 12: the filtered Lorentzian's
/// autocovariance by partial fractions; sampling does not alias the autocovariance). `None`
/// otherwise.
pub fn thermal_autocovariance(axis: &InstrumentAxis, lag_s: f64) -> Option<f64> {
    if axis.hydrodynamics.is_some() || axis.exposure_time_s.is_some() {
        return None;
    }
    let components: Vec<OuComponent> = spectra::ou_components(
        axis.corner_frequency_hz,
        axis.variance,
        axis.detector_filter.as_ref(),
    )?;
    Some(
        components
            .iter()
            .map(|c| c.variance * (-2.0 * PI * c.corner_frequency_hz * lag_s.abs()).exp())
            .sum(),
    )
}
