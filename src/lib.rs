//! hopmap: where mobile ions can travel through a crystal, and how hard each path is.
//!
//! Data flow, one way: file -> [`cif`] document -> [`structure::Structure`] -> framework and
//! probe ion ([`bv::model`]) -> energy [`grid::Grid`] ([`landscape`]) -> channels and site
//! network -> results -> renderers. See `ARCHITECTURE.md`.

pub mod analysis;
pub mod bv;
pub mod calibrate;
pub mod capacity;
pub mod cif;
pub mod csv_record;
pub mod demo;
pub mod element;
mod element_table;
pub mod error;
pub mod grid;
pub mod landscape;
pub mod lattice;
pub mod neighbours;
pub mod network;
pub mod output;
pub mod percolation;
pub mod plot;
pub mod read;
pub mod report;
pub mod scoring;
pub mod screen;
pub mod spacegroup;
pub mod structure;
pub mod substitute;
pub mod symmetry;
pub mod text;
pub mod transport;
pub mod write_cif;
