//! hopmap: where mobile ions can travel through a crystal, and how hard each path is.
//!
//! The core of the pipeline, one way: file -> [`cif`] document (the `hopmap-cif` crate) ->
//! [`structure::Structure`] -> framework and probe ion ([`bv::model`]) -> energy
//! [`grid::Grid`] ([`landscape`]) -> channels ([`percolation`]) and site network
//! ([`network`]) -> [`analysis::Analysis`]. Renderers (terminal, JSON, HTML, volumetric files)
//! live in `hopmap-report`, the command line in `hopmap-cli`. This crate knows nothing of
//! terminals, output formats or Python. See `ARCHITECTURE.md`.

pub use hopmap_cif as cif;
pub use hopmap_cif::error;

pub mod analysis;
pub mod api;
pub mod blocking;
pub mod build;
pub mod bv;
pub mod calibrate;
pub mod capacity;
pub mod csv_record;
pub mod element;
mod element_table;
pub mod family;
pub mod filling;
pub mod grid;
pub mod handoff;
pub mod isosurface;
pub mod kmc;
pub mod landscape;
pub mod lattice;
pub mod limits;
pub mod neighbours;
pub mod network;
pub mod percolation;
pub mod read;
pub mod scoring;
pub mod spacegroup;
pub mod structure;
pub mod substitute;
pub mod summary;
pub mod symmetry;
pub mod text;
pub mod transport;

pub use analysis::{Analysis, AnalysisOptions, Warning, WarningKind};
pub use api::{Error, ErrorKind, OptionsBuilder, analyse_file, analyse_structure};
