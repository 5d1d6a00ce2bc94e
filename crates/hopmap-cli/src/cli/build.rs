use super::{CmdResult, Failure, GlobalOpts};
use clap::Args;
use hopmap::build::{BuildError, BuildOptions, FrameworkSpec};
use std::path::PathBuf;

#[derive(Args, Debug)]
pub struct BuildArgs {
    /// What to build: block:NxM:ribbon:METALS, block:NxM:tet:METALS:TETRAHEDRAL_METALS or
    /// bronze:hexagonal|tetragonal|intergrowth:METALS[:CATION], e.g. block:3x3:ribbon:Ti1Nb2,
    /// block:3x4:tet:Nb:W, bronze:hexagonal:W:K0.3 (METALS: Ti1Nb2 for a ratio, Nb,W to have
    /// the ratio that balances the charge found)
    pub spec: String,
    /// Write the built structure as a P 1 CIF with its construction recorded
    #[arg(long, value_name = "FILE.cif")]
    pub out: Option<PathBuf>,
    /// Metal-oxygen distance of the ideal octahedra, A (default: the distance whose bond
    /// valence is a sixth of the metals' average valence)
    #[arg(long, value_name = "A")]
    pub metal_oxygen: Option<f64>,
    /// Keep the ideal octahedra: no bond-valence refinement
    #[arg(long)]
    pub no_refine: bool,
    /// Most iterations of the refinement
    #[arg(long, default_value_t = 200, value_name = "N")]
    pub max_iterations: usize,
    /// Print the result as JSON on stdout (schema hopmap.build/1 in the README)
    #[arg(long)]
    pub json: bool,
}

pub fn run(_g: &GlobalOpts, a: BuildArgs) -> CmdResult {
    let spec = FrameworkSpec::parse(&a.spec).map_err(|e| match e {
        BuildError::Spec { .. } => Failure::Usage(e.to_string()),
        _ => Failure::Analysis(e.to_string()),
    })?;
    if let Some(out) = &a.out {
        super::prepare_output_file(out)?;
    }
    let options = BuildOptions {
        metal_oxygen_a: a.metal_oxygen,
        refine: !a.no_refine,
        max_iterations: a.max_iterations,
    };
    let built = hopmap::build::build(&spec, &options)?;
    let path = a.out.as_ref().map(|p| p.display().to_string());
    if let Some(out) = &a.out {
        super::write_atomic(out, hopmap_report::write_cif::built_cif(&built).as_bytes())
            .map_err(|e| Failure::Analysis(format!("cannot write {}: {e}", out.display())))?;
    }
    if a.json {
        outln!(
            "{}",
            serde_json::to_string_pretty(&hopmap_report::json::build(&built, path.as_deref()))
                .map_err(|e| e.to_string())?
        );
    } else {
        out!(
            "{}",
            hopmap_report::terminal::build(&built, path.as_deref())
        );
    }
    Ok(())
}
