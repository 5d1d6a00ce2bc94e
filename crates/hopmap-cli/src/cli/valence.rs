use super::{CmdResult, GlobalOpts, InputArgs};
use clap::Args;
use std::path::PathBuf;

#[derive(Args, Debug)]
pub struct ValenceArgs {
    #[command(flatten)]
    pub input: InputArgs,
    /// Parameter file (TOML) overriding bond-valence parameters or radii
    #[arg(long, value_name = "TOML")]
    pub params: Option<PathBuf>,
    /// Oxidation states to use, by element or site label, e.g. 'Co=3.5,Ni=3' or 'Fe1=2'
    #[arg(long, value_name = "KEY=STATE,...")]
    pub oxidation: Option<String>,
    /// Print the report as JSON on stdout (schema in the README)
    #[arg(long)]
    pub json: bool,
}

pub fn run(_g: &GlobalOpts, a: ValenceArgs) -> CmdResult {
    let s = a.input.read()?;
    let (table, _knobs) =
        super::analyse::load_parameters(a.params.as_deref(), a.oxidation.as_deref())?;
    let (s, note) = hopmap::analysis::with_oxidation_states(&s, &table)?;
    let v = hopmap::bv::valence_check(&s, &table)?;
    if a.json {
        outln!(
            "{}",
            serde_json::to_string_pretty(&hopmap_report::json::valence(&v, &s, note.as_deref()))
                .map_err(|e| e.to_string())?
        );
    } else {
        out!(
            "{}",
            hopmap_report::terminal::valence(&v, &s, note.as_deref())
        );
    }
    Ok(())
}
