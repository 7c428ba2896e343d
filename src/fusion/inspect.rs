//! Questions about one beam or one cell: a beam's footprint with the values before and after
//! it, and every update one cell received over the run.
//!
//! Design decision: both are answered with the same per-beam footprint and the same cell rule
//! as the rebuild ([`MapBuilder::beam_touches`], [`super::rule`]), replayed on only the cells
//! asked about, so their answers agree with the map exactly and never need a second
//! implementation of the fusion.

use super::MapBuilder;
use crate::grid::{CellIndex, Grid};
use crate::params::FusionRule;
use crate::rule::Strongest;
use crate::session::{BeamRef, Session};
use std::collections::HashMap;

/// One cell touched by one beam.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Touch {
    /// The cell (may be checked against the grid with [`crate::GridSpec::index`]).
    pub cell: CellIndex,
    /// Distance from the beam origin to the cell centre, metres.
    pub distance: f64,
    /// Log-odds increment the beam gives the cell, before clamping.
    pub increment: f32,
}

/// A touch with the cell's value before and after it, as the fusion applied it.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct TouchRecord {
    /// Cell, distance and increment.
    pub touch: Touch,
    /// Cell value just before this beam (EveryBeam) or at the start of the frame
    /// (OncePerCell), log-odds.
    pub before: f32,
    /// Cell value just after this beam (EveryBeam) or at the end of the frame (OncePerCell).
    pub after: f32,
    /// Whether the clamp cut the update short.
    pub clamped: bool,
    /// Under OncePerCell, whether this beam's increment was the one chosen for the cell;
    /// always true under EveryBeam.
    pub chosen: bool,
}

/// One update applied to one cell, as the history of a cell lists them.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct CellUpdate {
    /// 0-based frame index.
    pub frame: usize,
    /// Frame time, seconds.
    pub t: f64,
    /// Sensor index in the session.
    pub sensor: usize,
    /// Beam index in the scan (under OncePerCell: the beam whose increment was chosen).
    pub beam: usize,
    /// Log-odds increment before clamping.
    pub increment: f32,
    /// Cell value after the update, clamped, log-odds.
    pub value: f32,
    /// Whether the clamp cut the update short.
    pub clamped: bool,
}

/// A cell's history as CSV with the header `frame,t,sensor,beam,increment,value`: one row per
/// update in the order applied, `increment` before clamping and `value` after, log-odds in the
/// shortest text that reads back to the same f32.
pub fn history_csv(session: &Session, updates: &[CellUpdate]) -> String {
    use std::fmt::Write;
    let mut out = String::from("frame,t,sensor,beam,increment,value\n");
    for u in updates {
        let _ = writeln!(
            out,
            "{},{},{},{},{:?},{:?}",
            u.frame, u.t, session.sensors[u.sensor].id, u.beam, u.increment, u.value
        );
    }
    out
}

impl MapBuilder {
    /// The footprint of one beam: each in-grid cell it touches, with distance and increment,
    /// in footprint order. Empty for invalid readings, ignored no-returns and unknown beams.
    /// Exclusions are not applied here: an excluded beam still shows what it would do.
    pub fn footprint(&self, b: BeamRef) -> Vec<Touch> {
        let mut out = Vec::new();
        if let Some(beam) = self.beam_as_included(b) {
            self.beam_touches(&beam, &mut |_, cell, distance, increment| {
                out.push(Touch {
                    cell,
                    distance,
                    increment,
                })
            });
        }
        out
    }

    /// The footprint of beam `b` with each cell's value before and after, given `frame_start`:
    /// the grid as it stood before frame `b.frame` was applied. The other beams of the frame
    /// are replayed on the footprint's cells only, so this is cheap.
    pub fn probe(&self, frame_start: &Grid, b: BeamRef) -> Vec<TouchRecord> {
        let touches = self.footprint(b);
        let excluded = self.is_excluded(b);
        let start: HashMap<usize, f32> = touches
            .iter()
            .filter_map(|t| {
                let idx = self.spec.index(t.cell)?;
                Some((idx, frame_start.values()[idx]))
            })
            .collect();
        let frame_taken = !self.params.exclude.frame_excluded(b.frame);
        let mut out = Vec::with_capacity(touches.len());
        match self.params.fusion {
            FusionRule::EveryBeam => {
                // Replay the frame's beams before `b` on the footprint's cells.
                let mut values = start;
                let mut reached = false;
                if frame_taken {
                    self.for_each_beam_touch(b.frame, |sensor, beam, idx, inc| {
                        reached |= (sensor, beam) == (b.sensor, b.beam);
                        if !reached && let Some(v) = values.get_mut(&idx) {
                            *v = self.bounds.update(*v, inc);
                        }
                    });
                }
                for t in touches {
                    let Some(idx) = self.spec.index(t.cell) else {
                        continue;
                    };
                    let before = values[&idx];
                    let after = if excluded {
                        before
                    } else {
                        self.bounds.update(before, t.increment)
                    };
                    values.insert(idx, after);
                    out.push(TouchRecord {
                        touch: t,
                        before,
                        after,
                        clamped: !excluded && self.bounds.cuts(before, t.increment),
                        chosen: !excluded,
                    });
                }
            }
            FusionRule::OncePerCell => {
                let mut strongest: HashMap<usize, Strongest<(usize, usize)>> = HashMap::new();
                if frame_taken {
                    self.for_each_beam_touch(b.frame, |sensor, beam, idx, inc| {
                        if start.contains_key(&idx) {
                            strongest
                                .entry(idx)
                                .and_modify(|s| s.add(inc, (sensor, beam)))
                                .or_insert_with(|| Strongest::new(inc, (sensor, beam)));
                        }
                    });
                }
                for t in touches {
                    let Some(idx) = self.spec.index(t.cell) else {
                        continue;
                    };
                    let before = start[&idx];
                    let (after, clamped, chosen) = match strongest.get(&idx) {
                        Some(s) => {
                            let (inc, from) = s.chosen();
                            (
                                self.bounds.update(before, inc),
                                self.bounds.cuts(before, inc),
                                from == (b.sensor, b.beam),
                            )
                        }
                        None => (before, false, false),
                    };
                    out.push(TouchRecord {
                        touch: t,
                        before,
                        after,
                        clamped,
                        chosen,
                    });
                }
            }
        }
        out
    }

    /// Every update applied to `cell` in frames `0..until`, in the order applied, with the
    /// value after each. Agrees exactly with [`MapBuilder::build`] for that cell.
    pub fn cell_history(&self, cell: CellIndex, until: usize) -> Vec<CellUpdate> {
        let Some(target) = self.spec.index(cell) else {
            return Vec::new();
        };
        let mut value = self.prior;
        let mut out = Vec::new();
        let centre = self.spec.centre(cell);
        let slack = self.spec.resolution * 1.5;
        let end = until.min(self.session.frames.len());
        for f in 0..end {
            let t = self.session.frames[f].t;
            let mut strongest: Option<Strongest<(usize, usize)>> = None;
            let mut record = |inc: f32, sensor: usize, beam: usize, value: &mut f32| {
                let before = *value;
                *value = self.bounds.update(before, inc);
                out.push(CellUpdate {
                    frame: f,
                    t,
                    sensor,
                    beam,
                    increment: inc,
                    value: *value,
                    clamped: self.bounds.cuts(before, inc),
                });
            };
            self.for_each_included_beam(f, |b| {
                // Cheap rejection: the cell's centre must lie within the beam's reach.
                let (dx, dy) = (centre.x - b.origin.x, centre.y - b.origin.y);
                if dx * dx + dy * dy > (b.reach + slack) * (b.reach + slack) {
                    return;
                }
                let mut hit: Option<f32> = None;
                self.beam_touches(&b, &mut |idx, _, _, inc| {
                    if idx == target {
                        hit = Some(inc);
                    }
                });
                let Some(inc) = hit else { return };
                match self.params.fusion {
                    FusionRule::EveryBeam => record(inc, b.sensor, b.beam, &mut value),
                    FusionRule::OncePerCell => match &mut strongest {
                        Some(s) => s.add(inc, (b.sensor, b.beam)),
                        None => strongest = Some(Strongest::new(inc, (b.sensor, b.beam))),
                    },
                }
            });
            if let Some(s) = strongest {
                let (inc, (sensor, beam)) = s.chosen();
                record(inc, sensor, beam, &mut value);
            }
        }
        out
    }
}
