//! The command line on bad inputs and broken batches: a clear error naming the file (exit 1) or
//! the misused option (exit 2), never a panic (exit 101), an abort (134) or a run without end;
//! batch tables that never lose, duplicate or clobber a row. Inputs in `testdata/robust/` (each
//! file's first comment line says what it reproduces).

use std::path::{Path, PathBuf};
use std::process::{Command, Output, Stdio};
use std::time::{Duration, Instant};

fn hopmap_in(dir: Option<&Path>, args: &[&str]) -> Output {
    let mut c = Command::new(env!("CARGO_BIN_EXE_hopmap"));
    c.args(args)
        .env("NO_COLOR", "1")
        .stdout(Stdio::piped())
        .stderr(Stdio::piped());
    if let Some(d) = dir {
        c.current_dir(d);
    }
    let mut child = c.spawn().expect("run hopmap");
    // a guard against runaways, not a speed check: every case here ends in well under a second
    let until = Instant::now() + Duration::from_secs(120);
    loop {
        if child.try_wait().unwrap().is_some() {
            return child.wait_with_output().unwrap();
        }
        if Instant::now() > until {
            let _ = child.kill();
            panic!("hopmap {args:?} did not finish within 120 s");
        }
        std::thread::sleep(Duration::from_millis(20));
    }
}

fn hopmap(args: &[&str]) -> Output {
    hopmap_in(None, args)
}

fn robust(name: &str) -> String {
    format!(
        "{}/../../testdata/robust/{name}",
        env!("CARGO_MANIFEST_DIR")
    )
}

fn reference(name: &str) -> String {
    format!(
        "{}/../../structures/reference/{name}",
        env!("CARGO_MANIFEST_DIR")
    )
}

fn tmp(name: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!("hopmap-robust-{}-{name}", std::process::id()));
    let _ = std::fs::remove_dir_all(&d);
    std::fs::create_dir_all(&d).unwrap();
    d
}

fn stderr(o: &Output) -> String {
    String::from_utf8_lossy(&o.stderr).into_owned()
}

const BAD: &[&str] = &[
    "hall_non_ascii_first.cif",
    "cell_1e7.cif",
    "cell_1e300.cif",
    "cell_flat_angle.cif",
    "cell_thin_c.cif",
    "escape_in_block_name.cif",
    "count_1e10.vasp",
    "count_1e18.vasp",
    "count_wrap.vasp",
    "count_1e10.xyz",
    "count_1e18.xyz",
    "cell_thin.vasp",
    "cell_1e300.xyz",
];

#[test]
fn every_bad_input_is_a_clear_error_in_every_command() {
    for name in BAD {
        for cmd in ["inspect", "valence", "paths"] {
            let o = hopmap(&[cmd, "-q", &robust(name)]);
            let e = stderr(&o);
            assert_eq!(o.status.code(), Some(1), "{cmd} {name}: {e}");
            assert!(e.contains(name), "{cmd} {name}: {e}");
            assert!(
                !e.contains("panicked") && !e.contains('\u{1b}'),
                "{cmd} {name}: {e:?}"
            );
            assert!(o.stdout.is_empty(), "{cmd} {name}: no partial answer");
        }
    }
}

#[test]
fn a_cell_no_grid_can_fit_is_refused_before_allocating() {
    // 1000 A cube: 6.4e10 points at the default 0.25 A (it used to abort allocating 48 GB)
    let o = hopmap(&["paths", "-q", &robust("cell_1000.cif")]);
    let e = stderr(&o);
    assert_eq!(o.status.code(), Some(1), "{e}");
    assert!(
        e.contains("6.40e10 points") && e.contains("too large to analyse"),
        "{e}"
    );
}

#[test]
fn a_unicode_minus_in_a_hall_symbol_is_answered_in_every_command() {
    for cmd in ["inspect", "valence", "paths"] {
        let o = hopmap(&[cmd, "-q", &robust("hall_unicode_minus.cif")]);
        assert!(o.status.success(), "{cmd}: {}", stderr(&o));
    }
}

#[test]
fn physical_options_out_of_range_are_usage_errors() {
    let licl = reference("LiCl_rocksalt.cif");
    for (opt, words) in [
        ("--temperature=-5", "temperature -5 K"),
        ("--diffusivity=-1", "diffusion coefficient -1 m^2/s"),
        ("--site-filling=1.5", "site filling 1.5"),
        ("--site-filling=NaN", "site filling NaN"),
        ("--min-ion-distance=1e6", "minimum ion distance 1000000 A"),
        // the message states the bounds the check applies, for values on either side of 0.01
        (
            "--spacing=0.0100001",
            "grid spacing 0.0100001 A is outside 0.02-2 A",
        ),
        ("--spacing=0.01", "grid spacing 0.01 A is outside 0.02-2 A"),
    ] {
        let o = hopmap(&["paths", "-q", &licl, opt]);
        assert_eq!(o.status.code(), Some(2), "{opt}: {}", stderr(&o));
        assert!(stderr(&o).contains(words), "{opt}: {}", stderr(&o));
    }
}

/// A folder of inputs: three rock salts (structures/reference) and every bad file.
fn batch_folder(d: &Path) -> usize {
    let inp = d.join("in");
    std::fs::create_dir_all(&inp).unwrap();
    for n in ["LiCl_rocksalt.cif", "LiF_rocksalt.cif", "LiBr_rocksalt.cif"] {
        std::fs::copy(reference(n), inp.join(n)).unwrap();
    }
    for n in BAD.iter().chain(&["cell_1000.cif"]) {
        std::fs::copy(robust(n), inp.join(n)).unwrap();
    }
    3 + BAD.len() + 1
}

fn table_rows(p: &Path) -> Vec<String> {
    std::fs::read_to_string(p)
        .unwrap()
        .lines()
        .skip(1)
        .map(String::from)
        .collect()
}

#[test]
fn a_batch_over_every_bad_file_has_one_row_per_file_and_resumes_without_duplicates() {
    let d = tmp("batch");
    let n = batch_folder(&d);
    #[cfg(unix)]
    {
        // a symlink loop and a FIFO named *.cif: the loop is entered once, the FIFO is an
        // error row instead of a batch that waits for ever
        std::os::unix::fs::symlink("..", d.join("in/loop")).unwrap();
        let _ = Command::new("mkfifo").arg(d.join("in/pipe.cif")).status();
    }
    let fifo = d.join("in/pipe.cif").exists() as usize;
    let o = hopmap_in(
        Some(&d),
        &["screen", "-q", "in", "--out", "t.csv", "--spacing", "0.2"],
    );
    assert!(o.status.success(), "{}", stderr(&o));
    let rows = table_rows(&d.join("t.csv"));
    assert_eq!(rows.len(), n + fifo, "{rows:#?}");
    let ok = rows.iter().filter(|r| r.contains(",plausible,")).count();
    assert_eq!(ok, 3, "{rows:#?}");
    // the same folder as ./in: the same jobs, nothing duplicated; only the row over its
    // memory budget (the 1000 A cell) is tried again, and comes out the same
    let o = hopmap_in(
        Some(&d),
        &[
            "screen",
            "in/.",
            "./in",
            "--out",
            "t.csv",
            "--spacing",
            "0.2",
        ],
    );
    assert!(o.status.success(), "{}", stderr(&o));
    assert!(stderr(&o).contains(" 1 computed"), "{}", stderr(&o));
    assert_eq!(table_rows(&d.join("t.csv")), rows);
    // another spacing would mix two runs in one table: refused, the table untouched
    let o = hopmap_in(
        Some(&d),
        &["screen", "-q", "in", "--out", "t.csv", "--spacing", "0.3"],
    );
    assert_eq!(o.status.code(), Some(2));
    assert!(
        stderr(&o).contains("spacing_a: table '0.2', this run '0.3'"),
        "{}",
        stderr(&o)
    );
    assert_eq!(table_rows(&d.join("t.csv")), rows);
    // nothing but the table and its settings record is left beside it
    let mut names: Vec<String> = std::fs::read_dir(&d)
        .unwrap()
        .flatten()
        .map(|e| e.file_name().to_string_lossy().into_owned())
        .collect();
    names.sort();
    assert_eq!(names, ["in", "t.csv", "t.csv.run.json"]);
}

#[test]
fn usage_errors_stop_before_the_batch_and_write_nothing() {
    let d = tmp("usage");
    batch_folder(&d);
    std::fs::write(d.join("broken.toml"), "[knobs\nd0_ev = ").unwrap();
    for args in [
        vec!["--spacing", "0"],
        vec!["--spacing", "NaN"],
        vec!["--params", "broken.toml"],
        vec!["--ion", "Xx"],
        vec!["--time-limit", "0"],
    ] {
        let mut a = vec!["screen", "-q", "in", "--out", "u.csv"];
        a.extend(&args);
        let o = hopmap_in(Some(&d), &a);
        assert_eq!(o.status.code(), Some(2), "{args:?}: {}", stderr(&o));
        assert!(!d.join("u.csv").exists(), "{args:?} wrote a table");
    }
    let o = hopmap_in(Some(&d), &["screen", "-q", "inn", "--out", "u.csv"]);
    assert_eq!(o.status.code(), Some(2));
    assert!(stderr(&o).contains("inn does not exist"), "{}", stderr(&o));
    // x.json is neither CSV nor JSON lines: refused rather than silently written as CSV
    let o = hopmap_in(Some(&d), &["screen", "-q", "in", "--out", "x.json"]);
    assert_eq!(o.status.code(), Some(2));
    assert!(!d.join("x.json").exists());
}

#[test]
fn an_unrelated_file_given_as_out_is_never_overwritten() {
    let d = tmp("clobber");
    batch_folder(&d);
    let cif = std::fs::read(reference("LiCl_rocksalt.cif")).unwrap();
    for (name, bytes) in [
        ("mine.csv", b"sample,mass_g\nA,1.5\n".to_vec()),
        ("s.csv", cif.clone()),
    ] {
        std::fs::write(d.join(name), &bytes).unwrap();
        let o = hopmap_in(Some(&d), &["screen", "-q", "in", "--out", name]);
        assert_eq!(o.status.code(), Some(2), "{}", stderr(&o));
        assert!(
            stderr(&o).contains("is not a hopmap screening table"),
            "{}",
            stderr(&o)
        );
        assert_eq!(std::fs::read(d.join(name)).unwrap(), bytes);
    }
}

#[test]
fn a_second_writer_of_one_table_is_refused() {
    let d = tmp("lock");
    batch_folder(&d);
    // hold the lock as a running screen does
    let lock = std::fs::OpenOptions::new()
        .create(true)
        .truncate(false)
        .write(true)
        .open(d.join(".t.csv.lock"))
        .unwrap();
    lock.try_lock().unwrap();
    let o = hopmap_in(
        Some(&d),
        &["screen", "-q", "in", "--out", "t.csv", "--spacing", "0.3"],
    );
    assert_eq!(o.status.code(), Some(2), "{}", stderr(&o));
    assert!(
        stderr(&o).contains("another hopmap run is writing t.csv"),
        "{}",
        stderr(&o)
    );
    assert!(!d.join("t.csv").exists());
    drop(lock);
}

#[test]
fn merge_refuses_what_is_not_a_screening_table() {
    let d = tmp("merge");
    std::fs::write(d.join("empty.csv"), b"").unwrap();
    std::fs::write(d.join("mine.csv"), b"sample,mass_g\nA,1.5\n").unwrap();
    std::fs::copy(reference("LiCl_rocksalt.cif"), d.join("licl.csv")).unwrap();
    for name in ["empty.csv", "mine.csv", "licl.csv"] {
        let o = hopmap_in(Some(&d), &["merge", "-q", name, "--out", "m.csv"]);
        assert_eq!(o.status.code(), Some(2), "{name}: {}", stderr(&o));
        assert!(!d.join("m.csv").exists(), "{name}");
    }
}

#[test]
fn a_resumed_json_lines_table_keeps_every_digit() {
    let d = tmp("jsonl");
    batch_folder(&d);
    let args = ["screen", "-q", "in", "--out", "t.jsonl", "--spacing", "0.2"];
    assert!(hopmap_in(Some(&d), &args).status.success());
    let first = std::fs::read(d.join("t.jsonl")).unwrap();
    assert!(hopmap_in(Some(&d), &args).status.success());
    assert_eq!(std::fs::read(d.join("t.jsonl")).unwrap(), first);
}

#[test]
fn rows_over_the_time_budget_are_error_rows_and_are_retried_on_resume() {
    let d = tmp("budget");
    let inp = d.join("in");
    std::fs::create_dir_all(&inp).unwrap();
    std::fs::copy(reference("LiCl_rocksalt.cif"), inp.join("LiCl.cif")).unwrap();
    let o = hopmap_in(
        Some(&d),
        &[
            "screen",
            "-q",
            "in",
            "--out",
            "t.csv",
            "--time-limit",
            "0.001",
        ],
    );
    assert!(o.status.success(), "{}", stderr(&o));
    let rows = table_rows(&d.join("t.csv"));
    assert!(
        rows[0].contains("over budget: ") && rows[0].contains("time budget"),
        "{rows:?}"
    );
    let o = hopmap_in(Some(&d), &["screen", "-q", "in", "--out", "t.csv"]);
    assert!(o.status.success(), "{}", stderr(&o));
    let rows = table_rows(&d.join("t.csv"));
    assert_eq!(rows.len(), 1);
    assert!(rows[0].contains(",plausible,"), "{rows:?}");
}

#[test]
fn stale_temporary_files_of_a_killed_run_are_cleared() {
    let d = tmp("stale");
    let inp = d.join("in");
    std::fs::create_dir_all(&inp).unwrap();
    std::fs::copy(reference("LiCl_rocksalt.cif"), inp.join("LiCl.cif")).unwrap();
    std::fs::write(d.join(".t.csv.tmp-99999"), b"half a table").unwrap();
    let o = hopmap_in(
        Some(&d),
        &["screen", "-q", "in", "--out", "t.csv", "--spacing", "0.3"],
    );
    assert!(o.status.success(), "{}", stderr(&o));
    assert!(!d.join(".t.csv.tmp-99999").exists());
}
