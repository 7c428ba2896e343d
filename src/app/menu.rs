//! The menu bar and its file prompt: File (open, recent files, save, export), Edit (undo,
//! redo), Navigate (go to a frame or a point, fit), Demos, View (palette, layers, measuring)
//! and Help (the keyboard shortcuts).
//!
//! Every file action goes through one small prompt window with a path field and a "Browse"
//! button for the system file dialog, so the window works the same on a desktop and on a
//! machine without a file-dialog service (the path field alone is enough).

use super::dialogs::Dialog;
use super::grid_view::Measure;
use super::palette::Palette;
use super::settings::Settings;
use super::{Action, Document, Edits, Source};
use crate::demo::DEMOS;
use std::path::PathBuf;

/// What a file prompt is for.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Purpose {
    /// Open a session, plan or parameter profile.
    Open,
    /// Save the parameter profile.
    SaveParams,
    /// Export the map bundle (a prefix).
    ExportBundle,
    /// Save the view as PNG.
    ExportView,
    /// Save the run (with re-aligned poses) as a new session file.
    SaveSession,
}

impl Purpose {
    fn title(self) -> &'static str {
        match self {
            Purpose::Open => "Open a session, plan or parameter file",
            Purpose::SaveParams => "Save parameters",
            Purpose::ExportBundle => "Export map bundle (prefix: writes .npy .png .map.ron)",
            Purpose::ExportView => "Save the view as PNG",
            Purpose::SaveSession => "Save the run as a new session file",
        }
    }

    fn action(self, path: PathBuf, option: bool) -> Action {
        match self {
            Purpose::Open => Action::OpenAny(path),
            Purpose::SaveParams => Action::SaveParams(path),
            Purpose::ExportBundle => Action::ExportBundle {
                prefix: path,
                pgm: option,
            },
            Purpose::ExportView => Action::ExportView(path),
            Purpose::SaveSession => Action::SaveSession {
                path,
                packed: option,
            },
        }
    }
}

/// An open file prompt.
#[derive(Clone, Debug, PartialEq)]
pub struct Prompt {
    /// What the path is for.
    pub purpose: Purpose,
    /// The path typed so far.
    pub text: String,
    /// The purpose's one option: for an export, also write a Netpbm `.pgm`; for a saved run,
    /// the packed layout.
    pub option: bool,
}

/// Menu state.
#[derive(Default)]
pub struct FileMenu {
    /// The open prompt, if any.
    pub prompt: Option<Prompt>,
    /// Close the window once what is unsaved is saved (the answer to the unsaved question):
    /// the purpose of the prompt opened for it.
    pub close_after_save: Option<Purpose>,
}

fn default_stem(doc: Option<&Document>) -> String {
    match doc.map(|d| &d.source) {
        Some(Source::File(p)) => {
            let s = p.to_string_lossy();
            [".session.ron", ".plan.ron", ".ron"]
                .iter()
                .find_map(|suffix| s.strip_suffix(suffix))
                .unwrap_or(&s)
                .to_string()
        }
        Some(Source::Demo(n)) => n.to_string(),
        None => "map".into(),
    }
}

impl FileMenu {
    /// Opens the prompt for `purpose` with a suggested path.
    pub fn open_prompt(&mut self, purpose: Purpose, doc: Option<&Document>) {
        let stem = default_stem(doc);
        let text = match purpose {
            Purpose::Open => String::new(),
            Purpose::SaveParams => doc
                .and_then(|d| d.params_path.as_ref())
                .map(|p| p.display().to_string())
                .unwrap_or(format!("{stem}.params.ron")),
            Purpose::ExportBundle => stem,
            Purpose::ExportView => format!("{stem}.view.png"),
            Purpose::SaveSession => format!("{stem}-realigned.session.ron"),
        };
        self.prompt = Some(Prompt {
            purpose,
            text,
            option: false,
        });
    }

    /// Draws the menu bar (and the prompt window); returns what the user chose.
    pub fn ui(
        &mut self,
        ui: &mut egui::Ui,
        settings: &mut Settings,
        doc: Option<&Document>,
        edits: &Edits,
        measure: &mut Measure,
    ) -> Vec<Action> {
        let mut actions = Vec::new();
        egui::MenuBar::new().ui(ui, |ui| {
            ui.menu_button("File", |ui| {
                if ui.add(egui::Button::new("Open...").shortcut_text("Ctrl+O")).on_hover_text("A session (*.session.ron), a floor plan (*.plan.ron, simulated first) or a parameter profile (*.params.ron). Files dropped on the window open too.").clicked() {
                    self.open_prompt(Purpose::Open, doc);
                }
                ui.menu_button("Recent sessions", |ui| {
                    if settings.recent_sessions.is_empty() {
                        ui.label("none yet");
                    }
                    for p in &settings.recent_sessions {
                        if ui.button(p.display().to_string()).clicked() {
                            actions.push(Action::OpenSession(p.clone()));
                        }
                    }
                });
                ui.menu_button("Recent parameters", |ui| {
                    if settings.recent_params.is_empty() {
                        ui.label("none yet");
                    }
                    for p in &settings.recent_params {
                        if ui.button(p.display().to_string()).clicked() {
                            actions.push(Action::OpenParams(p.clone()));
                        }
                    }
                });
                ui.separator();
                let loaded = doc.is_some();
                if ui.add_enabled(loaded, egui::Button::new("Save parameters...").shortcut_text("Ctrl+S")).clicked() {
                    self.open_prompt(Purpose::SaveParams, doc);
                }
                if ui.add_enabled(loaded, egui::Button::new("Save run as...")).on_hover_text("The open run with its poses as they are now (re-aligned in the Poses tab), as a new session file").clicked() {
                    self.open_prompt(Purpose::SaveSession, doc);
                }
                if ui.add_enabled(loaded, egui::Button::new("Export map bundle...").shortcut_text("Ctrl+E")).on_hover_text("The grid after the current frame, with the parameters that made it").clicked() {
                    self.open_prompt(Purpose::ExportBundle, doc);
                }
                if ui.add_enabled(loaded, egui::Button::new("Export view as PNG...").shortcut_text("Ctrl+Shift+E")).on_hover_text("The map view as it appears on screen").clicked() {
                    self.open_prompt(Purpose::ExportView, doc);
                }
            });
            ui.menu_button("Edit", |ui| {
                if ui
                    .add_enabled(edits.can_undo(), egui::Button::new("Undo").shortcut_text("Ctrl+Z"))
                    .on_hover_text("Parameter edits, frames or beams left out, re-aligned poses")
                    .clicked()
                {
                    actions.push(Action::Undo);
                }
                if ui
                    .add_enabled(edits.can_redo(), egui::Button::new("Redo").shortcut_text("Ctrl+Shift+Z"))
                    .clicked()
                {
                    actions.push(Action::Redo);
                }
            });
            ui.menu_button("Navigate", |ui| {
                let loaded = doc.is_some();
                if ui.add_enabled(loaded, egui::Button::new("Go to frame...").shortcut_text("Ctrl+G")).clicked() {
                    actions.push(Action::Ask(Dialog::GoToFrame { text: String::new() }));
                }
                if ui.add_enabled(loaded, egui::Button::new("Go to point...").shortcut_text("Ctrl+L")).clicked() {
                    actions.push(Action::Ask(Dialog::GoToPoint { x: 0.0, y: 0.0 }));
                }
            });
            ui.menu_button("Demos", |ui| {
                for d in DEMOS {
                    if ui.button(d.name).on_hover_text(d.about).clicked() {
                        actions.push(Action::OpenDemo(d.name));
                    }
                }
            });
            ui.menu_button("View", |ui| {
                for p in [Palette::SandSlateInk, Palette::ExportGreys] {
                    ui.radio_value(&mut settings.palette, p, p.label());
                }
                ui.separator();
                ui.checkbox(&mut settings.show_beams, "Beams of the current frame");
                ui.checkbox(&mut settings.show_path, "Robot path");
                ui.checkbox(&mut settings.show_tuning, "Tuning panel");
                ui.checkbox(&mut settings.show_inspector, "Inspector panel");
                ui.separator();
                if ui.add(egui::Button::new("Measure a distance").shortcut_text("M")).on_hover_text("Click two points on the map; Esc ends").clicked() {
                    measure.start();
                }
                ui.label("Drag to pan, scroll or +/- to zoom, F or double-click to fit.");
            });
            ui.menu_button("Help", |ui| {
                if ui.add(egui::Button::new("Keyboard shortcuts").shortcut_text("F1")).clicked() {
                    actions.push(Action::Ask(Dialog::Shortcuts));
                }
                ui.label(crate::SAFETY_NOTICE);
            });
        });
        actions.extend(self.prompt_ui(ui));
        actions
    }

    fn prompt_ui(&mut self, ui: &mut egui::Ui) -> Option<Action> {
        let prompt = self.prompt.as_mut()?;
        let mut done: Option<Option<Action>> = None;
        let mut open = true;
        egui::Window::new(prompt.purpose.title())
            .open(&mut open)
            .collapsible(false)
            .resizable(false)
            .anchor(egui::Align2::CENTER_TOP, egui::vec2(0.0, 80.0))
            .show(ui.ctx(), |ui| {
                ui.horizontal(|ui| {
                    ui.label("path");
                    let r =
                        ui.add(egui::TextEdit::singleline(&mut prompt.text).desired_width(420.0));
                    if r.lost_focus()
                        && ui.input(|i| i.key_pressed(egui::Key::Enter))
                        && !prompt.text.trim().is_empty()
                    {
                        done = Some(Some(
                            prompt
                                .purpose
                                .action(PathBuf::from(prompt.text.trim()), prompt.option),
                        ));
                    }
                    if ui
                        .button("Browse...")
                        .on_hover_text("Use the system file dialog")
                        .clicked()
                    {
                        let dialog = rfd::FileDialog::new();
                        let picked = match prompt.purpose {
                            Purpose::Open => {
                                dialog.add_filter("gridscope files", &["ron"]).pick_file()
                            }
                            _ => dialog.save_file(),
                        };
                        if let Some(p) = picked {
                            prompt.text = p.display().to_string();
                        }
                    }
                });
                match prompt.purpose {
                    Purpose::ExportBundle => {
                        ui.checkbox(
                            &mut prompt.option,
                            "also write a Netpbm .pgm of the grey levels",
                        );
                    }
                    Purpose::SaveSession => {
                        ui.checkbox(
                            &mut prompt.option,
                            "packed: arrays in .npy files beside the header",
                        );
                        ui.label("A run is saved under a new name, never over a file.");
                    }
                    _ => {}
                }
                ui.horizontal(|ui| {
                    let ok = !prompt.text.trim().is_empty();
                    if ui.add_enabled(ok, egui::Button::new("OK")).clicked() {
                        done = Some(Some(
                            prompt
                                .purpose
                                .action(PathBuf::from(prompt.text.trim()), prompt.option),
                        ));
                    }
                    if ui.button("Cancel").clicked() {
                        done = Some(None);
                    }
                });
            });
        if !open {
            done = Some(None);
        }
        match done {
            Some(action) => {
                self.prompt = None;
                action
            }
            None => None,
        }
    }
}
