//! `hopmap family`: one command over several frameworks writes the HTML page, the JSON document
//! and the ranked CSV table, each whole; a member that fails is a row with its error and the rest
//! is answered.
//!
//! Members are reference structures (structures/reference, sources in each file): TiNb2O7 (a
//! model of the published 3 x 3 block topology and cell), hexagonal WO3 and rutile TiO2. Facts
//! checked: Li+ runs down the TiNb2O7 tunnels along b and crossing the shear planes costs more
//! (common practice, no single source); the hexagonal tunnels of WO3 run along c (common
//! practice). The SVG figures are parsed with roxmltree (an independent XML parser from
//! crates.io); the table with the csv crate.

mod common;
use common::{hopmap, ok, root, tmp};
use std::path::Path;

const SVG_NS: &str = "http://www.w3.org/2000/svg";

fn members() -> Vec<String> {
    vec![
        format!("3x3={}", root("structures/reference/TiNb2O7_block.cif")),
        format!("h-WO3={}", root("structures/reference/WO3_hexagonal.cif")),
        root("structures/reference/TiO2_rutile.cif"),
        "gone=no/such/framework.cif".to_string(),
        "odd=block:3x9:ribbon:Nb".to_string(),
    ]
}

fn run_family(dir: &Path, extra: &[&str]) -> std::process::Output {
    let m = members();
    let mut args: Vec<&str> = vec!["family", "--quiet"];
    args.extend(m.iter().map(String::as_str));
    args.extend(["--spacing", "0.15", "--out", dir.to_str().unwrap()]);
    args.extend(extra);
    hopmap(&args)
}

/// No temporaries of the atomic writes are left behind.
fn no_temporaries(dir: &Path) {
    for e in std::fs::read_dir(dir).unwrap() {
        let name = e.unwrap().file_name().to_string_lossy().into_owned();
        assert!(
            name.starts_with("family.") || name.starts_with("member-"),
            "stray file {name}"
        );
    }
}

#[test]
fn one_command_answers_every_member_that_can_be_answered() {
    let dir = tmp("family", "answers");
    let o = run_family(&dir, &["--json"]);
    let stdout = ok(&o);
    let doc: serde_json::Value = serde_json::from_str(&stdout).expect("JSON on stdout");
    let on_disk: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.join("family.json")).unwrap()).unwrap();
    assert_eq!(doc, on_disk);
    assert_eq!(doc["schema"], "hopmap.family/1");
    assert_eq!(doc["ion"], "Li");
    assert_eq!(doc["c_rates"], serde_json::json!([10.0, 60.0]));
    let ms = doc["members"].as_array().unwrap();
    assert_eq!(ms.len(), 5);
    // three answered, ranked by barrier; then the two failures, in the order given
    let barriers: Vec<f64> = ms[..3]
        .iter()
        .map(|m| m["tunnel"]["barrier_ev"].as_f64().unwrap())
        .collect();
    assert!(barriers.windows(2).all(|w| w[0] <= w[1]), "{barriers:?}");
    for (k, m) in ms[..3].iter().enumerate() {
        assert_eq!(m["rank"], k + 1);
        assert!(m["error"].is_null());
        assert!(dir.join(m["report"].as_str().unwrap()).is_file());
        assert!(m["capacity"]["redox_mah_g"].as_f64().unwrap() > 0.0);
        assert!(m["capacity"]["redox_mah_cm3"].as_f64().unwrap() > 0.0);
        assert_eq!(m["particles"].as_array().unwrap().len(), 2);
    }
    let by = |l: &str| ms.iter().find(|m| m["label"] == l).unwrap();
    let tno = by("3x3");
    assert_eq!(tno["kind"], "block");
    assert_eq!(tno["block"]["octahedra"], 9);
    assert_eq!(tno["tunnel"]["dimension"], 1);
    assert_eq!(tno["tunnel"]["directions"], serde_json::json!(["[010]"]));
    assert_eq!(tno["crossing"]["status"], "opens");
    assert!(tno["crossing"]["cost_ev"].as_f64().unwrap() >= 0.3);
    assert_eq!(
        by("h-WO3")["tunnel"]["directions"],
        serde_json::json!(["[001]"])
    );
    // the rutile member takes its label from the file name
    assert_eq!(by("TiO2_rutile")["formula"], "TiO2");
    let gone = by("gone");
    assert!(gone["rank"].is_null());
    assert_eq!(gone["error"]["kind"], "input");
    assert_eq!(gone["error"]["file"], "no/such/framework.cif");
    let odd = by("odd");
    assert!(
        odd["error"]["text"]
            .as_str()
            .unwrap()
            .contains("block:3x9:ribbon:Nb"),
        "{odd}"
    );

    // the CSV table: one row per member, units in the names, the error column filled for
    // the failures only
    let mut r = csv::Reader::from_path(dir.join("family.csv")).unwrap();
    let h = r.headers().unwrap().clone();
    for col in [
        "tunnel_barrier_ev",
        "crossing_cost_ev",
        "redox_capacity_mah_g",
        "site_capacity_mah_cm3",
        "particle_10c_um",
        "particle_60c_um",
        "error",
    ] {
        assert!(h.iter().any(|c| c == col), "no column {col}");
    }
    let rows: Vec<csv::StringRecord> = r.records().map(|x| x.unwrap()).collect();
    assert_eq!(rows.len(), 5);
    let err = h.iter().position(|c| c == "error").unwrap();
    let errors: Vec<bool> = rows.iter().map(|x| !x[err].is_empty()).collect();
    assert_eq!(errors, vec![false, false, false, true, true]);
    no_temporaries(&dir);
}

#[test]
fn the_page_reads_as_a_figure_with_units_legends_and_the_cautions() {
    let dir = tmp("family", "page");
    ok(&run_family(&dir, &["--no-member-reports"]));
    let page = std::fs::read_to_string(dir.join("family.html")).unwrap();
    assert!(page.contains("Ranked table"));
    assert!(page.contains("not cell design"));
    assert!(page.contains("licensed practice"));
    assert!(page.contains("no/such/framework.cif"));
    assert!(!dir.join("member-3x3.html").exists());
    let mut texts: Vec<String> = Vec::new();
    let mut figures = 0;
    let mut rest = page.as_str();
    while let Some(i) = rest.find("<svg") {
        let tail = &rest[i..];
        let j = tail.find("</svg>").unwrap() + 6;
        let doc = roxmltree::Document::parse(&tail[..j]).expect("well-formed SVG");
        assert_eq!(doc.root_element().tag_name().namespace(), Some(SVG_NS));
        for t in doc.descendants().filter(|n| n.has_tag_name("text")) {
            let size: f64 = t.attribute("font-size").unwrap_or("13").parse().unwrap();
            assert!(size >= 11.0, "text below 11 px: {size}");
            texts.push(
                t.descendants()
                    .filter(|n| n.is_text())
                    .filter_map(|n| n.text())
                    .collect(),
            );
        }
        figures += 1;
        rest = &tail[j..];
    }
    // block size, every member's barriers, two capacity figures, particles
    assert_eq!(figures, 5);
    for needed in [
        "Energy (eV)",
        "Gravimetric capacity (mAh/g)",
        "Volumetric capacity (mAh/cm³)",
        "Largest particle diameter (um)",
        "3x3",
        "tunnel barrier (± model uncertainty)",
        "redox-limited",
        "site-limited",
    ] {
        assert!(
            texts.iter().any(|t| t == needed),
            "no text '{needed}' in {texts:?}"
        );
    }
}

#[test]
fn an_output_that_is_a_file_is_refused_before_any_work() {
    let dir = tmp("family", "refused");
    let target = dir.join("family-out");
    std::fs::write(&target, "mine").unwrap();
    let o = hopmap(&[
        "family",
        &root("structures/reference/TiO2_rutile.cif"),
        "--out",
        target.to_str().unwrap(),
    ]);
    assert_eq!(o.status.code(), Some(2));
    assert_eq!(std::fs::read_to_string(&target).unwrap(), "mine");
    assert_eq!(std::fs::read_dir(&dir).unwrap().count(), 1);
}

#[test]
fn a_family_where_nothing_can_be_answered_fails_and_says_why() {
    let dir = tmp("family", "nothing");
    let out = dir.join("out");
    let o = hopmap(&[
        "family",
        "--quiet",
        "no/such/one.cif",
        "--out",
        out.to_str().unwrap(),
    ]);
    assert_eq!(o.status.code(), Some(1));
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(err.contains("no member"), "{err}");
    // the report of the failures is still whole
    let doc: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("family.json")).unwrap()).unwrap();
    assert_eq!(doc["members"][0]["error"]["file"], "no/such/one.cif");
    no_temporaries(&out);
}

/// Every key of `family.json` (members and their nested objects included) is documented in the
/// README's `hopmap.family/1` section.
#[test]
fn every_json_key_is_documented_in_the_readme() {
    let readme = std::fs::read_to_string(root("README.md")).unwrap();
    let start = readme
        .find("### `hopmap family`")
        .expect("a README section for hopmap family");
    let rest = &readme[start + 4..];
    let section = &rest[..rest.find("\n### ").unwrap_or(rest.len())];
    let dir = tmp("family", "schema");
    // a built member too, for the keys of `built`
    ok(&run_family(&dir, &["bronze:hexagonal:W"]));
    let doc: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.join("family.json")).unwrap()).unwrap();
    fn keys(v: &serde_json::Value, out: &mut Vec<String>) {
        match v {
            serde_json::Value::Object(m) => {
                for (k, x) in m {
                    out.push(k.clone());
                    keys(x, out);
                }
            }
            serde_json::Value::Array(a) => a.iter().for_each(|x| keys(x, out)),
            _ => {}
        }
    }
    let mut all = Vec::new();
    keys(&doc, &mut all);
    all.sort();
    all.dedup();
    assert!(
        all.iter().any(|k| k == "gii_vu"),
        "a built member was analysed"
    );
    assert!(all.len() > 60, "{} keys", all.len());
    let missing: Vec<&String> = all
        .iter()
        .filter(|k| !section.contains(&format!("`{k}`")) && !section.contains(&format!("`{k}[]`")))
        .collect();
    assert!(missing.is_empty(), "undocumented keys: {missing:?}");
}
