//! The demo sessions compiled into the binary: four runs through our Kestrel Yard building,
//! each with its floor plan, a suggested parameter profile and the plan's reference map.
//!
//! They are the files under `sample-sessions/`, embedded as text and bytes so that
//! `gridscope` with no arguments opens a real session on any machine.

use crate::error::{Error, InputError, Problem};
use crate::export::bundle_from_parts;
use crate::grid::DEFAULT_CELL_BUDGET;
use crate::grid::Grid;
use crate::params::Params;
use crate::session::Session;
use crate::sim::FloorPlan;

/// One embedded demo.
#[derive(Clone, Copy, Debug)]
pub struct Demo {
    /// Short name used as `demo:NAME` on the command line.
    pub name: &'static str,
    /// One line saying what the run shows.
    pub about: &'static str,
    /// The session, RON text.
    pub session: &'static str,
    /// The suggested parameter profile, RON text.
    pub params: &'static str,
    /// The floor plan the session was simulated from, RON text.
    pub plan: &'static str,
    /// The reference bundle's `.map.ron`.
    pub reference_meta: &'static str,
    /// The reference bundle's `.npy`.
    pub reference_npy: &'static [u8],
}

macro_rules! demo {
    ($name:literal, $about:literal) => {
        Demo {
            name: $name,
            about: $about,
            session: include_str!(concat!("../sample-sessions/", $name, ".session.ron")),
            params: include_str!(concat!("../sample-sessions/", $name, ".params.ron")),
            plan: include_str!(concat!("../sample-sessions/", $name, ".plan.ron")),
            reference_meta: include_str!(concat!(
                "../sample-sessions/",
                $name,
                ".reference.map.ron"
            )),
            reference_npy: include_bytes!(concat!("../sample-sessions/", $name, ".reference.npy")),
        }
    };
}

/// All demos; the first opens when the window starts without a file.
pub const DEMOS: &[Demo] = &[
    demo!(
        "door-cycle",
        "laser laps of the workshop while door D1 shuts for 30 s and opens again"
    ),
    demo!(
        "sonar-ring",
        "a ring of twelve wide-beam ultrasonic rangers touring the whole building"
    ),
    demo!(
        "glass-pass",
        "laser and bumper sonars beside a glass partition the laser mostly passes"
    ),
    demo!(
        "pose-slip",
        "a laser tour with a 5 s localizer slip, a 2-degree mount error and a 40 ms clock lag"
    ),
];

/// The demo with this name.
pub fn find(name: &str) -> Result<&'static Demo, InputError> {
    DEMOS.iter().find(|d| d.name == name).ok_or_else(|| {
        let names: Vec<&str> = DEMOS.iter().map(|d| d.name).collect();
        InputError::new(
            format!("demo:{name}"),
            Problem::Malformed(format!("no such demo; there are {}", names.join(", "))),
        )
    })
}

/// The demo's session.
pub fn session(name: &str) -> Result<Session, InputError> {
    let d = find(name)?;
    Session::from_ron_str(d.session, &format!("demo:{name}"))
}

/// The demo's suggested parameter profile.
pub fn params(name: &str) -> Result<Params, InputError> {
    let d = find(name)?;
    Params::from_ron_str(d.params, &format!("demo:{name}.params"))
}

/// The demo's floor plan.
pub fn plan(name: &str) -> Result<FloorPlan, InputError> {
    let d = find(name)?;
    FloorPlan::from_ron_str(d.plan, &format!("demo:{name}.plan"))
}

/// The demo's reference map (log-odds, south row first).
pub fn reference(name: &str) -> Result<Grid, Error> {
    let d = find(name)?;
    let label = format!("demo:{name}.reference");
    bundle_from_parts(
        d.reference_meta,
        &label,
        d.reference_npy,
        &label,
        DEFAULT_CELL_BUDGET,
    )
}
