use super::{CmdResult, GlobalOpts, InputArgs};
use clap::Args;

#[derive(Args, Debug)]
pub struct InspectArgs {
    #[command(flatten)]
    pub input: InputArgs,
    /// Print the summary as JSON on stdout (schema in the README)
    #[arg(long)]
    pub json: bool,
    /// Also write the expanded structure as a P1 CIF with oxidation states to this file
    #[arg(long, value_name = "CIF")]
    pub to_cif: Option<std::path::PathBuf>,
}

pub fn run(g: &GlobalOpts, a: InspectArgs) -> CmdResult {
    let path = &a.input.file;
    let s = a.input.read()?;
    let file = path.display().to_string();
    if let Some(out) = &a.to_cif {
        hopmap_report::write_cif::write_cif_p1(out, &s)
            .map_err(|e| format!("cannot write {}: {e}", out.display()))?;
        if !g.quiet {
            eprintln!("P1 CIF written to {}", out.display());
        }
    }
    if a.json {
        outln!(
            "{}",
            serde_json::to_string_pretty(&hopmap_report::json::structure(&s, &file))
                .map_err(|e| e.to_string())?
        );
    } else {
        out!("{}", hopmap_report::terminal::structure(&s, &file));
        if let Ok(names) = hopmap::read::cif_block_names(path)
            && names.len() > 1
            && !g.quiet
        {
            eprintln!(
                "note: {} holds {} data blocks ({}); read '{}' (pick another with --block NAME)",
                file,
                names.len(),
                names.join(", "),
                s.name
            );
        }
    }
    Ok(())
}
