//! A large procedural building of our own for benchmarks: rows of rooms along two long
//! corridors joined by a cross corridor, boxes of clutter in the rooms, and a route that runs
//! the corridors and looks into rooms, timed to give an exact number of frames.

use super::plan::{FloorPlan, Material, Noise, Route, SimSensor, Wall};
use super::rng::Rng;
use crate::geometry::{Point2, Pose2};
use crate::session::{BeamAngles, Sensor, SensorKind};

/// Size and sensor of a generated building run.
#[derive(Clone, Debug, PartialEq)]
pub struct BuildingSpec {
    /// Building width (x), metres.
    pub width: f64,
    /// Building height (y), metres.
    pub height: f64,
    /// Frames of the run.
    pub frames: usize,
    /// Laser beams per scan (over 270 degrees).
    pub beams: usize,
    /// Laser maximum range, metres.
    pub range: f64,
    /// Seed of clutter and noise.
    pub seed: u64,
}

impl Default for BuildingSpec {
    fn default() -> Self {
        BuildingSpec {
            width: 96.0,
            height: 72.0,
            frames: 2000,
            beams: 1081,
            range: 30.0,
            seed: 2026,
        }
    }
}

fn wall(a: (f64, f64), b: (f64, f64)) -> Wall {
    Wall {
        a: Point2::new(a.0, a.1),
        b: Point2::new(b.0, b.1),
        material: Material::Solid,
        present: None,
        label: String::new(),
    }
}

/// Walls of a closed rectangle.
fn boxed(walls: &mut Vec<Wall>, x0: f64, y0: f64, x1: f64, y1: f64) {
    walls.push(wall((x0, y0), (x1, y0)));
    walls.push(wall((x1, y0), (x1, y1)));
    walls.push(wall((x1, y1), (x0, y1)));
    walls.push(wall((x0, y1), (x0, y0)));
}

/// Parts of [from, to] not covered by any opening, in order.
fn solid_intervals(from: f64, to: f64, openings: &[(f64, f64)]) -> Vec<(f64, f64)> {
    let mut cuts: Vec<(f64, f64)> = openings.to_vec();
    cuts.sort_by(|a, b| a.0.total_cmp(&b.0));
    let mut out = Vec::new();
    let mut x = from;
    for (a, b) in cuts {
        if a > x {
            out.push((x, a.min(to)));
        }
        x = x.max(b);
    }
    if x < to {
        out.push((x, to));
    }
    out.retain(|(a, b)| b - a > 1e-9);
    out
}

/// The plan of a generated building run.
pub fn building_plan(spec: &BuildingSpec) -> FloorPlan {
    let (w, h) = (spec.width.max(30.0), spec.height.max(30.0));
    let mut rng = Rng::new(spec.seed);
    let mut walls = Vec::new();
    boxed(&mut walls, 0.0, 0.0, w, h);
    // Two long corridors, 3 m wide, at a third and two thirds of the height.
    let corridors = [h / 3.0, 2.0 * h / 3.0];
    let half = 1.5;
    let door = 1.2;
    let room = 8.0;
    let cross = w / 2.0;
    for &cy in &corridors {
        // Openings: a door into every room and the cross corridor.
        let mut openings: Vec<(f64, f64)> = (0..)
            .map(|k| k as f64 * room + 1.0)
            .take_while(|&x| x + door < w)
            .map(|x| (x, x + door))
            .collect();
        openings.push((cross - half, cross + half));
        for side in [-1.0f64, 1.0] {
            let y = cy + side * half;
            for (a, b) in solid_intervals(0.0, w, &openings) {
                walls.push(wall((a, y), (b, y)));
            }
        }
    }
    // Walls between rooms, from the corridors to the outer wall or to the next corridor band.
    let bands = [
        (0.0, corridors[0] - half),
        (corridors[0] + half, corridors[1] - half),
        (corridors[1] + half, h),
    ];
    let mut x = room;
    while x < w - 1e-9 {
        if (x - cross).abs() > half + 0.5 {
            for &(y0, y1) in &bands {
                walls.push(wall((x, y0), (x, y1)));
            }
        }
        x += room;
    }
    // Cross corridor walls.
    for &(y0, y1) in &bands {
        walls.push(wall((cross - half, y0), (cross - half, y1)));
        walls.push(wall((cross + half, y0), (cross + half, y1)));
    }
    // Clutter: a few boxes in every room, away from the doors.
    let mut x = 0.0;
    while x < w - room + 1e-9 {
        for &(y0, y1) in &bands {
            if (x + room / 2.0 - cross).abs() < room / 2.0 + half {
                continue;
            }
            for _ in 0..3 {
                let bw = 0.5 + rng.uniform() * 1.2;
                let bh = 0.4 + rng.uniform() * 0.8;
                let bx = x + 1.0 + rng.uniform() * (room - 2.0 - bw);
                let by = y0 + 1.5 + rng.uniform() * ((y1 - y0) - 3.0 - bh).max(0.1);
                boxed(&mut walls, bx, by, bx + bw, by + bh);
            }
        }
        x += room;
    }
    // Route: both corridors end to end, joined through the cross corridor, looking into
    // doorways on the way.
    let (c0, c1) = (corridors[0], corridors[1]);
    let waypoints = vec![
        Point2::new(2.0, c0),
        Point2::new(w - 2.0, c0),
        Point2::new(cross, c0),
        Point2::new(cross, c1),
        Point2::new(2.0, c1),
        Point2::new(w - 2.0, c1),
        Point2::new(cross, c1),
        Point2::new(cross, c0),
        Point2::new(2.0, c0),
    ];
    let speed = 1.0;
    let turn_rate = 1.5;
    let mut route = Route {
        waypoints,
        speed,
        turn_rate,
        rate: 10.0,
    };
    let duration = route_duration(&route);
    route.rate = (spec.frames.max(2) - 1) as f64 / duration;
    let beams = spec.beams.max(1);
    let fov = 270f64.to_radians();
    let lidar = Sensor {
        id: "lidar".into(),
        kind: SensorKind::Ray,
        mount: Pose2::new(0.2, 0.0, 0.0),
        angles: BeamAngles::Fan {
            start: -fov / 2.0,
            step: if beams > 1 {
                fov / (beams - 1) as f64
            } else {
                0.0
            },
            count: beams,
        },
        range_min: 0.05,
        range_max: spec.range,
        cone_width: 0.0,
    };
    FloorPlan {
        format: 1,
        name: format!("generated building {w} m x {h} m"),
        notes: "a benchmark building of our own: rooms along two corridors".into(),
        walls,
        free_space: vec![vec![
            Point2::new(0.0, 0.0),
            Point2::new(w, 0.0),
            Point2::new(w, h),
            Point2::new(0.0, h),
        ]],
        route,
        sensors: vec![SimSensor {
            sensor: lidar,
            noise: Noise {
                sigma: 0.01,
                dropout: 0.001,
                miss: 0.0,
            },
            cone_rays: 1,
            no_return: super::plan::NoReturnReport::RangeMax,
        }],
        seed: spec.seed,
        reference_resolution: 0.05,
        faults: Default::default(),
    }
}

/// Seconds the route takes.
fn route_duration(route: &Route) -> f64 {
    let mut heading = {
        let (a, b) = (route.waypoints[0], route.waypoints[1]);
        (b.y - a.y).atan2(b.x - a.x)
    };
    let mut t = 0.0;
    for pair in route.waypoints.windows(2) {
        let (a, b) = (pair[0], pair[1]);
        let h = (b.y - a.y).atan2(b.x - a.x);
        t += crate::geometry::wrap_angle(h - heading).abs() / route.turn_rate;
        heading = h;
        t += a.distance(b) / route.speed;
    }
    t
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_small_building_has_the_asked_frames_and_beams() {
        let spec = BuildingSpec {
            width: 40.0,
            height: 30.0,
            frames: 50,
            beams: 91,
            range: 20.0,
            seed: 1,
        };
        let plan = building_plan(&spec);
        plan.validate().unwrap();
        let s = super::super::simulate(&plan).unwrap();
        assert!(
            (s.frames.len() as i64 - 50).abs() <= 1,
            "{}",
            s.frames.len()
        );
        assert_eq!(s.sensors[0].beam_count(), 91);
        let st = s.stats();
        // A closed building: almost every beam hits something within range.
        assert!(st.hits as f64 > 0.95 * st.beams as f64, "{st:?}");
    }
}
