//! A/B comparison: pin the current parameters as A, keep tuning (B), and view A, B or the
//! cells whose class differs between them, with counts.
//!
//! A has a rebuild worker of its own, so both maps follow the timeline in the background.

use super::jobs::Job;
use super::render::difference_colour;
use super::worker::{Reply, Setup, Worker};
use super::{Action, Document, PINNED_SNAPSHOT_BUDGET};
use crate::fusion::MapBuilder;
use crate::geometry::Pose2;
use crate::grid::Grid;
use crate::params::{Params, registry};
use crate::score::{CellClass, for_each_sampled};
use egui::RichText;
use std::collections::BTreeMap;
use std::sync::Arc;

/// Which map the view shows.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Hash)]
pub enum Layer {
    /// The current parameters (B).
    #[default]
    Current,
    /// The pinned parameters (A).
    Pinned,
    /// Cells whose class differs between A and B.
    Difference,
}

/// The pinned parameters and their map.
pub struct Pinned {
    /// A's parameters.
    pub params: Params,
    /// A's builder.
    pub builder: Arc<MapBuilder>,
    worker: Worker,
    generation: u64,
    /// A's grid after the current frame, once delivered: (frame, grid).
    pub shown: Option<(usize, Arc<Grid>)>,
    /// Bumped when `shown` changes.
    pub version: u64,
}

impl Pinned {
    /// Pins `doc`'s current parameters and starts A's rebuild at `frame`.
    pub fn pin(doc: &Document, frame: usize, ctx: Option<&egui::Context>) -> Pinned {
        let worker = Worker::spawn(PINNED_SNAPSHOT_BUDGET);
        if let Some(ctx) = ctx {
            worker.set_repaint_context(ctx);
        }
        let mut p = Pinned {
            params: doc.params.clone(),
            builder: doc.builder.clone(),
            worker,
            generation: 1,
            shown: None,
            version: 0,
        };
        p.worker
            .request(p.generation, Setup::Use(p.builder.clone()), frame);
        p
    }

    /// Follows the timeline.
    pub fn seek(&mut self, frame: usize) {
        self.worker.request(self.generation, Setup::Keep, frame);
    }

    /// Takes finished work; returns whether A's grid changed.
    pub fn drain(&mut self, wait: bool) -> bool {
        let replies = if wait {
            self.worker.wait(std::time::Duration::from_secs(120))
        } else {
            self.worker.drain()
        };
        let mut changed = false;
        for r in replies {
            if let Reply::Ready { frame, after, .. } = r {
                self.shown = Some((frame, after));
                self.version += 1;
                changed = true;
            }
        }
        changed
    }

    /// Whether A is still being rebuilt.
    pub fn busy(&self) -> bool {
        self.worker.busy()
    }
}

/// Cell counts by (class in A, class in B).
pub type Transitions = BTreeMap<(CellClass, CellClass), u64>;

/// Counts of B's cells by (class in A, class in B), A read at each of B's cell centres (so the
/// two may have other lattices, as after a change of resolution).
pub fn transition_counts(a: &Grid, b: &Grid) -> Transitions {
    let mut counts = BTreeMap::new();
    for_each_sampled(b, a, &Pose2::default(), |vb, va| {
        *counts
            .entry((CellClass::of(va), CellClass::of(vb)))
            .or_insert(0) += 1;
    });
    counts
}

fn class_name(c: CellClass) -> &'static str {
    match c {
        CellClass::Free => "free",
        CellClass::Unknown => "unknown",
        CellClass::Occupied => "occupied",
    }
}

/// The parameters that differ between A and B, as (field, A, B) text: every tunable number
/// either profile has (by the registry), then the choices that are not numbers.
pub fn differing_fields(a: &Params, b: &Params) -> Vec<(String, String, String)> {
    let mut out = Vec::new();
    let mut field = |name: String, x: String, y: String| {
        if x != y {
            out.push((name, x, y));
        }
    };
    let show = |v: Option<f64>| v.map_or("-".to_string(), |v| v.to_string());
    let mut paths: Vec<String> = Vec::new();
    for t in registry::tunables(a)
        .into_iter()
        .chain(registry::tunables(b))
    {
        let path = t.path();
        if !paths.contains(&path) {
            field(path.clone(), show(t.get(a)), show(t.get(b)));
            paths.push(path);
        }
    }
    field(
        "fusion".into(),
        format!("{:?}", a.fusion),
        format!("{:?}", b.fusion),
    );
    field(
        "no_return".into(),
        format!("{:?}", a.no_return),
        format!("{:?}", b.no_return),
    );
    field(
        "default_model".into(),
        a.default_model.kind_name().into(),
        b.default_model.kind_name().into(),
    );
    let kinds = |p: &Params| -> Vec<String> {
        p.models
            .iter()
            .map(|(id, m)| format!("{id}: {}", m.kind_name()))
            .collect()
    };
    field("models".into(), kinds(a).join(", "), kinds(b).join(", "));
    field(
        "extent".into(),
        format!("{:?}", a.extent),
        format!("{:?}", b.extent),
    );
    field(
        "exclude".into(),
        format!("{:?}", a.exclude),
        format!("{:?}", b.exclude),
    );
    out
}

/// Compare panel state.
#[derive(Default)]
pub struct ComparePanel {
    counts: Option<((u64, u64), Transitions)>,
    job: Option<((u64, u64), Job<Transitions>)>,
}

impl ComparePanel {
    /// Waits for the counts being made (tests only).
    pub fn wait(&mut self) {
        if let Some((k, job)) = self.job.take()
            && let Ok(counts) = job.wait()
        {
            self.counts = Some((k, counts));
        }
    }

    /// Draws the panel. `b` is the current grid and `b_version` its version.
    pub fn ui(
        &mut self,
        ui: &mut egui::Ui,
        doc: &Document,
        pinned: Option<&Pinned>,
        layer: Layer,
        b: Option<(&Arc<Grid>, u64)>,
    ) -> Vec<Action> {
        let mut actions = Vec::new();
        ui.heading("Compare A and B");
        ui.label("A is a pinned set of parameters; B is whatever the tuning panel holds now.");
        ui.horizontal(|ui| {
            if ui
                .button("Pin current parameters as A")
                .on_hover_text("Keep the current parameters and their map as A; tune on as B")
                .clicked()
            {
                actions.push(Action::PinA);
            }
            if pinned.is_some() && ui.button("Unpin A").clicked() {
                actions.push(Action::UnpinA);
            }
        });
        let Some(a) = pinned else {
            return actions;
        };
        ui.horizontal(|ui| {
            ui.label("show");
            for (l, name, tip) in [
                (
                    Layer::Current,
                    "B (current)",
                    "The map with the current parameters",
                ),
                (
                    Layer::Pinned,
                    "A (pinned)",
                    "The map with the pinned parameters",
                ),
                (
                    Layer::Difference,
                    "Difference",
                    "Cells whose class (occupied / free / unknown) differs, coloured by direction",
                ),
            ] {
                if ui
                    .selectable_label(layer == l, name)
                    .on_hover_text(tip)
                    .clicked()
                {
                    actions.push(Action::SetLayer(l));
                }
            }
        });
        if a.params != doc.params && ui.button("Make A current again").clicked() {
            actions.push(Action::SetParams(a.params.clone()));
        }
        let fields = differing_fields(&a.params, &doc.params);
        if fields.is_empty() {
            ui.label("A and B have the same parameters: change something in the tuning panel.");
        } else {
            egui::Grid::new("ab fields").striped(true).show(ui, |ui| {
                ui.strong("parameter");
                ui.strong("A");
                ui.strong("B");
                ui.end_row();
                for (f, x, y) in &fields {
                    ui.label(f);
                    ui.label(RichText::new(x).monospace());
                    ui.label(RichText::new(y).monospace());
                    ui.end_row();
                }
            });
        }
        if a.busy() {
            ui.horizontal(|ui| {
                ui.spinner();
                ui.label("rebuilding A...");
            });
        }
        let (Some((ga_frame, ga)), Some((gb, b_version))) = (a.shown.as_ref(), b) else {
            return actions;
        };
        let key = (a.version, b_version);
        if let Some((k, job)) = &self.job
            && let Some(done) = job.poll()
        {
            if let Ok(counts) = done {
                self.counts = Some((*k, counts));
            }
            self.job = None;
        }
        let known = self.counts.as_ref().map(|c| c.0);
        let asked = self.job.as_ref().map(|j| j.0);
        if known != Some(key) && asked != Some(key) {
            let (ga, gb) = (ga.clone(), gb.clone());
            let job = Job::spawn(Some(ui.ctx().clone()), 1, move |_, _| {
                transition_counts(&ga, &gb)
            });
            self.job = Some((key, job));
        }
        ui.separator();
        ui.label(format!(
            "cells by class in A and in B (A at frame {ga_frame}, read at B's cell centres):"
        ));
        let Some((k, counts)) = &self.counts else {
            ui.spinner();
            return actions;
        };
        if *k != key {
            ui.horizontal(|ui| {
                ui.spinner();
                ui.label("counting...");
            });
        }
        let changed: u64 = counts
            .iter()
            .filter(|((x, y), _)| x != y)
            .map(|(_, n)| n)
            .sum();
        ui.label(format!("{changed} cells changed class"));
        egui::Grid::new("ab counts").striped(true).show(ui, |ui| {
            ui.label("");
            ui.strong("A -> B");
            ui.strong("cells");
            ui.end_row();
            for ((x, y), n) in counts {
                if x == y {
                    continue;
                }
                let (rect, _) =
                    ui.allocate_exact_size(egui::vec2(10.0, 10.0), egui::Sense::hover());
                ui.painter()
                    .rect_filled(rect, 2.0, difference_colour(Some(*x), *y));
                ui.label(format!("{} -> {}", class_name(*x), class_name(*y)));
                ui.label(n.to_string());
                ui.end_row();
            }
        });
        actions
    }
}
