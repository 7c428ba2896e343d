//! What panels ask for, and how the application carries it out: [`Action`] and
//! [`GridscopeApp::apply`], with the undo history of edits (the parameters, and the run's poses
//! once re-aligned) and the confirmations asked before work would be discarded or a file
//! overwritten.
//!
//! Design decision: a panel never changes another panel's state; it returns actions, applied
//! after every panel is drawn. An action that would lose work (replacing the session while A is
//! pinned, a reference is loaded, results are shown or parameters are unsaved) or overwrite a
//! file is first turned into a question; the answer applies it as [`Action::Confirmed`].

use super::dialogs::Dialog;
use super::settings::InspectorTab;
use super::{GridscopeApp, Layer};
use crate::geometry::Point2;
use crate::params::Params;
use crate::session::Session;
use crate::{BeamRef, CellIndex};
use std::ops::Range;
use std::path::{Path, PathBuf};
use std::sync::Arc;

/// Something a panel asks the application to do.
#[derive(Clone, Debug, PartialEq)]
#[must_use]
pub enum Action {
    /// Show the grid after this frame.
    Seek(usize),
    /// Apply these parameters (an edit: it can be undone).
    SetParams(Params),
    /// Go back to the parameters before the last edit.
    Undo,
    /// Redo the edit undone last.
    Redo,
    /// Inspect beam `beam` of sensor `sensor` in the current frame.
    SelectBeam {
        /// Sensor index.
        sensor: usize,
        /// Beam index.
        beam: usize,
    },
    /// Leave one beam out of the fusion (an edit of the parameters).
    ExcludeBeam(BeamRef),
    /// Inspect a cell.
    SelectCell(CellIndex),
    /// Drop the beam selection.
    ClearBeam,
    /// Open a session file (or a plan, which is simulated first, or `demo:NAME`).
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
    /// Save the selected cell's history as CSV.
    SaveCellHistory(PathBuf),
    /// Open whatever this file is, judged by its name (dropped files).
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
    /// Centre the view on a world point (metres) and inspect its cell.
    FocusPoint(Point2),
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
    /// Check every frame's agreement with the map of the rest of the run (Poses tab).
    CheckAgreement,
    /// Leave these frames out of the fusion (an edit of the parameters).
    LeaveOutFrames(Range<usize>),
    /// Re-align the poses of these frames on the map of the other frames.
    Realign(Range<usize>),
    /// Start the fit of mount and clock corrections set up in the Poses tab.
    StartFit,
    /// Replace the re-aligned frames' poses in the open run (an edit).
    UseRealigned,
    /// Drop the last re-alignment.
    DiscardRealigned,
    /// Save the open run (with any re-aligned poses) as a new session file.
    SaveSession {
        /// The new file; never the input or an existing file.
        path: PathBuf,
        /// Write the packed layout (arrays beside the header) instead of one inline file.
        packed: bool,
    },
    /// Show an inspector tab.
    ShowTab(InspectorTab),
    /// Ask something first.
    Ask(Dialog),
    /// An action the user confirmed: carried out without asking again.
    Confirmed(Box<Action>),
}

/// What an edit changes: the parameters, and the run they apply to (whose poses a
/// re-alignment replaces). Sessions are shared, so a version costs a pointer unless its poses
/// differ.
#[derive(Clone)]
struct Version {
    params: Params,
    session: Arc<Session>,
}

/// The versions before each edit (for undo) and after each undone one (for redo).
#[derive(Default)]
pub struct Edits {
    undo: Vec<Version>,
    redo: Vec<Version>,
}

impl Edits {
    /// Whether there is an edit to undo.
    pub fn can_undo(&self) -> bool {
        !self.undo.is_empty()
    }

    /// Whether there is an undone edit to redo.
    pub fn can_redo(&self) -> bool {
        !self.redo.is_empty()
    }
}

impl GridscopeApp {
    /// Carries out one action (asking first where it would lose work or overwrite a file).
    pub fn apply(&mut self, action: Action) {
        if let Some(question) = self.needs_confirmation(&action) {
            self.dialog = Some(Dialog::confirm(question, action));
            return;
        }
        let action = match action {
            Action::Confirmed(a) => *a,
            a => a,
        };
        match action {
            Action::Seek(f) => self.seek(f),
            Action::SetParams(p) => {
                self.edit_params(p);
            }
            Action::Undo => self.undo(),
            Action::Redo => self.redo(),
            Action::SelectBeam { sensor, beam } => {
                self.selection.beam = Some((sensor, beam));
                if self.settings.inspector_tab == InspectorTab::Cell {
                    self.settings.inspector_tab = InspectorTab::Beam;
                }
            }
            Action::ExcludeBeam(b) => self.exclude_beam(b),
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
            Action::SaveCellHistory(p) => self.save_cell_history(&p),
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
                    self.grid_view.centre_on(doc.builder.spec().centre(c));
                }
            }
            Action::FocusPoint(p) => {
                self.grid_view.centre_on(p);
                if let Some(doc) = &self.doc {
                    let cell = doc.builder.spec().cell_at(p);
                    if doc.builder.spec().index(cell).is_some() {
                        self.selection.cell = Some(cell);
                        self.settings.inspector_tab = InspectorTab::Cell;
                    }
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
            Action::CheckAgreement => {
                if let Some(doc) = &self.doc {
                    self.poses_panel.start_agreement(doc, self.repaint.clone());
                    self.settings.inspector_tab = InspectorTab::Poses;
                }
            }
            Action::LeaveOutFrames(frames) => self.leave_out_frames(frames),
            Action::Realign(frames) => {
                if let Some(doc) = &self.doc {
                    self.poses_panel
                        .start_realign(doc, frames, self.repaint.clone());
                    self.settings.inspector_tab = InspectorTab::Poses;
                }
            }
            Action::StartFit => {
                if let Some(doc) = &self.doc {
                    self.poses_panel.start_fit(doc, self.repaint.clone());
                }
            }
            Action::UseRealigned => {
                let Some(session) = self
                    .doc
                    .as_ref()
                    .and_then(|d| self.poses_panel.realigned_session(d))
                else {
                    return self.problem("the re-alignment is out of date; run it again".into());
                };
                if self.edit_session(session) {
                    self.poses_panel.realigned = None;
                    self.info("re-aligned poses in use; File > Save run as... keeps them".into());
                }
            }
            Action::DiscardRealigned => self.poses_panel.realigned = None,
            Action::SaveSession { path, packed } => self.save_session(&path, packed),
            Action::ShowTab(t) => self.settings.inspector_tab = t,
            Action::Ask(d) => self.dialog = Some(d),
            Action::Confirmed(a) => self.apply(Action::Confirmed(a)),
        }
    }

    /// The question to ask before `action`, if it would lose work or overwrite a file.
    fn needs_confirmation(&self, action: &Action) -> Option<String> {
        let exists = |p: &Path| p.exists();
        match action {
            Action::OpenSession(_) | Action::OpenDemo(_) => {
                let lost = self.work_to_lose();
                (!lost.is_empty()).then(|| {
                    format!(
                        "Opening another session drops {}. Open it anyway?",
                        lost.join(", ")
                    )
                })
            }
            Action::OpenAny(p) if !is_reference(p) && !is_profile(p) => {
                self.needs_confirmation(&Action::OpenSession(p.clone()))
            }
            Action::SaveParams(p) | Action::ExportView(p) | Action::SaveCellHistory(p)
                if exists(p) =>
            {
                Some(format!("{} exists. Replace it?", p.display()))
            }
            // A run is never saved over a file (see `Session::save_as`): no question to ask.
            Action::ExportBundle { prefix, .. } => {
                let prefix = crate::export::bundle_prefix(prefix);
                let there: Vec<String> = [".npy", ".png", ".map.ron", ".pgm"]
                    .iter()
                    .map(|s| crate::export::with_suffix(&prefix, s))
                    .filter(|p| exists(p))
                    .map(|p| p.display().to_string())
                    .collect();
                (!there.is_empty())
                    .then(|| format!("{} exist. Replace the bundle?", there.join(", ")))
            }
            _ => None,
        }
    }

    /// What replacing the document would drop, in words.
    pub fn work_to_lose(&self) -> Vec<&'static str> {
        let mut lost = Vec::new();
        if self.doc.as_ref().is_some_and(|d| d.unsaved()) {
            lost.push("unsaved parameter changes");
        }
        if self.doc.as_ref().is_some_and(|d| d.run_unsaved()) {
            lost.push("re-aligned poses not saved");
        }
        if self.pinned.is_some() {
            lost.push("the pinned parameters A");
        }
        if self.reference.is_some()
            && !matches!(
                self.doc.as_ref().map(|d| &d.source),
                Some(super::Source::Demo(_))
            )
        {
            lost.push("the reference");
        }
        if self.sweep_panel.has_result() {
            lost.push("the sweep's results");
        }
        if self.changes_panel.found.is_some() {
            lost.push("the changes found");
        }
        lost
    }

    /// The document's current version, if a session is open.
    fn version(&self) -> Option<Version> {
        self.doc.as_ref().map(|d| Version {
            params: d.params.clone(),
            session: d.session.clone(),
        })
    }

    /// Makes `v` current: its run (if it is another) and its parameters. Returns whether it
    /// was taken; nothing changes when its parameters are refused.
    fn set_version(&mut self, v: Version) -> bool {
        if let Err(e) = v.params.validate() {
            self.problem(format!("parameters not applied: {e}"));
            return false;
        }
        if let Some(doc) = &mut self.doc
            && !Arc::ptr_eq(&doc.session, &v.session)
        {
            doc.stats = v.session.stats();
            doc.session = v.session;
        }
        self.set_params(v.params)
    }

    /// Makes `next` current as an edit the user can undo. Returns whether it was taken.
    fn edit(&mut self, next: Version) -> bool {
        let Some(before) = self.version() else {
            return self.set_params(next.params);
        };
        if before.params == next.params && Arc::ptr_eq(&before.session, &next.session) {
            return true;
        }
        if self.set_version(next) {
            self.edits.undo.push(before);
            self.edits.redo.clear();
            true
        } else {
            false
        }
    }

    /// Applies parameters as an edit the user can undo. Returns whether they were taken.
    pub fn edit_params(&mut self, params: Params) -> bool {
        match self.version() {
            Some(v) => self.edit(Version { params, ..v }),
            None => self.set_params(params),
        }
    }

    /// Replaces the open run (same frames, other poses) as an edit the user can undo.
    pub fn edit_session(&mut self, session: Arc<Session>) -> bool {
        match self.version() {
            Some(v) => self.edit(Version { session, ..v }),
            None => false,
        }
    }

    /// Goes back to the version before the last edit.
    pub fn undo(&mut self) {
        let (Some(v), Some(now)) = (self.edits.undo.pop(), self.version()) else {
            return;
        };
        if self.set_version(v) {
            self.edits.redo.push(now);
            self.info("undone".into());
        }
    }

    /// Applies the edit undone last again.
    pub fn redo(&mut self) {
        let (Some(v), Some(now)) = (self.edits.redo.pop(), self.version()) else {
            return;
        };
        if self.set_version(v) {
            self.edits.undo.push(now);
            self.info("redone".into());
        }
    }

    /// Leaves frames out of the fusion (an undoable edit of the parameters' exclusions).
    fn leave_out_frames(&mut self, frames: Range<usize>) {
        let Some(doc) = &self.doc else { return };
        if frames.is_empty() {
            return;
        }
        let entry = frames.start..=frames.end - 1;
        let mut p = doc.params.clone();
        if !p.exclude.frames.contains(&entry) {
            p.exclude.frames.push(entry);
            self.edit_params(p);
        }
    }

    /// Leaves one beam out (an undoable edit of the parameters' exclusions).
    fn exclude_beam(&mut self, b: BeamRef) {
        let Some(doc) = &self.doc else { return };
        let Some(sensor) = doc.session.sensors.get(b.sensor) else {
            return;
        };
        let entry = (b.frame, sensor.id.clone(), b.beam);
        let mut p = doc.params.clone();
        if !p.exclude.beams.contains(&entry) {
            p.exclude.beams.push(entry);
            self.edit_params(p);
        }
    }

    /// Opens a file by what its name says it is: a profile, a reference (a map bundle, or an
    /// image, which goes to the Score tab's form to be previewed), or a session.
    pub fn open_any(&mut self, path: &Path) {
        if is_profile(path) {
            self.open_params(path);
        } else if is_image(path) {
            self.score_panel.set_image_path(path);
            self.settings.inspector_tab = InspectorTab::Score;
            self.info(format!(
                "{}: set its resolution and origin in the Score tab, preview it, then use it",
                path.display()
            ));
        } else if is_reference(path) {
            self.load_reference(path);
            self.settings.inspector_tab = InspectorTab::Score;
        } else {
            self.open_session(path);
        }
    }
}

fn name_of(p: &Path) -> String {
    p.to_string_lossy().to_ascii_lowercase()
}

fn is_profile(p: &Path) -> bool {
    name_of(p).ends_with(".params.ron")
}

fn is_image(p: &Path) -> bool {
    let n = name_of(p);
    n.ends_with(".png") || n.ends_with(".pgm") || n.ends_with(".pnm")
}

/// A map bundle's metadata or array, or a greyscale image: something to score against.
fn is_reference(p: &Path) -> bool {
    let n = name_of(p);
    n.ends_with(".map.ron") || n.ends_with(".npy") || is_image(p)
}
