//! Line plots: data series with optional markers, labelled marker sets (sites and saddles of an
//! energy profile), text annotations and shaded regions, on linear or logarithmic axes.

use super::colormap::{Rgb, categorical};
use super::svg::{Anchor, Style, Svg};
use super::{
    Area, Axis, FONT, GRID, INK, LegendGlyph, LegendPosition, MarkerShape, Scale, Tick,
    axis_fraction, draw_legend, draw_marker, draw_tick_label,
};

/// A data series: points (x, y) in axis units, drawn as a line and/or markers. Non-finite points
/// (and non-positive ones on a logarithmic axis) break the line.
#[derive(Debug, Clone, PartialEq)]
pub struct Series {
    /// Legend text; an empty label keeps the series out of the legend.
    pub label: String,
    pub points: Vec<(f64, f64)>,
    /// Colour; `None` takes the next categorical colour.
    pub colour: Option<Rgb>,
    pub line: bool,
    pub dashed: bool,
    pub marker: Option<MarkerShape>,
}

impl Series {
    pub fn line(label: impl Into<String>, points: Vec<(f64, f64)>) -> Self {
        Series {
            label: label.into(),
            points,
            colour: None,
            line: true,
            dashed: false,
            marker: None,
        }
    }
    pub fn with_colour(mut self, c: Rgb) -> Self {
        self.colour = Some(c);
        self
    }
    pub fn with_marker(mut self, m: MarkerShape) -> Self {
        self.marker = Some(m);
        self
    }
    pub fn dashed(mut self) -> Self {
        self.dashed = true;
        self
    }
}

/// Points of one kind (e.g. "sites", "saddles"), each with an optional text label drawn above.
#[derive(Debug, Clone, PartialEq)]
pub struct MarkerSet {
    pub legend: String,
    pub shape: MarkerShape,
    pub colour: Rgb,
    pub points: Vec<(f64, f64, Option<String>)>,
}

/// Free text at a data position, shifted by (dx, dy) pixels.
#[derive(Debug, Clone, PartialEq)]
pub struct Annotation {
    pub x: f64,
    pub y: f64,
    pub text: String,
    pub dx: f64,
    pub dy: f64,
    pub anchor: Anchor,
}

impl Annotation {
    pub fn new(x: f64, y: f64, text: impl Into<String>) -> Self {
        Annotation {
            x,
            y,
            text: text.into(),
            dx: 0.0,
            dy: 0.0,
            anchor: Anchor::Start,
        }
    }
}

/// A shaded region with a legend entry.
#[derive(Debug, Clone, PartialEq)]
pub struct ShadedRegion {
    pub label: String,
    pub colour: Rgb,
    pub opacity: f64,
    pub shape: RegionShape,
}

/// The outline of a shaded region in data coordinates.
#[derive(Debug, Clone, PartialEq)]
pub enum RegionShape {
    /// Between a curve and the bottom of the plot area.
    BelowCurve(Vec<(f64, f64)>),
    /// Between a curve and the top of the plot area.
    AboveCurve(Vec<(f64, f64)>),
    /// A closed polygon.
    Polygon(Vec<(f64, f64)>),
}

impl ShadedRegion {
    pub fn below_curve(label: impl Into<String>, points: Vec<(f64, f64)>, colour: Rgb) -> Self {
        ShadedRegion {
            label: label.into(),
            colour,
            opacity: 0.25,
            shape: RegionShape::BelowCurve(points),
        }
    }
    pub fn above_curve(label: impl Into<String>, points: Vec<(f64, f64)>, colour: Rgb) -> Self {
        ShadedRegion {
            label: label.into(),
            colour,
            opacity: 0.25,
            shape: RegionShape::AboveCurve(points),
        }
    }
}

/// A line plot.
#[derive(Debug, Clone, PartialEq)]
pub struct LinePlot {
    pub x: Axis,
    pub y: Axis,
    pub series: Vec<Series>,
    pub markers: Vec<MarkerSet>,
    pub annotations: Vec<Annotation>,
    pub regions: Vec<ShadedRegion>,
    pub legend: LegendPosition,
    /// Light grid lines at the major ticks.
    pub grid: bool,
}

impl LinePlot {
    pub fn new(x: Axis, y: Axis) -> Self {
        LinePlot {
            x,
            y,
            series: Vec::new(),
            markers: Vec::new(),
            annotations: Vec::new(),
            regions: Vec::new(),
            legend: LegendPosition::TopRight,
            grid: true,
        }
    }
    pub fn add_series(&mut self, s: Series) -> &mut Self {
        self.series.push(s);
        self
    }

    fn data_range(&self, axis: &Axis, pick: impl Fn((f64, f64)) -> f64) -> Option<(f64, f64)> {
        let mut lo = f64::INFINITY;
        let mut hi = f64::NEG_INFINITY;
        let mut take = |v: f64| {
            if v.is_finite() && (axis.scale == Scale::Linear || v > 0.0) {
                lo = lo.min(v);
                hi = hi.max(v);
            }
        };
        for s in &self.series {
            s.points.iter().for_each(|&p| take(pick(p)));
        }
        for m in &self.markers {
            m.points.iter().for_each(|&(x, y, _)| take(pick((x, y))));
        }
        for r in &self.regions {
            let pts = match &r.shape {
                RegionShape::BelowCurve(p)
                | RegionShape::AboveCurve(p)
                | RegionShape::Polygon(p) => p,
            };
            pts.iter().for_each(|&p| take(pick(p)));
        }
        (lo <= hi).then_some((lo, hi))
    }

    pub(crate) fn draw(&self, svg: &mut Svg, frame: Area) {
        let left = 72.0;
        let bottom = 50.0;
        let area = Area {
            x: frame.x + left,
            y: frame.y + 6.0,
            w: (frame.w - left - 20.0).max(10.0),
            h: (frame.h - bottom - 6.0).max(10.0),
        };
        let (x0, x1, xt) = self.x.layout(self.data_range(&self.x, |p| p.0));
        let (y0, y1, yt) = self.y.layout(self.data_range(&self.y, |p| p.1));
        let px = |v: f64| axis_fraction(self.x.scale, x0, x1, v).map(|f| area.x + f * area.w);
        let py =
            |v: f64| axis_fraction(self.y.scale, y0, y1, v).map(|f| area.y + area.h - f * area.h);
        let to_px = |(x, y): (f64, f64)| -> Option<(f64, f64)> {
            if !(x.is_finite() && y.is_finite()) {
                return None;
            }
            Some((px(x)?, py(y)?))
        };

        // Grid and ticks.
        if self.grid {
            for t in xt.iter().filter(|t| t.major) {
                if let Some(x) = px(t.value) {
                    svg.line(x, area.y, x, area.y + area.h, &Style::stroke(GRID, 1.0));
                }
            }
            for t in yt.iter().filter(|t| t.major) {
                if let Some(y) = py(t.value) {
                    svg.line(area.x, y, area.x + area.w, y, &Style::stroke(GRID, 1.0));
                }
            }
        }

        let clip = svg.clip_rect(area.x, area.y, area.w, area.h);
        svg.open_group(Some(&clip), None, Some("data"));
        for r in &self.regions {
            let poly: Vec<(f64, f64)> = match &r.shape {
                RegionShape::Polygon(p) => p.iter().filter_map(|&q| to_px(q)).collect(),
                RegionShape::BelowCurve(p) | RegionShape::AboveCurve(p) => {
                    let edge = if matches!(r.shape, RegionShape::BelowCurve(_)) {
                        area.y + area.h
                    } else {
                        area.y
                    };
                    let curve: Vec<(f64, f64)> = p.iter().filter_map(|&q| to_px(q)).collect();
                    match (curve.first(), curve.last()) {
                        (Some(&(xa, _)), Some(&(xb, _))) => {
                            let mut v = curve.clone();
                            v.push((xb, edge));
                            v.push((xa, edge));
                            v
                        }
                        _ => Vec::new(),
                    }
                }
            };
            svg.polygon(&poly, &Style::fill(r.colour).opacity(r.opacity));
        }
        let mut legend = Vec::new();
        for r in &self.regions {
            if !r.label.is_empty() {
                legend.push((
                    r.label.clone(),
                    LegendGlyph::Swatch {
                        colour: r.colour,
                        opacity: r.opacity,
                    },
                ));
            }
        }
        for (i, s) in self.series.iter().enumerate() {
            let colour = s.colour.unwrap_or_else(|| categorical(i));
            if s.line {
                let mut style = Style::stroke(colour, 2.0);
                if s.dashed {
                    style = style.dashed("6 4");
                }
                let mut run: Vec<(f64, f64)> = Vec::new();
                for &p in &s.points {
                    match to_px(p) {
                        Some(q) => run.push(q),
                        None => {
                            svg.polyline(&run, &style);
                            run.clear();
                        }
                    }
                }
                svg.polyline(&run, &style);
            }
            if !s.label.is_empty() {
                legend.push((
                    s.label.clone(),
                    LegendGlyph::Line {
                        colour,
                        dashed: s.dashed,
                        marker: s.marker,
                    },
                ));
            }
        }
        svg.close_group();

        // Frame, then markers and text on top, unclipped so that a marker on the frame shows
        // whole; points outside the plot area are left out.
        svg.rect(area.x, area.y, area.w, area.h, &Style::stroke(INK, 1.0));
        let inside = |(x, y): (f64, f64)| {
            x >= area.x - 0.5
                && x <= area.x + area.w + 0.5
                && y >= area.y - 0.5
                && y <= area.y + area.h + 0.5
        };
        let to_px = |p: (f64, f64)| to_px(p).filter(|&q| inside(q));
        for (i, s) in self.series.iter().enumerate() {
            let colour = s.colour.unwrap_or_else(|| categorical(i));
            if let Some(m) = s.marker {
                for q in s.points.iter().filter_map(|&p| to_px(p)) {
                    draw_marker(svg, q.0, q.1, m, 7.0, colour, colour);
                }
            }
        }
        for m in &self.markers {
            for (x, y, label) in &m.points {
                if let Some((qx, qy)) = to_px((*x, *y)) {
                    draw_marker(svg, qx, qy, m.shape, 10.0, m.colour, INK);
                    if let Some(l) = label {
                        svg.text(qx, qy - 10.0, l, FONT - 1.0, Anchor::Middle, INK, None);
                    }
                }
            }
            if !m.legend.is_empty() {
                legend.push((
                    m.legend.clone(),
                    LegendGlyph::Marker {
                        shape: m.shape,
                        fill: m.colour,
                        outline: INK,
                    },
                ));
            }
        }
        for a in &self.annotations {
            if let Some((qx, qy)) = to_px((a.x, a.y)) {
                svg.text(
                    qx + a.dx,
                    qy + a.dy,
                    &a.text,
                    FONT - 1.0,
                    a.anchor,
                    INK,
                    None,
                );
            }
        }
        draw_x_ticks(svg, area, &xt, &px);
        draw_y_ticks(svg, area, &yt, &py);
        svg.text(
            area.x + area.w / 2.0,
            area.y + area.h + 40.0,
            &self.x.label(),
            FONT + 1.0,
            Anchor::Middle,
            INK,
            None,
        );
        let ly = area.y + area.h / 2.0;
        svg.text(
            frame.x + 18.0,
            ly,
            &self.y.label(),
            FONT + 1.0,
            Anchor::Middle,
            INK,
            Some(-90.0),
        );
        draw_legend(svg, area, self.legend, &legend);
    }
}

fn draw_x_ticks(svg: &mut Svg, area: Area, ticks: &[Tick], px: &dyn Fn(f64) -> Option<f64>) {
    let yb = area.y + area.h;
    for t in ticks {
        if let Some(x) = px(t.value) {
            if x < area.x - 0.5 || x > area.x + area.w + 0.5 {
                continue;
            }
            let len = if t.major { 6.0 } else { 3.0 };
            svg.line(x, yb, x, yb + len, &Style::stroke(INK, 1.0));
            if t.major {
                draw_tick_label(svg, x, yb + 20.0, t, Anchor::Middle);
            }
        }
    }
}

fn draw_y_ticks(svg: &mut Svg, area: Area, ticks: &[Tick], py: &dyn Fn(f64) -> Option<f64>) {
    for t in ticks {
        if let Some(y) = py(t.value) {
            if y < area.y - 0.5 || y > area.y + area.h + 0.5 {
                continue;
            }
            let len = if t.major { 6.0 } else { 3.0 };
            svg.line(area.x - len, y, area.x, y, &Style::stroke(INK, 1.0));
            if t.major {
                draw_tick_label(svg, area.x - 9.0, y + 4.0, t, Anchor::End);
            }
        }
    }
}

/// A point of interest along an energy profile: its path position (A), energy (eV) and label.
#[derive(Debug, Clone, PartialEq)]
pub struct ProfileMark {
    pub path_length_a: f64,
    pub energy_ev: f64,
    pub label: String,
}

/// The energy profile along a path: energy (eV) against path length (A), with the sites
/// (circles) and saddles (up triangles) marked and labelled.
pub fn energy_profile(
    profile: &[(f64, f64)],
    sites: &[ProfileMark],
    saddles: &[ProfileMark],
) -> LinePlot {
    let mut p = LinePlot::new(
        Axis::linear("Path length", "A"),
        Axis::linear("Energy", "eV"),
    );
    p.legend = LegendPosition::TopRight;
    p.series
        .push(Series::line("", profile.to_vec()).with_colour(categorical(0)));
    let set = |legend: &str, shape, colour, marks: &[ProfileMark]| MarkerSet {
        legend: legend.into(),
        shape,
        colour,
        points: marks
            .iter()
            .map(|m| (m.path_length_a, m.energy_ev, Some(m.label.clone())))
            .collect(),
    };
    if !sites.is_empty() {
        p.markers.push(set(
            "sites",
            MarkerShape::Circle,
            Rgb::new(255, 255, 255),
            sites,
        ));
    }
    if !saddles.is_empty() {
        p.markers.push(set(
            "saddles",
            MarkerShape::TriangleUp,
            categorical(1),
            saddles,
        ));
    }
    p
}

/// One curve of a size-rate chart: the largest particle diameter (um) that bulk diffusion
/// charges at each C-rate.
#[derive(Debug, Clone, PartialEq)]
pub struct SizeRateCurve {
    pub label: String,
    /// (C-rate, largest particle diameter in um).
    pub points: Vec<(f64, f64)>,
}

/// Log-log chart of particle diameter (um) against C-rate, one line per curve; below each
/// curve bulk diffusion is fast enough and no longer limits the rate, so the region below the
/// first curve is shaded and labelled as such.
pub fn size_rate_chart(curves: &[SizeRateCurve]) -> LinePlot {
    let mut p = LinePlot::new(
        Axis::log("C-rate", "1/h"),
        Axis::log("Largest particle diameter", "um"),
    );
    p.legend = LegendPosition::BottomLeft;
    if let Some(first) = curves.first() {
        p.regions.push(ShadedRegion::below_curve(
            format!("bulk diffusion not limiting ({})", first.label),
            first.points.clone(),
            categorical(2),
        ));
    }
    for (i, c) in curves.iter().enumerate() {
        p.series.push(
            Series::line(c.label.clone(), c.points.clone())
                .with_colour(categorical(i))
                .with_marker(MarkerShape::Circle),
        );
    }
    p
}
