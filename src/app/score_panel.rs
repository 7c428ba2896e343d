//! Scoring against a reference map: load the reference (a map bundle, the demo's plan, or a
//! greyscale image with its resolution and origin) and read the current map's scores, and A's
//! when A is pinned.
//!
//! The metrics and their sources are documented in [`crate::score`].

use super::{Action, Document};
use crate::export::ImageReference;
use crate::geometry::Point2;
use crate::grid::Grid;
use crate::score::{CompareError, Score, score};
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

/// (map version, reference version, map name) a cached score belongs to.
type ScoreKey = (u64, u64, char);

/// One row of the score table: name, tooltip, how to show it.
type MetricRow = (&'static str, &'static str, fn(&Score) -> String);

/// Score panel state: the two load forms and cached scores.
pub struct ScorePanel {
    bundle_path: String,
    image: ImageForm,
    cached: Vec<(ScoreKey, Result<Score, CompareError>)>,
}

struct ImageForm {
    path: String,
    resolution: f64,
    origin_x: f64,
    origin_y: f64,
    occupied_at_most: u8,
    free_at_least: u8,
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
                occupied_at_most: 100,
                free_at_least: 155,
            },
            cached: Vec::new(),
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
    fn score_of(
        &mut self,
        key: ScoreKey,
        map: &Grid,
        reference: &Grid,
    ) -> Result<Score, CompareError> {
        if let Some((_, s)) = self.cached.iter().find(|(k, _)| *k == key) {
            return s.clone();
        }
        let s = score(map, reference);
        self.cached.retain(|(k, _)| k.2 != key.2);
        self.cached.push((key, s.clone()));
        s
    }

    /// Draws the panel. `maps` are the current map (`'B'`) and the pinned one (`'A'`) with
    /// their versions.
    pub fn ui(
        &mut self,
        ui: &mut egui::Ui,
        doc: &Document,
        reference: Option<&Reference>,
        maps: &[(char, &Grid, u64)],
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
            ui.add(egui::Slider::new(&mut f.occupied_at_most, 0..=254).text("occupied if grey <="));
            ui.add(egui::Slider::new(&mut f.free_at_least, 1..=255).text("free if grey >="));
            if ui
                .add_enabled(!f.path.trim().is_empty(), egui::Button::new("Load image"))
                .clicked()
            {
                actions.push(Action::LoadReferenceImage(ImageReference {
                    path: PathBuf::from(f.path.trim()),
                    resolution: f.resolution,
                    origin: Point2::new(f.origin_x, f.origin_y),
                    occupied_at_most: f.occupied_at_most,
                    free_at_least: f.free_at_least,
                }));
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
        let results: Vec<(char, Result<Score, CompareError>)> = maps
            .iter()
            .map(|(name, grid, version)| {
                (
                    *name,
                    self.score_of((*version, reference.version, *name), grid, &reference.grid),
                )
            })
            .collect();
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
