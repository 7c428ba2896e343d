//! The beam inspector: one beam of the current frame, the cells it touched with their
//! distances, increments and values before and after, and its inverse model plotted against
//! distance with the reading, the reach and the clamp bounds marked.
//!
//! The table shows exactly what the core reports for the beam ([`MapBuilder::probe`]); the
//! panel computes nothing of its own.
//!
//! [`MapBuilder::probe`]: crate::MapBuilder::probe

use super::{Action, Document, Shown};
use crate::fusion::TouchRecord;
use crate::{BeamRef, FusionRule, Reading};
use egui::{Color32, RichText};
use egui_plot::{HLine, Legend, Line, Plot, PlotPoints, Points, VLine};

/// The footprint table: one row per touched cell, in footprint order.
fn footprint_table_ui(ui: &mut egui::Ui, records: &[TouchRecord], fusion: FusionRule) {
    use egui_extras::{Column, TableBuilder};
    let row_height = ui.text_style_height(&egui::TextStyle::Monospace) + 2.0;
    TableBuilder::new(ui)
        .id_salt("footprint table")
        .striped(true)
        .column(Column::exact(30.0))
        .columns(Column::exact(40.0), 2)
        .column(Column::exact(50.0))
        .columns(Column::exact(62.0), 3)
        .column(Column::remainder().at_least(60.0))
        .header(row_height + 4.0, |mut h| {
            for (title, tip) in [
                ("#", "order along the beam"),
                ("col", "cell column (0 = west edge)"),
                ("row", "cell row (0 = south edge)"),
                ("dist m", "distance from the beam origin to the cell centre, metres"),
                ("incr", "log-odds increment before clamping"),
                ("before", "cell log-odds before this beam (OncePerCell: at the start of the frame)"),
                ("after", "cell log-odds after this beam (OncePerCell: at the end of the frame)"),
                ("note", "clamped: the clamp cut the update; not used: under OncePerCell a stronger increment won"),
            ] {
                h.col(|ui| {
                    ui.strong(title).on_hover_text(tip);
                });
            }
        })
        .body(|body| {
            body.rows(row_height, records.len(), |mut row| {
                let k = row.index();
                let r = &records[k];
                let colour = if r.touch.increment > 0.0 {
                    Color32::from_rgb(255, 150, 110)
                } else if r.touch.increment < 0.0 {
                    Color32::from_rgb(120, 210, 235)
                } else {
                    Color32::GRAY
                };
                let note = if r.clamped {
                    "clamped"
                } else if !r.chosen && fusion == FusionRule::OncePerCell {
                    "not used"
                } else {
                    ""
                };
                let cells = [
                    format!("{k}"),
                    format!("{}", r.touch.cell.col),
                    format!("{}", r.touch.cell.row),
                    format!("{:.3}", r.touch.distance),
                    format!("{:+.4}", r.touch.increment),
                    format!("{:+.3}", r.before),
                    format!("{:+.3}", r.after),
                    note.to_string(),
                ];
                for (i, text) in cells.into_iter().enumerate() {
                    row.col(|ui| {
                        let t = RichText::new(text).monospace();
                        ui.add(egui::Label::new(if i == 4 { t.color(colour) } else { t }).truncate());
                    });
                }
            });
        });
}

/// Beam inspector state.
#[derive(Default)]
pub struct BeamPanel {}

impl BeamPanel {
    /// Draws the inspector for `selected` = (sensor, beam) in frame `frame`.
    /// `shown` gives the builder of the grids the records came from.
    pub fn ui(
        &mut self,
        ui: &mut egui::Ui,
        doc: &Document,
        shown: Option<&Shown>,
        frame: usize,
        selected: Option<(usize, usize)>,
        records: &[TouchRecord],
    ) -> Vec<Action> {
        let builder = shown.map_or(&doc.builder, |s| &s.builder);
        let mut actions = Vec::new();
        ui.heading("Beam");
        let sensors = &doc.session.sensors;
        if sensors.is_empty() {
            ui.label("this session has no sensors");
            return actions;
        }
        let (mut sensor, mut beam) = selected.unwrap_or((0, 0));
        sensor = sensor.min(sensors.len() - 1);
        let count = sensors[sensor].beam_count();
        ui.horizontal(|ui| {
            egui::ComboBox::new("beam sensor", "sensor")
                .selected_text(sensors[sensor].id.as_str())
                .show_ui(ui, |ui| {
                    for (i, s) in sensors.iter().enumerate() {
                        if ui.selectable_label(i == sensor, s.id.as_str()).clicked() && i != sensor
                        {
                            actions.push(Action::SelectBeam { sensor: i, beam: 0 });
                        }
                    }
                });
            let label = ui.label("beam");
            let r = ui
                .add(egui::DragValue::new(&mut beam).range(0..=count.saturating_sub(1)))
                .labelled_by(label.id);
            if r.changed() {
                actions.push(Action::SelectBeam { sensor, beam });
            }
            if selected.is_none() && ui.button("Inspect").clicked() {
                actions.push(Action::SelectBeam { sensor, beam });
            }
            if selected.is_some()
                && ui
                    .button("Clear")
                    .on_hover_text("Stop inspecting this beam")
                    .clicked()
            {
                actions.push(Action::ClearBeam);
            }
        });
        let Some(selected_pair) = selected else {
            ui.label("Click a beam in the map (or choose one above) to see the cells it touched.");
            return actions;
        };
        let b = BeamRef {
            frame,
            sensor: selected_pair.0,
            beam: selected_pair.1,
        };
        let Some(ray) = builder.beam_ray(b) else {
            ui.label(format!(
                "sensor \"{}\" has no scan in frame {frame}",
                sensors[b.sensor].id
            ));
            return actions;
        };
        let what = match ray.reading {
            Reading::Hit(z) => format!("hit at {z:.3} m"),
            Reading::NoReturn => format!("no return (reading {:.3} m)", ray.raw),
            Reading::Invalid => format!("invalid reading ({}), skipped", ray.raw),
        };
        ui.label(format!(
            "frame {frame}, sensor \"{}\", beam {}: {what}; heading {:.1} deg",
            sensors[b.sensor].id,
            b.beam,
            ray.heading.to_degrees()
        ));
        let entry = (b.frame, sensors[b.sensor].id.clone(), b.beam);
        let left_out = doc.params.exclude.beams.contains(&entry);
        ui.horizontal(|ui| {
            if builder.is_excluded(b) {
                ui.colored_label(
                    Color32::from_rgb(160, 160, 255),
                    "Left out of the fusion: its cells do not change.",
                );
            }
            if left_out {
                if ui
                    .button("Put this beam back")
                    .on_hover_text("Take the beam into the fusion again")
                    .clicked()
                {
                    let mut p = doc.params.clone();
                    p.exclude.beams.retain(|e| *e != entry);
                    actions.push(Action::SetParams(p));
                }
            } else if ui
                .button("Leave this beam out")
                .on_hover_text("Leave this beam of this frame out of the fusion (saved with the parameters; Ctrl+Z undoes)")
                .clicked()
            {
                actions.push(Action::ExcludeBeam(b));
            }
        });
        let touched = records.len();
        let clamped = records.iter().filter(|r| r.clamped).count();
        ui.label(format!(
            "{touched} cells touched, {clamped} cut by the clamp"
        ));
        if doc.params.fusion == FusionRule::OncePerCell {
            ui.label("OncePerCell: 'after' is the value at the end of the frame; 'used' says whether this beam's increment was the one applied.");
        }

        self.plot_ui(ui, builder, b, ray.reading, records);

        ui.separator();
        footprint_table_ui(ui, records, doc.params.fusion);
        actions
    }

    fn plot_ui(
        &self,
        ui: &mut egui::Ui,
        builder: &crate::MapBuilder,
        b: BeamRef,
        reading: Reading,
        records: &[TouchRecord],
    ) {
        let model = builder.model(b.sensor);
        let sensor = &builder.session().sensors[b.sensor];
        let crate::fusion::CellBounds { lo, hi } = builder.bounds();
        let cells: Vec<[f64; 2]> = records
            .iter()
            .map(|r| [r.touch.distance, r.touch.increment as f64])
            .collect();
        let reach = match reading {
            Reading::Hit(z) => Some(model.hit_reach(z)),
            Reading::NoReturn => Some(sensor.range_max),
            Reading::Invalid => None,
        };
        let far = reach.unwrap_or(1.0) * 1.05;
        let curve: Vec<[f64; 2]> = match (reading, reach) {
            (Reading::Hit(z), Some(reach)) => (0..=400)
                .map(|k| {
                    let d = reach * k as f64 / 400.0;
                    [d, model.hit_increment_exact(d, z)]
                })
                .collect(),
            _ => Vec::new(),
        };
        let values: Vec<f64> = curve.iter().chain(&cells).map(|p| p[1]).collect();
        let bounds = super::model_plot_bounds(&values, lo as f64, hi as f64);
        Plot::new(("beam plot", b.sensor, b.beam))
            .default_x_bounds(0.0, far)
            .default_y_bounds(bounds.y_min, bounds.y_max)
            .height(190.0)
            .legend(Legend::default())
            .custom_x_axes(super::plot_x_axis("distance from the sensor (m)"))
            .y_axis_label("increment (log-odds)")
            .allow_scroll(false)
            .show(ui, |p| {
                if let Reading::Hit(z) = reading {
                    p.line(Line::new("model", PlotPoints::from(curve)));
                    p.vline(VLine::new("reading", z));
                }
                if let Some(reach) = reach {
                    p.vline(VLine::new("reach", reach).color(Color32::GRAY));
                }
                p.points(Points::new("touched cells", PlotPoints::from(cells)).radius(2.5));
                if bounds.show_hi {
                    p.hline(
                        HLine::new("clamp max", hi as f64).color(Color32::from_rgb(120, 140, 255)),
                    );
                }
                if bounds.show_lo {
                    p.hline(
                        HLine::new("clamp min", lo as f64).color(Color32::from_rgb(240, 200, 90)),
                    );
                }
            });
        if let Some(note) = bounds.note(lo as f64, hi as f64) {
            ui.label(note);
        }
    }
}
