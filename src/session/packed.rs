//! Packed sessions: the RON header keeps the sensors, and the frames live beside it as NumPy
//! arrays, memory-mapped rather than parsed.
//!
//! ```ron
//! (
//!     format: 1,
//!     name: "corridor run",
//!     sensors: [ ... as in an inline session ... ],
//!     frames_from: (
//!         times: "run.times.npy",                 // float64 (or float32), shape (N,), seconds
//!         poses: "run.poses.npy",                 // float64 (or float32), shape (N, 3): x, y, theta
//!         ranges: { "front": "run.front.npy" },   // float32, shape (N, beams of the sensor)
//!     ),
//! )
//! ```
//!
//! Paths are relative to the header's folder. Every frame holds one scan of every sensor, in
//! the order the sensors are declared; the rules of the contract (time order, finite poses,
//! one row of ranges per frame of the right length) are checked on load and errors name the
//! array file and the frame.

use super::{Frame, RangeSource, RangeTable, ScanRef, Session};
use crate::error::{Error, InputError, Problem};
use crate::geometry::Pose2;
use crate::io::atomic::write_all_atomically;
use crate::io::npy;
use crate::io::read::{open_limited, read_limited};
use crate::limits::MAX_FRAMES;
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::sync::Arc;

/// The `frames_from` field of a packed session header.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct PackedFrames {
    /// Frame times, `.npy` of shape (N,).
    pub times: String,
    /// Robot poses, `.npy` of shape (N, 3).
    pub poses: String,
    /// Per sensor id, ranges `.npy` of shape (N, beams), float32.
    pub ranges: BTreeMap<String, String>,
}

/// Ranges held in a memory-mapped `.npy` file.
#[derive(Debug)]
struct MappedRanges {
    map: memmap2::Mmap,
    offset: usize,
    len: usize,
}

impl RangeSource for MappedRanges {
    fn as_slice(&self) -> &[f32] {
        // SAFETY: `open_ranges` checked, with checked arithmetic on the file's own header, that
        // the map holds exactly offset + len * 4 bytes (a hostile shape cannot make the slice
        // longer than the map), and that the data's address is 4-byte aligned on a
        // little-endian machine; the map lives as long as `self`. As with any memory map, the
        // file must not be truncated while it is open (the system would stop the process).
        unsafe {
            std::slice::from_raw_parts(self.map.as_ptr().add(self.offset) as *const f32, self.len)
        }
    }
}

fn malformed(path: &Path, m: impl Into<String>) -> InputError {
    InputError::at(path, Problem::Malformed(m.into()))
}

/// Reads a small float array (times or poses) as f64, checking its shape; `shape` gives each
/// dimension's required length, `None` for any.
fn read_small(path: &Path, shape: &[Option<usize>]) -> Result<(Vec<usize>, Vec<f64>), InputError> {
    // Times or poses of the largest session read, plus a generous header.
    let limit = (MAX_FRAMES as u64) * 3 * 8 + (1 << 20);
    let bytes = read_limited(path, limit)?;
    let (h, values) = npy::read_floats(&bytes).map_err(|m| malformed(path, m))?;
    h.require_c_order().map_err(|m| malformed(path, m))?;
    let fits = h.shape.len() == shape.len()
        && h.shape
            .iter()
            .zip(shape)
            .all(|(d, want)| want.is_none_or(|w| *d == w));
    if !fits {
        let want: Vec<String> = shape
            .iter()
            .map(|d| d.map_or("any".to_string(), |d| d.to_string()))
            .collect();
        return Err(malformed(
            path,
            format!("shape {:?} does not fit ({})", h.shape, want.join(", ")),
        ));
    }
    Ok((h.shape, values))
}

/// Maps a ranges array of shape (frames, beams), float32.
fn open_ranges(
    path: &Path,
    frames: usize,
    beams: usize,
) -> Result<Arc<dyn RangeSource>, InputError> {
    let (file, _) = open_limited(path, u64::MAX)?;
    // SAFETY: a read-only map of a regular file (checked above); see `MappedRanges::as_slice`
    // for the rule on the file's lifetime. Nothing is read from it before the checks below.
    let map =
        unsafe { memmap2::Mmap::map(&file) }.map_err(|e| InputError::at(path, Problem::Read(e)))?;
    let h = npy::parse_header(&map).map_err(|m| malformed(path, m))?;
    if h.descr != "<f4" {
        return Err(malformed(
            path,
            format!("ranges must be float32 ('<f4'), found {:?}", h.descr),
        ));
    }
    h.require_c_order().map_err(|m| malformed(path, m))?;
    if h.shape != [frames, beams] {
        return Err(malformed(
            path,
            format!(
                "shape {:?}, but the session has {frames} frames and the sensor {beams} beams",
                h.shape
            ),
        ));
    }
    let len = h
        .check_payload(map.len(), 4)
        .map_err(|m| malformed(path, m))?;
    let aligned =
        (map.as_ptr() as usize + h.data_offset).is_multiple_of(std::mem::align_of::<f32>());
    if aligned && cfg!(target_endian = "little") {
        Ok(Arc::new(MappedRanges {
            map,
            offset: h.data_offset,
            len,
        }))
    } else {
        let v: Vec<f32> = map[h.data_offset..]
            .chunks_exact(4)
            .map(|c| f32::from_le_bytes([c[0], c[1], c[2], c[3]]))
            .collect();
        Ok(Arc::new(v))
    }
}

/// Builds a session from a header's sensors and its `frames_from` arrays, resolved against
/// `base` (the header's folder).
pub(crate) fn load_frames(
    mut session: Session,
    packed: &PackedFrames,
    base: &Path,
    file: &str,
) -> Result<Session, InputError> {
    let times_path = base.join(&packed.times);
    let poses_path = base.join(&packed.poses);
    let (shape, times) = read_small(&times_path, &[None])?;
    let n = shape[0];
    if n > MAX_FRAMES {
        return Err(malformed(
            &times_path,
            format!("{n} frames; at most {MAX_FRAMES} are read"),
        ));
    }
    let (_, poses) = read_small(&poses_path, &[Some(n), Some(3)])?;
    for id in packed.ranges.keys() {
        if session.sensor_index(id).is_none() {
            return Err(InputError::new(
                file,
                Problem::UnknownSensor {
                    frame: 0,
                    sensor: id.clone(),
                },
            ));
        }
    }
    let mut tables = Vec::with_capacity(session.sensors.len());
    for s in &session.sensors {
        let Some(rel) = packed.ranges.get(&s.id) else {
            return Err(InputError::new(
                file,
                Problem::BadField {
                    field: "frames_from.ranges".into(),
                    reason: format!("no ranges array for sensor \"{}\"", s.id),
                },
            ));
        };
        let source = open_ranges(&base.join(rel), n, s.beam_count())?;
        tables.push(RangeTable::from_source(s.beam_count(), source));
    }
    let mut frames = Vec::with_capacity(n);
    for (i, (t, p)) in times.iter().zip(poses.chunks_exact(3)).enumerate() {
        if !t.is_finite() {
            return Err(InputError::at(
                &times_path,
                Problem::NotFinite {
                    frame: i,
                    what: "t",
                },
            ));
        }
        if let Some(prev) = frames.last().map(|f: &Frame| f.t)
            && *t < prev
        {
            return Err(InputError::at(
                &times_path,
                Problem::TimeDecreasing {
                    frame: i,
                    t: *t,
                    previous: prev,
                },
            ));
        }
        let pose = Pose2::new(p[0], p[1], p[2]);
        if !pose.is_finite() {
            return Err(InputError::at(
                &poses_path,
                Problem::NotFinite {
                    frame: i,
                    what: "pose",
                },
            ));
        }
        frames.push(Frame {
            t: *t,
            pose,
            scans: (0..session.sensors.len())
                .map(|sensor| ScanRef { sensor, row: i })
                .collect(),
        });
    }
    session.frames = frames;
    session.set_tables(tables);
    Ok(session)
}

/// Array file names for a header path `X.session.ron`: `X.times.npy`, `X.poses.npy` and
/// `X.<sensor>.npy` (sensor ids reduced to file-safe characters, kept distinct).
fn array_names(header: &Path, session: &Session) -> (String, String, Vec<String>) {
    let file = header
        .file_name()
        .map(|f| f.to_string_lossy().into_owned())
        .unwrap_or_default();
    let stem = file
        .strip_suffix(".session.ron")
        .or_else(|| file.strip_suffix(".ron"))
        .unwrap_or(&file)
        .to_string();
    let mut used = std::collections::HashSet::new();
    let ranges = session
        .sensors
        .iter()
        .enumerate()
        .map(|(k, s)| {
            let safe: String =
                s.id.chars()
                    .map(|c| {
                        if c.is_ascii_alphanumeric() || c == '-' || c == '_' {
                            c
                        } else {
                            '_'
                        }
                    })
                    .collect();
            let mut name = format!("{stem}.{safe}.npy");
            if !used.insert(name.clone()) {
                name = format!("{stem}.{safe}-{k}.npy");
                used.insert(name.clone());
            }
            name
        })
        .collect();
    (
        format!("{stem}.times.npy"),
        format!("{stem}.poses.npy"),
        ranges,
    )
}

/// Writes `session` in the packed layout: the header at `header` and its arrays beside it,
/// all atomically. Refuses sessions whose frames omit a sensor or list scans out of sensor
/// order, which the layout cannot express.
pub fn write_packed(session: &Session, header: &Path) -> Result<Vec<PathBuf>, Error> {
    let order: Vec<usize> = (0..session.sensors.len()).collect();
    for (i, f) in session.frames.iter().enumerate() {
        let got: Vec<usize> = f.scans.iter().map(|s| s.sensor).collect();
        if got != order {
            return Err(InputError::new(
                session.name.clone(),
                Problem::Malformed(format!(
                    "frame {i} does not hold one scan of every sensor in declaration order; \
                     the packed layout needs that (keep this session inline)"
                )),
            )
            .into());
        }
    }
    let (times_name, poses_name, range_names) = array_names(header, session);
    let dir = header.parent().map(Path::to_path_buf).unwrap_or_default();
    let n = session.frames.len();
    let mut times = npy::header("<f8", &[n]);
    let mut poses = npy::header("<f8", &[n, 3]);
    for f in &session.frames {
        times.extend_from_slice(&f.t.to_le_bytes());
        for v in [f.pose.x, f.pose.y, f.pose.theta] {
            poses.extend_from_slice(&v.to_le_bytes());
        }
    }
    let mut files = vec![
        (dir.join(&times_name), times),
        (dir.join(&poses_name), poses),
    ];
    for (k, s) in session.sensors.iter().enumerate() {
        let mut bytes = npy::header("<f4", &[n, s.beam_count()]);
        bytes.reserve(n * s.beam_count() * 4);
        for f in &session.frames {
            for r in session.ranges(f.scans[k]) {
                bytes.extend_from_slice(&r.to_le_bytes());
            }
        }
        files.push((dir.join(&range_names[k]), bytes));
    }
    let ranges: BTreeMap<String, String> = session
        .sensors
        .iter()
        .map(|s| s.id.clone())
        .zip(range_names.iter().cloned())
        .collect();
    let frames_from = PackedFrames {
        times: times_name,
        poses: poses_name,
        ranges,
    };
    files.push((
        header.to_path_buf(),
        session.header_ron(&frames_from).into_bytes(),
    ));
    write_all_atomically(&files)?;
    Ok(files.into_iter().map(|(p, _)| p).collect())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::demo;

    fn scratch(name: &str) -> PathBuf {
        let d =
            std::env::temp_dir().join(format!("gridscope-packed-{}-{name}", std::process::id()));
        let _ = std::fs::remove_dir_all(&d);
        std::fs::create_dir_all(&d).unwrap();
        d
    }

    #[test]
    fn packs_and_loads_back_identically() {
        let s = demo::session("glass-pass").unwrap();
        let dir = scratch("round");
        let header = dir.join("glass.session.ron");
        let files = write_packed(&s, &header).unwrap();
        assert_eq!(files.len(), 2 + s.sensors.len() + 1);
        let back = Session::load(&header).unwrap();
        assert_eq!(back.sensors, s.sensors);
        assert_eq!(back.frames, s.frames);
        for f in &s.frames {
            for sc in &f.scans {
                assert!(
                    s.ranges(*sc)
                        .iter()
                        .zip(back.ranges(*sc))
                        .all(|(a, b)| a.to_bits() == b.to_bits())
                );
            }
        }
        // And back to inline text, which loads to the same session again.
        let inline = Session::from_ron_str(&back.to_ron_string(), "inline").unwrap();
        assert_eq!(inline.frames, s.frames);
        std::fs::remove_dir_all(&dir).unwrap();
    }

    #[test]
    fn bad_arrays_are_refused_with_the_file_and_frame() {
        let s = demo::session("glass-pass").unwrap();
        let dir = scratch("bad");
        let header = dir.join("g.session.ron");
        write_packed(&s, &header).unwrap();
        // A pose that is not finite, in frame 7.
        let poses = dir.join("g.poses.npy");
        let mut bytes = std::fs::read(&poses).unwrap();
        let off = npy::parse_header(&bytes).unwrap().data_offset + (7 * 3 + 1) * 8;
        bytes[off..off + 8].copy_from_slice(&f64::NAN.to_le_bytes());
        std::fs::write(&poses, &bytes).unwrap();
        let e = Session::load(&header).unwrap_err();
        assert!(
            e.to_string().contains("g.poses.npy") && e.to_string().contains("frame 7"),
            "{e}"
        );
        // A ranges array one row short.
        write_packed(&s, &header).unwrap();
        let lidar = dir.join("g.lidar.npy");
        let bytes = std::fs::read(&lidar).unwrap();
        let h = npy::parse_header(&bytes).unwrap();
        let mut short = npy::header("<f4", &[h.shape[0] - 1, h.shape[1]]);
        short.extend_from_slice(&bytes[h.data_offset..bytes.len() - h.shape[1] * 4]);
        std::fs::write(&lidar, short).unwrap();
        let e = Session::load(&header).unwrap_err();
        assert!(
            e.to_string().contains("g.lidar.npy") && e.to_string().contains("shape"),
            "{e}"
        );
        std::fs::remove_dir_all(&dir).unwrap();
    }

    #[test]
    fn sessions_that_omit_sensors_stay_inline() {
        let mut s = Session::with_sensors(
            "x".into(),
            String::new(),
            demo::session("glass-pass").unwrap().sensors,
        )
        .unwrap();
        s.push_frame(0.0, Pose2::default(), &[]).unwrap();
        let dir = scratch("omit");
        assert!(write_packed(&s, &dir.join("x.session.ron")).is_err());
        assert!(
            std::fs::read_dir(&dir).unwrap().next().is_none(),
            "nothing written"
        );
    }
}
