//! Parameter sweeps: rebuild a session for each setting of one or two parameters and score
//! every map against a reference.
//!
//! Parameters are named by their dotted path in the profile (`clamp.max`, `prior`,
//! `default_model.sigma`, `models.sonar_ring.p_free`, ...). A setting whose profile is invalid,
//! or whose map cannot be compared with the reference, is kept in the table with its reason
//! rather than dropped, so a sweep across a domain edge says where the edge is.

use crate::fusion::MapBuilder;
use crate::grid::Grid;
use crate::limits::MAX_SWEEP_SETTINGS;
use crate::params::{Params, registry};
use crate::score::{Score, score};
use crate::session::Session;
use rayon::prelude::*;
use std::sync::Arc;
use std::sync::atomic::{AtomicBool, AtomicUsize, Ordering};

/// One swept parameter: `steps` values from `from` to `to`, evenly spaced, ends included.
#[derive(Clone, Debug, PartialEq)]
pub struct Vary {
    /// Dotted path of the parameter.
    pub name: String,
    /// First value.
    pub from: f64,
    /// Last value.
    pub to: f64,
    /// Number of values (at least 1).
    pub steps: usize,
}

impl Vary {
    /// Parses `NAME=FROM:TO:STEPS`.
    pub fn parse(s: &str) -> Result<Vary, String> {
        let (name, range) = s
            .split_once('=')
            .ok_or_else(|| format!("expected NAME=FROM:TO:STEPS, got {s:?}"))?;
        let parts: Vec<&str> = range.split(':').collect();
        let [from, to, steps] = parts[..] else {
            return Err(format!("expected FROM:TO:STEPS after '=', got {range:?}"));
        };
        let num = |v: &str| {
            v.trim()
                .parse::<f64>()
                .ok()
                .filter(|x| x.is_finite())
                .ok_or_else(|| format!("{v:?} is not a finite number"))
        };
        let steps: usize = steps
            .trim()
            .parse()
            .map_err(|_| format!("{steps:?} is not a whole number of steps"))?;
        if steps == 0 || steps > 10_000 {
            return Err(format!("steps must lie in 1..=10000 (got {steps})"));
        }
        let vary = Vary {
            name: name.trim().to_string(),
            from: num(from)?,
            to: num(to)?,
            steps,
        };
        registry::find(&Params::default(), &vary.name)?;
        Ok(vary)
    }

    /// The values, in order.
    pub fn values(&self) -> Vec<f64> {
        if self.steps == 1 {
            return vec![self.from];
        }
        (0..self.steps)
            .map(|k| self.from + (self.to - self.from) * k as f64 / (self.steps - 1) as f64)
            .collect()
    }
}

/// Sets the parameter at dotted path `name` (see [`registry`]) to `value`; a sensor without a
/// model of its own gets a copy of the default model first.
pub fn set_param(p: &mut Params, name: &str, value: f64) -> Result<(), String> {
    registry::find(p, name)?.set(p, value)
}

/// Which score decides the best setting.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub enum Objective {
    /// Lowest cross-entropy (bits per cell).
    #[default]
    CrossEntropy,
    /// Lowest Brier score.
    Brier,
    /// Highest ROC AUC.
    Auc,
}

impl Objective {
    /// Parses `cross_entropy`, `brier` or `auc`.
    pub fn parse(s: &str) -> Result<Objective, String> {
        match s {
            "cross_entropy" | "cross_entropy_bits" => Ok(Objective::CrossEntropy),
            "brier" => Ok(Objective::Brier),
            "auc" => Ok(Objective::Auc),
            _ => Err(format!(
                "unknown objective {s:?}; use cross_entropy, brier or auc"
            )),
        }
    }

    /// A value where smaller is better.
    fn loss(self, s: &Score) -> f64 {
        let v = match self {
            Objective::CrossEntropy => s.cross_entropy_bits,
            Objective::Brier => s.brier,
            Objective::Auc => -s.auc,
        };
        if v.is_nan() { f64::INFINITY } else { v }
    }
}

/// One setting of a sweep and its outcome.
#[derive(Clone, Debug, PartialEq)]
pub struct SweepRow {
    /// The values, in the order of the varied parameters.
    pub values: Vec<f64>,
    /// The scores, or why there are none.
    pub outcome: Result<Score, String>,
}

/// A finished sweep.
#[derive(Clone, Debug, PartialEq)]
pub struct SweepResult {
    /// The varied parameters.
    pub vary: Vec<Vary>,
    /// Every setting, first parameter varying slowest.
    pub rows: Vec<SweepRow>,
    /// Index of the best row by the objective, if any row has scores.
    pub best: Option<usize>,
    /// Why nothing was built, when the plan itself was refused.
    pub refused: Option<String>,
}

impl SweepResult {
    /// The profile of row `i`: `base` with that row's values set.
    pub fn params_of(&self, base: &Params, i: usize) -> Params {
        let mut p = base.clone();
        for (v, x) in self.vary.iter().zip(&self.rows[i].values) {
            let _ = set_param(&mut p, &v.name, *x);
        }
        p
    }
}

/// Every combination of the varied values, first parameter slowest.
fn settings(vary: &[Vary]) -> Vec<Vec<f64>> {
    let mut out: Vec<Vec<f64>> = vec![Vec::new()];
    for v in vary {
        let values = v.values();
        out = out
            .into_iter()
            .flat_map(|prefix| {
                values.iter().map(move |x| {
                    let mut row = prefix.clone();
                    row.push(*x);
                    row
                })
            })
            .collect();
    }
    out
}

/// What to sweep.
#[derive(Clone, Debug)]
pub struct SweepPlan {
    /// The session.
    pub session: Arc<Session>,
    /// The profile the varied values are set into.
    pub base: Params,
    /// The reference every map is scored against.
    pub reference: Arc<Grid>,
    /// One or more varied parameters.
    pub vary: Vec<Vary>,
    /// Which score picks the best row.
    pub objective: Objective,
    /// Frames integrated per map.
    pub frames: usize,
    /// Largest grid a setting may build, cells.
    pub cell_budget: u64,
}

impl SweepPlan {
    /// Refuses a plan that varies no parameter or more than two, or whose settings number
    /// more than [`MAX_SWEEP_SETTINGS`], before anything is built.
    pub fn check(&self) -> Result<(), String> {
        if self.vary.is_empty() || self.vary.len() > 2 {
            return Err(format!(
                "a sweep varies one or two parameters ({} given)",
                self.vary.len()
            ));
        }
        let n = self
            .vary
            .iter()
            .try_fold(1usize, |n, v| n.checked_mul(v.steps));
        match n {
            Some(n) if n <= MAX_SWEEP_SETTINGS => Ok(()),
            _ => Err(format!(
                "{} settings; a sweep builds at most {MAX_SWEEP_SETTINGS}",
                self.vary
                    .iter()
                    .map(|v| v.steps.to_string())
                    .collect::<Vec<_>>()
                    .join(" x ")
            )),
        }
    }

    /// Number of settings (saturating; see [`SweepPlan::check`]).
    pub fn len(&self) -> usize {
        self.vary
            .iter()
            .fold(1usize, |n, v| n.saturating_mul(v.steps))
    }

    /// Whether there is nothing to sweep.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }
}

/// Builds each setting's map (in parallel) and scores it against the reference. `done` counts
/// finished settings; `cancel` stops early (unfinished settings then carry "cancelled").
pub fn sweep(plan: &SweepPlan, cancel: &AtomicBool, done: &AtomicUsize) -> SweepResult {
    if let Err(why) = plan.check() {
        return SweepResult {
            vary: plan.vary.clone(),
            rows: Vec::new(),
            best: None,
            refused: Some(why),
        };
    }
    let SweepPlan {
        session,
        base,
        reference,
        vary,
        objective,
        frames,
        cell_budget,
    } = plan;
    let (objective, frames) = (*objective, *frames);
    let rows: Vec<SweepRow> = settings(vary)
        .into_par_iter()
        .map(|values| {
            let outcome = (|| {
                if cancel.load(Ordering::Relaxed) {
                    return Err("cancelled".to_string());
                }
                let mut p = base.clone();
                for (v, x) in vary.iter().zip(&values) {
                    set_param(&mut p, &v.name, *x)?;
                }
                p.validate().map_err(|e| e.to_string())?;
                let builder = MapBuilder::with_budget(session.clone(), p, *cell_budget)
                    .map_err(|e| e.to_string())?;
                let grid = builder.build(frames);
                score(&grid, reference).map_err(|e| e.to_string())
            })();
            done.fetch_add(1, Ordering::Relaxed);
            SweepRow { values, outcome }
        })
        .collect();
    let best = rows
        .iter()
        .enumerate()
        .filter_map(|(i, r)| r.outcome.as_ref().ok().map(|s| (i, objective.loss(s))))
        .filter(|(_, l)| l.is_finite())
        .min_by(|a, b| a.1.total_cmp(&b.1))
        .map(|(i, _)| i);
    SweepResult {
        vary: vary.clone(),
        rows,
        best,
        refused: None,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn parses_and_spaces_values() {
        let v = Vary::parse("clamp.max=1:5:5").unwrap();
        assert_eq!(v.values(), vec![1.0, 2.0, 3.0, 4.0, 5.0]);
        assert_eq!(Vary::parse("prior=0.3:0.3:1").unwrap().values(), vec![0.3]);
        assert!(
            Vary::parse("clamp.mx=1:5:5")
                .unwrap_err()
                .contains("unknown parameter")
        );
        assert!(Vary::parse("clamp.max=1:5").is_err());
        assert!(Vary::parse("clamp.max=1:x:3").is_err());
        assert!(
            Vary::parse("default_model.thickness=0.1:0.2:2")
                .unwrap_err()
                .contains("Gaussian")
        );
        assert!(Vary::parse("models.sonar.p_free=0.3:0.45:4").is_ok());
        let grid = settings(&[
            Vary::parse("prior=0.4:0.6:3").unwrap(),
            Vary::parse("clamp.max=2:4:2").unwrap(),
        ]);
        assert_eq!(grid.len(), 6);
        assert_eq!(grid[1], vec![0.4, 4.0]);
    }

    #[test]
    fn set_param_creates_per_sensor_models() {
        let mut p = Params::default();
        set_param(&mut p, "models.ring.p_free", 0.3).unwrap();
        assert_eq!(p.models["ring"].p_free(), 0.3);
        assert_eq!(
            p.default_model.p_free(),
            Params::default().default_model.p_free()
        );
    }
}
