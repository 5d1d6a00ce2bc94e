//! The unit cell: lattice parameters, the metric, and the two coordinate systems.
//!
//! Fractional and Cartesian coordinates are distinct types ([`Frac`], [`Cart`]) so that they can
//! never be confused in an API. The Cartesian frame is the usual crystallographic one: **a** along
//! x, **b** in the xy plane, **c** completing a right-handed set. Lengths are in angstrom, angles
//! in degrees at the API boundary and radians inside.

use nalgebra::{Matrix3, Vector3};
use std::ops::{Add, Sub};

/// A position in fractional coordinates of the cell (dimensionless).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Frac(pub Vector3<f64>);

/// A position or vector in Cartesian coordinates, angstrom.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Cart(pub Vector3<f64>);

impl Frac {
    pub fn new(x: f64, y: f64, z: f64) -> Self {
        Frac(Vector3::new(x, y, z))
    }
    /// The same point brought into [0, 1) on every axis.
    pub fn wrapped(self) -> Self {
        Frac(self.0.map(wrap_unit))
    }
    /// The shortest periodic difference `self - other`, each component in [-0.5, 0.5).
    pub fn min_image_delta(self, other: Frac) -> Vector3<f64> {
        (self.0 - other.0).map(|d| d - (d + 0.5).floor())
    }
}

impl Cart {
    pub fn new(x: f64, y: f64, z: f64) -> Self {
        Cart(Vector3::new(x, y, z))
    }
    pub fn norm(&self) -> f64 {
        self.0.norm()
    }
}

impl Add for Cart {
    type Output = Cart;
    fn add(self, o: Cart) -> Cart {
        Cart(self.0 + o.0)
    }
}
impl Sub for Cart {
    type Output = Cart;
    fn sub(self, o: Cart) -> Cart {
        Cart(self.0 - o.0)
    }
}

/// Brings a fractional coordinate into [0, 1), mapping values within 1e-12 of 1 to 0.
pub fn wrap_unit(x: f64) -> f64 {
    let w = x - x.floor();
    if w >= 1.0 - 1e-12 { 0.0 } else { w }
}

/// Lattice parameters as a crystallographer writes them: lengths in A, angles in degrees.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CellParameters {
    pub a: f64,
    pub b: f64,
    pub c: f64,
    pub alpha: f64,
    pub beta: f64,
    pub gamma: f64,
}

/// A periodic lattice. `matrix` has the lattice vectors **a**, **b**, **c** as its columns, so
/// that `cart = matrix * frac`.
#[derive(Debug, Clone, PartialEq)]
pub struct Lattice {
    matrix: Matrix3<f64>,
    inverse: Matrix3<f64>,
}

#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum LatticeError {
    #[error("cell parameters do not describe a cell: {0}")]
    Degenerate(String),
}

impl Lattice {
    /// Builds the lattice from a, b, c (A) and alpha, beta, gamma (degrees).
    pub fn from_parameters(p: CellParameters) -> Result<Self, LatticeError> {
        let CellParameters {
            a,
            b,
            c,
            alpha,
            beta,
            gamma,
        } = p;
        for (name, v) in [("a", a), ("b", b), ("c", c)] {
            if !(v.is_finite() && v > 0.0) {
                return Err(LatticeError::Degenerate(format!(
                    "length {name} = {v} A must be positive"
                )));
            }
        }
        for (name, v) in [("alpha", alpha), ("beta", beta), ("gamma", gamma)] {
            if !(v.is_finite() && v > 0.0 && v < 180.0) {
                return Err(LatticeError::Degenerate(format!(
                    "angle {name} = {v} deg must lie strictly between 0 and 180"
                )));
            }
        }
        let (ca, cb, cg) = (
            alpha.to_radians().cos(),
            beta.to_radians().cos(),
            gamma.to_radians().cos(),
        );
        let sg = gamma.to_radians().sin();
        let cx = c * cb;
        let cy = c * (ca - cb * cg) / sg;
        let cz2 = c * c - cx * cx - cy * cy;
        if !(cz2 > 1e-10 * c * c) {
            return Err(LatticeError::Degenerate(format!(
                "angles alpha = {alpha}, beta = {beta}, gamma = {gamma} deg do not close a cell"
            )));
        }
        let m = Matrix3::new(a, b * cg, cx, 0.0, b * sg, cy, 0.0, 0.0, cz2.sqrt());
        Self::from_matrix(m)
    }

    /// Builds the lattice from a matrix whose columns are the lattice vectors (A).
    pub fn from_matrix(matrix: Matrix3<f64>) -> Result<Self, LatticeError> {
        let det = matrix.determinant();
        if !(det.is_finite() && det.abs() > 1e-8) {
            return Err(LatticeError::Degenerate(format!(
                "cell volume {det} A^3 is zero or not finite"
            )));
        }
        let inverse = matrix
            .try_inverse()
            .ok_or_else(|| LatticeError::Degenerate("singular matrix".into()))?;
        Ok(Lattice { matrix, inverse })
    }

    /// Builds the lattice from three row vectors a, b, c (A), as in POSCAR files.
    pub fn from_vectors(a: [f64; 3], b: [f64; 3], c: [f64; 3]) -> Result<Self, LatticeError> {
        Self::from_matrix(Matrix3::new(
            a[0], b[0], c[0], a[1], b[1], c[1], a[2], b[2], c[2],
        ))
    }

    /// Columns are the lattice vectors a, b, c (A).
    pub fn matrix(&self) -> &Matrix3<f64> {
        &self.matrix
    }
    /// Inverse of [`Lattice::matrix`]: `frac = inverse * cart`.
    pub fn inverse(&self) -> &Matrix3<f64> {
        &self.inverse
    }
    /// Lattice vector i (0 = a, 1 = b, 2 = c), A.
    pub fn vector(&self, i: usize) -> Vector3<f64> {
        self.matrix.column(i).into_owned()
    }
    pub fn volume(&self) -> f64 {
        self.matrix.determinant().abs()
    }
    pub fn parameters(&self) -> CellParameters {
        let (a, b, c) = (self.vector(0), self.vector(1), self.vector(2));
        let ang = |u: &Vector3<f64>, v: &Vector3<f64>| {
            (u.dot(v) / (u.norm() * v.norm()))
                .clamp(-1.0, 1.0)
                .acos()
                .to_degrees()
        };
        CellParameters {
            a: a.norm(),
            b: b.norm(),
            c: c.norm(),
            alpha: ang(&b, &c),
            beta: ang(&a, &c),
            gamma: ang(&a, &b),
        }
    }
    pub fn to_cart(&self, f: Frac) -> Cart {
        Cart(self.matrix * f.0)
    }
    pub fn to_frac(&self, c: Cart) -> Frac {
        Frac(self.inverse * c.0)
    }
    /// Cartesian length (A) of a fractional displacement.
    pub fn frac_delta_length(&self, d: Vector3<f64>) -> f64 {
        (self.matrix * d).norm()
    }
    /// Distance (A) between two points under periodic boundary conditions, searching the
    /// neighbouring images so that it is exact for skewed cells too.
    pub fn periodic_distance(&self, p: Frac, q: Frac) -> f64 {
        let d0 = p.min_image_delta(q);
        let mut best = f64::INFINITY;
        for i in -1..=1 {
            for j in -1..=1 {
                for k in -1..=1 {
                    let d = d0 + Vector3::new(i as f64, j as f64, k as f64);
                    best = best.min(self.frac_delta_length(d));
                }
            }
        }
        best
    }
    /// Perpendicular widths of the cell (A): the distance between opposite faces, per axis.
    /// A sphere of radius r fits inside the cell when r <= width/2 on every axis.
    pub fn perpendicular_widths(&self) -> [f64; 3] {
        let v = self.volume();
        let (a, b, c) = (self.vector(0), self.vector(1), self.vector(2));
        [
            v / b.cross(&c).norm(),
            v / c.cross(&a).norm(),
            v / a.cross(&b).norm(),
        ]
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn cubic(a: f64) -> Lattice {
        Lattice::from_parameters(CellParameters {
            a,
            b: a,
            c: a,
            alpha: 90.0,
            beta: 90.0,
            gamma: 90.0,
        })
        .unwrap()
    }

    #[test]
    fn parameters_round_trip_for_a_triclinic_cell() {
        let p = CellParameters {
            a: 5.1,
            b: 6.2,
            c: 7.3,
            alpha: 81.0,
            beta: 97.0,
            gamma: 104.0,
        };
        let l = Lattice::from_parameters(p).unwrap();
        let q = l.parameters();
        for (x, y) in [
            (p.a, q.a),
            (p.b, q.b),
            (p.c, q.c),
            (p.alpha, q.alpha),
            (p.beta, q.beta),
            (p.gamma, q.gamma),
        ] {
            assert!((x - y).abs() < 1e-9, "{x} vs {y}");
        }
    }

    #[test]
    fn hexagonal_cell_volume_is_sqrt3_over_2_a2_c() {
        let l = Lattice::from_parameters(CellParameters {
            a: 2.8,
            b: 2.8,
            c: 14.0,
            alpha: 90.0,
            beta: 90.0,
            gamma: 120.0,
        })
        .unwrap();
        let expected = 3f64.sqrt() / 2.0 * 2.8 * 2.8 * 14.0;
        assert!((l.volume() - expected).abs() < 1e-9);
    }

    #[test]
    fn periodic_distance_uses_the_nearest_image() {
        let l = cubic(4.0);
        let d = l.periodic_distance(Frac::new(0.05, 0.0, 0.0), Frac::new(0.95, 0.0, 0.0));
        assert!((d - 0.4).abs() < 1e-12);
    }

    #[test]
    fn impossible_angles_are_rejected() {
        let p = CellParameters {
            a: 5.0,
            b: 5.0,
            c: 5.0,
            alpha: 170.0,
            beta: 170.0,
            gamma: 170.0,
        };
        assert!(Lattice::from_parameters(p).is_err());
    }
}
