//! Raw little-endian binary recordings: f32, f64 or i16 samples with channels interleaved.
//!
//! Such files carry nothing but samples, so the sample rate, the channel count (default 1) and,
//! for floats, the unit come from the options; i16 counts become volts through the volts per
//! count. Frame k holds sample k of every channel: channel c of frame k is at byte offset
//! (k * channels + c) * sample size. IEEE 754 binary32/binary64 (IEEE Std 754-2019) and two's
//! complement i16 are decoded with the standard library's `from_le_bytes`.

use super::{
    Format, IngestError, IngestOptions, MIN_SAMPLES, finish_unlabelled, integer_scale,
    required_rate, required_unit,
};
use crate::recording::Recording;

/// Reads a raw little-endian file of the given raw format.
pub(super) fn parse_raw(
    file: &str,
    bytes: &[u8],
    format: Format,
    options: &IngestOptions,
) -> Result<Recording, IngestError> {
    let channels = options.channels.unwrap_or(1).clamp(1, 3);
    let (sample_bytes, decode): (usize, fn(&[u8]) -> f64) = match format {
        Format::RawF32 => (4, decode_f32),
        Format::RawI16 => (2, decode_i16),
        _ => (8, decode_f64),
    };
    let (scale, unit) = match format {
        Format::RawI16 => integer_scale(file, "i16", options, false)?,
        _ => (1.0, required_unit(file, format.name(), options)?),
    };
    let sample_rate_hz = required_rate(file, format, options)?;
    let frame_bytes = sample_bytes * channels;
    let tail_bytes = bytes.len() % frame_bytes;
    if tail_bytes != 0 {
        return Err(IngestError::TruncatedBinary {
            file: file.to_string(),
            byte_offset: bytes.len() - tail_bytes,
            tail_bytes,
            frame_bytes,
        });
    }
    let n_samples = bytes.len() / frame_bytes;
    if n_samples < MIN_SAMPLES {
        return Err(IngestError::TooFewSamples {
            file: file.to_string(),
            found: n_samples,
        });
    }
    let mut axes: Vec<Vec<f64>> = (0..channels)
        .map(|_| Vec::with_capacity(n_samples))
        .collect();
    for (frame_idx, frame) in bytes.chunks_exact(frame_bytes).enumerate() {
        for (channel_idx, (axis, sample)) in axes
            .iter_mut()
            .zip(frame.chunks_exact(sample_bytes))
            .enumerate()
        {
            let value = decode(sample) * scale;
            if !value.is_finite() {
                return Err(IngestError::NonFiniteSample {
                    file: file.to_string(),
                    byte_offset: (frame_idx * channels + channel_idx) * sample_bytes,
                    value,
                });
            }
            axis.push(value);
        }
    }
    finish_unlabelled(file, sample_rate_hz, unit, axes)
}

/// Decodes a little-endian binary32 (NaN if the slice is not 4 bytes, which callers prevent).
fn decode_f32(bytes: &[u8]) -> f64 {
    bytes
        .try_into()
        .map_or(f64::NAN, |b| f64::from(f32::from_le_bytes(b)))
}

/// Decodes a little-endian binary64 (NaN if the slice is not 8 bytes, which callers prevent).
fn decode_f64(bytes: &[u8]) -> f64 {
    bytes.try_into().map_or(f64::NAN, f64::from_le_bytes)
}

/// Decodes a little-endian i16 (NaN if the slice is not 2 bytes, which callers prevent).
fn decode_i16(bytes: &[u8]) -> f64 {
    bytes
        .try_into()
        .map_or(f64::NAN, |b| f64::from(i16::from_le_bytes(b)))
}
