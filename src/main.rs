//! The `gridscope` command: opens the inspector window, or runs a batch command.
//!
//! Thin by design: parse the command line, dispatch, and turn errors into the contract's exit
//! status (0 success, 2 input refused, 1 any other failure).

use clap::{Parser, Subcommand};
use gridscope::commands::{self, BuildArgs};
use gridscope::grid::DEFAULT_CELL_BUDGET;
use std::path::PathBuf;
use std::process::ExitCode;

/// Build, replay and inspect 2D occupancy grid maps from posed range scans.
///
/// With no command, opens the inspector window on FILE (a session) or on the embedded demo.
#[derive(Parser, Debug)]
#[command(name = "gridscope", version, args_conflicts_with_subcommands = true)]
struct Cli {
    #[command(subcommand)]
    command: Option<Command>,
    /// A session file (or `demo:NAME`) to open in the window (default: the embedded demo).
    file: Option<PathBuf>,
}

#[derive(Subcommand, Debug)]
enum Command {
    /// Open the inspector window on a session (or a floor plan, simulated first).
    Open {
        /// Session file (`*.session.ron`), plan (`*.plan.ron`) or `demo:NAME`; the embedded
        /// demo if omitted.
        file: Option<PathBuf>,
        /// Parameter profile to apply (`*.params.ron`, or `demo:NAME`).
        #[arg(long)]
        params: Option<PathBuf>,
    },
    /// Integrate a session and write the map bundle PREFIX.npy, .png and .map.ron.
    Build {
        /// Session file (`*.session.ron`), or `demo:NAME` for an embedded demo.
        session: PathBuf,
        /// Parameter profile (`*.params.ron`), or `demo:NAME`; defaults when omitted.
        #[arg(long)]
        params: Option<PathBuf>,
        /// Output prefix: writes PREFIX.npy, PREFIX.png and PREFIX.map.ron.
        #[arg(long)]
        out: PathBuf,
        /// Integrate only the first N frames.
        #[arg(long, value_name = "N")]
        until: Option<usize>,
        /// Also write a Netpbm PREFIX.pgm.
        #[arg(long)]
        pgm: bool,
        /// Refuse grids larger than this many cells.
        #[arg(long, default_value_t = DEFAULT_CELL_BUDGET)]
        cell_budget: u64,
    },
    /// Print a session's sensors, frames, duration, reading counts and map extent.
    Info {
        /// Session file, or `demo:NAME`.
        session: PathBuf,
        /// Parameter profile deciding the extent; defaults when omitted.
        #[arg(long)]
        params: Option<PathBuf>,
        /// Refuse grids larger than this many cells.
        #[arg(long, default_value_t = DEFAULT_CELL_BUDGET)]
        cell_budget: u64,
    },
    /// Print every update a cell received, as CSV: frame,t,sensor,beam,increment,value.
    History {
        /// Session file, or `demo:NAME`.
        session: PathBuf,
        /// Parameter profile; defaults when omitted.
        #[arg(long)]
        params: Option<PathBuf>,
        /// World point X,Y in metres; the cell containing it is traced.
        #[arg(long, value_name = "X,Y", value_parser = parse_point, allow_hyphen_values = true)]
        cell: (f64, f64),
        /// Trace only the first N frames.
        #[arg(long, value_name = "N")]
        until: Option<usize>,
        /// Refuse grids larger than this many cells.
        #[arg(long, default_value_t = DEFAULT_CELL_BUDGET)]
        cell_budget: u64,
    },
    /// Score a map bundle against a reference bundle (same resolution, compared on the overlap).
    Score {
        /// Map bundle prefix (or its .npy / .map.ron).
        map: PathBuf,
        /// Reference bundle prefix, or `demo:NAME` for a demo's reference.
        #[arg(long)]
        reference: PathBuf,
        /// Print JSON instead of key=value lines.
        #[arg(long)]
        json: bool,
        /// Also print the confusion counts.
        #[arg(long)]
        confusion: bool,
        /// Refuse grids larger than this many cells.
        #[arg(long, default_value_t = DEFAULT_CELL_BUDGET)]
        cell_budget: u64,
    },
    /// Rebuild a session for each setting of one or two parameters and score each map.
    Sweep {
        /// Session file, or `demo:NAME`.
        session: PathBuf,
        /// Base parameter profile; defaults when omitted.
        #[arg(long)]
        params: Option<PathBuf>,
        /// Reference bundle prefix, or `demo:NAME`.
        #[arg(long)]
        reference: PathBuf,
        /// NAME=FROM:TO:STEPS, e.g. clamp.max=1:10:10 or models.sonar_ring.p_free=0.3:0.45:4.
        #[arg(long, required = true, value_parser = gridscope::sweep::Vary::parse)]
        vary: Vec<gridscope::sweep::Vary>,
        /// Score that picks the best setting: cross_entropy, brier or auc.
        #[arg(long, default_value = "cross_entropy", value_parser = gridscope::sweep::Objective::parse)]
        by: gridscope::sweep::Objective,
        /// Integrate only the first N frames.
        #[arg(long, value_name = "N")]
        until: Option<usize>,
        /// Write the best setting's full profile to this file.
        #[arg(long, value_name = "FILE")]
        save_best: Option<PathBuf>,
        /// Refuse grids larger than this many cells.
        #[arg(long, default_value_t = DEFAULT_CELL_BUDGET)]
        cell_budget: u64,
    },
    /// Convert a session to the packed layout (NumPy arrays beside a RON header), or back.
    Pack {
        /// Session file (inline or packed), or `demo:NAME`.
        session: PathBuf,
        /// Header file to write (`X.session.ron`; arrays go beside it as `X.*.npy`).
        #[arg(long)]
        out: PathBuf,
        /// Write an inline session instead (the way back).
        #[arg(long)]
        inline: bool,
    },
    /// Measure rebuild, seek and load speed on a generated building; prints key=value lines.
    Bench {
        /// Frames of the generated run.
        #[arg(long, default_value_t = 2000)]
        frames: usize,
        /// Laser beams per frame (over 270 degrees).
        #[arg(long, default_value_t = 1081)]
        beams: usize,
        /// Laser range, metres.
        #[arg(long, default_value_t = 30.0)]
        range: f64,
        /// Cell side, metres.
        #[arg(long, default_value_t = 0.05)]
        resolution: f64,
        /// Building width, metres.
        #[arg(long, default_value_t = 96.0)]
        width: f64,
        /// Building height, metres.
        #[arg(long, default_value_t = 72.0)]
        height: f64,
        /// Threads for the parallel rebuild (all cores by default).
        #[arg(long)]
        threads: Option<usize>,
        /// Repetitions per timing; the median is printed.
        #[arg(long, default_value_t = gridscope::bench::DEFAULT_REPS)]
        reps: usize,
        /// Random seeks timed.
        #[arg(long, default_value_t = 50)]
        seeks: usize,
        /// Seed of the building's clutter and the range noise.
        #[arg(long, default_value_t = 2026)]
        seed: u64,
        /// Also write the generated floor plan to this file.
        #[arg(long, value_name = "FILE")]
        write_plan: Option<PathBuf>,
    },
    /// Simulate a floor plan's run into a session, plus the plan's reference map bundle.
    Simulate {
        /// Floor plan (`*.plan.ron`).
        plan: PathBuf,
        /// Session file to write.
        #[arg(long)]
        out: PathBuf,
        /// Prefix of the reference bundle (default: the session name with `.reference`).
        #[arg(long)]
        reference: Option<PathBuf>,
        /// World time, seconds, at which the reference is drawn (default: the last frame).
        #[arg(long)]
        reference_time: Option<f64>,
    },
}

fn run(cli: Cli) -> Result<(), gridscope::Error> {
    let mut out = std::io::stdout().lock();
    match cli.command {
        Some(Command::Build {
            session,
            params,
            out: prefix,
            until,
            pgm,
            cell_budget,
        }) => commands::build(
            &BuildArgs {
                session,
                params,
                out: prefix,
                until,
                pgm,
                cell_budget,
            },
            &mut out,
        ),
        Some(Command::Info {
            session,
            params,
            cell_budget,
        }) => commands::info(&session, params.as_deref(), cell_budget, &mut out),
        Some(Command::History {
            session,
            params,
            cell: (x, y),
            until,
            cell_budget,
        }) => commands::history(
            &session,
            params.as_deref(),
            x,
            y,
            until,
            cell_budget,
            &mut out,
        ),
        Some(Command::Simulate {
            plan,
            out: session,
            reference,
            reference_time,
        }) => commands::simulate_plan(
            &plan,
            &session,
            reference.as_deref(),
            reference_time,
            &mut out,
        ),
        Some(Command::Score {
            map,
            reference,
            json,
            confusion,
            cell_budget,
        }) => commands::score(&map, &reference, json, confusion, cell_budget, &mut out),
        Some(Command::Sweep {
            session,
            params,
            reference,
            vary,
            by,
            until,
            save_best,
            cell_budget,
        }) => commands::sweep(
            &commands::SweepArgs {
                session,
                params,
                reference,
                vary,
                objective: by,
                until,
                save_best,
                cell_budget,
            },
            &mut out,
        ),
        Some(Command::Pack {
            session,
            out: target,
            inline,
        }) => commands::pack(&session, &target, inline, &mut out),
        Some(Command::Bench {
            frames,
            beams,
            range,
            resolution,
            width,
            height,
            threads,
            reps,
            seeks,
            seed,
            write_plan,
        }) => commands::bench(
            &gridscope::bench::BenchOptions {
                building: gridscope::sim::BuildingSpec {
                    width,
                    height,
                    frames,
                    beams,
                    range,
                    seed,
                },
                resolution,
                threads,
                reps,
                seeks,
            },
            write_plan.as_deref(),
            &mut out,
        ),
        Some(Command::Open { file, params }) => open_window(file, params),
        None => open_window(cli.file, None),
    }
}

/// Runs the window until it closes; a failure to start it is not an input refusal.
fn open_window(session: Option<PathBuf>, params: Option<PathBuf>) -> Result<(), gridscope::Error> {
    gridscope::app::run(gridscope::app::Launch { session, params })
        .map_err(gridscope::Error::Window)
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

fn main() -> ExitCode {
    gridscope::grid::keep_freed_buffers();
    let cli = Cli::parse();
    match run(cli) {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("gridscope: {e}");
            if e.is_refusal() {
                ExitCode::from(2)
            } else {
                ExitCode::from(1)
            }
        }
    }
}
