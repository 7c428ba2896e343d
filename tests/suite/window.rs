//! The inspector window driven through egui_kittest (no display or GPU): the real application
//! state, real widgets found by their labels.

use super::scratch;
use egui::accesskit::Role;
use egui_kittest::Harness;
use egui_kittest::kittest::Queryable;
use gridscope::app::{Action, GridscopeApp, Settings};
use gridscope::{BeamRef, Reading};

fn harness() -> Harness<'static, GridscopeApp> {
    let app = GridscopeApp::with_demo(Settings::default());
    let mut h = Harness::builder()
        .with_size(egui::vec2(1480.0, 920.0))
        .build_ui_state(|ui, app: &mut GridscopeApp| app.ui_root(ui), app);
    settle(&mut h);
    h
}

/// Runs frames until the worker has delivered the frame shown.
fn settle(h: &mut Harness<'static, GridscopeApp>) {
    h.run_steps(2);
    h.state_mut().wait_for_worker();
    h.run_steps(2);
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
    assert_eq!(shown.after, doc.builder.build(doc.session.frames.len()));
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
        h.state().shown.as_ref().unwrap().after,
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
    assert_eq!(after, &doc.builder.build(doc.session.frames.len()));
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
    h.get_by_label("Export map bundle...").click();
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
    let loaded = gridscope::load_bundle(&prefix, 100_000_000).expect("the bundle loads");
    assert_eq!(&loaded.grid, &h.state().shown.as_ref().unwrap().after);
    assert!(dir.join("from-window.pgm").exists());
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
    h.run_steps(2);
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
