//! Per-beam set-up: which beams of a frame take part, where each starts and points in the
//! world, how far it reaches, and the one plain definition of the cells it touches and by how
//! much ([`MapBuilder::beam_touches`]).
//!
//! Design decision: every fusion path (the plain loop, the fast rebuild, the probe, the cell
//! history) gets its beams from [`MapBuilder::for_each_included_beam`], so exclusions and the
//! beam's pose in the world are decided in one place.

use super::MapBuilder;
use crate::footprint::{ConeAngle, ConeCell, RayWalk, cone_cells};
use crate::geometry::{Point2, Pose2};
use crate::grid::{CellIndex, GridSpec};
use crate::model::{ConeFreeTable, PreparedModel};
use crate::params::SensorCorrection;
use crate::params::{NoReturnRule, Params};
use crate::session::{BeamRay, BeamRef, Reading, Sensor, SensorKind, Session};

/// A beam that takes part in the fusion, resolved into world terms.
#[derive(Clone, Copy)]
pub(super) struct Included<'a> {
    pub sensor: usize,
    pub beam: usize,
    pub plan: &'a SensorPlan,
    /// Beam origin, world metres.
    pub origin: Point2,
    /// Beam axis, radians, world frame.
    pub heading: f64,
    pub reading: Reading,
    /// How far the beam reaches, metres.
    pub reach: f64,
}

/// Per-sensor constants of the fusion loop.
#[derive(Clone, Debug)]
pub(super) struct SensorPlan {
    pub kind: SensorKind,
    pub model: PreparedModel,
    pub cone_width: f64,
    /// Cone sensors: free increments by the tangent of the bearing, where they can be
    /// tabulated.
    pub cone_free: Option<ConeFreeTable>,
    pub range_max: f64,
    pub excluded: bool,
}

impl SensorPlan {
    /// The plan of `sensor` under `params`.
    pub fn new(sensor: &Sensor, params: &Params) -> SensorPlan {
        let model = PreparedModel::new(*params.model_for(&sensor.id));
        SensorPlan {
            kind: sensor.kind,
            cone_free: match sensor.kind {
                SensorKind::Cone => ConeFreeTable::new(&model, sensor.cone_width),
                SensorKind::Ray => None,
            },
            model,
            cone_width: sensor.cone_width,
            range_max: sensor.range_max,
            excluded: params.exclude.sensors.iter().any(|id| id == &sensor.id),
        }
    }

    /// How far a beam with this reading reaches (metres), or `None` when it touches nothing.
    pub fn reach(&self, reading: Reading, no_return: NoReturnRule) -> Option<f64> {
        match reading {
            Reading::Hit(z) => Some(self.model.hit_reach(z)),
            Reading::NoReturn => match no_return {
                NoReturnRule::Clear => Some(self.range_max),
                NoReturnRule::Ignore => None,
            },
            Reading::Invalid => None,
        }
    }

    /// For a cone beam with this reading: cells closer than this (metres) get the free
    /// radial value, so their increment can come from the table by the bearing's tangent
    /// (`f64::NEG_INFINITY` without a table). Pass it to the cone footprint.
    pub fn cone_tan_until(&self, reading: Reading) -> f64 {
        match (&self.cone_free, reading) {
            (None, _) => f64::NEG_INFINITY,
            (Some(_), Reading::Hit(z)) => self.model.free_below(z),
            (Some(_), _) => f64::INFINITY,
        }
    }

    /// Increment (log-odds, as the grid stores it) of one cone cell for a reading: the one
    /// definition both the plain loop and the fast rebuild use. A cell comes with a tangent
    /// only from a footprint given [`SensorPlan::cone_tan_until`] of the same reading.
    #[inline]
    pub fn cone_increment(&self, reading: Reading, cc: &ConeCell) -> f32 {
        (match (cc.angle, &self.cone_free) {
            (ConeAngle::Tan(s), Some(table)) => table.eval(s),
            _ => {
                let bearing = cc.angle.bearing();
                match reading {
                    Reading::Hit(z) => {
                        self.model
                            .cone_hit_increment(cc.distance, z, bearing, self.cone_width)
                    }
                    _ => self.model.cone_free_increment(bearing, self.cone_width),
                }
            }
        }) as f32
    }
}

/// The world pose of `sensor` when it took its scan in frame `f`, with its corrections: the
/// mount moved by the mount corrections, and the robot pose taken at the frame's time plus the
/// clock offset (interpolated between frames, held at the ends of the run). Without
/// corrections, exactly the recorded pose composed with the recorded mount.
pub(super) fn scan_pose(
    session: &Session,
    corrections: &[SensorCorrection],
    f: usize,
    sensor: usize,
) -> Pose2 {
    let frame = &session.frames[f];
    let mount = session.sensors[sensor].mount;
    let c = corrections.get(sensor).copied().unwrap_or_default();
    if c.is_zero() {
        return frame.pose.compose(&mount);
    }
    let robot = if c.time_offset == 0.0 {
        frame.pose
    } else {
        session
            .pose_at(frame.t + c.time_offset)
            .unwrap_or(frame.pose)
    };
    robot.compose(&Pose2::new(
        mount.x + c.mount_x,
        mount.y + c.mount_y,
        mount.theta + c.mount_theta,
    ))
}

/// Distances from one beam origin to cell centres: the vector to cell (c, r)'s centre is
/// `(c * res + ex0, r * res + ey0)`, so every path computes a cell's distance with the same
/// operations and gets the same bits.
#[derive(Clone, Copy, Debug)]
pub(super) struct CentreOffsets {
    pub res: f64,
    pub ex0: f64,
    pub ey0: f64,
}

impl CentreOffsets {
    /// The offsets for a beam starting at `origin` on grid `spec`.
    pub fn new(spec: &GridSpec, origin: Point2) -> Self {
        let res = spec.resolution;
        CentreOffsets {
            res,
            ex0: spec.origin.x + 0.5 * res - origin.x,
            ey0: spec.origin.y + 0.5 * res - origin.y,
        }
    }

    /// Distance from the origin to the centre of cell (col, row), metres.
    #[inline(always)]
    pub fn distance(&self, col: i64, row: i64) -> f64 {
        let ex = col as f64 * self.res + self.ex0;
        let ey = row as f64 * self.res + self.ey0;
        (ex * ex + ey * ey).sqrt()
    }
}

impl MapBuilder {
    /// The world pose of `sensor` when it took its scan in frame `f`, with the profile's
    /// corrections of its mount and clock applied: the mount moved by its corrections, and
    /// the robot pose taken at the frame's time plus the clock offset (interpolated between
    /// frames, held at the ends of the run).
    pub fn sensor_pose(&self, f: usize, sensor: usize) -> Pose2 {
        scan_pose(&self.session, &self.corrections, f, sensor)
    }

    /// One beam in world geometry as the fusion sees it (corrections applied), or `None` if
    /// the frame, scan or beam does not exist.
    pub fn beam_ray(&self, b: BeamRef) -> Option<BeamRay> {
        let session = &*self.session;
        let scan = session.scan_of(b.frame, b.sensor)?;
        let raw = *session.ranges(scan).get(b.beam)?;
        let sensor = &session.sensors[b.sensor];
        let pose = self.sensor_pose(b.frame, b.sensor);
        Some(BeamRay {
            origin: pose.position(),
            heading: pose.theta + sensor.angles.angle(b.beam),
            reading: sensor.classify(raw),
            raw,
        })
    }

    /// Calls `visit` for every beam of frame `f` that takes part in the fusion (not excluded,
    /// and touching something: invalid readings and ignored no-returns are skipped), in the
    /// contract's order. Every fusion path iterates beams through this one function.
    pub(super) fn for_each_included_beam(&self, f: usize, mut visit: impl FnMut(Included<'_>)) {
        if self.params.exclude.frame_excluded(f) {
            return;
        }
        let session = &*self.session;
        for scan in &session.frames[f].scans {
            let plan = &self.plans[scan.sensor];
            if plan.excluded {
                continue;
            }
            let sensor = &session.sensors[scan.sensor];
            let pose = self.sensor_pose(f, scan.sensor);
            let origin = pose.position();
            for (beam, &raw) in session.ranges(*scan).iter().enumerate() {
                let reading = sensor.classify(raw);
                let Some(reach) = plan.reach(reading, self.params.no_return) else {
                    continue;
                };
                if !self.excluded_beams.is_empty()
                    && self.excluded_beams.contains(&BeamRef {
                        frame: f,
                        sensor: scan.sensor,
                        beam,
                    })
                {
                    continue;
                }
                visit(Included {
                    sensor: scan.sensor,
                    beam,
                    plan,
                    origin,
                    heading: pose.theta + sensor.angles.angle(beam),
                    reading,
                    reach,
                });
            }
        }
    }

    /// Calls `visit(sensor, beam, storage_index, increment)` for every in-grid cell touched by
    /// every included beam of frame `f`, in the contract's order.
    pub(super) fn for_each_beam_touch(
        &self,
        f: usize,
        mut visit: impl FnMut(usize, usize, usize, f32),
    ) {
        self.for_each_included_beam(f, |b| {
            self.beam_touches(&b, &mut |idx, _, _, inc| visit(b.sensor, b.beam, idx, inc));
        });
    }

    /// The footprint of one beam with increments: calls `visit(storage_index, cell, distance,
    /// increment)` for each in-grid touched cell, in footprint order. The single plain
    /// definition of which cells a beam touches and by how much; the fast rebuild reaches the
    /// same cells and increments by its own route and is tested against this bit for bit.
    pub(super) fn beam_touches(
        &self,
        b: &Included<'_>,
        visit: &mut dyn FnMut(usize, CellIndex, f64, f32),
    ) {
        let spec = &self.spec;
        let plan = b.plan;
        match plan.kind {
            SensorKind::Ray => {
                let walk = RayWalk::new(spec, b.origin, b.heading, b.reach);
                let (w, h) = (spec.width as i64, spec.height as i64);
                // Start where the segment enters the grid (a straight segment never comes back
                // into a convex box once it has left it), so a beam from far outside costs
                // only the cells inside.
                let Some((first, t_enter)) = walk.enter_box(0..h, 0..w) else {
                    return;
                };
                let centres = CentreOffsets::new(spec, b.origin);
                let free = plan.model.free_increment() as f32;
                walk.for_each_entered_from(first, t_enter, |c, _| {
                    if c.col < 0 || c.row < 0 || c.col >= w || c.row >= h {
                        return false;
                    }
                    let d = centres.distance(c.col, c.row);
                    let inc = match b.reading {
                        Reading::Hit(z) => plan.model.hit_increment(d, z) as f32,
                        _ => free,
                    };
                    visit(c.row as usize * w as usize + c.col as usize, c, d, inc);
                    true
                });
            }
            SensorKind::Cone => {
                let tan_until = plan.cone_tan_until(b.reading);
                let cells = cone_cells(
                    spec,
                    b.origin,
                    b.heading,
                    plan.cone_width,
                    b.reach,
                    tan_until,
                );
                for cc in cells {
                    let inc = plan.cone_increment(b.reading, &cc);
                    if let Some(idx) = spec.index(cc.cell) {
                        visit(idx, cc.cell, cc.distance, inc);
                    }
                }
            }
        }
    }

    /// One beam of the session as the fusion sees it (with its world pose), whether or not
    /// it is excluded; `None` for a beam that does not exist or touches nothing.
    pub(super) fn beam_as_included(&self, b: BeamRef) -> Option<Included<'_>> {
        let ray = self.beam_ray(b)?;
        let plan = &self.plans[b.sensor];
        let reach = plan.reach(ray.reading, self.params.no_return)?;
        Some(Included {
            sensor: b.sensor,
            beam: b.beam,
            plan,
            origin: ray.origin,
            heading: ray.heading,
            reading: ray.reading,
            reach,
        })
    }

    /// Whether a beam is left out by the profile's exclusions.
    pub fn is_excluded(&self, b: BeamRef) -> bool {
        self.params.exclude.frame_excluded(b.frame)
            || self.plans.get(b.sensor).is_some_and(|p| p.excluded)
            || self.excluded_beams.contains(&b)
    }
}
