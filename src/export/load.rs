//! Loading a map bundle: the six fields a reader needs from `PREFIX.map.ron` and the grid in
//! `PREFIX.npy`; every other field of the metadata is informative and ignored (contract 7).

use super::{RowOrder, with_suffix};
use crate::error::{Error, InputError, Problem};
use crate::geometry::Point2;
use crate::grid::{Grid, GridSpec};
use crate::io::read::{read_limited, read_text};
use crate::io::{doc, npy};
use serde::Deserialize;
use std::path::{Path, PathBuf};

/// The six fields a bundle reader needs; anything else in the file is ignored.
#[derive(Deserialize)]
struct MetaIn {
    format: i64,
    resolution: f64,
    width: u32,
    height: u32,
    origin: Point2,
    rows: RowOrder,
}

/// Parses `.map.ron` text into a grid geometry, checking the six required fields.
pub fn parse_meta(text: &str, file: &str) -> Result<GridSpec, InputError> {
    let m: MetaIn = doc::parse(text, file)?;
    doc::check_format(m.format, file)?;
    let bad = |field: &str, reason: &str| {
        InputError::new(
            file,
            Problem::BadField {
                field: field.into(),
                reason: reason.into(),
            },
        )
    };
    if !(m.resolution.is_finite() && m.resolution > 0.0) {
        return Err(bad("resolution", "must be > 0 metres"));
    }
    if m.width == 0 || m.height == 0 {
        return Err(bad("width", "width and height must be at least 1"));
    }
    if !m.origin.is_finite() {
        return Err(bad("origin", "must be finite"));
    }
    let RowOrder::NorthFirst = m.rows;
    Ok(GridSpec {
        resolution: m.resolution,
        origin: m.origin,
        width: m.width,
        height: m.height,
    })
}

/// A loaded bundle: the grid (log-odds) and the paths it came from.
#[derive(Clone, Debug)]
pub struct LoadedBundle {
    /// The grid, row 0 south as everywhere in gridscope.
    pub grid: Grid,
    /// The prefix the bundle was loaded from.
    pub prefix: PathBuf,
}

/// Loads `PREFIX.map.ron` and `PREFIX.npy` (accepting a path to either file or the prefix).
pub fn load_bundle(path: &Path, budget: u64) -> Result<LoadedBundle, Error> {
    let prefix = bundle_prefix(path);
    let meta_path = with_suffix(&prefix, ".map.ron");
    let text = read_text(&meta_path)?;
    let npy_path = with_suffix(&prefix, ".npy");
    // The grid's size is checked against the budget before its array is read.
    let spec = parse_meta(&text, &meta_path.display().to_string())?;
    GridSpec::check_budget(spec.width as f64, spec.height as f64, budget)
        .map_err(|e| e.for_input(&meta_path.display().to_string()))?;
    let limit = (spec.cells() as u64)
        .saturating_mul(8)
        .saturating_add(1 << 20);
    let bytes = read_limited(&npy_path, limit)?;
    let grid = bundle_from_parts(
        &text,
        &meta_path.display().to_string(),
        &bytes,
        &npy_path.display().to_string(),
        budget,
    )?;
    Ok(LoadedBundle { grid, prefix })
}

/// A grid from a bundle's metadata text and `.npy` bytes; the labels name them in errors.
pub fn bundle_from_parts(
    meta_text: &str,
    meta_label: &str,
    npy: &[u8],
    npy_label: &str,
    budget: u64,
) -> Result<Grid, Error> {
    let spec = parse_meta(meta_text, meta_label)?;
    GridSpec::check_budget(spec.width as f64, spec.height as f64, budget)
        .map_err(|e| e.for_input(meta_label))?;
    let malformed = |m: String| InputError::new(npy_label, Problem::Malformed(m));
    let (rows, cols, values) = npy::read_2d_f32(npy).map_err(malformed)?;
    if rows != spec.height as usize || cols != spec.width as usize {
        return Err(malformed(format!(
            "array shape ({rows}, {cols}) does not match the metadata's height {} and width {}",
            spec.height, spec.width
        ))
        .into());
    }
    if let Some(k) = values.iter().position(|v| v.is_nan()) {
        return Err(malformed(format!("cell {k} (image order) is NaN")).into());
    }
    // Stored north-first; the grid is south-first.
    let south_first: Vec<f32> = values.chunks_exact(cols).rev().flatten().copied().collect();
    Ok(Grid::from_values(spec, south_first).expect("size checked"))
}

/// The bundle prefix for a path naming the prefix, its `.map.ron`, `.npy`, `.png` or `.pgm`.
pub fn bundle_prefix(path: &Path) -> PathBuf {
    let s = path.as_os_str().to_string_lossy();
    for suffix in [".map.ron", ".npy", ".png", ".pgm"] {
        if let Some(stem) = s.strip_suffix(suffix) {
            return PathBuf::from(stem);
        }
    }
    path.to_path_buf()
}
