//! The bond-valence landscapes of a probe ion over the unit cell: valence mismatch |dV| (v.u.)
//! and site energy (eV). See the science notes, sections 2 and 3.
//!
//! [`model`] holds the resolved inputs, [`compute`] evaluates them on the grid (and at single
//! points); the volumetric files (cube, XSF, `.npy`) are written by `hopmap-report`.

pub mod compute;
pub mod model;

pub use compute::{
    Cancelled, ComputeStats, Landscape, Progress, ProgressSink, compute, evaluate_point,
};
pub use model::*;
