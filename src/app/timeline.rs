//! The timeline: frame slider, stepping, playback, marks where frames hold invalid readings or
//! are left out, and (once checked) each frame's agreement as a strip, low frames in amber.
//!
//! Playback follows the session's own clock scaled by the speed: each UI frame asks for the
//! last frame whose time has passed, so a slow rebuild skips frames instead of lagging behind.

use super::poses_panel::Strip;
use super::{Action, Document};
use egui::{Color32, Key, Modifiers, Sense, Stroke, pos2, vec2};

/// Playback speeds offered, relative to the session clock.
pub const SPEEDS: [f32; 7] = [0.25, 0.5, 1.0, 2.0, 4.0, 8.0, 16.0];

/// Timeline state.
#[derive(Default)]
pub struct Timeline {
    /// Whether playback runs.
    pub playing: bool,
    /// (UI time, session time) when playback started.
    anchor: Option<(f64, f64)>,
}

impl Timeline {
    /// Stops playback.
    pub fn stop(&mut self) {
        self.playing = false;
        self.anchor = None;
    }

    /// Draws the timeline; returns a seek when the frame should change.
    pub fn ui(
        &mut self,
        ui: &mut egui::Ui,
        doc: &Document,
        frame: usize,
        speed: &mut f32,
        agreement: Option<Strip<'_>>,
    ) -> Vec<Action> {
        let frames = &doc.session.frames;
        let n = frames.len();
        let mut target: Option<usize> = None;
        if n == 0 {
            ui.label("this session has no frames");
            return Vec::new();
        }
        let last = n - 1;
        let step = |d: i64| Some((frame as i64 + d).clamp(0, last as i64) as usize);

        // Keyboard, unless a text field has the keyboard.
        if !ui.ctx().egui_wants_keyboard_input() {
            ui.input_mut(|i| {
                if i.consume_key(Modifiers::SHIFT, Key::ArrowRight) {
                    target = step(10);
                } else if i.consume_key(Modifiers::SHIFT, Key::ArrowLeft) {
                    target = step(-10);
                } else if i.consume_key(Modifiers::NONE, Key::ArrowRight) {
                    target = step(1);
                } else if i.consume_key(Modifiers::NONE, Key::ArrowLeft) {
                    target = step(-1);
                } else if i.consume_key(Modifiers::NONE, Key::Home) {
                    target = Some(0);
                } else if i.consume_key(Modifiers::NONE, Key::End) {
                    target = Some(last);
                } else if i.consume_key(Modifiers::NONE, Key::Space) {
                    self.playing = !self.playing;
                    self.anchor = None;
                }
            });
        }

        ui.add_space(4.0);
        ui.horizontal(|ui| {
            if ui
                .button("|<")
                .on_hover_text("First frame (Home)")
                .clicked()
            {
                target = Some(0);
            }
            if ui
                .button("-10")
                .on_hover_text("Back 10 frames (Shift+Left)")
                .clicked()
            {
                target = step(-10);
            }
            if ui
                .button("-1")
                .on_hover_text("Previous frame (Left)")
                .clicked()
            {
                target = step(-1);
            }
            let play_label = if self.playing { "Pause" } else { "Play" };
            if ui
                .button(play_label)
                .on_hover_text("Play or pause (Space)")
                .clicked()
            {
                self.playing = !self.playing;
                self.anchor = None;
            }
            if ui
                .button("+1")
                .on_hover_text("Next frame (Right)")
                .clicked()
            {
                target = step(1);
            }
            if ui
                .button("+10")
                .on_hover_text("Forward 10 frames (Shift+Right)")
                .clicked()
            {
                target = step(10);
            }
            if ui.button(">|").on_hover_text("Last frame (End)").clicked() {
                target = Some(last);
            }
            egui::ComboBox::new("speed", "speed")
                .selected_text(format!("{}x", speed))
                .width(64.0)
                .show_ui(ui, |ui| {
                    for s in SPEEDS {
                        if ui.selectable_value(speed, s, format!("{s}x")).changed() {
                            self.anchor = None;
                        }
                    }
                })
                .response
                .on_hover_text("Playback speed, relative to the session's own clock");
            ui.separator();
            let t0 = frames[0].t;
            ui.monospace(format!(
                "frame {:>6} / {}   t = {:>8.2} s",
                frame,
                last,
                frames[frame.min(last)].t - t0
            ));
        });

        // The slider with its marks underneath.
        let mut value = frame.min(last);
        let width = ui.available_width();
        ui.spacing_mut().slider_width = (width - 90.0).max(100.0);
        let slider = ui.add(
            egui::Slider::new(&mut value, 0..=last)
                .show_value(true)
                .text("frame"),
        );
        if slider.changed() {
            target = Some(value);
        }
        let (strip, _) =
            ui.allocate_exact_size(vec2(ui.spacing().slider_width, 8.0), Sense::hover());
        let painter = ui.painter_at(strip.expand(1.0));
        painter.rect_filled(strip, 0.0, Color32::from_gray(40));
        let x_of = |f: usize| strip.left() + strip.width() * (f as f32 + 0.5) / n as f32;
        for &f in &doc.stats.frames_with_invalid {
            let x = x_of(f);
            painter.line_segment(
                [pos2(x, strip.top()), pos2(x, strip.bottom())],
                Stroke::new(1.0, Color32::from_rgb(220, 60, 60)),
            );
        }
        for r in &doc.params.exclude.frames {
            let (a, b) = (x_of(*r.start()) - 1.0, x_of((*r.end()).min(last)) + 1.0);
            painter.rect_filled(
                egui::Rect::from_x_y_ranges(a..=b, strip.y_range()),
                0.0,
                Color32::from_rgba_unmultiplied(160, 160, 255, 120),
            );
        }
        let x = x_of(frame);
        painter.line_segment(
            [pos2(x, strip.top() - 1.0), pos2(x, strip.bottom() + 1.0)],
            Stroke::new(2.0, Color32::WHITE),
        );
        if let Some(s) = agreement
            && let Some(f) = agreement_strip(ui, &s, frame)
        {
            target = Some(f.min(last));
        }
        ui.add_space(2.0);

        // Playback, unless the user moved the frame by hand in this UI frame.
        let by_hand = target.is_some();
        if by_hand {
            self.anchor = None;
        }
        if self.playing && !by_hand {
            let now = ui.input(|i| i.time);
            if frame >= last {
                self.stop();
            } else {
                let (t_ui, t_session) = *self.anchor.get_or_insert((now, frames[frame].t));
                let want = t_session + (now - t_ui) * *speed as f64;
                let next = frames
                    .partition_point(|f| f.t <= want)
                    .saturating_sub(1)
                    .max(frame);
                if next != frame {
                    target = Some(next.min(last));
                }
                ui.ctx().request_repaint();
            }
        }
        target
            .filter(|&t| t != frame)
            .map(Action::Seek)
            .into_iter()
            .collect()
    }
}

/// Height of the agreement strip, points.
const STRIP_HEIGHT: f32 = 26.0;

/// Draws each frame's agreement as a column (the lowest of the frames that share a column, so
/// a short dip stays visible on a long run), amber below the cut, with the cut as a line;
/// returns the frame clicked.
fn agreement_strip(ui: &mut egui::Ui, s: &Strip<'_>, frame: usize) -> Option<usize> {
    let n = s.values.len();
    if n == 0 {
        return None;
    }
    let (rect, response) = ui.allocate_exact_size(
        vec2(ui.spacing().slider_width, STRIP_HEIGHT),
        Sense::click(),
    );
    let painter = ui.painter_at(rect.expand(1.0));
    painter.rect_filled(rect, 0.0, Color32::from_gray(28));
    let fade = |c: Color32| if s.stale { c.gamma_multiply(0.45) } else { c };
    let y_of = |a: f64| rect.bottom() - rect.height() * a.clamp(0.0, 1.0) as f32;
    let columns = rect.width().max(1.0) as usize;
    for col in 0..columns {
        let a = col * n / columns;
        let b = ((col + 1) * n / columns).max(a + 1).min(n);
        let Some(low) = s.values[a..b].iter().flatten().copied().reduce(f64::min) else {
            continue;
        };
        let colour = if low < s.cut {
            Color32::from_rgb(235, 165, 40)
        } else {
            Color32::from_rgb(90, 170, 160)
        };
        let x = rect.left() + col as f32 + 0.5;
        painter.line_segment(
            [pos2(x, rect.bottom()), pos2(x, y_of(low))],
            Stroke::new(1.0, fade(colour)),
        );
    }
    let y = y_of(s.cut);
    painter.line_segment(
        [pos2(rect.left(), y), pos2(rect.right(), y)],
        Stroke::new(1.0, fade(Color32::from_gray(170))),
    );
    let x = rect.left() + rect.width() * (frame as f32 + 0.5) / n as f32;
    painter.line_segment(
        [pos2(x, rect.top()), pos2(x, rect.bottom())],
        Stroke::new(1.0, Color32::WHITE),
    );
    let at = |p: egui::Pos2| (((p.x - rect.left()) / rect.width()) * n as f32).max(0.0) as usize;
    let response = response.on_hover_ui_at_pointer(|ui| {
        if let Some(p) = ui.ctx().pointer_hover_pos() {
            let f = at(p).min(n - 1);
            let v = s.values[f].map_or("none".into(), |v| format!("{v:.3}"));
            ui.label(format!(
                "frame {f}: agreement {v}{}\nclick to go there",
                if s.stale {
                    " (parameters changed since)"
                } else {
                    ""
                }
            ));
        }
    });
    if response.clicked() {
        return response.interact_pointer_pos().map(|p| at(p).min(n - 1));
    }
    None
}
