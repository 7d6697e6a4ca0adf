//! The one error type of the ingest layer.
//!
//! Every variant names the file and the place of the problem (1-based line and column for text,
//! byte offset for binary) and ends with a hint of the fix, so that the CLI can print the message
//! as is and the HTTP layer can return it in a problem document. `IngestError::kind` gives a
//! stable kebab-case code per variant for machines; `IngestError::is_unsupported_format` tells the
//! HTTP layer which failures mean "this is not a format we read" (415) rather than "this file is
//! broken" (400/422).

use super::MIN_SAMPLES;
use crate::recording::PositionUnit;

/// Everything that can go wrong while reading or writing a recording file.
///
/// Text places are 1-based: `line` counts physical lines of the file (comments included) and
/// `column` counts cells of a row. Binary places are byte offsets from the start of the file.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum IngestError {
    /// The file holds no bytes at all.
    #[error("{file}: the file is empty; upload the recording itself")]
    Empty {
        /// File name as given by the caller.
        file: String,
    },

    /// No format was given and neither the extension nor the content tells it.
    #[error(
        "{file}: cannot tell the file format from {reason}; give the format explicitly \
         (csv, tsv, columns, raw-f32, raw-f64, raw-i16, npy or npz)"
    )]
    UnknownFormat {
        /// File name as given by the caller.
        file: String,
        /// What was looked at, for example "the extension '.bin'".
        reason: String,
    },

    /// A text file contains a byte sequence that is not UTF-8.
    #[error(
        "{file}: line {line}, byte offset {byte_offset}: invalid UTF-8; save the file as UTF-8 \
         or plain ASCII text"
    )]
    InvalidUtf8 {
        /// File name as given by the caller.
        file: String,
        /// Line of the first invalid byte.
        line: usize,
        /// Offset of the first invalid byte from the start of the file.
        byte_offset: usize,
    },

    /// Reading the file itself failed (a disk or network fault, not a fault of its content).
    #[error("{file}: byte offset {byte_offset}: cannot read the file: {reason}")]
    Read {
        /// File name as given by the caller.
        file: String,
        /// Offset in the file at which the read failed.
        byte_offset: usize,
        /// What the operating system reported.
        reason: String,
    },

    /// A CSV or TSV file holds only comments and blank lines, so no header row was found.
    #[error(
        "{file}: line {line}: no header row found; the first line that is not a '#' comment must \
         name the columns, for example time_s,x_nm"
    )]
    NoHeader {
        /// File name as given by the caller.
        file: String,
        /// Last line of the file.
        line: usize,
    },

    /// The header (or, for headerless files, the comments) is not followed by any data row.
    #[error(
        "{file}: line {line}: no data rows follow; a recording needs at least {MIN_SAMPLES} rows \
         of samples"
    )]
    NoDataRows {
        /// File name as given by the caller.
        file: String,
        /// Header line, or for a headerless file its last line.
        line: usize,
    },

    /// The first row of a CSV or TSV file is all numbers, so it is data rather than a header.
    #[error(
        "{file}: line {line}: the first row is numeric but the {format} format needs a header \
         row naming the columns; add a header such as time_s,x_nm or choose the columns format \
         for headerless files"
    )]
    NumericHeader {
        /// File name as given by the caller.
        file: String,
        /// Line of the numeric row.
        line: usize,
        /// Name of the format that was being read.
        format: &'static str,
    },

    /// A header cell is empty once its unit suffix is removed.
    #[error(
        "{file}: line {line}, column {column}: empty column label; name every column, for example x_nm"
    )]
    EmptyLabel {
        /// File name as given by the caller.
        file: String,
        /// Header line.
        line: usize,
        /// Column of the empty label.
        column: usize,
    },

    /// A position column's name breaks the rules of stored names (`recording::name_fault`:
    /// length, control characters, `.` and `..`).
    #[error("{file}: line {line}, column {column}: axis name not accepted: {fault}")]
    BadAxisName {
        /// File name as given by the caller.
        file: String,
        /// Header line.
        line: usize,
        /// Column of the name.
        column: usize,
        /// The rule it breaks.
        fault: crate::recording::NameFault,
    },

    /// Two position columns share a name, or there are two time columns.
    #[error(
        "{file}: line {line}, column {column}: column '{name}' appears twice; give each axis a \
         distinct name and use at most one time column"
    )]
    DuplicateColumn {
        /// File name as given by the caller.
        file: String,
        /// Header line.
        line: usize,
        /// Column of the second occurrence.
        column: usize,
        /// The repeated name.
        name: String,
    },

    /// A header names a unit that is not nm or V (positions) or s, ms, us (time).
    #[error(
        "{file}: line {line}, column {column}: unit '{unit}' is not supported here; positions \
         must be in nm or V (um and mV are converted) and the time column in s, ms or us"
    )]
    UnsupportedUnit {
        /// File name as given by the caller.
        file: String,
        /// Header line.
        line: usize,
        /// Column of the label.
        column: usize,
        /// The unit text as written.
        unit: String,
    },

    /// The header has a time column but no position column.
    #[error(
        "{file}: line {line}: no position column in the header; add one to three columns such as x_nm"
    )]
    NoPositionColumn {
        /// File name as given by the caller.
        file: String,
        /// Header line.
        line: usize,
    },

    /// More than three position columns.
    #[error(
        "{file}: line {line}: {found} position columns but at most 3 (x, y, z) are supported; \
         remove the extra columns"
    )]
    TooManyColumns {
        /// File name as given by the caller.
        file: String,
        /// Header line, or first data line of a headerless file.
        line: usize,
        /// Number of position columns found.
        found: usize,
    },

    /// A position column has no unit in the header and none was given as an option.
    #[error(
        "{file}: line {line}, column {column}: column '{label}' has no unit; add a unit suffix \
         to the header (x_nm, x_V, 'x (nm)', 'x [V]') or give the unit explicitly (nm or V)"
    )]
    MissingUnit {
        /// File name as given by the caller.
        file: String,
        /// Header line.
        line: usize,
        /// Column of the label.
        column: usize,
        /// The label as written.
        label: String,
    },

    /// Position columns of one file carry different units.
    #[error(
        "{file}: line {line}, column {column}: column '{label}' is in {} but the first position \
         column is in {}; all position columns must share one unit",
        .unit.suffix(),
        .first_unit.suffix()
    )]
    MixedUnits {
        /// File name as given by the caller.
        file: String,
        /// Header line.
        line: usize,
        /// Column of the label.
        column: usize,
        /// The label as written.
        label: String,
        /// Unit of this column.
        unit: PositionUnit,
        /// Unit of the first position column.
        first_unit: PositionUnit,
    },

    /// The header's unit disagrees with the unit given as an option.
    #[error(
        "{file}: line {line}, column {column}: the header gives the unit {} but {} was requested; \
         drop the unit option or correct the header",
        .header_unit.suffix(),
        .requested_unit.suffix()
    )]
    UnitConflict {
        /// File name as given by the caller.
        file: String,
        /// Header line.
        line: usize,
        /// Column of the first position label.
        column: usize,
        /// Unit written in the header.
        header_unit: PositionUnit,
        /// Unit given as an option.
        requested_unit: PositionUnit,
    },

    /// The format does not record the unit and no unit was given.
    #[error(
        "{file}: the {format} format does not record the unit; give the unit explicitly (nm or V)"
    )]
    UnitRequired {
        /// File name as given by the caller.
        file: String,
        /// Name of the format.
        format: &'static str,
    },

    /// A data cell is not a number.
    #[error(
        "{file}: line {line}, column {column}: '{cell}' is not a number; write plain decimal \
         numbers such as -1.25e-3 with '.' as the decimal point, or -1,25e-3 with a decimal \
         comma between ';' (--delimiter ';' --decimal-comma)"
    )]
    NonNumericCell {
        /// File name as given by the caller.
        file: String,
        /// Line of the cell.
        line: usize,
        /// Column of the cell.
        column: usize,
        /// The cell text (shortened to 40 characters).
        cell: String,
    },

    /// A data cell is NaN, infinite, or too large for a 64-bit float.
    #[error(
        "{file}: line {line}, column {column}: '{cell}' is not a finite number; cut the \
         recording around dropouts instead of writing NaN or infinity"
    )]
    NonFiniteCell {
        /// File name as given by the caller.
        file: String,
        /// Line of the cell.
        line: usize,
        /// Column of the cell.
        column: usize,
        /// The cell text (shortened to 40 characters).
        cell: String,
    },

    /// A row has a different number of cells from the header or the first row.
    #[error(
        "{file}: line {line}: expected {expected} columns but found {found}; every row needs the \
         same number of cells as the {reference}"
    )]
    RaggedRow {
        /// File name as given by the caller.
        file: String,
        /// Line of the row.
        line: usize,
        /// Number of cells expected.
        expected: usize,
        /// Number of cells found.
        found: usize,
        /// What set the expectation: "header" or "first row".
        reference: &'static str,
    },

    /// A blank line is followed by more data.
    #[error(
        "{file}: line {line}: blank line inside the data; remove it (blank lines are allowed \
         only at the end of the file)"
    )]
    BlankLine {
        /// File name as given by the caller.
        file: String,
        /// Line of the blank line.
        line: usize,
    },

    /// Fewer samples per axis than `MIN_SAMPLES`.
    #[error(
        "{file}: {found} samples per axis, fewer than the minimum of {MIN_SAMPLES}; record for \
         longer or at a higher sample rate"
    )]
    TooFewSamples {
        /// File name as given by the caller.
        file: String,
        /// Samples per axis found.
        found: usize,
    },

    /// A time stamp is not larger than the one before it.
    #[error(
        "{file}: line {line}: time {found_s} s does not increase from the previous {previous_s} s; \
         time stamps must be strictly increasing"
    )]
    TimeNotIncreasing {
        /// File name as given by the caller.
        file: String,
        /// Line of the offending time stamp.
        line: usize,
        /// Previous time stamp in seconds.
        previous_s: f64,
        /// This time stamp in seconds.
        found_s: f64,
    },

    /// A time step differs from the mean step by more than the relative tolerance.
    #[error(
        "{file}: line {line}: time step {found_step_s:.6e} s differs from the mean step \
         {expected_step_s:.6e} s by more than the relative tolerance {tolerance}; resample to a \
         uniform rate or raise the time tolerance"
    )]
    TimeStepNotUniform {
        /// File name as given by the caller.
        file: String,
        /// Line that ends the step farthest from the mean step (of two about equally far, the
        /// earlier).
        line: usize,
        /// Mean step (t_last - t_first)/(n - 1) in seconds.
        expected_step_s: f64,
        /// The step found in seconds.
        found_step_s: f64,
        /// The relative tolerance applied.
        tolerance: f64,
    },

    /// The format carries no time stamps and no sample rate was given.
    #[error(
        "{file}: no sample rate: the {format} format has no time column; give the sample rate \
         in hertz explicitly"
    )]
    SampleRateMissing {
        /// File name as given by the caller.
        file: String,
        /// Name of the format.
        format: &'static str,
    },

    /// The given sample rate is zero, negative, NaN or infinite.
    #[error(
        "{file}: sample rate {value} Hz is not a positive finite number; give the rate in hertz, \
         for example 65536"
    )]
    SampleRateInvalid {
        /// File name as given by the caller.
        file: String,
        /// The rejected value.
        value: f64,
    },

    /// The given sample rate disagrees with the one implied by the time column.
    #[error(
        "{file}: the sample rate given ({given_hz} Hz) disagrees with the time column \
         ({time_column_hz} Hz) beyond the relative tolerance {tolerance}; drop the sample rate \
         option or correct the time column"
    )]
    SampleRateConflict {
        /// File name as given by the caller.
        file: String,
        /// Rate given as an option.
        given_hz: f64,
        /// Rate (n - 1)/(t_last - t_first) from the time column.
        time_column_hz: f64,
        /// The relative tolerance applied.
        tolerance: f64,
    },

    /// The time tolerance option is negative, NaN or infinite.
    #[error(
        "{file}: time tolerance {value} is not a finite non-negative number; use a relative \
         tolerance such as 1e-3"
    )]
    ToleranceInvalid {
        /// File name as given by the caller.
        file: String,
        /// The rejected value.
        value: f64,
    },

    /// The channel count for raw binary is outside 1..=3.
    #[error(
        "{file}: {channels} channels requested but a raw binary recording holds 1 to 3 \
         interleaved channels; give the channel count of the file"
    )]
    ChannelsInvalid {
        /// File name as given by the caller.
        file: String,
        /// The rejected channel count.
        channels: usize,
    },

    /// The length of a raw binary file is not a whole number of frames.
    #[error(
        "{file}: byte offset {byte_offset}: incomplete final frame of {tail_bytes} bytes (a frame \
         is {frame_bytes} bytes: sample size times channels); check the format and channel count, \
         or cut the partial frame"
    )]
    TruncatedBinary {
        /// File name as given by the caller.
        file: String,
        /// Offset of the incomplete tail.
        byte_offset: usize,
        /// Bytes in the incomplete tail.
        tail_bytes: usize,
        /// Bytes per frame.
        frame_bytes: usize,
    },

    /// A binary sample is NaN or infinite.
    #[error(
        "{file}: byte offset {byte_offset}: sample {value} is not finite; cut the recording \
         around dropouts, or check the sample type and byte order"
    )]
    NonFiniteSample {
        /// File name as given by the caller.
        file: String,
        /// Offset of the sample.
        byte_offset: usize,
        /// The decoded value.
        value: f64,
    },

    /// Integer samples arrived without a scale to volts.
    #[error(
        "{file}: integer samples ({dtype}) need the volts per count to become volts; give \
         volts_per_count{hint}"
    )]
    VoltsPerCountMissing {
        /// File name as given by the caller.
        file: String,
        /// The integer type, for example "i16".
        dtype: String,
        /// Extra hint, empty or starting with a comma.
        hint: &'static str,
    },

    /// The volts-per-count option is zero, negative, NaN or infinite.
    #[error(
        "{file}: volts per count {value} is not a positive finite number; give the detector \
         volts per ADC count, for example 3.0517578125e-4"
    )]
    VoltsPerCountInvalid {
        /// File name as given by the caller.
        file: String,
        /// The rejected value.
        value: f64,
    },

    /// Volts per count was given together with the unit nm.
    #[error(
        "{file}: volts per count turns integer samples into volts, which conflicts with the \
         requested unit nm; give either the volts per count or the unit nm, not both"
    )]
    VoltsPerCountUnitConflict {
        /// File name as given by the caller.
        file: String,
    },

    /// The file does not start with the .npy magic string.
    #[error(
        "{file}: byte offset 0: not a NumPy .npy file (the magic string \\x93NUMPY is missing); \
         save the array with numpy.save or choose another format"
    )]
    NpyBadMagic {
        /// File name as given by the caller.
        file: String,
    },

    /// The .npy format version is not 1.0 or 2.0.
    #[error(
        "{file}: byte offset 6: npy format version {major}.{minor} is not supported; save with \
         format version 1.0 or 2.0"
    )]
    NpyUnsupportedVersion {
        /// File name as given by the caller.
        file: String,
        /// Major version byte.
        major: u8,
        /// Minor version byte.
        minor: u8,
    },

    /// The .npy header is cut short or is not the expected dictionary literal.
    #[error(
        "{file}: byte offset {byte_offset}: malformed npy header: {reason}; save the array again with numpy.save"
    )]
    NpyBadHeader {
        /// File name as given by the caller.
        file: String,
        /// Offset of the problem.
        byte_offset: usize,
        /// What is wrong.
        reason: String,
    },

    /// The .npy dtype is not one of the little-endian float or integer types read here.
    #[error(
        "{file}: byte offset {byte_offset}: npy dtype '{dtype}' is not supported; convert the \
         array first, for example array.astype('<f8') (supported: <f4 <f8 |i1 <i2 <i4 <i8)"
    )]
    NpyUnsupportedDtype {
        /// File name as given by the caller.
        file: String,
        /// Offset of the header.
        byte_offset: usize,
        /// The dtype description as written (shortened to 40 characters).
        dtype: String,
    },

    /// The .npy shape is not (N,), (N, C) or (C, N) with C in 1..=3.
    #[error(
        "{file}: byte offset {byte_offset}: array shape {shape} is not a recording; use shape \
         (N,), (N, C) or (C, N) with 1 to 3 axes C"
    )]
    NpyUnsupportedShape {
        /// File name as given by the caller.
        file: String,
        /// Offset of the header.
        byte_offset: usize,
        /// The shape as a tuple, for example "(4, 5, 6)".
        shape: String,
    },

    /// The .npy array data is shorter than its shape and dtype require.
    #[error(
        "{file}: byte offset {byte_offset}: the array data ends after {found_bytes} of \
         {expected_bytes} bytes; the file is truncated, copy it again"
    )]
    NpyTruncated {
        /// File name as given by the caller.
        file: String,
        /// Offset of the end of the file.
        byte_offset: usize,
        /// Data bytes the header announces.
        expected_bytes: usize,
        /// Data bytes present.
        found_bytes: usize,
    },

    /// Bytes follow the .npy array data.
    #[error(
        "{file}: byte offset {byte_offset}: {extra_bytes} bytes follow the array data; the file \
         holds more than one array or is damaged, save a single array with numpy.save"
    )]
    NpyTrailingBytes {
        /// File name as given by the caller.
        file: String,
        /// Offset of the first extra byte.
        byte_offset: usize,
        /// Number of extra bytes.
        extra_bytes: usize,
    },

    /// A recording to encode does not have one to three axes.
    #[error("cannot encode a recording with {found} axes; a recording has 1 to 3 axes")]
    EncodeAxisCount {
        /// Number of axes found.
        found: usize,
    },

    /// A recording to encode has axes of different lengths.
    #[error(
        "cannot encode axis {axis_idx}: it has {found} samples but the first axis has \
         {expected}; give all axes the same length"
    )]
    EncodeAxisLength {
        /// Index of the offending axis.
        axis_idx: usize,
        /// Length of the first axis.
        expected: usize,
        /// Length of this axis.
        found: usize,
    },

    /// A recording to encode has a sample rate that is not positive and finite.
    #[error(
        "cannot encode a recording with sample rate {value} Hz; the rate must be positive and finite"
    )]
    EncodeSampleRate {
        /// The rejected rate.
        value: f64,
    },

    /// An axis name cannot be written as a column label.
    #[error(
        "cannot encode axis {axis_idx} named '{name}' as a column label; use a non-empty name \
         without commas, tabs, quotes, line breaks, surrounding spaces or a leading '#'"
    )]
    EncodeAxisName {
        /// Index of the offending axis.
        axis_idx: usize,
        /// The rejected name.
        name: String,
    },

    /// A sample does not fit the target format.
    #[error(
        "cannot encode axis '{axis}', sample {sample_idx}: value {value} does not fit the \
         {format} format; use raw-f64 or npy, or a larger volts per count for raw-i16"
    )]
    EncodeValue {
        /// Name of the axis.
        axis: String,
        /// Index of the sample.
        sample_idx: usize,
        /// The value.
        value: f64,
        /// Name of the format.
        format: &'static str,
    },

    /// Raw i16 stores detector counts, so it needs a recording in volts.
    #[error(
        "cannot encode a recording in nm as raw-i16, which holds detector counts scaled to \
         volts; encode as raw-f32, raw-f64 or npy instead"
    )]
    EncodeUnit,

    /// Raw i16 encoding needs a positive finite volts per count.
    #[error(
        "cannot encode raw-i16 with volts per count {given}; give a positive finite volts per \
         count"
    )]
    EncodeVoltsPerCount {
        /// The value given, or "none".
        given: String,
    },

    /// The first lines of a text table allow more than one cell separator.
    #[error(
        "{file}: line {line}: cannot tell how the cells are separated: {seen}; give the \
         delimiter (--delimiter ';', --delimiter ',' or --delimiter tab; field delimiter)"
    )]
    DelimiterAmbiguous {
        /// File name as given by the caller.
        file: String,
        /// The line that allows two readings.
        line: usize,
        /// What was seen there.
        seen: String,
    },

    /// The first rows of a text table allow a decimal comma as well as a decimal point.
    #[error(
        "{file}: line {line}: cannot tell the decimal mark: {seen}; say which with \
         --decimal-comma or --decimal-comma false (field decimal_comma)"
    )]
    DecimalMarkAmbiguous {
        /// File name as given by the caller.
        file: String,
        /// The line that allows two readings.
        line: usize,
        /// What was seen.
        seen: String,
    },

    /// The comma was asked to be both the cell separator and the decimal mark.
    #[error(
        "{file}: the comma cannot be both the delimiter and the decimal mark; give another \
         delimiter (--delimiter ';') or leave out --decimal-comma"
    )]
    DecimalCommaConflict {
        /// File name as given by the caller.
        file: String,
    },

    /// A compressed file decompresses to more than the limit (a compression bomb, or a file
    /// too large for this service).
    #[error(
        "{file}: byte offset {byte_offset} of the compressed file: it decompresses to more than \
         {limit_bytes} bytes, the limit; decompress it and send the parts, or ask for a larger \
         limit"
    )]
    DecompressedTooLarge {
        /// File name as given by the caller.
        file: String,
        /// Compressed bytes read when the limit was passed.
        byte_offset: u64,
        /// The limit on the decompressed size, bytes.
        limit_bytes: u64,
    },

    /// A gzip stream is damaged or cut short.
    #[error(
        "{file}: byte offset {byte_offset} of the compressed file: the gzip data is corrupt: \
         {reason}; compress the recording again"
    )]
    CompressedCorrupt {
        /// File name as given by the caller.
        file: String,
        /// Compressed bytes read when the fault was found.
        byte_offset: u64,
        /// What the decompressor reported.
        reason: String,
    },

    /// A `.npz` file is not a readable zip archive, or one of its members cannot be read.
    #[error("{file}: the zip archive cannot be read: {reason}; save it again with numpy.savez")]
    ZipCorrupt {
        /// File name as given by the caller.
        file: String,
        /// What the zip reader reported.
        reason: String,
    },

    /// A dataset asked for is not in the file.
    #[error("{file}: no dataset '{name}' in the file; it holds {available}")]
    DatasetMissing {
        /// File name as given by the caller.
        file: String,
        /// The name asked for.
        name: String,
        /// The datasets the file holds, with shapes and types.
        available: String,
    },

    /// No dataset was named and the file does not hold exactly one that can be the recording.
    #[error(
        "{file}: {problem}; name the dataset of each axis with --dataset NAME (field dataset), \
         the file holds {available}"
    )]
    DatasetChoice {
        /// File name as given by the caller.
        file: String,
        /// Why none could be chosen.
        problem: String,
        /// The datasets the file holds, with shapes and types.
        available: String,
    },

    /// Datasets named for the axes cannot be put together as one recording.
    #[error("{file}: dataset '{name}' {problem}")]
    DatasetUnusable {
        /// File name as given by the caller.
        file: String,
        /// The dataset.
        name: String,
        /// What is wrong with it and how to fix it.
        problem: String,
    },
}

impl IngestError {
    /// A stable kebab-case code for the variant, for logs, metrics and wire formats.
    pub fn kind(&self) -> &'static str {
        match self {
            IngestError::Empty { .. } => "empty-file",
            IngestError::UnknownFormat { .. } => "unknown-format",
            IngestError::InvalidUtf8 { .. } => "invalid-utf8",
            IngestError::Read { .. } => "read-failed",
            IngestError::NoHeader { .. } => "no-header",
            IngestError::NoDataRows { .. } => "no-data-rows",
            IngestError::NumericHeader { .. } => "numeric-header",
            IngestError::EmptyLabel { .. } => "empty-label",
            IngestError::BadAxisName { .. } => "bad-axis-name",
            IngestError::DuplicateColumn { .. } => "duplicate-column",
            IngestError::UnsupportedUnit { .. } => "unsupported-unit",
            IngestError::NoPositionColumn { .. } => "no-position-column",
            IngestError::TooManyColumns { .. } => "too-many-columns",
            IngestError::MissingUnit { .. } => "missing-unit",
            IngestError::MixedUnits { .. } => "mixed-units",
            IngestError::UnitConflict { .. } => "unit-conflict",
            IngestError::UnitRequired { .. } => "unit-required",
            IngestError::NonNumericCell { .. } => "non-numeric-cell",
            IngestError::NonFiniteCell { .. } => "non-finite-cell",
            IngestError::RaggedRow { .. } => "ragged-row",
            IngestError::BlankLine { .. } => "blank-line",
            IngestError::TooFewSamples { .. } => "too-few-samples",
            IngestError::TimeNotIncreasing { .. } => "time-not-increasing",
            IngestError::TimeStepNotUniform { .. } => "time-step-not-uniform",
            IngestError::SampleRateMissing { .. } => "sample-rate-missing",
            IngestError::SampleRateInvalid { .. } => "sample-rate-invalid",
            IngestError::SampleRateConflict { .. } => "sample-rate-conflict",
            IngestError::ToleranceInvalid { .. } => "tolerance-invalid",
            IngestError::ChannelsInvalid { .. } => "channels-invalid",
            IngestError::TruncatedBinary { .. } => "truncated-binary",
            IngestError::NonFiniteSample { .. } => "non-finite-sample",
            IngestError::VoltsPerCountMissing { .. } => "volts-per-count-missing",
            IngestError::VoltsPerCountInvalid { .. } => "volts-per-count-invalid",
            IngestError::VoltsPerCountUnitConflict { .. } => "volts-per-count-unit-conflict",
            IngestError::NpyBadMagic { .. } => "npy-bad-magic",
            IngestError::NpyUnsupportedVersion { .. } => "npy-unsupported-version",
            IngestError::NpyBadHeader { .. } => "npy-bad-header",
            IngestError::NpyUnsupportedDtype { .. } => "npy-unsupported-dtype",
            IngestError::NpyUnsupportedShape { .. } => "npy-unsupported-shape",
            IngestError::NpyTruncated { .. } => "npy-truncated",
            IngestError::NpyTrailingBytes { .. } => "npy-trailing-bytes",
            IngestError::EncodeAxisCount { .. } => "encode-axis-count",
            IngestError::EncodeAxisLength { .. } => "encode-axis-length",
            IngestError::EncodeSampleRate { .. } => "encode-sample-rate",
            IngestError::EncodeAxisName { .. } => "encode-axis-name",
            IngestError::EncodeValue { .. } => "encode-value",
            IngestError::EncodeUnit => "encode-unit",
            IngestError::EncodeVoltsPerCount { .. } => "encode-volts-per-count",
            IngestError::DelimiterAmbiguous { .. } => "delimiter-ambiguous",
            IngestError::DecimalMarkAmbiguous { .. } => "decimal-mark-ambiguous",
            IngestError::DecimalCommaConflict { .. } => "decimal-comma-conflict",
            IngestError::DecompressedTooLarge { .. } => "decompressed-too-large",
            IngestError::CompressedCorrupt { .. } => "compressed-corrupt",
            IngestError::ZipCorrupt { .. } => "zip-corrupt",
            IngestError::DatasetMissing { .. } => "dataset-missing",
            IngestError::DatasetChoice { .. } => "dataset-choice",
            IngestError::DatasetUnusable { .. } => "dataset-unusable",
        }
    }

    /// True when the file is in a format (or a variant of one) that trapwise does not read, as
    /// opposed to a readable format with bad content.
    ///
    /// The HTTP layer maps these to 415 Unsupported Media Type.
    pub fn is_unsupported_format(&self) -> bool {
        matches!(
            self,
            IngestError::UnknownFormat { .. }
                | IngestError::NpyUnsupportedVersion { .. }
                | IngestError::NpyUnsupportedDtype { .. }
        )
    }
}
