//! A structure written as a P 1 CIF (`write_cif::to_cif_p1`) reads back to the same crystal:
//! cell, composition, every position (periodic, within 1e-5 in fractional coordinates), the
//! species with their oxidation states and occupancies on each position, mixed sites as one
//! site with several occupants.
//!
//! Structures: every CIF of structures/reference/ (published structures, sources in each file),
//! among them the spinel Li4Ti5O12 with Li/Ti sharing 16d, LiMn2O4 with Mn3+/Mn4+ sharing 16d,
//! and the garnet Li7La3Zr2O12 with partly occupied Li sites; and rutile TiO2 from a VASP
//! POSCAR written here (a = 4.5937 A, c = 2.9587 A, O on 4f with x = 0.30478: Burdett et al.,
//! J. Am. Chem. Soc. 109 (1987) 3639, values quoted from memory).

use hopmap::cif;
use hopmap::element::Element;
use hopmap::lattice::Frac;
use hopmap::read::cif::{blocks_with_atoms, read_cif, structure_from_block};
use hopmap::read::poscar::read_poscar;
use hopmap::structure::{Species, Structure};
use hopmap_report::write_cif::{to_cif_p1, write_cif_p1};
use std::path::{Path, PathBuf};

/// Positions in fractional coordinates: the writer keeps 6 decimals.
const FRAC_TOL: f64 = 1e-5;
/// Cell lengths (A) and angles (degrees): 6 decimals written.
const CELL_TOL: f64 = 1e-5;
/// Occupancies: 6 decimals written (1/6 becomes 0.166667).
const OCC_TOL: f64 = 1e-6;

fn reference(name: &str) -> PathBuf {
    Path::new(concat!(env!("CARGO_MANIFEST_DIR"), "/../.."))
        .join("structures/reference")
        .join(name)
}

fn scratch(name: &str) -> PathBuf {
    let dir = Path::new(env!("CARGO_TARGET_TMPDIR")).join("roundtrip");
    std::fs::create_dir_all(&dir).unwrap();
    dir.join(name)
}

/// The P 1 CIF of `s`, parsed in memory.
fn through_cif_text(s: &Structure) -> Structure {
    let text = to_cif_p1(s);
    let doc = cif::parse(text.as_bytes()).expect("the written CIF parses");
    let blocks = blocks_with_atoms(&doc);
    assert_eq!(blocks.len(), 1);
    structure_from_block(blocks[0], "written.cif").expect("the written CIF reads")
}

/// The P 1 CIF of `s`, written to a file and read from it.
fn through_cif_file(s: &Structure, file: &str) -> Structure {
    let path = scratch(file);
    write_cif_p1(&path, s).unwrap();
    let back = read_cif(&path, None).expect("the written CIF file reads");
    std::fs::remove_file(&path).ok();
    back
}

/// Periodic distance in fractional coordinates (largest component of the minimum image).
fn frac_gap(p: Frac, q: Frac) -> f64 {
    p.min_image_delta(q).iter().fold(0.0, |m, d| m.max(d.abs()))
}

/// (species name, oxidation state, occupancy) of each occupant, in order.
fn occupants(site: &hopmap::structure::Site) -> Vec<(Species, f64)> {
    site.occupants
        .iter()
        .map(|o| (o.species.clone(), o.occupancy))
        .collect()
}

/// Asserts that `b` is the same crystal as `a`: see the module doc.
fn assert_same_crystal(a: &Structure, b: &Structure, what: &str) {
    let (p, q) = (a.lattice.parameters(), b.lattice.parameters());
    for (x, y, name) in [
        (p.a, q.a, "a"),
        (p.b, q.b, "b"),
        (p.c, q.c, "c"),
        (p.alpha, q.alpha, "alpha"),
        (p.beta, q.beta, "beta"),
        (p.gamma, q.gamma, "gamma"),
    ] {
        assert!((x - y).abs() < CELL_TOL, "{what}: cell {name} {x} -> {y}");
    }
    assert_eq!(b.symmetry.ops.len(), 1, "{what}: read back in P 1");
    assert_eq!(
        a.sites.len(),
        b.sites.len(),
        "{what}: positions in the cell (a mixed site counts once)"
    );
    let (ca, cb) = (a.cell_composition(), b.cell_composition());
    assert_eq!(
        ca.keys().collect::<Vec<_>>(),
        cb.keys().collect::<Vec<_>>(),
        "{what}: elements"
    );
    for (e, n) in &ca {
        assert!(
            (n - cb[e]).abs() < 1e-4,
            "{what}: {} per cell {n} -> {}",
            e.symbol(),
            cb[e]
        );
    }
    // every position of `a` is found once in `b`, with the same occupants
    let mut taken = vec![false; b.sites.len()];
    for s in &a.sites {
        let (k, gap) = b
            .sites
            .iter()
            .enumerate()
            .filter(|(k, _)| !taken[*k])
            .map(|(k, t)| (k, frac_gap(s.frac, t.frac)))
            .min_by(|x, y| x.1.total_cmp(&y.1))
            .expect("a position left");
        assert!(
            gap < FRAC_TOL,
            "{what}: no position within {FRAC_TOL} of {:?} ({} ...), nearest {gap:.2e} away",
            s.frac.0,
            s.occupants[0].label
        );
        taken[k] = true;
        let (mine, theirs) = (occupants(s), occupants(&b.sites[k]));
        assert_eq!(
            mine.len(),
            theirs.len(),
            "{what}: occupants at {:?}: {mine:?} -> {theirs:?}",
            s.frac.0
        );
        for ((sa, oa), (sb, ob)) in mine.iter().zip(&theirs) {
            assert_eq!(sa.element, sb.element, "{what}: at {:?}", s.frac.0);
            assert_eq!(
                sa.oxidation,
                sb.oxidation,
                "{what}: oxidation state of {} at {:?}",
                sa.name(),
                s.frac.0
            );
            assert!(
                (oa - ob).abs() < OCC_TOL,
                "{what}: occupancy of {} at {:?}: {oa} -> {ob}",
                sa.name(),
                s.frac.0
            );
        }
    }
}

fn reference_files() -> Vec<PathBuf> {
    let mut v: Vec<PathBuf> = std::fs::read_dir(reference(""))
        .unwrap()
        .filter_map(|e| e.ok().map(|e| e.path()))
        .filter(|p| p.extension().is_some_and(|x| x == "cif"))
        .collect();
    v.sort();
    v
}

#[test]
fn every_reference_structure_survives_a_p1_cif_round_trip() {
    let files = reference_files();
    assert!(files.len() >= 10, "{files:?}");
    for f in &files {
        let s = read_cif(f, None).unwrap_or_else(|e| panic!("{e}"));
        let name = f.file_name().unwrap().to_string_lossy().into_owned();
        let once = through_cif_text(&s);
        assert_same_crystal(&s, &once, &name);
        assert_same_crystal(&s, &through_cif_file(&s, &name), &format!("{name} (file)"));
        // a second round trip changes nothing either
        assert_same_crystal(&once, &through_cif_text(&once), &format!("{name} twice"));
        assert_eq!(once.name, s.name.replace(char::is_whitespace, "_"));
    }
}

/// Li4Ti5O12 (spinel, Fd-3m): 16d holds Li 1/6 and Ti 5/6; after the P 1 round trip each of
/// the 16 positions is still one site with both occupants.
#[test]
fn li4ti5o12_keeps_li_and_ti_together_on_16d() {
    let s = read_cif(&reference("Li4Ti5O12_spinel.cif"), None).unwrap();
    let back = through_cif_text(&s);
    let mixed = |x: &Structure| {
        x.sites
            .iter()
            .filter(|t| {
                let names: Vec<String> = t.occupants.iter().map(|o| o.species.name()).collect();
                names == ["Li+", "Ti4+"]
                    && (t.occupants[0].occupancy - 1.0 / 6.0).abs() < OCC_TOL
                    && (t.occupants[1].occupancy - 5.0 / 6.0).abs() < OCC_TOL
            })
            .count()
    };
    assert_eq!(mixed(&s), 16, "the file has Li/Ti on 16d");
    assert_eq!(mixed(&back), 16);
    // per cell: Li 8 (8a) + 16 x 1/6 (16d), Ti 16 x 5/6, O 32: Li4Ti5O12 with Z = 8/3
    let c = back.cell_composition();
    let el = |s| Element::from_symbol(s).unwrap();
    assert!((c[&el("Li")] - (8.0 + 16.0 / 6.0)).abs() < 1e-4);
    assert!((c[&el("Ti")] - 16.0 * 5.0 / 6.0).abs() < 1e-4);
    assert!((c[&el("O")] - 32.0).abs() < 1e-9);
}

/// LiMn2O4 (spinel): Mn3+ and Mn4+ half and half on 16d stay two oxidation states on one site.
#[test]
fn limn2o4_keeps_mn3_and_mn4_on_one_site() {
    let s = read_cif(&reference("LiMn2O4_spinel.cif"), None).unwrap();
    let back = through_cif_file(&s, "LiMn2O4_p1.cif");
    for x in [&s, &back] {
        let n = x
            .sites
            .iter()
            .filter(|t| {
                t.occupants.len() == 2
                    && t.occupants[0].species.oxidation == Some(3.0)
                    && t.occupants[1].species.oxidation == Some(4.0)
                    && t.occupants
                        .iter()
                        .all(|o| (o.occupancy - 0.5).abs() < OCC_TOL)
            })
            .count();
        assert_eq!(n, 16);
    }
}

/// Li7La3Zr2O12 (garnet): the partly occupied Li sites keep their occupancies, so the cell
/// still holds 56 Li (7 per formula unit, Z = 8) and the charges still balance.
#[test]
fn garnet_partial_lithium_occupancies_survive() {
    let s = read_cif(&reference("Li7La3Zr2O12_garnet.cif"), None).unwrap();
    let back = through_cif_text(&s);
    let partial = |x: &Structure| {
        x.sites
            .iter()
            .filter(|t| t.total_occupancy() < 1.0 - 1e-6)
            .count()
    };
    assert!(partial(&s) > 0, "the garnet file has partly occupied Li");
    assert_eq!(partial(&back), partial(&s));
    let li = back.cell_composition()[&Element::from_symbol("Li").unwrap()];
    assert!((li - 56.0).abs() < 0.05, "Li per cell {li}");
    let charge: f64 = back
        .sites
        .iter()
        .flat_map(|t| &t.occupants)
        .map(|o| o.occupancy * o.species.oxidation.unwrap())
        .sum();
    assert!(charge.abs() < 0.05, "net charge {charge} e");
}

const A: f64 = 4.5937;
const C: f64 = 2.9587;
const X: f64 = 0.30478;

/// Rutile as a VASP 5 POSCAR, with the a and b axes turned by 30 degrees about c so that the
/// Cartesian frame is not the one a CIF reader builds from the cell parameters.
fn rutile_poscar() -> String {
    let (c30, s30) = (30f64.to_radians().cos(), 30f64.to_radians().sin());
    let o = [
        [X, X, 0.0],
        [1.0 - X, 1.0 - X, 0.0],
        [0.5 + X, 0.5 - X, 0.5],
        [0.5 - X, 0.5 + X, 0.5],
    ];
    let mut t = format!(
        "rutile TiO2\n1.0\n{:.10} {:.10} 0\n{:.10} {:.10} 0\n0 0 {C}\nTi O\n2 4\nDirect\n\
         0 0 0\n0.5 0.5 0.5\n",
        A * c30,
        A * s30,
        -A * s30,
        A * c30
    );
    for p in o {
        t.push_str(&format!("{} {} {}\n", p[0], p[1], p[2]));
    }
    t
}

/// All periodic distances (A) between the sites of `s`, sorted.
fn distances(s: &Structure) -> Vec<f64> {
    let mut d = Vec::new();
    for (i, p) in s.sites.iter().enumerate() {
        for q in &s.sites[i + 1..] {
            d.push(s.lattice.periodic_distance(p.frac, q.frac));
        }
    }
    d.sort_by(f64::total_cmp);
    d
}

#[test]
fn rutile_poscar_to_structure_to_cif_to_structure() {
    let path = scratch("POSCAR");
    std::fs::write(&path, rutile_poscar()).unwrap();
    let s = read_poscar(&path).unwrap();
    std::fs::remove_file(&path).ok();
    let p = s.lattice.parameters();
    assert!((p.a - A).abs() < 1e-8 && (p.b - A).abs() < 1e-8 && (p.c - C).abs() < 1e-8);
    assert!((p.gamma - 90.0).abs() < 1e-8);
    assert_eq!(s.sites.len(), 6);
    // the POSCAR has no oxidation states: none appear on the way
    let back = through_cif_file(&s, "rutile_p1.cif");
    assert_same_crystal(&s, &back, "rutile from POSCAR");
    assert!(
        back.sites
            .iter()
            .all(|t| t.occupants[0].species.oxidation.is_none())
    );
    // interatomic distances do not depend on the Cartesian frame. The shortest are the four
    // equatorial Ti-O bonds, sqrt(2 (a (1/2 - x))^2 + (c/2)^2) = 1.949 A; the two apical ones
    // are sqrt(2) x a = 1.980 A (textbook figures for rutile)
    let (d0, d1) = (distances(&s), distances(&back));
    assert_eq!(d0.len(), d1.len());
    for (x, y) in d0.iter().zip(&d1) {
        assert!((x - y).abs() < 1e-4, "{x} -> {y}");
    }
    let equatorial = (2.0 * (A * (0.5 - X)).powi(2) + (C / 2.0).powi(2)).sqrt();
    assert!((d1[0] - equatorial).abs() < 1e-4, "{}", d1[0]);
    assert!((equatorial - 1.949).abs() < 1e-3);
    assert!(
        d1.iter().any(|d| (d - 2f64.sqrt() * X * A).abs() < 1e-4),
        "apical Ti-O"
    );
    // with formal charges set (Ti4+, O2-), the charges are written and read back too
    let mut charged = back.clone();
    for t in &mut charged.sites {
        for o in &mut t.occupants {
            let q = if o.species.element.symbol() == "Ti" {
                4.0
            } else {
                -2.0
            };
            o.species.oxidation = Some(q);
        }
    }
    let again = through_cif_text(&charged);
    assert_same_crystal(&charged, &again, "charged rutile");
    assert!(
        again.warnings.iter().all(|w| !w.contains("do not balance")),
        "{:?}",
        again.warnings
    );
}
