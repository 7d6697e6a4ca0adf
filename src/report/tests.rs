//! Tests of the wire report: the documented JSON shape and the summary formatting.

use super::summary::pm;
use super::*;
use crate::calibration::{AnalysisOptions, RunConditions, calibrate};
use crate::recording::AxisTrace;
use crate::simulate::{Disturbances, OuAxis, simulate_axes};

fn report(unit: PositionUnit) -> CalibrationReport {
    let axes = [OuAxis {
        name: "x".into(),
        corner_frequency_hz: 800.0,
        variance: 50.0,
    }];
    let samples = simulate_axes(&axes, 20_000.0, 1 << 15, 5, &Disturbances::default()).remove(0);
    let rec = Recording {
        sample_rate_hz: 20_000.0,
        unit,
        axes: vec![AxisTrace {
            name: "x".into(),
            samples,
        }],
    };
    let conditions = RunConditions::new(1e-6, 22.0);
    let options = AnalysisOptions::default();
    let cal = calibrate(&rec, &conditions, &options).expect("calibrates");
    let facts = InputFacts {
        file_name: "x.csv".into(),
        sha256: sha256_hex(b"abc"),
        format: "csv".into(),
    };
    build(&cal, &rec, &facts, &conditions, &options, true)
}

#[test]
fn json_has_the_documented_top_level_and_axis_fields() {
    let v = serde_json::to_value(report(PositionUnit::Nanometre)).expect("serialises");
    for key in [
        "drag_pn_s_per_nm",
        "axes",
        "input",
        "conditions",
        "software",
        "schema",
    ] {
        assert!(v.get(key).is_some(), "missing {key}");
    }
    let axis = &v["axes"][0];
    for key in [
        "axis",
        "corner_frequency_hz",
        "relaxation_time_s",
        "stiffness_pn_per_nm",
        "sensitivity_nm_per_v",
        "verdict",
        "findings",
    ] {
        assert!(axis.get(key).is_some(), "missing axes[0].{key}");
    }
    for m in ["psd", "acf", "equipartition", "consensus"] {
        let e = &axis["stiffness_pn_per_nm"][m];
        assert!(e["value"].is_f64() && e["se"].is_f64(), "{m}: {e}");
    }
    assert!(axis["sensitivity_nm_per_v"].is_null());
}

#[test]
fn json_round_trips_through_serde() {
    let r = report(PositionUnit::Volt);
    let text = serde_json::to_string(&r).expect("serialises");
    let back: CalibrationReport = serde_json::from_str(&text).expect("parses");
    assert!(back == r, "the report changed in a JSON round trip");
    assert!(back.axes[0].sensitivity_nm_per_v.is_some());
}

#[test]
fn sha256_matches_the_standard_test_vector() {
    // FIPS 180-2, appendix B.1: SHA-256("abc").
    assert_eq!(
        sha256_hex(b"abc"),
        "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
    );
}

#[test]
fn values_are_printed_to_two_significant_digits_of_their_error() {
    #[track_caller]
    fn check(value: f64, se: f64, expected: &str) {
        assert_eq!(pm(&ValueSe { value, se }), expected);
    }
    check(0.050123, 0.00061, "0.05012 ± 0.00061");
    check(948.27, 10.4, "948 ± 10");
    check(1.5, 0.0, "1.5000");
}

#[test]
fn summary_names_every_axis_and_the_verdict() {
    let text = summary_table(&report(PositionUnit::Volt));
    assert!(text.contains("beta (nm/V)"), "{text}");
    assert!(text.lines().any(|l| l.starts_with("x ")), "{text}");
    assert!(text.contains("not an independent check"), "{text}");
}

#[test]
fn a_rotated_calibration_reports_the_coupling_and_the_principal_axes() {
    // Two independent exact AR(1) axes (Norrelykke & Flyvbjerg 2011), fc 800 and 400 Hz,
    // variances 50 and 100 nm^2, mixed by a 30 degree rotation; with principal_axes the
    // document names the rotated axes and the angle in degrees, and survives a JSON round trip;
    // a document written before these fields existed still reads (no coupling, no rotation).
    let axes = [
        OuAxis {
            name: "p".into(),
            corner_frequency_hz: 800.0,
            variance: 50.0,
        },
        OuAxis {
            name: "q".into(),
            corner_frequency_hz: 400.0,
            variance: 100.0,
        },
    ];
    let mut s = simulate_axes(&axes, 20_000.0, 1 << 15, 9, &Disturbances::default());
    let (x, y) = crate::calibration::principal::rotate(&s[0], &s[1], -30f64.to_radians());
    s.clear();
    let rec = Recording {
        sample_rate_hz: 20_000.0,
        unit: PositionUnit::Nanometre,
        axes: vec![
            AxisTrace {
                name: "x".into(),
                samples: x,
            },
            AxisTrace {
                name: "y".into(),
                samples: y,
            },
        ],
    };
    let conditions = RunConditions::new(1e-6, 22.0);
    let options = AnalysisOptions {
        principal_axes: true,
        ..Default::default()
    };
    let cal = calibrate(&rec, &conditions, &options).expect("calibrates");
    let facts = InputFacts {
        file_name: "xy.csv".into(),
        sha256: sha256_hex(b"abc"),
        format: "csv".into(),
    };
    let r = build(&cal, &rec, &facts, &conditions, &options, false);
    let v = serde_json::to_value(&r).expect("serialises");
    assert_eq!(v["principal_axes"]["rotated_axes"][0], "x'");
    assert_eq!(v["axes"][1]["axis"], "y'");
    let angle = v["principal_axes"]["angle_deg"]["value"]
        .as_f64()
        .expect("angle");
    // The angle's se is about a degree here: 30 within 6 degrees is a loose bound.
    assert!((angle - 30.0).abs() < 6.0, "{angle}");
    assert_eq!(v["axes_coupling"][0]["first"], "x'");
    assert_eq!(v["options"]["principal_axes"], true);
    assert!(summary_table(&r).contains("principal axes x' and y'"));
    let back: CalibrationReport = serde_json::to_string(&r)
        .and_then(|t| serde_json::from_str(&t))
        .expect("round trip");
    assert!(back == r);
    let mut old = v.clone();
    let top = old.as_object_mut().expect("object");
    top.remove("axes_coupling");
    top.remove("principal_axes");
    let read: CalibrationReport = serde_json::from_value(old).expect("old documents read");
    assert!(read.axes_coupling.is_empty() && read.principal_axes.is_none());
}
