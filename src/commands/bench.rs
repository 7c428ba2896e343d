//! `gridscope bench`: the benchmark's options, checked, and its report.

use crate::bench::{BenchOptions, DEFAULT_REPS};
use crate::error::{Error, InputError, Problem};
use crate::io::atomic::write_all_atomically;
use crate::sim::BuildingSpec;
use std::io::Write;
use std::path::PathBuf;

/// Arguments of `gridscope bench`.
#[derive(clap::Args, Clone, Debug)]
pub struct BenchArgs {
    /// Frames of the generated run.
    #[arg(long, default_value_t = 2000)]
    pub frames: usize,
    /// Laser beams per frame (over 270 degrees).
    #[arg(long, default_value_t = 1081)]
    pub beams: usize,
    /// Laser range, metres.
    #[arg(long, default_value_t = 30.0)]
    pub range: f64,
    /// Cell side, metres.
    #[arg(long, default_value_t = 0.05)]
    pub resolution: f64,
    /// Building width, metres.
    #[arg(long, default_value_t = 96.0)]
    pub width: f64,
    /// Building height, metres.
    #[arg(long, default_value_t = 72.0)]
    pub height: f64,
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
}

impl BenchArgs {
    /// The benchmark's options.
    pub fn options(&self) -> BenchOptions {
        BenchOptions {
            building: BuildingSpec {
                width: self.width,
                height: self.height,
                frames: self.frames,
                beams: self.beams,
                range: self.range,
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
    let lines = crate::bench::run(&opts, &mut |m| eprintln!("bench: {m}"))?;
    for (k, v) in lines {
        let _ = writeln!(out, "{k}={v}");
    }
    Ok(())
}
