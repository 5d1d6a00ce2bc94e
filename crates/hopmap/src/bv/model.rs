//! From a structure and a probe ion to a fully resolved [`LandscapeModel`] (science notes,
//! section 2), with a [`ModelProvenance`] that lists every number used and its source.
//!
//! # The framework
//! The framework is the structure minus every occupant of the mobile element and minus every
//! occupant whose label (or whose site's label) is in the exclusion list. A mixed site keeps its
//! other occupants at their own occupancy (a Li0.5Ti0.5 site keeps Ti at 0.5). The oxidation
//! states are those of the whole structure, mobile ions included.
//!
//! - A framework occupant with a negative state is an anion: it binds the probe through the
//!   probe-anion pair of the selection rule (the softness-sensitive set where there is one;
//!   otherwise, with `softness_transfer`, the first-shell pair made soft by [`soften_pair`]),
//!   with `Rmin = R0 - b ln(V_A / N_A)`, well depth D0 and the pair's cutoff.
//! - An occupant with a positive state is a cation: it repels the probe with charge
//!   `V / n^q x charge scale` (n the period of the element, q `charge_shell_exponent`) and
//!   screening length `rho = screening factor x (r_probe + r_cation)`, the Shannon radii of the
//!   probe at its usual coordination and of the cation at its coordination in this structure.
//! - Framework cations on sites that stand empty at least `vacancy_share_threshold` of the time
//!   are left out: the ion moves through that vacant share (A-site-deficient perovskites).
//! - Occupants with state zero take no part (noted).
//! - With `mobile_charge_scale > 0`, the other ions of the mobile species repel the probe from
//!   their sites (mean field), except the two nearest, the site it left and the vacancy it
//!   moves into. Off by default: on the reference set it does not lower the barrier error.
//!
//! # Default knobs ([`ModelKnobs::default`]) and the evidence for them
//! Chosen on the reference set (`structures/reference/references.csv`: 59 host/ion rows, 45 with
//! published barriers) by `cargo bench --bench model_evidence`, scored leave-one-family-out; the
//! table and the rejected alternatives are in `docs/model.md`.
//! - `d0_ev = 0.21` eV per bond for a monovalent probe, `D0 = d0_ev x V_A x (2 A / Rmin)^3`
//!   (`d0_scales_with_valence`, `d0_length_exponent = 3`): longer bonds (larger ions, softer
//!   anions) make shallower wells, as the electrostatic energy of a bond falls with its length.
//! - `screening_factor = 1.4`, `charge_shell_exponent = 0.75`, `charge_scale = 1.0`: a screened
//!   repulsion long enough to tell an octahedral site sharing edges with framework cations from
//!   a tetrahedral one sharing corners (spinel 16c against 8a), with charges softened towards
//!   the effective charges of heavier cations.
//! - `softness_transfer = true`: Ag+, Cu+, Mg2+ and the other probes without a softness-sensitive
//!   set borrow the softness of the nearest alkali; without it their barriers come out several
//!   eV high (AgCl 7.9 eV against 0.3).
//! - `morse_cutoff_a = None`: each probe-anion pair uses its parameter set's own cutoff: the
//!   stated cutoff of a softness-sensitive row (6 A for Li-O, Na-O of ref c), or
//!   `R0 + b ln 100` for first-shell sets (bond valences below 0.01 v.u. dropped).
//! - `coulomb_cutoff_a = None`: `max(8 A, 4 x largest rho)`; `erfc(4) = 1.5e-8`, so the
//!   screened repulsion is negligible beyond it.
//! - `energy_cap_ev = 10`, `mismatch_cap = 10` v.u.
//! - `d0_chalcogenide_factor = 1`: S, Se and Te pairs get the same depth rule as the others (a
//!   factor above 1 lowers the error but moves the lowest site into empty pockets in more than
//!   10% of hosts; table in `docs/model.md`).
//! - `probe_valence`, `probe_coordination` = `None`: the mobile-ion table's values.
//!
//! Cation coordination numbers are counted from the full structure: counter-ions bonded with at
//! least 0.04 v.u. (first-shell parameters), occupancy-weighted, averaged over the species'
//! sites and rounded for the radius look-up; 6 with a note when they cannot be counted.

use super::BvError;
use super::params::{BondParams, PairRole, ParameterTable, ValueOrigin};
use super::radii::RadiusValue;
use super::valence::valence_check;
use crate::element::Element;
use crate::landscape::{
    AnionKind, CationKind, FrameworkAtom, FrameworkKind, LandscapeModel, MobileRepulsion, ProbeIon,
};
use crate::structure::{Species, Structure};
use std::collections::BTreeMap;

/// Bond length (A) at which the length rule of the well depth leaves `d0_ev` unchanged: the
/// Morse minimum of Li-O at N_A = 5 with the softness-sensitive parameters (1.1745 + 0.514 ln 5
/// = 2.0 A).
pub const D0_REFERENCE_RMIN_A: f64 = 2.0;

/// Partly occupied positions closer than this (A) are one site split over several positions when
/// the vacant share of a site is counted.
pub const SPLIT_SITE_A: f64 = 0.8;

/// The calibration knobs of the landscape model. Plain numbers; [`Default`] gives the
/// documented starting values (see the module docs).
#[derive(Debug, Clone, PartialEq)]
pub struct ModelKnobs {
    /// Morse well depth per bond for a monovalent probe (eV).
    pub d0_ev: f64,
    /// When true, `D0 = d0_ev x V_A`; when false, `D0 = d0_ev` for every probe.
    pub d0_scales_with_valence: bool,
    /// rho = screening_factor x (r_probe + r_cation).
    pub screening_factor: f64,
    /// Cation charges and the probe charge are the formal valences times this.
    pub charge_scale: f64,
    /// Charges of the repulsion are `V / n^p` with n the period of the element (the principal
    /// quantum number of its valence shell) and p this exponent; 0 keeps formal valences.
    pub charge_shell_exponent: f64,
    /// `D0 = d0_ev x V_A x (D0_REFERENCE_RMIN_A / Rmin)^p` per probe-anion pair, p this
    /// exponent: 0 gives one depth for every pair; p > 0 makes longer (softer, larger-ion) bonds
    /// shallower, as the electrostatic energy of a bond scales with 1/R.
    pub d0_length_exponent: f64,
    /// Factor on `D0` of the pairs with a chalcogenide anion (S, Se, Te), on top of the length
    /// rule: 1 treats them as the oxides are treated.
    pub d0_chalcogenide_factor: f64,
    /// Charge scale of the other mobile ions of the structure, left at their sites as a mean
    /// field that repels the probe (0: not modelled, the probe sees the bare framework).
    pub mobile_charge_scale: f64,
    /// Sites of the mobile ion nearest the probe that take no part in that repulsion: 2 for a
    /// vacancy hop (the site the probe left and the vacancy it moves into).
    pub mobile_excluded_nearest: usize,
    /// Framework cations on sites that stand empty at least this share of the time (one minus
    /// the framework occupancy of the site, split positions within [`SPLIT_SITE_A`] counted as
    /// one site) are left out of the landscape: the ion moves through the vacant share of those
    /// sites (A-site-deficient perovskites). Above 1: never.
    pub vacancy_share_threshold: f64,
    /// For a probe without a softness-sensitive (long-cutoff) parameter set for an anion (Ag+,
    /// Cu+, Mg2+, ...), borrow the softness `b` and the cutoff of the alkali ion nearest in size
    /// and move R0 so that the bond valence at the ideal bond length is unchanged (see
    /// [`soften_pair`]).
    pub softness_transfer: bool,
    /// Cutoff of the Morse and bond-valence terms (A); `None`: each pair's own cutoff.
    pub morse_cutoff_a: Option<f64>,
    /// Cutoff of the screened repulsion (A); `None`: `max(8, 4 x largest rho)`.
    pub coulomb_cutoff_a: Option<f64>,
    /// Energies above this are stored as the cap (eV).
    pub energy_cap_ev: f64,
    /// Valence mismatch cap (v.u.).
    pub mismatch_cap: f64,
    /// Probe valence V_A; `None`: the mobile-ion table's default.
    pub probe_valence: Option<f64>,
    /// Usual coordination N_A; `None`: the mobile-ion table's value for the main anion.
    pub probe_coordination: Option<f64>,
    /// Knobs set by an override file, by name, with the place they came from.
    pub set_by: BTreeMap<String, ValueOrigin>,
}

impl Default for ModelKnobs {
    fn default() -> Self {
        ModelKnobs {
            d0_ev: 0.21,
            d0_scales_with_valence: true,
            screening_factor: 1.4,
            charge_scale: 1.0,
            charge_shell_exponent: 0.75,
            d0_length_exponent: 3.0,
            d0_chalcogenide_factor: 1.0,
            mobile_charge_scale: 0.0,
            mobile_excluded_nearest: 2,
            vacancy_share_threshold: 0.3,
            softness_transfer: true,
            morse_cutoff_a: None,
            coulomb_cutoff_a: None,
            energy_cap_ev: 10.0,
            mismatch_cap: 10.0,
            probe_valence: None,
            probe_coordination: None,
            set_by: BTreeMap::new(),
        }
    }
}

impl ModelKnobs {
    fn origin(&self, name: &str) -> ValueOrigin {
        self.set_by
            .get(name)
            .cloned()
            .unwrap_or(ValueOrigin::BuiltIn)
    }
}

/// One knob value as used, for reports.
#[derive(Debug, Clone, PartialEq)]
pub struct KnobValue {
    pub name: String,
    pub value: f64,
    pub unit: String,
    pub origin: ValueOrigin,
    /// How the value was chosen, in words.
    pub rule: String,
}

/// The probe ion's numbers and their sources.
#[derive(Debug, Clone, PartialEq)]
pub struct ProbeProvenance {
    pub element: Element,
    pub valence: f64,
    pub valence_origin: ValueOrigin,
    pub coordination: f64,
    pub coordination_origin: ValueOrigin,
    /// Where N_A came from, in words (table entry and its note, or the override).
    pub coordination_source: String,
    /// Ideal bond valence `V_A / N_A` (v.u.).
    pub s_eq: f64,
    pub radius: RadiusValue,
}

/// A framework cation species' coordination as counted, for the radius look-up.
#[derive(Debug, Clone, PartialEq)]
pub struct CoordinationUsed {
    pub species: String,
    /// Occupancy-weighted mean count of bonded counter-ions.
    pub counted: f64,
    /// The coordination the radius was looked up at.
    pub used: f64,
    pub note: Option<String>,
}

/// Every value that went into a [`LandscapeModel`] and where it came from, as plain data.
#[derive(Debug, Clone, PartialEq)]
pub struct ModelProvenance {
    pub structure: String,
    pub probe: ProbeProvenance,
    /// The probe-anion pairs, one per framework anion species, with references and citations.
    pub pairs: Vec<BondParams>,
    /// Morse depth per bond actually used (eV).
    pub d0_ev: f64,
    /// Radii of the framework species.
    pub radii: Vec<RadiusValue>,
    pub coordination: Vec<CoordinationUsed>,
    pub knobs: Vec<KnobValue>,
    /// Sum of the occupancies of the mobile-ion occupants removed from the cell.
    pub removed_mobile: f64,
    /// Occupants removed by label, and how much occupancy each label took away.
    pub excluded: Vec<(String, f64)>,
    /// True when any probe-anion pair used the O'Keeffe-Brese fallback.
    pub uses_fallback: bool,
    pub notes: Vec<String>,
}

/// Builds the landscape model of probe `ion` in `structure` (see the module docs).
pub fn build_model(
    structure: &Structure,
    ion: Element,
    table: &ParameterTable,
    knobs: &ModelKnobs,
    exclude_labels: &[String],
) -> Result<(LandscapeModel, ModelProvenance), BvError> {
    let mut notes = Vec::new();
    // the labels asked for must exist
    for l in exclude_labels {
        let known = structure.asymmetric_sites.iter().any(|a| &a.label == l)
            || structure
                .sites
                .iter()
                .any(|s| s.occupants.iter().any(|o| &o.label == l));
        if !known {
            return Err(BvError::UnknownLabel {
                label: l.clone(),
                structure: structure.name.clone(),
            });
        }
    }
    // probe valence
    let (valence, valence_origin) = match knobs.probe_valence {
        Some(v) => (v, knobs.origin("probe_valence")),
        None => (
            table
                .mobile
                .default_valence(ion)
                .ok_or_else(|| BvError::UnknownProbeValence {
                    element: ion.to_string(),
                })?,
            ValueOrigin::Table,
        ),
    };
    // the framework occupants
    struct Occ {
        frac: crate::lattice::Frac,
        species: Species,
        occupancy: f64,
        label: String,
    }
    let mut framework = Vec::new();
    let mut removed_mobile = 0.0;
    let mut excluded: BTreeMap<String, f64> = BTreeMap::new();
    for site in &structure.sites {
        let site_label = structure
            .asymmetric_sites
            .get(site.asym_index)
            .map(|a| a.label.as_str())
            .unwrap_or(site.label());
        for o in &site.occupants {
            if o.species.element == ion {
                removed_mobile += o.occupancy;
                continue;
            }
            if let Some(l) = exclude_labels
                .iter()
                .find(|l| **l == o.label || l.as_str() == site_label)
            {
                *excluded.entry(l.clone()).or_insert(0.0) += o.occupancy;
                continue;
            }
            let Some(q) = o.species.oxidation else {
                return Err(BvError::MissingOxidationState {
                    site: o.label.clone(),
                    element: o.species.element.to_string(),
                });
            };
            if q == 0.0 {
                continue;
            }
            framework.push(Occ {
                frac: site.frac,
                species: o.species.clone(),
                occupancy: o.occupancy,
                label: o.label.clone(),
            });
        }
    }
    // framework cations on sites that stand partly empty: the ion uses the vacant share
    let vacated = vacancy_bearing(structure, ion, knobs.vacancy_share_threshold);
    if !vacated.is_empty() {
        let mut labels: Vec<&str> = vacated
            .iter()
            .map(|&i| framework_label(structure, i))
            .collect();
        labels.sort_unstable();
        labels.dedup();
        notes.push(format!(
            "framework cations on sites that stand empty at least {:.0}% of the time ({}) are left \
             out: the ion moves through the vacant share of those sites",
            100.0 * knobs.vacancy_share_threshold,
            labels.join(", ")
        ));
        framework.retain(|o| {
            !vacated.iter().any(|&i| {
                structure.sites[i].frac == o.frac
                    && structure.sites[i]
                        .occupants
                        .iter()
                        .any(|x| x.label == o.label)
            })
        });
    }
    if structure
        .sites
        .iter()
        .flat_map(|s| &s.occupants)
        .any(|o| o.species.oxidation == Some(0.0) && o.species.element != ion)
    {
        notes.push("occupants with oxidation state 0 are left out of the framework".into());
    }
    if removed_mobile == 0.0 {
        notes.push(format!(
            "the structure has no {ion}: the probe explores an empty framework"
        ));
    }
    // species kinds in order of first appearance
    let mut anion_species: Vec<Species> = Vec::new();
    let mut cation_species: Vec<Species> = Vec::new();
    let mut anion_amount: Vec<f64> = Vec::new();
    for o in &framework {
        let q = o.species.oxidation.unwrap_or(0.0);
        let list = if q < 0.0 {
            &mut anion_species
        } else {
            &mut cation_species
        };
        match list.iter().position(|s| same_species(s, &o.species)) {
            Some(i) => {
                if q < 0.0 {
                    anion_amount[i] += o.occupancy;
                }
            }
            None => {
                list.push(o.species.clone());
                if q < 0.0 {
                    anion_amount.push(o.occupancy);
                }
            }
        }
    }
    if anion_species.is_empty() {
        return Err(BvError::Structure {
            structure: structure.name.clone(),
            message: "the framework has no anions to bind the probe".into(),
        });
    }
    // N_A from the main anion
    let main = anion_amount
        .iter()
        .enumerate()
        .max_by(|a, b| a.1.total_cmp(b.1))
        .map(|(i, _)| anion_species[i].element)
        .expect("non-empty");
    let (coordination, coordination_origin, coordination_source) =
        match knobs.probe_coordination {
            Some(n) => (
                n,
                knobs.origin("probe_coordination"),
                format!("set by {}", knobs.origin("probe_coordination")),
            ),
            None => {
                let u = table.mobile.usual_coordination(ion, main).ok_or_else(|| {
                    BvError::Structure {
                        structure: structure.name.clone(),
                        message: format!(
                            "no usual coordination number of {ion} known; give one in an override \
                         file ([probe] coordination = ...)"
                        ),
                    }
                })?;
                (u.value, u.origin, u.source)
            }
        };
    if anion_species.len() > 1 {
        notes.push(format!(
            "several framework anions: N_A is that of the most abundant one, {main}"
        ));
    }
    let s_eq = valence / coordination;
    let probe_radius = table.radii.lookup(ion, valence, coordination)?;
    // D0: the depth per bond before the length rule
    let d0 = if knobs.d0_scales_with_valence {
        knobs.d0_ev * valence
    } else {
        knobs.d0_ev
    };
    let pair_d0 = |rmin: f64| d0 * (D0_REFERENCE_RMIN_A / rmin).powf(knobs.d0_length_exponent);
    let shell = |e: Element| (e.period() as f64).powf(-knobs.charge_shell_exponent);
    let probe_charge = valence * knobs.charge_scale * shell(ion);
    // coordination numbers of the framework species in the full structure
    let counted = coordination_numbers(structure, table, &mut notes);
    // anion kinds
    let mut pairs = Vec::new();
    let mut anions = Vec::new();
    let mut radii = Vec::new();
    let mut coordination_used = Vec::new();
    for sp in &anion_species {
        let q = sp.oxidation.unwrap_or(0.0);
        let mut p = table.resolve(ion, valence, sp.element, q, PairRole::Mobile)?;
        if knobs.softness_transfer
            && p.convention == super::CutoffConvention::FirstShell
            && let Some(soft) = soften_pair(&p, table, probe_radius.radius, s_eq)
        {
            p = soft;
        }
        let rmin = p.r0 - p.b * (valence / coordination).ln();
        let cutoff = knobs.morse_cutoff_a.unwrap_or(p.cutoff_a);
        let (cn, cu) = coordination_for(sp, &counted);
        coordination_used.push(cu);
        let radius = table.radii.lookup(sp.element, q, cn)?;
        let mut source = format!("ref {}: {}", p.ref_id, p.citation);
        if p.is_fallback() {
            source.push_str(" [fallback estimate]");
        }
        anions.push(AnionKind {
            species: sp.clone(),
            r0: p.r0,
            b: p.b,
            rmin,
            d0: pair_d0(rmin)
                * if matches!(sp.element.symbol(), "S" | "Se" | "Te") {
                    knobs.d0_chalcogenide_factor
                } else {
                    1.0
                },
            cutoff,
            radius: radius.radius,
            source,
        });
        radii.push(radius);
        pairs.push(p);
    }
    // cation kinds
    let mut cations = Vec::new();
    for sp in &cation_species {
        let q = sp.oxidation.unwrap_or(0.0);
        let (cn, cu) = coordination_for(sp, &counted);
        coordination_used.push(cu);
        let radius = table.radii.lookup(sp.element, q, cn)?;
        cations.push(CationKind {
            species: sp.clone(),
            charge: q * knobs.charge_scale * shell(sp.element),
            rho: knobs.screening_factor * (probe_radius.radius + radius.radius),
            radius: radius.radius,
        });
        radii.push(radius);
    }
    // the other ions of the mobile species, left at their sites as a repelling mean field
    let mobile = if knobs.mobile_charge_scale > 0.0 && removed_mobile > 0.0 {
        let sites: Vec<(crate::lattice::Frac, f64)> = structure
            .sites
            .iter()
            .filter_map(|site| {
                let occ: f64 = site
                    .occupants
                    .iter()
                    .filter(|o| o.species.element == ion)
                    .map(|o| o.occupancy)
                    .sum();
                (occ > 0.0).then_some((site.frac, occ))
            })
            .collect();
        notes.push(format!(
            "the {ion} ions of the structure repel the probe from their sites (mean field, charge \
             scale {}; the {} sites nearest the probe take no part: the site it left and the \
             vacancy it moves into)",
            knobs.mobile_charge_scale, knobs.mobile_excluded_nearest
        ));
        Some(MobileRepulsion {
            kind: CationKind {
                species: Species::new(ion, Some(valence)),
                charge: valence * knobs.mobile_charge_scale * shell(ion),
                rho: knobs.screening_factor * 2.0 * probe_radius.radius,
                radius: probe_radius.radius,
            },
            sites,
            excluded_nearest: knobs.mobile_excluded_nearest.min(4),
        })
    } else {
        None
    };
    let max_rho = cations
        .iter()
        .chain(mobile.as_ref().map(|m| &m.kind))
        .map(|c| c.rho)
        .fold(0.0, f64::max);
    let coulomb_cutoff = knobs.coulomb_cutoff_a.unwrap_or((4.0 * max_rho).max(8.0));
    if coulomb_cutoff < 3.0 * max_rho {
        notes.push(format!(
            "the Coulomb cutoff {coulomb_cutoff} A is less than 3 rho ({:.2} A): the screened \
             repulsion is truncated where it is not yet negligible",
            3.0 * max_rho
        ));
    }
    let atoms = framework
        .iter()
        .map(|o| {
            let kind = if o.species.oxidation.unwrap_or(0.0) < 0.0 {
                FrameworkKind::Anion(
                    anion_species
                        .iter()
                        .position(|s| same_species(s, &o.species))
                        .expect("listed"),
                )
            } else {
                FrameworkKind::Cation(
                    cation_species
                        .iter()
                        .position(|s| same_species(s, &o.species))
                        .expect("listed"),
                )
            };
            FrameworkAtom {
                frac: o.frac,
                kind,
                occupancy: o.occupancy,
                label: o.label.clone(),
            }
        })
        .collect();
    let model = LandscapeModel {
        lattice: structure.lattice.clone(),
        probe: ProbeIon {
            element: ion,
            valence,
            charge: probe_charge,
            coordination,
            radius: probe_radius.radius,
        },
        anions,
        cations,
        atoms,
        mobile,
        coulomb_cutoff,
        energy_cap: knobs.energy_cap_ev,
        mismatch_cap: knobs.mismatch_cap,
    };
    let k = |name: &str, value: f64, unit: &str, rule: &str| KnobValue {
        name: name.to_string(),
        value,
        unit: unit.to_string(),
        origin: knobs.origin(name),
        rule: rule.to_string(),
    };
    let mut knob_list = vec![
        k(
            "d0_ev",
            knobs.d0_ev,
            "eV",
            "Morse depth per bond for a monovalent probe",
        ),
        KnobValue {
            name: "d0".into(),
            value: d0,
            unit: "eV".into(),
            origin: ValueOrigin::Rule,
            rule: if knobs.d0_scales_with_valence {
                format!("D0 = d0_ev x V_A = {} x {valence}", knobs.d0_ev)
            } else {
                "D0 = d0_ev (not scaled with the probe valence)".into()
            },
        },
        k(
            "screening_factor",
            knobs.screening_factor,
            "",
            "rho = factor x (r_probe + r_cation)",
        ),
        k(
            "charge_scale",
            knobs.charge_scale,
            "",
            "charges = formal valences x scale",
        ),
        KnobValue {
            name: "coulomb_cutoff_a".into(),
            value: coulomb_cutoff,
            unit: "A".into(),
            origin: if knobs.coulomb_cutoff_a.is_some() {
                knobs.origin("coulomb_cutoff_a")
            } else {
                ValueOrigin::Rule
            },
            rule: if knobs.coulomb_cutoff_a.is_some() {
                "set".into()
            } else {
                "max(8 A, 4 x largest rho)".into()
            },
        },
        k(
            "energy_cap_ev",
            knobs.energy_cap_ev,
            "eV",
            "energies above are stored as the cap",
        ),
        k(
            "mismatch_cap",
            knobs.mismatch_cap,
            "v.u.",
            "mismatch above is stored as the cap",
        ),
    ];
    if knobs.d0_chalcogenide_factor != 1.0 {
        knob_list.push(k(
            "d0_chalcogenide_factor",
            knobs.d0_chalcogenide_factor,
            "",
            "D0 of the S, Se and Te pairs x factor",
        ));
    }
    if let Some(c) = knobs.morse_cutoff_a {
        knob_list.push(k(
            "morse_cutoff_a",
            c,
            "A",
            "one cutoff for every probe-anion pair",
        ));
    } else {
        for (a, p) in model.anions.iter().zip(&pairs) {
            knob_list.push(KnobValue {
                name: format!("morse_cutoff_a[{}]", a.species.name()),
                value: a.cutoff,
                unit: "A".into(),
                origin: p.cutoff_origin.clone(),
                rule: match p.convention {
                    super::CutoffConvention::Stated => "the parameter set's stated cutoff".into(),
                    super::CutoffConvention::FirstShell => {
                        "first shell: R0 + b ln 100 (bond valence >= 0.01 v.u.)".into()
                    }
                },
            });
        }
    }
    let uses_fallback = pairs.iter().any(|p| p.is_fallback());
    if uses_fallback {
        notes.push(
            "a probe-anion pair uses the O'Keeffe-Brese fallback estimate: treat energies as \
             rough"
                .into(),
        );
    }
    let provenance = ModelProvenance {
        structure: structure.name.clone(),
        probe: ProbeProvenance {
            element: ion,
            valence,
            valence_origin,
            coordination,
            coordination_origin,
            coordination_source,
            s_eq,
            radius: probe_radius,
        },
        pairs,
        d0_ev: d0,
        radii,
        coordination: coordination_used,
        knobs: knob_list,
        removed_mobile,
        excluded: excluded.into_iter().collect(),
        uses_fallback,
        notes,
    };
    Ok((model, provenance))
}

/// The alkali ions, whose softness-sensitive parameter sets (ref c of the IUCr table, Adams
/// 2001) cover every common anion.
const ALKALI: [&str; 5] = ["Li", "Na", "K", "Rb", "Cs"];

/// A softness-sensitive version of a first-shell probe-anion pair: `b` and the cutoff of the
/// alkali ion whose Shannon radius (six-fold, +1) is nearest the probe's, and
/// `R0' = R_eq + b' ln(s_eq)` with `R_eq = R0 - b ln(s_eq)`, so that a bond of the ideal valence
/// `s_eq = V_A / N_A` keeps its length. None when no alkali twin has a stated-cutoff row.
pub fn soften_pair(
    p: &BondParams,
    table: &ParameterTable,
    probe_radius: f64,
    s_eq: f64,
) -> Option<BondParams> {
    let twin = ALKALI
        .iter()
        .filter_map(|sym| {
            let e = crate::element::Element::from_symbol(sym)?;
            let r = table.radii.lookup(e, 1.0, 6.0).ok()?.radius;
            Some((e, (r - probe_radius).abs()))
        })
        .min_by(|a, b| a.1.total_cmp(&b.1))?
        .0;
    let t = table
        .resolve(twin, 1.0, p.anion, p.anion_valence, PairRole::Mobile)
        .ok()?;
    if t.convention != super::CutoffConvention::Stated {
        return None;
    }
    let r_eq = p.r0 - p.b * s_eq.ln();
    let mut out = p.clone();
    out.r0 = r_eq + t.b * s_eq.ln();
    out.b = t.b;
    out.cutoff_a = t.cutoff_a;
    out.convention = super::CutoffConvention::Stated;
    out.ref_id = format!("{}+softness of {}", p.ref_id, t.ref_id);
    out.citation = format!(
        "{}; softness b and cutoff borrowed from {}-{} ({}), R0 moved to keep the ideal bond length",
        p.citation, twin, p.anion, t.citation
    );
    out.r0_origin = ValueOrigin::Rule;
    out.b_origin = ValueOrigin::Rule;
    out.cutoff_origin = ValueOrigin::Rule;
    out.notes.push(format!(
        "softness transferred from {twin}-{}: b {:.3} -> {:.3} A, R0 {:.3} -> {:.3} A",
        p.anion, p.b, t.b, p.r0, out.r0
    ));
    Some(out)
}

fn framework_label(s: &Structure, site: usize) -> &str {
    s.sites[site]
        .occupants
        .iter()
        .find(|o| o.species.oxidation.unwrap_or(0.0) > 0.0)
        .map(|o| o.label.as_str())
        .unwrap_or("")
}

/// Sites (indices into `s.sites`) holding framework cations that stand empty at least
/// `threshold` of the time: one minus the framework-cation occupancy summed over the positions
/// within [`SPLIT_SITE_A`] (split sites count once; the mobile ion's own occupancy counts as
/// vacant, since the ion can take that share).
fn vacancy_bearing(s: &Structure, ion: crate::element::Element, threshold: f64) -> Vec<usize> {
    if !(threshold <= 1.0) {
        return vec![];
    }
    let cation_occ = |i: usize| -> f64 {
        s.sites[i]
            .occupants
            .iter()
            .filter(|o| o.species.element != ion && o.species.oxidation.unwrap_or(0.0) > 0.0)
            .map(|o| o.occupancy)
            .sum()
    };
    let partial: Vec<usize> = (0..s.sites.len())
        .filter(|&i| {
            let c = cation_occ(i);
            c > 0.0 && c < 1.0 - 1e-6
        })
        .collect();
    partial
        .iter()
        .copied()
        .filter(|&i| {
            let total: f64 = partial
                .iter()
                .filter(|&&j| {
                    s.lattice
                        .periodic_distance(s.sites[i].frac, s.sites[j].frac)
                        < SPLIT_SITE_A
                })
                .map(|&j| cation_occ(j))
                .sum();
            1.0 - total >= threshold
        })
        .collect()
}

fn same_species(a: &Species, b: &Species) -> bool {
    a.element == b.element
        && match (a.oxidation, b.oxidation) {
            (Some(x), Some(y)) => (x - y).abs() < 1e-9,
            (None, None) => true,
            _ => false,
        }
}

/// Occupancy-weighted mean coordination of each species in the full structure, from the valence
/// check; empty (with a note) when the check cannot be run.
fn coordination_numbers(
    s: &Structure,
    table: &ParameterTable,
    notes: &mut Vec<String>,
) -> Vec<(Species, f64)> {
    let report = match valence_check(s, table) {
        Ok(r) => r,
        Err(e) => {
            notes.push(format!(
                "coordination numbers could not be counted ({e}); radii taken at coordination 6"
            ));
            return Vec::new();
        }
    };
    let mut acc: Vec<(Species, f64, f64)> = Vec::new();
    for i in &report.ions {
        let sp = Species::new(i.element, Some(i.formal));
        let w = i.multiplicity as f64 * i.occupancy;
        match acc.iter_mut().find(|(x, ..)| same_species(x, &sp)) {
            Some(a) => {
                a.1 += w * i.coordination;
                a.2 += w;
            }
            None => acc.push((sp, w * i.coordination, w)),
        }
    }
    acc.into_iter()
        .map(|(sp, n, w)| (sp, if w > 0.0 { n / w } else { 0.0 }))
        .collect()
}

fn coordination_for(sp: &Species, counted: &[(Species, f64)]) -> (f64, CoordinationUsed) {
    match counted.iter().find(|(x, _)| same_species(x, sp)) {
        Some((_, n)) if *n >= 0.5 => (
            n.round(),
            CoordinationUsed {
                species: sp.name(),
                counted: *n,
                used: n.round(),
                note: None,
            },
        ),
        other => (
            6.0,
            CoordinationUsed {
                species: sp.name(),
                counted: other.map(|(_, n)| *n).unwrap_or(f64::NAN),
                used: 6.0,
                note: Some("no bonded counter-ions counted; radius taken at coordination 6".into()),
            },
        ),
    }
}
