//! Fusion: applying a session's beams to a grid, in the contract's order, with clamping.
//!
//! A [`MapBuilder`] binds a session to a parameter profile: it fixes the grid geometry,
//! prepares one inverse model per sensor and then integrates any range of frames onto a grid.
//! Order is frames, then scans as listed, then beams by index, then cells from the origin
//! (contract section 6). The pieces, in the order a reader meets them:
//!
//! - [`crate::rule`]: the cell update itself (add and clamp; OncePerCell's choice), the one
//!   place every path below updates a cell;
//! - `setup`: which beams take part and the plain definition of the cells each touches;
//! - `extent`: the grid a session and a profile give;
//! - `plain`: the plain loop, the reference for everything faster;
//! - `fast`: the fast rebuild (tiles over threads), bit for bit the plain loop's result;
//! - `inspect`: a beam's footprint with before and after values, a cell's history.

mod extent;
mod fast;
mod inspect;
mod plain;
mod setup;

pub use crate::rule::CellBounds;
pub use inspect::{CellUpdate, Touch, TouchRecord, history_csv};

use crate::error::{Error, InputError};
use crate::grid::{DEFAULT_CELL_BUDGET, Grid, GridSpec};
use crate::logodds::logit;
use crate::model::PreparedModel;
use crate::params::{Params, SensorCorrection};
use crate::session::{BeamRef, Session};
use setup::SensorPlan;
use std::collections::HashSet;
use std::ops::Range;
use std::sync::Arc;
use std::sync::atomic::{AtomicBool, Ordering};

/// A session bound to a parameter profile and a grid geometry, ready to integrate frames.
#[derive(Clone, Debug)]
pub struct MapBuilder {
    session: Arc<Session>,
    params: Params,
    spec: GridSpec,
    plans: Vec<SensorPlan>,
    excluded_beams: HashSet<BeamRef>,
    /// Per session sensor, the profile's corrections of its mount and clock.
    corrections: Vec<SensorCorrection>,
    bounds: CellBounds,
    /// logit(prior), the value of a cell nothing has touched.
    prior: f32,
}

impl MapBuilder {
    /// Binds `session` to `params` (validated here) with the default cell budget.
    pub fn new(session: Arc<Session>, params: Params) -> Result<MapBuilder, Error> {
        Self::with_budget(session, params, DEFAULT_CELL_BUDGET)
    }

    /// As [`MapBuilder::new`] with an explicit cell budget for the grid.
    pub fn with_budget(
        session: Arc<Session>,
        params: Params,
        budget: u64,
    ) -> Result<MapBuilder, Error> {
        params
            .validate()
            .map_err(|p| InputError::new("parameters", p))?;
        let plans: Vec<SensorPlan> = session
            .sensors
            .iter()
            .map(|s| SensorPlan::new(s, &params))
            .collect();
        let excluded_beams = params
            .exclude
            .beams
            .iter()
            .filter_map(|(frame, id, beam)| {
                Some(BeamRef {
                    frame: *frame,
                    sensor: session.sensor_index(id)?,
                    beam: *beam,
                })
            })
            .collect();
        let corrections: Vec<SensorCorrection> = session
            .sensors
            .iter()
            .map(|s| params.calibration.get(&s.id).copied().unwrap_or_default())
            .collect();
        let spec = Self::grid_for(&session, &params, &plans, &corrections, budget)?;
        let prior = logit(params.prior) as f32;
        let bounds = CellBounds::from(params.clamp);
        Ok(MapBuilder {
            session,
            params,
            spec,
            plans,
            excluded_beams,
            corrections,
            bounds,
            prior,
        })
    }

    /// The grid geometry every grid of this builder has.
    pub fn spec(&self) -> &GridSpec {
        &self.spec
    }

    /// The session.
    pub fn session(&self) -> &Arc<Session> {
        &self.session
    }

    /// The parameter profile.
    pub fn params(&self) -> &Params {
        &self.params
    }

    /// The prepared inverse model of sensor `sensor`.
    pub fn model(&self, sensor: usize) -> &PreparedModel {
        &self.plans[sensor].model
    }

    /// Clamp bounds as the grid applies them, log-odds.
    pub fn bounds(&self) -> CellBounds {
        self.bounds
    }

    /// logit(prior): the value of a cell nothing has touched, log-odds.
    pub fn prior(&self) -> f32 {
        self.prior
    }

    /// A grid with every cell at logit(prior).
    pub fn blank(&self) -> Grid {
        Grid::filled(self.spec, self.prior)
    }

    /// The grid after integrating the first `until` frames (clipped to the session).
    pub fn build(&self, until: usize) -> Grid {
        let mut g = self.blank();
        self.integrate(&mut g, 0..until);
        g
    }

    /// Integrates frames `frames` (clipped to the session) onto `grid`.
    pub fn integrate(&self, grid: &mut Grid, frames: Range<usize>) {
        let never = AtomicBool::new(false);
        let _ = self.integrate_cancellable(grid, frames, &never, &mut |_| {});
    }

    /// Integrates frames onto `grid` with the fast rebuild (on all threads of the current
    /// rayon pool), calling `progress(frames_done)` now and then and stopping with
    /// [`Error::Cancelled`] when `cancel` is set (the grid is then partial).
    pub fn integrate_cancellable(
        &self,
        grid: &mut Grid,
        frames: Range<usize>,
        cancel: &AtomicBool,
        progress: &mut dyn FnMut(usize),
    ) -> Result<(), Error> {
        assert_eq!(grid.spec(), &self.spec, "grid from another builder");
        let end = frames.end.min(self.session.frames.len());
        let start = frames.start.min(end);
        if cancel.load(Ordering::Relaxed) {
            return Err(Error::Cancelled);
        }
        let parallel = rayon::current_num_threads() > 1;
        let mut stopped = false;
        self.integrate_fast(grid.values_mut(), start..end, parallel, &mut |done| {
            progress(done);
            stopped = cancel.load(Ordering::Relaxed);
            !stopped
        });
        if stopped {
            Err(Error::Cancelled)
        } else {
            Ok(())
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::geometry::{Point2, Pose2};
    use crate::logodds::probability;
    use crate::params::ModelSpec;
    use crate::params::{FusionRule, NoReturnRule};
    use crate::session::SensorKind;
    use crate::session::{BeamAngles, Sensor};

    fn one_beam_session(ranges: &[f32]) -> Arc<Session> {
        let sensor = Sensor {
            id: "laser".into(),
            kind: SensorKind::Ray,
            mount: Pose2::default(),
            angles: BeamAngles::List(vec![0.0]),
            range_min: 0.1,
            range_max: 10.0,
            cone_width: 0.0,
        };
        let mut s = Session::with_sensors("t".into(), String::new(), vec![sensor]).unwrap();
        for (k, r) in ranges.iter().enumerate() {
            s.push_frame(k as f64, Pose2::new(0.05, 0.05, 0.0), &[("laser", &[*r])])
                .unwrap();
        }
        Arc::new(s)
    }

    fn band_params() -> Params {
        Params {
            resolution: 0.1,
            default_model: ModelSpec::Band {
                thickness: 0.1,
                p_occ: 0.6,
                p_free: 0.4,
            },
            ..Params::default()
        }
    }

    #[test]
    fn one_beam_along_a_row() {
        // Geometry of a simple case: a beam along +x from the centre of a cell with a hit at
        // 0.98 m reaches 1.03 m, so it passes that cell and the next ten in order; with a
        // band model of thickness 0.1 m the cells whose centre lies in front of 0.93 m are
        // free and the cell centred 1.0 m away is occupied.
        let b = MapBuilder::new(one_beam_session(&[0.98]), band_params()).unwrap();
        let fp = b.footprint(BeamRef {
            frame: 0,
            sensor: 0,
            beam: 0,
        });
        assert_eq!(fp.len(), 11);
        let origin_col = b.spec().cell_at(Point2::new(0.05, 0.05)).col;
        for (k, t) in fp.iter().enumerate() {
            assert_eq!(t.cell.col, origin_col + k as i64);
            assert!((t.distance - 0.1 * k as f64).abs() < 1e-9);
            let want = if k < 10 { logit(0.4) } else { logit(0.6) };
            assert!((t.increment as f64 - want).abs() < 1e-6, "cell {k}");
        }
    }

    #[test]
    fn clamping_and_recovery_in_log_odds() {
        // Common practice, no source: with a clamp, a cell saturates at the bound and a
        // bounded number of contrary readings brings it back across 0.5.
        let mut ranges = vec![0.98f32; 20];
        ranges.extend(std::iter::repeat_n(10.0f32, 10)); // no-returns clear the cell
        let p = Params {
            clamp: crate::logodds::Clamp {
                min: -1.0,
                max: 1.5,
            },
            ..band_params()
        };
        let b = MapBuilder::new(one_beam_session(&ranges), p).unwrap();
        let cell = b.spec().cell_at(Point2::new(1.05, 0.05));
        let h = b.cell_history(cell, ranges.len());
        assert_eq!(h.len(), 30);
        let l_occ = logit(0.6) as f32;
        assert_eq!(h[0].value, l_occ);
        assert!(h[19].clamped && h[19].value == 1.5);
        // logit(0.4) = -0.405: 1.5 -> ... crosses 0 on the 4th clearing reading.
        let crossing = h[20..].iter().position(|u| u.value < 0.0).unwrap() + 1;
        assert_eq!(crossing, 4);
        let g = b.build(ranges.len());
        assert_eq!(g.get(cell).unwrap(), h.last().unwrap().value);
        assert!(probability(g.get(cell).unwrap() as f64) < 0.5);
    }

    #[test]
    fn once_per_cell_takes_the_strongest() {
        // Two beams in one frame through the same cells: one hits at 0.5 m, one at 1.0 m.
        let sensor = Sensor {
            id: "laser".into(),
            kind: SensorKind::Ray,
            mount: Pose2::default(),
            angles: BeamAngles::List(vec![0.0, 0.0]),
            range_min: 0.1,
            range_max: 10.0,
            cone_width: 0.0,
        };
        let mut s = Session::with_sensors("t".into(), String::new(), vec![sensor]).unwrap();
        s.push_frame(0.0, Pose2::new(0.05, 0.05, 0.0), &[("laser", &[0.5, 1.0])])
            .unwrap();
        let s = Arc::new(s);
        let every = MapBuilder::new(s.clone(), band_params()).unwrap();
        let once = MapBuilder::new(
            s,
            Params {
                fusion: FusionRule::OncePerCell,
                ..band_params()
            },
        )
        .unwrap();
        let at = |b: &MapBuilder, x: f64| {
            b.build(1)
                .get(b.spec().cell_at(Point2::new(x, 0.05)))
                .unwrap()
        };
        let (lf, lo) = (logit(0.4) as f32, logit(0.6) as f32);
        // Cell at 0.5 m: occupied by beam 0, free by beam 1.
        assert!((at(&every, 0.55) - (lo + lf)).abs() < 1e-6);
        assert!((at(&once, 0.55) - lo).abs() < 1e-6);
        // Cell at 0.2 m: free twice under EveryBeam, once under OncePerCell.
        assert!((at(&every, 0.25) - 2.0 * lf).abs() < 1e-6);
        assert!((at(&once, 0.25) - lf).abs() < 1e-6);
        let h = once.cell_history(once.spec().cell_at(Point2::new(0.55, 0.05)), 1);
        assert_eq!(h.len(), 1);
        assert_eq!((h[0].beam, h[0].increment), (0, lo));
    }

    #[test]
    fn probe_reports_before_and_after() {
        let b = MapBuilder::new(one_beam_session(&[1.0, 1.0]), band_params()).unwrap();
        let start = b.build(1);
        let recs = b.probe(
            &start,
            BeamRef {
                frame: 1,
                sensor: 0,
                beam: 0,
            },
        );
        let after = b.build(2);
        for r in &recs {
            assert_eq!(r.before, start.get(r.touch.cell).unwrap());
            assert_eq!(r.after, after.get(r.touch.cell).unwrap());
        }
    }

    #[test]
    fn invalid_and_ignored_readings_touch_nothing() {
        let b = MapBuilder::new(
            one_beam_session(&[0.01, f32::NAN, 10.0]),
            Params {
                no_return: NoReturnRule::Ignore,
                ..band_params()
            },
        )
        .unwrap();
        let g = b.build(3);
        assert!(g.values().iter().all(|&v| v == 0.0));
    }
}
