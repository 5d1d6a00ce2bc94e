//! Bad and absurd inputs meet a clear error naming the file and the place, never a panic, a
//! huge allocation or a computation without end. Each file under `testdata/robust/` reproduces a
//! case that crashed or ran away before (issue 14); its first comment line says what it is
//! (extended XYZ files, which have no comment lines, are described at their test).

use hopmap::analysis::{AnalysisError, AnalysisOptions, RateOptions, analyse};
use hopmap::element::Element;
use hopmap::limits;
use hopmap::read::read_structure;
use std::path::PathBuf;

fn robust(name: &str) -> PathBuf {
    PathBuf::from(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/../../testdata/robust"
    ))
    .join(name)
}

/// Reading fails with a message that names the file, a line and the given words.
fn refused(name: &str, line: usize, words: &str) {
    let e = read_structure(&robust(name), None).expect_err(name);
    let text = e.to_string();
    assert!(text.contains(name), "{text}");
    assert_eq!(e.line, Some(line), "{text}");
    assert!(text.contains(words), "{name}: '{words}' not in: {text}");
}

#[test]
fn a_hall_symbol_with_a_unicode_minus_reads_as_the_ascii_symbol() {
    // −F 4 2 3 is -F 4 2 3, F m -3 m (No. 225, International Tables Vol. A): rock-salt LiCl,
    // 4 Li and 4 Cl in the cell.
    let s = read_structure(&robust("hall_unicode_minus.cif"), None).unwrap();
    assert_eq!(s.symmetry.number, Some(225));
    assert_eq!(s.sites.len(), 8);
}

#[test]
fn a_hall_symbol_that_starts_with_another_non_ascii_letter_is_an_error_not_a_panic() {
    refused("hall_non_ascii_first.cif", 3, "is not in the table");
}

#[test]
fn numbers_and_charges_with_typographic_minus_signs_read_as_negative() {
    // Cl at (0.5, −0.5, –0.5) is the 4b site of rock salt again (periodic), and Cl− is Cl-1.
    let s = read_structure(&robust("unicode_minus_numbers.cif"), None).unwrap();
    assert_eq!(s.sites.len(), 8);
    let cl = s
        .asymmetric_sites
        .iter()
        .find(|a| a.label == "Cl1")
        .unwrap();
    assert_eq!(cl.frac.0.y, -0.5);
    assert_eq!(cl.frac.0.z, -0.5);
    assert_eq!(cl.occupants[0].species.oxidation, Some(-1.0));
}

#[test]
fn huge_atom_counts_are_refused_before_anything_is_allocated() {
    refused("count_1e10.vasp", 7, "more than the 100000 atoms");
    refused("count_1e18.vasp", 7, "more than the 100000 atoms");
    // 18446744073709551615 + 1 wraps to 0 in unchecked arithmetic ("the cell holds no atoms")
    refused("count_wrap.vasp", 7, "more than the 100000 atoms");
    refused("count_1e10.xyz", 1, "promises 10000000000 atoms");
    refused("count_1e18.xyz", 1, "promises 1000000000000000000 atoms");
}

#[test]
fn absurd_coefficients_and_column_widths_are_refused_with_their_line() {
    // `2147483647*x+x` overflowed the rotation's integer entry
    refused("op_huge_coefficient.cif", 10, "outside -12..12");
    // `species:S:0` after `pos:R:3` put the species at column 3 of a three-word atom line, and
    // indexed past its end
    refused("width_zero.xyz", 2, "width 0");
    // two widths of 2^64 - 1 overflowed the column count
    refused("width_wrap.xyz", 2, "too large");
}

#[test]
fn absurd_cells_are_refused_with_the_cell_line() {
    refused("cell_1e7.cif", 4, "cell edge a = 10000000 A is longer");
    refused("cell_1e300.cif", 4, "cell edge a = 1.000e300 A is longer");
    refused("cell_flat_angle.cif", 4, "the cell is flat");
    refused(
        "cell_thin_c.cif",
        4,
        "the cell is flat: its width across the c direction",
    );
    refused("cell_thin.vasp", 3, "the cell is flat");
    refused("cell_1e300.xyz", 2, "cell edge a = 1.000e300 A");
}

#[test]
fn an_escape_code_in_a_block_name_is_shown_escaped() {
    let e = read_structure(&robust("escape_in_block_name.cif"), None).unwrap_err();
    let text = e.to_string();
    assert!(!text.contains('\u{1b}'), "{text:?}");
    assert!(text.contains("\\u{1b}"), "{text:?}");
}

#[test]
fn more_symmetry_operations_than_any_space_group_has_are_refused() {
    // 5000 made-up operators (translations by n/5000 along x): no space group has more than
    // 192 operations (International Tables Vol. A).
    let mut text = String::from(
        "data_ops\n_cell_length_a 5\n_cell_length_b 5\n_cell_length_c 5\n\
         loop_\n_symmetry_equiv_pos_as_xyz\n",
    );
    for k in 0..5000 {
        text.push_str(&format!("'x+{k}/5000,y,z'\n"));
    }
    text.push_str("loop_\n_atom_site_label\n_atom_site_fract_x\n_atom_site_fract_y\n_atom_site_fract_z\nLi1 0 0 0\nO1 0.5 0.5 0.5\n");
    let dir = std::env::temp_dir().join(format!("hopmap-robust-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let path = dir.join("ops5000.cif");
    std::fs::write(&path, text).unwrap();
    let e = read_structure(&path, None).unwrap_err().to_string();
    assert!(e.contains("more than 192 different operations"), "{e}");
    let _ = std::fs::remove_dir_all(&dir);
}

#[cfg(unix)]
#[test]
fn a_fifo_is_refused_instead_of_blocking() {
    let dir = std::env::temp_dir().join(format!("hopmap-fifo-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let fifo = dir.join("pipe.cif");
    let ok = std::process::Command::new("mkfifo")
        .arg(&fifo)
        .status()
        .map(|s| s.success())
        .unwrap_or(false);
    if !ok {
        eprintln!("skipped: mkfifo not available");
        return;
    }
    let e = read_structure(&fifo, None).unwrap_err().to_string();
    assert!(e.contains("not a regular file"), "{e}");
    let _ = std::fs::remove_dir_all(&dir);
}

#[test]
fn a_grid_that_cannot_fit_is_refused_before_it_is_allocated() {
    // 1000 A cube: 6.4e10 points at the default 0.25 A, 3 TB; even 2 A gives 1.25e8 points
    let s = read_structure(&robust("cell_1000.cif"), None).unwrap();
    let e = analyse(
        &s,
        &AnalysisOptions::new(Element::from_symbol("Li").unwrap()),
    )
    .unwrap_err();
    assert!(matches!(e, AnalysisError::OverBudget { .. }), "{e}");
    assert!(e.to_string().contains("6.40e10 points"), "{e}");
}

#[test]
fn a_fine_spacing_over_the_budget_names_a_spacing_that_fits() {
    // LiCl rock salt (a = 5.1295 A) at 0.02 A: 257^3 = 1.7e7 points, 0.8 GB; under a 100 MB
    // budget the suggested spacing must itself fit.
    let s = read_structure(&robust("hall_unicode_minus.cif"), None).unwrap();
    let mut o = AnalysisOptions::new(Element::from_symbol("Li").unwrap());
    o.spacing_a = Some(0.02);
    o.budget.max_memory_bytes = 100_000_000;
    let e = analyse(&s, &o).unwrap_err().to_string();
    let fit: f64 = e.rsplit("spacing of ").next().unwrap()[..4]
        .trim()
        .parse()
        .unwrap();
    assert!(
        limits::points_at(&s.lattice, fit) * limits::BYTES_PER_GRID_POINT as f64 <= 1e8,
        "{e}"
    );
    o.spacing_a = Some(fit);
    o.percolation_only = true;
    assert!(analyse(&s, &o).is_ok());
}

#[test]
fn spacing_checks_live_in_the_core_and_state_their_bounds() {
    let mut o = AnalysisOptions::new(Element::from_symbol("Li").unwrap());
    for bad in [0.0, 0.0100001, -1.0, f64::NAN, 2.5] {
        o.spacing_a = Some(bad);
        let e = o.validate().unwrap_err();
        assert!(matches!(e, AnalysisError::Options(_)));
        assert!(e.to_string().contains("outside 0.02-2 A"), "{e}");
    }
    o.spacing_a = Some(limits::MIN_SPACING_A);
    assert!(o.validate().is_ok());
}

#[test]
fn physical_options_out_of_range_are_refused() {
    let check = |f: &dyn Fn(&mut RateOptions), words: &str| {
        let mut r = RateOptions::default();
        f(&mut r);
        let e = r.validate().unwrap_err().to_string();
        assert!(e.contains(words), "'{words}' not in: {e}");
    };
    check(&|r| r.temperature_k = -5.0, "temperature -5 K");
    check(&|r| r.temperature_k = f64::NAN, "temperature NaN K");
    check(
        &|r| r.measured_diffusion = Some((-1.0, 298.15)),
        "diffusion coefficient -1",
    );
    check(&|r| r.site_filling = 1.5, "site filling 1.5");
    check(&|r| r.site_filling = f64::NAN, "site filling NaN");
    check(
        &|r| r.min_ion_distance_a = 1e6,
        "minimum ion distance 1000000 A",
    );
    check(&|r| r.correlation_factor = 0.0, "correlation factor 0");
    check(
        &|r| r.attempt_frequency_hz = -1.0,
        "attempt frequency -1 Hz",
    );
    assert!(RateOptions::default().validate().is_ok());
}

#[test]
fn a_large_cell_coarsened_by_default_says_so() {
    // olivine LiFePO4 (Streltsov et al. 1993, structures/reference): 291 A^3; its 2x2x2
    // supercell, 2331 A^3, is above the 1000 A^3 where the default grid coarsens
    let s = read_structure(
        &PathBuf::from(concat!(
            env!("CARGO_MANIFEST_DIR"),
            "/../../structures/reference/LiFePO4_olivine.cif"
        )),
        None,
    )
    .unwrap();
    let big = s.supercell([2, 2, 2]).expect("a 2x2x2 supercell");
    let mut o = AnalysisOptions::new(Element::from_symbol("Li").unwrap());
    o.percolation_only = true;
    let a = analyse(&big, &o).unwrap();
    let w: Vec<&str> = a.warnings.iter().map(|w| w.message.as_str()).collect();
    assert!(
        w.iter()
            .any(|m| m.contains("grid was coarsened from 0.1 A to 0.133 A")),
        "{w:#?}"
    );
    // the cell as read (below 1000 A^3) is not coarsened and says nothing
    let a = analyse(&s, &o).unwrap();
    assert!(!a.warnings.iter().any(|w| w.message.contains("coarsened")));
}

#[test]
fn an_operator_list_that_is_not_a_group_is_read_with_a_warning() {
    // x,y,z and -x,-y,z+1/3: the square of the second, x,y,z+2/3, is missing (a group is
    // closed under composition: International Tables Vol. A, ch. 8)
    let s = read_structure(&robust("ops_not_a_group.cif"), None).unwrap();
    assert!(
        s.warnings
            .iter()
            .any(|w| w.contains("not a group: the product of operations 2 and 2")),
        "{:#?}",
        s.warnings
    );
    // a closed list (the reference LiCl file, 192 operations of F m -3 m) says nothing
    let licl = read_structure(
        &PathBuf::from(concat!(
            env!("CARGO_MANIFEST_DIR"),
            "/../../structures/reference/LiCl_rocksalt.cif"
        )),
        None,
    )
    .unwrap();
    assert!(!licl.warnings.iter().any(|w| w.contains("not a group")));
}
