//! Statistical efficiency of trapwise's estimates: over many exact simulations at a few settings,
//! the bias and spread of the corner frequency and the stiffness next to the Cramer-Rao lower
//! bound, and the coverage of the reported one-standard-error intervals.
//!
//! The bound comes from the Fisher information of the exact spectrum of the sampled process
//! (the aliased Lorentzian of Berg-Sorensen & Flyvbjerg, Rev. Sci. Instrum. 75, 594 (2004)).
//! For a stationary Gaussian series the periodogram ordinates at the Fourier frequencies
//! f_k = k fs / N, 0 < k < N/2, are asymptotically independent exponential variables with mean
//! S(f_k) (Whittle, Ark. Mat. 2, 423 (1953), from memory, unverified; Brockwell & Davis, Time
//! Series: Theory and Methods, 2nd ed. 1991, sec. 10.8, from memory, unverified), so the Fisher
//! information of theta = (ln fc, ln D) is I = sum_k g_k g_k^T with g_k = d ln S(f_k) / d theta
//! (the Nyquist ordinate, a chi-square with one degree of freedom, counts half). The bound is
//! computed twice: over the band the fit uses, and over the whole band 0 < f <= fs/2.
//! The bound on ln fc is [I^-1]_00 (D free, as in the spectral fit). The stiffness bound takes
//! the drag and temperature as known, so that D = kB T / gamma is fixed and kappa = 2 pi gamma
//! fc is the only parameter: its bound on ln kappa is 1 / I_00 over the whole band.
//!
//! The records of the plain settings are exact AR(1) realisations (`simulate::simulate_axes`).
//! Two settings carry an effect of real instruments, declared in the analysis: a photodiode's
//! filter (f3dB 8 kHz, alpha 0.3, fixed) and frequency-dependent drag (the 1 um bead in water,
//! hydrodynamics on), both in the form of Berg-Sorensen & Flyvbjerg 2004. Their records are
//! exact random-phase syntheses of the aliased model spectrum (`simulate::InstrumentAxis`,
//! shared PHYSICS.md section 12), and their bound is the same Fisher information with g_k taken
//! from that model's spectrum (`spectrum::SpectrumModel::one_sided_psd`, the model the fit uses)
//! by central differences in (ln fc, ln D). Reported per setting:
//! bias in units of the empirical standard deviation, spread / bound, and the fraction of
//! records whose interval value +- se holds the truth (68.3 % for a Gaussian estimator with a
//! correct se). With S seeds the sampling error of spread / bound is about 1 / sqrt(2 (S - 1))
//! relative, of the bias in sd units about 1 / sqrt(S), of the coverage sqrt(0.68 0.32 / S).
//!
//! Run: `cargo run --release --example efficiency -- [--seeds 300] [--quick] [--settings 4,5]`.
//! One JSON object per setting goes to stdout.

use anyhow::{Context, Result, anyhow};
use std::f64::consts::PI;
use trapwise::calibration::{self, AnalysisOptions, RunConditions};
use trapwise::recording::{AxisTrace, PositionUnit, Recording};
use trapwise::simulate::{Disturbances, InstrumentAxis, OuAxis, RecordPlan, simulate_axes};
use trapwise::spectrum::{DetectorFilter, FilterSetting, HydroTerms, SpectrumModel};

/// One simulation setting.
struct Setting {
    label: &'static str,
    corner_frequency_hz: f64,
    sample_rate_hz: f64,
    n_samples: usize,
    effect: Effect,
}

/// The effect of a real instrument a setting carries, declared in the analysis.
#[derive(Clone, Copy, PartialEq)]
enum Effect {
    /// None: exact AR(1) records, the closed-form bound.
    Plain,
    /// The photodiode's filter, fixed in the analysis.
    Filter(DetectorFilter),
    /// Frequency-dependent drag of the 1 um bead (hydrodynamics on).
    Drag,
}

/// Fisher information of (ln fc, ln D) of a spectral model at `theta` (its ln fc, ln D) from the
/// Fourier frequencies of an N-sample record in [f_lo, f_hi] (Hz), with d ln S / d theta by
/// central differences (step 1e-5; the Nyquist ordinate counts half, as in `fisher`).
fn fisher_of_model(
    model: &SpectrumModel,
    theta: [f64; 2],
    n: usize,
    f_lo: f64,
    f_hi: f64,
) -> [[f64; 2]; 2] {
    let fs = model.sample_rate_hz;
    let h = 1e-5;
    let ln_s = |f: f64, t: [f64; 2]| model.one_sided_psd(f, &t).ln();
    let mut info = [[0.0; 2]; 2];
    for k in 1..=n / 2 {
        let f = k as f64 * fs / n as f64;
        if f < f_lo || f > f_hi {
            continue;
        }
        let weight = if 2 * k == n { 0.5 } else { 1.0 };
        let g = [0, 1].map(|i| {
            let (mut up, mut down) = (theta, theta);
            up[i] += h;
            down[i] -= h;
            (ln_s(f, up) - ln_s(f, down)) / (2.0 * h)
        });
        for i in 0..2 {
            for j in 0..2 {
                info[i][j] += weight * g[i] * g[j];
            }
        }
    }
    info
}

/// d ln S / d ln fc of the aliased Lorentzian at angular frequency `theta` = 2 pi f dt, with D
/// held fixed. From ln S = ln D - ln fc + ln(1 - c^2) - ln(1 + c^2 - 2 c cos theta) + const and
/// dc / d ln fc = c ln c (c = exp(-2 pi fc dt)).
fn dlns_dlnfc(c: f64, theta: f64) -> f64 {
    let d = (2.0 * c).mul_add(-theta.cos(), c.mul_add(c, 1.0));
    let dlnsdc = -2.0 * c / c.mul_add(-c, 1.0) - 2.0 * (c - theta.cos()) / d;
    (c * c.ln()).mul_add(dlnsdc, -1.0)
}

/// Fisher information of (ln fc, ln D) from the Fourier frequencies of an N-sample record that
/// fall in [f_lo, f_hi] (Hz), as [[I_ff, I_fd], [I_fd, I_dd]].
fn fisher(fc: f64, fs: f64, n: usize, f_lo: f64, f_hi: f64) -> [[f64; 2]; 2] {
    let c = (-2.0 * PI * fc / fs).exp();
    let mut info = [[0.0; 2]; 2];
    for k in 1..=n / 2 {
        let f = k as f64 * fs / n as f64;
        if f < f_lo || f > f_hi {
            continue;
        }
        let weight = if 2 * k == n { 0.5 } else { 1.0 };
        let g = [dlns_dlnfc(c, 2.0 * PI * k as f64 / n as f64), 1.0];
        for i in 0..2 {
            for j in 0..2 {
                info[i][j] += weight * g[i] * g[j];
            }
        }
    }
    info
}

/// Cramer-Rao bound on the standard deviation of ln fc with D free: sqrt([I^-1]_00).
fn crb_ln_fc(info: &[[f64; 2]; 2]) -> f64 {
    let det = info[0][0].mul_add(info[1][1], -(info[0][1] * info[1][0]));
    (info[1][1] / det).sqrt()
}

/// Summary of one estimator over the seeds.
#[derive(Default)]
struct Tally {
    values: Vec<f64>,
    covered: usize,
}

impl Tally {
    fn push(&mut self, value: f64, se: f64, truth: f64) {
        self.values.push(value);
        if (value - truth).abs() <= se {
            self.covered += 1;
        }
    }

    fn mean_sd(&self) -> (f64, f64) {
        let n = self.values.len() as f64;
        let mean = self.values.iter().sum::<f64>() / n;
        let ss: f64 = self.values.iter().map(|v| (v - mean).powi(2)).sum();
        (mean, (ss / (n - 1.0)).sqrt())
    }

    /// Interquartile range / 1.349, the standard deviation of a Gaussian with the same IQR
    /// (common practice), which heavy tails do not inflate.
    fn robust_sd(&self) -> f64 {
        let mut v = self.values.clone();
        v.sort_by(f64::total_cmp);
        let q = |p: f64| {
            let pos = p * (v.len() - 1) as f64;
            let (lo, hi) = (pos.floor() as usize, pos.ceil() as usize);
            match (v.get(lo), v.get(hi)) {
                (Some(a), Some(b)) => (pos - lo as f64).mul_add(b - a, *a),
                _ => f64::NAN,
            }
        };
        (q(0.75) - q(0.25)) / 1.349
    }

    /// JSON summary against `truth`, with the bound `bound_sd` (absolute) where there is one.
    fn summary(&self, truth: f64, bounds: &[(&str, f64)]) -> serde_json::Value {
        let (mean, sd) = self.mean_sd();
        let mut out = serde_json::json!({
            "mean": mean,
            "sd": sd,
            "sd_robust": self.robust_sd(),
            "bias_rel": mean / truth - 1.0,
            "bias_in_sd": (mean - truth) / sd,
            "coverage_1se": self.covered as f64 / self.values.len() as f64,
        });
        for (name, bound) in bounds {
            out[format!("sd_over_crb_{name}")] = serde_json::json!(sd / bound);
            out[format!("crb_sd_{name}")] = serde_json::json!(bound);
        }
        out
    }
}

fn run_setting(setting: &Setting, n_seeds: usize, base_seed: u64) -> Result<serde_json::Value> {
    let conditions = RunConditions::new(1e-6, 25.0);
    let physics = calibration::physics(&conditions).map_err(|e| anyhow!("physics: {e}"))?;
    let gamma = physics.stokes_drag_kg_per_s.value;
    let kt = physics.thermal_energy_j;
    let fc = setting.corner_frequency_hz;
    let fs = setting.sample_rate_hz;
    let kappa_n_per_m = 2.0 * PI * gamma * fc;
    let kappa_true = kappa_n_per_m * 1e3; // N/m -> pN/nm
    let variance_nm2 = kt / kappa_n_per_m * 1e18;
    let d_true_nm2_s = kt / gamma * 1e18;
    let hydro = {
        let h = trapwise::drag::hydrodynamic_frequencies(
            physics.viscosity_pa_s,
            physics.fluid_density_kg_per_m3,
            conditions.bead_density_kg_per_m3,
            conditions.bead_diameter_m / 2.0,
        );
        HydroTerms {
            f_nu_hz: h.f_nu_hz,
            f_m_hz: h.f_m_hz,
        }
    };
    let mut options = AnalysisOptions {
        axial_axes: Vec::new(),
        ..AnalysisOptions::default()
    };
    let mut instrument = InstrumentAxis::new(fc, variance_nm2);
    let mut model = SpectrumModel {
        sample_rate_hz: fs,
        aliasing: true,
        filter: FilterSetting::None,
        hydro: None,
        exposure_s: None,
        noise_floor: false,
    };
    match setting.effect {
        Effect::Plain => {}
        Effect::Filter(filter) => {
            options.filter = FilterSetting::Fixed(filter);
            instrument.detector_filter = Some(filter);
            model.filter = FilterSetting::Fixed(filter);
        }
        Effect::Drag => {
            options.hydrodynamics = true;
            instrument.hydrodynamics = Some(hydro);
            model.hydro = Some(hydro);
        }
    }
    let plan: Option<RecordPlan> = match setting.effect {
        Effect::Plain => None,
        _ => Some(
            instrument
                .plan(fs, setting.n_samples)
                .map_err(|e| anyhow!("{}: {e}", setting.label))?,
        ),
    };
    let axis = [OuAxis {
        name: "x".into(),
        corner_frequency_hz: fc,
        variance: variance_nm2,
    }];
    let mut fc_t = Tally::default();
    let mut d_t = Tally::default();
    let mut k_psd = Tally::default();
    let mut k_acf = Tally::default();
    let mut k_eq = Tally::default();
    let mut k_cons = Tally::default();
    let mut failures = 0usize;
    // Records of pure thermal motion in which the narrow-peak search flagged a peak anyway.
    let mut with_false_peaks = 0usize;
    let mut band = (0.0f64, 0.0f64);
    for seed_idx in 0..n_seeds {
        let seed = base_seed + seed_idx as u64;
        let samples = match &plan {
            None => simulate_axes(&axis, fs, setting.n_samples, seed, &Disturbances::default()),
            Some(plan) => vec![plan.record(&mut trapwise::simulate::generator(seed))],
        };
        let recording = Recording {
            sample_rate_hz: fs,
            unit: PositionUnit::Nanometre,
            axes: samples
                .into_iter()
                .map(|s| AxisTrace {
                    name: "x".into(),
                    samples: s,
                })
                .collect(),
        };
        let Ok(cal) = calibration::calibrate(&recording, &conditions, &options) else {
            failures += 1;
            continue;
        };
        // A method that failed on a record counts that record as a failure here.
        let Some(a) = cal.axes.first() else {
            failures += 1;
            continue;
        };
        let s = &a.stiffness_pn_per_nm;
        let (Some(spectrum), Some(fc_e), Some(d_e), Some(psd), Some(acf), Some(eq)) = (
            a.spectrum.as_ref(),
            a.corner_frequency_hz,
            a.diffusion,
            s.psd,
            s.acf,
            s.equipartition,
        ) else {
            failures += 1;
            continue;
        };
        band = (spectrum.f_min_hz, spectrum.f_max_hz);
        if !a.peaks.is_empty() {
            with_false_peaks += 1;
        }
        fc_t.push(fc_e.value, fc_e.se, fc);
        d_t.push(d_e.value, d_e.se, d_true_nm2_s);
        k_psd.push(psd.value, psd.se, kappa_true);
        k_acf.push(acf.value, acf.se, kappa_true);
        k_eq.push(eq.value, eq.se, kappa_true);
        k_cons.push(s.consensus.value, s.consensus.se, kappa_true);
    }
    if fc_t.values.len() < 3 {
        return Err(anyhow!(
            "{}: fewer than 3 calibrations succeeded",
            setting.label
        ));
    }
    let n = setting.n_samples;
    let (info_fit, info_all) = if setting.effect == Effect::Plain {
        (
            fisher(fc, fs, n, band.0, band.1),
            fisher(fc, fs, n, 0.0, fs / 2.0),
        )
    } else {
        let theta = [fc.ln(), d_true_nm2_s.ln()];
        (
            fisher_of_model(&model, theta, n, band.0, band.1),
            fisher_of_model(&model, theta, n, 0.0, fs / 2.0),
        )
    };
    let crb_fc_fit = fc * crb_ln_fc(&info_fit);
    let crb_fc_all = fc * crb_ln_fc(&info_all);
    let crb_kappa_known_d = kappa_true / info_all[0][0].sqrt();
    let crb_kappa_psd_fit = kappa_true * crb_ln_fc(&info_fit);
    Ok(serde_json::json!({
        "setting": setting.label,
        "corner_frequency_hz": fc,
        "sample_rate_hz": fs,
        "n_samples": n,
        "seeds": fc_t.values.len(),
        "failures": failures,
        "records_with_false_peaks": with_false_peaks,
        "fit_band_hz": [band.0, band.1],
        "fc": fc_t.summary(fc, &[("fit_band", crb_fc_fit), ("whole_band", crb_fc_all)]),
        "diffusion": d_t.summary(d_true_nm2_s, &[]),
        "kappa_psd": k_psd.summary(kappa_true, &[("fit_band", crb_kappa_psd_fit)]),
        "kappa_acf": k_acf.summary(kappa_true, &[("known_drag", crb_kappa_known_d)]),
        "kappa_equipartition": k_eq.summary(kappa_true, &[("known_drag", crb_kappa_known_d)]),
        "kappa_consensus": k_cons.summary(kappa_true, &[("known_drag", crb_kappa_known_d)]),
    }))
}

fn main() -> Result<()> {
    let args: Vec<String> = std::env::args().collect();
    let quick = args.iter().any(|a| a == "--quick");
    let n_seeds: usize = match args.iter().position(|a| a == "--seeds") {
        Some(i) => args
            .get(i + 1)
            .context("--seeds needs a value")?
            .parse()
            .context("--seeds must be a count")?,
        None if quick => 60,
        None => 300,
    };
    let settings = [
        Setting {
            label: "fc well below Nyquist (fc/fs = 0.01, 2.6 s)",
            corner_frequency_hz: 500.0,
            sample_rate_hz: 50_000.0,
            n_samples: 1 << 17,
            effect: Effect::Plain,
        },
        Setting {
            label: "fc near fs/4 (fc/fs = 0.25, 2.6 s)",
            corner_frequency_hz: 12_500.0,
            sample_rate_hz: 50_000.0,
            n_samples: 1 << 17,
            effect: Effect::Plain,
        },
        Setting {
            label: "short record (fc/fs = 0.019, 0.33 s)",
            corner_frequency_hz: 950.0,
            sample_rate_hz: 50_000.0,
            n_samples: 1 << 14,
            effect: Effect::Plain,
        },
        Setting {
            label: "photodiode filter declared (f3dB 8 kHz, alpha 0.3; fc/fs = 0.01, 2.6 s)",
            corner_frequency_hz: 500.0,
            sample_rate_hz: 50_000.0,
            n_samples: 1 << 17,
            effect: Effect::Filter(DetectorFilter {
                f3db_hz: 8_000.0,
                alpha: 0.3,
            }),
        },
        Setting {
            label: "frequency-dependent drag on (1 um bead; fc/fs = 0.01, 2.6 s)",
            corner_frequency_hz: 500.0,
            sample_rate_hz: 50_000.0,
            n_samples: 1 << 17,
            effect: Effect::Drag,
        },
    ];
    // `--settings 4,5` runs only those settings (1-based), with their usual seeds.
    let only: Option<Vec<usize>> = match args.iter().position(|a| a == "--settings") {
        Some(i) => Some(
            args.get(i + 1)
                .context("--settings needs a list")?
                .split(',')
                .map(|v| v.trim().parse::<usize>())
                .collect::<Result<_, _>>()
                .context("--settings takes numbers like 4,5")?,
        ),
        None => None,
    };
    for (i, setting) in settings.iter().enumerate() {
        if only.as_ref().is_some_and(|o| !o.contains(&(i + 1))) {
            continue;
        }
        let line = run_setting(setting, n_seeds, 10_000 * (i as u64 + 1))?;
        println!("{line}");
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The analytic derivative of ln S against a central difference of the closed-form
    /// aliased Lorentzian (Berg-Sorensen & Flyvbjerg 2004), D held fixed.
    #[track_caller]
    fn check(fc: f64, f: f64) {
        let fs = 50_000.0;
        let d = 4.9e5;
        let h: f64 = 1e-6;
        let up = trapwise::spectrum::aliased_lorentzian_one_sided(f, fc * h.exp(), d, fs).ln();
        let down = trapwise::spectrum::aliased_lorentzian_one_sided(f, fc * (-h).exp(), d, fs).ln();
        let numeric = (up - down) / (2.0 * h);
        let c = (-2.0 * PI * fc / fs).exp();
        let analytic = dlns_dlnfc(c, 2.0 * PI * f / fs);
        assert!(
            (numeric - analytic).abs() < 1e-6,
            "fc {fc} f {f}: {numeric} vs {analytic}"
        );
    }

    #[test]
    fn log_spectrum_derivative_matches_finite_difference() {
        check(500.0, 10.0);
        check(500.0, 5_000.0);
        check(12_500.0, 24_000.0);
        check(950.0, 950.0);
    }

    #[test]
    fn the_numerical_information_of_the_plain_model_is_the_closed_form_one() {
        // The aliased Lorentzian of Berg-Sorensen & Flyvbjerg 2004 through the fit's model and
        // central differences, against `fisher`'s analytic derivatives: the same information to
        // 1e-6 relative in every entry.
        let (fc, fs, n, d) = (500.0, 50_000.0, 1 << 12, 4.9e5);
        let model = SpectrumModel {
            sample_rate_hz: fs,
            aliasing: true,
            filter: FilterSetting::None,
            hydro: None,
            exposure_s: None,
            noise_floor: false,
        };
        for (lo, hi) in [(10.0, 20_000.0), (0.0, fs / 2.0)] {
            let exact = fisher(fc, fs, n, lo, hi);
            let numeric = fisher_of_model(&model, [f64::ln(fc), f64::ln(d)], n, lo, hi);
            for i in 0..2 {
                for j in 0..2 {
                    let rel = (numeric[i][j] / exact[i][j] - 1.0).abs();
                    assert!(
                        rel < 1e-6,
                        "[{i}][{j}]: {} vs {}",
                        numeric[i][j],
                        exact[i][j]
                    );
                }
            }
        }
    }
}
