//! Where `paths` spends its CPU, stage by stage, and how it scales with the size of the cell.
//!
//! Run: `cargo bench --bench paths_stages` (add `-- --quick` to skip the 3x3x3 supercell).
//!
//! Part 1: olivine LiFePO4, TiNb2O7 and garnet LLZO from `structures/reference/` (sources in
//! each file), Li+ probe, default grid spacing. Each stage is run on its own, one after the
//! other, and its CPU seconds (all threads) and wall seconds are printed; then the whole
//! `analyse` call, whose wall time shows how much of it runs on several cores at once
//! (the grid over threads; then the energy percolation and the profiles on one core while the
//! mismatch percolation and the site network run on the other, which then takes up profile
//! searches).
//!
//! Part 2: olivine in 1x1x1, 2x2x2 and 3x3x3 P 1 supercells at 0.1 A (the cells as written,
//! no symmetry search), CPU seconds per stage and per grid point: a stage linear in size keeps
//! its seconds per point. The sizes run in turn, five times (the 1x1x1 cell 27 times a round,
//! the 2x2x2 three times), and each figure is the smallest of its runs.
//!
//! CPU seconds come from the scheduler's per-thread counters (Linux); on a shared machine they
//! are the figure to compare, wall seconds are not. Repeat runs and take the smaller figures.
//!
//! The ratio printed here is that of the stages' smallest figures within one process, where
//! the small cell's arrays come back from the heap already mapped while the supercell's,
//! above glibc's 32 MiB threshold for fresh mappings, are new pages each run. What the command
//! costs a user, cell against supercell, is measured by `cargo bench -p hopmap-cli --bench
//! paths_scaling`.

#[path = "support/cpu.rs"]
mod cpu;
#[path = "support/heap.rs"]
mod heap;

use cpu::measure;
use heap::peak_during;
use hopmap::analysis::{
    self, AnalysisOptions, framework_ions, mobile_sites, model_and_landscape, occupied_wells,
};
use hopmap::element::Element;
use hopmap::network::profile::{ProfileOptions, channel_profiles};
use hopmap::network::{self, NetworkInput, NetworkOptions};
use hopmap::percolation;
use hopmap::read::read_structure;
use hopmap::structure::Structure;
use std::path::PathBuf;

/// [`measure`] plus the peak of live heap bytes during `f` above what was live before it.
fn stage<T>(f: impl FnOnce() -> T) -> (T, f64, f64, usize) {
    let ((out, wall, cpu), peak) = peak_during(|| measure(f));
    (out, wall, cpu, peak)
}

fn reference(name: &str) -> Structure {
    let path = PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .join("../../structures/reference")
        .join(name);
    read_structure(&path, None).unwrap_or_else(|e| panic!("{e}"))
}

struct Row {
    points: usize,
    atoms: usize,
    /// (stage, wall s, cpu s, peak heap bytes above the start of the stage)
    stages: Vec<(&'static str, f64, f64, usize)>,
    whole_wall: f64,
    whole_cpu: f64,
    whole_peak: usize,
}

fn run(s: &Structure, spacing: Option<f64>) -> Row {
    let ion = Element::from_symbol("Li").unwrap();
    let mut opts = AnalysisOptions::new(ion);
    opts.spacing_a = spacing;
    let mut stages = Vec::new();
    let (out, w, c, m) = stage(|| model_and_landscape(s, &opts).expect("model"));
    stages.push(("model and grids", w, c, m));
    let (s2, _, model, _, land) = out;
    let ceiling = model.energy_cap as f32;
    let mobile = mobile_sites(&s2, ion);
    let marks = occupied_wells(&land.energy, &mobile);
    let (perc, w, c, m) = stage(|| percolation::percolate_marked(&land.energy, ceiling, &marks));
    stages.push(("energy percolation", w, c, m));
    let (_, w, c, m) = stage(|| percolation::percolate(&land.mismatch, model.mismatch_cap as f32));
    stages.push(("mismatch percolation", w, c, m));
    let framework = framework_ions(&model);
    let input = NetworkInput {
        ops: &s2.symmetry.ops,
        framework: &framework,
        mobile_sites: &mobile,
        mobile_radius: model.probe.radius,
    };
    let net_opts = NetworkOptions {
        ceiling,
        ..Default::default()
    };
    let (_, w, c, m) = stage(|| {
        let net = network::build(&land.energy, &input, &net_opts);
        net.percolate(&land.energy)
    });
    stages.push(("site network", w, c, m));
    let popts = ProfileOptions {
        ceiling,
        ..Default::default()
    };
    let (_, w, c, m) = stage(|| channel_profiles(&land.energy, &perc, &popts));
    stages.push(("profiles", w, c, m));
    let points = land.energy.len();
    drop(land);
    let (_, whole_wall, whole_cpu, whole_peak) =
        stage(|| analysis::analyse(s, &opts).expect("analysis"));
    Row {
        points,
        atoms: s.sites.len(),
        stages,
        whole_wall,
        whole_cpu,
        whole_peak,
    }
}

/// Rounds of each supercell in the scaling table.
const ROUNDS: usize = 5;

/// Stage by stage, the smaller CPU and wall seconds and peak of two runs of the same structure.
fn smaller(a: Row, b: Row) -> Row {
    let stages = a
        .stages
        .iter()
        .zip(&b.stages)
        .map(|(x, y)| (x.0, x.1.min(y.1), x.2.min(y.2), x.3.min(y.3)))
        .collect();
    Row {
        points: a.points,
        atoms: a.atoms,
        stages,
        whole_wall: a.whole_wall.min(b.whole_wall),
        whole_cpu: a.whole_cpu.min(b.whole_cpu),
        whole_peak: a.whole_peak.min(b.whole_peak),
    }
}

fn print_row(name: &str, r: &Row) {
    let total_cpu: f64 = r.stages.iter().map(|s| s.2).sum();
    println!("\n{name}: {} sites, {} grid points", r.atoms, r.points);
    println!(
        "  {:<22} {:>9} {:>9} {:>7} {:>12} {:>12}",
        "stage", "cpu (s)", "wall (s)", "share", "cpu us/point", "peak B/point"
    );
    for (n, w, c, m) in &r.stages {
        println!(
            "  {:<22} {:>9.3} {:>9.3} {:>6.1}% {:>12.3} {:>12.1}",
            n,
            c,
            w,
            100.0 * c / total_cpu,
            c * 1e6 / r.points as f64,
            *m as f64 / r.points as f64
        );
    }
    println!(
        "  whole analyse: {:.3} cpu s, {:.3} wall s, {:.2} cores busy on average, peak heap {:.1} B/point",
        r.whole_cpu,
        r.whole_wall,
        r.whole_cpu / r.whole_wall,
        r.whole_peak as f64 / r.points as f64
    );
}

fn main() {
    let quick = std::env::args().any(|a| a == "--quick");
    println!(
        "paths, stage by stage ({} threads; CPU seconds summed over threads)",
        rayon::current_num_threads()
    );
    for name in [
        "LiFePO4_olivine.cif",
        "TiNb2O7_block.cif",
        "Li7La3Zr2O12_garnet.cif",
    ] {
        let s = reference(name);
        let r = run(&s, None);
        print_row(name, &r);
    }

    println!("\nScaling: olivine LiFePO4 P 1 supercells at 0.1 A");
    let olivine = reference("LiFePO4_olivine.cif");
    let sizes: &[usize] = if quick { &[1, 2] } else { &[1, 2, 3] };
    let cells: Vec<Structure> = sizes
        .iter()
        .map(|&n| olivine.supercell([n; 3]).expect("a supercell"))
        .collect();
    // The sizes are run in turn, ROUNDS times, and each figure is the smallest of its runs: on
    // a shared machine, other work only ever adds time, and the runs of each size are spread
    // over the same stretch of time. A smaller cell is run several times a round (27 / n^3
    // times, at least once), since a disturbance of a few milliseconds weighs more on its
    // shorter stages; taking the smallest of more runs can only lower the small cell's figures
    // and so raise the ratios printed.
    let mut best: Vec<Option<Row>> = sizes.iter().map(|_| None).collect();
    for _ in 0..ROUNDS {
        for (k, (s, &n)) in cells.iter().zip(sizes).enumerate() {
            for _ in 0..(27 / (n * n * n)).max(1) {
                let r = run(s, Some(0.1));
                best[k] = Some(match best[k].take() {
                    None => r,
                    Some(b) => smaller(b, r),
                });
            }
        }
    }
    let mut rows = Vec::new();
    for ((&n, s), r) in sizes.iter().zip(&cells).zip(best) {
        let r = r.expect("ROUNDS > 0");
        let runs = ROUNDS * (27 / (n * n * n)).max(1);
        print_row(&format!("{} (smallest of {runs} runs)", s.name), &r);
        rows.push((n, r));
    }
    println!(
        "\n  {:<8} {:>7} {:>10} {:>12} {:>12} {:>12} {:>12} {:>12} {:>10}",
        "cell",
        "sites",
        "points",
        "grid us/pt",
        "perc us/pt",
        "net us/pt",
        "prof us/pt",
        "all cpu s",
        "x 1x1x1"
    );
    let base: f64 = rows[0].1.stages.iter().map(|s| s.2).sum();
    for (n, r) in &rows {
        let per = |names: &[&str]| {
            r.stages
                .iter()
                .filter(|s| names.contains(&s.0))
                .map(|s| s.2)
                .sum::<f64>()
                * 1e6
                / r.points as f64
        };
        let all: f64 = r.stages.iter().map(|s| s.2).sum();
        println!(
            "  {:<8} {:>7} {:>10} {:>12.3} {:>12.3} {:>12.3} {:>12.3} {:>12.2} {:>10.1}",
            format!("{n}x{n}x{n}"),
            r.atoms,
            r.points,
            per(&["model and grids"]),
            per(&["energy percolation", "mismatch percolation"]),
            per(&["site network"]),
            per(&["profiles"]),
            all,
            all / base
        );
    }
}
