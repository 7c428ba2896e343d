//! Our simulator: a floor plan and a route in, a session and a reference map out.
//!
//! The robot drives the route's waypoints in straight lines at constant speed and turns in
//! place at each. At every frame each sensor casts its beams against the walls that exist at
//! that time: narrow beams pass glass with the glass's `pass` probability, wide beams take the
//! nearest echo of several sub-rays across their opening and always reflect from glass. Range
//! noise, invalid readings and missed returns are drawn from a seeded generator, so the same
//! plan always gives the same session.

mod building;
mod plan;
mod rng;

pub use building::{BuildingSpec, building_plan};
pub use plan::{
    Faults, FloorPlan, Material, NoReturnReport, Noise, PoseError, PoseFault, Route, SensorFault,
    SimSensor, Wall, Window,
};
pub use rng::Rng;

use crate::error::{Error, InputError};
use crate::footprint::RayWalk;
use crate::geometry::{Point2, Pose2, wrap_angle};
use crate::grid::{DEFAULT_CELL_BUDGET, Grid, GridSpec, WorldBox};
use crate::logodds::logit;
use crate::session::{SensorKind, Session};

/// Log-odds of occupied cells in a reference map.
pub const REFERENCE_OCCUPIED: f32 = 3.89; // logit(0.98)
/// Log-odds of free cells in a reference map.
pub const REFERENCE_FREE: f32 = -3.89;

/// Distance along a ray (origin, unit direction) to a segment, if the ray meets it at t > 0.
pub fn ray_segment(origin: Point2, dir: (f64, f64), a: Point2, b: Point2) -> Option<f64> {
    let (ex, ey) = (b.x - a.x, b.y - a.y);
    let denom = dir.0 * ey - dir.1 * ex;
    if denom.abs() < 1e-12 {
        return None;
    }
    let (wx, wy) = (a.x - origin.x, a.y - origin.y);
    let t = (wx * ey - wy * ex) / denom;
    let u = (wx * dir.1 - wy * dir.0) / denom;
    (t > 1e-9 && (0.0..=1.0).contains(&u)).then_some(t)
}

/// The walls at one instant, ready for ray casting: each wall is filed in the buckets of a
/// coarse grid that it crosses, and a ray visits buckets in order (exact traversal again), so
/// a cast tests only the walls near its path.
struct Scene<'a> {
    walls: Vec<&'a Wall>,
    buckets: GridSpec,
    filed: Vec<Vec<u32>>,
    /// Every wall and the route lie inside this box; a ray that leaves it meets nothing more.
    bounds: WorldBox,
}

impl<'a> Scene<'a> {
    fn at(plan: &'a FloorPlan, t: f64) -> Self {
        let walls: Vec<&Wall> = plan.walls.iter().filter(|w| w.exists_at(t)).collect();
        let mut bounds = WorldBox::at(plan.route.waypoints[0]);
        for p in walls
            .iter()
            .flat_map(|w| [w.a, w.b])
            .chain(plan.route.waypoints.iter().copied())
        {
            bounds.include(p);
        }
        let span = (bounds.max.x - bounds.min.x).max(bounds.max.y - bounds.min.y);
        let size = (span / 48.0).max(1.0);
        let buckets = GridSpec::covering(&bounds, size, 1, u64::MAX).expect("a finite plan");
        let mut filed = vec![Vec::new(); buckets.cells()];
        for (i, w) in walls.iter().enumerate() {
            let len = w.a.distance(w.b);
            let (ux, uy) = ((w.b.x - w.a.x) / len, (w.b.y - w.a.y) / len);
            // The wall and two copies a hair to either side, so a wall lying on a bucket
            // boundary is filed on both sides of it.
            for side in [0.0, 1e-7, -1e-7] {
                let a = Point2::new(w.a.x - uy * side, w.a.y + ux * side);
                RayWalk::from_direction(&buckets, a, ux, uy, len).for_each(|c| {
                    if let Some(k) = buckets.index(c) {
                        let list: &mut Vec<u32> = &mut filed[k];
                        if list.last() != Some(&(i as u32)) {
                            list.push(i as u32);
                        }
                    }
                    true
                });
            }
        }
        for list in &mut filed {
            list.sort_unstable();
            list.dedup();
        }
        Scene {
            walls,
            buckets,
            filed,
            bounds,
        }
    }

    /// Nearest distance along the ray to a wall; glass is passed with its probability when
    /// `narrow`. `None` if nothing is hit within `max` metres. Walls are met in order of
    /// distance, each once.
    fn cast(
        &self,
        origin: Point2,
        heading: f64,
        max: f64,
        narrow: bool,
        rng: &mut Rng,
    ) -> Option<f64> {
        let dir = (heading.cos(), heading.sin());
        // Walk no further than where the ray leaves the scene (however far the sensor reaches).
        let max = max.min(exit_distance(origin, dir, &self.bounds) + 1.0);
        let walk = RayWalk::from_direction(&self.buckets, origin, dir.0, dir.1, max);
        let mut hits: Vec<(f64, Material)> = Vec::new();
        let mut found = None;
        let mut t_enter = 0.0f64;
        walk.for_each(|c| {
            let t_exit =
                crate::footprint::metres(walk.leave_col(c.col).min(walk.leave_row(c.row))).min(max);
            let Some(k) = self.buckets.index(c) else {
                t_enter = t_exit;
                return true;
            };
            hits.clear();
            for &i in &self.filed[k] {
                let w = self.walls[i as usize];
                if let Some(t) = ray_segment(origin, dir, w.a, w.b)
                    && t < max
                    && t >= t_enter
                    && (t < t_exit || t_exit >= max)
                {
                    hits.push((t, w.material));
                }
            }
            hits.sort_by(|a, b| a.0.total_cmp(&b.0));
            for &(t, m) in &hits {
                let stops = match m {
                    Material::Solid => true,
                    Material::Glass { pass } => !narrow || rng.uniform() >= pass,
                };
                if stops {
                    found = Some(t);
                    return false;
                }
            }
            t_enter = t_exit;
            true
        });
        found
    }
}

/// One piece of a route's motion: a turn in place or a straight drive.
struct Piece {
    start: f64,
    duration: f64,
    from: Pose2,
    to: Pose2,
}

/// The route's motion as pieces, and its total duration in seconds.
fn route_pieces(route: &Route) -> (Vec<Piece>, f64) {
    let mut pieces = Vec::new();
    let wp = &route.waypoints;
    let first_heading = (wp[1].y - wp[0].y).atan2(wp[1].x - wp[0].x);
    let mut pose = Pose2::new(wp[0].x, wp[0].y, first_heading);
    let mut t = 0.0;
    for pair in wp.windows(2) {
        let (a, b) = (pair[0], pair[1]);
        let heading = (b.y - a.y).atan2(b.x - a.x);
        let turn = wrap_angle(heading - pose.theta);
        if turn.abs() > 1e-9 {
            let duration = turn.abs() / route.turn_rate;
            let to = Pose2::new(pose.x, pose.y, pose.theta + turn);
            pieces.push(Piece {
                start: t,
                duration,
                from: pose,
                to,
            });
            t += duration;
            pose = to;
        }
        let length = a.distance(b);
        if length > 0.0 {
            let duration = length / route.speed;
            let to = Pose2::new(b.x, b.y, pose.theta);
            pieces.push(Piece {
                start: t,
                duration,
                from: pose,
                to,
            });
            t += duration;
            pose = to;
        }
    }
    (pieces, t)
}

/// How many frames a route gives: one at t = 0 and one every 1 / rate seconds after, up to its
/// duration; `None` when that is not a finite count.
pub fn route_frame_count(route: &Route) -> Option<u64> {
    let (_, total) = route_pieces(route);
    let n = (total * route.rate).floor();
    (0.0..1e18).contains(&n).then(|| n as u64 + 1)
}

/// Distance along a ray from a point inside (or on) a box to where it leaves the box.
fn exit_distance(origin: Point2, dir: (f64, f64), b: &WorldBox) -> f64 {
    let along = |o: f64, d: f64, lo: f64, hi: f64| {
        if d > 0.0 {
            (hi - o) / d
        } else if d < 0.0 {
            (lo - o) / d
        } else {
            f64::INFINITY
        }
    };
    along(origin.x, dir.0, b.min.x, b.max.x)
        .min(along(origin.y, dir.1, b.min.y, b.max.y))
        .max(0.0)
}

/// The pose along a route's pieces at time `t` seconds (held at the ends).
fn pose_on(pieces: &[Piece], t: f64) -> Pose2 {
    let k = pieces
        .partition_point(|p| p.start + p.duration <= t)
        .min(pieces.len().saturating_sub(1));
    match pieces.get(k) {
        Some(piece) => {
            let u = ((t - piece.start) / piece.duration).clamp(0.0, 1.0);
            Pose2::new(
                piece.from.x + u * (piece.to.x - piece.from.x),
                piece.from.y + u * (piece.to.y - piece.from.y),
                wrap_angle(piece.from.theta + u * (piece.to.theta - piece.from.theta)),
            )
        }
        None => Pose2::default(),
    }
}

/// The robot's pose at each frame time along a route (a route checked by
/// [`FloorPlan::validate`], whose frame count is bounded).
pub fn route_poses(route: &Route) -> Vec<(f64, Pose2)> {
    let (pieces, _) = route_pieces(route);
    let count = route_frame_count(route).unwrap_or(0) as usize;
    (0..count)
        .map(|i| {
            let t = i as f64 / route.rate;
            (t, pose_on(&pieces, t))
        })
        .collect()
}

/// Rounds a range to whole millimetres, as many sensors report them.
fn to_mm(r: f64) -> f32 {
    ((r * 1000.0).round() / 1000.0) as f32
}

/// Simulates the plan's run into a session. The plan is checked first (a plan read from a file
/// already was): its sensors, and that its run stays within the limits on frames and readings.
pub fn simulate(plan: &FloorPlan) -> Result<Session, InputError> {
    plan.validate()
        .map_err(|p| InputError::new(plan.name.clone(), p))?;
    let sensors = plan.sensors.iter().map(|s| s.sensor.clone()).collect();
    let mut session = Session::with_sensors(plan.name.clone(), plan.notes.clone(), sensors)
        .map_err(|p| InputError::new(plan.name.clone(), p))?;
    let mut rng = Rng::new(plan.seed);
    let mut buffers: Vec<Vec<f32>> = plan
        .sensors
        .iter()
        .map(|s| Vec::with_capacity(s.sensor.beam_count()))
        .collect();
    // The scene is rebuilt only when a timed wall appears or disappears.
    let mut scene: Option<(Vec<bool>, Scene)> = None;
    let (pieces, _) = route_pieces(&plan.route);
    for (t, pose) in route_poses(&plan.route) {
        let present: Vec<bool> = plan.walls.iter().map(|w| w.exists_at(t)).collect();
        if scene.as_ref().is_none_or(|(p, _)| *p != present) {
            scene = Some((present, Scene::at(plan, t)));
        }
        let scene = &scene.as_ref().expect("just built").1;
        for (sim, buf) in plan.sensors.iter().zip(buffers.iter_mut()) {
            buf.clear();
            let s = &sim.sensor;
            // Where the sensor truly was: its true mount, at the time it truly scanned.
            let fault = plan.faults.sensors.get(&s.id).copied().unwrap_or_default();
            let true_pose = if fault.lag == 0.0 {
                pose
            } else {
                pose_on(&pieces, t + fault.lag)
            };
            let true_mount = Pose2::new(
                s.mount.x + fault.mount.x,
                s.mount.y + fault.mount.y,
                s.mount.theta + fault.mount.theta,
            );
            let mount = true_pose.compose(&true_mount);
            for k in 0..s.beam_count() {
                let heading = mount.theta + s.angles.angle(k);
                let truth = match s.kind {
                    SensorKind::Ray => {
                        scene.cast(mount.position(), heading, s.range_max, true, &mut rng)
                    }
                    SensorKind::Cone => {
                        let n = sim.cone_rays.max(1);
                        (0..n)
                            .filter_map(|j| {
                                let u = if n == 1 {
                                    0.0
                                } else {
                                    j as f64 / (n - 1) as f64 - 0.5
                                };
                                scene.cast(
                                    mount.position(),
                                    heading + u * s.cone_width,
                                    s.range_max,
                                    false,
                                    &mut rng,
                                )
                            })
                            .min_by(f64::total_cmp)
                    }
                };
                let noise = sim.noise;
                let nothing = match sim.no_return {
                    NoReturnReport::RangeMax => s.range_max as f32,
                    NoReturnReport::Infinity => f32::INFINITY,
                };
                let r = if rng.uniform() < noise.dropout {
                    0.0
                } else if rng.uniform() < noise.miss {
                    nothing
                } else {
                    match truth {
                        Some(d) => {
                            let noisy = d + noise.sigma * rng.normal();
                            if noisy >= s.range_max {
                                nothing
                            } else {
                                to_mm(noisy.max(s.range_min))
                            }
                        }
                        None => nothing,
                    }
                };
                buf.push(r);
            }
        }
        let scans: Vec<(&str, &[f32])> = plan
            .sensors
            .iter()
            .zip(&buffers)
            .map(|(s, b)| (s.sensor.id.as_str(), b.as_slice()))
            .collect();
        // The pose the session records, with the plan's pose errors.
        let e = plan.faults.pose_error(t);
        let recorded = Pose2::new(pose.x + e.x, pose.y + e.y, pose.theta + e.theta);
        session
            .push_frame(t, recorded, &scans)
            .map_err(|p| InputError::new(plan.name.clone(), p))?;
    }
    Ok(session)
}

/// Whether `p` lies inside the polygon (even-odd rule).
fn inside_polygon(p: Point2, poly: &[Point2]) -> bool {
    let mut inside = false;
    let n = poly.len();
    for i in 0..n {
        let (a, b) = (poly[i], poly[(i + 1) % n]);
        if (a.y > p.y) != (b.y > p.y) {
            let x = a.x + (p.y - a.y) / (b.y - a.y) * (b.x - a.x);
            if p.x < x {
                inside = !inside;
            }
        }
    }
    inside
}

/// The plan as a reference map at time `t` seconds: cells crossed by a wall that exists then
/// are occupied, cells whose centre lies inside an odd number of `free_space` polygons are
/// free (so a polygon inside another is a hole, e.g. a pillar), the rest unknown (0.5).
pub fn reference_map(plan: &FloorPlan, t: f64) -> Result<Grid, Error> {
    let mut bounds: Option<WorldBox> = None;
    for p in plan
        .walls
        .iter()
        .flat_map(|w| [w.a, w.b])
        .chain(plan.free_space.iter().flatten().copied())
    {
        match &mut bounds {
            Some(b) => b.include(p),
            None => bounds = Some(WorldBox::at(p)),
        }
    }
    let bounds = bounds.unwrap_or_else(|| WorldBox::at(Point2::new(0.0, 0.0)));
    let spec = GridSpec::covering(&bounds, plan.reference_resolution, 1, DEFAULT_CELL_BUDGET)?;
    let mut grid = Grid::filled(spec, 0.0);
    for i in 0..spec.cells() {
        let c = spec.centre(spec.cell_of_index(i));
        let covering = plan
            .free_space
            .iter()
            .filter(|poly| inside_polygon(c, poly))
            .count();
        if covering % 2 == 1 {
            grid.values_mut()[i] = REFERENCE_FREE;
        }
    }
    for w in plan.walls.iter().filter(|w| w.exists_at(t)) {
        let len = w.a.distance(w.b);
        let (ux, uy) = ((w.b.x - w.a.x) / len, (w.b.y - w.a.y) / len);
        // Walk the wall itself and two copies shifted a hair to either side, so that a wall
        // lying exactly on a grid line marks the cells on both sides of it (a surface there is
        // seen from both rooms); elsewhere the copies add nothing.
        for side in [0.0, 1e-7, -1e-7] {
            let a = Point2::new(w.a.x - uy * side, w.a.y + ux * side);
            RayWalk::from_direction(&spec, a, ux, uy, len).for_each(|c| {
                if let Some(i) = spec.index(c) {
                    grid.values_mut()[i] = REFERENCE_OCCUPIED;
                }
                true
            });
        }
    }
    debug_assert!((REFERENCE_OCCUPIED as f64 - logit(0.98)).abs() < 1e-2);
    Ok(grid)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::session::{BeamAngles, Sensor};

    fn room_plan() -> FloorPlan {
        let p = |x, y| Point2::new(x, y);
        let wall = |a, b| Wall {
            a,
            b,
            material: Material::Solid,
            present: None,
            label: String::new(),
        };
        FloorPlan {
            format: 1,
            name: "rectangle".into(),
            notes: String::new(),
            walls: vec![
                wall(p(0.0, 0.0), p(6.0, 0.0)),
                wall(p(6.0, 0.0), p(6.0, 4.0)),
                wall(p(6.0, 4.0), p(0.0, 4.0)),
                wall(p(0.0, 4.0), p(0.0, 0.0)),
            ],
            free_space: vec![vec![p(0.0, 0.0), p(6.0, 0.0), p(6.0, 4.0), p(0.0, 4.0)]],
            route: Route {
                waypoints: vec![p(1.0, 1.0), p(5.0, 1.0), p(5.0, 3.0)],
                speed: 1.0,
                turn_rate: 1.0,
                rate: 5.0,
            },
            sensors: vec![SimSensor {
                sensor: Sensor {
                    id: "laser".into(),
                    kind: SensorKind::Ray,
                    mount: Pose2::default(),
                    angles: BeamAngles::Fan {
                        start: -3.0,
                        step: 0.05,
                        count: 121,
                    },
                    range_min: 0.05,
                    range_max: 20.0,
                    cone_width: 0.0,
                },
                noise: Noise::default(),
                cone_rays: 9,
                no_return: NoReturnReport::RangeMax,
            }],
            seed: 1,
            reference_resolution: 0.1,
            faults: Faults::default(),
        }
    }

    #[test]
    fn ranges_match_analytic_distances_in_a_rectangular_room() {
        // Geometry of a simple case: inside the axis-aligned room [0,6] x [0,4] a beam from
        // (x, y) at heading h meets the first wall at min over the walls it faces of
        // (wall - x) / cos h or (wall - y) / sin h.
        let plan = room_plan();
        let s = simulate(&plan).unwrap();
        assert!(s.frames.len() > 20);
        let sensor = &s.sensors[0];
        for f in &s.frames {
            let ranges = s.ranges(f.scans[0]);
            for (k, &r) in ranges.iter().enumerate() {
                let h = f.pose.theta + sensor.angles.angle(k);
                let (c, sn) = (h.cos(), h.sin());
                let mut best = f64::INFINITY;
                if c > 1e-12 {
                    best = best.min((6.0 - f.pose.x) / c);
                }
                if c < -1e-12 {
                    best = best.min((0.0 - f.pose.x) / c);
                }
                if sn > 1e-12 {
                    best = best.min((4.0 - f.pose.y) / sn);
                }
                if sn < -1e-12 {
                    best = best.min((0.0 - f.pose.y) / sn);
                }
                assert!(
                    (r as f64 - best).abs() <= 0.0005 + 1e-6,
                    "range {r} vs {best}"
                );
            }
        }
    }

    #[test]
    fn route_starts_and_ends_at_its_waypoints() {
        let plan = room_plan();
        let poses = route_poses(&plan.route);
        let (t0, p0) = poses[0];
        assert_eq!(t0, 0.0);
        assert_eq!((p0.x, p0.y, p0.theta), (1.0, 1.0, 0.0));
        let (_, last) = *poses.last().unwrap();
        // 4 m at 1 m/s, a quarter turn at 1 rad/s, 2 m: the last frame is within one frame
        // period (0.2 s at 1 m/s) of (5, 3).
        assert!(
            (last.x - 5.0).abs() < 1e-9 && (last.y - 3.0).abs() <= 0.2 + 1e-9,
            "{last:?}"
        );
        assert!(poses.windows(2).all(|w| w[1].0 > w[0].0));
    }

    #[test]
    fn glass_passes_narrow_beams_and_doors_come_and_go() {
        let mut plan = room_plan();
        plan.walls.push(Wall {
            a: Point2::new(3.0, 0.0),
            b: Point2::new(3.0, 4.0),
            material: Material::Glass { pass: 0.8 },
            present: None,
            label: "glass".into(),
        });
        let scene = Scene::at(&plan, 0.0);
        let mut rng = Rng::new(3);
        let n = 4000;
        let passed = (0..n)
            .filter(|_| {
                scene
                    .cast(Point2::new(1.0, 2.0), 0.0, 20.0, true, &mut rng)
                    .is_some_and(|d| d > 3.0)
            })
            .count();
        // Binomial(4000, 0.8): mean 3200, sd ~25; allow 5 sd.
        assert!((passed as i64 - 3200).abs() < 130, "{passed}");
        assert_eq!(
            scene.cast(Point2::new(1.0, 2.0), 0.0, 20.0, false, &mut rng),
            Some(2.0)
        );
        let door = Wall {
            present: Some(Window {
                from: 10.0,
                until: 20.0,
            }),
            ..plan.walls[4].clone()
        };
        assert!(!door.exists_at(9.9) && door.exists_at(10.0) && !door.exists_at(20.0));
    }

    #[test]
    fn reference_marks_walls_and_free_space() {
        let plan = room_plan();
        let g = reference_map(&plan, 0.0).unwrap();
        let at = |x, y| g.get(g.spec().cell_at(Point2::new(x, y))).unwrap();
        assert_eq!(at(3.0, 2.0), REFERENCE_FREE);
        // A wall lying exactly on a grid line marks the cells on both sides of it.
        assert_eq!(at(3.05, 0.05), REFERENCE_OCCUPIED);
        assert_eq!(at(3.05, -0.05), REFERENCE_OCCUPIED);
        assert_eq!(at(5.95, 2.0), REFERENCE_OCCUPIED);
        assert_eq!(at(6.05, 2.0), REFERENCE_OCCUPIED);
        assert_eq!(at(5.85, 2.0), REFERENCE_FREE);
        assert_eq!(at(3.05, 1.0), REFERENCE_FREE);
    }

    #[test]
    fn missed_returns_written_as_infinity_clear_like_range_max() {
        // The file contract (section 2): a reading of +inf is a no-return. A run whose sensor
        // writes its misses as +inf maps exactly like the same run writing range_max.
        let mut plan = room_plan();
        plan.sensors[0].noise.miss = 0.2;
        plan.sensors[0].sensor.range_max = 3.0;
        let as_max = simulate(&plan).unwrap();
        plan.sensors[0].no_return = NoReturnReport::Infinity;
        let as_inf = simulate(&plan).unwrap();
        let infinite = as_inf
            .frames
            .iter()
            .flat_map(|f| as_inf.ranges(f.scans[0]).to_vec())
            .filter(|r| r.is_infinite())
            .count();
        assert!(infinite > 100, "{infinite}");
        assert_eq!(as_max.stats().no_returns, as_inf.stats().no_returns);
        let params = crate::params::Params::default();
        let build = |s: Session| {
            let n = s.frames.len();
            crate::fusion::MapBuilder::new(std::sync::Arc::new(s), params.clone())
                .unwrap()
                .build(n)
        };
        assert_eq!(build(as_max), build(as_inf));
        // And the text writer keeps them: inf reads back as inf.
        let text = as_inf_text(&plan);
        assert!(text.contains("inf"));
    }

    fn as_inf_text(plan: &FloorPlan) -> String {
        simulate(plan).unwrap().to_ron_string()
    }
}
