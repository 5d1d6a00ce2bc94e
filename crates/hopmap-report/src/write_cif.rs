//! Writes a structure as a CIF in space group P 1: the full cell, every site listed.
//!
//! The output uses the core CIF dictionary names (`_space_group_symop_operation_xyz`,
//! `_atom_site_*`, `_atom_type_*`). Each occupant of a site is one `_atom_site` row, so a mixed
//! site (Nb/W, Li/Ti) appears as several rows at the same position, each with its own
//! occupancy. Type symbols carry the formal charge when it is known (`Nb5+`, `O2-`) and the
//! `_atom_type` loop gives the matching `_atom_type_oxidation_number`; with no charge known the
//! type symbol is the element and the oxidation-number column is left out. Labels are kept when
//! they are unique in the cell and numbered (`Li1_2`) when several images share one.

use hopmap::structure::{Species, Structure};
use std::collections::HashSet;
use std::fmt::Write as _;
use std::path::Path;

/// The CIF text of `s` in P 1.
pub fn to_cif_p1(s: &Structure) -> String {
    let mut out = String::new();
    let p = s.lattice.parameters();
    let _ = writeln!(
        out,
        "# written by hopmap {}: the full cell in P 1",
        env!("CARGO_PKG_VERSION")
    );
    let _ = writeln!(out, "data_{}", block_name(&s.name));
    let _ = writeln!(out, "_cell_length_a    {:.6}", p.a);
    let _ = writeln!(out, "_cell_length_b    {:.6}", p.b);
    let _ = writeln!(out, "_cell_length_c    {:.6}", p.c);
    let _ = writeln!(out, "_cell_angle_alpha {:.6}", p.alpha);
    let _ = writeln!(out, "_cell_angle_beta  {:.6}", p.beta);
    let _ = writeln!(out, "_cell_angle_gamma {:.6}", p.gamma);
    let _ = writeln!(out, "_cell_volume      {:.6}", s.volume());
    let _ = writeln!(out, "_space_group_name_H-M_alt 'P 1'");
    let _ = writeln!(out, "_space_group_name_Hall 'P 1'");
    let _ = writeln!(out, "_space_group_IT_number 1");
    out.push_str("loop_\n_space_group_symop_id\n_space_group_symop_operation_xyz\n1 x,y,z\n");

    // atom types in order of first appearance
    let mut types: Vec<Species> = Vec::new();
    for site in &s.sites {
        for o in &site.occupants {
            if !types.contains(&o.species) {
                types.push(o.species.clone());
            }
        }
    }
    let any_charge = types.iter().any(|t| t.oxidation.is_some());
    out.push_str("loop_\n_atom_type_symbol\n");
    if any_charge {
        out.push_str("_atom_type_oxidation_number\n");
    }
    for t in &types {
        if any_charge {
            let q = t.oxidation.map(format_number).unwrap_or_else(|| "?".into());
            let _ = writeln!(out, "{} {}", t.name(), q);
        } else {
            let _ = writeln!(out, "{}", t.name());
        }
    }

    out.push_str(
        "loop_\n_atom_site_label\n_atom_site_type_symbol\n_atom_site_fract_x\n\
         _atom_site_fract_y\n_atom_site_fract_z\n_atom_site_occupancy\n",
    );
    let labels = unique_labels(s);
    let mut k = 0;
    for site in &s.sites {
        let f = site.frac.wrapped().0;
        for o in &site.occupants {
            let _ = writeln!(
                out,
                "{} {} {:.6} {:.6} {:.6} {}",
                labels[k],
                o.species.name(),
                f.x,
                f.y,
                f.z,
                format_number(o.occupancy)
            );
            k += 1;
        }
    }
    out
}

/// The P 1 CIF of `s` with a record of how it was made, placed right after the data block
/// line: `items` as `_hopmap_<name> value` pairs (values quoted when needed) and `lines` as
/// one looped item `_hopmap_<loop_name>` of text fields, one per line. The `_hopmap_` prefix is
/// a name of our own, so general CIF readers keep the values and ignore their meaning.
pub fn to_cif_p1_recorded(
    s: &Structure,
    items: &[(&str, String)],
    loop_name: &str,
    lines: &[String],
) -> String {
    let base = to_cif_p1(s);
    let mut record = String::new();
    for (name, value) in items {
        let _ = writeln!(record, "_hopmap_{name} {}", cif_value(value));
    }
    if !lines.is_empty() {
        let _ = writeln!(record, "loop_\n_hopmap_{loop_name}");
        for l in lines {
            // a text field ends at a line starting with ';': keep every line clear of that
            let text = l.replace('\n', " ");
            let _ = writeln!(record, ";\n{}\n;", text.trim_start_matches(';'));
        }
    }
    match base.find("\n_cell_length_a") {
        Some(at) => format!("{}\n{record}{}", &base[..at], &base[at + 1..]),
        None => base + &record,
    }
}

/// The CIF of a built framework: the P 1 cell with the spec, the refinement's numbers and
/// every construction line recorded (`_hopmap_build_*`).
pub fn built_cif(b: &hopmap::build::BuiltFramework) -> String {
    let r = &b.refinement;
    let items = [
        ("build_spec", b.spec.to_text()),
        ("build_label", b.spec.label()),
        ("build_metal_oxygen_a", format!("{:.4}", b.metal_oxygen_a)),
        ("build_refined", (r.iterations > 0).to_string()),
        ("build_iterations", r.iterations.to_string()),
        ("build_gii_vu", format!("{:.4}", r.gii_vu)),
        ("build_initial_gii_vu", format!("{:.4}", r.initial_gii_vu)),
        ("build_site_gii_vu", format!("{:.4}", r.site_gii_vu)),
    ];
    to_cif_p1_recorded(&b.structure, &items, "build_construction", &b.construction)
}

/// A CIF value: bare when it is a plain word, otherwise quoted with a quote it does not hold,
/// or a text field.
fn cif_value(v: &str) -> String {
    let plain = !v.is_empty()
        && !v
            .chars()
            .any(|c| c.is_whitespace() || c == '\'' || c == '"')
        && !v.starts_with(['_', '#', '$', ';', '[', ']'])
        && !["loop_", "stop_", "global_"].contains(&v.to_ascii_lowercase().as_str())
        && !v.to_ascii_lowercase().starts_with("data_")
        && !v.to_ascii_lowercase().starts_with("save_");
    if plain {
        v.to_string()
    } else if !v.contains('\'') && !v.contains('\n') {
        format!("'{v}'")
    } else if !v.contains('"') && !v.contains('\n') {
        format!("\"{v}\"")
    } else {
        format!("\n;\n{v}\n;")
    }
}

/// Writes the P 1 CIF of `s` to `path` through a temporary file in the same directory, renamed
/// into place, so that a failed write never leaves a partial file.
pub fn write_cif_p1(path: impl AsRef<Path>, s: &Structure) -> std::io::Result<()> {
    let path = path.as_ref();
    let dir = path
        .parent()
        .filter(|d| !d.as_os_str().is_empty())
        .unwrap_or(Path::new("."));
    let stem = path
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_else(|| "structure.cif".into());
    let tmp = dir.join(format!(".{stem}.{}.tmp", std::process::id()));
    std::fs::write(&tmp, to_cif_p1(s))?;
    std::fs::rename(&tmp, path).inspect_err(|_| {
        let _ = std::fs::remove_file(&tmp);
    })
}

/// One label per `_atom_site` row, in the order of [`to_cif_p1`]: the occupant label when no
/// other row uses it, otherwise `label_n` with n counting that label's rows (1, 2, ...).
/// Characters that would break a CIF value (white space, quotes) become `_`.
fn unique_labels(s: &Structure) -> Vec<String> {
    let raw: Vec<String> = s
        .sites
        .iter()
        .flat_map(|site| {
            site.occupants.iter().map(|o| {
                let l: String = o
                    .label
                    .chars()
                    .map(|c| {
                        if c.is_whitespace() || c == '\'' || c == '"' {
                            '_'
                        } else {
                            c
                        }
                    })
                    .collect();
                if l.is_empty() || l.starts_with(['_', '#', '$', ';', '[', ']']) {
                    format!("{}{}", o.species.element.symbol(), l)
                } else {
                    l
                }
            })
        })
        .collect();
    let mut total: std::collections::HashMap<&str, usize> = Default::default();
    for l in &raw {
        *total.entry(l.as_str()).or_insert(0) += 1;
    }
    let mut used: HashSet<String> = HashSet::new();
    let mut seen: std::collections::HashMap<&str, usize> = Default::default();
    let mut out = Vec::with_capacity(raw.len());
    for l in &raw {
        let mut cand = if total[l.as_str()] == 1 {
            l.clone()
        } else {
            let n = seen.entry(l.as_str()).or_insert(0);
            *n += 1;
            format!("{l}_{n}")
        };
        while used.contains(&cand) {
            cand.push('x');
        }
        used.insert(cand.clone());
        out.push(cand);
    }
    out
}

/// A number without trailing zeros: 1, 0.5, 3.5, 0.333333.
fn format_number(v: f64) -> String {
    if (v - v.round()).abs() < 1e-9 {
        format!("{}", v.round() as i64)
    } else {
        let s = format!("{v:.6}");
        s.trim_end_matches('0').trim_end_matches('.').to_string()
    }
}

/// A data block name: no white space, not empty.
fn block_name(name: &str) -> String {
    let n: String = name
        .chars()
        .map(|c| if c.is_whitespace() { '_' } else { c })
        .collect();
    if n.is_empty() { "structure".into() } else { n }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn numbers_lose_trailing_zeros() {
        assert_eq!(format_number(1.0), "1");
        assert_eq!(format_number(-2.0), "-2");
        assert_eq!(format_number(0.5), "0.5");
        assert_eq!(format_number(3.5), "3.5");
        assert_eq!(format_number(1.0 / 3.0), "0.333333");
    }

    /// Record values with quotes, semicolons, CIF reserved words and line starts that would
    /// open a text field read back unchanged with hopmap's CIF grammar (a CIF 1.1 reader), and
    /// the structure still reads.
    #[test]
    fn a_recorded_cif_reads_back_with_every_value() {
        let doc = hopmap::cif::parse(
            b"data_x\n_cell_length_a 4\n_cell_length_b 4\n_cell_length_c 4\n\
              _cell_angle_alpha 90\n_cell_angle_beta 90\n_cell_angle_gamma 90\n_space_group_IT_number 1\n\
              loop_\n_atom_site_label\n_atom_site_type_symbol\n_atom_site_fract_x\n\
              _atom_site_fract_y\n_atom_site_fract_z\nNa1 Na+ 0 0 0\nCl1 Cl- 0.5 0.5 0.5\n",
        )
        .unwrap();
        let block = hopmap::read::cif::blocks_with_atoms(&doc)[0];
        let s = hopmap::read::cif::structure_from_block(block, "x").unwrap();
        let odd = [
            "plain",
            "two words",
            "it's",
            "say \"it's\"",
            "loop_",
            "data_x",
            "_tag",
            "",
        ];
        let items: Vec<(&str, String)> = ["a", "b", "c", "d", "e", "f", "g", "h"]
            .iter()
            .zip(odd)
            .map(|(k, v)| (*k, v.to_string()))
            .collect();
        let lines = vec![
            "first; second".to_string(),
            ";starts a text field".to_string(),
            "'quoted' \"both\"".to_string(),
        ];
        let text = to_cif_p1_recorded(&s, &items, "steps", &lines);
        let back = hopmap::cif::parse(text.as_bytes()).unwrap_or_else(|e| panic!("{e:?}\n{text}"));
        let block = &back.blocks[0];
        for ((k, _), want) in items.iter().zip(odd) {
            let got = block
                .value(&format!("_hopmap_{k}"))
                .and_then(|v| v.as_str())
                .unwrap_or("");
            assert_eq!(got.trim(), want, "{k}");
        }
        let lp = block.find_loop("_hopmap_steps").unwrap();
        assert_eq!(lp.row_count(), 3);
        assert_eq!(
            lp.get(1, "_hopmap_steps")
                .and_then(|v| v.as_str())
                .map(str::trim),
            Some("starts a text field")
        );
        let again = hopmap::read::cif::structure_from_block(
            hopmap::read::cif::blocks_with_atoms(&back)[0],
            "x",
        )
        .unwrap();
        assert_eq!(again.sites.len(), s.sites.len());
    }

    #[test]
    fn block_names_have_no_spaces() {
        assert_eq!(block_name("Li Fe P O4"), "Li_Fe_P_O4");
        assert_eq!(block_name(""), "structure");
    }
}
