//! Durable atomic file replacement.
//!
//! On Linux a reader must see either the old file or the new one, never a mix,
//! and a reported success must survive power loss. The steps: write a temporary
//! file in the same folder, fsync it, rename it over the target, fsync the folder.
//! A failed fsync is fatal (a retry can "succeed" with the data gone), and on any
//! failure the temporary file is removed and the target is left as it was.
//!
//! The steps go through the [`FileOps`] trait so tests can fail the Nth step and
//! prove the previous version survives.

use crate::error::{LabelError, Result};
use std::fs::File;
use std::io::Write;
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicU64, Ordering};

/// The file-system steps of an atomic write; a seam for fault injection.
pub trait FileOps {
    /// Creates (truncating) a file for writing.
    fn create(&self, path: &Path) -> std::io::Result<File>;
    /// Writes all bytes to the file.
    fn write_all(&self, file: &mut File, bytes: &[u8]) -> std::io::Result<()>;
    /// Flushes the file's data and metadata to stable storage.
    fn sync_file(&self, file: &File) -> std::io::Result<()>;
    /// Renames `from` over `to`.
    fn rename(&self, from: &Path, to: &Path) -> std::io::Result<()>;
    /// Flushes a folder's entries to stable storage.
    fn sync_dir(&self, dir: &Path) -> std::io::Result<()>;
}

/// The real file system.
#[derive(Debug, Default, Clone, Copy)]
pub struct RealFileOps;

impl FileOps for RealFileOps {
    fn create(&self, path: &Path) -> std::io::Result<File> {
        std::fs::OpenOptions::new()
            .write(true)
            .create_new(true)
            .open(path)
    }
    fn write_all(&self, file: &mut File, bytes: &[u8]) -> std::io::Result<()> {
        file.write_all(bytes)
    }
    fn sync_file(&self, file: &File) -> std::io::Result<()> {
        file.sync_all()
    }
    fn rename(&self, from: &Path, to: &Path) -> std::io::Result<()> {
        std::fs::rename(from, to)
    }
    fn sync_dir(&self, dir: &Path) -> std::io::Result<()> {
        File::open(dir)?.sync_all()
    }
}

/// Marker in the names of temporary files, so stale ones can be found and removed.
pub const TEMP_MARKER: &str = ".tmp-";

static COUNTER: AtomicU64 = AtomicU64::new(0);

/// The temporary name used next to `target`: `.<name>.tmp-<pid>-<n>`.
fn temp_path(target: &Path) -> PathBuf {
    let name = target
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_default();
    let n = COUNTER.fetch_add(1, Ordering::Relaxed);
    target.with_file_name(format!(".{name}{TEMP_MARKER}{}-{n}", std::process::id()))
}

/// The folder holding `path` (`.` for a bare file name).
pub fn parent_dir(path: &Path) -> PathBuf {
    match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    }
}

/// Replaces `target` with `bytes` durably and atomically.
pub fn write_atomic(target: &Path, bytes: &[u8]) -> Result<()> {
    write_atomic_with(&RealFileOps, target, bytes)
}

/// [`write_atomic`] through the given file operations.
pub fn write_atomic_with(ops: &dyn FileOps, target: &Path, bytes: &[u8]) -> Result<()> {
    let tmp = temp_path(target);
    let result = (|| -> std::io::Result<()> {
        let mut file = ops.create(&tmp)?;
        ops.write_all(&mut file, bytes)?;
        ops.sync_file(&file)?;
        drop(file);
        ops.rename(&tmp, target)
    })();
    if let Err(e) = result {
        let _ = std::fs::remove_file(&tmp);
        return Err(LabelError::io(target, e));
    }
    let dir = parent_dir(target);
    ops.sync_dir(&dir).map_err(|e| LabelError::io(&dir, e))
}

/// Removes leftover temporary files for `target` (from a crashed writer).
/// Call only while holding the lock that guards `target`.
pub fn remove_stale_temps(target: &Path) -> Result<usize> {
    let dir = parent_dir(target);
    let Some(name) = target.file_name().map(|n| n.to_string_lossy().into_owned()) else {
        return Ok(0);
    };
    let prefix = format!(".{name}{TEMP_MARKER}");
    let mut removed = 0;
    let entries = match std::fs::read_dir(&dir) {
        Ok(e) => e,
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => return Ok(0),
        Err(e) => return Err(LabelError::io(&dir, e)),
    };
    for entry in entries {
        let entry = entry.map_err(|e| LabelError::io(&dir, e))?;
        if entry.file_name().to_string_lossy().starts_with(&prefix) {
            std::fs::remove_file(entry.path()).map_err(|e| LabelError::io(entry.path(), e))?;
            removed += 1;
        }
    }
    Ok(removed)
}

/// Makes a folder and fsyncs its parent so the new entry is durable.
pub fn create_dir_durable(dir: &Path) -> Result<()> {
    std::fs::create_dir_all(dir).map_err(|e| LabelError::io(dir, e))?;
    let parent = parent_dir(dir);
    RealFileOps
        .sync_dir(&parent)
        .map_err(|e| LabelError::io(&parent, e))
}

#[cfg(test)]
pub(crate) mod testing {
    //! A [`FileOps`] that fails its Nth step, for fault-injection tests.
    use super::*;
    use std::cell::Cell;

    /// Fails the step numbered `fail_at` (0-based, counting every call).
    pub struct FailingOps {
        pub fail_at: usize,
        pub calls: Cell<usize>,
    }

    impl FailingOps {
        pub fn new(fail_at: usize) -> Self {
            Self {
                fail_at,
                calls: Cell::new(0),
            }
        }
        fn step(&self) -> std::io::Result<()> {
            let n = self.calls.get();
            self.calls.set(n + 1);
            if n == self.fail_at {
                Err(std::io::Error::other(format!(
                    "injected failure at step {n}"
                )))
            } else {
                Ok(())
            }
        }
    }

    impl FileOps for FailingOps {
        fn create(&self, path: &Path) -> std::io::Result<File> {
            self.step()?;
            RealFileOps.create(path)
        }
        fn write_all(&self, file: &mut File, bytes: &[u8]) -> std::io::Result<()> {
            self.step()?;
            // Write half, then fail on the next step if asked: a torn temp file.
            let half = bytes.len() / 2;
            file.write_all(&bytes[..half])?;
            self.step()?;
            file.write_all(&bytes[half..])
        }
        fn sync_file(&self, file: &File) -> std::io::Result<()> {
            self.step()?;
            file.sync_all()
        }
        fn rename(&self, from: &Path, to: &Path) -> std::io::Result<()> {
            self.step()?;
            std::fs::rename(from, to)
        }
        fn sync_dir(&self, dir: &Path) -> std::io::Result<()> {
            self.step()?;
            RealFileOps.sync_dir(dir)
        }
    }
}

#[cfg(test)]
mod tests {
    use super::testing::FailingOps;
    use super::*;

    #[test]
    fn failure_at_every_step_before_rename_keeps_old_version() {
        let dir = tempfile::tempdir().unwrap();
        let target = dir.path().join("doc.json");
        std::fs::write(&target, b"old version").unwrap();
        // Steps: create, write(first half), write(second half), fsync, rename, fsync dir.
        for fail_at in 0..5 {
            let ops = FailingOps::new(fail_at);
            let err = write_atomic_with(&ops, &target, b"new version, longer").unwrap_err();
            assert!(err.to_string().contains("doc.json"), "{err}");
            assert_eq!(
                std::fs::read(&target).unwrap(),
                b"old version",
                "step {fail_at}"
            );
            let leftovers: Vec<_> = std::fs::read_dir(dir.path())
                .unwrap()
                .map(|e| e.unwrap().file_name())
                .collect();
            assert_eq!(
                leftovers.len(),
                1,
                "temp file left after step {fail_at}: {leftovers:?}"
            );
        }
    }

    #[test]
    fn failed_folder_sync_is_reported() {
        let dir = tempfile::tempdir().unwrap();
        let target = dir.path().join("doc.json");
        std::fs::write(&target, b"old").unwrap();
        let ops = FailingOps::new(5);
        assert!(write_atomic_with(&ops, &target, b"new").is_err());
    }

    #[test]
    fn success_replaces_and_leaves_no_temp() {
        let dir = tempfile::tempdir().unwrap();
        let target = dir.path().join("doc.json");
        std::fs::write(&target, b"old").unwrap();
        write_atomic(&target, b"new").unwrap();
        assert_eq!(std::fs::read(&target).unwrap(), b"new");
        assert_eq!(std::fs::read_dir(dir.path()).unwrap().count(), 1);
    }

    #[test]
    fn stale_temps_are_removed() {
        let dir = tempfile::tempdir().unwrap();
        let target = dir.path().join("doc.json");
        std::fs::write(dir.path().join(".doc.json.tmp-999-0"), b"torn").unwrap();
        std::fs::write(dir.path().join("other.json"), b"keep").unwrap();
        assert_eq!(remove_stale_temps(&target).unwrap(), 1);
        assert!(dir.path().join("other.json").exists());
    }
}
