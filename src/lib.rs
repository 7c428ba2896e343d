//! gridscope: build, replay and inspect 2D occupancy grid maps from posed range scans.
//!
//! The core reads in one sitting, in the order data flows: a [`session`] of posed scans, the
//! footprint of each beam on the [`grid`] (exact traversal for narrow beams, sectors for wide
//! ones), the inverse sensor model that turns a reading into log-odds increments, the fusion
//! ([`MapBuilder`]) that adds them up through the one cell rule ([`CellBounds`]), and the
//! [`export`] of the finished map. [`replay`] seeks within a run, [`score`] measures a map
//! against a reference, [`sweep`] tries parameter settings, [`sim`] makes sessions from floor
//! plans of our own, and [`commands`] is the command line. Only [`app`] knows about the window;
//! nothing else imports egui.
//!
//! ```no_run
//! use gridscope::{MapBuilder, Params, Session};
//! use std::sync::Arc;
//!
//! let session = Arc::new(Session::load("run.session.ron".as_ref())?);
//! let params = Params::load("run.params.ron".as_ref())?;
//! let builder = MapBuilder::new(session.clone(), params)?;
//! let grid = builder.build(session.frames.len());
//! println!("{} x {} cells", grid.spec().width, grid.spec().height);
//! # Ok::<(), gridscope::Error>(())
//! ```
#![warn(missing_docs)]

pub mod align;
pub mod app;
pub(crate) mod bench;
pub mod commands;
pub mod demo;
pub mod diagnose;
mod error;
pub mod export;
pub(crate) mod footprint;
pub(crate) mod fusion;
mod geometry;
pub mod grid;
pub(crate) mod io;
pub mod limits;
mod logodds;
pub(crate) mod model;
pub mod params;
pub mod replay;
pub(crate) mod rule;
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
pub use rule::CellBounds;
pub use session::{BeamRef, Reading, SensorKind, Session};
