//! The bond-valence landscapes of a probe ion over the unit cell: valence mismatch |dV| (v.u.)
//! and site energy (eV). See the science notes, sections 2 and 3.
//!
//! [`model`] holds the resolved inputs, [`compute`] evaluates them on the grid (and at single
//! points), [`export`] writes the grids as cube, XSF and `.npy` files.

pub mod compute;
pub mod export;
pub mod model;

pub use compute::{ComputeStats, Landscape, Progress, compute, evaluate_point};
pub use model::*;
