//! Substitution: replace a species by a mix on the same sites, to screen doping series without
//! editing structure files (e.g. `Nb=Nb:0.75,W:0.25`, or with oxidation states
//! `Ti4+=Ti4+:0.5,Nb5+:0.5`).

use crate::element::Element;
use crate::structure::{Occupant, Species, Structure};

/// One substitution rule: every occupant of `from` becomes the species of `to`, each with its
/// fraction of the original occupancy.
#[derive(Debug, Clone, PartialEq)]
pub struct Substitution {
    pub from: Element,
    /// When given, only occupants in this oxidation state are replaced.
    pub from_oxidation: Option<f64>,
    pub to: Vec<(Species, f64)>,
}

/// Reads "Nb", "Nb5+", "O2-", "Mn3.5+" ([`Species::parse`]).
pub fn parse_species(s: &str) -> Result<Species, String> {
    Species::parse(s)
}

impl std::str::FromStr for Substitution {
    type Err = String;
    /// `FROM=TO:FRACTION,TO:FRACTION,...`; fractions must sum to 1 (within 1e-6).
    fn from_str(spec: &str) -> Result<Self, String> {
        let (from, to) = spec
            .split_once('=')
            .ok_or_else(|| format!("substitution '{spec}' must look like Nb=Nb:0.75,W:0.25"))?;
        let from = parse_species(from)?;
        let mut parts = Vec::new();
        for item in to.split(',') {
            let (sp, frac) = item.split_once(':').ok_or_else(|| {
                format!("substitution '{spec}': '{item}' needs a fraction, e.g. W:0.25")
            })?;
            let frac: f64 = frac
                .trim()
                .parse()
                .map_err(|_| format!("substitution '{spec}': '{frac}' is not a number"))?;
            if !(frac > 0.0 && frac <= 1.0) {
                return Err(format!(
                    "substitution '{spec}': fraction {frac} must lie in (0, 1]"
                ));
            }
            parts.push((parse_species(sp)?, frac));
        }
        let total: f64 = parts.iter().map(|p| p.1).sum();
        if (total - 1.0).abs() > 1e-6 {
            return Err(format!(
                "substitution '{spec}': fractions sum to {total}, not 1"
            ));
        }
        Ok(Substitution {
            from: from.element,
            from_oxidation: from.oxidation,
            to: parts,
        })
    }
}

fn substitute_occupants(occ: &[Occupant], sub: &Substitution) -> (Vec<Occupant>, bool) {
    let mut out = Vec::new();
    let mut changed = false;
    for o in occ {
        let matches = o.species.element == sub.from
            && sub
                .from_oxidation
                .is_none_or(|q| o.species.oxidation.is_some_and(|p| (p - q).abs() < 1e-6));
        if !matches {
            out.push(o.clone());
            continue;
        }
        changed = true;
        for (sp, f) in &sub.to {
            let species = if sp.oxidation.is_none() && sp.element == o.species.element {
                o.species.clone()
            } else {
                sp.clone()
            };
            out.push(Occupant {
                species,
                occupancy: o.occupancy * f,
                label: o.label.clone(),
            });
        }
    }
    (out, changed)
}

/// Applies the substitution to every site. Returns an error when no site holds the species.
/// Oxidation states of substituted species left unknown are filled later by the assignment step;
/// a charge imbalance caused by the substitution is added to the warnings.
pub fn apply(structure: &Structure, sub: &Substitution) -> Result<Structure, String> {
    let mut s = structure.clone();
    let mut any = false;
    for a in &mut s.asymmetric_sites {
        let (o, c) = substitute_occupants(&a.occupants, sub);
        a.occupants = o;
        any |= c;
    }
    for site in &mut s.sites {
        site.occupants = substitute_occupants(&site.occupants, sub).0;
    }
    if !any {
        return Err(format!("no site of {} holds {}", structure.name, sub.from));
    }
    let desc: Vec<String> = sub
        .to
        .iter()
        .map(|(sp, f)| format!("{} x {f}", sp.name()))
        .collect();
    s.name = format!("{} [{} -> {}]", structure.name, sub.from, desc.join(" + "));
    let charges: Option<f64> = s
        .sites
        .iter()
        .flat_map(|x| x.occupants.iter())
        .map(|o| o.species.oxidation.map(|q| q * o.occupancy))
        .sum();
    if let Some(q) = charges {
        if q.abs() > 1e-3 {
            s.warnings.push(format!(
                "after substituting {} the cell carries a net charge of {q:+.3} e",
                sub.from
            ));
        }
    } else {
        // unknown states: let the assignment step decide
        for site in &mut s.sites {
            for o in &mut site.occupants {
                o.species.oxidation = None;
            }
        }
        for a in &mut s.asymmetric_sites {
            for o in &mut a.occupants {
                o.species.oxidation = None;
            }
        }
    }
    Ok(s)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn parses_specs() {
        let s: Substitution = "Nb=Nb:0.75,W:0.25".parse().unwrap();
        assert_eq!(s.from.symbol(), "Nb");
        assert_eq!(s.to.len(), 2);
        let s: Substitution = "Ti4+=Ti4+:0.5,Nb5+:0.5".parse().unwrap();
        assert_eq!(s.from_oxidation, Some(4.0));
        assert_eq!(s.to[1].0.oxidation, Some(5.0));
        assert!("Nb=W:0.5".parse::<Substitution>().is_err());
        assert!("Xx=W:1".parse::<Substitution>().is_err());
        assert!("Nb".parse::<Substitution>().is_err());
        assert_eq!(parse_species("O2-").unwrap().oxidation, Some(-2.0));
        assert_eq!(parse_species("Mn3.5+").unwrap().oxidation, Some(3.5));
    }
}
