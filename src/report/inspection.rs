//! The inspection of a file (`ingest::Inspection`) as the JSON document of
//! `trapwise inspect --json` and `POST /api/v1/inspect`, and as the text `inspect` prints.
//!
//! Each missing setting is named by its key (the HTTP field) and its command-line flag, both
//! taken from the settings table, so the advice follows the table.

use crate::ingest::Inspection;
use crate::settings::spec;
use serde_json::{Value, json};

/// The flag that supplies a setting: `--sample-rate HZ`.
fn flag_of(key: &str) -> String {
    match spec::spec(key).map(|s| s.flag) {
        Some(spec::Flag::Value { long, value_name }) => format!("--{long} {value_name}"),
        Some(spec::Flag::Switch { long, .. }) => format!("--{long}"),
        None => key.to_string(),
    }
}

/// The JSON document of an inspection of `file_name`.
pub fn inspection_json(file_name: &str, found: &Inspection) -> Value {
    json!({
        "file_name": file_name,
        "format": found.format.name(),
        "gzip": found.gzip,
        "layout": found.layout.map(|(delimiter, decimal_comma)| json!({
            "delimiter": delimiter,
            "decimal_comma": decimal_comma,
        })),
        "columns": found.columns.iter().map(|c| json!({
            "label": c.label,
            "role": c.role,
        })).collect::<Vec<_>>(),
        "datasets": found.datasets.iter().map(|d| json!({
            "name": d.name,
            "shape": d.shape,
            "dtype": d.dtype,
            "readable": d.readable,
        })).collect::<Vec<_>>(),
        "chosen": found.chosen,
        "missing": found.missing.iter().map(|key| json!({
            "field": key,
            "flag": flag_of(key),
        })).collect::<Vec<_>>(),
        "problem": found.problem,
    })
}

/// The inspection as lines of text for people.
pub fn inspection_text(file_name: &str, found: &Inspection) -> String {
    let mut lines = vec![format!(
        "{file_name}: {}{}",
        found.format.name(),
        if found.gzip { ", gzip-compressed" } else { "" }
    )];
    if let Some((delimiter, decimal_comma)) = found.layout {
        let mark = if decimal_comma { "comma" } else { "point" };
        lines.push(format!("cells: {delimiter}-separated, decimal {mark}"));
    }
    for column in &found.columns {
        lines.push(format!("column '{}': {}", column.label, column.role));
    }
    for dataset in &found.datasets {
        let name = if dataset.name.is_empty() {
            "array".to_string()
        } else {
            format!("dataset '{}'", dataset.name)
        };
        let readable = if dataset.readable {
            ""
        } else {
            " (not readable)"
        };
        lines.push(format!(
            "{name}: shape {} dtype {}{readable}",
            dataset.shape, dataset.dtype
        ));
    }
    if !found.chosen.is_empty() {
        lines.push(format!("reads: {}", found.chosen.join(", ")));
    }
    for key in &found.missing {
        lines.push(format!("missing: {key} (give {})", flag_of(key)));
    }
    if let Some(problem) = &found.problem {
        lines.push(format!("problem: {problem}"));
    }
    lines.join("\n") + "\n"
}
