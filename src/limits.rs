//! Sizes gridscope refuses to go beyond, checked before anything is allocated.
//!
//! A file, a plan or an option that asks for more is refused with a message naming the limit.
//! The grid's own limit is the cell budget ([`crate::grid::DEFAULT_CELL_BUDGET`], raised on the
//! command line with `--cell-budget`).

/// Frames in one session (an hour at 40 Hz is 144,000).
pub const MAX_FRAMES: usize = 50_000_000;

/// Beams in one scan of one sensor.
pub const MAX_BEAMS_PER_SCAN: usize = 1 << 20;

/// Sensors on one robot.
pub const MAX_SENSORS: usize = 4096;

/// Readings in one simulated run (frames times beams over all sensors).
pub const MAX_SIMULATED_READINGS: u64 = 2_000_000_000;

/// Settings one sweep may build.
pub const MAX_SWEEP_SETTINGS: usize = 10_000;
