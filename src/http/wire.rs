//! The JSON documents of the API (other than the engine's `CalibrationReport`, reused as is)
//! and their conversion from stored rows.
//!
//! A calibration document is `{id, created_at_ms, instrument, trap, note, axes_labels, links,
//! result}` where `result` is the engine's report (schema `trapwise.calibration/1`) without
//! plot arrays, byte-for-byte the numbers `trapwise calibrate --json --no-plots` prints.
//! The settings document is the settings table (`settings::SPECS`) as JSON.

use super::problem::AppError;
use crate::report::{AcfPlot, CalibrationReport, HistogramPlot, SpectrumPlot, ValueSe};
use crate::settings::{Flag, Kind, SettingSpec};
use crate::store::StoredCalibration;
use serde::{Deserialize, Serialize};
use utoipa::ToSchema;

/// The API prefix.
pub const API: &str = "/api/v1";

/// Links of a calibration.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, ToSchema)]
pub struct Links {
    /// This document.
    #[serde(rename = "self")]
    pub self_: String,
    /// The raw upload, byte-identical.
    pub recording: String,
    /// Spectrum, autocorrelation and histogram arrays.
    pub plots: String,
    /// The history of this calibration's trap.
    pub history: String,
}

/// One stored calibration.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, ToSchema)]
pub struct CalibrationDocument {
    /// UUID v7 (time-ordered).
    pub id: String,
    /// When the calibration was stored, milliseconds since the Unix epoch.
    pub created_at_ms: i64,
    pub instrument: String,
    pub trap: String,
    pub note: String,
    /// Axis names as labelled by the uploader (may be empty).
    pub axes_labels: Vec<String>,
    pub links: Links,
    /// The engine's calibration report, schema `trapwise.calibration/1`, without plot arrays.
    #[schema(value_type = Object)]
    pub result: CalibrationReport,
}

/// A page of calibrations, newest first.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, ToSchema)]
pub struct CalibrationPage {
    pub items: Vec<CalibrationDocument>,
    /// Opaque cursor for the next page, absent on the last page.
    pub next_cursor: Option<String>,
    /// The URL of the next page, absent on the last page.
    pub next: Option<String>,
}

/// Plot arrays of one axis.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, ToSchema)]
pub struct AxisPlots {
    pub axis: String,
    /// Blocked one-sided spectrum and fitted model (unit^2/Hz), residuals in standard errors;
    /// null when the spectral fit failed.
    #[schema(value_type = Option<Object>)]
    pub spectrum: Option<SpectrumPlot>,
    /// Autocovariance (unit^2) against lag (s) with the fitted model; null when that fit failed.
    #[schema(value_type = Option<Object>)]
    pub autocorrelation: Option<AcfPlot>,
    /// Position histogram with the equipartition Gaussian; null when the variance failed.
    #[schema(value_type = Option<Object>)]
    pub histogram: Option<HistogramPlot>,
}

/// Plot arrays of a calibration.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, ToSchema)]
pub struct PlotsDocument {
    pub calibration_id: String,
    pub axes: Vec<AxisPlots>,
}

/// A value with its standard error.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize, ToSchema)]
pub struct ValueWithSe {
    pub value: f64,
    pub se: f64,
}

impl From<ValueSe> for ValueWithSe {
    fn from(v: ValueSe) -> Self {
        ValueWithSe {
            value: v.value,
            se: v.se,
        }
    }
}

/// One calibration of one axis in a trap's history.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, ToSchema)]
pub struct HistoryPoint {
    pub calibration_id: String,
    pub created_at_ms: i64,
    /// Consensus stiffness kappa, pN/nm.
    pub stiffness_pn_per_nm: ValueWithSe,
    /// Detector sensitivity beta, nm/V; null for nanometre recordings.
    pub sensitivity_nm_per_v: Option<ValueWithSe>,
    /// Corner frequency fc, Hz; null when the spectral fit failed.
    pub corner_frequency_hz: Option<ValueWithSe>,
    /// `consistent`, `inconsistent`, `unchecked` or `unreliable`.
    pub verdict: String,
}

/// The history of one axis.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, ToSchema)]
pub struct AxisHistory {
    pub axis: String,
    /// Oldest first.
    pub points: Vec<HistoryPoint>,
}

/// The history of one trap: kappa, beta and fc per axis over time.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, ToSchema)]
pub struct TrapHistory {
    pub instrument: String,
    pub trap: String,
    pub axes: Vec<AxisHistory>,
}

/// One trap of the lab, with how many calibrations it has and over what time.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, ToSchema)]
pub struct TrapEntry {
    pub instrument: String,
    pub trap: String,
    /// Number of stored calibrations.
    pub calibrations: i64,
    /// When the first and the latest were stored, ms since the Unix epoch.
    pub first_at_ms: i64,
    pub latest_at_ms: i64,
    /// The trap's history.
    pub history: String,
}

/// Every trap of the lab that has calibrations, by instrument then trap.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, ToSchema)]
pub struct TrapList {
    pub traps: Vec<TrapEntry>,
}

/// The health check's answer.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, ToSchema)]
pub struct Health {
    /// `ok`.
    pub status: String,
    /// `sqlite` or `postgres`.
    pub database: String,
}

/// One run setting, as the settings table (`settings::SPECS`) states it.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, ToSchema)]
pub struct SettingEntry {
    /// The form field and query parameter of an upload (`bead_diameter_um`).
    pub key: String,
    /// A short name for people.
    pub label: String,
    /// What the text must be: `number`, `count` (positive whole number), `boolean`
    /// (true/false), `choice` (one of `choices`), `filter` (none, fit, fit:F3DB:ALPHA or
    /// F3DB:ALPHA) or `names` (comma-separated).
    pub kind: String,
    /// The unit of a number (`µm`); empty when there is none.
    pub unit: String,
    /// What the setting does.
    pub help: String,
    /// Whether an upload must give it.
    pub required: bool,
    /// What applies when it is not given (a value or a behaviour in words); null when required.
    pub default: Option<String>,
    /// The canonical names of a choice (other spellings of them are accepted too).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub choices: Option<Vec<String>>,
    /// The plausible range of a number or count in words (`a number from 1 to 1e9`); values
    /// outside it are refused with 400 naming the setting.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub range: Option<String>,
    /// The smallest accepted value of a number or count, in its unit.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub minimum: Option<f64>,
    /// The largest accepted value of a number or count, in its unit.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub maximum: Option<f64>,
    /// A valid value, other than the default.
    pub example: String,
    /// The command-line flag of `calibrate` and `upload` (`--bead-diameter UM`, or a bare
    /// switch such as `--linear-detrend`).
    pub flag: String,
}

/// Every run setting an upload takes, in the order they are listed to people.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, ToSchema)]
pub struct SettingsDocument {
    pub settings: Vec<SettingEntry>,
}

impl From<&SettingSpec> for SettingEntry {
    fn from(spec: &SettingSpec) -> Self {
        let range = match spec.kind {
            Kind::Number(range) | Kind::Count(range) => Some(range),
            _ => None,
        };
        SettingEntry {
            key: spec.key.into(),
            label: spec.label.into(),
            kind: spec.kind.name().into(),
            unit: spec.unit.into(),
            help: spec.help.into(),
            required: spec.required(),
            default: spec.default_text().map(Into::into),
            choices: spec
                .choices()
                .map(|c| c.iter().map(|n| (*n).to_string()).collect()),
            range: range.map(|r| r.describe()),
            minimum: range.map(|r| r.min),
            maximum: range.map(|r| r.max),
            example: spec.example.into(),
            flag: match spec.flag {
                Flag::Value { long, value_name } => format!("--{long} {value_name}"),
                Flag::Switch { long, .. } => format!("--{long}"),
            },
        }
    }
}

impl SettingsDocument {
    /// The document of a settings table.
    pub fn from_table(specs: &[SettingSpec]) -> Self {
        SettingsDocument {
            settings: specs.iter().map(SettingEntry::from).collect(),
        }
    }
}

/// Percent-encodes one path segment (RFC 3986 section 2: unreserved characters stay).
pub fn encode_segment(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    for b in s.bytes() {
        if b.is_ascii_alphanumeric() || matches!(b, b'-' | b'.' | b'_' | b'~') {
            out.push(char::from(b));
        } else {
            out.push_str(&format!("%{b:02X}"));
        }
    }
    out
}

/// The history URL of a trap.
pub fn history_url(instrument: &str, trap: &str) -> String {
    format!(
        "{API}/instruments/{}/traps/{}/history",
        encode_segment(instrument),
        encode_segment(trap)
    )
}

/// Parses a stored report.
pub fn stored_report(row: &StoredCalibration) -> Result<CalibrationReport, AppError> {
    serde_json::from_str(&row.result_json).map_err(|e| {
        AppError::internal(format!(
            "stored calibration {}: result_json does not decode: {e}",
            row.id
        ))
    })
}

impl CalibrationDocument {
    /// The document of a stored row.
    pub fn from_stored(row: &StoredCalibration) -> Result<Self, AppError> {
        let base = format!("{API}/calibrations/{}", row.id);
        Ok(CalibrationDocument {
            id: row.id.clone(),
            created_at_ms: row.created_at_ms,
            instrument: row.instrument.clone(),
            trap: row.trap.clone(),
            note: row.note.clone(),
            axes_labels: row.axes_labels.clone(),
            links: Links {
                recording: format!("{base}/recording"),
                plots: format!("{base}/plots"),
                history: history_url(&row.instrument, &row.trap),
                self_: base,
            },
            result: stored_report(row)?,
        })
    }
}
