//! Encoders: a `Recording` written in any format `parse` reads, for `trapwise simulate`.
//!
//! What each format keeps, so that `parse` gives back the same recording:
//! - `csv`, `tsv`: a header `time_s,<name>_<unit>...` and a time column t_k = k / f_s, so the
//!   sample rate, unit and axis names travel with the file; numbers are written in Rust's
//!   shortest round-trip form, so samples come back bit for bit.
//! - `columns`: samples only, space separated, shortest round-trip form; rate and unit must be
//!   given again when reading.
//! - `raw-f32`, `raw-f64`: little-endian samples, channels interleaved; f32 rounds each sample
//!   to the nearest binary32 (relative error at most 2^-24, IEEE Std 754-2019 round to nearest).
//! - `raw-i16`: counts round(v / volts_per_count), needing a recording in volts; reading back
//!   with the same volts per count gives each sample within half a count.
//! - `npy`: format version 1.0, dtype `<f8`, C order, shape (N,) or (N, C) (NEP 1), with the
//!   header padded by spaces and a final line feed to a multiple of 64 bytes, as the
//!   `numpy.lib.format` documentation describes.

use std::fmt::Write as _;

use super::{Format, IngestError, NPY_MAGIC};
use crate::recording::{PositionUnit, Recording};

/// Writes `recording` in `format`.
///
/// `volts_per_count` is needed for `Format::RawI16` (volts per ADC count, positive and finite)
/// and ignored otherwise. Fails if the recording does not have one to three axes of equal
/// length, has a sample rate that is not positive and finite (text formats with a time column),
/// axis names that cannot be column labels (CSV, TSV), non-finite samples, or samples that do
/// not fit the format (beyond the f32 range, or beyond i16 counts).
pub fn encode(
    recording: &Recording,
    format: Format,
    volts_per_count: Option<f64>,
) -> Result<Vec<u8>, IngestError> {
    let n_axes = recording.axes.len();
    if !(1..=3).contains(&n_axes) {
        return Err(IngestError::EncodeAxisCount { found: n_axes });
    }
    let n_samples = recording.n_samples();
    for (axis_idx, axis) in recording.axes.iter().enumerate() {
        if axis.samples.len() != n_samples {
            return Err(IngestError::EncodeAxisLength {
                axis_idx,
                expected: n_samples,
                found: axis.samples.len(),
            });
        }
        if let Some(sample_idx) = axis.samples.iter().position(|v| !v.is_finite()) {
            return Err(IngestError::EncodeValue {
                axis: axis.name.clone(),
                sample_idx,
                value: axis.samples.get(sample_idx).copied().unwrap_or(f64::NAN),
                format: format.name(),
            });
        }
    }
    match format {
        Format::Csv => encode_headed(recording, ','),
        Format::Tsv => encode_headed(recording, '\t'),
        Format::Columns => Ok(encode_columns(recording)),
        Format::RawF32 => encode_f32(recording),
        Format::RawF64 => interleave(recording, 8, |v, out| {
            out.extend_from_slice(&v.to_le_bytes());
            Ok(())
        })
        .map_err(|fault| value_error(recording, Format::RawF64, fault)),
        Format::RawI16 => encode_i16(recording, volts_per_count),
        Format::Npy => Ok(encode_npy(recording)),
        Format::Npz => encode_npz(recording),
    }
}

/// An `.npz` archive of one stored member, `recording.npy`, holding what `encode_npy` writes
/// (the layout of `numpy.savez` with one array; the reader chooses that member by itself).
fn encode_npz(recording: &Recording) -> Result<Vec<u8>, IngestError> {
    let fault = |e: zip::result::ZipError| IngestError::ZipCorrupt {
        file: "(archive being written)".to_string(),
        reason: e.to_string(),
    };
    let mut writer = zip::ZipWriter::new(std::io::Cursor::new(Vec::new()));
    let stored = zip::write::SimpleFileOptions::default()
        .compression_method(zip::CompressionMethod::Stored)
        .large_file(true);
    writer.start_file("recording.npy", stored).map_err(fault)?;
    std::io::Write::write_all(&mut writer, &encode_npy(recording))
        .map_err(|e| fault(zip::result::ZipError::Io(e)))?;
    Ok(writer.finish().map_err(fault)?.into_inner())
}

/// Appends a number in a shortest form that parses back to the same f64: Rust's `Display`
/// for moderate magnitudes, `LowerExp` for very small or large ones (both are shortest
/// round-trip representations in the standard library).
fn push_number(out: &mut String, value: f64) {
    let magnitude = value.abs();
    // Writing to a String cannot fail.
    let _ = if value == 0.0 || (1e-5..1e16).contains(&magnitude) {
        write!(out, "{value}")
    } else {
        write!(out, "{value:e}")
    };
}

/// Whether a name can be written as a header label and read back unchanged.
fn is_writable_label(name: &str) -> bool {
    !name.is_empty()
        && name.trim() == name
        && !name.starts_with('#')
        && !name.contains([',', '\t', '"', '\n', '\r'])
}

/// CSV or TSV with a header and a time column in seconds.
fn encode_headed(recording: &Recording, sep: char) -> Result<Vec<u8>, IngestError> {
    let sample_rate_hz = recording.sample_rate_hz;
    if !(sample_rate_hz.is_finite() && sample_rate_hz > 0.0) {
        return Err(IngestError::EncodeSampleRate {
            value: sample_rate_hz,
        });
    }
    for (axis_idx, axis) in recording.axes.iter().enumerate() {
        if !is_writable_label(&axis.name) {
            return Err(IngestError::EncodeAxisName {
                axis_idx,
                name: axis.name.clone(),
            });
        }
    }
    let n_samples = recording.n_samples();
    let mut out = String::with_capacity((n_samples + 1) * 24 * (recording.axes.len() + 1));
    out.push_str("time_s");
    for axis in &recording.axes {
        out.push(sep);
        out.push_str(&axis.name);
        out.push('_');
        out.push_str(recording.unit.suffix());
    }
    out.push('\n');
    for sample_idx in 0..n_samples {
        push_number(&mut out, sample_idx as f64 / sample_rate_hz);
        for axis in &recording.axes {
            out.push(sep);
            push_number(
                &mut out,
                axis.samples.get(sample_idx).copied().unwrap_or_default(),
            );
        }
        out.push('\n');
    }
    Ok(out.into_bytes())
}

/// Headerless space-separated columns.
fn encode_columns(recording: &Recording) -> Vec<u8> {
    let n_samples = recording.n_samples();
    let mut out = String::with_capacity(n_samples * 24 * recording.axes.len());
    for sample_idx in 0..n_samples {
        for (axis_idx, axis) in recording.axes.iter().enumerate() {
            if axis_idx > 0 {
                out.push(' ');
            }
            push_number(
                &mut out,
                axis.samples.get(sample_idx).copied().unwrap_or_default(),
            );
        }
        out.push('\n');
    }
    out.into_bytes()
}

/// Writes samples frame by frame (sample k of every axis, in axis order) with `put`.
fn interleave(
    recording: &Recording,
    sample_bytes: usize,
    mut put: impl FnMut(f64, &mut Vec<u8>) -> Result<(), (usize, usize, f64)>,
) -> Result<Vec<u8>, (usize, usize, f64)> {
    let n_samples = recording.n_samples();
    let mut out = Vec::with_capacity(n_samples * sample_bytes * recording.axes.len());
    for sample_idx in 0..n_samples {
        for (axis_idx, axis) in recording.axes.iter().enumerate() {
            let value = axis.samples.get(sample_idx).copied().unwrap_or_default();
            put(value, &mut out).map_err(|_| (axis_idx, sample_idx, value))?;
        }
    }
    Ok(out)
}

/// Turns an interleaving failure (axis, sample, value) into an error for `format`.
fn value_error(recording: &Recording, format: Format, fault: (usize, usize, f64)) -> IngestError {
    let (axis_idx, sample_idx, value) = fault;
    IngestError::EncodeValue {
        axis: recording
            .axes
            .get(axis_idx)
            .map(|a| a.name.clone())
            .unwrap_or_default(),
        sample_idx,
        value,
        format: format.name(),
    }
}

/// Raw little-endian binary32, failing on samples beyond the f32 range.
fn encode_f32(recording: &Recording) -> Result<Vec<u8>, IngestError> {
    interleave(recording, 4, |v, out| {
        // Rounds to nearest; magnitudes beyond f32::MAX become infinite and are rejected.
        let single = v as f32;
        if single.is_finite() {
            out.extend_from_slice(&single.to_le_bytes());
            Ok(())
        } else {
            Err((0, 0, v))
        }
    })
    .map_err(|fault| value_error(recording, Format::RawF32, fault))
}

/// Raw little-endian i16 counts round(v / volts_per_count) of a recording in volts.
fn encode_i16(recording: &Recording, volts_per_count: Option<f64>) -> Result<Vec<u8>, IngestError> {
    if recording.unit != PositionUnit::Volt {
        return Err(IngestError::EncodeUnit);
    }
    let volts_per_count = match volts_per_count {
        Some(v) if v.is_finite() && v > 0.0 => v,
        other => {
            return Err(IngestError::EncodeVoltsPerCount {
                given: other.map_or_else(|| "none".to_string(), |v| v.to_string()),
            });
        }
    };
    interleave(recording, 2, |v, out| {
        let counts = (v / volts_per_count).round();
        if (f64::from(i16::MIN)..=f64::from(i16::MAX)).contains(&counts) {
            // In range and integral, so the cast is exact.
            out.extend_from_slice(&(counts as i16).to_le_bytes());
            Ok(())
        } else {
            Err((0, 0, v))
        }
    })
    .map_err(|fault| value_error(recording, Format::RawI16, fault))
}

/// NumPy `.npy` version 1.0, `<f8`, C order, shape (N,) or (N, C) (NEP 1).
fn encode_npy(recording: &Recording) -> Vec<u8> {
    let n_samples = recording.n_samples();
    let n_axes = recording.axes.len();
    let shape = if n_axes == 1 {
        format!("({n_samples},)")
    } else {
        format!("({n_samples}, {n_axes})")
    };
    let mut header = format!("{{'descr': '<f8', 'fortran_order': False, 'shape': {shape}, }}");
    // Magic (6) + version (2) + header length (2) + header, padded to a multiple of 64 with
    // spaces and ending in a line feed.
    let unpadded = NPY_MAGIC.len() + 2 + 2 + header.len() + 1;
    let padding = (64 - unpadded % 64) % 64;
    header.extend(std::iter::repeat_n(' ', padding));
    header.push('\n');
    let header_len = u16::try_from(header.len()).unwrap_or(u16::MAX);
    let mut out = Vec::with_capacity(10 + header.len() + n_samples * n_axes * 8);
    out.extend_from_slice(NPY_MAGIC);
    out.extend_from_slice(&[1, 0]);
    out.extend_from_slice(&header_len.to_le_bytes());
    out.extend_from_slice(header.as_bytes());
    for sample_idx in 0..n_samples {
        for axis in &recording.axes {
            let value = axis.samples.get(sample_idx).copied().unwrap_or_default();
            out.extend_from_slice(&value.to_le_bytes());
        }
    }
    out
}
