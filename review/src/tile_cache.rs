//! Encoded tiles of a sheet packed into one file in the site folder, so that a
//! restarted server shows a sheet at once instead of decoding it again.
//!
//! The file is `cache/review-tiles/<sha256>.tiles` under the site root, named by
//! the SHA-256 of the sheet file it was made from, so it can never be taken for
//! another sheet or for an older version of this one. It holds nothing but
//! pixels: deleting the folder loses nothing, the server makes it again. It is
//! written with [`write_atomic`] (temporary file, fsync, rename), and read back
//! only when its header, index and every tile's PNG signature check out; a file
//! that does not is ignored and rebuilt.
//!
//! Layout: the line [`MAGIC`], one line of JSON (the pyramid sizes and each
//! tile's offset and length in the data that follows, in
//! [`PyramidInfo::index`] order), then the PNGs back to back.

use crate::pyramid::{Pyramid, PyramidInfo};
use std::path::{Path, PathBuf};
use symtrust_labels::atomic::write_atomic;

/// First line of a tile pack (format version 1).
pub const MAGIC: &[u8] = b"symtrust review tiles 1\n";

/// Folder of the tile packs, relative to the site root.
pub const CACHE_DIR: &str = "cache/review-tiles";

/// What the folder is, for whoever finds it.
const NOTE: &str = "Tiles of the site's sheets for `symtrust review`, one file per sheet named by the \
SHA-256 of the sheet file. Nothing here is label data: delete the folder at any time and the \
review server makes the files again when it needs them.\n";

const PNG_SIGNATURE: &[u8] = &[0x89, b'P', b'N', b'G', 0x0d, 0x0a, 0x1a, 0x0a];

/// A sheet's tiles, encoded, in memory.
#[derive(Debug)]
pub struct PackedTiles {
    info: PyramidInfo,
    data: Vec<u8>,
    spans: Vec<(usize, usize)>,
}

#[derive(serde::Serialize, serde::Deserialize)]
struct Index {
    info: PyramidInfo,
    spans: Vec<(usize, usize)>,
}

/// Where the pack of the sheet with file hash `sha256` lives; `None` when the
/// hash is not 64 hex digits (it names a file).
pub fn pack_path(site_root: &Path, sha256: &str) -> Option<PathBuf> {
    (sha256.len() == 64 && sha256.bytes().all(|b| b.is_ascii_hexdigit()))
        .then(|| site_root.join(CACHE_DIR).join(format!("{sha256}.tiles")))
}

impl PackedTiles {
    /// Encodes every tile of `pyramid`.
    pub fn from_pyramid(pyramid: &Pyramid) -> Self {
        let mut data = Vec::new();
        let mut spans = Vec::new();
        for png in pyramid.all_tiles() {
            spans.push((data.len(), png.len()));
            data.extend_from_slice(png);
        }
        Self {
            info: pyramid.info(),
            data,
            spans,
        }
    }

    /// Pyramid sizes.
    pub fn info(&self) -> &PyramidInfo {
        &self.info
    }

    /// The PNG of one tile, or `None` when out of range.
    pub fn tile_png(&self, level: usize, col: u32, row: u32) -> Option<&[u8]> {
        let (start, len) = self.spans[self.info.index(level, col, row)?];
        Some(&self.data[start..start + len])
    }

    /// The whole pack as it is stored.
    pub fn to_bytes(&self) -> Vec<u8> {
        let index = serde_json::to_vec(&Index {
            info: self.info.clone(),
            spans: self.spans.clone(),
        })
        .expect("the index serialises");
        let mut out = Vec::with_capacity(MAGIC.len() + index.len() + 1 + self.data.len());
        out.extend_from_slice(MAGIC);
        out.extend_from_slice(&index);
        out.push(b'\n');
        out.extend_from_slice(&self.data);
        out
    }

    /// Reads a stored pack; `Err` says what is wrong with it.
    pub fn from_bytes(bytes: &[u8]) -> Result<Self, String> {
        let rest = bytes
            .strip_prefix(MAGIC)
            .ok_or("not a tile pack of this version")?;
        let nl = rest
            .iter()
            .position(|&b| b == b'\n')
            .ok_or("no end of the index line")?;
        let index: Index =
            serde_json::from_slice(&rest[..nl]).map_err(|e| format!("index: {e}"))?;
        let data = rest[nl + 1..].to_vec();
        if index.info.tile == 0 || index.info.levels.is_empty() {
            return Err("empty pyramid".into());
        }
        if index.spans.len() != index.info.tile_count() {
            return Err(format!(
                "{} tiles listed, the sizes need {}",
                index.spans.len(),
                index.info.tile_count()
            ));
        }
        for &(start, len) in &index.spans {
            let end = start.checked_add(len).ok_or("tile span overflows")?;
            if end > data.len() || !data[start..end].starts_with(PNG_SIGNATURE) {
                return Err("a tile lies outside the data or is not a PNG".into());
            }
        }
        Ok(Self {
            info: index.info,
            data,
            spans: index.spans,
        })
    }

    /// Reads the pack at `path`; `None` when it is absent or unusable.
    pub fn load(path: &Path) -> Option<Self> {
        Self::from_bytes(&std::fs::read(path).ok()?).ok()
    }

    /// Stores the pack at `path` atomically, making its folder when needed.
    pub fn store(&self, path: &Path) -> symtrust_labels::Result<()> {
        if let Some(dir) = path.parent() {
            std::fs::create_dir_all(dir).map_err(|e| symtrust_labels::LabelError::io(dir, e))?;
            let note = dir.join("README.txt");
            if !note.exists() {
                write_atomic(&note, NOTE.as_bytes())?;
            }
        }
        write_atomic(path, &self.to_bytes())
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use image::GrayImage;

    fn pyramid() -> Pyramid {
        Pyramid::build(GrayImage::from_fn(1100, 600, |x, y| {
            image::Luma([((x ^ y) % 251) as u8])
        }))
    }

    #[test]
    fn a_stored_pack_reads_back_tile_for_tile() {
        let p = pyramid();
        let packed = PackedTiles::from_pyramid(&p);
        let dir = tempfile::tempdir().unwrap();
        let path = pack_path(dir.path(), &"ab".repeat(32)).unwrap();
        packed.store(&path).unwrap();
        let back = PackedTiles::load(&path).unwrap();
        assert_eq!(back.info(), &p.info());
        for (l, &(cols, rows)) in p.info().grid().iter().enumerate() {
            for r in 0..rows {
                for c in 0..cols {
                    assert_eq!(back.tile_png(l, c, r), p.tile_png(l, c, r), "{l}/{c}/{r}");
                }
            }
        }
        assert!(back.tile_png(0, 9, 0).is_none());
    }

    #[test]
    fn damaged_packs_and_bad_names_are_refused() {
        let bytes = PackedTiles::from_pyramid(&pyramid()).to_bytes();
        assert!(PackedTiles::from_bytes(&bytes).is_ok());
        // Cut short (a write that never finished), wrong version, a tile's
        // bytes overwritten.
        assert!(PackedTiles::from_bytes(&bytes[..bytes.len() - 10]).is_err());
        let mut other = bytes.clone();
        other[MAGIC.len() - 2] = b'9';
        assert!(PackedTiles::from_bytes(&other).is_err());
        let header = MAGIC.len()
            + bytes[MAGIC.len()..]
                .iter()
                .position(|&b| b == b'\n')
                .unwrap()
            + 1;
        let mut bad = bytes.clone();
        bad[header] = 0;
        assert!(PackedTiles::from_bytes(&bad).is_err());
        assert!(pack_path(Path::new("/s"), "../../etc").is_none());
        assert!(pack_path(Path::new("/s"), &"g".repeat(64)).is_none());
    }
}
