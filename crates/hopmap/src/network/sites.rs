//! Sites: where the mobile ion rests (science notes, section 5).
//!
//! A site is a local minimum of the landscape (the minimum of a basin, see
//! [`crate::network::hops`]), together with the shallower minima merged into it by persistence
//! (see [`crate::network::merge`]). Its position is its lowest minimum's (midway between its two
//! lowest when exactly two are tied).
//!
//! Each site gets a refined position (a parabola through the minimum and its two face
//! neighbours on each axis), its orbit under the space-group operations, its coordination by
//! framework anions, and the label of the original site of the mobile ion when one lies close.

use super::hops::Basins;
use super::merge::{self, Group, Merging};
use super::{FrameworkIon, MobileSite};
use crate::grid::Grid;
use crate::lattice::{Frac, Lattice};
use crate::percolation::{FastMap, face_neighbours, total_key};
use crate::spacegroup::SymOp;
use nalgebra::Vector3;
use std::fmt;

/// Distances that decide symmetry matching, labels and coordination shells.
#[derive(Debug, Clone, PartialEq)]
pub struct SiteOptions {
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
    /// Number of grid minima merged into this site (1 for a single minimum).
    pub minima: usize,
    /// For a merged site, its highest merge saddle: the level from which its minima are
    /// connected among themselves (grid units).
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

/// Sites, their orbits and the basin-to-site map, one site per group of `merging`. `ops` may be
/// just the identity (P1); an empty list is taken as P1.
pub fn find_sites(
    grid: &Grid,
    basins: &Basins,
    merging: &Merging,
    ops: &[SymOp],
    framework: &[FrameworkIon],
    mobile: &[MobileSite],
    options: &SiteOptions,
) -> (Vec<Site>, Vec<Orbit>, SiteAssignment) {
    let nb = basins.minima.len();
    let mut assignment = SiteAssignment {
        site_of_basin: vec![u32::MAX; nb],
        cell_of_basin: vec![[0; 3]; nb],
    };
    let mut sites = Vec::with_capacity(merging.groups.len());
    let anion_images = AnionImages::new(&grid.lattice, framework, options.max_neighbour_distance);
    for (id, g) in merging.groups.iter().enumerate() {
        let voxel = basins.minima[g.members[0].0];
        let (frac, shift) = site_position(grid, basins, g);
        for &(b, cell) in &g.members {
            assignment.site_of_basin[b] = id as u32;
            assignment.cell_of_basin[b] =
                [cell[0] + shift[0], cell[1] + shift[1], cell[2] + shift[2]];
        }
        let coordination = coordination(&grid.lattice, frac, framework, &anion_images, options);
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
    let minima: Vec<(Frac, usize)> = (0..nb)
        .filter(|&b| assignment.site_of_basin[b] != u32::MAX)
        .map(|b| {
            (
                grid.frac(grid.ijk(basins.minima[b])),
                assignment.site_of_basin[b] as usize,
            )
        })
        .collect();
    let orbits = orbits(
        &grid.lattice,
        &mut sites,
        ops,
        options.symmetry_tolerance,
        &minima,
        merging.depth,
    );
    (sites, orbits, assignment)
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

/// Position of a site: the refined position of its lowest minimum, or the midpoint of its two
/// lowest when they are tied (see [`crate::network::merge::TIE`]): a site that the landscape
/// splits into two equal minima across a mirror or a twofold axis sits on it. Returns the
/// position wrapped into [0, 1) and the cell the first member's voxel sits in, relative to
/// that position.
fn site_position(grid: &Grid, basins: &Basins, group: &Group) -> (Frac, [i32; 3]) {
    let mut sum = Vector3::zeros();
    let mut n = 0.0;
    for &(b, c) in merge::position_members(grid, basins, group) {
        let (p, shift) = refined_position(grid, basins.minima[b]);
        let cell = [c[0] - shift[0], c[1] - shift[1], c[2] - shift[2]];
        sum += p.0 + Vector3::new(cell[0] as f64, cell[1] as f64, cell[2] as f64);
        n += 1.0;
    }
    let mean = sum / n;
    let fl = mean.map(|x| x.floor());
    let mut w = mean - fl;
    let mut shift = [0i32; 3];
    for a in 0..3 {
        let mut f = fl[a];
        if w[a] >= 1.0 - 1e-12 {
            w[a] = 0.0;
            f += 1.0;
        }
        shift[a] = -(f as i32);
    }
    (Frac(w), shift)
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

/// A bin grid over the cell for finding points within a radius (periodic), with bins at least
/// one radius wide across.
pub(crate) struct PointIndex<'a> {
    lattice: &'a Lattice,
    radius: f64,
    bins: [usize; 3],
    /// Points by bin, `(i * bins[1] + j) * bins[2] + k`.
    cells: Vec<Vec<(usize, Frac)>>,
}

impl<'a> PointIndex<'a> {
    /// At most this many bins per axis: wider bins still find every point within the radius,
    /// and the bins stay a small dense table.
    const MAX_BINS: usize = 32;

    pub(crate) fn new(lattice: &'a Lattice, radius: f64) -> Self {
        let w = lattice.perpendicular_widths();
        let bins = w.map(|w| {
            let n = (w / radius.max(1e-6)).floor();
            if n.is_finite() {
                (n as usize).clamp(1, Self::MAX_BINS)
            } else {
                1
            }
        });
        PointIndex {
            lattice,
            radius,
            bins,
            cells: vec![Vec::new(); bins[0] * bins[1] * bins[2]],
        }
    }
    fn bin(&self, p: Frac) -> [usize; 3] {
        let w = p.wrapped();
        [0, 1, 2].map(|a| ((w.0[a] * self.bins[a] as f64) as usize).min(self.bins[a] - 1))
    }
    fn cell(&self, b: [usize; 3]) -> usize {
        (b[0] * self.bins[1] + b[1]) * self.bins[2] + b[2]
    }
    pub(crate) fn insert(&mut self, id: usize, p: Frac) {
        let c = self.cell(self.bin(p));
        self.cells[c].push((id, p));
    }
    /// Points closer than the radius to `p`, with their distances (A).
    pub(crate) fn within(&self, p: Frac) -> Vec<(usize, f64)> {
        let b = self.bin(p);
        // the bin and its two neighbours on each axis (fewer when the axis has fewer bins)
        let range = |a: usize| -> ([usize; 3], usize) {
            let n = self.bins[a];
            if n < 3 {
                ([0, 1 % n, 0], n)
            } else {
                ([(b[a] + n - 1) % n, b[a], (b[a] + 1) % n], 3)
            }
        };
        let (ri, ni) = range(0);
        let (rj, nj) = range(1);
        let (rk, nk) = range(2);
        // With three bins or more on every axis the cell is at least three radii wide across
        // each pair of faces, so a point within the radius differs from `p` by less than 1/3
        // in every fractional coordinate: the nearest image is the one of the smallest
        // fractional difference, and no other image needs a look.
        let wide = self.bins.iter().all(|&n| n >= 3);
        let mut out = Vec::new();
        for &i in &ri[..ni] {
            for &j in &rj[..nj] {
                for &k in &rk[..nk] {
                    for &(id, q) in &self.cells[self.cell([i, j, k])] {
                        let d = if wide {
                            self.lattice.frac_delta_length(p.min_image_delta(q))
                        } else {
                            self.lattice.periodic_distance(p, q)
                        };
                        if d < self.radius {
                            out.push((id, d));
                        }
                    }
                }
            }
        }
        out
    }
}

/// Orbits of the sites: site `i` and site `j` are equivalent when an operation maps `i` within
/// `tol` (A) of `j`; failing that, within `tol` of one of `j`'s merged minima (`minima`: the
/// grid position of each minimum and its site), provided the two energies agree within
/// `energy_tol` (a site whose lowest minimum the grid picked among equivalent ones, such as a
/// ring of equivalent minima merged into one site).
fn orbits(
    lattice: &Lattice,
    sites: &mut [Site],
    ops: &[SymOp],
    tol: f64,
    minima: &[(Frac, usize)],
    energy_tol: f32,
) -> Vec<Orbit> {
    let n = sites.len();
    let identity = [SymOp::identity()];
    let ops = if ops.is_empty() { &identity[..] } else { ops };
    let mut index = PointIndex::new(lattice, tol);
    for (i, s) in sites.iter().enumerate() {
        index.insert(i, s.frac);
    }
    let mut member_index = PointIndex::new(lattice, tol);
    for (k, &(p, _)) in minima.iter().enumerate() {
        member_index.insert(k, p);
    }
    let mut parent: Vec<usize> = (0..n).collect();
    fn find(p: &mut [usize], mut x: usize) -> usize {
        while p[x] != x {
            p[x] = p[p[x]];
            x = p[x];
        }
        x
    }
    let nearest = |v: Vec<(usize, f64)>| {
        v.into_iter()
            .min_by(|a, b| a.1.total_cmp(&b.1).then(a.0.cmp(&b.0)))
    };
    let mut unmatched = vec![false; n];
    for i in 0..n {
        for op in ops {
            let q = op.apply(sites[i].frac).wrapped();
            let hit = nearest(index.within(q)).map(|(j, _)| j).or_else(|| {
                nearest(member_index.within(q))
                    .map(|(k, _)| minima[k].1)
                    .filter(|&j| (sites[j].energy - sites[i].energy).abs() <= energy_tol)
            });
            match hit {
                Some(j) => {
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

/// The images of the framework anions that lie within a distance of the cell, binned once in
/// Cartesian cubes as wide as that distance, so that the neighbours of a site are found among
/// the 27 cubes around it: the cost per site does not grow with the cell.
struct AnionImages {
    /// Lower corner of the binned box (A) and side of a cube (A).
    lo: Vector3<f64>,
    side: f64,
    bins: [usize; 3],
    /// CSR: the images of cube `c` are `entries[start[c]..start[c + 1]]`, each the index of
    /// the anion in the framework and its Cartesian position.
    start: Vec<usize>,
    entries: Vec<(usize, Vector3<f64>)>,
}

impl AnionImages {
    fn new(lattice: &Lattice, framework: &[FrameworkIon], cutoff: f64) -> Self {
        let m = lattice.matrix();
        let side = cutoff.max(0.5);
        // the cell's bounding box, widened by the cutoff
        let mut lo = Vector3::repeat(f64::INFINITY);
        let mut hi = Vector3::repeat(f64::NEG_INFINITY);
        for c in 0..8 {
            let v = m * Vector3::new((c & 1) as f64, ((c >> 1) & 1) as f64, ((c >> 2) & 1) as f64);
            lo = lo.inf(&v);
            hi = hi.sup(&v);
        }
        let pad = Vector3::repeat(cutoff + 1e-6);
        let (lo, hi) = (lo - pad, hi + pad);
        let widths = lattice.perpendicular_widths();
        // a fractional coordinate is at most |v| / width: the box's diagonal bounds the shifts
        let reach = widths.map(|w| ((hi - lo).norm() / w).ceil() as i32 + 1);
        let mut found = Vec::new();
        for (idx, ion) in framework.iter().enumerate() {
            if !ion.is_anion {
                continue;
            }
            let f = ion.frac.wrapped().0;
            for i in -reach[0]..=reach[0] {
                for j in -reach[1]..=reach[1] {
                    for k in -reach[2]..=reach[2] {
                        let v = m * (f + Vector3::new(i as f64, j as f64, k as f64));
                        if (0..3).all(|a| v[a] >= lo[a] && v[a] <= hi[a]) {
                            found.push((idx, v));
                        }
                    }
                }
            }
        }
        let bins = [0, 1, 2].map(|a| (((hi[a] - lo[a]) / side).floor() as usize).max(1));
        let cube = |v: &Vector3<f64>| {
            let b = [0, 1, 2].map(|a| (((v[a] - lo[a]) / side) as usize).min(bins[a] - 1));
            (b[0] * bins[1] + b[1]) * bins[2] + b[2]
        };
        let mut start = vec![0usize; bins[0] * bins[1] * bins[2] + 1];
        for e in &found {
            start[cube(&e.1) + 1] += 1;
        }
        for c in 1..start.len() {
            start[c] += start[c - 1];
        }
        let mut fill = start.clone();
        let mut entries = vec![(0, Vector3::zeros()); found.len()];
        for e in found {
            let c = cube(&e.1);
            entries[fill[c]] = e;
            fill[c] += 1;
        }
        AnionImages {
            lo,
            side,
            bins,
            start,
            entries,
        }
    }

    /// Anion images within `cutoff` (A, at most the cutoff the images were built for) of the
    /// Cartesian point `c` of the cell, and perhaps a few farther ones.
    fn candidates(&self, c: Vector3<f64>, out: &mut Vec<usize>) {
        let b = [0, 1, 2].map(|a| ((c[a] - self.lo[a]) / self.side).floor() as i64);
        for i in b[0] - 1..=b[0] + 1 {
            for j in b[1] - 1..=b[1] + 1 {
                for k in b[2] - 1..=b[2] + 1 {
                    let (n0, n1, n2) = (
                        self.bins[0] as i64,
                        self.bins[1] as i64,
                        self.bins[2] as i64,
                    );
                    if i < 0 || j < 0 || k < 0 || i >= n0 || j >= n1 || k >= n2 {
                        continue;
                    }
                    let cube = ((i * n1 + j) * n2 + k) as usize;
                    out.extend(self.start[cube]..self.start[cube + 1]);
                }
            }
        }
    }
}

fn coordination(
    lattice: &Lattice,
    p: Frac,
    framework: &[FrameworkIon],
    images: &AnionImages,
    options: &SiteOptions,
) -> Coordination {
    let mut near = near_anions(
        lattice,
        p,
        framework,
        images,
        options.max_neighbour_distance,
    );
    near.sort_by(|a, b| a.0.total_cmp(&b.0));
    shell_of(near, framework, options)
}

/// (distance, anion, displacement) of every anion image within `cutoff` (A) of `p`.
fn near_anions(
    lattice: &Lattice,
    p: Frac,
    framework: &[FrameworkIon],
    images: &AnionImages,
    cutoff: f64,
) -> Vec<(f64, usize, Vector3<f64>)> {
    // Every image of an anion within the cutoff of the site: the displacement `d0 + s` from
    // the site (d0 the minimum-image displacement, s a whole translation), in the order of
    // (anion, s) and computed as `M (d0 + s)`, so that ties sort the same whatever the bins.
    let m = lattice.matrix();
    let wrapped = p.wrapped();
    let mut idxs = Vec::new();
    images.candidates(m * wrapped.0, &mut idxs);
    let mut found: Vec<(usize, [i64; 3], Vector3<f64>)> = idxs
        .into_iter()
        .map(|e| {
            let (idx, v) = images.entries[e];
            let ion = &framework[idx];
            let d0 = ion.frac.min_image_delta(p);
            // fractional displacement of this image from the site, and its whole part past d0
            // (from the site's position in the cell, where the bins were searched)
            let f = lattice.inverse() * v - wrapped.0;
            let s = [0, 1, 2].map(|a| (f[a] - d0[a]).round() as i64);
            (idx, s, d0)
        })
        .collect();
    found.sort_by(|a, b| a.0.cmp(&b.0).then(a.1.cmp(&b.1)));
    found.dedup_by(|a, b| a.0 == b.0 && a.1 == b.1);
    let mut near: Vec<(f64, usize, Vector3<f64>)> = Vec::new();
    for (idx, s, d0) in found {
        let v = m * (d0 + Vector3::new(s[0] as f64, s[1] as f64, s[2] as f64));
        let d = v.norm();
        if d <= cutoff && d > 1e-9 {
            near.push((d, idx, v));
        }
    }
    near
}

/// The first shell of a sorted neighbour list, counted and classified.
fn shell_of(
    near: Vec<(f64, usize, Vector3<f64>)>,
    framework: &[FrameworkIon],
    options: &SiteOptions,
) -> Coordination {
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

    /// The anion images found through the bins are exactly those of a loop over every anion
    /// and every translation (the direct method), in the same order, in a small oblique cell
    /// where one anion has several images within the cutoff and in a larger one.
    #[test]
    fn binned_anion_neighbours_equal_the_direct_loop() {
        for (params, cutoff) in [
            ((4.1, 4.6, 5.3, 71.0, 97.0, 112.0), 4.0),
            ((9.0, 11.0, 7.5, 90.0, 101.0, 90.0), 4.0),
        ] {
            let lattice = Lattice::from_parameters(crate::lattice::CellParameters {
                a: params.0,
                b: params.1,
                c: params.2,
                alpha: params.3,
                beta: params.4,
                gamma: params.5,
            })
            .unwrap();
            let mut seed = 12345u64;
            let mut rnd = || {
                seed = seed
                    .wrapping_mul(6364136223846793005)
                    .wrapping_add(1442695040888963407);
                ((seed >> 11) as f64 / (1u64 << 53) as f64) * 1.6 - 0.3
            };
            let framework: Vec<FrameworkIon> = (0..7)
                .map(|i| FrameworkIon {
                    label: format!("O{i}"),
                    element: "O".into(),
                    frac: Frac::new(rnd(), rnd(), rnd()),
                    charge: -2.0,
                    radius: 1.4,
                    is_anion: i != 3,
                })
                .collect();
            let images = AnionImages::new(&lattice, &framework, cutoff);
            let mut found = 0;
            for _ in 0..50 {
                let p = Frac::new(rnd(), rnd(), rnd());
                let got = near_anions(&lattice, p, &framework, &images, cutoff);
                let widths = lattice.perpendicular_widths();
                let reach = widths.map(|w| (cutoff / w).ceil() as i32 + 1);
                let mut want = Vec::new();
                for (idx, ion) in framework.iter().enumerate() {
                    if !ion.is_anion {
                        continue;
                    }
                    let d0 = ion.frac.min_image_delta(p);
                    for i in -reach[0]..=reach[0] {
                        for j in -reach[1]..=reach[1] {
                            for k in -reach[2]..=reach[2] {
                                let v = lattice.matrix()
                                    * (d0 + Vector3::new(i as f64, j as f64, k as f64));
                                let d = v.norm();
                                if d <= cutoff && d > 1e-9 {
                                    want.push((d, idx, v));
                                }
                            }
                        }
                    }
                }
                found += want.len();
                assert_eq!(got, want);
            }
            assert!(found > 50, "too few neighbours to compare: {found}");
        }
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
