//! gzip-compressed recordings (RFC 1952), of any format, decompressed as they are read.
//!
//! `Inflated` wraps the uploaded stream: the caller's hash still sees the bytes as uploaded
//! (the pipeline hashes what it hands to `ingest::read`), text is parsed from the decompressed
//! stream a piece at a time as before, and the decompressed size is counted against a limit
//! so that a small file that expands enormously (a compression bomb) is refused once it passes
//! the limit, without ever holding more than one piece of it. Several gzip members one after
//! the other (what `cat a.gz b.gz` makes) are one stream, as gzip itself reads them.
//!
//! A failure of the decompressor (bad header, corrupt deflate data, a wrong checksum, a stream
//! cut short) is told apart from a failure of the stream below it, so that a damaged file is
//! the client's fault (`IngestError::CompressedCorrupt`) and a disk fault stays a read error.

use super::IngestError;
use flate2::read::MultiGzDecoder;
use std::io::{ErrorKind, Read};

/// The first two bytes of every gzip member (RFC 1952, section 2.3.1).
pub(super) const GZIP_MAGIC: [u8; 2] = [0x1f, 0x8b];

/// The name of the file inside: `rec.csv.gz` is read as `rec.csv` (also `.gzip`, any case), so
/// format detection sees the inner extension.
pub(super) fn inner_name(file_name: &str) -> &str {
    let lower = file_name.to_ascii_lowercase();
    for suffix in [".gz", ".gzip"] {
        if lower.ends_with(suffix) {
            return file_name
                .get(..file_name.len() - suffix.len())
                .unwrap_or(file_name);
        }
    }
    file_name
}

/// The compressed stream, counting its bytes and remembering whether it failed itself.
struct Counted<'r> {
    /// The bytes as uploaded.
    inner: &'r mut dyn Read,
    /// Compressed bytes read so far.
    n_bytes: u64,
    /// Whether a read of the stream itself failed (as opposed to the decompressor).
    failed: bool,
}

impl Read for Counted<'_> {
    fn read(&mut self, out: &mut [u8]) -> std::io::Result<usize> {
        match self.inner.read(out) {
            Ok(n) => {
                self.n_bytes += n as u64;
                Ok(n)
            }
            Err(e) => {
                if e.kind() != ErrorKind::Interrupted {
                    self.failed = true;
                }
                Err(e)
            }
        }
    }
}

/// Why decompression stopped early.
#[derive(Debug)]
enum Fault {
    /// The decompressed size passed the limit.
    TooLarge,
    /// The decompressor reported this.
    Corrupt(String),
}

/// A gzip stream decompressed as it is read, at most `limit_bytes` of it.
pub(super) struct Inflated<'r> {
    /// The decompressor over the counted stream.
    decoder: MultiGzDecoder<Counted<'r>>,
    /// Decompressed bytes handed out so far.
    produced: u64,
    /// Most decompressed bytes allowed.
    limit_bytes: u64,
    /// Why reading stopped, if it did for a reason of the compressed data.
    fault: Option<Fault>,
}

impl<'r> Inflated<'r> {
    /// Decompresses `source`, allowing at most `limit_bytes` out.
    pub(super) fn new(source: &'r mut dyn Read, limit_bytes: u64) -> Self {
        Inflated {
            decoder: MultiGzDecoder::new(Counted {
                inner: source,
                n_bytes: 0,
                failed: false,
            }),
            produced: 0,
            limit_bytes,
            fault: None,
        }
    }

    /// The error to report for a failed read: a read error caused by the compressed data
    /// becomes the located error that says so; anything else is returned unchanged.
    pub(super) fn explain(&self, file: &str, error: IngestError) -> IngestError {
        let byte_offset = self.decoder.get_ref().n_bytes;
        match (&self.fault, &error) {
            (Some(Fault::TooLarge), IngestError::Read { .. }) => {
                IngestError::DecompressedTooLarge {
                    file: file.to_string(),
                    byte_offset,
                    limit_bytes: self.limit_bytes,
                }
            }
            (Some(Fault::Corrupt(reason)), IngestError::Read { .. }) => {
                IngestError::CompressedCorrupt {
                    file: file.to_string(),
                    byte_offset,
                    reason: reason.clone(),
                }
            }
            _ => error,
        }
    }
}

impl Read for Inflated<'_> {
    fn read(&mut self, out: &mut [u8]) -> std::io::Result<usize> {
        // Ask for at most one byte past the limit: getting it proves the limit is passed.
        let room = self
            .limit_bytes
            .saturating_sub(self.produced)
            .saturating_add(1);
        let want = out.len().min(usize::try_from(room).unwrap_or(usize::MAX));
        let out = out.get_mut(..want).unwrap_or_default();
        match self.decoder.read(out) {
            Ok(n) => {
                self.produced += n as u64;
                if self.produced > self.limit_bytes {
                    self.fault = Some(Fault::TooLarge);
                    return Err(std::io::Error::other(
                        "the decompressed size passed the limit",
                    ));
                }
                Ok(n)
            }
            Err(e) if e.kind() == ErrorKind::Interrupted => Err(e),
            Err(e) => {
                if !self.decoder.get_ref().failed {
                    self.fault = Some(Fault::Corrupt(e.to_string()));
                }
                Err(e)
            }
        }
    }
}
