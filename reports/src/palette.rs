//! The visual coding of every report: colours picked for us, checked to stay
//! apart for the common colour-vision deficiencies (they differ in lightness
//! as well as hue), and always paired with a second cue (line style, mark or
//! thickness), so colour is never the only way to tell things apart.

use plotters::style::RGBColor;

/// A found symbol ("hit"): mid blue, thin solid line.
pub const HIT: RGBColor = RGBColor(0x1f, 0x6f, 0xc5);
/// A false alarm: amber-orange, dashed line with a cross at its corner.
pub const FALSE_ALARM: RGBColor = RGBColor(0xe0, 0x7b, 0x00);
/// A missed symbol: dark magenta, thick line with a corner flag.
pub const MISS: RGBColor = RGBColor(0x9c, 0x17, 0x7a);
/// Regions left out of the evaluation (title block, legend): grey, dotted.
pub const IGNORED: RGBColor = RGBColor(0x80, 0x80, 0x80);
/// Text and axes.
pub const INK: RGBColor = RGBColor(0x22, 0x22, 0x22);
/// Grid lines.
pub const GRID: RGBColor = RGBColor(0xdd, 0xdd, 0xdd);
/// Interval boxes and bands (drawn translucent).
pub const BAND: RGBColor = RGBColor(0x1f, 0x6f, 0xc5);

/// Series colours for several evaluations side by side, each paired with the
/// mark and dash of [`series_style`].
pub const SERIES: [RGBColor; 5] = [
    RGBColor(0x1f, 0x6f, 0xc5),
    RGBColor(0xe0, 0x7b, 0x00),
    RGBColor(0x2a, 0x2a, 0x2a),
    RGBColor(0x9c, 0x17, 0x7a),
    RGBColor(0x3f, 0x9b, 0x8f),
];

/// Marks that tell series apart without colour.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Mark {
    /// Filled circle.
    Circle,
    /// Filled triangle.
    Triangle,
    /// Open square.
    Square,
    /// Diagonal cross.
    Cross,
    /// Filled diamond.
    Diamond,
}

/// Line dashes: (dash, gap) in pixels at print scale, `None` for solid.
pub type Dash = Option<(u32, u32)>;

/// Colour, mark and dash of series `i`.
pub fn series_style(i: usize) -> (RGBColor, Mark, Dash) {
    const MARKS: [Mark; 5] = [
        Mark::Circle,
        Mark::Triangle,
        Mark::Square,
        Mark::Cross,
        Mark::Diamond,
    ];
    const DASHES: [Dash; 5] = [
        None,
        Some((8, 4)),
        Some((2, 3)),
        Some((12, 4)),
        Some((5, 2)),
    ];
    (SERIES[i % 5], MARKS[i % 5], DASHES[i % 5])
}

/// `#rrggbb` of a colour, for CSS.
pub fn css(c: RGBColor) -> String {
    format!("#{:02x}{:02x}{:02x}", c.0, c.1, c.2)
}

/// The colour as an `image` pixel.
pub fn rgb(c: RGBColor) -> image::Rgb<u8> {
    image::Rgb([c.0, c.1, c.2])
}
