//! `hopmap grid`: the two landscapes as volumetric files.

use super::analyse::{ModelArgs, RateArgsCommon};
use super::{CmdResult, Failure, GlobalOpts, InputArgs};
use clap::{Args, ValueEnum};
use hopmap_report::volumetric::{self, ExportAtom, FieldLabel};
use std::path::PathBuf;

#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum VolumeFormat {
    /// Gaussian cube (Bohr units, atoms included)
    Cube,
    /// XCrySDen XSF periodic data grid (A, atoms included)
    Xsf,
    /// NumPy .npy array, float32, shape (na, nb, nc)
    Npy,
}

#[derive(Args, Debug)]
pub struct GridArgs {
    #[command(flatten)]
    pub input: InputArgs,
    #[command(flatten)]
    pub model: ModelArgs,
    /// Output folder (created if missing)
    #[arg(long, value_name = "DIR")]
    pub out: PathBuf,
    /// File formats to write (comma-separated)
    #[arg(long, value_delimiter = ',', default_value = "cube,xsf,npy")]
    pub format: Vec<VolumeFormat>,
}

pub fn run(g: &GlobalOpts, a: GridArgs) -> CmdResult {
    let dummy_rate = RateArgsCommon::default();
    let opts = super::analyse::options(g, &a.model, &dummy_rate)?;
    let s = a.input.read()?;
    let (s, note, model, _prov, land) = hopmap::analysis::model_and_landscape(&s, &opts)
        .map_err(|e| Failure::Analysis(format!("{}: {e}", a.input.file.display())))?;
    if let (Some(n), false) = (note, g.quiet) {
        eprintln!("note: {n}");
    }
    std::fs::create_dir_all(&a.out)
        .map_err(|e| format!("cannot create {}: {e}", a.out.display()))?;
    let atoms: Vec<ExportAtom> = model
        .atoms
        .iter()
        .map(|at| {
            let el = match at.kind {
                hopmap::landscape::FrameworkKind::Anion(i) => model.anions[i].species.element,
                hopmap::landscape::FrameworkKind::Cation(i) => model.cations[i].species.element,
            };
            (el.atomic_number(), model.lattice.to_cart(at.frac))
        })
        .collect();
    let stem = a
        .input
        .file
        .file_stem()
        .and_then(|x| x.to_str())
        .unwrap_or("structure")
        .to_string();
    let ion = model.probe.element.symbol();
    let mut written = Vec::new();
    for (grid, name, unit, tag) in [
        (&land.energy, format!("{ion} site energy"), "eV", "energy"),
        (
            &land.mismatch,
            format!("{ion} valence mismatch |dV|"),
            "v.u.",
            "mismatch",
        ),
    ] {
        let label = FieldLabel { name: &name, unit };
        for f in &a.format {
            let (ext, res) = match f {
                VolumeFormat::Cube => {
                    let p = a.out.join(format!("{stem}_{ion}_{tag}.cube"));
                    (
                        p.clone(),
                        volumetric::write_cube_file(&p, grid, &atoms, label),
                    )
                }
                VolumeFormat::Xsf => {
                    let p = a.out.join(format!("{stem}_{ion}_{tag}.xsf"));
                    (
                        p.clone(),
                        volumetric::write_xsf_file(&p, grid, &atoms, label),
                    )
                }
                VolumeFormat::Npy => {
                    let p = a.out.join(format!("{stem}_{ion}_{tag}.npy"));
                    (p.clone(), volumetric::write_npy_file(&p, grid))
                }
            };
            res.map_err(|e| format!("cannot write {}: {e}", ext.display()))?;
            written.push(ext);
        }
    }
    let sp = land.energy.spacing();
    outln!(
        "{}: {} grid {} x {} x {} = {} points, spacing {:.4} x {:.4} x {:.4} A, computed in {:.3} s",
        s.name,
        ion,
        land.energy.dims[0],
        land.energy.dims[1],
        land.energy.dims[2],
        land.energy.len(),
        sp[0],
        sp[1],
        sp[2],
        land.stats.seconds
    );
    let (lo, hi) = land.energy.min_max();
    outln!(
        "  site energy {lo:.3} to {hi:.3} eV (capped at {:.1} eV)",
        model.energy_cap
    );
    let (lo, hi) = land.mismatch.min_max();
    outln!(
        "  valence mismatch {lo:.3} to {hi:.3} v.u. (capped at {:.1} v.u.)",
        model.mismatch_cap
    );
    for p in written {
        outln!("  wrote {}", p.display());
    }
    Ok(())
}
