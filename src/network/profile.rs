//! Channel profiles: energy against path length along the lowest path through one repeat unit
//! of a channel, sites and saddles marked (science notes, section 5).
//!
//! The path runs on the voxel grid (face steps) in the periodic covering of the cell, from a
//! voxel to its own image translated by a lattice vector of the channel. It is found in two
//! passes: first the bottleneck, the lowest level at which the two images are connected (a
//! minimax Dijkstra); then, among the voxels at or below that level, the path of least cost,
//! where a step costs its length (A) times `1 + w (E - E_start) / (E_bottleneck - E_start)`:
//! with `w = 0` the shortest path under the bottleneck, with `w > 0` one that keeps to the
//! valley floor. The search is confined to the cells spanned by the translation plus a margin,
//! so that it stays finite when the channel is open in other directions too.

use crate::grid::Grid;
use crate::lattice::Frac;
use crate::percolation::{FastMap, Percolation, face_neighbours, total_key};
use nalgebra::Vector3;
use std::cmp::Reverse;
use std::collections::BinaryHeap;

#[derive(Debug, Clone, PartialEq)]
pub struct ProfileOptions {
    /// Cells searched beyond those spanned by the translation, per side and axis.
    pub cell_margin: i32,
    /// Weight `w` of the energy in the cost of a step (see the module notes).
    pub energy_weight: f64,
    /// Minima along the path shallower than this (grid units) on either side are not marked
    /// as sites.
    pub min_prominence: f32,
    /// Voxels at or above this value are walls.
    pub ceiling: f32,
}

impl Default for ProfileOptions {
    fn default() -> Self {
        ProfileOptions {
            cell_margin: 1,
            energy_weight: 1.0,
            min_prominence: 0.01,
            ceiling: f32::INFINITY,
        }
    }
}

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum PointKind {
    Path,
    /// A minimum along the path (the two ends are always sites).
    Site,
    /// The highest point between two consecutive sites.
    Saddle,
}

/// One voxel of a profile.
#[derive(Debug, Clone, PartialEq)]
pub struct ProfilePoint {
    /// Path length from the start, A.
    pub distance: f64,
    /// Value at the voxel (grid units: eV for a site-energy grid).
    pub energy: f32,
    /// Position, unwrapped along the path (the end is the start plus the translation).
    pub frac: Frac,
    pub voxel: usize,
    pub kind: PointKind,
}

/// Energy along the lowest path through one repeat of a channel.
#[derive(Debug, Clone, PartialEq)]
pub struct Profile {
    /// Dimension of the percolation this profile belongs to (0 when drawn on request).
    pub dimension: u8,
    /// Lattice translation from the start to the end of the path.
    pub translation: [i32; 3],
    pub start_voxel: usize,
    /// Highest value along the path: the lowest level connecting the start to its image.
    pub bottleneck: f32,
    /// Total path length, A.
    pub length: f64,
    pub points: Vec<ProfilePoint>,
}

impl Profile {
    pub fn sites(&self) -> impl Iterator<Item = &ProfilePoint> {
        self.points.iter().filter(|p| p.kind == PointKind::Site)
    }
    pub fn saddles(&self) -> impl Iterator<Item = &ProfilePoint> {
        self.points.iter().filter(|p| p.kind == PointKind::Saddle)
    }
}

/// The profiles of every percolation threshold reached: for each, from the lowest voxel of the
/// deepest channel, one profile per generating translation of its span.
pub fn channel_profiles(
    grid: &Grid,
    percolation: &Percolation,
    options: &ProfileOptions,
) -> Vec<Profile> {
    let mut out = Vec::new();
    for t in percolation.thresholds.iter().flatten() {
        for tr in t.channel.span.translations() {
            if let Some(mut p) = channel_profile(grid, t.channel.lowest_point, tr, options) {
                p.dimension = t.dimension;
                out.push(p);
            }
        }
    }
    out
}

const BIAS: i32 = 512;

fn encode(voxel: usize, cell: [i32; 3]) -> u64 {
    let c = |x: i32| (x + BIAS) as u64 & 0x3ff;
    (voxel as u64) | (c(cell[0]) << 32) | (c(cell[1]) << 42) | (c(cell[2]) << 52)
}

fn decode(node: u64) -> (usize, [i32; 3]) {
    let c = |s: u32| ((node >> s) & 0x3ff) as i32 - BIAS;
    ((node & 0xffff_ffff) as usize, [c(32), c(42), c(52)])
}

/// The profile from `start` to its image translated by `translation`; None when the two are not
/// connected below the ceiling inside the searched cells, or the translation is zero or too
/// long to search.
pub fn channel_profile(
    grid: &Grid,
    start: usize,
    translation: [i32; 3],
    options: &ProfileOptions,
) -> Option<Profile> {
    if translation == [0, 0, 0] || start >= grid.len() || !(grid.values[start] < options.ceiling) {
        return None;
    }
    let m = options.cell_margin.max(0);
    let lo = translation.map(|t| t.min(0) - m);
    let hi = translation.map(|t| t.max(0) + m);
    if lo.iter().chain(hi.iter()).any(|x| x.abs() >= BIAS) {
        return None;
    }
    let inside = |c: [i32; 3]| (0..3).all(|a| c[a] >= lo[a] && c[a] <= hi[a]);
    let values = &grid.values;
    let source = encode(start, [0, 0, 0]);
    let target = encode(start, translation);

    // pass 1: bottleneck
    let mut best: FastMap<u64, u64> = FastMap::default();
    let mut heap = BinaryHeap::new();
    let k0 = total_key(values[start], start);
    best.insert(source, k0);
    heap.push(Reverse((k0, source)));
    let mut bottleneck = None;
    while let Some(Reverse((k, node))) = heap.pop() {
        if node == target {
            bottleneck = Some(k);
            break;
        }
        if best.get(&node).is_some_and(|&b| b < k) {
            continue;
        }
        let (x, cell) = decode(node);
        for (y, t) in face_neighbours(grid.dims, grid.ijk(x)) {
            let c = [cell[0] + t[0], cell[1] + t[1], cell[2] + t[2]];
            if !inside(c) || !(values[y] < options.ceiling) {
                continue;
            }
            let nk = k.max(total_key(values[y], y));
            let n = encode(y, c);
            if best.get(&n).is_none_or(|&b| nk < b) {
                best.insert(n, nk);
                heap.push(Reverse((nk, n)));
            }
        }
    }
    let bkey = bottleneck?;
    drop(best);

    // pass 2: least cost under the bottleneck
    let e0 = values[start] as f64;
    // the low half of a key is the grid index of the voxel that sets it
    let bval = values[(bkey & 0xffff_ffff) as usize] as f64;
    let span = (bval - e0).max(1e-30);
    let steps: [f64; 3] = [0, 1, 2].map(|a| grid.lattice.vector(a).norm() / grid.dims[a] as f64);
    let w = options.energy_weight.max(0.0);
    let mut dist: FastMap<u64, (f64, u64)> = FastMap::default();
    let mut heap = BinaryHeap::new();
    dist.insert(source, (0.0, source));
    heap.push(Reverse((0u64, source)));
    let mut reached = false;
    while let Some(Reverse((dbits, node))) = heap.pop() {
        let d = f64::from_bits(dbits);
        if node == target {
            reached = true;
            break;
        }
        if dist.get(&node).is_some_and(|&(b, _)| b < d) {
            continue;
        }
        let (x, cell) = decode(node);
        for (dir, (y, t)) in face_neighbours(grid.dims, grid.ijk(x))
            .into_iter()
            .enumerate()
        {
            let c = [cell[0] + t[0], cell[1] + t[1], cell[2] + t[2]];
            if !inside(c) || total_key(values[y], y) > bkey {
                continue;
            }
            let rise = ((values[y] as f64 - e0) / span).max(0.0);
            let nd = d + steps[dir / 2] * (1.0 + w * rise);
            let n = encode(y, c);
            if dist.get(&n).is_none_or(|&(b, _)| nd < b) {
                dist.insert(n, (nd, node));
                heap.push(Reverse((nd.to_bits(), n)));
            }
        }
    }
    if !reached {
        return None;
    }
    let mut nodes = vec![target];
    let mut cur = target;
    while cur != source {
        cur = dist[&cur].1;
        nodes.push(cur);
    }
    nodes.reverse();

    let mut points = Vec::with_capacity(nodes.len());
    let mut travelled = 0.0;
    let mut last: Option<Vector3<f64>> = None;
    for &n in &nodes {
        let (x, cell) = decode(n);
        let f =
            grid.frac(grid.ijk(x)).0 + Vector3::new(cell[0] as f64, cell[1] as f64, cell[2] as f64);
        if let Some(p) = last {
            travelled += grid.lattice.frac_delta_length(f - p);
        }
        last = Some(f);
        points.push(ProfilePoint {
            distance: travelled,
            energy: values[x],
            frac: Frac(f),
            voxel: x,
            kind: PointKind::Path,
        });
    }
    mark(&mut points, options.min_prominence);
    let bottleneck = points
        .iter()
        .map(|p| p.energy)
        .fold(f32::NEG_INFINITY, f32::max);
    Some(Profile {
        dimension: 0,
        translation,
        start_voxel: start,
        bottleneck,
        length: travelled,
        points,
    })
}

/// Marks sites (minima, ends included, shallow ones dropped) and the saddle between each pair
/// of consecutive sites.
fn mark(points: &mut [ProfilePoint], min_prominence: f32) {
    let n = points.len();
    if n == 0 {
        return;
    }
    let e: Vec<f32> = points.iter().map(|p| p.energy).collect();
    // local minima, a plateau counted once (at its middle)
    let mut minima = vec![0];
    let mut i = 1;
    while i + 1 < n {
        let mut j = i;
        while j + 1 < n && e[j + 1] == e[i] {
            j += 1;
        }
        if j + 1 < n && e[i] < e[i - 1] && e[j] < e[j + 1] {
            minima.push((i + j) / 2);
        }
        i = j + 1;
    }
    if n > 1 {
        minima.push(n - 1);
    }
    let peak =
        |a: usize, b: usize| -> usize { (a..=b).fold(a, |m, k| if e[k] > e[m] { k } else { m }) };
    loop {
        let mut weakest: Option<(usize, f32)> = None;
        for s in 1..minima.len().saturating_sub(1) {
            let left = e[peak(minima[s - 1], minima[s])];
            let right = e[peak(minima[s], minima[s + 1])];
            let prom = left.min(right) - e[minima[s]];
            if weakest.is_none_or(|(_, p)| prom < p) {
                weakest = Some((s, prom));
            }
        }
        match weakest {
            Some((s, p)) if p < min_prominence => {
                minima.remove(s);
            }
            _ => break,
        }
    }
    for &m in &minima {
        points[m].kind = PointKind::Site;
    }
    for w in minima.windows(2) {
        let p = peak(w[0], w[1]);
        if points[p].kind == PointKind::Path {
            points[p].kind = PointKind::Saddle;
        }
    }
}
