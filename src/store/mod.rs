//! Persistence: calibrations, bearer tokens and the raw uploads.
//!
//! One `Store` type over sqlx's `AnyPool`, so the same SQL and the same migrations
//! (`migrations/*.sql`, embedded in the binary) run on the embedded SQLite default and on a
//! facility's PostgreSQL; `Backend` records which one configuration chose. Methods take and
//! return plain data; JSON documents are stored as TEXT and times as BIGINT milliseconds. Raw
//! uploads are files in a content-addressed folder (`blobs`), shared between replicas.
//!
//! Every row a caller can reach is filtered by lab: another lab's id reads as absent.

pub mod blobs;

use blobs::{Blobs, StagedBlob};
use sqlx::any::{AnyPoolOptions, AnyRow};
use sqlx::migrate::{Migration, MigrationType, Migrator};
use sqlx::{AnyPool, Executor, Row, SqlSafeStr};
use std::path::Path;

/// The embedded migrations, applied in order by `Store::connect`.
const MIGRATIONS: [(i64, &str, &str); 1] =
    [(1, "initial", include_str!("migrations/0001_initial.sql"))];

/// Why a store operation failed.
#[derive(Debug, thiserror::Error)]
pub enum StoreError {
    /// The database URL names a database this build does not speak.
    #[error("database url `{url}` is not supported; use sqlite://PATH or postgres://USER@HOST/DB")]
    UnsupportedUrl {
        /// The URL with any password removed.
        url: String,
    },
    /// The database answered with an error or could not be reached.
    #[error("database: {0}; check DATABASE_URL and that the server is running")]
    Database(#[from] sqlx::Error),
    /// The schema migrations could not be applied.
    #[error("database migration: {0}; the database may belong to a newer trapwise")]
    Migrate(#[from] sqlx::migrate::MigrateError),
    /// The blob folder could not be read or written.
    #[error("blob folder {path}: {source}; check the data directory and its permissions")]
    Blob {
        /// The folder or file concerned.
        path: String,
        /// The IO error.
        source: std::io::Error,
    },
    /// The operating system's random source failed while making a token.
    #[error("cannot draw random bytes for a token: {reason}; retry, or check the system")]
    Random {
        /// The error from the random source.
        reason: String,
    },
    /// A stored row holds text that does not decode (a damaged or foreign database).
    #[error("stored row `{id}`, column `{column}`: {reason}")]
    Corrupt {
        /// Id of the row.
        id: String,
        /// Column that does not decode.
        column: &'static str,
        /// What is wrong.
        reason: String,
    },
}

/// Which database configuration chose.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Backend {
    /// The embedded SQLite file under the data directory.
    Sqlite,
    /// A PostgreSQL server (facility mode, shared by replicas).
    Postgres,
}

/// The database and the blob folder.
#[derive(Clone, Debug)]
pub struct Store {
    pool: AnyPool,
    backend: Backend,
    blobs: Blobs,
}

/// A calibration to insert.
#[derive(Clone, Debug, PartialEq)]
pub struct NewCalibration {
    pub id: String,
    pub lab: String,
    pub idempotency_key: String,
    pub instrument: String,
    pub trap: String,
    pub note: String,
    pub axes_labels: Vec<String>,
    pub file_name: String,
    pub recording_sha256: String,
    pub recording_size_bytes: u64,
    /// Canonical run settings (`Settings::to_pairs`).
    pub settings: Vec<(String, String)>,
    pub created_at_ms: i64,
    /// The report without plot arrays, as JSON.
    pub result_json: String,
    /// The plot arrays per axis, as JSON.
    pub plots_json: String,
}

/// A stored calibration (without its plot arrays).
#[derive(Clone, Debug, PartialEq)]
pub struct StoredCalibration {
    pub id: String,
    pub lab: String,
    pub instrument: String,
    pub trap: String,
    pub note: String,
    pub axes_labels: Vec<String>,
    pub file_name: String,
    pub recording_sha256: String,
    pub settings: Vec<(String, String)>,
    pub created_at_ms: i64,
    pub result_json: String,
}

/// One trap of a lab, as the trap list shows it.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct TrapSummary {
    pub instrument: String,
    pub trap: String,
    /// Number of stored calibrations of this trap.
    pub calibrations: i64,
    /// When the first and the latest of them were stored, ms since the Unix epoch.
    pub first_at_ms: i64,
    pub latest_at_ms: i64,
}

/// Filters and page position of a listing. Results are newest first.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct ListFilter {
    pub instrument: Option<String>,
    pub trap: Option<String>,
    /// Inclusive lower bound on `created_at_ms`.
    pub from_ms: Option<i64>,
    /// Exclusive upper bound on `created_at_ms`.
    pub to_ms: Option<i64>,
    /// Continue after this `(created_at_ms, id)`, exclusive (keyset pagination).
    pub after: Option<(i64, String)>,
    /// Largest number of rows returned.
    pub limit: u32,
}

/// A token as listed (never the secret).
#[derive(Clone, Debug, PartialEq)]
pub struct TokenInfo {
    pub id: String,
    pub lab: String,
    pub created_at_ms: i64,
    pub revoked_at_ms: Option<i64>,
}

/// Row counts, for operators and for tests that check a failure stored nothing.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Counts {
    pub calibrations: i64,
    pub recordings: i64,
    pub tokens: i64,
    /// Committed blob files.
    pub blob_files: usize,
    /// Temporary upload files (zero when no upload is in flight).
    pub temp_files: usize,
}

/// SHA-256 of text as lower-case hex.
pub fn sha256_text(text: &str) -> String {
    crate::report::sha256_hex(text.as_bytes())
}

/// Milliseconds since the Unix epoch now.
pub fn now_ms() -> i64 {
    std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .map(|d| i64::try_from(d.as_millis()).unwrap_or(i64::MAX))
        .unwrap_or(0)
}

fn redact(url: &str) -> String {
    match (url.find("://"), url.rfind('@')) {
        (Some(scheme_end), Some(at)) if at > scheme_end => {
            let userinfo = &url[scheme_end + 3..at];
            match userinfo.split_once(':') {
                Some((user, _)) => format!("{}{user}:***{}", &url[..scheme_end + 3], &url[at..]),
                None => url.to_string(),
            }
        }
        _ => url.to_string(),
    }
}

const CALIBRATION_COLUMNS: &str = "id, lab, instrument, trap, note, axes_labels_json, file_name, \
     recording_sha256, settings_json, created_at_ms, result_json";

fn decode_json<T: serde::de::DeserializeOwned>(
    id: &str,
    column: &'static str,
    text: &str,
) -> Result<T, StoreError> {
    serde_json::from_str(text).map_err(|e| StoreError::Corrupt {
        id: id.to_string(),
        column,
        reason: e.to_string(),
    })
}

fn calibration_from_row(row: &AnyRow) -> Result<StoredCalibration, StoreError> {
    let id: String = row.try_get("id")?;
    let labels: String = row.try_get("axes_labels_json")?;
    let settings: String = row.try_get("settings_json")?;
    Ok(StoredCalibration {
        lab: row.try_get("lab")?,
        instrument: row.try_get("instrument")?,
        trap: row.try_get("trap")?,
        note: row.try_get("note")?,
        axes_labels: decode_json(&id, "axes_labels_json", &labels)?,
        file_name: row.try_get("file_name")?,
        recording_sha256: row.try_get("recording_sha256")?,
        settings: decode_json(&id, "settings_json", &settings)?,
        created_at_ms: row.try_get("created_at_ms")?,
        result_json: row.try_get("result_json")?,
        id,
    })
}

impl Store {
    /// Connects to `database_url` (`sqlite://...` or `postgres://...`), applies the migrations
    /// and opens the blob folder `blob_root`. `max_connections` bounds the pool.
    pub async fn connect(
        database_url: &str,
        blob_root: &Path,
        max_connections: u32,
    ) -> Result<Self, StoreError> {
        sqlx::any::install_default_drivers();
        let backend = if database_url.starts_with("sqlite:") {
            Backend::Sqlite
        } else if database_url.starts_with("postgres://")
            || database_url.starts_with("postgresql://")
        {
            Backend::Postgres
        } else {
            return Err(StoreError::UnsupportedUrl {
                url: redact(database_url),
            });
        };
        let blobs = Blobs::open(blob_root).map_err(|source| StoreError::Blob {
            path: blob_root.display().to_string(),
            source,
        })?;
        let mut options = AnyPoolOptions::new().max_connections(max_connections.max(1));
        if backend == Backend::Sqlite {
            // WAL lets readers run beside the one writer; the busy timeout waits for the writer
            // instead of failing; foreign keys are off by default in SQLite (common practice).
            options = options.after_connect(|conn, _meta| {
                Box::pin(async move {
                    conn.execute(
                        "PRAGMA journal_mode = WAL; PRAGMA busy_timeout = 10000; \
                         PRAGMA foreign_keys = ON; PRAGMA synchronous = NORMAL;",
                    )
                    .await?;
                    Ok(())
                })
            });
        }
        let pool = options.connect(database_url).await?;
        let migrations = MIGRATIONS
            .iter()
            .map(|(version, name, sql)| {
                Migration::new(
                    *version,
                    (*name).into(),
                    MigrationType::Simple,
                    sql.into_sql_str(),
                    false,
                )
            })
            .collect();
        Migrator::with_migrations(migrations).run(&pool).await?;
        Ok(Store {
            pool,
            backend,
            blobs,
        })
    }

    /// Which database this store uses.
    pub fn backend(&self) -> Backend {
        self.backend
    }

    /// The blob folder.
    pub fn blobs(&self) -> &Blobs {
        &self.blobs
    }

    /// Closes the pool (waits for connections to return).
    pub async fn close(&self) {
        self.pool.close().await;
    }

    /// A trivial query, for the health check.
    pub async fn ping(&self) -> Result<(), StoreError> {
        sqlx::query("SELECT 1").execute(&self.pool).await?;
        Ok(())
    }

    /// The calibration a lab stored under this idempotency key, if any.
    pub async fn find_by_key(
        &self,
        lab: &str,
        idempotency_key: &str,
    ) -> Result<Option<StoredCalibration>, StoreError> {
        let sql = format!(
            "SELECT {CALIBRATION_COLUMNS} FROM calibrations WHERE lab = $1 AND idempotency_key = $2"
        );
        let row = sqlx::query(sqlx::AssertSqlSafe(sql))
            .bind(lab)
            .bind(idempotency_key)
            .fetch_optional(&self.pool)
            .await?;
        row.as_ref().map(calibration_from_row).transpose()
    }

    /// Commits the staged upload to the blob folder, then inserts the recording and the
    /// calibration in one transaction. When the lab already holds a calibration with the same
    /// idempotency key (a concurrent retry), that one is returned and `false` says nothing new
    /// was inserted.
    ///
    /// The blob is committed first so that a row never names a missing file; a blob without a
    /// row (a database failure in between) is harmless and is reused by the next identical upload.
    pub async fn insert_calibration(
        &self,
        staged: StagedBlob,
        new: &NewCalibration,
    ) -> Result<(StoredCalibration, bool), StoreError> {
        let blob_path = self
            .blobs
            .path_of(&staged.sha256)
            .map(|p| p.display().to_string())
            .unwrap_or_default();
        self.blobs
            .commit(staged)
            .await
            .map_err(|source| StoreError::Blob {
                path: blob_path,
                source,
            })?;
        let labels = serde_json::to_string(&new.axes_labels).unwrap_or_else(|_| "[]".into());
        let settings = serde_json::to_string(&new.settings).unwrap_or_else(|_| "[]".into());
        let size = i64::try_from(new.recording_size_bytes).unwrap_or(i64::MAX);
        let mut tx = self.pool.begin().await?;
        sqlx::query(
            "INSERT INTO recordings (sha256, size_bytes, created_at_ms) VALUES ($1, $2, $3) \
             ON CONFLICT (sha256) DO NOTHING",
        )
        .bind(&new.recording_sha256)
        .bind(size)
        .bind(new.created_at_ms)
        .execute(&mut *tx)
        .await?;
        let inserted = sqlx::query(
            "INSERT INTO calibrations (id, lab, idempotency_key, instrument, trap, note, \
             axes_labels_json, file_name, recording_sha256, settings_json, created_at_ms, \
             result_json, plots_json) \
             VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $12, $13) \
             ON CONFLICT (lab, idempotency_key) DO NOTHING",
        )
        .bind(&new.id)
        .bind(&new.lab)
        .bind(&new.idempotency_key)
        .bind(&new.instrument)
        .bind(&new.trap)
        .bind(&new.note)
        .bind(labels)
        .bind(&new.file_name)
        .bind(&new.recording_sha256)
        .bind(settings)
        .bind(new.created_at_ms)
        .bind(&new.result_json)
        .bind(&new.plots_json)
        .execute(&mut *tx)
        .await?
        .rows_affected()
            == 1;
        tx.commit().await?;
        let stored = self
            .find_by_key(&new.lab, &new.idempotency_key)
            .await?
            .ok_or_else(|| StoreError::Corrupt {
                id: new.id.clone(),
                column: "idempotency_key",
                reason: "the row just inserted cannot be read back".into(),
            })?;
        Ok((stored, inserted))
    }

    /// One calibration of a lab; `None` when absent or another lab's.
    pub async fn calibration(
        &self,
        lab: &str,
        id: &str,
    ) -> Result<Option<StoredCalibration>, StoreError> {
        let sql =
            format!("SELECT {CALIBRATION_COLUMNS} FROM calibrations WHERE lab = $1 AND id = $2");
        let row = sqlx::query(sqlx::AssertSqlSafe(sql))
            .bind(lab)
            .bind(id)
            .fetch_optional(&self.pool)
            .await?;
        row.as_ref().map(calibration_from_row).transpose()
    }

    /// The plot arrays (JSON) of one calibration of a lab.
    pub async fn plots_json(&self, lab: &str, id: &str) -> Result<Option<String>, StoreError> {
        let row = sqlx::query("SELECT plots_json FROM calibrations WHERE lab = $1 AND id = $2")
            .bind(lab)
            .bind(id)
            .fetch_optional(&self.pool)
            .await?;
        Ok(row.map(|r| r.try_get("plots_json")).transpose()?)
    }

    /// A lab's calibrations matching `filter`, newest first.
    pub async fn list(
        &self,
        lab: &str,
        filter: &ListFilter,
    ) -> Result<Vec<StoredCalibration>, StoreError> {
        self.select(lab, filter, true).await
    }

    /// Every (instrument, trap) of a lab that has calibrations, with their count and time
    /// span, sorted by instrument then trap, byte-wise: the order is the same on SQLite and
    /// PostgreSQL, whose text collations differ, because the sort is done here.
    pub async fn traps(&self, lab: &str) -> Result<Vec<TrapSummary>, StoreError> {
        let rows = sqlx::query(
            "SELECT instrument, trap, COUNT(*) AS n, MIN(created_at_ms) AS first_ms, \
             MAX(created_at_ms) AS latest_ms FROM calibrations WHERE lab = $1 \
             GROUP BY instrument, trap",
        )
        .bind(lab)
        .fetch_all(&self.pool)
        .await?;
        let mut traps = rows
            .iter()
            .map(|row| {
                Ok(TrapSummary {
                    instrument: row.try_get("instrument")?,
                    trap: row.try_get("trap")?,
                    calibrations: row.try_get("n")?,
                    first_at_ms: row.try_get("first_ms")?,
                    latest_at_ms: row.try_get("latest_ms")?,
                })
            })
            .collect::<Result<Vec<_>, StoreError>>()?;
        traps.sort_by(|a, b| (&a.instrument, &a.trap).cmp(&(&b.instrument, &b.trap)));
        Ok(traps)
    }

    /// A lab's calibrations of one trap in a time range, oldest first (at most `limit`).
    pub async fn history(
        &self,
        lab: &str,
        instrument: &str,
        trap: &str,
        from_ms: Option<i64>,
        to_ms: Option<i64>,
        limit: u32,
    ) -> Result<Vec<StoredCalibration>, StoreError> {
        let filter = ListFilter {
            instrument: Some(instrument.to_string()),
            trap: Some(trap.to_string()),
            from_ms,
            to_ms,
            after: None,
            limit,
        };
        self.select(lab, &filter, false).await
    }

    async fn select(
        &self,
        lab: &str,
        filter: &ListFilter,
        newest_first: bool,
    ) -> Result<Vec<StoredCalibration>, StoreError> {
        // The SQL is assembled from fixed fragments only; every value is a bound parameter.
        let mut sql = format!("SELECT {CALIBRATION_COLUMNS} FROM calibrations WHERE lab = $1");
        let mut n_params = 1;
        let mut next = |sql: &mut String, fragment: &str| {
            n_params += 1;
            sql.push_str(&fragment.replace('?', &format!("${n_params}")));
        };
        if filter.instrument.is_some() {
            next(&mut sql, " AND instrument = ?");
        }
        if filter.trap.is_some() {
            next(&mut sql, " AND trap = ?");
        }
        if filter.from_ms.is_some() {
            next(&mut sql, " AND created_at_ms >= ?");
        }
        if filter.to_ms.is_some() {
            next(&mut sql, " AND created_at_ms < ?");
        }
        let order = if newest_first { "DESC" } else { "ASC" };
        if filter.after.is_some() {
            let cmp = if newest_first { "<" } else { ">" };
            next(&mut sql, &format!(" AND (created_at_ms {cmp} ?"));
            next(&mut sql, " OR (created_at_ms = ?");
            next(&mut sql, &format!(" AND id {cmp} ?))"));
        }
        sql.push_str(&format!(
            " ORDER BY created_at_ms {order}, id {order} LIMIT {}",
            filter.limit
        ));
        let mut query = sqlx::query(sqlx::AssertSqlSafe(sql)).bind(lab);
        if let Some(v) = &filter.instrument {
            query = query.bind(v);
        }
        if let Some(v) = &filter.trap {
            query = query.bind(v);
        }
        if let Some(v) = filter.from_ms {
            query = query.bind(v);
        }
        if let Some(v) = filter.to_ms {
            query = query.bind(v);
        }
        if let Some((t, id)) = &filter.after {
            query = query.bind(*t).bind(*t).bind(id);
        }
        let rows = query.fetch_all(&self.pool).await?;
        rows.iter().map(calibration_from_row).collect()
    }

    /// Creates a token for `lab` and returns its listing and the secret, which is not stored
    /// (only its SHA-256 is) and cannot be shown again.
    pub async fn create_token(&self, lab: &str) -> Result<(TokenInfo, String), StoreError> {
        let mut random = [0u8; 32];
        getrandom::fill(&mut random).map_err(|e| StoreError::Random {
            reason: e.to_string(),
        })?;
        let secret = format!(
            "tw_{}",
            random
                .iter()
                .map(|b| format!("{b:02x}"))
                .collect::<String>()
        );
        let info = TokenInfo {
            id: uuid::Uuid::now_v7().to_string(),
            lab: lab.to_string(),
            created_at_ms: now_ms(),
            revoked_at_ms: None,
        };
        sqlx::query(
            "INSERT INTO tokens (id, lab, secret_sha256, created_at_ms) VALUES ($1, $2, $3, $4)",
        )
        .bind(&info.id)
        .bind(&info.lab)
        .bind(sha256_text(&secret))
        .bind(info.created_at_ms)
        .execute(&self.pool)
        .await?;
        Ok((info, secret))
    }

    /// The lab of a valid (known, not revoked) token secret.
    pub async fn lab_for_token(&self, secret: &str) -> Result<Option<String>, StoreError> {
        let row = sqlx::query(
            "SELECT lab FROM tokens WHERE secret_sha256 = $1 AND revoked_at_ms IS NULL",
        )
        .bind(sha256_text(secret))
        .fetch_optional(&self.pool)
        .await?;
        Ok(row.map(|r| r.try_get("lab")).transpose()?)
    }

    /// All tokens, oldest first.
    pub async fn tokens(&self) -> Result<Vec<TokenInfo>, StoreError> {
        let rows = sqlx::query(
            "SELECT id, lab, created_at_ms, revoked_at_ms FROM tokens ORDER BY created_at_ms, id",
        )
        .fetch_all(&self.pool)
        .await?;
        rows.iter()
            .map(|r| {
                Ok(TokenInfo {
                    id: r.try_get("id")?,
                    lab: r.try_get("lab")?,
                    created_at_ms: r.try_get("created_at_ms")?,
                    revoked_at_ms: r.try_get("revoked_at_ms")?,
                })
            })
            .collect()
    }

    /// Revokes a token by id; false when no unrevoked token has this id.
    pub async fn revoke_token(&self, id: &str) -> Result<bool, StoreError> {
        let done = sqlx::query(
            "UPDATE tokens SET revoked_at_ms = $1 WHERE id = $2 AND revoked_at_ms IS NULL",
        )
        .bind(now_ms())
        .bind(id)
        .execute(&self.pool)
        .await?;
        Ok(done.rows_affected() == 1)
    }

    /// Row and file counts.
    pub async fn counts(&self) -> Result<Counts, StoreError> {
        let count = |table: &'static str| {
            let pool = self.pool.clone();
            async move {
                let sql = format!("SELECT COUNT(*) AS n FROM {table}");
                let row = sqlx::query(sqlx::AssertSqlSafe(sql))
                    .fetch_one(&pool)
                    .await?;
                Ok::<i64, StoreError>(row.try_get("n")?)
            }
        };
        let (blob_files, temp_files) =
            self.blobs
                .file_counts()
                .map_err(|source| StoreError::Blob {
                    path: self.blobs.root().display().to_string(),
                    source,
                })?;
        Ok(Counts {
            calibrations: count("calibrations").await?,
            recordings: count("recordings").await?,
            tokens: count("tokens").await?,
            blob_files,
            temp_files,
        })
    }
}
