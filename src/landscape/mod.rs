//! The bond-valence landscapes of a probe ion over the unit cell: valence mismatch |dV| (v.u.)
//! and site energy (eV). See the science notes, sections 2 and 3.

pub mod model;

pub use model::*;
