//! What a blocked channel costs: immobile defects on the ion's sites, and the share of the
//! sites still reachable from the surface of a particle.
//!
//! Model. A fraction `p` of the sites of a channel family, drawn at random, hold an immobile
//! defect (an antisite cation, say) that no ion can pass or take. A spherical particle of
//! diameter `L` is cut from the crystal (centred at a random point); ions enter at its surface
//! sites (sites inside with a hop of the family to a site outside) and move along the family's
//! hops. The accessible share is the number of defect-free sites connected to a defect-free
//! surface site, over the number of defect-free sites: the share of the capacity the particle
//! can use.
//!
//! A one-dimensional channel of `N` sites open at both ends loses every site that has a defect
//! on both sides. With `q = 1 - p`, site `i` (1..N) is reachable when the `i` sites up to it,
//! or the `N - i + 1` sites from it to the other end, are all free, so the expected number of
//! reachable sites is exactly
//!
//! `A(N, p) = sum_i (q^i + q^(N-i+1) - q^N) = 2 q (1 - q^N) / p - N q^N`
//!
//! ([`chain_accessible_fraction`] returns `A / N`; the capacity share is `A / (N q)`). For
//! `N p >> 1` the share falls as `2 / (N p)`: a 1D host needs particles a few `1 / p` sites
//! long. Channels cross-linked into 2D or 3D networks route around a defect, so their share stays
//! near the fraction of sites in the infinite cluster of site percolation, close to 1 for small
//! `p`, whatever the size of the particle.

use crate::kmc::{Estimate, HopNetwork, stream_seed};
use crate::lattice::Frac;
use nalgebra::Vector3;
use rand_xoshiro::Xoshiro256PlusPlus;
use rand_xoshiro::rand_core::{RngCore, SeedableRng};
use rayon::prelude::*;

/// The default share of the capacity a particle must keep accessible.
pub const DEFAULT_SHARE: f64 = 0.9;

/// Default defect fractions of the tables.
pub const DEFAULT_DEFECT_FRACTIONS: [f64; 5] = [0.001, 0.003, 0.01, 0.03, 0.1];

/// Largest particle simulated site by site, A (60 nm): beyond this the 1D law is used for 1D
/// families and 2D/3D families are reported as "no limit found up to" this size.
pub const MAX_SIMULATED_DIAMETER_A: f64 = 600.0;

/// Expected reachable fraction of the `n` sites of a straight channel open at both ends, each
/// site holding a defect with probability `p` (exact, see the module notes). Defect sites count
/// as not reachable.
pub fn chain_accessible_fraction(n: usize, p: f64) -> f64 {
    if n == 0 {
        return 0.0;
    }
    let q = 1.0 - p;
    let nf = n as f64;
    if p <= 0.0 {
        return 1.0;
    }
    let qn = q.powf(nf);
    (2.0 * q * (1.0 - qn) / p - nf * qn) / nf
}

/// The capacity share of such a channel: reachable sites over defect-free sites.
pub fn chain_capacity_share(n: usize, p: f64) -> f64 {
    if p >= 1.0 {
        return 0.0;
    }
    chain_accessible_fraction(n, p) / (1.0 - p)
}

/// The longest straight channel (sites) that keeps `share` of its capacity at defect fraction
/// `p`; None when every length does (p = 0).
pub fn longest_chain(p: f64, share: f64) -> Option<usize> {
    if p <= 0.0 {
        return None;
    }
    // the share falls with n; double then bisect
    let mut hi = 1usize;
    while chain_capacity_share(hi, p) >= share {
        hi *= 2;
        if hi > 1 << 40 {
            return None;
        }
    }
    let mut lo = hi / 2;
    while hi - lo > 1 {
        let mid = (lo + hi) / 2;
        if chain_capacity_share(mid, p) >= share {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    Some(lo)
}

/// Expected capacity share of a sphere of diameter `diameter_a` crossed by parallel straight
/// channels with sites `spacing_a` apart (the 1D law averaged over the chords of the sphere,
/// weighted by their sites).
pub fn sphere_chain_share(diameter_a: f64, spacing_a: f64, p: f64) -> f64 {
    let r = diameter_a / 2.0;
    let steps = 400;
    let (mut reach, mut total) = (0.0, 0.0);
    for i in 0..steps {
        // channels uniform over the cross-section: rho^2 uniform
        let u = (i as f64 + 0.5) / steps as f64;
        let rho = r * u.sqrt();
        let chord = 2.0 * (r * r - rho * rho).max(0.0).sqrt();
        let n = (chord / spacing_a).floor().max(1.0) as usize;
        reach += chain_accessible_fraction(n, p) * n as f64;
        total += n as f64 * (1.0 - p);
    }
    reach / total
}

/// One sampled particle.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ParticleSample {
    /// Sites inside the particle.
    pub sites: usize,
    pub defects: usize,
    /// Defect-free sites reachable from a defect-free surface site.
    pub reachable: usize,
}

impl ParticleSample {
    /// Reachable over defect-free sites.
    pub fn share(&self) -> f64 {
        let free = self.sites - self.defects;
        if free == 0 {
            0.0
        } else {
            self.reachable as f64 / free as f64
        }
    }
}

fn uniform(rng: &mut Xoshiro256PlusPlus) -> f64 {
    (rng.next_u64() >> 11) as f64 * (1.0 / (1u64 << 53) as f64)
}

/// Cuts one spherical particle of diameter `diameter_a` (A) from the periodic network `net`
/// (centre drawn at random in the cell), puts a defect on each site with probability `p`, and
/// counts the sites reachable from the surface along the hops of `net`.
pub fn sample_particle(net: &HopNetwork, diameter_a: f64, p: f64, seed: u64) -> ParticleSample {
    let mut rng = Xoshiro256PlusPlus::seed_from_u64(seed);
    let centre = Vector3::new(uniform(&mut rng), uniform(&mut rng), uniform(&mut rng));
    sample_particle_at(net, diameter_a, Frac(centre), p, &mut rng)
}

/// [`sample_particle`] with the centre of the particle given (fractional coordinates).
pub fn sample_particle_at(
    net: &HopNetwork,
    diameter_a: f64,
    centre: Frac,
    p: f64,
    rng: &mut Xoshiro256PlusPlus,
) -> ParticleSample {
    let ns = net.sites.len();
    let empty = ParticleSample {
        sites: 0,
        defects: 0,
        reachable: 0,
    };
    if ns == 0 || diameter_a.is_nan() || diameter_a <= 0.0 {
        return empty;
    }
    let lat = &net.lattice;
    let r = diameter_a / 2.0;
    let centre = lat.matrix() * centre.0;
    let widths = lat.perpendicular_widths();
    // cells -m..=m on each axis cover the sphere
    let m: [i64; 3] = [0, 1, 2].map(|k| (r / widths[k]).ceil() as i64 + 1);
    let dims = m.map(|x| (2 * x + 1) as usize);
    let cells = dims[0] * dims[1] * dims[2];
    const OUT: u32 = u32::MAX;
    let mut index = vec![OUT; cells * ns];
    let mut inside = 0usize;
    let pos = |c: [i64; 3], s: usize| -> Vector3<f64> {
        lat.matrix() * (net.sites[s].frac.0 + Vector3::new(c[0] as f64, c[1] as f64, c[2] as f64))
    };
    let flat = |c: [i64; 3], s: usize| -> Option<usize> {
        let mut id = 0usize;
        for k in 0..3 {
            let v = c[k] + m[k];
            if v < 0 || v >= dims[k] as i64 {
                return None;
            }
            id = id * dims[k] + v as usize;
        }
        Some(id * ns + s)
    };
    let mut cell_of = Vec::new();
    for i in -m[0]..=m[0] {
        for j in -m[1]..=m[1] {
            for k in -m[2]..=m[2] {
                for s in 0..ns {
                    let c = [i, j, k];
                    if (pos(c, s) - centre).norm() <= r {
                        let id = flat(c, s).expect("inside the box");
                        index[id] = inside as u32;
                        cell_of.push((c, s));
                        inside += 1;
                    }
                }
            }
        }
    }
    if inside == 0 {
        return empty;
    }
    // adjacency of the sites inside, and which touch the outside
    let mut out_hops: Vec<Vec<(usize, [i32; 3])>> = vec![Vec::new(); ns];
    for h in &net.hops {
        out_hops[h.from].push((h.to, h.image));
        out_hops[h.to].push((h.from, h.image.map(|x| -x)));
    }
    let defect: Vec<bool> = (0..inside).map(|_| uniform(rng) < p).collect();
    let mut surface = vec![false; inside];
    let mut adj_start = vec![0usize];
    let mut adj = Vec::new();
    for &(c, s) in &cell_of {
        let me = index[flat(c, s).expect("inside")] as usize;
        for &(t, im) in &out_hops[s] {
            let tc = [
                c[0] + im[0] as i64,
                c[1] + im[1] as i64,
                c[2] + im[2] as i64,
            ];
            match flat(tc, t).map(|id| index[id]) {
                Some(other) if other != OUT => adj.push(other as usize),
                _ => surface[me] = true,
            }
        }
        adj_start.push(adj.len());
    }
    // breadth-first search from the free surface sites over free sites
    let mut seen = vec![false; inside];
    let mut queue: Vec<usize> = (0..inside).filter(|&i| surface[i] && !defect[i]).collect();
    for &i in &queue {
        seen[i] = true;
    }
    let mut head = 0;
    while head < queue.len() {
        let i = queue[head];
        head += 1;
        for &j in &adj[adj_start[i]..adj_start[i + 1]] {
            if !seen[j] && !defect[j] {
                seen[j] = true;
                queue.push(j);
            }
        }
    }
    ParticleSample {
        sites: inside,
        defects: defect.iter().filter(|&&d| d).count(),
        reachable: queue.len(),
    }
}

/// The capacity share of particles of one size (reachable over defect-free sites, pooled over
/// particles, with the standard error of a ratio estimate), sampled until at least `min_sites`
/// sites (and at least 4 particles) have been seen; samples in parallel.
pub fn particle_share(
    net: &HopNetwork,
    diameter_a: f64,
    p: f64,
    min_sites: usize,
    seed: u64,
) -> Estimate {
    let first = sample_particle(net, diameter_a, p, stream_seed(seed, 0));
    let per = first.sites.max(1);
    let count = (min_sites.div_ceil(per)).clamp(4, 256);
    let samples: Vec<ParticleSample> = std::iter::once(first)
        .chain(
            (1..count)
                .into_par_iter()
                .map(|i| sample_particle(net, diameter_a, p, stream_seed(seed, i as u64)))
                .collect::<Vec<_>>(),
        )
        .collect();
    let n = samples.len() as f64;
    let free: Vec<f64> = samples
        .iter()
        .map(|s| (s.sites - s.defects) as f64)
        .collect();
    let reach: Vec<f64> = samples.iter().map(|s| s.reachable as f64).collect();
    let total_free: f64 = free.iter().sum();
    if total_free <= 0.0 {
        return Estimate {
            mean: f64::NAN,
            stderr: f64::NAN,
        };
    }
    let ratio = reach.iter().sum::<f64>() / total_free;
    let mean_free = total_free / n;
    let var = reach
        .iter()
        .zip(&free)
        .map(|(r, f)| (r - ratio * f).powi(2))
        .sum::<f64>()
        / (n - 1.0).max(1.0);
    Estimate {
        mean: ratio,
        stderr: (var / n).sqrt() / mean_free,
    }
}

/// The largest particle of a family at one defect fraction.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum ParticleLimit {
    /// Particles up to this diameter (A) keep the share.
    Diameter(f64),
    /// Even the smallest particle simulated (this diameter, A) keeps less.
    Below(f64),
    /// Every simulated particle up to this diameter (A) keeps the share.
    NoLimitUpTo(f64),
}

/// The largest spherical particle (A) whose mean capacity share is at least `share` at defect
/// fraction `p`, by bisection on the diameter between one cell and `max_diameter_a`.
pub fn largest_particle(
    net: &HopNetwork,
    p: f64,
    share: f64,
    max_diameter_a: f64,
    seed: u64,
) -> ParticleLimit {
    let min_sites = 20_000;
    let ok =
        |d: f64, k: u64| particle_share(net, d, p, min_sites, stream_seed(seed, k)).mean >= share;
    // the smallest particle: a few hops across
    let lo0 = net
        .hops
        .iter()
        .map(|h| net.hop_vector(h).norm())
        .fold(0.0f64, f64::max)
        .max(3.0)
        * 3.0;
    if ok(max_diameter_a, 1) {
        return ParticleLimit::NoLimitUpTo(max_diameter_a);
    }
    if !ok(lo0, 2) {
        return ParticleLimit::Below(lo0);
    }
    let (mut lo, mut hi) = (lo0, max_diameter_a);
    for k in 0..12 {
        if hi / lo < 1.03 {
            break;
        }
        let mid = (lo * hi).sqrt();
        if ok(mid, 3 + k) {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    ParticleLimit::Diameter((lo * hi).sqrt())
}
