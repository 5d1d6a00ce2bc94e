//! A TOML file that replaces tabulated values and model knobs.
//!
//! Every value set here is recorded with the file and line it came from, and shows up so in
//! the provenance of every output that used it. Unknown keys are errors (a misspelt knob must
//! not pass silently). The layout:
//!
//! ```toml
//! [model]                  # any subset of the knobs of ModelKnobs
//! d0_ev = 0.3              # eV per bond, monovalent probe
//! d0_scales_with_valence = true
//! screening_factor = 0.75
//! charge_scale = 1.0
//! morse_cutoff_a = 6.0     # A; one cutoff for every probe-anion pair
//! coulomb_cutoff_a = 10.0  # A
//! energy_cap_ev = 10.0
//! mismatch_cap = 10.0      # v.u.
//!
//! [probe]
//! valence = 1              # V_A, v.u.
//! coordination = 5         # N_A
//!
//! [[pair]]                 # any of r0, b, cutoff_a; valences optional ("Li" = any valence)
//! cation = "Li+"
//! anion = "O2-"
//! r0 = 1.1745              # A
//! b = 0.514                # A
//! cutoff_a = 6.0           # A
//!
//! [[radius]]
//! species = "Ti4+"
//! coordination = 6         # optional: any coordination when left out
//! radius_a = 0.605         # A
//!
//! [oxidation]              # states by element symbol or site label (see bv::oxidation)
//! Co = 3.5
//! Fe1 = 2
//! ```

use super::model::ModelKnobs;
use super::oxidation::OxidationSetting;
use super::params::{PairOverride, ParameterTable, ValueOrigin};
use super::radii::RadiusOverride;
use crate::element::Element;
use crate::error::InputError;
use serde::Deserialize;
use std::path::Path;
use toml::Spanned;

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct FileDoc {
    model: Option<ModelSection>,
    probe: Option<ProbeSection>,
    #[serde(default)]
    pair: Vec<Spanned<PairEntry>>,
    #[serde(default)]
    radius: Vec<Spanned<RadiusEntry>>,
    oxidation: Option<std::collections::BTreeMap<String, Spanned<f64>>>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct ModelSection {
    d0_ev: Option<Spanned<f64>>,
    d0_scales_with_valence: Option<Spanned<bool>>,
    softness_transfer: Option<Spanned<bool>>,
    screening_factor: Option<Spanned<f64>>,
    charge_scale: Option<Spanned<f64>>,
    charge_shell_exponent: Option<Spanned<f64>>,
    d0_length_exponent: Option<Spanned<f64>>,
    d0_chalcogenide_factor: Option<Spanned<f64>>,
    mobile_charge_scale: Option<Spanned<f64>>,
    mobile_excluded_nearest: Option<Spanned<f64>>,
    vacancy_share_threshold: Option<Spanned<f64>>,
    morse_cutoff_a: Option<Spanned<f64>>,
    coulomb_cutoff_a: Option<Spanned<f64>>,
    energy_cap_ev: Option<Spanned<f64>>,
    mismatch_cap: Option<Spanned<f64>>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct ProbeSection {
    valence: Option<Spanned<f64>>,
    coordination: Option<Spanned<f64>>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct PairEntry {
    cation: Spanned<String>,
    anion: Spanned<String>,
    r0: Option<Spanned<f64>>,
    b: Option<Spanned<f64>>,
    cutoff_a: Option<Spanned<f64>>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RadiusEntry {
    species: Spanned<String>,
    coordination: Option<Spanned<f64>>,
    radius_a: Spanned<f64>,
}

/// One knob from the file.
#[derive(Debug, Clone, PartialEq)]
pub enum KnobSetting {
    Number {
        name: String,
        value: f64,
        line: usize,
    },
    Flag {
        name: String,
        value: bool,
        line: usize,
    },
}

/// The contents of an override file, checked and ready to apply.
#[derive(Debug, Clone, PartialEq)]
pub struct Overrides {
    pub file: String,
    pub pairs: Vec<PairOverride>,
    pub radii: Vec<RadiusOverride>,
    pub knobs: Vec<KnobSetting>,
    /// Oxidation states by element or site label (`[oxidation]`).
    pub oxidation: Vec<OxidationSetting>,
}

/// Line and column (1-based) of a byte offset.
fn line_col(text: &str, offset: usize) -> (usize, usize) {
    let offset = offset.min(text.len());
    let before = &text[..offset];
    let line = before.matches('\n').count() + 1;
    let col = offset - before.rfind('\n').map(|i| i + 1).unwrap_or(0) + 1;
    (line, col)
}

/// "Li+" -> (Li, Some(1)), "O2-" -> (O, Some(-2)), "Mn3.5+" -> (Mn, Some(3.5)), "Li" -> (Li, None)
/// ([`crate::structure::Species::parse`]); a negative magnitude or junk -> None.
pub fn parse_species(text: &str) -> Option<(Element, Option<f64>)> {
    crate::structure::Species::parse(text)
        .ok()
        .map(|s| (s.element, s.oxidation))
}

impl Overrides {
    /// Reads and checks an override file.
    pub fn read(path: &Path) -> Result<Overrides, InputError> {
        let name = path.display().to_string();
        let text = std::fs::read_to_string(path)
            .map_err(|e| InputError::new(&name, format!("cannot read the file: {e}")))?;
        Overrides::parse(&text, &name)
    }

    /// Parses override text; `file` names it in errors and provenance.
    pub fn parse(text: &str, file: &str) -> Result<Overrides, InputError> {
        let doc: FileDoc = toml::from_str(text).map_err(|e| {
            let mut err = InputError::new(file, e.message().trim().to_string());
            if let Some(span) = e.span() {
                let (l, c) = line_col(text, span.start);
                err = err.at(l, c);
            }
            err
        })?;
        let at = |span: std::ops::Range<usize>, msg: String| {
            let (l, c) = line_col(text, span.start);
            InputError::new(file, msg).at(l, c)
        };
        let origin = |span: std::ops::Range<usize>| ValueOrigin::UserFile {
            file: file.to_string(),
            line: line_col(text, span.start).0,
        };
        let mut out = Overrides {
            file: file.to_string(),
            pairs: Vec::new(),
            radii: Vec::new(),
            knobs: Vec::new(),
            oxidation: Vec::new(),
        };
        let mut number = |name: &str, v: &Option<Spanned<f64>>, min_excl: Option<f64>| {
            if let Some(v) = v {
                let x = *v.get_ref();
                let ok = x.is_finite() && min_excl.is_none_or(|m| x > m);
                if !ok {
                    return Err(at(
                        v.span(),
                        format!(
                            "{name} = {x} is out of range (must be a finite number{})",
                            min_excl.map(|m| format!(" above {m}")).unwrap_or_default()
                        ),
                    ));
                }
                out.knobs.push(KnobSetting::Number {
                    name: name.to_string(),
                    value: x,
                    line: line_col(text, v.span().start).0,
                });
            }
            Ok(())
        };
        if let Some(m) = &doc.model {
            number("d0_ev", &m.d0_ev, Some(-1e-300))?;
            number("screening_factor", &m.screening_factor, Some(0.0))?;
            number("charge_scale", &m.charge_scale, Some(-1e-300))?;
            number(
                "charge_shell_exponent",
                &m.charge_shell_exponent,
                Some(-1e-300),
            )?;
            number("d0_length_exponent", &m.d0_length_exponent, None)?;
            number(
                "d0_chalcogenide_factor",
                &m.d0_chalcogenide_factor,
                Some(0.0),
            )?;
            number("mobile_charge_scale", &m.mobile_charge_scale, Some(-1e-300))?;
            number(
                "mobile_excluded_nearest",
                &m.mobile_excluded_nearest,
                Some(-1e-300),
            )?;
            number(
                "vacancy_share_threshold",
                &m.vacancy_share_threshold,
                Some(0.0),
            )?;
            number("morse_cutoff_a", &m.morse_cutoff_a, Some(0.0))?;
            number("coulomb_cutoff_a", &m.coulomb_cutoff_a, Some(0.0))?;
            number("energy_cap_ev", &m.energy_cap_ev, Some(0.0))?;
            number("mismatch_cap", &m.mismatch_cap, Some(0.0))?;
        }
        if let Some(p) = &doc.probe {
            number("probe_valence", &p.valence, Some(0.0))?;
            number("probe_coordination", &p.coordination, Some(0.0))?;
        }
        if let Some(m) = &doc.model {
            for (name, flag) in [
                ("d0_scales_with_valence", &m.d0_scales_with_valence),
                ("softness_transfer", &m.softness_transfer),
            ] {
                if let Some(f) = flag {
                    out.knobs.push(KnobSetting::Flag {
                        name: name.into(),
                        value: *f.get_ref(),
                        line: line_col(text, f.span().start).0,
                    });
                }
            }
        }
        for entry in &doc.pair {
            let e = entry.get_ref();
            let species = |s: &Spanned<String>, want_sign: f64| {
                let (el, q) = parse_species(s.get_ref()).ok_or_else(|| {
                    at(
                        s.span(),
                        format!(
                            "'{}' is not a species (write e.g. \"Li+\", \"O2-\", or \"Li\" for any valence)",
                            s.get_ref()
                        ),
                    )
                })?;
                if let Some(q) = q
                    && q * want_sign <= 0.0
                {
                    return Err(at(
                        s.span(),
                        format!(
                            "'{}' must have a {} valence here",
                            s.get_ref(),
                            if want_sign > 0.0 {
                                "positive"
                            } else {
                                "negative"
                            }
                        ),
                    ));
                }
                Ok((el, q))
            };
            let (cation, cv) = species(&e.cation, 1.0)?;
            let (anion, av) = species(&e.anion, -1.0)?;
            let positive = |v: &Option<Spanned<f64>>, name: &str| match v {
                Some(x) if !(x.get_ref().is_finite() && *x.get_ref() > 0.0) => Err(at(
                    x.span(),
                    format!("{name} = {} must be a positive length (A)", x.get_ref()),
                )),
                Some(x) => Ok(Some((*x.get_ref(), origin(x.span())))),
                None => Ok(None),
            };
            let r0 = positive(&e.r0, "r0")?;
            let b = positive(&e.b, "b")?;
            let cutoff_a = positive(&e.cutoff_a, "cutoff_a")?;
            if r0.is_none() && b.is_none() && cutoff_a.is_none() {
                return Err(at(
                    entry.span(),
                    "a [[pair]] entry must set at least one of r0, b, cutoff_a".into(),
                ));
            }
            out.pairs.push(PairOverride {
                cation,
                cation_valence: cv,
                anion,
                anion_valence: av,
                r0,
                b,
                cutoff_a,
            });
        }
        for entry in &doc.radius {
            let e = entry.get_ref();
            let (element, oxidation) = parse_species(e.species.get_ref()).ok_or_else(|| {
                at(
                    e.species.span(),
                    format!(
                        "'{}' is not a species (write e.g. \"Ti4+\")",
                        e.species.get_ref()
                    ),
                )
            })?;
            let r = *e.radius_a.get_ref();
            if !(r.is_finite() && r > 0.0) {
                return Err(at(
                    e.radius_a.span(),
                    format!("radius_a = {r} must be a positive length (A)"),
                ));
            }
            let coordination = match &e.coordination {
                Some(c) if !(c.get_ref().is_finite() && *c.get_ref() > 0.0) => {
                    return Err(at(
                        c.span(),
                        format!("coordination = {} must be positive", c.get_ref()),
                    ));
                }
                Some(c) => Some(*c.get_ref()),
                None => None,
            };
            out.radii.push(RadiusOverride {
                element,
                oxidation,
                coordination,
                radius: r,
                origin: origin(e.radius_a.span()),
            });
        }
        for (key, v) in doc.oxidation.iter().flatten() {
            let (line, _) = line_col(text, v.span().start);
            let setting =
                OxidationSetting::new(key, *v.get_ref(), &format!("override file {file}:{line}"))
                    .map_err(|m| at(v.span(), m))?;
            out.oxidation.push(setting);
        }
        Ok(out)
    }

    /// Puts the file's values into the table and the knobs, recording their origin.
    pub fn apply(&self, table: &mut ParameterTable, knobs: &mut ModelKnobs) {
        for p in &self.pairs {
            table.add_pair_override(p.clone());
        }
        for r in &self.radii {
            table.radii.add_override(r.clone());
        }
        table.oxidation.extend(self.oxidation.iter().cloned());
        for k in &self.knobs {
            let (name, line) = match k {
                KnobSetting::Number { name, value, line } => {
                    let v = *value;
                    match name.as_str() {
                        "d0_ev" => knobs.d0_ev = v,
                        "screening_factor" => knobs.screening_factor = v,
                        "charge_scale" => knobs.charge_scale = v,
                        "charge_shell_exponent" => knobs.charge_shell_exponent = v,
                        "d0_length_exponent" => knobs.d0_length_exponent = v,
                        "d0_chalcogenide_factor" => knobs.d0_chalcogenide_factor = v,
                        "mobile_charge_scale" => knobs.mobile_charge_scale = v,
                        "mobile_excluded_nearest" => {
                            knobs.mobile_excluded_nearest = v.round().clamp(0.0, 4.0) as usize
                        }
                        "vacancy_share_threshold" => knobs.vacancy_share_threshold = v,
                        "morse_cutoff_a" => knobs.morse_cutoff_a = Some(v),
                        "coulomb_cutoff_a" => knobs.coulomb_cutoff_a = Some(v),
                        "energy_cap_ev" => knobs.energy_cap_ev = v,
                        "mismatch_cap" => knobs.mismatch_cap = v,
                        "probe_valence" => knobs.probe_valence = Some(v),
                        "probe_coordination" => knobs.probe_coordination = Some(v),
                        _ => continue,
                    }
                    (name, *line)
                }
                KnobSetting::Flag { name, value, line } => {
                    match name.as_str() {
                        "d0_scales_with_valence" => knobs.d0_scales_with_valence = *value,
                        "softness_transfer" => knobs.softness_transfer = *value,
                        _ => {}
                    }
                    (name, *line)
                }
            };
            knobs.set_by.insert(
                name.clone(),
                ValueOrigin::UserFile {
                    file: self.file.clone(),
                    line,
                },
            );
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn species_notation() {
        let li = Element::from_symbol("Li").unwrap();
        assert_eq!(parse_species("Li+"), Some((li, Some(1.0))));
        assert_eq!(parse_species("Li"), Some((li, None)));
        let o = Element::from_symbol("O").unwrap();
        assert_eq!(parse_species("O2-"), Some((o, Some(-2.0))));
        let mn = Element::from_symbol("Mn").unwrap();
        assert_eq!(parse_species("Mn3.5+"), Some((mn, Some(3.5))));
        assert_eq!(parse_species("Xx+"), None);
        assert_eq!(parse_species("Li2"), None);
    }

    #[test]
    fn bad_toml_names_the_line() {
        let text = "[model]\nd0_ev = 0.3\nscreening_factor = = 2\n";
        let e = Overrides::parse(text, "knobs.toml").unwrap_err();
        assert_eq!(e.file, "knobs.toml");
        assert_eq!(e.line, Some(3), "{e}");
    }

    #[test]
    fn misspelt_knob_is_an_error_at_its_line() {
        let text = "[model]\nd0_ev = 0.3\nscreening_factr = 0.5\n";
        let e = Overrides::parse(text, "k.toml").unwrap_err();
        assert_eq!(e.line, Some(3), "{e}");
        assert!(e.message.contains("screening_factr"), "{e}");
    }

    #[test]
    fn out_of_range_values_are_errors_at_their_line() {
        let text = "[[pair]]\ncation = \"Li+\"\nanion = \"O2-\"\nb = -0.3\n";
        let e = Overrides::parse(text, "k.toml").unwrap_err();
        assert_eq!(e.line, Some(4), "{e}");
        let text = "[[pair]]\ncation = \"O2-\"\nanion = \"Li+\"\nr0 = 1.2\n";
        let e = Overrides::parse(text, "k.toml").unwrap_err();
        assert_eq!(e.line, Some(2), "{e}");
        assert!(e.message.contains("positive valence"), "{e}");
    }
}
