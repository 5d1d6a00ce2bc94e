//! `hopmap calibrate`: fit the model's energy scale to reference barriers.

use super::analyse::{load_parameters, parse_ion};
use super::{CmdResult, Failure, GlobalOpts};
use clap::Args;
use hopmap::analysis::AnalysisOptions;
use hopmap::calibrate::{self, CalibrationGrid};
use std::path::PathBuf;

#[derive(Args, Debug)]
#[command(
    after_long_help = "Fits the two energy-scale knobs of the site-energy model, the Morse well depth per bond \
                  (d0_ev) and the screening factor of the cation repulsion (screening_factor), to a list \
                  of reference barriers, and writes them as a parameter file for --params.\n\n\
                  The list is a CSV file with a header line. Columns:\n  \
                  file        structure file (CIF, POSCAR, extended XYZ), relative to the list's folder\n  \
                  ion         mobile ion (element symbol); empty: --ion\n  \
                  barrier_ev  reference barrier in eV: measured activation energy or your own NEB barrier\n  \
                  dimension   optional: 1, 2 or 3, the network the barrier belongs to (empty: the first to open)\n  \
                  source      optional: where the value comes from (carried into the output)\n\
                  Other columns are ignored; lines starting with # are comments.\n\n\
                  Example, for a group calibrating on its own NEB results:\n  \
                  file,ion,barrier_ev,dimension,source\n  \
                  relaxed/LiFePO4.cif,Li,0.30,1,our NEB (PBE+U)\n  \
                  relaxed/Li3PS4_beta.cif,Li,0.25,3,our NEB (PBE)\n\n\
                  Compare like with like: a NEB barrier of one hop is the barrier of the network that hop \
                  opens. Use ten or more references of different framework types for two knobs; the \
                  leave-one-out error printed at the end says how well the fit carries over to a structure \
                  it has not seen. The fitted knobs apply with the rest of the model as it stands (parameter \
                  table, cutoffs, probe coordination): pass the same --params file to calibrate as you will \
                  use afterwards."
)]
pub struct CalibrateArgs {
    /// CSV of references: file, ion, barrier_ev (measured or NEB); optional columns dimension, source
    pub references: PathBuf,
    /// Parameter file (TOML) to write with the fitted knobs
    #[arg(long, default_value = "hopmap-params.toml", value_name = "TOML")]
    pub out: PathBuf,
    /// Mobile ion for rows that leave the ion column empty
    #[arg(long, default_value = "Li")]
    pub ion: String,
    /// Grid spacing in A (default: the analysis default per structure, 0.1 A for cells up to 1000 A^3)
    #[arg(long, value_name = "A")]
    pub spacing: Option<f64>,
    /// Parameter file (TOML) whose table entries and other knobs the fit starts from
    #[arg(long, value_name = "TOML")]
    pub params: Option<PathBuf>,
    /// Values of d0_ev (eV) to tabulate: MIN:MAX:STEP
    #[arg(long, value_name = "MIN:MAX:STEP")]
    pub d0_range: Option<String>,
    /// Values of screening_factor to tabulate: MIN:MAX:STEP
    #[arg(long, value_name = "MIN:MAX:STEP")]
    pub screening_range: Option<String>,
}

fn parse_range(flag: &str, text: &str) -> Result<Vec<f64>, Failure> {
    let bad = || {
        Failure::Usage(format!(
            "--{flag} '{text}': write MIN:MAX:STEP with 0 < MIN <= MAX and STEP > 0, at most 200 values"
        ))
    };
    let p: Vec<f64> = text
        .split(':')
        .map(|x| x.trim().parse::<f64>())
        .collect::<Result<_, _>>()
        .map_err(|_| bad())?;
    let [lo, hi, step] = p[..] else {
        return Err(bad());
    };
    if !(lo > 0.0 && hi >= lo && step > 0.0 && (hi - lo) / step <= 199.0) {
        return Err(bad());
    }
    let n = ((hi - lo) / step + 1e-9).floor() as usize;
    Ok((0..=n).map(|i| lo + step * i as f64).collect())
}

pub fn run(g: &GlobalOpts, a: CalibrateArgs) -> CmdResult {
    let ion = parse_ion(&a.ion)?;
    if let Some(s) = a.spacing {
        hopmap::limits::check_spacing(s).map_err(|e| Failure::Usage(format!("--spacing: {e}")))?;
    }
    let mut grid = CalibrationGrid::default();
    if let Some(r) = &a.d0_range {
        grid.d0_ev = parse_range("d0-range", r)?;
    }
    if let Some(r) = &a.screening_range {
        grid.screening_factor = parse_range("screening-range", r)?;
    }
    let refs = calibrate::read_references(&a.references, Some(ion))?;
    let (table, knobs) = load_parameters(a.params.as_deref(), None)?;
    let mut base = AnalysisOptions::new(ion);
    base.table = table;
    base.knobs = knobs;
    base.spacing_a = a.spacing;
    if !g.quiet {
        eprintln!(
            "calibrating on {} references: {} x {} knob values per structure",
            refs.len(),
            grid.d0_ev.len(),
            grid.screening_factor.len()
        );
    }
    let quiet = g.quiet;
    let c = calibrate::calibrate_with_progress(&refs, &base, grid, &|name, secs| {
        if !quiet {
            eprintln!("  {name}: tabulated in {secs:.1} s");
        }
    })?;
    out!("{}", calibrate::table(&c));
    if !g.quiet {
        eprintln!("{} percolation sweeps, {:.1} s in all", c.sweeps, c.seconds);
    }
    let toml = calibrate::to_toml(
        &c,
        &a.references.display().to_string(),
        &calibrate::today_utc(),
    );
    super::write_atomic(&a.out, toml.as_bytes())
        .map_err(|e| format!("cannot write {}: {e}", a.out.display()))?;
    if !g.quiet {
        eprintln!("parameters written to {}", a.out.display());
    }
    Ok(())
}
