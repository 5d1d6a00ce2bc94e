//! Small, dependency-free SVG figures for the reports: line plots (energy profiles, rate
//! charts) on linear or logarithmic axes, and heat maps of a 2D slice of an energy grid drawn in
//! the true shape of the cell.
//!
//! Layers: [`svg`] writes elements and escapes text; this module lays out a [`Figure`] (title,
//! plot area, axes with "nice" ticks, legend); [`lines`] and [`heatmap`] draw the two kinds of
//! content; [`colormap`] maps values to colours. Every figure renders to a `String` holding one
//! standalone `<svg>` element (with the SVG namespace) that is also valid inline in HTML.
//!
//! Invariants: rendering never fails and never panics on data: non-finite values are skipped
//! (lines break there), values outside a stated colour scale are clamped and the figure says so,
//! and an axis without data gets the range 0 to 1.

pub mod colormap;
pub mod heatmap;
pub mod lines;
pub mod svg;

pub use colormap::{Colormap, Rgb, ValueScale};
pub use heatmap::{AtomMarker, FracMarkerSet, HeatMap};
pub use lines::{Annotation, LinePlot, MarkerSet, Series, ShadedRegion};

use svg::{Anchor, Style, Svg};

pub(crate) const INK: Rgb = Rgb::new(0x22, 0x22, 0x22);
pub(crate) const GRID: Rgb = Rgb::new(0xe4, 0xe4, 0xe4);
pub(crate) const FONT: f64 = 13.0;

/// A figure: size in pixels (SVG user units), an optional title, and its content.
#[derive(Debug, Clone)]
pub struct Figure {
    pub width: f64,
    pub height: f64,
    pub title: Option<String>,
    pub body: Body,
}

/// What a figure shows.
#[derive(Debug, Clone)]
pub enum Body {
    Lines(LinePlot),
    HeatMap(HeatMap),
}

impl Figure {
    pub fn lines(width: f64, height: f64, plot: LinePlot) -> Self {
        Figure {
            width,
            height,
            title: None,
            body: Body::Lines(plot),
        }
    }
    pub fn heatmap(width: f64, height: f64, map: HeatMap) -> Self {
        Figure {
            width,
            height,
            title: None,
            body: Body::HeatMap(map),
        }
    }
    pub fn with_title(mut self, title: impl Into<String>) -> Self {
        self.title = Some(title.into());
        self
    }

    /// The figure as a standalone SVG document.
    pub fn to_svg(&self) -> String {
        let width = if self.width.is_finite() && self.width >= 100.0 {
            self.width
        } else {
            100.0
        };
        let height = if self.height.is_finite() && self.height >= 100.0 {
            self.height
        } else {
            100.0
        };
        let mut svg = Svg::new(width, height);
        let top = if let Some(t) = &self.title {
            svg.text(width / 2.0, 22.0, t, FONT + 3.0, Anchor::Middle, INK, None);
            34.0
        } else {
            10.0
        };
        let frame = Area {
            x: 0.0,
            y: top,
            w: width,
            h: height - top,
        };
        match &self.body {
            Body::Lines(p) => p.draw(&mut svg, frame),
            Body::HeatMap(m) => m.draw(&mut svg, frame),
        }
        svg.finish()
    }
}

/// A rectangle of the figure, pixels, y down.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Area {
    pub x: f64,
    pub y: f64,
    pub w: f64,
    pub h: f64,
}

/// How an axis maps values to positions.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Scale {
    #[default]
    Linear,
    /// Base-10 logarithmic; only positive values can be shown.
    Log10,
}

/// An axis: the quantity and its unit (shown as "quantity (unit)"), the scale, and an optional
/// fixed range. Without a range the axis covers the data, widened to the outer ticks (linear)
/// or to whole decades (logarithmic).
#[derive(Debug, Clone, PartialEq)]
pub struct Axis {
    pub quantity: String,
    /// Unit text, e.g. "eV", "A", "um", "m^2/s"; empty only for a dimensionless quantity.
    pub unit: String,
    pub scale: Scale,
    pub range: Option<(f64, f64)>,
    /// Labelled positions that replace the computed ticks (a linear axis of categories, e.g.
    /// block sizes "3x3", "3x4" at 9 and 12 octahedra, or member names at 1, 2, 3).
    pub categories: Option<Vec<(f64, String)>>,
}

impl Axis {
    pub fn linear(quantity: impl Into<String>, unit: impl Into<String>) -> Self {
        Axis {
            quantity: quantity.into(),
            unit: unit.into(),
            scale: Scale::Linear,
            range: None,
            categories: None,
        }
    }
    pub fn log(quantity: impl Into<String>, unit: impl Into<String>) -> Self {
        Axis {
            quantity: quantity.into(),
            unit: unit.into(),
            scale: Scale::Log10,
            range: None,
            categories: None,
        }
    }
    pub fn with_range(mut self, lo: f64, hi: f64) -> Self {
        self.range = Some((lo, hi));
        self
    }
    /// A linear axis whose ticks are the given labelled positions; the range covers them with
    /// half a step (at least 0.5) to spare on each side.
    pub fn categories(
        quantity: impl Into<String>,
        unit: impl Into<String>,
        positions: Vec<(f64, String)>,
    ) -> Self {
        let mut a = Axis::linear(quantity, unit);
        a.categories = Some(positions);
        a
    }

    /// "quantity (unit)", or the quantity alone when the unit is empty.
    pub fn label(&self) -> String {
        if self.unit.is_empty() {
            self.quantity.clone()
        } else {
            format!("{} ({})", self.quantity, self.unit)
        }
    }

    /// The range shown for data spanning `data` (min, max), and the ticks on it.
    pub fn layout(&self, data: Option<(f64, f64)>) -> (f64, f64, Vec<Tick>) {
        if let (Scale::Linear, Some(cats)) = (self.scale, &self.categories) {
            let xs: Vec<f64> = cats.iter().map(|c| c.0).filter(|x| x.is_finite()).collect();
            if !xs.is_empty() {
                let lo = xs.iter().copied().fold(f64::INFINITY, f64::min);
                let hi = xs.iter().copied().fold(f64::NEG_INFINITY, f64::max);
                let pad = ((hi - lo) * 0.08).max(0.5);
                let (lo, hi) = self.range.unwrap_or((lo - pad, hi + pad));
                let ticks = cats
                    .iter()
                    .filter(|c| c.0.is_finite())
                    .map(|(v, l)| Tick {
                        value: *v,
                        label: l.clone(),
                        superscript: None,
                        major: true,
                    })
                    .collect();
                return (lo, hi, ticks);
            }
        }
        match self.scale {
            Scale::Linear => {
                let (lo, hi) = match (self.range, data) {
                    (Some((a, b)), _) if a.is_finite() && b.is_finite() && a < b => (a, b),
                    (_, Some((a, b))) => (a, b),
                    _ => (0.0, 1.0),
                };
                let (lo, hi) = widen(lo, hi);
                let step = nice_step(lo, hi, 6);
                if self.range.is_some() {
                    (lo, hi, linear_ticks(lo, hi, step))
                } else {
                    let (glo, ghi) = ((lo / step).floor() * step, (hi / step).ceil() * step);
                    (glo, ghi, linear_ticks(glo, ghi, step))
                }
            }
            Scale::Log10 => {
                let (lo, hi) = match (self.range, data) {
                    (Some((a, b)), _) if a > 0.0 && b > a && b.is_finite() => (a, b),
                    (_, Some((a, b))) if a > 0.0 && b.is_finite() => (a, b.max(a)),
                    _ => (1.0, 10.0),
                };
                let (lo, hi) = if self.range.is_some() {
                    (lo, hi)
                } else {
                    let (a, b) = (lo.log10().floor(), hi.log10().ceil());
                    let b = if b <= a { a + 1.0 } else { b };
                    (10f64.powf(a), 10f64.powf(b))
                };
                (lo, hi, decade_ticks(lo, hi))
            }
        }
    }
}

fn widen(lo: f64, hi: f64) -> (f64, f64) {
    if hi > lo {
        (lo, hi)
    } else {
        let pad = if lo == 0.0 { 1.0 } else { lo.abs() * 0.1 };
        (lo - pad, hi + pad)
    }
}

/// A tick: its value, and its label (with an optional superscript exponent, drawn raised).
#[derive(Debug, Clone, PartialEq)]
pub struct Tick {
    pub value: f64,
    pub label: String,
    pub superscript: Option<String>,
    /// Minor ticks are drawn short and without a label.
    pub major: bool,
}

impl Tick {
    /// The label as plain text ("10^-3" for a superscript).
    pub fn text(&self) -> String {
        match &self.superscript {
            Some(s) => format!("{}^{}", self.label, s),
            None => self.label.clone(),
        }
    }
}

/// A "nice" number close to `x` (> 0): 1, 2, 5 or 10 times a power of ten, rounded to the nearest
/// when `round`, otherwise the smallest nice number not below `x` (Heckbert, "Nice numbers for
/// graph labels", Graphics Gems, 1990).
pub fn nice_number(x: f64, round: bool) -> f64 {
    let e = x.log10().floor();
    let f = x / 10f64.powf(e);
    let nf = if round {
        if f < 1.5 {
            1.0
        } else if f < 3.0 {
            2.0
        } else if f < 7.0 {
            5.0
        } else {
            10.0
        }
    } else if f <= 1.0 {
        1.0
    } else if f <= 2.0 {
        2.0
    } else if f <= 5.0 {
        5.0
    } else {
        10.0
    };
    nf * 10f64.powf(e)
}

/// Tick spacing for about `target` ticks over [lo, hi] (Heckbert's loose labelling).
pub fn nice_step(lo: f64, hi: f64, target: usize) -> f64 {
    let range = nice_number((hi - lo).abs().max(f64::MIN_POSITIVE), false);
    nice_number(range / (target.max(2) - 1) as f64, true)
}

/// Ticks at the multiples of `step` within [lo, hi] (with a small tolerance), labelled with just
/// enough decimals for the step.
pub fn linear_ticks(lo: f64, hi: f64, step: f64) -> Vec<Tick> {
    if !(step > 0.0 && lo.is_finite() && hi.is_finite()) {
        return Vec::new();
    }
    let tol = step * 1e-6;
    let k0 = ((lo - tol) / step).ceil() as i64;
    let k1 = ((hi + tol) / step).floor() as i64;
    let decimals = (-(step.log10() + 1e-9).floor()).max(0.0) as usize;
    let big = lo.abs().max(hi.abs());
    let scientific = big >= 1e5 || step < 1e-4;
    (k0..=k1.min(k0 + 200))
        .map(|k| {
            let v = k as f64 * step;
            let label = if k == 0 {
                "0".to_string()
            } else if scientific {
                format_scientific(v, step)
            } else {
                format!("{v:.decimals$}")
            };
            Tick {
                value: v,
                label,
                superscript: None,
                major: true,
            }
        })
        .collect()
}

fn format_scientific(v: f64, step: f64) -> String {
    let e = v.abs().log10().floor();
    let m = v / 10f64.powf(e);
    let digits = ((e - step.log10().floor()).max(0.0) as usize).min(6);
    let ms = format!("{m:.digits$}");
    format!("{ms}e{}", e as i64)
}

/// Decade ticks 10^k within [lo, hi] (labelled), with minor ticks at 2..9 x 10^k when the axis
/// spans at most six decades. Labels are plain decimals from 0.001 to 10000 and "10" with a
/// superscript exponent outside.
pub fn decade_ticks(lo: f64, hi: f64) -> Vec<Tick> {
    if !(lo > 0.0 && hi > lo && hi.is_finite()) {
        return Vec::new();
    }
    let (a, b) = (
        (lo.log10() - 1e-9).ceil() as i32,
        (hi.log10() + 1e-9).floor() as i32,
    );
    let decades = hi.log10() - lo.log10();
    let mut ticks = Vec::new();
    for k in (lo.log10().floor() as i32)..=(hi.log10().ceil() as i32) {
        let v = 10f64.powi(k);
        if k >= a && k <= b {
            let (label, superscript) = if (-3..=4).contains(&k) {
                let d = (-k).max(0) as usize;
                (format!("{v:.d$}"), None)
            } else {
                ("10".to_string(), Some(k.to_string()))
            };
            ticks.push(Tick {
                value: v,
                label,
                superscript,
                major: true,
            });
        }
        if decades <= 6.0 {
            for m in 2..=9 {
                let w = m as f64 * v;
                if w >= lo * (1.0 - 1e-9) && w <= hi * (1.0 + 1e-9) {
                    ticks.push(Tick {
                        value: w,
                        label: String::new(),
                        superscript: None,
                        major: false,
                    });
                }
            }
        }
    }
    ticks.sort_by(|p, q| p.value.total_cmp(&q.value));
    ticks
}

/// Maps a value on an axis with range [lo, hi] to a fraction in [0, 1] of its length.
pub(crate) fn axis_fraction(scale: Scale, lo: f64, hi: f64, v: f64) -> Option<f64> {
    match scale {
        Scale::Linear => Some((v - lo) / (hi - lo)),
        Scale::Log10 => {
            if v > 0.0 {
                Some((v.log10() - lo.log10()) / (hi.log10() - lo.log10()))
            } else {
                None
            }
        }
    }
}

/// Marker shapes for data points, sites and saddles.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum MarkerShape {
    Circle,
    Square,
    Diamond,
    TriangleUp,
    TriangleDown,
    Cross,
}

/// Draws a marker of the given size (pixels, about its width) centred at (x, y).
pub(crate) fn draw_marker(
    svg: &mut Svg,
    x: f64,
    y: f64,
    shape: MarkerShape,
    size: f64,
    fill: Rgb,
    outline: Rgb,
) {
    let r = size / 2.0;
    let style = Style::filled_outline(fill, outline, 1.0);
    match shape {
        MarkerShape::Circle => svg.circle(x, y, r, &style),
        MarkerShape::Square => svg.rect(x - r, y - r, size, size, &style),
        MarkerShape::Diamond => svg.polygon(
            &[(x, y - r * 1.3), (x + r, y), (x, y + r * 1.3), (x - r, y)],
            &style,
        ),
        MarkerShape::TriangleUp => svg.polygon(
            &[
                (x, y - r * 1.2),
                (x + r * 1.1, y + r * 0.8),
                (x - r * 1.1, y + r * 0.8),
            ],
            &style,
        ),
        MarkerShape::TriangleDown => svg.polygon(
            &[
                (x, y + r * 1.2),
                (x + r * 1.1, y - r * 0.8),
                (x - r * 1.1, y - r * 0.8),
            ],
            &style,
        ),
        MarkerShape::Cross => {
            let s = Style::stroke(outline, 2.0);
            svg.line(x - r, y - r, x + r, y + r, &s);
            svg.line(x - r, y + r, x + r, y - r, &s);
        }
    }
}

/// What a legend entry shows next to its text.
#[derive(Debug, Clone, PartialEq)]
pub enum LegendGlyph {
    Line {
        colour: Rgb,
        dashed: bool,
        marker: Option<MarkerShape>,
    },
    Marker {
        shape: MarkerShape,
        fill: Rgb,
        outline: Rgb,
    },
    Swatch {
        colour: Rgb,
        opacity: f64,
    },
}

/// Where the legend goes.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum LegendPosition {
    #[default]
    TopRight,
    TopLeft,
    BottomRight,
    BottomLeft,
    Hidden,
}

/// Rough width of a text in pixels (for layout only).
pub(crate) fn text_width(text: &str, size: f64) -> f64 {
    text.chars().count() as f64 * size * 0.58
}

/// Draws a legend box with the entries, anchored in `area` at `pos`.
pub(crate) fn draw_legend(
    svg: &mut Svg,
    area: Area,
    pos: LegendPosition,
    entries: &[(String, LegendGlyph)],
) {
    if entries.is_empty() || pos == LegendPosition::Hidden {
        return;
    }
    let row = FONT + 6.0;
    let glyph_w = 26.0;
    let w = entries
        .iter()
        .map(|(t, _)| text_width(t, FONT))
        .fold(0.0, f64::max)
        + glyph_w
        + 18.0;
    let h = row * entries.len() as f64 + 8.0;
    let pad = 8.0;
    let x = match pos {
        LegendPosition::TopLeft | LegendPosition::BottomLeft => area.x + pad,
        _ => area.x + area.w - w - pad,
    };
    let y = match pos {
        LegendPosition::BottomLeft | LegendPosition::BottomRight => area.y + area.h - h - pad,
        _ => area.y + pad,
    };
    draw_legend_at(svg, x, y, entries);
}

/// Draws a legend box with its top-left corner at (x, y); returns its height.
pub(crate) fn draw_legend_at(
    svg: &mut Svg,
    x: f64,
    y: f64,
    entries: &[(String, LegendGlyph)],
) -> f64 {
    let row = FONT + 6.0;
    let glyph_w = 26.0;
    let w = entries
        .iter()
        .map(|(t, _)| text_width(t, FONT))
        .fold(0.0, f64::max)
        + glyph_w
        + 18.0;
    let h = row * entries.len() as f64 + 8.0;
    svg.rect(
        x,
        y,
        w,
        h,
        &Style::filled_outline(Rgb::new(255, 255, 255), Rgb::new(0xaa, 0xaa, 0xaa), 0.8)
            .opacity(0.9),
    );
    for (i, (text, glyph)) in entries.iter().enumerate() {
        let cy = y + 4.0 + row * (i as f64 + 0.5);
        let gx = x + 6.0;
        match glyph {
            LegendGlyph::Line {
                colour,
                dashed,
                marker,
            } => {
                let mut s = Style::stroke(*colour, 2.0);
                if *dashed {
                    s = s.dashed("6 4");
                }
                svg.line(gx, cy, gx + glyph_w - 4.0, cy, &s);
                if let Some(m) = marker {
                    draw_marker(
                        svg,
                        gx + (glyph_w - 4.0) / 2.0,
                        cy,
                        *m,
                        7.0,
                        *colour,
                        *colour,
                    );
                }
            }
            LegendGlyph::Marker {
                shape,
                fill,
                outline,
            } => draw_marker(
                svg,
                gx + (glyph_w - 4.0) / 2.0,
                cy,
                *shape,
                9.0,
                *fill,
                *outline,
            ),
            LegendGlyph::Swatch { colour, opacity } => svg.rect(
                gx,
                cy - 6.0,
                glyph_w - 4.0,
                12.0,
                &Style::fill(*colour).opacity(*opacity),
            ),
        }
        svg.text(
            gx + glyph_w + 4.0,
            cy + FONT * 0.35,
            text,
            FONT,
            Anchor::Start,
            INK,
            None,
        );
    }
    h
}

/// Draws a tick label (with its superscript, if any).
pub(crate) fn draw_tick_label(svg: &mut Svg, x: f64, y: f64, tick: &Tick, anchor: Anchor) {
    match &tick.superscript {
        Some(s) => svg.text_with_superscript(x, y, &tick.label, s, FONT - 1.0, anchor, INK),
        None => svg.text(x, y, &tick.label, FONT - 1.0, anchor, INK, None),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn category_axes_tick_at_their_positions_with_their_labels() {
        let a = Axis::categories(
            "Block size",
            "",
            vec![
                (9.0, "3x3".into()),
                (12.0, "3x4".into()),
                (20.0, "4x5".into()),
            ],
        );
        let (lo, hi, ticks) = a.layout(Some((0.0, 100.0)));
        assert!(lo < 9.0 && hi > 20.0 && hi < 22.0, "{lo} {hi}");
        let t: Vec<(f64, &str)> = ticks.iter().map(|t| (t.value, t.label.as_str())).collect();
        assert_eq!(t, vec![(9.0, "3x3"), (12.0, "3x4"), (20.0, "4x5")]);
        let one = Axis::categories("Member", "", vec![(1.0, "a".into())]);
        assert_eq!(one.layout(None).0, 0.5);
    }

    #[test]
    fn nice_numbers_are_one_two_five() {
        assert_eq!(nice_number(0.37, true), 0.5);
        assert_eq!(nice_number(1.2, true), 1.0);
        assert_eq!(nice_number(23.0, true), 20.0);
        assert_eq!(nice_number(3.1, false), 5.0);
        assert!((nice_step(0.0, 0.93, 6) - 0.2).abs() < 1e-12);
    }

    #[test]
    fn linear_ticks_have_just_enough_decimals() {
        let t: Vec<String> = linear_ticks(0.0, 1.0, 0.2)
            .into_iter()
            .map(|t| t.label)
            .collect();
        assert_eq!(t, ["0", "0.2", "0.4", "0.6", "0.8", "1.0"]);
    }
}
