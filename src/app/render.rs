//! Turning grids into pictures for the map view, off the UI thread.
//!
//! Design decision: a picture never has more than [`MAX_SIDE`] pixels a side. A grid larger
//! than that is drawn as an overview in which each pixel shows the most decided cell of its
//! block (the largest value if any is occupied, else the smallest), so walls survive the
//! reduction; the part of the grid in view is drawn again at one pixel per cell once it fits.
//! Pictures are made by one background thread from shared grids, newest request first, so a
//! UI frame only uploads a finished picture.

use super::palette::{Palette, cell_colour};
use crate::geometry::Point2;
use crate::grid::{CellIndex, Grid, WorldBox};
use crate::rule::CellBounds;
use crate::score::CellClass;
use egui::{Color32, ColorImage};
use std::sync::Arc;
use std::sync::mpsc::{Receiver, Sender, TryRecvError, channel};

/// Most pixels a side of one picture.
pub const MAX_SIDE: u32 = 2048;

/// A block of cells: columns `col..col + cols`, rows `row..row + rows`.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub struct Window {
    /// First column.
    pub col: u32,
    /// First row (south).
    pub row: u32,
    /// Columns.
    pub cols: u32,
    /// Rows.
    pub rows: u32,
}

/// What to draw.
#[derive(Clone)]
pub struct Request {
    /// Identifies the picture (the caller's own key).
    pub key: u64,
    /// The grid (log-odds).
    pub grid: Arc<Grid>,
    /// When set, cells are coloured by how their class differs from this grid's (A), which is
    /// read at each cell's centre (so grids of other lattices compare too).
    pub compare: Option<Arc<Grid>>,
    /// Cell colours.
    pub palette: Palette,
    /// The clamp bounds the colours are scaled to.
    pub bounds: CellBounds,
    /// Only this block, at one pixel per cell; the whole grid when `None`.
    pub window: Option<Window>,
}

/// A finished picture.
pub struct Rendered {
    /// The request's key.
    pub key: u64,
    /// The pixels, north row first.
    pub image: ColorImage,
    /// The world rectangle the picture covers, metres.
    pub world: WorldBox,
}

/// The background renderer.
pub struct Renderer {
    requests: Sender<Request>,
    done: Receiver<Rendered>,
}

impl Default for Renderer {
    fn default() -> Self {
        let (requests, rx) = channel::<Request>();
        let (tx, done) = channel();
        let _ = std::thread::Builder::new()
            .name("gridscope-render".into())
            .spawn(move || {
                while let Ok(mut r) = rx.recv() {
                    while let Ok(newer) = rx.try_recv() {
                        r = newer;
                    }
                    if tx.send(render(&r)).is_err() {
                        return;
                    }
                }
            });
        Renderer { requests, done }
    }
}

impl Renderer {
    /// Asks for a picture (replacing any request not yet started).
    pub fn request(&self, r: Request) {
        let _ = self.requests.send(r);
    }

    /// The newest finished picture, if one arrived.
    pub fn take(&self) -> Option<Rendered> {
        let mut last = None;
        loop {
            match self.done.try_recv() {
                Ok(r) => last = Some(r),
                Err(TryRecvError::Empty) | Err(TryRecvError::Disconnected) => return last,
            }
        }
    }
}

/// Colour of a cell of B against A in the difference picture: the direction of a change of
/// class, or a faint grey of B's class where nothing changed (dark grey where A has no cell).
pub fn difference_colour(a: Option<CellClass>, b: CellClass) -> Color32 {
    use CellClass::*;
    match (a, b) {
        (None, _) => Color32::from_gray(60),
        (Some(Free), Occupied) => Color32::from_rgb(230, 60, 40),
        (Some(Occupied), Free) => Color32::from_rgb(40, 200, 230),
        (Some(Unknown), Occupied) => Color32::from_rgb(245, 160, 40),
        (Some(Unknown), Free) => Color32::from_rgb(120, 220, 120),
        (Some(Occupied), Unknown) | (Some(Free), Unknown) => Color32::from_rgb(190, 110, 230),
        (Some(_), Occupied) => Color32::from_gray(70),
        (Some(_), Free) => Color32::from_gray(200),
        (Some(_), Unknown) => Color32::from_gray(130),
    }
}

/// Draws a request (see the module notes).
pub fn render(r: &Request) -> Rendered {
    let g = &r.grid;
    let s = *g.spec();
    let (window, block) = match r.window {
        Some(w) => (w, 1),
        None => (
            Window {
                col: 0,
                row: 0,
                cols: s.width,
                rows: s.height,
            },
            s.width.max(s.height).div_ceil(MAX_SIDE).max(1),
        ),
    };
    let (pw, ph) = (window.cols.div_ceil(block), window.rows.div_ceil(block));
    let w = s.width as usize;
    let cell = |idx: usize| CellIndex::new((idx % w) as i64, (idx / w) as i64);
    // A's class at the centre of B's cell `idx`, when A has a cell there.
    let class_in_a = |a: &Grid, idx: usize| {
        let c = s.centre(cell(idx));
        a.spec()
            .index(a.spec().cell_at(c))
            .map(|j| CellClass::of(a.values()[j]))
    };
    let colour_of = |idx: usize| -> Color32 {
        let l = g.values()[idx];
        match &r.compare {
            None => cell_colour(r.palette, l, r.bounds.lo, r.bounds.hi),
            Some(a) => difference_colour(class_in_a(a, idx), CellClass::of(l)),
        }
    };
    let changed = |idx: usize| {
        r.compare.as_ref().is_some_and(|a| {
            class_in_a(a, idx).is_some_and(|c| c != CellClass::of(g.values()[idx]))
        })
    };
    let mut pixels = Vec::with_capacity(pw as usize * ph as usize);
    // North row first.
    for py in (0..ph).rev() {
        for px in 0..pw {
            let (c0, r0) = (window.col + px * block, window.row + py * block);
            let c1 = (c0 + block).min(window.col + window.cols);
            let r1 = (r0 + block).min(window.row + window.rows);
            let block_cells =
                (r0..r1).flat_map(|row| (c0..c1).map(move |col| row as usize * w + col as usize));
            // A difference shows the block's first change; otherwise its most decided cell.
            let pick = if block == 1 {
                r0 as usize * w + c0 as usize
            } else if let Some(i) = block_cells.clone().find(|&i| changed(i)) {
                i
            } else {
                let (hi, lo) = block_cells.fold(
                    ((f32::NEG_INFINITY, 0), (f32::INFINITY, 0)),
                    |(hi, lo), i| {
                        let v = g.values()[i];
                        (
                            if v > hi.0 { (v, i) } else { hi },
                            if v < lo.0 { (v, i) } else { lo },
                        )
                    },
                );
                if hi.0 > 0.0 { hi.1 } else { lo.1 }
            };
            pixels.push(colour_of(pick));
        }
    }
    let res = s.resolution;
    let min = Point2::new(
        s.origin.x + window.col as f64 * res,
        s.origin.y + window.row as f64 * res,
    );
    let max = Point2::new(
        min.x + (pw * block) as f64 * res,
        min.y + (ph * block) as f64 * res,
    );
    Rendered {
        key: r.key,
        image: ColorImage::new([pw as usize, ph as usize], pixels),
        world: WorldBox { min, max },
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::grid::GridSpec;

    fn grid(w: u32, h: u32, res: f64, values: Vec<f32>) -> Arc<Grid> {
        let spec = GridSpec {
            resolution: res,
            origin: Point2::new(0.0, 0.0),
            width: w,
            height: h,
        };
        Arc::new(Grid::from_values(spec, values).unwrap())
    }

    fn request(g: Arc<Grid>) -> Request {
        Request {
            key: 1,
            grid: g,
            compare: None,
            palette: Palette::ExportGreys,
            bounds: CellBounds { lo: -2.0, hi: 3.0 },
            window: None,
        }
    }

    #[test]
    fn large_grids_are_reduced_and_keep_their_walls() {
        // 3000 x 10 cells, one occupied cell in the middle of a free stretch.
        let mut v = vec![-1.0f32; 30_000];
        v[5 * 3000 + 1500] = 2.0;
        let g = grid(3000, 10, 0.05, v);
        let out = render(&request(g.clone()));
        // Two cells a pixel along each side.
        assert_eq!(out.image.size, [1500, 5]);
        let dark = crate::export::grey_level(2.0);
        assert!(
            out.image
                .pixels
                .iter()
                .any(|p| *p == Color32::from_gray(dark))
        );
        // A window is drawn at one pixel per cell, north row first.
        let mut r = request(g);
        r.window = Some(Window {
            col: 1499,
            row: 4,
            cols: 3,
            rows: 2,
        });
        let out = render(&r);
        assert_eq!(out.image.size, [3, 2]);
        // Row 5 (north) comes first; the wall is its middle pixel.
        assert_eq!(out.image.pixels[1], Color32::from_gray(dark));
        assert_eq!(out.world.min, Point2::new(1499.0 * 0.05, 4.0 * 0.05));
    }

    #[test]
    fn differences_compare_grids_of_other_lattices_at_cell_centres() {
        // B: 4 x 1 cells of 0.5 m; A: 2 x 1 cells of 1 m (occupied, free).
        let b = grid(4, 1, 0.5, vec![1.0, -1.0, -1.0, 1.0]);
        let a = grid(2, 1, 1.0, vec![1.0, 1.0]);
        let mut r = request(b);
        r.compare = Some(a);
        let out = render(&r);
        assert_eq!(
            out.image.pixels,
            vec![
                difference_colour(Some(CellClass::Occupied), CellClass::Occupied),
                difference_colour(Some(CellClass::Occupied), CellClass::Free),
                difference_colour(Some(CellClass::Occupied), CellClass::Free),
                difference_colour(Some(CellClass::Occupied), CellClass::Occupied),
            ]
        );
    }
}
