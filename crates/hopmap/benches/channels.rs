//! Stage timings and memory of channels, sites, hops and the site graph on a 100^3 grid.
//!
//! Run with `cargo bench --bench channels`. Two landscapes: a smooth synthetic function with
//! several minima per cell and no exact ties (a sum of cosines over a few wave vectors), and the
//! same with a short-wavelength ripple that makes thousands of shallow minima. The
//! memory figure is the peak of live heap bytes during each stage above what was live before
//! it, per grid point (the grid itself, 4 bytes per point, is not counted).

#[path = "support/heap.rs"]
mod heap;

use heap::peak_during;
use hopmap::grid::Grid;
use hopmap::lattice::{CellParameters, Frac, Lattice};
use hopmap::network::{self, FrameworkIon, SiteOptions};
use hopmap::percolation;
use hopmap::spacegroup::SymOp;
use std::time::Instant;

struct Stage {
    name: &'static str,
    seconds: f64,
    peak_bytes: usize,
}

fn stage<T>(stages: &mut Vec<Stage>, name: &'static str, f: impl FnOnce() -> T) -> T {
    let t = Instant::now();
    let (out, peak_bytes) = peak_during(f);
    let seconds = t.elapsed().as_secs_f64();
    stages.push(Stage {
        name,
        seconds,
        peak_bytes,
    });
    out
}

const RUNS: usize = 3;

fn main() {
    let n = 100;
    let lattice = Lattice::from_parameters(CellParameters {
        a: 10.0,
        b: 10.4,
        c: 9.6,
        alpha: 90.0,
        beta: 90.0,
        gamma: 90.0,
    })
    .unwrap();
    for rugged in [false, true] {
        run(&lattice, n, rugged);
    }
}

fn run(lattice: &Lattice, n: usize, rugged: bool) {
    let mut grid = Grid::new(lattice.clone(), [n, n, n], 0.0);
    let tau = 2.0 * std::f64::consts::PI;
    for i in 0..n {
        for j in 0..n {
            for k in 0..n {
                let (x, y, z) = (
                    i as f64 / n as f64,
                    j as f64 / n as f64,
                    k as f64 / n as f64,
                );
                let e = -0.8 * (2.0 * tau * x).cos()
                    - 0.6 * (2.0 * tau * y).cos()
                    - 0.4 * (2.0 * tau * z).cos()
                    - 0.3 * (tau * (x + 2.0 * y - z)).cos()
                    + 0.07 * (tau * (3.0 * x - y + 5.0 * z)).sin()
                    + 0.05 * (tau * (7.0 * x + 4.0 * y + 2.0 * z)).cos()
                    + if rugged {
                        // short-wavelength ripple: thousands of shallow minima
                        0.12 * (tau * 11.0 * x).cos()
                            * (tau * 9.0 * y).cos()
                            * (tau * 10.0 * z).cos()
                    } else {
                        0.0
                    };
                let idx = grid.index(i, j, k);
                grid.values[idx] = e as f32;
            }
        }
    }
    let points = grid.len();
    let ceiling = f32::INFINITY;
    let framework: Vec<FrameworkIon> = (0..24)
        .map(|m| FrameworkIon {
            label: format!("O{m}"),
            element: "O".into(),
            frac: Frac::new(
                (m as f64 * 0.37) % 1.0,
                (m as f64 * 0.61) % 1.0,
                (m as f64 * 0.23) % 1.0,
            ),
            charge: -2.0,
            radius: 1.40,
            is_anion: true,
        })
        .collect();
    let ops: Vec<SymOp> = vec![SymOp::identity()];

    println!(
        "\n{} landscape, {n}^3 = {points} points, rayon threads: {}, best of {RUNS} runs",
        if rugged { "rugged" } else { "smooth" },
        rayon::current_num_threads()
    );
    let mut best: Vec<Stage> = Vec::new();
    let mut summary = String::new();
    for _ in 0..RUNS {
        let mut stages = Vec::new();
        let order_cmp = stage(&mut stages, "sort (comparison, reference)", || {
            percolation::visit_order_by_comparison(&grid.values, ceiling)
        });
        drop(order_cmp);
        let order = stage(&mut stages, "sort (radix)", || {
            percolation::visit_order(&grid.values, ceiling)
        });
        let perc = stage(&mut stages, "percolation sweep", || {
            percolation::percolate_in_order(&grid, ceiling, &order, &[])
        });
        drop(order);
        let (basins, basin_hops) = stage(&mut stages, "basins + basin hops", || {
            network::hops::basins(&grid, ceiling)
        });
        let merging = stage(
            &mut stages,
            "merge (persistence, percolation check)",
            || {
                let reference =
                    network::graph::percolate_basins(&grid, &basins, &basin_hops, ceiling);
                let options = network::merge::MergeOptions {
                    depth: network::MERGE_DEPTH_EV,
                    symmetry_tolerance: SiteOptions::default().symmetry_tolerance,
                    try_straddling: true,
                };
                network::merge::merge(&grid, &basins, &basin_hops, &ops, &options, &reference)
            },
        );
        let (sites, orbits, assignment) =
            stage(&mut stages, "sites (orbits, coordination)", || {
                network::sites::find_sites(
                    &grid,
                    &basins,
                    &merging,
                    &ops,
                    &framework,
                    &[],
                    &SiteOptions::default(),
                )
            });
        let hops = stage(&mut stages, "site hops", || {
            network::hops::site_hops(&grid, &basin_hops, &assignment, &sites, &framework, 0.76)
        });
        let graph_p = stage(&mut stages, "site graph + its percolation", || {
            let g = network::SiteGraph::new(&sites, &hops);
            g.percolate(&sites, &hops, &grid.lattice, ceiling)
        });
        assert_eq!(perc.energy(1), graph_p.energy(1), "graph and grid disagree");
        assert_eq!(perc.energy(3), graph_p.energy(3), "graph and grid disagree");
        summary = format!(
            "basins {}, sites {} (merge depth {}), orbits {}, hops {}, dimension {} (graph {}), E_1D {:?}, E_3D {:?} (grid units)",
            basins.minima.len(),
            sites.len(),
            network::MERGE_DEPTH_EV,
            orbits.len(),
            hops.len(),
            perc.dimension,
            graph_p.dimension,
            perc.energy(1),
            perc.energy(3),
        );
        if best.is_empty() {
            best = stages;
        } else {
            for (b, s) in best.iter_mut().zip(stages) {
                b.seconds = b.seconds.min(s.seconds);
                b.peak_bytes = b.peak_bytes.max(s.peak_bytes);
            }
        }
    }
    let stages = best;

    println!("{:<40} {:>10} {:>14}", "stage", "time (ms)", "peak B/point");
    let mut total = 0.0;
    let mut peak = 0usize;
    for s in &stages {
        println!(
            "{:<40} {:>10.1} {:>14.1}",
            s.name,
            s.seconds * 1e3,
            s.peak_bytes as f64 / points as f64
        );
        if !s.name.contains("reference") {
            total += s.seconds;
            peak = peak.max(s.peak_bytes);
        }
    }
    println!(
        "{:<40} {:>10.1} {:>14.1}",
        "total (without the reference sort)",
        total * 1e3,
        peak as f64 / points as f64
    );
    println!("{summary}");
}
