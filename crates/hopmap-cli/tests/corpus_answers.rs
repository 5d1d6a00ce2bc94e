//! Every real inorganic structure of the shared corpus that describes a crystal with cations
//! and anions gets an answer: no refusals, warnings allowed (../shared/cif-corpus/inorganic,
//! real files from the Crystallography Open Database toolkit's tests; skipped with a note when
//! ../shared is absent).
//!
//! Which files must be answered ("eligible"):
//! - the file reads to a structure (files with broken syntax, no cell, no coordinates or a
//!   modulated superspace description are not three-dimensional crystals to analyse; they have
//!   their own tests in tests/cif_corpus.rs);
//! - it is inorganic: not a carbon compound with hydrogen (molecular and metal-organic
//!   crystals are left out; they are answered too, but the screen's site network is slow on
//!   cells of thousands of atoms);
//! - it has cations and anions: oxidation states in the file of both signs, or, where the file
//!   gives none, an element of the usual anion list (O, S, Se, Te, F, Cl, Br, I, N, P, As, H)
//!   beside at least one other element (which may be on the list too and act as the cation:
//!   As in AsI3, N and P in NH4H2PO4). Intermetallics and elements (graphite, NaPb, MgB2, test
//!   stubs holding only H) and files declaring every atom neutral (Fe0 P0) are not eligible.
//!
//! The analysis runs at a coarse 0.5 A grid, percolation only, to keep the test quick: the
//! question here is whether an answer comes, not its precision.

use hopmap::analysis::{AnalysisOptions, analyse};
use hopmap::element::Element;
use hopmap::structure::Structure;
use rayon::prelude::*;
use std::path::{Path, PathBuf};

const SPACING_A: f64 = 0.5;

fn corpus() -> Option<PathBuf> {
    let p = Path::new(concat!(env!("CARGO_MANIFEST_DIR"), "/../.."))
        .join("../shared/cif-corpus/inorganic");
    p.is_dir().then_some(p)
}

fn files() -> Option<Vec<PathBuf>> {
    let dir = corpus()?;
    let mut v: Vec<PathBuf> = std::fs::read_dir(dir)
        .ok()?
        .filter_map(|e| e.ok().map(|e| e.path()))
        .filter(|p| p.is_file())
        .collect();
    v.sort();
    Some(v)
}

/// Why a structure need not be answered, or None when it must be.
fn not_eligible(s: &Structure) -> Option<&'static str> {
    let comp = s.cell_composition();
    let has = |sym: &str| comp.keys().any(|e| e.symbol() == sym);
    if has("C") && has("H") {
        return Some("organic or metal-organic");
    }
    let states: Vec<f64> = s
        .sites
        .iter()
        .flat_map(|x| &x.occupants)
        .filter_map(|o| o.species.oxidation)
        .collect();
    let all_given = s
        .sites
        .iter()
        .all(|x| x.occupants.iter().all(|o| o.species.oxidation.is_some()));
    if all_given {
        let cation = states.iter().any(|q| *q > 0.0);
        let anion = states.iter().any(|q| *q < 0.0);
        return (!(cation && anion)).then_some("the file's states give no cation-anion pair");
    }
    let anion = comp.keys().any(Element::is_usual_anion);
    (!(anion && comp.len() >= 2)).then_some("no anion-list element beside another element")
}

enum Outcome {
    Unreadable,
    NotEligible(&'static str),
    Answered { warnings: usize },
    Refused(String),
}

fn run_one(path: &Path) -> Outcome {
    let Ok(s) = hopmap::read::read_structure(path, None) else {
        return Outcome::Unreadable;
    };
    if let Some(why) = not_eligible(&s) {
        return Outcome::NotEligible(why);
    }
    let mut o = AnalysisOptions::new(Element::from_symbol("Li").unwrap());
    o.spacing_a = Some(SPACING_A);
    o.percolation_only = true;
    match analyse(&s, &o) {
        Ok(a) => Outcome::Answered {
            warnings: a.warnings.len(),
        },
        Err(e) => Outcome::Refused(e.to_string()),
    }
}

/// The eligible files, for the screening check below.
fn eligible(files: &[PathBuf]) -> Vec<PathBuf> {
    files
        .iter()
        .filter(|p| {
            hopmap::read::read_structure(p, None)
                .ok()
                .is_some_and(|s| not_eligible(&s).is_none())
        })
        .cloned()
        .collect()
}

#[test]
fn every_eligible_corpus_structure_is_answered() {
    let Some(files) = files() else {
        eprintln!("skipped: ../shared/cif-corpus is not here");
        return;
    };
    let outcomes: Vec<(PathBuf, Outcome)> =
        files.par_iter().map(|p| (p.clone(), run_one(p))).collect();
    let (mut unreadable, mut skipped, mut answered, mut with_warnings) = (0, 0, 0, 0);
    let mut refused = Vec::new();
    let mut reasons: std::collections::BTreeMap<&str, usize> = Default::default();
    for (p, o) in &outcomes {
        match o {
            Outcome::Unreadable => unreadable += 1,
            Outcome::NotEligible(why) => {
                skipped += 1;
                *reasons.entry(why).or_default() += 1;
            }
            Outcome::Answered { warnings } => {
                answered += 1;
                if *warnings > 0 {
                    with_warnings += 1;
                }
            }
            Outcome::Refused(e) => refused.push(format!("{}: {e}", p.display())),
        }
    }
    println!(
        "{} files: {unreadable} unreadable, {skipped} not eligible {reasons:?}, {answered} \
         answered ({with_warnings} with warnings), {} refused",
        files.len(),
        refused.len()
    );
    assert!(refused.is_empty(), "refused:\n{}", refused.join("\n"));
    // a floor, so that a reader change that loses files shows up here
    assert!(answered >= 150, "only {answered} files answered");
}

/// The screening table has a result row for every eligible file: `hopmap screen` on the
/// eligible files, every row with a dimension and no error.
#[test]
fn the_screening_table_has_a_result_row_for_every_eligible_file() {
    let Some(files) = files() else {
        eprintln!("skipped: ../shared/cif-corpus is not here");
        return;
    };
    let chosen = eligible(&files);
    let out = Path::new(env!("CARGO_TARGET_TMPDIR")).join("corpus_screen.csv");
    let _ = std::fs::remove_file(&out);
    let mut cmd = std::process::Command::new(env!("CARGO_BIN_EXE_hopmap"));
    cmd.args([
        "screen",
        "--quiet",
        "--spacing",
        &SPACING_A.to_string(),
        "--out",
    ])
    .arg(&out)
    .args(&chosen);
    let o = cmd.output().expect("run hopmap screen");
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let text = std::fs::read_to_string(&out).unwrap();
    let mut lines = text.lines();
    let header = hopmap::csv_record::split_csv_record(lines.next().unwrap()).unwrap();
    let col = |n: &str| header.iter().position(|h| h == n).unwrap();
    let (f, d, e) = (col("file"), col("dimension"), col("error"));
    let rows: Vec<Vec<String>> = lines
        .map(|l| hopmap::csv_record::split_csv_record(l).unwrap())
        .collect();
    assert_eq!(rows.len(), chosen.len());
    let bad: Vec<String> = rows
        .iter()
        .filter(|r| !r[e].is_empty() || r[d].is_empty())
        .map(|r| format!("{}: {}", r[f], r[e]))
        .collect();
    assert!(bad.is_empty(), "rows without a result:\n{}", bad.join("\n"));
    println!(
        "{} eligible files, {} result rows",
        chosen.len(),
        rows.len()
    );
}
