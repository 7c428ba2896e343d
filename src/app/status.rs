//! The status bar: session, frame and time, reading counts, rebuild state and the last message.

use super::{GridscopeApp, Notice};
use crate::Reading;
use egui::{Color32, RichText};

/// Draws the status bar from the application's state.
pub fn status_ui(ui: &mut egui::Ui, app: &GridscopeApp) {
    ui.horizontal(|ui| {
        match &app.doc {
            Some(doc) => {
                let n = doc.session.frames.len();
                ui.label(RichText::new(&doc.session.name).strong())
                    .on_hover_text(doc.source.label());
                ui.separator();
                if let Some(f) = doc.session.frames.get(app.frame) {
                    let t0 = doc.session.frames[0].t;
                    ui.monospace(format!(
                        "frame {}/{}  t {:.2} s",
                        app.frame,
                        n.saturating_sub(1),
                        f.t - t0
                    ));
                    let (mut beams, mut invalid) = (0usize, 0usize);
                    for scan in &f.scans {
                        let sensor = &doc.session.sensors[scan.sensor];
                        for &r in doc.session.ranges(*scan) {
                            beams += 1;
                            if sensor.classify(r) == Reading::Invalid {
                                invalid += 1;
                            }
                        }
                    }
                    ui.separator();
                    ui.monospace(format!("this frame: {beams} beams, {invalid} invalid"));
                }
                ui.separator();
                ui.monospace(format!(
                    "session: {} beams, {} invalid",
                    doc.stats.beams, doc.stats.invalid
                ));
                ui.separator();
                let s = doc.builder.spec();
                ui.monospace(format!(
                    "{} x {} cells @ {} m",
                    s.width, s.height, s.resolution
                ));
                ui.separator();
                if doc.unsaved() {
                    ui.label(RichText::new("parameters not saved").color(Color32::from_rgb(240, 200, 90)))
                        .on_hover_text("The parameters differ from the ones last opened or saved (File > Save parameters)");
                    ui.separator();
                }
                if doc.run_unsaved() {
                    ui.label(RichText::new("poses not saved").color(Color32::from_rgb(240, 200, 90)))
                        .on_hover_text("Re-aligned poses are in use but not in a file (File > Save run as...)");
                    ui.separator();
                }
                if app.progress().is_some() || app.worker_busy() {
                    let (done, total) = app.progress().unwrap_or((0, 1));
                    let fraction = if total > 0 {
                        done as f32 / total as f32
                    } else {
                        0.0
                    };
                    ui.add(
                        egui::ProgressBar::new(fraction)
                            .desired_width(140.0)
                            .text(format!("rebuilding {done}/{total}")),
                    );
                } else {
                    ui.label(
                        RichText::new("map up to date").color(Color32::from_rgb(120, 200, 120)),
                    );
                }
            }
            None => {
                ui.label("no session loaded");
            }
        }
        for label in app.task_labels() {
            ui.separator();
            ui.spinner();
            ui.label(label);
        }
        ui.separator();
        match &app.notice {
            Some(Notice::Info(m)) => {
                ui.label(m);
            }
            Some(Notice::Problem(m)) => {
                ui.label(RichText::new(m).color(Color32::from_rgb(255, 110, 90)));
            }
            None => {}
        }
    });
}
