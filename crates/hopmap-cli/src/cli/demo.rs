//! `hopmap demo`: the bundled example study.

use super::{CmdResult, GlobalOpts};
use clap::Args;
use std::path::PathBuf;

#[derive(Args, Debug)]
pub struct DemoArgs {
    /// Output folder for the demo report (created if needed)
    #[arg(long, default_value = "hopmap-demo", value_name = "DIR")]
    pub out: PathBuf,
}

pub fn run(g: &GlobalOpts, a: DemoArgs) -> CmdResult {
    let run = crate::demo::run(&a.out, !g.quiet)?;
    out!("{}", run.summary);
    Ok(())
}
