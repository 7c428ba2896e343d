//! The inspector window: application state, the frame loop, and how panels' actions apply.
//!
//! Design decision: panels never reach into each other. Each draws from read-only data and
//! returns [`Action`]s; [`GridscopeApp::apply`] carries them out after the panels are drawn.
//! Fusion never runs in a UI frame: the rebuild worker replays the session on its own thread and
//! the window shows the newest grid it has been sent.

mod beam_panel;
mod cell_panel;
mod changes_panel;
mod compare;
mod grid_view;
mod jobs;
mod menu;
pub mod palette;
mod score_panel;
pub mod settings;
mod status;
mod sweep_panel;
mod timeline;
mod tuning;
mod worker;

pub use beam_panel::BeamPanel;
pub use cell_panel::CellPanel;
pub use changes_panel::ChangesPanel;
pub use compare::{ComparePanel, Layer, Pinned};
pub use grid_view::{GridView, ViewTransform};
pub use menu::FileMenu;
pub use score_panel::{Reference, ScorePanel};
pub use settings::{InspectorTab, Settings};
pub use sweep_panel::SweepPanel;
pub use timeline::Timeline;
pub use tuning::TuningPanel;

use crate::demo;
use crate::export::{ExportOptions, Provenance, write_bundle};
use crate::fusion::{MapBuilder, TouchRecord};
use crate::session::SessionStats;
use crate::{BeamRef, CellIndex, Grid, Params, Session};
use std::path::{Path, PathBuf};
use std::sync::Arc;
use std::time::Duration;
use worker::{Reply, Worker};

/// Something a panel asks the application to do.
#[derive(Clone, Debug, PartialEq)]
#[must_use]
pub enum Action {
    /// Show the grid after this frame.
    Seek(usize),
    /// Rebuild with these (already validated) parameters.
    SetParams(Params),
    /// Inspect beam `beam` of sensor `sensor` in the current frame.
    SelectBeam {
        /// Sensor index.
        sensor: usize,
        /// Beam index.
        beam: usize,
    },
    /// Inspect a cell.
    SelectCell(CellIndex),
    /// Drop the beam selection.
    ClearBeam,
    /// Open a session file (or a plan, which is simulated first).
    OpenSession(PathBuf),
    /// Open an embedded demo.
    OpenDemo(&'static str),
    /// Load a parameter profile.
    OpenParams(PathBuf),
    /// Save the current parameters.
    SaveParams(PathBuf),
    /// Export the current grid as a map bundle.
    ExportBundle {
        /// The bundle's prefix.
        prefix: PathBuf,
        /// Also write a Netpbm `.pgm`.
        pgm: bool,
    },
    /// Save the grid view as it appears on screen, as PNG.
    ExportView(PathBuf),
    /// Open whatever this file is, judged by its name.
    OpenAny(PathBuf),
    /// Go to a frame and inspect one of its beams.
    JumpTo {
        /// Frame index.
        frame: usize,
        /// Sensor index.
        sensor: usize,
        /// Beam index.
        beam: usize,
    },
    /// Centre the view on a cell and inspect it.
    FocusCell(CellIndex),
    /// Pin the current parameters as A.
    PinA,
    /// Drop A.
    UnpinA,
    /// Choose what the map shows.
    SetLayer(Layer),
    /// Load a reference map bundle.
    LoadReference(PathBuf),
    /// Load a greyscale image as reference.
    LoadReferenceImage(crate::export::ImageReference),
    /// Use the plan of an embedded demo as reference.
    UseDemoReference(&'static str),
    /// Start the sweep set up in the sweep panel.
    StartSweep,
    /// Start the change search set up in the changes panel.
    FindChanges,
    /// Show an inspector tab.
    ShowTab(InspectorTab),
}

/// An x axis for the panels' plots: labelled, with tick labels kept at 30-45 points apart so
/// that narrow side panels still show several of them.
pub(crate) fn plot_x_axis(label: &str) -> Vec<egui_plot::AxisHints<'static>> {
    vec![
        egui_plot::AxisHints::new_x()
            .label(label.to_string())
            .label_spacing(30.0..=45.0),
    ]
}

/// The grid to show: a rebuild's partial grid while one runs, else the current frame's.
fn displayed<'a>(partial: &'a Option<Grid>, shown: &'a Option<Shown>) -> Option<&'a Grid> {
    partial.as_ref().or(shown.as_ref().map(|s| &s.after))
}

/// Where the loaded session came from.
#[derive(Clone, Debug, PartialEq)]
pub enum Source {
    /// A file on disk.
    File(PathBuf),
    /// An embedded demo, by name.
    Demo(&'static str),
}

impl Source {
    /// How the source is shown.
    pub fn label(&self) -> String {
        match self {
            Source::File(p) => p.display().to_string(),
            Source::Demo(n) => format!("demo:{n}"),
        }
    }
}

/// A loaded session with the parameters currently applied to it.
pub struct Document {
    /// Where it came from.
    pub source: Source,
    /// The session.
    pub session: Arc<Session>,
    /// Its counts.
    pub stats: SessionStats,
    /// The parameters of the grid shown (always valid).
    pub params: Params,
    /// Where those parameters were loaded from or saved to, if anywhere.
    pub params_path: Option<PathBuf>,
    /// The builder for `params`.
    pub builder: Arc<MapBuilder>,
    /// Increases with every new builder; results of older builders are dropped.
    pub generation: u64,
}

/// The grids the worker delivered for the current generation.
pub struct Shown {
    /// Builder generation.
    pub generation: u64,
    /// Frame index.
    pub frame: usize,
    /// Grid after frames `0..frame`.
    pub before: Grid,
    /// Grid after frames `0..=frame`: what the view shows.
    pub after: Grid,
}

/// What is selected for inspection.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct Selection {
    /// (sensor, beam) inspected in the current frame.
    pub beam: Option<(usize, usize)>,
    /// A cell.
    pub cell: Option<CellIndex>,
}

/// The last thing the application has to say.
#[derive(Clone, Debug, PartialEq)]
pub enum Notice {
    /// Something worked.
    Info(String),
    /// Something was refused or failed; what was loaded is unchanged.
    Problem(String),
}

/// (generation, frame, sensor, beam) of a cached footprint probe.
type ProbeKey = (u64, usize, usize, usize);

/// The whole application.
pub struct GridscopeApp {
    /// Persistent choices.
    pub settings: Settings,
    /// The loaded session, if any.
    pub doc: Option<Document>,
    /// The frame shown.
    pub frame: usize,
    /// Grids for the frame shown.
    pub shown: Option<Shown>,
    /// A partial grid of a rebuild in progress.
    pub partial: Option<Grid>,
    /// Bumped whenever the displayed grid changes (drives texture uploads).
    pub grid_version: u64,
    /// What is inspected.
    pub selection: Selection,
    /// The last message.
    pub notice: Option<Notice>,
    /// The grid view.
    pub grid_view: GridView,
    /// The timeline.
    pub timeline: Timeline,
    /// The tuning panel.
    pub tuning: TuningPanel,
    /// The beam inspector.
    pub beam_panel: BeamPanel,
    /// The file menu and its dialogs.
    pub file_menu: FileMenu,
    /// The cell history.
    pub cell_panel: CellPanel,
    /// The A/B comparison.
    pub compare_panel: ComparePanel,
    /// Scores against the reference.
    pub score_panel: ScorePanel,
    /// Parameter sweeps.
    pub sweep_panel: SweepPanel,
    /// The change finder.
    pub changes_panel: ChangesPanel,
    /// Pinned parameters (A) and their map.
    pub pinned: Option<Pinned>,
    /// What the map shows.
    pub layer: Layer,
    /// The reference map, if loaded.
    pub reference: Option<Reference>,
    reference_versions: u64,
    repaint: Option<egui::Context>,
    worker: Worker,
    next_generation: u64,
    probe: Option<(ProbeKey, Vec<TouchRecord>)>,
}

impl GridscopeApp {
    /// An application with these settings and nothing loaded.
    pub fn new(settings: Settings) -> Self {
        GridscopeApp {
            settings,
            doc: None,
            frame: 0,
            shown: None,
            partial: None,
            grid_version: 0,
            selection: Selection::default(),
            notice: None,
            grid_view: GridView::default(),
            timeline: Timeline::default(),
            tuning: TuningPanel::default(),
            beam_panel: BeamPanel::default(),
            file_menu: FileMenu::default(),
            cell_panel: CellPanel::default(),
            compare_panel: ComparePanel::default(),
            score_panel: ScorePanel::default(),
            sweep_panel: SweepPanel::default(),
            changes_panel: ChangesPanel::default(),
            pinned: None,
            layer: Layer::Current,
            reference: None,
            reference_versions: 0,
            repaint: None,
            worker: Worker::spawn(),
            next_generation: 1,
            probe: None,
        }
    }

    /// An application showing the first embedded demo at its last frame.
    pub fn with_demo(settings: Settings) -> Self {
        let mut app = Self::new(settings);
        app.open_demo(demo::DEMOS[0].name);
        app
    }

    // ----- loading ---------------------------------------------------------------------------

    /// Opens a session file (or simulates a `*.plan.ron` first, or opens the embedded demo
    /// named by `demo:NAME`); on failure keeps what was loaded and says why.
    pub fn open_session(&mut self, path: &Path) {
        if let Some(name) = path.to_str().and_then(|s| s.strip_prefix("demo:")) {
            // `demo:NAME`, as the batch commands take it.
            match demo::find(name) {
                Ok(d) => self.open_demo(d.name),
                Err(e) => self.problem(e.to_string()),
            }
            return;
        }
        let loaded = if path.to_string_lossy().ends_with(".plan.ron") {
            crate::sim::FloorPlan::load(path).and_then(|plan| crate::sim::simulate(&plan))
        } else {
            Session::load(path)
        };
        match loaded {
            Ok(session) => {
                let params = self
                    .doc
                    .as_ref()
                    .map(|d| d.params.clone())
                    .unwrap_or_default();
                let params_path = self.doc.as_ref().and_then(|d| d.params_path.clone());
                if self.install(
                    Source::File(path.to_path_buf()),
                    session,
                    params,
                    params_path,
                ) {
                    settings::remember(&mut self.settings.recent_sessions, path);
                }
            }
            Err(e) => self.problem(e.to_string()),
        }
    }

    /// Opens an embedded demo with its suggested parameters.
    pub fn open_demo(&mut self, name: &'static str) {
        let loaded = demo::session(name).and_then(|s| Ok((s, demo::params(name)?)));
        match loaded {
            Ok((session, params)) => {
                self.install(Source::Demo(name), session, params, None);
            }
            Err(e) => self.problem(e.to_string()),
        }
    }

    /// Makes `session` the document if a builder can be made for it. Returns success.
    fn install(
        &mut self,
        source: Source,
        session: Session,
        params: Params,
        params_path: Option<PathBuf>,
    ) -> bool {
        let session = Arc::new(session);
        match MapBuilder::new(session.clone(), params.clone()) {
            Ok(builder) => {
                let generation = self.bump_generation();
                let last = session.frames.len().saturating_sub(1);
                self.notice = Some(Notice::Info(format!(
                    "opened {} ({} frames)",
                    source.label(),
                    session.frames.len()
                )));
                self.doc = Some(Document {
                    stats: session.stats(),
                    source,
                    session,
                    params,
                    params_path,
                    builder: Arc::new(builder),
                    generation,
                });
                self.frame = last;
                self.shown = None;
                self.partial = None;
                self.selection = Selection::default();
                self.grid_view.request_fit();
                self.tuning.reset();
                self.timeline.stop();
                self.pinned = None;
                self.layer = Layer::Current;
                self.reference = None;
                self.changes_panel = ChangesPanel::default();
                self.sweep_panel = SweepPanel::default();
                if let Some(Source::Demo(name)) = self.doc.as_ref().map(|d| d.source.clone()) {
                    self.use_demo_reference(name);
                }
                self.request_grid(true);
                true
            }
            Err(e) => {
                self.problem(e.for_input(&source.label()).to_string());
                false
            }
        }
    }

    /// Loads a parameter profile (or a demo's, `demo:NAME`) and rebuilds with it.
    pub fn open_params(&mut self, path: &Path) {
        let demo = path.to_str().and_then(|s| s.strip_prefix("demo:"));
        let loaded = match demo {
            Some(name) => demo::params(name),
            None => Params::load(path),
        };
        match loaded {
            Ok(p) => {
                if self.set_params(p) {
                    if let Some(d) = &mut self.doc {
                        d.params_path = demo.is_none().then(|| path.to_path_buf());
                    }
                    if demo.is_none() {
                        settings::remember(&mut self.settings.recent_params, path);
                    }
                    self.notice = Some(Notice::Info(format!("parameters from {}", path.display())));
                }
            }
            Err(e) => self.problem(e.to_string()),
        }
    }

    /// Applies new parameters: a new builder and a rebuild in the background. Returns success;
    /// on failure the old parameters stay.
    pub fn set_params(&mut self, params: Params) -> bool {
        let Some(doc) = &self.doc else {
            self.problem("open a session before setting parameters".into());
            return false;
        };
        match MapBuilder::new(doc.session.clone(), params.clone()) {
            Ok(builder) => {
                let generation = self.bump_generation();
                let doc = self.doc.as_mut().expect("checked above");
                doc.params = params;
                doc.builder = Arc::new(builder);
                doc.generation = generation;
                self.tuning.reset();
                self.request_grid(true);
                true
            }
            Err(e) => {
                self.problem(format!("parameters not applied: {e}"));
                false
            }
        }
    }

    fn bump_generation(&mut self) -> u64 {
        let g = self.next_generation;
        self.next_generation += 1;
        g
    }

    fn problem(&mut self, message: String) {
        self.notice = Some(Notice::Problem(message));
    }

    /// Asks the worker for the current frame (with the builder when it is new).
    fn request_grid(&mut self, new_builder: bool) {
        if let Some(doc) = &self.doc {
            let builder = new_builder.then(|| doc.builder.clone());
            self.worker.request(doc.generation, builder, self.frame);
        }
    }

    /// Moves to a frame (clipped to the session).
    pub fn seek(&mut self, frame: usize) {
        let Some(doc) = &self.doc else { return };
        let last = doc.session.frames.len().saturating_sub(1);
        self.frame = frame.min(last);
        self.request_grid(false);
        if let Some(p) = &mut self.pinned {
            p.seek(self.frame);
        }
    }

    /// Pins the current parameters as A (its map rebuilds in the background).
    pub fn pin(&mut self) {
        if let Some(doc) = &self.doc {
            self.pinned = Some(Pinned::pin(doc, self.frame, self.repaint.as_ref()));
        }
    }

    fn set_reference(&mut self, label: String, grid: Grid) {
        self.reference_versions += 1;
        self.reference = Some(Reference {
            label,
            grid: Arc::new(grid),
            version: self.reference_versions,
        });
    }

    /// Uses an embedded demo's plan as the reference.
    pub fn use_demo_reference(&mut self, name: &'static str) {
        match demo::reference(name) {
            Ok(g) => self.set_reference(format!("plan of demo {name}"), g),
            Err(e) => self.problem(e.to_string()),
        }
    }

    /// Loads a reference map bundle.
    pub fn load_reference(&mut self, path: &Path) {
        match crate::export::load_bundle(path, crate::grid::DEFAULT_CELL_BUDGET) {
            Ok(b) => {
                self.notice = Some(Notice::Info(format!("reference: {}", b.prefix.display())));
                self.set_reference(b.prefix.display().to_string(), b.grid)
            }
            Err(e) => self.problem(e.to_string()),
        }
    }

    /// Loads a greyscale image as the reference.
    pub fn load_reference_image(&mut self, r: &crate::export::ImageReference) {
        match crate::export::load_image_reference(r, crate::grid::DEFAULT_CELL_BUDGET) {
            Ok(g) => {
                self.notice = Some(Notice::Info(format!("reference: {}", r.path.display())));
                self.set_reference(r.path.display().to_string(), g)
            }
            Err(e) => self.problem(e.to_string()),
        }
    }

    /// Waits for every background answer in flight (tests and batch use only).
    pub fn wait_for_everything(&mut self) {
        self.wait_for_worker();
        if let Some(p) = &mut self.pinned
            && p.drain(true)
        {
            self.grid_version += 1;
        }
        if let Some(doc) = &self.doc {
            self.cell_panel.ensure(doc, self.selection.cell, None);
        }
        self.cell_panel.wait();
        self.changes_panel.wait();
        if let Some(doc) = &self.doc {
            let base = doc.params.clone();
            self.sweep_panel.wait(&base);
        }
    }

    // ----- worker results --------------------------------------------------------------------

    fn take_replies(&mut self, replies: Vec<Reply>) {
        let Some(generation) = self.doc.as_ref().map(|d| d.generation) else {
            return;
        };
        for r in replies {
            match r {
                Reply::Progress {
                    generation: g,
                    partial: Some(grid),
                    ..
                } if g == generation => {
                    self.partial = Some(grid);
                    self.grid_version += 1;
                }
                Reply::Progress { .. } => {}
                Reply::Ready {
                    generation: g,
                    frame,
                    before,
                    after,
                } if g == generation => {
                    self.shown = Some(Shown {
                        generation: g,
                        frame,
                        before,
                        after,
                    });
                    self.partial = None;
                    self.grid_version += 1;
                }
                Reply::Ready { .. } => {}
            }
        }
    }

    /// Blocks until the worker has delivered the current frame (tests and batch use only).
    pub fn wait_for_worker(&mut self) {
        let replies = self.worker.wait(Duration::from_secs(120));
        self.take_replies(replies);
    }

    /// Whether a rebuild or seek is still running.
    pub fn busy(&self) -> bool {
        self.worker.busy()
    }

    /// Rebuild progress (frames done, frames needed) of the running job.
    pub fn progress(&self) -> Option<(usize, usize)> {
        self.worker.progress
    }

    /// The grid to display: the current frame's, or a partial one while rebuilding.
    pub fn display_grid(&self) -> Option<&Grid> {
        displayed(&self.partial, &self.shown)
    }

    /// The selected beam as a reference into the session, in the frame shown.
    pub fn selected_beam(&self) -> Option<BeamRef> {
        let (sensor, beam) = self.selection.beam?;
        Some(BeamRef {
            frame: self.frame,
            sensor,
            beam,
        })
    }

    /// The selected beam's footprint with before/after values, once the frame's grids are in.
    pub fn footprint_records(&mut self) -> &[TouchRecord] {
        let key = match (&self.doc, &self.shown, self.selection.beam) {
            (Some(d), Some(s), Some((sensor, beam)))
                if s.generation == d.generation && s.frame == self.frame =>
            {
                Some((d.generation, self.frame, sensor, beam))
            }
            _ => None,
        };
        let Some(key) = key else {
            return &[];
        };
        if self.probe.as_ref().map(|p| p.0) != Some(key) {
            let d = self.doc.as_ref().expect("key implies a document");
            let s = self.shown.as_ref().expect("key implies grids");
            let records = d.builder.probe(
                &s.before,
                BeamRef {
                    frame: key.1,
                    sensor: key.2,
                    beam: key.3,
                },
            );
            self.probe = Some((key, records));
        }
        &self.probe.as_ref().expect("just filled").1
    }

    // ----- actions ---------------------------------------------------------------------------

    /// Carries out one action.
    pub fn apply(&mut self, action: Action) {
        match action {
            Action::Seek(f) => self.seek(f),
            Action::SetParams(p) => {
                self.set_params(p);
            }
            Action::SelectBeam { sensor, beam } => {
                self.selection.beam = Some((sensor, beam));
                if self.settings.inspector_tab == InspectorTab::Cell {
                    self.settings.inspector_tab = InspectorTab::Beam;
                }
            }
            Action::ClearBeam => self.selection.beam = None,
            Action::SelectCell(c) => {
                self.selection.cell = Some(c);
                self.settings.inspector_tab = InspectorTab::Cell;
            }
            Action::OpenSession(p) => self.open_session(&p),
            Action::OpenDemo(n) => self.open_demo(n),
            Action::OpenParams(p) => self.open_params(&p),
            Action::SaveParams(p) => self.save_params(&p),
            Action::ExportBundle { prefix, pgm } => self.export_bundle(&prefix, pgm),
            Action::ExportView(p) => self.grid_view.request_export(p),
            Action::OpenAny(p) => self.open_any(&p),
            Action::JumpTo {
                frame,
                sensor,
                beam,
            } => {
                self.seek(frame);
                self.selection.beam = Some((sensor, beam));
            }
            Action::FocusCell(c) => {
                self.selection.cell = Some(c);
                if let Some(doc) = &self.doc {
                    self.grid_view.centre = doc.builder.spec().centre(c);
                }
            }
            Action::PinA => self.pin(),
            Action::UnpinA => {
                self.pinned = None;
                self.layer = Layer::Current;
                self.grid_version += 1;
            }
            Action::SetLayer(l) => {
                self.layer = l;
                self.grid_version += 1;
            }
            Action::LoadReference(p) => self.load_reference(&p),
            Action::LoadReferenceImage(r) => self.load_reference_image(&r),
            Action::UseDemoReference(n) => self.use_demo_reference(n),
            Action::StartSweep => {
                if let (Some(doc), Some(r)) = (&self.doc, &self.reference) {
                    self.sweep_panel
                        .start(doc, r.grid.clone(), self.frame, self.repaint.clone());
                }
            }
            Action::FindChanges => {
                if let Some(doc) = &self.doc {
                    self.changes_panel.start(doc, self.repaint.clone());
                }
            }
            Action::ShowTab(t) => self.settings.inspector_tab = t,
        }
    }

    /// Opens a file by what its name says it is.
    pub fn open_any(&mut self, path: &Path) {
        let name = path.to_string_lossy();
        if name.ends_with(".params.ron") {
            self.open_params(path);
        } else {
            self.open_session(path);
        }
    }

    /// Saves the parameters applied now.
    pub fn save_params(&mut self, path: &Path) {
        let Some(doc) = &mut self.doc else { return };
        let result = crate::io::atomic::write_all_atomically(&[(
            path.to_path_buf(),
            doc.params.to_ron_string().into_bytes(),
        )]);
        match result {
            Ok(()) => {
                doc.params_path = Some(path.to_path_buf());
                settings::remember(&mut self.settings.recent_params, path);
                self.notice = Some(Notice::Info(format!(
                    "saved parameters to {}",
                    path.display()
                )));
            }
            Err(e) => self.problem(e.to_string()),
        }
    }

    /// Writes the grid shown (after the current frame) as a map bundle with its provenance.
    pub fn export_bundle(&mut self, prefix: &Path, pgm: bool) {
        let (Some(doc), Some(shown)) = (&self.doc, &self.shown) else {
            self.problem("nothing to export yet: the map is still being built".into());
            return;
        };
        let provenance = Provenance {
            params: doc.params.clone(),
            session: doc.session.name.clone(),
            frames: shown.frame + 1,
        };
        let prefix = crate::export::bundle_prefix(prefix);
        match write_bundle(
            &prefix,
            &shown.after,
            Some(&provenance),
            ExportOptions { pgm },
        ) {
            Ok(files) => {
                self.notice = Some(Notice::Info(format!(
                    "exported {} files to {}.*",
                    files.len(),
                    prefix.display()
                )))
            }
            Err(e) => self.problem(e.to_string()),
        }
    }

    // ----- the frame loop ----------------------------------------------------------------------

    /// Draws the whole window into `ui` and applies what the panels asked for.
    pub fn ui_root(&mut self, ui: &mut egui::Ui) {
        let ctx = ui.ctx().clone();
        if self.repaint.is_none() {
            self.repaint = Some(ctx.clone());
        }
        self.worker.set_repaint_context(&ctx);
        let replies = self.worker.drain();
        self.take_replies(replies);
        if let Some(p) = &mut self.pinned
            && p.drain(false)
            && self.layer != Layer::Current
        {
            self.grid_version += 1;
        }
        if let Some(message) = self.grid_view.take_export_result() {
            self.notice = Some(message);
        }
        if let Some(doc) = &self.doc {
            self.cell_panel
                .ensure(doc, self.selection.cell, Some(ctx.clone()));
        }

        let mut actions: Vec<Action> = Vec::new();
        let dropped: Vec<PathBuf> = ctx.input(|i| {
            i.raw
                .dropped_files
                .iter()
                .map(|f| f.path().to_path_buf())
                .collect()
        });
        actions.extend(dropped.into_iter().map(Action::OpenAny));

        egui::Panel::top("menu_bar").show(ui, |ui| {
            actions.extend(self.file_menu.ui(ui, &mut self.settings, self.doc.as_ref()));
        });
        egui::Panel::bottom("status_bar").show(ui, |ui| {
            status::status_ui(ui, self);
        });
        if let Some(doc) = &self.doc {
            egui::Panel::bottom("timeline").show(ui, |ui| {
                actions.extend(self.timeline.ui(
                    ui,
                    doc,
                    self.frame,
                    &mut self.settings.play_speed,
                ));
            });
        }
        let reading = self
            .selected_beam()
            .and_then(|b| Some((b.sensor, self.doc.as_ref()?.builder.beam_ray(b)?.reading)));
        if self.settings.show_tuning
            && let Some(doc) = &self.doc
        {
            egui::Panel::left("tuning")
                .resizable(true)
                .default_size(330.0)
                .show(ui, |ui| {
                    actions.extend(self.tuning.ui(ui, doc, reading, self.frame));
                });
        }
        let records = self.footprint_records().to_vec();
        if self.settings.show_inspector && self.doc.is_some() {
            egui::Panel::right("inspector")
                .resizable(true)
                .default_size(470.0)
                .show(ui, |ui| {
                    actions.extend(self.inspector_ui(ui, &records));
                });
        }
        egui::CentralPanel::default().show(ui, |ui| {
            let current = displayed(&self.partial, &self.shown);
            let pinned = self
                .pinned
                .as_ref()
                .and_then(|p| p.shown.as_ref().map(|s| (&s.1, p.builder.bounds())));
            let own = self
                .doc
                .as_ref()
                .map(|d| d.builder.bounds())
                .unwrap_or(crate::fusion::CellBounds { lo: -1.0, hi: 1.0 });
            let (grid, clamp, compare_with) = match (self.layer, pinned) {
                (Layer::Pinned, Some((a, bounds))) => (Some(a), bounds, None),
                (Layer::Difference, Some((a, _))) => (current, own, Some(a)),
                _ => (current, own, None),
            };
            actions.extend(self.grid_view.ui(
                ui,
                grid_view::ViewData {
                    doc: self.doc.as_ref(),
                    grid,
                    grid_version: self.grid_version,
                    clamp,
                    compare_with,
                    layer: self.layer,
                    frame: self.frame,
                    settings: &self.settings,
                    selection: &self.selection,
                    footprint: &records,
                },
            ));
        });
        for a in actions {
            self.apply(a);
        }
        if self.worker.busy() || self.pinned.as_ref().is_some_and(|p| p.busy()) {
            ctx.request_repaint_after(Duration::from_millis(100));
        }
    }

    /// The right-hand inspector: tabs for beam, cell, compare, score, sweep and changes.
    fn inspector_ui(&mut self, ui: &mut egui::Ui, records: &[TouchRecord]) -> Vec<Action> {
        let mut actions = Vec::new();
        let Some(doc) = &self.doc else { return actions };
        ui.horizontal_wrapped(|ui| {
            for t in InspectorTab::ALL {
                if ui
                    .selectable_label(self.settings.inspector_tab == t, t.label())
                    .clicked()
                {
                    actions.push(Action::ShowTab(t));
                }
            }
        });
        ui.separator();
        let current = self.shown.as_ref().map(|s| (&s.after, self.grid_version));
        match self.settings.inspector_tab {
            InspectorTab::Beam => actions.extend(self.beam_panel.ui(
                ui,
                doc,
                self.frame,
                self.selection.beam,
                records,
            )),
            InspectorTab::Cell => {
                actions.extend(self.cell_panel.ui(ui, doc, self.frame, self.selection.cell))
            }
            InspectorTab::Compare => actions.extend(self.compare_panel.ui(
                ui,
                doc,
                self.pinned.as_ref(),
                self.layer,
                current,
            )),
            InspectorTab::Score => {
                let mut maps: Vec<(char, &Grid, u64)> = Vec::new();
                if let Some((g, v)) = current {
                    maps.push(('B', g, v));
                }
                if let Some(p) = &self.pinned
                    && let Some((_, g)) = &p.shown
                {
                    maps.push(('A', g, p.version + (1 << 40)));
                }
                actions.extend(self.score_panel.ui(ui, doc, self.reference.as_ref(), &maps));
            }
            InspectorTab::Sweep => {
                let base = doc.params.clone();
                actions.extend(
                    self.sweep_panel
                        .ui(ui, doc, self.reference.is_some(), &base),
                );
            }
            InspectorTab::Changes => actions.extend(self.changes_panel.ui(ui, doc, self.frame)),
        }
        actions
    }
}

/// The eframe wrapper: persistence and the frame callback.
pub struct EframeApp {
    /// The application.
    pub app: GridscopeApp,
}

impl eframe::App for EframeApp {
    fn ui(&mut self, ui: &mut egui::Ui, _frame: &mut eframe::Frame) {
        self.app.ui_root(ui);
    }

    fn save(&mut self, storage: &mut dyn eframe::Storage) {
        eframe::set_value(storage, settings::SETTINGS_KEY, &self.app.settings);
    }
}

/// What the window opens on.
#[derive(Clone, Debug, Default)]
pub struct Launch {
    /// A session (or plan) file; the first demo when `None`.
    pub session: Option<PathBuf>,
    /// A parameter profile to apply.
    pub params: Option<PathBuf>,
}

/// Opens the window and runs until it is closed.
pub fn run(launch: Launch) -> Result<(), String> {
    let options = eframe::NativeOptions {
        viewport: egui::ViewportBuilder::default()
            .with_title("gridscope")
            .with_inner_size([1480.0, 920.0])
            .with_min_inner_size([900.0, 600.0])
            .with_drag_and_drop(true),
        renderer: eframe::Renderer::Glow,
        ..Default::default()
    };
    eframe::run_native(
        "gridscope",
        options,
        Box::new(move |cc| {
            let settings: Settings = cc
                .storage
                .and_then(|s| eframe::get_value(s, settings::SETTINGS_KEY))
                .unwrap_or_default();
            let mut app = match &launch.session {
                Some(path) => {
                    let mut app = GridscopeApp::new(settings);
                    app.open_session(path);
                    if app.doc.is_none() {
                        // Say why, on top of the demo, instead of an empty window.
                        let notice = app.notice.take();
                        app.open_demo(demo::DEMOS[0].name);
                        app.notice = notice;
                    }
                    app
                }
                None => GridscopeApp::with_demo(settings),
            };
            if let Some(p) = &launch.params {
                app.open_params(p);
            }
            Ok(Box::new(EframeApp { app }))
        }),
    )
    .map_err(|e| e.to_string())
}
