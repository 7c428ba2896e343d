//! The parallel rebuild's schedule: which tile applies which chunk when, with no barrier
//! between chunks.
//!
//! Work comes in tasks: preparing chunk k (its beams' jobs and each tile's list of them), and
//! applying chunk k to tile t. Tile t applies its chunks strictly in order, so each cell still
//! sees its updates in the contract's order; apart from that, tiles run ahead independently:
//! while the robot's beams crowd the tiles around it in one chunk, other tiles work through
//! chunks they were left behind on. At most `window` chunks are held at once (prepared or being
//! prepared); a chunk's buffers are reused once every tile has passed it.
//!
//! The same [`Board`] drives the real run (behind a mutex) and [`simulate`], which replays
//! measured task times on any number of workers: the bound a machine with that many free cores
//! would reach under this schedule.

/// A piece of work.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(crate) enum Task {
    /// Prepare chunk `chunk` into buffer `slot`.
    Prepare { chunk: usize, slot: usize },
    /// Apply chunk `chunk` (held in buffer `slot`) to tile `tile`.
    Tile {
        tile: usize,
        chunk: usize,
        slot: usize,
    },
}

#[derive(Clone, Debug)]
struct Held {
    chunk: usize,
    /// Each tile's job count, once prepared.
    lens: Option<Vec<u32>>,
    /// Tiles that have not passed this chunk yet.
    left: usize,
}

/// What is done, running and possible: the schedule's whole state.
#[derive(Clone, Debug)]
pub(crate) struct Board {
    chunks: usize,
    window: usize,
    next_prepare: usize,
    slots: Vec<Option<Held>>,
    /// Per tile, the next chunk it applies.
    cursor: Vec<usize>,
    running: Vec<bool>,
    completed: usize,
}

impl Board {
    /// A schedule of `chunks` chunks over `tiles` tiles, holding at most `window` chunks.
    pub(crate) fn new(chunks: usize, tiles: usize, window: usize) -> Board {
        let window = window.max(1);
        Board {
            chunks,
            window,
            next_prepare: 0,
            slots: vec![None; window],
            cursor: vec![0; tiles],
            running: vec![false; tiles],
            completed: 0,
        }
    }

    /// Chunks every tile has passed (they complete in order).
    pub(crate) fn completed(&self) -> usize {
        self.completed
    }

    /// Whether every chunk is applied to every tile.
    pub(crate) fn finished(&self) -> bool {
        self.completed == self.chunks
    }

    /// The next task to run, if one can start now: preparing the next chunk while a buffer is
    /// free, else the tile with the oldest chunk waiting (the longest list among equals).
    pub(crate) fn pick(&mut self) -> Option<Task> {
        // Tiles pass the chunks that give them nothing first: that may free a buffer.
        for t in 0..self.cursor.len() {
            while !self.running[t]
                && let Some(k) = self.ready_for(t)
                && self.len(t, k) == 0
            {
                self.pass(t, k);
            }
        }
        if self.next_prepare < self.chunks {
            let slot = self.next_prepare % self.window;
            if self.slots[slot].is_none() {
                let chunk = self.next_prepare;
                self.slots[slot] = Some(Held {
                    chunk,
                    lens: None,
                    left: self.cursor.len(),
                });
                self.next_prepare += 1;
                return Some(Task::Prepare { chunk, slot });
            }
        }
        let mut best: Option<(usize, u32, usize)> = None;
        for t in 0..self.cursor.len() {
            if self.running[t] {
                continue;
            }
            if let Some(k) = self.ready_for(t) {
                let len = self.len(t, k);
                if best.is_none_or(|(bk, bl, _)| k < bk || (k == bk && len > bl)) {
                    best = Some((k, len, t));
                }
            }
        }
        let (chunk, _, tile) = best?;
        self.running[tile] = true;
        Some(Task::Tile {
            tile,
            chunk,
            slot: chunk % self.window,
        })
    }

    /// Jobs of prepared chunk `k` that reach tile `t`.
    fn len(&self, t: usize, k: usize) -> u32 {
        self.slots[k % self.window]
            .as_ref()
            .and_then(|h| h.lens.as_ref())
            .map_or(0, |l| l[t])
    }

    /// The chunk tile `t` applies next, if it is prepared.
    fn ready_for(&self, t: usize) -> Option<usize> {
        let k = self.cursor[t];
        let held = self.slots.get(k % self.window)?.as_ref()?;
        (k < self.chunks && held.chunk == k && held.lens.is_some()).then_some(k)
    }

    /// Tile `t` is past chunk `k`.
    fn pass(&mut self, t: usize, k: usize) {
        self.cursor[t] = k + 1;
        let slot = k % self.window;
        let held = self.slots[slot].as_mut().expect("a held chunk");
        held.left -= 1;
        if held.left == 0 {
            debug_assert_eq!(held.chunk, self.completed, "chunks complete in order");
            self.slots[slot] = None;
            self.completed += 1;
        }
    }

    /// Chunk `chunk` is prepared; `lens[t]` jobs can reach tile t.
    pub(crate) fn prepared(&mut self, chunk: usize, lens: Vec<u32>) {
        let held = self.slots[chunk % self.window]
            .as_mut()
            .expect("a chunk being prepared");
        debug_assert_eq!(held.chunk, chunk);
        held.lens = Some(lens);
    }

    /// Tile `tile` finished chunk `chunk`.
    pub(crate) fn applied(&mut self, tile: usize, chunk: usize) {
        self.running[tile] = false;
        self.pass(tile, chunk);
    }
}

/// Measured task times of one run, seconds: per chunk its preparation, and per chunk and tile
/// the job count and the time to apply them.
#[derive(Clone, Debug, Default)]
pub struct TaskTimes {
    /// Tiles of the grid.
    pub tiles: usize,
    /// Buffers the run held.
    pub window: usize,
    /// Per chunk, preparing it.
    pub prepare: Vec<f64>,
    /// Per chunk, per tile: (jobs, seconds); (0, 0.0) for a tile no job reaches.
    pub apply: Vec<Vec<(u32, f64)>>,
}

impl TaskTimes {
    /// Every task's time added up: the run on one worker.
    pub fn total(&self) -> f64 {
        self.prepare.iter().sum::<f64>()
            + self
                .apply
                .iter()
                .flat_map(|c| c.iter().map(|(_, s)| s))
                .sum::<f64>()
    }
}

/// The time the schedule takes with `workers` workers that each run a task in its measured
/// time, seconds (list scheduling in the order [`Board::pick`] gives; no cost for taking a
/// task). `TaskTimes::total() / simulate(..)` is the speedup that many free cores would allow.
pub fn simulate(times: &TaskTimes, workers: usize) -> f64 {
    let chunks = times.prepare.len();
    let mut board = Board::new(chunks, times.tiles, times.window);
    let workers = workers.max(1);
    // (finish time, task) of each busy worker.
    let mut busy: Vec<(f64, Task)> = Vec::new();
    let mut now = 0.0f64;
    loop {
        while busy.len() < workers {
            let Some(task) = board.pick() else { break };
            let d = match task {
                Task::Prepare { chunk, .. } => times.prepare[chunk],
                Task::Tile { tile, chunk, .. } => times.apply[chunk][tile].1,
            };
            busy.push((now + d, task));
        }
        if busy.is_empty() {
            debug_assert!(board.finished(), "a schedule that cannot go on");
            return now;
        }
        let i = (0..busy.len())
            .min_by(|&a, &b| busy[a].0.total_cmp(&busy[b].0))
            .expect("a busy worker");
        let (end, task) = busy.swap_remove(i);
        now = end;
        match task {
            Task::Prepare { chunk, .. } => {
                board.prepared(chunk, times.apply[chunk].iter().map(|a| a.0).collect())
            }
            Task::Tile { tile, chunk, .. } => board.applied(tile, chunk),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn run_all(board: &mut Board, lens: &[Vec<u32>]) -> Vec<Task> {
        let mut order = Vec::new();
        while !board.finished() {
            let task = board.pick().expect("something to do");
            match task {
                Task::Prepare { chunk, .. } => board.prepared(chunk, lens[chunk].clone()),
                Task::Tile { tile, chunk, .. } => board.applied(tile, chunk),
            }
            order.push(task);
        }
        order
    }

    #[test]
    fn each_tile_applies_its_chunks_in_order_and_only_prepared_ones() {
        let lens = vec![vec![3, 0, 1], vec![0, 0, 0], vec![1, 2, 0], vec![4, 4, 4]];
        let mut board = Board::new(4, 3, 2);
        let order = run_all(&mut board, &lens);
        let mut seen = vec![Vec::new(); 3];
        let mut prepared = Vec::new();
        for t in &order {
            match *t {
                Task::Prepare { chunk, slot } => {
                    assert_eq!(slot, chunk % 2);
                    prepared.push(chunk);
                }
                Task::Tile { tile, chunk, .. } => {
                    assert!(prepared.contains(&chunk));
                    assert!(lens[chunk][tile] > 0, "empty lists are passed, not run");
                    seen[tile].push(chunk);
                }
            }
        }
        assert_eq!(prepared, vec![0, 1, 2, 3]);
        assert_eq!(seen, vec![vec![0, 2, 3], vec![2, 3], vec![0, 3]]);
    }

    #[test]
    fn at_most_window_chunks_are_held() {
        // Tile 0 is slow to start: nothing may be prepared beyond the window meanwhile.
        let mut board = Board::new(5, 2, 2);
        assert_eq!(board.pick(), Some(Task::Prepare { chunk: 0, slot: 0 }));
        assert_eq!(board.pick(), Some(Task::Prepare { chunk: 1, slot: 1 }));
        assert_eq!(board.pick(), None, "both buffers taken, none prepared");
        board.prepared(0, vec![1, 1]);
        let a = board.pick().unwrap();
        let b = board.pick().unwrap();
        assert!(
            matches!(a, Task::Tile { chunk: 0, .. }) && matches!(b, Task::Tile { chunk: 0, .. })
        );
        assert_eq!(board.pick(), None);
        board.applied(0, 0);
        // Tile 0 may not start chunk 1 before it is prepared; chunk 0 is still held by tile 1.
        assert_eq!(board.pick(), None);
        board.applied(1, 0);
        assert_eq!(board.completed(), 1);
        assert_eq!(board.pick(), Some(Task::Prepare { chunk: 2, slot: 0 }));
    }

    #[test]
    fn tiles_run_ahead_of_a_busy_one() {
        // Two chunks: tile 0 is busy in chunk 0, tile 1 in chunk 1. With barriers the run
        // takes 10 + 10; without, both tiles work at once: 10 + 1 (and 0.1 per preparation).
        let times = TaskTimes {
            tiles: 2,
            window: 2,
            prepare: vec![0.1, 0.1],
            apply: vec![vec![(5, 10.0), (1, 1.0)], vec![(1, 1.0), (5, 10.0)]],
        };
        let t = simulate(&times, 2);
        assert!((t - 11.1).abs() < 1e-9, "{t}");
        assert!((simulate(&times, 1) - times.total()).abs() < 1e-9);
    }

    #[test]
    fn more_workers_never_take_longer_here_and_stop_at_the_busiest_tile() {
        let times = TaskTimes {
            tiles: 4,
            window: 3,
            prepare: vec![0.01; 6],
            apply: (0..6)
                .map(|k| {
                    (0..4)
                        .map(|t| (1, if t == k % 4 { 3.0 } else { 1.0 }))
                        .collect()
                })
                .collect(),
        };
        let mut last = f64::INFINITY;
        for w in 1..=8 {
            let t = simulate(&times, w);
            assert!(t <= last + 1e-9, "{w} workers: {t} after {last}");
            last = t;
        }
        // The busiest tile's own work (two chunks at 3, four at 1, in order) bounds it below.
        assert!(last >= 10.0);
    }

    #[test]
    fn never_stuck_under_random_finishing_orders() {
        let mut seed = 0x2545_F491_4F6C_DD1Du64;
        let mut next = move || {
            seed ^= seed << 13;
            seed ^= seed >> 7;
            seed ^= seed << 17;
            seed
        };
        for _ in 0..2000 {
            let chunks = (next() % 12) as usize;
            let tiles = 1 + (next() % 6) as usize;
            let window = 1 + (next() % 5) as usize;
            let workers = 1 + (next() % 5) as usize;
            let lens: Vec<Vec<u32>> = (0..chunks)
                .map(|_| (0..tiles).map(|_| (next() % 3) as u32).collect())
                .collect();
            let mut board = Board::new(chunks, tiles, window);
            let mut running: Vec<Task> = Vec::new();
            loop {
                while running.len() < workers {
                    match board.pick() {
                        Some(t) => running.push(t),
                        None => break,
                    }
                }
                if running.is_empty() {
                    assert!(
                        board.finished(),
                        "stuck: {chunks} chunks {tiles} tiles w{window}"
                    );
                    break;
                }
                let i = (next() % running.len() as u64) as usize;
                match running.swap_remove(i) {
                    Task::Prepare { chunk, .. } => board.prepared(chunk, lens[chunk].clone()),
                    Task::Tile { tile, chunk, .. } => board.applied(tile, chunk),
                }
            }
        }
    }
}
