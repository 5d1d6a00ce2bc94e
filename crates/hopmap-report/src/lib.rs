//! Renderers: the edge of the pipeline. Each takes plain result types and produces text for a
//! person (terminal), for a program (JSON), or for a report (HTML with inline SVG figures).
//! Nothing upstream knows these formats exist.

pub mod figures;
pub mod fill;
pub mod handoff;
pub mod html;
pub mod json;
pub mod mesh;
pub mod output;
pub mod terminal;
pub mod viewer;
pub mod volumetric;
pub mod write_cif;
