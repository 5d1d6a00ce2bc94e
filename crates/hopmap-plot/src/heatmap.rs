//! Heat maps of a 2D slice of a periodic grid, drawn in the true shape of the cell.
//!
//! The slice is spanned by two in-plane lattice vectors **u** and **v** given in Cartesian
//! angstrom within the plane (u usually along x). Value `(i, j)` sits at fractional position
//! `(i/nu, j/nv)` of the slice, as grid points do in hopmap, and is drawn as the parallelogram
//! of one voxel centred on that point; the picture is clipped to the cell outline, so the half
//! voxels beyond one edge are exactly the ones missing at the opposite edge. Both directions use
//! the same scale (angles and lengths are true), y pointing up the page.
//!
//! The colour bar states the colour map, the scale (linear, from `lo` to `hi` in the map's unit)
//! and whether values were clamped. An orientation key under the map shows the directions of u
//! and v with their labels and a scale bar in A.

use super::colormap::{Clamp, Colormap, Rgb, ValueScale, element_colour};
use super::svg::{Anchor, Style, Svg, escape_xml, num};
use super::{
    Area, FONT, INK, LegendGlyph, MarkerShape, draw_legend_at, draw_marker, linear_ticks,
    nice_number, nice_step, text_width,
};
use std::fmt::Write;

/// An atom drawn on the map: in-plane fractional position, element symbol (its colour comes
/// from the element, listed in a small legend).
#[derive(Debug, Clone, PartialEq)]
pub struct AtomMarker {
    pub frac: [f64; 2],
    pub element: String,
}

/// Marked points in fractional coordinates of the slice, e.g. sites or saddles.
#[derive(Debug, Clone, PartialEq)]
pub struct FracMarkerSet {
    pub legend: String,
    pub shape: MarkerShape,
    pub colour: Rgb,
    pub points: Vec<([f64; 2], Option<String>)>,
}

/// A heat map of `nu x nv` values on an oblique 2D cell.
#[derive(Debug, Clone, PartialEq)]
pub struct HeatMap {
    /// Values, `values[i + nu * j]` at fractional (i/nu, j/nv). NaN is drawn grey ("no value").
    pub values: Vec<f32>,
    pub nu: usize,
    pub nv: usize,
    /// In-plane lattice vectors, Cartesian A within the plane.
    pub u_vector_a: [f64; 2],
    pub v_vector_a: [f64; 2],
    /// Labels of the two directions in the orientation key, e.g. "a" and "b" or "\[100\]".
    pub u_label: String,
    pub v_label: String,
    pub colormap: Colormap,
    /// Colour scale; `None` spans the finite data.
    pub scale: Option<ValueScale>,
    /// Quantity and unit of the values, shown on the colour bar, e.g. ("E", "eV").
    pub quantity: String,
    pub unit: String,
    pub atoms: Vec<AtomMarker>,
    pub marker_sets: Vec<FracMarkerSet>,
    /// Fractional length of the lattice vector drawn along u (and v): 1 for one cell, 2 when
    /// the vector is drawn twice; the edge ticks are labelled in these units.
    pub u_frac_span: f64,
    pub v_frac_span: f64,
    /// Fractional coordinate at the cell's origin corner along u (and v), e.g. 0.25 for a
    /// slice that starts at x = 0.25; the edge ticks read `start + t x span`.
    pub u_frac_start: f64,
    pub v_frac_start: f64,
}

/// Font sizes of the map (px at the figure's own size; figures are drawn 560-900 px wide and
/// shown at that size or larger, so nothing on them is smaller than 11 px).
const LABEL_FONT: f64 = 12.0;
const TICK_FONT: f64 = 12.0;
const NOTE_FONT: f64 = 11.0;

impl HeatMap {
    /// A heat map with viridis, an automatic scale and no overlays. Values shorter than
    /// `nu * nv` are padded with NaN, longer ones cut.
    pub fn new(
        mut values: Vec<f32>,
        nu: usize,
        nv: usize,
        u_vector_a: [f64; 2],
        v_vector_a: [f64; 2],
    ) -> Self {
        values.resize(nu * nv, f32::NAN);
        HeatMap {
            values,
            nu,
            nv,
            u_vector_a,
            v_vector_a,
            u_label: "a".into(),
            v_label: "b".into(),
            colormap: Colormap::Viridis,
            scale: None,
            quantity: "E".into(),
            unit: "eV".into(),
            atoms: Vec::new(),
            marker_sets: Vec::new(),
            u_frac_span: 1.0,
            v_frac_span: 1.0,
            u_frac_start: 0.0,
            v_frac_start: 0.0,
        }
    }

    pub fn with_unit(mut self, quantity: impl Into<String>, unit: impl Into<String>) -> Self {
        self.quantity = quantity.into();
        self.unit = unit.into();
        self
    }
    pub fn with_scale(mut self, lo: f64, hi: f64) -> Self {
        self.scale = Some(ValueScale::new(lo, hi));
        self
    }
    pub fn with_direction_labels(mut self, u: impl Into<String>, v: impl Into<String>) -> Self {
        self.u_label = u.into();
        self.v_label = v.into();
        self
    }

    fn colour_bar_label(&self) -> String {
        if self.unit.is_empty() {
            self.quantity.clone()
        } else {
            format!("{} ({})", self.quantity, self.unit)
        }
    }

    pub(crate) fn draw(&self, svg: &mut Svg, frame: Area) {
        let right = 150.0;
        // room below the map for the u ticks and the orientation key, left of it for the v ticks
        let key_h = 86.0;
        let area = Area {
            x: frame.x + 44.0,
            y: frame.y + 6.0,
            w: (frame.w - right - 58.0).max(10.0),
            h: (frame.h - key_h - 12.0).max(10.0),
        };
        let [ux, uy] = self.u_vector_a;
        let [vx, vy] = self.v_vector_a;
        let ok = [ux, uy, vx, vy].iter().all(|v| v.is_finite()) && (ux * vy - uy * vx).abs() > 1e-9;
        if !ok || self.nu == 0 || self.nv == 0 {
            svg.text(
                area.x + area.w / 2.0,
                area.y + area.h / 2.0,
                "no map: the in-plane cell or the grid is empty",
                FONT,
                Anchor::Middle,
                INK,
                None,
            );
            return;
        }
        // Fit the parallelogram into the area with one scale for both directions.
        let corners = [(0.0, 0.0), (ux, uy), (ux + vx, uy + vy), (vx, vy)];
        let (mut xmin, mut xmax, mut ymin, mut ymax) = (f64::MAX, f64::MIN, f64::MAX, f64::MIN);
        for (x, y) in corners {
            xmin = xmin.min(x);
            xmax = xmax.max(x);
            ymin = ymin.min(y);
            ymax = ymax.max(y);
        }
        let s = (area.w / (xmax - xmin)).min(area.h / (ymax - ymin));
        let ox = area.x + (area.w - s * (xmax - xmin)) / 2.0 - s * xmin;
        let oy = area.y + area.h - (area.h - s * (ymax - ymin)) / 2.0 + s * ymin;
        let to_px = |f: [f64; 2]| {
            (
                ox + s * (ux * f[0] + vx * f[1]),
                oy - s * (uy * f[0] + vy * f[1]),
            )
        };
        let outline: Vec<(f64, f64)> = [[0.0, 0.0], [1.0, 0.0], [1.0, 1.0], [0.0, 1.0]]
            .into_iter()
            .map(to_px)
            .collect();

        // Raster: one rect per run of equal colour along u, in voxel-index space, mapped to the
        // cell by the group transform.
        let scale = self
            .scale
            .unwrap_or_else(|| ValueScale::from_data(&self.values));
        let (nu, nv) = (self.nu as f64, self.nv as f64);
        let transform = format!(
            "matrix({} {} {} {} {} {})",
            fmt6(s * ux / nu),
            fmt6(-s * uy / nu),
            fmt6(s * vx / nv),
            fmt6(-s * vy / nv),
            fmt6(ox),
            fmt6(oy)
        );
        let clip = svg.clip_polygon(&outline);
        svg.open_group(Some(&clip), None, Some("heatmap"));
        svg.open_group(None, Some(&transform), None);
        let (mut below, mut above) = (false, false);
        let mut raster = String::new();
        // Voxels are centred on the grid points, so column 0 and row 0 straddle the cell edge.
        // One extra column and row (the periodic images of column 0 and row 0) cover the strip
        // next to the far edges; the clip path trims everything to the cell outline.
        for j in 0..=self.nv {
            let mut i = 0;
            while i <= self.nu {
                let (colour, c) = self.colour_of(&scale, i, j);
                below |= c == Clamp::Below;
                above |= c == Clamp::Above;
                let mut k = i + 1;
                while k <= self.nu {
                    let (ck, cl) = self.colour_of(&scale, k, j);
                    if ck != colour {
                        break;
                    }
                    below |= cl == Clamp::Below;
                    above |= cl == Clamp::Above;
                    k += 1;
                }
                // A small overlap hides hairline seams between neighbouring rects.
                let _ = writeln!(
                    raster,
                    "<rect x=\"{}\" y=\"{}\" width=\"{}\" height=\"1.04\" fill=\"{}\"/>",
                    num(i as f64 - 0.5),
                    num(j as f64 - 0.5),
                    num((k - i) as f64 + 0.04),
                    colour.hex()
                );
                i = k;
            }
        }
        svg.push_raw(raster.trim_end());
        svg.close_group();
        svg.close_group();
        svg.polygon(&outline, &Style::stroke(INK, 1.2));

        // Overlays: atoms, then marker sets (sites, saddles) on top.
        let mut elements: Vec<String> = Vec::new();
        for a in &self.atoms {
            if !elements.contains(&a.element) {
                elements.push(a.element.clone());
            }
        }
        elements.sort();
        // each element keeps its own colour in every figure (colormap::element_colour)
        for a in &self.atoms {
            for f in periodic_images(a.frac) {
                let (x, y) = to_px(f);
                svg.circle(
                    x,
                    y,
                    5.0,
                    &Style::filled_outline(element_colour(&a.element), INK, 0.8),
                );
            }
        }
        // labels are placed only where they do not overlap a label already drawn
        let mut placed: Vec<(f64, f64, f64)> = Vec::new();
        for m in &self.marker_sets {
            for (f, label) in &m.points {
                for g in periodic_images(*f) {
                    let (x, y) = to_px(g);
                    draw_marker(svg, x, y, m.shape, 10.0, m.colour, INK);
                    if let Some(l) = label {
                        let w = text_width(l, LABEL_FONT);
                        let (lx, ly) = (x + 7.0, y - 7.0);
                        let free = placed.iter().all(|&(px, py, pw)| {
                            (ly - py).abs() >= LABEL_FONT + 1.0
                                || lx + w + 2.0 <= px
                                || px + pw + 2.0 <= lx
                        });
                        if free {
                            svg.text(lx, ly, l, LABEL_FONT, Anchor::Start, INK, None);
                            placed.push((lx, ly, w));
                        }
                    }
                }
            }
        }

        // Fractional-coordinate ticks along the u and v edges of the cell.
        for k in 0..=4 {
            let t = k as f64 / 4.0;
            let shown = |start: f64, span: f64| {
                let v = start + t * span;
                let r = (v * 1000.0).round() / 1000.0;
                if r == r.trunc() {
                    format!("{r:.0}")
                } else {
                    format!("{r}")
                }
            };
            // ticks point away from the cell, a fixed number of pixels long, whatever the cell
            let away = |from: [f64; 2], to: [f64; 2]| {
                let (a, b) = (to_px(from), to_px(to));
                let (dx, dy) = (b.0 - a.0, b.1 - a.1);
                let n = (dx * dx + dy * dy).sqrt().max(1e-9);
                (dx / n, dy / n)
            };
            for (p, d, label) in [
                // u edge (v = 0): away from the v direction
                (
                    to_px([t, 0.0]),
                    away([0.0, 1.0], [0.0, 0.0]),
                    shown(self.u_frac_start, self.u_frac_span),
                ),
                // v edge (u = 0): away from the u direction
                (
                    to_px([0.0, t]),
                    away([1.0, 0.0], [0.0, 0.0]),
                    shown(self.v_frac_start, self.v_frac_span),
                ),
            ] {
                svg.line(
                    p.0,
                    p.1,
                    p.0 + 5.0 * d.0,
                    p.1 + 5.0 * d.1,
                    &Style::stroke(INK, 1.0),
                );
                let (lx, ly) = (p.0 + 9.0 * d.0, p.1 + 9.0 * d.1);
                let anchor = if d.0 < -0.5 {
                    Anchor::End
                } else if d.0 > 0.5 {
                    Anchor::Start
                } else {
                    Anchor::Middle
                };
                let dy = if d.1 > 0.5 {
                    TICK_FONT
                } else if d.1 < -0.5 {
                    -2.0
                } else {
                    TICK_FONT * 0.35
                };
                svg.text(lx, ly + dy, &label, TICK_FONT, anchor, INK, None);
            }
        }

        // Colour bar.
        let bx = frame.x + frame.w - right + 10.0;
        let by = area.y + 18.0;
        let bh = (area.h * 0.55).max(60.0);
        let bw = 16.0;
        let grad = svg.fresh_id("cbar");
        let mut stops = String::new();
        for k in 0..=16 {
            let t = k as f64 / 16.0;
            let _ = write!(
                stops,
                "<stop offset=\"{}\" stop-color=\"{}\"/>",
                num(t),
                self.colormap.at(t).hex()
            );
        }
        svg.push_def(&format!(
            "<linearGradient id=\"{grad}\" x1=\"0\" y1=\"1\" x2=\"0\" y2=\"0\">{stops}</linearGradient>"
        ));
        svg.push_raw(&format!(
            "<rect x=\"{}\" y=\"{}\" width=\"{}\" height=\"{}\" fill=\"url(#{})\" stroke=\"{}\" \
             stroke-width=\"0.8\"/>",
            num(bx),
            num(by),
            num(bw),
            num(bh),
            escape_xml(&grad),
            INK.hex()
        ));
        svg.text(
            bx,
            by - 8.0,
            &self.colour_bar_label(),
            FONT,
            Anchor::Start,
            INK,
            None,
        );
        let step = nice_step(scale.lo, scale.hi, 5);
        for t in linear_ticks(scale.lo, scale.hi, step) {
            let y = by + bh - (t.value - scale.lo) / (scale.hi - scale.lo) * bh;
            svg.line(bx + bw, y, bx + bw + 4.0, y, &Style::stroke(INK, 1.0));
            svg.text(
                bx + bw + 7.0,
                y + 4.0,
                &t.label,
                TICK_FONT,
                Anchor::Start,
                INK,
                None,
            );
        }
        let unit = if self.unit.is_empty() {
            String::new()
        } else {
            format!(" {}", self.unit)
        };
        let mut note_y = by + bh + 16.0;
        let mut note = |svg: &mut Svg, text: &str| {
            svg.text(bx, note_y, text, NOTE_FONT, Anchor::Start, INK, None);
            note_y += NOTE_FONT + 3.0;
        };
        note(svg, &format!("{}, linear scale", self.colormap.name()));
        note(
            svg,
            &format!("{} to {}{unit}", short(scale.lo), short(scale.hi)),
        );
        if above {
            note(
                svg,
                &format!("values above {}{unit} clamped", short(scale.hi)),
            );
        }
        if below {
            note(
                svg,
                &format!("values below {}{unit} clamped", short(scale.lo)),
            );
        }

        // Legend for atoms and markers.
        let mut entries: Vec<(String, LegendGlyph)> = elements
            .iter()
            .map(|e| {
                (
                    e.clone(),
                    LegendGlyph::Marker {
                        shape: MarkerShape::Circle,
                        fill: element_colour(e),
                        outline: INK,
                    },
                )
            })
            .collect();
        for m in &self.marker_sets {
            if !m.legend.is_empty() {
                entries.push((
                    m.legend.clone(),
                    LegendGlyph::Marker {
                        shape: m.shape,
                        fill: m.colour,
                        outline: INK,
                    },
                ));
            }
        }
        if !entries.is_empty() {
            draw_legend_at(svg, bx - 4.0, note_y + 2.0, &entries);
        }

        // Orientation key: directions of u and v, and a scale bar in A.
        let kx = frame.x + 40.0;
        let ky = frame.y + frame.h - 22.0;
        let len = 34.0;
        for (vec, label) in [
            (self.u_vector_a, &self.u_label),
            (self.v_vector_a, &self.v_label),
        ] {
            let n = (vec[0] * vec[0] + vec[1] * vec[1]).sqrt();
            let (dx, dy) = (vec[0] / n * len, -vec[1] / n * len);
            svg.arrow(kx, ky, kx + dx, ky + dy, 8.0, INK, 1.5);
            svg.text(
                kx + dx * 1.3,
                ky + dy * 1.3 + 4.0,
                label,
                FONT,
                Anchor::Middle,
                INK,
                None,
            );
        }
        let bar_a = nice_number((xmax - xmin) / 4.0, true);
        let bar_px = bar_a * s;
        let sx = kx + 70.0;
        svg.line(sx, ky, sx + bar_px, ky, &Style::stroke(INK, 2.0));
        svg.line(sx, ky - 4.0, sx, ky + 4.0, &Style::stroke(INK, 1.0));
        svg.line(
            sx + bar_px,
            ky - 4.0,
            sx + bar_px,
            ky + 4.0,
            &Style::stroke(INK, 1.0),
        );
        svg.text(
            sx + bar_px / 2.0,
            ky - 7.0,
            &format!("{} Å", short(bar_a)),
            FONT - 1.0,
            Anchor::Middle,
            INK,
            None,
        );
    }

    /// Colour of grid point (i, j), indices taken modulo the grid size.
    fn colour_of(&self, scale: &ValueScale, i: usize, j: usize) -> (Rgb, Clamp) {
        // A values vector shorter than nu x nv (the fields are public) reads as missing values.
        let v = self
            .values
            .get((i % self.nu) + self.nu * (j % self.nv))
            .map_or(f64::NAN, |&v| v as f64);
        let (t, c) = scale.normalize(v);
        (self.colormap.at(t), c)
    }
}

/// The position and, for points on the cell edges, its images on the opposite edges (so that an
/// atom at 0 also shows at 1).
fn periodic_images(f: [f64; 2]) -> Vec<[f64; 2]> {
    let w = |x: f64| x - x.floor();
    let (a, b) = (w(f[0]), w(f[1]));
    let eps = 1e-6;
    let xs: Vec<f64> = if a < eps { vec![0.0, 1.0] } else { vec![a] };
    let ys: Vec<f64> = if b < eps { vec![0.0, 1.0] } else { vec![b] };
    let mut out = Vec::new();
    for &x in &xs {
        for &y in &ys {
            out.push([x, y]);
        }
    }
    out
}

fn fmt6(v: f64) -> String {
    let s = format!("{v:.6}");
    let s = s.trim_end_matches('0').trim_end_matches('.');
    if s == "-0" { "0".into() } else { s.to_string() }
}

/// A value with three significant figures, without trailing zeros.
fn short(v: f64) -> String {
    if v == 0.0 || !v.is_finite() {
        return "0".into();
    }
    let e = v.abs().log10().floor() as i32;
    if !(-3..=5).contains(&e) {
        return format!("{v:.2e}");
    }
    let d = (2 - e).max(0) as usize;
    let s = format!("{v:.d$}");
    if s.contains('.') {
        s.trim_end_matches('0').trim_end_matches('.').to_string()
    } else {
        s
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn short_numbers() {
        assert_eq!(short(1.234), "1.23");
        assert_eq!(short(0.5), "0.5");
        assert_eq!(short(-2.0), "-2");
        assert_eq!(short(125.0), "125");
    }

    #[test]
    fn edge_points_show_on_both_edges() {
        assert_eq!(periodic_images([0.0, 0.5]).len(), 2);
        assert_eq!(periodic_images([0.0, 0.0]).len(), 4);
        assert_eq!(periodic_images([0.3, 0.5]).len(), 1);
    }
}
