//! Unit tests of the problem documents' `field`: when the calibration core refuses a run
//! condition (named in SI, `bead_diameter_m`), the problem names the upload field of the
//! settings table that sets it, so the page shows it beside that control.

use super::AppError;
use crate::calibration::{RunConditions, physics};
use crate::pipeline::PipelineError;
use crate::settings::{KEYS, Settings};

/// Makes one run condition invalid.
type Spoil = fn(&mut RunConditions);

#[test]
fn refused_run_conditions_name_a_field_of_the_settings_table() {
    let mut settings = Settings::default();
    for (k, v) in [("bead_diameter_um", "1"), ("temperature_c", "25")] {
        settings.apply(k, v).expect("valid");
    }
    let (_, good, _) = settings.resolve().expect("resolves");
    // Each condition the core checks, made invalid in turn (past the settings' own checks),
    // with the field the problem must name.
    let cases: [(&str, Spoil); 7] = [
        ("bead_diameter_um", |c| c.bead_diameter_m = 2e-3),
        ("bead_diameter_se_um", |c| c.bead_diameter_se_m = -1e-9),
        ("temperature_c", |c| c.temperature_c = -300.0),
        ("temperature_se_c", |c| c.temperature_se_c = -1.0),
        ("height_se_um", |c| c.height_se_m = -1e-9),
        ("bead_density_kg_per_m3", |c| c.bead_density_kg_per_m3 = 0.0),
        ("viscosity_mpa_s", |c| c.viscosity_pa_s = Some(-1e-3)),
    ];
    for (key, spoil) in cases {
        let mut conditions = good.clone();
        spoil(&mut conditions);
        let refused = physics(&conditions).expect_err("refused");
        match AppError::from(PipelineError::Calibration(refused)) {
            AppError::Unprocessable { field, .. } => {
                assert_eq!(field.as_deref(), Some(key));
                assert!(KEYS.contains(&key), "{key} is not a setting");
            }
            other => panic!("{key}: {other:?}"),
        }
    }
}

#[test]
fn an_exposure_longer_than_the_frame_is_a_422_naming_the_exposure_field() {
    // The file's own rate is known only to the calibration, which refuses the exposure there.
    let refused = crate::calibration::CalibrationError::InvalidExposure {
        exposure_time_s: 1e-3,
        frame_interval_s: 5e-4,
    };
    match AppError::from(PipelineError::Calibration(refused)) {
        AppError::Unprocessable {
            code,
            field,
            detail,
        } => {
            assert_eq!(code, "invalid-exposure");
            assert_eq!(field.as_deref(), Some("exposure_time_s"));
            assert!(KEYS.contains(&"exposure_time_s"));
            assert!(detail.contains("frame interval"), "{detail}");
        }
        other => panic!("{other:?}"),
    }
}

#[test]
fn principal_axes_refused_for_volt_data_names_the_setting() {
    // A two-axis volt recording with principal_axes: the core refuses it (a rotation of volts
    // is not a rotation of positions); the problem is a 422 naming the setting's field.
    use crate::calibration::{AnalysisOptions, calibrate};
    use crate::recording::{AxisTrace, PositionUnit, Recording};
    let axis = |name: &str, k: f64| AxisTrace {
        name: name.into(),
        samples: (0..256).map(|i| (f64::from(i) * k).sin()).collect(),
    };
    let recording = Recording {
        sample_rate_hz: 10_000.0,
        unit: PositionUnit::Volt,
        axes: vec![axis("x", 0.3), axis("y", 0.7)],
    };
    let options = AnalysisOptions {
        principal_axes: true,
        ..Default::default()
    };
    let refused =
        calibrate(&recording, &RunConditions::new(1e-6, 25.0), &options).expect_err("refused");
    match AppError::from(PipelineError::Calibration(refused)) {
        AppError::Unprocessable { code, field, .. } => {
            assert_eq!(code, "principal-axes-not-applicable");
            assert_eq!(field.as_deref(), Some("principal_axes"));
            assert!(KEYS.contains(&"principal_axes"));
        }
        other => panic!("{other:?}"),
    }
}
