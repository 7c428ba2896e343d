//! The sample sessions: each loads, builds, matches its plan and tells the story it documents.

use super::samples_dir;
use gridscope::demo::{self, DEMOS};
use gridscope::sim::{FloorPlan, simulate};
use gridscope::{MapBuilder, Params, Point2, Session};
use std::sync::Arc;

#[test]
fn embedded_demos_are_the_files_in_sample_sessions() {
    for d in DEMOS {
        let dir = samples_dir();
        let on_disk = std::fs::read_to_string(dir.join(format!("{}.session.ron", d.name))).unwrap();
        assert_eq!(on_disk, d.session, "{}", d.name);
        let s = demo::session(d.name).unwrap();
        let p = demo::params(d.name).unwrap();
        let reference = demo::reference(d.name).unwrap();
        assert!(!s.frames.is_empty());
        let b = MapBuilder::new(Arc::new(s), p).unwrap();
        // Maps and references share the lattice (origins are multiples of the resolution).
        assert_eq!(reference.spec().resolution, b.spec().resolution);
        let k = (reference.spec().origin.x - b.spec().origin.x) / b.spec().resolution;
        assert!((k - k.round()).abs() < 1e-6);
    }
}

#[test]
fn sessions_are_what_the_simulator_makes_of_their_plans() {
    for d in DEMOS {
        let plan = FloorPlan::load(&samples_dir().join(format!("{}.plan.ron", d.name))).unwrap();
        let fresh = simulate(&plan).unwrap();
        let stored = Session::from_ron_str(d.session, d.name).unwrap();
        assert_eq!(fresh.frames, stored.frames, "{}", d.name);
        for f in &fresh.frames {
            for sc in &f.scans {
                assert_eq!(fresh.ranges(*sc), stored.ranges(*sc), "{}", d.name);
            }
        }
    }
}

#[test]
fn door_cycle_doorway_vanishes_under_the_recorded_profile() {
    // The documented story: door D1 shuts at 30 s (frame 240) and opens at 60 s (frame 480).
    // With the recorded profile (upper clamp 50) the doorway cell stays occupied long after
    // the door opened; with the upper clamp gridscope's rule gives this model (1.45: five
    // consistent free readings clear a saturated cell) it is free again within a few frames.
    let s = Arc::new(demo::session("door-cycle").unwrap());
    let recorded = demo::params("door-cycle").unwrap();
    let doorway = Point2::new(7.02, 4.5);
    let first_free_after_reopening = |p: &Params| {
        let b = MapBuilder::new(s.clone(), p.clone()).unwrap();
        let cell = b.spec().cell_at(doorway);
        let h = b.cell_history(cell, s.frames.len());
        assert!(
            h.iter()
                .any(|u| u.frame >= 240 && u.frame < 480 && u.value > 0.0),
            "door seen shut"
        );
        h.iter()
            .find(|u| u.frame >= 480 && u.value < 0.0)
            .map(|u| u.frame)
    };
    let loose = first_free_after_reopening(&recorded).unwrap_or(usize::MAX);
    let mut tight = recorded.clone();
    tight.clamp.max = 1.45;
    let tight = first_free_after_reopening(&tight).unwrap();
    assert!(tight < 500, "tight clamp reopens at {tight}");
    assert!(
        loose > tight + 200,
        "recorded profile reopens at {loose}, tight at {tight}"
    );
}

#[test]
fn pose_slip_story_finds_the_slip_fits_the_mount_and_clock_and_realigns() {
    // The documented story, against the faults written in the plan: the localizer slipped
    // from 40 s to 45 s (frames 320..360), the scanner sits 2 degrees off its recorded mount
    // and its stamps lag the poses by 40 ms.
    use gridscope::diagnose::{
        CalibrationField, RealignWindow, agreement, calibrate, realign, suspect_stretches,
    };
    use std::sync::atomic::AtomicBool;
    let never = AtomicBool::new(false);
    let plan = FloorPlan::load(&samples_dir().join("pose-slip.plan.ron")).unwrap();
    let truth = plan.faults.sensors["lidar"];
    let s = Arc::new(demo::session("pose-slip").unwrap());
    let recorded = demo::params("pose-slip").unwrap();
    let fit = calibrate(
        &s,
        &recorded,
        "lidar",
        &[CalibrationField::MountTheta, CalibrationField::TimeOffset],
        &never,
        &|_| {},
    )
    .unwrap();
    assert!(
        (fit.after.mount_theta - truth.mount.theta)
            .to_degrees()
            .abs()
            <= 0.25,
        "{fit:?}"
    );
    assert!(
        (fit.after.time_offset - truth.lag).abs() <= 0.010,
        "{fit:?}"
    );
    assert!(
        fit.agreement.1.unwrap() > fit.agreement.0.unwrap() + 0.1,
        "{fit:?}"
    );
    let calibrated = fit.apply(&recorded);
    let b = MapBuilder::new(s.clone(), calibrated.clone()).unwrap();
    let run = agreement(&b, &never, &mut |_| {}).unwrap();
    let (_, stretches) = suspect_stretches(&run.frames).unwrap();
    let slip = stretches
        .iter()
        .max_by_key(|st| st.frames.len())
        .expect("a suspect stretch");
    assert!(
        slip.frames.start >= 315 && slip.frames.start <= 322 && slip.frames.end >= 355,
        "{stretches:?}"
    );
    let r = realign(
        &b,
        slip.frames.clone(),
        RealignWindow::default(),
        &never,
        &|_| {},
    )
    .unwrap();
    let (before, after) = r.mean_agreement();
    assert!(
        after.unwrap() > before.unwrap() + 0.3,
        "{before:?} -> {after:?}"
    );
}
