//! The hopmap command line as a library: the commands (`cli`), the batch driver (`screen`:
//! sharded, resumable screening tables) and the bundled demo study (`demo`). The binary in
//! `main.rs` only calls [`cli::run`]. Each command is a thin layer: parse options, call the
//! `hopmap` library, hand the result to a renderer of `hopmap-report`.

pub mod cli;
pub mod demo;
pub mod screen;
