//! Tests of the whole calibration on exact simulations: unbiased stiffness and sensitivity,
//! honest standard errors, honest correlations between the methods, and the verdict.

// Index loops mirror the matrix formulas.
#![allow(clippy::needless_range_loop)]

use super::*;
use crate::recording::{AxisTrace, PositionUnit};
use crate::simulate::{Disturbances, OuAxis, simulate_axes};
use std::f64::consts::PI;

const FS: f64 = 20_000.0;
const KAPPA_PN_PER_NM: f64 = 0.05;

fn conditions() -> RunConditions {
    RunConditions::new(1.0e-6, 25.0)
}

/// A recording of one axis with trap stiffness `kappa` (pN/nm) under `conditions()`, in nm, or
/// in volts with sensitivity `beta_nm_per_v`.
fn record(seed: u64, n: usize, beta_nm_per_v: Option<f64>, d: &Disturbances) -> Recording {
    let phys = physics(&conditions()).expect("valid conditions");
    let gamma = phys.stokes_drag_kg_per_s.value;
    let kappa_si = KAPPA_PN_PER_NM * 1e-3;
    let fc = kappa_si / (2.0 * PI * gamma);
    let variance_nm2 = phys.thermal_energy_j / kappa_si * 1e18;
    let axes = [OuAxis {
        name: "x".into(),
        corner_frequency_hz: fc,
        variance: variance_nm2,
    }];
    let mut series = simulate_axes(&axes, FS, n, seed, d);
    let unit = match beta_nm_per_v {
        Some(beta) => {
            for v in &mut series[0] {
                *v /= beta;
            }
            PositionUnit::Volt
        }
        None => PositionUnit::Nanometre,
    };
    Recording {
        sample_rate_hz: FS,
        unit,
        axes: vec![AxisTrace {
            name: "x".into(),
            samples: series.remove(0),
        }],
    }
}

struct Spread {
    values: Vec<f64>,
    ses: Vec<f64>,
}

impl Spread {
    fn new() -> Self {
        Spread {
            values: Vec::new(),
            ses: Vec::new(),
        }
    }
    fn push(&mut self, e: Estimate) {
        self.values.push(e.value);
        self.ses.push(e.se);
    }
    fn mean(&self) -> f64 {
        self.values.iter().sum::<f64>() / self.values.len() as f64
    }
    fn sd(&self) -> f64 {
        let m = self.mean();
        (self.values.iter().map(|v| (v - m).powi(2)).sum::<f64>()
            / (self.values.len() as f64 - 1.0))
            .sqrt()
    }
    fn mean_se(&self) -> f64 {
        self.ses.iter().sum::<f64>() / self.ses.len() as f64
    }
    /// Fraction of runs whose one-standard-error interval holds `truth`.
    fn coverage(&self, truth: f64) -> f64 {
        let hits = self
            .values
            .iter()
            .zip(&self.ses)
            .filter(|(v, s)| (*v - truth).abs() <= **s)
            .count();
        hits as f64 / self.values.len() as f64
    }
}

fn empirical_correlation(a: &Spread, b: &Spread) -> f64 {
    let (ma, mb) = (a.mean(), b.mean());
    let cov: f64 = a
        .values
        .iter()
        .zip(&b.values)
        .map(|(x, y)| (x - ma) * (y - mb))
        .sum::<f64>()
        / (a.values.len() as f64 - 1.0);
    cov / (a.sd() * b.sd())
}

#[track_caller]
fn check_unbiased_and_honest(name: &str, s: &Spread, truth: f64) {
    let n = s.values.len() as f64;
    let sem = s.sd() / n.sqrt();
    assert!(
        (s.mean() - truth).abs() < 3.0 * sem,
        "{name}: mean {} vs truth {truth} (sem {sem})",
        s.mean()
    );
    let ratio = s.mean_se() / s.sd();
    assert!(
        (0.75..1.25).contains(&ratio),
        "{name}: reported SE / empirical spread = {ratio}"
    );
}

#[test]
fn nanometre_recordings_give_unbiased_stiffness_with_honest_errors_and_correlations() {
    // Exact OU simulations (AR(1), Norrelykke & Flyvbjerg 2011); truth kappa = 0.05 pN/nm for a
    // 1 um bead at 25 C (fc ~ 950 Hz at 20 kHz sampling).
    let seeds = 60;
    let (mut psd, mut acf, mut eq, mut cons) =
        (Spread::new(), Spread::new(), Spread::new(), Spread::new());
    let mut predicted_r = [[0.0; 3]; 3];
    for seed in 0..seeds {
        let rec = record(10_000 + seed, 1 << 16, None, &Disturbances::default());
        let cal = calibrate(&rec, &conditions(), &AnalysisOptions::default()).expect("calibrates");
        let s = &cal.axes[0].stiffness_pn_per_nm;
        psd.push(s.psd.expect("psd stands"));
        acf.push(s.acf.expect("acf stands"));
        eq.push(s.equipartition.expect("equipartition stands"));
        cons.push(s.consensus);
        for i in 0..3 {
            for j in 0..3 {
                predicted_r[i][j] += s.correlation[i][j] / seeds as f64;
            }
        }
    }
    check_unbiased_and_honest("psd", &psd, KAPPA_PN_PER_NM);
    check_unbiased_and_honest("acf", &acf, KAPPA_PN_PER_NM);
    check_unbiased_and_honest("equipartition", &eq, KAPPA_PN_PER_NM);
    check_unbiased_and_honest("consensus", &cons, KAPPA_PN_PER_NM);
    // The predicted correlations must match what the runs show; with 60 runs the empirical
    // correlation has a standard error of about (1 - r^2)/sqrt(60) < 0.13.
    let pairs = [(0, 1, &psd, &acf), (0, 2, &psd, &eq), (1, 2, &acf, &eq)];
    for (i, j, a, b) in pairs {
        let r_emp = empirical_correlation(a, b);
        assert!(
            (r_emp - predicted_r[i][j]).abs() < 0.2,
            "correlation {i}-{j}: predicted {} empirical {r_emp}",
            predicted_r[i][j]
        );
    }
    // One-standard-error intervals of the consensus hold the truth about 68 % of the time;
    // with 60 runs the binomial standard error is 6 points.
    let coverage = cons.coverage(KAPPA_PN_PER_NM);
    assert!((0.5..0.86).contains(&coverage), "coverage {coverage}");
}

#[test]
fn volt_recordings_recover_the_sensitivity_without_bias() {
    let seeds = 50;
    let beta = 400.0; // nm/V
    let (mut b, mut psd) = (Spread::new(), Spread::new());
    for seed in 0..seeds {
        let rec = record(20_000 + seed, 1 << 16, Some(beta), &Disturbances::default());
        let cal = calibrate(&rec, &conditions(), &AnalysisOptions::default()).expect("calibrates");
        let axis = &cal.axes[0];
        b.push(axis.sensitivity_nm_per_v.expect("volts give beta"));
        psd.push(axis.stiffness_pn_per_nm.psd.expect("psd stands"));
        assert!(!axis.stiffness_pn_per_nm.equipartition_independent);
        assert_eq!(axis.stiffness_pn_per_nm.consensus_weights[2], 0.0);
    }
    check_unbiased_and_honest("beta", &b, beta);
    check_unbiased_and_honest("psd", &psd, KAPPA_PN_PER_NM);
}

#[test]
fn clean_recordings_are_consistent_and_raise_no_warnings() {
    for seed in 0..5 {
        let rec = record(30_000 + seed, 1 << 17, None, &Disturbances::default());
        let cal = calibrate(&rec, &conditions(), &AnalysisOptions::default()).expect("calibrates");
        let axis = &cal.axes[0];
        assert_eq!(
            axis.verdict,
            Verdict::Consistent,
            "{:?}",
            axis.verdict_reasons
        );
        let serious: Vec<_> = axis
            .findings
            .iter()
            .filter(|f| f.severity >= crate::findings::Severity::Warning)
            .collect();
        assert!(serious.is_empty(), "seed {seed}: {serious:?}");
    }
}

#[test]
fn mains_hum_is_found_and_does_not_bias_the_spectral_stiffness() {
    let hum = Disturbances {
        hum_amplitude: 3.0, // nm, against a thermal rms of about 9 nm
        hum_frequency_hz: 50.0,
        ..Disturbances::default()
    };
    let rec = record(40_000, 1 << 18, None, &hum);
    let cal = calibrate(&rec, &conditions(), &AnalysisOptions::default()).expect("calibrates");
    let axis = &cal.axes[0];
    assert!(
        axis.findings.iter().any(|f| f.code == "mains-pickup"),
        "{:?}",
        axis.findings
    );
    // The peak's bins are left out of the spectral fit and the fitted sinusoid is subtracted
    // before the time-domain methods, so none of the three is biased by the hum.
    let s = &axis.stiffness_pn_per_nm;
    for (name, e) in [
        ("psd", s.psd),
        ("acf", s.acf),
        ("equipartition", s.equipartition),
    ] {
        let e = e.expect("every method stands");
        assert!(
            ((e.value - KAPPA_PN_PER_NM) / e.se).abs() < 4.0,
            "{name} {e:?}"
        );
    }
    assert_eq!(
        axis.verdict,
        Verdict::Consistent,
        "{:?}",
        axis.verdict_reasons
    );
    assert_eq!(axis.lines_removed.len(), 1);
    assert!((axis.lines_removed[0].frequency_hz - 50.0).abs() < 0.01);
    assert!((axis.lines_removed[0].amplitude - 3.0).abs() < 0.1);
}

#[test]
fn strong_drift_is_reported() {
    let drift = Disturbances {
        drift_per_s: 40.0, // nm/s
        ..Disturbances::default()
    };
    let rec = record(50_000, 1 << 17, None, &drift);
    let cal = calibrate(&rec, &conditions(), &AnalysisOptions::default()).expect("calibrates");
    let codes: Vec<_> = cal.axes[0].findings.iter().map(|f| f.code).collect();
    assert!(codes.contains(&"low-frequency-drift"), "{codes:?}");
}

#[test]
fn clipped_recordings_are_reported() {
    let mut rec = record(60_000, 1 << 16, None, &Disturbances::default());
    let limit = 12.0;
    for v in &mut rec.axes[0].samples {
        *v = v.clamp(-limit, limit);
    }
    let cal = calibrate(&rec, &conditions(), &AnalysisOptions::default()).expect("calibrates");
    let codes: Vec<_> = cal.axes[0].findings.iter().map(|f| f.code).collect();
    assert!(codes.contains(&"clipping"), "{codes:?}");
}

#[test]
fn consensus_of_uncorrelated_estimates_is_the_inverse_variance_mean() {
    // Exact: for a diagonal covariance the BLUE is the inverse-variance weighted mean with
    // variance 1 / sum(1/var_i).
    let values = [1.0, 2.0, 4.0];
    let cov = [[1.0, 0.0, 0.0], [0.0, 4.0, 0.0], [0.0, 0.0, 4.0]];
    let c = consensus::combine(&values, &cov, &[true, true, true]);
    let w = [1.0, 0.25, 0.25];
    let total: f64 = w.iter().sum();
    let expected = 0.25f64.mul_add(4.0, 1.0f64.mul_add(1.0, 0.25 * 2.0)) / total;
    assert!((c.estimate.value - expected).abs() < 1e-12);
    assert!((c.estimate.se - (1.0 / total).sqrt()).abs() < 1e-12);
}

#[test]
fn consensus_of_correlated_estimates_does_not_count_shared_error_twice() {
    // Two estimates with correlation rho and equal variance s^2: the BLUE is their mean with
    // variance s^2 (1 + rho) / 2, not s^2 / 2 (exact).
    let rho = 0.8;
    let values = [1.0, 1.2, 0.0];
    let cov = [[1.0, rho, 0.0], [rho, 1.0, 0.0], [0.0, 0.0, 1.0]];
    let c = consensus::combine(&values, &cov, &[true, true, false]);
    assert!((c.estimate.value - 1.1).abs() < 1e-12);
    assert!((c.estimate.se - ((1.0 + rho) / 2.0).sqrt()).abs() < 1e-12);
    let d = consensus::discrepancies(&values, &cov);
    // sd(a - b) = sqrt(2 - 2 rho).
    assert!((d[0].difference_se - 2.0f64.mul_add(-rho, 2.0).sqrt()).abs() < 1e-12);
}

#[test]
fn invalid_conditions_are_errors_not_panics() {
    let rec = record(1, 1 << 12, None, &Disturbances::default());
    for (c, field) in [
        (RunConditions::new(-1e-6, 25.0), "bead_diameter_m"),
        (RunConditions::new(f64::NAN, 25.0), "bead_diameter_m"),
        (RunConditions::new(1e-6, -300.0), "temperature_c"),
    ] {
        let err = calibrate(&rec, &c, &AnalysisOptions::default()).expect_err("invalid");
        assert!(err.to_string().contains(field), "{err}");
    }
    let hot = calibrate(
        &rec,
        &RunConditions::new(1e-6, 120.0),
        &AnalysisOptions::default(),
    )
    .expect_err("outside the water formula's range");
    assert!(hot.to_string().contains("120"), "{hot}");
    let mut low = conditions();
    low.height_m = Some(0.4e-6);
    let err = calibrate(&rec, &low, &AnalysisOptions::default()).expect_err("bead in the wall");
    assert!(!err.to_string().is_empty());
}

#[test]
fn consensus_never_leaves_the_range_of_its_estimates() {
    // Strong correlation with unequal variances gives the unconstrained BLUE a negative weight
    // (w_b is proportional to s_a^2 - rho s_a s_b < 0 here) and a value outside [a, b]; the constrained
    // combination drops that method instead.
    let values = [1.0, 1.5, 0.0];
    let (sa, sb, rho) = (0.1f64, 0.3f64, 0.9f64);
    let cov = [
        [sa * sa, rho * sa * sb, 0.0],
        [rho * sa * sb, sb * sb, 0.0],
        [0.0, 0.0, 1.0],
    ];
    let c = consensus::combine(&values, &cov, &[true, true, false]);
    assert_eq!(c.weights, [1.0, 0.0, 0.0]);
    assert!((c.estimate.value - 1.0).abs() < 1e-12);
    assert!((c.estimate.se - sa).abs() < 1e-12);
}

#[test]
fn a_corner_frequency_near_nyquist_is_reported() {
    // kappa = 0.05 pN/nm gives fc ~ 950 Hz; sampled at 4 kHz that is 47 % of Nyquist.
    let phys = physics(&conditions()).expect("valid");
    let fc = KAPPA_PN_PER_NM * 1e-3 / (2.0 * PI * phys.stokes_drag_kg_per_s.value);
    let axes = [OuAxis {
        name: "x".into(),
        corner_frequency_hz: fc,
        variance: phys.thermal_energy_j / (KAPPA_PN_PER_NM * 1e-3) * 1e18,
    }];
    let fs = 4_000.0;
    let samples = simulate_axes(&axes, fs, 1 << 16, 70_000, &Disturbances::default()).remove(0);
    let rec = Recording {
        sample_rate_hz: fs,
        unit: PositionUnit::Nanometre,
        axes: vec![AxisTrace {
            name: "x".into(),
            samples,
        }],
    };
    let cal = calibrate(&rec, &conditions(), &AnalysisOptions::default()).expect("calibrates");
    let axis = &cal.axes[0];
    assert!(
        axis.findings
            .iter()
            .any(|f| f.code == "corner-near-nyquist"),
        "{:?}",
        axis.findings
    );
    // Aliasing is modelled, so the estimate is still right.
    let psd = axis.stiffness_pn_per_nm.psd.expect("psd stands");
    assert!(
        ((psd.value - KAPPA_PN_PER_NM) / psd.se).abs() < 4.0,
        "{psd:?}"
    );
}

#[test]
fn white_detection_noise_is_fitted_as_a_floor_and_without_it_fails_the_spectral_fit() {
    // White noise of 4 nm rms on a thermal rms of about 9 nm flattens the spectrum at high
    // frequency by the constant 2 sigma_n^2 / fs (shared PHYSICS.md section 12), which no
    // Lorentzian describes, and adds variance that equipartition counts. With the floor off
    // (the old model) the spectral fit fails and the methods disagree; with the default `auto`
    // the likelihood-ratio test puts the floor in, the fit passes, the level comes out within
    // 4 of its standard errors of the truth, and the `noise-floor` finding warns.
    let noisy = Disturbances {
        white_noise: 4.0,
        ..Disturbances::default()
    };
    let rec = record(80_000, 1 << 17, None, &noisy);
    let off = AnalysisOptions {
        noise_floor: crate::spectrum::NoiseFloorMode::Off,
        ..AnalysisOptions::default()
    };
    let cal = calibrate(&rec, &conditions(), &off).expect("calibrates");
    let axis = &cal.axes[0];
    let codes: Vec<_> = axis.findings.iter().map(|f| f.code).collect();
    assert!(codes.contains(&"poor-spectral-fit"), "{codes:?}");
    assert_eq!(axis.verdict, Verdict::Inconsistent);

    let cal = calibrate(&rec, &conditions(), &AnalysisOptions::default()).expect("calibrates");
    let axis = &cal.axes[0];
    let codes: Vec<_> = axis.findings.iter().map(|f| f.code).collect();
    assert!(!codes.contains(&"poor-spectral-fit"), "{codes:?}");
    let finding = axis
        .findings
        .iter()
        .find(|f| f.code == "noise-floor")
        .expect("noise-floor finding");
    assert_eq!(finding.severity, crate::findings::Severity::Warning);
    let level = axis
        .noise_floor
        .and_then(|n| n.level)
        .expect("the floor is in the model");
    let truth = 2.0 * 4.0 * 4.0 / FS;
    assert!(
        (level.level - truth).abs() < 4.0 * level.level_se,
        "{level:?} against {truth}"
    );
}

#[test]
fn long_records_averaged_over_segments_keep_unbiased_estimates_and_honest_errors() {
    // 2^19 samples are analysed as two periodogram segments by default; the statistics must be
    // as good as for a single segment.
    let seeds = 40;
    let (mut psd, mut acf, mut eq, mut cons) =
        (Spread::new(), Spread::new(), Spread::new(), Spread::new());
    for seed in 0..seeds {
        let rec = record(90_000 + seed, 1 << 19, None, &Disturbances::default());
        let cal = calibrate(&rec, &conditions(), &AnalysisOptions::default()).expect("calibrates");
        let axis = &cal.axes[0];
        assert_eq!(axis.n_windows, 2);
        let s = &axis.stiffness_pn_per_nm;
        psd.push(s.psd.expect("psd stands"));
        acf.push(s.acf.expect("acf stands"));
        eq.push(s.equipartition.expect("equipartition stands"));
        cons.push(s.consensus);
    }
    check_unbiased_and_honest("psd", &psd, KAPPA_PN_PER_NM);
    check_unbiased_and_honest("acf", &acf, KAPPA_PN_PER_NM);
    check_unbiased_and_honest("equipartition", &eq, KAPPA_PN_PER_NM);
    check_unbiased_and_honest("consensus", &cons, KAPPA_PN_PER_NM);
}

#[test]
fn a_viscosity_error_adds_its_relative_variance_to_the_drag_methods_only() {
    // kappa_psd = 2 pi gamma fc and kappa_acf = gamma / tau are proportional to the viscosity
    // (Stokes: gamma = 6 pi eta R), so a relative viscosity error e adds e^2 kappa^2 to their
    // variances exactly (first-order propagation, JCGM 100:2008 section 5.1), and equipartition
    // in nm (kB T / var) does not depend on it. Here e = 1 %, the accuracy IAPWS 2008 states
    // for liquid water at atmospheric pressure (as recalled), entered as the viscosity's
    // standard error.
    let rec = record(5, 1 << 16, None, &Disturbances::default());
    let plain = calibrate(&rec, &conditions(), &AnalysisOptions::default()).expect("calibrates");
    let eta = physics(&conditions())
        .expect("valid conditions")
        .viscosity_pa_s;
    let mut with_error = conditions();
    with_error.viscosity_se_pa_s = 0.01 * eta;
    let widened = calibrate(&rec, &with_error, &AnalysisOptions::default()).expect("calibrates");
    let (a, b) = (
        &plain.axes[0].stiffness_pn_per_nm,
        &widened.axes[0].stiffness_pn_per_nm,
    );
    for (name, before, after) in [("psd", a.psd, b.psd), ("acf", a.acf, b.acf)] {
        let (before, after) = (before.expect("stands"), after.expect("stands"));
        assert_eq!(before.value, after.value, "{name}: the value is unchanged");
        let added = after.se.mul_add(after.se, -before.se.powi(2));
        let want = (0.01 * before.value).powi(2);
        assert!(
            (added / want - 1.0).abs() < 1e-9,
            "{name}: variance added {added:e}, want {want:e}"
        );
    }
    let (before, after) = (
        a.equipartition.expect("stands"),
        b.equipartition.expect("stands"),
    );
    assert_eq!(before, after, "equipartition in nm does not use the drag");
}
