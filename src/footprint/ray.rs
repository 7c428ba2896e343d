//! Exact grid traversal of a narrow beam (Amanatides & Woo, "A Fast Voxel Traversal Algorithm
//! for Ray Tracing", Eurographics 1987): from the cell holding the beam origin, step to the
//! neighbour whose boundary the segment crosses first, until the reach.
//!
//! Design decision: crossing parameters are integers. The distance along the segment at which
//! it leaves column `c` is kept in fixed point ([`UNITS_PER_METRE`] units per metre) as
//! `first + k * step` for the k-th column along the walk, so stepping is an exact integer
//! addition, and a walk that starts part-way along a segment (as a parallel worker owning a
//! tile does) computes the same integers directly and reproduces the cells of a walk from the
//! origin bit for bit. The parameters are rounded once per segment, to 2^-40 m, which only
//! matters where a segment passes within about a picometre of a cell corner (where the
//! contract accepts either neighbour order).

use crate::geometry::Point2;
use crate::grid::{CellIndex, GridSpec, WorldBox};

/// Fixed-point units of a crossing parameter per metre.
pub const UNITS_PER_METRE: f64 = (1u64 << 40) as f64;

/// A crossing parameter too large to be reached by any segment (an axis never crossed).
const NEVER: i64 = i64::MAX / 4;

/// A distance along a segment in fixed point, [`UNITS_PER_METRE`] units per metre; saturates
/// at [`NEVER`] for distances beyond any segment (and infinity).
pub fn param(metres: f64) -> i64 {
    let u = metres * UNITS_PER_METRE;
    if u >= NEVER as f64 {
        NEVER
    } else if u <= -(NEVER as f64) {
        -NEVER
    } else {
        crate::grid::floor_i64(u + 0.5)
    }
}

/// Metres of a fixed-point distance along a segment.
pub fn metres(p: i64) -> f64 {
    p as f64 / UNITS_PER_METRE
}

/// Exact traversal of one segment across a grid's lattice.
#[derive(Clone, Copy, Debug)]
pub struct RayWalk {
    /// Cell holding the segment origin.
    pub start: CellIndex,
    /// Column step, -1, 0 or +1.
    pub step_col: i64,
    /// Row step, -1, 0 or +1.
    pub step_row: i64,
    /// Segment length, fixed point: cells entered at or past it are not touched.
    pub len: i64,
    /// Fixed-point parameter at which the segment leaves the start column, and the increase
    /// per column step ([`NEVER`] when it has no column step); likewise for rows.
    col_first: i64,
    col_step: i64,
    row_first: i64,
    row_step: i64,
}

impl RayWalk {
    /// Prepares the traversal of the segment from `origin` in direction `heading` (radians,
    /// world frame) over `length` metres.
    pub fn new(spec: &GridSpec, origin: Point2, heading: f64, length: f64) -> RayWalk {
        let (dy, dx) = heading.sin_cos();
        Self::from_direction(spec, origin, dx, dy, length)
    }

    /// As [`RayWalk::new`], with a unit direction vector `(dx, dy)`.
    pub fn from_direction(
        spec: &GridSpec,
        origin: Point2,
        dx: f64,
        dy: f64,
        length: f64,
    ) -> RayWalk {
        let start = spec.cell_at(origin);
        let res = spec.resolution;
        // Leaving column c towards +x crosses x = ox + (c + 1) * res; towards -x, x = ox + c * res.
        let axis = |d: f64, o: f64, p: f64, c: i64| -> (i64, i64, i64) {
            if d == 0.0 || !d.is_finite() {
                return (0, NEVER, NEVER);
            }
            let step = if d > 0.0 { 1 } else { -1 };
            let boundary = if d > 0.0 {
                o + (c as f64 + 1.0) * res
            } else {
                o + c as f64 * res
            };
            (step, param((boundary - p) / d), param(res / d.abs()).max(1))
        };
        let (step_col, col_first, col_step) = axis(dx, spec.origin.x, origin.x, start.col);
        let (step_row, row_first, row_step) = axis(dy, spec.origin.y, origin.y, start.row);
        RayWalk {
            start,
            step_col,
            step_row,
            len: param(length),
            col_first,
            col_step,
            row_first,
            row_step,
        }
    }

    /// Fixed-point parameter at which the segment leaves column `c` (for columns at or after
    /// the start along the walk).
    #[inline(always)]
    pub fn leave_col(&self, c: i64) -> i64 {
        if self.step_col == 0 {
            return NEVER;
        }
        let k = (c - self.start.col) * self.step_col;
        self.col_first
            .saturating_add(k.saturating_mul(self.col_step))
    }

    /// Fixed-point parameter at which the segment leaves row `r`.
    #[inline(always)]
    pub fn leave_row(&self, r: i64) -> i64 {
        if self.step_row == 0 {
            return NEVER;
        }
        let k = (r - self.start.row) * self.step_row;
        self.row_first
            .saturating_add(k.saturating_mul(self.row_step))
    }

    /// Increase of the leaving parameter per column step ([`NEVER`] without column steps).
    pub fn col_step(&self) -> i64 {
        self.col_step
    }

    /// Increase of the leaving parameter per row step ([`NEVER`] without row steps).
    pub fn row_step(&self) -> i64 {
        self.row_step
    }

    /// Calls `visit(cell, t_enter)` on every cell of the segment, in order from the origin,
    /// with the fixed-point parameter at which it is entered (0 for the first), until `visit`
    /// returns `false` or the segment ends. Steps are integer additions.
    #[inline]
    pub fn for_each_entered(&self, visit: impl FnMut(CellIndex, i64) -> bool) {
        self.for_each_entered_from(self.start, 0, visit);
    }

    /// As [`RayWalk::for_each_entered`], starting part-way at cell `from`, entered at
    /// parameter `t_enter` (as [`RayWalk::enter_box`] finds them): the same cells a walk from
    /// the origin visits from there on.
    #[inline]
    pub fn for_each_entered_from(
        &self,
        from: CellIndex,
        t_enter: i64,
        mut visit: impl FnMut(CellIndex, i64) -> bool,
    ) {
        let mut c = from;
        let (mut tc, mut tr) = (self.leave_col(c.col), self.leave_row(c.row));
        let mut t_enter = t_enter;
        loop {
            if !visit(c, t_enter) {
                return;
            }
            if tc < tr {
                if tc >= self.len {
                    return;
                }
                c.col += self.step_col;
                t_enter = tc;
                tc = tc.saturating_add(self.col_step);
            } else {
                if tr >= self.len {
                    return;
                }
                c.row += self.step_row;
                t_enter = tr;
                tr = tr.saturating_add(self.row_step);
            }
        }
    }

    /// The first cell of the segment inside the box of rows `rows` and columns `cols`, with the
    /// parameter at which the walk enters it, exactly as a walk from the origin reaches it;
    /// `None` when the segment never enters the box. A straight segment leaves a box at most
    /// once, so the box's cells are those walked from here until the first one outside.
    pub fn enter_box(
        &self,
        rows: std::ops::Range<i64>,
        cols: std::ops::Range<i64>,
    ) -> Option<(CellIndex, i64)> {
        let (sc, sr) = (self.step_col, self.step_row);
        let mut c = self.start;
        let mut t_enter = 0i64;
        if !rows.contains(&c.row) {
            let entry = if sr > 0 && c.row < rows.start {
                rows.start
            } else if sr < 0 && c.row >= rows.end {
                rows.end - 1
            } else {
                return None;
            };
            (c, t_enter) = self.enter_row(entry)?;
        }
        if !cols.contains(&c.col) {
            let entry = if sc > 0 && c.col < cols.start {
                cols.start
            } else if sc < 0 && c.col >= cols.end {
                cols.end - 1
            } else {
                return None;
            };
            // The walk steps from column entry - sc into entry at tc, from the first row it
            // leaves strictly after tc (while a row is left at or before tc it steps rows).
            let tc = self.leave_col(entry - sc);
            if tc >= self.len {
                return None;
            }
            let row = if sr != 0 {
                self.first_row_leaving(c.row, tc, true)
            } else {
                c.row
            };
            if !rows.contains(&row) {
                return None;
            }
            c = CellIndex::new(entry, row);
            t_enter = tc;
        }
        Some((c, t_enter))
    }

    /// Calls `visit` on every cell of the segment, in order from the origin, until it returns
    /// `false` or the segment ends.
    #[inline]
    pub fn for_each(&self, mut visit: impl FnMut(CellIndex) -> bool) {
        self.for_each_entered(|c, _| visit(c));
    }

    /// All cells of the segment, in order (for tests; the fusion walks with
    /// [`RayWalk::for_each`]).
    #[cfg(test)]
    pub fn cells(&self) -> Vec<CellIndex> {
        let mut v = Vec::new();
        self.for_each(|c| {
            v.push(c);
            true
        });
        v
    }

    /// How many column crossings the segment makes per row crossing (infinite when it never
    /// crosses a row boundary, 0 when it never crosses a column boundary).
    pub fn cols_per_row(&self) -> f64 {
        if self.step_col == 0 {
            0.0
        } else if self.step_row == 0 {
            f64::INFINITY
        } else {
            self.row_step as f64 / self.col_step as f64
        }
    }

    /// The first column from `from` (at or after the start, in the walk's column direction)
    /// that the segment leaves at a parameter `>= t` (or `> t` when `strict`). Exact integer
    /// arithmetic. Requires a column step.
    #[inline(always)]
    pub fn first_col_leaving(&self, from: i64, t: i64, strict: bool) -> i64 {
        from + self.step_col * steps_until(self.leave_col(from), self.col_step, t, strict)
    }

    /// The first row from `from` that the segment leaves at a parameter `>= t` (or `> t` when
    /// `strict`). Requires a row step.
    #[inline(always)]
    pub fn first_row_leaving(&self, from: i64, t: i64, strict: bool) -> i64 {
        from + self.step_row * steps_until(self.leave_row(from), self.row_step, t, strict)
    }

    /// The first cell of the segment whose row is `row` or beyond (in the walk's row
    /// direction), exactly as a walk from the origin would reach it, with the parameter at
    /// which it is entered; `None` if the segment ends first. Requires a row step (a segment
    /// moving north or south) and `row` past the start row.
    pub fn enter_row(&self, row: i64) -> Option<(CellIndex, i64)> {
        debug_assert!(self.step_row != 0);
        // The walk reaches `row` by a row step out of row `row - step` at parameter t_r,
        // taken from the first column c with leave_col(c) >= t_r (a column step is taken only
        // while leave_col(c) < leave_row).
        let t_r = self.leave_row(row - self.step_row);
        if t_r >= self.len {
            return None;
        }
        let c = if self.step_col != 0 {
            self.first_col_leaving(self.start.col, t_r, false)
        } else {
            self.start.col
        };
        Some((CellIndex::new(c, row), t_r))
    }
}

/// How many of the crossings `first`, `first + step`, `first + 2 * step`, ... lie below `t`
/// (fixed point): exact integer division. With `first` = [`RayWalk::leave_col`] of a column and
/// `step` = [`RayWalk::col_step`], the column crossings a walk from that column makes before `t`.
#[inline(always)]
pub fn crossings_before(first: i64, step: i64, t: i64) -> i64 {
    // No segment reaches NEVER, so a larger `t` (i64::MAX for "no limit") counts the same.
    steps_until(first, step, t.min(NEVER), false)
}

/// Steps k >= 0 from a position whose parameter is `at`, the parameter growing by `step` per
/// step, until the parameter is `>= t` (or `> t` when `strict`): exact integer division.
#[inline(always)]
fn steps_until(at: i64, step: i64, t: i64, strict: bool) -> i64 {
    let need = if strict { t.saturating_add(1) } else { t };
    if at >= need || step >= NEVER {
        return if at >= need { 0 } else { NEVER };
    }
    // Smallest k with at + k * step >= need.
    (need - at + step - 1) / step
}

/// World box holding a segment from `origin` along `heading` over `length` metres.
pub fn ray_bounds(origin: Point2, heading: f64, length: f64) -> WorldBox {
    let mut b = WorldBox::at(origin);
    b.include(Point2::new(
        origin.x + length * heading.cos(),
        origin.y + length * heading.sin(),
    ));
    b
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::f64::consts::{FRAC_PI_2, PI};

    /// Counting crossings ahead by division gives what a walk finds by stepping: for segments
    /// in every direction and limits just before, at and just after each crossing (and at the
    /// length, and unlimited), the column (row) steps the walk takes below the limit number
    /// `crossings_before`. The walk itself is the reference; headings and origin are arbitrary.
    #[test]
    fn crossings_counted_ahead_match_the_walk() {
        let spec = unit_grid(64, 64);
        for k in 0..72 {
            let heading = k as f64 * 0.0873 + 0.01;
            let w = RayWalk::new(&spec, Point2::new(32.3, 31.7), heading, 25.0);
            // Parameters at which the walk enters each cell, and whether by a column step.
            let mut entries = Vec::new();
            let mut prev = w.start;
            w.for_each_entered(|c, t| {
                if c != w.start {
                    entries.push((t, c.col != prev.col));
                }
                prev = c;
                true
            });
            for &(limit, _) in &entries {
                for t in [limit - 1, limit, limit + 1, w.len, i64::MAX] {
                    let cols = entries.iter().filter(|e| e.1 && e.0 < t).count() as i64;
                    let rows = entries.iter().filter(|e| !e.1 && e.0 < t).count() as i64;
                    let t_walk = t.min(w.len);
                    if w.step_col != 0 {
                        let counted =
                            crossings_before(w.leave_col(w.start.col), w.col_step(), t_walk);
                        assert_eq!(counted, cols, "heading {heading}, t {t}: columns");
                    }
                    if w.step_row != 0 {
                        let counted =
                            crossings_before(w.leave_row(w.start.row), w.row_step(), t_walk);
                        assert_eq!(counted, rows, "heading {heading}, t {t}: rows");
                    }
                }
            }
        }
    }

    fn unit_grid(w: u32, h: u32) -> GridSpec {
        GridSpec {
            resolution: 1.0,
            origin: Point2::new(0.0, 0.0),
            width: w,
            height: h,
        }
    }

    #[test]
    fn hand_worked_traversal() {
        // Worked by hand with the tMax / tDelta construction of Amanatides & Woo (1987):
        // from (0.25, 0.25) to (3.75, 1.25) on unit cells. Along the segment (as a fraction
        // of its length) column boundaries fall at 0.214, 0.5, 0.786, 1.07 and the first row
        // boundary at 0.75, so the cells are (0,0) (1,0) (2,0) (2,1) (3,1).
        let spec = unit_grid(5, 5);
        let (dx, dy) = (3.5f64, 1.0f64);
        let len = dx.hypot(dy);
        let w = RayWalk::from_direction(&spec, Point2::new(0.25, 0.25), dx / len, dy / len, len);
        let got: Vec<(i64, i64)> = w.cells().iter().map(|c| (c.col, c.row)).collect();
        assert_eq!(got, vec![(0, 0), (1, 0), (2, 0), (2, 1), (3, 1)]);
    }

    #[test]
    fn axis_aligned_and_backwards() {
        let spec = unit_grid(10, 10);
        let w = RayWalk::new(&spec, Point2::new(5.5, 5.5), PI, 3.2);
        let got: Vec<i64> = w.cells().iter().map(|c| c.col).collect();
        assert_eq!(got, vec![5, 4, 3, 2]);
        assert!(w.cells().iter().all(|c| c.row == 5));
        // A segment ending exactly on a boundary does not enter the next cell.
        let w = RayWalk::new(&spec, Point2::new(5.5, 5.5), FRAC_PI_2, 1.5);
        assert_eq!(w.cells().len(), 2);
    }

    #[test]
    fn entering_a_row_matches_the_full_walk() {
        let spec = GridSpec {
            resolution: 0.05,
            origin: Point2::new(-3.0, -2.0),
            width: 200,
            height: 200,
        };
        let mut seed = 0x2545F4914F6CDD1Du64;
        let mut rnd = || {
            seed ^= seed << 13;
            seed ^= seed >> 7;
            seed ^= seed << 17;
            (seed >> 11) as f64 / (1u64 << 53) as f64
        };
        for _ in 0..3000 {
            let o = Point2::new(-3.0 + 10.0 * rnd(), -2.0 + 10.0 * rnd());
            let heading = 2.0 * PI * rnd();
            let w = RayWalk::new(&spec, o, heading, 6.0 * rnd());
            if w.step_row == 0 {
                continue;
            }
            let cells = w.cells();
            for k in 1..6 {
                let row = w.start.row + k * w.step_row;
                let want = cells.iter().copied().find(|c| c.row == row);
                assert_eq!(
                    w.enter_row(row).map(|(c, _)| c),
                    want,
                    "row {row}, walk {w:?}"
                );
            }
        }
    }
}
