//! The content-addressed folder of raw uploads.
//!
//! An upload streams into a temporary file under `<root>/tmp` while its SHA-256 and size are
//! computed (`BlobWriter`); only after the calibration succeeded is the file renamed to
//! `<root>/recordings/<first two hex digits>/<sha256>` (`Blobs::commit`). The rename happens on
//! one filesystem, so a blob is either absent or complete, and a dropped `StagedBlob` deletes its
//! temporary file. With several replicas the root is a shared directory (see the README).

use sha2::{Digest, Sha256};
use std::path::{Path, PathBuf};
use tempfile::TempPath;
use tokio::io::AsyncWriteExt;

/// The blob folder.
#[derive(Clone, Debug)]
pub struct Blobs {
    root: PathBuf,
}

/// An upload being written to its temporary file.
#[derive(Debug)]
pub struct BlobWriter {
    file: tokio::io::BufWriter<tokio::fs::File>,
    path: TempPath,
    hasher: Sha256,
    size_bytes: u64,
}

/// A complete upload in its temporary file, not yet committed.
#[derive(Debug)]
pub struct StagedBlob {
    /// SHA-256 of the bytes, lower-case hex.
    pub sha256: String,
    /// Length of the upload in bytes.
    pub size_bytes: u64,
    path: TempPath,
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

impl Blobs {
    /// The blob folder under `root`; creates `recordings/` and `tmp/` when missing.
    pub fn open(root: &Path) -> std::io::Result<Self> {
        std::fs::create_dir_all(root.join("recordings"))?;
        std::fs::create_dir_all(root.join("tmp"))?;
        Ok(Blobs {
            root: root.to_path_buf(),
        })
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
            .prefix("upload-")
            .tempfile_in(self.root.join("tmp"))?;
        let (file, path) = temp.into_parts();
        Ok(BlobWriter {
            file: tokio::io::BufWriter::with_capacity(1 << 20, tokio::fs::File::from_std(file)),
            path,
            hasher: Sha256::new(),
            size_bytes: 0,
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
        })
    }
}
