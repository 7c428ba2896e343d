//! Scoring against a reference map: load the reference (a map bundle, the demo's plan, or a
//! greyscale image with its resolution and origin) and read the current map's scores, and A's
//! when A is pinned.
//!
//! The metrics and their sources are documented in [`crate::score`].

use super::jobs::Job;
use super::{Action, Document};
use crate::align::{Fit, fit_rigid};
use crate::export::{DEFAULT_MARGIN, ImageClasses, ImageReference, classify_image};
use crate::geometry::Point2;
use crate::geometry::Pose2;
use crate::grid::DEFAULT_CELL_BUDGET;
use crate::grid::Grid;
use crate::score::{Score, score_moved};
use egui::{Color32, RichText};
use std::path::PathBuf;
use std::sync::Arc;

/// A loaded reference map.
pub struct Reference {
    /// Where it came from.
    pub label: String,
    /// The reference (log-odds; 0 means undecided).
    pub grid: Arc<Grid>,
    /// Bumped on every load.
    pub version: u64,
}

/// (map version, reference version, map name, fitted to another frame) a score belongs to.
type ScoreKey = (u64, u64, char, bool);

/// A score, with the rigid transform it was scored under when one was fitted.
type Scored = Result<(Score, Option<Fit>), String>;

/// One row of the score table: name, tooltip, how to show it.
type MetricRow = (&'static str, &'static str, fn(&Score) -> String);

/// Score panel state: the two load forms, the scores and the jobs computing them.
pub struct ScorePanel {
    bundle_path: String,
    image: ImageForm,
    /// Fit a rigid transform between the map and the reference before scoring.
    pub align: bool,
    cached: Vec<(ScoreKey, Scored)>,
    jobs: Vec<(ScoreKey, Job<Scored>)>,
}

struct ImageForm {
    path: String,
    resolution: f64,
    origin_x: f64,
    origin_y: f64,
    /// Pick the cut from the image's histogram.
    auto_cut: bool,
    cut: u8,
    margin: u8,
    /// What the current setting makes of the image, once previewed (setting, classes).
    preview: Option<(ImageReference, Result<ImageClasses, String>)>,
    preview_job: Option<(ImageReference, Job<Result<ImageClasses, String>>)>,
}

impl ImageForm {
    fn setting(&self) -> ImageReference {
        ImageReference {
            path: PathBuf::from(self.path.trim()),
            resolution: self.resolution,
            origin: Point2::new(self.origin_x, self.origin_y),
            cut: (!self.auto_cut).then_some(self.cut),
            margin: self.margin,
        }
    }
}

impl Default for ScorePanel {
    fn default() -> Self {
        ScorePanel {
            bundle_path: String::new(),
            image: ImageForm {
                path: String::new(),
                resolution: 0.05,
                origin_x: 0.0,
                origin_y: 0.0,
                auto_cut: true,
                cut: 128,
                margin: DEFAULT_MARGIN,
                preview: None,
                preview_job: None,
            },
            align: false,
            cached: Vec::new(),
            jobs: Vec::new(),
        }
    }
}

/// A metric as shown: 4 decimals, or "n/a" when undefined.
fn metric(v: f64) -> String {
    if v.is_nan() {
        "n/a".into()
    } else {
        format!("{v:.4}")
    }
}

impl ScorePanel {
    /// Puts an image's path into the image form (a dropped image), to be previewed.
    pub fn set_image_path(&mut self, path: &std::path::Path) {
        self.image.path = path.display().to_string();
        self.image.preview = None;
    }

    /// The score of `map` under `key`: known, being computed (started if not), or `None`.
    fn score_of(
        &mut self,
        ctx: &egui::Context,
        key: ScoreKey,
        map: &Arc<Grid>,
        reference: &Arc<Grid>,
    ) -> Option<Scored> {
        if let Some((_, s)) = self.cached.iter().find(|(k, _)| *k == key) {
            return Some(s.clone());
        }
        if let Some(i) = self.jobs.iter().position(|(k, _)| *k == key) {
            let done = self.jobs[i].1.poll()?;
            self.jobs.remove(i);
            let s = done.unwrap_or_else(|f| Err(format!("the score {f}")));
            self.cached.retain(|(k, _)| k.2 != key.2);
            self.cached.push((key, s.clone()));
            return Some(s);
        }
        self.jobs.retain(|(k, _)| k.2 != key.2);
        let (map, reference) = (map.clone(), reference.clone());
        let job = Job::spawn(Some(ctx.clone()), 1, move |_, _| {
            let fit = if key.3 {
                Some(fit_rigid(&map, &reference).ok_or("a map has no occupied cell to align by")?)
            } else {
                None
            };
            let pose = fit.map_or(Pose2::default(), |f| f.pose);
            score_moved(&map, &reference, &pose)
                .map(|s| (s, fit))
                .map_err(|e| e.to_string())
        });
        self.jobs.push((key, job));
        None
    }

    /// Waits for the scores and the image preview being computed (tests only).
    pub fn wait(&mut self) {
        if let Some((s, job)) = self.image.preview_job.take() {
            let result = job
                .wait()
                .unwrap_or_else(|failure| Err(format!("the preview {failure}")));
            self.image.preview = Some((s, result));
        }
        for (key, job) in std::mem::take(&mut self.jobs) {
            let s = job.wait().unwrap_or_else(|f| Err(format!("the score {f}")));
            self.cached.retain(|(k, _)| k.2 != key.2);
            self.cached.push((key, s));
        }
    }

    /// The score of the map named `name` against the current reference, once computed.
    pub fn score(&self, name: char) -> Option<&Scored> {
        self.cached
            .iter()
            .rev()
            .find(|(k, _)| k.2 == name)
            .map(|(_, s)| s)
    }

    /// Draws the panel. `maps` are the current map (`'B'`) and the pinned one (`'A'`) with
    /// their versions.
    pub fn ui(
        &mut self,
        ui: &mut egui::Ui,
        doc: &Document,
        reference: Option<&Reference>,
        maps: &[(char, Arc<Grid>, u64)],
    ) -> Vec<Action> {
        let mut actions = Vec::new();
        ui.heading("Score against a reference");
        if let super::Source::Demo(name) = doc.source
            && ui
                .button(format!("Use the plan of demo {name} as reference"))
                .clicked()
        {
            actions.push(Action::UseDemoReference(name));
        }
        ui.collapsing("Load a map bundle", |ui| {
            ui.horizontal(|ui| {
                ui.label("prefix");
                ui.add(
                    egui::TextEdit::singleline(&mut self.bundle_path)
                        .desired_width(230.0)
                        .hint_text("path/to/reference"),
                )
                .on_hover_text("PREFIX of PREFIX.map.ron + PREFIX.npy, or the path of either file");
                if ui.button("Browse...").clicked()
                    && let Some(p) = rfd::FileDialog::new()
                        .add_filter("map bundle", &["ron", "npy"])
                        .pick_file()
                {
                    self.bundle_path = p.display().to_string();
                }
            });
            if ui
                .add_enabled(
                    !self.bundle_path.trim().is_empty(),
                    egui::Button::new("Load bundle"),
                )
                .clicked()
            {
                actions.push(Action::LoadReference(PathBuf::from(
                    self.bundle_path.trim(),
                )));
            }
        });
        ui.collapsing("Load a greyscale image", |ui| {
            let f = &mut self.image;
            ui.horizontal(|ui| {
                ui.label("image");
                ui.add(
                    egui::TextEdit::singleline(&mut f.path)
                        .desired_width(230.0)
                        .hint_text("plan.png"),
                );
                if ui.button("Browse...").clicked()
                    && let Some(p) = rfd::FileDialog::new()
                        .add_filter("image", &["png", "pgm", "pnm"])
                        .pick_file()
                {
                    f.path = p.display().to_string();
                }
            });
            ui.add(
                egui::Slider::new(&mut f.resolution, 0.005..=1.0)
                    .logarithmic(true)
                    .text("resolution")
                    .suffix(" m"),
            )
            .on_hover_text("Side of one pixel, metres");
            ui.add(
                egui::DragValue::new(&mut f.origin_x)
                    .speed(0.05)
                    .prefix("origin x ")
                    .suffix(" m"),
            )
            .on_hover_text("World x of the image's south-west (bottom-left) corner");
            ui.add(
                egui::DragValue::new(&mut f.origin_y)
                    .speed(0.05)
                    .prefix("origin y ")
                    .suffix(" m"),
            )
            .on_hover_text("World y of the image's south-west (bottom-left) corner");
            ui.checkbox(&mut f.auto_cut, "cut from the image's histogram")
                .on_hover_text("The grey level that best splits the image into a dark and a light class (Otsu 1979)");
            ui.add_enabled(
                !f.auto_cut,
                egui::Slider::new(&mut f.cut, 0..=254).text("cut (grey)"),
            )
            .on_hover_text("Grey levels at or below the cut are occupied (dark), above it free (light)");
            ui.add(egui::Slider::new(&mut f.margin, 0..=127).text("undecided margin (grey)"))
                .on_hover_text("Grey levels within this many of the cut are left undecided");
            let setting = f.setting();
            if let Some((s, job)) = &f.preview_job
                && let Some(result) = job.poll()
            {
                let result = result.unwrap_or_else(|failure| Err(format!("the preview {failure}")));
                f.preview = Some((s.clone(), result));
                f.preview_job = None;
            }
            let ready = !f.path.trim().is_empty();
            ui.horizontal(|ui| {
                if ui
                    .add_enabled(ready && f.preview_job.is_none(), egui::Button::new("Preview"))
                    .on_hover_text("Read the image and count what this setting makes of it")
                    .clicked()
                {
                    let r = setting.clone();
                    let job = Job::spawn(Some(ui.ctx().clone()), 1, move |_, _| {
                        classify_image(&r, DEFAULT_CELL_BUDGET).map_err(|e| e.to_string())
                    });
                    f.preview_job = Some((setting.clone(), job));
                }
                if f.preview_job.is_some() {
                    ui.spinner();
                }
            });
            match &f.preview {
                Some((s, Ok(c))) if *s == setting => {
                    ui.label(format!(
                        "{} x {} pixels, cut {}: {} occupied, {} free, {} undecided",
                        c.width, c.height, c.cut, c.occupied, c.free, c.undecided
                    ));
                    if ui.button("Use as reference").clicked() {
                        actions.push(Action::LoadReferenceImage(setting));
                    }
                }
                Some((s, Err(e))) if *s == setting => {
                    ui.colored_label(Color32::from_rgb(255, 110, 90), e);
                }
                _ => {
                    ui.label("Preview the image to see its classes before using it.");
                }
            }
        });
        let Some(reference) = reference else {
            ui.label("No reference loaded.");
            return actions;
        };
        ui.separator();
        let rs = reference.grid.spec();
        ui.label(format!(
            "reference: {} ({} x {} cells at {} m)",
            reference.label, rs.width, rs.height, rs.resolution
        ));
        ui.checkbox(&mut self.align, "the map was drawn in another frame: fit a rigid transform first")
            .on_hover_text("Find the rotation and shift that best lay the map's occupied cells onto the reference's, then score on the aligned overlap");
        let ctx = ui.ctx().clone();
        let mut results: Vec<(char, Result<Score, String>)> = Vec::new();
        let mut pending = false;
        for (name, grid, version) in maps {
            let key = (*version, reference.version, *name, self.align);
            match self.score_of(&ctx, key, grid, &reference.grid) {
                None => pending = true,
                Some(Ok((s, fit))) => {
                    if let Some(f) = fit {
                        ui.label(format!(
                            "map {name} fitted onto the reference: x {:+.3} m, y {:+.3} m, heading {:+.2} deg (fit {:.3})",
                            f.pose.x,
                            f.pose.y,
                            f.pose.theta.to_degrees(),
                            f.score
                        ));
                    }
                    results.push((*name, Ok(s)));
                }
                Some(Err(e)) => results.push((*name, Err(e))),
            }
        }
        if pending {
            ui.horizontal(|ui| {
                ui.spinner();
                ui.label(if self.align {
                    "fitting and scoring..."
                } else {
                    "scoring..."
                });
            });
        }
        egui::Grid::new("scores")
            .striped(true)
            .num_columns(results.len() + 1)
            .show(ui, |ui| {
                ui.strong("metric");
                for (name, _) in &results {
                    ui.strong(format!("map {name}"));
                }
                ui.end_row();
                let rows: [MetricRow; 10] = [
                    (
                        "cells compared",
                        "cells in both grids that the reference decides",
                        |s| s.cells_compared.to_string(),
                    ),
                    (
                        "cross-entropy (bits/cell)",
                        "mean log loss against the reference; lower is better",
                        |s| metric(s.cross_entropy_bits),
                    ),
                    (
                        "Brier",
                        "mean squared error of the probability; lower is better",
                        |s| metric(s.brier),
                    ),
                    (
                        "ROC AUC",
                        "chance that an occupied cell scores above a free one; higher is better",
                        |s| metric(s.auc),
                    ),
                    (
                        "precision",
                        "occupied calls (p > 0.5) that are occupied in the reference",
                        |s| metric(s.precision),
                    ),
                    ("recall", "occupied reference cells called occupied", |s| {
                        metric(s.recall)
                    }),
                    (
                        "occupied: right / wrong",
                        "cells called occupied that are occupied / free in the reference",
                        |s| {
                            format!(
                                "{} / {}",
                                s.confusion.true_occupied, s.confusion.false_occupied
                            )
                        },
                    ),
                    (
                        "free: right / wrong",
                        "cells called free that are free / occupied in the reference",
                        |s| format!("{} / {}", s.confusion.true_free, s.confusion.false_free),
                    ),
                    (
                        "unknown, ref occupied",
                        "cells left at exactly 0.5 where the reference is occupied",
                        |s| s.confusion.unknown_occupied.to_string(),
                    ),
                    (
                        "unknown, ref free",
                        "cells left at exactly 0.5 where the reference is free",
                        |s| s.confusion.unknown_free.to_string(),
                    ),
                ];
                for (name, tip, f) in rows {
                    ui.label(name).on_hover_text(tip);
                    for (_, r) in &results {
                        match r {
                            Ok(s) => ui.label(RichText::new(f(s)).monospace()),
                            Err(_) => ui.label("-"),
                        };
                    }
                    ui.end_row();
                }
            });
        for (name, r) in &results {
            if let Err(e) = r {
                ui.colored_label(Color32::from_rgb(255, 110, 90), format!("map {name}: {e}"));
            }
        }
        actions
    }
}
