//! trapwise calibrates optical traps from recordings of a trapped bead's thermal motion.
//!
//! The numerical core (`recording`, `estimate`, `water`, `drag`, `fft`, `spectrum`, `autocorrelation`,
//! `equipartition`, `calibration`, `findings`, `simulate`) is pure: it takes plain data and
//! returns plain data, and imports no IO, async or HTTP crate. Around it sit `ingest`
//! (file formats), `report` (wire types and text summaries), `store` (database and raw
//! uploads), `http` (the calibration service), `config` (the service's environment) and `cli`.

pub mod allan;
pub mod autocorrelation;
pub mod calibration;
pub mod cli;
pub mod config;
pub mod drag;
pub mod equipartition;
pub mod estimate;
mod fft;
pub mod findings;
pub mod http;
pub mod ingest;
mod linalg;
pub mod pipeline;
pub mod recording;
pub mod report;
pub mod settings;
pub mod simulate;
pub mod spectrum;
pub mod store;
pub mod water;
