//! The crystal structure: a lattice, its symmetry, and the full unit cell of sites.
//!
//! This is the plain data type every later stage reads. Sites are stored already expanded to the
//! full cell; each remembers which asymmetric-unit site it came from. A mixed site (two species
//! sharing one position, e.g. Nb/W or Li/Ti) is one [`Site`] with several [`Occupant`]s.

use crate::element::Element;
use crate::lattice::{Cart, Frac, Lattice};
use crate::spacegroup::SymOp;
use std::collections::BTreeMap;

/// An element with an optional formal oxidation state (fractional averages allowed, e.g. Mn3.5+).
#[derive(Debug, Clone, PartialEq)]
pub struct Species {
    pub element: Element,
    pub oxidation: Option<f64>,
}

impl Species {
    pub fn new(element: Element, oxidation: Option<f64>) -> Self {
        Species { element, oxidation }
    }

    /// Reads a species as chemists write it: an element symbol, then an optional charge, sign
    /// last or first: `Li`, `Li+`, `Fe2+`, `O2-`, `Mn3.5+`, `O-2`, `Fe+3`. The one reader of
    /// species for every option and parameter file (CIF type symbols, which may carry label
    /// digits, go through `read::cif::read_symbol`, which uses the same charge rules).
    pub fn parse(text: &str) -> Result<Species, String> {
        let t = text.trim();
        let sym: String = t.chars().take_while(|c| c.is_ascii_alphabetic()).collect();
        let element = Element::from_symbol(&sym)
            .ok_or_else(|| format!("'{t}' does not start with an element symbol"))?;
        let rest = &t[sym.len()..];
        if rest.is_empty() {
            return Ok(Species::new(element, None));
        }
        match read_charge(rest) {
            Some(q) if q.is_finite() => Ok(Species::new(element, Some(q))),
            _ => Err(format!(
                "'{t}': a charge is a number with its sign, e.g. Nb5+, O2-, Li+"
            )),
        }
    }
    /// "Nb5+", "O2-", "Li+", "Mn3.5+", or the bare symbol when the state is unknown.
    pub fn name(&self) -> String {
        match self.oxidation {
            None => self.element.symbol().to_string(),
            Some(q) => {
                let mag = q.abs();
                let sign = if q < 0.0 { '-' } else { '+' };
                let num = if (mag - 1.0).abs() < 1e-9 {
                    String::new()
                } else if (mag - mag.round()).abs() < 1e-9 {
                    format!("{}", mag.round() as i64)
                } else {
                    let s = format!("{mag:.3}");
                    s.trim_end_matches('0').trim_end_matches('.').to_string()
                };
                if mag < 1e-9 {
                    format!("{}0", self.element.symbol())
                } else {
                    format!("{}{num}{sign}", self.element.symbol())
                }
            }
        }
    }
}

/// One species on a site, with its occupancy (0-1) and the CIF label it came from.
#[derive(Debug, Clone, PartialEq)]
pub struct Occupant {
    pub species: Species,
    pub occupancy: f64,
    pub label: String,
}

/// A position in the full cell and what sits there.
#[derive(Debug, Clone, PartialEq)]
pub struct Site {
    pub frac: Frac,
    pub occupants: Vec<Occupant>,
    /// Index into [`Structure::asymmetric_sites`] of the site this one is an image of.
    pub asym_index: usize,
}

impl Site {
    /// Label of the first occupant (the usual way to name a site).
    pub fn label(&self) -> &str {
        self.occupants
            .first()
            .map(|o| o.label.as_str())
            .unwrap_or("")
    }
    pub fn total_occupancy(&self) -> f64 {
        self.occupants.iter().map(|o| o.occupancy).sum()
    }
    pub fn has_element(&self, e: Element) -> bool {
        self.occupants.iter().any(|o| o.species.element == e)
    }
}

/// A site of the asymmetric unit as listed in the file, with its multiplicity in the full cell.
#[derive(Debug, Clone, PartialEq)]
pub struct AsymmetricSite {
    pub label: String,
    pub frac: Frac,
    pub occupants: Vec<Occupant>,
    /// Number of positions this site generates in the full cell.
    pub multiplicity: usize,
    /// Wyckoff letter when the file gives one.
    pub wyckoff: Option<String>,
}

/// What is known about the symmetry the structure was read with.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct SymmetryInfo {
    pub number: Option<u16>,
    pub hm_symbol: Option<String>,
    pub hall_symbol: Option<String>,
    /// The operations used to expand the asymmetric unit (identity first).
    pub ops: Vec<SymOp>,
    /// Where the operations came from, in words ("operator list in the file", "Hall symbol", ...).
    pub source: String,
    /// For symmetry found in a P 1 input ([`crate::symmetry`]): the input cell and its
    /// relation to the conventional cell. None when the file gave its own symmetry.
    pub transformation: Option<CellTransformation>,
}

impl SymmetryInfo {
    /// P 1: the identity alone, with `source` saying where the cell came from.
    pub fn p1(source: impl Into<String>) -> Self {
        SymmetryInfo {
            number: Some(1),
            hm_symbol: Some("P 1".into()),
            hall_symbol: Some("P 1".into()),
            ops: vec![SymOp::identity()],
            source: source.into(),
            transformation: None,
        }
    }
}

/// How a P 1 input cell relates to the conventional cell of the symmetry found in it:
/// `A_conv = A_input linear` (lattice vectors as columns; the conventional cell is then set in
/// the standard orientation, a rotation of the Cartesian frame) and
/// `x_conv = linear^-1 (x_input - origin_shift)` (before the atoms are moved onto their exact
/// symmetric positions, by at most the search tolerance).
#[derive(Debug, Clone, PartialEq)]
pub struct CellTransformation {
    pub linear: nalgebra::Matrix3<f64>,
    pub origin_shift: nalgebra::Vector3<f64>,
    /// The cell as read.
    pub input_cell: crate::lattice::CellParameters,
    /// Positions in the cell as read.
    pub input_positions: usize,
    /// True when the structure was rewritten in the conventional cell; false when the input
    /// cell was kept (directions then refer to the input cell).
    pub conventional: bool,
}

#[derive(Debug, Clone, PartialEq)]
pub struct Structure {
    /// Data block name or file stem.
    pub name: String,
    pub lattice: Lattice,
    pub symmetry: SymmetryInfo,
    pub asymmetric_sites: Vec<AsymmetricSite>,
    /// The full cell, every symmetry image.
    pub sites: Vec<Site>,
    /// Problems noticed while reading that did not stop it (plain sentences).
    pub warnings: Vec<String>,
    /// True when oxidation states were assigned by hopmap rather than read from the file.
    pub oxidation_states_assigned: bool,
}

impl Structure {
    pub fn volume(&self) -> f64 {
        self.lattice.volume()
    }

    /// The supercell of `n[0] x n[1] x n[2]` cells along **a**, **b**, **c**, in P 1: every
    /// site (wrapped into the cell) copied into each cell, cell by cell, each copy its own
    /// asymmetric site of multiplicity 1 with the site's label. The lattice vectors are those
    /// of `self` scaled, in the same Cartesian frame. None when a repeat is 0 or the number of
    /// sites would overflow.
    pub fn supercell(&self, n: [usize; 3]) -> Option<Structure> {
        let cells = n.iter().try_fold(1usize, |a, &k| a.checked_mul(k))?;
        let total = self.sites.len().checked_mul(cells)?;
        if cells == 0 {
            return None;
        }
        let reps = nalgebra::Vector3::from(n.map(|k| k as f64));
        let lattice =
            Lattice::from_matrix(self.lattice.matrix() * nalgebra::Matrix3::from_diagonal(&reps))
                .ok()?;
        let mut sites = Vec::with_capacity(total);
        let mut asymmetric_sites = Vec::with_capacity(total);
        for i in 0..n[0] {
            for j in 0..n[1] {
                for k in 0..n[2] {
                    let cell = nalgebra::Vector3::new(i as f64, j as f64, k as f64);
                    for site in &self.sites {
                        let frac = Frac((site.frac.wrapped().0 + cell).component_div(&reps));
                        asymmetric_sites.push(AsymmetricSite {
                            label: site.label().to_string(),
                            frac,
                            occupants: site.occupants.clone(),
                            multiplicity: 1,
                            wyckoff: None,
                        });
                        sites.push(Site {
                            frac,
                            occupants: site.occupants.clone(),
                            asym_index: sites.len(),
                        });
                    }
                }
            }
        }
        Some(Structure {
            name: format!("{} {}x{}x{}", self.name, n[0], n[1], n[2]),
            lattice,
            symmetry: SymmetryInfo::p1(format!("{}x{}x{} supercell, in P 1", n[0], n[1], n[2])),
            asymmetric_sites,
            sites,
            warnings: Vec::new(),
            oxidation_states_assigned: self.oxidation_states_assigned,
        })
    }

    pub fn cart(&self, site: &Site) -> Cart {
        self.lattice.to_cart(site.frac)
    }

    /// Occupancy-weighted count of each element in the cell.
    pub fn cell_composition(&self) -> BTreeMap<Element, f64> {
        let mut m = BTreeMap::new();
        for s in &self.sites {
            for o in &s.occupants {
                *m.entry(o.species.element).or_insert(0.0) += o.occupancy;
            }
        }
        m
    }

    /// Formula units per cell (Z, always a whole number) and the formula as chemists write it.
    ///
    /// When every element's count in the cell is whole, Z is their greatest common divisor
    /// (LiFePO4, Z = 4; Li7La3Zr2O12, Z = 8, its partly occupied Li sites adding up to 56).
    /// Otherwise Z is the greatest common divisor of the whole counts and of the multiplicities
    /// of the asymmetric-unit sites (the crystallographic Z), and the other amounts stay
    /// decimals: Na0.74CoO2 (Z = 2), Na0.1WO3 (Z = 1), Li0.5CoO2 from LiCoO2 with its Li site
    /// half filled (Z = 3), Li1.333Ti1.667O4 for the spinel Li4Ti5O12 with Li and Ti sharing
    /// 16d (Z = 8). A formula is never scaled to a fractional Z.
    pub fn formula_and_z(&self) -> (f64, String) {
        let comp = self.cell_composition();
        let whole = |c: &f64| (c - c.round()).abs() < 1e-3 && c.round() >= 1.0;
        let g = comp
            .values()
            .filter(|c| whole(c))
            .fold(0u64, |g, c| gcd_u64(g, c.round() as u64));
        let z = if comp.values().all(whole) {
            g.max(1)
        } else {
            let m = self
                .asymmetric_sites
                .iter()
                .filter(|a| !a.occupants.is_empty())
                .fold(0u64, |m, a| gcd_u64(m, a.multiplicity as u64))
                .max(1);
            if g > 0 { gcd_u64(g, m) } else { m }.max(1)
        } as f64;
        let f = write_formula(comp.iter().map(|(e, n)| (*e, n / z)));
        (z, f)
    }

    /// Molar mass of the formula unit of [`Structure::formula_and_z`], g/mol.
    pub fn formula_mass(&self) -> f64 {
        let (z, _) = self.formula_and_z();
        self.cell_composition()
            .iter()
            .map(|(e, n)| e.atomic_mass() * n)
            .sum::<f64>()
            / z
    }

    /// Density in g/cm^3.
    pub fn density(&self) -> f64 {
        const AVOGADRO: f64 = 6.022_140_76e23; // CODATA 2018, exact
        let mass_g: f64 = self
            .cell_composition()
            .iter()
            .map(|(e, n)| e.atomic_mass() * n)
            .sum::<f64>()
            / AVOGADRO;
        mass_g / (self.volume() * 1e-24)
    }
}

/// Z as a chemist writes it: "4" (fractional values, which [`Structure::formula_and_z`] no
/// longer produces, keep three decimals).
pub fn format_z(z: f64) -> String {
    if (z - z.round()).abs() < 1e-9 {
        format!("{}", z.round() as i64)
    } else {
        format!("{z:.3}")
    }
}

/// A chemical formula in the inorganic chemist's order: increasing Pauling electronegativity
/// (LiFePO4, Li7La3Zr2O12, Li6PS5Cl), elements without a value last, ties by atomic number;
/// amounts of one left out, whole amounts as integers, others to three decimals.
pub fn write_formula(amounts: impl IntoIterator<Item = (Element, f64)>) -> String {
    let mut els: Vec<(Element, f64)> = amounts.into_iter().collect();
    let key = |e: &Element| {
        let x = e.electronegativity();
        if x.is_nan() { 10.0 } else { x }
    };
    els.sort_by(|(a, _), (b, _)| {
        key(a)
            .total_cmp(&key(b))
            .then(a.atomic_number().cmp(&b.atomic_number()))
    });
    let mut f = String::new();
    for (e, n) in els {
        f.push_str(e.symbol());
        if (n - 1.0).abs() < 1e-3 {
        } else if (n - n.round()).abs() < 1e-3 {
            f.push_str(&format!("{}", n.round() as i64));
        } else {
            let s = format!("{n:.3}");
            f.push_str(s.trim_end_matches('0').trim_end_matches('.'));
        }
    }
    f
}

fn gcd_u64(a: u64, b: u64) -> u64 {
    if b == 0 { a } else { gcd_u64(b, a % b) }
}

/// A charge written after a symbol: `2+`, `+2`, `+`, `2.5+`, `-2` -> signed charge; anything
/// else (a label's digits) -> None.
pub(crate) fn read_charge(rest: &str) -> Option<f64> {
    let (sign, mag) = if let Some(m) = rest.strip_suffix('+') {
        (1.0, m)
    } else if let Some(m) = rest.strip_suffix('-') {
        (-1.0, m)
    } else if let Some(m) = rest.strip_prefix('+') {
        (1.0, m)
    } else if let Some(m) = rest.strip_prefix('-') {
        (-1.0, m)
    } else {
        return None;
    };
    if mag.is_empty() {
        return Some(sign);
    }
    if !mag.bytes().all(|b| b.is_ascii_digit() || b == b'.') {
        return None;
    }
    mag.parse::<f64>().ok().map(|m| sign * m)
}
