//! The window's shell: keyboard shortcuts, the title (with the unsaved marks) and the question
//! asked when the window is closed with unsaved parameters or re-aligned poses.

use super::dialogs::Dialog;
use super::{Action, GridscopeApp, menu};

impl GridscopeApp {
    /// Keyboard shortcuts of the menus (when no text field has the keyboard).
    pub(super) fn shortcuts(&mut self, ctx: &egui::Context) -> Vec<Action> {
        use egui::{Key, KeyboardShortcut, Modifiers};
        let mut out = Vec::new();
        if ctx.egui_wants_keyboard_input() {
            return out;
        }
        let cmd = Modifiers::COMMAND;
        let cmd_shift = Modifiers::COMMAND | Modifiers::SHIFT;
        let pressed = |m: Modifiers, k: Key| {
            ctx.input_mut(|i| i.consume_shortcut(&KeyboardShortcut::new(m, k)))
        };
        let doc = self.doc.as_ref();
        if pressed(cmd_shift, Key::Z) || pressed(cmd, Key::Y) {
            out.push(Action::Redo);
        }
        if pressed(cmd, Key::Z) {
            out.push(Action::Undo);
        }
        if pressed(cmd_shift, Key::E) {
            self.file_menu.open_prompt(menu::Purpose::ExportView, doc);
        }
        if pressed(cmd, Key::E) {
            self.file_menu.open_prompt(menu::Purpose::ExportBundle, doc);
        }
        if pressed(cmd, Key::O) {
            self.file_menu.open_prompt(menu::Purpose::Open, doc);
        }
        if pressed(cmd, Key::S) && doc.is_some() {
            self.file_menu.open_prompt(menu::Purpose::SaveParams, doc);
        }
        if pressed(cmd, Key::G) {
            out.push(Action::Ask(Dialog::GoToFrame {
                text: self.frame.to_string(),
            }));
        }
        if pressed(cmd, Key::L) {
            let c = self.grid_view.centre;
            out.push(Action::Ask(Dialog::GoToPoint { x: c.x, y: c.y }));
        }
        if pressed(Modifiers::NONE, Key::F1) {
            out.push(Action::Ask(Dialog::Shortcuts));
        }
        if pressed(Modifiers::NONE, Key::F) {
            self.grid_view.request_fit();
        }
        if pressed(Modifiers::NONE, Key::Plus) || pressed(Modifiers::NONE, Key::Equals) {
            self.grid_view.zoom_by(1.25);
        }
        if pressed(Modifiers::NONE, Key::Minus) {
            self.grid_view.zoom_by(0.8);
        }
        if pressed(Modifiers::NONE, Key::M) {
            self.grid_view.measure.start();
        }
        if self.grid_view.measure.active && ctx.input(|i| i.key_pressed(Key::Escape)) {
            self.grid_view.measure.stop();
        }
        out
    }

    /// Asks before the window closes with unsaved parameters or re-aligned poses.
    pub(super) fn close_request(&mut self, ctx: &egui::Context) {
        if ctx.input(|i| i.viewport().close_requested())
            && !self.allow_close
            && self
                .doc
                .as_ref()
                .is_some_and(|d| d.unsaved() || d.run_unsaved())
        {
            ctx.send_viewport_cmd(egui::ViewportCommand::CancelClose);
            self.dialog = Some(Dialog::CloseUnsaved);
        }
    }

    /// Opens the save prompt for the next unsaved thing (the parameters, then the run) and
    /// closes the window once nothing is left unsaved.
    pub(super) fn save_before_closing(&mut self, ctx: &egui::Context) {
        let next = self.doc.as_ref().and_then(|d| {
            if d.unsaved() {
                Some(super::menu::Purpose::SaveParams)
            } else if d.run_unsaved() {
                Some(super::menu::Purpose::SaveSession)
            } else {
                None
            }
        });
        match next {
            Some(purpose) => {
                self.file_menu.open_prompt(purpose, self.doc.as_ref());
                self.file_menu.close_after_save = Some(purpose);
            }
            None => {
                self.file_menu.close_after_save = None;
                self.allow_close = true;
                ctx.send_viewport_cmd(egui::ViewportCommand::Close);
            }
        }
    }

    /// The window's title: the session, and a mark while parameters or re-aligned poses are
    /// unsaved.
    pub(super) fn window_title(&mut self, ctx: &egui::Context) {
        let title = match &self.doc {
            Some(d) => format!(
                "gridscope - {}{}{}",
                d.session.name,
                if d.unsaved() {
                    " (parameters not saved)"
                } else {
                    ""
                },
                if d.run_unsaved() {
                    " (poses not saved)"
                } else {
                    ""
                }
            ),
            None => "gridscope".to_string(),
        };
        if title != self.title {
            ctx.send_viewport_cmd(egui::ViewportCommand::Title(title.clone()));
            self.title = title;
        }
    }
}
