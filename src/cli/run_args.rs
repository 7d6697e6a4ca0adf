//! The run settings as command-line flags of `calibrate` and `upload`, made from the settings
//! table (`settings::SPECS`) with clap's builder API: one flag per row, its help from the row,
//! its value checked by the row's kind (so a malformed value is a usage error that names the
//! flag), and the values gathered through `Settings::apply`, the same parser as the HTTP
//! fields. Ranges are checked later by `Settings::resolve`, as for an upload.

use crate::settings::{Flag, Kind, SPECS, SettingSpec, Settings};
use clap::error::ErrorKind;
use clap::{Arg, ArgAction, ArgMatches, Args, Command, FromArgMatches};

/// Run conditions and analysis options shared by `calibrate` and `upload`.
#[derive(Debug, Clone, Default)]
pub struct RunArgs {
    settings: Settings,
}

impl RunArgs {
    /// The settings given on the command line.
    pub fn settings(&self) -> &Settings {
        &self.settings
    }
}

/// The short help of a row's flag (`-h`): label, unit and the default or "required".
fn short_help(spec: &SettingSpec) -> String {
    let tail = match spec.default_text() {
        Some(d) => format!("default: {d}"),
        None => "required".to_string(),
    };
    match spec.flag {
        Flag::Value { .. } => format!("{}; {tail}", spec.label_with_unit()),
        Flag::Switch { sets, .. } => format!("Sets {} to {sets}; {tail}", spec.key),
    }
}

/// The long help of a row's flag (`--help`): the row's whole description.
fn long_help(spec: &SettingSpec) -> String {
    match spec.flag {
        Flag::Value { .. } => format!("{} [field: {}]", spec.describe(), spec.key),
        Flag::Switch { sets, .. } => {
            format!("Sets {} to {sets}. {}", spec.key, spec.describe())
        }
    }
}

/// The clap argument of a row; its id is the setting's key. A boolean row's flag given bare
/// means true, so scripts written when such a flag was a switch (`--hydrodynamics`) still run.
fn arg(spec: &'static SettingSpec) -> Arg {
    let arg = Arg::new(spec.key)
        .help(short_help(spec))
        .long_help(long_help(spec));
    match spec.flag {
        Flag::Value { long, value_name } => {
            let arg = arg
                .long(long)
                .value_name(value_name)
                .required(spec.required())
                .allow_negative_numbers(true)
                .action(ArgAction::Set)
                .value_parser(move |text: &str| spec.kind.parse(text).map(|_| text.to_string()));
            if spec.kind == Kind::Boolean {
                arg.num_args(0..=1).default_missing_value("true")
            } else if spec.repeatable() {
                arg.action(ArgAction::Append)
            } else {
                arg
            }
        }
        Flag::Switch { long, .. } => arg.long(long).action(ArgAction::SetTrue),
    }
}

impl Args for RunArgs {
    fn augment_args(cmd: Command) -> Command {
        cmd.args(SPECS.iter().map(arg))
    }

    fn augment_args_for_update(cmd: Command) -> Command {
        Self::augment_args(cmd)
    }
}

impl FromArgMatches for RunArgs {
    fn from_arg_matches(matches: &ArgMatches) -> Result<Self, clap::Error> {
        let mut args = RunArgs::default();
        args.update_from_arg_matches(matches)?;
        Ok(args)
    }

    fn update_from_arg_matches(&mut self, matches: &ArgMatches) -> Result<(), clap::Error> {
        let internal = |e: &dyn std::fmt::Display| clap::Error::raw(ErrorKind::ValueValidation, e);
        for spec in SPECS {
            let text = match spec.flag {
                Flag::Value { .. } if spec.repeatable() => matches
                    .try_get_many::<String>(spec.key)
                    .map_err(|e| internal(&e))?
                    .map(|names| names.cloned().collect::<Vec<_>>().join(",")),
                Flag::Value { .. } => matches
                    .try_get_one::<String>(spec.key)
                    .map_err(|e| internal(&e))?
                    .cloned(),
                Flag::Switch { sets, .. } => matches
                    .try_get_one::<bool>(spec.key)
                    .map_err(|e| internal(&e))?
                    .is_some_and(|on| *on)
                    .then(|| sets.to_string()),
            };
            if let Some(text) = text {
                self.settings
                    .apply(spec.key, &text)
                    .map_err(|e| internal(&e))?;
            }
        }
        Ok(())
    }
}
