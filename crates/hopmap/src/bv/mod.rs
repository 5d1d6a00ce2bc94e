//! Bond valence: parameter tables, valence check of a structure, oxidation-state assignment, and
//! the resolved landscape model of a probe ion (science notes, sections 1 and 2).
//!
//! # The parts
//! - [`params`]: the bond-valence parameter table (R0, b per cation-anion pair, with reference
//!   ids and citations) and the rule that picks one row per pair.
//! - [`radii`]: Shannon effective ionic radii, principal quantum numbers, and the mobile ions'
//!   usual valence and coordination number.
//! - [`overrides`]: a TOML file that replaces any of those values and the model knobs.
//! - [`valence`]: bond-valence sums per site, the global instability index and a verdict.
//! - [`oxidation`]: charge-neutral oxidation states when the file gives none.
//! - [`model`]: framework plus probe ion, every number resolved: the
//!   [`crate::landscape::LandscapeModel`] and a provenance record of where each number came from.
//!
//! # Which parameters are used (the selection rule)
//! Every pair is looked up by the exact cation and anion valence. Rows are tried in this order:
//! 1. A value from the user's override file, when one matches the pair.
//! 2. For the pair of the **mobile ion** with an anion: the softness-sensitive sets fitted with
//!    contacts out to a long cutoff, ref `c` (Adams, Acta Cryst. B57 (2001) 278; alkali metals,
//!    cutoffs of 6, 7 or 8 A stated per row) then ref `ax` (Adams, Moretsky & Canadell, Solid State
//!    Ionics 168 (2004) 281; H and Mo, cutoffs stated per row, "b determined from softness").
//!    These are the only two sets in the table whose authors fitted b to softness; ref `ay`
//!    (Cabana et al. 2004, Li-O and Li-N with 6-6.5 A cutoffs) also uses a long cutoff but is
//!    not Adams' set, so it is only reached at step 5.
//! 3. For every pair (framework pairs start here): the first-shell sets, ref `a` (Brown &
//!    Altermatt 1985), then ref `b` (Brese & O'Keeffe 1991).
//! 4. Other first-shell rows in the order of the source file, which lists alternatives for a
//!    pair "in decreasing order of reliability".
//! 5. Rows fitted with a stated long cutoff that step 2 did not take (e.g. `ay`, or `c` for a
//!    framework pair), used with their own cutoff.
//! 6. The same order again over rows whose cation valence is 9: the source file's mark for
//!    "valence not given in the paper, may apply to all oxidation states". A note says so.
//! 7. The O'Keeffe & Brese (J. Am. Chem. Soc. 113 (1991) 3226) element estimate,
//!    `R0 = r_A + r_X - r_A r_X (sqrt(c_A) - sqrt(c_X))^2 / (c_A r_A + c_X r_X)`, b = 0.37 A,
//!    flagged as a fallback in every output that used it.
//!
//! When neither a row nor the estimate exists, the look-up fails with an error naming the pair.
//!
//! A fractional average valence (Mn3.5+) is resolved at the two neighbouring integer valences and
//! R0 and b interpolated linearly; when only one of them has a row, that one is used and a note
//! says so.
//!
//! # Cutoff conventions
//! A parameter set is tied to the contacts it was fitted with. First-shell sets (`a`, `b`, most
//! others, and the fallback) count a contact when its bond valence is at least 0.01 v.u., that
//! is out to `R0 + b ln 100` (about R0 + 1.7 A for b = 0.37): this takes the whole first
//! coordination shell and no second-shell counter-ion that would add more than 0.01 v.u.
//! Long-cutoff sets (`c`, `ax`, `ay`, `bk`) count every contact out to the cutoff written in the
//! row's details.

pub mod model;
pub mod overrides;
pub mod oxidation;
pub mod params;
pub mod radii;
pub mod valence;

pub use model::{ModelKnobs, ModelProvenance, build_model};
pub use overrides::Overrides;
pub use oxidation::{
    OxidationAssignment, OxidationSetting, apply_oxidation_settings, assign_oxidation_states,
};
pub use params::{BondParams, CutoffConvention, PairRole, ParameterTable, ValueOrigin};
pub use valence::{ValenceReport, Verdict, valence_check};

use crate::error::InputError;

/// Bond valence (v.u.) of one contact at distance `r` (A): `s = exp((r0 - r) / b)`
/// (Brown & Altermatt, Acta Cryst. B41 (1985) 244).
pub fn bond_valence(r0: f64, b: f64, r: f64) -> f64 {
    ((r0 - r) / b).exp()
}

/// What can go wrong between a structure and a resolved model.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum BvError {
    #[error(
        "no bond-valence parameters for the pair {pair}: no row in the table for these valences, \
         and the O'Keeffe-Brese estimate has no r and c for {missing}; give R0 and b for this \
         pair in an override file"
    )]
    MissingPair { pair: String, missing: String },
    #[error(
        "site '{site}': {element} has no oxidation state; assign oxidation states first (or give \
         them in the file)"
    )]
    MissingOxidationState { site: String, element: String },
    #[error("no Shannon radius for {species}: the table has none for this element and charge")]
    MissingRadius { species: String },
    #[error(
        "{element} has no usual valence as a mobile ion in hopmap's table; give one in an \
         override file ([probe] valence = ...)"
    )]
    UnknownProbeValence { element: String },
    #[error("no excluded site is labelled '{label}' in structure '{structure}'")]
    UnknownLabel { label: String, structure: String },
    #[error("structure '{structure}': {message}")]
    Structure { structure: String, message: String },
    #[error("no charge-neutral oxidation states for {formula}: {message}")]
    NoNeutralAssignment { formula: String, message: String },
    #[error("{0}")]
    Input(#[from] InputError),
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_contact_at_r0_has_valence_one() {
        assert!((bond_valence(1.815, 0.37, 1.815) - 1.0).abs() < 1e-15);
        // one b further out: 1/e
        assert!((bond_valence(1.815, 0.37, 2.185) - (-1f64).exp()).abs() < 1e-15);
    }
}
