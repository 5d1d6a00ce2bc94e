//! Helpers shared by the command-line tests: run the built binary, find repository files, make
//! a fresh scratch folder, insist on success.
#![allow(dead_code)]

use std::path::PathBuf;
use std::process::{Command, Output};

/// Runs the `hopmap` binary of this build, colours off.
pub fn hopmap(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_hopmap"))
        .args(args)
        .env("NO_COLOR", "1")
        .output()
        .expect("run hopmap")
}

/// A path inside the repository.
pub fn root(p: &str) -> String {
    format!("{}/{p}", concat!(env!("CARGO_MANIFEST_DIR"), "/../.."))
}

/// An empty scratch folder for one test, `hopmap-<tag>-<pid>-<name>` in the temporary folder.
pub fn tmp(tag: &str, name: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!("hopmap-{tag}-{}-{name}", std::process::id()));
    let _ = std::fs::remove_dir_all(&d);
    std::fs::create_dir_all(&d).unwrap();
    d
}

/// Stdout of a run that must have succeeded (stderr shown when it did not).
pub fn ok(o: &Output) -> String {
    assert!(
        o.status.success(),
        "hopmap failed: {}",
        String::from_utf8_lossy(&o.stderr)
    );
    String::from_utf8_lossy(&o.stdout).into_owned()
}

/// Runs `script` with the Python of `HOPMAP_PYTHON` (a venv with the general-purpose libraries
/// the cross-checks use: gemmi, PyCifRW, pymatgen, ...) and `args` as `sys.argv[1:]`, and
/// returns its stdout; None, with a note, when `HOPMAP_PYTHON` is not set (`.ci/run` sets it).
pub fn python_oracle(script: &str, args: &[&std::path::Path], needs: &str) -> Option<String> {
    let Ok(python) = std::env::var("HOPMAP_PYTHON") else {
        eprintln!("skipped: set HOPMAP_PYTHON to a python with {needs}");
        return None;
    };
    let o = Command::new(&python)
        .arg("-c")
        .arg(script)
        .args(args)
        .output()
        .expect("HOPMAP_PYTHON must run");
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    Some(String::from_utf8_lossy(&o.stdout).into_owned())
}
