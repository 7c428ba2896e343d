//! Measuring a distance on the map: two clicked points, the line between them, its length and
//! heading.

use super::ViewTransform;
use super::overlay::overlay_text;
use crate::geometry::Point2;
use egui::{Color32, Pos2, Rect, Stroke, vec2};

/// Measuring a distance on the map: when active, two clicks set the ends.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct Measure {
    /// Whether clicks on the map set measuring points (instead of selecting).
    pub active: bool,
    /// The points clicked, world metres (at most two).
    pub points: Vec<Point2>,
}

impl Measure {
    /// Starts a new measurement.
    pub fn start(&mut self) {
        self.active = true;
        self.points.clear();
    }

    /// Ends measuring (the last line stays drawn until the next one starts).
    pub fn stop(&mut self) {
        self.active = false;
    }

    /// Takes a clicked point: the first end, the second, or a fresh first end after two.
    pub fn click(&mut self, p: Point2) {
        if self.points.len() >= 2 {
            self.points.clear();
        }
        self.points.push(p);
    }

    /// Length (metres) and heading (radians, CCW from east) of the measured line.
    pub fn result(&self) -> Option<(f64, f64)> {
        let [a, b] = self.points[..] else {
            return None;
        };
        Some((a.distance(b), (b.y - a.y).atan2(b.x - a.x)))
    }
}

impl Measure {
    /// Draws the measured line, its length and heading, and a hint while measuring (with a line
    /// to the pointer while the second end is due).
    pub fn ui(
        &self,
        painter: &egui::Painter,
        t: &ViewTransform,
        rect: Rect,
        pointer: Option<Pos2>,
    ) {
        let stroke = Stroke::new(2.0, Color32::from_rgb(250, 240, 80));
        let ends: Vec<Pos2> = self.points.iter().map(|p| t.to_screen(*p)).collect();
        for e in &ends {
            painter.circle_stroke(*e, 4.0, stroke);
        }
        if let (true, [a], Some(p)) = (self.active, &ends[..], pointer) {
            painter.line_segment([*a, p], Stroke::new(1.0, stroke.color));
        }
        if let Some((length, heading)) = self.result() {
            painter.line_segment([ends[0], ends[1]], stroke);
            let mid = ends[0] + (ends[1] - ends[0]) / 2.0;
            overlay_text(
                painter,
                mid + vec2(8.0, -8.0),
                egui::Align2::LEFT_BOTTOM,
                &format!("{length:.3} m, heading {:.1} deg", heading.to_degrees()),
            );
        }
        if self.active {
            overlay_text(
                painter,
                rect.center_top() + vec2(0.0, 8.0),
                egui::Align2::CENTER_TOP,
                "measuring: click two points (Esc ends)",
            );
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn measuring_two_points() {
        // Geometry of a simple case: a 3-4-5 triangle.
        let mut m = Measure::default();
        m.start();
        m.click(Point2::new(1.0, 1.0));
        assert_eq!(m.result(), None);
        m.click(Point2::new(4.0, 5.0));
        let (d, h) = m.result().unwrap();
        assert!((d - 5.0).abs() < 1e-12 && (h - (4.0f64).atan2(3.0)).abs() < 1e-12);
        m.click(Point2::new(0.0, 0.0));
        assert_eq!(m.points.len(), 1);
    }
}
