//! SVG figures: well-formed XML (checked with roxmltree, an independent XML parser from
//! crates.io), labelled axes with units, nice ticks, decade ticks on log axes, and the viridis
//! colour map against its published table.

use hopmap::transport::{DEFAULT_C_RATES, rate_table};
use hopmap_plot::lines::{ProfileMark, SizeRateCurve, energy_profile, size_rate_chart};
use hopmap_plot::svg::escape_xml;
use hopmap_plot::{
    AtomMarker, Axis, Colormap, Figure, FracMarkerSet, HeatMap, LinePlot, MarkerShape, Rgb, Series,
    nice_step,
};

const SVG_NS: &str = "http://www.w3.org/2000/svg";

/// Writes the figure to `$HOPMAP_PLOT_DIR/name.svg` when that variable is set, for looking at.
fn dump(name: &str, svg: &str) {
    if let Some(dir) = std::env::var_os("HOPMAP_PLOT_DIR") {
        let path = std::path::Path::new(&dir).join(format!("{name}.svg"));
        std::fs::write(&path, svg).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    }
}

/// Parses the document and returns every piece of text content, in order.
fn parse_texts(svg: &str) -> Vec<String> {
    let doc = roxmltree::Document::parse(svg).unwrap_or_else(|e| panic!("not XML: {e}\n{svg}"));
    let root = doc.root_element();
    assert_eq!(root.tag_name().name(), "svg");
    assert_eq!(root.tag_name().namespace(), Some(SVG_NS));
    root.descendants()
        .filter(|n| n.is_element() && n.tag_name().name() == "text")
        .map(|n| {
            n.descendants()
                .filter(|d| d.is_text())
                .map(|d| d.text().unwrap_or(""))
                .collect::<String>()
        })
        .collect()
}

fn profile_figure() -> Figure {
    // An invented two-site profile (demo data): sites at 0 and 2.9 A, a saddle between them.
    let pts: Vec<(f64, f64)> = (0..=58)
        .map(|i| {
            let s = i as f64 * 0.1;
            (s, 0.27 * (std::f64::consts::PI * s / 2.9).sin().powi(2))
        })
        .collect();
    let sites = [
        ProfileMark {
            path_length_a: 0.0,
            energy_ev: 0.0,
            label: "Li1".into(),
        },
        ProfileMark {
            path_length_a: 2.9,
            energy_ev: 0.0,
            label: "Li1'".into(),
        },
    ];
    let saddles = [ProfileMark {
        path_length_a: 1.45,
        energy_ev: 0.27,
        label: "0.27 eV".into(),
    }];
    Figure::lines(640.0, 400.0, energy_profile(&pts, &sites, &saddles))
        .with_title("Li <channel> along b & back")
}

#[test]
fn energy_profile_is_well_formed_svg_with_labelled_axes() {
    let svg = profile_figure().to_svg();
    dump("energy_profile", &svg);
    let texts = parse_texts(&svg);
    assert!(texts.iter().any(|t| t == "Energy (eV)"), "{texts:?}");
    assert!(texts.iter().any(|t| t == "Path length (A)"));
    // Markup characters in the title survive escaping and come back from the parser intact.
    assert!(texts.iter().any(|t| t == "Li <channel> along b & back"));
    for label in ["Li1", "Li1'", "0.27 eV", "sites", "saddles"] {
        assert!(texts.iter().any(|t| t == label), "missing {label}");
    }
    // The same string is fit for inline HTML: no XML declaration, one root element.
    assert!(svg.starts_with("<svg "));
    assert!(svg.trim_end().ends_with("</svg>"));
}

#[test]
fn tick_labels_are_nice_numbers() {
    // Heckbert's rule: steps of 1, 2 or 5 times a power of ten, every tick a multiple of the
    // step, labels that read back as the tick value.
    for (lo, hi) in [
        (0.0, 0.93),
        (-0.37, 1.21),
        (3.0, 7.7),
        (0.0, 147.0),
        (1234.0, 5678.0),
        (2e-3, 9e-3),
    ] {
        let axis = Axis::linear("x", "A");
        let (a, b, ticks) = axis.layout(Some((lo, hi)));
        assert!(a <= lo && b >= hi);
        let step = nice_step(lo, hi, 6);
        let mantissa = step / 10f64.powf(step.log10().floor());
        assert!(
            [1.0, 2.0, 5.0].iter().any(|m| (mantissa - m).abs() < 1e-9),
            "step {step}"
        );
        assert!(ticks.len() >= 3 && ticks.len() <= 11, "{ticks:?}");
        for t in &ticks {
            let k = t.value / step;
            assert!((k - k.round()).abs() < 1e-9, "{} not on {step}", t.value);
            let back: f64 = t.label.parse().unwrap();
            assert!(
                (back - t.value).abs() <= step * 1e-6,
                "{} vs {}",
                t.label,
                t.value
            );
        }
    }
    // In the drawn figure: the energy axis of the profile (0 to 0.27 eV) reads 0, 0.1, 0.2,
    // 0.3 and the path axis (0 to 5.8 A) 0, 2, 4, 6.
    let texts = parse_texts(&profile_figure().to_svg());
    for l in ["0", "0.1", "0.2", "0.3", "2", "4", "6"] {
        assert!(texts.iter().any(|t| t == l), "tick {l} missing: {texts:?}");
    }
}

#[test]
fn log_axes_tick_at_decades() {
    let (lo, hi, ticks) = Axis::log("C-rate", "1/h").layout(Some((0.03, 700.0)));
    assert_eq!((lo, hi), (0.01, 1000.0));
    let major: Vec<(f64, String)> = ticks
        .iter()
        .filter(|t| t.major)
        .map(|t| (t.value, t.text()))
        .collect();
    let expected = [
        (0.01, "0.01"),
        (0.1, "0.1"),
        (1.0, "1"),
        (10.0, "10"),
        (100.0, "100"),
        (1000.0, "1000"),
    ];
    assert_eq!(major.len(), expected.len());
    for ((v, l), (ev, el)) in major.iter().zip(expected) {
        assert!((v / ev - 1.0).abs() < 1e-12);
        assert_eq!(l, el);
    }
    // Minor ticks at 2..9 per decade.
    assert_eq!(ticks.iter().filter(|t| !t.major).count(), 5 * 8);
    // Far from 1 the labels are powers of ten with a superscript exponent.
    let (_, _, ticks) = Axis::log("D", "m^2/s").layout(Some((3e-15, 2e-10)));
    let major: Vec<String> = ticks.iter().filter(|t| t.major).map(|t| t.text()).collect();
    // The range widens to whole decades, 1e-15 to 1e-9.
    assert_eq!(
        major,
        [
            "10^-15", "10^-14", "10^-13", "10^-12", "10^-11", "10^-10", "10^-9"
        ]
    );
}

#[test]
fn size_rate_chart_is_log_log_with_a_shaded_region() {
    // Largest particle diameters from the rate table for two diffusion coefficients.
    let curves: Vec<SizeRateCurve> = [1e-14, 1e-16]
        .iter()
        .map(|&d| SizeRateCurve {
            label: format!("D = {d:e} m^2/s"),
            points: rate_table(d, 3, &DEFAULT_C_RATES)
                .unwrap()
                .iter()
                .map(|r| (r.c_rate, r.max_particle_diameter_um))
                .collect(),
        })
        .collect();
    let svg = Figure::lines(640.0, 420.0, size_rate_chart(&curves)).to_svg();
    dump("size_rate", &svg);
    let texts = parse_texts(&svg);
    assert!(texts.iter().any(|t| t == "C-rate (1/h)"));
    assert!(texts.iter().any(|t| t == "Largest particle diameter (um)"));
    assert!(
        texts
            .iter()
            .any(|t| t.starts_with("bulk diffusion not limiting"))
    );
    // Decade labels on the C-rate axis (1 to 100).
    for l in ["1", "10", "100"] {
        assert!(texts.iter().any(|t| t == l), "{l}");
    }
    let doc = roxmltree::Document::parse(&svg).unwrap();
    let shaded = doc
        .descendants()
        .filter(|n| n.tag_name().name() == "polygon" && n.attribute("fill-opacity").is_some())
        .count();
    assert!(shaded >= 1);
}

#[test]
fn series_with_gaps_and_empty_plots_still_render() {
    let mut p = LinePlot::new(Axis::log("t", "s"), Axis::linear("E", "eV"));
    p.add_series(Series::line(
        "with gaps",
        vec![
            (1.0, 0.1),
            (f64::NAN, 0.2),
            (-3.0, 0.3),
            (10.0, 0.4),
            (100.0, f64::INFINITY),
        ],
    ));
    let texts = parse_texts(&Figure::lines(300.0, 200.0, p).to_svg());
    assert!(texts.iter().any(|t| t == "t (s)"));
    let empty = LinePlot::new(Axis::linear("x", "A"), Axis::linear("y", "eV"));
    parse_texts(&Figure::lines(300.0, 200.0, empty).to_svg());
}

#[test]
fn viridis_endpoints_match_the_published_table() {
    // matplotlib _cm_listed._viridis_data (CC0), entries 0, 128 and 255; the hex values
    // #440154 and #fde725 are the endpoints as usually quoted.
    let cm = Colormap::Viridis;
    let close = |a: [f64; 3], b: [f64; 3]| a.iter().zip(b).all(|(x, y)| (x - y).abs() < 1e-6);
    assert!(close(cm.at_unit(0.0), [0.267004, 0.004874, 0.329415]));
    assert!(close(cm.at_unit(1.0), [0.993248, 0.906157, 0.143936]));
    assert!(close(
        cm.at_unit(128.0 / 255.0),
        [0.127568, 0.566949, 0.550556]
    ));
    assert_eq!(cm.at(0.0).hex(), "#440154");
    assert_eq!(cm.at(1.0).hex(), "#fde725");
    // Clamping, and the reversed map.
    assert_eq!(cm.at(-2.0), cm.at(0.0));
    assert_eq!(cm.at(7.0), cm.at(1.0));
    assert_eq!(Colormap::ViridisReversed.at(0.0), cm.at(1.0));
    // Perceptual ordering: viridis brightens monotonically from end to end.
    let mut last = -1.0;
    for k in 0..=64 {
        let b = cm.at(k as f64 / 64.0).brightness();
        assert!(b >= last - 1e-9, "brightness falls at {k}");
        last = b;
    }
}

#[test]
fn heat_map_draws_the_true_cell_with_a_labelled_colour_bar() {
    // A hexagonal slice (gamma = 120 deg), a = 2.8 A: u = (2.8, 0), v = (-1.4, 2.425).
    let (nu, nv) = (14usize, 14usize);
    let a = 2.8;
    let u = [a, 0.0];
    let v = [
        a * (120f64).to_radians().cos(),
        a * (120f64).to_radians().sin(),
    ];
    let mut values: Vec<f32> = (0..nu * nv)
        .map(|k| {
            let (i, j) = ((k % nu) as f32, (k / nu) as f32);
            (i * 0.1 + j * 0.05).sin()
        })
        .collect();
    values[5] = f32::NAN;
    values[6] = 50.0; // clamped by the scale below
    let mut map = HeatMap::new(values, nu, nv, u, v)
        .with_unit("E", "eV")
        .with_scale(-1.0, 1.0)
        .with_direction_labels("a", "b");
    map.atoms = vec![
        AtomMarker {
            frac: [0.0, 0.0],
            element: "Co".into(),
        },
        AtomMarker {
            frac: [1.0 / 3.0, 2.0 / 3.0],
            element: "O".into(),
        },
    ];
    map.marker_sets = vec![FracMarkerSet {
        legend: "sites".into(),
        shape: MarkerShape::Circle,
        colour: Rgb::new(255, 255, 255),
        points: vec![([2.0 / 3.0, 1.0 / 3.0], Some("Li1".into()))],
    }];
    let svg = Figure::heatmap(700.0, 520.0, map)
        .with_title("slice z = 0.5")
        .to_svg();
    dump("heatmap", &svg);
    let texts = parse_texts(&svg);
    for l in [
        "E (eV)",
        "a",
        "b",
        "Co",
        "O",
        "sites",
        "Li1",
        "viridis, linear scale",
        "-1 to 1 eV",
        "values above 1 eV clamped",
    ] {
        assert!(texts.iter().any(|t| t == l), "missing {l}: {texts:?}");
    }
    // Colour bar ticks are nice numbers within the scale.
    for l in ["-1.0", "-0.5", "0", "0.5", "1.0"] {
        assert!(texts.iter().any(|t| t == l), "colour bar tick {l}");
    }

    // The cell outline is the true parallelogram: edge lengths equal and 120 degrees apart
    // (60 degrees on screen between the drawn edges from the origin, with y flipped).
    let doc = roxmltree::Document::parse(&svg).unwrap();
    let clip = doc
        .descendants()
        .find(|n| n.tag_name().name() == "clipPath")
        .unwrap();
    let poly = clip.first_element_child().unwrap();
    let pts: Vec<(f64, f64)> = poly
        .attribute("points")
        .unwrap()
        .split_whitespace()
        .map(|p| {
            let (x, y) = p.split_once(',').unwrap();
            (x.parse().unwrap(), y.parse().unwrap())
        })
        .collect();
    assert_eq!(pts.len(), 4);
    let e1 = (pts[1].0 - pts[0].0, -(pts[1].1 - pts[0].1));
    let e2 = (pts[3].0 - pts[0].0, -(pts[3].1 - pts[0].1));
    let l1 = (e1.0 * e1.0 + e1.1 * e1.1).sqrt();
    let l2 = (e2.0 * e2.0 + e2.1 * e2.1).sqrt();
    assert!((l1 / l2 - 1.0).abs() < 0.01, "{l1} {l2}");
    let angle = ((e1.0 * e2.0 + e1.1 * e2.1) / (l1 * l2))
        .acos()
        .to_degrees();
    assert!((angle - 120.0).abs() < 0.5, "{angle}");
    // Raster rects carry colours of the map, including the grey of the missing value.
    let fills: Vec<&str> = doc
        .descendants()
        .filter(|n| n.tag_name().name() == "rect")
        .filter_map(|n| n.attribute("fill"))
        .collect();
    assert!(fills.contains(&"#bbbbbb"));
    assert!(fills.contains(&Colormap::Viridis.at(1.0).hex().as_str()));
}

#[test]
fn degenerate_heat_maps_say_so_instead_of_failing() {
    let map = HeatMap::new(vec![1.0; 4], 2, 2, [1.0, 0.0], [2.0, 0.0]);
    let texts = parse_texts(&Figure::heatmap(300.0, 300.0, map).to_svg());
    assert!(texts.iter().any(|t| t.starts_with("no map")));
    // Too few values for the grid (fields set by hand): the missing ones are drawn grey.
    let mut map = HeatMap::new(vec![0.5; 9], 3, 3, [3.0, 0.0], [0.0, 3.0]);
    map.values.truncate(4);
    let svg = Figure::heatmap(300.0, 300.0, map).to_svg();
    assert!(svg.contains("#bbbbbb"));
    parse_texts(&svg);
}

#[test]
fn xml_escaping_covers_the_five_predefined_entities() {
    let s = escape_xml("<a href=\"x\">'&'</a>");
    let doc = format!("<t v=\"{s}\">{s}</t>");
    let d = roxmltree::Document::parse(&doc).unwrap();
    assert_eq!(
        d.root_element().attribute("v"),
        Some("<a href=\"x\">'&'</a>")
    );
    assert_eq!(d.root_element().text(), Some("<a href=\"x\">'&'</a>"));
}

/// The fill colours of the circles drawn for atoms (radius 5), by the order they appear.
fn atom_fills(svg: &str) -> Vec<String> {
    let doc = roxmltree::Document::parse(svg).unwrap();
    doc.descendants()
        .filter(|n| n.tag_name().name() == "circle" && n.attribute("r") == Some("5"))
        .filter_map(|n| n.attribute("fill").map(String::from))
        .collect()
}

fn square_map(elements: &[&str]) -> HeatMap {
    let mut map = HeatMap::new(vec![0.0; 16], 4, 4, [4.0, 0.0], [0.0, 4.0]);
    map.atoms = elements
        .iter()
        .enumerate()
        .map(|(i, e)| AtomMarker {
            frac: [0.2 + 0.2 * i as f64, 0.5],
            element: e.to_string(),
        })
        .collect();
    map
}

#[test]
fn an_element_keeps_its_colour_whatever_else_shares_the_figure() {
    // O alone, O with Fe, O with Fe, P and Li: the O circles have one colour in all three, and
    // O and Fe never share one (they did when colours followed legend order).
    let o_alone = atom_fills(&Figure::heatmap(600.0, 400.0, square_map(&["O"])).to_svg());
    let o_fe = atom_fills(&Figure::heatmap(600.0, 400.0, square_map(&["O", "Fe"])).to_svg());
    let many =
        atom_fills(&Figure::heatmap(600.0, 400.0, square_map(&["Li", "Fe", "P", "O"])).to_svg());
    assert_eq!(o_alone[0], o_fe[0]);
    assert_eq!(o_fe[0], many[3]);
    assert_ne!(o_fe[0], o_fe[1], "O and Fe share a colour");
    assert_eq!(o_fe[1], many[1], "Fe changes colour with company");
    // every element of a phosphate cathode and of a thiophosphate electrolyte is distinct
    for set in [
        ["Li", "Fe", "P", "O"],
        ["Li", "P", "S", "Cl"],
        ["Na", "Co", "O", "Mn"],
    ] {
        let colours: std::collections::BTreeSet<String> = set
            .iter()
            .map(|e| hopmap_plot::colormap::element_colour(e).hex())
            .collect();
        assert_eq!(colours.len(), set.len(), "{set:?}");
    }
}

#[test]
fn slices_carry_fractional_ticks_and_readable_text_without_overlapping_labels() {
    let mut map = square_map(&["O"]);
    map.u_frac_start = 0.25;
    // many labelled sites close together: only labels that fit are drawn
    map.marker_sets = vec![FracMarkerSet {
        legend: "sites".into(),
        shape: MarkerShape::Diamond,
        colour: Rgb::new(255, 255, 255),
        points: (0..12)
            .map(|i| ([0.3 + 0.01 * i as f64, 0.3], Some(format!("S{i}"))))
            .collect(),
    }];
    let svg = Figure::heatmap(640.0, 480.0, map).to_svg();
    dump("heatmap-ticks", &svg);
    let texts = parse_texts(&svg);
    // u ticks start at x = 0.25; v ticks at 0 .. 1
    for t in ["0.25", "0.5", "0.75", "1", "1.25", "0"] {
        assert!(texts.iter().any(|x| x == t), "tick {t} missing: {texts:?}");
    }
    let doc = roxmltree::Document::parse(&svg).unwrap();
    let mut labels: Vec<(f64, f64)> = Vec::new();
    for n in doc.descendants().filter(|n| n.tag_name().name() == "text") {
        let size: f64 = n.attribute("font-size").unwrap().parse().unwrap();
        assert!(size >= 11.0, "text of {size} px: {:?}", n.text());
        for t in n.descendants().filter(|d| d.tag_name().name() == "tspan") {
            let s: f64 = t.attribute("font-size").unwrap().parse().unwrap();
            assert!(s >= 11.0, "superscript of {s} px");
        }
        if n.text().is_some_and(|t| t.starts_with('S') && t.len() <= 3) {
            let x: f64 = n.attribute("x").unwrap().parse().unwrap();
            let y: f64 = n.attribute("y").unwrap().parse().unwrap();
            labels.push((x, y));
        }
    }
    assert!(!labels.is_empty() && labels.len() < 12, "{labels:?}");
    for (i, a) in labels.iter().enumerate() {
        for b in &labels[i + 1..] {
            let apart = (a.1 - b.1).abs() >= 12.0 || (a.0 - b.0).abs() >= 14.0;
            assert!(apart, "labels at {a:?} and {b:?} overlap");
        }
    }
    // sites are not drawn as circles (circles are elements)
    assert_eq!(atom_fills(&svg).len(), 1);
}
