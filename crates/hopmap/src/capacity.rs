//! Theoretical capacity: from a chemical formula and the number of ions (or electrons) it can
//! exchange, and an upper limit from the number of sites the mobile ion can actually reach.
//!
//! `Q = x F / (3.6 M)` in mAh/g for x electrons per formula unit of molar mass M (g/mol); the
//! 3.6 turns coulombs per gram into mAh/g. Which formula M belongs to is the user's choice and
//! part of the quoted number: cathodes are usually quoted per gram of the lithiated compound
//! (LiFePO4), graphite per gram of the host (C6, giving the familiar 372 mAh/g).

use crate::element::Element;
use crate::lattice::{Frac, Lattice};
use crate::transport::FARADAY_C_PER_MOL;
use std::collections::BTreeMap;
use std::fmt;

/// Element amounts of a formula unit (fractional amounts allowed).
pub type Composition = BTreeMap<Element, f64>;

/// A formula that could not be read: the formula as given, the 1-based character column of the
/// problem, and a plain sentence.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct FormulaError {
    pub formula: String,
    pub column: usize,
    pub message: String,
}

impl fmt::Display for FormulaError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(
            f,
            "formula '{}', column {}: {}",
            self.formula, self.column, self.message
        )
    }
}

impl std::error::Error for FormulaError {}

/// Reads a simple chemical formula into element counts: element symbols (capital letter, then
/// an optional lower-case letter), each followed by an optional amount (integer or decimal,
/// "Li0.5CoO2"), and groups in round or square brackets with an amount ("LiTi2(PO4)3").
/// Repeated elements add up. Whitespace at either end is ignored; anything else (charges, dots
/// of hydrates, lower-case symbols, zero amounts) is an error naming the column.
pub fn parse_formula(formula: &str) -> Result<Composition, FormulaError> {
    let text = formula.trim();
    let lead = formula.len() - formula.trim_start().len();
    let chars: Vec<char> = text.chars().collect();
    let err = |i: usize, message: String| FormulaError {
        formula: formula.to_string(),
        column: lead + i + 1,
        message,
    };
    if chars.is_empty() {
        return Err(err(0, "the formula is empty".into()));
    }
    // Stack of partial compositions; one level per open bracket, with the bracket's column.
    let mut stack: Vec<(Composition, char, usize)> = vec![(Composition::new(), ' ', 0)];
    let mut i = 0;
    while i < chars.len() {
        let c = chars[i];
        if c == '(' || c == '[' {
            stack.push((Composition::new(), c, i));
            i += 1;
        } else if c == ')' || c == ']' {
            let want = if c == ')' { '(' } else { '[' };
            if stack.len() < 2 {
                return Err(err(
                    i,
                    format!("'{c}' closes a bracket that was never opened"),
                ));
            }
            let (inner, open, open_at) = stack.pop().unwrap();
            if open != want {
                return Err(err(
                    i,
                    format!(
                        "'{c}' does not match the '{open}' at column {}",
                        lead + open_at + 1
                    ),
                ));
            }
            if inner.is_empty() {
                return Err(err(i, "empty brackets".into()));
            }
            i += 1;
            let (n, next) = read_amount(&chars, i).map_err(|(j, m)| err(j, m))?;
            i = next;
            let top = &mut stack.last_mut().unwrap().0;
            for (e, k) in inner {
                *top.entry(e).or_insert(0.0) += k * n;
            }
        } else if c.is_ascii_uppercase() {
            let mut sym = c.to_string();
            if i + 1 < chars.len() && chars[i + 1].is_ascii_lowercase() {
                sym.push(chars[i + 1]);
            }
            let e = match Element::from_symbol(&sym) {
                Some(e) if e.symbol() == sym => e,
                _ => return Err(err(i, format!("'{sym}' is not an element symbol"))),
            };
            i += sym.len();
            let (n, next) = read_amount(&chars, i).map_err(|(j, m)| err(j, m))?;
            i = next;
            *stack.last_mut().unwrap().0.entry(e).or_insert(0.0) += n;
        } else if c.is_ascii_lowercase() {
            return Err(err(
                i,
                format!("'{c}': element symbols start with a capital letter"),
            ));
        } else if c.is_ascii_digit() || c == '.' {
            return Err(err(i, format!("amount '{c}' without an element before it")));
        } else {
            return Err(err(i, format!("unexpected character '{c}'")));
        }
    }
    if stack.len() > 1 {
        let (_, open, at) = stack.last().unwrap();
        return Err(err(*at, format!("'{open}' is never closed")));
    }
    Ok(stack.pop().unwrap().0)
}

/// Reads an optional amount at `i`; returns it (1 when absent) and the index after it.
fn read_amount(chars: &[char], i: usize) -> Result<(f64, usize), (usize, String)> {
    let mut j = i;
    while j < chars.len() && (chars[j].is_ascii_digit() || chars[j] == '.') {
        j += 1;
    }
    if j == i {
        return Ok((1.0, i));
    }
    let s: String = chars[i..j].iter().collect();
    match s.parse::<f64>() {
        Ok(v) if v > 0.0 && v.is_finite() => Ok((v, j)),
        Ok(_) => Err((i, format!("amount '{s}' must be positive"))),
        Err(_) => Err((i, format!("'{s}' is not a number"))),
    }
}

/// Molar mass of a composition, g/mol, from the standard atomic weights of [`crate::element`].
pub fn molar_mass_g_mol(composition: &Composition) -> f64 {
    composition.iter().map(|(e, n)| e.atomic_mass() * n).sum()
}

/// Gravimetric capacity `Q = x F / (3.6 M)`, mAh/g, for `electrons_per_formula_unit` = x (for
/// a monovalent ion the number of ions) and the molar mass M (g/mol) of the formula unit the
/// capacity is quoted against.
pub fn gravimetric_capacity_mah_g(electrons_per_formula_unit: f64, molar_mass_g_mol: f64) -> f64 {
    electrons_per_formula_unit * FARADAY_C_PER_MOL / (3.6 * molar_mass_g_mol)
}

/// Volumetric capacity, mAh/cm^3: gravimetric capacity (mAh/g) times density (g/cm^3).
pub fn volumetric_capacity_mah_cm3(gravimetric_mah_g: f64, density_g_cm3: f64) -> f64 {
    gravimetric_mah_g * density_g_cm3
}

/// Gravimetric capacity (mAh/g) of a formula given as text.
pub fn formula_capacity_mah_g(
    formula: &str,
    electrons_per_formula_unit: f64,
) -> Result<f64, FormulaError> {
    let c = parse_formula(formula)?;
    Ok(gravimetric_capacity_mah_g(
        electrons_per_formula_unit,
        molar_mass_g_mol(&c),
    ))
}

/// Formula of a composition, in the order of [`crate::structure::write_formula`] (increasing
/// electronegativity: LiFePO4), amounts of 1 left out.
pub fn composition_formula(composition: &Composition) -> String {
    crate::structure::write_formula(composition.iter().map(|(e, n)| (*e, *n)))
}

/// A site the mobile ion can reach (a site of the percolating network), in fractional
/// coordinates, with its site energy (eV) when known.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CandidateSite {
    pub frac: Frac,
    pub energy_ev: Option<f64>,
}

/// Shortest Li+ - Li+ separation allowed by default when packing sites, A. Observed Li-Li
/// distances in ordered lithium compounds rarely fall below about 2.3-2.5 A (common practice;
/// no single source); 2.3 A is the default, and it is a parameter.
pub const DEFAULT_MIN_LI_LI_DISTANCE_A: f64 = 2.3;

/// Why a site-packing bound could not be computed.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum CapacityError {
    #[error("{name} = {value} is not allowed: {why}")]
    BadParameter {
        name: &'static str,
        value: f64,
        why: &'static str,
    },
    #[error("no candidate sites were given")]
    NoSites,
}

/// The result of packing ions onto candidate sites.
#[derive(Debug, Clone, PartialEq)]
pub struct SitePacking {
    pub min_distance_a: f64,
    /// Supercell used, per axis: a cell narrower than the minimum distance would put an ion
    /// next to its own periodic image, so the packing is done in the smallest supercell whose
    /// perpendicular widths all reach the minimum distance.
    pub supercell: [usize; 3],
    /// Kept sites in the supercell: (index into the input sites, image shift in cells).
    pub kept: Vec<(usize, [usize; 3])>,
    /// Kept ions per original cell (may be fractional when a supercell was needed).
    pub ions_per_cell: f64,
    pub candidate_sites: usize,
}

/// Packs ions onto candidate sites so that no two are closer than `min_distance_a` (periodic
/// distances): a greedy maximal independent set. Sites are visited in a fixed order: by energy
/// (lowest first, sites without an energy after all sites with one), then by fractional position
/// (x, then y, then z, wrapped into [0, 1)), then by input order; each is kept when it is at least
/// `min_distance_a` from every site kept so far.
///
/// The greedy set is maximal (no further site fits) but not necessarily maximum, so the count is
/// a **lower estimate of the largest possible packing** of the given sites; the capacity limit it
/// gives is conservative in that sense. Distances use [`Lattice::periodic_distance`], which
/// searches the 27 nearest images of the minimum-image difference.
pub fn pack_sites(
    lattice: &Lattice,
    sites: &[CandidateSite],
    min_distance_a: f64,
) -> Result<SitePacking, CapacityError> {
    if !(min_distance_a.is_finite() && min_distance_a >= 0.0) {
        return Err(CapacityError::BadParameter {
            name: "minimum ion-ion distance (A)",
            value: min_distance_a,
            why: "must be zero or positive",
        });
    }
    if sites.is_empty() {
        return Err(CapacityError::NoSites);
    }
    if let Some(s) = sites
        .iter()
        .find(|s| s.energy_ev.is_some_and(|e| !e.is_finite()))
    {
        return Err(CapacityError::BadParameter {
            name: "site energy (eV)",
            value: s.energy_ev.unwrap(),
            why: "must be finite",
        });
    }
    let widths = lattice.perpendicular_widths();
    let mut m = [1usize; 3];
    for k in 0..3 {
        if widths[k] < min_distance_a {
            m[k] = (min_distance_a / widths[k]).ceil().max(1.0) as usize;
        }
    }
    let mut order: Vec<usize> = (0..sites.len()).collect();
    let key = |i: usize| {
        let f = sites[i].frac.wrapped();
        (sites[i].energy_ev, f.0.x, f.0.y, f.0.z)
    };
    order.sort_by(|&i, &j| {
        let (ei, xi, yi, zi) = key(i);
        let (ej, xj, yj, zj) = key(j);
        let by_energy = match (ei, ej) {
            (Some(a), Some(b)) => a.total_cmp(&b),
            (Some(_), None) => std::cmp::Ordering::Less,
            (None, Some(_)) => std::cmp::Ordering::Greater,
            (None, None) => std::cmp::Ordering::Equal,
        };
        by_energy
            .then(xi.total_cmp(&xj))
            .then(yi.total_cmp(&yj))
            .then(zi.total_cmp(&zj))
            .then(i.cmp(&j))
    });
    let super_lattice = if m == [1, 1, 1] {
        lattice.clone()
    } else {
        let v = |k: usize| lattice.vector(k) * m[k] as f64;
        Lattice::from_matrix(nalgebra::Matrix3::from_columns(&[v(0), v(1), v(2)]))
            .expect("a supercell of a valid lattice is valid")
    };
    let to_super = |i: usize, s: [usize; 3]| {
        let f = sites[i].frac.wrapped().0;
        Frac::new(
            (f.x + s[0] as f64) / m[0] as f64,
            (f.y + s[1] as f64) / m[1] as f64,
            (f.z + s[2] as f64) / m[2] as f64,
        )
    };
    let tol = 1e-9;
    let mut kept: Vec<(usize, [usize; 3])> = Vec::new();
    let mut kept_pos: Vec<Frac> = Vec::new();
    for &i in &order {
        for sx in 0..m[0] {
            for sy in 0..m[1] {
                for sz in 0..m[2] {
                    let p = to_super(i, [sx, sy, sz]);
                    if kept_pos
                        .iter()
                        .all(|q| super_lattice.periodic_distance(p, *q) >= min_distance_a - tol)
                    {
                        kept.push((i, [sx, sy, sz]));
                        kept_pos.push(p);
                    }
                }
            }
        }
    }
    let cells = (m[0] * m[1] * m[2]) as f64;
    Ok(SitePacking {
        min_distance_a,
        supercell: m,
        ions_per_cell: kept.len() as f64 / cells,
        kept,
        candidate_sites: sites.len(),
    })
}

/// As [`pack_sites`], trying also each group of sites (a symmetry orbit) first, then the rest in
/// the usual order, and keeping the packing with the most ions (ties: the plain order). A
/// greedy packing by energy alone can lose a whole orbit to a neighbour a few meV lower: in the
/// Li4Ti5O12 spinel the 16c octahedra and the 8a tetrahedra lie 1.8 A apart at almost the same
/// energy, and starting from 8a leaves half the room of 16c. Groups are tried lowest first,
/// at most [`MAX_GROUPS_TRIED`] of them.
pub fn pack_sites_best(
    lattice: &Lattice,
    sites: &[CandidateSite],
    groups: &[usize],
    min_distance_a: f64,
) -> Result<SitePacking, CapacityError> {
    let mut best = pack_sites(lattice, sites, min_distance_a)?;
    if groups.len() != sites.len() {
        return Ok(best);
    }
    let mut order: Vec<(f64, usize)> = Vec::new();
    for (s, &g) in sites.iter().zip(groups) {
        let e = s.energy_ev.unwrap_or(f64::INFINITY);
        match order.iter_mut().find(|(_, h)| *h == g) {
            Some(o) => o.0 = o.0.min(e),
            None => order.push((e, g)),
        }
    }
    order.sort_by(|a, b| a.0.total_cmp(&b.0).then(a.1.cmp(&b.1)));
    let lowest = sites
        .iter()
        .filter_map(|s| s.energy_ev)
        .fold(0.0f64, f64::min);
    for &(_, g) in order.iter().take(MAX_GROUPS_TRIED) {
        // the group's sites first (their own order kept), then every other site as before
        let shifted: Vec<CandidateSite> = sites
            .iter()
            .zip(groups)
            .map(|(s, &h)| CandidateSite {
                frac: s.frac,
                energy_ev: if h == g {
                    Some(s.energy_ev.unwrap_or(0.0) - lowest.abs() - 1e6)
                } else {
                    s.energy_ev
                },
            })
            .collect();
        let p = pack_sites(lattice, &shifted, min_distance_a)?;
        if p.kept.len() > best.kept.len() {
            best = p;
        }
    }
    Ok(best)
}

/// How many site groups [`pack_sites_best`] tries first.
pub const MAX_GROUPS_TRIED: usize = 8;

/// The oxidation states (lowest, highest) an element is cycled between in intercalation
/// electrodes: the redox couples of battery chemistry (common practice, no single source; the
/// couples of the textbook electrodes: Ti4+/Ti3+ in Li4Ti5O12 and TiO2, Fe2+/Fe3+ in LiFePO4,
/// Co3+/Co4+ in LiCoO2, Mn3+/Mn4+ in LiMn2O4, Ni2+/Ni4+ in layered nickelates, V3+ to V5+ in
/// vanadium phosphates and oxides, Nb5+ to Nb3+ in TiNb2O7, W6+/W5+ in the tungsten bronzes).
/// Elements outside this list (Zr, La, Ge, P, Al, ...) are treated as redox-inactive: a
/// framework of only such cations is a solid electrolyte, and gets no capacity.
pub fn redox_window(element: Element) -> Option<(f64, f64)> {
    let w = match element.symbol() {
        "Ti" => (3.0, 4.0),
        "V" => (3.0, 5.0),
        "Cr" => (3.0, 4.0),
        "Mn" => (2.0, 4.0),
        "Fe" => (2.0, 3.0),
        "Co" => (2.0, 4.0),
        "Ni" => (2.0, 4.0),
        "Cu" => (1.0, 2.0),
        "Nb" => (3.0, 5.0),
        "Mo" => (4.0, 6.0),
        "W" => (5.0, 6.0),
        _ => return None,
    };
    Some(w)
}

/// A framework cation species and its amount per formula unit, for the redox bound.
#[derive(Debug, Clone, PartialEq)]
pub struct FrameworkCation {
    pub element: Element,
    /// Oxidation state in the structure as given (may be a fractional average).
    pub state: f64,
    /// Amount per formula unit (occupancy included).
    pub amount: f64,
}

/// Which way the mobile ion is exchanged for the redox bound.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum RedoxDirection {
    /// Ions are taken out of the structure and the framework cations oxidised (LiFePO4 ->
    /// FePO4: Fe2+ -> Fe3+).
    Extraction,
    /// Ions are put into the structure and the framework cations reduced (Li4Ti5O12 ->
    /// Li7Ti5O12: Ti4+ -> Ti3+).
    Insertion,
}

impl RedoxDirection {
    /// "extraction" or "insertion".
    pub fn word(&self) -> &'static str {
        match self {
            RedoxDirection::Extraction => "extraction",
            RedoxDirection::Insertion => "insertion",
        }
    }
}

/// What the redox-active cations of a framework allow.
#[derive(Debug, Clone, PartialEq)]
pub struct RedoxBound {
    pub direction: RedoxDirection,
    /// Electrons per formula unit the cations can give (extraction, capped by the mobile ions
    /// present times their charge) or take (insertion).
    pub electrons_per_formula_unit: f64,
    /// The couples used, e.g. "Fe2+/Fe3+", in the order of the cations given.
    pub couples: Vec<String>,
}

fn state_name(e: Element, q: f64) -> String {
    if (q - q.round()).abs() < 1e-6 {
        format!("{}{}+", e.symbol(), q.round() as i64)
    } else {
        format!("{}{}+", e.symbol(), crate::text::trim_number(q, 2))
    }
}

/// The redox bound of a framework for a mobile ion of charge `ion_charge` present at
/// `mobile_per_formula_unit`, in the usual direction: when the structure holds the ion and its
/// cations can be oxidised, the ions can be extracted, as many as the oxidation allows and no
/// more than are there (LiFePO4: 1 e, Fe2+ -> Fe3+; LiCoO2: 1 e, Co3+ -> Co4+; LiMn2O4: 1 e,
/// Mn3.5+ -> Mn4+); otherwise ions can be inserted, as many as the reduction of the cations
/// allows (Li4Ti5O12: Ti4+ -> Ti3+, 5 e per Li4Ti5O12 before the sites run out at 3; FePO4:
/// Fe3+ -> Fe2+). None when no cation is redox-active ([`redox_window`]): a solid electrolyte.
pub fn redox_bound(
    cations: &[FrameworkCation],
    mobile_per_formula_unit: f64,
    ion_charge: u8,
) -> Option<RedoxBound> {
    let ext = redox_bound_towards(
        cations,
        mobile_per_formula_unit,
        ion_charge,
        RedoxDirection::Extraction,
    )?;
    if ext.electrons_per_formula_unit > 0.0 {
        Some(ext)
    } else {
        redox_bound_towards(
            cations,
            mobile_per_formula_unit,
            ion_charge,
            RedoxDirection::Insertion,
        )
    }
}

/// The redox bound in one direction (see [`redox_bound`]); zero electrons when the cations
/// cannot move that way (or, for extraction, when the structure holds none of the ion). None
/// when no cation is redox-active.
pub fn redox_bound_towards(
    cations: &[FrameworkCation],
    mobile_per_formula_unit: f64,
    ion_charge: u8,
    direction: RedoxDirection,
) -> Option<RedoxBound> {
    let active: Vec<(&FrameworkCation, (f64, f64))> = cations
        .iter()
        .filter(|c| c.amount > 0.0)
        .filter_map(|c| redox_window(c.element).map(|w| (c, w)))
        .collect();
    if active.is_empty() {
        return None;
    }
    let tol = 1e-6;
    let electrons = match direction {
        RedoxDirection::Extraction => active
            .iter()
            .map(|(c, (_, hi))| c.amount * (hi - c.state).max(0.0))
            .sum::<f64>()
            .min(mobile_per_formula_unit.max(0.0) * ion_charge as f64),
        RedoxDirection::Insertion => active
            .iter()
            .map(|(c, (lo, _))| c.amount * (c.state - lo).max(0.0))
            .sum::<f64>(),
    };
    let mut couples: Vec<String> = Vec::new();
    for (c, (lo, hi)) in &active {
        let to = match direction {
            RedoxDirection::Extraction => *hi,
            RedoxDirection::Insertion => *lo,
        };
        if (to - c.state).abs() < tol || electrons < tol {
            continue;
        }
        let couple = format!(
            "{}/{}",
            state_name(c.element, c.state),
            state_name(c.element, to)
        );
        if !couples.contains(&couple) {
            couples.push(couple);
        }
    }
    Some(RedoxBound {
        direction,
        electrons_per_formula_unit: if electrons < tol { 0.0 } else { electrons },
        couples,
    })
}

/// Which bound sets the reported capacity.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum CapacityLimit {
    /// The redox (formula) bound: how many electrons the framework can give or take.
    Redox,
    /// The site bound: how many mobile ions fit on the reachable sites.
    Sites,
}

/// Theoretical capacity with the bound that limits it.
#[derive(Debug, Clone, PartialEq)]
pub struct CapacityReport {
    /// Formula the capacity is quoted against.
    pub formula: String,
    pub molar_mass_g_mol: f64,
    /// Redox bound: electrons exchanged per formula unit, and the capacity it gives (mAh/g).
    pub redox_electrons_per_formula_unit: f64,
    pub redox_capacity_mah_g: f64,
    /// Site bound, when sites were packed: ions per formula unit, and mAh/g (ions times charge).
    pub site_ions_per_formula_unit: Option<f64>,
    pub site_capacity_mah_g: Option<f64>,
    /// The smaller of the two bounds, mAh/g.
    pub capacity_mah_g: f64,
    /// Volumetric capacity, mAh/cm^3, when a density was given.
    pub capacity_mah_cm3: Option<f64>,
    pub limited_by: CapacityLimit,
    /// Extraction or insertion, when the redox bound came from the framework's cations
    /// ([`redox_bound`]); None when the electron count was given.
    pub direction: Option<RedoxDirection>,
    /// The redox couples behind the redox bound ("Fe2+/Fe3+").
    pub couples: Vec<String>,
}

impl CapacityReport {
    /// Combines the redox bound (electrons per formula unit) with an optional site bound.
    /// `site_packing` with `formula_units_per_cell` (Z) and `ion_charge` (1 for Li+, 2 for Mg2+)
    /// turns packed ions per cell into electrons per formula unit. Ties go to the redox bound.
    pub fn new(
        composition: &Composition,
        redox_electrons_per_formula_unit: f64,
        site_packing: Option<(&SitePacking, f64)>,
        ion_charge: u8,
        density_g_cm3: Option<f64>,
    ) -> Result<Self, CapacityError> {
        let mass = molar_mass_g_mol(composition);
        if !(mass > 0.0) {
            return Err(CapacityError::BadParameter {
                name: "molar mass (g/mol)",
                value: mass,
                why: "the composition is empty",
            });
        }
        if !(redox_electrons_per_formula_unit.is_finite()
            && redox_electrons_per_formula_unit >= 0.0)
        {
            return Err(CapacityError::BadParameter {
                name: "electrons per formula unit",
                value: redox_electrons_per_formula_unit,
                why: "must be zero or positive",
            });
        }
        if ion_charge == 0 {
            return Err(CapacityError::BadParameter {
                name: "ion charge",
                value: 0.0,
                why: "must be at least 1",
            });
        }
        let redox = gravimetric_capacity_mah_g(redox_electrons_per_formula_unit, mass);
        let (site_ions, site_q) = match site_packing {
            Some((p, z)) => {
                if !(z.is_finite() && z > 0.0) {
                    return Err(CapacityError::BadParameter {
                        name: "formula units per cell (Z)",
                        value: z,
                        why: "must be positive",
                    });
                }
                let ions = p.ions_per_cell / z;
                (
                    Some(ions),
                    Some(gravimetric_capacity_mah_g(ions * ion_charge as f64, mass)),
                )
            }
            None => (None, None),
        };
        let (q, limit) = match site_q {
            Some(s) if s < redox => (s, CapacityLimit::Sites),
            _ => (redox, CapacityLimit::Redox),
        };
        Ok(CapacityReport {
            formula: composition_formula(composition),
            molar_mass_g_mol: mass,
            redox_electrons_per_formula_unit,
            redox_capacity_mah_g: redox,
            site_ions_per_formula_unit: site_ions,
            site_capacity_mah_g: site_q,
            capacity_mah_g: q,
            capacity_mah_cm3: density_g_cm3.map(|d| volumetric_capacity_mah_cm3(q, d)),
            limited_by: limit,
            direction: None,
            couples: vec![],
        })
    }

    /// The capacity of a framework from its redox bound ([`redox_bound`]) and, when sites were
    /// packed, the site bound: for extraction the ions the reachable sites hold, for insertion
    /// the room left on them (`site_ions_per_formula_unit` minus the ions already present).
    /// Both in ions per formula unit; `present_per_formula_unit` counts only ions that could sit
    /// on the reachable sites.
    pub fn from_redox(
        composition: &Composition,
        bound: &RedoxBound,
        site_ions_per_formula_unit: Option<f64>,
        present_per_formula_unit: f64,
        ion_charge: u8,
        density_g_cm3: Option<f64>,
    ) -> Result<Self, CapacityError> {
        let mut r = CapacityReport::new(
            composition,
            bound.electrons_per_formula_unit,
            None,
            ion_charge.max(1),
            density_g_cm3,
        )?;
        if let Some(sites) = site_ions_per_formula_unit {
            let ions = match bound.direction {
                RedoxDirection::Extraction => sites,
                RedoxDirection::Insertion => (sites - present_per_formula_unit).max(0.0),
            };
            let q = gravimetric_capacity_mah_g(ions * ion_charge as f64, r.molar_mass_g_mol);
            r.site_ions_per_formula_unit = Some(ions);
            r.site_capacity_mah_g = Some(q);
            if q < r.redox_capacity_mah_g {
                r.capacity_mah_g = q;
                r.limited_by = CapacityLimit::Sites;
                r.capacity_mah_cm3 = density_g_cm3.map(|d| volumetric_capacity_mah_cm3(q, d));
            }
        }
        r.direction = Some(bound.direction);
        r.couples = bound.couples.clone();
        Ok(r)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn composition_formula_writes_amounts() {
        let c = parse_formula("Li0.5CoO2").unwrap();
        assert_eq!(composition_formula(&c), "Li0.5CoO2");
    }
}
