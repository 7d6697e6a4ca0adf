//! `trapwise inspect FILE`: what a file holds and how trapwise would read it (format, cell
//! layout and columns, arrays with shapes and element types, the datasets that would be read)
//! and which settings it lacks, with the flags that supply them; `--json` for scripts.
//!
//! The reading flags are those of the settings table's rows for reading (`format`,
//! `delimiter`, `decimal_comma`, `dataset`), parsed by the same table, so that a file can be
//! inspected as `calibrate` would read it without giving the run conditions.

use super::{EXIT_BAD_INPUT, Failure, open_file};
use crate::ingest::{self, IngestOptions};
use crate::report;
use crate::settings::Settings;
use clap::Args;
use std::io::Write;
use std::path::PathBuf;

/// Arguments of `inspect`.
#[derive(Debug, Args)]
pub struct InspectArgs {
    /// The file to look into.
    pub file: PathBuf,
    /// Read the file as this format (as `calibrate --format`).
    #[arg(long, value_name = "FORMAT")]
    pub format: Option<String>,
    /// Cell delimiter of a text table (as `calibrate --delimiter`).
    #[arg(long, value_name = "DELIMITER")]
    pub delimiter: Option<String>,
    /// Whether numbers use a decimal comma (as `calibrate --decimal-comma`).
    #[arg(long, value_name = "BOOL", num_args = 0..=1, default_missing_value = "true")]
    pub decimal_comma: Option<String>,
    /// A dataset to read, once per axis (as `calibrate --dataset`).
    #[arg(long, value_name = "NAME")]
    pub dataset: Vec<String>,
    /// Print a JSON document instead of text.
    #[arg(long)]
    pub json: bool,
}

/// The reading options the flags give, parsed by the settings table.
fn options(args: &InspectArgs) -> Result<IngestOptions, Failure> {
    let mut settings = Settings::default();
    let given = [
        ("format", args.format.clone()),
        ("delimiter", args.delimiter.clone()),
        ("decimal_comma", args.decimal_comma.clone()),
        ("dataset", Some(args.dataset.join(","))),
    ];
    for (key, value) in given {
        if let Some(value) = value {
            settings
                .apply(key, &value)
                .map_err(|e| Failure::new(EXIT_BAD_INPUT, e))?;
        }
    }
    Ok(settings.reading_options())
}

pub(super) fn run(args: &InspectArgs) -> Result<u8, Failure> {
    let options = options(args)?;
    let (mut file, _) = open_file(&args.file)?;
    let name = args
        .file
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_else(|| args.file.display().to_string());
    let found =
        ingest::inspect(&name, &mut file, &options).map_err(|e| Failure::new(EXIT_BAD_INPUT, e))?;
    let text = if args.json {
        let doc = report::inspection_json(&name, &found);
        serde_json::to_string_pretty(&doc).map_err(|e| Failure::new(1, e))? + "\n"
    } else {
        report::inspection_text(&name, &found)
    };
    std::io::stdout()
        .lock()
        .write_all(text.as_bytes())
        .map_err(|e| Failure::new(1, e))?;
    Ok(0)
}
