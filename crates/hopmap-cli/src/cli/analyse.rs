//! `hopmap paths` (the main job) and `hopmap rate`.

use super::{CmdResult, Failure, GlobalOpts, InputArgs};
use clap::Args;
use hopmap::ErrorKind;
use hopmap::analysis::{self, Analysis, AnalysisOptions};
use hopmap::bv::model::ModelKnobs;
use hopmap::bv::overrides::Overrides;
use hopmap::bv::{OxidationSetting, ParameterTable};
use hopmap::element::Element;
use std::path::{Path, PathBuf};

/// Options shared by every command that computes a landscape.
#[derive(Args, Debug, Clone)]
pub struct ModelArgs {
    /// Mobile ion (element symbol): Li, Na, K, Ag, Cu, Mg, Zn, Ca, Al
    #[arg(long, default_value = "Li")]
    pub ion: String,
    /// Grid spacing in A (default: 0.1 A, coarser for cells above 1000 A^3)
    #[arg(long, value_name = "A")]
    pub spacing: Option<f64>,
    /// Parameter file (TOML): bond-valence pairs, radii, model knobs (e.g. from `hopmap calibrate`)
    #[arg(long, value_name = "TOML")]
    pub params: Option<PathBuf>,
    /// Site labels to remove from the framework besides the mobile ion (comma-separated)
    #[arg(long, value_delimiter = ',', value_name = "LABELS")]
    pub exclude: Vec<String>,
    /// Oxidation states to use, by element or site label, e.g. 'Co=3.5,Ni=3' or 'Fe1=2'
    /// (replace the file's and are not re-assigned)
    #[arg(long, value_name = "KEY=STATE,...")]
    pub oxidation: Option<String>,
}

/// Options of the transport and capacity estimates.
#[derive(Args, Debug, Clone)]
pub struct RateArgsCommon {
    /// Temperature for the transport estimates, K
    #[arg(long, default_value_t = 298.15, value_name = "K")]
    pub temperature: f64,
    /// Attempt frequency of the hopping model, Hz
    #[arg(long, default_value_t = 1e13, value_name = "HZ")]
    pub attempt_frequency: f64,
    /// Correlation factor f of the hopping model (1 = dilute carrier)
    #[arg(long, default_value_t = 1.0)]
    pub correlation_factor: f64,
    /// Site filling c of the hopping model, 0-1 (0 = dilute limit)
    #[arg(long, default_value_t = 0.0)]
    pub site_filling: f64,
    /// A measured diffusion coefficient, m^2/s (PFG-NMR, GITT, impedance), used instead of the barrier
    #[arg(long, value_name = "M2_S")]
    pub diffusivity: Option<f64>,
    /// Mobile ions inserted per formula unit for the redox capacity (default: those in the structure)
    #[arg(long, value_name = "X")]
    pub inserted: Option<f64>,
    /// Minimum ion-ion distance for the site-limited capacity, A
    #[arg(long, default_value_t = 2.3, value_name = "A")]
    pub min_ion_distance: f64,
}

impl Default for RateArgsCommon {
    /// The same defaults as the command-line options.
    fn default() -> Self {
        RateArgsCommon {
            temperature: 298.15,
            attempt_frequency: 1e13,
            correlation_factor: 1.0,
            site_filling: 0.0,
            diffusivity: None,
            inserted: None,
            min_ion_distance: 2.3,
        }
    }
}

#[derive(Args, Debug)]
pub struct PathsArgs {
    #[command(flatten)]
    pub input: InputArgs,
    #[command(flatten)]
    pub model: ModelArgs,
    #[command(flatten)]
    pub rate: RateArgsCommon,
    /// Print the result as JSON on stdout (schema in the README)
    #[arg(long)]
    pub json: bool,
    /// Write a self-contained HTML report to this file
    #[arg(long, value_name = "HTML")]
    pub report: Option<PathBuf>,
    /// Write the report's figures as standalone SVG files into this folder
    #[arg(long, value_name = "DIR")]
    pub figures: Option<PathBuf>,
    /// Write the channel networks as 3D surfaces into this folder: glTF binary and PLY meshes
    /// in Cartesian angstroms, the atoms as extended XYZ, and mesh.json
    #[arg(long, value_name = "DIR")]
    pub mesh: Option<PathBuf>,
    /// Cells along a, b, c drawn by --mesh (each 1-6)
    #[arg(long, value_name = "NA,NB,NC", default_value = "2,2,2")]
    pub mesh_cells: String,
}

/// Parses `--mesh-cells` ("2,2,2", or one number for all three axes), each 1-6.
pub fn parse_mesh_cells(s: &str) -> Result<[usize; 3], Failure> {
    let bad = || {
        Failure::Usage(format!(
            "--mesh-cells '{s}': give three whole numbers from 1 to 6, e.g. 2,2,2"
        ))
    };
    let parts: Vec<usize> = s
        .split(',')
        .map(|p| p.trim().parse::<usize>().map_err(|_| bad()))
        .collect::<Result<_, _>>()?;
    let cells = match parts.as_slice() {
        [n] => [*n; 3],
        [a, b, c] => [*a, *b, *c],
        _ => return Err(bad()),
    };
    if cells.iter().any(|&n| !(1..=6).contains(&n)) {
        return Err(bad());
    }
    Ok(cells)
}

#[derive(Args, Debug)]
pub struct RateArgs {
    #[command(flatten)]
    pub input: InputArgs,
    #[command(flatten)]
    pub model: ModelArgs,
    #[command(flatten)]
    pub rate: RateArgsCommon,
    /// Particle diameter to assess, um: prints the fastest C-rate bulk transport allows
    #[arg(long, value_name = "UM")]
    pub particle_size: Option<f64>,
    /// Print the result as JSON on stdout
    #[arg(long)]
    pub json: bool,
}

/// Reads the built-in tables and applies a parameter file when one is given, then the
/// `--oxidation` settings (which win over the file's).
pub fn load_parameters(
    path: Option<&Path>,
    oxidation: Option<&str>,
) -> Result<(ParameterTable, ModelKnobs), Failure> {
    let mut table = ParameterTable::builtin();
    let mut knobs = ModelKnobs::default();
    if let Some(p) = path {
        let o = Overrides::read(p)?;
        o.apply(&mut table, &mut knobs);
    }
    if let Some(text) = oxidation {
        let settings = OxidationSetting::parse_list(text, "--oxidation")
            .map_err(|e| Failure::Usage(format!("--oxidation: {e}")))?;
        table.oxidation.extend(settings);
    }
    Ok((table, knobs))
}

pub fn parse_ion(s: &str) -> Result<Element, Failure> {
    Element::from_symbol(s.trim()).ok_or_else(|| {
        Failure::Usage(format!(
            "--ion '{s}' is not an element symbol (e.g. Li, Na, Mg)"
        ))
    })
}

/// Analysis options from the command line, checked by the library's builder (one set of
/// ranges for the command line and the library).
pub fn options(
    g: &GlobalOpts,
    m: &ModelArgs,
    r: &RateArgsCommon,
) -> Result<AnalysisOptions, Failure> {
    let mut b = AnalysisOptions::builder(&m.ion)
        .exclude_labels(&m.exclude)
        .temperature_k(r.temperature)
        .attempt_frequency_hz(r.attempt_frequency)
        .correlation_factor(r.correlation_factor)
        .site_filling(r.site_filling)
        .min_ion_distance_a(r.min_ion_distance);
    if let Some(s) = m.spacing {
        b = b.spacing_a(s);
    }
    if let Some(p) = &m.params {
        b = b.parameter_file(p);
    }
    if let Some(o) = &m.oxidation {
        b = b.oxidation(o);
    }
    if let Some(d) = r.diffusivity {
        b = b.measured_diffusivity_m2_s(d);
    }
    if let Some(x) = r.inserted {
        b = b.ions_per_formula_unit(x);
    }
    if !g.quiet {
        b = b.progress(std::sync::Arc::new(super::progress::Bar::default()));
    }
    b.build().map_err(|e| match e.kind {
        ErrorKind::Options => {
            let flag = match e.place.as_deref() {
                Some("ion") => "--ion",
                Some("spacing") => "--spacing",
                Some("temperature") => "--temperature",
                Some("attempt frequency") => "--attempt-frequency",
                Some("correlation factor") => "--correlation-factor",
                Some("site filling") => "--site-filling",
                Some("minimum ion distance") => "--min-ion-distance",
                Some("ions per formula unit") => "--inserted",
                Some("measured diffusivity") => "--diffusivity",
                Some("oxidation") => "--oxidation",
                _ => "",
            };
            if flag.is_empty() {
                Failure::Usage(e.message)
            } else {
                Failure::Usage(format!("{flag}: {}", e.message))
            }
        }
        _ => Failure::Analysis(e.to_string()),
    })
}

fn run_analysis(
    g: &GlobalOpts,
    input: &InputArgs,
    opts: &AnalysisOptions,
) -> Result<Analysis, Failure> {
    let s = input.read()?;
    let a = analysis::analyse(&s, opts)
        .map_err(|e| Failure::Analysis(format!("{}: {e}", input.file.display())))?;
    if g.verbose {
        for (stage, secs) in &a.timings {
            eprintln!("  {stage}: {:.3} s", secs);
        }
        eprintln!(
            "  grid {:?} points, {} neighbour evaluations",
            a.landscape.energy.dims, a.landscape.stats.neighbour_evaluations
        );
    }
    Ok(a)
}

pub fn run_paths(g: &GlobalOpts, a: PathsArgs) -> CmdResult {
    // output paths are checked, and their folders created, before the run
    if let Some(p) = &a.report {
        super::prepare_output_file(p)?;
    }
    if let Some(dir) = &a.figures {
        super::prepare_output_dir(dir)?;
    }
    let mesh_cells = parse_mesh_cells(&a.mesh_cells)?;
    if let Some(dir) = &a.mesh {
        super::prepare_output_dir(dir)?;
    }
    let opts = options(g, &a.model, &a.rate)?;
    let an = run_analysis(g, &a.input, &opts)?;
    let file = a.input.file.display().to_string();
    if a.json {
        outln!(
            "{}",
            serde_json::to_string_pretty(&hopmap_report::json::paths(&an, &file))
                .map_err(|e| e.to_string())?
        );
    } else {
        out!("{}", hopmap_report::terminal::paths(&an, &file));
    }
    if let Some(p) = &a.report {
        let html = hopmap_report::html::report(&an, &file);
        super::write_atomic(p, html.as_bytes())
            .map_err(|e| format!("cannot write {}: {e}", p.display()))?;
        if !g.quiet {
            eprintln!("report written to {}", p.display());
        }
    }
    if let Some(dir) = &a.figures {
        std::fs::create_dir_all(dir)
            .map_err(|e| format!("cannot create {}: {e}", dir.display()))?;
        for (name, svg) in hopmap_report::html::figures(&an) {
            let p = dir.join(format!("{name}.svg"));
            super::write_atomic(&p, svg.as_bytes())
                .map_err(|e| format!("cannot write {}: {e}", p.display()))?;
        }
        if !g.quiet {
            eprintln!("figures written to {}", dir.display());
        }
    }
    if let Some(dir) = &a.mesh {
        if !g.quiet {
            // seconds for a 2 x 2 x 2 block of a small cell, longer for large ones
            eprintln!(
                "drawing the network surfaces over {} x {} x {} cells ...",
                mesh_cells[0], mesh_cells[1], mesh_cells[2]
            );
        }
        let written = hopmap_report::mesh::write_folder(dir, &an, &file, mesh_cells)
            .map_err(|e| format!("cannot write the meshes into {}: {e}", dir.display()))?;
        if !g.quiet {
            eprintln!(
                "{} mesh files ({} x {} x {} cells) written to {}",
                written.len(),
                mesh_cells[0],
                mesh_cells[1],
                mesh_cells[2],
                dir.display()
            );
        }
    }
    Ok(())
}

pub fn run_rate(g: &GlobalOpts, a: RateArgs) -> CmdResult {
    let opts = options(g, &a.model, &a.rate)?;
    let an = run_analysis(g, &a.input, &opts)?;
    let file = a.input.file.display().to_string();
    if a.json {
        outln!(
            "{}",
            serde_json::to_string_pretty(&hopmap_report::json::rate(&an, &file, a.particle_size))
                .map_err(|e| e.to_string())?
        );
    } else {
        out!(
            "{}",
            hopmap_report::terminal::rate(&an, &file, a.particle_size)
        );
    }
    Ok(())
}
