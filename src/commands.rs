//! The batch commands behind `gridscope build`, `info` and `simulate`, free of any window.
//!
//! Each command takes plain arguments, writes its report to a `Write` and returns a typed
//! error; `main.rs` maps refusals to exit status 2 and other failures to 1.

use crate::demo;
use crate::error::{Error, InputError};
use crate::export::{ExportOptions, Provenance, with_suffix, write_all_atomically, write_bundle};
use crate::fusion::MapBuilder;
use crate::params::Params;
use crate::session::Session;
use crate::sim::{FloorPlan, reference_map, simulate};
use std::io::Write;
use std::path::{Path, PathBuf};
use std::sync::Arc;

/// Loads a session from a path, or an embedded demo named `demo:NAME`.
pub fn load_session(arg: &Path) -> Result<Session, InputError> {
    match arg.to_str().and_then(|s| s.strip_prefix("demo:")) {
        Some(name) => demo::session(name),
        None => Session::load(arg),
    }
}

/// Loads a parameter profile from a path, `demo:NAME` for a demo's suggested profile, or the
/// defaults when `None`.
pub fn load_params(arg: Option<&Path>) -> Result<Params, InputError> {
    match arg {
        None => Ok(Params::default()),
        Some(p) => match p.to_str().and_then(|s| s.strip_prefix("demo:")) {
            Some(name) => demo::params(name),
            None => Params::load(p),
        },
    }
}

/// Arguments of `gridscope build`.
#[derive(Clone, Debug)]
pub struct BuildArgs {
    /// Session file or `demo:NAME`.
    pub session: PathBuf,
    /// Parameter profile (defaults when absent).
    pub params: Option<PathBuf>,
    /// Output prefix.
    pub out: PathBuf,
    /// Integrate only the first N frames.
    pub until: Option<usize>,
    /// Also write a `.pgm`.
    pub pgm: bool,
    /// Largest grid allowed, cells.
    pub cell_budget: u64,
}

/// Integrates a session and writes the map bundle.
pub fn build(args: &BuildArgs, out: &mut dyn Write) -> Result<(), Error> {
    let session = Arc::new(load_session(&args.session)?);
    let params = load_params(args.params.as_deref())?;
    let builder = MapBuilder::with_budget(session.clone(), params.clone(), args.cell_budget)
        .map_err(|e| e.for_input(&args.session.display().to_string()))?;
    let frames = args
        .until
        .unwrap_or(session.frames.len())
        .min(session.frames.len());
    let grid = builder.build(frames);
    let provenance = Provenance {
        params,
        session: session.name.clone(),
        frames,
    };
    let written = write_bundle(
        &args.out,
        &grid,
        Some(&provenance),
        ExportOptions { pgm: args.pgm },
    )?;
    let s = grid.spec();
    let _ = writeln!(
        out,
        "integrated {frames} of {} frames into {} x {} cells at {} m",
        session.frames.len(),
        s.width,
        s.height,
        s.resolution
    );
    for p in written {
        let _ = writeln!(out, "wrote {}", p.display());
    }
    Ok(())
}

/// Prints what a session holds: sensors, frames, duration, reading counts and the extent a
/// profile gives it.
pub fn info(
    session_arg: &Path,
    params_arg: Option<&Path>,
    budget: u64,
    out: &mut dyn Write,
) -> Result<(), Error> {
    let session = Arc::new(load_session(session_arg)?);
    let params = load_params(params_arg)?;
    let st = session.stats();
    let mut w = |line: String| {
        let _ = writeln!(out, "{line}");
    };
    w(format!("name={}", session.name));
    w(format!("sensors={}", session.sensors.len()));
    for s in &session.sensors {
        w(format!(
            "sensor={} kind={:?} beams={} range_min={} range_max={} cone_width={} mount=({}, {}, {})",
            s.id,
            s.kind,
            s.beam_count(),
            s.range_min,
            s.range_max,
            s.cone_width,
            s.mount.x,
            s.mount.y,
            s.mount.theta
        ));
    }
    w(format!("frames={}", st.frames));
    w(format!("duration_s={:.3}", st.duration));
    w(format!("beams={}", st.beams));
    w(format!("hits={}", st.hits));
    w(format!("no_returns={}", st.no_returns));
    w(format!("invalid={}", st.invalid));
    w(format!(
        "frames_with_invalid={}",
        st.frames_with_invalid.len()
    ));
    let builder = MapBuilder::with_budget(session, params, budget)
        .map_err(|e| e.for_input(&session_arg.display().to_string()))?;
    let g = builder.spec();
    w(format!(
        "extent={} x {} cells, resolution {} m, origin ({}, {}) m",
        g.width, g.height, g.resolution, g.origin.x, g.origin.y
    ));
    Ok(())
}

/// Runs the simulator on a plan; writes the session and the plan's reference bundle
/// (rasterised at the session's last frame time unless `reference_time` is given).
pub fn simulate_plan(
    plan_path: &Path,
    session_out: &Path,
    reference_out: Option<&Path>,
    reference_time: Option<f64>,
    out: &mut dyn Write,
) -> Result<(), Error> {
    let plan = FloorPlan::load(plan_path)?;
    let session = simulate(&plan);
    let t = reference_time.unwrap_or_else(|| session.frames.last().map_or(0.0, |f| f.t));
    let reference = reference_map(&plan, t)?;
    let prefix = match reference_out {
        Some(p) => p.to_path_buf(),
        None => default_reference_prefix(session_out),
    };
    write_all_atomically(&[(
        session_out.to_path_buf(),
        session.to_ron_string().into_bytes(),
    )])?;
    let written = write_bundle(&prefix, &reference, None, ExportOptions::default())?;
    let st = session.stats();
    let _ = writeln!(
        out,
        "simulated {} frames ({:.1} s, {} beams) into {}",
        st.frames,
        st.duration,
        st.beams,
        session_out.display()
    );
    for p in written {
        let _ = writeln!(out, "wrote {} (reference at t = {t} s)", p.display());
    }
    Ok(())
}

/// `X.session.ron` -> `X.reference`; any other name gets `.reference` appended.
pub fn default_reference_prefix(session_out: &Path) -> PathBuf {
    let s = session_out.as_os_str().to_string_lossy();
    match s.strip_suffix(".session.ron") {
        Some(stem) => PathBuf::from(format!("{stem}.reference")),
        None => with_suffix(session_out, ".reference"),
    }
}

/// Prints, as CSV `frame,t,sensor,beam,increment,value`, every update applied in frames
/// `0..until` to the cell containing world point (x, y) metres. Values are log-odds printed
/// with the shortest text that reads back to the same f32.
pub fn history(
    session_arg: &Path,
    params_arg: Option<&Path>,
    x: f64,
    y: f64,
    until: Option<usize>,
    budget: u64,
    out: &mut dyn Write,
) -> Result<(), Error> {
    let session = Arc::new(load_session(session_arg)?);
    let params = load_params(params_arg)?;
    let builder = MapBuilder::with_budget(session.clone(), params, budget)
        .map_err(|e| e.for_input(&session_arg.display().to_string()))?;
    let cell = builder.spec().cell_at(crate::geometry::Point2::new(x, y));
    let until = until.unwrap_or(session.frames.len());
    let _ = writeln!(out, "frame,t,sensor,beam,increment,value");
    for u in builder.cell_history(cell, until) {
        let _ = writeln!(
            out,
            "{},{},{},{},{:?},{:?}",
            u.frame, u.t, session.sensors[u.sensor].id, u.beam, u.increment, u.value
        );
    }
    Ok(())
}
