//! The grid kernel: both landscapes in f32 SIMD over grid points.
//!
//! **Layout.** The grid is cut into blocks of 8 x 8 x 8 points. Blocks of one shape differ by
//! a lattice translation, so the points of each shape (at most 8: whole, and the remainder
//! along each axis) are laid out once ([`Layout`]), relative to the block's centre, in tiles of
//! 2 x 2 x 4 points: one compact vector of 16 lanes with AVX-512, two of 8 with AVX2 or the
//! portable arrays. Framework atoms are first grouped by position: the occupants of a mixed
//! site share one position, and at a position the occupants with the same kind of term are
//! summed into one contribution (anions of one kind: their occupancies; cations whose
//! screening lengths are equal: their weights `occ k q_A q_M`). The images of the positions
//! around the cell are binned once into Cartesian cubes of 2 A. Blocks are taken in groups of
//! 2 x 2 x 2 ([`GROUP`]): a group visits the bins its sphere of reach overlaps (row by row, so
//! the visit follows the sphere, not its cube) and keeps the candidates that can reach one of
//! its points ([`Candidates`]); each of its blocks filters that shorter list, in the same order,
//! and lists the images within (reach + the block's radius) of its centre, in f32 coordinates
//! relative to it (a few A, so that f32 differences lose nothing), one list per kind of term
//! with the kind's constants held in registers. Each list is cut in two: the *core*, images
//! within the cutoff of every point of the block (no test, no mask: the count grows by the
//! list's length), and the *shell*, where each lane is tested. The lists are filled without a
//! branch on where an image goes (it is written to both and counted in one, or none): that
//! branch follows the geometry, and no predictor guesses it. Before the vectors of points
//! taken together meet a shell, the shell's images that reach none of their points (beyond
//! the cutoff plus the radius of the points' sphere, [`Layout::spheres`]) are dropped, by a
//! list of indices filled the same way; dropped images would only have had every lane
//! masked, so the values do not change. The anion runs take two
//! vectors of points per image ([`TILES`]: one load of the image, two independent chains); the
//! screened Coulomb runs, with more constants in registers, one. The anion runs, core and
//! shell, and the Coulomb cores are software-pipelined over three images (the sum of one, the
//! exponential's reduction of the next, the distance of the one after), so that the scheduler
//! holds work whose inputs are ready; the images are still summed in order, so the values do
//! not change. An anion shell image is computed at every lane, and only the lanes inside the
//! cutoff add to their sums (a masked operation with AVX-512); in a Coulomb shell, an image
//! none of whose lanes is inside is skipped after its distances, and a lane outside gets
//! weight 0.
//!
//! **Arithmetic per pair** (f32): the distance (3 subtractions, a multiplication and two FMAs,
//! a square root); per anion term `x = exp((Rmin - R)/b)` (one FMA for the argument, the
//! vectorised [`simd::exp_in_range`], 5 FMAs of polynomial, without the clamp when the kind's
//! exponent cannot leave the f32 range), the bond valence and the shifted Morse term (2 FMAs
//! and a subtraction); per cation term the screened Coulomb `erfc(R/rho)/R` from
//! [`simd::erfc_poly`] (one division, 12 FMAs and the exp, whose exponent is bounded within
//! the reach). A shell pair adds the cutoff test and the count; an anion shell pair's sums
//! are masked to the lanes inside, a Coulomb shell pair's weight is selected.
//! The mobile-ion repulsion with its nearest sites excluded keeps the k nearest distances and
//! terms per lane (compare and blend).
//!
//! **Precision.** Terms and sums are f32; the grids are stored as f32 anyway. Tested against
//! the f64 path (`compute_f64`) on every instruction set the processor has: values agree within
//! 1e-5 relative (1e-5 eV or v.u. near zero). Symmetry-equivalent points are evaluated relative
//! to different block centres and may differ by a few units in the last place; the stages
//! after the grid do not rely on exact ties.

use super::compute::{Block, Cancelled, ComputeStats, Progress, block_sphere, blocks, point_cart};
use super::model::{COULOMB_EV_A, FrameworkKind, LandscapeModel};
use super::simd::{self, Isa, Lanes, Portable};
use crate::grid::Grid;
use crate::lattice::Lattice;
use nalgebra::{Matrix3, Vector3};
use rayon::prelude::*;
use std::collections::HashMap;
use std::sync::atomic::{AtomicBool, AtomicU64, Ordering};
use std::time::Instant;

/// Vectors of points evaluated together against each image (see [`anion_run`]).
const TILES: usize = 2;
/// Points per block edge.
const BLOCK: usize = 8;
/// Blocks per group edge: the image bins are visited once per group of blocks.
const GROUP: usize = 2;
/// Points per tile of 2 x 2 x 4: the vectors of the kernel (16 lanes, or two of 8).
const TILE: usize = 16;
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

/// The constants of one kind of anion term (its bond-valence and Morse parameters), shared by
/// every position of that kind, so that the kernel keeps them in registers over a run of images.
#[derive(Debug, Clone, Copy)]
struct AnionConstants {
    cutoff2: f32,
    /// `-1/b` and `Rmin/b`: the exponent is `R * neg_inv_b + rmin_inv_b`.
    neg_inv_b: f32,
    rmin_inv_b: f32,
    /// Morse term `x^2 - 2x` at the cutoff.
    morse_cut: f32,
    /// The exponent `(Rmin - R)/b` stays within [-87, 87] (normal f32 results) for every R in
    /// [0, cutoff], so the exponential needs no clamp.
    in_range: bool,
}

/// One anion term at a position: its kind, with the occupancy folded into the weights.
#[derive(Debug, Clone, Copy)]
struct AnionEntry {
    kind: u32,
    /// `occ * s_eq` (v.u.): the bond valence is `x` times this.
    w_bv: f32,
    /// `occ * D0` (eV).
    w_d0: f32,
}

/// The constants of one kind of screened Coulomb term (one screening length and reach).
#[derive(Debug, Clone, Copy)]
struct CationConstants {
    reach2: f32,
    /// `1 / (2 rho)` and `1 / rho^2` (1/A, 1/A^2).
    half_inv_rho: f32,
    inv_rho2: f32,
}

/// One screened Coulomb term at a position.
#[derive(Debug, Clone, Copy)]
struct CationEntry {
    kind: u32,
    /// `occ k q_A q_M` summed over the occupants with this screening length (eV A).
    weight: f32,
}

/// What the image lists need of an entry: its kind and its one or two weights.
trait Entry {
    fn kind(&self) -> usize;
    fn weights(&self) -> (f32, f32);
}

impl Entry for AnionEntry {
    fn kind(&self) -> usize {
        self.kind as usize
    }
    fn weights(&self) -> (f32, f32) {
        (self.w_bv, self.w_d0)
    }
}

impl Entry for CationEntry {
    fn kind(&self) -> usize {
        self.kind as usize
    }
    fn weights(&self) -> (f32, f32) {
        (self.weight, 0.0)
    }
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

/// The model resolved into kinds, positions and f32 terms.
struct Terms {
    anion_kinds: Vec<AnionConstants>,
    /// Cutoff of each anion kind (A).
    anion_reach: Vec<f64>,
    cation_kinds: Vec<CationConstants>,
    /// Reach of each cation kind (A).
    cation_reach: Vec<f64>,
    anions: Positions<AnionEntry>,
    cations: Positions<CationEntry>,
    /// The mobile ions when their nearest sites are excluded (else they are among `cations`).
    mobile: Positions<CationEntry>,
    exclude: usize,
    valence: f32,
    energy_cap: f32,
    mismatch_cap: f32,
}

/// Largest magnitude of an f32 exponent whose exponential is a normal f32.
const EXP_RANGE: f64 = 87.0;

fn terms(model: &LandscapeModel) -> Terms {
    let mut an = Vec::new();
    let mut ca = Vec::new();
    let mut mo = Vec::new();
    let anion_kinds: Vec<AnionConstants> = model
        .anions
        .iter()
        .map(|k| {
            let morse = |x: f64| x * (x - 2.0);
            let xc = ((k.rmin - k.cutoff) / k.b).exp();
            let cut = k.cutoff.max(0.0);
            let (hi, lo) = (k.rmin / k.b, (k.rmin - cut) / k.b);
            AnionConstants {
                cutoff2: (cut * cut) as f32,
                neg_inv_b: (-1.0 / k.b) as f32,
                rmin_inv_b: (k.rmin / k.b) as f32,
                morse_cut: morse(xc) as f32,
                // a little inside the range, for the f32 rounding of the argument
                in_range: k.b > 0.0 && hi.abs() < EXP_RANGE - 1.0 && lo.abs() < EXP_RANGE - 1.0,
            }
        })
        .collect();
    let anion_reach = model.anions.iter().map(|k| k.cutoff.max(0.0)).collect();
    let mut cation_kinds = Vec::new();
    let mut cation_reach = Vec::new();
    let mut cation_keys: Vec<(u64, u64)> = Vec::new();
    let mut cation_entry = |k: &super::model::CationKind, occ: f64| -> (u64, CationEntry, f64) {
        let reach = model.coulomb_cutoff.min(ERFC_NEGLIGIBLE * k.rho).max(0.0);
        let key = (k.rho.to_bits(), reach.to_bits());
        let kind = match cation_keys.iter().position(|&x| x == key) {
            Some(i) => i,
            None => {
                cation_keys.push(key);
                cation_kinds.push(CationConstants {
                    reach2: (reach * reach) as f32,
                    half_inv_rho: (0.5 / k.rho) as f32,
                    inv_rho2: (1.0 / (k.rho * k.rho)) as f32,
                });
                cation_reach.push(reach);
                cation_kinds.len() - 1
            }
        };
        let e = CationEntry {
            kind: kind as u32,
            weight: (occ * COULOMB_EV_A * model.probe.charge * k.charge) as f32,
        };
        (kind as u64, e, reach)
    };
    for a in &model.atoms {
        match a.kind {
            FrameworkKind::Anion(i) => {
                let k = &model.anions[i];
                let s_eq = ((k.r0 - k.rmin) / k.b).exp();
                let e = AnionEntry {
                    kind: i as u32,
                    w_bv: (a.occupancy * s_eq) as f32,
                    w_d0: (a.occupancy * k.d0) as f32,
                };
                an.push((a.frac.0, i, e, k.cutoff.max(0.0)));
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
        anion_kinds,
        anion_reach,
        cation_kinds,
        cation_reach,
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

    /// The images that can reach a point within `radius` of `centre`: every image within
    /// (the reach of its position + `radius`) of it, in the bins' order.
    fn candidates<E>(&self, p: &Positions<E>, centre: [f64; 3], radius: f64, out: &mut Candidates) {
        out.xyz.clear();
        out.pos.clear();
        self.visit(centre, self.max_reach + radius, |c, q| {
            let d = [c[0] - centre[0], c[1] - centre[1], c[2] - centre[2]];
            let reach = p.reach[q] + radius;
            if d[0] * d[0] + d[1] * d[1] + d[2] * d[2] <= reach * reach {
                out.xyz.push(*c);
                out.pos.push(q as u32);
            }
        });
    }

    /// Calls `f(image, position)` for every image in the bins that the sphere of radius `r`
    /// around `centre` overlaps (row by row), in the order of the bins' storage.
    fn visit(&self, centre: [f64; 3], r: f64, mut f: impl FnMut(&[f64; 3], usize)) {
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
        // the gap along axis `a` from the centre to bin `i` (A)
        let gap = |a: usize, i: usize| {
            let lo = self.lo[a] + i as f64 * BIN_A;
            (lo - centre[a]).max(centre[a] - lo - BIN_A).max(0.0)
        };
        for ia in a0..=a1 as usize {
            let ga = gap(0, ia);
            for ib in b0..=b1 as usize {
                // the bins of this row that the sphere of radius r reaches
                let left = (r + 1e-9).powi(2) - ga * ga - gap(1, ib).powi(2);
                if left < 0.0 {
                    continue;
                }
                let h = left.sqrt();
                let top = self.n[2] as f64 - 1.0;
                let lo = ((centre[2] - h - self.lo[2]) / BIN_A)
                    .floor()
                    .clamp(0.0, top) as usize;
                let hi = ((centre[2] + h - self.lo[2]) / BIN_A)
                    .floor()
                    .clamp(-1.0, top);
                if hi < lo as f64 {
                    continue;
                }
                let (c0, c1) = (lo.max(c0), (hi as usize).min(c1 as usize));
                if c1 < c0 {
                    continue;
                }
                let row = (ia * self.n[1] + ib) * self.n[2];
                let (s, e) = (
                    self.start[row + c0] as usize,
                    self.start[row + c1 + 1] as usize,
                );
                for k in s..e {
                    f(&self.xyz[k], self.pos[k] as usize);
                }
            }
        }
    }
}

/// The images of one family that may reach some point of a group of blocks (absolute
/// Cartesian coordinates, A, and position), in the bins' order: the bins are visited once per
/// group, and each block of the group filters this shorter list.
#[derive(Default)]
struct Candidates {
    xyz: Vec<[f64; 3]>,
    pos: Vec<u32>,
}

impl Candidates {
    /// The images within (the reach of their kind + `radius`) of `centre`, relative to it,
    /// sorted into one list per kind, each cut in two: the images that are within the reach
    /// of every point of the sphere (`core`: no point needs a cutoff test) and the others
    /// (`shell`). `out` gets one list per kind.
    fn near_kinds<E: Entry>(
        &self,
        p: &Positions<E>,
        kind_reach: &[f64],
        centre: [f64; 3],
        radius: f64,
        out: &mut Vec<KindImages>,
    ) {
        out.resize_with(kind_reach.len(), KindImages::default);
        for (k, &reach) in out.iter_mut().zip(kind_reach) {
            k.core.clear();
            k.shell.clear();
            // squared: an image at `dist` reaches some point when dist <= reach + radius, and
            // every point when dist + radius + CORE_MARGIN_A < reach
            k.reach2 = (reach + radius).powi(2);
            let inner = reach - radius - CORE_MARGIN_A;
            k.core2 = if inner > 0.0 { inner * inner } else { -1.0 };
        }
        // A position holds at most one entry of a kind (`group` sums the entries of one key,
        // and the key is the kind), so a kind's lists hold at most one image per candidate.
        // Each image is written at the next free place of both lists and counted in one of
        // them, or none: no branch on where it goes, which no predictor could guess.
        let most = self.xyz.len();
        for k in out.iter_mut() {
            k.core.make_room(most);
            k.shell.make_room(most);
        }
        for (c, &q) in self.xyz.iter().zip(&self.pos) {
            let d = [c[0] - centre[0], c[1] - centre[1], c[2] - centre[2]];
            let dist2 = d[0] * d[0] + d[1] * d[1] + d[2] * d[2];
            let rel = d.map(|x| x as f32);
            for e in p.entries_of(q as usize) {
                let k = &mut out[e.kind()];
                let core = dist2 < k.core2;
                let shell = !core & (dist2 <= k.reach2);
                let w = e.weights();
                k.core.put(rel, w, core);
                k.shell.put(rel, w, shell);
            }
        }
    }

    /// The images within (the reach of their position + `radius`) of `centre`, relative to it.
    fn near<E>(&self, p: &Positions<E>, centre: [f64; 3], radius: f64, out: &mut List) {
        out.clear();
        for (c, &q) in self.xyz.iter().zip(&self.pos) {
            let q = q as usize;
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

/// How far inside its reach an image must be from every point of a block to count as `core`
/// (A): far more than the f32 rounding of the coordinates relative to the block (below 1e-6 A),
/// so that the kernel's own cutoff test would pass at every point.
const CORE_MARGIN_A: f64 = 1e-3;

/// Images of one kind near a block, relative to its centre, with their weights (the second is
/// the Morse weight of an anion, unused for a cation): the first `n` places of the columns,
/// which may be longer.
#[derive(Default)]
struct Run {
    x: Vec<f32>,
    y: Vec<f32>,
    z: Vec<f32>,
    w: Vec<f32>,
    w2: Vec<f32>,
    n: usize,
}

impl Run {
    fn clear(&mut self) {
        self.n = 0;
    }

    /// Makes the columns long enough for `m` images.
    fn make_room(&mut self, m: usize) {
        if self.x.len() < m {
            for v in [
                &mut self.x,
                &mut self.y,
                &mut self.z,
                &mut self.w,
                &mut self.w2,
            ] {
                v.resize(m, 0.0);
            }
        }
    }

    /// Writes an image at the next free place, and counts it when `keep` (with room made).
    #[inline(always)]
    fn put(&mut self, d: [f32; 3], (w, w2): (f32, f32), keep: bool) {
        let i = self.n;
        self.x[i] = d[0];
        self.y[i] = d[1];
        self.z[i] = d[2];
        self.w[i] = w;
        self.w2[i] = w2;
        self.n += usize::from(keep);
    }

    /// Writes to the start of `out` the indices, in order, of the images within `limit` of
    /// `centre` (A), and returns how many: the squared distances first (a loop the compiler
    /// vectorises), then every index written at the next free place, which moves on only
    /// when the image is kept (no branch). `out` only grows.
    fn near_indices(
        &self,
        centre: [f32; 3],
        limit: f32,
        d2: &mut Vec<f32>,
        out: &mut Vec<u32>,
    ) -> usize {
        let n = self.n;
        d2.clear();
        d2.extend(
            self.x[..n]
                .iter()
                .zip(&self.y[..n])
                .zip(&self.z[..n])
                .map(|((x, y), z)| {
                    let (dx, dy, dz) = (x - centre[0], y - centre[1], z - centre[2]);
                    dx * dx + dy * dy + dz * dz
                }),
        );
        let limit2 = limit * limit;
        if out.len() < n {
            out.resize(n, 0);
        }
        let mut k = 0;
        for (j, &d) in d2.iter().enumerate() {
            out[k] = j as u32;
            k += usize::from(d <= limit2);
        }
        k
    }
}

/// Which images of a run an evaluation takes, in order: all, or those at some indices.
trait Pick: Copy {
    fn len(self) -> usize;
    fn at(self, j: usize) -> usize;
}

/// The first `n` images of a run.
#[derive(Clone, Copy)]
struct All(usize);

impl Pick for All {
    #[inline(always)]
    fn len(self) -> usize {
        self.0
    }
    #[inline(always)]
    fn at(self, j: usize) -> usize {
        j
    }
}

impl Pick for &[u32] {
    #[inline(always)]
    fn len(self) -> usize {
        <[u32]>::len(self)
    }
    #[inline(always)]
    fn at(self, j: usize) -> usize {
        self[j] as usize
    }
}

/// The images of one kind near a block: within the reach of every point (`core`), or of some.
#[derive(Default)]
struct KindImages {
    core: Run,
    shell: Run,
    /// The squared distances (A^2) within which an image reaches some point of the block, and
    /// every point (negative when none can).
    reach2: f64,
    core2: f64,
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
    anions: Vec<KindImages>,
    cations: Vec<KindImages>,
    mobile: List,
    /// The indices of the images of a shell (anion or Coulomb) that can reach the vectors of
    /// points being evaluated, and the squared distances they are chosen by.
    reach_points: Vec<u32>,
    reach_d2: Vec<f32>,
    /// The images of each family near the current group of blocks.
    near_a: Candidates,
    near_c: Candidates,
    near_m: Candidates,
    dv: Vec<f32>,
    en: Vec<f32>,
    cnt: Vec<f32>,
}

/// The points of every block of one shape, in the order the kernel evaluates them: blocks of
/// one shape differ by a lattice translation, so this is computed once per shape (at most 8).
struct Layout {
    /// Points along a, b, c.
    shape: [usize; 3],
    /// Centre of the block relative to its first point, and the radius of its bounding sphere
    /// (A).
    centre: [f64; 3],
    radius: f64,
    /// Cartesian coordinates relative to the centre (A), in tiles of 2 x 2 x 4 points, each
    /// one compact vector of 16 lanes (two of 8); a partial tile is padded with copies of its
    /// last point.
    px: Vec<f32>,
    py: Vec<f32>,
    pz: Vec<f32>,
    /// 1 for a slot that holds a point of the block, 0 for padding.
    real: Vec<f32>,
    /// The block's rows along c: their first point's index in the grid relative to the
    /// block's first point, and the slots of their points in order.
    rows: Vec<(usize, [u16; BLOCK])>,
    /// The spheres around the runs of 8, 16 and 32 slots that the kernel evaluates together
    /// (one or two vectors of 8 or 16 lanes): centre and radius (A), by run.
    spheres: [Vec<([f32; 3], f32)>; 3],
}

/// The widths of the runs of slots of [`Layout::spheres`].
const SPHERE_WIDTHS: [usize; 3] = [8, 16, 32];

impl Layout {
    /// The sphere around slots `v..v + n` (`n` one of [`SPHERE_WIDTHS`], `v` a multiple).
    #[inline(always)]
    fn sphere(&self, v: usize, n: usize) -> ([f32; 3], f32) {
        let w = SPHERE_WIDTHS
            .iter()
            .position(|&w| w == n)
            .expect("a width of the spheres");
        self.spheres[w][v / n]
    }

    /// Fills [`Layout::spheres`] from the slots' coordinates: for each run, the centre of its
    /// bounding box and the largest distance from it.
    fn set_spheres(&mut self) {
        for (w, &n) in SPHERE_WIDTHS.iter().enumerate() {
            self.spheres[w] = (0..self.px.len() / n)
                .map(|r| {
                    let run = r * n..(r + 1) * n;
                    let (xs, ys, zs) =
                        (&self.px[run.clone()], &self.py[run.clone()], &self.pz[run]);
                    let mid = |a: &[f32]| {
                        let lo = a.iter().copied().fold(f32::INFINITY, f32::min);
                        let hi = a.iter().copied().fold(f32::NEG_INFINITY, f32::max);
                        0.5 * (lo + hi)
                    };
                    let c = [mid(xs), mid(ys), mid(zs)];
                    let r2 = (0..n)
                        .map(|i| {
                            (xs[i] - c[0]).powi(2) + (ys[i] - c[1]).powi(2) + (zs[i] - c[2]).powi(2)
                        })
                        .fold(0.0f32, f32::max);
                    (c, r2.sqrt())
                })
                .collect();
        }
    }

    /// Pairs counted over the points of the block (not the padding), from the per-slot counts.
    fn count(&self, cnt: &[f32]) -> u64 {
        // whole numbers below 2^24 per lane: the f32 sums are exact
        let mut acc = [0.0f32; TILE];
        for (c, r) in cnt.chunks_exact(TILE).zip(self.real.chunks_exact(TILE)) {
            for i in 0..TILE {
                acc[i] += c[i] * r[i];
            }
        }
        acc.iter().map(|&x| x as u64).sum()
    }
}

/// The layouts of the block shapes of a grid of `dims` points: along each axis a whole block,
/// and the remainder where the axis is not a multiple of the block.
fn layouts(m: &Matrix3<f64>, dims: [usize; 3]) -> Vec<Layout> {
    let inv_dims = dims.map(|n| 1.0 / n as f64);
    let sizes = dims.map(|n| {
        let mut v = vec![BLOCK.min(n)];
        if n > BLOCK && n % BLOCK != 0 {
            v.push(n % BLOCK);
        }
        v
    });
    let mut out = Vec::new();
    for &sa in &sizes[0] {
        for &sb in &sizes[1] {
            for &sc in &sizes[2] {
                let shape = [sa, sb, sc];
                let b = Block {
                    lo: [0; 3],
                    hi: shape,
                };
                let (centre, radius) = block_sphere(m, inv_dims, &b);
                let mut l = Layout {
                    shape,
                    centre,
                    radius,
                    px: Vec::new(),
                    py: Vec::new(),
                    pz: Vec::new(),
                    real: Vec::new(),
                    rows: Vec::new(),
                    spheres: Default::default(),
                };
                let mut slot_of = vec![0u16; sa * sb * sc];
                for ti in (0..sa).step_by(2) {
                    for tj in (0..sb).step_by(2) {
                        for tk in (0..sc).step_by(4) {
                            for kh in 0..2 {
                                for i in ti..(ti + 2).min(sa) {
                                    for j in tj..(tj + 2).min(sb) {
                                        for k in tk + 2 * kh..(tk + 2 * kh + 2).min(sc) {
                                            let p = point_cart(m, inv_dims, [i, j, k]);
                                            slot_of[(i * sb + j) * sc + k] = l.px.len() as u16;
                                            l.real.push(1.0);
                                            l.px.push((p.x - centre[0]) as f32);
                                            l.py.push((p.y - centre[1]) as f32);
                                            l.pz.push((p.z - centre[2]) as f32);
                                        }
                                    }
                                }
                            }
                            while !l.px.len().is_multiple_of(TILE) {
                                let q = l.px.len() - 1;
                                let (x, y, z) = (l.px[q], l.py[q], l.pz[q]);
                                l.px.push(x);
                                l.py.push(y);
                                l.pz.push(z);
                                l.real.push(0.0);
                            }
                        }
                    }
                }
                for i in 0..sa {
                    for j in 0..sb {
                        let mut slots = [0u16; BLOCK];
                        slots[..sc].copy_from_slice(&slot_of[(i * sb + j) * sc..][..sc]);
                        l.rows.push(((i * dims[1] + j) * dims[2], slots));
                    }
                }
                l.set_spheres();
                out.push(l);
            }
        }
    }
    out
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

/// Squared distances from the points to image `j` of a run.
#[inline(always)]
fn dist2_run<V: Lanes>(px: V, py: V, pz: V, x: f32, y: f32, z: f32) -> V {
    let dx = px.sub(V::splat(x));
    let dy = py.sub(V::splat(y));
    let dz = pz.sub(V::splat(z));
    dx.fma(dx, dy.fma(dy, dz.mul(dz)))
}

/// The screened Coulomb factor `erfc(R/rho)/R` of one term: with `t = 1/(1 + z/2)`,
/// `erfc(z)/R = t exp(-z^2 + P(t)) / R`, one division for both. Within the reach
/// (R <= 6.5 rho) the exponent lies in [-44, 0], so the exponential needs no clamp.
#[inline(always)]
fn coulomb<V: Lanes>(c: &CationConstants, d2: V, r: V) -> V {
    let (inv, t, s) = coulomb_reduce(c, d2, r);
    inv.mul(simd::exp_finish(t, s))
}

/// The squared distance held at the guard `g2` and the distance.
#[inline(always)]
fn guarded<V: Lanes>(d2: V, g2: V) -> (V, V) {
    let d2 = d2.max(g2);
    (d2, d2.sqrt())
}

/// [`coulomb`] up to the exponential's reduction: `1/(R (1 + z/2))` and the reduced
/// argument and shifted exponent of `exp(-z^2 + P(t))`, for [`simd::exp_finish`].
#[inline(always)]
fn coulomb_reduce<V: Lanes>(c: &CationConstants, d2: V, r: V) -> (V, V, V) {
    let inv = V::splat(1.0).div(V::splat(c.half_inv_rho).fma(d2, r));
    let t = inv.mul(r);
    let arg = V::splat(-c.inv_rho2).fma(d2, simd::erfc_poly(t));
    let (t, s) = simd::exp_reduce(arg);
    (inv, t, s)
}

/// Squared distances from `T` vectors of points to one image, and which lanes lie within
/// `limit2`; None when `SHELL` and no lane of any vector does (the image is then skipped).
#[inline(always)]
#[allow(clippy::type_complexity)]
fn near<V: Lanes, const T: usize, const SHELL: bool>(
    p: &[(V, V, V); T],
    image: [f32; 3],
    limit2: V,
) -> Option<([V; T], [V::Mask; T])> {
    let zero = V::splat(0.0);
    let mut d2 = [zero; T];
    let mut inside = [zero.lt(zero); T];
    let mut any = false;
    for t in 0..T {
        d2[t] = dist2_run(p[t].0, p[t].1, p[t].2, image[0], image[1], image[2]);
        inside[t] = d2[t].lt(limit2);
        if SHELL {
            any |= V::any(inside[t]);
        }
    }
    (!SHELL || any).then_some((d2, inside))
}

/// The first half of the exponential (clamped first when `CLAMP`).
#[inline(always)]
fn reduce<V: Lanes, const CLAMP: bool>(arg: V) -> (V, V) {
    if CLAMP {
        simd::exp_reduce(arg.max(V::splat(-87.0)).min(V::splat(87.0)))
    } else {
        simd::exp_reduce(arg)
    }
}

/// Running sums of one vector of points: bond-valence sum (v.u.), energy (eV), pairs counted.
#[derive(Clone, Copy)]
struct Sums<V> {
    bvs: V,
    energy: V,
    count: V,
}

/// Adds one anion term `x = exp((Rmin - R)/b)` with weights `w` (bond valence) and `w2`
/// (Morse, shifted by `-neg_cut` so that it vanishes at the cutoff).
#[inline(always)]
fn add_bond<V: Lanes, const ENERGY: bool>(s: &mut Sums<V>, x: V, w: V, w2: V, neg_cut: V) {
    s.bvs = w.fma(x, s.bvs);
    if ENERGY {
        let morse = x.fma(x.sub(V::splat(2.0)), neg_cut);
        s.energy = w2.fma(morse, s.energy);
    }
}

/// [`add_bond`] at every lane, or when `SHELL` at the lanes of `m` only (the others keep
/// their sums, whatever `x` holds there; with AVX-512 one masked operation per sum).
#[inline(always)]
fn add_lanes<V: Lanes, const ENERGY: bool, const SHELL: bool>(
    s: &mut Sums<V>,
    x: V,
    w: V,
    w2: V,
    neg_cut: V,
    m: V::Mask,
) {
    if SHELL {
        let old = *s;
        add_bond::<V, ENERGY>(s, x, w, w2, neg_cut);
        s.bvs = V::select(m, s.bvs, old.bvs);
        if ENERGY {
            s.energy = V::select(m, s.energy, old.energy);
        }
        s.count = V::select(m, old.count.add(V::splat(1.0)), old.count);
    } else {
        add_bond::<V, ENERGY>(s, x, w, w2, neg_cut);
    }
}

/// Adds one run of images of an anion kind to `T` vectors of points at once (each image's
/// coordinates and weights are loaded once for all of them, and the vectors' independent
/// chains keep the arithmetic units busy). `SHELL`: the images are within the cutoff of some
/// points only, so each lane is tested and only the lanes inside add to their sums (every
/// image is computed at every lane: skipping those with no lane inside, as an unpipelined
/// loop must, costs more in a shell than it saves); otherwise every lane is inside and the
/// count grows by the run's length. `CLAMP`: the exponent may leave the range of normal f32
/// results; a lane outside the cutoff may leave it anyway, and its result is not used.
#[inline(always)]
fn anion_run<V: Lanes, const T: usize, const ENERGY: bool, const SHELL: bool, const CLAMP: bool>(
    c: &AnionConstants,
    run: &Run,
    pick: impl Pick,
    p: &[(V, V, V); T],
    acc: &mut [Sums<V>; T],
) {
    let zero = V::splat(0.0);
    let one = V::splat(1.0);
    let cutoff2 = V::splat(c.cutoff2);
    let (slope, offset) = (V::splat(c.neg_inv_b), V::splat(c.rmin_inv_b));
    let neg_cut = V::splat(-c.morse_cut);
    let n = pick.len();
    let m = run.n;
    let (xs, ys, zs, ws, w2s) = (
        &run.x[..m],
        &run.y[..m],
        &run.z[..m],
        &run.w[..m],
        &run.w2[..m],
    );
    // image j of the evaluation
    let xyz = |j: usize| {
        let i = pick.at(j);
        (xs[i], ys[i], zs[i])
    };
    let wts = |j: usize| {
        let i = pick.at(j);
        (V::splat(ws[i]), V::splat(w2s[i]))
    };
    let mut sums = *acc;
    let mut start = 0;
    if n >= 2 {
        // Software pipeline over three images: the sum of image j - 2, the reduction of image
        // j - 1 and the distance of image j, so that the scheduler sees work whose inputs are
        // ready. The images are still summed in order. In the shell, every image is computed
        // at every lane and only the lanes inside the cutoff add to their sums (the mask of
        // each image travels down the pipeline with it).
        let all = zero.lt(one);
        let mut ra = [zero; T];
        let mut ma = [all; T];
        let mut tb = [zero; T];
        let mut sb = [zero; T];
        let mut mb = [all; T];
        for t in 0..T {
            let ((x0, y0, z0), (x1, y1, z1)) = (xyz(0), xyz(1));
            let d0 = dist2_run(p[t].0, p[t].1, p[t].2, x0, y0, z0);
            let d1 = dist2_run(p[t].0, p[t].1, p[t].2, x1, y1, z1);
            if SHELL {
                mb[t] = d0.lt(cutoff2);
                ma[t] = d1.lt(cutoff2);
            }
            (tb[t], sb[t]) = reduce::<V, CLAMP>(d0.sqrt().fma(slope, offset));
            ra[t] = d1.sqrt();
        }
        for j in 2..n {
            let (wc, w2c) = wts(j - 2);
            let (ix, iy, iz) = xyz(j);
            for t in 0..T {
                let x = simd::exp_finish(tb[t], sb[t]);
                add_lanes::<V, ENERGY, SHELL>(&mut sums[t], x, wc, w2c, neg_cut, mb[t]);
                (tb[t], sb[t]) = reduce::<V, CLAMP>(ra[t].fma(slope, offset));
                let d = dist2_run(p[t].0, p[t].1, p[t].2, ix, iy, iz);
                if SHELL {
                    mb[t] = ma[t];
                    ma[t] = d.lt(cutoff2);
                }
                ra[t] = d.sqrt();
            }
        }
        // the last two images
        let (wc, w2c) = wts(n - 2);
        let (wl, w2l) = wts(n - 1);
        for t in 0..T {
            let x = simd::exp_finish(tb[t], sb[t]);
            add_lanes::<V, ENERGY, SHELL>(&mut sums[t], x, wc, w2c, neg_cut, mb[t]);
            let (tl, sl) = reduce::<V, CLAMP>(ra[t].fma(slope, offset));
            let x = simd::exp_finish(tl, sl);
            add_lanes::<V, ENERGY, SHELL>(&mut sums[t], x, wl, w2l, neg_cut, ma[t]);
        }
        start = n;
    }
    for j in start..n {
        let (x, y, z) = xyz(j);
        let Some((d2, inside)) = near::<V, T, SHELL>(p, [x, y, z], cutoff2) else {
            continue;
        };
        let (wj, w2j) = wts(j);
        for t in 0..T {
            // lanes outside the cutoff are masked below; held at the cutoff, their exponent
            // stays in the range the unclamped exponential handles
            let d2 = if SHELL { d2[t].min(cutoff2) } else { d2[t] };
            // no guard at R = 0: the exponential is finite there (the f64 loop's guard of
            // 1e-6 A moves the term by 1e-6/b relative, well inside the tested agreement)
            let r = d2.sqrt();
            let arg = r.fma(slope, offset);
            let x = if CLAMP {
                exp(arg)
            } else {
                simd::exp_in_range(arg)
            };
            let (w, w2) = if SHELL {
                sums[t].count = sums[t].count.add(V::select(inside[t], one, zero));
                (
                    V::select(inside[t], wj, zero),
                    V::select(inside[t], w2j, zero),
                )
            } else {
                (wj, w2j)
            };
            add_bond::<V, ENERGY>(&mut sums[t], x, w, w2, neg_cut);
        }
    }
    if !SHELL {
        // n is a whole number below 2^24: exact in f32
        for s in sums.iter_mut() {
            s.count = s.count.add(V::splat(n as f32));
        }
    }
    *acc = sums;
}

/// Adds one run of images of a cation kind (screened Coulomb) to `T` vectors of points; `SHELL`
/// as in [`anion_run`].
#[inline(always)]
fn cation_run<V: Lanes, const T: usize, const SHELL: bool>(
    c: &CationConstants,
    run: &Run,
    pick: impl Pick,
    p: &[(V, V, V); T],
    acc: &mut [Sums<V>; T],
) {
    let zero = V::splat(0.0);
    let one = V::splat(1.0);
    let g2 = V::splat(R_GUARD * R_GUARD);
    let reach2 = V::splat(c.reach2);
    let n = pick.len();
    let m = run.n;
    let (xs, ys, zs, ws) = (&run.x[..m], &run.y[..m], &run.z[..m], &run.w[..m]);
    // image j of the evaluation
    let xyz = |j: usize| {
        let i = pick.at(j);
        (xs[i], ys[i], zs[i])
    };
    let wt = |j: usize| V::splat(ws[pick.at(j)]);
    let mut sums = *acc;
    let mut start = 0;
    if !SHELL && n >= 2 {
        // pipelined as the anion core: the sum of image j - 2, the erfc factor and the
        // exponential's reduction of image j - 1, the distance of image j (summed in order)
        let mut da = [(zero, zero); T];
        let mut tb = [(zero, zero, zero); T];
        for t in 0..T {
            let ((x0, y0, z0), (x1, y1, z1)) = (xyz(0), xyz(1));
            let d0 = guarded(dist2_run(p[t].0, p[t].1, p[t].2, x0, y0, z0), g2);
            tb[t] = coulomb_reduce(c, d0.0, d0.1);
            da[t] = guarded(dist2_run(p[t].0, p[t].1, p[t].2, x1, y1, z1), g2);
        }
        for j in 2..n {
            let wc = wt(j - 2);
            let (ix, iy, iz) = xyz(j);
            for t in 0..T {
                let (inv, tt, ss) = tb[t];
                let term = inv.mul(simd::exp_finish(tt, ss));
                sums[t].energy = wc.fma(term, sums[t].energy);
                tb[t] = coulomb_reduce(c, da[t].0, da[t].1);
                da[t] = guarded(dist2_run(p[t].0, p[t].1, p[t].2, ix, iy, iz), g2);
            }
        }
        // the last two images
        let (wc, wl) = (wt(n - 2), wt(n - 1));
        for t in 0..T {
            let (inv, tt, ss) = tb[t];
            sums[t].energy = wc.fma(inv.mul(simd::exp_finish(tt, ss)), sums[t].energy);
            let (inv, tt, ss) = coulomb_reduce(c, da[t].0, da[t].1);
            sums[t].energy = wl.fma(inv.mul(simd::exp_finish(tt, ss)), sums[t].energy);
        }
        start = n;
    }
    for j in start..n {
        let (x, y, z) = xyz(j);
        let Some((d2, inside)) = near::<V, T, SHELL>(p, [x, y, z], reach2) else {
            continue;
        };
        let wj = wt(j);
        for t in 0..T {
            // masked lanes held at the reach, where the exponent stays in range
            let d2 = if SHELL { d2[t].min(reach2) } else { d2[t] };
            let d2 = d2.max(g2);
            let term = coulomb(c, d2, d2.sqrt());
            let w = if SHELL {
                sums[t].count = sums[t].count.add(V::select(inside[t], one, zero));
                V::select(inside[t], wj, zero)
            } else {
                wj
            };
            sums[t].energy = w.fma(term, sums[t].energy);
        }
    }
    if !SHELL {
        for s in sums.iter_mut() {
            s.count = s.count.add(V::splat(n as f32));
        }
    }
    *acc = sums;
}

/// The two fields of `T` vectors of points starting at point `v` of the block, written to
/// `out[0]` and `out[1]`, and the contributions counted per point (pairs within the cutoff of
/// their term) to `out[2]`.
#[inline(always)]
fn points<V: Lanes, const T: usize, const ENERGY: bool>(
    t: &Terms,
    l: &Layout,
    v: usize,
    s: &Scratch,
    (reach_points, reach_d2): (&mut Vec<u32>, &mut Vec<f32>),
    out: [&mut [f32]; 3],
) {
    let [dv, en, cnt] = out;
    let zero = V::splat(0.0);
    let one = V::splat(1.0);
    let g2 = V::splat(R_GUARD * R_GUARD);
    let mut pv = [(zero, zero, zero); T];
    for (i, p) in pv.iter_mut().enumerate() {
        let o = v + i * V::N;
        *p = (
            V::load(&l.px[o..]),
            V::load(&l.py[o..]),
            V::load(&l.pz[o..]),
        );
    }
    let mut acc = [Sums {
        bvs: zero,
        energy: zero,
        count: zero,
    }; T];
    // An image of a block's anion shell reaches some points of the block; those that reach
    // none of these vectors' points are dropped first (their lanes would all be masked).
    let (centre, radius) = l.sphere(v, T * V::N);
    for (c, k) in t.anion_kinds.iter().zip(&s.anions) {
        let limit = c.cutoff2.sqrt() + radius + CULL_MARGIN_A;
        let kept = k.shell.near_indices(centre, limit, reach_d2, reach_points);
        let (core, shell) = (All(k.core.n), &reach_points[..kept]);
        if c.in_range {
            anion_run::<V, T, ENERGY, false, false>(c, &k.core, core, &pv, &mut acc);
            anion_run::<V, T, ENERGY, true, false>(c, &k.shell, shell, &pv, &mut acc);
        } else {
            anion_run::<V, T, ENERGY, false, true>(c, &k.core, core, &pv, &mut acc);
            anion_run::<V, T, ENERGY, true, true>(c, &k.shell, shell, &pv, &mut acc);
        }
    }
    if ENERGY {
        // the screened Coulomb term holds more constants in registers: one vector at a time
        for (i, (p, a)) in pv.iter().zip(acc.iter_mut()).enumerate() {
            let (p, mut one) = ([*p], [*a]);
            // the shell's images that reach no point of this vector dropped first, as above
            let (centre, radius) = l.sphere(v + i * V::N, V::N);
            for (c, k) in t.cation_kinds.iter().zip(&s.cations) {
                let limit = c.reach2.sqrt() + radius + CULL_MARGIN_A;
                let kept = k.shell.near_indices(centre, limit, reach_d2, reach_points);
                cation_run::<V, 1, false>(c, &k.core, All(k.core.n), &p, &mut one);
                cation_run::<V, 1, true>(c, &k.shell, &reach_points[..kept], &p, &mut one);
            }
            *a = one[0];
        }
    }
    for (i, (&(px, py, pz), sums)) in pv.iter().zip(acc).enumerate() {
        let Sums {
            bvs,
            mut energy,
            mut count,
        } = sums;
        if ENERGY && t.exclude > 0 {
            // the mobile ions: the k nearest sites of each point take no part
            let far = V::splat(f32::INFINITY);
            let mut near_r = [far; 4];
            let mut near_t = [zero; 4];
            let l = &s.mobile;
            for j in 0..l.x.len() {
                let d2 = dist2(px, py, pz, l, j).max(g2);
                let e = &t.mobile.entries_of(l.pos[j] as usize)[0];
                let c = &t.cation_kinds[e.kind as usize];
                let inside = d2.lt(V::splat(c.reach2));
                if !V::any(inside) {
                    continue;
                }
                let r = d2.sqrt();
                let term = V::select(inside, V::splat(e.weight), zero).mul(coulomb(c, d2, r));
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
        let o = v + i * V::N;
        let dvv = bvs.sub(V::splat(t.valence));
        let dvv = dvv.max(zero.sub(dvv));
        let mcap = V::splat(t.mismatch_cap);
        V::select(dvv.lt(mcap), dvv, mcap).store(&mut dv[o..]);
        if ENERGY {
            let ecap = V::splat(t.energy_cap);
            V::select(energy.lt(ecap), energy, ecap).store(&mut en[o..]);
        }
        count.store(&mut cnt[o..]);
    }
}

use simd::exp;

/// How much farther than its cutoff plus the radius of the points' sphere an image of a shell
/// is kept (A): far more than the f32 rounding of coordinates of a few A (below 1e-6 A), so
/// that no image with a lane inside its cutoff is dropped.
const CULL_MARGIN_A: f32 = 1e-3;

/// Evaluates the points of layout `l` (a multiple of `V::N`) into `s.dv`, `s.en`, `s.cnt`,
/// [`TILES`] vectors at a time.
#[inline(always)]
fn block_points<V: Lanes, const ENERGY: bool>(t: &Terms, l: &Layout, s: &mut Scratch) {
    let n = l.px.len();
    let mut dv = std::mem::take(&mut s.dv);
    let mut en = std::mem::take(&mut s.en);
    let mut cnt = std::mem::take(&mut s.cnt);
    dv.resize(n, 0.0);
    en.resize(n, 0.0);
    cnt.resize(n, 0.0);
    let mut near = std::mem::take(&mut s.reach_points);
    let mut d2 = std::mem::take(&mut s.reach_d2);
    let wide = n - n % (TILES * V::N);
    for v in (0..wide).step_by(TILES * V::N) {
        let buf = (&mut near, &mut d2);
        points::<V, TILES, ENERGY>(t, l, v, s, buf, [&mut dv, &mut en, &mut cnt]);
    }
    for v in (wide..n).step_by(V::N) {
        let buf = (&mut near, &mut d2);
        points::<V, 1, ENERGY>(t, l, v, s, buf, [&mut dv, &mut en, &mut cnt]);
    }
    s.reach_points = near;
    s.reach_d2 = d2;
    s.dv = dv;
    s.en = en;
    s.cnt = cnt;
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2,fma")]
fn block_avx2<const ENERGY: bool>(t: &Terms, l: &Layout, s: &mut Scratch) {
    block_points::<simd::Avx2, ENERGY>(t, l, s)
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx512f,avx512dq,avx2,fma")]
fn block_avx512<const ENERGY: bool>(t: &Terms, l: &Layout, s: &mut Scratch) {
    block_points::<simd::Avx512, ENERGY>(t, l, s)
}

fn block_with<const ENERGY: bool>(isa: Isa, t: &Terms, l: &Layout, s: &mut Scratch) {
    match isa {
        Isa::Portable => block_points::<Portable, ENERGY>(t, l, s),
        // SAFETY: `Isa::Avx2Fma` and `Isa::Avx512` come from `Isa::detect`/`Isa::available`,
        // which checked the processor's features.
        #[cfg(target_arch = "x86_64")]
        Isa::Avx2Fma => unsafe { block_avx2::<ENERGY>(t, l, s) },
        #[cfg(target_arch = "x86_64")]
        Isa::Avx512 => unsafe { block_avx512::<ENERGY>(t, l, s) },
    }
}

/// A pointer to the values of a grid that blocks write into in parallel, each at its own
/// points.
struct Out(*mut f32, usize);
// SAFETY: see `Out::write`.
unsafe impl Sync for Out {}
unsafe impl Send for Out {}

impl Out {
    /// Writes `row` at indices `g..g + row.len()`.
    ///
    /// Callers write each index from one thread only (blocks do not overlap) while the grid
    /// is borrowed by nobody else.
    #[inline]
    fn write_row(&self, g: usize, row: &[f32]) {
        assert!(g + row.len() <= self.1);
        // SAFETY: in bounds (checked); no other thread writes or reads these indices meanwhile.
        unsafe {
            let to = self.0.add(g);
            if let Ok(whole) = <&[f32; BLOCK]>::try_from(row) {
                // a whole row: one fixed-size copy, not a call to memmove
                std::ptr::copy_nonoverlapping(whole.as_ptr(), to, BLOCK)
            } else {
                std::ptr::copy_nonoverlapping(row.as_ptr(), to, row.len())
            }
        };
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
    let layouts = layouts(&m, dims);
    let margin = layouts.iter().map(|l| l.radius).fold(0.0, f64::max);
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
    let total = dims
        .map(|n| n.div_ceil(BLOCK) as u64)
        .iter()
        .product::<u64>();
    let (nb, nc) = (dims[1], dims[2]);
    // Groups of GROUP^3 blocks: the bins are visited once per group, and each block filters
    // the group's candidates.
    let groups = blocks(dims, BLOCK * GROUP);
    let evaluations: u64 = groups
        .par_iter()
        .map_init(Scratch::default, |s, g| {
            if stop.load(Ordering::Relaxed) {
                return 0;
            }
            let shape = [0, 1, 2].map(|a| g.hi[a] - g.lo[a]);
            let members: Vec<(Block, &Layout, [f64; 3])> = blocks(shape, BLOCK)
                .into_iter()
                .map(|b| {
                    let b = Block {
                        lo: [0, 1, 2].map(|a| g.lo[a] + b.lo[a]),
                        hi: [0, 1, 2].map(|a| g.lo[a] + b.hi[a]),
                    };
                    let shape = [0, 1, 2].map(|a| b.hi[a] - b.lo[a]);
                    let layout = layouts
                        .iter()
                        .find(|l| l.shape == shape)
                        .expect("a layout for every block shape");
                    let origin = point_cart(&m, inv_dims, b.lo);
                    let centre = [0, 1, 2].map(|a| origin[a] + layout.centre[a]);
                    (b, layout, centre)
                })
                .collect();
            // a sphere around the group's centre that holds every block's sphere
            let (gc, _) = block_sphere(&m, inv_dims, g);
            let reach = members
                .iter()
                .map(|(_, l, c)| {
                    let d = [0, 1, 2].map(|a| c[a] - gc[a]);
                    (d[0] * d[0] + d[1] * d[1] + d[2] * d[2]).sqrt() + l.radius
                })
                .fold(0.0, f64::max);
            bins_a.candidates(&t.anions, gc, reach, &mut s.near_a);
            if energy {
                bins_c.candidates(&t.cations, gc, reach, &mut s.near_c);
                bins_m.candidates(&t.mobile, gc, reach, &mut s.near_m);
            }
            let mut count = 0;
            for (b, layout, centre) in &members {
                if stop.load(Ordering::Relaxed) {
                    return 0;
                }
                let radius = layout.radius;
                let s = &mut *s;
                s.near_a
                    .near_kinds(&t.anions, &t.anion_reach, *centre, radius, &mut s.anions);
                if energy {
                    s.near_c.near_kinds(
                        &t.cations,
                        &t.cation_reach,
                        *centre,
                        radius,
                        &mut s.cations,
                    );
                    s.near_m.near(&t.mobile, *centre, radius, &mut s.mobile);
                }
                if energy {
                    block_with::<true>(isa, &t, layout, s)
                } else {
                    block_with::<false>(isa, &t, layout, s)
                }
                count += layout.count(&s.cnt);
                let first = (b.lo[0] * nb + b.lo[1]) * nc + b.lo[2];
                let sc = layout.shape[2];
                let mut row = [0.0f32; BLOCK];
                for (offset, slots) in &layout.rows {
                    for (x, &q) in row.iter_mut().zip(&slots[..sc]) {
                        *x = s.dv[q as usize];
                    }
                    out_dv.write_row(first + offset, &row[..sc]);
                    if energy {
                        for (x, &q) in row.iter_mut().zip(&slots[..sc]) {
                            *x = s.en[q as usize];
                        }
                        out_en.write_row(first + offset, &row[..sc]);
                    }
                }
                if let Some(sink) = sink {
                    let k = done.fetch_add(1, Ordering::Relaxed) + 1;
                    if !sink.update("landscape grid", k, total, points as u64) {
                        stop.store(true, Ordering::Relaxed);
                    }
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

#[cfg(test)]
mod tests {
    use super::super::compute::{compute_f64, compute_with_isa, evaluate_point};
    use super::super::fixtures::mixed_model;
    use super::{BLOCK, Isa, Progress, SPHERE_WIDTHS, TILE, blocks, layouts, point_cart};

    #[test]
    fn core_and_shell_lists_give_the_plain_sums_at_every_point() {
        // The plain per-point loop (`evaluate_point`, f64, libm's exp and erfc written straight
        // from the formulas) is the reference; grids whose sides are not multiples of the block
        // (9 = 8 + 1, 13 = 8 + 5, 17 = 16 + 1) give partial blocks and padded tiles, one grid
        // fits in a single partial block, and one spans several groups of blocks along every
        // axis (17 x 20 x 33: groups of 16 points, the last partial), whose candidate lists are
        // shared by their blocks.
        let model = mixed_model();
        for dims in [[9, 13, 17], [3, 4, 5], [17, 20, 33]] {
            let reference = compute_f64(&model, dims, &Progress::Silent).unwrap();
            for isa in Isa::available() {
                let got = compute_with_isa(&model, dims, &Progress::Silent, isa).unwrap();
                // a pair within f32 rounding (1e-7 relative) of its cutoff may fall either
                // side of it: the larger grid has one such pair in 22 million
                let (have, want) = (
                    got.stats.neighbour_evaluations,
                    reference.stats.neighbour_evaluations,
                );
                assert!(
                    have.abs_diff(want) <= want / 1_000_000,
                    "{isa:?} {dims:?}: {have} pairs within the cutoffs against {want}"
                );
                for idx in 0..got.energy.values.len() {
                    let (dv, e) = evaluate_point(&model, got.energy.frac(got.energy.ijk(idx)));
                    for (name, plain, f64_loop, have) in [
                        ("energy", e, &reference.energy, &got.energy),
                        ("mismatch", dv, &reference.mismatch, &got.mismatch),
                    ] {
                        let (want, have) = (f64_loop.values[idx] as f64, have.values[idx] as f64);
                        assert!(
                            (plain - want).abs() <= 1e-6 * plain.abs().max(1.0),
                            "{dims:?} point {idx}: {name} of the f64 loop {want} against {plain}"
                        );
                        assert!(
                            (want - have).abs() <= 1e-5 * want.abs().max(1.0),
                            "{isa:?} {dims:?} point {idx}: {name} {have} against {want}"
                        );
                    }
                }
            }
        }
    }

    #[test]
    fn blocks_of_one_shape_share_one_layout() {
        // Every point of the grid appears once, in a tile of at most 16 slots, at its own
        // position relative to its block's centre (within the block's radius); the rows name
        // each real slot once, and the padding is not counted.
        let m = *mixed_model().lattice.matrix();
        let dims = [9, 13, 17];
        let inv_dims = dims.map(|n| 1.0 / n as f64);
        let layouts = layouts(&m, dims);
        assert_eq!(layouts.len(), 8);
        let mut seen = vec![0u32; dims[0] * dims[1] * dims[2]];
        for b in blocks(dims, BLOCK) {
            let shape = [0, 1, 2].map(|a| b.hi[a] - b.lo[a]);
            let l = layouts.iter().find(|l| l.shape == shape).unwrap();
            assert_eq!(l.px.len() % TILE, 0);
            assert_eq!(l.real.len(), l.px.len());
            let first = (b.lo[0] * dims[1] + b.lo[1]) * dims[2] + b.lo[2];
            let origin = point_cart(&m, inv_dims, b.lo);
            let mut named = vec![0u32; l.px.len()];
            assert_eq!(l.rows.len(), shape[0] * shape[1]);
            for (row, (offset, slots)) in l.rows.iter().enumerate() {
                let (i, j) = (row / shape[1], row % shape[1]);
                assert_eq!(*offset, (i * dims[1] + j) * dims[2]);
                for (k, &q) in slots[..shape[2]].iter().enumerate() {
                    let q = q as usize;
                    seen[first + offset + k] += 1;
                    named[q] += 1;
                    let p = point_cart(&m, inv_dims, [b.lo[0] + i, b.lo[1] + j, b.lo[2] + k]);
                    let want = [0, 1, 2].map(|a| p[a] - origin[a] - l.centre[a]);
                    for (a, have) in [l.px[q], l.py[q], l.pz[q]].into_iter().enumerate() {
                        assert!((have as f64 - want[a]).abs() < 1e-5, "{b:?} slot {q}");
                    }
                    let d = (l.px[q].powi(2) + l.py[q].powi(2) + l.pz[q].powi(2)).sqrt();
                    assert!(d as f64 <= l.radius + 1e-5);
                }
            }
            for (q, &n) in named.iter().enumerate() {
                assert_eq!(n as f32, l.real[q], "{b:?} slot {q}: named {n} times");
            }
            // every slot lies within the sphere of each run of slots the kernel takes together
            for w in SPHERE_WIDTHS {
                for v in (0..l.px.len() - l.px.len() % w).step_by(w) {
                    let (c, r) = l.sphere(v, w);
                    for q in v..v + w {
                        let d = [l.px[q] - c[0], l.py[q] - c[1], l.pz[q] - c[2]];
                        let d = (d[0] * d[0] + d[1] * d[1] + d[2] * d[2]).sqrt();
                        assert!(
                            d <= r * (1.0 + 1e-6),
                            "{b:?} slot {q}: {d} A from its sphere of {r}"
                        );
                    }
                }
            }
            let cnt: Vec<f32> = (0..l.px.len()).map(|q| (q % 7 + 1) as f32).collect();
            let want: u64 = (0..l.px.len())
                .filter(|&q| named[q] == 1)
                .map(|q| (q % 7 + 1) as u64)
                .sum();
            assert_eq!(l.count(&cnt), want);
        }
        assert!(seen.iter().all(|&n| n == 1));
    }
}
