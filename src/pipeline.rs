//! One recording from bytes to report: parse, calibrate, build the wire report. The CLI and the
//! HTTP service both call `run`, so they give the same numbers for the same bytes and settings.

use crate::calibration::{self, CalibrationError};
use crate::ingest::{self, IngestError};
use crate::report::{self, CalibrationReport, InputFacts};
use crate::settings::{Settings, SettingsError};
use sha2::{Digest, Sha256};
use std::io::Read;

/// Why a recording produced no calibration.
#[derive(Debug, thiserror::Error)]
pub enum PipelineError {
    /// The settings are incomplete or invalid.
    #[error(transparent)]
    Settings(#[from] SettingsError),
    /// The file could not be read as a recording.
    #[error(transparent)]
    Ingest(#[from] IngestError),
    /// The recording parsed but cannot be calibrated.
    #[error(transparent)]
    Calibration(#[from] CalibrationError),
}

/// Parses `bytes` (named `file_name`, for format detection and messages), calibrates them
/// with `settings`, and returns the report (with plot arrays when `with_plots`).
pub fn run(
    file_name: &str,
    bytes: &[u8],
    settings: &Settings,
    with_plots: bool,
) -> Result<CalibrationReport, PipelineError> {
    let mut source = bytes;
    run_from(
        file_name,
        &mut source,
        Some(bytes.len()),
        settings,
        with_plots,
    )
}

/// `run` on a stream: the recording is parsed as it is read (text formats never sit in memory
/// whole; see `ingest::read`) and the SHA-256 in the report is taken on the way through, so
/// the file is read once. `size_hint` is the stream's length in bytes if known.
///
/// Reading and hashing run on a second thread, a few pieces ahead of the parser (see
/// `ReadAhead`): SHA-256 costs about a fifth of parsing a CSV file and all of the time of
/// reading a binary one, and it need not wait for either.
pub fn run_from(
    file_name: &str,
    source: &mut (dyn Read + Send),
    size_hint: Option<usize>,
    settings: &Settings,
    with_plots: bool,
) -> Result<CalibrationReport, PipelineError> {
    let limit = ingest::DEFAULT_MAX_DECOMPRESSED_BYTES;
    run_from_limited(file_name, source, size_hint, settings, with_plots, limit)
}

/// `run_from` with a limit on the decompressed size of a compressed file, bytes (the service
/// passes its upload limit, so that a small compressed upload cannot expand past it).
pub fn run_from_limited(
    file_name: &str,
    source: &mut (dyn Read + Send),
    size_hint: Option<usize>,
    settings: &Settings,
    with_plots: bool,
    max_decompressed_bytes: u64,
) -> Result<CalibrationReport, PipelineError> {
    let (mut ingest_options, conditions, analysis) = settings.resolve()?;
    ingest_options.max_decompressed_bytes = max_decompressed_bytes;
    let (read, sha256) = std::thread::scope(|scope| {
        let (mut ahead, digest) = ReadAhead::start(scope, source);
        let read = ingest::read(file_name, &mut ahead, size_hint, &ingest_options);
        // Dropping the reader stops the thread at its next piece if parsing ended early.
        drop(ahead);
        let sha256 = digest
            .join()
            .map(|hasher| format!("{:x}", hasher.finalize()));
        (read, sha256)
    });
    let (recording, format) = read?;
    // Bytes after the end of a text table cannot exist (the parser reads to the end), and
    // binary formats are read whole, so the digest covers the whole file. The hashing thread
    // only reads and hashes, so it cannot panic short of a bug in the hasher.
    let sha256 = sha256.map_err(|_| IngestError::Read {
        file: file_name.to_string(),
        byte_offset: 0,
        reason: "the thread hashing the file stopped unexpectedly".to_string(),
    })?;
    let calibration = calibration::calibrate(&recording, &conditions, &analysis)?;
    let facts = InputFacts {
        file_name: file_name.to_string(),
        sha256,
        format: format.name().to_string(),
    };
    Ok(report::build(
        &calibration,
        &recording,
        &facts,
        &conditions,
        &analysis,
        with_plots,
    ))
}

/// Size of one piece the read-ahead thread reads and hashes, bytes (common practice for
/// buffered IO; not tuned).
const READ_AHEAD_PIECE_BYTES: usize = 1 << 20;

/// Pieces the read-ahead thread may hold ready beyond the one being parsed: enough to keep
/// the parser fed, few enough to stay small next to the samples (4 MiB; not tuned).
const READ_AHEAD_PIECES: usize = 4;

/// A reader fed by a thread that reads the source a few pieces ahead and passes every byte
/// through a SHA-256 (FIPS 180-4) on the way; emptied pieces go back to the thread for reuse.
struct ReadAhead {
    /// Pieces read and hashed, or the error the source gave.
    ready: std::sync::mpsc::Receiver<std::io::Result<Vec<u8>>>,
    /// Emptied pieces returned for reuse.
    spent: std::sync::mpsc::SyncSender<Vec<u8>>,
    /// The piece being handed out, and how much of it has been.
    current: Vec<u8>,
    consumed: usize,
    /// The source reported its end or an error.
    done: bool,
}

impl ReadAhead {
    /// Starts the thread; its result is the hasher over every byte read.
    fn start<'scope>(
        scope: &'scope std::thread::Scope<'scope, '_>,
        source: &'scope mut (dyn Read + Send),
    ) -> (ReadAhead, std::thread::ScopedJoinHandle<'scope, Sha256>) {
        let (ready_tx, ready) = std::sync::mpsc::sync_channel(READ_AHEAD_PIECES);
        let (spent, spent_rx) = std::sync::mpsc::sync_channel::<Vec<u8>>(READ_AHEAD_PIECES + 2);
        let digest = scope.spawn(move || {
            let mut hasher = Sha256::new();
            loop {
                let mut piece = spent_rx.try_recv().unwrap_or_default();
                piece.resize(READ_AHEAD_PIECE_BYTES, 0);
                let n = match read_full(source, &mut piece) {
                    Ok(n) => n,
                    Err(e) => {
                        // The receiver may be gone; then nobody needs the error.
                        let _ = ready_tx.send(Err(e));
                        break;
                    }
                };
                piece.truncate(n);
                hasher.update(&piece);
                // An empty piece tells the reader the source ended.
                if ready_tx.send(Ok(piece)).is_err() || n == 0 {
                    break;
                }
            }
            hasher
        });
        let ahead = ReadAhead {
            ready,
            spent,
            current: Vec::new(),
            consumed: 0,
            done: false,
        };
        (ahead, digest)
    }
}

/// Reads until `out` is full or the source ends; returns the bytes read.
fn read_full(source: &mut dyn Read, out: &mut [u8]) -> std::io::Result<usize> {
    let mut filled = 0;
    while filled < out.len() {
        match source.read(out.get_mut(filled..).unwrap_or_default()) {
            Ok(0) => break,
            Ok(n) => filled += n,
            Err(e) if e.kind() == std::io::ErrorKind::Interrupted => {}
            Err(e) => return Err(e),
        }
    }
    Ok(filled)
}

impl Read for ReadAhead {
    fn read(&mut self, out: &mut [u8]) -> std::io::Result<usize> {
        while self.consumed == self.current.len() {
            if self.done {
                return Ok(0);
            }
            let next = match self.ready.recv() {
                Ok(Ok(piece)) => piece,
                Ok(Err(e)) => {
                    self.done = true;
                    return Err(e);
                }
                // The thread ended without saying why: only after an end or an error.
                Err(_) => {
                    self.done = true;
                    return Ok(0);
                }
            };
            if next.is_empty() {
                self.done = true;
            }
            let spent = std::mem::replace(&mut self.current, next);
            self.consumed = 0;
            // The thread may have finished or hold enough pieces; then the piece is dropped.
            let _ = self.spent.try_send(spent);
        }
        let rest = self.current.get(self.consumed..).unwrap_or_default();
        let n = rest.len().min(out.len());
        if let (Some(dst), Some(src)) = (out.get_mut(..n), rest.get(..n)) {
            dst.copy_from_slice(src);
        }
        self.consumed += n;
        Ok(n)
    }
}
