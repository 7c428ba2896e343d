//! The inspector window driven through egui_kittest (no display or GPU): the real application
//! state, real widgets found by their labels.

use super::{scratch, settle, window_harness};
use egui::accesskit::Role;
use egui_kittest::Harness;
use egui_kittest::kittest::Queryable;
use gridscope::app::{Action, GridscopeApp, Settings};
use gridscope::{BeamRef, Reading};

fn harness() -> Harness<'static, GridscopeApp> {
    window_harness(GridscopeApp::with_demo(Settings::default()))
}

#[test]
fn opens_on_the_demo_with_a_map() {
    let h = harness();
    let app = h.state();
    let doc = app.doc.as_ref().expect("the demo is loaded");
    assert_eq!(doc.session.name, "Kestrel Yard door cycle");
    let shown = app.shown.as_ref().expect("a grid arrived");
    assert_eq!(shown.frame, doc.session.frames.len() - 1);
    // The window shows exactly what the core builds.
    assert_eq!(*shown.after, doc.builder.build(doc.session.frames.len()));
    assert!(!app.busy());
}

#[test]
fn stepping_changes_the_frame_and_the_grid() {
    let mut h = harness();
    let before = h.state().shown.as_ref().unwrap().after.clone();
    let last = h.state().frame;
    h.get_by_label("-10").click();
    settle(&mut h);
    assert_eq!(h.state().frame, last - 10);
    let after = &h.state().shown.as_ref().unwrap().after;
    assert_ne!(after, &before);
    // The keyboard steps too (Left = one frame back).
    h.key_press(egui::Key::ArrowLeft);
    settle(&mut h);
    assert_eq!(h.state().frame, last - 11);
    h.get_by_label("|<").click();
    settle(&mut h);
    assert_eq!(h.state().frame, 0);
    let doc = h.state().doc.as_ref().unwrap();
    assert_eq!(
        *h.state().shown.as_ref().unwrap().after,
        doc.builder.build(1)
    );
}

#[test]
fn moving_a_parameter_rebuilds_a_different_grid() {
    let mut h = harness();
    let before = h.state().shown.as_ref().unwrap().after.clone();
    let generation = h.state().doc.as_ref().unwrap().generation;
    h.get_by_role_and_label(Role::Slider, "max")
        .set_value_accesskit(3.5);
    settle(&mut h);
    let app = h.state();
    let doc = app.doc.as_ref().unwrap();
    assert_eq!(doc.params.clamp.max, 3.5);
    assert!(doc.generation > generation);
    let after = &app.shown.as_ref().unwrap().after;
    assert_ne!(after, &before);
    assert_eq!(**after, doc.builder.build(doc.session.frames.len()));
}

#[test]
fn an_out_of_domain_value_is_refused_with_its_reason() {
    let mut h = harness();
    let applied = h.state().doc.as_ref().unwrap().params.clone();
    h.get_by_role_and_label(Role::Slider, "p_free")
        .set_value_accesskit(0.7);
    settle(&mut h);
    let app = h.state();
    assert_eq!(
        app.doc.as_ref().unwrap().params,
        applied,
        "refused values are not applied"
    );
    let why = app.tuning.refusal.as_deref().expect("a reason is shown");
    assert!(
        why.contains("default_model.p_free") && why.contains("< 0.5"),
        "{why}"
    );
    assert!(h.query_by_label_contains("Not applied").is_some());
    // Reverting brings the applied parameters back and clears the message.
    h.get_by_label("Revert to the applied parameters").click();
    h.run_steps(3);
    assert!(h.state().tuning.refusal.is_none());
}

#[test]
fn a_selected_beam_fills_the_table_with_the_core_footprint() {
    let mut h = harness();
    // Pick a hit beam of the current frame and click on the map near its far end.
    let (frame, beam, end) = {
        let app = h.state();
        let doc = app.doc.as_ref().unwrap();
        let frame = app.frame;
        let beam = (0..doc.session.sensors[0].beam_count())
            .find(|&k| {
                matches!(doc.session.beam(BeamRef { frame, sensor: 0, beam: k }).unwrap().reading, Reading::Hit(z) if z > 3.0)
            })
            .unwrap();
        let ray = doc
            .session
            .beam(BeamRef {
                frame,
                sensor: 0,
                beam,
            })
            .unwrap();
        let Reading::Hit(z) = ray.reading else {
            unreachable!()
        };
        let at = gridscope::Point2::new(
            ray.origin.x + 0.8 * z * ray.heading.cos(),
            ray.origin.y + 0.8 * z * ray.heading.sin(),
        );
        (frame, beam, app.grid_view.transform.unwrap().to_screen(at))
    };
    h.event(egui::Event::PointerMoved(end));
    h.event(egui::Event::PointerButton {
        pos: end,
        button: egui::PointerButton::Primary,
        pressed: true,
        modifiers: Default::default(),
    });
    h.event(egui::Event::PointerButton {
        pos: end,
        button: egui::PointerButton::Primary,
        pressed: false,
        modifiers: Default::default(),
    });
    h.run_steps(3);
    assert_eq!(h.state().selection.beam, Some((0, beam)));
    let b = BeamRef {
        frame,
        sensor: 0,
        beam,
    };
    let (records, expected) = {
        let app = h.state_mut();
        let records = app.footprint_records().to_vec();
        let doc = app.doc.as_ref().unwrap();
        let before = &app.shown.as_ref().unwrap().before;
        (records, doc.builder.probe(before, b))
    };
    assert_eq!(records, expected);
    assert!(!records.is_empty());
    // The table's first row is on screen with the core's numbers.
    let first = &records[0];
    let text = format!("{:+.4}", first.touch.increment);
    assert!(
        h.query_all_by_label(&text).next().is_some(),
        "row {text:?} not shown"
    );
    assert!(
        h.query_by_label_contains(&format!("{} cells touched", records.len()))
            .is_some()
    );
}

#[test]
fn export_writes_a_bundle_that_loads_back() {
    let mut h = harness();
    let dir = scratch("window-export");
    let prefix = dir.join("from-window");
    h.get_by_label("File").click();
    h.run_steps(2);
    h.get_by_label_contains("Export map bundle").click();
    h.run_steps(2);
    assert!(
        h.query_by_role(Role::TextInput).is_some(),
        "the path prompt is open"
    );
    h.state_mut().file_menu.prompt.as_mut().unwrap().text = prefix.display().to_string();
    // A new window needs a sizing pass or two before its buttons sit where they are drawn.
    h.run_steps(4);
    h.get_by_label("OK").click();
    h.run_steps(3);
    assert!(h.state().file_menu.prompt.is_none(), "the prompt closed");
    settle(&mut h);
    let loaded = gridscope::load_bundle(&prefix, 100_000_000).expect("the bundle loads");
    assert_eq!(loaded.grid, *h.state().shown.as_ref().unwrap().after);
    // The Netpbm copy is written only when asked for.
    assert!(!dir.join("from-window.pgm").exists());
    let meta = std::fs::read_to_string(dir.join("from-window.map.ron")).unwrap();
    assert!(meta.contains("max: 50.0") && meta.contains("Kestrel Yard door cycle"));
}

#[test]
fn a_refused_file_keeps_what_was_loaded() {
    let mut h = harness();
    let dir = scratch("window-refuse");
    let bad = dir.join("broken.session.ron");
    std::fs::write(&bad, "(format: 1, name: \"x\", sensors: [").unwrap();
    let name = h.state().doc.as_ref().unwrap().session.name.clone();
    h.state_mut().apply(Action::OpenSession(bad.clone()));
    settle(&mut h);
    let app = h.state();
    assert_eq!(app.doc.as_ref().unwrap().session.name, name);
    match &app.notice {
        Some(gridscope::app::Notice::Problem(m)) => assert!(
            m.contains("broken.session.ron") && m.contains("line 1"),
            "{m}"
        ),
        other => panic!("{other:?}"),
    }
}

#[test]
fn a_demo_opens_by_name_as_on_the_command_line() {
    let mut h = harness();
    h.state_mut()
        .apply(Action::OpenSession("demo:sonar-ring".into()));
    settle(&mut h);
    let app = h.state();
    let doc = app.doc.as_ref().expect("a document");
    assert_eq!(doc.session.name, "Kestrel Yard sonar ring");
    assert_eq!(doc.params, gridscope::demo::params("sonar-ring").unwrap());
    // An unknown name is refused, naming the demos there are, and the sonar ring stays.
    h.state_mut()
        .apply(Action::OpenSession("demo:no-such".into()));
    settle(&mut h);
    let app = h.state();
    assert_eq!(
        app.doc.as_ref().unwrap().session.name,
        "Kestrel Yard sonar ring"
    );
    match &app.notice {
        Some(gridscope::app::Notice::Problem(m)) => {
            assert!(
                m.contains("demo:no-such") && m.contains("door-cycle"),
                "{m}"
            )
        }
        other => panic!("{other:?}"),
    }
    // A demo's profile applies to the session open, by name too.
    h.state_mut()
        .apply(Action::OpenParams("demo:door-cycle".into()));
    settle(&mut h);
    let doc = h.state().doc.as_ref().unwrap();
    assert_eq!(doc.params, gridscope::demo::params("door-cycle").unwrap());
    assert_eq!(doc.params_path, None);
}

/// Clicks at a screen position with the given button.
fn click_at(h: &mut Harness<'static, GridscopeApp>, pos: egui::Pos2, button: egui::PointerButton) {
    h.event(egui::Event::PointerMoved(pos));
    h.event(egui::Event::PointerButton {
        pos,
        button,
        pressed: true,
        modifiers: Default::default(),
    });
    h.event(egui::Event::PointerButton {
        pos,
        button,
        pressed: false,
        modifiers: Default::default(),
    });
    h.run_steps(2);
}

#[test]
fn clicking_a_cell_shows_its_history_and_an_update_jumps_there() {
    let mut h = harness();
    let doorway = gridscope::Point2::new(7.02, 4.5);
    let (cell, pos) = {
        let app = h.state();
        let spec = *app.doc.as_ref().unwrap().builder.spec();
        let cell = spec.cell_at(doorway);
        (
            cell,
            app.grid_view
                .transform
                .unwrap()
                .to_screen(spec.centre(cell)),
        )
    };
    click_at(&mut h, pos, egui::PointerButton::Secondary);
    assert_eq!(h.state().selection.cell, Some(cell));
    assert_eq!(
        h.state().settings.inspector_tab,
        gridscope::app::InspectorTab::Cell
    );
    h.state_mut().wait_for_everything();
    h.run_steps(2);
    let updates = {
        let app = h.state();
        let doc = app.doc.as_ref().unwrap();
        let expected = doc.builder.cell_history(cell, doc.session.frames.len());
        let (_, got) = app.cell_panel.history.as_ref().expect("history computed");
        assert_eq!(got, &expected);
        expected
    };
    assert!(
        h.query_by_label_contains(&format!("{} updates", updates.len()))
            .is_some()
    );
    // Click the first update's row (its frame number, inside the inspector on the right).
    let first = updates[0];
    let label = first.frame.to_string();
    let panel = h.get_by_label("Cell history").rect();
    let row = h
        .get_all_by_label(&label)
        .filter(|n| {
            n.rect().left() >= panel.left() - 2.0 && n.rect().top() > panel.bottom() + 200.0
        })
        .min_by(|a, b| a.rect().top().total_cmp(&b.rect().top()))
        .expect("the first update is listed")
        .rect()
        .center();
    click_at(&mut h, row, egui::PointerButton::Primary);
    h.state_mut().wait_for_everything();
    assert_eq!(h.state().frame, first.frame);
    assert_eq!(h.state().selection.beam, Some((first.sensor, first.beam)));
}

#[test]
fn pinning_a_and_changing_b_shows_the_difference() {
    let mut h = harness();
    h.get_by_label("Compare").click();
    h.run_steps(2);
    h.get_by_label("Pin current parameters as A").click();
    h.run_steps(2);
    assert!(h.state().pinned.is_some());
    h.get_by_role_and_label(Role::Slider, "max")
        .set_value_accesskit(3.5);
    h.run_steps(2);
    settle(&mut h);
    settle(&mut h);
    let (a, b) = {
        let app = h.state();
        let a = app
            .pinned
            .as_ref()
            .unwrap()
            .shown
            .as_ref()
            .expect("A was rebuilt")
            .1
            .clone();
        (a, app.shown.as_ref().unwrap().after.clone())
    };
    assert_eq!(h.state().pinned.as_ref().unwrap().params.clamp.max, 50.0);
    let changed = gridscope::score::class_changes(&a, &b)
        .unwrap()
        .iter()
        .map(|c| c.cells.len())
        .sum::<usize>();
    assert!(changed > 0);
    assert!(
        h.query_by_label(&format!("{changed} cells changed class"))
            .is_some(),
        "the count is shown"
    );
    assert!(
        h.query_by_label("clamp.max").is_some(),
        "the differing parameter is listed"
    );
    h.get_by_label("Difference").click();
    h.run_steps(2);
    assert_eq!(h.state().layer, gridscope::app::Layer::Difference);
}

#[test]
fn leaving_frames_out_changes_the_map_and_is_saved_with_the_parameters() {
    let mut h = harness();
    let before = h.state().shown.as_ref().unwrap().after.clone();
    h.get_by_role_and_label(Role::SpinButton, "frames")
        .set_value_accesskit(240.0);
    h.run_steps(1);
    h.get_by_role_and_label(Role::SpinButton, "to")
        .set_value_accesskit(479.0);
    h.run_steps(1);
    h.get_by_label("Leave these frames out").click();
    h.run_steps(2);
    h.state_mut().wait_for_everything();
    h.run_steps(2);
    let app = h.state();
    let doc = app.doc.as_ref().unwrap();
    assert_eq!(doc.params.exclude.frames, vec![240..=479]);
    let after = &app.shown.as_ref().unwrap().after;
    assert_ne!(after, &before);
    // With the shut door's frames left out, the doorway cell is free at the end.
    let cell = doc
        .builder
        .spec()
        .cell_at(gridscope::Point2::new(7.02, 4.5));
    assert!(after.get(cell).unwrap() < 0.0);
    let dir = scratch("window-exclusions");
    let path = dir.join("left-out.params.ron");
    h.state_mut().apply(Action::SaveParams(path.clone()));
    settle(&mut h);
    let saved = gridscope::Params::load(&path).unwrap();
    assert_eq!(saved.exclude.frames, vec![240..=479]);
}

#[test]
fn the_change_finder_finds_the_door_closing() {
    let mut h = harness();
    h.get_by_label("Changes").click();
    h.run_steps(2);
    h.state_mut().changes_panel.from = 200;
    h.state_mut().changes_panel.to = 300;
    h.get_by_label("Find changes").click();
    h.run_steps(1);
    h.state_mut().wait_for_everything();
    h.run_steps(2);
    let app = h.state();
    let (_, clusters) = app.changes_panel.found.as_ref().expect("search finished");
    let spec = app.doc.as_ref().unwrap().builder.spec();
    let door = spec.cell_at(gridscope::Point2::new(7.02, 4.5));
    // The door shut at frame 240: its cells went from free to occupied within the window.
    let cluster = clusters
        .iter()
        .find(|c| c.cells.contains(&door))
        .expect("the doorway changed");
    assert_eq!(
        (cluster.from, cluster.to),
        (
            gridscope::score::CellClass::Free,
            gridscope::score::CellClass::Occupied
        )
    );
    assert!(cluster.cells.len() >= 10, "{} cells", cluster.cells.len());
}
