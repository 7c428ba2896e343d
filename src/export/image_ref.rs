//! Greyscale images (PNG or Netpbm) as reference maps.

use crate::error::{Error, InputError, Problem};
use crate::geometry::Point2;
use crate::grid::{Grid, GridSpec};
use crate::io::read::read_limited;
use std::path::PathBuf;

/// Largest image file read, bytes.
const MAX_IMAGE_BYTES: u64 = 1 << 30;

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
    let bytes = read_limited(&r.path, MAX_IMAGE_BYTES)?;
    let unreadable = |e: image::ImageError| {
        InputError::at(
            &r.path,
            Problem::Malformed(format!("not a readable image: {e}")),
        )
    };
    // The size comes from the image's header and is checked before anything is decoded.
    let (w, h) = image::ImageReader::new(std::io::Cursor::new(&bytes))
        .with_guessed_format()
        .map_err(|e| InputError::at(&r.path, Problem::Read(e)))?
        .into_dimensions()
        .map_err(unreadable)?;
    GridSpec::check_budget(w as f64, h as f64, budget)
        .map_err(|e| e.for_input(&r.path.display().to_string()))?;
    let img = image::load_from_memory(&bytes)
        .map_err(unreadable)?
        .to_luma8();
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
