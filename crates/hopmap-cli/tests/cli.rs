//! The command line as a user meets it: answers on stdout, errors on stderr naming the file and
//! the place, exit codes 1 (analysis failed) and 2 (usage), no partial output files.

use std::path::{Path, PathBuf};
use std::process::Output;

mod common;
use common::{hopmap, root};

fn tmp(name: &str) -> PathBuf {
    common::tmp("cli", name)
}

fn json(o: &Output) -> serde_json::Value {
    assert!(
        o.status.success(),
        "hopmap failed: {}",
        String::from_utf8_lossy(&o.stderr)
    );
    serde_json::from_slice(&o.stdout).expect("stdout is JSON")
}

#[test]
fn inspect_reports_olivine_as_published() {
    // LiFePO4, Pnma (No. 62), Z = 4, 28 atoms in the cell: Streltsov et al., Acta Cryst. B49
    // (1993) 147 (the cell of structures/reference/LiFePO4_olivine.cif).
    let v = json(&hopmap(&[
        "inspect",
        "--json",
        &root("structures/reference/LiFePO4_olivine.cif"),
    ]));
    assert_eq!(v["formula"], "LiFePO4");
    assert_eq!(v["z"], 4.0);
    assert_eq!(v["space_group"]["number"], 62);
    assert_eq!(v["positions_in_cell"], 28);
    let vol = v["cell"]["volume"].as_f64().unwrap();
    assert!(
        (vol - 10.332 * 6.010 * 4.692).abs() < 0.01,
        "volume {vol} A^3"
    );
    assert_eq!(v["composition"]["O"], 16.0);
}

#[test]
fn olivine_conducts_in_one_dimension_along_b() {
    // Olivine LiFePO4: 1D channels along b (fact of the field; science notes section 6;
    // Morgan, Van der Ven & Ceder, Electrochem. Solid-State Lett. 7 (2004) A30).
    let v = json(&hopmap(&[
        "paths",
        "--json",
        "--quiet",
        &root("structures/reference/LiFePO4_olivine.cif"),
    ]));
    assert_eq!(v["schema"], "hopmap.paths/1");
    assert_eq!(v["ion"]["element"], "Li");
    let ch = v["channels"].as_array().unwrap();
    assert_eq!(ch[0]["dimension"], 1);
    assert_eq!(ch[0]["directions"][0], "[010]");
    let b = ch[0]["barrier_ev"].as_f64().unwrap();
    // published 0.27 eV (DFT, Morgan et al. 2004) to 0.55 eV (atomistic, Islam et al.,
    // Chem. Mater. 17 (2005) 5085), widened by 0.15 eV
    assert!((0.12..=0.70).contains(&b), "barrier {b} eV");
    assert_eq!(v["site_graph_agrees"], true);
    for key in [
        "sites",
        "hops",
        "parameters",
        "warnings",
        "profiles",
        "transport",
        "capacity",
        "cautions",
    ] {
        assert!(v.get(key).is_some(), "JSON lacks '{key}'");
    }
    assert!(!v["sites"].as_array().unwrap().is_empty());
    assert!(
        v["parameters"]["pairs"]
            .as_array()
            .unwrap()
            .iter()
            .any(|p| p["pair"].as_str().unwrap().starts_with("Li"))
    );
    let text = String::from_utf8(
        hopmap(&[
            "paths",
            "--quiet",
            &root("structures/reference/LiFePO4_olivine.cif"),
        ])
        .stdout,
    )
    .unwrap();
    assert!(
        text.starts_with("Li: 1D channels along [010], barrier"),
        "{text}"
    );
}

#[test]
fn a_broken_file_is_an_error_naming_file_line_and_column() {
    let o = hopmap(&["inspect", &root("testdata/broken_quote.cif")]);
    assert_eq!(o.status.code(), Some(1));
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(err.contains("broken_quote.cif:8:"), "{err}");
    assert!(o.stdout.is_empty());
}

#[test]
fn usage_errors_exit_with_code_2() {
    let o = hopmap(&[
        "paths",
        "--ion",
        "Xx",
        &root("structures/reference/TiO2_rutile.cif"),
    ]);
    assert_eq!(o.status.code(), Some(2));
    let o = hopmap(&[
        "paths",
        "--spacing",
        "-1",
        &root("structures/reference/TiO2_rutile.cif"),
    ]);
    assert_eq!(o.status.code(), Some(2));
    let o = hopmap(&["frobnicate"]);
    assert_eq!(o.status.code(), Some(2));
}

#[test]
fn a_missing_file_is_named() {
    let o = hopmap(&["paths", "/nonexistent/x.cif"]);
    assert_eq!(o.status.code(), Some(1));
    assert!(String::from_utf8_lossy(&o.stderr).contains("/nonexistent/x.cif"));
}

#[test]
fn valence_check_of_rutile_is_plausible() {
    // rutile TiO2 (Burdett et al., J. Am. Chem. Soc. 109 (1987) 3639): Ti4+ and O2- recovered
    let v = json(&hopmap(&[
        "valence",
        "--json",
        &root("structures/reference/TiO2_rutile.cif"),
    ]));
    assert_eq!(v["schema"], "hopmap.valence/1");
    let gii = v["gii_vu"].as_f64().unwrap();
    assert!(gii < 0.2, "GII {gii} v.u.");
    let ti = v["ions"]
        .as_array()
        .unwrap()
        .iter()
        .find(|i| i["species"] == "Ti4+")
        .unwrap();
    assert!((ti["bvs_vu"].as_f64().unwrap() - 4.0).abs() < 0.25);
}

#[test]
fn grid_writes_cube_xsf_and_npy_files() {
    let d = tmp("grid");
    let o = hopmap(&[
        "grid",
        "--quiet",
        "--spacing",
        "0.25",
        "--out",
        d.to_str().unwrap(),
        &root("structures/reference/TiO2_rutile.cif"),
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let names: Vec<String> = std::fs::read_dir(&d)
        .unwrap()
        .map(|e| e.unwrap().file_name().into_string().unwrap())
        .collect();
    for ext in ["cube", "xsf", "npy"] {
        for field in ["energy", "mismatch"] {
            assert!(
                names.iter().any(|n| n.ends_with(&format!("{field}.{ext}"))),
                "{names:?}"
            );
        }
    }
    assert!(
        !names.iter().any(|n| n.contains(".tmp")),
        "temporary files left: {names:?}"
    );
    let text = String::from_utf8_lossy(&o.stdout);
    assert!(
        text.contains(" A") && text.contains("eV") && text.contains("v.u."),
        "{text}"
    );
}

fn rows(p: &Path) -> Vec<String> {
    let mut r: Vec<String> = std::fs::read_to_string(p)
        .unwrap()
        .lines()
        .skip(1)
        .map(String::from)
        .collect();
    r.sort();
    r
}

#[test]
fn screening_shards_merge_to_the_unsharded_run_and_bad_files_become_rows() {
    let d = tmp("screen");
    let inputs = d.join("in");
    std::fs::create_dir_all(&inputs).unwrap();
    for f in [
        "TiO2_rutile.cif",
        "NbO2F_ReO3type.cif",
        "MnO2_hollandite.cif",
    ] {
        std::fs::copy(root(&format!("structures/reference/{f}")), inputs.join(f)).unwrap();
    }
    std::fs::copy(
        root("testdata/broken_quote.cif"),
        inputs.join("broken_quote.cif"),
    )
    .unwrap();
    let all = d.join("all.csv");
    let o = hopmap(&[
        "screen",
        "--quiet",
        "--ion",
        "Li,Na",
        "--spacing",
        "0.25",
        inputs.to_str().unwrap(),
        "--out",
        all.to_str().unwrap(),
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let single = rows(&all);
    assert_eq!(single.len(), 8, "4 files x 2 ions");
    assert_eq!(
        single
            .iter()
            .filter(|r| r.contains("broken_quote.cif:8:"))
            .count(),
        2,
        "{single:?}"
    );
    let mut parts = vec![];
    for k in 1..=3 {
        let p = d.join(format!("part{k}.csv"));
        let shard = format!("{k}/3");
        let o = hopmap(&[
            "screen",
            "--quiet",
            "--ion",
            "Li,Na",
            "--spacing",
            "0.25",
            "--shard",
            &shard,
            inputs.to_str().unwrap(),
            "--out",
            p.to_str().unwrap(),
        ]);
        assert!(o.status.success());
        parts.push(p);
    }
    let merged = d.join("merged.csv");
    let mut args = vec!["merge", "--quiet", "--out", merged.to_str().unwrap()];
    args.extend(parts.iter().map(|p| p.to_str().unwrap()));
    assert!(hopmap(&args).status.success());
    assert_eq!(rows(&merged), single);
    // a rerun resumes: nothing left to compute
    let o = hopmap(&[
        "screen",
        "--ion",
        "Li,Na",
        "--spacing",
        "0.25",
        inputs.to_str().unwrap(),
        "--out",
        all.to_str().unwrap(),
    ]);
    assert!(
        String::from_utf8_lossy(&o.stderr).contains("0 computed"),
        "{}",
        String::from_utf8_lossy(&o.stderr)
    );
}

#[test]
fn substitution_screens_a_doping_series_without_editing_files() {
    // a quarter of the Ti of rutile replaced by Sn on the same site: Ti0.75Sn0.25O2
    let out = tmp("sub").join("s.jsonl");
    let v = hopmap(&[
        "screen",
        "--quiet",
        "--spacing",
        "0.25",
        "--substitute",
        "Ti=Ti:0.75,Sn:0.25",
        &root("structures/reference/TiO2_rutile.cif"),
        "--out",
        out.to_str().unwrap(),
    ]);
    assert!(v.status.success(), "{}", String::from_utf8_lossy(&v.stderr));
    let line = std::fs::read_to_string(&out).unwrap();
    let row: serde_json::Value = serde_json::from_str(line.lines().next().unwrap()).unwrap();
    assert_eq!(row["error"], "", "{row}");
    // a solid solution is written on the host's formula unit, Z = 2 kept whole
    assert_eq!(row["formula"], "Ti0.75Sn0.25O2", "{row}");
    // the lowest channel is still the tunnel along c; the 1D barrier opens first
    assert_eq!(row["direction"], "[001]", "{row}");
    assert!(
        row["barrier_1d_ev"].as_f64().unwrap() < row["barrier_3d_ev"].as_f64().unwrap(),
        "{row}"
    );
    let bad = hopmap(&[
        "screen",
        "--quiet",
        "--substitute",
        "Ti=Ti:0.5",
        &root("structures/reference/TiO2_rutile.cif"),
        "--out",
        out.to_str().unwrap(),
    ]);
    assert_eq!(
        bad.status.code(),
        Some(2),
        "fractions not summing to 1 are a usage error"
    );
}

/// An empty host (rutile TiO2, no Li in the file) takes Li in as far as its cations can be
/// reduced: Ti4+ -> Ti3+, one electron per TiO2, 335.6 mAh/g (x F / (3.6 M), M = 79.866 g/mol:
/// arithmetic), said with its couple instead of 0 mAh/g; `--inserted 1` sets the same amount by
/// hand.
#[test]
fn an_empty_host_gets_the_insertion_bound_of_its_redox_couple() {
    let file = root("structures/reference/TiO2_rutile.cif");
    let out = hopmap(&["paths", "--quiet", &file, "--ion", "Li"]);
    assert!(out.status.success());
    let text = String::from_utf8(out.stdout).unwrap();
    let line = text
        .lines()
        .find(|l| l.trim_start().starts_with("capacity:"))
        .expect("a capacity line");
    assert!(
        line.contains("redox bound 336 mAh/g, 1 e per TiO2 on insertion of Li, Ti4+/Ti3+"),
        "{line}"
    );
    assert!(!line.contains("0.0 mAh/g"), "{line}");
    let out = hopmap(&["paths", "--quiet", &file, "--ion", "Li", "--inserted", "1"]);
    let text = String::from_utf8(out.stdout).unwrap();
    let line = text
        .lines()
        .find(|l| l.trim_start().starts_with("capacity:"))
        .expect("a capacity line");
    assert!(
        line.contains("redox bound 336 mAh/g, 1 e per TiO2 as set"),
        "{line}"
    );
}
