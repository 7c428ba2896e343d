//! The document: the loaded session with the parameters applied to it, and every file the
//! window reads or writes (sessions, plans, profiles, references, map bundles, histories, runs
//! saved with re-aligned poses).
//!
//! Design decision: every read and write runs as a background task with a label for the status
//! line; a UI frame only starts tasks and applies finished ones. A task that fails or panics
//! leaves the document as it was and says why.

use super::jobs::Job;
use super::score_panel::Reference;
use super::{GridscopeApp, Notice, Selection};
use crate::demo;
use crate::export::{ExportOptions, Provenance, write_bundle};
use crate::fusion::MapBuilder;
use crate::grid::{DEFAULT_CELL_BUDGET, Grid};
use crate::io::atomic::write_all_atomically;
use crate::params::Params;
use crate::session::{Session, SessionStats};
use std::path::{Path, PathBuf};
use std::sync::Arc;

/// Where the loaded session came from.
#[derive(Clone, Debug, PartialEq)]
pub enum Source {
    /// A file on disk.
    File(PathBuf),
    /// An embedded demo, by name.
    Demo(&'static str),
}

impl Source {
    /// How the source is shown (and given back to `open_session`).
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
    /// The session (its poses re-aligned, if the user chose so).
    pub session: Arc<Session>,
    /// The session as last opened or saved (for the "unsaved" mark of re-aligned poses).
    pub saved_session: Arc<Session>,
    /// Its counts.
    pub stats: SessionStats,
    /// The parameters asked for (always valid); their builder may still be in the making.
    pub params: Params,
    /// Where those parameters were loaded from or saved to, if anywhere.
    pub params_path: Option<PathBuf>,
    /// The parameters as last loaded or saved (for the "unsaved" mark).
    pub saved_params: Params,
    /// The newest builder made, and the generation it belongs to.
    pub builder: Arc<MapBuilder>,
    /// Generation of `builder`.
    pub built: u64,
    /// Generation of `params` (ahead of `built` while a builder is being made).
    pub generation: u64,
}

impl Document {
    /// Whether the parameters differ from the ones last loaded or saved.
    pub fn unsaved(&self) -> bool {
        self.params != self.saved_params
    }

    /// Whether the run's poses were replaced since it was opened or saved.
    pub fn run_unsaved(&self) -> bool {
        !Arc::ptr_eq(&self.session, &self.saved_session)
    }
}

/// The grids the worker delivered.
pub struct Shown {
    /// Generation.
    pub generation: u64,
    /// Frame index.
    pub frame: usize,
    /// Grid after frames `0..frame`.
    pub before: Arc<Grid>,
    /// Grid after frames `0..=frame`: what the view shows.
    pub after: Arc<Grid>,
    /// The builder that made them (its parameters are the ones an export records).
    pub builder: Arc<MapBuilder>,
}

/// A session opened in the background, ready to become the document.
pub struct Loaded {
    source: Source,
    session: Arc<Session>,
    stats: SessionStats,
    params: Params,
    params_path: Option<PathBuf>,
    builder: MapBuilder,
    /// What to restore once it is the document (a reopened last session).
    pub restore: Option<Restore>,
}

/// The frame and view to restore with a reopened session.
#[derive(Clone, Debug, PartialEq)]
pub struct Restore {
    /// Frame index.
    pub frame: usize,
    /// View centre, world metres, and scale, points per metre.
    pub view: Option<(crate::geometry::Point2, f32)>,
}

/// What a finished file task brings back.
pub enum Outcome {
    /// A session, ready to be installed.
    Opened(Box<Loaded>),
    /// A parameter profile, and the file it came from (`None` for a demo's).
    Params(Params, Option<PathBuf>),
    /// A reference map and its label.
    Reference(String, Grid),
    /// Parameters were saved to a file.
    SavedParams(Params, PathBuf),
    /// The run was saved as a new session file (the file, the run saved, the files written).
    SavedSession(PathBuf, Arc<Session>, usize),
    /// Something was written; the message says what.
    Wrote(String),
}

/// A file task: a label for the status line and its job.
pub struct Task {
    /// What it does ("opening X", "exporting Y").
    pub label: String,
    /// The work.
    pub job: Job<Result<Outcome, String>>,
}

/// Loads a session (or simulates a plan, or takes a demo) and makes its builder.
fn load(source: Source, params: Params, params_path: Option<PathBuf>) -> Result<Outcome, String> {
    let (session, params, params_path) = match &source {
        Source::Demo(name) => (
            demo::session(name).map_err(|e| e.to_string())?,
            demo::params(name).map_err(|e| e.to_string())?,
            None,
        ),
        Source::File(path) if path.to_string_lossy().ends_with(".plan.ron") => {
            let plan = crate::sim::FloorPlan::load(path).map_err(|e| e.to_string())?;
            let session = crate::sim::simulate(&plan).map_err(|e| e.to_string())?;
            (session, params, params_path)
        }
        Source::File(path) => (
            Session::load(path).map_err(|e| e.to_string())?,
            params,
            params_path,
        ),
    };
    let session = Arc::new(session);
    let builder = MapBuilder::new(session.clone(), params.clone())
        .map_err(|e| e.for_input(&source.label()).to_string())?;
    Ok(Outcome::Opened(Box::new(Loaded {
        stats: session.stats(),
        source,
        session,
        params,
        params_path,
        builder,
        restore: None,
    })))
}

impl GridscopeApp {
    /// Starts a background task.
    pub(super) fn start_task(
        &mut self,
        label: String,
        work: impl FnOnce() -> Result<Outcome, String> + Send + 'static,
    ) {
        let job = Job::spawn(self.repaint.clone(), 1, move |_, _| work());
        self.tasks.push(Task { label, job });
    }

    /// Applies finished tasks.
    pub(super) fn take_tasks(&mut self) {
        let mut finished = Vec::new();
        self.tasks.retain(|t| match t.job.poll() {
            Some(r) => {
                finished.push((t.label.clone(), r));
                false
            }
            None => true,
        });
        for (label, result) in finished {
            match result {
                Ok(Ok(outcome)) => self.apply_outcome(outcome),
                Ok(Err(message)) => self.problem(message),
                Err(failure) => self.problem(format!("{label}: {failure}")),
            }
        }
    }

    /// Waits for every running file task (tests and benchmarks only).
    pub fn wait_for_tasks(&mut self) {
        for t in std::mem::take(&mut self.tasks) {
            match t.job.wait() {
                Ok(Ok(outcome)) => self.apply_outcome(outcome),
                Ok(Err(message)) => self.problem(message),
                Err(failure) => self.problem(format!("{}: {failure}", t.label)),
            }
        }
    }

    fn apply_outcome(&mut self, outcome: Outcome) {
        match outcome {
            Outcome::Opened(loaded) => self.install(*loaded),
            Outcome::Params(p, path) => {
                let from = path
                    .as_ref()
                    .map_or("the demo".to_string(), |p| p.display().to_string());
                if self.edit_params(p.clone()) {
                    if let Some(d) = &mut self.doc {
                        d.params_path = path.clone();
                        d.saved_params = p;
                    }
                    if let Some(path) = &path {
                        super::settings::remember(&mut self.settings.recent_params, path);
                    }
                    self.info(format!("parameters from {from}"));
                }
            }
            Outcome::Reference(label, grid) => {
                self.info(format!("reference: {label}"));
                self.set_reference(label, grid);
            }
            Outcome::SavedParams(p, path) => {
                if let Some(d) = &mut self.doc {
                    d.params_path = Some(path.clone());
                    d.saved_params = p;
                }
                super::settings::remember(&mut self.settings.recent_params, &path);
                self.info(format!("saved parameters to {}", path.display()));
            }
            Outcome::SavedSession(path, session, files) => {
                if let Some(d) = &mut self.doc
                    && Arc::ptr_eq(&d.session, &session)
                {
                    d.saved_session = session;
                    d.source = Source::File(path.clone());
                }
                super::settings::remember(&mut self.settings.recent_sessions, &path);
                self.info(format!(
                    "saved the run to {} ({files} file{})",
                    path.display(),
                    if files == 1 { "" } else { "s" }
                ));
            }
            Outcome::Wrote(message) => self.info(message),
        }
    }

    pub(super) fn info(&mut self, message: String) {
        self.notice = Some(Notice::Info(message));
    }

    pub(super) fn problem(&mut self, message: String) {
        self.notice = Some(Notice::Problem(message));
    }

    // ----- opening ---------------------------------------------------------------------------

    /// Opens a session file in the background (or simulates a `*.plan.ron` first, or opens the
    /// embedded demo named by `demo:NAME`), with the parameters now applied; on failure keeps
    /// what was loaded and says why.
    pub fn open_session(&mut self, path: &Path) {
        self.open_session_restoring(path, None);
    }

    /// As [`GridscopeApp::open_session`], then restores a frame and a view.
    pub fn open_session_restoring(&mut self, path: &Path, restore: Option<Restore>) {
        let source = match path.to_str().and_then(|s| s.strip_prefix("demo:")) {
            Some(name) => match demo::find(name) {
                Ok(d) => Source::Demo(d.name),
                Err(e) => return self.problem(e.to_string()),
            },
            None => Source::File(path.to_path_buf()),
        };
        let (params, params_path) = match &self.doc {
            Some(d) => (d.params.clone(), d.params_path.clone()),
            None => (Params::default(), None),
        };
        let label = format!("opening {}", source.label());
        self.start_task(label, move || {
            let mut out = load(source, params, params_path)?;
            if let Outcome::Opened(l) = &mut out {
                l.restore = restore;
            }
            Ok(out)
        });
    }

    /// Opens an embedded demo with its suggested parameters, in the background.
    pub fn open_demo(&mut self, name: &'static str) {
        let label = format!("opening demo:{name}");
        self.start_task(label, move || {
            load(Source::Demo(name), Params::default(), None)
        });
    }

    /// Makes a loaded session the document: everything about the previous one goes.
    fn install(&mut self, loaded: Loaded) {
        let Loaded {
            source,
            session,
            stats,
            params,
            params_path,
            builder,
            restore,
        } = loaded;
        let generation = self.bump_generation();
        let last = session.frames.len().saturating_sub(1);
        self.info(format!(
            "opened {} ({} frames)",
            source.label(),
            session.frames.len()
        ));
        if let Source::File(p) = &source {
            super::settings::remember(&mut self.settings.recent_sessions, p);
        }
        let builder = Arc::new(builder);
        self.doc = Some(Document {
            stats,
            source: source.clone(),
            saved_session: session.clone(),
            session,
            saved_params: params.clone(),
            params,
            params_path,
            builder: builder.clone(),
            built: generation,
            generation,
        });
        self.frame = restore.as_ref().map_or(last, |r| r.frame.min(last));
        self.shown = None;
        self.partial = None;
        self.selection = Selection::default();
        match restore.and_then(|r| r.view) {
            Some((centre, scale)) => self.grid_view.set_view(centre, scale),
            None => self.grid_view.request_fit(),
        }
        self.tuning.reset();
        self.timeline.stop();
        self.pinned = None;
        self.layer = super::Layer::Current;
        self.reference = None;
        self.changes_panel = Default::default();
        self.sweep_panel = Default::default();
        self.poses_panel.reset();
        self.edits = Default::default();
        if let Source::Demo(name) = source {
            self.use_demo_reference(name);
        }
        self.worker
            .request(generation, super::worker::Setup::Use(builder), self.frame);
    }

    /// Loads a parameter profile (or a demo's, `demo:NAME`) in the background and applies it.
    pub fn open_params(&mut self, path: &Path) {
        let path = path.to_path_buf();
        let label = format!("reading {}", path.display());
        self.start_task(label, move || {
            match path.to_str().and_then(|s| s.strip_prefix("demo:")) {
                Some(name) => Ok(Outcome::Params(
                    demo::params(name).map_err(|e| e.to_string())?,
                    None,
                )),
                None => Ok(Outcome::Params(
                    Params::load(&path).map_err(|e| e.to_string())?,
                    Some(path),
                )),
            }
        });
    }

    /// Applies new parameters: the worker makes their builder and rebuilds in the background.
    /// Returns whether they were taken (they must be valid); the old ones stay on failure.
    pub fn set_params(&mut self, params: Params) -> bool {
        if self.doc.is_none() {
            self.problem("open a session before setting parameters".into());
            return false;
        }
        if let Err(e) = params.validate() {
            self.problem(format!("parameters not applied: {e}"));
            return false;
        }
        let generation = self.bump_generation();
        let doc = self.doc.as_mut().expect("checked above");
        doc.params = params.clone();
        doc.generation = generation;
        let setup = super::worker::Setup::Make {
            session: doc.session.clone(),
            params: Box::new(params),
            budget: DEFAULT_CELL_BUDGET,
        };
        self.tuning.reset();
        self.worker.request(generation, setup, self.frame);
        true
    }

    /// Saves the parameters applied now, in the background.
    pub fn save_params(&mut self, path: &Path) {
        let Some(doc) = &self.doc else { return };
        let params = doc.params.clone();
        let path = path.to_path_buf();
        let label = format!("saving {}", path.display());
        self.start_task(label, move || {
            write_all_atomically(&[(path.clone(), params.to_ron_string().into_bytes())])
                .map_err(|e| e.to_string())?;
            Ok(Outcome::SavedParams(params, path))
        });
    }

    /// Saves the open run, with its poses as they are now, as a new session file in the
    /// background: never over the file it came from nor over any existing file.
    pub fn save_session(&mut self, path: &Path, packed: bool) {
        let Some(doc) = &self.doc else { return };
        let session = doc.session.clone();
        let input = match &doc.source {
            Source::File(p) => Some(p.clone()),
            Source::Demo(_) => None,
        };
        let path = path.to_path_buf();
        self.start_task(format!("saving {}", path.display()), move || {
            let files = session
                .save_as(&path, packed, input.as_deref())
                .map_err(|e| e.to_string())?;
            Ok(Outcome::SavedSession(path, session, files.len()))
        });
    }

    /// Writes the grid shown (after the current frame) as a map bundle, in the background,
    /// with the parameters of the builder that made that very grid.
    pub fn export_bundle(&mut self, prefix: &Path, pgm: bool) {
        let (Some(doc), Some(shown)) = (&self.doc, &self.shown) else {
            self.problem("nothing to export yet: the map is still being built".into());
            return;
        };
        let provenance = Provenance {
            params: shown.builder.params().clone(),
            session: doc.session.name.clone(),
            frames: shown.frame + 1,
        };
        let grid = shown.after.clone();
        let prefix = crate::export::bundle_prefix(prefix);
        let label = format!("exporting {}", prefix.display());
        self.start_task(label, move || {
            let files = write_bundle(&prefix, &grid, Some(&provenance), ExportOptions { pgm })
                .map_err(|e| e.to_string())?;
            Ok(Outcome::Wrote(format!(
                "exported {} files to {}.*",
                files.len(),
                prefix.display()
            )))
        });
    }

    // ----- references ----------------------------------------------------------------------

    pub(super) fn set_reference(&mut self, label: String, grid: Grid) {
        self.reference_versions += 1;
        self.reference = Some(Reference {
            label,
            grid: Arc::new(grid),
            version: self.reference_versions,
        });
    }

    /// Uses an embedded demo's plan as the reference.
    pub fn use_demo_reference(&mut self, name: &'static str) {
        let label = format!("plan of demo {name}");
        self.start_task(format!("reading the {label}"), move || {
            let grid = demo::reference(name).map_err(|e| e.to_string())?;
            Ok(Outcome::Reference(label, grid))
        });
    }

    /// Loads a reference map bundle in the background.
    pub fn load_reference(&mut self, path: &Path) {
        let path = path.to_path_buf();
        self.start_task(format!("reading {}", path.display()), move || {
            let b = crate::export::load_bundle(&path, DEFAULT_CELL_BUDGET)
                .map_err(|e| e.to_string())?;
            Ok(Outcome::Reference(b.prefix.display().to_string(), b.grid))
        });
    }

    /// Loads a greyscale image as the reference, in the background.
    pub fn load_reference_image(&mut self, r: &crate::export::ImageReference) {
        let r = r.clone();
        self.start_task(format!("reading {}", r.path.display()), move || {
            let g = crate::export::load_image_reference(&r, DEFAULT_CELL_BUDGET)
                .map_err(|e| e.to_string())?;
            Ok(Outcome::Reference(r.path.display().to_string(), g))
        });
    }

    /// Writes the selected cell's history as CSV (the `history` command's columns).
    pub fn save_cell_history(&mut self, path: &Path) {
        let (Some(doc), Some((key, updates))) = (&self.doc, &self.cell_panel.history) else {
            self.problem("select a cell and let its history finish first".into());
            return;
        };
        let csv = crate::fusion::history_csv(&doc.session, updates);
        let path = path.to_path_buf();
        let cell = key.1;
        self.start_task(format!("saving {}", path.display()), move || {
            write_all_atomically(&[(path.clone(), csv.into_bytes())]).map_err(|e| e.to_string())?;
            Ok(Outcome::Wrote(format!(
                "saved the history of cell ({}, {}) to {}",
                cell.col,
                cell.row,
                path.display()
            )))
        });
    }
}
