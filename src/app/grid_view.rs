//! The grid view: the map after the current frame, the robot, the frame's beams and the
//! selected beam's footprint, with pan, zoom, picking and a hover readout.
//!
//! All world <-> screen conversion goes through [`ViewTransform`]: world metres are y-up, the
//! screen is y-down. The grid texture is uploaded only when the grid, the palette or the clamp
//! bounds change, with nearest-neighbour sampling so cells stay crisp.

use super::palette::{cell_colour, grid_pixels, increment_colour};
use super::{Action, Document, Notice, Selection, Settings};
use crate::fusion::TouchRecord;
use crate::geometry::Point2;
use crate::{CellIndex, Grid, Reading, SensorKind, probability};
use egui::{Color32, Pos2, Rect, Sense, Shape, Stroke, TextureHandle, TextureOptions, pos2, vec2};
use std::path::PathBuf;
use std::sync::{Arc, Mutex};

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
    pub grid: Option<&'a Grid>,
    /// Changes whenever `grid` (or what it is compared with) does.
    pub grid_version: u64,
    /// Clamp bounds of the parameters that made `grid`, log-odds (for the palette).
    pub clamp: crate::fusion::CellBounds,
    /// When set, colour cells by how their class differs from this grid (A) instead.
    pub compare_with: Option<&'a Grid>,
    /// Which layer is shown (part of the texture's identity).
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
    texture: Option<TextureHandle>,
    texture_key: Option<(u64, super::palette::Palette, [u32; 2], super::Layer)>,
    /// World point at the view centre, metres.
    pub centre: Point2,
    /// Screen points per metre.
    pub scale: f32,
    fit_pending: bool,
    /// What the pointer is over, if anything.
    pub hover: Option<Hover>,
    /// The last transform used (for tests and exports).
    pub transform: Option<ViewTransform>,
    export_request: Option<PathBuf>,
    export_result: Arc<Mutex<Option<Notice>>>,
}

impl Default for GridView {
    fn default() -> Self {
        GridView {
            texture: None,
            texture_key: None,
            centre: Point2::new(0.0, 0.0),
            scale: 40.0,
            fit_pending: true,
            hover: None,
            transform: None,
            export_request: None,
            export_result: Arc::default(),
        }
    }
}

/// A "nice" length (1, 2 or 5 times a power of ten) close to `target` metres.
pub fn nice_length(target: f64) -> f64 {
    let p = 10f64.powf(target.log10().floor());
    let m = target / p;
    let k = if m < 1.5 {
        1.0
    } else if m < 3.5 {
        2.0
    } else if m < 7.5 {
        5.0
    } else {
        10.0
    };
    k * p
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
                let before = ViewTransform {
                    rect,
                    centre: self.centre,
                    scale: self.scale,
                }
                .to_world(pointer);
                self.scale = (self.scale * zoom).clamp(0.5, 20_000.0);
                let after = ViewTransform {
                    rect,
                    centre: self.centre,
                    scale: self.scale,
                }
                .to_world(pointer);
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

        // The grid texture, re-uploaded only when something it depends on changed.
        let crate::fusion::CellBounds { lo, hi } = data.clamp;
        let key = (
            data.grid_version,
            data.settings.palette,
            [lo.to_bits(), hi.to_bits()],
            data.layer,
        );
        if self.texture_key != Some(key) || self.texture.is_none() {
            let image = match data.compare_with {
                Some(a) => super::compare::difference_pixels(a, grid)
                    .unwrap_or_else(|_| grid_pixels(data.settings.palette, grid, lo, hi)),
                None => grid_pixels(data.settings.palette, grid, lo, hi),
            };
            match &mut self.texture {
                Some(tex) => tex.set(image, TextureOptions::NEAREST),
                None => {
                    self.texture = Some(ui.ctx().load_texture(
                        "grid",
                        image,
                        TextureOptions::NEAREST,
                    ))
                }
            }
            self.texture_key = Some(key);
        }
        let spec = *grid.spec();
        let b = spec.bounds();
        let grid_rect = t.rect_of(b.min, b.max);
        if let Some(tex) = &self.texture {
            painter.image(
                tex.id(),
                grid_rect,
                Rect::from_min_max(pos2(0.0, 0.0), pos2(1.0, 1.0)),
                Color32::WHITE,
            );
        }
        painter.rect_stroke(
            grid_rect,
            0.0,
            Stroke::new(1.0, Color32::from_gray(90)),
            egui::StrokeKind::Outside,
        );

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
        if let Some((sensor, beam)) = data.selection.beam {
            let scale = data
                .footprint
                .iter()
                .map(|r| r.touch.increment.abs())
                .fold(0.0f32, f32::max);
            for rec in data.footprint {
                let c = rec.touch.cell;
                let lo_corner = Point2::new(
                    spec.origin.x + c.col as f64 * spec.resolution,
                    spec.origin.y + c.row as f64 * spec.resolution,
                );
                let hi_corner =
                    Point2::new(lo_corner.x + spec.resolution, lo_corner.y + spec.resolution);
                let r = t.rect_of(lo_corner, hi_corner);
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
            let lo_corner = Point2::new(
                spec.origin.x + c.col as f64 * spec.resolution,
                spec.origin.y + c.row as f64 * spec.resolution,
            );
            let hi_corner =
                Point2::new(lo_corner.x + spec.resolution, lo_corner.y + spec.resolution);
            let r = t.rect_of(lo_corner, hi_corner).expand(2.0);
            painter.rect_stroke(
                r,
                0.0,
                Stroke::new(2.0, Color32::from_rgb(255, 80, 200)),
                egui::StrokeKind::Outside,
            );
        }

        // Picking: a click within a few points of a drawn beam selects the beam; a click
        // elsewhere, a Shift+click or a right-click selects the cell under the pointer.
        let shift = ui.input(|i| i.modifiers.shift);
        let pick_cell = |p: Pos2, actions: &mut Vec<Action>| {
            let cell = spec.cell_at(t.to_world(p));
            if spec.index(cell).is_some() {
                actions.push(Action::SelectCell(cell));
            }
        };
        if response.clicked()
            && let Some(p) = response.interact_pointer_pos()
        {
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
        if response.secondary_clicked()
            && let Some(p) = response.interact_pointer_pos()
        {
            pick_cell(p, &mut actions);
        }

        // Hover readout.
        self.hover = response.hover_pos().map(|p| {
            let world = t.to_world(p);
            let cell = spec.cell_at(world);
            Hover {
                world,
                cell,
                value: grid.get(cell),
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
            legend(&painter, rect, data.settings.palette, lo, hi);
        } else {
            overlay_text(
                &painter,
                rect.right_bottom() + vec2(-12.0, -12.0),
                egui::Align2::RIGHT_BOTTOM,
                "difference A -> B: see the Compare tab for colours and counts",
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

/// Outline of a sector as screen points.
fn sector_outline(
    t: &ViewTransform,
    origin: Point2,
    heading: f64,
    width: f64,
    r: f64,
) -> Vec<Pos2> {
    let mut pts = vec![t.to_screen(origin)];
    let n = 16;
    for k in 0..=n {
        let a = heading - width / 2.0 + width * k as f64 / n as f64;
        pts.push(t.to_screen(Point2::new(origin.x + r * a.cos(), origin.y + r * a.sin())));
    }
    pts
}

fn overlay_text(painter: &egui::Painter, at: Pos2, align: egui::Align2, text: &str) {
    let galley = painter.layout_no_wrap(
        text.to_string(),
        egui::FontId::monospace(13.0),
        Color32::WHITE,
    );
    let r = align.anchor_size(at, galley.size()).expand(4.0);
    painter.rect_filled(r, 3.0, Color32::from_black_alpha(170));
    painter.galley(r.min + vec2(4.0, 4.0), galley, Color32::WHITE);
}

fn scale_bar(painter: &egui::Painter, rect: Rect, scale: f32) {
    let metres = nice_length((110.0 / scale) as f64);
    let px = metres as f32 * scale;
    let base = rect.left_bottom() + vec2(16.0, -18.0);
    let stroke = Stroke::new(2.0, Color32::WHITE);
    painter.rect_filled(
        Rect::from_min_size(base + vec2(-6.0, -22.0), vec2(px + 12.0, 30.0)),
        3.0,
        Color32::from_black_alpha(150),
    );
    painter.line_segment([base, base + vec2(px, 0.0)], stroke);
    painter.line_segment([base + vec2(0.0, -5.0), base + vec2(0.0, 3.0)], stroke);
    painter.line_segment([base + vec2(px, -5.0), base + vec2(px, 3.0)], stroke);
    let label = if metres >= 1.0 {
        format!("{metres} m")
    } else {
        format!("{} cm", metres * 100.0)
    };
    painter.text(
        base + vec2(px / 2.0, -6.0),
        egui::Align2::CENTER_BOTTOM,
        label,
        egui::FontId::proportional(12.0),
        Color32::WHITE,
    );
}

fn legend(painter: &egui::Painter, rect: Rect, palette: super::palette::Palette, lo: f32, hi: f32) {
    let size = vec2(220.0, 14.0);
    let origin = rect.right_bottom() + vec2(-size.x - 20.0, -40.0);
    painter.rect_filled(
        Rect::from_min_size(origin + vec2(-8.0, -22.0), size + vec2(16.0, 46.0)),
        3.0,
        Color32::from_black_alpha(150),
    );
    let n = 64;
    for k in 0..n {
        let u = k as f32 / (n - 1) as f32;
        let l = lo + (hi - lo) * u;
        let x0 = origin.x + size.x * k as f32 / n as f32;
        let r = Rect::from_min_size(pos2(x0, origin.y), vec2(size.x / n as f32 + 0.5, size.y));
        painter.rect_filled(r, 0.0, cell_colour(palette, l, lo, hi));
    }
    let zero_x = origin.x + size.x * (-lo / (hi - lo));
    painter.line_segment(
        [
            pos2(zero_x, origin.y - 3.0),
            pos2(zero_x, origin.y + size.y + 3.0),
        ],
        Stroke::new(1.0, Color32::WHITE),
    );
    let font = egui::FontId::proportional(11.0);
    painter.text(
        origin + vec2(0.0, -4.0),
        egui::Align2::LEFT_BOTTOM,
        "free",
        font.clone(),
        Color32::WHITE,
    );
    painter.text(
        origin + vec2(size.x, -4.0),
        egui::Align2::RIGHT_BOTTOM,
        "occupied",
        font.clone(),
        Color32::WHITE,
    );
    let below = origin.y + size.y + 3.0;
    painter.text(
        pos2(origin.x, below),
        egui::Align2::LEFT_TOP,
        format!("{lo:+.2}"),
        font.clone(),
        Color32::WHITE,
    );
    painter.text(
        pos2(origin.x + size.x, below),
        egui::Align2::RIGHT_TOP,
        format!("{hi:+.2} log-odds"),
        font.clone(),
        Color32::WHITE,
    );
    // "Unknown" (log-odds 0) is labelled only where the labels at the ends leave room.
    if zero_x - origin.x > 50.0 && origin.x + size.x - zero_x > 80.0 {
        painter.text(
            pos2(zero_x, below),
            egui::Align2::CENTER_TOP,
            "0",
            font.clone(),
            Color32::WHITE,
        );
        painter.text(
            pos2(zero_x, origin.y - 4.0),
            egui::Align2::CENTER_BOTTOM,
            "unknown",
            font,
            Color32::WHITE,
        );
    }
}

/// Crops a screenshot to the view rectangle and writes it as PNG.
fn save_view(
    image: &egui::ColorImage,
    rect: Rect,
    ppp: f32,
    path: &std::path::Path,
) -> Result<(), String> {
    let [w, h] = image.size;
    let x0 = ((rect.min.x * ppp).round().max(0.0) as usize).min(w);
    let y0 = ((rect.min.y * ppp).round().max(0.0) as usize).min(h);
    let x1 = ((rect.max.x * ppp).round().max(0.0) as usize).min(w);
    let y1 = ((rect.max.y * ppp).round().max(0.0) as usize).min(h);
    if x1 <= x0 || y1 <= y0 {
        return Err("the view is empty".into());
    }
    let mut out = image::RgbaImage::new((x1 - x0) as u32, (y1 - y0) as u32);
    for y in y0..y1 {
        for x in x0..x1 {
            let c = image.pixels[y * w + x];
            out.put_pixel(
                (x - x0) as u32,
                (y - y0) as u32,
                image::Rgba([c.r(), c.g(), c.b(), 255]),
            );
        }
    }
    let mut bytes = std::io::Cursor::new(Vec::new());
    out.write_to(&mut bytes, image::ImageFormat::Png)
        .map_err(|e| e.to_string())?;
    crate::io::atomic::write_all_atomically(&[(path.to_path_buf(), bytes.into_inner())])
        .map_err(|e| e.to_string())
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

    #[test]
    fn nice_lengths() {
        assert_eq!(nice_length(1.2), 1.0);
        assert_eq!(nice_length(2.9), 2.0);
        assert_eq!(nice_length(0.06), 0.05);
        assert_eq!(nice_length(80.0), 100.0);
    }
}
