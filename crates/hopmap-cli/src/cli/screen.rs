//! `hopmap screen` and `hopmap merge`.

use super::analyse::{ModelArgs, RateArgsCommon};
use super::{CmdResult, Failure, GlobalOpts};
use crate::screen::{self, ScreenRow, Shard, TableFormat};
use clap::Args;
use hopmap::substitute::Substitution;
use indicatif::{ProgressBar, ProgressStyle};
use std::path::{Path, PathBuf};

#[derive(Args, Debug)]
pub struct ScreenArgs {
    /// Structure files or folders (searched recursively for .cif, POSCAR, .vasp, .xyz)
    #[arg(required = true)]
    pub inputs: Vec<PathBuf>,
    /// Output table: .csv, or .jsonl for JSON lines; an existing file is resumed
    #[arg(long, value_name = "FILE")]
    pub out: PathBuf,
    /// Mobile ions to screen, comma-separated (one row per structure and ion)
    #[arg(long, value_delimiter = ',', default_value = "Li")]
    pub ion: Vec<String>,
    /// Take the K-th of N deterministic slices of the file list (for job arrays), e.g. 3/10
    #[arg(long, value_name = "K/N")]
    pub shard: Option<Shard>,
    /// Replace a species by a mix on the same sites, e.g. 'Nb=Nb:0.75,W:0.25' (repeatable)
    #[arg(long, value_name = "SPEC")]
    pub substitute: Vec<Substitution>,
    /// Grid spacing in A (default: 0.1 A, coarser for cells above 1000 A^3)
    #[arg(long, value_name = "A")]
    pub spacing: Option<f64>,
    /// Parameter file (TOML), e.g. from `hopmap calibrate`
    #[arg(long, value_name = "TOML")]
    pub params: Option<PathBuf>,
    /// Oxidation states to use where they apply, by element or site label, e.g. 'Co=3.5'
    /// (an element a structure lacks is noted in its row, not an error)
    #[arg(long, value_name = "KEY=STATE,...")]
    pub oxidation: Option<String>,
    /// Keep the cell of P 1 inputs instead of rewriting them in the conventional cell
    #[arg(long)]
    pub keep_cell: bool,
    /// Time budget of one structure and ion, s: a grid estimated to take longer is refused, one
    /// that runs longer is stopped, and the job becomes an error row
    #[arg(long, value_name = "S", default_value_t = 600.0)]
    pub time_limit: f64,
    /// Memory budget of one structure's grids, GB (jobs run in parallel, one per core)
    #[arg(long, value_name = "GB", default_value_t = 4.0)]
    pub max_memory: f64,
}

/// Stops a grid once its structure's time budget is spent.
struct Deadline(std::time::Instant);

impl hopmap::landscape::ProgressSink for Deadline {
    fn update(&self, _stage: &'static str, _done: u64, _total: u64, _points: u64) -> bool {
        std::time::Instant::now() < self.0
    }
}

#[derive(Args, Debug)]
pub struct MergeArgs {
    /// Shard outputs to join (.csv or .jsonl)
    #[arg(required = true)]
    pub inputs: Vec<PathBuf>,
    /// Merged table (.csv or .jsonl)
    #[arg(long, value_name = "FILE")]
    pub out: PathBuf,
}

/// One screening row: read, substitute, analyse; any failure becomes an error row.
pub fn screen_one(
    path: &Path,
    ion: &str,
    keep_cell: bool,
    subs: &[Substitution],
    opts_for: &dyn Fn(&str) -> Result<hopmap::analysis::AnalysisOptions, String>,
) -> ScreenRow {
    let started = std::time::Instant::now();
    let file = path.display().to_string();
    let mut row = ScreenRow {
        file: file.clone(),
        ion: ion.to_string(),
        ..Default::default()
    };
    let result = (|| -> Result<(), String> {
        let mut s =
            hopmap::read::read_structure_with(path, None, keep_cell).map_err(|e| e.to_string())?;
        for sub in subs {
            s = hopmap::substitute::apply(&s, sub)?;
        }
        let (_, formula) = s.formula_and_z();
        row.formula = formula;
        row.space_group = s.symmetry.hm_symbol.clone().unwrap_or_default();
        row.space_group_number = s.symmetry.number;
        let mut opts = opts_for(ion)?;
        let limit = opts.budget.max_seconds.unwrap_or(f64::INFINITY);
        if limit.is_finite() {
            opts.progress = hopmap::landscape::Progress::Report(std::sync::Arc::new(Deadline(
                started + std::time::Duration::from_secs_f64(limit),
            )));
        }
        let a = hopmap::analysis::analyse(&s, &opts).map_err(|e| match e {
            hopmap::analysis::AnalysisError::Cancelled(_) => format!(
                "{}stopped after the time budget of {limit} s per structure (--time-limit)",
                screen::OVER_BUDGET
            ),
            e @ hopmap::analysis::AnalysisError::OverBudget { .. } => {
                format!("{}{e}", screen::OVER_BUDGET)
            }
            e => e.to_string(),
        })?;
        // the networks the answer reports, and the figures of the one it leads with
        let k = &a.summary.figures;
        let barrier = |d: u8| {
            a.summary
                .networks
                .iter()
                .find(|n| n.dimension == d)
                .map(|n| n.barrier_ev)
        };
        row.dimension = Some(k.dimension);
        row.direction = k.direction.clone();
        row.barrier_ev = k.barrier_ev;
        row.barrier_uncertainty_ev = k.barrier_uncertainty_ev;
        row.barrier_1d_ev = barrier(1);
        row.barrier_2d_ev = barrier(2);
        row.barrier_3d_ev = barrier(3);
        row.diffusion_298k_m2_s = k.diffusion_m2_s;
        row.diffusion_low_m2_s = k.diffusion_band_m2_s.map(|b| b.0);
        row.diffusion_high_m2_s = k.diffusion_band_m2_s.map(|b| b.1);
        row.conductivity_298k_s_cm = k.conductivity_s_cm;
        row.conductivity_low_s_cm = k.conductivity_band_s_cm.map(|b| b.0);
        row.conductivity_high_s_cm = k.conductivity_band_s_cm.map(|b| b.1);
        row.bulk_transport = (k.dimension > 0).then_some(k.bulk_transport);
        row.capacity_mah_g = k.capacity_mah_g;
        row.sites = a.network.as_ref().map(|n| n.sites.len());
        if let Some(v) = &a.valence {
            row.valence_verdict = v.verdict.word().to_string();
            row.gii_vu = Some(v.gii);
        }
        row.warnings = a.warnings.iter().map(|w| w.message.clone()).collect();
        Ok(())
    })();
    if let Err(e) = result {
        row.error = e;
    }
    row
}

pub fn run(g: &GlobalOpts, a: ScreenArgs) -> CmdResult {
    // Everything that would fail the same way for every structure is checked before the batch
    // starts, and is a usage error (exit 2), never a column of error rows.
    let format = TableFormat::of(&a.out).map_err(Failure::Usage)?;
    let files = screen::collect_files(&a.inputs)
        .map_err(|e| Failure::Usage(format!("cannot list the inputs: {e}")))?;
    if files.is_empty() {
        return Err(Failure::Usage(
            "no structure files found in the inputs".into(),
        ));
    }
    if !(a.time_limit > 0.0 && a.time_limit.is_finite()) {
        return Err(Failure::Usage(format!(
            "--time-limit {} s must be a positive number",
            hopmap::limits::short_number(a.time_limit)
        )));
    }
    if !(a.max_memory > 0.0 && a.max_memory <= 1e6) {
        return Err(Failure::Usage(format!(
            "--max-memory {} GB must be a positive number",
            hopmap::limits::short_number(a.max_memory)
        )));
    }
    for ion in &a.ion {
        super::analyse::parse_ion(ion)?;
    }
    super::prepare_output_file(&a.out)?;
    let jobs = screen::shard_jobs(&files, &a.ion, a.shard);
    let base_rate = RateArgsCommon::default();
    let quiet = GlobalOpts {
        quiet: true,
        verbose: false,
    };
    let (time_limit, max_memory_gb) = (a.time_limit, a.max_memory);
    let spacing = a.spacing;
    let params = a.params.clone();
    let oxidation = a.oxidation.clone();
    let keep_cell = a.keep_cell;
    let opts_for = move |ion: &str| -> Result<hopmap::analysis::AnalysisOptions, String> {
        let m = ModelArgs {
            ion: ion.to_string(),
            spacing,
            params: params.clone(),
            exclude: vec![],
            oxidation: oxidation.clone(),
        };
        let mut o = super::analyse::options(&quiet, &m, &base_rate).map_err(|e| match e {
            Failure::Analysis(s) | Failure::Usage(s) => s,
        })?;
        // the table has no column from the valence-mismatch channels: not computed
        o.mismatch_channels = false;
        o.budget = hopmap::limits::Budget {
            max_memory_bytes: (max_memory_gb * 1e9) as u64,
            max_seconds: Some(time_limit),
        };
        Ok(o)
    };
    for ion in &a.ion {
        opts_for(ion).map_err(Failure::Usage)?;
    }
    // the table: a hopmap table or nothing, one writer, the same settings as its rows
    screen::check_resumable(&a.out, format).map_err(Failure::Usage)?;
    let _lock = screen::TableLock::take(&a.out).map_err(Failure::Usage)?;
    let has_rows = std::fs::metadata(&a.out).is_ok_and(|m| m.len() > 0);
    screen::check_settings(&a.out, &run_settings(&a), has_rows).map_err(Failure::Usage)?;
    let bar = if g.quiet {
        ProgressBar::hidden()
    } else {
        let b = ProgressBar::new(jobs.len() as u64);
        b.set_style(
            ProgressStyle::with_template(
                "{bar:40} {pos}/{len} structures x ions  {elapsed} (eta {eta})",
            )
            .unwrap(),
        );
        b
    };
    let subs = a.substitute.clone();
    let (summary, rows) = screen::run_batch(
        &jobs,
        &a.out,
        |p, ion| screen_one(p, ion, keep_cell, &subs, &opts_for),
        &|| bar.inc(1),
    )
    .map_err(|e| format!("cannot write {}: {e}", a.out.display()))?;
    bar.finish_and_clear();
    out!("{}", screen::sorted_view(&rows));
    if !g.quiet {
        eprintln!(
            "{} jobs: {} computed, {} already in {} (skipped), {} error rows; table written to {}",
            summary.jobs,
            summary.computed,
            summary.skipped_done,
            a.out.display(),
            summary.errors,
            a.out.display()
        );
    }
    Ok(())
}

/// The settings that change a screening row, recorded with the table (see
/// [`screen::check_settings`]); the parameter file by its content, not its name.
fn run_settings(a: &ScreenArgs) -> screen::RunSettings {
    let mut m = screen::RunSettings::new();
    m.insert("hopmap_version".into(), env!("CARGO_PKG_VERSION").into());
    m.insert(
        "spacing_a".into(),
        a.spacing
            .map(|s| s.to_string())
            .unwrap_or_else(|| "default".into()),
    );
    let params = a
        .params
        .as_ref()
        .map(|p| match std::fs::read(p) {
            Ok(b) => format!("{} bytes, fnv1a {:016x}", b.len(), fnv1a(&b)),
            Err(_) => p.display().to_string(),
        })
        .unwrap_or_else(|| "built-in".into());
    m.insert("params".into(), params);
    m.insert("oxidation".into(), a.oxidation.clone().unwrap_or_default());
    m.insert(
        "substitute".into(),
        a.substitute
            .iter()
            .map(|s| format!("{s:?}"))
            .collect::<Vec<_>>()
            .join(" | "),
    );
    m.insert("keep_cell".into(), a.keep_cell.to_string());
    m
}

/// FNV-1a, 64 bits: a fingerprint of a parameter file's bytes (not a security hash).
fn fnv1a(bytes: &[u8]) -> u64 {
    bytes.iter().fold(0xcbf29ce484222325u64, |h, &b| {
        (h ^ b as u64).wrapping_mul(0x100000001b3)
    })
}

pub fn run_merge(g: &GlobalOpts, a: MergeArgs) -> CmdResult {
    super::prepare_output_file(&a.out)?;
    let format = TableFormat::of(&a.out).map_err(Failure::Usage)?;
    let merged = screen::merge_tables(&a.inputs).map_err(Failure::Usage)?;
    let rows = &merged.rows;
    let text = screen::render_table(rows, format);
    super::write_atomic(&a.out, text.as_bytes())
        .map_err(|e| format!("cannot write {}: {e}", a.out.display()))?;
    if !g.quiet {
        eprintln!(
            "{} rows from {} files merged into {}",
            rows.len(),
            a.inputs.len(),
            a.out.display()
        );
    }
    // duplicates are said even with --quiet: rows were left out of the output
    if !merged.dropped.is_empty() {
        eprintln!(
            "warning: {} duplicate row(s) dropped, keeping the first result row of each job (a row without an error wins):",
            merged.dropped_rows()
        );
        for (file, ion, n) in &merged.dropped {
            eprintln!("  {file} ({ion}): {n} dropped");
        }
    }
    Ok(())
}
