//! The tiled image pyramid the page pans and zooms over.
//!
//! Level 0 is the sheet at the canonical resolution (the frame of every box);
//! each next level halves both sides (2 x 2 mean, odd edges averaged over the
//! pixels that exist) until the whole sheet fits one tile. Tiles are
//! [`TILE`] x [`TILE`] pixels (smaller at the right and bottom edges), encoded as
//! 8-bit grey PNG on first request and kept with the pyramid.

use image::GrayImage;
use std::sync::OnceLock;

/// Side of a tile in pixels.
pub const TILE: u32 = 512;

/// One level of the pyramid.
#[derive(Debug)]
struct Level {
    image: GrayImage,
    cols: u32,
    rows: u32,
    tiles: Vec<OnceLock<Vec<u8>>>,
}

/// A sheet's pyramid with its encoded tiles.
#[derive(Debug)]
pub struct Pyramid {
    levels: Vec<Level>,
}

/// Sizes the page needs to lay out tiles.
#[derive(Debug, Clone, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
pub struct PyramidInfo {
    /// Side of a tile in pixels.
    pub tile: u32,
    /// Width and height of each level, level 0 first.
    pub levels: Vec<(u32, u32)>,
}

impl PyramidInfo {
    /// Columns and rows of tiles of each level, level 0 first.
    pub fn grid(&self) -> Vec<(u32, u32)> {
        self.levels
            .iter()
            .map(|&(w, h)| (w.div_ceil(self.tile), h.div_ceil(self.tile)))
            .collect()
    }

    /// Position of tile (`level`, `col`, `row`) in the order level by level,
    /// row by row; `None` when out of range.
    pub fn index(&self, level: usize, col: u32, row: u32) -> Option<usize> {
        let grid = self.grid();
        let &(cols, rows) = grid.get(level)?;
        if col >= cols || row >= rows {
            return None;
        }
        let before: u32 = grid[..level].iter().map(|(c, r)| c * r).sum();
        Some((before + row * cols + col) as usize)
    }

    /// Number of tiles over all levels.
    pub fn tile_count(&self) -> usize {
        self.grid().iter().map(|(c, r)| (c * r) as usize).sum()
    }
}

/// Halves an image (2 x 2 mean, rounded to nearest; edge pixels of odd sides
/// averaged over the pixels present).
pub fn halve(img: &GrayImage) -> GrayImage {
    let (w, h) = img.dimensions();
    let (nw, nh) = (w.div_ceil(2), h.div_ceil(2));
    let src = img.as_raw();
    let mut out = vec![0u8; (nw * nh) as usize];
    let w = w as usize;
    for y in 0..nh {
        let ys: &[u32] = if 2 * y + 1 < h {
            &[2 * y, 2 * y + 1]
        } else {
            &[2 * y]
        };
        for x in 0..nw {
            let xs: &[u32] = if 2 * x + 1 < w as u32 {
                &[2 * x, 2 * x + 1]
            } else {
                &[2 * x]
            };
            let mut sum = 0u32;
            for &yy in ys {
                for &xx in xs {
                    sum += u32::from(src[yy as usize * w + xx as usize]);
                }
            }
            let n = (ys.len() * xs.len()) as u32;
            out[(y * nw + x) as usize] = ((sum + n / 2) / n) as u8;
        }
    }
    GrayImage::from_raw(nw, nh, out).expect("buffer has the right size")
}

impl Pyramid {
    /// Builds every level from the sheet at the canonical resolution.
    pub fn build(sheet: GrayImage) -> Self {
        let mut images = vec![sheet];
        while {
            let (w, h) = images.last().expect("one level").dimensions();
            w > TILE || h > TILE
        } {
            let next = halve(images.last().expect("one level"));
            images.push(next);
        }
        let levels = images
            .into_iter()
            .map(|image| {
                let cols = image.width().div_ceil(TILE);
                let rows = image.height().div_ceil(TILE);
                let tiles = (0..cols * rows).map(|_| OnceLock::new()).collect();
                Level {
                    image,
                    cols,
                    rows,
                    tiles,
                }
            })
            .collect();
        Self { levels }
    }

    /// Sizes of the levels.
    pub fn info(&self) -> PyramidInfo {
        PyramidInfo {
            tile: TILE,
            levels: self.levels.iter().map(|l| l.image.dimensions()).collect(),
        }
    }

    /// Every tile's PNG in [`PyramidInfo::index`] order (encodes those not yet
    /// encoded).
    pub fn all_tiles(&self) -> Vec<&[u8]> {
        let mut out = Vec::new();
        for (level, l) in self.levels.iter().enumerate() {
            for row in 0..l.rows {
                for col in 0..l.cols {
                    out.push(self.tile_png(level, col, row).expect("in range"));
                }
            }
        }
        out
    }

    /// The PNG of one tile, or `None` when level, column or row is out of range.
    pub fn tile_png(&self, level: usize, col: u32, row: u32) -> Option<&[u8]> {
        let l = self.levels.get(level)?;
        if col >= l.cols || row >= l.rows {
            return None;
        }
        let slot = &l.tiles[(row * l.cols + col) as usize];
        Some(slot.get_or_init(|| encode_tile(&l.image, col, row)))
    }
}

fn encode_tile(img: &GrayImage, col: u32, row: u32) -> Vec<u8> {
    let x0 = col * TILE;
    let y0 = row * TILE;
    let w = TILE.min(img.width() - x0);
    let h = TILE.min(img.height() - y0);
    let stride = img.width() as usize;
    let raw = img.as_raw();
    let mut data = Vec::with_capacity((w * h) as usize);
    for y in y0..y0 + h {
        let start = y as usize * stride + x0 as usize;
        data.extend_from_slice(&raw[start..start + w as usize]);
    }
    let mut out = Vec::new();
    {
        let mut enc = png::Encoder::new(&mut out, w, h);
        enc.set_color(png::ColorType::Grayscale);
        enc.set_depth(png::BitDepth::Eight);
        enc.set_compression(png::Compression::Fast);
        let mut writer = enc.write_header().expect("in-memory PNG header");
        writer
            .write_image_data(&data)
            .expect("in-memory PNG data of the declared size");
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn halving_averages_blocks_and_edges() {
        // 3 x 1 image [0, 100, 201]: first output pixel mean(0, 100) = 50, second
        // is the lone edge pixel 201 (hand calculation).
        let img = GrayImage::from_raw(3, 1, vec![0, 100, 201]).unwrap();
        let h = halve(&img);
        assert_eq!(h.dimensions(), (2, 1));
        assert_eq!(h.as_raw(), &vec![50, 201]);
        // 2 x 2 [10, 20, 30, 41]: mean 25.25 rounds to 25.
        let img = GrayImage::from_raw(2, 2, vec![10, 20, 30, 41]).unwrap();
        assert_eq!(halve(&img).as_raw(), &vec![25]);
    }

    #[test]
    fn levels_until_one_tile_and_tiles_decode_to_the_source() {
        let (w, h) = (1300u32, 700u32);
        let img = GrayImage::from_fn(w, h, |x, y| image::Luma([((x * 7 + y * 3) % 256) as u8]));
        let p = Pyramid::build(img.clone());
        // 1300x700 -> 650x350 -> 325x175: the last fits one 512 tile.
        assert_eq!(p.info().levels, vec![(1300, 700), (650, 350), (325, 175)]);
        let png = p.tile_png(0, 2, 1).unwrap();
        let tile = image::load_from_memory(png).unwrap().to_luma8();
        // Edge tile: columns 1024..1300, rows 512..700.
        assert_eq!(tile.dimensions(), (276, 188));
        assert_eq!(tile.get_pixel(5, 9), img.get_pixel(1029, 521));
        assert!(p.tile_png(0, 3, 0).is_none());
        assert!(p.tile_png(3, 0, 0).is_none());
        // Grid 3 x 2, then 2 x 1, then 1 x 1: nine tiles, numbered level by
        // level and row by row.
        let info = p.info();
        assert_eq!(info.grid(), vec![(3, 2), (2, 1), (1, 1)]);
        assert_eq!(info.tile_count(), 9);
        assert_eq!(info.index(0, 2, 1), Some(5));
        assert_eq!(info.index(1, 1, 0), Some(7));
        assert_eq!(info.index(2, 0, 0), Some(8));
        assert_eq!(info.index(2, 1, 0), None);
        let all = p.all_tiles();
        assert_eq!(all.len(), 9);
        assert_eq!(all[5], png);
    }
}
