//! `gridscope sweep`: one or two parameters over ranges, every setting rebuilt and scored.

use super::{budget_label, load_map, load_params, load_session, show};
use crate::error::{Error, InputError, Problem};
use crate::grid::DEFAULT_CELL_BUDGET;
use crate::io::atomic::write_all_atomically;
use crate::sweep::{Objective, SweepPlan, Vary, sweep as run_sweep};
use std::io::Write;
use std::path::PathBuf;
use std::sync::Arc;
use std::sync::atomic::{AtomicBool, AtomicUsize};

/// Arguments of `gridscope sweep`.
#[derive(clap::Args, Clone, Debug)]
pub struct SweepArgs {
    /// Session file, or `demo:NAME`.
    pub session: PathBuf,
    /// Base parameter profile; defaults when omitted.
    #[arg(long)]
    pub params: Option<PathBuf>,
    /// Reference bundle prefix, or `demo:NAME`.
    #[arg(long)]
    pub reference: PathBuf,
    /// NAME=FROM:TO:STEPS, e.g. clamp.max=1:10:10 or models.sonar_ring.p_free=0.3:0.45:4
    /// (one or two of them).
    #[arg(long, required = true, value_parser = Vary::parse)]
    pub vary: Vec<Vary>,
    /// Score that picks the best setting: cross_entropy, brier or auc.
    #[arg(long, default_value = "cross_entropy", value_parser = Objective::parse)]
    pub by: Objective,
    /// Integrate only the first N frames.
    #[arg(long, value_name = "N")]
    pub until: Option<usize>,
    /// Write the best setting's full profile to this file.
    #[arg(long, value_name = "FILE")]
    pub save_best: Option<PathBuf>,
    /// Refuse grids larger than this many cells (each setting's grid).
    #[arg(long, default_value_t = DEFAULT_CELL_BUDGET)]
    pub cell_budget: u64,
}

/// Rebuilds a session for every setting of the varied parameters, scores each map against the
/// reference and prints a table and the best setting. Refused when nothing could be scored.
pub fn sweep(args: &SweepArgs, out: &mut dyn Write) -> Result<(), Error> {
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
        objective: args.by,
        frames,
        cell_budget: args.cell_budget,
    };
    plan.check()
        .map_err(|why| InputError::new("--vary", Problem::Malformed(why)))?;
    let result = run_sweep(&plan, &AtomicBool::new(false), &AtomicUsize::new(0));
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
    let Some(i) = result.best else {
        let label = budget_label(&args.session, args.params.as_deref(), &base);
        return Err(InputError::new(
            label,
            Problem::Malformed(format!(
                "no setting could be scored against {}; every row above says why",
                args.reference.display()
            )),
        )
        .into());
    };
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
    Ok(())
}
