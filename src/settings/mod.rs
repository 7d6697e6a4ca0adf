//! Run settings as text: one vocabulary of `key = value` pairs for the command line, HTTP form
//! fields and query parameters, resolved into the typed options of ingest and calibration.
//!
//! The settings are the rows of one table, `spec::SPECS` (key, kind, unit, help, default,
//! example, command-line flag). `Settings` holds the parsed values by key; `apply` parses by
//! the row's kind, `to_pairs` writes the canonical text, and `resolve` checks the required
//! settings and the ranges from the table and then builds `IngestOptions`, `RunConditions` and
//! `AnalysisOptions`. A new setting is one row in `SPECS` plus its use in `resolve`.

pub mod spec;

use crate::calibration::{AnalysisOptions, Drive, RunConditions};
use crate::drag;
use crate::equipartition::Detrend;
use crate::ingest::{DEFAULT_TIME_TOLERANCE, Delimiter, Format, IngestOptions};
use crate::recording::PositionUnit;
use crate::spectrum::{FilterSetting, NoiseFloorMode};
use std::collections::BTreeMap;

pub use spec::{
    Absent, Flag, KEYS, Kind, Range, SPECS, SettingSpec, Value, number_text, parse_filter,
};

/// A setting that could not be used.
#[derive(Clone, Debug, PartialEq, thiserror::Error)]
pub enum SettingsError {
    /// The key is not one of `KEYS`.
    #[error("unknown setting `{key}`; known settings are: {known}")]
    UnknownKey { key: String, known: String },
    /// The value does not parse as the key's kind, or lies outside its range.
    #[error("setting `{key}` = `{value}` is not valid: {expected}")]
    BadValue {
        key: String,
        value: String,
        expected: String,
    },
    /// A required setting is absent.
    #[error("setting `{key}` is required: {hint}")]
    Missing {
        key: &'static str,
        hint: &'static str,
    },
}

/// Settings gathered from text, before resolution: the parsed value of each key given.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct Settings {
    values: BTreeMap<&'static str, Value>,
}

fn bad(key: &str, value: &str, expected: String) -> SettingsError {
    SettingsError::BadValue {
        key: key.to_string(),
        value: value.to_string(),
        expected,
    }
}

/// Parses a position unit name (`nm` or `V`, or a spelled-out alias, any case).
pub fn parse_unit(value: &str) -> Option<PositionUnit> {
    match spec::UNIT_CHOICES.find(value)? {
        "nm" => Some(PositionUnit::Nanometre),
        "V" => Some(PositionUnit::Volt),
        _ => None,
    }
}

/// The detrending a `detrend` choice names.
/// The density of a bead material, kg/m^3.
fn parse_bead_material(name: &str) -> Option<f64> {
    match spec::BEAD_MATERIAL_CHOICES.find(name)? {
        "polystyrene" => Some(drag::POLYSTYRENE_DENSITY_KG_PER_M3),
        "silica" => Some(drag::SILICA_DENSITY_KG_PER_M3),
        _ => None,
    }
}

fn parse_noise_floor(name: &str) -> Option<NoiseFloorMode> {
    match spec::NOISE_FLOOR_CHOICES.find(name)? {
        "auto" => Some(NoiseFloorMode::Auto),
        "fit" => Some(NoiseFloorMode::Fit),
        "off" => Some(NoiseFloorMode::Off),
        _ => None,
    }
}

fn parse_detrend(name: &str) -> Option<Detrend> {
    match spec::DETREND_CHOICES.find(name)? {
        "mean" => Some(Detrend::Mean),
        "linear" => Some(Detrend::Linear),
        _ => None,
    }
}

impl Settings {
    /// Sets one key from text. Empty values leave the setting unset (a blank form field).
    pub fn apply(&mut self, key: &str, value: &str) -> Result<(), SettingsError> {
        let Some(spec) = spec::spec(key) else {
            return Err(SettingsError::UnknownKey {
                key: key.to_string(),
                known: KEYS.join(", "),
            });
        };
        if value.trim().is_empty() {
            return Ok(());
        }
        let parsed = spec.kind.parse(value).map_err(|e| bad(key, value, e))?;
        self.values.insert(spec.key, parsed);
        Ok(())
    }

    /// The parsed value of `key`, if given.
    pub fn get(&self, key: &str) -> Option<&Value> {
        self.values.get(key)
    }

    /// The canonical text pairs of the settings given, sorted by key: what the upload client
    /// sends, what is stored with a calibration, and what the idempotency key of an upload is
    /// computed over (so their text must not change for a given value).
    pub fn to_pairs(&self) -> Vec<(&'static str, String)> {
        // A BTreeMap iterates in key order, which is the sorted order.
        self.values.iter().map(|(k, v)| (*k, v.text())).collect()
    }

    /// The canonical text pairs of the given settings together with the stated default of every
    /// row that has one (`Absent::Default`) and was not given, sorted by key: what a calibration
    /// is computed with, so that a change of a default changes this list.
    pub fn effective_pairs(&self) -> Vec<(&'static str, String)> {
        let mut pairs = self.to_pairs();
        for s in SPECS {
            if let (Absent::Default(text), false) = (s.absent, self.values.contains_key(s.key)) {
                let canonical = s
                    .kind
                    .parse(text)
                    .map_or_else(|_| text.to_string(), |v| v.text());
                pairs.push((s.key, canonical));
            }
        }
        pairs.sort_by(|a, b| a.0.cmp(b.0));
        pairs
    }

    fn number(&self, key: &str) -> Option<f64> {
        match self.values.get(key) {
            Some(Value::Number(x)) => Some(*x),
            _ => None,
        }
    }

    fn count(&self, key: &str) -> Option<usize> {
        match self.values.get(key) {
            Some(Value::Count(n)) => Some(*n),
            _ => None,
        }
    }

    fn boolean(&self, key: &str) -> Option<bool> {
        match self.values.get(key) {
            Some(Value::Boolean(b)) => Some(*b),
            _ => None,
        }
    }

    /// A boolean setting, or the default its row states when it is absent (the table is the one
    /// place a user-facing default is written).
    fn boolean_or_default(&self, key: &str) -> bool {
        self.boolean(key).unwrap_or_else(|| match spec::spec(key) {
            Some(s) => match s.absent {
                Absent::Default(text) => s.kind.parse(text) == Ok(Value::Boolean(true)),
                _ => false,
            },
            None => false,
        })
    }

    fn filter(&self, key: &str) -> Option<FilterSetting> {
        match self.values.get(key) {
            Some(Value::Filter(f)) => Some(*f),
            _ => None,
        }
    }

    fn names(&self, key: &str) -> Option<&[String]> {
        match self.values.get(key) {
            Some(Value::Names(n)) => Some(n),
            _ => None,
        }
    }

    /// The value of a choice turned into its type by `parse`; a name of the table that `parse`
    /// does not know is reported as a bad value rather than ignored.
    fn choice<T>(
        &self,
        key: &str,
        parse: impl Fn(&str) -> Option<T>,
    ) -> Result<Option<T>, SettingsError> {
        match self.values.get(key) {
            Some(Value::Choice(name)) => parse(name)
                .map(Some)
                .ok_or_else(|| bad(key, name, "this build does not know the name".into())),
            _ => Ok(None),
        }
    }

    /// A number the table marks as required: checked present by `check`.
    fn required_number(&self, key: &'static str) -> Result<f64, SettingsError> {
        self.number(key).ok_or(SettingsError::Missing {
            key,
            hint: match spec::spec(key).map(|s| s.absent) {
                Some(Absent::Required { hint }) => hint,
                _ => "give it",
            },
        })
    }

    /// The table's rules: every required setting is present (in table order) and every number
    /// lies in its range.
    fn check(&self) -> Result<(), SettingsError> {
        for s in SPECS {
            match s.absent {
                Absent::Required { hint } if !self.values.contains_key(s.key) => {
                    return Err(SettingsError::Missing { key: s.key, hint });
                }
                _ => {}
            }
        }
        for s in SPECS {
            let given = match (s.kind, self.values.get(s.key)) {
                (Kind::Number(range), Some(Value::Number(x))) => Some((range, *x)),
                // A count beyond 2^53 is far outside every range; its f64 is exact enough here.
                (Kind::Count(range), Some(Value::Count(n))) => Some((range, *n as f64)),
                _ => None,
            };
            if let Some((range, x)) = given {
                range
                    .check(x)
                    .map_err(|e| bad(s.key, &spec::number_text(x), e))?;
            }
        }
        Ok(())
    }

    /// The typed options, or the first missing required setting or value out of range.
    ///
    /// Lengths arrive in micrometres and leave in metres, the viscosity in mPa s leaves in
    /// Pa s, the precision in per cent leaves as a fraction: the core works in SI units.
    pub fn resolve(
        &self,
    ) -> Result<(IngestOptions, RunConditions, AnalysisOptions), SettingsError> {
        self.check()?;
        let ingest = IngestOptions {
            format: self.choice("format", Format::parse_name)?,
            sample_rate_hz: self.number("sample_rate_hz"),
            unit: self.choice("units", parse_unit)?,
            channels: self.count("channels"),
            volts_per_count: self.number("volts_per_count"),
            time_tolerance: self
                .number("time_tolerance")
                .unwrap_or(DEFAULT_TIME_TOLERANCE),
            delimiter: self.choice("delimiter", Delimiter::parse_name)?,
            decimal_comma: self.boolean("decimal_comma"),
            datasets: self
                .names("dataset")
                .map(<[String]>::to_vec)
                .unwrap_or_default(),
            ..IngestOptions::default()
        };
        if ingest.delimiter == Some(Delimiter::Comma) && ingest.decimal_comma == Some(true) {
            return Err(bad(
                "decimal_comma",
                "true",
                "the comma cannot be both the delimiter and the decimal mark: give delimiter ; \
                 or leave decimal_comma out"
                    .to_string(),
            ));
        }
        let diameter_um = self.required_number("bead_diameter_um")?;
        let temperature_c = self.required_number("temperature_c")?;
        let mut conditions = RunConditions::new(diameter_um * 1e-6, temperature_c);
        conditions.bead_diameter_se_m = self.number("bead_diameter_se_um").unwrap_or(0.0) * 1e-6;
        conditions.temperature_se_c = self.number("temperature_se_c").unwrap_or(0.0);
        conditions.viscosity_pa_s = self.number("viscosity_mpa_s").map(|v| v * 1e-3);
        conditions.viscosity_se_pa_s = self.number("viscosity_se_mpa_s").unwrap_or(0.0) * 1e-3;
        conditions.height_m = self.number("height_um").map(|h| h * 1e-6);
        conditions.height_se_m = self.number("height_se_um").unwrap_or(0.0) * 1e-6;
        if let Some(rho) = self.choice("bead_material", parse_bead_material)? {
            conditions.bead_density_kg_per_m3 = rho;
        }
        if let Some(rho) = self.number("bead_density_kg_per_m3") {
            conditions.bead_density_kg_per_m3 = rho;
        }
        conditions.medium_density_kg_per_m3 = self.number("medium_density_kg_per_m3");
        let mut analysis = AnalysisOptions::default();
        analysis.fit_range.f_min_hz = self.number("fit_min_hz");
        analysis.fit_range.f_max_hz = self.number("fit_max_hz");
        if let Some(w) = self.count("windows") {
            analysis.n_windows = Some(w);
        }
        if let Some(f) = self.filter("detector_filter") {
            analysis.filter = f;
        }
        analysis.hydrodynamics = self.boolean_or_default("hydrodynamics");
        analysis.exposure_time_s = self.number("exposure_time_s");
        if let (Some(w), Some(fs)) = (analysis.exposure_time_s, ingest.sample_rate_hz) {
            // The same rule the calibration applies once the file's own rate is known.
            if w > crate::calibration::max_exposure_s(fs) {
                return Err(bad(
                    "exposure_time_s",
                    &w.to_string(),
                    format!(
                        "the exposure must fit within its frame: at most the frame interval 1/sample_rate_hz = {} s",
                        1.0 / fs
                    ),
                ));
            }
        }
        if let Some(m) = self.choice("noise_floor", parse_noise_floor)? {
            analysis.noise_floor = m;
        }
        if let Some(d) = self.choice("detrend", parse_detrend)? {
            analysis.detrend = d;
        }
        if let Some(a) = self.names("axial_axes") {
            analysis.axial_axes = a.to_vec();
        }
        if let Some(p) = self.boolean("principal_axes") {
            analysis.principal_axes = p;
        }
        if let Some(p) = self.number("precision_percent") {
            analysis.target_relative_precision = p / 100.0;
        }
        analysis.drive = self.drive()?;
        Ok((ingest, conditions, analysis))
    }
}

impl Settings {
    /// The options for reading a file given by the reading settings alone (`format`,
    /// `delimiter`, `decimal_comma`, `dataset`, and the sample rate, unit and volts per count
    /// when given), without the run conditions `resolve` requires: what `inspect` reads with.
    pub fn reading_options(&self) -> IngestOptions {
        IngestOptions {
            format: self.choice("format", Format::parse_name).ok().flatten(),
            sample_rate_hz: self.number("sample_rate_hz"),
            unit: self.choice("units", parse_unit).ok().flatten(),
            volts_per_count: self.number("volts_per_count"),
            delimiter: self
                .choice("delimiter", Delimiter::parse_name)
                .ok()
                .flatten(),
            decimal_comma: self.boolean("decimal_comma"),
            datasets: self
                .names("dataset")
                .map(<[String]>::to_vec)
                .unwrap_or_default(),
            ..IngestOptions::default()
        }
    }

    /// The stage drive: frequency and amplitude together, or neither; the other drive
    /// settings only with them (a standard error of zero, the stated default, is always
    /// accepted).
    fn drive(&self) -> Result<Option<Drive>, SettingsError> {
        let frequency = self.number("drive_frequency_hz");
        let amplitude = self.number("drive_amplitude_nm");
        let se = self.number("drive_amplitude_se_nm").unwrap_or(0.0);
        let (frequency_hz, amplitude_nm) = match (frequency, amplitude) {
            (Some(f), Some(a)) => (f, a),
            (Some(f), None) => {
                return Err(bad(
                    "drive_frequency_hz",
                    &f.to_string(),
                    "a stage drive needs its amplitude too: give drive_amplitude_nm".to_string(),
                ));
            }
            (None, Some(a)) => {
                return Err(bad(
                    "drive_amplitude_nm",
                    &a.to_string(),
                    "a stage drive needs its frequency too: give drive_frequency_hz".to_string(),
                ));
            }
            (None, None) => {
                for key in ["drive_axis", "drive_drag_to"] {
                    if let Some(names) = self.names(key) {
                        return Err(bad(
                            key,
                            &names.join(","),
                            "it applies only to a driven recording: give drive_frequency_hz and drive_amplitude_nm".to_string(),
                        ));
                    }
                }
                if se > 0.0 {
                    return Err(bad(
                        "drive_amplitude_se_nm",
                        &se.to_string(),
                        "it applies only to a driven recording: give drive_frequency_hz and drive_amplitude_nm".to_string(),
                    ));
                }
                return Ok(None);
            }
        };
        let axis = match self.names("drive_axis") {
            None => None,
            Some([one]) => Some(one.clone()),
            Some(many) => {
                return Err(bad(
                    "drive_axis",
                    &many.join(","),
                    "name one axis: the stage is driven along one axis at a time".to_string(),
                ));
            }
        };
        Ok(Some(Drive {
            frequency_hz,
            amplitude_m: amplitude_nm * 1e-9,
            amplitude_se_m: se * 1e-9,
            axis,
            drag_to: self
                .names("drive_drag_to")
                .map(<[String]>::to_vec)
                .unwrap_or_default(),
        }))
    }
}

#[cfg(test)]
mod tests;
