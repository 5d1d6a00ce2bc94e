//! Chemical elements: symbol, atomic number, standard atomic weight, common oxidation states.
//!
//! The table itself is generated (see `element_table.rs`); this module gives it a type.

use crate::element_table::ELEMENTS;
use std::fmt;

/// A chemical element, stored as its atomic number.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub struct Element(u8);

impl Element {
    /// Looks an element up by symbol, case-insensitively ("Li", "LI", "li").
    pub fn from_symbol(sym: &str) -> Option<Element> {
        ELEMENTS
            .iter()
            .find(|(s, ..)| s.eq_ignore_ascii_case(sym))
            .map(|(_, z, ..)| Element(*z))
    }

    /// Reads the element at the start of a CIF label or type symbol: "Fe1" -> Fe, "O2-" -> O,
    /// "Nb5+" -> Nb, "LI1" -> Li, "Oa" -> O. Two letters are tried before one.
    pub fn from_label_prefix(label: &str) -> Option<Element> {
        let letters: String = label
            .chars()
            .take_while(|c| c.is_ascii_alphabetic())
            .take(2)
            .collect();
        if letters.len() == 2
            && let Some(e) = Element::from_symbol(&letters)
        {
            // "Oa", "Ob" style labels: prefer the one-letter element when the second letter
            // is lower case and the pair is not a real symbol; real pairs ("Os") win.
            return Some(e);
        }
        letters.get(..1).and_then(Element::from_symbol)
    }

    pub fn from_atomic_number(z: u8) -> Option<Element> {
        if z >= 1 && (z as usize) <= ELEMENTS.len() {
            Some(Element(z))
        } else {
            None
        }
    }

    fn row(&self) -> &'static (&'static str, u8, f64, &'static [i8], f64, &'static [i8]) {
        &ELEMENTS[self.0 as usize - 1]
    }
    pub fn symbol(&self) -> &'static str {
        self.row().0
    }
    pub fn atomic_number(&self) -> u8 {
        self.0
    }
    /// Standard atomic weight, g/mol.
    pub fn atomic_mass(&self) -> f64 {
        self.row().2
    }
    /// Common oxidation states, most common first as listed by the source table.
    pub fn common_oxidation_states(&self) -> &'static [i8] {
        self.row().3
    }
    /// Every oxidation state worth trying for this element: the common ones (most common first),
    /// then the further states observed in the Inorganic Crystal Structure Database in
    /// increasing order (pymatgen's `icsd_oxidation_states`: Ni3+, Ni4+, Co4+, Ti3+, ...).
    pub fn known_oxidation_states(&self) -> Vec<i8> {
        let common = self.row().3;
        let mut v = common.to_vec();
        v.extend(self.row().5.iter().copied().filter(|q| !common.contains(q)));
        v
    }
    /// Period (row) of the periodic table, 1-7: the principal quantum number of the valence shell.
    pub fn period(&self) -> u8 {
        match self.0 {
            0..=2 => 1,
            3..=10 => 2,
            11..=18 => 3,
            19..=36 => 4,
            37..=54 => 5,
            55..=86 => 6,
            _ => 7,
        }
    }
    /// Pauling electronegativity (NaN for the noble gases without one).
    pub fn electronegativity(&self) -> f64 {
        self.row().4
    }
    /// Anions of the bond-valence method (elements that take a negative formal charge in the
    /// frameworks hopmap handles).
    pub fn is_usual_anion(&self) -> bool {
        matches!(
            self.symbol(),
            "O" | "S" | "Se" | "Te" | "F" | "Cl" | "Br" | "I" | "N" | "P" | "As" | "H"
        )
    }
}

impl fmt::Display for Element {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.symbol())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn symbols_and_labels() {
        assert_eq!(Element::from_symbol("li").unwrap().symbol(), "Li");
        assert_eq!(Element::from_label_prefix("Fe1").unwrap().symbol(), "Fe");
        assert_eq!(Element::from_label_prefix("O2-").unwrap().symbol(), "O");
        assert_eq!(Element::from_label_prefix("Nb5+").unwrap().symbol(), "Nb");
        assert_eq!(Element::from_label_prefix("LI1").unwrap().symbol(), "Li");
        assert_eq!(Element::from_label_prefix("O1").unwrap().symbol(), "O");
        assert!(Element::from_label_prefix("1abc").is_none());
    }

    #[test]
    fn standard_atomic_weights_match_the_iupac_values() {
        // IUPAC conventional weights as printed in the CRC Handbook (from memory): Li 6.94,
        // Fe 55.845, O 15.999.
        assert!((Element::from_symbol("Li").unwrap().atomic_mass() - 6.94).abs() < 0.01);
        assert!((Element::from_symbol("Fe").unwrap().atomic_mass() - 55.845).abs() < 0.001);
        assert!((Element::from_symbol("O").unwrap().atomic_mass() - 15.999).abs() < 0.001);
    }
}
