//! The service end to end: a real server on port 0, reqwest over the socket, the real binary
//! as the offline reference, on SQLite and on PostgreSQL. The problem documents of bad uploads
//! are pinned by a snapshot (set TRAPWISE_UPDATE_SNAPSHOTS=1 to rewrite it after a deliberate
//! change).

use crate::on_both_backends;
use crate::support::{
    Backend, DemoFile, TestDb, TestServer, binary, check_snapshot, cli_result, demo_csv,
    demo_files, get, get_json, options, status_type_body, upload, with_query,
};
use serde_json::Value;
use trapwise::http::ServiceOptions;
use trapwise::store::Counts;

const LABELS: [(&str, &str); 3] = [
    ("instrument", "bench-a"),
    ("trap", "trap-1"),
    ("note", "after realignment"),
];

fn text(v: &Value, key: &str) -> String {
    v[key].as_str().unwrap_or_default().to_string()
}

async fn counts(server: &TestServer) -> Counts {
    server.store.counts().await.expect("counts")
}

async fn every_demo_file_gives_the_cli_numbers_and_its_bytes_back(backend: Backend) {
    let db = TestDb::new(backend).await;
    let dir = tempfile::tempdir().expect("temporary folder");
    let server = TestServer::start(&db, options()).await;
    for file in demo_files(dir.path()) {
        let (status, doc) = upload(&server, &file, &LABELS, None).await;
        assert_eq!(status, 201, "{}: {doc}", file.name());
        // The service's result equals the offline CLI's JSON number for number.
        assert_eq!(doc["result"], cli_result(&file), "{}", file.name());
        // The drive's fields reach the calibration as the command line's flags do.
        let driven = file.name() == "driven.csv";
        let axis = &doc["result"]["axes"][0];
        assert_eq!(axis["active"].is_object(), driven, "{}", file.name());
        assert_eq!(
            axis["drag_pn_s_per_nm"]["source"],
            if driven { "measured" } else { "assumed" },
            "{}",
            file.name()
        );
        assert_eq!(text(&doc, "instrument"), "bench-a");
        assert_eq!(text(&doc, "note"), "after realignment");
        let id = text(&doc, "id");
        let (status, fetched) =
            get_json(&server, &format!("/api/v1/calibrations/{id}"), None).await;
        assert_eq!(status, 200);
        assert_eq!(fetched, doc);
        let (status, content_type, raw) = get(
            &server,
            doc["links"]["recording"].as_str().unwrap_or(""),
            None,
        )
        .await;
        assert_eq!(
            (status, content_type.as_str()),
            (200, "application/octet-stream")
        );
        assert!(
            raw == file.bytes(),
            "{}: download differs from upload",
            file.name()
        );
        let (status, plots) =
            get_json(&server, doc["links"]["plots"].as_str().unwrap_or(""), None).await;
        assert_eq!(status, 200);
        let n_axes = doc["result"]["axes"].as_array().map_or(0, Vec::len);
        assert_eq!(plots["axes"].as_array().map_or(0, Vec::len), n_axes);
        for axis in plots["axes"].as_array().into_iter().flatten() {
            let n_freq = axis["spectrum"]["frequency_hz"]
                .as_array()
                .map_or(0, Vec::len);
            assert!(
                n_freq > 10,
                "{}: spectrum of {} points",
                file.name(),
                n_freq
            );
            assert_eq!(
                axis["spectrum"]["psd"].as_array().map_or(0, Vec::len),
                n_freq
            );
            let n_lags = axis["autocorrelation"]["lag_s"]
                .as_array()
                .map_or(0, Vec::len);
            assert!(n_lags > 1, "{}: {n_lags} lags", file.name());
            assert_eq!(
                axis["autocorrelation"]["model"]
                    .as_array()
                    .map_or(0, Vec::len),
                n_lags
            );
            assert!(axis["histogram"]["count"].as_array().map_or(0, Vec::len) > 3);
        }
    }
    let c = counts(&server).await;
    assert_eq!(
        (c.calibrations, c.recordings, c.blob_files, c.temp_files),
        (6, 6, 6, 0)
    );
    server.stop().await;
}

async fn a_retried_upload_returns_the_stored_calibration_and_stores_nothing_new(backend: Backend) {
    let db = TestDb::new(backend).await;
    let dir = tempfile::tempdir().expect("temporary folder");
    let server = TestServer::start(&db, options()).await;
    let file = demo_csv(dir.path(), "retry.csv", 21);
    let (status, first) = upload(&server, &file, &LABELS, None).await;
    assert_eq!(status, 201);
    let before = counts(&server).await;
    let (status, again) = upload(&server, &file, &LABELS, None).await;
    assert_eq!(status, 200);
    assert_eq!(again, first);
    // The raw-body form with query parameters carries the same upload: same calibration.
    let mut query: Vec<(String, String)> = file.fields();
    query.extend(LABELS.iter().map(|(k, v)| (k.to_string(), v.to_string())));
    query.push(("file_name".into(), file.name()));
    let response = server
        .client
        .post(server.url(&with_query("/api/v1/calibrations", &query)))
        .header("content-type", "text/csv")
        .body(file.bytes())
        .send()
        .await
        .expect("raw upload");
    assert_eq!(response.status().as_u16(), 200);
    let raw: Value = response.json().await.expect("JSON");
    assert_eq!(raw, first);
    assert_eq!(counts(&server).await, before);
    // Other run conditions make another calibration of the same bytes, which are kept once.
    let mut warmer: DemoFile = file.clone();
    warmer.conditions[1].2 = "30".into();
    let (status, other) = upload(&server, &warmer, &LABELS, None).await;
    assert_eq!(status, 201, "{other}");
    assert_ne!(other["id"], first["id"]);
    let after = counts(&server).await;
    assert_eq!(after.calibrations, before.calibrations + 1);
    assert_eq!(
        (after.recordings, after.blob_files),
        (before.recordings, before.blob_files)
    );
    server.stop().await;
}

async fn raw_body_upload_stores_a_new_calibration_with_the_cli_numbers(backend: Backend) {
    let db = TestDb::new(backend).await;
    let dir = tempfile::tempdir().expect("temporary folder");
    let server = TestServer::start(&db, options()).await;
    let file = demo_csv(dir.path(), "scripted.csv", 22);
    let mut query: Vec<(String, String)> = file.fields();
    query.extend([
        ("instrument".to_string(), "bench-b".to_string()),
        ("trap".to_string(), "trap-2".to_string()),
        ("file_name".to_string(), file.name()),
        ("axes".to_string(), "x,y".to_string()),
    ]);
    let response = server
        .client
        .post(server.url(&with_query("/api/v1/calibrations", &query)))
        .header("content-type", "application/octet-stream")
        .body(file.bytes())
        .send()
        .await
        .expect("raw upload");
    assert_eq!(response.status().as_u16(), 201);
    let location = response
        .headers()
        .get("location")
        .and_then(|v| v.to_str().ok())
        .unwrap_or("")
        .to_string();
    let doc: Value = response.json().await.expect("JSON");
    assert_eq!(location, doc["links"]["self"].as_str().unwrap_or("-"));
    assert_eq!(doc["result"], cli_result(&file));
    assert_eq!(doc["axes_labels"], serde_json::json!(["x", "y"]));
    server.stop().await;
}

async fn listing_filters_by_instrument_trap_and_time_and_pages(backend: Backend) {
    let db = TestDb::new(backend).await;
    let dir = tempfile::tempdir().expect("temporary folder");
    let server = TestServer::start(&db, options()).await;
    let file = demo_csv(dir.path(), "list.csv", 23);
    let mut ids = Vec::new();
    for (instrument, trap) in [("bench-a", "t1"), ("bench-a", "t2"), ("bench-b", "t1")] {
        let (status, doc) = upload(
            &server,
            &file,
            &[("instrument", instrument), ("trap", trap)],
            None,
        )
        .await;
        assert_eq!(status, 201);
        ids.push((text(&doc, "id"), doc["created_at_ms"].as_i64().unwrap_or(0)));
        // Distinct milliseconds make the time-window checks exact.
        tokio::time::sleep(std::time::Duration::from_millis(5)).await;
    }
    let listed_ids = |page: &Value| -> Vec<String> {
        page["items"]
            .as_array()
            .into_iter()
            .flatten()
            .map(|d| text(d, "id"))
            .collect()
    };
    let (_, all) = get_json(&server, "/api/v1/calibrations", None).await;
    let newest_first: Vec<String> = ids.iter().rev().map(|(id, _)| id.clone()).collect();
    assert_eq!(listed_ids(&all), newest_first);
    assert_eq!(all["next_cursor"], Value::Null);
    let (_, bench_a) = get_json(&server, "/api/v1/calibrations?instrument=bench-a", None).await;
    assert_eq!(
        listed_ids(&bench_a),
        vec![ids[1].0.clone(), ids[0].0.clone()]
    );
    let (_, t1) = get_json(
        &server,
        "/api/v1/calibrations?trap=t1&instrument=bench-b",
        None,
    )
    .await;
    assert_eq!(listed_ids(&t1), vec![ids[2].0.clone()]);
    let window = format!(
        "/api/v1/calibrations?from_ms={}&to_ms={}",
        ids[1].1, ids[2].1
    );
    let (_, in_window) = get_json(&server, &window, None).await;
    assert_eq!(listed_ids(&in_window), vec![ids[1].0.clone()]);
    let (_, page1) = get_json(&server, "/api/v1/calibrations?limit=2", None).await;
    assert_eq!(listed_ids(&page1), newest_first[..2].to_vec());
    let next = page1["next"].as_str().unwrap_or("").to_string();
    let (_, page2) = get_json(&server, &next, None).await;
    assert_eq!(listed_ids(&page2), newest_first[2..].to_vec());
    assert_eq!(page2["next"], Value::Null);
    server.stop().await;
}

async fn history_gives_kappa_beta_and_fc_per_axis_oldest_first(backend: Backend) {
    let db = TestDb::new(backend).await;
    let dir = tempfile::tempdir().expect("temporary folder");
    let server = TestServer::start(&db, options()).await;
    let mut docs = Vec::new();
    for seed in [31, 32] {
        let file = demo_csv(dir.path(), &format!("week{seed}.csv"), seed);
        let (status, doc) = upload(
            &server,
            &file,
            &[("instrument", "bench a"), ("trap", "trap/1")],
            None,
        )
        .await;
        assert_eq!(status, 201);
        docs.push(doc);
    }
    // Labels with a space and a slash travel percent-encoded in the link.
    let link = docs[0]["links"]["history"]
        .as_str()
        .unwrap_or("")
        .to_string();
    assert_eq!(link, "/api/v1/instruments/bench%20a/traps/trap%2F1/history");
    let (status, history) = get_json(&server, &link, None).await;
    assert_eq!(status, 200, "{history}");
    let axes = history["axes"].as_array().cloned().unwrap_or_default();
    assert_eq!(axes.len(), 2);
    for (axis_idx, axis) in axes.iter().enumerate() {
        let points = axis["points"].as_array().cloned().unwrap_or_default();
        assert_eq!(points.len(), 2);
        for (point, doc) in points.iter().zip(&docs) {
            let report_axis = &doc["result"]["axes"][axis_idx];
            assert_eq!(axis["axis"], report_axis["axis"]);
            assert_eq!(point["calibration_id"], doc["id"]);
            assert_eq!(
                point["stiffness_pn_per_nm"],
                report_axis["stiffness_pn_per_nm"]["consensus"]
            );
            assert_eq!(
                point["corner_frequency_hz"],
                report_axis["corner_frequency_hz"]
            );
            assert_eq!(
                point["sensitivity_nm_per_v"],
                report_axis["sensitivity_nm_per_v"]
            );
        }
    }
    server.stop().await;
}

async fn trap_list_counts_each_trap_of_the_lab_in_byte_order(backend: Backend) {
    let db = TestDb::new(backend).await;
    let dir = tempfile::tempdir().expect("temporary folder");
    let server = TestServer::start(&db, options()).await;
    let (status, empty) = get_json(&server, "/api/v1/instruments", None).await;
    assert_eq!((status, &empty["traps"]), (200, &serde_json::json!([])));
    // "Bench-B" sorts before "bench-a" byte-wise ('B' < 'b'); a locale-aware collation (which
    // PostgreSQL uses when its cluster has, say, an en_US locale; the one here is C.UTF-8) would
    // put it after: the order must not depend on the database's collation.
    let uploads = [
        ("bench-a", "t1", 41),
        ("Bench-B", "t9", 42),
        ("bench-a", "t1", 43),
        ("bench-a", "t 2", 44),
    ];
    let mut docs = Vec::new();
    for (instrument, trap, seed) in uploads {
        let file = demo_csv(dir.path(), &format!("traps{seed}.csv"), seed);
        let (status, doc) = upload(
            &server,
            &file,
            &[("instrument", instrument), ("trap", trap)],
            None,
        )
        .await;
        assert_eq!(status, 201, "{doc}");
        docs.push(doc);
        tokio::time::sleep(std::time::Duration::from_millis(5)).await;
    }
    let at = |i: usize| docs[i]["created_at_ms"].as_i64().unwrap_or(-1);
    let (status, list) = get_json(&server, "/api/v1/instruments", None).await;
    assert_eq!(status, 200, "{list}");
    let traps = list["traps"].as_array().cloned().unwrap_or_default();
    let summary: Vec<(String, String, i64, i64, i64)> = traps
        .iter()
        .map(|t| {
            (
                text(t, "instrument"),
                text(t, "trap"),
                t["calibrations"].as_i64().unwrap_or(-1),
                t["first_at_ms"].as_i64().unwrap_or(-1),
                t["latest_at_ms"].as_i64().unwrap_or(-1),
            )
        })
        .collect();
    let row = |i: &str, t: &str, n, first, latest| (i.to_string(), t.to_string(), n, first, latest);
    assert_eq!(
        summary,
        vec![
            row("Bench-B", "t9", 1, at(1), at(1)),
            row("bench-a", "t 2", 1, at(3), at(3)),
            row("bench-a", "t1", 2, at(0), at(2)),
        ]
    );
    // Each entry links to the history its calibrations give.
    for (entry, doc) in traps.iter().zip([&docs[1], &docs[3], &docs[0]]) {
        assert_eq!(entry["history"], doc["links"]["history"]);
    }
    let (status, history) = get_json(&server, &text(&traps[2], "history"), None).await;
    assert_eq!(status, 200);
    assert_eq!(
        history["axes"][0]["points"].as_array().map(Vec::len),
        Some(2)
    );
    let (status, problem) = get_json(&server, "/api/v1/instruments?limit=5", None).await;
    assert_eq!(
        (status, problem["code"].as_str()),
        (400, Some("unknown-field"))
    );
    server.stop().await;
}

/// One bad upload: the request parts and what must come back.
struct BadCase {
    what: &'static str,
    file_name: &'static str,
    bytes: Vec<u8>,
    fields: Vec<(&'static str, String)>,
    status: u16,
    code: &'static str,
    field: Option<&'static str>,
    detail_has: &'static str,
}

fn conditions() -> Vec<(&'static str, String)> {
    vec![
        ("instrument", "bench-a".into()),
        ("trap", "trap-1".into()),
        ("bead_diameter_um", "1".into()),
        ("temperature_c", "25".into()),
    ]
}

fn with(extra: &[(&'static str, &str)]) -> Vec<(&'static str, String)> {
    let mut fields = conditions();
    for (k, v) in extra {
        fields.retain(|(key, _)| key != k);
        if !v.is_empty() {
            fields.push((k, v.to_string()));
        }
    }
    fields
}

fn csv_rows(n_rows: usize, jump_at: Option<usize>) -> Vec<u8> {
    let mut text = String::from("time_s,x_nm\n");
    for i in 0..n_rows {
        let t = if jump_at.is_some_and(|j| i >= j) {
            i + 5
        } else {
            i
        };
        text.push_str(&format!("{},{}\n", t as f64 * 1e-4, (i % 7) as f64 - 3.0));
    }
    text.into_bytes()
}

fn bad_cases(good_csv: &[u8]) -> Vec<BadCase> {
    let case = |what, file_name, bytes: &[u8], fields, status, code, field, detail_has| BadCase {
        what,
        file_name,
        bytes: bytes.to_vec(),
        fields,
        status,
        code,
        field,
        detail_has,
    };
    vec![
        case(
            "empty file",
            "run.csv",
            b"",
            conditions(),
            400,
            "empty-file",
            None,
            "empty",
        ),
        case(
            "ragged row",
            "run.csv",
            b"time_s,x_nm\n0,1\n0.1,2,3\n",
            conditions(),
            400,
            "ragged-row",
            None,
            "line 3",
        ),
        case(
            "non-numeric cell",
            "run.csv",
            b"time_s,x_nm\n0,1\n0.1,abc\n",
            conditions(),
            400,
            "non-numeric-cell",
            None,
            "line 3, column 2",
        ),
        case(
            "invalid UTF-8",
            "run.csv",
            b"\xff\xfe,x\n",
            conditions(),
            400,
            "invalid-utf8",
            None,
            "byte offset 0",
        ),
        case(
            "no data rows",
            "run.csv",
            b"time_s,x_nm\n",
            conditions(),
            400,
            "no-data-rows",
            None,
            "line 1",
        ),
        case(
            "npy without magic",
            "run.npy",
            b"hello",
            with(&[("units", "nm"), ("sample_rate_hz", "1000")]),
            400,
            "npy-bad-magic",
            None,
            "byte offset 0",
        ),
        case(
            "truncated binary frame",
            "run.f64",
            &[0u8; 7],
            with(&[
                ("format", "raw-f64"),
                ("sample_rate_hz", "1000"),
                ("units", "nm"),
            ]),
            400,
            "truncated-binary",
            None,
            "byte offset 0",
        ),
        case(
            "unknown format",
            "run.bin",
            b"\x01\x02\x03\x04",
            conditions(),
            415,
            "unknown-format",
            None,
            ".bin",
        ),
        case(
            "unsupported npy dtype",
            "run.npy",
            &npy_complex(),
            with(&[("units", "nm"), ("sample_rate_hz", "1000")]),
            415,
            "npy-unsupported-dtype",
            None,
            "byte offset 10",
        ),
        case(
            "too few samples",
            "run.csv",
            &csv_rows(20, None),
            conditions(),
            422,
            "too-few-samples",
            None,
            "20 samples",
        ),
        case(
            "uneven time steps",
            "run.csv",
            &csv_rows(1100, Some(600)),
            conditions(),
            422,
            "time-step-not-uniform",
            None,
            "line",
        ),
        case(
            "missing bead diameter",
            "run.csv",
            good_csv,
            with(&[("bead_diameter_um", "")]),
            400,
            "missing-field",
            Some("bead_diameter_um"),
            "bead_diameter_um",
        ),
        case(
            "unknown setting",
            "run.csv",
            good_csv,
            with(&[("bead_size", "1")]),
            400,
            "unknown-field",
            Some("bead_size"),
            "bead_size",
        ),
        case(
            "bad setting value",
            "run.csv",
            good_csv,
            with(&[("temperature_c", "warm")]),
            400,
            "invalid-field",
            Some("temperature_c"),
            "warm",
        ),
        case(
            "missing instrument",
            "run.csv",
            good_csv,
            with(&[("instrument", "")]),
            400,
            "missing-field",
            Some("instrument"),
            "instrument",
        ),
        case(
            "duplicate field",
            "run.csv",
            good_csv,
            {
                let mut f = conditions();
                f.push(("trap", "again".into()));
                f
            },
            400,
            "duplicate-field",
            Some("trap"),
            "twice",
        ),
        case(
            "water out of range",
            "run.csv",
            good_csv,
            // Within the setting's range, beyond the water model's 0 to 99 °C.
            with(&[("temperature_c", "120")]),
            422,
            "viscosity-unavailable",
            Some("temperature_c"),
            "120",
        ),
        case(
            "negative bead diameter",
            "run.csv",
            good_csv,
            with(&[("bead_diameter_um", "-1")]),
            400,
            "invalid-field",
            Some("bead_diameter_um"),
            "expected a number from 0.01 to 100",
        ),
        case(
            "npy without a sample rate",
            "one.npy",
            &npy_f8(2000),
            with(&[("units", "nm")]),
            400,
            "sample-rate-missing",
            Some("sample_rate_hz"),
            "sample rate",
        ),
        case(
            "time going backwards",
            "run.csv",
            &csv_backwards(1100),
            conditions(),
            422,
            "time-not-increasing",
            None,
            "line",
        ),
        case(
            "axis labels do not match",
            "run.csv",
            good_csv,
            with(&[("axes", "x,y,z")]),
            400,
            "axes-mismatch",
            Some("axes"),
            "3 axes",
        ),
    ]
}

/// A complex128 .npy of 300 zeros, laid out as numpy.save writes it (NumPy enhancement
/// proposal 1: magic, version 1.0, little-endian header length, header padded to 64 bytes).
fn npy_complex() -> Vec<u8> {
    let mut bytes = npy_header("<c16", 300);
    bytes.extend(std::iter::repeat_n(0u8, 300 * 16));
    bytes
}

/// A float64 .npy of `n` samples of a sawtooth, in the same layout.
fn npy_f8(n: usize) -> Vec<u8> {
    let mut bytes = npy_header("<f8", n);
    for i in 0..n {
        bytes.extend_from_slice(&((i % 13) as f64).to_le_bytes());
    }
    bytes
}

/// The magic, version 1.0 and padded header of a one-dimensional .npy.
fn npy_header(descr: &str, n: usize) -> Vec<u8> {
    let mut padded = format!("{{'descr': '{descr}', 'fortran_order': False, 'shape': ({n},), }}");
    while (10 + padded.len() + 1) % 64 != 0 {
        padded.push(' ');
    }
    padded.push('\n');
    let mut bytes = b"\x93NUMPY\x01\x00".to_vec();
    bytes.extend_from_slice(&u16::try_from(padded.len()).unwrap_or(0).to_le_bytes());
    bytes.extend_from_slice(padded.as_bytes());
    bytes
}

/// A CSV whose time column steps back once, at row 700.
fn csv_backwards(n_rows: usize) -> Vec<u8> {
    let mut text = String::from("time_s,x_nm\n");
    for i in 0..n_rows {
        let t = if i == 700 { 0.0 } else { i as f64 * 1e-4 };
        text.push_str(&format!("{t},{}\n", (i % 7) as f64 - 3.0));
    }
    text.into_bytes()
}

#[track_caller]
fn check_problem(
    what: &str,
    (status, content_type, body): (u16, &str, &[u8]),
    expected_status: u16,
    code: &str,
    field: Option<&str>,
    detail_has: &str,
) {
    assert_eq!(
        status,
        expected_status,
        "{what}: {}",
        String::from_utf8_lossy(body)
    );
    assert_eq!(content_type, "application/problem+json", "{what}");
    let problem: Value = serde_json::from_slice(body).unwrap_or(Value::Null);
    assert_eq!(
        problem["type"],
        format!("https://trapwise.invalid/problems/{code}"),
        "{what}: {problem}"
    );
    assert_eq!(problem["code"], code, "{what}");
    assert_eq!(problem["status"], expected_status, "{what}");
    assert!(
        problem["title"].as_str().is_some_and(|t| !t.is_empty()),
        "{what}"
    );
    assert_eq!(problem["field"].as_str(), field, "{what}: {problem}");
    let detail = problem["detail"].as_str().unwrap_or("");
    assert!(
        detail.contains(detail_has),
        "{what}: detail `{detail}` lacks `{detail_has}`"
    );
}

async fn send_case(
    server: &TestServer,
    case: &BadCase,
    token: Option<&str>,
) -> (u16, String, Vec<u8>) {
    let mut form = reqwest::multipart::Form::new();
    for (k, v) in &case.fields {
        form = form.text(k.to_string(), v.clone());
    }
    form = form.part(
        "file",
        reqwest::multipart::Part::bytes(case.bytes.clone()).file_name(case.file_name),
    );
    let mut request = server
        .client
        .post(server.url("/api/v1/calibrations"))
        .multipart(form);
    if let Some(t) = token {
        request = request.bearer_auth(t);
    }
    status_type_body(request.send().await.expect("request")).await
}

async fn bad_uploads_get_their_status_and_problem_and_store_nothing(backend: Backend) {
    let db = TestDb::new(backend).await;
    let dir = tempfile::tempdir().expect("temporary folder");
    let server = TestServer::start(&db, options()).await;
    let good = demo_csv(dir.path(), "good.csv", 41);
    let (status, _) = upload(&server, &good, &LABELS, None).await;
    assert_eq!(status, 201);
    let before = counts(&server).await;
    let mut snapshot = String::new();
    for case in bad_cases(&good.bytes()) {
        let (status, content_type, body) = send_case(&server, &case, None).await;
        let problem: Value = serde_json::from_slice(&body).unwrap_or(Value::Null);
        snapshot.push_str(&format!(
            "== {}\n{}\n\n",
            case.what,
            serde_json::to_string_pretty(&problem).unwrap_or_default()
        ));
        check_problem(
            case.what,
            (status, &content_type, &body),
            case.status,
            case.code,
            case.field,
            case.detail_has,
        );
        assert_eq!(
            counts(&server).await,
            before,
            "{}: the store changed",
            case.what
        );
    }
    // The problem documents are the same on both backends, word for word.
    check_snapshot("problems.txt", &snapshot);
    // Request-level mistakes: no file part, a content type that is not a recording.
    let form = reqwest::multipart::Form::new()
        .text("instrument", "bench-a")
        .text("trap", "t");
    let response = server
        .client
        .post(server.url("/api/v1/calibrations"))
        .multipart(form)
        .send()
        .await
        .expect("request");
    let (status, ct) = (
        response.status().as_u16(),
        response
            .headers()
            .get("content-type")
            .and_then(|v| v.to_str().ok())
            .unwrap_or("")
            .to_string(),
    );
    check_problem(
        "missing file part",
        (status, &ct, &response.bytes().await.expect("body")),
        400,
        "missing-field",
        Some("file"),
        "file",
    );
    let response = server
        .client
        .post(server.url("/api/v1/calibrations?instrument=a&trap=b"))
        .header("content-type", "application/json")
        .body("{\"samples\": [1, 2, 3]}")
        .send()
        .await
        .expect("request");
    let (status, ct) = (
        response.status().as_u16(),
        response
            .headers()
            .get("content-type")
            .and_then(|v| v.to_str().ok())
            .unwrap_or("")
            .to_string(),
    );
    check_problem(
        "wrong content type",
        (status, &ct, &response.bytes().await.expect("body")),
        415,
        "unsupported-media-type",
        None,
        "application/json",
    );
    let (status, ct, body) = get(
        &server,
        "/api/v1/calibrations/01000000-0000-7000-8000-000000000000",
        None,
    )
    .await;
    check_problem(
        "unknown id",
        (status, &ct, &body),
        404,
        "not-found",
        None,
        "01000000-0000-7000-8000-000000000000",
    );
    let (status, ct, body) = get(&server, "/api/v1/calibrations?limit=0", None).await;
    check_problem(
        "page size zero",
        (status, &ct, &body),
        400,
        "invalid-field",
        Some("limit"),
        "1 to 500",
    );
    let (status, ct, body) = get(&server, "/api/v1/calibrations?cursor=nonsense", None).await;
    check_problem(
        "bad cursor",
        (status, &ct, &body),
        400,
        "invalid-field",
        Some("cursor"),
        "nonsense",
    );
    let (status, ct, body) = get(&server, "/api/v1/nothing-here", None).await;
    check_problem(
        "unknown route",
        (status, &ct, &body),
        404,
        "not-found",
        None,
        "/api/v1/nothing-here",
    );
    assert_eq!(counts(&server).await, before);
    server.stop().await;
}

async fn uploads_past_the_limit_are_413_and_store_nothing(backend: Backend) {
    let db = TestDb::new(backend).await;
    let dir = tempfile::tempdir().expect("temporary folder");
    let limit = ServiceOptions {
        max_upload_bytes: 4096,
        ..options()
    };
    let server = TestServer::start(&db, limit).await;
    let file = demo_csv(dir.path(), "big.csv", 42);
    let before = counts(&server).await;
    // Multipart with a Content-Length: refused from the header, before the body is read.
    let (status, body) = upload(&server, &file, &LABELS, None).await;
    assert_eq!(status, 413, "{body}");
    assert_eq!(body["code"], "upload-too-large");
    assert!(body["detail"].as_str().unwrap_or("").contains("4096 bytes"));
    // A chunked raw body has no length up front: refused while streaming.
    let bytes = file.bytes()[..6000].to_vec();
    let stream = futures_util::stream::iter(
        bytes
            .chunks(1500)
            .map(|c| Ok::<_, std::io::Error>(c.to_vec()))
            .collect::<Vec<_>>(),
    );
    let response = server
        .client
        .post(server.url("/api/v1/calibrations?instrument=a&trap=b&bead_diameter_um=1&temperature_c=25&file_name=big.csv"))
        .header("content-type", "text/csv")
        .body(reqwest::Body::wrap_stream(stream))
        .send()
        .await
        .expect("chunked upload");
    assert_eq!(response.status().as_u16(), 413);
    assert_eq!(
        response
            .headers()
            .get("content-type")
            .and_then(|v| v.to_str().ok()),
        Some("application/problem+json")
    );
    assert_eq!(counts(&server).await, before);
    server.stop().await;
}

async fn tokens_confine_each_lab_to_its_own_calibrations(backend: Backend) {
    let db = TestDb::new(backend).await;
    let dir = tempfile::tempdir().expect("temporary folder");
    let secured = ServiceOptions {
        tokens_required: true,
        ..options()
    };
    let server = TestServer::start(&db, secured).await;
    let (_, lab_a) = server.store.create_token("lab-a").await.expect("token a");
    let (info_b, lab_b) = server.store.create_token("lab-b").await.expect("token b");
    let file = demo_csv(dir.path(), "secure.csv", 51);
    let before = counts(&server).await;
    let response = server
        .client
        .get(server.url("/api/v1/calibrations"))
        .send()
        .await
        .expect("request");
    assert_eq!(response.status().as_u16(), 401);
    assert!(response.headers().get("www-authenticate").is_some());
    let problem: Value = response.json().await.expect("problem");
    assert_eq!(problem["code"], "token-required");
    let (status, problem) = upload(&server, &file, &LABELS, Some("tw_not-a-token")).await;
    assert_eq!((status, problem["code"].as_str()), (401, Some("bad-token")));
    assert_eq!(counts(&server).await, before);

    let (status, doc) = upload(&server, &file, &LABELS, Some(&lab_a)).await;
    assert_eq!(status, 201);
    let id = text(&doc, "id");
    for path in [
        format!("/api/v1/calibrations/{id}"),
        format!("/api/v1/calibrations/{id}/recording"),
        format!("/api/v1/calibrations/{id}/plots"),
    ] {
        let (status, ct, _) = get(&server, &path, Some(&lab_b)).await;
        assert_eq!(
            (status, ct.as_str()),
            (404, "application/problem+json"),
            "{path}"
        );
        let (status, _, _) = get(&server, &path, Some(&lab_a)).await;
        assert_eq!(status, 200, "{path}");
    }
    let (_, list_b) = get_json(&server, "/api/v1/calibrations", Some(&lab_b)).await;
    assert_eq!(list_b["items"], serde_json::json!([]));
    let (_, history_b) = get_json(
        &server,
        doc["links"]["history"].as_str().unwrap_or(""),
        Some(&lab_b),
    )
    .await;
    assert_eq!(history_b["axes"], serde_json::json!([]));
    let (_, traps_b) = get_json(&server, "/api/v1/instruments", Some(&lab_b)).await;
    assert_eq!(traps_b["traps"], serde_json::json!([]));
    let (_, traps_a) = get_json(&server, "/api/v1/instruments", Some(&lab_a)).await;
    assert_eq!(traps_a["traps"].as_array().map(Vec::len), Some(1));
    // The same upload by lab b is lab b's own calibration, not lab a's.
    let (status, doc_b) = upload(&server, &file, &LABELS, Some(&lab_b)).await;
    assert_eq!(status, 201);
    assert_ne!(doc_b["id"], doc["id"]);
    assert!(server.store.revoke_token(&info_b.id).await.expect("revoke"));
    let (status, _, _) = get(&server, "/api/v1/calibrations", Some(&lab_b)).await;
    assert_eq!(status, 401);
    // Health and metrics stay open for load balancers and scrapers.
    let (status, _, _) = get(&server, "/healthz", None).await;
    assert_eq!(status, 200);
    server.stop().await;
}

async fn a_restarted_service_still_serves_every_calibration(backend: Backend) {
    let db = TestDb::new(backend).await;
    let dir = tempfile::tempdir().expect("temporary folder");
    let server = TestServer::start(&db, options()).await;
    let file = demo_csv(dir.path(), "restart.csv", 61);
    let (status, doc) = upload(&server, &file, &LABELS, None).await;
    assert_eq!(status, 201);
    server.stop().await;
    let restarted = TestServer::start(&db, options()).await;
    let (status, fetched) = get_json(
        &restarted,
        doc["links"]["self"].as_str().unwrap_or(""),
        None,
    )
    .await;
    assert_eq!((status, &fetched), (200, &doc));
    let (_, _, raw) = get(
        &restarted,
        doc["links"]["recording"].as_str().unwrap_or(""),
        None,
    )
    .await;
    assert!(raw == file.bytes());
    let (status, replay) = upload(&restarted, &file, &LABELS, None).await;
    assert_eq!((status, &replay), (200, &doc));
    restarted.stop().await;
}

async fn shutdown_finishes_an_upload_in_flight(backend: Backend) {
    let db = TestDb::new(backend).await;
    let dir = tempfile::tempdir().expect("temporary folder");
    let mut server = TestServer::start(&db, options()).await;
    let file = demo_csv(dir.path(), "in_flight.csv", 81);
    let bytes = file.bytes();
    let half = bytes.len() / 2;
    let (first, second) = (bytes[..half].to_vec(), bytes[half..].to_vec());
    let (release_tx, release_rx) = tokio::sync::oneshot::channel::<()>();
    // The body sends its first half, then waits until the shutdown has begun.
    let body = futures_util::stream::unfold(
        (0, Some(release_rx), first, second),
        |(step, release, first, second)| async move {
            match step {
                0 => Some((
                    Ok::<_, std::io::Error>(first),
                    (1, release, Vec::new(), second),
                )),
                1 => {
                    if let Some(rx) = release {
                        let _ = rx.await;
                    }
                    Some((Ok(second), (2, None, Vec::new(), Vec::new())))
                }
                _ => None,
            }
        },
    );
    let mut query = file.fields();
    query.extend(LABELS.iter().map(|(k, v)| (k.to_string(), v.to_string())));
    query.push(("file_name".into(), file.name()));
    let request = server
        .client
        .post(server.url(&with_query("/api/v1/calibrations", &query)))
        .header("content-type", "text/csv")
        .body(reqwest::Body::wrap_stream(body))
        .send();
    let in_flight = tokio::spawn(request);
    tokio::time::sleep(std::time::Duration::from_millis(300)).await;
    server.begin_shutdown();
    tokio::time::sleep(std::time::Duration::from_millis(100)).await;
    let _ = release_tx.send(());
    let response = in_flight.await.expect("task").expect("upload finishes");
    assert_eq!(response.status().as_u16(), 201);
    let doc: Value = response.json().await.expect("JSON");
    assert_eq!(doc["result"], cli_result(&file));
    server.stop().await;
    let restarted = TestServer::start(&db, options()).await;
    let (status, _) = get_json(
        &restarted,
        doc["links"]["self"].as_str().unwrap_or(""),
        None,
    )
    .await;
    assert_eq!(status, 200);
    restarted.stop().await;
}

async fn a_stalled_upload_is_408_and_stores_nothing(backend: Backend) {
    let db = TestDb::new(backend).await;
    let impatient = ServiceOptions {
        upload_idle_s: 1,
        ..options()
    };
    let server = TestServer::start(&db, impatient).await;
    let before = counts(&server).await;
    let (_hold_tx, hold_rx) = tokio::sync::oneshot::channel::<()>();
    // One chunk, then silence until the test ends.
    let body = futures_util::stream::unfold((0, Some(hold_rx)), |(step, hold)| async move {
        match step {
            0 => Some((
                Ok::<_, std::io::Error>(b"time_s,x_nm\n0,1\n".to_vec()),
                (1, hold),
            )),
            _ => {
                if let Some(rx) = hold {
                    let _ = rx.await;
                }
                None
            }
        }
    });
    let response =
        server
            .client
            .post(server.url(
                "/api/v1/calibrations?instrument=a&trap=b&bead_diameter_um=1&temperature_c=25",
            ))
            .header("content-type", "text/csv")
            .body(reqwest::Body::wrap_stream(body))
            .send()
            .await
            .expect("stalled upload");
    assert_eq!(response.status().as_u16(), 408);
    let problem: Value = response.json().await.expect("problem");
    assert_eq!(problem["code"], "upload-stalled");
    assert!(
        problem["detail"]
            .as_str()
            .unwrap_or("")
            .contains("byte offset 16"),
        "{problem}"
    );
    assert_eq!(counts(&server).await, before);
    server.stop().await;
}

async fn a_full_queue_answers_503_with_retry_after(backend: Backend) {
    let db = TestDb::new(backend).await;
    let dir = tempfile::tempdir().expect("temporary folder");
    // No slot and no queue place: every calibration is turned away (the gate itself is unit
    // tested with real capacities in src/http/admission_tests.rs).
    let closed = ServiceOptions {
        max_concurrent: 0,
        queue: 0,
        ..options()
    };
    let server = TestServer::start(&db, closed).await;
    let file = demo_csv(dir.path(), "busy.csv", 71);
    let before = counts(&server).await;
    let mut form = reqwest::multipart::Form::new();
    for (k, v) in LABELS
        .iter()
        .map(|(k, v)| (k.to_string(), v.to_string()))
        .chain(file.fields())
    {
        form = form.text(k, v);
    }
    form = form.part(
        "file",
        reqwest::multipart::Part::bytes(file.bytes()).file_name(file.name()),
    );
    let response = server
        .client
        .post(server.url("/api/v1/calibrations"))
        .multipart(form)
        .send()
        .await
        .expect("request");
    assert_eq!(response.status().as_u16(), 503);
    assert_eq!(
        response
            .headers()
            .get("retry-after")
            .and_then(|v| v.to_str().ok()),
        Some("5")
    );
    let problem: Value = response.json().await.expect("problem");
    assert_eq!(problem["code"], "busy");
    assert_eq!(counts(&server).await, before);
    server.stop().await;
}

async fn health_metrics_openapi_and_page_are_served(backend: Backend) {
    let db = TestDb::new(backend).await;
    let server = TestServer::start(&db, options()).await;
    let (status, health) = get_json(&server, "/healthz", None).await;
    assert_eq!(status, 200);
    let expected_db = match backend {
        Backend::Sqlite => "sqlite",
        Backend::Postgres => "postgres",
    };
    assert_eq!(
        health,
        serde_json::json!({"status": "ok", "database": expected_db})
    );
    let (status, ct, body) = get(&server, "/metrics", None).await;
    assert_eq!(status, 200);
    assert!(ct.starts_with("text/plain"));
    let metrics = String::from_utf8_lossy(&body);
    assert!(
        metrics.contains(
            "trapwise_http_requests_total{method=\"GET\",route=\"/healthz\",status=\"200\"}"
        ),
        "{metrics}"
    );
    let (status, api) = get_json(&server, "/api/v1/openapi.json", None).await;
    assert_eq!(status, 200);
    assert_eq!(api["openapi"], "3.1.0");
    for path in [
        "/api/v1/calibrations",
        "/api/v1/calibrations/{id}",
        "/api/v1/calibrations/{id}/recording",
        "/api/v1/calibrations/{id}/plots",
        "/api/v1/instruments",
        "/api/v1/instruments/{instrument}/traps/{trap}/history",
        "/api/v1/settings",
        "/healthz",
        "/metrics",
    ] {
        assert!(api["paths"][path].is_object(), "OpenAPI lacks {path}");
    }
    assert!(api["paths"]["/api/v1/calibrations"]["post"].is_object());
    assert!(api["components"]["schemas"]["CalibrationDocument"].is_object());
    let (status, ct, page) = get(&server, "/", None).await;
    assert_eq!(status, 200);
    assert!(ct.starts_with("text/html"));
    assert!(String::from_utf8_lossy(&page).contains("Laser safety"));
    // The page may not be framed by another site (clickjacking), and loads only its own files.
    let response = server
        .client
        .get(server.url("/"))
        .send()
        .await
        .expect("page");
    let policy = response
        .headers()
        .get("content-security-policy")
        .and_then(|v| v.to_str().ok())
        .unwrap_or("");
    assert!(policy.contains("frame-ancestors 'none'"), "{policy}");
    assert!(policy.contains("default-src 'self'"), "{policy}");
    server.stop().await;
}

async fn the_settings_table_is_served_documented_and_taken_by_uploads(backend: Backend) {
    use trapwise::settings::{KEYS, Kind, SPECS};
    let db = TestDb::new(backend).await;
    let dir = tempfile::tempdir().expect("temporary folder");
    let server = TestServer::start(&db, options()).await;
    // The document lists every row of the table, in order, as the table states it.
    let (status, doc) = get_json(&server, "/api/v1/settings", None).await;
    assert_eq!(status, 200, "{doc}");
    let entries = doc["settings"].as_array().cloned().unwrap_or_default();
    let keys: Vec<&str> = entries.iter().filter_map(|e| e["key"].as_str()).collect();
    assert_eq!(keys, KEYS.to_vec());
    for (entry, spec) in entries.iter().zip(SPECS) {
        let k = spec.key;
        assert_eq!(entry["label"], spec.label, "{k}");
        assert_eq!(entry["kind"], spec.kind.name(), "{k}");
        assert_eq!(entry["unit"], spec.unit, "{k}");
        assert_eq!(entry["help"], spec.help, "{k}");
        assert_eq!(entry["required"], spec.required(), "{k}");
        assert_eq!(entry["default"].is_null(), spec.required(), "{k}");
        assert_eq!(entry["example"], spec.example, "{k}");
        let choices = spec.choices().map(|c| serde_json::json!(c));
        assert_eq!(entry.get("choices").cloned(), choices, "{k}");
        assert!(
            entry["flag"]
                .as_str()
                .is_some_and(|f| f.starts_with(&format!("--{}", spec.flag.long()))),
            "{k}: {entry}"
        );
    }
    let (status, problem) = get_json(&server, "/api/v1/settings?lang=de", None).await;
    assert_eq!(
        (status, &problem["field"]),
        (400, &serde_json::json!("lang"))
    );

    // The OpenAPI document has the route, and one query parameter of the upload per row.
    let (_, api) = get_json(&server, "/api/v1/openapi.json", None).await;
    assert!(api["paths"]["/api/v1/settings"]["get"].is_object());
    assert!(api["components"]["schemas"]["SettingsDocument"].is_object());
    let params = api["paths"]["/api/v1/calibrations"]["post"]["parameters"]
        .as_array()
        .cloned()
        .unwrap_or_default();
    for spec in SPECS {
        let k = spec.key;
        let p = params
            .iter()
            .find(|p| p["name"] == k)
            .unwrap_or_else(|| panic!("OpenAPI: no parameter {k}"));
        assert_eq!(p["in"], "query", "{k}");
        assert_eq!(p["required"], spec.required(), "{k}");
        let description = p["description"].as_str().unwrap_or("");
        assert!(
            description.contains(spec.unit) && description.contains(spec.help),
            "{k}: {description}"
        );
        let json_type = match spec.kind {
            Kind::Number(_) => "number",
            Kind::Count(_) => "integer",
            Kind::Boolean => "boolean",
            Kind::Choice(_) | Kind::Filter | Kind::Names => "string",
        };
        assert_eq!(p["schema"]["type"], json_type, "{k}");
        if json_type != "string" {
            assert!(!p["schema"]["examples"][0].is_string(), "{k}: {p}");
        }
    }
    assert_eq!(
        params
            .iter()
            .filter(|p| p["name"] == "bead_diameter_um")
            .count(),
        1,
        "a setting listed twice"
    );

    // A raw-body upload takes settings that only the table exposes as query parameters; the
    // calibration used them, gives what `calibrate` gives with the same flags, and stores them
    // in their canonical text.
    let mut file = demo_csv(dir.path(), "tuned.csv", 23);
    file.conditions.extend([
        ("--windows", "windows", "2".to_string()),
        ("--time-tolerance", "time_tolerance", "2e-3".to_string()),
        ("--precision", "precision_percent", "2.0".to_string()),
    ]);
    let mut query = file.fields();
    query.extend([
        ("instrument".to_string(), "bench-c".to_string()),
        ("trap".to_string(), "t".to_string()),
        ("file_name".to_string(), file.name()),
    ]);
    let response = server
        .client
        .post(server.url(&with_query("/api/v1/calibrations", &query)))
        .header("content-type", "text/csv")
        .body(file.bytes())
        .send()
        .await
        .expect("raw upload");
    assert_eq!(response.status().as_u16(), 201);
    let doc: Value = response.json().await.expect("JSON");
    assert_eq!(doc["result"]["options"]["windows"], 2);
    assert_eq!(doc["result"]["options"]["target_relative_precision"], 0.02);
    assert_eq!(doc["result"], cli_result(&file));
    let stored = server
        .store
        .calibration(trapwise::http::auth::OPEN_LAB, &text(&doc, "id"))
        .await
        .expect("read")
        .expect("stored");
    for (key, value) in [
        ("precision_percent", "2"),
        ("time_tolerance", "0.002"),
        ("windows", "2"),
    ] {
        assert!(
            stored
                .settings
                .contains(&(key.to_string(), value.to_string())),
            "{key}: {:?}",
            stored.settings
        );
    }
    server.stop().await;

    // With tokens required, it is read like the other documents: with a token only.
    let server = TestServer::start(
        &db,
        ServiceOptions {
            tokens_required: true,
            ..options()
        },
    )
    .await;
    let (_, secret) = server.store.create_token("lab-a").await.expect("token");
    let (status, problem) = get_json(&server, "/api/v1/settings", None).await;
    assert_eq!(
        (status, &problem["code"]),
        (401, &serde_json::json!("token-required"))
    );
    let (status, doc) = get_json(&server, "/api/v1/settings", Some(&secret)).await;
    assert_eq!(status, 200);
    assert_eq!(doc["settings"].as_array().map(Vec::len), Some(SPECS.len()));
    server.stop().await;
}

fn run_cli(args: &[String], env: &[(&str, &str)]) -> (i32, String, String) {
    let mut command = binary();
    command.args(args);
    for (k, v) in env {
        command.env(k, v);
    }
    let output = command.output().expect("run trapwise");
    (
        output.status.code().unwrap_or(-1),
        String::from_utf8_lossy(&output.stdout).into_owned(),
        String::from_utf8_lossy(&output.stderr).into_owned(),
    )
}

fn strings(items: &[&str]) -> Vec<String> {
    items.iter().map(|s| s.to_string()).collect()
}

async fn upload_subcommand_prints_what_calibrate_prints(backend: Backend) {
    let db = TestDb::new(backend).await;
    let dir = tempfile::tempdir().expect("temporary folder");
    let server = TestServer::start(&db, options()).await;
    for file in demo_files(dir.path()).into_iter().take(4) {
        let path = file.path.display().to_string();
        let mut upload_args = strings(&[
            "upload",
            &path,
            "--server",
            &server.base,
            "--instrument",
            "bench-a",
            "--trap",
            "t1",
        ]);
        upload_args.extend(file.cli_args());
        let mut calibrate_args = strings(&["calibrate", &path]);
        calibrate_args.extend(file.cli_args());
        let (code, uploaded, stderr) = run_cli(&upload_args, &[]);
        assert_eq!(code, 0, "{}: {stderr}", file.name());
        assert!(stderr.contains("stored as "), "{stderr}");
        let (_, offline, _) = run_cli(&calibrate_args, &[]);
        assert_eq!(uploaded, offline, "{}", file.name());
        let (code, again, stderr) =
            run_cli(&[upload_args.clone(), strings(&["--json"])].concat(), &[]);
        assert_eq!(code, 0);
        assert!(stderr.contains("already stored as "), "{stderr}");
        let json: Value = serde_json::from_str(&again).unwrap_or(Value::Null);
        assert_eq!(json, cli_result(&file));
    }
    // A recording the server cannot read exits 3, like calibrate.
    let junk = dir.path().join("junk.csv");
    std::fs::write(&junk, "time_s,x_nm\n0,1\n0.1,2,3\n").expect("write");
    let junk_path = junk.display().to_string();
    let (code, _, stderr) = run_cli(
        &strings(&[
            "upload",
            &junk_path,
            "--server",
            &server.base,
            "--instrument",
            "a",
            "--trap",
            "b",
            "--bead-diameter",
            "1",
            "--temperature",
            "25",
        ]),
        &[],
    );
    assert_eq!(code, 3, "{stderr}");
    assert!(stderr.contains("line 3"), "{stderr}");
    server.stop().await;
    // A server that is not there exits 6.
    let (code, _, _) = run_cli(
        &strings(&[
            "upload",
            &junk_path,
            "--server",
            "http://127.0.0.1:9",
            "--instrument",
            "a",
            "--trap",
            "b",
            "--bead-diameter",
            "1",
            "--temperature",
            "25",
        ]),
        &[],
    );
    assert_eq!(code, 6);
}

async fn token_subcommand_creates_lists_and_revokes(backend: Backend) {
    let db = TestDb::new(backend).await;
    let data_dir = db.data_dir.path().display().to_string();
    let env = [
        ("DATABASE_URL", db.url.as_str()),
        ("TRAPWISE_DATA_DIR", data_dir.as_str()),
    ];
    let (code, secret, stderr) =
        run_cli(&strings(&["token", "create", "--lab", "optics-lab"]), &env);
    assert_eq!(code, 0, "{stderr}");
    let secret = secret.trim().to_string();
    let store = db.store().await;
    assert_eq!(
        store.lab_for_token(&secret).await.expect("lookup"),
        Some("optics-lab".into())
    );
    let (code, listing, _) = run_cli(&strings(&["token", "list"]), &env);
    assert_eq!(code, 0);
    assert!(
        listing.contains("optics-lab") && !listing.contains(&secret),
        "{listing}"
    );
    let id = listing
        .lines()
        .nth(1)
        .and_then(|l| l.split('\t').next())
        .unwrap_or("")
        .to_string();
    let (code, _, _) = run_cli(&strings(&["token", "revoke", &id]), &env);
    assert_eq!(code, 0);
    assert_eq!(store.lab_for_token(&secret).await.expect("lookup"), None);
    let (code, _, stderr) = run_cli(&strings(&["token", "create", "--lab", "no spaces"]), &env);
    assert_eq!(code, 2, "{stderr}");
    store.close().await;
}

on_both_backends!(
    every_demo_file_gives_the_cli_numbers_and_its_bytes_back,
    a_retried_upload_returns_the_stored_calibration_and_stores_nothing_new,
    raw_body_upload_stores_a_new_calibration_with_the_cli_numbers,
    listing_filters_by_instrument_trap_and_time_and_pages,
    history_gives_kappa_beta_and_fc_per_axis_oldest_first,
    trap_list_counts_each_trap_of_the_lab_in_byte_order,
    bad_uploads_get_their_status_and_problem_and_store_nothing,
    uploads_past_the_limit_are_413_and_store_nothing,
    tokens_confine_each_lab_to_its_own_calibrations,
    a_restarted_service_still_serves_every_calibration,
    a_full_queue_answers_503_with_retry_after,
    a_stalled_upload_is_408_and_stores_nothing,
    shutdown_finishes_an_upload_in_flight,
    health_metrics_openapi_and_page_are_served,
    the_settings_table_is_served_documented_and_taken_by_uploads,
    upload_subcommand_prints_what_calibrate_prints,
    token_subcommand_creates_lists_and_revokes,
);
