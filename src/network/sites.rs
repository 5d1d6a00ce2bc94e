//! Sites: where the mobile ion rests (science notes, section 5).
//!
//! A site is a local minimum of the landscape (the minimum of a basin, see
//! [`crate::network::hops`]), or a few minima closer than a merge distance taken as one. Minima
//! are merged greedily in increasing energy: each joins the lowest site already found within
//! the merge distance of that site's minimum, or starts a new site. A merge is kept only when
//! it cannot change what the network conducts: the merged minima must be connected among
//! themselves (through hops inside the site) below every hop leading out of the site, in the
//! `(value, index)` order. Otherwise the group is split back into single minima. This keeps the
//! site graph exactly equivalent to the grid percolation.
//!
//! Each site gets a refined position (a parabola through the minimum and its two face
//! neighbours on each axis), its orbit under the space-group operations, its coordination by
//! framework anions, and the label of the original site of the mobile ion when one lies close.

use super::hops::{BasinHop, Basins};
use super::{FrameworkIon, MobileSite};
use crate::grid::Grid;
use crate::lattice::{Frac, Lattice};
use crate::percolation::{FastMap, face_neighbours, total_key};
use crate::spacegroup::SymOp;
use nalgebra::Vector3;
use std::fmt;

/// Distances that decide merging, symmetry matching, labels and coordination shells.
#[derive(Debug, Clone, PartialEq)]
pub struct SiteOptions {
    /// Minima closer than this (A) are candidates for merging into one site. 0 disables merging.
    pub merge_distance: f64,
    /// A symmetry image of a site matches a site within this distance (A).
    pub symmetry_tolerance: f64,
    /// An original site of the mobile ion names a site within this distance (A).
    pub label_distance: f64,
    /// Anions within `nearest + shell_width` (A) make the first coordination shell.
    pub shell_width: f64,
    /// No anion farther than this (A) counts as a neighbour.
    pub max_neighbour_distance: f64,
}

impl Default for SiteOptions {
    fn default() -> Self {
        SiteOptions {
            merge_distance: 0.5,
            symmetry_tolerance: 0.3,
            label_distance: 0.5,
            shell_width: 0.6,
            max_neighbour_distance: 4.0,
        }
    }
}

/// A site of the mobile ion.
#[derive(Debug, Clone, PartialEq)]
pub struct Site {
    /// Refined position, each coordinate in [0, 1).
    pub frac: Frac,
    /// Grid index of the lowest minimum of the site.
    pub voxel: usize,
    /// Value at that voxel (grid units). Sites are numbered by increasing energy.
    pub energy: f32,
    /// Number of grid minima merged into this site.
    pub minima: usize,
    /// For a merged site, the level at which its minima are connected among themselves.
    pub internal_saddle: Option<f32>,
    /// True when the site's voxel is also lower than all 26 voxels around it. Basins follow
    /// face neighbours (see [`crate::network::hops`]), so a grid point on the floor of a valley
    /// running diagonally to the grid can be a minimum for face steps only: such sites are
    /// grid artefacts, usually with a tiny `depth`.
    pub minimum_26: bool,
    /// Lowest barrier out of the site (lowest hop saddle minus the site energy; infinite for a
    /// site without hops). Filled in by [`crate::network::build`].
    pub depth: f32,
    /// Index into the orbit list.
    pub orbit: usize,
    pub coordination: Coordination,
    /// Label of the original site of the mobile ion within the label distance, if any.
    pub label: Option<String>,
    /// Distance to that original site, A.
    pub label_distance: Option<f64>,
}

/// Which site each basin belongs to, and in which image: the minimum of basin `b` sits at
/// `grid position + cell_of_basin[b]` in the frame where `sites[site_of_basin[b]].frac` is.
#[derive(Debug, Clone, PartialEq)]
pub struct SiteAssignment {
    pub site_of_basin: Vec<u32>,
    pub cell_of_basin: Vec<[i32; 3]>,
}

/// Sites equivalent under the space-group operations.
#[derive(Debug, Clone, PartialEq)]
pub struct Orbit {
    /// Member sites, lowest first; the first is the representative.
    pub sites: Vec<usize>,
    pub multiplicity: usize,
    /// Energy of the representative.
    pub energy: f32,
    /// Highest minus lowest energy of the members (0 for an exactly symmetric grid).
    pub energy_spread: f32,
    /// False when some operation maps a member onto no site: the grid breaks the symmetry
    /// (a grid whose point counts do not respect it, or operations that do not belong).
    pub complete: bool,
}

/// The shape of a coordination shell, judged from the count and the angles between bonds.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Polyhedron {
    None,
    Linear,
    Bent,
    Trigonal,
    Tetrahedral,
    SquarePlanar,
    Octahedral,
    TrigonalPrismatic,
    Cubic,
    SquareAntiprismatic,
    /// Any other count.
    Fold(usize),
}

impl fmt::Display for Polyhedron {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Polyhedron::None => write!(f, "none"),
            Polyhedron::Linear => write!(f, "linear"),
            Polyhedron::Bent => write!(f, "bent"),
            Polyhedron::Trigonal => write!(f, "trigonal"),
            Polyhedron::Tetrahedral => write!(f, "tetrahedral"),
            Polyhedron::SquarePlanar => write!(f, "square planar"),
            Polyhedron::Octahedral => write!(f, "octahedral"),
            Polyhedron::TrigonalPrismatic => write!(f, "trigonal prismatic"),
            Polyhedron::Cubic => write!(f, "cubic"),
            Polyhedron::SquareAntiprismatic => write!(f, "square antiprismatic"),
            Polyhedron::Fold(n) => write!(f, "{n}-fold"),
        }
    }
}

/// The first shell of framework anions around a site.
#[derive(Debug, Clone, PartialEq)]
pub struct Coordination {
    /// Anions of the shell by element, most numerous first (then by symbol).
    pub anions: Vec<(String, usize)>,
    pub count: usize,
    /// Distances of the shell anions, increasing, A.
    pub distances: Vec<f64>,
    pub polyhedron: Polyhedron,
}

impl fmt::Display for Coordination {
    /// "4 O (tetrahedral)", "5 O + 1 F (octahedral)", "no anion neighbours".
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        if self.count == 0 {
            return write!(f, "no anion neighbours");
        }
        let parts: Vec<String> = self
            .anions
            .iter()
            .map(|(e, n)| format!("{n} {e}"))
            .collect();
        write!(f, "{} ({})", parts.join(" + "), self.polyhedron)
    }
}

/// Sites, their orbits and the basin-to-site map. `ops` may be just the identity (P1); an empty
/// list is taken as P1.
pub fn find_sites(
    grid: &Grid,
    basins: &Basins,
    basin_hops: &[BasinHop],
    ops: &[SymOp],
    framework: &[FrameworkIon],
    mobile: &[MobileSite],
    options: &SiteOptions,
) -> (Vec<Site>, Vec<Orbit>, SiteAssignment) {
    let groups = merged_groups(grid, basins, basin_hops, options.merge_distance);
    let nb = basins.minima.len();
    let mut assignment = SiteAssignment {
        site_of_basin: vec![u32::MAX; nb],
        cell_of_basin: vec![[0; 3]; nb],
    };
    let mut sites = Vec::with_capacity(groups.len());
    for (id, g) in groups.iter().enumerate() {
        let voxel = basins.minima[g.members[0].0];
        let (frac, shift) = refined_position(grid, voxel);
        for &(b, cell) in &g.members {
            assignment.site_of_basin[b] = id as u32;
            assignment.cell_of_basin[b] =
                [cell[0] + shift[0], cell[1] + shift[1], cell[2] + shift[2]];
        }
        let coordination = coordination(&grid.lattice, frac, framework, options);
        let (label, label_distance) =
            nearest_label(&grid.lattice, frac, mobile, options.label_distance);
        sites.push(Site {
            frac,
            voxel,
            energy: grid.values[voxel],
            minima: g.members.len(),
            internal_saddle: g.internal_saddle,
            minimum_26: is_minimum_26(grid, voxel),
            depth: f32::INFINITY,
            orbit: 0,
            coordination,
            label,
            label_distance,
        });
    }
    let orbits = orbits(&grid.lattice, &mut sites, ops, options.symmetry_tolerance);
    (sites, orbits, assignment)
}

struct Group {
    /// (basin, cell of its minimum relative to the first member's), first = lowest
    members: Vec<(usize, [i32; 3])>,
    internal_saddle: Option<f32>,
}

fn merged_groups(
    grid: &Grid,
    basins: &Basins,
    hops: &[BasinHop],
    merge_distance: f64,
) -> Vec<Group> {
    let lattice = &grid.lattice;
    let nb = basins.minima.len();
    let key = |b: usize| total_key(grid.values[basins.minima[b]], basins.minima[b]);
    let mut order: Vec<usize> = (0..nb).collect();
    order.sort_by_key(|&b| key(b));
    let pos = |b: usize| grid.frac(grid.ijk(basins.minima[b]));

    // greedy clustering around the lowest minimum of each group
    let mut groups: Vec<Vec<(usize, [i32; 3])>> = Vec::new();
    if merge_distance > 0.0 {
        let mut index = PointIndex::new(lattice, merge_distance);
        for &b in &order {
            let p = pos(b);
            let near = index.within(p);
            match near.iter().map(|&(g, _)| g).min() {
                Some(g) => {
                    let rep = pos(groups[g][0].0);
                    let cell = nearest_image(lattice, rep, p);
                    groups[g].push((b, cell));
                }
                None => {
                    index.insert(groups.len(), p);
                    groups.push(vec![(b, [0, 0, 0])]);
                }
            }
        }
    } else {
        groups = order.iter().map(|&b| vec![(b, [0, 0, 0])]).collect();
    }

    // keep a merge only when the members connect inside the group below every hop out of it
    let mut group_of = vec![0usize; nb];
    let mut cell_of = vec![[0i32; 3]; nb];
    for (g, members) in groups.iter().enumerate() {
        for &(b, c) in members {
            group_of[b] = g;
            cell_of[b] = c;
        }
    }
    let mut internal: Vec<Vec<&BasinHop>> = vec![Vec::new(); groups.len()];
    let mut lowest_out = vec![u64::MAX; groups.len()];
    for h in hops {
        let (ga, gb) = (group_of[h.a as usize], group_of[h.b as usize]);
        let (ca, cb) = (cell_of[h.a as usize], cell_of[h.b as usize]);
        let t = [
            ca[0] + h.image[0] - cb[0],
            ca[1] + h.image[1] - cb[1],
            ca[2] + h.image[2] - cb[2],
        ];
        if ga == gb && t == [0, 0, 0] {
            internal[ga].push(h);
        } else {
            lowest_out[ga] = lowest_out[ga].min(h.key());
            lowest_out[gb] = lowest_out[gb].min(h.key());
        }
    }
    let mut out: Vec<Group> = Vec::new();
    for (g, members) in groups.into_iter().enumerate() {
        if members.len() == 1 {
            out.push(Group {
                members,
                internal_saddle: None,
            });
            continue;
        }
        let connected = connection_level(&members, &internal[g]);
        match connected {
            Some((k, e)) if k < lowest_out[g] => out.push(Group {
                members,
                internal_saddle: Some(e),
            }),
            _ => {
                for (b, _) in members {
                    out.push(Group {
                        members: vec![(b, [0, 0, 0])],
                        internal_saddle: None,
                    });
                }
            }
        }
    }
    out.sort_by_key(|g| key(g.members[0].0));
    out
}

/// The `(key, energy)` of the internal hop that connects all members, None if they never do.
fn connection_level(members: &[(usize, [i32; 3])], internal: &[&BasinHop]) -> Option<(u64, f32)> {
    let local: FastMap<usize, usize> = members
        .iter()
        .enumerate()
        .map(|(i, &(b, _))| (b, i))
        .collect();
    let mut parent: Vec<usize> = (0..members.len()).collect();
    fn find(p: &mut [usize], mut x: usize) -> usize {
        while p[x] != x {
            p[x] = p[p[x]];
            x = p[x];
        }
        x
    }
    let mut hops: Vec<&&BasinHop> = internal.iter().collect();
    hops.sort_by_key(|h| h.key());
    let mut parts = members.len();
    for h in hops {
        let (a, b) = (local[&(h.a as usize)], local[&(h.b as usize)]);
        let (ra, rb) = (find(&mut parent, a), find(&mut parent, b));
        if ra != rb {
            parent[ra] = rb;
            parts -= 1;
            if parts == 1 {
                return Some((h.key(), h.saddle_energy));
            }
        }
    }
    None
}

fn is_minimum_26(grid: &Grid, voxel: usize) -> bool {
    let [i, j, k] = grid.ijk(voxel);
    let key = total_key(grid.values[voxel], voxel);
    let d = grid.dims;
    for di in [d[0] - 1, 0, 1] {
        for dj in [d[1] - 1, 0, 1] {
            for dk in [d[2] - 1, 0, 1] {
                let y = grid.index((i + di) % d[0], (j + dj) % d[1], (k + dk) % d[2]);
                if y != voxel && total_key(grid.values[y], y) < key {
                    return false;
                }
            }
        }
    }
    true
}

/// Sub-voxel position of a minimum: on each axis the vertex of the parabola through the
/// voxel and its two face neighbours (kept within half a voxel; the voxel itself when the
/// neighbours are not finite or the parabola opens downwards). Returns the position wrapped
/// into [0, 1) and the cell the voxel's own image sits in, relative to that position.
fn refined_position(grid: &Grid, voxel: usize) -> (Frac, [i32; 3]) {
    let ijk = grid.ijk(voxel);
    let nb = face_neighbours(grid.dims, ijk);
    let f0 = grid.values[voxel] as f64;
    let mut p = [0.0; 3];
    let mut shift = [0i32; 3];
    for a in 0..3 {
        let (fp, fm) = (
            grid.values[nb[2 * a].0] as f64,
            grid.values[nb[2 * a + 1].0] as f64,
        );
        let curv = fm - 2.0 * f0 + fp;
        let delta = if grid.dims[a] >= 3 && fp.is_finite() && fm.is_finite() && curv > 0.0 {
            (0.5 * (fm - fp) / curv).clamp(-0.5, 0.5)
        } else {
            0.0
        };
        let x = (ijk[a] as f64 + delta) / grid.dims[a] as f64;
        let mut fl = x.floor();
        let mut w = x - fl;
        if w >= 1.0 - 1e-12 {
            w = 0.0;
            fl += 1.0;
        }
        p[a] = w;
        shift[a] = -(fl as i32);
    }
    (Frac::new(p[0], p[1], p[2]), shift)
}

/// The lattice translation `k` that brings `q + k` closest to `p`.
pub(crate) fn nearest_image(lattice: &Lattice, p: Frac, q: Frac) -> [i32; 3] {
    let d0 = p.min_image_delta(q);
    let m = (p.0 - q.0 - d0).map(|x| x.round());
    let mut best = (f64::INFINITY, [0i32; 3]);
    for i in -1..=1 {
        for j in -1..=1 {
            for k in -1..=1 {
                let e = Vector3::new(i as f64, j as f64, k as f64);
                let d = lattice.frac_delta_length(e - d0);
                if d < best.0 - 1e-12 {
                    best = (d, [m[0] as i32 + i, m[1] as i32 + j, m[2] as i32 + k]);
                }
            }
        }
    }
    best.1
}

/// A bin grid over the cell for finding points within a radius (periodic), with bins at least
/// one radius wide across.
pub(crate) struct PointIndex<'a> {
    lattice: &'a Lattice,
    radius: f64,
    bins: [usize; 3],
    cells: FastMap<[usize; 3], Vec<(usize, Frac)>>,
}

impl<'a> PointIndex<'a> {
    pub(crate) fn new(lattice: &'a Lattice, radius: f64) -> Self {
        let w = lattice.perpendicular_widths();
        let bins = w.map(|w| ((w / radius.max(1e-6)).floor() as usize).clamp(1, 256));
        PointIndex {
            lattice,
            radius,
            bins,
            cells: FastMap::default(),
        }
    }
    fn bin(&self, p: Frac) -> [usize; 3] {
        let w = p.wrapped();
        [0, 1, 2].map(|a| ((w.0[a] * self.bins[a] as f64) as usize).min(self.bins[a] - 1))
    }
    pub(crate) fn insert(&mut self, id: usize, p: Frac) {
        let b = self.bin(p);
        self.cells.entry(b).or_default().push((id, p));
    }
    /// Points closer than the radius to `p`, with their distances (A).
    pub(crate) fn within(&self, p: Frac) -> Vec<(usize, f64)> {
        let b = self.bin(p);
        let range = |a: usize| -> Vec<usize> {
            let n = self.bins[a];
            if n < 3 {
                (0..n).collect()
            } else {
                vec![(b[a] + n - 1) % n, b[a], (b[a] + 1) % n]
            }
        };
        let mut out = Vec::new();
        for i in range(0) {
            for j in range(1) {
                for k in range(2) {
                    if let Some(list) = self.cells.get(&[i, j, k]) {
                        for &(id, q) in list {
                            let d = self.lattice.periodic_distance(p, q);
                            if d < self.radius {
                                out.push((id, d));
                            }
                        }
                    }
                }
            }
        }
        out
    }
}

fn orbits(lattice: &Lattice, sites: &mut [Site], ops: &[SymOp], tol: f64) -> Vec<Orbit> {
    let n = sites.len();
    let identity = [SymOp::identity()];
    let ops = if ops.is_empty() { &identity[..] } else { ops };
    let mut index = PointIndex::new(lattice, tol);
    for (i, s) in sites.iter().enumerate() {
        index.insert(i, s.frac);
    }
    let mut parent: Vec<usize> = (0..n).collect();
    fn find(p: &mut [usize], mut x: usize) -> usize {
        while p[x] != x {
            p[x] = p[p[x]];
            x = p[x];
        }
        x
    }
    let mut unmatched = vec![false; n];
    for i in 0..n {
        for op in ops {
            let q = op.apply(sites[i].frac).wrapped();
            let hit = index
                .within(q)
                .into_iter()
                .min_by(|a, b| a.1.total_cmp(&b.1));
            match hit {
                Some((j, _)) => {
                    let (ri, rj) = (find(&mut parent, i), find(&mut parent, j));
                    if ri != rj {
                        parent[ri.max(rj)] = ri.min(rj);
                    }
                }
                None => unmatched[i] = true,
            }
        }
    }
    let mut orbit_of_root: FastMap<usize, usize> = FastMap::default();
    let mut out: Vec<Orbit> = Vec::new();
    for i in 0..n {
        let r = find(&mut parent, i);
        let next = out.len();
        let o = *orbit_of_root.entry(r).or_insert(next);
        if o == next {
            out.push(Orbit {
                sites: Vec::new(),
                multiplicity: 0,
                energy: sites[i].energy,
                energy_spread: 0.0,
                complete: true,
            });
        }
        let orbit = &mut out[o];
        orbit.sites.push(i);
        orbit.multiplicity += 1;
        orbit.energy_spread = orbit.energy_spread.max(sites[i].energy - orbit.energy);
        orbit.complete &= !unmatched[i];
        sites[i].orbit = o;
    }
    out
}

fn coordination(
    lattice: &Lattice,
    p: Frac,
    framework: &[FrameworkIon],
    options: &SiteOptions,
) -> Coordination {
    let cutoff = options.max_neighbour_distance;
    let widths = lattice.perpendicular_widths();
    let reach = widths.map(|w| (cutoff / w).ceil() as i32 + 1);
    let mut near: Vec<(f64, usize, Vector3<f64>)> = Vec::new();
    for (idx, ion) in framework.iter().enumerate() {
        if !ion.is_anion {
            continue;
        }
        let d0 = ion.frac.min_image_delta(p);
        for i in -reach[0]..=reach[0] {
            for j in -reach[1]..=reach[1] {
                for k in -reach[2]..=reach[2] {
                    let v = lattice.matrix() * (d0 + Vector3::new(i as f64, j as f64, k as f64));
                    let d = v.norm();
                    if d <= cutoff && d > 1e-9 {
                        near.push((d, idx, v));
                    }
                }
            }
        }
    }
    near.sort_by(|a, b| a.0.total_cmp(&b.0));
    let shell: Vec<&(f64, usize, Vector3<f64>)> = match near.first() {
        Some(&(rmin, _, _)) => near
            .iter()
            .take_while(|n| n.0 <= rmin + options.shell_width)
            .collect(),
        None => Vec::new(),
    };
    let mut counts: Vec<(String, usize)> = Vec::new();
    for n in &shell {
        let el = &framework[n.1].element;
        match counts.iter_mut().find(|(e, _)| e == el) {
            Some(c) => c.1 += 1,
            None => counts.push((el.clone(), 1)),
        }
    }
    counts.sort_by(|a, b| b.1.cmp(&a.1).then(a.0.cmp(&b.0)));
    let dirs: Vec<Vector3<f64>> = shell.iter().map(|n| n.2 / n.0).collect();
    Coordination {
        anions: counts,
        count: shell.len(),
        distances: shell.iter().map(|n| n.0).collect(),
        polyhedron: classify(&dirs),
    }
}

/// Shape of a shell from its bond directions (unit vectors): the count, and how many pairs of
/// bonds point (nearly, within 30 degrees) opposite ways.
fn classify(dirs: &[Vector3<f64>]) -> Polyhedron {
    let opposite = {
        let mut n = 0;
        for i in 0..dirs.len() {
            for j in i + 1..dirs.len() {
                if dirs[i].dot(&dirs[j]) < (150f64).to_radians().cos() {
                    n += 1;
                }
            }
        }
        n
    };
    match dirs.len() {
        0 => Polyhedron::None,
        2 if opposite == 1 => Polyhedron::Linear,
        2 => Polyhedron::Bent,
        3 => Polyhedron::Trigonal,
        4 if opposite >= 2 => Polyhedron::SquarePlanar,
        4 => Polyhedron::Tetrahedral,
        6 if opposite >= 2 => Polyhedron::Octahedral,
        6 => Polyhedron::TrigonalPrismatic,
        8 if opposite >= 4 => Polyhedron::Cubic,
        8 if opposite == 0 => Polyhedron::SquareAntiprismatic,
        n => Polyhedron::Fold(n),
    }
}

fn nearest_label(
    lattice: &Lattice,
    p: Frac,
    mobile: &[MobileSite],
    max: f64,
) -> (Option<String>, Option<f64>) {
    mobile
        .iter()
        .map(|m| (m, lattice.periodic_distance(p, m.frac)))
        .filter(|(_, d)| *d <= max)
        .min_by(|a, b| a.1.total_cmp(&b.1))
        .map_or((None, None), |(m, d)| (Some(m.label.clone()), Some(d)))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::lattice::CellParameters;

    #[test]
    fn nearest_image_finds_the_translate_across_the_boundary() {
        let l = Lattice::from_parameters(CellParameters {
            a: 5.0,
            b: 5.0,
            c: 5.0,
            alpha: 90.0,
            beta: 90.0,
            gamma: 90.0,
        })
        .unwrap();
        assert_eq!(
            nearest_image(&l, Frac::new(0.02, 0.5, 0.5), Frac::new(0.97, 0.5, 0.5)),
            [-1, 0, 0]
        );
        assert_eq!(
            nearest_image(&l, Frac::new(0.5, 0.5, 0.5), Frac::new(0.4, 0.5, 0.5)),
            [0, 0, 0]
        );
    }

    #[test]
    fn shells_are_classified_by_angles() {
        let t = [
            [1.0, 1.0, 1.0],
            [-1.0, -1.0, 1.0],
            [-1.0, 1.0, -1.0],
            [1.0, -1.0, -1.0],
        ]
        .map(|v| Vector3::new(v[0], v[1], v[2]).normalize());
        assert_eq!(classify(&t), Polyhedron::Tetrahedral);
        let sq = [
            [1.0, 0.0, 0.0],
            [-1.0, 0.0, 0.0],
            [0.0, 1.0, 0.0],
            [0.0, -1.0, 0.0],
        ]
        .map(|v| Vector3::new(v[0], v[1], v[2]));
        assert_eq!(classify(&sq), Polyhedron::SquarePlanar);
    }
}
