//! The grid kernel: both landscapes in f32 SIMD over grid points.
//!
//! **Layout.** The grid is cut into blocks of 4 x 4 x 4 points. Framework atoms are first
//! grouped by position: the occupants of a mixed site share one position, and at a position
//! the occupants with the same kind of term are summed into one contribution (anions of one
//! kind: their occupancies; cations whose screening lengths are equal: their weights `occ k q_A
//! q_M`). The images of the positions around the cell are binned once into Cartesian cubes of
//! 2 A; each block lists the images within (reach + the block's radius) of its centre from the
//! bins it overlaps (so the cost per block does not grow with the cell), in f32 coordinates
//! relative to the block's centre (a few A, so that f32 differences lose nothing). The points
//! of a block are evaluated a vector at a time (16 lanes with AVX-512, 8 with AVX2 or the
//! portable arrays) against each image of the list, broadcast; a lane outside the cutoff of a
//! term gets weight 0.
//!
//! **Arithmetic per pair** (f32): the distance (3 subtractions, a multiplication and two FMAs,
//! a square root); per anion term `x = exp((Rmin - R)/b)` (one FMA for the argument, the
//! vectorised [`simd::exp`]), the bond valence and the shifted Morse term (3 FMAs and a
//! subtraction), the count; per cation term the screened Coulomb `erfc(R/rho)/R` from
//! [`simd::erfc_poly`] (one division, 12 FMAs and the exp). The mobile-ion repulsion with its
//! nearest sites excluded keeps the k nearest distances and terms per lane (compare and blend).
//!
//! **Precision.** Terms and sums are f32; the grids are stored as f32 anyway. Tested against
//! the f64 path (`compute_f64`) and against `evaluate_point`: values agree within a few 1e-6
//! relative (1e-5 eV absolute at the energies of sites and saddles), and percolation thresholds
//! of the reference structures within 1e-4 eV.

use super::compute::{Cancelled, ComputeStats, Progress};
use super::model::{COULOMB_EV_A, FrameworkKind, LandscapeModel};
use super::simd::{self, Isa, Lanes, Portable};
use crate::grid::Grid;
use crate::lattice::Lattice;
use nalgebra::{Matrix3, Vector3};
use rayon::prelude::*;
use std::collections::HashMap;
use std::sync::atomic::{AtomicBool, AtomicU64, Ordering};
use std::time::Instant;

/// Points per block edge.
const BLOCK: usize = 4;
/// Points per block, at most.
const BLOCK_POINTS: usize = BLOCK * BLOCK * BLOCK;
/// Side of the bins of the cell-wide image list (A).
const BIN_A: f64 = 2.0;
/// Smallest distance used in a formula (A), as in the f64 path.
const R_GUARD: f32 = 1e-6;
/// The cation term of a kind is dropped beyond this many screening lengths (erfc(6.5) = 3.8e-20).
pub(crate) const ERFC_NEGLIGIBLE: f64 = 6.5;

/// Which fields to compute.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Fields {
    /// Valence mismatch and site energy.
    Both,
    /// Valence mismatch only (the energy grid comes back empty): the bond-valence sum alone.
    MismatchOnly,
}

/// One anion term at a position: occupancy folded into the weights.
#[derive(Debug, Clone, Copy)]
struct AnionEntry {
    cutoff2: f32,
    /// `-1/b` and `Rmin/b`: the exponent is `R * neg_inv_b + rmin_inv_b`.
    neg_inv_b: f32,
    rmin_inv_b: f32,
    /// `occ * s_eq` (v.u.): the bond valence is `x` times this.
    w_bv: f32,
    /// `occ * D0` (eV).
    w_d0: f32,
    /// Morse term `x^2 - 2x` at the cutoff.
    morse_cut: f32,
}

/// One screened Coulomb term at a position.
#[derive(Debug, Clone, Copy)]
struct CationEntry {
    reach2: f32,
    /// `1 / (2 rho)` and `1 / rho^2` (1/A, 1/A^2).
    half_inv_rho: f32,
    inv_rho2: f32,
    /// `occ k q_A q_M` summed over the occupants with this screening length (eV A).
    weight: f32,
}

/// Positions of one family of terms (anions, cations, or the mobile ions with exclusion):
/// per position, the fractional coordinates, the reach (largest of its terms, A) and the range
/// of its entries.
#[derive(Debug)]
struct Positions<E> {
    frac: Vec<Vector3<f64>>,
    reach: Vec<f64>,
    first: Vec<u32>,
    entries: Vec<E>,
}

impl<E> Positions<E> {
    fn empty() -> Self {
        Positions {
            frac: Vec::new(),
            reach: Vec::new(),
            first: vec![0],
            entries: Vec::new(),
        }
    }
    fn entries_of(&self, p: usize) -> &[E] {
        &self.entries[self.first[p] as usize..self.first[p + 1] as usize]
    }
}

/// Groups `(frac, key, entry)` by position (fractional coordinates equal to 1e-9 after wrapping),
/// then by key within a position, summing entries with the same key with `merge`.
fn group<E: Copy, K: PartialEq + Copy>(
    items: Vec<(Vector3<f64>, K, E, f64)>,
    merge: impl Fn(&mut E, &E),
) -> Positions<E> {
    let mut index: HashMap<[i64; 3], usize> = HashMap::new();
    let mut groups: Vec<(Vector3<f64>, f64, Vec<(K, E)>)> = Vec::new();
    for (f, key, e, reach) in items {
        let w = f.map(|x| x - x.floor());
        let q = [0, 1, 2].map(|a| {
            let v = (w[a] * 1e9).round() as i64;
            if v >= 1_000_000_000 { 0 } else { v }
        });
        let g = *index.entry(q).or_insert_with(|| {
            groups.push((w, 0.0, Vec::new()));
            groups.len() - 1
        });
        let (_, r, list) = &mut groups[g];
        *r = r.max(reach);
        match list.iter_mut().find(|(k, _)| *k == key) {
            Some((_, x)) => merge(x, &e),
            None => list.push((key, e)),
        }
    }
    let mut out = Positions::empty();
    for (f, r, list) in groups {
        out.frac.push(f);
        out.reach.push(r);
        out.entries.extend(list.into_iter().map(|(_, e)| e));
        out.first.push(out.entries.len() as u32);
    }
    out
}

/// The model resolved into positions and f32 terms.
struct Terms {
    anions: Positions<AnionEntry>,
    cations: Positions<CationEntry>,
    /// The mobile ions when their nearest sites are excluded (else they are among `cations`).
    mobile: Positions<CationEntry>,
    exclude: usize,
    valence: f32,
    energy_cap: f32,
    mismatch_cap: f32,
}

fn terms(model: &LandscapeModel) -> Terms {
    let mut an = Vec::new();
    let mut ca = Vec::new();
    let mut mo = Vec::new();
    let cation_entry = |k: &super::model::CationKind, occ: f64| -> (u64, CationEntry, f64) {
        let reach = model.coulomb_cutoff.min(ERFC_NEGLIGIBLE * k.rho).max(0.0);
        let e = CationEntry {
            reach2: (reach * reach) as f32,
            half_inv_rho: (0.5 / k.rho) as f32,
            inv_rho2: (1.0 / (k.rho * k.rho)) as f32,
            weight: (occ * COULOMB_EV_A * model.probe.charge * k.charge) as f32,
        };
        (k.rho.to_bits() ^ reach.to_bits().rotate_left(17), e, reach)
    };
    for a in &model.atoms {
        match a.kind {
            FrameworkKind::Anion(i) => {
                let k = &model.anions[i];
                let morse = |x: f64| x * (x - 2.0);
                let xc = ((k.rmin - k.cutoff) / k.b).exp();
                let s_eq = ((k.r0 - k.rmin) / k.b).exp();
                let cut = k.cutoff.max(0.0);
                let e = AnionEntry {
                    cutoff2: (cut * cut) as f32,
                    neg_inv_b: (-1.0 / k.b) as f32,
                    rmin_inv_b: (k.rmin / k.b) as f32,
                    w_bv: (a.occupancy * s_eq) as f32,
                    w_d0: (a.occupancy * k.d0) as f32,
                    morse_cut: morse(xc) as f32,
                };
                an.push((a.frac.0, i, e, cut));
            }
            FrameworkKind::Cation(i) => {
                let (key, e, reach) = cation_entry(&model.cations[i], a.occupancy);
                ca.push((a.frac.0, key, e, reach));
            }
        }
    }
    let mut exclude = 0;
    if let Some(m) = &model.mobile {
        for &(f, occ) in &m.sites {
            let (key, e, reach) = cation_entry(&m.kind, occ);
            if m.excluded_nearest == 0 {
                ca.push((f.0, key, e, reach));
            } else {
                // one entry per site: the exclusion counts sites
                mo.push((f.0, mo.len() as u64, e, reach));
            }
        }
        exclude = m.excluded_nearest.min(4);
    }
    let sum_anion = |x: &mut AnionEntry, y: &AnionEntry| {
        x.w_bv += y.w_bv;
        x.w_d0 += y.w_d0;
    };
    let sum_cation = |x: &mut CationEntry, y: &CationEntry| x.weight += y.weight;
    Terms {
        anions: group(an, sum_anion),
        cations: group(ca, sum_cation),
        mobile: group(mo, sum_cation),
        exclude,
        valence: model.probe.valence as f32,
        energy_cap: model.energy_cap as f32,
        mismatch_cap: model.mismatch_cap as f32,
    }
}

/// Images of the positions of one family around the cell, binned by Cartesian cube.
struct Bins {
    lo: [f64; 3],
    n: [usize; 3],
    /// CSR: images of bin `b` are `start[b]..start[b + 1]`.
    start: Vec<u32>,
    xyz: Vec<[f64; 3]>,
    pos: Vec<u32>,
    /// Largest reach of any position (A).
    max_reach: f64,
}

impl Bins {
    /// Every image of every position that can lie within its reach plus `margin` of a point of
    /// the cell.
    fn new<E>(lattice: &Lattice, p: &Positions<E>, margin: f64) -> Bins {
        let m = lattice.matrix();
        let centre = m * Vector3::new(0.5, 0.5, 0.5);
        let mut circum: f64 = 0.0;
        for c in 0..8 {
            let v = Vector3::new((c & 1) as f64, ((c >> 1) & 1) as f64, ((c >> 2) & 1) as f64);
            circum = circum.max((m * v - centre).norm());
        }
        let widths = lattice.perpendicular_widths();
        let mut xyz = Vec::new();
        let mut pos = Vec::new();
        let max_reach = p.reach.iter().copied().fold(0.0, f64::max);
        for (i, f) in p.frac.iter().enumerate() {
            let reach = p.reach[i] + margin;
            let n = [0, 1, 2].map(|a| (reach / widths[a]).ceil() as i32 + 1);
            let keep2 = (reach + circum) * (reach + circum);
            for ta in -n[0]..=n[0] {
                for tb in -n[1]..=n[1] {
                    for tc in -n[2]..=n[2] {
                        let c = m * (f + Vector3::new(ta as f64, tb as f64, tc as f64));
                        if (c - centre).norm_squared() <= keep2 {
                            xyz.push([c.x, c.y, c.z]);
                            pos.push(i as u32);
                        }
                    }
                }
            }
        }
        let mut lo = [f64::INFINITY; 3];
        let mut hi = [f64::NEG_INFINITY; 3];
        for c in &xyz {
            for a in 0..3 {
                lo[a] = lo[a].min(c[a]);
                hi[a] = hi[a].max(c[a]);
            }
        }
        if xyz.is_empty() {
            lo = [0.0; 3];
            hi = [0.0; 3];
        }
        let n = [0, 1, 2].map(|a| (((hi[a] - lo[a]) / BIN_A).floor() as usize + 1).max(1));
        let bin = |c: &[f64; 3]| {
            let b = [0, 1, 2].map(|a| (((c[a] - lo[a]) / BIN_A) as usize).min(n[a] - 1));
            (b[0] * n[1] + b[1]) * n[2] + b[2]
        };
        let mut count = vec![0u32; n[0] * n[1] * n[2] + 1];
        for c in &xyz {
            count[bin(c) + 1] += 1;
        }
        for b in 1..count.len() {
            count[b] += count[b - 1];
        }
        let start = count.clone();
        let mut fill = count;
        let mut sxyz = vec![[0.0; 3]; xyz.len()];
        let mut spos = vec![0u32; xyz.len()];
        for (c, &q) in xyz.iter().zip(&pos) {
            let b = bin(c);
            let k = fill[b] as usize;
            fill[b] += 1;
            sxyz[k] = *c;
            spos[k] = q;
        }
        Bins {
            lo,
            n,
            start,
            xyz: sxyz,
            pos: spos,
            max_reach,
        }
    }

    /// The images within (the reach of their position + `radius`) of `centre`, relative to it.
    fn near<E>(&self, p: &Positions<E>, centre: [f64; 3], radius: f64, out: &mut List) {
        out.clear();
        let r = self.max_reach + radius;
        let range = |a: usize| {
            let lo = ((centre[a] - r - self.lo[a]) / BIN_A).floor();
            let hi = ((centre[a] + r - self.lo[a]) / BIN_A).floor();
            let top = self.n[a] as f64 - 1.0;
            (lo.clamp(0.0, top) as usize, hi.clamp(-1.0, top))
        };
        let (a0, a1) = range(0);
        let (b0, b1) = range(1);
        let (c0, c1) = range(2);
        if a1 < 0.0 || b1 < 0.0 || c1 < 0.0 {
            return;
        }
        for ia in a0..=a1 as usize {
            for ib in b0..=b1 as usize {
                let row = (ia * self.n[1] + ib) * self.n[2];
                let (s, e) = (
                    self.start[row + c0] as usize,
                    self.start[row + c1 as usize + 1] as usize,
                );
                for k in s..e {
                    let c = self.xyz[k];
                    let q = self.pos[k] as usize;
                    let d = [c[0] - centre[0], c[1] - centre[1], c[2] - centre[2]];
                    let reach = p.reach[q] + radius;
                    if d[0] * d[0] + d[1] * d[1] + d[2] * d[2] <= reach * reach {
                        out.x.push(d[0] as f32);
                        out.y.push(d[1] as f32);
                        out.z.push(d[2] as f32);
                        out.pos.push(q as u32);
                        out.reach2 = out.reach2.max((p.reach[q] * p.reach[q]) as f32);
                    }
                }
            }
        }
    }
}

/// The images near one block, relative to its centre.
#[derive(Default)]
struct List {
    x: Vec<f32>,
    y: Vec<f32>,
    z: Vec<f32>,
    pos: Vec<u32>,
    /// Largest squared reach among them.
    reach2: f32,
}

impl List {
    fn clear(&mut self) {
        self.x.clear();
        self.y.clear();
        self.z.clear();
        self.pos.clear();
        self.reach2 = 0.0;
    }
}

/// Per-thread scratch.
#[derive(Default)]
struct Scratch {
    anions: List,
    cations: List,
    mobile: List,
    px: Vec<f32>,
    py: Vec<f32>,
    pz: Vec<f32>,
    dv: Vec<f32>,
    en: Vec<f32>,
    cnt: Vec<f32>,
}

/// One block of grid points: the index ranges along a, b, c.
#[derive(Debug, Clone, Copy)]
struct Block {
    lo: [usize; 3],
    hi: [usize; 3],
}

fn blocks(dims: [usize; 3]) -> Vec<Block> {
    let nb = dims.map(|n| n.div_ceil(BLOCK));
    let mut out = Vec::with_capacity(nb[0] * nb[1] * nb[2]);
    for bi in 0..nb[0] {
        for bj in 0..nb[1] {
            for bk in 0..nb[2] {
                let lo = [bi * BLOCK, bj * BLOCK, bk * BLOCK];
                let hi = [0, 1, 2].map(|a| (lo[a] + BLOCK).min(dims[a]));
                out.push(Block { lo, hi });
            }
        }
    }
    out
}

#[inline]
fn point_cart(m: &Matrix3<f64>, inv_dims: [f64; 3], ijk: [usize; 3]) -> Vector3<f64> {
    m * Vector3::new(
        ijk[0] as f64 * inv_dims[0],
        ijk[1] as f64 * inv_dims[1],
        ijk[2] as f64 * inv_dims[2],
    )
}

/// Centre and bounding-sphere radius of a block (A).
fn block_sphere(m: &Matrix3<f64>, inv_dims: [f64; 3], b: &Block) -> ([f64; 3], f64) {
    let hi_idx = [0, 1, 2].map(|a| b.hi[a] - 1);
    let c = (point_cart(m, inv_dims, b.lo) + point_cart(m, inv_dims, hi_idx)) * 0.5;
    let mut r: f64 = 0.0;
    for n in 0..8 {
        let ijk = [0, 1, 2].map(|a| {
            if (n >> a) & 1 == 0 {
                b.lo[a]
            } else {
                hi_idx[a]
            }
        });
        r = r.max((point_cart(m, inv_dims, ijk) - c).norm());
    }
    ([c.x, c.y, c.z], r)
}

/// Squared distances from the points to image `j` of a list. (Helpers of the kernel are
/// functions, not closures, so that they inline into the entry points compiled for each
/// instruction set and inherit its features.)
#[inline(always)]
fn dist2<V: Lanes>(px: V, py: V, pz: V, l: &List, j: usize) -> V {
    let dx = px.sub(V::splat(l.x[j]));
    let dy = py.sub(V::splat(l.y[j]));
    let dz = pz.sub(V::splat(l.z[j]));
    dx.fma(dx, dy.fma(dy, dz.mul(dz)))
}

/// The screened Coulomb factor `erfc(R/rho)/R` of one term: with `t = 1/(1 + z/2)`,
/// `erfc(z)/R = t exp(-z^2 + P(t)) / R`, one division for both.
#[inline(always)]
fn coulomb<V: Lanes>(e: &CationEntry, d2: V, r: V) -> V {
    let inv = V::splat(1.0).div(V::splat(e.half_inv_rho).fma(d2, r));
    let t = inv.mul(r);
    let arg = V::splat(-e.inv_rho2).fma(d2, simd::erfc_poly(t));
    inv.mul(exp(arg))
}

/// The two fields of one vector of points, written to `out[0][..N]` and `out[1][..N]`, and the
/// contributions counted per point (pairs within the cutoff of their term) to `out[2][..N]`.
#[inline(always)]
fn points<V: Lanes, const ENERGY: bool>(
    t: &Terms,
    p: [&[f32]; 3],
    s: &Scratch,
    out: [&mut [f32]; 3],
) {
    let [dv, en, cnt] = out;
    let (px, py, pz) = (V::load(p[0]), V::load(p[1]), V::load(p[2]));
    let zero = V::splat(0.0);
    let one = V::splat(1.0);
    let two = V::splat(2.0);
    let g2 = V::splat(R_GUARD * R_GUARD);
    let mut bvs = zero;
    let mut energy = zero;
    let mut count = zero;
    let l = &s.anions;
    let reach2 = V::splat(l.reach2);
    for j in 0..l.x.len() {
        let d2 = dist2(px, py, pz, l, j);
        if !V::any(d2.lt(reach2)) {
            continue;
        }
        let r = d2.max(g2).sqrt();
        for e in t.anions.entries_of(l.pos[j] as usize) {
            let inside = d2.lt(V::splat(e.cutoff2));
            let x = exp(r.fma(V::splat(e.neg_inv_b), V::splat(e.rmin_inv_b)));
            bvs = V::select(inside, V::splat(e.w_bv), zero).fma(x, bvs);
            count = count.add(V::select(inside, one, zero));
            if ENERGY {
                let morse = x.fma(x.sub(two), V::splat(-e.morse_cut));
                energy = V::select(inside, V::splat(e.w_d0), zero).fma(morse, energy);
            }
        }
    }
    if ENERGY {
        let l = &s.cations;
        let reach2 = V::splat(l.reach2);
        for j in 0..l.x.len() {
            let d2 = dist2(px, py, pz, l, j);
            if !V::any(d2.lt(reach2)) {
                continue;
            }
            let d2 = d2.max(g2);
            let r = d2.sqrt();
            for e in t.cations.entries_of(l.pos[j] as usize) {
                let inside = d2.lt(V::splat(e.reach2));
                let term = coulomb(e, d2, r);
                energy = V::select(inside, V::splat(e.weight), zero).fma(term, energy);
                count = count.add(V::select(inside, one, zero));
            }
        }
        if t.exclude > 0 {
            // the mobile ions: the k nearest sites of each point take no part
            let far = V::splat(f32::INFINITY);
            let mut near_r = [far; 4];
            let mut near_t = [zero; 4];
            let l = &s.mobile;
            for j in 0..l.x.len() {
                let d2 = dist2(px, py, pz, l, j).max(g2);
                let e = &t.mobile.entries_of(l.pos[j] as usize)[0];
                let inside = d2.lt(V::splat(e.reach2));
                if !V::any(inside) {
                    continue;
                }
                let r = d2.sqrt();
                let term = V::select(inside, V::splat(e.weight), zero).mul(coulomb(e, d2, r));
                energy = energy.add(term);
                count = count.add(V::select(inside, one, zero));
                // insert (r, term) into the sorted k nearest of each lane
                let mut r = V::select(inside, r, far);
                let mut term = term;
                for k in 0..t.exclude {
                    let m = r.lt(near_r[k]);
                    let (nr, nt) = (near_r[k], near_t[k]);
                    near_r[k] = V::select(m, r, nr);
                    near_t[k] = V::select(m, term, nt);
                    r = V::select(m, nr, r);
                    term = V::select(m, nt, term);
                }
            }
            for nt in near_t.iter().take(t.exclude) {
                energy = energy.sub(*nt);
            }
        }
    }
    let dvv = bvs.sub(V::splat(t.valence));
    let dvv = dvv.max(zero.sub(dvv));
    let mcap = V::splat(t.mismatch_cap);
    V::select(dvv.lt(mcap), dvv, mcap).store(dv);
    if ENERGY {
        let ecap = V::splat(t.energy_cap);
        V::select(energy.lt(ecap), energy, ecap).store(en);
    }
    count.store(cnt);
}

use simd::exp;

/// Evaluates the points in `s.px/py/pz` (a multiple of `V::N`) into `s.dv`, `s.en`, `s.cnt`.
#[inline(always)]
fn block_points<V: Lanes, const ENERGY: bool>(t: &Terms, s: &mut Scratch) {
    let n = s.px.len();
    let mut dv = std::mem::take(&mut s.dv);
    let mut en = std::mem::take(&mut s.en);
    let mut cnt = std::mem::take(&mut s.cnt);
    dv.resize(n, 0.0);
    en.resize(n, 0.0);
    cnt.resize(n, 0.0);
    for v in (0..n).step_by(V::N) {
        let p = [&s.px[v..], &s.py[v..], &s.pz[v..]];
        points::<V, ENERGY>(t, p, s, [&mut dv[v..], &mut en[v..], &mut cnt[v..]]);
    }
    s.dv = dv;
    s.en = en;
    s.cnt = cnt;
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2,fma")]
fn block_avx2<const ENERGY: bool>(t: &Terms, s: &mut Scratch) {
    block_points::<simd::Avx2, ENERGY>(t, s)
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx512f,avx512dq,avx2,fma")]
fn block_avx512<const ENERGY: bool>(t: &Terms, s: &mut Scratch) {
    block_points::<simd::Avx512, ENERGY>(t, s)
}

fn block_with<const ENERGY: bool>(isa: Isa, t: &Terms, s: &mut Scratch) {
    match isa {
        Isa::Portable => block_points::<Portable, ENERGY>(t, s),
        // SAFETY: `Isa::Avx2Fma` and `Isa::Avx512` come from `Isa::detect`/`Isa::available`,
        // which checked the processor's features.
        #[cfg(target_arch = "x86_64")]
        Isa::Avx2Fma => unsafe { block_avx2::<ENERGY>(t, s) },
        #[cfg(target_arch = "x86_64")]
        Isa::Avx512 => unsafe { block_avx512::<ENERGY>(t, s) },
    }
}

/// A pointer to the values of a grid that blocks write into in parallel, each at its own
/// points.
struct Out(*mut f32, usize);
// SAFETY: see `Out::write`.
unsafe impl Sync for Out {}
unsafe impl Send for Out {}

impl Out {
    /// Writes `v` at index `g`.
    ///
    /// Callers write each index from one thread only (blocks do not overlap) while the grid
    /// is borrowed by nobody else.
    #[inline]
    fn write(&self, g: usize, v: f32) {
        assert!(g < self.1);
        // SAFETY: in bounds (checked); no other thread writes or reads this index meanwhile.
        unsafe { *self.0.add(g) = v };
    }
}

/// What [`compute_simd`] returns: the mismatch grid, the energy grid (None for
/// [`Fields::MismatchOnly`]) and the statistics.
pub(crate) type Computed = (Grid, Option<Grid>, ComputeStats);

/// Both landscapes (or the mismatch only) on a grid of `dims` points with the given
/// instruction set. Memory: the f32 grids (4 bytes per point per field), plus per thread the
/// lists of one block.
pub(crate) fn compute_simd(
    model: &LandscapeModel,
    dims: [usize; 3],
    progress: &Progress,
    isa: Isa,
    fields: Fields,
) -> Result<Computed, Cancelled> {
    let started = Instant::now();
    let t = terms(model);
    let m = *model.lattice.matrix();
    let inv_dims = dims.map(|n| 1.0 / n as f64);
    let blocks = blocks(dims);
    let margin = blocks
        .iter()
        .map(|b| block_sphere(&m, inv_dims, b).1)
        .fold(0.0, f64::max);
    let energy = fields == Fields::Both;
    let bins_a = Bins::new(&model.lattice, &t.anions, margin);
    let empty = Positions::<CationEntry>::empty();
    let (bins_c, bins_m) = if energy {
        (
            Bins::new(&model.lattice, &t.cations, margin),
            Bins::new(&model.lattice, &t.mobile, margin),
        )
    } else {
        (
            Bins::new(&model.lattice, &empty, margin),
            Bins::new(&model.lattice, &empty, margin),
        )
    };
    let points = dims[0] * dims[1] * dims[2];
    let mut mismatch = Grid::new(model.lattice.clone(), dims, 0.0);
    let mut energy_grid = energy.then(|| Grid::new(model.lattice.clone(), dims, 0.0));
    let out_dv = Out(mismatch.values.as_mut_ptr(), mismatch.values.len());
    let out_en = match energy_grid.as_mut() {
        Some(g) => Out(g.values.as_mut_ptr(), g.values.len()),
        None => Out(std::ptr::null_mut(), 0),
    };
    let sink = match progress {
        Progress::Report(s) => Some(s.as_ref()),
        Progress::Silent => None,
    };
    let done = AtomicU64::new(0);
    let stop = AtomicBool::new(false);
    let total = blocks.len() as u64;
    let lanes = isa.lanes();
    let (nb, nc) = (dims[1], dims[2]);
    let evaluations: u64 = blocks
        .par_iter()
        .map_init(Scratch::default, |s, b| {
            if stop.load(Ordering::Relaxed) {
                return 0;
            }
            let (centre, radius) = block_sphere(&m, inv_dims, b);
            bins_a.near(&t.anions, centre, radius, &mut s.anions);
            if energy {
                bins_c.near(&t.cations, centre, radius, &mut s.cations);
                bins_m.near(&t.mobile, centre, radius, &mut s.mobile);
            }
            s.px.clear();
            s.py.clear();
            s.pz.clear();
            let mut idx = [0usize; BLOCK_POINTS];
            let mut n = 0;
            for i in b.lo[0]..b.hi[0] {
                for j in b.lo[1]..b.hi[1] {
                    for k in b.lo[2]..b.hi[2] {
                        let p = point_cart(&m, inv_dims, [i, j, k]);
                        s.px.push((p.x - centre[0]) as f32);
                        s.py.push((p.y - centre[1]) as f32);
                        s.pz.push((p.z - centre[2]) as f32);
                        idx[n] = (i * nb + j) * nc + k;
                        n += 1;
                    }
                }
            }
            // pad to whole vectors with copies of the last point
            while s.px.len() % lanes != 0 {
                let (x, y, z) = (s.px[n - 1], s.py[n - 1], s.pz[n - 1]);
                s.px.push(x);
                s.py.push(y);
                s.pz.push(z);
            }
            if energy {
                block_with::<true>(isa, &t, s)
            } else {
                block_with::<false>(isa, &t, s)
            }
            // counts are whole numbers well below 2^24: exact in f32
            let count: u64 = s.cnt[..n].iter().map(|&c| c as u64).sum();
            for (q, &g) in idx[..n].iter().enumerate() {
                out_dv.write(g, s.dv[q]);
                if energy {
                    out_en.write(g, s.en[q]);
                }
            }
            if let Some(sink) = sink {
                let k = done.fetch_add(1, Ordering::Relaxed) + 1;
                if !sink.update("landscape grid", k, total, points as u64) {
                    stop.store(true, Ordering::Relaxed);
                }
            }
            count
        })
        .sum();
    if stop.load(Ordering::Relaxed) {
        return Err(Cancelled);
    }
    let stats = ComputeStats {
        points,
        neighbour_evaluations: evaluations,
        seconds: started.elapsed().as_secs_f64(),
    };
    Ok((mismatch, energy_grid, stats))
}
