//! Tests of the settings table and of `Settings`: every row is checked the same way (complete,
//! round trip through its canonical text, used by `resolve`, stated default equal to what
//! `resolve` applies), so that a new row that is not wired up fails here; and the canonical text
//! forms are pinned, since stored calibrations and idempotency keys are computed over them.

use super::spec::{DETREND_CHOICES, FORMAT_CHOICES, UNIT_CHOICES};
use super::*;
use crate::ingest::Format;

fn settings(pairs: &[(&str, &str)]) -> Settings {
    let mut s = Settings::default();
    for (k, v) in pairs {
        s.apply(k, v)
            .unwrap_or_else(|e| panic!("{k} = {v} is refused: {e}"));
    }
    s
}

/// The required rows at their examples: the smallest settings that resolve.
fn base() -> Settings {
    let mut s = Settings::default();
    for spec in SPECS.iter().filter(|s| s.required()) {
        s.apply(spec.key, spec.example).expect("example parses");
    }
    s
}

/// `resolve` as text: the core's option structs are plain data whose `Debug` output shows
/// every field (floats in round-trip form), so equal text means equal options.
fn resolved(s: &Settings) -> String {
    match s.resolve() {
        Ok(options) => format!("{options:?}"),
        Err(e) => format!("error: {e}"),
    }
}

fn with(s: &Settings, key: &str, value: &str) -> Settings {
    let mut s = s.clone();
    s.apply(key, value)
        .unwrap_or_else(|e| panic!("{key} = {value} is refused: {e}"));
    s
}

#[test]
fn keys_are_the_table_rows_in_order_and_each_appears_once() {
    let from_table: Vec<&str> = SPECS.iter().map(|s| s.key).collect();
    assert_eq!(KEYS.to_vec(), from_table);
    let mut sorted = from_table.clone();
    sorted.sort_unstable();
    sorted.dedup();
    assert_eq!(sorted.len(), SPECS.len(), "a key appears twice");
    let mut flags: Vec<&str> = SPECS.iter().map(|s| s.flag.long()).collect();
    flags.sort_unstable();
    flags.dedup();
    assert_eq!(flags.len(), SPECS.len(), "a flag appears twice");
}

#[test]
fn every_row_is_complete() {
    for s in SPECS {
        let k = s.key;
        assert!(
            k.bytes()
                .all(|b| b.is_ascii_lowercase() || b.is_ascii_digit() || b == b'_'),
            "{k}: keys are lower snake case"
        );
        let long = s.flag.long();
        assert!(
            long.bytes().all(|b| b.is_ascii_lowercase() || b == b'-'),
            "{k}: flag --{long} is not kebab case"
        );
        assert!(!s.label.is_empty(), "{k}: no label");
        assert!(
            s.help.ends_with('.') && s.help.len() > 20,
            "{k}: help is not a sentence"
        );
        assert!(
            s.kind.parse(s.example).is_ok(),
            "{k}: example does not parse"
        );
        if let Absent::Default(d) = s.absent {
            let (default, example) = (s.kind.parse(d), s.kind.parse(s.example));
            assert!(default.is_ok(), "{k}: stated default `{d}` does not parse");
            assert_ne!(default, example, "{k}: the example is the default");
        }
        if let Flag::Switch { sets, .. } = s.flag {
            assert!(s.kind.parse(sets).is_ok(), "{k}: switch sets `{sets}`");
        }
        if let Kind::Number(range) = s.kind {
            let Ok(Value::Number(x)) = s.kind.parse(s.example) else {
                panic!("{k}: example is not a number")
            };
            assert!(range.check(x).is_ok(), "{k}: example out of range");
        }
    }
}

#[test]
fn every_row_round_trips_through_its_canonical_text() {
    for s in SPECS {
        let mut texts = vec![s.example.to_string()];
        if let Absent::Default(d) = s.absent {
            texts.push(d.to_string());
        }
        if let Flag::Switch { sets, .. } = s.flag {
            texts.push(sets.to_string());
        }
        if let Kind::Choice(c) = s.kind {
            texts.extend(c.names.iter().map(|n| n.to_string()));
            texts.extend(c.aliases.iter().map(|(a, _)| a.to_ascii_uppercase()));
        }
        for text in texts {
            let first = settings(&[(s.key, &text)]);
            let pairs = first.to_pairs();
            assert_eq!(pairs.len(), 1, "{}: {pairs:?}", s.key);
            let again = settings(&[(pairs[0].0, &pairs[0].1)]);
            assert_eq!(again, first, "{} = `{text}` -> {pairs:?}", s.key);
            assert_eq!(again.to_pairs(), pairs, "{} = `{text}`", s.key);
        }
    }
}

/// The settings a row applies with: the drive's rows mean something only for a driven
/// recording, whose frequency and amplitude come together (`Settings::drive`).
fn companions(key: &str) -> &'static [(&'static str, &'static str)] {
    match key {
        "drive_frequency_hz" => &[("drive_amplitude_nm", "150")],
        "drive_amplitude_nm" => &[("drive_frequency_hz", "32")],
        "drive_amplitude_se_nm" | "drive_axis" | "drive_drag_to" => {
            &[("drive_frequency_hz", "32"), ("drive_amplitude_nm", "150")]
        }
        _ => &[],
    }
}

#[test]
fn drive_settings_come_together_and_name_what_is_missing() {
    let base = base();
    for (key, value, named) in [
        ("drive_frequency_hz", "32", "drive_frequency_hz"),
        ("drive_amplitude_nm", "150", "drive_amplitude_nm"),
        ("drive_axis", "x", "drive_axis"),
        ("drive_drag_to", "y", "drive_drag_to"),
        ("drive_amplitude_se_nm", "2", "drive_amplitude_se_nm"),
    ] {
        match with(&base, key, value).resolve() {
            Err(SettingsError::BadValue { key: k, .. }) => assert_eq!(k, named, "{key}"),
            other => panic!("{key} alone: {other:?}"),
        }
    }
    // The stated default of the amplitude's error alone is no drive at all.
    assert!(with(&base, "drive_amplitude_se_nm", "0").resolve().is_ok());
    let both = with(
        &with(&base, "drive_frequency_hz", "32.5"),
        "drive_amplitude_nm",
        "150",
    );
    let (_, _, analysis) = both.resolve().expect("a drive");
    let drive = analysis.drive.expect("drive");
    assert_eq!(drive.frequency_hz, 32.5);
    assert!((drive.amplitude_m - 150e-9).abs() < 1e-20);
    assert_eq!(drive.axis, None);
    match with(&both, "drive_axis", "x,y").resolve() {
        Err(SettingsError::BadValue { key, .. }) => assert_eq!(key, "drive_axis"),
        other => panic!("two driven axes: {other:?}"),
    }
}

#[test]
fn every_row_is_used_by_resolve() {
    let base = base();
    let plain = resolved(&base);
    assert!(!plain.starts_with("error"), "{plain}");
    for s in SPECS {
        if s.required() {
            let mut without = Settings::default();
            for other in SPECS.iter().filter(|o| o.required() && o.key != s.key) {
                without.apply(other.key, other.example).expect("example");
            }
            assert!(
                matches!(without.resolve(), Err(SettingsError::Missing { key, .. }) if key == s.key),
                "{}: resolve does not require it",
                s.key
            );
        } else {
            let context = companions(s.key)
                .iter()
                .fold(base.clone(), |acc, (k, v)| with(&acc, k, v));
            let plain = resolved(&context);
            let changed = resolved(&with(&context, s.key, s.example));
            assert!(!changed.starts_with("error"), "{}: {changed}", s.key);
            assert_ne!(
                changed, plain,
                "{}: setting it to its example changes nothing: resolve does not use it",
                s.key
            );
        }
    }
}

#[test]
fn stated_defaults_are_what_resolve_applies_without_the_setting() {
    let base = base();
    let mut checked = 0;
    for s in SPECS {
        if let Absent::Default(d) = s.absent {
            assert_eq!(
                resolved(&with(&base, s.key, d)),
                resolved(&base),
                "{}: the stated default `{d}` is not what applies without it",
                s.key
            );
            checked += 1;
        }
    }
    // bead_diameter_se_um, temperature_se_c, height_se_um, bead_density_kg_per_m3,
    // time_tolerance, detector_filter, hydrodynamics, detrend, axial_axes, precision_percent.
    assert!(checked >= 10, "only {checked} defaults checked");
}

#[test]
fn each_choice_resolves_to_its_own_option() {
    let base = base();
    for s in SPECS {
        let Kind::Choice(c) = s.kind else { continue };
        let mut seen = vec![resolved(&base)];
        for name in c.names {
            let r = resolved(&with(&base, s.key, name));
            assert!(!r.starts_with("error"), "{} = {name}: {r}", s.key);
            if !matches!(s.absent, Absent::Default(d) if d == *name) {
                assert!(
                    !seen.contains(&r),
                    "{} = {name} resolves like another",
                    s.key
                );
            }
            seen.push(r);
        }
    }
}

#[test]
fn choices_agree_with_the_types_they_name() {
    // The format names are ingest's own (`Format::ALL`, `Format::name`, `Format::parse_name`).
    let names: Vec<&str> = Format::ALL.iter().map(|f| f.name()).collect();
    assert_eq!(FORMAT_CHOICES.names.to_vec(), names);
    for (alias, name) in FORMAT_CHOICES.aliases {
        assert_eq!(
            Format::parse_name(alias).map(Format::name),
            Some(*name),
            "{alias}"
        );
    }
    // Units: the names are the recording's own suffixes.
    for text in UNIT_CHOICES
        .names
        .iter()
        .chain(UNIT_CHOICES.aliases.iter().map(|(a, _)| a))
    {
        let unit = parse_unit(text).unwrap_or_else(|| panic!("{text}"));
        assert_eq!(Some(unit.suffix()), UNIT_CHOICES.find(text), "{text}");
    }
    assert_eq!(parse_detrend("LINEAR"), Some(Detrend::Linear));
    assert_eq!(DETREND_CHOICES.names.len(), 2);
}

#[track_caller]
fn check_parse(kind: Kind, text: &str, expected: Option<Value>) {
    assert_eq!(kind.parse(text).ok(), expected, "`{text}`");
}

#[test]
fn kinds_take_what_they_document_and_refuse_the_rest() {
    use Value::*;
    let number = Kind::Number(Range {
        min: f64::MIN,
        max: f64::MAX,
    });
    let count = Kind::Count(Range { min: 1.0, max: 9.0 });
    check_parse(number, " 2.5 ", Some(Number(2.5)));
    check_parse(number, "-1e-3", Some(Number(-1e-3)));
    check_parse(number, "abc", None);
    check_parse(number, "inf", None);
    check_parse(number, "NaN", None);
    check_parse(number, "1,5", None);
    check_parse(count, "3", Some(Count(3)));
    check_parse(count, "0", None);
    check_parse(count, "-1", None);
    check_parse(count, "2.5", None);
    for yes in ["true", "YES", "on", "1"] {
        check_parse(Kind::Boolean, yes, Some(Boolean(true)));
    }
    for no in ["false", "No", "off", "0"] {
        check_parse(Kind::Boolean, no, Some(Boolean(false)));
    }
    check_parse(Kind::Boolean, "maybe", None);
    let units = Kind::Choice(&UNIT_CHOICES);
    check_parse(units, "v", Some(Choice("V")));
    check_parse(units, "Nanometer", Some(Choice("nm")));
    check_parse(units, "mm", None);
    check_parse(Kind::Filter, "none", Some(Filter(FilterSetting::None)));
    check_parse(Kind::Filter, "fit:0:0.5", None);
    check_parse(Kind::Filter, "1000:1.5", None);
    check_parse(Kind::Filter, "1000", None);
    check_parse(
        Kind::Names,
        " z , y ",
        Some(Names(vec!["z".into(), "y".into()])),
    );
    check_parse(Kind::Names, " , ", None);
}

#[test]
fn every_numeric_row_has_a_range_that_holds_its_example_and_default() {
    for s in SPECS {
        let (Kind::Number(range) | Kind::Count(range)) = s.kind else {
            continue;
        };
        assert!(
            range.min.is_finite() && range.max.is_finite() && range.min < range.max,
            "{}: {range:?}",
            s.key
        );
        let mut texts = vec![s.example];
        if let Absent::Default(d) = s.absent {
            texts.push(d);
        }
        for text in texts {
            let x = match s.kind.parse(text) {
                Ok(Value::Number(x)) => x,
                Ok(Value::Count(n)) => n as f64,
                other => panic!("{}: `{text}` gives {other:?}", s.key),
            };
            assert!(
                range.check(x).is_ok(),
                "{}: `{text}` outside {range:?}",
                s.key
            );
        }
    }
}

#[test]
fn values_outside_a_rows_range_are_refused_by_resolve_naming_the_key() {
    let base = base();
    for s in SPECS {
        let (Kind::Number(range) | Kind::Count(range)) = s.kind else {
            continue;
        };
        // Just outside each end (a count's lower end, 1, is refused by parsing already).
        let below = range.min.abs().max(1.0).mul_add(-0.5, range.min);
        let above = range.max.abs().max(1.0).mul_add(0.5, range.max);
        for outside in [below, above] {
            let text = match s.kind {
                Kind::Count(_) if outside < 1.0 => continue,
                Kind::Count(_) => format!("{}", outside.ceil()),
                _ => format!("{outside:e}"),
            };
            let refused = with(&base, s.key, &text).resolve();
            assert!(
                matches!(&refused, Err(SettingsError::BadValue { key, .. }) if key == s.key),
                "{} = {text}: {refused:?}",
                s.key
            );
        }
    }
}

#[test]
fn absurd_sample_rates_and_window_counts_are_refused_with_their_range() {
    // The probe of issue 14: each of these failed deep in the calibration without a field.
    let base = base();
    for (key, text) in [
        ("sample_rate_hz", "1e-300"),
        ("sample_rate_hz", "1e300"),
        ("windows", "1000000000"),
    ] {
        match with(&base, key, text).resolve() {
            Err(SettingsError::BadValue {
                key: k,
                value,
                expected,
            }) => {
                assert_eq!(k, key);
                assert!(value.len() < 20, "{value}");
                assert!(expected.starts_with("expected a number from"), "{expected}");
            }
            other => panic!("{key} = {text}: {other:?}"),
        }
    }
    let within = Range {
        min: 0.0,
        max: 100.0,
    };
    assert!(within.check(0.0).is_ok() && within.check(100.0).is_ok());
    assert_eq!(
        within.check(100.5),
        Err("expected a number from 0 to 100".to_string())
    );
    assert!(within.check(f64::NAN).is_err());
    assert_eq!(crate::settings::number_text(1e300), "1e300");
    assert_eq!(crate::settings::number_text(1e-300), "1e-300");
    assert_eq!(crate::settings::number_text(0.25), "0.25");
}

#[test]
fn to_pairs_keeps_the_text_forms_stored_calibrations_were_keyed_with() {
    // Pinned: these texts are inside the idempotency keys and the stored settings of
    // calibrations made before the table existed; they must not change.
    let s = settings(&[
        ("volts_per_count", "3.0517578125e-4"),
        ("bead_diameter_um", "1.0"),
        ("temperature_c", " 25 "),
        ("units", "volts"),
        ("format", "I16"),
        ("channels", "+3"),
        ("time_tolerance", "1e-3"),
        ("detector_filter", "FIT"),
        ("hydrodynamics", "yes"),
        ("detrend", "Linear"),
        ("axial_axes", " z , y "),
        ("precision_percent", "2.50"),
        ("height_um", "0.5e1"),
    ]);
    let expected = [
        ("axial_axes", "z,y"),
        ("bead_diameter_um", "1"),
        ("channels", "3"),
        ("detector_filter", "fit:8000:0.4"),
        ("detrend", "linear"),
        ("format", "raw-i16"),
        ("height_um", "5"),
        ("hydrodynamics", "true"),
        ("precision_percent", "2.5"),
        ("temperature_c", "25"),
        ("time_tolerance", "0.001"),
        ("units", "V"),
        ("volts_per_count", "0.00030517578125"),
    ];
    let pairs = s.to_pairs();
    let pairs: Vec<(&str, &str)> = pairs.iter().map(|(k, v)| (*k, v.as_str())).collect();
    assert_eq!(pairs, expected);
    let fixed = settings(&[("detector_filter", "12000:1")]).to_pairs();
    assert_eq!(fixed, [("detector_filter", "12000:1".to_string())]);
    let fitted = settings(&[("detector_filter", "fit:5000.0:0.5")]).to_pairs();
    assert_eq!(fitted, [("detector_filter", "fit:5000:0.5".to_string())]);
}

#[test]
fn blank_values_leave_a_setting_unset_and_unknown_keys_are_named() {
    let s = settings(&[("bead_diameter_um", "  "), ("format", "")]);
    assert_eq!(s, Settings::default());
    let mut s = Settings::default();
    let err = s.apply("bead_size", "1").expect_err("unknown key");
    assert_eq!(
        err.to_string(),
        format!(
            "unknown setting `bead_size`; known settings are: {}",
            KEYS.join(", ")
        )
    );
    let err = s.apply("temperature_c", "warm").expect_err("bad value");
    assert_eq!(
        err.to_string(),
        "setting `temperature_c` = `warm` is not valid: expected a finite number"
    );
    let err = s.apply("format", "xlsx").expect_err("bad choice");
    assert_eq!(
        err.to_string(),
        "setting `format` = `xlsx` is not valid: expected csv, tsv, columns, raw-f32, \
         raw-f64, raw-i16, npy or npz"
    );
}

#[test]
fn resolve_converts_to_si_units() {
    let s = settings(&[
        ("bead_diameter_um", "2"),
        ("bead_diameter_se_um", "0.1"),
        ("temperature_c", "22"),
        ("viscosity_mpa_s", "0.89"),
        ("height_um", "4"),
        ("precision_percent", "2"),
    ]);
    let (_, conditions, analysis) = s.resolve().expect("resolves");
    assert_eq!(conditions.bead_diameter_m, 2.0 * 1e-6);
    assert_eq!(conditions.bead_diameter_se_m, 0.1 * 1e-6);
    assert_eq!(conditions.viscosity_pa_s, Some(0.89 * 1e-3));
    assert_eq!(conditions.height_m, Some(4.0 * 1e-6));
    assert_eq!(analysis.target_relative_precision, 2.0 / 100.0);
    let missing = settings(&[("bead_diameter_um", "1")]).resolve();
    assert_eq!(
        missing.map(|_| ()).map_err(|e| e.to_string()),
        Err(
            "setting `temperature_c` is required: give the sample temperature in degrees \
             Celsius (e.g. 25)"
                .to_string()
        )
    );
}

#[test]
fn effective_pairs_add_every_stated_default_that_was_not_given() {
    let s = settings(&[("bead_diameter_um", "1"), ("hydrodynamics", "off")]);
    let pairs = s.effective_pairs();
    let get = |key: &str| {
        pairs
            .iter()
            .find(|(k, _)| *k == key)
            .map(|(_, v)| v.as_str())
    };
    assert_eq!(get("hydrodynamics"), Some("false"), "given values win");
    assert_eq!(get("bead_material"), Some("polystyrene"));
    assert_eq!(get("detrend"), Some("mean"));
    assert_eq!(get("bead_diameter_um"), Some("1"));
    // Rows without a single default value stay out (the viscosity is water's unless given).
    assert_eq!(get("viscosity_mpa_s"), None);
    let sorted = pairs.windows(2).all(|w| w[0].0 < w[1].0);
    assert!(sorted, "{pairs:?}");
    let n_defaults = SPECS
        .iter()
        .filter(|s| matches!(s.absent, Absent::Default(_)))
        .count();
    assert_eq!(pairs.len(), n_defaults + 1, "{pairs:?}");
}

#[test]
fn frequency_dependent_drag_is_on_unless_turned_off() {
    let base = [("bead_diameter_um", "1"), ("temperature_c", "25")];
    let resolved = |extra: &[(&str, &str)]| {
        let mut all = base.to_vec();
        all.extend_from_slice(extra);
        settings(&all).resolve().expect("resolves").2.hydrodynamics
    };
    assert!(resolved(&[]));
    assert!(resolved(&[("hydrodynamics", "on")]));
    assert!(!resolved(&[("hydrodynamics", "off")]));
}

#[test]
fn a_given_bead_density_wins_over_the_material_and_the_medium_density_is_passed_on() {
    let conditions = |extra: &[(&str, &str)]| {
        let mut all = vec![("bead_diameter_um", "1"), ("temperature_c", "25")];
        all.extend_from_slice(extra);
        settings(&all).resolve().expect("resolves").1
    };
    assert_eq!(
        conditions(&[]).bead_density_kg_per_m3,
        crate::drag::POLYSTYRENE_DENSITY_KG_PER_M3
    );
    assert_eq!(
        conditions(&[("bead_material", "silica")]).bead_density_kg_per_m3,
        crate::drag::SILICA_DENSITY_KG_PER_M3
    );
    let both = conditions(&[
        ("bead_material", "silica"),
        ("bead_density_kg_per_m3", "1900"),
    ]);
    assert_eq!(both.bead_density_kg_per_m3, 1900.0);
    assert_eq!(conditions(&[]).medium_density_kg_per_m3, None);
    assert_eq!(
        conditions(&[("medium_density_kg_per_m3", "1100")]).medium_density_kg_per_m3,
        Some(1100.0)
    );
}

#[test]
fn an_exposure_longer_than_the_frame_interval_of_a_given_sample_rate_is_refused_naming_it() {
    // A camera's exposure fits within its frame: at most 1 / sample rate (here 1/5000 s).
    let at_5_khz = with(&base(), "sample_rate_hz", "5000");
    let refused = with(&at_5_khz, "exposure_time_s", "0.00021").resolve();
    assert!(
        matches!(&refused, Err(SettingsError::BadValue { key, expected, .. })
            if key == "exposure_time_s" && expected.contains("frame interval")),
        "{refused:?}"
    );
    let (_, _, analysis) = with(&at_5_khz, "exposure_time_s", "0.0002")
        .resolve()
        .expect("an exposure of one frame interval is allowed");
    assert_eq!(analysis.exposure_time_s, Some(0.0002));
    // Without a sample rate here the calibration checks it against the file's own.
    let (_, _, analysis) = with(&base(), "exposure_time_s", "0.01")
        .resolve()
        .expect("checked later");
    assert_eq!(analysis.exposure_time_s, Some(0.01));
}
