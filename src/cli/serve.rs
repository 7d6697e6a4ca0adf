//! `trapwise serve`: run the calibration service until Ctrl-C or SIGTERM.

use super::Failure;
use crate::config::{Config, LogFormat};
use crate::http::{self, AppState, ServiceOptions};
use crate::store::Store;
use anyhow::anyhow;
use clap::Args;
use std::net::SocketAddr;
use std::path::PathBuf;

/// Arguments of `serve`; everything else comes from the environment (see the README).
#[derive(Debug, Args)]
pub struct ServeArgs {
    /// Address to listen on (overrides TRAPWISE_BIND; default 127.0.0.1:8080). Any address other
    /// than loopback requires bearer tokens.
    #[arg(long, value_name = "ADDR:PORT")]
    pub bind: Option<SocketAddr>,
    /// Folder of the SQLite database and the raw uploads (overrides TRAPWISE_DATA_DIR; default
    /// ./trapwise-data).
    #[arg(long, value_name = "DIR")]
    pub data_dir: Option<PathBuf>,
}

/// The configuration from the environment with the flags applied.
pub(crate) fn config(
    bind: Option<SocketAddr>,
    data_dir: Option<PathBuf>,
) -> Result<Config, Failure> {
    let mut config = Config::from_env().map_err(|e| Failure::new(2, e))?;
    if let Some(b) = bind {
        config.bind = b;
    }
    if let Some(d) = data_dir {
        config.data_dir = d;
    }
    Ok(config)
}

/// Connects the store the configuration names.
pub(crate) async fn open_store(config: &Config) -> Result<Store, Failure> {
    let pool_size = u32::try_from(config.max_concurrent.saturating_mul(2).max(8)).unwrap_or(8);
    Store::connect(&config.database_url(), &config.data_dir, pool_size)
        .await
        .map_err(|e| Failure::new(1, e))
}

/// A multi-threaded runtime for the service and the token commands.
pub(crate) fn runtime() -> Result<tokio::runtime::Runtime, Failure> {
    tokio::runtime::Builder::new_multi_thread()
        .enable_all()
        .build()
        .map_err(|e| Failure::new(1, anyhow!("cannot start the async runtime: {e}")))
}

fn init_logging(format: LogFormat) {
    let filter = tracing_subscriber::EnvFilter::try_from_default_env()
        .unwrap_or_else(|_| tracing_subscriber::EnvFilter::new("info,tower_http=info"));
    let builder = tracing_subscriber::fmt()
        .with_env_filter(filter)
        .with_ansi(std::io::IsTerminal::is_terminal(&std::io::stderr()))
        .with_writer(std::io::stderr);
    // A second initialisation (never in the binary) is not an error worth stopping for.
    let _ = match format {
        LogFormat::Text => builder.try_init(),
        LogFormat::Json => builder.json().try_init(),
    };
}

async fn shutdown_signal() {
    let ctrl_c = async {
        let _ = tokio::signal::ctrl_c().await;
    };
    #[cfg(unix)]
    let terminate = async {
        match tokio::signal::unix::signal(tokio::signal::unix::SignalKind::terminate()) {
            Ok(mut s) => {
                s.recv().await;
            }
            Err(_) => std::future::pending::<()>().await,
        }
    };
    #[cfg(not(unix))]
    let terminate = std::future::pending::<()>();
    tokio::select! {
        () = ctrl_c => {},
        () = terminate => {},
    }
    tracing::info!("shutting down: finishing requests in flight within the grace period");
}

/// How long the runtime waits, after the server stopped, for calibrations still running on the
/// blocking pool (they cannot be interrupted; the process ends without them).
const RUNTIME_SHUTDOWN: std::time::Duration = std::time::Duration::from_secs(1);

pub(super) fn run(args: &ServeArgs) -> Result<u8, Failure> {
    let config = config(args.bind, args.data_dir.clone())?;
    init_logging(config.log_format);
    let runtime = runtime()?;
    let outcome = runtime.block_on(async {
        let store = open_store(&config).await?;
        let options = ServiceOptions {
            max_upload_bytes: config.max_upload_bytes,
            max_concurrent: config.max_concurrent,
            queue: config.queue,
            tokens_required: config.tokens_required(),
            upload_idle_s: config.upload_idle_s,
            max_uploads: config.max_uploads,
            max_connections_per_client: config.max_connections_per_client,
            trusted_proxies: config.trusted_proxies.clone(),
            shutdown_grace_s: config.shutdown_grace_s,
        };
        let listener = tokio::net::TcpListener::bind(config.bind)
            .await
            .map_err(|e| Failure::new(1, anyhow!("cannot listen on {}: {e}", config.bind)))?;
        tracing::info!(
            address = %config.bind,
            data_dir = %config.data_dir.display(),
            database = ?store.backend(),
            tokens_required = options.tokens_required,
            max_upload_bytes = options.max_upload_bytes,
            max_concurrent = options.max_concurrent,
            queue = options.queue,
            "trapwise listening on http://{}/",
            config.bind
        );
        if options.tokens_required {
            let tokens = store.tokens().await.map_err(|e| Failure::new(1, e))?;
            if tokens.iter().all(|t| t.revoked_at_ms.is_some()) {
                tracing::warn!(
                    "tokens are required but none is active: every API request will be refused; \
                     create one with `trapwise token create --lab NAME`"
                );
            }
        }
        let state = AppState::new(store.clone(), options);
        http::serve(listener, state, shutdown_signal())
            .await
            .map_err(|e| Failure::new(1, anyhow!("server: {e}")))?;
        store.close().await;
        Ok(0)
    });
    runtime.shutdown_timeout(RUNTIME_SHUTDOWN);
    outcome
}
