//! The tuning panel: every parameter of the profile, per-sensor inverse models, a live plot of
//! the model along a beam, and how many contrary readings flip a saturated cell.
//!
//! Edits go into a draft. A draft that passes the profile's own validation is applied at once
//! (the map rebuilds in the background); one that does not is shown with the reason and not
//! applied, so the map always matches parameters that are valid.

use super::{Action, Document};
use crate::fusion::CellBounds;
use crate::logodds::{logit, probability};
use crate::model::{PreparedModel, cone_probability};
use crate::params::registry::{self, Tunable};
use crate::{FusionRule, ModelSpec, NoReturnRule, Params, Reading, SensorKind};
use egui::{Color32, RichText};
use egui_plot::{HLine, Legend, Line, Plot, PlotPoints, VLine};

/// Tuning panel state.
#[derive(Default)]
pub struct TuningPanel {
    /// Parameters being edited; `None` means "the document's".
    draft: Option<Params>,
    /// Why the draft is not applied, if it is refused.
    pub refusal: Option<String>,
    /// Which sensor the plot and the flip readout describe.
    focus: usize,
    /// The frame range being entered for exclusion.
    frame_range: Option<(usize, usize)>,
}

/// The y range of a plot of increments against distance, and which clamp bounds to draw.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct PlotBounds {
    /// Lowest y shown, log-odds.
    pub y_min: f64,
    /// Highest y shown, log-odds.
    pub y_max: f64,
    /// Whether the lower clamp bound lies close enough to draw.
    pub show_lo: bool,
    /// Whether the upper clamp bound lies close enough to draw.
    pub show_hi: bool,
}

impl PlotBounds {
    /// A note naming the clamp bounds left off the plot, if any.
    pub fn note(&self, lo: f64, hi: f64) -> Option<String> {
        match (self.show_lo, self.show_hi) {
            (true, true) => None,
            (false, true) => Some(format!("clamp min {lo:+.2} lies far below the plot")),
            (true, false) => Some(format!("clamp max {hi:+.2} lies far above the plot")),
            (false, false) => Some(format!(
                "clamp bounds {lo:+.2} and {hi:+.2} lie far outside the plot"
            )),
        }
    }
}

/// The y range for plotting `values` (increments, log-odds) with the clamp bounds `lo < 0 <
/// hi`: the values' own range (and 0), widened to a bound only when that bound lies within two
/// of those ranges; a bound further away is left off, so that a clamp of 50 does not flatten
/// increments of about 1 into a line.
pub fn model_plot_bounds(values: &[f64], lo: f64, hi: f64) -> PlotBounds {
    let (mut a, mut b) = values
        .iter()
        .filter(|v| v.is_finite())
        .fold((0.0f64, 0.0f64), |(a, b), &v| (a.min(v), b.max(v)));
    let span = (b - a).max(0.5);
    let show_lo = lo >= a - 2.0 * span;
    let show_hi = hi <= b + 2.0 * span;
    if show_lo {
        a = a.min(lo);
    }
    if show_hi {
        b = b.max(hi);
    }
    let pad = 0.05 * (b - a);
    PlotBounds {
        y_min: a - pad,
        y_max: b + pad,
        show_lo,
        show_hi,
    }
}

/// A probability of log-odds `l` in a form that never shows exactly 0 or 1.
pub fn show_probability(l: f64) -> String {
    let p = probability(l);
    if p > 0.9999 {
        format!("1 - {:.1e}", probability(-l))
    } else if p < 0.0001 {
        format!("{p:.1e}")
    } else {
        format!("{p:.4}")
    }
}

/// A labelled slider with its own number field (typed values are not clamped to the slider
/// range, so out-of-domain entries reach validation) and a tooltip. Returns whether it changed.
fn number(
    ui: &mut egui::Ui,
    label: &str,
    unit: &str,
    value: &mut f64,
    range: std::ops::RangeInclusive<f64>,
    log: bool,
    help: &str,
) -> bool {
    let mut s = egui::Slider::new(value, range)
        .clamping(egui::SliderClamping::Never)
        .logarithmic(log)
        .max_decimals(4)
        .text(label);
    if !unit.is_empty() {
        s = s.suffix(format!(" {unit}"));
    }
    ui.add(s).on_hover_text(help).changed()
}

/// A slider for one tunable of the registry, labelled `label`. Returns whether it changed.
pub(super) fn tunable_ui(ui: &mut egui::Ui, t: &Tunable, draft: &mut Params, label: &str) -> bool {
    let Some(mut v) = t.get(draft) else {
        return false;
    };
    let ((lo, hi), log) = t.slider();
    let changed = number(ui, label, t.unit().suffix(), &mut v, lo..=hi, log, t.help());
    changed && t.set(draft, v).is_ok()
}

/// Edits one inverse model (the default one for `sensor == None`): its kind, and its fields
/// from the registry. Returns whether it changed.
fn model_ui(ui: &mut egui::Ui, sensor: Option<&str>, draft: &mut Params) -> bool {
    let mut changed = false;
    let key = sensor.unwrap_or("default");
    let m = match sensor {
        Some(id) => draft.models.get_mut(id),
        None => Some(&mut draft.default_model),
    };
    let Some(m) = m else { return false };
    ui.horizontal(|ui| {
        ui.label("model");
        egui::ComboBox::from_id_salt(("model kind", key))
            .selected_text(m.kind_name())
            .show_ui(ui, |ui| {
                let (p_occ, p_free) = (m.p_occ(), m.p_free());
                if ui.selectable_label(matches!(m, ModelSpec::Gaussian { .. }), "Gaussian").clicked() && !matches!(m, ModelSpec::Gaussian { .. }) {
                    *m = ModelSpec::Gaussian { sigma: 0.05, p_occ, p_free, cutoff: 3.0 };
                    changed = true;
                }
                if ui.selectable_label(matches!(m, ModelSpec::Band { .. }), "Band").clicked() && !matches!(m, ModelSpec::Band { .. }) {
                    *m = ModelSpec::Band { thickness: 0.1, p_occ, p_free };
                    changed = true;
                }
            })
            .response
            .on_hover_text("Gaussian: a peak of width sigma at the reading, floored at p_free in front and fading to 0.5 behind.\nBand: p_occ within thickness/2 of the reading, p_free in front of it.");
    });
    let model = *m;
    ui.push_id(key, |ui| {
        for f in registry::MODEL_FIELDS {
            if (f.get)(&model).is_some() {
                let t = Tunable::Model(sensor.map(String::from), f);
                changed |= tunable_ui(ui, &t, draft, f.name);
            }
        }
    });
    changed
}

impl TuningPanel {
    /// Forgets the draft (after the document's parameters changed).
    pub fn reset(&mut self) {
        self.draft = None;
        self.refusal = None;
    }

    /// The draft being edited, if it differs from the document's parameters.
    pub fn draft(&self) -> Option<&Params> {
        self.draft.as_ref()
    }

    /// Draws the panel. `selected` is the selected beam's sensor and reading, if any.
    pub fn ui(
        &mut self,
        ui: &mut egui::Ui,
        doc: &Document,
        selected: Option<(usize, Reading)>,
        frame: usize,
    ) -> Vec<Action> {
        let mut draft = self.draft.take().unwrap_or_else(|| doc.params.clone());
        if let Some((s, _)) = selected {
            self.focus = s;
        }
        self.focus = self.focus.min(doc.session.sensors.len().saturating_sub(1));
        let mut changed = false;
        egui::ScrollArea::vertical().show(ui, |ui| {
            ui.heading("Tuning");
            if let Some(why) = &self.refusal {
                ui.colored_label(Color32::from_rgb(255, 110, 90), RichText::new(format!("Not applied: {why}")).strong());
                if ui.button("Revert to the applied parameters").clicked() {
                    draft = doc.params.clone();
                    self.refusal = None;
                }
            }
            ui.separator();
            ui.label(RichText::new("Grid").strong());
            let (clamp, grid): (Vec<_>, Vec<_>) = registry::PROFILE_FIELDS
                .iter()
                .partition(|f| f.name.starts_with("clamp."));
            for f in grid {
                changed |= tunable_ui(ui, &Tunable::Profile(f), &mut draft, f.name);
            }
            ui.label(RichText::new("Clamp (log-odds)").strong());
            for f in clamp {
                let label = f.name.trim_start_matches("clamp.");
                changed |= tunable_ui(ui, &Tunable::Profile(f), &mut draft, label);
            }
            if draft.clamp.min < 0.0 && draft.clamp.max > 0.0 {
                ui.label(format!(
                    "as probabilities: [{}, {}]",
                    show_probability(draft.clamp.min),
                    show_probability(draft.clamp.max)
                ));
            }
            ui.horizontal(|ui| {
                ui.label("fusion").on_hover_text("EveryBeam: each beam updates the cells it touches.\nOncePerCell: within one frame each cell takes only its strongest update.");
                changed |= ui.radio_value(&mut draft.fusion, FusionRule::EveryBeam, "EveryBeam").changed();
                changed |= ui.radio_value(&mut draft.fusion, FusionRule::OncePerCell, "OncePerCell").changed();
            });
            ui.horizontal(|ui| {
                ui.label("no-return").on_hover_text("What a reading at or beyond range_max does.\nClear: mark every cell up to range_max with p_free.\nIgnore: touch nothing.");
                changed |= ui.radio_value(&mut draft.no_return, NoReturnRule::Clear, "Clear").changed();
                changed |= ui.radio_value(&mut draft.no_return, NoReturnRule::Ignore, "Ignore").changed();
            });
            ui.separator();
            ui.label(RichText::new("Default model").strong()).on_hover_text("Used by every sensor without a model of its own.");
            changed |= model_ui(ui, None, &mut draft);
            for (i, sensor) in doc.session.sensors.iter().enumerate() {
                ui.separator();
                ui.horizontal(|ui| {
                    let kind = match sensor.kind {
                        SensorKind::Ray => "narrow beams",
                        SensorKind::Cone => "wide beams",
                    };
                    ui.label(RichText::new(format!("Sensor \"{}\"", sensor.id)).strong());
                    ui.label(format!("({kind}, {} beams)", sensor.beam_count()));
                    if ui.radio(self.focus == i, "plot").on_hover_text("Show this sensor's model in the plot below").clicked() {
                        self.focus = i;
                    }
                });
                let mut own = draft.models.contains_key(&sensor.id);
                if ui.checkbox(&mut own, "own model").on_hover_text("Give this sensor a model of its own instead of the default").changed() {
                    if own {
                        draft.models.insert(sensor.id.clone(), draft.default_model);
                    } else {
                        draft.models.remove(&sensor.id);
                    }
                    changed = true;
                }
                changed |= model_ui(ui, Some(&sensor.id), &mut draft);
            }
            ui.separator();
            changed |= self.exclusions_ui(ui, doc, &mut draft, frame);
            ui.separator();
            self.plot_ui(ui, doc, &draft, selected);
        });

        let mut actions = Vec::new();
        if changed || self.refusal.is_some() {
            match draft.validate() {
                Ok(()) if draft != doc.params => {
                    self.refusal = None;
                    actions.push(Action::SetParams(draft.clone()));
                }
                Ok(()) => self.refusal = None,
                Err(why) => self.refusal = Some(why.to_string()),
            }
        }
        self.draft = (draft != doc.params).then_some(draft);
        actions
    }

    /// What is left out of the fusion: frame ranges, sensors and single beams.
    fn exclusions_ui(
        &mut self,
        ui: &mut egui::Ui,
        doc: &Document,
        draft: &mut Params,
        frame: usize,
    ) -> bool {
        let mut changed = false;
        let ex = &mut draft.exclude;
        ui.label(RichText::new("Leave out").strong())
            .on_hover_text("Parts of the session left out of the fusion, saved with the parameters. Excluded frames show as blue bands on the timeline.");
        let last = doc.session.frames.len().saturating_sub(1);
        let mut remove = None;
        for (k, r) in ex.frames.iter().enumerate() {
            ui.horizontal(|ui| {
                ui.label(format!("frames {}..={}", r.start(), r.end()));
                if ui.small_button("put back").clicked() {
                    remove = Some(k);
                }
            });
        }
        if let Some(k) = remove {
            ex.frames.remove(k);
            changed = true;
        }
        ui.horizontal(|ui| {
            let (mut a, mut b) = self.frame_range.unwrap_or((frame, frame));
            let la = ui.label("frames");
            ui.add(egui::DragValue::new(&mut a).range(0..=last))
                .labelled_by(la.id);
            let lb = ui.label("to");
            ui.add(egui::DragValue::new(&mut b).range(0..=last))
                .labelled_by(lb.id);
            self.frame_range = Some((a, b));
            if ui
                .button("Leave these frames out")
                .on_hover_text("Leave frames from..to (inclusive) out of the fusion")
                .clicked()
            {
                ex.frames.push(a.min(b)..=a.max(b));
                changed = true;
            }
        });
        for s in &doc.session.sensors {
            let mut out = ex.sensors.contains(&s.id);
            if ui
                .checkbox(&mut out, format!("leave out sensor \"{}\"", s.id))
                .changed()
            {
                if out {
                    ex.sensors.push(s.id.clone());
                } else {
                    ex.sensors.retain(|id| id != &s.id);
                }
                changed = true;
            }
        }
        let mut remove = None;
        for (k, (f, id, b)) in ex.beams.iter().enumerate() {
            ui.horizontal(|ui| {
                ui.label(format!("beam {b} of \"{id}\" in frame {f}"));
                if ui.small_button("put back").clicked() {
                    remove = Some(k);
                }
            });
        }
        if let Some(k) = remove {
            ex.beams.remove(k);
            changed = true;
        }
        changed
    }

    /// The focus sensor's model along one beam, and the flip counts.
    fn plot_ui(
        &self,
        ui: &mut egui::Ui,
        doc: &Document,
        draft: &Params,
        selected: Option<(usize, Reading)>,
    ) {
        let Some(sensor) = doc.session.sensors.get(self.focus) else {
            return;
        };
        // Plot the applied draft when it is valid, else the applied parameters.
        let params = if draft.validate().is_ok() {
            draft
        } else {
            &doc.params
        };
        let spec = *params.model_for(&sensor.id);
        let model = PreparedModel::new(spec);
        let z = match selected {
            Some((s, Reading::Hit(z))) if s == self.focus => z,
            _ => (sensor.range_max * 0.5).min(3.0),
        };
        let reach = model.hit_reach(z);
        let far = reach + (reach - z).max(0.2);
        let n = 600;
        let pts: Vec<[f64; 2]> = (0..=n)
            .map(|k| {
                let d = far * k as f64 / n as f64;
                let inc = if d <= reach {
                    model.hit_increment_exact(d, z)
                } else {
                    0.0
                };
                [d, inc]
            })
            .collect();
        ui.label(
            RichText::new(format!(
                "Model of \"{}\" along a beam hitting at {z:.2} m",
                sensor.id
            ))
            .strong(),
        );
        // The plot's identity includes the reading so that its axes follow a newly chosen beam.
        let values: Vec<f64> = pts.iter().map(|p| p[1]).collect();
        let bounds = model_plot_bounds(&values, params.clamp.min, params.clamp.max);
        Plot::new(("model plot", self.focus, (z * 1000.0).round() as i64))
            .default_x_bounds(0.0, far)
            .default_y_bounds(bounds.y_min, bounds.y_max)
            .height(200.0)
            .legend(Legend::default())
            .custom_x_axes(super::plot_x_axis("distance from the sensor (m)"))
            .y_axis_label("increment (log-odds)")
            .allow_scroll(false)
            .show(ui, |p| {
                p.line(Line::new("increment", PlotPoints::from(pts)));
                if sensor.kind == SensorKind::Cone {
                    // Half-way to the cone's edge the deviation from 0.5 shrinks to 3/4.
                    let w: Vec<[f64; 2]> = (0..=n)
                        .map(|k| {
                            let d = reach * k as f64 / n as f64;
                            let p_rad = crate::model::hit_probability(&spec, d, z);
                            [
                                d,
                                logit(cone_probability(
                                    p_rad,
                                    sensor.cone_width / 4.0,
                                    sensor.cone_width,
                                )),
                            ]
                        })
                        .collect();
                    p.line(Line::new(
                        "at a quarter of the cone width",
                        PlotPoints::from(w),
                    ));
                }
                p.vline(VLine::new("reading", z));
                p.vline(VLine::new("reach", reach).color(Color32::GRAY));
                if bounds.show_hi {
                    p.hline(
                        HLine::new("clamp max", params.clamp.max)
                            .color(Color32::from_rgb(120, 140, 255)),
                    );
                }
                if bounds.show_lo {
                    p.hline(
                        HLine::new("clamp min", params.clamp.min)
                            .color(Color32::from_rgb(240, 200, 90)),
                    );
                }
            });
        if let Some(note) = bounds.note(params.clamp.min, params.clamp.max) {
            ui.label(note);
        }
        let l_free = logit(spec.p_free());
        let l_occ = logit(spec.p_occ());
        let clamp = params.clamp;
        let say = |n: Option<u32>| n.map_or("never".to_string(), |n| n.to_string());
        ui.label(format!(
            "A cell at the upper clamp ({:+.2}) drops below p = 0.5 after {} consistent free readings ({l_free:+.3} each).",
            clamp.max,
            say(CellBounds::from(clamp).readings_to_flip(l_free as f32))
        ));
        ui.label(format!(
            "A cell at the lower clamp ({:+.2}) rises above p = 0.5 after {} consistent hits at the peak ({l_occ:+.3} each).",
            clamp.min,
            say(CellBounds::from(clamp).readings_to_flip(l_occ as f32))
        ));
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_far_clamp_does_not_flatten_the_model_plot() {
        // The door-cycle profile: increments between logit(0.42) = -0.32 and logit(0.85) =
        // 1.73, clamp (-2.6, 50). The plot spans the increments (and the near lower bound),
        // not 50: the upper bound is left off and named.
        let values = [-0.3228, 0.0, 1.7346, 0.4];
        let b = model_plot_bounds(&values, -2.6, 50.0);
        assert!(b.show_lo && !b.show_hi);
        assert!(b.y_max < 2.0 && b.y_min < -2.6, "{b:?}");
        assert!(b.note(-2.6, 50.0).unwrap().contains("clamp max +50.00"));
        // A near clamp is drawn and included.
        let b = model_plot_bounds(&values, -2.08, 2.79);
        assert!(b.show_lo && b.show_hi && b.y_max > 2.79 && b.note(-2.08, 2.79).is_none());
    }
}
