//! The report's figures, built from an [`Analysis`] with the crate's own SVG library
//! ([`hopmap_plot`]): energy-landscape slices through the lowest channel (heat maps with the
//! framework atoms, sites and saddles near the plane), the energy profile of every channel, and
//! the particle size a C-rate allows.
//!
//! Every figure states its quantities with units on its axes or colour bar, and the slices show
//! the in-plane lattice directions, so that each picture reads without the surrounding text.
//!
//! Slices. The plane is spanned by two lattice vectors **U** and **V** (integer `[uvw]`) and
//! passes through the lowest grid point of the channel that opens first. The picture is one
//! periodic repeat of the plane, `p0 + s U + t V` with `s, t` in `[0, 1)`. When U and V are
//! lattice axes it is sampled at the grid points themselves; otherwise the 3D field is sampled
//! by periodic trilinear interpolation at about the grid spacing. Which plane:
//! - 1D channel along D: the plane of D and another lattice vector, first one lying in the
//!   plane of the 2D layers (when they exist, so the picture shows how channels join), then
//!   the remaining axes;
//! - 2D layers: the layer plane, then a cross-section containing the first layer vector and the
//!   shortest lattice axis out of the layer;
//! - 3D network: the planes of its first and second, and first and third winding vectors.
//!
//! At most two such slices are drawn. A 1D channel also gets a cross-section: the plane of
//! two lattice vectors whose normal lies closest to the channel direction (the a-c plane for a
//! channel along b in a monoclinic cell), which shows the tunnels end-on, as they are drawn by
//! hand for tunnel and block frameworks. Framework atoms, sites and saddles within
//! [`NEAR_PLANE_A`] of the plane are projected onto it.

use hopmap::analysis::Analysis;
use hopmap::grid::Grid;
use hopmap::lattice::Frac;
use hopmap::percolation::{Span, format_indices};
use hopmap_plot::lines::{ProfileMark, SizeRateCurve, energy_profile, size_rate_chart};
use hopmap_plot::{AtomMarker, Figure, FracMarkerSet, HeatMap, MarkerShape, Rgb};
use nalgebra::Vector3;

/// Atoms, sites and saddles closer than this to a slice plane are drawn on it (A).
pub const NEAR_PLANE_A: f64 = 0.8;
/// Default width of the colour scale of a slice above the lowest energy (eV).
pub const SLICE_RANGE_EV: f64 = 2.0;
/// Largest number of samples along one side of a slice.
const MAX_SIDE: usize = 160;
/// C-rates of the size-rate chart (1/h).
const CHART_C_RATES: [f64; 10] = [0.1, 0.2, 0.5, 1.0, 2.0, 5.0, 10.0, 20.0, 50.0, 100.0];

/// One figure of the report.
#[derive(Debug, Clone)]
pub struct ReportFigure {
    /// File-name stem for `--figures DIR`, e.g. "slice-1", "profile-1d-1".
    pub name: String,
    /// A sentence for the HTML caption.
    pub caption: String,
    /// The standalone SVG document.
    pub svg: String,
}

/// Every figure, in report order: slices, profiles, size-rate chart.
pub fn all(a: &Analysis) -> Vec<ReportFigure> {
    let mut v = slices(a);
    v.extend(profiles(a));
    v.extend(size_rate(a));
    v
}

// ------------------------------------------------------------------------------------------
// Slices
// ------------------------------------------------------------------------------------------

/// A lattice plane through a point, spanned by two lattice vectors.
#[derive(Debug, Clone, PartialEq)]
pub struct SlicePlane {
    pub origin: Frac,
    pub u: [i32; 3],
    pub v: [i32; 3],
    /// Repeats of U and V drawn (short vectors are drawn two or three times, so that the
    /// continuation of a channel across the cell edge shows).
    pub u_repeat: i32,
    pub v_repeat: i32,
}

impl SlicePlane {
    /// The lattice vectors of the drawn parallelogram: U and V times their repeats.
    pub fn drawn(&self) -> ([i32; 3], [i32; 3]) {
        (
            self.u.map(|x| x * self.u_repeat),
            self.v.map(|x| x * self.v_repeat),
        )
    }
}

/// Repeats of a lattice vector of `len` A so that the drawing spans about 6 A (at most 3).
fn repeats_for(len: f64) -> i32 {
    ((6.0 / len).ceil() as i32).clamp(1, 3)
}

fn cross_i(a: [i32; 3], b: [i32; 3]) -> [i32; 3] {
    [
        a[1] * b[2] - a[2] * b[1],
        a[2] * b[0] - a[0] * b[2],
        a[0] * b[1] - a[1] * b[0],
    ]
}

fn dot_i(a: [i32; 3], b: [i32; 3]) -> i32 {
    a[0] * b[0] + a[1] * b[1] + a[2] * b[2]
}

fn gcd(a: i32, b: i32) -> i32 {
    if b == 0 { a.abs() } else { gcd(b, a % b) }
}

/// The plane (hkl) of two lattice vectors, primitive, first nonzero component positive.
fn plane_key(u: [i32; 3], v: [i32; 3]) -> [i32; 3] {
    let n = cross_i(u, v);
    let g = gcd(gcd(n[0], n[1]), n[2]).max(1);
    let mut n = n.map(|x| x / g);
    if n.iter().find(|&&x| x != 0).is_some_and(|&x| x < 0) {
        n = n.map(|x| -x);
    }
    n
}

const AXES: [[i32; 3]; 3] = [[1, 0, 0], [0, 1, 0], [0, 0, 1]];
const SMALL: [[i32; 3]; 9] = [
    [1, 0, 0],
    [0, 1, 0],
    [0, 0, 1],
    [1, 1, 0],
    [1, -1, 0],
    [1, 0, 1],
    [1, 0, -1],
    [0, 1, 1],
    [0, 1, -1],
];

fn cart_len(a: &Analysis, v: [i32; 3]) -> f64 {
    a.structure
        .lattice
        .frac_delta_length(Vector3::new(v[0] as f64, v[1] as f64, v[2] as f64))
}

/// The slice planes of the report (two, and a cross-section for a 1D channel), through the lowest
/// point of the channel that opens first (or of the whole cell when nothing percolates).
pub fn slice_planes(a: &Analysis) -> Vec<SlicePlane> {
    let grid = &a.landscape.energy;
    if grid.is_empty() {
        return vec![];
    }
    let p = &a.percolation;
    let first = p.thresholds.iter().flatten().next();
    let origin_voxel = match first {
        Some(t) => t.channel.lowest_point,
        None => lowest_voxel(grid),
    };
    let origin = grid.frac(grid.ijk(origin_voxel.min(grid.len() - 1)));
    let layer = p.threshold(2).map(|t| t.channel.span.clone());
    let mut pairs: Vec<([i32; 3], [i32; 3])> = Vec::new();
    match first.map(|t| &t.channel.span) {
        Some(Span::Line { direction, .. }) => {
            let d = *direction;
            let mut cands: Vec<[i32; 3]> = SMALL
                .iter()
                .copied()
                .filter(|w| cross_i(d, *w) != [0, 0, 0])
                .collect();
            let in_layer = |w: &[i32; 3]| match &layer {
                Some(Span::Plane { normal, .. }) => {
                    dot_i(*normal, d) == 0 && dot_i(*normal, *w) == 0
                }
                _ => false,
            };
            cands.sort_by(|x, y| {
                let kx = (!in_layer(x), !AXES.contains(x), cart_len(a, *x));
                let ky = (!in_layer(y), !AXES.contains(y), cart_len(a, *y));
                kx.partial_cmp(&ky).unwrap_or(std::cmp::Ordering::Equal)
            });
            for w in cands {
                pairs.push((d, w));
            }
        }
        Some(Span::Plane { vectors, normal }) => {
            pairs.push((vectors[0], vectors[1]));
            let mut out: Vec<[i32; 3]> = AXES
                .iter()
                .copied()
                .filter(|w| dot_i(*normal, *w) != 0)
                .collect();
            out.sort_by(|x, y| cart_len(a, *x).total_cmp(&cart_len(a, *y)));
            for w in out {
                pairs.push((vectors[0], w));
            }
        }
        Some(Span::Space { vectors }) => {
            pairs.push((vectors[0], vectors[1]));
            pairs.push((vectors[0], vectors[2]));
        }
        _ => {
            pairs.push((AXES[0], AXES[1]));
            pairs.push((AXES[0], AXES[2]));
        }
    }
    let mut planes: Vec<SlicePlane> = Vec::new();
    let mut keys: Vec<[i32; 3]> = Vec::new();
    for (u, v) in pairs {
        if cross_i(u, v) == [0, 0, 0] {
            continue;
        }
        let k = plane_key(u, v);
        if keys.contains(&k) {
            continue;
        }
        keys.push(k);
        planes.push(oriented(a, origin, u, v));
        if planes.len() == 2 {
            break;
        }
    }
    if let Some(Span::Line { direction, .. }) = first.map(|t| &t.channel.span)
        && let Some((u, v)) = cross_section(a, *direction)
        && !keys.contains(&plane_key(u, v))
    {
        planes.push(oriented(a, origin, u, v));
    }
    planes
}

/// Two short lattice vectors spanning the plane most nearly perpendicular to `d`: the plane
/// whose Cartesian normal makes the smallest angle with d, ties to the smaller drawing.
fn cross_section(a: &Analysis, d: [i32; 3]) -> Option<([i32; 3], [i32; 3])> {
    let m = a.structure.lattice.matrix();
    let cart = |x: [i32; 3]| m * Vector3::new(x[0] as f64, x[1] as f64, x[2] as f64);
    let dc = cart(d).normalize();
    let mut best: Option<(f64, f64, [i32; 3], [i32; 3])> = None;
    for (i, &u) in SMALL.iter().enumerate() {
        for &v in &SMALL[i + 1..] {
            let n = cart(u).cross(&cart(v));
            if n.norm() < 1e-9 || cross_i(u, d) == [0, 0, 0] || cross_i(v, d) == [0, 0, 0] {
                continue;
            }
            // 1 - |cos| of the angle between the normal and d; then the area drawn.
            let off = 1.0 - n.normalize().dot(&dc).abs();
            let area = n.norm();
            let better = match best {
                None => true,
                Some((o, ar, _, _)) => off < o - 1e-6 || (off < o + 1e-6 && area < ar - 1e-6),
            };
            if better {
                best = Some((off, area, u, v));
            }
        }
    }
    best.map(|(_, _, u, v)| (u, v))
}

/// The slice of U and V through `origin`, short vectors repeated, the longer side across.
fn oriented(a: &Analysis, origin: Frac, u: [i32; 3], v: [i32; 3]) -> SlicePlane {
    let (ru, rv) = (repeats_for(cart_len(a, u)), repeats_for(cart_len(a, v)));
    // The longer side runs across the page, so that the picture is wide rather than tall.
    if cart_len(a, v) * rv as f64 > 1.3 * cart_len(a, u) * ru as f64 {
        SlicePlane {
            origin,
            u: v,
            v: u,
            u_repeat: rv,
            v_repeat: ru,
        }
    } else {
        SlicePlane {
            origin,
            u,
            v,
            u_repeat: ru,
            v_repeat: rv,
        }
    }
}

fn lowest_voxel(grid: &Grid) -> usize {
    grid.values
        .iter()
        .enumerate()
        .min_by(|x, y| x.1.total_cmp(y.1))
        .map(|(i, _)| i)
        .unwrap_or(0)
}

/// The value of a periodic grid at a fractional position, by trilinear interpolation between
/// the eight surrounding grid points (point (i, j, k) sits at (i/na, j/nb, k/nc)).
pub fn sample_periodic(grid: &Grid, f: Frac) -> f32 {
    let [na, nb, nc] = grid.dims;
    if na == 0 || nb == 0 || nc == 0 {
        return f32::NAN;
    }
    let mut idx = [[0usize; 2]; 3];
    let mut w = [0f64; 3];
    for (ax, n) in [na, nb, nc].into_iter().enumerate() {
        let x = f.0[ax] * n as f64;
        let x0 = x.floor();
        w[ax] = x - x0;
        let i0 = (x0 as i64).rem_euclid(n as i64) as usize;
        idx[ax] = [i0, (i0 + 1) % n];
    }
    let mut acc = 0.0f64;
    for (di, wi) in [(0, 1.0 - w[0]), (1, w[0])] {
        for (dj, wj) in [(0, 1.0 - w[1]), (1, w[1])] {
            for (dk, wk) in [(0, 1.0 - w[2]), (1, w[2])] {
                let weight = wi * wj * wk;
                if weight > 0.0 {
                    acc += weight * grid.get(idx[0][di], idx[1][dj], idx[2][dk]) as f64;
                }
            }
        }
    }
    acc as f32
}

/// The in-plane picture of a plane: Cartesian in-plane vectors of U and V (U along x), the
/// unit normal, and the Cartesian U, V.
struct PlaneFrame {
    uc: Vector3<f64>,
    vc: Vector3<f64>,
    normal: Vector3<f64>,
    u2: [f64; 2],
    v2: [f64; 2],
}

fn plane_frame(a: &Analysis, plane: &SlicePlane) -> PlaneFrame {
    let m = a.structure.lattice.matrix();
    let to_v = |x: [i32; 3]| Vector3::new(x[0] as f64, x[1] as f64, x[2] as f64);
    let (u, v) = plane.drawn();
    let uc = m * to_v(u);
    let vc = m * to_v(v);
    let n = uc.cross(&vc);
    let normal = n / n.norm();
    let ex = uc / uc.norm();
    let ey = normal.cross(&ex);
    PlaneFrame {
        uc,
        vc,
        normal,
        u2: [uc.norm(), 0.0],
        v2: [vc.dot(&ex), vc.dot(&ey)],
    }
}

/// In-plane coordinates (s, t) in [0, 1) of the images of `f` within `tol` (A) of the plane,
/// deduplicated.
fn near_plane(
    a: &Analysis,
    plane: &SlicePlane,
    fr: &PlaneFrame,
    f: Frac,
    tol: f64,
) -> Vec<[f64; 2]> {
    let m = a.structure.lattice.matrix();
    // Solve x = s U + t V + h n for (s, t, h).
    let basis = nalgebra::Matrix3::from_columns(&[fr.uc, fr.vc, fr.normal]);
    let Some(inv) = basis.try_inverse() else {
        return vec![];
    };
    let range = 4;
    let mut out: Vec<[f64; 2]> = Vec::new();
    let base = f.0 - plane.origin.0;
    for i in -range..=range {
        for j in -range..=range {
            for k in -range..=range {
                let d = base + Vector3::new(i as f64, j as f64, k as f64);
                let x = m * d;
                let c = inv * x;
                if c[2].abs() > tol {
                    continue;
                }
                let w = |v: f64| {
                    let r = v - v.floor();
                    if r > 1.0 - 1e-9 { 0.0 } else { r }
                };
                let st = [w(c[0]), w(c[1])];
                if !out
                    .iter()
                    .any(|q| (q[0] - st[0]).abs() < 1e-4 && (q[1] - st[1]).abs() < 1e-4)
                {
                    out.push(st);
                }
            }
        }
    }
    out
}

/// Distance (A) in the plane between two points given in slice coordinates (s, t), not
/// taking periodicity into account.
fn in_plane_distance(fr: &PlaneFrame, p: [f64; 2], q: [f64; 2]) -> f64 {
    let (ds, dt) = (p[0] - q[0], p[1] - q[1]);
    let x = ds * fr.u2[0] + dt * fr.v2[0];
    let y = ds * fr.u2[1] + dt * fr.v2[1];
    (x * x + y * y).sqrt()
}

fn axis_name(v: [i32; 3]) -> String {
    match v {
        [1, 0, 0] => "a [100]".into(),
        [0, 1, 0] => "b [010]".into(),
        [0, 0, 1] => "c [001]".into(),
        _ => format!("[{}]", format_indices(v)),
    }
}

/// The short label of a lattice direction next to its arrow: "a", "b", "c" or "[uvw]".
fn arrow_name(v: [i32; 3]) -> String {
    match v {
        [1, 0, 0] => "a".into(),
        [0, 1, 0] => "b".into(),
        [0, 0, 1] => "c".into(),
        _ => format!("[{}]", format_indices(v)),
    }
}

/// Where the plane sits, in words: "z = 0.250" for an axis plane, else the point it passes.
fn plane_position(plane: &SlicePlane) -> String {
    let k = plane_key(plane.u, plane.v);
    let o = plane.origin.0;
    match k {
        [0, 0, 1] => format!("z = {:.3}", o.z),
        [0, 1, 0] => format!("y = {:.3}", o.y),
        [1, 0, 0] => format!("x = {:.3}", o.x),
        _ => format!(
            "the ({}) plane through ({:.3}, {:.3}, {:.3})",
            format_indices(k),
            o.x,
            o.y,
            o.z
        ),
    }
}

/// The colour range of the slices: from the lowest energy up `SLICE_RANGE_EV`, or further when
/// the first channel's barrier would not fit (rounded up to 0.5 eV), never past the cap.
pub fn slice_range_ev(a: &Analysis) -> (f64, f64) {
    let lo = a
        .percolation
        .lowest
        .map(|x| x as f64)
        .unwrap_or_else(|| a.landscape.energy.min_max().0 as f64);
    let barrier = a
        .percolation
        .thresholds
        .iter()
        .flatten()
        .next()
        .map(|t| t.barrier as f64)
        .unwrap_or(0.0);
    let mut span = SLICE_RANGE_EV;
    if barrier + 0.5 > span {
        span = ((barrier + 0.5) * 2.0).ceil() / 2.0;
    }
    let hi = (lo + span).min(a.model.energy_cap);
    (lo, if hi > lo { hi } else { lo + 1.0 })
}

/// The energy of the first percolation threshold (eV): the level whose open sites and hops
/// the slices mark.
fn first_level(a: &Analysis) -> Option<f64> {
    a.percolation
        .thresholds
        .iter()
        .flatten()
        .next()
        .map(|t| t.energy as f64)
}

fn element_of_atom(a: &Analysis, i: usize) -> String {
    use hopmap::landscape::FrameworkKind;
    match a.model.atoms[i].kind {
        FrameworkKind::Anion(k) => a.model.anions[k].species.element.symbol().to_string(),
        FrameworkKind::Cation(k) => a.model.cations[k].species.element.symbol().to_string(),
    }
}

/// One heat-map slice as a figure.
pub fn slice_figure(a: &Analysis, plane: &SlicePlane) -> Figure {
    let grid = &a.landscape.energy;
    let fr = plane_frame(a, plane);
    let spacing = {
        let s = grid.spacing();
        (s[0] + s[1] + s[2]) / 3.0
    };
    // Along a lattice axis drawn r times, r x (grid points) samples hit the grid points.
    let side = |v: [i32; 3], r: i32, len: f64| -> usize {
        match AXES.iter().position(|x| *x == v) {
            Some(ax) if grid.dims[ax] * r as usize <= MAX_SIDE => grid.dims[ax] * r as usize,
            _ => ((len / spacing).ceil() as usize).clamp(8, MAX_SIDE),
        }
    };
    let nu = side(plane.u, plane.u_repeat, fr.uc.norm());
    let nv = side(plane.v, plane.v_repeat, fr.vc.norm());
    let (du, dv) = plane.drawn();
    let du = Vector3::new(du[0] as f64, du[1] as f64, du[2] as f64);
    let dv = Vector3::new(dv[0] as f64, dv[1] as f64, dv[2] as f64);
    let mut values = Vec::with_capacity(nu * nv);
    for j in 0..nv {
        for i in 0..nu {
            let f = plane.origin.0 + du * (i as f64 / nu as f64) + dv * (j as f64 / nv as f64);
            values.push(sample_periodic(grid, Frac(f)));
        }
    }
    let (lo, hi) = slice_range_ev(a);
    let mut map = HeatMap::new(values, nu, nv, fr.u2, fr.v2)
        .with_unit("Site energy", "eV")
        .with_scale(lo, hi)
        .with_direction_labels(arrow_name(plane.u), arrow_name(plane.v));
    for i in 0..a.model.atoms.len() {
        let el = element_of_atom(a, i);
        for st in near_plane(a, plane, &fr, a.model.atoms[i].frac, NEAR_PLANE_A) {
            map.atoms.push(AtomMarker {
                frac: st,
                element: el.clone(),
            });
        }
    }
    if let Some(net) = &a.network {
        let top = first_level(a).unwrap_or(hi).min(hi);
        let mut sites: Vec<([f64; 2], Option<String>)> = Vec::new();
        for s in net.sites.iter().filter(|s| (s.energy as f64) <= top + 1e-4) {
            for st in near_plane(a, plane, &fr, s.frac, NEAR_PLANE_A) {
                if !sites
                    .iter()
                    .any(|(q, _)| in_plane_distance(&fr, *q, st) < 0.3)
                {
                    sites.push((st, Some(format!("S{}", s.orbit))));
                }
            }
        }
        if sites.len() > 16 {
            for s in &mut sites {
                s.1 = None;
            }
        }
        let mut saddles: Vec<([f64; 2], Option<String>)> = Vec::new();
        for h in net.hops.iter().filter(|h| {
            (h.saddle_energy as f64) <= top + 1e-4 && h.length >= crate::html::SHORT_HOP_A
        }) {
            for st in near_plane(a, plane, &fr, h.saddle, NEAR_PLANE_A) {
                let close = saddles
                    .iter()
                    .any(|(q, _)| in_plane_distance(&fr, *q, st) < 0.3);
                if !close {
                    saddles.push((st, None));
                }
            }
        }
        if !sites.is_empty() {
            map.marker_sets.push(FracMarkerSet {
                legend: "sites".into(),
                shape: MarkerShape::Circle,
                colour: Rgb::new(255, 255, 255),
                points: sites,
            });
        }
        if !saddles.is_empty() {
            map.marker_sets.push(FracMarkerSet {
                legend: "saddles".into(),
                shape: MarkerShape::TriangleUp,
                colour: Rgb::new(0xd5, 0x5e, 0x00),
                points: saddles,
            });
        }
    }
    // Size: the cell shape decides the aspect; keep the figure between 560 and 900 px wide.
    let (w_a, h_a) = {
        let xs = [0.0, fr.u2[0], fr.v2[0], fr.u2[0] + fr.v2[0]];
        let ys = [0.0, fr.u2[1], fr.v2[1], fr.u2[1] + fr.v2[1]];
        let span = |v: [f64; 4]| {
            v.iter().cloned().fold(f64::MIN, f64::max) - v.iter().cloned().fold(f64::MAX, f64::min)
        };
        (span(xs), span(ys))
    };
    let map_w = 600.0f64;
    let map_h = (map_w * h_a / w_a).clamp(220.0, 620.0);
    let map_w = (map_h * w_a / h_a).min(600.0);
    let width = (map_w + 190.0).max(560.0);
    let height = map_h + 130.0;
    let ion = a.model.probe.element.symbol();
    Figure::heatmap(width, height, map).with_title(format!(
        "{ion}+ site energy in the plane of {} and {}, {}{}",
        axis_name(plane.u),
        axis_name(plane.v),
        plane_position(plane),
        repeats_words(plane)
    ))
}

/// ", 2 x 1 cells" when a vector is drawn more than once.
fn repeats_words(plane: &SlicePlane) -> String {
    if plane.u_repeat == 1 && plane.v_repeat == 1 {
        String::new()
    } else {
        format!(" ({} x {} repeats)", plane.u_repeat, plane.v_repeat)
    }
}

/// The slice figures.
pub fn slices(a: &Analysis) -> Vec<ReportFigure> {
    let (lo, hi) = slice_range_ev(a);
    let first = a.percolation.thresholds.iter().flatten().next();
    let what = match first {
        Some(t) => format!(
            "through the lowest point of the first channel to open ({}, at {:.3} eV)",
            t.channel.span, t.energy
        ),
        None => "through the lowest point of the cell (nothing percolates)".to_string(),
    };
    // the direction of a 1D channel, to name the slice across it
    let channel = first.and_then(|t| match &t.channel.span {
        Span::Line { direction, .. } => Some(*direction),
        _ => None,
    });
    slice_planes(a)
        .iter()
        .enumerate()
        .map(|(i, plane)| ReportFigure {
            name: format!("slice-{}", i + 1),
            caption: format!(
                "{}Site energy of the probe ion in the plane of {} and {}, {}, {what}. Colour scale \
                 from the lowest energy {:.2} eV to {:.2} eV (lowest + {:.1} eV); higher energies \
                 take the top colour. Framework ions within {NEAR_PLANE_A} Å of the plane are \
                 projected onto it, and so are the sites and hop saddles open at the first \
                 threshold ({}); site labels S<i>n</i> refer to the orbits of the site table.",
                match channel {
                    Some(d) if dot_i(plane_key(plane.u, plane.v), d) != 0 => format!(
                        "Cross-section of the channels along [{}], seen end-on. ",
                        format_indices(d)
                    ),
                    _ => String::new(),
                },
                axis_name(plane.u),
                axis_name(plane.v),
                plane_position(plane),
                lo,
                hi,
                hi - lo,
                first_level(a)
                    .map(|e| format!("{e:.3} eV"))
                    .unwrap_or_else(|| "none reached".into())
            ),
            svg: slice_figure(a, plane).to_svg(),
        })
        .collect()
}

// ------------------------------------------------------------------------------------------
// Profiles
// ------------------------------------------------------------------------------------------

/// Label of the network site a profile voxel drains to: the structure's label when it has
/// one, else "S" and the orbit number.
fn site_label(a: &Analysis, voxel: usize) -> String {
    let Some(net) = &a.network else {
        return String::new();
    };
    match net.site_of_voxel(voxel) {
        Some(s) => {
            let site = &net.sites[s];
            match &site.label {
                Some(l) => format!("{l} (S{})", site.orbit),
                None => format!("S{}", site.orbit),
            }
        }
        None => String::new(),
    }
}

/// "1D", "1D and 2D", "1D, 2D and 3D".
fn and_list(items: &[String]) -> String {
    match items {
        [] => String::new(),
        [x] => x.clone(),
        [init @ .., last] => format!("{} and {last}", init.join(", ")),
    }
}

/// Keeps the label of a mark only where it does not crowd a mark labelled before it: marks are
/// visited by decreasing priority and a label needs `gap` (A of path) to the nearest kept one.
fn thin_labels(marks: &mut [ProfileMark], gap: f64, priority: impl Fn(&ProfileMark) -> f64) {
    let mut order: Vec<usize> = (0..marks.len()).collect();
    order.sort_by(|&i, &j| priority(&marks[j]).total_cmp(&priority(&marks[i])));
    let mut kept: Vec<f64> = Vec::new();
    for i in order {
        let x = marks[i].path_length_a;
        if kept.iter().any(|k| (k - x).abs() < gap) {
            marks[i].label.clear();
        } else {
            kept.push(x);
        }
    }
}

/// The energy profile figures, one per distinct channel profile: a path that is the lowest
/// repeat of several networks (e.g. the 1D channel that is also the cheapest direction of the
/// 3D network) is drawn once.
pub fn profiles(a: &Analysis) -> Vec<ReportFigure> {
    // distinct profiles, with the dimensions of the networks they belong to
    let mut distinct: Vec<(&hopmap::network::Profile, Vec<u8>)> = Vec::new();
    for p in a.profiles.iter().filter(|p| !p.points.is_empty()) {
        let same = distinct.iter_mut().find(|(q, _)| {
            q.translation == p.translation
                && (q.bottleneck - p.bottleneck).abs() < 1e-5
                && (q.length - p.length).abs() < 1e-3
        });
        match same {
            Some((_, dims)) => {
                if !dims.contains(&p.dimension) {
                    dims.push(p.dimension);
                }
            }
            None => distinct.push((p, vec![p.dimension])),
        }
    }
    let mut out = Vec::new();
    let mut count = [0usize; 4];
    let ion = a.model.probe.element.symbol();
    for (p, dims) in distinct {
        let lowest = p
            .points
            .iter()
            .map(|q| q.energy)
            .fold(f32::INFINITY, f32::min) as f64;
        let line: Vec<(f64, f64)> = p
            .points
            .iter()
            .map(|q| (q.distance, q.energy as f64))
            .collect();
        let gap = (p.length / 14.0).max(0.3);
        let mut saddles: Vec<ProfileMark> = p
            .saddles()
            .map(|q| ProfileMark {
                path_length_a: q.distance,
                energy_ev: q.energy as f64,
                label: format!("+{:.2} eV", q.energy as f64 - lowest),
            })
            .collect();
        thin_labels(&mut saddles, gap, |m| m.energy_ev);
        let mut sites: Vec<ProfileMark> = p
            .sites()
            .map(|q| ProfileMark {
                path_length_a: q.distance,
                energy_ev: q.energy as f64,
                label: site_label(a, q.voxel),
            })
            .collect();
        thin_labels(&mut sites, gap, |m| -m.energy_ev);
        let mut plot = energy_profile(&line, &sites, &saddles);
        for m in &mut plot.markers {
            for pt in &mut m.points {
                if pt.2.as_deref() == Some("") {
                    pt.2 = None;
                }
            }
        }
        plot.x.unit = "Å".into();
        plot.y.quantity = "Site energy".into();
        // Room above the highest point for the labels.
        let (ymin, ymax) = line
            .iter()
            .fold((f64::INFINITY, f64::NEG_INFINITY), |(l, h), &(_, y)| {
                (l.min(y), h.max(y))
            });
        if ymax > ymin {
            let pad = (ymax - ymin) * 0.18;
            plot.y = plot.y.clone().with_range(ymin - pad * 0.3, ymax + pad);
        }
        let d = (p.dimension as usize).min(3);
        count[d] += 1;
        let networks = and_list(&dims.iter().map(|d| format!("{d}D")).collect::<Vec<_>>());
        let title = format!(
            "{ion}+ along the {} network{}: one repeat [{}], {:.2} Å of path",
            networks,
            if dims.len() > 1 { "s" } else { "" },
            format_indices(p.translation),
            p.length
        );
        let fig = Figure::lines(760.0, 380.0, plot).with_title(title);
        out.push(ReportFigure {
            name: format!("profile-{}d-{}", p.dimension, count[d]),
            caption: format!(
                "Site energy along the lowest path from the lowest point of the {} network{} to \
                 its image one lattice translation [{}] away ({:.2} Å of path). Circles: sites \
                 (minima along the path, labelled with their orbit); triangles: saddles, labelled \
                 with their height above the lowest point of the path (labels thinned where they \
                 would overlap). Bottleneck {:.3} eV, i.e. {:.3} eV above the lowest point.",
                networks,
                if dims.len() > 1 { "s" } else { "" },
                format_indices(p.translation),
                p.length,
                p.bottleneck,
                p.bottleneck as f64 - lowest
            ),
            svg: fig.to_svg(),
        });
    }
    out
}

// ------------------------------------------------------------------------------------------
// Rate
// ------------------------------------------------------------------------------------------

/// Particles smaller than this (um) are not worth a curve or a table.
pub const NEGLIGIBLE_UM: f64 = 1e-3;

/// The largest particle (um) a 1C charge fills through this network, when it is below
/// [`NEGLIGIBLE_UM`] (bulk transport through the network is then negligible).
pub fn negligible_at_1c(t: &hopmap::analysis::ChannelTransport) -> Option<f64> {
    let rows = hopmap::transport::rate_table(t.diffusion_m2_s, t.dimension, &[1.0]).ok()?;
    let x = rows.first()?.max_particle_diameter_um;
    (x < NEGLIGIBLE_UM).then_some(x)
}

/// The largest particle (um) that bulk diffusion charges against C-rate, one line per network.
pub fn size_rate(a: &Analysis) -> Option<ReportFigure> {
    let curves: Vec<SizeRateCurve> = a
        .transport
        .iter()
        .filter(|t| negligible_at_1c(t).is_none())
        .filter_map(|t| {
            let rows = hopmap::transport::rate_table(t.diffusion_m2_s, t.dimension, &CHART_C_RATES)
                .ok()?;
            Some(SizeRateCurve {
                label: format!(
                    "{}D, Ea {:.2} eV, D(298 K) {:.1e} m²/s",
                    t.dimension, t.barrier_ev, t.diffusion_m2_s
                ),
                points: rows
                    .iter()
                    .map(|r| (r.c_rate, r.max_particle_diameter_um))
                    .collect(),
            })
        })
        .collect();
    if curves.is_empty() {
        return None;
    }
    let mut plot = size_rate_chart(&curves);
    // The lines fall to the right: the top right corner is free for the legend.
    plot.legend = hopmap_plot::LegendPosition::TopRight;
    // A shade that differs from every line colour.
    for r in &mut plot.regions {
        r.colour = Rgb::new(0x9e, 0xc9, 0xe2);
        r.opacity = 0.45;
    }
    plot.y.unit = "µm".into();
    let ion = a.model.probe.element.symbol();
    let fig = Figure::lines(760.0, 460.0, plot).with_title(format!(
        "Largest {ion}+ host particle that bulk diffusion charges in time"
    ));
    let first = a.transport.iter().find(|t| negligible_at_1c(t).is_none())?;
    let left_out: Vec<String> = a
        .transport
        .iter()
        .filter(|t| negligible_at_1c(t).is_some())
        .map(|t| format!("{}D", t.dimension))
        .collect();
    Some(ReportFigure {
        name: "size-rate".into(),
        caption: format!(
            "Largest particle diameter 2 sqrt(2 d D t) that bulk diffusion fills in the charge \
             time t = 3600/n s of C-rate n, for each percolating network (d its dimension). In \
             the shaded region below the {}D line bulk diffusion is fast enough and no longer \
             limits the rate. Upper bounds from bulk transport alone (hopping model, dilute \
             limit).{}",
            first.dimension,
            if left_out.is_empty() {
                String::new()
            } else {
                format!(
                    " Not drawn: the {} network{}, where even a 1C charge fills less than {} nm.",
                    left_out.join(" and "),
                    if left_out.len() > 1 { "s" } else { "" },
                    NEGLIGIBLE_UM * 1000.0
                )
            }
        ),
        svg: fig.to_svg(),
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use hopmap::lattice::{CellParameters, Lattice};

    #[test]
    fn trilinear_sampling_hits_grid_points_and_interpolates_between() {
        let lat = Lattice::from_parameters(CellParameters {
            a: 4.0,
            b: 4.0,
            c: 4.0,
            alpha: 90.0,
            beta: 90.0,
            gamma: 90.0,
        })
        .unwrap();
        let mut g = Grid::new(lat, [4, 4, 4], 0.0);
        let i = g.index(1, 2, 3);
        g.values[i] = 8.0;
        assert_eq!(sample_periodic(&g, Frac::new(0.25, 0.5, 0.75)), 8.0);
        // half way to a zero neighbour
        assert!((sample_periodic(&g, Frac::new(0.375, 0.5, 0.75)) - 4.0).abs() < 1e-5);
        // periodic: one lattice vector away is the same point
        assert_eq!(sample_periodic(&g, Frac::new(1.25, -0.5, 0.75)), 8.0);
    }

    #[test]
    fn plane_keys_are_primitive_miller_indices() {
        assert_eq!(plane_key([1, 0, 0], [0, 1, 0]), [0, 0, 1]);
        assert_eq!(plane_key([0, 1, 0], [1, 0, 0]), [0, 0, 1]);
        assert_eq!(plane_key([1, 1, 0], [0, 0, 2]), [1, -1, 0]);
    }
}
