//! A minimal SVG writer: elements appended to a string, every piece of text escaped for XML.
//!
//! It knows nothing about axes or data; [`super`] builds figures on top of it. Coordinates are
//! SVG user units (pixels), y pointing down. Numbers are written with at most two decimals so
//! that files stay small and byte-for-byte reproducible.

use super::colormap::Rgb;
use std::fmt::Write;

/// Escapes `&`, `<`, `>`, `"` and `'` so that the text is safe in element content and in
/// attribute values. Characters not allowed in XML 1.0 (control characters other than tab,
/// newline and carriage return) are dropped.
pub fn escape_xml(text: &str) -> String {
    let mut s = String::with_capacity(text.len());
    for c in text.chars() {
        match c {
            '&' => s.push_str("&amp;"),
            '<' => s.push_str("&lt;"),
            '>' => s.push_str("&gt;"),
            '"' => s.push_str("&quot;"),
            '\'' => s.push_str("&apos;"),
            '\t' | '\n' | '\r' => s.push(c),
            c if (c as u32) < 0x20 || c == '\u{FFFE}' || c == '\u{FFFF}' => {}
            c => s.push(c),
        }
    }
    s
}

/// A coordinate or length, at most two decimals, no trailing zeros, never "-0".
pub fn num(v: f64) -> String {
    if !v.is_finite() {
        return "0".into();
    }
    let r = (v * 100.0).round() / 100.0;
    let r = if r == 0.0 { 0.0 } else { r };
    let s = format!("{r:.2}");
    s.trim_end_matches('0').trim_end_matches('.').to_string()
}

/// Stroke and fill of a shape.
#[derive(Debug, Clone, PartialEq)]
pub struct Style {
    pub stroke: Option<Rgb>,
    pub stroke_width: f64,
    pub fill: Option<Rgb>,
    pub fill_opacity: f64,
    pub dash: Option<String>,
}

impl Style {
    pub fn stroke(c: Rgb, width: f64) -> Self {
        Style {
            stroke: Some(c),
            stroke_width: width,
            fill: None,
            fill_opacity: 1.0,
            dash: None,
        }
    }
    pub fn fill(c: Rgb) -> Self {
        Style {
            stroke: None,
            stroke_width: 0.0,
            fill: Some(c),
            fill_opacity: 1.0,
            dash: None,
        }
    }
    pub fn filled_outline(fill: Rgb, stroke: Rgb, width: f64) -> Self {
        Style {
            stroke: Some(stroke),
            stroke_width: width,
            fill: Some(fill),
            fill_opacity: 1.0,
            dash: None,
        }
    }
    pub fn dashed(mut self, pattern: &str) -> Self {
        self.dash = Some(pattern.to_string());
        self
    }
    pub fn opacity(mut self, o: f64) -> Self {
        self.fill_opacity = o;
        self
    }
    fn attrs(&self) -> String {
        let mut s = String::new();
        match self.fill {
            Some(c) => {
                let _ = write!(s, " fill=\"{}\"", c.hex());
                if self.fill_opacity < 1.0 {
                    let _ = write!(s, " fill-opacity=\"{}\"", num(self.fill_opacity));
                }
            }
            None => s.push_str(" fill=\"none\""),
        }
        if let Some(c) = self.stroke {
            let _ = write!(
                s,
                " stroke=\"{}\" stroke-width=\"{}\"",
                c.hex(),
                num(self.stroke_width)
            );
            if let Some(d) = &self.dash {
                let _ = write!(s, " stroke-dasharray=\"{}\"", escape_xml(d));
            }
        }
        s
    }
}

/// Horizontal text anchor.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Anchor {
    Start,
    Middle,
    End,
}

impl Anchor {
    fn attr(&self) -> &'static str {
        match self {
            Anchor::Start => "start",
            Anchor::Middle => "middle",
            Anchor::End => "end",
        }
    }
}

/// An SVG document being written.
#[derive(Debug, Clone)]
pub struct Svg {
    width: f64,
    height: f64,
    defs: String,
    body: String,
    next_id: usize,
}

impl Svg {
    pub fn new(width: f64, height: f64) -> Self {
        Svg {
            width,
            height,
            defs: String::new(),
            body: String::new(),
            next_id: 0,
        }
    }

    /// A document-unique id with the given prefix (for clip paths and gradients).
    pub fn fresh_id(&mut self, prefix: &str) -> String {
        self.next_id += 1;
        format!("{prefix}{}", self.next_id)
    }

    /// Raw markup appended to `<defs>`; the caller is responsible for its escaping.
    pub fn push_def(&mut self, markup: &str) {
        self.defs.push_str(markup);
        self.defs.push('\n');
    }

    /// Raw markup appended to the body; the caller is responsible for its escaping.
    pub fn push_raw(&mut self, markup: &str) {
        self.body.push_str(markup);
        self.body.push('\n');
    }

    /// A rectangular clip path; returns its id.
    pub fn clip_rect(&mut self, x: f64, y: f64, w: f64, h: f64) -> String {
        let id = self.fresh_id("clip");
        self.push_def(&format!(
            "<clipPath id=\"{id}\"><rect x=\"{}\" y=\"{}\" width=\"{}\" height=\"{}\"/></clipPath>",
            num(x),
            num(y),
            num(w),
            num(h)
        ));
        id
    }

    /// A polygonal clip path; returns its id.
    pub fn clip_polygon(&mut self, pts: &[(f64, f64)]) -> String {
        let id = self.fresh_id("clip");
        self.push_def(&format!(
            "<clipPath id=\"{id}\"><polygon points=\"{}\"/></clipPath>",
            points(pts)
        ));
        id
    }

    /// Opens a group, optionally with a clip path id, a transform and a class.
    pub fn open_group(&mut self, clip: Option<&str>, transform: Option<&str>, class: Option<&str>) {
        let mut s = String::from("<g");
        if let Some(c) = class {
            let _ = write!(s, " class=\"{}\"", escape_xml(c));
        }
        if let Some(c) = clip {
            let _ = write!(s, " clip-path=\"url(#{})\"", escape_xml(c));
        }
        if let Some(t) = transform {
            let _ = write!(s, " transform=\"{}\"", escape_xml(t));
        }
        s.push('>');
        self.push_raw(&s);
    }

    pub fn close_group(&mut self) {
        self.push_raw("</g>");
    }

    pub fn line(&mut self, x1: f64, y1: f64, x2: f64, y2: f64, style: &Style) {
        self.push_raw(&format!(
            "<line x1=\"{}\" y1=\"{}\" x2=\"{}\" y2=\"{}\"{}/>",
            num(x1),
            num(y1),
            num(x2),
            num(y2),
            style.attrs()
        ));
    }

    pub fn rect(&mut self, x: f64, y: f64, w: f64, h: f64, style: &Style) {
        self.push_raw(&format!(
            "<rect x=\"{}\" y=\"{}\" width=\"{}\" height=\"{}\"{}/>",
            num(x),
            num(y),
            num(w.max(0.0)),
            num(h.max(0.0)),
            style.attrs()
        ));
    }

    pub fn circle(&mut self, cx: f64, cy: f64, r: f64, style: &Style) {
        self.push_raw(&format!(
            "<circle cx=\"{}\" cy=\"{}\" r=\"{}\"{}/>",
            num(cx),
            num(cy),
            num(r),
            style.attrs()
        ));
    }

    pub fn polyline(&mut self, pts: &[(f64, f64)], style: &Style) {
        if pts.len() < 2 {
            return;
        }
        self.push_raw(&format!(
            "<polyline points=\"{}\"{} stroke-linejoin=\"round\"/>",
            points(pts),
            style.attrs()
        ));
    }

    pub fn polygon(&mut self, pts: &[(f64, f64)], style: &Style) {
        if pts.len() < 3 {
            return;
        }
        self.push_raw(&format!(
            "<polygon points=\"{}\"{}/>",
            points(pts),
            style.attrs()
        ));
    }

    /// Text at (x, y) (baseline), escaped; `rotate` in degrees about the anchor point.
    #[allow(clippy::too_many_arguments)]
    pub fn text(
        &mut self,
        x: f64,
        y: f64,
        text: &str,
        size: f64,
        anchor: Anchor,
        colour: Rgb,
        rotate: Option<f64>,
    ) {
        let rot = match rotate {
            Some(r) => format!(" transform=\"rotate({} {} {})\"", num(r), num(x), num(y)),
            None => String::new(),
        };
        self.push_raw(&format!(
            "<text x=\"{}\" y=\"{}\" font-size=\"{}\" text-anchor=\"{}\" fill=\"{}\"{rot}>{}</text>",
            num(x),
            num(y),
            num(size),
            anchor.attr(),
            colour.hex(),
            escape_xml(text)
        ));
    }

    /// Text `base` followed by a superscript `sup` (e.g. "10" and "-3"), both escaped.
    pub fn text_with_superscript(
        &mut self,
        x: f64,
        y: f64,
        base: &str,
        sup: &str,
        size: f64,
        anchor: Anchor,
        colour: Rgb,
    ) {
        self.push_raw(&format!(
            "<text x=\"{}\" y=\"{}\" font-size=\"{}\" text-anchor=\"{}\" fill=\"{}\">{}<tspan \
             dy=\"{}\" font-size=\"{}\">{}</tspan></text>",
            num(x),
            num(y),
            num(size),
            anchor.attr(),
            colour.hex(),
            escape_xml(base),
            num(-size * 0.4),
            num(size * 0.75),
            escape_xml(sup)
        ));
    }

    /// An arrow from (x1, y1) to (x2, y2) with a filled head of the given length.
    pub fn arrow(
        &mut self,
        x1: f64,
        y1: f64,
        x2: f64,
        y2: f64,
        head: f64,
        colour: Rgb,
        width: f64,
    ) {
        let (dx, dy) = (x2 - x1, y2 - y1);
        let len = (dx * dx + dy * dy).sqrt();
        if len < 1e-9 {
            return;
        }
        let (ux, uy) = (dx / len, dy / len);
        let head = head.min(len * 0.5);
        let (bx, by) = (x2 - ux * head, y2 - uy * head);
        let (px, py) = (-uy * head * 0.4, ux * head * 0.4);
        self.line(x1, y1, bx, by, &Style::stroke(colour, width));
        self.polygon(
            &[(x2, y2), (bx + px, by + py), (bx - px, by - py)],
            &Style::fill(colour),
        );
    }

    /// The finished document: a standalone `<svg>` element with the SVG namespace, usable as a
    /// file of its own and inline in HTML (no XML declaration, which HTML would not accept).
    pub fn finish(self) -> String {
        let mut s = String::new();
        let _ = writeln!(
            s,
            "<svg xmlns=\"http://www.w3.org/2000/svg\" version=\"1.1\" width=\"{w}\" \
             height=\"{h}\" viewBox=\"0 0 {w} {h}\" font-family=\"Helvetica, Arial, sans-serif\">",
            w = num(self.width),
            h = num(self.height)
        );
        if !self.defs.is_empty() {
            s.push_str("<defs>\n");
            s.push_str(&self.defs);
            s.push_str("</defs>\n");
        }
        let _ = writeln!(
            s,
            "<rect x=\"0\" y=\"0\" width=\"{}\" height=\"{}\" fill=\"#ffffff\"/>",
            num(self.width),
            num(self.height)
        );
        s.push_str(&self.body);
        s.push_str("</svg>\n");
        s
    }
}

/// `x,y x,y ...` for polyline and polygon.
pub fn points(pts: &[(f64, f64)]) -> String {
    let mut s = String::new();
    for (i, (x, y)) in pts.iter().enumerate() {
        if i > 0 {
            s.push(' ');
        }
        let _ = write!(s, "{},{}", num(*x), num(*y));
    }
    s
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn escapes_markup_characters() {
        assert_eq!(
            escape_xml("a<b & \"c\" 'd'>"),
            "a&lt;b &amp; &quot;c&quot; &apos;d&apos;&gt;"
        );
        assert_eq!(escape_xml("x\u{1}y"), "xy");
    }

    #[test]
    fn numbers_are_short_and_never_negative_zero() {
        assert_eq!(num(1.0), "1");
        assert_eq!(num(-0.001), "0");
        assert_eq!(num(2.346), "2.35");
        assert_eq!(num(10.5), "10.5");
    }
}
