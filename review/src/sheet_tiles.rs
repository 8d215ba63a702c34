//! The tiles of every sheet as the server hands them out, made ahead of the
//! first request.
//!
//! A sheet's tiles come, fastest first, from the packed tiles in memory, from
//! its tile pack on disk ([`crate::tile_cache`]), or from its pyramid built now
//! (decoding the sheet); a built pyramid is packed right after, in the
//! background, and the pack stored for the next start. When the server starts,
//! [`TileStore::prepare_all`] does this for the [`PREPARED_AHEAD`] most
//! recently labelled sheets, so that a sheet is usually ready before anyone
//! opens it.
//! Sheets are kept in memory for the [`KEPT`] most recently used only.

use crate::pyramid::{Pyramid, PyramidInfo};
use crate::tile_cache::{PackedTiles, pack_path};
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::{Arc, Mutex, OnceLock};
use std::time::SystemTime;
use symtrust_labels::document::SheetRecord;
use symtrust_labels::sheets::load_sheet;
use symtrust_labels::site::Site;
use symtrust_labels::store::LabelStore;

/// Sheets whose tiles are kept in memory.
pub const KEPT: usize = 3;

/// Sheets whose tiles are made when the server starts (the most recently
/// labelled); others are made when first opened. A pack takes about as much
/// disk as its sheet file, so a site of many sheets is not doubled at once.
pub const PREPARED_AHEAD: usize = 20;

type Built = Option<Result<Arc<Pyramid>, String>>;

#[derive(Debug)]
struct Entry {
    record: SheetRecord,
    packed: OnceLock<Arc<PackedTiles>>,
    built: Mutex<Built>,
    packing: AtomicBool,
}

/// Tiles of one sheet, ready to serve.
#[derive(Debug, Clone)]
pub enum Tiles {
    /// Every tile encoded.
    Packed(Arc<PackedTiles>),
    /// The pyramid, tiles encoded on first request.
    Built(Arc<Pyramid>),
}

impl Tiles {
    /// Pyramid sizes.
    pub fn info(&self) -> PyramidInfo {
        match self {
            Tiles::Packed(p) => p.info().clone(),
            Tiles::Built(p) => p.info(),
        }
    }

    /// The PNG of one tile, or `None` when out of range.
    pub fn tile_png(&self, level: usize, col: u32, row: u32) -> Option<Vec<u8>> {
        match self {
            Tiles::Packed(p) => p.tile_png(level, col, row).map(<[u8]>::to_vec),
            Tiles::Built(p) => p.tile_png(level, col, row).map(<[u8]>::to_vec),
        }
    }
}

/// The tiles of a site's sheets.
#[derive(Debug)]
pub struct TileStore {
    site: Site,
    entries: Mutex<Vec<Arc<Entry>>>,
}

fn lock<T>(m: &Mutex<T>) -> std::sync::MutexGuard<'_, T> {
    m.lock().unwrap_or_else(|p| p.into_inner())
}

fn build(site: &Site, record: &SheetRecord) -> Result<Arc<Pyramid>, String> {
    load_sheet(site, record)
        .map(|img| Arc::new(Pyramid::build(img)))
        .map_err(|e| e.to_string())
}

impl TileStore {
    /// An empty store for `site`.
    pub fn new(site: Site) -> Self {
        Self {
            site,
            entries: Mutex::new(Vec::new()),
        }
    }

    /// The kept entry of sheet `id` (any record when `record` is `None`), moved
    /// to most recently used; a new one for `record` when none matches.
    fn entry(&self, id: &str, record: Option<&SheetRecord>) -> Option<Arc<Entry>> {
        let mut entries = lock(&self.entries);
        if let Some(pos) = entries
            .iter()
            .position(|e| e.record.id == id && record.is_none_or(|r| *r == e.record))
        {
            let e = entries.remove(pos);
            entries.push(Arc::clone(&e));
            return Some(e);
        }
        let record = record?;
        entries.retain(|e| e.record.id != id);
        if entries.len() >= KEPT {
            entries.remove(0);
        }
        let e = Arc::new(Entry {
            record: record.clone(),
            packed: OnceLock::new(),
            built: Mutex::new(None),
            packing: AtomicBool::new(false),
        });
        entries.push(Arc::clone(&e));
        Some(e)
    }

    /// The tiles of sheet `id`; `record` is asked for only when the sheet is not
    /// kept in memory.
    pub fn tiles_by_id(
        &self,
        id: &str,
        record: impl FnOnce() -> Result<SheetRecord, String>,
    ) -> Result<Tiles, String> {
        let entry = match self.entry(id, None) {
            Some(e) => e,
            None => {
                let r = record()?;
                self.entry(id, Some(&r)).expect("a record was given")
            }
        };
        self.tiles_of(&entry)
    }

    /// The tiles of the sheet `record` describes.
    pub fn tiles(&self, record: &SheetRecord) -> Result<Tiles, String> {
        let entry = self
            .entry(&record.id, Some(record))
            .expect("a record was given");
        self.tiles_of(&entry)
    }

    /// True when the tiles of `record`'s sheet are packed in memory.
    pub fn is_packed(&self, record: &SheetRecord) -> bool {
        lock(&self.entries)
            .iter()
            .any(|e| e.record == *record && e.packed.get().is_some())
    }

    fn tiles_of(&self, entry: &Arc<Entry>) -> Result<Tiles, String> {
        let tiles = self.packed_or_built(entry)?;
        if let Tiles::Built(pyramid) = &tiles
            && !entry.packing.swap(true, Ordering::SeqCst)
        {
            let (site, entry, pyramid) =
                (self.site.clone(), Arc::clone(entry), Arc::clone(pyramid));
            std::thread::spawn(move || pack(&site, &entry, &pyramid));
        }
        Ok(tiles)
    }

    /// The packed tiles from memory or disk, else the pyramid (built now when
    /// it is not yet).
    fn packed_or_built(&self, entry: &Entry) -> Result<Tiles, String> {
        if let Some(p) = entry.packed.get() {
            return Ok(Tiles::Packed(Arc::clone(p)));
        }
        let mut built = lock(&entry.built);
        // Packed while this request waited for the lock.
        if let Some(p) = entry.packed.get() {
            return Ok(Tiles::Packed(Arc::clone(p)));
        }
        if built.is_none() {
            if let Some(p) =
                pack_path(&self.site.root, &entry.record.sha256).and_then(|p| PackedTiles::load(&p))
            {
                let p = Arc::new(p);
                let _ = entry.packed.set(Arc::clone(&p));
                return Ok(Tiles::Packed(p));
            }
            *built = Some(build(&self.site, &entry.record));
        }
        Ok(Tiles::Built(built.clone().expect("set above")?))
    }

    /// Makes the tiles of the [`PREPARED_AHEAD`] most recently labelled sheets
    /// of `store` ahead of use: the first [`KEPT`] into memory (and their packs
    /// onto disk), the rest onto disk only. Blocks; run it on a thread of its
    /// own.
    pub fn prepare_all(&self, store: &LabelStore) {
        let Ok(ids) = store.sheet_ids() else { return };
        let changed = |id: &String| {
            std::fs::metadata(store.path(id))
                .and_then(|m| m.modified())
                .unwrap_or(SystemTime::UNIX_EPOCH)
        };
        let mut ids: Vec<(SystemTime, String)> =
            ids.into_iter().map(|id| (changed(&id), id)).collect();
        // Most recently changed first; ties in list order.
        ids.sort_by(|a, b| b.0.cmp(&a.0).then_with(|| a.1.cmp(&b.1)));
        for (n, (_, id)) in ids.iter().take(PREPARED_AHEAD).enumerate() {
            let Ok(doc) = store.load(id) else { continue };
            if n < KEPT {
                let entry = self
                    .entry(id, Some(&doc.sheet))
                    .expect("a record was given");
                // Packed here rather than on a thread of its own, so the next
                // sheet does not compete with it for the processor.
                if let Ok(Tiles::Built(pyramid)) = self.packed_or_built(&entry)
                    && !entry.packing.swap(true, Ordering::SeqCst)
                {
                    pack(&self.site, &entry, &pyramid);
                }
            } else if let Some(path) = pack_path(&self.site.root, &doc.sheet.sha256)
                && !path.exists()
                && let Ok(pyramid) = build(&self.site, &doc.sheet)
            {
                let _ = PackedTiles::from_pyramid(&pyramid).store(&path);
            }
        }
    }
}

/// Packs a built pyramid, stores the pack (a read-only site keeps it in memory
/// only) and frees the pyramid.
fn pack(site: &Site, entry: &Entry, pyramid: &Pyramid) {
    let packed = PackedTiles::from_pyramid(pyramid);
    if let Some(path) = pack_path(&site.root, &entry.record.sha256) {
        let _ = packed.store(&path);
    }
    let _ = entry.packed.set(Arc::new(packed));
    *lock(&entry.built) = None;
}
