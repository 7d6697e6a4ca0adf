//! Unit tests of how an upload's fields are split: every row of the settings table is taken as
//! a field (as `Settings::apply` takes it), the labels are taken apart from them, and a name
//! that is neither is refused with the name in the problem's `field`.

use super::split_fields;
use crate::http::problem::AppError;
use crate::settings::{SPECS, Settings};

fn labels() -> Vec<(String, String)> {
    vec![
        ("instrument".into(), "bench-a".into()),
        ("trap".into(), "t1".into()),
        ("axes".into(), "x, y".into()),
    ]
}

#[test]
fn every_row_of_the_settings_table_is_an_upload_field() {
    let mut pairs = labels();
    let mut expected = Settings::default();
    for spec in SPECS {
        pairs.push((spec.key.to_string(), spec.example.to_string()));
        expected.apply(spec.key, spec.example).expect("example");
    }
    let (settings, labels) = split_fields(pairs, Some("run.csv".into())).expect("accepted");
    assert_eq!(settings, expected);
    assert_eq!(settings.to_pairs().len(), SPECS.len());
    assert_eq!(
        (labels.instrument.as_str(), labels.trap.as_str()),
        ("bench-a", "t1")
    );
    assert_eq!(labels.axes, ["x", "y"]);
    assert_eq!(labels.file_name, "run.csv");
}

#[test]
fn a_field_outside_the_table_and_the_labels_is_refused_by_name() {
    let mut pairs = labels();
    pairs.push(("bead_size_um".into(), "1".into()));
    match split_fields(pairs, None) {
        Err(AppError::BadRequest { code, field, .. }) => {
            assert_eq!(
                (code, field.as_deref()),
                ("unknown-field", Some("bead_size_um"))
            );
        }
        other => panic!("accepted: {other:?}"),
    }
}

fn key_of(fields: &[(&str, &str)], model_version: u32) -> String {
    let mut pairs = labels();
    pairs.extend(fields.iter().map(|(k, v)| (k.to_string(), v.to_string())));
    let (settings, labels) = split_fields(pairs, Some("run.csv".into())).expect("accepted");
    let effective: Vec<(String, String)> = settings
        .effective_pairs()
        .into_iter()
        .map(|(k, v)| (k.to_string(), v))
        .collect();
    super::idempotency_key(&"ab".repeat(32), &effective, &labels, model_version)
}

#[test]
fn the_idempotency_key_covers_the_effective_settings_and_the_model_version() {
    let base = [("bead_diameter_um", "1"), ("temperature_c", "25")];
    let plain = key_of(&base, 2);
    // A stated default sent explicitly is the same calibration as leaving it out...
    let with_default = key_of(&[base[0], base[1], ("hydrodynamics", "on")], 2);
    assert_eq!(plain, with_default);
    // ...a value other than the default is not, and neither is the same upload under another
    // model version (a retry after an upgrade that changed a default is a new calibration).
    assert_ne!(
        plain,
        key_of(&[base[0], base[1], ("hydrodynamics", "off")], 2)
    );
    assert_ne!(plain, key_of(&base, 1));
}
