//! The architecture as ARCHITECTURE.md states it, checked against the tree: the crates depend on
//! each other in one direction only, the core knows no terminal, output format or Python, and
//! every path in the code map exists.

use std::collections::BTreeSet;
use std::path::{Path, PathBuf};

fn root() -> PathBuf {
    Path::new(concat!(env!("CARGO_MANIFEST_DIR"), "/../..")).to_path_buf()
}

/// Names in the `[dependencies]` table of a crate's manifest.
fn dependencies(krate: &str) -> BTreeSet<String> {
    let path = root().join("crates").join(krate).join("Cargo.toml");
    let text = std::fs::read_to_string(&path).unwrap();
    let doc: toml::Table = text.parse().unwrap();
    doc.get("dependencies")
        .and_then(|d| d.as_table())
        .map(|t| t.keys().cloned().collect())
        .unwrap_or_default()
}

#[test]
fn crates_depend_one_way() {
    // crate -> the workspace crates it may use (everything to its left in the pipeline)
    let allowed: &[(&str, &[&str])] = &[
        ("hopmap-cif", &[]),
        ("hopmap", &["hopmap-cif"]),
        ("hopmap-plot", &[]),
        ("hopmap-report", &["hopmap", "hopmap-plot"]),
        ("hopmap-cli", &["hopmap", "hopmap-plot", "hopmap-report"]),
        ("hopmap-python", &["hopmap", "hopmap-report"]),
    ];
    let workspace: BTreeSet<&str> = allowed.iter().map(|(c, _)| *c).collect();
    let on_disk: BTreeSet<String> = std::fs::read_dir(root().join("crates"))
        .unwrap()
        .filter_map(|e| e.ok())
        .filter(|e| e.path().join("Cargo.toml").exists())
        .map(|e| e.file_name().to_string_lossy().into_owned())
        .collect();
    assert_eq!(
        on_disk,
        workspace.iter().map(|s| s.to_string()).collect(),
        "a crate was added or removed: place it in the pipeline here and in ARCHITECTURE.md"
    );
    for (krate, ok) in allowed {
        for dep in dependencies(krate) {
            if workspace.contains(dep.as_str()) {
                assert!(
                    ok.contains(&dep.as_str()),
                    "{krate} depends on {dep}, against the direction of the pipeline"
                );
            }
        }
    }
    // the core and the renderers know nothing of the command line, terminals or Python
    for krate in ["hopmap-cif", "hopmap", "hopmap-plot", "hopmap-report"] {
        for banned in ["clap", "indicatif", "console", "pyo3", "numpy"] {
            assert!(
                !dependencies(krate).contains(banned),
                "{krate} must not depend on {banned}"
            );
        }
    }
    // output formats live in the report crate, not in the core
    {
        let banned = "serde_json";
        assert!(!dependencies("hopmap").contains(banned));
    }
}

#[test]
fn every_path_of_the_code_map_exists() {
    let text = std::fs::read_to_string(root().join("ARCHITECTURE.md")).unwrap();
    let start = text.find("## Code map").expect("a code map section");
    let section = &text[start..];
    let end = section[3..].find("\n## ").map_or(section.len(), |i| i + 3);
    let mut checked = 0;
    for line in section[..end].lines().filter(|l| l.starts_with("| `")) {
        let first_cell = line.split('|').nth(1).unwrap();
        for path in first_cell.split('`').skip(1).step_by(2) {
            assert!(
                root().join(path).exists(),
                "ARCHITECTURE.md names {path}, which is not in the tree"
            );
            checked += 1;
        }
    }
    assert!(checked >= 20, "only {checked} paths found in the code map");
}
