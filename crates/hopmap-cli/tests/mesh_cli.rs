//! `hopmap paths --mesh DIR` and the 3D view of the report, on layered LiCoO2 (Orman & Wiseman,
//! Acta Cryst. C40 (1984) 12): lithium moves in 2D in the layers perpendicular to c (science
//! notes, section 6), three layers per hexagonal cell.

mod common;
use common::{hopmap, ok, root, tmp};
use serde_json::Value;

#[test]
fn paths_writes_the_licoo2_layers_as_closed_sheets() {
    let d = tmp("mesh", "licoo2");
    let out = d.join("layers");
    ok(&hopmap(&[
        "paths",
        &root("structures/reference/LiCoO2_layered.cif"),
        "--ion",
        "Li",
        "--spacing",
        "0.2",
        "--quiet",
        "--mesh",
        out.to_str().unwrap(),
        "--mesh-cells",
        "2,2,1",
    ]));
    let m: Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("mesh.json")).unwrap()).unwrap();
    assert_eq!(m["schema"], "hopmap.mesh/1");
    assert_eq!(m["cells"], serde_json::json!([2, 2, 1]));
    let first = &m["networks"][0];
    assert_eq!(first["dimension"], 2);
    assert_eq!(first["directions"][0], "(001)");
    assert_eq!(first["closed_manifold"], true);
    // three sheets (besides slivers where the block's faces cut a wavy sheet)
    assert_eq!(first["main_components"], 3);
    assert!(first["components"].as_u64().unwrap() >= 3);
    for f in ["networks.glb", "network-2d.ply", "atoms.xyz"] {
        assert!(out.join(f).is_file(), "{f}");
    }
    let _ = std::fs::remove_dir_all(&d);
}

#[test]
fn a_bad_cell_count_is_a_usage_error_and_writes_nothing() {
    let d = tmp("mesh", "bad");
    let out = d.join("never");
    for bad in ["0,1,1", "2,2", "7", "a,b,c"] {
        let o = hopmap(&[
            "paths",
            &root("structures/reference/LiCoO2_layered.cif"),
            "--mesh",
            out.to_str().unwrap(),
            "--mesh-cells",
            bad,
        ]);
        assert_eq!(o.status.code(), Some(2), "{bad}");
        let err = String::from_utf8_lossy(&o.stderr);
        assert!(err.contains("--mesh-cells"), "{err}");
        assert!(!out.exists());
    }
    let _ = std::fs::remove_dir_all(&d);
}

/// The report's 3D view: a canvas, the scene inlined (one network per switch, as many as the
/// answer reports), a static projection for print and browsers without WebGL, and the script
/// fetches nothing.
#[test]
fn the_report_carries_the_3d_view_and_its_static_projection() {
    let d = tmp("mesh", "report");
    let page = d.join("r.html");
    ok(&hopmap(&[
        "paths",
        &root("structures/reference/LiCoO2_layered.cif"),
        "--spacing",
        "0.2",
        "--quiet",
        "--report",
        page.to_str().unwrap(),
    ]));
    let html = std::fs::read_to_string(&page).unwrap();
    assert!(html.contains("<canvas id=\"v3d-canvas\""));
    assert!(html.contains("class=\"v3d-static\""));
    assert!(html.contains("@media print"));
    let i = html.find("id=\"v3d-data\">").unwrap() + "id=\"v3d-data\">".len();
    let j = i + html[i..].find("</script>").unwrap();
    let scene: Value = serde_json::from_str(&html[i..j].replace("<\\/", "</")).unwrap();
    let nets = scene["networks"].as_array().unwrap();
    assert_eq!(nets[0]["dimension"], 2);
    assert_eq!(
        html.matches("data-net=\"").count(),
        nets.len(),
        "one switch per network"
    );
    assert!(nets[0]["triangles"].as_u64().unwrap() <= 36_000);
    for bad in ["fetch(", "XMLHttpRequest", "import(", "src=\"http"] {
        assert!(!html.contains(bad), "{bad}");
    }
    let _ = std::fs::remove_dir_all(&d);
}
