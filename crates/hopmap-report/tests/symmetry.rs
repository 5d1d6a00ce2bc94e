//! Symmetry found in P 1 inputs (POSCAR, P 1 CIF) with moyo, and the conventional cell they are
//! analysed in.
//!
//! References: the space group published with each reference structure (the file's own
//! operator list, source in its header); the Wyckoff positions of layered LiCoO2 (Li 3a, Co 3b,
//! O 6c in R-3m, hexagonal axes; Orman & Wiseman, Acta Cryst. C40 (1984) 12, as in the file's
//! header); exact linear algebra for the cell transformations; spglib (a general-purpose
//! symmetry library on PyPI) as an independent oracle when `HOPMAP_PYTHON` is set.

use hopmap::analysis::{AnalysisOptions, analyse, headline};
use hopmap::element::Element;
use hopmap::read::{read_structure, read_structure_with};
use hopmap::symmetry::{direction_in_conventional, plane_in_conventional};
use hopmap_report::write_cif::write_cif_p1;
use nalgebra::Vector3;
use std::path::{Path, PathBuf};

fn root(rel: &str) -> PathBuf {
    Path::new(concat!(env!("CARGO_MANIFEST_DIR"), "/../..")).join(rel)
}

fn scratch(name: &str) -> PathBuf {
    let dir = Path::new(env!("CARGO_TARGET_TMPDIR")).join("symmetry");
    std::fs::create_dir_all(&dir).unwrap();
    dir.join(name)
}

fn reference_files() -> Vec<PathBuf> {
    let mut v: Vec<PathBuf> = std::fs::read_dir(root("structures/reference"))
        .unwrap()
        .filter_map(|e| e.ok().map(|e| e.path()))
        .filter(|p| p.extension().is_some_and(|x| x == "cif"))
        .collect();
    v.sort();
    v
}

#[test]
fn p1_copies_of_the_reference_structures_find_their_published_space_group() {
    for f in reference_files() {
        let s = read_structure(&f, None).unwrap();
        assert!(
            s.symmetry.transformation.is_none(),
            "the file's own symmetry is kept"
        );
        let p1 = scratch(&format!("{}_p1.cif", s.name));
        write_cif_p1(&p1, &s).unwrap();
        let back = read_structure(&p1, None).unwrap();
        let name = f.file_name().unwrap().to_string_lossy().to_string();
        if s.symmetry.ops.len() == 1 {
            // a reference given in P 1 (a relaxed cell): its copy finds nothing more either
            assert_eq!(back.symmetry.ops.len(), 1, "{name}");
            assert!(
                back.symmetry.source.contains("no symmetry beyond P 1"),
                "{name}"
            );
            continue;
        }
        assert_eq!(back.symmetry.number, s.symmetry.number, "{name}");
        assert_eq!(back.symmetry.ops.len(), s.symmetry.ops.len(), "{name}");
        assert!(back.symmetry.source.contains("moyo"), "{name}");
        let t = back.symmetry.transformation.as_ref().expect("recorded");
        assert!(t.conventional, "{name}");
        // the same cell, contents and asymmetric unit
        assert!(
            (back.volume() - s.volume()).abs() < 1e-6 * s.volume(),
            "{name}"
        );
        assert_eq!(back.sites.len(), s.sites.len(), "{name}");
        assert_eq!(back.formula_and_z(), s.formula_and_z(), "{name}");
        let mut m1: Vec<usize> = s.asymmetric_sites.iter().map(|a| a.multiplicity).collect();
        let mut m2: Vec<usize> = back
            .asymmetric_sites
            .iter()
            .map(|a| a.multiplicity)
            .collect();
        m1.sort();
        m2.sort();
        assert_eq!(m1, m2, "{name}: multiplicities of the asymmetric unit");
        std::fs::remove_file(&p1).ok();
    }
}

#[test]
fn a_primitive_licoo2_poscar_is_analysed_in_the_hexagonal_cell_as_2d_layers() {
    let s = read_structure(&root("testdata/cathodes/LiCoO2_primitive.vasp"), None).unwrap();
    assert_eq!(s.symmetry.number, Some(166));
    assert_eq!(
        s.sites.len(),
        12,
        "4 atoms x 3 lattice points of the R cell"
    );
    let p = s.lattice.parameters();
    assert!((p.a - 2.8156).abs() < 1e-6 && (p.c - 14.0542).abs() < 1e-6);
    let mut wyckoff: Vec<(String, usize, String)> = s
        .asymmetric_sites
        .iter()
        .map(|a| {
            (
                a.occupants[0].species.element.symbol().to_string(),
                a.multiplicity,
                a.wyckoff.clone().unwrap_or_default(),
            )
        })
        .collect();
    wyckoff.sort();
    assert_eq!(
        wyckoff,
        vec![
            ("Co".into(), 3, "b".into()),
            ("Li".into(), 3, "a".into()),
            ("O".into(), 6, "c".into())
        ]
    );
    let mut o = AnalysisOptions::new(Element::from_symbol("Li").unwrap());
    o.spacing_a = Some(0.15);
    o.percolation_only = true;
    let a = analyse(&s, &o).unwrap();
    assert!(
        headline(&a).starts_with("Li: 2D layers in the (001) plane"),
        "{}",
        headline(&a)
    );
}

#[test]
fn keeping_the_input_cell_keeps_it_and_still_groups_the_sites() {
    let path = root("testdata/cathodes/LiCoO2_primitive.vasp");
    let s = read_structure_with(&path, None, true).unwrap();
    assert_eq!(s.sites.len(), 4);
    assert_eq!(s.symmetry.number, Some(166));
    // the point group -3m has 12 operations; a primitive cell has no centring to add
    assert_eq!(s.symmetry.ops.len(), 12);
    let mut mult: Vec<usize> = s.asymmetric_sites.iter().map(|a| a.multiplicity).collect();
    mult.sort();
    assert_eq!(mult, vec![1, 1, 2]);
    // every atom keeps the label the file gave it (POSCAR: element and running number)
    let mut labels: Vec<&str> = s.sites.iter().map(|x| x.label()).collect();
    labels.sort();
    assert_eq!(labels, vec!["Co1", "Li1", "O1", "O2"]);
    let t = s.symmetry.transformation.as_ref().unwrap();
    assert!(!t.conventional);
    assert!(s.symmetry.source.contains("input cell is kept"));
    // a direction and a plane of the input cell, turned into the conventional cell, are the
    // same direction and plane in space (exact linear algebra)
    let conv = t.linear;
    let a_in = *s.lattice.matrix();
    let a_conv = a_in * conv;
    for u in [[1, 0, 0], [1, -1, 0], [1, 1, 1], [0, 1, 2]] {
        let d = direction_in_conventional(t, u).unwrap();
        let x = a_in * Vector3::new(u[0] as f64, u[1] as f64, u[2] as f64);
        let y = a_conv * Vector3::new(d[0] as f64, d[1] as f64, d[2] as f64);
        assert!(
            x.normalize().dot(&y.normalize()) > 1.0 - 1e-9,
            "{u:?} -> {d:?}"
        );
        let h = plane_in_conventional(t, u).unwrap();
        let n_in = a_in.try_inverse().unwrap().transpose()
            * Vector3::new(u[0] as f64, u[1] as f64, u[2] as f64);
        let n_conv = a_conv.try_inverse().unwrap().transpose()
            * Vector3::new(h[0] as f64, h[1] as f64, h[2] as f64);
        assert!(
            n_in.normalize().dot(&n_conv.normalize()) > 1.0 - 1e-9,
            "({u:?}) -> {h:?}"
        );
    }
}

#[test]
fn a_dft_cell_of_li10gep2s12_gets_orbits_instead_of_one_per_atom() {
    let p = root("../shared/structures/Li10GeP2S12_dft.cif");
    if !p.exists() {
        eprintln!("skipped: ../shared/structures is not here");
        return;
    }
    let s = read_structure(&p, None).unwrap();
    assert!(s.symmetry.ops.len() > 1);
    assert!(
        s.asymmetric_sites.len() * 3 <= s.sites.len(),
        "{} orbits for {} sites",
        s.asymmetric_sites.len(),
        s.sites.len()
    );
}

#[test]
fn a_structure_without_symmetry_stays_p1_and_says_so() {
    // Li0.5CoO2 with one Li per layer removed keeps some symmetry; an arbitrary distortion of
    // one atom removes it all
    let mut s = hopmap::read::read_structure_as_written(
        &root("testdata/cathodes/Li0.5CoO2_delithiated.vasp"),
        None,
    )
    .unwrap();
    s.sites[0].frac.0 += Vector3::new(0.031, 0.017, 0.023);
    let s = hopmap::symmetry::complete_symmetry(s, false);
    assert_eq!(s.symmetry.ops.len(), 1);
    assert!(
        s.symmetry.source.contains("no symmetry beyond P 1"),
        "{}",
        s.symmetry.source
    );
    assert!(s.symmetry.transformation.is_none());
}

/// spglib as an oracle: the space-group number of every P 1 file here, at the same tolerance
/// (0.01 A). Runs when HOPMAP_PYTHON names a python with spglib and pymatgen.
#[test]
fn space_groups_found_agree_with_spglib() {
    let Ok(python) = std::env::var("HOPMAP_PYTHON") else {
        eprintln!("skipped: set HOPMAP_PYTHON to a python with spglib and pymatgen");
        return;
    };
    let mut files: Vec<PathBuf> = std::fs::read_dir(root("testdata/cathodes"))
        .unwrap()
        .filter_map(|e| e.ok().map(|e| e.path()))
        .filter(|p| p.extension().is_some_and(|x| x == "vasp"))
        .collect();
    for f in ["LiFePO4_dft.cif", "Li10GeP2S12_dft.cif"] {
        let p = root("../shared/structures").join(f);
        if p.exists() {
            files.push(p);
        }
    }
    files.sort();
    let script = r#"
import sys, spglib
from pymatgen.core import Structure
for f in sys.argv[1:]:
    s = Structure.from_file(f)
    cell = (s.lattice.matrix, s.frac_coords, [x.specie.Z for x in s])
    print(spglib.get_symmetry_dataset(cell, symprec=0.01).number)
"#;
    let out = std::process::Command::new(&python)
        .arg("-c")
        .arg(script)
        .args(&files)
        .output()
        .expect("HOPMAP_PYTHON must run");
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let numbers: Vec<u16> = String::from_utf8_lossy(&out.stdout)
        .lines()
        .map(|l| l.trim().parse().unwrap())
        .collect();
    assert_eq!(numbers.len(), files.len());
    for (f, n) in files.iter().zip(numbers) {
        let s = read_structure(f, None).unwrap();
        assert_eq!(s.symmetry.number, Some(n), "{}", f.display());
    }
}
