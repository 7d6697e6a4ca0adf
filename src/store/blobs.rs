//! The content-addressed folder of raw uploads.
//!
//! An upload streams into a temporary file under `<root>/tmp` while its SHA-256 and size are
//! computed (`BlobWriter`); only after the calibration succeeded is the file renamed to
//! `<root>/recordings/<first two hex digits>/<sha256>` (`Blobs::commit`). The rename happens on
//! one filesystem, so a blob is either absent or complete, and a dropped `StagedBlob` deletes its
//! temporary file. With several replicas the root is a shared directory (see the README).
//!
//! A process that is killed leaves its temporary files behind. To tell them from uploads in
//! flight, also on a folder shared by replicas on several hosts (where a process id or a lock
//! means nothing to another host, and advisory locks are unreliable on network file systems),
//! every live temporary file carries a heartbeat: the process that owns it sets its
//! modification time to now every `HEARTBEAT` (`Blobs::touch_live`), from the moment it is
//! created until it is committed or dropped, including while the upload waits in the queue or
//! is calibrated. A temporary file not touched for `STALE_TEMPORARY_AGE` has no live owner and is
//! deleted by the sweep (`Blobs::sweep_stale_temporaries`), run when a service opens the folder
//! and at every heartbeat. What it cannot do: it relies on the hosts' clocks agreeing to well
//! within `STALE_TEMPORARY_AGE` (the file system stores the time the owner set, the sweeper
//! compares it with its own clock), and on a file system that keeps modification times; a
//! process stopped (not killed) for longer than that age loses its temporary files.

use sha2::{Digest, Sha256};
use std::collections::HashSet;
use std::path::{Path, PathBuf};
use std::sync::{Arc, Mutex, PoisonError};
use tempfile::TempPath;
use tokio::io::AsyncWriteExt;

/// The blob folder.
#[derive(Clone, Debug)]
pub struct Blobs {
    root: PathBuf,
    /// The temporary files this process owns now (see the heartbeat in the module docs).
    live: Arc<Mutex<HashSet<PathBuf>>>,
}

/// Marks a temporary file as owned by this process while it lives.
#[derive(Debug)]
struct LiveMark {
    live: Arc<Mutex<HashSet<PathBuf>>>,
    path: PathBuf,
}

impl LiveMark {
    fn new(live: &Arc<Mutex<HashSet<PathBuf>>>, path: &Path) -> Self {
        live.lock()
            .unwrap_or_else(PoisonError::into_inner)
            .insert(path.to_path_buf());
        LiveMark {
            live: Arc::clone(live),
            path: path.to_path_buf(),
        }
    }
}

impl Drop for LiveMark {
    fn drop(&mut self) {
        self.live
            .lock()
            .unwrap_or_else(PoisonError::into_inner)
            .remove(&self.path);
    }
}

/// An upload being written to its temporary file.
#[derive(Debug)]
pub struct BlobWriter {
    file: tokio::io::BufWriter<tokio::fs::File>,
    path: TempPath,
    hasher: Sha256,
    size_bytes: u64,
    mark: LiveMark,
}

/// A complete upload in its temporary file, not yet committed.
#[derive(Debug)]
pub struct StagedBlob {
    /// SHA-256 of the bytes, lower-case hex.
    pub sha256: String,
    /// Length of the upload in bytes.
    pub size_bytes: u64,
    path: TempPath,
    /// Dropped after the file (field order); a heartbeat in between skips the missing file.
    _mark: LiveMark,
}

impl StagedBlob {
    /// Where the temporary file lies (for reading it back once).
    pub fn path(&self) -> &Path {
        &self.path
    }
}

fn is_sha256_hex(s: &str) -> bool {
    s.len() == 64 && s.bytes().all(|b| matches!(b, b'0'..=b'9' | b'a'..=b'f'))
}

/// How often a process touches its live temporary files (see the module docs).
pub const HEARTBEAT: std::time::Duration = std::time::Duration::from_secs(60);

/// Age of the last heartbeat past which a temporary upload file is taken to be left over from
/// a process that died (a crash, a kill, a power cut) and is deleted. Ten heartbeats, so that a
/// late heartbeat or clocks a few minutes apart never cost a live upload.
pub const STALE_TEMPORARY_AGE: std::time::Duration = std::time::Duration::from_secs(600);

/// Prefix of the temporary upload files; the sweep touches nothing else in `tmp/`.
const TEMPORARY_PREFIX: &str = "upload-";

impl Blobs {
    /// The blob folder under `root`; creates `recordings/` and `tmp/` when missing and deletes
    /// temporary upload files older than `STALE_TEMPORARY_AGE` (see `sweep_stale_temporaries`).
    pub fn open(root: &Path) -> std::io::Result<Self> {
        std::fs::create_dir_all(root.join("recordings"))?;
        std::fs::create_dir_all(root.join("tmp"))?;
        let blobs = Blobs {
            root: root.to_path_buf(),
            live: Arc::default(),
        };
        match blobs.sweep_stale_temporaries(STALE_TEMPORARY_AGE, std::time::SystemTime::now()) {
            Ok(0) => {}
            Ok(n) => tracing::info!(
                removed = n,
                folder = %blobs.root.join("tmp").display(),
                "removed temporary upload files left over from an earlier process"
            ),
            // A sweep that fails costs disk space, never data: say so and go on.
            Err(e) => tracing::warn!(
                error = %e,
                folder = %blobs.root.join("tmp").display(),
                "could not sweep old temporary upload files"
            ),
        }
        Ok(blobs)
    }

    /// Deletes the temporary upload files in `tmp/` last modified more than `max_age` before
    /// `now`, and returns how many it deleted. Committed blobs are never touched (they live in
    /// `recordings/`), nor files without the upload prefix; a file that vanishes meanwhile (its
    /// upload finished or another replica swept it) is skipped.
    pub fn sweep_stale_temporaries(
        &self,
        max_age: std::time::Duration,
        now: std::time::SystemTime,
    ) -> std::io::Result<usize> {
        let mut removed = 0;
        for entry in std::fs::read_dir(self.root.join("tmp"))? {
            let entry = entry?;
            let is_upload = entry
                .file_name()
                .to_str()
                .is_some_and(|name| name.starts_with(TEMPORARY_PREFIX));
            let Ok(meta) = entry.metadata() else {
                continue;
            };
            if !is_upload || !meta.is_file() {
                continue;
            }
            let stale = meta
                .modified()
                .ok()
                .and_then(|modified| now.duration_since(modified).ok())
                .is_some_and(|age| age > max_age);
            if stale {
                match std::fs::remove_file(entry.path()) {
                    Ok(()) => removed += 1,
                    Err(e) if e.kind() == std::io::ErrorKind::NotFound => {}
                    Err(e) => return Err(e),
                }
            }
        }
        Ok(removed)
    }

    /// Sets the modification time of every temporary file this process owns to `now` (the
    /// heartbeat) and returns how many it touched; a file that went meanwhile is skipped.
    pub fn touch_live(&self, now: std::time::SystemTime) -> std::io::Result<usize> {
        let paths: Vec<PathBuf> = self
            .live
            .lock()
            .unwrap_or_else(PoisonError::into_inner)
            .iter()
            .cloned()
            .collect();
        let mut touched = 0;
        for path in paths {
            match std::fs::File::options().write(true).open(&path) {
                Ok(file) => {
                    file.set_modified(now)?;
                    touched += 1;
                }
                Err(e) if e.kind() == std::io::ErrorKind::NotFound => {}
                Err(e) => return Err(e),
            }
        }
        Ok(touched)
    }

    /// Runs the heartbeat for ever: every `HEARTBEAT`, touches the live temporary files and
    /// sweeps the stale ones (of any process). Failures are logged; they cost disk space at
    /// worst. Meant to be spawned once by the service and aborted when it stops.
    pub async fn heartbeat(self) {
        let mut ticks = tokio::time::interval(HEARTBEAT);
        ticks.set_missed_tick_behavior(tokio::time::MissedTickBehavior::Delay);
        loop {
            ticks.tick().await;
            let blobs = self.clone();
            let beat = tokio::task::spawn_blocking(move || {
                let now = std::time::SystemTime::now();
                blobs.touch_live(now)?;
                blobs.sweep_stale_temporaries(STALE_TEMPORARY_AGE, now)
            })
            .await;
            match beat {
                Ok(Ok(0)) => {}
                Ok(Ok(n)) => tracing::info!(removed = n, "removed stale temporary upload files"),
                Ok(Err(e)) => tracing::warn!(error = %e, "upload heartbeat failed"),
                Err(e) => tracing::warn!(error = %e, "upload heartbeat task failed"),
            }
        }
    }

    /// The folder holding the blobs and the temporary files.
    pub fn root(&self) -> &Path {
        &self.root
    }

    /// Where the blob with this hash lives; `None` for a string that is not a SHA-256 in hex.
    pub fn path_of(&self, sha256: &str) -> Option<PathBuf> {
        let prefix = sha256.get(..2)?;
        is_sha256_hex(sha256).then(|| self.root.join("recordings").join(prefix).join(sha256))
    }

    /// Starts a new temporary file for an upload.
    pub async fn writer(&self) -> std::io::Result<BlobWriter> {
        let temp = tempfile::Builder::new()
            .prefix(TEMPORARY_PREFIX)
            .tempfile_in(self.root.join("tmp"))?;
        let (file, path) = temp.into_parts();
        let mark = LiveMark::new(&self.live, &path);
        Ok(BlobWriter {
            file: tokio::io::BufWriter::with_capacity(1 << 20, tokio::fs::File::from_std(file)),
            path,
            hasher: Sha256::new(),
            size_bytes: 0,
            mark,
        })
    }

    /// Moves a staged upload to its content address. When the blob exists already (the same
    /// bytes were uploaded before) the temporary file is dropped instead.
    pub async fn commit(&self, staged: StagedBlob) -> std::io::Result<PathBuf> {
        let target = self.path_of(&staged.sha256).ok_or_else(|| {
            std::io::Error::other(format!("`{}` is not a SHA-256 in hex", staged.sha256))
        })?;
        if let Some(dir) = target.parent() {
            tokio::fs::create_dir_all(dir).await?;
        }
        if tokio::fs::try_exists(&target).await? {
            return Ok(target);
        }
        let temp = staged.path;
        let to = target.clone();
        tokio::task::spawn_blocking(move || match temp.persist_noclobber(&to) {
            Ok(()) => Ok(()),
            // A concurrent upload of the same bytes won the race: its file is identical.
            Err(e) if e.error.kind() == std::io::ErrorKind::AlreadyExists => Ok(()),
            Err(e) => Err(e.error),
        })
        .await
        .map_err(std::io::Error::other)??;
        Ok(target)
    }

    /// Number of committed blobs and of temporary files (for checks that nothing leaked).
    pub fn file_counts(&self) -> std::io::Result<(usize, usize)> {
        let mut blobs = 0;
        for dir in std::fs::read_dir(self.root.join("recordings"))? {
            let dir = dir?;
            if dir.file_type()?.is_dir() {
                blobs += std::fs::read_dir(dir.path())?.count();
            }
        }
        let temps = std::fs::read_dir(self.root.join("tmp"))?.count();
        Ok((blobs, temps))
    }
}

impl BlobWriter {
    /// Appends a chunk of the upload.
    pub async fn write(&mut self, chunk: &[u8]) -> std::io::Result<()> {
        self.hasher.update(chunk);
        self.size_bytes += chunk.len() as u64;
        self.file.write_all(chunk).await
    }

    /// Bytes written so far.
    pub fn size_bytes(&self) -> u64 {
        self.size_bytes
    }

    /// Flushes the file to disk and returns the staged upload with its hash.
    pub async fn finish(mut self) -> std::io::Result<StagedBlob> {
        self.file.flush().await?;
        self.file.get_mut().sync_all().await?;
        Ok(StagedBlob {
            sha256: format!("{:x}", self.hasher.finalize()),
            size_bytes: self.size_bytes,
            path: self.path,
            _mark: self.mark,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::time::{Duration, SystemTime};

    fn file_with_age(path: &Path, age: Duration) {
        let file = std::fs::File::create(path).expect("create");
        file.set_modified(SystemTime::now() - age)
            .expect("set mtime");
    }

    #[tokio::test]
    async fn the_sweep_keeps_a_live_upload_and_removes_a_dead_one() {
        let root = tempfile::tempdir().expect("temp dir");
        let tmp = root.path().join("tmp");
        // This process's upload, written an hour ago and waiting since (queued, calibrating).
        let owner = Blobs::open(root.path()).expect("open");
        let mut writer = owner.writer().await.expect("writer");
        writer.write(b"time_s,x_nm\n").await.expect("write");
        let staged = writer.finish().await.expect("finish");
        let hour = Duration::from_secs(3600);
        std::fs::File::options()
            .write(true)
            .open(staged.path())
            .expect("open live")
            .set_modified(SystemTime::now() - hour)
            .expect("age live");
        // A killed process's upload of the same age: nothing touches it any more.
        file_with_age(&tmp.join("upload-dead"), hour);
        // The owner's heartbeat, then another replica (or a restart) opening the folder.
        assert_eq!(owner.touch_live(SystemTime::now()).expect("touch"), 1);
        let other = Blobs::open(root.path()).expect("second open");
        assert!(staged.path().exists(), "the live upload was swept");
        assert!(!tmp.join("upload-dead").exists(), "the dead upload stayed");
        assert_eq!(other.file_counts().expect("counts"), (0, 1));
        // Once committed, the file is no longer the owner's to touch.
        owner.commit(staged).await.expect("commit");
        assert_eq!(owner.touch_live(SystemTime::now()).expect("touch"), 0);
    }

    #[test]
    fn opening_the_folder_deletes_only_old_temporary_uploads() {
        let root = tempfile::tempdir().expect("temp dir");
        Blobs::open(root.path()).expect("first open");
        let tmp = root.path().join("tmp");
        let day = Duration::from_secs(24 * 3600);
        // Left over from a crash two days ago: goes.
        file_with_age(&tmp.join("upload-old"), 2 * day);
        // Another replica's upload in flight (a minute old): stays.
        file_with_age(&tmp.join("upload-fresh"), Duration::from_secs(60));
        // Not an upload temporary, however old: stays.
        file_with_age(&tmp.join("notes.txt"), 10 * day);
        // A committed blob, however old: stays.
        let blob_dir = root.path().join("recordings").join("ab");
        std::fs::create_dir_all(&blob_dir).expect("blob dir");
        let blob = blob_dir.join(format!("ab{}", "0".repeat(62)));
        file_with_age(&blob, 10 * day);

        let blobs = Blobs::open(root.path()).expect("second open");
        assert!(!tmp.join("upload-old").exists());
        assert!(tmp.join("upload-fresh").exists());
        assert!(tmp.join("notes.txt").exists());
        assert!(blob.exists());
        assert_eq!(blobs.file_counts().expect("counts"), (1, 2));
        // Nothing is left to sweep; a sweep as of three days ahead takes the fresh upload too.
        let now = SystemTime::now();
        assert_eq!(blobs.sweep_stale_temporaries(day, now).expect("sweep"), 0);
        let later = now + 3 * day;
        assert_eq!(blobs.sweep_stale_temporaries(day, later).expect("sweep"), 1);
        assert!(!tmp.join("upload-fresh").exists());
        assert!(tmp.join("notes.txt").exists());
    }
}
