//! NumPy `.npy` array files, format versions 1.0 and 2.0.
//!
//! The layout follows NEP 1, "A Simple File Format for NumPy Arrays" (R. Kern, 2007; author and
//! year from memory, unverified), as also
//! documented in the `numpy.lib.format` module: the magic string `\x93NUMPY`, one byte each of
//! major and minor version, the header length as a little-endian u16 (version 1.0) or u32
//! (version 2.0), then the header, an ASCII Python dictionary literal with exactly the keys
//! `descr` (dtype string), `fortran_order` (bool) and `shape` (tuple of ints), padded with spaces
//! and ending in a line feed, and then the array data, C or Fortran order.
//!
//! Read here: little-endian `<f4 <f8 <i2 <i4 <i8` and `|i1`, C or Fortran order, shape (N,) for
//! one axis, and two-dimensional arrays by one rule: shape (N, C) with C <= 3 is samples by axes;
//! otherwise shape (C, N) with C <= 3 is axes by samples. Floats take their unit from the
//! options; integers become volts through the volts per count, or are nanometres if the unit nm
//! is given without a volts per count. The sample rate always comes from the options.

use super::{
    Format, IngestError, IngestOptions, MIN_SAMPLES, NPY_MAGIC, finish_unlabelled, integer_scale,
    required_rate, required_unit,
};
use crate::recording::{PositionUnit, Recording};

/// A supported element type.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(super) enum Dtype {
    /// `<f4`: little-endian binary32.
    F4,
    /// `<f8`: little-endian binary64.
    F8,
    /// `|i1`: signed byte.
    I1,
    /// `<i2`: little-endian i16.
    I2,
    /// `<i4`: little-endian i32.
    I4,
    /// `<i8`: little-endian i64.
    I8,
}

impl Dtype {
    /// The dtype for a descr string, if supported.
    fn from_descr(descr: &str) -> Option<Dtype> {
        match descr {
            "<f4" => Some(Dtype::F4),
            "<f8" => Some(Dtype::F8),
            "|i1" => Some(Dtype::I1),
            "<i2" => Some(Dtype::I2),
            "<i4" => Some(Dtype::I4),
            "<i8" => Some(Dtype::I8),
            _ => None,
        }
    }

    /// Bytes per element.
    fn item_bytes(self) -> usize {
        match self {
            Dtype::I1 => 1,
            Dtype::I2 => 2,
            Dtype::F4 | Dtype::I4 => 4,
            Dtype::F8 | Dtype::I8 => 8,
        }
    }

    /// Whether the elements are integers.
    fn is_integer(self) -> bool {
        !matches!(self, Dtype::F4 | Dtype::F8)
    }

    /// Decodes one element (NaN if the slice has the wrong length, which callers prevent).
    /// i64 values beyond 2^53 in magnitude round to the nearest f64.
    fn decode(self, bytes: &[u8]) -> f64 {
        match self {
            Dtype::F4 => bytes
                .try_into()
                .map_or(f64::NAN, |b| f64::from(f32::from_le_bytes(b))),
            Dtype::F8 => bytes.try_into().map_or(f64::NAN, f64::from_le_bytes),
            Dtype::I1 => bytes
                .try_into()
                .map_or(f64::NAN, |b| f64::from(i8::from_le_bytes(b))),
            Dtype::I2 => bytes
                .try_into()
                .map_or(f64::NAN, |b| f64::from(i16::from_le_bytes(b))),
            Dtype::I4 => bytes
                .try_into()
                .map_or(f64::NAN, |b| f64::from(i32::from_le_bytes(b))),
            Dtype::I8 => bytes
                .try_into()
                .map_or(f64::NAN, |b| i64::from_le_bytes(b) as f64),
        }
    }
}

/// The parsed header dictionary.
#[derive(Debug)]
struct NpyHeader {
    /// The descr value; `Err` holds the raw text of a non-string descr (structured dtypes).
    descr: Result<String, String>,
    /// Whether the data is in Fortran (column-major) order.
    fortran_order: bool,
    /// The array shape.
    shape: Vec<usize>,
}

/// A `.npy` array whose header has been read: what it holds and where its data lies.
#[derive(Debug)]
pub(super) struct NpyArray<'a> {
    /// The descr text as written (a structured descr as its raw Python text).
    pub(super) descr: String,
    /// The element type, if supported.
    dtype: Option<Dtype>,
    /// The array shape.
    pub(super) shape: Vec<usize>,
    /// Whether the data is in Fortran (column-major) order.
    fortran_order: bool,
    /// Offset of the header dictionary in the file.
    header_start: usize,
    /// Offset of the data in the file.
    data_start: usize,
    /// The data bytes (everything after the header).
    data: &'a [u8],
}

/// How the stored rows and columns of a 1-D or 2-D array map to samples and axes.
#[derive(Clone, Copy, Debug)]
pub(super) struct Grid {
    /// Rows as stored.
    n_rows: usize,
    /// Columns as stored.
    n_cols: usize,
    /// Whether rows are samples (else axes).
    rows_are_samples: bool,
}

impl Grid {
    /// Samples per axis.
    pub(super) fn n_samples(self) -> usize {
        if self.rows_are_samples {
            self.n_rows
        } else {
            self.n_cols
        }
    }

    /// Number of axes.
    pub(super) fn n_axes(self) -> usize {
        if self.rows_are_samples {
            self.n_cols
        } else {
            self.n_rows
        }
    }
}

/// Reads the magic string, the version and the header dictionary of a `.npy` file.
pub(super) fn read_array<'a>(file: &str, bytes: &'a [u8]) -> Result<NpyArray<'a>, IngestError> {
    let bad_header = |byte_offset: usize, reason: &str| IngestError::NpyBadHeader {
        file: file.to_string(),
        byte_offset,
        reason: reason.to_string(),
    };
    if !bytes.starts_with(NPY_MAGIC) {
        return Err(IngestError::NpyBadMagic {
            file: file.to_string(),
        });
    }
    let (Some(&major), Some(&minor)) = (bytes.get(6), bytes.get(7)) else {
        return Err(bad_header(6, "the file ends inside the version bytes"));
    };
    // NEP 1: version 1.0 stores the header length as u16, version 2.0 as u32, both little-endian.
    let (length_bytes, header_len) = match (major, minor) {
        (1, 0) => (
            2,
            bytes
                .get(8..10)
                .and_then(|b| b.try_into().ok())
                .map(|b| usize::from(u16::from_le_bytes(b))),
        ),
        (2, 0) => (
            4,
            bytes
                .get(8..12)
                .and_then(|b| b.try_into().ok())
                .and_then(|b| usize::try_from(u32::from_le_bytes(b)).ok()),
        ),
        _ => {
            return Err(IngestError::NpyUnsupportedVersion {
                file: file.to_string(),
                major,
                minor,
            });
        }
    };
    let Some(header_len) = header_len else {
        return Err(bad_header(8, "the file ends inside the header length"));
    };
    let header_start: usize = 8 + length_bytes;
    let data_start = header_start.saturating_add(header_len);
    let Some(header_bytes) = bytes.get(header_start..data_start) else {
        return Err(bad_header(
            bytes.len(),
            &format!(
                "the header announces {header_len} bytes but the file ends after {}",
                bytes.len().saturating_sub(header_start)
            ),
        ));
    };
    let header = parse_header_dict(header_bytes)
        .map_err(|(idx, reason)| bad_header(header_start + idx, &reason))?;
    let dtype = header.descr.as_deref().ok().and_then(Dtype::from_descr);
    let descr = match header.descr {
        Ok(descr) | Err(descr) => descr,
    };
    Ok(NpyArray {
        descr,
        dtype,
        shape: header.shape,
        fortran_order: header.fortran_order,
        header_start,
        data_start,
        data: bytes.get(data_start..).unwrap_or_default(),
    })
}

impl NpyArray<'_> {
    /// The shape as Python writes it: `(4096, 2)`.
    pub(super) fn shape_text(&self) -> String {
        format_shape(&self.shape)
    }

    /// Whether the element type is one trapwise reads.
    pub(super) fn is_supported(&self) -> bool {
        self.dtype.is_some()
    }

    /// Whether the elements are integers (scaled by the volts per count).
    pub(super) fn is_integer(&self) -> bool {
        self.dtype.is_some_and(Dtype::is_integer)
    }

    /// The element type, or the error naming the one found.
    fn dtype(&self, file: &str) -> Result<Dtype, IngestError> {
        self.dtype.ok_or_else(|| IngestError::NpyUnsupportedDtype {
            file: file.to_string(),
            byte_offset: self.header_start,
            dtype: self.descr.chars().take(40).collect(),
        })
    }

    /// The samples-by-axes reading of the shape (see the module documentation), if it has one.
    pub(super) fn grid(&self) -> Option<Grid> {
        let (n_rows, n_cols, rows_are_samples) = match self.shape.as_slice() {
            [n] => (*n, 1, true),
            [n, c] if (1..=3).contains(c) => (*n, *c, true),
            [c, n] if (1..=3).contains(c) => (*c, *n, false),
            _ => return None,
        };
        Some(Grid {
            n_rows,
            n_cols,
            rows_are_samples,
        })
    }

    /// `grid`, or the error naming the shape.
    fn checked_grid(&self, file: &str) -> Result<Grid, IngestError> {
        self.grid().ok_or_else(|| IngestError::NpyUnsupportedShape {
            file: file.to_string(),
            byte_offset: self.header_start,
            shape: self.shape_text(),
        })
    }

    /// The element type and grid, after checking that the data is exactly as long as they say.
    pub(super) fn checked(&self, file: &str) -> Result<(Dtype, Grid), IngestError> {
        let dtype = self.dtype(file)?;
        let grid = self.checked_grid(file)?;
        let expected_bytes = grid
            .n_rows
            .checked_mul(grid.n_cols)
            .and_then(|n| n.checked_mul(dtype.item_bytes()))
            .ok_or_else(|| IngestError::NpyBadHeader {
                file: file.to_string(),
                byte_offset: self.header_start,
                reason: "the shape is too large for this machine".to_string(),
            })?;
        let found_bytes = self.data.len();
        if found_bytes < expected_bytes {
            return Err(IngestError::NpyTruncated {
                file: file.to_string(),
                byte_offset: self.data_start + found_bytes,
                expected_bytes,
                found_bytes,
            });
        }
        if found_bytes > expected_bytes {
            return Err(IngestError::NpyTrailingBytes {
                file: file.to_string(),
                byte_offset: self.data_start + expected_bytes,
                extra_bytes: found_bytes - expected_bytes,
            });
        }
        Ok((dtype, grid))
    }

    /// The samples of each axis times `scale`, all finite.
    pub(super) fn decode(
        &self,
        file: &str,
        dtype: Dtype,
        grid: Grid,
        scale: f64,
    ) -> Result<Vec<Vec<f64>>, IngestError> {
        let n_samples = grid.n_samples();
        let mut axes: Vec<Vec<f64>> = (0..grid.n_axes()).map(|_| vec![0.0; n_samples]).collect();
        let item_bytes = dtype.item_bytes();
        // Element (row r, column c) is at flat index r * n_cols + c in C order and
        // c * n_rows + r in Fortran order (NEP 1). Decode in storage order, then place each
        // value in its axis.
        for (flat_idx, element) in self.data.chunks_exact(item_bytes).enumerate() {
            let (row, col) = if self.fortran_order {
                (flat_idx % grid.n_rows.max(1), flat_idx / grid.n_rows.max(1))
            } else {
                (flat_idx / grid.n_cols, flat_idx % grid.n_cols)
            };
            let (sample_idx, axis_idx) = if grid.rows_are_samples {
                (row, col)
            } else {
                (col, row)
            };
            let value = dtype.decode(element) * scale;
            if !value.is_finite() {
                return Err(IngestError::NonFiniteSample {
                    file: file.to_string(),
                    byte_offset: self.data_start + flat_idx * item_bytes,
                    value,
                });
            }
            if let Some(slot) = axes
                .get_mut(axis_idx)
                .and_then(|axis| axis.get_mut(sample_idx))
            {
                *slot = value;
            }
        }
        Ok(axes)
    }
}

/// The scale and unit of an array's samples: integers through the volts per count (or as
/// nanometres), floats in the unit of the options.
pub(super) fn scale_and_unit(
    file: &str,
    format: Format,
    array: &NpyArray<'_>,
    options: &IngestOptions,
) -> Result<(f64, PositionUnit), IngestError> {
    if array.is_integer() {
        integer_scale(file, &array.descr, options, true)
    } else {
        Ok((1.0, required_unit(file, format.name(), options)?))
    }
}

/// Reads a `.npy` file (see the module documentation for what is accepted).
pub(super) fn parse_npy(
    file: &str,
    bytes: &[u8],
    options: &IngestOptions,
) -> Result<Recording, IngestError> {
    let array = read_array(file, bytes)?;
    let (dtype, grid) = array.checked(file)?;
    let (scale, unit) = scale_and_unit(file, Format::Npy, &array, options)?;
    let sample_rate_hz = required_rate(file, Format::Npy, options)?;
    if grid.n_samples() < MIN_SAMPLES {
        return Err(IngestError::TooFewSamples {
            file: file.to_string(),
            found: grid.n_samples(),
        });
    }
    let axes = array.decode(file, dtype, grid, scale)?;
    finish_unlabelled(file, sample_rate_hz, unit, axes)
}

/// Writes a shape as a Python tuple: `(5,)`, `(5, 3)`, `()`.
fn format_shape(shape: &[usize]) -> String {
    match shape {
        [n] => format!("({n},)"),
        _ => {
            let parts: Vec<String> = shape.iter().map(usize::to_string).collect();
            format!("({})", parts.join(", "))
        }
    }
}

/// A tiny reader for the header's dictionary literal; errors carry the offset within the header.
struct DictReader<'a> {
    /// The header bytes.
    bytes: &'a [u8],
    /// Offset of the next unread byte.
    pos: usize,
}

/// A header parse failure: offset within the header and reason.
type HeaderFault = (usize, String);

impl DictReader<'_> {
    /// The next byte, not consumed.
    fn peek(&self) -> Option<u8> {
        self.bytes.get(self.pos).copied()
    }

    /// Skips Python whitespace.
    fn skip_space(&mut self) {
        while matches!(self.peek(), Some(b' ' | b'\t' | b'\n' | b'\r')) {
            self.pos += 1;
        }
    }

    /// A fault at the current offset.
    fn fault(&self, reason: &str) -> HeaderFault {
        (self.pos, reason.to_string())
    }

    /// Consumes `byte` after optional whitespace, or fails with `reason`.
    fn expect(&mut self, byte: u8, reason: &str) -> Result<(), HeaderFault> {
        self.skip_space();
        if self.peek() == Some(byte) {
            self.pos += 1;
            Ok(())
        } else {
            Err(self.fault(reason))
        }
    }

    /// Reads a single- or double-quoted string without escapes.
    fn string(&mut self) -> Result<String, HeaderFault> {
        self.skip_space();
        let Some(quote @ (b'\'' | b'"')) = self.peek() else {
            return Err(self.fault("expected a quoted string"));
        };
        let start = self.pos + 1;
        let rest = self.bytes.get(start..).unwrap_or_default();
        let Some(len) = rest.iter().position(|&b| b == quote) else {
            return Err(self.fault("unterminated string"));
        };
        let text = rest.get(..len).unwrap_or_default();
        if text.contains(&b'\\') || !text.is_ascii() {
            return Err(self.fault("escapes and non-ASCII text are not supported in the header"));
        }
        self.pos = start + len + 1;
        Ok(String::from_utf8_lossy(text).into_owned())
    }

    /// Reads a Python value without interpreting it (for a structured descr), up to the next
    /// top-level comma or closing brace.
    fn raw_value(&mut self) -> Result<String, HeaderFault> {
        self.skip_space();
        let start = self.pos;
        let mut depth = 0usize;
        let mut quote: Option<u8> = None;
        while let Some(b) = self.peek() {
            match (quote, b) {
                (Some(q), _) if b == q => quote = None,
                (Some(_), _) => {}
                (None, b'\'' | b'"') => quote = Some(b),
                (None, b'(' | b'[' | b'{') => depth += 1,
                (None, b')' | b']' | b'}') if depth > 0 => depth -= 1,
                (None, b',' | b'}') if depth == 0 => break,
                (None, _) => {}
            }
            self.pos += 1;
        }
        if quote.is_some() || depth > 0 {
            return Err(self.fault("unterminated value"));
        }
        let text = self.bytes.get(start..self.pos).unwrap_or_default();
        Ok(String::from_utf8_lossy(text).trim().to_string())
    }

    /// Reads `True` or `False`.
    fn boolean(&mut self) -> Result<bool, HeaderFault> {
        self.skip_space();
        let rest = self.bytes.get(self.pos..).unwrap_or_default();
        if rest.starts_with(b"True") {
            self.pos += 4;
            Ok(true)
        } else if rest.starts_with(b"False") {
            self.pos += 5;
            Ok(false)
        } else {
            Err(self.fault("fortran_order must be True or False"))
        }
    }

    /// Reads a tuple of non-negative integers: `()`, `(5,)`, `(5, 3)`.
    fn shape(&mut self) -> Result<Vec<usize>, HeaderFault> {
        self.expect(b'(', "shape must be a tuple")?;
        let mut shape = Vec::new();
        loop {
            self.skip_space();
            if self.peek() == Some(b')') {
                self.pos += 1;
                return Ok(shape);
            }
            if shape.len() >= 32 {
                return Err(self.fault("shape has more than 32 dimensions"));
            }
            let start = self.pos;
            let mut value: usize = 0;
            while let Some(digit @ b'0'..=b'9') = self.peek() {
                value = value
                    .checked_mul(10)
                    .and_then(|v| v.checked_add(usize::from(digit - b'0')))
                    .ok_or_else(|| self.fault("shape entry too large"))?;
                self.pos += 1;
            }
            if self.pos == start {
                return Err(self.fault("shape entries must be non-negative integers"));
            }
            shape.push(value);
            self.skip_space();
            match self.peek() {
                Some(b',') => self.pos += 1,
                Some(b')') => {}
                _ => return Err(self.fault("expected ',' or ')' in the shape")),
            }
        }
    }
}

/// Parses the header dictionary (NEP 1): keys `descr`, `fortran_order`, `shape`, each exactly
/// once, in any order, with an optional trailing comma, followed only by spaces and line feeds.
fn parse_header_dict(bytes: &[u8]) -> Result<NpyHeader, HeaderFault> {
    let mut reader = DictReader { bytes, pos: 0 };
    let mut descr = None;
    let mut fortran_order = None;
    let mut shape = None;
    reader.expect(b'{', "the header must start with '{'")?;
    loop {
        reader.skip_space();
        if reader.peek() == Some(b'}') {
            reader.pos += 1;
            break;
        }
        let key_pos = reader.pos;
        let key = reader.string()?;
        reader.expect(b':', "expected ':' after a key")?;
        reader.skip_space();
        let duplicate = match key.as_str() {
            "descr" => {
                let value = if matches!(reader.peek(), Some(b'\'' | b'"')) {
                    Ok(reader.string()?)
                } else {
                    Err(reader.raw_value()?)
                };
                descr.replace(value).is_some()
            }
            "fortran_order" => fortran_order.replace(reader.boolean()?).is_some(),
            "shape" => shape.replace(reader.shape()?).is_some(),
            _ => {
                let key: String = key.chars().take(40).collect();
                return Err((key_pos, format!("unexpected key '{key}'")));
            }
        };
        if duplicate {
            return Err((key_pos, format!("key '{key}' appears twice")));
        }
        reader.skip_space();
        match reader.peek() {
            Some(b',') => reader.pos += 1,
            Some(b'}') => {}
            _ => return Err(reader.fault("expected ',' or '}' after a value")),
        }
    }
    reader.skip_space();
    if reader.pos != bytes.len() {
        return Err(reader.fault("unexpected text after the dictionary"));
    }
    match (descr, fortran_order, shape) {
        (Some(descr), Some(fortran_order), Some(shape)) => Ok(NpyHeader {
            descr,
            fortran_order,
            shape,
        }),
        _ => Err((
            0,
            "the keys descr, fortran_order and shape are all required".to_string(),
        )),
    }
}
