//! The command line: `gridscope` and its batch commands, each with its own argument struct
//! (clap derives), free of any window.
//!
//! [`parse`] reads the arguments (a mistyped command is named as such), [`run`] carries out a
//! batch command and writes its report to a `Write`; `main.rs` opens the window for `open` and
//! turns errors into the exit status: 0 success, 2 an input refused, 1 any other failure.

mod bench;
mod build;
mod diagnose;
mod inspect;
mod score;
mod sweep;

pub use bench::BenchArgs;
pub use build::{BuildArgs, PackArgs, SimulateArgs};
pub use diagnose::{AgreementArgs, CalibrateArgs, RealignArgs};
pub use inspect::{HistoryArgs, InfoArgs};
pub use score::ScoreArgs;
pub use sweep::SweepArgs;

use crate::demo;
use crate::error::{Error, InputError, Problem};
use crate::fusion::MapBuilder;
use crate::grid::Grid;
use crate::params::Params;
use crate::session::Session;
use clap::{Parser, Subcommand};
use std::ffi::OsString;
use std::io::Write;
use std::path::{Path, PathBuf};
use std::sync::Arc;

/// Build, replay and inspect 2D occupancy grid maps from posed range scans.
///
/// With no command, opens the inspector window on FILE (a session) or on the embedded demo.
#[derive(Parser, Debug)]
#[command(name = "gridscope", version, args_conflicts_with_subcommands = true)]
pub struct Cli {
    /// What to do; the window when omitted.
    #[command(subcommand)]
    pub command: Option<Command>,
    /// A session file (or `demo:NAME`) to open in the window (default: the embedded demo).
    pub file: Option<PathBuf>,
    /// Parameter profile to apply in the window (`*.params.ron`, or `demo:NAME`).
    #[arg(long)]
    pub params: Option<PathBuf>,
}

/// The commands.
#[derive(Subcommand, Debug)]
pub enum Command {
    /// Open the inspector window on a session (or a floor plan, simulated first).
    Open(OpenArgs),
    /// Integrate a session and write the map bundle PREFIX.npy, .png and .map.ron.
    Build(BuildArgs),
    /// Print a session's sensors, frames, duration, reading counts and map extent.
    Info(InfoArgs),
    /// Print every update a cell received, as CSV: frame,t,sensor,beam,increment,value.
    History(HistoryArgs),
    /// Score a map bundle against a reference bundle (any resolution; --align for another frame).
    Score(ScoreArgs),
    /// Rebuild a session for each setting of one or two parameters and score each map.
    Sweep(SweepArgs),
    /// Simulate a floor plan's run into a session, plus the plan's reference map bundle.
    Simulate(SimulateArgs),
    /// Convert a session to the packed layout (NumPy arrays beside a RON header), or back.
    Pack(PackArgs),
    /// Per-frame agreement of a session's readings with its map, as CSV
    /// (frame,t,agreement,...), and the stretches of frames well below the run's typical value.
    Agreement(AgreementArgs),
    /// Fit a sensor's mount (x, y, theta) and clock offset to the run; prints key=value lines.
    Calibrate(CalibrateArgs),
    /// Re-align the poses of a stretch of frames to the map of the others; saves a new session.
    Realign(RealignArgs),
    /// Measure rebuild, seek and load speed on a generated building; prints key=value lines.
    Bench(BenchArgs),
}

/// Arguments of `gridscope open`.
#[derive(clap::Args, Debug, Clone, Default)]
pub struct OpenArgs {
    /// Session file (`*.session.ron`), plan (`*.plan.ron`) or `demo:NAME`; the embedded
    /// demo if omitted.
    pub file: Option<PathBuf>,
    /// Parameter profile to apply (`*.params.ron`, or `demo:NAME`).
    #[arg(long)]
    pub params: Option<PathBuf>,
}

/// The names of the commands, for the mistyped-command message.
const COMMANDS: &[&str] = &[
    "open",
    "build",
    "info",
    "history",
    "score",
    "sweep",
    "simulate",
    "pack",
    "agreement",
    "calibrate",
    "realign",
    "bench",
    "help",
];

/// Parses the command line. A first word that is neither a command nor an existing file, and
/// does not look like a file name, is reported as a mistyped command (with the nearest
/// command's name) rather than as a file the window cannot open.
pub fn parse(args: impl IntoIterator<Item = OsString>) -> Result<Cli, clap::Error> {
    let args: Vec<OsString> = args.into_iter().collect();
    if let Some(first) = args.get(1).and_then(|a| a.to_str())
        && !first.starts_with('-')
        && !COMMANDS.contains(&first)
        && !first.contains(['.', '/', '\\', ':'])
        && !Path::new(first).exists()
    {
        let nearest = COMMANDS
            .iter()
            .min_by_key(|c| edit_distance(c, first))
            .expect("there are commands");
        let hint = if edit_distance(nearest, first) <= 2 {
            format!("; did you mean `{nearest}`?")
        } else {
            String::new()
        };
        return Err(clap::Error::raw(
            clap::error::ErrorKind::InvalidSubcommand,
            format!(
                "`{first}` is not a command{hint} (commands: {}; a session to open needs its \
                 file name, e.g. run.session.ron)\n",
                COMMANDS[..COMMANDS.len() - 1].join(", ")
            ),
        ));
    }
    Cli::try_parse_from(args)
}

/// Levenshtein distance between two short words.
fn edit_distance(a: &str, b: &str) -> usize {
    let b: Vec<char> = b.chars().collect();
    let mut row: Vec<usize> = (0..=b.len()).collect();
    for (i, ca) in a.chars().enumerate() {
        let mut prev = row[0];
        row[0] = i + 1;
        for (j, cb) in b.iter().enumerate() {
            let here = (prev + usize::from(ca != *cb))
                .min(row[j] + 1)
                .min(row[j + 1] + 1);
            prev = row[j + 1];
            row[j + 1] = here;
        }
    }
    row[b.len()]
}

/// Carries out a batch command, writing its report to `out` (`open` is the window's and is
/// refused here).
pub fn run(command: Command, out: &mut dyn Write) -> Result<(), Error> {
    match command {
        Command::Build(a) => build::build(&a, out),
        Command::Info(a) => inspect::info(&a, out),
        Command::History(a) => inspect::history(&a, out),
        Command::Score(a) => score::score(&a, out),
        Command::Sweep(a) => sweep::sweep(&a, out),
        Command::Simulate(a) => build::simulate(&a, out),
        Command::Pack(a) => build::pack(&a, out),
        Command::Agreement(a) => diagnose::agreement(&a, out),
        Command::Calibrate(a) => diagnose::calibrate(&a, out),
        Command::Realign(a) => diagnose::realign(&a, out),
        Command::Bench(a) => bench::bench(&a, out),
        Command::Open(_) => Err(Error::Failed(
            "`open` runs the window, not a batch command".into(),
        )),
    }
}

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

/// Loads a map bundle from a prefix (or either file of it), or `demo:NAME` for a demo's
/// reference map.
pub fn load_map(arg: &Path, budget: u64) -> Result<Grid, Error> {
    match arg.to_str().and_then(|s| s.strip_prefix("demo:")) {
        Some(name) => demo::reference(name),
        None => Ok(crate::export::load_bundle(arg, budget)?.grid),
    }
}

/// What an over-budget grid is blamed on: the profile when it fixes the extent, else the
/// session at the profile's resolution.
pub(crate) fn budget_label(
    session_arg: &Path,
    params_arg: Option<&Path>,
    params: &Params,
) -> String {
    let profile = params_arg.map_or("the default parameters".to_string(), |p| {
        p.display().to_string()
    });
    if params.extent.is_some() {
        format!("{profile} (its fixed extent)")
    } else {
        format!(
            "{} at the resolution of {profile} ({} m)",
            session_arg.display(),
            params.resolution
        )
    }
}

/// A builder for a loaded session and profile, an over-budget grid blamed on the right input.
pub(crate) fn builder_for(
    session: &Arc<Session>,
    params: &Params,
    session_arg: &Path,
    params_arg: Option<&Path>,
    budget: u64,
) -> Result<MapBuilder, Error> {
    MapBuilder::with_budget(session.clone(), params.clone(), budget)
        .map_err(|e| e.for_input(&budget_label(session_arg, params_arg, params)))
}

/// Refuses an output prefix that names a directory (or ends with a separator), which would
/// write hidden files such as `dir/.npy`.
pub(crate) fn check_out_prefix(out: &Path, option: &str) -> Result<(), Error> {
    let text = out.as_os_str().to_string_lossy();
    let ends_with_separator = text.ends_with('/') || text.ends_with(std::path::MAIN_SEPARATOR);
    if out.is_dir() || ends_with_separator || out.file_name().is_none() {
        return Err(InputError::new(
            out.display().to_string(),
            Problem::BadField {
                field: option.into(),
                reason: "names a directory; give a file prefix inside it, e.g. dir/map".into(),
            },
        )
        .into());
    }
    Ok(())
}

/// A number as reports print it: shortest round-trip text, `nan` when undefined.
pub(crate) fn show(v: f64) -> String {
    if v.is_nan() {
        "nan".into()
    } else {
        format!("{v}")
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn mistyped_commands_are_named_with_the_nearest_one() {
        let args = |v: &[&str]| v.iter().map(OsString::from).collect::<Vec<_>>();
        let e = parse(args(&["gridscope", "biuld", "x.session.ron"])).unwrap_err();
        let msg = e.to_string();
        assert!(
            msg.contains("`biuld` is not a command") && msg.contains("`build`"),
            "{msg}"
        );
        assert!(
            parse(args(&[
                "gridscope",
                "build",
                "demo:door-cycle",
                "--out",
                "x"
            ]))
            .is_ok()
        );
        assert!(
            parse(args(&[
                "gridscope",
                "run.session.ron",
                "--params",
                "p.params.ron"
            ]))
            .is_ok()
        );
        assert_eq!(edit_distance("sweep", "swep"), 1);
        assert_eq!(edit_distance("", "abc"), 3);
    }
}
