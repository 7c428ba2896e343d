//! The default grid extent (contract section 1): every cell any beam of the session touches,
//! with one cell of margin, the origin snapped to a multiple of the resolution.

use super::MapBuilder;
use super::setup::{SensorPlan, scan_pose};
use crate::error::Error;
use crate::footprint::{cone_bounds, ray_bounds};
use crate::geometry::Point2;
use crate::grid::{GridSpec, WorldBox};
use crate::params::{Params, SensorCorrection};
use crate::session::{SensorKind, Session};

impl MapBuilder {
    /// The grid a profile gives a session: its fixed extent, or the default extent; refused
    /// over `budget` cells.
    pub(super) fn grid_for(
        session: &Session,
        params: &Params,
        plans: &[SensorPlan],
        corrections: &[SensorCorrection],
        budget: u64,
    ) -> Result<GridSpec, Error> {
        match params.extent {
            Some(e) => {
                GridSpec::check_budget(e.width as f64, e.height as f64, budget)?;
                Ok(GridSpec {
                    resolution: params.resolution,
                    origin: e.origin,
                    width: e.width,
                    height: e.height,
                })
            }
            None => {
                let bounds = touched_bounds(session, params, plans, corrections);
                GridSpec::covering(&bounds, params.resolution, 1, budget)
            }
        }
    }
}

/// World box holding every point any beam of the session reaches (exclusions are not applied,
/// so leaving parts out never moves the grid). Falls back to the robot poses, or the world
/// origin, when no beam touches anything.
fn touched_bounds(
    session: &Session,
    params: &Params,
    plans: &[SensorPlan],
    corrections: &[SensorCorrection],
) -> WorldBox {
    let mut bounds: Option<WorldBox> = None;
    let mut grow = |b: WorldBox| match &mut bounds {
        Some(all) => all.union(&b),
        None => bounds = Some(b),
    };
    for (f, frame) in session.frames.iter().enumerate() {
        for scan in &frame.scans {
            let plan = &plans[scan.sensor];
            let sensor = &session.sensors[scan.sensor];
            let pose = scan_pose(session, corrections, f, scan.sensor);
            let origin = pose.position();
            for (beam, &raw) in session.ranges(*scan).iter().enumerate() {
                let Some(reach) = plan.reach(sensor.classify(raw), params.no_return) else {
                    continue;
                };
                let heading = pose.theta + sensor.angles.angle(beam);
                grow(match plan.kind {
                    SensorKind::Ray => ray_bounds(origin, heading, reach),
                    SensorKind::Cone => cone_bounds(origin, heading, plan.cone_width, reach),
                });
            }
        }
    }
    bounds.unwrap_or_else(|| {
        let mut poses = session.frames.iter().map(|f| f.pose.position());
        let mut b = WorldBox::at(poses.next().unwrap_or(Point2::new(0.0, 0.0)));
        poses.for_each(|p| b.include(p));
        b
    })
}
