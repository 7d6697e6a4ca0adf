//! Tests of the European-locale CSV layout, gzip-compressed input and `.npz` archives.
//!
//! Outside truth: the fixtures in tests/data/formats/ were written by numpy 2.4.6
//! (numpy.save, numpy.savez, numpy.savez_compressed) and Python's csv and gzip modules with
//! tests/data/formats/make_format_fixtures.py. Every file holds the record of record.npy, so
//! each read must give its samples bit for bit (the text numbers are Python's repr, which reads
//! back to the same float64, with the point swapped for a comma where the file says so).

use super::*;

macro_rules! fixture {
    ($name:literal) => {
        (
            $name,
            include_bytes!(concat!(
                env!("CARGO_MANIFEST_DIR"),
                "/tests/data/formats/",
                $name
            ))
            .as_slice(),
        )
    };
}

/// The options every fixture is read with: 50 kHz, nanometres (the invented instrument's).
fn options() -> IngestOptions {
    IngestOptions {
        sample_rate_hz: Some(50_000.0),
        unit: Some(PositionUnit::Nanometre),
        ..IngestOptions::default()
    }
}

/// The record as numpy saved it.
fn reference() -> Recording {
    let (name, bytes) = fixture!("record.npy");
    parse(name, bytes, &options()).expect("record.npy reads")
}

/// Checks that `(name, bytes)` read with `opts` gives the reference samples bit for bit.
#[track_caller]
fn check_same_samples((name, bytes): (&str, &[u8]), opts: &IngestOptions) {
    let reference = reference();
    let read = parse(name, bytes, opts).unwrap_or_else(|e| panic!("{name}: {e}"));
    assert_eq!(read.axes.len(), reference.axes.len(), "{name}: axes");
    for (axis, expected) in read.axes.iter().zip(&reference.axes) {
        let bits: Vec<u64> = axis.samples.iter().map(|v| v.to_bits()).collect();
        let expected_bits: Vec<u64> = expected.samples.iter().map(|v| v.to_bits()).collect();
        assert_eq!(bits, expected_bits, "{name}: axis {}", axis.name);
    }
    assert_eq!(read.unit, PositionUnit::Nanometre);
    assert_eq!(read.sample_rate_hz.to_bits(), 50_000.0f64.to_bits());
}

/// Checks that reading fails with `kind` and a message holding every one of `needles`.
#[track_caller]
fn check_error((name, bytes): (&str, &[u8]), opts: &IngestOptions, kind: &str, needles: &[&str]) {
    let e = parse(name, bytes, opts).expect_err("must fail");
    assert_eq!(e.kind(), kind, "{e}");
    for needle in needles {
        assert!(e.to_string().contains(needle), "'{needle}' not in: {e}");
    }
}

#[test]
fn the_reference_record_has_two_axes_of_8192_samples() {
    let reference = reference();
    assert_eq!(reference.axes.len(), 2);
    assert_eq!(reference.n_samples(), 8192);
}

#[test]
fn semicolon_csv_with_decimal_commas_is_detected_and_read_bit_for_bit() {
    check_same_samples(fixture!("record_semicolon.csv"), &options());
}

#[test]
fn semicolon_csv_reads_the_same_whatever_the_piece_size() {
    let (name, bytes) = fixture!("record_semicolon.csv");
    let whole = parse(name, bytes, &options()).expect("reads");
    for chunk_bytes in [1, 7, 100, 4096] {
        let (pieces, format) =
            read_in_pieces(name, &mut &bytes[..], None, &options(), chunk_bytes).expect("reads");
        assert_eq!(format, Format::Csv);
        assert_eq!(pieces, whole, "pieces of {chunk_bytes} bytes");
    }
}

#[test]
fn explicit_delimiter_and_decimal_comma_read_the_semicolon_csv_alike() {
    let opts = IngestOptions {
        delimiter: Some(Delimiter::Semicolon),
        decimal_comma: Some(true),
        ..options()
    };
    check_same_samples(fixture!("record_semicolon.csv"), &opts);
}

#[test]
fn a_decimal_comma_refused_by_the_setting_is_a_located_non_numeric_cell() {
    let opts = IngestOptions {
        decimal_comma: Some(false),
        ..options()
    };
    // Line 2, the first row, is `0,0;0,0`.
    check_error(
        fixture!("record_semicolon.csv"),
        &opts,
        "non-numeric-cell",
        &["line 2", "column 1", "'0,0'"],
    );
}

#[test]
fn one_column_header_over_rows_with_commas_is_ambiguous_and_names_the_setting() {
    check_error(
        fixture!("one_column_comma.csv"),
        &options(),
        "decimal-mark-ambiguous",
        &["line 2", "one column", "--decimal-comma"],
    );
}

#[test]
fn one_column_header_with_the_decimal_comma_set_reads_the_first_axis() {
    let (name, bytes) = fixture!("one_column_comma.csv");
    let opts = IngestOptions {
        decimal_comma: Some(true),
        ..options()
    };
    let read = parse(name, bytes, &opts).expect("reads");
    let expected: Vec<u64> = reference().axes[0]
        .samples
        .iter()
        .map(|v| v.to_bits())
        .collect();
    let bits: Vec<u64> = read.axes[0].samples.iter().map(|v| v.to_bits()).collect();
    assert_eq!(bits, expected);
}

#[test]
fn commas_and_points_in_the_first_rows_are_ambiguous_with_both_lines_named() {
    // Row 4 of the data (line 5) was written with points, the others with commas.
    check_error(
        fixture!("mixed_marks.csv"),
        &options(),
        "decimal-mark-ambiguous",
        &["line 5", "line 2", "--decimal-comma"],
    );
}

#[test]
fn a_header_with_semicolons_and_commas_asks_for_the_delimiter() {
    let bytes = b"x_nm;y,nm\n1;2\n";
    check_error(
        ("both.csv", bytes),
        &options(),
        "delimiter-ambiguous",
        &["line 1", "--delimiter ';'"],
    );
}

#[test]
fn the_comma_cannot_be_delimiter_and_decimal_mark_at_once() {
    let opts = IngestOptions {
        delimiter: Some(Delimiter::Comma),
        decimal_comma: Some(true),
        ..options()
    };
    check_error(
        fixture!("record_semicolon.csv"),
        &opts,
        "decimal-comma-conflict",
        &["--delimiter ';'"],
    );
}

#[test]
fn a_point_in_a_decimal_comma_file_past_the_first_rows_is_located() {
    // Thirty rows with commas, then one with a point (numbers written here; the rule checked
    // is the location of the refusal, not a value).
    let mut text = String::from("x_nm;y_nm\n");
    for k in 0..30 {
        text.push_str(&format!("{k},5;1,25\n"));
    }
    text.push_str("1.5;2,5\n");
    check_error(
        ("late.csv", text.as_bytes()),
        &options(),
        "non-numeric-cell",
        &["line 32", "column 1", "1.5"],
    );
}

#[test]
fn gzip_csv_and_gzip_npy_read_bit_for_bit() {
    check_same_samples(fixture!("record.csv.gz"), &options());
    check_same_samples(fixture!("record.npy.gz"), &options());
}

#[test]
fn gzip_input_is_read_as_a_stream_whatever_the_piece_size() {
    let (name, bytes) = fixture!("record.csv.gz");
    let whole = parse(name, bytes, &options()).expect("reads");
    for chunk_bytes in [1, 333, 65_536] {
        let (pieces, format) =
            read_in_pieces(name, &mut &bytes[..], None, &options(), chunk_bytes).expect("reads");
        assert_eq!(format, Format::Csv);
        assert_eq!(pieces, whole);
    }
}

#[test]
fn corrupt_and_truncated_gzip_are_located_errors_with_the_reason() {
    check_error(
        fixture!("corrupt.csv.gz"),
        &options(),
        "compressed-corrupt",
        &["corrupt.csv.gz: byte offset", "gzip data is corrupt"],
    );
    check_error(
        fixture!("truncated.csv.gz"),
        &options(),
        "compressed-corrupt",
        &["truncated.csv.gz: byte offset"],
    );
}

#[test]
fn a_gzip_bomb_is_refused_once_past_the_limit() {
    // 16 MiB of text in about 16 KiB; a limit of 1 MiB stops it early.
    let opts = IngestOptions {
        max_decompressed_bytes: 1 << 20,
        ..options()
    };
    let (name, bytes) = fixture!("bomb.csv.gz");
    let e = parse(name, bytes, &opts).expect_err("refused");
    assert_eq!(e.kind(), "decompressed-too-large", "{e}");
    assert!(e.to_string().contains("1048576 bytes"), "{e}");
    match e {
        IngestError::DecompressedTooLarge { byte_offset, .. } => {
            // The decompressor reads ahead in blocks, so the place is where its reading got to.
            assert!(
                byte_offset > 0 && byte_offset <= bytes.len() as u64,
                "{byte_offset}"
            );
        }
        other => panic!("{other}"),
    }
}

#[test]
fn npz_members_named_per_axis_read_bit_for_bit_stored_or_deflated() {
    let opts = IngestOptions {
        datasets: vec!["x".into(), "y".into()],
        ..options()
    };
    check_same_samples(fixture!("record_xy.npz"), &opts);
    check_same_samples(fixture!("record_xy_deflated.npz"), &opts);
    let (name, bytes) = fixture!("record_xy.npz");
    let read = parse(name, bytes, &opts).expect("reads");
    let names: Vec<&str> = read.axes.iter().map(|a| a.name.as_str()).collect();
    assert_eq!(names, ["x", "y"]);
}

#[test]
fn npz_with_one_long_numeric_member_needs_no_dataset() {
    check_same_samples(fixture!("record_single.npz"), &options());
    let named = IngestOptions {
        datasets: vec!["trace".into()],
        ..options()
    };
    check_same_samples(fixture!("record_single.npz"), &named);
}

#[test]
fn npz_with_two_candidates_asks_for_the_dataset_and_lists_them() {
    check_error(
        fixture!("record_xy.npz"),
        &options(),
        "dataset-choice",
        &[
            "2 members",
            "--dataset",
            "'x' (8192,) <f8",
            "'y' (8192,) <f8",
        ],
    );
}

#[test]
fn npz_without_a_candidate_lists_what_it_holds() {
    check_error(
        fixture!("no_candidate.npz"),
        &options(),
        "dataset-choice",
        &["no member", "'a' (10,) <f8", "'b' (10,) <f8"],
    );
}

#[test]
fn a_missing_dataset_names_the_ones_that_exist() {
    let opts = IngestOptions {
        datasets: vec!["z".into()],
        ..options()
    };
    check_error(
        fixture!("record_xy.npz"),
        &opts,
        "dataset-missing",
        &["'z'", "'x' (8192,) <f8", "'y' (8192,) <f8"],
    );
}

#[test]
fn a_two_dimensional_member_among_several_says_its_shape() {
    let opts = IngestOptions {
        datasets: vec!["trace".into(), "gain".into()],
        ..options()
    };
    check_error(
        fixture!("record_single.npz"),
        &opts,
        "dataset-unusable",
        &["'trace'", "(8192, 2)", "one-dimensional"],
    );
}

#[test]
fn members_of_different_lengths_are_refused_with_both_lengths() {
    let opts = IngestOptions {
        datasets: vec!["a".into(), "b".into()],
        ..options()
    };
    // Ten samples each: equal lengths, so the refusal is the too-short recording.
    check_error(fixture!("no_candidate.npz"), &opts, "too-few-samples", &[]);
    let (name, bytes) = fixture!("record_single.npz");
    let mixed = IngestOptions {
        datasets: vec!["gain".into()],
        ..options()
    };
    check_error(
        (name, bytes),
        &mixed,
        "too-few-samples",
        &["record_single.npz[gain.npy]"],
    );
}

#[test]
fn a_damaged_zip_is_a_located_error_with_the_reason() {
    check_error(
        fixture!("not_an_archive.npz"),
        &options(),
        "zip-corrupt",
        &["not_an_archive.npz: the zip archive cannot be read"],
    );
}

#[test]
fn npz_round_trips_through_encode() {
    let reference = reference();
    let bytes = encode(&reference, Format::Npz, None).expect("encodes");
    assert_eq!(detect_format("r.npz", &bytes), Ok(Format::Npz));
    let read = parse("r.npz", &bytes, &options()).expect("reads");
    assert_eq!(read, reference);
}

#[test]
fn micrometre_columns_are_converted_to_nanometres_as_numpy_multiplies() {
    let (name, bytes) = fixture!("record_um.csv");
    let opts = IngestOptions {
        sample_rate_hz: Some(50_000.0),
        ..IngestOptions::default()
    };
    let read = parse(name, bytes, &opts).expect("reads");
    let (npy_name, npy_bytes) = fixture!("record_um_in_nm.npy");
    let expected = parse(npy_name, npy_bytes, &options()).expect("reads");
    assert_eq!(read.unit, PositionUnit::Nanometre);
    for (axis, want) in read.axes.iter().zip(&expected.axes) {
        let bits: Vec<u64> = axis.samples.iter().map(|v| v.to_bits()).collect();
        let want_bits: Vec<u64> = want.samples.iter().map(|v| v.to_bits()).collect();
        assert_eq!(bits, want_bits, "axis {}", axis.name);
    }
}

#[test]
fn millivolt_columns_are_divided_into_volts_and_other_units_are_named() {
    // Whole millivolts divide exactly into the nearest double of the volt value.
    let mut text = String::from("x [mV]\n");
    for k in 0..1024 {
        text.push_str(&format!("{}\n", k % 17));
    }
    let opts = IngestOptions {
        sample_rate_hz: Some(1000.0),
        ..IngestOptions::default()
    };
    let read = parse("mv.csv", text.as_bytes(), &opts).expect("reads");
    assert_eq!(read.unit, PositionUnit::Volt);
    assert_eq!(
        read.axes[0].samples[5].to_bits(),
        (5.0f64 / 1000.0).to_bits()
    );
    let in_mm = text.replacen("x [mV]", "x (mm)", 1);
    check_error(
        ("mm.csv", in_mm.as_bytes()),
        &opts,
        "unsupported-unit",
        &["line 1, column 1", "'mm'"],
    );
}
