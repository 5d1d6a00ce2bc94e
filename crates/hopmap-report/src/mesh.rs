//! The channel networks as 3D surfaces in open formats general viewers read: binary glTF 2.0
//! (`.glb`, one mesh per network), binary PLY (one file per network), the atoms of the block as
//! extended XYZ, and a `hopmap.mesh/1` JSON manifest with the levels (eV), volumes (A^3) and
//! accessible fractions. Coordinates are Cartesian angstroms in hopmap's frame (**a** along x,
//! **b** in the xy plane); glTF's nominal unit (the metre) is not applied: one glTF unit is one
//! angstrom, as the manifest says.
//!
//! The surfaces come from [`hopmap::isosurface`]; this module only encodes them. Every file is
//! built in memory first and written with [`super::output::write_atomic`].

use hopmap::analysis::Analysis;
use hopmap::isosurface::{self, Mesh, NetworkSurface, SurfaceOptions};
use hopmap::summary::Network;
use hopmap_plot::colormap::Rgb;
use serde_json::{Value, json};
use std::fmt::Write;
use std::path::{Path, PathBuf};

/// Triangles of one exported surface at most (about 20 MB of glTF): beyond this the grid is
/// resampled coarser. Olivine LiFePO4 over 2 x 2 x 2 cells at 0.1 A: the 1D network (280,000
/// triangles) is written at the analysis grid's resolution, the 3D network is coarsened.
pub const EXPORT_MAX_TRIANGLES: usize = 600_000;

/// Colour of a network's surface by dimension (1D, 2D, 3D): hues none of the element colours
/// use (`hopmap_plot::colormap::element_colour`), so a surface never reads as an atom.
pub fn network_colour(dimension: u8) -> Rgb {
    match dimension {
        1 => Rgb::new(0xf0, 0x8c, 0x2a),
        2 => Rgb::new(0xd6, 0x45, 0x7a),
        _ => Rgb::new(0x6c, 0xb4, 0xf0),
    }
}

/// The surfaces of the networks the answer reports over `cells` cells; `max_triangles` caps
/// each surface (coarser grid), `None` keeps the analysis grid.
pub fn surfaces(
    a: &Analysis,
    cells: [usize; 3],
    max_triangles: Option<usize>,
) -> Vec<NetworkSurface> {
    isosurface::network_surfaces(
        &a.landscape.energy,
        &a.summary.networks,
        a.model.energy_cap,
        SurfaceOptions {
            cells,
            max_triangles,
        },
    )
}

/// Area-weighted vertex normals (unit vectors, outward).
pub fn vertex_normals(m: &Mesh) -> Vec<[f32; 3]> {
    let mut n = vec![[0.0f64; 3]; m.vertices.len()];
    for t in &m.triangles {
        let [a, b, c] = t.map(|i| m.vertices[i as usize]);
        let u = [b[0] - a[0], b[1] - a[1], b[2] - a[2]];
        let v = [c[0] - a[0], c[1] - a[1], c[2] - a[2]];
        let x = [
            u[1] * v[2] - u[2] * v[1],
            u[2] * v[0] - u[0] * v[2],
            u[0] * v[1] - u[1] * v[0],
        ];
        for &i in t {
            for k in 0..3 {
                n[i as usize][k] += x[k];
            }
        }
    }
    n.into_iter()
        .map(|v| {
            let l = (v[0] * v[0] + v[1] * v[1] + v[2] * v[2]).sqrt();
            if l > 0.0 {
                v.map(|x| (x / l) as f32)
            } else {
                [0.0, 0.0, 1.0]
            }
        })
        .collect()
}

fn network_name(n: &NetworkSurface) -> String {
    format!("network-{}d", n.dimension)
}

/// One binary glTF 2.0 file with a mesh (positions, normals, uint32 indices, a material of the
/// network's colour) per surface, each under a node named `network-<d>d`.
pub fn glb(surfaces: &[NetworkSurface]) -> Vec<u8> {
    let mut bin: Vec<u8> = Vec::new();
    let mut views = Vec::new();
    let mut accessors = Vec::new();
    let mut meshes = Vec::new();
    let mut nodes = Vec::new();
    let mut materials = Vec::new();
    let mut push_view = |bin: &mut Vec<u8>, bytes: &[u8], target: u32| -> usize {
        while !bin.len().is_multiple_of(4) {
            bin.push(0);
        }
        let offset = bin.len();
        bin.extend_from_slice(bytes);
        views.push(
            json!({"buffer": 0, "byteOffset": offset, "byteLength": bytes.len(), "target": target}),
        );
        views.len() - 1
    };
    for (k, s) in surfaces.iter().enumerate() {
        if s.mesh.triangles.is_empty() {
            continue;
        }
        let pos: Vec<u8> = s
            .mesh
            .vertices
            .iter()
            .flat_map(|v| v.iter().flat_map(|&x| (x as f32).to_le_bytes()))
            .collect();
        let nor: Vec<u8> = vertex_normals(&s.mesh)
            .iter()
            .flat_map(|v| v.iter().flat_map(|x| x.to_le_bytes()))
            .collect();
        let idx: Vec<u8> = s
            .mesh
            .triangles
            .iter()
            .flat_map(|t| t.iter().flat_map(|i| i.to_le_bytes()))
            .collect();
        let (lo, hi) = s.mesh.bounds();
        let vp = push_view(&mut bin, &pos, 34962);
        let vn = push_view(&mut bin, &nor, 34962);
        let vi = push_view(&mut bin, &idx, 34963);
        let f32r = |x: f64| x as f32 as f64;
        accessors.push(
            json!({"bufferView": vp, "componentType": 5126, "count": s.mesh.vertices.len(),
            "type": "VEC3", "min": lo.map(f32r), "max": hi.map(f32r)}),
        );
        accessors.push(
            json!({"bufferView": vn, "componentType": 5126, "count": s.mesh.vertices.len(), "type": "VEC3"}),
        );
        accessors.push(json!({"bufferView": vi, "componentType": 5125, "count": 3 * s.mesh.triangles.len(), "type": "SCALAR"}));
        let c = network_colour(s.dimension);
        materials.push(json!({
            "name": format!("{} at {:.3} eV", network_name(s), s.level_ev),
            "pbrMetallicRoughness": {"baseColorFactor": [c.r as f64 / 255.0, c.g as f64 / 255.0, c.b as f64 / 255.0, 1.0],
                                      "metallicFactor": 0.0, "roughnessFactor": 0.6},
        }));
        let a0 = accessors.len() - 3;
        meshes.push(json!({"name": network_name(s), "primitives": [{
            "attributes": {"POSITION": a0, "NORMAL": a0 + 1}, "indices": a0 + 2, "mode": 4,
            "material": materials.len() - 1}]}));
        nodes.push(json!({"name": network_name(s), "mesh": meshes.len() - 1,
            "extras": {"dimension": s.dimension, "level_ev": s.level_ev, "index": k}}));
    }
    while !bin.len().is_multiple_of(4) {
        bin.push(0);
    }
    let doc = json!({
        "asset": {"version": "2.0", "generator": format!("hopmap {}", env!("CARGO_PKG_VERSION")),
                  "extras": {"unit": "angstrom"}},
        "scene": 0,
        "scenes": [{"nodes": (0..nodes.len()).collect::<Vec<_>>()}],
        "nodes": nodes,
        "meshes": meshes,
        "materials": materials,
        "accessors": accessors,
        "bufferViews": views,
        "buffers": if bin.is_empty() { json!([]) } else { json!([{"byteLength": bin.len()}]) },
    });
    let mut text = serde_json::to_vec(&doc).unwrap_or_default();
    while !text.len().is_multiple_of(4) {
        text.push(b' ');
    }
    let total = 12 + 8 + text.len() + if bin.is_empty() { 0 } else { 8 + bin.len() };
    let mut out = Vec::with_capacity(total);
    out.extend_from_slice(b"glTF");
    out.extend_from_slice(&2u32.to_le_bytes());
    out.extend_from_slice(&(total as u32).to_le_bytes());
    out.extend_from_slice(&(text.len() as u32).to_le_bytes());
    out.extend_from_slice(b"JSON");
    out.extend_from_slice(&text);
    if !bin.is_empty() {
        out.extend_from_slice(&(bin.len() as u32).to_le_bytes());
        out.extend_from_slice(b"BIN\0");
        out.extend_from_slice(&bin);
    }
    out
}

/// A binary little-endian PLY file of one mesh: float32 x, y, z (A), faces as lists of three
/// int32 vertex indices, counter-clockwise seen from outside. `comments` go in the header.
pub fn ply(m: &Mesh, comments: &[String]) -> Vec<u8> {
    let mut head = String::from("ply\nformat binary_little_endian 1.0\n");
    for c in comments {
        let _ = writeln!(head, "comment {}", c.replace('\n', " "));
    }
    let _ = write!(
        head,
        "element vertex {}\nproperty float x\nproperty float y\nproperty float z\n\
         element face {}\nproperty list uchar int vertex_indices\nend_header\n",
        m.vertices.len(),
        m.triangles.len()
    );
    let mut out = head.into_bytes();
    for v in &m.vertices {
        for x in v {
            out.extend_from_slice(&(*x as f32).to_le_bytes());
        }
    }
    for t in &m.triangles {
        out.push(3);
        for i in t {
            out.extend_from_slice(&(*i as i32).to_le_bytes());
        }
    }
    out
}

/// The atoms in the block (every periodic image whose position lies in the block, its faces
/// included), as (element symbol, Cartesian A). A mixed site is named by its largest occupant.
/// `framework_only` leaves out the mobile ion.
pub fn block_atoms(
    a: &Analysis,
    origin_frac: [f64; 3],
    cells: [usize; 3],
    framework_only: bool,
) -> Vec<(String, [f64; 3])> {
    let mut out = Vec::new();
    let lat = &a.structure.lattice;
    for site in &a.structure.sites {
        let Some(main) = site
            .occupants
            .iter()
            .max_by(|x, y| x.occupancy.total_cmp(&y.occupancy))
        else {
            continue;
        };
        if framework_only && site.has_element(a.ion) {
            continue;
        }
        for f in isosurface::images_in_block(site.frac, origin_frac, cells, 1e-6) {
            let c = lat.to_cart(f).0;
            out.push((main.species.element.symbol().to_string(), [c.x, c.y, c.z]));
        }
    }
    out
}

/// The block's edge vectors (A): `cells` times the cell vectors.
pub fn block_vectors(a: &Analysis, cells: [usize; 3]) -> [[f64; 3]; 3] {
    [0, 1, 2].map(|i| {
        let v = a.structure.lattice.vector(i) * cells[i] as f64;
        [v.x, v.y, v.z]
    })
}

/// The block's corner (Cartesian A).
pub fn block_corner(a: &Analysis, origin_frac: [f64; 3]) -> [f64; 3] {
    let c = a
        .structure
        .lattice
        .to_cart(hopmap::lattice::Frac::new(
            origin_frac[0],
            origin_frac[1],
            origin_frac[2],
        ))
        .0;
    [c.x, c.y, c.z]
}

/// The atoms of the block as extended XYZ: the block's edges as `Lattice`, its corner as
/// `Origin`, not periodic (the atoms on the block's faces appear on both).
pub fn atoms_xyz(a: &Analysis, origin_frac: [f64; 3], cells: [usize; 3]) -> String {
    let atoms = block_atoms(a, origin_frac, cells, false);
    let v = block_vectors(a, cells);
    let o = block_corner(a, origin_frac);
    let mut out = String::new();
    let _ = writeln!(out, "{}", atoms.len());
    let _ = writeln!(
        out,
        "Lattice=\"{}\" Origin=\"{:.8} {:.8} {:.8}\" Properties=species:S:1:pos:R:3 pbc=\"F F F\" unit=angstrom cells=\"{} {} {}\"",
        v.iter()
            .flatten()
            .map(|x| format!("{x:.8}"))
            .collect::<Vec<_>>()
            .join(" "),
        o[0],
        o[1],
        o[2],
        cells[0],
        cells[1],
        cells[2]
    );
    for (e, c) in atoms {
        let _ = writeln!(out, "{e:<3} {:14.8} {:14.8} {:14.8}", c[0], c[1], c[2]);
    }
    out
}

fn network_of(a: &Analysis, d: u8) -> Option<&Network> {
    a.summary.networks.iter().find(|n| n.dimension == d)
}

/// The `hopmap.mesh/1` manifest of a folder written by [`write_folder`].
pub fn manifest(
    a: &Analysis,
    file: &str,
    cells: [usize; 3],
    surfaces: &[NetworkSurface],
    files: &[(String, String)],
) -> Value {
    let v_cell = a.structure.lattice.volume();
    let ncells = (cells[0] * cells[1] * cells[2]) as f64;
    let origin = surfaces
        .first()
        .map(|s| s.block.origin_frac(s.dims))
        .unwrap_or([0.0; 3]);
    let nets: Vec<Value> = surfaces
        .iter()
        .map(|s| {
            let check = s.mesh.edge_check();
            let net = network_of(a, s.dimension);
            let enclosed = s.mesh.volume_a3();
            let pieces = s.mesh.components(&a.structure.lattice);
            let largest = pieces.iter().map(|c| c.volume_a3).fold(0.0, f64::max);
            let main = pieces
                .iter()
                .filter(|c| c.volume_a3 >= 0.05 * largest)
                .count();
            json!({
                "dimension": s.dimension,
                "directions": net.map(|n| n.orientations.iter().map(|o| o.indices()).filter(|x| !x.is_empty()).collect::<Vec<_>>()).unwrap_or_default(),
                "threshold_ev": s.threshold_ev,
                "threshold_uncertainty_ev": net.map(|n| n.uncertainty_ev),
                "level_ev": s.level_ev,
                "margin_ev": isosurface::MARGIN_EV,
                "accessible_fraction": s.accessible_fraction,
                "accessible_volume_per_cell_a3": s.accessible_fraction * v_cell,
                "enclosed_volume_a3": enclosed,
                "enclosed_volume_per_cell_a3": enclosed / ncells,
                "area_a2": s.mesh.area_a2(),
                "vertices": s.mesh.vertices.len(),
                "triangles": s.mesh.triangles.len(),
                "components": pieces.len(),
                "main_components": main,
                "closed_manifold": check.closed_manifold(),
                "pockets_left_out": s.pockets_left_out,
                "grid_dims": s.dims,
                "ply": format!("{}.ply", network_name(s)),
                "glb_node": network_name(s),
            })
        })
        .collect();
    super::json::tidy(json!({
        "schema": "hopmap.mesh/1",
        "file": file,
        "ion": a.ion.symbol(),
        "length_unit": "angstrom",
        "frame": "Cartesian: a along x, b in the xy plane",
        "cells": cells,
        "block_origin_frac": origin,
        "block_origin_a": block_corner(a, origin),
        "block_vectors_a": block_vectors(a, cells),
        "cell_volume_a3": v_cell,
        "files": files.iter().map(|(k, f)| json!({"kind": k, "file": f})).collect::<Vec<_>>(),
        "networks": nets,
        "notes": [
            format!("Surfaces of the site-energy landscape at each network's percolation threshold plus {} eV, around the regions that percolate (closed pockets below that level are left out), capped where the block's faces cut them; normals point away from the accessible region.", isosurface::MARGIN_EV),
            "Enclosed volumes follow the grid's linear interpolant and lie a few per cent below the accessible fraction times the cell volume (about 4 % for olivine LiFePO4 at 0.1 A, more on coarser grids).",
            "The levels carry the model's barrier uncertainty; the surfaces show where the ion can pass at that level, not a measured density.",
        ],
        "cautions": super::json::CAUTIONS,
    }))
}

/// Writes the surfaces of `a` over `cells` cells into `dir`: `networks.glb`, one
/// `network-<d>d.ply` per network, `atoms.xyz` and `mesh.json`. Everything is built before the
/// first file is written; each file is written atomically. Returns the paths written.
pub fn write_folder(
    dir: &Path,
    a: &Analysis,
    file: &str,
    cells: [usize; 3],
) -> std::io::Result<Vec<PathBuf>> {
    let surfaces = surfaces(a, cells, Some(EXPORT_MAX_TRIANGLES));
    let origin = surfaces
        .first()
        .map(|s| s.block.origin_frac(s.dims))
        .unwrap_or([0.0; 3]);
    let mut out: Vec<(String, String, Vec<u8>)> = Vec::new();
    out.push(("glb".into(), "networks.glb".into(), glb(&surfaces)));
    for s in &surfaces {
        let comments = vec![
            format!("hopmap {} {}", env!("CARGO_PKG_VERSION"), file),
            format!(
                "{} network of {} at {:.4} eV (threshold {:.4} eV + {} eV); Cartesian angstrom",
                s.dimension,
                a.ion.symbol(),
                s.level_ev,
                s.threshold_ev,
                isosurface::MARGIN_EV
            ),
        ];
        out.push((
            "ply".into(),
            format!("{}.ply", network_name(s)),
            ply(&s.mesh, &comments),
        ));
    }
    out.push((
        "atoms".into(),
        "atoms.xyz".into(),
        atoms_xyz(a, origin, cells).into_bytes(),
    ));
    let listed: Vec<(String, String)> =
        out.iter().map(|(k, f, _)| (k.clone(), f.clone())).collect();
    let doc = manifest(a, file, cells, &surfaces, &listed);
    let text = serde_json::to_string_pretty(&doc).unwrap_or_default() + "\n";
    out.push(("manifest".into(), "mesh.json".into(), text.into_bytes()));
    let mut written = Vec::new();
    for (_, name, bytes) in out {
        let p = dir.join(name);
        super::output::write_atomic(&p, &bytes)?;
        written.push(p);
    }
    Ok(written)
}
