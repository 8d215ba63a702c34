//! Pictures cut from the sheets with the `image` crate: the overlay of each
//! held-out sheet (hits, false alarms, misses, ignored regions) and the crops
//! of the error galleries.
//!
//! The coding, the same everywhere in a report:
//! - hit: thin solid blue box;
//! - false alarm: dashed orange box with a small cross at its top-right corner;
//! - miss: thick solid magenta box with a filled flag at its top-left corner;
//! - ignored region: dotted grey box.
//!
//! The drawing itself is faded to 45 % contrast, so the marks stand out.

use crate::palette::{FALSE_ALARM, HIT, IGNORED, INK, MISS, rgb};
use image::{DynamicImage, GrayImage, ImageEncoder, Rgb, RgbImage};
use plotters::prelude::*;
use symtrust_labels::BBox;

/// What a box on a sheet picture is.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Fate {
    /// A kept detection that found a symbol of its class.
    Hit,
    /// A kept detection that found none.
    FalseAlarm,
    /// A symbol no kept detection found.
    Miss,
    /// A region left out of the evaluation.
    Ignored,
}

impl Fate {
    /// Colour of the fate.
    pub fn color(self) -> RGBColor {
        match self {
            Fate::Hit => HIT,
            Fate::FalseAlarm => FALSE_ALARM,
            Fate::Miss => MISS,
            Fate::Ignored => IGNORED,
        }
    }

    /// Short legend text (inside the pictures).
    pub fn legend(self) -> &'static str {
        match self {
            Fate::Hit => "hit (found)",
            Fate::FalseAlarm => "false alarm",
            Fate::Miss => "missed symbol",
            Fate::Ignored => "not evaluated",
        }
    }

    /// Long legend text (in the pages), saying how it is drawn.
    pub fn describe(self) -> &'static str {
        match self {
            Fate::Hit => "hit: a symbol found (thin solid box)",
            Fate::FalseAlarm => {
                "false alarm: reported, no symbol of that class there (dashed box, cross at its corner)"
            }
            Fate::Miss => "missed symbol: labelled, not found (thick box, flag at its corner)",
            Fate::Ignored => "not evaluated: title block, legend (dotted box)",
        }
    }
}

/// A box to draw and its fate.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Marked {
    /// Box in sheet pixels (canonical resolution).
    pub bbox: BBox,
    /// What it is.
    pub fate: Fate,
}

/// Encodes an image as PNG.
pub fn encode_png(img: &DynamicImage) -> image::ImageResult<Vec<u8>> {
    let mut out = Vec::new();
    let enc = image::codecs::png::PngEncoder::new_with_quality(
        &mut out,
        image::codecs::png::CompressionType::Default,
        image::codecs::png::FilterType::Adaptive,
    );
    let rgb = img.to_rgb8();
    enc.write_image(
        rgb.as_raw(),
        rgb.width(),
        rgb.height(),
        image::ExtendedColorType::Rgb8,
    )?;
    Ok(out)
}

/// The sheet faded to 45 % contrast, as colour.
fn faded(sheet: &GrayImage) -> RgbImage {
    let mut out = RgbImage::new(sheet.width(), sheet.height());
    for (o, p) in out.pixels_mut().zip(sheet.pixels()) {
        // Faded, then kept to 32 grey levels: the overlay compresses far better
        // and the drawing reads the same.
        let v = 255 - ((255 - u32::from(p.0[0])) * 45 / 100) as u8;
        let v = v | 7;
        *o = Rgb([v, v, v]);
    }
    out
}

fn put(img: &mut RgbImage, x: i64, y: i64, c: Rgb<u8>) {
    if x >= 0 && y >= 0 && (x as u32) < img.width() && (y as u32) < img.height() {
        img.put_pixel(x as u32, y as u32, c);
    }
}

/// Draws the outline of `[x0, x1] x [y0, y1]` with lines `t` pixels thick,
/// solid or with `(on, off)` dashes.
fn outline(
    img: &mut RgbImage,
    r: (i64, i64, i64, i64),
    t: i64,
    c: Rgb<u8>,
    dash: Option<(i64, i64)>,
) {
    let (x0, y0, x1, y1) = r;
    let on = |k: i64| match dash {
        None => true,
        Some((a, b)) => k.rem_euclid(a + b) < a,
    };
    for x in x0..=x1 {
        if on(x - x0) {
            for k in 0..t {
                put(img, x, y0 + k, c);
                put(img, x, y1 - k, c);
            }
        }
    }
    for y in y0..=y1 {
        if on(y - y0) {
            for k in 0..t {
                put(img, x0 + k, y, c);
                put(img, x1 - k, y, c);
            }
        }
    }
}

/// Draws one marked box at `scale` (picture pixels per sheet pixel), lines of
/// base thickness `t` pixels.
fn draw_marked(img: &mut RgbImage, m: &Marked, scale: f64, t: i64) {
    let b = &m.bbox;
    let pad = (2.0 * t as f64) as i64;
    let r = (
        (b.x * scale).floor() as i64 - pad,
        (b.y * scale).floor() as i64 - pad,
        ((b.x + b.w) * scale).ceil() as i64 + pad,
        ((b.y + b.h) * scale).ceil() as i64 + pad,
    );
    let c = rgb(m.fate.color());
    match m.fate {
        Fate::Hit => outline(img, r, t, c, None),
        Fate::FalseAlarm => {
            outline(img, r, t, c, Some((4 * t, 3 * t)));
            // A cross at the top-right corner.
            let (cx, cy, k) = (r.2 + 2 * t, r.1 - 2 * t, 3 * t);
            for d in -k..=k {
                for w in 0..t {
                    put(img, cx + d + w, cy + d, c);
                    put(img, cx + d + w, cy - d, c);
                }
            }
        }
        Fate::Miss => {
            outline(img, r, 2 * t, c, None);
            // A filled flag (triangle) above the top-left corner.
            let k = 5 * t;
            for dy in 0..k {
                for dx in 0..(k - dy) {
                    put(img, r.0 + dx, r.1 - k + dy, c);
                }
            }
        }
        Fate::Ignored => outline(img, r, t.max(1), c, Some((t.max(1), 3 * t.max(1)))),
    }
}

/// The overlay of a sheet: faded drawing, every marked box, and a legend band
/// along the bottom. `max_width` limits the width (downscaled overview); `None`
/// keeps the full resolution.
pub fn overlay(
    sheet: &GrayImage,
    marks: &[Marked],
    max_width: Option<u32>,
) -> Result<RgbImage, String> {
    let scale = match max_width {
        Some(w) if w < sheet.width() => f64::from(w) / f64::from(sheet.width()),
        _ => 1.0,
    };
    let base = if scale < 1.0 {
        let (w, h) = (
            (f64::from(sheet.width()) * scale).round().max(1.0) as u32,
            (f64::from(sheet.height()) * scale).round().max(1.0) as u32,
        );
        image::imageops::resize(sheet, w, h, image::imageops::FilterType::Triangle)
    } else {
        sheet.clone()
    };
    let mut img = faded(&base);
    let t = if scale < 1.0 {
        2
    } else {
        (f64::from(sheet.width()) / 1200.0).round().max(2.0) as i64
    };
    // Ignored first, then hits, false alarms and misses on top.
    for fate in [Fate::Ignored, Fate::Hit, Fate::FalseAlarm, Fate::Miss] {
        for m in marks.iter().filter(|m| m.fate == fate) {
            draw_marked(&mut img, m, scale, t);
        }
    }
    with_legend(img, t)
}

/// Appends a legend band below `img`: a sample box and a short text per fate.
fn with_legend(img: RgbImage, t: i64) -> Result<RgbImage, String> {
    crate::plot::ensure_font().map_err(|e| e.to_string())?;
    let s = (t as f64 / 2.0).max(1.0);
    let band_h = (40.0 * s) as u32;
    let (w, h) = (img.width(), img.height());
    let font = (crate::plot::FONT, 15.0 * s).into_font().color(&INK);
    let fates = [Fate::Hit, Fate::FalseAlarm, Fate::Miss, Fate::Ignored];
    let mut buf = vec![255u8; w as usize * band_h as usize * 3];
    let mut starts = Vec::new();
    {
        let root = BitMapBackend::with_buffer(&mut buf, (w, band_h)).into_drawing_area();
        let mut x = (10.0 * s) as i32;
        for fate in fates {
            starts.push(x);
            let text_x = x + (46.0 * s) as i32;
            root.draw(&Text::new(
                fate.legend(),
                (text_x, (13.0 * s) as i32),
                font.clone(),
            ))
            .map_err(crate::plot::pe)?;
            let (tw, _) = root
                .estimate_text_size(fate.legend(), &font)
                .map_err(crate::plot::pe)?;
            x = text_x + tw as i32 + (26.0 * s) as i32;
        }
        root.present().map_err(crate::plot::pe)?;
    }
    let mut band = RgbImage::from_raw(w, band_h, buf).ok_or("legend buffer size")?;
    for (fate, x) in fates.iter().zip(&starts) {
        let sample = Marked {
            bbox: BBox::new(f64::from(*x) + 3.0 * t as f64, 13.0 * s, 20.0 * s, 14.0 * s),
            fate: *fate,
        };
        draw_marked(&mut band, &sample, 1.0, t);
    }
    let mut out = RgbImage::from_pixel(w, h + band_h, Rgb([255, 255, 255]));
    image::imageops::replace(&mut out, &img, 0, 0);
    image::imageops::replace(&mut out, &band, 0, i64::from(h));
    Ok(out)
}

/// A gallery crop: the box with context around it, scaled to fit `side`
/// pixels, the box drawn in its fate's coding.
pub fn crop(sheet: &GrayImage, m: &Marked, side: u32) -> RgbImage {
    let b = &m.bbox;
    let pad = (b.w.max(b.h) * 0.6).max(12.0);
    let x0 = (b.x - pad).floor().max(0.0) as u32;
    let y0 = (b.y - pad).floor().max(0.0) as u32;
    let x1 = ((b.x + b.w + pad).ceil() as u32).min(sheet.width());
    let y1 = ((b.y + b.h + pad).ceil() as u32).min(sheet.height());
    let (cw, ch) = (x1.saturating_sub(x0).max(1), y1.saturating_sub(y0).max(1));
    let cut = image::imageops::crop_imm(
        sheet,
        x0.min(sheet.width() - 1),
        y0.min(sheet.height() - 1),
        cw,
        ch,
    )
    .to_image();
    let scale = f64::from(side) / f64::from(cw.max(ch));
    let (w, h) = (
        (f64::from(cw) * scale).round().max(1.0) as u32,
        (f64::from(ch) * scale).round().max(1.0) as u32,
    );
    let resized = image::imageops::resize(&cut, w, h, image::imageops::FilterType::Triangle);
    let mut img = faded(&resized);
    // Keep the drawing darker in a crop: it is small.
    for (o, p) in img.pixels_mut().zip(resized.pixels()) {
        let v = 255 - ((255 - u32::from(p.0[0])) * 80 / 100) as u8;
        *o = Rgb([v, v, v]);
    }
    let local = Marked {
        bbox: BBox::new(b.x - f64::from(x0), b.y - f64::from(y0), b.w, b.h),
        fate: m.fate,
    };
    draw_marked(&mut img, &local, scale, 2);
    img
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn marks_land_on_the_box_edges() {
        let sheet = GrayImage::from_pixel(200, 100, image::Luma([255]));
        let marks = [Marked {
            bbox: BBox::new(50.0, 40.0, 20.0, 10.0),
            fate: Fate::Hit,
        }];
        let img = overlay(&sheet, &marks, None).unwrap();
        // t = 2 at this size; pad 4: the outline's left edge is at x = 46.
        assert_eq!(*img.get_pixel(46, 45), rgb(HIT));
        assert_eq!(*img.get_pixel(60, 45), Rgb([255, 255, 255]));
        assert!(img.height() > 100, "legend band appended");
        let half = overlay(&sheet, &marks, Some(100)).unwrap();
        assert_eq!(half.width(), 100);
        assert_eq!(*half.get_pixel(21, 22), rgb(HIT));
    }
}
