//! Reading a recording from a byte stream in bounded pieces.
//!
//! Text recordings are about 28 bytes per sample (a time stamp and a position written out in
//! decimal), 3.5 times the samples as f64, so reading a whole CSV file into memory before parsing
//! it made the text, not the samples, the largest allocation of a calibration. `LineChunks`
//! hands the text parser whole lines a piece at a time instead: each piece ends just after a
//! line feed (or at the end of the stream), so no cell, line ending or UTF-8 character is ever
//! split between pieces, and the parser keeps line numbers and byte offsets across pieces.

use super::IngestError;
use std::io::{ErrorKind, Read};

/// Default size of one piece read from a stream, bytes. Large enough that the per-piece work
/// (a UTF-8 check, a search for the last line feed) is negligible, small enough to stay out of
/// the memory budget (common practice for buffered IO; not tuned).
pub const READ_CHUNK_BYTES: usize = 1 << 20;

/// Reads a stream in pieces of whole lines, remembering where each piece starts.
pub(super) struct LineChunks<'r> {
    /// File name for error messages.
    file: &'r str,
    /// Where the bytes come from.
    reader: &'r mut dyn Read,
    /// Bytes read and not yet handed out start at `unread`.
    buf: Vec<u8>,
    /// Offset in `buf` of the first byte not yet handed out.
    unread: usize,
    /// Offset in the stream of `buf[0]`.
    base: usize,
    /// Whether the reader has reported the end of the stream.
    eof: bool,
    /// Minimum size of a piece before it is cut at a line feed, bytes.
    chunk_bytes: usize,
    /// The last byte handed out, to tell whether the stream ended with a line feed.
    last_byte: Option<u8>,
}

impl<'r> LineChunks<'r> {
    /// Wraps `reader`; pieces are at least `chunk_bytes` long (at least 1) unless the stream
    /// ends first.
    pub(super) fn new(file: &'r str, reader: &'r mut dyn Read, chunk_bytes: usize) -> Self {
        LineChunks {
            file,
            reader,
            buf: Vec::new(),
            unread: 0,
            base: 0,
            eof: false,
            chunk_bytes: chunk_bytes.max(1),
            last_byte: None,
        }
    }

    /// The bytes read and not yet handed out.
    pub(super) fn unread(&self) -> &[u8] {
        self.buf.get(self.unread..).unwrap_or_default()
    }

    /// Whether the stream ended with a line feed (false for an empty stream).
    pub(super) fn ended_with_line_feed(&self) -> bool {
        self.last_byte == Some(b'\n')
    }

    /// Reads until at least `wanted` bytes are unread or the stream ends.
    pub(super) fn fill(&mut self, wanted: usize) -> Result<(), IngestError> {
        while self.unread().len() < wanted && !self.eof {
            self.read_some(wanted - self.unread().len())?;
        }
        Ok(())
    }

    /// One `read` call of up to `at_least.max(chunk_bytes)` bytes appended to the buffer.
    fn read_some(&mut self, at_least: usize) -> Result<(), IngestError> {
        let old_len = self.buf.len();
        let want = at_least.max(self.chunk_bytes);
        self.buf.resize(old_len + want, 0);
        loop {
            let spare = self.buf.get_mut(old_len..).unwrap_or_default();
            match self.reader.read(spare) {
                Ok(n) => {
                    self.buf.truncate(old_len + n);
                    if n == 0 {
                        self.eof = true;
                    }
                    return Ok(());
                }
                Err(e) if e.kind() == ErrorKind::Interrupted => continue,
                Err(e) => {
                    self.buf.truncate(old_len);
                    return Err(IngestError::Read {
                        file: self.file.to_string(),
                        byte_offset: self.base + old_len,
                        reason: e.to_string(),
                    });
                }
            }
        }
    }

    /// The next piece of whole lines with its offset in the stream, or `None` at the end.
    ///
    /// A piece ends just after its last line feed; only the final piece of a stream that does
    /// not end in a line feed ends elsewhere. A line longer than `chunk_bytes` makes the piece
    /// as long as needed to hold it.
    pub(super) fn next_lines(&mut self) -> Result<Option<(usize, &[u8])>, IngestError> {
        // Drop what was handed out, so the buffer holds at most one piece and a partial line.
        if self.unread > 0 {
            self.buf.drain(..self.unread);
            self.base += self.unread;
            self.unread = 0;
        }
        self.fill(self.chunk_bytes)?;
        let mut searched = 0;
        let end = loop {
            let rest = self.buf.get(searched..).unwrap_or_default();
            if let Some(last_lf) = rest.iter().rposition(|&b| b == b'\n') {
                break searched + last_lf + 1;
            }
            if self.eof {
                break self.buf.len();
            }
            searched = self.buf.len();
            self.read_some(self.chunk_bytes)?;
        };
        if end == 0 {
            return Ok(None);
        }
        self.unread = end;
        let piece = self.buf.get(..end).unwrap_or_default();
        self.last_byte = piece.last().copied();
        Ok(Some((self.base, piece)))
    }

    /// Reads the rest of the stream and returns every byte not yet handed out. With the
    /// stream's length (`size_hint`, bytes) the buffer is allocated once at that size.
    pub(super) fn into_remaining(
        mut self,
        size_hint: Option<usize>,
    ) -> Result<Vec<u8>, IngestError> {
        self.buf.drain(..self.unread);
        self.base += self.unread;
        self.unread = 0;
        if let Some(total) = size_hint {
            self.buf
                .reserve_exact(total.saturating_sub(self.base + self.buf.len()));
        }
        if !self.eof {
            if let Err(e) = self.reader.read_to_end(&mut self.buf) {
                return Err(IngestError::Read {
                    file: self.file.to_string(),
                    byte_offset: self.base + self.buf.len(),
                    reason: e.to_string(),
                });
            }
        }
        Ok(self.buf)
    }
}
