//! Commands that diagnose a run's geometry: `agreement` (per frame, with suspect stretches),
//! `calibrate` (a sensor's mount and clock) and `realign` (the poses of a stretch). See
//! [`crate::diagnose`] for the definitions.

use super::{builder_for, load_params, load_session, show};
use crate::diagnose::{self, RealignWindow};
use crate::error::{Error, InputError, Problem};
use crate::grid::DEFAULT_CELL_BUDGET;
use crate::io::atomic::write_all_atomically;
use crate::{MapBuilder, Params, Session};
use std::io::Write;
use std::ops::Range;
use std::path::PathBuf;
use std::sync::Arc;
use std::sync::atomic::AtomicBool;

/// The run a diagnosis command reads: a session and the profile it is mapped with.
#[derive(clap::Args, Clone, Debug)]
pub struct RunArgs {
    /// Session file (`*.session.ron`), or `demo:NAME`.
    pub session: PathBuf,
    /// Parameter profile (`*.params.ron`), or `demo:NAME`; defaults when omitted (for
    /// `calibrate`, its corrections are where the fit starts).
    #[arg(long)]
    pub params: Option<PathBuf>,
    /// Refuse grids larger than this many cells.
    #[arg(long, default_value_t = DEFAULT_CELL_BUDGET)]
    pub cell_budget: u64,
}

impl RunArgs {
    /// The session, the profile and their builder (refused over the cell budget, blaming the
    /// input that set the grid's size).
    fn load(&self) -> Result<(Arc<Session>, Params, MapBuilder), Error> {
        let session = Arc::new(load_session(&self.session)?);
        let params = load_params(self.params.as_deref())?;
        let builder = builder_for(
            &session,
            &params,
            &self.session,
            self.params.as_deref(),
            self.cell_budget,
        )?;
        Ok((session, params, builder))
    }
}

/// Arguments of `gridscope agreement`.
#[derive(clap::Args, Clone, Debug)]
pub struct AgreementArgs {
    /// The run.
    #[command(flatten)]
    pub run: RunArgs,
    /// Write the CSV here and print a summary; without it the CSV goes to standard output.
    #[arg(long)]
    pub out: Option<PathBuf>,
}

/// Prints or writes the agreement of every frame (CSV `frame,t,agreement,...`); with `--out`,
/// prints the run's agreement and its suspect stretches.
pub fn agreement(args: &AgreementArgs, out: &mut dyn Write) -> Result<(), Error> {
    let (_, _, builder) = args.run.load()?;
    let run = diagnose::agreement(&builder, &AtomicBool::new(false), &mut |_| {})?;
    let csv = diagnose::agreement_csv(&run);
    let Some(path) = &args.out else {
        let _ = out.write_all(csv.as_bytes());
        return Ok(());
    };
    write_all_atomically(&[(path.clone(), csv.into_bytes())])?;
    let _ = writeln!(out, "frames={}", run.frames.len());
    let _ = writeln!(
        out,
        "agreement={}",
        run.overall().map_or("nan".into(), show)
    );
    if let Some((typical, stretches)) = diagnose::suspect_stretches(&run.frames) {
        let _ = writeln!(out, "median={}", show(typical.median));
        let _ = writeln!(out, "low_below={}", show(typical.cut));
        for s in stretches {
            let _ = writeln!(
                out,
                "suspect={}..{} t={}..{} lowest={:.3} mean={:.3}",
                s.frames.start, s.frames.end, s.times.0, s.times.1, s.lowest, s.mean
            );
        }
    }
    let _ = writeln!(out, "wrote {}", path.display());
    Ok(())
}

/// Arguments of `gridscope calibrate`.
#[derive(clap::Args, Clone, Debug)]
pub struct CalibrateArgs {
    /// The run.
    #[command(flatten)]
    pub run: RunArgs,
    /// The sensor's id.
    #[arg(long)]
    pub sensor: String,
    /// Comma list of corrections to fit: mount_x, mount_y, mount_theta, time_offset.
    #[arg(long, value_name = "LIST")]
    pub fit: String,
    /// Write the profile with the fitted corrections here.
    #[arg(long, value_name = "FILE")]
    pub save: Option<PathBuf>,
}

/// Fits a sensor's corrections and prints `key=value` lines: the fitted absolute values
/// (`mount_x`, `mount_y` metres, `mount_theta` radians, `time_offset` seconds), the run's
/// agreement and sharpness before and after.
pub fn calibrate(args: &CalibrateArgs, out: &mut dyn Write) -> Result<(), Error> {
    let fields = diagnose::parse_fields(&args.fit).map_err(|p| InputError::new("--fit", p))?;
    let (session, params, _) = args.run.load()?;
    let fit = diagnose::calibrate(
        &session,
        &params,
        &args.sensor,
        &fields,
        &AtomicBool::new(false),
        &|_| {},
    )?;
    let a = fit.after;
    let opt = |v: Option<f64>| v.map_or("nan".into(), show);
    for (k, v) in [
        ("sensor", fit.sensor.clone()),
        ("mount_x", show(a.mount_x)),
        ("mount_y", show(a.mount_y)),
        ("mount_theta", show(a.mount_theta)),
        ("time_offset", show(a.time_offset)),
        ("agreement_before", opt(fit.agreement.0)),
        ("agreement_after", opt(fit.agreement.1)),
        ("sharpness_before", show(fit.sharpness.0)),
        ("sharpness_after", show(fit.sharpness.1)),
        ("evaluations", fit.evaluations.to_string()),
        ("frames_used", fit.frames_used.to_string()),
    ] {
        let _ = writeln!(out, "{k}={v}");
    }
    if let Some(path) = &args.save {
        let saved = fit.apply(&params);
        write_all_atomically(&[(path.clone(), saved.to_ron_string().into_bytes())])?;
        let _ = writeln!(out, "wrote {}", path.display());
    }
    Ok(())
}

/// Arguments of `gridscope realign`.
#[derive(clap::Args, Clone, Debug)]
pub struct RealignArgs {
    /// The run.
    #[command(flatten)]
    pub run: RunArgs,
    /// The stretch, `FIRST..END` (END not included), as `agreement` prints suspects.
    #[arg(long, value_name = "FIRST..END")]
    pub frames: String,
    /// Largest shift of a pose in x and y, metres.
    #[arg(long, default_value_t = 0.5)]
    pub reach: f64,
    /// Largest turn of a pose, degrees.
    #[arg(long, default_value_t = 5.0)]
    pub turn: f64,
    /// The new session file (never the input, never an existing file).
    #[arg(long)]
    pub out: PathBuf,
    /// Write the new session in the packed layout (arrays beside the header).
    #[arg(long)]
    pub packed: bool,
}

/// Reads `FIRST..END`.
fn parse_stretch(text: &str) -> Result<Range<usize>, InputError> {
    let bad = |reason: &str| {
        InputError::new(
            "--frames",
            Problem::BadField {
                field: "--frames".into(),
                reason: format!("`{text}` {reason}"),
            },
        )
    };
    let (a, b) = text
        .split_once("..")
        .ok_or_else(|| bad("is not FIRST..END, e.g. 160..192"))?;
    let a: usize = a.trim().parse().map_err(|_| bad("has no whole FIRST"))?;
    let b: usize = b.trim().parse().map_err(|_| bad("has no whole END"))?;
    if b <= a {
        return Err(bad("is empty: END must be past FIRST"));
    }
    Ok(a..b)
}

/// Re-aligns a stretch of frames and saves the run with the new poses as a new session;
/// prints the stretch's agreement and the mean move before and after.
pub fn realign(args: &RealignArgs, out: &mut dyn Write) -> Result<(), Error> {
    let stretch = parse_stretch(&args.frames)?;
    let reach_ok = args.reach.is_finite() && (0.0..=10.0).contains(&args.reach);
    let turn_ok = args.turn.is_finite() && (0.0..=45.0).contains(&args.turn);
    if !(reach_ok && turn_ok) {
        return Err(InputError::new(
            "--reach/--turn",
            Problem::BadField {
                field: "--reach/--turn".into(),
                reason: "need 0..10 metres and 0..45 degrees".into(),
            },
        )
        .into());
    }
    let (session, _, builder) = args.run.load()?;
    if stretch.end > session.frames.len() {
        return Err(InputError::new(
            "--frames",
            Problem::BadField {
                field: "--frames".into(),
                reason: format!(
                    "{}..{} runs past the session's {} frames",
                    stretch.start,
                    stretch.end,
                    session.frames.len()
                ),
            },
        )
        .into());
    }
    let window = RealignWindow {
        reach: args.reach,
        turn: args.turn.to_radians(),
    };
    let r = diagnose::realign(
        &builder,
        stretch.clone(),
        window,
        &AtomicBool::new(false),
        &|_| {},
    )?;
    let fixed = diagnose::with_poses(&session, &r);
    let written = fixed.save_as(&args.out, args.packed, Some(&args.run.session))?;
    let n = r.after.len() as f64;
    let (mut shift, mut turn) = (0.0, 0.0);
    for (a, b) in r.before.iter().zip(&r.after) {
        let d = diagnose::pose_difference(b, a);
        shift += (d.x * d.x + d.y * d.y).sqrt() / n;
        turn += d.theta.abs().to_degrees() / n;
    }
    let (before, after) = r.mean_agreement();
    let opt = |v: Option<f64>| v.map_or("nan".into(), show);
    let _ = writeln!(out, "frames={}..{}", stretch.start, stretch.end);
    let _ = writeln!(out, "mean_shift_m={}", show(shift));
    let _ = writeln!(out, "mean_turn_deg={}", show(turn));
    let _ = writeln!(out, "agreement_before={}", opt(before));
    let _ = writeln!(out, "agreement_after={}", opt(after));
    for p in written {
        let _ = writeln!(out, "wrote {}", p.display());
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn stretches_are_read_end_exclusive() {
        assert_eq!(parse_stretch("160..192").unwrap(), 160..192);
        for bad in ["160", "a..3", "5..5", "9..2"] {
            assert!(parse_stretch(bad).is_err(), "{bad}");
        }
    }
}
