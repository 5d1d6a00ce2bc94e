//! The space-group table against the International Tables for Crystallography, Vol. A
//! (Space-group symmetry, ed. T. Hahn; the multiplicities and Wyckoff coordinates below are the
//! printed ones, quoted from memory and matching the 5th edition, 2002), and the look-ups by
//! Hall symbol, Hermann-Mauguin symbol, number and operation set.
//!
//! The table itself is generated from spglib's database; `tools/gen_spacegroups.py` also checks
//! every setting's operations against gemmi's reading of the same Hall symbol.

use hopmap::lattice::{CellParameters, Frac, Lattice};
use hopmap::spacegroup::{
    self, SpaceGroup, SymOp, from_hall, from_hm, from_number, identify, orbit, settings,
};
use std::collections::BTreeSet;

fn key(op: &SymOp) -> ([i32; 9], [i64; 3]) {
    let r = op.rot;
    let t = op.trans.map(|v| ((v * 24.0).round() as i64).rem_euclid(24));
    (
        [
            r[(0, 0)],
            r[(0, 1)],
            r[(0, 2)],
            r[(1, 0)],
            r[(1, 1)],
            r[(1, 2)],
            r[(2, 0)],
            r[(2, 1)],
            r[(2, 2)],
        ],
        [t[0], t[1], t[2]],
    )
}

fn op_set(g: &SpaceGroup) -> BTreeSet<([i32; 9], [i64; 3])> {
    g.ops.iter().map(key).collect()
}

#[test]
fn the_table_has_530_settings_of_230_space_groups() {
    assert_eq!(settings().len(), 530);
    let numbers: BTreeSet<u16> = settings().iter().map(|s| s.number).collect();
    assert_eq!(numbers.len(), 230);
    assert_eq!(numbers.first(), Some(&1));
    assert_eq!(numbers.last(), Some(&230));
    for (i, s) in settings().iter().enumerate() {
        assert_eq!(s.hall_number as usize, i + 1);
    }
    assert!(spacegroup::table_source().starts_with("spglib "));
}

#[test]
fn every_setting_is_a_group_containing_the_identity() {
    for s in settings() {
        let g = s.space_group();
        assert_eq!(
            g.ops[0],
            SymOp::identity(),
            "{}: identity not first",
            s.hall
        );
        let set = op_set(&g);
        assert_eq!(set.len(), g.ops.len(), "{}: repeated operations", s.hall);
        for a in &g.ops {
            let det = a.rot.map(|v| v as f64).determinant();
            assert!((det.abs() - 1.0).abs() < 1e-12, "{}: det {det}", s.hall);
            for b in &g.ops {
                let ab = a.compose(b);
                assert!(
                    set.contains(&key(&ab)),
                    "{} ({}): {a} after {b} = {ab} is not in the group",
                    s.hall,
                    s.hm
                );
            }
        }
    }
}

/// Lattice points per conventional cell for each centring letter (ITA Vol. A, Table 1.2.1.1).
fn centring_multiplicity(letter: char, choice: &str) -> usize {
    match letter {
        'P' => 1,
        'A' | 'B' | 'C' | 'I' => 2,
        'R' if choice == "R" => 1,
        'R' => 3,
        'F' => 4,
        _ => panic!("unknown centring {letter}"),
    }
}

#[test]
fn order_is_point_group_order_times_lattice_points_per_cell() {
    for s in settings() {
        let g = s.space_group();
        let rotations: BTreeSet<[i32; 9]> = g.ops.iter().map(|o| key(o).0).collect();
        let pure_translations = g
            .ops
            .iter()
            .filter(|o| o.rot == nalgebra::Matrix3::identity())
            .count();
        assert_eq!(
            pure_translations,
            centring_multiplicity(g.centring(), s.choice),
            "{}",
            s.hm
        );
        assert_eq!(g.order(), rotations.len() * pure_translations, "{}", s.hm);
        assert!(
            [1, 2, 3, 4, 6, 8, 12, 16, 24, 48].contains(&rotations.len()),
            "{}: point group of order {}",
            s.hm,
            rotations.len()
        );
    }
}

#[test]
fn general_position_multiplicities_match_the_international_tables() {
    // ITA Vol. A, multiplicity of the general position in the conventional cell.
    for (symbol, multiplicity) in [
        ("P 1", 1),
        ("P -1", 2),
        ("P 21/c", 4),
        ("P n m a", 8),
        ("C 2/m", 8),
        ("R -3 m :H", 36),
        ("R -3 m :R", 12),
        ("I 4/m", 16),
        ("P 42/m n m", 16),
        ("F m -3 m", 192),
        ("F d -3 m", 192),
        ("I a -3 d", 96),
        ("P 63/m m c", 24),
    ] {
        let g = from_hm(symbol).unwrap_or_else(|| panic!("{symbol} not found"));
        assert_eq!(g.order(), multiplicity, "{symbol}");
    }
}

fn cell(a: f64, b: f64, c: f64, gamma: f64) -> Lattice {
    Lattice::from_parameters(CellParameters {
        a,
        b,
        c,
        alpha: 90.0,
        beta: 90.0,
        gamma,
    })
    .unwrap()
}

/// Checks the number of distinct images of each position in the full cell.
fn check_wyckoff(symbol: &str, lattice: &Lattice, positions: &[(&str, [f64; 3], usize)]) {
    let g = from_hm(symbol).unwrap();
    for (name, p, multiplicity) in positions {
        let images = orbit(&g.ops, Frac::new(p[0], p[1], p[2]), lattice, 1e-3);
        assert_eq!(
            images.len(),
            *multiplicity,
            "{symbol}: Wyckoff position {name} at {p:?}"
        );
    }
}

// Generic coordinate values for the free parameters x, y, z of special positions.
const X: f64 = 0.0731;
const Y: f64 = 0.1642;
const Z: f64 = 0.3857;

#[test]
fn spinel_group_fd3m_origin_2_site_multiplicities() {
    // ITA Vol. A, No. 227, origin choice 2: the spinel AB2O4 puts A on 8a, B on 16d, O on 32e.
    check_wyckoff(
        "F d -3 m",
        &cell(8.24, 8.24, 8.24, 90.0),
        &[
            ("8a", [0.125, 0.125, 0.125], 8),
            ("8b", [0.375, 0.375, 0.375], 8),
            ("16c", [0.0, 0.0, 0.0], 16),
            ("16d", [0.5, 0.5, 0.5], 16),
            ("32e", [X, X, X], 32),
            ("48f", [X, 0.125, 0.125], 48),
            ("96g", [X, X, Z], 96),
            ("96h", [0.0, Y, -Y], 96),
            ("192i", [X, Y, Z], 192),
        ],
    );
}

#[test]
fn spinel_8a_in_origin_choice_1_sits_at_the_origin() {
    // ITA Vol. A, No. 227, origin choice 1: 8a at 0,0,0 and 16c at 1/8,1/8,1/8.
    check_wyckoff(
        "F d -3 m :1",
        &cell(8.24, 8.24, 8.24, 90.0),
        &[
            ("8a", [0.0, 0.0, 0.0], 8),
            ("16c", [0.125, 0.125, 0.125], 16),
            ("16d", [0.625, 0.625, 0.625], 16),
        ],
    );
}

#[test]
fn olivine_group_pnma_site_multiplicities() {
    // ITA Vol. A, No. 62; olivine LiFePO4 has Li on 4a, Fe and P on 4c, one O on 8d.
    check_wyckoff(
        "P n m a",
        &cell(10.33, 6.01, 4.69, 90.0),
        &[
            ("4a", [0.0, 0.0, 0.0], 4),
            ("4b", [0.0, 0.0, 0.5], 4),
            ("4c", [X, 0.25, Z], 4),
            ("8d", [X, Y, Z], 8),
        ],
    );
}

#[test]
fn layered_group_r3m_hexagonal_axes_site_multiplicities() {
    // ITA Vol. A, No. 166, hexagonal axes; layered LiCoO2: Li 3a or 3b, Co 3b or 3a, O 6c.
    check_wyckoff(
        "R -3 m",
        &cell(2.82, 2.82, 14.05, 120.0),
        &[
            ("3a", [0.0, 0.0, 0.0], 3),
            ("3b", [0.0, 0.0, 0.5], 3),
            ("6c", [0.0, 0.0, Z], 6),
            ("9d", [0.5, 0.0, 0.5], 9),
            ("9e", [0.5, 0.0, 0.0], 9),
            ("18h", [X, -X, Z], 18),
            ("36i", [X, Y, Z], 36),
        ],
    );
}

#[test]
fn rutile_group_p42mnm_site_multiplicities() {
    // ITA Vol. A, No. 136; rutile TiO2: Ti on 2a, O on 4f (x, x, 0).
    check_wyckoff(
        "P 42/m n m",
        &cell(4.59, 4.59, 2.96, 90.0),
        &[
            ("2a", [0.0, 0.0, 0.0], 2),
            ("2b", [0.0, 0.0, 0.5], 2),
            ("4c", [0.0, 0.5, 0.0], 4),
            ("4f", [0.3049, 0.3049, 0.0], 4),
            ("4g", [X, -X, 0.0], 4),
            ("8j", [X, X, Z], 8),
            ("16k", [X, Y, Z], 16),
        ],
    );
}

#[test]
fn hollandite_group_i4m_site_multiplicities() {
    // ITA Vol. A, No. 87; hollandite frameworks have the tunnel cation on 2a or 2b, the
    // octahedral cation and oxygens on 8h (x, y, 0).
    check_wyckoff(
        "I 4/m",
        &cell(9.8, 9.8, 2.86, 90.0),
        &[
            ("2a", [0.0, 0.0, 0.0], 2),
            ("2b", [0.0, 0.0, 0.5], 2),
            ("4e", [0.0, 0.0, Z], 4),
            ("8f", [0.25, 0.25, 0.25], 8),
            ("8h", [X, Y, 0.0], 8),
            ("16i", [X, Y, Z], 16),
        ],
    );
}

#[test]
fn garnet_group_ia3d_site_multiplicities() {
    // ITA Vol. A, No. 230; garnets A3B2(XO4)3: A on 24c, B on 16a, X on 24d, O on 96h.
    check_wyckoff(
        "I a -3 d",
        &cell(12.97, 12.97, 12.97, 90.0),
        &[
            ("16a", [0.0, 0.0, 0.0], 16),
            ("16b", [0.125, 0.125, 0.125], 16),
            ("24c", [0.125, 0.0, 0.25], 24),
            ("24d", [0.375, 0.0, 0.25], 24),
            ("32e", [X, X, X], 32),
            ("48f", [X, 0.0, 0.25], 48),
            ("96h", [X, Y, Z], 96),
        ],
    );
}

/// (symbol as written, IT number, Hall number of the setting it must resolve to)
const SPELLINGS: &[(&str, u16, u16)] = &[
    ("Pnma", 62, 292),
    ("P n m a", 62, 292),
    ("P 21/n 21/m 21/a", 62, 292),
    ("P2_1/n2_1/m2_1/a", 62, 292),
    ("'P n m a'", 62, 292),
    ("P b n m", 62, 294),
    ("F d -3 m", 227, 526),
    ("Fd-3m", 227, 526),
    ("Fd-3m:2", 227, 526),
    ("F d -3 m :1", 227, 525),
    ("F d 3 m", 227, 526),
    ("Fd3m:1", 227, 525),
    ("F d -3 m Z", 227, 526),
    ("F d -3 m S", 227, 525),
    ("F 41/d -3 2/m", 227, 526),
    ("F m -3 m", 225, 523),
    ("Fm3m", 225, 523),
    ("P m 3 m", 221, 517),
    ("I a 3 d", 230, 530),
    ("Ia-3d", 230, 530),
    ("R -3 m :H", 166, 458),
    ("R-3m:R", 166, 459),
    ("R -3 m", 166, 458),
    ("R -3 m R", 166, 459),
    ("R -3 2/m", 166, 458),
    ("R 3 c :R", 161, 453),
    ("P 1 21/c 1", 14, 81),
    ("P21/c", 14, 81),
    ("P 21/c", 14, 81),
    ("P 2_1/c", 14, 81),
    ("P 21/n", 14, 82),
    ("P 1 21/n 1", 14, 82),
    ("P 21/a", 14, 83),
    ("P 1 1 21/b", 14, 86),
    ("P 21/c = P 1 21/n 1", 14, 82),
    ("I 4/m", 87, 363),
    ("I4/m", 87, 363),
    ("P 42/m n m", 136, 419),
    ("P4_2/mnm", 136, 419),
    ("P 42/m 21/n 2/m", 136, 419),
    ("C 1 2/m 1", 12, 63),
    ("C2/m", 12, 63),
    ("C 2/c", 15, 90),
    ("I 1 2/a 1", 15, 92),
    ("P 4/n", 85, 360),
    ("P 4/n :1", 85, 359),
    ("P 63/m m c", 194, 488),
    ("P6_3/mmc", 194, 488),
    ("P 63/m 2/m 2/c", 194, 488),
    ("P -1", 2, 2),
    ("P1", 1, 1),
    ("p n m a", 62, 292),
    // old symbols before the e glide (ITA Vol. A 2002, Table 4.3.2.1)
    ("Cmca", 64, 304),
    ("C m c e", 64, 304),
    ("Ccmb", 64, 305),
    ("C c m e", 64, 305),
    ("A b m 2", 39, 191),
    ("C m m a", 67, 316),
    ("C m m b", 67, 317),
    ("C c c a", 68, 323),
    ("C c c a :1", 68, 322),
    ("Ccce", 68, 323),
    ("P12(1)/n1", 14, 82),
    ("P2(1)/m", 11, 60),
    ("P 21 / c", 14, 81),
    ("P 2(1)2(1)2(1)", 19, 115),
    ("P 42/m m c S", 131, 412),
    ("P n m a :1", 62, 292),
    ("R -3 m :2", 166, 458),
    ("I 2/b 1 1", 15, 107),
    ("I2/c", 15, 95),
    ("P_1", 1, 1),
    ("B b e b", 68, 331),
    ("B b c b", 68, 331),
    ("B b a b", 68, 333),
    ("B b a b :1", 68, 332),
];

#[test]
fn hermann_mauguin_spellings_resolve_to_their_setting() {
    for &(symbol, number, hall_number) in SPELLINGS {
        let g = from_hm(symbol).unwrap_or_else(|| panic!("{symbol:?} not found"));
        assert_eq!(
            (g.number, g.hall_number),
            (number, hall_number),
            "{symbol:?} -> {} ({})",
            g.hm,
            g.hall
        );
    }
}

#[test]
fn unknown_symbols_and_impossible_suffixes_are_not_found() {
    // (an origin suffix on a one-origin group is ignored, see the spellings above)
    for symbol in [
        "",
        "P 7",
        "Q 1",
        "Pnma:H",
        "Fd-3m:3",
        "P 21/c :R",
        "R -3 m :R3",
        "P 4 4",
        "C -1",
        "A -1",
        "P?",
        "X4bm",
    ] {
        assert!(from_hm(symbol).is_none(), "{symbol:?} should not resolve");
    }
}

#[test]
fn each_setting_is_found_by_its_own_symbol_and_hall_symbol() {
    for s in settings() {
        let by_hm = from_hm(&s.hm_symbol()).unwrap_or_else(|| panic!("{}", s.hm_symbol()));
        assert_eq!(by_hm.number, s.number, "{}", s.hm_symbol());
        // settings that answer to the same symbol and suffix (the e-glide symbols of groups 67
        // and 68 name two axis settings each)
        let body = spacegroup::compact_hm(s.hm_symbol().split(':').next().unwrap());
        let shares_symbol = settings()
            .iter()
            .filter(|t| t.suffix() == s.suffix() && t.names().contains(&body))
            .count()
            > 1;
        if !shares_symbol {
            assert_eq!(by_hm.hall_number, s.hall_number, "{}", s.hm_symbol());
        }
        let by_hall = from_hall(s.hall).unwrap();
        assert_eq!(op_set(&by_hall), op_set(&s.space_group()), "{}", s.hall);
        let found = identify(&s.space_group().ops).unwrap();
        assert_eq!(op_set(&found), op_set(&s.space_group()), "{}", s.hall);
        assert_eq!(found.number, s.number);
    }
}

#[test]
fn hall_symbols_match_ignoring_case_spacing_and_quotes() {
    assert_eq!(from_hall("-P 2ac 2n").unwrap().hall_number, 292);
    assert_eq!(from_hall("  -p  2AC   2n ").unwrap().hall_number, 292);
    assert_eq!(from_hall("'-F 4vw 2vw 3'").unwrap().hall_number, 526);
    assert_eq!(from_hall("'P 3 2\"'").unwrap().number, 150);
    assert_eq!(from_hall("P 32").unwrap().number, 145);
    assert_eq!(from_hall("P 3 2").unwrap().number, 149);
    assert_eq!(from_hall("-R 3 2\"").unwrap().hall_number, 458);
    // slips seen in files: no space after the lattice symbol, a space before the quote
    assert_eq!(from_hall("-I2yc").unwrap().hall_number, 95);
    assert_eq!(from_hall("'-R 3 2 \"'").unwrap().hall_number, 458);
    // a change of basis in parentheses is not a table setting
    assert!(from_hall("-P 1 (1/2*x+1/2*y,1/2*x-1/2*y,-z)").is_none());
    assert!(from_hall("-P 2ac 2x").is_none());
    assert!(from_hall("").is_none());
}

#[test]
fn from_number_gives_the_standard_setting_of_every_number() {
    for n in 1..=230u16 {
        let g = from_number(n).unwrap();
        assert_eq!(g.number, n);
        assert!(g.setting().is_standard());
        // a symbol without suffix names the standard setting
        assert_eq!(
            from_hm(g.setting().hm_short).unwrap().hall_number,
            g.hall_number,
            "{}",
            g.setting().hm_short
        );
        let c = g.setting().choice;
        assert!(
            c.is_empty() || c == "b" || c == "b1" || c == "2" || c == "H",
            "No. {n}: standard setting has choice {c:?}"
        );
    }
    // ITA Vol. A: 24 groups are tabulated with two origin choices, 7 with two axes systems.
    let two_origins = settings().iter().filter(|s| s.choice == "2").count();
    let rhombohedral = settings().iter().filter(|s| s.choice == "R").count();
    assert_eq!((two_origins, rhombohedral), (24, 7));
    assert!(from_number(0).is_none() && from_number(231).is_none());
}

#[test]
fn identify_ignores_order_repeats_and_lattice_translations() {
    let g = from_hm("P n m a").unwrap();
    let mut ops: Vec<SymOp> = g.ops.iter().rev().cloned().collect();
    ops.push(g.ops[3].clone());
    // the same operation shifted by a whole lattice vector
    let mut shifted = g.ops[2].clone();
    shifted.trans.x += 1.0;
    shifted.trans.z -= 2.0;
    ops.push(shifted);
    assert_eq!(identify(&ops).unwrap().hall_number, 292);
    // Pnma written out as in a CIF
    let text = [
        "x,y,z",
        "-x+1/2,-y,z+1/2",
        "-x,y+1/2,-z",
        "x+1/2,-y+1/2,-z+1/2",
        "-x,-y,-z",
        "x+1/2,y,-z+1/2",
        "x,-y+1/2,z",
        "-x+1/2,y+1/2,z+1/2",
    ];
    let ops: Vec<SymOp> = text.iter().map(|s| SymOp::parse_xyz(s).unwrap()).collect();
    assert_eq!(identify(&ops).unwrap().hm, "P n m a");
}

#[test]
fn symbols_carry_the_setting_suffix_where_one_is_needed() {
    assert_eq!(from_number(227).unwrap().hm, "F d -3 m :2");
    assert_eq!(from_hm("R-3m:R").unwrap().hm, "R -3 m :R");
    assert_eq!(from_hm("P 21/n").unwrap().hm, "P 1 21/n 1");
    assert_eq!(from_hm("Pbnm").unwrap().hm, "P b n m");
    assert!(from_number(225).unwrap().is_centrosymmetric());
    assert!(!from_number(216).unwrap().is_centrosymmetric());
    assert_eq!(from_number(230).unwrap().centring(), 'I');
}

/// The value after a tag on the same line, without quotes; None for `?`, `.` or nothing.
fn value_after<'a>(line: &'a str, tags: &[&str]) -> Option<&'a str> {
    let mut words = line.splitn(2, char::is_whitespace);
    let tag = words.next()?;
    if !tags.iter().any(|t| t.eq_ignore_ascii_case(tag)) {
        return None;
    }
    let v = words.next()?.trim();
    let v = v
        .strip_prefix('\'')
        .and_then(|v| v.strip_suffix('\''))
        .or_else(|| v.strip_prefix('"').and_then(|v| v.strip_suffix('"')))
        .unwrap_or(v)
        .trim();
    (!v.is_empty() && v != "?" && v != ".").then_some(v)
}

#[test]
fn symbols_in_the_shared_cif_corpus_resolve_consistently() {
    let dir = concat!(
        concat!(env!("CARGO_MANIFEST_DIR"), "/../.."),
        "/../shared/cif-corpus/inorganic"
    );
    let Ok(entries) = std::fs::read_dir(dir) else {
        eprintln!("note: {dir} not present, corpus symbol check skipped");
        return;
    };
    // Symbols in the corpus that name no table setting, on purpose or by a slip of the file.
    let unresolvable = [
        "X4bm",
        "P?",
        "C -1",
        "A -1",
        "C 1",
        "-C 1",
        "-P 1 (1/2*x+1/2*y,1/2*x-1/2*y,-z)",
    ];
    // Files whose symbol and number contradict each other.
    let inconsistent = [
        "PMN0_36PT_DC4.cif", // 'P m' (No. 6) beside _space_group_IT_number 8 (C m)
    ];
    let (mut seen, mut resolved) = (0, 0);
    let mut problems = Vec::new();
    for e in entries {
        let path = e.unwrap().path();
        let Ok(text) = std::fs::read_to_string(&path) else {
            continue; // not UTF-8: the CIF reader's business
        };
        let (mut hm, mut hall, mut number) = (None, None, None);
        for line in text.lines() {
            if let Some(v) = value_after(
                line,
                &[
                    "_symmetry_space_group_name_H-M",
                    "_space_group_name_H-M_alt",
                ],
            ) {
                hm.get_or_insert(v);
            }
            if let Some(v) = value_after(
                line,
                &["_symmetry_space_group_name_Hall", "_space_group_name_Hall"],
            ) {
                hall.get_or_insert(v);
            }
            if let Some(v) = value_after(
                line,
                &["_symmetry_Int_Tables_number", "_space_group_IT_number"],
            ) {
                number = number.or(v.parse::<u16>().ok());
            }
        }
        let name = path.file_name().unwrap().to_string_lossy().into_owned();
        let by_hm = hm.map(|s| (s, from_hm(s)));
        let by_hall = hall.map(|s| (s, from_hall(s)));
        for (sym, found) in [by_hm.clone(), by_hall.clone()].into_iter().flatten() {
            seen += 1;
            match found {
                Some(g) => {
                    resolved += 1;
                    if let Some(n) = number
                        && n != g.number
                        && !inconsistent.contains(&name.as_str())
                    {
                        problems.push(format!(
                            "{name}: {sym:?} is No. {}, file says {n}",
                            g.number
                        ));
                    }
                }
                None if unresolvable.contains(&sym) => {}
                None => problems.push(format!("{name}: {sym:?} not resolved")),
            }
        }
        if let (Some((h1, Some(a))), Some((h2, Some(b)))) = (by_hm, by_hall)
            && a.number != b.number
        {
            problems.push(format!("{name}: H-M {h1:?} and Hall {h2:?} differ"));
        }
    }
    eprintln!("corpus: {resolved} of {seen} space-group symbols resolved");
    assert!(seen > 100, "too few symbols found ({seen})");
    assert!(problems.is_empty(), "{}", problems.join("\n"));
}
