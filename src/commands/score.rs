//! `gridscope score`: a map bundle against a reference bundle, of any resolution, and on
//! request in another frame (see [`crate::score`] for the rule).

use super::{load_map, show};
use crate::align::fit_rigid;
use crate::error::{Error, InputError, Problem};
use crate::geometry::Pose2;
use crate::grid::DEFAULT_CELL_BUDGET;
use std::io::Write;
use std::path::PathBuf;

/// Arguments of `gridscope score`.
#[derive(clap::Args, Clone, Debug)]
pub struct ScoreArgs {
    /// Map bundle prefix (or its .npy / .map.ron).
    pub map: PathBuf,
    /// Reference bundle prefix, or `demo:NAME` for a demo's reference.
    #[arg(long)]
    pub reference: PathBuf,
    /// Print JSON instead of key=value lines.
    #[arg(long)]
    pub json: bool,
    /// Also print the confusion counts.
    #[arg(long)]
    pub confusion: bool,
    /// The map was drawn in another frame: fit the rigid transform that best lays its
    /// occupied cells onto the reference's, print it, and score on the aligned overlap.
    #[arg(long)]
    pub align: bool,
    /// Refuse grids larger than this many cells.
    #[arg(long, default_value_t = DEFAULT_CELL_BUDGET)]
    pub cell_budget: u64,
}

/// Scores a map bundle against a reference and prints `key=value` lines (or JSON).
pub fn score(args: &ScoreArgs, out: &mut dyn Write) -> Result<(), Error> {
    let map = load_map(&args.map, args.cell_budget)?;
    let reference = load_map(&args.reference, args.cell_budget)?;
    let label = format!(
        "{} against {}",
        args.map.display(),
        args.reference.display()
    );
    let mut pairs: Vec<(&str, String)> = Vec::new();
    let mut pose = Pose2::default();
    if args.align {
        let fit = fit_rigid(&map, &reference).ok_or_else(|| {
            InputError::new(
                label.clone(),
                Problem::Malformed("one of the maps has no occupied cell to align by".into()),
            )
        })?;
        pose = fit.pose;
        pairs.extend([
            ("align_x", show(pose.x)),
            ("align_y", show(pose.y)),
            ("align_theta", show(pose.theta)),
            ("align_fit", show(fit.score)),
        ]);
    }
    let s = crate::score::score_moved(&map, &reference, &pose)
        .map_err(|e| InputError::new(label, Problem::Malformed(e.to_string())))?;
    pairs.extend([
        ("cells_compared", s.cells_compared.to_string()),
        ("cross_entropy_bits", show(s.cross_entropy_bits)),
        ("brier", show(s.brier)),
        ("auc", show(s.auc)),
        ("precision", show(s.precision)),
        ("recall", show(s.recall)),
    ]);
    if args.confusion {
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
    if args.json {
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
