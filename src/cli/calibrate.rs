//! `hopmap calibrate`: fit the model's energy scale to reference barriers.

use super::{CmdResult, GlobalOpts};
use clap::Args;
use std::path::PathBuf;

#[derive(Args, Debug)]
pub struct CalibrateArgs {
    /// CSV of references: file, ion, barrier_ev (measured or NEB); optional column dimension
    pub references: PathBuf,
    /// Parameter file (TOML) to write with the fitted knobs
    #[arg(long, default_value = "hopmap-params.toml", value_name = "TOML")]
    pub out: PathBuf,
}

pub fn run(_g: &GlobalOpts, _a: CalibrateArgs) -> CmdResult {
    Err(super::Failure::Analysis(
        "calibration is not wired yet".into(),
    ))
}
