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
