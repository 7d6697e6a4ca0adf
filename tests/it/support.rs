//! Helpers shared by the integration tests.
//!
//! PostgreSQL tests use `TRAPWISE_TEST_DATABASE_URL` (default
//! `postgres://postgres@127.0.0.1:5432/test`) with a fresh schema per test, selected through the
//! connection's `search_path` and dropped afterwards. An unreachable server fails the tests:
//! CI guarantees one (see .ci/run), so a skip would hide a broken backend.

use sqlx::Executor;
use std::path::{Path, PathBuf};
use std::process::Command;
use tokio::sync::oneshot;
use trapwise::http::{AppState, ServiceOptions};
use trapwise::store::Store;

/// Default PostgreSQL for the tests.
pub(crate) const DEFAULT_PG_URL: &str = "postgres://postgres@127.0.0.1:5432/test";

/// Which database a test runs on.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(crate) enum Backend {
    Sqlite,
    Postgres,
}

/// Generates one `#[tokio::test]` per backend for each `async fn name(Backend)`.
#[macro_export]
macro_rules! on_both_backends {
    ($($name:ident),* $(,)?) => {
        mod sqlite {
            $(
                #[tokio::test(flavor = "multi_thread", worker_threads = 2)]
                async fn $name() {
                    super::$name($crate::support::Backend::Sqlite).await
                }
            )*
        }
        mod postgres {
            $(
                #[tokio::test(flavor = "multi_thread", worker_threads = 2)]
                async fn $name() {
                    super::$name($crate::support::Backend::Postgres).await
                }
            )*
        }
    };
}

fn pg_base_url() -> String {
    std::env::var("TRAPWISE_TEST_DATABASE_URL")
        .ok()
        .filter(|v| !v.trim().is_empty())
        .unwrap_or_else(|| DEFAULT_PG_URL.to_string())
}

/// A database (and data directory) of its own for one test.
pub(crate) struct TestDb {
    /// The URL the store connects to (for PostgreSQL it selects the test's schema).
    pub(crate) url: String,
    pub(crate) data_dir: tempfile::TempDir,
    schema: Option<String>,
}

impl TestDb {
    /// A fresh database: a SQLite file in a temporary folder, or a new PostgreSQL schema.
    pub(crate) async fn new(backend: Backend) -> Self {
        let data_dir = tempfile::tempdir().expect("temporary folder");
        match backend {
            Backend::Sqlite => TestDb {
                url: format!(
                    "sqlite://{}?mode=rwc",
                    data_dir.path().join("trapwise.db").display()
                ),
                data_dir,
                schema: None,
            },
            Backend::Postgres => {
                sqlx::any::install_default_drivers();
                let base = pg_base_url();
                let schema = format!("tw_test_{}", uuid::Uuid::now_v7().simple());
                let pool = sqlx::AnyPool::connect(&base).await.unwrap_or_else(|e| {
                    panic!(
                        "PostgreSQL at {base} is not reachable ({e}); start one or set \
                         TRAPWISE_TEST_DATABASE_URL"
                    )
                });
                pool.execute(sqlx::AssertSqlSafe(format!("CREATE SCHEMA {schema}")))
                    .await
                    .expect("create test schema");
                pool.close().await;
                let sep = if base.contains('?') { '&' } else { '?' };
                TestDb {
                    url: format!("{base}{sep}options=-c%20search_path%3D{schema}"),
                    data_dir,
                    schema: Some(schema),
                }
            }
        }
    }

    /// A store over this database.
    pub(crate) async fn store(&self) -> Store {
        Store::connect(&self.url, self.data_dir.path(), 4)
            .await
            .expect("connect the test store")
    }
}

impl Drop for TestDb {
    fn drop(&mut self) {
        let Some(schema) = self.schema.take() else {
            return;
        };
        let base = pg_base_url();
        // Drop runs inside the test's runtime: use a thread with a runtime of its own.
        let _ = std::thread::spawn(move || {
            let runtime = tokio::runtime::Builder::new_current_thread()
                .enable_all()
                .build()
                .expect("runtime");
            runtime.block_on(async {
                if let Ok(pool) = sqlx::AnyPool::connect(&base).await {
                    let _ = pool
                        .execute(sqlx::AssertSqlSafe(format!(
                            "DROP SCHEMA IF EXISTS {schema} CASCADE"
                        )))
                        .await;
                    pool.close().await;
                }
            });
        })
        .join();
    }
}

/// Options of a test server: loopback, open, small limits.
pub(crate) fn options() -> ServiceOptions {
    ServiceOptions {
        max_upload_bytes: 64 << 20,
        max_concurrent: 2,
        queue: 8,
        tokens_required: false,
        upload_idle_s: 30,
        max_uploads: 8,
        max_connections_per_client: 32,
        trusted_proxies: Vec::new(),
        shutdown_grace_s: 30,
    }
}

/// A service on a real socket (port 0) over a test database.
pub(crate) struct TestServer {
    pub(crate) base: String,
    pub(crate) client: reqwest::Client,
    pub(crate) store: Store,
    shutdown: Option<oneshot::Sender<()>>,
    task: Option<tokio::task::JoinHandle<std::io::Result<()>>>,
}

impl TestServer {
    /// Starts a server over `db` with `options`.
    pub(crate) async fn start(db: &TestDb, options: ServiceOptions) -> Self {
        // reqwest is built without a default TLS provider and refuses to build a client
        // without one; a second installation only reports that one is installed.
        let _ = rustls::crypto::ring::default_provider().install_default();
        let store = db.store().await;
        let listener = tokio::net::TcpListener::bind("127.0.0.1:0")
            .await
            .expect("bind port 0");
        let addr = listener.local_addr().expect("local address");
        let (tx, rx) = oneshot::channel::<()>();
        let state = AppState::new(store.clone(), options);
        let task = tokio::spawn(trapwise::http::serve(listener, state, async move {
            let _ = rx.await;
        }));
        TestServer {
            base: format!("http://{addr}"),
            client: reqwest::Client::new(),
            store,
            shutdown: Some(tx),
            task: Some(task),
        }
    }

    /// The absolute URL of a path.
    pub(crate) fn url(&self, path: &str) -> String {
        format!("{}{path}", self.base)
    }

    /// Tells the server to shut down gracefully, without waiting.
    pub(crate) fn begin_shutdown(&mut self) {
        if let Some(tx) = self.shutdown.take() {
            let _ = tx.send(());
        }
    }

    /// Stops the server gracefully and closes its store.
    pub(crate) async fn stop(mut self) {
        if let Some(tx) = self.shutdown.take() {
            let _ = tx.send(());
        }
        if let Some(task) = self.task.take() {
            task.await.expect("server task").expect("server result");
        }
        self.store.close().await;
    }
}

/// A demo recording and the run conditions it needs, as CLI flags and as form fields.
#[derive(Clone, Debug)]
pub(crate) struct DemoFile {
    pub(crate) path: PathBuf,
    /// (CLI flag, settings key, value).
    pub(crate) conditions: Vec<(&'static str, &'static str, String)>,
}

impl DemoFile {
    pub(crate) fn name(&self) -> String {
        self.path
            .file_name()
            .map(|n| n.to_string_lossy().into_owned())
            .unwrap_or_default()
    }

    pub(crate) fn bytes(&self) -> Vec<u8> {
        std::fs::read(&self.path).expect("read demo file")
    }

    /// The settings as form fields / query parameters.
    pub(crate) fn fields(&self) -> Vec<(String, String)> {
        self.conditions
            .iter()
            .map(|(_, key, value)| (key.to_string(), value.clone()))
            .collect()
    }

    /// The settings as CLI arguments.
    pub(crate) fn cli_args(&self) -> Vec<String> {
        self.conditions
            .iter()
            .flat_map(|(flag, _, value)| [flag.to_string(), value.clone()])
            .collect()
    }
}

/// The trapwise binary built for these tests.
pub(crate) fn binary() -> Command {
    Command::new(env!("CARGO_BIN_EXE_trapwise"))
}

fn simulate(dir: &Path, file: &str, extra: &[&str]) -> PathBuf {
    let path = dir.join(file);
    let output = binary()
        .arg("simulate")
        .arg("-o")
        .arg(&path)
        .args(["--sample-rate", "20000", "--duration", "0.5"])
        .args(extra)
        .output()
        .expect("run trapwise simulate");
    assert!(
        output.status.success(),
        "simulate {file}: {}",
        String::from_utf8_lossy(&output.stderr)
    );
    path
}

fn common() -> Vec<(&'static str, &'static str, String)> {
    vec![
        ("--bead-diameter", "bead_diameter_um", "1".into()),
        ("--temperature", "temperature_c", "25".into()),
    ]
}

/// Demo recordings in every family of format: CSV with a time column, TSV, NumPy, raw
/// 16-bit counts in volts with three interleaved channels, raw float32, and a CSV in volts
/// with the sample stage driven (active calibration).
pub(crate) fn demo_files(dir: &Path) -> Vec<DemoFile> {
    let mut files = Vec::new();
    files.push(DemoFile {
        path: simulate(
            dir,
            "two_axes.csv",
            &["--stiffness", "0.05,0.04", "--seed", "11"],
        ),
        conditions: common(),
    });
    files.push(DemoFile {
        path: simulate(dir, "lateral.tsv", &["--stiffness", "0.03", "--seed", "12"]),
        conditions: common(),
    });
    let mut npy = common();
    npy.push(("--sample-rate", "sample_rate_hz", "20000".into()));
    npy.push(("--units", "units", "nm".into()));
    files.push(DemoFile {
        path: simulate(
            dir,
            "one_axis.npy",
            &["--stiffness", "0.02", "--seed", "13"],
        ),
        conditions: npy,
    });
    let mut i16 = common();
    i16.push(("--sample-rate", "sample_rate_hz", "20000".into()));
    i16.push(("--format", "format", "raw-i16".into()));
    i16.push(("--channels", "channels", "3".into()));
    i16.push((
        "--volts-per-count",
        "volts_per_count",
        "0.00030517578125".into(),
    ));
    files.push(DemoFile {
        path: simulate(
            dir,
            "volts.i16",
            &[
                "--format",
                "raw-i16",
                "--units",
                "V",
                "--stiffness",
                "0.03,0.03,0.02",
                "--seed",
                "14",
            ],
        ),
        conditions: i16,
    });
    let mut f32 = common();
    f32.push(("--sample-rate", "sample_rate_hz", "20000".into()));
    f32.push(("--format", "format", "raw-f32".into()));
    f32.push(("--channels", "channels", "2".into()));
    f32.push(("--units", "units", "nm".into()));
    files.push(DemoFile {
        path: simulate(
            dir,
            "hum.f32",
            &[
                "--format",
                "raw-f32",
                "--stiffness",
                "0.05,0.05",
                "--hum-amplitude",
                "2",
                "--seed",
                "15",
            ],
        ),
        conditions: f32,
    });
    // Active calibration: the stage driven at 32.3 Hz, 400 nm, volts in a CSV.
    let mut driven = common();
    driven.push(("--drive-frequency", "drive_frequency_hz", "32.3".into()));
    driven.push(("--drive-amplitude", "drive_amplitude_nm", "400".into()));
    files.push(DemoFile {
        path: simulate(
            dir,
            "driven.csv",
            &[
                "--units",
                "V",
                "--stiffness",
                "0.04",
                "--drive-frequency",
                "32.3",
                "--drive-amplitude",
                "400",
                "--seed",
                "16",
            ],
        ),
        conditions: driven,
    });
    files
}

/// One more CSV recording with its own seed (for several calibrations of one trap).
pub(crate) fn demo_csv(dir: &Path, name: &str, seed: u64) -> DemoFile {
    DemoFile {
        path: simulate(
            dir,
            name,
            &["--stiffness", "0.05,0.04", "--seed", &seed.to_string()],
        ),
        conditions: common(),
    }
}

/// The offline CLI's JSON result (`calibrate --json --no-plots`) of a demo file.
pub(crate) fn cli_result(file: &DemoFile) -> serde_json::Value {
    let output = binary()
        .arg("calibrate")
        .arg(&file.path)
        .args(file.cli_args())
        .args(["--json", "--no-plots"])
        .output()
        .expect("run trapwise calibrate");
    assert!(
        output.status.success(),
        "calibrate {}: {}",
        file.name(),
        String::from_utf8_lossy(&output.stderr)
    );
    serde_json::from_slice(&output.stdout).expect("calibrate prints JSON")
}

/// Uploads a demo file as multipart with labels; returns the status and the JSON body.
pub(crate) async fn upload(
    server: &TestServer,
    file: &DemoFile,
    labels: &[(&str, &str)],
    token: Option<&str>,
) -> (u16, serde_json::Value) {
    let mut form = reqwest::multipart::Form::new();
    for (k, v) in labels {
        form = form.text(k.to_string(), v.to_string());
    }
    for (k, v) in file.fields() {
        form = form.text(k, v);
    }
    form = form.part(
        "file",
        reqwest::multipart::Part::bytes(file.bytes()).file_name(file.name()),
    );
    let mut request = server
        .client
        .post(server.url("/api/v1/calibrations"))
        .multipart(form);
    if let Some(t) = token {
        request = request.bearer_auth(t);
    }
    let response = request.send().await.expect("upload request");
    let status = response.status().as_u16();
    let body = response.json().await.expect("upload answer is JSON");
    (status, body)
}

/// GETs a path; returns the status, the content type and the body bytes.
pub(crate) async fn get(
    server: &TestServer,
    path: &str,
    token: Option<&str>,
) -> (u16, String, Vec<u8>) {
    let mut request = server.client.get(server.url(path));
    if let Some(t) = token {
        request = request.bearer_auth(t);
    }
    status_type_body(request.send().await.expect("request")).await
}

/// GETs a path and parses JSON.
pub(crate) async fn get_json(
    server: &TestServer,
    path: &str,
    token: Option<&str>,
) -> (u16, serde_json::Value) {
    let (status, _, body) = get(server, path, token).await;
    (status, serde_json::from_slice(&body).expect("JSON body"))
}

/// `path?k=v&...` with the values percent-encoded.
pub(crate) fn with_query(path: &str, pairs: &[(String, String)]) -> String {
    let encode = trapwise::http::wire::encode_segment;
    let query: Vec<String> = pairs
        .iter()
        .map(|(k, v)| format!("{}={}", encode(k), encode(v)))
        .collect();
    format!("{path}?{}", query.join("&"))
}

/// Compares `actual` with `tests/it/snapshots/<name>`; `TRAPWISE_UPDATE_SNAPSHOTS=1` rewrites it.
#[track_caller]
pub(crate) fn check_snapshot(name: &str, actual: &str) {
    let path = Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("tests/it/snapshots")
        .join(name);
    if std::env::var_os("TRAPWISE_UPDATE_SNAPSHOTS").is_some() {
        std::fs::create_dir_all(path.parent().unwrap_or(Path::new("."))).expect("snapshot folder");
        std::fs::write(&path, actual).expect("write snapshot");
        return;
    }
    let expected = std::fs::read_to_string(&path).unwrap_or_else(|_| {
        panic!(
            "missing snapshot {}; run with TRAPWISE_UPDATE_SNAPSHOTS=1",
            path.display()
        )
    });
    assert!(
        expected == actual,
        "snapshot {name} changed; rerun with TRAPWISE_UPDATE_SNAPSHOTS=1 if intended\n--- expected\n{expected}\n--- actual\n{actual}"
    );
}

/// The status, content type and body of an answer.
pub(crate) async fn status_type_body(response: reqwest::Response) -> (u16, String, Vec<u8>) {
    let status = response.status().as_u16();
    let content_type = response
        .headers()
        .get("content-type")
        .and_then(|v| v.to_str().ok())
        .unwrap_or("")
        .to_string();
    (
        status,
        content_type,
        response.bytes().await.expect("body").to_vec(),
    )
}
