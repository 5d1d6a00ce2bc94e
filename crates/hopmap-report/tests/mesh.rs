//! The network surfaces as files: binary glTF and PLY read back by a reader written here from
//! the specifications (Khronos glTF 2.0: 12-byte header `glTF`, version 2, total length; chunks
//! of 4-byte-aligned length, type `JSON` then `BIN\0`; accessors of componentType 5126 = float,
//! 5125 = unsigned int. PLY: Turk's polygon file format, `format binary_little_endian 1.0`), and
//! the extended XYZ atoms. The structure is olivine LiFePO4 (Streltsov et al., Acta Cryst. B49
//! (1993) 147), whose 1D network runs along b (science notes, section 6). The Python cross-check
//! `tools/check_mesh.py` reads the same files with trimesh, an independent mesh library.

use hopmap::{Analysis, AnalysisOptions, analyse_file};
use hopmap_report::mesh;
use serde_json::Value;
use std::sync::OnceLock;

fn olivine() -> &'static Analysis {
    static A: OnceLock<Analysis> = OnceLock::new();
    A.get_or_init(|| {
        let path = concat!(
            env!("CARGO_MANIFEST_DIR"),
            "/../../structures/reference/LiFePO4_olivine.cif"
        );
        let opts = AnalysisOptions::builder("Li")
            .spacing_a(0.2)
            .build()
            .unwrap();
        analyse_file(path.as_ref(), &opts).unwrap()
    })
}

fn u32_at(b: &[u8], i: usize) -> u32 {
    u32::from_le_bytes(b[i..i + 4].try_into().unwrap())
}
fn f32_at(b: &[u8], i: usize) -> f32 {
    f32::from_le_bytes(b[i..i + 4].try_into().unwrap())
}

#[test]
fn the_glb_holds_one_mesh_per_network_with_the_surface_as_computed() {
    let a = olivine();
    let s = mesh::surfaces(a, [1, 2, 1], None);
    assert_eq!(s.len(), a.summary.networks.len());
    let bytes = mesh::glb(&s);
    assert_eq!(&bytes[0..4], b"glTF");
    assert_eq!(u32_at(&bytes, 4), 2);
    assert_eq!(u32_at(&bytes, 8) as usize, bytes.len());
    let jlen = u32_at(&bytes, 12) as usize;
    assert_eq!(&bytes[16..20], b"JSON");
    assert_eq!(jlen % 4, 0);
    let doc: Value = serde_json::from_slice(&bytes[20..20 + jlen]).unwrap();
    let b0 = 20 + jlen;
    let blen = u32_at(&bytes, b0) as usize;
    assert_eq!(&bytes[b0 + 4..b0 + 8], b"BIN\0");
    let bin = &bytes[b0 + 8..b0 + 8 + blen];
    assert_eq!(b0 + 8 + blen, bytes.len());
    assert_eq!(doc["asset"]["version"], "2.0");
    let meshes = doc["meshes"].as_array().unwrap();
    assert_eq!(meshes.len(), s.len());
    for (m, surf) in meshes.iter().zip(&s) {
        assert_eq!(m["name"], format!("network-{}d", surf.dimension));
        let prim = &m["primitives"][0];
        let acc = |k: &Value| &doc["accessors"][k.as_u64().unwrap() as usize];
        let pos = acc(&prim["attributes"]["POSITION"]);
        let idx = acc(&prim["indices"]);
        assert_eq!(pos["componentType"], 5126);
        assert_eq!(idx["componentType"], 5125);
        assert_eq!(
            pos["count"].as_u64().unwrap() as usize,
            surf.mesh.vertices.len()
        );
        assert_eq!(
            idx["count"].as_u64().unwrap() as usize,
            3 * surf.mesh.triangles.len()
        );
        let view = |a: &Value| &doc["bufferViews"][a["bufferView"].as_u64().unwrap() as usize];
        let po = view(pos)["byteOffset"].as_u64().unwrap() as usize;
        let io = view(idx)["byteOffset"].as_u64().unwrap() as usize;
        assert_eq!(po % 4, 0);
        // positions and indices decode to the mesh (positions at float precision)
        for (i, v) in surf.mesh.vertices.iter().enumerate().step_by(97) {
            for k in 0..3 {
                let x = f32_at(bin, po + 12 * i + 4 * k) as f64;
                assert!((x - v[k]).abs() < 1e-5 * v[k].abs().max(1.0));
            }
        }
        for (t, tri) in surf.mesh.triangles.iter().enumerate().step_by(89) {
            for k in 0..3 {
                assert_eq!(u32_at(bin, io + 12 * t + 4 * k), tri[k]);
            }
        }
        // the accessor's bounds are the mesh's (required for POSITION by the specification)
        let (lo, hi) = surf.mesh.bounds();
        for k in 0..3 {
            assert!((pos["min"][k].as_f64().unwrap() - lo[k]).abs() < 1e-5);
            assert!((pos["max"][k].as_f64().unwrap() - hi[k]).abs() < 1e-5);
        }
    }
}

#[test]
fn the_ply_file_has_the_header_and_the_binary_body_its_header_announces() {
    let a = olivine();
    let s = &mesh::surfaces(a, [1, 1, 1], None)[0];
    let bytes = mesh::ply(&s.mesh, &["olivine, 1D network".into()]);
    let end = bytes
        .windows(11)
        .position(|w| w == b"end_header\n")
        .unwrap()
        + 11;
    let head = std::str::from_utf8(&bytes[..end]).unwrap();
    assert!(head.starts_with("ply\nformat binary_little_endian 1.0\n"));
    assert!(head.contains(&format!("element vertex {}\n", s.mesh.vertices.len())));
    assert!(head.contains(&format!("element face {}\n", s.mesh.triangles.len())));
    assert_eq!(
        bytes.len() - end,
        12 * s.mesh.vertices.len() + 13 * s.mesh.triangles.len()
    );
    let f0 = end + 12 * s.mesh.vertices.len();
    assert_eq!(bytes[f0], 3);
    assert_eq!(u32_at(&bytes, f0 + 1), s.mesh.triangles[0][0]);
}

/// Olivine's cell holds 28 atoms (Z = 4 LiFePO4); a block of 1 x 2 x 1 cells holds 56 plus the
/// images on its faces, each inside the block's parallelepiped.
#[test]
fn the_atoms_file_lists_the_block_with_its_lattice() {
    let a = olivine();
    let text = mesh::atoms_xyz(a, [0.1, 0.2, 0.3], [1, 2, 1]);
    let mut lines = text.lines();
    let n: usize = lines.next().unwrap().trim().parse().unwrap();
    assert!(n >= 56, "{n} atoms");
    let comment = lines.next().unwrap();
    assert!(comment.starts_with("Lattice=\"") && comment.contains("pbc=\"F F F\""));
    let rows: Vec<&str> = lines.collect();
    assert_eq!(rows.len(), n);
    let li = rows.iter().filter(|r| r.starts_with("Li ")).count();
    assert!(li >= 8, "{li} Li");
    for r in rows {
        let v: Vec<f64> = r
            .split_whitespace()
            .skip(1)
            .map(|x| x.parse().unwrap())
            .collect();
        let f = a
            .structure
            .lattice
            .to_frac(hopmap::lattice::Cart::new(v[0], v[1], v[2]))
            .0;
        let (lo, hi) = ([0.1, 0.2, 0.3], [1.1, 2.2, 1.3]);
        for k in 0..3 {
            assert!(f[k] > lo[k] - 1e-6 && f[k] < hi[k] + 1e-6, "{r}");
        }
    }
}

#[test]
fn the_manifest_states_levels_volumes_and_files() {
    let a = olivine();
    let d = std::env::temp_dir().join(format!("hopmap-mesh-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&d);
    std::fs::create_dir_all(&d).unwrap();
    let written = mesh::write_folder(&d, a, "LiFePO4_olivine.cif", [1, 2, 1]).unwrap();
    let names: Vec<String> = std::fs::read_dir(&d)
        .unwrap()
        .flatten()
        .map(|e| e.file_name().to_string_lossy().into_owned())
        .collect();
    assert_eq!(
        names.len(),
        written.len(),
        "no temporary file left: {names:?}"
    );
    let m: Value =
        serde_json::from_str(&std::fs::read_to_string(d.join("mesh.json")).unwrap()).unwrap();
    assert_eq!(m["schema"], "hopmap.mesh/1");
    assert_eq!(m["length_unit"], "angstrom");
    let first = &m["networks"][0];
    assert_eq!(first["dimension"], 1);
    assert_eq!(first["directions"][0], "[010]");
    assert_eq!(first["closed_manifold"], true);
    // one cell across a and c: two tunnels
    assert_eq!(first["components"], 2);
    let level = first["level_ev"].as_f64().unwrap();
    let thr = first["threshold_ev"].as_f64().unwrap();
    assert!((level - thr - 0.05).abs() < 1e-4);
    let per_cell = first["enclosed_volume_per_cell_a3"].as_f64().unwrap();
    let grid = first["accessible_volume_per_cell_a3"].as_f64().unwrap();
    assert!(
        (per_cell - grid).abs() < 0.16 * grid,
        "{per_cell} vs {grid}"
    );
    assert!(first["threshold_uncertainty_ev"].as_f64().unwrap() > 0.0);
    for f in m["files"].as_array().unwrap() {
        assert!(d.join(f["file"].as_str().unwrap()).is_file());
    }
    let _ = std::fs::remove_dir_all(&d);
}
