//! The `trapwise` binary end to end: simulate then calibrate recovers the truth, every kind of
//! bad input gets a message naming the place and the documented exit code, and the messages are
//! pinned by a snapshot (set TRAPWISE_UPDATE_SNAPSHOTS=1 to rewrite it after a deliberate change).

use crate::support::check_snapshot;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};

fn bin() -> Command {
    Command::new(env!("CARGO_BIN_EXE_trapwise"))
}

fn run(args: &[&str], dir: &Path) -> Output {
    bin()
        .args(args)
        .current_dir(dir)
        .output()
        .expect("the binary runs")
}

fn text(b: &[u8]) -> String {
    String::from_utf8_lossy(b).into_owned()
}

fn simulate(dir: &Path, name: &str, extra: &[&str]) -> PathBuf {
    let mut args = vec!["simulate", "-o", name];
    args.extend_from_slice(extra);
    for (flag, default) in [("--duration", "1"), ("--sample-rate", "20000")] {
        if !extra.contains(&flag) {
            args.extend_from_slice(&[flag, default]);
        }
    }
    let out = run(&args, dir);
    assert!(
        out.status.success(),
        "simulate failed: {}",
        text(&out.stderr)
    );
    dir.join(name)
}

fn json(out: &Output) -> serde_json::Value {
    assert!(out.status.success(), "stderr: {}", text(&out.stderr));
    serde_json::from_slice(&out.stdout).expect("JSON on stdout")
}

fn truth(path: &Path) -> serde_json::Value {
    let mut p = path.as_os_str().to_owned();
    p.push(".truth.json");
    serde_json::from_slice(&std::fs::read(PathBuf::from(p)).expect("truth file")).expect("JSON")
}

#[test]
fn simulated_recordings_in_every_format_calibrate_to_their_truth() {
    // The truth comes from the exact simulation; each estimate must lie within 4 of its
    // standard errors of it (a loose bound so the test is stable, not a statistical claim: the
    // statistical tests live in the library's unit tests).
    let dir = tempfile::tempdir().expect("temp dir");
    for (name, extra, cal_extra) in [
        ("a.csv", vec!["--stiffness", "0.05,0.03"], vec![]),
        ("a.tsv", vec!["--stiffness", "0.05"], vec![]),
        (
            "a.txt",
            vec![],
            vec!["--sample-rate", "20000", "--units", "nm"],
        ),
        (
            "a.npy",
            vec!["--units", "V"],
            vec!["--sample-rate", "20000", "--units", "V"],
        ),
        (
            "a.f32",
            vec!["--units", "V"],
            vec!["--sample-rate", "20000", "--units", "V"],
        ),
        (
            "a.f64",
            vec![],
            vec!["--sample-rate", "20000", "--units", "nm"],
        ),
        (
            "a.i16",
            vec!["--units", "V", "--volts-per-count", "0.0001"],
            vec!["--sample-rate", "20000", "--volts-per-count", "0.0001"],
        ),
    ] {
        let path = simulate(dir.path(), name, &extra);
        let mut args = vec![
            "calibrate",
            name,
            "--bead-diameter",
            "1",
            "--temperature",
            "25",
            "--json",
        ];
        args.extend_from_slice(&cal_extra);
        let r = json(&run(&args, dir.path()));
        let t = truth(&path);
        for (axis, ta) in r["axes"]
            .as_array()
            .expect("axes")
            .iter()
            .zip(t["axes"].as_array().expect("axes"))
        {
            let k_true = ta["stiffness_pn_per_nm"].as_f64().expect("number");
            for m in ["psd", "acf", "consensus"] {
                let e = &axis["stiffness_pn_per_nm"][m];
                let (v, se) = (
                    e["value"].as_f64().expect("v"),
                    e["se"].as_f64().expect("se"),
                );
                assert!(
                    (v - k_true).abs() < 4.0 * se,
                    "{name} {m}: {v} ± {se} vs {k_true}"
                );
            }
            if let Some(beta) = ta["sensitivity_nm_per_v"].as_f64() {
                let e = &axis["sensitivity_nm_per_v"];
                let (v, se) = (
                    e["value"].as_f64().expect("v"),
                    e["se"].as_f64().expect("se"),
                );
                // i16 quantisation adds white noise; allow it a little more room.
                assert!(
                    (v - beta).abs() < 5.0 * se + 0.002 * beta,
                    "{name} beta {v} ± {se}"
                );
            }
        }
    }
}

#[test]
fn summary_table_lists_each_axis_with_units() {
    let dir = tempfile::tempdir().expect("temp dir");
    simulate(dir.path(), "s.csv", &["--stiffness", "0.05,0.04"]);
    let out = run(
        &[
            "calibrate",
            "s.csv",
            "--bead-diameter",
            "1",
            "--temperature",
            "25",
        ],
        dir.path(),
    );
    assert!(out.status.success());
    let s = text(&out.stdout);
    assert!(s.contains("kappa psd (pN/nm)"), "{s}");
    assert!(
        s.lines().any(|l| l.starts_with("x ")) && s.lines().any(|l| l.starts_with("y ")),
        "{s}"
    );
}

#[test]
fn strict_mode_fails_a_calibration_whose_methods_disagree() {
    // A wrong viscosity scales the drag, and so the spectral and autocorrelation stiffness, but
    // not equipartition (nanometre data): the methods must then disagree.
    let dir = tempfile::tempdir().expect("temp dir");
    simulate(dir.path(), "w.csv", &["--duration", "2"]);
    let args = [
        "calibrate",
        "w.csv",
        "--bead-diameter",
        "1",
        "--temperature",
        "25",
        // The record is of the plain Ornstein-Uhlenbeck process (no fluid memory).
        "--hydrodynamics",
        "off",
        "--viscosity",
        "1.3",
    ];
    let relaxed = run(&args, dir.path());
    assert_eq!(relaxed.status.code(), Some(0));
    let summary = text(&relaxed.stdout);
    assert!(summary.contains("inconsistent"), "{summary}");
    assert!(summary.contains("diffusion-mismatch"), "{summary}");
    let mut strict = args.to_vec();
    strict.push("--strict");
    let out = run(&strict, dir.path());
    assert_eq!(out.status.code(), Some(5), "{}", text(&out.stdout));
    let good = run(&[&args[..8], &["--strict"]].concat(), dir.path());
    assert_eq!(good.status.code(), Some(0), "{}", text(&good.stdout));
}

/// A bad input: file name, its bytes, extra arguments, expected exit code, and the fragments
/// the message must contain (what went wrong and where).
struct Bad {
    file: &'static str,
    bytes: Vec<u8>,
    args: &'static [&'static str],
    code: i32,
    fragments: &'static [&'static str],
}

fn csv_with(n: usize, f: impl Fn(usize) -> String) -> Vec<u8> {
    let mut s = String::from("time_s,x_nm\n");
    for i in 0..n {
        s.push_str(&f(i));
        s.push('\n');
    }
    s.into_bytes()
}

fn good_row(i: usize) -> String {
    format!("{},{}", i as f64 / 10_000.0, ((i * 7919) % 13) as f64 - 6.0)
}

fn bad_inputs() -> Vec<Bad> {
    let npy_header = |descr: &str| {
        let dict = format!("{{'descr': '{descr}', 'fortran_order': False, 'shape': (2000,), }}");
        let mut h = dict.into_bytes();
        while (10 + h.len() + 1) % 64 != 0 {
            h.push(b' ');
        }
        h.push(b'\n');
        let mut out = b"\x93NUMPY\x01\x00".to_vec();
        out.extend_from_slice(&(h.len() as u16).to_le_bytes());
        out.extend_from_slice(&h);
        out
    };
    let mut complex = npy_header("<c16");
    complex.extend(vec![0u8; 2000 * 16]);
    vec![
        Bad {
            file: "empty.csv",
            bytes: vec![],
            args: &[],
            code: 3,
            fragments: &["empty.csv", "empty"],
        },
        Bad {
            file: "cell.csv",
            bytes: csv_with(2000, |i| {
                if i == 41 {
                    "0.0041,abc".into()
                } else {
                    good_row(i)
                }
            }),
            args: &[],
            code: 3,
            fragments: &["cell.csv", "line 43", "column 2"],
        },
        Bad {
            file: "nan.csv",
            bytes: csv_with(2000, |i| {
                if i == 9 {
                    "0.0009,NaN".into()
                } else {
                    good_row(i)
                }
            }),
            args: &[],
            code: 3,
            fragments: &["nan.csv", "line 11"],
        },
        Bad {
            file: "ragged.csv",
            bytes: csv_with(2000, |i| {
                if i == 99 {
                    "0.0099".into()
                } else {
                    good_row(i)
                }
            }),
            args: &[],
            code: 3,
            fragments: &["ragged.csv", "line 101"],
        },
        Bad {
            file: "short.csv",
            bytes: csv_with(100, good_row),
            args: &[],
            code: 3,
            fragments: &["short.csv", "1024"],
        },
        Bad {
            file: "backwards.csv",
            bytes: csv_with(2000, |i| {
                if i == 500 {
                    "0.0001,1".into()
                } else {
                    good_row(i)
                }
            }),
            args: &[],
            code: 3,
            fragments: &["backwards.csv", "line 502"],
        },
        Bad {
            file: "jitter.csv",
            bytes: csv_with(2000, |i| {
                if i == 700 {
                    "0.07003,1".into()
                } else {
                    good_row(i)
                }
            }),
            args: &[],
            code: 3,
            fragments: &["jitter.csv", "line 702"],
        },
        Bad {
            file: "norate.f64",
            bytes: vec![0u8; 8 * 2000],
            args: &["--units", "nm"],
            code: 3,
            fragments: &["norate.f64", "sample rate"],
        },
        Bad {
            file: "zero.f64",
            bytes: vec![0u8; 8 * 2000],
            args: &["--units", "nm", "--sample-rate", "0"],
            code: 3,
            // Refused by the settings table's range, naming the setting.
            fragments: &["sample_rate_hz", "expected a number from 1 to"],
        },
        Bad {
            file: "negative.f64",
            bytes: vec![0u8; 8 * 2000],
            args: &["--units", "nm", "--sample-rate", "-5"],
            code: 3,
            fragments: &["sample_rate_hz", "-5"],
        },
        Bad {
            file: "conflict.csv",
            bytes: csv_with(2000, good_row),
            args: &["--sample-rate", "20000"],
            code: 3,
            fragments: &["conflict.csv", "20000", "10000"],
        },
        Bad {
            file: "truncated.f32",
            bytes: vec![0u8; 4 * 2000 + 3],
            args: &["--units", "V", "--sample-rate", "10000"],
            code: 3,
            fragments: &["truncated.f32", "8000"],
        },
        Bad {
            file: "complex.npy",
            bytes: complex,
            args: &["--sample-rate", "10000", "--units", "nm"],
            code: 3,
            fragments: &["complex.npy", "<c16"],
        },
        Bad {
            file: "flat.csv",
            bytes: csv_with(4096, |i| format!("{},1.0", i as f64 / 10_000.0)),
            args: &[],
            code: 4,
            fragments: &["axis `x`"],
        },
        Bad {
            file: "missing.csv",
            bytes: Vec::new(),
            args: &["--bead-diameter", "-1"],
            code: 3,
            fragments: &["bead_diameter_um"],
        },
    ]
}

#[test]
fn every_kind_of_bad_input_gets_a_located_message_and_its_exit_code() {
    let dir = tempfile::tempdir().expect("temp dir");
    let mut snapshot = String::new();
    for bad in bad_inputs() {
        if bad.file != "missing.csv" {
            std::fs::write(dir.path().join(bad.file), &bad.bytes).expect("write");
        }
        let mut args = vec!["calibrate", bad.file];
        // The last case sets its own (invalid) diameter; the others take a valid one.
        if !bad.args.contains(&"--bead-diameter") {
            args.extend_from_slice(&["--bead-diameter", "1"]);
        }
        args.extend_from_slice(&["--temperature", "25"]);
        args.extend_from_slice(bad.args);
        let out = run(&args, dir.path());
        let err = text(&out.stderr);
        assert_eq!(out.status.code(), Some(bad.code), "{}: {err}", bad.file);
        assert!(err.starts_with("error: "), "{}: {err}", bad.file);
        for f in bad.fragments {
            assert!(err.contains(f), "{}: message lacks `{f}`: {err}", bad.file);
        }
        assert!(out.stdout.is_empty(), "{}: printed a result", bad.file);
        snapshot.push_str(&format!(
            "{} -> exit {}\n{}\n",
            bad.file,
            bad.code,
            err.trim_end()
        ));
    }
    check_snapshot("cli_errors.txt", &snapshot);
}

#[test]
fn missing_required_flags_are_usage_errors() {
    let dir = tempfile::tempdir().expect("temp dir");
    let out = run(&["calibrate", "x.csv"], dir.path());
    assert_eq!(out.status.code(), Some(2));
    assert!(text(&out.stderr).contains("--bead-diameter"));
}

#[test]
fn command_line_definition_is_consistent() {
    use clap::CommandFactory;
    trapwise::cli::Cli::command().debug_assert();
}
