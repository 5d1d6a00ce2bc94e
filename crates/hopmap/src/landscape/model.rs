//! The inputs of a landscape calculation, fully resolved: a probe ion, the framework atoms and
//! the numbers of every interaction. Building this from a structure and a parameter table is
//! the job of [`crate::bv::model`]; computing the grid from it is the job of the rest of
//! [`crate::landscape`]. Nothing here looks anything up.

use crate::element::Element;
use crate::lattice::{Frac, Lattice};
use crate::structure::Species;

/// The mobile ion placed at each grid point.
#[derive(Debug, Clone, PartialEq)]
pub struct ProbeIon {
    pub element: Element,
    /// Formal valence V_A (v.u.), e.g. 1 for Li+, 2 for Mg2+.
    pub valence: f64,
    /// Charge used in the cation repulsion, in units of e (formal valence times any scale).
    pub charge: f64,
    /// Usual coordination number N_A of the ion by the anion, sets `s_eq = V_A / N_A`.
    pub coordination: f64,
    /// Shannon ionic radius (A) at that coordination.
    pub radius: f64,
}

/// A framework anion species and its bond-valence interaction with the probe.
#[derive(Debug, Clone, PartialEq)]
pub struct AnionKind {
    pub species: Species,
    /// Bond-valence parameters of the probe-anion pair: `s = exp((r0 - R) / b)`.
    pub r0: f64,
    pub b: f64,
    /// Morse minimum, `Rmin = r0 - b ln(V_A / N_A)` (A).
    pub rmin: f64,
    /// Morse well depth per bond (eV).
    pub d0: f64,
    /// Bond-valence cutoff of the parameter set (A): contributions beyond it are dropped.
    pub cutoff: f64,
    /// Shannon radius of the anion (A), for bottleneck sizes.
    pub radius: f64,
    /// Where r0 and b came from (reference id of the table, or "O'Keeffe-Brese estimate").
    pub source: String,
}

/// A cation species and its screened Coulomb repulsion with the probe: a framework cation, or
/// the other ions of the mobile species at their sites ([`MobileRepulsion`]).
#[derive(Debug, Clone, PartialEq)]
pub struct CationKind {
    pub species: Species,
    /// Charge in units of e (formal valence times any scale).
    pub charge: f64,
    /// Screening length rho of `erfc(R / rho)` (A).
    pub rho: f64,
    /// Shannon radius (A), for bottleneck sizes.
    pub radius: f64,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum FrameworkKind {
    Anion(usize),
    Cation(usize),
}

/// One framework atom of the full cell (an occupant of a site; mixed sites give several).
#[derive(Debug, Clone, PartialEq)]
pub struct FrameworkAtom {
    pub frac: Frac,
    pub kind: FrameworkKind,
    /// Occupancy, which scales both the Morse term and the charge.
    pub occupancy: f64,
    /// Label of the site in the input.
    pub label: String,
}

/// The ions of the mobile species left in place as a mean field, in the picture of a vacancy
/// hop: every site of the structure that holds the ion repels the probe with its occupancy,
/// except the `excluded_nearest` sites nearest the probe, which stand for the site the probe
/// has left and the vacancy it moves into.
#[derive(Debug, Clone, PartialEq)]
pub struct MobileRepulsion {
    pub kind: CationKind,
    /// Fractional position and occupancy of every site of the ion in the cell.
    pub sites: Vec<(Frac, f64)>,
    /// How many of the nearest sites take no part (2: the origin and the target of the hop).
    pub excluded_nearest: usize,
}

/// Everything needed to evaluate the two landscapes at any point.
#[derive(Debug, Clone, PartialEq)]
pub struct LandscapeModel {
    pub lattice: Lattice,
    pub probe: ProbeIon,
    pub anions: Vec<AnionKind>,
    pub cations: Vec<CationKind>,
    pub atoms: Vec<FrameworkAtom>,
    /// The other ions of the mobile species at their sites in the structure, repelling the probe
    /// (None: not modelled, the probe sees the bare framework).
    pub mobile: Option<MobileRepulsion>,
    /// Cutoff of the cation repulsion (A); must reach well past every rho.
    pub coulomb_cutoff: f64,
    /// Values above this are stored as the cap (eV), near atom cores.
    pub energy_cap: f64,
    /// Cap of the valence mismatch (v.u.).
    pub mismatch_cap: f64,
}

/// Coulomb constant e^2 / (4 pi eps0), eV A (CODATA).
pub const COULOMB_EV_A: f64 = 14.399_645;
