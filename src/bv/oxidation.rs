//! Oxidation states for a structure whose file gives none, or only some.
//!
//! # The rule
//! 1. Elements whose every occupant already has a state keep it.
//! 2. The others are split into anions and cations. An element of the usual anion list
//!    ([`Element::is_usual_anion`]) is an anion at its most negative common state (O2-, S2-,
//!    N3-, Cl-, H-, P3-, ...), unless its nearest neighbour in the structure is a more
//!    electronegative anion-list element: then it is the centre of an oxo-anion or similar
//!    group and a cation (P in a phosphate, S in a sulfate, N in a nitrate, H in a hydroxide).
//!    Every other element is a cation.
//! 3. Each cation element takes one of its positive common oxidation states
//!    ([`Element::common_oxidation_states`], from pymatgen's table), the same on all its sites.
//!    Every combination that makes the cell neutral (occupancy-weighted) is a candidate. At most
//!    [`MAX_COMBINATIONS`] combinations are tried: past that, the least common states of the
//!    elements with most choices are dropped first, and a note says so.
//! 4. When no integer combination is neutral, one element at a time may take the fractional
//!    average valence that balances the others (Mn3.5+ in LiMn2O4, Fe8/3+ in Fe3O4), provided it
//!    lies within the range of that element's common states; if even that fails, within
//!    1 .. the highest common state (so Ti3.5+ in LiTi2O4 is found although Ti's common list is
//!    only 4+).
//! 5. Each candidate is scored by the global instability index of the structure with those
//!    states, each pair taking its first-shell parameters at the candidate valences (so the
//!    parameters and the sums are consistent for every candidate without iteration). The
//!    lowest GII wins; on a tie the earlier candidate (more common states) wins.
//!
//! Known limits: a single state per element (not per site: magnetite's Fe3+ / Fe2.5+ split
//! comes out as the average Fe8/3+ on both sites), no anion-anion bonds (persulfides such as
//! FeS2 have S- and are not found).

use super::BvError;
use super::params::{PairRole, ParameterTable};
use super::valence::{PairKey, key_of, representatives};
use crate::element::Element;
use crate::neighbours::NeighbourSearch;
use crate::structure::{Species, Structure};
use std::collections::{BTreeMap, HashMap};

/// Upper bound on the integer combinations of cation states scored.
pub const MAX_COMBINATIONS: usize = 20_000;
/// Contacts within this distance (A) are gathered once for the scoring.
const CONTACT_RANGE: f64 = 5.0;

/// The result of [`assign_oxidation_states`].
#[derive(Debug, Clone, PartialEq)]
pub struct OxidationAssignment {
    /// The input with every occupant's state filled and `oxidation_states_assigned = true`.
    pub structure: Structure,
    /// The state of each element that was assigned (fractional for a mixed-valence element).
    pub states: Vec<(Element, f64)>,
    /// GII (v.u.) of the chosen assignment.
    pub gii: f64,
    /// The element that took a fractional average valence, if any.
    pub mixed_valence: Option<Element>,
    /// Number of charge-neutral candidates scored.
    pub candidates_scored: usize,
    /// The next best candidates and their GII (v.u.), best first, at most three.
    pub alternatives: Vec<(Vec<(Element, f64)>, f64)>,
    /// A plain sentence for reports.
    pub note: String,
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

/// Assigns the missing oxidation states by the rule of the module docs.
pub fn assign_oxidation_states(
    s: &Structure,
    table: &ParameterTable,
) -> Result<OxidationAssignment, BvError> {
    let (_, formula) = s.formula_and_z();
    let no_solution = |m: String| BvError::NoNeutralAssignment {
        formula: formula.clone(),
        message: m,
    };
    // 1. what is known
    let mut all: BTreeMap<Element, bool> = BTreeMap::new();
    for site in &s.sites {
        for o in &site.occupants {
            let known = all.entry(o.species.element).or_insert(true);
            *known &= o.species.oxidation.is_some();
        }
    }
    if all.is_empty() {
        return Err(no_solution("the structure has no atoms".into()));
    }
    let unknown: Vec<Element> = all.iter().filter(|(_, k)| !**k).map(|(e, _)| *e).collect();
    if unknown.is_empty() {
        let gii = super::valence::valence_check(s, table)
            .map(|r| r.gii)
            .unwrap_or(f64::NAN);
        return Ok(OxidationAssignment {
            structure: s.clone(),
            states: Vec::new(),
            gii,
            mixed_valence: None,
            candidates_scored: 0,
            alternatives: Vec::new(),
            note: "all oxidation states were given in the file; none assigned".into(),
        });
    }
    let comp = s.cell_composition();
    let mut fixed_charge = 0.0;
    for site in &s.sites {
        for o in &site.occupants {
            if all[&o.species.element] {
                fixed_charge += o.occupancy * o.species.oxidation.unwrap_or(0.0);
            }
        }
    }
    // 2. anions and cations
    let positions: Vec<_> = s.sites.iter().map(|x| x.frac).collect();
    let search = NeighbourSearch::new(&s.lattice, &positions, 4.0);
    let mut anion_state: BTreeMap<Element, f64> = BTreeMap::new();
    let mut cation_states: Vec<(Element, Vec<f64>)> = Vec::new();
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
            let pos: Vec<f64> = e
                .common_oxidation_states()
                .iter()
                .filter(|q| **q > 0)
                .map(|q| *q as f64)
                .collect();
            if pos.is_empty() {
                return Err(no_solution(format!(
                    "{e} acts as a cation here but has no positive common oxidation state"
                )));
            }
            cation_states.push((e, pos));
        }
    }
    let anion_charge: f64 = anion_state.iter().map(|(e, q)| comp[e] * q).sum();
    let n_atoms: f64 = comp.values().sum();
    let tol = 0.02 + 1e-3 * n_atoms;
    // 3. bound the search
    let mut notes = bound_states(&mut cation_states, MAX_COMBINATIONS);
    let counts: Vec<f64> = cation_states.iter().map(|(e, _)| comp[e]).collect();
    let mut candidates: Vec<(Vec<f64>, Option<usize>)> = Vec::new();
    for combo in combinations(&cation_states) {
        let total = fixed_charge
            + anion_charge
            + combo.iter().zip(&counts).map(|(q, n)| q * n).sum::<f64>();
        if total.abs() < tol {
            candidates.push((combo, None));
        }
    }
    // 4. one mixed-valence element
    if candidates.is_empty() {
        for wide in [false, true] {
            for (i, (_, states)) in cation_states.iter().enumerate() {
                let lo = if wide {
                    1.0
                } else {
                    states.iter().copied().fold(f64::INFINITY, f64::min)
                };
                let hi = states.iter().copied().fold(0.0, f64::max);
                let mut others = cation_states.clone();
                others[i].1 = vec![0.0];
                for mut combo in combinations(&others) {
                    let rest = fixed_charge
                        + anion_charge
                        + combo.iter().zip(&counts).map(|(q, n)| q * n).sum::<f64>();
                    let q = -rest / counts[i];
                    let q = if (q - q.round()).abs() < 1e-6 {
                        q.round()
                    } else {
                        q
                    };
                    if q >= lo - 1e-6 && q <= hi + 1e-6 {
                        combo[i] = q;
                        candidates.push((combo, Some(i)));
                    }
                }
            }
            if !candidates.is_empty() {
                if wide {
                    notes.push(
                        "no neutral assignment within the common states; the average valence \
                         was allowed down to 1"
                            .into(),
                    );
                }
                break;
            }
        }
    }
    if candidates.is_empty() {
        let tried: Vec<String> = cation_states
            .iter()
            .map(|(e, v)| format!("{e} {v:?}"))
            .collect();
        return Err(no_solution(format!(
            "anions {:?} with cation states {} cannot balance",
            anion_state
                .iter()
                .map(|(e, q)| Species::new(*e, Some(*q)).name())
                .collect::<Vec<_>>(),
            tried.join(", ")
        )));
    }
    // 5. score by GII
    let scorer = Scorer::new(s, &search);
    let mut cache: HashMap<PairKey, Option<super::BondParams>> = HashMap::new();
    let mut scored: Vec<(f64, usize)> = Vec::new();
    for (k, (combo, _)) in candidates.iter().enumerate() {
        let mut state: HashMap<Element, f64> = anion_state.iter().map(|(e, q)| (*e, *q)).collect();
        for ((e, _), q) in cation_states.iter().zip(combo) {
            state.insert(*e, *q);
        }
        let gii = scorer.gii(table, &state, &mut cache);
        scored.push((gii, k));
    }
    scored.sort_by(|a, b| a.0.total_cmp(&b.0).then(a.1.cmp(&b.1)));
    let states_of = |k: usize| -> Vec<(Element, f64)> {
        let mut v: Vec<(Element, f64)> = cation_states
            .iter()
            .zip(&candidates[k].0)
            .map(|((e, _), q)| (*e, *q))
            .collect();
        v.extend(anion_state.iter().map(|(e, q)| (*e, *q)));
        v
    };
    let (gii, best) = scored[0];
    let states = states_of(best);
    let mut mixed_valence = candidates[best].1.map(|i| cation_states[i].0);
    if let Some(i) = candidates[best].1 {
        let q = candidates[best].0[i];
        if (q - q.round()).abs() < 1e-6 {
            // an integer state outside the common list (Mn3+ in LiMnO2): not mixed valence
            mixed_valence = None;
            notes.push(format!(
                "{} takes {}, not among its common states, to balance the charge",
                cation_states[i].0,
                q.round()
            ));
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
    for site in &mut out.sites {
        for o in &mut site.occupants {
            if let Some(q) = lookup.get(&o.species.element) {
                o.species.oxidation = Some(*q);
            }
        }
    }
    for site in &mut out.asymmetric_sites {
        for o in &mut site.occupants {
            if let Some(q) = lookup.get(&o.species.element) {
                o.species.oxidation = Some(*q);
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
         (GII {:.3} v.u., best of {} neutral candidates)",
        names.join(" "),
        gii,
        candidates.len()
    );
    if let Some(e) = mixed_valence {
        note.push_str(&format!(
            "; {e} carries an average mixed valence of {:.3}",
            lookup[&e]
        ));
    }
    for n in &notes {
        note.push_str("; ");
        note.push_str(n);
    }
    Ok(OxidationAssignment {
        structure: out,
        states,
        gii,
        mixed_valence,
        candidates_scored: candidates.len(),
        alternatives,
        note,
    })
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
    /// (element, occupancy, weight, fixed charge, contacts: (element, occupancy, fixed, d))
    ions: Vec<ScoredIon>,
}

struct ScoredIon {
    element: Element,
    fixed: Option<f64>,
    weight: f64,
    contacts: Vec<(Element, f64, Option<f64>, f64)>,
}

impl Scorer {
    fn new(s: &Structure, search: &NeighbourSearch) -> Scorer {
        let mut ions = Vec::new();
        for rep in representatives(s) {
            let site = &s.sites[rep.site];
            let near = search.within(site.frac, CONTACT_RANGE);
            for o in &site.occupants {
                let mut contacts = Vec::new();
                for n in &near {
                    if n.distance < 0.05 {
                        continue;
                    }
                    for o2 in &s.sites[n.index].occupants {
                        contacts.push((
                            o2.species.element,
                            o2.occupancy,
                            o2.species.oxidation,
                            n.distance,
                        ));
                    }
                }
                ions.push(ScoredIon {
                    element: o.species.element,
                    fixed: o.species.oxidation,
                    weight: rep.multiplicity as f64 * o.occupancy,
                    contacts,
                });
            }
        }
        Scorer { ions }
    }

    fn gii(
        &self,
        table: &ParameterTable,
        state: &HashMap<Element, f64>,
        cache: &mut HashMap<PairKey, Option<super::BondParams>>,
    ) -> f64 {
        let (mut num, mut den) = (0.0, 0.0);
        for ion in &self.ions {
            let Some(q) = ion.fixed.or_else(|| state.get(&ion.element).copied()) else {
                continue;
            };
            if q == 0.0 {
                continue;
            }
            let mut v = 0.0;
            for &(e2, occ, fixed, d) in &ion.contacts {
                let Some(q2) = fixed.or_else(|| state.get(&e2).copied()) else {
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
            let dev = v - q.abs();
            num += ion.weight * dev * dev;
            den += ion.weight;
        }
        if den > 0.0 {
            (num / den).sqrt()
        } else {
            f64::INFINITY
        }
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
