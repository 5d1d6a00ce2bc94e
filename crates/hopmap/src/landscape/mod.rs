//! The bond-valence landscapes of a probe ion over the unit cell: valence mismatch |dV| (v.u.)
//! and site energy (eV). See the science notes, sections 2 and 3.
//!
//! [`model`] holds the resolved inputs, [`compute`](mod@compute) evaluates them on the grid
//! (and at single points); the volumetric files (cube, XSF, `.npy`) are written by
//! `hopmap-report`.

pub mod compute;
#[cfg(test)]
mod fixtures;
mod kernel;
pub mod model;
mod simd;

pub use compute::{
    Cancelled, ComputeStats, Isa, Landscape, Progress, ProgressSink, compute, compute_f64,
    compute_mismatch, compute_with_isa, evaluate_point,
};
pub use model::*;
