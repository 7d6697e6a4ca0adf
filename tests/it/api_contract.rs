//! The API's contract over a real socket, on both backends (issue 14, points 3 to 6): every
//! error answer is an RFC 9457 problem document whose `status` is the HTTP status (RFC 9457
//! section 3.1.2), axum's own rejections included; run settings outside their range, and
//! names that break the naming rules, are 400 with the field at fault; details are capped.

use crate::on_both_backends;
use crate::support::{Backend, TestDb, TestServer, options, status_type_body};
use reqwest::Method;
use serde_json::Value;

/// One request: method, path, extra headers, body.
struct Call {
    what: &'static str,
    method: Method,
    path: String,
    headers: Vec<(&'static str, String)>,
    body: Vec<u8>,
}

fn call(what: &'static str, method: Method, path: &str) -> Call {
    Call {
        what,
        method,
        path: path.to_string(),
        headers: Vec::new(),
        body: Vec::new(),
    }
}

/// Sends a call; returns the status, the content type and the body.
async fn send(server: &TestServer, c: &Call) -> (u16, String, Vec<u8>) {
    let mut request = server
        .client
        .request(c.method.clone(), server.url(&c.path))
        .body(c.body.clone());
    for (name, value) in &c.headers {
        request = request.header(*name, value.as_str());
    }
    status_type_body(request.send().await.expect("request")).await
}

/// Checks that an answer is a problem document of `status` with the members RFC 9457 section
/// 3.1 defines (type, title, status equal to the HTTP status, detail) plus our `code`; returns
/// the document.
#[track_caller]
fn check_problem_of(
    what: &str,
    (status, content_type, body): (u16, &str, &[u8]),
    expected: u16,
) -> Value {
    assert_eq!(
        status,
        expected,
        "{what}: {}",
        String::from_utf8_lossy(body)
    );
    assert_eq!(content_type, "application/problem+json", "{what}");
    let problem: Value = serde_json::from_slice(body)
        .unwrap_or_else(|e| panic!("{what}: not JSON ({e}): {}", String::from_utf8_lossy(body)));
    assert_eq!(problem["status"], expected, "{what}: {problem}");
    let code = problem["code"].as_str().unwrap_or("");
    assert!(!code.is_empty(), "{what}: {problem}");
    assert_eq!(
        problem["type"],
        format!("https://trapwise.invalid/problems/{code}"),
        "{what}"
    );
    assert!(
        problem["title"].as_str().is_some_and(|t| !t.is_empty()),
        "{what}"
    );
    assert!(
        problem["detail"].as_str().is_some_and(|t| !t.is_empty()),
        "{what}"
    );
    problem
}

/// Requests that fail in each way a client can make one fail, on an open server.
fn failing_calls() -> Vec<(Call, u16)> {
    let mut broken_form = call(
        "multipart body without its boundary",
        Method::POST,
        "/api/v1/calibrations?instrument=a&trap=b",
    );
    broken_form
        .headers
        .push(("content-type", "multipart/form-data".into()));
    broken_form.body = b"--x\r\nnot a form".to_vec();
    let mut json = call(
        "a JSON body",
        Method::POST,
        "/api/v1/calibrations?instrument=a&trap=b",
    );
    json.headers
        .push(("content-type", "application/json".into()));
    json.body = b"{}".to_vec();
    let mut basic = call("a Basic authorization", Method::GET, "/api/v1/calibrations");
    basic
        .headers
        .push(("authorization", "Basic dXNlcjpwYXNz".into()));
    let mut big = call(
        "a raw body past the limit",
        Method::POST,
        "/api/v1/calibrations?instrument=a&trap=b",
    );
    big.body = vec![b'1'; 8192];
    vec![
        (
            call(
                "DELETE on the listing",
                Method::DELETE,
                "/api/v1/calibrations",
            ),
            405,
        ),
        (
            call("PUT on the health check", Method::PUT, "/healthz"),
            405,
        ),
        (
            call(
                "POST on a calibration",
                Method::POST,
                "/api/v1/calibrations/abc",
            ),
            405,
        ),
        (
            call(
                "an id that is not UTF-8",
                Method::GET,
                "/api/v1/calibrations/%ff",
            ),
            400,
        ),
        (
            call(
                "plots of an id that is not UTF-8",
                Method::GET,
                "/api/v1/calibrations/%ff/plots",
            ),
            400,
        ),
        (
            call(
                "a trap that is not UTF-8",
                Method::GET,
                "/api/v1/instruments/a/traps/%fe%ff/history",
            ),
            400,
        ),
        (
            call("an unknown route", Method::GET, "/api/v1/nowhere"),
            404,
        ),
        (
            call("an unknown id", Method::GET, "/api/v1/calibrations/abc"),
            404,
        ),
        (
            call(
                "a page size that is not a number",
                Method::GET,
                "/api/v1/calibrations?limit=many",
            ),
            400,
        ),
        (
            call(
                "a page size of zero",
                Method::GET,
                "/api/v1/calibrations?limit=0",
            ),
            400,
        ),
        (
            call("an unknown parameter", Method::GET, "/api/v1/settings?x=1"),
            400,
        ),
        (broken_form, 400),
        (json, 415),
        (basic, 401),
        (big, 413),
    ]
}

async fn every_error_answer_is_a_problem_document_with_its_status(backend: Backend) {
    let db = TestDb::new(backend).await;
    let mut limits = options();
    limits.max_upload_bytes = 4096;
    let server = TestServer::start(&db, limits).await;
    for (c, status) in failing_calls() {
        let answer = send(&server, &c).await;
        check_problem_of(c.what, (answer.0, &answer.1, &answer.2), status);
    }
    server.stop().await;
    // With tokens required, a read without one is 401.
    let mut closed = options();
    closed.tokens_required = true;
    let server = TestServer::start(&db, closed).await;
    for path in [
        "/api/v1/calibrations",
        "/api/v1/settings",
        "/api/v1/instruments",
    ] {
        let answer = send(&server, &call("a read without a token", Method::GET, path)).await;
        check_problem_of(path, (answer.0, &answer.1, &answer.2), 401);
    }
    server.stop().await;
}

async fn details_that_quote_the_input_are_capped(backend: Backend) {
    use trapwise::http::problem::MAX_DETAIL_CHARS;
    let db = TestDb::new(backend).await;
    let server = TestServer::start(&db, options()).await;
    // A field name of 100 000 characters is an unknown field; the detail quotes it.
    let long_key = "k".repeat(100_000);
    let form = reqwest::multipart::Form::new()
        .text("instrument", "a")
        .text("trap", "b")
        .text(long_key, "1")
        .part(
            "file",
            reqwest::multipart::Part::bytes(b"t,x\n0,1\n".to_vec()).file_name("run.csv"),
        );
    let response = server
        .client
        .post(server.url("/api/v1/calibrations"))
        .multipart(form)
        .send()
        .await
        .expect("request");
    let status = response.status().as_u16();
    let ct = response
        .headers()
        .get("content-type")
        .and_then(|v| v.to_str().ok())
        .unwrap_or("")
        .to_string();
    let body = response.bytes().await.expect("body");
    let problem = check_problem_of("a 100 000 character field name", (status, &ct, &body), 400);
    assert!(body.len() < 4 * MAX_DETAIL_CHARS, "{} bytes", body.len());
    let detail = problem["detail"].as_str().unwrap_or("");
    assert!(detail.ends_with("more characters left out)"), "{detail}");
    // A CSV file whose header line is a megabyte long.
    let mut csv = "t,".to_string();
    csv.push_str(&"x".repeat(1 << 20));
    csv.push('\n');
    for i in 0..64 {
        csv.push_str(&format!("{},{}\n", f64::from(i) * 1e-4, i % 5));
    }
    let mut raw = call(
        "a megabyte header line",
        Method::POST,
        "/api/v1/calibrations?instrument=a&trap=b&file_name=run.csv&bead_diameter_um=1&temperature_c=25",
    );
    raw.headers.push(("content-type", "text/csv".into()));
    raw.body = csv.into_bytes();
    let (status, ct, body) = send(&server, &raw).await;
    let problem = check_problem_of(raw.what, (status, &ct, &body), 400);
    assert!(
        body.len() < 4 * MAX_DETAIL_CHARS,
        "{} bytes: {problem}",
        body.len()
    );
    server.stop().await;
}

/// A raw CSV upload of a short clean record: instrument, trap and settings in the query, the
/// header line given.
fn csv_upload(what: &'static str, header: &str, query: &[(&str, &str)]) -> Call {
    let mut csv = format!("{header}\n");
    for i in 0..4096 {
        // A deterministic wiggle; the calls below are refused before any calibration.
        csv.push_str(&format!(
            "{},{}\n",
            f64::from(i) * 1e-4,
            (i * 7919 % 61) as f64 - 30.0
        ));
    }
    let mut pairs = query.to_vec();
    for default in [
        ("bead_diameter_um", "1"),
        ("temperature_c", "25"),
        ("units", "nm"),
        ("file_name", "run.csv"),
        ("instrument", "kittiwake"),
        ("trap", "trap-1"),
    ] {
        if !pairs.iter().any(|(k, _)| *k == default.0) {
            pairs.push(default);
        }
    }
    let query: Vec<String> = pairs
        .iter()
        .map(|(k, v)| format!("{k}={}", trapwise::http::wire::encode_segment(v)))
        .collect();
    let mut c = call(
        what,
        Method::POST,
        &format!("/api/v1/calibrations?{}", query.join("&")),
    );
    c.headers.push(("content-type", "text/csv".into()));
    c.body = csv.into_bytes();
    c
}

async fn settings_outside_their_range_are_400_naming_the_field(backend: Backend) {
    let db = TestDb::new(backend).await;
    let server = TestServer::start(&db, options()).await;
    let before = server.store.counts().await.expect("counts");
    for (key, value) in [
        ("sample_rate_hz", "1e-300"),
        ("sample_rate_hz", "1e300"),
        ("windows", "1000000000"),
        ("channels", "4"),
        ("bead_diameter_um", "1e9"),
        ("temperature_c", "-1000"),
    ] {
        let c = csv_upload("out of range", "t,x_nm", &[(key, value)]);
        let (status, ct, body) = send(&server, &c).await;
        let problem = check_problem_of(key, (status, &ct, &body), 400);
        assert_eq!(problem["code"], "invalid-field", "{key}={value}: {problem}");
        assert_eq!(problem["field"], key, "{key}={value}: {problem}");
        assert!(
            problem["detail"]
                .as_str()
                .unwrap_or("")
                .contains("expected a number from"),
            "{key}={value}: {problem}"
        );
    }
    assert_eq!(server.store.counts().await.expect("counts"), before);
    // The ranges are published from the same rows: the settings document and the OpenAPI
    // document's parameters carry each row's bounds.
    let (_, settings) = crate::support::get_json(&server, "/api/v1/settings", None).await;
    let (_, api) = crate::support::get_json(&server, "/api/v1/openapi.json", None).await;
    let params = api["paths"]["/api/v1/calibrations"]["post"]["parameters"]
        .as_array()
        .cloned()
        .unwrap_or_default();
    for spec in trapwise::settings::SPECS {
        let (trapwise::settings::Kind::Number(range) | trapwise::settings::Kind::Count(range)) =
            spec.kind
        else {
            continue;
        };
        let entry = settings["settings"]
            .as_array()
            .and_then(|rows| rows.iter().find(|r| r["key"] == spec.key))
            .unwrap_or_else(|| panic!("settings document lacks {}", spec.key));
        assert_eq!(entry["minimum"].as_f64(), Some(range.min), "{}", spec.key);
        assert_eq!(entry["maximum"].as_f64(), Some(range.max), "{}", spec.key);
        let param = params
            .iter()
            .find(|p| p["name"] == spec.key)
            .unwrap_or_else(|| panic!("OpenAPI lacks {}", spec.key));
        assert_eq!(
            param["schema"]["minimum"].as_f64(),
            Some(range.min),
            "{}",
            spec.key
        );
        assert_eq!(
            param["schema"]["maximum"].as_f64(),
            Some(range.max),
            "{}",
            spec.key
        );
    }
    server.stop().await;
}

async fn names_that_break_the_naming_rules_are_refused_with_the_field_or_place(backend: Backend) {
    let db = TestDb::new(backend).await;
    let server = TestServer::start(&db, options()).await;
    let before = server.store.counts().await.expect("counts");
    let long = "n".repeat(100_000);
    // Labels: the field at fault.
    for (field, value) in [
        ("instrument", "."),
        ("instrument", ".."),
        ("trap", ".."),
        ("trap", "trap\u{7}"),
        ("axes", "x,.."),
        ("axes", "x\u{1b}[31m"),
        ("instrument", &long[..300]),
    ] {
        let value = value
            .replace("\\u{7}", "\u{7}")
            .replace("\\u{1b}", "\u{1b}");
        let c = csv_upload("bad label", "t,x_nm", &[(field, value.as_str())]);
        let (status, ct, body) = send(&server, &c).await;
        let problem = check_problem_of(field, (status, &ct, &body), 400);
        assert_eq!(problem["field"], field, "{field}: {problem}");
    }
    // Axis names from the header: the line and column at fault.
    for (header, column, has) in [
        ("t,x\u{1b}[2J_nm", 2, "U+001B"),
        ("t,x_nm,\u{7}y_nm", 3, "U+0007"),
        ("t,._nm", 2, "`.`"),
        (&format!("t,{long}_nm") as &str, 2, "100000 characters"),
    ] {
        let c = csv_upload("bad axis name", header, &[]);
        let (status, ct, body) = send(&server, &c).await;
        let problem = check_problem_of("axis name", (status, &ct, &body), 400);
        assert_eq!(problem["code"], "bad-axis-name", "{problem}");
        let detail = problem["detail"].as_str().unwrap_or("");
        assert!(
            detail.contains(&format!("line 1, column {column}")) && detail.contains(has),
            "{detail}"
        );
    }
    assert_eq!(server.store.counts().await.expect("counts"), before);
    server.stop().await;
}

#[test]
fn the_openapi_document_describes_the_upload_bodies_required_fields_and_every_error_status() {
    let api: Value = serde_json::from_str(&trapwise::http::openapi::document_json()).expect("JSON");
    let upload = &api["paths"]["/api/v1/calibrations"]["post"];
    let body = &upload["requestBody"];
    assert_eq!(body["required"], true);
    let form = &body["content"]["multipart/form-data"]["schema"];
    assert_eq!(form["properties"]["file"]["type"], "string", "{form}");
    assert_eq!(form["properties"]["file"]["format"], "binary", "{form}");
    let required: Vec<&str> = form["required"]
        .as_array()
        .map(|r| r.iter().filter_map(Value::as_str).collect())
        .unwrap_or_default();
    let mut expected = vec!["file", "instrument", "trap"];
    for spec in trapwise::settings::SPECS {
        assert!(
            form["properties"][spec.key].is_object(),
            "form lacks {}",
            spec.key
        );
        if spec.required() {
            expected.push(spec.key);
        }
    }
    assert_eq!(required, expected);
    let raw = &body["content"]["application/octet-stream"]["schema"];
    assert_eq!(raw["format"], "binary", "{raw}");
    assert_ne!(raw["type"], "array", "{raw}");
    let params = upload["parameters"].as_array().cloned().unwrap_or_default();
    for label in ["instrument", "trap"] {
        let p = params
            .iter()
            .find(|p| p["name"] == label)
            .expect("label parameter");
        assert_eq!(p["required"], true, "{label}");
    }
    let limit = api["paths"]["/api/v1/calibrations"]["get"]["parameters"]
        .as_array()
        .and_then(|ps| ps.iter().find(|p| p["name"] == "limit").cloned())
        .expect("limit");
    assert_eq!(limit["schema"]["minimum"], 1, "{limit}");
    assert_eq!(limit["schema"]["maximum"], 500, "{limit}");
    // Every operation of the API documents the error answers it can give, as problems.
    for (path, item) in api["paths"].as_object().expect("paths") {
        for (method, operation) in item.as_object().expect("item") {
            let mut codes = vec!["500", "503"];
            if path.starts_with("/api/") {
                codes.extend(["400", "401"]);
            }
            if path.contains('{') {
                codes.push("404");
            }
            for code in codes {
                let content = &operation["responses"][code]["content"]["application/problem+json"];
                assert!(
                    content.is_object(),
                    "{method} {path} does not document {code}"
                );
            }
        }
    }
}

on_both_backends!(
    settings_outside_their_range_are_400_naming_the_field,
    names_that_break_the_naming_rules_are_refused_with_the_field_or_place,
    every_error_answer_is_a_problem_document_with_its_status,
    details_that_quote_the_input_are_capped,
);
