//! Commands that report on a session: `info` (what it holds, the extent a profile gives it)
//! and `history` (every update of one cell, as CSV).

use super::{builder_for, load_params, load_session};
use crate::error::{Error, InputError, Problem};
use crate::geometry::Point2;
use crate::grid::DEFAULT_CELL_BUDGET;
use std::io::Write;
use std::path::PathBuf;
use std::sync::Arc;

/// Arguments of `gridscope info`.
#[derive(clap::Args, Clone, Debug)]
pub struct InfoArgs {
    /// Session file, or `demo:NAME`.
    pub session: PathBuf,
    /// Parameter profile deciding the extent; defaults when omitted.
    #[arg(long)]
    pub params: Option<PathBuf>,
    /// Refuse grids larger than this many cells.
    #[arg(long, default_value_t = DEFAULT_CELL_BUDGET)]
    pub cell_budget: u64,
}

/// Prints what a session holds: sensors, frames, duration, reading counts and the extent a
/// profile gives it.
pub fn info(args: &InfoArgs, out: &mut dyn Write) -> Result<(), Error> {
    let session = Arc::new(load_session(&args.session)?);
    let params = load_params(args.params.as_deref())?;
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
    let builder = builder_for(
        &session,
        &params,
        &args.session,
        args.params.as_deref(),
        args.cell_budget,
    )?;
    let g = builder.spec();
    w(format!(
        "extent={} x {} cells, resolution {} m, origin ({}, {}) m",
        g.width, g.height, g.resolution, g.origin.x, g.origin.y
    ));
    Ok(())
}

/// Arguments of `gridscope history`.
#[derive(clap::Args, Clone, Debug)]
pub struct HistoryArgs {
    /// Session file, or `demo:NAME`.
    pub session: PathBuf,
    /// Parameter profile; defaults when omitted.
    #[arg(long)]
    pub params: Option<PathBuf>,
    /// World point X,Y in metres; the cell containing it is traced.
    #[arg(long, value_name = "X,Y", value_parser = parse_point, allow_hyphen_values = true)]
    pub cell: (f64, f64),
    /// Trace only the first N frames.
    #[arg(long, value_name = "N")]
    pub until: Option<usize>,
    /// Refuse grids larger than this many cells.
    #[arg(long, default_value_t = DEFAULT_CELL_BUDGET)]
    pub cell_budget: u64,
}

/// Parses `X,Y` (metres) as given to `--cell`.
fn parse_point(s: &str) -> Result<(f64, f64), String> {
    let (x, y) = s
        .split_once(',')
        .ok_or_else(|| format!("expected X,Y in metres, got {s:?}"))?;
    let parse = |v: &str| {
        v.trim()
            .parse::<f64>()
            .ok()
            .filter(|v| v.is_finite())
            .ok_or_else(|| format!("{v:?} is not a finite number of metres"))
    };
    Ok((parse(x)?, parse(y)?))
}

/// Prints, as CSV `frame,t,sensor,beam,increment,value`, every update applied in frames
/// `0..until` to the cell containing world point (x, y) metres. Values are log-odds printed
/// with the shortest text that reads back to the same f32. A point outside the map is refused.
pub fn history(args: &HistoryArgs, out: &mut dyn Write) -> Result<(), Error> {
    let session = Arc::new(load_session(&args.session)?);
    let params = load_params(args.params.as_deref())?;
    let builder = builder_for(
        &session,
        &params,
        &args.session,
        args.params.as_deref(),
        args.cell_budget,
    )?;
    let (x, y) = args.cell;
    let spec = builder.spec();
    let cell = spec.cell_at(Point2::new(x, y));
    if spec.index(cell).is_none() {
        let b = spec.bounds();
        return Err(InputError::new(
            "--cell",
            Problem::Malformed(format!(
                "the point ({x}, {y}) m lies outside the map, which covers x {} to {} m and \
                 y {} to {} m",
                b.min.x, b.max.x, b.min.y, b.max.y
            )),
        )
        .into());
    }
    let until = args.until.unwrap_or(session.frames.len());
    let updates = builder.cell_history(cell, until);
    let _ = out.write_all(crate::fusion::history_csv(&session, &updates).as_bytes());
    Ok(())
}
