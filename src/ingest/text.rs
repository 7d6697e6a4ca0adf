//! Text tables: CSV and TSV with a header row, and headerless numeric columns.
//!
//! A hand-written scanner walks the bytes once, parsing each cell in place with `fast_float2`
//! and tracking the line (1-based, physical lines) and the column (1-based cell index), so that a
//! bad cell is reported where it is without any per-line allocation. The layout rules:
//!
//! - An optional UTF-8 byte order mark; lines end in LF or CRLF; `#` lines and blank lines
//!   before the header (or before the first row of a headerless file) are skipped; blank lines
//!   after the last row are allowed, blank lines between rows are an error.
//! - CSV separates cells with `,` (or `;`, with a decimal point or a decimal comma), TSV with a
//!   tab; spaces (and, for CSV, tabs) around cells are ignored; header labels may be wrapped in
//!   double quotes. The separator and the decimal mark are decided before the first row is read
//!   (`layout::decide`).
//! - The header names an optional time column (`t` or `time`, any ASCII case, in seconds, or
//!   with unit `ms` or `us`: `time_s`, `t_ms`, `time (us)`) and one to three position columns
//!   whose names become the axis names. A position unit is a suffix `_nm`, `_V`, `_v` or a
//!   bracketed unit `x (nm)`, `x [V]`; micrometres (`_um`, `(µm)`) are converted to nm and
//!   millivolts (`_mV`, `[mV]`) to V; all position columns share one unit after conversion.
//! - Headerless columns hold one to three position columns, named `x`, `y`, `z`; the first data
//!   row decides the separator: a comma if it has one, else runs of spaces and tabs.
//!
//! CSV here is the unquoted subset of RFC 4180 (Common Format and MIME Type for CSV Files):
//! data cells are never quoted, and LF line ends are accepted as well as CRLF.

use super::layout::Layout;
use super::stream::LineChunks;
use super::{
    Format, IngestError, IngestOptions, MIN_SAMPLES, SNIFF_BYTES, check_rate, finish,
    finish_unlabelled, required_rate, required_unit,
};
use crate::recording::{AxisTrace, PositionUnit, Recording};

/// The UTF-8 byte order mark some editors put at the start of text files.
pub(super) const BOM: &[u8] = b"\xEF\xBB\xBF";

/// Pieces of text at least this long are scanned on two threads (`Table::scan_split`), bytes:
/// below it a thread costs more than it saves (about 2.5 ms of parsing per MiB here against
/// tens of microseconds to start a thread; common practice, not tuned).
pub(super) const SPLIT_MIN_BYTES: usize = 1 << 16;

/// When and how a piece of text is scanned in two halves.
#[derive(Clone, Copy, Debug)]
pub(super) struct Split {
    /// Rest of a piece long enough to be cut in two, bytes.
    pub(super) min_bytes: usize,
    /// Threads to use; with one the halves are scanned one after the other.
    pub(super) threads: usize,
}

impl Split {
    /// Pieces of at least `min_bytes` in two halves, on two threads if the machine has two.
    pub(super) fn on_this_machine(min_bytes: usize) -> Split {
        Split {
            min_bytes,
            threads: std::thread::available_parallelism().map_or(1, usize::from),
        }
    }
}

/// How many characters of a bad cell an error message quotes.
const MAX_QUOTED_CHARS: usize = 40;

/// The cell separator of a table.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(super) enum Sep {
    /// A single comma; spaces and tabs around cells are ignored.
    Comma,
    /// A single tab; spaces around cells are ignored.
    Tab,
    /// A single semicolon, as spreadsheet programs write CSV where the comma is the decimal
    /// mark; spaces and tabs around cells are ignored.
    Semicolon,
    /// One or more spaces or tabs.
    Whitespace,
}

impl Sep {
    /// The separator byte, if the separator is a single byte.
    fn byte(self) -> Option<u8> {
        match self {
            Sep::Comma => Some(b','),
            Sep::Tab => Some(b'\t'),
            Sep::Semicolon => Some(b';'),
            Sep::Whitespace => None,
        }
    }

    /// The separator of a line: semicolon if present (its cells may hold decimal commas), else
    /// comma if present, else tab if present, else whitespace.
    fn of_line(line: &[u8]) -> Sep {
        if line.contains(&b';') {
            Sep::Semicolon
        } else if line.contains(&b',') {
            Sep::Comma
        } else if line.contains(&b'\t') {
            Sep::Tab
        } else {
            Sep::Whitespace
        }
    }

    /// Whether padding around cells may contain tabs (not when the tab is the separator).
    fn pads_with_tab(self) -> bool {
        self != Sep::Tab
    }
}

/// What content sniffing found out about a text file.
#[derive(Clone, Copy, Debug)]
pub(super) struct Sniffed {
    /// The first row that is not a comment is all numbers.
    numeric_first_row: bool,
    /// Separator of that row.
    sep: Sep,
}

impl Sniffed {
    /// `Columns` for a numeric first row, else the given headed format.
    pub(super) fn headed_or(self, headed: Format) -> Format {
        if self.numeric_first_row {
            Format::Columns
        } else {
            headed
        }
    }

    /// `Columns` for a numeric first row, else `Csv` or `Tsv` by separator (a header separated
    /// by spaces is left to the `Columns` parser, which reports its first non-numeric cell).
    pub(super) fn format(self) -> Format {
        match (self.numeric_first_row, self.sep) {
            (false, Sep::Comma | Sep::Semicolon) => Format::Csv,
            (false, Sep::Tab) => Format::Tsv,
            _ => Format::Columns,
        }
    }
}

/// Looks at the first `SNIFF_BYTES` bytes: text if they are UTF-8 (a character cut at the end
/// is allowed), contain a digit and a line feed, and no control byte other than tab, CR and LF.
/// Returns `None` for anything that is not such text or has no row after the comments.
pub(super) fn sniff(bytes: &[u8]) -> Option<Sniffed> {
    let prefix = bytes.get(..SNIFF_BYTES).unwrap_or(bytes);
    let prefix = prefix.strip_prefix(BOM).unwrap_or(prefix);
    let text = match std::str::from_utf8(prefix) {
        Ok(text) => text,
        Err(e) if e.error_len().is_none() => {
            std::str::from_utf8(prefix.get(..e.valid_up_to())?).ok()?
        }
        Err(_) => return None,
    };
    let is_control = |b: u8| b.is_ascii_control() && !matches!(b, b'\t' | b'\r' | b'\n');
    if text.bytes().any(is_control)
        || !text.bytes().any(|b| b.is_ascii_digit())
        || !text.contains('\n')
    {
        return None;
    }
    let row = text
        .lines()
        .map(str::trim)
        .find(|line| !line.is_empty() && !line.starts_with('#'))?;
    let sep = Sep::of_line(row.as_bytes());
    // A semicolon-separated row may hold decimal commas; either mark makes it numeric.
    let decimal_comma = sep == Sep::Semicolon;
    let numeric_first_row = split_cells(row, sep).all(|cell| {
        is_number(cell.trim(), false) || (decimal_comma && is_number(cell.trim(), true))
    });
    Some(Sniffed {
        numeric_first_row,
        sep,
    })
}

/// Splits a line into cells by the separator (cells not trimmed).
pub(super) fn split_cells(line: &str, sep: Sep) -> Box<dyn Iterator<Item = &str> + '_> {
    match sep {
        Sep::Comma => Box::new(line.split(',')),
        Sep::Tab => Box::new(line.split('\t')),
        Sep::Semicolon => Box::new(line.split(';')),
        Sep::Whitespace => Box::new(line.split_ascii_whitespace()),
    }
}

/// Whether the whole text is one number as the row scanner reads it (`parse_cell`), with a
/// decimal point or, if `decimal_comma`, a decimal comma.
fn is_number(cell: &str, decimal_comma: bool) -> bool {
    let bytes = cell.as_bytes();
    !bytes.is_empty() && parse_cell(bytes, decimal_comma).is_some_and(|(_, n)| n == bytes.len())
}

/// The longest cell read with a decimal comma, bytes: longer cells are reported as not numeric
/// (a double needs at most 17 significant digits; an exponent and padding digits fit well
/// within this).
const MAX_DECIMAL_COMMA_CELL: usize = 64;

/// Reads the number at the start of `bytes`, returning it with the bytes it took.
///
/// With `decimal_comma` the comma is the decimal mark and a point is not a number character
/// (so `1.234,5`, with a thousands point, is refused rather than misread): the cell is copied
/// with the marks swapped into a small buffer and read there, byte for byte, so the count of
/// bytes taken is the same in the original.
#[inline]
fn parse_cell(bytes: &[u8], decimal_comma: bool) -> Option<(f64, usize)> {
    if !decimal_comma {
        return fast_float2::parse_partial::<f64, _>(bytes).ok();
    }
    let mut buf = [0u8; MAX_DECIMAL_COMMA_CELL];
    let n = bytes.len().min(MAX_DECIMAL_COMMA_CELL);
    for (dst, &b) in buf.iter_mut().zip(bytes.iter().take(n)) {
        *dst = match b {
            b',' => b'.',
            b'.' => b'#',
            other => other,
        };
    }
    fast_float2::parse_partial::<f64, _>(buf.get(..n).unwrap_or_default()).ok()
}

/// Reads a CSV, TSV or headerless-columns file from a stream (see the module documentation for
/// the layout), one piece of whole lines at a time.
///
/// Memory stays at the samples plus one piece: each piece is checked to be UTF-8, scanned and
/// dropped, and time stamps are checked as they arrive instead of being kept. `size_hint` (the
/// length of the whole stream, bytes, if known) only pre-sizes the sample vectors. `split` says
/// which pieces are scanned in two halves on two threads (`Table::scan_split`).
pub(super) fn read_text(
    file: &str,
    mut chunks: LineChunks<'_>,
    format: Format,
    layout: Layout,
    options: &IngestOptions,
    size_hint: Option<usize>,
    split: Split,
) -> Result<Recording, IngestError> {
    let mut line = 1;
    let mut at_start = true;
    let mut table: Option<Table> = None;
    while let Some((base, piece)) = chunks.next_lines()? {
        check_utf8(file, base, line, piece)?;
        let mut cursor = Cursor {
            bytes: piece,
            pos: 0,
            line,
        };
        if std::mem::take(&mut at_start) && piece.starts_with(BOM) {
            cursor.pos = BOM.len();
        }
        match table.as_mut() {
            Some(table) => table.scan_split(file, &mut cursor, split)?,
            None => {
                cursor.skip_preamble();
                if !cursor.at_end() {
                    let remaining = size_hint.map(|total| total.saturating_sub(base + cursor.pos));
                    let started = table.insert(Table::start(
                        file,
                        &mut cursor,
                        format,
                        layout,
                        options,
                        remaining,
                    )?);
                    started.scan_split(file, &mut cursor, split)?;
                }
            }
        }
        line = cursor.line;
    }
    match table {
        Some(table) => table.finish(file, options),
        None => {
            if at_start {
                return Err(IngestError::Empty {
                    file: file.to_string(),
                });
            }
            // The last line of the file: a final line feed does not start a new line.
            let last_line = if chunks.ended_with_line_feed() {
                (line - 1).max(1)
            } else {
                line
            };
            Err(match format {
                Format::Columns => IngestError::NoDataRows {
                    file: file.to_string(),
                    line: last_line,
                },
                _ => IngestError::NoHeader {
                    file: file.to_string(),
                    line: last_line,
                },
            })
        }
    }
}

/// Checks that a piece starting at byte `base` of the file, on line `first_line`, is UTF-8.
fn check_utf8(file: &str, base: usize, first_line: usize, piece: &[u8]) -> Result<(), IngestError> {
    match std::str::from_utf8(piece) {
        Ok(_) => Ok(()),
        Err(e) => {
            let valid = e.valid_up_to();
            Err(IngestError::InvalidUtf8 {
                file: file.to_string(),
                line: first_line + count_line_feeds(piece.get(..valid).unwrap_or(piece)),
                byte_offset: base + valid,
            })
        }
    }
}

/// Column index, axis name and conversion of each position column, in file order.
type PositionColumns = Vec<(usize, String, Scale)>;

/// What the first row of a table fixed, and the rows read so far.
struct Table {
    /// Cell separator and decimal mark.
    layout: Layout,
    /// What fixed `n_cols`, for messages: "header" or "first row".
    reference: &'static str,
    /// One vector per column; the time column's is emptied after each piece.
    columns: Vec<Vec<f64>>,
    /// Column index of the time column and the checks on its stamps.
    time: Option<(usize, TimeCheck)>,
    /// Headed tables: the header's line and the position columns with their names.
    header: Option<(usize, PositionColumns)>,
    /// Unit of the positions.
    unit: PositionUnit,
    /// Sample rate known before the rows (headerless tables).
    given_rate_hz: Option<f64>,
    /// Data rows read.
    n_rows: usize,
    /// A blank line followed so far only by blank lines: allowed at the end of the file only.
    trailing_blank: Option<usize>,
}

impl Table {
    /// Reads the header (or looks at the first row of a headerless table) at the cursor and
    /// sizes the columns for about `remaining` more bytes (the rest of the piece if unknown).
    fn start(
        file: &str,
        cursor: &mut Cursor<'_>,
        format: Format,
        layout: Layout,
        options: &IngestOptions,
        remaining: Option<usize>,
    ) -> Result<Table, IngestError> {
        let mut table = match format {
            Format::Columns => {
                let first_row = cursor.current_line();
                let n_cols = count_cells(first_row, layout.sep);
                if n_cols > 3 {
                    return Err(IngestError::TooManyColumns {
                        file: file.to_string(),
                        line: cursor.line,
                        found: n_cols,
                    });
                }
                let unit = required_unit(file, Format::Columns.name(), options)?;
                let rate = required_rate(file, Format::Columns, options)?;
                Table::new(n_cols, layout, "first row", unit, Some(rate))
            }
            _ => {
                let format = match format {
                    Format::Tsv => Format::Tsv,
                    _ => Format::Csv,
                };
                let header_line = cursor.line;
                let header_bytes = cursor.take_line();
                // The piece was checked to be UTF-8 and lines are cut at ASCII bytes.
                let header_text = std::str::from_utf8(header_bytes).unwrap_or_default();
                let header = parse_header(file, header_line, header_text, layout, format, options)?;
                let given_rate_hz = match header.time {
                    Some(_) => None,
                    None => Some(required_rate(file, format, options)?),
                };
                let mut table =
                    Table::new(header.n_cols, layout, "header", header.unit, given_rate_hz);
                table.time = header
                    .time
                    .map(|(col_idx, seconds_per_unit)| (col_idx, TimeCheck::new(seconds_per_unit)));
                table.header = Some((header_line, header.positions));
                table
            }
        };
        // Pre-size from the length of the first row; the estimate cannot exceed one row per two
        // bytes, the shortest possible row.
        let remaining = remaining.unwrap_or_else(|| cursor.bytes.len().saturating_sub(cursor.pos));
        let first_row_bytes = cursor.current_line().len() + 1;
        let estimate = remaining / first_row_bytes + remaining / first_row_bytes / 16 + 1;
        let capacity = estimate.min(remaining / 2 + 1);
        let time_idx = table.time.as_ref().map(|(idx, _)| *idx);
        for (col_idx, column) in table.columns.iter_mut().enumerate() {
            if Some(col_idx) != time_idx {
                column.reserve_exact(capacity);
            }
        }
        Ok(table)
    }

    /// An empty table of `n_cols` columns.
    fn new(
        n_cols: usize,
        layout: Layout,
        reference: &'static str,
        unit: PositionUnit,
        given_rate_hz: Option<f64>,
    ) -> Table {
        Table {
            layout,
            reference,
            columns: (0..n_cols).map(|_| Vec::new()).collect(),
            time: None,
            header: None,
            unit,
            given_rate_hz,
            n_rows: 0,
            trailing_blank: None,
        }
    }

    /// `scan` of the rest of the piece at the cursor in two halves, on two threads when the
    /// machine has them, when the rest is at least `split.min_bytes` long: the piece is cut at a line feed near its middle, the second half
    /// is scanned on a scoped thread while this one scans the first, and the two are joined as
    /// if they had been two pieces. Cutting a piece at a line feed changes nothing (the reader
    /// cuts the stream at arbitrary line feeds already, and the tests pin that), so the result,
    /// errors included, is that of `scan` on the whole piece.
    fn scan_split(
        &mut self,
        file: &str,
        cursor: &mut Cursor<'_>,
        split: Split,
    ) -> Result<(), IngestError> {
        let rest = cursor.bytes.get(cursor.pos..).unwrap_or_default();
        // The first line feed from the middle on, unless it ends the piece.
        let cut = (rest.len() / 2..rest.len().saturating_sub(1))
            .find(|&i| rest.get(i) == Some(&b'\n'))
            .map(|i| cursor.pos + i + 1);
        let cut = match cut {
            Some(cut) if rest.len() >= split.min_bytes => cut,
            _ => return self.scan(file, cursor),
        };
        let (head, tail) = cursor.bytes.split_at(cut);
        let mut head_cursor = Cursor {
            bytes: head,
            pos: cursor.pos,
            line: cursor.line,
        };
        let tail_line = cursor.line + count_line_feeds(head.get(cursor.pos..).unwrap_or_default());
        let (layout, reference, n_cols) = (self.layout, self.reference, self.columns.len());
        let scan_tail = move || {
            let mut tail_cursor = Cursor {
                bytes: tail,
                pos: 0,
                line: tail_line,
            };
            let mut columns: Vec<Vec<f64>> = (0..n_cols)
                .map(|_| Vec::with_capacity(tail.len() / 16))
                .collect();
            let outcome = scan_rows(file, &mut tail_cursor, &mut columns, layout, reference);
            (outcome, columns, tail_cursor.line)
        };
        // On one core the halves run one after the other, through the same joining code.
        let (head_result, tail_rows) = if split.threads > 1 {
            std::thread::scope(|scope| {
                let tail_scan = scope.spawn(scan_tail);
                let head_result = self.scan(file, &mut head_cursor);
                (head_result, tail_scan.join())
            })
        } else {
            let head_result = self.scan(file, &mut head_cursor);
            (head_result, Ok(scan_tail()))
        };
        head_result?;
        let mut tail_cursor = Cursor {
            bytes: tail,
            pos: 0,
            line: head_cursor.line,
        };
        let end_line = match tail_rows {
            Ok((outcome, tail_columns, end_line)) if self.trailing_blank.is_none() => {
                self.trailing_blank = outcome?;
                let time_idx = self.time.as_ref().map(|(idx, _)| *idx);
                for (col_idx, (column, new)) in
                    self.columns.iter_mut().zip(&tail_columns).enumerate()
                {
                    if Some(col_idx) != time_idx {
                        column.extend_from_slice(new);
                    }
                }
                if let Some((col_idx, check)) = self.time.as_mut() {
                    if let Some(times) = tail_columns.get(*col_idx) {
                        check.feed(times, tail_line);
                    }
                }
                self.n_rows += tail_columns.first().map_or(0, Vec::len);
                end_line
            }
            // A blank line ended the first half: the second must be blank too, which `scan`
            // decides, so the speculative rows are not needed. (Or the speculative scan
            // panicked, which only a bug can make it do: scan again rather than lose the piece.)
            _ => {
                self.scan(file, &mut tail_cursor)?;
                tail_cursor.line
            }
        };
        cursor.pos = cursor.bytes.len();
        cursor.line = end_line;
        Ok(())
    }

    /// Reads the data rows of the rest of the piece at the cursor.
    fn scan(&mut self, file: &str, cursor: &mut Cursor<'_>) -> Result<(), IngestError> {
        if let Some(blank_line) = self.trailing_blank {
            let rest = cursor.bytes.get(cursor.pos..).unwrap_or_default();
            if rest.iter().all(u8::is_ascii_whitespace) {
                cursor.pos = cursor.bytes.len();
                cursor.line += count_line_feeds(rest);
                return Ok(());
            }
            return Err(IngestError::BlankLine {
                file: file.to_string(),
                line: blank_line,
            });
        }
        let first_row_line = cursor.line;
        let rows_before = self.columns.first().map_or(0, Vec::len);
        self.trailing_blank =
            scan_rows(file, cursor, &mut self.columns, self.layout, self.reference)?;
        let n_new = self.columns.first().map_or(0, Vec::len) - rows_before;
        if let Some((col_idx, check)) = self.time.as_mut() {
            if let Some(times) = self.columns.get_mut(*col_idx) {
                check.feed(times, first_row_line);
                times.clear();
            }
        }
        self.n_rows += n_new;
        Ok(())
    }

    /// Checks the row count and the time stamps and assembles the recording.
    fn finish(mut self, file: &str, options: &IngestOptions) -> Result<Recording, IngestError> {
        let Some((header_line, positions)) = self.header.take() else {
            let rate = self.given_rate_hz.unwrap_or(f64::NAN);
            return finish_unlabelled(file, rate, self.unit, self.columns);
        };
        if self.n_rows == 0 {
            return Err(IngestError::NoDataRows {
                file: file.to_string(),
                line: header_line,
            });
        }
        if self.n_rows < MIN_SAMPLES {
            return Err(IngestError::TooFewSamples {
                file: file.to_string(),
                found: self.n_rows,
            });
        }
        let sample_rate_hz = match (self.time.take(), self.given_rate_hz) {
            (Some((_, check)), _) => check.rate(file, options)?,
            (None, Some(rate)) => rate,
            // `start` asked for the rate when the header has no time column; kept as an error,
            // not a sentinel, should that ever change.
            (None, None) => required_rate(file, Format::Csv, options)?,
        };
        let mut axes = Vec::with_capacity(positions.len());
        for (col_idx, name, scale) in positions {
            let mut samples = self
                .columns
                .get_mut(col_idx)
                .map(std::mem::take)
                .unwrap_or_default();
            if let Some(sample_idx) = scale.apply(&mut samples) {
                // Rows follow the header line by line (no comments or blank lines between).
                return Err(IngestError::NonFiniteCell {
                    file: file.to_string(),
                    line: header_line + 1 + sample_idx,
                    column: col_idx + 1,
                    cell: "a value that overflows once converted to nm".to_string(),
                });
            }
            axes.push(AxisTrace { name, samples });
        }
        finish(file, sample_rate_hz, self.unit, axes)
    }
}

/// The conversion of a position column to the unit trapwise works in (nm or V).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum Scale {
    /// Already nm or V.
    One,
    /// Micrometres to nanometres.
    Times1000,
    /// Millivolts to volts (divided, so that a value of whole millivolts is correctly rounded).
    Per1000,
}

impl Scale {
    /// Converts the samples in place; returns the index of the first that is no longer finite.
    fn apply(self, samples: &mut [f64]) -> Option<usize> {
        match self {
            Scale::One => return None,
            Scale::Times1000 => samples.iter_mut().for_each(|v| *v *= 1000.0),
            Scale::Per1000 => samples.iter_mut().for_each(|v| *v /= 1000.0),
        }
        samples.iter().position(|v| !v.is_finite())
    }
}

/// Checks on a time column made as its stamps arrive, so that the stamps need not be kept.
///
/// The sample rate is (n - 1)/(t_last - t_first). The stamps must strictly increase (the first
/// stamp that does not is reported), and every step must lie within the relative tolerance of
/// the mean step; since the mean is known only at the end, the smallest and the largest step are
/// kept with their lines, and the one farther from the mean is reported.
#[derive(Debug)]
struct TimeCheck {
    /// Seconds per unit of the column.
    seconds_per_unit: f64,
    /// Stamps seen.
    n: usize,
    /// First and latest stamp, seconds.
    first_s: f64,
    last_s: f64,
    /// Line of the first stamp that does not increase, with the stamp before it and itself.
    not_increasing: Option<(usize, f64, f64)>,
    /// Smallest and largest step, seconds, with the line that ends each.
    min_step: (f64, usize),
    max_step: (f64, usize),
}

impl TimeCheck {
    /// No stamps yet.
    fn new(seconds_per_unit: f64) -> Self {
        TimeCheck {
            seconds_per_unit,
            n: 0,
            first_s: f64::NAN,
            last_s: f64::NAN,
            not_increasing: None,
            min_step: (f64::INFINITY, 0),
            max_step: (f64::NEG_INFINITY, 0),
        }
    }

    /// Takes the stamps of consecutive rows starting on line `first_line`, in column units.
    fn feed(&mut self, stamps: &[f64], first_line: usize) {
        for (row_idx, &stamp) in stamps.iter().enumerate() {
            let t_s = if self.seconds_per_unit == 1.0 {
                stamp
            } else {
                stamp * self.seconds_per_unit
            };
            if self.n == 0 {
                self.first_s = t_s;
            } else {
                let line = first_line + row_idx;
                let step_s = t_s - self.last_s;
                if t_s <= self.last_s && self.not_increasing.is_none() {
                    self.not_increasing = Some((line, self.last_s, t_s));
                }
                if step_s < self.min_step.0 {
                    self.min_step = (step_s, line);
                }
                if step_s > self.max_step.0 {
                    self.max_step = (step_s, line);
                }
            }
            self.last_s = t_s;
            self.n += 1;
        }
    }

    /// The sample rate, after the checks; a rate given in the options must agree with it
    /// within the tolerance.
    fn rate(self, file: &str, options: &IngestOptions) -> Result<f64, IngestError> {
        let tolerance = options.time_tolerance;
        if let Some((line, previous_s, found_s)) = self.not_increasing {
            return Err(IngestError::TimeNotIncreasing {
                file: file.to_string(),
                line,
                previous_s,
                found_s,
            });
        }
        if self.n == 0 {
            return required_rate(file, Format::Csv, options);
        }
        let n_steps = self.n.saturating_sub(1).max(1) as f64;
        let span_s = self.last_s - self.first_s;
        let mean_step_s = span_s / n_steps;
        if self.n > 1 {
            // Every step lies between the two extremes, so a step is out of tolerance only if
            // one of them is. The one farther from the mean is reported (that is where the
            // stamps go wrong); when both are about as far (one late stamp makes a long step and
            // then a short one), the earlier.
            let below = mean_step_s - self.min_step.0;
            let above = self.max_step.0 - mean_step_s;
            let near_tie = (above - below).abs() <= 1e-9 * mean_step_s;
            let (found_step_s, line) = if near_tie {
                if self.max_step.1 < self.min_step.1 {
                    self.max_step
                } else {
                    self.min_step
                }
            } else if above > below {
                self.max_step
            } else {
                self.min_step
            };
            if (found_step_s - mean_step_s).abs() > tolerance * mean_step_s {
                return Err(IngestError::TimeStepNotUniform {
                    file: file.to_string(),
                    line,
                    expected_step_s: mean_step_s,
                    found_step_s,
                    tolerance,
                });
            }
        }
        let time_column_hz = check_rate(file, n_steps / span_s)?;
        let conflicting =
            |given_hz: &f64| (given_hz - time_column_hz).abs() > tolerance * time_column_hz;
        if let Some(given_hz) = options.sample_rate_hz.filter(conflicting) {
            return Err(IngestError::SampleRateConflict {
                file: file.to_string(),
                given_hz,
                time_column_hz,
                tolerance,
            });
        }
        Ok(time_column_hz)
    }
}

/// The meaning of a header row.
#[derive(Debug)]
struct Header {
    /// Number of cells per row.
    n_cols: usize,
    /// Column index of the time column and the seconds per unit of its values.
    time: Option<(usize, f64)>,
    /// Column index and axis name of each position column, in file order.
    positions: PositionColumns,
    /// Unit shared by all position columns.
    unit: PositionUnit,
}

/// What a header label says about its column.
enum Role<'a> {
    /// Time column with this many seconds per unit.
    Time(f64),
    /// Position column with this name and, if written, this unit and the conversion to it.
    Position(&'a str, Option<PositionUnit>, Scale),
}

/// Interprets the header row (see the module documentation).
fn parse_header(
    file: &str,
    line: usize,
    text: &str,
    layout: Layout,
    format: Format,
    options: &IngestOptions,
) -> Result<Header, IngestError> {
    let Layout { sep, decimal_comma } = layout;
    if split_cells(text, sep).all(|cell| is_number(cell.trim(), decimal_comma)) {
        return Err(IngestError::NumericHeader {
            file: file.to_string(),
            line,
            format: format.name(),
        });
    }
    let mut n_cols = 0;
    let mut time = None;
    let mut positions: PositionColumns = Vec::with_capacity(3);
    let mut unit: Option<PositionUnit> = None;
    for (col_idx, raw) in split_cells(text, sep).enumerate() {
        n_cols += 1;
        let column = col_idx + 1;
        let label = unquote(raw.trim());
        match classify_label(file, line, column, label)? {
            Role::Time(seconds_per_unit) => {
                if time.is_some() {
                    return Err(IngestError::DuplicateColumn {
                        file: file.to_string(),
                        line,
                        column,
                        name: label.to_string(),
                    });
                }
                time = Some((col_idx, seconds_per_unit));
            }
            Role::Position(name, header_unit, scale) => {
                check_axis_name(file, line, column, name)?;
                if positions.iter().any(|(_, other, _)| other == name) {
                    return Err(IngestError::DuplicateColumn {
                        file: file.to_string(),
                        line,
                        column,
                        name: name.to_string(),
                    });
                }
                if positions.len() == 3 {
                    let is_time = |cell: &str| {
                        let label = unquote(cell.trim());
                        matches!(classify_label(file, line, 0, label), Ok(Role::Time(_)))
                    };
                    return Err(IngestError::TooManyColumns {
                        file: file.to_string(),
                        line,
                        found: split_cells(text, sep).filter(|cell| !is_time(cell)).count(),
                    });
                }
                let column_unit = resolve_unit(file, line, column, label, header_unit, options)?;
                match unit {
                    Some(first_unit) if first_unit != column_unit => {
                        return Err(IngestError::MixedUnits {
                            file: file.to_string(),
                            line,
                            column,
                            label: label.to_string(),
                            unit: column_unit,
                            first_unit,
                        });
                    }
                    _ => unit = Some(column_unit),
                }
                positions.push((col_idx, name.to_string(), scale));
            }
        }
    }
    match unit {
        Some(unit) => Ok(Header {
            n_cols,
            time,
            positions,
            unit,
        }),
        None => Err(IngestError::NoPositionColumn {
            file: file.to_string(),
            line,
        }),
    }
}

/// The unit of one position column: from the header, from the option, both agreeing, or an
/// error.
fn resolve_unit(
    file: &str,
    line: usize,
    column: usize,
    label: &str,
    header_unit: Option<PositionUnit>,
    options: &IngestOptions,
) -> Result<PositionUnit, IngestError> {
    match (header_unit, options.unit) {
        (Some(header_unit), Some(requested_unit)) if header_unit != requested_unit => {
            Err(IngestError::UnitConflict {
                file: file.to_string(),
                line,
                column,
                header_unit,
                requested_unit,
            })
        }
        (Some(unit), _) | (None, Some(unit)) => Ok(unit),
        (None, None) => Err(IngestError::MissingUnit {
            file: file.to_string(),
            line,
            column,
            label: label.to_string(),
        }),
    }
}

/// The first line that is not blank or a `#` comment, after a byte order mark, with its
/// 1-based line number (for `inspect`).
pub(super) fn first_line(prefix: &[u8]) -> Option<(usize, &str)> {
    let prefix = prefix.strip_prefix(BOM).unwrap_or(prefix);
    let text = match std::str::from_utf8(prefix) {
        Ok(text) => text,
        Err(e) => std::str::from_utf8(prefix.get(..e.valid_up_to())?).ok()?,
    };
    text.lines()
        .enumerate()
        .find(|(_, l)| !(l.trim().is_empty() || l.trim_start().starts_with('#')))
        .map(|(idx, l)| (idx + 1, l))
}

/// What the reader makes of each header cell (for `inspect`): the time column, a position
/// column with its unit and conversion, or the refusal.
pub(super) fn header_roles(
    file: &str,
    line: usize,
    header: &str,
    sep: Sep,
) -> Vec<super::inspect::Column> {
    split_cells(header, sep)
        .enumerate()
        .map(|(col_idx, raw)| {
            let label = unquote(raw.trim());
            let role = match classify_label(file, line, col_idx + 1, label) {
                Ok(Role::Time(_)) => "time (s)".to_string(),
                Ok(Role::Position(_, None, _)) => "position (no unit)".to_string(),
                Ok(Role::Position(_, Some(unit), Scale::One)) => {
                    format!("position ({})", unit.suffix())
                }
                Ok(Role::Position(_, Some(unit), _)) => {
                    format!("position (converted to {})", unit.suffix())
                }
                Err(e) => format!("refused: {e}"),
            };
            super::inspect::Column {
                label: label.to_string(),
                role,
            }
        })
        .collect()
}

/// Removes one pair of surrounding double quotes.
fn unquote(label: &str) -> &str {
    label
        .strip_prefix('"')
        .and_then(|inner| inner.strip_suffix('"'))
        .map_or(label, str::trim)
}

/// An axis name from a header follows the rules of every stored name
/// (`recording::name_fault`), refused with its place.
fn check_axis_name(file: &str, line: usize, column: usize, name: &str) -> Result<(), IngestError> {
    match crate::recording::name_fault(name) {
        None => Ok(()),
        Some(fault) => Err(IngestError::BadAxisName {
            file: file.to_string(),
            line,
            column,
            fault,
        }),
    }
}

/// Decides whether a label names the time column or a position column, and its unit.
fn classify_label<'a>(
    file: &str,
    line: usize,
    column: usize,
    label: &'a str,
) -> Result<Role<'a>, IngestError> {
    let (name, unit_text) = split_label(label);
    if name.is_empty() {
        return Err(IngestError::EmptyLabel {
            file: file.to_string(),
            line,
            column,
        });
    }
    let unsupported = |unit: &str| IngestError::UnsupportedUnit {
        file: file.to_string(),
        line,
        column,
        unit: unit.chars().take(MAX_QUOTED_CHARS).collect(),
    };
    let position_unit = match unit_text {
        None => None,
        Some("nm") => Some((PositionUnit::Nanometre, Scale::One)),
        Some("um" | "µm" | "μm") => Some((PositionUnit::Nanometre, Scale::Times1000)),
        Some("V" | "v") => Some((PositionUnit::Volt, Scale::One)),
        Some("mV" | "mv") => Some((PositionUnit::Volt, Scale::Per1000)),
        Some(_) => None,
    };
    let seconds_per_unit = match unit_text {
        None | Some("s") => Some(1.0),
        Some("ms") => Some(1e-3),
        Some("us" | "µs") => Some(1e-6),
        Some(_) => None,
    };
    let is_time_name = name.eq_ignore_ascii_case("t") || name.eq_ignore_ascii_case("time");
    match (is_time_name, seconds_per_unit, position_unit, unit_text) {
        (true, Some(seconds_per_unit), _, _) => Ok(Role::Time(seconds_per_unit)),
        (_, _, Some((unit, scale)), _) => Ok(Role::Position(name, Some(unit), scale)),
        (_, _, None, None) => Ok(Role::Position(name, None, Scale::One)),
        (_, _, None, Some(unit)) => Err(unsupported(unit)),
    }
}

/// Splits a label into name and unit text: `x (nm)` and `x [V]` always carry a unit; `x_nm`
/// carries one only if the suffix is a unit we know (nm, um, V, v, mV, s, ms, us), so that
/// labels such as `bead_1` keep their underscore.
fn split_label(label: &str) -> (&str, Option<&str>) {
    for (open, close) in [('(', ')'), ('[', ']')] {
        let bracketed = label
            .strip_suffix(close)
            .and_then(|without_close| without_close.rsplit_once(open));
        if let Some((name, unit)) = bracketed {
            return (name.trim_end(), Some(unit.trim()));
        }
    }
    match label.rsplit_once('_') {
        Some((name, suffix))
            if matches!(
                suffix,
                "nm" | "um" | "µm" | "V" | "v" | "mV" | "s" | "ms" | "us" | "µs"
            ) =>
        {
            (name, Some(suffix))
        }
        _ => (label, None),
    }
}

/// A position in the text with its 1-based line number.
struct Cursor<'a> {
    /// The whole file.
    bytes: &'a [u8],
    /// Offset of the next unread byte (always at the start of a line between calls).
    pos: usize,
    /// Line number of `pos`.
    line: usize,
}

impl<'a> Cursor<'a> {
    /// Whether all bytes are read.
    fn at_end(&self) -> bool {
        self.pos >= self.bytes.len()
    }

    /// The current line without its line ending, not consumed.
    fn current_line(&self) -> &'a [u8] {
        let rest = self.bytes.get(self.pos..).unwrap_or_default();
        let end = rest.iter().position(|&b| b == b'\n').unwrap_or(rest.len());
        let line = rest.get(..end).unwrap_or_default();
        line.strip_suffix(b"\r").unwrap_or(line)
    }

    /// Returns the current line without its line ending and moves to the next line.
    fn take_line(&mut self) -> &'a [u8] {
        let rest = self.bytes.get(self.pos..).unwrap_or_default();
        let line = self.current_line();
        match rest.iter().position(|&b| b == b'\n') {
            Some(end) => {
                self.pos += end + 1;
                self.line += 1;
            }
            None => self.pos = self.bytes.len(),
        }
        line
    }

    /// Skips blank lines and `#` comment lines.
    fn skip_preamble(&mut self) {
        while !self.at_end() {
            let line = self.current_line().trim_ascii();
            if !(line.is_empty() || line.starts_with(b"#")) {
                return;
            }
            self.take_line();
        }
    }
}

/// Number of line feeds in the bytes.
fn count_line_feeds(bytes: &[u8]) -> usize {
    bytes.iter().filter(|&&b| b == b'\n').count()
}

/// Number of cells of a line for the separator.
fn count_cells(line: &[u8], sep: Sep) -> usize {
    match sep.byte() {
        Some(sep) => 1 + line.iter().filter(|&&b| b == sep).count(),
        None => line
            .split(|b| b.is_ascii_whitespace())
            .filter(|cell| !cell.is_empty())
            .count(),
    }
}

/// Skips spaces, and tabs if `tabs`, from `pos`.
#[inline]
fn skip_padding(bytes: &[u8], mut pos: usize, tabs: bool) -> usize {
    while let Some(&b) = bytes.get(pos) {
        if b == b' ' || (tabs && b == b'\t') {
            pos += 1;
        } else {
            break;
        }
    }
    pos
}

/// Whether `pos` is at a line ending (LF, CRLF, a final CR) or at the end of the bytes.
#[inline]
fn at_line_end(bytes: &[u8], pos: usize) -> bool {
    match bytes.get(pos) {
        None | Some(b'\n') => true,
        Some(b'\r') => matches!(bytes.get(pos + 1), None | Some(b'\n')),
        Some(_) => false,
    }
}

/// The text of the cell starting at `start`, shortened for an error message.
fn quote_cell(bytes: &[u8], start: usize, sep: Sep) -> String {
    let rest = bytes.get(start..).unwrap_or_default();
    let end = rest
        .iter()
        .position(|&b| match sep.byte() {
            Some(sep) => b == sep || b == b'\n' || b == b'\r',
            None => b.is_ascii_whitespace(),
        })
        .unwrap_or(rest.len());
    let cell = rest.get(..end).unwrap_or_default().trim_ascii();
    String::from_utf8_lossy(cell)
        .chars()
        .take(MAX_QUOTED_CHARS)
        .collect()
}

/// Reads data rows, one numeric cell per column, from the cursor to the end of its piece,
/// appending to `columns`. `reference` names what fixed the column count ("header" or "first
/// row"). Returns the line of a blank line that only blank lines follow within the piece (the
/// caller allows it only at the end of the file).
fn scan_rows(
    file: &str,
    cursor: &mut Cursor<'_>,
    columns: &mut [Vec<f64>],
    layout: Layout,
    reference: &'static str,
) -> Result<Option<usize>, IngestError> {
    let Layout { sep, decimal_comma } = layout;
    let n_cols = columns.len();
    if n_cols == 0 {
        // Callers never ask for zero columns; returning keeps the row loop from spinning.
        return Ok(None);
    }
    let bytes = cursor.bytes;
    let mut pos = cursor.pos;
    let mut line = cursor.line;
    let tabs = sep.pads_with_tab();
    let ragged = |line: usize, row_start: usize, found: Option<usize>| {
        let found = found.unwrap_or_else(|| {
            let rest = bytes.get(row_start..).unwrap_or_default();
            let end = rest.iter().position(|&b| b == b'\n').unwrap_or(rest.len());
            count_cells(rest.get(..end).unwrap_or_default(), sep)
        });
        IngestError::RaggedRow {
            file: file.to_string(),
            line,
            expected: n_cols,
            found,
            reference,
        }
    };
    let non_numeric = |line: usize, column: usize, start: usize| IngestError::NonNumericCell {
        file: file.to_string(),
        line,
        column,
        cell: quote_cell(bytes, start, sep),
    };
    while pos < bytes.len() {
        let row_start = pos;
        if at_line_end(bytes, skip_padding(bytes, pos, true)) {
            // A blank line: only blank lines may follow.
            let rest = bytes.get(pos..).unwrap_or_default();
            if rest.iter().all(u8::is_ascii_whitespace) {
                cursor.pos = bytes.len();
                cursor.line = line + count_line_feeds(rest);
                return Ok(Some(line));
            }
            return Err(IngestError::BlankLine {
                file: file.to_string(),
                line,
            });
        }
        for (col_idx, column) in columns.iter_mut().enumerate() {
            pos = skip_padding(bytes, pos, tabs);
            let cell_start = pos;
            let rest = bytes.get(pos..).unwrap_or_default();
            let Some((value, n_read)) = parse_cell(rest, decimal_comma) else {
                return Err(non_numeric(line, col_idx + 1, cell_start));
            };
            pos += n_read;
            let number_end = pos;
            pos = skip_padding(bytes, pos, tabs);
            let is_last = col_idx + 1 == n_cols;
            if at_line_end(bytes, pos) {
                if !is_last {
                    return Err(ragged(line, row_start, Some(col_idx + 1)));
                }
            } else if sep.byte().is_some_and(|s| bytes.get(pos) == Some(&s)) {
                if is_last {
                    return Err(ragged(line, row_start, None));
                }
                pos += 1;
            } else if sep == Sep::Whitespace && pos > number_end {
                if is_last {
                    return Err(ragged(line, row_start, None));
                }
            } else {
                return Err(non_numeric(line, col_idx + 1, cell_start));
            }
            if !value.is_finite() {
                return Err(IngestError::NonFiniteCell {
                    file: file.to_string(),
                    line,
                    column: col_idx + 1,
                    cell: quote_cell(bytes, cell_start, sep),
                });
            }
            column.push(value);
        }
        if bytes.get(pos) == Some(&b'\r') {
            pos += 1;
        }
        if bytes.get(pos) == Some(&b'\n') {
            pos += 1;
            line += 1;
        }
    }
    cursor.pos = pos;
    cursor.line = line;
    Ok(None)
}
