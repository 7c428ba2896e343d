//! What a desktop user of the window expects, driven through egui_kittest (no display or GPU):
//! work in the background while the window answers, failures said in the status line, undo and
//! redo, exports that pair a grid with its parameters, going to a frame or a point, shortcuts,
//! the last session restored, questions before work is lost, dropped references, cell
//! histories saved as CSV, and measuring.

use super::{scratch, settle, window_harness};
use egui::accesskit::Role;
use egui_kittest::Harness;
use egui_kittest::kittest::Queryable;
use gridscope::app::{Action, Dialog, GridscopeApp, LastSession, Layer, Notice, Settings};

fn harness() -> Harness<'static, GridscopeApp> {
    window_harness(GridscopeApp::with_demo(Settings::default()))
}

fn key(h: &mut Harness<'static, GridscopeApp>, key: egui::Key, modifiers: egui::Modifiers) {
    h.event(egui::Event::Key {
        key,
        physical_key: None,
        pressed: true,
        repeat: false,
        modifiers,
    });
    h.event(egui::Event::Key {
        key,
        physical_key: None,
        pressed: false,
        repeat: false,
        modifiers,
    });
    h.run_steps(2);
}

fn problem(app: &GridscopeApp) -> String {
    match &app.notice {
        Some(Notice::Problem(m)) => m.clone(),
        other => panic!("expected a problem, found {other:?}"),
    }
}

#[test]
fn the_window_answers_while_a_rebuild_and_an_open_run() {
    let mut h = harness();
    let frame = h.state().frame;
    // A parameter change starts a rebuild; a session opens while it runs.
    h.get_by_role_and_label(Role::Slider, "max")
        .set_value_accesskit(1.45);
    h.state_mut()
        .apply(Action::OpenSession("demo:sonar-ring".into()));
    h.run_steps(1);
    assert!(
        h.state()
            .task_labels()
            .iter()
            .any(|l| l.contains("opening demo:sonar-ring")),
        "the open runs as a task: {:?}",
        h.state().task_labels()
    );
    // Meanwhile the window answers: a key steps the frame of the document still shown.
    key(&mut h, egui::Key::ArrowLeft, egui::Modifiers::NONE);
    if h.state().doc.as_ref().unwrap().session.name == "Kestrel Yard door cycle" {
        assert_eq!(h.state().frame, frame - 1);
    }
    settle(&mut h);
    let app = h.state();
    assert_eq!(
        app.doc.as_ref().unwrap().session.name,
        "Kestrel Yard sonar ring"
    );
    assert!(app.shown.is_some() && !app.busy());
}

#[test]
fn a_failing_worker_is_reported_and_the_map_stays_usable() {
    let mut h = harness();
    let before = h.state().shown.as_ref().unwrap().after.clone();
    h.state_mut().crash_worker();
    settle(&mut h);
    let message = problem(h.state());
    assert!(message.contains("internal error"), "{message}");
    assert!(h.query_by_label_contains("internal error").is_some());
    assert_eq!(h.state().shown.as_ref().unwrap().after, before);
    // The next request is served again.
    h.get_by_label("-10").click();
    settle(&mut h);
    let app = h.state();
    let doc = app.doc.as_ref().unwrap();
    assert_eq!(
        *app.shown.as_ref().unwrap().after,
        doc.builder.build(app.frame + 1)
    );
    // Parameters the worker cannot build (over the cell budget) are refused with the reason
    // and the previous ones stay applied.
    let applied = doc.params.clone();
    let mut fine = applied.clone();
    fine.resolution = 0.0005;
    h.state_mut().apply(Action::SetParams(fine));
    settle(&mut h);
    assert!(problem(h.state()).contains("budget"));
    assert_eq!(h.state().doc.as_ref().unwrap().params, applied);
}

#[test]
fn parameter_edits_undo_and_redo() {
    let mut h = harness();
    let original = h.state().doc.as_ref().unwrap().params.clone();
    h.get_by_role_and_label(Role::Slider, "max")
        .set_value_accesskit(1.45);
    settle(&mut h);
    assert_eq!(h.state().doc.as_ref().unwrap().params.clamp.max, 1.45);
    let edited = h.state().doc.as_ref().unwrap().params.clone();
    key(&mut h, egui::Key::Z, egui::Modifiers::COMMAND);
    settle(&mut h);
    assert_eq!(h.state().doc.as_ref().unwrap().params, original);
    let grid = h.state().shown.as_ref().unwrap().after.clone();
    let doc = h.state().doc.as_ref().unwrap();
    assert_eq!(*grid, doc.builder.build(h.state().frame + 1));
    key(
        &mut h,
        egui::Key::Z,
        egui::Modifiers::COMMAND | egui::Modifiers::SHIFT,
    );
    settle(&mut h);
    assert_eq!(h.state().doc.as_ref().unwrap().params, edited);
    // Leaving a beam out is an edit too, and so is undone.
    h.state_mut()
        .apply(Action::SelectBeam { sensor: 0, beam: 7 });
    h.run_steps(2);
    h.get_by_label("Leave this beam out").click();
    settle(&mut h);
    let frame = h.state().frame;
    let excluded = &h.state().doc.as_ref().unwrap().params.exclude.beams;
    assert_eq!(excluded, &vec![(frame, "lidar".to_string(), 7)]);
    h.get_by_label("Edit").click();
    h.run_steps(2);
    h.get_by_label_contains("Undo").click();
    settle(&mut h);
    assert_eq!(h.state().doc.as_ref().unwrap().params, edited);
}

#[test]
fn an_export_records_the_parameters_of_the_grid_it_writes() {
    let mut h = harness();
    let dir = scratch("window-pairing");
    let prefix = dir.join("paired");
    // New parameters, and at once an export: whichever grid it writes, its metadata names the
    // parameters that made that grid.
    let mut p = h.state().doc.as_ref().unwrap().params.clone();
    p.clamp.max = 1.45;
    h.state_mut().apply(Action::SetParams(p));
    h.state_mut().apply(Action::ExportBundle {
        prefix: prefix.clone(),
        pgm: false,
    });
    settle(&mut h);
    let loaded = gridscope::load_bundle(&prefix, 100_000_000).unwrap();
    let meta = std::fs::read_to_string(dir.join("paired.map.ron")).unwrap();
    let text = meta
        .split_once("params: ")
        .map(|(_, p)| {
            p.trim_end()
                .trim_end_matches(')')
                .trim_end()
                .trim_end_matches(',')
        })
        .unwrap();
    let params = gridscope::Params::from_ron_str(text, "meta").unwrap();
    let frames: usize = meta
        .lines()
        .find_map(|l| l.trim().strip_prefix("frames: "))
        .and_then(|v| v.trim_end_matches(',').parse().ok())
        .unwrap();
    let session = h.state().doc.as_ref().unwrap().session.clone();
    let b = gridscope::MapBuilder::new(session, params).unwrap();
    assert_eq!(loaded.grid, b.build(frames));
    // The default prefix is the session's name: no doubled ".map".
    h.get_by_label("File").click();
    h.run_steps(2);
    h.get_by_label_contains("Export map bundle").click();
    h.run_steps(2);
    assert_eq!(
        h.state().file_menu.prompt.as_ref().unwrap().text,
        "door-cycle"
    );
}

#[test]
fn going_to_a_frame_and_to_a_point() {
    let mut h = harness();
    key(&mut h, egui::Key::G, egui::Modifiers::COMMAND);
    assert!(matches!(h.state().dialog, Some(Dialog::GoToFrame { .. })));
    h.state_mut().dialog = Some(Dialog::GoToFrame { text: "123".into() });
    h.run_steps(2);
    h.get_by_label("Go").click();
    settle(&mut h);
    assert_eq!(h.state().frame, 123);
    assert!(h.state().dialog.is_none());
    h.state_mut().dialog = Some(Dialog::GoToPoint { x: 7.02, y: 4.5 });
    h.run_steps(2);
    h.get_by_label("Go").click();
    settle(&mut h);
    let app = h.state();
    let spec = *app.doc.as_ref().unwrap().builder.spec();
    assert_eq!(
        app.selection.cell,
        Some(spec.cell_at(gridscope::Point2::new(7.02, 4.5)))
    );
    assert_eq!(app.grid_view.centre, gridscope::Point2::new(7.02, 4.5));
}

#[test]
fn shortcuts_are_listed_and_work() {
    let mut h = harness();
    key(&mut h, egui::Key::F1, egui::Modifiers::NONE);
    assert_eq!(h.state().dialog, Some(Dialog::Shortcuts));
    assert!(
        h.query_by_label("Ctrl+E").is_some() && h.query_by_label("export the map bundle").is_some()
    );
    key(&mut h, egui::Key::Escape, egui::Modifiers::NONE);
    assert!(h.state().dialog.is_none());
    // Zoom and fit.
    let scale = h.state().grid_view.scale;
    key(&mut h, egui::Key::Plus, egui::Modifiers::NONE);
    let zoomed = h.state().grid_view.scale;
    assert!(zoomed > scale);
    key(&mut h, egui::Key::F, egui::Modifiers::NONE);
    let fitted = h.state().grid_view.scale;
    assert!(fitted < zoomed);
    key(&mut h, egui::Key::F, egui::Modifiers::NONE);
    assert_eq!(h.state().grid_view.scale, fitted);
    // File actions open their prompts.
    key(&mut h, egui::Key::S, egui::Modifiers::COMMAND);
    assert!(h.state().file_menu.prompt.is_some());
}

#[test]
fn the_last_session_frame_view_and_parameters_come_back() {
    let mut params = gridscope::demo::params("glass-pass").unwrap();
    params.clamp.max = 1.9;
    let settings = Settings {
        last: Some(LastSession {
            session: "demo:glass-pass".into(),
            params: params.clone(),
            frame: 77,
            view: Some((gridscope::Point2::new(9.0, 3.0), 55.0)),
        }),
        ..Settings::default()
    };
    let h = window_harness(GridscopeApp::restoring(settings));
    let app = h.state();
    let doc = app.doc.as_ref().unwrap();
    assert_eq!(doc.session.name, "Kestrel Yard glass partition");
    assert_eq!(doc.params, params);
    assert!(doc.unsaved(), "restored edits are marked unsaved");
    assert_eq!(app.frame, 77);
    assert_eq!(app.grid_view.centre, gridscope::Point2::new(9.0, 3.0));
    assert_eq!(app.grid_view.scale, 55.0);
    let last = app.last_session().unwrap();
    assert_eq!((last.session.as_str(), last.frame), ("demo:glass-pass", 77));
}

#[test]
fn work_is_not_discarded_nor_files_replaced_without_asking() {
    let mut h = harness();
    h.state_mut().apply(Action::PinA);
    h.run_steps(1);
    h.state_mut().apply(Action::OpenDemo("glass-pass"));
    h.run_steps(2);
    match &h.state().dialog {
        Some(Dialog::Confirm { question, .. }) => {
            assert!(question.contains("the pinned parameters A"), "{question}")
        }
        other => panic!("{other:?}"),
    }
    assert!(
        h.query_by_label_contains("the pinned parameters A")
            .is_some()
    );
    h.get_by_label("No").click();
    settle(&mut h);
    assert_eq!(
        h.state().doc.as_ref().unwrap().session.name,
        "Kestrel Yard door cycle"
    );
    assert!(h.state().pinned.is_some());
    h.state_mut().apply(Action::OpenDemo("glass-pass"));
    h.run_steps(2);
    h.get_by_label("Yes, go ahead").click();
    settle(&mut h);
    assert_eq!(
        h.state().doc.as_ref().unwrap().session.name,
        "Kestrel Yard glass partition"
    );
    // An export over an existing bundle asks first.
    let dir = scratch("window-overwrite");
    let prefix = dir.join("m");
    std::fs::write(dir.join("m.npy"), b"precious").unwrap();
    h.state_mut().apply(Action::ExportBundle {
        prefix: prefix.clone(),
        pgm: false,
    });
    settle(&mut h);
    assert!(matches!(h.state().dialog, Some(Dialog::Confirm { .. })));
    assert_eq!(std::fs::read(dir.join("m.npy")).unwrap(), b"precious");
    h.get_by_label("Yes, go ahead").click();
    settle(&mut h);
    assert!(gridscope::load_bundle(&prefix, 100_000_000).is_ok());
}

/// A file dropped on the window.
#[derive(Debug)]
struct Dropped(std::path::PathBuf);

impl egui::DroppedFile for Dropped {
    fn path(&self) -> &std::path::Path {
        &self.0
    }
    fn bytes(&self) -> Result<Vec<u8>, String> {
        std::fs::read(&self.0).map_err(|e| e.to_string())
    }
}

#[test]
fn a_dropped_bundle_becomes_the_reference() {
    let mut h = harness();
    let dir = scratch("window-drop");
    let prefix = dir.join("plan");
    gridscope::write_bundle(
        &prefix,
        &gridscope::demo::reference("door-cycle").unwrap(),
        None,
        Default::default(),
    )
    .unwrap();
    h.input_mut()
        .dropped_files
        .push(std::sync::Arc::new(Dropped(dir.join("plan.map.ron"))));
    settle(&mut h);
    let app = h.state();
    assert!(app.reference.as_ref().unwrap().label.contains("plan"));
    assert_eq!(
        app.settings.inspector_tab,
        gridscope::app::InspectorTab::Score
    );
    // A dropped image goes to the image form, to be previewed before it is used.
    let png = dir.join("plan.png");
    h.input_mut()
        .dropped_files
        .push(std::sync::Arc::new(Dropped(png.clone())));
    settle(&mut h);
    h.get_by_label("Load a greyscale image").click();
    h.run_steps(2);
    h.get_by_label("Preview").click();
    settle(&mut h);
    assert!(h.query_by_label_contains("pixels, cut").is_some());
}

#[test]
fn a_cell_history_saves_as_csv_and_a_distance_is_measured() {
    let mut h = harness();
    let dir = scratch("window-csv");
    let spec = *h.state().doc.as_ref().unwrap().builder.spec();
    let cell = spec.cell_at(gridscope::Point2::new(7.02, 4.5));
    h.state_mut().apply(Action::SelectCell(cell));
    settle(&mut h);
    let path = dir.join("doorway.csv");
    h.state_mut().apply(Action::SaveCellHistory(path.clone()));
    settle(&mut h);
    let csv = std::fs::read_to_string(&path).unwrap();
    assert!(csv.starts_with("frame,t,sensor,beam,increment,value\n"));
    let (_, updates) = h.state().cell_panel.history.as_ref().unwrap();
    assert_eq!(csv.lines().count(), updates.len() + 1);
    // Measure: M, then two clicks 3 m east and 4 m north of each other.
    key(&mut h, egui::Key::M, egui::Modifiers::NONE);
    assert!(h.state().grid_view.measure.active);
    let t = h.state().grid_view.transform.unwrap();
    for p in [
        gridscope::Point2::new(2.0, 2.0),
        gridscope::Point2::new(5.0, 6.0),
    ] {
        let pos = t.to_screen(p);
        h.event(egui::Event::PointerMoved(pos));
        for pressed in [true, false] {
            h.event(egui::Event::PointerButton {
                pos,
                button: egui::PointerButton::Primary,
                pressed,
                modifiers: Default::default(),
            });
        }
        h.run_steps(2);
    }
    let (d, _) = h.state().grid_view.measure.result().unwrap();
    assert!((d - 5.0).abs() < 0.05, "{d}");
    assert!(h.query_by_label_contains("heading").is_some() || d > 0.0);
}

#[test]
fn a_difference_between_maps_of_other_resolutions_is_shown() {
    let mut h = harness();
    h.get_by_label("Compare").click();
    h.run_steps(2);
    h.get_by_label("Pin current parameters as A").click();
    settle(&mut h);
    let mut p = h.state().doc.as_ref().unwrap().params.clone();
    p.resolution = 0.1;
    h.state_mut().apply(Action::SetParams(p));
    settle(&mut h);
    settle(&mut h);
    h.get_by_label("Difference").click();
    h.run_steps(2);
    assert_eq!(h.state().layer, Layer::Difference);
    assert!(h.query_by_label_contains("cells changed class").is_some());
    assert!(h.query_by_label_contains("do not line up").is_none());
}

#[test]
fn a_sweep_heat_map_has_a_colour_bar() {
    let mut h = harness();
    h.get_by_label("Sweep").click();
    h.run_steps(2);
    h.get_by_label("and a second parameter (heat map)").click();
    h.run_steps(2);
    // A small sweep: two values of each of two parameters.
    let first = gridscope::sweep::Vary::parse("clamp.max=1:5:2").unwrap();
    let second = gridscope::sweep::Vary::parse("default_model.p_free=0.3:0.4:2").unwrap();
    h.state_mut().sweep_panel.set_axes(&first, Some(&second));
    h.get_by_label("Run sweep").click();
    settle(&mut h);
    settle(&mut h);
    assert!(h.query_by_label_contains("(colour bar)").is_some());
}
