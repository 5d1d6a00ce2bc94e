//! Space groups: symmetry operations, the table of the 530 Hall settings, and look-up by Hall
//! symbol, Hermann-Mauguin symbol or number.

pub mod symop;

pub use symop::{SymOp, SymOpError};

use crate::lattice::{Frac, Lattice};

/// A space-group setting with its full list of operations (centring translations included).
#[derive(Debug, Clone, PartialEq)]
pub struct SpaceGroup {
    /// International Tables number, 1-230.
    pub number: u16,
    /// Hall symbol of the setting, e.g. `-F 4vw 2vw 3`.
    pub hall: String,
    /// Hermann-Mauguin symbol with setting suffix where one exists, e.g. `F d -3 m :2`.
    pub hm: String,
    pub ops: Vec<SymOp>,
}

/// Looks up a setting by Hall symbol (case and spacing insensitive).
pub fn from_hall(_hall: &str) -> Option<SpaceGroup> {
    None
}

/// Looks up a setting by Hermann-Mauguin symbol (any spacing, with or without setting suffix
/// `:1`, `:2`, `:H`, `:R`, and the usual full/short forms). Without a suffix the standard
/// setting of the International Tables is taken (origin choice 2, hexagonal axes).
pub fn from_hm(_hm: &str) -> Option<SpaceGroup> {
    None
}

/// The standard setting of space group `number` (1-230).
pub fn from_number(_number: u16) -> Option<SpaceGroup> {
    None
}

/// Finds the table setting whose operations equal `ops` (as sets, modulo lattice translations).
pub fn identify(_ops: &[SymOp]) -> Option<SpaceGroup> {
    None
}

/// The distinct images of `p` under `ops`, wrapped into [0, 1); images closer than `tol` A
/// (periodic distance) are merged. The first image is `p` itself (wrapped) when `ops` starts
/// with the identity.
pub fn orbit(ops: &[SymOp], p: Frac, lattice: &Lattice, tol: f64) -> Vec<Frac> {
    let mut out: Vec<Frac> = Vec::new();
    for op in ops {
        let q = op.apply(p).wrapped();
        if !out.iter().any(|r| lattice.periodic_distance(*r, q) < tol) {
            out.push(q);
        }
    }
    out
}
