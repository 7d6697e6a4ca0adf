//! Run settings as text: one vocabulary of `key = value` pairs for the command line, HTTP form
//! fields and query parameters, resolved into the typed options of ingest and calibration.
//!
//! Keys (units in the names): `bead_diameter_um`, `bead_diameter_se_um`, `temperature_c`,
//! `temperature_se_c`, `viscosity_mpa_s`, `height_um`, `height_se_um`, `bead_density_kg_per_m3`,
//! `sample_rate_hz`, `units` (`nm` or `V`), `format`, `channels`, `volts_per_count`,
//! `time_tolerance`, `fit_min_hz`, `fit_max_hz`, `windows`, `detector_filter` (`none`, `fit`,
//! `fit:F3DB:ALPHA` with starting values, or `F3DB:ALPHA` fixed), `hydrodynamics`
//! (`true`/`false`), `detrend` (`mean`/`linear`), `axial_axes` (comma-separated names),
//! `precision_percent`.

use crate::calibration::{AnalysisOptions, RunConditions};
use crate::equipartition::Detrend;
use crate::ingest::{DEFAULT_TIME_TOLERANCE, Format, IngestOptions};
use crate::recording::PositionUnit;
use crate::spectrum::{DetectorFilter, FilterSetting};

/// Every key `Settings::apply` accepts.
pub const KEYS: [&str; 22] = [
    "bead_diameter_um",
    "bead_diameter_se_um",
    "temperature_c",
    "temperature_se_c",
    "viscosity_mpa_s",
    "height_um",
    "height_se_um",
    "bead_density_kg_per_m3",
    "sample_rate_hz",
    "units",
    "format",
    "channels",
    "volts_per_count",
    "time_tolerance",
    "fit_min_hz",
    "fit_max_hz",
    "windows",
    "detector_filter",
    "hydrodynamics",
    "detrend",
    "axial_axes",
    "precision_percent",
];

/// A setting that could not be used.
#[derive(Clone, Debug, PartialEq, thiserror::Error)]
pub enum SettingsError {
    /// The key is not one of `KEYS`.
    #[error("unknown setting `{key}`; known settings are: {known}")]
    UnknownKey { key: String, known: String },
    /// The value does not parse as the key's type.
    #[error("setting `{key}` = `{value}` is not valid: {expected}")]
    BadValue {
        key: String,
        value: String,
        expected: &'static str,
    },
    /// A required setting is absent.
    #[error("setting `{key}` is required: {hint}")]
    Missing {
        key: &'static str,
        hint: &'static str,
    },
}

/// Settings gathered from text or typed arguments, before resolution.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct Settings {
    pub bead_diameter_um: Option<f64>,
    pub bead_diameter_se_um: Option<f64>,
    pub temperature_c: Option<f64>,
    pub temperature_se_c: Option<f64>,
    pub viscosity_mpa_s: Option<f64>,
    pub height_um: Option<f64>,
    pub height_se_um: Option<f64>,
    pub bead_density_kg_per_m3: Option<f64>,
    pub sample_rate_hz: Option<f64>,
    pub units: Option<PositionUnit>,
    pub format: Option<Format>,
    pub channels: Option<usize>,
    pub volts_per_count: Option<f64>,
    pub time_tolerance: Option<f64>,
    pub fit_min_hz: Option<f64>,
    pub fit_max_hz: Option<f64>,
    pub windows: Option<usize>,
    pub detector_filter: Option<FilterSetting>,
    pub hydrodynamics: Option<bool>,
    pub detrend: Option<Detrend>,
    pub axial_axes: Option<Vec<String>>,
    pub precision_percent: Option<f64>,
}

fn bad(key: &str, value: &str, expected: &'static str) -> SettingsError {
    SettingsError::BadValue {
        key: key.to_string(),
        value: value.to_string(),
        expected,
    }
}

fn number(key: &str, value: &str) -> Result<f64, SettingsError> {
    value
        .trim()
        .parse::<f64>()
        .ok()
        .filter(|v| v.is_finite())
        .ok_or_else(|| bad(key, value, "expected a finite number"))
}

fn count(key: &str, value: &str) -> Result<usize, SettingsError> {
    value
        .trim()
        .parse::<usize>()
        .ok()
        .filter(|v| *v > 0)
        .ok_or_else(|| bad(key, value, "expected a positive whole number"))
}

fn boolean(key: &str, value: &str) -> Result<bool, SettingsError> {
    match value.trim().to_ascii_lowercase().as_str() {
        "true" | "yes" | "1" | "on" => Ok(true),
        "false" | "no" | "0" | "off" => Ok(false),
        _ => Err(bad(key, value, "expected true or false")),
    }
}

/// Parses a position unit name (`nm` or `V`, case-insensitive).
pub fn parse_unit(value: &str) -> Option<PositionUnit> {
    match value.trim().to_ascii_lowercase().as_str() {
        "nm" | "nanometre" | "nanometer" => Some(PositionUnit::Nanometre),
        "v" | "volt" | "volts" => Some(PositionUnit::Volt),
        _ => None,
    }
}

/// Parses a detector filter specification (see the module docs).
pub fn parse_filter(value: &str) -> Option<FilterSetting> {
    let v = value.trim().to_ascii_lowercase();
    let pair = |s: &str| -> Option<DetectorFilter> {
        let (f, a) = s.split_once(':')?;
        let f3db_hz: f64 = f.trim().parse().ok()?;
        let alpha: f64 = a.trim().parse().ok()?;
        (f3db_hz.is_finite() && f3db_hz > 0.0 && alpha > 0.0 && alpha <= 1.0)
            .then_some(DetectorFilter { f3db_hz, alpha })
    };
    match v.as_str() {
        "none" | "" => Some(FilterSetting::None),
        "fit" => Some(FilterSetting::Fitted(DetectorFilter {
            f3db_hz: 8_000.0,
            alpha: 0.4,
        })),
        _ => match v.strip_prefix("fit:") {
            Some(rest) => pair(rest).map(FilterSetting::Fitted),
            None => pair(&v).map(FilterSetting::Fixed),
        },
    }
}

impl Settings {
    /// Sets one key from text. Empty values leave the setting unset (a blank form field).
    pub fn apply(&mut self, key: &str, value: &str) -> Result<(), SettingsError> {
        if value.trim().is_empty() {
            return Ok(());
        }
        match key {
            "bead_diameter_um" => self.bead_diameter_um = Some(number(key, value)?),
            "bead_diameter_se_um" => self.bead_diameter_se_um = Some(number(key, value)?),
            "temperature_c" => self.temperature_c = Some(number(key, value)?),
            "temperature_se_c" => self.temperature_se_c = Some(number(key, value)?),
            "viscosity_mpa_s" => self.viscosity_mpa_s = Some(number(key, value)?),
            "height_um" => self.height_um = Some(number(key, value)?),
            "height_se_um" => self.height_se_um = Some(number(key, value)?),
            "bead_density_kg_per_m3" => self.bead_density_kg_per_m3 = Some(number(key, value)?),
            "sample_rate_hz" => self.sample_rate_hz = Some(number(key, value)?),
            "units" => {
                self.units =
                    Some(parse_unit(value).ok_or_else(|| bad(key, value, "expected nm or V"))?)
            }
            "format" => {
                self.format = Some(Format::parse_name(value).ok_or_else(|| {
                    bad(
                        key,
                        value,
                        "expected csv, tsv, columns, raw-f32, raw-f64, raw-i16 or npy",
                    )
                })?)
            }
            "channels" => self.channels = Some(count(key, value)?),
            "volts_per_count" => self.volts_per_count = Some(number(key, value)?),
            "time_tolerance" => self.time_tolerance = Some(number(key, value)?),
            "fit_min_hz" => self.fit_min_hz = Some(number(key, value)?),
            "fit_max_hz" => self.fit_max_hz = Some(number(key, value)?),
            "windows" => self.windows = Some(count(key, value)?),
            "detector_filter" => {
                self.detector_filter = Some(parse_filter(value).ok_or_else(|| {
                    bad(
                        key,
                        value,
                        "expected none, fit, fit:F3DB:ALPHA or F3DB:ALPHA with 0 < ALPHA <= 1",
                    )
                })?)
            }
            "hydrodynamics" => self.hydrodynamics = Some(boolean(key, value)?),
            "detrend" => {
                self.detrend = Some(match value.trim().to_ascii_lowercase().as_str() {
                    "mean" => Detrend::Mean,
                    "linear" => Detrend::Linear,
                    _ => return Err(bad(key, value, "expected mean or linear")),
                })
            }
            "axial_axes" => {
                self.axial_axes = Some(
                    value
                        .split(',')
                        .map(|s| s.trim().to_string())
                        .filter(|s| !s.is_empty())
                        .collect(),
                )
            }
            "precision_percent" => self.precision_percent = Some(number(key, value)?),
            _ => {
                return Err(SettingsError::UnknownKey {
                    key: key.to_string(),
                    known: KEYS.join(", "),
                });
            }
        }
        Ok(())
    }

    /// The text pairs that reproduce these settings (for the upload client and for storage).
    pub fn to_pairs(&self) -> Vec<(&'static str, String)> {
        let mut out = Vec::new();
        let mut num = |k: &'static str, v: Option<f64>| {
            if let Some(v) = v {
                out.push((k, format!("{v}")));
            }
        };
        num("bead_diameter_um", self.bead_diameter_um);
        num("bead_diameter_se_um", self.bead_diameter_se_um);
        num("temperature_c", self.temperature_c);
        num("temperature_se_c", self.temperature_se_c);
        num("viscosity_mpa_s", self.viscosity_mpa_s);
        num("height_um", self.height_um);
        num("height_se_um", self.height_se_um);
        num("bead_density_kg_per_m3", self.bead_density_kg_per_m3);
        num("sample_rate_hz", self.sample_rate_hz);
        num("volts_per_count", self.volts_per_count);
        num("time_tolerance", self.time_tolerance);
        num("fit_min_hz", self.fit_min_hz);
        num("fit_max_hz", self.fit_max_hz);
        num("precision_percent", self.precision_percent);
        if let Some(u) = self.units {
            out.push(("units", u.suffix().to_string()));
        }
        if let Some(f) = self.format {
            out.push(("format", f.name().to_string()));
        }
        if let Some(c) = self.channels {
            out.push(("channels", c.to_string()));
        }
        if let Some(w) = self.windows {
            out.push(("windows", w.to_string()));
        }
        if let Some(f) = self.detector_filter {
            out.push((
                "detector_filter",
                match f {
                    FilterSetting::None => "none".to_string(),
                    FilterSetting::Fitted(d) => format!("fit:{}:{}", d.f3db_hz, d.alpha),
                    FilterSetting::Fixed(d) => format!("{}:{}", d.f3db_hz, d.alpha),
                },
            ));
        }
        if let Some(h) = self.hydrodynamics {
            out.push(("hydrodynamics", h.to_string()));
        }
        if let Some(d) = self.detrend {
            out.push((
                "detrend",
                match d {
                    Detrend::Mean => "mean",
                    Detrend::Linear => "linear",
                }
                .to_string(),
            ));
        }
        if let Some(a) = &self.axial_axes {
            out.push(("axial_axes", a.join(",")));
        }
        out.sort();
        out
    }

    /// The typed options, or the first missing required setting.
    pub fn resolve(
        &self,
    ) -> Result<(IngestOptions, RunConditions, AnalysisOptions), SettingsError> {
        let diameter = self.bead_diameter_um.ok_or(SettingsError::Missing {
            key: "bead_diameter_um",
            hint: "give the bead diameter in micrometres (e.g. 1.0)",
        })?;
        let temperature = self.temperature_c.ok_or(SettingsError::Missing {
            key: "temperature_c",
            hint: "give the sample temperature in degrees Celsius (e.g. 25)",
        })?;
        let positive = |key: &str, v: Option<f64>| match v {
            Some(x) if !(x > 0.0) => Err(bad(key, &x.to_string(), "expected a positive number")),
            _ => Ok(()),
        };
        let non_negative = |key: &str, v: Option<f64>| match v {
            Some(x) if !(x >= 0.0) => Err(bad(
                key,
                &x.to_string(),
                "expected zero or a positive number",
            )),
            _ => Ok(()),
        };
        positive("bead_diameter_um", Some(diameter))?;
        positive("viscosity_mpa_s", self.viscosity_mpa_s)?;
        positive("height_um", self.height_um)?;
        positive("bead_density_kg_per_m3", self.bead_density_kg_per_m3)?;
        positive("volts_per_count", self.volts_per_count)?;
        positive("time_tolerance", self.time_tolerance)?;
        positive("precision_percent", self.precision_percent)?;
        non_negative("bead_diameter_se_um", self.bead_diameter_se_um)?;
        non_negative("temperature_se_c", self.temperature_se_c)?;
        non_negative("height_se_um", self.height_se_um)?;
        non_negative("fit_min_hz", self.fit_min_hz)?;
        positive("fit_max_hz", self.fit_max_hz)?;
        let ingest = IngestOptions {
            format: self.format,
            sample_rate_hz: self.sample_rate_hz,
            unit: self.units,
            channels: self.channels,
            volts_per_count: self.volts_per_count,
            time_tolerance: self.time_tolerance.unwrap_or(DEFAULT_TIME_TOLERANCE),
        };
        let mut conditions = RunConditions::new(diameter * 1e-6, temperature);
        conditions.bead_diameter_se_m = self.bead_diameter_se_um.unwrap_or(0.0) * 1e-6;
        conditions.temperature_se_c = self.temperature_se_c.unwrap_or(0.0);
        conditions.viscosity_pa_s = self.viscosity_mpa_s.map(|v| v * 1e-3);
        conditions.height_m = self.height_um.map(|h| h * 1e-6);
        conditions.height_se_m = self.height_se_um.unwrap_or(0.0) * 1e-6;
        if let Some(rho) = self.bead_density_kg_per_m3 {
            conditions.bead_density_kg_per_m3 = rho;
        }
        let mut analysis = AnalysisOptions::default();
        analysis.fit_range.f_min_hz = self.fit_min_hz;
        analysis.fit_range.f_max_hz = self.fit_max_hz;
        if let Some(w) = self.windows {
            analysis.n_windows = Some(w);
        }
        if let Some(f) = self.detector_filter {
            analysis.filter = f;
        }
        if let Some(h) = self.hydrodynamics {
            analysis.hydrodynamics = h;
        }
        if let Some(d) = self.detrend {
            analysis.detrend = d;
        }
        if let Some(a) = &self.axial_axes {
            analysis.axial_axes = a.clone();
        }
        if let Some(p) = self.precision_percent {
            analysis.target_relative_precision = p / 100.0;
        }
        Ok((ingest, conditions, analysis))
    }
}
