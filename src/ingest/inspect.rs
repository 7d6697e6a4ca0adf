//! What a file holds and how trapwise would read it, without reading its samples into a
//! recording: the format (and whether it is gzip-compressed), the cell layout and header
//! columns of a text table, the arrays of a `.npy` or `.npz` file with their shapes and element
//! types, the datasets that would be read, and the settings the file does not supply (sample
//! rate, unit, volts per count, datasets), by their keys in the settings table so that the CLI
//! and the service can name the flag or the field.
//!
//! Refusals the reader would make about the layout or the dataset choice are reported as the
//! `problem` of the inspection rather than as errors, since showing them is the point; a file
//! that is not readable at all (corrupt gzip or zip, an unknown format) is still an error.

use super::layout::{self, Layout};
use super::stream::LineChunks;
use super::text::{self, Sep};
use super::{
    Format, IngestError, IngestOptions, MIN_SAMPLES, READ_CHUNK_BYTES, SNIFF_BYTES, compressed,
    detect_format, npy, npz, read_prefix,
};
use std::io::Read;

/// One column of a text table's header.
#[derive(Clone, Debug, PartialEq)]
pub struct Column {
    /// The label as written.
    pub label: String,
    /// What trapwise makes of it: `time (s)`, `position (nm)`, `position (converted to nm)`,
    /// `position (no unit)`, or why it is refused.
    pub role: String,
}

/// One array of a `.npy` or `.npz` file.
#[derive(Clone, Debug, PartialEq)]
pub struct Dataset {
    /// The member name without `.npy` (`.npz`), or empty for a `.npy` file.
    pub name: String,
    /// The shape as Python writes it: `(8192, 2)`.
    pub shape: String,
    /// The element type as numpy writes it: `<f8`.
    pub dtype: String,
    /// Whether trapwise reads this element type and shape.
    pub readable: bool,
}

/// What a file holds (see the module documentation).
#[derive(Clone, Debug, PartialEq)]
pub struct Inspection {
    /// The format it would be read as.
    pub format: Format,
    /// Whether the file is gzip-compressed.
    pub gzip: bool,
    /// Text tables: the cell delimiter (`comma`, `semicolon`, `tab`, `space`) and whether
    /// numbers use a decimal comma.
    pub layout: Option<(&'static str, bool)>,
    /// Text tables: the header's columns (headerless columns are named `x`, `y`, `z`).
    pub columns: Vec<Column>,
    /// `.npy` and `.npz`: the arrays.
    pub datasets: Vec<Dataset>,
    /// `.npz`: the datasets that would be read, in axis order.
    pub chosen: Vec<String>,
    /// Keys of the settings the file does not supply and reading needs, in table order.
    pub missing: Vec<&'static str>,
    /// What reading would refuse about the layout or the choice of datasets.
    pub problem: Option<String>,
}

/// Inspects one file given as a stream (see the module documentation).
pub fn inspect(
    file_name: &str,
    source: &mut dyn Read,
    options: &IngestOptions,
) -> Result<Inspection, IngestError> {
    let mut magic = [0u8; 2];
    let n_magic = read_prefix(file_name, source, &mut magic)?;
    let head = magic.get(..n_magic).unwrap_or_default();
    let mut rejoined = head.chain(source);
    if head == compressed::GZIP_MAGIC {
        let mut inflated = compressed::Inflated::new(&mut rejoined, options.max_decompressed_bytes);
        let inner = compressed::inner_name(file_name);
        let found = inspect_plain(file_name, inner, &mut inflated, options);
        return match found {
            Ok(found) => Ok(Inspection {
                gzip: true,
                ..found
            }),
            Err(e) => Err(inflated.explain(file_name, e)),
        };
    }
    inspect_plain(file_name, file_name, &mut rejoined, options)
}

/// `inspect` of a stream that is not compressed (or already decompressed).
fn inspect_plain(
    file_name: &str,
    inner_name: &str,
    source: &mut dyn Read,
    options: &IngestOptions,
) -> Result<Inspection, IngestError> {
    let mut chunks = LineChunks::new(file_name, source, READ_CHUNK_BYTES);
    chunks.fill(SNIFF_BYTES)?;
    if chunks.unread().is_empty() {
        return Err(IngestError::Empty {
            file: file_name.to_string(),
        });
    }
    let format = match options.format {
        Some(format) => format,
        None => detect_format(inner_name, chunks.unread())?,
    };
    let mut found = Inspection {
        format,
        gzip: false,
        layout: None,
        columns: Vec::new(),
        datasets: Vec::new(),
        chosen: Vec::new(),
        missing: Vec::new(),
        problem: None,
    };
    let rate_missing = options.sample_rate_hz.is_none();
    let unit_missing = options.unit.is_none();
    match format {
        Format::Csv | Format::Tsv | Format::Columns => {
            let unread = chunks.unread();
            let prefix = unread.get(..SNIFF_BYTES).unwrap_or(unread);
            let whole = prefix.len() < SNIFF_BYTES;
            match layout::decide(file_name, prefix, whole, format, options) {
                Ok(layout) => text_columns(file_name, prefix, format, layout, &mut found),
                Err(e) => found.problem = Some(e.to_string()),
            }
            let has_time = found.columns.iter().any(|c| c.role.starts_with("time"));
            let unitless = found.columns.iter().any(|c| c.role == "position (no unit)");
            push_if(
                &mut found.missing,
                rate_missing && !has_time,
                "sample_rate_hz",
            );
            push_if(&mut found.missing, unit_missing && unitless, "units");
        }
        Format::RawF32 | Format::RawF64 | Format::RawI16 => {
            push_if(&mut found.missing, rate_missing, "sample_rate_hz");
            let integer = format == Format::RawI16;
            push_if(&mut found.missing, unit_missing && !integer, "units");
            let scale_missing = integer && options.volts_per_count.is_none();
            push_if(&mut found.missing, scale_missing, "volts_per_count");
        }
        Format::Npy | Format::Npz => {
            let bytes = chunks.into_remaining(None)?;
            arrays(file_name, &bytes, format, options, &mut found)?;
        }
    }
    Ok(found)
}

/// Appends `key` when `wanted`.
fn push_if(missing: &mut Vec<&'static str>, wanted: bool, key: &'static str) {
    if wanted {
        missing.push(key);
    }
}

/// The columns of a text table from its first line, as the reader would take them.
fn text_columns(file: &str, prefix: &[u8], format: Format, layout: Layout, found: &mut Inspection) {
    let delimiter = match layout.sep {
        Sep::Comma => "comma",
        Sep::Semicolon => "semicolon",
        Sep::Tab => "tab",
        Sep::Whitespace => "space",
    };
    found.layout = Some((delimiter, layout.decimal_comma));
    let Some((line, first)) = text::first_line(prefix) else {
        found.problem = Some("no header or data row in the first bytes".to_string());
        return;
    };
    if format == Format::Columns {
        let n_cols = text::split_cells(first, layout.sep).count();
        found.columns = (0..n_cols.min(3))
            .map(|idx| Column {
                label: super::axis_name(idx),
                role: "position (no unit)".to_string(),
            })
            .collect();
        return;
    }
    found.columns = text::header_roles(file, line, first, layout.sep);
}

/// The arrays of a `.npy` or `.npz` file, and for `.npz` the ones that would be read.
fn arrays(
    file: &str,
    bytes: &[u8],
    format: Format,
    options: &IngestOptions,
    found: &mut Inspection,
) -> Result<(), IngestError> {
    let members = match format {
        Format::Npz => npz::members(file, bytes, options)?,
        _ => vec![npz::Member {
            name: String::new(),
            bytes: bytes.to_vec(),
        }],
    };
    let mut any_float = false;
    let mut any_integer = false;
    for member in &members {
        let array = npy::read_array(file, &member.bytes)?;
        let readable = array.is_supported() && array.grid().is_some();
        if readable {
            any_float |= !array.is_integer();
            any_integer |= array.is_integer();
        }
        let long = array.grid().is_some_and(|g| g.n_samples() >= MIN_SAMPLES);
        if format == Format::Npz && options.datasets.is_empty() && readable && long {
            found.chosen.push(member.name.clone());
        }
        found.datasets.push(Dataset {
            name: member.name.clone(),
            shape: array.shape_text(),
            dtype: array.descr.clone(),
            readable,
        });
    }
    if format == Format::Npz {
        if !options.datasets.is_empty() {
            found.chosen = options.datasets.clone();
        } else if found.chosen.len() != 1 {
            found.problem = Some(format!(
                "{} members could be the recording; name them with the dataset setting",
                found.chosen.len()
            ));
            found.chosen.clear();
            found.missing.push("dataset");
        }
    }
    push_if(
        &mut found.missing,
        options.sample_rate_hz.is_none(),
        "sample_rate_hz",
    );
    push_if(
        &mut found.missing,
        options.unit.is_none() && any_float,
        "units",
    );
    let scale_missing = any_integer && options.volts_per_count.is_none() && options.unit.is_none();
    push_if(&mut found.missing, scale_missing, "volts_per_count");
    Ok(())
}
