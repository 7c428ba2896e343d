//! `gridscope bench`: the benchmark's options, checked, and its report.

use crate::bench::{BenchOptions, DEFAULT_REPS};
use crate::error::{Error, InputError, Problem};
use crate::io::atomic::write_all_atomically;
use crate::sim::BuildingSpec;
use std::io::Write;
use std::path::PathBuf;

/// A generated run to measure on (options given beside it override its values).
#[derive(clap::ValueEnum, Clone, Copy, Debug, Default, PartialEq, Eq)]
pub enum Preset {
    /// 2000 frames of a 1081-beam, 270-degree, 30 m laser in a 96 m x 72 m building.
    #[default]
    Standard,
    /// 3873 frames of a 181-beam, 50 m laser in a 300 m x 260 m building (a grid of about 31
    /// million cells): the window benchmark's run.
    LargeFloor,
    /// An hour of the standard laser at 40 Hz: 144,000 frames.
    Hour,
}

impl Preset {
    /// The building and run of the preset.
    pub fn building(self) -> BuildingSpec {
        let standard = BuildingSpec::default();
        match self {
            Preset::Standard => standard,
            Preset::LargeFloor => BuildingSpec {
                width: 300.0,
                height: 260.0,
                frames: 3873,
                beams: 181,
                range: 50.0,
                ..standard
            },
            Preset::Hour => BuildingSpec {
                frames: 144_000,
                ..standard
            },
        }
    }
}

/// Arguments of `gridscope bench`.
#[derive(clap::Args, Clone, Debug)]
pub struct BenchArgs {
    /// The generated run (`--window` measures `large-floor` unless told otherwise).
    #[arg(long, value_enum)]
    pub preset: Option<Preset>,
    /// Frames of the generated run.
    #[arg(long)]
    pub frames: Option<usize>,
    /// Laser beams per frame (over 270 degrees).
    #[arg(long)]
    pub beams: Option<usize>,
    /// Laser range, metres.
    #[arg(long)]
    pub range: Option<f64>,
    /// Cell side, metres.
    #[arg(long, default_value_t = 0.05)]
    pub resolution: f64,
    /// Building width, metres.
    #[arg(long)]
    pub width: Option<f64>,
    /// Building height, metres.
    #[arg(long)]
    pub height: Option<f64>,
    /// Threads for the parallel rebuild (all cores by default).
    #[arg(long)]
    pub threads: Option<usize>,
    /// Repetitions per timing; the median is printed.
    #[arg(long, default_value_t = DEFAULT_REPS)]
    pub reps: usize,
    /// Random seeks timed.
    #[arg(long, default_value_t = 50)]
    pub seeks: usize,
    /// Seed of the building's clutter and the range noise.
    #[arg(long, default_value_t = 2026)]
    pub seed: u64,
    /// Also write the generated floor plan to this file.
    #[arg(long, value_name = "FILE")]
    pub write_plan: Option<PathBuf>,
    /// Measure the window instead: its longest UI frame and peak memory while the run opens,
    /// rebuilds and is re-tuned (no display needed), against a build of the same run.
    #[arg(long)]
    pub window: bool,
}

impl BenchArgs {
    /// The benchmark's options: the preset's run with the options given laid over it.
    pub fn options(&self) -> BenchOptions {
        let preset = self.preset.unwrap_or(if self.window {
            Preset::LargeFloor
        } else {
            Preset::Standard
        });
        let b = preset.building();
        BenchOptions {
            building: BuildingSpec {
                width: self.width.unwrap_or(b.width),
                height: self.height.unwrap_or(b.height),
                frames: self.frames.unwrap_or(b.frames),
                beams: self.beams.unwrap_or(b.beams),
                range: self.range.unwrap_or(b.range),
                seed: self.seed,
            },
            resolution: self.resolution,
            threads: self.threads,
            reps: self.reps,
            seeks: self.seeks,
        }
    }
}

/// Runs the benchmark and prints `key=value` lines; progress goes to stderr.
pub fn bench(args: &BenchArgs, out: &mut dyn Write) -> Result<(), Error> {
    let opts = args.options();
    opts.check()
        .map_err(|(option, why)| InputError::new(option, Problem::Malformed(why)))?;
    if let Some(p) = &args.write_plan {
        let plan = crate::sim::building_plan(&opts.building);
        let cfg = ron::ser::PrettyConfig::new().struct_names(false);
        let text = ron::ser::to_string_pretty(&plan, cfg)
            .map_err(|e| Error::Failed(format!("the plan could not be written as text: {e}")))?;
        write_all_atomically(&[(p.clone(), text.into_bytes())])?;
    }
    let lines = if args.window {
        window(&opts)?
    } else {
        crate::bench::run(&opts, &mut |m| eprintln!("bench: {m}"))?
    };
    for (k, v) in lines {
        let _ = writeln!(out, "{k}={v}");
    }
    Ok(())
}

/// The window benchmark: the run simulated and written as a packed session in a scratch
/// folder, then measured by [`crate::app::bench::run`].
fn window(opts: &BenchOptions) -> Result<Vec<(String, String)>, Error> {
    let say = &mut |m: &str| eprintln!("bench: {m}");
    say("simulating the run");
    let plan = crate::sim::building_plan(&opts.building);
    let session = crate::sim::simulate(&plan)?;
    let dir = std::env::temp_dir().join(format!("gridscope-window-bench-{}", std::process::id()));
    std::fs::create_dir_all(&dir).map_err(|source| Error::Write {
        file: dir.clone(),
        source,
    })?;
    let header = dir.join("run.session.ron");
    crate::session::write_packed(&session, &header)?;
    drop(session);
    let exe = std::env::current_exe()
        .map_err(|e| Error::Failed(format!("cannot find the gridscope binary: {e}")))?;
    let result = crate::app::bench::run(&header, &exe, say);
    let _ = std::fs::remove_dir_all(&dir);
    result
}
