//! A recorded run: sensors, posed frames and their range readings, loaded from a
//! `*.session.ron` file and validated against the file contract.
//!
//! Design decision: ranges are kept per sensor in one flat `f32` table (scan rows of
//! `beam_count` readings), not inside each frame. Frames only point at rows. That keeps a long
//! run compact, lets the same code serve sessions whose ranges live in NumPy arrays beside the
//! header, and makes a beam's reading one index away.

mod file;
pub(crate) mod packed;
mod ranges;
mod sensor;

pub use packed::write_packed;
pub use ranges::{RangeSource, RangeTable};
pub use sensor::{BeamAngles, Reading, Sensor, SensorKind};

use crate::error::{InputError, Problem};
use crate::geometry::{Point2, Pose2};
use crate::io::read::read_text;
use std::collections::HashSet;
use std::path::Path;

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
        file::parse(text, file, base)
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

    /// The robot pose at time `t` seconds: interpolated between the frames around `t` (linear in
    /// x and y, along the shorter arc in theta), held at the first and last frame's pose outside
    /// the run. `None` for a session without frames.
    pub fn pose_at(&self, t: f64) -> Option<Pose2> {
        let frames = &self.frames;
        let first = frames.first()?;
        let last = frames.last()?;
        if t.is_nan() || t <= first.t {
            return Some(first.pose);
        }
        if t >= last.t {
            return Some(last.pose);
        }
        // The first frame later than t; frames before it are at or before t.
        let k = frames.partition_point(|f| f.t <= t);
        let (a, b) = (&frames[k - 1], &frames[k]);
        let u = (t - a.t) / (b.t - a.t);
        let turn = crate::geometry::wrap_angle(b.pose.theta - a.pose.theta);
        Some(Pose2::new(
            a.pose.x + u * (b.pose.x - a.pose.x),
            a.pose.y + u * (b.pose.y - a.pose.y),
            a.pose.theta + u * turn,
        ))
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
    fn poses_between_frames_are_interpolated_and_held_at_the_ends() {
        // Geometry of a simple case: half-way between (1, 2, 0) at t = 0 and (1.1, 2, 0.1) at
        // t = 0.1 is (1.05, 2, 0.05); before the run and after it the end poses hold.
        let s = Session::from_ron_str(SMALL, "small").unwrap();
        let p = s.pose_at(0.05).unwrap();
        assert!((p.x - 1.05).abs() < 1e-12 && p.y == 2.0 && (p.theta - 0.05).abs() < 1e-12);
        assert_eq!(s.pose_at(-3.0).unwrap(), s.frames[0].pose);
        assert_eq!(s.pose_at(9.0).unwrap(), s.frames[1].pose);
        assert_eq!(s.pose_at(0.1).unwrap(), s.frames[1].pose);
        // The shorter arc: from 3.1 rad to -3.1 rad turns 0.083 rad through pi, not 6.2 back.
        let mut two = Session::with_sensors("t".into(), String::new(), s.sensors.clone()).unwrap();
        two.push_frame(0.0, Pose2::new(0.0, 0.0, 3.1), &[]).unwrap();
        two.push_frame(1.0, Pose2::new(0.0, 0.0, -3.1), &[])
            .unwrap();
        let mid = two.pose_at(0.5).unwrap().theta;
        assert!(
            (crate::geometry::wrap_angle(mid) - std::f64::consts::PI).abs() < 1e-9,
            "{mid}"
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
        assert!(matches!(
            refused(&huge),
            Problem::BadSensor {
                field: "angles",
                ..
            }
        ));
    }

    mod round_trip {
        use super::super::*;
        use proptest::prelude::*;

        fn reading() -> impl Strategy<Value = f32> {
            prop_oneof![
                8 => -1.0f32..30.0,
                1 => Just(f32::INFINITY),
                1 => Just(f32::NEG_INFINITY),
                1 => Just(f32::NAN),
            ]
        }

        fn sensor(k: usize) -> impl Strategy<Value = Sensor> {
            (
                any::<bool>(),
                1usize..5,
                -3.0f64..3.0,
                0.01f64..0.5,
                any::<bool>(),
            )
                .prop_map(move |(cone, count, start, step, list)| Sensor {
                    id: format!("s{k} \"q\""),
                    kind: if cone {
                        SensorKind::Cone
                    } else {
                        SensorKind::Ray
                    },
                    mount: Pose2::new(start / 10.0, -start / 7.0, step),
                    angles: if list {
                        BeamAngles::List((0..count).map(|i| start + i as f64 * step).collect())
                    } else {
                        BeamAngles::Fan { start, step, count }
                    },
                    range_min: step / 10.0,
                    range_max: 5.0 + start.abs(),
                    cone_width: if cone { step } else { 0.0 },
                })
        }

        /// A session of one to three sensors and a few frames, each holding some of the
        /// sensors in some order, with ranges that include the special values.
        fn session() -> impl Strategy<Value = Session> {
            (1usize..4)
                .prop_flat_map(|n| (0..n).map(sensor).collect::<Vec<_>>())
                .prop_flat_map(|sensors| {
                    let n = sensors.len();
                    let beams: Vec<usize> = sensors.iter().map(|s| s.beam_count()).collect();
                    let frame = (
                        0.0f64..0.5,
                        (-50.0f64..50.0, -50.0f64..50.0, -7.0f64..7.0),
                        Just((0..n).collect::<Vec<usize>>()).prop_shuffle(),
                        0..=n,
                        beams
                            .iter()
                            .map(|&b| proptest::collection::vec(reading(), b))
                            .collect::<Vec<_>>(),
                    );
                    (Just(sensors), proptest::collection::vec(frame, 0..6))
                })
                .prop_map(|(sensors, frames)| {
                    let mut s =
                        Session::with_sensors("round \u{e9}".into(), "n".into(), sensors).unwrap();
                    let mut t = 0.0;
                    for (dt, (x, y, th), order, keep, ranges) in frames {
                        t += dt;
                        let ids: Vec<String> = s.sensors.iter().map(|x| x.id.clone()).collect();
                        let scans: Vec<(&str, &[f32])> = order[..keep]
                            .iter()
                            .map(|&k| (ids[k].as_str(), &ranges[k][..]))
                            .collect();
                        s.push_frame(t, Pose2::new(x, y, th), &scans).unwrap();
                    }
                    s
                })
        }

        proptest! {
            #![proptest_config(ProptestConfig { cases: 120, failure_persistence: None, ..ProptestConfig::default() })]

            /// The writer's text reads back to the same session: sensors, frames, and every
            /// reading to the bit (NaN as NaN).
            #[test]
            fn written_sessions_read_back_the_same(s in session()) {
                let back = Session::from_ron_str(&s.to_ron_string(), "again").unwrap();
                prop_assert_eq!(&back.sensors, &s.sensors);
                prop_assert_eq!(&back.frames, &s.frames);
                for f in &s.frames {
                    for sc in &f.scans {
                        for (a, b) in s.ranges(*sc).iter().zip(back.ranges(*sc)) {
                            prop_assert!(a.to_bits() == b.to_bits() || (a.is_nan() && b.is_nan()));
                        }
                    }
                }
            }
        }
    }
}
