//! The Poses tab: how well each frame agrees with the map of the rest of the run, the
//! stretches that stand out, each sensor's mount and clock corrections with a fit, and
//! re-aligning a stretch's poses. The computations are [`crate::diagnose`]'s, run as jobs.

use super::jobs::Job;
use super::{Action, Document};
use crate::diagnose::{
    self, Calibration, CalibrationField, RealignWindow, Realigned, RunAgreement, Stretch, Typical,
};
use crate::params::registry::{CALIBRATION_FIELDS, Tunable};
use egui::{Color32, RichText};
use std::ops::Range;
use std::sync::Arc;
use std::sync::atomic::Ordering;

/// Agreement results for one builder generation.
pub struct Checked {
    /// Generation of the builder they were computed with.
    pub generation: u64,
    /// Every frame's agreement.
    pub run: RunAgreement,
    /// The run's typical value and the low cut.
    pub typical: Option<Typical>,
    /// Stretches well below typical.
    pub stretches: Vec<Stretch>,
}

/// What the timeline's agreement strip draws.
pub struct Strip<'a> {
    /// Per frame, its agreement.
    pub values: &'a [Option<f64>],
    /// Frames below this are low.
    pub cut: f64,
    /// The parameters changed since: drawn faded.
    pub stale: bool,
}

type Outcome<T> = Result<T, String>;

/// The tab's sections, for scrolling a fresh result into view.
#[derive(Clone, Copy, PartialEq, Eq, Debug)]
enum Section {
    Fit,
    Realign,
}

/// State of the Poses tab.
#[derive(Default)]
pub struct PosesPanel {
    agreement_job: Option<(u64, Job<Outcome<RunAgreement>>)>,
    /// The last agreement check.
    pub checked: Option<Checked>,
    values: Vec<Option<f64>>,
    /// Sensor whose corrections are shown (index into the session's sensors).
    pub sensor: usize,
    /// Which corrections a fit searches, in [`CalibrationField::ALL`] order.
    pub fit_fields: [bool; 4],
    fit_job: Option<Job<Outcome<Calibration>>>,
    /// The last fit's result.
    pub fit: Option<Calibration>,
    realign_job: Option<(u64, Job<Outcome<Realigned>>)>,
    /// The last re-alignment, with the generation it was made for.
    pub realigned: Option<(u64, Realigned)>,
    /// How far a re-alignment may move a pose: metres and degrees.
    pub window: (f64, f64),
    problem: Option<String>,
    /// A result arrived below the fold: scroll it into view once.
    reveal: Option<Section>,
    initialised: bool,
}

impl PosesPanel {
    /// Forgets everything about the previous session.
    pub fn reset(&mut self) {
        *self = PosesPanel::default();
    }

    /// The strip the timeline draws, once agreement was checked.
    pub fn strip(&self, doc: &Document) -> Option<Strip<'_>> {
        let c = self.checked.as_ref()?;
        (self.values.len() == doc.session.frames.len()).then(|| Strip {
            values: &self.values,
            cut: c.typical.map_or(0.0, |t| t.cut),
            stale: c.generation != doc.built,
        })
    }

    /// Starts the agreement check on the document's current builder.
    pub fn start_agreement(&mut self, doc: &Document, ctx: Option<egui::Context>) {
        let builder = doc.builder.clone();
        self.problem = None;
        let job = Job::spawn(ctx, 1000, move |cancel, done| {
            diagnose::agreement(&builder, cancel, &mut |share| {
                done.store((share * 1000.0) as usize, Ordering::Relaxed)
            })
            .map_err(|e| e.to_string())
        });
        self.agreement_job = Some((doc.built, job));
    }

    /// Starts re-aligning `frames` on the document's current builder.
    pub fn start_realign(
        &mut self,
        doc: &Document,
        frames: Range<usize>,
        ctx: Option<egui::Context>,
    ) {
        let builder = doc.builder.clone();
        let window = RealignWindow {
            reach: self.window.0,
            turn: self.window.1.to_radians(),
        };
        self.problem = None;
        let job = Job::spawn(ctx, frames.len(), move |cancel, done| {
            diagnose::realign(&builder, frames, window, cancel, &|k| {
                done.store(k, Ordering::Relaxed)
            })
            .map_err(|e| e.to_string())
        });
        self.realign_job = Some((doc.built, job));
    }

    /// Starts a fit of the chosen corrections of the shown sensor.
    pub fn start_fit(&mut self, doc: &Document, ctx: Option<egui::Context>) {
        let fields: Vec<CalibrationField> = CalibrationField::ALL
            .iter()
            .zip(self.fit_fields)
            .filter(|(_, on)| *on)
            .map(|(f, _)| *f)
            .collect();
        let Some(sensor) = doc.session.sensors.get(self.sensor) else {
            return;
        };
        let (session, params, id) = (doc.session.clone(), doc.params.clone(), sensor.id.clone());
        self.problem = None;
        let planned = 4 + fields.len() * 24;
        let job = Job::spawn(ctx, planned, move |cancel, done| {
            diagnose::calibrate(&session, &params, &id, &fields, cancel, &|p| {
                done.store(p.evaluations, Ordering::Relaxed)
            })
            .map_err(|e| e.to_string())
        });
        self.fit_job = Some(job);
    }

    /// Takes finished jobs' results.
    pub fn poll(&mut self) {
        if let Some((g, job)) = &self.agreement_job
            && let Some(r) = job.poll()
        {
            let g = *g;
            self.agreement_job = None;
            self.take_agreement(g, r.unwrap_or_else(|f| Err(format!("the check {f}"))));
        }
        if let Some(job) = &self.fit_job
            && let Some(r) = job.poll()
        {
            self.fit_job = None;
            match r.unwrap_or_else(|f| Err(format!("the fit {f}"))) {
                Ok(c) => {
                    self.fit = Some(c);
                    self.reveal = Some(Section::Fit);
                }
                Err(e) => self.problem = Some(e),
            }
        }
        if let Some((g, job)) = &self.realign_job
            && let Some(r) = job.poll()
        {
            let g = *g;
            self.realign_job = None;
            match r.unwrap_or_else(|f| Err(format!("the re-alignment {f}"))) {
                Ok(r) => {
                    self.realigned = Some((g, r));
                    self.reveal = Some(Section::Realign);
                }
                Err(e) => self.problem = Some(e),
            }
        }
    }

    fn take_agreement(&mut self, generation: u64, r: Outcome<RunAgreement>) {
        match r {
            Ok(run) => {
                let (typical, stretches) = diagnose::suspect_stretches(&run.frames)
                    .map_or((None, Vec::new()), |(t, s)| (Some(t), s));
                self.values = run.values();
                self.checked = Some(Checked {
                    generation,
                    run,
                    typical,
                    stretches,
                });
            }
            Err(e) => self.problem = Some(e),
        }
    }

    /// Waits for every running job (tests only).
    pub fn wait(&mut self) {
        if let Some((g, job)) = self.agreement_job.take() {
            let r = job.wait().unwrap_or_else(|f| Err(format!("the check {f}")));
            self.take_agreement(g, r);
        }
        if let Some(job) = self.fit_job.take() {
            match job.wait().unwrap_or_else(|f| Err(format!("the fit {f}"))) {
                Ok(c) => {
                    self.fit = Some(c);
                    self.reveal = Some(Section::Fit);
                }
                Err(e) => self.problem = Some(e),
            }
        }
        if let Some((g, job)) = self.realign_job.take() {
            match job
                .wait()
                .unwrap_or_else(|f| Err(format!("the re-alignment {f}")))
            {
                Ok(r) => {
                    self.realigned = Some((g, r));
                    self.reveal = Some(Section::Realign);
                }
                Err(e) => self.problem = Some(e),
            }
        }
    }

    /// Whether a job runs.
    pub fn busy(&self) -> bool {
        self.agreement_job.is_some() || self.fit_job.is_some() || self.realign_job.is_some()
    }

    /// Draws the tab.
    pub fn ui(&mut self, ui: &mut egui::Ui, doc: &Document) -> Vec<Action> {
        self.poll();
        if !self.initialised {
            self.fit_fields = [true, true, false, false];
            self.window = (0.5, 5.0);
            self.initialised = true;
        }
        let mut actions = Vec::new();
        egui::ScrollArea::vertical().show(ui, |ui| {
            ui.heading("Poses");
            if let Some(p) = &self.problem {
                ui.colored_label(Color32::from_rgb(255, 110, 90), p);
            }
            self.agreement_ui(ui, doc, &mut actions);
            ui.separator();
            self.calibration_ui(ui, doc, &mut actions);
            ui.separator();
            self.realign_ui(ui, doc, &mut actions);
        });
        actions
    }

    fn agreement_ui(&mut self, ui: &mut egui::Ui, doc: &Document, actions: &mut Vec<Action>) {
        ui.label(RichText::new("Agreement").strong()).on_hover_text(
            "For each frame, the share of its hit readings that land on an occupied cell \
             (within one cell) and cross none on the way, in the map built from the other half \
             of the run. Dips mark frames whose pose, mount or timing is off.",
        );
        ui.horizontal(|ui| match &self.agreement_job {
            Some((_, job)) => {
                ui.add(
                    egui::ProgressBar::new(job.done() as f32 / job.total as f32)
                        .desired_width(160.0)
                        .text("checking"),
                );
                if ui.button("Cancel").clicked() {
                    job.cancel();
                }
            }
            None => {
                if ui
                    .button("Check agreement")
                    .on_hover_text("Shown as a strip under the timeline")
                    .clicked()
                {
                    actions.push(Action::CheckAgreement);
                }
            }
        });
        let Some(c) = &self.checked else {
            return;
        };
        if c.generation != doc.built {
            ui.label("The parameters or poses changed since; check again to update.");
        }
        let overall = c.run.overall().map_or("none".into(), |a| format!("{a:.3}"));
        match c.typical {
            Some(t) if t.cut > 0.0 => ui.label(format!(
                "run {overall}, median {:.3}, spread {:.3}; frames below {:.3} are low",
                t.median, t.spread, t.cut
            )),
            Some(t) => ui.label(format!(
                "run {overall}, median {:.3}, spread {:.3}: frames scatter too widely for a                  stretch to stand out. A whole run that agrees poorly points at the mount or                  the clock: fit them below, then check again.",
                t.median, t.spread
            )),
            None => ui.label("no frame has readings the maps can judge"),
        };
        if c.stretches.is_empty() {
            ui.label("No suspect stretch.");
            return;
        }
        ui.label(format!("{} suspect stretches:", c.stretches.len()));
        let mut order: Vec<&Stretch> = c.stretches.iter().collect();
        order.sort_by(|a, b| a.mean.total_cmp(&b.mean));
        egui::ScrollArea::vertical()
            .id_salt("suspect stretches")
            .max_height(150.0)
            .show(ui, |ui| egui::Grid::new("suspects").striped(true).show(ui, |ui| {
            ui.label("frames");
            ui.label("time, s");
            ui.label("mean");
            ui.label("");
            ui.end_row();
            for s in &order {
                ui.monospace(format!("{}..={}", s.frames.start, s.frames.end - 1));
                ui.monospace(format!("{:.2}..{:.2}", s.times.0, s.times.1));
                ui.monospace(format!("{:.2}", s.mean));
                ui.horizontal(|ui| {
                    if ui.small_button("Go").on_hover_text("Show the stretch's first frame").clicked() {
                        actions.push(Action::Seek(s.frames.start));
                    }
                    if ui
                        .small_button("Leave out")
                        .on_hover_text("Leave these frames out of the fusion (undoable)")
                        .clicked()
                    {
                        actions.push(Action::LeaveOutFrames(s.frames.clone()));
                    }
                    if ui
                        .small_button("Re-align")
                        .on_hover_text("Search each frame's pose for the best fit with the map of the other frames")
                        .clicked()
                    {
                        actions.push(Action::Realign(s.frames.clone()));
                    }
                });
                ui.end_row();
            }
        }));
    }

    fn calibration_ui(&mut self, ui: &mut egui::Ui, doc: &Document, actions: &mut Vec<Action>) {
        ui.label(RichText::new("Mount and clock").strong()).on_hover_text(
            "Corrections added to a sensor's recorded mount, and the offset of its clock: a scan \
             stamped t was taken at pose time t + offset. Saved with the parameters.",
        );
        let sensors = &doc.session.sensors;
        self.sensor = self.sensor.min(sensors.len().saturating_sub(1));
        let Some(sensor) = sensors.get(self.sensor) else {
            return;
        };
        egui::ComboBox::new("calibration sensor", "sensor")
            .selected_text(&sensor.id)
            .show_ui(ui, |ui| {
                for (i, s) in sensors.iter().enumerate() {
                    ui.selectable_value(&mut self.sensor, i, &s.id);
                }
            });
        let id = sensors[self.sensor].id.clone();
        let mut draft = doc.params.clone();
        let mut changed = false;
        for f in CALIBRATION_FIELDS {
            let t = Tunable::Calibration(id.clone(), f);
            changed |= super::tuning::tunable_ui(ui, &t, &mut draft, f.name);
        }
        if changed && draft.validate().is_ok() && draft != doc.params {
            actions.push(Action::SetParams(draft));
        }
        ui.horizontal(|ui| {
            ui.label("fit");
            for (on, f) in self.fit_fields.iter_mut().zip(CalibrationField::ALL) {
                ui.checkbox(on, f.name());
            }
        });
        match &self.fit_job {
            Some(job) => {
                ui.horizontal(|ui| {
                    ui.add(
                        egui::ProgressBar::new((job.done() as f32 / job.total as f32).min(1.0))
                            .desired_width(160.0)
                            .text(format!("{} evaluations", job.done())),
                    );
                    if ui.button("Cancel").clicked() {
                        job.cancel();
                    }
                });
            }
            None => {
                let any = self.fit_fields.iter().any(|b| *b);
                if ui
                    .add_enabled(any, egui::Button::new("Fit"))
                    .on_hover_text("Search the chosen corrections that make the run's walls agree best, coarse to fine")
                    .clicked()
                {
                    actions.push(Action::StartFit);
                }
            }
        }
        let Some(fit) = &self.fit else { return };
        let opt = |v: Option<f64>| v.map_or("none".into(), |v| format!("{v:.3}"));
        ui.label(format!(
            "fit of \"{}\": agreement {} -> {}, sharpness {:.3} -> {:.3} ({} evaluations on {} frames)",
            fit.sensor,
            opt(fit.agreement.0),
            opt(fit.agreement.1),
            fit.sharpness.0,
            fit.sharpness.1,
            fit.evaluations,
            fit.frames_used
        ));
        let a = fit.after;
        ui.monospace(format!(
            "mount_x {:+.4} m  mount_y {:+.4} m\nmount_theta {:+.3} deg  time_offset {:+.1} ms",
            a.mount_x,
            a.mount_y,
            a.mount_theta.to_degrees(),
            a.time_offset * 1e3
        ));
        let applied = doc
            .params
            .calibration
            .get(&fit.sensor)
            .copied()
            .unwrap_or_default()
            == a;
        let apply = ui
            .add_enabled(!applied, egui::Button::new("Apply the fit"))
            .on_hover_text("Set these corrections (undoable)");
        if self.reveal == Some(Section::Fit) {
            apply.scroll_to_me(None);
            self.reveal = None;
        }
        if apply.clicked() {
            actions.push(Action::SetParams(fit.apply(&doc.params)));
        }
    }

    fn realign_ui(&mut self, ui: &mut egui::Ui, doc: &Document, actions: &mut Vec<Action>) {
        ui.label(RichText::new("Re-align").strong()).on_hover_text(
            "Moves each frame of a stretch to the pose, within the window, where its readings \
             fit the map of the frames outside the stretch best.",
        );
        ui.horizontal(|ui| {
            ui.label("window");
            ui.add(
                egui::DragValue::new(&mut self.window.0)
                    .range(0.0..=2.0)
                    .speed(0.01)
                    .suffix(" m"),
            );
            ui.add(
                egui::DragValue::new(&mut self.window.1)
                    .range(0.0..=20.0)
                    .speed(0.1)
                    .suffix(" deg"),
            );
        });
        if let Some((_, job)) = &self.realign_job {
            ui.horizontal(|ui| {
                ui.add(
                    egui::ProgressBar::new(job.done() as f32 / job.total.max(1) as f32)
                        .desired_width(160.0)
                        .text("re-aligning"),
                );
                if ui.button("Cancel").clicked() {
                    job.cancel();
                }
            });
        }
        let Some((g, r)) = &self.realigned else {
            ui.label("Choose Re-align on a suspect stretch above.");
            return;
        };
        let (before, after) = r.mean_agreement();
        let opt = |v: Option<f64>| v.map_or("none".into(), |v| format!("{v:.3}"));
        ui.label(format!(
            "frames {}..={}: agreement {} -> {}",
            r.frames.start,
            r.frames.end - 1,
            opt(before),
            opt(after)
        ));
        egui::ScrollArea::vertical()
            .id_salt("realigned frames")
            .max_height(160.0)
            .show(ui, |ui| {
                egui::Grid::new("realigned").striped(true).show(ui, |ui| {
                    for h in ["frame", "moved, m", "turned, deg", "agreement"] {
                        ui.label(h);
                    }
                    ui.end_row();
                    for (k, f) in r.frames.clone().enumerate() {
                        let d = diagnose::pose_difference(&r.after[k], &r.before[k]);
                        ui.monospace(f.to_string());
                        ui.monospace(format!("{:.3}", d.x.hypot(d.y)));
                        ui.monospace(format!("{:+.2}", d.theta.to_degrees()));
                        let (a, b) = r.agreement[k];
                        ui.monospace(format!("{} -> {}", opt(a), opt(b)));
                        ui.end_row();
                    }
                });
            });
        let current = *g == doc.built;
        if !current {
            ui.label("The parameters or poses changed since this re-alignment.");
        }
        ui.horizontal(|ui| {
            let use_them = ui
                .add_enabled(current, egui::Button::new("Use these poses"))
                .on_hover_text("Replace the stretch's poses in the open run (undoable; save the run under a new name from the File menu)");
            if self.reveal == Some(Section::Realign) {
                use_them.scroll_to_me(None);
                self.reveal = None;
            }
            if use_them.clicked() {
                actions.push(Action::UseRealigned);
            }
            if ui.button("Discard").clicked() {
                actions.push(Action::DiscardRealigned);
            }
        });
    }

    /// The re-aligned run, if the last re-alignment is for the document's current builder.
    pub fn realigned_session(&self, doc: &Document) -> Option<Arc<crate::Session>> {
        let (g, r) = self.realigned.as_ref()?;
        (*g == doc.built).then(|| Arc::new(diagnose::with_poses(&doc.session, r)))
    }
}
