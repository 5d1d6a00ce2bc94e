//! Neighbour search and valence check speed. Prints figures; run with
//! `cargo bench --bench neighbours`.
//!
//! The cell is a 3 x 3 x 3 supercell of rock-salt MgO (a = 4.212 A, handbook value): 216 atoms.
//! Queries sit on a 0.2 A grid of the cell, as the landscape code will ask them.

use hopmap::lattice::{CellParameters, Frac, Lattice};
use hopmap::neighbours::NeighbourSearch;
use std::time::Instant;

fn main() {
    let n = 3;
    let a = 4.212 * n as f64;
    let lattice = Lattice::from_parameters(CellParameters {
        a,
        b: a,
        c: a,
        alpha: 90.0,
        beta: 90.0,
        gamma: 90.0,
    })
    .unwrap();
    let mut pts = Vec::new();
    let fcc = [
        [0.0, 0.0, 0.0],
        [0.5, 0.5, 0.0],
        [0.5, 0.0, 0.5],
        [0.0, 0.5, 0.5],
    ];
    for i in 0..n {
        for j in 0..n {
            for k in 0..n {
                for f in fcc {
                    for shift in [0.0, 0.5] {
                        pts.push(Frac::new(
                            (i as f64 + f[0] + shift) / n as f64,
                            (j as f64 + f[1]) / n as f64,
                            (k as f64 + f[2]) / n as f64,
                        ));
                    }
                }
            }
        }
    }
    let steps = (a / 0.2).ceil() as usize;
    for cutoff in [3.5, 6.0, 8.0] {
        let t0 = Instant::now();
        let search = NeighbourSearch::new(&lattice, &pts, cutoff);
        let build = t0.elapsed();
        let t1 = Instant::now();
        let mut hits = 0usize;
        let mut queries = 0usize;
        for i in 0..steps {
            for j in 0..steps {
                for k in 0..steps {
                    let p = Frac::new(
                        i as f64 / steps as f64,
                        j as f64 / steps as f64,
                        k as f64 / steps as f64,
                    );
                    search.for_each_within(p, cutoff, |_| hits += 1);
                    queries += 1;
                }
            }
        }
        let dt = t1.elapsed().as_secs_f64();
        println!(
            "{} atoms, cutoff {cutoff} A: build {:.1} us; {queries} grid queries in {:.3} s = {:.2} us/query, {:.1} neighbours/query, {:.1} M neighbours/s",
            pts.len(),
            build.as_secs_f64() * 1e6,
            dt,
            dt / queries as f64 * 1e6,
            hits as f64 / queries as f64,
            hits as f64 / dt / 1e6
        );
    }
}
