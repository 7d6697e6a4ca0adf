//! Unit tests of the ingest layer: format names and detection, each text, binary and npy rule,
//! every validation error, fixtures written by numpy, encode/parse round trips, and a seeded
//! random-input loop showing that no input makes `parse` panic.
//!
//! Outside truth: the `.npy`, CSV and TSV fixtures in tests/data/ingest/ were written by numpy
//! 2.4.6 with tests/data/ingest/make_npy_fixtures.py, which also wrote the expected values in
//! expected.json (computed by numpy from the same arrays, or by numpy.loadtxt from the text).
//! Text round trips rely on Rust's shortest round-trip float formatting and correctly rounded
//! parsing, so they are exact; f32 round trips are bounded by the binary32 rounding error 2^-24
//! (IEEE Std 754-2019, round to nearest); i16 round trips by half a count.

use super::*;
use crate::recording::{AxisTrace, PositionUnit, Recording};

// ---------------------------------------------------------------------------------------------
// Helpers
// ---------------------------------------------------------------------------------------------

/// The layout of a plain CSV: commas between cells, decimal points.
const COMMA: layout::Layout = layout::Layout {
    sep: text::Sep::Comma,
    decimal_comma: false,
};

/// A small xorshift64 generator (Marsaglia, "Xorshift RNGs", J. Stat. Softw. 8(14), 2003;
/// citation and the shift triple 13, 7, 17 from memory, unverified; any full-period triple
/// would do for this use).
struct XorShift(u64);

impl XorShift {
    fn next_u64(&mut self) -> u64 {
        let mut x = self.0;
        x ^= x << 13;
        x ^= x >> 7;
        x ^= x << 17;
        self.0 = x;
        x
    }

    /// Uniform in [-1, 1).
    fn next_signed(&mut self) -> f64 {
        (self.next_u64() >> 11) as f64 / (1u64 << 52) as f64 - 1.0
    }

    fn below(&mut self, n: usize) -> usize {
        (self.next_u64() % n.max(1) as u64) as usize
    }
}

/// A recording of `n_samples` seeded random samples per axis (scaled by `scale`).
fn recording(
    n_axes: usize,
    n_samples: usize,
    sample_rate_hz: f64,
    unit: PositionUnit,
    scale: f64,
) -> Recording {
    let mut rng = XorShift(0x9E37_79B9_7F4A_7C15 ^ ((n_axes as u64) << 32) ^ n_samples as u64);
    let names = ["x", "y", "z"];
    Recording {
        sample_rate_hz,
        unit,
        axes: (0..n_axes)
            .map(|a| AxisTrace {
                name: names[a].to_string(),
                samples: (0..n_samples).map(|_| scale * rng.next_signed()).collect(),
            })
            .collect(),
    }
}

/// A text table: an optional preamble, then `n_rows` rows made by `row`.
fn table(preamble: &str, n_rows: usize, row: impl Fn(usize) -> String) -> Vec<u8> {
    let mut out = String::from(preamble);
    for k in 0..n_rows {
        out.push_str(&row(k));
        out.push('\n');
    }
    out.into_bytes()
}

/// A CSV with header `time_s,x_nm` at 65536 Hz (a power of two, so the time stamps k/65536 are
/// exact binary fractions) with `n_rows` rows.
fn simple_csv(n_rows: usize) -> Vec<u8> {
    table("time_s,x_nm\n", n_rows, |k| {
        format!("{},{}", k as f64 / 65536.0, (k % 7) as f64 - 3.0)
    })
}

fn options() -> IngestOptions {
    IngestOptions::default()
}

fn with_rate(sample_rate_hz: f64) -> IngestOptions {
    IngestOptions {
        sample_rate_hz: Some(sample_rate_hz),
        ..IngestOptions::default()
    }
}

fn with_rate_unit(sample_rate_hz: f64, unit: PositionUnit) -> IngestOptions {
    IngestOptions {
        sample_rate_hz: Some(sample_rate_hz),
        unit: Some(unit),
        ..IngestOptions::default()
    }
}

/// Asserts that parsing fails with `kind` and that the message names every fragment.
#[track_caller]
fn check_err(result: Result<Recording, IngestError>, kind: &str, fragments: &[&str]) {
    match result {
        Ok(r) => panic!(
            "expected error {kind}, got a recording of {} samples",
            r.n_samples()
        ),
        Err(e) => {
            let message = e.to_string();
            assert_eq!(e.kind(), kind, "message: {message}");
            for fragment in fragments {
                assert!(
                    message.contains(fragment),
                    "message {message:?} lacks {fragment:?}"
                );
            }
            check_message_style(&e);
        }
    }
}

/// The message rules: lower-case code, no final period, non-empty hint after a semicolon.
#[track_caller]
fn check_message_style(e: &IngestError) {
    let message = e.to_string();
    assert!(!message.ends_with('.'), "final period: {message}");
    assert!(message.contains("; "), "no hint: {message}");
    assert!(
        e.kind()
            .bytes()
            .all(|b| b.is_ascii_lowercase() || b.is_ascii_digit() || b == b'-'),
        "kind not kebab-case: {}",
        e.kind()
    );
}

/// Asserts that parsing succeeds and returns the recording.
#[track_caller]
fn check_ok(result: Result<Recording, IngestError>) -> Recording {
    match result {
        Ok(r) => r,
        Err(e) => panic!("expected a recording, got {} ({})", e, e.kind()),
    }
}

// ---------------------------------------------------------------------------------------------
// Format names and detection
// ---------------------------------------------------------------------------------------------

#[test]
fn format_names_round_trip_through_parse_name() {
    for format in Format::ALL {
        assert_eq!(Format::parse_name(format.name()), Some(format));
        assert_eq!(
            Format::parse_name(&format!(" {} ", format.name().to_uppercase())),
            Some(format)
        );
    }
}

#[test]
fn format_aliases_and_unknown_names() {
    #[track_caller]
    fn check(name: &str, expected: Option<Format>) {
        assert_eq!(Format::parse_name(name), expected, "{name}");
    }
    check("f32", Some(Format::RawF32));
    check("F64", Some(Format::RawF64));
    check("i16", Some(Format::RawI16));
    check("raw", None);
    check("", None);
    check("json", None);
}

#[test]
fn extension_of_each_format_detects_back_to_it() {
    for format in Format::ALL {
        let rec = recording(2, 1100, 1000.0, PositionUnit::Volt, 0.5);
        let bytes = encode(&rec, format, Some(1e-4)).expect("encodes");
        let name = format!("rec.{}", format.extension());
        assert_eq!(detect_format(&name, &bytes), Ok(format), "{name}");
    }
}

#[test]
fn detection_by_extension_magic_and_content() {
    let header_csv = b"time_s,x_nm\n0,1\n".as_slice();
    let numeric_csv = b"0.5,1\n0.25,2\n".as_slice();
    let header_tsv = b"x_nm\ty_nm\n1\t2\n".as_slice();
    let numeric_spaces = b"# comment\n1 2 3\n4 5 6\n".as_slice();
    let npy = b"\x93NUMPY\x01\x00rest".as_slice();
    let binary = [0u8, 1, 2, 250, 251, 7, 0, 0, 0, 9].as_slice();
    #[track_caller]
    fn check(name: &str, bytes: &[u8], expected: Result<Format, &str>) {
        let got = detect_format(name, bytes).map_err(|e| e.kind());
        assert_eq!(got, expected, "{name}");
    }
    check("a.csv", header_csv, Ok(Format::Csv));
    check("A.CSV", header_csv, Ok(Format::Csv));
    check(r"C:\data\run.v2\REC.CSV", header_csv, Ok(Format::Csv));
    check("a.csv", numeric_csv, Ok(Format::Columns));
    check("a.tsv", header_tsv, Ok(Format::Tsv));
    check("a.txt", header_csv, Ok(Format::Csv));
    check("a.txt", header_tsv, Ok(Format::Tsv));
    check("a.dat", numeric_spaces, Ok(Format::Columns));
    check("a.txt", binary, Ok(Format::Columns));
    check("recording", header_tsv, Ok(Format::Tsv));
    check("run.v2/recording", numeric_spaces, Ok(Format::Columns));
    check("a.npy", b"", Ok(Format::Npy));
    check("a.bin", npy, Ok(Format::Npy));
    check("a.csv", npy, Ok(Format::Npy));
    check("a.f32", binary, Ok(Format::RawF32));
    check("a.f64", binary, Ok(Format::RawF64));
    check("a.i16", binary, Ok(Format::RawI16));
    check("a.bin", binary, Err("unknown-format"));
    check("a.bin", header_csv, Err("unknown-format"));
    check("a.xyz", binary, Err("unknown-format"));
    check("recording", binary, Err("unknown-format"));
    check("recording", b"", Err("empty-file"));
}

#[test]
fn unknown_format_is_the_unsupported_kind_and_asks_for_a_format() {
    let e = detect_format("rec.bin", &[1, 2, 3]).expect_err("bin is ambiguous");
    assert!(e.is_unsupported_format());
    let message = e.to_string();
    assert!(message.starts_with("rec.bin: "), "{message}");
    assert!(message.contains("give the format explicitly"), "{message}");
    check_message_style(&e);
}

#[test]
fn explicit_format_overrides_detection() {
    let bytes = table("", 1100, |k| format!("{k}"));
    let opts = IngestOptions {
        format: Some(Format::Columns),
        ..with_rate_unit(100.0, PositionUnit::Nanometre)
    };
    let rec = check_ok(parse("odd.bin", &bytes, &opts));
    assert_eq!(rec.n_samples(), 1100);
    // Detection would call a numeric .csv headerless columns; forcing csv demands a header.
    let forced = IngestOptions {
        format: Some(Format::Csv),
        ..opts
    };
    check_err(
        parse("numbers.csv", &bytes, &forced),
        "numeric-header",
        &["line 1", "csv format needs a header"],
    );
}

// ---------------------------------------------------------------------------------------------
// CSV and TSV
// ---------------------------------------------------------------------------------------------

#[test]
fn csv_time_column_gives_rate_n_minus_one_over_span() {
    // Sample rate (n - 1)/(t_last - t_first) (common practice); with t_k = k/65536 exactly, the
    // rate is exactly 65536 Hz.
    let rec = check_ok(parse("a.csv", &simple_csv(1500), &options()));
    assert_eq!(rec.sample_rate_hz, 65536.0);
    assert_eq!(rec.unit, PositionUnit::Nanometre);
    assert_eq!(rec.axes.len(), 1);
    assert_eq!(rec.axes[0].name, "x");
    assert_eq!(rec.n_samples(), 1500);
    let expected: Vec<f64> = (0..1500).map(|k| (k % 7) as f64 - 3.0).collect();
    assert_eq!(rec.axes[0].samples, expected);
}

#[test]
fn csv_time_offset_does_not_change_rate() {
    let bytes = table("t,x_V\n", 1200, |k| {
        format!("{},{}", 1000.0 + k as f64 / 1024.0, k)
    });
    let rec = check_ok(parse("a.csv", &bytes, &options()));
    // t_k = 1000 + k/1024 is exact in binary, so the rate is exactly 1024 Hz.
    assert_eq!(rec.sample_rate_hz, 1024.0);
    assert_eq!(rec.unit, PositionUnit::Volt);
}

#[test]
fn csv_header_units_and_axis_names() {
    #[track_caller]
    fn check(label: &str, name: &str, unit: PositionUnit) {
        let bytes = table(&format!("{label}\n"), 1100, |k| format!("{k}"));
        let rec = check_ok(parse("a.csv", &bytes, &with_rate(100.0)));
        assert_eq!(rec.axes[0].name, name, "{label}");
        assert_eq!(rec.unit, unit, "{label}");
    }
    check("x_nm", "x", PositionUnit::Nanometre);
    check("x_V", "x", PositionUnit::Volt);
    check("x_v", "x", PositionUnit::Volt);
    check("x (nm)", "x", PositionUnit::Nanometre);
    check("x [V]", "x", PositionUnit::Volt);
    check("x[nm]", "x", PositionUnit::Nanometre);
    check("\"y_nm\"", "y", PositionUnit::Nanometre);
    check("  bead_2_nm  ", "bead_2", PositionUnit::Nanometre);
    check("QPD sum (V)", "QPD sum", PositionUnit::Volt);
}

#[test]
fn csv_time_header_variants_convert_to_seconds() {
    #[track_caller]
    fn check(label: &str, seconds_per_unit: f64) {
        // Steps of 1/1024 unit: 1024 units per second of the label's unit.
        let bytes = table(&format!("{label},x_nm\n"), 1100, |k| {
            format!("{},{k}", k as f64 / 1024.0)
        });
        let rec = check_ok(parse("a.csv", &bytes, &options()));
        let expected_hz = 1024.0 / seconds_per_unit;
        let relative = (rec.sample_rate_hz - expected_hz).abs() / expected_hz;
        assert!(relative < 1e-12, "{label}: {} Hz", rec.sample_rate_hz);
        assert_eq!(rec.axes.len(), 1, "{label}");
    }
    check("t", 1.0);
    check("T", 1.0);
    check("time", 1.0);
    check("Time_s", 1.0);
    check("t_s", 1.0);
    check("time (s)", 1.0);
    check("time_ms", 1e-3);
    check("t [ms]", 1e-3);
    check("t_us", 1e-6);
    check("time (µs)", 1e-6);
}

#[test]
fn csv_time_column_may_be_anywhere() {
    let bytes = table("x_nm,time_s,y_nm\n", 1100, |k| {
        format!("{k},{},{}", k as f64 / 512.0, -(k as f64))
    });
    let rec = check_ok(parse("a.csv", &bytes, &options()));
    assert_eq!(rec.sample_rate_hz, 512.0);
    assert_eq!(rec.axes.len(), 2);
    assert_eq!(rec.axes[1].name, "y");
    assert_eq!(rec.axes[1].samples[3], -3.0);
}

#[test]
fn csv_three_axes_keep_file_order() {
    let bytes = table("z_nm,x_nm,y_nm\n", 1100, |k| {
        format!("{k},{},{}", 2 * k, 3 * k)
    });
    let rec = check_ok(parse("a.csv", &bytes, &with_rate(10.0)));
    let names: Vec<&str> = rec.axes.iter().map(|a| a.name.as_str()).collect();
    assert_eq!(names, ["z", "x", "y"]);
    assert_eq!(rec.axes[2].samples[10], 30.0);
}

#[test]
fn csv_tolerates_bom_crlf_comments_padding_and_trailing_blank_lines() {
    let mut text = String::from("\u{feff}# exported by our rig\r\n\r\n  # second comment\r\n");
    text.push_str(" time_s , x_nm ,\ty_nm \r\n");
    for k in 0..1100 {
        text.push_str(&format!(
            " {} ,\t{} , {}\r\n",
            k as f64 / 256.0,
            k,
            -(k as f64)
        ));
    }
    text.push_str("\r\n  \n\n");
    let rec = check_ok(parse("a.csv", text.as_bytes(), &options()));
    assert_eq!(rec.sample_rate_hz, 256.0);
    assert_eq!(rec.axes[0].samples[1099], 1099.0);
    assert_eq!(rec.axes[1].samples[5], -5.0);
}

#[test]
fn csv_without_final_newline_reads_last_row() {
    let mut bytes = simple_csv(1100);
    bytes.pop();
    let rec = check_ok(parse("a.csv", &bytes, &options()));
    assert_eq!(rec.n_samples(), 1100);
}

#[test]
fn csv_number_forms_parse() {
    let forms = ["1", "+1.5", "-2.5e-3", "3E2", ".5", "5.", "-0", "1e-310"];
    let bytes = table("x_nm\n", 1100, |k| forms[k % forms.len()].to_string());
    let rec = check_ok(parse("a.csv", &bytes, &with_rate(1.0)));
    let expected: Vec<f64> = forms.iter().map(|f| f.parse::<f64>().unwrap()).collect();
    assert_eq!(&rec.axes[0].samples[..forms.len()], expected.as_slice());
}

#[test]
fn tsv_with_spaces_in_labels_and_cells() {
    let bytes = table("time (ms)\tx pos (nm)\n", 1100, |k| {
        format!(" {} \t {} ", k as f64 / 8.0, k)
    });
    let rec = check_ok(parse("a.tsv", &bytes, &options()));
    assert_eq!(rec.axes[0].name, "x pos");
    assert_eq!(rec.sample_rate_hz, 8000.0);
}

#[test]
fn unit_from_option_when_header_has_none_and_agreeing_header_is_fine() {
    let bytes = table("x,y\n", 1100, |k| format!("{k},{k}"));
    let rec = check_ok(parse(
        "a.csv",
        &bytes,
        &with_rate_unit(50.0, PositionUnit::Volt),
    ));
    assert_eq!(rec.unit, PositionUnit::Volt);
    assert_eq!(rec.axes[1].name, "y");
    let bytes = table("x_V,y\n", 1100, |k| format!("{k},{k}"));
    let rec = check_ok(parse(
        "a.csv",
        &bytes,
        &with_rate_unit(50.0, PositionUnit::Volt),
    ));
    assert_eq!(rec.unit, PositionUnit::Volt);
}

#[test]
fn sample_rate_option_agreeing_with_time_column_is_accepted() {
    // 65536 * (1 + 5e-4) is within the default relative tolerance 1e-3 of 65536.
    let rec = check_ok(parse(
        "a.csv",
        &simple_csv(1100),
        &with_rate(65536.0 * 1.0005),
    ));
    assert_eq!(rec.sample_rate_hz, 65536.0);
}

#[test]
fn exactly_min_samples_is_enough() {
    let rec = check_ok(parse("a.csv", &simple_csv(MIN_SAMPLES), &options()));
    assert_eq!(rec.n_samples(), MIN_SAMPLES);
}

// ---------------------------------------------------------------------------------------------
// Headerless columns
// ---------------------------------------------------------------------------------------------

#[test]
fn columns_separators_and_axis_names() {
    #[track_caller]
    fn check(row: fn(usize) -> String, n_axes: usize) {
        let bytes = table("# comment\n\n", 1100, row);
        let opts = IngestOptions {
            format: Some(Format::Columns),
            ..with_rate_unit(1000.0, PositionUnit::Nanometre)
        };
        let rec = check_ok(parse("a.txt", &bytes, &opts));
        assert_eq!(rec.axes.len(), n_axes);
        for (axis_idx, axis) in rec.axes.iter().enumerate() {
            assert_eq!(axis.name, ["x", "y", "z"][axis_idx]);
            assert_eq!(axis.samples[7], (7 * (axis_idx + 1)) as f64);
        }
        assert_eq!(rec.sample_rate_hz, 1000.0);
    }
    check(|k| format!("{k}"), 1);
    check(|k| format!("{},{}", k, 2 * k), 2);
    check(|k| format!("{}\t{}\t{}", k, 2 * k, 3 * k), 3);
    check(|k| format!("  {}   {}\t {} ", k, 2 * k, 3 * k), 3);
    check(|k| format!("{}, {}\r", k, 2 * k), 2);
}

// ---------------------------------------------------------------------------------------------
// Text validation errors
// ---------------------------------------------------------------------------------------------

#[test]
fn empty_file_is_an_error_in_every_format() {
    for format in Format::ALL {
        let opts = IngestOptions {
            format: Some(format),
            ..with_rate_unit(10.0, PositionUnit::Volt)
        };
        check_err(parse("e.dat", b"", &opts), "empty-file", &["e.dat"]);
    }
    check_err(parse("e.csv", b"", &options()), "empty-file", &["e.csv"]);
}

#[test]
fn header_only_and_comment_only_files() {
    check_err(
        parse("h.csv", b"# c\ntime_s,x_nm\n\n", &options()),
        "no-data-rows",
        &["h.csv", "line 2", "1024"],
    );
    check_err(
        parse("c.csv", b"# only\n# comments\n", &options()),
        "no-header",
        &["c.csv", "line 2"],
    );
    let opts = IngestOptions {
        format: Some(Format::Columns),
        ..with_rate_unit(1.0, PositionUnit::Volt)
    };
    check_err(
        parse("c.txt", b"# only\n\n", &opts),
        "no-data-rows",
        &["c.txt"],
    );
}

#[test]
fn bad_cells_report_line_and_column() {
    #[track_caller]
    fn check(cell: &str, kind: &str) {
        let mut bytes = simple_csv(1100);
        bytes.extend_from_slice(format!("{},{cell}\n", 1100.0 / 65536.0).as_bytes());
        // Header on line 1, rows on lines 2..=1101, the bad row on line 1102, cell in column 2.
        let quoted = format!("'{}'", cell.trim());
        check_err(
            parse("bad.csv", &bytes, &options()),
            kind,
            &["bad.csv", "line 1102, column 2", &quoted],
        );
    }
    check("abc", "non-numeric-cell");
    check("1.5abc", "non-numeric-cell");
    check("", "non-numeric-cell");
    check("0x10", "non-numeric-cell");
    check("1e", "non-numeric-cell");
    check("NaN", "non-finite-cell");
    check(" nan ", "non-finite-cell");
    check("inf", "non-finite-cell");
    check("-Infinity", "non-finite-cell");
    check("1e999", "non-finite-cell");
}

#[test]
fn non_finite_in_first_column_reports_column_one() {
    let mut bytes = simple_csv(1100);
    bytes.extend_from_slice(b"nan,1\n");
    check_err(
        parse("n.csv", &bytes, &options()),
        "non-finite-cell",
        &["line 1102, column 1", "'nan'"],
    );
}

#[test]
fn ragged_rows_report_expected_and_found() {
    #[track_caller]
    fn check(row: &str, found: usize) {
        let mut bytes = table("time_s,x_nm,y_nm\n", 10, |k| format!("{k},{k},{k}"));
        bytes.extend_from_slice(row.as_bytes());
        check_err(
            parse("r.csv", &bytes, &options()),
            "ragged-row",
            &[
                "line 12",
                "expected 3 columns",
                &format!("found {found}"),
                "header",
            ],
        );
    }
    check("10,10\n", 2);
    check("10\n", 1);
    check("10,10,10,10\n", 4);
    check("10,10,10,\n", 4);
}

#[test]
fn ragged_headerless_rows_refer_to_first_row() {
    let mut bytes = table("", 10, |k| format!("{k} {k}"));
    bytes.extend_from_slice(b"1 2 3\n");
    let opts = IngestOptions {
        format: Some(Format::Columns),
        ..with_rate_unit(1.0, PositionUnit::Volt)
    };
    check_err(
        parse("r.txt", &bytes, &opts),
        "ragged-row",
        &["line 11", "expected 2", "found 3", "first row"],
    );
}

#[test]
fn blank_line_between_rows_is_an_error() {
    let mut bytes = simple_csv(600);
    bytes.extend_from_slice(b"\n");
    bytes.extend_from_slice(&simple_csv(600)[12..]);
    check_err(
        parse("b.csv", &bytes, &options()),
        "blank-line",
        &["line 602"],
    );
}

#[test]
fn too_few_samples_states_the_minimum() {
    check_err(
        parse("s.csv", &simple_csv(MIN_SAMPLES - 1), &options()),
        "too-few-samples",
        &["s.csv", "1023 samples", "minimum of 1024"],
    );
}

#[test]
fn header_errors() {
    #[track_caller]
    fn check(header: &str, kind: &str, fragments: &[&str]) {
        let n_cols = header.split(',').count();
        let bytes = table(&format!("# c\n{header}\n"), 1100, |k| {
            let cells: Vec<String> = (0..n_cols)
                .map(|c| format!("{}", (k + c) as f64 / 64.0))
                .collect();
            cells.join(",")
        });
        check_err(parse("h.csv", &bytes, &options()), kind, fragments);
    }
    check(
        "t,a_nm,b_nm,c_nm,d_nm",
        "too-many-columns",
        &["line 2", "4 position columns", "at most 3"],
    );
    check(
        "a_nm,b_nm,time_s,c_nm,d_nm,e_nm",
        "too-many-columns",
        &["line 2", "5 position columns"],
    );
    check(
        "time_s",
        "no-position-column",
        &["line 2", "add one to three"],
    );
    check(
        "time_s,_nm",
        "empty-label",
        &["line 2, column 2", "empty column label"],
    );
    check("time_s,x_nm,", "empty-label", &["line 2, column 3"]);
    check(
        "time_s,x_nm,x_nm",
        "duplicate-column",
        &["line 2, column 3", "'x'"],
    );
    check(
        "time_s,x_nm,t_ms",
        "duplicate-column",
        &["line 2, column 3", "'t_ms'"],
    );
    // Micrometres are converted (format_tests); a unit that is no multiple of nm or V is not.
    check(
        "time_s,x (mm)",
        "unsupported-unit",
        &["line 2, column 2", "'mm'"],
    );
    check("time_s,x_s", "unsupported-unit", &["column 2", "'s'"]);
    check(
        "time (min),x_nm",
        "unsupported-unit",
        &["column 1", "'min'"],
    );
    // `_mm` is not a unit suffix, so the label is a name without a unit.
    check(
        "time_s,x_mm",
        "missing-unit",
        &[
            "line 2, column 2",
            "'x_mm'",
            "x_nm",
            "give the unit explicitly",
        ],
    );
    check(
        "time_s,x_nm,y_V",
        "mixed-units",
        &[
            "line 2, column 3",
            "'y_V' is in V",
            "first position column is in nm",
        ],
    );
}

#[test]
fn header_unit_conflicting_with_option_is_an_error() {
    let bytes = table("time_s,x_V\n", 1100, |k| format!("{},{k}", k as f64 / 64.0));
    let opts = IngestOptions {
        unit: Some(PositionUnit::Nanometre),
        ..options()
    };
    check_err(
        parse("u.csv", &bytes, &opts),
        "unit-conflict",
        &[
            "line 1, column 2",
            "header gives the unit V",
            "nm was requested",
        ],
    );
}

#[test]
fn time_column_not_strictly_increasing_reports_line() {
    #[track_caller]
    fn check(bad_row: usize, bad_time: f64) {
        let bytes = table("time_s,x_nm\n", 1100, |k| {
            let t = if k == bad_row {
                bad_time
            } else {
                k as f64 / 64.0
            };
            format!("{t},{k}")
        });
        check_err(
            parse("t.csv", &bytes, &options()),
            "time-not-increasing",
            &[&format!("line {}", bad_row + 2), "strictly increasing"],
        );
    }
    check(500, 499.0 / 64.0); // repeated time stamp
    check(500, 0.0); // jump back
    check(1, 0.0); // first step
}

#[test]
fn time_steps_not_uniform_report_line_and_steps() {
    // One step is 1.5 times the nominal 1/64 s; the mean step is barely changed.
    let bytes = table("time_s,x_nm\n", 1100, |k| {
        let t = if k >= 700 {
            (k as f64 + 0.5) / 64.0
        } else {
            k as f64 / 64.0
        };
        format!("{t},{k}")
    });
    check_err(
        parse("u.csv", &bytes, &options()),
        "time-step-not-uniform",
        &[
            "line 702",
            "time step 2.343750e-2 s",
            "mean step",
            "tolerance 0.001",
        ],
    );
    // A looser tolerance accepts the same file.
    let loose = IngestOptions {
        time_tolerance: 0.6,
        ..options()
    };
    let rec = check_ok(parse("u.csv", &bytes, &loose));
    // Rate (n - 1)/(t_last - t_first) = 1099 / (1099.5 / 64).
    let expected_hz = 1099.0 / (1099.5 / 64.0);
    assert!((rec.sample_rate_hz - expected_hz).abs() < 1e-9 * expected_hz);
}

#[test]
fn sample_rate_errors() {
    #[track_caller]
    fn check(file: &str, bytes: &[u8], opts: IngestOptions, kind: &str, fragments: &[&str]) {
        check_err(parse(file, bytes, &opts), kind, fragments);
    }
    let headed = table("x_nm\n", 1100, |k| format!("{k}"));
    check(
        "a.csv",
        &headed,
        options(),
        "sample-rate-missing",
        &["a.csv", "csv format has no time column", "sample rate"],
    );
    for bad in [0.0, -5.0, f64::NAN, f64::INFINITY] {
        check(
            "a.csv",
            &headed,
            with_rate(bad),
            "sample-rate-invalid",
            &["not a positive finite number"],
        );
    }
    check(
        "a.csv",
        &simple_csv(1100),
        with_rate(50000.0),
        "sample-rate-conflict",
        &["50000 Hz", "65536 Hz", "tolerance 0.001"],
    );
    let numeric = table("", 1100, |k| format!("{k}"));
    check(
        "a.txt",
        &numeric,
        IngestOptions {
            unit: Some(PositionUnit::Volt),
            ..options()
        },
        "sample-rate-missing",
        &["columns format"],
    );
}

#[test]
fn invalid_time_tolerance_is_an_error() {
    for bad in [-1e-3, f64::NAN, f64::INFINITY] {
        let opts = IngestOptions {
            time_tolerance: bad,
            ..options()
        };
        check_err(
            parse("a.csv", &simple_csv(1100), &opts),
            "tolerance-invalid",
            &["a.csv", "relative tolerance"],
        );
    }
}

#[test]
fn invalid_utf8_reports_byte_offset_and_line() {
    let mut bytes = b"time_s,x_nm\n0,1\n".to_vec();
    let offset = bytes.len() + 2;
    bytes.extend_from_slice(b"1,\xff\xfe\n");
    check_err(
        parse("u.csv", &bytes, &options()),
        "invalid-utf8",
        &[&format!("byte offset {offset}"), "line 3"],
    );
}

#[test]
fn columns_errors() {
    let opts = IngestOptions {
        format: Some(Format::Columns),
        sample_rate_hz: Some(100.0),
        ..options()
    };
    let bytes = table("", 1100, |k| format!("{k} {k}"));
    check_err(
        parse("c.txt", &bytes, &opts),
        "unit-required",
        &["columns format does not record the unit", "nm or V"],
    );
    let bytes = table("", 1100, |k| format!("{k},{k},{k},{k}"));
    let opts = IngestOptions {
        unit: Some(PositionUnit::Volt),
        ..opts
    };
    check_err(
        parse("c.txt", &bytes, &opts),
        "too-many-columns",
        &["line 1", "4 position columns"],
    );
    let mut bytes = table("", 20, |k| format!("{k} {k}"));
    bytes.extend_from_slice(b"3 4x\n");
    check_err(
        parse("c.txt", &bytes, &opts),
        "non-numeric-cell",
        &["line 21, column 2", "'4x'"],
    );
}

// ---------------------------------------------------------------------------------------------
// Raw binary
// ---------------------------------------------------------------------------------------------

fn f64_bytes(values: &[f64]) -> Vec<u8> {
    values.iter().flat_map(|v| v.to_le_bytes()).collect()
}

#[test]
fn raw_f64_channels_are_interleaved() {
    // Frame k holds (k, -k, 0.5k).
    let values: Vec<f64> = (0..1100)
        .flat_map(|k| [k as f64, -(k as f64), 0.5 * k as f64])
        .collect();
    let opts = IngestOptions {
        channels: Some(3),
        ..with_rate_unit(2000.0, PositionUnit::Nanometre)
    };
    let rec = check_ok(parse("r.f64", &f64_bytes(&values), &opts));
    assert_eq!(rec.axes.len(), 3);
    assert_eq!(rec.n_samples(), 1100);
    assert_eq!(rec.axes[1].samples[9], -9.0);
    assert_eq!(rec.axes[2].samples[9], 4.5);
    assert_eq!(rec.axes[2].name, "z");
    assert_eq!(rec.sample_rate_hz, 2000.0);
}

#[test]
fn raw_f32_and_i16_decode_little_endian() {
    let f32s: Vec<u8> = (0..1100)
        .flat_map(|k| (k as f32 * 0.25).to_le_bytes())
        .collect();
    let rec = check_ok(parse(
        "r.f32",
        &f32s,
        &with_rate_unit(10.0, PositionUnit::Volt),
    ));
    assert_eq!(rec.axes[0].samples[3], 0.75);
    // Counts -550..550 scaled by 2^-10 V per count (a power of two, so exact).
    let i16s: Vec<u8> = (0..1100i16).flat_map(|k| (k - 550).to_le_bytes()).collect();
    let opts = IngestOptions {
        volts_per_count: Some(1.0 / 1024.0),
        ..with_rate(10.0)
    };
    let rec = check_ok(parse("r.i16", &i16s, &opts));
    assert_eq!(rec.unit, PositionUnit::Volt);
    assert_eq!(rec.axes[0].samples[0], -550.0 / 1024.0);
    assert_eq!(rec.axes[0].samples[1099], 549.0 / 1024.0);
}

#[test]
fn raw_binary_errors() {
    #[track_caller]
    fn check(file: &str, bytes: &[u8], opts: IngestOptions, kind: &str, fragments: &[&str]) {
        check_err(parse(file, bytes, &opts), kind, fragments);
    }
    let good = f64_bytes(&vec![1.0; 1100]);
    let mut truncated = good.clone();
    truncated.extend_from_slice(&[1, 2, 3]);
    check(
        "t.f64",
        &truncated,
        with_rate_unit(1.0, PositionUnit::Volt),
        "truncated-binary",
        &["byte offset 8800", "3 bytes", "frame is 8 bytes"],
    );
    check(
        "t.f64",
        &good,
        IngestOptions {
            channels: Some(3),
            ..with_rate_unit(1.0, PositionUnit::Volt)
        },
        // 8800 bytes = 366 frames of 24 bytes and 16 bytes over.
        "truncated-binary",
        &["byte offset 8784", "16 bytes", "frame is 24 bytes"],
    );
    let mut with_nan = good.clone();
    with_nan.splice(800..808, f64::NAN.to_le_bytes());
    check(
        "n.f64",
        &with_nan,
        with_rate_unit(1.0, PositionUnit::Volt),
        "non-finite-sample",
        &["byte offset 800"],
    );
    check(
        "s.f64",
        &good[..8 * 1000],
        with_rate_unit(1.0, PositionUnit::Volt),
        "too-few-samples",
        &["1000 samples", "1024"],
    );
    check(
        "u.f64",
        &good,
        with_rate(1.0),
        "unit-required",
        &["raw-f64 format"],
    );
    check(
        "r.f64",
        &good,
        IngestOptions {
            unit: Some(PositionUnit::Volt),
            ..options()
        },
        "sample-rate-missing",
        &["raw-f64"],
    );
    for channels in [0, 4] {
        check(
            "c.f64",
            &good,
            IngestOptions {
                channels: Some(channels),
                ..with_rate_unit(1.0, PositionUnit::Volt)
            },
            "channels-invalid",
            &[&format!("{channels} channels"), "1 to 3"],
        );
    }
    let counts = vec![0u8; 2 * 1100];
    check(
        "i.i16",
        &counts,
        with_rate(1.0),
        "volts-per-count-missing",
        &["i16", "volts_per_count"],
    );
    check(
        "i.i16",
        &counts,
        IngestOptions {
            volts_per_count: Some(1e-3),
            ..with_rate_unit(1.0, PositionUnit::Nanometre)
        },
        "volts-per-count-unit-conflict",
        &["nm"],
    );
    for bad in [0.0, -1e-3, f64::NAN] {
        check(
            "i.i16",
            &counts,
            IngestOptions {
                volts_per_count: Some(bad),
                ..with_rate(1.0)
            },
            "volts-per-count-invalid",
            &["positive finite"],
        );
    }
}

// ---------------------------------------------------------------------------------------------
// NumPy .npy: fixtures written by numpy (tests/data/ingest/make_npy_fixtures.py)
// ---------------------------------------------------------------------------------------------

macro_rules! fixture {
    ($name:literal) => {
        (
            $name,
            include_bytes!(concat!(
                env!("CARGO_MANIFEST_DIR"),
                "/tests/data/ingest/",
                $name
            ))
            .as_slice(),
        )
    };
}

const EXPECTED_JSON: &str = include_str!(concat!(
    env!("CARGO_MANIFEST_DIR"),
    "/tests/data/ingest/expected.json"
));

fn expected_entry(name: &str) -> serde_json::Value {
    let all: serde_json::Value = serde_json::from_str(EXPECTED_JSON).expect("expected.json");
    all["files"][name].clone()
}

/// A number from expected.json: floats are repr strings (parsed by the correctly rounded
/// `str::parse`), integer counts are JSON integers (exact below 2^53).
#[track_caller]
fn json_f64(value: &serde_json::Value) -> f64 {
    match value {
        serde_json::Value::String(text) => text.parse().expect("float repr"),
        other => other.as_i64().expect("integer") as f64,
    }
}

/// Checks every axis of `rec` against numpy's summary: length, first, last, sample 517 exact
/// (times `scale`, a power of two for integer data), sum within 1e-12 of the sum of |x|
/// (numpy sums pairwise, the check sums in order).
#[track_caller]
fn check_against_numpy(name: &str, rec: &Recording, scale: f64) {
    let entry = expected_entry(name);
    let axes = entry["axes"].as_array().expect("axes");
    assert_eq!(rec.axes.len(), axes.len(), "{name}");
    for (axis, want) in rec.axes.iter().zip(axes) {
        let get = |key: &str| json_f64(&want[key]) * scale;
        assert_eq!(
            axis.samples.len() as u64,
            want["len"].as_u64().expect("len"),
            "{name}"
        );
        assert_eq!(axis.samples[0], get("first"), "{name} first");
        assert_eq!(
            axis.samples[axis.samples.len() - 1],
            get("last"),
            "{name} last"
        );
        assert_eq!(axis.samples[517], get("at_517"), "{name} at 517");
        let sum: f64 = axis.samples.iter().sum();
        let abs_sum: f64 = axis.samples.iter().map(|v| v.abs()).sum();
        assert!(
            (sum - get("sum")).abs() <= 1e-12 * abs_sum,
            "{name} sum {sum} vs {}",
            get("sum")
        );
    }
}

#[test]
fn npy_float_fixtures_match_numpy() {
    // NEP 1 versions 1.0 and 2.0; 1-D, (N, 3) and Fortran-ordered (N, 2) arrays.
    for (name, bytes) in [
        fixture!("f8_v1.npy"),
        fixture!("f4_v2.npy"),
        fixture!("f4_n3.npy"),
        fixture!("f8_fortran.npy"),
    ] {
        let rec = check_ok(parse(name, bytes, &with_rate_unit(1e4, PositionUnit::Volt)));
        assert_eq!(rec.unit, PositionUnit::Volt);
        assert_eq!(rec.sample_rate_hz, 1e4);
        check_against_numpy(name, &rec, 1.0);
    }
}

#[test]
fn npy_integer_fixtures_scale_to_volts_or_stay_nanometres() {
    let volts_per_count = 1.0 / 4096.0;
    for (name, bytes) in [
        fixture!("i1_v1.npy"),
        fixture!("i2_v1.npy"),
        fixture!("i8_v1.npy"),
        fixture!("i4_axes_by_samples.npy"),
    ] {
        let opts = IngestOptions {
            volts_per_count: Some(volts_per_count),
            ..with_rate(500.0)
        };
        let rec = check_ok(parse(name, bytes, &opts));
        assert_eq!(rec.unit, PositionUnit::Volt, "{name}");
        check_against_numpy(name, &rec, volts_per_count);
        let rec = check_ok(parse(
            name,
            bytes,
            &with_rate_unit(500.0, PositionUnit::Nanometre),
        ));
        assert_eq!(rec.unit, PositionUnit::Nanometre, "{name}");
        check_against_numpy(name, &rec, 1.0);
        check_err(
            parse(name, bytes, &with_rate(500.0)),
            "volts-per-count-missing",
            &[name, "volts_per_count", "or the unit nm"],
        );
    }
}

#[test]
fn npy_unsupported_dtype_fixtures_name_the_dtype_and_header_offset() {
    for ((name, bytes), dtype) in [
        (fixture!("f8_big_endian.npy"), "'>f8'"),
        (fixture!("c16_complex.npy"), "'<c16'"),
        (fixture!("structured.npy"), "'[('x', '<f8')"),
    ] {
        let opts = with_rate_unit(1.0, PositionUnit::Volt);
        let result = parse(name, bytes, &opts);
        let is_unsupported = result
            .as_ref()
            .err()
            .map(IngestError::is_unsupported_format);
        assert_eq!(is_unsupported, Some(true), "{name}");
        check_err(
            result,
            "npy-unsupported-dtype",
            &[name, "byte offset 10", dtype],
        );
    }
}

/// A `.npy` file with the given header dictionary text and data (NEP 1 layout), version 1.0 or
/// 2.0, padded to 64 bytes.
fn npy_bytes(dict: &str, version: u8, data: &[u8]) -> Vec<u8> {
    let length_bytes = if version == 1 { 2 } else { 4 };
    let mut header = dict.to_string();
    while (8 + length_bytes + header.len() + 1) % 64 != 0 {
        header.push(' ');
    }
    header.push('\n');
    let mut out = b"\x93NUMPY".to_vec();
    out.extend_from_slice(&[version, 0]);
    if version == 1 {
        out.extend_from_slice(&(header.len() as u16).to_le_bytes());
    } else {
        out.extend_from_slice(&(header.len() as u32).to_le_bytes());
    }
    out.extend_from_slice(header.as_bytes());
    out.extend_from_slice(data);
    out
}

#[test]
fn npy_hand_built_headers_in_both_versions_and_layouts() {
    // (C, N) = (2, 1100) in Fortran order: element (axis c, sample k) at flat index k*2 + c.
    let data = f64_bytes(
        &(0..1100)
            .flat_map(|k| [k as f64, -(k as f64)])
            .collect::<Vec<_>>(),
    );
    for version in [1, 2] {
        let bytes = npy_bytes(
            "{\"shape\": (2, 1100), \"fortran_order\": True, \"descr\": \"<f8\"}",
            version,
            &data,
        );
        let rec = check_ok(parse(
            "h.npy",
            &bytes,
            &with_rate_unit(1.0, PositionUnit::Nanometre),
        ));
        assert_eq!(rec.axes.len(), 2);
        assert_eq!(rec.axes[0].samples[5], 5.0);
        assert_eq!(rec.axes[1].samples[5], -5.0);
    }
}

#[test]
fn npy_errors() {
    #[track_caller]
    fn check(bytes: &[u8], kind: &str, fragments: &[&str]) {
        let opts = IngestOptions {
            format: Some(Format::Npy),
            ..with_rate_unit(1.0, PositionUnit::Volt)
        };
        check_err(parse("e.npy", bytes, &opts), kind, fragments);
    }
    let data = f64_bytes(&vec![0.5; 1100]);
    let good_dict = "{'descr': '<f8', 'fortran_order': False, 'shape': (1100,), }";
    let good = npy_bytes(good_dict, 1, &data);
    check(
        b"time_s,x_nm\n",
        "npy-bad-magic",
        &["byte offset 0", "\\x93NUMPY"],
    );
    let mut v3 = good.clone();
    v3[6] = 3;
    check(&v3, "npy-unsupported-version", &["byte offset 6", "3.0"]);
    check(&good[..7], "npy-bad-header", &["byte offset 6"]);
    check(&good[..9], "npy-bad-header", &["byte offset 8"]);
    check(&good[..40], "npy-bad-header", &["the header announces"]);
    check(
        &good[..good.len() - 3],
        "npy-truncated",
        &[
            &format!("byte offset {}", good.len() - 3),
            "8797 of 8800 bytes",
        ],
    );
    let mut trailing = good.clone();
    trailing.extend_from_slice(&[0; 5]);
    check(
        &trailing,
        "npy-trailing-bytes",
        &[&format!("byte offset {}", good.len()), "5 bytes"],
    );
    #[track_caller]
    fn check_dict(dict: &str, kind: &str, fragments: &[&str]) {
        let data = f64_bytes(&vec![0.5; 1100]);
        check(&npy_bytes(dict, 1, &data), kind, fragments);
    }
    check_dict(
        "{'descr': '<f8', 'fortran_order': False, 'shape': (5, 5, 44), }",
        "npy-unsupported-shape",
        &["byte offset 10", "(5, 5, 44)"],
    );
    check_dict(
        "{'descr': '<f8', 'fortran_order': False, 'shape': (), }",
        "npy-unsupported-shape",
        &["()"],
    );
    check_dict(
        "{'descr': '<f8', 'fortran_order': False, 'shape': (100, 11), }",
        "npy-unsupported-shape",
        &["(100, 11)"],
    );
    check_dict(
        "{'descr': '<f8', 'fortran_order': False}",
        "npy-bad-header",
        &["keys descr, fortran_order and shape are all required"],
    );
    check_dict(
        "{'descr': '<f8', 'fortran_order': False, 'shape': (1100,), 'extra': 1}",
        "npy-bad-header",
        &["unexpected key 'extra'"],
    );
    check_dict(
        "{'descr': '<f8', 'descr': '<f8', 'fortran_order': False, 'shape': (1100,)}",
        "npy-bad-header",
        &["appears twice"],
    );
    check_dict(
        "{'descr': '<f8', 'fortran_order': maybe, 'shape': (1100,)}",
        "npy-bad-header",
        &["True or False"],
    );
    check_dict(
        "{'descr': '<f8', 'fortran_order': False, 'shape': (-1100,)}",
        "npy-bad-header",
        &["non-negative integers"],
    );
    check_dict(
        "{'descr': '<f8', 'fortran_order': False, 'shape': (99999999999999999999999,)}",
        "npy-bad-header",
        &["too large"],
    );
    check_dict(
        "{'descr': '<f8', 'fortran_order': False, 'shape': (4294967296, 4294967296)}",
        "npy-unsupported-shape",
        &["(4294967296, 4294967296)"],
    );
    check_dict("['descr']", "npy-bad-header", &["must start with '{'"]);
    check_dict(
        "{'descr': '<f8', 'fortran_order': False, 'shape': (1100,)} junk",
        "npy-bad-header",
        &["after the dictionary"],
    );
    check_dict(
        "{'descr': '>i2', 'fortran_order': False, 'shape': (1100,)}",
        "npy-unsupported-dtype",
        &["'>i2'"],
    );
    // Header offsets point into the header: the 'x' key starts at byte 10 + 1.
    check_dict("{'x': 1}", "npy-bad-header", &["byte offset 11"]);
    let mut nan_data = data.clone();
    nan_data.splice(16..24, f64::INFINITY.to_le_bytes());
    let with_inf = npy_bytes(good_dict, 1, &nan_data);
    let data_start = with_inf.len() - nan_data.len();
    check(
        &with_inf,
        "non-finite-sample",
        &[&format!("byte offset {}", data_start + 16)],
    );
    let short = npy_bytes(
        "{'descr': '<f8', 'fortran_order': False, 'shape': (100,), }",
        1,
        &data[..800],
    );
    check(&short, "too-few-samples", &["100 samples"]);
    let opts = IngestOptions {
        format: Some(Format::Npy),
        ..with_rate(1.0)
    };
    check_err(
        parse("f.npy", &good, &opts),
        "unit-required",
        &["npy format does not record the unit"],
    );
    let opts = IngestOptions {
        format: Some(Format::Npy),
        unit: Some(PositionUnit::Volt),
        ..options()
    };
    check_err(
        parse("f.npy", &good, &opts),
        "sample-rate-missing",
        &["npy format"],
    );
}

// ---------------------------------------------------------------------------------------------
// Text fixtures written by numpy.savetxt
// ---------------------------------------------------------------------------------------------

#[test]
fn numpy_savetxt_csv_with_time_in_ms_matches_loadtxt() {
    let (name, bytes) = fixture!("numpy_savetxt.csv");
    let rec = check_ok(parse(name, bytes, &options()));
    assert_eq!(rec.unit, PositionUnit::Nanometre);
    let names: Vec<&str> = rec.axes.iter().map(|a| a.name.as_str()).collect();
    assert_eq!(names, ["x", "y"]);
    check_against_numpy(name, &rec, 1.0);
    let want_hz = json_f64(&expected_entry(name)["sample_rate_hz"]);
    assert!((rec.sample_rate_hz - want_hz).abs() <= 1e-12 * want_hz);
    assert!((rec.sample_rate_hz - 50_000.0).abs() < 1e-6);
}

#[test]
fn numpy_savetxt_tsv_with_bom_crlf_and_bracket_units_matches_loadtxt() {
    let (name, bytes) = fixture!("numpy_savetxt_crlf.tsv");
    let rec = check_ok(parse(name, bytes, &with_rate(20_000.0)));
    assert_eq!(rec.unit, PositionUnit::Volt);
    let names: Vec<&str> = rec.axes.iter().map(|a| a.name.as_str()).collect();
    assert_eq!(names, ["x", "y", "z"]);
    check_against_numpy(name, &rec, 1.0);
}

// ---------------------------------------------------------------------------------------------
// Round trips and encoder errors
// ---------------------------------------------------------------------------------------------

#[test]
fn encode_then_parse_gives_the_same_samples_in_every_format() {
    let volts_per_count = 1.0 / 8192.0;
    for n_axes in 1..=3 {
        let rec = recording(n_axes, 1300, 48_000.0, PositionUnit::Volt, 3.0);
        for format in Format::ALL {
            let bytes = encode(&rec, format, Some(volts_per_count)).expect("encodes");
            let opts = IngestOptions {
                format: Some(format),
                sample_rate_hz: if matches!(format, Format::Csv | Format::Tsv) {
                    None
                } else {
                    Some(rec.sample_rate_hz)
                },
                unit: if format == Format::RawI16 {
                    None
                } else {
                    Some(PositionUnit::Volt)
                },
                channels: Some(n_axes),
                volts_per_count: Some(volts_per_count),
                ..IngestOptions::default()
            };
            let back = check_ok(parse("round.trip", &bytes, &opts));
            assert_eq!(back.unit, PositionUnit::Volt, "{format:?}");
            assert_eq!(back.axes.len(), n_axes, "{format:?}");
            let relative_rate = (back.sample_rate_hz - rec.sample_rate_hz).abs() / 48_000.0;
            assert!(relative_rate < 1e-12, "{format:?}: {}", back.sample_rate_hz);
            for (got, want) in back.axes.iter().zip(&rec.axes) {
                assert_eq!(got.name, want.name, "{format:?}");
                assert_eq!(got.samples.len(), want.samples.len(), "{format:?}");
                for (g, w) in got.samples.iter().zip(&want.samples) {
                    let bound = match format {
                        // binary32 round to nearest: relative error at most 2^-24.
                        Format::RawF32 => w.abs() * f64::from(f32::EPSILON) / 2.0,
                        // round(v / q) * q is within q / 2 of v (plus f64 rounding).
                        Format::RawI16 => volts_per_count * (0.5 + 1e-9),
                        _ => 0.0,
                    };
                    assert!((g - w).abs() <= bound, "{format:?}: {g} vs {w}");
                }
            }
        }
    }
}

#[test]
fn csv_round_trip_keeps_names_unit_and_extreme_magnitudes() {
    let mut rec = recording(2, 1100, 1e6 / 3.0, PositionUnit::Nanometre, 1.0);
    rec.axes[0].name = "bead_1".to_string();
    rec.axes[1].name = "trap y".to_string();
    let extremes = [
        1e-300,
        -1e300,
        5e-324,
        1.0 / 3.0,
        -0.0,
        1e15,
        1e16,
        1e-5,
        9.99e-6,
    ];
    for (k, v) in extremes.iter().enumerate() {
        rec.axes[1].samples[k] = *v;
    }
    for format in [Format::Csv, Format::Tsv] {
        let bytes = encode(&rec, format, None).expect("encodes");
        let back = check_ok(parse("r", &bytes, &options()));
        assert_eq!(back.axes, rec.axes, "{format:?}");
        assert_eq!(back.unit, PositionUnit::Nanometre);
    }
}

#[test]
fn npy_encoder_writes_64_byte_aligned_version_1_header() {
    // NEP 1 / numpy.lib.format: total header size a multiple of 64, ending in a line feed.
    let rec = recording(3, 1100, 1.0, PositionUnit::Volt, 1.0);
    let bytes = encode(&rec, Format::Npy, None).expect("encodes");
    assert!(bytes.starts_with(b"\x93NUMPY\x01\x00"));
    let header_len = usize::from(u16::from_le_bytes([bytes[8], bytes[9]]));
    assert_eq!((10 + header_len) % 64, 0);
    assert_eq!(bytes[10 + header_len - 1], b'\n');
    let header = std::str::from_utf8(&bytes[10..10 + header_len]).expect("ascii");
    assert!(header.contains("'shape': (1100, 3)"), "{header}");
    assert_eq!(bytes.len(), 10 + header_len + 1100 * 3 * 8);
}

#[test]
fn encoder_errors() {
    #[track_caller]
    fn check(rec: &Recording, format: Format, vpc: Option<f64>, kind: &str, fragments: &[&str]) {
        match encode(rec, format, vpc) {
            Ok(_) => panic!("expected {kind}"),
            Err(e) => {
                assert_eq!(e.kind(), kind, "{e}");
                let message = e.to_string();
                for fragment in fragments {
                    assert!(message.contains(fragment), "{message:?} lacks {fragment:?}");
                }
                check_message_style(&e);
            }
        }
    }
    let volts = recording(2, 1100, 100.0, PositionUnit::Volt, 1.0);
    let mut none = volts.clone();
    none.axes.clear();
    check(&none, Format::Csv, None, "encode-axis-count", &["0 axes"]);
    let mut four = recording(3, 1100, 100.0, PositionUnit::Volt, 1.0);
    four.axes.push(four.axes[0].clone());
    check(&four, Format::Npy, None, "encode-axis-count", &["4 axes"]);
    let mut unequal = volts.clone();
    unequal.axes[1].samples.pop();
    check(
        &unequal,
        Format::RawF64,
        None,
        "encode-axis-length",
        &["axis 1", "1099", "1100"],
    );
    let mut bad_rate = volts.clone();
    bad_rate.sample_rate_hz = 0.0;
    check(
        &bad_rate,
        Format::Csv,
        None,
        "encode-sample-rate",
        &["0 Hz"],
    );
    for name in ["", "a,b", " x", "#x", "a\"b", "a\tb", "a\nb"] {
        let mut bad_name = volts.clone();
        bad_name.axes[1].name = name.to_string();
        check(
            &bad_name,
            Format::Csv,
            None,
            "encode-axis-name",
            &["axis 1"],
        );
    }
    let mut nan = volts.clone();
    nan.axes[0].samples[42] = f64::NAN;
    check(
        &nan,
        Format::Columns,
        None,
        "encode-value",
        &["sample 42", "NaN"],
    );
    let mut huge = volts.clone();
    huge.axes[1].samples[7] = 1e300;
    check(
        &huge,
        Format::RawF32,
        None,
        "encode-value",
        &["axis 'y', sample 7", "raw-f32"],
    );
    check(
        &volts,
        Format::RawI16,
        Some(1e-6),
        "encode-value",
        &["raw-i16"],
    );
    check(
        &volts,
        Format::RawI16,
        None,
        "encode-volts-per-count",
        &["none"],
    );
    check(
        &volts,
        Format::RawI16,
        Some(-1.0),
        "encode-volts-per-count",
        &["-1"],
    );
    let nm = recording(1, 1100, 100.0, PositionUnit::Nanometre, 1.0);
    check(&nm, Format::RawI16, Some(1e-3), "encode-unit", &["nm"]);
}

// ---------------------------------------------------------------------------------------------
// Robustness: no input panics
// ---------------------------------------------------------------------------------------------

/// Whether a successful parse upholds the `Recording` contract of `parse`.
#[track_caller]
fn check_recording_contract(rec: &Recording) {
    assert!((1..=3).contains(&rec.axes.len()));
    assert!(rec.n_samples() >= MIN_SAMPLES);
    assert!(rec.sample_rate_hz.is_finite() && rec.sample_rate_hz > 0.0);
    for axis in &rec.axes {
        assert_eq!(axis.samples.len(), rec.n_samples());
        assert!(axis.samples.iter().all(|v| v.is_finite()));
    }
}

#[test]
fn random_truncated_and_mutated_inputs_never_panic() {
    let mut rng = XorShift(0x2545_F491_4F6C_DD1D);
    let rec = recording(2, 1100, 1000.0, PositionUnit::Volt, 2.0);
    let mut valid: Vec<(Format, Vec<u8>)> = Format::ALL
        .iter()
        .map(|&f| (f, encode(&rec, f, Some(1e-3)).expect("encodes")))
        .collect();
    valid.push((Format::Npy, fixture!("f8_fortran.npy").1.to_vec()));
    valid.push((Format::Csv, fixture!("numpy_savetxt.csv").1.to_vec()));
    let option_sets = [
        IngestOptions::default(),
        IngestOptions {
            sample_rate_hz: Some(1000.0),
            unit: Some(PositionUnit::Volt),
            channels: Some(2),
            volts_per_count: Some(1e-3),
            ..IngestOptions::default()
        },
        IngestOptions {
            sample_rate_hz: Some(1000.0),
            unit: Some(PositionUnit::Nanometre),
            ..IngestOptions::default()
        },
    ];
    let names = [
        "r.csv", "r.tsv", "r.txt", "r.npy", "r.f32", "r.f64", "r.i16", "r.bin", "r",
    ];
    let mut n_ok = 0;
    let mut n_err = 0;
    let mut run = |name: &str, bytes: &[u8], opts: &IngestOptions| match parse(name, bytes, opts) {
        Ok(r) => {
            check_recording_contract(&r);
            n_ok += 1;
        }
        Err(e) => {
            assert!(!e.kind().is_empty());
            assert!(!e.to_string().is_empty());
            n_err += 1;
        }
    };
    for round in 0..1000 {
        // Random bytes, sometimes random text-like bytes.
        let len = rng.below(3000);
        let alphabet: &[u8] = if round % 2 == 0 {
            b"0123456789.,-+eE \t\r\n#naifNAIF_xyt()[]V\"\x93NUMPY{}':"
        } else {
            &[]
        };
        let bytes: Vec<u8> = (0..len)
            .map(|_| {
                let r = rng.next_u64();
                if alphabet.is_empty() {
                    r as u8
                } else {
                    alphabet[(r % alphabet.len() as u64) as usize]
                }
            })
            .collect();
        let opts = &option_sets[round % option_sets.len()];
        run(names[round % names.len()], &bytes, opts);
        for format in Format::ALL {
            let forced = IngestOptions {
                format: Some(format),
                ..opts.clone()
            };
            run("r", &bytes, &forced);
        }
    }
    for (format, bytes) in &valid {
        for opts in &option_sets {
            let forced = IngestOptions {
                format: Some(*format),
                ..opts.clone()
            };
            // Truncated prefixes.
            for _ in 0..60 {
                let cut = rng.below(bytes.len() + 1);
                run("r", &bytes[..cut], &forced);
            }
            // A few mutated bytes.
            for _ in 0..60 {
                let mut mutated = bytes.clone();
                for _ in 0..1 + rng.below(4) {
                    let at = rng.below(mutated.len());
                    mutated[at] = rng.next_u64() as u8;
                }
                run("r", &mutated, &forced);
            }
        }
    }
    // Both outcomes occurred, so the loop exercised parsers past their first check.
    assert!(n_ok > 0 && n_err > 0, "ok {n_ok}, err {n_err}");
}

// ---------------------------------------------------------------------------------------------
// Streaming: pieces of whole lines
// ---------------------------------------------------------------------------------------------

/// A reader that hands out at most `max_read` bytes per call and fails with an IO error once
/// `fail_at` bytes were read, like a slow pipe or a disk that goes away.
struct Trickle<'a> {
    bytes: &'a [u8],
    max_read: usize,
    fail_at: Option<usize>,
    pos: usize,
}

impl std::io::Read for Trickle<'_> {
    fn read(&mut self, out: &mut [u8]) -> std::io::Result<usize> {
        if self.fail_at.is_some_and(|at| self.pos >= at) {
            return Err(std::io::Error::other("device went away"));
        }
        let limit = self.fail_at.unwrap_or(usize::MAX).min(self.bytes.len());
        let n = out.len().min(self.max_read).min(limit - self.pos);
        out[..n].copy_from_slice(&self.bytes[self.pos..self.pos + n]);
        self.pos += n;
        Ok(n)
    }
}

/// Text inputs whose rules span lines: preambles, BOM, CRLF, trailing blank lines, a missing final
/// line feed, every row-level error, and errors found only after the last row (time checks).
fn text_cases() -> Vec<(&'static str, Vec<u8>, IngestOptions)> {
    let rate_nm = with_rate_unit(1000.0, PositionUnit::Nanometre);
    let mut bom_crlf = b"\xEF\xBB\xBF# instrument bench-3\r\n\r\n".to_vec();
    bom_crlf.extend(
        String::from_utf8(simple_csv(1100))
            .unwrap()
            .replace('\n', "\r\n")
            .into_bytes(),
    );
    bom_crlf.extend_from_slice(b"\r\n  \r\n\n");
    let mut no_final_lf = simple_csv(1100);
    no_final_lf.pop();
    let blank_inside = {
        let mut t = simple_csv(600);
        t.extend_from_slice(b"\n");
        t.extend(table("", 600, |k| {
            format!("{},{k}", (k + 600) as f64 / 65536.0)
        }));
        t
    };
    let jump = table("time_s,x_nm\n", 1100, |k| {
        let t = if k >= 700 { k as f64 + 0.5 } else { k as f64 } / 64.0;
        format!("{t},{k}")
    });
    let backwards = table("time_s,x_nm\n", 1100, |k| {
        let t = if k == 900 { 0.0 } else { k as f64 / 64.0 };
        format!("{t},{k}")
    });
    let bad_cell = table("t,x_V\n", 1100, |k| {
        if k == 1000 {
            "0.5,1.2.3".to_string()
        } else {
            format!("{},{k}", k as f64 / 64.0)
        }
    });
    let ragged = table("t,x_nm,y_nm\n", 1100, |k| {
        if k == 800 {
            format!("{k},1")
        } else {
            format!("{k},1,2")
        }
    });
    let columns = table("# headerless\n\n", 1500, |k| {
        format!("{k}   {}\t{}", k % 5, k % 3)
    });
    let tsv = table("time (ms)\tx [nm]\n", 1200, |k| {
        format!("{}\t{}", k as f64 * 0.5, k % 9)
    });
    let invalid_utf8 = {
        let mut t = simple_csv(1100);
        let at = t.len() - 20;
        t[at] = 0xFF;
        t
    };
    vec![
        ("plain.csv", simple_csv(1500), options()),
        ("bom-crlf.csv", bom_crlf, options()),
        ("no-final-lf.csv", no_final_lf, options()),
        ("blank-inside.csv", blank_inside, options()),
        ("jump.csv", jump, options()),
        ("backwards.csv", backwards, options()),
        ("bad-cell.csv", bad_cell, options()),
        ("ragged.csv", ragged, with_rate(10.0)),
        ("few.csv", simple_csv(1000), options()),
        ("comments-only.csv", b"# a\n# b\n\n".to_vec(), options()),
        ("header-only.csv", b"t,x_nm\n".to_vec(), options()),
        ("columns.txt", columns, rate_nm.clone()),
        ("ms.tsv", tsv, options()),
        ("rate-conflict.csv", simple_csv(1100), with_rate(1000.0)),
        ("invalid.csv", invalid_utf8, options()),
    ]
}

/// The outcome of a read as comparable text: the samples or the error message.
fn outcome(
    result: Result<(Recording, Format), IngestError>,
) -> Result<(Recording, Format), String> {
    result.map_err(|e| format!("{} / {e}", e.kind()))
}

#[test]
fn text_read_in_pieces_gives_what_the_whole_file_gives() {
    // Piece sizes down to one byte put a cut in every possible place: inside the BOM, between CR
    // and LF, inside numbers and in the preamble.
    for (name, bytes, opts) in text_cases() {
        let whole = outcome(read_in_pieces(
            name,
            &mut &bytes[..],
            None,
            &opts,
            bytes.len() + 1,
        ));
        for chunk in [1, 2, 3, 7, 64, 1000, READ_CHUNK_BYTES] {
            let pieces = outcome(read_in_pieces(
                name,
                &mut &bytes[..],
                Some(bytes.len()),
                &opts,
                chunk,
            ));
            assert_eq!(pieces, whole, "{name} read in pieces of {chunk} bytes");
        }
        let mut trickle = Trickle {
            bytes: &bytes,
            max_read: 5,
            fail_at: None,
            pos: 0,
        };
        let trickled = outcome(read_in_pieces(name, &mut trickle, None, &opts, 4096));
        assert_eq!(
            trickled, whole,
            "{name} read from a reader giving 5 bytes per call"
        );
    }
}

#[test]
fn text_errors_after_the_first_piece_name_the_line_and_byte_of_the_whole_file() {
    // With pieces of 64 bytes the bad cell (row 1000, line 1002), the ragged row (line 802),
    // the blank line (line 602), the jump in time (line 702) and the invalid byte lie many pieces
    // in; each message must still count from the start of the file.
    let expected = [
        ("bad-cell.csv", "line 1002, column 2"),
        ("ragged.csv", "line 802"),
        ("blank-inside.csv", "line 602"),
        ("jump.csv", "line 702"),
        ("backwards.csv", "line 902"),
    ];
    let cases = text_cases();
    for (name, fragment) in expected {
        let (_, bytes, opts) = cases.iter().find(|(n, _, _)| *n == name).unwrap();
        let e = read_in_pieces(name, &mut &bytes[..], None, opts, 64).unwrap_err();
        assert!(e.to_string().contains(fragment), "{name}: {e}");
    }
    let (_, bytes, opts) = cases.iter().find(|(n, _, _)| *n == "invalid.csv").unwrap();
    let offset = bytes.len() - 20;
    let line = 1 + bytes[..offset].iter().filter(|&&b| b == b'\n').count();
    let e = read_in_pieces("invalid.csv", &mut &bytes[..], None, opts, 64).unwrap_err();
    assert!(
        matches!(e, IngestError::InvalidUtf8 { byte_offset, line: l, .. } if byte_offset == offset && l == line),
        "{e:?}"
    );
}

#[test]
fn failing_reader_is_a_read_error_at_the_byte_reached() {
    let bytes = simple_csv(5000);
    for (fail_at, chunk) in [(0, 4096), (10_000, 4096), (70_000, 64)] {
        let mut reader = Trickle {
            bytes: &bytes,
            max_read: 1000,
            fail_at: Some(fail_at),
            pos: 0,
        };
        let e = read_in_pieces("gone.csv", &mut reader, None, &options(), chunk).unwrap_err();
        match &e {
            IngestError::Read { byte_offset, .. } => assert_eq!(*byte_offset, fail_at),
            other => panic!("expected a read error, got {other:?}"),
        }
        assert!(e.to_string().contains("device went away"), "{e}");
        assert!(e.to_string().starts_with("gone.csv: byte offset"), "{e}");
    }
    // Binary formats are read whole: the error names the byte as well.
    let raw = vec![0u8; 8000];
    let mut reader = Trickle {
        bytes: &raw,
        max_read: 100,
        fail_at: Some(4000),
        pos: 0,
    };
    let opts = IngestOptions {
        format: Some(Format::RawF32),
        ..with_rate_unit(1000.0, PositionUnit::Volt)
    };
    let e = read_in_pieces("gone.f32", &mut reader, None, &opts, 64).unwrap_err();
    assert!(
        matches!(
            e,
            IngestError::Read {
                byte_offset: 4000,
                ..
            }
        ),
        "{e:?}"
    );
}

#[test]
fn read_reports_the_format_it_detected() {
    let bytes = simple_csv(1500);
    let (rec, format) = read("a.csv", &mut &bytes[..], None, &options()).unwrap();
    assert_eq!(format, Format::Csv);
    assert_eq!(rec, parse("a.csv", &bytes, &options()).unwrap());
    let npy = encode(&rec, Format::Npy, None).unwrap();
    let opts = with_rate_unit(rec.sample_rate_hz, PositionUnit::Nanometre);
    let (back, format) = read("a.npy", &mut &npy[..], Some(npy.len()), &opts).unwrap();
    assert_eq!(format, Format::Npy);
    assert_eq!(back.axes, rec.axes);
}

#[test]
fn time_step_error_names_the_step_farthest_from_the_mean() {
    // 1100 stamps 1/64 s apart but one gap of 40 steps at row 600: the mean step grows by
    // 39/1099, so every normal step is out of a 1e-3 tolerance too; the message must point at the
    // gap (line 602), the step farthest from the mean, not at the first normal step.
    let bytes = table("time_s,x_nm\n", 1100, |k| {
        let t = if k >= 600 { k as f64 + 39.0 } else { k as f64 } / 64.0;
        format!("{t},{k}")
    });
    check_err(
        parse("gap.csv", &bytes, &options()),
        "time-step-not-uniform",
        &["line 602", "time step 6.250000e-1 s"],
    );
}

#[test]
fn text_scanned_in_halves_on_two_threads_gives_what_one_pass_gives() {
    // Files of several 1 MiB pieces, so every piece is cut in two halves, with faults placed
    // in second halves (where the speculative scan runs): a bad cell, a ragged row, a blank
    // line followed by rows, a jump in time (a blank line ending a first half has its own test
    // below). Each must read exactly as in one sequential pass, on two threads and on one.
    let n = 200_000; // about 4.6 MB of text
    let fault_rows = [n / 2 + 3_000, n - 10];
    let mut cases = vec![("clean.csv", simple_csv(n))];
    for &at in &fault_rows {
        cases.push((
            "bad-cell.csv",
            table("time_s,x_nm\n", n, |k| {
                if k == at {
                    "0.5,1.2.3".to_string()
                } else {
                    format!("{},{}", k as f64 / 65536.0, k % 7)
                }
            }),
        ));
        cases.push((
            "ragged.csv",
            table("time_s,x_nm\n", n, |k| {
                if k == at {
                    format!("{},1,2", k as f64 / 65536.0)
                } else {
                    format!("{},{}", k as f64 / 65536.0, k % 7)
                }
            }),
        ));
        cases.push((
            "jump.csv",
            table("time_s,x_nm\n", n, |k| {
                let t = if k >= at { k as f64 + 0.5 } else { k as f64 } / 65536.0;
                format!("{t},{}", k % 7)
            }),
        ));
    }
    // A blank line in the second piece and one in a second half.
    for at in [(3 << 20) / 2 / 23, n / 2 + 3_000] {
        let mut bytes = table("time_s,x_nm\n", at, |k| {
            format!("{},{}", k as f64 / 65536.0, k % 7)
        });
        bytes.push(b'\n');
        bytes.extend(table("", n - at, |k| {
            format!("{},{}", (k + at) as f64 / 65536.0, k % 7)
        }));
        cases.push(("blank.csv", bytes));
    }
    let read_with = |name: &str, bytes: &[u8], split: text::Split| {
        let mut source = bytes;
        let chunks = stream::LineChunks::new(name, &mut source, READ_CHUNK_BYTES);
        text::read_text(name, chunks, Format::Csv, COMMA, &options(), None, split)
            .map_err(|e| format!("{} / {e}", e.kind()))
    };
    for (name, bytes) in &cases {
        let one_pass = read_with(
            name,
            bytes,
            text::Split {
                min_bytes: usize::MAX,
                threads: 1,
            },
        );
        for threads in [1, 2] {
            let halves = read_with(
                name,
                bytes,
                text::Split {
                    min_bytes: text::SPLIT_MIN_BYTES,
                    threads,
                },
            );
            assert_eq!(halves, one_pass, "{name} in halves on {threads} thread(s)");
        }
        if *name != "clean.csv" {
            assert!(one_pass.is_err(), "{name} must fail");
        }
    }
}

#[test]
fn blank_lines_that_end_a_first_half_still_forbid_the_rows_after_them() {
    // One piece of 4000 rows cut in two near its middle, with a run of 40 blank lines (40
    // bytes) in it: the run is moved over the rows around the middle, so that for some
    // placements the cut falls inside it; the first half then ends in blank lines (allowed at
    // the end of a file) and the rows after them are all in the second half. Every placement
    // must be the blank-line error a sequential pass gives.
    let n = 4000;
    let header = b"time_s,x_nm\n".len();
    let mut cut_in_blanks = 0;
    for at in n / 2 - 30..n / 2 + 30 {
        let mut bytes = table("time_s,x_nm\n", at, |k| {
            format!("{},{}", k as f64 / 65536.0, k % 7)
        });
        let blanks_start = bytes.len();
        bytes.extend_from_slice(&[b'\n'; 40]);
        bytes.extend(table("", n - at, |k| {
            format!("{},{}", (k + at) as f64 / 65536.0, k % 7)
        }));
        let read_with = |split: text::Split| {
            let mut source = &bytes[..];
            let chunks = stream::LineChunks::new("blank.csv", &mut source, bytes.len() + 1);
            text::read_text(
                "blank.csv",
                chunks,
                Format::Csv,
                COMMA,
                &options(),
                None,
                split,
            )
            .map_err(|e| format!("{} / {e}", e.kind()))
        };
        let one_pass = read_with(text::Split {
            min_bytes: usize::MAX,
            threads: 1,
        });
        assert!(
            one_pass
                .as_ref()
                .is_err_and(|e| e.starts_with("blank-line"))
        );
        for threads in [1, 2] {
            let halves = read_with(text::Split {
                min_bytes: 1024,
                threads,
            });
            assert_eq!(
                halves, one_pass,
                "blank lines after row {at}, {threads} thread(s)"
            );
        }
        // Where the cut falls: after the first line feed at or after the middle of the rows.
        let rest = &bytes[header..];
        let cut = header + (rest.len() / 2..).find(|&i| rest[i] == b'\n').unwrap() + 1;
        if (blanks_start + 1..blanks_start + 40).contains(&cut) {
            cut_in_blanks += 1;
        }
    }
    assert!(
        cut_in_blanks >= 1,
        "no placement put the cut among the blank lines"
    );
}
