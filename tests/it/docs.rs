//! The README stays in step with the code: its table of run settings is the settings table
//! (`trapwise::settings::SPECS`) written as Markdown, checked here like a snapshot (set
//! TRAPWISE_UPDATE_SNAPSHOTS=1 to rewrite it after changing the table).

use std::path::Path;
use trapwise::settings::{Flag, Kind, SPECS, SettingSpec, number_text};

/// The lines that enclose the generated table in README.md.
const BEGIN: &str =
    "<!-- settings table: generated from src/settings/spec.rs by tests/it/docs.rs -->";
const END: &str = "<!-- end of the settings table -->";

/// Markdown table cells cannot hold a bare `|`.
fn cell(text: &str) -> String {
    text.replace('|', "\\|")
}

/// What a row's value must be, in words.
fn value_words(spec: &SettingSpec) -> String {
    match spec.kind {
        Kind::Number(range) => range.describe(),
        Kind::Count(range) => format!(
            "whole number from {} to {}",
            number_text(range.min),
            number_text(range.max)
        ),
        Kind::Boolean => "true or false".to_string(),
        Kind::Choice(c) => {
            let names: Vec<String> = c.names.iter().map(|n| format!("`{n}`")).collect();
            format!("one of {}", names.join(", "))
        }
        Kind::Filter => "`none`, `fit`, `fit:F3DB:ALPHA` or `F3DB:ALPHA`".to_string(),
        Kind::Names => "comma-separated names".to_string(),
    }
}

/// The settings table as Markdown, between its markers.
fn settings_table() -> String {
    let mut out = format!("{BEGIN}\n");
    out.push_str("| field | flag | unit | value | default | meaning |\n");
    out.push_str("|---|---|---|---|---|---|\n");
    for spec in SPECS {
        let flag = match spec.flag {
            Flag::Value { long, value_name } => format!("`--{long} {value_name}`"),
            Flag::Switch { long, sets } => format!("`--{long}` (sets `{sets}`)"),
        };
        let default = spec.default_text().unwrap_or("required");
        out.push_str(&format!(
            "| `{}` | {} | {} | {} | {} | {} |\n",
            spec.key,
            cell(&flag),
            cell(spec.unit),
            cell(&value_words(spec)),
            cell(default),
            cell(spec.help)
        ));
    }
    out.push_str(END);
    out
}

#[test]
fn the_readme_lists_the_settings_table() {
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("README.md");
    let readme = std::fs::read_to_string(&path).expect("README.md");
    let (Some(start), Some(end)) = (readme.find(BEGIN), readme.find(END)) else {
        panic!("README.md lacks the lines `{BEGIN}` and `{END}`")
    };
    let current = &readme[start..end + END.len()];
    let expected = settings_table();
    if std::env::var_os("TRAPWISE_UPDATE_SNAPSHOTS").is_some() {
        let updated = format!(
            "{}{expected}{}",
            &readme[..start],
            &readme[end + END.len()..]
        );
        std::fs::write(&path, updated).expect("write README.md");
        return;
    }
    assert!(
        current == expected,
        "README.md's settings table is out of date; rerun with TRAPWISE_UPDATE_SNAPSHOTS=1\n\
         --- README\n{current}\n--- from the table\n{expected}"
    );
    // Every key and flag appears in the table exactly as the table names them.
    for spec in SPECS {
        assert!(
            current.contains(&format!("| `{}` |", spec.key)),
            "{}",
            spec.key
        );
        assert!(
            current.contains(&format!("`--{}", spec.flag.long())),
            "{}",
            spec.key
        );
    }
}
