//! A structure built from parts held in memory: cell vectors, species, fractional coordinates
//! and occupancies, as a program (the Python binding, a pymatgen Structure, an ASE Atoms) holds
//! them. Checked as a file would be: errors name the source and the entry.

use crate::error::InputError;
use crate::lattice::{Frac, Lattice};
use crate::structure::{AsymmetricSite, Occupant, Species, Structure, SymmetryInfo};

/// Entries closer than this (A) share one site: a mixed site listed once per occupant.
const SAME_SITE_A: f64 = 1e-3;

/// The parts of a structure. Entry `i` is `species[i]` at `frac[i]` with `occupancy[i]`;
/// entries at the same position make one mixed site.
#[derive(Debug, Clone, PartialEq)]
pub struct Parts {
    /// Names the structure, and the source in messages.
    pub name: String,
    /// Cell vectors a, b, c as rows, A.
    pub lattice: [[f64; 3]; 3],
    /// Element with an optional charge, as in a CIF type symbol: `Li`, `Li+`, `Fe2+`, `O2-`.
    pub species: Vec<String>,
    pub frac: Vec<[f64; 3]>,
    /// Occupancies (empty: all 1).
    pub occupancy: Vec<f64>,
}

/// Builds the structure of `parts` with P 1 symmetry, then finds its symmetry as for a P 1 file
/// ([`crate::symmetry::complete_symmetry`]; `keep_cell` keeps the given cell).
pub fn structure_from_parts(parts: &Parts, keep_cell: bool) -> Result<Structure, InputError> {
    let file = parts.name.as_str();
    let n = parts.species.len();
    if n == 0 {
        return Err(InputError::new(file, "the structure has no atoms"));
    }
    if parts.frac.len() != n {
        return Err(InputError::new(
            file,
            format!(
                "{n} species but {} fractional positions: give one position per species",
                parts.frac.len()
            ),
        ));
    }
    if !parts.occupancy.is_empty() && parts.occupancy.len() != n {
        return Err(InputError::new(
            file,
            format!(
                "{n} species but {} occupancies: give one occupancy per species, or none",
                parts.occupancy.len()
            ),
        ));
    }
    let [a, b, c] = parts.lattice;
    let lattice = Lattice::from_vectors(a, b, c)
        .map_err(|e| InputError::new(file, format!("cell vectors: {e}")))?;
    let mut asym: Vec<AsymmetricSite> = Vec::new();
    let mut count: std::collections::HashMap<String, usize> = Default::default();
    for i in 0..n {
        let entry = || format!("entry {i}");
        let symbol = parts.species[i].trim();
        let species = Species::parse(symbol).map_err(|e| {
            InputError::new(file, format!("{e} (e.g. Li, Fe2+, O2-)")).context(entry())
        })?;
        let (element, oxidation) = (species.element, species.oxidation);
        let f = parts.frac[i];
        if f.iter().any(|x| !x.is_finite()) {
            return Err(InputError::new(
                file,
                format!("fractional position {f:?} is not a finite number"),
            )
            .context(entry()));
        }
        let occupancy = parts.occupancy.get(i).copied().unwrap_or(1.0);
        if !(occupancy > 0.0 && occupancy <= 1.0 + 1e-6) {
            return Err(
                InputError::new(file, format!("occupancy {occupancy} must lie in (0, 1]"))
                    .context(entry()),
            );
        }
        let frac = Frac::new(f[0], f[1], f[2]).wrapped();
        let k = count.entry(element.symbol().to_string()).or_insert(0);
        *k += 1;
        let occupant = Occupant {
            species: Species::new(element, oxidation),
            occupancy,
            label: format!("{}{}", element.symbol(), k),
        };
        match asym
            .iter_mut()
            .find(|s| lattice.periodic_distance(s.frac, frac) < SAME_SITE_A)
        {
            Some(site) => site.occupants.push(occupant),
            None => asym.push(AsymmetricSite {
                label: occupant.label.clone(),
                frac,
                occupants: vec![occupant],
                multiplicity: 1,
                wyckoff: None,
            }),
        }
    }
    let sites = asym
        .iter()
        .enumerate()
        .map(|(i, s)| crate::structure::Site {
            frac: s.frac,
            occupants: s.occupants.clone(),
            asym_index: i,
        })
        .collect();
    let total: f64 = asym
        .iter()
        .map(|s| s.occupants.iter().map(|o| o.occupancy).sum::<f64>())
        .fold(0.0, f64::max);
    let mut warnings = Vec::new();
    if total > 1.0 + 1e-3 {
        warnings.push(format!(
            "a site holds occupants whose occupancies add up to {total:.3}, above 1"
        ));
    }
    let structure = Structure {
        name: parts.name.clone(),
        lattice,
        symmetry: SymmetryInfo::p1("built from parts in memory: the whole cell as given, P 1"),
        asymmetric_sites: asym,
        sites,
        warnings,
        oxidation_states_assigned: false,
    };
    Ok(crate::symmetry::complete_symmetry(structure, keep_cell))
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Rock-salt LiF from parts (a = 4.0270 A, Fm-3m; lattice constant from the ICSD-derived
    /// handbook value, common practice): the symmetry found is Fm-3m (225) and the cell holds
    /// four formula units.
    #[test]
    fn rock_salt_from_parts_finds_its_space_group() {
        let a = 4.027;
        let mut species = vec![];
        let mut frac = vec![];
        for t in [
            [0.0, 0.0, 0.0],
            [0.5, 0.5, 0.0],
            [0.5, 0.0, 0.5],
            [0.0, 0.5, 0.5],
        ] {
            species.push("Li+".to_string());
            frac.push(t);
            species.push("F-".to_string());
            frac.push([t[0] + 0.5, t[1], t[2]]);
        }
        let p = Parts {
            name: "LiF".into(),
            lattice: [[a, 0.0, 0.0], [0.0, a, 0.0], [0.0, 0.0, a]],
            species,
            frac,
            occupancy: vec![],
        };
        let s = structure_from_parts(&p, false).unwrap();
        assert_eq!(s.symmetry.number, Some(225));
        assert_eq!(s.sites.len(), 8);
        assert_eq!(s.asymmetric_sites.len(), 2);
    }

    #[test]
    fn mixed_site_and_bad_entries() {
        let p = Parts {
            name: "mixed".into(),
            lattice: [[3.0, 0.0, 0.0], [0.0, 3.0, 0.0], [0.0, 0.0, 3.0]],
            species: vec!["Li+".into(), "Na+".into(), "Cl-".into()],
            frac: vec![[0.0; 3], [0.0; 3], [0.5; 3]],
            occupancy: vec![0.5, 0.5, 1.0],
        };
        let s = structure_from_parts(&p, true).unwrap();
        assert_eq!(s.sites.len(), 2);
        assert_eq!(s.sites[0].occupants.len(), 2);

        let mut bad = p.clone();
        bad.species[2] = "Zz".into();
        let e = structure_from_parts(&bad, true).unwrap_err();
        assert_eq!(e.context.as_deref(), Some("entry 2"));
        assert!(e.to_string().starts_with("mixed: entry 2:"), "{e}");
        let mut bad = p.clone();
        bad.frac.pop();
        assert!(structure_from_parts(&bad, true).is_err());
        let mut bad = p;
        bad.lattice[2] = [0.0, 0.0, 0.0];
        assert!(structure_from_parts(&bad, true).is_err());
    }
}
