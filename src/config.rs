//! Service configuration, read from the environment in this one place and handed down as
//! typed values.
//!
//! Variables: `TRAPWISE_DATA_DIR` (default `./trapwise-data`: the SQLite file and the blob
//! folder), `TRAPWISE_BIND` (default `127.0.0.1:8080`), `DATABASE_URL` (default the SQLite file
//! under the data directory; `postgres://...` for a facility), `TRAPWISE_MAX_UPLOAD_BYTES`
//! (default 1 GiB), `TRAPWISE_MAX_CONCURRENT` (calibrations at once, default the number of
//! cores), `TRAPWISE_QUEUE` (calibrations waiting beyond those, default 4),
//! `TRAPWISE_REQUIRE_TOKENS` (`true` demands bearer tokens even on loopback),
//! `TRAPWISE_UPLOAD_IDLE_S` (longest pause inside a request, headers or body, default 60 s),
//! `TRAPWISE_MAX_UPLOADS` (uploads streaming to disk at once, default the calibrations running
//! plus waiting), `TRAPWISE_MAX_CONNECTIONS_PER_CLIENT` (default 32),
//! `TRAPWISE_TRUSTED_PROXIES` (comma-separated addresses of reverse proxies whose
//! `X-Forwarded-For` names the client, default none), `TRAPWISE_SHUTDOWN_GRACE_S` (how long a
//! stopping service lets requests in flight finish, default 30 s) and `TRAPWISE_LOG_FORMAT`
//! (`text` or `json`). Command-line flags of `serve` override the first two.

use std::net::{IpAddr, SocketAddr};
use std::path::PathBuf;

/// Default upload limit: 1 GiB.
pub const DEFAULT_MAX_UPLOAD_BYTES: u64 = 1 << 30;
/// Default number of calibrations that may wait for a free slot.
pub const DEFAULT_QUEUE: usize = 4;
/// Default longest pause inside an upload body, seconds.
pub const DEFAULT_UPLOAD_IDLE_S: u64 = 60;
/// Default number of connections (or, behind a trusted proxy, requests) one client address may
/// hold open at once: enough for a browser's six plus scripts uploading in parallel.
pub const DEFAULT_MAX_CONNECTIONS_PER_CLIENT: usize = 32;
/// Default grace period of a shutdown, seconds: requests in flight may finish within it,
/// connections still open after it are closed.
pub const DEFAULT_SHUTDOWN_GRACE_S: u64 = 30;
/// Default listening address: loopback only, so the service may run without tokens.
pub const DEFAULT_BIND: &str = "127.0.0.1:8080";
/// Default data directory.
pub const DEFAULT_DATA_DIR: &str = "./trapwise-data";

/// A configuration value that could not be used.
#[derive(Debug, thiserror::Error)]
pub enum ConfigError {
    /// A variable holds text of the wrong shape.
    #[error("environment variable {name}=`{value}` is not valid: {expected}")]
    BadValue {
        /// Name of the variable.
        name: &'static str,
        /// Its value.
        value: String,
        /// What was expected.
        expected: &'static str,
    },
}

/// Log line format.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum LogFormat {
    /// Human-readable lines.
    Text,
    /// One JSON object per line, for log collectors.
    Json,
}

/// Everything the service needs to start.
#[derive(Clone, Debug, PartialEq)]
pub struct Config {
    pub data_dir: PathBuf,
    pub bind: SocketAddr,
    /// `None`: the SQLite file `<data_dir>/trapwise.db`.
    pub database_url: Option<String>,
    pub max_upload_bytes: u64,
    pub max_concurrent: usize,
    pub queue: usize,
    pub require_tokens: bool,
    pub upload_idle_s: u64,
    /// Uploads streaming to disk at once; more are answered 503 before their body is read.
    pub max_uploads: usize,
    pub max_connections_per_client: usize,
    /// Peers whose `X-Forwarded-For` header is believed.
    pub trusted_proxies: Vec<IpAddr>,
    pub shutdown_grace_s: u64,
    pub log_format: LogFormat,
}

/// Parses a comma-separated list of IP addresses (blank: none).
fn parse_addresses(name: &'static str, value: Option<String>) -> Result<Vec<IpAddr>, ConfigError> {
    let Some(text) = value else {
        return Ok(Vec::new());
    };
    text.split(',')
        .map(str::trim)
        .filter(|s| !s.is_empty())
        .map(|s| {
            s.parse().map_err(|_| ConfigError::BadValue {
                name,
                value: text.clone(),
                expected: "comma-separated IP addresses such as 10.0.0.2,::1",
            })
        })
        .collect()
}

/// Rejects 0 for a variable that counts something the service cannot do without.
fn at_least_one(
    name: &'static str,
    value: usize,
    expected: &'static str,
) -> Result<usize, ConfigError> {
    if value == 0 {
        return Err(ConfigError::BadValue {
            name,
            value: "0".into(),
            expected,
        });
    }
    Ok(value)
}

fn parse<T: std::str::FromStr>(
    name: &'static str,
    value: Option<String>,
    default: T,
    expected: &'static str,
) -> Result<T, ConfigError> {
    match value {
        None => Ok(default),
        Some(v) if v.trim().is_empty() => Ok(default),
        Some(v) => v.trim().parse().map_err(|_| ConfigError::BadValue {
            name,
            value: v,
            expected,
        }),
    }
}

impl Config {
    /// Reads the process environment.
    pub fn from_env() -> Result<Self, ConfigError> {
        Self::from_lookup(|name| std::env::var(name).ok())
    }

    /// Reads configuration through `lookup` (the environment, or a map in tests).
    pub fn from_lookup(lookup: impl Fn(&str) -> Option<String>) -> Result<Self, ConfigError> {
        let cores = std::thread::available_parallelism().map_or(1, |n| n.get());
        let bind = parse(
            "TRAPWISE_BIND",
            lookup("TRAPWISE_BIND"),
            SocketAddr::from(([127, 0, 0, 1], 8080)),
            "an address and port such as 127.0.0.1:8080 or 0.0.0.0:8080",
        )?;
        let log_format = match lookup("TRAPWISE_LOG_FORMAT").as_deref().map(str::trim) {
            None | Some("") | Some("text") => LogFormat::Text,
            Some("json") => LogFormat::Json,
            Some(other) => {
                return Err(ConfigError::BadValue {
                    name: "TRAPWISE_LOG_FORMAT",
                    value: other.to_string(),
                    expected: "text or json",
                });
            }
        };
        let require_tokens = match lookup("TRAPWISE_REQUIRE_TOKENS")
            .map(|v| v.trim().to_ascii_lowercase())
            .as_deref()
        {
            None | Some("") | Some("false") | Some("0") | Some("no") => false,
            Some("true") | Some("1") | Some("yes") => true,
            Some(other) => {
                return Err(ConfigError::BadValue {
                    name: "TRAPWISE_REQUIRE_TOKENS",
                    value: other.to_string(),
                    expected: "true or false",
                });
            }
        };
        let max_concurrent = parse(
            "TRAPWISE_MAX_CONCURRENT",
            lookup("TRAPWISE_MAX_CONCURRENT"),
            cores,
            "a whole number of calibrations, at least 1",
        )?;
        if max_concurrent == 0 {
            return Err(ConfigError::BadValue {
                name: "TRAPWISE_MAX_CONCURRENT",
                value: "0".into(),
                expected: "a whole number of calibrations, at least 1",
            });
        }
        let queue = parse(
            "TRAPWISE_QUEUE",
            lookup("TRAPWISE_QUEUE"),
            DEFAULT_QUEUE,
            "a whole number of waiting calibrations",
        )?;
        let uploads_expected = "a whole number of uploads, at least 1";
        let max_uploads = parse(
            "TRAPWISE_MAX_UPLOADS",
            lookup("TRAPWISE_MAX_UPLOADS"),
            max_concurrent + queue,
            uploads_expected,
        )?;
        let connections_expected = "a whole number of connections, at least 1";
        let max_connections_per_client = parse(
            "TRAPWISE_MAX_CONNECTIONS_PER_CLIENT",
            lookup("TRAPWISE_MAX_CONNECTIONS_PER_CLIENT"),
            DEFAULT_MAX_CONNECTIONS_PER_CLIENT,
            connections_expected,
        )?;
        Ok(Config {
            data_dir: lookup("TRAPWISE_DATA_DIR")
                .filter(|v| !v.trim().is_empty())
                .map_or_else(|| PathBuf::from(DEFAULT_DATA_DIR), PathBuf::from),
            bind,
            database_url: lookup("DATABASE_URL").filter(|v| !v.trim().is_empty()),
            max_upload_bytes: parse(
                "TRAPWISE_MAX_UPLOAD_BYTES",
                lookup("TRAPWISE_MAX_UPLOAD_BYTES"),
                DEFAULT_MAX_UPLOAD_BYTES,
                "a whole number of bytes such as 1073741824",
            )?,
            max_concurrent,
            queue,
            require_tokens,
            upload_idle_s: parse(
                "TRAPWISE_UPLOAD_IDLE_S",
                lookup("TRAPWISE_UPLOAD_IDLE_S"),
                DEFAULT_UPLOAD_IDLE_S,
                "a whole number of seconds",
            )?,
            max_uploads: at_least_one("TRAPWISE_MAX_UPLOADS", max_uploads, uploads_expected)?,
            max_connections_per_client: at_least_one(
                "TRAPWISE_MAX_CONNECTIONS_PER_CLIENT",
                max_connections_per_client,
                connections_expected,
            )?,
            trusted_proxies: parse_addresses(
                "TRAPWISE_TRUSTED_PROXIES",
                lookup("TRAPWISE_TRUSTED_PROXIES"),
            )?,
            shutdown_grace_s: parse(
                "TRAPWISE_SHUTDOWN_GRACE_S",
                lookup("TRAPWISE_SHUTDOWN_GRACE_S"),
                DEFAULT_SHUTDOWN_GRACE_S,
                "a whole number of seconds",
            )?,
            log_format,
        })
    }

    /// The database URL: the configured one, or the SQLite file under the data directory.
    pub fn database_url(&self) -> String {
        self.database_url.clone().unwrap_or_else(|| {
            format!(
                "sqlite://{}?mode=rwc",
                self.data_dir.join("trapwise.db").display()
            )
        })
    }

    /// Whether requests must carry a bearer token: always off loopback, on request on it.
    pub fn tokens_required(&self) -> bool {
        self.require_tokens || !self.bind.ip().is_loopback()
    }
}

#[cfg(test)]
#[path = "config_tests.rs"]
mod tests;
