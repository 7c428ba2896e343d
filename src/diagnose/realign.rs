//! Re-aligning a stretch of frames: each frame's robot pose moved to where its readings fit
//! the map of the frames outside the stretch best.
//!
//! Method. The map is built from every frame outside the stretch (the profile as it stands)
//! and turned into likelihood fields of cells 4, 2 and 1 times the map's. Each frame's hit
//! endpoints (corrections applied) are expressed in its recorded robot frame, and its pose is
//! searched exhaustively on a lattice, coarse to fine (correlative matching, Olson, "Real-time
//! correlative scan matching", ICRA 2009, via [`crate::align::search`]): over the whole window
//! in steps of 4 cells and 1 degree, then +-4 cells in steps of 1 cell and +-1 degree in quarter
//! degrees, then +-1 cell in quarter cells and +-0.25 degree in 0.05 degree steps. Frames are
//! independent of one another, so a stretch is searched in parallel. A frame without hit
//! readings keeps its pose.

use super::agreement::frame_agreement;
use super::{for_each_hit, occupied_above};
use crate::align::{LikelihoodField, Window, search};
use crate::error::{Error, InputError, Problem};
use crate::fusion::MapBuilder;
use crate::geometry::{Point2, Pose2};
use crate::session::Session;
use rayon::prelude::*;
use std::ops::Range;
use std::sync::Arc;
use std::sync::atomic::{AtomicBool, AtomicUsize, Ordering};

/// How far a frame's pose may move.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct RealignWindow {
    /// Largest shift in x and in y, metres.
    pub reach: f64,
    /// Largest turn, radians.
    pub turn: f64,
}

impl Default for RealignWindow {
    /// Half a metre and five degrees each way.
    fn default() -> Self {
        RealignWindow {
            reach: 0.5,
            turn: 5f64.to_radians(),
        }
    }
}

/// A frame's agreement before and after re-alignment.
pub type BeforeAfter = (Option<f64>, Option<f64>);

/// The outcome of re-aligning a stretch.
#[derive(Clone, Debug, PartialEq)]
pub struct Realigned {
    /// The frames re-aligned.
    pub frames: Range<usize>,
    /// Their recorded robot poses.
    pub before: Vec<Pose2>,
    /// Their re-aligned robot poses.
    pub after: Vec<Pose2>,
    /// Each frame's agreement with the map of the other frames, before and after.
    pub agreement: Vec<BeforeAfter>,
}

impl Realigned {
    /// Mean agreement of the stretch before and after (frames with one).
    pub fn mean_agreement(&self) -> (Option<f64>, Option<f64>) {
        let mean = |pick: fn(&BeforeAfter) -> Option<f64>| {
            let v: Vec<f64> = self.agreement.iter().filter_map(pick).collect();
            (!v.is_empty()).then(|| v.iter().sum::<f64>() / v.len() as f64)
        };
        (mean(|a| a.0), mean(|a| a.1))
    }
}

/// `session` with the re-aligned poses of `r` in place of the recorded ones.
pub fn with_poses(session: &Session, r: &Realigned) -> Session {
    let mut s = session.clone();
    for (f, pose) in r.frames.clone().zip(&r.after) {
        s.frames[f].pose = *pose;
    }
    s
}

/// A point in the world expressed in the frame of `pose`.
fn local(pose: &Pose2, p: Point2) -> Point2 {
    let (s, c) = pose.theta.sin_cos();
    let (dx, dy) = (p.x - pose.x, p.y - pose.y);
    Point2::new(c * dx + s * dy, -s * dx + c * dy)
}

/// Re-aligns frames `frames` of `builder`'s run within `window` (see the module's method).
/// `progress(frames_done)`; [`Error::Cancelled`] when `cancel` is set.
pub fn realign(
    builder: &MapBuilder,
    frames: Range<usize>,
    window: RealignWindow,
    cancel: &AtomicBool,
    progress: &(dyn Fn(usize) + Sync),
) -> Result<Realigned, Error> {
    let session = builder.session();
    let n = session.frames.len();
    if frames.is_empty() || frames.end > n {
        return Err(InputError::new(
            "frames",
            Problem::BadField {
                field: "frames".into(),
                reason: format!(
                    "{}..{} is not a stretch of this run of {n} frames",
                    frames.start, frames.end
                ),
            },
        )
        .into());
    }
    if !(window.reach.is_finite() && window.reach >= 0.0 && window.turn.is_finite())
        || window.turn < 0.0
    {
        return Err(InputError::new(
            "window",
            Problem::BadField {
                field: "window".into(),
                reason: "needs a finite reach >= 0 m and turn >= 0 rad".into(),
            },
        )
        .into());
    }
    let mut map = builder.blank();
    builder.integrate_cancellable(&mut map, 0..frames.start, cancel, &mut |_| {})?;
    builder.integrate_cancellable(&mut map, frames.end..n, cancel, &mut |_| {})?;
    let occupied = occupied_above(builder);
    let fields = [4u32, 2, 1].map(|k| LikelihoodField::of_grid_above(&map, k, occupied));
    let res = builder.spec().resolution;
    let degree = 1f64.to_radians();
    let windows = [
        Window {
            reach: window.reach,
            step: 4.0 * res,
            turn: window.turn,
            turn_step: degree,
        },
        Window {
            reach: (4.0 * res).min(window.reach),
            step: res,
            turn: degree.min(window.turn),
            turn_step: 0.25 * degree,
        },
        Window {
            reach: res.min(window.reach),
            step: 0.25 * res,
            turn: (0.25 * degree).min(window.turn),
            turn_step: 0.05 * degree,
        },
    ];
    let done = AtomicUsize::new(0);
    let after: Vec<Pose2> = frames
        .clone()
        .into_par_iter()
        .map(|f| {
            if cancel.load(Ordering::Relaxed) {
                return Err(Error::Cancelled);
            }
            let recorded = session.frames[f].pose;
            let mut points = Vec::new();
            for_each_hit(builder, f, |hit| points.push(local(&recorded, hit.end())));
            let mut pose = recorded;
            if !points.is_empty() {
                for (field, w) in fields.iter().zip(windows) {
                    pose = search(&points, field, pose, w).0;
                }
            }
            progress(done.fetch_add(1, Ordering::Relaxed) + 1);
            Ok(pose)
        })
        .collect::<Result<_, Error>>()?;
    let before: Vec<Pose2> = frames.clone().map(|f| session.frames[f].pose).collect();
    let mut out = Realigned {
        frames: frames.clone(),
        before,
        after,
        agreement: Vec::new(),
    };
    let moved = MapBuilder::new(
        Arc::new(with_poses(session, &out)),
        builder.params().clone(),
    )?;
    out.agreement = frames
        .map(|f| {
            (
                frame_agreement(builder, &map, f).agreement(),
                frame_agreement(&moved, &map, f).agreement(),
            )
        })
        .collect();
    Ok(out)
}
