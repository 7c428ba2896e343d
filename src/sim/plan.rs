//! Floor plans (`*.plan.ron`): walls, timed changes, free space, a route and sensors with noise.
//!
//! A plan is our own scenario format: everything the simulator needs to produce a session and
//! its reference map. Walls are segments; a wall may be glass (narrow beams mostly pass
//! through it, wide beams reflect) and may exist only between two times (a door).

use crate::error::{InputError, Problem};
use crate::geometry::{Point2, Pose2};
use crate::io::doc;
use crate::io::read::read_text;
use crate::limits::{MAX_FRAMES, MAX_SIMULATED_READINGS};
use crate::session::Sensor;
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;
use std::path::Path;

/// What a wall is made of.
#[derive(Clone, Copy, Debug, Default, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub enum Material {
    /// Reflects every beam.
    #[default]
    Solid,
    /// Narrow (`Ray`) beams pass through with probability `pass`; wide (`Cone`) beams reflect.
    Glass {
        /// Probability, 0..=1, that a narrow beam passes through.
        pass: f64,
    },
}

/// A time window in seconds, `from <= t < until`.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Window {
    /// Start, seconds.
    pub from: f64,
    /// End (exclusive), seconds.
    pub until: f64,
}

/// One wall segment, world metres.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Wall {
    /// One end.
    pub a: Point2,
    /// The other end.
    pub b: Point2,
    /// What it is made of.
    #[serde(default)]
    pub material: Material,
    /// When the wall exists; `None` means always.
    #[serde(default)]
    pub present: Option<Window>,
    /// A name shown in documentation and tests (e.g. "door D1").
    #[serde(default)]
    pub label: String,
}

impl Wall {
    /// Whether the wall exists at time `t` seconds.
    pub fn exists_at(&self, t: f64) -> bool {
        self.present.is_none_or(|w| t >= w.from && t < w.until)
    }
}

/// The robot's route: waypoints driven in straight lines, turning in place at each.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Route {
    /// Points visited in order, metres; at least two.
    pub waypoints: Vec<Point2>,
    /// Driving speed, m/s.
    pub speed: f64,
    /// Turning speed in place, rad/s.
    pub turn_rate: f64,
    /// Frames per second.
    pub rate: f64,
}

/// Range noise of one simulated sensor.
#[derive(Clone, Copy, Debug, Default, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct Noise {
    /// Standard deviation of additive Gaussian range noise, metres.
    pub sigma: f64,
    /// Probability that a reading is invalid (reported as 0, below any range_min).
    pub dropout: f64,
    /// Probability that a beam returns nothing (reported as range_max).
    pub miss: f64,
}

/// How a simulated sensor writes a beam that returned nothing.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize)]
pub enum NoReturnReport {
    /// As the sensor's maximum range.
    #[default]
    RangeMax,
    /// As positive infinity, as many drivers do.
    Infinity,
}

/// A sensor of the simulated robot and its noise.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SimSensor {
    /// The sensor as it will appear in the session.
    pub sensor: Sensor,
    /// Its noise.
    #[serde(default)]
    pub noise: Noise,
    /// `Cone` sensors: sub-rays cast across the opening to find the nearest echo.
    #[serde(default = "default_cone_rays")]
    pub cone_rays: u32,
    /// How a beam that returned nothing is written.
    #[serde(default)]
    pub no_return: NoReturnReport,
}

fn default_cone_rays() -> u32 {
    9
}

/// An error of the recorded robot pose over a time window (the robot truly follows its route;
/// the session records a wrong pose), world frame.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub enum PoseError {
    /// The recorded pose is off by this much (metres, metres, radians) throughout the window,
    /// as after a localizer slip.
    Jump(Pose2),
    /// The recorded pose drifts away by this much per second from the window's start.
    Drift(Pose2),
}

/// A pose error between two times, seconds (`from <= t < until`).
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct PoseFault {
    /// Start, seconds.
    pub from: f64,
    /// End (exclusive), seconds.
    pub until: f64,
    /// The error.
    pub error: PoseError,
}

/// How one sensor truly differs from what the session records about it.
#[derive(Clone, Copy, Debug, Default, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct SensorFault {
    /// The true mount is the recorded mount plus this (x, y metres; theta radians), which a
    /// calibration should find as the sensor's correction.
    pub mount: Pose2,
    /// A scan stamped t was truly taken at t + lag seconds (the calibration's time offset).
    pub lag: f64,
}

/// Faults of a run, with known truth: what the recorded poses and sensors get wrong.
#[derive(Clone, Debug, Default, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct Faults {
    /// Errors of the recorded robot pose.
    pub poses: Vec<PoseFault>,
    /// Per sensor id, how it truly sits and when it truly scans.
    pub sensors: BTreeMap<String, SensorFault>,
}

impl Faults {
    /// Whether the run has no faults.
    pub fn is_empty(&self) -> bool {
        self.poses.is_empty() && self.sensors.is_empty()
    }

    /// The error of the recorded pose at time `t`, world frame (zero outside every window).
    pub fn pose_error(&self, t: f64) -> Pose2 {
        let mut e = Pose2::default();
        for f in &self.poses {
            if t >= f.from && t < f.until {
                let d = match f.error {
                    PoseError::Jump(d) => d,
                    PoseError::Drift(rate) => {
                        let s = t - f.from;
                        Pose2::new(rate.x * s, rate.y * s, rate.theta * s)
                    }
                };
                e = Pose2::new(e.x + d.x, e.y + d.y, e.theta + d.theta);
            }
        }
        e
    }
}

/// A complete simulation scenario.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct FloorPlan {
    /// Always 1.
    pub format: i64,
    /// Scenario name, becomes the session name.
    pub name: String,
    /// Free text, becomes the session notes.
    #[serde(default)]
    pub notes: String,
    /// Wall segments.
    pub walls: Vec<Wall>,
    /// Polygons (world metres) of free space for the reference map: a cell is free when its
    /// centre lies inside an odd number of them (a polygon inside another is a hole) and no
    /// wall crosses it.
    #[serde(default)]
    pub free_space: Vec<Vec<Point2>>,
    /// The robot's route.
    pub route: Route,
    /// The robot's sensors.
    pub sensors: Vec<SimSensor>,
    /// Seed of the noise generator.
    #[serde(default)]
    pub seed: u64,
    /// Cell side of the reference map, metres.
    #[serde(default = "default_reference_resolution")]
    pub reference_resolution: f64,
    /// Faults with known truth: wrong recorded poses, mounts and timestamps.
    #[serde(default, skip_serializing_if = "Faults::is_empty")]
    pub faults: Faults,
}

fn default_reference_resolution() -> f64 {
    0.05
}

fn bad(field: String, reason: impl Into<String>) -> Problem {
    Problem::BadField {
        field,
        reason: reason.into(),
    }
}

impl FloorPlan {
    /// Loads and validates a plan.
    pub fn load(path: &Path) -> Result<FloorPlan, InputError> {
        let text = read_text(path)?;
        Self::from_ron_str(&text, &path.display().to_string())
    }

    /// Parses and validates a plan from RON text; `file` names it in errors.
    pub fn from_ron_str(text: &str, file: &str) -> Result<FloorPlan, InputError> {
        let p: FloorPlan = doc::parse(text, file)?;
        doc::check_format(p.format, file)?;
        p.validate().map_err(|e| InputError::new(file, e))?;
        Ok(p)
    }

    /// Checks every field, naming the first that is wrong.
    pub fn validate(&self) -> Result<(), Problem> {
        // Coordinates within 1000 km of the origin: far beyond any building, and far inside
        // what the geometry below computes without overflow.
        let near = |p: &Point2| p.is_finite() && p.x.abs() <= 1e6 && p.y.abs() <= 1e6;
        let far = |what: String| {
            bad(
                what,
                "coordinates must be finite and within 1e6 m of the origin",
            )
        };
        for (i, w) in self.walls.iter().enumerate() {
            if !near(&w.a) || !near(&w.b) {
                return Err(far(format!("walls[{i}]")));
            }
        }
        for (i, poly) in self.free_space.iter().enumerate() {
            if !poly.iter().all(near) {
                return Err(far(format!("free_space[{i}]")));
            }
        }
        if !self.route.waypoints.iter().all(near) {
            return Err(far("route.waypoints".into()));
        }
        for (i, w) in self.walls.iter().enumerate() {
            if !w.a.is_finite() || !w.b.is_finite() {
                return Err(bad(format!("walls[{i}]"), "end points must be finite"));
            }
            if w.a == w.b {
                return Err(bad(format!("walls[{i}]"), "the two ends coincide"));
            }
            if let Material::Glass { pass } = w.material
                && !(0.0..=1.0).contains(&pass)
            {
                return Err(bad(
                    format!("walls[{i}].material.pass"),
                    "must lie in [0, 1]",
                ));
            }
            if let Some(win) = w.present
                && !(win.from.is_finite() && win.until.is_finite() && win.from < win.until)
            {
                return Err(bad(
                    format!("walls[{i}].present"),
                    "needs finite times with from < until",
                ));
            }
        }
        for (i, poly) in self.free_space.iter().enumerate() {
            if poly.len() < 3 || poly.iter().any(|p| !p.is_finite()) {
                return Err(bad(
                    format!("free_space[{i}]"),
                    "a polygon needs at least three finite points",
                ));
            }
        }
        let r = &self.route;
        if r.waypoints.len() < 2 || r.waypoints.iter().any(|p| !p.is_finite()) {
            return Err(bad(
                "route.waypoints".into(),
                "needs at least two finite points",
            ));
        }
        for (field, v) in [
            ("route.speed", r.speed),
            ("route.turn_rate", r.turn_rate),
            ("route.rate", r.rate),
        ] {
            if !(v.is_finite() && v > 0.0) {
                return Err(bad(field.into(), format!("must be > 0 (got {v})")));
            }
        }
        if self.sensors.is_empty() {
            return Err(bad("sensors".into(), "the robot needs at least one sensor"));
        }
        for (i, s) in self.sensors.iter().enumerate() {
            let n = s.noise;
            if !(n.sigma.is_finite() && n.sigma >= 0.0) {
                return Err(bad(
                    format!("sensors[{i}].noise.sigma"),
                    "must be >= 0 metres",
                ));
            }
            for (field, p) in [("dropout", n.dropout), ("miss", n.miss)] {
                if !(0.0..=1.0).contains(&p) {
                    return Err(bad(
                        format!("sensors[{i}].noise.{field}"),
                        "must lie in [0, 1]",
                    ));
                }
            }
            if s.cone_rays == 0 || s.cone_rays > 1000 {
                return Err(bad(
                    format!("sensors[{i}].cone_rays"),
                    "must lie in 1..=1000",
                ));
            }
        }
        // Sensor rules are the session's rules.
        crate::session::Session::with_sensors(
            String::new(),
            String::new(),
            self.sensors.iter().map(|s| s.sensor.clone()).collect(),
        )?;
        let frames = super::route_frame_count(r).unwrap_or(u64::MAX);
        if frames > MAX_FRAMES as u64 {
            return Err(bad(
                "route".into(),
                format!(
                    "the route takes {} frames at this speed and rate; at most {MAX_FRAMES} \
                     are simulated",
                    if frames == u64::MAX {
                        "more".to_string()
                    } else {
                        frames.to_string()
                    }
                ),
            ));
        }
        let casts_per_frame: u64 = self
            .sensors
            .iter()
            .map(|s| {
                let rays = if s.sensor.kind == crate::session::SensorKind::Cone {
                    s.cone_rays as u64
                } else {
                    1
                };
                (s.sensor.beam_count() as u64).saturating_mul(rays)
            })
            .fold(0u64, u64::saturating_add);
        if frames.saturating_mul(casts_per_frame) > MAX_SIMULATED_READINGS {
            return Err(bad(
                "sensors".into(),
                format!(
                    "{frames} frames of {casts_per_frame} rays each; a simulation casts at \
                     most {MAX_SIMULATED_READINGS}"
                ),
            ));
        }
        if !(self.reference_resolution.is_finite() && self.reference_resolution > 0.0) {
            return Err(bad("reference_resolution".into(), "must be > 0 metres"));
        }
        for (i, f) in self.faults.poses.iter().enumerate() {
            let e = match f.error {
                PoseError::Jump(e) | PoseError::Drift(e) => e,
            };
            if !(f.from.is_finite() && f.until.is_finite() && f.from < f.until && e.is_finite()) {
                return Err(bad(
                    format!("faults.poses[{i}]"),
                    "needs finite times with from < until and a finite error",
                ));
            }
        }
        for (id, f) in &self.faults.sensors {
            if !self.sensors.iter().any(|s| &s.sensor.id == id) {
                return Err(bad(
                    format!("faults.sensors[{id:?}]"),
                    "names no sensor of the plan",
                ));
            }
            if !(f.mount.is_finite() && f.lag.is_finite() && f.lag.abs() <= 10.0) {
                return Err(bad(
                    format!("faults.sensors[{id:?}]"),
                    "needs a finite mount error and a lag within 10 s",
                ));
            }
        }
        Ok(())
    }
}
