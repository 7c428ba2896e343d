//! Diagnosis from the command line: cell histories agree with builds, scores match hand
//! computations, sweeps find a best setting that is known in advance.

use super::{gridscope, scratch};
use gridscope::demo::DEMOS;
use gridscope::export::{ExportOptions, write_bundle};
use gridscope::session::{BeamAngles, Sensor};
use gridscope::sweep::{Objective, SweepPlan, Vary, sweep};
use gridscope::{
    Clamp, Grid, GridSpec, MapBuilder, ModelSpec, Params, Point2, Pose2, SensorKind, Session,
    load_bundle, logit,
};
use std::sync::Arc;
use std::sync::atomic::{AtomicBool, AtomicUsize};

#[test]
fn history_agrees_exactly_with_build_on_every_sample_session() {
    for d in DEMOS {
        let dir = scratch(&format!("history-{}", d.name));
        let prefix = dir.join("map");
        let session = format!("demo:{}", d.name);
        let o = gridscope(&[
            "build",
            &session,
            "--params",
            &session,
            "--out",
            prefix.to_str().unwrap(),
        ]);
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
        let built = load_bundle(&prefix, 100_000_000).unwrap().grid;
        let spec = *built.spec();
        let prior = logit(gridscope::demo::params(d.name).unwrap().prior) as f32;
        // Cells that changed, picked with a fixed stride, plus one that never changed.
        let changed: Vec<usize> = (0..spec.cells())
            .filter(|&i| built.values()[i] != prior)
            .collect();
        let mut cells: Vec<usize> = changed
            .iter()
            .step_by((changed.len() / 12).max(1))
            .copied()
            .collect();
        cells.push(
            (0..spec.cells())
                .find(|&i| built.values()[i] == prior)
                .unwrap(),
        );
        for i in cells {
            let c = spec.cell_of_index(i);
            let centre = spec.centre(c);
            let at = format!("{},{}", centre.x, centre.y);
            let o = gridscope(&["history", &session, "--params", &session, "--cell", &at]);
            assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
            let text = String::from_utf8(o.stdout).unwrap();
            let mut lines = text.lines();
            assert_eq!(lines.next(), Some("frame,t,sensor,beam,increment,value"));
            let rows: Vec<Vec<&str>> = lines.map(|l| l.split(',').collect()).collect();
            let last = rows.last().map_or(prior, |r| r[5].parse::<f32>().unwrap());
            assert_eq!(
                last.to_bits(),
                built.values()[i].to_bits(),
                "{} cell {c:?}: history ends at {last}, build has {}",
                d.name,
                built.values()[i]
            );
            // Frames are in the order applied, and each row's value is clamped.
            assert!(rows.windows(2).all(|w| w[0][0].parse::<usize>().unwrap() <= w[1][0].parse::<usize>().unwrap()));
        }
    }
}

/// Writes a bundle of the given probabilities (row 0 south), resolution 1 m, origin (0, 0).
fn bundle(
    dir: &std::path::Path,
    name: &str,
    width: u32,
    probabilities: &[f64],
) -> std::path::PathBuf {
    let spec = GridSpec {
        resolution: 1.0,
        origin: Point2::new(0.0, 0.0),
        width,
        height: (probabilities.len() as u32) / width,
    };
    let values = probabilities
        .iter()
        .map(|&p| if p == 0.5 { 0.0 } else { logit(p) as f32 })
        .collect();
    let prefix = dir.join(name);
    write_bundle(
        &prefix,
        &Grid::from_values(spec, values).unwrap(),
        None,
        ExportOptions::default(),
    )
    .unwrap();
    prefix
}

#[test]
fn score_command_prints_hand_computed_values() {
    let dir = scratch("score-cli");
    // Reference: occupied, free, free, occupied, undecided, occupied.
    let reference = bundle(&dir, "ref", 3, &[0.9, 0.1, 0.1, 0.9, 0.5, 0.9]);
    // Map:        0.7,     0.2,  0.6,  0.4,      0.99,      0.5.
    let map = bundle(&dir, "map", 3, &[0.7, 0.2, 0.6, 0.4, 0.99, 0.5]);
    let o = gridscope(&[
        "score",
        map.to_str().unwrap(),
        "--reference",
        ref_str(&reference),
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let text = String::from_utf8(o.stdout).unwrap();
    let get = |k: &str| -> f64 {
        text.lines()
            .find_map(|l| l.strip_prefix(&format!("{k}=")))
            .unwrap_or_else(|| panic!("{k} in {text}"))
            .parse()
            .unwrap()
    };
    assert_eq!(text.lines().count(), 6);
    assert_eq!(get("cells_compared"), 5.0);
    // Log loss, base 2 (Shannon): -(log2 .7 + log2 .8 + log2 .4 + log2 .4 + log2 .5) / 5
    //   = (0.514573 + 0.321928 + 1.321928 + 1.321928 + 1) / 5 = 0.896072.
    assert!((get("cross_entropy_bits") - 0.896_072).abs() < 1e-5);
    // Brier (1950): (.09 + .04 + .36 + .36 + .25) / 5 = 0.22.
    assert!((get("brier") - 0.22).abs() < 1e-6);
    // ROC AUC (Hanley & McNeil 1982): occupied {.7, .4, .5} vs free {.2, .6}:
    // .7 beats both (2), .4 beats .2 (1), .5 beats .2 (1): 4 of 6 pairs.
    assert!((get("auc") - 4.0 / 6.0).abs() < 1e-9);
    // Occupied calls (p > .5): .7 (right) and .6 (wrong) -> precision 1/2; recall 1/3.
    assert!((get("precision") - 0.5).abs() < 1e-12);
    assert!((get("recall") - 1.0 / 3.0).abs() < 1e-12);
    let o = gridscope(&[
        "score",
        map.to_str().unwrap(),
        "--reference",
        ref_str(&reference),
        "--json",
    ]);
    let json = String::from_utf8(o.stdout).unwrap();
    assert!(
        json.trim().starts_with("{\"cells_compared\": 5,") && json.contains("\"recall\": 0.333")
    );
    // A reference of another resolution is resampled: each map cell meets the reference cell
    // holding its centre. One 2 m cell from (0, 0), occupied, holds the centres of map cells
    // (0, 0), (1, 0), (0, 1), (1, 1) with p 0.7, 0.2, 0.4, 0.99: two occupied calls, both
    // right; two free calls, both wrong (worked by hand).
    let coarse_dir = scratch("score-cli-coarse");
    let coarse = coarse_dir.join("coarse");
    let spec = GridSpec {
        resolution: 2.0,
        origin: Point2::new(0.0, 0.0),
        width: 1,
        height: 1,
    };
    write_bundle(
        &coarse,
        &Grid::filled(spec, 1.0),
        None,
        ExportOptions::default(),
    )
    .unwrap();
    let o = gridscope(&[
        "score",
        map.to_str().unwrap(),
        "--reference",
        coarse.to_str().unwrap(),
        "--confusion",
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let text = String::from_utf8(o.stdout).unwrap();
    for line in [
        "cells_compared=4",
        "precision=1",
        "recall=0.5",
        "true_occupied=2",
        "false_free=2",
    ] {
        assert!(text.lines().any(|l| l == line), "{line} in {text}");
    }
}

#[test]
fn score_aligns_a_map_drawn_in_another_frame() {
    // The glass-pass map against its plan, both in one frame: the fitted transform is the
    // identity to within a cell and a degree (geometry of a simple case), and the scores on the
    // aligned overlap equal the plain ones.
    let dir = scratch("score-align");
    let map = dir.join("glass");
    let o = gridscope(&[
        "build",
        "demo:glass-pass",
        "--params",
        "demo:glass-pass",
        "--out",
        map.to_str().unwrap(),
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let run = |extra: &[&str]| {
        let mut args = vec![
            "score",
            map.to_str().unwrap(),
            "--reference",
            "demo:glass-pass",
        ];
        args.extend_from_slice(extra);
        let o = gridscope(&args);
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
        String::from_utf8(o.stdout).unwrap()
    };
    let aligned = run(&["--align"]);
    let get = |k: &str| -> f64 {
        aligned
            .lines()
            .find_map(|l| l.strip_prefix(&format!("{k}=")))
            .unwrap_or_else(|| panic!("{k} in {aligned}"))
            .parse()
            .unwrap()
    };
    assert!(
        get("align_x").abs() <= 0.05 && get("align_y").abs() <= 0.05,
        "{aligned}"
    );
    assert!(get("align_theta").abs() < 1f64.to_radians(), "{aligned}");
    assert!(get("align_fit") > 0.5, "{aligned}");
    assert!(get("cells_compared") > 10_000.0);
}

fn ref_str(p: &std::path::Path) -> &str {
    p.to_str().unwrap()
}

/// A run whose best upper clamp is known in advance. One beam looks east along row 0 at a
/// door 2 m away for `shut` frames, then through the open doorway at a wall 5 m away for
/// `open` frames; a second beam looks north at a wall 2 m away throughout. The reference is the
/// world at the end: the door cell free, both walls occupied.
///
/// With a band model the door cell gains logit(p_occ) per frame while the door is shut
/// (reaching the upper clamp M) and then logit(p_free) per frame. It ends at the lower clamp
/// exactly when M + open * logit(p_free) <= clamp.min. Any larger M leaves it higher (worse
/// for the door cell, by far more than the walls gain), any smaller M only weakens the walls.
/// So the best M among the candidates is the largest with M <= clamp.min - open * logit(p_free).
/// (Geometry and arithmetic of a simple case.)
fn door_world(shut: usize, open: usize) -> (Arc<Session>, Params, Grid) {
    let sensor = Sensor {
        id: "laser".into(),
        kind: SensorKind::Ray,
        mount: Pose2::default(),
        angles: BeamAngles::List(vec![0.0, std::f64::consts::FRAC_PI_2]),
        range_min: 0.05,
        range_max: 20.0,
        cone_width: 0.0,
    };
    let mut s = Session::with_sensors("door world".into(), String::new(), vec![sensor]).unwrap();
    for k in 0..shut + open {
        let east = if k < shut { 2.0 } else { 5.0 };
        s.push_frame(
            k as f64 * 0.1,
            Pose2::new(0.25, 0.25, 0.0),
            &[("laser", &[east, 2.0])],
        )
        .unwrap();
    }
    let params = Params {
        resolution: 0.5,
        clamp: Clamp {
            min: -2.0,
            max: 3.0,
        },
        default_model: ModelSpec::Band {
            thickness: 0.5,
            p_occ: 0.7,
            p_free: 0.3,
        },
        ..Params::default()
    };
    let session = Arc::new(s);
    let builder = MapBuilder::new(session.clone(), params.clone()).unwrap();
    let spec = *builder.spec();
    let mut reference = Grid::filled(spec, 0.0);
    let mut mark = |x: f64, y: f64, v: f32| {
        let i = spec.index(spec.cell_at(Point2::new(x, y))).unwrap();
        reference.values_mut()[i] = v;
    };
    for k in 0..10 {
        mark(0.25 + 0.5 * k as f64, 0.25, -4.0); // free along the east beam (door included)
        mark(0.25, 0.25 + 0.5 * k as f64 / 2.5, -4.0); // free along the north beam
    }
    mark(5.25, 0.25, 4.0); // far wall east
    mark(0.25, 2.25, 4.0); // wall north
    (session, params, reference)
}

#[test]
fn sweep_finds_the_known_best_clamp() {
    let (shut, open) = (30, 8);
    let (session, params, reference) = door_world(shut, open);
    // M* = clamp.min - open * logit(p_free) = -2 + 8 * 0.8473 = 4.78: best candidate is 4.5.
    let m_star = -2.0 - open as f64 * logit(0.3);
    assert!((m_star - 4.778).abs() < 1e-3);
    let plan = SweepPlan {
        session: session.clone(),
        base: params.clone(),
        reference: Arc::new(reference.clone()),
        vary: vec![Vary::parse("clamp.max=1:8:15").unwrap()],
        objective: Objective::CrossEntropy,
        frames: shut + open,
        cell_budget: gridscope::grid::DEFAULT_CELL_BUDGET,
    };
    let r = sweep(&plan, &AtomicBool::new(false), &AtomicUsize::new(0));
    let best = r.best.expect("a best setting");
    assert_eq!(r.rows[best].values, vec![4.5]);
    // Every reported score is what a plain build and score gives.
    for (i, row) in r.rows.iter().enumerate() {
        let p = r.params_of(&params, i);
        let g = MapBuilder::new(session.clone(), p)
            .unwrap()
            .build(shut + open);
        assert_eq!(
            row.outcome.as_ref().unwrap(),
            &gridscope::score::score(&g, &reference).unwrap()
        );
    }
    // The command line gives the same answer.
    let dir = scratch("sweep-cli");
    std::fs::write(dir.join("s.session.ron"), session.to_ron_string()).unwrap();
    std::fs::write(dir.join("p.params.ron"), params.to_ron_string()).unwrap();
    write_bundle(&dir.join("ref"), &reference, None, ExportOptions::default()).unwrap();
    let o = gridscope(&[
        "sweep",
        dir.join("s.session.ron").to_str().unwrap(),
        "--params",
        dir.join("p.params.ron").to_str().unwrap(),
        "--reference",
        dir.join("ref").to_str().unwrap(),
        "--vary",
        "clamp.max=1:8:15",
        "--save-best",
        dir.join("best.params.ron").to_str().unwrap(),
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let text = String::from_utf8(o.stdout).unwrap();
    assert!(text.lines().any(|l| l == "best: clamp.max=4.5"), "{text}");
    assert_eq!(text.lines().count(), 1 + 15 + 2);
    let best = Params::load(&dir.join("best.params.ron")).unwrap();
    assert_eq!(best.clamp.max, 4.5);
    // A parameter name that does not exist is refused before any work.
    let o = gridscope(&[
        "sweep",
        "demo:door-cycle",
        "--reference",
        "demo:door-cycle",
        "--vary",
        "clamp.maximum=1:2:2",
    ]);
    assert_eq!(o.status.code(), Some(2));
}

/// `key=value` lines of a report.
fn pairs(text: &str) -> std::collections::HashMap<String, String> {
    text.lines()
        .filter_map(|l| l.split_once('='))
        .map(|(k, v)| (k.to_string(), v.to_string()))
        .collect()
}

#[test]
fn agreement_calibrate_and_realign_from_the_command_line() {
    let dir = scratch("diagnose-cli");
    let csv = dir.join("agreement.csv");
    let o = gridscope(&[
        "agreement",
        "demo:pose-slip",
        "--params",
        "demo:pose-slip",
        "--out",
        csv.to_str().unwrap(),
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let text = std::fs::read_to_string(&csv).unwrap();
    let mut lines = text.lines();
    assert!(lines.next().unwrap().starts_with("frame,t,agreement"));
    let session = gridscope::demo::session("pose-slip").unwrap();
    assert_eq!(lines.count(), session.frames.len());

    // The plan's faults: the scanner sits 0.0349066 rad off and lags 0.04 s.
    let saved = dir.join("fitted.params.ron");
    let o = gridscope(&[
        "calibrate",
        "demo:pose-slip",
        "--params",
        "demo:pose-slip",
        "--sensor",
        "lidar",
        "--fit",
        "mount_theta,time_offset",
        "--save",
        saved.to_str().unwrap(),
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let report = pairs(&String::from_utf8_lossy(&o.stdout));
    let num = |k: &str| report[k].parse::<f64>().unwrap();
    assert!((num("mount_theta") - 0.0349066).abs() < 0.25f64.to_radians());
    assert!((num("time_offset") - 0.04).abs() < 0.01);
    assert_eq!(num("mount_x"), 0.0, "not fitted, so unchanged");
    assert!(num("agreement_after") > num("agreement_before"));
    let profile = Params::load(&saved).unwrap();
    assert_eq!(profile.calibration["lidar"].mount_theta, num("mount_theta"));

    // With the fitted profile the slip (40 s to 45 s: frames 320..360) is the suspect.
    let o = gridscope(&[
        "agreement",
        "demo:pose-slip",
        "--params",
        saved.to_str().unwrap(),
        "--out",
        csv.to_str().unwrap(),
    ]);
    let out = String::from_utf8_lossy(&o.stdout).into_owned();
    let suspect = out
        .lines()
        .filter_map(|l| l.strip_prefix("suspect="))
        .map(|l| l.split_whitespace().next().unwrap().to_string())
        .find(|r| r.starts_with("31") || r.starts_with("32"))
        .unwrap_or_else(|| panic!("no suspect at the slip: {out}"));
    let fixed = dir.join("fixed.session.ron");
    let o = gridscope(&[
        "realign",
        "demo:pose-slip",
        "--params",
        saved.to_str().unwrap(),
        "--frames",
        &suspect,
        "--out",
        fixed.to_str().unwrap(),
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let report = pairs(&String::from_utf8_lossy(&o.stdout));
    let num = |k: &str| report[k].parse::<f64>().unwrap();
    assert!(
        num("agreement_after") > num("agreement_before") + 0.3,
        "{report:?}"
    );
    assert!((num("mean_shift_m") - 0.3).abs() < 0.06, "{report:?}");
    let realigned = Session::load(&fixed).unwrap();
    assert_eq!(realigned.frames.len(), session.frames.len());

    // Never over the input or an existing file; a bad list names the option.
    let o = gridscope(&[
        "realign",
        fixed.to_str().unwrap(),
        "--frames",
        "5..9",
        "--out",
        fixed.to_str().unwrap(),
    ]);
    assert_eq!(o.status.code(), Some(2));
    assert!(
        super::stderr(&o).contains("never over its input"),
        "{}",
        super::stderr(&o)
    );
    let o = gridscope(&[
        "calibrate",
        "demo:pose-slip",
        "--sensor",
        "lidar",
        "--fit",
        "mount_yaw",
    ]);
    assert_eq!(o.status.code(), Some(2));
    assert!(super::stderr(&o).contains("--fit"), "{}", super::stderr(&o));
    let o = gridscope(&[
        "calibrate",
        "demo:pose-slip",
        "--sensor",
        "sonar",
        "--fit",
        "mount_x",
    ]);
    assert_eq!(o.status.code(), Some(2));
    assert!(super::stderr(&o).contains("lidar"), "{}", super::stderr(&o));
}
