//! What the window remembers between runs: recent files and display choices.
//!
//! Only plain data lives here, stored through eframe's persistence under one key; runtime
//! handles (the worker, textures, caches) live in the application state instead.

use super::palette::Palette;
use serde::{Deserialize, Serialize};
use std::path::{Path, PathBuf};

/// Storage key of the settings.
pub const SETTINGS_KEY: &str = "gridscope.settings";

/// How many recent files each list keeps.
const RECENT_LIMIT: usize = 10;

/// The tabs of the inspector panel.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize)]
pub enum InspectorTab {
    /// The selected beam.
    #[default]
    Beam,
    /// The selected cell's history.
    Cell,
    /// A/B comparison.
    Compare,
    /// Scores against a reference.
    Score,
    /// Parameter sweeps.
    Sweep,
    /// Cells that changed class.
    Changes,
    /// Agreement per frame, mount and clock, re-alignment.
    Poses,
}

impl InspectorTab {
    /// All tabs, in display order.
    pub const ALL: [InspectorTab; 7] = [
        InspectorTab::Beam,
        InspectorTab::Cell,
        InspectorTab::Compare,
        InspectorTab::Score,
        InspectorTab::Sweep,
        InspectorTab::Changes,
        InspectorTab::Poses,
    ];

    /// The tab's title.
    pub fn label(self) -> &'static str {
        match self {
            InspectorTab::Beam => "Beam",
            InspectorTab::Cell => "Cell",
            InspectorTab::Compare => "Compare",
            InspectorTab::Score => "Score",
            InspectorTab::Sweep => "Sweep",
            InspectorTab::Changes => "Changes",
            InspectorTab::Poses => "Poses",
        }
    }
}

/// What was open when the window last closed, to open again at the next start.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct LastSession {
    /// The session's path, or `demo:NAME`.
    pub session: String,
    /// The parameters applied.
    pub params: crate::Params,
    /// The frame shown.
    pub frame: usize,
    /// The view: centre (world metres) and scale (points per metre).
    pub view: Option<(crate::Point2, f32)>,
}

/// User choices kept between runs.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(default)]
pub struct Settings {
    /// Session files opened, newest first.
    pub recent_sessions: Vec<PathBuf>,
    /// Parameter profiles opened or saved, newest first.
    pub recent_params: Vec<PathBuf>,
    /// Cell colouring.
    pub palette: Palette,
    /// Draw the current frame's beams.
    pub show_beams: bool,
    /// Draw the robot's path so far.
    pub show_path: bool,
    /// Playback speed relative to the session's own clock.
    pub play_speed: f32,
    /// Show the tuning panel on the left.
    pub show_tuning: bool,
    /// Show the inspector panel on the right.
    pub show_inspector: bool,
    /// The inspector tab shown.
    pub inspector_tab: InspectorTab,
    /// What was open at the last close (restored unless a file is given at start).
    pub last: Option<LastSession>,
}

impl Default for Settings {
    fn default() -> Self {
        Settings {
            recent_sessions: Vec::new(),
            recent_params: Vec::new(),
            palette: Palette::default(),
            show_beams: true,
            show_path: true,
            play_speed: 1.0,
            show_tuning: true,
            show_inspector: true,
            inspector_tab: InspectorTab::Beam,
            last: None,
        }
    }
}

/// Puts `path` first in `list`, without duplicates, keeping at most the limit.
pub fn remember(list: &mut Vec<PathBuf>, path: &Path) {
    list.retain(|p| p != path);
    list.insert(0, path.to_path_buf());
    list.truncate(RECENT_LIMIT);
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn recent_lists_move_to_front_and_stay_short() {
        let mut v = Vec::new();
        for i in 0..15 {
            remember(&mut v, Path::new(&format!("s{i}.session.ron")));
        }
        remember(&mut v, Path::new("s10.session.ron"));
        assert_eq!(v.len(), RECENT_LIMIT);
        assert_eq!(v[0], PathBuf::from("s10.session.ron"));
        assert_eq!(
            v.iter().filter(|p| p.ends_with("s10.session.ron")).count(),
            1
        );
    }

    #[test]
    fn old_settings_load_with_defaults() {
        let s: Settings = ron::from_str("(play_speed: 2.0)").unwrap();
        assert_eq!(s.play_speed, 2.0);
        assert!(s.show_beams);
    }
}
