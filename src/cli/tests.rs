//! Unit tests of the command-line definition: clap's own consistency checks (no two flags of a
//! subcommand clash, e.g. `upload`'s labels against the flattened run conditions), the parsing
//! of the service subcommands, and the run-setting flags made from the settings table (every
//! row has its flag, parsed as the HTTP field is; the flag names scripts use stay).

use super::{Cli, Command, TokenAction};
use crate::settings::{Flag, SPECS, Settings};
use clap::{CommandFactory, Parser};

#[track_caller]
fn check(args: &[&str]) -> Command {
    match Cli::try_parse_from(args) {
        Ok(cli) => cli.command,
        Err(e) => panic!("{args:?} did not parse: {e}"),
    }
}

#[test]
fn the_cli_definition_passes_clap_debug_assertions() {
    Cli::command().debug_assert();
}

#[test]
fn serve_upload_and_token_parse_their_arguments() {
    match check(&[
        "trapwise",
        "serve",
        "--bind",
        "0.0.0.0:9000",
        "--data-dir",
        "/srv/tw",
    ]) {
        Command::Serve(a) => {
            assert_eq!(
                a.bind.map(|b| b.to_string()).as_deref(),
                Some("0.0.0.0:9000")
            );
            assert_eq!(a.data_dir.as_deref(), Some(std::path::Path::new("/srv/tw")));
        }
        other => panic!("parsed as {other:?}"),
    }
    match check(&[
        "trapwise",
        "upload",
        "run.csv",
        "--server",
        "http://h:1",
        "--instrument",
        "a",
        "--trap",
        "b",
        "--bead-diameter",
        "1",
        "--temperature",
        "25",
        "--axes",
        "x,y",
    ]) {
        Command::Upload(a) => {
            assert_eq!((a.instrument.as_str(), a.trap.as_str()), ("a", "b"));
            assert_eq!(a.axes.as_deref(), Some("x,y"));
            assert_eq!(
                a.run.settings().to_pairs(),
                [
                    ("bead_diameter_um", "1".to_string()),
                    ("temperature_c", "25".to_string())
                ]
            );
        }
        other => panic!("parsed as {other:?}"),
    }
    match check(&["trapwise", "token", "create", "--lab", "optics"]) {
        Command::Token(a) => {
            assert!(matches!(a.action, TokenAction::Create { ref lab } if lab == "optics"))
        }
        other => panic!("parsed as {other:?}"),
    }
}

#[test]
fn upload_without_instrument_or_trap_is_a_usage_error() {
    let missing = Cli::try_parse_from([
        "trapwise",
        "upload",
        "run.csv",
        "--server",
        "http://h:1",
        "--bead-diameter",
        "1",
        "--temperature",
        "25",
    ]);
    assert!(missing.is_err());
}

/// The settings `calibrate run.csv ARGS` parses to.
fn calibrate_settings(args: &[&str]) -> Result<Settings, clap::Error> {
    let mut argv = vec!["trapwise", "calibrate", "run.csv"];
    argv.extend_from_slice(args);
    match Cli::try_parse_from(argv)?.command {
        Command::Calibrate(a) => Ok(a.run.settings().clone()),
        other => panic!("parsed as {other:?}"),
    }
}

#[test]
fn every_setting_has_its_flag_and_parses_as_the_http_field_does() {
    let required: Vec<(&str, &str, &str)> = SPECS
        .iter()
        .filter(|s| s.required())
        .map(|s| (s.key, s.flag.long(), s.example))
        .collect();
    for spec in SPECS {
        // The required flags at their examples, then this row's flag (its example, or bare).
        let mut args: Vec<String> = Vec::new();
        let mut fields: Vec<(&str, &str)> = Vec::new();
        for (key, long, example) in &required {
            if *key != spec.key {
                args.extend([format!("--{long}"), example.to_string()]);
                fields.push((key, example));
            }
        }
        match spec.flag {
            Flag::Value { long, .. } => {
                args.extend([format!("--{long}"), spec.example.to_string()]);
                fields.push((spec.key, spec.example));
            }
            Flag::Switch { long, sets } => {
                args.push(format!("--{long}"));
                fields.push((spec.key, sets));
            }
        }
        let argv: Vec<&str> = args.iter().map(String::as_str).collect();
        let parsed = calibrate_settings(&argv)
            .unwrap_or_else(|e| panic!("{}: {argv:?} does not parse: {e}", spec.key));
        let mut expected = Settings::default();
        for (k, v) in fields {
            expected.apply(k, v).expect("the table's own texts");
        }
        assert_eq!(parsed, expected, "{}: {argv:?}", spec.key);
        assert!(parsed.get(spec.key).is_some(), "{}: not set", spec.key);
    }
}

#[test]
fn the_flag_names_of_earlier_versions_still_parse() {
    // The flags `calibrate` and `upload` had before the settings table, as README examples and
    // instrument scripts use them.
    let args = [
        "--bead-diameter",
        "1",
        "--bead-diameter-se",
        "0.01",
        "--temperature",
        "25",
        "--temperature-se",
        "0.1",
        "--sample-rate",
        "20000",
        "--viscosity",
        "0.9",
        "--height",
        "5",
        "--height-se",
        "0.1",
        "--bead-density",
        "1050",
        "--units",
        "nm",
        "--format",
        "csv",
        "--channels",
        "2",
        "--volts-per-count",
        "0.001",
        "--fit-min",
        "20",
        "--fit-max",
        "4000",
        "--windows",
        "2",
        "--detector-filter",
        "none",
        "--hydrodynamics",
        "--linear-detrend",
        "--axial-axes",
        "z",
        "--precision",
        "3",
    ];
    let parsed = calibrate_settings(&args).unwrap_or_else(|e| panic!("{e}"));
    assert_eq!(parsed.to_pairs().len(), 21);
    assert_eq!(
        parsed.get("detrend").map(|v| v.text()),
        Some("linear".into())
    );
    assert_eq!(
        parsed.get("hydrodynamics").map(|v| v.text()),
        Some("true".into())
    );
}

#[test]
fn a_malformed_value_is_a_usage_error_naming_the_flag_and_what_it_takes() {
    for (flag, value, expected) in [
        ("--units", "mm", "expected nm or V"),
        ("--windows", "0", "expected a positive whole number"),
        ("--viscosity", "thick", "expected a finite number"),
    ] {
        let err = calibrate_settings(&["--bead-diameter", "1", "--temperature", "25", flag, value])
            .expect_err("refused");
        assert_eq!(
            err.kind(),
            clap::error::ErrorKind::ValueValidation,
            "{flag}"
        );
        let text = err.to_string();
        assert!(text.contains(flag) && text.contains(expected), "{text}");
    }
    let missing = calibrate_settings(&["--bead-diameter", "1"]).expect_err("refused");
    assert_eq!(
        missing.kind(),
        clap::error::ErrorKind::MissingRequiredArgument
    );
    // A value out of range parses here; `resolve` refuses it, as for an HTTP field.
    let negative =
        calibrate_settings(&["--bead-diameter", "-1", "--temperature", "25"]).expect("parses");
    assert!(negative.resolve().is_err());
}

#[test]
fn the_help_of_each_setting_flag_comes_from_the_table() {
    let mut cli = Cli::command();
    let calibrate = cli
        .find_subcommand_mut("calibrate")
        .expect("calibrate subcommand");
    let help = calibrate.render_long_help().to_string();
    for spec in SPECS {
        assert!(
            help.contains(&format!("--{}", spec.flag.long())),
            "{}: no flag in the help",
            spec.key
        );
        assert!(help.contains(spec.help), "{}: help text missing", spec.key);
    }
}
