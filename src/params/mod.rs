//! The parameter profile (`*.params.ron`): everything besides the session that decides a map.
//!
//! Design decision: the profile is plain data with one `validate` that checks every rule of the
//! contract and names the offending field; the numbers are checked through the registry of
//! tunables ([`registry`]), so the window, the command line and the sweep refuse the same
//! things with the same words.

pub mod defaults;
mod model_spec;
pub mod registry;

pub use model_spec::ModelSpec;

use crate::error::{InputError, Problem};
use crate::geometry::Point2;
use crate::io::doc;
use crate::io::read::read_text;
use crate::logodds::Clamp;
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;
use std::ops::RangeInclusive;
use std::path::Path;

/// How the updates a cell receives within one frame are combined.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize)]
pub enum FusionRule {
    /// Every touched cell is updated at once, beam after beam.
    #[default]
    EveryBeam,
    /// Within a frame each cell is updated at most once, with its strongest increment.
    OncePerCell,
}

/// What a no-return reading (r >= range_max) does.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize)]
pub enum NoReturnRule {
    /// Mark every cell up to `range_max` with `p_free`.
    #[default]
    Clear,
    /// Touch nothing.
    Ignore,
}

/// A fixed grid extent: south-west corner and size in cells.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Extent {
    /// World coordinates of the south-west corner of cell (0, 0), metres.
    pub origin: Point2,
    /// Columns.
    pub width: u32,
    /// Rows.
    pub height: u32,
}

/// Parts of a session left out of the fusion (an optional field of the profile).
#[derive(Clone, Debug, Default, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct Exclusions {
    /// Inclusive frame index ranges that are skipped entirely.
    pub frames: Vec<RangeInclusive<usize>>,
    /// Sensor ids whose scans are skipped.
    pub sensors: Vec<String>,
    /// Single beams skipped: (frame, sensor id, beam index).
    pub beams: Vec<(usize, String, usize)>,
}

impl Exclusions {
    /// Whether nothing is excluded.
    pub fn is_empty(&self) -> bool {
        self.frames.is_empty() && self.sensors.is_empty() && self.beams.is_empty()
    }

    /// Whether frame `f` is excluded as a whole.
    pub fn frame_excluded(&self, f: usize) -> bool {
        self.frames.iter().any(|r| r.contains(&f))
    }
}

/// Corrections to one sensor's mount and clock (gridscope's own optional profile field
/// `calibration`), applied by every fusion path. All zero means the session as recorded.
#[derive(Clone, Copy, Debug, Default, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct SensorCorrection {
    /// Added to the mount's x (forward in the robot frame), metres.
    pub mount_x: f64,
    /// Added to the mount's y (left in the robot frame), metres.
    pub mount_y: f64,
    /// Added to the mount's heading, radians counter-clockwise.
    pub mount_theta: f64,
    /// A scan stamped t was taken at pose time t + time_offset, seconds.
    pub time_offset: f64,
}

impl SensorCorrection {
    /// Whether nothing is corrected.
    pub fn is_zero(&self) -> bool {
        *self == SensorCorrection::default()
    }
}

/// A complete parameter profile, per the contract (section 3).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Params {
    /// Always 1.
    pub format: i64,
    /// Cell side, metres.
    pub resolution: f64,
    /// Initial cell probability, 0 < prior < 1.
    pub prior: f64,
    /// Cell value bounds, log-odds.
    pub clamp: Clamp,
    /// How updates within a frame combine.
    pub fusion: FusionRule,
    /// What no-return readings do.
    pub no_return: NoReturnRule,
    /// The model for sensors without an entry in `models`.
    pub default_model: ModelSpec,
    /// Per-sensor models, by sensor id.
    #[serde(default)]
    pub models: BTreeMap<String, ModelSpec>,
    /// A fixed extent, or `None` for the default extent that holds every touched cell.
    #[serde(default)]
    pub extent: Option<Extent>,
    /// Frames, sensors and beams left out (gridscope's own optional field).
    #[serde(default, skip_serializing_if = "Exclusions::is_empty")]
    pub exclude: Exclusions,
    /// Per sensor id, corrections to the mount and the clock (gridscope's own optional field).
    #[serde(default, skip_serializing_if = "BTreeMap::is_empty")]
    pub calibration: BTreeMap<String, SensorCorrection>,
}

impl Default for Params {
    fn default() -> Self {
        Params {
            format: 1,
            resolution: 0.05,
            prior: 0.5,
            clamp: defaults::clamp(),
            fusion: FusionRule::EveryBeam,
            no_return: NoReturnRule::Clear,
            default_model: ModelSpec::default(),
            models: BTreeMap::new(),
            extent: None,
            exclude: Exclusions::default(),
            calibration: BTreeMap::new(),
        }
    }
}

fn bad(field: &str, reason: String) -> Problem {
    Problem::BadField {
        field: field.to_string(),
        reason,
    }
}

impl Params {
    /// Loads and validates a profile.
    pub fn load(path: &Path) -> Result<Params, InputError> {
        let text = read_text(path)?;
        Self::from_ron_str(&text, &path.display().to_string())
    }

    /// Parses and validates a profile from RON text; `file` names it in errors.
    pub fn from_ron_str(text: &str, file: &str) -> Result<Params, InputError> {
        let p: Params = doc::parse(text, file)?;
        doc::check_format(p.format, file)?;
        p.validate().map_err(|e| InputError::new(file, e))?;
        Ok(p)
    }

    /// Checks every rule of the contract, naming the first field that breaks one.
    pub fn validate(&self) -> Result<(), Problem> {
        if self.format != 1 {
            return Err(Problem::UnknownFormat { found: self.format });
        }
        for t in registry::tunables(self) {
            if let Some(v) = t.get(self) {
                t.domain()
                    .check(v, t.unit())
                    .map_err(|reason| Problem::BadField {
                        field: t.error_name(),
                        reason,
                    })?;
            }
        }
        if let Some(e) = &self.extent {
            if !e.origin.is_finite() {
                return Err(bad("extent.origin", "must be finite".into()));
            }
            if e.width == 0 || e.height == 0 {
                return Err(bad(
                    "extent",
                    format!(
                        "width and height must be at least 1 cell (got {} x {})",
                        e.width, e.height
                    ),
                ));
            }
        }
        for r in &self.exclude.frames {
            if r.start() > r.end() {
                return Err(bad(
                    "exclude.frames",
                    format!("range {}..={} is empty", r.start(), r.end()),
                ));
            }
        }
        Ok(())
    }

    /// The model used for the sensor with this id.
    pub fn model_for(&self, sensor_id: &str) -> &ModelSpec {
        self.models.get(sensor_id).unwrap_or(&self.default_model)
    }

    /// The profile as RON text, without struct names, readable by [`Params::from_ron_str`].
    pub fn to_ron_string(&self) -> String {
        let cfg = ron::ser::PrettyConfig::new()
            .struct_names(false)
            .new_line("\n".to_string())
            .indentor("    ".to_string());
        ron::ser::to_string_pretty(self, cfg).expect("a profile always serialises")
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const EXAMPLE: &str = r#"(
        format: 1,
        resolution: 0.05,
        prior: 0.5,
        clamp: (min: -2.4, max: 3.2),
        fusion: EveryBeam,
        no_return: Clear,
        default_model: Gaussian(sigma: 0.05, p_occ: 0.8, p_free: 0.35, cutoff: 3.0),
        models: { "sonar_ring": Band(thickness: 0.10, p_occ: 0.68, p_free: 0.38) },
        extent: None,
    )"#;

    #[test]
    fn contract_example_loads_and_round_trips() {
        let p = Params::from_ron_str(EXAMPLE, "ex").unwrap();
        assert_eq!(
            p.model_for("sonar_ring"),
            &ModelSpec::Band {
                thickness: 0.10,
                p_occ: 0.68,
                p_free: 0.38
            }
        );
        assert_eq!(p.model_for("front"), &p.default_model);
        let back = Params::from_ron_str(&p.to_ron_string(), "again").unwrap();
        assert_eq!(back, p);
        let fixed = EXAMPLE.replace(
            "extent: None",
            "extent: Some((origin: (x: -5.0, y: -5.0), width: 400, height: 300))",
        );
        let p = Params::from_ron_str(&fixed, "fixed").unwrap();
        assert_eq!(p.extent.unwrap().width, 400);
        assert_eq!(Params::from_ron_str(&p.to_ron_string(), "x").unwrap(), p);
    }

    #[test]
    fn each_rule_names_its_field() {
        let cases = [
            ("resolution: 0.05", "resolution: 0.0", "resolution"),
            ("prior: 0.5", "prior: 1.0", "prior"),
            ("min: -2.4", "min: 0.5", "clamp.min"),
            ("max: 3.2", "max: -1.0", "clamp.max"),
            ("sigma: 0.05", "sigma: -0.05", "default_model.sigma"),
            ("p_occ: 0.8", "p_occ: 0.4", "default_model.p_occ"),
            ("p_free: 0.35", "p_free: 0.6", "default_model.p_free"),
            ("cutoff: 3.0", "cutoff: -1.0", "default_model.cutoff"),
            (
                "thickness: 0.10",
                "thickness: 0.0",
                "models[\"sonar_ring\"].thickness",
            ),
            ("p_occ: 0.68", "p_occ: 1.0", "models[\"sonar_ring\"].p_occ"),
        ];
        for (from, to, field) in cases {
            let text = EXAMPLE.replacen(from, to, 1);
            let err = Params::from_ron_str(&text, "p.params.ron").expect_err(to);
            match &err.problem {
                Problem::BadField { field: f, .. } => assert_eq!(f, field, "{to}"),
                p => panic!("{to}: {p:?}"),
            }
            assert!(err.to_string().contains(field), "{err}");
        }
    }

    #[test]
    fn typos_and_unknown_formats_are_refused() {
        let typo = EXAMPLE.replace("prior:", "priro:");
        assert!(matches!(
            Params::from_ron_str(&typo, "p").unwrap_err().problem,
            Problem::Syntax { .. }
        ));
        let v2 = EXAMPLE.replace("format: 1", "format: 2");
        assert!(matches!(
            Params::from_ron_str(&v2, "p").unwrap_err().problem,
            Problem::UnknownFormat { found: 2 }
        ));
    }

    mod round_trip {
        use super::super::*;
        use proptest::prelude::*;

        fn model() -> impl Strategy<Value = ModelSpec> {
            prop_oneof![
                (0.001f64..0.3, 0.501f64..0.999, 0.001f64..0.499, 0.0f64..6.0).prop_map(
                    |(sigma, p_occ, p_free, cutoff)| ModelSpec::Gaussian {
                        sigma,
                        p_occ,
                        p_free,
                        cutoff
                    }
                ),
                (0.01f64..1.0, 0.501f64..0.999, 0.001f64..0.499).prop_map(
                    |(thickness, p_occ, p_free)| ModelSpec::Band {
                        thickness,
                        p_occ,
                        p_free
                    }
                ),
            ]
        }

        fn profile() -> impl Strategy<Value = Params> {
            (
                (0.01f64..0.5, 0.01f64..0.99, -20.0f64..-0.01, 0.01f64..60.0),
                (
                    any::<bool>(),
                    any::<bool>(),
                    model(),
                    proptest::option::of(model()),
                ),
                proptest::option::of((-100.0f64..100.0, 1u32..5000, 1u32..5000)),
                (
                    proptest::collection::vec((0usize..500, 0usize..50), 0..3),
                    -0.3f64..0.3,
                ),
            )
                .prop_map(
                    |((res, prior, lo, hi), (once, ignore, m, own), extent, (frames, dx))| {
                        let mut p = Params {
                            resolution: res,
                            prior,
                            clamp: Clamp { min: lo, max: hi },
                            fusion: if once {
                                FusionRule::OncePerCell
                            } else {
                                FusionRule::EveryBeam
                            },
                            no_return: if ignore {
                                NoReturnRule::Ignore
                            } else {
                                NoReturnRule::Clear
                            },
                            default_model: m,
                            ..Params::default()
                        };
                        if let Some(own) = own {
                            p.models.insert("sonar ring".into(), own);
                        }
                        p.extent = extent.map(|(o, w, h)| Extent {
                            origin: Point2::new(o, -o / 3.0),
                            width: w,
                            height: h,
                        });
                        p.exclude.frames = frames.into_iter().map(|(a, n)| a..=a + n).collect();
                        if dx != 0.0 {
                            p.calibration.insert(
                                "front".into(),
                                SensorCorrection {
                                    mount_x: dx,
                                    time_offset: dx / 10.0,
                                    ..Default::default()
                                },
                            );
                        }
                        p
                    },
                )
        }

        proptest! {
            #![proptest_config(ProptestConfig { cases: 200, failure_persistence: None, ..ProptestConfig::default() })]

            /// A valid profile written as text reads back equal.
            #[test]
            fn written_profiles_read_back_the_same(p in profile()) {
                prop_assert!(p.validate().is_ok());
                let back = Params::from_ron_str(&p.to_ron_string(), "again").unwrap();
                prop_assert_eq!(back, p);
            }
        }
    }
}
