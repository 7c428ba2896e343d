//! Map bundles: writing a grid as `.npy` + `.png` (+ `.pgm`) + `.map.ron`, and loading one back.
//!
//! Every raster is stored northern-most row first (image order). Files are first written
//! under temporary names in the destination directory and renamed only when all of them are
//! complete, so a failed export never leaves a half-written file under a final name. Loading
//! reads only the six fields a bundle needs (`format`, `resolution`, `width`, `height`,
//! `origin`, `rows`) and the `.npy`; everything else in the metadata is informative.

use crate::error::{Error, InputError, Problem, read_text};
use crate::geometry::Point2;
use crate::grid::{Grid, GridSpec};
use crate::logodds::probability;
use crate::params::Params;
use crate::session::{check_format, parse_versioned};
use serde::{Deserialize, Serialize};
use std::io::Write;
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
    let mut out = npy_header("<f4", &[s.height as usize, s.width as usize]);
    out.reserve(s.cells() * 4);
    for row in grid.rows_north_first() {
        for v in row {
            out.extend_from_slice(&v.to_le_bytes());
        }
    }
    out
}

/// The header of a NumPy version 1.0 file of C-ordered `descr` elements with `shape`, padded
/// so that the data that follows starts on a 64-byte boundary.
pub fn npy_header(descr: &str, shape: &[usize]) -> Vec<u8> {
    let dims: Vec<String> = shape.iter().map(|d| d.to_string()).collect();
    let shape_text = if shape.len() == 1 {
        format!("({},)", dims[0])
    } else {
        format!("({})", dims.join(", "))
    };
    let dict = format!("{{'descr': '{descr}', 'fortran_order': False, 'shape': {shape_text}, }}");
    // Magic (6) + version (2) + header length (2) + dict + padding + '\n' is a multiple of 64.
    let unpadded = 10 + dict.len() + 1;
    let pad = (64 - unpadded % 64) % 64;
    let header_len = dict.len() + pad + 1;
    let mut out = Vec::with_capacity(10 + header_len);
    out.extend_from_slice(b"\x93NUMPY\x01\x00");
    out.extend_from_slice(&(header_len as u16).to_le_bytes());
    out.extend_from_slice(dict.as_bytes());
    out.extend(std::iter::repeat_n(b' ', pad));
    out.push(b'\n');
    out
}

/// A binary Netpbm graymap (P5) of the grey levels, with the geometry in a comment.
pub fn pgm_bytes(grid: &Grid) -> Vec<u8> {
    let s = grid.spec();
    let mut out = format!(
        "P5\n# gridscope map: resolution {} m, origin ({}, {}) m, north up\n{} {}\n255\n",
        s.resolution, s.origin.x, s.origin.y, s.width, s.height
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

/// Writes several files so that either all appear under their final names or none does.
pub fn write_all_atomically(files: &[(PathBuf, Vec<u8>)]) -> Result<(), Error> {
    let mut temps: Vec<PathBuf> = Vec::new();
    let cleanup = |temps: &[PathBuf]| {
        for t in temps {
            let _ = std::fs::remove_file(t);
        }
    };
    for (path, bytes) in files {
        let mut name = path.file_name().unwrap_or_default().to_os_string();
        name.push(format!(".tmp-{}", std::process::id()));
        let tmp = path.with_file_name(name);
        let result = std::fs::File::create(&tmp).and_then(|mut f| {
            f.write_all(bytes)?;
            f.sync_all()
        });
        temps.push(tmp);
        if let Err(source) = result {
            cleanup(&temps);
            return Err(Error::Write {
                file: path.clone(),
                source,
            });
        }
    }
    for (tmp, (path, _)) in temps.iter().zip(files) {
        if let Err(source) = std::fs::rename(tmp, path) {
            cleanup(&temps);
            return Err(Error::Write {
                file: path.clone(),
                source,
            });
        }
    }
    Ok(())
}

/// Writes `PREFIX.npy`, `PREFIX.png`, `PREFIX.map.ron` (and `PREFIX.pgm` if asked), atomically.
/// Returns the paths written.
pub fn write_bundle(
    prefix: &Path,
    grid: &Grid,
    provenance: Option<&Provenance>,
    options: ExportOptions,
) -> Result<Vec<PathBuf>, Error> {
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
    if options.pgm {
        files.push((with_suffix(prefix, ".pgm"), pgm_bytes(grid)));
    }
    write_all_atomically(&files)?;
    Ok(files.into_iter().map(|(p, _)| p).collect())
}

/// Parses `.map.ron` text into a grid geometry, checking the six required fields.
pub fn parse_meta(text: &str, file: &str) -> Result<GridSpec, InputError> {
    let m: MetaIn = parse_versioned(text, file)?;
    check_format(m.format, file)?;
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

/// A parsed `.npy` header: element type, order and shape.
#[derive(Clone, Debug, PartialEq)]
pub struct NpyHeader {
    /// The `descr` string, e.g. `<f4`.
    pub descr: String,
    /// Whether the data is column-major.
    pub fortran_order: bool,
    /// The array shape.
    pub shape: Vec<usize>,
    /// Byte offset of the data.
    pub data_offset: usize,
}

/// Parses a `.npy` header (format versions 1.0, 2.0 and 3.0).
pub fn parse_npy_header(bytes: &[u8]) -> Result<NpyHeader, String> {
    if bytes.len() < 10 || &bytes[..6] != b"\x93NUMPY" {
        return Err("not a NumPy .npy file (bad magic)".into());
    }
    let (len, start) = match bytes[6] {
        1 => (u16::from_le_bytes([bytes[8], bytes[9]]) as usize, 10),
        2 | 3 => {
            if bytes.len() < 12 {
                return Err("truncated .npy header".into());
            }
            (
                u32::from_le_bytes([bytes[8], bytes[9], bytes[10], bytes[11]]) as usize,
                12,
            )
        }
        v => return Err(format!(".npy format version {v} is not supported")),
    };
    let header = bytes
        .get(start..start + len)
        .ok_or("truncated .npy header")?;
    let header = std::str::from_utf8(header).map_err(|_| ".npy header is not text")?;
    let value_after = |key: &str| -> Result<&str, String> {
        let k = header
            .find(&format!("'{key}'"))
            .ok_or(format!(".npy header has no '{key}'"))?;
        let rest = &header[k + key.len() + 2..];
        let colon = rest
            .find(':')
            .ok_or(format!(".npy header: no value for '{key}'"))?;
        Ok(rest[colon + 1..].trim_start())
    };
    let descr_v = value_after("descr")?;
    let q = descr_v.chars().next().ok_or(".npy header: empty descr")?;
    let descr_end = descr_v[1..]
        .find(q)
        .ok_or(".npy header: unterminated descr")?;
    let descr = descr_v[1..1 + descr_end].to_string();
    let fortran_order = value_after("fortran_order")?.starts_with("True");
    let shape_v = value_after("shape")?;
    let close = shape_v.find(')').ok_or(".npy header: unterminated shape")?;
    let shape = shape_v
        .get(1..close)
        .ok_or(".npy header: bad shape")?
        .split(',')
        .map(str::trim)
        .filter(|s| !s.is_empty())
        .map(|s| {
            s.parse::<usize>()
                .map_err(|_| format!(".npy header: bad dimension {s:?}"))
        })
        .collect::<Result<Vec<_>, _>>()?;
    Ok(NpyHeader {
        descr,
        fortran_order,
        shape,
        data_offset: start + len,
    })
}

/// Reads a 2-D `.npy` of float32 or float64 (little-endian, either order) into row-major f32,
/// returning (rows, cols, values).
pub fn read_npy_2d(bytes: &[u8]) -> Result<(usize, usize, Vec<f32>), String> {
    let h = parse_npy_header(bytes)?;
    let [rows, cols] = h.shape[..] else {
        return Err(format!("expected a 2-D array, found shape {:?}", h.shape));
    };
    let size = match h.descr.as_str() {
        "<f4" => 4,
        "<f8" => 8,
        d => {
            return Err(format!(
                "element type {d:?} is not supported (use '<f4' or '<f8')"
            ));
        }
    };
    let n = rows.checked_mul(cols).ok_or("array shape overflows")?;
    let data = &bytes[h.data_offset..];
    if n.checked_mul(size).is_none_or(|b| data.len() != b) {
        return Err(format!(
            "array data is {} bytes, but shape ({rows}, {cols}) of {} needs {}",
            data.len(),
            h.descr,
            n.saturating_mul(size)
        ));
    }
    let flat: Vec<f32> = if size == 4 {
        data.chunks_exact(4)
            .map(|c| f32::from_le_bytes([c[0], c[1], c[2], c[3]]))
            .collect()
    } else {
        data.chunks_exact(8)
            .map(|c| f64::from_le_bytes(c.try_into().expect("8 bytes")) as f32)
            .collect()
    };
    if !h.fortran_order {
        return Ok((rows, cols, flat));
    }
    let mut out = vec![0.0; n];
    for r in 0..rows {
        for c in 0..cols {
            out[r * cols + c] = flat[c * rows + r];
        }
    }
    Ok((rows, cols, out))
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
    let bytes =
        std::fs::read(&npy_path).map_err(|e| InputError::at(&npy_path, Problem::Read(e)))?;
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
    let (rows, cols, values) = read_npy_2d(npy).map_err(malformed)?;
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
    fn npy_header_follows_the_numpy_format_specification() {
        // NumPy "A Simple File Format for NumPy Arrays" (NEP 1 / numpy.lib.format docs):
        // magic "\x93NUMPY", major 1, minor 0, little-endian u16 header length, an ASCII dict
        // literal padded with spaces and ended by '\n' so the data starts 64-byte aligned.
        let b = npy_bytes(&small_grid());
        assert_eq!(&b[..6], b"\x93NUMPY");
        assert_eq!((b[6], b[7]), (1, 0));
        let hl = u16::from_le_bytes([b[8], b[9]]) as usize;
        assert_eq!((10 + hl) % 64, 0);
        let header = std::str::from_utf8(&b[10..10 + hl]).unwrap();
        assert!(header.starts_with("{'descr': '<f4', 'fortran_order': False, 'shape': (2, 3), }"));
        assert!(header.ends_with('\n'));
        assert_eq!(b.len(), 10 + hl + 6 * 4);
        // First stored value is the north-west cell.
        assert_eq!(
            f32::from_le_bytes(b[10 + hl..14 + hl].try_into().unwrap()),
            -3.0
        );
        let (r, c, v) = read_npy_2d(&b).unwrap();
        assert_eq!((r, c), (2, 3));
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

    #[test]
    fn an_exported_png_reads_back_as_a_reference() {
        let dir = std::env::temp_dir().join(format!("gridscope-imgref-{}", std::process::id()));
        std::fs::create_dir_all(&dir).unwrap();
        let path = dir.join("plan.png");
        std::fs::write(&path, png_bytes(&small_grid()).unwrap()).unwrap();
        let r = ImageReference {
            path: path.clone(),
            resolution: 0.1,
            origin: Point2::new(-0.5, 1.0),
            occupied_at_most: 100,
            free_at_least: 155,
        };
        let g = load_image_reference(&r, 1000).unwrap();
        assert_eq!(g.spec(), small_grid().spec());
        // South row p = 0.2 (grey 204: free), 0.5 (128: undecided), 0.75 (64: occupied).
        assert_eq!(&g.values()[..3], &[-IMAGE_DECIDED, 0.0, IMAGE_DECIDED]);
        let mut wrong = r.clone();
        wrong.occupied_at_most = 200;
        assert!(
            load_image_reference(&wrong, 1000)
                .unwrap_err()
                .to_string()
                .contains("thresholds")
        );
        std::fs::remove_dir_all(&dir).unwrap();
    }
}

/// How a greyscale image becomes a reference map: its geometry and the grey levels that mean
/// occupied and free (everything between is undecided).
#[derive(Clone, Debug, PartialEq)]
pub struct ImageReference {
    /// The image file (PNG or Netpbm), north up.
    pub path: PathBuf,
    /// Cell side, metres (one pixel per cell).
    pub resolution: f64,
    /// World position of the image's south-west corner, metres.
    pub origin: Point2,
    /// Grey levels at or below this are occupied (dark).
    pub occupied_at_most: u8,
    /// Grey levels at or above this are free (light).
    pub free_at_least: u8,
}

/// Log-odds given to decided cells of an image reference (p = 0.98 and 0.02).
const IMAGE_DECIDED: f32 = 3.89;

/// Loads a greyscale image as a reference map: dark pixels occupied, light pixels free, the
/// rest undecided (log-odds 0). The first image row is the northern-most.
pub fn load_image_reference(r: &ImageReference, budget: u64) -> Result<Grid, Error> {
    let bad = |field: &str, reason: &str| -> Error {
        InputError::at(
            &r.path,
            Problem::BadField {
                field: field.into(),
                reason: reason.into(),
            },
        )
        .into()
    };
    if !(r.resolution.is_finite() && r.resolution > 0.0) {
        return Err(bad("resolution", "must be > 0 metres"));
    }
    if !r.origin.is_finite() {
        return Err(bad("origin", "must be finite"));
    }
    if r.occupied_at_most >= r.free_at_least {
        return Err(bad(
            "thresholds",
            "the occupied grey level must be darker than the free one",
        ));
    }
    let bytes = std::fs::read(&r.path).map_err(|e| InputError::at(&r.path, Problem::Read(e)))?;
    let img = image::load_from_memory(&bytes)
        .map_err(|e| {
            InputError::at(
                &r.path,
                Problem::Malformed(format!("not a readable image: {e}")),
            )
        })?
        .to_luma8();
    let (w, h) = img.dimensions();
    GridSpec::check_budget(w as f64, h as f64, budget)
        .map_err(|e| e.for_input(&r.path.display().to_string()))?;
    let spec = GridSpec {
        resolution: r.resolution,
        origin: r.origin,
        width: w,
        height: h,
    };
    let mut values = Vec::with_capacity(spec.cells());
    for row in (0..h).rev() {
        for col in 0..w {
            let g = img.get_pixel(col, row).0[0];
            values.push(if g <= r.occupied_at_most {
                IMAGE_DECIDED
            } else if g >= r.free_at_least {
                -IMAGE_DECIDED
            } else {
                0.0
            });
        }
    }
    Ok(Grid::from_values(spec, values).expect("sized from the image"))
}
