//! Diagnosis of a run's geometry: which frames disagree with the map, the sensor mount and clock
//! corrections that make the map sharpest, and re-aligning the poses of a bad stretch.
//!
//! All three compare readings with a map built from *other* frames, so a frame never vouches
//! for itself. The run is cut into blocks of consecutive frames (about a sixteenth of the run
//! each, see [`Split`]); even-numbered blocks make one map and odd-numbered blocks the other,
//! and each frame is judged against the map its own block took no part in. The maps are built
//! with the profile as it stands (model, clamp, exclusions, corrections) through the ordinary
//! fusion, so the diagnosis sees the map the user sees.
//!
//! - [`agreement`]: per frame, the share of hit beams that land on an occupied cell and cross
//!   none on the way (scan-to-map matching in the spirit of the likelihood-field sensor model
//!   of Thrun, Burgard & Fox, *Probabilistic Robotics*, 2005, ch. 6.4, counted rather than
//!   weighted); [`suspect_stretches`] picks the runs of frames well below the typical value.
//! - [`calibrate`]: the corrections to one sensor's mount and clock that maximise the run's
//!   sharpness (the mean likelihood-field value of the hit endpoints), by a coarse-to-fine
//!   pattern search over the chosen fields.
//! - [`realign`]: each frame of a stretch moved to the pose in a small window whose endpoints
//!   score best on the map of the frames outside the stretch (correlative matching, Olson,
//!   "Real-time correlative scan matching", ICRA 2009, via [`crate::align::search`]).

mod agreement;
mod calibrate;
mod realign;
mod suspects;

pub use agreement::{FrameAgreement, RunAgreement, agreement, agreement_csv};
pub use calibrate::{Calibration, CalibrationField, FitProgress, calibrate, parse_fields};
pub use realign::{RealignWindow, Realigned, realign, with_poses};
pub use suspects::{Stretch, Typical, suspect_stretches};

use crate::error::Error;
use crate::fusion::MapBuilder;
use crate::geometry::{Point2, Pose2};
use crate::grid::Grid;
use crate::session::Reading;
use std::ops::Range;
use std::sync::atomic::{AtomicBool, Ordering};

/// Blocks of the run in the split: at most this many (at least one frame each).
pub const BLOCKS: usize = 16;

/// How a run is split into two interleaved halves: frames in blocks of `block` consecutive
/// frames, block k in half `k % 2`; with a `stride` above 1 only every stride-th frame takes
/// part (the calibration's sample of a long run).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Split {
    /// Frames in the run.
    pub frames: usize,
    /// Frames per block.
    pub block: usize,
    /// Only frames whose index is a multiple of this take part.
    pub stride: usize,
}

impl Split {
    /// The split of a run of `frames` frames into [`BLOCKS`] blocks, every frame taking part.
    pub fn new(frames: usize) -> Split {
        Split {
            frames,
            block: frames.div_ceil(BLOCKS).max(1),
            stride: 1,
        }
    }

    /// As [`Split::new`], with at most about `most` frames taking part (evenly spaced).
    pub fn sampled(frames: usize, most: usize) -> Split {
        Split {
            stride: frames.div_ceil(most.max(1)).max(1),
            ..Split::new(frames)
        }
    }

    /// The half (0 or 1) frame `f` belongs to.
    pub fn half_of(&self, f: usize) -> usize {
        (f / self.block) % 2
    }

    /// Whether frame `f` takes part.
    pub fn takes_part(&self, f: usize) -> bool {
        f.is_multiple_of(self.stride)
    }

    /// The blocks of half `half`, in order.
    pub fn blocks(&self, half: usize) -> impl Iterator<Item = Range<usize>> + '_ {
        (0..self.frames.div_ceil(self.block))
            .filter(move |k| k % 2 == half)
            .map(|k| k * self.block..((k + 1) * self.block).min(self.frames))
    }

    /// Builds the two half maps with `builder`, in the contract's order within each half,
    /// leaving out the frames of `skip` (sorted, not overlapping); `progress(frames_done)`
    /// counts over both. [`Error::Cancelled`] when `cancel` is set.
    pub fn build(
        &self,
        builder: &MapBuilder,
        skip: &[Range<usize>],
        cancel: &AtomicBool,
        progress: &mut dyn FnMut(usize),
    ) -> Result<[Grid; 2], Error> {
        let mut done = 0;
        let mut maps = [builder.blank(), builder.blank()];
        for (half, map) in maps.iter_mut().enumerate() {
            for block in self.blocks(half) {
                if self.stride == 1 {
                    for part in without(block, skip) {
                        let len = part.len();
                        builder.integrate_cancellable(map, part, cancel, &mut |d| {
                            progress(done + d)
                        })?;
                        done += len;
                    }
                } else {
                    for f in block.filter(|f| self.takes_part(*f)) {
                        if cancel.load(Ordering::Relaxed) {
                            return Err(Error::Cancelled);
                        }
                        if !skip.iter().any(|s| s.contains(&f)) {
                            builder.integrate(map, f..f + 1);
                        }
                        done += 1;
                    }
                    progress(done);
                }
            }
        }
        Ok(maps)
    }
}

/// The parts of `range` outside every range of `skip` (sorted, not overlapping), in order.
fn without(range: Range<usize>, skip: &[Range<usize>]) -> Vec<Range<usize>> {
    let mut out = Vec::new();
    let mut at = range.start;
    for s in skip {
        if s.end <= at || s.start >= range.end {
            continue;
        }
        if s.start > at {
            out.push(at..s.start);
        }
        at = at.max(s.end);
    }
    if at < range.end {
        out.push(at..range.end);
    }
    out
}

/// One hit reading in world geometry: the beam's origin and heading (radians) and the range
/// (metres), with the profile's corrections applied.
#[derive(Clone, Copy, Debug)]
pub struct Hit {
    /// Sensor index in the session.
    pub sensor: usize,
    /// Beam origin, world frame, metres.
    pub origin: Point2,
    /// Beam heading, world frame, radians.
    pub heading: f64,
    /// Range, metres.
    pub range: f64,
}

impl Hit {
    /// The point the reading reports, world frame.
    pub fn end(&self) -> Point2 {
        let (s, c) = self.heading.sin_cos();
        Point2::new(
            self.origin.x + c * self.range,
            self.origin.y + s * self.range,
        )
    }
}

/// Calls `visit` for every hit reading of frame `f` that the profile includes (frame and
/// sensor exclusions honoured), centre rays of wide beams included, in the session's order.
pub fn for_each_hit(builder: &MapBuilder, f: usize, mut visit: impl FnMut(Hit)) {
    let params = builder.params();
    if params.exclude.frame_excluded(f) {
        return;
    }
    let session = builder.session();
    for scan in &session.frames[f].scans {
        let sensor = &session.sensors[scan.sensor];
        if params.exclude.sensors.contains(&sensor.id) {
            continue;
        }
        let pose = builder.sensor_pose(f, scan.sensor);
        for (beam, &raw) in session.ranges(*scan).iter().enumerate() {
            if let Reading::Hit(range) = sensor.classify(raw) {
                visit(Hit {
                    sensor: scan.sensor,
                    origin: pose.position(),
                    heading: pose.theta + sensor.angles.angle(beam),
                    range,
                });
            }
        }
    }
}

/// The log-odds above which a map cell counts as occupied: more likely occupied than both
/// even odds and the prior.
pub fn occupied_above(builder: &MapBuilder) -> f32 {
    builder.prior().max(0.0)
}

/// `a` with `b`'s error taken off, component by component (x, y, theta): the correction a
/// realignment applied.
pub fn pose_difference(a: &Pose2, b: &Pose2) -> Pose2 {
    Pose2::new(
        a.x - b.x,
        a.y - b.y,
        crate::geometry::wrap_angle(a.theta - b.theta),
    )
}

#[cfg(test)]
mod tests;

#[cfg(test)]
mod split_tests {
    use super::*;

    #[test]
    fn halves_interleave_blocks_and_skips_are_cut_out() {
        let s = Split::new(100);
        assert_eq!(s.block, 7);
        assert_eq!(s.blocks(0).next(), Some(0..7));
        assert_eq!(s.blocks(1).next(), Some(7..14));
        assert_eq!(s.blocks(1).last(), Some(91..98));
        assert_eq!(s.blocks(0).last(), Some(98..100));
        assert_eq!((s.half_of(6), s.half_of(7)), (0, 1));
        assert_eq!(without(0..10, &[2..4, 6..7]), vec![0..2, 4..6, 7..10]);
        assert_eq!(without(3..5, &[0..4, 4..9]), Vec::<Range<usize>>::new());
        assert_eq!(Split::sampled(1000, 300).stride, 4);
    }
}
