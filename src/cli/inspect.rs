use super::{CmdResult, GlobalOpts, InputArgs};
use clap::Args;
use hopmap::report;

#[derive(Args, Debug)]
pub struct InspectArgs {
    #[command(flatten)]
    pub input: InputArgs,
    /// Print the summary as JSON on stdout (schema in the README)
    #[arg(long)]
    pub json: bool,
}

pub fn run(g: &GlobalOpts, a: InspectArgs) -> CmdResult {
    let path = &a.input.file;
    let s = hopmap::read::read_structure(path, a.input.block.as_deref())?;
    let file = path.display().to_string();
    if a.json {
        println!(
            "{}",
            serde_json::to_string_pretty(&report::json::structure(&s, &file))
                .map_err(|e| e.to_string())?
        );
    } else {
        print!("{}", report::terminal::structure(&s, &file));
        if let Ok(names) = hopmap::read::cif_block_names(path) {
            if names.len() > 1 && !g.quiet {
                eprintln!(
                    "note: {} holds {} data blocks ({}); read '{}' (pick another with --block NAME)",
                    file,
                    names.len(),
                    names.join(", "),
                    s.name
                );
            }
        }
    }
    Ok(())
}
