//! Channel profiles: energy against path length along the lowest path through one repeat unit
//! of a channel, sites and saddles marked (science notes, section 5).
//!
//! The path runs on the voxel grid (face steps) in the periodic covering of the cell, from a
//! voxel to its own image translated by a lattice vector of the channel. It is found in two
//! passes: first the bottleneck, the lowest level at which the two images are connected, by a
//! minimax search on the cell itself that follows the winding vectors of the loops it closes
//! (see `bottleneck_key`), unless the percolation proves the level (a channel of the first
//! threshold) or proposes one that two floods of the cell confirm while the second pass already
//! runs under it (see `known_bottleneck`, `bottleneck_is`); then, among the voxels at or below
//! that level, the path of least cost, where a step costs its length (A) times
//! `1 + w (E - E_start) / (E_bottleneck - E_start)`: with `w = 0` the shortest path under the
//! bottleneck, with `w > 0` one that keeps to the valley floor. The second pass is an A* search
//! in the covering, guided by the least length any chain of face steps to the end must still
//! travel. It searches the cells spanned by the translation first, then those and one more on
//! each side, and the unbounded covering only when the end is not reached in either: in a network open in other directions too (a 3D
//! network crossing the blocks of a shear oxide), cheap detours along short axes would
//! otherwise make the search visit millions of points in dozens of cells. So the path is always
//! the lowest (pass 1 needs no window), and the cheapest under that level among the paths in
//! the first window that holds one.

use crate::grid::Grid;
use crate::lattice::Frac;
use crate::percolation::{
    FastMap, IndexSplit, Offset, Percolation, Threshold, face_neighbours, hnf, in_lattice,
    total_key,
};
use nalgebra::Vector3;
use rayon::prelude::*;
use std::cmp::Reverse;
use std::collections::BinaryHeap;
use std::sync::Mutex;

#[derive(Debug, Clone, PartialEq)]
pub struct ProfileOptions {
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
/// deepest channel, one profile per generating translation of its span. Thresholds reached by
/// the same channel (a cubic network opens in 1D, 2D and 3D at once) share the same start and
/// translations: each path is searched once.
///
/// `percolation` is the percolation of `grid` (the grid's, not the site graph's) below
/// `options.ceiling`: its thresholds give each search its bottleneck, or a candidate for it
/// (see `Bottleneck`), so that the least-cost pass need not wait for the bottleneck pass.
pub fn channel_profiles(
    grid: &Grid,
    percolation: &Percolation,
    options: &ProfileOptions,
) -> Vec<Profile> {
    // the distinct searches, in order of first use, run in parallel
    let mut jobs: Vec<(usize, [i32; 3])> = Vec::new();
    let mut levels: Vec<Bottleneck> = Vec::new();
    for t in percolation.thresholds.iter().flatten() {
        for tr in t.channel.span.translations() {
            let job = (t.channel.lowest_point, tr);
            if !jobs.contains(&job) {
                jobs.push(job);
                levels.push(known_bottleneck(grid, percolation, options, t, job));
            }
        }
    }
    // The search under the highest level opens the most of the grid and usually takes the
    // longest: it goes first, so that the other thread takes the rest and the two end together.
    let mut by_cost: Vec<usize> = (0..jobs.len()).collect();
    by_cost.sort_by(|&a, &b| levels[b].level().total_cmp(&levels[a].level()));
    let floods = Floods::default();
    let searched: Vec<(usize, Option<Profile>)> = by_cost
        .par_iter()
        .with_max_len(1)
        .map(|&k| {
            let (start, tr) = jobs[k];
            (
                k,
                search_profile(grid, start, tr, levels[k], options, &floods),
            )
        })
        .collect();
    let mut found: Vec<Option<Profile>> = vec![None; jobs.len()];
    for (k, p) in searched {
        found[k] = p;
    }
    let mut out: Vec<Profile> = Vec::new();
    for t in percolation.thresholds.iter().flatten() {
        for tr in t.channel.span.translations() {
            let job = (t.channel.lowest_point, tr);
            let k = jobs.iter().position(|j| *j == job).expect("listed above");
            if let Some(mut p) = found[k].clone() {
                p.dimension = t.dimension;
                out.push(p);
            }
        }
    }
    out
}

/// What is known of the bottleneck of a search (the highest value on the lowest path from the
/// start to its image) before the bottleneck pass runs.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Bottleneck {
    /// Proved by the percolation: the value itself.
    Known(f32),
    /// A value the percolation suggests; checked by [`bottleneck_is`] while the least-cost pass
    /// runs under it, and replaced by the bottleneck pass's value when it is not the one.
    Candidate(f32),
    /// Nothing known: the bottleneck pass runs first.
    Unknown,
}

impl Bottleneck {
    /// The level known or proposed (grid units); minus infinity when nothing is known.
    fn level(self) -> f32 {
        match self {
            Bottleneck::Known(l) | Bottleneck::Candidate(l) => l,
            Bottleneck::Unknown => f32::NEG_INFINITY,
        }
    }
}

/// The bottleneck of the search `(start, translation)` of threshold `t`, as far as the
/// percolation tells it.
///
/// Proved: when `t` opens at the first threshold energy `E_1` (the lowest), the bottleneck of
/// every translation of its channel is `E_1`. The start is connected to its image at `E_1` (the
/// translation is in the winding lattice of the start's region then), and not below it:
/// a path from a voxel to its own translated image below `E_1` would close a loop with a
/// nonzero winding vector there, while no region winds below `E_1`. This holds for the
/// percolation of this grid below the same ceiling, which is checked (point count and
/// ceiling); anything else gets no proof.
///
/// Otherwise the candidate is the onset of the first opening whose region has the same lowest
/// voxel and whose winding lattice holds the translation (the region opened along it
/// earlier), else the threshold's energy: the bottleneck is never above it.
fn known_bottleneck(
    grid: &Grid,
    percolation: &Percolation,
    options: &ProfileOptions,
    t: &Threshold,
    (start, translation): (usize, [i32; 3]),
) -> Bottleneck {
    if percolation.points != grid.len() || start >= grid.len() {
        return Bottleneck::Unknown;
    }
    let first = percolation
        .thresholds
        .iter()
        .flatten()
        .map(|t| t.energy)
        .fold(f32::INFINITY, f32::min);
    if percolation.ceiling == options.ceiling && t.energy == first {
        return Bottleneck::Known(t.energy);
    }
    let target = translation.map(i64::from);
    let opened_along = percolation
        .openings
        .iter()
        .take_while(|o| o.onset <= t.energy)
        .find(|o| {
            o.lowest_point == start && {
                let rows = o
                    .span
                    .translations()
                    .iter()
                    .map(|r| r.map(i64::from))
                    .collect();
                in_lattice(&hnf(rows), target)
            }
        });
    Bottleneck::Candidate(opened_along.map_or(t.energy, |o| o.onset))
}

/// Pass 1: the key (see `total_key`) of the highest voxel on the lowest path from `start` to
/// its image translated by `translation`, or None when no such path exists below the ceiling.
///
/// The voxels of the cell connected to `start` are visited in increasing minimax key (Prim's
/// order), each remembering the image of the cell it was reached in. An edge between the voxel
/// being visited and one visited earlier closes a loop whose winding vector is the difference
/// of their images plus the step's cell translation; it is open at the key of the voxel being
/// visited. The loops found so far generate the winding lattice of the region open at that key
/// (fundamental cycles of the visiting tree), so the first key at which `translation` enters
/// that lattice is the bottleneck. Runs on the cell, not its covering: at most one visit per
/// voxel.
fn bottleneck_key(grid: &Grid, start: usize, translation: [i32; 3], ceiling: f32) -> Option<u64> {
    let values = &grid.values;
    let n = values.len();
    let split = IndexSplit::new(grid.dims);
    let target = translation.map(i64::from);
    let mut label = vec![u64::MAX; n];
    let mut image = vec![[0i32; 3]; n];
    let mut visited = vec![false; n];
    let mut rows: Vec<[i64; 3]> = Vec::new();
    let mut heap = BinaryHeap::new();
    label[start] = total_key(values[start], start);
    heap.push(Reverse((label[start], start as u32)));
    while let Some(Reverse((k, x))) = heap.pop() {
        let x = x as usize;
        if visited[x] || k > label[x] {
            continue;
        }
        visited[x] = true;
        let ix = image[x];
        for (y, t) in face_neighbours(grid.dims, split.ijk(x)) {
            let iy = [ix[0] + t[0], ix[1] + t[1], ix[2] + t[2]];
            if visited[y] {
                // a loop (y == x on an axis of one point is a loop of one step)
                let w = [0, 1, 2].map(|a| (iy[a] - image[y][a]) as i64);
                if w != [0, 0, 0] && !in_lattice(&rows, w) {
                    rows.push(w);
                    rows = hnf(rows);
                    if in_lattice(&rows, target) {
                        return Some(k);
                    }
                }
                continue;
            }
            if !(values[y] < ceiling) {
                continue;
            }
            let nk = k.max(total_key(values[y], y));
            if nk < label[y] {
                label[y] = nk;
                image[y] = iy;
                heap.push(Reverse((nk, y as u32)));
            }
        }
    }
    None
}

/// Where pass 2 keeps, for each point of the covering it reaches, the best cost found so far
/// and the step that reached it. Points are unwrapped grid coordinates (the voxel plus `n_a`
/// times the cell along each axis); their slot is the grid index of the voxel in the low 32
/// bits and the cell in the high bits, 10 bits per axis. Slots are kept in dense pages of
/// [`PAGE`] consecutive slots (a run of voxels of one cell), made when first reached and found
/// through a small map: the search walks a compact region, so neighbouring points share a page
/// and a look-up touches memory that is already loaded, where one hash-map entry per point
/// touched memory at random. 9 bytes per slot of a page reached.
struct Covering {
    dims: [i64; 3],
    /// Page key (slot >> [`PAGE_BITS`]) -> position in `pages`.
    index: FastMap<u64, u32>,
    pages: Vec<Page>,
    /// The page found last: (key, position in `pages`); no key is `u64::MAX`.
    last: std::cell::Cell<(u64, u32)>,
}

/// Cells from the start's that the covering's keys hold along each axis (10 bits, biased).
const CELL_BIAS: i64 = 512;

/// log2 of the slots per page of the covering.
const PAGE_BITS: u32 = 12;
const PAGE: usize = 1 << PAGE_BITS;

/// One page of the covering: the cost (A) and arriving direction of each slot;
/// [`UNREACHED`] in `dir` for a slot not reached yet.
struct Page {
    cost: Box<[f64]>,
    dir: Box<[u8]>,
}

const UNREACHED: u8 = u8::MAX;

impl Covering {
    fn new(dims: [i64; 3]) -> Self {
        Covering {
            dims,
            index: FastMap::default(),
            pages: Vec::new(),
            last: std::cell::Cell::new((u64::MAX, 0)),
        }
    }
    /// Key of a point; None for cells 512 or more from the start's along some axis.
    fn slot(&self, p: [i64; 3]) -> Option<u64> {
        let d = self.dims;
        let cell = [0, 1, 2].map(|a| p[a].div_euclid(d[a]));
        let v = [0, 1, 2].map(|a| p[a].rem_euclid(d[a]));
        let index = ((v[0] * d[1] + v[1]) * d[2] + v[2]) as u64;
        Self::slot_of(cell, index)
    }
    /// Key of the point of voxel `index` (grid index) in cell `cell`; None for cells 512 or
    /// more from the start's along some axis.
    #[inline]
    fn slot_of(cell: [i64; 3], index: u64) -> Option<u64> {
        if cell.iter().any(|c| c.abs() >= CELL_BIAS) {
            return None;
        }
        let c = |x: i64| (x + CELL_BIAS) as u64;
        Some(index | (c(cell[0]) << 32) | (c(cell[1]) << 42) | (c(cell[2]) << 52))
    }
    /// The cell and the voxel coordinates of the point of a key (the inverse of
    /// [`Covering::slot_of`]) on a grid of `n` points.
    #[inline]
    fn point_of(slot: u64, n: [usize; 3]) -> ([i64; 3], [usize; 3]) {
        let cell = [32, 42, 52].map(|shift| ((slot >> shift) & 0x3ff) as i64 - CELL_BIAS);
        let index = (slot & 0xffff_ffff) as usize;
        let r = [index / (n[1] * n[2]), (index / n[2]) % n[1], index % n[2]];
        (cell, r)
    }
    /// Cost and arriving direction (0..6, or [`SOURCE`]) of a point reached.
    fn get(&self, slot: u64) -> Option<(f64, u8)> {
        let page = &self.pages[self.page_of(slot >> PAGE_BITS)? as usize];
        let at = slot as usize & (PAGE - 1);
        let dir = page.dir[at];
        (dir != UNREACHED).then(|| (page.cost[at], dir))
    }
    /// Position in `pages` of the page with key `key`, if made: the last page found is
    /// remembered, since a search's consecutive look-ups mostly fall in one page.
    #[inline]
    fn page_of(&self, key: u64) -> Option<u32> {
        let (last_key, last) = self.last.get();
        if key == last_key {
            return Some(last);
        }
        let k = *self.index.get(&key)?;
        self.last.set((key, k));
        Some(k)
    }
    fn set(&mut self, slot: u64, cost: f64, dir: u8) {
        let next = self.pages.len() as u32;
        let k = match self.page_of(slot >> PAGE_BITS) {
            Some(k) => k,
            None => {
                self.index.insert(slot >> PAGE_BITS, next);
                next
            }
        };
        if k == next {
            self.pages.push(Page {
                cost: vec![0.0; PAGE].into_boxed_slice(),
                dir: vec![UNREACHED; PAGE].into_boxed_slice(),
            });
        }
        let page = &mut self.pages[k as usize];
        let at = slot as usize & (PAGE - 1);
        page.cost[at] = cost;
        page.dir[at] = dir;
    }
}

const SOURCE: u8 = 6;

/// Unit step of face direction `dir` (0: +a, 1: -a, 2: +b, 3: -b, 4: +c, 5: -c).
fn step(dir: usize) -> [i64; 3] {
    let mut d = [0; 3];
    d[dir / 2] = if dir.is_multiple_of(2) { 1 } else { -1 };
    d
}

/// Relative tolerance (of the value, or absolute below 1) within which a voxel ties with the
/// bottleneck: symmetry-equivalent points of the f32 grid differ by a few units in the last
/// place (about 1e-7 relative); 1e-5 is the kernel's tested agreement with the f64 reference.
pub const TIE_TOLERANCE: f32 = 1e-5;

/// What pass 2 needs of the whole grid for one start and one level, computed once and shared
/// by the windows the search tries: which voxels are open, the cost of a step, and the
/// estimate of the remaining cost.
struct UnderLevel {
    /// Energy of the start.
    e0: f64,
    /// Bottleneck value minus `e0` (at least 1e-30).
    span: f64,
    /// Open voxels: energy at most this (the level within the tie tolerance).
    level_open: f32,
    /// Length of one face step along each axis, A.
    steps: [f64; 3],
    /// `prefix[a][k]`: least cost of stepping into layers `0..k` along axis `a` (one period).
    prefix: [Vec<f64>; 3],
}

impl UnderLevel {
    /// The open voxels under `level` (the bottleneck's value) seen from a start of energy `e0`.
    fn new(grid: &Grid, e0: f64, level: f32, weight: f64) -> Self {
        let values = &grid.values;
        let bval = level as f64;
        let span = (bval - e0).max(1e-30);
        // Open voxels: energy at most the bottleneck's, within a tie tolerance. Compared by
        // energy, not by key, so that saddles tied with the bottleneck (the symmetry-equivalent
        // ones of a cubic network) are all open, whatever their grid index, and equivalent
        // directions get equivalent paths; the tolerance absorbs the last-place differences
        // between equivalent points of the f32 grid.
        let level_open = level + TIE_TOLERANCE * level.abs().max(1.0);
        let steps: [f64; 3] =
            [0, 1, 2].map(|a| grid.lattice.vector(a).norm() / grid.dims[a] as f64);
        // The estimate of the remaining cost. A chain of face steps from p to `to` must step
        // into every layer of voxels (a plane of fixed index along an axis) between them, one
        // step along that axis each; such a step costs at least its length times 1 + w r, with
        // r the lowest rise among the open voxels of the layer it lands in. The sum of those
        // least costs over the layers still to cross, axis by axis, never exceeds the remaining
        // cost, and a step changes it by at most the step's cost (the triangle inequality): the
        // first time `to` leaves the queue its cost is the least.
        let rise_of = |v: f32| ((v as f64 - e0) / span).max(0.0);
        let mut low = [0, 1, 2].map(|a| vec![f64::INFINITY; grid.dims[a]]);
        // the grid in storage order, one row of c at a time (no division per voxel)
        let nb = grid.dims[1];
        for (row, values_of_row) in values.chunks_exact(grid.dims[2]).enumerate() {
            let (i, j) = (row / nb, row % nb);
            for (k, &v) in values_of_row.iter().enumerate() {
                if v <= level_open {
                    let r = rise_of(v);
                    for (a, at) in [i, j, k].into_iter().enumerate() {
                        let l = &mut low[a][at];
                        *l = l.min(r);
                    }
                }
            }
        }
        let prefix = [0, 1, 2].map(|a| {
            let mut acc = vec![0.0; grid.dims[a] + 1];
            for k in 0..grid.dims[a] {
                let r = if low[a][k].is_finite() {
                    low[a][k]
                } else {
                    0.0
                };
                acc[k + 1] = acc[k] + steps[a] * (1.0 + weight * r);
            }
            acc
        });
        UnderLevel {
            e0,
            span,
            level_open,
            steps,
            prefix,
        }
    }

    #[inline]
    fn open(&self, v: f32) -> bool {
        v <= self.level_open
    }

    #[inline]
    fn rise_of(&self, v: f32) -> f64 {
        ((v as f64 - self.e0) / self.span).max(0.0)
    }
}

/// Pass 2: the path of least cost from `from` to `to` (unwrapped grid coordinates) through
/// the voxels open under `under` (see [`UnderLevel`]), by A* (see the estimate there), with
/// cells outside `window` (per axis, the lowest and highest cell) closed. Returns the points of
/// the path, `from` first; None when `to` is not reached within 511 cells of the start.
fn least_cost_path(
    grid: &Grid,
    from: [i64; 3],
    to: [i64; 3],
    under: &UnderLevel,
    weight: f64,
    window: Option<[[i64; 2]; 3]>,
) -> Option<Vec<[i64; 3]>> {
    let mut store = Covering::new(grid.dims.map(|d| d as i64));
    let values = &grid.values;
    let dims = grid.dims.map(|d| d as i64);
    let steps = under.steps;
    let prefix = &under.prefix;
    // least cost of stepping into the unwrapped layers below k along axis a (from layer 0)
    let below = |a: usize, k: i64| {
        let n = dims[a];
        prefix[a][n as usize] * k.div_euclid(n) as f64 + prefix[a][k.rem_euclid(n) as usize]
    };
    let estimate = |p: [i64; 3]| {
        (0..3)
            .map(|a| {
                let (u, v) = (p[a], to[a]);
                if u < v {
                    below(a, v + 1) - below(a, u + 1)
                } else {
                    below(a, u) - below(a, v)
                }
            })
            .sum::<f64>()
    };
    // The same estimate for a point given as its cell and voxel coordinates along each axis
    // (the unwrapped coordinate is cell * n + r), term by term, with no division: a step
    // changes one axis, so the other two terms are the popped point's.
    let n = grid.dims;
    let below_at = |a: usize, cell: i64, r: usize| prefix[a][n[a]] * cell as f64 + prefix[a][r];
    let below_to = [0, 1, 2].map(|a| below(a, to[a]));
    let below_past_to = [0, 1, 2].map(|a| below(a, to[a] + 1));
    let term = |a: usize, cell: i64, r: usize| {
        if cell * dims[a] + (r as i64) < to[a] {
            let (c1, r1) = if r + 1 == n[a] {
                (cell + 1, 0)
            } else {
                (cell, r + 1)
            };
            below_past_to[a] - below_at(a, c1, r1)
        } else {
            below_at(a, cell, r) - below_to[a]
        }
    };
    let s = store.slot(from)?;
    let target = store.slot(to)?;
    store.set(s, 0.0, SOURCE);
    let mut heap = BinaryHeap::new();
    // entries (f, u64::MAX - g, slot): the slot names the point (24 bytes per entry)
    heap.push(Reverse((estimate(from).to_bits(), u64::MAX, s)));
    let mut reached = false;
    while let Some(Reverse((_, gneg, slot))) = heap.pop() {
        let g = f64::from_bits(u64::MAX - gneg);
        if slot == target {
            reached = true;
            break;
        }
        if store.get(slot).is_some_and(|(b, _)| b < g) {
            continue;
        }
        let (cell, r) = Covering::point_of(slot, n);
        let terms = [0, 1, 2].map(|a| term(a, cell[a], r[a]));
        for dir in 0..6 {
            let a = dir / 2;
            // the neighbour's cell and voxel coordinate along the axis of the step
            let (c, ra) = if dir % 2 == 0 {
                if r[a] + 1 == n[a] {
                    (cell[a] + 1, 0)
                } else {
                    (cell[a], r[a] + 1)
                }
            } else if r[a] == 0 {
                (cell[a] - 1, n[a] - 1)
            } else {
                (cell[a], r[a] - 1)
            };
            if let Some(w) = &window
                && (c < w[a][0] || c > w[a][1])
            {
                continue;
            }
            let mut rq = r;
            rq[a] = ra;
            let y = grid.index(rq[0], rq[1], rq[2]);
            if !under.open(values[y]) {
                continue;
            }
            let mut cq = cell;
            cq[a] = c;
            let Some(qs) = Covering::slot_of(cq, y as u64) else {
                continue;
            };
            let rise = under.rise_of(values[y]);
            let nd = g + steps[a] * (1.0 + weight * rise);
            if store.get(qs).is_none_or(|(b, _)| nd < b) {
                store.set(qs, nd, dir as u8);
                let mut tq = terms;
                tq[a] = term(a, c, ra);
                let f = nd + tq.iter().copied().sum::<f64>();
                heap.push(Reverse((f.to_bits(), u64::MAX - nd.to_bits(), qs)));
            }
        }
    }
    if !reached {
        return None;
    }
    let mut path = vec![to];
    let mut p = to;
    loop {
        let (_, dir) = store.get(store.slot(p)?)?;
        if dir == SOURCE {
            break;
        }
        let d = step(dir as usize);
        p = [p[0] - d[0], p[1] - d[1], p[2] - d[2]];
        path.push(p);
    }
    path.reverse();
    Some(path)
}

/// Pass 2 as the profiles and the hops run it: the windows of the cells spanned by
/// `translation` (the unwrapped cell of `to`), then those and one more on each side, then the
/// unbounded covering (see the module notes), all under the same level.
fn least_cost_in_windows(
    grid: &Grid,
    from: [i64; 3],
    to: [i64; 3],
    translation: [i32; 3],
    level: f32,
    weight: f64,
) -> Option<Vec<[i64; 3]>> {
    let e0 = grid.values[{
        let dims = grid.dims.map(|d| d as i64);
        let w = [0, 1, 2].map(|a| from[a].rem_euclid(dims[a]) as usize);
        grid.index(w[0], w[1], w[2])
    }] as f64;
    let under = UnderLevel::new(grid, e0, level, weight);
    let window = |margin: i64| {
        Some([0, 1, 2].map(|a| {
            let t = translation[a] as i64;
            [t.min(0) - margin, t.max(0) + margin]
        }))
    };
    least_cost_path(grid, from, to, &under, weight, window(0))
        .or_else(|| least_cost_path(grid, from, to, &under, weight, window(1)))
        .or_else(|| least_cost_path(grid, from, to, &under, weight, None))
}

/// True when the bottleneck of the path from `start` to its image translated by `translation`
/// (below `ceiling`) is exactly `level`: the start is connected to that image through voxels
/// at or below `level`, and not through voxels strictly below it. The answer of
/// [`bottleneck_key`]'s value, by two breadth-first floods of the cell instead of a search in
/// minimax order: first the voxels below `level` connected to the start, each remembering the
/// image of the cell it was reached in, the loops closed by the edges between visited voxels
/// generating the winding lattice of that region (any spanning tree's fundamental cycles do);
/// then the flood goes on through the voxels equal to `level` it met. No queue ordered by
/// value, and each voxel is visited once.
///
/// Each voxel's image is kept in `i8` (see [`crate::percolation::Offset`]; 3 bytes per point
/// instead of 6 or 12, so that the flood's front stays in cache longer on large grids), in a
/// buffer of `floods` that the next search reuses; in `i32` when an image does not fit.
fn bottleneck_is(
    grid: &Grid,
    start: usize,
    translation: [i32; 3],
    level: f32,
    ceiling: f32,
    floods: &Floods,
) -> bool {
    let mut b = floods.take();
    let narrow = bottleneck_is_with::<i8>(
        &mut b.image,
        &mut b.queue,
        grid,
        start,
        translation,
        level,
        ceiling,
    );
    floods.give(b);
    narrow.unwrap_or_else(|| bottleneck_is_wide(grid, start, translation, level, ceiling))
}

/// [`bottleneck_is`] with the images in `i32`, which holds them all.
fn bottleneck_is_wide(
    grid: &Grid,
    start: usize,
    translation: [i32; 3],
    level: f32,
    ceiling: f32,
) -> bool {
    let (mut image, mut queue) = (Vec::new(), Vec::new());
    bottleneck_is_with::<i32>(
        &mut image,
        &mut queue,
        grid,
        start,
        translation,
        level,
        ceiling,
    )
    .expect("i32 holds the images of a grid of fewer than 2^30 points")
}

/// The grid-sized buffers of one flood: the image of each voxel, and the queue.
#[derive(Default)]
struct FloodBuffers {
    image: Vec<[i8; 3]>,
    queue: Vec<u32>,
}

/// Flood buffers handed from one search to the next, so that each search does not clear fresh
/// grid-sized arrays: as many sets as searches run at once (two on two cores), dropped with the
/// set of searches.
#[derive(Default)]
struct Floods(Mutex<Vec<FloodBuffers>>);

impl Floods {
    fn take(&self) -> FloodBuffers {
        self.0
            .lock()
            .ok()
            .and_then(|mut v| v.pop())
            .unwrap_or_default()
    }

    fn give(&self, buffers: FloodBuffers) {
        if let Ok(mut v) = self.0.lock() {
            v.push(buffers);
        }
    }
}

/// The answer of [`bottleneck_is`] with the images kept in `image` and the queue in `queue`
/// (both filled anew), or None when an image does not fit in `O`.
fn bottleneck_is_with<O: Offset>(
    image: &mut Vec<[O; 3]>,
    queue: &mut Vec<u32>,
    grid: &Grid,
    start: usize,
    translation: [i32; 3],
    level: f32,
    ceiling: f32,
) -> Option<bool> {
    let values = &grid.values;
    if start >= values.len() || !(level < ceiling) || !(values[start] <= level) {
        return Some(false);
    }
    let target = translation.map(i64::from);
    let split = IndexSplit::new(grid.dims);
    image.clear();
    image.resize(values.len(), [O::UNSET; 3]);
    queue.clear();
    let put = |v: [i32; 3]| -> Option<[O; 3]> {
        Some([O::try_put(v[0])?, O::try_put(v[1])?, O::try_put(v[2])?])
    };
    let unseen = |o: [O; 3]| o[0] == O::UNSET;
    let mut rows: Vec<[i64; 3]> = Vec::new();
    // voxels equal to `level` met in the first flood, with the image they were met in
    let mut at_level: Vec<(u32, [i32; 3])> = Vec::new();
    if values[start] < level {
        image[start] = put([0, 0, 0])?;
        queue.push(start as u32);
    } else {
        at_level.push((start as u32, [0, 0, 0]));
    }
    // adds the winding vector of a loop; true when the translation is then in the lattice
    let close = |rows: &mut Vec<[i64; 3]>, w: [i64; 3]| -> bool {
        if w != [0, 0, 0] && !in_lattice(rows, w) {
            rows.push(w);
            *rows = hnf(std::mem::take(rows));
            return in_lattice(rows, target);
        }
        false
    };
    for second in [false, true] {
        if second {
            for &(y, iy) in &at_level {
                let y = y as usize;
                if unseen(image[y]) {
                    image[y] = put(iy)?;
                    queue.push(y as u32);
                } else if close(
                    &mut rows,
                    [0, 1, 2].map(|a| (iy[a] - image[y][a].get()) as i64),
                ) {
                    return Some(true);
                }
            }
        }
        let mut head = 0;
        while head < queue.len() {
            let x = queue[head] as usize;
            head += 1;
            let ix = image[x].map(O::get);
            for (y, t) in face_neighbours(grid.dims, split.ijk(x)) {
                let iy = [ix[0] + t[0], ix[1] + t[1], ix[2] + t[2]];
                if !unseen(image[y]) {
                    // a loop (y == x on an axis of one point is a loop of one step)
                    if close(
                        &mut rows,
                        [0, 1, 2].map(|a| (iy[a] - image[y][a].get()) as i64),
                    ) {
                        // below the level: the bottleneck is lower
                        return Some(second);
                    }
                    continue;
                }
                let v = values[y];
                if v < level {
                    image[y] = put(iy)?;
                    queue.push(y as u32);
                } else if v == level {
                    if second {
                        image[y] = put(iy)?;
                        queue.push(y as u32);
                    } else {
                        at_level.push((y as u32, iy));
                    }
                }
            }
        }
        queue.clear();
    }
    Some(false)
}

/// The profile from `start` to its image translated by `translation`; None when the two are not
/// connected below the ceiling, or the translation is zero or too long to search.
pub fn channel_profile(
    grid: &Grid,
    start: usize,
    translation: [i32; 3],
    options: &ProfileOptions,
) -> Option<Profile> {
    search_profile(
        grid,
        start,
        translation,
        Bottleneck::Unknown,
        options,
        &Floods::default(),
    )
}

/// [`channel_profile`] with what is known of the bottleneck beforehand: a proved level skips
/// pass 1; a candidate level lets pass 2 run under it on one thread while the other checks it
/// ([`bottleneck_is`]); pass 2 runs again under pass 1's level when the candidate is not the
/// bottleneck. The profile is the same in every case.
fn search_profile(
    grid: &Grid,
    start: usize,
    translation: [i32; 3],
    bottleneck: Bottleneck,
    options: &ProfileOptions,
    floods: &Floods,
) -> Option<Profile> {
    if translation == [0, 0, 0]
        || start >= grid.len()
        || grid.len() > u32::MAX as usize
        || !(grid.values[start] < options.ceiling)
    {
        return None;
    }
    if translation.iter().any(|x| x.abs() >= 511) {
        return None;
    }
    let values = &grid.values;
    let dims = grid.dims.map(|d| d as i64);
    let from = grid.ijk(start).map(|x| x as i64);
    let to = [0, 1, 2].map(|a| from[a] + translation[a] as i64 * dims[a]);
    let weight = options.energy_weight.max(0.0);
    let pass2 = |level: f32| least_cost_in_windows(grid, from, to, translation, level, weight);
    // pass 1 (the bottleneck, by its value: pass 2 reads nothing else of it)
    let pass1 = || {
        bottleneck_key(grid, start, translation, options.ceiling)
            .map(|k| values[(k & 0xffff_ffff) as usize])
    };
    let path = match bottleneck {
        Bottleneck::Known(level) => pass2(level),
        Bottleneck::Candidate(level) => {
            let (right, path) = rayon::join(
                || bottleneck_is(grid, start, translation, level, options.ceiling, floods),
                || pass2(level),
            );
            if right { path } else { pass2(pass1()?) }
        }
        Bottleneck::Unknown => pass2(pass1()?),
    }?;
    let nodes: Vec<(usize, [i32; 3])> = path
        .iter()
        .map(|p| {
            let c = [0, 1, 2].map(|a| p[a].div_euclid(dims[a]) as i32);
            let v = [0, 1, 2].map(|a| p[a].rem_euclid(dims[a]) as usize);
            (grid.index(v[0], v[1], v[2]), c)
        })
        .collect();

    let mut points = Vec::with_capacity(nodes.len());
    let mut travelled = 0.0;
    let mut last: Option<Vector3<f64>> = None;
    for &(x, cell) in &nodes {
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
    let travelled = smooth_distances(&grid.lattice, &mut points);
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

/// Three-point averaging passes that take the grid's staircase out of a path (a binomial filter
/// of about 2.5 grid steps' width: the staircase goes, bends of an angstrom stay).
const SMOOTHING_PASSES: usize = 12;

/// Measures the distances along the path as the ion would travel it: the voxel path is
/// smoothed (ends held) and its points are placed at their arc length along the smoothed
/// polyline, so that a diagonal run of voxels counts as the straight line it stands for (a
/// staircase of grid steps is up to sqrt(3) times longer). Returns the total length, A.
fn smooth_distances(lattice: &crate::lattice::Lattice, points: &mut [ProfilePoint]) -> f64 {
    let mut s: Vec<_> = points.iter().map(|p| p.frac.0).collect();
    for _ in 0..SMOOTHING_PASSES {
        let q = s.clone();
        for i in 1..s.len().saturating_sub(1) {
            s[i] = (q[i - 1] + q[i] * 2.0 + q[i + 1]) / 4.0;
        }
    }
    let mut travelled = 0.0;
    for i in 0..points.len() {
        if i > 0 {
            travelled += lattice.frac_delta_length(s[i] - s[i - 1]);
        }
        points[i].distance = travelled;
    }
    travelled
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

/// The least-cost voxel path (see the module notes) from voxel `from` to voxel `to` in the
/// image translated by `image`, through voxels no higher than the value of voxel `level_voxel`
/// (a hop's saddle). Returns each voxel with the lattice cell it is unwrapped into (`from` in
/// cell 0, `to` in `image`); None when the two are not connected at that level.
pub fn path_between(
    grid: &Grid,
    from: usize,
    to: usize,
    image: [i32; 3],
    level_voxel: usize,
    energy_weight: f64,
) -> Option<Vec<(usize, [i32; 3])>> {
    if from >= grid.len() || to >= grid.len() || level_voxel >= grid.len() {
        return None;
    }
    let dims = grid.dims.map(|d| d as i64);
    let a = grid.ijk(from).map(|x| x as i64);
    let b = grid.ijk(to);
    let b = [0, 1, 2].map(|k| b[k] as i64 + image[k] as i64 * dims[k]);
    let path = least_cost_in_windows(
        grid,
        a,
        b,
        image,
        grid.values[level_voxel],
        energy_weight.max(0.0),
    )?;
    Some(
        path.iter()
            .map(|p| {
                let c = [0, 1, 2].map(|k| p[k].div_euclid(dims[k]) as i32);
                let v = [0, 1, 2].map(|k| p[k].rem_euclid(dims[k]) as usize);
                (grid.index(v[0], v[1], v[2]), c)
            })
            .collect(),
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    /// `count` points with coordinates in [-half, half) along each axis, from a linear
    /// congruential generator (Knuth's MMIX constants); every other point is a neighbour of the
    /// one before, so that consecutive look-ups often fall in one page of the covering.
    fn points(seed: u64, half: i64, count: usize) -> Vec<[i64; 3]> {
        let mut state = seed;
        let mut out: Vec<[i64; 3]> = Vec::with_capacity(count);
        for i in 0..count {
            state = state
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            let p = match out.last() {
                Some(&q) if i % 2 == 1 => {
                    let mut p = q;
                    p[(state >> 40) as usize % 3] += if state >> 63 == 0 { 1 } else { -1 };
                    p
                }
                _ => [0, 1, 2].map(|a| ((state >> (16 * a + 8)) % (2 * half as u64)) as i64 - half),
            };
            out.push(p);
        }
        out
    }

    #[test]
    fn the_paged_covering_keeps_what_a_hash_map_keeps() {
        // oracle: the standard library's HashMap, keyed by the same slots; points spread over
        // many cells, then a dense walk whose pages are found again and again (the remembered
        // page of the covering)
        let mut store = Covering::new([7, 5, 300]);
        let mut reference = std::collections::HashMap::new();
        let spread = points(12345, 2000, 20_000).into_iter();
        for (i, p) in spread.chain(points(54321, 40, 20_000)).enumerate() {
            let Some(slot) = store.slot(p) else { continue };
            assert_eq!(
                store.get(slot),
                reference.get(&slot).copied(),
                "point {p:?}"
            );
            if i % 3 != 0 {
                let v = (i as f64 * 0.37, (i % 7) as u8);
                store.set(slot, v.0, v.1);
                reference.insert(slot, v);
            }
        }
        for (&slot, &v) in &reference {
            assert_eq!(store.get(slot), Some(v));
        }
        assert!(store.slot([0, 0, 512 * 300]).is_none());
    }

    #[test]
    fn a_key_gives_back_its_point() {
        // exact: p = cell * n + r along each axis, for points within the keys' range of cells
        let n = [7usize, 5, 300];
        let store = Covering::new(n.map(|x| x as i64));
        let mut seen = 0;
        for p in points(777, 4000, 20_000) {
            let Some(slot) = store.slot(p) else { continue };
            seen += 1;
            let (cell, r) = Covering::point_of(slot, n);
            for a in 0..3 {
                assert_eq!(cell[a] * n[a] as i64 + r[a] as i64, p[a], "{p:?} axis {a}");
                assert!(r[a] < n[a]);
            }
        }
        assert!(seen > 10_000);
        for p in [[-511 * 7, 511 * 5 + 4, -511 * 300], [0, 0, 0], [6, 4, 299]] {
            let (cell, r) = Covering::point_of(store.slot(p).unwrap(), n);
            assert_eq!([0, 1, 2].map(|a| cell[a] * n[a] as i64 + r[a] as i64), p);
        }
    }
}

#[cfg(test)]
mod bottleneck_tests {
    use super::*;
    use crate::percolation::{ZeroOnly, percolate};

    /// Random landscapes (some quantised so that many voxels tie), odd and tiny grids, a
    /// skewed cell, walls below a ceiling: the cases of the profile tests in `tests/channels.rs`.
    fn landscapes() -> Vec<(Grid, f32)> {
        let lattice = crate::percolation::skewed_lattice();
        let mut next = crate::percolation::xorshift(0x2545_f491_4f6c_dd1d);
        let mut out = Vec::new();
        for dims in [[6, 5, 4], [1, 6, 6], [2, 2, 9], [9, 8, 7], [12, 11, 10]] {
            for quantum in [None, Some(6.0)] {
                for ceiling in [0.35, 0.5, 0.7, f32::INFINITY] {
                    let mut g = Grid::new(lattice.clone(), dims, 0.0);
                    for v in g.values.iter_mut() {
                        let x = next();
                        *v = match quantum {
                            Some(q) => (x * q).floor() / q,
                            None => x,
                        } as f32;
                    }
                    out.push((g, ceiling));
                }
            }
        }
        out
    }

    #[test]
    fn the_two_floods_confirm_the_minimax_bottleneck_and_no_other_level() {
        // oracle: pass 1, the search in minimax (Prim's) order, an exact answer on any grid
        let translations = [
            [1, 0, 0],
            [0, 1, 0],
            [0, 0, 1],
            [1, 1, 0],
            [1, -1, 1],
            [2, 0, 0],
        ];
        let mut confirmed = 0;
        let mut refused = 0;
        let mut fell_back = 0;
        let floods = Floods::default();
        for (g, ceiling) in landscapes() {
            let mut distinct: Vec<f32> = g.values.clone();
            distinct.sort_by(f32::total_cmp);
            distinct.dedup();
            // open starts only: pass 1 is run from nothing else (`channel_profile`)
            for start in (0..g.len()).step_by(7).filter(|&x| g.values[x] < ceiling) {
                for tr in translations {
                    let exact = bottleneck_key(&g, start, tr, ceiling)
                        .map(|k| g.values[(k & 0xffff_ffff) as usize]);
                    // the bottleneck, the values next to it, and a sample of the others
                    let at = exact.map_or(0, |e| distinct.partition_point(|&v| v < e));
                    let near = distinct[at.saturating_sub(2)..(at + 3).min(distinct.len())].iter();
                    for &level in near.chain(distinct.iter().step_by(11)) {
                        let said = bottleneck_is(&g, start, tr, level, ceiling, &floods);
                        assert_eq!(
                            said,
                            exact == Some(level),
                            "dims {:?}, start {start}, {tr:?}, level {level}, pass 1 {exact:?}",
                            g.dims
                        );
                        // the same with images that hold 0 only: the fallback to i32 whenever
                        // the flood crosses the cell's boundary
                        let (mut image, mut queue) = (Vec::new(), Vec::new());
                        let narrow = bottleneck_is_with::<ZeroOnly>(
                            &mut image, &mut queue, &g, start, tr, level, ceiling,
                        );
                        if narrow.is_none() {
                            fell_back += 1;
                        }
                        let said_narrow = narrow
                            .unwrap_or_else(|| bottleneck_is_wide(&g, start, tr, level, ceiling));
                        assert_eq!(said_narrow, said);
                        if said {
                            confirmed += 1;
                        } else {
                            refused += 1;
                        }
                    }
                }
            }
        }
        assert!(confirmed > 500 && refused > 1000, "{confirmed} {refused}");
        assert!(fell_back > 1000, "{fell_back}");
    }

    #[test]
    fn the_level_the_percolation_proves_is_the_minimax_bottleneck_and_the_profile_is_the_same() {
        // oracle: pass 1 (above); the percolation is the union-find sweep, a separate algorithm
        let (mut proved, mut proposed, mut proposed_right) = (0, 0, 0);
        for (g, ceiling) in landscapes() {
            let p = percolate(&g, ceiling);
            let options = ProfileOptions {
                ceiling,
                ..Default::default()
            };
            for t in p.thresholds.iter().flatten() {
                for tr in t.channel.span.translations() {
                    let start = t.channel.lowest_point;
                    let exact = bottleneck_key(&g, start, tr, ceiling)
                        .map(|k| g.values[(k & 0xffff_ffff) as usize]);
                    let known = known_bottleneck(&g, &p, &options, t, (start, tr));
                    // the profile is the one of the search without help, right or wrong
                    assert_eq!(
                        search_profile(&g, start, tr, known, &options, &Floods::default()),
                        channel_profile(&g, start, tr, &options),
                        "dims {:?}, {tr:?}, {known:?}",
                        g.dims
                    );
                    match known {
                        Bottleneck::Known(level) => {
                            assert_eq!(Some(level), exact, "dims {:?}, {tr:?}", g.dims);
                            proved += 1;
                        }
                        Bottleneck::Candidate(level) => {
                            // a level at which the start reaches its image: never below the
                            // bottleneck (and checked before use when above it)
                            assert!(exact.is_some_and(|e| e <= level), "{exact:?} {level}");
                            proposed += 1;
                            proposed_right += usize::from(exact == Some(level));
                        }
                        Bottleneck::Unknown => panic!("the grid's own percolation"),
                    }
                }
            }
        }
        // both kinds of candidate occur: the check confirms some and sends others to pass 1
        assert!(
            proved > 20 && proposed_right > 0 && proposed > proposed_right,
            "{proved} {proposed} {proposed_right}"
        );
    }

    #[test]
    fn a_percolation_of_another_ceiling_proves_nothing() {
        let (g, _) = landscapes().remove(3);
        let p = percolate(&g, f32::INFINITY);
        let t = p.thresholds[0].as_ref().expect("a random grid percolates");
        let job = (t.channel.lowest_point, t.channel.span.translations()[0]);
        let other = ProfileOptions {
            ceiling: 0.9,
            ..Default::default()
        };
        assert!(matches!(
            known_bottleneck(&g, &p, &other, t, job),
            Bottleneck::Candidate(_)
        ));
    }
}
