//! Colours of the grid view: cell values (log-odds) to pixels, and increments to highlights.
//!
//! The default scale diverges around "unknown" (log-odds 0, p = 0.5): free cells fade from a
//! neutral slate towards warm sand at the lower clamp bound, occupied cells deepen towards ink
//! blue at the upper bound. The two hues keep "a little free" and "a little occupied" apart,
//! which a single grey ramp does not. The alternative reproduces the export's greys exactly.

use egui::Color32;
use serde::{Deserialize, Serialize};

/// How cell values are coloured.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Hash, Serialize, Deserialize)]
pub enum Palette {
    /// Sand (free) - slate (unknown) - ink (occupied), scaled to the clamp bounds.
    #[default]
    SandSlateInk,
    /// The exported PNG's grey levels, round(255 * (1 - p)).
    ExportGreys,
}

impl Palette {
    /// Name shown in the window.
    pub fn label(self) -> &'static str {
        match self {
            Palette::SandSlateInk => "Sand - slate - ink (log-odds)",
            Palette::ExportGreys => "Export greys (probability)",
        }
    }
}

const SAND: [f32; 3] = [247.0, 231.0, 190.0];
const SLATE: [f32; 3] = [126.0, 132.0, 146.0];
const INK: [f32; 3] = [22.0, 34.0, 86.0];

fn mix(a: [f32; 3], b: [f32; 3], t: f32) -> Color32 {
    let t = t.clamp(0.0, 1.0);
    let c = |i: usize| (a[i] + (b[i] - a[i]) * t).round() as u8;
    Color32::from_rgb(c(0), c(1), c(2))
}

/// Colour of a cell with log-odds `l`, given the clamp bounds `lo < 0 < hi`.
pub fn cell_colour(palette: Palette, l: f32, lo: f32, hi: f32) -> Color32 {
    match palette {
        Palette::SandSlateInk => {
            if l < 0.0 {
                // Square root so that the first readings of free space already show.
                mix(SLATE, SAND, (l / lo).sqrt())
            } else {
                mix(SLATE, INK, (l / hi).sqrt())
            }
        }
        Palette::ExportGreys => {
            let g = crate::export::grey_level(l);
            Color32::from_gray(g)
        }
    }
}

/// Highlight for a footprint cell by its increment (log-odds): orange-red for evidence of
/// occupancy, cyan for evidence of free space, alpha by magnitude up to `scale`.
pub fn increment_colour(inc: f32, scale: f32) -> Color32 {
    let a = (inc.abs() / scale.max(1e-6)).clamp(0.15, 1.0);
    let alpha = (60.0 + 180.0 * a) as u8;
    if inc >= 0.0 {
        Color32::from_rgba_unmultiplied(255, 92, 40, alpha)
    } else {
        Color32::from_rgba_unmultiplied(40, 200, 230, alpha)
    }
}

/// Pixels of a grid in image order (north row first), for a texture.
pub fn grid_pixels(palette: Palette, grid: &crate::Grid, lo: f32, hi: f32) -> egui::ColorImage {
    let s = grid.spec();
    let mut pixels = Vec::with_capacity(s.cells());
    for row in grid.rows_north_first() {
        pixels.extend(row.iter().map(|&l| cell_colour(palette, l, lo, hi)));
    }
    egui::ColorImage::new([s.width as usize, s.height as usize], pixels)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn diverges_around_unknown() {
        let (lo, hi) = (-2.0, 3.5);
        let unknown = cell_colour(Palette::SandSlateInk, 0.0, lo, hi);
        assert_eq!(unknown, Color32::from_rgb(126, 132, 146));
        assert_eq!(
            cell_colour(Palette::SandSlateInk, lo, lo, hi),
            Color32::from_rgb(247, 231, 190)
        );
        assert_eq!(
            cell_colour(Palette::SandSlateInk, hi, lo, hi),
            Color32::from_rgb(22, 34, 86)
        );
        // Slightly free is warmer than unknown, slightly occupied is darker.
        let f = cell_colour(Palette::SandSlateInk, -0.1, lo, hi);
        let o = cell_colour(Palette::SandSlateInk, 0.1, lo, hi);
        assert!(f.r() > unknown.r() && o.r() < unknown.r());
        // The export palette matches the PNG's grey levels.
        assert_eq!(
            cell_colour(Palette::ExportGreys, 0.0, lo, hi),
            Color32::from_gray(128)
        );
    }
}
