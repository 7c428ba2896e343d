//! A recorded run: sensors, posed frames and their range readings, loaded from a
//! `*.session.ron` file and validated against the file contract.
//!
//! Design decision: ranges are kept per sensor in one flat `f32` table (scan rows of
//! `beam_count` readings), not inside each frame. Frames only point at rows. That keeps a long
//! run compact, lets the same code serve sessions whose ranges live in NumPy arrays beside the
//! header, and makes a beam's reading one index away.

use crate::error::{InputError, Problem, read_text, ron_problem};
use crate::geometry::{Point2, Pose2};
use serde::{Deserialize, Serialize};
use std::collections::HashSet;
use std::path::Path;

/// How a sensor's beams interact with the grid.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub enum SensorKind {
    /// Narrow beams (laser): the footprint is the exact grid traversal of the beam's segment.
    Ray,
    /// Wide beams (ultrasonic): the footprint is a sector of opening `cone_width`.
    Cone,
}

/// Beam directions of a sensor, radians, relative to the sensor's mount heading.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub enum BeamAngles {
    /// Evenly spaced: beam k points at `start + k * step`.
    Fan {
        /// First beam's angle, radians.
        start: f64,
        /// Spacing between beams, radians.
        step: f64,
        /// Number of beams.
        count: usize,
    },
    /// An explicit list of angles, radians.
    List(Vec<f64>),
}

impl BeamAngles {
    /// Number of beams.
    pub fn count(&self) -> usize {
        match self {
            BeamAngles::Fan { count, .. } => *count,
            BeamAngles::List(v) => v.len(),
        }
    }

    /// Angle of beam `k`, radians relative to the mount heading.
    pub fn angle(&self, k: usize) -> f64 {
        match self {
            BeamAngles::Fan { start, step, .. } => start + k as f64 * step,
            BeamAngles::List(v) => v[k],
        }
    }
}

/// One range sensor on the robot.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Sensor {
    /// Unique id, referenced by scans and by per-sensor models in a parameter profile.
    pub id: String,
    /// Narrow (`Ray`) or wide (`Cone`) beams.
    pub kind: SensorKind,
    /// Sensor pose in the robot frame (metres, radians).
    pub mount: Pose2,
    /// Beam directions relative to the mount.
    pub angles: BeamAngles,
    /// Readings below this are invalid, metres.
    pub range_min: f64,
    /// Readings at or above this are no-returns, metres.
    pub range_max: f64,
    /// Full opening angle of each beam, radians; used by `Cone` sensors only.
    #[serde(default)]
    pub cone_width: f64,
}

/// What one reading says, per the contract's classification.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Reading {
    /// An obstacle at this range, metres (`range_min <= r < range_max`).
    Hit(f64),
    /// Nothing seen within `range_max` (`r >= range_max`).
    NoReturn,
    /// Below `range_min`, negative, or not finite: skipped.
    Invalid,
}

impl Sensor {
    /// Number of beams per scan.
    pub fn beam_count(&self) -> usize {
        self.angles.count()
    }

    /// Classifies a raw reading (metres).
    #[inline]
    pub fn classify(&self, r: f32) -> Reading {
        let r = r as f64;
        if !r.is_finite() || r < 0.0 || r < self.range_min {
            Reading::Invalid
        } else if r >= self.range_max {
            Reading::NoReturn
        } else {
            Reading::Hit(r)
        }
    }

    fn validate(&self) -> Result<(), Problem> {
        let bad = |field, reason: String| Problem::BadSensor {
            sensor: self.id.clone(),
            field,
            reason,
        };
        if !self.mount.is_finite() {
            return Err(bad("mount", "must be finite".into()));
        }
        if !(self.range_min.is_finite() && self.range_min >= 0.0) {
            return Err(bad(
                "range_min",
                format!("must be a finite number >= 0 (got {})", self.range_min),
            ));
        }
        if !(self.range_max.is_finite() && self.range_max > self.range_min) {
            return Err(bad(
                "range_max",
                format!(
                    "must be finite and greater than range_min = {} (got {})",
                    self.range_min, self.range_max
                ),
            ));
        }
        match &self.angles {
            BeamAngles::Fan { start, step, count } => {
                if *count == 0 {
                    return Err(bad("angles", "Fan count must be at least 1".into()));
                }
                if !start.is_finite() || !step.is_finite() {
                    return Err(bad("angles", "Fan start and step must be finite".into()));
                }
            }
            BeamAngles::List(v) => {
                if v.is_empty() {
                    return Err(bad("angles", "List must hold at least one angle".into()));
                }
                if let Some(k) = v.iter().position(|a| !a.is_finite()) {
                    return Err(bad("angles", format!("angle {k} is not finite")));
                }
            }
        }
        if self.kind == SensorKind::Cone
            && !(self.cone_width > 0.0 && self.cone_width <= std::f64::consts::TAU)
        {
            return Err(bad(
                "cone_width",
                format!(
                    "a Cone sensor needs 0 < cone_width <= 2 pi radians (got {})",
                    self.cone_width
                ),
            ));
        }
        if !self.cone_width.is_finite() {
            return Err(bad("cone_width", "must be finite".into()));
        }
        Ok(())
    }
}

/// Where a scan's readings sit: which sensor, and which row of that sensor's range table.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct ScanRef {
    /// Index into [`Session::sensors`].
    pub sensor: usize,
    /// Row in that sensor's range table.
    pub row: usize,
}

/// One posed frame: a time, a robot pose and the scans taken there.
#[derive(Clone, Debug, PartialEq)]
pub struct Frame {
    /// Seconds, non-decreasing through the session.
    pub t: f64,
    /// Robot pose in the world frame.
    pub pose: Pose2,
    /// Scans in the order they are fused.
    pub scans: Vec<ScanRef>,
}

/// A beam's place in a session: frame index, sensor index, beam index.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub struct BeamRef {
    /// 0-based frame index.
    pub frame: usize,
    /// Index into [`Session::sensors`].
    pub sensor: usize,
    /// 0-based beam index within the scan.
    pub beam: usize,
}

/// A beam resolved into world geometry.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct BeamRay {
    /// Beam origin in the world, metres.
    pub origin: Point2,
    /// Beam axis direction, radians, world frame.
    pub heading: f64,
    /// The reading's meaning.
    pub reading: Reading,
    /// The raw reading, metres.
    pub raw: f32,
}

/// Per-sensor range rows: `rows x beams` readings in metres, row-major.
#[derive(Clone, Debug, Default)]
pub struct RangeTable {
    beams: usize,
    data: RangeData,
}

#[derive(Clone, Debug)]
enum RangeData {
    Owned(Vec<f32>),
    Shared(std::sync::Arc<dyn RangeSource>),
}

impl Default for RangeData {
    fn default() -> Self {
        RangeData::Owned(Vec::new())
    }
}

/// Read-only storage of readings that may live outside the process heap (a memory map).
pub trait RangeSource: std::fmt::Debug + Send + Sync {
    /// All readings, row-major, metres.
    fn as_slice(&self) -> &[f32];
}

impl RangeTable {
    /// An empty table for a sensor with `beams` beams.
    pub fn new(beams: usize) -> Self {
        Self {
            beams,
            data: RangeData::Owned(Vec::new()),
        }
    }

    /// A table over external storage holding `len / beams` rows.
    pub fn from_source(beams: usize, source: std::sync::Arc<dyn RangeSource>) -> Self {
        Self {
            beams,
            data: RangeData::Shared(source),
        }
    }

    fn all(&self) -> &[f32] {
        match &self.data {
            RangeData::Owned(v) => v,
            RangeData::Shared(s) => s.as_slice(),
        }
    }

    /// Number of rows (scans).
    pub fn rows(&self) -> usize {
        self.all().len().checked_div(self.beams).unwrap_or(0)
    }

    /// Readings of row `r`, or `None` past the end.
    pub fn row(&self, r: usize) -> Option<&[f32]> {
        let start = r.checked_mul(self.beams)?;
        self.all().get(start..start + self.beams)
    }

    /// Appends a row; returns its index. Only for owned tables.
    fn push(&mut self, ranges: &[f32]) -> usize {
        debug_assert_eq!(ranges.len(), self.beams);
        let r = self.rows();
        if let RangeData::Shared(s) = &self.data {
            self.data = RangeData::Owned(s.as_slice().to_vec());
        }
        if let RangeData::Owned(v) = &mut self.data {
            v.extend_from_slice(ranges);
        }
        r
    }
}

/// A validated recorded run.
#[derive(Clone, Debug, Default)]
pub struct Session {
    /// Free text shown in the window.
    pub name: String,
    /// Optional free text.
    pub notes: String,
    /// Sensors, in declaration order.
    pub sensors: Vec<Sensor>,
    /// Frames, in time order.
    pub frames: Vec<Frame>,
    tables: Vec<RangeTable>,
}

/// Counts over a whole session, as `gridscope info` prints them.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct SessionStats {
    /// Number of frames.
    pub frames: usize,
    /// Last time minus first time, seconds.
    pub duration: f64,
    /// Beams over all scans.
    pub beams: u64,
    /// Readings classified as hits.
    pub hits: u64,
    /// Readings classified as no-returns.
    pub no_returns: u64,
    /// Invalid readings (skipped).
    pub invalid: u64,
    /// Indices of frames holding at least one invalid reading.
    pub frames_with_invalid: Vec<usize>,
}

// ----- the file as written -------------------------------------------------------------------

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
    frames_from: Option<crate::packed::PackedFrames>,
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

/// Reads just `format`, ignoring everything else, to tell "unknown format" from a syntax error.
#[derive(Deserialize)]
struct FormatProbe {
    format: i64,
}

/// Parses `text` as a document whose `format` must be 1, naming `file` in every error.
pub(crate) fn parse_versioned<T: for<'de> Deserialize<'de>>(
    text: &str,
    file: &str,
) -> Result<T, InputError> {
    parse_versioned_with(text, file, &ron::Options::default())
}

/// As [`parse_versioned`] with RON options (sessions accept optional fields without `Some`).
pub(crate) fn parse_versioned_with<T: for<'de> Deserialize<'de>>(
    text: &str,
    file: &str,
    options: &ron::Options,
) -> Result<T, InputError> {
    match options.from_str::<T>(text) {
        Ok(v) => Ok(v),
        Err(e) => {
            if let Ok(probe) = ron::from_str::<FormatProbe>(text)
                && probe.format != 1
            {
                return Err(InputError::new(
                    file,
                    Problem::UnknownFormat {
                        found: probe.format,
                    },
                ));
            }
            Err(InputError::new(file, ron_problem(&e)))
        }
    }
}

pub(crate) fn check_format(found: i64, file: &str) -> Result<(), InputError> {
    if found == 1 {
        Ok(())
    } else {
        Err(InputError::new(file, Problem::UnknownFormat { found }))
    }
}

impl Session {
    /// Loads and validates a session file.
    pub fn load(path: &Path) -> Result<Session, InputError> {
        let text = read_text(path)?;
        let base = path.parent().unwrap_or(Path::new("."));
        Self::parse(&text, &path.display().to_string(), Some(base))
    }

    /// Parses and validates an inline session from RON text; `file` names it in errors.
    /// (A packed session needs its folder: use [`Session::load`].)
    pub fn from_ron_str(text: &str, file: &str) -> Result<Session, InputError> {
        Self::parse(text, file, None)
    }

    fn parse(text: &str, file: &str, base: Option<&Path>) -> Result<Session, InputError> {
        // `frames` and `frames_from` are written bare, as the contract shows them.
        let options = ron::Options::default()
            .with_default_extension(ron::extensions::Extensions::IMPLICIT_SOME);
        let doc: SessionFile = parse_versioned_with(text, file, &options)?;
        check_format(doc.format, file)?;
        let mut session = Session::with_sensors(doc.name, doc.notes, doc.sensors)
            .map_err(|p| InputError::new(file, p))?;
        let frames = match (doc.frames, doc.frames_from) {
            (Some(frames), None) => frames,
            (None, Some(packed)) => {
                let Some(base) = base else {
                    return Err(InputError::new(
                        file,
                        Problem::BadField {
                            field: "frames_from".into(),
                            reason:
                                "a packed session must be opened from its file, beside its arrays"
                                    .into(),
                        },
                    ));
                };
                return crate::packed::load_frames(session, &packed, base, file);
            }
            (Some(_), Some(_)) => {
                return Err(InputError::new(
                    file,
                    Problem::BadField {
                        field: "frames".into(),
                        reason: "give either frames or frames_from, not both".into(),
                    },
                ));
            }
            (None, None) => {
                return Err(InputError::new(
                    file,
                    Problem::BadField {
                        field: "frames".into(),
                        reason:
                            "missing: give frames (inline) or frames_from (arrays beside the file)"
                                .into(),
                    },
                ));
            }
        };
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

    /// A session with validated sensors and no frames yet.
    pub fn with_sensors(
        name: String,
        notes: String,
        sensors: Vec<Sensor>,
    ) -> Result<Session, Problem> {
        let mut seen = HashSet::new();
        for s in &sensors {
            if !seen.insert(s.id.as_str()) {
                return Err(Problem::DuplicateSensor { id: s.id.clone() });
            }
            s.validate()?;
        }
        let tables = sensors
            .iter()
            .map(|s| RangeTable::new(s.beam_count()))
            .collect();
        Ok(Session {
            name,
            notes,
            sensors,
            frames: Vec::new(),
            tables,
        })
    }

    /// Appends a frame after validating it against the contract (time order, finite pose,
    /// known sensors, one scan per sensor, matching range counts).
    pub fn push_frame(
        &mut self,
        t: f64,
        pose: Pose2,
        scans: &[(&str, &[f32])],
    ) -> Result<(), Problem> {
        let frame = self.frames.len();
        if !t.is_finite() {
            return Err(Problem::NotFinite { frame, what: "t" });
        }
        if let Some(prev) = self.frames.last()
            && t < prev.t
        {
            return Err(Problem::TimeDecreasing {
                frame,
                t,
                previous: prev.t,
            });
        }
        if !pose.is_finite() {
            return Err(Problem::NotFinite {
                frame,
                what: "pose",
            });
        }
        let mut refs = Vec::with_capacity(scans.len());
        for (id, ranges) in scans {
            let sensor = self
                .sensor_index(id)
                .ok_or_else(|| Problem::UnknownSensor {
                    frame,
                    sensor: id.to_string(),
                })?;
            if refs.iter().any(|r: &ScanRef| r.sensor == sensor) {
                return Err(Problem::DuplicateScan {
                    frame,
                    sensor: id.to_string(),
                });
            }
            let expected = self.sensors[sensor].beam_count();
            if ranges.len() != expected {
                return Err(Problem::WrongRangeCount {
                    frame,
                    sensor: id.to_string(),
                    expected,
                    found: ranges.len(),
                });
            }
            refs.push(ScanRef { sensor, row: 0 });
        }
        for (r, (_, ranges)) in refs.iter_mut().zip(scans) {
            r.row = self.tables[r.sensor].push(ranges);
        }
        self.frames.push(Frame {
            t,
            pose,
            scans: refs,
        });
        Ok(())
    }

    /// Replaces the range storage of every sensor (packed sessions keep their readings in
    /// arrays beside the header); the frames must point at rows of these tables.
    pub(crate) fn set_tables(&mut self, tables: Vec<RangeTable>) {
        self.tables = tables;
    }

    /// Index of the sensor with this id.
    pub fn sensor_index(&self, id: &str) -> Option<usize> {
        self.sensors.iter().position(|s| s.id == id)
    }

    /// The readings of a scan, metres.
    ///
    /// # Panics
    /// If the scan does not belong to this session (a `ScanRef` taken from its frames never
    /// panics).
    pub fn ranges(&self, scan: ScanRef) -> &[f32] {
        self.tables[scan.sensor]
            .row(scan.row)
            .expect("scan refers to a row of this session")
    }

    /// The scan of `sensor` in `frame`, if that frame has one.
    pub fn scan_of(&self, frame: usize, sensor: usize) -> Option<ScanRef> {
        self.frames
            .get(frame)?
            .scans
            .iter()
            .copied()
            .find(|s| s.sensor == sensor)
    }

    /// The world pose of a sensor's mount in a frame.
    pub fn sensor_pose(&self, frame: &Frame, sensor: usize) -> Pose2 {
        frame.pose.compose(&self.sensors[sensor].mount)
    }

    /// A beam resolved into world geometry, or `None` if the frame, scan or beam does not exist.
    pub fn beam(&self, b: BeamRef) -> Option<BeamRay> {
        let scan = self.scan_of(b.frame, b.sensor)?;
        let sensor = &self.sensors[b.sensor];
        let raw = *self.ranges(scan).get(b.beam)?;
        let p = self.sensor_pose(&self.frames[b.frame], b.sensor);
        Some(BeamRay {
            origin: p.position(),
            heading: p.theta + sensor.angles.angle(b.beam),
            reading: sensor.classify(raw),
            raw,
        })
    }

    /// Counts of frames, beams and reading classes.
    pub fn stats(&self) -> SessionStats {
        let mut st = SessionStats {
            frames: self.frames.len(),
            duration: match (self.frames.first(), self.frames.last()) {
                (Some(a), Some(b)) => b.t - a.t,
                _ => 0.0,
            },
            ..Default::default()
        };
        for (i, f) in self.frames.iter().enumerate() {
            let mut any_invalid = false;
            for scan in &f.scans {
                let sensor = &self.sensors[scan.sensor];
                for &r in self.ranges(*scan) {
                    st.beams += 1;
                    match sensor.classify(r) {
                        Reading::Hit(_) => st.hits += 1,
                        Reading::NoReturn => st.no_returns += 1,
                        Reading::Invalid => {
                            st.invalid += 1;
                            any_invalid = true;
                        }
                    }
                }
            }
            if any_invalid {
                st.frames_with_invalid.push(i);
            }
        }
        st
    }

    /// The header of a session document: format, name, notes and sensors, up to the frames.
    fn sensors_ron(&self) -> String {
        use std::fmt::Write;
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
    pub(crate) fn header_ron(&self, frames_from: &crate::packed::PackedFrames) -> String {
        let mut s = self.sensors_ron();
        let ranges: Vec<String> = frames_from
            .ranges
            .iter()
            .map(|(id, f)| format!("{}: {}", ron_string(id), ron_string(f)))
            .collect();
        s.push_str(&format!(
            "    frames_from: (\n        times: {},\n        poses: {},\n        ranges: {{ {} }},\n    ),\n)\n",
            ron_string(&frames_from.times),
            ron_string(&frames_from.poses),
            ranges.join(", ")
        ));
        s
    }

    /// Writes the session as an inline `*.session.ron` document (format 1), one frame per line.
    pub fn to_ron_string(&self) -> String {
        use std::fmt::Write;
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
}

/// A RON string literal.
fn ron_string(v: &str) -> String {
    ron::to_string(v).unwrap_or_else(|_| "\"\"".into())
}

/// Shortest round-trip text of an f64 that RON reads back as a float.
pub(crate) fn fmt_f64(v: f64) -> String {
    if v.is_finite() {
        format!("{v:?}")
    } else if v.is_nan() {
        "NaN".into()
    } else if v > 0.0 {
        "inf".into()
    } else {
        "-inf".into()
    }
}

/// Shortest round-trip text of an f32 reading that RON reads back as a float.
pub(crate) fn fmt_f32(v: f32) -> String {
    if v.is_finite() {
        format!("{v:?}")
    } else if v.is_nan() {
        "NaN".into()
    } else if v > 0.0 {
        "inf".into()
    } else {
        "-inf".into()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    pub(crate) const SMALL: &str = r#"(
        format: 1,
        name: "two frames",
        sensors: [
            (id: "front", kind: Ray, mount: (x: 0.2, y: 0.0, theta: 0.0),
             angles: Fan(start: -0.5, step: 0.5, count: 3), range_min: 0.1, range_max: 5.0, cone_width: 0.0),
            (id: "sonar", kind: Cone, mount: (x: 0.0, y: 0.0, theta: 1.5707963),
             angles: List([0.0]), range_min: 0.05, range_max: 3.0, cone_width: 0.4),
        ],
        frames: [
            (t: 0.0, pose: (x: 1.0, y: 2.0, theta: 0.0),
             scans: [(sensor: "front", ranges: [1.0, 5.0, 0.05]), (sensor: "sonar", ranges: [1.2])]),
            (t: 0.1, pose: (x: 1.1, y: 2.0, theta: 0.1),
             scans: [(sensor: "front", ranges: [NaN, -1.0, 4.99])]),
        ],
    )"#;

    fn refused(text: &str) -> Problem {
        Session::from_ron_str(text, "t.session.ron")
            .expect_err("should be refused")
            .problem
    }

    #[test]
    fn loads_and_classifies() {
        let s = Session::from_ron_str(SMALL, "small").unwrap();
        assert_eq!(s.sensors.len(), 2);
        assert_eq!(s.frames.len(), 2);
        let st = s.stats();
        assert_eq!(st.beams, 7);
        assert_eq!(st.hits, 3); // 1.0, 1.2, 4.99
        assert_eq!(st.no_returns, 1); // 5.0 == range_max
        assert_eq!(st.invalid, 3); // 0.05 < range_min, NaN, -1.0
        assert_eq!(st.frames_with_invalid, vec![0, 1]);
        assert!((st.duration - 0.1).abs() < 1e-12);
        let b = s
            .beam(BeamRef {
                frame: 0,
                sensor: 0,
                beam: 2,
            })
            .unwrap();
        assert!((b.origin.x - 1.2).abs() < 1e-12 && (b.heading - 0.5).abs() < 1e-12);
        assert!(
            s.beam(BeamRef {
                frame: 1,
                sensor: 1,
                beam: 0
            })
            .is_none()
        );
    }

    #[test]
    fn ron_writer_round_trips() {
        let s = Session::from_ron_str(SMALL, "small").unwrap();
        let text = s.to_ron_string();
        let back = Session::from_ron_str(&text, "again").unwrap();
        assert_eq!(back.sensors, s.sensors);
        assert_eq!(back.frames, s.frames);
        for f in &s.frames {
            for sc in &f.scans {
                let a = s.ranges(*sc);
                let b = back.ranges(*sc);
                assert!(a.iter().zip(b).all(|(x, y)| x.to_bits() == y.to_bits()));
            }
        }
    }

    #[test]
    fn syntax_error_names_line_and_column() {
        let text = "(\n  format: 1,\n  name: \"x\",\n  sensors: [,\n";
        match refused(text) {
            Problem::Syntax { line, .. } => assert_eq!(line, 4),
            p => panic!("{p:?}"),
        }
    }

    #[test]
    fn every_fatal_rule_of_the_contract_is_refused() {
        type Check = fn(&Problem) -> bool;
        let cases: Vec<(&str, String, Check)> = vec![
            (
                "unknown format",
                SMALL.replace("format: 1", "format: 7"),
                |p| matches!(p, Problem::UnknownFormat { found: 7 }),
            ),
            (
                "unknown sensor",
                SMALL.replace("(sensor: \"sonar\"", "(sensor: \"rear\""),
                |p| matches!(p, Problem::UnknownSensor { frame: 0, sensor } if sensor == "rear"),
            ),
            (
                "range count",
                SMALL.replace("[1.0, 5.0, 0.05]", "[1.0, 5.0]"),
                |p| {
                    matches!(
                        p,
                        Problem::WrongRangeCount {
                            frame: 0,
                            expected: 3,
                            found: 2,
                            ..
                        }
                    )
                },
            ),
            (
                "duplicate id",
                SMALL.replace("id: \"sonar\"", "id: \"front\""),
                |p| matches!(p, Problem::DuplicateSensor { .. }),
            ),
            (
                "non-finite pose",
                SMALL.replace("x: 1.1, y: 2.0", "x: inf, y: 2.0"),
                |p| {
                    matches!(
                        p,
                        Problem::NotFinite {
                            frame: 1,
                            what: "pose"
                        }
                    )
                },
            ),
            ("time decreasing", SMALL.replace("t: 0.1", "t: -0.1"), |p| {
                matches!(p, Problem::TimeDecreasing { frame: 1, .. })
            }),
            (
                "range_max <= range_min",
                SMALL.replace("range_max: 5.0", "range_max: 0.1"),
                |p| {
                    matches!(
                        p,
                        Problem::BadSensor {
                            field: "range_max",
                            ..
                        }
                    )
                },
            ),
            (
                "cone width",
                SMALL.replace("cone_width: 0.4", "cone_width: 0.0"),
                |p| {
                    matches!(
                        p,
                        Problem::BadSensor {
                            field: "cone_width",
                            ..
                        }
                    )
                },
            ),
            ("count 0", SMALL.replace("count: 3", "count: 0"), |p| {
                matches!(
                    p,
                    Problem::BadSensor {
                        field: "angles",
                        ..
                    }
                )
            }),
            (
                "two scans of one sensor",
                SMALL.replace(
                    "(sensor: \"sonar\", ranges: [1.2])",
                    "(sensor: \"front\", ranges: [1.0, 1.0, 1.0])",
                ),
                |p| matches!(p, Problem::DuplicateScan { frame: 0, .. }),
            ),
        ];
        for (what, text, ok) in cases {
            let p = refused(&text);
            assert!(ok(&p), "{what}: got {p:?}");
            let msg = InputError::new("t.session.ron", p).to_string();
            assert!(msg.starts_with("t.session.ron: "), "{what}: {msg}");
        }
    }

    #[test]
    fn hostile_text_is_refused_without_panic() {
        let garbage: Vec<u8> = (0..4000u32)
            .map(|i| (i.wrapping_mul(2654435761) >> 13) as u8)
            .collect();
        let text = String::from_utf8_lossy(&garbage);
        assert!(Session::from_ron_str(&text, "g").is_err());
        let truncated = &SMALL[..SMALL.len() / 2];
        assert!(matches!(refused(truncated), Problem::Syntax { .. }));
        let deep = "(".repeat(100_000);
        assert!(Session::from_ron_str(&deep, "deep").is_err());
        let huge = SMALL.replace("count: 3", "count: 18446744073709551615");
        assert!(matches!(refused(&huge), Problem::WrongRangeCount { .. }));
    }
}
