//! Placeholder: autocorrelation method.
