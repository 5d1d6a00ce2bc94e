//! Structure files in: CIF (through [`crate::cif`]), VASP POSCAR/CONTCAR, extended XYZ.

pub mod cif;
pub mod parts;
pub mod poscar;
pub mod xyz;

pub use parts::{Parts, structure_from_parts};

use crate::error::InputError;
use crate::structure::Structure;
use std::path::Path;

/// The structure file formats hopmap reads.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Format {
    Cif,
    Poscar,
    ExtXyz,
}

impl Format {
    /// Decides the format from the file name: `.cif` (any case) is CIF; `.xyz`/`.extxyz` is
    /// extended XYZ; `POSCAR`, `CONTCAR`, `*.vasp`, `*.poscar` are VASP. Anything else is read as
    /// CIF, the most common exchange format.
    pub fn from_path(path: &Path) -> Format {
        let name = path
            .file_name()
            .and_then(|n| n.to_str())
            .unwrap_or("")
            .to_ascii_lowercase();
        let ext = path
            .extension()
            .and_then(|e| e.to_str())
            .unwrap_or("")
            .to_ascii_lowercase();
        if ext == "xyz" || ext == "extxyz" {
            Format::ExtXyz
        } else if ext == "vasp"
            || ext == "poscar"
            || name.starts_with("poscar")
            || name.starts_with("contcar")
        {
            Format::Poscar
        } else {
            Format::Cif
        }
    }
}

/// Reads one structure from a file of any supported format. `block` picks a CIF data block by
/// name (ignored for the other formats); without it the first block with atom sites is read.
/// A structure read as P 1 gets the symmetry found in it and is rewritten in its conventional
/// cell ([`crate::symmetry::complete_symmetry`]); see [`read_structure_with`] to keep the cell.
pub fn read_structure(path: &Path, block: Option<&str>) -> Result<Structure, InputError> {
    read_structure_with(path, block, false)
}

/// As [`read_structure`]; with `keep_cell` a P 1 input keeps its own cell (the symmetry found
/// is still filled in, in that cell's basis).
pub fn read_structure_with(
    path: &Path,
    block: Option<&str>,
    keep_cell: bool,
) -> Result<Structure, InputError> {
    let s = read_structure_as_written(path, block)?;
    Ok(crate::symmetry::complete_symmetry(s, keep_cell))
}

/// The structure exactly as the file gives it, P 1 inputs left without symmetry.
pub fn read_structure_as_written(
    path: &Path,
    block: Option<&str>,
) -> Result<Structure, InputError> {
    match Format::from_path(path) {
        Format::Cif => cif::read_cif(path, block),
        Format::Poscar => poscar::read_poscar(path),
        Format::ExtXyz => xyz::read_extxyz(path),
    }
}

/// Reads one structure from text held in memory, in the given format; `file` names it in
/// messages (and gives the structure its name for POSCAR and extended XYZ). As
/// [`read_structure`], a P 1 structure gets the symmetry found in it.
pub fn read_str(
    text: &str,
    format: Format,
    file: &str,
    block: Option<&str>,
) -> Result<Structure, InputError> {
    let stem = Path::new(file)
        .file_stem()
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or_else(|| file.to_string());
    let s = match format {
        Format::Cif => cif::read_cif_text(text.as_bytes(), file, block)?,
        Format::Poscar => poscar::parse_poscar(text, file, &stem)?,
        Format::ExtXyz => xyz::parse_extxyz(text, file, &stem)?,
    };
    Ok(crate::symmetry::complete_symmetry(s, false))
}

/// Names of the data blocks of a CIF file (for listing them to the user).
pub fn cif_block_names(path: &Path) -> Result<Vec<String>, InputError> {
    if Format::from_path(path) != Format::Cif {
        return Ok(vec![]);
    }
    let doc = crate::cif::parse_file(path)?;
    Ok(doc.blocks.iter().map(|b| b.name.clone()).collect())
}
