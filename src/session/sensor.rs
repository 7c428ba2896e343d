//! Range sensors: kind, mount, beam directions and the contract's reading classes.

use crate::error::Problem;
use crate::geometry::Pose2;
use crate::limits::MAX_BEAMS_PER_SCAN;
use serde::{Deserialize, Serialize};

/// How a sensor's beams interact with the grid.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub enum SensorKind {
    /// Narrow beams (laser): the footprint is the exact grid traversal of the beam's segment.
    Ray,
    /// Wide beams (ultrasonic): the footprint is a sector of opening `cone_width`.
    Cone,
}

/// Beam directions of a sensor, radians, relative to the sensor's mount heading.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub enum BeamAngles {
    /// Evenly spaced: beam k points at `start + k * step`.
    Fan {
        /// First beam's angle, radians.
        start: f64,
        /// Spacing between beams, radians.
        step: f64,
        /// Number of beams.
        count: usize,
    },
    /// An explicit list of angles, radians.
    List(Vec<f64>),
}

impl BeamAngles {
    /// Number of beams.
    pub fn count(&self) -> usize {
        match self {
            BeamAngles::Fan { count, .. } => *count,
            BeamAngles::List(v) => v.len(),
        }
    }

    /// Angle of beam `k`, radians relative to the mount heading.
    ///
    /// # Panics
    /// For a `List`, if `k` is not below [`BeamAngles::count`].
    pub fn angle(&self, k: usize) -> f64 {
        match self {
            BeamAngles::Fan { start, step, .. } => start + k as f64 * step,
            BeamAngles::List(v) => v[k],
        }
    }
}

/// One range sensor on the robot.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Sensor {
    /// Unique id, referenced by scans and by per-sensor models in a parameter profile.
    pub id: String,
    /// Narrow (`Ray`) or wide (`Cone`) beams.
    pub kind: SensorKind,
    /// Sensor pose in the robot frame (metres, radians).
    pub mount: Pose2,
    /// Beam directions relative to the mount.
    pub angles: BeamAngles,
    /// Readings below this are invalid, metres.
    pub range_min: f64,
    /// Readings at or above this (positive infinity included) are no-returns, metres.
    pub range_max: f64,
    /// Full opening angle of each beam, radians; used by `Cone` sensors only.
    #[serde(default)]
    pub cone_width: f64,
}

/// What one reading says, per the contract's classification.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Reading {
    /// An obstacle at this range, metres (`range_min <= r < range_max`).
    Hit(f64),
    /// Nothing seen within `range_max` (`r >= range_max`, positive infinity included).
    NoReturn,
    /// Below `range_min`, negative, NaN or negative infinity: skipped.
    Invalid,
}

impl Sensor {
    /// Number of beams per scan.
    pub fn beam_count(&self) -> usize {
        self.angles.count()
    }

    /// Classifies a raw reading (metres) by the contract: NaN, negative values (negative
    /// infinity included) and values below `range_min` are invalid; values at or above
    /// `range_max`, positive infinity included, are no-returns.
    #[inline]
    pub fn classify(&self, r: f32) -> Reading {
        let r = r as f64;
        if r.is_nan() || r < 0.0 || r < self.range_min {
            Reading::Invalid
        } else if r >= self.range_max {
            Reading::NoReturn
        } else {
            Reading::Hit(r)
        }
    }

    /// Checks the contract's rules for one sensor, naming the field that breaks one.
    pub(crate) fn validate(&self) -> Result<(), Problem> {
        let bad = |field, reason: String| Problem::BadSensor {
            sensor: self.id.clone(),
            field,
            reason,
        };
        if !self.mount.is_finite() {
            return Err(bad("mount", "must be finite".into()));
        }
        if !(self.range_min.is_finite() && self.range_min >= 0.0) {
            return Err(bad(
                "range_min",
                format!("must be a finite number >= 0 (got {})", self.range_min),
            ));
        }
        if !(self.range_max.is_finite() && self.range_max > self.range_min) {
            return Err(bad(
                "range_max",
                format!(
                    "must be finite and greater than range_min = {} (got {})",
                    self.range_min, self.range_max
                ),
            ));
        }
        let count = self.angles.count();
        if count == 0 {
            return Err(bad("angles", "a sensor needs at least one beam".into()));
        }
        if count > MAX_BEAMS_PER_SCAN {
            return Err(bad(
                "angles",
                format!("{count} beams; at most {MAX_BEAMS_PER_SCAN} per scan are read"),
            ));
        }
        match &self.angles {
            BeamAngles::Fan { start, step, .. } => {
                if !start.is_finite() || !step.is_finite() {
                    return Err(bad("angles", "Fan start and step must be finite".into()));
                }
            }
            BeamAngles::List(v) => {
                if let Some(k) = v.iter().position(|a| !a.is_finite()) {
                    return Err(bad("angles", format!("angle {k} is not finite")));
                }
            }
        }
        if !self.cone_width.is_finite() {
            return Err(bad("cone_width", "must be finite".into()));
        }
        if self.kind == SensorKind::Cone
            && !(self.cone_width > 0.0 && self.cone_width <= std::f64::consts::TAU)
        {
            return Err(bad(
                "cone_width",
                format!(
                    "a Cone sensor needs 0 < cone_width <= 2 pi radians (got {})",
                    self.cone_width
                ),
            ));
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn readings_are_classified_as_the_contract_says() {
        // The file contract, section 2: hit when range_min <= r < range_max; no-return when
        // r >= range_max, positive infinity included; invalid below range_min, negative, NaN
        // or negative infinity.
        let s = Sensor {
            id: "s".into(),
            kind: SensorKind::Ray,
            mount: Pose2::default(),
            angles: BeamAngles::List(vec![0.0]),
            range_min: 0.1,
            range_max: 5.0,
            cone_width: 0.0,
        };
        assert_eq!(s.classify(1.0), Reading::Hit(1.0));
        assert_eq!(s.classify(0.1), Reading::Hit(0.1f32 as f64));
        assert_eq!(s.classify(5.0), Reading::NoReturn);
        assert_eq!(s.classify(f32::INFINITY), Reading::NoReturn);
        for r in [0.05, -1.0, f32::NAN, f32::NEG_INFINITY, -0.0] {
            assert_eq!(s.classify(r), Reading::Invalid, "{r}");
        }
    }
}
