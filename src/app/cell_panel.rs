//! The cell history: one cell's value over the whole run, with the clamp bounds and the
//! current frame marked, and every update it received. Clicking an update jumps there.
//!
//! The history comes from [`MapBuilder::cell_history`], which walks the same footprints as the
//! rebuild, so it agrees exactly with the map; it is computed on a background thread.
//!
//! [`MapBuilder::cell_history`]: crate::MapBuilder::cell_history

use super::jobs::Job;
use super::{Action, Document};
use crate::fusion::CellUpdate;
use crate::{CellIndex, probability};
use egui::{Color32, RichText};
use egui_plot::{HLine, Legend, Line, Plot, PlotPoints, VLine};

/// (builder generation, cell) a history belongs to.
type Key = (u64, CellIndex);

/// Cell history state.
#[derive(Default)]
pub struct CellPanel {
    /// The finished history and what it is for.
    pub history: Option<(Key, Vec<CellUpdate>)>,
    job: Option<(Key, Job<Vec<CellUpdate>>)>,
}

impl CellPanel {
    /// Starts computing the history of `cell` if it is not known or under way.
    pub fn ensure(&mut self, doc: &Document, cell: Option<CellIndex>, ctx: Option<egui::Context>) {
        let Some(cell) = cell else {
            self.history = None;
            self.job = None;
            return;
        };
        let key = (doc.generation, cell);
        if let Some((k, job)) = &self.job
            && *k == key
        {
            if let Some(updates) = job.poll() {
                self.history = Some((key, updates));
                self.job = None;
            }
            return;
        }
        if self.history.as_ref().is_some_and(|h| h.0 == key) {
            return;
        }
        let builder = doc.builder.clone();
        let frames = doc.session.frames.len();
        let job = Job::spawn(ctx, frames, move |_, _| builder.cell_history(cell, frames));
        self.job = Some((key, job));
    }

    /// Waits for a running history (tests only).
    pub fn wait(&mut self) {
        if let Some((key, job)) = self.job.take()
            && let Some(updates) = job.wait()
        {
            self.history = Some((key, updates));
        }
    }

    /// Draws the panel.
    pub fn ui(
        &mut self,
        ui: &mut egui::Ui,
        doc: &Document,
        frame: usize,
        cell: Option<CellIndex>,
    ) -> Vec<Action> {
        let mut actions = Vec::new();
        ui.heading("Cell history");
        let Some(cell) = cell else {
            ui.label("Click a cell in the map (away from the beams) to see its value over the run and every update it received.");
            return actions;
        };
        let spec = doc.builder.spec();
        let centre = spec.centre(cell);
        ui.label(format!(
            "cell ({}, {}), centre x {:.3} m, y {:.3} m",
            cell.col, cell.row, centre.x, centre.y
        ));
        let Some((_, updates)) = self
            .history
            .as_ref()
            .filter(|h| h.0 == (doc.generation, cell))
        else {
            ui.horizontal(|ui| {
                ui.spinner();
                ui.label("tracing the cell through the run...");
            });
            return actions;
        };
        let crate::fusion::CellBounds { lo, hi } = doc.builder.bounds();
        let prior = crate::logit(doc.params.prior) as f32;
        let now = updates
            .iter()
            .take_while(|u| u.frame <= frame)
            .last()
            .map_or(prior, |u| u.value);
        let clamped = updates.iter().filter(|u| u.clamped).count();
        ui.label(format!(
            "{} updates in {} frames, {clamped} cut by the clamp; after frame {frame}: log-odds {now:+.3}, p {:.4}",
            updates.len(),
            {
                let mut frames: Vec<usize> = updates.iter().map(|u| u.frame).collect();
                frames.dedup();
                frames.len()
            },
            probability(now as f64)
        ));

        // Value after each frame, as a step line from the prior.
        let n = doc.session.frames.len();
        let mut pts: Vec<[f64; 2]> = vec![[0.0, prior as f64]];
        for u in updates {
            let x = u.frame as f64;
            let last = pts.last().expect("starts with the prior")[1];
            pts.push([x, last]);
            pts.push([x, u.value as f64]);
        }
        pts.push([n as f64, pts.last().expect("non-empty")[1]]);
        Plot::new(("cell plot", cell.col, cell.row))
            .height(200.0)
            .legend(Legend::default())
            .custom_x_axes(super::plot_x_axis("frame"))
            .y_axis_label("log-odds")
            .default_x_bounds(0.0, n as f64)
            .include_y(lo as f64)
            .include_y(hi as f64)
            .allow_scroll(false)
            .show(ui, |p| {
                p.line(Line::new("value", PlotPoints::from(pts)));
                p.vline(VLine::new("current frame", frame as f64).color(Color32::WHITE));
                p.hline(HLine::new("clamp max", hi as f64).color(Color32::from_rgb(120, 140, 255)));
                p.hline(HLine::new("clamp min", lo as f64).color(Color32::from_rgb(240, 200, 90)));
                p.hline(HLine::new("p = 0.5", 0.0).color(Color32::GRAY));
            });

        ui.label(RichText::new("Updates (click one to go to its frame and beam)").strong());
        use egui_extras::{Column, TableBuilder};
        let row_height = ui.text_style_height(&egui::TextStyle::Monospace) + 2.0;
        let t0 = doc.session.frames.first().map_or(0.0, |f| f.t);
        TableBuilder::new(ui)
            .id_salt("cell updates")
            .striped(true)
            .sense(egui::Sense::click())
            .column(Column::exact(46.0))
            .column(Column::exact(52.0))
            .column(Column::exact(70.0))
            .column(Column::exact(38.0))
            .columns(Column::exact(64.0), 2)
            .column(Column::remainder().at_least(60.0))
            .header(row_height + 4.0, |mut h| {
                for (title, tip) in [
                    ("frame", "frame index"),
                    ("t s", "seconds since the first frame"),
                    ("sensor", "sensor id"),
                    ("beam", "beam index"),
                    (
                        "incr",
                        "log-odds increment before clamping (OncePerCell: the one chosen)",
                    ),
                    ("value", "cell log-odds after the update"),
                    ("note", "clamped: the clamp cut the update"),
                ] {
                    h.col(|ui| {
                        ui.strong(title).on_hover_text(tip);
                    });
                }
            })
            .body(|body| {
                body.rows(row_height, updates.len(), |mut row| {
                    let u = &updates[row.index()];
                    row.set_selected(u.frame == frame);
                    let cells = [
                        u.frame.to_string(),
                        format!("{:.2}", u.t - t0),
                        doc.session.sensors[u.sensor].id.clone(),
                        u.beam.to_string(),
                        format!("{:+.4}", u.increment),
                        format!("{:+.3}", u.value),
                        if u.clamped {
                            "clamped".into()
                        } else {
                            String::new()
                        },
                    ];
                    for text in cells {
                        row.col(|ui| {
                            ui.add(
                                egui::Label::new(RichText::new(text).monospace())
                                    .truncate()
                                    .selectable(false),
                            );
                        });
                    }
                    if row.response().clicked() {
                        actions.push(Action::JumpTo {
                            frame: u.frame,
                            sensor: u.sensor,
                            beam: u.beam,
                        });
                    }
                });
            });
        actions
    }
}
