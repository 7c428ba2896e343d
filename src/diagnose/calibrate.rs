//! Fitting one sensor's mount and clock corrections to the run.
//!
//! Objective (sharpness). For given corrections, the two half maps of the run are built with
//! them (see [`super::Split`]; a long run is sampled to at most [`FIT_FRAMES`] evenly spaced
//! frames), each turned into a likelihood field (Thrun, Burgard & Fox, *Probabilistic
//! Robotics*, 2005, ch. 6.4: exp(-d^2 / 2 sigma^2), d the distance to the nearest occupied cell,
//! sigma one lattice cell, interpolated bilinearly between cell centres), and every hit reading
//! of the sensor is scored on the field of the half its frame took no part in. Sharpness is the
//! mean score, in [0, 1]. A wrong mount or clock moves a frame's endpoints by amounts that
//! change with the robot's position and turning, so the halves disagree and sharpness drops;
//! at the right corrections the walls of both halves coincide.
//!
//! Search. A pattern search (coordinate steps, Hooke & Jeeves, "Direct search solution of
//! numerical and statistical problems", JACM 1961): for each fitted field in turn, try the
//! current value plus and minus its step (both at once, on worker threads) and move to the
//! better if it beats the current; otherwise halve the step. It runs three times, coarse to
//! fine: on fields of cells 4, 2 and 1 times the map's, with steps starting at 1, 1/2 and 1/4
//! of each field's [`CalibrationField::first_step`], the last down to
//! [`CalibrationField::finest_step`]. No field moves further than its
//! [`CalibrationField::reach`] from where it started.

use super::{Split, for_each_hit, occupied_above};
use crate::align::LikelihoodField;
use crate::error::{Error, InputError, Problem};
use crate::fusion::MapBuilder;
use crate::params::{Extent, Params, SensorCorrection};
use crate::session::Session;
use rayon::prelude::*;
use std::sync::Arc;
use std::sync::atomic::{AtomicBool, AtomicUsize, Ordering};

/// Frames of a run the fit uses at most (evenly spaced); the agreement before and after is
/// measured on every frame.
pub const FIT_FRAMES: usize = 600;

/// One correction the fit can search.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum CalibrationField {
    /// Mount x (forward), metres.
    MountX,
    /// Mount y (left), metres.
    MountY,
    /// Mount heading, radians.
    MountTheta,
    /// Clock offset, seconds.
    TimeOffset,
}

impl CalibrationField {
    /// Every field, in the order the fit tries them.
    pub const ALL: [CalibrationField; 4] = [
        CalibrationField::MountTheta,
        CalibrationField::TimeOffset,
        CalibrationField::MountX,
        CalibrationField::MountY,
    ];

    /// The field's name in profiles and on the command line.
    pub fn name(self) -> &'static str {
        match self {
            CalibrationField::MountX => "mount_x",
            CalibrationField::MountY => "mount_y",
            CalibrationField::MountTheta => "mount_theta",
            CalibrationField::TimeOffset => "time_offset",
        }
    }

    /// The first step of the coarsest round (metres, radians or seconds).
    pub fn first_step(self) -> f64 {
        match self {
            CalibrationField::MountX | CalibrationField::MountY => 0.1,
            CalibrationField::MountTheta => 2f64.to_radians(),
            CalibrationField::TimeOffset => 0.05,
        }
    }

    /// The step at which the fit stops refining.
    pub fn finest_step(self) -> f64 {
        match self {
            CalibrationField::MountX | CalibrationField::MountY => 0.002,
            CalibrationField::MountTheta => 0.03f64.to_radians(),
            CalibrationField::TimeOffset => 0.001,
        }
    }

    /// How far the fit may move the field from its starting value.
    pub fn reach(self) -> f64 {
        match self {
            CalibrationField::MountX | CalibrationField::MountY => 0.5,
            CalibrationField::MountTheta => 10f64.to_radians(),
            CalibrationField::TimeOffset => 0.5,
        }
    }

    /// The field's value in `c`.
    pub fn get(self, c: &SensorCorrection) -> f64 {
        match self {
            CalibrationField::MountX => c.mount_x,
            CalibrationField::MountY => c.mount_y,
            CalibrationField::MountTheta => c.mount_theta,
            CalibrationField::TimeOffset => c.time_offset,
        }
    }

    /// `c` with the field set to `v`.
    pub fn with(self, c: SensorCorrection, v: f64) -> SensorCorrection {
        let mut c = c;
        match self {
            CalibrationField::MountX => c.mount_x = v,
            CalibrationField::MountY => c.mount_y = v,
            CalibrationField::MountTheta => c.mount_theta = v,
            CalibrationField::TimeOffset => c.time_offset = v,
        }
        c
    }
}

/// Reads a comma list of field names (`mount_x,mount_theta`), in any order, without repeats.
pub fn parse_fields(list: &str) -> Result<Vec<CalibrationField>, Problem> {
    let mut out: Vec<CalibrationField> = Vec::new();
    for word in list.split(',').map(str::trim) {
        let Some(f) = CalibrationField::ALL.iter().find(|f| f.name() == word) else {
            let names: Vec<&str> = CalibrationField::ALL.iter().map(|f| f.name()).collect();
            return Err(Problem::BadField {
                field: "--fit".into(),
                reason: format!(
                    "`{word}` is not a correction; choose from {}",
                    names.join(", ")
                ),
            });
        };
        if out.contains(f) {
            return Err(Problem::BadField {
                field: "--fit".into(),
                reason: format!("`{word}` is named twice"),
            });
        }
        out.push(*f);
    }
    Ok(out)
}

/// How far a fit has come.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct FitProgress {
    /// Objective evaluations done.
    pub evaluations: usize,
    /// About how many the fit will take.
    pub planned: usize,
    /// Best sharpness so far (on the current round's lattice).
    pub best: f64,
}

/// The result of a fit.
#[derive(Clone, Debug, PartialEq)]
pub struct Calibration {
    /// The sensor's id.
    pub sensor: String,
    /// Corrections before the fit (the profile's).
    pub before: SensorCorrection,
    /// Corrections after (fields not fitted unchanged).
    pub after: SensorCorrection,
    /// Sharpness before and after on the map's own lattice, 0..1.
    pub sharpness: (f64, f64),
    /// The run's agreement before and after (every frame), 0..1.
    pub agreement: (Option<f64>, Option<f64>),
    /// Objective evaluations made.
    pub evaluations: usize,
    /// Frames the objective used.
    pub frames_used: usize,
}

impl Calibration {
    /// `params` with this fit's corrections for its sensor.
    pub fn apply(&self, params: &Params) -> Params {
        let mut p = params.clone();
        if self.after.is_zero() {
            p.calibration.remove(&self.sensor);
        } else {
            p.calibration.insert(self.sensor.clone(), self.after);
        }
        p
    }
}

/// Scores corrections of one sensor on a fixed grid.
struct Objective<'a> {
    session: &'a Arc<Session>,
    params: Params,
    sensor_id: String,
    sensor: usize,
    split: Split,
    cancel: &'a AtomicBool,
}

impl Objective<'_> {
    fn builder(&self, c: SensorCorrection) -> Result<MapBuilder, Error> {
        let mut p = self.params.clone();
        p.calibration.insert(self.sensor_id.clone(), c);
        MapBuilder::new(self.session.clone(), p)
    }

    /// Sharpness of the run under corrections `c`, on fields `factor` times coarser than the
    /// map.
    fn sharpness(&self, c: SensorCorrection, factor: u32) -> Result<f64, Error> {
        let builder = self.builder(c)?;
        let maps = self.split.build(&builder, &[], self.cancel, &mut |_| {})?;
        let occupied = occupied_above(&builder);
        let fields = [
            LikelihoodField::of_grid_above(&maps[0], factor, occupied),
            LikelihoodField::of_grid_above(&maps[1], factor, occupied),
        ];
        let split = self.split;
        let (sum, count) = (0..split.frames)
            .into_par_iter()
            .filter(|f| split.takes_part(*f))
            .map(|f| {
                let field = &fields[1 - split.half_of(f)];
                let (mut s, mut n) = (0.0f64, 0u64);
                for_each_hit(&builder, f, |hit| {
                    if hit.sensor == self.sensor {
                        s += field.at_smooth(hit.end()) as f64;
                        n += 1;
                    }
                });
                (s, n)
            })
            .reduce(|| (0.0, 0), |a, b| (a.0 + b.0, a.1 + b.1));
        Ok(if count == 0 { 0.0 } else { sum / count as f64 })
    }
}

/// Fits the corrections `fields` of sensor `sensor_id` to the run (see the module's method),
/// starting from the profile's. `progress` is called after each evaluation; setting `cancel`
/// stops the fit with [`Error::Cancelled`].
pub fn calibrate(
    session: &Arc<Session>,
    params: &Params,
    sensor_id: &str,
    fields: &[CalibrationField],
    cancel: &AtomicBool,
    progress: &(dyn Fn(FitProgress) + Sync),
) -> Result<Calibration, Error> {
    let Some(sensor) = session.sensor_index(sensor_id) else {
        let ids: Vec<&str> = session.sensors.iter().map(|s| s.id.as_str()).collect();
        return Err(InputError::new(
            "--sensor",
            Problem::BadField {
                field: "--sensor".into(),
                reason: format!(
                    "the session has no sensor `{sensor_id}` (its sensors: {})",
                    ids.join(", ")
                ),
            },
        )
        .into());
    };
    let base = MapBuilder::new(session.clone(), params.clone())?;
    // One grid for every candidate, so scores compare like with like.
    let spec = *base.spec();
    let mut fixed = params.clone();
    fixed.extent = Some(Extent {
        origin: spec.origin,
        width: spec.width,
        height: spec.height,
    });
    let before = params
        .calibration
        .get(sensor_id)
        .copied()
        .unwrap_or_default();
    let split = Split::sampled(session.frames.len(), FIT_FRAMES);
    let objective = Objective {
        session,
        params: fixed,
        sensor_id: sensor_id.to_string(),
        sensor,
        split,
        cancel,
    };
    let evaluations = AtomicUsize::new(0);
    let planned = 4 + fields.len() * 24;
    let eval = |c: SensorCorrection, factor: u32, best: f64| -> Result<f64, Error> {
        let s = objective.sharpness(c, factor)?;
        let n = evaluations.fetch_add(1, Ordering::Relaxed) + 1;
        progress(FitProgress {
            evaluations: n,
            planned,
            best: best.max(s),
        });
        Ok(s)
    };
    let sharp_before = eval(before, 1, 0.0)?;
    let mut current = before;
    for (round, factor) in [4u32, 2, 1].into_iter().enumerate() {
        let scale = 0.5f64.powi(round as i32);
        let mut best = eval(current, factor, 0.0)?;
        let mut steps: Vec<f64> = fields.iter().map(|f| f.first_step() * scale).collect();
        let stop: Vec<f64> = fields
            .iter()
            .map(|f| {
                if factor == 1 {
                    f.finest_step()
                } else {
                    f.first_step() * scale / 4.0
                }
            })
            .collect();
        while steps.iter().zip(&stop).any(|(s, m)| s >= m) {
            for (k, field) in fields.iter().enumerate() {
                if steps[k] < stop[k] {
                    continue;
                }
                let start = field.get(&before);
                let here = field.get(&current);
                let tries: Vec<SensorCorrection> = [here - steps[k], here + steps[k]]
                    .into_iter()
                    .filter(|v| (v - start).abs() <= field.reach())
                    .map(|v| field.with(current, v))
                    .collect();
                let scores: Vec<Result<f64, Error>> =
                    tries.par_iter().map(|c| eval(*c, factor, best)).collect();
                let mut moved = false;
                for (c, s) in tries.iter().zip(scores) {
                    let s = s?;
                    if s > best {
                        best = s;
                        current = *c;
                        moved = true;
                    }
                }
                if !moved {
                    steps[k] /= 2.0;
                }
            }
        }
    }
    let sharp_after = eval(current, 1, 0.0)?;
    let run_agreement = |c: SensorCorrection| -> Result<Option<f64>, Error> {
        let builder = objective.builder(c)?;
        Ok(super::agreement(&builder, cancel, &mut |_| {})?.overall())
    };
    let agreement = (run_agreement(before)?, run_agreement(current)?);
    Ok(Calibration {
        sensor: sensor_id.to_string(),
        before,
        after: current,
        sharpness: (sharp_before, sharp_after),
        agreement,
        evaluations: evaluations.load(Ordering::Relaxed),
        frames_used: (0..split.frames).filter(|f| split.takes_part(*f)).count(),
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn field_lists_are_read_and_checked() {
        assert_eq!(
            parse_fields("mount_theta, time_offset").unwrap(),
            vec![CalibrationField::MountTheta, CalibrationField::TimeOffset]
        );
        let e = parse_fields("mount_yaw").unwrap_err().to_string();
        assert!(e.contains("mount_yaw") && e.contains("mount_theta"), "{e}");
        assert!(parse_fields("mount_x,mount_x").is_err());
    }
}
