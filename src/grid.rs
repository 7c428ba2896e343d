//! The occupancy grid: its geometry ([`GridSpec`]) and its cell values ([`Grid`], log-odds).
//!
//! Cell (col i, row j) covers `[ox + i*res, ox + (i+1)*res) x [oy + j*res, oy + (j+1)*res)` in
//! world metres; row 0 is the southern-most row. Values are stored row-major from row 0
//! (south first); exports flip to north-first image order. All index arithmetic lives in
//! [`GridSpec::index`].

use crate::error::Error;
use crate::geometry::Point2;
use crate::io::numbers::multiple_of;
use crate::logodds::probability;
use serde::{Deserialize, Serialize};

/// Default upper bound on the number of cells a grid may have.
pub const DEFAULT_CELL_BUDGET: u64 = 64_000_000;

/// Asks the C allocator to keep freed blocks of up to 32 MB in the process rather than hand
/// them back to the system, in one pool for all threads. Seeking and rebuilding allocate and
/// free grid-sized buffers (an 11 MB grid for a 100 m building at 5 cm) many times a second;
/// given back and taken again, each costs fresh page faults and, with several threads, a pause
/// for every core to drop the old mappings, measured here as seeks of 50-150 ms instead of
/// 10-30 ms. With glibc's default of a pool per thread, a buffer freed after a seek that ran
/// on one worker thread is not reused by the next seek when another worker runs it: measured
/// with `gridscope bench`, the slowest of 50 seeks took 45-61 ms with a pool per thread and
/// 16-17 ms with one pool. Call once, at start (the `gridscope` command does). Only glibc on
/// Linux has the knobs; elsewhere this does nothing.
pub fn keep_freed_buffers() {
    #[cfg(all(target_os = "linux", target_env = "gnu"))]
    {
        // mallopt(3): parameter numbers from glibc's malloc.h.
        const M_TRIM_THRESHOLD: i32 = -1;
        const M_MMAP_THRESHOLD: i32 = -3;
        const M_ARENA_MAX: i32 = -8;
        unsafe extern "C" {
            fn mallopt(param: i32, value: i32) -> i32;
        }
        // SAFETY: mallopt only changes allocator settings; the values are in range (the mmap
        // threshold's ceiling on 64-bit glibc is 32 MB).
        unsafe {
            mallopt(M_MMAP_THRESHOLD, 32 << 20);
            mallopt(M_TRIM_THRESHOLD, i32::MAX);
            mallopt(M_ARENA_MAX, 1);
        }
    }
}

/// Physical memory of this machine, bytes (Linux; `None` where it cannot be read).
pub fn physical_memory() -> Option<u64> {
    let info = std::fs::read_to_string("/proc/meminfo").ok()?;
    let kb: u64 = info
        .lines()
        .find_map(|l| l.strip_prefix("MemTotal:"))?
        .trim()
        .trim_end_matches("kB")
        .trim()
        .parse()
        .ok()?;
    kb.checked_mul(1024)
}

/// `x.floor() as i64` without a call into the maths library (the baseline x86-64 target has
/// no rounding instruction): the same value for every finite `x`, saturating like the cast.
#[inline(always)]
pub fn floor_i64(x: f64) -> i64 {
    let i = x as i64;
    if (i as f64) > x {
        i.saturating_sub(1)
    } else {
        i
    }
}

/// `x.ceil() as i64`, likewise.
#[inline(always)]
pub fn ceil_i64(x: f64) -> i64 {
    let i = x as i64;
    if (i as f64) < x {
        i.saturating_add(1)
    } else {
        i
    }
}

/// A cell address: column (east) and row (north), possibly outside a grid.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize)]
pub struct CellIndex {
    /// Column, 0 at the west edge.
    pub col: i64,
    /// Row, 0 at the south edge.
    pub row: i64,
}

impl CellIndex {
    /// A cell address.
    pub const fn new(col: i64, row: i64) -> Self {
        Self { col, row }
    }
}

/// Geometry of a grid: resolution, origin and size.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct GridSpec {
    /// Cell side, metres.
    pub resolution: f64,
    /// World coordinates of the south-west corner of cell (0, 0), metres.
    pub origin: Point2,
    /// Columns.
    pub width: u32,
    /// Rows.
    pub height: u32,
}

/// An axis-aligned world rectangle, metres.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct WorldBox {
    /// Smallest x and y.
    pub min: Point2,
    /// Largest x and y.
    pub max: Point2,
}

impl WorldBox {
    /// A box holding the single point `p`.
    pub fn at(p: Point2) -> Self {
        Self { min: p, max: p }
    }

    /// Grows the box to hold `p`.
    pub fn include(&mut self, p: Point2) {
        self.min.x = self.min.x.min(p.x);
        self.min.y = self.min.y.min(p.y);
        self.max.x = self.max.x.max(p.x);
        self.max.y = self.max.y.max(p.y);
    }

    /// Grows the box to hold `other`.
    pub fn union(&mut self, other: &WorldBox) {
        self.include(other.min);
        self.include(other.max);
    }
}

impl GridSpec {
    /// Number of cells.
    pub fn cells(&self) -> usize {
        self.width as usize * self.height as usize
    }

    /// The smallest grid with the given resolution whose origin is a multiple of the resolution
    /// and which holds every cell containing a point of `bounds` plus `margin` cells on each
    /// side. Refuses grids over `budget` cells.
    pub fn covering(
        bounds: &WorldBox,
        resolution: f64,
        margin: i64,
        budget: u64,
    ) -> Result<GridSpec, Error> {
        let c0 = (bounds.min.x / resolution).floor() - margin as f64;
        let r0 = (bounds.min.y / resolution).floor() - margin as f64;
        let c1 = (bounds.max.x / resolution).floor() + margin as f64;
        let r1 = (bounds.max.y / resolution).floor() + margin as f64;
        let width = c1 - c0 + 1.0;
        let height = r1 - r0 + 1.0;
        Self::check_budget(width, height, budget)?;
        Ok(GridSpec {
            resolution,
            origin: Point2::new(multiple_of(c0, resolution), multiple_of(r0, resolution)),
            width: width as u32,
            height: height as u32,
        })
    }

    /// Refuses a size (in cells, as floats so absurd sizes cannot overflow) over `budget`, or
    /// one whose cells would not fit in this machine's memory however the budget is set.
    pub fn check_budget(width: f64, height: f64, budget: u64) -> Result<(), Error> {
        let cells = width * height;
        let fits = width.is_finite()
            && height.is_finite()
            && width >= 1.0
            && height >= 1.0
            && width <= u32::MAX as f64
            && height <= u32::MAX as f64
            && cells <= budget as f64;
        if !fits {
            return Err(Error::OverBudget {
                input: None,
                width,
                height,
                cells,
                budget,
            });
        }
        let bytes = cells * std::mem::size_of::<f32>() as f64;
        let memory = physical_memory().unwrap_or(isize::MAX as u64);
        if bytes > memory as f64 || bytes > isize::MAX as f64 {
            return Err(Error::OverMemory {
                input: None,
                bytes,
                memory,
            });
        }
        Ok(())
    }

    /// The cell containing world point `p` (metres), whether or not it lies in the grid.
    #[inline]
    pub fn cell_at(&self, p: Point2) -> CellIndex {
        CellIndex::new(
            floor_i64((p.x - self.origin.x) / self.resolution),
            floor_i64((p.y - self.origin.y) / self.resolution),
        )
    }

    /// World coordinates of a cell's centre, metres.
    #[inline]
    pub fn centre(&self, c: CellIndex) -> Point2 {
        Point2::new(
            self.origin.x + (c.col as f64 + 0.5) * self.resolution,
            self.origin.y + (c.row as f64 + 0.5) * self.resolution,
        )
    }

    /// Storage index of a cell (row-major, south row first), or `None` outside the grid.
    #[inline]
    pub fn index(&self, c: CellIndex) -> Option<usize> {
        if c.col >= 0 && c.row >= 0 && c.col < self.width as i64 && c.row < self.height as i64 {
            Some(c.row as usize * self.width as usize + c.col as usize)
        } else {
            None
        }
    }

    /// The cell at a storage index.
    pub fn cell_of_index(&self, i: usize) -> CellIndex {
        let w = self.width as usize;
        CellIndex::new((i % w) as i64, (i / w) as i64)
    }

    /// World rectangle covered by the grid.
    pub fn bounds(&self) -> WorldBox {
        WorldBox {
            min: self.origin,
            max: Point2::new(
                self.origin.x + self.width as f64 * self.resolution,
                self.origin.y + self.height as f64 * self.resolution,
            ),
        }
    }
}

/// Cell values in log-odds, over a [`GridSpec`].
#[derive(Clone, Debug, PartialEq)]
pub struct Grid {
    spec: GridSpec,
    values: Vec<f32>,
}

impl Grid {
    /// A grid with every cell at `value` (log-odds).
    pub fn filled(spec: GridSpec, value: f32) -> Grid {
        Grid {
            spec,
            values: vec![value; spec.cells()],
        }
    }

    /// A grid from row-major, south-first values; `None` if the length does not match.
    pub fn from_values(spec: GridSpec, values: Vec<f32>) -> Option<Grid> {
        (values.len() == spec.cells()).then_some(Grid { spec, values })
    }

    /// The grid's geometry.
    pub fn spec(&self) -> &GridSpec {
        &self.spec
    }

    /// All values, row-major, south row first, log-odds.
    pub fn values(&self) -> &[f32] {
        &self.values
    }

    /// All values, mutable (row-major, south row first, log-odds).
    pub fn values_mut(&mut self) -> &mut [f32] {
        &mut self.values
    }

    /// Log-odds of a cell, or `None` outside the grid.
    pub fn get(&self, c: CellIndex) -> Option<f32> {
        self.spec.index(c).map(|i| self.values[i])
    }

    /// Probability of a cell, or `None` outside the grid.
    pub fn probability(&self, c: CellIndex) -> Option<f64> {
        self.get(c).map(|l| probability(l as f64))
    }

    /// Overwrites this grid with `other`'s values (same geometry), reusing the allocation.
    pub fn copy_from(&mut self, other: &Grid) {
        self.spec = other.spec;
        self.values.clear();
        self.values.extend_from_slice(&other.values);
    }

    /// Values in image order: northern-most row first, each row west to east.
    pub fn rows_north_first(&self) -> impl Iterator<Item = &[f32]> {
        self.values.chunks_exact(self.spec.width as usize).rev()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn spec() -> GridSpec {
        GridSpec {
            resolution: 0.5,
            origin: Point2::new(-1.0, 2.0),
            width: 4,
            height: 3,
        }
    }

    #[test]
    fn cell_frames_follow_the_contract() {
        let s = spec();
        // The south-west corner belongs to cell (0, 0); the cell is half-open.
        assert_eq!(s.cell_at(Point2::new(-1.0, 2.0)), CellIndex::new(0, 0));
        assert_eq!(s.cell_at(Point2::new(-0.51, 2.49)), CellIndex::new(0, 0));
        assert_eq!(s.cell_at(Point2::new(-0.5, 2.5)), CellIndex::new(1, 1));
        assert_eq!(s.centre(CellIndex::new(3, 2)), Point2::new(0.75, 3.25));
        assert_eq!(s.index(CellIndex::new(3, 2)), Some(11));
        assert_eq!(s.index(CellIndex::new(4, 0)), None);
        assert_eq!(s.index(CellIndex::new(0, -1)), None);
        assert_eq!(s.cell_of_index(6), CellIndex::new(2, 1));
    }

    #[test]
    fn covering_snaps_and_adds_margin() {
        let b = WorldBox {
            min: Point2::new(0.12, -0.31),
            max: Point2::new(1.0, 0.49),
        };
        let s = GridSpec::covering(&b, 0.25, 1, 1000).unwrap();
        // floor(0.12/0.25)=0 -> -1; floor(-0.31/0.25)=-2 -> -3; floor(1/0.25)=4 -> 5; floor(0.49/0.25)=1 -> 2.
        assert_eq!(s.origin, Point2::new(-0.25, -0.75));
        assert_eq!((s.width, s.height), (7, 6));
    }

    #[test]
    fn budget_refuses_before_allocating() {
        let b = WorldBox {
            min: Point2::new(-1e6, -1e6),
            max: Point2::new(1e6, 1e6),
        };
        let e = GridSpec::covering(&b, 0.05, 1, DEFAULT_CELL_BUDGET).unwrap_err();
        let msg = e.to_string();
        assert!(
            msg.contains("64000000") && msg.contains("40000003"),
            "{msg}"
        );
        let inf = WorldBox {
            min: Point2::new(0.0, 0.0),
            max: Point2::new(f64::INFINITY, 1.0),
        };
        assert!(GridSpec::covering(&inf, 0.05, 1, DEFAULT_CELL_BUDGET).is_err());
    }

    #[test]
    fn fast_floor_matches_floor() {
        for x in [
            -2.5,
            -2.0,
            -1e-300,
            0.0,
            -0.0,
            0.3,
            1.0,
            7.999_999_999_999,
            1e17 + 0.5,
            -1e17,
        ] {
            assert_eq!(floor_i64(x), x.floor() as i64, "{x}");
            assert_eq!(ceil_i64(x), x.ceil() as i64, "{x}");
        }
        assert_eq!(floor_i64(f64::MAX), i64::MAX);
        assert_eq!(floor_i64(-f64::MAX), i64::MIN);
    }

    #[test]
    fn north_first_rows() {
        let s = spec();
        let values: Vec<f32> = (0..12).map(|v| v as f32).collect();
        let g = Grid::from_values(s, values).unwrap();
        let rows: Vec<&[f32]> = g.rows_north_first().collect();
        assert_eq!(rows[0], &[8.0, 9.0, 10.0, 11.0]);
        assert_eq!(rows[2], &[0.0, 1.0, 2.0, 3.0]);
    }
}
