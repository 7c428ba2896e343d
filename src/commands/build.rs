//! Commands that write files: `build` (a map bundle), `simulate` (a session and its reference
//! bundle) and `pack` (a session in the packed layout, or back inline).

use super::{builder_for, check_out_prefix, load_params, load_session};
use crate::error::{Error, InputError, Problem};
use crate::export::{ExportOptions, Provenance, bundle_files, with_suffix};
use crate::grid::DEFAULT_CELL_BUDGET;
use crate::io::atomic::{write_all_atomically, write_group};
use crate::sim::{self, FloorPlan, reference_map};
use std::io::Write;
use std::path::{Path, PathBuf};
use std::sync::Arc;

/// Arguments of `gridscope build`.
#[derive(clap::Args, Clone, Debug)]
pub struct BuildArgs {
    /// Session file (`*.session.ron`), or `demo:NAME` for an embedded demo.
    pub session: PathBuf,
    /// Parameter profile (`*.params.ron`), or `demo:NAME`; defaults when omitted.
    #[arg(long)]
    pub params: Option<PathBuf>,
    /// Output prefix: writes PREFIX.npy, PREFIX.png and PREFIX.map.ron.
    #[arg(long)]
    pub out: PathBuf,
    /// Integrate only the first N frames.
    #[arg(long, value_name = "N")]
    pub until: Option<usize>,
    /// Also write a Netpbm PREFIX.pgm.
    #[arg(long)]
    pub pgm: bool,
    /// Refuse grids larger than this many cells.
    #[arg(long, default_value_t = DEFAULT_CELL_BUDGET)]
    pub cell_budget: u64,
}

/// Integrates a session and writes the map bundle.
pub fn build(args: &BuildArgs, out: &mut dyn Write) -> Result<(), Error> {
    check_out_prefix(&args.out, "--out")?;
    let session = Arc::new(load_session(&args.session)?);
    let params = load_params(args.params.as_deref())?;
    let builder = builder_for(
        &session,
        &params,
        &args.session,
        args.params.as_deref(),
        args.cell_budget,
    )?;
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
    let (files, stale) = bundle_files(
        &args.out,
        &grid,
        Some(&provenance),
        ExportOptions { pgm: args.pgm },
    )?;
    write_owned(&files, &stale)?;
    let s = grid.spec();
    let _ = writeln!(
        out,
        "integrated {frames} of {} frames into {} x {} cells at {} m",
        session.frames.len(),
        s.width,
        s.height,
        s.resolution
    );
    for (p, _) in files {
        let _ = writeln!(out, "wrote {}", p.display());
    }
    Ok(())
}

/// Writes owned parts as one atomic group.
fn write_owned(files: &[(PathBuf, Vec<u8>)], stale: &[PathBuf]) -> Result<(), Error> {
    let parts: Vec<(PathBuf, &[u8])> = files.iter().map(|(p, b)| (p.clone(), &b[..])).collect();
    write_group(&parts, stale)
}

/// Arguments of `gridscope simulate`.
#[derive(clap::Args, Clone, Debug)]
pub struct SimulateArgs {
    /// Floor plan (`*.plan.ron`).
    pub plan: PathBuf,
    /// Session file to write.
    #[arg(long)]
    pub out: PathBuf,
    /// Prefix of the reference bundle (default: the session name with `.reference`).
    #[arg(long)]
    pub reference: Option<PathBuf>,
    /// World time, seconds, at which the reference is drawn (default: the last frame).
    #[arg(long)]
    pub reference_time: Option<f64>,
}

/// Runs the simulator on a plan; writes the session and the plan's reference bundle
/// (rasterised at the session's last frame time unless a time is given), all or nothing.
pub fn simulate(args: &SimulateArgs, out: &mut dyn Write) -> Result<(), Error> {
    check_out_prefix(&args.out, "--out")?;
    let prefix = match &args.reference {
        Some(p) => p.clone(),
        None => default_reference_prefix(&args.out),
    };
    check_out_prefix(&prefix, "--reference")?;
    if let Some(t) = args.reference_time
        && !t.is_finite()
    {
        return Err(InputError::new(
            "--reference-time",
            Problem::Malformed(format!("{t} is not a finite number of seconds")),
        )
        .into());
    }
    let plan = FloorPlan::load(&args.plan)?;
    let session = sim::simulate(&plan)?;
    let t = args
        .reference_time
        .unwrap_or_else(|| session.frames.last().map_or(0.0, |f| f.t));
    let reference = reference_map(&plan, t)?;
    let (mut files, stale) = bundle_files(&prefix, &reference, None, ExportOptions::default())?;
    files.insert(0, (args.out.clone(), session.to_ron_string().into_bytes()));
    write_owned(&files, &stale)?;
    let st = session.stats();
    let _ = writeln!(
        out,
        "simulated {} frames ({:.1} s, {} beams) into {}",
        st.frames,
        st.duration,
        st.beams,
        args.out.display()
    );
    for (p, _) in &files[1..] {
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

/// Arguments of `gridscope pack`.
#[derive(clap::Args, Clone, Debug)]
pub struct PackArgs {
    /// Session file (inline or packed), or `demo:NAME`.
    pub session: PathBuf,
    /// Header file to write (`X.session.ron`; arrays go beside it as `X.*.npy`).
    #[arg(long)]
    pub out: PathBuf,
    /// Write an inline session instead (the way back).
    #[arg(long)]
    pub inline: bool,
}

/// Converts a session between the inline layout and the packed one (arrays beside a header).
pub fn pack(args: &PackArgs, out: &mut dyn Write) -> Result<(), Error> {
    check_out_prefix(&args.out, "--out")?;
    let session = load_session(&args.session)?;
    let written = if args.inline {
        write_all_atomically(&[(args.out.clone(), session.to_ron_string().into_bytes())])?;
        vec![args.out.clone()]
    } else {
        crate::session::write_packed(&session, &args.out).map_err(|e| match e {
            Error::Input(mut ie) => {
                ie.file = args.session.display().to_string();
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
