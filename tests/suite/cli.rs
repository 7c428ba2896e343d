//! The command line: exit statuses, messages that name the place, nothing written on refusal.

use super::{files_in, gridscope, samples_dir, scratch, stderr};

pub const GOOD: &str = r#"(
    format: 1,
    name: "cli test",
    sensors: [(id: "front", kind: Ray, mount: (x: 0.0, y: 0.0, theta: 0.0),
               angles: Fan(start: -0.5, step: 0.25, count: 5), range_min: 0.1, range_max: 4.0, cone_width: 0.0)],
    frames: [
        (t: 0.0, pose: (x: 0.0, y: 0.0, theta: 0.0), scans: [(sensor: "front", ranges: [1.0, 1.5, 2.0, 4.0, 0.0])]),
        (t: 0.5, pose: (x: 0.2, y: 0.0, theta: 0.1), scans: [(sensor: "front", ranges: [1.0, 1.4, 1.9, 4.0, 3.0])]),
    ],
)"#;

#[test]
fn build_writes_the_bundle_and_it_loads_back() {
    let dir = scratch("build");
    let session = dir.join("good.session.ron");
    std::fs::write(&session, GOOD).unwrap();
    let prefix = dir.join("out");
    let o = gridscope(&[
        "build",
        session.to_str().unwrap(),
        "--out",
        prefix.to_str().unwrap(),
        "--pgm",
    ]);
    assert!(o.status.success(), "{}", stderr(&o));
    assert_eq!(
        files_in(&dir),
        [
            "good.session.ron",
            "out.map.ron",
            "out.npy",
            "out.pgm",
            "out.png"
        ]
    );
    let back = gridscope::load_bundle(&prefix, 1_000_000).unwrap();
    let meta = std::fs::read_to_string(dir.join("out.map.ron")).unwrap();
    assert!(
        meta.contains("frames: 2")
            && meta.contains("session: \"cli test\"")
            && meta.contains("safety standards")
    );
    // `--until 1` integrates less: the second frame's distinct readings are missing.
    let o = gridscope(&[
        "build",
        session.to_str().unwrap(),
        "--out",
        dir.join("one").to_str().unwrap(),
        "--until",
        "1",
    ]);
    assert!(o.status.success());
    let one = gridscope::load_bundle(&dir.join("one"), 1_000_000).unwrap();
    assert_ne!(one.grid.values(), back.grid.values());
}

#[test]
fn info_prints_the_counts() {
    let dir = scratch("info");
    let session = dir.join("s.session.ron");
    std::fs::write(&session, GOOD).unwrap();
    let o = gridscope(&["info", session.to_str().unwrap()]);
    assert!(o.status.success(), "{}", stderr(&o));
    let text = String::from_utf8(o.stdout).unwrap();
    for line in [
        "frames=2",
        "beams=10",
        "hits=7",
        "no_returns=2",
        "invalid=1",
        "duration_s=0.500",
        "frames_with_invalid=1",
    ] {
        assert!(text.lines().any(|l| l == line), "missing {line} in\n{text}");
    }
    assert!(text.contains("extent="));
}

#[test]
fn every_subcommand_has_help() {
    for sub in [
        vec!["--help"],
        vec!["build", "--help"],
        vec!["info", "--help"],
        vec!["simulate", "--help"],
        vec!["history", "--help"],
        vec!["score", "--help"],
        vec!["sweep", "--help"],
        vec!["pack", "--help"],
        vec!["bench", "--help"],
        vec!["open", "--help"],
    ] {
        let o = gridscope(&sub);
        assert!(o.status.success(), "{sub:?}");
        assert!(
            String::from_utf8_lossy(&o.stdout).contains("Usage"),
            "{sub:?}"
        );
    }
}

/// A refused input: exit status 2, the message names the file and `place`, nothing written.
fn assert_refused(name: &str, content: &[u8], place: &str) {
    let dir = scratch(&format!("refuse-{name}"));
    let session = dir.join(format!("{name}.session.ron"));
    std::fs::write(&session, content).unwrap();
    let prefix = dir.join("out");
    let o = gridscope(&[
        "build",
        session.to_str().unwrap(),
        "--out",
        prefix.to_str().unwrap(),
    ]);
    let err = stderr(&o);
    assert_eq!(o.status.code(), Some(2), "{name}: {err}");
    assert!(
        err.contains(&format!("{name}.session.ron")),
        "{name}: {err}"
    );
    assert!(err.contains(place), "{name}: expected {place:?} in {err}");
    assert!(!err.contains("panicked"), "{name}: {err}");
    assert_eq!(
        files_in(&dir),
        [format!("{name}.session.ron")],
        "{name}: something was written"
    );
}

#[test]
fn fatal_errors_of_the_contract_exit_2_and_name_the_place() {
    assert_refused(
        "syntax",
        GOOD.replace("(t: 0.5,", "(t: 0.5").as_bytes(),
        "line 8",
    );
    assert_refused(
        "format",
        GOOD.replace("format: 1", "format: 3").as_bytes(),
        "format 3",
    );
    assert_refused(
        "unknown-sensor",
        GOOD.replace(
            "(sensor: \"front\", ranges: [1.0, 1.4",
            "(sensor: \"rear\", ranges: [1.0, 1.4",
        )
        .as_bytes(),
        "frame 1: unknown sensor \"rear\"",
    );
    assert_refused(
        "count",
        GOOD.replace("[1.0, 1.5, 2.0, 4.0, 0.0]", "[1.0, 1.5]")
            .as_bytes(),
        "frame 0, sensor \"front\": 2 ranges",
    );
    assert_refused(
        "pose",
        GOOD.replace("x: 0.2, y: 0.0", "x: NaN, y: 0.0").as_bytes(),
        "frame 1: pose",
    );
    assert_refused(
        "time",
        GOOD.replace("t: 0.5", "t: -1.0").as_bytes(),
        "frame 1: time",
    );
    assert_refused(
        "range-max",
        GOOD.replace("range_max: 4.0", "range_max: 0.05").as_bytes(),
        "range_max",
    );
    assert_refused(
        "count-zero",
        GOOD.replace("count: 5", "count: 0").as_bytes(),
        "angles",
    );
    let dup = GOOD.replace(
        "sensors: [(id: \"front\"",
        "sensors: [(id: \"front\", kind: Cone, mount: (x: 0.0, y: 0.0, theta: 0.0), angles: List([0.0]), range_min: 0.1, range_max: 4.0, cone_width: 0.3), (id: \"front\"",
    );
    assert_refused("duplicate", dup.as_bytes(), "declared twice");
    let cone = GOOD.replace("kind: Ray", "kind: Cone");
    assert_refused("cone", cone.as_bytes(), "cone_width");
    let twice = GOOD.replace(
        "scans: [(sensor: \"front\", ranges: [1.0, 1.5, 2.0, 4.0, 0.0])]",
        "scans: [(sensor: \"front\", ranges: [1.0, 1.5, 2.0, 4.0, 0.0]), (sensor: \"front\", ranges: [1.0, 1.5, 2.0, 4.0, 0.0])]",
    );
    assert_refused("twice", twice.as_bytes(), "scanned twice");
}

#[test]
fn hostile_inputs_are_refused_cleanly() {
    assert_refused("truncated", &GOOD.as_bytes()[..GOOD.len() * 2 / 3], "line");
    let garbage: Vec<u8> = (0..20_000u32)
        .map(|i| (i.wrapping_mul(2_654_435_761) >> 7) as u8)
        .collect();
    assert_refused("garbage", &garbage, "line");
    assert_refused("empty", b"", "line");
    assert_refused(
        "huge-count",
        GOOD.replace("count: 5", "count: 99999999999999").as_bytes(),
        "angles",
    );
    assert_refused("deep", "[".repeat(50_000).as_bytes(), "line");
    // A reach of 1e30 m asks for an absurd grid: refused by the cell budget, not allocated.
    let far = GOOD
        .replace("range_max: 4.0", "range_max: 1e30")
        .replace("[1.0, 1.5, 2.0, 4.0, 0.0]", "[1.0, 1.5, 2.0, 1e29, 0.0]");
    assert_refused("budget", far.as_bytes(), "budget");
    // A missing file is refused too.
    let o = gridscope(&["build", "/nonexistent/x.session.ron", "--out", "/tmp/never"]);
    assert_eq!(o.status.code(), Some(2));
    assert!(stderr(&o).contains("/nonexistent/x.session.ron"));
    // A bad parameter profile names the field.
    let dir = scratch("bad-params");
    std::fs::write(dir.join("s.session.ron"), GOOD).unwrap();
    std::fs::write(
        dir.join("p.params.ron"),
        gridscope::Params::default()
            .to_ron_string()
            .replace("prior: 0.5", "prior: 1.5"),
    )
    .unwrap();
    let o = gridscope(&[
        "build",
        dir.join("s.session.ron").to_str().unwrap(),
        "--params",
        dir.join("p.params.ron").to_str().unwrap(),
        "--out",
        dir.join("out").to_str().unwrap(),
    ]);
    assert_eq!(o.status.code(), Some(2));
    assert!(
        stderr(&o).contains("p.params.ron") && stderr(&o).contains("`prior`"),
        "{}",
        stderr(&o)
    );
    assert_eq!(files_in(&dir), ["p.params.ron", "s.session.ron"]);
}

#[test]
fn write_failures_exit_1() {
    let dir = scratch("write-fail");
    std::fs::write(dir.join("s.session.ron"), GOOD).unwrap();
    let o = gridscope(&[
        "build",
        dir.join("s.session.ron").to_str().unwrap(),
        "--out",
        dir.join("no/such/dir/out").to_str().unwrap(),
    ]);
    assert_eq!(o.status.code(), Some(1), "{}", stderr(&o));
    assert_eq!(files_in(&dir), ["s.session.ron"]);
}

#[test]
fn simulate_writes_a_session_and_its_reference() {
    let dir = scratch("simulate");
    let session = dir.join("run.session.ron");
    let o = gridscope(&[
        "simulate",
        samples_dir().join("glass-pass.plan.ron").to_str().unwrap(),
        "--out",
        session.to_str().unwrap(),
    ]);
    assert!(o.status.success(), "{}", stderr(&o));
    let s = gridscope::Session::load(&session).unwrap();
    assert_eq!(s.sensors.len(), 2);
    let reference = gridscope::load_bundle(&dir.join("run.reference"), 100_000_000).unwrap();
    assert!(reference.grid.values().iter().any(|&v| v > 0.0));
    let bad = dir.join("bad.plan.ron");
    let text = std::fs::read_to_string(samples_dir().join("glass-pass.plan.ron")).unwrap();
    std::fs::write(&bad, text.replace("speed: 0.5", "speed: -1.0")).unwrap();
    let o = gridscope(&[
        "simulate",
        bad.to_str().unwrap(),
        "--out",
        dir.join("x.session.ron").to_str().unwrap(),
    ]);
    assert_eq!(o.status.code(), Some(2));
    assert!(stderr(&o).contains("route.speed"), "{}", stderr(&o));
}

#[test]
fn pack_converts_to_arrays_and_back() {
    let dir = scratch("pack");
    let packed = dir.join("run.session.ron");
    let o = gridscope(&["pack", "demo:glass-pass", "--out", packed.to_str().unwrap()]);
    assert!(o.status.success(), "{}", stderr(&o));
    assert_eq!(
        files_in(&dir),
        [
            "run.bumper_sonar.npy",
            "run.lidar.npy",
            "run.poses.npy",
            "run.session.ron",
            "run.times.npy"
        ]
    );
    let header = std::fs::read_to_string(&packed).unwrap();
    assert!(header.contains("frames_from") && !header.contains("ranges: ["));
    // The packed session builds the same map as the inline one.
    let a = dir.join("a");
    let b = dir.join("b");
    assert!(
        gridscope(&[
            "build",
            packed.to_str().unwrap(),
            "--out",
            a.to_str().unwrap()
        ])
        .status
        .success()
    );
    assert!(
        gridscope(&["build", "demo:glass-pass", "--out", b.to_str().unwrap()])
            .status
            .success()
    );
    assert_eq!(
        std::fs::read(dir.join("a.npy")).unwrap(),
        std::fs::read(dir.join("b.npy")).unwrap()
    );
    // And back to inline.
    let inline = dir.join("inline.session.ron");
    let o = gridscope(&[
        "pack",
        packed.to_str().unwrap(),
        "--out",
        inline.to_str().unwrap(),
        "--inline",
    ]);
    assert!(o.status.success(), "{}", stderr(&o));
    let s = gridscope::Session::load(&inline).unwrap();
    assert_eq!(
        s.frames,
        gridscope::demo::session("glass-pass").unwrap().frames
    );
    // A damaged array is refused with exit status 2, naming the file.
    std::fs::write(dir.join("run.lidar.npy"), b"\x93NUMPY garbage").unwrap();
    let o = gridscope(&["info", packed.to_str().unwrap()]);
    assert_eq!(o.status.code(), Some(2));
    assert!(stderr(&o).contains("run.lidar.npy"), "{}", stderr(&o));
}

#[test]
fn bench_reports_every_key_and_identical_grids() {
    // A tiny run: this checks the report, not the speed (speed belongs to the benchmark).
    let o = gridscope(&[
        "bench", "--frames", "40", "--beams", "181", "--width", "40", "--height", "30", "--reps",
        "1", "--seeks", "3",
    ]);
    assert!(o.status.success(), "{}", stderr(&o));
    let text = String::from_utf8(o.stdout).unwrap();
    let keys: Vec<&str> = text
        .lines()
        .filter_map(|l| l.split_once('=').map(|(k, _)| k))
        .collect();
    // The keys the benchmark promises, first and in this order.
    let promised = [
        "cells_touched",
        "floor_updates_per_s",
        "seq_updates_per_s",
        "par_updates_per_s",
        "threads",
        "speedup",
        "floor_ratio",
        "bit_identical",
        "seek_ms_median",
        "seek_ms_max",
        "load_numbers_per_s",
        "peak_rss_mb",
    ];
    assert_eq!(
        &keys[..promised.len().min(keys.len())],
        &promised[..],
        "{text}"
    );
    assert!(text.lines().any(|l| l == "bit_identical=true"), "{text}");
    let number = |key: &str| -> f64 {
        let value = text
            .lines()
            .find_map(|l| l.strip_prefix(key)?.strip_prefix('='))
            .unwrap_or_else(|| panic!("no {key} in\n{text}"));
        value.parse().unwrap_or_else(|_| panic!("{key}={value}"))
    };
    // The machine's own two-thread figure and the split's share of it: positive numbers.
    for key in ["copies_speedup", "split_efficiency"] {
        let x = number(key);
        assert!(x.is_finite() && x > 0.0, "{key}={x}");
    }
    // The quartiles of the repetitions' speedups: with the single repetition run here, all
    // three are that repetition's speedup.
    let (q1, mid, q3) = (
        number("speedup_q1"),
        number("speedup"),
        number("speedup_q3"),
    );
    assert!(mid > 0.0 && q1 == mid && q3 == mid, "{q1} {mid} {q3}");
}
