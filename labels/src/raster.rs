//! Reading raster sheets safely: PNG, TIFF (including 1-bit bilevel and CCITT
//! Group 4 scans) and JPEG, converted to 8-bit grayscale (paper 255, ink 0).
//!
//! Untrusted files are handled in three steps: the header is read first and the
//! pixel count checked against the site's limit before any pixel is decoded;
//! the decoder runs with `image::Limits` on width, height and allocation; and it
//! runs under `catch_unwind`, so a decoder panic on a hostile file becomes an
//! error naming the file instead of a crash.
//!
//! Resolution comes from the file where it says (PNG `pHYs`, TIFF
//! `XResolution`/`ResolutionUnit`, JPEG JFIF density); a sheet at another
//! resolution than the site's is resampled with a triangle (bilinear) filter
//! whose support widens with the reduction, so thin lines are averaged rather
//! than dropped, to `round(size * canonical / source)` pixels.

use crate::error::{LabelError, Result};
use image::{GrayImage, ImageFormat, ImageReader, Limits};
use std::io::{BufReader, Read};
use std::path::Path;

/// Resolutions outside this range in file metadata are treated as absent.
pub const PLAUSIBLE_DPI: std::ops::RangeInclusive<f64> = 50.0..=2400.0;

/// What the header of a raster file says.
#[derive(Debug, Clone, PartialEq)]
pub struct RasterHeader {
    /// The file format.
    pub format: ImageFormat,
    /// Width in pixels.
    pub width: u32,
    /// Height in pixels.
    pub height: u32,
    /// Resolution from the metadata in dots per inch, when present and plausible.
    pub dpi: Option<f64>,
}

fn image_err(path: &Path, message: impl Into<String>) -> LabelError {
    LabelError::Image {
        path: path.to_path_buf(),
        message: message.into(),
    }
}

/// Reads the header of a raster file and checks its pixel count against `max_pixels`.
pub fn read_header(path: &Path, max_pixels: u64) -> Result<RasterHeader> {
    let reader = ImageReader::open(path)
        .map_err(|e| LabelError::io(path, e))?
        .with_guessed_format()
        .map_err(|e| LabelError::io(path, e))?;
    let format = match reader.format() {
        Some(f @ (ImageFormat::Png | ImageFormat::Tiff | ImageFormat::Jpeg)) => f,
        Some(other) => {
            return Err(image_err(
                path,
                format!(
                    "{other:?} is not a supported sheet format; convert it to PNG, TIFF or JPEG"
                ),
            ));
        }
        None => {
            return Err(image_err(
                path,
                "not a PNG, TIFF or JPEG image (unrecognised file signature)",
            ));
        }
    };
    let (width, height) = reader
        .into_dimensions()
        .map_err(|e| image_err(path, format!("unreadable image header: {e}")))?;
    check_pixel_limit(path, width, height, max_pixels)?;
    let dpi = read_dpi(path, format)
        .ok()
        .flatten()
        .filter(|d| PLAUSIBLE_DPI.contains(d));
    Ok(RasterHeader {
        format,
        width,
        height,
        dpi,
    })
}

fn check_pixel_limit(path: &Path, width: u32, height: u32, max_pixels: u64) -> Result<()> {
    let pixels = u64::from(width) * u64::from(height);
    if width == 0 || height == 0 {
        return Err(image_err(path, "image has zero width or height"));
    }
    if pixels > max_pixels {
        return Err(image_err(
            path,
            format!(
                "{width} x {height} = {pixels} pixels exceeds the limit of {max_pixels} (max_sheet_pixels in site.toml); refusing to decode"
            ),
        ));
    }
    Ok(())
}

/// Decodes a raster file to 8-bit grayscale under limits and `catch_unwind`.
pub fn decode_gray(path: &Path, max_pixels: u64) -> Result<(RasterHeader, GrayImage)> {
    let header = read_header(path, max_pixels)?;
    let bytes = std::fs::read(path).map_err(|e| LabelError::io(path, e))?;
    let format = header.format;
    let side = u32::try_from(max_pixels.min(u64::from(u32::MAX))).unwrap_or(u32::MAX);
    let decoded = std::panic::catch_unwind(move || {
        let mut reader = ImageReader::with_format(std::io::Cursor::new(bytes), format);
        let mut limits = Limits::default();
        limits.max_image_width = Some(side);
        limits.max_image_height = Some(side);
        // Room for a 16-bit RGBA decode of the largest accepted sheet.
        limits.max_alloc = Some(max_pixels.saturating_mul(8).max(64 << 20));
        reader.limits(limits);
        reader.decode()
    });
    let img = match decoded {
        Ok(Ok(img)) => img,
        Ok(Err(e)) => {
            return Err(image_err(
                path,
                format!("cannot decode image (truncated or corrupt?): {e}"),
            ));
        }
        Err(_) => {
            return Err(image_err(
                path,
                "the image decoder crashed on this file; it is corrupt or hostile",
            ));
        }
    };
    if (img.width(), img.height()) != (header.width, header.height) {
        return Err(image_err(
            path,
            format!(
                "decoded size {}x{} differs from the header's {}x{}",
                img.width(),
                img.height(),
                header.width,
                header.height
            ),
        ));
    }
    Ok((header, img.into_luma8()))
}

/// Resamples a sheet from `source_dpi` to `canonical_dpi` (unchanged when equal).
pub fn to_canonical(img: GrayImage, source_dpi: f64, canonical_dpi: f64) -> GrayImage {
    let (w, h) = canonical_size(img.width(), img.height(), source_dpi, canonical_dpi);
    if (w, h) == img.dimensions() {
        return img;
    }
    image::imageops::resize(&img, w, h, image::imageops::FilterType::Triangle)
}

/// Pixel size of a sheet after resampling from `source_dpi` to `canonical_dpi`.
pub fn canonical_size(width: u32, height: u32, source_dpi: f64, canonical_dpi: f64) -> (u32, u32) {
    let ratio = canonical_dpi / source_dpi;
    if (ratio - 1.0).abs() < 1e-9 {
        return (width, height);
    }
    let scale = |v: u32| ((f64::from(v) * ratio).round() as u32).max(1);
    (scale(width), scale(height))
}

/// Reads the resolution recorded in a file's metadata, in dots per inch.
fn read_dpi(path: &Path, format: ImageFormat) -> Result<Option<f64>> {
    let file = std::fs::File::open(path).map_err(|e| LabelError::io(path, e))?;
    let reader = BufReader::new(file);
    Ok(match format {
        ImageFormat::Png => png_dpi(reader),
        ImageFormat::Tiff => tiff_dpi(reader),
        ImageFormat::Jpeg => jpeg_dpi(reader),
        _ => None,
    })
}

fn png_dpi(reader: BufReader<std::fs::File>) -> Option<f64> {
    let decoder = png::Decoder::new(reader);
    let info_reader = decoder.read_info().ok()?;
    let dims = info_reader.info().pixel_dims?;
    match dims.unit {
        // pHYs stores pixels per metre; 0.0254 m per inch.
        png::Unit::Meter => Some(f64::from(dims.xppu) * 0.0254),
        png::Unit::Unspecified => None,
    }
}

fn tiff_dpi(reader: BufReader<std::fs::File>) -> Option<f64> {
    use tiff::tags::Tag;
    let mut decoder = tiff::decoder::Decoder::new(reader).ok()?;
    let x = match decoder.get_tag(Tag::XResolution).ok()? {
        tiff::decoder::ifd::Value::Rational(n, d) if d != 0 => f64::from(n) / f64::from(d),
        tiff::decoder::ifd::Value::Double(v) => v,
        tiff::decoder::ifd::Value::Float(v) => f64::from(v),
        _ => return None,
    };
    // ResolutionUnit: 1 none, 2 inch (the default), 3 centimetre (TIFF 6.0, section 8).
    let unit = decoder.get_tag_u32(Tag::ResolutionUnit).unwrap_or(2);
    match unit {
        2 => Some(x),
        3 => Some(x * 2.54),
        _ => None,
    }
}

fn jpeg_dpi(mut reader: BufReader<std::fs::File>) -> Option<f64> {
    // JFIF APP0 segment right after SOI: FF D8 FF E0 len(2) "JFIF\0" version(2)
    // units(1) Xdensity(2) Ydensity(2); units 1 = dots per inch, 2 = per cm.
    let mut head = [0u8; 18];
    reader.read_exact(&mut head).ok()?;
    if head[0..4] != [0xFF, 0xD8, 0xFF, 0xE0] || &head[6..11] != b"JFIF\0" {
        return None;
    }
    let density = f64::from(u16::from_be_bytes([head[14], head[15]]));
    match head[13] {
        1 => Some(density),
        2 => Some(density * 2.54),
        _ => None,
    }
}

/// Encodes a grayscale sheet as PNG with its resolution in the `pHYs` chunk.
pub fn encode_png_with_dpi(img: &GrayImage, dpi: f64) -> Result<Vec<u8>> {
    let mut out = Vec::new();
    {
        let mut encoder = png::Encoder::new(&mut out, img.width(), img.height());
        encoder.set_color(png::ColorType::Grayscale);
        encoder.set_depth(png::BitDepth::Eight);
        let ppm = (dpi / 0.0254).round() as u32;
        encoder.set_pixel_dims(Some(png::PixelDimensions {
            xppu: ppm,
            yppu: ppm,
            unit: png::Unit::Meter,
        }));
        let mut writer = encoder
            .write_header()
            .map_err(|e| image_err(Path::new("<memory>"), e.to_string()))?;
        writer
            .write_image_data(img.as_raw())
            .map_err(|e| image_err(Path::new("<memory>"), e.to_string()))?;
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn sheet(w: u32, h: u32) -> GrayImage {
        GrayImage::from_fn(w, h, |x, y| {
            image::Luma([if (x + y) % 7 == 0 { 0 } else { 255 }])
        })
    }

    #[test]
    fn png_resolution_round_trips() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("a.png");
        std::fs::write(&p, encode_png_with_dpi(&sheet(40, 30), 300.0).unwrap()).unwrap();
        let h = read_header(&p, 1 << 20).unwrap();
        // pHYs stores an integer pixels-per-metre: 300 dpi -> 11811 ppm -> 299.9994 dpi.
        assert!((h.dpi.unwrap() - 300.0).abs() < 0.01, "{:?}", h.dpi);
        assert_eq!((h.width, h.height), (40, 30));
    }

    #[test]
    fn pixel_limit_is_checked_before_decoding() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("big.png");
        std::fs::write(&p, encode_png_with_dpi(&sheet(100, 100), 200.0).unwrap()).unwrap();
        let msg = decode_gray(&p, 9_999).unwrap_err().to_string();
        assert!(msg.contains("big.png") && msg.contains("exceeds"), "{msg}");
    }

    #[test]
    fn truncated_png_is_refused_with_its_name() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("cut.png");
        let bytes = encode_png_with_dpi(&sheet(200, 200), 200.0).unwrap();
        std::fs::write(&p, &bytes[..bytes.len() / 2]).unwrap();
        let msg = decode_gray(&p, 1 << 20).unwrap_err().to_string();
        assert!(msg.contains("cut.png"), "{msg}");
    }

    #[test]
    fn not_an_image_is_refused() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("notes.png");
        std::fs::write(&p, b"this is text, not a drawing").unwrap();
        let msg = decode_gray(&p, 1 << 20).unwrap_err().to_string();
        assert!(
            msg.contains("notes.png") && msg.contains("unreadable"),
            "{msg}"
        );
    }

    /// A minimal uncompressed 1-bit bilevel TIFF (TIFF 6.0 baseline, section 3:
    /// BitsPerSample 1, PhotometricInterpretation 0 = WhiteIsZero), 16 x 2 pixels,
    /// 300 dpi, first row all black, second row alternating.
    fn bilevel_tiff() -> Vec<u8> {
        let mut t: Vec<u8> = b"II*\0".to_vec();
        t.extend_from_slice(&8u32.to_le_bytes()); // first IFD at offset 8
        let entries: Vec<(u16, u16, u32, u32)> = vec![
            (256, 3, 1, 16), // ImageWidth
            (257, 3, 1, 2),  // ImageLength
            (258, 3, 1, 1),  // BitsPerSample
            (259, 3, 1, 1),  // Compression: none
            (262, 3, 1, 0),  // Photometric: WhiteIsZero
            (273, 4, 1, 0),  // StripOffsets (patched below)
            (277, 3, 1, 1),  // SamplesPerPixel
            (278, 3, 1, 2),  // RowsPerStrip
            (279, 4, 1, 4),  // StripByteCounts
            (282, 5, 1, 0),  // XResolution (patched below)
            (283, 5, 1, 0),  // YResolution (patched below)
            (296, 3, 1, 2),  // ResolutionUnit: inch
        ];
        let ifd_len = 2 + entries.len() * 12 + 4;
        let rational_at = (8 + ifd_len) as u32;
        let data_at = rational_at + 8;
        t.extend_from_slice(&(entries.len() as u16).to_le_bytes());
        for (tag, typ, count, mut value) in entries {
            if tag == 273 {
                value = data_at;
            }
            if tag == 282 || tag == 283 {
                value = rational_at;
            }
            t.extend_from_slice(&tag.to_le_bytes());
            t.extend_from_slice(&typ.to_le_bytes());
            t.extend_from_slice(&count.to_le_bytes());
            if typ == 3 {
                t.extend_from_slice(&(value as u16).to_le_bytes());
                t.extend_from_slice(&[0, 0]);
            } else {
                t.extend_from_slice(&value.to_le_bytes());
            }
        }
        t.extend_from_slice(&0u32.to_le_bytes());
        t.extend_from_slice(&300u32.to_le_bytes());
        t.extend_from_slice(&1u32.to_le_bytes());
        t.extend_from_slice(&[0xFF, 0xFF, 0xAA, 0xAA]);
        t
    }

    #[test]
    fn bilevel_tiff_decodes_with_ink_black() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("scan.tif");
        std::fs::write(&p, bilevel_tiff()).unwrap();
        let (h, img) = decode_gray(&p, 1 << 20).unwrap();
        assert_eq!((h.width, h.height), (16, 2));
        assert_eq!(h.dpi, Some(300.0));
        // WhiteIsZero: a set bit is black ink.
        assert!(img.get_pixel(0, 0)[0] < 128 && img.get_pixel(15, 0)[0] < 128);
        assert!(img.get_pixel(0, 1)[0] < 128 && img.get_pixel(1, 1)[0] > 128);
    }

    #[test]
    fn resampling_keeps_physical_size() {
        // A 400 x 300 px scan at 400 dpi is 1 x 0.75 inch: 200 x 150 px at 200 dpi.
        let img = to_canonical(sheet(400, 300), 400.0, 200.0);
        assert_eq!(img.dimensions(), (200, 150));
        assert_eq!(canonical_size(1000, 10, 200.0, 200.0), (1000, 10));
    }
}
