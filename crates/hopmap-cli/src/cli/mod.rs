//! Command-line definitions (clap) and dispatch. Commands live one per file.

/// Writes data to stdout; a closed pipe (`hopmap ... | head`) ends the program quietly.
macro_rules! out {
    ($($t:tt)*) => { $crate::cli::emit(&format!($($t)*)) };
}
macro_rules! outln {
    ($($t:tt)*) => { $crate::cli::emit(&(format!($($t)*) + "\n")) };
}

mod analyse;
mod build;
mod calibrate;
mod demo;
mod family;
mod fill;
mod grid;
mod handoff;
mod inspect;
mod progress;
mod screen;
mod valence;

use clap::{Args, Parser, Subcommand};
use std::path::PathBuf;
use std::process::ExitCode;

#[derive(Parser, Debug)]
#[command(
    name = "hopmap",
    version,
    about = "Where mobile ions can travel through a crystal, and over what bond-valence barrier",
    long_about = "hopmap reads a crystal structure (CIF, POSCAR, extended XYZ), maps the site energy of a \
                  mobile ion (Li+, Na+, Mg2+, ...) over the cell with a bond-valence model, and finds the \
                  channels along which it percolates in 1, 2 or 3 dimensions, their bottleneck barriers, \
                  the sites and hops, and what they mean for rate capability and capacity.\n\n\
                  Results are screening estimates from a static empirical model, not cell design."
)]
pub struct Cli {
    #[command(flatten)]
    pub global: GlobalOpts,
    #[command(subcommand)]
    pub command: Command,
}

#[derive(Args, Debug, Clone)]
pub struct GlobalOpts {
    /// Print only data and errors (no progress bars, no notes)
    #[arg(long, short, global = true)]
    pub quiet: bool,
    /// Print extra detail about each stage on stderr
    #[arg(long, short, global = true)]
    pub verbose: bool,
}

#[derive(Subcommand, Debug)]
pub enum Command {
    /// Read a structure and summarise it: formula, cell, space group, sites, warnings
    Inspect(inspect::InspectArgs),
    /// Bond-valence sums per site, global instability index and a verdict on the structure
    Valence(valence::ValenceArgs),
    /// Build an idealised oxide framework (shear block phase or bronze) refined by bond
    /// valence, and write it as CIF
    Build(build::BuildArgs),
    /// Compute the energy and valence-mismatch grids of a mobile ion and export them
    Grid(grid::GridArgs),
    /// The main job: channels (1D/2D/3D), barriers, sites, hops, rate and capacity estimates
    Paths(analyse::PathsArgs),
    /// Rate capability and capacity of a structure (from its barrier or a measured D)
    Rate(analyse::RateArgs),
    /// Transport as the host fills (kinetic Monte Carlo) and what blocked channels cost
    Fill(fill::FillArgs),
    /// Compare a family of frameworks (block phases, bronzes, any structure files): tunnel
    /// barrier, crossing cost, capacity bounds and the largest particle at 10C and 60C, ranked,
    /// in one report
    Family(family::FamilyArgs),
    /// Fit the energy-scale parameters of the model to a list of reference barriers
    Calibrate(calibrate::CalibrateArgs),
    /// Screen many structures in parallel into a CSV or JSON-lines table (resumable, shardable)
    Screen(screen::ScreenArgs),
    /// Join the outputs of sharded screening runs into one table
    Merge(screen::MergeArgs),
    /// Run the bundled demo study and write its report
    Demo(demo::DemoArgs),
    /// Images of one hop for a NEB calculation: supercell, end points on sites of the ion,
    /// images along the lowest-energy path (POSCAR folders, extended XYZ, JSON)
    Neb(handoff::NebArgs),
    /// The host with the ion on its lowest-energy sites, kept apart, at a filling (CIF, POSCAR)
    Populate(handoff::PopulateArgs),
}

/// Where a command's failure comes from: bad input or failed analysis (exit 1), or bad usage (2).
pub enum Failure {
    Analysis(String),
    Usage(String),
}

impl<E: std::fmt::Display> From<E> for Failure {
    fn from(e: E) -> Self {
        Failure::Analysis(e.to_string())
    }
}

pub type CmdResult = Result<(), Failure>;

/// Common structure input options.
#[derive(Args, Debug, Clone)]
pub struct InputArgs {
    /// Structure file: CIF, VASP POSCAR/CONTCAR, or extended XYZ with a lattice
    pub file: PathBuf,
    /// CIF data block to read (default: the first block with atom sites)
    #[arg(long)]
    pub block: Option<String>,
    /// Keep the cell of a P 1 input (POSCAR, P 1 CIF) instead of rewriting it in the
    /// conventional cell of the symmetry found in it; directions then refer to the input cell
    #[arg(long)]
    pub keep_cell: bool,
}

impl InputArgs {
    /// Reads the structure as the options ask.
    pub fn read(&self) -> Result<hopmap::structure::Structure, hopmap::error::InputError> {
        hopmap::read::read_structure_with(&self.file, self.block.as_deref(), self.keep_cell)
    }
}

pub fn run() -> ExitCode {
    let cli = Cli::parse();
    let g = cli.global.clone();
    let result = match cli.command {
        Command::Inspect(a) => inspect::run(&g, a),
        Command::Valence(a) => valence::run(&g, a),
        Command::Build(a) => build::run(&g, a),
        Command::Grid(a) => grid::run(&g, a),
        Command::Paths(a) => analyse::run_paths(&g, a),
        Command::Rate(a) => analyse::run_rate(&g, a),
        Command::Fill(a) => fill::run(&g, a),
        Command::Family(a) => family::run(&g, a),
        Command::Calibrate(a) => calibrate::run(&g, a),
        Command::Screen(a) => screen::run(&g, a),
        Command::Merge(a) => screen::run_merge(&g, a),
        Command::Demo(a) => demo::run(&g, a),
        Command::Neb(a) => handoff::run_neb(&g, a),
        Command::Populate(a) => handoff::run_populate(&g, a),
    };
    match result {
        Ok(()) => ExitCode::SUCCESS,
        Err(Failure::Analysis(msg)) => {
            eprintln!("hopmap: error: {msg}");
            ExitCode::from(1)
        }
        Err(Failure::Usage(msg)) => {
            eprintln!("hopmap: usage error: {msg}");
            ExitCode::from(2)
        }
    }
}

/// Writes to stdout; when the reader has gone away (a closed pipe) the program exits quietly
/// with success, as command-line filters do.
pub fn emit(s: &str) {
    use std::io::Write;
    let mut out = std::io::stdout().lock();
    if let Err(e) = out.write_all(s.as_bytes()).and_then(|_| out.flush()) {
        if e.kind() == std::io::ErrorKind::BrokenPipe {
            std::process::exit(0);
        }
        eprintln!("hopmap: error: cannot write to stdout: {e}");
        std::process::exit(1);
    }
}

/// Makes an output file writable before any computing: creates its folder (as `grid`,
/// `--figures` and `demo` create theirs) and refuses a path that is a folder, so that a long run
/// never fails only at the end.
pub fn prepare_output_file(path: &std::path::Path) -> Result<(), Failure> {
    if path.is_dir() {
        return Err(Failure::Usage(format!(
            "{} is a folder; give a file name for this output",
            path.display()
        )));
    }
    if let Some(dir) = path.parent().filter(|d| !d.as_os_str().is_empty()) {
        std::fs::create_dir_all(dir).map_err(|e| {
            Failure::Analysis(format!("cannot create the folder {}: {e}", dir.display()))
        })?;
    }
    Ok(())
}

/// Creates an output folder before any computing.
pub fn prepare_output_dir(dir: &std::path::Path) -> Result<(), Failure> {
    std::fs::create_dir_all(dir)
        .map_err(|e| Failure::Analysis(format!("cannot create the folder {}: {e}", dir.display())))
}

/// Writes `contents` to `path` atomically: a temporary file in the same folder, then a rename,
/// so that an interrupted run never leaves a partial output.
pub fn write_atomic(path: &std::path::Path, contents: &[u8]) -> std::io::Result<()> {
    hopmap_report::output::write_atomic(path, contents)
}
