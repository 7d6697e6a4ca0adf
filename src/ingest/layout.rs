//! How the cells of a text table are separated and which decimal mark they use.
//!
//! Spreadsheet programs on machines with a European locale write CSV with the comma as the
//! decimal mark and the semicolon between cells (`x_nm;y_nm`, then `12,345678;-3,210000`).
//! `decide` settles both from the settings when they are given and otherwise from the header
//! and the first rows, which lie within the first `SNIFF_BYTES` of the file: the choice never
//! depends on how the stream is cut into pieces. When the first lines allow two readings, it
//! refuses with what it saw and the setting that settles it, rather than guess (a misread
//! decimal mark would scale every sample by a power of ten without any error).
//!
//! Rules without settings (common practice of spreadsheet exports, not a standard):
//! - TSV separates with tabs. A CSV header with `;` separates with semicolons, with `,` with
//!   commas, with both is ambiguous. A header of one column takes the separator from the rows:
//!   `;` in a row means semicolons, a `,` there is ambiguous (a decimal comma in one column,
//!   or a separator the header lacks). Headerless columns look at their first row: `;` first,
//!   then `,`, else runs of spaces and tabs.
//! - With the comma as separator the decimal mark is the point. Otherwise the cells of the
//!   first rows decide: commas only mean a decimal comma, points only (or neither) a decimal
//!   point, both are ambiguous.

use super::text::{BOM, Sep, split_cells};
use super::{Delimiter, Format, IngestError, IngestOptions};

/// Data rows looked at to decide the decimal mark (common practice; a mark that first appears
/// later is a located error naming the setting).
const ROWS_LOOKED_AT: usize = 20;

/// How a text table's cells are separated and written.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(super) struct Layout {
    /// Cell separator.
    pub(super) sep: Sep,
    /// Whether the decimal mark is a comma (else a point).
    pub(super) decimal_comma: bool,
}

impl From<Delimiter> for Sep {
    fn from(delimiter: Delimiter) -> Sep {
        match delimiter {
            Delimiter::Comma => Sep::Comma,
            Delimiter::Semicolon => Sep::Semicolon,
            Delimiter::Tab => Sep::Tab,
            Delimiter::Whitespace => Sep::Whitespace,
        }
    }
}

/// The first line that is not a comment and the rows after it, each with its 1-based line.
struct FirstLines<'a> {
    /// The header of a headed table or the first row of a headerless one.
    first: Option<(usize, &'a str)>,
    /// Up to `ROWS_LOOKED_AT` following non-blank lines, up to the first blank one.
    rows: Vec<(usize, &'a str)>,
}

/// Splits the first bytes of a file (`whole` if they are the whole file, else a line cut at
/// the end is left out) into its first line and rows.
fn first_lines(prefix: &[u8], whole: bool) -> FirstLines<'_> {
    let prefix = prefix.strip_prefix(BOM).unwrap_or(prefix);
    let valid = match std::str::from_utf8(prefix) {
        Ok(text) => text,
        Err(e) => std::str::from_utf8(prefix.get(..e.valid_up_to()).unwrap_or_default())
            .unwrap_or_default(),
    };
    let complete = match (whole, valid.rfind('\n')) {
        (true, _) => valid,
        (false, Some(last_lf)) => valid.get(..last_lf).unwrap_or_default(),
        (false, None) => "",
    };
    let mut lines = complete.lines().enumerate().map(|(idx, l)| (idx + 1, l));
    let first = lines
        .by_ref()
        .find(|(_, l)| !(l.trim().is_empty() || l.trim_start().starts_with('#')));
    let rows = lines
        .take_while(|(_, l)| !l.trim().is_empty())
        .take(ROWS_LOOKED_AT)
        .collect();
    FirstLines { first, rows }
}

/// Decides the layout of a CSV, TSV or headerless-columns file from the settings and its first
/// `prefix` bytes (see the module documentation); `whole` says whether that is all of it.
pub(super) fn decide(
    file: &str,
    prefix: &[u8],
    whole: bool,
    format: Format,
    options: &IngestOptions,
) -> Result<Layout, IngestError> {
    if options.delimiter == Some(Delimiter::Comma) && options.decimal_comma == Some(true) {
        return Err(IngestError::DecimalCommaConflict {
            file: file.to_string(),
        });
    }
    let lines = first_lines(prefix, whole);
    let sep = match options.delimiter {
        Some(delimiter) => Sep::from(delimiter),
        None => separator(file, format, &lines, options.decimal_comma)?,
    };
    let decimal_comma = match options.decimal_comma {
        Some(decimal_comma) => decimal_comma,
        None if sep == Sep::Comma => false,
        None if format == Format::Columns => decimal_mark(file, sep, lines.first.iter())?,
        None => decimal_mark(file, sep, lines.rows.iter())?,
    };
    Ok(Layout { sep, decimal_comma })
}

/// The separator told from the first lines.
fn separator(
    file: &str,
    format: Format,
    lines: &FirstLines<'_>,
    decimal_comma: Option<bool>,
) -> Result<Sep, IngestError> {
    let Some((line, first)) = lines.first else {
        // Nothing to read: the reader reports the missing header or rows.
        return Ok(Sep::Comma);
    };
    let comma_is_decimal = decimal_comma == Some(true);
    let ambiguous = |seen: String| IngestError::DelimiterAmbiguous {
        file: file.to_string(),
        line,
        seen,
    };
    match format {
        Format::Tsv => Ok(Sep::Tab),
        Format::Columns => Ok(match (first.contains(';'), first.contains(',')) {
            (true, _) => Sep::Semicolon,
            (false, true) if !comma_is_decimal => Sep::Comma,
            _ => Sep::Whitespace,
        }),
        _ => match (first.contains(';'), first.contains(',')) {
            (true, true) => Err(ambiguous("the header holds both ';' and ','".to_string())),
            (true, false) => Ok(Sep::Semicolon),
            (false, true) if comma_is_decimal => Err(ambiguous(
                "the header separates its columns with ',' but the comma is set to be the \
                 decimal mark"
                    .to_string(),
            )),
            (false, true) => Ok(Sep::Comma),
            (false, false) => one_column_header(file, line, lines, decimal_comma),
        },
    }
}

/// The separator of a table whose header names one column: from the rows.
fn one_column_header(
    file: &str,
    header_line: usize,
    lines: &FirstLines<'_>,
    decimal_comma: Option<bool>,
) -> Result<Sep, IngestError> {
    if lines.rows.iter().any(|(_, row)| row.contains(';')) {
        return Ok(Sep::Semicolon);
    }
    let with_comma = lines.rows.iter().find(|(_, row)| row.contains(','));
    match (with_comma, decimal_comma) {
        (Some(_), Some(true)) => Ok(Sep::Whitespace),
        (Some((line, row)), None) => Err(IngestError::DecimalMarkAmbiguous {
            file: file.to_string(),
            line: *line,
            seen: format!(
                "the header at line {header_line} names one column but this row, '{}', holds \
                 a comma, which is either a decimal comma or a separator the header lacks \
                 (then name every column in the header)",
                quote(row)
            ),
        }),
        _ => Ok(Sep::Comma),
    }
}

/// The decimal mark told from the cells of the given rows: a comma if some cell has one and
/// none has a point; ambiguous if both occur.
fn decimal_mark<'a>(
    file: &str,
    sep: Sep,
    rows: impl Iterator<Item = &'a (usize, &'a str)>,
) -> Result<bool, IngestError> {
    let mut comma: Option<(usize, &str)> = None;
    let mut point: Option<(usize, &str)> = None;
    for &(line, row) in rows {
        for cell in split_cells(row, sep) {
            let cell = cell.trim();
            if comma.is_none() && cell.contains(',') {
                comma = Some((line, cell));
            }
            if point.is_none() && cell.contains('.') {
                point = Some((line, cell));
            }
        }
        if let (Some((comma_line, comma_cell)), Some((point_line, point_cell))) = (comma, point) {
            return Err(IngestError::DecimalMarkAmbiguous {
                file: file.to_string(),
                line: comma_line.max(point_line),
                seen: format!(
                    "the cell '{}' at line {comma_line} has a comma and the cell '{}' at line \
                     {point_line} a point",
                    quote(comma_cell),
                    quote(point_cell)
                ),
            });
        }
    }
    Ok(comma.is_some())
}

/// The first characters of a text, for a message.
fn quote(text: &str) -> String {
    text.trim().chars().take(40).collect()
}
