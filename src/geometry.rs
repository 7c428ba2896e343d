//! Planar geometry in the world frame: points, poses and angle wrapping.
//!
//! The world frame is right-handed with x east and y north; headings are counter-clockwise
//! from +x, in radians. A [`Pose2`] is both a robot pose in the world and a sensor mount in
//! the robot frame, so the beam origin is `pose.compose(mount)`.

use serde::{Deserialize, Serialize};
use std::f64::consts::PI;

/// A point in the world frame, metres.
#[derive(Clone, Copy, Debug, Default, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Point2 {
    /// East, metres.
    pub x: f64,
    /// North, metres.
    pub y: f64,
}

impl Point2 {
    /// A point from its coordinates in metres.
    pub const fn new(x: f64, y: f64) -> Self {
        Self { x, y }
    }

    /// Euclidean distance to `other`, metres.
    pub fn distance(self, other: Point2) -> f64 {
        (self.x - other.x).hypot(self.y - other.y)
    }

    /// Whether both coordinates are finite.
    pub fn is_finite(self) -> bool {
        self.x.is_finite() && self.y.is_finite()
    }
}

/// A planar pose: position in metres and heading in radians (counter-clockwise from +x).
#[derive(Clone, Copy, Debug, Default, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Pose2 {
    /// Position east, metres.
    pub x: f64,
    /// Position north, metres.
    pub y: f64,
    /// Heading, radians, counter-clockwise from +x.
    pub theta: f64,
}

impl Pose2 {
    /// A pose from position (metres) and heading (radians).
    pub const fn new(x: f64, y: f64, theta: f64) -> Self {
        Self { x, y, theta }
    }

    /// The pose of `local` (given in this pose's frame) in the outer frame.
    pub fn compose(&self, local: &Pose2) -> Pose2 {
        let (s, c) = self.theta.sin_cos();
        Pose2 {
            x: self.x + c * local.x - s * local.y,
            y: self.y + s * local.x + c * local.y,
            theta: self.theta + local.theta,
        }
    }

    /// The position of this pose as a point.
    pub fn position(&self) -> Point2 {
        Point2::new(self.x, self.y)
    }

    /// Whether all three components are finite.
    pub fn is_finite(&self) -> bool {
        self.x.is_finite() && self.y.is_finite() && self.theta.is_finite()
    }
}

/// Wraps an angle in radians to [-pi, pi].
pub fn wrap_angle(a: f64) -> f64 {
    let mut w = a.rem_euclid(2.0 * PI);
    if w > PI {
        w -= 2.0 * PI;
    }
    w
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn compose_rotates_then_translates() {
        // Geometry of a simple case: a sensor 1 m ahead of a robot facing north sits 1 m north.
        let robot = Pose2::new(2.0, 3.0, PI / 2.0);
        let mount = Pose2::new(1.0, 0.0, 0.25);
        let s = robot.compose(&mount);
        assert!((s.x - 2.0).abs() < 1e-12);
        assert!((s.y - 4.0).abs() < 1e-12);
        assert!((s.theta - (PI / 2.0 + 0.25)).abs() < 1e-12);
    }

    #[test]
    fn wrap_stays_in_range_and_preserves_direction() {
        for k in -50..50 {
            let a = k as f64 * 0.37;
            let w = wrap_angle(a);
            assert!((-PI..=PI).contains(&w), "{a} -> {w}");
            assert!((w.sin() - a.sin()).abs() < 1e-9 && (w.cos() - a.cos()).abs() < 1e-9);
        }
        assert!((wrap_angle(3.0 * PI / 2.0) + PI / 2.0).abs() < 1e-12);
    }
}
