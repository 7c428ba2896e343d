//! File plumbing shared by every reader and writer: reading with limits, versioned RON
//! documents, NumPy arrays, atomic writes and numbers as text.
//!
//! The bottom of the crate: it knows nothing of sessions, grids or parameters, so data flows
//! one way (sessions, profiles, plans and bundles all call down here, never the reverse).

pub(crate) mod atomic;
pub(crate) mod doc;
pub(crate) mod npy;
pub(crate) mod numbers;
pub(crate) mod read;
