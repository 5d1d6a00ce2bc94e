//! The HTML report and the demo study.
//!
//! The report is checked on a real analysis: olivine LiFePO4 (structures/reference, after
//! Streltsov et al., Acta Cryst. B49 (1993) 147; source named in the file). Its inline SVG
//! figures are parsed with roxmltree, an independent XML parser from crates.io. The science
//! check is a fact of the field (science notes, section 6): Li+ moves through olivine in one
//! dimension, along b (Morgan, Van der Ven & Ceder, Electrochem. Solid-State Lett. 7 (2004)
//! A30; Islam et al., Chem. Mater. 17 (2005) 5085).

use hopmap::analysis::{self, Analysis, AnalysisOptions};
use hopmap::element::Element;
use hopmap_report::{figures, html, json::CAUTIONS};
use std::path::Path;
use std::sync::OnceLock;

const SVG_NS: &str = "http://www.w3.org/2000/svg";
const OLIVINE: &str = concat!(
    concat!(env!("CARGO_MANIFEST_DIR"), "/../.."),
    "/structures/reference/LiFePO4_olivine.cif"
);

fn olivine() -> &'static Analysis {
    static A: OnceLock<Analysis> = OnceLock::new();
    A.get_or_init(|| {
        let s = hopmap::read::read_structure(Path::new(OLIVINE), None).expect("olivine reads");
        analysis::analyse(
            &s,
            &AnalysisOptions::new(Element::from_symbol("Li").unwrap()),
        )
        .expect("olivine analyses")
    })
}

fn olivine_html() -> &'static str {
    static H: OnceLock<String> = OnceLock::new();
    H.get_or_init(|| html::report(olivine(), "LiFePO4_olivine.cif"))
}

/// Every `<svg ...>...</svg>` block of an HTML page.
fn svg_blocks(page: &str) -> Vec<&str> {
    let mut out = Vec::new();
    let mut rest = page;
    while let Some(i) = rest.find("<svg") {
        let tail = &rest[i..];
        let j = tail.find("</svg>").expect("every <svg> is closed") + "</svg>".len();
        out.push(&tail[..j]);
        rest = &tail[j..];
    }
    out
}

/// Text content of every `<text>` element of an SVG document, checking it is well formed.
fn svg_texts(svg: &str) -> Vec<String> {
    let doc = roxmltree::Document::parse(svg).unwrap_or_else(|e| {
        panic!(
            "SVG is not well formed: {e}\n{}",
            &svg[..svg.len().min(400)]
        )
    });
    let root = doc.root_element();
    assert_eq!(root.tag_name().name(), "svg");
    assert_eq!(root.tag_name().namespace(), Some(SVG_NS));
    root.descendants()
        .filter(|n| n.is_element() && n.tag_name().name() == "text")
        .map(|n| {
            n.descendants()
                .filter(|d| d.is_text())
                .map(|d| d.text().unwrap_or(""))
                .collect()
        })
        .collect()
}

#[test]
fn inline_figures_are_well_formed_svg_with_unique_ids() {
    let page = olivine_html();
    assert!(page.starts_with("<!DOCTYPE html>"));
    assert!(page.trim_end().ends_with("</html>"));
    let blocks = svg_blocks(page);
    assert!(
        blocks.len() >= 4,
        "slices, profiles and the rate chart: {}",
        blocks.len()
    );
    for b in &blocks {
        svg_texts(b);
    }
    // Several SVGs share one page: their clip-path and gradient ids must not collide.
    let mut ids: Vec<&str> = page
        .match_indices(" id=\"")
        .map(|(i, _)| {
            let s = &page[i + 5..];
            &s[..s.find('"').unwrap()]
        })
        .collect();
    let n = ids.len();
    ids.sort();
    ids.dedup();
    assert_eq!(ids.len(), n, "duplicate ids in the page");
    for (i, _) in page.match_indices("url(#") {
        let s = &page[i + 5..];
        let id = &s[..s.find(')').unwrap()];
        assert!(ids.binary_search(&id).is_ok(), "url(#{id}) points nowhere");
    }
}

#[test]
fn the_answer_comes_first_and_says_one_dimension_along_b() {
    let page = olivine_html();
    let a = olivine();
    let sentence = html::esc(&html::answer_sentence(a));
    let headline = html::esc(&analysis::headline(a));
    let at = page.find(&sentence).expect("answer sentence in the page");
    assert!(page.contains(&headline), "headline in the page");
    let first_section = page.find("<h2").unwrap();
    assert!(at < first_section, "the answer precedes every section");
    // olivine LiFePO4 conducts in one dimension along b
    assert!(
        sentence.contains("one-dimensional channels in the [010] direction"),
        "{sentence}"
    );
    assert!(sentence.contains(" eV"), "{sentence}");
}

#[test]
fn tables_carry_units_and_the_cautions_and_references_are_there() {
    let page = olivine_html();
    for needle in [
        "threshold (eV)",
        "barrier (eV)",
        "threshold (v.u.)",
        "barrier (v.u.)",
        "direction [uvw] / plane (hkl)",
        "accessible fraction of the cell",
        "GII = <b>",
        " v.u.</b>",
        "mAh/g",
        "mAh/cm³",
        "m²/s",
        "largest particle diameter (µm)",
        "clearance (Å)",
        "R<sub>0</sub> (Å)",
    ] {
        assert!(page.contains(needle), "missing '{needle}'");
    }
    for c in CAUTIONS {
        assert!(page.contains(&html::esc(c)), "missing caution '{c}'");
    }
    let a = olivine();
    assert!(!a.provenance.pairs.is_empty());
    for p in &a.provenance.pairs {
        assert!(
            page.contains(&html::esc(&p.citation)),
            "missing citation {}",
            p.citation
        );
        assert!(
            page.contains(&format!("{:.4}", p.r0)),
            "missing R0 of {}",
            p.pair_name()
        );
    }
    for k in &a.provenance.knobs {
        assert!(
            page.contains(&html::esc(&k.name)),
            "missing knob {}",
            k.name
        );
    }
    // Section order of the brief.
    let order = [
        "id=\"structure\"",
        "id=\"valence\"",
        "id=\"channels\"",
        "id=\"mismatch\"",
        "id=\"landscape\"",
        "id=\"profiles\"",
        "id=\"sites\"",
        "id=\"hops\"",
        "id=\"transport\"",
        "id=\"capacity\"",
        "id=\"parameters\"",
        "id=\"warnings\"",
        "id=\"cautions\"",
    ];
    let pos: Vec<usize> = order
        .iter()
        .map(|s| page.rfind(s).unwrap_or_else(|| panic!("no section {s}")))
        .collect();
    assert!(pos.windows(2).all(|w| w[0] < w[1]), "sections out of order");
}

#[test]
fn nothing_is_fetched_from_a_network() {
    let page = olivine_html();
    let lower = page.to_ascii_lowercase();
    for bad in [
        "src=\"http",
        "href=\"http",
        "href=\"//",
        "src=\"//",
        "@import",
        "url(http",
        "<script src",
        "<link ",
    ] {
        assert!(!lower.contains(bad), "page fetches something: '{bad}'");
    }
    // The only URL allowed is the SVG namespace name, which is never fetched.
    let stripped = page.replace(&format!("xmlns=\"{SVG_NS}\""), "");
    assert!(!stripped.contains("http://") && !stripped.contains("https://"));
    assert!(page.len() < 2_000_000, "report is {} bytes", page.len());
}

#[test]
fn figures_have_axis_labels_with_units() {
    let figs = figures::all(olivine());
    assert!(figs.iter().any(|f| f.name.starts_with("slice")));
    assert_eq!(
        figs.iter()
            .filter(|f| f
                .caption
                .starts_with("Cross-section of the channels along [010]"))
            .count(),
        1,
        "one end-on cross-section of the 1D channels along b"
    );
    assert!(figs.iter().any(|f| f.name.starts_with("profile-1d")));
    assert!(figs.iter().any(|f| f.name == "size-rate"));
    for f in &figs {
        let texts = svg_texts(&f.svg);
        let has = |s: &str| texts.iter().any(|t| t.contains(s));
        if f.name.starts_with("slice") {
            assert!(has("Site energy (eV)"), "{}: colour bar label", f.name);
            assert!(
                texts.iter().any(|t| t.ends_with(" A") || t.ends_with(" Å")),
                "{}: scale bar in A",
                f.name
            );
            if f.caption.starts_with("Cross-section") {
                // Olivine is orthorhombic: the plane perpendicular to b is the a-c plane.
                assert!(
                    has("[100]") && has("[001]") && !has("[010]"),
                    "{}: the cross-section of the channels along b is the a-c plane",
                    f.name
                );
            } else {
                assert!(
                    has("[010]"),
                    "{}: the channel direction b is in the plane",
                    f.name
                );
            }
        } else if f.name.starts_with("profile") {
            assert!(has("Path length (Å)"), "{}", f.name);
            assert!(has("Site energy (eV)"), "{}", f.name);
        } else if f.name == "arrhenius" {
            assert!(has("1000/T (1/K)"), "{}", f.name);
            assert!(has("D (m²/s)"), "{}", f.name);
            assert!(has("no bulk transport below this D"), "{}", f.name);
        } else {
            assert!(has("C-rate (1/h)"), "{}", f.name);
            assert!(has("(µm)"), "{}", f.name);
        }
    }
    assert!(
        figs.iter().any(|f| f.name == "arrhenius"),
        "an Arrhenius figure beside the table"
    );
    let list = html::figures(olivine());
    assert_eq!(list.len(), figs.len());
}

#[test]
fn demo_writes_index_and_reports_and_names_every_structure() {
    let dir = std::env::temp_dir().join(format!(
        "hopmap-demo-test-{}-{}",
        std::process::id(),
        std::time::SystemTime::now()
            .duration_since(std::time::UNIX_EPOCH)
            .unwrap()
            .as_nanos()
    ));
    let run = hopmap_cli::demo::run(&dir, false).expect("demo runs");
    assert!(run.index.ends_with("report.html"));
    let index = std::fs::read_to_string(&run.index).unwrap();
    assert!(
        index.contains("invented"),
        "the index says the study is invented"
    );
    assert_eq!(
        run.rows.len(),
        hopmap_cli::demo::STRUCTURES.len() * hopmap_cli::demo::IONS.len()
    );
    for s in hopmap_cli::demo::STRUCTURES {
        let stem = s.file.trim_end_matches(".cif");
        assert!(run.summary.contains(stem), "summary names {stem}");
        assert!(index.contains(stem), "index names {stem}");
        for ion in hopmap_cli::demo::IONS {
            let row = run
                .rows
                .iter()
                .find(|r| r.structure == stem && r.ion == ion)
                .unwrap();
            if let Ok(x) = &row.outcome {
                let p = dir.join(&x.report);
                let page = std::fs::read_to_string(&p).unwrap();
                assert!(page.contains("id=\"cautions\""), "{}", p.display());
                assert!(index.contains(&format!("href=\"{}\"", x.report)));
            }
        }
        assert!(dir.join("structures").join(s.file).exists());
    }
    assert!(run.rows.iter().filter(|r| r.outcome.is_ok()).count() >= 5);
    // the family page compares the five frameworks for Li+, says the study is invented, and is
    // linked from the index
    let family = std::fs::read_to_string(dir.join(hopmap_cli::demo::FAMILY_PAGE)).unwrap();
    assert!(index.contains(&format!("href=\"{}\"", hopmap_cli::demo::FAMILY_PAGE)));
    assert!(family.contains(hopmap_cli::demo::INVENTED));
    assert!(family.contains("Ranked table") && family.contains("id=\"cautions\""));
    for s in hopmap_cli::demo::STRUCTURES {
        assert!(
            family.contains(&format!("structures/{}", s.file)),
            "{}",
            s.file
        );
    }
    // no temporary files left behind
    for e in std::fs::read_dir(&dir).unwrap() {
        let name = e.unwrap().file_name().to_string_lossy().to_string();
        assert!(!name.contains(".tmp-"), "left over {name}");
    }
    let _ = std::fs::remove_dir_all(&dir);
}
