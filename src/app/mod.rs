//! The inspector window: application state and the frame loop.
//!
//! Design decision: nothing heavy runs in a UI frame. The rebuild worker makes builders and
//! replays the session; file reads and writes, scores, histories, searches and sweeps run as
//! background jobs; pictures of the grid are made by a render thread. A frame drains what they
//! finished, draws the panels, and applies the [`Action`]s the panels returned
//! (in `actions.rs`); the document's files are handled in `document.rs`.

mod actions;
mod beam_panel;
pub mod bench;
mod cell_panel;
mod changes_panel;
mod compare;
mod dialogs;
mod document;
mod grid_view;
mod jobs;
mod keys;
mod map;
mod measure;
mod menu;
mod overlay;
pub mod palette;
mod pictures;
mod poses_panel;
mod render;
mod score_panel;
pub mod settings;
mod status;
mod sweep_panel;
mod timeline;
mod tuning;
mod worker;

pub use actions::{Action, Edits};
pub use beam_panel::BeamPanel;
pub use cell_panel::{CellPanel, history_points};
pub use changes_panel::ChangesPanel;
pub use compare::{ComparePanel, Layer, Pinned};
pub use dialogs::{Dialog, SHORTCUTS};
pub use document::{Document, Restore, Shown, Source};
pub use grid_view::{GridView, Measure, ViewTransform};
pub use menu::FileMenu;
pub use poses_panel::PosesPanel;
pub use score_panel::{Reference, ScorePanel};
pub use settings::{InspectorTab, LastSession, Settings};
pub use sweep_panel::SweepPanel;
pub use timeline::Timeline;
pub use tuning::{TuningPanel, model_plot_bounds};

use crate::fusion::TouchRecord;
use crate::replay::DEFAULT_SNAPSHOT_BUDGET;
use crate::{CellIndex, Grid};
use dialogs::Answer;
use std::path::PathBuf;
use std::sync::Arc;
use std::time::Duration;
use worker::Worker;

/// Memory for the snapshots of the map's replay, bytes.
pub const SNAPSHOT_BUDGET: usize = DEFAULT_SNAPSHOT_BUDGET;

/// Memory for the snapshots of the pinned map A's replay, bytes.
pub const PINNED_SNAPSHOT_BUDGET: usize = DEFAULT_SNAPSHOT_BUDGET / 4;

/// An x axis for the panels' plots: labelled, with tick labels kept at 30-45 points apart so
/// that narrow side panels still show several of them.
pub(crate) fn plot_x_axis(label: &str) -> Vec<egui_plot::AxisHints<'static>> {
    vec![
        egui_plot::AxisHints::new_x()
            .label(label.to_string())
            .label_spacing(30.0..=45.0),
    ]
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
    /// A coarse preview of a rebuild in progress.
    pub partial: Option<Arc<Grid>>,
    /// Bumped whenever the displayed grid changes (drives the pictures of the map).
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
    /// The menus and their file prompt.
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
    /// Agreement, mount and clock, re-alignment.
    pub poses_panel: PosesPanel,
    /// Pinned parameters (A) and their map.
    pub pinned: Option<Pinned>,
    /// What the map shows.
    pub layer: Layer,
    /// The reference map, if loaded.
    pub reference: Option<Reference>,
    /// The open dialog, if any.
    pub dialog: Option<Dialog>,
    /// Undo and redo of parameter edits.
    pub edits: Edits,
    tasks: Vec<document::Task>,
    reference_versions: u64,
    repaint: Option<egui::Context>,
    worker: Worker,
    /// The worker may have lost its replay (after a failure): send it the builder again.
    resend_builder: bool,
    next_generation: u64,
    probe: Option<(ProbeKey, Vec<TouchRecord>)>,
    /// The user chose to close without saving.
    allow_close: bool,
    title: String,
    /// Parameters to apply once the session being opened at start is there.
    pending_params: Option<PendingParams>,
}

/// Parameters waiting for the first session to open.
enum PendingParams {
    /// As they were when the window last closed.
    Restored(Box<crate::Params>),
    /// From a profile named on the command line.
    File(PathBuf),
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
            poses_panel: PosesPanel::default(),
            pinned: None,
            layer: Layer::Current,
            reference: None,
            dialog: None,
            edits: Edits::default(),
            tasks: Vec::new(),
            reference_versions: 0,
            repaint: None,
            worker: Worker::spawn(SNAPSHOT_BUDGET),
            resend_builder: false,
            next_generation: 1,
            probe: None,
            allow_close: false,
            title: String::new(),
            pending_params: None,
        }
    }

    /// An application opening the first embedded demo at its last frame (in the background;
    /// [`GridscopeApp::wait_for_everything`] waits for it).
    pub fn with_demo(settings: Settings) -> Self {
        let mut app = Self::new(settings);
        app.open_demo(crate::demo::DEMOS[0].name);
        app
    }

    /// An application that opens what the user had open last (its session, parameters, frame
    /// and view), or the first demo when there is nothing to restore.
    pub fn restoring(settings: Settings) -> Self {
        let last = settings.last.clone();
        let mut app = Self::new(settings);
        match last {
            Some(l) => {
                app.open_session_restoring(
                    &PathBuf::from(&l.session),
                    Some(Restore {
                        frame: l.frame,
                        view: l.view,
                    }),
                );
                app.pending_params = Some(PendingParams::Restored(Box::new(l.params)));
            }
            None => app.open_demo(crate::demo::DEMOS[0].name),
        }
        app
    }

    fn bump_generation(&mut self) -> u64 {
        let g = self.next_generation;
        self.next_generation += 1;
        g
    }

    /// Applies parameters that waited for the first session; returns whether any were.
    fn take_pending_params(&mut self) -> bool {
        if self.doc.is_none() {
            return false;
        }
        match self.pending_params.take() {
            Some(PendingParams::Restored(p)) => self.set_params(*p),
            Some(PendingParams::File(path)) => {
                self.open_params(&path);
                true
            }
            None => false,
        }
    }

    /// Applies a profile once the session being opened is there (a profile named on the
    /// command line with a session).
    pub fn open_params_after_open(&mut self, path: &std::path::Path) {
        self.pending_params = Some(PendingParams::File(path.to_path_buf()));
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
        self.take_tasks();
        self.take_pending_params();
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
        self.window_title(&ctx);

        let mut actions: Vec<Action> = Vec::new();
        actions.extend(self.shortcuts(&ctx));
        self.close_request(&ctx);
        let dropped: Vec<PathBuf> = ctx.input(|i| {
            i.raw
                .dropped_files
                .iter()
                .map(|f| f.path().to_path_buf())
                .filter(|p| !p.as_os_str().is_empty())
                .collect()
        });
        actions.extend(dropped.into_iter().map(Action::OpenAny));

        egui::Panel::top("menu_bar").show(ui, |ui| {
            actions.extend(self.file_menu.ui(
                ui,
                &mut self.settings,
                self.doc.as_ref(),
                &self.edits,
                &mut self.grid_view.measure,
            ));
        });
        egui::Panel::bottom("status_bar").show(ui, |ui| {
            status::status_ui(ui, self);
        });
        if let Some(doc) = &self.doc {
            egui::Panel::bottom("timeline").show(ui, |ui| {
                self.poses_panel.poll();
                actions.extend(self.timeline.ui(
                    ui,
                    doc,
                    self.frame,
                    &mut self.settings.play_speed,
                    self.poses_panel.strip(doc),
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
            let view = view_data(
                self.doc.as_ref(),
                self.partial
                    .as_ref()
                    .or(self.shown.as_ref().map(|s| &s.after)),
                self.pinned.as_ref(),
                self.layer,
                self.grid_version,
                self.frame,
                &self.settings,
                &self.selection,
                &records,
            );
            actions.extend(self.grid_view.ui(ui, view));
        });
        if let Some(d) = &mut self.dialog {
            let last = self
                .doc
                .as_ref()
                .map_or(0, |d| d.session.frames.len().saturating_sub(1));
            match dialogs::dialog_ui(&ctx, d, last) {
                Answer::Open => {}
                Answer::Close => self.dialog = None,
                Answer::Do(a) => {
                    self.dialog = None;
                    actions.push(*a);
                }
                Answer::SaveAndClose => {
                    self.dialog = None;
                    self.save_before_closing(&ctx);
                }
                Answer::CloseWindow => {
                    self.dialog = None;
                    self.allow_close = true;
                    ctx.send_viewport_cmd(egui::ViewportCommand::Close);
                }
            }
        }
        for a in actions {
            self.apply(a);
        }
        if let Some(purpose) = self.file_menu.close_after_save
            && self.tasks.is_empty()
            && self.file_menu.prompt.is_none()
        {
            let still = self.doc.as_ref().is_some_and(|d| match purpose {
                menu::Purpose::SaveSession => d.run_unsaved(),
                _ => d.unsaved(),
            });
            if still {
                // Cancelled, or the save failed (the status line says why): stay open.
                self.file_menu.close_after_save = None;
            } else {
                self.save_before_closing(&ctx);
            }
        }
        let waiting = self.worker.busy()
            || !self.tasks.is_empty()
            || self.pinned.as_ref().is_some_and(|p| p.busy())
            || self.poses_panel.busy();
        if waiting {
            ctx.request_repaint_after(Duration::from_millis(100));
        }
    }

    /// The right-hand inspector: tabs for beam, cell, compare, score, sweep, changes and poses.
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
                self.shown.as_ref(),
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
                let mut maps: Vec<(char, Arc<Grid>, u64)> = Vec::new();
                if let Some((g, v)) = current {
                    maps.push(('B', g.clone(), v));
                }
                if let Some(p) = &self.pinned
                    && let Some((_, g)) = &p.shown
                {
                    maps.push(('A', g.clone(), p.version + (1 << 40)));
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
            InspectorTab::Poses => actions.extend(self.poses_panel.ui(ui, doc)),
        }
        actions
    }

    /// What to remember about this run for the next start.
    pub fn last_session(&self) -> Option<LastSession> {
        let doc = self.doc.as_ref()?;
        Some(LastSession {
            session: doc.source.label(),
            params: doc.params.clone(),
            frame: self.frame,
            view: Some((self.grid_view.centre, self.grid_view.scale)),
        })
    }
}

/// What the map view draws this frame.
#[allow(clippy::too_many_arguments)]
fn view_data<'a>(
    doc: Option<&'a Document>,
    current: Option<&'a Arc<Grid>>,
    pinned: Option<&'a Pinned>,
    layer: Layer,
    grid_version: u64,
    frame: usize,
    settings: &'a Settings,
    selection: &'a Selection,
    footprint: &'a [TouchRecord],
) -> grid_view::ViewData<'a> {
    let own = doc.map(|d| d.builder.bounds());
    let pinned = pinned.and_then(|p| p.shown.as_ref().map(|s| (&s.1, p.builder.bounds())));
    let (grid, clamp, compare_with) = match (layer, pinned) {
        (Layer::Pinned, Some((a, bounds))) => (Some(a), Some(bounds), None),
        (Layer::Difference, Some((a, _))) => (current, own, Some(a)),
        _ => (current, own, None),
    };
    grid_view::ViewData {
        doc,
        grid,
        grid_version,
        clamp: clamp.unwrap_or(crate::CellBounds { lo: -1.0, hi: 1.0 }),
        compare_with,
        layer,
        frame,
        settings,
        selection,
        footprint,
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
        if let Some(last) = self.app.last_session() {
            self.app.settings.last = Some(last);
        }
        eframe::set_value(storage, settings::SETTINGS_KEY, &self.app.settings);
    }
}

/// What the window opens on.
#[derive(Clone, Debug, Default)]
pub struct Launch {
    /// A session (or plan) file; what was open last (or the first demo) when `None`.
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
                    app
                }
                None => GridscopeApp::restoring(settings),
            };
            if let Some(p) = &launch.params {
                app.open_params_after_open(p);
            }
            Ok(Box::new(EframeApp { app }))
        }),
    )
    .map_err(|e| e.to_string())
}
