//! Channels, sites, hops, the site graph and profiles on synthetic landscapes whose answers
//! follow from the functions by hand (each test says why).
//!
//! Functions are sums and products of cosines of the fractional coordinates, sampled on grids
//! whose point counts are multiples of 4 so that x = 0, 1/4, 1/2, 3/4 are grid points. The
//! cosine table is built to be exactly symmetric (`c[n - i] = c[i]`, `c[i + n/2] = -c[i]`) so
//! that symmetric points carry bit-identical values.
//!
//! A fact used throughout: a loop that winds once along axis x passes every value of the index
//! i (face steps change i by at most 1), in particular i = n/2 (x = 1/2). So for a separable
//! function `-a cos 2 pi x - b cos 2 pi y - c cos 2 pi z` the lowest loop along x costs the
//! lowest value on the plane x = 1/2, `-a - b - c + 2a`, and that value is reached by the
//! straight line through the minimum: `E_axis = -(a + b + c) + 2 a_axis`, exactly, on the grid.

use hopmap::grid::Grid;
use hopmap::lattice::{CellParameters, Frac, Lattice};
use hopmap::network::{self, FrameworkIon, MobileSite, NetworkInput, NetworkOptions, Polyhedron};
use hopmap::percolation::{self, Percolation, Span};
use hopmap::spacegroup::SymOp;

fn cell(a: f64, b: f64, c: f64, alpha: f64, beta: f64, gamma: f64) -> Lattice {
    Lattice::from_parameters(CellParameters {
        a,
        b,
        c,
        alpha,
        beta,
        gamma,
    })
    .unwrap()
}

/// cos(2 pi i / n) for i in 0..n, exactly symmetric; n must be a multiple of 4.
fn cos_table(n: usize) -> Vec<f64> {
    assert_eq!(n % 4, 0);
    let q = n / 4;
    let mut c = vec![0.0; n];
    for i in 0..=q {
        c[i] = if i == q {
            0.0
        } else {
            (2.0 * std::f64::consts::PI * i as f64 / n as f64).cos()
        };
    }
    for i in q + 1..=2 * q {
        c[i] = -c[2 * q - i];
    }
    for i in 2 * q + 1..n {
        c[i] = c[n - i];
    }
    c
}

fn grid_from(
    lattice: Lattice,
    dims: [usize; 3],
    mut f: impl FnMut(usize, usize, usize) -> f64,
) -> Grid {
    let mut g = Grid::new(lattice, dims, 0.0);
    for i in 0..dims[0] {
        for j in 0..dims[1] {
            for k in 0..dims[2] {
                let x = g.index(i, j, k);
                g.values[x] = f(i, j, k) as f32;
            }
        }
    }
    g
}

fn close(a: f32, b: f64, tol: f64) -> bool {
    (a as f64 - b).abs() < tol
}

fn direction(p: &Percolation, d: u8) -> [i32; 3] {
    p.threshold(d).unwrap().channel.span.key()
}

/// Builds the site network in P1 and checks that its percolation equals the grid's.
fn network_matches_grid(
    grid: &Grid,
    ceiling: f32,
    options: &NetworkOptions,
) -> (network::Network, Percolation) {
    let grid_p = percolation::percolate(grid, ceiling);
    let options = NetworkOptions {
        ceiling,
        ..options.clone()
    };
    let input = NetworkInput {
        ops: &[],
        framework: &[],
        mobile_sites: &[],
        mobile_radius: 0.76,
    };
    let net = network::build(grid, &input, &options);
    assert!(
        !net.merging.fell_back,
        "the merged site graph failed its own check"
    );
    let grid_p = graph_matches_grid(grid, grid_p, &net);
    (net, grid_p)
}

/// Checks that the percolation of `net`'s site graph equals `grid_p`, the grid's.
fn graph_matches_grid(grid: &Grid, grid_p: Percolation, net: &network::Network) -> Percolation {
    let graph_p = net.percolate(grid);
    assert_eq!(graph_p.dimension, grid_p.dimension, "dimension");
    for d in 1..=3u8 {
        match (grid_p.threshold(d), graph_p.threshold(d)) {
            (None, None) => {}
            (Some(g), Some(s)) => {
                assert_eq!(g.energy, s.energy, "E_{d}D");
                assert_eq!(g.barrier, s.barrier, "barrier {d}D");
                assert_eq!(g.channel.span, s.channel.span, "span {d}D");
                assert_eq!(g.components, s.components, "components {d}D");
                // the deepest channel starts at the same voxel: the site's lowest minimum
                assert_eq!(
                    g.channel.lowest_point,
                    net.sites[s.channel.lowest_point].voxel
                );
            }
            (g, s) => panic!("{d}D: grid {g:?} vs graph {s:?}"),
        }
    }
    let fam = |p: &Percolation| {
        p.families
            .iter()
            .map(|f| {
                (
                    f.dimension,
                    f.span.clone(),
                    f.onset,
                    f.barrier,
                    f.components,
                )
            })
            .collect::<Vec<_>>()
    };
    assert_eq!(fam(&grid_p), fam(&graph_p), "channel families");
    grid_p
}

/// -1.0 cos 2 pi x - 0.6 cos 2 pi y - 0.3 cos 2 pi z on a 6 x 5 x 4 A orthorhombic cell.
fn separable() -> Grid {
    let (na, nb, nc) = (24, 20, 16);
    let (ca, cb, cc) = (cos_table(na), cos_table(nb), cos_table(nc));
    grid_from(
        cell(6.0, 5.0, 4.0, 90.0, 90.0, 90.0),
        [na, nb, nc],
        |i, j, k| -ca[i] - 0.6 * cb[j] - 0.3 * cc[k],
    )
}

#[test]
fn separable_cosines_open_along_the_softest_axis_first() {
    // E_min = -1.9 at the origin. Softest axis c (0.3): E_1D = -1.9 + 0.6 = -1.3 along [001];
    // then b (0.6): E_2D = -1.9 + 1.2 = -0.7 in the plane of [010] and [001], normal (100);
    // then a (1.0): E_3D = -1.9 + 2.0 = 0.1. Barriers are twice the amplitudes.
    let g = separable();
    let p = percolation::percolate(&g, f32::INFINITY);
    assert_eq!(p.dimension, 3);
    let e: Vec<f32> = (1..=3).map(|d| p.energy(d).unwrap()).collect();
    assert!(
        close(e[0], -1.3, 1e-5) && close(e[1], -0.7, 1e-5) && close(e[2], 0.1, 1e-5),
        "{e:?}"
    );
    let b: Vec<f32> = (1..=3).map(|d| p.threshold(d).unwrap().barrier).collect();
    assert!(
        close(b[0], 0.6, 1e-5) && close(b[1], 1.2, 1e-5) && close(b[2], 2.0, 1e-5),
        "{b:?}"
    );
    assert_eq!(direction(&p, 1), [0, 0, 1]);
    assert_eq!(direction(&p, 2), [1, 0, 0]);
    assert_eq!(
        p.threshold(2).unwrap().channel.span,
        Span::Plane {
            vectors: [[0, 0, 1], [0, 1, 0]],
            normal: [1, 0, 0]
        }
    );
    // one minimum per cell: every voxel at or below E_1D drains to it along a path that never
    // rises, so the channel holds exactly those voxels
    let t1 = p.threshold(1).unwrap();
    let below = g.values.iter().filter(|&&v| v <= t1.energy).count();
    assert_eq!(t1.components, 1);
    assert!((t1.fraction - below as f64 / g.len() as f64).abs() < 1e-12);
    assert_eq!(t1.channel.lowest_point, 0);
    network_matches_grid(&g, f32::INFINITY, &NetworkOptions::default());
}

#[test]
fn accessible_fraction_and_dimension_follow_the_level() {
    let g = separable();
    let p = percolation::percolate_levels(&g, f32::INFINITY, &[0.5, -1.5, -1.3, -0.7]);
    let dims: Vec<u8> = p.levels.iter().map(|l| l.dimension).collect();
    assert_eq!(
        dims,
        vec![0, 1, 2, 3],
        "levels come sorted: -1.5, -1.3, -0.7, 0.5"
    );
    for l in &p.levels {
        let open = g.values.iter().filter(|&&v| v <= l.level).count() as f64 / g.len() as f64;
        assert!((l.open_fraction - open).abs() < 1e-12);
    }
    // a single region: once it percolates, everything open is in it
    assert_eq!(p.levels[0].percolating_fraction, [0.0; 3]);
    assert!((p.levels[3].percolating_fraction[2] - p.levels[3].open_fraction).abs() < 1e-12);
}

#[test]
fn a_valley_along_the_cell_diagonal_is_a_110_channel() {
    // E = -A cos 2 pi (x - y) - B cos 2 pi (x + y) - C cos 2 pi z, A = 1, B = 0.2, C = 0.5,
    // tetragonal 5 x 5 x 4 A, n = 40 (a multiple of 4). Valleys run along x - y = 0, i.e. [110].
    // On the 6-connected grid a loop along [110] must step from the level i + j = n/2 (best
    // value -A + B - C, on the valley) to i + j = n/2 + 1, where i - j is odd and the best value
    // is -(A - B) cos(2 pi / n) - C: that is E_1D. Across z: -A - B + C = -0.7 (plane of [110]
    // and [001], normal (1-10)). Across the ridges x - y = 1/2: A - B - C = 0.3 (3D).
    let n = 40;
    let (c, cz) = (cos_table(n), cos_table(16));
    let (a, b, cc) = (1.0, 0.2, 0.5);
    let g = grid_from(
        cell(5.0, 5.0, 4.0, 90.0, 90.0, 90.0),
        [n, n, 16],
        |i, j, k| -a * c[(i + n - j) % n] - b * c[(i + j) % n] - cc * cz[k],
    );
    let p = percolation::percolate(&g, f32::INFINITY);
    let e1 = -(a - b) * (2.0 * std::f64::consts::PI / n as f64).cos() - cc;
    assert!(
        close(p.energy(1).unwrap(), e1, 1e-5),
        "{:?} vs {e1}",
        p.energy(1)
    );
    assert_eq!(direction(&p, 1), [1, 1, 0]);
    assert!(close(
        p.threshold(1).unwrap().barrier,
        e1 + a + b + cc,
        1e-5
    ));
    assert!(close(p.energy(2).unwrap(), -0.7, 1e-5));
    assert_eq!(direction(&p, 2), [1, -1, 0]);
    assert!(close(p.energy(3).unwrap(), 0.3, 1e-5));
    let (net, gp) = network_matches_grid(&g, f32::INFINITY, &NetworkOptions::default());
    // the true minima (0, 0, 0) and (1/2, 1/2, 0) are minima in all 26 directions and deep;
    // the valley floor near its saddle (1/4, 1/4, 0) holds grid points lower than their face
    // neighbours only (the valley runs diagonally to the grid): flagged, and shallow
    let deep: Vec<_> = net.sites.iter().filter(|s| s.minimum_26).collect();
    assert_eq!(deep.len(), 2);
    assert!(
        deep.iter()
            .all(|s| close(s.energy, -1.7, 1e-6) && s.depth > 0.3)
    );
    assert!(
        net.sites
            .iter()
            .filter(|s| !s.minimum_26)
            .all(|s| s.depth < 0.05)
    );

    // the profile through one repeat along [110] climbs exactly to E_1D
    let profiles = network::profile::channel_profiles(&g, &gp, &network::ProfileOptions::default());
    let pr = profiles.iter().find(|p| p.dimension == 1).unwrap();
    assert_eq!(pr.translation, [1, 1, 0]);
    assert_eq!(pr.bottleneck, gp.energy(1).unwrap());
    let (first, last) = (pr.points.first().unwrap(), pr.points.last().unwrap());
    assert_eq!(first.voxel, last.voxel);
    assert!((last.frac.0 - first.frac.0 - nalgebra::Vector3::new(1.0, 1.0, 0.0)).norm() < 1e-12);
}

#[test]
fn a_hexagonal_layer_conducts_in_the_001_plane_with_hops_of_length_a() {
    // Hexagonal a = 4, c = 6 A. g = -(cos 2 pi x + cos 2 pi y + cos 2 pi (x - y)), the
    // six-fold function of this setting (its wave vectors a*, b*, a* - b* are the shortest
    // reciprocal vectors when gamma = 120 deg), minus 5 cos 2 pi z. Minimum -3 - 5 = -8 at the
    // origin. On the line x = 1/2, g = -(-1 + cos 2 pi y - cos 2 pi y) = 1 for every y, so
    // crossing in the plane costs 1 - 5 = -4 along a, b and a + b alike: E_1D = E_2D = -4,
    // normal (001); crossing z = 1/2 costs -3 + 5 = 2 = E_3D. The nearest images of the site,
    // a, b and a + b, are all 4 A away in this cell.
    let n = 24;
    let (c, cz) = (cos_table(n), cos_table(32));
    let g = grid_from(
        cell(4.0, 4.0, 6.0, 90.0, 90.0, 120.0),
        [n, n, 32],
        |i, j, k| -(c[i] + c[j] + c[(i + n - j) % n]) - 5.0 * cz[k],
    );
    let p = percolation::percolate(&g, f32::INFINITY);
    assert!(close(p.energy(1).unwrap(), -4.0, 1e-5));
    assert!(close(p.energy(2).unwrap(), -4.0, 1e-5));
    assert!(close(p.threshold(2).unwrap().barrier, 4.0, 1e-5));
    assert!(close(p.energy(3).unwrap(), 2.0, 1e-5));
    match &p.threshold(2).unwrap().channel.span {
        Span::Plane { vectors, normal } => {
            assert_eq!(*normal, [0, 0, 1]);
            for v in vectors {
                let len = g.lattice.frac_delta_length(nalgebra::Vector3::new(
                    v[0] as f64,
                    v[1] as f64,
                    v[2] as f64,
                ));
                assert!((len - 4.0).abs() < 1e-9, "{v:?} is {len} A long");
            }
        }
        s => panic!("expected a plane, got {s:?}"),
    }
    let (net, _) = network_matches_grid(&g, f32::INFINITY, &NetworkOptions::default());
    assert_eq!(net.sites.len(), 1);
    for image in [[1, 0, 0], [0, 1, 0], [1, 1, 0]] {
        let h = net
            .hops
            .iter()
            .find(|h| h.from == 0 && h.to == 0 && h.image == image)
            .unwrap_or_else(|| panic!("no hop to image {image:?}"));
        assert!((h.length - 4.0).abs() < 1e-9, "{image:?}: {} A", h.length);
        assert!(close(h.saddle_energy, -4.0, 1e-5));
        assert_eq!(h.barrier_forward, h.barrier_backward);
    }
}

#[test]
fn two_families_of_tunnels_that_never_meet() {
    // Cubic 6 A, n = 24. Tunnel 1 along a at y = z = 0: f1 = -cos 2 pi y - cos 2 pi z
    // - 0.2 cos 2 pi x (minimum -2.2, crossing x = 1/2 at -1.8). Tunnel 2 along b at
    // x = z = 1/2: f2 = cos 2 pi x + cos 2 pi z - 0.3 cos 2 pi y (minimum -2.3, crossing y = 1/2
    // at -1.7). E = min(f1, f2). The tunnels lie half a cell apart in z and only meet well above
    // both crossings, so two 1D families open: [100] at -1.8 (barrier 0.4) and [010] at -1.7
    // (barrier 0.6). Where they finally meet, tunnel 1 touches the copies of tunnel 2 above and
    // below it at once (the function is even in z), so the network turns 3D in one step.
    let n = 24;
    let c = cos_table(n);
    let g = grid_from(
        cell(6.0, 6.0, 6.0, 90.0, 90.0, 90.0),
        [n, n, n],
        |i, j, k| {
            let f1 = -c[j] - c[k] - 0.2 * c[i];
            let f2 = c[i] + c[k] - 0.3 * c[j];
            f1.min(f2)
        },
    );
    let p = percolation::percolate(&g, f32::INFINITY);
    assert!(close(p.energy(1).unwrap(), -1.8, 1e-5));
    assert!(close(p.threshold(1).unwrap().barrier, 0.4, 1e-5));
    assert_eq!(direction(&p, 1), [1, 0, 0]);
    let ones: Vec<_> = p.families.iter().filter(|f| f.dimension == 1).collect();
    assert_eq!(ones.len(), 2, "{:?}", p.families);
    assert_eq!(ones[0].span.key(), [1, 0, 0]);
    assert_eq!(ones[1].span.key(), [0, 1, 0]);
    assert!(close(ones[1].onset, -1.7, 1e-5) && close(ones[1].barrier, 0.6, 1e-5));
    assert!(ones.iter().all(|f| f.components == 1));
    assert!(p.energy(2).unwrap() > -1.7 + 0.1);
    assert_eq!(p.energy(2), p.energy(3));
    network_matches_grid(&g, f32::INFINITY, &NetworkOptions::default());
}

#[test]
fn symmetric_tunnels_open_together_and_are_counted() {
    // Square 5 x 5 x 3 A, n = 20. -cos 2 pi x cos 2 pi y has two minima per cell, (0, 0) and
    // (1/2, 1/2), both -1; minus 0.3 cos 2 pi z makes each a tunnel along c opening at
    // -1 + 0.6 = -0.7. Going from one tunnel to the other changes the sign of cos 2 pi x or
    // cos 2 pi y, so it passes a grid point where one of them is exactly 0: the tunnels join at
    // 0 - 0.3 = -0.3, and then in all directions at once (E_2D = E_3D = -0.3).
    let n = 20;
    let (c, cz) = (cos_table(n), cos_table(12));
    let g = grid_from(
        cell(5.0, 5.0, 3.0, 90.0, 90.0, 90.0),
        [n, n, 12],
        |i, j, k| -c[i] * c[j] - 0.3 * cz[k],
    );
    let p = percolation::percolate(&g, f32::INFINITY);
    let t1 = p.threshold(1).unwrap();
    assert!(close(t1.energy, -0.7, 1e-6));
    assert_eq!(t1.components, 2);
    assert_eq!(p.families.len(), 2);
    assert_eq!(p.families[0].components, 2, "{:?}", p.families);
    assert!(close(p.energy(2).unwrap(), -0.3, 1e-6));
    assert!(close(p.energy(3).unwrap(), -0.3, 1e-6));
    // between the two levels: two separate tunnels along [001]
    let map = percolation::regions_at(&g, -0.5);
    let lines: Vec<_> = map
        .regions
        .iter()
        .filter(|r| r.span.dimension() == 1)
        .collect();
    assert_eq!(lines.len(), 2);
    assert!(lines.iter().all(|r| r.span.key() == [0, 0, 1]));
    network_matches_grid(&g, f32::INFINITY, &NetworkOptions::default());
}

#[test]
fn nothing_percolates_when_the_cap_closes_the_channels() {
    // The separable landscape (E_1D = -1.3) with every value at or above -1.5 set to the cap
    // 10: only a closed pocket around the minimum remains below the ceiling.
    let mut g = separable();
    for v in g.values.iter_mut() {
        if *v >= -1.5 {
            *v = 10.0;
        }
    }
    let p = percolation::percolate(&g, 10.0);
    assert_eq!(p.dimension, 0);
    assert!(p.thresholds.iter().all(|t| t.is_none()));
    assert!(p.families.is_empty());
    assert!(close(p.lowest.unwrap(), -1.9, 1e-6));
    let open = g.values.iter().filter(|&&v| v < 10.0).count() as f64 / g.len() as f64;
    assert!(open > 0.0 && (p.open_fraction - open).abs() < 1e-12);
    assert!((p.largest_fraction - open).abs() < 1e-12, "one pocket");
    network_matches_grid(&g, 10.0, &NetworkOptions::default());

    let capped = Grid::new(cell(4.0, 4.0, 4.0, 90.0, 90.0, 90.0), [8, 8, 8], 10.0);
    let p = percolation::percolate(&capped, 10.0);
    assert_eq!((p.dimension, p.lowest, p.open_fraction), (0, None, 0.0));
}

/// h(x) = -cos 8 pi x - 0.3 cos 2 pi x has grid minima at x = 0 (-1.3), 1/4 and 3/4 (-1), and
/// 1/2 (-0.7), with maxima at x = 1/8 etc.; E = h(x) + h(y) + h(z), cubic 8 A, n = 40.
fn four_minima_per_axis() -> Grid {
    let n = 40;
    let c = cos_table(n);
    let h = |i: usize| -c[(4 * i) % n] - 0.3 * c[i];
    grid_from(
        cell(8.0, 8.0, 8.0, 90.0, 90.0, 90.0),
        [n, n, n],
        move |i, j, k| h(i) + h(j) + h(k),
    )
}

fn mmm_ops() -> Vec<SymOp> {
    [
        "x,y,z", "-x,-y,z", "-x,y,-z", "x,-y,-z", "-x,-y,-z", "x,y,-z", "x,-y,z", "-x,y,z",
    ]
    .iter()
    .map(|s| SymOp::parse_xyz(s).unwrap())
    .collect()
}

#[test]
fn sites_of_a_separable_landscape_fall_into_mmm_orbits() {
    // The minima are the 4 x 4 x 4 products of the axis minima: 64 sites. Under mmm
    // (x -> -x etc.), 0 and 1/2 are fixed and 1/4 <-> 3/4, so each axis contributes a factor 1
    // (at 0 or 1/2) or 2 (at 1/4 or 3/4): 27 orbits, multiplicities 1 (x8), 2 (x12), 4 (x6),
    // 8 (x1).
    let g = four_minima_per_axis();
    let ops = mmm_ops();
    let (basins, bh) = network::hops::basins(&g, f32::INFINITY);
    let merging = network::merge::unmerged(&g, &basins, &bh);
    let (sites, orbits, _) =
        network::sites::find_sites(&g, &basins, &merging, &ops, &[], &[], &Default::default());
    assert_eq!(sites.len(), 64);
    assert_eq!(orbits.len(), 27);
    let mut hist = std::collections::BTreeMap::new();
    for o in &orbits {
        *hist.entry(o.multiplicity).or_insert(0) += 1;
        assert!(o.complete && o.energy_spread == 0.0);
    }
    assert_eq!(
        hist.into_iter().collect::<Vec<_>>(),
        vec![(1, 8), (2, 12), (4, 6), (8, 1)]
    );
    assert!(close(sites[0].energy, -3.9, 1e-5));
    assert!(
        sites[0].frac.0.norm() < 1e-12,
        "refined onto the symmetric minimum"
    );
    // P1: every site is its own orbit
    let (_, p1, _) =
        network::sites::find_sites(&g, &basins, &merging, &[], &[], &[], &Default::default());
    assert_eq!(p1.len(), 64);
    network_matches_grid(&g, f32::INFINITY, &NetworkOptions::default());
}

#[test]
fn hop_barriers_are_the_saddle_above_each_end() {
    // Between the site at the origin (3 h(0) = -3.9) and the one at (1/4, 0, 0) (-3.6) the
    // path along x crosses h's maximum at x = 1/8: h(1/8) = 1 - 0.3 cos 45 deg. Forward barrier
    // h(1/8) - h(0), backward h(1/8) - h(1/4); the two sites are 2 A apart.
    let g = four_minima_per_axis();
    let (net, _) = network_matches_grid(&g, f32::INFINITY, &NetworkOptions::default());
    let find = |f: [f64; 3]| {
        net.sites
            .iter()
            // refined positions sit within a fraction of a voxel (0.2 A) of the grid minima
            .position(|s| {
                g.lattice
                    .periodic_distance(s.frac, Frac::new(f[0], f[1], f[2]))
                    < 0.1
            })
            .unwrap()
    };
    let (s0, s1) = (find([0.0, 0.0, 0.0]), find([0.25, 0.0, 0.0]));
    let hop = net
        .hops
        .iter()
        .find(|h| (h.from, h.to) == (s0.min(s1), s0.max(s1)) && h.image == [0, 0, 0])
        .unwrap();
    let h18 = 1.0 - 0.3 * (std::f64::consts::PI / 4.0).cos();
    let (fw, bw) = if hop.from == s0 {
        (hop.barrier_forward, hop.barrier_backward)
    } else {
        (hop.barrier_backward, hop.barrier_forward)
    };
    assert!(close(fw, h18 + 1.3, 1e-5), "{fw}");
    assert!(close(bw, h18 + 1.0, 1e-5), "{bw}");
    // 2 A between the grid minima; the true minimum of h near 1/4 lies 0.003 cell (0.024 A)
    // towards the origin (h'(x) = 0 at x = 1/4 - 0.6 pi / (64 pi^2)), and the parabolic
    // refinement follows it
    assert!((hop.length - (2.0 - 0.024)).abs() < 0.005, "{}", hop.length);
    for h in &net.hops {
        assert_eq!(
            h.barrier_forward,
            h.saddle_energy - net.sites[h.from].energy
        );
        assert_eq!(h.barrier_backward, h.saddle_energy - net.sites[h.to].energy);
        assert!(h.barrier_forward >= 0.0 && h.barrier_backward >= 0.0);
        assert_eq!(g.values[h.saddle_voxel], h.saddle_energy);
        // the saddle lies between the two ends: within one hop length of both
        let (pf, pt) = (net.sites[h.from].frac.0, net.sites[h.to].frac.0);
        let pt =
            pt + nalgebra::Vector3::new(h.image[0] as f64, h.image[1] as f64, h.image[2] as f64);
        assert!(g.lattice.frac_delta_length(h.saddle.0 - pf) <= h.length + 1e-9);
        assert!(g.lattice.frac_delta_length(h.saddle.0 - pt) <= h.length + 1e-9);
    }
}

fn ion(label: &str, element: &str, f: [f64; 3], charge: f64, radius: f64) -> FrameworkIon {
    FrameworkIon {
        label: label.into(),
        element: element.into(),
        frac: Frac::new(f[0], f[1], f[2]),
        charge,
        radius,
        is_anion: charge < 0.0,
    }
}

#[test]
fn the_cavity_of_a_reo3_type_framework_has_12_oxygens_and_a_window_of_0_5_angstrom() {
    // ReO3 type, a = 3.8 A: Re at the origin, O at the edge centres. The cavity at the body
    // centre has 12 O at a / sqrt 2 = 2.687 A (the A site of a perovskite). E = cos 2 pi x +
    // cos 2 pi y + cos 2 pi z puts the site there (-3) and the saddles at the face centres (-1),
    // the square windows of 4 O at a / 2 = 1.9 A: opening 1.9 - 1.40 (O2-, CN VI, Shannon 1976,
    // value from memory) = 0.50 A, less than Li+ (0.76 A, CN VI, same source).
    let n = 40;
    let c = cos_table(n);
    let g = grid_from(
        cell(3.8, 3.8, 3.8, 90.0, 90.0, 90.0),
        [n, n, n],
        |i, j, k| c[i] + c[j] + c[k],
    );
    let framework = vec![
        ion("Re1", "Re", [0.0, 0.0, 0.0], 6.0, 0.55),
        ion("O1", "O", [0.5, 0.0, 0.0], -2.0, 1.40),
        ion("O1", "O", [0.0, 0.5, 0.0], -2.0, 1.40),
        ion("O1", "O", [0.0, 0.0, 0.5], -2.0, 1.40),
    ];
    let mobile = vec![MobileSite {
        label: "Li1".into(),
        frac: Frac::new(0.5, 0.5, 0.5),
    }];
    let input = NetworkInput {
        ops: &[],
        framework: &framework,
        mobile_sites: &mobile,
        mobile_radius: 0.76,
    };
    let net = network::build(&g, &input, &NetworkOptions::default());
    assert_eq!(net.sites.len(), 1);
    let s = &net.sites[0];
    assert!(
        g.lattice
            .periodic_distance(s.frac, Frac::new(0.5, 0.5, 0.5))
            < 1e-9
    );
    assert_eq!(s.label.as_deref(), Some("Li1"));
    assert_eq!(s.coordination.count, 12);
    assert_eq!(s.coordination.anions, vec![("O".to_string(), 12)]);
    assert!((s.coordination.distances[0] - 3.8 / 2f64.sqrt()).abs() < 1e-9);
    for image in [[1, 0, 0], [0, 1, 0], [0, 0, 1]] {
        let h = net.hops.iter().find(|h| h.image == image).unwrap();
        assert!(close(h.saddle_energy, -1.0, 1e-6));
        assert!((h.length - 3.8).abs() < 1e-9);
        let b = h.bottleneck.as_ref().unwrap();
        assert_eq!(framework[b.ion].element, "O");
        assert!(
            (b.distance - 1.9).abs() < 1e-9 && (b.radius - 0.5).abs() < 1e-9,
            "{b:?}"
        );
        assert!((b.clearance - (0.5 - 0.76)).abs() < 1e-9);
    }
    let p = net.percolate(&g);
    assert_eq!(p.dimension, 3);
    assert!(
        close(p.energy(3).unwrap(), -1.0, 1e-6)
            && close(p.threshold(3).unwrap().barrier, 2.0, 1e-6)
    );
}

#[test]
fn coordination_shells_are_named_by_count_and_shape() {
    // A site at the origin of a 4 A cube with O at the edge centres has 6 O at 2 A
    // (octahedral); in an 8 A cube with O at (+-0.1, +-0.1, +-0.1), an even number of minus
    // signs, it has 4 O at 0.8 sqrt 3 = 1.386 A (tetrahedral).
    let n = 20;
    let c = cos_table(n);
    let well = |a: f64| {
        grid_from(cell(a, a, a, 90.0, 90.0, 90.0), [n, n, n], |i, j, k| {
            -c[i] - c[j] - c[k]
        })
    };
    let octa = vec![
        ion("O1", "O", [0.5, 0.0, 0.0], -2.0, 1.4),
        ion("O1", "O", [0.0, 0.5, 0.0], -2.0, 1.4),
        ion("O1", "O", [0.0, 0.0, 0.5], -2.0, 1.4),
    ];
    let tetra = vec![
        ion("O1", "O", [0.1, 0.1, 0.1], -2.0, 1.4),
        ion("O1", "O", [-0.1, -0.1, 0.1], -2.0, 1.4),
        ion("O1", "O", [-0.1, 0.1, -0.1], -2.0, 1.4),
        ion("O1", "O", [0.1, -0.1, -0.1], -2.0, 1.4),
    ];
    let mobile = vec![MobileSite {
        label: "Na2".into(),
        frac: Frac::new(0.3, 0.0, 0.0),
    }];
    for (a, fw, count, shape, text) in [
        (4.0, &octa, 6, Polyhedron::Octahedral, "6 O (octahedral)"),
        (8.0, &tetra, 4, Polyhedron::Tetrahedral, "4 O (tetrahedral)"),
    ] {
        let g = well(a);
        let input = NetworkInput {
            ops: &[],
            framework: fw,
            mobile_sites: &mobile,
            mobile_radius: 1.02,
        };
        let net = network::build(&g, &input, &NetworkOptions::default());
        let co = &net.sites[0].coordination;
        assert_eq!((co.count, co.polyhedron), (count, shape));
        assert_eq!(co.to_string(), text);
        // the original Na2 site lies 0.3 a away (1.2 or 2.4 A): too far to name this site
        assert_eq!(net.sites[0].label, None);
    }
}

#[test]
fn the_profile_of_a_straight_channel_runs_one_repeat_and_peaks_at_the_threshold() {
    // In the separable landscape the [001] channel runs straight along x = y = 0 from the
    // minimum to its image one c (4 A) higher, over the crossing at z = 1/2 (E_1D).
    let g = separable();
    let p = percolation::percolate(&g, f32::INFINITY);
    let profiles = network::profile::channel_profiles(&g, &p, &network::ProfileOptions::default());
    let pr = &profiles[0];
    assert_eq!((pr.dimension, pr.translation), (1, [0, 0, 1]));
    assert_eq!(pr.bottleneck, p.energy(1).unwrap());
    assert!((pr.length - 4.0).abs() < 1e-9, "{}", pr.length);
    let first = pr.points.first().unwrap();
    let last = pr.points.last().unwrap();
    assert_eq!(first.voxel, p.threshold(1).unwrap().channel.lowest_point);
    assert_eq!(first.voxel, last.voxel);
    assert_eq!(
        (first.kind, last.kind),
        (network::PointKind::Site, network::PointKind::Site)
    );
    let saddles: Vec<_> = pr.saddles().collect();
    assert_eq!(saddles.len(), 1);
    assert_eq!(saddles[0].energy, p.energy(1).unwrap());
    assert!((saddles[0].distance - 2.0).abs() < 1e-9);
    assert_eq!(pr.sites().count(), 2);
    // profiles of the 2D threshold: one per spanning vector; along [010] the peak is E_2D
    let along_b = profiles
        .iter()
        .find(|q| q.dimension == 2 && q.translation == [0, 1, 0])
        .unwrap();
    assert_eq!(along_b.bottleneck, p.energy(2).unwrap());
}

#[test]
fn a_shallow_minimum_merges_into_the_well_it_drains_to_and_deep_ones_stay_apart() {
    // (1) A well -cos 2 pi x - cos 2 pi y - cos 2 pi z (10 A cube, 0.25 A voxels) with a bump
    // at grid point (1, 0, 0) set to -2.9 leaves a second minimum at (2, 0, 0), value
    // -cos(2 pi / 20) - 2 = -2.9511. Its lowest exit towards the well is the step to (2, 1, 0),
    // value -cos(2 pi / 20) - cos(2 pi / 40) - 1 = -2.9388, a voxel that drains to the well
    // through (1, 1, 0): persistence 0.0123, below the default depth of 0.05, so one site of
    // two minima whose internal saddle is -2.9388.
    let n = 40;
    let c = cos_table(n);
    let mut g = grid_from(
        cell(10.0, 10.0, 10.0, 90.0, 90.0, 90.0),
        [n, n, n],
        |i, j, k| -c[i] - c[j] - c[k],
    );
    let x = g.index(1, 0, 0);
    g.values[x] = -2.9;
    let (net, _) = network_matches_grid(&g, f32::INFINITY, &NetworkOptions::default());
    assert_eq!(net.basins.minima.len(), 2);
    let shallow = net.basins.minima.iter().position(|&v| v != 0).unwrap();
    let expected = -c[2] - c[1] - 1.0 - (-c[2] - 2.0);
    assert!(
        close(net.merging.persistence[shallow], expected, 1e-5),
        "{:?}",
        net.merging.persistence
    );
    assert_eq!(net.sites.len(), 1);
    assert_eq!(net.sites[0].minima, 2);
    assert_eq!(net.sites[0].voxel, 0, "the site keeps the lower minimum");
    let internal = net.sites[0].internal_saddle.unwrap();
    assert!(close(internal, -c[2] - c[1] - 1.0, 1e-6), "{internal}");
    // with a depth below its persistence it stays a site of its own
    let strict = NetworkOptions {
        merge_depth: 0.01,
        ..Default::default()
    };
    let (net, _) = network_matches_grid(&g, f32::INFINITY, &strict);
    assert_eq!(net.sites.len(), 2);

    // (2) Two tunnels along c, 0.5 A apart, separated by a wall: the floors lie 1.5 below the
    // wall at k = 0, far more than the depth, so they stay two sites and two channels.
    let cz = cos_table(n);
    let g = grid_from(
        cell(10.0, 10.0, 10.0, 90.0, 90.0, 90.0),
        [n, n, n],
        |i, j, k| {
            let floor = if j == 0 && (i == 0 || i == 2) {
                -2.0
            } else {
                0.0
            };
            floor - 0.5 * cz[k]
        },
    );
    let (net, p) = network_matches_grid(&g, f32::INFINITY, &NetworkOptions::default());
    assert!(close(p.energy(1).unwrap(), -1.5, 1e-6));
    assert_eq!(p.threshold(1).unwrap().components, 2);
    let tunnels: Vec<_> = net.sites.iter().filter(|s| s.energy < -2.0).collect();
    assert_eq!(tunnels.len(), 2);
    assert!(tunnels.iter().all(|s| s.minima == 1));
}

#[test]
fn a_double_well_chain_with_a_split_well_has_two_sites_and_two_hops_per_repeat() {
    // Along a (8 A, 40 points): f(x) = -cos 4 pi x, two wells per repeat at x = 0 and 1/2 and
    // saddles of +1 at x = 1/4 and 3/4, except that the grid point x = 1/2 is raised from -1
    // to -0.94: the second well splits into two tied minima at x = 19/40 and 21/40, both
    // f = -cos(2 pi 2/40) = -0.95106, joined over that bump. Across b and c (4 A, 8 points)
    // -2 cos 2 pi y - 2 cos 2 pi z keeps the chain 1D up to E_1D = 1 - 4 = -3 along [100].
    // Persistence of the split minimum: -0.94 + 0.95106 = 0.011 eV, below the 0.05 default:
    // it merges into its twin, and the merged site sits midway, on x = 1/2. The pair then
    // drains to the well at x = 0 over +1: persistence 1.95, a site. So per repeat: before,
    // three sites and three hops up to E_1D, one of them a fraction of an angstrom between the
    // twins; after, two sites and two hops of a/2 = 4 A, over the saddles at x = 1/4 and 3/4.
    let n = 40;
    let (c, cz) = (cos_table(n), cos_table(8));
    let f = |i: usize| if i == n / 2 { -0.94 } else { -c[(2 * i) % n] };
    let g = grid_from(
        cell(8.0, 4.0, 4.0, 90.0, 90.0, 90.0),
        [n, 8, 8],
        |i, j, k| f(i) - 2.0 * cz[j] - 2.0 * cz[k],
    );
    let e1 = -3.0;
    let up_to_e1 = |net: &network::Network| -> Vec<f64> {
        let mut v: Vec<f64> = net
            .hops
            .iter()
            .filter(|h| h.saddle_energy <= e1 as f32)
            .map(|h| h.length)
            .collect();
        v.sort_by(f64::total_cmp);
        v
    };

    let unmerged = NetworkOptions {
        merge_depth: 0.0,
        ..Default::default()
    };
    let (before, p) = network_matches_grid(&g, f32::INFINITY, &unmerged);
    assert!(close(p.energy(1).unwrap(), e1, 1e-6));
    assert_eq!(direction(&p, 1), [1, 0, 0]);
    assert_eq!(before.sites.len(), 3);
    let lengths = up_to_e1(&before);
    assert_eq!(lengths.len(), 3, "{lengths:?}");
    assert!(lengths[0] < 0.5, "the hop between the twins: {lengths:?}");

    let (after, _) = network_matches_grid(&g, f32::INFINITY, &NetworkOptions::default());
    let twin = after
        .basins
        .minima
        .iter()
        .position(|&v| v == g.index(n / 2 + 1, 0, 0))
        .unwrap();
    assert!(close(after.merging.persistence[twin], -0.94 + c[2], 1e-5));
    assert_eq!(after.sites.len(), 2);
    let pair = &after.sites[1];
    assert_eq!(pair.minima, 2);
    assert!(close(pair.internal_saddle.unwrap(), -0.94 - 4.0, 1e-5));
    assert!(
        (pair.frac.0 - nalgebra::Vector3::new(0.5, 0.0, 0.0)).norm() < 1e-9,
        "midway between the tied twins: {:?}",
        pair.frac
    );
    let lengths = up_to_e1(&after);
    assert_eq!(lengths.len(), 2, "{lengths:?}");
    assert!(
        lengths.iter().all(|l| (l - 4.0).abs() < 1e-9),
        "{lengths:?}"
    );
    for h in after.hops.iter().filter(|h| h.saddle_energy <= e1 as f32) {
        assert!(close(h.saddle_energy, e1, 1e-6));
        let (deep, split) = if h.from == 0 {
            (h.barrier_forward, h.barrier_backward)
        } else {
            (h.barrier_backward, h.barrier_forward)
        };
        assert!(close(deep, 2.0, 1e-5) && close(split, 2.0 - (1.0 - c[2]), 1e-5));
    }
}

/// A small deterministic random source (xorshift64), uniform in [0, 1).
fn xorshift(seed: u64) -> impl FnMut() -> f64 {
    let mut state = seed;
    move || {
        state ^= state << 13;
        state ^= state >> 7;
        state ^= state << 17;
        (state >> 11) as f64 / (1u64 << 53) as f64
    }
}

/// A grid of random values in [0, 1), rounded down to multiples of 1/q when a quantum q is given
/// (so that many voxels tie).
fn random_grid(
    lattice: &Lattice,
    dims: [usize; 3],
    quantum: Option<f64>,
    next: &mut impl FnMut() -> f64,
) -> Grid {
    grid_from(lattice.clone(), dims, |_, _, _| {
        let v = next();
        match quantum {
            Some(q) => (v * q).floor() / q,
            None => v,
        }
    })
}

#[test]
fn the_site_graph_reproduces_the_grid_on_random_landscapes() {
    // No function to reason about here: random values in [0, 1) (some quantised to force
    // ties), odd and tiny grids (1 or 2 points on an axis), a skewed cell, walls below a
    // ceiling, and merge depths from none to half the range of values, so that most minima
    // merge and many merges straddle a percolation level. Whatever the landscape, the site
    // graph must give the grid's percolation exactly, without falling back to unmerged minima.
    let mut next = xorshift(0x9e37_79b9_7f4a_7c15);
    let lattice = cell(3.1, 3.7, 4.3, 83.0, 97.0, 112.0);
    let cases: [([usize; 3], Option<f64>, f32); 8] = [
        ([6, 5, 4], None, 0.05),
        ([7, 6, 5], Some(8.0), 0.2),
        ([1, 6, 6], None, 0.05),
        ([2, 2, 9], Some(4.0), 0.3),
        ([9, 8, 7], None, 0.5),
        ([10, 9, 8], Some(16.0), 0.1),
        ([3, 3, 3], Some(2.0), 0.0),
        ([12, 11, 10], None, 0.15),
    ];
    let (mut merged, mut dims_seen) = (0, [0usize; 4]);
    for (dims, quantum, depth) in cases {
        for ceiling in [0.2, 0.3, 0.35, 0.5, f32::INFINITY] {
            let g = random_grid(&lattice, dims, quantum, &mut next);
            let options = NetworkOptions {
                merge_depth: depth,
                ..Default::default()
            };
            let (net, p) = network_matches_grid(&g, ceiling, &options);
            merged += net.sites.iter().filter(|s| s.minima > 1).count();
            dims_seen[p.dimension as usize] += 1;
        }
    }
    // the cases did exercise merged sites and every outcome from closed to 3D
    assert!(merged > 0);
    assert!(dims_seen.iter().all(|&n| n > 0), "{dims_seen:?}");
}

#[test]
fn keeping_apart_the_merges_that_straddle_a_level_is_exact_by_itself() {
    // The argument in network::merge: merging every shallow minimum except those whose range
    // [E(min), E(merge saddle)] contains a level at which the grid's percolation reports
    // something leaves the site graph's percolation exactly the grid's. Checked here without
    // the first attempt (merge everything, keep it if the percolation is unchanged), on random
    // landscapes with merge depths up to half the range of values, where many merges straddle
    // a level.
    let mut next = xorshift(0x51_7cc1_b727_220a);
    let lattice = cell(3.1, 3.7, 4.3, 83.0, 97.0, 112.0);
    let (mut merged, mut straddling) = (0, 0);
    for dims in [[6, 5, 4], [7, 6, 5], [1, 6, 6], [9, 8, 7], [12, 11, 10]] {
        for quantum in [None, Some(8.0)] {
            for depth in [0.05f32, 0.2, 0.5] {
                for ceiling in [0.3, 0.5, f32::INFINITY] {
                    let g = random_grid(&lattice, dims, quantum, &mut next);
                    let grid_p = percolation::percolate(&g, ceiling);
                    let (basins, basin_hops) = network::hops::basins(&g, ceiling);
                    let reference =
                        network::graph::percolate_basins(&g, &basins, &basin_hops, ceiling);
                    let options = network::merge::MergeOptions {
                        depth,
                        symmetry_tolerance: 0.3,
                        try_straddling: false,
                    };
                    let merging =
                        network::merge::merge(&g, &basins, &basin_hops, &[], &options, &reference);
                    straddling += merging.kept_for_percolation;
                    let (sites, orbits, assignment) = network::sites::find_sites(
                        &g,
                        &basins,
                        &merging,
                        &[],
                        &[],
                        &[],
                        &Default::default(),
                    );
                    merged += sites.iter().filter(|s| s.minima > 1).count();
                    let hops =
                        network::hops::site_hops(&g, &basin_hops, &assignment, &sites, &[], 0.76);
                    let graph = network::SiteGraph::new(&sites, &hops);
                    let net = network::Network {
                        ceiling,
                        basins,
                        basin_hops,
                        merging,
                        sites,
                        orbits,
                        assignment,
                        hops,
                        graph,
                    };
                    graph_matches_grid(&g, grid_p, &net);
                }
            }
        }
    }
    assert!(merged > 0 && straddling > 0, "{merged} {straddling}");
    println!("{merged} merged sites, {straddling} minima kept apart for a straddled level");
}

/// What every profile of `pr` must be, whatever the landscape: a chain of face steps from its
/// start to the start's image one `translation` away (same voxel, position moved by exactly
/// the translation), lengths adding up, no point above the bottleneck and one point on it.
fn assert_profile_is_a_closed_repeat(g: &Grid, pr: &network::Profile) {
    let (first, last) = (pr.points.first().unwrap(), pr.points.last().unwrap());
    assert_eq!(first.voxel, pr.start_voxel);
    assert_eq!(last.voxel, pr.start_voxel);
    let t = nalgebra::Vector3::new(
        pr.translation[0] as f64,
        pr.translation[1] as f64,
        pr.translation[2] as f64,
    );
    assert!((last.frac.0 - first.frac.0 - t).norm() < 1e-9);
    let n = g.dims.map(|d| d as f64);
    for w in pr.points.windows(2) {
        let d = w[1].frac.0 - w[0].frac.0;
        let steps: f64 = (0..3).map(|a| (d[a] * n[a]).abs()).sum();
        assert!((steps - 1.0).abs() < 1e-6, "not a face step: {d:?}");
        // distances are measured along the smoothed path: each step is at most the longest
        // voxel step (a convex combination of face steps) and never negative
        let longest = (0..3)
            .map(|a| g.lattice.vector(a).norm() / n[a])
            .fold(0.0, f64::max);
        let step = w[1].distance - w[0].distance;
        assert!(step >= 0.0 && step <= longest + 1e-9, "{step} A");
        assert_eq!(w[1].energy, g.values[w[1].voxel]);
    }
    // no path between the two images is shorter than the straight line
    assert!(pr.length >= g.lattice.frac_delta_length(t) - 1e-9);
    assert!((pr.length - last.distance).abs() < 1e-12);
    assert!(pr.points.iter().all(|p| p.energy <= pr.bottleneck));
    assert!(pr.points.iter().any(|p| p.energy == pr.bottleneck));
}

/// Below `E_d` the winding lattice of every region has rank below d, so at least one of the d
/// translations generating the span at `E_d` is not yet a loop: the highest of their profiles'
/// bottlenecks is `E_d` exactly, and none is above it. For d = 1 the one profile peaks at E_1D.
fn assert_profiles_peak_at_their_thresholds(p: &Percolation, profiles: &[network::Profile]) {
    for t in p.thresholds.iter().flatten() {
        let mine: Vec<_> = profiles
            .iter()
            .filter(|q| q.dimension == t.dimension)
            .collect();
        let translations = t.channel.span.translations();
        assert_eq!(mine.len(), translations.len(), "{}D", t.dimension);
        for (q, tr) in mine.iter().zip(&translations) {
            assert_eq!(q.translation, *tr);
            assert_eq!(q.start_voxel, t.channel.lowest_point);
            assert!(q.bottleneck <= tied(t.energy), "{}D {tr:?}", t.dimension);
        }
        let top = mine
            .iter()
            .map(|q| q.bottleneck)
            .fold(f32::NEG_INFINITY, f32::max);
        assert!(
            top >= t.energy && top <= tied(t.energy),
            "{}D: {top} against {}",
            t.dimension,
            t.energy
        );
    }
}

/// The highest value that still ties with `e` (`profile::TIE_TOLERANCE`: symmetry-equivalent
/// points of the f32 grid differ by a few units in the last place).
fn tied(e: f32) -> f32 {
    e + network::profile::TIE_TOLERANCE * e.abs().max(1.0)
}

#[test]
fn a_channel_that_bends_across_a_cell_face_is_followed_to_its_saddle() {
    // Cube a = 8 A, 40 points per axis. g = (1 - cos 2 pi (x - s(z))) + (1 - cos 2 pi y)
    // + (1 - cos 2 pi z) / 2 with s(z) = -0.3 sin^2 (pi z): a valley along c whose floor bends
    // from x = 0 at the minimum (z = 0, g = 0) to x = -0.3 at z = 1/2, where the floor is at
    // 1, and back. Every loop along c passes the plane z = 1/2, where g >= 1, so E_1D = 1 along
    // [001], reached on the grid point (x, z) = (-0.3, 1/2); loops along a or b pass a value
    // of 2 or more. Under the level 1 the plane z = 1/2 is open at that point only (and at its
    // images, the nearest other one at x = +0.7), so the lowest path from the minimum to its
    // image one c up leaves the cell through the face x = 0 and comes back: at least 40 steps
    // along c and 2 x 12 along a of 0.2 A, 12.8 A.
    let n = 40;
    let tau = 2.0 * std::f64::consts::PI;
    let g = grid_from(
        cell(8.0, 8.0, 8.0, 90.0, 90.0, 90.0),
        [n, n, n],
        |i, j, k| {
            let (x, y, z) = (
                i as f64 / n as f64,
                j as f64 / n as f64,
                k as f64 / n as f64,
            );
            let s = -0.3 * (std::f64::consts::PI * z).sin().powi(2);
            (1.0 - (tau * (x - s)).cos()) + (1.0 - (tau * y).cos()) + 0.5 * (1.0 - (tau * z).cos())
        },
    );
    let p = percolation::percolate(&g, f32::INFINITY);
    assert!(close(p.energy(1).unwrap(), 1.0, 1e-6));
    assert_eq!(direction(&p, 1), [0, 0, 1]);
    assert_eq!(p.threshold(1).unwrap().channel.lowest_point, 0);
    let profiles = network::profile::channel_profiles(&g, &p, &network::ProfileOptions::default());
    assert_profiles_peak_at_their_thresholds(&p, &profiles);
    let pr = profiles.iter().find(|q| q.dimension == 1).unwrap();
    assert_eq!(pr.translation, [0, 0, 1]);
    assert_profile_is_a_closed_repeat(&g, pr);
    // the voxel staircase takes at least 12.8 A; the floor of the valley, the curve
    // x = -2.4 sin^2(pi z/8) A along z over 8 A, is 9.5 A long (integrated here): the profile
    // measures the smoothed path, within 5 % of the curve
    let curve: f64 = (0..10000)
        .map(|i| {
            let z = (i as f64 + 0.5) / 10000.0;
            let slope = -2.4 * std::f64::consts::PI * (tau * z).sin() / 8.0;
            8.0 * (1.0 + slope * slope).sqrt() / 10000.0
        })
        .sum();
    assert!(
        (pr.length - curve).abs() < 0.05 * curve,
        "{} A against the curve's {curve} A",
        pr.length
    );
    let top = pr
        .points
        .iter()
        .find(|q| q.energy == pr.bottleneck)
        .unwrap();
    assert!((top.frac.0 - nalgebra::Vector3::new(-0.3, 0.0, 0.5)).norm() < 1e-9);
    let west = pr.points.iter().map(|q| q.frac.0.x).fold(0.0, f64::min);
    assert!((west + 0.3).abs() < 1e-9, "{west}");
}

#[test]
fn profiles_close_and_peak_at_their_thresholds_on_random_landscapes() {
    // No function to reason about: random values (some quantised, so that many voxels tie),
    // odd and tiny grids, a skewed cell, walls below a ceiling. The percolation (a union-find
    // sweep) and the profiles (a search in the periodic covering) are separate algorithms;
    // they must agree on every threshold.
    let mut next = xorshift(0x2545_f491_4f6c_dd1d);
    let lattice = cell(3.1, 3.7, 4.3, 83.0, 97.0, 112.0);
    let mut checked = [0usize; 4];
    for dims in [
        [6, 5, 4],
        [1, 6, 6],
        [2, 2, 9],
        [9, 8, 7],
        [12, 11, 10],
        [16, 4, 14],
    ] {
        for quantum in [None, Some(6.0)] {
            for ceiling in [0.1, 0.35, 0.5, 0.7, f32::INFINITY] {
                let g = random_grid(&lattice, dims, quantum, &mut next);
                let p = percolation::percolate(&g, ceiling);
                let options = network::ProfileOptions {
                    ceiling,
                    ..Default::default()
                };
                let profiles = network::profile::channel_profiles(&g, &p, &options);
                assert_profiles_peak_at_their_thresholds(&p, &profiles);
                for pr in &profiles {
                    assert_profile_is_a_closed_repeat(&g, pr);
                    assert!(pr.points.iter().all(|q| q.energy < ceiling));
                }
                checked[p.dimension as usize] += 1;
            }
        }
    }
    assert!(checked.iter().all(|&n| n > 0), "{checked:?}");
}

#[test]
fn reference_profiles_close_after_one_repeat_and_peak_at_the_thresholds() {
    // Olivine LiFePO4 (1D along b, then paths across the walls between the tunnels that leave
    // the cell sideways) and spinel Li4Ti5O12 (3D, its lowest paths wander more than half a
    // cell off the straight line): the main job's profiles, on its own grid.
    for (file, ion) in [
        ("LiFePO4_olivine.cif", "Li"),
        ("Li4Ti5O12_spinel.cif", "Li"),
    ] {
        let path = std::path::Path::new(concat!(env!("CARGO_MANIFEST_DIR"), "/../.."))
            .join("structures/reference")
            .join(file);
        let s = hopmap::read::read_structure(&path, None).unwrap();
        let opts = hopmap::analysis::AnalysisOptions::new(
            hopmap::element::Element::from_symbol(ion).unwrap(),
        );
        let a = hopmap::analysis::analyse(&s, &opts).unwrap();
        assert!(a.percolation.dimension > 0, "{file}");
        assert_profiles_peak_at_their_thresholds(&a.percolation, &a.profiles);
        for pr in &a.profiles {
            assert_profile_is_a_closed_repeat(&a.landscape.energy, pr);
        }
    }
}

#[test]
fn the_cubic_spinel_has_equivalent_profiles_along_a_b_and_c() {
    // Li4Ti5O12 is cubic (Fd-3m): a, b and c are related by the threefold axes, so the lowest
    // paths through one repeat along each are images of one another and must be as long and as
    // high. Saddles tied in energy must all be open to the path search for that to hold.
    let path = std::path::Path::new(concat!(env!("CARGO_MANIFEST_DIR"), "/../.."))
        .join("structures/reference/Li4Ti5O12_spinel.cif");
    let s = hopmap::read::read_structure(&path, None).unwrap();
    let opts = hopmap::analysis::AnalysisOptions::new(
        hopmap::element::Element::from_symbol("Li").unwrap(),
    );
    let a = hopmap::analysis::analyse(&s, &opts).unwrap();
    let axes: Vec<_> = a
        .profiles
        .iter()
        .filter(|p| p.dimension == 3)
        .map(|p| (p.translation, p.length, p.bottleneck as f64))
        .collect();
    assert_eq!(axes.len(), 3, "{axes:?}");
    for (t, len, top) in &axes {
        assert!(
            // lengths along the smoothed path depend on the order of the voxel steps (0.1 %
            // here); the bottleneck is exact
            (len - axes[0].1).abs() < 0.01 * axes[0].1 && (top - axes[0].2).abs() < 1e-6,
            "{t:?}: {len:.3} A up to {top:.4} eV, against {:?}: {:.3} A up to {:.4} eV",
            axes[0].0,
            axes[0].1,
            axes[0].2
        );
    }
}
