//! Percolation of a periodic landscape: is there a channel, in how many dimensions, at what
//! energy (science notes, section 4).
//!
//! The voxels of the grid are visited in increasing value and each is joined to its
//! already-visited face neighbours (6-connectivity, periodic) with a union-find. Every node
//! carries the lattice translation between its own image and the image of its root, so a join
//! between two nodes of the same component across the cell boundary closes a loop whose winding
//! vector `w = off(u) + t - off(v)` is a lattice vector of the channel. The winding vectors of a
//! component span its *winding lattice*; its rank (1, 2, 3) is the dimension in which the
//! component percolates. The energy at which a rank is first reached by any component is
//! `E_1D <= E_2D <= E_3D`.
//!
//! Invariants:
//! - voxels are ordered by `(value, index)`: ties are broken by grid index, so every result is
//!   deterministic and the site graph can reproduce it exactly (its edges are ordered by the
//!   same key of their saddle voxel);
//! - a voxel is open when its value is strictly below the ceiling (values at the cap are walls);
//!   NaN is never open;
//! - results that depend on the order inside a run of equal values (which component closed its
//!   loop first) are read only at the end of the run, when every voxel of that value has been
//!   joined: symmetric channels opening at the same energy are all counted.
//! - a region whose winding lattice has rank 3 can open nothing more: once the first appears
//!   (the *settled* region), the grid sweep lets a voxel whose added neighbours all lie in it
//!   join it by bit maps alone, without a union-find record; every field of the result is the
//!   same as without this (tested against the plain sweep).
//!
//! The same union-find runs on the site graph of [`crate::network::graph`].

use crate::grid::Grid;
use crate::lattice::Lattice;
use std::collections::HashMap;
use std::hash::{BuildHasherDefault, Hasher};

// ------------------------------------------------------------------------------------------
// Ordering keys
// ------------------------------------------------------------------------------------------

/// Order-preserving map of a (non-NaN) `f32` onto `u32`; `-0.0` and `0.0` map to the same key.
#[inline]
pub(crate) fn f32_key(v: f32) -> u32 {
    let v = if v == 0.0 { 0.0 } else { v };
    let b = v.to_bits();
    if b & 0x8000_0000 != 0 {
        !b
    } else {
        b | 0x8000_0000
    }
}

/// The total order of voxels: value first, grid index second.
#[inline]
pub(crate) fn total_key(v: f32, idx: usize) -> u64 {
    ((f32_key(v) as u64) << 32) | idx as u64
}

/// Inverse of [`f32_key`].
#[inline]
pub(crate) fn key_f32(k: u32) -> f32 {
    if k & 0x8000_0000 != 0 {
        f32::from_bits(k & 0x7fff_ffff)
    } else {
        f32::from_bits(!k)
    }
}

/// Grid index of a visiting key (see [`visit_order`]).
#[inline]
pub fn key_index(key: u64) -> usize {
    (key & 0xffff_ffff) as usize
}

/// Value of a visiting key (see [`visit_order`]); `-0.0` comes back as `0.0`.
#[inline]
pub fn key_value(key: u64) -> f32 {
    key_f32((key >> 32) as u32)
}

/// The open voxels (value strictly below `ceiling`, NaN excluded) in increasing `(value, index)`
/// order, as keys `(order-preserving bits of the value) << 32 | index` (read them with
/// [`key_index`] and [`key_value`]): the sweep then reads values in sequence rather than
/// scattered over the grid. Grids must have fewer than 2^32 points.
///
/// Sorted in two steps, so that only one pass moves keys across main memory. First, one
/// scatter by the top 16 bits of the value into *chunks*: runs of consecutive 16-bit digits
/// holding at most `CHUNK` keys together (a digit with more keys is a chunk of its own), so
/// about 200 streams of writes on a grid of ten million points. The keys are made in this
/// pass, straight from the values. Then each chunk, small enough to stay in the processor's
/// second-level cache, is sorted on its own by a least-significant-digit radix sort on the value
/// bits (`radix_sort_by_value`). Every pass is stable and the keys are made in index
/// order, so ties keep index order.
pub fn visit_order(values: &[f32], ceiling: f32) -> Vec<u64> {
    let open = |v: f32| v < ceiling;
    if values.len() <= CHUNK {
        // one chunk at most: no need to count the digits
        let mut items = open_items(values, ceiling);
        let mut buf = vec![0u64; items.len()];
        radix_sort_by_value(&mut items, &mut buf);
        return items;
    }
    let mut hist = vec![0u32; 1 << 16];
    let mut n = 0usize;
    for &v in values {
        if open(v) {
            hist[(f32_key(v) >> 16) as usize] += 1;
            n += 1;
        }
    }
    let mut out = vec![0u64; n];
    // chunk of each 16-bit digit, and where each chunk starts in `out`
    let mut chunk_of = vec![0u32; 1 << 16];
    let mut starts: Vec<usize> = vec![0];
    let mut filled = 0usize;
    let mut at = 0usize;
    for (d, &c) in hist.iter().enumerate() {
        let c = c as usize;
        if filled > 0 && filled + c > CHUNK {
            starts.push(at);
            filled = 0;
        }
        chunk_of[d] = (starts.len() - 1) as u32;
        filled += c;
        at += c;
    }
    let bounds: Vec<(usize, usize)> = starts
        .iter()
        .zip(starts.iter().skip(1).chain(std::iter::once(&n)))
        .map(|(&a, &b)| (a, b))
        .collect();
    let mut next = starts;
    for (i, &v) in values.iter().enumerate() {
        if open(v) {
            let k = f32_key(v);
            let c = chunk_of[(k >> 16) as usize] as usize;
            out[next[c]] = (k as u64) << 32 | i as u64;
            next[c] += 1;
        }
    }
    let mut scratch = vec![0u64; CHUNK];
    for (a, b) in bounds {
        let chunk = &mut out[a..b];
        if scratch.len() < chunk.len() {
            scratch.resize(chunk.len(), 0);
        }
        radix_sort_by_value(chunk, &mut scratch[..b - a]);
    }
    out
}

/// Keys per chunk of [`visit_order`]: 256 KiB of keys and as much scratch, which stay in the
/// second-level cache (1 MiB per core on this machine's processor, 512 KiB on most).
const CHUNK: usize = 1 << 15;

/// Sorts `keys` by their value bits (the top 32), stably, by a least-significant-digit radix
/// sort in three passes of 11, 11 and 10 bits; a pass whose digit is the same for every key is
/// skipped. `buf` (as long as `keys`) is scratch; the result is left in `keys`.
fn radix_sort_by_value(keys: &mut [u64], buf: &mut [u64]) {
    const SHIFTS: [u32; 3] = [32, 43, 54];
    const MASKS: [u64; 3] = [0x7ff, 0x7ff, 0x3ff];
    let mut hist = [[0usize; 2048]; 3];
    for &x in keys.iter() {
        for p in 0..3 {
            hist[p][((x >> SHIFTS[p]) & MASKS[p]) as usize] += 1;
        }
    }
    let n = keys.len();
    let mut in_keys = true;
    for p in 0..3 {
        if hist[p].contains(&n) {
            continue; // every key has the same digit: the pass would not move anything
        }
        let mut start = [0usize; 2048];
        let mut acc = 0;
        for (s, &c) in start.iter_mut().zip(hist[p].iter()) {
            *s = acc;
            acc += c;
        }
        let (src, dst): (&[u64], &mut [u64]) = if in_keys { (keys, buf) } else { (buf, keys) };
        for &x in src.iter() {
            let d = ((x >> SHIFTS[p]) & MASKS[p]) as usize;
            dst[start[d]] = x;
            start[d] += 1;
        }
        in_keys = !in_keys;
    }
    if !in_keys {
        keys.copy_from_slice(buf);
    }
}

/// The same order as [`visit_order`], by a comparison sort (`sort_unstable` on the packed
/// `(value, index)` keys). Kept as the reference the benchmark measures the radix sort against.
pub fn visit_order_by_comparison(values: &[f32], ceiling: f32) -> Vec<u64> {
    let mut items = open_items(values, ceiling);
    items.sort_unstable();
    items
}

fn open_items(values: &[f32], ceiling: f32) -> Vec<u64> {
    values
        .iter()
        .enumerate()
        .filter(|(_, v)| **v < ceiling)
        .map(|(i, &v)| total_key(v, i))
        .collect()
}

// ------------------------------------------------------------------------------------------
// Result types
// ------------------------------------------------------------------------------------------

/// How a connected region extends through the crystal: the winding lattice of the region,
/// in lattice-vector components `[u, v, w]` (multiples of **a**, **b**, **c**).
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Span {
    /// A closed pocket: no loop around the cell.
    Closed,
    /// A 1D channel. `repeat` generates the winding lattice (the translation after which the
    /// channel repeats itself, usually equal to `direction`); `direction` is the primitive
    /// lattice direction `[uvw]`, first nonzero component positive.
    Line {
        repeat: [i32; 3],
        direction: [i32; 3],
    },
    /// A 2D layer. `vectors` span its winding lattice (reduced: shortest first in the Cartesian
    /// metric, each with its first nonzero component positive); `normal` is the plane given by
    /// Miller-like indices `(hkl)` of the lattice plane containing both vectors, primitive and
    /// with its first nonzero component positive.
    Plane {
        vectors: [[i32; 3]; 2],
        normal: [i32; 3],
    },
    /// A 3D network; `vectors` are a basis of its winding lattice (Hermite normal form, usually
    /// `[100], [010], [001]`).
    Space { vectors: [[i32; 3]; 3] },
}

impl Span {
    pub fn dimension(&self) -> u8 {
        match self {
            Span::Closed => 0,
            Span::Line { .. } => 1,
            Span::Plane { .. } => 2,
            Span::Space { .. } => 3,
        }
    }

    /// The lattice translations that generate the span (empty for a closed pocket).
    pub fn translations(&self) -> Vec<[i32; 3]> {
        match self {
            Span::Closed => vec![],
            Span::Line { repeat, .. } => vec![*repeat],
            Span::Plane { vectors, .. } => vectors.to_vec(),
            Span::Space { vectors } => vectors.to_vec(),
        }
    }

    /// The direction of a line, the normal of a plane, `[0, 0, 0]` otherwise: what tells
    /// families of channels apart.
    pub fn key(&self) -> [i32; 3] {
        match self {
            Span::Line { direction, .. } => *direction,
            Span::Plane { normal, .. } => *normal,
            _ => [0, 0, 0],
        }
    }

    fn from_rows(rows: &[[i64; 3]], lattice: &Lattice) -> Span {
        let to32 = |r: [i64; 3]| r.map(|x| x as i32);
        match rows.len() {
            0 => Span::Closed,
            1 => {
                let r = to32(rows[0]);
                Span::Line {
                    repeat: sign_normalised(r),
                    direction: primitive(r),
                }
            }
            2 => {
                let (u, v) = gauss_reduce(to32(rows[0]), to32(rows[1]), lattice);
                let n = cross(u, v);
                Span::Plane {
                    vectors: [sign_normalised(u), sign_normalised(v)],
                    normal: primitive(n),
                }
            }
            _ => Span::Space {
                vectors: [to32(rows[0]), to32(rows[1]), to32(rows[2])],
            },
        }
    }
}

/// Writes `[uvw]`, `(hkl)`-style triples the crystallographer's way: `-1` as `-1`, joined
/// without separators when every component is a single digit (`[1-10]`), else with commas.
pub fn format_indices(v: [i32; 3]) -> String {
    if v.iter().all(|x| x.abs() < 10) {
        v.iter().map(|x| x.to_string()).collect::<String>()
    } else {
        v.map(|x| x.to_string()).join(",")
    }
}

impl std::fmt::Display for Span {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Span::Closed => write!(f, "closed"),
            Span::Line { direction, .. } => write!(f, "1D along [{}]", format_indices(*direction)),
            Span::Plane { normal, .. } => {
                write!(f, "2D in the ({}) plane", format_indices(*normal))
            }
            Span::Space { .. } => write!(f, "3D"),
        }
    }
}

/// One connected region as it stood when it reached its dimension (read at the end of the run
/// of equal values in which that happened).
#[derive(Debug, Clone, PartialEq)]
pub struct Channel {
    pub dimension: u8,
    pub span: Span,
    /// Energy (grid units: eV for a site-energy grid, v.u. for a valence-mismatch grid) at which
    /// this region reached `dimension`.
    pub onset: f32,
    /// Lowest value inside the region at that moment.
    pub lowest: f32,
    /// Lowest value among the marked points of the region (see [`percolate_marked`]: the
    /// occupied sites of the mobile ion), when it holds any.
    pub marked_lowest: Option<f32>,
    /// The barrier of this channel: `onset - marked_lowest` when the region holds marked
    /// points, else `onset - lowest`.
    pub barrier: f32,
    /// Where the lowest value sits: a grid index for a grid percolation, a site index for the
    /// site graph.
    pub lowest_point: usize,
    /// Points in the region (voxels, or sites for the site graph).
    pub size: usize,
    /// `size` over all points of the cell.
    pub fraction: f64,
}

/// The first energy at which some region percolates in `dimension` dimensions.
#[derive(Debug, Clone, PartialEq)]
pub struct Threshold {
    pub dimension: u8,
    /// `E_d` (grid units).
    pub energy: f32,
    /// `E_d` minus the lowest value of the deepest region percolating at `E_d` (the largest
    /// barrier among the regions that open together; they are usually symmetry copies), or,
    /// when the percolating regions hold marked points, `E_d` minus the lowest of those.
    pub barrier: f32,
    /// Lowest value among the marked points of the regions percolating at `E_d`.
    pub marked_lowest: Option<f32>,
    /// That deepest region.
    pub channel: Channel,
    /// Number of distinct regions percolating in at least `dimension` dimensions at `E_d`
    /// (e.g. the separate tunnels of a tunnel structure).
    pub components: usize,
    /// Fraction of the cell in those regions at `E_d`.
    pub fraction: f64,
}

/// Channels of one kind: the same dimension and the same direction (1D) or plane (2D).
#[derive(Debug, Clone, PartialEq)]
pub struct ChannelFamily {
    pub dimension: u8,
    /// The span of the first member.
    pub span: Span,
    /// Energy at which the first member opened.
    pub onset: f32,
    /// Barrier of the first member.
    pub barrier: f32,
    /// Lowest marked point of the first member.
    pub marked_lowest: Option<f32>,
    /// How many regions opened independently with this dimension and direction.
    pub components: usize,
}

/// What is open at one level.
#[derive(Debug, Clone, PartialEq)]
pub struct LevelStats {
    pub level: f32,
    /// Fraction of the cell with a value at or below the level.
    pub open_fraction: f64,
    /// Fraction of the cell in regions percolating in at least 1, 2 and 3 dimensions.
    pub percolating_fraction: [f64; 3],
    /// Highest dimension reached at this level (0 when nothing percolates).
    pub dimension: u8,
}

/// The outcome of a percolation analysis.
#[derive(Debug, Clone, PartialEq)]
pub struct Percolation {
    pub ceiling: f32,
    /// Highest dimension reached below the ceiling; 0 when nothing percolates.
    pub dimension: u8,
    /// `thresholds[d - 1]` is the first `d`-dimensional percolation, when reached.
    pub thresholds: [Option<Threshold>; 3],
    /// Every time a region reached a higher dimension, in increasing energy.
    pub openings: Vec<Channel>,
    /// Openings grouped by dimension and direction or plane, in increasing onset energy: tells
    /// apart e.g. tunnels along `[100]` and along `[010]` that do not connect.
    pub families: Vec<ChannelFamily>,
    /// Lowest open value (None when nothing is below the ceiling).
    pub lowest: Option<f32>,
    /// Number of points of the cell (voxels, or sites for the site graph).
    pub points: usize,
    /// Fraction of the cell below the ceiling.
    pub open_fraction: f64,
    /// Fraction of the cell in the largest connected region below the ceiling.
    pub largest_fraction: f64,
    /// Statistics at the levels asked for (see [`percolate_levels`]).
    pub levels: Vec<LevelStats>,
}

impl Percolation {
    /// Energy of the highest threshold reached (the network of the highest dimension opens
    /// there); None when nothing percolates.
    pub fn highest_threshold(&self) -> Option<f32> {
        self.thresholds.iter().flatten().last().map(|t| t.energy)
    }

    /// The first `d`-dimensional percolation (`d` = 1, 2, 3).
    pub fn threshold(&self, d: u8) -> Option<&Threshold> {
        if (1..=3).contains(&d) {
            self.thresholds[d as usize - 1].as_ref()
        } else {
            None
        }
    }
    /// `E_d`, when reached.
    pub fn energy(&self, d: u8) -> Option<f32> {
        self.threshold(d).map(|t| t.energy)
    }
}

// ------------------------------------------------------------------------------------------
// Integer lattice helpers
// ------------------------------------------------------------------------------------------

fn gcd(a: i64, b: i64) -> i64 {
    if b == 0 { a.abs() } else { gcd(b, a % b) }
}

fn sign_normalised(v: [i32; 3]) -> [i32; 3] {
    match v.iter().find(|&&x| x != 0) {
        Some(&x) if x < 0 => v.map(|y| -y),
        _ => v,
    }
}

fn primitive(v: [i32; 3]) -> [i32; 3] {
    let g = gcd(gcd(v[0] as i64, v[1] as i64), v[2] as i64);
    if g == 0 {
        return v;
    }
    sign_normalised(v.map(|x| (x as i64 / g) as i32))
}

fn cross(u: [i32; 3], v: [i32; 3]) -> [i32; 3] {
    [
        u[1] * v[2] - u[2] * v[1],
        u[2] * v[0] - u[0] * v[2],
        u[0] * v[1] - u[1] * v[0],
    ]
}

/// Lagrange-Gauss reduction of a 2D lattice basis in the Cartesian metric of `lattice`.
fn gauss_reduce(mut u: [i32; 3], mut v: [i32; 3], lattice: &Lattice) -> ([i32; 3], [i32; 3]) {
    let cart = |w: [i32; 3]| {
        lattice.matrix() * nalgebra::Vector3::new(w[0] as f64, w[1] as f64, w[2] as f64)
    };
    for _ in 0..64 {
        let (cu, cv) = (cart(u), cart(v));
        if cu.norm_squared() > cv.norm_squared() + 1e-9 {
            std::mem::swap(&mut u, &mut v);
            continue;
        }
        let m = (cu.dot(&cv) / cu.norm_squared()).round() as i32;
        if m == 0 {
            break;
        }
        v = [v[0] - m * u[0], v[1] - m * u[1], v[2] - m * u[2]];
    }
    (u, v)
}

/// Hermite normal form (row echelon with positive pivots, entries above pivots reduced) of the
/// lattice generated by `rows`; zero rows are dropped, so the length is the rank.
pub(crate) fn hnf(mut rows: Vec<[i64; 3]>) -> Vec<[i64; 3]> {
    let mut r = 0;
    for col in 0..3 {
        if r == rows.len() {
            break;
        }
        loop {
            let mut best: Option<usize> = None;
            for i in r..rows.len() {
                if rows[i][col] != 0 && best.is_none_or(|b| rows[i][col].abs() < rows[b][col].abs())
                {
                    best = Some(i);
                }
            }
            let Some(b) = best else { break };
            rows.swap(r, b);
            let p = rows[r][col];
            let mut clean = true;
            for i in r + 1..rows.len() {
                let q = rows[i][col] / p;
                if q != 0 {
                    for c in 0..3 {
                        rows[i][c] -= q * rows[r][c];
                    }
                }
                if rows[i][col] != 0 {
                    clean = false;
                }
            }
            if clean {
                if p < 0 {
                    for c in 0..3 {
                        rows[r][c] = -rows[r][c];
                    }
                }
                let p = rows[r][col];
                for i in 0..r {
                    let q = rows[i][col].div_euclid(p);
                    if q != 0 {
                        for c in 0..3 {
                            rows[i][c] -= q * rows[r][c];
                        }
                    }
                }
                r += 1;
                break;
            }
        }
    }
    rows.truncate(r);
    rows
}

/// True when `w` lies in the lattice whose Hermite normal form is `rows`.
pub(crate) fn in_lattice(rows: &[[i64; 3]], w: [i64; 3]) -> bool {
    let mut w = w;
    for row in rows {
        let col = match row.iter().position(|&x| x != 0) {
            Some(c) => c,
            None => continue,
        };
        if w[col] % row[col] != 0 {
            return false;
        }
        let q = w[col] / row[col];
        for c in 0..3 {
            w[c] -= q * row[c];
        }
    }
    w == [0, 0, 0]
}

// ------------------------------------------------------------------------------------------
// The sweep: union-find with image offsets and winding lattices
// ------------------------------------------------------------------------------------------

/// Integer type of the image offsets stored, one per voxel, by the basin search
/// (`network::hops`) and the profile's floods (`network::profile`); the sweep below stores
/// `i32`.
///
/// An offset is a difference of two images of one realisation of a region, reached by a chain
/// of face steps, so it can in principle grow to the number of voxels over the points along
/// the shortest axis: past `i16` on grids of a few million points. In practice the images
/// stay within a few cells of each other. So the searches store `i8` first (3 bytes per voxel
/// rather than 6 or 12: less memory to clear, and a front that stays in cache on large
/// grids); a search that meets an offset `i8` cannot hold stops, and is run again with `i32`,
/// which holds every offset of a grid of fewer than 2^30 points (the memory budget of
/// `limits` allows far fewer). The answer is the same either way.
pub(crate) trait Offset: Copy + Default + PartialEq {
    /// Marks an entry not written yet; never a stored offset.
    const UNSET: Self;
    fn get(self) -> i32;
    /// `v` when this type holds it (and it is not [`Offset::UNSET`]); None otherwise.
    fn try_put(v: i32) -> Option<Self>;
}
impl Offset for i8 {
    const UNSET: i8 = i8::MIN;
    #[inline]
    fn get(self) -> i32 {
        self as i32
    }
    #[inline]
    fn try_put(v: i32) -> Option<i8> {
        (v > i8::MIN as i32 && v <= i8::MAX as i32).then_some(v as i8)
    }
}
impl Offset for i32 {
    const UNSET: i32 = i32::MIN;
    #[inline]
    fn get(self) -> i32 {
        self
    }
    #[inline]
    fn try_put(v: i32) -> Option<i32> {
        (v != i32::MIN).then_some(v)
    }
}

/// An offset type that holds 0 only: the tests run the narrow searches with it, so that any
/// crossing of the cell's boundary takes their fallback to `i32`.
#[cfg(test)]
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub(crate) struct ZeroOnly(i8);
#[cfg(test)]
impl Offset for ZeroOnly {
    const UNSET: ZeroOnly = ZeroOnly(1);
    fn get(self) -> i32 {
        self.0 as i32
    }
    fn try_put(v: i32) -> Option<ZeroOnly> {
        (v == 0).then_some(ZeroOnly(0))
    }
}

/// A multiplicative hasher for small integer keys (roots, basin pairs): the keys are not
/// adversarial, and the default SipHash costs more than the work around it.
#[derive(Default, Clone, Copy)]
pub(crate) struct FastHasher(u64);
impl Hasher for FastHasher {
    #[inline]
    fn finish(&self) -> u64 {
        self.0
    }
    #[inline]
    fn write(&mut self, bytes: &[u8]) {
        for &b in bytes {
            self.write_u64(b as u64);
        }
    }
    #[inline]
    fn write_u64(&mut self, x: u64) {
        self.0 = (self.0.rotate_left(5) ^ x).wrapping_mul(0x51_7c_c1_b7_27_22_0a_95);
    }
    #[inline]
    fn write_u32(&mut self, x: u32) {
        self.write_u64(x as u64);
    }
    #[inline]
    fn write_i32(&mut self, x: i32) {
        self.write_u64(x as u32 as u64);
    }
    #[inline]
    fn write_usize(&mut self, x: usize) {
        self.write_u64(x as u64);
    }
}
pub(crate) type FastMap<K, V> = HashMap<K, V, BuildHasherDefault<FastHasher>>;

#[derive(Debug, Clone, Default)]
struct Winding {
    /// Hermite normal form of the winding lattice; its length is the rank.
    rows: Vec<[i64; 3]>,
    /// Highest rank already reported as an opening.
    announced: u8,
}

const NONE: u32 = u32::MAX;

/// One point of the union-find, as the sweep stores it: its parent (`NONE` until the point is
/// added; itself at a root) and, at a root, the position of the region's [`RootRec`] in the
/// sweep's table; elsewhere, the image offset relative to the parent, in cells along a, b, c
/// (the root's own offset is zero and is never stored). Two layouts: [`Narrow`] (8 bytes,
/// offsets of -128..=127 cells) and [`Wide`] (16 bytes, `i32` offsets).
pub(crate) trait Record: Copy {
    const UNADDED: Self;
    fn parent(self) -> u32;
    /// The root `x`, whose region's record is `rec`.
    fn root(x: u32, rec: u32) -> Self;
    /// At a root: the position of the region's record.
    fn rec(self) -> u32;
    /// A point under `parent`, `off` cells from it; None when `off` does not fit.
    fn child(parent: u32, off: [i32; 3]) -> Option<Self>;
    /// Elsewhere than at a root: the offset relative to the parent.
    fn off(self) -> [i32; 3];
}

/// 8 bytes a point: eight points share a cache line, and the records of a grid of ten million
/// points take 80 MB, not 160.
#[derive(Debug, Clone, Copy)]
#[repr(C, align(8))]
pub(crate) struct Narrow {
    parent: u32,
    /// Offset as three `i8` in the low three bytes, or the root's record.
    data: u32,
}

impl Record for Narrow {
    const UNADDED: Narrow = Narrow {
        parent: NONE,
        data: 0,
    };
    #[inline]
    fn parent(self) -> u32 {
        self.parent
    }
    #[inline]
    fn root(x: u32, rec: u32) -> Narrow {
        Narrow {
            parent: x,
            data: rec,
        }
    }
    #[inline]
    fn rec(self) -> u32 {
        self.data
    }
    #[inline]
    fn child(parent: u32, off: [i32; 3]) -> Option<Narrow> {
        let b = [
            i8::try_from(off[0]),
            i8::try_from(off[1]),
            i8::try_from(off[2]),
        ];
        let [Ok(x), Ok(y), Ok(z)] = b else {
            return None;
        };
        Some(Narrow {
            parent,
            data: u32::from_le_bytes([x as u8, y as u8, z as u8, 0]),
        })
    }
    #[inline]
    fn off(self) -> [i32; 3] {
        let [x, y, z, _] = self.data.to_le_bytes();
        [x as i8 as i32, y as i8 as i32, z as i8 as i32]
    }
}

/// Test-only records that hold a zero offset and no other: every join across the cell's
/// faces overflows, so that the fallback to [`Wide`] records is taken.
#[cfg(test)]
#[derive(Debug, Clone, Copy)]
pub(crate) struct ZeroRecord(Narrow);

#[cfg(test)]
impl Record for ZeroRecord {
    const UNADDED: ZeroRecord = ZeroRecord(Narrow::UNADDED);
    fn parent(self) -> u32 {
        self.0.parent()
    }
    fn root(x: u32, rec: u32) -> ZeroRecord {
        ZeroRecord(Narrow::root(x, rec))
    }
    fn rec(self) -> u32 {
        self.0.rec()
    }
    fn child(parent: u32, off: [i32; 3]) -> Option<ZeroRecord> {
        (off == [0; 3]).then(|| ZeroRecord(Narrow::child(parent, off).unwrap()))
    }
    fn off(self) -> [i32; 3] {
        self.0.off()
    }
}

/// 16 bytes a point, aligned so that four share a cache line; holds every offset.
#[derive(Debug, Clone, Copy)]
#[repr(C, align(16))]
pub(crate) struct Wide {
    parent: u32,
    /// Offset (`i32` bits), or the root's record in the first word.
    data: [u32; 3],
}

impl Record for Wide {
    const UNADDED: Wide = Wide {
        parent: NONE,
        data: [0; 3],
    };
    #[inline]
    fn parent(self) -> u32 {
        self.parent
    }
    #[inline]
    fn root(x: u32, rec: u32) -> Wide {
        Wide {
            parent: x,
            data: [rec, 0, 0],
        }
    }
    #[inline]
    fn rec(self) -> u32 {
        self.data[0]
    }
    #[inline]
    fn child(parent: u32, off: [i32; 3]) -> Option<Wide> {
        Some(Wide {
            parent,
            data: off.map(|c| c as u32),
        })
    }
    #[inline]
    fn off(self) -> [i32; 3] {
        self.data.map(|d| d as i32)
    }
}

/// What the sweep keeps of a region at its root: its size, and its lowest point with that
/// point's value (kept here so that comparing two regions' lowest points reads no grid value
/// scattered far away). Records of regions merged away are reused, so the table holds about
/// as many records as there are regions at once, and those of the regions in play stay in
/// cache.
#[derive(Debug, Clone, Copy)]
struct RootRec {
    size: u32,
    low: u32,
    low_value: f32,
}

/// Union-find over the points of a periodic landscape (voxels, or sites), with image offsets,
/// winding lattices and the bookkeeping of thresholds. Points are added and joined by a driver
/// that visits them in increasing `(value, index)` order and calls [`Sweep::end_group`] after
/// each run of equal values. One record `R` per point (see [`Record`]), and one [`RootRec`] per
/// region. With [`Narrow`] records, a join whose offset does not fit sets `overflowed`: the
/// state is then wrong, and the driver must run again with [`Wide`] records.
pub(crate) struct Sweep<'a, R: Record> {
    values: &'a [f32],
    lattice: &'a Lattice,
    nodes: Vec<R>,
    recs: Vec<RootRec>,
    /// Records of regions merged away, to be reused.
    free_recs: Vec<u32>,
    overflowed: bool,
    windings: FastMap<u32, Winding>,
    in_rank: [usize; 4],
    added: usize,
    largest: usize,
    lowest: Option<f32>,
    dirty: Vec<u32>,
    openings: Vec<Channel>,
    thresholds: [Option<Threshold>; 3],
    /// Marked points (sorted, distinct).
    marks: Vec<u32>,
}

impl<'a, R: Record> Sweep<'a, R> {
    /// A sweep over `values.len()` points; nothing added yet.
    pub(crate) fn new(values: &'a [f32], lattice: &'a Lattice) -> Self {
        let n = values.len();
        Sweep {
            values,
            lattice,
            nodes: vec![R::UNADDED; n],
            recs: Vec::new(),
            free_recs: Vec::new(),
            overflowed: false,
            windings: FastMap::default(),
            in_rank: [0; 4],
            added: 0,
            largest: 0,
            lowest: None,
            dirty: Vec::new(),
            openings: Vec::new(),
            thresholds: [None, None, None],
            marks: Vec::new(),
        }
    }

    /// Marks points whose lowest value inside each region is recorded with the region's
    /// openings (`marked_lowest`), and from which barriers are then measured.
    pub(crate) fn set_marks(&mut self, marks: &[usize]) {
        let mut m: Vec<u32> = marks
            .iter()
            .filter(|&&x| x < self.values.len())
            .map(|&x| x as u32)
            .collect();
        m.sort_unstable();
        m.dedup();
        self.marks = m;
    }

    /// Number of points in the region of root `r`.
    #[inline]
    fn size(&self, r: usize) -> usize {
        self.rec(r).size as usize
    }

    /// Lowest point (by `(value, index)`) of the region of root `r`.
    #[inline]
    fn low(&self, r: usize) -> usize {
        self.rec(r).low as usize
    }

    /// The record of the region of root `r`.
    #[inline]
    fn rec(&self, r: usize) -> &RootRec {
        &self.recs[self.nodes[r].rec() as usize]
    }

    /// Stores a new region's record; returns its position.
    #[inline]
    fn new_rec(&mut self, rec: RootRec) -> u32 {
        match self.free_recs.pop() {
            Some(k) => {
                self.recs[k as usize] = rec;
                k
            }
            None => {
                self.recs.push(rec);
                (self.recs.len() - 1) as u32
            }
        }
    }

    /// Rank of the winding lattice of the region of root `r` (a look-up in the small map of
    /// regions that have windings).
    #[inline]
    fn rank(&self, r: usize) -> usize {
        self.windings.get(&(r as u32)).map_or(0, |w| w.rows.len())
    }

    /// Image offset of the non-root `x` relative to its parent.
    #[inline]
    fn off(&self, x: usize) -> [i32; 3] {
        self.nodes[x].off()
    }

    /// Root of `x` without path compression.
    fn root_of(&self, mut x: usize) -> usize {
        loop {
            let p = self.nodes[x].parent() as usize;
            if p == x {
                return x;
            }
            x = p;
        }
    }

    /// Lowest value of the marked points already added whose root is in `roots`.
    fn marked_lowest_in(&self, roots: &[usize]) -> Option<f32> {
        self.marks
            .iter()
            .map(|&m| m as usize)
            .filter(|&m| self.is_added(m) && roots.contains(&self.root_of(m)))
            .map(|m| self.values[m])
            .min_by(|a, b| a.total_cmp(b))
    }

    /// Hints the processor to load the entry of `x` (no effect off x86-64 or out of range).
    #[inline]
    pub(crate) fn prefetch(&self, x: usize) {
        prefetch_item(&self.nodes, x);
    }

    #[inline]
    pub(crate) fn is_added(&self, x: usize) -> bool {
        self.nodes[x].parent() != NONE
    }

    /// Adds point `x`, whose value is `v` (passed in so that the grid sweep need not look it up
    /// far away in the grid).
    #[inline]
    pub(crate) fn add(&mut self, x: usize, v: f32) {
        debug_assert!(!self.is_added(x));
        let rec = self.new_rec(RootRec {
            size: 1,
            low: x as u32,
            low_value: v,
        });
        self.nodes[x] = R::root(x as u32, rec);
        self.in_rank[0] += 1;
        self.added += 1;
        self.largest = self.largest.max(1);
        if self.lowest.is_none_or(|l| v < l) {
            self.lowest = Some(v);
        }
    }

    /// Root of `x` and the image offset of `x` relative to its root (path halving).
    #[inline]
    pub(crate) fn find(&mut self, mut x: usize) -> (usize, [i32; 3]) {
        let mut acc = [0i32; 3];
        loop {
            let p = self.nodes[x].parent() as usize;
            if p == x {
                return (x, acc);
            }
            let g = self.nodes[p].parent() as usize;
            if g != p {
                let (ox, op) = (self.off(x), self.off(p));
                // (an offset the records cannot hold leaves the path as it was)
                if let Some(halved) = R::child(g as u32, [0, 1, 2].map(|a| ox[a] + op[a])) {
                    self.nodes[x] = halved;
                }
            }
            let o = self.off(x);
            acc[0] += o[0];
            acc[1] += o[1];
            acc[2] += o[2];
            x = self.nodes[x].parent() as usize;
        }
    }

    /// The record of the two whose lowest point comes first in `(value, index)` order.
    #[inline]
    fn lower(a: &RootRec, b: &RootRec) -> RootRec {
        if a.low_value < b.low_value || (a.low_value == b.low_value && a.low < b.low) {
            *a
        } else {
            *b
        }
    }

    /// Joins `u` and `v`, where the image of `v` reached from `u` lies `t` cells away from the
    /// image of `u`. Both must have been added.
    #[inline]
    pub(crate) fn join(&mut self, u: usize, v: usize, t: [i32; 3]) {
        let (ru, ou) = self.find(u);
        let (rv, ov) = self.find(v);
        let w = [
            ou[0] + t[0] - ov[0],
            ou[1] + t[1] - ov[1],
            ou[2] + t[2] - ov[2],
        ];
        if ru == rv {
            if w != [0, 0, 0] {
                self.add_winding(ru, w);
            }
            return;
        }
        self.link(ru, rv, w);
    }

    /// Merges the regions of the distinct roots `ru` and `rv`, the image of `rv`'s root lying
    /// `w` cells from that of `ru`.
    #[inline]
    fn link(&mut self, ru: usize, rv: usize, w: [i32; 3]) {
        // attach the smaller tree under the larger; `x` = image of the small root relative
        // to the big root
        let (big, small, x) = if self.size(ru) >= self.size(rv) {
            (ru, rv, w)
        } else {
            (rv, ru, [-w[0], -w[1], -w[2]])
        };
        let (rank_big, rank_small) = (self.rank(big), self.rank(small));
        let (rec_big, rec_small) = (self.nodes[big].rec(), self.nodes[small].rec());
        let (a, b) = (self.recs[rec_big as usize], self.recs[rec_small as usize]);
        let (size_big, size_small) = (a.size as usize, b.size as usize);
        let lower = Self::lower(&a, &b);
        self.nodes[small] = R::child(big as u32, x).unwrap_or_else(|| {
            self.overflowed = true;
            R::child(big as u32, [0; 3]).expect("every record holds a zero offset")
        });
        self.recs[rec_big as usize] = RootRec {
            size: (size_big + size_small) as u32,
            ..lower
        };
        self.free_recs.push(rec_small);
        self.largest = self.largest.max(size_big + size_small);
        let mut rank = rank_big;
        if rank_small > 0 {
            let ws = self.windings.remove(&(small as u32)).unwrap_or_default();
            let e = self.windings.entry(big as u32).or_default();
            let mut rows = std::mem::take(&mut e.rows);
            rows.extend_from_slice(&ws.rows);
            e.rows = hnf(rows);
            e.announced = e.announced.max(ws.announced);
            rank = e.rows.len();
        }
        self.in_rank[rank_big] -= size_big;
        self.in_rank[rank_small] -= size_small;
        self.in_rank[rank] += size_big + size_small;
        if rank > rank_big.max(rank_small) {
            self.dirty.push(big as u32);
        }
    }

    /// Adds point `x` (value `v`) straight into the region of root `r`, whose winding lattice
    /// has rank 3, without a union-find entry: nothing about such a region can change any more
    /// but its size (see `sweep_grid`). `x` stays unadded to [`Sweep::is_added`].
    #[inline]
    fn add_settled(&mut self, r: usize, v: f32) {
        debug_assert_eq!(self.rank(r), 3);
        let rec = self.nodes[r].rec() as usize;
        self.recs[rec].size += 1;
        self.in_rank[3] += 1;
        self.added += 1;
        self.largest = self.largest.max(self.size(r));
        if self.lowest.is_none_or(|l| v < l) {
            self.lowest = Some(v);
        }
    }

    /// Merges the region of `x` into that of root `r` (rank 3) if they differ. The image offset
    /// is not known (the caller reached `r` through a point without an entry) and is set to
    /// zero: the winding lattice of a region of rank 3 is never read again.
    #[inline]
    fn link_settled(&mut self, x: usize, r: usize) {
        let (rx, _) = self.find(x);
        if rx != r {
            self.link(rx, r, [0, 0, 0]);
        }
    }

    fn add_winding(&mut self, root: usize, w: [i32; 3]) {
        let w = w.map(|x| x as i64);
        let size = self.size(root);
        let e = self.windings.entry(root as u32).or_default();
        if in_lattice(&e.rows, w) {
            return;
        }
        let old = e.rows.len();
        let mut rows = std::mem::take(&mut e.rows);
        rows.push(w);
        e.rows = hnf(rows);
        let new = e.rows.len();
        if new > old {
            self.in_rank[old] -= size;
            self.in_rank[new] += size;
            self.dirty.push(root as u32);
        }
    }

    fn channel(&self, root: usize, energy: f32) -> Channel {
        let w = &self.windings[&(root as u32)];
        let low = self.low(root);
        let lowest = self.values[low];
        let marked_lowest = self.marked_lowest_in(&[root]);
        Channel {
            dimension: w.rows.len() as u8,
            span: Span::from_rows(&w.rows, self.lattice),
            onset: energy,
            lowest,
            marked_lowest,
            barrier: energy - marked_lowest.unwrap_or(lowest),
            lowest_point: low,
            size: self.size(root),
            fraction: self.size(root) as f64 / self.values.len() as f64,
        }
    }

    /// Closes a run of equal values at `energy`: records the regions that reached a higher
    /// dimension during the run and the thresholds reached for the first time.
    pub(crate) fn end_group(&mut self, energy: f32) {
        if self.dirty.is_empty() {
            return;
        }
        let dirty = std::mem::take(&mut self.dirty);
        let mut roots: Vec<usize> = dirty.iter().map(|&d| self.find(d as usize).0).collect();
        roots.sort_unstable();
        roots.dedup();
        // the lowest region first, so that openings of one run come in a stable order
        roots.sort_by_key(|&r| total_key(self.values[self.low(r)], self.low(r)));
        for r in roots {
            let w = &self.windings[&(r as u32)];
            let rank = w.rows.len() as u8;
            if rank > w.announced {
                let ch = self.channel(r, energy);
                self.openings.push(ch);
                self.windings.get_mut(&(r as u32)).unwrap().announced = rank;
            }
        }
        for d in 1..=3usize {
            if self.thresholds[d - 1].is_some() || self.in_rank[d..].iter().sum::<usize>() == 0 {
                continue;
            }
            let mut members: Vec<usize> = self
                .windings
                .iter()
                .filter(|(_, w)| w.rows.len() >= d)
                .map(|(&r, _)| r as usize)
                .collect();
            members.sort_by_key(|&r| total_key(self.values[self.low(r)], self.low(r)));
            let deepest = self.channel(members[0], energy);
            let voxels: usize = members.iter().map(|&r| self.size(r)).sum();
            let marked_lowest = self.marked_lowest_in(&members);
            self.thresholds[d - 1] = Some(Threshold {
                dimension: d as u8,
                energy,
                barrier: energy - marked_lowest.unwrap_or(deepest.lowest),
                marked_lowest,
                channel: deepest,
                components: members.len(),
                fraction: voxels as f64 / self.values.len() as f64,
            });
        }
    }

    /// The root of the largest region whose winding lattice has rank `d` or more (the lowest
    /// root among equals), if any.
    fn largest_of_rank(&self, d: usize) -> Option<usize> {
        self.windings
            .iter()
            .filter(|(_, w)| w.rows.len() >= d)
            .map(|(&r, _)| r as usize)
            .max_by_key(|&r| (self.size(r), std::cmp::Reverse(r)))
    }

    pub(crate) fn level_stats(&self, level: f32) -> LevelStats {
        let n = self.values.len() as f64;
        let r = &self.in_rank;
        LevelStats {
            level,
            open_fraction: self.added as f64 / n,
            percolating_fraction: [
                (r[1] + r[2] + r[3]) as f64 / n,
                (r[2] + r[3]) as f64 / n,
                r[3] as f64 / n,
            ],
            dimension: (1..=3).rev().find(|&d| r[d] > 0).unwrap_or(0) as u8,
        }
    }

    pub(crate) fn finish(self, ceiling: f32, levels: Vec<LevelStats>) -> Percolation {
        let n = self.values.len();
        let mut families: Vec<ChannelFamily> = Vec::new();
        for ch in &self.openings {
            let key = ch.span.key();
            match families
                .iter_mut()
                .find(|f| f.dimension == ch.dimension && f.span.key() == key)
            {
                Some(f) => f.components += 1,
                None => families.push(ChannelFamily {
                    dimension: ch.dimension,
                    span: ch.span.clone(),
                    onset: ch.onset,
                    barrier: ch.barrier,
                    marked_lowest: ch.marked_lowest,
                    components: 1,
                }),
            }
        }
        let dimension = self
            .windings
            .values()
            .map(|w| w.rows.len())
            .max()
            .unwrap_or(0) as u8;
        Percolation {
            ceiling,
            dimension,
            thresholds: self.thresholds,
            openings: self.openings,
            families,
            lowest: self.lowest,
            points: n,
            open_fraction: self.added as f64 / n.max(1) as f64,
            largest_fraction: self.largest as f64 / n.max(1) as f64,
            levels,
        }
    }
}

// ------------------------------------------------------------------------------------------
// The grid drivers
// ------------------------------------------------------------------------------------------

/// The 6 face neighbours of grid point (i, j, k) with the cell translation of each step.
#[inline]
pub(crate) fn face_neighbours(dims: [usize; 3], ijk: [usize; 3]) -> [(usize, [i32; 3]); 6] {
    let [na, nb, nc] = dims;
    let [i, j, k] = ijk;
    let idx = |i: usize, j: usize, k: usize| (i * nb + j) * nc + k;
    let (ip, tip) = if i + 1 == na { (0, 1) } else { (i + 1, 0) };
    let (im, tim) = if i == 0 { (na - 1, -1) } else { (i - 1, 0) };
    let (jp, tjp) = if j + 1 == nb { (0, 1) } else { (j + 1, 0) };
    let (jm, tjm) = if j == 0 { (nb - 1, -1) } else { (j - 1, 0) };
    let (kp, tkp) = if k + 1 == nc { (0, 1) } else { (k + 1, 0) };
    let (km, tkm) = if k == 0 { (nc - 1, -1) } else { (k - 1, 0) };
    [
        (idx(ip, j, k), [tip, 0, 0]),
        (idx(im, j, k), [tim, 0, 0]),
        (idx(i, jp, k), [0, tjp, 0]),
        (idx(i, jm, k), [0, tjm, 0]),
        (idx(i, j, kp), [0, 0, tkp]),
        (idx(i, j, km), [0, 0, tkm]),
    ]
}

/// Division and remainder by a fixed divisor through multiplications, exact for every 32-bit
/// numerator and divisor (the method of Lemire, Kaser & Kurz, "Faster remainder by direct
/// computation", Software: Practice and Experience 49, 953 (2019); the unit test checks it
/// against the hardware division). The grid sweeps (percolation, basins, profile searches)
/// split every visited index into (i, j, k), where two hardware divisions cost more than the
/// rest of a step's arithmetic.
#[derive(Debug, Clone, Copy)]
pub(crate) struct Divisor {
    d: u32,
    /// `ceil(2^64 / d)`.
    c: u64,
}

impl Divisor {
    pub(crate) fn new(d: u32) -> Self {
        assert!(d > 0, "division by zero");
        Divisor {
            d,
            c: (u64::MAX / d as u64).wrapping_add(1),
        }
    }

    /// `(n / d, n % d)`.
    #[inline]
    pub(crate) fn div_rem(&self, n: u32) -> (u32, u32) {
        if self.d == 1 {
            return (n, 0);
        }
        let q = ((self.c as u128 * n as u128) >> 64) as u32;
        let low = self.c.wrapping_mul(n as u64);
        let r = ((low as u128 * self.d as u128) >> 64) as u32;
        (q, r)
    }
}

/// Splits grid indices into (i, j, k) by [`Divisor`]s.
#[derive(Debug, Clone, Copy)]
pub(crate) struct IndexSplit {
    by_c: Divisor,
    by_b: Divisor,
}

impl IndexSplit {
    /// For a grid of `dims` points (fewer than 2^32 of them, as everywhere: see
    /// [`visit_order`]).
    pub(crate) fn new(dims: [usize; 3]) -> Self {
        assert!(
            dims.iter().product::<usize>() <= u32::MAX as usize,
            "a grid of {dims:?} points has more than 2^32 of them"
        );
        // (an axis of no points leaves no index to split)
        IndexSplit {
            by_c: Divisor::new(dims[2].max(1) as u32),
            by_b: Divisor::new(dims[1].max(1) as u32),
        }
    }

    #[inline]
    pub(crate) fn ijk(&self, x: usize) -> [usize; 3] {
        let (ij, k) = self.by_c.div_rem(x as u32);
        let (i, j) = self.by_b.div_rem(ij);
        [i as usize, j as usize, k as usize]
    }
}

/// Percolation of the open voxels of `grid` (value strictly below `ceiling`).
///
/// When nothing percolates below the ceiling the result has `dimension == 0`, no thresholds,
/// and still says how much of the cell is open (`open_fraction`), the lowest value and the
/// largest closed pocket (`largest_fraction`).
pub fn percolate(grid: &Grid, ceiling: f32) -> Percolation {
    percolate_levels(grid, ceiling, &[])
}

/// As [`percolate`], and also records [`LevelStats`] (open and percolating fractions, dimension)
/// at each of `levels` (any order; reported sorted), in the same sweep.
pub fn percolate_levels(grid: &Grid, ceiling: f32, levels: &[f32]) -> Percolation {
    let order = visit_order(&grid.values, ceiling);
    percolate_in_order(grid, ceiling, &order, levels)
}

/// As [`percolate_levels`] with the visiting order already computed by [`visit_order`] (so
/// that callers measuring the stages, or reusing the order, do not sort twice).
pub fn percolate_in_order(grid: &Grid, ceiling: f32, order: &[u64], levels: &[f32]) -> Percolation {
    sweep_grid_narrow_first(grid, order, levels, &[], Settle::Yes).finish_with(ceiling)
}

/// As [`percolate`], with marked points: the occupied sites of the mobile ion, say. Every
/// region records the lowest of its marked points, and barriers are measured from it when the
/// region holds any (from the region's lowest point otherwise): the ion starts from where it
/// sits, not from a deeper empty pocket of the landscape.
pub fn percolate_marked(grid: &Grid, ceiling: f32, marks: &[usize]) -> Percolation {
    let order = visit_order(&grid.values, ceiling);
    sweep_grid_narrow_first(grid, &order, &[], marks, Settle::Yes).finish_with(ceiling)
}

struct GridSweep<'a, R: Record> {
    sweep: Sweep<'a, R>,
    levels: Vec<LevelStats>,
}

impl<R: Record> GridSweep<'_, R> {
    fn finish_with(self, ceiling: f32) -> Percolation {
        self.sweep.finish(ceiling, self.levels)
    }
}

/// The grid sweep in [`Narrow`] records, once more in [`Wide`] ones if an image offset did not
/// fit (the narrow sweep, when it finishes, has stored exact offsets only: the answer is the
/// same either way).
fn sweep_grid_narrow_first<'a>(
    grid: &'a Grid,
    order: &[u64],
    levels: &[f32],
    marks: &[usize],
    settle: Settle,
) -> EitherSweep<'a, Narrow> {
    sweep_grid_first::<Narrow>(grid, order, levels, marks, settle)
}

/// The grid sweep in records `R`, or in [`Wide`] ones if `R` could not hold an offset.
fn sweep_grid_first<'a, R: Record>(
    grid: &'a Grid,
    order: &[u64],
    levels: &[f32],
    marks: &[usize],
    settle: Settle,
) -> EitherSweep<'a, R> {
    match sweep_grid::<R>(grid, order, levels, marks, settle) {
        Some(done) => EitherSweep::First(done),
        None => EitherSweep::Wide(
            sweep_grid::<Wide>(grid, order, levels, marks, settle)
                .expect("wide records hold every offset"),
        ),
    }
}

/// A grid sweep in the records tried first, or in [`Wide`] ones.
enum EitherSweep<'a, R: Record> {
    First(GridSweep<'a, R>),
    Wide(GridSweep<'a, Wide>),
}

impl<R: Record> EitherSweep<'_, R> {
    fn finish_with(self, ceiling: f32) -> Percolation {
        match self {
            EitherSweep::First(g) => g.finish_with(ceiling),
            EitherSweep::Wide(g) => g.finish_with(ceiling),
        }
    }
}

/// The sweep of the grid's open voxels in `order`; None when the records `R` could not hold
/// an image offset.
fn sweep_grid<'a, R: Record>(
    grid: &'a Grid,
    order: &[u64],
    levels: &[f32],
    marks: &[usize],
    settle: Settle,
) -> Option<GridSweep<'a, R>> {
    let mut sweep = Sweep::<R>::new(&grid.values, &grid.lattice);
    sweep.set_marks(marks);
    let mut lv: Vec<f32> = levels.iter().copied().filter(|l| !l.is_nan()).collect();
    lv.sort_by(|a, b| a.total_cmp(b));
    let mut stats = Vec::with_capacity(lv.len());
    let mut li = 0;
    const AHEAD: usize = 12;
    let plane = grid.dims[1] * grid.dims[2];
    // Once a region percolates in 3D its winding lattice has full rank: it can open nothing
    // more, and only its size still counts. From the end of the run in which the first such
    // region (the largest, if several) appears, a voxel whose added neighbours all lie in that
    // *settled* region joins it by two bit maps (N/4 bytes, in cache) with no union-find entry
    // and no look-up scattered over the grid; any other voxel goes through the union-find.
    // A neighbour found by the union-find to lie in the settled region gets its bit then.
    let mut bits = SweepBits::new(grid.values.len());
    let mut settled: Option<usize> = None;
    let split = IndexSplit::new(grid.dims);
    for (pos, &key) in order.iter().enumerate() {
        let x = key_index(key);
        let e = key_value(key);
        if let Some(&later) = order.get(pos + AHEAD) {
            // the union-find entries and bits of a voxel's neighbours are scattered over the
            // grid: ask for them well before they are needed
            let y = key_index(later);
            let near = [
                y,
                y.wrapping_sub(grid.dims[2]),
                y + grid.dims[2],
                y.wrapping_sub(plane),
                y + plane,
            ];
            for z in near {
                bits.prefetch(z);
            }
            if settled.is_none() {
                for z in near {
                    sweep.prefetch(z);
                }
            }
        }
        while li < lv.len() && lv[li] < e {
            stats.push(sweep.level_stats(lv[li]));
            li += 1;
        }
        let near = face_neighbours(grid.dims, split.ijk(x));
        match settled {
            None => {
                sweep.add(x, e);
                bits.add(x);
                for (v, t) in near {
                    if bits.added(v) {
                        sweep.join(x, v, t);
                    }
                }
            }
            Some(r)
                if near.iter().any(|&(v, _)| bits.settled(v))
                    && near.iter().all(|&(v, _)| !bits.added(v) || bits.settled(v)) =>
            {
                sweep.add_settled(r, e);
                bits.add(x);
                bits.settle(x);
            }
            Some(r) => {
                sweep.add(x, e);
                bits.add(x);
                let mut r = r;
                for (v, t) in near {
                    if bits.settled(v) {
                        sweep.link_settled(x, r);
                    } else if bits.added(v) {
                        sweep.join(x, v, t);
                    } else {
                        continue;
                    }
                    // the settled region's root moves when it is attached under a larger one
                    r = sweep.find(r).0;
                }
                for (v, _) in near {
                    if bits.added(v) && !bits.settled(v) && sweep.find(v).0 == r {
                        bits.settle(v);
                    }
                }
                if sweep.find(x).0 == r {
                    bits.settle(x);
                }
                settled = Some(r);
            }
        }
        if pos + 1 == order.len() || order[pos + 1] >> 32 != key >> 32 {
            if sweep.overflowed {
                return None;
            }
            sweep.end_group(e);
            // (the regions with windings are looked through only once one has rank 3)
            if settled.is_none() && settle == Settle::Yes && sweep.in_rank[3] > 0 {
                settled = sweep.largest_of_rank(3);
            }
        }
    }
    while li < lv.len() {
        stats.push(sweep.level_stats(lv[li]));
        li += 1;
    }
    Some(GridSweep {
        sweep,
        levels: stats,
    })
}

/// Whether the grid sweep settles the first 3D region (see `sweep_grid`). The sweep's result
/// is the same either way; the union-find left behind is not: with `Yes`, the voxels that
/// joined the settled region by the bit maps have no record, and its winding lattice is no
/// longer kept.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Settle {
    Yes,
    No,
}

/// Two bits per voxel for the grid sweep: added, and in the settled region. The two words of
/// 64 voxels sit side by side, so that one load from memory brings both.
struct SweepBits {
    words: Vec<[u64; 2]>,
}

impl SweepBits {
    fn new(n: usize) -> Self {
        SweepBits {
            words: vec![[0; 2]; n.div_ceil(64)],
        }
    }
    #[inline]
    fn added(&self, x: usize) -> bool {
        self.words[x / 64][0] >> (x % 64) & 1 == 1
    }
    #[inline]
    fn settled(&self, x: usize) -> bool {
        self.words[x / 64][1] >> (x % 64) & 1 == 1
    }
    #[inline]
    fn add(&mut self, x: usize) {
        self.words[x / 64][0] |= 1 << (x % 64);
    }
    #[inline]
    fn settle(&mut self, x: usize) {
        self.words[x / 64][1] |= 1 << (x % 64);
    }
    /// Hints the processor to load the words of `x` (no effect off x86-64 or out of range).
    #[inline]
    fn prefetch(&self, x: usize) {
        prefetch_item(&self.words, x / 64);
    }
}

/// Hints the processor to load `items[i]` into its caches (no effect off x86-64, or when `i`
/// is out of range).
#[inline]
fn prefetch_item<T>(items: &[T], i: usize) {
    #[cfg(target_arch = "x86_64")]
    if i < items.len() {
        use std::arch::x86_64::{_MM_HINT_T0, _mm_prefetch};
        // SAFETY: prefetching is a hint; the address lies inside a live allocation
        unsafe {
            _mm_prefetch::<_MM_HINT_T0>(items.as_ptr().add(i) as *const i8);
        }
    }
    #[cfg(not(target_arch = "x86_64"))]
    let _ = (items, i);
}

/// The connected regions open at one level, painted on the grid.
#[derive(Debug, Clone, PartialEq)]
pub struct RegionMap {
    pub level: f32,
    /// Region of each voxel (index into `regions`), `u32::MAX` for voxels above the level.
    pub label: Vec<u32>,
    pub regions: Vec<Region>,
}

/// One connected region of a [`RegionMap`].
#[derive(Debug, Clone, PartialEq)]
pub struct Region {
    pub span: Span,
    pub lowest: f32,
    pub lowest_point: usize,
    pub voxels: usize,
}

/// What is connected at `level`: every voxel with a value at or below `level` labelled by its
/// region, and each region's span (closed pocket, line, plane or 3D network). Regions are
/// numbered by increasing lowest value.
pub fn regions_at(grid: &Grid, level: f32) -> RegionMap {
    let ceiling = level.next_up();
    let order = visit_order(&grid.values, ceiling);
    regions_from(
        grid,
        level,
        // every voxel through the union-find: the map reads the winding lattice of every
        // region, that of the 3D ones included
        sweep_grid::<Wide>(grid, &order, &[], &[], Settle::No)
            .expect("wide records hold every offset")
            .sweep,
        &order,
    )
}

fn regions_from(grid: &Grid, level: f32, mut sweep: Sweep<'_, Wide>, order: &[u64]) -> RegionMap {
    let mut label = vec![NONE; grid.len()];
    let mut id_of_root: FastMap<usize, u32> = FastMap::default();
    let mut regions = Vec::new();
    // `order` is increasing, so regions are numbered by their lowest voxel
    for &key in order {
        let x = key_index(key);
        let (r, _) = sweep.find(x);
        let next = regions.len() as u32;
        let id = *id_of_root.entry(r).or_insert(next);
        if id == next {
            let rows = sweep
                .windings
                .get(&(r as u32))
                .map(|w| w.rows.clone())
                .unwrap_or_default();
            let low = sweep.low(r);
            regions.push(Region {
                span: Span::from_rows(&rows, &grid.lattice),
                lowest: grid.values[low],
                lowest_point: low,
                voxels: sweep.size(r),
            });
        }
        label[x] = id;
    }
    RegionMap {
        level,
        label,
        regions,
    }
}

/// A skewed triclinic cell (3.1, 3.7, 4.3 A; 83, 97, 112 degrees) for the unit tests' random
/// landscapes: no two axes alike, no right angle.
#[cfg(test)]
pub(crate) fn skewed_lattice() -> crate::lattice::Lattice {
    crate::lattice::Lattice::from_parameters(crate::lattice::CellParameters {
        a: 3.1,
        b: 3.7,
        c: 4.3,
        alpha: 83.0,
        beta: 97.0,
        gamma: 112.0,
    })
    .expect("a valid cell")
}

/// A small deterministic random source for the unit tests (xorshift64), uniform in [0, 1).
#[cfg(test)]
pub(crate) fn xorshift(seed: u64) -> impl FnMut() -> f64 {
    let mut state = seed;
    move || {
        state ^= state << 13;
        state ^= state >> 7;
        state ^= state << 17;
        (state >> 11) as f64 / (1u64 << 53) as f64
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn radix_order_equals_comparison_order() {
        let values: Vec<f32> = (0..5000)
            .map(|i| {
                ((i * 7919) % 1013) as f32 * 0.37 - 120.0 + if i % 3 == 0 { -0.0 } else { 0.0 }
            })
            .collect();
        assert_eq!(
            visit_order(&values, 50.0),
            visit_order_by_comparison(&values, 50.0)
        );
        // more keys than one chunk: smooth values, values of one 16-bit digit (more than a
        // chunk of them, and ties), signed zeros, NaN and values at or above the ceiling
        let mut next = xorshift(7);
        let values: Vec<f32> = (0..5 * CHUNK + 17)
            .map(|i| match i % 7 {
                0 | 1 => (next() * 40.0 - 20.0) as f32,
                2 | 6 => 1.5 + (i % 5) as f32 * 1e-6,
                3 => [0.0, -0.0, f32::NAN, 50.0, 1e30][i % 5],
                4 => ((next() * 64.0).floor() * 0.25 - 8.0) as f32,
                _ => (1e-3 * next()) as f32 * if i % 2 == 0 { -1.0 } else { 1.0 },
            })
            .collect();
        let order = visit_order(&values, 50.0);
        assert_eq!(order, visit_order_by_comparison(&values, 50.0));
        // more points than a chunk, fewer of them open than a chunk holds
        let few = visit_order(&values, -15.0);
        assert!(!few.is_empty() && few.len() < CHUNK);
        assert_eq!(few, visit_order_by_comparison(&values, -15.0));
        let digit = |v: f32| f32_key(v) >> 16;
        assert!(values.iter().filter(|&&v| digit(v) == digit(1.5)).count() > CHUNK);
        let with_nan = [1.0, f32::NAN, -2.0, 3.0];
        let idx: Vec<usize> = visit_order(&with_nan, 10.0)
            .into_iter()
            .map(key_index)
            .collect();
        assert_eq!(idx, vec![2, 0, 3]);
        for v in [-3.5f32, -0.0, 0.0, 1e-30, 7.25, f32::MAX, f32::MIN] {
            let k = total_key(v, 5);
            assert_eq!(key_value(k), if v == 0.0 { 0.0 } else { v });
            assert_eq!(key_index(k), 5);
        }
    }

    #[test]
    fn the_settled_region_changes_no_field_of_the_result() {
        // random values (some quantised so that many voxels tie, some smooth, some walled by
        // a ceiling), and two interpenetrating cubic frames that open one after the other (the
        // second opens in 1D, 2D and 3D after the first is settled, and is later joined to
        // it), with marked voxels and levels: every field must equal the plain sweep's
        let lattice = Lattice::from_parameters(crate::lattice::CellParameters {
            a: 5.0,
            b: 6.0,
            c: 7.0,
            alpha: 90.0,
            beta: 100.0,
            gamma: 90.0,
        })
        .unwrap();
        let mut next = xorshift(0x9e37_79b9_7f4a_7c15);
        let (mut compared, mut late, mut fallbacks) = (0, 0, 0);
        for case in 0..80 {
            let frames = case % 4 == 3;
            let dims = if frames {
                [8, 8, 4 + 4 * (case % 3)]
            } else {
                [3 + case % 5, 4 + case % 3, 2 + case % 7]
            };
            let n: usize = dims.iter().product();
            let quantum = [None, Some(3.0), Some(8.0)][case % 3];
            let mut grid = Grid::new(lattice.clone(), dims, 0.0);
            for x in 0..n {
                let [i, j, k] = grid.ijk(x);
                let r = next();
                let v = if frames {
                    let on = |m: usize| [i, j, k].iter().filter(|&&c| c % 4 == m).count() >= 2;
                    if on(0) {
                        0.3 * r
                    } else if on(2) {
                        0.3 + 0.3 * r
                    } else {
                        0.6 + 0.4 * r
                    }
                } else if case % 4 == 1 {
                    let f =
                        |m: usize, d: usize| (std::f64::consts::TAU * m as f64 / d as f64).cos();
                    f(i, dims[0]) + f(j, dims[1]) + f(k, dims[2]) + 0.3 * r
                } else {
                    r
                };
                grid.values[x] = match quantum {
                    Some(q) => ((v * q).floor() / q) as f32,
                    None => v as f32,
                };
            }
            let ceiling = if case % 5 == 0 { 0.7 } else { f32::INFINITY };
            let marks: Vec<usize> = (0..n).filter(|x| x % 7 == case % 7).collect();
            let levels = [0.1f32, 0.5, 0.45, 0.95, 2.0];
            let order = visit_order(&grid.values, ceiling);
            let settled = sweep_grid_narrow_first(&grid, &order, &levels, &marks, Settle::Yes)
                .finish_with(ceiling);
            let reference = sweep_grid::<Wide>(&grid, &order, &levels, &marks, Settle::No)
                .unwrap()
                .finish_with(ceiling);
            assert_eq!(settled, reference, "case {case}, dims {dims:?}");
            // records that overflow at every crossing of the cell's faces: the sweep gives up,
            // and the fallback to wide records gives the same answer
            let zero = sweep_grid_first::<ZeroRecord>(&grid, &order, &levels, &marks, Settle::Yes);
            fallbacks += matches!(zero, EitherSweep::Wide(_)) as usize;
            assert_eq!(zero.finish_with(ceiling), reference, "case {case}");
            // the region map keeps every record (it reads the 3D regions' lattices too)
            let map = regions_at(&grid, 0.95);
            let open = grid.values.iter().filter(|&&v| v <= 0.95).count();
            assert_eq!(map.label.iter().filter(|&&l| l != NONE).count(), open);
            compared += settled.openings.len();
            if let Some(t) = &settled.thresholds[2] {
                late += settled
                    .openings
                    .iter()
                    .filter(|o| o.onset > t.energy)
                    .count();
            }
        }
        assert!(
            compared > 80,
            "the cases must open channels: {compared} openings"
        );
        assert!(
            late > 10,
            "regions must open after the first 3D one: {late}"
        );
        assert!(
            fallbacks > 40,
            "most cases must take the fallback: {fallbacks}"
        );
    }

    #[test]
    fn division_by_multiplication_equals_the_hardware_division() {
        // exact results: every divisor up to 3000, then every 7th up to 60,000 (the limits
        // allow 1000 A / 0.02 A = 50,000 points along an axis) and the largest ones, each with
        // numerators at both ends of the 32-bit range and random ones between
        let mut next = xorshift(0x2545_f491_4f6c_dd1d);
        let large = (3001..=60_000u32)
            .step_by(7)
            .chain([u32::MAX - 1, u32::MAX]);
        for d in (1..=3000u32).chain(large) {
            let div = Divisor::new(d);
            let ends = [0, 1, d - 1, d, d.saturating_add(1), u32::MAX - 1, u32::MAX];
            let random = (0..50).map(|_| (next() * u32::MAX as f64) as u32);
            for n in ends.into_iter().chain(random) {
                assert_eq!(div.div_rem(n), (n / d, n % d), "{n} / {d}");
            }
        }
        let dims = [7, 61, 47];
        let split = IndexSplit::new(dims);
        let grid = Grid::new(
            Lattice::from_parameters(crate::lattice::CellParameters {
                a: 1.0,
                b: 1.0,
                c: 1.0,
                alpha: 90.0,
                beta: 90.0,
                gamma: 90.0,
            })
            .unwrap(),
            dims,
            0.0,
        );
        for x in 0..grid.len() {
            assert_eq!(split.ijk(x), grid.ijk(x));
        }
        // an empty grid has nothing to split, and building the split must not fail
        let _ = IndexSplit::new([4, 0, 0]);
    }

    #[test]
    fn hermite_normal_form_gives_rank_and_primitive_rows() {
        assert_eq!(hnf(vec![[0, 0, 2], [0, 0, 3]]), vec![[0, 0, 1]]);
        assert_eq!(hnf(vec![[1, 1, 0], [-1, 1, 0]]).len(), 2);
        let h = hnf(vec![[1, 1, 0], [1, -1, 0], [0, 0, 1], [1, 0, 0]]);
        assert_eq!(h, vec![[1, 0, 0], [0, 1, 0], [0, 0, 1]]);
        assert!(in_lattice(&hnf(vec![[1, 1, 0], [1, -1, 0]]), [2, 0, 0]));
        assert!(!in_lattice(&hnf(vec![[1, 1, 0], [1, -1, 0]]), [1, 0, 0]));
    }

    #[test]
    fn an_offset_type_takes_what_it_holds_and_refuses_the_rest() {
        assert_eq!(<i8 as Offset>::try_put(127), Some(127));
        assert_eq!(<i8 as Offset>::try_put(-127), Some(-127));
        assert_eq!(<i8 as Offset>::try_put(128), None);
        // the marker of an unwritten entry is never stored
        assert_eq!(<i8 as Offset>::try_put(-128), None);
        assert_eq!(<i32 as Offset>::try_put(i32::MIN), None);
        assert_eq!(
            <i32 as Offset>::try_put(-40_000).map(Offset::get),
            Some(-40_000)
        );
    }

    #[test]
    fn union_find_points_take_eight_or_sixteen_bytes_and_a_ring_of_70000_points_winds_once_along_a()
    {
        // the memory per point the performance notes state
        assert_eq!(std::mem::size_of::<Narrow>(), 8);
        assert_eq!(std::mem::size_of::<Wide>(), 16);
        ring_winds_once::<Narrow>();
        ring_winds_once::<Wide>();
    }

    /// A ring of 70,000 points along a (past the range of i16 offsets): joined in order it
    /// closes one loop around the cell, whose winding vector is [1, 0, 0] (exact result).
    fn ring_winds_once<R: Record>() {
        let n = 70_000;
        let values = vec![0.0f32; n];
        let lattice = Lattice::from_parameters(crate::lattice::CellParameters {
            a: 7000.0,
            b: 1.0,
            c: 1.0,
            alpha: 90.0,
            beta: 90.0,
            gamma: 90.0,
        })
        .unwrap();
        let mut sweep = Sweep::<R>::new(&values, &lattice);
        for x in 0..n {
            sweep.add(x, 0.0);
        }
        for x in 1..n {
            sweep.join(x - 1, x, [0, 0, 0]);
        }
        let (r, off) = sweep.find(n - 1);
        assert_eq!(sweep.size(r), n);
        assert_eq!(sweep.rank(r), 0);
        sweep.join(n - 1, 0, [1, 0, 0]);
        sweep.end_group(0.0);
        assert!(!sweep.overflowed);
        let p = sweep.finish(1.0, vec![]);
        assert_eq!(p.dimension, 1);
        assert_eq!(p.openings[0].span.translations(), vec![[1, 0, 0]]);
        assert!(
            off.iter().all(|&o| o == 0),
            "an open chain has no winding: {off:?}"
        );
    }
}
