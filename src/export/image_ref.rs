//! Greyscale images (PNG or Netpbm) as reference maps, by gridscope's own convention: one cut
//! level splits dark (occupied) from light (free), and grey levels within a margin of the cut
//! are left undecided.
//!
//! Design decision: the cut comes from the image itself unless given: the level that best
//! separates its histogram into two classes (Otsu, "A Threshold Selection Method from
//! Gray-Level Histograms", IEEE Transactions on Systems, Man, and Cybernetics 9(1), 1979:
//! the largest between-class variance; where several levels tie, the middle one). What a
//! setting makes of an image is shown ([`classify_image`]) before the image is used.

use crate::error::{Error, InputError, Problem};
use crate::geometry::Point2;
use crate::grid::{Grid, GridSpec};
use crate::io::read::read_limited;
use std::path::PathBuf;

/// Largest image file read, bytes.
const MAX_IMAGE_BYTES: u64 = 1 << 30;

/// Grey levels either side of the cut left undecided, by default.
pub const DEFAULT_MARGIN: u8 = 20;

/// How a greyscale image becomes a reference map: its geometry, the cut level and the margin.
#[derive(Clone, Debug, PartialEq)]
pub struct ImageReference {
    /// The image file (PNG or Netpbm), north up.
    pub path: PathBuf,
    /// Cell side, metres (one pixel per cell).
    pub resolution: f64,
    /// World position of the image's south-west corner, metres.
    pub origin: Point2,
    /// Grey levels at or below the cut are dark (occupied), above it light (free); `None`
    /// picks the cut from the image's histogram.
    pub cut: Option<u8>,
    /// Grey levels within this many of the cut (dark side: `cut - margin < g <= cut`; light
    /// side: `cut < g <= cut + margin`) are undecided.
    pub margin: u8,
}

/// What a setting makes of an image, before it is used.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct ImageClasses {
    /// Pixels across.
    pub width: u32,
    /// Pixels down.
    pub height: u32,
    /// The cut used (given, or picked from the histogram).
    pub cut: u8,
    /// Pixels that become occupied.
    pub occupied: u64,
    /// Pixels that become free.
    pub free: u64,
    /// Pixels left undecided.
    pub undecided: u64,
}

/// Log-odds given to decided cells of an image reference (p = 0.98 and 0.02).
const IMAGE_DECIDED: f32 = 3.89;

/// The cut that best separates a histogram of grey levels into a dark and a light class: the
/// level t (dark class `g <= t`) with the largest between-class variance, the middle one of
/// several equal best; 127 for an image of a single grey.
pub fn otsu_cut(histogram: &[u64; 256]) -> u8 {
    let total: u64 = histogram.iter().sum();
    let sum: f64 = histogram
        .iter()
        .enumerate()
        .map(|(g, &n)| g as f64 * n as f64)
        .sum();
    let (mut w0, mut s0) = (0u64, 0.0f64);
    let mut best = 0.0f64;
    let (mut first, mut last) = (None, None);
    for (t, &n) in histogram.iter().enumerate().take(255) {
        w0 += n;
        s0 += t as f64 * n as f64;
        let w1 = total - w0;
        if w0 == 0 || w1 == 0 {
            continue;
        }
        let (m0, m1) = (s0 / w0 as f64, (sum - s0) / w1 as f64);
        let between = w0 as f64 * w1 as f64 * (m0 - m1) * (m0 - m1);
        let tol = 1e-9 * between.abs().max(1.0);
        if between > best + tol || first.is_none() {
            best = between;
            (first, last) = (Some(t), Some(t));
        } else if (between - best).abs() <= tol {
            last = Some(t);
        }
    }
    match (first, last) {
        (Some(a), Some(b)) => ((a + b) / 2) as u8,
        _ => 127,
    }
}

/// The class of a grey level under a cut and a margin: `Some(true)` occupied, `Some(false)`
/// free, `None` undecided.
fn class_of(g: u8, cut: u8, margin: u8) -> Option<bool> {
    let (g, cut, margin) = (g as i32, cut as i32, margin as i32);
    if g <= cut - margin {
        Some(true)
    } else if g > cut + margin {
        Some(false)
    } else {
        None
    }
}

/// Reads the image of `r`, after checking its geometry and that its size (from the image's
/// header, before decoding) is within `budget` cells.
fn read_image(r: &ImageReference, budget: u64) -> Result<image::GrayImage, Error> {
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
    let bytes = read_limited(&r.path, MAX_IMAGE_BYTES)?;
    let unreadable = |e: image::ImageError| {
        InputError::at(
            &r.path,
            Problem::Malformed(format!("not a readable image: {e}")),
        )
    };
    let (w, h) = image::ImageReader::new(std::io::Cursor::new(&bytes))
        .with_guessed_format()
        .map_err(|e| InputError::at(&r.path, Problem::Read(e)))?
        .into_dimensions()
        .map_err(unreadable)?;
    GridSpec::check_budget(w as f64, h as f64, budget)
        .map_err(|e| e.for_input(&r.path.display().to_string()))?;
    Ok(image::load_from_memory(&bytes)
        .map_err(unreadable)?
        .to_luma8())
}

/// The cut a setting uses on an image: the given one, or [`otsu_cut`] of its histogram.
fn cut_of(r: &ImageReference, img: &image::GrayImage) -> u8 {
    r.cut.unwrap_or_else(|| {
        let mut histogram = [0u64; 256];
        for p in img.pixels() {
            histogram[p.0[0] as usize] += 1;
        }
        otsu_cut(&histogram)
    })
}

/// What `r` makes of its image: the cut and how many pixels fall in each class.
pub fn classify_image(r: &ImageReference, budget: u64) -> Result<ImageClasses, Error> {
    let img = read_image(r, budget)?;
    let cut = cut_of(r, &img);
    let mut c = ImageClasses {
        width: img.width(),
        height: img.height(),
        cut,
        occupied: 0,
        free: 0,
        undecided: 0,
    };
    for p in img.pixels() {
        match class_of(p.0[0], cut, r.margin) {
            Some(true) => c.occupied += 1,
            Some(false) => c.free += 1,
            None => c.undecided += 1,
        }
    }
    Ok(c)
}

/// Loads a greyscale image as a reference map by the convention above: occupied cells at
/// log-odds +3.89, free at -3.89, undecided at 0. The first image row is the northern-most.
pub fn load_image_reference(r: &ImageReference, budget: u64) -> Result<Grid, Error> {
    let img = read_image(r, budget)?;
    let cut = cut_of(r, &img);
    let (w, h) = img.dimensions();
    let spec = GridSpec {
        resolution: r.resolution,
        origin: r.origin,
        width: w,
        height: h,
    };
    let mut values = Vec::with_capacity(spec.cells());
    for row in (0..h).rev() {
        for col in 0..w {
            values.push(
                match class_of(img.get_pixel(col, row).0[0], cut, r.margin) {
                    Some(true) => IMAGE_DECIDED,
                    Some(false) => -IMAGE_DECIDED,
                    None => 0.0,
                },
            );
        }
    }
    Ok(Grid::from_values(spec, values).expect("sized from the image"))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::export::png_bytes;
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
    fn an_exported_png_reads_back_as_a_reference() {
        let dir = std::env::temp_dir().join(format!("gridscope-imgref-{}", std::process::id()));
        std::fs::create_dir_all(&dir).unwrap();
        let path = dir.join("plan.png");
        std::fs::write(&path, png_bytes(&small_grid()).unwrap()).unwrap();
        let r = ImageReference {
            path: path.clone(),
            resolution: 0.1,
            origin: Point2::new(-0.5, 1.0),
            cut: Some(128),
            margin: 20,
        };
        let g = load_image_reference(&r, 1000).unwrap();
        assert_eq!(g.spec(), small_grid().spec());
        // South row p = 0.2 (grey 204: free), 0.5 (128: undecided), 0.75 (64: occupied).
        assert_eq!(&g.values()[..3], &[-IMAGE_DECIDED, 0.0, IMAGE_DECIDED]);
        let c = classify_image(&r, 1000).unwrap();
        assert_eq!((c.width, c.height, c.cut), (3, 2, 128));
        assert_eq!(c.occupied + c.free + c.undecided, 6);
        let mut wrong = r.clone();
        wrong.resolution = 0.0;
        assert!(
            load_image_reference(&wrong, 1000)
                .unwrap_err()
                .to_string()
                .contains("resolution")
        );
        // Over the cell budget: refused from the header, before decoding.
        assert!(load_image_reference(&r, 5).is_err());
        std::fs::remove_dir_all(&dir).unwrap();
    }

    #[test]
    fn otsu_cut_separates_a_worked_histogram() {
        // Worked by hand (Otsu 1979: largest w0 w1 (m0 - m1)^2): levels 30 (6 pixels), 90 (2),
        // 200 (8), 240 (4). Splitting {30, 90} from {200, 240} gives w0 = 8, w1 = 12,
        // m0 = 45, m1 = 213.33, the largest between-class variance of all splits; it holds for
        // every cut from 90 to 199, and the middle of those is 144.
        let mut h = [0u64; 256];
        h[30] = 6;
        h[90] = 2;
        h[200] = 8;
        h[240] = 4;
        assert_eq!(otsu_cut(&h), 144);
        // Two equal classes at 0 and 255: every cut from 0 to 254 ties; the middle is 127.
        let mut h = [0u64; 256];
        h[0] = 10;
        h[255] = 10;
        assert_eq!(otsu_cut(&h), 127);
        // One grey only: no split, 127.
        let mut h = [0u64; 256];
        h[77] = 5;
        assert_eq!(otsu_cut(&h), 127);
        // Class of a grey level: the margin leaves both sides of the cut undecided.
        assert_eq!(class_of(100, 128, 20), Some(true));
        assert_eq!(class_of(110, 128, 20), None);
        assert_eq!(class_of(148, 128, 20), None);
        assert_eq!(class_of(149, 128, 20), Some(false));
        assert_eq!(class_of(128, 128, 0), Some(true));
    }
}
