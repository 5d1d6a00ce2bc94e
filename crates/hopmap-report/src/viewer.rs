//! The channel networks in 3D inside the HTML report: an interactive WebGL view written for
//! the purpose (vanilla JavaScript inlined in the page, its data inlined as base64; nothing is
//! fetched), with one switch per network, the framework atoms in the figures' element colours,
//! the block's edges and the a, b, c axes; and a static SVG projection of the same scene from
//! the same default view, shown when the browser has no WebGL (or no scripts) and in print.
//!
//! Sizes are bounded: the lowest network's surface is resampled until it has at most
//! [`VIEW_MAX_TRIANGLES`] triangles, the others a third of that (positions quantised to 16 bits
//! over the scene's box, 16-bit indices, normals computed by the script), and the static
//! projection draws at most [`STATIC_MAX_TRIANGLES`]: a report stays under 2 MB (olivine
//! LiFePO4 with its three networks: about 1.6 MB, half of it the 3D view).

use super::mesh::{network_colour, surfaces};
use base64::Engine;
use hopmap::analysis::Analysis;
use hopmap::isosurface::{self, NetworkSurface};
use hopmap::landscape::FrameworkKind;
use hopmap_plot::colormap::{Rgb, element_colour};
use hopmap_plot::svg::{Anchor, Style, Svg};
use serde_json::json;
use std::fmt::Write;

/// Triangles of the lowest network's surface in the interactive view (the one shown first);
/// the higher networks get a third of that.
pub const VIEW_MAX_TRIANGLES: usize = 36_000;
/// Triangles of the surface in the static projection.
pub const STATIC_MAX_TRIANGLES: usize = 4_000;
/// Cells along a, b, c shown in the report: about as many as make each edge of the block as long
/// as the longest cell edge and at least 10 A (1 to 3 per axis), so a block of a thin cell is
/// not a needle (layered LiCoO2: 3 x 3 x 1; olivine LiFePO4: 1 x 2 x 2).
pub fn report_cells(a: &Analysis) -> [usize; 3] {
    let p = a.structure.lattice.parameters();
    let len = [p.a, p.b, p.c];
    let target = len.iter().cloned().fold(10.0, f64::max);
    len.map(|l| ((target / l).round() as usize).clamp(1, 3))
}
/// Default view: turned about the vertical (c) by this many degrees, then tilted towards the
/// viewer; the same numbers drive the script and the static projection.
pub const VIEW_YAW_DEG: f64 = -32.0;
pub const VIEW_PITCH_DEG: f64 = 22.0;
/// Drawn radii of framework atoms (A): anions larger than cations, as in ball-and-stick
/// pictures (common practice; not ionic radii).
const ANION_RADIUS_A: f64 = 0.45;
const CATION_RADIUS_A: f64 = 0.32;

/// The default yaw (degrees) for an analysis: a channel that runs sideways (along a direction
/// with a horizontal part, c being vertical) is turned to run across the picture, receding by
/// 25 degrees, so its tubes are seen along their length rather than end-on; otherwise
/// [`VIEW_YAW_DEG`].
pub fn default_yaw(a: &Analysis) -> f64 {
    use hopmap::summary::Orientation;
    let Some(Orientation::Line(d)) = a
        .summary
        .networks
        .first()
        .and_then(|n| n.orientations.first())
    else {
        return VIEW_YAW_DEG;
    };
    let f = hopmap::lattice::Frac::new(d[0] as f64, d[1] as f64, d[2] as f64);
    let c = a.structure.lattice.to_cart(f).0;
    let horizontal = (c.x * c.x + c.y * c.y).sqrt();
    if horizontal < 0.5 * c.norm() {
        return VIEW_YAW_DEG;
    }
    25.0 - c.y.atan2(c.x).to_degrees()
}

/// The default pitch (degrees): layers that lie flat (their normal within about 37 degrees of
/// the vertical c) are seen nearly edge-on, 8 degrees from above, so stacked sheets show as
/// separate bands; otherwise [`VIEW_PITCH_DEG`].
pub fn default_pitch(a: &Analysis) -> f64 {
    use hopmap::summary::Orientation;
    let Some(Orientation::Plane(h)) = a
        .summary
        .networks
        .first()
        .and_then(|n| n.orientations.first())
    else {
        return VIEW_PITCH_DEG;
    };
    // the plane's normal h a* + k b* + l c*: the reciprocal vectors are the rows of the
    // inverse of the matrix whose columns are a, b, c
    let inv = a.structure.lattice.inverse();
    let n = inv.transpose() * nalgebra::Vector3::new(h[0] as f64, h[1] as f64, h[2] as f64);
    if n.z.abs() > 0.8 * n.norm() {
        8.0
    } else {
        VIEW_PITCH_DEG
    }
}

/// The view rotation (rows: screen x right, y up, z towards the viewer) for a yaw and pitch in
/// degrees: c up first, then yaw about the screen's vertical, then pitch about its horizontal.
pub fn view_rotation(yaw_deg: f64, pitch_deg: f64) -> [[f64; 3]; 3] {
    let (sy, cy) = yaw_deg.to_radians().sin_cos();
    let (sp, cp) = pitch_deg.to_radians().sin_cos();
    // base: crystal (x, y, z) -> screen (x, z, -y)
    let base = [[1.0, 0.0, 0.0], [0.0, 0.0, 1.0], [0.0, -1.0, 0.0]];
    let yaw = [[cy, 0.0, sy], [0.0, 1.0, 0.0], [-sy, 0.0, cy]];
    let pitch = [[1.0, 0.0, 0.0], [0.0, cp, -sp], [0.0, sp, cp]];
    mul(pitch, mul(yaw, base))
}

fn mul(a: [[f64; 3]; 3], b: [[f64; 3]; 3]) -> [[f64; 3]; 3] {
    let mut m = [[0.0; 3]; 3];
    for i in 0..3 {
        for j in 0..3 {
            m[i][j] = (0..3).map(|k| a[i][k] * b[k][j]).sum();
        }
    }
    m
}

fn apply(r: &[[f64; 3]; 3], v: [f64; 3]) -> [f64; 3] {
    [0, 1, 2].map(|i| r[i][0] * v[0] + r[i][1] * v[1] + r[i][2] * v[2])
}

/// What the view draws besides the surfaces: atoms (symbol, Cartesian A, drawn radius A), the
/// block's twelve edges and the three axes (from the block's corner along one cell vector).
struct Frame {
    atoms: Vec<(String, [f64; 3], f64)>,
    edges: Vec<([f64; 3], [f64; 3])>,
    corner: [f64; 3],
    axes: [[f64; 3]; 3],
    centre: [f64; 3],
    radius: f64,
}

fn frame(a: &Analysis, s: &[NetworkSurface], cells: [usize; 3]) -> Frame {
    let origin = s
        .first()
        .map(|x| x.block.origin_frac(x.dims))
        .unwrap_or([0.0; 3]);
    let mut atoms = Vec::new();
    for at in &a.model.atoms {
        let (symbol, r) = match at.kind {
            FrameworkKind::Anion(k) => (a.model.anions[k].species.element.symbol(), ANION_RADIUS_A),
            FrameworkKind::Cation(k) => {
                (a.model.cations[k].species.element.symbol(), CATION_RADIUS_A)
            }
        };
        for f in isosurface::images_in_block(at.frac, origin, cells, 1e-6) {
            let c = a.structure.lattice.to_cart(f).0;
            atoms.push((symbol.to_string(), [c.x, c.y, c.z], r));
        }
    }
    let corner = super::mesh::block_corner(a, origin);
    let v = super::mesh::block_vectors(a, cells);
    let at = |i: usize, j: usize, k: usize| -> [f64; 3] {
        [0, 1, 2].map(|x| corner[x] + i as f64 * v[0][x] + j as f64 * v[1][x] + k as f64 * v[2][x])
    };
    let mut edges = Vec::new();
    for p in 0..2 {
        for q in 0..2 {
            edges.push((at(0, p, q), at(1, p, q)));
            edges.push((at(p, 0, q), at(p, 1, q)));
            edges.push((at(p, q, 0), at(p, q, 1)));
        }
    }
    let axes = [0, 1, 2].map(|i| {
        let w = a.structure.lattice.vector(i);
        [w.x, w.y, w.z]
    });
    let far = at(1, 1, 1);
    let centre = [0, 1, 2].map(|x| (corner[x] + far[x]) / 2.0);
    let mut radius: f64 = 1.0;
    for i in 0..2 {
        for j in 0..2 {
            for k in 0..2 {
                let p = at(i, j, k);
                let d = (0..3)
                    .map(|x| (p[x] - centre[x]).powi(2))
                    .sum::<f64>()
                    .sqrt();
                radius = radius.max(d);
            }
        }
    }
    Frame {
        atoms,
        edges,
        corner,
        axes,
        centre,
        radius,
    }
}

/// The lowest network's surface alone, at most `max_triangles`.
fn surfaces_first(a: &Analysis, cells: [usize; 3], max_triangles: usize) -> Option<NetworkSurface> {
    isosurface::network_surfaces(
        &a.landscape.energy,
        &a.summary.networks[..a.summary.networks.len().min(1)],
        a.model.energy_cap,
        isosurface::SurfaceOptions {
            cells,
            max_triangles: Some(max_triangles),
        },
    )
    .into_iter()
    .next()
}

fn network_label(a: &Analysis, s: &NetworkSurface) -> String {
    let orient = a
        .summary
        .networks
        .iter()
        .find(|n| n.dimension == s.dimension)
        .map(|n| {
            n.orientations
                .iter()
                .map(|o| o.words())
                .collect::<Vec<_>>()
                .join(", ")
        })
        .unwrap_or_default();
    format!(
        "{}D network {orient}, surface at {:.2} eV (threshold {:.2} eV + {:.2} eV)",
        s.dimension,
        s.level_ev,
        s.threshold_ev,
        isosurface::MARGIN_EV
    )
}

fn b64(bytes: &[u8]) -> String {
    base64::engine::general_purpose::STANDARD.encode(bytes)
}

/// The scene as JSON for the script.
fn scene_json(a: &Analysis, s: &[NetworkSurface], fr: &Frame) -> String {
    // quantisation box: the block's bounding box grown by one atom radius
    let mut lo = [f64::MAX; 3];
    let mut hi = [f64::MIN; 3];
    let mut grow = |p: [f64; 3]| {
        for k in 0..3 {
            lo[k] = lo[k].min(p[k] - 1.0);
            hi[k] = hi[k].max(p[k] + 1.0);
        }
    };
    for (p, q) in &fr.edges {
        grow(*p);
        grow(*q);
    }
    for n in s {
        for v in &n.mesh.vertices {
            grow(*v);
        }
    }
    let step = (0..3)
        .map(|k| (hi[k] - lo[k]) / 65535.0)
        .fold(0.0, f64::max);
    let q = |x: f64, k: usize| (((x - lo[k]) / step).round().clamp(0.0, 65535.0)) as u16;
    let nets: Vec<_> = s
        .iter()
        .map(|n| {
            let pos: Vec<u8> = n
                .mesh
                .vertices
                .iter()
                .flat_map(|v| [0, 1, 2].map(|k| q(v[k], k)))
                .flat_map(|x| x.to_le_bytes())
                .collect();
            let wide = n.mesh.vertices.len() > 65535;
            let idx: Vec<u8> = n
                .mesh
                .triangles
                .iter()
                .flatten()
                .flat_map(|&i| {
                    if wide {
                        i.to_le_bytes().to_vec()
                    } else {
                        (i as u16).to_le_bytes().to_vec()
                    }
                })
                .collect();
            let c = network_colour(n.dimension);
            json!({
                "dimension": n.dimension,
                "label": network_label(a, n),
                "colour": [c.r, c.g, c.b],
                "vertices": n.mesh.vertices.len(),
                "triangles": n.mesh.triangles.len(),
                "wide": wide,
                "pos": b64(&pos),
                "idx": b64(&idx),
            })
        })
        .collect();
    let atoms: Vec<_> = fr
        .atoms
        .iter()
        .map(|(e, p, r)| {
            let c = element_colour(e);
            json!([
                (p[0] * 1000.0).round() / 1000.0,
                (p[1] * 1000.0).round() / 1000.0,
                (p[2] * 1000.0).round() / 1000.0,
                r,
                c.r,
                c.g,
                c.b
            ])
        })
        .collect();
    let edges: Vec<_> = fr.edges.iter().map(|(p, q)| json!([p, q])).collect();
    let doc = json!({
        "lo": lo,
        "step": step,
        "centre": fr.centre,
        "radius": fr.radius,
        "yaw": default_yaw(a),
        "pitch": default_pitch(a),
        "networks": nets,
        "atoms": atoms,
        "edges": edges,
        "corner": fr.corner,
        "axes": fr.axes,
    });
    // inside <script>: "</" must not appear
    doc.to_string().replace("</", "<\\/")
}

/// The static projection (SVG) of the lowest network with the atoms, edges and axes, from the
/// default view; surfaces flat-shaded and drawn far to near.
fn static_svg(a: &Analysis, s: &[NetworkSurface], fr: &Frame) -> String {
    let (w, h) = (760.0, 560.0);
    let r = view_rotation(default_yaw(a), default_pitch(a));
    let scale = 0.95 * (h / 2.0) / fr.radius;
    let project = |p: [f64; 3]| {
        let v = apply(&r, [0, 1, 2].map(|k| p[k] - fr.centre[k]));
        (w / 2.0 - 60.0 + v[0] * scale, h / 2.0 - v[1] * scale, v[2])
    };
    let light = {
        let l = [0.3f64, 0.5, 1.0];
        let n = (l[0] * l[0] + l[1] * l[1] + l[2] * l[2]).sqrt();
        l.map(|x| x / n)
    };
    // items: (depth, markup)
    let mut items: Vec<(f64, String)> = Vec::new();
    for n in s.iter().take(1) {
        let base = network_colour(n.dimension);
        for t in &n.mesh.triangles {
            let p = t.map(|i| project(n.mesh.vertices[i as usize]));
            let world = t.map(|i| apply(&r, n.mesh.vertices[i as usize]));
            let u = [0, 1, 2].map(|k| world[1][k] - world[0][k]);
            let v = [0, 1, 2].map(|k| world[2][k] - world[0][k]);
            let nn = [
                u[1] * v[2] - u[2] * v[1],
                u[2] * v[0] - u[0] * v[2],
                u[0] * v[1] - u[1] * v[0],
            ];
            let len = (nn[0] * nn[0] + nn[1] * nn[1] + nn[2] * nn[2]).sqrt();
            if len == 0.0 {
                continue;
            }
            let d = ((nn[0] * light[0] + nn[1] * light[1] + nn[2] * light[2]) / len).abs();
            let k = ((0.4 + 0.6 * d) * 12.0).round() / 12.0;
            let c = Rgb::from_unit(
                base.r as f64 / 255.0 * k,
                base.g as f64 / 255.0 * k,
                base.b as f64 / 255.0 * k,
            );
            items.push((
                (p[0].2 + p[1].2 + p[2].2) / 3.0,
                format!(
                    "<path d=\"M{:.1} {:.1}L{:.1} {:.1}L{:.1} {:.1}Z\" fill=\"{}\" stroke=\"{}\" stroke-width=\"0.3\"/>",
                    p[0].0,
                    p[0].1,
                    p[1].0,
                    p[1].1,
                    p[2].0,
                    p[2].1,
                    c.hex(),
                    c.hex()
                ),
            ));
        }
    }
    for (e, p, rad) in &fr.atoms {
        let (x, y, z) = project(*p);
        items.push((
            z,
            format!(
                "<circle cx=\"{x:.1}\" cy=\"{y:.1}\" r=\"{:.1}\" fill=\"{}\" stroke=\"#333333\" stroke-width=\"0.6\"/>",
                rad * scale,
                element_colour(e).hex()
            ),
        ));
    }
    items.sort_by(|x, y| x.0.total_cmp(&y.0));
    let mut svg = Svg::new(w, h);
    svg.rect(0.0, 0.0, w, h, &Style::fill(Rgb::new(0xfb, 0xfc, 0xfd)));
    let edge = Style::stroke(Rgb::new(0x88, 0x88, 0x88), 1.0);
    for (p, q) in &fr.edges {
        let (a0, b0, _) = project(*p);
        let (a1, b1, _) = project(*q);
        svg.line(a0, b0, a1, b1, &edge);
    }
    for (_, m) in &items {
        svg.push_raw(m);
    }
    let (ox, oy, _) = project(fr.corner);
    for (i, name) in ["a", "b", "c"].iter().enumerate() {
        let tip = [0, 1, 2].map(|k| fr.corner[k] + fr.axes[i][k]);
        let (tx, ty, _) = project(tip);
        let st = Style::stroke(Rgb::new(0x22, 0x22, 0x22), 2.0);
        svg.line(ox, oy, tx, ty, &st);
        let (dx, dy) = (tx - ox, ty - oy);
        let l = (dx * dx + dy * dy).sqrt().max(1e-9);
        svg.text(
            tx + 14.0 * dx / l,
            ty + 14.0 * dy / l + 5.0,
            name,
            15.0,
            Anchor::Middle,
            Rgb::new(0x22, 0x22, 0x22),
            None,
        );
    }
    // legend: the surface, then each element once
    let mut y = 28.0;
    let lx = w - 150.0;
    if let Some(n) = s.first() {
        svg.rect(
            lx,
            y - 11.0,
            14.0,
            14.0,
            &Style::fill(network_colour(n.dimension)),
        );
        svg.text(
            lx + 22.0,
            y,
            &format!("{}D network", n.dimension),
            12.0,
            Anchor::Start,
            Rgb::new(0x22, 0x22, 0x22),
            None,
        );
        y += 22.0;
    }
    let mut seen: Vec<String> = Vec::new();
    for (e, _, _) in &fr.atoms {
        if seen.contains(e) {
            continue;
        }
        seen.push(e.clone());
        svg.circle(
            lx + 7.0,
            y - 4.0,
            6.0,
            &Style::filled_outline(element_colour(e), Rgb::new(0x33, 0x33, 0x33), 0.6),
        );
        svg.text(
            lx + 22.0,
            y,
            e,
            12.0,
            Anchor::Start,
            Rgb::new(0x22, 0x22, 0x22),
            None,
        );
        y += 20.0;
    }
    svg.finish()
}

/// The viewer's style rules (added to the report's style sheet).
pub const STYLE: &str = r#"
.v3d .v3d-live { display: none; }
.v3d.webgl .v3d-live { display: block; }
.v3d.webgl .v3d-static { display: none; }
.v3d-stage { position: relative; max-width: 900px; }
.v3d canvas { width: 100%; height: 540px; display: block; border: 1px solid var(--line); cursor: grab; background: #fbfcfd; }
.v3d .axis-label { position: absolute; font: 600 15px sans-serif; color: #222; pointer-events: none; }
.v3d .controls { font-size: 0.9em; margin: 6px 0; }
.v3d .controls label { margin-right: 14px; white-space: nowrap; }
.v3d .swatch { display: inline-block; width: 12px; height: 12px; border: 1px solid #555; vertical-align: -1px; }
@media print { .v3d.webgl .v3d-live { display: none; } .v3d.webgl .v3d-static { display: block; } }
"#;

const SCRIPT: &str = include_str!("viewer.js");

/// The report's section "Channel networks in 3D": empty text when no network percolates.
pub fn section(a: &Analysis) -> String {
    let mut o = String::new();
    let _ = writeln!(o, "<h2 id=\"view3d\">Channel networks in 3D</h2>");
    if a.summary.networks.is_empty() {
        let _ = writeln!(
            o,
            "<p>No network percolates, so there is nothing to draw.</p>"
        );
        return o;
    }
    let cells = report_cells(a);
    let mut view = surfaces(a, cells, Some(VIEW_MAX_TRIANGLES / 3));
    if let Some(first) = surfaces_first(a, cells, VIEW_MAX_TRIANGLES) {
        view[0] = first;
    }
    let still: Vec<NetworkSurface> = surfaces_first(a, cells, STATIC_MAX_TRIANGLES)
        .into_iter()
        .collect();
    let fr = frame(a, &view, cells);
    let _ = writeln!(
        o,
        "<p class=\"note\">Surfaces of the site energy at each network's threshold plus {} eV, \
         around the regions that percolate (closed pockets below that level are left out), over \
         {} x {} x {} cells, capped where the block's faces cut them; framework ions in the \
         figures' colours; the block's edges and the a, b, c axes from its corner. Drag to \
         rotate, scroll to zoom, double-click to reset. <code>hopmap paths FILE --mesh DIR</code> \
         writes these surfaces at full resolution (glTF, PLY, atoms as extended XYZ).</p>",
        isosurface::MARGIN_EV,
        cells[0],
        cells[1],
        cells[2]
    );
    o.push_str(
        "<div class=\"v3d\" id=\"v3d\">\n<div class=\"v3d-live\">\n<div class=\"controls\">",
    );
    for (i, n) in view.iter().enumerate() {
        let c = network_colour(n.dimension);
        let _ = write!(
            o,
            "<label><input type=\"checkbox\" data-net=\"{i}\"{}> <span class=\"swatch\" \
             style=\"background:{}\"></span> {}</label>",
            if i == 0 { " checked" } else { "" },
            c.hex(),
            super::html::esc(&network_label(a, n))
        );
    }
    o.push_str(
        "<label><input type=\"checkbox\" data-atoms=\"1\" checked> framework ions</label></div>\n\
         <div class=\"v3d-stage\"><canvas id=\"v3d-canvas\" aria-label=\"channel networks in 3D\">\
         </canvas></div>\n</div>\n",
    );
    let first = &still[0];
    let _ = writeln!(
        o,
        "<figure class=\"v3d-static\" id=\"fig-view3d\">\n{}<figcaption>The {}D network ({} \
         triangles) from the default view of the interactive figure, shown when it cannot run \
         and in print.</figcaption>\n</figure>",
        super::html::scope_ids(&static_svg(a, &still, &frame(a, &still, cells)), "v3s-"),
        first.dimension,
        first.mesh.triangles.len()
    );
    let _ = writeln!(
        o,
        "<script type=\"application/json\" id=\"v3d-data\">{}</script>\n<script>{}</script>\n</div>",
        scene_json(a, &view, &fr),
        SCRIPT
    );
    o
}
