//! Per-sensor range tables: every reading of one sensor in one flat `f32` table, one row per
//! scan, owned or held in external storage (a memory-mapped array).

use std::sync::Arc;

/// Read-only storage of readings that may live outside the process heap (a memory map).
pub trait RangeSource: std::fmt::Debug + Send + Sync {
    /// All readings, row-major, metres.
    fn as_slice(&self) -> &[f32];
}

impl RangeSource for Vec<f32> {
    fn as_slice(&self) -> &[f32] {
        self
    }
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
    Shared(Arc<dyn RangeSource>),
}

impl Default for RangeData {
    fn default() -> Self {
        RangeData::Owned(Vec::new())
    }
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
    pub fn from_source(beams: usize, source: Arc<dyn RangeSource>) -> Self {
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
        self.all().get(start..start.checked_add(self.beams)?)
    }

    /// Appends a row; returns its index. A table over external storage is copied first.
    pub(crate) fn push(&mut self, ranges: &[f32]) -> usize {
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
