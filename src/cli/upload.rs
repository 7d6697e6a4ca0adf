//! `trapwise upload FILE --server URL`: send a recording to the calibration service from an
//! instrument PC and print the same summary as `calibrate`.
//!
//! The file streams from disk as the `file` part of a multipart form (a progress bar on
//! stderr for files of 4 MiB and more when stderr is a terminal); the run conditions travel as
//! the same text pairs `calibrate` uses (`RunArgs::settings().to_pairs()`).

use super::calibrate::print_report;
use super::{EXIT_BAD_INPUT, EXIT_NOT_CALIBRATABLE, EXIT_SERVER, Failure, RunArgs};
use crate::http::problem::Problem;
use crate::http::wire::CalibrationDocument;
use anyhow::anyhow;
use clap::Args;
use futures_util::StreamExt;
use std::path::PathBuf;

/// Files at least this large show a progress bar.
const PROGRESS_MIN_BYTES: u64 = 4 << 20;

/// Arguments of `upload`.
#[derive(Debug, Args)]
pub struct UploadArgs {
    /// The recording to upload.
    pub file: PathBuf,
    /// The service, for example http://127.0.0.1:8080.
    #[arg(long, value_name = "URL")]
    pub server: String,
    /// Bearer token of your lab (or set TRAPWISE_TOKEN, which keeps it out of process lists).
    #[arg(long, env = "TRAPWISE_TOKEN", hide_env_values = true)]
    pub token: Option<String>,
    /// Instrument label.
    #[arg(long)]
    pub instrument: String,
    /// Trap label.
    #[arg(long)]
    pub trap: String,
    /// Operator note.
    #[arg(long)]
    pub note: Option<String>,
    /// Comma-separated axis labels, one per axis of the recording.
    #[arg(long, value_name = "NAMES")]
    pub axes: Option<String>,
    #[command(flatten)]
    pub run: RunArgs,
    /// Print the calibration result as JSON (as `calibrate --json --no-plots`).
    #[arg(long)]
    pub json: bool,
    /// Exit with code 5 when the methods disagree or a finding is an error.
    #[arg(long)]
    pub strict: bool,
}

fn server_failure(e: impl std::fmt::Display) -> Failure {
    Failure::new(EXIT_SERVER, anyhow!("{e}"))
}

async fn send(args: &UploadArgs) -> Result<u8, Failure> {
    let settings = args.run.settings();
    let file = tokio::fs::File::open(&args.file).await.map_err(|e| {
        Failure::new(
            EXIT_BAD_INPUT,
            anyhow!("cannot read {}: {e}", args.file.display()),
        )
    })?;
    let size = file
        .metadata()
        .await
        .map_err(|e| {
            Failure::new(
                EXIT_BAD_INPUT,
                anyhow!("cannot read {}: {e}", args.file.display()),
            )
        })?
        .len();
    let name = args
        .file
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_else(|| "upload".to_string());
    let bar = if size >= PROGRESS_MIN_BYTES {
        let bar = indicatif::ProgressBar::new(size);
        if let Ok(style) = indicatif::ProgressStyle::with_template(
            "{bytes}/{total_bytes} [{bar:40}] {bytes_per_sec}, {eta} left",
        ) {
            bar.set_style(style);
        }
        bar
    } else {
        indicatif::ProgressBar::hidden()
    };
    let counter = bar.clone();
    let stream = tokio_util::io::ReaderStream::new(file).inspect(move |chunk| {
        if let Ok(c) = chunk {
            counter.inc(c.len() as u64);
        }
    });
    let part =
        reqwest::multipart::Part::stream_with_length(reqwest::Body::wrap_stream(stream), size)
            .file_name(name)
            .mime_str("application/octet-stream")
            .map_err(server_failure)?;
    let mut form = reqwest::multipart::Form::new()
        .text("instrument", args.instrument.clone())
        .text("trap", args.trap.clone());
    if let Some(note) = &args.note {
        form = form.text("note", note.clone());
    }
    if let Some(axes) = &args.axes {
        form = form.text("axes", axes.clone());
    }
    for (key, value) in settings.to_pairs() {
        form = form.text(key, value);
    }
    let form = form.part("file", part);
    let url = format!("{}/api/v1/calibrations", args.server.trim_end_matches('/'));
    let mut request = reqwest::Client::new().post(&url).multipart(form);
    if let Some(token) = &args.token {
        request = request.bearer_auth(token);
    }
    let response = request
        .send()
        .await
        .map_err(|e| server_failure(format!("cannot reach {url}: {e}")))?;
    bar.finish_and_clear();
    let status = response.status();
    let body = response
        .bytes()
        .await
        .map_err(|e| server_failure(format!("{url}: reading the answer: {e}")))?;
    if status.is_success() {
        let doc: CalibrationDocument = serde_json::from_slice(&body)
            .map_err(|e| server_failure(format!("{url}: the answer is not a calibration: {e}")))?;
        eprintln!(
            "{} as {} ({}{})",
            if status.as_u16() == 201 {
                "stored"
            } else {
                "already stored"
            },
            doc.id,
            args.server.trim_end_matches('/'),
            doc.links.self_
        );
        return print_report(&doc.result, args.json, args.strict);
    }
    let message = match serde_json::from_slice::<Problem>(&body) {
        Ok(p) => format!("server answered {} {}: {}", p.status, p.title, p.detail),
        Err(_) => format!(
            "server answered {status}: {}",
            String::from_utf8_lossy(&body)
                .chars()
                .take(500)
                .collect::<String>()
        ),
    };
    let code = match status.as_u16() {
        400 | 415 => EXIT_BAD_INPUT,
        422 => EXIT_NOT_CALIBRATABLE,
        _ => EXIT_SERVER,
    };
    Err(Failure::new(code, anyhow!(message)))
}

pub(super) fn run(args: &UploadArgs) -> Result<u8, Failure> {
    // reqwest is built without a default TLS provider; ring is the one compiled in. A second
    // installation attempt only reports that one is installed already.
    let _ = rustls::crypto::ring::default_provider().install_default();
    tokio::runtime::Builder::new_current_thread()
        .enable_all()
        .build()
        .map_err(|e| Failure::new(1, anyhow!("cannot start the async runtime: {e}")))?
        .block_on(send(args))
}
