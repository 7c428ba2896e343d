//! Seeking within a session: the grid as it stood at any frame, a few frames of replay away.
//!
//! A [`Replay`] keeps snapshots of the grid every `interval` frames, with the interval chosen so
//! that all snapshots fit a memory budget. Asking for the state before frame `k` starts from
//! the nearest snapshot at or before `k` and integrates the frames in between, storing new
//! snapshots as it passes interval marks. Snapshots are exact copies, so a seek returns the
//! same grid bit for bit as a rebuild from frame 0.

use crate::error::Error;
use crate::fusion::MapBuilder;
use crate::grid::Grid;
use std::collections::BTreeMap;
use std::sync::Arc;
use std::sync::atomic::{AtomicBool, Ordering};

/// Default memory for snapshots, bytes.
pub const DEFAULT_SNAPSHOT_BUDGET: usize = 512 << 20;

/// Snapshots of one builder's grid through a session.
#[derive(Debug)]
pub struct Replay {
    builder: Arc<MapBuilder>,
    interval: usize,
    /// Key k: the grid after frames 0..k (k a multiple of `interval`, k > 0).
    snapshots: BTreeMap<usize, Grid>,
    max_snapshots: usize,
    /// The last state computed (frames integrated, grid): stepping forward from it costs one
    /// frame, which is what playback does. Shared with whoever asked for it (no copy).
    cursor: Option<(usize, Arc<Grid>)>,
}

impl Replay {
    /// A replay of `builder` whose snapshots stay within `budget` bytes.
    pub fn new(builder: Arc<MapBuilder>, budget: usize) -> Replay {
        let frames = builder.session().frames.len().max(1);
        let grid_bytes = (builder.spec().cells() * std::mem::size_of::<f32>()).max(1);
        let max_snapshots = (budget / grid_bytes).max(1);
        let interval = frames.div_ceil(max_snapshots).max(1);
        Replay {
            builder,
            interval,
            snapshots: BTreeMap::new(),
            max_snapshots,
            cursor: None,
        }
    }

    /// The builder replayed.
    pub fn builder(&self) -> &Arc<MapBuilder> {
        &self.builder
    }

    /// Frames between snapshots.
    pub fn interval(&self) -> usize {
        self.interval
    }

    /// Number of snapshots held.
    pub fn snapshot_count(&self) -> usize {
        self.snapshots.len()
    }

    /// The grid after frames `0..frames` (the state just before frame `frames`), clipped to the
    /// session. `on_frame(grid, done, total)` is called after each piece of frames integrated
    /// (pieces end on snapshot marks), so a caller can show progress or a partial grid;
    /// `cancel` stops the work with [`Error::Cancelled`].
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
        let snapshot = self.snapshots.range(..=target).next_back();
        let (start, mut grid) = match (&self.cursor, snapshot) {
            (Some((c, g)), s) if *c <= target && s.is_none_or(|(&k, _)| *c >= k) => {
                (*c, (**g).clone())
            }
            (_, Some((&k, g))) => (k, g.clone()),
            (_, None) => (0, self.builder.blank()),
        };
        // The cursor's grid is about to be replaced: let it go before integrating.
        self.cursor = None;
        let total = target - start;
        // Integrate in pieces that end on snapshot marks: few calls, each a large parallel job.
        let mut f = start;
        while f < target {
            if cancel.load(Ordering::Relaxed) {
                return Err(Error::Cancelled);
            }
            let next = ((f / self.interval + 1) * self.interval).min(target);
            self.builder.integrate(&mut grid, f..next);
            if next.is_multiple_of(self.interval)
                && self.snapshots.len() < self.max_snapshots
                && !self.snapshots.contains_key(&next)
            {
                self.snapshots.insert(next, grid.clone());
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
