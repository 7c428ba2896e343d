//! Map bundles: writing a grid as `.npy` + `.png` (+ `.pgm`) + `.map.ron`, and loading one back.
//!
//! Every raster is stored northern-most row first (image order). Files are first written
//! under temporary names in the destination directory and renamed only when all of them are
//! complete, so a failed export never leaves a half-written file under a final name. Loading
//! reads only the six fields a bundle needs (`format`, `resolution`, `width`, `height`,
//! `origin`, `rows`) and the `.npy`; everything else in the metadata is informative.

mod image_ref;
mod load;

pub use image_ref::{
    DEFAULT_MARGIN, ImageClasses, ImageReference, classify_image, load_image_reference, otsu_cut,
};
pub use load::{LoadedBundle, bundle_from_parts, bundle_prefix, load_bundle, parse_meta};

use crate::error::Error;
use crate::geometry::Point2;
use crate::grid::{Grid, GridSpec};
use crate::io::atomic::write_group;
use crate::io::npy;
use crate::logodds::probability;
use crate::params::Params;
use serde::{Deserialize, Serialize};
use std::path::{Path, PathBuf};

/// The caution every exported bundle and the README carry.
pub const SAFETY_NOTICE: &str = "Maps made with gridscope are for development and inspection. \
A map that a robot will navigate by must be validated under the local safety standards and the \
procedures of the site where it will be used.";

/// Row order of exported rasters; the contract knows one.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub enum RowOrder {
    /// Northern-most row first (image order).
    NorthFirst,
}

/// What an export records besides the grid: where it came from.
#[derive(Clone, Debug, PartialEq)]
pub struct Provenance {
    /// The full parameter profile used.
    pub params: Params,
    /// The session's name.
    pub session: String,
    /// Frames integrated.
    pub frames: usize,
}

/// The metadata file as gridscope writes it.
#[derive(Serialize)]
struct MetaOut {
    format: i64,
    resolution: f64,
    width: u32,
    height: u32,
    origin: Point2,
    rows: RowOrder,
    values: &'static str,
    notice: &'static str,
    tool_version: &'static str,
}

/// The metadata file of a map built from a session: the same fields plus where it came from.
#[derive(Serialize)]
struct MetaOutBuilt<'a> {
    format: i64,
    resolution: f64,
    width: u32,
    height: u32,
    origin: Point2,
    rows: RowOrder,
    values: &'static str,
    notice: &'static str,
    tool_version: &'static str,
    session: &'a str,
    frames: usize,
    params: &'a Params,
}

/// Which files an export writes besides `.npy`, `.png` and `.map.ron`.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct ExportOptions {
    /// Also write a Netpbm `.pgm` with the same grey levels as the PNG.
    pub pgm: bool,
}

/// `PREFIX` + `suffix` (suffix like `.npy`), keeping any dots already in the prefix.
pub fn with_suffix(prefix: &Path, suffix: &str) -> PathBuf {
    let mut s = prefix.as_os_str().to_os_string();
    s.push(suffix);
    PathBuf::from(s)
}

/// Grey level of a log-odds value: round(255 * (1 - p)), so occupied is dark.
pub fn grey_level(l: f32) -> u8 {
    let p = probability(l as f64);
    (255.0 * (1.0 - p)).round().clamp(0.0, 255.0) as u8
}

/// Grey levels of a grid, northern-most row first.
pub fn grey_image(grid: &Grid) -> Vec<u8> {
    grid.rows_north_first()
        .flat_map(|row| row.iter().map(|&l| grey_level(l)))
        .collect()
}

/// A NumPy version 1.0 array file of little-endian float32, shape (height, width), C order,
/// northern-most row first.
pub fn npy_bytes(grid: &Grid) -> Vec<u8> {
    let s = grid.spec();
    let mut out = npy::header("<f4", &[s.height as usize, s.width as usize]);
    out.reserve(s.cells() * 4);
    for row in grid.rows_north_first() {
        for v in row {
            out.extend_from_slice(&v.to_le_bytes());
        }
    }
    out
}

/// A binary Netpbm graymap (P5) of the grey levels, with the geometry in a comment.
pub fn pgm_bytes(grid: &Grid) -> Vec<u8> {
    let s = grid.spec();
    let mut out = format!(
        "P5\n# gridscope map bundle: geometry and provenance in the .map.ron beside it\n{} {}\n255\n",
        s.width, s.height
    )
    .into_bytes();
    out.extend(grey_image(grid));
    out
}

/// An 8-bit greyscale PNG of the grey levels.
pub fn png_bytes(grid: &Grid) -> Result<Vec<u8>, String> {
    let s = grid.spec();
    let img = image::GrayImage::from_raw(s.width, s.height, grey_image(grid))
        .ok_or("image size does not match the grid")?;
    let mut out = std::io::Cursor::new(Vec::new());
    img.write_to(&mut out, image::ImageFormat::Png)
        .map_err(|e| e.to_string())?;
    Ok(out.into_inner())
}

/// The `.map.ron` text for a grid.
pub fn meta_text(spec: &GridSpec, provenance: Option<&Provenance>) -> String {
    const VALUES: &str = "log-odds of occupancy, float32, in PREFIX.npy";
    const VERSION: &str = concat!("gridscope ", env!("CARGO_PKG_VERSION"));
    let cfg = ron::ser::PrettyConfig::new()
        .struct_names(false)
        .new_line("\n".to_string())
        .indentor("    ".to_string());
    let text = match provenance {
        None => ron::ser::to_string_pretty(
            &MetaOut {
                format: 1,
                resolution: spec.resolution,
                width: spec.width,
                height: spec.height,
                origin: spec.origin,
                rows: RowOrder::NorthFirst,
                values: VALUES,
                notice: SAFETY_NOTICE,
                tool_version: VERSION,
            },
            cfg,
        ),
        Some(p) => ron::ser::to_string_pretty(
            &MetaOutBuilt {
                format: 1,
                resolution: spec.resolution,
                width: spec.width,
                height: spec.height,
                origin: spec.origin,
                rows: RowOrder::NorthFirst,
                values: VALUES,
                notice: SAFETY_NOTICE,
                tool_version: VERSION,
                session: &p.session,
                frames: p.frames,
                params: &p.params,
            },
            cfg,
        ),
    };
    text.expect("metadata always serialises")
}

/// The files of a bundle: `PREFIX.npy`, `PREFIX.png`, `PREFIX.map.ron` (and `PREFIX.pgm` if
/// asked) with their bytes, and the parts of an earlier bundle under this prefix that this one
/// does not have (to be removed with the write, so the bundle stays one whole).
#[allow(clippy::type_complexity)]
pub fn bundle_files(
    prefix: &Path,
    grid: &Grid,
    provenance: Option<&Provenance>,
    options: ExportOptions,
) -> Result<(Vec<(PathBuf, Vec<u8>)>, Vec<PathBuf>), Error> {
    let png = png_bytes(grid).map_err(|e| Error::Write {
        file: with_suffix(prefix, ".png"),
        source: std::io::Error::other(e),
    })?;
    let mut files = vec![
        (with_suffix(prefix, ".npy"), npy_bytes(grid)),
        (with_suffix(prefix, ".png"), png),
        (
            with_suffix(prefix, ".map.ron"),
            meta_text(grid.spec(), provenance).into_bytes(),
        ),
    ];
    let mut stale = Vec::new();
    if options.pgm {
        files.push((with_suffix(prefix, ".pgm"), pgm_bytes(grid)));
    } else {
        stale.push(with_suffix(prefix, ".pgm"));
    }
    Ok((files, stale))
}

/// Writes the bundle of [`bundle_files`] atomically, as one whole: either every new file is
/// there afterwards or the previous bundle is, untouched. Returns the paths written.
pub fn write_bundle(
    prefix: &Path,
    grid: &Grid,
    provenance: Option<&Provenance>,
    options: ExportOptions,
) -> Result<Vec<PathBuf>, Error> {
    let (files, stale) = bundle_files(prefix, grid, provenance, options)?;
    let parts: Vec<(PathBuf, &[u8])> = files.iter().map(|(p, b)| (p.clone(), &b[..])).collect();
    write_group(&parts, &stale)?;
    Ok(files.into_iter().map(|(p, _)| p).collect())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::logodds::logit;

    fn small_grid() -> Grid {
        let spec = GridSpec {
            resolution: 0.1,
            origin: Point2::new(-0.5, 1.0),
            width: 3,
            height: 2,
        };
        // South row: free, unknown, occupied; north row: three levels.
        let values = vec![logit(0.2) as f32, 0.0, logit(0.75) as f32, -3.0, 1.0, 3.5];
        Grid::from_values(spec, values).unwrap()
    }

    #[test]
    fn npy_bytes_are_north_row_first() {
        let b = npy_bytes(&small_grid());
        let (r, c, v) = npy::read_2d_f32(&b).unwrap();
        assert_eq!((r, c), (2, 3));
        // The first stored value is the north-west cell; the south row comes last.
        assert_eq!(v[0], -3.0);
        assert_eq!(v[3], logit(0.2) as f32);
    }

    #[test]
    fn png_decodes_to_the_contract_grey_levels() {
        let png = png_bytes(&small_grid()).unwrap();
        let img = image::load_from_memory(&png).unwrap().to_luma8();
        assert_eq!(img.dimensions(), (3, 2));
        // Bottom row of the image is the south row: p = 0.2, 0.5, 0.75.
        assert_eq!(img.get_pixel(0, 1).0[0], 204); // round(255 * 0.8) = 204
        assert_eq!(img.get_pixel(1, 1).0[0], 128); // round(127.5) = 128
        assert_eq!(img.get_pixel(2, 1).0[0], 64); // round(63.75) = 64
        assert_eq!(img.get_pixel(0, 0).0[0], grey_level(-3.0));
        let pgm = pgm_bytes(&small_grid());
        assert!(pgm.starts_with(b"P5\n"));
        assert_eq!(&pgm[pgm.len() - 3..], &[204u8, 128, 64][..]);
    }

    #[test]
    fn bundle_round_trips_and_ignores_informative_fields() {
        let dir = std::env::temp_dir().join(format!("gridscope-export-{}", std::process::id()));
        std::fs::create_dir_all(&dir).unwrap();
        let prefix = dir.join("map.v1");
        let g = small_grid();
        let prov = Provenance {
            params: Params::default(),
            session: "unit".into(),
            frames: 7,
        };
        let written = write_bundle(&prefix, &g, Some(&prov), ExportOptions { pgm: true }).unwrap();
        assert_eq!(written.len(), 4);
        let back = load_bundle(&prefix, 1000).unwrap();
        assert_eq!(back.grid, g);
        let text = std::fs::read_to_string(with_suffix(&prefix, ".map.ron")).unwrap();
        assert!(text.contains("rows: NorthFirst") && text.contains("validated"));
        // A reference from another tool: only the six fields plus something unknown.
        std::fs::write(
            with_suffix(&prefix, ".map.ron"),
            "(format: 1, resolution: 0.1, width: 3, height: 2, origin: (x: -0.5, y: 1.0), rows: NorthFirst, made_by: \"plan tracer\", params: 12)",
        )
        .unwrap();
        assert_eq!(
            load_bundle(&with_suffix(&prefix, ".npy"), 1000)
                .unwrap()
                .grid,
            g
        );
        // A shape mismatch is refused with the file named.
        std::fs::write(
            with_suffix(&prefix, ".map.ron"),
            "(format: 1, resolution: 0.1, width: 4, height: 2, origin: (x: -0.5, y: 1.0), rows: NorthFirst)",
        )
        .unwrap();
        let e = load_bundle(&prefix, 1000).unwrap_err();
        assert!(
            e.is_refusal() && e.to_string().contains("map.v1.npy"),
            "{e}"
        );
        std::fs::remove_dir_all(&dir).unwrap();
    }
}
