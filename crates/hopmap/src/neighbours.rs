//! Periodic neighbour search: every atom, in every periodic image, within a cutoff of a point.
//!
//! The atoms are wrapped into the cell and sorted into bins (a cell list) along the three
//! lattice directions. A bin spans at least the largest cutoff in perpendicular width, unless the
//! cell itself is narrower, in which case an axis has a single bin and the search simply steps
//! through as many periodic images as the cutoff needs. The range of bins (and images) visited
//! per axis follows from the lattice's perpendicular widths: a point within distance `r` of the
//! query differs from it in fractional coordinate `i` by at most `r / width_i`. So the search is
//! exact for any cell shape, including skewed ones, and any cutoff, including cutoffs several
//! times the cell size.
//!
//! Each hit names the atom, its distance and the lattice translation (image) that carries the
//! atom's input position onto the found position.

use crate::lattice::{Frac, Lattice};
use nalgebra::Vector3;

/// One atom found near a query point.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Neighbour {
    /// Index of the atom in the list the search was built from.
    pub index: usize,
    /// Distance from the query point (A).
    pub distance: f64,
    /// Lattice translation: the found position is the atom's input position plus this vector
    /// (fractional, integers), as seen from the query point as given.
    pub image: [i32; 3],
    /// Cartesian vector from the query point to the found position (A).
    pub delta: Vector3<f64>,
}

/// A cell list over the atoms of one structure, built once and queried many times.
#[derive(Debug, Clone)]
pub struct NeighbourSearch {
    vectors: [Vector3<f64>; 3],
    inverse: nalgebra::Matrix3<f64>,
    widths: [f64; 3],
    max_cutoff: f64,
    nbins: [usize; 3],
    /// Start of each bin in `members` (CSR layout, one more entry than bins).
    bin_start: Vec<u32>,
    members: Vec<u32>,
    /// Cartesian position of each atom after wrapping into the cell.
    cart: Vec<Vector3<f64>>,
    /// Integer shift from the wrapped position back to the input position.
    wrap: Vec<[i32; 3]>,
}

const MAX_BINS_PER_AXIS: usize = 64;

impl NeighbourSearch {
    /// Builds the search over `points` (fractional, any values: they are wrapped here).
    /// `max_cutoff` (A) is the largest cutoff that will be asked for; larger cutoffs still give
    /// exact answers, only more slowly.
    pub fn new(lattice: &Lattice, points: &[Frac], max_cutoff: f64) -> Self {
        let max_cutoff = if max_cutoff.is_finite() && max_cutoff > 0.0 {
            max_cutoff
        } else {
            1.0
        };
        let widths = lattice.perpendicular_widths();
        let nbins = widths.map(|w| ((w / max_cutoff).floor() as usize).clamp(1, MAX_BINS_PER_AXIS));
        let vectors = [lattice.vector(0), lattice.vector(1), lattice.vector(2)];
        let mut wrapped = Vec::with_capacity(points.len());
        let mut wrap = Vec::with_capacity(points.len());
        let mut cart = Vec::with_capacity(points.len());
        let mut bin_of = Vec::with_capacity(points.len());
        for p in points {
            let mut fl = p.0.map(f64::floor);
            let mut w = p.0 - fl;
            // a tiny negative value rounds to exactly 1 here: that is 0 of the next cell
            for k in 0..3 {
                if w[k] >= 1.0 {
                    w[k] = 0.0;
                    fl[k] += 1.0;
                }
            }
            let shift = [fl[0] as i32, fl[1] as i32, fl[2] as i32];
            let b = Self::bin_index_of(&nbins, &w);
            wrapped.push(w);
            wrap.push(shift);
            cart.push(lattice.matrix() * w);
            bin_of.push(b);
        }
        let total = nbins[0] * nbins[1] * nbins[2];
        let mut counts = vec![0u32; total + 1];
        for &b in &bin_of {
            counts[b + 1] += 1;
        }
        for i in 0..total {
            counts[i + 1] += counts[i];
        }
        let bin_start = counts.clone();
        let mut fill = counts;
        let mut members = vec![0u32; points.len()];
        for (i, &b) in bin_of.iter().enumerate() {
            members[fill[b] as usize] = i as u32;
            fill[b] += 1;
        }
        NeighbourSearch {
            vectors,
            inverse: *lattice.inverse(),
            widths,
            max_cutoff,
            nbins,
            bin_start,
            members,
            cart,
            wrap,
        }
    }

    fn bin_index_of(nbins: &[usize; 3], w: &Vector3<f64>) -> usize {
        let ix = |k: usize| ((w[k] * nbins[k] as f64) as usize).min(nbins[k] - 1);
        (ix(0) * nbins[1] + ix(1)) * nbins[2] + ix(2)
    }

    /// Number of atoms the search was built over.
    pub fn len(&self) -> usize {
        self.cart.len()
    }

    pub fn is_empty(&self) -> bool {
        self.cart.is_empty()
    }

    /// The largest cutoff the bins were sized for (A).
    pub fn max_cutoff(&self) -> f64 {
        self.max_cutoff
    }

    /// Calls `f` for every atom image within `cutoff` (A) of `p`, the point itself included
    /// when it is one of the atoms (distance 0). Order is unspecified.
    pub fn for_each_within(&self, p: Frac, cutoff: f64, mut f: impl FnMut(Neighbour)) {
        if self.cart.is_empty() || !(cutoff >= 0.0) {
            return;
        }
        let pf = p.0.map(f64::floor);
        let pw = p.0 - pf;
        let pcell = [pf[0] as i32, pf[1] as i32, pf[2] as i32];
        let pcart = self.vectors[0] * pw[0] + self.vectors[1] * pw[1] + self.vectors[2] * pw[2];
        let c2 = cutoff * cutoff;
        let mut lo = [0i64; 3];
        let mut hi = [0i64; 3];
        for k in 0..3 {
            let reach = cutoff / self.widths[k];
            let n = self.nbins[k] as f64;
            lo[k] = ((pw[k] - reach) * n).floor() as i64;
            hi[k] = ((pw[k] + reach) * n).floor() as i64;
        }
        let nb = self.nbins.map(|n| n as i64);
        for mx in lo[0]..=hi[0] {
            let (bx, sx) = (mx.rem_euclid(nb[0]), mx.div_euclid(nb[0]));
            for my in lo[1]..=hi[1] {
                let (by, sy) = (my.rem_euclid(nb[1]), my.div_euclid(nb[1]));
                for mz in lo[2]..=hi[2] {
                    let (bz, sz) = (mz.rem_euclid(nb[2]), mz.div_euclid(nb[2]));
                    let bin = ((bx * nb[1] + by) * nb[2] + bz) as usize;
                    let (s, e) = (
                        self.bin_start[bin] as usize,
                        self.bin_start[bin + 1] as usize,
                    );
                    if s == e {
                        continue;
                    }
                    let shift = self.vectors[0] * sx as f64
                        + self.vectors[1] * sy as f64
                        + self.vectors[2] * sz as f64
                        - pcart;
                    for &m in &self.members[s..e] {
                        let i = m as usize;
                        let d = self.cart[i] + shift;
                        let d2 = d.norm_squared();
                        if d2 <= c2 {
                            let w = self.wrap[i];
                            f(Neighbour {
                                index: i,
                                distance: d2.sqrt(),
                                image: [
                                    sx as i32 + pcell[0] - w[0],
                                    sy as i32 + pcell[1] - w[1],
                                    sz as i32 + pcell[2] - w[2],
                                ],
                                delta: d,
                            });
                        }
                    }
                }
            }
        }
    }

    /// Every atom image within `cutoff` (A) of `p`, nearest first.
    pub fn within(&self, p: Frac, cutoff: f64) -> Vec<Neighbour> {
        let mut out = Vec::new();
        self.for_each_within(p, cutoff, |n| out.push(n));
        out.sort_by(|a, b| {
            a.distance
                .total_cmp(&b.distance)
                .then(a.index.cmp(&b.index))
        });
        out
    }

    /// Fractional coordinates of a Cartesian vector in this lattice.
    pub fn to_frac_delta(&self, d: Vector3<f64>) -> Vector3<f64> {
        self.inverse * d
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::lattice::CellParameters;

    /// Brute force over a generous block of images, for comparison.
    fn brute(l: &Lattice, pts: &[Frac], p: Frac, cutoff: f64) -> Vec<(usize, [i32; 3], f64)> {
        let mut out = Vec::new();
        for (i, q) in pts.iter().enumerate() {
            for a in -6..=6 {
                for b in -6..=6 {
                    for c in -6..=6 {
                        let d = q.0 + Vector3::new(a as f64, b as f64, c as f64) - p.0;
                        let r = l.frac_delta_length(d);
                        if r <= cutoff {
                            out.push((i, [a, b, c], r));
                        }
                    }
                }
            }
        }
        out.sort_by(|x, y| x.2.total_cmp(&y.2).then(x.0.cmp(&y.0)).then(x.1.cmp(&y.1)));
        out
    }

    fn check(l: &Lattice, pts: &[Frac], q: Frac, cutoff: f64, built_for: f64) {
        let s = NeighbourSearch::new(l, pts, built_for);
        let mut got: Vec<(usize, [i32; 3], f64)> = s
            .within(q, cutoff)
            .into_iter()
            .map(|n| (n.index, n.image, n.distance))
            .collect();
        got.sort_by(|x, y| x.2.total_cmp(&y.2).then(x.0.cmp(&y.0)).then(x.1.cmp(&y.1)));
        let want = brute(l, pts, q, cutoff);
        assert_eq!(got.len(), want.len(), "count for cutoff {cutoff}");
        for (g, w) in got.iter().zip(&want) {
            assert_eq!((g.0, g.1), (w.0, w.1));
            assert!((g.2 - w.2).abs() < 1e-9);
        }
    }

    #[test]
    fn matches_brute_force_in_a_skewed_triclinic_cell() {
        let l = Lattice::from_parameters(CellParameters {
            a: 4.1,
            b: 5.3,
            c: 6.2,
            alpha: 71.0,
            beta: 103.0,
            gamma: 118.0,
        })
        .unwrap();
        let pts = vec![
            Frac::new(0.0, 0.0, 0.0),
            Frac::new(0.31, 0.77, 0.12),
            Frac::new(-0.2, 1.4, 0.5),
            Frac::new(0.99999, 0.5, 0.25),
        ];
        for q in [Frac::new(0.1, 0.2, 0.3), Frac::new(1.7, -0.3, 0.9)] {
            check(&l, &pts, q, 3.0, 3.0);
            check(&l, &pts, q, 9.5, 3.0); // cutoff beyond the one the bins were sized for
            check(&l, &pts, q, 7.0, 7.0); // single bin per axis, several images
        }
    }

    #[test]
    fn large_cell_uses_many_bins_and_stays_exact() {
        let l = Lattice::from_parameters(CellParameters {
            a: 20.0,
            b: 21.0,
            c: 19.0,
            alpha: 90.0,
            beta: 90.0,
            gamma: 90.0,
        })
        .unwrap();
        let mut pts = Vec::new();
        for i in 0..5 {
            for j in 0..5 {
                for k in 0..5 {
                    pts.push(Frac::new(
                        i as f64 / 5.0 + 0.013 * k as f64,
                        j as f64 / 5.0,
                        k as f64 / 5.0 + 0.01 * i as f64,
                    ));
                }
            }
        }
        let s = NeighbourSearch::new(&l, &pts, 4.0);
        assert!(s.nbins.iter().all(|&n| n >= 4));
        check(&l, &pts, Frac::new(0.02, 0.98, 0.5), 4.0, 4.0);
        check(&l, &pts, Frac::new(0.5, 0.5, 0.01), 6.5, 4.0);
    }

    #[test]
    fn image_carries_the_input_position_onto_the_hit() {
        let l = Lattice::from_parameters(CellParameters {
            a: 3.0,
            b: 3.0,
            c: 3.0,
            alpha: 90.0,
            beta: 90.0,
            gamma: 90.0,
        })
        .unwrap();
        let pts = vec![Frac::new(1.9, 0.0, 0.0)];
        let s = NeighbourSearch::new(&l, &pts, 1.0);
        let hits = s.within(Frac::new(0.05, 0.0, 0.0), 0.5);
        assert_eq!(hits.len(), 1);
        // 1.9 + (-2) = -0.1: 0.15 fractional = 0.45 A away
        assert_eq!(hits[0].image, [-2, 0, 0]);
        assert!((hits[0].distance - 0.45).abs() < 1e-9);
    }
}
