//! NumPy `.npz` archives: a zip file of `.npy` members, stored or deflated, as `numpy.savez`
//! and `numpy.savez_compressed` write them (documented in `numpy.lib.npyio`).
//!
//! Each member `NAME.npy` is a dataset named `NAME` and is read by the `.npy` reader, so every
//! rule and error of `npy` holds per member (the member is named in the message as
//! `file[NAME.npy]`). Which members become the recording:
//! - `IngestOptions::datasets` names them: one name per axis, each a one-dimensional member,
//!   all of one length and of one kind (all integer or all floating point); or a single name
//!   of a one- or two-dimensional member, read as a `.npy` file would be.
//! - Without names, the one member with a supported element type, a samples-by-axes shape and at
//!   least `MIN_SAMPLES` samples; none or several such members is an error listing them all.
//!
//! Axes read from several members are named after them; a single member's axes are `x`, `y`,
//! `z` as in a `.npy` file. The sample rate and the unit come from the options, as for `.npy`.
//! Members are decompressed whole (they are binary, no larger than their samples), the sum of
//! their sizes held to `IngestOptions::max_decompressed_bytes` so that a small archive cannot
//! expand without bound.

use super::npy::{self, NpyArray};
use super::{Format, IngestError, IngestOptions, MIN_SAMPLES, finish, required_rate};
use crate::recording::{AxisTrace, Recording};
use std::io::Read;

/// The first bytes of a zip file's first local header (APPNOTE.TXT, section 4.3.7).
pub(super) const ZIP_MAGIC: &[u8] = b"PK\x03\x04";

/// One member of the archive: its dataset name and its bytes.
pub(super) struct Member {
    /// The member's name without `.npy`.
    pub(super) name: String,
    /// The decompressed `.npy` bytes.
    pub(super) bytes: Vec<u8>,
}

/// The members of an archive in their order, decompressed (see the module documentation).
pub(super) fn members(
    file: &str,
    bytes: &[u8],
    options: &IngestOptions,
) -> Result<Vec<Member>, IngestError> {
    let corrupt = |e: zip::result::ZipError| IngestError::ZipCorrupt {
        file: file.to_string(),
        reason: e.to_string(),
    };
    let mut archive = zip::ZipArchive::new(std::io::Cursor::new(bytes)).map_err(corrupt)?;
    let mut budget = options.max_decompressed_bytes;
    let mut members = Vec::with_capacity(archive.len());
    for member_idx in 0..archive.len() {
        let mut entry = archive.by_index(member_idx).map_err(corrupt)?;
        if entry.is_dir() {
            continue;
        }
        let name = entry.name().to_string();
        // Never trust the declared size for the allocation: read at most one byte past the
        // budget and refuse when that byte arrives.
        let mut data =
            Vec::with_capacity(usize::try_from(entry.size().min(budget)).unwrap_or_default());
        let read = (&mut entry)
            .take(budget.saturating_add(1))
            .read_to_end(&mut data);
        if let Err(e) = read {
            return Err(IngestError::ZipCorrupt {
                file: file.to_string(),
                reason: format!("member '{name}': {e}"),
            });
        }
        let n_bytes = data.len() as u64;
        if n_bytes > budget {
            return Err(IngestError::DecompressedTooLarge {
                file: file.to_string(),
                byte_offset: entry.data_start().unwrap_or_default(),
                limit_bytes: options.max_decompressed_bytes,
            });
        }
        budget -= n_bytes;
        let name = name
            .strip_suffix(".npy")
            .map_or(name.clone(), str::to_string);
        members.push(Member { name, bytes: data });
    }
    Ok(members)
}

/// The place of a member in messages: `file[NAME.npy]`.
fn member_file(file: &str, name: &str) -> String {
    format!("{file}[{name}.npy]")
}

/// One line per member for messages and `inspect`: `'x' (4096,) <f8`, or why it is not an array.
pub(super) fn describe(file: &str, members: &[Member]) -> String {
    if members.is_empty() {
        return "no members".to_string();
    }
    let described: Vec<String> = members
        .iter()
        .map(
            |m| match npy::read_array(&member_file(file, &m.name), &m.bytes) {
                Ok(array) => format!("'{}' {} {}", m.name, array.shape_text(), array.descr),
                Err(_) => format!("'{}' (not a .npy array)", m.name),
            },
        )
        .collect();
    described.join(", ")
}

/// Whether a member can be the recording when none is named.
fn is_candidate(array: &NpyArray<'_>) -> bool {
    array.is_supported() && array.grid().is_some_and(|g| g.n_samples() >= MIN_SAMPLES)
}

/// Reads a `.npz` archive (see the module documentation).
pub(super) fn parse_npz(
    file: &str,
    bytes: &[u8],
    options: &IngestOptions,
) -> Result<Recording, IngestError> {
    let members = members(file, bytes, options)?;
    let available = || describe(file, &members);
    let chosen: Vec<&Member> = if options.datasets.is_empty() {
        let candidates: Vec<&Member> = members
            .iter()
            .filter(|m| {
                npy::read_array(&member_file(file, &m.name), &m.bytes)
                    .is_ok_and(|a| is_candidate(&a))
            })
            .collect();
        if candidates.len() != 1 {
            return Err(IngestError::DatasetChoice {
                file: file.to_string(),
                problem: if candidates.is_empty() {
                    format!("no member is a numeric array of at least {MIN_SAMPLES} samples")
                } else {
                    format!("{} members could be the recording", candidates.len())
                },
                available: available(),
            });
        }
        candidates
    } else {
        let mut chosen = Vec::with_capacity(options.datasets.len());
        for name in &options.datasets {
            let wanted = name.strip_suffix(".npy").unwrap_or(name);
            match members.iter().find(|m| m.name == wanted) {
                Some(member) => chosen.push(member),
                None => {
                    return Err(IngestError::DatasetMissing {
                        file: file.to_string(),
                        name: name.clone(),
                        available: available(),
                    });
                }
            }
        }
        chosen
    };
    match chosen.as_slice() {
        [one] => npy::parse_npy(&member_file(file, &one.name), &one.bytes, options),
        several => axes_from_members(file, several, options),
    }
}

/// One axis from each of several one-dimensional members.
fn axes_from_members(
    file: &str,
    chosen: &[&Member],
    options: &IngestOptions,
) -> Result<Recording, IngestError> {
    let unusable = |name: &str, problem: String| IngestError::DatasetUnusable {
        file: file.to_string(),
        name: name.to_string(),
        problem,
    };
    if let Some(fourth) = chosen.get(3) {
        return Err(unusable(
            &fourth.name,
            format!(
                "is the fourth dataset named, but a recording has at most 3 axes (x, y, z); \
                 {} were named",
                chosen.len()
            ),
        ));
    }
    let mut axes = Vec::with_capacity(chosen.len());
    let mut first: Option<(&str, usize, bool)> = None;
    let mut unit = None;
    for member in chosen {
        let place = member_file(file, &member.name);
        let array = npy::read_array(&place, &member.bytes)?;
        let (dtype, grid) = array.checked(&place)?;
        if array.shape.len() != 1 {
            return Err(unusable(
                &member.name,
                format!(
                    "has shape {}; with one dataset per axis each must be one-dimensional \
                     (name a two-dimensional dataset alone)",
                    array.shape_text()
                ),
            ));
        }
        let n_samples = grid.n_samples();
        match first {
            Some((first_name, first_n, _)) if first_n != n_samples => {
                return Err(unusable(
                    &member.name,
                    format!(
                        "has {n_samples} samples but '{first_name}' has {first_n}; the axes \
                         of one recording have one length"
                    ),
                ));
            }
            Some((first_name, _, integer)) if integer != array.is_integer() => {
                return Err(unusable(
                    &member.name,
                    format!(
                        "holds {} but '{first_name}' does not; the axes of one recording \
                         share one type",
                        if array.is_integer() {
                            "integers"
                        } else {
                            "floats"
                        }
                    ),
                ));
            }
            None => first = Some((&member.name, n_samples, array.is_integer())),
            Some(_) => {}
        }
        let (scale, member_unit) = npy::scale_and_unit(&place, Format::Npz, &array, options)?;
        unit = Some(member_unit);
        let samples = array
            .decode(&place, dtype, grid, scale)?
            .into_iter()
            .next()
            .unwrap_or_default();
        axes.push(AxisTrace {
            name: member.name.clone(),
            samples,
        });
    }
    let sample_rate_hz = required_rate(file, Format::Npz, options)?;
    let unit = unit.ok_or_else(|| IngestError::DatasetChoice {
        file: file.to_string(),
        problem: "no dataset was named".to_string(),
        available: String::new(),
    })?;
    finish(file, sample_rate_hz, unit, axes)
}
