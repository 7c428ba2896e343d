//! gridscope: build, replay and inspect 2D occupancy grid maps from posed range scans.
//!
//! The core reads in one sitting, in the order data flows: a [`session`] of posed scans, the
//! [`footprint`] of each beam on the [`grid`], the inverse sensor [`model`] that turns a
//! reading into log-odds increments, the [`fusion`] that adds them up with clamping, and the
//! [`export`] of the finished map; [`replay`] seeks within a run. [`sim`] makes sessions from floor plans of our own, and
//! [`commands`] holds the batch commands of the command line. Only [`app`] knows about the
//! window; nothing else imports egui.
pub mod app;
pub mod bench;
pub mod commands;
pub mod demo;
pub mod error;
pub mod export;
pub mod footprint;
pub mod fusion;
pub mod geometry;
pub mod grid;
pub(crate) mod io;
pub mod limits;
pub mod logodds;
pub mod model;
pub mod params;
pub mod replay;
pub mod rule;
pub mod score;
pub mod session;
pub mod sim;
pub mod sweep;

pub use error::{Error, InputError, Problem};
pub use export::{Provenance, SAFETY_NOTICE, load_bundle, write_bundle};
pub use fusion::{CellUpdate, MapBuilder, Touch, TouchRecord};
pub use geometry::{Point2, Pose2};
pub use grid::{CellIndex, Grid, GridSpec};
pub use logodds::{Clamp, logit, probability};
pub use params::{FusionRule, ModelSpec, NoReturnRule, Params};
pub use session::{BeamRef, Reading, SensorKind, Session};
