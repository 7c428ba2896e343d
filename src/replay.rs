//! Seeking within a session: the grid as it stood at any frame, a few frames of replay away.
//!
//! A [`Replay`] marks the run every `interval` frames (about [`MARK_BEAMS`] beams apart). At a
//! few marks it keeps the whole grid (key frames, within half the memory budget); at every other
//! mark it keeps only the cells that changed since the mark before (a delta, within the other
//! half). Once a run's cells saturate at the clamp, few change between marks, so deltas are
//! small and marks can be close however long the run. The state before frame `k` is the key
//! frame at or before `k`, the deltas after it up to the last mark at or before `k`, and the
//! frames in between replayed; marks not yet stored are stored as the replay passes them.
//! Everything stored is exact, so a seek returns the same grid bit for bit as a rebuild from
//! frame 0.

use crate::error::Error;
use crate::fusion::MapBuilder;
use crate::grid::Grid;
use rayon::prelude::*;
use std::collections::BTreeMap;
use std::sync::Arc;
use std::sync::atomic::{AtomicBool, Ordering};

/// Default memory for snapshots, bytes.
pub const DEFAULT_SNAPSHOT_BUDGET: usize = 512 << 20;

/// Beams between marks, about: a seek replays at most this many beams' updates.
pub const MARK_BEAMS: usize = 1 << 15;

/// The cells that changed between two marks: their indices and their values after.
#[derive(Debug, Default)]
struct Delta {
    cells: Vec<u32>,
    values: Vec<f32>,
}

impl Delta {
    /// The cells where `now` differs from `before` (bit for bit), and `before` brought up to
    /// `now` on the way (one pass over both, in parallel blocks).
    fn between(before: &mut Grid, now: &Grid) -> Delta {
        const BLOCK: usize = 1 << 16;
        let parts: Vec<Delta> = before
            .values_mut()
            .par_chunks_mut(BLOCK)
            .zip(now.values().par_chunks(BLOCK))
            .enumerate()
            .map(|(b, (old, new))| {
                let mut d = Delta::default();
                for (i, (o, n)) in old.iter_mut().zip(new).enumerate() {
                    if o.to_bits() != n.to_bits() {
                        d.cells.push((b * BLOCK + i) as u32);
                        d.values.push(*n);
                        *o = *n;
                    }
                }
                d
            })
            .collect();
        let mut all = Delta::default();
        for p in parts {
            all.cells.extend(p.cells);
            all.values.extend(p.values);
        }
        all
    }

    fn apply(&self, grid: &mut Grid) {
        let v = grid.values_mut();
        for (&i, &x) in self.cells.iter().zip(&self.values) {
            v[i as usize] = x;
        }
    }

    fn bytes(&self) -> usize {
        self.cells.len() * (std::mem::size_of::<u32>() + std::mem::size_of::<f32>())
    }
}

/// Key frames and deltas of one builder's grid through a session.
#[derive(Debug)]
pub struct Replay {
    builder: Arc<MapBuilder>,
    /// Frames between marks.
    interval: usize,
    /// Marks between key frames.
    key_every: usize,
    /// Key k: the grid after frames 0..k (a key mark).
    keys: BTreeMap<usize, Grid>,
    max_keys: usize,
    /// Key k: the cells that changed from mark k - interval to mark k.
    deltas: BTreeMap<usize, Delta>,
    delta_budget: usize,
    delta_bytes: usize,
    /// The last state computed (frames integrated, grid): stepping forward from it costs one
    /// frame, which is what playback does. Shared with whoever asked for it (no copy).
    cursor: Option<(usize, Arc<Grid>)>,
}

impl Replay {
    /// A replay of `builder` whose snapshots stay within `budget` bytes.
    pub fn new(builder: Arc<MapBuilder>, budget: usize) -> Replay {
        let session = builder.session();
        let beams: usize = session
            .frames
            .first()
            .map(|f| {
                f.scans
                    .iter()
                    .map(|s| session.sensors[s.sensor].beam_count())
                    .sum()
            })
            .unwrap_or(1);
        Replay::with_interval(builder, budget, MARK_BEAMS / beams.max(1))
    }

    /// A replay marking the run every `interval` frames (at least 1, at most the run).
    pub fn with_interval(builder: Arc<MapBuilder>, budget: usize, interval: usize) -> Replay {
        let frames = builder.session().frames.len().max(1);
        let interval = interval.clamp(1, frames);
        let grid_bytes = (builder.spec().cells() * std::mem::size_of::<f32>()).max(1);
        let max_keys = (budget / 2 / grid_bytes).max(1);
        let marks = frames.div_ceil(interval);
        let key_every = marks.div_ceil(max_keys).max(1);
        Replay {
            builder,
            interval,
            key_every,
            keys: BTreeMap::new(),
            max_keys,
            deltas: BTreeMap::new(),
            delta_budget: budget.saturating_sub(max_keys.min(marks) * grid_bytes),
            delta_bytes: 0,
            cursor: None,
        }
    }

    /// The builder replayed.
    pub fn builder(&self) -> &Arc<MapBuilder> {
        &self.builder
    }

    /// Frames between marks.
    pub fn interval(&self) -> usize {
        self.interval
    }

    /// Number of marks stored (key frames and deltas).
    pub fn snapshot_count(&self) -> usize {
        self.keys.len() + self.deltas.len()
    }

    /// Bytes held by key frames and deltas.
    pub fn snapshot_bytes(&self) -> usize {
        self.keys.len() * self.builder.spec().cells() * std::mem::size_of::<f32>()
            + self.delta_bytes
    }

    fn is_key(&self, mark: usize) -> bool {
        mark.is_multiple_of(self.interval * self.key_every)
    }

    /// The last stored state at or before `target`: the key frame (or frame 0) and how far its
    /// deltas reach, without building it.
    fn reachable(&self, target: usize) -> (usize, usize) {
        let key = self
            .keys
            .range(..=target)
            .next_back()
            .map_or(0, |(&k, _)| k);
        let mut at = key;
        while at + self.interval <= target && self.deltas.contains_key(&(at + self.interval)) {
            at += self.interval;
        }
        (key, at)
    }

    /// The state after frames `0..at`, from the key frame `key` and its deltas.
    fn restore(&self, key: usize, at: usize) -> Grid {
        let mut grid = match self.keys.get(&key) {
            Some(g) => g.clone(),
            None => self.builder.blank(),
        };
        let mut m = key + self.interval;
        while m <= at {
            self.deltas[&m].apply(&mut grid);
            m += self.interval;
        }
        grid
    }

    /// The grid after frames `0..frames` (the state just before frame `frames`), clipped to the
    /// session. `on_frame(grid, done, total)` is called after each piece of frames integrated
    /// (pieces end on marks), so a caller can show progress or a partial grid; `cancel` stops
    /// the work with [`Error::Cancelled`].
    pub fn state_before(
        &mut self,
        frames: usize,
        cancel: &AtomicBool,
        on_frame: &mut dyn FnMut(&Grid, usize, usize),
    ) -> Result<Arc<Grid>, Error> {
        let target = frames.min(self.builder.session().frames.len());
        if let Some((c, g)) = &self.cursor
            && *c == target
        {
            return Ok(g.clone());
        }
        let (key, at) = self.reachable(target);
        let (start, mut grid) = match &self.cursor {
            Some((c, g)) if *c <= target && *c >= at => (*c, (**g).clone()),
            _ => (at, self.restore(key, at)),
        };
        // The cursor's grid is about to be replaced: let it go before integrating.
        self.cursor = None;
        let total = target - start;
        // The state at the last mark passed, while the next mark's delta is to be made.
        let mut previous: Option<Grid> = None;
        let mut f = start;
        while f < target {
            if cancel.load(Ordering::Relaxed) {
                return Err(Error::Cancelled);
            }
            let next = ((f / self.interval + 1) * self.interval).min(target);
            let mark = next.is_multiple_of(self.interval);
            let stored = self.keys.contains_key(&next) || self.deltas.contains_key(&next);
            let wants_key = mark && !stored && self.is_key(next) && self.keys.len() < self.max_keys;
            let wants_delta = mark
                && !stored
                && !wants_key
                && self.delta_bytes < self.delta_budget
                && f.is_multiple_of(self.interval)
                && f + self.interval == next;
            if wants_delta && previous.is_none() {
                previous = Some(grid.clone());
            }
            self.builder.integrate(&mut grid, f..next);
            if wants_key {
                self.keys.insert(next, grid.clone());
            } else if wants_delta && let Some(before) = &mut previous {
                let d = Delta::between(before, &grid);
                self.delta_bytes += d.bytes();
                self.deltas.insert(next, d);
            }
            // Keep `previous` at this mark for the next delta: a delta brought it here
            // already; otherwise copy.
            if mark
                && !wants_delta
                && let Some(p) = &mut previous
            {
                p.values_mut().copy_from_slice(grid.values());
            }
            on_frame(&grid, next - start, total);
            f = next;
        }
        let grid = Arc::new(grid);
        self.cursor = Some((target, grid.clone()));
        Ok(grid)
    }

    /// The states before and after frame `frame`: (frames `0..frame`, frames `0..=frame`).
    pub fn around(
        &mut self,
        frame: usize,
        cancel: &AtomicBool,
        on_frame: &mut dyn FnMut(&Grid, usize, usize),
    ) -> Result<(Arc<Grid>, Arc<Grid>), Error> {
        let before = self.state_before(frame, cancel, on_frame)?;
        let mut after = (*before).clone();
        self.builder.integrate(&mut after, frame..frame + 1);
        Ok((before, Arc::new(after)))
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::demo;

    #[test]
    fn deltas_between_key_frames_give_exact_seeks_in_any_order_within_the_budget() {
        let s = Arc::new(demo::session("door-cycle").unwrap());
        let b = Arc::new(MapBuilder::new(s.clone(), demo::params("door-cycle").unwrap()).unwrap());
        let grid_bytes = b.spec().cells() * 4;
        // Room for three key frames and as much again for deltas; a mark every 5 frames.
        let budget = grid_bytes * 6 + grid_bytes / 2;
        let mut r = Replay::with_interval(b.clone(), budget, 5);
        let never = AtomicBool::new(false);
        let n = s.frames.len();
        r.state_before(n, &never, &mut |_, _, _| {}).unwrap();
        assert!(r.keys.len() <= 3, "{} key frames", r.keys.len());
        assert!(r.deltas.len() > 100, "{} deltas", r.deltas.len());
        assert!(
            r.snapshot_bytes() <= budget,
            "{} > {budget}",
            r.snapshot_bytes()
        );
        for target in [517, 3, 760, 759, 241, 242, 0, 5, 480, 10, 611, 100, 99] {
            let mut replayed = 0;
            let g = r
                .state_before(target, &never, &mut |_, done, _| replayed = done)
                .unwrap();
            assert!(*g == b.build(target), "frame {target}");
            // Everything up to the last mark came from storage.
            assert!(
                replayed < 5 || target == n,
                "{replayed} frames replayed for {target}"
            );
        }
    }

    #[test]
    fn a_budget_too_small_for_deltas_still_gives_exact_seeks() {
        let s = Arc::new(demo::session("glass-pass").unwrap());
        let b = Arc::new(MapBuilder::new(s.clone(), demo::params("glass-pass").unwrap()).unwrap());
        let mut r = Replay::with_interval(b.clone(), b.spec().cells() * 4, 7);
        let never = AtomicBool::new(false);
        for target in [433, 50, 400, 1] {
            let g = r.state_before(target, &never, &mut |_, _, _| {}).unwrap();
            assert!(*g == b.build(target), "frame {target}");
        }
    }

    #[test]
    fn seeks_equal_full_rebuilds() {
        let s = Arc::new(demo::session("glass-pass").unwrap());
        let b = Arc::new(MapBuilder::new(s.clone(), demo::params("glass-pass").unwrap()).unwrap());
        // A small budget forces an interval of several frames.
        let grid_bytes = b.spec().cells() * 4;
        let mut r = Replay::new(b.clone(), grid_bytes * 20);
        assert!(r.interval() > 1);
        let never = AtomicBool::new(false);
        for target in [300, 17, 18, 250, 0, 433, 1000, 299] {
            let mut calls = 0;
            let g = r
                .state_before(target, &never, &mut |_, _, _| calls += 1)
                .unwrap();
            assert_eq!(*g, b.build(target), "frame {target}");
            assert!(calls <= target.min(s.frames.len()));
        }
        assert!(r.snapshot_count() <= 20);
        // A later seek near a snapshot replays at most one interval; stepping on costs one frame.
        let mut calls = 0;
        r.state_before(299, &never, &mut |_, _, _| calls += 1)
            .unwrap();
        assert!(calls < r.interval(), "{calls} frames replayed");
        let mut calls = 0;
        assert_eq!(
            *r.state_before(300, &never, &mut |_, _, _| calls += 1)
                .unwrap(),
            b.build(300)
        );
        assert_eq!(calls, 1);
        let (before, after) = r.around(100, &never, &mut |_, _, _| {}).unwrap();
        assert_eq!((&*before, &*after), (&b.build(100), &b.build(101)));
    }

    #[test]
    fn cancel_stops_the_replay() {
        let s = Arc::new(demo::session("glass-pass").unwrap());
        let b = Arc::new(MapBuilder::new(s, demo::params("glass-pass").unwrap()).unwrap());
        let mut r = Replay::new(b, DEFAULT_SNAPSHOT_BUDGET);
        let cancel = AtomicBool::new(false);
        let result = r.state_before(400, &cancel, &mut |_, _, _| {
            cancel.store(true, Ordering::Relaxed);
        });
        assert!(matches!(result, Err(Error::Cancelled)));
    }
}
