//! The tunable numbers of a parameter profile, in one table: each with its dotted path, unit,
//! domain, help text and slider range, and how to read and write it.
//!
//! Design decision: validation, the sweep, the tuning panel, the A/B comparison and sensor
//! calibration all go through this table, so a new model field is added here and in the model
//! (`crate::model`) and nowhere else. Paths are what the command line takes:
//! `resolution`, `prior`, `clamp.min`, `clamp.max`, `default_model.FIELD`,
//! `models.SENSOR.FIELD` and `calibration.SENSOR.FIELD`.

use super::{ModelSpec, Params, SensorCorrection};

/// What a tunable is measured in.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Unit {
    /// Metres.
    Metres,
    /// A probability, no unit.
    Probability,
    /// Log-odds, no unit.
    LogOdds,
    /// Radians.
    Radians,
    /// Seconds.
    Seconds,
    /// Multiples of the model's sigma.
    Sigmas,
}

impl Unit {
    /// The unit as written after a value ("" for pure numbers).
    pub fn suffix(self) -> &'static str {
        match self {
            Unit::Metres => "m",
            Unit::Radians => "rad",
            Unit::Seconds => "s",
            Unit::Sigmas => "sigma",
            Unit::Probability | Unit::LogOdds => "",
        }
    }
}

/// Which values a tunable accepts.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Domain {
    /// Finite and > 0.
    Positive,
    /// Finite and >= 0.
    NonNegative,
    /// Finite and < 0 (a lower clamp bound, log-odds).
    Negative,
    /// Strictly between 0 and 1.
    OpenUnit,
    /// Strictly between 0.5 and 1 (an occupied probability).
    AboveHalf,
    /// Strictly between 0 and 0.5 (a free probability).
    BelowHalf,
    /// Any finite number.
    Finite,
}

impl Domain {
    /// Why `v` is outside the domain, if it is.
    pub fn check(self, v: f64, unit: Unit) -> Result<(), String> {
        let open_unit = |v: f64| {
            (v > 0.0 && v < 1.0)
                .then_some(())
                .ok_or(format!("must lie strictly between 0 and 1 (got {v})"))
        };
        let fails = |ok: bool, what: &str| {
            if ok {
                Ok(())
            } else {
                Err(format!("{what} (got {v})"))
            }
        };
        match (self, unit) {
            (Domain::Positive, Unit::LogOdds) => {
                fails(v.is_finite() && v > 0.0, "must be a log-odds value > 0")
            }
            (Domain::Positive, Unit::Metres) => {
                fails(v.is_finite() && v > 0.0, "must be > 0 metres")
            }
            (Domain::Positive, _) => fails(v.is_finite() && v > 0.0, "must be > 0"),
            (Domain::NonNegative, _) => fails(v.is_finite() && v >= 0.0, "must be >= 0"),
            (Domain::Negative, _) => {
                fails(v.is_finite() && v < 0.0, "must be a log-odds value < 0")
            }
            (Domain::OpenUnit, _) => open_unit(v),
            (Domain::AboveHalf, _) => open_unit(v).and_then(|()| fails(v > 0.5, "must be > 0.5")),
            (Domain::BelowHalf, _) => open_unit(v).and_then(|()| fails(v < 0.5, "must be < 0.5")),
            (Domain::Finite, _) => fails(v.is_finite(), "must be finite"),
        }
    }
}

/// What a tunable is, apart from where it sits in a profile.
#[derive(Clone, Copy, Debug)]
pub struct Field<T> {
    /// Its name within its group (`sigma`, `max`, `mount_x`).
    pub name: &'static str,
    /// Its unit.
    pub unit: Unit,
    /// Its domain.
    pub domain: Domain,
    /// One or two sentences for a tooltip.
    pub help: &'static str,
    /// A slider's range (values outside it may still be typed).
    pub slider: (f64, f64),
    /// Whether the slider is logarithmic.
    pub log: bool,
    /// Reads the value (`None` when the holder has no such field, e.g. `sigma` of a band).
    pub get: fn(&T) -> Option<f64>,
    /// Writes the value; false when the holder has no such field.
    pub set: fn(&mut T, f64) -> bool,
}

macro_rules! field {
    ($t:ty, $name:literal, $unit:ident, $domain:ident, $lo:expr, $hi:expr, $log:expr, $help:literal,
     |$v:ident| $get:expr, |$w:ident, $x:ident| $set:expr) => {
        Field::<$t> {
            name: $name,
            unit: Unit::$unit,
            domain: Domain::$domain,
            help: $help,
            slider: ($lo, $hi),
            log: $log,
            get: |$v: &$t| $get,
            set: |$w: &mut $t, $x: f64| $set,
        }
    };
}

/// The profile's own numbers.
pub const PROFILE_FIELDS: &[Field<Params>] = &[
    field!(
        Params,
        "resolution",
        Metres,
        Positive,
        0.01,
        0.5,
        true,
        "Cell side in metres. Must be > 0. Finer cells cost memory and time.",
        |p| Some(p.resolution),
        |p, x| {
            p.resolution = x;
            true
        }
    ),
    field!(
        Params,
        "prior",
        Probability,
        OpenUnit,
        0.01,
        0.99,
        false,
        "Initial probability of every cell, in (0, 1). It only sets the starting value; it is not subtracted from updates.",
        |p| Some(p.prior),
        |p, x| {
            p.prior = x;
            true
        }
    ),
    field!(
        Params,
        "clamp.min",
        LogOdds,
        Negative,
        -20.0,
        -0.01,
        false,
        "Lower bound of a cell's log-odds; must be < 0. Closer to 0 lets a free cell turn occupied with fewer readings.",
        |p| Some(p.clamp.min),
        |p, x| {
            p.clamp.min = x;
            true
        }
    ),
    field!(
        Params,
        "clamp.max",
        LogOdds,
        Positive,
        0.01,
        60.0,
        false,
        "Upper bound of a cell's log-odds; must be > 0. Closer to 0 lets an occupied cell turn free with fewer readings (doors, moved pallets).",
        |p| Some(p.clamp.max),
        |p, x| {
            p.clamp.max = x;
            true
        }
    ),
];

/// The fields of an inverse model, for every kind (each field reads `None` on the kinds that
/// lack it). A new model field goes here and into the model's formula.
pub const MODEL_FIELDS: &[Field<ModelSpec>] = &[
    field!(
        ModelSpec,
        "p_occ",
        Probability,
        AboveHalf,
        0.5,
        0.999,
        false,
        "Probability of occupancy at the reading itself (Gaussian: at the peak; Band: inside the band). Must lie in (0.5, 1).",
        |m| Some(m.p_occ()),
        |m, x| {
            match m {
                ModelSpec::Gaussian { p_occ, .. } | ModelSpec::Band { p_occ, .. } => *p_occ = x,
            }
            true
        }
    ),
    field!(
        ModelSpec,
        "p_free",
        Probability,
        BelowHalf,
        0.001,
        0.5,
        false,
        "Probability of occupancy in front of the reading (free space). Must lie in (0, 0.5).",
        |m| Some(m.p_free()),
        |m, x| {
            match m {
                ModelSpec::Gaussian { p_free, .. } | ModelSpec::Band { p_free, .. } => *p_free = x,
            }
            true
        }
    ),
    field!(
        ModelSpec,
        "sigma",
        Metres,
        Positive,
        0.005,
        0.5,
        true,
        "Width of the occupied peak around the reading, metres. Must be > 0.",
        |m| match m {
            ModelSpec::Gaussian { sigma, .. } => Some(*sigma),
            _ => None,
        },
        |m, x| match m {
            ModelSpec::Gaussian { sigma, .. } => {
                *sigma = x;
                true
            }
            _ => false,
        }
    ),
    field!(
        ModelSpec,
        "cutoff",
        Sigmas,
        NonNegative,
        0.0,
        6.0,
        false,
        "How far past the reading the beam still touches cells, in multiples of sigma. Must be >= 0.",
        |m| match m {
            ModelSpec::Gaussian { cutoff, .. } => Some(*cutoff),
            _ => None,
        },
        |m, x| match m {
            ModelSpec::Gaussian { cutoff, .. } => {
                *cutoff = x;
                true
            }
            _ => false,
        }
    ),
    field!(
        ModelSpec,
        "thickness",
        Metres,
        Positive,
        0.01,
        1.0,
        true,
        "Full thickness of the occupied band centred on the reading, metres. Must be > 0.",
        |m| match m {
            ModelSpec::Band { thickness, .. } => Some(*thickness),
            _ => None,
        },
        |m, x| match m {
            ModelSpec::Band { thickness, .. } => {
                *thickness = x;
                true
            }
            _ => false,
        }
    ),
];

/// The corrections of one sensor's mount and clock.
pub const CALIBRATION_FIELDS: &[Field<SensorCorrection>] = &[
    field!(
        SensorCorrection,
        "mount_x",
        Metres,
        Finite,
        -0.5,
        0.5,
        false,
        "Correction to the sensor's mount, forward (robot x), metres, added to the session's mount.",
        |c| Some(c.mount_x),
        |c, x| {
            c.mount_x = x;
            true
        }
    ),
    field!(
        SensorCorrection,
        "mount_y",
        Metres,
        Finite,
        -0.5,
        0.5,
        false,
        "Correction to the sensor's mount, left (robot y), metres, added to the session's mount.",
        |c| Some(c.mount_y),
        |c, x| {
            c.mount_y = x;
            true
        }
    ),
    field!(
        SensorCorrection,
        "mount_theta",
        Radians,
        Finite,
        -0.2,
        0.2,
        false,
        "Correction to the sensor's mount heading, radians counter-clockwise, added to the session's mount.",
        |c| Some(c.mount_theta),
        |c, x| {
            c.mount_theta = x;
            true
        }
    ),
    field!(
        SensorCorrection,
        "time_offset",
        Seconds,
        Finite,
        -0.5,
        0.5,
        false,
        "Clock offset: a scan stamped t was taken at pose time t + offset, seconds. The pose is interpolated between frames.",
        |c| Some(c.time_offset),
        |c, x| {
            c.time_offset = x;
            true
        }
    ),
];

/// Where a tunable sits in a profile.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Place {
    /// A number of the profile itself.
    Profile,
    /// A field of the default model.
    DefaultModel,
    /// A field of one sensor's own model.
    Model(String),
    /// A correction of one sensor.
    Calibration(String),
}

/// One tunable number of a profile: where it sits and what it is.
#[derive(Clone, Debug)]
pub enum Tunable {
    /// A number of the profile itself.
    Profile(&'static Field<Params>),
    /// A model field, of the default model (`None`) or of a sensor's own model.
    Model(Option<String>, &'static Field<ModelSpec>),
    /// A sensor's correction.
    Calibration(String, &'static Field<SensorCorrection>),
}

impl Tunable {
    /// The dotted path, as the command line takes it.
    pub fn path(&self) -> String {
        match self {
            Tunable::Profile(f) => f.name.to_string(),
            Tunable::Model(None, f) => format!("default_model.{}", f.name),
            Tunable::Model(Some(id), f) => format!("models.{id}.{}", f.name),
            Tunable::Calibration(id, f) => format!("calibration.{id}.{}", f.name),
        }
    }

    /// The field's own name.
    pub fn name(&self) -> &'static str {
        self.parts().0
    }

    /// How errors name the field (`models["ID"].FIELD` for per-sensor entries).
    pub fn error_name(&self) -> String {
        match self {
            Tunable::Model(Some(id), f) => format!("models[{id:?}].{}", f.name),
            Tunable::Calibration(id, f) => format!("calibration[{id:?}].{}", f.name),
            _ => self.path(),
        }
    }

    /// Name, unit, domain, help, slider range and whether the slider is logarithmic.
    fn parts(&self) -> (&'static str, Unit, Domain, &'static str, (f64, f64), bool) {
        macro_rules! of {
            ($f:expr) => {
                ($f.name, $f.unit, $f.domain, $f.help, $f.slider, $f.log)
            };
        }
        match self {
            Tunable::Profile(f) => of!(f),
            Tunable::Model(_, f) => of!(f),
            Tunable::Calibration(_, f) => of!(f),
        }
    }

    /// The unit.
    pub fn unit(&self) -> Unit {
        self.parts().1
    }

    /// The domain.
    pub fn domain(&self) -> Domain {
        self.parts().2
    }

    /// Tooltip text.
    pub fn help(&self) -> &'static str {
        self.parts().3
    }

    /// A slider's range and whether it is logarithmic.
    pub fn slider(&self) -> ((f64, f64), bool) {
        let p = self.parts();
        (p.4, p.5)
    }

    /// The value in `p`, if `p` has this field.
    pub fn get(&self, p: &Params) -> Option<f64> {
        match self {
            Tunable::Profile(f) => (f.get)(p),
            Tunable::Model(None, f) => (f.get)(&p.default_model),
            Tunable::Model(Some(id), f) => (f.get)(p.models.get(id)?),
            Tunable::Calibration(id, f) => {
                (f.get)(&p.calibration.get(id).copied().unwrap_or_default())
            }
        }
    }

    /// Sets the value in `p`. A sensor without its own model gets a copy of the default model
    /// first, and one without corrections gets zero corrections. Refuses a field the model's
    /// kind does not have. The value's domain is checked by [`Params::validate`], not here.
    pub fn set(&self, p: &mut Params, v: f64) -> Result<(), String> {
        let ok = match self {
            Tunable::Profile(f) => (f.set)(p, v),
            Tunable::Model(None, f) => (f.set)(&mut p.default_model, v),
            Tunable::Model(Some(id), f) => {
                let default = p.default_model;
                (f.set)(p.models.entry(id.clone()).or_insert(default), v)
            }
            Tunable::Calibration(id, f) => (f.set)(p.calibration.entry(id.clone()).or_default(), v),
        };
        if ok {
            Ok(())
        } else {
            Err(format!("the model has no parameter {:?}", self.name()))
        }
    }
}

/// Every tunable number `p` has now, in the order validation checks them: the profile's own,
/// the default model's, each sensor model's, each sensor's corrections.
pub fn tunables(p: &Params) -> Vec<Tunable> {
    let has = |m: &ModelSpec, f: &Field<ModelSpec>| (f.get)(m).is_some();
    let mut out: Vec<Tunable> = PROFILE_FIELDS.iter().map(Tunable::Profile).collect();
    out.extend(
        MODEL_FIELDS
            .iter()
            .filter(|f| has(&p.default_model, f))
            .map(|f| Tunable::Model(None, f)),
    );
    for (id, m) in &p.models {
        out.extend(
            MODEL_FIELDS
                .iter()
                .filter(|f| has(m, f))
                .map(|f| Tunable::Model(Some(id.clone()), f)),
        );
    }
    for id in p.calibration.keys() {
        out.extend(
            CALIBRATION_FIELDS
                .iter()
                .map(|f| Tunable::Calibration(id.clone(), f)),
        );
    }
    out
}

/// The tunable at a dotted path. A sensor id may itself contain dots: everything between the
/// group and the last dot is the id. `p` decides whether a model field exists for its kind
/// (a sensor without its own model is judged by the default model).
pub fn find(p: &Params, path: &str) -> Result<Tunable, String> {
    let unknown = || {
        format!(
            "unknown parameter {path:?}; use resolution, prior, clamp.min, clamp.max, \
             default_model.FIELD, models.SENSOR.FIELD (FIELD: {}) or calibration.SENSOR.FIELD \
             (FIELD: {})",
            names(MODEL_FIELDS),
            names(CALIBRATION_FIELDS)
        )
    };
    if let Some(f) = PROFILE_FIELDS.iter().find(|f| f.name == path) {
        return Ok(Tunable::Profile(f));
    }
    let (group, rest) = path.split_once('.').ok_or_else(unknown)?;
    let (id, leaf) = match group {
        "default_model" => ("", rest),
        _ => rest.rsplit_once('.').ok_or_else(unknown)?,
    };
    match group {
        "default_model" | "models" => {
            let f = MODEL_FIELDS
                .iter()
                .find(|f| f.name == leaf)
                .ok_or_else(unknown)?;
            let model = if group == "models" {
                p.models.get(id).unwrap_or(&p.default_model)
            } else {
                &p.default_model
            };
            if (f.get)(model).is_none() {
                return Err(format!(
                    "a {} model has no parameter {leaf:?}",
                    model.kind_name()
                ));
            }
            Ok(Tunable::Model(
                (group == "models").then(|| id.to_string()),
                f,
            ))
        }
        "calibration" => {
            let f = CALIBRATION_FIELDS
                .iter()
                .find(|f| f.name == leaf)
                .ok_or_else(unknown)?;
            Ok(Tunable::Calibration(id.to_string(), f))
        }
        _ => Err(unknown()),
    }
}

fn names<T>(fields: &[Field<T>]) -> String {
    fields.iter().map(|f| f.name).collect::<Vec<_>>().join(", ")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn paths_find_their_fields_and_set_values() {
        let mut p = Params::default();
        for t in tunables(&p) {
            let path = t.path();
            let again = find(&p, &path).unwrap();
            assert_eq!(again.path(), path);
            assert_eq!(again.get(&p), t.get(&p), "{path}");
        }
        find(&p, "models.ring.p_free")
            .unwrap()
            .set(&mut p, 0.3)
            .unwrap();
        assert_eq!(p.models["ring"].p_free(), 0.3);
        assert_eq!(
            p.default_model.p_free(),
            Params::default().default_model.p_free()
        );
        // A sensor id with dots in it.
        let t = find(&p, "calibration.lidar.front.mount_theta").unwrap();
        t.set(&mut p, 0.01).unwrap();
        assert_eq!(p.calibration["lidar.front"].mount_theta, 0.01);
        assert!(
            find(&p, "default_model.thickness")
                .unwrap_err()
                .contains("Gaussian")
        );
        assert!(
            find(&p, "clamp.mx")
                .unwrap_err()
                .contains("unknown parameter")
        );
        assert!(find(&p, "models.ring").is_err());
    }

    #[test]
    fn domains_say_why() {
        assert!(
            Domain::Positive
                .check(0.0, Unit::Metres)
                .unwrap_err()
                .contains("metres")
        );
        assert!(
            Domain::AboveHalf
                .check(0.4, Unit::Probability)
                .unwrap_err()
                .contains("> 0.5")
        );
        assert!(
            Domain::AboveHalf
                .check(1.0, Unit::Probability)
                .unwrap_err()
                .contains("strictly")
        );
        assert!(
            Domain::BelowHalf
                .check(f64::NAN, Unit::Probability)
                .is_err()
        );
        assert!(Domain::Negative.check(-0.1, Unit::LogOdds).is_ok());
        assert!(Domain::Finite.check(f64::INFINITY, Unit::Seconds).is_err());
    }
}
