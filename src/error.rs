//! Typed errors of the core, each naming the file and the place a person has to fix.
//!
//! The split that matters to callers: an [`InputError`] means an input was refused (the
//! command line exits with status 2, the window keeps what it had loaded); everything in
//! [`Error::Write`] is a failure of this machine (status 1).

use std::path::{Path, PathBuf};
use thiserror::Error;

/// An input file (session, parameter profile, floor plan, map bundle) that was refused.
#[derive(Debug, Error)]
#[error("{file}: {problem}")]
pub struct InputError {
    /// The file as the user named it (or a label such as `<demo door-cycle>`).
    pub file: String,
    /// What is wrong, and where inside the file.
    pub problem: Problem,
}

impl InputError {
    /// An error about `file`.
    pub fn new(file: impl Into<String>, problem: Problem) -> Self {
        Self {
            file: file.into(),
            problem,
        }
    }

    /// An error about the file at `path`.
    pub fn at(path: &Path, problem: Problem) -> Self {
        Self::new(path.display().to_string(), problem)
    }
}

/// What is wrong with an input, and where.
#[derive(Debug, Error)]
pub enum Problem {
    /// The file could not be read at all.
    #[error("cannot read: {0}")]
    Read(std::io::Error),
    /// RON syntax or structure error at a line and column (both 1-based).
    #[error("line {line}, column {col}: {message}")]
    Syntax {
        /// 1-based line.
        line: usize,
        /// 1-based column.
        col: usize,
        /// What the parser expected.
        message: String,
    },
    /// The `format` field names a version this build does not read.
    #[error("format {found} is not understood (this gridscope reads format 1)")]
    UnknownFormat {
        /// The version found in the file.
        found: i64,
    },
    /// Two sensors share an id.
    #[error("sensor \"{id}\" is declared twice")]
    DuplicateSensor {
        /// The repeated id.
        id: String,
    },
    /// A sensor definition breaks a rule.
    #[error("sensor \"{sensor}\", field `{field}`: {reason}")]
    BadSensor {
        /// Sensor id.
        sensor: String,
        /// Field name inside the sensor.
        field: &'static str,
        /// Why it is refused.
        reason: String,
    },
    /// A scan names a sensor that is not declared.
    #[error("frame {frame}: unknown sensor \"{sensor}\"")]
    UnknownSensor {
        /// 0-based frame index.
        frame: usize,
        /// The unknown id.
        sensor: String,
    },
    /// A scan has the wrong number of ranges.
    #[error(
        "frame {frame}, sensor \"{sensor}\": {found} ranges, but the sensor has {expected} beams"
    )]
    WrongRangeCount {
        /// 0-based frame index.
        frame: usize,
        /// Sensor id.
        sensor: String,
        /// Beams of the sensor.
        expected: usize,
        /// Ranges found.
        found: usize,
    },
    /// One frame holds two scans of one sensor.
    #[error("frame {frame}: sensor \"{sensor}\" is scanned twice in one frame")]
    DuplicateScan {
        /// 0-based frame index.
        frame: usize,
        /// Sensor id.
        sensor: String,
    },
    /// A frame's pose or time is not a finite number.
    #[error("frame {frame}: {what} is not a finite number")]
    NotFinite {
        /// 0-based frame index.
        frame: usize,
        /// `pose` or `t`.
        what: &'static str,
    },
    /// Frame times go backwards.
    #[error("frame {frame}: time {t} s is earlier than the previous frame's {previous} s")]
    TimeDecreasing {
        /// 0-based frame index.
        frame: usize,
        /// This frame's time, seconds.
        t: f64,
        /// The previous frame's time, seconds.
        previous: f64,
    },
    /// A field of a parameter profile, plan or map bundle breaks a rule.
    #[error("field `{field}`: {reason}")]
    BadField {
        /// Dotted path of the field, e.g. `clamp.min` or `models["sonar"].p_occ`.
        field: String,
        /// Why it is refused.
        reason: String,
    },
    /// A binary companion file (NumPy array, image) is malformed.
    #[error("{0}")]
    Malformed(String),
    /// Something in the input is larger than gridscope reads.
    #[error("{what} is {size} bytes, over the limit of {limit}")]
    TooLarge {
        /// What is too large.
        what: &'static str,
        /// Its size, bytes.
        size: u64,
        /// The limit, bytes.
        limit: u64,
    },
}

/// Any failure of the core.
#[derive(Debug, Error)]
pub enum Error {
    /// An input was refused (command-line exit status 2).
    #[error(transparent)]
    Input(#[from] InputError),
    /// The requested grid is larger than the cell budget (exit status 2: the input asks for it).
    #[error(
        "{}the map would be {} x {} = {} cells, over the budget of {budget} cells; \
         raise the budget, coarsen the resolution or fix a smaller extent in the parameters",
        source_label(input),
        count(*width),
        count(*height),
        count(*cells)
    )]
    OverBudget {
        /// The input whose beams or metadata ask for the grid, when known.
        input: Option<String>,
        /// Columns requested.
        width: f64,
        /// Rows requested.
        height: f64,
        /// width * height.
        cells: f64,
        /// The budget, cells.
        budget: u64,
    },
    /// Writing an output failed (exit status 1).
    #[error("cannot write {}: {source}", file.display())]
    Write {
        /// The file being written.
        file: PathBuf,
        /// The underlying failure.
        source: std::io::Error,
    },
    /// The requested grid needs more memory than this machine has (exit status 2).
    #[error(
        "{}the map would need {:.1} GB for its cells, more than this machine's {:.1} GB; \
         coarsen the resolution or fix a smaller extent in the parameters",
        source_label(input),
        *bytes / 1e9,
        *memory as f64 / 1e9
    )]
    OverMemory {
        /// The input whose beams or metadata ask for the grid, when known.
        input: Option<String>,
        /// Bytes the grid's cells need (a float, so absurd sizes cannot overflow).
        bytes: f64,
        /// Physical memory of this machine, bytes.
        memory: u64,
    },
    /// The window could not be opened (no display, no OpenGL).
    #[error("the window could not open: {0}")]
    Window(String),
    /// Something else failed on this machine (exit status 1).
    #[error("{0}")]
    Failed(String),
    /// The work was cancelled by a newer request.
    #[error("cancelled")]
    Cancelled,
}

fn source_label(input: &Option<String>) -> String {
    input.as_ref().map(|i| format!("{i}: ")).unwrap_or_default()
}

/// A cell count as an integer when it is one of sensible size, else in scientific notation.
fn count(v: f64) -> String {
    if v.is_finite() && v.abs() < 1e15 {
        format!("{}", v as i64)
    } else {
        format!("{v:.3e}")
    }
}

impl Error {
    /// Names the input an over-budget grid came from (other errors pass unchanged).
    pub fn for_input(self, label: &str) -> Error {
        match self {
            Error::OverMemory { bytes, memory, .. } => Error::OverMemory {
                input: Some(label.to_string()),
                bytes,
                memory,
            },
            Error::OverBudget {
                width,
                height,
                cells,
                budget,
                ..
            } => Error::OverBudget {
                input: Some(label.to_string()),
                width,
                height,
                cells,
                budget,
            },
            other => other,
        }
    }

    /// Whether the error refuses an input (as opposed to a failure of this machine).
    pub fn is_refusal(&self) -> bool {
        matches!(
            self,
            Error::Input(_) | Error::OverBudget { .. } | Error::OverMemory { .. }
        )
    }
}
