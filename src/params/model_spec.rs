//! Inverse sensor models as a profile names them: the kind and its parameters. The formulas
//! live in [`crate::model`]; each field's unit, domain and help live in the registry
//! ([`super::registry`]).

use serde::{Deserialize, Serialize};

/// An inverse sensor model: the probability of occupancy along a beam given its reading.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub enum ModelSpec {
    /// Gaussian-shaped peak at the reading, floored at `p_free` in front, tending to 0.5 behind.
    Gaussian {
        /// Width of the peak, metres.
        sigma: f64,
        /// Peak probability at the reading.
        p_occ: f64,
        /// Floor in front of the reading.
        p_free: f64,
        /// The beam reaches `cutoff * sigma` metres past the reading.
        cutoff: f64,
    },
    /// A band of `thickness` metres around the reading at `p_occ`, `p_free` in front.
    Band {
        /// Full thickness of the occupied band, metres.
        thickness: f64,
        /// Probability inside the band.
        p_occ: f64,
        /// Probability in front of the band.
        p_free: f64,
    },
}

impl Default for ModelSpec {
    /// The default model ([`super::defaults::MODEL`]).
    fn default() -> Self {
        super::defaults::MODEL
    }
}

impl ModelSpec {
    /// The model's free-space probability.
    pub fn p_free(&self) -> f64 {
        match *self {
            ModelSpec::Gaussian { p_free, .. } | ModelSpec::Band { p_free, .. } => p_free,
        }
    }

    /// The model's occupied probability at the reading.
    pub fn p_occ(&self) -> f64 {
        match *self {
            ModelSpec::Gaussian { p_occ, .. } | ModelSpec::Band { p_occ, .. } => p_occ,
        }
    }

    /// How far past the reading the beam reaches, metres.
    pub fn reach_past_hit(&self) -> f64 {
        match *self {
            ModelSpec::Gaussian { sigma, cutoff, .. } => cutoff * sigma,
            ModelSpec::Band { thickness, .. } => thickness / 2.0,
        }
    }

    /// Short name of the model kind.
    pub fn kind_name(&self) -> &'static str {
        match self {
            ModelSpec::Gaussian { .. } => "Gaussian",
            ModelSpec::Band { .. } => "Band",
        }
    }
}
