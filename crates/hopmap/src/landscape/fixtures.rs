//! Test fixtures shared by the landscape's tests.

use super::model::*;
use crate::element::Element;
use crate::lattice::{CellParameters, Frac, Lattice};
use crate::structure::Species;

/// A triclinic cell with a mixed anion site (two kinds at one position, different cutoffs),
/// an anion kind whose exponent leaves the f32 range within its cutoff (the clamped path),
/// a mixed cation site of two screening lengths, and mobile ions with their nearest site
/// excluded.
pub(crate) fn mixed_model() -> LandscapeModel {
    let el = |s: &str| Element::from_symbol(s).unwrap();
    let lattice = Lattice::from_parameters(CellParameters {
        a: 4.1,
        b: 4.6,
        c: 5.2,
        alpha: 84.0,
        beta: 97.0,
        gamma: 101.0,
    })
    .unwrap();
    let atom = |f: [f64; 3], kind, occupancy| FrameworkAtom {
        frac: Frac::new(f[0], f[1], f[2]),
        kind,
        occupancy,
        label: "X".into(),
    };
    let anion = |sym: &str, q: f64, r0: f64, b: f64, cutoff: f64| AnionKind {
        species: Species::new(el(sym), Some(q)),
        r0,
        b,
        rmin: r0 + b * 5f64.ln(),
        d0: 0.3,
        cutoff,
        radius: 1.4,
        source: "test".into(),
    };
    let cation = |sym: &str, q: f64, rho: f64| CationKind {
        species: Species::new(el(sym), Some(q)),
        charge: q,
        rho,
        radius: 0.6,
    };
    LandscapeModel {
        lattice,
        probe: ProbeIon {
            element: el("Li"),
            valence: 1.0,
            charge: 1.0,
            coordination: 5.0,
            radius: 0.76,
        },
        anions: vec![
            // Li-O: Adams 2001 (bvparm2013), r0 = 1.1745 A, b = 0.514 A.
            anion("O", -2.0, 1.1745, 0.514, 6.0),
            // Li-F: Brese and O'Keeffe 1991, r0 = 1.360 A, b = 0.37 A (from memory).
            anion("F", -1.0, 1.360, 0.37, 4.0),
            // Li-Cl: Brese and O'Keeffe 1991, r0 = 1.91 A, b = 0.37 A (from memory), with a
            // cutoff so long that (Rmin - cutoff)/b < -87: the clamped exponential.
            anion("Cl", -1.0, 1.91, 0.37, 35.0),
        ],
        cations: vec![cation("Ti", 4.0, 1.05), cation("Mg", 2.0, 0.9)],
        atoms: vec![
            atom([0.1, 0.2, 0.3], FrameworkKind::Anion(0), 0.5),
            atom([0.1, 0.2, 0.3], FrameworkKind::Anion(1), 0.5),
            atom([0.6, 0.15, 0.8], FrameworkKind::Anion(0), 1.0),
            atom([0.3, 0.7, 0.55], FrameworkKind::Anion(2), 0.25),
            atom([0.45, 0.4, 0.05], FrameworkKind::Cation(0), 0.7),
            atom([0.45, 0.4, 0.05], FrameworkKind::Cation(1), 0.3),
            atom([0.9, 0.85, 0.5], FrameworkKind::Cation(1), 1.0),
        ],
        mobile: Some(MobileRepulsion {
            kind: cation("Li", 1.0, 1.2),
            sites: vec![
                (Frac::new(0.8, 0.5, 0.2), 1.0),
                (Frac::new(0.2, 0.9, 0.7), 0.5),
            ],
            excluded_nearest: 1,
        }),
        coulomb_cutoff: 8.0,
        energy_cap: 10.0,
        mismatch_cap: 10.0,
    }
}
