//! ISO 216 paper sizes and the mix of sizes the synthetic plant uses.

/// An ISO 216 A-series sheet, always used in landscape.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Paper {
    /// 1189 x 841 mm.
    A0,
    /// 841 x 594 mm.
    A1,
    /// 594 x 420 mm.
    A2,
    /// 420 x 297 mm.
    A3,
    /// 297 x 210 mm.
    A4,
}

impl Paper {
    /// Width and height in millimetres, landscape (width > height).
    pub fn size_mm(self) -> (f64, f64) {
        match self {
            Paper::A0 => (1189.0, 841.0),
            Paper::A1 => (841.0, 594.0),
            Paper::A2 => (594.0, 420.0),
            Paper::A3 => (420.0, 297.0),
            Paper::A4 => (297.0, 210.0),
        }
    }

    /// Width and height in pixels at `dpi`, rounded to the nearest pixel.
    pub fn size_px(self, dpi: f64) -> (u32, u32) {
        let (w, h) = self.size_mm();
        (
            mm_to_px(w, dpi).round() as u32,
            mm_to_px(h, dpi).round() as u32,
        )
    }

    /// Lower-case name, e.g. `"a3"`.
    pub fn name(self) -> &'static str {
        match self {
            Paper::A0 => "a0",
            Paper::A1 => "a1",
            Paper::A2 => "a2",
            Paper::A3 => "a3",
            Paper::A4 => "a4",
        }
    }
}

/// Millimetres to pixels at `dpi` (25.4 mm per inch).
pub fn mm_to_px(mm: f64, dpi: f64) -> f64 {
    mm * dpi / 25.4
}

/// The paper of sheet `index` in a `symtrust synth --sheets N` batch: A3,
/// except every fourth sheet (indices 3, 7, 11, ...) which is A1.
pub fn default_paper(index: usize) -> Paper {
    if index % 4 == 3 { Paper::A1 } else { Paper::A3 }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn iso_216_sizes_in_mm() {
        // ISO 216:2007, table of the A series (trimmed sizes, mm), portrait h x w
        // listed as 841 x 1189 ... 210 x 297; here landscape.
        assert_eq!(Paper::A0.size_mm(), (1189.0, 841.0));
        assert_eq!(Paper::A1.size_mm(), (841.0, 594.0));
        assert_eq!(Paper::A2.size_mm(), (594.0, 420.0));
        assert_eq!(Paper::A3.size_mm(), (420.0, 297.0));
        assert_eq!(Paper::A4.size_mm(), (297.0, 210.0));
    }

    #[test]
    fn iso_216_halving_rule() {
        // ISO 216: each size is the previous one halved across its longer side
        // (rounded down to the millimetre).
        let all = [Paper::A0, Paper::A1, Paper::A2, Paper::A3, Paper::A4];
        for pair in all.windows(2) {
            let (w0, h0) = pair[0].size_mm();
            let (w1, h1) = pair[1].size_mm();
            assert_eq!(w1, h0);
            assert_eq!(h1, (w0 / 2.0).floor());
        }
    }

    #[test]
    fn pixel_sizes_at_200_dpi() {
        // ISO 216 sizes at 200 dpi: 841 mm / 25.4 * 200 = 6622.05, 594 -> 4677.17,
        // 420 -> 3307.09, 297 -> 2338.58 (hand calculation).
        assert_eq!(Paper::A1.size_px(200.0), (6622, 4677));
        assert_eq!(Paper::A3.size_px(200.0), (3307, 2339));
        assert_eq!(Paper::A4.size_px(200.0), (2339, 1654));
        assert_eq!(Paper::A0.size_px(200.0), (9362, 6622));
    }

    #[test]
    fn default_mix_is_mostly_a3_with_every_fourth_a1() {
        let papers: Vec<Paper> = (0..8).map(default_paper).collect();
        assert_eq!(papers.iter().filter(|p| **p == Paper::A1).count(), 2);
        assert_eq!(papers[3], Paper::A1);
        assert_eq!(papers[7], Paper::A1);
        assert_eq!(papers[0], Paper::A3);
    }
}
