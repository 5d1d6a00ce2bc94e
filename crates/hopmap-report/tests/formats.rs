//! Structure formats other than CIF: VASP POSCAR and extended XYZ in, P 1 CIF out.
//!
//! Reference structure: rutile TiO2, P 42/m n m, a = 4.5937 A, c = 2.9587 A, O on 4f with
//! x = 0.30478 (Burdett, Hughbanks, Miller, Richardson & Smith, J. Am. Chem. Soc. 109 (1987)
//! 3639; values quoted from memory). Its apical Ti-O bond, sqrt(2) x a = 1.980 A, is the
//! textbook figure.

use hopmap::element::Element;
use hopmap::lattice::{CellParameters, Frac, Lattice};
use hopmap::read::poscar::read_poscar;
use hopmap::read::xyz::read_extxyz;
use hopmap::spacegroup::SymOp;
use hopmap::structure::{AsymmetricSite, Occupant, Site, Species, Structure, SymmetryInfo};
use hopmap_report::write_cif::{to_cif_p1, write_cif_p1};
use std::path::PathBuf;

const A: f64 = 4.5937;
const C: f64 = 2.9587;
const X: f64 = 0.30478;

/// The six atoms of the rutile cell in fractional coordinates (ITA Vol. A, No. 136: 2a and 4f).
fn rutile_fractional() -> Vec<(&'static str, [f64; 3])> {
    vec![
        ("Ti", [0.0, 0.0, 0.0]),
        ("Ti", [0.5, 0.5, 0.5]),
        ("O", [X, X, 0.0]),
        ("O", [1.0 - X, 1.0 - X, 0.0]),
        ("O", [0.5 + X, 0.5 - X, 0.5]),
        ("O", [0.5 - X, 0.5 + X, 0.5]),
    ]
}

fn tmp_file(name: &str, content: &str) -> PathBuf {
    let dir = std::env::temp_dir().join(format!("hopmap-formats-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let p = dir.join(name);
    std::fs::write(&p, content).unwrap();
    p
}

fn rutile_poscar(header: &str, mode: &str, scale: &str, unit: f64, extra: &str) -> String {
    let mut s = format!(
        "{header}\n{scale}\n{a} 0 0\n0 {a} 0\n0 0 {c}\n",
        a = A * unit,
        c = C * unit
    );
    if !header.starts_with("VASP4") {
        s.push_str("Ti O\n");
    }
    s.push_str("2 4\n");
    s.push_str(mode);
    s.push('\n');
    for (_, f) in rutile_fractional() {
        if mode.starts_with('C') {
            s.push_str(&format!(
                "{} {} {}{extra}\n",
                f[0] * A * unit,
                f[1] * A * unit,
                f[2] * C * unit
            ));
        } else {
            s.push_str(&format!("{} {} {}{extra}\n", f[0], f[1], f[2]));
        }
    }
    s
}

fn assert_is_rutile(s: &Structure) {
    assert!(
        (s.volume() - A * A * C).abs() < 1e-6,
        "volume {}",
        s.volume()
    );
    let comp = s.cell_composition();
    assert_eq!(comp[&Element::from_symbol("Ti").unwrap()], 2.0);
    assert_eq!(comp[&Element::from_symbol("O").unwrap()], 4.0);
    assert_eq!(s.sites.len(), 6);
    for (site, (el, f)) in s.sites.iter().zip(rutile_fractional()) {
        assert_eq!(site.occupants[0].species.element.symbol(), el);
        let d = s
            .lattice
            .periodic_distance(site.frac, Frac::new(f[0], f[1], f[2]));
        assert!(d < 1e-6, "{} off by {d} A", site.label());
    }
    // the apical Ti-O bond of rutile
    let d = s
        .lattice
        .periodic_distance(s.sites[0].frac, s.sites[2].frac);
    assert!((d - 2f64.sqrt() * X * A).abs() < 1e-6);
    assert!((d - 1.980).abs() < 1e-3);
}

fn assert_p1(s: &Structure) {
    assert_eq!(s.symmetry.ops, vec![SymOp::identity()]);
    assert_eq!(s.symmetry.number, Some(1));
    assert_eq!(s.asymmetric_sites.len(), s.sites.len());
    assert!(s.asymmetric_sites.iter().all(|a| a.multiplicity == 1));
    assert!(s.symmetry.source.contains("P 1"), "{}", s.symmetry.source);
}

#[test]
fn vasp5_poscar_in_direct_coordinates_reads_rutile() {
    let p = tmp_file(
        "rutile.vasp",
        &rutile_poscar("rutile TiO2", "Direct", "1.0", 1.0, ""),
    );
    let s = read_poscar(&p).unwrap();
    assert_is_rutile(&s);
    assert_p1(&s);
    assert!(s.symmetry.source.contains("POSCAR"));
    let labels: Vec<&str> = s.sites.iter().map(|x| x.label()).collect();
    assert_eq!(labels, ["Ti1", "Ti2", "O1", "O2", "O3", "O4"]);
    assert_eq!(s.name, "rutile");
}

#[test]
fn cartesian_positions_are_scaled_like_the_lattice() {
    let text = rutile_poscar("rutile TiO2", "Cartesian", "2.0", 0.5, "");
    let s = read_poscar(tmp_file("rutile_cart.vasp", &text)).unwrap();
    assert_is_rutile(&s);
}

#[test]
fn negative_scale_factor_is_the_cell_volume() {
    let v = A * A * C;
    let text = rutile_poscar("rutile TiO2", "direct", &format!("-{v}"), 1.7, "");
    let s = read_poscar(tmp_file("rutile_vol.vasp", &text)).unwrap();
    assert_is_rutile(&s);
}

#[test]
fn selective_dynamics_potcar_names_and_velocities_are_handled() {
    let text = rutile_poscar("rutile", "Direct", "1", 1.0, "  T T F")
        .replace("Ti O\n", "Ti_pv O_s/1a2b\n")
        .replace("Direct\n", "Selective dynamics\nDirect\n");
    let text = format!("{text}\n0 0 0\n0 0 0\n0 0 0\n0 0 0\n0 0 0\n0 0 0\n");
    let s = read_poscar(tmp_file("CONTCAR", &text)).unwrap();
    assert_is_rutile(&s);
}

#[test]
fn vasp4_poscar_takes_species_from_the_comment_line() {
    // a header starting with "VASP4" makes rutile_poscar leave out the species line
    let text = rutile_poscar("VASP4", "Direct", "1", 1.0, "").replacen("VASP4", "Ti O rutile", 1);
    assert_eq!(text.lines().nth(5), Some("2 4"));
    let s = read_poscar(tmp_file("vasp4b.vasp", &text)).unwrap();
    assert_is_rutile(&s);
}

#[test]
fn vasp4_poscar_without_species_anywhere_is_an_error() {
    let text = rutile_poscar("VASP4", "Direct", "1", 1.0, "").replacen("VASP4", "rutile", 1);
    let p = tmp_file("vasp4c.vasp", &text);
    let e = read_poscar(&p).unwrap_err();
    assert!(e.file.ends_with("vasp4c.vasp"));
    assert_eq!(e.line, Some(6));
    assert!(e.message.contains("species"), "{e}");
}

#[test]
fn vasp4_poscar_with_species_after_each_position_is_read() {
    let mut text = String::from("rutile\n1\n");
    text.push_str(&format!("{A} 0 0\n0 {A} 0\n0 0 {C}\n2 4\nDirect\n"));
    for (el, f) in rutile_fractional() {
        text.push_str(&format!("{} {} {} {el}\n", f[0], f[1], f[2]));
    }
    let s = read_poscar(tmp_file("vasp4d.vasp", &text)).unwrap();
    assert_is_rutile(&s);
}

#[test]
fn poscar_with_fewer_positions_than_counted_names_file_and_line() {
    let text = rutile_poscar("rutile", "Direct", "1", 1.0, "").replace("2 4\n", "2 5\n");
    let p = tmp_file("short.vasp", &text);
    let e = read_poscar(&p).unwrap_err();
    let shown = e.to_string();
    assert!(shown.contains("short.vasp"), "{shown}");
    assert_eq!(e.line, Some(15), "{shown}");
    assert!(e.message.contains("7 atoms"), "{shown}");
}

#[test]
fn poscar_with_more_positions_than_counted_is_an_error() {
    let text = rutile_poscar("rutile", "Direct", "1", 1.0, "").replace("2 4\n", "2 3\n");
    let e = read_poscar(tmp_file("long.vasp", &text)).unwrap_err();
    assert_eq!(e.line, Some(14), "{e}");
    assert!(e.message.contains("more positions"), "{e}");
}

#[test]
fn poscar_bad_number_names_line_and_column() {
    let text =
        rutile_poscar("rutile", "Direct", "1", 1.0, "").replacen("0.5 0.5 0.5", "0.5 0.5 O.5", 1);
    let e = read_poscar(tmp_file("bad.vasp", &text)).unwrap_err();
    assert_eq!((e.line, e.column), (Some(10), Some(9)), "{e}");
    assert!(e.message.contains("'O.5'"), "{e}");
    let text = rutile_poscar("rutile", "Direct", "1", 1.0, "").replacen("2 4", "2 four", 1);
    let e = read_poscar(tmp_file("bad2.vasp", &text)).unwrap_err();
    assert_eq!((e.line, e.column), (Some(7), Some(3)), "{e}");
    let text = rutile_poscar("rutile", "Direct", "1", 1.0, "").replacen("Ti O", "Ti Qq", 1);
    let e = read_poscar(tmp_file("bad3.vasp", &text)).unwrap_err();
    assert_eq!((e.line, e.column), (Some(6), Some(4)), "{e}");
    let e = read_poscar(tmp_file("empty.vasp", "only a comment\n")).unwrap_err();
    assert!(e.message.contains("scale factor"), "{e}");
    let e = read_poscar("/nonexistent/POSCAR").unwrap_err();
    assert!(e.to_string().starts_with("/nonexistent/POSCAR"), "{e}");
}

fn rutile_extxyz(comment: &str, extra: &str) -> String {
    let mut s = format!("6\n{comment}\n");
    for (el, f) in rutile_fractional() {
        s.push_str(&format!(
            "{el} {} {} {}{extra}\n",
            f[0] * A,
            f[1] * A,
            f[2] * C
        ));
    }
    s
}

#[test]
fn extended_xyz_with_lattice_and_properties_reads_rutile() {
    let comment = format!(
        "Lattice=\"{A} 0.0 0.0 0.0 {A} 0.0 0.0 0.0 {C}\" Properties=species:S:1:pos:R:3:forces:R:3 \
         energy=-52.1 pbc=\"T T T\""
    );
    let p = tmp_file("rutile.xyz", &rutile_extxyz(&comment, " 0.1 0.2 0.3"));
    let s = read_extxyz(&p).unwrap();
    assert_is_rutile(&s);
    assert_p1(&s);
    assert!(s.symmetry.source.contains("XYZ"));
    assert!(s.warnings.is_empty());
}

#[test]
fn extended_xyz_reads_atomic_numbers_and_the_first_frame_only() {
    let comment = format!("lattice=\"{A} 0 0 0 {A} 0 0 0 {C}\" properties=Z:I:1:pos:R:3");
    let frame = rutile_extxyz(&comment, "")
        .replace("\nTi ", "\n22 ")
        .replace("\nO ", "\n8 ");
    let text = format!("{frame}{frame}");
    let s = read_extxyz(tmp_file("frames.xyz", &text)).unwrap();
    assert_is_rutile(&s);
    assert_eq!(s.warnings.len(), 1, "{:?}", s.warnings);
}

#[test]
fn plain_xyz_without_a_cell_is_an_error_asking_for_a_periodic_cell() {
    let p = tmp_file("molecule.xyz", &rutile_extxyz("rutile but no cell", ""));
    let e = read_extxyz(&p).unwrap_err();
    assert!(e.file.ends_with("molecule.xyz"));
    assert_eq!(e.line, Some(2));
    assert!(e.message.contains("periodic cell"), "{e}");
}

#[test]
fn extended_xyz_errors_name_line_and_column() {
    let lat = format!("Lattice=\"{A} 0 0 0 {A} 0 0 0 {C}\"");
    // one atom line missing
    let text = rutile_extxyz(&lat, "").replacen("6\n", "7\n", 1);
    let e = read_extxyz(tmp_file("short.xyz", &text)).unwrap_err();
    assert!(e.message.contains("7 atoms"), "{e}");
    assert_eq!(e.line, Some(9), "{e}");
    // a coordinate that is not a number
    let text = rutile_extxyz(&lat, "").replacen("Ti 0 0 0", "Ti 0 zero 0", 1);
    let e = read_extxyz(tmp_file("bad.xyz", &text)).unwrap_err();
    assert_eq!((e.line, e.column), (Some(3), Some(6)), "{e}");
    // not periodic along c
    let text = rutile_extxyz(&format!("{lat} pbc=\"T T F\""), "");
    let e = read_extxyz(tmp_file("slab.xyz", &text)).unwrap_err();
    assert!(e.message.contains("periodic"), "{e}");
    // a lattice with 8 numbers
    let text = rutile_extxyz(&format!("Lattice=\"{A} 0 0 0 {A} 0 0 0\""), "");
    let e = read_extxyz(tmp_file("lat8.xyz", &text)).unwrap_err();
    assert_eq!((e.line, e.column), (Some(2), Some(1)), "{e}");
    // count line that is not a number
    let e = read_extxyz(tmp_file(
        "nocount.xyz",
        "six\nLattice=\"1 0 0 0 1 0 0 0 1\"\n",
    ))
    .unwrap_err();
    assert_eq!(e.line, Some(1), "{e}");
}

fn lattice(a: f64, b: f64, c: f64) -> Lattice {
    Lattice::from_parameters(CellParameters {
        a,
        b,
        c,
        alpha: 90.0,
        beta: 90.0,
        gamma: 90.0,
    })
    .unwrap()
}

fn occupant(el: &str, q: Option<f64>, occ: f64, label: &str) -> Occupant {
    Occupant {
        species: Species::new(Element::from_symbol(el).unwrap(), q),
        occupancy: occ,
        label: label.into(),
    }
}

/// An invented block-oxide-like cell with one mixed Nb/W site (demo data, not a real phase).
fn mixed_site_structure() -> Structure {
    let sites = vec![
        Site {
            frac: Frac::new(0.0, 0.0, 0.0),
            occupants: vec![
                occupant("Nb", Some(5.0), 0.5, "M1"),
                occupant("W", Some(6.0), 0.5, "W1"),
            ],
            asym_index: 0,
        },
        Site {
            frac: Frac::new(0.5, 0.0, 0.0),
            occupants: vec![occupant("O", Some(-2.0), 1.0, "O1")],
            asym_index: 1,
        },
        Site {
            frac: Frac::new(0.0, 0.5, 0.0),
            occupants: vec![occupant("O", Some(-2.0), 1.0, "O1")],
            asym_index: 1,
        },
        Site {
            frac: Frac::new(0.0, 0.0, 1.25),
            occupants: vec![occupant("O", Some(-2.0), 1.0, "O1")],
            asym_index: 1,
        },
    ];
    Structure {
        name: "demo mixed".into(),
        lattice: lattice(3.8, 3.8, 3.9),
        symmetry: SymmetryInfo::p1("built in a test"),
        asymmetric_sites: vec![AsymmetricSite {
            label: "M1".into(),
            frac: Frac::new(0.0, 0.0, 0.0),
            occupants: sites[0].occupants.clone(),
            multiplicity: 1,
            wyckoff: None,
        }],
        sites,
        warnings: vec![],
        oxidation_states_assigned: false,
    }
}

/// Reads the rows of the loop whose first tag is `first_tag`: (tags, rows of values).
fn cif_loop(text: &str, first_tag: &str) -> (Vec<String>, Vec<Vec<String>>) {
    let lines: Vec<&str> = text.lines().collect();
    let start = lines
        .iter()
        .position(|l| l.trim() == first_tag)
        .unwrap_or_else(|| panic!("no loop starting with {first_tag}"));
    assert_eq!(lines[start - 1].trim(), "loop_");
    let mut i = start;
    let mut tags = Vec::new();
    while lines[i].starts_with('_') {
        tags.push(lines[i].trim().to_string());
        i += 1;
    }
    let mut rows = Vec::new();
    while i < lines.len() && !lines[i].starts_with('_') && lines[i].trim() != "loop_" {
        if !lines[i].trim().is_empty() {
            rows.push(lines[i].split_whitespace().map(String::from).collect());
        }
        i += 1;
    }
    (tags, rows)
}

fn cif_item(text: &str, tag: &str) -> String {
    text.lines()
        .find_map(|l| l.strip_prefix(tag))
        .unwrap_or_else(|| panic!("no {tag}"))
        .trim()
        .to_string()
}

#[test]
fn p1_cif_lists_cell_identity_types_with_charges_and_mixed_site_rows() {
    let s = mixed_site_structure();
    let cif = to_cif_p1(&s);
    assert!(cif.contains("\ndata_demo_mixed\n"), "{cif}");
    assert_eq!(cif_item(&cif, "_cell_length_a"), "3.800000");
    assert_eq!(cif_item(&cif, "_cell_length_c"), "3.900000");
    assert_eq!(cif_item(&cif, "_cell_angle_gamma"), "90.000000");
    assert_eq!(cif_item(&cif, "_space_group_IT_number"), "1");
    let (_, ops) = cif_loop(&cif, "_space_group_symop_id");
    assert_eq!(ops, vec![vec!["1".to_string(), "x,y,z".to_string()]]);
    let (tags, types) = cif_loop(&cif, "_atom_type_symbol");
    assert_eq!(tags[1], "_atom_type_oxidation_number");
    assert_eq!(
        types,
        vec![
            vec!["Nb5+".to_string(), "5".into()],
            vec!["W6+".into(), "6".into()],
            vec!["O2-".into(), "-2".into()]
        ]
    );
    let (tags, rows) = cif_loop(&cif, "_atom_site_label");
    assert_eq!(tags.len(), 6);
    assert_eq!(rows.len(), 5, "one row per occupant");
    assert!(rows.iter().all(|r| r.len() == tags.len()));
    // the mixed site: two rows at the same position, half occupied each
    assert_eq!(
        rows[0][..6],
        ["M1", "Nb5+", "0.000000", "0.000000", "0.000000", "0.5"]
    );
    assert_eq!(
        rows[1][..6],
        ["W1", "W6+", "0.000000", "0.000000", "0.000000", "0.5"]
    );
    // labels are unique; positions are wrapped into the cell
    let labels: std::collections::BTreeSet<&String> = rows.iter().map(|r| &r[0]).collect();
    assert_eq!(labels.len(), rows.len());
    assert_eq!(rows[2][0], "O1_1");
    assert_eq!(rows[4][4], "0.250000");
}

#[test]
fn p1_cif_positions_read_back_to_the_structure() {
    let text = rutile_poscar("rutile", "Direct", "1", 1.0, "");
    let s = read_poscar(tmp_file("rutile_rt.vasp", &text)).unwrap();
    let cif = to_cif_p1(&s);
    let (tags, rows) = cif_loop(&cif, "_atom_site_label");
    assert_eq!(tags[2], "_atom_site_fract_x");
    assert_eq!(rows.len(), 6);
    for (row, site) in rows.iter().zip(&s.sites) {
        let f: Vec<f64> = row[2..5].iter().map(|v| v.parse().unwrap()).collect();
        let d = s
            .lattice
            .periodic_distance(site.frac, Frac::new(f[0], f[1], f[2]));
        assert!(d < 1e-5, "{row:?}");
        assert_eq!(row[1], site.occupants[0].species.element.symbol());
        assert_eq!(row[5], "1");
    }
    // no charges known: the type loop has the symbol only
    let (tags, types) = cif_loop(&cif, "_atom_type_symbol");
    assert_eq!(tags.len(), 1);
    assert_eq!(types, vec![vec!["Ti".to_string()], vec!["O".to_string()]]);
    let a: f64 = cif_item(&cif, "_cell_length_a").parse().unwrap();
    let v: f64 = cif_item(&cif, "_cell_volume").parse().unwrap();
    assert!((a - A).abs() < 1e-6 && (v - A * A * C).abs() < 1e-5);
}

#[test]
fn writing_a_cif_file_leaves_no_temporary_file() {
    let s = mixed_site_structure();
    let dir = std::env::temp_dir().join(format!("hopmap-write-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let p = dir.join("out.cif");
    write_cif_p1(&p, &s).unwrap();
    assert_eq!(std::fs::read_to_string(&p).unwrap(), to_cif_p1(&s));
    let names: Vec<_> = std::fs::read_dir(&dir)
        .unwrap()
        .map(|e| e.unwrap().file_name())
        .collect();
    assert_eq!(names.len(), 1, "{names:?}");
    assert!(write_cif_p1("/nonexistent-dir/out.cif", &s).is_err());
}
