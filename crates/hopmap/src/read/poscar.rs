//! VASP POSCAR / CONTCAR files: the whole cell, no symmetry.
//!
//! Layout (one item per line):
//! 1. a comment (in VASP 4 files often the list of species);
//! 2. the universal scale factor: positive, it multiplies the lattice vectors and Cartesian
//!    positions; negative, its magnitude is the cell volume in A^3;
//! 3. to 5. the lattice vectors **a**, **b**, **c** (A, before scaling);
//! 6. the species symbols (VASP 5 and later; absent in VASP 4). POTCAR decorations such as
//!    `Li_sv` or `Fe_pv/3a1b2c` are read by their element;
//! 7. the number of atoms of each species;
//! 8. optionally `Selective dynamics` (only the first letter, S or s, counts);
//! 9. `Direct` (fractional positions) or `Cartesian` (A, scaled), by the first letter
//!    (D/d; C/c/K/k);
//! 10. one position per atom, in species order; extra columns (selective-dynamics flags T/F, a
//!     trailing species name) are allowed. What follows a blank line after the positions
//!     (CONTCAR velocities, predictor-corrector data) is ignored; a further position line right
//!     after the last counted atom is an error (the counts do not match the positions).
//!
//! A VASP 4 file without a species line is read only if its comment line starts with as many
//! element symbols as there are species counts (`Li Fe P O`), or if every position line ends
//! with a species name; otherwise it is an error, since guessing species is not safe.

use crate::element::Element;
use crate::error::InputError;
use crate::lattice::{Frac, Lattice};
use crate::structure::{AsymmetricSite, Occupant, Site, Species, Structure, SymmetryInfo};
use nalgebra::Vector3;
use std::path::Path;

/// Reads a POSCAR or CONTCAR file into a structure with P 1 symmetry (identity only), every
/// atom its own asymmetric-unit site, labelled by element and running number (`Li1`, `Li2`).
pub fn read_poscar(path: impl AsRef<Path>) -> Result<Structure, InputError> {
    let path = path.as_ref();
    let file = path.display().to_string();
    let text = crate::cif::read_input_text(path)?;
    let name = path
        .file_stem()
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or_else(|| file.clone());
    parse_poscar(&text, &file, &name)
}

/// A line of the file with its 1-based number.
struct Line<'a> {
    number: usize,
    text: &'a str,
}

impl Line<'_> {
    /// The whitespace-separated words with their 1-based columns.
    fn words(&self) -> Vec<(usize, &str)> {
        words_with_columns(self.text)
    }
}

/// The whitespace-separated words of a line with their 1-based (character) columns.
pub(crate) fn words_with_columns(line: &str) -> Vec<(usize, &str)> {
    let mut out = Vec::new();
    let mut start: Option<usize> = None;
    for (i, c) in line.char_indices() {
        match (c.is_whitespace(), start) {
            (false, None) => start = Some(i),
            (true, Some(s)) => {
                out.push((line[..s].chars().count() + 1, &line[s..i]));
                start = None;
            }
            _ => {}
        }
    }
    if let Some(s) = start {
        out.push((line[..s].chars().count() + 1, &line[s..]));
    }
    out
}

/// Parses POSCAR text. `file` names the file in errors, `name` becomes the structure name.
pub fn parse_poscar(text: &str, file: &str, name: &str) -> Result<Structure, InputError> {
    let lines: Vec<Line> = text
        .lines()
        .enumerate()
        .map(|(i, t)| Line {
            number: i + 1,
            text: t.trim_end_matches('\r'),
        })
        .collect();
    let err = |line: usize, msg: String| InputError::new(file, msg).at_line(line);
    let get = |i: usize, what: &str| -> Result<&Line, InputError> {
        lines.get(i).ok_or_else(|| {
            err(
                lines.len().max(1),
                format!("the file ends before the {what} (line {})", i + 1),
            )
        })
    };
    let number = |line: &Line, col: usize, word: &str, what: &str| -> Result<f64, InputError> {
        parse_f64(word).ok_or_else(|| {
            InputError::new(file, format!("cannot read '{word}' as a number ({what})"))
                .at(line.number, col)
        })
    };

    let comment = get(0, "comment line")?;

    // scale factor
    let l = get(1, "scale factor")?;
    let w = l.words();
    let scale = match w.as_slice() {
        [(c, s), ..] if w.len() == 1 || !looks_numeric(w[1].1) => number(l, *c, s, "scale factor")?,
        [] => return Err(err(l.number, "the scale factor line is empty".into())),
        _ => {
            return Err(err(
                l.number,
                "three scale factors (one per axis) are not supported: give one universal scale \
                 factor"
                    .into(),
            ));
        }
    };
    if scale == 0.0 || !scale.is_finite() {
        return Err(err(
            l.number,
            format!("scale factor {scale} must be non-zero"),
        ));
    }

    // lattice vectors
    let mut vecs = [[0.0; 3]; 3];
    for (k, v) in vecs.iter_mut().enumerate() {
        let l = get(2 + k, "lattice vectors")?;
        let w = l.words();
        if w.len() < 3 {
            return Err(err(
                l.number,
                format!(
                    "lattice vector {} needs three numbers, found {}",
                    ["a", "b", "c"][k],
                    w.len()
                ),
            ));
        }
        for j in 0..3 {
            v[j] = number(l, w[j].0, w[j].1, "lattice vector component")?;
        }
    }
    let raw = Lattice::from_vectors(vecs[0], vecs[1], vecs[2])
        .map_err(|e| err(3, format!("lattice vectors: {e}")))?;
    let factor = if scale > 0.0 {
        scale
    } else {
        (-scale / raw.volume()).cbrt()
    };
    let scaled = vecs.map(|v| v.map(|x| x * factor));
    let lattice = Lattice::from_vectors(scaled[0], scaled[1], scaled[2])
        .map_err(|e| err(3, format!("lattice vectors: {e}")))?;
    crate::limits::check_lattice(&lattice).map_err(|e| err(3, format!("lattice vectors: {e}")))?;

    // species and counts
    let l6 = get(5, "species or atom counts")?;
    let w6 = l6.words();
    let vasp4 = !w6.is_empty() && w6.iter().all(|(_, s)| s.parse::<usize>().is_ok());
    let (species_line, counts_line, next) = if vasp4 {
        (None, l6, 6)
    } else {
        (Some(l6), get(6, "atom counts")?, 7)
    };
    let mut counts = Vec::new();
    for (c, s) in counts_line.words() {
        let n = s.parse::<usize>().map_err(|_| {
            InputError::new(
                file,
                format!("cannot read '{s}' as a number of atoms (a whole number)"),
            )
            .at(counts_line.number, c)
        })?;
        counts.push(n);
    }
    if counts.is_empty() {
        return Err(err(counts_line.number, "no atom counts".into()));
    }
    let total = counts
        .iter()
        .try_fold(0usize, |t, &n| t.checked_add(n))
        .filter(|&t| t <= crate::limits::MAX_ATOMS)
        .ok_or_else(|| {
            err(
                counts_line.number,
                format!(
                    "the atom counts add up to more than the {} atoms hopmap analyses",
                    crate::limits::MAX_ATOMS
                ),
            )
        })?;
    if total == 0 {
        return Err(err(counts_line.number, "the cell holds no atoms".into()));
    }
    crate::limits::check_atom_count(total, lattice.volume())
        .map_err(|e| err(counts_line.number, e))?;

    let mut species: Option<Vec<Element>> = match species_line {
        Some(l) => {
            let w = l.words();
            if w.len() != counts.len() {
                return Err(err(
                    counts_line.number,
                    format!(
                        "{} species on line {} but {} atom counts",
                        w.len(),
                        l.number,
                        counts.len()
                    ),
                ));
            }
            let mut v = Vec::new();
            for (c, s) in w {
                v.push(potcar_element(s).ok_or_else(|| {
                    InputError::new(file, format!("'{s}' is not an element symbol")).at(l.number, c)
                })?);
            }
            Some(v)
        }
        None => {
            // VASP 4: the species may be listed at the start of the comment line
            let w = comment.words();
            let from_comment: Option<Vec<Element>> = (w.len() >= counts.len())
                .then(|| {
                    w[..counts.len()]
                        .iter()
                        .map(|(_, s)| potcar_element(s))
                        .collect()
                })
                .flatten();
            from_comment
        }
    };

    // optional selective dynamics, then the coordinate mode
    let mut i = next;
    let mut l = get(i, "coordinate mode (Direct or Cartesian)")?;
    if l.text.trim_start().starts_with(['S', 's']) {
        i += 1;
        l = get(i, "coordinate mode (Direct or Cartesian)")?;
    }
    let cartesian = match l.text.trim_start().chars().next() {
        Some('D' | 'd') => false,
        Some('C' | 'c' | 'K' | 'k') => true,
        _ => {
            return Err(err(
                l.number,
                format!(
                    "expected 'Direct' or 'Cartesian', found '{}'",
                    l.text.trim()
                ),
            ));
        }
    };
    i += 1;

    // positions (the capacity bounded by the lines the file has, whatever the counts say)
    let mut positions: Vec<(Frac, Option<Element>)> =
        Vec::with_capacity(total.min(lines.len().saturating_sub(i)));
    for k in 0..total {
        let l = lines.get(i + k).filter(|l| !l.text.trim().is_empty());
        let Some(l) = l else {
            return Err(err(
                i + k + 1,
                format!(
                    "the counts on line {} promise {total} atoms, but only {k} positions follow                      (this line is blank or past the end of the file)",
                    counts_line.number
                ),
            ));
        };
        let w = l.words();
        if w.len() < 3 {
            return Err(err(
                l.number,
                format!("a position needs three numbers, found {}", w.len()),
            ));
        }
        let mut v = Vector3::zeros();
        for j in 0..3 {
            v[j] = number(l, w[j].0, w[j].1, "coordinate")?;
        }
        let frac = if cartesian {
            lattice.to_frac(crate::lattice::Cart(v * factor))
        } else {
            Frac(v)
        };
        // a trailing species name (after optional T/F flags), as some writers add
        let label = w[3..]
            .iter()
            .map(|(_, s)| *s)
            .find(|s| !matches!(*s, "T" | "F" | "t" | "f" | "!"))
            .and_then(potcar_element);
        positions.push((frac, label));
    }
    // CONTCAR velocities and predictor-corrector data follow a blank line; a position line
    // right after the last counted atom means the counts are short
    if let Some(l) = lines.get(i + total) {
        let w = l.words();
        let numeric = w.len() >= 3 && w[..3].iter().all(|(_, s)| parse_f64(s).is_some());
        if numeric {
            return Err(err(
                l.number,
                format!(
                    "more positions than the {total} atoms counted on line {}",
                    counts_line.number
                ),
            ));
        }
    }

    if species.is_none() && positions.iter().all(|(_, e)| e.is_some()) {
        // species from the labels at the end of the position lines, one per count group
        let mut v = Vec::new();
        let mut start = 0;
        for &n in &counts {
            if n > 0 {
                v.push(positions[start].1.unwrap());
            }
            start += n;
        }
        if v.len() == counts.len() {
            species = Some(v);
        }
    }
    let Some(species) = species else {
        return Err(err(
            counts_line.number,
            "VASP 4 file without a species line: name the species on the line above the counts \
             (VASP 5 format), or list them at the start of the comment line"
                .into(),
        ));
    };

    let mut elements = Vec::with_capacity(total);
    for (e, &n) in species.iter().zip(&counts) {
        elements.extend(std::iter::repeat_n(*e, n));
    }
    let atoms: Vec<(Element, Frac)> = elements
        .into_iter()
        .zip(positions.into_iter().map(|(f, _)| f))
        .collect();
    let source = format!(
        "VASP POSCAR: the whole cell as listed ({} coordinates), no symmetry applied (P 1)",
        if cartesian { "Cartesian" } else { "direct" }
    );
    Ok(p1_structure(name, lattice, atoms, source))
}

/// The element of a POTCAR-style species name: `Li`, `Li_sv`, `Fe_pv/3a1b2c`, `O_h`.
fn potcar_element(s: &str) -> Option<Element> {
    let base = s.split(['_', '/', ':']).next().unwrap_or(s);
    if base.is_empty() || !base.chars().all(|c| c.is_ascii_alphabetic()) || base.len() > 2 {
        return None;
    }
    Element::from_symbol(base)
}

fn looks_numeric(s: &str) -> bool {
    parse_f64(s).is_some()
}

/// A number as written in VASP and XYZ files, Fortran `D` exponents included (`1.0D-3`).
pub(crate) fn parse_f64(s: &str) -> Option<f64> {
    let s = crate::text::ascii_minus(s);
    let v: f64 = s
        .parse()
        .ok()
        .or_else(|| s.replace(['D', 'd'], "e").parse().ok())?;
    v.is_finite().then_some(v)
}

/// Builds a structure of the whole cell with P 1 symmetry: each atom is its own
/// asymmetric-unit site (multiplicity 1, occupancy 1), labelled element + running number.
pub(crate) fn p1_structure(
    name: &str,
    lattice: Lattice,
    atoms: Vec<(Element, Frac)>,
    source: String,
) -> Structure {
    let mut count: std::collections::HashMap<Element, usize> = Default::default();
    let mut asym = Vec::with_capacity(atoms.len());
    let mut sites = Vec::with_capacity(atoms.len());
    for (i, (e, f)) in atoms.into_iter().enumerate() {
        let n = count.entry(e).or_insert(0);
        *n += 1;
        let label = format!("{}{}", e.symbol(), n);
        let occupants = vec![Occupant {
            species: Species::new(e, None),
            occupancy: 1.0,
            label: label.clone(),
        }];
        asym.push(AsymmetricSite {
            label,
            frac: f,
            occupants: occupants.clone(),
            multiplicity: 1,
            wyckoff: None,
        });
        sites.push(Site {
            frac: f.wrapped(),
            occupants,
            asym_index: i,
        });
    }
    Structure {
        name: name.to_string(),
        lattice,
        symmetry: SymmetryInfo::p1(source),
        asymmetric_sites: asym,
        sites,
        warnings: Vec::new(),
        oxidation_states_assigned: false,
    }
}
