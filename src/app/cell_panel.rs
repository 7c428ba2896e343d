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
    /// Where "Save as CSV" writes.
    pub csv_path: String,
    problem: Option<String>,
}

/// The points of a cell's value plotted against the frame: the value before the run, then for
/// each frame that changed it a step up or down at that frame (its last value), and the value
/// held to the end of the run. Updates that leave the value as it was add no point, so a long
/// flat stretch is one line however many updates it had.
pub fn history_points(prior: f32, updates: &[CellUpdate], frames: usize) -> Vec<[f64; 2]> {
    let mut pts = vec![[0.0, prior as f64]];
    let mut value = prior;
    let mut k = 0;
    while k < updates.len() {
        let frame = updates[k].frame;
        // The frame's last update is the value after the frame.
        while k < updates.len() && updates[k].frame == frame {
            k += 1;
        }
        let after = updates[k - 1].value;
        if after != value {
            pts.push([frame as f64, value as f64]);
            pts.push([frame as f64, after as f64]);
            value = after;
        }
    }
    pts.push([frames.max(1) as f64, value as f64]);
    pts
}

impl CellPanel {
    /// Starts computing the history of `cell` if it is not known or under way.
    pub fn ensure(&mut self, doc: &Document, cell: Option<CellIndex>, ctx: Option<egui::Context>) {
        let Some(cell) = cell else {
            self.history = None;
            self.job = None;
            return;
        };
        let key = (doc.built, cell);
        if let Some((k, job)) = &self.job
            && *k == key
        {
            match job.poll() {
                Some(Ok(updates)) => {
                    self.history = Some((key, updates));
                    self.job = None;
                }
                Some(Err(failure)) => {
                    self.problem = Some(format!("the history {failure}"));
                    self.history = Some((key, Vec::new()));
                    self.job = None;
                }
                None => {}
            }
            return;
        }
        if self.history.as_ref().is_some_and(|h| h.0 == key) {
            return;
        }
        let builder = doc.builder.clone();
        let frames = doc.session.frames.len();
        if self.csv_path.is_empty() {
            self.csv_path = format!("cell-{}-{}.csv", cell.col, cell.row);
        }
        let job = Job::spawn(ctx, frames, move |_, _| builder.cell_history(cell, frames));
        self.job = Some((key, job));
        self.problem = None;
    }

    /// Waits for a running history (tests only).
    pub fn wait(&mut self) {
        if let Some((key, job)) = self.job.take()
            && let Ok(updates) = job.wait()
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
        if let Some(p) = &self.problem {
            ui.colored_label(Color32::from_rgb(255, 110, 90), p);
        }
        let Some((_, updates)) = self.history.as_ref().filter(|h| h.0 == (doc.built, cell)) else {
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

        let n = doc.session.frames.len();
        let pts = history_points(prior, updates, n);
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

        ui.horizontal(|ui| {
            let l = ui.label("CSV file");
            ui.add(egui::TextEdit::singleline(&mut self.csv_path).desired_width(200.0))
                .labelled_by(l.id);
            if ui
                .add_enabled(!self.csv_path.trim().is_empty(), egui::Button::new("Save as CSV"))
                .on_hover_text("Every update of this cell: frame,t,sensor,beam,increment,value (as `gridscope history` writes)")
                .clicked()
            {
                actions.push(Action::SaveCellHistory(self.csv_path.trim().into()));
            }
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

#[cfg(test)]
mod tests {
    use super::*;

    fn update(frame: usize, value: f32) -> CellUpdate {
        CellUpdate {
            frame,
            t: frame as f64 * 0.1,
            sensor: 0,
            beam: 0,
            increment: 0.0,
            value,
            clamped: false,
        }
    }

    #[test]
    fn a_flat_jump_flat_history_plots_as_steps() {
        // Unknown until frame 1381, 0.376 from 1397 to 3797 (many updates that change nothing),
        // the clamp 3.5 from 3814 to the end of a 3873-frame run. The line must be flat, jump,
        // and be flat again: never a ramp between distant frames.
        let mut updates = vec![update(1381, 0.2), update(1381, 0.376)];
        updates.extend((1397..=3797).step_by(4).map(|f| update(f, 0.376)));
        updates.extend([update(3814, 1.9), update(3814, 3.5), update(3830, 3.5)]);
        let pts = history_points(0.0, &updates, 3873);
        assert_eq!(
            pts,
            vec![
                [0.0, 0.0],
                [1381.0, 0.0],
                [1381.0, 0.376f32 as f64],
                [3814.0, 0.376f32 as f64],
                [3814.0, 3.5],
                [3873.0, 3.5],
            ]
        );
        // Every pair of neighbours shares its x or its y: only steps.
        assert!(
            pts.windows(2)
                .all(|w| w[0][0] == w[1][0] || w[0][1] == w[1][1])
        );
        assert_eq!(history_points(0.5, &[], 10), vec![[0.0, 0.5], [10.0, 0.5]]);
    }
}
