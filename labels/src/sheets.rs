//! The sheet registry: adding raster sheets to a site and loading them back at
//! the canonical resolution.
//!
//! Registering copies the file into `sheets/` as given, decodes it once to prove
//! it is readable, records its SHA-256, pixel size and resolution (from the file,
//! else the site default, and which), and creates its empty label document.
//! Loading checks the file still has the registered hash, so labels are never
//! applied to a sheet that changed under them.

use crate::atomic::write_atomic;
use crate::clock::current_user;
use crate::document::{DpiSource, LabelDocument, SheetRecord};
use crate::error::{LabelError, Result};
use crate::hash::{sha256_file, sha256_hex};
use crate::raster::{canonical_size, decode_gray, to_canonical};
use crate::site::{Site, valid_name};
use crate::store::LabelStore;
use image::GrayImage;
use std::path::Path;

/// What registering one file did.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct Registered {
    /// The sheet's record.
    pub sheet: SheetRecord,
    /// False when the same file was already registered (nothing changed).
    pub added: bool,
}

/// Registers a raster file as a sheet of the site.
pub fn register_sheet(site: &Site, source: &Path) -> Result<Registered> {
    let stem = source
        .file_stem()
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or_default();
    if !valid_name(&stem) {
        return Err(LabelError::invalid(
            source,
            format!(
                "sheet id {stem:?} (the file name without extension) must be 1-64 letters, digits, '_', '-' or '.'; rename the file"
            ),
        ));
    }
    let bytes = std::fs::read(source).map_err(|e| LabelError::io(source, e))?;
    let sha256 = sha256_hex(&bytes);
    let store = LabelStore::new(site);
    if store.exists(&stem) {
        let existing = store.load(&stem)?;
        if existing.sheet.sha256 == sha256 {
            return Ok(Registered {
                sheet: existing.sheet,
                added: false,
            });
        }
        return Err(LabelError::invalid(
            source,
            format!(
                "a different sheet with id {stem:?} is already registered ({}); rename the new file or remove the old sheet first",
                existing.sheet.file
            ),
        ));
    }
    let (header, _) = decode_gray(source, site.config.max_sheet_pixels)?;
    let (source_dpi, dpi_source) = match header.dpi {
        Some(d) => (d, DpiSource::FileMetadata),
        None => (site.config.dpi, DpiSource::SiteDefault),
    };
    let (width, height) = canonical_size(header.width, header.height, source_dpi, site.config.dpi);
    let ext = source
        .extension()
        .map(|e| e.to_string_lossy().to_lowercase())
        .unwrap_or_else(|| "img".to_string());
    let rel = format!("sheets/{stem}.{ext}");
    let dest = site.root.join(&rel);
    let same_file = match (dest.canonicalize(), source.canonicalize()) {
        (Ok(a), Ok(b)) => a == b,
        _ => false,
    };
    if !same_file {
        if dest.exists() && sha256_file(&dest)? != sha256 {
            return Err(LabelError::invalid(
                &dest,
                "another file already has this name in sheets/; rename the new sheet",
            ));
        }
        write_atomic(&dest, &bytes)?;
    }
    let sheet = SheetRecord {
        id: stem,
        file: rel,
        sha256,
        source_width: header.width,
        source_height: header.height,
        source_dpi,
        dpi_source,
        width,
        height,
        dpi: site.config.dpi,
    };
    store.save(&LabelDocument::new(sheet.clone()), &current_user())?;
    Ok(Registered { sheet, added: true })
}

/// Loads a registered sheet at the canonical resolution, checking its hash and size.
pub fn load_sheet(site: &Site, sheet: &SheetRecord) -> Result<GrayImage> {
    let path = site.root.join(&sheet.file);
    let bytes_hash = sha256_file(&path)?;
    if bytes_hash != sheet.sha256 {
        return Err(LabelError::invalid(
            &path,
            format!(
                "the file's SHA-256 {bytes_hash} is not the registered {}; the sheet changed since it was labelled: restore it, or register the new scan under a new name",
                sheet.sha256
            ),
        ));
    }
    let (_, img) = decode_gray(&path, site.config.max_sheet_pixels)?;
    let img = to_canonical(img, sheet.source_dpi, sheet.dpi);
    if img.dimensions() != (sheet.width, sheet.height) {
        return Err(LabelError::invalid(
            &path,
            format!(
                "loaded at {}x{} but the label document says {}x{}",
                img.width(),
                img.height(),
                sheet.width,
                sheet.height
            ),
        ));
    }
    Ok(img)
}
