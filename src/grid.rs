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

    pub fn min_max(&self) -> (f32, f32) {
        self.values
            .iter()
            .fold((f32::INFINITY, f32::NEG_INFINITY), |(lo, hi), &v| {
                (lo.min(v), hi.max(v))
            })
    }
}
