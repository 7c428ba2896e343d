//! Small windows that ask or answer one thing: a confirmation before work is lost or a file is
//! replaced, go to a frame, go to a point, and the list of keyboard shortcuts.

use super::Action;
use crate::geometry::Point2;

/// An open dialog.
#[derive(Clone, Debug, PartialEq)]
pub enum Dialog {
    /// A yes/no question; yes carries out the action.
    Confirm {
        /// The question.
        question: String,
        /// What "yes" does.
        action: Box<Action>,
    },
    /// Go to a frame number (typed).
    GoToFrame {
        /// The text typed so far.
        text: String,
    },
    /// Go to a world point, metres.
    GoToPoint {
        /// x, metres.
        x: f64,
        /// y, metres.
        y: f64,
    },
    /// The keyboard shortcuts.
    Shortcuts,
    /// The window is closing with unsaved parameters or re-aligned poses.
    CloseUnsaved,
}

impl Dialog {
    /// A confirmation that carries out `action` on yes.
    pub fn confirm(question: String, action: Action) -> Dialog {
        Dialog::Confirm {
            question,
            action: Box::new(action),
        }
    }
}

/// The keyboard shortcuts, as the Help menu lists them: (keys, what they do).
pub const SHORTCUTS: &[(&str, &str)] = &[
    ("Ctrl+O", "open a session, plan or profile"),
    ("Ctrl+S", "save the parameters"),
    ("Ctrl+E", "export the map bundle"),
    ("Ctrl+Shift+E", "export the view as PNG"),
    (
        "Ctrl+Z",
        "undo an edit (parameters, frames left out, poses)",
    ),
    ("Ctrl+Shift+Z or Ctrl+Y", "redo"),
    ("Ctrl+G", "go to a frame"),
    ("Ctrl+L", "go to a point (x, y)"),
    ("F or double-click", "fit the map into the view"),
    ("+ / -", "zoom in / out"),
    ("M", "measure: click two points on the map (Esc ends)"),
    ("Left / Right", "previous / next frame (Shift: 10 frames)"),
    ("Home / End", "first / last frame"),
    ("Space", "play or pause"),
    ("F1", "this list"),
];

/// What the user chose in a dialog this frame.
pub enum Answer {
    /// Keep the dialog open.
    Open,
    /// Close it, doing nothing.
    Close,
    /// Close it and carry out this action.
    Do(Box<Action>),
    /// Save the parameters and the run before closing the window (the unsaved-changes
    /// question).
    SaveAndClose,
    /// Close the window without saving.
    CloseWindow,
}

/// Draws `dialog` as a window in the middle of the screen.
pub fn dialog_ui(ctx: &egui::Context, dialog: &mut Dialog, last_frame: usize) -> Answer {
    let mut answer = Answer::Open;
    let title = match dialog {
        Dialog::Confirm { .. } => "Please confirm",
        Dialog::GoToFrame { .. } => "Go to frame",
        Dialog::GoToPoint { .. } => "Go to point",
        Dialog::Shortcuts => "Keyboard shortcuts",
        Dialog::CloseUnsaved => "Unsaved work",
    };
    let mut open = true;
    egui::Window::new(title)
        .open(&mut open)
        .collapsible(false)
        .resizable(false)
        .anchor(egui::Align2::CENTER_CENTER, egui::vec2(0.0, -80.0))
        .show(ctx, |ui| match dialog {
            Dialog::Confirm { question, action } => {
                ui.label(question.as_str());
                ui.horizontal(|ui| {
                    if ui.button("Yes, go ahead").clicked() {
                        answer = Answer::Do(Box::new(Action::Confirmed(action.clone())));
                    }
                    if ui.button("No").clicked() {
                        answer = Answer::Close;
                    }
                });
            }
            Dialog::GoToFrame { text } => {
                ui.horizontal(|ui| {
                    let l = ui.label(format!("frame (0 to {last_frame})"));
                    let r = ui
                        .add(egui::TextEdit::singleline(text).desired_width(100.0))
                        .labelled_by(l.id);
                    r.request_focus();
                    let enter = r.lost_focus() && ui.input(|i| i.key_pressed(egui::Key::Enter));
                    let parsed = text
                        .trim()
                        .parse::<usize>()
                        .ok()
                        .filter(|&f| f <= last_frame);
                    if (ui
                        .add_enabled(parsed.is_some(), egui::Button::new("Go"))
                        .clicked()
                        || enter)
                        && let Some(f) = parsed
                    {
                        answer = Answer::Do(Box::new(Action::Seek(f)));
                    }
                });
            }
            Dialog::GoToPoint { x, y } => {
                ui.horizontal(|ui| {
                    let lx = ui.label("x (m)");
                    ui.add(egui::DragValue::new(x).speed(0.05))
                        .labelled_by(lx.id);
                    let ly = ui.label("y (m)");
                    ui.add(egui::DragValue::new(y).speed(0.05))
                        .labelled_by(ly.id);
                    if ui.button("Go").clicked() {
                        answer = Answer::Do(Box::new(Action::FocusPoint(Point2::new(*x, *y))));
                    }
                });
            }
            Dialog::Shortcuts => {
                egui::Grid::new("shortcuts").striped(true).show(ui, |ui| {
                    for (keys, what) in SHORTCUTS {
                        ui.monospace(*keys);
                        ui.label(*what);
                        ui.end_row();
                    }
                });
            }
            Dialog::CloseUnsaved => {
                ui.label(
                    "The parameters or the run's re-aligned poses have changes that are not saved.",
                );
                ui.horizontal(|ui| {
                    if ui.button("Save, then close").clicked() {
                        answer = Answer::SaveAndClose;
                    }
                    if ui.button("Close without saving").clicked() {
                        answer = Answer::CloseWindow;
                    }
                    if ui.button("Keep working").clicked() {
                        answer = Answer::Close;
                    }
                });
            }
        });
    if (!open || ctx.input(|i| i.key_pressed(egui::Key::Escape))) && matches!(answer, Answer::Open)
    {
        answer = Answer::Close;
    }
    answer
}
