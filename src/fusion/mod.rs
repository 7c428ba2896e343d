//! Fusion: applying a session's beams to a grid, in the contract's order, with clamping.
//!
//! A [`MapBuilder`] binds a session to a parameter profile: it fixes the grid geometry,
//! prepares one inverse model per sensor and then integrates any range of frames onto a grid.
//! Order is frames, then scans as listed, then beams by index, then cells from the origin
//! (contract section 6). Each cell's value depends only on the increments that cell receives,
//! so every question about one cell or one beam (history, footprint, before/after values) is
//! answered by the same per-beam footprint function the full rebuild uses, never by a second
//! implementation of the rule.

mod bands;

use crate::error::Error;
use crate::footprint::{ConeAngle, ConeCell, RayWalk, cone_bounds, cone_cells, ray_bounds};
use crate::geometry::Point2;
use crate::grid::{CellIndex, DEFAULT_CELL_BUDGET, Grid, GridSpec, WorldBox};
use crate::logodds::{Clamp, logit};
use crate::model::{ConeFreeTable, PreparedModel};
use crate::params::{FusionRule, NoReturnRule, Params};
use crate::session::{BeamRef, Reading, SensorKind, Session};
use std::collections::{HashMap, HashSet};
use std::hash::{BuildHasherDefault, Hasher};
use std::ops::Range;
use std::sync::Arc;
use std::sync::atomic::{AtomicBool, Ordering};

/// One cell touched by one beam.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Touch {
    /// The cell (may be checked against the grid with [`GridSpec::index`]).
    pub cell: CellIndex,
    /// Distance from the beam origin to the cell centre, metres.
    pub distance: f64,
    /// Log-odds increment the beam gives the cell, before clamping.
    pub increment: f32,
}

/// A touch with the cell's value before and after it, as the fusion applied it.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct TouchRecord {
    /// Cell, distance and increment.
    pub touch: Touch,
    /// Cell value just before this beam (EveryBeam) or at the start of the frame
    /// (OncePerCell), log-odds.
    pub before: f32,
    /// Cell value just after this beam (EveryBeam) or at the end of the frame (OncePerCell).
    pub after: f32,
    /// Whether the clamp cut the update short.
    pub clamped: bool,
    /// Under OncePerCell, whether this beam's increment was the one chosen for the cell;
    /// always true under EveryBeam.
    pub chosen: bool,
}

/// One update applied to one cell, as the history of a cell lists them.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct CellUpdate {
    /// 0-based frame index.
    pub frame: usize,
    /// Frame time, seconds.
    pub t: f64,
    /// Sensor index in the session.
    pub sensor: usize,
    /// Beam index in the scan (under OncePerCell: the beam whose increment was chosen).
    pub beam: usize,
    /// Log-odds increment before clamping.
    pub increment: f32,
    /// Cell value after the update, clamped, log-odds.
    pub value: f32,
    /// Whether the clamp cut the update short.
    pub clamped: bool,
}

/// A beam that takes part in the fusion, resolved into world terms.
#[derive(Clone, Copy)]
struct Included<'a> {
    sensor: usize,
    beam: usize,
    plan: &'a SensorPlan,
    /// Beam origin, world metres.
    origin: Point2,
    /// Beam axis, radians, world frame.
    heading: f64,
    reading: Reading,
    /// How far the beam reaches, metres.
    reach: f64,
}

/// Per-sensor constants of the fusion loop.
#[derive(Clone, Debug)]
struct SensorPlan {
    kind: SensorKind,
    model: PreparedModel,
    cone_width: f64,
    /// Cone sensors: free increments by the tangent of the bearing, where they can be
    /// tabulated.
    cone_free: Option<ConeFreeTable>,
    range_max: f64,
    excluded: bool,
}

impl SensorPlan {
    /// For a cone beam with this reading: cells closer than this (metres) get the free
    /// radial value, so their increment can come from the table by the bearing's tangent
    /// (`f64::NEG_INFINITY` without a table). Pass it to the cone footprint.
    fn cone_tan_until(&self, reading: Reading) -> f64 {
        match (&self.cone_free, reading) {
            (None, _) => f64::NEG_INFINITY,
            (Some(_), Reading::Hit(z)) => self.model.free_below(z),
            (Some(_), _) => f64::INFINITY,
        }
    }

    /// Increment (log-odds, as the grid stores it) of one cone cell for a reading: the one
    /// definition both the plain loop and the fast rebuild use. A cell comes with a tangent
    /// only from a footprint given [`SensorPlan::cone_tan_until`] of the same reading.
    #[inline]
    fn cone_increment(&self, reading: Reading, cc: &ConeCell) -> f32 {
        (match (cc.angle, &self.cone_free) {
            (ConeAngle::Tan(s), Some(table)) => table.eval(s),
            _ => {
                let bearing = cc.angle.bearing();
                match reading {
                    Reading::Hit(z) => {
                        self.model
                            .cone_hit_increment(cc.distance, z, bearing, self.cone_width)
                    }
                    _ => self.model.cone_free_increment(bearing, self.cone_width),
                }
            }
        }) as f32
    }
}

/// A session bound to a parameter profile and a grid geometry, ready to integrate frames.
#[derive(Clone, Debug)]
pub struct MapBuilder {
    session: Arc<Session>,
    params: Params,
    spec: GridSpec,
    plans: Vec<SensorPlan>,
    excluded_beams: HashSet<BeamRef>,
    lo: f32,
    hi: f32,
    prior: f32,
}

/// Identity-like hasher for cell indices in the per-frame OncePerCell scratch map.
#[derive(Default)]
struct CellHasher(u64);

impl Hasher for CellHasher {
    fn finish(&self) -> u64 {
        self.0
    }
    fn write(&mut self, bytes: &[u8]) {
        for &b in bytes {
            self.0 = (self.0 << 8 | b as u64).wrapping_mul(0x9E37_79B9_7F4A_7C15);
        }
    }
    fn write_usize(&mut self, i: usize) {
        self.0 = (i as u64).wrapping_mul(0x9E37_79B9_7F4A_7C15);
    }
}

type CellMap<V> = HashMap<usize, V, BuildHasherDefault<CellHasher>>;

/// OncePerCell's choice (contract section 6) for a cell whose largest increment of a frame is
/// `max`: that one when it is positive, else the smallest. The one statement of the rule for
/// both the plain loop and the fast rebuild.
#[inline(always)]
fn takes_largest(max: f32) -> bool {
    max > 0.0
}

/// The strongest increments a cell received within one frame, for OncePerCell.
#[derive(Clone, Copy, Debug)]
struct Strongest {
    max: f32,
    max_from: (usize, usize),
    min: f32,
    min_from: (usize, usize),
}

impl Strongest {
    fn new(inc: f32, from: (usize, usize)) -> Self {
        Strongest {
            max: inc,
            max_from: from,
            min: inc,
            min_from: from,
        }
    }
    fn add(&mut self, inc: f32, from: (usize, usize)) {
        if inc > self.max {
            self.max = inc;
            self.max_from = from;
        }
        if inc < self.min {
            self.min = inc;
            self.min_from = from;
        }
    }
    /// The contract's choice: the largest increment if any was positive, else the smallest.
    fn chosen(&self) -> (f32, (usize, usize)) {
        if takes_largest(self.max) {
            (self.max, self.max_from)
        } else {
            (self.min, self.min_from)
        }
    }
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
            .map_err(|p| crate::error::InputError::new("parameters", p))?;
        let plans: Vec<SensorPlan> = session
            .sensors
            .iter()
            .map(|s| {
                let model = PreparedModel::new(*params.model_for(&s.id));
                SensorPlan {
                    kind: s.kind,
                    cone_free: match s.kind {
                        SensorKind::Cone => ConeFreeTable::new(&model, s.cone_width),
                        SensorKind::Ray => None,
                    },
                    model,
                    cone_width: s.cone_width,
                    range_max: s.range_max,
                    excluded: params.exclude.sensors.iter().any(|id| id == &s.id),
                }
            })
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
        let spec = match params.extent {
            Some(e) => {
                GridSpec::check_budget(e.width as f64, e.height as f64, budget)?;
                GridSpec {
                    resolution: params.resolution,
                    origin: e.origin,
                    width: e.width,
                    height: e.height,
                }
            }
            None => {
                let bounds = touched_bounds(&session, &params, &plans);
                GridSpec::covering(&bounds, params.resolution, 1, budget)?
            }
        };
        let (lo, hi) = params.clamp.bounds_f32();
        let prior = logit(params.prior) as f32;
        Ok(MapBuilder {
            session,
            params,
            spec,
            plans,
            excluded_beams,
            lo,
            hi,
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
    pub fn clamp_bounds(&self) -> (f32, f32) {
        (self.lo, self.hi)
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

    /// Integrates frames onto `grid`, calling `progress(frames_done)` after each frame and
    /// stopping with [`Error::Cancelled`] when `cancel` is set (the grid is then partial).
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
        self.integrate_bands(grid.values_mut(), start..end, parallel, &mut |done| {
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

    /// Number of cell updates that integrating `frames` applies (under OncePerCell: distinct
    /// cells per frame). Counted in parallel over frames.
    pub fn update_count(&self, frames: Range<usize>) -> u64 {
        use rayon::prelude::*;
        let end = frames.end.min(self.session.frames.len());
        (frames.start.min(end)..end)
            .into_par_iter()
            .map(|f| match self.params.fusion {
                FusionRule::EveryBeam => {
                    let mut n = 0u64;
                    self.for_each_beam_touch(f, |_, _, _, _| n += 1);
                    n
                }
                FusionRule::OncePerCell => {
                    let mut cells = HashSet::new();
                    self.for_each_beam_touch(f, |_, _, idx, _| {
                        cells.insert(idx);
                    });
                    cells.len() as u64
                }
            })
            .sum()
    }

    /// Integrates frames with the plain loop: one beam at a time, one cell at a time, through
    /// the same footprint function the inspection tools use. It is the reference the fast
    /// rebuild ([`MapBuilder::integrate`]) is tested against, bit for bit.
    pub fn integrate_plain(&self, grid: &mut Grid, frames: Range<usize>) {
        assert_eq!(grid.spec(), &self.spec, "grid from another builder");
        let end = frames.end.min(self.session.frames.len());
        let mut scratch = CellMap::default();
        for f in frames.start.min(end)..end {
            self.apply_frame(grid.values_mut(), f, &mut scratch);
        }
    }

    fn apply_frame(&self, values: &mut [f32], f: usize, scratch: &mut CellMap<Strongest>) {
        if self.params.exclude.frame_excluded(f) {
            return;
        }
        let (lo, hi) = (self.lo, self.hi);
        match self.params.fusion {
            FusionRule::EveryBeam => {
                self.for_each_beam_touch(f, |_, _, idx, inc| {
                    let v = &mut values[idx];
                    *v = Clamp::apply(lo, hi, *v, inc);
                });
            }
            FusionRule::OncePerCell => {
                scratch.clear();
                self.for_each_beam_touch(f, |sensor, beam, idx, inc| {
                    scratch
                        .entry(idx)
                        .and_modify(|s| s.add(inc, (sensor, beam)))
                        .or_insert_with(|| Strongest::new(inc, (sensor, beam)));
                });
                for (&idx, s) in scratch.iter() {
                    let v = &mut values[idx];
                    *v = Clamp::apply(lo, hi, *v, s.chosen().0);
                }
            }
        }
    }

    /// Calls `visit` for every beam of frame `f` that takes part in the fusion (not excluded,
    /// and touching something: invalid readings and ignored no-returns are skipped), in the
    /// contract's order. Every fusion path iterates beams through this one function.
    fn for_each_included_beam(&self, f: usize, mut visit: impl FnMut(Included<'_>)) {
        if self.params.exclude.frame_excluded(f) {
            return;
        }
        let frame = &self.session.frames[f];
        for scan in &frame.scans {
            let plan = &self.plans[scan.sensor];
            if plan.excluded {
                continue;
            }
            let sensor = &self.session.sensors[scan.sensor];
            let pose = frame.pose.compose(&sensor.mount);
            let origin = pose.position();
            for (beam, &raw) in self.session.ranges(*scan).iter().enumerate() {
                let reading = sensor.classify(raw);
                let Some(reach) = beam_reach(plan, reading, self.params.no_return) else {
                    continue;
                };
                if !self.excluded_beams.is_empty()
                    && self.excluded_beams.contains(&BeamRef {
                        frame: f,
                        sensor: scan.sensor,
                        beam,
                    })
                {
                    continue;
                }
                visit(Included {
                    sensor: scan.sensor,
                    beam,
                    plan,
                    origin,
                    heading: pose.theta + sensor.angles.angle(beam),
                    reading,
                    reach,
                });
            }
        }
    }

    /// Calls `visit(sensor, beam, storage_index, increment)` for every in-grid cell touched by
    /// every included beam of frame `f`, in the contract's order.
    fn for_each_beam_touch(&self, f: usize, mut visit: impl FnMut(usize, usize, usize, f32)) {
        self.for_each_included_beam(f, |b| {
            self.beam_touches(
                b.plan,
                b.origin,
                b.heading,
                b.reading,
                &mut |idx, _, _, inc| visit(b.sensor, b.beam, idx, inc),
            );
        });
    }

    /// The footprint of one beam with increments: calls `visit(storage_index, cell, distance,
    /// increment)` for each in-grid touched cell, in footprint order. The single source of
    /// truth for which cells a beam touches and by how much.
    #[inline]
    fn beam_touches(
        &self,
        plan: &SensorPlan,
        origin: Point2,
        heading: f64,
        reading: Reading,
        visit: &mut dyn FnMut(usize, CellIndex, f64, f32),
    ) {
        let reach = match beam_reach(plan, reading, self.params.no_return) {
            Some(r) => r,
            None => return,
        };
        let spec = &self.spec;
        match plan.kind {
            SensorKind::Ray => {
                let walk = RayWalk::new(spec, origin, heading, reach);
                let res = spec.resolution;
                let ex0 = spec.origin.x + 0.5 * res - origin.x;
                let ey0 = spec.origin.y + 0.5 * res - origin.y;
                let (w, h) = (spec.width as i64, spec.height as i64);
                let free = plan.model.free_increment() as f32;
                let mut entered = false;
                walk.for_each(|c| {
                    let inside = c.col >= 0 && c.row >= 0 && c.col < w && c.row < h;
                    if !inside {
                        // A straight segment never re-enters a convex box once it left it.
                        return !entered;
                    }
                    entered = true;
                    let ex = c.col as f64 * res + ex0;
                    let ey = c.row as f64 * res + ey0;
                    let d = (ex * ex + ey * ey).sqrt();
                    let inc = match reading {
                        Reading::Hit(z) => plan.model.hit_increment(d, z) as f32,
                        _ => free,
                    };
                    visit(c.row as usize * w as usize + c.col as usize, c, d, inc);
                    true
                });
            }
            SensorKind::Cone => {
                let tan_until = plan.cone_tan_until(reading);
                for cc in cone_cells(spec, origin, heading, plan.cone_width, reach, tan_until) {
                    let inc = plan.cone_increment(reading, &cc);
                    if let Some(idx) = spec.index(cc.cell) {
                        visit(idx, cc.cell, cc.distance, inc);
                    }
                }
            }
        }
    }

    /// Whether a beam is left out by the profile's exclusions.
    pub fn is_excluded(&self, b: BeamRef) -> bool {
        self.params.exclude.frame_excluded(b.frame)
            || self.plans.get(b.sensor).is_some_and(|p| p.excluded)
            || self.excluded_beams.contains(&b)
    }

    /// The footprint of one beam: each in-grid cell it touches, with distance and increment,
    /// in footprint order. Empty for invalid readings, ignored no-returns and unknown beams.
    /// Exclusions are not applied here: an excluded beam still shows what it would do.
    pub fn footprint(&self, b: BeamRef) -> Vec<Touch> {
        let mut out = Vec::new();
        if let Some(ray) = self.session.beam(b) {
            self.beam_touches(
                &self.plans[b.sensor],
                ray.origin,
                ray.heading,
                ray.reading,
                &mut |_, cell, distance, increment| {
                    out.push(Touch {
                        cell,
                        distance,
                        increment,
                    })
                },
            );
        }
        out
    }

    /// The footprint of beam `b` with each cell's value before and after, given `frame_start`:
    /// the grid as it stood before frame `b.frame` was applied. The other beams of the frame
    /// are replayed on the footprint's cells only, so this is cheap.
    pub fn probe(&self, frame_start: &Grid, b: BeamRef) -> Vec<TouchRecord> {
        let touches = self.footprint(b);
        let (lo, hi) = (self.lo, self.hi);
        let excluded = self.is_excluded(b);
        let mut values: CellMap<f32> = touches
            .iter()
            .filter_map(|t| {
                let idx = self.spec.index(t.cell)?;
                Some((idx, frame_start.values()[idx]))
            })
            .collect();
        let start = values.clone();
        let mut out = Vec::with_capacity(touches.len());
        match self.params.fusion {
            FusionRule::EveryBeam => {
                // Replay the frame's beams before `b` on the footprint's cells.
                let mut reached = false;
                if !self.params.exclude.frame_excluded(b.frame) {
                    self.for_each_beam_touch(b.frame, |sensor, beam, idx, inc| {
                        if (sensor, beam) == (b.sensor, b.beam) {
                            reached = true;
                        }
                        if !reached && let Some(v) = values.get_mut(&idx) {
                            *v = Clamp::apply(lo, hi, *v, inc);
                        }
                    });
                }
                for t in touches {
                    let Some(idx) = self.spec.index(t.cell) else {
                        continue;
                    };
                    let before = values[&idx];
                    let raw = before + t.increment;
                    let after = if excluded { before } else { raw.clamp(lo, hi) };
                    values.insert(idx, after);
                    out.push(TouchRecord {
                        touch: t,
                        before,
                        after,
                        clamped: !excluded && after != raw,
                        chosen: !excluded,
                    });
                }
            }
            FusionRule::OncePerCell => {
                let mut strongest: CellMap<Strongest> = CellMap::default();
                if !self.params.exclude.frame_excluded(b.frame) {
                    self.for_each_beam_touch(b.frame, |sensor, beam, idx, inc| {
                        if start.contains_key(&idx) {
                            strongest
                                .entry(idx)
                                .and_modify(|s| s.add(inc, (sensor, beam)))
                                .or_insert_with(|| Strongest::new(inc, (sensor, beam)));
                        }
                    });
                }
                for t in touches {
                    let Some(idx) = self.spec.index(t.cell) else {
                        continue;
                    };
                    let before = start[&idx];
                    let (after, clamped, chosen) = match strongest.get(&idx) {
                        Some(s) => {
                            let (inc, from) = s.chosen();
                            let raw = before + inc;
                            let after = raw.clamp(lo, hi);
                            (after, after != raw, from == (b.sensor, b.beam))
                        }
                        None => (before, false, false),
                    };
                    out.push(TouchRecord {
                        touch: t,
                        before,
                        after,
                        clamped,
                        chosen,
                    });
                }
            }
        }
        out
    }

    /// Every update applied to `cell` in frames `0..until`, in the order applied, with the
    /// value after each. Agrees exactly with [`MapBuilder::build`] for that cell.
    pub fn cell_history(&self, cell: CellIndex, until: usize) -> Vec<CellUpdate> {
        let Some(target) = self.spec.index(cell) else {
            return Vec::new();
        };
        let mut value = self.prior;
        let (lo, hi) = (self.lo, self.hi);
        let mut out = Vec::new();
        let centre = self.spec.centre(cell);
        let slack = self.spec.resolution * 1.5;
        let end = until.min(self.session.frames.len());
        for f in 0..end {
            let frame = &self.session.frames[f];
            let mut strongest: Option<Strongest> = None;
            self.for_each_included_beam(f, |b| {
                // Cheap rejection: the cell's centre must lie within the beam's reach.
                let dx = centre.x - b.origin.x;
                let dy = centre.y - b.origin.y;
                if dx * dx + dy * dy > (b.reach + slack) * (b.reach + slack) {
                    return;
                }
                let mut hit: Option<f32> = None;
                self.beam_touches(
                    b.plan,
                    b.origin,
                    b.heading,
                    b.reading,
                    &mut |idx, _, _, inc| {
                        if idx == target {
                            hit = Some(inc);
                        }
                    },
                );
                let Some(inc) = hit else { return };
                match self.params.fusion {
                    FusionRule::EveryBeam => {
                        let raw = value + inc;
                        value = raw.clamp(lo, hi);
                        out.push(CellUpdate {
                            frame: f,
                            t: frame.t,
                            sensor: b.sensor,
                            beam: b.beam,
                            increment: inc,
                            value,
                            clamped: value != raw,
                        });
                    }
                    FusionRule::OncePerCell => match &mut strongest {
                        Some(s) => s.add(inc, (b.sensor, b.beam)),
                        None => strongest = Some(Strongest::new(inc, (b.sensor, b.beam))),
                    },
                }
            });
            if let Some(s) = strongest {
                let (inc, (sensor, beam)) = s.chosen();
                let raw = value + inc;
                value = raw.clamp(lo, hi);
                out.push(CellUpdate {
                    frame: f,
                    t: frame.t,
                    sensor,
                    beam,
                    increment: inc,
                    value,
                    clamped: value != raw,
                });
            }
        }
        out
    }
}

/// How far a beam reaches (metres), or `None` when it touches nothing.
fn beam_reach(plan: &SensorPlan, reading: Reading, no_return: NoReturnRule) -> Option<f64> {
    match reading {
        Reading::Hit(z) => Some(plan.model.hit_reach(z)),
        Reading::NoReturn => match no_return {
            NoReturnRule::Clear => Some(plan.range_max),
            NoReturnRule::Ignore => None,
        },
        Reading::Invalid => None,
    }
}

/// World box holding every point any beam of the session reaches (exclusions are not applied,
/// so leaving parts out never moves the grid). Falls back to the robot poses, or the world
/// origin, when no beam touches anything.
fn touched_bounds(session: &Session, params: &Params, plans: &[SensorPlan]) -> WorldBox {
    let mut bounds: Option<WorldBox> = None;
    let mut grow = |b: WorldBox| match &mut bounds {
        Some(all) => all.union(&b),
        None => bounds = Some(b),
    };
    for frame in &session.frames {
        for scan in &frame.scans {
            let plan = &plans[scan.sensor];
            let sensor = &session.sensors[scan.sensor];
            let pose = frame.pose.compose(&sensor.mount);
            let origin = pose.position();
            for (beam, &raw) in session.ranges(*scan).iter().enumerate() {
                let Some(reach) = beam_reach(plan, sensor.classify(raw), params.no_return) else {
                    continue;
                };
                let heading = pose.theta + sensor.angles.angle(beam);
                grow(match plan.kind {
                    SensorKind::Ray => ray_bounds(origin, heading, reach),
                    SensorKind::Cone => cone_bounds(origin, heading, plan.cone_width, reach),
                });
            }
        }
    }
    bounds.unwrap_or_else(|| {
        let mut b = WorldBox::at(Point2::new(0.0, 0.0));
        let mut first = true;
        for f in &session.frames {
            if first {
                b = WorldBox::at(f.pose.position());
                first = false;
            } else {
                b.include(f.pose.position());
            }
        }
        b
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::geometry::Pose2;
    use crate::logodds::probability;
    use crate::params::ModelSpec;
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
