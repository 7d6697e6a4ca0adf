//! File formats for bead recordings: text tables, raw little-endian binary and NumPy `.npy`.
//!
//! `read` turns one uploaded or local file, given as a byte stream, into a `Recording`; `parse`
//! does the same for bytes already in memory; `encode` writes a `Recording` back in any of the
//! same formats (used by `trapwise simulate`; everything it writes parses back to the same
//! samples). The parsers see only a `std::io::Read` or a byte slice and open nothing themselves,
//! so the CLI and the HTTP service share them unchanged. Text is parsed a piece at a time as it
//! is read (see `stream`), so a CSV file never sits in memory whole; binary formats, which are
//! no larger than their samples as f64, are read whole and then decoded. Every failure is an `IngestError` naming the file and
//! the place (line and column for text, byte offset for binary) with a hint of the fix; no input
//! makes these functions panic.
//!
//! Formats read:
//! - `csv` / `tsv`: a header row naming an optional time column and one to three position
//!   columns (see `text`), comma, semicolon or tab separated, with a decimal point or, in
//!   semicolon-separated files, a decimal comma (see `layout`);
//! - `columns`: headerless numeric columns, one to three positions, comma, tab or space
//!   separated;
//! - `raw-f32`, `raw-f64`, `raw-i16`: little-endian samples, channels interleaved;
//! - `npy`: NumPy's array file (NEP 1, format versions 1.0 and 2.0);
//! - `npz`: NumPy's zip archive of `.npy` members, stored or deflated (see `npz`).
//!
//! Any of them may be gzip-compressed (`.gz`, told by its magic bytes): it is decompressed as
//! it is read, up to `IngestOptions::max_decompressed_bytes` (see `compressed`).

mod binary;
mod compressed;
mod error;
mod inspect;
mod layout;
mod npy;
mod npz;
mod stream;
mod text;
mod write;

pub use error::IngestError;
pub use inspect::{Column, Dataset, Inspection, inspect};
pub use stream::READ_CHUNK_BYTES;
pub use write::encode;

use crate::recording::{AxisTrace, PositionUnit, Recording};
use std::io::Read;

/// Minimum number of samples per axis a recording must have.
///
/// A power spectrum of fewer samples has too few frequency bins to fit a Lorentzian with any
/// confidence (common practice).
pub const MIN_SAMPLES: usize = 1024;

/// Default relative tolerance on the uniformity of time steps and on the agreement between a
/// given sample rate and a time column (common practice).
pub const DEFAULT_TIME_TOLERANCE: f64 = 1e-3;

/// The file formats trapwise reads and writes.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Format {
    /// Comma-separated values with a header row.
    Csv,
    /// Tab-separated values with a header row.
    Tsv,
    /// Headerless numeric columns (positions only), comma, tab or space separated.
    Columns,
    /// Raw little-endian IEEE 754 single precision samples, channels interleaved.
    RawF32,
    /// Raw little-endian IEEE 754 double precision samples, channels interleaved.
    RawF64,
    /// Raw little-endian signed 16-bit detector counts, channels interleaved.
    RawI16,
    /// NumPy `.npy` array file (NEP 1).
    Npy,
    /// NumPy `.npz` archive of `.npy` members.
    Npz,
}

impl Format {
    /// Every format, in a stable order (for help texts and tests).
    pub const ALL: [Format; 8] = [
        Format::Csv,
        Format::Tsv,
        Format::Columns,
        Format::RawF32,
        Format::RawF64,
        Format::RawI16,
        Format::Npy,
        Format::Npz,
    ];

    /// The format with the given name (`name()`) or short alias (`f32`, `f64`, `i16`),
    /// ignoring ASCII case and surrounding whitespace; `None` for anything else.
    pub fn parse_name(s: &str) -> Option<Format> {
        let s = s.trim();
        let candidates: [(&str, Format); 11] = [
            ("csv", Format::Csv),
            ("tsv", Format::Tsv),
            ("columns", Format::Columns),
            ("raw-f32", Format::RawF32),
            ("raw-f64", Format::RawF64),
            ("raw-i16", Format::RawI16),
            ("npy", Format::Npy),
            ("npz", Format::Npz),
            ("f32", Format::RawF32),
            ("f64", Format::RawF64),
            ("i16", Format::RawI16),
        ];
        candidates
            .iter()
            .find(|(name, _)| name.eq_ignore_ascii_case(s))
            .map(|&(_, format)| format)
    }

    /// The canonical lower-case name, accepted by `parse_name`.
    pub fn name(self) -> &'static str {
        match self {
            Format::Csv => "csv",
            Format::Tsv => "tsv",
            Format::Columns => "columns",
            Format::RawF32 => "raw-f32",
            Format::RawF64 => "raw-f64",
            Format::RawI16 => "raw-i16",
            Format::Npy => "npy",
            Format::Npz => "npz",
        }
    }

    /// The file extension (without the dot) that `detect_format` maps back to this format.
    pub fn extension(self) -> &'static str {
        match self {
            Format::Csv => "csv",
            Format::Tsv => "tsv",
            Format::Columns => "txt",
            Format::RawF32 => "f32",
            Format::RawF64 => "f64",
            Format::RawI16 => "i16",
            Format::Npy => "npy",
            Format::Npz => "npz",
        }
    }
}

/// The cell separator of a text table, when given instead of told from the file.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Delimiter {
    /// `,`.
    Comma,
    /// `;`, as spreadsheet programs write CSV where the comma is the decimal mark.
    Semicolon,
    /// A tab.
    Tab,
    /// Runs of spaces and tabs.
    Whitespace,
}

impl Delimiter {
    /// The delimiter with the given name (`comma`, `semicolon`, `tab`, `space`) or the
    /// character itself (`,` or `;`), ignoring ASCII case and surrounding whitespace.
    pub fn parse_name(s: &str) -> Option<Delimiter> {
        match s.trim().to_ascii_lowercase().as_str() {
            "comma" | "," => Some(Delimiter::Comma),
            "semicolon" | ";" => Some(Delimiter::Semicolon),
            "tab" => Some(Delimiter::Tab),
            "space" | "whitespace" => Some(Delimiter::Whitespace),
            _ => None,
        }
    }
}

/// How to read a file: explicit overrides and the facts a file format may not carry.
#[derive(Clone, Debug)]
pub struct IngestOptions {
    /// Explicit format; `None` detects it with `detect_format`.
    pub format: Option<Format>,
    /// Sample rate in hertz. Required for formats without a time column; with a time column it
    /// must agree with it within `time_tolerance`.
    pub sample_rate_hz: Option<f64>,
    /// Unit of the positions. Text headers may give it with a suffix (`x_nm`, `x_V`) instead;
    /// if both are given they must agree.
    pub unit: Option<PositionUnit>,
    /// Number of interleaved channels in raw binary files (1 to 3, default 1); ignored elsewhere.
    pub channels: Option<usize>,
    /// Volts per ADC count, scaling integer samples (raw i16, integer npy) to volts. Required
    /// for raw i16; ignored for floating-point samples.
    pub volts_per_count: Option<f64>,
    /// Relative tolerance on uniform time steps and on sample-rate agreement (default 1e-3).
    pub time_tolerance: f64,
    /// Cell separator of a text table; `None` tells it from the header and first rows.
    pub delimiter: Option<Delimiter>,
    /// Whether text cells use the decimal comma; `None` tells it from the first rows.
    pub decimal_comma: Option<bool>,
    /// Members of an archive (`.npz`) to read, one per axis, or one two-dimensional member;
    /// empty chooses the one numeric member of at least `MIN_SAMPLES` samples.
    pub datasets: Vec<String>,
    /// Most bytes a compressed file (or an archive member) may decompress to; past it the file
    /// is refused (`IngestError::DecompressedTooLarge`), so a small file cannot make the reader
    /// fill memory or disk.
    pub max_decompressed_bytes: u64,
}

/// Default of `IngestOptions::max_decompressed_bytes`, bytes: 4 GiB, above the service's
/// default upload limit of 1 GiB (which the service passes instead) and above any text
/// recording of 2^25 samples per axis (common practice; not tuned).
pub const DEFAULT_MAX_DECOMPRESSED_BYTES: u64 = 4 << 30;

impl Default for IngestOptions {
    fn default() -> Self {
        IngestOptions {
            format: None,
            sample_rate_hz: None,
            unit: None,
            channels: None,
            volts_per_count: None,
            time_tolerance: DEFAULT_TIME_TOLERANCE,
            delimiter: None,
            decimal_comma: None,
            datasets: Vec::new(),
            max_decompressed_bytes: DEFAULT_MAX_DECOMPRESSED_BYTES,
        }
    }
}

/// The `.npy` magic string (NEP 1, "A Simple File Format for NumPy Arrays").
const NPY_MAGIC: &[u8] = b"\x93NUMPY";

/// How many leading bytes content sniffing looks at.
const SNIFF_BYTES: usize = 64 * 1024;

/// Decides the format of a file from its name and first bytes.
///
/// Rules, in order: bytes starting with the `.npy` magic string are `Npy` whatever the name,
/// and a zip file is `Npz`; then the extension (ASCII case ignored): `.npy`, `.npz`, `.f32`, `.f64`, `.i16` name their format;
/// `.csv` and `.tsv` are `Csv` and `Tsv` unless their first non-comment line is all numbers,
/// which makes them headerless `Columns`; `.txt`, `.dat` and names without a known extension
/// are sniffed: text (UTF-8 with digits and line breaks, no control bytes) whose first
/// non-comment line is all numbers is `Columns`, a header with commas is `Csv`, with tabs `Tsv`.
/// `.bin` and anything else is an `UnknownFormat` error asking for an explicit format.
pub fn detect_format(file_name: &str, bytes: &[u8]) -> Result<Format, IngestError> {
    if bytes.starts_with(NPY_MAGIC) {
        return Ok(Format::Npy);
    }
    if bytes.starts_with(npz::ZIP_MAGIC) {
        return Ok(Format::Npz);
    }
    let base = file_name.rsplit(['/', '\\']).next().unwrap_or(file_name);
    let extension = base
        .rsplit_once('.')
        .map(|(_, ext)| ext.to_ascii_lowercase());
    let unknown = |reason: String| IngestError::UnknownFormat {
        file: file_name.to_string(),
        reason,
    };
    match extension.as_deref() {
        Some("npy") => Ok(Format::Npy),
        Some("npz") => Ok(Format::Npz),
        Some("f32") => Ok(Format::RawF32),
        Some("f64") => Ok(Format::RawF64),
        Some("i16") => Ok(Format::RawI16),
        Some("csv") => Ok(text::sniff(bytes).map_or(Format::Csv, |s| s.headed_or(Format::Csv))),
        Some("tsv") => Ok(text::sniff(bytes).map_or(Format::Tsv, |s| s.headed_or(Format::Tsv))),
        Some("bin") => Err(unknown(
            "the extension '.bin', which may hold any sample type".to_string(),
        )),
        other => {
            if bytes.is_empty() {
                return Err(IngestError::Empty {
                    file: file_name.to_string(),
                });
            }
            let known_text = matches!(other, Some("txt" | "dat"));
            match text::sniff(bytes) {
                Some(sniffed) => Ok(sniffed.format()),
                None if known_text => Ok(Format::Columns),
                None => Err(unknown(match other {
                    Some(ext) => format!(
                        "the extension '.{}' or the content",
                        ext.chars().take(16).collect::<String>()
                    ),
                    None => "the content (the name has no extension)".to_string(),
                })),
            }
        }
    }
}

/// Reads one recording file from bytes in memory.
///
/// `file_name` is used for format detection (see `detect_format`) and in error messages only.
/// The format is `options.format` if given, else detected. Returns a `Recording` with one to
/// three axes of at least `MIN_SAMPLES` finite samples each, a positive finite sample rate in
/// hertz and one unit. With a time column the sample rate is (n - 1)/(t_last - t_first).
pub fn parse(
    file_name: &str,
    bytes: &[u8],
    options: &IngestOptions,
) -> Result<Recording, IngestError> {
    let mut source = bytes;
    read_in_pieces(
        file_name,
        &mut source,
        Some(bytes.len()),
        options,
        READ_CHUNK_BYTES,
    )
    .map(|(recording, _)| recording)
}

/// Reads one recording file from a stream, returning it with the format it was read as.
///
/// Same rules and errors as `parse`, plus `IngestError::Read` when the stream itself fails.
/// `size_hint` is the length of the stream in bytes if known (a file's length); it only
/// pre-sizes buffers. Text formats are parsed as they are read, so memory stays near the size
/// of the samples; binary formats are read whole first.
pub fn read(
    file_name: &str,
    source: &mut dyn std::io::Read,
    size_hint: Option<usize>,
    options: &IngestOptions,
) -> Result<(Recording, Format), IngestError> {
    read_in_pieces(file_name, source, size_hint, options, READ_CHUNK_BYTES)
}

/// `read` with the size of the pieces text is read in (`READ_CHUNK_BYTES` outside tests, which
/// use tiny pieces to check that the cuts between pieces change nothing).
fn read_in_pieces(
    file_name: &str,
    source: &mut dyn std::io::Read,
    size_hint: Option<usize>,
    options: &IngestOptions,
    chunk_bytes: usize,
) -> Result<(Recording, Format), IngestError> {
    validate_options(file_name, options)?;
    let mut magic = [0u8; 2];
    let n_magic = read_prefix(file_name, source, &mut magic)?;
    let head = magic.get(..n_magic).unwrap_or_default();
    let mut rejoined = head.chain(source);
    if head == compressed::GZIP_MAGIC {
        let mut inflated = compressed::Inflated::new(&mut rejoined, options.max_decompressed_bytes);
        let inner = compressed::inner_name(file_name);
        let read = read_plain(file_name, inner, &mut inflated, None, options, chunk_bytes);
        return read.map_err(|e| inflated.explain(file_name, e));
    }
    read_plain(
        file_name,
        file_name,
        &mut rejoined,
        size_hint,
        options,
        chunk_bytes,
    )
}

/// Reads the first bytes of a stream into `out` (fewer only at its end); returns how many.
fn read_prefix(
    file: &str,
    source: &mut dyn std::io::Read,
    out: &mut [u8],
) -> Result<usize, IngestError> {
    let mut filled = 0;
    while let Some(rest) = out.get_mut(filled..).filter(|rest| !rest.is_empty()) {
        match source.read(rest) {
            Ok(0) => break,
            Ok(n) => filled += n,
            Err(e) if e.kind() == std::io::ErrorKind::Interrupted => {}
            Err(e) => {
                return Err(IngestError::Read {
                    file: file.to_string(),
                    byte_offset: filled,
                    reason: e.to_string(),
                });
            }
        }
    }
    Ok(filled)
}

/// `read_in_pieces` of a stream that is not compressed (or already decompressed): `inner_name`
/// is the name whose extension tells the format (`rec.csv` for `rec.csv.gz`), `file_name` the
/// one messages give.
fn read_plain(
    file_name: &str,
    inner_name: &str,
    source: &mut dyn std::io::Read,
    size_hint: Option<usize>,
    options: &IngestOptions,
    chunk_bytes: usize,
) -> Result<(Recording, Format), IngestError> {
    let mut chunks = stream::LineChunks::new(file_name, source, chunk_bytes);
    chunks.fill(SNIFF_BYTES)?;
    if chunks.unread().is_empty() {
        return Err(IngestError::Empty {
            file: file_name.to_string(),
        });
    }
    let format = match options.format {
        Some(format) => format,
        None => detect_format(inner_name, chunks.unread()).map_err(|e| match e {
            IngestError::UnknownFormat { reason, .. } => IngestError::UnknownFormat {
                file: file_name.to_string(),
                reason,
            },
            other => other,
        })?,
    };
    let recording = match format {
        Format::Csv | Format::Tsv | Format::Columns => {
            // Pieces are at least `chunk_bytes` long, so with the default size every piece is
            // split; tests with tiny pieces split (almost) every piece, and a whole-file read
            // in one piece splits none, which makes it the sequential reference.
            let split = text::Split::on_this_machine(chunk_bytes.min(text::SPLIT_MIN_BYTES));
            // The first `SNIFF_BYTES` (or the whole of a shorter file) are in the buffer whatever
            // the piece size, so the layout does not depend on it.
            let unread = chunks.unread();
            let prefix = unread.get(..SNIFF_BYTES).unwrap_or(unread);
            let whole = prefix.len() < SNIFF_BYTES;
            let layout = layout::decide(file_name, prefix, whole, format, options)?;
            text::read_text(file_name, chunks, format, layout, options, size_hint, split)?
        }
        Format::RawF32 | Format::RawF64 | Format::RawI16 => {
            let bytes = chunks.into_remaining(size_hint)?;
            binary::parse_raw(file_name, &bytes, format, options)?
        }
        Format::Npy => {
            let bytes = chunks.into_remaining(size_hint)?;
            npy::parse_npy(file_name, &bytes, options)?
        }
        Format::Npz => {
            let bytes = chunks.into_remaining(size_hint)?;
            npz::parse_npz(file_name, &bytes, options)?
        }
    };
    Ok((recording, format))
}

/// Rejects option values no file could make sense of, before any byte is read.
fn validate_options(file: &str, options: &IngestOptions) -> Result<(), IngestError> {
    let tolerance = options.time_tolerance;
    if !(tolerance.is_finite() && tolerance >= 0.0) {
        return Err(IngestError::ToleranceInvalid {
            file: file.to_string(),
            value: tolerance,
        });
    }
    if let Some(rate) = options.sample_rate_hz {
        check_rate(file, rate)?;
    }
    if let Some(channels) = options.channels.filter(|c| !(1..=3).contains(c)) {
        return Err(IngestError::ChannelsInvalid {
            file: file.to_string(),
            channels,
        });
    }
    let bad_scale = |v: &f64| !(v.is_finite() && *v > 0.0);
    if let Some(value) = options.volts_per_count.filter(bad_scale) {
        return Err(IngestError::VoltsPerCountInvalid {
            file: file.to_string(),
            value,
        });
    }
    Ok(())
}

/// Checks that a sample rate is positive and finite.
fn check_rate(file: &str, rate_hz: f64) -> Result<f64, IngestError> {
    if rate_hz.is_finite() && rate_hz > 0.0 {
        Ok(rate_hz)
    } else {
        Err(IngestError::SampleRateInvalid {
            file: file.to_string(),
            value: rate_hz,
        })
    }
}

/// The sample rate for a format without time stamps: the option, which must be present.
fn required_rate(file: &str, format: Format, options: &IngestOptions) -> Result<f64, IngestError> {
    match options.sample_rate_hz {
        Some(rate) => check_rate(file, rate),
        None => Err(IngestError::SampleRateMissing {
            file: file.to_string(),
            format: format.name(),
        }),
    }
}

/// The unit for a format that does not record it: the option, which must be present.
fn required_unit(
    file: &str,
    format: &'static str,
    options: &IngestOptions,
) -> Result<PositionUnit, IngestError> {
    options.unit.ok_or_else(|| IngestError::UnitRequired {
        file: file.to_string(),
        format,
    })
}

/// How integer samples become positions: scaled to volts, or taken as nanometres.
///
/// With `volts_per_count` the samples are counts times volts per count, in volts (asking for nm
/// as well is a conflict). Without it, integers are nanometres if the unit nm was requested and
/// `allow_nm` holds; otherwise the volts per count is missing.
fn integer_scale(
    file: &str,
    dtype: &str,
    options: &IngestOptions,
    allow_nm: bool,
) -> Result<(f64, PositionUnit), IngestError> {
    match (options.volts_per_count, options.unit) {
        (Some(_), Some(PositionUnit::Nanometre)) => Err(IngestError::VoltsPerCountUnitConflict {
            file: file.to_string(),
        }),
        (Some(volts_per_count), _) => Ok((volts_per_count, PositionUnit::Volt)),
        (None, Some(PositionUnit::Nanometre)) if allow_nm => Ok((1.0, PositionUnit::Nanometre)),
        (None, _) => Err(IngestError::VoltsPerCountMissing {
            file: file.to_string(),
            dtype: dtype.to_string(),
            hint: if allow_nm {
                ", or the unit nm if the integers are nanometres"
            } else {
                ""
            },
        }),
    }
}

/// Names positional axes `x`, `y`, `z` in order.
fn axis_name(axis_idx: usize) -> String {
    ["x", "y", "z"]
        .get(axis_idx)
        .map_or_else(|| format!("axis{axis_idx}"), |name| (*name).to_string())
}

/// Names unlabelled columns `x`, `y`, `z` in order and assembles the recording (see `finish`).
fn finish_unlabelled(
    file: &str,
    sample_rate_hz: f64,
    unit: PositionUnit,
    columns: Vec<Vec<f64>>,
) -> Result<Recording, IngestError> {
    let axes = columns
        .into_iter()
        .enumerate()
        .map(|(axis_idx, samples)| AxisTrace {
            name: axis_name(axis_idx),
            samples,
        })
        .collect();
    finish(file, sample_rate_hz, unit, axes)
}

/// Assembles the final recording after checking the sample count.
fn finish(
    file: &str,
    sample_rate_hz: f64,
    unit: PositionUnit,
    axes: Vec<AxisTrace>,
) -> Result<Recording, IngestError> {
    let n_samples = axes.first().map_or(0, |a| a.samples.len());
    if n_samples < MIN_SAMPLES {
        return Err(IngestError::TooFewSamples {
            file: file.to_string(),
            found: n_samples,
        });
    }
    Ok(Recording {
        sample_rate_hz,
        unit,
        axes,
    })
}

#[cfg(test)]
mod tests;

#[cfg(test)]
#[path = "format_tests.rs"]
mod format_tests;
