//! One value with its standard error: the currency of every estimate trapwise reports.
//!
//! Defined outside the calibration so the findings, the report and the calibration share it
//! without importing one another.

/// A value and its standard error, in the unit its holder's name states.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Estimate {
    pub value: f64,
    pub se: f64,
}

impl Estimate {
    /// A value with its standard error.
    pub fn new(value: f64, se: f64) -> Self {
        Estimate { value, se }
    }

    /// Relative standard error se / |value|.
    pub fn relative_se(&self) -> f64 {
        self.se / self.value.abs()
    }
}
