//! Every file of the shared CIF corpus (real files from the test inputs of the Crystallography
//! Open Database toolkit, structures from the COD and the American Mineralogist Crystal
//! Structure Database; see ../shared/cif-corpus/README.md) either reads or fails with a clear
//! error naming the line, never panics, and finishes in bounded time.
//!
//! The counts printed at the end are a regression floor: they were measured when this test was
//! written and must not fall.

use hopmap::cif;
use hopmap::read::cif::{blocks_with_atoms, structure_from_block};
use std::path::{Path, PathBuf};
use std::sync::mpsc;
use std::time::Duration;

const TIMEOUT: Duration = Duration::from_secs(10);

fn corpus() -> Option<PathBuf> {
    let p = Path::new(concat!(
        concat!(env!("CARGO_MANIFEST_DIR"), "/../.."),
        "/../shared/cif-corpus"
    ));
    p.is_dir().then(|| p.to_path_buf())
}

#[derive(Debug, Default)]
struct Outcome {
    parse_error: Option<String>,
    structures: usize,
    structure_errors: Vec<String>,
    unplaced_errors: Vec<String>,
    /// Stated multiplicities the expansion does not reproduce.
    mismatches: Vec<String>,
    /// (block, positions in the cell counted once per occupant label)
    counts: Vec<(String, usize)>,
}

fn read_one(path: &Path) -> Outcome {
    let bytes = std::fs::read(path).expect("corpus file is readable");
    let name = path.display().to_string();
    let mut out = Outcome::default();
    match cif::parse(&bytes) {
        Err(e) => {
            assert!(e.line >= 1 && e.column >= 1 && !e.message.is_empty());
            out.parse_error = Some(format!("{e}"));
        }
        Ok(doc) => {
            for b in blocks_with_atoms(&doc) {
                match structure_from_block(b, &name) {
                    Ok(s) => {
                        assert!(!s.sites.is_empty());
                        // Where the file states multiplicities, the expansion must agree.
                        for w in &s.warnings {
                            if w.contains("the file gives multiplicity") {
                                out.mismatches.push(format!("{name}: {w}"));
                            }
                        }
                        assert_eq!(s.name, b.name);
                        out.structures += 1;
                        let per_label: usize = s.sites.iter().map(|x| x.occupants.len()).sum();
                        out.counts.push((b.name.clone(), per_label));
                    }
                    Err(e) => {
                        if e.line.is_none() {
                            out.unplaced_errors.push(e.to_string());
                        }
                        out.structure_errors.push(e.to_string());
                    }
                }
            }
        }
    }
    out
}

/// Runs `read_one` in its own thread; `Err` on panic or timeout.
fn guarded(path: PathBuf) -> Result<Outcome, String> {
    let (tx, rx) = mpsc::channel();
    let p = path.clone();
    std::thread::spawn(move || {
        let r = std::panic::catch_unwind(|| read_one(&p));
        let _ = tx.send(r);
    });
    match rx.recv_timeout(TIMEOUT) {
        Ok(Ok(o)) => Ok(o),
        Ok(Err(_)) => Err(format!("{}: panicked", path.display())),
        Err(_) => Err(format!("{}: no result within {TIMEOUT:?}", path.display())),
    }
}

#[derive(Debug, Default)]
struct Tally {
    files: usize,
    parsed: usize,
    parse_errors: usize,
    structures: usize,
    structure_errors: usize,
}

fn run_folder(dir: &Path, verbose: bool, dump: &mut String) -> (Tally, Vec<String>) {
    let mut files: Vec<PathBuf> = std::fs::read_dir(dir)
        .expect("corpus folder")
        .filter_map(|e| e.ok().map(|e| e.path()))
        .filter(|p| p.is_file())
        .collect();
    files.sort();
    let mut t = Tally::default();
    let mut failures = Vec::new();
    for f in files {
        t.files += 1;
        match guarded(f.clone()) {
            Err(e) => failures.push(e),
            Ok(o) => {
                if let Some(e) = &o.parse_error {
                    t.parse_errors += 1;
                    if verbose {
                        println!("  parse error  {}: {e}", f.display());
                    }
                } else {
                    t.parsed += 1;
                }
                t.structures += o.structures;
                for (b, n) in &o.counts {
                    dump.push_str(&format!("{}\t{b}\t{n}\n", f.display()));
                }
                t.structure_errors += o.structure_errors.len();
                if verbose {
                    for e in &o.structure_errors {
                        println!("  no structure {e}");
                    }
                }
                failures.extend(o.mismatches);
                for e in o.unplaced_errors {
                    failures.push(format!("error without a line: {e}"));
                }
            }
        }
    }
    (t, failures)
}

#[test]
fn every_corpus_file_reads_or_fails_clearly() {
    let Some(root) = corpus() else {
        println!("note: ../shared/cif-corpus is missing; corpus test skipped");
        return;
    };
    let verbose = std::env::var_os("HOPMAP_CORPUS_VERBOSE").is_some();
    // (folder, min parsed, min structures): measured floors, see the module doc.
    let floors = [("syntax", 87, 13), ("inorganic", 302, 318)];
    let mut failures = Vec::new();
    // HOPMAP_CORPUS_DUMP=file writes "path<TAB>block<TAB>sites per label" for comparison with
    // an independent reader.
    let mut dump = String::new();
    for (folder, min_parsed, min_structures) in floors {
        let (t, f) = run_folder(&root.join(folder), verbose, &mut dump);
        println!(
            "{folder}: {} files, {} parsed, {} parse errors, {} structures, {} blocks without a structure",
            t.files, t.parsed, t.parse_errors, t.structures, t.structure_errors
        );
        failures.extend(f);
        assert!(
            t.parsed >= min_parsed,
            "{folder}: {} documents parsed, fewer than the floor {min_parsed}",
            t.parsed
        );
        assert!(
            t.structures >= min_structures,
            "{folder}: {} structures read, fewer than the floor {min_structures}",
            t.structures
        );
    }
    if let Some(p) = std::env::var_os("HOPMAP_CORPUS_DUMP") {
        std::fs::write(p, &dump).expect("dump file");
    }
    failures.extend(compare_with_gemmi(&dump));
    assert!(failures.is_empty(), "{}", failures.join("\n"));
}

/// Files where hopmap and gemmi 0.7.5 put a different number of positions in the cell, each
/// checked by hand; everything else must agree.
const GEMMI_DIFFERENCES: &[(&str, &str)] = &[
    // dummy sites (calc flag 'dum', or type X) are left out by hopmap, kept by gemmi
    ("inorganic/1001031.cif", "dummy H1"),
    (
        "inorganic/spacegroup-builder__cif__2013971.cif",
        "dummy Cg1, Cg2",
    ),
    ("inorganic/2000488-reset-limits.cif", "dummy X"),
    // coordinates written as fractions (1/4): gemmi does not read them as numbers
    ("inorganic/1100910-simple-fractions.cif", "fractions"),
    ("inorganic/2011406-xy-simple-fract.cif", "fractions"),
    (
        "inorganic/1011060-graphite-atom-type-symbol.cif",
        "gemmi finds no sites",
    ),
    // gemmi merges images of a site up to a larger distance than MERGE_TOLERANCE (0.05 A):
    // half-occupied split positions ~0.4 A apart (O5 of 01792, V(2) of 1101101, whose file
    // multiplicity agrees with hopmap) and a disordered C60 with unit occupancies
    ("inorganic/AMCSD__2023-11-12__01792.cif", "split O5"),
    (
        "inorganic/cif_fix_values__1101101-enum-notes.cif",
        "split V(2), O(2)",
    ),
    ("inorganic/2104374.cif", "split sites"),
    (
        "inorganic/spacegroup-builder__cif__2102163.cif",
        "disordered C60",
    ),
    (
        "inorganic/spacegroup-builder__cif__2102164.cif",
        "disordered C60",
    ),
    (
        "inorganic/spacegroup-builder__cif__2102165.cif",
        "disordered C60",
    ),
    (
        "inorganic/spacegroup-builder__cif__2102166.cif",
        "disordered C60",
    ),
    (
        "inorganic/spacegroup-builder__cif__2213608.cif",
        "split sites",
    ),
    // hopmap refuses, gemmi guesses: no symmetry given (gemmi takes P1), superspace groups,
    // '?' or missing coordinates (gemmi takes 0), no cell
    (
        "inorganic/2100428-superspacegroup.cif",
        "superspace group X4bm",
    ),
    ("inorganic/sn5033sup1.cif", "superspace, no symmetry"),
    (
        "inorganic/sn5100-superspacegroup.cif",
        "superspace, no symmetry",
    ),
    (
        "inorganic/cif_filter__sg-symop-derivation-from-ssg-symop.cif",
        "no symmetry",
    ),
    (
        "inorganic/cif2cod__calcformula_no_space_group.cif",
        "no symmetry",
    ),
    ("inorganic/6000106-with-cod-text.cif", "coordinates ?"),
    (
        "inorganic/cif_cod_check__missing_atom_fract_yz.cif",
        "no fract_y, fract_z",
    ),
    (
        "inorganic/cif_cod_check__missing_atom_fract_z.cif",
        "no fract_z",
    ),
    (
        "inorganic/cif_filter__item_recognition-cif_core.cif",
        "no cell",
    ),
    ("inorganic/dummy_CIF_Core_2.4.4.cif", "no cell"),
    // partially occupied D (deuterium) positions near special positions
    ("inorganic/9010753-C-D-bond.cif", "split D"),
    ("inorganic/AMCSD__2023-11-12__08254.cif", "split D"),
];

/// Full-cell position counts (per label) against gemmi, an independent CIF library (PyPI),
/// from testdata/cif/gemmi-counts.tsv written by testdata/cif/gemmi_counts.py.
fn compare_with_gemmi(dump: &str) -> Vec<String> {
    let oracle = include_str!("../../../testdata/cif/gemmi-counts.tsv");
    let mine: std::collections::HashMap<(String, String), usize> = dump
        .lines()
        .filter_map(|l| {
            let mut f = l.split('\t');
            let path = f.next()?;
            let rel = path.split("cif-corpus/").nth(1)?.to_string();
            Some(((rel, f.next()?.to_string()), f.next()?.parse().ok()?))
        })
        .collect();
    let mut failures = Vec::new();
    let (mut agree, mut excused) = (0, 0);
    for line in oracle.lines().filter(|l| !l.starts_with('#')) {
        let f: Vec<&str> = line.split('\t').collect();
        let (file, block, n): (&str, &str, usize) = (f[0], f[1], f[2].parse().unwrap());
        let excuse = GEMMI_DIFFERENCES.iter().any(|(g, _)| *g == file);
        match mine.get(&(file.to_string(), block.to_string())) {
            Some(&m) if m == n => agree += 1,
            _ if excuse => excused += 1,
            Some(&m) => failures.push(format!("{file} block {block}: {m} positions, gemmi {n}")),
            None => failures.push(format!(
                "{file} block {block}: no structure, gemmi has {n} positions"
            )),
        }
    }
    println!("gemmi oracle: {agree} blocks agree, {excused} known differences");
    failures
}
