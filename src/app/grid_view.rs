//! The map view: the grid after the current frame, the robot, the frame's beams and the
//! selected beam's footprint, with pan, zoom, picking, a hover readout and a distance measure.
//!
//! All world <-> screen conversion goes through [`ViewTransform`]: world metres are y-up, the
//! screen is y-down. Pictures of the grid come from the render threads ([`super::render`]):
//! an overview of the whole grid, and for a large grid seen close up, the part in view at one
//! pixel per cell; a UI frame only uploads finished pictures (nearest-neighbour, so cells stay
//! crisp). Grids of up to [`SMALL_GRID`] cells are drawn at once, in the frame.

pub use super::measure::Measure;
use super::overlay::{legend, overlay_text, save_view, scale_bar, sector_outline};
use super::palette::increment_colour;
use super::pictures::Picture;
use super::render::{Renderer, Window};
use super::{Action, Document, Notice, Selection, Settings};
use crate::fusion::TouchRecord;
use crate::geometry::Point2;
use crate::{CellIndex, Grid, Reading, SensorKind, probability};
use egui::{Color32, Pos2, Rect, Sense, Shape, Stroke, pos2, vec2};
use std::path::PathBuf;
use std::sync::{Arc, Mutex};

/// Grids with at most this many cells are drawn in the UI frame (a few milliseconds).
pub const SMALL_GRID: usize = 1 << 18;

/// World (metres, y up) <-> screen (points, y down) for one view rectangle.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct ViewTransform {
    /// The view's screen rectangle.
    pub rect: Rect,
    /// World point at the rectangle's centre, metres.
    pub centre: Point2,
    /// Screen points per metre.
    pub scale: f32,
}

impl ViewTransform {
    /// Screen position of a world point.
    pub fn to_screen(&self, p: Point2) -> Pos2 {
        let c = self.rect.center();
        pos2(
            c.x + ((p.x - self.centre.x) as f32) * self.scale,
            c.y - ((p.y - self.centre.y) as f32) * self.scale,
        )
    }

    /// World point under a screen position.
    pub fn to_world(&self, s: Pos2) -> Point2 {
        let c = self.rect.center();
        Point2::new(
            self.centre.x + ((s.x - c.x) / self.scale) as f64,
            self.centre.y - ((s.y - c.y) / self.scale) as f64,
        )
    }

    /// Screen rectangle of a world box given by two corners.
    pub fn rect_of(&self, a: Point2, b: Point2) -> Rect {
        Rect::from_two_pos(self.to_screen(a), self.to_screen(b))
    }
}

/// What the view draws, borrowed from the application for one frame.
pub struct ViewData<'a> {
    /// The document, if one is loaded.
    pub doc: Option<&'a Document>,
    /// The grid to show.
    pub grid: Option<&'a Arc<Grid>>,
    /// Changes whenever `grid` (or what it is compared with) does.
    pub grid_version: u64,
    /// Clamp bounds of the parameters that made `grid`, log-odds (for the palette).
    pub clamp: crate::CellBounds,
    /// When set, colour cells by how their class differs from this grid (A) instead.
    pub compare_with: Option<&'a Arc<Grid>>,
    /// Which layer is shown (part of the picture's identity).
    pub layer: super::Layer,
    /// Current frame index.
    pub frame: usize,
    /// Display choices.
    pub settings: &'a Settings,
    /// Selected beam and cell.
    pub selection: &'a Selection,
    /// The selected beam's footprint.
    pub footprint: &'a [TouchRecord],
}

/// One beam of the current frame, in world terms, for drawing and picking.
struct DrawnBeam {
    sensor: usize,
    beam: usize,
    origin: Point2,
    end: Point2,
    heading: f64,
    reading: Reading,
    kind: SensorKind,
    cone_width: f64,
}

/// What the pointer is over.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Hover {
    /// World point, metres.
    pub world: Point2,
    /// Cell under it.
    pub cell: CellIndex,
    /// Its value, log-odds, if inside the grid.
    pub value: Option<f32>,
}

/// State of the grid view.
pub struct GridView {
    pub(super) overview: Option<Picture>,
    pub(super) detail: Option<(Picture, Window)>,
    pub(super) overview_renderer: Renderer,
    pub(super) detail_renderer: Renderer,
    /// Keys of the pictures asked for and not yet arrived.
    pub(super) asked: (Option<u64>, Option<(u64, Window)>),
    /// World point at the view centre, metres.
    pub centre: Point2,
    /// Screen points per metre.
    pub scale: f32,
    fit_pending: bool,
    /// What the pointer is over, if anything.
    pub hover: Option<Hover>,
    /// The last transform used (for tests and exports).
    pub transform: Option<ViewTransform>,
    /// The distance measure.
    pub measure: Measure,
    export_request: Option<PathBuf>,
    export_result: Arc<Mutex<Option<Notice>>>,
}

impl Default for GridView {
    fn default() -> Self {
        GridView {
            overview: None,
            detail: None,
            overview_renderer: Renderer::default(),
            detail_renderer: Renderer::default(),
            asked: (None, None),
            centre: Point2::new(0.0, 0.0),
            scale: 40.0,
            fit_pending: true,
            hover: None,
            transform: None,
            measure: Measure::default(),
            export_request: None,
            export_result: Arc::default(),
        }
    }
}

/// Distance from `p` to segment a-b, screen points.
fn distance_to_segment(p: Pos2, a: Pos2, b: Pos2) -> f32 {
    let ab = b - a;
    let t = if ab.length_sq() > 0.0 {
        ((p - a).dot(ab) / ab.length_sq()).clamp(0.0, 1.0)
    } else {
        0.0
    };
    (a + ab * t - p).length()
}

impl GridView {
    /// Fit the grid into the view at the next frame.
    pub fn request_fit(&mut self) {
        self.fit_pending = true;
    }

    /// Shows `centre` (world metres) at `scale` points per metre.
    pub fn set_view(&mut self, centre: Point2, scale: f32) {
        self.centre = centre;
        self.scale = scale.clamp(0.01, 20_000.0);
        self.fit_pending = false;
    }

    /// Centres the view on a world point.
    pub fn centre_on(&mut self, p: Point2) {
        self.centre = p;
        self.fit_pending = false;
    }

    /// Zooms about the view's centre by `factor`.
    pub fn zoom_by(&mut self, factor: f32) {
        self.scale = (self.scale * factor).clamp(0.01, 20_000.0);
    }

    /// Save the view as PNG once it has been drawn again.
    pub fn request_export(&mut self, path: PathBuf) {
        self.export_request = Some(path);
    }

    /// The outcome of a finished view export, once.
    pub fn take_export_result(&mut self) -> Option<Notice> {
        self.export_result.lock().ok()?.take()
    }

    fn fit(&mut self, rect: Rect, grid: &Grid) {
        let b = grid.spec().bounds();
        let w = (b.max.x - b.min.x).max(1e-6) as f32;
        let h = (b.max.y - b.min.y).max(1e-6) as f32;
        self.scale = (rect.width() / w).min(rect.height() / h) * 0.95;
        self.centre = Point2::new((b.min.x + b.max.x) / 2.0, (b.min.y + b.max.y) / 2.0);
    }

    fn beams(doc: &Document, frame: usize) -> Vec<DrawnBeam> {
        let mut out = Vec::new();
        let Some(f) = doc.session.frames.get(frame) else {
            return out;
        };
        for scan in &f.scans {
            let sensor = &doc.session.sensors[scan.sensor];
            let pose = doc.builder.sensor_pose(frame, scan.sensor);
            for (k, &raw) in doc.session.ranges(*scan).iter().enumerate() {
                let heading = pose.theta + sensor.angles.angle(k);
                let reading = sensor.classify(raw);
                let length = match reading {
                    Reading::Hit(z) => z,
                    Reading::NoReturn => sensor.range_max,
                    Reading::Invalid => 0.3,
                };
                out.push(DrawnBeam {
                    sensor: scan.sensor,
                    beam: k,
                    origin: pose.position(),
                    end: Point2::new(
                        pose.x + length * heading.cos(),
                        pose.y + length * heading.sin(),
                    ),
                    heading,
                    reading,
                    kind: sensor.kind,
                    cone_width: sensor.cone_width,
                });
            }
        }
        out
    }

    /// Draws the view and returns what the user asked for.
    pub fn ui(&mut self, ui: &mut egui::Ui, data: ViewData<'_>) -> Vec<Action> {
        let mut actions = Vec::new();
        let (rect, response) = ui.allocate_exact_size(ui.available_size(), Sense::click_and_drag());
        let painter = ui.painter_at(rect);
        painter.rect_filled(rect, 0.0, Color32::from_rgb(52, 55, 62));
        let (Some(doc), Some(grid)) = (data.doc, data.grid) else {
            let text = if data.doc.is_some() {
                "building the map..."
            } else {
                "open a session (File menu) or drop a file here"
            };
            painter.text(
                rect.center(),
                egui::Align2::CENTER_CENTER,
                text,
                egui::FontId::proportional(18.0),
                Color32::LIGHT_GRAY,
            );
            return actions;
        };
        if self.fit_pending {
            self.fit(rect, grid);
            self.fit_pending = false;
        }

        // Pan and zoom.
        if response.dragged() {
            let d = response.drag_delta();
            self.centre.x -= (d.x / self.scale) as f64;
            self.centre.y += (d.y / self.scale) as f64;
        }
        if response.double_clicked() {
            self.fit(rect, grid);
        }
        if let Some(pointer) = response.hover_pos() {
            let scroll = ui.input(|i| i.smooth_scroll_delta.y);
            let zoom = ui.input(|i| i.zoom_delta()) * (scroll * 0.002).exp();
            if (zoom - 1.0).abs() > 1e-4 {
                let at = |scale| {
                    ViewTransform {
                        rect,
                        centre: self.centre,
                        scale,
                    }
                    .to_world(pointer)
                };
                let before = at(self.scale);
                self.scale = (self.scale * zoom).clamp(0.01, 20_000.0);
                let after = at(self.scale);
                self.centre.x += before.x - after.x;
                self.centre.y += before.y - after.y;
            }
        }
        let t = ViewTransform {
            rect,
            centre: self.centre,
            scale: self.scale,
        };
        self.transform = Some(t);

        // The grid's pictures: the overview, and the part in view at full detail.
        self.pictures(ui.ctx(), &data, grid, &t);
        let uv = Rect::from_min_max(pos2(0.0, 0.0), pos2(1.0, 1.0));
        if let Some(p) = &self.overview {
            painter.image(
                p.texture.id(),
                t.rect_of(p.world.min, p.world.max),
                uv,
                Color32::WHITE,
            );
        }
        if let Some((p, _)) = &self.detail {
            painter.image(
                p.texture.id(),
                t.rect_of(p.world.min, p.world.max),
                uv,
                Color32::WHITE,
            );
        }
        let spec = *grid.spec();
        let b = spec.bounds();
        painter.rect_stroke(
            t.rect_of(b.min, b.max),
            0.0,
            Stroke::new(1.0, Color32::from_gray(90)),
            egui::StrokeKind::Outside,
        );
        // Cells are addressed on the builder's own lattice (a preview or A may be coarser).
        let cells = *doc.builder.spec();

        // Robot path so far and pose.
        let frames = &doc.session.frames;
        if data.settings.show_path && !frames.is_empty() {
            let upto = data.frame.min(frames.len() - 1);
            let step = (upto / 2000).max(1);
            let pts: Vec<Pos2> = frames[..=upto]
                .iter()
                .step_by(step)
                .map(|f| t.to_screen(f.pose.position()))
                .collect();
            painter.add(Shape::line(
                pts,
                Stroke::new(1.5, Color32::from_rgb(120, 220, 140)),
            ));
        }
        if let Some(f) = frames.get(data.frame) {
            let c = t.to_screen(f.pose.position());
            let (s, co) = (f.pose.theta.sin() as f32, f.pose.theta.cos() as f32);
            let fwd = vec2(co, -s);
            let side = vec2(s, co);
            let r = 9.0;
            painter.add(Shape::convex_polygon(
                vec![
                    c + fwd * r * 1.4,
                    c - fwd * r * 0.8 + side * r * 0.8,
                    c - fwd * r * 0.8 - side * r * 0.8,
                ],
                Color32::from_rgb(120, 220, 140),
                Stroke::new(1.0, Color32::BLACK),
            ));
        }

        // Beams of the current frame: hits amber, no-returns grey, invalid red.
        let beams = Self::beams(doc, data.frame);
        if data.settings.show_beams {
            for beam in &beams {
                let colour = match beam.reading {
                    Reading::Hit(_) => Color32::from_rgba_unmultiplied(255, 190, 60, 90),
                    Reading::NoReturn => Color32::from_rgba_unmultiplied(200, 200, 200, 50),
                    Reading::Invalid => Color32::from_rgb(230, 50, 50),
                };
                match beam.kind {
                    SensorKind::Ray => {
                        painter.line_segment(
                            [t.to_screen(beam.origin), t.to_screen(beam.end)],
                            Stroke::new(1.0, colour),
                        );
                        if let Reading::Hit(_) = beam.reading {
                            painter.circle_filled(
                                t.to_screen(beam.end),
                                1.8,
                                Color32::from_rgb(255, 190, 60),
                            );
                        }
                    }
                    SensorKind::Cone => {
                        let r = beam.origin.distance(beam.end);
                        let arc = sector_outline(&t, beam.origin, beam.heading, beam.cone_width, r);
                        painter.add(Shape::closed_line(arc, Stroke::new(1.0, colour)));
                    }
                }
            }
        }

        // The selected beam's footprint, coloured by increment.
        let cell_rect = |c: CellIndex| {
            let lo = Point2::new(
                cells.origin.x + c.col as f64 * cells.resolution,
                cells.origin.y + c.row as f64 * cells.resolution,
            );
            t.rect_of(
                lo,
                Point2::new(lo.x + cells.resolution, lo.y + cells.resolution),
            )
        };
        if let Some((sensor, beam)) = data.selection.beam {
            let scale = data
                .footprint
                .iter()
                .map(|r| r.touch.increment.abs())
                .fold(0.0f32, f32::max);
            for rec in data.footprint {
                let r = cell_rect(rec.touch.cell);
                painter.rect_filled(r, 0.0, increment_colour(rec.touch.increment, scale));
                if r.width() > 6.0 {
                    painter.rect_stroke(
                        r,
                        0.0,
                        Stroke::new(1.0, Color32::from_black_alpha(120)),
                        egui::StrokeKind::Inside,
                    );
                }
            }
            if let Some(b) = beams.iter().find(|b| b.sensor == sensor && b.beam == beam) {
                painter.line_segment(
                    [t.to_screen(b.origin), t.to_screen(b.end)],
                    Stroke::new(2.0, Color32::WHITE),
                );
            }
        }
        if let Some(c) = data.selection.cell {
            painter.rect_stroke(
                cell_rect(c).expand(2.0),
                0.0,
                Stroke::new(2.0, Color32::from_rgb(255, 80, 200)),
                egui::StrokeKind::Outside,
            );
        }

        // Picking, or measuring: a click within a few points of a drawn beam selects the beam;
        // a click elsewhere, a Shift+click or a right-click selects the cell under the pointer.
        let shift = ui.input(|i| i.modifiers.shift);
        let pick_cell = |p: Pos2, actions: &mut Vec<Action>| {
            let cell = cells.cell_at(t.to_world(p));
            if cells.index(cell).is_some() {
                actions.push(Action::SelectCell(cell));
            }
        };
        if response.clicked()
            && let Some(p) = response.interact_pointer_pos()
        {
            if self.measure.active {
                self.measure.click(t.to_world(p));
            } else {
                let nearest = beams
                    .iter()
                    .map(|b| {
                        (
                            distance_to_segment(p, t.to_screen(b.origin), t.to_screen(b.end)),
                            b,
                        )
                    })
                    .min_by(|a, b| a.0.total_cmp(&b.0));
                match nearest {
                    Some((d, b)) if d <= 4.0 && data.settings.show_beams && !shift => {
                        actions.push(Action::SelectBeam {
                            sensor: b.sensor,
                            beam: b.beam,
                        })
                    }
                    _ => pick_cell(p, &mut actions),
                }
            }
        }
        if response.secondary_clicked()
            && let Some(p) = response.interact_pointer_pos()
        {
            pick_cell(p, &mut actions);
        }
        self.measure.ui(&painter, &t, rect, response.hover_pos());

        // Hover readout.
        self.hover = response.hover_pos().map(|p| {
            let world = t.to_world(p);
            let cell = cells.cell_at(world);
            Hover {
                world,
                cell,
                value: grid.get(grid.spec().cell_at(world)),
            }
        });
        if let Some(h) = self.hover {
            let text = match h.value {
                Some(l) => format!(
                    "cell ({}, {})   x {:.3} m  y {:.3} m   log-odds {:+.3}   p {:.4}",
                    h.cell.col,
                    h.cell.row,
                    h.world.x,
                    h.world.y,
                    l,
                    probability(l as f64)
                ),
                None => format!(
                    "x {:.3} m  y {:.3} m   (outside the grid)",
                    h.world.x, h.world.y
                ),
            };
            overlay_text(
                &painter,
                rect.left_top() + vec2(8.0, 8.0),
                egui::Align2::LEFT_TOP,
                &text,
            );
        }

        scale_bar(&painter, rect, self.scale);
        if data.compare_with.is_none() {
            legend(
                &painter,
                rect,
                data.settings.palette,
                data.clamp.lo,
                data.clamp.hi,
            );
        } else {
            overlay_text(
                &painter,
                rect.right_bottom() + vec2(-12.0, -12.0),
                egui::Align2::RIGHT_BOTTOM,
                "difference A -> B (A read at B's cell centres): see the Compare tab for colours",
            );
        }

        if let Some(path) = self.export_request.take() {
            let slot = self.export_result.clone();
            let ppp = ui.ctx().pixels_per_point();
            ui.ctx().request_screenshot(move |image| {
                let result = save_view(&image, rect, ppp, &path);
                if let Ok(mut s) = slot.lock() {
                    *s = Some(match result {
                        Ok(()) => Notice::Info(format!("saved the view to {}", path.display())),
                        Err(e) => Notice::Problem(format!(
                            "cannot save the view to {}: {e}",
                            path.display()
                        )),
                    });
                }
            });
        }
        actions
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn transform_round_trips_and_flips_y() {
        let t = ViewTransform {
            rect: Rect::from_min_size(pos2(100.0, 50.0), vec2(400.0, 300.0)),
            centre: Point2::new(2.0, 3.0),
            scale: 50.0,
        };
        assert_eq!(t.to_screen(Point2::new(2.0, 3.0)), pos2(300.0, 200.0));
        // One metre north is 50 points up the screen.
        assert_eq!(t.to_screen(Point2::new(2.0, 4.0)), pos2(300.0, 150.0));
        let w = t.to_world(pos2(123.0, 321.0));
        let back = t.to_screen(w);
        assert!((back - pos2(123.0, 321.0)).length() < 1e-3);
    }
}
