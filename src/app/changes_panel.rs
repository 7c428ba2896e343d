//! The change finder: cells whose class (occupied / free / unknown) flipped within a window of
//! frames, grouped into connected clusters, with stepping from one cluster to the next.

use super::jobs::Job;
use super::{Action, Document};
use crate::score::{CellClass, ChangeCluster, class_changes};
use egui::RichText;

/// The outcome of a change search.
type Found = Result<Vec<ChangeCluster>, String>;

/// Change finder state.
#[derive(Default)]
pub struct ChangesPanel {
    /// First frame of the window (its state before is compared).
    pub from: usize,
    /// Last frame of the window (its state after is compared).
    pub to: usize,
    initialised: bool,
    job: Option<(u64, Job<Found>)>,
    /// The clusters found, for (generation, from, to).
    pub found: Option<((u64, usize, usize), Vec<ChangeCluster>)>,
    /// The cluster stepped to (an index into the clusters shown).
    pub current: usize,
    problem: Option<String>,
    /// Show every transition, including those from or to unknown.
    pub include_unknown: bool,
}

fn name(c: CellClass) -> &'static str {
    match c {
        CellClass::Free => "free",
        CellClass::Unknown => "unknown",
        CellClass::Occupied => "occupied",
    }
}

impl ChangesPanel {
    /// Starts the search on a background thread.
    pub fn start(&mut self, doc: &Document, ctx: Option<egui::Context>) {
        let builder = doc.builder.clone();
        let (from, to) = (self.from.min(self.to), self.to.max(self.from));
        self.from = from;
        self.to = to;
        self.problem = None;
        let job = Job::spawn(ctx, 2, move |_, done| {
            let before = builder.build(from);
            done.store(1, std::sync::atomic::Ordering::Relaxed);
            let after = builder.build(to + 1);
            class_changes(&before, &after).map_err(|e| e.to_string())
        });
        self.job = Some((doc.built, job));
    }

    fn collect(&mut self, generation: u64, result: Result<Vec<ChangeCluster>, String>) {
        match result {
            Ok(c) => {
                self.found = Some(((generation, self.from, self.to), c));
                self.current = 0;
            }
            Err(e) => self.problem = Some(e),
        }
    }

    /// Waits for a running search (tests only).
    pub fn wait(&mut self) {
        if let Some((g, job)) = self.job.take() {
            let r = job
                .wait()
                .unwrap_or_else(|f| Err(format!("the search {f}")));
            self.collect(g, r);
        }
    }

    /// Draws the panel.
    pub fn ui(&mut self, ui: &mut egui::Ui, doc: &Document, frame: usize) -> Vec<Action> {
        let mut actions = Vec::new();
        if let Some((g, job)) = &self.job
            && let Some(r) = job.poll()
        {
            let g = *g;
            self.job = None;
            self.collect(g, r.unwrap_or_else(|f| Err(format!("the search {f}"))));
        }
        let last = doc.session.frames.len().saturating_sub(1);
        if !self.initialised {
            self.from = frame.saturating_sub(100);
            self.to = frame;
            self.initialised = true;
        }
        ui.heading("Changes");
        ui.label("Cells whose class flipped between the start and the end of a window of frames.");
        ui.horizontal(|ui| {
            let f = ui.label("from frame");
            ui.add(egui::DragValue::new(&mut self.from).range(0..=last))
                .labelled_by(f.id);
            let t = ui.label("to frame");
            ui.add(egui::DragValue::new(&mut self.to).range(0..=last))
                .labelled_by(t.id);
        });
        ui.horizontal(|ui| {
            if ui
                .button("window ends here")
                .on_hover_text("Set 'to' to the current frame")
                .clicked()
            {
                self.to = frame;
            }
            if ui
                .button("window starts here")
                .on_hover_text("Set 'from' to the current frame")
                .clicked()
            {
                self.from = frame;
            }
            if self.job.is_some() {
                ui.spinner();
            } else if ui.button("Find changes").clicked() {
                actions.push(Action::FindChanges);
            }
        });
        if let Some(p) = &self.problem {
            ui.colored_label(egui::Color32::from_rgb(255, 110, 90), p);
        }
        ui.checkbox(&mut self.include_unknown, "include cells that were or became unknown")
            .on_hover_text("Off: only occupied <-> free flips, which is what a moved object or a door leaves behind");
        let Some(((g, from, to), all)) = &self.found else {
            return actions;
        };
        let clusters: Vec<&ChangeCluster> = all
            .iter()
            .filter(|c| {
                self.include_unknown || (c.from != CellClass::Unknown && c.to != CellClass::Unknown)
            })
            .collect();
        self.current = self.current.min(clusters.len().saturating_sub(1));
        if *g != doc.built {
            ui.label("The parameters changed since this search; search again to update it.");
        }
        let cells: usize = clusters.iter().map(|c| c.cells.len()).sum();
        ui.label(format!(
            "frames {from}..={to}: {cells} cells in {} clusters",
            clusters.len()
        ));
        if clusters.is_empty() {
            return actions;
        }
        let spec = doc.builder.spec();
        let mut go = None;
        ui.horizontal(|ui| {
            if ui.button("Previous").clicked() {
                go = Some((self.current + clusters.len() - 1) % clusters.len());
            }
            if ui.button("Next").clicked() {
                go = Some((self.current + 1) % clusters.len());
            }
            ui.label(format!(
                "cluster {} of {}",
                self.current + 1,
                clusters.len()
            ));
        });
        egui::ScrollArea::vertical()
            .id_salt("change clusters")
            .show(ui, |ui| {
                for (k, c) in clusters.iter().enumerate() {
                    let (col, row) = c.centre();
                    let x = spec.origin.x + (col + 0.5) * spec.resolution;
                    let y = spec.origin.y + (row + 0.5) * spec.resolution;
                    let text = format!(
                        "{:>3}. {:>5} cells {} -> {} near ({x:.2}, {y:.2}) m",
                        k + 1,
                        c.cells.len(),
                        name(c.from),
                        name(c.to)
                    );
                    if ui
                        .selectable_label(k == self.current, RichText::new(text).monospace())
                        .clicked()
                    {
                        go = Some(k);
                    }
                }
            });
        if let Some(k) = go {
            self.current = k;
            let c = clusters[k];
            actions.push(Action::FocusCell(c.cells[c.cells.len() / 2]));
        }
        actions
    }
}
