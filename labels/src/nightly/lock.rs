//! One nightly run at a time: `nightly/lock` is held with an exclusive,
//! non-blocking `flock` for the whole run, and holds the holder's pid, host
//! and start time. The kernel drops the lock when the process dies, so a
//! crashed run cannot block the next one forever; its note stays in the file,
//! and the next run reports it as an interrupted run instead of taking over
//! silently.

use crate::clock::now_rfc3339;
use crate::error::{LabelError, Result};
use serde::{Deserialize, Serialize};
use std::fs::{File, TryLockError};
use std::io::{Read, Seek, SeekFrom, Write};
use std::path::{Path, PathBuf};

/// Who holds (or last held) the lock.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct LockNote {
    /// Process id.
    pub pid: u32,
    /// Host name.
    pub host: String,
    /// Start time, RFC 3339 UTC.
    pub started: String,
    /// Run id.
    pub run: String,
}

/// The held lock. [`RunLock::release`] clears the note and releases it; a drop
/// (or the process dying) releases it with the note left in place.
#[derive(Debug)]
pub struct RunLock {
    file: File,
    path: PathBuf,
}

/// What taking the lock found.
#[derive(Debug)]
pub enum Acquired {
    /// Taken; no earlier run was left unfinished.
    Clean(RunLock),
    /// Taken; the note of a run that died holding it was found.
    AfterCrash(RunLock, LockNote),
}

/// Takes the run lock at `path`, or fails naming the running holder.
pub fn acquire(path: &Path, note: &LockNote) -> Result<Acquired> {
    if let Some(parent) = path.parent() {
        std::fs::create_dir_all(parent).map_err(|e| LabelError::io(parent, e))?;
    }
    let mut file = std::fs::OpenOptions::new()
        .create(true)
        .truncate(false)
        .read(true)
        .write(true)
        .open(path)
        .map_err(|e| LabelError::io(path, e))?;
    match file.try_lock() {
        Ok(()) => {}
        Err(TryLockError::WouldBlock) => {
            let mut text = String::new();
            let _ = file.read_to_string(&mut text);
            let holder = serde_json::from_str::<LockNote>(&text)
                .map(|n| {
                    format!(
                        "run {} (pid {} on {}, started {})",
                        n.run, n.pid, n.host, n.started
                    )
                })
                .unwrap_or_else(|_| "another run".into());
            return Err(LabelError::invalid(
                path,
                format!(
                    "{holder} is still running; wait for it to finish (two runs never overlap)"
                ),
            ));
        }
        Err(TryLockError::Error(e)) => return Err(LabelError::io(path, e)),
    }
    let mut text = String::new();
    file.read_to_string(&mut text)
        .map_err(|e| LabelError::io(path, e))?;
    let previous = serde_json::from_str::<LockNote>(text.trim()).ok();
    let mut bytes = serde_json::to_vec(note).expect("the note serialises");
    bytes.push(b'\n');
    file.set_len(0).map_err(|e| LabelError::io(path, e))?;
    file.seek(SeekFrom::Start(0))
        .map_err(|e| LabelError::io(path, e))?;
    file.write_all(&bytes)
        .map_err(|e| LabelError::io(path, e))?;
    file.sync_all().map_err(|e| LabelError::io(path, e))?;
    let lock = RunLock {
        file,
        path: path.to_path_buf(),
    };
    Ok(match previous {
        Some(n) => Acquired::AfterCrash(lock, n),
        None => Acquired::Clean(lock),
    })
}

impl RunLock {
    /// Clears the note (the run finished) and releases the lock.
    pub fn release(self) -> Result<()> {
        self.file
            .set_len(0)
            .map_err(|e| LabelError::io(&self.path, e))?;
        self.file
            .sync_all()
            .map_err(|e| LabelError::io(&self.path, e))?;
        Ok(())
    }
}

/// A note for this process now.
pub fn note_now(run: &str, host: &str) -> LockNote {
    LockNote {
        pid: std::process::id(),
        host: host.to_string(),
        started: now_rfc3339(),
        run: run.to_string(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn one_holder_at_a_time_and_a_dead_holder_is_reported() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("nightly/lock");
        let a = note_now("r1", "h");
        let Acquired::Clean(held) = acquire(&path, &a).unwrap() else {
            panic!("a fresh lock is clean");
        };
        let err = acquire(&path, &note_now("r2", "h")).unwrap_err();
        assert!(err.to_string().contains("run r1"), "{err}");
        assert!(err.to_string().contains("still running"), "{err}");
        // Dropped without release, as when the process dies: the note stays.
        drop(held);
        match acquire(&path, &note_now("r3", "h")).unwrap() {
            Acquired::AfterCrash(lock, note) => {
                assert_eq!(note.run, "r1");
                lock.release().unwrap();
            }
            Acquired::Clean(_) => panic!("the crashed run must be reported"),
        }
        // Released properly: the next one is clean.
        assert!(matches!(
            acquire(&path, &note_now("r4", "h")).unwrap(),
            Acquired::Clean(_)
        ));
    }
}
