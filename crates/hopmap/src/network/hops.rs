//! Basins and hops (science notes, section 5).
//!
//! Every open voxel drains by steepest descent to a local minimum: each voxel points to the
//! lowest of its 6 face neighbours when that one is lower, in the `(value, index)` order of
//! [`crate::percolation`]. Face neighbours, not the 26 of the full cube, because the percolation
//! joins face neighbours only: a descent path is then a face-connected path along which the
//! value never rises, so a voxel open at some level is always connected, at that level, to the
//! minimum of its basin. That is what makes the site graph reproduce the grid percolation
//! exactly (see [`crate::network::graph`]).
//!
//! Two basins that touch (face neighbours, possibly across the cell boundary) are joined by a
//! hop for each relative image in which they touch. The saddle of a hop is the lowest
//! `max(E_u, E_v)` over the touching pairs of that image, in the same total order.
//! A basin touching its own translate gives a hop from the site to its own image.

use super::FrameworkIon;
use super::sites::{Site, SiteAssignment};
use crate::grid::Grid;
use crate::lattice::{Frac, Lattice};
use crate::neighbours::NeighbourSearch;
use crate::percolation::{FastMap, IndexSplit, Offset, face_neighbours, total_key};
use nalgebra::Vector3;

/// Marks voxels that belong to no basin (at or above the ceiling, or NaN).
pub const NO_BASIN: u32 = u32::MAX;

/// The basins of the open voxels: which minimum each voxel drains to.
#[derive(Debug, Clone, PartialEq)]
pub struct Basins {
    pub ceiling: f32,
    /// Basin of each voxel, [`NO_BASIN`] for closed voxels.
    pub label: Vec<u32>,
    /// Grid index of the minimum of each basin, in order of discovery (increasing grid index).
    pub minima: Vec<usize>,
}

/// A hop between two basins: basin `b`'s minimum, in image `image` (lattice translation),
/// is reached from basin `a`'s minimum over the saddle voxel. Canonical orientation: `a < b`,
/// or `a == b` and `image` with its first nonzero component positive.
#[derive(Debug, Clone, PartialEq)]
pub struct BasinHop {
    pub a: u32,
    pub b: u32,
    pub image: [i32; 3],
    pub saddle_voxel: usize,
    pub saddle_energy: f32,
    /// Cell of the image of the saddle voxel in the frame where basin `a`'s minimum sits in
    /// cell 0.
    pub saddle_cell: [i32; 3],
}

impl BasinHop {
    /// Position of the saddle in the `(value, index)` order.
    pub fn key(&self) -> u64 {
        total_key(self.saddle_energy, self.saddle_voxel)
    }
}

/// Steepest descent (6 face neighbours) of every voxel strictly below `ceiling`, and the hops
/// between the resulting basins.
pub fn basins(grid: &Grid, ceiling: f32) -> (Basins, Vec<BasinHop>) {
    narrow_first::<i8>(grid, ceiling)
}

/// The basins, the offsets kept in `N` and, if one does not fit, in `i32` (see [`Offset`]).
fn narrow_first<N: Offset>(grid: &Grid, ceiling: f32) -> (Basins, Vec<BasinHop>) {
    basins_with::<N>(grid, ceiling)
        .or_else(|| basins_with::<i32>(grid, ceiling))
        .expect("i32 holds the offsets of a grid of fewer than 2^30 points")
}

const MINIMUM: u8 = 6;
const CLOSED: u8 = 7;

/// The descent direction of each voxel: 0..6 indexes [`face_neighbours`], [`MINIMUM`] or
/// [`CLOSED`].
fn descent(grid: &Grid, ceiling: f32) -> Vec<u8> {
    use rayon::prelude::*;
    let values = &grid.values;
    let plane = grid.dims[1] * grid.dims[2];
    let split = IndexSplit::new(grid.dims);
    let mut down = vec![CLOSED; grid.len()];
    down.par_chunks_mut(plane)
        .enumerate()
        .for_each(|(i, chunk)| {
            for (r, d) in chunk.iter_mut().enumerate() {
                let x = i * plane + r;
                let v = values[x];
                if !(v < ceiling) {
                    continue;
                }
                let mut best = total_key(v, x);
                let mut dir = MINIMUM;
                for (n, (y, _)) in face_neighbours(grid.dims, split.ijk(x))
                    .into_iter()
                    .enumerate()
                {
                    let k = total_key(values[y], y);
                    if k < best {
                        best = k;
                        dir = n as u8;
                    }
                }
                *d = dir;
            }
        });
    down
}

/// The basins and hops, or None when an offset does not fit in `O`.
fn basins_with<O: Offset>(grid: &Grid, ceiling: f32) -> Option<(Basins, Vec<BasinHop>)> {
    let n = grid.len();
    let split = IndexSplit::new(grid.dims);
    let down = descent(grid, ceiling);
    let mut label = vec![NO_BASIN; n];
    // image of each voxel relative to the image of its basin's minimum
    let mut off: Vec<[O; 3]> = vec![[O::default(); 3]; n];
    let mut minima = Vec::new();
    let mut stack: Vec<usize> = Vec::new();
    for x in 0..n {
        if down[x] == CLOSED || label[x] != NO_BASIN {
            continue;
        }
        stack.clear();
        let mut y = x;
        while label[y] == NO_BASIN && down[y] != MINIMUM {
            stack.push(y);
            y = face_neighbours(grid.dims, split.ijk(y))[down[y] as usize].0;
        }
        if label[y] == NO_BASIN {
            label[y] = minima.len() as u32;
            minima.push(y);
        }
        while let Some(z) = stack.pop() {
            let (target, t) = face_neighbours(grid.dims, split.ijk(z))[down[z] as usize];
            label[z] = label[target];
            let ot = off[target];
            off[z] = [
                O::try_put(ot[0].get() - t[0])?,
                O::try_put(ot[1].get() - t[1])?,
                O::try_put(ot[2].get() - t[2])?,
            ];
        }
    }
    drop(down);

    let values = &grid.values;
    let get = |o: [O; 3]| [o[0].get(), o[1].get(), o[2].get()];
    let mut best: FastMap<(u32, u32, [i32; 3]), (u64, usize, [i32; 3])> = FastMap::default();
    for u in 0..n {
        let a = label[u];
        if a == NO_BASIN {
            continue;
        }
        let nb = face_neighbours(grid.dims, split.ijk(u));
        for &(v, t) in [nb[0], nb[2], nb[4]].iter() {
            let b = label[v];
            if b == NO_BASIN {
                continue;
            }
            let (ou, ov) = (get(off[u]), get(off[v]));
            let image = [
                ou[0] + t[0] - ov[0],
                ou[1] + t[1] - ov[1],
                ou[2] + t[2] - ov[2],
            ];
            if a == b && image == [0, 0, 0] {
                continue;
            }
            let (ku, kv) = (total_key(values[u], u), total_key(values[v], v));
            let (key, saddle, cell) = if ku > kv {
                (ku, u, ou)
            } else {
                (kv, v, [ou[0] + t[0], ou[1] + t[1], ou[2] + t[2]])
            };
            // canonical orientation
            let flip = a > b || (a == b && first_nonzero_negative(image));
            let (ka, kb, kimage, kcell) = if flip {
                (
                    b,
                    a,
                    image.map(|x| -x),
                    [cell[0] - image[0], cell[1] - image[1], cell[2] - image[2]],
                )
            } else {
                (a, b, image, cell)
            };
            best.entry((ka, kb, kimage))
                .and_modify(|e| {
                    if key < e.0 {
                        *e = (key, saddle, kcell);
                    }
                })
                .or_insert((key, saddle, kcell));
        }
    }
    let mut hops: Vec<BasinHop> = best
        .into_iter()
        .map(|((a, b, image), (_, saddle, cell))| BasinHop {
            a,
            b,
            image,
            saddle_voxel: saddle,
            saddle_energy: values[saddle],
            saddle_cell: cell,
        })
        .collect();
    hops.sort_by_key(|h| (h.key(), h.a, h.b, h.image));
    Some((
        Basins {
            ceiling,
            label,
            minima,
        },
        hops,
    ))
}

pub(crate) fn first_nonzero_negative(v: [i32; 3]) -> bool {
    v.iter().find(|&&x| x != 0).is_some_and(|&x| x < 0)
}

/// A hop between two sites.
#[derive(Debug, Clone, PartialEq)]
pub struct Hop {
    pub from: usize,
    pub to: usize,
    /// Lattice translation of the `to` site's image: the hop goes from `sites[from].frac` to
    /// `sites[to].frac + image`. A hop from a site to its own translate has `from == to` and a
    /// nonzero image.
    pub image: [i32; 3],
    /// Saddle energy (grid units), the lowest `max(E_u, E_v)` over touching voxel pairs.
    pub saddle_energy: f32,
    /// Grid index of the saddle voxel.
    pub saddle_voxel: usize,
    /// Position of the saddle voxel, unwrapped into the frame of the `from` site.
    pub saddle: Frac,
    /// Distance between the two site images, A.
    pub length: f64,
    /// `saddle_energy - E(from)`.
    pub barrier_forward: f32,
    /// `saddle_energy - E(to)`.
    pub barrier_backward: f32,
    /// Size of the opening at the saddle; None without framework ions.
    pub bottleneck: Option<Bottleneck>,
}

/// The opening at a saddle.
#[derive(Debug, Clone, PartialEq)]
pub struct Bottleneck {
    /// Distance from the saddle to the nearest framework ion minus that ion's Shannon radius, A
    /// (the nearest in that sense).
    pub radius: f64,
    /// Index of that ion in the framework list.
    pub ion: usize,
    /// Centre-to-centre distance to it, A.
    pub distance: f64,
    /// `radius` minus the radius of the mobile ion, A: negative when the ion must squeeze.
    pub clearance: f64,
}

/// Turns basin hops into hops between sites: a basin hop maps to the sites of its two basins
/// and to the image between the site images; hops that stay inside one site image are dropped;
/// of several basin hops mapping to the same site pair and image the lowest saddle is kept.
/// Hops come sorted by saddle (lowest first).
pub fn site_hops(
    grid: &Grid,
    basin_hops: &[BasinHop],
    assignment: &SiteAssignment,
    sites: &[Site],
    framework: &[FrameworkIon],
    mobile_radius: f64,
) -> Vec<Hop> {
    // (site pair, image) -> (saddle key, basin hop, stored the other way round)
    let mut best: FastMap<(u32, u32, [i32; 3]), (u64, usize, bool)> = FastMap::default();
    for (i, h) in basin_hops.iter().enumerate() {
        let (sa, sb) = (
            assignment.site_of_basin[h.a as usize],
            assignment.site_of_basin[h.b as usize],
        );
        let (ca, cb) = (
            assignment.cell_of_basin[h.a as usize],
            assignment.cell_of_basin[h.b as usize],
        );
        let image = [
            ca[0] + h.image[0] - cb[0],
            ca[1] + h.image[1] - cb[1],
            ca[2] + h.image[2] - cb[2],
        ];
        if sa == sb && image == [0, 0, 0] {
            continue;
        }
        let flip = sa > sb || (sa == sb && first_nonzero_negative(image));
        let key = if flip {
            (sb, sa, image.map(|x| -x))
        } else {
            (sa, sb, image)
        };
        let k = h.key();
        best.entry(key)
            .and_modify(|e| {
                if k < e.0 {
                    *e = (k, i, flip);
                }
            })
            .or_insert((k, i, flip));
    }
    let lattice = &grid.lattice;
    let openings = Openings::new(lattice, framework);
    let mut hops: Vec<Hop> = best
        .into_iter()
        .map(|((from, to, image), (_, i, flip))| {
            let h = &basin_hops[i];
            let (from, to) = (from as usize, to as usize);
            // saddle in the frame of the site of basin a (image 0), then, when the hop was
            // turned round, in the frame of the other end, which sits at -image from it
            let ca = assignment.cell_of_basin[h.a as usize];
            let mut saddle_cell = [
                h.saddle_cell[0] + ca[0],
                h.saddle_cell[1] + ca[1],
                h.saddle_cell[2] + ca[2],
            ];
            if flip {
                // the site of basin a is the `to` end now, at `image` from the `from` site
                saddle_cell = [
                    saddle_cell[0] + image[0],
                    saddle_cell[1] + image[1],
                    saddle_cell[2] + image[2],
                ];
            }
            let sv = grid.frac(grid.ijk(h.saddle_voxel)).0;
            let saddle = Frac(
                sv + Vector3::new(
                    saddle_cell[0] as f64,
                    saddle_cell[1] as f64,
                    saddle_cell[2] as f64,
                ),
            );
            let pf = sites[from].frac.0;
            let pt =
                sites[to].frac.0 + Vector3::new(image[0] as f64, image[1] as f64, image[2] as f64);
            let length = lattice.frac_delta_length(pt - pf);
            let bottleneck = openings.nearest(saddle, mobile_radius);
            Hop {
                from,
                to,
                image,
                saddle_energy: h.saddle_energy,
                saddle_voxel: h.saddle_voxel,
                saddle,
                length,
                barrier_forward: h.saddle_energy - sites[from].energy,
                barrier_backward: h.saddle_energy - sites[to].energy,
                bottleneck,
            }
        })
        .collect();
    hops.sort_by_key(|h| {
        (
            total_key(h.saddle_energy, h.saddle_voxel),
            h.from,
            h.to,
            h.image,
        )
    });
    hops
}

/// The framework ion nearest to a point in the sense of [`Bottleneck`] (distance minus its
/// radius), found with a cell list over the ions, so that the site network stays linear in the
/// number of atoms: the search looks within a distance `cutoff` and widens it until the best
/// found is at most `cutoff - largest radius`, beyond which no ion can do better.
struct Openings<'a> {
    lattice: &'a Lattice,
    framework: &'a [FrameworkIon],
    search: NeighbourSearch,
    largest_radius: f64,
    first_cutoff: f64,
}

impl<'a> Openings<'a> {
    fn new(lattice: &'a Lattice, framework: &'a [FrameworkIon]) -> Self {
        let fracs: Vec<Frac> = framework.iter().map(|f| f.frac).collect();
        let largest_radius = framework
            .iter()
            .map(|f| f.radius)
            .filter(|r| r.is_finite())
            .fold(0.0, f64::max);
        // a saddle sits a few A from its nearest ions
        let first_cutoff = 3.0 + largest_radius;
        Openings {
            lattice,
            framework,
            search: NeighbourSearch::new(lattice, &fracs, first_cutoff),
            largest_radius,
            first_cutoff,
        }
    }

    /// The nearest opening at `p`; of ions equally near, the first in the list. None when
    /// there is no framework ion.
    fn nearest(&self, p: Frac, mobile_radius: f64) -> Option<Bottleneck> {
        if self.framework.is_empty() {
            return None;
        }
        let mut cutoff = self.first_cutoff;
        // the cutoff doubles until the answer is sure: within 40 doublings it spans any cell
        // a file can describe; past that (radii that are not finite) every ion is looked at
        for _ in 0..40 {
            let mut best: Option<(f64, usize, f64)> = None;
            self.search.for_each_within(p, cutoff, |n| {
                let r = n.distance - self.framework[n.index].radius;
                if best.is_none_or(|(br, bi, _)| r < br || (r == br && n.index < bi)) {
                    best = Some((r, n.index, n.distance));
                }
            });
            if let Some((radius, ion, distance)) = best
                && radius <= cutoff - self.largest_radius
            {
                return Some(Bottleneck {
                    radius,
                    ion,
                    distance,
                    clearance: radius - mobile_radius,
                });
            }
            cutoff *= 2.0;
        }
        nearest_opening_by_scan(self.lattice, p, self.framework, mobile_radius)
    }
}

/// [`Openings::nearest`] by looking at every ion (the reference of the tests, and the answer
/// when the widening search gives up).
fn nearest_opening_by_scan(
    lattice: &Lattice,
    p: Frac,
    framework: &[FrameworkIon],
    mobile_radius: f64,
) -> Option<Bottleneck> {
    let mut best: Option<Bottleneck> = None;
    for (i, ion) in framework.iter().enumerate() {
        let d = lattice.periodic_distance(p, ion.frac);
        let r = d - ion.radius;
        if best.as_ref().is_none_or(|b| r < b.radius) {
            best = Some(Bottleneck {
                radius: r,
                ion: i,
                distance: d,
                clearance: r - mobile_radius,
            });
        }
    }
    best
}

#[cfg(test)]
mod tests {
    use super::{FrameworkIon, Openings, basins_with, narrow_first, nearest_opening_by_scan};
    use crate::grid::Grid;
    use crate::lattice::{CellParameters, Frac, Lattice};
    use crate::percolation::ZeroOnly;

    #[test]
    fn basins_are_the_same_whatever_type_first_holds_the_offsets() {
        // Random landscapes on small grids (a descent crosses the cell's boundary often):
        // offsets that hold 0 only fail at the first crossing and the search is run again in
        // i32; the answer must be that of i32 (and of i8, which holds these grids' offsets).
        let lattice = crate::percolation::skewed_lattice();
        let mut next = crate::percolation::xorshift(0x9e37_79b9_7f4a_7c15);
        let mut fell_back = 0;
        // (grids one point thick along two axes cross the boundary along the third only)
        let dims_list = [
            [6, 5, 4],
            [1, 6, 6],
            [2, 2, 9],
            [9, 8, 7],
            [9, 1, 1],
            [1, 9, 1],
            [1, 1, 9],
        ];
        for dims in dims_list {
            for ceiling in [0.5, 0.8, f32::INFINITY] {
                let mut g = Grid::new(lattice.clone(), dims, 0.0);
                for v in g.values.iter_mut() {
                    *v = next() as f32;
                }
                let wide = basins_with::<i32>(&g, ceiling).expect("i32 holds every offset");
                if basins_with::<ZeroOnly>(&g, ceiling).is_none() {
                    fell_back += 1;
                }
                assert_eq!(narrow_first::<ZeroOnly>(&g, ceiling), wide, "{dims:?}");
                assert_eq!(basins_with::<i8>(&g, ceiling), Some(wide), "{dims:?}");
            }
        }
        assert!(fell_back >= 12, "{fell_back}");
    }

    #[test]
    fn the_cell_list_finds_the_opening_a_scan_of_every_ion_finds() {
        // A monoclinic cell, ions of three radii at pseudo-random places (a fixed sequence),
        // and points all over it: the widening search must name the ion and the distances that
        // looking at every ion in every nearby image names (an exact result).
        let lattice = Lattice::from_parameters(CellParameters {
            a: 7.3,
            b: 5.1,
            c: 9.6,
            alpha: 90.0,
            beta: 104.0,
            gamma: 90.0,
        })
        .unwrap();
        let mut next = crate::percolation::xorshift(0x2545_f491_4f6c_dd1d);
        let framework: Vec<FrameworkIon> = (0..40)
            .map(|i| FrameworkIon {
                label: format!("X{i}"),
                element: "O".into(),
                frac: Frac::new(next(), next(), next()),
                charge: -2.0,
                radius: [1.40, 0.53, 0.78][i % 3],
                is_anion: i % 3 == 0,
            })
            .collect();
        let mut openings = Openings::new(&lattice, &framework);
        // the widening itself: from a first cutoff far too short, it doubles several times
        let mut short = Openings::new(&lattice, &framework);
        short.first_cutoff = 0.25;
        for i in 0..1000 {
            if i == 500 {
                std::mem::swap(&mut openings, &mut short);
            }
            // points outside [0, 1) as well: saddles are given in the frame of a site image
            let p = Frac::new(3.0 * next() - 1.0, 3.0 * next() - 1.0, 3.0 * next() - 1.0);
            let have = openings.nearest(p, 0.76).unwrap();
            let want = nearest_opening_by_scan(&lattice, p, &framework, 0.76).unwrap();
            assert_eq!(have.ion, want.ion, "{p:?}");
            assert!((have.radius - want.radius).abs() < 1e-9, "{p:?}");
            assert!((have.distance - want.distance).abs() < 1e-9, "{p:?}");
            assert!((have.clearance - (have.radius - 0.76)).abs() < 1e-12);
        }
        assert!(
            Openings::new(&lattice, &[])
                .nearest(Frac::new(0.1, 0.2, 0.3), 0.76)
                .is_none()
        );
    }
}
