//! The reading path on mutated real files, on stable Rust in every test run: bounded,
//! deterministic, and aimed at what broke before (absurd numbers, typographic characters,
//! control codes, huge counts, lines lost or repeated). Every mutant must give a structure or an
//! error naming the file, never a panic; a structure that is read must respect the limits. The
//! unbounded counterpart is the cargo-fuzz targets in `fuzz/`.
//!
//! Seeds: rock-salt LiCl and olivine LiFePO4 from `structures/reference` (published
//! crystallography, sources in the files), the LiCoO2 and LiNiO2 POSCARs of `testdata/cathodes`,
//! and an extended XYZ of rock-salt LiCl written here (a = 5.1295 A, as in LiCl_rocksalt.cif).

use hopmap::limits;
use hopmap::read::{cif, poscar, xyz};
use std::panic::{AssertUnwindSafe, catch_unwind};

/// xorshift64*: a small deterministic generator, so a failure is reproducible by its number.
struct Rng(u64);
impl Rng {
    fn next(&mut self) -> u64 {
        self.0 ^= self.0 >> 12;
        self.0 ^= self.0 << 25;
        self.0 ^= self.0 >> 27;
        self.0.wrapping_mul(0x2545F4914F6CDD1D)
    }
    fn below(&mut self, n: usize) -> usize {
        (self.next() % n.max(1) as u64) as usize
    }
}

const NUMBERS: &[&str] = &[
    "1e300",
    "-1e300",
    "1e-300",
    "NaN",
    "inf",
    "18446744073709551615",
    "99999999999999999999",
    "10000000000",
    "0",
    "-0",
    "179.999",
    "1e7",
    "1e-5",
    "\u{2212}0.5",
    "0.5(\u{2013}3)",
    "-",
    "1/0",
];
const CHARS: &[&str] = &[
    "\u{2212}",
    "\u{2013}",
    "\u{e9}",
    "\u{1b}[2J",
    "\0",
    "\u{feff}",
    "'",
    "\"",
    ";",
    "_",
    "#",
    " ",
    "\t",
    "\r",
];

fn mutate(text: &str, rng: &mut Rng) -> String {
    let mut lines: Vec<String> = text.lines().map(String::from).collect();
    for _ in 0..1 + rng.below(3) {
        if lines.is_empty() {
            break;
        }
        let i = rng.below(lines.len());
        match rng.below(5) {
            0 => {
                // a number-looking word replaced by an absurd one
                let words: Vec<String> = lines[i].split(' ').map(String::from).collect();
                let numeric: Vec<usize> = (0..words.len())
                    .filter(|&k| {
                        words[k]
                            .chars()
                            .next()
                            .is_some_and(|c| c.is_ascii_digit() || c == '-' || c == '.')
                    })
                    .collect();
                if let Some(&k) = numeric.get(rng.below(numeric.len().max(1))) {
                    let mut w = words.clone();
                    w[k] = NUMBERS[rng.below(NUMBERS.len())].to_string();
                    lines[i] = w.join(" ");
                }
            }
            1 => {
                // a character inserted at a character boundary
                let l = &lines[i];
                let cut: Vec<usize> = l.char_indices().map(|(b, _)| b).chain([l.len()]).collect();
                let at = cut[rng.below(cut.len())];
                lines[i] = format!("{}{}{}", &l[..at], CHARS[rng.below(CHARS.len())], &l[at..]);
            }
            2 => {
                lines.remove(i);
            }
            3 => {
                let l = lines[i].clone();
                for _ in 0..1 + rng.below(200) {
                    lines.insert(i, l.clone());
                }
            }
            _ => lines.truncate(i),
        }
    }
    lines.join("\n") + "\n"
}

fn seed(path: &str) -> String {
    std::fs::read_to_string(format!("{}/../../{path}", env!("CARGO_MANIFEST_DIR"))).unwrap()
}

/// Reads a mutant; a panic fails the test with the mutant written out for a regression file.
fn read_mutant(kind: &str, text: &str, case: usize) {
    let result = catch_unwind(AssertUnwindSafe(|| match kind {
        "cif" => match hopmap::cif::parse(text.as_bytes()) {
            Err(_) => vec![],
            Ok(doc) => cif::blocks_with_atoms(&doc)
                .into_iter()
                .map(|b| cif::structure_from_block(b, "mutant.cif"))
                .collect(),
        },
        "vasp" => vec![poscar::parse_poscar(text, "mutant.vasp", "mutant")],
        _ => vec![xyz::parse_extxyz(text, "mutant.xyz", "mutant")],
    }));
    match result {
        Err(_) => {
            let out = std::env::temp_dir().join(format!("hopmap-mutant-{kind}-{case}.{kind}"));
            std::fs::write(&out, text).unwrap();
            panic!(
                "mutant {case} of a {kind} file panicked; kept as {}",
                out.display()
            );
        }
        Ok(v) => {
            for r in v {
                match r {
                    Ok(s) => {
                        assert!(s.sites.len() <= limits::MAX_ATOMS, "case {case}");
                        assert!(limits::check_lattice(&s.lattice).is_ok(), "case {case}");
                    }
                    Err(e) => assert!(e.to_string().starts_with("mutant."), "{e}"),
                }
            }
        }
    }
}

#[test]
fn mutated_structure_files_give_a_structure_or_an_error_never_a_panic() {
    let xyz_licl = "8\nLattice=\"5.1295 0 0 0 5.1295 0 0 0 5.1295\" Properties=species:S:1:pos:R:3\n\
        Li 0 0 0\nLi 0 2.56475 2.56475\nLi 2.56475 0 2.56475\nLi 2.56475 2.56475 0\n\
        Cl 2.56475 2.56475 2.56475\nCl 2.56475 0 0\nCl 0 2.56475 0\nCl 0 0 2.56475\n";
    let seeds: Vec<(&str, String)> = vec![
        ("cif", seed("structures/reference/LiCl_rocksalt.cif")),
        ("cif", seed("structures/reference/LiFePO4_olivine.cif")),
        ("vasp", seed("testdata/cathodes/LiCoO2_primitive.vasp")),
        ("vasp", seed("testdata/cathodes/LiNiO2_primitive.vasp")),
        ("xyz", xyz_licl.to_string()),
    ];
    let mut rng = Rng(0x9E3779B97F4A7C15);
    let mut case = 0;
    for (kind, text) in &seeds {
        // the seed itself reads
        read_mutant(kind, text, usize::MAX);
        for _ in 0..400 {
            case += 1;
            let m = mutate(text, &mut rng);
            read_mutant(kind, &m, case);
        }
    }
    assert_eq!(case, 2000);
}
