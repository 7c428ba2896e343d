//! Inputs a hostile tester would try, each refused cleanly: exit status 2 with a message that
//! names the file or option, no panic, no abort, bounded work, nothing half-written.

use super::cli::GOOD;
use super::{files_in, gridscope, samples_dir, scratch, stderr};
use std::path::Path;

/// A refusal: exit status 2, no panic, and the message mentions each of `needles`.
fn refused(args: &[&str], needles: &[&str]) -> String {
    let o = gridscope(args);
    let err = stderr(&o);
    assert_eq!(o.status.code(), Some(2), "{args:?}: {err}");
    assert!(!err.contains("panicked"), "{args:?}: {err}");
    for n in needles {
        assert!(err.contains(n), "{args:?}: expected {n:?} in {err}");
    }
    err
}

fn npy_header(descr: &str, shape: &[u64]) -> Vec<u8> {
    let dims: Vec<String> = shape.iter().map(|d| d.to_string()).collect();
    let shape = if dims.len() == 1 {
        format!("({},)", dims[0])
    } else {
        format!("({})", dims.join(", "))
    };
    let dict = format!("{{'descr': '{descr}', 'fortran_order': False, 'shape': {shape}, }}");
    let pad = (64 - (10 + dict.len() + 1) % 64) % 64;
    let mut out = b"\x93NUMPY\x01\x00".to_vec();
    out.extend_from_slice(&((dict.len() + pad + 1) as u16).to_le_bytes());
    out.extend_from_slice(dict.as_bytes());
    out.extend(std::iter::repeat_n(b' ', pad));
    out.push(b'\n');
    out
}

/// A packed session header with one 1-beam sensor and the three arrays named.
fn packed_header(dir: &Path) -> std::path::PathBuf {
    let header = dir.join("h.session.ron");
    std::fs::write(
        &header,
        r#"(format: 1, name: "packed",
            sensors: [(id: "f", kind: Ray, mount: (x: 0.0, y: 0.0, theta: 0.0),
                       angles: List([0.0]), range_min: 0.1, range_max: 5.0, cone_width: 0.0)],
            frames_from: (times: "h.times.npy", poses: "h.poses.npy", ranges: {"f": "h.f.npy"}))"#,
    )
    .unwrap();
    header
}

#[test]
fn array_shapes_whose_sizes_wrap_around_are_refused() {
    // Frames claimed: 2^62 + 1, with a few bytes of data. Before checked arithmetic the byte
    // counts wrapped, so the size checks passed and a slice was built over 2^62 floats.
    let dir = scratch("wrap");
    let header = packed_header(&dir);
    let n = (1u64 << 62) + 1;
    let mut times = npy_header("<f8", &[n]);
    times.extend_from_slice(&0f64.to_le_bytes());
    let mut poses = npy_header("<f8", &[n, 3]);
    poses.extend_from_slice(&[0u8; 24]);
    let mut ranges = npy_header("<f4", &[n, 1]);
    ranges.extend_from_slice(&1f32.to_le_bytes());
    std::fs::write(dir.join("h.times.npy"), &times).unwrap();
    std::fs::write(dir.join("h.poses.npy"), &poses).unwrap();
    std::fs::write(dir.join("h.f.npy"), &ranges).unwrap();
    let h = header.to_str().unwrap();
    let out = dir.join("back.session.ron");
    refused(
        &["pack", h, "--out", out.to_str().unwrap(), "--inline"],
        &["h.times.npy"],
    );
    refused(&["info", h], &["h.times.npy"]);
    refused(
        &["build", h, "--out", dir.join("m").to_str().unwrap()],
        &["h.times.npy"],
    );
    // 2^61 frames: the byte count of the times overflows.
    let mut times = npy_header("<f8", &[1 << 61]);
    times.extend_from_slice(&[0u8; 8]);
    std::fs::write(dir.join("h.times.npy"), &times).unwrap();
    refused(&["info", h], &["h.times.npy", "too large"]);
    // One frame, but a ranges array that claims 2^40 rows.
    let mut times = npy_header("<f8", &[1]);
    times.extend_from_slice(&0f64.to_le_bytes());
    let mut poses = npy_header("<f8", &[1, 3]);
    poses.extend_from_slice(&[0u8; 24]);
    let mut ranges = npy_header("<f4", &[1 << 40, 1]);
    ranges.extend_from_slice(&1f32.to_le_bytes());
    std::fs::write(dir.join("h.times.npy"), &times).unwrap();
    std::fs::write(dir.join("h.poses.npy"), &poses).unwrap();
    std::fs::write(dir.join("h.f.npy"), &ranges).unwrap();
    refused(&["info", h], &["h.f.npy", "shape"]);
    assert!(!out.exists());
}

#[test]
fn special_files_are_refused_by_kind() {
    refused(&["info", "/dev/zero"], &["/dev/zero", "not a regular file"]);
    let dir = scratch("devzero");
    let header = packed_header(&dir);
    std::fs::write(
        &header,
        std::fs::read_to_string(&header)
            .unwrap()
            .replace("\"h.f.npy\"", "\"/dev/zero\""),
    )
    .unwrap();
    let mut times = npy_header("<f8", &[1]);
    times.extend_from_slice(&0f64.to_le_bytes());
    let mut poses = npy_header("<f8", &[1, 3]);
    poses.extend_from_slice(&[0u8; 24]);
    std::fs::write(dir.join("h.times.npy"), &times).unwrap();
    std::fs::write(dir.join("h.poses.npy"), &poses).unwrap();
    refused(
        &["info", header.to_str().unwrap()],
        &["/dev/zero", "not a regular file"],
    );
}

#[test]
fn a_non_ascii_npy_header_is_refused() {
    let dir = scratch("npy-ascii");
    let spec = "(format: 1, resolution: 1.0, width: 2, height: 1, origin: (x: 0.0, y: 0.0), rows: NorthFirst)";
    std::fs::write(dir.join("m.map.ron"), spec).unwrap();
    let mut npy = npy_header("<f4", &[1, 2]);
    let at = npy.windows(5).position(|w| w == b"descr").unwrap();
    npy[at + 9] = 0xC3; // inside the quoted '<f4'
    npy[at + 10] = 0xA9;
    npy.extend_from_slice(&[0u8; 8]);
    std::fs::write(dir.join("m.npy"), &npy).unwrap();
    let m = dir.join("m");
    refused(
        &[
            "score",
            m.to_str().unwrap(),
            "--reference",
            "demo:glass-pass",
        ],
        &["m.npy", "ASCII"],
    );
}

#[test]
fn grids_beyond_memory_and_options_out_of_range_are_refused() {
    let dir = scratch("huge-extent");
    let params = dir.join("p.params.ron");
    std::fs::write(
        &params,
        gridscope::Params::default().to_ron_string().replace(
            "extent: None",
            "extent: Some((origin: (x: 0.0, y: 0.0), width: 4294967295, height: 4294967295))",
        ),
    )
    .unwrap();
    let p = params.to_str().unwrap();
    // The refusal names the profile, whose extent asks for the grid.
    refused(
        &[
            "info",
            "demo:glass-pass",
            "--params",
            p,
            "--cell-budget",
            "18446744073709551615",
        ],
        &["p.params.ron", "more than this machine's"],
    );
    refused(
        &["info", "demo:glass-pass", "--params", p],
        &["p.params.ron", "budget"],
    );
    // A resolution too fine for the default budget is blamed on the profile too.
    std::fs::write(
        &params,
        gridscope::Params::default()
            .to_ron_string()
            .replace("resolution: 0.05", "resolution: 0.0001"),
    )
    .unwrap();
    refused(
        &["info", "demo:glass-pass", "--params", p],
        &["p.params.ron", "budget"],
    );
    for (option, value) in [
        ("--range", "0"),
        ("--range", "NaN"),
        ("--beams", "0"),
        ("--frames", "0"),
        ("--resolution", "0"),
        ("--reps", "0"),
    ] {
        refused(&["bench", option, value], &[option]);
    }
}

#[test]
fn plans_that_ask_for_unbounded_runs_are_refused() {
    let dir = scratch("plans");
    let text = std::fs::read_to_string(samples_dir().join("glass-pass.plan.ron")).unwrap();
    let plan = dir.join("p.plan.ron");
    let out = dir.join("s.session.ron");
    let o = out.to_str().unwrap();
    // A speed that makes 10^11 frames, or a frame count past what a float can count.
    for speed in ["speed: 1e-11", "speed: 1e-300"] {
        std::fs::write(&plan, text.replace("speed: 0.5", speed)).unwrap();
        refused(
            &["simulate", plan.to_str().unwrap(), "--out", o],
            &["p.plan.ron", "route"],
        );
    }
    // A billion beams.
    std::fs::write(&plan, text.replace("count: 181", "count: 1000000000")).unwrap();
    refused(
        &["simulate", plan.to_str().unwrap(), "--out", o],
        &["p.plan.ron", "angles"],
    );
    // Coordinates out of any building.
    std::fs::write(&plan, text.replacen("x: 0.0", "x: 1e300", 1)).unwrap();
    refused(
        &["simulate", plan.to_str().unwrap(), "--out", o],
        &["p.plan.ron", "1e6 m"],
    );
    // A reference time that is not a number.
    refused(
        &[
            "simulate",
            samples_dir().join("glass-pass.plan.ron").to_str().unwrap(),
            "--out",
            o,
            "--reference-time",
            "NaN",
        ],
        &["--reference-time"],
    );
    assert_eq!(files_in(&dir), ["p.plan.ron"]);
    // A sensor reaching 2000 km still simulates (its rays stop where the building ends).
    std::fs::write(
        &plan,
        text.replace("range_max: 10.0", "range_max: 2000000.0"),
    )
    .unwrap();
    let ok = gridscope(&["simulate", plan.to_str().unwrap(), "--out", o]);
    assert!(ok.status.success(), "{}", stderr(&ok));
}

#[test]
fn sweeps_are_bounded_and_honest() {
    let dir = scratch("sweeps");
    let base = [
        "sweep",
        "demo:glass-pass",
        "--params",
        "demo:glass-pass",
        "--reference",
        "demo:glass-pass",
    ];
    let with = |extra: &[&str]| -> Vec<String> {
        base.iter().chain(extra).map(|s| s.to_string()).collect()
    };
    let run = |args: Vec<String>, needles: &[&str]| {
        let a: Vec<&str> = args.iter().map(String::as_str).collect();
        refused(&a, needles)
    };
    // 10^8 settings are refused before any is built.
    run(
        with(&[
            "--vary",
            "clamp.max=1:5:10000",
            "--vary",
            "prior=0.3:0.6:10000",
        ]),
        &["settings"],
    );
    // Three parameters.
    run(
        with(&[
            "--vary",
            "clamp.max=1:5:2",
            "--vary",
            "prior=0.3:0.6:2",
            "--vary",
            "clamp.min=-3:-1:2",
        ]),
        &["one or two"],
    );
    // A cell budget no setting fits: nothing scored, so the sweep is refused.
    let err = run(
        with(&["--vary", "clamp.max=1:5:2", "--cell-budget", "100"]),
        &["no setting could be scored"],
    );
    assert!(err.contains("budget") || err.contains("scored"), "{err}");
    assert!(files_in(&dir).is_empty());
}

#[test]
fn accepted_but_wrong_inputs_are_now_refused() {
    let dir = scratch("wrong");
    let session = dir.join("s.session.ron");
    let s = session.to_str().unwrap();
    // Unknown fields inside a sensor or a mount.
    std::fs::write(&session, GOOD.replace("range_max:", "rnage_max:")).unwrap();
    refused(
        &["info", s],
        &["s.session.ron", "unknown field `rnage_max`"],
    );
    std::fs::write(
        &session,
        GOOD.replace("theta: 0.0),\n", "theta: 0.0, z: 1.0),\n"),
    )
    .unwrap();
    refused(&["info", s], &["s.session.ron", "unknown field `z`"]);
    // A history at a point outside the map.
    std::fs::write(&session, GOOD).unwrap();
    refused(
        &["history", s, "--cell", "500,500"],
        &["--cell", "outside the map"],
    );
    // An output that names a directory.
    let o = gridscope(&["build", s, "--out", &format!("{}/", dir.display())]);
    assert_eq!(o.status.code(), Some(2), "{}", stderr(&o));
    refused(
        &["build", s, "--out", dir.to_str().unwrap()],
        &["names a directory"],
    );
    assert_eq!(files_in(&dir), ["s.session.ron"]);
    // A mistyped command is named as such.
    let o = gridscope(&["biuld", s]);
    assert_eq!(o.status.code(), Some(2));
    assert!(
        stderr(&o).contains("`biuld` is not a command") && stderr(&o).contains("`build`"),
        "{}",
        stderr(&o)
    );
    // The window on a missing file reports the file (without needing a display).
    refused(
        &["open", "/nonexistent/run.session.ron"],
        &["/nonexistent/run.session.ron"],
    );
    refused(
        &["/nonexistent/run.session.ron"],
        &["/nonexistent/run.session.ron"],
    );
    // A byte-order mark is read past.
    std::fs::write(&session, format!("\u{feff}{GOOD}")).unwrap();
    assert!(gridscope(&["info", s]).status.success());
    // Nesting too deep (in an informative field of bundle metadata, which is read past) is
    // refused in our own words.
    let meta = dir.join("deep.map.ron");
    let deep = format!(
        "(format: 1, resolution: 1.0, width: 1, height: 1, origin: (x: 0.0, y: 0.0), rows: NorthFirst, note: {}1{})",
        "[".repeat(300),
        "]".repeat(300)
    );
    std::fs::write(&meta, deep).unwrap();
    let mut npy = npy_header("<f4", &[1, 1]);
    npy.extend_from_slice(&1f32.to_le_bytes());
    std::fs::write(dir.join("deep.npy"), npy).unwrap();
    let err = refused(
        &[
            "score",
            dir.join("deep").to_str().unwrap(),
            "--reference",
            "demo:glass-pass",
        ],
        &["deep.map.ron", "nested too deeply"],
    );
    assert!(!err.contains("serde") && !err.contains("ron::"), "{err}");
    // Conversion mistakes get hints: Python's nan, a missing format, quoted field names.
    std::fs::write(
        &session,
        GOOD.replace("[1.0, 1.4, 1.9, 4.0, 3.0]", "[1.0, nan, 1.9, 4.0, 3.0]"),
    )
    .unwrap();
    refused(&["info", s], &["line 8", "`NaN`"]);
    std::fs::write(&session, GOOD.replace("format: 1,", "")).unwrap();
    refused(&["info", s], &["line 1, column 1", "format: 1"]);
    std::fs::write(&session, GOOD.replace("name:", "\"name\":")).unwrap();
    refused(&["info", s], &["line 3", "without quotes"]);
    // Positive infinity is a no-return, not an invalid reading.
    std::fs::write(
        &session,
        GOOD.replace("[1.0, 1.5, 2.0, 4.0, 0.0]", "[1.0, 1.5, 2.0, inf, 0.0]"),
    )
    .unwrap();
    let o = gridscope(&["info", s]);
    let text = String::from_utf8(o.stdout).unwrap();
    assert!(
        text.lines().any(|l| l == "no_returns=2") && text.lines().any(|l| l == "invalid=1"),
        "{text}"
    );
    // Origins print without the float noise of k * resolution.
    assert!(!text.contains("0000000000"), "{text}");
}

#[test]
fn concurrent_builds_to_one_prefix_leave_one_whole_bundle() {
    // Eight builds of different lengths to the same prefix, at once: whichever commits last,
    // its grid and its metadata belong together.
    let dir = scratch("concurrent");
    let prefix = dir.join("m");
    let p = prefix.to_str().unwrap().to_string();
    let children: Vec<_> = (0..8)
        .map(|k| {
            std::process::Command::new(env!("CARGO_BIN_EXE_gridscope"))
                .args([
                    "build",
                    "demo:glass-pass",
                    "--out",
                    &p,
                    "--until",
                    &(50 + 40 * k).to_string(),
                ])
                .stdout(std::process::Stdio::null())
                .spawn()
                .unwrap()
        })
        .collect();
    for mut c in children {
        assert!(c.wait().unwrap().success());
    }
    assert_eq!(files_in(&dir), ["m.map.ron", "m.npy", "m.png"]);
    let meta = std::fs::read_to_string(dir.join("m.map.ron")).unwrap();
    let frames: usize = meta
        .lines()
        .find_map(|l| l.trim().strip_prefix("frames: "))
        .and_then(|v| v.trim_end_matches(',').parse().ok())
        .expect("frames in the metadata");
    let loaded = gridscope::load_bundle(&prefix, 10_000_000).unwrap();
    let session = std::sync::Arc::new(gridscope::demo::session("glass-pass").unwrap());
    let b = gridscope::MapBuilder::new(session, gridscope::Params::default()).unwrap();
    assert_eq!(
        loaded.grid,
        b.build(frames),
        "the grid is the metadata's {frames} frames"
    );
}

#[test]
fn a_failed_simulation_write_leaves_nothing() {
    // The reference bundle cannot be written (its folder does not exist): the session is not
    // left behind on its own.
    let dir = scratch("sim-fail");
    let out = dir.join("s.session.ron");
    let o = gridscope(&[
        "simulate",
        samples_dir().join("glass-pass.plan.ron").to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
        "--reference",
        dir.join("no/such/dir/ref").to_str().unwrap(),
    ]);
    assert_eq!(o.status.code(), Some(1), "{}", stderr(&o));
    assert!(files_in(&dir).is_empty(), "{:?}", files_in(&dir));
}

#[cfg(unix)]
#[test]
fn an_interrupted_export_leaves_only_the_previous_bundle() {
    // A build killed at random moments (SIGKILL cannot be caught) leaves the previous bundle
    // whole and no temporary files: parts are written unnamed until they are committed.
    let dir = scratch("killed");
    let prefix = dir.join("m");
    let p = prefix.to_str().unwrap().to_string();
    let params = dir.join("fine.params.ron");
    std::fs::write(
        &params,
        gridscope::Params::default()
            .to_ron_string()
            .replace("resolution: 0.05", "resolution: 0.01"),
    )
    .unwrap();
    let build = |extra: &[&str]| {
        let mut args = vec![
            "build".to_string(),
            "demo:glass-pass".into(),
            "--out".into(),
            p.clone(),
        ];
        args.extend(extra.iter().map(|s| s.to_string()));
        std::process::Command::new(env!("CARGO_BIN_EXE_gridscope"))
            .args(&args)
            .stdout(std::process::Stdio::null())
            .stderr(std::process::Stdio::null())
            .spawn()
            .unwrap()
    };
    assert!(build(&["--until", "20"]).wait().unwrap().success());
    let before = std::fs::read(dir.join("m.npy")).unwrap();
    for delay_ms in [150u64, 400, 700, 1000] {
        let mut child = build(&["--params", params.to_str().unwrap()]);
        std::thread::sleep(std::time::Duration::from_millis(delay_ms));
        let _ = child.kill();
        let status = child.wait().unwrap();
        let names = files_in(&dir);
        assert_eq!(
            names,
            ["fine.params.ron", "m.map.ron", "m.npy", "m.png"],
            "after {delay_ms} ms"
        );
        if !status.success() {
            assert_eq!(
                std::fs::read(dir.join("m.npy")).unwrap(),
                before,
                "after {delay_ms} ms"
            );
        }
        assert!(gridscope::load_bundle(&prefix, 100_000_000).is_ok());
    }
}

#[test]
fn beams_from_far_outside_a_fixed_extent_cost_only_the_cells_inside() {
    // The robot stands outside a small fixed extent and its no-returns reach 2000 km: the walk
    // starts where each beam enters the grid, so history and build answer at once, and agree.
    let dir = scratch("far-beams");
    let session = dir.join("s.session.ron");
    std::fs::write(
        &session,
        GOOD.replace("range_max: 4.0", "range_max: 2000000.0")
            .replace("[1.0, 1.5, 2.0, 4.0, 0.0]", "[inf, inf, inf, inf, inf]"),
    )
    .unwrap();
    let params = dir.join("p.params.ron");
    std::fs::write(
        &params,
        gridscope::Params::default().to_ron_string().replace(
            "extent: None",
            "extent: Some((origin: (x: 3.0, y: -1.0), width: 40, height: 40))",
        ),
    )
    .unwrap();
    let (s, p) = (session.to_str().unwrap(), params.to_str().unwrap());
    let o = gridscope(&["history", s, "--params", p, "--cell", "3.9,0.02"]);
    assert!(o.status.success(), "{}", stderr(&o));
    let csv = String::from_utf8(o.stdout).unwrap();
    assert!(csv.lines().count() > 1, "{csv}");
    let out = dir.join("m");
    let o = gridscope(&["build", s, "--params", p, "--out", out.to_str().unwrap()]);
    assert!(o.status.success(), "{}", stderr(&o));
    let last: f32 = csv
        .lines()
        .last()
        .and_then(|l| l.rsplit(',').next())
        .and_then(|v| v.parse().ok())
        .unwrap();
    let grid = gridscope::load_bundle(&out, 10_000).unwrap().grid;
    let cell = grid.spec().cell_at(gridscope::Point2::new(3.9, 0.02));
    assert_eq!(grid.get(cell), Some(last));
}
