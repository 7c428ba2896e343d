//! The diagnosis against faults of known size, injected by the simulator into a floor plan of
//! our own (seeded): the truth is what the plan says it did wrong.

use super::*;
use crate::geometry::{Point2, Pose2};
use crate::params::Params;
use crate::session::{BeamAngles, Sensor, SensorKind, Session};
use crate::sim::{
    Faults, FloorPlan, Material, NoReturnReport, Noise, PoseError, PoseFault, Route, SensorFault,
    SimSensor, Wall, route_poses, simulate,
};
use std::sync::Arc;
use std::sync::atomic::AtomicBool;

/// A 14 m x 9 m hall with two partitions, two pillars and a slanted screen, driven around in a
/// loop with turns in place at every waypoint, by a 360-degree laser at 8 Hz.
pub(crate) fn hall(faults: Faults) -> FloorPlan {
    let p = Point2::new;
    let wall = |a: Point2, b: Point2| Wall {
        a,
        b,
        material: Material::Solid,
        present: None,
        label: String::new(),
    };
    let mut walls = vec![
        wall(p(0.0, 0.0), p(14.0, 0.0)),
        wall(p(14.0, 0.0), p(14.0, 9.0)),
        wall(p(14.0, 9.0), p(0.0, 9.0)),
        wall(p(0.0, 9.0), p(0.0, 0.0)),
        wall(p(5.0, 0.0), p(5.0, 3.0)),
        wall(p(9.0, 9.0), p(9.0, 5.5)),
        wall(p(7.0, 6.5), p(8.5, 7.5)),
    ];
    for (x, y) in [(2.5, 6.0), (11.0, 2.0)] {
        let c = [p(x, y), p(x + 1.0, y), p(x + 1.0, y + 1.0), p(x, y + 1.0)];
        for k in 0..4 {
            walls.push(wall(c[k], c[(k + 1) % 4]));
        }
    }
    FloorPlan {
        format: 1,
        name: "hall with faults".into(),
        notes: String::new(),
        walls,
        free_space: vec![vec![p(0.0, 0.0), p(14.0, 0.0), p(14.0, 9.0), p(0.0, 9.0)]],
        route: Route {
            waypoints: vec![
                p(1.5, 1.5),
                p(1.5, 4.5),
                p(4.0, 4.8),
                p(6.5, 2.0),
                p(8.0, 1.5),
                p(12.5, 1.2),
                p(12.8, 4.5),
                p(10.5, 4.8),
                p(7.0, 4.5),
                p(6.0, 7.8),
                p(3.5, 8.0),
                p(1.5, 7.5),
                p(1.5, 5.0),
            ],
            speed: 0.6,
            turn_rate: 1.0,
            rate: 8.0,
        },
        sensors: vec![SimSensor {
            sensor: Sensor {
                id: "laser".into(),
                kind: SensorKind::Ray,
                mount: Pose2::new(0.2, 0.0, 0.0),
                angles: BeamAngles::Fan {
                    start: -std::f64::consts::PI,
                    step: 2f64.to_radians(),
                    count: 180,
                },
                range_min: 0.05,
                range_max: 15.0,
                cone_width: 0.0,
            },
            noise: Noise {
                sigma: 0.01,
                dropout: 0.001,
                miss: 0.0,
            },
            cone_rays: 9,
            no_return: NoReturnReport::RangeMax,
        }],
        seed: 17,
        reference_resolution: 0.05,
        faults,
    }
}

fn run(faults: Faults) -> (FloorPlan, Arc<Session>) {
    let plan = hall(faults);
    let session = Arc::new(simulate(&plan).unwrap());
    (plan, session)
}

fn sensor_fault(mount: Pose2, lag: f64) -> Faults {
    Faults {
        poses: Vec::new(),
        sensors: [("laser".to_string(), SensorFault { mount, lag })].into(),
    }
}

fn jump(from: f64, until: f64, error: Pose2) -> Faults {
    Faults {
        poses: vec![PoseFault {
            from,
            until,
            error: PoseError::Jump(error),
        }],
        sensors: Default::default(),
    }
}

fn never() -> AtomicBool {
    AtomicBool::new(false)
}

#[test]
fn the_frames_of_a_pose_slip_rank_lowest() {
    let (_, session) = run(jump(20.0, 24.0, Pose2::new(0.25, -0.15, 3f64.to_radians())));
    let builder = MapBuilder::new(session.clone(), Params::default()).unwrap();
    let result = agreement(&builder, &never(), &mut |_| {}).unwrap();
    let faulty: Vec<usize> = (0..session.frames.len())
        .filter(|&f| (20.0..24.0).contains(&session.frames[f].t))
        .collect();
    let mut ranked: Vec<(f64, usize)> = result
        .frames
        .iter()
        .map(|f| (f.agreement().unwrap_or(1.0), f.frame))
        .collect();
    ranked.sort_by(|a, b| a.0.total_cmp(&b.0));
    let lowest: Vec<usize> = ranked[..faulty.len()].iter().map(|r| r.1).collect();
    let found = faulty.iter().filter(|f| lowest.contains(f)).count();
    assert!(
        found * 5 >= faulty.len() * 4,
        "{found} of {} slipped frames among the lowest",
        faulty.len()
    );
    let (typical, stretches) = suspect_stretches(&result.frames).unwrap();
    assert!(typical.median > 0.6, "{typical:?}");
    assert!(
        stretches
            .iter()
            .any(|s| s.frames.contains(&faulty[faulty.len() / 2])),
        "{stretches:?}"
    );
}

/// Fits one correction of the laser on a run simulated with this mount error and clock lag.
fn fit_one(mount: Pose2, lag: f64, field: CalibrationField) -> super::Calibration {
    let (_, session) = run(sensor_fault(mount, lag));
    calibrate(
        &session,
        &Params::default(),
        "laser",
        &[field],
        &never(),
        &|_| {},
    )
    .unwrap()
}

#[test]
fn a_two_degree_mount_yaw_is_recovered_within_a_quarter_degree() {
    let truth = 2f64.to_radians();
    let fit = fit_one(
        Pose2::new(0.0, 0.0, truth),
        0.0,
        CalibrationField::MountTheta,
    );
    let err = (fit.after.mount_theta - truth).to_degrees();
    assert!(err.abs() <= 0.25, "off by {err} degrees: {fit:?}");
    assert!(fit.sharpness.1 > fit.sharpness.0, "{fit:?}");
    assert!(fit.agreement.1 > fit.agreement.0, "{fit:?}");
}

#[test]
fn a_forty_millisecond_lag_on_a_turning_robot_is_recovered_within_ten() {
    let fit = fit_one(Pose2::default(), 0.040, CalibrationField::TimeOffset);
    let err = fit.after.time_offset - 0.040;
    assert!(err.abs() <= 0.010, "off by {err} s: {fit:?}");
}

#[test]
fn realigning_a_slipped_stretch_restores_its_poses() {
    let error = Pose2::new(0.3 * 0.8, 0.3 * 0.6, 2f64.to_radians());
    let (plan, session) = run(jump(30.0, 33.0, error));
    let builder = MapBuilder::new(session.clone(), Params::default()).unwrap();
    let frames: Vec<usize> = (0..session.frames.len())
        .filter(|&f| (30.0..33.0).contains(&session.frames[f].t))
        .collect();
    let stretch = frames[0]..frames[frames.len() - 1] + 1;
    let r = realign(
        &builder,
        stretch.clone(),
        RealignWindow::default(),
        &never(),
        &|_| {},
    )
    .unwrap();
    let truth = route_poses(&plan.route);
    for (k, f) in stretch.enumerate() {
        let (t, want) = truth[f];
        assert_eq!(t, session.frames[f].t);
        let got = r.after[k];
        let d = ((got.x - want.x).powi(2) + (got.y - want.y).powi(2)).sqrt();
        let turn = crate::geometry::wrap_angle(got.theta - want.theta).to_degrees();
        assert!(
            d <= 0.05 && turn.abs() <= 1.0,
            "frame {f}: {d} m, {turn} degrees off"
        );
    }
    let (before, after) = r.mean_agreement();
    assert!(after > before, "{before:?} -> {after:?}");
    let fixed = with_poses(&session, &r);
    assert_eq!(fixed.frames.len(), session.frames.len());
    assert_eq!(fixed.frames[0].pose, session.frames[0].pose);
}

#[test]
fn a_fault_free_run_agrees_well_and_needs_no_correction() {
    let (_, session) = run(Faults::default());
    let builder = MapBuilder::new(session.clone(), Params::default()).unwrap();
    let result = agreement(&builder, &never(), &mut |_| {}).unwrap();
    assert_eq!(result.frames.len(), session.frames.len());
    let overall = result.overall().unwrap();
    assert!(overall > 0.7, "{overall}");
    let csv = agreement_csv(&result);
    assert!(csv.starts_with("frame,t,agreement,"));
    assert_eq!(csv.lines().count(), session.frames.len() + 1);
}

#[test]
fn mount_and_clock_are_fitted_together() {
    let truth = Pose2::new(0.06, -0.04, 2f64.to_radians());
    let (_, session) = run(sensor_fault(truth, 0.040));
    let fit = calibrate(
        &session,
        &Params::default(),
        "laser",
        &CalibrationField::ALL,
        &never(),
        &|_| {},
    )
    .unwrap();
    let a = fit.after;
    assert!(
        (a.mount_theta - truth.theta).to_degrees().abs() <= 0.25,
        "{fit:?}"
    );
    assert!((a.time_offset - 0.040).abs() <= 0.010, "{fit:?}");
    assert!((a.mount_x - truth.x).abs() <= 0.03, "{fit:?}");
    assert!((a.mount_y - truth.y).abs() <= 0.03, "{fit:?}");
}
