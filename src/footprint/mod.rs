//! Footprints: which cells one beam touches. `Ray` beams take the exact grid traversal of their
//! segment ([`ray`]); `Cone` beams every cell whose centre lies in their sector ([`cone`]).

mod cone;
mod ray;

pub use cone::{ConeAngle, ConeCell, cone_bounds, cone_cells, cone_weight, for_each_cone_cell};
pub use ray::{RayWalk, crossings_before, metres, param, ray_bounds};

#[cfg(test)]
mod traversal_tests;
