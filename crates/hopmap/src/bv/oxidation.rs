//! Oxidation states for a structure whose file gives none, or only some.
//!
//! # The rule
//! 0. States the user sets (`--oxidation Co=3.5,Ni1=3` on the command line, or an
//!    `[oxidation]` table in the parameter file; see [`OxidationSetting`]) replace those of the
//!    file. A key that is an element symbol sets every occupant of that element; any other key
//!    names a site label (an occupant label first, then an asymmetric-site label).
//! 1. Occupants that carry a state keep it.
//! 2. The elements of the other occupants are split into anions and cations. An element of the
//!    usual anion list ([`Element::is_usual_anion`]) is an anion at its most negative common
//!    state (O2-, S2-, N3-, Cl-, H-, P3-, ...), unless its nearest neighbour in the structure is
//!    a more electronegative anion-list element: then it is the centre of an oxo-anion or
//!    similar group and a cation (P in a phosphate, S in a sulfate, N in a nitrate, H in a
//!    hydroxide). Every other element is a cation.
//! 3. Each cation element takes one state for all its unknown occupants, tried in tiers, the
//!    first tier with a charge-neutral (occupancy-weighted) candidate winning:
//!    (a) integer combinations of the common states ([`Element::common_oxidation_states`],
//!    pymatgen's table); (b) one element at the fractional average valence that balances the
//!    others, within the range of its common states (Mn3.5+ in LiMn2O4, Fe8/3+ in Fe3O4);
//!    (c) integer combinations of every known state, the common ones and those observed in the
//!    ICSD ([`Element::known_oxidation_states`]: Ni3+ in LiNiO2, Ti3+); (d) one element at a
//!    fractional average within 1 .. its highest known state (Co3.5+ in Li0.5CoO2, Co3.26+ in
//!    Na0.74CoO2). At most [`MAX_COMBINATIONS`] combinations are enumerated per tier: past
//!    that, the least common states of the elements with most choices are dropped first, and a
//!    note says so; at most [`MAX_SCORED`] candidates are scored.
//! 4. When no tier gives a neutral candidate, the candidates of (c) and (d) (the fractional
//!    average clamped to its range) that leave the smallest residual charge are kept, the
//!    residual per cell is named in a warning, and the analysis goes on.
//! 5. Each candidate is scored by the global instability index of the structure with those
//!    states, each pair taking its first-shell parameters at the candidate valences (so the
//!    parameters and the sums are consistent for every candidate without iteration). The
//!    lowest GII wins; on a tie the earlier candidate (more common states) wins.
//! 6. Per-site states for a mixed-valence element: when the element sits on several
//!    crystallographic sites (or occupants) whose bond-valence sums at the average state
//!    differ by at least [`SITE_SPLIT_MIN_VU`], its total charge is shared out in proportion to
//!    the sums: each site takes `BVS + lambda`, lambda keeping the cell neutral, clamped to the
//!    element's range, then rounded to whole states, else to half states, where that keeps
//!    the total exact (magnetite: Fe3+ on the tetrahedral 8a site, Fe2.5+ on the octahedral
//!    16d site; Co3+ and Co4+ on the two kinds of Co site of a relaxed delithiated cathode).
//!    The split follows the order of the sums, not the GII: the sums at one average state
//!    often fit a little better (magnetite's 8a site sums to 2.75 v.u., closer to 8/3 than
//!    to 3), but the order of the sums is what tells the sites apart. The GII reported is
//!    that of the split. When the sums do not tell the sites apart, every site keeps the
//!    average.
//!
//! Known limits: no anion-anion bonds (persulfides such as FeS2 have S- and are not found:
//! they come out with a residual-charge warning or an unusual cation state), one fractional
//! element per candidate.

use super::BvError;
use super::params::{PairRole, ParameterTable};
use super::valence::{PairKey, key_of, representatives};
use crate::element::Element;
use crate::neighbours::NeighbourSearch;
use crate::structure::{Species, Structure};
use std::collections::{BTreeMap, HashMap};

/// Upper bound on the integer combinations of cation states enumerated per tier.
pub const MAX_COMBINATIONS: usize = 20_000;
/// Upper bound on the candidates scored by their GII (the most common states first).
pub const MAX_SCORED: usize = 2_000;
/// Sites of one mixed-valence element whose bond-valence sums span less than this (v.u.) keep
/// the average state: the GII's "plausible" bound, the accuracy of the sums themselves.
pub const SITE_SPLIT_MIN_VU: f64 = 0.1;
/// Contacts within this distance (A) are gathered once for the scoring.
const CONTACT_RANGE: f64 = 5.0;

/// An oxidation state set by the user, for an element or a site label.
#[derive(Debug, Clone, PartialEq)]
pub struct OxidationSetting {
    /// Element symbol ("Co") or site label ("Co1").
    pub key: String,
    /// The state (fractional averages allowed, e.g. 3.5).
    pub value: f64,
    /// Where it was set, in words ("--oxidation", "override file p.toml:4").
    pub origin: String,
}

impl OxidationSetting {
    /// Parses the command-line form `Co=3.5,Ni=3,Fe1=2` (also `Co=+3`, `O=-2`).
    pub fn parse_list(text: &str, origin: &str) -> Result<Vec<OxidationSetting>, String> {
        let mut out = Vec::new();
        for part in text.split(',').map(str::trim).filter(|p| !p.is_empty()) {
            let (k, v) = part.split_once('=').ok_or_else(|| {
                format!("'{part}' must look like ELEMENT=STATE or LABEL=STATE, e.g. Co=3.5")
            })?;
            let (k, v) = (k.trim(), v.trim());
            let value: f64 = v
                .trim_start_matches('+')
                .parse()
                .map_err(|_| format!("'{part}': '{v}' is not a number"))?;
            out.push(OxidationSetting::new(k, value, origin)?);
        }
        Ok(out)
    }

    /// One setting, checked: a non-empty key and a finite state between -8 and 8.
    pub fn new(key: &str, value: f64, origin: &str) -> Result<OxidationSetting, String> {
        if key.is_empty() || key.contains(char::is_whitespace) {
            return Err(format!("'{key}' is not an element symbol or a site label"));
        }
        if !(value.is_finite() && value.abs() <= 8.0) {
            return Err(format!(
                "oxidation state {value} for '{key}' is out of range (-8 to 8)"
            ));
        }
        Ok(OxidationSetting {
            key: key.to_string(),
            value,
            origin: origin.to_string(),
        })
    }
}

/// The result of [`assign_oxidation_states`].
#[derive(Debug, Clone, PartialEq)]
pub struct OxidationAssignment {
    /// The input with every occupant's state filled and `oxidation_states_assigned = true`.
    pub structure: Structure,
    /// The state of each element that was assigned (fractional for a mixed-valence element: the
    /// average over its sites).
    pub states: Vec<(Element, f64)>,
    /// Per-site states of a mixed-valence element split by its bond-valence sums: (site
    /// label, element, state). Empty when every site kept the element's state.
    pub site_states: Vec<(String, Element, f64)>,
    /// GII (v.u.) of the chosen assignment.
    pub gii: f64,
    /// The element that took a fractional average valence, if any.
    pub mixed_valence: Option<Element>,
    /// Number of candidates scored.
    pub candidates_scored: usize,
    /// The next best candidates and their GII (v.u.), best first, at most three.
    pub alternatives: Vec<(Vec<(Element, f64)>, f64)>,
    /// Charge per cell (e) left over when no neutral assignment exists; 0 otherwise.
    pub residual_charge: f64,
    /// True when nothing was assigned (every state came from the file or the user).
    pub nothing_assigned: bool,
    /// A plain sentence for reports.
    pub note: String,
    /// Plain sentences that belong among an analysis' warnings (a residual charge, a setting
    /// that matched nothing).
    pub warnings: Vec<String>,
}

/// Pauling electronegativities of the usual anion elements (handbook values, e.g. CRC
/// Handbook; from memory), for rule 2.
fn electronegativity(e: Element) -> f64 {
    match e.symbol() {
        "F" => 3.98,
        "O" => 3.44,
        "Cl" => 3.16,
        "N" => 3.04,
        "Br" => 2.96,
        "I" => 2.66,
        "S" => 2.58,
        "Se" => 2.55,
        "H" => 2.20,
        "P" => 2.19,
        "As" => 2.18,
        "Te" => 2.10,
        _ => 0.0,
    }
}

/// Applies the user's settings (rule 0) to a copy of `s`: returns it with a note on what was
/// set and warnings for element keys the structure lacks. A key that is neither an element
/// symbol nor a label of the structure, or a label of a site holding several elements, is an
/// error.
pub fn apply_oxidation_settings(
    s: &Structure,
    settings: &[OxidationSetting],
) -> Result<(Structure, Vec<String>, Vec<String>), BvError> {
    let mut out = s.clone();
    let mut set = Vec::new();
    let mut warnings = Vec::new();
    let bad = |m: String| BvError::Structure {
        structure: s.name.clone(),
        message: m,
    };
    // element keys first, so that a site label can refine its element's state
    let is_element = |k: &str| Element::from_symbol(k).is_some_and(|e| e.symbol() == k);
    let mut ordered: Vec<&OxidationSetting> = settings.iter().collect();
    ordered.sort_by_key(|st| !is_element(&st.key));
    for st in ordered {
        let name = |e: Element| Species::new(e, Some(st.value)).name();
        if let Some(e) = Element::from_symbol(&st.key).filter(|e| e.symbol() == st.key) {
            let mut n = 0;
            for site in &mut out.sites {
                for o in &mut site.occupants {
                    if o.species.element == e {
                        o.species.oxidation = Some(st.value);
                        n += 1;
                    }
                }
            }
            for a in &mut out.asymmetric_sites {
                for o in &mut a.occupants {
                    if o.species.element == e {
                        o.species.oxidation = Some(st.value);
                    }
                }
            }
            if n == 0 {
                warnings.push(format!(
                    "{} ({}) is not used: the structure has no {e}",
                    name(e),
                    st.origin
                ));
            } else {
                set.push(format!("{} ({})", name(e), st.origin));
            }
            continue;
        }
        // an occupant label, else an asymmetric-site label
        let by_occupant = out
            .sites
            .iter()
            .any(|x| x.occupants.iter().any(|o| o.label == st.key));
        let site_index = out.asymmetric_sites.iter().position(|a| a.label == st.key);
        let mut elements: Vec<Element> = Vec::new();
        for site in &mut out.sites {
            let on_site = !by_occupant && Some(site.asym_index) == site_index;
            for o in &mut site.occupants {
                if (by_occupant && o.label == st.key) || on_site {
                    o.species.oxidation = Some(st.value);
                    if !elements.contains(&o.species.element) {
                        elements.push(o.species.element);
                    }
                }
            }
        }
        if elements.len() > 1 {
            return Err(bad(format!(
                "oxidation state for '{}' ({}): site {} holds {}; name one occupant's label or \
                 the element instead",
                st.key,
                st.origin,
                st.key,
                elements
                    .iter()
                    .map(|e| e.symbol())
                    .collect::<Vec<_>>()
                    .join(" and ")
            )));
        }
        let Some(e) = elements.first() else {
            return Err(bad(format!(
                "oxidation state for '{}' ({}): no element and no site of that name in the \
                 structure",
                st.key, st.origin
            )));
        };
        for a in &mut out.asymmetric_sites {
            for o in &mut a.occupants {
                if o.label == st.key || (!by_occupant && a.label == st.key) {
                    o.species.oxidation = Some(st.value);
                }
            }
        }
        set.push(format!("{} on {} ({})", name(*e), st.key, st.origin));
    }
    Ok((out, set, warnings))
}

/// One candidate: a state per cation element, the element (index) at a fractional average,
/// the residual charge per cell, and the tier it came from.
#[derive(Debug, Clone)]
struct Candidate {
    states: Vec<f64>,
    mixed: Option<usize>,
    residual: f64,
}

/// Assigns the missing oxidation states by the rule of the module docs.
pub fn assign_oxidation_states(
    s: &Structure,
    table: &ParameterTable,
) -> Result<OxidationAssignment, BvError> {
    let (given, user_set, mut warnings) = apply_oxidation_settings(s, &table.oxidation)?;
    let s = &given;
    let (_, formula) = s.formula_and_z();
    let no_solution = |m: String| BvError::NoNeutralAssignment {
        formula: formula.clone(),
        message: m,
    };
    // 1. what is known: per element, the amount (per cell) of its occupants without a state
    let mut unknown_amount: BTreeMap<Element, f64> = BTreeMap::new();
    let mut fixed_charge = 0.0;
    let mut any = false;
    for site in &s.sites {
        for o in &site.occupants {
            any = true;
            match o.species.oxidation {
                Some(q) => fixed_charge += o.occupancy * q,
                None => *unknown_amount.entry(o.species.element).or_insert(0.0) += o.occupancy,
            }
        }
    }
    if !any {
        return Err(no_solution("the structure has no atoms".into()));
    }
    let mut set_note = String::new();
    if !user_set.is_empty() {
        set_note = format!("oxidation states set by the user: {}", user_set.join(", "));
    }
    if unknown_amount.is_empty() {
        let gii = super::valence::valence_check(s, table)
            .map(|r| r.gii)
            .unwrap_or(f64::NAN);
        let note = if set_note.is_empty() {
            "all oxidation states were given in the file; none assigned".to_string()
        } else {
            set_note
        };
        let residual = fixed_charge;
        // (the CIF reader already warns about states given in the file that do not balance)
        if !user_set.is_empty() && residual.abs() > charge_tolerance(s) {
            warnings.push(format!(
                "the oxidation states as given leave a charge of {residual:+.3} e per cell"
            ));
        }
        return Ok(OxidationAssignment {
            structure: s.clone(),
            states: Vec::new(),
            site_states: Vec::new(),
            gii,
            mixed_valence: None,
            candidates_scored: 0,
            alternatives: Vec::new(),
            residual_charge: 0.0,
            nothing_assigned: user_set.is_empty(),
            note,
            warnings,
        });
    }
    let unknown: Vec<Element> = unknown_amount.keys().copied().collect();
    // 2. anions and cations
    let positions: Vec<_> = s.sites.iter().map(|x| x.frac).collect();
    let search = NeighbourSearch::new(&s.lattice, &positions, 4.0);
    let mut anion_state: BTreeMap<Element, f64> = BTreeMap::new();
    // (element, common positive states, every known positive state)
    let mut cations: Vec<(Element, Vec<f64>, Vec<f64>)> = Vec::new();
    for &e in &unknown {
        let negative = e
            .common_oxidation_states()
            .iter()
            .copied()
            .filter(|q| *q < 0)
            .min();
        let acts_as_anion = e.is_usual_anion()
            && negative.is_some()
            && !nearest_is_more_electronegative(s, &search, e);
        if acts_as_anion {
            anion_state.insert(e, negative.unwrap_or(-1) as f64);
        } else {
            let positive = |v: &[i8]| -> Vec<f64> {
                v.iter().filter(|q| **q > 0).map(|q| *q as f64).collect()
            };
            let common = positive(e.common_oxidation_states());
            let mut known = positive(&e.known_oxidation_states());
            if known.is_empty() {
                // no positive state on record at all (a noble gas, or an anion-list element
                // acting as a cation without one): the mixed-valence tier can still find one
                warnings.push(format!(
                    "{e} acts as a cation here but has no positive oxidation state on record; \
                     one is inferred from the charge balance"
                ));
                known = vec![1.0];
            }
            let common = if common.is_empty() {
                known.clone()
            } else {
                common
            };
            cations.push((e, common, known));
        }
    }
    let anion_charge: f64 = anion_state.iter().map(|(e, q)| unknown_amount[e] * q).sum();
    let tol = charge_tolerance(s);
    let counts: Vec<f64> = cations.iter().map(|(e, ..)| unknown_amount[e]).collect();
    let base = fixed_charge + anion_charge;
    let total_of =
        |combo: &[f64]| base + combo.iter().zip(&counts).map(|(q, n)| q * n).sum::<f64>();
    let mut notes: Vec<String> = Vec::new();
    // 3. the tiers
    let common: Vec<(Element, Vec<f64>)> =
        cations.iter().map(|(e, c, _)| (*e, c.clone())).collect();
    let known: Vec<(Element, Vec<f64>)> = cations.iter().map(|(e, _, k)| (*e, k.clone())).collect();
    let integer_tier = |states: &[(Element, Vec<f64>)], notes: &mut Vec<String>| {
        let mut st = states.to_vec();
        notes.extend(bound_states(&mut st, MAX_COMBINATIONS));
        let mut out = Vec::new();
        for combo in combinations(&st) {
            let r = total_of(&combo);
            out.push(Candidate {
                states: combo,
                mixed: None,
                residual: r,
            });
        }
        out
    };
    // one element at the average that balances the others; `wide` lowers the range to 1
    let mixed_tier = |states: &[(Element, Vec<f64>)], wide: bool, notes: &mut Vec<String>| {
        let mut out = Vec::new();
        for i in 0..states.len() {
            let lo = if wide {
                1.0
            } else {
                states[i].1.iter().copied().fold(f64::INFINITY, f64::min)
            };
            let hi = states[i].1.iter().copied().fold(0.0, f64::max);
            if counts[i] <= 0.0 {
                continue;
            }
            let mut others = states.to_vec();
            others[i].1 = vec![0.0];
            notes.extend(bound_states(&mut others, MAX_COMBINATIONS));
            for mut combo in combinations(&others) {
                let rest = total_of(&combo);
                let q = -rest / counts[i];
                let q = if (q - q.round()).abs() < 1e-6 {
                    q.round()
                } else {
                    q
                };
                let clamped = q.clamp(lo, hi.max(lo));
                combo[i] = clamped;
                out.push(Candidate {
                    residual: total_of(&combo),
                    states: combo,
                    mixed: Some(i),
                });
            }
        }
        out
    };
    let neutral = |c: &Vec<Candidate>| -> Vec<Candidate> {
        c.iter()
            .filter(|x| x.residual.abs() < tol)
            .cloned()
            .collect()
    };
    let mut tier_notes = Vec::new();
    let t_a = integer_tier(&common, &mut tier_notes);
    let mut candidates = neutral(&t_a);
    let mut tier = "common states";
    if candidates.is_empty() {
        candidates = neutral(&mixed_tier(&common, false, &mut tier_notes));
        tier = "common states, one element at an average valence";
    }
    let mut fallback_pool = Vec::new();
    if candidates.is_empty() {
        let t_c = integer_tier(&known, &mut tier_notes);
        candidates = neutral(&t_c);
        tier = "known states (common and ICSD)";
        fallback_pool.extend(t_c);
    }
    if candidates.is_empty() {
        let t_d = mixed_tier(&known, true, &mut tier_notes);
        candidates = neutral(&t_d);
        tier = "known states, one element at an average valence down to 1";
        fallback_pool.extend(t_d);
    }
    tier_notes.sort();
    tier_notes.dedup();
    notes.extend(tier_notes);
    // 4. no neutral candidate: the closest ones
    let mut residual_charge = 0.0;
    if candidates.is_empty() {
        let best = fallback_pool
            .iter()
            .map(|c| c.residual.abs())
            .fold(f64::INFINITY, f64::min);
        if !best.is_finite() {
            return Err(no_solution(format!(
                "anions {:?} and no cation states to try",
                anion_state
                    .iter()
                    .map(|(e, q)| Species::new(*e, Some(*q)).name())
                    .collect::<Vec<_>>()
            )));
        }
        candidates = fallback_pool
            .into_iter()
            .filter(|c| c.residual.abs() <= best + 1e-6)
            .collect();
        residual_charge = candidates[0].residual;
        tier = "closest to neutral";
        warnings.push(format!(
            "no charge-neutral oxidation states for {formula}: the closest assignment leaves \
             a residual charge of {residual_charge:+.3} e per cell ({:+.4} e per A^3); the \
             analysis goes on with it (set states with --oxidation if you know them)",
            residual_charge / s.volume()
        ));
    }
    // keep the scoring bounded, the earliest (most common) candidates first
    if candidates.len() > MAX_SCORED {
        notes.push(format!(
            "{} candidates; the first {MAX_SCORED} (most common states) were scored",
            candidates.len()
        ));
        candidates.truncate(MAX_SCORED);
    }
    // 5. score by GII
    let scorer = Scorer::new(s, &search);
    let mut cache: HashMap<PairKey, Option<super::BondParams>> = HashMap::new();
    let state_map = |c: &Candidate| -> HashMap<Element, f64> {
        let mut m: HashMap<Element, f64> = anion_state.iter().map(|(e, q)| (*e, *q)).collect();
        for ((e, ..), q) in cations.iter().zip(&c.states) {
            m.insert(*e, *q);
        }
        m
    };
    let mut scored: Vec<(f64, usize)> = Vec::new();
    for (k, c) in candidates.iter().enumerate() {
        let gii = scorer.gii(table, &state_map(c), &HashMap::new(), &mut cache);
        scored.push((gii, k));
    }
    scored.sort_by(|a, b| a.0.total_cmp(&b.0).then(a.1.cmp(&b.1)));
    let states_of = |k: usize| -> Vec<(Element, f64)> {
        let mut v: Vec<(Element, f64)> = cations
            .iter()
            .zip(&candidates[k].states)
            .map(|((e, ..), q)| (*e, *q))
            .collect();
        v.extend(anion_state.iter().map(|(e, q)| (*e, *q)));
        v
    };
    let (mut gii, best) = scored[0];
    let states = states_of(best);
    let chosen = &candidates[best];
    let mut mixed_valence = chosen.mixed.map(|i| cations[i].0);
    for (i, (e, common, _)) in cations.iter().enumerate() {
        let q = chosen.states[i];
        let integer = (q - q.round()).abs() < 1e-6;
        if integer && !common.iter().any(|c| (c - q).abs() < 1e-6) {
            notes.push(format!(
                "{e} takes {}, not among its common states, to balance the charge",
                q.round()
            ));
        }
        if chosen.mixed == Some(i) && integer {
            // an integer state reached by the balance (Mn3+ in LiMnO2): not mixed valence
            mixed_valence = None;
        }
    }
    // 6. per-site states of the mixed-valence element
    let mut per_ion: HashMap<(usize, usize), f64> = HashMap::new();
    if let Some(i) = chosen.mixed.filter(|_| mixed_valence.is_some()) {
        let (e, _, known_states) = &cations[i];
        let map = state_map(chosen);
        let lo = 1.0f64.min(chosen.states[i]);
        let hi = known_states
            .iter()
            .copied()
            .fold(chosen.states[i], f64::max);
        if let Some(split) =
            scorer.split_sites(table, &map, *e, chosen.states[i], lo, hi, &mut cache)
        {
            gii = scorer.gii(table, &map, &split, &mut cache);
            per_ion = split;
        }
    }
    let alternatives = scored
        .iter()
        .skip(1)
        .take(3)
        .map(|(g, k)| (states_of(*k), *g))
        .collect();
    // the new structure
    let lookup: HashMap<Element, f64> = states.iter().copied().collect();
    let mut out = s.clone();
    let mut site_states: Vec<(String, Element, f64)> = Vec::new();
    for site in out.sites.iter_mut() {
        for o in site.occupants.iter_mut() {
            if o.species.oxidation.is_none() {
                o.species.oxidation = lookup.get(&o.species.element).copied();
            }
        }
    }
    if !per_ion.is_empty() {
        // per_ion is keyed by (representative site, occupant); every image of an asymmetric
        // site takes its representative's state
        let rep_of: HashMap<usize, usize> = representatives(s)
            .iter()
            .map(|r| (s.sites[r.site].asym_index, r.site))
            .collect();
        let asym_known = !s.asymmetric_sites.is_empty();
        for (si, site) in out.sites.iter_mut().enumerate() {
            let rep = if asym_known {
                rep_of.get(&site.asym_index).copied().unwrap_or(si)
            } else {
                si
            };
            for (oi, o) in site.occupants.iter_mut().enumerate() {
                if let Some(q) = per_ion.get(&(rep, oi)) {
                    o.species.oxidation = Some(*q);
                }
            }
        }
        let mut keys: Vec<&(usize, usize)> = per_ion.keys().collect();
        keys.sort();
        for k in keys {
            let o = &s.sites[k.0].occupants[k.1];
            let label = if asym_known {
                s.asymmetric_sites
                    .get(s.sites[k.0].asym_index)
                    .map(|a| a.label.clone())
                    .unwrap_or_else(|| o.label.clone())
            } else {
                o.label.clone()
            };
            site_states.push((label, o.species.element, per_ion[k]));
        }
        // asymmetric sites: from their representative
        for (ai, a) in out.asymmetric_sites.iter_mut().enumerate() {
            if let Some(&rep) = rep_of.get(&ai) {
                for (oi, o) in a.occupants.iter_mut().enumerate() {
                    if let Some(q) = per_ion.get(&(rep, oi)) {
                        o.species.oxidation = Some(*q);
                    }
                }
            }
        }
    }
    for a in &mut out.asymmetric_sites {
        for o in &mut a.occupants {
            if o.species.oxidation.is_none() {
                o.species.oxidation = lookup.get(&o.species.element).copied();
            }
        }
    }
    out.oxidation_states_assigned = true;
    let names: Vec<String> = states
        .iter()
        .map(|(e, q)| Species::new(*e, Some(*q)).name())
        .collect();
    let mut note = format!(
        "oxidation states assigned by hopmap from charge balance and bond-valence sums: {} \
         (GII {:.3} v.u., best of {} {} candidates, tier: {tier})",
        names.join(" "),
        gii,
        candidates.len(),
        if residual_charge == 0.0 {
            "neutral"
        } else {
            "closest"
        }
    );
    if let Some(e) = mixed_valence {
        note.push_str(&format!(
            "; {e} carries an average mixed valence of {:.3}",
            lookup[&e]
        ));
    }
    if !site_states.is_empty() {
        let mut shown: Vec<String> = Vec::new();
        for (label, e, q) in &site_states {
            let t = format!("{} on {label}", Species::new(*e, Some(*q)).name());
            if !shown.contains(&t) {
                shown.push(t);
            }
        }
        let n = shown.len();
        shown.truncate(8);
        note.push_str(&format!(
            "; split over its sites by their bond-valence sums: {}{}",
            shown.join(", "),
            if n > 8 { ", ..." } else { "" }
        ));
    }
    if !set_note.is_empty() {
        note.push_str("; ");
        note.push_str(&set_note);
    }
    for n in &notes {
        note.push_str("; ");
        note.push_str(n);
    }
    Ok(OxidationAssignment {
        structure: out,
        states,
        site_states,
        gii,
        mixed_valence,
        candidates_scored: candidates.len(),
        alternatives,
        residual_charge,
        nothing_assigned: false,
        note,
        warnings,
    })
}

/// Charge per cell (e) accepted as neutral: 0.02 e plus 1e-3 e per atom (occupancies
/// rounded in files add up).
fn charge_tolerance(s: &Structure) -> f64 {
    let n_atoms: f64 = s.cell_composition().values().sum();
    0.02 + 1e-3 * n_atoms
}

/// Drops the least common states (last in each list) of the elements with most choices until
/// at most `limit` combinations remain; returns a note per state dropped.
fn bound_states(states: &mut [(Element, Vec<f64>)], limit: usize) -> Vec<String> {
    let mut notes = Vec::new();
    while product(states) > limit {
        let Some((i, _)) = states
            .iter()
            .enumerate()
            .filter(|(_, (_, v))| v.len() > 1)
            .max_by_key(|(_, (_, v))| v.len())
        else {
            break;
        };
        if let Some(q) = states[i].1.pop() {
            notes.push(format!("search bounded: {}{q}+ not tried", states[i].0));
        }
    }
    notes
}

fn product(states: &[(Element, Vec<f64>)]) -> usize {
    states
        .iter()
        .fold(1usize, |p, (_, v)| p.saturating_mul(v.len().max(1)))
}

/// Every combination, the first element's states varying slowest.
fn combinations(states: &[(Element, Vec<f64>)]) -> Vec<Vec<f64>> {
    let mut out = vec![Vec::new()];
    for (_, v) in states {
        let mut next = Vec::with_capacity(out.len() * v.len());
        for c in &out {
            for q in v {
                let mut c2 = c.clone();
                c2.push(*q);
                next.push(c2);
            }
        }
        out = next;
    }
    out
}

/// True when the nearest neighbour of some site of `e` is a more electronegative anion-list
/// element (rule 2).
fn nearest_is_more_electronegative(s: &Structure, search: &NeighbourSearch, e: Element) -> bool {
    let chi = electronegativity(e);
    for site in s.sites.iter().filter(|x| x.has_element(e)) {
        let nearest = search
            .within(site.frac, search.max_cutoff())
            .into_iter()
            .find(|n| n.distance > 0.05);
        if let Some(n) = nearest {
            let other = &s.sites[n.index];
            if other.occupants.iter().any(|o| {
                o.species.element.is_usual_anion() && electronegativity(o.species.element) > chi
            }) {
                return true;
            }
        }
    }
    false
}

/// Contacts gathered once; each candidate is then a cheap sum.
struct Scorer {
    ions: Vec<ScoredIon>,
}

/// One occupant of a representative site (per asymmetric site).
struct ScoredIon {
    /// (representative site index, occupant index): the key of per-site states.
    key: (usize, usize),
    element: Element,
    fixed: Option<f64>,
    weight: f64,
    /// (neighbour's key, element, occupancy, fixed state, distance)
    contacts: Vec<((usize, usize), Element, f64, Option<f64>, f64)>,
}

impl Scorer {
    fn new(s: &Structure, search: &NeighbourSearch) -> Scorer {
        let reps = representatives(s);
        // every full-cell site -> the representative of its asymmetric site
        let mut rep_of: Vec<usize> = (0..s.sites.len()).collect();
        if !s.asymmetric_sites.is_empty() {
            let by_asym: HashMap<usize, usize> = reps
                .iter()
                .map(|r| (s.sites[r.site].asym_index, r.site))
                .collect();
            for (i, x) in s.sites.iter().enumerate() {
                if let Some(r) = by_asym.get(&x.asym_index) {
                    rep_of[i] = *r;
                }
            }
        }
        let mut ions = Vec::new();
        for rep in reps {
            let site = &s.sites[rep.site];
            let near = search.within(site.frac, CONTACT_RANGE);
            for (oi, o) in site.occupants.iter().enumerate() {
                let mut contacts = Vec::new();
                for n in &near {
                    if n.distance < 0.05 {
                        continue;
                    }
                    for (oj, o2) in s.sites[n.index].occupants.iter().enumerate() {
                        contacts.push((
                            (rep_of[n.index], oj),
                            o2.species.element,
                            o2.occupancy,
                            o2.species.oxidation,
                            n.distance,
                        ));
                    }
                }
                ions.push(ScoredIon {
                    key: (rep.site, oi),
                    element: o.species.element,
                    fixed: o.species.oxidation,
                    weight: rep.multiplicity as f64 * o.occupancy,
                    contacts,
                });
            }
        }
        Scorer { ions }
    }

    /// Bond-valence sum (v.u., unsigned) of every ion with its state, or None for ions without
    /// a state or with state 0.
    fn sums(
        &self,
        table: &ParameterTable,
        state: &HashMap<Element, f64>,
        per_ion: &HashMap<(usize, usize), f64>,
        cache: &mut HashMap<PairKey, Option<super::BondParams>>,
    ) -> Vec<Option<(f64, f64)>> {
        let state_of = |key: (usize, usize), e: Element, fixed: Option<f64>| {
            fixed
                .or_else(|| per_ion.get(&key).copied())
                .or_else(|| state.get(&e).copied())
        };
        self.ions
            .iter()
            .map(|ion| {
                let q = state_of(ion.key, ion.element, ion.fixed)?;
                if q == 0.0 {
                    return None;
                }
                let mut v = 0.0;
                for &(k2, e2, occ, fixed, d) in &ion.contacts {
                    let Some(q2) = state_of(k2, e2, fixed) else {
                        continue;
                    };
                    if q * q2 >= 0.0 {
                        continue;
                    }
                    let (c, cv, a, av) = if q > 0.0 {
                        (ion.element, q, e2, q2)
                    } else {
                        (e2, q2, ion.element, q)
                    };
                    let p = cache
                        .entry(key_of(c, cv, a, av))
                        .or_insert_with(|| table.resolve(c, cv, a, av, PairRole::Framework).ok());
                    if let Some(p) = p {
                        v += occ * p.counted_valence(d);
                    }
                }
                Some((v, q.abs()))
            })
            .collect()
    }

    fn gii(
        &self,
        table: &ParameterTable,
        state: &HashMap<Element, f64>,
        per_ion: &HashMap<(usize, usize), f64>,
        cache: &mut HashMap<PairKey, Option<super::BondParams>>,
    ) -> f64 {
        let (mut num, mut den) = (0.0, 0.0);
        for (ion, sum) in self
            .ions
            .iter()
            .zip(self.sums(table, state, per_ion, cache))
        {
            if let Some((v, q)) = sum {
                let dev = v - q;
                num += ion.weight * dev * dev;
                den += ion.weight;
            }
        }
        if den > 0.0 {
            (num / den).sqrt()
        } else {
            f64::INFINITY
        }
    }

    /// Rule 6: per-site states of the mixed-valence element `e` at average `q` (range lo..hi),
    /// or None when its sites' sums do not tell them apart.
    #[allow(clippy::too_many_arguments)]
    fn split_sites(
        &self,
        table: &ParameterTable,
        state: &HashMap<Element, f64>,
        e: Element,
        q: f64,
        lo: f64,
        hi: f64,
        cache: &mut HashMap<PairKey, Option<super::BondParams>>,
    ) -> Option<HashMap<(usize, usize), f64>> {
        let sums = self.sums(table, state, &HashMap::new(), cache);
        // (key, weight, sum) of the element's unknown occupants
        let groups: Vec<((usize, usize), f64, f64)> = self
            .ions
            .iter()
            .zip(&sums)
            .filter(|(ion, _)| ion.element == e && ion.fixed.is_none() && ion.weight > 0.0)
            .filter_map(|(ion, s)| s.map(|(v, _)| (ion.key, ion.weight, v)))
            .collect();
        if groups.len() < 2 {
            return None;
        }
        let vmin = groups.iter().map(|g| g.2).fold(f64::INFINITY, f64::min);
        let vmax = groups.iter().map(|g| g.2).fold(f64::NEG_INFINITY, f64::max);
        if vmax - vmin < SITE_SPLIT_MIN_VU {
            return None;
        }
        let w_total: f64 = groups.iter().map(|g| g.1).sum();
        let target = q * w_total;
        let total_at = |lambda: f64| -> f64 {
            groups
                .iter()
                .map(|g| g.1 * (g.2 + lambda).clamp(lo, hi))
                .sum()
        };
        // lambda by bisection: total_at is non-decreasing in lambda
        let (mut a, mut b) = (lo - vmax - 1.0, hi - vmin + 1.0);
        for _ in 0..100 {
            let m = 0.5 * (a + b);
            if total_at(m) < target {
                a = m;
            } else {
                b = m;
            }
        }
        let lambda = 0.5 * (a + b);
        let x: Vec<f64> = groups
            .iter()
            .map(|g| (g.2 + lambda).clamp(lo, hi))
            .collect();
        let tol = 1e-6 * w_total.max(1.0);
        // whole states, else half states, keeping the total exact (largest remainders first)
        for step in [1.0, 0.5] {
            let mut f: Vec<f64> = x.iter().map(|v| (v / step + 1e-9).floor() * step).collect();
            let mut rest = target - groups.iter().zip(&f).map(|(g, v)| g.1 * v).sum::<f64>();
            let mut order: Vec<usize> = (0..groups.len()).collect();
            order.sort_by(|&i, &j| (x[j] - f[j]).total_cmp(&(x[i] - f[i])).then(i.cmp(&j)));
            for i in order {
                if groups[i].1 * step <= rest + tol && f[i] + step <= hi + 1e-9 {
                    f[i] += step;
                    rest -= groups[i].1 * step;
                }
            }
            if rest.abs() < tol && f.iter().all(|v| *v >= lo - 1e-9 && *v > 0.0) {
                return Some(groups.iter().zip(f).map(|(g, v)| (g.0, v)).collect());
            }
        }
        Some(
            groups
                .iter()
                .zip(x)
                .map(|(g, v)| (g.0, (v * 1e3).round() / 1e3))
                .collect(),
        )
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_search_is_bounded_by_dropping_the_least_common_states() {
        let e = |s| Element::from_symbol(s).unwrap();
        // 12 elements with 3 states each: 531441 combinations
        let mut states: Vec<(Element, Vec<f64>)> = [
            "Mn", "Fe", "Co", "Cr", "Mo", "W", "V", "Ni", "Cu", "Ru", "Pd", "Pt",
        ]
        .iter()
        .map(|s| (e(s), vec![2.0, 3.0, 4.0]))
        .collect();
        let notes = bound_states(&mut states, MAX_COMBINATIONS);
        assert!(product(&states) <= MAX_COMBINATIONS);
        assert!(!notes.is_empty());
        // the most common (first) states are kept
        assert!(states.iter().all(|(_, v)| v[0] == 2.0));
        assert_eq!(combinations(&states).len(), product(&states));
    }
}
