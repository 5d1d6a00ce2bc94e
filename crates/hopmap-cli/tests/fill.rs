//! `hopmap fill` as a user meets it: the D(x) curve with error bars and the blocking tables in
//! JSON and HTML, and clear errors for bad input with no partial output file.

use std::path::PathBuf;

mod common;
use common::{hopmap, root};

fn tmp(name: &str) -> PathBuf {
    common::tmp("fill", name)
}

/// Olivine LiFePO4 (the bundled refinement, source in the file): single-file channels along b,
/// whose tracer D falls as they fill, and whose blocking follows the exact 1D law.
#[test]
fn olivine_fills_along_b_and_its_channels_block_by_the_1d_law() {
    let dir = tmp("olivine");
    let html = dir.join("fill.html");
    let o = hopmap(&[
        "-q",
        "fill",
        &root("structures/reference/LiFePO4_olivine.cif"),
        "--ion",
        "Li",
        "--x",
        "0.1,0.5",
        "--runs",
        "4",
        "--hops-per-ion",
        "40",
        "--defects",
        "0.03,0.1",
        "--json",
        "--report",
        html.to_str().unwrap(),
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let j: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    assert_eq!(j["schema"], "hopmap.fill/1");
    let rows = j["fillings"].as_array().unwrap();
    assert_eq!(rows.len(), 2);
    let d = |i: usize| rows[i]["diffusion_m2_s"]["mean"].as_f64().unwrap();
    let e = |i: usize| rows[i]["diffusion_m2_s"]["stderr"].as_f64().unwrap();
    for (i, row) in rows.iter().enumerate() {
        assert!(d(i) > 0.0 && e(i) > 0.0 && e(i) < d(i));
        // along b: y of the orthorhombic cell
        assert!(row["direction_cartesian"][1].as_f64().unwrap().abs() > 0.99);
    }
    // ions in single file slow each other down (the two D differ by many standard errors)
    assert!(
        d(1) + 3.0 * e(1) < d(0) - 3.0 * e(0),
        "{} vs {}",
        d(1),
        d(0)
    );
    let dilute = j["dilute_reference_diffusion_m2_s"].as_f64().unwrap();
    assert!(d(0) < dilute * 1.2);
    let fam = &j["blocking"][0];
    assert_eq!(fam["dimension"], 1);
    assert_eq!(fam["single_file"], true);
    for r in fam["rows"].as_array().unwrap() {
        let mc = r["share_at_particle"]["mean"].as_f64().unwrap();
        let se = r["share_at_particle"]["stderr"].as_f64().unwrap();
        let law = r["law_share_at_particle"].as_f64().unwrap();
        // the chord-averaged law replaces each chord by whole sites: within 1% plus the error
        assert!((mc - law).abs() < 4.0 * se + 0.01, "{mc} +/- {se} vs {law}");
    }
    let page = std::fs::read_to_string(&html).unwrap();
    assert!(page.contains("<svg") && page.contains("Tracer D"));
    assert!(page.contains("not cell design"));
}

#[test]
fn bad_fillings_are_usage_errors_and_bad_files_write_nothing() {
    let o = hopmap(&[
        "fill",
        &root("structures/reference/LiFePO4_olivine.cif"),
        "--x",
        "2:1:0.1",
    ]);
    assert_eq!(o.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&o.stderr).contains("--x"));
    let dir = tmp("bad");
    let html = dir.join("fill.html");
    let o = hopmap(&[
        "fill",
        &root("structures/reference/broken_quote.cif"),
        "--report",
        html.to_str().unwrap(),
    ]);
    assert_eq!(o.status.code(), Some(1));
    assert!(String::from_utf8_lossy(&o.stderr).contains("broken_quote.cif"));
    assert!(!html.exists());
}
