//! The answer does not depend on the cell a structure comes in.
//!
//! Networks whose thresholds lie within `CHANNEL_MERGE_EV` of each other are one network of the
//! higher dimension (checked on hand-made landscapes, exact by construction).

use hopmap::analysis::{CHANNEL_MERGE_EV, distinct_thresholds, merged_with_higher};
use hopmap::grid::Grid;
use hopmap::lattice::{CellParameters, Lattice};
use hopmap::percolation::percolate;

/// An 8 x 8 x 8 landscape at 5 eV with two channels at 0 eV: a line along a (j = k = 0) over a
/// bottleneck of 1 eV, and a line along b (i = k = 0) over a bottleneck of `second` eV. The
/// lines cross at the origin: 1D along a opens at 1 eV, 2D in the a-b plane at `second`;
/// the rest sits at the 5 eV ceiling, so nothing percolates in 3D.
fn crossed_lines(second: f32) -> Grid {
    let lattice = Lattice::from_parameters(CellParameters {
        a: 4.0,
        b: 4.0,
        c: 4.0,
        alpha: 90.0,
        beta: 90.0,
        gamma: 90.0,
    })
    .unwrap();
    let mut g = Grid::new(lattice, [8, 8, 8], 5.0);
    for t in 0..8 {
        let x = g.index(t, 0, 0);
        g.values[x] = 0.0;
        let y = g.index(0, t, 0);
        g.values[y] = 0.0;
    }
    let a = g.index(4, 0, 0);
    g.values[a] = 1.0;
    let b = g.index(0, 4, 0);
    g.values[b] = second;
    g
}

#[test]
fn thresholds_closer_than_the_tolerance_are_one_network_of_the_higher_dimension() {
    // 2D opens 10 meV above 1D: one 2D network, barrier 1.01 eV
    let p = percolate(&crossed_lines(1.01), 5.0);
    assert_eq!(p.threshold(1).map(|t| t.energy), Some(1.0));
    assert_eq!(p.threshold(2).map(|t| t.energy), Some(1.01));
    assert!(merged_with_higher(&p, p.threshold(1).unwrap()));
    let d: Vec<u8> = distinct_thresholds(&p).iter().map(|t| t.dimension).collect();
    assert_eq!(d, vec![2]);
    // 50 meV apart (more than CHANNEL_MERGE_EV = 20 meV): two networks
    assert!(0.05 > CHANNEL_MERGE_EV);
    let p = percolate(&crossed_lines(1.05), 5.0);
    assert!(!merged_with_higher(&p, p.threshold(1).unwrap()));
    let d: Vec<u8> = distinct_thresholds(&p).iter().map(|t| t.dimension).collect();
    assert_eq!(d, vec![1, 2]);
}
