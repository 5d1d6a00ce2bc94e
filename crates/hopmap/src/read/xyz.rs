//! Extended XYZ files: a Cartesian atom list with the cell in the comment line.
//!
//! Layout: line 1 the number of atoms N; line 2 `key=value` pairs, values optionally in double
//! quotes, among them
//! - `Lattice="ax ay az bx by bz cx cy cz"`: the lattice vectors **a**, **b**, **c** in A
//!   (required: hopmap works on periodic crystals, and a plain XYZ file has no cell);
//! - `Properties=species:S:1:pos:R:3:...`: the columns of the atom lines as name:type:width
//!   triples (types S string, R real, I integer, L logical). The species column may instead be
//!   `Z:I:1` (atomic numbers). Without `Properties` the columns are species, then x y z;
//! - `pbc="T T T"`: when given it must be periodic in all three directions.
//!
//! Then N atom lines with Cartesian positions in A. Only the first frame of a multi-frame file is
//! read (with a warning). Keys are case-insensitive.

use super::poscar::{p1_structure, parse_f64, words_with_columns};
use crate::element::Element;
use crate::error::InputError;
use crate::lattice::{Cart, Lattice};
use nalgebra::Vector3;
use std::path::Path;

/// Reads an extended XYZ file into a structure with P 1 symmetry (identity only), every atom its
/// own asymmetric-unit site, labelled by element and running number.
pub fn read_extxyz(path: impl AsRef<Path>) -> Result<crate::structure::Structure, InputError> {
    let path = path.as_ref();
    let file = path.display().to_string();
    let text = crate::cif::read_input_text(path)?;
    let name = path
        .file_stem()
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or_else(|| file.clone());
    parse_extxyz(&text, &file, &name)
}

/// Splits the comment line into (key, value) pairs; values in double quotes may hold spaces.
/// Errors carry the 1-based column of the problem.
/// Key, value and 1-based column of each `key=value` pair of a comment line.
type KeyValues = Vec<(String, String, usize)>;

fn key_values(line: &str) -> Result<KeyValues, (usize, String)> {
    let chars: Vec<char> = line.chars().collect();
    let mut out = Vec::new();
    let mut i = 0;
    while i < chars.len() {
        if chars[i].is_whitespace() {
            i += 1;
            continue;
        }
        let start = i;
        while i < chars.len() && !chars[i].is_whitespace() && chars[i] != '=' {
            i += 1;
        }
        let key: String = chars[start..i].iter().collect();
        if i < chars.len() && chars[i] == '=' {
            i += 1;
            let value = if i < chars.len() && chars[i] == '"' {
                let open = i;
                i += 1;
                let vstart = i;
                while i < chars.len() && chars[i] != '"' {
                    i += 1;
                }
                if i >= chars.len() {
                    return Err((
                        open + 1,
                        format!("the quoted value of '{key}' is not closed"),
                    ));
                }
                let v: String = chars[vstart..i].iter().collect();
                i += 1;
                v
            } else {
                let vstart = i;
                while i < chars.len() && !chars[i].is_whitespace() {
                    i += 1;
                }
                chars[vstart..i].iter().collect()
            };
            out.push((key, value, start + 1));
        } else {
            // a bare word: a flag, or free comment text
            out.push((key, "T".into(), start + 1));
        }
    }
    Ok(out)
}

/// Where the species and position columns are, from a `Properties` value.
fn columns(props: &str) -> Result<(usize, bool, usize, usize), String> {
    let parts: Vec<&str> = props.split(':').collect();
    if !parts.len().is_multiple_of(3) {
        return Err(format!(
            "Properties '{props}' must be name:type:width triples"
        ));
    }
    let mut col: usize = 0;
    let (mut species, mut pos) = (None, None);
    for t in parts.chunks(3) {
        let width: usize = t[2].parse().map_err(|_| {
            format!(
                "width '{}' of property '{}' is not a whole number",
                t[2], t[0]
            )
        })?;
        if width == 0 {
            return Err(format!(
                "property '{}' has width 0; a column has width 1 or more",
                t[0]
            ));
        }
        let name = t[0].to_ascii_lowercase();
        match name.as_str() {
            "species" | "element" | "symbol" if species.is_none() => species = Some((col, false)),
            "z" | "numbers" if species.is_none() && t[1].eq_ignore_ascii_case("I") => {
                species = Some((col, true))
            }
            "pos" | "positions" => {
                if width != 3 {
                    return Err(format!("property '{}' must have width 3", t[0]));
                }
                pos = Some(col)
            }
            _ => {}
        }
        col = col
            .checked_add(width)
            .ok_or_else(|| format!("width '{}' of property '{}' is too large", t[2], t[0]))?;
    }
    let (s, is_z) = species.ok_or("Properties name no species column (species:S:1)")?;
    let p = pos.ok_or("Properties name no position column (pos:R:3)")?;
    Ok((s, is_z, p, col))
}

/// Parses extended XYZ text. `file` names the file in errors, `name` becomes the structure name.
pub fn parse_extxyz(
    text: &str,
    file: &str,
    name: &str,
) -> Result<crate::structure::Structure, InputError> {
    let lines: Vec<&str> = text.lines().map(|l| l.trim_end_matches('\r')).collect();
    let err = |line: usize, msg: String| InputError::new(file, msg).at_line(line);
    let first = lines
        .first()
        .ok_or_else(|| InputError::new(file, "the file is empty"))?;
    let n: usize = first.trim().parse().map_err(|_| {
        err(
            1,
            format!(
                "the first line must be the number of atoms, found '{}'",
                first.trim()
            ),
        )
    })?;
    if n == 0 {
        return Err(err(1, "the file holds no atoms".into()));
    }
    if n > crate::limits::MAX_ATOMS {
        return Err(err(
            1,
            format!(
                "the first line promises {n} atoms; hopmap analyses at most {}",
                crate::limits::MAX_ATOMS
            ),
        ));
    }
    let comment = lines
        .get(1)
        .ok_or_else(|| err(1, "the file ends before the comment line".into()))?;
    let kv = key_values(comment).map_err(|(c, m)| InputError::new(file, m).at(2, c))?;
    let find = |key: &str| kv.iter().find(|(k, ..)| k.eq_ignore_ascii_case(key));

    let Some((_, lat, lat_col)) = find("Lattice") else {
        return Err(err(
            2,
            "no Lattice=\"...\" in the comment line: hopmap needs a periodic cell, and a plain \
             XYZ file has none (write the lattice vectors as Lattice=\"ax ay az bx by bz cx cy cz\")"
                .into(),
        ));
    };
    let nums: Vec<&str> = lat.split_whitespace().collect();
    if nums.len() != 9 {
        return Err(InputError::new(
            file,
            format!(
                "Lattice needs 9 numbers (three vectors), found {}",
                nums.len()
            ),
        )
        .at(2, *lat_col));
    }
    let mut v = [0.0; 9];
    for (k, s) in nums.iter().enumerate() {
        v[k] = parse_f64(s).ok_or_else(|| {
            InputError::new(file, format!("cannot read '{s}' in Lattice as a number"))
                .at(2, *lat_col)
        })?;
    }
    let lattice = Lattice::from_vectors([v[0], v[1], v[2]], [v[3], v[4], v[5]], [v[6], v[7], v[8]])
        .map_err(|e| InputError::new(file, format!("Lattice: {e}")).at(2, *lat_col))?;
    crate::limits::check_lattice(&lattice)
        .and_then(|()| crate::limits::check_atom_count(n, lattice.volume()))
        .map_err(|e| InputError::new(file, format!("Lattice: {e}")).at(2, *lat_col))?;
    if let Some((_, pbc, c)) = find("pbc") {
        let flags: Vec<&str> = pbc.split_whitespace().collect();
        let periodic = |s: &str| matches!(s, "T" | "t" | "True" | "true" | "1");
        if flags.len() != 3 || !flags.iter().all(|s| periodic(s)) {
            return Err(InputError::new(
                file,
                format!(
                    "pbc=\"{pbc}\": hopmap needs a cell periodic in all three directions (pbc=\"T T T\")"
                ),
            )
            .at(2, *c));
        }
    }
    let (sp_col, is_z, pos_col, ncols) = match find("Properties") {
        Some((_, p, c)) => columns(p).map_err(|m| InputError::new(file, m).at(2, *c))?,
        None => (0, false, 1, 4),
    };

    let mut atoms = Vec::with_capacity(n.min(lines.len()));
    for k in 0..n {
        let line_no = 3 + k;
        let Some(l) = lines.get(2 + k).filter(|l| !l.trim().is_empty()) else {
            return Err(err(
                line_no,
                format!(
                    "line 1 promises {n} atoms, but only {k} atom lines follow (this line is \
                     blank or past the end of the file)"
                ),
            ));
        };
        let words = words_with_columns(l);
        if words.len() < ncols {
            return Err(err(
                line_no,
                format!(
                    "an atom line needs {ncols} columns (from Properties), found {}",
                    words.len()
                ),
            ));
        }
        let (c, s) = words[sp_col];
        let element = if is_z {
            s.parse::<u8>().ok().and_then(Element::from_atomic_number)
        } else {
            Element::from_symbol(s)
        }
        .ok_or_else(|| InputError::new(file, format!("'{s}' is not an element")).at(line_no, c))?;
        let mut p = Vector3::zeros();
        for j in 0..3 {
            let (c, s) = words[pos_col + j];
            p[j] = parse_f64(s).ok_or_else(|| {
                InputError::new(file, format!("cannot read '{s}' as a coordinate")).at(line_no, c)
            })?;
        }
        atoms.push((element, lattice.to_frac(Cart(p))));
    }
    let mut s = p1_structure(
        name,
        lattice,
        atoms,
        "extended XYZ: the whole cell as listed (Cartesian coordinates), no symmetry applied (P 1)"
            .into(),
    );
    let rest: Vec<&str> = lines[(2 + n).min(lines.len())..]
        .iter()
        .copied()
        .filter(|l| !l.trim().is_empty())
        .collect();
    if !rest.is_empty() {
        s.warnings.push(format!(
            "only the first frame was read; {} more lines follow line {}",
            rest.len(),
            2 + n
        ));
    }
    Ok(s)
}
