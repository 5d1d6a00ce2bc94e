//! `hopmap fill`: transport as the host fills (kinetic Monte Carlo on the site network) and what
//! blocked channels cost.

use super::analyse::{ModelArgs, RateArgsCommon, options};
use super::{CmdResult, Failure, GlobalOpts, InputArgs};
use clap::Args;
use hopmap::filling::{self, FillOptions, Fillings};
use hopmap::kmc::{KmcOptions, Repulsion, RunLength};
use std::path::PathBuf;

#[derive(Args, Debug)]
pub struct FillArgs {
    #[command(flatten)]
    pub input: InputArgs,
    #[command(flatten)]
    pub model: ModelArgs,
    /// Fillings in ions per formula unit, as START:STOP:STEP or a comma-separated list
    #[arg(
        long,
        value_name = "X",
        default_value = "0.1:2.0:0.1",
        conflicts_with = "fraction"
    )]
    pub x: String,
    /// Fillings as fractions of the network's sites (0-1), START:STOP:STEP or a list
    #[arg(long, value_name = "F")]
    pub fraction: Option<String>,
    /// Temperature, K
    #[arg(long, default_value_t = 298.15, value_name = "K")]
    pub temperature: f64,
    /// Attempt frequency of the ion, Hz (shared over the 2d directions of a dD network)
    #[arg(long, default_value_t = 1e13, value_name = "HZ")]
    pub attempt_frequency: f64,
    /// Two ions closer than this never both sit, A
    #[arg(long, default_value_t = 2.3, value_name = "A")]
    pub exclusion: f64,
    /// Relative permittivity of the screened Coulomb repulsion between mobile ions
    #[arg(long, default_value_t = 10.0)]
    pub permittivity: f64,
    /// Screening length of the repulsion, A (cut off at 2.5 screening lengths)
    #[arg(long, default_value_t = 3.0, value_name = "A")]
    pub screening: f64,
    /// No repulsion between mobile ions (site exclusion only)
    #[arg(long)]
    pub no_repulsion: bool,
    /// Independent runs per filling (their spread gives the error bars)
    #[arg(long, default_value_t = 8)]
    pub runs: usize,
    /// Hops per ion measured in each run (after a warm-up of a fifth as many)
    #[arg(long, default_value_t = 100.0)]
    pub hops_per_ion: f64,
    /// Each side of the simulated supercell is at least this wide, A (longer channels show
    /// single-file slowing more fully; cost grows with the volume)
    #[arg(long, default_value_t = 18.0, value_name = "A")]
    pub supercell: f64,
    /// Seed of the random numbers: the same seed gives the same numbers
    #[arg(long, default_value_t = 1)]
    pub seed: u64,
    /// Defect fractions of the blocking tables (comma-separated)
    #[arg(
        long,
        value_delimiter = ',',
        default_value = "0.001,0.003,0.01,0.03,0.1"
    )]
    pub defects: Vec<f64>,
    /// Particle diameter of the share column of the blocking tables, nm
    #[arg(long, default_value_t = 20.0, value_name = "NM")]
    pub particle: f64,
    /// Skip the blocking tables
    #[arg(long)]
    pub no_blocking: bool,
    /// Print the result as JSON on stdout (schema hopmap.fill/1 in the README)
    #[arg(long)]
    pub json: bool,
    /// Write an HTML page with the figure of D against filling to this file
    #[arg(long, value_name = "HTML")]
    pub report: Option<PathBuf>,
}

/// Parses `START:STOP:STEP` (inclusive of STOP within rounding) or a comma-separated list.
pub fn parse_range(s: &str, flag: &str) -> Result<Vec<f64>, Failure> {
    let bad = |why: &str| Failure::Usage(format!("{flag} '{s}': {why}"));
    let num = |t: &str| {
        t.trim()
            .parse::<f64>()
            .ok()
            .filter(|v| v.is_finite())
            .ok_or_else(|| bad(&format!("'{t}' is not a number")))
    };
    let values = if s.contains(':') {
        let parts: Vec<&str> = s.split(':').collect();
        if parts.len() != 3 {
            return Err(bad("expected START:STOP:STEP"));
        }
        let (a, b, step) = (num(parts[0])?, num(parts[1])?, num(parts[2])?);
        if step.is_nan() || step <= 0.0 || b < a {
            return Err(bad("STEP must be positive and STOP at least START"));
        }
        let n = ((b - a) / step + 1e-9).floor() as usize;
        if n > 1000 {
            return Err(bad("more than 1000 fillings"));
        }
        (0..=n).map(|i| a + i as f64 * step).collect()
    } else {
        s.split(',').map(num).collect::<Result<Vec<_>, _>>()?
    };
    if values.iter().any(|&v| v <= 0.0) {
        return Err(bad("fillings must be positive"));
    }
    Ok(values)
}

pub fn run(g: &GlobalOpts, a: FillArgs) -> CmdResult {
    let fillings = match &a.fraction {
        Some(f) => {
            let v = parse_range(f, "--fraction")?;
            if v.iter().any(|&x| x > 1.0) {
                return Err(Failure::Usage(format!(
                    "--fraction '{f}': site fractions lie in (0, 1]"
                )));
            }
            Fillings::SiteFraction(v)
        }
        None => Fillings::PerFormulaUnit(parse_range(&a.x, "--x")?),
    };
    if !(a.particle > 0.0 && a.particle.is_finite()) {
        return Err(Failure::Usage(format!(
            "--particle {} nm must be positive",
            a.particle
        )));
    }
    if !(a.supercell > 0.0 && a.supercell <= 200.0) {
        return Err(Failure::Usage(format!(
            "--supercell {} A must lie in (0, 200]",
            a.supercell
        )));
    }
    if a.defects.iter().any(|p| !(*p > 0.0 && *p < 1.0)) {
        return Err(Failure::Usage("--defects: fractions lie in (0, 1)".into()));
    }
    let rate = RateArgsCommon {
        temperature: a.temperature,
        attempt_frequency: a.attempt_frequency,
        ..RateArgsCommon::default()
    };
    let opts = options(g, &a.model, &rate)?;
    let s = a.input.read()?;
    let file = a.input.file.display().to_string();
    let an = hopmap::analysis::analyse(&s, &opts)
        .map_err(|e| Failure::Analysis(format!("{file}: {e}")))?;
    let fill = FillOptions {
        kmc: KmcOptions {
            temperature_k: a.temperature,
            attempt_frequency_hz: a.attempt_frequency,
            exclusion_a: a.exclusion,
            repulsion: (!a.no_repulsion).then_some(Repulsion {
                relative_permittivity: a.permittivity,
                screening_length_a: a.screening,
                cutoff_a: 2.5 * a.screening,
            }),
            runs: a.runs,
            seed: a.seed,
            min_supercell_a: a.supercell,
            warmup_hops_per_ion: a.hops_per_ion / 5.0,
            length: RunLength::HopsPerIon(a.hops_per_ion),
            ..KmcOptions::default()
        },
        fillings,
        defect_fractions: a.defects.clone(),
        particle_diameter_a: a.particle * 10.0,
        skip_blocking: a.no_blocking,
        ..FillOptions::default()
    };
    if !g.quiet {
        eprintln!("running kinetic Monte Carlo and blocking tables ...");
    }
    let study =
        filling::study(&an, &fill).map_err(|e| Failure::Analysis(format!("{file}: {e}")))?;
    if a.json {
        outln!(
            "{}",
            serde_json::to_string_pretty(&hopmap_report::fill::json(&study, &file))
                .map_err(|e| e.to_string())?
        );
    } else {
        out!("{}", hopmap_report::fill::terminal(&study, &file));
    }
    if let Some(p) = &a.report {
        let html = hopmap_report::fill::html(&study, &file);
        super::write_atomic(p, html.as_bytes())
            .map_err(|e| format!("cannot write {}: {e}", p.display()))?;
        if !g.quiet {
            eprintln!("report written to {}", p.display());
        }
    }
    Ok(())
}
