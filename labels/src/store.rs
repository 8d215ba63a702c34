//! The label store: reading and saving label documents without ever losing one.
//!
//! A save holds an exclusive lock on `labels/.<sheet>.lock` (std `File::lock`, which
//! is `flock` on Unix and is dropped by the kernel if the process dies) across
//! "read the revision on disk, compare with the revision the caller read, write,
//! rename". A caller whose copy is stale is refused with who changed the sheet and
//! when. The lock file is never deleted. Leftover temporary files of a crashed
//! writer are removed under the same lock.

use crate::atomic::{FileOps, RealFileOps, remove_stale_temps, write_atomic_with};
use crate::clock::now_rfc3339;
use crate::document::{LabelDocument, read_document, render_document};
use crate::error::{LabelError, Result};
use crate::site::{Site, valid_name};
use std::fs::File;
use std::path::{Path, PathBuf};

/// An exclusive lock on one sheet's label document, released on drop.
#[derive(Debug)]
pub struct SheetLock {
    _file: File,
}

/// Takes the exclusive lock of the document at `doc_path` (waits for other writers).
pub fn lock_document(doc_path: &Path) -> Result<SheetLock> {
    let name = doc_path
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_default();
    let lock_path = doc_path.with_file_name(format!(".{name}.lock"));
    let file = std::fs::OpenOptions::new()
        .create(true)
        .truncate(false)
        .write(true)
        .open(&lock_path)
        .map_err(|e| LabelError::io(&lock_path, e))?;
    file.lock().map_err(|e| LabelError::io(&lock_path, e))?;
    remove_stale_temps(doc_path)?;
    Ok(SheetLock { _file: file })
}

/// Reads, lists and saves the label documents of a site.
#[derive(Debug, Clone)]
pub struct LabelStore {
    dir: PathBuf,
}

impl LabelStore {
    /// The store of a site (`<site>/labels`).
    pub fn new(site: &Site) -> Self {
        Self {
            dir: site.labels_dir(),
        }
    }

    /// A store over any folder of label documents.
    pub fn at(dir: &Path) -> Self {
        Self {
            dir: dir.to_path_buf(),
        }
    }

    /// The path of a sheet's document.
    pub fn path(&self, sheet_id: &str) -> PathBuf {
        self.dir.join(format!("{sheet_id}.json"))
    }

    /// Sheet ids with a document, sorted.
    pub fn sheet_ids(&self) -> Result<Vec<String>> {
        let mut ids = Vec::new();
        let entries = std::fs::read_dir(&self.dir).map_err(|e| LabelError::io(&self.dir, e))?;
        for entry in entries {
            let entry = entry.map_err(|e| LabelError::io(&self.dir, e))?;
            let name = entry.file_name().to_string_lossy().into_owned();
            if let Some(stem) = name.strip_suffix(".json")
                && valid_name(stem)
            {
                ids.push(stem.to_string());
            }
        }
        ids.sort();
        Ok(ids)
    }

    /// Reads a sheet's document, checking that it describes that sheet.
    pub fn load(&self, sheet_id: &str) -> Result<LabelDocument> {
        let path = self.path(sheet_id);
        let doc = read_document(&path)?;
        if doc.sheet.id != sheet_id {
            return Err(LabelError::invalid(
                &path,
                format!(
                    "the document describes sheet {:?}, not {sheet_id:?}; rename the file to {}.json",
                    doc.sheet.id, doc.sheet.id
                ),
            ));
        }
        Ok(doc)
    }

    /// True when the sheet has a document.
    pub fn exists(&self, sheet_id: &str) -> bool {
        self.path(sheet_id).is_file()
    }

    /// Saves `doc` as the next revision after `doc.revision` (the revision the
    /// caller read; 0 for a new document). Refuses a stale revision. Returns the
    /// saved document with its new revision, author and time.
    pub fn save(&self, doc: &LabelDocument, who: &str) -> Result<LabelDocument> {
        self.save_with(&RealFileOps, doc, who)
    }

    /// [`LabelStore::save`] through the given file operations (fault injection).
    pub fn save_with(
        &self,
        ops: &dyn FileOps,
        doc: &LabelDocument,
        who: &str,
    ) -> Result<LabelDocument> {
        let path = self.path(&doc.sheet.id);
        doc.check_structure(&path)?;
        let _lock = lock_document(&path)?;
        let on_disk = if path.exists() {
            Some(read_document(&path)?)
        } else {
            None
        };
        let found = on_disk.as_ref().map_or(0, |d| d.revision);
        if found != doc.revision {
            let (by, at) = on_disk
                .map(|d| (d.changed_by, d.changed_at))
                .unwrap_or_else(|| ("nobody".to_string(), "never".to_string()));
            return Err(LabelError::StaleRevision {
                path,
                expected: doc.revision,
                found,
                changed_by: by,
                changed_at: at,
            });
        }
        let mut next = doc.clone();
        next.revision = found + 1;
        next.changed_by = who.to_string();
        next.changed_at = now_rfc3339();
        write_atomic_with(ops, &path, &render_document(&next))?;
        Ok(next)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::atomic::testing::FailingOps;
    use crate::document::tests::sample_doc;

    #[test]
    fn save_bumps_revision_and_refuses_stale_copy() {
        let dir = tempfile::tempdir().unwrap();
        let store = LabelStore::at(dir.path());
        let first = store.save(&sample_doc(), "ana").unwrap();
        assert_eq!(first.revision, 1);
        let mut a = store.load("s1").unwrap();
        let b = store.load("s1").unwrap();
        a.symbols[0].bbox.x += 1.0;
        store.save(&a, "ana").unwrap();
        let err = store.save(&b, "ben").unwrap_err();
        let msg = err.to_string();
        assert!(
            matches!(
                err,
                LabelError::StaleRevision {
                    expected: 1,
                    found: 2,
                    ..
                }
            ),
            "{msg}"
        );
        assert!(msg.contains("ana"), "says who changed it: {msg}");
        assert_eq!(store.load("s1").unwrap().symbols[0].bbox.x, 101.0);
    }

    #[test]
    fn failure_in_the_middle_of_a_save_keeps_the_previous_document() {
        let dir = tempfile::tempdir().unwrap();
        let store = LabelStore::at(dir.path());
        let saved = store.save(&sample_doc(), "ana").unwrap();
        let before = std::fs::read(store.path("s1")).unwrap();
        let mut changed = saved.clone();
        changed.symbols[0].class = "valve".into();
        // Steps of an atomic write: create, write half, write rest, fsync, rename.
        for fail_at in 0..5 {
            let err = store
                .save_with(&FailingOps::new(fail_at), &changed, "ben")
                .unwrap_err();
            assert!(err.to_string().contains("s1.json"), "{err}");
            assert_eq!(
                std::fs::read(store.path("s1")).unwrap(),
                before,
                "step {fail_at}"
            );
            assert_eq!(store.load("s1").unwrap().revision, 1);
        }
        // The next save succeeds and no temporary file survives.
        store.save(&changed, "ben").unwrap();
        let names: Vec<String> = std::fs::read_dir(dir.path())
            .unwrap()
            .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
            .collect();
        assert!(names.iter().all(|n| !n.contains(".tmp-")), "{names:?}");
    }

    #[test]
    fn concurrent_writers_never_both_win() {
        let dir = tempfile::tempdir().unwrap();
        let store = LabelStore::at(dir.path());
        store.save(&sample_doc(), "ana").unwrap();
        let copy = store.load("s1").unwrap();
        let wins: usize = std::thread::scope(|s| {
            let handles: Vec<_> = (0..8)
                .map(|i| {
                    let store = store.clone();
                    let mut c = copy.clone();
                    c.symbols[0].bbox.x = f64::from(i);
                    s.spawn(move || store.save(&c, &format!("w{i}")).is_ok() as usize)
                })
                .collect();
            handles.into_iter().map(|h| h.join().unwrap()).sum()
        });
        assert_eq!(wins, 1);
        assert_eq!(store.load("s1").unwrap().revision, 2);
    }

    #[test]
    fn document_under_wrong_name_is_refused() {
        let dir = tempfile::tempdir().unwrap();
        let store = LabelStore::at(dir.path());
        store.save(&sample_doc(), "ana").unwrap();
        std::fs::rename(store.path("s1"), store.path("s2")).unwrap();
        assert!(store.load("s2").unwrap_err().to_string().contains("rename"));
    }
}
