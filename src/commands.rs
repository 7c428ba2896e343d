//! The batch commands behind `gridscope build`, `info` and `simulate`, free of any window.
//!
//! Each command takes plain arguments, writes its report to a `Write` and returns a typed
//! error; `main.rs` maps refusals to exit status 2 and other failures to 1.

use crate::demo;
use crate::error::{Error, InputError};
use crate::export::{ExportOptions, Provenance, with_suffix, write_bundle};
use crate::fusion::MapBuilder;
use crate::io::atomic::write_all_atomically;
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

/// Loads a map bundle from a prefix (or either file of it), or `demo:NAME` for a demo's
/// reference map.
pub fn load_map(arg: &Path, budget: u64) -> Result<crate::grid::Grid, Error> {
    match arg.to_str().and_then(|s| s.strip_prefix("demo:")) {
        Some(name) => demo::reference(name),
        None => Ok(crate::export::load_bundle(arg, budget)?.grid),
    }
}

/// A score value as printed: shortest round-trip text, `nan` when undefined.
fn show(v: f64) -> String {
    if v.is_nan() {
        "nan".into()
    } else {
        format!("{v}")
    }
}

/// Scores map bundle `map` against bundle `reference` and prints `key=value` lines (or JSON).
pub fn score(
    map_arg: &Path,
    reference_arg: &Path,
    json: bool,
    confusion: bool,
    budget: u64,
    out: &mut dyn Write,
) -> Result<(), Error> {
    let map = load_map(map_arg, budget)?;
    let reference = load_map(reference_arg, budget)?;
    let s = crate::score::score(&map, &reference).map_err(|e| {
        InputError::new(
            format!("{} against {}", map_arg.display(), reference_arg.display()),
            crate::error::Problem::Malformed(e.to_string()),
        )
    })?;
    let mut pairs: Vec<(&str, String)> = vec![
        ("cells_compared", s.cells_compared.to_string()),
        ("cross_entropy_bits", show(s.cross_entropy_bits)),
        ("brier", show(s.brier)),
        ("auc", show(s.auc)),
        ("precision", show(s.precision)),
        ("recall", show(s.recall)),
    ];
    if confusion {
        let c = s.confusion;
        pairs.extend([
            ("true_occupied", c.true_occupied.to_string()),
            ("false_occupied", c.false_occupied.to_string()),
            ("true_free", c.true_free.to_string()),
            ("false_free", c.false_free.to_string()),
            ("unknown_occupied", c.unknown_occupied.to_string()),
            ("unknown_free", c.unknown_free.to_string()),
        ]);
    }
    if json {
        let body: Vec<String> = pairs
            .iter()
            .map(|(k, v)| format!("\"{k}\": {}", if v == "nan" { "null" } else { v.as_str() }))
            .collect();
        let _ = writeln!(out, "{{{}}}", body.join(", "));
    } else {
        for (k, v) in pairs {
            let _ = writeln!(out, "{k}={v}");
        }
    }
    Ok(())
}

/// Arguments of `gridscope sweep`.
#[derive(Clone, Debug)]
pub struct SweepArgs {
    /// Session file or `demo:NAME`.
    pub session: PathBuf,
    /// Base parameter profile.
    pub params: Option<PathBuf>,
    /// Reference bundle or `demo:NAME`.
    pub reference: PathBuf,
    /// Varied parameters.
    pub vary: Vec<crate::sweep::Vary>,
    /// What decides the best row.
    pub objective: crate::sweep::Objective,
    /// Integrate only the first N frames.
    pub until: Option<usize>,
    /// Write the best setting's profile here.
    pub save_best: Option<PathBuf>,
    /// Largest grid allowed, cells.
    pub cell_budget: u64,
}

/// Rebuilds a session for every setting of the varied parameters, scores each map against the
/// reference and prints a table and the best setting.
pub fn sweep(args: &SweepArgs, out: &mut dyn Write) -> Result<(), Error> {
    use crate::sweep::{SweepPlan, sweep};
    use std::sync::atomic::{AtomicBool, AtomicUsize};
    let session = Arc::new(load_session(&args.session)?);
    let base = load_params(args.params.as_deref())?;
    let reference = Arc::new(load_map(&args.reference, args.cell_budget)?);
    let frames = args
        .until
        .unwrap_or(session.frames.len())
        .min(session.frames.len());
    let plan = SweepPlan {
        session,
        base: base.clone(),
        reference,
        vary: args.vary.clone(),
        objective: args.objective,
        frames,
    };
    let result = sweep(&plan, &AtomicBool::new(false), &AtomicUsize::new(0));
    let mut header: Vec<String> = result.vary.iter().map(|v| v.name.clone()).collect();
    header.extend(
        [
            "cells_compared",
            "cross_entropy_bits",
            "brier",
            "auc",
            "precision",
            "recall",
        ]
        .map(String::from),
    );
    let _ = writeln!(out, "{}", header.join("\t"));
    for row in &result.rows {
        let mut cells: Vec<String> = row.values.iter().map(|v| format!("{v}")).collect();
        match &row.outcome {
            Ok(s) => cells.extend([
                s.cells_compared.to_string(),
                show(s.cross_entropy_bits),
                show(s.brier),
                show(s.auc),
                show(s.precision),
                show(s.recall),
            ]),
            Err(why) => cells.push(format!("refused: {why}")),
        }
        let _ = writeln!(out, "{}", cells.join("\t"));
    }
    match result.best {
        Some(i) => {
            let settings: Vec<String> = result
                .vary
                .iter()
                .zip(&result.rows[i].values)
                .map(|(v, x)| format!("{}={x}", v.name))
                .collect();
            let _ = writeln!(out, "best: {}", settings.join(" "));
            if let Some(path) = &args.save_best {
                let p = result.params_of(&base, i);
                write_all_atomically(&[(path.clone(), p.to_ron_string().into_bytes())])?;
                let _ = writeln!(out, "wrote {}", path.display());
            }
        }
        None => {
            let _ = writeln!(out, "best: none (no setting could be scored)");
        }
    }
    Ok(())
}

/// Converts a session between the inline layout and the packed one (arrays beside a header).
pub fn pack(
    session_arg: &Path,
    out_path: &Path,
    inline: bool,
    out: &mut dyn Write,
) -> Result<(), Error> {
    let session = load_session(session_arg)?;
    let written = if inline {
        write_all_atomically(&[(out_path.to_path_buf(), session.to_ron_string().into_bytes())])?;
        vec![out_path.to_path_buf()]
    } else {
        crate::session::write_packed(&session, out_path).map_err(|e| match e {
            Error::Input(mut ie) => {
                ie.file = session_arg.display().to_string();
                Error::Input(ie)
            }
            other => other,
        })?
    };
    for p in written {
        let _ = writeln!(out, "wrote {}", p.display());
    }
    Ok(())
}

/// Runs the benchmark and prints `key=value` lines; progress goes to stderr.
pub fn bench(
    opts: &crate::bench::BenchOptions,
    write_plan: Option<&Path>,
    out: &mut dyn Write,
) -> Result<(), Error> {
    if let Some(p) = write_plan {
        let plan = crate::sim::building_plan(&opts.building);
        let cfg = ron::ser::PrettyConfig::new().struct_names(false);
        let text = ron::ser::to_string_pretty(&plan, cfg).expect("a plan serialises");
        write_all_atomically(&[(p.to_path_buf(), text.into_bytes())])?;
    }
    let lines = crate::bench::run(opts, &mut |m| eprintln!("bench: {m}"))?;
    for (k, v) in lines {
        let _ = writeln!(out, "{k}={v}");
    }
    Ok(())
}
