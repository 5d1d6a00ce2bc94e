//! The two landscapes of a probe ion evaluated on the periodic grid of the cell.
//!
//! At a point r, with R the distance to an atom image (every periodic image counts):
//!
//! - bond-valence sum `V(r) = sum_X occ * exp((r0 - R) / b)` over anion images with R < cutoff
//!   of their kind; the valence mismatch is `|V(r) - V_A|` (v.u.);
//! - site energy `E(r) = sum_X occ * D0 * [m(R) - m(cutoff)] + sum_M occ * k q_A q_M / R *
//!   erfc(R / rho)` (eV), with `m(R) = (exp((Rmin - R) / b) - 1)^2 - 1` the Morse bond term and
//!   the second sum over cation images with R < `coulomb_cutoff`.
//!
//! **The Morse term is shifted** by its value at the cutoff, `m(cutoff)`, so that every bond
//! energy goes to zero at the cutoff and the landscape is continuous as anions cross it. The shift
//! is a constant per bond (-2.5e-4 eV for Li-O with the Adams 2001 parameters, D0 = 0.3 eV and
//! a 6 A cutoff); it moves no minimum and no saddle, only the zero of energy. The bond-valence sum
//! is not shifted: it is the plain sum the parameter set was fitted with. The screened Coulomb
//! term is not shifted either: `erfc` has already vanished at any sensible cutoff.
//!
//! **Caps.** Near an atom core the values explode; they are stored as `min(value, cap)` with the
//! caps of the model. A point on an atom (R -> 0) is evaluated with R clamped to 1e-6 A, which makes
//! the Coulomb term huge but finite, and then capped: no value is ever inf or NaN (a NaN from a
//! degenerate parameter is stored as the cap too).
//!
//! **Speed.** The grid is cut into blocks of 4 x 4 x 4 points. For each block the atom images
//! within (cutoff + radius of the block's bounding sphere) of its centre are listed once, in
//! Cartesian coordinates, as flat arrays grouped by kind, so that the per-kind constants are
//! hoisted out of the inner loop, which allocates nothing and accumulates in f64. Blocks run in
//! parallel with rayon. The anion loop is branch-free over groups of 8 images (lists padded with
//! empty images), with an inline `exp`, so that it vectorises; on x86-64 processors with AVX2
//! a second copy of the loop compiled for AVX2 (4 doubles per instruction) is chosen at run
//! time (results agree with the baseline copy to rounding). The cation term of a kind is evaluated out to
//! `min(coulomb_cutoff, 6.5 rho)`: beyond 6.5 rho, `erfc < 4e-20` and the dropped tail is many
//! orders of magnitude below the f32 precision of the stored grid. On the grid, `erfc(R/rho)/R`
//! is read from a per-kind table (cubic Hermite interpolation of values and slopes from
//! `libm::erfc`, step rho/256, from R = rho/2 outwards; closer points are evaluated directly):
//! the absolute error of the term is below `5e-10 k q_A q_M / rho` (5e-8 eV for P5+ at
//! rho = 0.7 A), and below `2e-11 k q_A q_M / rho` beyond R = rho, against the 6e-8 relative
//! precision of f32 storage.
//! [`evaluate_point`] calls `libm::erfc` directly. Fields are stored as f32 (4 bytes per point
//! per field).

use super::kernel::{ERFC_NEGLIGIBLE, Fields, compute_simd};
use super::model::{COULOMB_EV_A, FrameworkKind, LandscapeModel};
pub use super::simd::Isa;
use crate::grid::Grid;
use crate::lattice::{Frac, Lattice};
use nalgebra::{Matrix3, Vector3};
use rayon::prelude::*;
use std::time::Instant;

/// Where a long stage reports how far it has got. Called from worker threads, so it must be
/// `Send + Sync`; returning `false` asks the stage to stop (it then returns [`Cancelled`]).
pub trait ProgressSink: Send + Sync {
    /// `done` of `total` units of `stage` finished (`points` grid points in all).
    fn update(&self, stage: &'static str, done: u64, total: u64, points: u64) -> bool;
}

/// How [`compute`] reports its progress: not at all, or to a [`ProgressSink`] (the command line
/// draws a bar; a binding can pass a callback that cancels).
#[derive(Clone, Default)]
pub enum Progress {
    /// No reports.
    #[default]
    Silent,
    Report(std::sync::Arc<dyn ProgressSink>),
}

impl std::fmt::Debug for Progress {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Progress::Silent => write!(f, "Progress::Silent"),
            Progress::Report(_) => write!(f, "Progress::Report(..)"),
        }
    }
}

/// A stage stopped because its progress sink asked it to.
#[derive(Debug, Clone, Copy, PartialEq, Eq, thiserror::Error)]
#[error("stopped on request")]
pub struct Cancelled;

/// What a landscape calculation did.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ComputeStats {
    /// Grid points evaluated.
    pub points: usize,
    /// Atom-image contributions evaluated (pairs of a grid point and an atom image within the
    /// cutoff of its kind).
    pub neighbour_evaluations: u64,
    /// Wall-clock time, seconds.
    pub seconds: f64,
}

/// The two landscapes of a probe ion on one grid.
#[derive(Debug, Clone, PartialEq)]
pub struct Landscape {
    /// Valence mismatch |dV| (v.u.), capped at the model's `mismatch_cap`.
    pub mismatch: Grid,
    /// Site energy (eV), capped at the model's `energy_cap`.
    pub energy: Grid,
    pub stats: ComputeStats,
}

/// Points per block edge.
const BLOCK: usize = 4;
/// Smallest distance used in a formula (A): a point on an atom is evaluated at this distance.
const R_GUARD: f64 = 1e-6;
/// Images are processed in groups of this many (one or two SIMD registers of f64).
const LANES: usize = 8;
/// Position of the empty images that pad a kind's list to whole lanes (A).
const FAR: f64 = 1e6;

/// `exp(y)` without a library call, so that the anion loop vectorises: Cody-Waite reduction
/// `y = n ln2 + t`, |t| <= ln2/2, a degree-12 Taylor polynomial (truncation below 1e-16
/// relative) and the scale 2^n built in the exponent bits. The argument is clamped to
/// [-708, 708]: within it the relative error is a few 1e-16, like the library's.
#[inline(always)]
fn exp_inline(y: f64) -> f64 {
    const LOG2E: f64 = std::f64::consts::LOG2_E;
    const LN2_HI: f64 = 6.931_471_803_691_238e-1;
    const LN2_LO: f64 = 1.908_214_929_270_587_7e-10;
    // Adding 1.5 * 2^52 rounds to an integer and leaves it in the low mantissa bits.
    const SHIFTER: f64 = 6_755_399_441_055_744.0;
    let y = y.clamp(-708.0, 708.0);
    let shifted = y * LOG2E + SHIFTER;
    let n = shifted - SHIFTER;
    let t = (y - n * LN2_HI) - n * LN2_LO;
    let mut p = 1.0 / 479_001_600.0;
    for d in [
        39_916_800.0,
        3_628_800.0,
        362_880.0,
        40_320.0,
        5_040.0,
        720.0,
        120.0,
        24.0,
        6.0,
        2.0,
        1.0,
    ] {
        p = p * t + 1.0 / d;
    }
    p = p * t + 1.0;
    // 2^n: n + 1023 in the exponent field; n is the integer in the low bits of `shifted`.
    let ni = (shifted.to_bits() as i64).wrapping_sub(SHIFTER.to_bits() as i64);
    let scale = f64::from_bits(((ni + 1023) as u64) << 52);
    p * scale
}

/// The constants of one anion kind, resolved for the inner loop.
#[derive(Debug, Clone, Copy)]
struct AnionTerms {
    inv_b: f64,
    rmin: f64,
    cutoff2: f64,
    /// `exp((r0 - Rmin) / b)`, the ideal bond valence: `s = s_eq * x`, `x = exp((Rmin - R)/b)`.
    s_eq: f64,
    d0: f64,
    /// Morse term `x^2 - 2x` at the cutoff, subtracted from each bond.
    morse_at_cutoff: f64,
}

/// The constants of one cation kind, resolved for the inner loop.
#[derive(Debug, Clone)]
struct CationTerms {
    reach2: f64,
    /// `k q_A q_M` (eV A).
    strength: f64,
    reach: f64,
    screened: ScreenedTable,
    /// The nearest images of this kind that take no part (the mobile-ion kind: the origin and
    /// the target of a vacancy hop); 0 for framework cations.
    exclude_nearest: usize,
}

/// Table intervals per screening length.
const TABLE_STEPS_PER_RHO: f64 = 256.0;

/// `g(R) = erfc(R / rho) / R` as cubic polynomials on intervals of rho/256 from R = rho/2 to the
/// reach of the kind, built from exact values and slopes at the interval ends (cubic Hermite).
#[derive(Debug, Clone)]
struct ScreenedTable {
    rho: f64,
    r_lo: f64,
    inv_h: f64,
    /// Per interval, coefficients of `c0 + c1 t + c2 t^2 + c3 t^3` with t in [0, 1).
    coef: Vec<[f64; 4]>,
}

impl ScreenedTable {
    fn new(rho: f64, reach: f64) -> Self {
        let g = |r: f64| libm::erfc(r / rho) / r;
        let dg = |r: f64| {
            let x = r / rho;
            -std::f64::consts::FRAC_2_SQRT_PI * (-x * x).exp() / (rho * r) - g(r) / r
        };
        let h = rho / TABLE_STEPS_PER_RHO;
        let r_lo = 0.5 * rho;
        let n = if reach > r_lo && h.is_finite() && h > 0.0 {
            ((reach - r_lo) / h).ceil() as usize + 1
        } else {
            0
        };
        let coef = (0..n)
            .map(|i| {
                let (a, b) = (r_lo + i as f64 * h, r_lo + (i + 1) as f64 * h);
                let (f0, f1, d0, d1) = (g(a), g(b), dg(a) * h, dg(b) * h);
                [
                    f0,
                    d0,
                    3.0 * (f1 - f0) - 2.0 * d0 - d1,
                    2.0 * (f0 - f1) + d0 + d1,
                ]
            })
            .collect();
        ScreenedTable {
            rho,
            r_lo,
            inv_h: 1.0 / h,
            coef,
        }
    }

    /// `erfc(r / rho) / r` for r > 0 (direct evaluation below rho/2 and past the table).
    #[inline(always)]
    fn eval(&self, r: f64) -> f64 {
        let t = (r - self.r_lo) * self.inv_h;
        if t >= 0.0 {
            let i = t as usize;
            if let Some(c) = self.coef.get(i) {
                let t = t - i as f64;
                return c[0] + t * (c[1] + t * (c[2] + t * c[3]));
            }
        }
        libm::erfc(r / self.rho) / r
    }
}

/// The `k` smallest distances seen so far and the weighted terms that go with them (k <= 4).
#[derive(Debug, Clone, Copy)]
struct Nearest {
    k: usize,
    r: [f64; 4],
    term: [f64; 4],
}

impl Nearest {
    fn new(k: usize) -> Self {
        Nearest {
            k: k.min(4),
            r: [f64::INFINITY; 4],
            term: [0.0; 4],
        }
    }
    #[inline(always)]
    fn offer(&mut self, r: f64, term: f64) {
        if self.k == 0 || r >= self.r[self.k - 1] {
            return;
        }
        let mut i = self.k - 1;
        while i > 0 && self.r[i - 1] > r {
            self.r[i] = self.r[i - 1];
            self.term[i] = self.term[i - 1];
            i -= 1;
        }
        self.r[i] = r;
        self.term[i] = term;
    }
    fn excluded(&self) -> f64 {
        self.term[..self.k].iter().sum()
    }
}

/// Morse bond term `(x - 1)^2 - 1 = x^2 - 2x` with `x = exp((Rmin - R)/b)`.
#[inline(always)]
fn morse_x(x: f64) -> f64 {
    x * (x - 2.0)
}

fn anion_terms(model: &LandscapeModel) -> Vec<AnionTerms> {
    model
        .anions
        .iter()
        .map(|k| {
            let xc = ((k.rmin - k.cutoff) / k.b).exp();
            AnionTerms {
                inv_b: 1.0 / k.b,
                rmin: k.rmin,
                cutoff2: k.cutoff * k.cutoff,
                s_eq: ((k.r0 - k.rmin) / k.b).exp(),
                d0: k.d0,
                morse_at_cutoff: morse_x(xc),
            }
        })
        .collect()
}

/// The cation kinds of the model, then the mobile-ion kind when there is one (its index is
/// `model.cations.len()`).
fn repelling_kinds(model: &LandscapeModel) -> impl Iterator<Item = &super::model::CationKind> {
    model
        .cations
        .iter()
        .chain(model.mobile.as_ref().map(|m| &m.kind))
}

/// Every repelling charge of the cell as (kind index, fractional position, occupancy), in the
/// kind order of [`repelling_kinds`].
fn repelling_charges(model: &LandscapeModel) -> Vec<(usize, Frac, f64)> {
    let mut out: Vec<(usize, Frac, f64)> = model
        .atoms
        .iter()
        .filter_map(|a| match a.kind {
            FrameworkKind::Cation(i) => Some((i, a.frac, a.occupancy)),
            FrameworkKind::Anion(_) => None,
        })
        .collect();
    if let Some(m) = &model.mobile {
        out.extend(m.sites.iter().map(|&(f, o)| (model.cations.len(), f, o)));
    }
    out
}

fn cation_terms(model: &LandscapeModel) -> Vec<CationTerms> {
    let mobile_index = model.mobile.as_ref().map(|_| model.cations.len());
    let excluded = model.mobile.as_ref().map_or(0, |m| m.excluded_nearest);
    repelling_kinds(model)
        .enumerate()
        .map(|(i, k)| {
            let reach = model.coulomb_cutoff.min(ERFC_NEGLIGIBLE * k.rho).max(0.0);
            CationTerms {
                reach2: reach * reach,
                strength: COULOMB_EV_A * model.probe.charge * k.charge,
                reach,
                screened: ScreenedTable::new(k.rho, reach),
                exclude_nearest: if Some(i) == mobile_index { excluded } else { 0 },
            }
        })
        .collect()
}

/// Caps a value, mapping NaN and +inf to the cap.
#[inline]
fn capped(v: f64, cap: f64) -> f64 {
    if v < cap { v } else { cap }
}

/// Lattice translations to try on each axis so that every image within `reach` (A) of any point
/// of the cell, of an atom inside the cell, is found.
fn translation_range(lattice: &Lattice, reach: f64) -> [i32; 3] {
    let w = lattice.perpendicular_widths();
    [0, 1, 2].map(|i| (reach / w[i]).ceil() as i32 + 1)
}

/// Framework atom images in Cartesian coordinates, flat arrays grouped by kind: the images of
/// kind `k` are `start[k]..start[k + 1]`.
#[derive(Debug, Default, Clone)]
struct Images {
    x: Vec<f64>,
    y: Vec<f64>,
    z: Vec<f64>,
    occ: Vec<f64>,
    start: Vec<usize>,
}

impl Images {
    fn clear(&mut self) {
        self.x.clear();
        self.y.clear();
        self.z.clear();
        self.occ.clear();
        self.start.clear();
    }
    fn push(&mut self, p: [f64; 3], occ: f64) {
        self.x.push(p[0]);
        self.y.push(p[1]);
        self.z.push(p[2]);
        self.occ.push(occ);
    }
    fn len(&self) -> usize {
        self.x.len()
    }
    /// Keeps the images of `all` within `reach[kind]` of `centre`, kind by kind.
    fn fill_near(&mut self, all: &Images, centre: [f64; 3], reach: &[f64]) {
        self.clear();
        for (k, &r) in reach.iter().enumerate() {
            self.start.push(self.len());
            let r2 = r * r;
            for j in all.start[k]..all.start[k + 1] {
                let (dx, dy, dz) = (
                    all.x[j] - centre[0],
                    all.y[j] - centre[1],
                    all.z[j] - centre[2],
                );
                if dx * dx + dy * dy + dz * dz <= r2 {
                    self.push([all.x[j], all.y[j], all.z[j]], all.occ[j]);
                }
            }
            // Pad the kind to whole lanes with empty images far away (occupancy 0).
            while !(self.len() - self.start[k]).is_multiple_of(LANES) {
                self.push([FAR; 3], 0.0);
            }
        }
        self.start.push(self.len());
    }
}

/// All images of the framework anions (`anion`), or of the repelling charges (framework cations,
/// then the mobile ions), of each kind that can lie within `reach[kind] + margin` of a point of
/// the cell.
fn cell_images(model: &LandscapeModel, anion: bool, reach: &[f64], margin: f64) -> Images {
    let m = model.lattice.matrix();
    let centre = m * Vector3::new(0.5, 0.5, 0.5);
    let circum = corners()
        .iter()
        .map(|c| (m * c - centre).norm())
        .fold(0.0, f64::max);
    let charges: Vec<(usize, Frac, f64)> = if anion {
        model
            .atoms
            .iter()
            .filter_map(|a| match a.kind {
                FrameworkKind::Anion(i) => Some((i, a.frac, a.occupancy)),
                FrameworkKind::Cation(_) => None,
            })
            .collect()
    } else {
        repelling_charges(model)
    };
    let mut out = Images::default();
    for (k, &r) in reach.iter().enumerate() {
        out.start.push(out.len());
        let reach_k = r + margin;
        let n = translation_range(&model.lattice, reach_k);
        let keep2 = (reach_k + circum) * (reach_k + circum);
        for &(kind, frac, occupancy) in &charges {
            if kind != k {
                continue;
            }
            let f = frac.wrapped().0;
            for ta in -n[0]..=n[0] {
                for tb in -n[1]..=n[1] {
                    for tc in -n[2]..=n[2] {
                        let c = m * (f + Vector3::new(ta as f64, tb as f64, tc as f64));
                        if (c - centre).norm_squared() <= keep2 {
                            out.push([c.x, c.y, c.z], occupancy);
                        }
                    }
                }
            }
        }
    }
    out.start.push(out.len());
    out
}

fn corners() -> [Vector3<f64>; 8] {
    let mut c = [Vector3::zeros(); 8];
    for (n, v) in c.iter_mut().enumerate() {
        *v = Vector3::new((n & 1) as f64, ((n >> 1) & 1) as f64, ((n >> 2) & 1) as f64);
    }
    c
}

/// Values at one point from the neighbour lists of its block: (bond-valence sum, energy,
/// contributions evaluated). Energy is uncapped.
#[inline(always)]
fn point_sums(
    p: [f64; 3],
    an: &Images,
    at: &[AnionTerms],
    ca: &Images,
    ct: &[CationTerms],
) -> (f64, f64, u64) {
    let g2 = R_GUARD * R_GUARD;
    let mut bvs = 0.0;
    let mut energy = 0.0;
    let mut count = 0u64;
    for (k, t) in at.iter().enumerate() {
        let (lo, hi) = (an.start[k], an.start[k + 1]);
        let (xs, ys, zs, os) = (&an.x[lo..hi], &an.y[lo..hi], &an.z[lo..hi], &an.occ[lo..hi]);
        // Branch-free over whole lanes (lists are padded): images beyond the cutoff get weight 0.
        let (mut s, mut e, mut c) = ([0.0; LANES], [0.0; LANES], [0.0; LANES]);
        let (xs, ys, zs, os) = (
            xs.as_chunks::<LANES>().0,
            ys.as_chunks::<LANES>().0,
            zs.as_chunks::<LANES>().0,
            os.as_chunks::<LANES>().0,
        );
        for q in 0..xs.len() {
            let (xc, yc, zc, oc) = (&xs[q], &ys[q], &zs[q], &os[q]);
            let mut y = [0.0; LANES];
            let mut w = [0.0; LANES];
            for l in 0..LANES {
                let (dx, dy, dz) = (p[0] - xc[l], p[1] - yc[l], p[2] - zc[l]);
                let d2 = dx * dx + dy * dy + dz * dz;
                let inside = d2 < t.cutoff2;
                y[l] = (t.rmin - d2.max(g2).sqrt()) * t.inv_b;
                w[l] = if inside { oc[l] } else { 0.0 };
                c[l] += if inside { 1.0 } else { 0.0 };
            }
            for l in 0..LANES {
                let x = exp_inline(y[l]);
                s[l] += w[l] * x;
                e[l] += w[l] * (morse_x(x) - t.morse_at_cutoff);
            }
        }
        bvs += t.s_eq * s.iter().sum::<f64>();
        energy += t.d0 * e.iter().sum::<f64>();
        count += c.iter().sum::<f64>() as u64;
    }
    for (k, t) in ct.iter().enumerate() {
        let (lo, hi) = (ca.start[k], ca.start[k + 1]);
        let (xs, ys, zs, os) = (&ca.x[lo..hi], &ca.y[lo..hi], &ca.z[lo..hi], &ca.occ[lo..hi]);
        let mut e = 0.0;
        if t.exclude_nearest == 0 {
            for j in 0..xs.len() {
                let (dx, dy, dz) = (p[0] - xs[j], p[1] - ys[j], p[2] - zs[j]);
                let d2 = dx * dx + dy * dy + dz * dz;
                if d2 < t.reach2 {
                    let r = d2.max(g2).sqrt();
                    e += os[j] * t.screened.eval(r);
                    count += 1;
                }
            }
        } else {
            let mut near = Nearest::new(t.exclude_nearest);
            for j in 0..xs.len() {
                let (dx, dy, dz) = (p[0] - xs[j], p[1] - ys[j], p[2] - zs[j]);
                let d2 = dx * dx + dy * dy + dz * dz;
                if d2 < t.reach2 {
                    let r = d2.max(g2).sqrt();
                    let term = os[j] * t.screened.eval(r);
                    e += term;
                    near.offer(r, term);
                    count += 1;
                }
            }
            e -= near.excluded();
        }
        energy += t.strength * e;
    }
    (bvs, energy, count)
}

/// Everything the evaluation of a block needs besides its neighbour lists.
struct Kernel<'a> {
    m: Matrix3<f64>,
    inv_dims: [f64; 3],
    anions: &'a [AnionTerms],
    cations: &'a [CationTerms],
    valence: f64,
    energy_cap: f64,
    mismatch_cap: f64,
}

/// Which instruction set the f64 block loop is compiled for, detected once per run.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Simd {
    Baseline,
    #[cfg(target_arch = "x86_64")]
    Avx2Fma,
}

impl Simd {
    fn detect() -> Simd {
        #[cfg(target_arch = "x86_64")]
        if std::is_x86_feature_detected!("avx2") && std::is_x86_feature_detected!("fma") {
            return Simd::Avx2Fma;
        }
        Simd::Baseline
    }
}

impl Kernel<'_> {
    /// Evaluates the points of block `b` (a, then b, then c order) into `dv` and `en`; returns
    /// the contributions evaluated.
    #[inline(always)]
    fn block(&self, b: &Block, lists: &Scratch, dv: &mut Vec<f32>, en: &mut Vec<f32>) -> u64 {
        let mut count = 0u64;
        for i in b.lo[0]..b.hi[0] {
            for j in b.lo[1]..b.hi[1] {
                for k in b.lo[2]..b.hi[2] {
                    let p = point_cart(&self.m, self.inv_dims, [i, j, k]);
                    let (bvs, e, c) = point_sums(
                        [p.x, p.y, p.z],
                        &lists.anions,
                        self.anions,
                        &lists.cations,
                        self.cations,
                    );
                    dv.push(capped((bvs - self.valence).abs(), self.mismatch_cap) as f32);
                    en.push(capped(e, self.energy_cap) as f32);
                    count += c;
                }
            }
        }
        count
    }

    /// The same loop compiled with AVX2 and FMA, so that the anion lanes run four at a time.
    #[cfg(target_arch = "x86_64")]
    #[target_feature(enable = "avx2,fma")]
    fn block_avx2(&self, b: &Block, lists: &Scratch, dv: &mut Vec<f32>, en: &mut Vec<f32>) -> u64 {
        self.block(b, lists, dv, en)
    }

    fn block_with(
        &self,
        simd: Simd,
        b: &Block,
        lists: &Scratch,
        dv: &mut Vec<f32>,
        en: &mut Vec<f32>,
    ) -> u64 {
        match simd {
            Simd::Baseline => self.block(b, lists, dv, en),
            // SAFETY: only chosen when the processor reports AVX2 and FMA.
            #[cfg(target_arch = "x86_64")]
            Simd::Avx2Fma => unsafe { self.block_avx2(b, lists, dv, en) },
        }
    }
}

/// One block of grid points: the index ranges along a, b, c (shared with the SIMD kernel).
#[derive(Debug, Clone, Copy)]
pub(super) struct Block {
    pub(super) lo: [usize; 3],
    pub(super) hi: [usize; 3],
}

/// The grid cut into blocks of `size` points along each axis (smaller at the far faces).
pub(super) fn blocks(dims: [usize; 3], size: usize) -> Vec<Block> {
    let nb = dims.map(|n| n.div_ceil(size));
    let mut out = Vec::with_capacity(nb[0] * nb[1] * nb[2]);
    for bi in 0..nb[0] {
        for bj in 0..nb[1] {
            for bk in 0..nb[2] {
                let lo = [bi * size, bj * size, bk * size];
                let hi = [0, 1, 2].map(|a| (lo[a] + size).min(dims[a]));
                out.push(Block { lo, hi });
            }
        }
    }
    out
}

/// Cartesian position of grid point (i, j, k).
#[inline]
pub(super) fn point_cart(m: &Matrix3<f64>, inv_dims: [f64; 3], ijk: [usize; 3]) -> Vector3<f64> {
    m * Vector3::new(
        ijk[0] as f64 * inv_dims[0],
        ijk[1] as f64 * inv_dims[1],
        ijk[2] as f64 * inv_dims[2],
    )
}

/// Centre and bounding-sphere radius of a block (A).
pub(super) fn block_sphere(m: &Matrix3<f64>, inv_dims: [f64; 3], b: &Block) -> ([f64; 3], f64) {
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

/// Per-thread scratch: the neighbour lists of the current block.
#[derive(Default)]
struct Scratch {
    anions: Images,
    cations: Images,
}

/// Computes both landscapes on a grid of `dims` points (point (i, j, k) at fractional
/// (i/na, j/nb, k/nc)), in parallel on the current rayon thread pool.
///
/// Panics if a dimension is zero, or if an atom refers to a kind the model does not have (both
/// are programming errors: dimensions come from [`Grid::dims_for_spacing`], kinds from the model
/// builder).
pub fn compute(
    model: &LandscapeModel,
    dims: [usize; 3],
    progress: &Progress,
) -> Result<Landscape, Cancelled> {
    // The f32 vector kernel on the best instruction set of the processor. It computes each
    // point relative to its block, so symmetry-equivalent points may differ by a few units in
    // the last place (within 1e-5 relative of the f64 reference, tested); the stages after the
    // grid do not rely on exact ties (the channel profiles open voxels within
    // `profile::TIE_TOLERANCE` of the bottleneck).
    compute_with_isa(model, dims, progress, Isa::detect())
}

/// [`compute`] with the kernel compiled for a given instruction set (one of
/// [`Isa::available`]; tests compare them).
pub fn compute_with_isa(
    model: &LandscapeModel,
    dims: [usize; 3],
    progress: &Progress,
    isa: Isa,
) -> Result<Landscape, Cancelled> {
    assert!(
        dims.iter().all(|&n| n > 0),
        "grid dimensions must be positive"
    );
    check_kinds(model);
    let (mismatch, energy, stats) = compute_simd(model, dims, progress, isa, Fields::Both)?;
    let energy = energy.expect("both fields were asked for");
    Ok(Landscape {
        mismatch,
        energy,
        stats,
    })
}

/// The valence-mismatch field alone (v.u.), with the same kernel: the bond-valence sums without
/// the Morse and Coulomb terms (for comparisons with other programs that compute only this
/// field). Returns the grid and the statistics.
pub fn compute_mismatch(
    model: &LandscapeModel,
    dims: [usize; 3],
    progress: &Progress,
) -> Result<(Grid, ComputeStats), Cancelled> {
    assert!(
        dims.iter().all(|&n| n > 0),
        "grid dimensions must be positive"
    );
    check_kinds(model);
    let (mismatch, _, stats) =
        compute_simd(model, dims, progress, Isa::detect(), Fields::MismatchOnly)?;
    Ok((mismatch, stats))
}

/// Both landscapes evaluated in f64 by a loop per point over blocks, rounded to f32 (what
/// [`compute`] uses, and the reference the f32 kernel is tested against).
pub fn compute_f64(
    model: &LandscapeModel,
    dims: [usize; 3],
    progress: &Progress,
) -> Result<Landscape, Cancelled> {
    let started = Instant::now();
    assert!(
        dims.iter().all(|&n| n > 0),
        "grid dimensions must be positive"
    );
    check_kinds(model);
    let simd = Simd::detect();
    let m = *model.lattice.matrix();
    let inv_dims = dims.map(|n| 1.0 / n as f64);
    let at = anion_terms(model);
    let ct = cation_terms(model);
    let anion_reach: Vec<f64> = model.anions.iter().map(|k| k.cutoff.max(0.0)).collect();
    let cation_reach: Vec<f64> = ct.iter().map(|t| t.reach).collect();

    let blocks = blocks(dims, BLOCK);
    // The largest bounding-sphere radius of a block, so that one cell-wide list covers them all.
    let margin = blocks
        .iter()
        .map(|b| block_sphere(&m, inv_dims, b).1)
        .fold(0.0, f64::max);
    let all_anions = cell_images(model, true, &anion_reach, margin);
    let all_cations = cell_images(model, false, &cation_reach, margin);

    let points = dims[0] * dims[1] * dims[2];
    let sink = match progress {
        Progress::Report(s) => Some(s.as_ref()),
        Progress::Silent => None,
    };
    let done = std::sync::atomic::AtomicU64::new(0);
    let stop = std::sync::atomic::AtomicBool::new(false);
    let total = blocks.len() as u64;

    let kernel = Kernel {
        m,
        inv_dims,
        anions: &at,
        cations: &ct,
        valence: model.probe.valence,
        energy_cap: model.energy_cap,
        mismatch_cap: model.mismatch_cap,
    };
    let results: Vec<(Vec<f32>, Vec<f32>, u64)> = blocks
        .par_iter()
        .map_init(Scratch::default, |scratch, b| {
            if stop.load(std::sync::atomic::Ordering::Relaxed) {
                return (Vec::new(), Vec::new(), 0);
            }
            let (centre, radius) = block_sphere(&m, inv_dims, b);
            let an_reach: Vec<f64> = anion_reach.iter().map(|r| r + radius).collect();
            let ca_reach: Vec<f64> = cation_reach.iter().map(|r| r + radius).collect();
            scratch.anions.fill_near(&all_anions, centre, &an_reach);
            scratch.cations.fill_near(&all_cations, centre, &ca_reach);
            let n = (b.hi[0] - b.lo[0]) * (b.hi[1] - b.lo[1]) * (b.hi[2] - b.lo[2]);
            let mut dv = Vec::with_capacity(n);
            let mut en = Vec::with_capacity(n);
            let count = kernel.block_with(simd, b, scratch, &mut dv, &mut en);
            if let Some(sink) = sink {
                let k = done.fetch_add(1, std::sync::atomic::Ordering::Relaxed) + 1;
                if !sink.update("landscape grid", k, total, points as u64) {
                    stop.store(true, std::sync::atomic::Ordering::Relaxed);
                }
            }
            (dv, en, count)
        })
        .collect();
    if stop.load(std::sync::atomic::Ordering::Relaxed) {
        return Err(Cancelled);
    }

    let mut mismatch = Grid::new(model.lattice.clone(), dims, 0.0);
    let mut energy = Grid::new(model.lattice.clone(), dims, 0.0);
    let mut evaluations = 0u64;
    for (b, (dv, en, c)) in blocks.iter().zip(results) {
        evaluations += c;
        let mut n = 0;
        for i in b.lo[0]..b.hi[0] {
            for j in b.lo[1]..b.hi[1] {
                for k in b.lo[2]..b.hi[2] {
                    let idx = mismatch.index(i, j, k);
                    mismatch.values[idx] = dv[n];
                    energy.values[idx] = en[n];
                    n += 1;
                }
            }
        }
    }
    Ok(Landscape {
        mismatch,
        energy,
        stats: ComputeStats {
            points,
            neighbour_evaluations: evaluations,
            seconds: started.elapsed().as_secs_f64(),
        },
    })
}

fn check_kinds(model: &LandscapeModel) {
    for a in &model.atoms {
        let ok = match a.kind {
            FrameworkKind::Anion(i) => i < model.anions.len(),
            FrameworkKind::Cation(i) => i < model.cations.len(),
        };
        assert!(
            ok,
            "framework atom '{}' refers to a kind the model does not have",
            a.label
        );
    }
}

/// Both landscape values at one fractional position: (valence mismatch |dV| in v.u., site energy
/// in eV), capped like the grid. A plain loop over every atom and every periodic image within the
/// cutoffs of the model (the full `coulomb_cutoff`), written straight from the formulas; used by
/// tests and to read values at sites off the grid.
pub fn evaluate_point(model: &LandscapeModel, frac: Frac) -> (f64, f64) {
    check_kinds(model);
    let m = model.lattice.matrix();
    let p = m * frac.wrapped().0;
    let mut bvs = 0.0;
    let mut energy = 0.0;
    let kinds: Vec<_> = repelling_kinds(model).collect();
    let mut near = Nearest::new(model.mobile.as_ref().map_or(0, |m| m.excluded_nearest));
    let anions = model.atoms.iter().filter_map(|a| match a.kind {
        FrameworkKind::Anion(i) => Some((true, i, a.frac, a.occupancy)),
        FrameworkKind::Cation(_) => None,
    });
    let charges = repelling_charges(model)
        .into_iter()
        .map(|(i, f, o)| (false, i, f, o));
    for (is_anion, i, frac, occupancy) in anions.chain(charges) {
        let cutoff = if is_anion {
            model.anions[i].cutoff
        } else {
            model.coulomb_cutoff
        };
        let n = translation_range(&model.lattice, cutoff.max(0.0));
        let f = frac.wrapped().0;
        for ta in -n[0]..=n[0] {
            for tb in -n[1]..=n[1] {
                for tc in -n[2]..=n[2] {
                    let image = m * (f + Vector3::new(ta as f64, tb as f64, tc as f64));
                    let r = (image - p).norm();
                    if r >= cutoff {
                        continue;
                    }
                    let r = r.max(R_GUARD);
                    if is_anion {
                        let k = &model.anions[i];
                        bvs += occupancy * ((k.r0 - r) / k.b).exp();
                        let morse = |r: f64| (((k.rmin - r) / k.b).exp() - 1.0).powi(2) - 1.0;
                        energy += occupancy * k.d0 * (morse(r) - morse(k.cutoff));
                    } else {
                        let k = kinds[i];
                        let term = occupancy
                            * COULOMB_EV_A
                            * model.probe.charge
                            * k.charge
                            * libm::erfc(r / k.rho)
                            / r;
                        energy += term;
                        if i == model.cations.len() {
                            near.offer(r, term);
                        }
                    }
                }
            }
        }
    }
    energy -= near.excluded();
    (
        capped((bvs - model.probe.valence).abs(), model.mismatch_cap),
        capped(energy, model.energy_cap),
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The f64 loop against the plain single-point evaluation (the formulas written straight,
    /// libm's exp and erfc) at every point of a triclinic cell with mixed sites, the clamped
    /// exponential and excluded mobile neighbours. The f32 kernel on every instruction set is
    /// checked against both in `kernel::tests`.
    #[test]
    fn the_f64_loop_gives_the_single_point_sums() {
        let model = super::super::fixtures::mixed_model();
        let base = compute_f64(&model, [9, 11, 13], &Progress::Silent).unwrap();
        for idx in 0..base.energy.values.len() {
            let (dv, e) = evaluate_point(&model, base.energy.frac(base.energy.ijk(idx)));
            let (ge, gv) = (
                base.energy.values[idx] as f64,
                base.mismatch.values[idx] as f64,
            );
            assert!(
                (ge - e).abs() <= 1e-6 * e.abs().max(1e-3),
                "{idx}: {ge} vs {e} eV"
            );
            assert!(
                (gv - dv).abs() <= 1e-6 * dv.abs().max(1e-3),
                "{idx}: {gv} vs {dv} v.u."
            );
        }
    }

    #[test]
    fn inline_exp_matches_the_library_exp() {
        let mut worst: f64 = 0.0;
        for n in -200_000..=200_000 {
            let y = n as f64 * 1e-4 * 7.0; // -140 .. 140
            let rel = (exp_inline(y) - y.exp()).abs() / y.exp();
            worst = worst.max(rel);
        }
        assert!(worst < 1e-15, "worst relative error {worst:e}");
        assert_eq!(exp_inline(0.0), 1.0);
        assert!(exp_inline(-1e6) >= 0.0 && exp_inline(-1e6) < 1e-300);
        assert!(exp_inline(1e6).is_finite());
    }

    #[test]
    fn screened_coulomb_table_follows_libm_erfc() {
        for rho in [0.6, 1.155, 2.3] {
            let reach = 6.5 * rho;
            let table = ScreenedTable::new(rho, reach);
            let mut worst: f64 = 0.0;
            for n in 1..200_000 {
                let r = reach * n as f64 / 200_000.0;
                let exact = libm::erfc(r / rho) / r;
                worst = worst.max((table.eval(r) - exact).abs() * rho);
            }
            // Absolute error in units of 1/rho, the scale of the term at contact.
            eprintln!("rho = {rho}: worst error {worst:e} / rho");
            assert!(worst < 5e-10, "rho = {rho}: worst error {worst:e} / rho");
        }
    }
}
