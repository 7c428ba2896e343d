//! Beams prepared for the fast rebuild: each included beam of a frame becomes a [`Job`] (its
//! walk, the offsets to cell centres, where its free zone ends) and the [`Span`] of tiles it
//! can reach, so tiles only look at the beams that concern them.

use crate::footprint::{RayWalk, param};
use crate::fusion::MapBuilder;
use crate::fusion::setup::CentreOffsets;
use crate::geometry::Point2;
use crate::grid::CellIndex;
use crate::session::{Reading, SensorKind};

/// Slightly more than sqrt(2)/2 (by 3e-6): how far a cell's centre can be from a point inside
/// the cell, in cells, with room for rounding.
const CENTRE_REACH: f64 = std::f64::consts::FRAC_1_SQRT_2 + 3e-6;

/// One beam, ready for the inner loop.
#[derive(Clone, Copy, Debug)]
pub(super) enum Job {
    Ray {
        sensor: u32,
        walk: RayWalk,
        /// [`CentreOffsets`] of the beam origin, without the resolution (kept once per grid).
        ex0: f64,
        ey0: f64,
        /// The reading, metres (unused for a no-return).
        z: f64,
        /// Cells entered before this fixed-point parameter get exactly logit(p_free); i64::MAX
        /// for a cleared no-return, free all the way.
        free_until: i64,
    },
    Cone {
        sensor: u32,
        origin: Point2,
        heading: f64,
        reach_m: f64,
        reading: Reading,
    },
    /// A slot a frame left unused (a beam that touches nothing); never listed for a tile.
    Skipped,
}

/// The tiles a job can reach: tile columns `tx0..=tx1` and tile rows `ty0..=ty1` (tiles of
/// [`TILE`] cells, counted from the grid's corner); empty (`ty0 > ty1`) when it reaches no cell
/// of the grid. Found while jobs are prepared, in parallel, so that listing jobs per tile is
/// only pushes; kept beside the jobs rather than in them, so that the listing reads little
/// memory.
#[derive(Clone, Copy, Debug)]
pub(super) struct Span {
    pub tx0: u32,
    pub tx1: u32,
    pub ty0: u32,
    pub ty1: u32,
}

impl Span {
    /// The span of an unused slot, or of a job that reaches no cell of the grid.
    pub(super) const EMPTY: Span = Span {
        tx0: 1,
        tx1: 0,
        ty0: 1,
        ty1: 0,
    };

    /// The tiles holding cells `a..=b` (corners, inclusive) of a `w` x `h` grid, in tiles of
    /// 2^`shift` cells a side.
    #[inline(always)]
    pub(super) fn of_cells(a: CellIndex, b: CellIndex, w: i64, h: i64, shift: u32) -> Span {
        if b.col < 0 || b.row < 0 || a.col >= w || a.row >= h {
            return Span::EMPTY;
        }
        // Tile coordinates are cell coordinates shifted right (a tile's side is a power of two).
        Span {
            tx0: (a.col.max(0) >> shift) as u32,
            tx1: (b.col.min(w - 1) >> shift) as u32,
            ty0: (a.row.max(0) >> shift) as u32,
            ty1: (b.row.min(h - 1) >> shift) as u32,
        }
    }

    pub(super) fn is_empty(&self) -> bool {
        self.ty0 > self.ty1
    }
}

impl MapBuilder {
    /// Slots frame `f` needs for its jobs: one per beam of its scans (an upper bound: beams
    /// that touch nothing leave their slot unused).
    pub(super) fn frame_slots(&self, f: usize) -> usize {
        self.session.frames[f]
            .scans
            .iter()
            .map(|s| self.session.sensors[s.sensor].beam_count())
            .sum()
    }

    /// Writes the jobs of frame `f`, in the contract's order, to the front of `out` and the
    /// tiles (of 2^`shift` cells a side) they can reach to the front of `spans` (both at least
    /// [`MapBuilder::frame_slots`] long), and returns how many there are.
    pub(super) fn fill_frame_jobs(
        &self,
        f: usize,
        out: &mut [Job],
        spans: &mut [Span],
        shift: u32,
    ) -> usize {
        let mut n = 0;
        let spec = &self.spec;
        let res = spec.resolution;
        let (w, h) = (spec.width as i64, spec.height as i64);
        let span = |a: CellIndex, b: CellIndex| {
            // One cell of slack for end points on cell boundaries.
            // Saturating: a far end point of a hostile beam may sit at the edge of i64.
            Span::of_cells(
                CellIndex::new(
                    a.col.min(b.col).saturating_sub(1),
                    a.row.min(b.row).saturating_sub(1),
                ),
                CellIndex::new(
                    a.col.max(b.col).saturating_add(1),
                    a.row.max(b.row).saturating_add(1),
                ),
                w,
                h,
                shift,
            )
        };
        self.for_each_included_beam(f, |b| {
            let s = b.sensor as u32;
            match b.plan.kind {
                SensorKind::Ray => {
                    let (dy, dx) = b.heading.sin_cos();
                    let walk = RayWalk::from_direction(spec, b.origin, dx, dy, b.reach);
                    let end = Point2::new(b.origin.x + b.reach * dx, b.origin.y + b.reach * dy);
                    let (z, free_until) = match b.reading {
                        // Rounding to fixed point moves this by 1e-12 m, far inside the margin
                        // of CENTRE_REACH over sqrt(2)/2 (1.5e-7 m at 5 cm cells).
                        Reading::Hit(z) => {
                            (z, param(b.plan.model.free_below(z) - res * CENTRE_REACH))
                        }
                        _ => (0.0, i64::MAX),
                    };
                    let centres = CentreOffsets::new(spec, b.origin);
                    out[n] = Job::Ray {
                        sensor: s,
                        walk,
                        ex0: centres.ex0,
                        ey0: centres.ey0,
                        z,
                        free_until,
                    };
                    spans[n] = span(walk.start, spec.cell_at(end));
                    n += 1;
                }
                SensorKind::Cone => {
                    let bounds = crate::footprint::cone_bounds(
                        b.origin,
                        b.heading,
                        b.plan.cone_width,
                        b.reach,
                    );
                    out[n] = Job::Cone {
                        sensor: s,
                        origin: b.origin,
                        heading: b.heading,
                        reach_m: b.reach,
                        reading: b.reading,
                    };
                    spans[n] = span(spec.cell_at(bounds.min), spec.cell_at(bounds.max));
                    n += 1;
                }
            }
        });
        n
    }
}
