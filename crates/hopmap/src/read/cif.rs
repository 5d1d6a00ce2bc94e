//! A crystal structure out of a CIF data block: cell, symmetry, atom sites, and the full cell.
//!
//! One function does the chemistry, [`structure_from_block`]: block in, [`Structure`] out. It
//! knows the dictionary names (DDL1 `_cell_length_a` and DDLm `_cell.length_a`, old and new
//! symmetry tags, all listed once in [`tags`]) and nothing about quoting rules.
//!
//! # What is read, and in which order of preference
//!
//! - **Cell**: a, b, c (A) and alpha, beta, gamma (degrees), standard uncertainties ignored.
//!   Missing angles are taken as 90 degrees with a warning.
//! - **Symmetry**: the operator list when there is one (it is what the authors refined in);
//!   otherwise the Hall symbol, then the Hermann-Mauguin symbol, then the space-group number,
//!   looked up in [`crate::spacegroup`]. With an operator list the number and symbol are filled
//!   from the table when the file lacks them, and a disagreement with the file's own number is a
//!   warning.
//! - **Sites**: label, type symbol with charge (`Nb5+`, `O2-`, `Li1+`, `Fe2.5+`), fractional
//!   x, y, z, occupancy (1 when absent or `?`), Wyckoff letter. Oxidation states from the
//!   `_atom_type_oxidation_number` loop win over the charge written in the type symbol. The
//!   element comes from the type symbol, else from the label; `D` (deuterium) is hydrogen, and
//!   a label beginning with `Wat` is a water oxygen (see [`read_label`]).
//! - **Left out, with a warning**: dummy sites (type or label `Q`, `Du`, `Dum`, `X`, or
//!   `_atom_site_calc_flag` `dum`), sites with `?` or `.` coordinates, sites of zero occupancy.
//!   Sites with calc flag `c`/`calc` are kept: the core dictionary defines them as atoms whose
//!   positions were calculated (riding hydrogens, say), which are real atoms.
//!
//! # Expansion to the full cell
//!
//! Every operator is applied to every site. Images closer than [`MERGE_TOLERANCE`] (A, periodic
//! distance) are one position: images of one site that coincide make it a special position, and
//! a site that lands on a position already taken by another label makes a mixed site, one
//! [`Site`] with several [`Occupant`]s (one [`AsymmetricSite`] too, named after the first
//! label). The multiplicity is the number of distinct images, and it is compared with the file's
//! `_atom_site_symmetry_multiplicity` when given (a warning when the file's number is neither
//! the multiplicity nor the order of the site symmetry, which older SHELXL versions write there).
//!
//! # Warnings (plain sentences in [`Structure::warnings`])
//!
//! - total occupancy of a position above 1 by more than [`OCCUPANCY_TOLERANCE`];
//! - two positions closer than [`MIN_CONTACT`] A whose occupancies add up to more than 1 (so
//!   they cannot be alternatives of a disordered site);
//! - charges that do not balance, when every occupant has an oxidation state.

use crate::cif::{self, Block, Document, Value};
use crate::element::Element;
use crate::error::InputError;
use crate::lattice::{CellParameters, Frac, Lattice};
use crate::spacegroup::{self, SymOp};
use crate::structure::{AsymmetricSite, Occupant, Site, Species, Structure, SymmetryInfo};
use std::collections::HashMap;
use std::path::Path;

/// Images of sites closer than this (A) are the same position. 0.05 A is well above the
/// rounding of coordinates written to 4 decimals in cells up to ~50 A and well below the
/// separation of split positions of real disorder (0.2 A and more).
pub const MERGE_TOLERANCE: f64 = 0.05;

/// Allowed excess of the total occupancy of a position over 1. Occupancies written to two
/// decimals (0.51 + 0.50) may add up to 1.01 by rounding alone.
pub const OCCUPANCY_TOLERANCE: f64 = 0.01;

/// Positions closer than this (A) cannot both be occupied (the shortest bond, O-H, is ~0.96 A;
/// H positions from X-ray data come out shorter, ~0.8 A).
pub const MIN_CONTACT: f64 = 0.5;

/// The dictionary names, old (DDL1) and new (DDLm), in order of preference.
pub mod tags {
    pub const CELL_A: &[&str] = &["_cell_length_a", "_cell.length_a"];
    pub const CELL_B: &[&str] = &["_cell_length_b", "_cell.length_b"];
    pub const CELL_C: &[&str] = &["_cell_length_c", "_cell.length_c"];
    pub const CELL_ALPHA: &[&str] = &["_cell_angle_alpha", "_cell.angle_alpha"];
    pub const CELL_BETA: &[&str] = &["_cell_angle_beta", "_cell.angle_beta"];
    pub const CELL_GAMMA: &[&str] = &["_cell_angle_gamma", "_cell.angle_gamma"];

    pub const SYMOP_XYZ: &[&str] = &[
        "_space_group_symop_operation_xyz",
        "_symmetry_equiv_pos_as_xyz",
        "_space_group_symop.operation_xyz",
        "_symmetry_equiv.pos_as_xyz",
    ];
    pub const HALL: &[&str] = &[
        "_space_group_name_Hall",
        "_symmetry_space_group_name_Hall",
        "_space_group.name_Hall",
        "_symmetry.space_group_name_Hall",
    ];
    pub const HM: &[&str] = &[
        "_space_group_name_H-M_alt",
        "_symmetry_space_group_name_H-M",
        "_space_group.name_H-M_alt",
        "_symmetry.space_group_name_H-M",
    ];
    pub const NUMBER: &[&str] = &[
        "_space_group_IT_number",
        "_symmetry_Int_Tables_number",
        "_space_group.IT_number",
        "_symmetry.Int_Tables_number",
    ];

    pub const SITE_LABEL: &[&str] = &["_atom_site_label", "_atom_site.label"];
    pub const SITE_TYPE: &[&str] = &["_atom_site_type_symbol", "_atom_site.type_symbol"];
    pub const SITE_X: &[&str] = &["_atom_site_fract_x", "_atom_site.fract_x"];
    pub const SITE_Y: &[&str] = &["_atom_site_fract_y", "_atom_site.fract_y"];
    pub const SITE_Z: &[&str] = &["_atom_site_fract_z", "_atom_site.fract_z"];
    pub const SITE_OCCUPANCY: &[&str] = &["_atom_site_occupancy", "_atom_site.occupancy"];
    pub const SITE_WYCKOFF: &[&str] = &["_atom_site_Wyckoff_symbol", "_atom_site.Wyckoff_symbol"];
    pub const SITE_MULTIPLICITY: &[&str] = &[
        "_atom_site_symmetry_multiplicity",
        "_atom_site.symmetry_multiplicity",
        "_atom_site_site_symmetry_multiplicity",
        "_atom_site.site_symmetry_multiplicity",
    ];
    pub const SITE_CALC_FLAG: &[&str] = &["_atom_site_calc_flag", "_atom_site.calc_flag"];

    /// Superspace descriptions of modulated structures (the modulated-structures dictionary).
    pub const SUPERSPACE: &[&str] = &[
        "_space_group_ssg_name",
        "_space_group.ssg_name",
        "_space_group_symop_ssg_operation_algebraic",
        "_space_group_symop.ssg_operation_algebraic",
        "_cell_modulation_dimension",
        "_cell.modulation_dimension",
    ];

    pub const TYPE_SYMBOL: &[&str] = &["_atom_type_symbol", "_atom_type.symbol"];
    pub const TYPE_OXIDATION: &[&str] =
        &["_atom_type_oxidation_number", "_atom_type.oxidation_number"];
}

/// Reads the structure of `block` (`file` names the file in errors and warnings).
pub fn structure_from_block(block: &Block, file: &str) -> Result<Structure, InputError> {
    let ctx = format!("data block '{}'", block.name);
    let mut warnings = Vec::new();
    refuse_conflicts(block, file, &ctx)?;
    let lattice = read_lattice(block, file, &ctx, &mut warnings)?;
    let symmetry = read_symmetry(block, file, &ctx, &mut warnings)?;
    let rows = read_site_rows(block, file, &ctx, &mut warnings)?;
    if rows.is_empty() {
        return Err(InputError::new(
            file,
            "no atom sites are left after leaving out the ones above",
        )
        .at_line(block.line)
        .context(ctx));
    }
    let sites_line = block
        .line_of(tags::SITE_X[0])
        .or(block.line_of(tags::SITE_X[1]))
        .unwrap_or(block.line);
    if rows.len() > crate::limits::MAX_ATOMS {
        return Err(InputError::new(
            file,
            format!(
                "the atom-site loop has {} rows; hopmap analyses at most {} atom positions",
                rows.len(),
                crate::limits::MAX_ATOMS
            ),
        )
        .at_line(sites_line)
        .context(ctx));
    }
    let (asymmetric_sites, sites) = expand(&rows, &symmetry.ops, &lattice, &mut warnings);
    crate::limits::check_atom_count(sites.len(), lattice.volume()).map_err(|m| {
        InputError::new(file, m)
            .at_line(sites_line)
            .context(ctx.clone())
    })?;
    check_occupancy(&asymmetric_sites, &mut warnings);
    check_contacts(&sites, &asymmetric_sites, &lattice, &mut warnings);
    check_charge(&sites, &mut warnings);
    Ok(Structure {
        name: crate::cif::error::printable(&block.name).into_owned(),
        lattice,
        symmetry,
        asymmetric_sites,
        sites,
        warnings,
        oxidation_states_assigned: false,
    })
}

/// The data blocks that list atom sites (fractional coordinates), in file order.
pub fn blocks_with_atoms(doc: &Document) -> Vec<&Block> {
    doc.blocks
        .iter()
        .filter(|b| !b.global && first_of(b, tags::SITE_X).is_some())
        .collect()
}

/// Reads the structure from a CIF file: the block called `block`, or else the first block with
/// atom sites. An unknown block name is an error listing the blocks of the file. Grammar
/// warnings inside the chosen block (and an encoding warning anywhere) come first in
/// [`Structure::warnings`].
pub fn read_cif(path: &Path, block: Option<&str>) -> Result<Structure, InputError> {
    let file = path.display().to_string();
    let doc = cif::parse_file(path)?;
    structure_from_document(&doc, &file, block)
}

/// As [`read_cif`], from the text of a CIF held in memory; `file` names it in messages.
pub fn read_cif_text(
    text: &[u8],
    file: &str,
    block: Option<&str>,
) -> Result<Structure, InputError> {
    let doc = cif::parse(text).map_err(|e| e.into_input_error(file))?;
    structure_from_document(&doc, file, block)
}

/// The structure of one data block of a parsed document (see [`read_cif`]).
pub fn structure_from_document(
    doc: &cif::Document,
    file: &str,
    block: Option<&str>,
) -> Result<Structure, InputError> {
    let file = file.to_string();
    let names = || {
        let v: Vec<String> = doc
            .blocks
            .iter()
            .filter(|b| !b.global)
            .map(|b| format!("'{}'", b.name))
            .collect();
        if v.is_empty() {
            "none".to_string()
        } else {
            v.join(", ")
        }
    };
    let chosen = match block {
        Some(name) => doc.block(name).ok_or_else(|| {
            InputError::new(
                file.clone(),
                format!("there is no data block '{name}'; the file has: {}", names()),
            )
        })?,
        None => *blocks_with_atoms(doc).first().ok_or_else(|| {
            InputError::new(
                file.clone(),
                format!(
                    "no data block lists atom sites (_atom_site_fract_x); blocks: {}",
                    names()
                ),
            )
        })?,
    };
    let mut structure = structure_from_block(chosen, &file)?;
    // CIF block codes must be unique in a file; when they are not, say which block was read.
    let namesakes: Vec<usize> = doc
        .blocks
        .iter()
        .filter(|b| !b.global && cif::document::tag_eq(&b.name, &chosen.name))
        .map(|b| b.line)
        .collect();
    if namesakes.len() > 1 {
        let lines: Vec<String> = namesakes.iter().map(|l| l.to_string()).collect();
        structure.warnings.insert(
            0,
            format!(
                "data block name '{}' is used by {} blocks of this file (lines {}); the one at \
                 line {} is read",
                chosen.name,
                namesakes.len(),
                lines.join(", "),
                chosen.line
            ),
        );
    }
    // Grammar warnings that fall inside the chosen block (before the next block starts).
    let end = doc
        .blocks
        .iter()
        .map(|b| b.line)
        .filter(|&l| l > chosen.line)
        .min()
        .unwrap_or(usize::MAX);
    let from_grammar: Vec<String> = doc
        .warnings
        .iter()
        .filter(|w| (chosen.line..end).contains(&w.line) || w.message.contains("UTF-8"))
        .map(|w| format!("line {}: {}", w.line, w.message))
        .collect();
    structure.warnings.splice(0..0, from_grammar);
    Ok(structure)
}

// ---------------------------------------------------------------------------------------------
// Look-ups by alias

/// The first alias present in the block (as a pair or a loop column), with the alias used.
fn first_of(block: &Block, aliases: &[&'static str]) -> Option<&'static str> {
    aliases
        .iter()
        .copied()
        .find(|t| block.value(t).is_some() || block.find_loop(t).is_some())
}

/// The single value of the first alias present that is not `?` or `.`.
fn single<'b>(block: &'b Block, aliases: &[&'static str]) -> Option<(&'static str, &'b Value)> {
    aliases
        .iter()
        .find_map(|t| block.value(t).filter(|v| !v.is_null()).map(|v| (*t, v)))
}

/// All values of the first alias present: the loop column, or the one value of a pair.
fn column<'b>(block: &'b Block, aliases: &[&'static str]) -> Option<Vec<&'b Value>> {
    for t in aliases {
        if let Some(l) = block.find_loop(t) {
            let c = l.column(t)?;
            return Some(l.rows().map(|r| &r[c]).collect());
        }
        if let Some(v) = block.value(t) {
            return Some(vec![v]);
        }
    }
    None
}

fn value_err(file: &str, ctx: &str, block: &Block, tag: &str, v: &Value, what: &str) -> InputError {
    let line = v
        .line()
        .or_else(|| block.line_of(tag))
        .unwrap_or(block.line);
    let shown = match v {
        Value::Unknown => "?".to_string(),
        Value::Inapplicable => ".".to_string(),
        Value::Text { text, .. } => text.clone(),
        Value::List(_) => "a list".into(),
        Value::Table(_) => "a table".into(),
    };
    InputError::new(file, format!("{tag} is '{shown}', {what}"))
        .at_line(line)
        .context(ctx.to_string())
}

/// A tag this reader relies on, given twice with different values, is an error: there is no
/// way to know which one the authors meant.
fn refuse_conflicts(block: &Block, file: &str, ctx: &str) -> Result<(), InputError> {
    let relied_on = [
        tags::CELL_A,
        tags::CELL_B,
        tags::CELL_C,
        tags::CELL_ALPHA,
        tags::CELL_BETA,
        tags::CELL_GAMMA,
        tags::HALL,
        tags::HM,
        tags::NUMBER,
        tags::SYMOP_XYZ,
    ];
    for tag in relied_on.iter().flat_map(|a| a.iter()) {
        if let Some(dup) = block.conflicting(tag).next() {
            let first = block.line_of(tag).unwrap_or(block.line);
            return Err(InputError::new(
                file,
                format!(
                    "{} is given twice with different values (lines {first} and {}); which one \
                     is meant cannot be told",
                    dup.tag, dup.line
                ),
            )
            .at_line(dup.line)
            .context(ctx.to_string()));
        }
    }
    Ok(())
}

// ---------------------------------------------------------------------------------------------
// Cell

fn read_lattice(
    block: &Block,
    file: &str,
    ctx: &str,
    warnings: &mut Vec<String>,
) -> Result<Lattice, InputError> {
    let mut get = |aliases: &[&'static str], angle: bool| -> Result<f64, InputError> {
        match single(block, aliases) {
            Some((tag, v)) => v
                .as_number()
                .ok_or_else(|| value_err(file, ctx, block, tag, v, "not a number")),
            None if angle => {
                warnings.push(format!("{} is missing; taken as 90 degrees", aliases[0]));
                Ok(90.0)
            }
            None => Err(InputError::new(
                file,
                format!(
                    "no cell: {} (or {}) is missing or unknown",
                    aliases[0], aliases[1]
                ),
            )
            .at_line(block.line)
            .context(ctx.to_string())),
        }
    };
    let p = CellParameters {
        a: get(tags::CELL_A, false)?,
        b: get(tags::CELL_B, false)?,
        c: get(tags::CELL_C, false)?,
        alpha: get(tags::CELL_ALPHA, true)?,
        beta: get(tags::CELL_BETA, true)?,
        gamma: get(tags::CELL_GAMMA, true)?,
    };
    Lattice::from_parameters(p)
        .map_err(|e| e.to_string())
        .and_then(|l| crate::limits::check_lattice(&l).map(|()| l))
        .map_err(|e| {
            InputError::new(file, e)
                .at_line(
                    block
                        .line_of(tags::CELL_A[0])
                        .or(block.line_of(tags::CELL_A[1]))
                        .unwrap_or(block.line),
                )
                .context(ctx.to_string())
        })
}

// ---------------------------------------------------------------------------------------------
// Symmetry

fn read_symmetry(
    block: &Block,
    file: &str,
    ctx: &str,
    warnings: &mut Vec<String>,
) -> Result<SymmetryInfo, InputError> {
    let hall = single(block, tags::HALL)
        .and_then(|(_, v)| v.as_str())
        .map(|s| s.trim().to_string());
    let hm = single(block, tags::HM)
        .and_then(|(_, v)| v.as_str())
        .map(|s| s.trim().to_string());
    let number = match single(block, tags::NUMBER) {
        Some((tag, v)) => match v.as_number() {
            Some(n) if n.fract() == 0.0 && (1.0..=230.0).contains(&n) => Some(n as u16),
            _ => {
                warnings.push(format!(
                    "{tag} '{}' is not a space-group number (1-230); ignored",
                    v.as_str().unwrap_or("?")
                ));
                None
            }
        },
        None => None,
    };
    let mut info = SymmetryInfo {
        number,
        hm_symbol: hm.clone(),
        hall_symbol: hall.clone(),
        ops: Vec::new(),
        source: String::new(),
        transformation: None,
    };

    if let Some(ops) = read_operator_list(block, file, ctx, warnings)? {
        info.ops = ops;
        info.source = "operator list in the file".into();
        if let Some(sg) = spacegroup::identify(&info.ops) {
            match info.number {
                Some(n) if n != sg.number => warnings.push(format!(
                    "the file gives space group number {n}, but its operator list is that of \
                     No. {} ({}); the operator list is used",
                    sg.number, sg.hm
                )),
                Some(_) => {}
                None => info.number = Some(sg.number),
            }
            info.hm_symbol.get_or_insert(sg.hm);
            info.hall_symbol.get_or_insert(sg.hall);
        }
        return Ok(info);
    }

    let mut tried = Vec::new();
    let mut found = None;
    if let Some(h) = &hall {
        match spacegroup::from_hall(h) {
            Some(sg) => found = Some((sg, format!("Hall symbol '{h}'"))),
            None => tried.push(format!("the Hall symbol '{h}' is not in the table")),
        }
    }
    if found.is_none()
        && let Some(h) = &hm
    {
        match spacegroup::from_hm(h) {
            Some(sg) => found = Some((sg, format!("Hermann-Mauguin symbol '{h}'"))),
            None => tried.push(format!(
                "the Hermann-Mauguin symbol '{h}' is not in the table"
            )),
        }
    }
    if found.is_none()
        && let Some(n) = number
    {
        match spacegroup::from_number(n) {
            Some(sg) => found = Some((sg, format!("space-group number {n}"))),
            None => tried.push(format!("space-group number {n} is not in the table")),
        }
    }
    let Some((sg, source)) = found else {
        if let Some(what) = superspace(block) {
            return Err(InputError::new(
                file,
                format!(
                    "no three-dimensional symmetry: the block describes a modulated structure in \
                     superspace ({what}); hopmap reads only structures with a space group or an \
                     operator list (_space_group_symop_operation_xyz). A commensurate supercell \
                     or approximant block, when the file has one, can be chosen by name"
                ),
            )
            .at_line(block.line)
            .context(ctx.to_string()));
        }
        let why = if tried.is_empty() {
            "and no Hall symbol, Hermann-Mauguin symbol or space-group number".to_string()
        } else {
            format!("and {}", tried.join("; "))
        };
        return Err(InputError::new(
            file,
            format!(
                "no symmetry: the block has no operator list ({} or {}), {why}",
                tags::SYMOP_XYZ[0],
                tags::SYMOP_XYZ[1]
            ),
        )
        .at_line(block.line)
        .context(ctx.to_string()));
    };
    if let Some(n) = number
        && n != sg.number
    {
        warnings.push(format!(
            "the file gives space group number {n}, but the {source} is No. {}; the symbol is used",
            sg.number
        ));
    }
    info.number = Some(sg.number);
    info.hm_symbol.get_or_insert(sg.hm);
    info.hall_symbol.get_or_insert(sg.hall);
    info.ops = sg.ops;
    info.source = source;
    Ok(info)
}

/// What marks `block` as a superspace description of a modulated structure (the superspace
/// group name, superspace operators, or a modulation dimension above 0), for the error message.
fn superspace(block: &Block) -> Option<String> {
    for tag in tags::SUPERSPACE {
        let Some(values) = column(block, &[tag]) else {
            continue;
        };
        if values.iter().all(|v| v.is_null()) {
            continue;
        }
        if tag.contains("modulation_dimension") {
            if values[0].as_number().is_some_and(|d| d > 0.0) {
                return Some(format!("{tag} {}", values[0].as_number().unwrap_or(0.0)));
            }
            continue;
        }
        return Some(match values[0].as_str() {
            Some(v) if !tag.contains("operation") => format!("{tag} '{}'", v.trim()),
            _ => tag.to_string(),
        });
    }
    None
}

/// The operator list, identity first, repeats dropped; `None` when the block has none.
fn read_operator_list(
    block: &Block,
    file: &str,
    ctx: &str,
    warnings: &mut Vec<String>,
) -> Result<Option<Vec<SymOp>>, InputError> {
    let Some(tag) = tags::SYMOP_XYZ
        .iter()
        .copied()
        .find(|t| column(block, &[t]).is_some_and(|c| c.iter().any(|v| !v.is_null())))
    else {
        return Ok(None);
    };
    let values = column(block, &[tag]).unwrap_or_default();
    let mut ops: Vec<SymOp> = Vec::with_capacity(values.len());
    for v in values {
        if v.is_null() {
            continue;
        }
        let Some(s) = v.as_str() else {
            return Err(value_err(
                file,
                ctx,
                block,
                tag,
                v,
                "not a symmetry operation",
            ));
        };
        let op = SymOp::parse_xyz(s.trim()).map_err(|e| {
            InputError::new(file, e.to_string())
                .at_line(v.line().unwrap_or(block.line))
                .context(ctx.to_string())
        })?;
        if let Err(why) = check_crystallographic(&op) {
            return Err(
                InputError::new(file, format!("symmetry operation '{s}': {why}"))
                    .at_line(v.line().unwrap_or(block.line))
                    .context(ctx.to_string()),
            );
        }
        if ops.iter().any(|o| o.same_modulo_lattice(&op)) {
            warnings.push(format!(
                "symmetry operation '{s}' is listed twice; the repeat is ignored"
            ));
        } else {
            ops.push(op);
            if ops.len() > crate::limits::MAX_SYMMETRY_OPERATIONS {
                return Err(InputError::new(
                    file,
                    format!(
                        "{tag} lists more than {} different operations, more than any space \
                         group has",
                        crate::limits::MAX_SYMMETRY_OPERATIONS
                    ),
                )
                .at_line(v.line().unwrap_or(block.line))
                .context(ctx.to_string()));
            }
        }
    }
    let identity = SymOp::identity();
    match ops.iter().position(|o| o.same_modulo_lattice(&identity)) {
        Some(0) => {}
        Some(i) => {
            let id = ops.remove(i);
            ops.insert(0, id);
        }
        None => {
            warnings.push("the operator list lacks the identity x,y,z; it was added".into());
            ops.insert(0, identity);
        }
    }
    if let Some((i, j)) = first_product_missing(&ops) {
        warnings.push(format!(
            "the operator list is not a group: the product of operations {} and {} is not in it \
             (an operation is missing or mistyped); the atoms are placed with the operations as \
             listed",
            i + 1,
            j + 1
        ));
    }
    Ok(Some(ops))
}

/// The first pair of operations (indices in the list) whose product is not in the list modulo
/// lattice translations, or None for a closed list (a group). At most 192^3 comparisons, as the
/// list is bounded by [`crate::limits::MAX_SYMMETRY_OPERATIONS`].
fn first_product_missing(ops: &[SymOp]) -> Option<(usize, usize)> {
    for (i, a) in ops.iter().enumerate() {
        for (j, b) in ops.iter().enumerate() {
            let p = a.compose(b);
            if !ops.iter().any(|o| o.same_modulo_lattice(&p)) {
                return Some((i, j));
            }
        }
    }
    None
}

/// A crystallographic rotation has order 1, 2, 3, 4 or 6 (R^n = identity), and in any
/// setting used in practice its entries are small integers. Shears such as `x+y,y,z` have
/// determinant 1 but are not symmetry operations of any lattice.
fn check_crystallographic(op: &SymOp) -> Result<(), String> {
    if op.rot.iter().any(|v| v.abs() > 2) {
        return Err(
            "rotation entries larger than 2 do not occur in crystallographic settings".into(),
        );
    }
    let id = nalgebra::Matrix3::<i32>::identity();
    let mut r = op.rot;
    for _ in 0..6 {
        if r == id {
            return Ok(());
        }
        r *= op.rot;
    }
    Err("its rotation part has no finite order (1, 2, 3, 4 or 6), so it is not a symmetry operation".into())
}

// ---------------------------------------------------------------------------------------------
// Sites

/// One row of the atom-site loop that will be placed in the cell.
#[derive(Debug, Clone)]
struct SiteRow {
    label: String,
    species: Species,
    frac: Frac,
    occupancy: f64,
    wyckoff: Option<String>,
    file_multiplicity: Option<usize>,
}

/// What a type symbol or label says: an element with an optional charge, or a dummy atom.
#[derive(Debug, Clone, PartialEq)]
pub enum SymbolReading {
    Atom(Element, Option<f64>),
    Dummy,
}

/// Reads a CIF type symbol or label: `Nb5+`, `O2-`, `O-2`, `Li1+`, `Li+`, `Fe2.5+`, `Mn3`
/// (a label: no charge), `D` (deuterium, read as H). `Q`, `Du`, `Dum`, `X` (any case, with or
/// without digits) are dummy atoms. `None` when no element can be read.
pub fn read_symbol(s: &str) -> Option<SymbolReading> {
    let s = crate::text::ascii_minus(s.trim());
    let s = s.as_ref();
    let letters: String = s.chars().take_while(|c| c.is_ascii_alphabetic()).collect();
    let lower = letters.to_ascii_lowercase();
    if matches!(lower.as_str(), "q" | "du" | "dum" | "dummy" | "x" | "xx") {
        return Some(SymbolReading::Dummy);
    }
    // Deuterium: `D`, `D1`, `DW1` (not an element symbol, and not Dy, Db, Ds).
    let (element, used) = match Element::from_label_prefix(s) {
        Some(e) => (e, e.symbol().len().min(letters.len())),
        None if lower.starts_with('d') => (Element::from_symbol("H")?, 1),
        None => return None,
    };
    Some(SymbolReading::Atom(
        element,
        crate::structure::read_charge(&s[used..]),
    ))
}

/// Reads the element from a site label, for sites without a type symbol: as
/// [`read_symbol`], except that labels beginning with `Wat` (any case: `Wat1`, `Wat(25)`,
/// `Watz3`, `WatOW`) are water oxygens, O, not tungsten.
///
/// The mineral structure databases (the American Mineralogist Crystal Structure Database in
/// particular) label the oxygen of a water molecule `Wat`, `OW` or `Ow` and often give no type
/// symbol; this is common practice in mineralogical CIFs, and general-purpose readers such as
/// pymatgen's CIF parser read `Wat` as O too. `OW1`, `Ow1` already read as O (no element `Ow`),
/// and `Hw1` as H. A tungsten site labelled `W1`, `W(2)` or `Wa` is still tungsten: only the
/// three letters `Wat` make a water oxygen. A type symbol, when present, always wins over the
/// label.
pub fn read_label(label: &str) -> Option<SymbolReading> {
    let l = label.trim();
    if l.len() >= 3 && l.is_char_boundary(3) && l[..3].eq_ignore_ascii_case("wat") {
        return Some(SymbolReading::Atom(Element::from_symbol("O")?, None));
    }
    read_symbol(l)
}

fn read_site_rows(
    block: &Block,
    file: &str,
    ctx: &str,
    warnings: &mut Vec<String>,
) -> Result<Vec<SiteRow>, InputError> {
    let xs = column(block, tags::SITE_X).ok_or_else(|| {
        InputError::new(file, "no atom sites: the block has no _atom_site_fract_x")
            .at_line(block.line)
            .context(ctx.to_string())
    })?;
    let n = xs.len();
    let tag_of = |aliases: &[&'static str]| first_of(block, aliases).unwrap_or(aliases[0]);
    let ys = same_len(
        "_atom_site_fract_y",
        column(block, tags::SITE_Y),
        n,
        warnings,
    );
    let zs = same_len(
        "_atom_site_fract_z",
        column(block, tags::SITE_Z),
        n,
        warnings,
    );
    let (Some(ys), Some(zs)) = (ys, zs) else {
        return Err(InputError::new(
            file,
            "atom sites need _atom_site_fract_x, _y and _z in one loop",
        )
        .at_line(block.line_of(tag_of(tags::SITE_X)).unwrap_or(block.line))
        .context(ctx.to_string()));
    };
    let labels = same_len(
        "_atom_site_label",
        column(block, tags::SITE_LABEL),
        n,
        warnings,
    );
    let types = same_len(
        "_atom_site_type_symbol",
        column(block, tags::SITE_TYPE),
        n,
        warnings,
    );
    let occs = same_len(
        "_atom_site_occupancy",
        column(block, tags::SITE_OCCUPANCY),
        n,
        warnings,
    );
    let wycks = same_len(
        "_atom_site_Wyckoff_symbol",
        column(block, tags::SITE_WYCKOFF),
        n,
        warnings,
    );
    let mults = same_len(
        "_atom_site_symmetry_multiplicity",
        column(block, tags::SITE_MULTIPLICITY),
        n,
        warnings,
    );
    let flags = same_len(
        "_atom_site_calc_flag",
        column(block, tags::SITE_CALC_FLAG),
        n,
        warnings,
    );
    let oxidation = read_oxidation_table(block);

    let mut rows = Vec::with_capacity(n);
    for i in 0..n {
        let text_at = |c| text_at(c, i);
        let type_symbol = text_at(&types);
        if [&xs, &ys, &zs].iter().any(|c| c[i].is_null()) {
            let name = text_at(&labels)
                .or(type_symbol)
                .map_or(format!("in row {}", i + 1), |l| format!("'{l}'"));
            warnings.push(format!(
                "site {name} has unknown coordinates ('?'); left out"
            ));
            continue;
        }
        let label = match (text_at(&labels), type_symbol) {
            (Some(l), _) => l.to_string(),
            (None, Some(t)) => format!("{t}{}", i + 1),
            (None, None) => {
                return Err(InputError::new(
                    file,
                    format!("atom site {} has neither a label nor a type symbol", i + 1),
                )
                .at_line(xs[i].line().unwrap_or(block.line))
                .context(ctx.to_string()));
            }
        };
        let site_ctx = || format!("{ctx}, site '{label}'");
        let line = xs[i].line().unwrap_or(block.line);
        if let Some(flag) = text_at(&flags)
            && flag.eq_ignore_ascii_case("dum")
        {
            warnings.push(format!(
                "site '{label}' is a dummy site (calc flag 'dum'); left out"
            ));
            continue;
        }
        let symbol = type_symbol.unwrap_or(&label);
        let reading = match type_symbol {
            Some(t) => read_symbol(t),
            None => read_label(&label),
        };
        let (element, charge) = match reading {
            Some(SymbolReading::Atom(e, q)) => (e, q),
            Some(SymbolReading::Dummy) => {
                warnings.push(format!(
                    "site '{label}' is a dummy atom ('{symbol}'); left out"
                ));
                continue;
            }
            None => {
                let what = if type_symbol.is_some() {
                    "type symbol"
                } else {
                    "label"
                };
                return Err(InputError::new(
                    file,
                    format!("cannot tell the element from the {what} '{symbol}'"),
                )
                .at_line(line)
                .context(site_ctx()));
            }
        };
        // Oxidation state: the atom-type table first, then the charge in the type symbol (a
        // charge read from a bare label would be a guess, so only type symbols count).
        let from_symbol = if type_symbol.is_some() { charge } else { None };
        let from_table = type_symbol.and_then(|t| oxidation.get(&t.to_ascii_lowercase()).copied());
        let ox = match (from_table, from_symbol) {
            (Some(t), Some(s)) if (t - s).abs() > 1e-6 => {
                warnings.push(format!(
                    "site '{label}': type symbol '{symbol}' says charge {s}, the atom-type table \
                     says oxidation number {t}; the table is used"
                ));
                Some(t)
            }
            (Some(t), _) => Some(t),
            (None, s) => s,
        };
        let mut coord = [0.0; 3];
        for (k, (col, tag)) in [
            (&xs, tags::SITE_X),
            (&ys, tags::SITE_Y),
            (&zs, tags::SITE_Z),
        ]
        .into_iter()
        .enumerate()
        {
            let v = col[i];
            coord[k] = read_coordinate(v).ok_or_else(|| {
                value_err(file, &site_ctx(), block, tag_of(tag), v, "not a number")
            })?;
        }
        let occupancy = match occs.as_ref().map(|c| c[i]) {
            None => 1.0,
            Some(v) if v.is_null() => 1.0,
            Some(v) => v.as_number().ok_or_else(|| {
                value_err(
                    file,
                    &site_ctx(),
                    block,
                    tag_of(tags::SITE_OCCUPANCY),
                    v,
                    "not a number",
                )
            })?,
        };
        if occupancy <= 0.0 {
            warnings.push(format!(
                "site '{label}' has occupancy {occupancy}; left out"
            ));
            continue;
        }
        let wyckoff = text_at(&wycks).map(str::to_string);
        let file_multiplicity = mults
            .as_ref()
            .and_then(|c| c[i].as_number())
            .filter(|m| *m >= 1.0 && m.fract() == 0.0)
            .map(|m| m as usize);
        rows.push(SiteRow {
            label,
            species: Species::new(element, ox),
            frac: Frac::new(coord[0], coord[1], coord[2]),
            occupancy,
            wyckoff,
            file_multiplicity,
        });
    }
    Ok(rows)
}

/// A loop column that belongs with the coordinates (same number of rows), else `None` with a
/// warning.
fn same_len<'b>(
    name: &str,
    c: Option<Vec<&'b Value>>,
    n: usize,
    warnings: &mut Vec<String>,
) -> Option<Vec<&'b Value>> {
    match c {
        Some(c) if c.len() == n => Some(c),
        Some(_) => {
            warnings.push(format!(
                "{name} is not in the same loop as the coordinates; it is ignored"
            ));
            None
        }
        None => None,
    }
}

fn text_at<'b>(c: &Option<Vec<&'b Value>>, i: usize) -> Option<&'b str> {
    c.as_ref().and_then(|c| c[i].as_str())
}

/// A fractional coordinate: a CIF number, or a simple fraction `1/4`, `-2/3` as some writers
/// put it for special positions.
fn read_coordinate(v: &Value) -> Option<f64> {
    if let Some(x) = v.as_number() {
        return Some(x);
    }
    let (n, d) = v.as_str()?.split_once('/')?;
    let n: f64 = cif::parse_number_with_su(n)?.0;
    let d: f64 = cif::parse_number_with_su(d)?.0;
    (d != 0.0).then(|| n / d)
}

/// `_atom_type_symbol` (lower case) -> `_atom_type_oxidation_number`.
fn read_oxidation_table(block: &Block) -> HashMap<String, f64> {
    let mut m = HashMap::new();
    let (Some(symbols), Some(ox)) = (
        column(block, tags::TYPE_SYMBOL),
        column(block, tags::TYPE_OXIDATION),
    ) else {
        return m;
    };
    if symbols.len() != ox.len() {
        return m;
    }
    for (s, o) in symbols.iter().zip(ox) {
        if let (Some(s), Some(o)) = (s.as_str(), o.as_number()) {
            m.insert(s.to_ascii_lowercase(), o);
        }
    }
    m
}

// ---------------------------------------------------------------------------------------------
// Expansion and checks

/// Distances up to a short range `r` in a given lattice, exactly and cheaply.
///
/// For `r` below half the smallest perpendicular width of the cell, a displacement shorter than
/// `r` has every fractional component below 0.5 in magnitude, so the minimum image by rounding
/// is the nearest one: one matrix-vector product instead of the 27-image search. Wider ranges
/// fall back to [`Lattice::periodic_distance`].
struct ShortRange<'l> {
    lattice: &'l Lattice,
    r: f64,
    rounding_is_exact: bool,
}

impl<'l> ShortRange<'l> {
    fn new(lattice: &'l Lattice, r: f64) -> Self {
        let w = lattice.perpendicular_widths();
        ShortRange {
            lattice,
            r,
            rounding_is_exact: r < 0.5 * w[0].min(w[1]).min(w[2]),
        }
    }
    /// True when `p` and `q` are closer than `r`.
    fn within(&self, p: Frac, q: Frac) -> bool {
        self.distance(p, q) < self.r
    }
    /// The periodic distance when it is below `r`; some value >= `r` otherwise.
    fn distance(&self, p: Frac, q: Frac) -> f64 {
        if self.rounding_is_exact {
            self.lattice.frac_delta_length(p.min_image_delta(q))
        } else {
            self.lattice.periodic_distance(p, q)
        }
    }
}

/// The distinct images of `p` under `ops`, wrapped into [0, 1), images closer than
/// [`MERGE_TOLERANCE`] merged (the same result as [`spacegroup::orbit`], faster for the
/// 192 operations of the F-centred cubic groups).
fn orbit(ops: &[SymOp], p: Frac, near: &ShortRange) -> Vec<Frac> {
    let mut out: Vec<Frac> = Vec::with_capacity(ops.len());
    for op in ops {
        let q = op.apply(p).wrapped();
        if !out.iter().any(|r| near.within(*r, q)) {
            out.push(q);
        }
    }
    out
}

/// A small, fast hasher for bucket keys (multiplicative mixing of three small integers).
#[derive(Default)]
struct KeyHasher(u64);

impl std::hash::Hasher for KeyHasher {
    fn finish(&self) -> u64 {
        self.0
    }
    fn write(&mut self, bytes: &[u8]) {
        for &b in bytes {
            self.write_u64(b as u64);
        }
    }
    fn write_u64(&mut self, v: u64) {
        self.0 = (self.0.rotate_left(5) ^ v).wrapping_mul(0x51_7c_c1_b7_27_22_0a_95);
    }
    fn write_usize(&mut self, v: usize) {
        self.write_u64(v as u64);
    }
}

type KeyMap = HashMap<u64, Vec<usize>, std::hash::BuildHasherDefault<KeyHasher>>;

/// Buckets of points of the cell for neighbour search within a radius `r` (A): the cell is cut
/// into boxes at least `max(r, 1 A)` wide along each axis (perpendicular widths), so that every
/// neighbour lies in one of the 27 boxes around a point.
struct Buckets {
    n: [usize; 3],
    map: KeyMap,
}

impl Buckets {
    fn new(lattice: &Lattice, r: f64) -> Self {
        let w = lattice.perpendicular_widths();
        let n = w.map(|w| ((w / r.max(1.0)).floor() as usize).clamp(1, 128));
        Buckets {
            n,
            map: KeyMap::default(),
        }
    }
    fn key(&self, f: Frac) -> [usize; 3] {
        let w = f.wrapped();
        [0, 1, 2].map(|k| ((w.0[k] * self.n[k] as f64) as usize).min(self.n[k] - 1))
    }
    fn pack(&self, k: [usize; 3]) -> u64 {
        (k[0] + self.n[0] * (k[1] + self.n[1] * k[2])) as u64
    }
    fn insert(&mut self, f: Frac, id: usize) {
        let k = self.pack(self.key(f));
        self.map.entry(k).or_default().push(id);
    }
    /// Ids in the 27 boxes around `f` (each box once, even when an axis has fewer than 3).
    fn near(&self, f: Frac, out: &mut Vec<usize>) {
        out.clear();
        let k = self.key(f);
        let span = |axis: usize| -> ([usize; 3], usize) {
            let n = self.n[axis];
            match n {
                1 => ([0, 0, 0], 1),
                2 => ([0, 1, 0], 2),
                _ => ([(k[axis] + n - 1) % n, k[axis], (k[axis] + 1) % n], 3),
            }
        };
        let ((sa, na), (sb, nb), (sc, nc)) = (span(0), span(1), span(2));
        for &i in &sa[..na] {
            for &j in &sb[..nb] {
                for &l in &sc[..nc] {
                    if let Some(ids) = self.map.get(&self.pack([i, j, l])) {
                        out.extend_from_slice(ids);
                    }
                }
            }
        }
    }
}

fn expand(
    rows: &[SiteRow],
    ops: &[SymOp],
    lattice: &Lattice,
    warnings: &mut Vec<String>,
) -> (Vec<AsymmetricSite>, Vec<Site>) {
    let mut asym: Vec<AsymmetricSite> = Vec::new();
    let mut images: Vec<Vec<Frac>> = Vec::new();
    // every image so far: (group, position)
    let mut points: Vec<(usize, Frac)> = Vec::new();
    let mut buckets = Buckets::new(lattice, MERGE_TOLERANCE);
    let short = ShortRange::new(lattice, MERGE_TOLERANCE);
    let mut near = Vec::new();
    for row in rows {
        let occupant = Occupant {
            species: row.species.clone(),
            occupancy: row.occupancy,
            label: row.label.clone(),
        };
        buckets.near(row.frac, &mut near);
        let hit = near
            .iter()
            .map(|&id| points[id])
            .find(|(_, p)| short.within(*p, row.frac));
        if let Some((g, _)) = hit {
            asym[g].occupants.push(occupant);
            continue;
        }
        let orbit = orbit(ops, row.frac, &short);
        if let Some(m) = row.file_multiplicity {
            // Older SHELXL versions write the order of the site symmetry under this tag (1 for
            // a general position); either reading is accepted.
            let site_symmetry_order = ops.len() / orbit.len().max(1);
            if m != orbit.len() && m != site_symmetry_order {
                warnings.push(format!(
                    "site '{}': the file gives multiplicity {m}, the operators give {} (site \
                     symmetry of order {site_symmetry_order})",
                    row.label,
                    orbit.len()
                ));
            }
        }
        let g = asym.len();
        for p in &orbit {
            buckets.insert(*p, points.len());
            points.push((g, *p));
        }
        asym.push(AsymmetricSite {
            label: row.label.clone(),
            frac: row.frac,
            occupants: vec![occupant],
            multiplicity: orbit.len(),
            wyckoff: row.wyckoff.clone(),
        });
        images.push(orbit);
    }
    let mut sites = Vec::with_capacity(points.len());
    for (g, orbit) in images.iter().enumerate() {
        for p in orbit {
            sites.push(Site {
                frac: *p,
                occupants: asym[g].occupants.clone(),
                asym_index: g,
            });
        }
    }
    (asym, sites)
}

fn label_list(a: &AsymmetricSite) -> String {
    a.occupants
        .iter()
        .map(|o| format!("'{}'", o.label))
        .collect::<Vec<_>>()
        .join(" + ")
}

fn check_occupancy(asym: &[AsymmetricSite], warnings: &mut Vec<String>) {
    for a in asym {
        let total: f64 = a.occupants.iter().map(|o| o.occupancy).sum();
        if total > 1.0 + OCCUPANCY_TOLERANCE {
            warnings.push(format!(
                "site {} has total occupancy {total:.3}, more than 1",
                label_list(a)
            ));
        }
    }
}

fn check_contacts(
    sites: &[Site],
    asym: &[AsymmetricSite],
    lattice: &Lattice,
    warnings: &mut Vec<String>,
) {
    const MAX_REPORTED: usize = 10;
    let mut buckets = Buckets::new(lattice, MIN_CONTACT);
    let short = ShortRange::new(lattice, MIN_CONTACT);
    for (i, s) in sites.iter().enumerate() {
        buckets.insert(s.frac, i);
    }
    let mut near = Vec::new();
    let mut seen_pairs: std::collections::HashSet<(usize, usize)> = Default::default();
    let mut count = 0usize;
    for (i, s) in sites.iter().enumerate() {
        buckets.near(s.frac, &mut near);
        for &j in &near {
            if j <= i {
                continue;
            }
            let t = &sites[j];
            if s.total_occupancy() + t.total_occupancy() <= 1.0 + OCCUPANCY_TOLERANCE {
                continue; // alternatives of a disordered site
            }
            let d = short.distance(s.frac, t.frac);
            if d >= MIN_CONTACT {
                continue;
            }
            let pair = (
                s.asym_index.min(t.asym_index),
                s.asym_index.max(t.asym_index),
            );
            if !seen_pairs.insert(pair) {
                continue;
            }
            count += 1;
            if count <= MAX_REPORTED {
                warnings.push(format!(
                    "sites {} and {} are {d:.3} A apart, too close for both to be occupied",
                    label_list(&asym[pair.0]),
                    label_list(&asym[pair.1])
                ));
            }
        }
    }
    if count > MAX_REPORTED {
        warnings.push(format!(
            "{} more pairs of sites closer than {MIN_CONTACT} A are not listed",
            count - MAX_REPORTED
        ));
    }
}

fn check_charge(sites: &[Site], warnings: &mut Vec<String>) {
    let mut total = 0.0;
    let mut scale = 0.0;
    for s in sites {
        for o in &s.occupants {
            let Some(q) = o.species.oxidation else {
                return;
            };
            total += o.occupancy * q;
            scale += (o.occupancy * q).abs();
        }
    }
    if scale > 0.0 && total.abs() > 0.05_f64.max(0.01 * scale / 2.0) {
        warnings.push(format!(
            "the oxidation states do not balance: the cell carries a net charge of {total:+.3} e"
        ));
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn data(name: &str) -> String {
        let p = Path::new(concat!(env!("CARGO_MANIFEST_DIR"), "/../.."))
            .join("testdata/cif")
            .join(name);
        std::fs::read_to_string(p).expect("test CIF")
    }

    fn structure(text: &str) -> Structure {
        let doc = cif::parse(text.as_bytes()).expect("test CIF parses");
        let blocks = blocks_with_atoms(&doc);
        structure_from_block(blocks[0], "test.cif").expect("test CIF gives a structure")
    }

    fn multiplicity(s: &Structure, label: &str) -> usize {
        let a = s
            .asymmetric_sites
            .iter()
            .find(|a| a.label == label)
            .unwrap_or_else(|| panic!("site {label}"));
        let in_cell = s
            .sites
            .iter()
            .filter(|x| s.asymmetric_sites[x.asym_index].label == label)
            .count();
        assert_eq!(
            a.multiplicity, in_cell,
            "{label}: multiplicity vs images in the cell"
        );
        a.multiplicity
    }

    /// International Tables for Crystallography Vol. A, space group No. 62 (Pnma): Wyckoff
    /// positions 4a, 4b, 4c and 8d.
    #[test]
    fn pnma_multiplicities_follow_the_international_tables() {
        let s = structure(&data("pnma-wyckoff.cif"));
        assert_eq!(s.symmetry.ops.len(), 8);
        assert_eq!(s.symmetry.source, "operator list in the file");
        for (label, m) in [("Li1", 4), ("Na1", 4), ("Fe1", 4), ("P1", 4), ("O3", 8)] {
            assert_eq!(multiplicity(&s, label), m, "{label}");
        }
        assert_eq!(s.sites.len(), 24);
        // the file names no group: the operator list is recognised as No. 62
        assert_eq!(s.symmetry.number, Some(62));
        assert_eq!(s.symmetry.hall_symbol.as_deref(), Some("-P 2ac 2n"));
        // The file's own _atom_site_symmetry_multiplicity agrees: no warning about it.
        assert!(
            !s.warnings.iter().any(|w| w.contains("multiplicity")),
            "{:?}",
            s.warnings
        );
        let wy: Vec<_> = s
            .asymmetric_sites
            .iter()
            .map(|a| a.wyckoff.clone().unwrap())
            .collect();
        assert_eq!(wy, ["a", "b", "c", "c", "d"]);
        assert_eq!(s.name, "pnma_wyckoff");
    }

    /// International Tables for Crystallography Vol. A, space group No. 227 (Fd-3m), origin
    /// choice 2: 8a, 8b, 16c, 16d, 32e, 48f, 96g, 96h, 192i.
    #[test]
    fn fd3m_multiplicities_follow_the_international_tables() {
        let s = structure(&data("fd-3m-wyckoff.cif"));
        assert_eq!(s.symmetry.ops.len(), 192);
        assert_eq!(s.symmetry.hm_symbol.as_deref(), Some("F d -3 m"));
        assert_eq!(s.symmetry.number, Some(227));
        for (label, m) in [
            ("A8a", 8),
            ("B8b", 8),
            ("C16c", 16),
            ("D16d", 16),
            ("E32e", 32),
            ("F48f", 48),
            ("G96g", 96),
            ("H96h", 96),
            ("I192i", 192),
        ] {
            assert_eq!(multiplicity(&s, label), m, "{label}");
        }
    }

    /// Same group in DDLm tag names; a position shared by two labels is one mixed site.
    #[test]
    fn spinel_mixed_site_is_one_site_with_two_occupants() {
        let s = structure(&data("spinel-mixed-ddlm.cif"));
        assert_eq!(s.asymmetric_sites.len(), 3, "Li1, Mn1+Li2, O1");
        let mixed = &s.asymmetric_sites[1];
        assert_eq!(mixed.label, "Mn1");
        assert_eq!(mixed.multiplicity, 16);
        let labels: Vec<_> = mixed.occupants.iter().map(|o| o.label.as_str()).collect();
        assert_eq!(labels, ["Mn1", "Li2"]);
        assert_eq!(mixed.occupants[0].species.name(), "Mn3.5+");
        assert_eq!(multiplicity(&s, "Li1"), 8);
        assert_eq!(multiplicity(&s, "O1"), 32);
        assert_eq!(s.sites.len(), 56);
        let (a, b) = (s.lattice.parameters().a, 8.247);
        assert!((a - b).abs() < 1e-12);
        // 8 x 1 + 16 x 3.25 - 64 = -4 e, stated in the file header.
        assert!(
            s.warnings
                .iter()
                .any(|w| w.contains("net charge of -4.000 e")),
            "{:?}",
            s.warnings
        );
    }

    const HEAD: &str = "data_t\n_cell_length_a 5\n_cell_length_b 5\n_cell_length_c 5\n\
        _cell_angle_alpha 90\n_cell_angle_beta 90\n_cell_angle_gamma 90\n\
        loop_\n_symmetry_equiv_pos_as_xyz\nx,y,z\n-x,-y,-z\n";

    /// Without an operator list the Hall symbol wins over the H-M symbol, which wins over the
    /// number; each gives the operations of the International Tables setting.
    #[test]
    fn symmetry_from_hall_then_hermann_mauguin_then_number() {
        let sites = "loop_\n_atom_site_label\n_atom_site_fract_x\n_atom_site_fract_y\n\
                     _atom_site_fract_z\nO1 0.1 0.2 0.3\n";
        let cell = "data_s\n_cell_length_a 8\n_cell_length_b 9\n_cell_length_c 10\n";
        let s = structure(&format!(
            "{cell}_symmetry_space_group_name_Hall '-P 2ac 2n'\n\
             _symmetry_space_group_name_H-M 'P 1'\n{sites}"
        ));
        assert_eq!((s.symmetry.ops.len(), s.symmetry.number), (8, Some(62)));
        assert!(
            s.symmetry.source.starts_with("Hall symbol"),
            "{}",
            s.symmetry.source
        );
        let s = structure(&format!(
            "{cell}_space_group_name_H-M_alt 'P n m a'\n{sites}"
        ));
        assert_eq!((s.symmetry.ops.len(), s.sites.len()), (8, 8));
        let s = structure(&format!(
            "{cell}_symmetry.space_group_name_H-M 'P b n m'\n_space_group_IT_number 62\n{sites}"
        ));
        assert_eq!((s.symmetry.ops.len(), s.symmetry.number), (8, Some(62)));
        let s = structure(&format!("{cell}_space_group_IT_number 227\n{sites}"));
        assert_eq!(s.symmetry.ops.len(), 192);
        assert_eq!(s.symmetry.source, "space-group number 227");
        // a number that disagrees with the symbol is a warning, the symbol is used
        let s = structure(&format!(
            "{cell}_symmetry_space_group_name_H-M 'P n m a'\n_symmetry_Int_Tables_number 14\n{sites}"
        ));
        assert_eq!(s.symmetry.number, Some(62));
        assert!(
            s.warnings.iter().any(|w| w.contains("number 14")),
            "{:?}",
            s.warnings
        );
    }

    #[test]
    fn dummies_and_unknown_coordinates_are_left_out_with_a_warning() {
        let s = structure(&format!(
            "{HEAD}loop_\n_atom_site_label\n_atom_site_type_symbol\n_atom_site_fract_x\n\
             _atom_site_fract_y\n_atom_site_fract_z\n_atom_site_calc_flag\n\
             Li1 Li+ 0.1 0.2 0.3 d\nQ1 Q 0.3 0.3 0.3 d\nX1 ? 0.2 0.2 0.1 .\n\
             Du2 Du 0.4 0.1 0.1 d\nO9 O2- 0.4 0.4 0.1 dum\nO1 O2- ? 0.1 0.1 d\n\
             H1 H 0.35 0.1 0.2 c\nD1 D 0.1 0.35 0.2 calc\n"
        ));
        let kept: Vec<_> = s
            .asymmetric_sites
            .iter()
            .map(|a| a.label.as_str())
            .collect();
        assert_eq!(kept, ["Li1", "H1", "D1"]);
        assert_eq!(
            s.asymmetric_sites[2].occupants[0].species.element.symbol(),
            "H"
        );
        for l in ["Q1", "X1", "Du2", "O9", "O1"] {
            assert!(
                s.warnings.iter().any(|w| w.contains(&format!("'{l}'"))),
                "{l}: {:?}",
                s.warnings
            );
        }
    }

    /// The fast short-range distance equals the 27-image search below half the smallest cell
    /// width, also in a strongly skewed triclinic cell.
    #[test]
    fn short_range_distance_is_exact() {
        let lattice = Lattice::from_parameters(CellParameters {
            a: 3.1,
            b: 4.7,
            c: 9.3,
            alpha: 62.0,
            beta: 118.0,
            gamma: 71.0,
        })
        .unwrap();
        let r = 0.45
            * lattice
                .perpendicular_widths()
                .iter()
                .cloned()
                .fold(f64::MAX, f64::min);
        let short = ShortRange::new(&lattice, r);
        assert!(short.rounding_is_exact);
        let mut seed = 12345u64;
        let mut rnd = || {
            seed = seed.wrapping_mul(6364136223846793005).wrapping_add(1);
            (seed >> 11) as f64 / (1u64 << 53) as f64
        };
        for _ in 0..20000 {
            let p = Frac::new(rnd(), rnd(), rnd());
            let q = Frac::new(
                p.0.x + 0.3 * (rnd() - 0.5),
                p.0.y + 0.3 * (rnd() - 0.5),
                rnd() * 3.0,
            );
            let exact = lattice.periodic_distance(p, q);
            let fast = short.distance(p, q);
            if exact < r {
                assert!((fast - exact).abs() < 1e-9, "{fast} vs {exact}");
            } else {
                assert!(fast >= r);
            }
        }
    }

    #[test]
    fn type_symbols_carry_charges() {
        use SymbolReading::*;
        let el = |s| Element::from_symbol(s).unwrap();
        assert_eq!(read_symbol("Nb5+"), Some(Atom(el("Nb"), Some(5.0))));
        assert_eq!(read_symbol("O2-"), Some(Atom(el("O"), Some(-2.0))));
        assert_eq!(read_symbol("O-2"), Some(Atom(el("O"), Some(-2.0))));
        assert_eq!(read_symbol("Li1+"), Some(Atom(el("Li"), Some(1.0))));
        assert_eq!(read_symbol("Li+"), Some(Atom(el("Li"), Some(1.0))));
        assert_eq!(read_symbol("Fe2.5+"), Some(Atom(el("Fe"), Some(2.5))));
        assert_eq!(read_symbol("Fe1"), Some(Atom(el("Fe"), None)));
        assert_eq!(read_symbol("Ow1"), Some(Atom(el("O"), None)));
        assert_eq!(read_symbol("DW1"), Some(Atom(el("H"), None)));
        assert_eq!(read_symbol("Dy3+"), Some(Atom(el("Dy"), Some(3.0))));
        assert_eq!(read_symbol("Xe"), Some(Atom(el("Xe"), None)));
        for d in ["Q", "Q12", "Du", "dum", "X", "X3"] {
            assert_eq!(read_symbol(d), Some(Dummy), "{d}");
        }
        assert_eq!(read_symbol("Zz1"), None);
        assert_eq!(read_symbol("123"), None);
    }

    /// Mineral structure databases (the American Mineralogist Crystal Structure Database, for
    /// one) label water oxygens `Wat`, `WatOW`, `OW` or `Ow` and hydrogens `Hw`, often without
    /// type symbols: common practice in mineralogical CIFs. Those are O and H, not W; a site
    /// labelled `W1` or `W(2)` stays tungsten, and a type symbol always wins over the label.
    #[test]
    fn water_labels_without_type_symbols_are_oxygen_not_tungsten() {
        use SymbolReading::*;
        let el = |s| Element::from_symbol(s).unwrap();
        for l in [
            "Wat1", "Wat(25)", "Watz3", "WatOW", "WAT2", "wat", "OW(1)", "Ow1",
        ] {
            assert_eq!(read_label(l), Some(Atom(el("O"), None)), "{l}");
        }
        for l in ["Hw1", "HwL", "Hw"] {
            assert_eq!(read_label(l), Some(Atom(el("H"), None)), "{l}");
        }
        for l in ["W1", "W(2)", "Wa", "W"] {
            assert_eq!(read_label(l), Some(Atom(el("W"), None)), "{l}");
        }
        let s = structure(&format!(
            "{HEAD}loop_\n_atom_site_label\n_atom_site_fract_x\n_atom_site_fract_y\n\
             _atom_site_fract_z\nW1 0 0 0\nWatOW 0.1 0.2 0.3\nWat(5) 0.3 0.1 0.2\n\
             OW(1) 0.2 0.3 0.1\nHw1 0.25 0.35 0.15\n"
        ));
        let elements: Vec<&str> = s
            .asymmetric_sites
            .iter()
            .map(|a| a.occupants[0].species.element.symbol())
            .collect();
        assert_eq!(elements, ["W", "O", "O", "O", "H"]);
        // with a type symbol the label says nothing about the element
        let s = structure(&format!(
            "{HEAD}loop_\n_atom_site_label\n_atom_site_type_symbol\n_atom_site_fract_x\n\
             _atom_site_fract_y\n_atom_site_fract_z\nWat1 W6+ 0 0 0\n"
        ));
        assert_eq!(s.asymmetric_sites[0].occupants[0].species.name(), "W6+");
    }

    /// An incommensurately modulated structure given only in superspace (superspace group
    /// name and (3+d)-dimensional operators, no three-dimensional operator list) is refused
    /// with an error that says so, not with a bare "no symmetry".
    #[test]
    fn superspace_only_blocks_are_refused_with_a_clear_error() {
        let text = "data_m\n_cell_length_a 5\n_cell_length_b 6\n_cell_length_c 7\n\
            _cell_modulation_dimension 1\n_space_group_ssg_name 'C2/m(a0g)0s'\n\
            loop_\n_space_group_symop_ssg_id\n_space_group_symop_ssg_operation_algebraic\n\
            1 x1,x2,x3,x4\n2 -x1,x2,-x3,-x4+1/2\n\
            loop_\n_atom_site_label\n_atom_site_fract_x\n_atom_site_fract_y\n\
            _atom_site_fract_z\nCr1 0 0.1 0\n";
        let doc = cif::parse(text.as_bytes()).unwrap();
        let e = structure_from_block(&doc.blocks[0], "m.cif").unwrap_err();
        assert!(
            e.message.starts_with("no three-dimensional symmetry")
                && e.message.contains("_space_group_ssg_name 'C2/m(a0g)0s'"),
            "{e}"
        );
        // a superspace file that also lists the operators of its average structure is read
        let text = text.replace(
            "loop_\n_atom_site_label",
            "loop_\n_symmetry_equiv_pos_as_xyz\nx,y,z\n-x,y,-z\nloop_\n_atom_site_label",
        );
        let doc = cif::parse(text.as_bytes()).unwrap();
        let s = structure_from_block(&doc.blocks[0], "m.cif").unwrap();
        assert_eq!(s.sites.len(), 1, "Cr1 on the two-fold axis");
    }

    /// CIF block codes must be unique within a file (CIF 1.1 specification, common practice);
    /// a file that repeats one is still read, with a warning saying which block was used.
    #[test]
    fn repeated_block_names_are_read_with_a_warning() {
        let dir = std::env::temp_dir().join(format!("hopmap-cif-dup-{}", std::process::id()));
        std::fs::create_dir_all(&dir).unwrap();
        let path = dir.join("dup.cif");
        let sites = "loop_\n_atom_site_label\n_atom_site_fract_x\n_atom_site_fract_y\n\
                     _atom_site_fract_z\nO1 0.1 0.2 0.3\n";
        std::fs::write(
            &path,
            format!("{HEAD}{sites}{}{sites}", HEAD.replace("data_t", "data_T")),
        )
        .unwrap();
        let s = read_cif(&path, None).unwrap();
        assert!(
            s.warnings.iter().any(|w| w.contains(
                "data block name 't' is used by 2 blocks of this file (lines 1, 18); the one at \
                 line 1 is read"
            )),
            "{:?}",
            s.warnings
        );
        std::fs::remove_dir_all(&dir).ok();
    }

    #[test]
    fn atom_type_table_gives_oxidation_states() {
        let s = structure(&format!(
            "{HEAD}loop_\n_atom_type_symbol\n_atom_type_oxidation_number\nLi 1\nO -2\n\
             loop_\n_atom_site_label\n_atom_site_type_symbol\n_atom_site_fract_x\n\
             _atom_site_fract_y\n_atom_site_fract_z\nLi1 Li 0 0 0\nLi2 Li 0.5 0.5 0.5\n\
             O1 O 0.25 0.25 0.25\n"
        ));
        let names: Vec<String> = s
            .asymmetric_sites
            .iter()
            .map(|a| a.occupants[0].species.name())
            .collect();
        assert_eq!(names, ["Li+", "Li+", "O2-"]);
        // Li1 and Li2 sit on inversion centres (1 image each); O1 gives 2: 1 + 1 - 2 x 2 = -2 e.
        assert!(
            s.warnings
                .iter()
                .any(|w| w.contains("net charge of -2.000 e")),
            "{:?}",
            s.warnings
        );
    }

    #[test]
    fn overfull_sites_and_impossible_contacts_are_warned_about() {
        let s = structure(&format!(
            "{HEAD}loop_\n_atom_site_label\n_atom_site_fract_x\n_atom_site_fract_y\n\
             _atom_site_fract_z\n_atom_site_occupancy\n\
             Na1 0.1 0.1 0.1 0.8\nK1 0.1 0.1 0.1 0.4\nO1 0.3 0.3 0.3 1\nO2 0.32 0.3 0.3 1\n\
             Li1 0.6 0.6 0.6 0.5\nLi2 0.64 0.6 0.6 0.5\n"
        ));
        let w = s.warnings.join("\n");
        assert!(w.contains("'Na1' + 'K1' has total occupancy 1.200"), "{w}");
        assert!(w.contains("sites 'O1' and 'O2' are 0.100 A apart"), "{w}");
        // Two half-occupied positions 0.2 A apart are alternatives (split disorder): no warning.
        assert!(!w.contains("'Li1' and 'Li2'"), "{w}");
    }

    #[test]
    fn fractions_and_missing_cell_and_bad_symmetry() {
        let s = structure(&format!(
            "{HEAD}loop_\n_atom_site_label\n_atom_site_fract_x\n_atom_site_fract_y\n\
             _atom_site_fract_z\nSn1 1/4 3/4 0\n"
        ));
        assert_eq!(s.asymmetric_sites[0].frac, Frac::new(0.25, 0.75, 0.0));

        let doc = cif::parse(b"data_x\n_cell_length_a 5\nloop_\n_atom_site_label\n_atom_site_fract_x\n_atom_site_fract_y\n_atom_site_fract_z\nO1 0 0 0\n").unwrap();
        let e = structure_from_block(&doc.blocks[0], "x.cif").unwrap_err();
        assert!(
            e.to_string()
                .starts_with("x.cif:1: data block 'x': no cell: _cell_length_b"),
            "{e}"
        );

        let text = HEAD.replace("-x,-y,-z", "-x,-y,-q")
            + "loop_\n_atom_site_label\n_atom_site_fract_x\n_atom_site_fract_y\n_atom_site_fract_z\nO1 0 0 0\n";
        let doc = cif::parse(text.as_bytes()).unwrap();
        let e = structure_from_block(&doc.blocks[0], "x.cif").unwrap_err();
        assert_eq!(e.line, Some(11), "{e}");
        assert!(e.message.contains("-x,-y,-q"), "{e}");
    }

    #[test]
    fn shears_are_not_symmetry_operations() {
        for (op, ok) in [
            ("x,y,z", true),
            ("-y,x-y,z+1/3", true),
            ("x-y,-y,-z", true),
            ("x+y,y,z", false),
            ("3x,y,z", false),
        ] {
            let r = SymOp::parse_xyz(op)
                .map_err(|e| e.to_string())
                .and_then(|o| check_crystallographic(&o));
            assert_eq!(r.is_ok(), ok, "{op}: {r:?}");
        }
    }

    #[test]
    fn conflicting_cell_lengths_are_refused() {
        let text = HEAD.replace("_cell_length_c 5\n", "_cell_length_c 5\n_cell_length_c 6\n")
            + "loop_\n_atom_site_label\n_atom_site_fract_x\n_atom_site_fract_y\n_atom_site_fract_z\nO1 0 0 0\n";
        let doc = cif::parse(text.as_bytes()).unwrap();
        assert!(doc.warnings.iter().any(|w| w.line == 5));
        let e = structure_from_block(&doc.blocks[0], "x.cif").unwrap_err();
        assert!(
            e.message
                .contains("_cell_length_c is given twice with different values (lines 4 and 5)"),
            "{e}"
        );
    }

    #[test]
    fn file_without_symmetry_fails_with_a_clear_error() {
        let text = "data_y\n_cell_length_a 5\n_cell_length_b 5\n_cell_length_c 5\n\
            loop_\n_atom_site_label\n_atom_site_fract_x\n_atom_site_fract_y\n_atom_site_fract_z\nO1 0 0 0\n";
        let doc = cif::parse(text.as_bytes()).unwrap();
        let e = structure_from_block(&doc.blocks[0], "y.cif").unwrap_err();
        assert!(e.message.starts_with("no symmetry"), "{e}");
    }

    #[test]
    fn read_cif_chooses_blocks_and_lists_them_when_unknown() {
        let dir = std::env::temp_dir().join(format!("hopmap-cif-{}", std::process::id()));
        std::fs::create_dir_all(&dir).unwrap();
        let path = dir.join("two.cif");
        let text = format!(
            "data_empty\n_note hello\n{}loop_\n_atom_site_label\n_atom_site_fract_x\n_atom_site_fract_y\n_atom_site_fract_z\nO1 0 0 0\n",
            HEAD.replace("data_t", "data_second")
        );
        std::fs::write(&path, text).unwrap();
        let s = read_cif(&path, None).unwrap();
        assert_eq!(s.name, "second");
        let s = read_cif(&path, Some("SECOND")).unwrap();
        assert_eq!(s.name, "second");
        assert!(s.warnings.is_empty(), "{:?}", s.warnings);
        let dup = std::fs::read_to_string(&path)
            .unwrap()
            .replace("_cell_length_a 5\n", "_cell_length_a 5\n_cell_length_a 5\n");
        std::fs::write(&path, dup).unwrap();
        let s = read_cif(&path, None).unwrap();
        assert_eq!(s.warnings.len(), 1, "{:?}", s.warnings);
        assert!(
            s.warnings[0].starts_with("line 5: tag '_cell_length_a' repeats line 4"),
            "{:?}",
            s.warnings
        );
        let e = read_cif(&path, Some("third")).unwrap_err();
        assert!(
            e.message
                .contains("no data block 'third'; the file has: 'empty', 'second'"),
            "{e}"
        );
        std::fs::remove_dir_all(&dir).ok();
    }
}
