//! `trapwise token create|list|revoke`: manage the bearer tokens of labs, directly in the
//! database the service uses (same DATABASE_URL and data directory).

use super::Failure;
use super::serve::{config, open_store, runtime};
use anyhow::anyhow;
use clap::{Args, Subcommand};
use std::io::Write;
use std::path::PathBuf;

/// Arguments of `token`.
#[derive(Debug, Args)]
pub struct TokenArgs {
    #[command(subcommand)]
    pub action: TokenAction,
    /// Folder of the SQLite database (overrides TRAPWISE_DATA_DIR; ignored with DATABASE_URL).
    #[arg(long, value_name = "DIR", global = true)]
    pub data_dir: Option<PathBuf>,
}

/// What to do with tokens.
#[derive(Debug, Subcommand)]
pub enum TokenAction {
    /// Make a token for a lab and print it once (only its hash is stored).
    Create {
        /// The lab the token acts for.
        #[arg(long)]
        lab: String,
    },
    /// List tokens (ids, labs, dates; never the secrets).
    List,
    /// Revoke a token by its id.
    Revoke {
        /// The id shown by `token list`.
        id: String,
    },
}

fn valid_lab(lab: &str) -> bool {
    !lab.is_empty()
        && lab.len() <= 100
        && lab
            .chars()
            .all(|c| c.is_ascii_alphanumeric() || matches!(c, '-' | '_' | '.'))
}

fn print(text: &str) -> Result<(), Failure> {
    std::io::stdout()
        .lock()
        .write_all(text.as_bytes())
        .map_err(|e| Failure::new(1, e))
}

pub(super) fn run(args: &TokenArgs) -> Result<u8, Failure> {
    let config = config(None, args.data_dir.clone())?;
    runtime()?.block_on(async {
        let store = open_store(&config).await?;
        let code = match &args.action {
            TokenAction::Create { lab } => {
                if !valid_lab(lab) {
                    return Err(Failure::new(
                        2,
                        anyhow!("--lab `{lab}`: use 1 to 100 letters, digits, '-', '_' or '.'"),
                    ));
                }
                let (info, secret) = store
                    .create_token(lab)
                    .await
                    .map_err(|e| Failure::new(1, e))?;
                print(&format!("{secret}\n"))?;
                eprintln!(
                    "token {} for lab {} created; the secret above is shown only now",
                    info.id, info.lab
                );
                0
            }
            TokenAction::List => {
                let tokens = store.tokens().await.map_err(|e| Failure::new(1, e))?;
                let mut text = String::from("id\tlab\tcreated_at_ms\trevoked_at_ms\n");
                for t in tokens {
                    text.push_str(&format!(
                        "{}\t{}\t{}\t{}\n",
                        t.id,
                        t.lab,
                        t.created_at_ms,
                        t.revoked_at_ms
                            .map_or_else(|| "-".to_string(), |r| r.to_string())
                    ));
                }
                print(&text)?;
                0
            }
            TokenAction::Revoke { id } => {
                if store
                    .revoke_token(id)
                    .await
                    .map_err(|e| Failure::new(1, e))?
                {
                    eprintln!("token {id} revoked");
                    0
                } else {
                    return Err(Failure::new(
                        2,
                        anyhow!("no active token has id `{id}`; see `trapwise token list`"),
                    ));
                }
            }
        };
        store.close().await;
        Ok(code)
    })
}
