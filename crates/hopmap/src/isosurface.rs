//! Closed surfaces around the channel networks: the isosurface `E(r) = level` of the site-energy
//! landscape (eV), extracted on the periodic grid repeated over a block of cells.
//!
//! Method: marching tetrahedra. Every cube of eight neighbouring grid points is cut into six
//! tetrahedra along its main diagonal (the Freudenthal-Kuhn triangulation, the same in every
//! cube, so the faces of neighbouring cubes match); inside each tetrahedron the field is the
//! linear interpolant of its four corner values, whose level set is one triangle or one
//! quadrilateral. There is no ambiguous case (unlike marching cubes), surface vertices lie on
//! grid edges and are shared through a map keyed by the edge, so the mesh is indexed, and every
//! edge of it is shared by exactly two triangles. Outside the block the field counts as above
//! the level, so the surface is capped where the block cuts a channel and is always closed.
//! Triangles are oriented with their normals pointing away from the accessible region
//! (`E <= level`, "inside"), so the divergence theorem gives the enclosed volume.
//!
//! Which points belong to a network: at the level of a network (its percolation threshold plus
//! [`MARGIN_EV`]) the accessible points form regions ([`crate::percolation::regions_at`]);
//! only the regions that percolate (wind around the cell in at least one direction) are drawn.
//! Closed pockets below the level are left out, and their number is kept
//! ([`NetworkSurface::pockets_left_out`]).
//!
//! Coordinates are Cartesian angstroms in the frame of [`crate::lattice::Lattice`] (**a**
//! along x). The mesh converges to the true level set as the grid is refined. The volume it
//! encloses in one cell is a little below the grid's accessible fraction times the cell volume
//! (the linear interpolant lies above a convex well): measured on olivine LiFePO4 -4 % at 0.1 A
//! and -14 % at 0.2 A, on layered LiCoO2 -1.4 % and -11 % (`tests/isosurface.rs`); exact to
//! rounding on a field whose inside and outside are congruent.

use crate::grid::Grid;
use crate::lattice::{Frac, Lattice};
use crate::percolation::{Span, regions_at};
use crate::summary::Network;
use std::collections::HashMap;

/// How far above a network's percolation threshold its surface is drawn (eV): at the threshold
/// itself the channel is pinched to a point at its bottleneck; 0.05 eV (about 2 kT at room
/// temperature) opens it to a tube one can see.
pub const MARGIN_EV: f64 = 0.05;

/// Where a surface vertex sits on a grid edge, as a fraction of the edge, is kept within
/// `[T_MIN, 1 - T_MIN]`, and a cap on the block's border lies `T_MIN` of a spacing outside the
/// last grid plane: vertices of different edges never coincide, so general mesh tools that
/// merge coincident vertices keep the mesh as it is.
const T_MIN: f64 = 1e-3;

/// A triangle mesh: vertices in Cartesian angstroms, triangles as vertex indices, oriented
/// counter-clockwise seen from outside (normals away from the accessible region).
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Mesh {
    pub vertices: Vec<[f64; 3]>,
    pub triangles: Vec<[u32; 3]>,
}

/// How the edges of a mesh are used: a closed, consistently oriented 2-manifold has every
/// undirected edge in exactly two triangles and every directed edge in exactly one.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct EdgeCheck {
    pub edges: usize,
    /// Edges in only one triangle (holes).
    pub boundary: usize,
    /// Edges in more than two triangles.
    pub non_manifold: usize,
    /// Directed edges used twice (neighbouring triangles with opposite orientations).
    pub misoriented: usize,
}

impl EdgeCheck {
    pub fn closed_manifold(&self) -> bool {
        self.boundary == 0 && self.non_manifold == 0 && self.misoriented == 0
    }
}

/// One connected piece of a mesh.
#[derive(Debug, Clone, PartialEq)]
pub struct Component {
    pub triangles: usize,
    /// Enclosed volume (A^3).
    pub volume_a3: f64,
    /// Smallest and largest fractional coordinates of its vertices (in the cell's axes).
    pub frac_min: [f64; 3],
    pub frac_max: [f64; 3],
}

impl Mesh {
    /// Enclosed volume (A^3) by the divergence theorem: the sum over triangles of
    /// `v0 . (v1 x v2) / 6`; positive for outward normals.
    pub fn volume_a3(&self) -> f64 {
        self.triangles
            .iter()
            .map(|t| signed_tet(&self.vertices, t))
            .sum()
    }

    /// Surface area (A^2).
    pub fn area_a2(&self) -> f64 {
        self.triangles
            .iter()
            .map(|t| {
                let [a, b, c] = t.map(|i| self.vertices[i as usize]);
                norm(cross(sub(b, a), sub(c, a))) / 2.0
            })
            .sum()
    }

    /// Smallest and largest Cartesian coordinates (A); zeros for an empty mesh.
    pub fn bounds(&self) -> ([f64; 3], [f64; 3]) {
        if self.vertices.is_empty() {
            return ([0.0; 3], [0.0; 3]);
        }
        let mut lo = [f64::MAX; 3];
        let mut hi = [f64::MIN; 3];
        for v in &self.vertices {
            for a in 0..3 {
                lo[a] = lo[a].min(v[a]);
                hi[a] = hi[a].max(v[a]);
            }
        }
        (lo, hi)
    }

    /// Counts how every edge is used (see [`EdgeCheck`]).
    pub fn edge_check(&self) -> EdgeCheck {
        let mut directed: HashMap<(u32, u32), u32> = HashMap::new();
        for t in &self.triangles {
            for e in 0..3 {
                *directed.entry((t[e], t[(e + 1) % 3])).or_default() += 1;
            }
        }
        let mut undirected: HashMap<(u32, u32), u32> = HashMap::new();
        let mut misoriented = 0;
        for (&(u, v), &n) in &directed {
            if n > 1 {
                misoriented += 1;
            }
            *undirected.entry((u.min(v), u.max(v))).or_default() += n;
        }
        EdgeCheck {
            edges: undirected.len(),
            boundary: undirected.values().filter(|&&n| n == 1).count(),
            non_manifold: undirected.values().filter(|&&n| n > 2).count(),
            misoriented,
        }
    }

    /// The connected pieces (triangles sharing a vertex), largest first, with their fractional
    /// extent in `lattice`.
    pub fn components(&self, lattice: &Lattice) -> Vec<Component> {
        let n = self.vertices.len();
        let mut parent: Vec<u32> = (0..n as u32).collect();
        fn find(p: &mut [u32], mut x: u32) -> u32 {
            while p[x as usize] != x {
                p[x as usize] = p[p[x as usize] as usize];
                x = p[x as usize];
            }
            x
        }
        for t in &self.triangles {
            let r0 = find(&mut parent, t[0]);
            for &v in &t[1..] {
                let r = find(&mut parent, v);
                if r != r0 {
                    parent[r as usize] = r0;
                }
            }
        }
        let mut index: HashMap<u32, usize> = HashMap::new();
        let mut out: Vec<Component> = Vec::new();
        for t in &self.triangles {
            let r = find(&mut parent, t[0]);
            let next = out.len();
            let k = *index.entry(r).or_insert(next);
            if k == next {
                out.push(Component {
                    triangles: 0,
                    volume_a3: 0.0,
                    frac_min: [f64::MAX; 3],
                    frac_max: [f64::MIN; 3],
                });
            }
            let c = &mut out[k];
            c.triangles += 1;
            c.volume_a3 += signed_tet(&self.vertices, t);
            for &v in t {
                let p = self.vertices[v as usize];
                let f = lattice
                    .to_frac(crate::lattice::Cart::new(p[0], p[1], p[2]))
                    .0;
                for a in 0..3 {
                    c.frac_min[a] = c.frac_min[a].min(f[a]);
                    c.frac_max[a] = c.frac_max[a].max(f[a]);
                }
            }
        }
        out.sort_by_key(|c| std::cmp::Reverse(c.triangles));
        out
    }
}

fn signed_tet(v: &[[f64; 3]], t: &[u32; 3]) -> f64 {
    let [a, b, c] = t.map(|i| v[i as usize]);
    dot(a, cross(b, c)) / 6.0
}

fn sub(a: [f64; 3], b: [f64; 3]) -> [f64; 3] {
    [a[0] - b[0], a[1] - b[1], a[2] - b[2]]
}
fn cross(a: [f64; 3], b: [f64; 3]) -> [f64; 3] {
    [
        a[1] * b[2] - a[2] * b[1],
        a[2] * b[0] - a[0] * b[2],
        a[0] * b[1] - a[1] * b[0],
    ]
}
fn dot(a: [f64; 3], b: [f64; 3]) -> f64 {
    a[0] * b[0] + a[1] * b[1] + a[2] * b[2]
}
fn norm(a: [f64; 3]) -> f64 {
    dot(a, a).sqrt()
}

/// The block of cells a surface is drawn over: `cells` repeats along a, b, c, starting at grid
/// point `origin` of the field (a whole grid point, so the block's grid is the field's).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Block {
    pub cells: [usize; 3],
    pub origin: [usize; 3],
}

impl Block {
    /// `cells` repeats starting at the field's first grid point.
    pub fn at_origin(cells: [usize; 3]) -> Block {
        Block {
            cells,
            origin: [0, 0, 0],
        }
    }

    /// The block's corner in fractional coordinates of the cell, for a field of `dims` points.
    pub fn origin_frac(&self, dims: [usize; 3]) -> [f64; 3] {
        [0, 1, 2].map(|a| self.origin[a] as f64 / dims[a] as f64)
    }
}

/// The isosurface `field = level` over `block`, inside being `field <= level` (see the module
/// notes). An empty mesh when no point of the block is inside.
pub fn extract(field: &Grid, level: f32, block: Block) -> Mesh {
    let m = field.dims;
    // local sample points: 0 and last are the padding outside the block; 1..=m*c are grid
    // points origin .. origin + m*c (both ends: the block's faces are included)
    let len = [0, 1, 2].map(|a| m[a] * block.cells[a] + 3);
    let lin = |l: [usize; 3]| (l[0] * len[1] + l[1]) * len[2] + l[2];
    let is_pad = |l: [usize; 3]| (0..3).any(|a| l[a] == 0 || l[a] == len[a] - 1);
    let value = |l: [usize; 3]| -> f32 {
        if is_pad(l) {
            f32::INFINITY
        } else {
            let g = [0, 1, 2].map(|a| (l[a] - 1 + block.origin[a]) % m[a]);
            field.get(g[0], g[1], g[2])
        }
    };
    let lat = field.lattice.matrix();
    let position = |l: [usize; 3]| -> [f64; 3] {
        let f = nalgebra::Vector3::from_fn(|a, _| {
            (block.origin[a] as f64 + l[a] as f64 - 1.0) / m[a] as f64
        });
        let c = lat * f;
        [c[0], c[1], c[2]]
    };
    let inside = |v: f32| v <= level;

    // Freudenthal tetrahedra: corner bits (x = 1, y = 2, z = 4); one per order of the axes
    const PERMS: [[usize; 3]; 6] = [
        [0, 1, 2],
        [0, 2, 1],
        [1, 0, 2],
        [1, 2, 0],
        [2, 0, 1],
        [2, 1, 0],
    ];
    let tets: Vec<[usize; 4]> = PERMS
        .iter()
        .map(|p| {
            let c1 = 1 << p[0];
            let c2 = c1 | (1 << p[1]);
            [0, c1, c2, 7]
        })
        .collect();

    let mut mesh = Mesh::default();
    let mut vertex_of: HashMap<(usize, usize), u32> = HashMap::new();
    // the vertex on the edge from an inside corner p to an outside corner q
    let mut edge_vertex =
        |mesh: &mut Mesh, (lp, vp): ([usize; 3], f32), (lq, vq): ([usize; 3], f32)| -> u32 {
            let (kp, kq) = (lin(lp), lin(lq));
            let key = (kp.min(kq), kp.max(kq));
            *vertex_of.entry(key).or_insert_with(|| {
                let t = if vq.is_infinite() {
                    T_MIN
                } else {
                    ((level - vp) as f64 / (vq - vp) as f64).clamp(T_MIN, 1.0 - T_MIN)
                };
                let (a, b) = (position(lp), position(lq));
                mesh.vertices
                    .push([0, 1, 2].map(|i| a[i] + t * (b[i] - a[i])));
                (mesh.vertices.len() - 1) as u32
            })
        };

    for i in 0..len[0] - 1 {
        for j in 0..len[1] - 1 {
            for k in 0..len[2] - 1 {
                let corner = |c: usize| [i + (c & 1), j + ((c >> 1) & 1), k + ((c >> 2) & 1)];
                let vals: [f32; 8] = std::array::from_fn(|c| value(corner(c)));
                let n_in = vals.iter().filter(|&&v| inside(v)).count();
                if n_in == 0 || n_in == 8 {
                    continue;
                }
                for tet in &tets {
                    let ins: Vec<usize> =
                        tet.iter().copied().filter(|&c| inside(vals[c])).collect();
                    let outs: Vec<usize> =
                        tet.iter().copied().filter(|&c| !inside(vals[c])).collect();
                    if ins.is_empty() || outs.is_empty() {
                        continue;
                    }
                    let pv = |c: usize| (corner(c), vals[c]);
                    let ring: Vec<u32> = match (ins.len(), outs.len()) {
                        (1, 3) => outs
                            .iter()
                            .map(|&o| edge_vertex(&mut mesh, pv(ins[0]), pv(o)))
                            .collect(),
                        (3, 1) => ins
                            .iter()
                            .map(|&n| edge_vertex(&mut mesh, pv(n), pv(outs[0])))
                            .collect(),
                        _ => vec![
                            edge_vertex(&mut mesh, pv(ins[0]), pv(outs[0])),
                            edge_vertex(&mut mesh, pv(ins[0]), pv(outs[1])),
                            edge_vertex(&mut mesh, pv(ins[1]), pv(outs[1])),
                            edge_vertex(&mut mesh, pv(ins[1]), pv(outs[0])),
                        ],
                    };
                    // orient the ring so that its normal points from the inside corners to the
                    // outside ones
                    let centroid = |cs: &[usize]| {
                        let mut s = [0.0; 3];
                        for &c in cs {
                            let p = position(corner(c));
                            for a in 0..3 {
                                s[a] += p[a] / cs.len() as f64;
                            }
                        }
                        s
                    };
                    let away = sub(centroid(&outs), centroid(&ins));
                    let p: Vec<[f64; 3]> =
                        ring.iter().map(|&v| mesh.vertices[v as usize]).collect();
                    let mut area = [0.0; 3];
                    for r in 1..p.len() - 1 {
                        let c = cross(sub(p[r], p[0]), sub(p[r + 1], p[0]));
                        for a in 0..3 {
                            area[a] += c[a];
                        }
                    }
                    let flip = dot(area, away) < 0.0;
                    for r in 1..ring.len() - 1 {
                        let t = if flip {
                            [ring[0], ring[r + 1], ring[r]]
                        } else {
                            [ring[0], ring[r], ring[r + 1]]
                        };
                        mesh.triangles.push(t);
                    }
                }
            }
        }
    }
    mesh
}

/// The field resampled on `dims` points per cell by periodic trilinear interpolation (the same
/// values where the points coincide): a coarser grid for a lighter mesh.
pub fn resample(field: &Grid, dims: [usize; 3]) -> Grid {
    if dims == field.dims {
        return field.clone();
    }
    let n = field.dims;
    let mut out = Grid::new(field.lattice.clone(), dims, 0.0);
    for i in 0..dims[0] {
        for j in 0..dims[1] {
            for k in 0..dims[2] {
                let f = [
                    i as f64 / dims[0] as f64,
                    j as f64 / dims[1] as f64,
                    k as f64 / dims[2] as f64,
                ];
                let mut base = [0usize; 3];
                let mut w = [0.0f64; 3];
                for a in 0..3 {
                    let x = f[a] * n[a] as f64;
                    let fl = x.floor();
                    base[a] = (fl as usize) % n[a];
                    w[a] = x - fl;
                }
                let mut v = 0.0f64;
                for c in 0..8 {
                    let d = [c & 1, (c >> 1) & 1, (c >> 2) & 1];
                    let wt: f64 = (0..3)
                        .map(|a| if d[a] == 1 { w[a] } else { 1.0 - w[a] })
                        .product();
                    if wt > 0.0 {
                        let g = [0, 1, 2].map(|a| (base[a] + d[a]) % n[a]);
                        v += wt * field.get(g[0], g[1], g[2]) as f64;
                    }
                }
                let idx = out.index(i, j, k);
                out.values[idx] = v as f32;
            }
        }
    }
    out
}

/// A block origin whose faces cut the accessible region as little as possible: along each
/// axis, the grid plane with the fewest points at or below `level` (the first such plane, so
/// a field open everywhere keeps the origin at 0). Tubes along b then lie whole inside the
/// block across a and c, and layers are not split across their thickness.
pub fn quiet_origin(field: &Grid, level: f32) -> [usize; 3] {
    let n = field.dims;
    let mut counts = [vec![0usize; n[0]], vec![0usize; n[1]], vec![0usize; n[2]]];
    for (idx, &v) in field.values.iter().enumerate() {
        if v <= level {
            let p = field.ijk(idx);
            for a in 0..3 {
                counts[a][p[a]] += 1;
            }
        }
    }
    [0, 1, 2].map(|a| {
        let c = &counts[a];
        let best = c.iter().copied().min().unwrap_or(0);
        c.iter().position(|&x| x == best).unwrap_or(0)
    })
}

/// The field with every point of a closed pocket at or below `level` lifted just above it
/// (reflected about the level), so that the surface at `level` wraps only the regions that
/// percolate. Returns the field, the fraction of grid points in percolating regions, and the
/// number of pockets left out.
pub fn percolating_field(grid: &Grid, level: f32) -> (Grid, f64, usize) {
    let map = regions_at(grid, level);
    let mut out = grid.clone();
    let mut kept = 0usize;
    for (i, &r) in map.label.iter().enumerate() {
        if r == u32::MAX {
            continue;
        }
        if map.regions[r as usize].span == Span::Closed {
            let v = grid.values[i];
            out.values[i] = level + (level - v).max(1e-3);
        } else {
            kept += 1;
        }
    }
    let pockets = map
        .regions
        .iter()
        .filter(|r| r.span == Span::Closed)
        .count();
    (out, kept as f64 / grid.len() as f64, pockets)
}

/// The surface of one network the answer reports.
#[derive(Debug, Clone, PartialEq)]
pub struct NetworkSurface {
    /// 1, 2 or 3.
    pub dimension: u8,
    /// The network's percolation threshold (eV).
    pub threshold_ev: f64,
    /// The level drawn: threshold plus [`MARGIN_EV`] (eV).
    pub level_ev: f64,
    /// Fraction of the cell's grid points at or below the level in percolating regions.
    pub accessible_fraction: f64,
    /// Closed pockets at or below the level that are not drawn.
    pub pockets_left_out: usize,
    /// Points per cell of the grid the surface was extracted on (the analysis grid, or a
    /// coarser resampling of it).
    pub dims: [usize; 3],
    pub block: Block,
    pub mesh: Mesh,
}

/// Options of [`network_surfaces`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SurfaceOptions {
    /// Repeats of the cell along a, b, c (each at least 1).
    pub cells: [usize; 3],
    /// Largest number of triangles of one surface: the field is resampled coarser (by the
    /// square root of the excess, at least 1.1 per axis) until the surface fits. `None`: the analysis grid as it is.
    pub max_triangles: Option<usize>,
}

/// The surface of every network in `networks` (the summary's, lowest first) over a block of
/// `opts.cells` cells, on the site-energy grid `energy` (eV). The block's origin is chosen by
/// [`quiet_origin`] at the lowest network's level and shared by all surfaces.
pub fn network_surfaces(
    energy: &Grid,
    networks: &[Network],
    cap_ev: f64,
    opts: SurfaceOptions,
) -> Vec<NetworkSurface> {
    let cells = opts.cells.map(|c| c.max(1));
    let mut out = Vec::new();
    let mut origin_frac: Option<[f64; 3]> = None;
    for net in networks {
        // never above the cap: there every point is "inside" and nothing can be seen
        let level = (net.threshold_ev + MARGIN_EV).min(cap_ev - 1e-3);
        let (field, fraction, pockets) = percolating_field(energy, level as f32);
        let of = *origin_frac.get_or_insert_with(|| {
            let o = quiet_origin(&field, level as f32);
            Block { cells, origin: o }.origin_frac(field.dims)
        });
        let mut dims = field.dims;
        if let Some(cap) = opts.max_triangles {
            // a quick probe on a quarter of the points per axis predicts the count at full
            // resolution (triangles go as the square of the points per axis)
            let probe_dims = dims.map(|d| (d / 4).max(4));
            let probe = extract(
                &resample(&field, probe_dims),
                level as f32,
                Block {
                    cells,
                    origin: [0, 1, 2]
                        .map(|a| (of[a] * probe_dims[a] as f64).round() as usize % probe_dims[a]),
                },
            );
            let ratio = (0..3)
                .map(|a| dims[a] as f64 / probe_dims[a] as f64)
                .fold(0.0, f64::max);
            let predicted = probe.triangles.len() as f64 * ratio * ratio;
            if predicted > cap as f64 {
                let shrink = (predicted / cap as f64).sqrt();
                dims = dims.map(|d| ((d as f64 / shrink).floor() as usize).clamp(4, d));
            }
        }
        let mesh = loop {
            let f = resample(&field, dims);
            let origin = [0, 1, 2].map(|a| (of[a] * dims[a] as f64).round() as usize % dims[a]);
            let block = Block { cells, origin };
            let mesh = extract(&f, level as f32, block);
            let small = dims.iter().all(|&d| d <= 4);
            match opts.max_triangles {
                Some(cap) if mesh.triangles.len() > cap && !small => {
                    // triangles go as the square of the points per axis
                    let shrink =
                        (1.05 * (mesh.triangles.len() as f64 / cap as f64).sqrt()).max(1.1);
                    dims = dims.map(|d| ((d as f64 / shrink).floor() as usize).max(4));
                }
                _ => break (mesh, dims, block),
            }
        };
        let (mesh, dims, block) = mesh;
        out.push(NetworkSurface {
            dimension: net.dimension,
            threshold_ev: net.threshold_ev,
            level_ev: level,
            accessible_fraction: fraction,
            pockets_left_out: pockets,
            dims,
            block,
            mesh,
        });
    }
    out
}

/// The fractional positions of `f`'s periodic images inside the block (its corner at
/// `origin_frac`, `cells` cells along each axis), faces included within `tol` (fractional).
pub fn images_in_block(f: Frac, origin_frac: [f64; 3], cells: [usize; 3], tol: f64) -> Vec<Frac> {
    let mut ranges: [Vec<f64>; 3] = Default::default();
    for a in 0..3 {
        let lo = origin_frac[a] - tol;
        let hi = origin_frac[a] + cells[a] as f64 + tol;
        let mut x = f.0[a] - (f.0[a] - lo).floor();
        while x <= hi {
            ranges[a].push(x);
            x += 1.0;
        }
    }
    let mut out = Vec::new();
    for &x in &ranges[0] {
        for &y in &ranges[1] {
            for &z in &ranges[2] {
                out.push(Frac::new(x, y, z));
            }
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    fn cubic(a: f64) -> Lattice {
        Lattice::from_vectors([a, 0.0, 0.0], [0.0, a, 0.0], [0.0, 0.0, a]).unwrap()
    }

    #[test]
    fn a_single_inside_point_gives_a_closed_octahedron_like_cell() {
        let mut g = Grid::new(cubic(4.0), [4, 4, 4], 1.0);
        let i = g.index(2, 2, 2);
        g.values[i] = -1.0;
        let m = extract(&g, 0.0, Block::at_origin([1, 1, 1]));
        assert!(m.edge_check().closed_manifold(), "{:?}", m.edge_check());
        assert!(m.volume_a3() > 0.0);
        // Euler characteristic of a sphere: V - E + F = 2
        let e = m.edge_check().edges as i64;
        assert_eq!(m.vertices.len() as i64 - e + m.triangles.len() as i64, 2);
    }

    #[test]
    fn images_in_block_include_both_faces() {
        let im = images_in_block(Frac::new(0.0, 0.5, 0.5), [0.0; 3], [1, 1, 1], 1e-6);
        assert_eq!(im.len(), 2);
    }
}
