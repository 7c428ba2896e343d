//! Per-frame agreement: how well a frame's readings fit the map built from the other half of
//! the run.
//!
//! Definition. A hit reading of range r along a beam is walked cell by cell (the fusion's exact
//! traversal) to r + one cell. Cells the beam leaves before r - one cell are its *free
//! stretch*; the cells after, up to r + one cell, its *landing zone*. Against a map, the reading
//! *agrees* when some landing-zone cell is occupied and no free-stretch cell is; it *counts*
//! when some landing-zone cell is known (not at the prior) or the free stretch crosses an
//! occupied cell, since a reading into unexplored space says nothing either way. A frame's
//! agreement is agreeing / counted readings over all its sensors, in [0, 1]; a frame with no
//! counted reading has none. Occupied means log-odds above both 0 and logit(prior). Wide beams
//! are judged along their centre ray.

use super::{Hit, Split, for_each_hit, occupied_above};
use crate::error::Error;
use crate::footprint::{RayWalk, param};
use crate::fusion::MapBuilder;
use crate::grid::Grid;
use rayon::prelude::*;
use std::fmt::Write as _;
use std::ops::Range;
use std::sync::atomic::AtomicBool;

/// One frame's agreement with the map of the other half of the run.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct FrameAgreement {
    /// Frame index.
    pub frame: usize,
    /// Frame time, seconds.
    pub t: f64,
    /// Hit readings that count (see the module's definition).
    pub counted: u32,
    /// Counted readings that agree.
    pub agreeing: u32,
    /// Counted readings whose free stretch crosses an occupied cell.
    pub crossed: u32,
}

impl FrameAgreement {
    /// agreeing / counted in [0, 1], or `None` when nothing counted.
    pub fn agreement(&self) -> Option<f64> {
        (self.counted > 0).then(|| self.agreeing as f64 / self.counted as f64)
    }
}

/// The agreement of every frame of a run.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct RunAgreement {
    /// One entry per frame, in order.
    pub frames: Vec<FrameAgreement>,
    /// How the run was split into the two maps.
    pub split: Option<Split>,
    /// Frames left out of the maps of the second pass (the first pass's suspects).
    pub left_out: Vec<Range<usize>>,
}

impl RunAgreement {
    /// The run's agreement: agreeing / counted readings over all frames (`None` when nothing
    /// counted).
    pub fn overall(&self) -> Option<f64> {
        let (a, c) = self.frames.iter().fold((0u64, 0u64), |(a, c), f| {
            (a + f.agreeing as u64, c + f.counted as u64)
        });
        (c > 0).then(|| a as f64 / c as f64)
    }

    /// Each frame's agreement, in order.
    pub fn values(&self) -> Vec<Option<f64>> {
        self.frames.iter().map(FrameAgreement::agreement).collect()
    }
}

/// How one hit reading compares with a map.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct Verdict {
    /// Some landing-zone cell is known, or the free stretch crosses an occupied cell.
    pub counts: bool,
    /// Some landing-zone cell is occupied.
    pub landed: bool,
    /// Some free-stretch cell is occupied.
    pub crossed: bool,
}

impl Verdict {
    /// Whether the reading agrees with the map.
    pub fn agrees(&self) -> bool {
        self.landed && !self.crossed
    }
}

/// Judges one hit reading against `map` (see the module's definition); `prior` is the value of
/// untouched cells and `occupied` the log-odds above which a cell is occupied.
pub fn judge(map: &Grid, prior: f32, occupied: f32, hit: &Hit) -> Verdict {
    let spec = map.spec();
    let tol = spec.resolution;
    let free_end = param(hit.range - tol);
    let walk = RayWalk::new(spec, hit.origin, hit.heading, hit.range + tol);
    let mut v = Verdict::default();
    let mut known = false;
    // The cell being crossed; it is sorted into the free stretch or the landing zone once the
    // walk leaves it and its exit is known.
    let mut previous: Option<Option<f32>> = None;
    let mut zone = |value: Option<f32>, v: &mut Verdict| {
        if let Some(l) = value {
            known |= l != prior;
            v.landed |= l > occupied;
        }
    };
    walk.for_each_entered(|cell, t_enter| {
        if let Some(value) = previous {
            if t_enter <= free_end {
                if value.is_some_and(|l| l > occupied) {
                    v.crossed = true;
                    return false;
                }
            } else {
                zone(value, &mut v);
            }
        }
        previous = Some(map.get(cell));
        true
    });
    if !v.crossed
        && let Some(value) = previous
    {
        zone(value, &mut v);
    }
    v.counts = known || v.crossed;
    v
}

/// The agreement of frame `f` against `map`.
pub fn frame_agreement(builder: &MapBuilder, map: &Grid, f: usize) -> FrameAgreement {
    let prior = builder.prior();
    let occupied = occupied_above(builder);
    let mut out = FrameAgreement {
        frame: f,
        t: builder.session().frames[f].t,
        ..Default::default()
    };
    for_each_hit(builder, f, |hit| {
        let v = judge(map, prior, occupied, &hit);
        if v.counts {
            out.counted += 1;
            out.agreeing += u32::from(v.agrees());
            out.crossed += u32::from(v.crossed);
        }
    });
    out
}

/// Every frame's agreement against the half maps `maps` of `split` (frames that do not take
/// part in the split get an empty entry).
pub fn judge_run(builder: &MapBuilder, split: &Split, maps: &[Grid; 2]) -> Vec<FrameAgreement> {
    let session = builder.session();
    (0..session.frames.len())
        .into_par_iter()
        .map(|f| {
            if split.takes_part(f) {
                frame_agreement(builder, &maps[1 - split.half_of(f)], f)
            } else {
                FrameAgreement {
                    frame: f,
                    t: session.frames[f].t,
                    ..Default::default()
                }
            }
        })
        .collect()
}

/// The agreement of every frame of `builder`'s run, each against the map of the other half
/// (see [`Split`]), in two passes: the frames of the first pass's suspect stretches (see
/// [`super::suspect_stretches`]) are left out of the maps of the second, so that a bad stretch
/// does not spoil the map its neighbours are judged against. `progress` gets the share done,
/// 0..1. [`Error::Cancelled`] when `cancel` is set.
pub fn agreement(
    builder: &MapBuilder,
    cancel: &AtomicBool,
    progress: &mut dyn FnMut(f64),
) -> Result<RunAgreement, Error> {
    let n = builder.session().frames.len();
    let split = Split::new(n);
    // Building the maps is most of the work.
    let share = |d: usize, pass: f64| (pass + 0.9 * d as f64 / n.max(1) as f64) / 2.0;
    let maps = split.build(builder, &[], cancel, &mut |d| progress(share(d, 0.0)))?;
    let mut frames = judge_run(builder, &split, &maps);
    let low: Vec<Range<usize>> = super::suspect_stretches(&frames)
        .map(|(_, s)| s.into_iter().map(|s| s.frames).collect())
        .unwrap_or_default();
    if !low.is_empty() {
        let maps = split.build(builder, &low, cancel, &mut |d| progress(share(d, 1.0)))?;
        frames = judge_run(builder, &split, &maps);
    }
    progress(1.0);
    Ok(RunAgreement {
        frames,
        split: Some(split),
        left_out: low,
    })
}

/// The agreement as CSV: `frame,t,agreement,counted,agreeing,crossed`, one row per frame in
/// order; the agreement is empty where nothing counted.
pub fn agreement_csv(run: &RunAgreement) -> String {
    let mut s = String::from("frame,t,agreement,counted,agreeing,crossed\n");
    for f in &run.frames {
        let a = f.agreement().map_or(String::new(), |a| format!("{a:.6}"));
        let _ = writeln!(
            s,
            "{},{},{a},{},{},{}",
            f.frame,
            crate::io::numbers::fmt_f64(f.t),
            f.counted,
            f.agreeing,
            f.crossed
        );
    }
    s
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::geometry::Point2;
    use crate::grid::{CellIndex, GridSpec};

    /// A 20 x 3 grid of 0.1 m cells: a wall in column 15, known free before it.
    fn corridor() -> Grid {
        let spec = GridSpec {
            resolution: 0.1,
            origin: Point2::new(0.0, 0.0),
            width: 20,
            height: 3,
        };
        let mut g = Grid::filled(spec, 0.0);
        for r in 0..3 {
            for c in 0..15 {
                g.values_mut()[r * 20 + c] = -2.0;
            }
            g.values_mut()[r * 20 + 15] = 3.0;
        }
        g
    }

    fn hit(range: f64) -> Hit {
        Hit {
            sensor: 0,
            origin: Point2::new(0.05, 0.15),
            heading: 0.0,
            range,
        }
    }

    // Geometry of a simple case: a beam along row 1 from x = 0.05 m meets the wall cell that
    // spans x in [1.5, 1.6).
    #[test]
    fn a_reading_on_the_wall_agrees_within_one_cell() {
        let g = corridor();
        for r in [1.45, 1.5, 1.55, 1.62] {
            let v = judge(&g, 0.0, 0.0, &hit(r));
            assert!(v.counts && v.agrees(), "range {r}: {v:?}");
        }
    }

    #[test]
    fn a_reading_short_of_the_wall_lands_on_free_cells() {
        let v = judge(&corridor(), 0.0, 0.0, &hit(1.0));
        assert!(v.counts && !v.landed && !v.crossed && !v.agrees(), "{v:?}");
    }

    #[test]
    fn a_reading_beyond_the_wall_crosses_it() {
        let v = judge(&corridor(), 0.0, 0.0, &hit(1.85));
        assert!(v.counts && v.crossed && !v.agrees(), "{v:?}");
    }

    #[test]
    fn a_reading_into_unknown_space_does_not_count() {
        let mut g = corridor();
        g.values_mut()[20 + 15] = -2.0; // the wall has a gap in row 1
        let v = judge(&g, 0.0, 0.0, &hit(1.85));
        assert!(!v.counts, "{v:?}");
        assert_eq!(g.get(CellIndex::new(18, 1)), Some(0.0));
    }
}
