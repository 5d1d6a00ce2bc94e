//! Formulas as chemists write them: the formula unit of the host with decimal amounts for the
//! partly filled sites, and a whole Z. Reference values: the cell contents (exact arithmetic
//! of multiplicities and occupancies) and the crystallographic Z of each structure type as
//! given in the International Tables multiplicities (spinel and garnet Z = 8, olivine 4,
//! layered R-3m hexagonal cell 3, P2 NaxCoO2 2).

use hopmap::element::Element;
use hopmap::lattice::Frac;
use hopmap::read::read_structure;
use hopmap::structure::{AsymmetricSite, Occupant, Site, Species, Structure};
use std::path::Path;

fn reference(name: &str) -> Structure {
    let p = Path::new(concat!(env!("CARGO_MANIFEST_DIR"), "/../.."))
        .join("structures/reference")
        .join(name);
    read_structure(&p, None).unwrap()
}

fn set_occupancy(s: &mut Structure, element: &str, occ: f64) {
    let e = Element::from_symbol(element).unwrap();
    for o in s
        .sites
        .iter_mut()
        .flat_map(|x| x.occupants.iter_mut())
        .chain(
            s.asymmetric_sites
                .iter_mut()
                .flat_map(|a| a.occupants.iter_mut()),
        )
    {
        if o.species.element == e {
            o.occupancy = occ;
        }
    }
}

#[test]
fn stoichiometric_structures_keep_their_usual_formula_and_z() {
    let f = |n: &str| reference(n).formula_and_z();
    assert_eq!(f("LiFePO4_olivine.cif"), (4.0, "LiFePO4".into()));
    assert_eq!(f("LiCoO2_layered.cif"), (3.0, "LiCoO2".into()));
    assert_eq!(f("LiMn2O4_spinel.cif"), (8.0, "LiMn2O4".into()));
    // 56 Li on partly filled sites still add up to 7 per formula unit
    assert_eq!(f("Li7La3Zr2O12_garnet.cif"), (8.0, "Li7La3Zr2O12".into()));
}

#[test]
fn partly_filled_sites_give_decimals_on_the_host_formula_unit() {
    assert_eq!(
        reference("Na0.74CoO2_P2.cif").formula_and_z(),
        (2.0, "Na0.74CoO2".into())
    );
    // LiCoO2 with its Li site half filled: Li1.5Co3O6 per cell -> Li0.5CoO2, Z = 3 (not
    // LiCo2O4 with Z = 1.5)
    let mut s = reference("LiCoO2_layered.cif");
    set_occupancy(&mut s, "Li", 0.5);
    assert_eq!(s.formula_and_z(), (3.0, "Li0.5CoO2".into()));
    // spinel Li[Li1/3 Ti5/3]O4: Z = 8, the 16d site shared by Li 1/6 and Ti 5/6
    assert_eq!(
        reference("Li4Ti5O12_spinel.cif").formula_and_z(),
        (8.0, "Li1.333Ti1.667O4".into())
    );
}

#[test]
fn a_tenth_of_an_a_site_stays_a_decimal() {
    // the ReO3-type NbO2F cell (Z = 1) with Na at 10 % on the empty A site (1b, the cube
    // centre), as in a tungsten bronze Na0.1WO3: Na0.1NbO2F, not NaNb10O20F10 with Z = 0.1
    let mut s = reference("NbO2F_ReO3type.cif");
    let na = Occupant {
        species: Species::new(Element::from_symbol("Na").unwrap(), Some(1.0)),
        occupancy: 0.1,
        label: "Na1".into(),
    };
    s.sites.push(Site {
        frac: Frac::new(0.5, 0.5, 0.5),
        occupants: vec![na.clone()],
        asym_index: s.asymmetric_sites.len(),
    });
    s.asymmetric_sites.push(AsymmetricSite {
        label: "Na1".into(),
        frac: Frac::new(0.5, 0.5, 0.5),
        occupants: vec![na],
        multiplicity: 1,
        wyckoff: Some("b".into()),
    });
    assert_eq!(s.formula_and_z(), (1.0, "Na0.1NbO2F".into()));
}
