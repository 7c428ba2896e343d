//! `gridscope bench --window`: the window's application state run without a display on a large
//! generated run, to measure what a user would feel: the longest UI frame while the run opens,
//! rebuilds and is re-tuned, and the window's peak memory against `gridscope build`'s.
//!
//! Design decision: the build is measured in a child process (its peak resident memory from the
//! system's accounting of children), the window in this process, so neither figure includes the
//! other's. Frames are driven at about 60 per second, as a window repaints while work runs.

use super::{Action, GridscopeApp, SNAPSHOT_BUDGET, Settings};
use crate::error::Error;
use std::path::Path;
use std::time::{Duration, Instant};

/// Peak resident memory of the children waited for, MB (Linux; `NaN` elsewhere).
fn children_peak_mb() -> f64 {
    #[cfg(unix)]
    {
        // SAFETY: getrusage fills the zeroed struct it is given; nothing else is touched.
        let usage = unsafe {
            let mut u: libc::rusage = std::mem::zeroed();
            libc::getrusage(libc::RUSAGE_CHILDREN, &mut u);
            u
        };
        usage.ru_maxrss as f64 / 1024.0
    }
    #[cfg(not(unix))]
    {
        f64::NAN
    }
}

/// Frame timings of one phase.
#[derive(Default)]
struct Frames {
    longest: Duration,
    all: Vec<Duration>,
}

impl Frames {
    fn note(&mut self, d: Duration) {
        self.longest = self.longest.max(d);
        self.all.push(d);
    }
}

/// Drives frames until `done` holds (or `limit` passes); returns the time it took.
fn drive(
    ctx: &egui::Context,
    app: &mut GridscopeApp,
    frames: &mut Frames,
    limit: Duration,
    done: impl Fn(&GridscopeApp) -> bool,
) -> Duration {
    let start = Instant::now();
    let input = || egui::RawInput {
        screen_rect: Some(egui::Rect::from_min_size(
            egui::Pos2::ZERO,
            egui::vec2(1600.0, 1000.0),
        )),
        ..Default::default()
    };
    while start.elapsed() < limit {
        let t = Instant::now();
        let _ = ctx.run_ui(input(), |ui| app.ui_root(ui));
        frames.note(t.elapsed());
        if done(app) {
            break;
        }
        std::thread::sleep(Duration::from_millis(16));
    }
    start.elapsed()
}

/// Runs the window benchmark on the packed session at `session` (written by the caller) and
/// returns `key=value` pairs. `exe` is the `gridscope` binary, run as a child for the build.
pub fn run(
    session: &Path,
    exe: &Path,
    say: &mut dyn FnMut(&str),
) -> Result<Vec<(String, String)>, Error> {
    let mut out: Vec<(String, String)> = Vec::new();
    say("building the run in a child process (for its peak memory)");
    let dir = session.parent().unwrap_or(Path::new("."));
    let t = Instant::now();
    let status = std::process::Command::new(exe)
        .arg("build")
        .arg(session)
        .arg("--out")
        .arg(dir.join("bench-window-map"))
        .stdout(std::process::Stdio::null())
        .status()
        .map_err(|e| Error::Failed(format!("the build could not run: {e}")))?;
    if !status.success() {
        return Err(Error::Failed(format!("the build failed ({status})")));
    }
    let build_s = t.elapsed().as_secs_f64();
    let build_mb = children_peak_mb();

    say("opening the run in the window's state, rebuilding and re-tuning");
    let ctx = egui::Context::default();
    let mut app = GridscopeApp::new(Settings::default());
    let mut frames = Frames::default();
    let limit = Duration::from_secs(600);
    app.apply(Action::OpenSession(session.to_path_buf()));
    let shown = |a: &GridscopeApp| a.shown.is_some() && !a.busy();
    let open = drive(&ctx, &mut app, &mut frames, limit, shown);
    let open_frames = Frames {
        longest: frames.longest,
        all: std::mem::take(&mut frames.all),
    };
    frames.longest = Duration::ZERO;
    let mut retune = Vec::new();
    for (k, edit) in [
        ("clamp.max", 1.45),
        ("default_model.p_free", 0.4),
        ("clamp.min", -1.5),
    ]
    .iter()
    .enumerate()
    {
        let Some(doc) = &app.doc else { break };
        let mut p = doc.params.clone();
        let _ = crate::sweep::set_param(&mut p, edit.0, edit.1);
        app.apply(Action::SetParams(p));
        let generation = app.doc.as_ref().map_or(0, |d| d.generation);
        let d = drive(&ctx, &mut app, &mut frames, limit, |a| {
            shown(a) && a.shown.as_ref().is_some_and(|s| s.generation == generation)
        });
        retune.push(d.as_secs_f64());
        if k == 0 {
            // A few seeks, as a user stepping around would.
            let n = app.doc.as_ref().map_or(0, |d| d.session.frames.len());
            for target in [n / 3, n / 2, n / 5, n - 1] {
                app.apply(Action::Seek(target));
                drive(&ctx, &mut app, &mut frames, limit, |a| {
                    shown(a) && a.shown.as_ref().is_some_and(|s| s.frame == a.frame)
                });
            }
        }
    }
    let window_mb = crate::bench::peak_rss_mb();
    let ms = |d: Duration| format!("{:.1}", d.as_secs_f64() * 1e3);
    let mut all: Vec<Duration> = open_frames.all.iter().chain(&frames.all).copied().collect();
    all.sort();
    let median = all.get(all.len() / 2).copied().unwrap_or_default();
    let cells = app.doc.as_ref().map_or(0, |d| d.builder.spec().cells());
    let snapshot_mb = SNAPSHOT_BUDGET as f64 / (1 << 20) as f64;
    let mut put = |k: &str, v: String| out.push((k.to_string(), v));
    put(
        "window_longest_frame_ms",
        ms(open_frames.longest.max(frames.longest)),
    );
    put("window_peak_rss_mb", format!("{window_mb:.1}"));
    put("build_peak_rss_mb", format!("{build_mb:.1}"));
    put("snapshot_budget_mb", format!("{snapshot_mb:.0}"));
    put(
        "window_memory_ratio",
        format!("{:.2}", (window_mb - snapshot_mb) / build_mb),
    );
    put(
        "window_longest_frame_while_opening_ms",
        ms(open_frames.longest),
    );
    put("window_longest_frame_while_tuning_ms", ms(frames.longest));
    put("window_median_frame_ms", ms(median));
    put("window_frames", all.len().to_string());
    put("window_open_s", format!("{:.2}", open.as_secs_f64()));
    put(
        "window_retune_s",
        retune
            .iter()
            .map(|s| format!("{s:.2}"))
            .collect::<Vec<_>>()
            .join(","),
    );
    put("build_s", format!("{build_s:.2}"));
    put("grid_cells", cells.to_string());
    Ok(out)
}
