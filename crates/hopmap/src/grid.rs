//! A scalar field sampled on a periodic grid over the unit cell.
//!
//! Convention (see the science notes, section 3): point (i, j, k) sits at fractional
//! (i/na, j/nb, k/nc); the grid is exactly periodic, so point na is point 0 again. Values are
//! stored with k (along c) fastest: `index = (i * nb + j) * nc + k`, the order of Gaussian cube
//! files. Values are `f32`: 4 bytes per point per field.

use crate::lattice::{Frac, Lattice};

#[derive(Debug, Clone, PartialEq)]
pub struct Grid {
    pub lattice: Lattice,
    pub dims: [usize; 3],
    pub values: Vec<f32>,
}

impl Grid {
    /// A grid of `dims` points filled with `fill`.
    pub fn new(lattice: Lattice, dims: [usize; 3], fill: f32) -> Self {
        assert!(
            dims.iter().all(|&n| n > 0),
            "grid dimensions must be positive"
        );
        Grid {
            lattice,
            dims,
            values: vec![fill; dims[0] * dims[1] * dims[2]],
        }
    }

    /// Points per axis so that the spacing along each lattice vector is at most `spacing` A:
    /// `n = ceil(length / spacing)` (at least 1).
    pub fn dims_for_spacing(lattice: &Lattice, spacing: f64) -> [usize; 3] {
        let p = lattice.parameters();
        [p.a, p.b, p.c].map(|l| ((l / spacing).ceil() as usize).max(1))
    }

    /// Points per axis for a spacing (A) that the symmetry operations map onto themselves: axes
    /// mixed by a rotation get the same count (a and b of a hexagonal or tetragonal cell, all
    /// three of a cubic one), and each count is a multiple of the denominators of the
    /// translations along its axis (4 for the d-glides of Fd-3m), so that equivalent points of
    /// the structure are grid points with equal values. Never fewer points than
    /// [`Grid::dims_for_spacing`].
    pub fn dims_for_symmetry(
        lattice: &Lattice,
        spacing: f64,
        ops: &[crate::spacegroup::SymOp],
    ) -> [usize; 3] {
        let mut n = Grid::dims_for_spacing(lattice, spacing);
        // axes tied by rotations (union of 3 elements)
        let mut group = [0usize, 1, 2];
        let mut step = [1usize; 3];
        for op in ops {
            for i in 0..3 {
                for j in 0..3 {
                    if i != j && op.rot[(i, j)] != 0 {
                        let (gi, gj) = (group[i], group[j]);
                        for g in group.iter_mut() {
                            if *g == gj {
                                *g = gi;
                            }
                        }
                    }
                }
                let t = op.trans[i].rem_euclid(1.0);
                let d = (1..=24usize)
                    .find(|&d| ((t * d as f64) - (t * d as f64).round()).abs() < 1e-6)
                    .unwrap_or(1);
                step[i] = lcm(step[i], d);
            }
        }
        for g in 0..3 {
            let axes: Vec<usize> = (0..3).filter(|&i| group[i] == g).collect();
            if axes.is_empty() {
                continue;
            }
            let m = axes.iter().fold(1, |acc, &i| lcm(acc, step[i]));
            let want = axes.iter().map(|&i| n[i]).max().unwrap_or(1);
            let count = want.div_ceil(m) * m;
            for &i in &axes {
                n[i] = count;
            }
        }
        n
    }

    pub fn len(&self) -> usize {
        self.values.len()
    }
    pub fn is_empty(&self) -> bool {
        self.values.is_empty()
    }

    #[inline]
    pub fn index(&self, i: usize, j: usize, k: usize) -> usize {
        (i * self.dims[1] + j) * self.dims[2] + k
    }

    /// Inverse of [`Grid::index`].
    #[inline]
    pub fn ijk(&self, index: usize) -> [usize; 3] {
        let k = index % self.dims[2];
        let j = (index / self.dims[2]) % self.dims[1];
        let i = index / (self.dims[1] * self.dims[2]);
        [i, j, k]
    }

    #[inline]
    pub fn get(&self, i: usize, j: usize, k: usize) -> f32 {
        self.values[self.index(i, j, k)]
    }

    /// Fractional position of a grid point.
    pub fn frac(&self, ijk: [usize; 3]) -> Frac {
        Frac::new(
            ijk[0] as f64 / self.dims[0] as f64,
            ijk[1] as f64 / self.dims[1] as f64,
            ijk[2] as f64 / self.dims[2] as f64,
        )
    }

    /// Spacing actually used along each lattice vector, A.
    pub fn spacing(&self) -> [f64; 3] {
        let p = self.lattice.parameters();
        [
            p.a / self.dims[0] as f64,
            p.b / self.dims[1] as f64,
            p.c / self.dims[2] as f64,
        ]
    }

    /// Volume of one voxel, A^3.
    pub fn voxel_volume(&self) -> f64 {
        self.lattice.volume() / self.len() as f64
    }

    /// The grid point nearest to a fractional position (periodic).
    pub fn nearest_point(&self, f: Frac) -> [usize; 3] {
        let w = f.wrapped();
        [0, 1, 2].map(|a| ((w.0[a] * self.dims[a] as f64).round() as usize) % self.dims[a])
    }

    /// Index of the lowest value among the grid points within `radius_a` (A) of a fractional
    /// position, periodic; the nearest point when none is that close.
    pub fn lowest_within(&self, f: Frac, radius_a: f64) -> usize {
        let centre = self.nearest_point(f);
        let mut best = self.index(centre[0], centre[1], centre[2]);
        let widths = self.lattice.perpendicular_widths();
        let reach: [i64; 3] =
            [0, 1, 2].map(|a| (radius_a / widths[a] * self.dims[a] as f64).ceil() as i64);
        let w = f.wrapped().0;
        let start = [0, 1, 2].map(|a| (w[a] * self.dims[a] as f64).round() as i64);
        for di in -reach[0]..=reach[0] {
            for dj in -reach[1]..=reach[1] {
                for dk in -reach[2]..=reach[2] {
                    let ijk = [start[0] + di, start[1] + dj, start[2] + dk];
                    let d = nalgebra::Vector3::new(
                        ijk[0] as f64 / self.dims[0] as f64 - w[0],
                        ijk[1] as f64 / self.dims[1] as f64 - w[1],
                        ijk[2] as f64 / self.dims[2] as f64 - w[2],
                    );
                    if self.lattice.frac_delta_length(d) > radius_a {
                        continue;
                    }
                    let [i, j, k] =
                        [0, 1, 2].map(|a| ijk[a].rem_euclid(self.dims[a] as i64) as usize);
                    let idx = self.index(i, j, k);
                    if self.values[idx] < self.values[best] {
                        best = idx;
                    }
                }
            }
        }
        best
    }

    pub fn min_max(&self) -> (f32, f32) {
        self.values
            .iter()
            .fold((f32::INFINITY, f32::NEG_INFINITY), |(lo, hi), &v| {
                (lo.min(v), hi.max(v))
            })
    }
}

fn gcd(a: usize, b: usize) -> usize {
    if b == 0 { a } else { gcd(b, a % b) }
}

fn lcm(a: usize, b: usize) -> usize {
    a / gcd(a, b) * b
}
