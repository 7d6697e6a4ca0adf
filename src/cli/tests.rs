//! Unit tests of the command-line definition: clap's own consistency checks (no two flags of a
//! subcommand clash, e.g. `upload`'s labels against the flattened run conditions) and the
//! parsing of the service subcommands.

use super::{Cli, Command, TokenAction};
use clap::{CommandFactory, Parser};

#[track_caller]
fn check(args: &[&str]) -> Command {
    match Cli::try_parse_from(args) {
        Ok(cli) => cli.command,
        Err(e) => panic!("{args:?} did not parse: {e}"),
    }
}

#[test]
fn the_cli_definition_passes_clap_debug_assertions() {
    Cli::command().debug_assert();
}

#[test]
fn serve_upload_and_token_parse_their_arguments() {
    match check(&[
        "trapwise",
        "serve",
        "--bind",
        "0.0.0.0:9000",
        "--data-dir",
        "/srv/tw",
    ]) {
        Command::Serve(a) => {
            assert_eq!(
                a.bind.map(|b| b.to_string()).as_deref(),
                Some("0.0.0.0:9000")
            );
            assert_eq!(a.data_dir.as_deref(), Some(std::path::Path::new("/srv/tw")));
        }
        other => panic!("parsed as {other:?}"),
    }
    match check(&[
        "trapwise",
        "upload",
        "run.csv",
        "--server",
        "http://h:1",
        "--instrument",
        "a",
        "--trap",
        "b",
        "--bead-diameter",
        "1",
        "--temperature",
        "25",
        "--axes",
        "x,y",
    ]) {
        Command::Upload(a) => {
            assert_eq!((a.instrument.as_str(), a.trap.as_str()), ("a", "b"));
            assert_eq!(a.axes.as_deref(), Some("x,y"));
            assert_eq!(a.run.bead_diameter, 1.0);
        }
        other => panic!("parsed as {other:?}"),
    }
    match check(&["trapwise", "token", "create", "--lab", "optics"]) {
        Command::Token(a) => {
            assert!(matches!(a.action, TokenAction::Create { ref lab } if lab == "optics"))
        }
        other => panic!("parsed as {other:?}"),
    }
}

#[test]
fn upload_without_instrument_or_trap_is_a_usage_error() {
    let missing = Cli::try_parse_from([
        "trapwise",
        "upload",
        "run.csv",
        "--server",
        "http://h:1",
        "--bead-diameter",
        "1",
        "--temperature",
        "25",
    ]);
    assert!(missing.is_err());
}
