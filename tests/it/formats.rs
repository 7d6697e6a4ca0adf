//! Uploads in the formats of issue 15 end to end: a `.npz` archive with its datasets named by
//! repeated fields, a semicolon CSV with decimal commas and gzip-compressed files give the
//! calibration of the same record as `.npy`; a corrupt gzip or zip file is a 400, a dataset
//! that cannot be chosen a 400 naming the field, and a compression bomb a 413, storing nothing.
//!
//! Outside truth: the files in tests/data/formats/ were written by numpy and Python's csv and
//! gzip modules with tests/data/formats/make_format_fixtures.py; all hold the record of
//! record.npy.

use crate::on_both_backends;
use crate::support::{Backend, TestDb, TestServer, binary, check_snapshot, options};
use serde_json::Value;
use trapwise::http::ServiceOptions;
use trapwise::settings::Settings;

/// The run settings of every upload here: the invented instrument's bead, rate and unit.
const SETTINGS: [(&str, &str); 4] = [
    ("bead_diameter_um", "1.0"),
    ("temperature_c", "25"),
    ("sample_rate_hz", "50000"),
    ("units", "nm"),
];

/// A fixture's bytes.
fn fixture(name: &str) -> Vec<u8> {
    let path = format!("{}/tests/data/formats/{name}", env!("CARGO_MANIFEST_DIR"));
    std::fs::read(&path).unwrap_or_else(|e| panic!("{path}: {e}"))
}

/// Uploads a fixture as multipart with the settings, the labels and `extra` fields (a key may
/// repeat); returns the status and the JSON answer.
async fn send(server: &TestServer, name: &str, extra: &[(&str, &str)]) -> (u16, Value) {
    let mut form = reqwest::multipart::Form::new()
        .text("instrument", "osprey")
        .text("trap", "trap-1");
    for (k, v) in SETTINGS.iter().chain(extra) {
        form = form.text(k.to_string(), v.to_string());
    }
    form = form.part(
        "file",
        reqwest::multipart::Part::bytes(fixture(name)).file_name(name.to_string()),
    );
    let response = server
        .client
        .post(server.url("/api/v1/calibrations"))
        .multipart(form)
        .send()
        .await
        .expect("upload request");
    let status = response.status().as_u16();
    (status, response.json().await.expect("JSON answer"))
}

/// The axes of the calibration of record.npy computed offline with the same settings.
fn npy_axes() -> Value {
    let mut settings = Settings::default();
    for (k, v) in SETTINGS {
        settings.apply(k, v).expect("setting");
    }
    let report = trapwise::pipeline::run("record.npy", &fixture("record.npy"), &settings, false)
        .expect("record.npy calibrates");
    serde_json::to_value(&report).expect("JSON")["axes"].clone()
}

/// The axes of an answer without the axis names, which a `.npz` of named members sets.
fn unnamed(axes: &Value) -> Value {
    let mut axes = axes.clone();
    if let Some(list) = axes.as_array_mut() {
        for axis in list {
            if let Some(map) = axis.as_object_mut() {
                map.remove("name");
                map.remove("plots");
            }
        }
    }
    axes
}

async fn every_format_of_the_record_gives_the_npy_calibration(backend: Backend) {
    let db = TestDb::new(backend).await;
    let server = TestServer::start(&db, options()).await;
    let expected = unnamed(&npy_axes());
    let cases: [(&str, &[(&str, &str)]); 5] = [
        ("record_xy.npz", &[("dataset", "x"), ("dataset", "y")]),
        ("record_xy_deflated.npz", &[("dataset", "x,y")]),
        ("record_semicolon.csv", &[]),
        ("record.csv.gz", &[]),
        ("record.npy.gz", &[]),
    ];
    for (name, extra) in cases {
        let (status, doc) = send(&server, name, extra).await;
        assert_eq!(status, 201, "{name}: {doc}");
        assert_eq!(unnamed(&doc["result"]["axes"]), expected, "{name}");
    }
    server.stop().await;
}

/// A refused upload: the fixture, extra fields, the problem code and the field it names.
type BadCase = (
    &'static str,
    &'static [(&'static str, &'static str)],
    &'static str,
    Option<&'static str>,
);

async fn damaged_or_unchoosable_files_are_400_with_their_code_and_field(backend: Backend) {
    let db = TestDb::new(backend).await;
    let server = TestServer::start(&db, options()).await;
    let before = server.store.counts().await.expect("counts");
    let cases: [BadCase; 5] = [
        ("corrupt.csv.gz", &[], "compressed-corrupt", None),
        ("not_an_archive.npz", &[], "zip-corrupt", None),
        ("record_xy.npz", &[], "dataset-choice", Some("dataset")),
        (
            "record_xy.npz",
            &[("dataset", "z")],
            "dataset-missing",
            Some("dataset"),
        ),
        (
            "mixed_marks.csv",
            &[],
            "decimal-mark-ambiguous",
            Some("decimal_comma"),
        ),
    ];
    for (name, extra, code, field) in cases {
        let (status, problem) = send(&server, name, extra).await;
        assert_eq!(status, 400, "{name}: {problem}");
        assert_eq!(problem["code"], code, "{name}: {problem}");
        assert_eq!(problem["field"].as_str(), field, "{name}: {problem}");
    }
    assert_eq!(server.store.counts().await.expect("counts"), before);
    server.stop().await;
}

async fn a_compression_bomb_is_413_and_stores_nothing(backend: Backend) {
    let db = TestDb::new(backend).await;
    // The bomb is about 16 KiB on the wire and 16 MiB decompressed.
    let limit = ServiceOptions {
        max_upload_bytes: 1 << 20,
        ..options()
    };
    let server = TestServer::start(&db, limit).await;
    let before = server.store.counts().await.expect("counts");
    let (status, problem) = send(&server, "bomb.csv.gz", &[]).await;
    assert_eq!(status, 413, "{problem}");
    assert_eq!(problem["code"], "upload-too-large");
    let detail = problem["detail"].as_str().unwrap_or_default();
    assert!(
        detail.contains("1048576 bytes") && detail.contains("decompresses"),
        "{detail}"
    );
    assert_eq!(server.store.counts().await.expect("counts"), before);
    server.stop().await;
}

/// `trapwise inspect` of fixtures, text and JSON, with and without the reading flags: each
/// invocation with its exit code, stdout and stderr, pinned by the snapshot `inspect.txt`.
#[test]
fn inspect_shows_format_layout_datasets_and_missing_settings() {
    let dir = format!("{}/tests/data/formats", env!("CARGO_MANIFEST_DIR"));
    let runs: [&[&str]; 9] = [
        &["record_xy.npz"],
        &[
            "record_xy.npz",
            "--dataset",
            "x",
            "--dataset",
            "y",
            "--json",
        ],
        &["record_single.npz"],
        &["record.npy.gz"],
        &["record_semicolon.csv", "--json"],
        &["record_um.csv"],
        &["mixed_marks.csv"],
        &["one_column_comma.csv", "--decimal-comma"],
        &["not_an_archive.npz"],
    ];
    let mut printed = String::new();
    for run in runs {
        let (file, flags) = run.split_first().expect("a file");
        let output = binary()
            .arg("inspect")
            .arg(format!("{dir}/{file}"))
            .args(flags)
            .output()
            .expect("run trapwise");
        printed.push_str(&format!(
            "$ trapwise inspect {}\nexit {}\n{}{}\n",
            run.join(" "),
            output.status.code().unwrap_or(-1),
            String::from_utf8_lossy(&output.stdout),
            String::from_utf8_lossy(&output.stderr),
        ));
    }
    check_snapshot("inspect.txt", &printed);
}

async fn inspect_endpoint_answers_what_the_file_holds_and_stores_nothing(backend: Backend) {
    let db = TestDb::new(backend).await;
    let server = TestServer::start(&db, options()).await;
    let before = server.store.counts().await.expect("counts");
    let post = |query: &str, name: &str| {
        server
            .client
            .post(server.url(&format!("/api/v1/inspect?{query}")))
            .header("content-type", "application/octet-stream")
            .body(fixture(name))
            .send()
    };
    let response = post(
        "file_name=record_xy.npz&dataset=x&dataset=y",
        "record_xy.npz",
    )
    .await
    .expect("inspect");
    assert_eq!(response.status().as_u16(), 200);
    let doc: Value = response.json().await.expect("JSON");
    assert_eq!(doc["format"], "npz");
    assert_eq!(doc["chosen"], serde_json::json!(["x", "y"]));
    assert_eq!(doc["datasets"][1]["shape"], "(8192,)");
    assert_eq!(doc["missing"][0]["field"], "sample_rate_hz");
    assert_eq!(doc["missing"][0]["flag"], "--sample-rate HZ");
    let response = post("file_name=not_an_archive.npz", "not_an_archive.npz")
        .await
        .expect("inspect");
    assert_eq!(response.status().as_u16(), 400);
    let problem: Value = response.json().await.expect("JSON");
    assert_eq!(problem["code"], "zip-corrupt", "{problem}");
    assert_eq!(server.store.counts().await.expect("counts"), before);
    server.stop().await;
}

on_both_backends!(
    inspect_endpoint_answers_what_the_file_holds_and_stores_nothing,
    every_format_of_the_record_gives_the_npy_calibration,
    damaged_or_unchoosable_files_are_400_with_their_code_and_field,
    a_compression_bomb_is_413_and_stores_nothing,
);
