//! Unit tests of the configuration: documented defaults, overrides, and errors naming the
//! variable.

use super::{Config, ConfigError, LogFormat};
use std::collections::HashMap;

fn from(pairs: &[(&str, &str)]) -> Result<Config, ConfigError> {
    let map: HashMap<String, String> = pairs
        .iter()
        .map(|(k, v)| (k.to_string(), v.to_string()))
        .collect();
    Config::from_lookup(|name| map.get(name).cloned())
}

#[track_caller]
fn check_error(pairs: &[(&str, &str)], variable: &str) {
    match from(pairs) {
        Err(e) => assert!(e.to_string().contains(variable), "{e}"),
        Ok(c) => panic!("{pairs:?} was accepted as {c:?}"),
    }
}

#[test]
fn empty_environment_gives_the_documented_defaults() {
    let config = from(&[]).unwrap_or_else(|e| panic!("{e}"));
    assert_eq!(config.bind.to_string(), "127.0.0.1:8080");
    assert_eq!(config.data_dir, std::path::PathBuf::from("./trapwise-data"));
    assert_eq!(config.max_upload_bytes, 1_073_741_824);
    assert_eq!(config.queue, 4);
    assert_eq!(config.upload_idle_s, 60);
    assert!(config.max_concurrent >= 1);
    assert_eq!(config.max_uploads, config.max_concurrent + 4);
    assert_eq!(config.max_connections_per_client, 32);
    assert!(config.trusted_proxies.is_empty());
    assert_eq!(config.shutdown_grace_s, 30);
    assert_eq!(config.log_format, LogFormat::Text);
    assert!(!config.tokens_required());
    assert_eq!(
        config.database_url(),
        "sqlite://./trapwise-data/trapwise.db?mode=rwc"
    );
}

#[test]
fn any_address_off_loopback_requires_tokens() {
    let open = from(&[("TRAPWISE_BIND", "0.0.0.0:9000")]).unwrap_or_else(|e| panic!("{e}"));
    assert!(open.tokens_required());
    let v6 = from(&[("TRAPWISE_BIND", "[::1]:9000")]).unwrap_or_else(|e| panic!("{e}"));
    assert!(!v6.tokens_required());
    let forced = from(&[("TRAPWISE_REQUIRE_TOKENS", "true")]).unwrap_or_else(|e| panic!("{e}"));
    assert!(forced.tokens_required());
}

#[test]
fn variables_override_the_defaults() {
    let config = from(&[
        ("TRAPWISE_DATA_DIR", "/srv/trapwise"),
        ("DATABASE_URL", "postgres://trapwise@db/trapwise"),
        ("TRAPWISE_MAX_UPLOAD_BYTES", "1000"),
        ("TRAPWISE_MAX_CONCURRENT", "3"),
        ("TRAPWISE_QUEUE", "0"),
        ("TRAPWISE_LOG_FORMAT", "json"),
        ("TRAPWISE_MAX_UPLOADS", "5"),
        ("TRAPWISE_MAX_CONNECTIONS_PER_CLIENT", "2"),
        ("TRAPWISE_TRUSTED_PROXIES", " 10.0.0.2, ::1 "),
        ("TRAPWISE_SHUTDOWN_GRACE_S", "7"),
    ])
    .unwrap_or_else(|e| panic!("{e}"));
    assert_eq!(config.max_uploads, 5);
    assert_eq!(config.max_connections_per_client, 2);
    let proxies: Vec<String> = config
        .trusted_proxies
        .iter()
        .map(ToString::to_string)
        .collect();
    assert_eq!(proxies, ["10.0.0.2", "::1"]);
    assert_eq!(config.shutdown_grace_s, 7);
    assert_eq!(config.database_url(), "postgres://trapwise@db/trapwise");
    assert_eq!(config.max_upload_bytes, 1000);
    assert_eq!((config.max_concurrent, config.queue), (3, 0));
    assert_eq!(config.log_format, LogFormat::Json);
}

#[test]
fn malformed_values_name_their_variable() {
    check_error(&[("TRAPWISE_BIND", "localhost")], "TRAPWISE_BIND");
    check_error(
        &[("TRAPWISE_MAX_UPLOAD_BYTES", "1GiB")],
        "TRAPWISE_MAX_UPLOAD_BYTES",
    );
    check_error(
        &[("TRAPWISE_MAX_CONCURRENT", "0")],
        "TRAPWISE_MAX_CONCURRENT",
    );
    check_error(&[("TRAPWISE_QUEUE", "-1")], "TRAPWISE_QUEUE");
    check_error(
        &[("TRAPWISE_UPLOAD_IDLE_S", "1m")],
        "TRAPWISE_UPLOAD_IDLE_S",
    );
    check_error(&[("TRAPWISE_LOG_FORMAT", "xml")], "TRAPWISE_LOG_FORMAT");
    check_error(&[("TRAPWISE_MAX_UPLOADS", "0")], "TRAPWISE_MAX_UPLOADS");
    check_error(
        &[("TRAPWISE_MAX_CONNECTIONS_PER_CLIENT", "0")],
        "TRAPWISE_MAX_CONNECTIONS_PER_CLIENT",
    );
    check_error(
        &[("TRAPWISE_TRUSTED_PROXIES", "10.0.0.2,proxy.lan")],
        "TRAPWISE_TRUSTED_PROXIES",
    );
    check_error(
        &[("TRAPWISE_SHUTDOWN_GRACE_S", "half a minute")],
        "TRAPWISE_SHUTDOWN_GRACE_S",
    );
    check_error(
        &[("TRAPWISE_REQUIRE_TOKENS", "maybe")],
        "TRAPWISE_REQUIRE_TOKENS",
    );
}
