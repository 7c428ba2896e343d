//! The Poses tab driven through egui_kittest (no display or GPU), on the pose-slip demo whose
//! plan injects the faults: a scanner yawed 0.0349066 rad, a clock 0.04 s late and a slip of
//! (0.24 m, -0.18 m, 2.5 deg) from 40 s to 45 s (frames 320..360). The window must show the
//! same figures the core computes, and every change it makes must be undoable and saved only
//! under a new name.

use super::{scratch, settle, window_harness};
use egui_kittest::Harness;
use egui_kittest::kittest::Queryable;
use gridscope::app::{Action, GridscopeApp, InspectorTab, Notice, Settings};
use gridscope::{Session, diagnose};
use std::sync::Arc;

fn harness() -> Harness<'static, GridscopeApp> {
    let mut app = GridscopeApp::with_demo(Settings::default());
    app.wait_for_everything();
    app.apply(Action::OpenDemo("pose-slip"));
    window_harness(app)
}

#[test]
fn a_fit_applies_the_plans_mount_and_clock_and_the_slip_is_realigned_undone_and_saved() {
    let mut h = harness();
    assert_eq!(
        h.state().doc.as_ref().unwrap().session.name,
        gridscope::demo::session("pose-slip").unwrap().name
    );
    h.get_by_label("Poses").click();
    h.run_steps(2);
    assert_eq!(h.state().settings.inspector_tab, InspectorTab::Poses);

    // The check fills the strip under the timeline, one value per frame, as the core's.
    h.get_by_label("Check agreement").click();
    settle(&mut h);
    let frames = h.state().doc.as_ref().unwrap().session.frames.len();
    {
        let app = h.state();
        let checked = app.poses_panel.checked.as_ref().expect("checked");
        assert_eq!(checked.run.frames.len(), frames);
        let doc = app.doc.as_ref().unwrap();
        let core = diagnose::agreement(
            &doc.builder,
            &std::sync::atomic::AtomicBool::new(false),
            &mut |_| {},
        )
        .unwrap();
        assert_eq!(checked.run.values(), core.values());
        assert!(app.poses_panel.strip(doc).is_some());
    }
    // Before the fit the whole run agrees poorly and widely: the tab says to fit first.
    assert!(h.query_by_label_contains("scatter too widely").is_some());

    // The fit (mount yaw and clock, the tab's default choice) finds the plan's faults within
    // a quarter degree and 10 ms; applying it is an edit of the parameters.
    h.get_by_label("Fit").click();
    settle(&mut h);
    let fit = h.state().poses_panel.fit.clone().expect("a fit");
    assert!((fit.after.mount_theta - 0.0349066).abs() < 0.25f64.to_radians());
    assert!((fit.after.time_offset - 0.04).abs() < 0.01);
    assert!(fit.agreement.1 > fit.agreement.0);
    h.get_by_label("Apply the fit").click();
    settle(&mut h);
    let fitted = h.state().doc.as_ref().unwrap().params.clone();
    assert_eq!(fitted.calibration["lidar"], fit.after);

    // Checked again with the fit, the slip is a suspect stretch.
    h.get_by_label("Check agreement").click();
    settle(&mut h);
    let slip = h
        .state()
        .poses_panel
        .checked
        .as_ref()
        .unwrap()
        .stretches
        .iter()
        .find(|s| s.frames.start < 340 && s.frames.end > 340)
        .map(|s| s.frames.clone())
        .expect("a suspect stretch over the slip");
    assert!(slip.start >= 310 && slip.end <= 370, "{slip:?}");

    // Leaving the stretch out is an edit, undone by Undo.
    h.state_mut().apply(Action::LeaveOutFrames(slip.clone()));
    settle(&mut h);
    let left_out = slip.start..=slip.end - 1;
    assert!(
        h.state().doc.as_ref().unwrap().params.exclude.frames == vec![left_out],
        "{:?}",
        h.state().doc.as_ref().unwrap().params.exclude
    );
    h.state_mut().apply(Action::Undo);
    settle(&mut h);
    assert_eq!(h.state().doc.as_ref().unwrap().params, fitted);

    // Re-aligning moves the slipped poses by about the injected 0.30 m.
    let original = h.state().doc.as_ref().unwrap().session.clone();
    h.state_mut().apply(Action::Realign(slip.clone()));
    settle(&mut h);
    let (_, r) = h.state().poses_panel.realigned.clone().expect("re-aligned");
    let (before, after) = r.mean_agreement();
    assert!(
        after.unwrap() > before.unwrap() + 0.3,
        "{before:?} -> {after:?}"
    );
    h.get_by_label("Use these poses").click();
    settle(&mut h);
    let realigned = h.state().doc.as_ref().unwrap().session.clone();
    assert!(h.state().doc.as_ref().unwrap().run_unsaved());
    assert!(!Arc::ptr_eq(&realigned, &original));
    let moved: Vec<f64> = slip
        .clone()
        .map(|f| {
            let d = diagnose::pose_difference(&realigned.frames[f].pose, &original.frames[f].pose);
            d.x.hypot(d.y)
        })
        .collect();
    let mean = moved.iter().sum::<f64>() / moved.len() as f64;
    assert!((mean - 0.3).abs() < 0.08, "mean shift {mean}");
    for f in (0..frames).filter(|f| !slip.contains(f)) {
        assert_eq!(realigned.frames[f].pose, original.frames[f].pose);
    }
    // The map shown is the one the core builds from the re-aligned run.
    let shown = h.state().shown.as_ref().unwrap().after.clone();
    let core = gridscope::MapBuilder::new(realigned.clone(), fitted.clone()).unwrap();
    assert_eq!(*shown, core.build(h.state().frame + 1));
    assert!(h.query_by_label_contains("poses not saved").is_some());

    // Undo gives back the recorded poses, redo the re-aligned ones.
    h.state_mut().apply(Action::Undo);
    settle(&mut h);
    assert!(Arc::ptr_eq(
        &h.state().doc.as_ref().unwrap().session,
        &original
    ));
    assert!(!h.state().doc.as_ref().unwrap().run_unsaved());
    h.state_mut().apply(Action::Redo);
    settle(&mut h);
    assert!(Arc::ptr_eq(
        &h.state().doc.as_ref().unwrap().session,
        &realigned
    ));
    assert!(
        h.state()
            .work_to_lose()
            .contains(&"re-aligned poses not saved")
    );

    // Saving never goes over an existing file; a new name takes the run, poses and all.
    let dir = scratch("window-poses");
    let taken = dir.join("taken.session.ron");
    std::fs::write(&taken, "keep me").unwrap();
    h.state_mut().apply(Action::SaveSession {
        path: taken.clone(),
        packed: false,
    });
    settle(&mut h);
    match &h.state().notice {
        Some(Notice::Problem(m)) => assert!(m.contains("already exists"), "{m}"),
        other => panic!("expected a refusal, found {other:?}"),
    }
    assert_eq!(std::fs::read_to_string(&taken).unwrap(), "keep me");
    let path = dir.join("fixed.session.ron");
    h.state_mut().apply(Action::SaveSession {
        path: path.clone(),
        packed: true,
    });
    settle(&mut h);
    let doc = h.state().doc.as_ref().unwrap();
    assert!(!doc.run_unsaved());
    assert_eq!(doc.source, gridscope::app::Source::File(path.clone()));
    let back = Session::load(&path).unwrap();
    for (a, b) in back.frames.iter().zip(&realigned.frames) {
        assert_eq!(a.pose, b.pose);
    }
    // The saved file is now the input: saving onto it is refused too.
    h.state_mut().apply(Action::SaveSession {
        path: path.clone(),
        packed: false,
    });
    settle(&mut h);
    assert!(matches!(&h.state().notice, Some(Notice::Problem(m)) if m.contains("never over")));
}
