//! Parameter sweeps in the window: choose one or two parameters and their ranges, rebuild every
//! setting on worker threads (with progress and a cancel button), plot the score as a line or a
//! heat map, and apply the best setting with one click.

use super::jobs::Job;
use super::{Action, Document};
use crate::grid::Grid;
use crate::params::registry;
use crate::sweep::{Objective, SweepPlan, SweepResult, Vary, sweep};
use egui::{Color32, RichText, Sense, vec2};
use egui_plot::{Legend, Line, Plot, PlotPoints, Points};
use std::sync::Arc;

struct Axis {
    name: String,
    from: f64,
    to: f64,
    steps: usize,
}

/// Sweep panel state.
pub struct SweepPanel {
    first: Axis,
    second: Option<Axis>,
    objective: Objective,
    up_to_current: bool,
    job: Option<Job<SweepResult>>,
    /// The last finished sweep and the profile it started from.
    pub result: Option<(SweepResult, crate::params::Params)>,
    /// Why the last sweep could not start.
    pub problem: Option<String>,
}

impl Default for SweepPanel {
    fn default() -> Self {
        SweepPanel {
            first: Axis {
                name: "clamp.max".into(),
                from: 1.0,
                to: 10.0,
                steps: 10,
            },
            second: None,
            objective: Objective::CrossEntropy,
            up_to_current: false,
            job: None,
            result: None,
            problem: None,
        }
    }
}

/// Parameter paths offered: every tunable of the profile (the registry's order), plus the
/// fields of a model of its own for each sensor that has none yet.
fn names(doc: &Document) -> Vec<String> {
    let mut with_models = doc.params.clone();
    for s in &doc.session.sensors {
        let default = with_models.default_model;
        with_models.models.entry(s.id.clone()).or_insert(default);
    }
    registry::tunables(&with_models)
        .iter()
        .map(|t| t.path())
        .filter(|p| p != "resolution")
        .collect()
}

fn axis_ui(ui: &mut egui::Ui, key: &str, axis: &mut Axis, names: &[String]) {
    ui.horizontal(|ui| {
        egui::ComboBox::new(("sweep param", key), "parameter")
            .selected_text(axis.name.as_str())
            .show_ui(ui, |ui| {
                for n in names {
                    ui.selectable_value(&mut axis.name, n.clone(), n.as_str());
                }
            });
    });
    ui.horizontal(|ui| {
        ui.add(
            egui::DragValue::new(&mut axis.from)
                .speed(0.01)
                .prefix("from "),
        );
        ui.add(egui::DragValue::new(&mut axis.to).speed(0.01).prefix("to "));
        ui.add(
            egui::DragValue::new(&mut axis.steps)
                .range(1..=200)
                .prefix("steps "),
        );
    });
}

impl SweepPanel {
    /// Waits for a running sweep (tests only).
    pub fn wait(&mut self, base: &crate::params::Params) {
        if let Some(job) = self.job.take() {
            self.take(job.wait(), base);
        }
    }

    fn take(
        &mut self,
        r: Result<SweepResult, super::jobs::JobFailure>,
        base: &crate::params::Params,
    ) {
        match r {
            Ok(r) => self.result = Some((r, base.clone())),
            Err(f) => self.problem = Some(format!("the sweep {f}")),
        }
    }

    /// Sets the swept parameters (as the panel's fields would).
    pub fn set_axes(&mut self, first: &Vary, second: Option<&Vary>) {
        fn axis(v: &Vary) -> Axis {
            Axis {
                name: v.name.clone(),
                from: v.from,
                to: v.to,
                steps: v.steps,
            }
        }
        self.first = axis(first);
        self.second = second.map(axis);
    }

    /// Whether a finished sweep's results are shown.
    pub fn has_result(&self) -> bool {
        self.result.is_some()
    }

    /// Whether a sweep runs.
    pub fn running(&self) -> bool {
        self.job.is_some()
    }

    /// Starts a sweep of the given parameters against `reference`.
    pub fn start(
        &mut self,
        doc: &Document,
        reference: Arc<Grid>,
        frame: usize,
        ctx: Option<egui::Context>,
    ) {
        let mut vary = vec![Vary {
            name: self.first.name.clone(),
            from: self.first.from,
            to: self.first.to,
            steps: self.first.steps.max(1),
        }];
        if let Some(s) = &self.second {
            vary.push(Vary {
                name: s.name.clone(),
                from: s.from,
                to: s.to,
                steps: s.steps.max(1),
            });
        }
        let frames = if self.up_to_current {
            frame + 1
        } else {
            doc.session.frames.len()
        };
        let plan = SweepPlan {
            session: doc.session.clone(),
            base: doc.params.clone(),
            reference,
            vary,
            objective: self.objective,
            frames,
            cell_budget: crate::grid::DEFAULT_CELL_BUDGET,
        };
        if let Err(why) = plan.check() {
            self.problem = Some(why);
            return;
        }
        self.problem = None;
        self.result = None;
        let total = plan.len();
        self.job = Some(Job::spawn(ctx, total, move |cancel, done| {
            sweep(&plan, cancel, done)
        }));
    }

    /// Draws the panel.
    pub fn ui(
        &mut self,
        ui: &mut egui::Ui,
        doc: &Document,
        has_reference: bool,
        base: &crate::params::Params,
    ) -> Vec<Action> {
        let mut actions = Vec::new();
        if let Some(job) = &self.job
            && let Some(r) = job.poll()
        {
            self.job = None;
            self.take(r, base);
        }
        ui.heading("Sweep");
        ui.label("Rebuild the session for a range of one or two parameters and score every map against the reference.");
        let names = names(doc);
        axis_ui(ui, "first", &mut self.first, &names);
        let mut two = self.second.is_some();
        if ui
            .checkbox(&mut two, "and a second parameter (heat map)")
            .changed()
        {
            self.second = two.then(|| Axis {
                name: "default_model.p_free".into(),
                from: 0.3,
                to: 0.45,
                steps: 4,
            });
        }
        if let Some(s) = &mut self.second {
            axis_ui(ui, "second", s, &names);
        }
        ui.horizontal(|ui| {
            egui::ComboBox::new("sweep objective", "best by")
                .selected_text(match self.objective {
                    Objective::CrossEntropy => "cross-entropy",
                    Objective::Brier => "Brier",
                    Objective::Auc => "ROC AUC",
                })
                .show_ui(ui, |ui| {
                    ui.selectable_value(
                        &mut self.objective,
                        Objective::CrossEntropy,
                        "cross-entropy",
                    );
                    ui.selectable_value(&mut self.objective, Objective::Brier, "Brier");
                    ui.selectable_value(&mut self.objective, Objective::Auc, "ROC AUC");
                });
            ui.checkbox(&mut self.up_to_current, "only up to the current frame");
        });
        match &self.job {
            Some(job) => {
                ui.horizontal(|ui| {
                    let f = job.done() as f32 / job.total.max(1) as f32;
                    ui.add(egui::ProgressBar::new(f).desired_width(200.0).text(format!(
                        "{}/{} settings",
                        job.done(),
                        job.total
                    )));
                    if ui.button("Cancel").clicked() {
                        job.cancel();
                    }
                });
                ui.ctx()
                    .request_repaint_after(std::time::Duration::from_millis(200));
            }
            None => {
                let enabled = has_reference;
                let r = ui.add_enabled(enabled, egui::Button::new("Run sweep"));
                if !enabled {
                    r.on_disabled_hover_text("Load a reference in the Score tab first");
                    ui.label("Load a reference in the Score tab first.");
                } else if r.clicked() {
                    actions.push(Action::StartSweep);
                }
            }
        }
        if let Some(p) = &self.problem {
            ui.colored_label(Color32::from_rgb(255, 110, 90), p);
        }
        if let Some((result, base)) = &self.result {
            ui.separator();
            self.result_ui(ui, result, base, &mut actions);
        }
        actions
    }

    fn result_ui(
        &self,
        ui: &mut egui::Ui,
        r: &SweepResult,
        base: &crate::params::Params,
        actions: &mut Vec<Action>,
    ) {
        let value = |s: &crate::score::Score| match self.objective {
            Objective::CrossEntropy => s.cross_entropy_bits,
            Objective::Brier => s.brier,
            Objective::Auc => s.auc,
        };
        let label = match self.objective {
            Objective::CrossEntropy => "cross-entropy (bits/cell)",
            Objective::Brier => "Brier",
            Objective::Auc => "ROC AUC",
        };
        match r.best {
            Some(i) => {
                let settings: Vec<String> = r
                    .vary
                    .iter()
                    .zip(&r.rows[i].values)
                    .map(|(v, x)| format!("{} = {x:.4}", v.name))
                    .collect();
                ui.label(RichText::new(format!("best: {}", settings.join(", "))).strong());
                if ui.button("Apply the best setting").clicked() {
                    actions.push(Action::SetParams(r.params_of(base, i)));
                }
            }
            None => {
                ui.label("no setting could be scored");
            }
        }
        if r.vary.len() == 1 {
            let pts: Vec<[f64; 2]> = r
                .rows
                .iter()
                .filter_map(|row| row.outcome.as_ref().ok().map(|s| [row.values[0], value(s)]))
                .collect();
            Plot::new("sweep plot")
                .height(200.0)
                .legend(Legend::default())
                .custom_x_axes(super::plot_x_axis(r.vary[0].name.as_str()))
                .y_axis_label(label)
                .allow_scroll(false)
                .show(ui, |p| {
                    p.line(Line::new(label, PlotPoints::from(pts.clone())));
                    p.points(Points::new("settings", PlotPoints::from(pts)).radius(3.0));
                    if let Some(i) = r.best
                        && let Ok(s) = &r.rows[i].outcome
                    {
                        p.points(
                            Points::new(
                                "best",
                                PlotPoints::from(vec![[r.rows[i].values[0], value(s)]]),
                            )
                            .radius(6.0)
                            .color(Color32::GOLD),
                        );
                    }
                });
        } else {
            self.heat_map_ui(ui, r, &value, label);
        }
        let refused = r.rows.iter().filter(|row| row.outcome.is_err()).count();
        if refused > 0 {
            ui.collapsing(format!("{refused} settings could not be scored"), |ui| {
                for row in r.rows.iter().filter(|row| row.outcome.is_err()) {
                    ui.label(format!(
                        "{:?}: {}",
                        row.values,
                        row.outcome.as_ref().err().map_or("", |e| e.as_str())
                    ));
                }
            });
        }
    }

    fn heat_map_ui(
        &self,
        ui: &mut egui::Ui,
        r: &SweepResult,
        value: &dyn Fn(&crate::score::Score) -> f64,
        label: &str,
    ) {
        let (nx, ny) = (r.vary[0].steps, r.vary[1].steps);
        let values: Vec<f64> = r
            .rows
            .iter()
            .map(|row| row.outcome.as_ref().map_or(f64::NAN, value))
            .collect();
        let finite: Vec<f64> = values.iter().copied().filter(|v| v.is_finite()).collect();
        let lo = finite.iter().copied().fold(f64::INFINITY, f64::min);
        let hi = finite.iter().copied().fold(f64::NEG_INFINITY, f64::max);
        ui.label(format!(
            "{label}: rows {} (down), columns {} (across)",
            r.vary[0].name, r.vary[1].name
        ));
        let cell = vec2(
            ((ui.available_width() - 60.0) / ny as f32).clamp(8.0, 40.0),
            18.0,
        );
        let (rect, response) = ui.allocate_exact_size(
            vec2(cell.x * ny as f32 + 60.0, cell.y * nx as f32),
            Sense::hover(),
        );
        let painter = ui.painter_at(rect);
        for i in 0..nx {
            painter.text(
                rect.min + vec2(0.0, cell.y * (i as f32 + 0.5)),
                egui::Align2::LEFT_CENTER,
                format!("{:.3}", r.rows[i * ny].values[0]),
                egui::FontId::monospace(10.0),
                ui.visuals().text_color(),
            );
            for j in 0..ny {
                let v = values[i * ny + j];
                let colour = if v.is_finite() {
                    heat_colour(if hi > lo {
                        ((v - lo) / (hi - lo)) as f32
                    } else {
                        0.5
                    })
                } else {
                    Color32::from_rgb(90, 30, 30)
                };
                let min = rect.min + vec2(60.0 + cell.x * j as f32, cell.y * i as f32);
                let cell_rect = egui::Rect::from_min_size(min, cell - vec2(1.0, 1.0));
                painter.rect_filled(cell_rect, 0.0, colour);
                if r.best == Some(i * ny + j) {
                    painter.rect_stroke(
                        cell_rect,
                        0.0,
                        egui::Stroke::new(2.0, Color32::GOLD),
                        egui::StrokeKind::Inside,
                    );
                }
            }
        }
        colour_bar_ui(ui, lo, hi, label);
        if let Some(p) = response.hover_pos() {
            let j = ((p.x - rect.min.x - 60.0) / cell.x).floor();
            let i = ((p.y - rect.min.y) / cell.y).floor();
            if j >= 0.0 && i >= 0.0 && (j as usize) < ny && (i as usize) < nx {
                let row = &r.rows[i as usize * ny + j as usize];
                let text = match &row.outcome {
                    Ok(s) => format!("{:?}: {label} {:.4}", row.values, value(s)),
                    Err(e) => format!("{:?}: {e}", row.values),
                };
                response.on_hover_text(text);
            }
        }
    }
}

/// Colour of a heat-map cell at `t` in 0..=1 of the value range (low dark, high light).
pub fn heat_colour(t: f32) -> Color32 {
    let g = (40.0 + 200.0 * t.clamp(0.0, 1.0)) as u8;
    Color32::from_rgb(g, g, (g as f32 * 0.8 + 40.0) as u8)
}

/// The heat map's colour bar: the colours from the lowest value to the highest, labelled.
fn colour_bar_ui(ui: &mut egui::Ui, lo: f64, hi: f64, label: &str) {
    if !(lo.is_finite() && hi.is_finite()) {
        return;
    }
    ui.horizontal(|ui| {
        ui.monospace(format!("{lo:.4}"));
        let (rect, _) = ui.allocate_exact_size(vec2(160.0, 12.0), Sense::hover());
        let n = 40;
        for k in 0..n {
            let x0 = rect.min.x + rect.width() * k as f32 / n as f32;
            let r = egui::Rect::from_min_size(
                egui::pos2(x0, rect.min.y),
                vec2(rect.width() / n as f32 + 0.5, rect.height()),
            );
            ui.painter()
                .rect_filled(r, 0.0, heat_colour(k as f32 / (n - 1) as f32));
        }
        ui.monospace(format!("{hi:.4}"));
        ui.label(format!("{label} (colour bar)"));
    });
}
