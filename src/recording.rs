//! A recording of bead positions: one to three axes sampled at one rate, in volts or nanometres.
//!
//! This is the plain data every parser produces and every numerical module consumes.

/// The unit the position samples are expressed in.
///
/// Photodiode detectors give volts, which need the displacement sensitivity beta (nm/V) to
/// become positions; camera tracking gives nanometres directly.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum PositionUnit {
    /// Nanometres: positions are already calibrated lengths.
    Nanometre,
    /// Volts: raw detector output, proportional to position for small displacements.
    Volt,
}

impl PositionUnit {
    /// The short suffix used in headers and wire formats (`nm` or `V`).
    pub fn suffix(self) -> &'static str {
        match self {
            PositionUnit::Nanometre => "nm",
            PositionUnit::Volt => "V",
        }
    }
}

/// One axis of a recording: its name (`x`, `y`, `z` or a header label) and its samples.
#[derive(Clone, Debug, PartialEq)]
pub struct AxisTrace {
    /// The axis name as given by the file header, or `x`, `y`, `z` by column order.
    pub name: String,
    /// Samples in the recording's unit, equally spaced in time.
    pub samples: Vec<f64>,
}

/// A uniformly sampled recording of one to three axes.
#[derive(Clone, Debug, PartialEq)]
pub struct Recording {
    /// Sampling rate in hertz (samples per second per axis).
    pub sample_rate_hz: f64,
    /// Unit of every sample in every axis.
    pub unit: PositionUnit,
    /// One to three axes, all of the same length.
    pub axes: Vec<AxisTrace>,
}

impl Recording {
    /// Number of samples per axis (all axes have the same length).
    pub fn n_samples(&self) -> usize {
        self.axes.first().map_or(0, |a| a.samples.len())
    }

    /// Record length in seconds.
    pub fn duration_s(&self) -> f64 {
        self.n_samples() as f64 / self.sample_rate_hz
    }
}

/// Longest stored name (an axis name, an instrument, trap or axis label), characters.
pub const MAX_NAME_CHARS: usize = 200;

/// Why a name cannot be stored: the one rule for every name the service keeps and puts into
/// links (axis names from a file's header, the instrument, trap and axis labels of an upload).
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum NameFault {
    /// Nothing but white space.
    Empty,
    /// More than `MAX_NAME_CHARS` characters.
    TooLong {
        /// Characters in the name.
        n_chars: usize,
    },
    /// A control character (escape, bell, line feed ...), which terminals and logs act on.
    Control {
        /// Its position in the name, counted in characters from 1.
        char_idx: usize,
        /// Its code point.
        code_point: u32,
    },
    /// `.` or `..`, which URL normalisation (RFC 3986 section 5.2.4) removes from the links
    /// that carry the name as a path segment.
    DotSegment,
}

impl std::fmt::Display for NameFault {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            NameFault::Empty => write!(f, "the name is empty"),
            NameFault::TooLong { n_chars } => write!(
                f,
                "the name has {n_chars} characters; at most {MAX_NAME_CHARS} are kept"
            ),
            NameFault::Control {
                char_idx,
                code_point,
            } => write!(
                f,
                "character {char_idx} of the name is the control character U+{code_point:04X}; \
                 use printable characters"
            ),
            NameFault::DotSegment => write!(
                f,
                "`.` and `..` are not names (links would lose them); choose another"
            ),
        }
    }
}

/// The fault of `name` (taken as given, surrounding white space included), or `None` when it
/// can be stored.
pub fn name_fault(name: &str) -> Option<NameFault> {
    if name.trim().is_empty() {
        return Some(NameFault::Empty);
    }
    if let Some((idx, c)) = name.chars().enumerate().find(|(_, c)| c.is_control()) {
        return Some(NameFault::Control {
            char_idx: idx + 1,
            code_point: u32::from(c),
        });
    }
    let n_chars = name.chars().count();
    if n_chars > MAX_NAME_CHARS {
        return Some(NameFault::TooLong { n_chars });
    }
    if matches!(name.trim(), "." | "..") {
        return Some(NameFault::DotSegment);
    }
    None
}

#[cfg(test)]
mod name_tests {
    use super::{MAX_NAME_CHARS, NameFault, name_fault};

    #[track_caller]
    fn check(name: &str, expected: Option<NameFault>) {
        assert_eq!(name_fault(name), expected, "{name:?}");
    }

    #[test]
    fn names_break_the_rules_of_length_control_characters_and_dot_segments() {
        check("x", None);
        check("bench-a / trap 1 (µm)", None);
        check(&"é".repeat(MAX_NAME_CHARS), None);
        check("..x", None);
        check("", Some(NameFault::Empty));
        check("  ", Some(NameFault::Empty));
        check(
            &"a".repeat(MAX_NAME_CHARS + 1),
            Some(NameFault::TooLong {
                n_chars: MAX_NAME_CHARS + 1,
            }),
        );
        // ESC (U+001B) and BEL (U+0007), the escape and bell of the probe; DEL (U+007F) and
        // the C1 control NEL (U+0085) are control characters too (Unicode category Cc).
        for (name, idx, code) in [
            ("x\u{1b}[2J", 2, 0x1b),
            ("\u{7}", 1, 0x07),
            ("ab\u{7f}", 3, 0x7f),
            ("a\u{85}", 2, 0x85),
        ] {
            check(
                name,
                Some(NameFault::Control {
                    char_idx: idx,
                    code_point: code,
                }),
            );
        }
        check(".", Some(NameFault::DotSegment));
        check(" .. ", Some(NameFault::DotSegment));
    }
}
