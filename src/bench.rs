//! `gridscope bench`: speed on this machine, measured in one process so that ratios are fair.
//!
//! A deterministic run through a large generated building is simulated in memory, then timed:
//! a plain streaming read-modify-write over a grid of the same size, one cell at a time (the
//! memory floor as a cell update meets it; the same pass in vector instructions is reported
//! beside it), the full rebuild on one thread and on all threads (and whether the two grids
//! are identical bit for bit), seeks of the window's replay engine to random frames, and
//! loading the session's ranges from the packed (NumPy) layout against parsing them from RON,
//! and the diagnosis: the run's agreement, a fit of the mount heading and clock, and the
//! realignment of a stretch of [`REALIGN_FRAMES`] frames. Each timing is the median of several repetitions; the floor passes, the two rebuilds and
//! the independent copies (below) take turns, and each ratio is the median of the repetitions'
//! own ratios. Beside the speedup it reports what the machine gives at that moment to as many
//! independent one-thread rebuilds as there are threads, run at once (`copies_speedup`), and
//! the speedup's share of that (`split_efficiency`): the first is the machine's, the second the
//! parallel split's; and the quartiles of the repetitions' speedups, to show their spread.
//! The speedup is also measured at each power of two below the thread count
//! (`speedup_N`), and `bound_speedup_N` tells what the parallel schedule would allow on N free
//! cores: every task of a rebuild timed on one worker, then replayed on N (see
//! `fusion::fast::schedule`), so that a design can be judged on a machine with fewer cores.
//! Speed targets belong here, never in tests.

use crate::diagnose::{self, CalibrationField};
use crate::error::Error;
use crate::fusion::{CellBounds, MapBuilder};
use crate::limits::{MAX_BEAMS_PER_SCAN, MAX_FRAMES, MAX_SIMULATED_READINGS};
use crate::params::Params;
use crate::replay::{DEFAULT_SNAPSHOT_BUDGET, Replay};
use crate::session::Session;
use crate::sim::{BuildingSpec, building_plan, simulate};
use std::hint::black_box;
use std::sync::Arc;
use std::sync::atomic::AtomicBool;
use std::time::Instant;

/// Repetitions per timing by default. The speedup of a single repetition swings widely on a
/// shared two-core machine (1.3 to 2.1 here, seconds apart), and the median of nine still moved
/// by 0.2 from run to run; 21 make the median steadier for a bench of about a minute (README,
/// Performance, has the figures).
pub const DEFAULT_REPS: usize = 21;

/// Frames of the stretch the benchmark re-aligns.
pub const REALIGN_FRAMES: usize = 40;

/// What to measure.
#[derive(Clone, Debug, PartialEq)]
pub struct BenchOptions {
    /// The generated building and run.
    pub building: BuildingSpec,
    /// Cell side, metres.
    pub resolution: f64,
    /// Threads for the parallel rebuild (all cores when `None`).
    pub threads: Option<usize>,
    /// Repetitions per timing (the median is reported).
    pub reps: usize,
    /// Random seeks timed.
    pub seeks: usize,
}

impl BenchOptions {
    /// Refuses options the benchmark cannot run with, naming the option and why, before
    /// anything is simulated.
    pub fn check(&self) -> Result<(), (String, String)> {
        let b = &self.building;
        let bad = |option: &str, why: String| Err((option.to_string(), why));
        let positive = |v: f64, max: f64| v.is_finite() && v > 0.0 && v <= max;
        if b.frames == 0 || b.frames > MAX_FRAMES {
            return bad("--frames", format!("must lie in 1..={MAX_FRAMES}"));
        }
        if b.beams == 0 || b.beams > MAX_BEAMS_PER_SCAN {
            return bad("--beams", format!("must lie in 1..={MAX_BEAMS_PER_SCAN}"));
        }
        if (b.frames as u64).saturating_mul(b.beams as u64) > MAX_SIMULATED_READINGS {
            return bad(
                "--frames",
                format!("frames x beams must be at most {MAX_SIMULATED_READINGS} readings"),
            );
        }
        if !positive(b.range, 1000.0) {
            return bad(
                "--range",
                format!("must be > 0 and at most 1000 m (got {})", b.range),
            );
        }
        if !positive(self.resolution, 10.0) {
            return bad(
                "--resolution",
                format!("must be > 0 and at most 10 m (got {})", self.resolution),
            );
        }
        for (option, v) in [("--width", b.width), ("--height", b.height)] {
            if !positive(v, 10_000.0) {
                return bad(option, format!("must be > 0 and at most 10000 m (got {v})"));
            }
        }
        if self.threads.is_some_and(|t| t == 0 || t > 4096) {
            return bad("--threads", "must lie in 1..=4096".into());
        }
        if self.reps == 0 || self.reps > 1000 {
            return bad("--reps", "must lie in 1..=1000".into());
        }
        if self.seeks > 100_000 {
            return bad("--seeks", "must be at most 100000".into());
        }
        Ok(())
    }
}

impl Default for BenchOptions {
    fn default() -> Self {
        BenchOptions {
            building: BuildingSpec::default(),
            resolution: 0.05,
            threads: None,
            reps: DEFAULT_REPS,
            seeks: 50,
        }
    }
}

/// The `q`-quantile of `v` (0 <= q <= 1; NaN when `v` is empty): the sorted values read at
/// position q (n - 1), interpolating linearly between neighbours (definition 7 of Hyndman &
/// Fan, "Sample quantiles in statistical packages", The American Statistician, 1996; the
/// default of NumPy's `percentile` and of Python's `statistics.quantiles(method="inclusive")`).
fn quantile(v: &[f64], q: f64) -> f64 {
    let mut v = v.to_vec();
    v.sort_by(f64::total_cmp);
    let Some(last) = v.len().checked_sub(1) else {
        return f64::NAN;
    };
    let at = q.clamp(0.0, 1.0) * last as f64;
    let (i, frac) = (at.floor() as usize, at.fract());
    match v.get(i + 1) {
        Some(&next) if frac > 0.0 => v[i] + frac * (next - v[i]),
        _ => v[i],
    }
}

fn median(v: Vec<f64>) -> f64 {
    quantile(&v, 0.5)
}

/// Seconds taken by `f`, median over `reps` runs.
fn time(reps: usize, mut f: impl FnMut()) -> f64 {
    median(
        (0..reps.max(1))
            .map(|_| {
                let t = Instant::now();
                f();
                t.elapsed().as_secs_f64()
            })
            .collect(),
    )
}

/// Peak resident memory of this process, MB (Linux; `NaN` elsewhere).
pub fn peak_rss_mb() -> f64 {
    std::fs::read_to_string("/proc/self/status")
        .ok()
        .and_then(|s| {
            s.lines()
                .find_map(|l| l.strip_prefix("VmHWM:"))
                .and_then(|v| v.trim().trim_end_matches("kB").trim().parse::<f64>().ok())
        })
        .map_or(f64::NAN, |kb| kb / 1024.0)
}

/// Runs the benchmark; `say` gets progress lines (for stderr). Returns `key=value` pairs in
/// the documented order.
pub fn run(opts: &BenchOptions, say: &mut dyn FnMut(&str)) -> Result<Vec<(String, String)>, Error> {
    let mut out: Vec<(String, String)> = Vec::new();
    let mut put = |k: &str, v: String| out.push((k.to_string(), v));

    say("simulating the run");
    let t = Instant::now();
    let plan = building_plan(&opts.building);
    let session = Arc::new(simulate(&plan)?);
    let sim_s = t.elapsed().as_secs_f64();
    let params = Params {
        resolution: opts.resolution,
        ..Params::default()
    };
    let builder = Arc::new(MapBuilder::new(session.clone(), params)?);
    let n = session.frames.len();
    let spec = *builder.spec();
    say(&format!(
        "{} frames x {} beams, grid {} x {} cells; counting updates",
        n,
        session.sensors[0].beam_count(),
        spec.width,
        spec.height
    ));
    let cells_touched = builder.update_count(0..n);

    let threads = opts
        .threads
        .unwrap_or_else(|| std::thread::available_parallelism().map_or(1, |n| n.get()));
    let pool = |k: usize| {
        rayon::ThreadPoolBuilder::new()
            .num_threads(k)
            .build()
            .map_err(|e| Error::Failed(format!("the thread pool could not start: {e}")))
    };
    let (one, all) = (pool(1)?, pool(threads)?);
    // One one-thread pool per thread, for as many independent one-thread rebuilds at once.
    let copies = (0..threads)
        .map(|_| pool(1))
        .collect::<Result<Vec<_>, _>>()?;

    say("memory floor, rebuilds on one thread and on all threads, independent copies, in turn");
    // Each repetition times the floor passes, a one-thread rebuild, an all-thread rebuild and
    // the independent copies, one right after another, so that a slow spell of this shared
    // machine lands on all of them rather than on one side of a ratio; each ratio is the
    // median of the repetitions' own ratios, so a spell that slows one repetition moves one
    // ratio rather than one of two medians taken at different moments.
    let mut grid = builder.blank();
    let bounds = builder.bounds();
    let cells = spec.cells() as f64;
    let updates = cells_touched as f64;
    let (mut seq_grid, mut par_grid) = (builder.blank(), builder.blank());
    let (mut seq_times, mut par_times) = (Vec::new(), Vec::new());
    let (mut floors, mut floors_simd) = (Vec::new(), Vec::new());
    let mut copies_times = Vec::new();
    for _ in 0..opts.reps.max(1) {
        floors.push(cells / time_floor(grid.values_mut(), bounds, floor_pass_per_cell));
        floors_simd.push(cells / time_floor(grid.values_mut(), bounds, floor_pass_vector));
        seq_times.push(time(1, || seq_grid = one.install(|| builder.build(n))));
        par_times.push(time(1, || par_grid = all.install(|| builder.build(n))));
        // What the machine gives this work on all threads at this moment, whatever the
        // split: one independent one-thread rebuild per thread, all at once. On a shared
        // virtual machine this swings from run to run (two virtual cores may share one
        // physical core for a while), and the speedup swings with it.
        copies_times.push(time(1, || {
            std::thread::scope(|s| {
                for pool in &copies {
                    s.spawn(|| black_box(pool.install(|| builder.build(n))));
                }
            })
        }));
    }
    let paired = |f: &dyn Fn(usize) -> f64| median((0..seq_times.len()).map(f).collect());
    let speedup_at = |i: usize| seq_times[i] / par_times[i];
    // The repetitions' speedups: their median, and their first and third quartiles to show
    // how far they spread.
    let speedups: Vec<f64> = (0..seq_times.len()).map(speedup_at).collect();
    let [speedup_q1, speedup, speedup_q3] = [0.25, 0.5, 0.75].map(|q| quantile(&speedups, q));
    // Throughput of the independent copies over one rebuild: about the most a split can reach.
    let ceiling = |i: usize| threads as f64 * seq_times[i] / copies_times[i];
    let copies_speedup = paired(&ceiling);
    let efficiency = paired(&|i| speedup_at(i) / ceiling(i));
    let floor_ratio = paired(&|i| updates / seq_times[i] / floors[i]);
    let floor_ratio_simd = paired(&|i| updates / seq_times[i] / floors_simd[i]);
    let (floor, floor_simd) = (median(floors), median(floors_simd));
    let (seq_s, par_s) = (median(seq_times), median(par_times));
    let identical = seq_grid
        .values()
        .iter()
        .zip(par_grid.values())
        .all(|(a, b)| a.to_bits() == b.to_bits());

    // The speedup at fewer threads (powers of two), each paired with one-thread rebuilds.
    let mut speedup_at_count = Vec::new();
    let mut k = 2;
    while k < threads {
        let p = pool(k)?;
        let ratios: Vec<f64> = (0..opts.reps.div_ceil(3).max(1))
            .map(|_| {
                let one_s = time(1, || {
                    black_box(one.install(|| builder.build(n)));
                });
                one_s
                    / time(1, || {
                        black_box(p.install(|| builder.build(n)));
                    })
            })
            .collect();
        speedup_at_count.push((k, median(ratios)));
        k *= 2;
    }
    speedup_at_count.push((threads, speedup));
    say("timing the parallel schedule's tasks on one worker");
    let bound_counts = [2, 4, 8, 16, 32];
    let schedule = one.install(|| builder.schedule_times(&bound_counts));

    say("seeking");
    let mut replay = Replay::new(builder.clone(), DEFAULT_SNAPSHOT_BUDGET);
    let never = AtomicBool::new(false);
    let t = Instant::now();
    all.install(|| replay.state_before(n, &never, &mut |_, _, _| {}))?;
    let first_pass_s = t.elapsed().as_secs_f64();
    // The first seek after the full pass takes its buffers fresh from the system (every grid
    // allocated so far is a snapshot still held); it is timed apart, and the 50 random seeks
    // measure the engine as the window uses it afterwards.
    let t = Instant::now();
    black_box(all.install(|| replay.around(n / 2, &never, &mut |_, _, _| {}))?);
    let seek_first = t.elapsed().as_secs_f64() * 1e3;
    let mut rng = crate::sim::Rng::new(opts.building.seed ^ 0xBE4C);
    let mut seeks = Vec::with_capacity(opts.seeks);
    for _ in 0..opts.seeks {
        let target = (rng.uniform() * n as f64) as usize;
        let t = Instant::now();
        let g = all.install(|| replay.around(target, &never, &mut |_, _, _| {}))?;
        black_box(&g);
        seeks.push(t.elapsed().as_secs_f64() * 1e3);
    }
    let seek_max = seeks.iter().copied().fold(0.0, f64::max);
    let seek_median = median(seeks);

    say("diagnosis: the run's agreement, a fit of the mount heading and clock, a realignment");
    let t = Instant::now();
    let run = all.install(|| diagnose::agreement(&builder, &never, &mut |_| {}))?;
    let agreement_s = t.elapsed().as_secs_f64();
    let t = Instant::now();
    let fit = all.install(|| {
        diagnose::calibrate(
            &session,
            builder.params(),
            &session.sensors[0].id,
            &[CalibrationField::MountTheta, CalibrationField::TimeOffset],
            &never,
            &|_| {},
        )
    })?;
    let fit_s = t.elapsed().as_secs_f64();
    let stretch = n / 2..(n / 2 + REALIGN_FRAMES).min(n);
    let t = Instant::now();
    all.install(|| {
        diagnose::realign(
            &builder,
            stretch.clone(),
            diagnose::RealignWindow::default(),
            &never,
            &|_| {},
        )
    })?;
    let realign_s = t.elapsed().as_secs_f64();

    say("loading ranges");
    let (load_rate, ron_rate) = load_rates(&session, opts.reps)?;

    put("cells_touched", cells_touched.to_string());
    put("floor_updates_per_s", format!("{floor:.4e}"));
    put(
        "seq_updates_per_s",
        format!("{:.4e}", cells_touched as f64 / seq_s),
    );
    put(
        "par_updates_per_s",
        format!("{:.4e}", cells_touched as f64 / par_s),
    );
    put("threads", threads.to_string());
    put("speedup", format!("{speedup:.3}"));
    put("floor_ratio", format!("{floor_ratio:.3}"));
    put("bit_identical", identical.to_string());
    put("seek_ms_median", format!("{seek_median:.2}"));
    put("seek_ms_max", format!("{seek_max:.2}"));
    put("load_numbers_per_s", format!("{load_rate:.4e}"));
    put("peak_rss_mb", format!("{:.1}", peak_rss_mb()));
    // Context for the figures above.
    put("frames", n.to_string());
    put(
        "beams_per_frame",
        session.sensors[0].beam_count().to_string(),
    );
    put("grid_cells", spec.cells().to_string());
    put("floor_vector_updates_per_s", format!("{floor_simd:.4e}"));
    put("floor_ratio_vector", format!("{floor_ratio_simd:.3}"));
    put("copies_speedup", format!("{copies_speedup:.3}"));
    put("split_efficiency", format!("{efficiency:.3}"));
    put("speedup_q1", format!("{speedup_q1:.3}"));
    put("speedup_q3", format!("{speedup_q3:.3}"));
    for (k, v) in &speedup_at_count {
        put(&format!("speedup_{k}"), format!("{v:.3}"));
    }
    // Over the one-thread rebuild (which prepares each frame's beams while they are in cache,
    // and so runs faster than the schedule's tasks on one worker, also given).
    for (k, (_, makespan)) in bound_counts.iter().zip(&schedule) {
        put(
            &format!("bound_speedup_{k}"),
            format!("{:.2}", seq_s / makespan),
        );
    }
    for (k, (total, _)) in bound_counts.iter().zip(&schedule) {
        put(&format!("schedule_one_worker_s_{k}"), format!("{total:.3}"));
    }
    put("seq_rebuild_s", format!("{seq_s:.3}"));
    put("par_rebuild_s", format!("{par_s:.3}"));
    put("snapshot_interval", replay.interval().to_string());
    put("snapshots", replay.snapshot_count().to_string());
    put(
        "snapshot_mb",
        format!("{:.1}", replay.snapshot_bytes() as f64 / (1 << 20) as f64),
    );
    put("replay_first_pass_s", format!("{first_pass_s:.2}"));
    put("seek_ms_first", format!("{seek_first:.2}"));
    put("ron_numbers_per_s", format!("{ron_rate:.4e}"));
    put(
        "load_speedup_vs_ron",
        format!("{:.0}", load_rate / ron_rate),
    );
    put("simulate_s", format!("{sim_s:.2}"));
    put("agreement_s", format!("{agreement_s:.2}"));
    put(
        "run_agreement",
        run.overall().map_or("nan".into(), |a| format!("{a:.3}")),
    );
    put("fit_s", format!("{fit_s:.2}"));
    put("fit_evaluations", fit.evaluations.to_string());
    put("fit_frames_used", fit.frames_used.to_string());
    put("realign_s", format!("{realign_s:.2}"));
    put("realign_frames", stretch.len().to_string());
    Ok(out)
}

/// The memory floor as the fusion loop meets it: one cell at a time, a scalar read, add,
/// clamp and write per cell, in storage order. The volatile accesses keep the compiler from
/// merging cells into vector instructions, which a cell update along a beam cannot use.
fn floor_pass_per_cell(values: &mut [f32], bounds: CellBounds) {
    let p = values.as_mut_ptr();
    for i in 0..values.len() {
        // SAFETY: `i` is inside `values`, which this function borrows mutably.
        unsafe {
            let v = std::ptr::read_volatile(p.add(i));
            std::ptr::write_volatile(p.add(i), bounds.update(v, 0.1));
        }
    }
}

/// The same pass written plainly, which the compiler turns into vector instructions (several
/// cells per instruction): the streaming bandwidth of this machine, for context.
fn floor_pass_vector(values: &mut [f32], bounds: CellBounds) {
    for v in values.iter_mut() {
        *v = bounds.update(*v, 0.1);
    }
}

/// Seconds per pass of `pass` over `values`: one pass to settle the pages and caches, then the
/// median of five.
fn time_floor(values: &mut [f32], bounds: CellBounds, pass: fn(&mut [f32], CellBounds)) -> f64 {
    pass(values, bounds);
    time(5, || {
        pass(values, bounds);
        black_box(&*values);
    })
}

/// Numbers per second: reading every range of the session from the packed layout (open,
/// validate, touch each number), and parsing a slice of the session from inline RON.
fn load_rates(session: &Session, reps: usize) -> Result<(f64, f64), Error> {
    let dir = std::env::temp_dir().join(format!("gridscope-bench-{}", std::process::id()));
    std::fs::create_dir_all(&dir).map_err(|source| Error::Write {
        file: dir.clone(),
        source,
    })?;
    let header = dir.join("bench.session.ron");
    crate::session::write_packed(session, &header)?;
    let total: usize = session.stats().beams as usize;
    let load_s = time(reps, || {
        let s = Session::load(&header).expect("the packed session just written loads");
        let mut sum = 0.0f64;
        for f in &s.frames {
            for sc in &f.scans {
                sum += s.ranges(*sc).iter().map(|&r| r as f64).sum::<f64>();
            }
        }
        black_box(sum);
    });
    // RON: parse the first frames of the same session (enough for a stable rate).
    let mut slice =
        Session::with_sensors(session.name.clone(), String::new(), session.sensors.clone())
            .expect("sensors were valid");
    let mut numbers = 0usize;
    for f in session.frames.iter().take(200) {
        let owned: Vec<(String, Vec<f32>)> = f
            .scans
            .iter()
            .map(|sc| {
                (
                    session.sensors[sc.sensor].id.clone(),
                    session.ranges(*sc).to_vec(),
                )
            })
            .collect();
        numbers += owned.iter().map(|(_, v)| v.len()).sum::<usize>();
        let scans: Vec<(&str, &[f32])> = owned
            .iter()
            .map(|(id, v)| (id.as_str(), v.as_slice()))
            .collect();
        slice
            .push_frame(f.t, f.pose, &scans)
            .expect("frames were valid");
    }
    let text = slice.to_ron_string();
    let ron_s = time(reps.min(3), || {
        black_box(Session::from_ron_str(&text, "bench").expect("valid"));
    });
    let _ = std::fs::remove_dir_all(&dir);
    Ok((total as f64 / load_s, numbers as f64 / ron_s))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn quantiles_interpolate_between_order_statistics() {
        // Checked against Python's statistics.quantiles(data, n=4, method="inclusive"), which
        // implements the same definition (Hyndman & Fan 1996, definition 7): [1, 2, 3, 4]
        // gives 1.75, 2.5, 3.25; [3, 1, 4, 1, 5, 9, 2, 6] gives 1.75, 3.5, 5.25.
        let a = [1.0, 2.0, 3.0, 4.0];
        assert_eq!(quantile(&a, 0.25), 1.75);
        assert_eq!(quantile(&a, 0.5), 2.5);
        assert_eq!(quantile(&a, 0.75), 3.25);
        let b = [3.0, 1.0, 4.0, 1.0, 5.0, 9.0, 2.0, 6.0];
        assert_eq!(quantile(&b, 0.25), 1.75);
        assert_eq!(quantile(&b, 0.5), 3.5);
        assert_eq!(quantile(&b, 0.75), 5.25);
        // The ends are the extremes; an odd count's median is its middle value.
        assert_eq!(quantile(&b, 0.0), 1.0);
        assert_eq!(quantile(&b, 1.0), 9.0);
        assert_eq!(median(vec![5.0, 1.0, 3.0]), 3.0);
        assert_eq!(quantile(&[7.0], 0.25), 7.0);
        assert!(quantile(&[], 0.5).is_nan());
    }
}
