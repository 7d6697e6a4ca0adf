//! Tests of the Allan stage through the calibration, on exact synthetic records: clean
//! Ornstein-Uhlenbeck records (exact AR(1), the overdamped limit of Norrelykke & Flyvbjerg,
//! Phys. Rev. E 83, 041103 (2011)) against the fitted model's band, and records with 1/f or
//! linear drift (random-phase synthesis of the aliased spectrum, shared PHYSICS.md section 12;
//! `simulate::InstrumentAxis`).

use super::synthetic_records::{one_axis, truth};
use super::*;
use crate::simulate::{FlickerDrift, InstrumentAxis, generator, ou_series};
use crate::spectrum::aliased_lorentzian_one_sided;
use std::f64::consts::PI;

const FS: f64 = 100_000.0;
const N_SAMPLES: usize = 1 << 16;

fn calibrated(x: Vec<f64>) -> AxisCalibration {
    let options = AnalysisOptions::default();
    calibrate(
        &one_axis(x, FS),
        &RunConditions::new(1.0e-6, 25.0),
        &options,
    )
    .expect("calibrates")
    .axes
    .remove(0)
}

fn fires(axis: &AxisCalibration) -> bool {
    axis.findings.iter().any(|f| f.code == "drift-dominates")
}

#[test]
fn clean_records_rarely_show_drift_against_the_fitted_model() {
    // 200 exact AR(1) records of the reference trap (1 um bead, 25 C, 0.05 pN/nm: fc = 850 Hz,
    // 2^16 samples at 100 kHz, seed 808), each calibrated, its band from its own fitted model.
    // Against the true model the rule fires in about 0.7 % of records (`allan` tests); the
    // fitted model moves the band by the fit's few-per-cent error, far inside the band's width
    // at the last points. Seen: 2 of 200. The limit, 6 of 200 (3 %), is above the 99.9th
    // percentile of a Poisson count with mean 1.4.
    let (fc, d) = truth();
    let variance = d / (2.0 * PI * fc);
    let mut rng = generator(808);
    let mut count = 0;
    for _ in 0..200 {
        let axis = calibrated(ou_series(fc, variance, FS, N_SAMPLES, &mut rng));
        let expected = axis.allan.expected.as_ref().expect("the fit exists");
        assert_eq!(axis.allan.tau_s.len(), 15);
        assert_eq!(fires(&axis), expected.drift_onset_s.is_some());
        count += usize::from(fires(&axis));
    }
    assert!(count <= 6, "{count} of 200");
}

#[test]
fn one_over_f_drift_and_a_linear_drift_fire_the_finding() {
    // 1/f drift ten times the thermal plateau at 10 Hz (ten times the drift tests' strong row:
    // at that row the drift carries about half the Allan variance at the last point, inside the
    // band of its 4 degrees of freedom), and a
    // linear drift of 5 standard deviations of the thermal motion per second; 20 records of
    // each (seed 909). The drift's Allan variance grows with tau (as tau^2 for the line, and
    // from a level set by the 1/f density for the flicker) while the thermal one falls as 1/tau,
    // so the last points lie far above the band. Seen: every record fires, the 1/f records
    // from the shortest averaging time (the drift's density at high frequency is part of the
    // measured curve and not of the expected one) and the linear ones from 0.041 s; the test
    // asks for onsets no later than those.
    let (fc, d) = truth();
    let variance = d / (2.0 * PI * fc);
    let mut flicker = InstrumentAxis::new(fc, variance);
    flicker.flicker = Some(FlickerDrift {
        density_at_1_hz: aliased_lorentzian_one_sided(10.0, fc, d, FS) * 100.0,
        low_cut_hz: FS / N_SAMPLES as f64,
    });
    let mut linear = InstrumentAxis::new(fc, variance);
    linear.linear_drift_per_s = 5.0 * variance.sqrt();
    let mut rng = generator(909);
    for (name, axis) in [("1/f", flicker), ("linear", linear)] {
        let plan = axis.plan(FS, N_SAMPLES).expect("valid axis");
        let mut onsets = Vec::new();
        for _ in 0..20 {
            let calibrated = calibrated(plan.record(&mut rng));
            assert!(fires(&calibrated), "{name}: {:?}", calibrated.allan);
            onsets.push(calibrated.allan.expected.unwrap().drift_onset_s.unwrap());
        }
        let want = if name == "1/f" { 1e-5 } else { 0.04096 };
        assert!(onsets.iter().all(|&t| t <= want), "{name}: {onsets:?}");
    }
}

#[test]
fn without_a_spectral_fit_only_the_measured_curve_is_given() {
    let mut rng = generator(7);
    let x = ou_series(850.0, 1.0, FS, 4096, &mut rng);
    let curve = super::allan::allan_stage(&x, FS, None);
    assert!(curve.expected.is_none());
    assert_eq!(curve.deviation.len(), 11);
    assert!(curve.deviation.iter().all(|d| d.is_finite() && *d > 0.0));
}
