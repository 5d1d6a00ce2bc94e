//! `hopmap neb` and `hopmap populate` as a user meets them: the files written, refusals with
//! the file named, no partial output. Structures: structures/reference (published
//! crystallography, source in each file).

use std::path::{Path, PathBuf};

mod common;
use common::{hopmap, ok, root};

fn tmp(name: &str) -> PathBuf {
    common::tmp("handoff", name)
}

const LFP: &str = "structures/reference/LiFePO4_olivine.cif";

#[test]
fn neb_writes_numbered_poscar_folders_an_xyz_and_a_versioned_json() {
    let d = tmp("neb");
    let out = d.join("lfp");
    let text = ok(&hopmap(&[
        "neb",
        &root(LFP),
        "--ion",
        "Li",
        "--out",
        out.to_str().unwrap(),
        "-q",
    ]));
    assert!(text.contains("vacancy mode"), "{text}");
    assert!(text.contains("3.00 A apart"), "{text}");
    for k in 0..7 {
        let p = out.join(format!("{k:02}")).join("POSCAR");
        let s = std::fs::read_to_string(&p).unwrap();
        let lines: Vec<&str> = s.lines().collect();
        // 1x2x2 olivine with one Li taken out: Li 15 (the moving one first), Fe 16, P 16, O 64
        assert_eq!(
            lines[5].split_whitespace().collect::<Vec<_>>(),
            ["Li", "Fe", "P", "O"]
        );
        assert_eq!(
            lines[6].split_whitespace().collect::<Vec<_>>(),
            ["15", "16", "16", "64"]
        );
        assert_eq!(lines[7], "Direct");
        assert_eq!(lines.len(), 8 + 111);
    }
    assert!(!out.join("07").exists());
    let xyz = std::fs::read_to_string(out.join("images.xyz")).unwrap();
    assert_eq!(xyz.lines().filter(|l| l.trim() == "111").count(), 7);
    let v: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("neb.json")).unwrap()).unwrap();
    assert_eq!(v["schema"], "hopmap.neb/1");
    assert_eq!(
        v["supercell"]["matrix"],
        serde_json::json!([[1, 0, 0], [0, 2, 0], [0, 0, 2]])
    );
    assert_eq!(v["images"].as_array().unwrap().len(), 7);
    assert!(v["bv_profile"].as_array().unwrap().len() > 50);
    assert!(v["mlip"].is_null());
    // no temporary files left behind
    for e in std::fs::read_dir(&out).unwrap() {
        let n = e.unwrap().file_name().into_string().unwrap();
        assert!(!n.starts_with('.'), "left over: {n}");
    }
}

#[test]
fn neb_refusals_name_the_file_and_write_nothing() {
    let d = tmp("refuse");
    let out = d.join("x");
    let o = out.to_str().unwrap();
    let r = hopmap(&["neb", &root(LFP), "--hop", "9999", "--out", o, "-q"]);
    assert_eq!(r.status.code(), Some(1));
    let err = String::from_utf8_lossy(&r.stderr);
    assert!(
        err.contains("LiFePO4_olivine.cif") && err.contains("hop 9999"),
        "{err}"
    );
    let r = hopmap(&[
        "neb",
        &root(LFP),
        "--min-image-distance",
        "4",
        "--out",
        o,
        "-q",
    ]);
    assert_eq!(r.status.code(), Some(1));
    let err = String::from_utf8_lossy(&r.stderr);
    assert!(err.contains("longer than the cell"), "{err}");
    let r = hopmap(&[
        "neb",
        &root("structures/reference/FePO4_olivine.cif"),
        "--mode",
        "vacancy",
        "--out",
        o,
        "-q",
    ]);
    assert_eq!(r.status.code(), Some(1));
    assert!(String::from_utf8_lossy(&r.stderr).contains("vacancy mode"));
    let r = hopmap(&["neb", &root(LFP), "--images", "0", "--out", o, "-q"]);
    assert_eq!(r.status.code(), Some(2));
    // a damaged second-opinion file is named with its line and column
    let bad = d.join("mlip.json");
    std::fs::write(&bad, "{\"schema\": \"hopmap.mlip/1\",\n  \"barrier_ev\": }").unwrap();
    let r = hopmap(&[
        "neb",
        &root(LFP),
        "--mlip-result",
        bad.to_str().unwrap(),
        "--out",
        o,
        "-q",
    ]);
    assert_eq!(r.status.code(), Some(1));
    let err = String::from_utf8_lossy(&r.stderr);
    assert!(err.contains("mlip.json: line 2"), "{err}");
    assert!(!Path::new(o).exists(), "a refused request wrote {o}");
}

#[test]
fn populate_writes_a_cif_that_reads_back_with_the_ions_placed() {
    let d = tmp("populate");
    let stem = d.join("fp");
    let text = ok(&hopmap(&[
        "populate",
        &root("structures/reference/FePO4_olivine.cif"),
        "--ion",
        "Li",
        "--x",
        "1",
        "--out",
        stem.to_str().unwrap(),
        "-q",
    ]));
    assert!(text.contains("4 ions per cell"), "{text}");
    let cif = d.join("fp.cif");
    assert!(d.join("fp.vasp").exists() && d.join("fp.json").exists());
    // re-read by hopmap itself: LiFePO4 again, Z = 4 (Streltsov et al. 1993's formula)
    let o = hopmap(&["inspect", "--json", cif.to_str().unwrap()]);
    let v: serde_json::Value = serde_json::from_str(&ok(&o)).unwrap();
    assert_eq!(v["formula"], "LiFePO4");
    assert_eq!(v["z"], 4.0);
    let j: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(d.join("fp.json")).unwrap()).unwrap();
    assert_eq!(j["schema"], "hopmap.populate/1");
    assert_eq!(j["sites"].as_array().unwrap().len(), 4);
    assert_eq!(j["proven_lowest"], true);
}
