//! Integration test modules; shared helpers live here.

mod cli;
mod desktop;
mod diagnosis;
mod hostile;
mod independent;
mod mutation;
mod parallel;
mod poses_window;
mod samples;
mod window;

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

/// Runs the `gridscope` binary with `args`.
pub fn gridscope(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_gridscope"))
        .args(args)
        .output()
        .expect("the binary runs")
}

/// What a run printed on stderr.
pub fn stderr(o: &Output) -> String {
    String::from_utf8_lossy(&o.stderr).into_owned()
}

/// The names in a directory, sorted.
pub fn files_in(dir: &Path) -> Vec<String> {
    let mut v: Vec<String> = std::fs::read_dir(dir)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    v.sort();
    v
}

/// A fresh, empty scratch directory for one test.
pub fn scratch(name: &str) -> PathBuf {
    let dir = std::env::temp_dir().join(format!("gridscope-it-{}-{name}", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).unwrap();
    dir
}

/// The repository's sample-sessions directory.
pub fn samples_dir() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("sample-sessions")
}

/// Seeded xorshift generator for test data.
pub struct TestRng(pub u64);

impl TestRng {
    pub fn next_u64(&mut self) -> u64 {
        let mut x = self.0;
        x ^= x << 13;
        x ^= x >> 7;
        x ^= x << 17;
        self.0 = x;
        x
    }
    /// Uniform in [0, 1).
    pub fn unit(&mut self) -> f64 {
        (self.next_u64() >> 11) as f64 / (1u64 << 53) as f64
    }
    /// Uniform in [a, b).
    pub fn range(&mut self, a: f64, b: f64) -> f64 {
        a + (b - a) * self.unit()
    }
}

/// Whether the segment a->b passes through the open interior of the axis-aligned box
/// [lo, hi], and the parameter (0..1) at which it enters. Liang-Barsky clipping, written
/// independently of gridscope's traversal.
pub fn enters_box(
    a: gridscope::Point2,
    b: gridscope::Point2,
    lo: gridscope::Point2,
    hi: gridscope::Point2,
) -> Option<f64> {
    let (mut t0, mut t1) = (0.0f64, 1.0f64);
    for (p, d, l, h) in [(a.x, b.x - a.x, lo.x, hi.x), (a.y, b.y - a.y, lo.y, hi.y)] {
        if d == 0.0 {
            if p <= l || p >= h {
                return None;
            }
        } else {
            let (ta, tb) = ((l - p) / d, (h - p) / d);
            t0 = t0.max(ta.min(tb));
            t1 = t1.min(ta.max(tb));
        }
    }
    (t0 < t1).then_some(t0)
}

/// The window's state in an egui_kittest harness (no display or GPU), at the size the window
/// tests assume, once what `app` started has delivered.
pub fn window_harness(
    app: gridscope::app::GridscopeApp,
) -> egui_kittest::Harness<'static, gridscope::app::GridscopeApp> {
    let mut h = egui_kittest::Harness::builder()
        .with_size(egui::vec2(1480.0, 920.0))
        .build_ui_state(
            |ui, app: &mut gridscope::app::GridscopeApp| app.ui_root(ui),
            app,
        );
    settle(&mut h);
    h
}

/// Runs frames until the file tasks, the worker and every panel's jobs have delivered.
pub fn settle(h: &mut egui_kittest::Harness<'static, gridscope::app::GridscopeApp>) {
    h.run_steps(2);
    h.state_mut().wait_for_everything();
    h.run_steps(2);
}
