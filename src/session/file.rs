//! The session file (`*.session.ron`): its schema as written, reading it with the contract's
//! checks, and writing it back.
//!
//! Design decision: the schema types here are private and exist only to be read; a parsed file
//! is turned into a [`Session`] through [`Session::push_frame`], the one place the contract's
//! frame rules are checked, whether frames come from RON text, arrays or the simulator.

use super::packed::{self, PackedFrames};
use super::{BeamAngles, Sensor, Session};
use crate::error::{InputError, Problem};
use crate::geometry::Pose2;
use crate::io::doc;
use crate::io::numbers::{fmt_f32, fmt_f64, ron_string};
use crate::limits::{MAX_FRAMES, MAX_SENSORS};
use serde::Deserialize;
use std::fmt::Write;
use std::path::Path;

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct SessionFile {
    format: i64,
    name: String,
    #[serde(default)]
    notes: String,
    sensors: Vec<Sensor>,
    #[serde(default)]
    frames: Option<Vec<FrameFile>>,
    #[serde(default)]
    frames_from: Option<PackedFrames>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct FrameFile {
    t: f64,
    pose: Pose2,
    #[serde(default)]
    scans: Vec<ScanFile>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct ScanFile {
    sensor: String,
    ranges: Vec<f32>,
}

fn field(name: &str, reason: &str) -> Problem {
    Problem::BadField {
        field: name.into(),
        reason: reason.into(),
    }
}

/// Parses and validates a session document; `base` is the folder of a packed session's arrays.
pub(super) fn parse(text: &str, file: &str, base: Option<&Path>) -> Result<Session, InputError> {
    let doc: SessionFile = doc::parse(text, file)?;
    doc::check_format(doc.format, file)?;
    if doc.sensors.len() > MAX_SENSORS {
        return Err(InputError::new(
            file,
            field(
                "sensors",
                &format!("at most {MAX_SENSORS} sensors are read"),
            ),
        ));
    }
    let mut session = Session::with_sensors(doc.name, doc.notes, doc.sensors)
        .map_err(|p| InputError::new(file, p))?;
    let frames = match (doc.frames, doc.frames_from) {
        (Some(frames), None) => frames,
        (None, Some(arrays)) => {
            let Some(base) = base else {
                return Err(InputError::new(
                    file,
                    field(
                        "frames_from",
                        "a packed session must be opened from its file, beside its arrays",
                    ),
                ));
            };
            return packed::load_frames(session, &arrays, base, file);
        }
        (Some(_), Some(_)) => {
            return Err(InputError::new(
                file,
                field("frames", "give either frames or frames_from, not both"),
            ));
        }
        (None, None) => {
            return Err(InputError::new(
                file,
                field(
                    "frames",
                    "missing: give frames (inline) or frames_from (arrays beside the file)",
                ),
            ));
        }
    };
    if frames.len() > MAX_FRAMES {
        return Err(InputError::new(
            file,
            field("frames", &format!("at most {MAX_FRAMES} frames are read")),
        ));
    }
    for f in frames {
        let scans: Vec<(&str, &[f32])> = f
            .scans
            .iter()
            .map(|s| (s.sensor.as_str(), s.ranges.as_slice()))
            .collect();
        session
            .push_frame(f.t, f.pose, &scans)
            .map_err(|p| InputError::new(file, p))?;
    }
    Ok(session)
}

impl Session {
    /// The header of a session document: format, name, notes and sensors, up to the frames.
    fn sensors_ron(&self) -> String {
        let mut s = String::new();
        let _ = writeln!(
            s,
            "(\n    format: 1,\n    name: {},",
            ron_string(&self.name)
        );
        if !self.notes.is_empty() {
            let _ = writeln!(s, "    notes: {},", ron_string(&self.notes));
        }
        s.push_str("    sensors: [\n");
        for sensor in &self.sensors {
            let angles = match &sensor.angles {
                BeamAngles::Fan { start, step, count } => format!(
                    "Fan(start: {}, step: {}, count: {count})",
                    fmt_f64(*start),
                    fmt_f64(*step)
                ),
                BeamAngles::List(v) => {
                    let items: Vec<String> = v.iter().map(|a| fmt_f64(*a)).collect();
                    format!("List([{}])", items.join(", "))
                }
            };
            let _ = writeln!(
                s,
                "        (id: {}, kind: {:?}, mount: (x: {}, y: {}, theta: {}), angles: {angles}, \
                 range_min: {}, range_max: {}, cone_width: {}),",
                ron_string(&sensor.id),
                sensor.kind,
                fmt_f64(sensor.mount.x),
                fmt_f64(sensor.mount.y),
                fmt_f64(sensor.mount.theta),
                fmt_f64(sensor.range_min),
                fmt_f64(sensor.range_max),
                fmt_f64(sensor.cone_width),
            );
        }
        s.push_str("    ],\n");
        s
    }

    /// A packed session header: the sensors, and `frames_from` pointing at the arrays.
    pub(crate) fn header_ron(&self, frames_from: &PackedFrames) -> String {
        let mut s = self.sensors_ron();
        let ranges: Vec<String> = frames_from
            .ranges
            .iter()
            .map(|(id, f)| format!("{}: {}", ron_string(id), ron_string(f)))
            .collect();
        let _ = write!(
            s,
            "    frames_from: (\n        times: {},\n        poses: {},\n        ranges: {{ {} }},\n    ),\n)\n",
            ron_string(&frames_from.times),
            ron_string(&frames_from.poses),
            ranges.join(", ")
        );
        s
    }

    /// Writes the session as an inline `*.session.ron` document (format 1), one frame per line,
    /// every number in the shortest text that reads back to the same value.
    pub fn to_ron_string(&self) -> String {
        let mut s = self.sensors_ron();
        s.push_str("    frames: [\n");
        for f in &self.frames {
            let _ = write!(
                s,
                "        (t: {}, pose: (x: {}, y: {}, theta: {}), scans: [",
                fmt_f64(f.t),
                fmt_f64(f.pose.x),
                fmt_f64(f.pose.y),
                fmt_f64(f.pose.theta)
            );
            for (k, scan) in f.scans.iter().enumerate() {
                if k > 0 {
                    s.push_str(", ");
                }
                let _ = write!(
                    s,
                    "(sensor: {}, ranges: [",
                    ron_string(&self.sensors[scan.sensor].id)
                );
                for (j, r) in self.ranges(*scan).iter().enumerate() {
                    if j > 0 {
                        s.push_str(", ");
                    }
                    s.push_str(&fmt_f32(*r));
                }
                s.push_str("])");
            }
            s.push_str("]),\n");
        }
        s.push_str("    ],\n)\n");
        s
    }

    /// Writes the session to `path`, inline (`packed: false`) or in the packed layout (arrays
    /// beside the header), all or nothing, and returns the files written. Refuses to write
    /// over `input`, the file the session came from, or over any existing file: a derived run
    /// (re-aligned, say) is always saved beside the original.
    pub fn save_as(
        &self,
        path: &Path,
        packed: bool,
        input: Option<&Path>,
    ) -> Result<Vec<std::path::PathBuf>, crate::Error> {
        let same = |a: &Path, b: &Path| match (a.canonicalize(), b.canonicalize()) {
            (Ok(a), Ok(b)) => a == b,
            _ => a == b,
        };
        if input.is_some_and(|i| same(i, path)) || path.exists() {
            return Err(InputError::new(
                path.display().to_string(),
                Problem::BadField {
                    field: "output".into(),
                    reason: "already exists; a derived run is saved under a new name and \
                             never over its input"
                        .into(),
                },
            )
            .into());
        }
        if packed {
            packed::write_packed(self, path)
        } else {
            crate::io::atomic::write_all_atomically(&[(
                path.to_path_buf(),
                self.to_ron_string().into_bytes(),
            )])?;
            Ok(vec![path.to_path_buf()])
        }
    }
}
