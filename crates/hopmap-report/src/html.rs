//! The self-contained HTML report of one analysis: one file with inline CSS and inline SVG
//! figures, one inline script (the 3D view of [`super::viewer`], which falls back to a static
//! SVG), no fonts, nothing fetched from a network.
//!
//! Order of the page: the answer in one sentence; the structure and its valence check; the
//! channels of the site-energy landscape (eV) and of the valence-mismatch landscape (v.u.);
//! the channel networks in 3D;
//! slices of the energy landscape through the lowest channel; the energy profile of every
//! channel; sites and hops; transport estimates with their assumptions; capacity; every
//! parameter with its source; warnings; cautions. Every number carries its unit.
//!
//! The figures come from [`super::figures`]. Inline SVGs share one HTML document, so the ids of
//! their clip paths and gradients are given a per-figure prefix ([`scope_ids`]).

use super::figures::{self, ReportFigure};
use hopmap::analysis::{Analysis, ChannelTransport};
use hopmap::percolation::Percolation;
use hopmap::summary::Orientation;
use hopmap_plot::svg::escape_xml;
use std::fmt::Write;

/// The style sheet shared by the report and the demo's index page.
pub const STYLE: &str = r#"
:root { --ink: #222; --muted: #555; --line: #d7d7d7; --band: #f4f6f8; --accent: #0b5d8a; }
* { box-sizing: border-box; }
body { font-family: "Helvetica Neue", Helvetica, Arial, "Liberation Sans", sans-serif; color: var(--ink);
       margin: 0; padding: 0 0 48px 0; line-height: 1.45; background: #fff; }
main { max-width: 1160px; margin: 0 auto; padding: 0 28px; }
header { background: #f0f4f7; border-bottom: 1px solid var(--line); margin-bottom: 18px; }
header .inner { max-width: 1160px; margin: 0 auto; padding: 18px 28px 14px 28px; }
h1 { font-size: 1.55em; margin: 0 0 8px 0; }
h2 { font-size: 1.25em; margin: 34px 0 10px 0; padding-bottom: 4px; border-bottom: 2px solid var(--accent); }
h3 { font-size: 1.05em; margin: 22px 0 8px 0; }
p.answer { font-size: 1.25em; margin: 6px 0 8px 0; }
p.meta, p.note, figcaption, .small { color: var(--muted); font-size: 0.9em; }
code, .mono { font-family: "DejaVu Sans Mono", Menlo, Consolas, monospace; font-size: 0.92em; }
nav { font-size: 0.9em; margin: 8px 0 0 0; }
nav a { margin-right: 12px; color: var(--accent); text-decoration: none; white-space: nowrap; }
table { border-collapse: collapse; margin: 8px 0 14px 0; font-size: 0.92em; display: block; max-width: 100%; overflow-x: auto; }
th, td { border: 1px solid var(--line); padding: 3px 8px; text-align: left; vertical-align: top; }
th { background: var(--band); font-weight: 600; }
td.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
tr.best td { background: #eef7ee; }
table.kv th { width: 15em; }
figure { margin: 14px 0 22px 0; }
figure svg { max-width: 100%; height: auto; display: block; border: 1px solid var(--line); }
.flag { color: #a33; font-weight: 600; }
.box { border: 1px solid var(--line); border-left: 5px solid var(--accent); background: #fafbfc;
       padding: 8px 14px; margin: 10px 0; }
.box.warn { border-left-color: #c77700; background: #fffaf0; }
.box.caution { border-left-color: #a33; background: #fff6f6; }
.box ul { margin: 4px 0; padding-left: 20px; }
a { color: var(--accent); }
"#;

/// A complete page around `body` (already HTML) with the shared style.
pub fn page(title: &str, header: &str, body: &str) -> String {
    format!(
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n\
         <meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n\
         <title>{}</title>\n<style>{STYLE}{}</style>\n</head>\n<body>\n<header><div class=\"inner\">\n{header}</div></header>\n\
         <main>\n{body}</main>\n</body>\n</html>\n",
        esc(title),
        super::viewer::STYLE
    )
}

/// Escapes text for HTML element content and attribute values.
pub fn esc(s: &str) -> String {
    escape_xml(s)
}

/// Gives every `id` of an SVG document, and every `url(#...)` reference to it, the prefix
/// `prefix`, so that several SVGs inline in one HTML page do not share ids.
pub fn scope_ids(svg: &str, prefix: &str) -> String {
    svg.replace(" id=\"", &format!(" id=\"{prefix}"))
        .replace("url(#", &format!("url(#{prefix}"))
}

/// A number in scientific notation for HTML: "3.26 × 10<sup>-15</sup>".
pub fn sci(x: f64, digits: usize) -> String {
    if !x.is_finite() {
        return "–".into();
    }
    if x == 0.0 {
        return "0".into();
    }
    let e = x.abs().log10().floor() as i32;
    let m = x / 10f64.powi(e);
    // rounding can carry the mantissa to 10
    let (m, e) = if format!("{m:.digits$}").starts_with("10")
        || format!("{m:.digits$}").starts_with("-10")
    {
        (m / 10.0, e + 1)
    } else {
        (m, e)
    };
    if (-2..=3).contains(&e) {
        let d = (digits as i32 - e).max(0) as usize;
        return format!("{x:.d$}");
    }
    format!("{m:.digits$} × 10<sup>{e}</sup>")
}

/// A length in micrometres with sensible precision.
fn um(x: f64) -> String {
    if !x.is_finite() {
        "–".into()
    } else if x >= 100.0 {
        format!("{x:.0}")
    } else if x >= 1.0 {
        format!("{x:.2}")
    } else if x >= 0.01 {
        format!("{x:.3}")
    } else {
        sci(x, 2)
    }
}

fn ion_name(a: &Analysis) -> String {
    let v = a.model.probe.valence;
    let sym = a.model.probe.element.symbol();
    if (v - 1.0).abs() < 1e-9 {
        format!("{sym}+")
    } else if (v - v.round()).abs() < 1e-9 {
        format!("{sym}{}+", v.round() as i64)
    } else {
        format!("{sym}{v}+")
    }
}

/// The answer in plain words, e.g. "Li+ can travel through LiFePO4 along one-dimensional
/// channels in the `[010]` direction, over a barrier of 0.41 ± 0.15 eV; joining the channels into
/// layers parallel to the (100) plane takes 0.79 eV, and into a three-dimensional network 1.80
/// eV." The networks are those of `hopmap::summary` (thresholds within
/// [`hopmap::analysis::CHANNEL_MERGE_EV`] told as one, the highest dimension).
pub fn answer_sentence(a: &Analysis) -> String {
    let ion = ion_name(a);
    let formula = a.structure.formula_and_z().1;
    let nets = &a.summary.networks;
    let Some(first) = nets.first() else {
        return format!(
            "On this model {ion} finds no connected path through {formula} below {:.1} eV (the \
             energy cap): the structure does not conduct {ion}.",
            a.percolation.ceiling
        );
    };
    let at_once = !first.folded.is_empty();
    let how = match first.dimension {
        1 => {
            let dirs: Vec<String> = first
                .orientations
                .iter()
                .map(Orientation::indices)
                .collect();
            let (n, s) = if dirs.len() > 1 {
                ("directions", dirs.join(", "))
            } else {
                ("direction", dirs.join(""))
            };
            format!("along one-dimensional channels in the {s} {n}")
        }
        2 => format!(
            "{}in two-dimensional layers parallel to the {} plane",
            if at_once { "at once " } else { "" },
            first
                .orientations
                .iter()
                .map(Orientation::indices)
                .collect::<Vec<_>>()
                .join(", ")
        ),
        _ => {
            if at_once {
                "in all three dimensions at once".into()
            } else {
                "in all three dimensions".into()
            }
        }
    };
    let mut s = format!(
        "{ion} can travel through {formula} {how}, over a barrier of {:.2} ± {:.2} eV",
        first.barrier_ev, first.uncertainty_ev
    );
    let joins: Vec<(String, f64)> = nets[1..]
        .iter()
        .map(|n| match (n.dimension, n.orientations.first()) {
            (2, Some(o)) => (
                format!("into layers parallel to the {} plane", o.indices()),
                n.barrier_ev,
            ),
            _ => ("into a three-dimensional network".to_string(), n.barrier_ev),
        })
        .collect();
    if let Some((w, b)) = joins.first() {
        let what = if first.dimension == 1 {
            "channels"
        } else {
            "layers"
        };
        s.push_str(&format!("; joining the {what} {w} takes {b:.2} eV"));
        if let Some((w, b)) = joins.get(1) {
            s.push_str(&format!(", and {w} {b:.2} eV"));
        }
    }
    s.push('.');
    s
}

fn row(cells: &[String]) -> String {
    let mut s = String::from("<tr>");
    for c in cells {
        s.push_str(c);
    }
    s.push_str("</tr>\n");
    s
}

fn td(s: &str) -> String {
    format!("<td>{s}</td>")
}

fn tn(s: impl std::fmt::Display) -> String {
    format!("<td class=\"num\">{s}</td>")
}

fn th_row(cols: &[&str]) -> String {
    let mut s = String::from("<tr>");
    for c in cols {
        let _ = write!(s, "<th>{c}</th>");
    }
    s.push_str("</tr>\n");
    s
}

fn kv(rows: &[(&str, String)]) -> String {
    let mut s = String::from("<table class=\"kv\">\n");
    for (k, v) in rows {
        let _ = writeln!(s, "<tr><th>{k}</th><td>{v}</td></tr>");
    }
    s.push_str("</table>\n");
    s
}

fn space_group(a: &Analysis) -> String {
    let s = &a.structure.symmetry;
    match (&s.hm_symbol, s.number) {
        (Some(h), Some(n)) => format!("{} (No. {n})", esc(h)),
        (Some(h), None) => esc(h),
        (None, Some(n)) => format!("No. {n}"),
        (None, None) => format!("not identified ({} operations)", s.ops.len()),
    }
}

fn structure_section(a: &Analysis, file: &str, o: &mut String) {
    let s = &a.structure;
    let p = s.lattice.parameters();
    let (z, formula) = s.formula_and_z();
    let g = &a.landscape.energy;
    let pr = &a.model.probe;
    let _ = writeln!(o, "<h2 id=\"structure\">Structure</h2>");
    let mut rows = vec![
        (
            "File",
            format!(
                "<code>{}</code>, data block <code>{}</code>",
                esc(file),
                esc(&s.name)
            ),
        ),
        ("Formula, Z", format!("{} , Z = {z}", esc(&formula))),
        (
            "Space group",
            format!(
                "{}; symmetry from {}",
                space_group(a),
                esc(&s.symmetry.source)
            ),
        ),
        (
            "Cell",
            format!(
                "a = {:.4} Å, b = {:.4} Å, c = {:.4} Å; α = {:.3}°, β = {:.3}°, γ = {:.3}°",
                p.a, p.b, p.c, p.alpha, p.beta, p.gamma
            ),
        ),
        ("Volume", format!("{:.3} Å³", s.volume())),
        ("Density", format!("{:.4} g/cm³", s.density())),
        ("Formula mass", format!("{:.3} g/mol", s.formula_mass())),
        ("Positions in the cell", format!("{}", s.sites.len())),
        (
            "Mobile ion (probe)",
            format!(
                "{} (valence {} v.u., usual coordination N = {}, Shannon radius {:.2} Å)",
                ion_name(a),
                pr.valence,
                pr.coordination,
                pr.radius
            ),
        ),
        (
            "Grid",
            format!(
                "{} × {} × {} points, spacing {:.3} / {:.3} / {:.3} Å along a / b / c",
                g.dims[0], g.dims[1], g.dims[2], a.spacing_a[0], a.spacing_a[1], a.spacing_a[2]
            ),
        ),
    ];
    if let Some(n) = &a.oxidation_note {
        rows.push((
            "Oxidation states",
            format!("assigned by hopmap: {}", esc(n)),
        ));
    }
    o.push_str(&kv(&rows));

    let _ = writeln!(o, "<h3 id=\"valence\">Valence check</h3>");
    match &a.valence {
        None => {
            let _ = writeln!(
                o,
                "<p class=\"note\">No valence check could be made (see the warnings).</p>"
            );
        }
        Some(v) => {
            let _ = writeln!(
                o,
                "<p>Global instability index GII = <b>{:.3} v.u.</b>: <b>{}</b> ({}; \
                 Salinas-Sanchez et al., J. Solid State Chem. 100 (1992) 201).</p>",
                v.gii,
                v.verdict.word(),
                hopmap::bv::valence::VERDICT_RULE
            );
            o.push_str("<table>\n");
            o.push_str(&th_row(&[
                "label",
                "site",
                "species",
                "formal (v.u.)",
                "BVS (v.u.)",
                "deviation (v.u.)",
                "multiplicity",
                "occupancy",
                "coordination",
            ]));
            for i in &v.ions {
                o.push_str(&row(&[
                    td(&esc(&i.label)),
                    td(&esc(&i.site_label)),
                    td(&esc(&i.species)),
                    tn(format!("{:.2}", i.formal)),
                    tn(format!("{:.3}", i.bvs)),
                    tn(format!("{:+.3}", i.deviation)),
                    tn(i.multiplicity),
                    tn(format!("{:.3}", i.occupancy)),
                    tn(format!("{:.1}", i.coordination)),
                ]));
            }
            o.push_str("</table>\n");
            for n in &v.notes {
                let _ = writeln!(o, "<p class=\"note\">{}</p>", esc(n));
            }
        }
    }
}

fn channel_table(p: &Percolation, unit: &str, o: &mut String) {
    if p.dimension == 0 {
        let _ = writeln!(
            o,
            "<p><b>No percolating path</b> below {:.2} {unit} (the cap of the landscape).</p>",
            p.ceiling
        );
        return;
    }
    o.push_str("<table>\n");
    o.push_str(&th_row(&[
        "dimension",
        &format!("threshold ({unit})"),
        &format!("barrier ({unit})"),
        &format!("lowest point ({unit})"),
        "direction [uvw] / plane (hkl)",
        "separate channels",
        "accessible fraction of the cell",
    ]));
    for t in p.thresholds.iter().flatten() {
        let dirs: Vec<String> = hopmap::summary::orientations_at(p, t)
            .iter()
            .map(|o| o.words())
            .collect();
        o.push_str(&row(&[
            td(&format!("{}D", t.dimension)),
            tn(format!("{:.3}", t.energy)),
            tn(format!("<b>{:.3}</b>", t.barrier)),
            tn(format!("{:.3}", t.channel.lowest)),
            td(&esc(&dirs.join("; "))),
            tn(t.components),
            tn(format!("{:.1} %", t.fraction * 100.0)),
        ]));
    }
    o.push_str("</table>\n");
    if p.families.len() > p.thresholds.iter().flatten().count() {
        let _ = writeln!(
            o,
            "<p class=\"note\">Channel families (channels of one dimension and direction or \
             plane that open independently):</p>"
        );
        o.push_str("<table>\n");
        o.push_str(&th_row(&[
            "dimension",
            "direction / plane",
            &format!("onset ({unit})"),
            &format!("barrier ({unit})"),
            "channels",
        ]));
        for f in &p.families {
            o.push_str(&row(&[
                td(&format!("{}D", f.dimension)),
                td(&esc(&Orientation::of(&f.span)
                    .map(|o| o.words())
                    .unwrap_or("closed".into()))),
                tn(format!("{:.3}", f.onset)),
                tn(format!("{:.3}", f.barrier)),
                tn(f.components),
            ]));
        }
        o.push_str("</table>\n");
    }
}

fn channels_section(a: &Analysis, o: &mut String) {
    let _ = writeln!(
        o,
        "<h2 id=\"channels\">Channels in the site-energy landscape</h2>"
    );
    let _ = writeln!(
        o,
        "<p class=\"note\">The {} site energy E(r) (bond-valence Morse term plus screened \
         cation repulsion) on the grid, swept upwards from its lowest value; a channel \
         percolates in <i>d</i> dimensions when it connects a point to its images along <i>d</i> \
         independent lattice translations. Threshold = energy at which that first happens; \
         barrier = threshold minus the lowest energy inside the channel.</p>",
        ion_name(a)
    );
    channel_table(&a.percolation, "eV", o);
    if let Some(g) = &a.graph_percolation {
        let agrees = (1..=3).all(|d| g.energy(d) == a.percolation.energy(d));
        let _ = writeln!(
            o,
            "<p class=\"note\">Consistency check: the site-and-hop graph percolates at {} the \
             grid's thresholds.</p>",
            if agrees {
                "exactly"
            } else {
                "<span class=\"flag\">different energies from</span>"
            }
        );
    }
    let Some(mismatch) = &a.mismatch_percolation else {
        return;
    };
    let _ = writeln!(
        o,
        "<h2 id=\"mismatch\">Channels in the valence-mismatch landscape</h2>\n<p class=\"note\">The \
         same sweep over |ΔV(r)| = |Σ s(r) − V<sub>A</sub>|, the mismatch between the bond-valence \
         sum of the probe and its valence, in valence units (v.u.).</p>"
    );
    channel_table(mismatch, "v.u.", o);
}

fn figure_html(f: &ReportFigure, n: usize) -> String {
    format!(
        "<figure id=\"fig-{}\">\n{}<figcaption>Figure {n}. {}</figcaption>\n</figure>\n",
        esc(&f.name),
        scope_ids(&f.svg, &format!("f{n}-")),
        f.caption
    )
}

fn sites_section(a: &Analysis, o: &mut String) {
    let Some(net) = &a.network else {
        return;
    };
    let lowest = net.sites.first().map(|s| s.energy).unwrap_or(0.0);
    let _ = writeln!(
        o,
        "<h2 id=\"sites\">Sites</h2>\n<p class=\"note\">Minima of the site energy ({} in \
         the cell, from {} grid minima: a minimum whose lowest exit towards a lower one is less \
         than {:.2} eV above it is merged into the site it drains to), grouped into {} orbits by \
         the space-group operations. Position of the first member in fractional coordinates; \
         depth = lowest barrier out of the site; label = the nearest site of the mobile ion in \
         the input structure, when within reach.</p>",
        net.sites.len(),
        net.basins.minima.len(),
        net.merging.depth,
        net.orbits.len()
    );
    o.push_str("<table>\n");
    o.push_str(&th_row(&[
        "orbit",
        "multiplicity",
        "x",
        "y",
        "z",
        "energy (eV)",
        "above lowest (eV)",
        "depth (eV)",
        "coordination",
        "label",
    ]));
    const MAX: usize = 40;
    for (i, orb) in net.orbits.iter().enumerate().take(MAX) {
        let Some(s) = orb.sites.first().map(|&k| &net.sites[k]) else {
            continue;
        };
        let label = match (&s.label, s.label_distance) {
            (Some(l), Some(d)) => format!("{} ({:.2} Å away)", esc(l), d),
            (Some(l), None) => esc(l),
            _ => "–".into(),
        };
        let depth = if s.depth.is_finite() {
            format!("{:.3}", s.depth)
        } else {
            "–".into()
        };
        o.push_str(&row(&[
            td(&format!("S{i}")),
            tn(orb.multiplicity),
            tn(format!("{:.4}", s.frac.0.x)),
            tn(format!("{:.4}", s.frac.0.y)),
            tn(format!("{:.4}", s.frac.0.z)),
            tn(format!("{:.3}", s.energy)),
            tn(format!("{:.3}", s.energy - lowest)),
            tn(depth),
            td(&esc(&s.coordination.to_string())),
            td(&label),
        ]));
    }
    o.push_str("</table>\n");
    if net.orbits.len() > MAX {
        let _ = writeln!(
            o,
            "<p class=\"note\">{} more orbits are listed in the JSON output (<code>hopmap paths \
             --json</code>).</p>",
            net.orbits.len() - MAX
        );
    }
    // minima above the highest threshold lie outside every network at its threshold
    if let Some(level) = a.percolation.highest_threshold() {
        let outside: Vec<String> = net
            .orbits
            .iter()
            .enumerate()
            .take(MAX)
            .filter(|(_, orb)| {
                orb.sites
                    .first()
                    .is_some_and(|&k| net.sites[k].energy > level + 1e-4)
            })
            .map(|(i, _)| format!("S{i}"))
            .collect();
        if !outside.is_empty() {
            let _ = writeln!(
                o,
                "<p class=\"note\">Above the highest threshold ({level:.3} eV): no network \
                 passes through {} at its threshold.</p>",
                outside.join(", ")
            );
        }
    }
}

/// Hops shorter than this (A) join split minima of one site; the hop table leaves them out.
pub const SHORT_HOP_A: f64 = hopmap::summary::SHORT_HOP_A;

fn hops_section(a: &Analysis, o: &mut String) {
    let Some(net) = &a.network else {
        return;
    };
    let level = a
        .percolation
        .highest_threshold()
        .unwrap_or(f32::NEG_INFINITY);
    let groups = &a.summary.hop_groups;
    let shown: usize = groups.iter().map(|g| g.count).sum();
    let short = net
        .hops
        .iter()
        .filter(|h| h.saddle_energy <= level + 1e-4 && h.length < SHORT_HOP_A)
        .count();
    let _ = writeln!(
        o,
        "<h2 id=\"hops\">Hops</h2>\n<p class=\"note\">Hops between neighbouring sites whose \
         saddle lies at or below the highest percolation threshold ({:.3} eV): {} of the {} hops \
         of the cell, in {} symmetry-distinct groups (same orbits, length and saddle energy){}. \
         Barriers are saddle minus site energy, read from the first orbit to the second and back. \
         Opening = distance from the saddle to the nearest framework ion minus that ion's Shannon \
         radius; clearance = opening minus the radius of {} ({:.2} Å). Shannon radii describe ions \
         at their usual coordination, and an ion passing through a window of three or four anions \
         comes closer to them than that, so clearances at saddles are negative as a rule: \
         compare them between hops and materials rather than reading a sign.</p>",
        level,
        shown,
        net.hops.len(),
        groups.len(),
        if short > 0 {
            format!(
                "; {short} hops shorter than {SHORT_HOP_A} Å, between split minima of one site, \
                 are left out"
            )
        } else {
            String::new()
        },
        ion_name(a),
        a.model.probe.radius
    );
    if groups.is_empty() {
        return;
    }
    o.push_str("<table>\n");
    o.push_str(&th_row(&[
        "from orbit",
        "to orbit",
        "hops in the cell",
        "length (Å)",
        "saddle (eV)",
        "barrier forward (eV)",
        "barrier back (eV)",
        "opening (Å)",
        "clearance (Å)",
    ]));
    const MAX: usize = 40;
    for g in groups.iter().take(MAX) {
        let clear = match g.clearance_a {
            Some(c) => format!("{c:+.2}"),
            None => "–".into(),
        };
        o.push_str(&row(&[
            td(&format!("S{}", g.from_orbit)),
            td(&format!("S{}", g.to_orbit)),
            tn(g.count),
            tn(format!("{:.3}", g.length_a)),
            tn(format!("{:.3}", g.saddle_ev)),
            tn(format!("{:.3}", g.barrier_forward_ev)),
            tn(format!("{:.3}", g.barrier_backward_ev)),
            tn(g.opening_a.map(|r| format!("{r:.2}")).unwrap_or("–".into())),
            tn(clear),
        ]));
    }
    o.push_str("</table>\n");
    if groups.len() > MAX {
        let _ = writeln!(
            o,
            "<p class=\"note\">{} more groups are in the JSON output.</p>",
            groups.len() - MAX
        );
    }
}

fn transport_section(a: &Analysis, figs: &[(usize, &ReportFigure)], o: &mut String) {
    let _ = writeln!(o, "<h2 id=\"transport\">Transport</h2>");
    if a.transport.is_empty() {
        let _ = writeln!(
            o,
            "<p>No transport estimate: no percolating network was found below the cap.</p>"
        );
        return;
    }
    let temp = format!("{:.2} K", a.transport[0].temperature_k);
    let _ = writeln!(
        o,
        "<p>Diffusion coefficient of {} through each percolating network at {temp}, from the \
         hopping model D = f (1 − c) a² ν<sub>0</sub> exp(−E<sub>a</sub> / k<sub>B</sub>T) / (2d), \
         with E<sub>a</sub> the network's barrier, a the hop length (the repeat of the \
         network's lowest path divided by the number of passes within {} eV of its highest \
         point: shallow minima in between do not shorten the hop) and d its dimension.</p>",
        ion_name(a),
        hopmap::analysis::SHALLOW_SITE_EV
    );
    o.push_str("<table>\n");
    o.push_str(&th_row(&[
        "network",
        "barrier E<sub>a</sub> (eV)",
        "hop a (Å)",
        &format!("D at {temp} (m²/s)"),
        "basis",
        "attempt frequency ν<sub>0</sub> (Hz)",
        "correlation factor f",
        "site filling c",
    ]));
    for t in &a.transport {
        let m = t.model.as_ref();
        o.push_str(&row(&[
            td(&format!("{}D", t.dimension)),
            tn(format!("{:.3}", t.barrier_ev)),
            tn(format!("{:.2}", t.hop_length_a)),
            tn(if t.bulk_transport {
                match t.diffusion_band_m2_s {
                    Some((lo, hi)) => format!(
                        "<b>{}</b><br><small>{} to {}</small>",
                        sci(t.diffusion_m2_s, 2),
                        sci(lo, 1),
                        sci(hi, 1)
                    ),
                    None => format!("<b>{}</b>", sci(t.diffusion_m2_s, 2)),
                }
            } else {
                "no bulk transport".to_string()
            }),
            td(&esc(&t.basis)),
            tn(m.map(|m| sci(m.attempt_frequency_hz, 1))
                .unwrap_or("–".into())),
            tn(m.map(|m| format!("{}", m.correlation_factor))
                .unwrap_or("–".into())),
            tn(m.map(|m| format!("{}", m.site_filling))
                .unwrap_or("–".into())),
        ]));
    }
    o.push_str("</table>\n");
    let dilute = a
        .transport
        .iter()
        .filter_map(|t| t.model.as_ref())
        .all(|m| m.correlation_factor == 1.0 && m.site_filling == 0.0);
    let _ = writeln!(
        o,
        "<p class=\"note\">Assumptions: attempt frequency of optical-phonon scale (common \
         practice; real values range over about 10<sup>12</sup> to 10<sup>14</sup> Hz); a single \
         barrier per network. The range under each D is the barrier moved by its uncertainty, \
         ±{:.2} eV (the model's error against published barriers, scored leave-one-family-out). \
         {}</p>",
        hopmap::analysis::BARRIER_UNCERTAINTY_EV,
        if dilute {
            esc(hopmap::transport::DILUTE_LIMIT_NOTE)
        } else {
            "Correlation factor and site filling as given on the command line.".to_string()
        }
    );

    // Arrhenius table, one column per network.
    let with_arr: Vec<&ChannelTransport> = a
        .transport
        .iter()
        .filter(|t| !t.arrhenius.is_empty())
        .collect();
    if let Some(first) = with_arr.first() {
        let _ = writeln!(o, "<h3>Temperature dependence (Arrhenius)</h3>");
        o.push_str("<table>\n<tr><th>T (K)</th><th>1000/T (1/K)</th>");
        for t in &with_arr {
            let _ = write!(o, "<th>D, {}D network (m²/s)</th>", t.dimension);
        }
        o.push_str("</tr>\n");
        for (i, (tk, _)) in first.arrhenius.iter().enumerate() {
            let mut cells = vec![tn(format!("{tk:.2}")), tn(format!("{:.3}", 1000.0 / tk))];
            for t in &with_arr {
                cells.push(tn(t
                    .arrhenius
                    .get(i)
                    .map(|(_, d)| sci(*d, 2))
                    .unwrap_or("–".into())));
            }
            o.push_str(&row(&cells));
        }
        o.push_str("</table>\n");
    }

    // Rate tables.
    let _ = writeln!(
        o,
        "<h3 id=\"rate\">Rate capability</h3>\n<p class=\"note\">A C-rate of n is a full charge in \
         3600/n s. Diffusion length L = sqrt(2 d D t) in that time; the largest particle that \
         bulk diffusion fills from its surface has diameter 2L.</p>"
    );
    for t in &a.transport {
        if t.rates.is_empty() {
            continue;
        }
        if !t.bulk_transport {
            let _ = writeln!(
                o,
                "<p><b>{}D network</b> (E<sub>a</sub> = {:.3} eV): no bulk transport at {} K \
                 (D below {} m²/s: less than 0.1 µm in a day).</p>",
                t.dimension,
                t.barrier_ev,
                t.temperature_k,
                sci(hopmap::analysis::NO_BULK_TRANSPORT_M2_S, 0)
            );
            continue;
        }
        if let Some(x) = figures::negligible_at_1c(t) {
            let _ = writeln!(
                o,
                "<p><b>{}D network</b> (E<sub>a</sub> = {:.3} eV, D = {} m²/s): even a 1C charge \
                 fills only a particle {} µm across, below {} nm: bulk transport through this \
                 network is negligible at every C-rate.</p>",
                t.dimension,
                t.barrier_ev,
                sci(t.diffusion_m2_s, 2),
                sci(x, 1),
                figures::NEGLIGIBLE_UM * 1000.0
            );
            continue;
        }
        let _ = writeln!(
            o,
            "<p><b>{}D network</b> (E<sub>a</sub> = {:.3} eV, D = {} m²/s):</p>",
            t.dimension,
            t.barrier_ev,
            sci(t.diffusion_m2_s, 2)
        );
        o.push_str("<table>\n");
        o.push_str(&th_row(&[
            "C-rate",
            "charge time (s)",
            "charge time (min)",
            "diffusion length (µm)",
            "largest particle diameter (µm)",
            "range for the barrier uncertainty (µm)",
        ]));
        for (i, r) in t.rates.iter().enumerate() {
            o.push_str(&row(&[
                td(&format!("{}C", r.c_rate)),
                tn(format!("{:.0}", r.charge_time_s)),
                tn(format!("{:.1}", r.charge_time_s / 60.0)),
                tn(um(r.diffusion_length_um)),
                tn(um(r.max_particle_diameter_um)),
                tn(t.particle_band_um
                    .get(i)
                    .map(|(lo, hi)| format!("{} to {}", um(*lo), um(*hi)))
                    .unwrap_or("–".into())),
            ]));
        }
        o.push_str("</table>\n");
    }
    for (n, f) in figs {
        o.push_str(&figure_html(f, *n));
    }
    let _ = writeln!(
        o,
        "<p class=\"note\">{}</p>",
        esc(hopmap::transport::RATE_CAUTION)
    );
}

fn capacity_section(a: &Analysis, o: &mut String) {
    let _ = writeln!(o, "<h2 id=\"capacity\">Capacity</h2>");
    let Some(c) = &a.capacity else {
        match &a.capacity_note {
            Some(n) => {
                let _ = writeln!(
                    o,
                    "<p><b>No capacity</b>: {}.</p>",
                    esc(n.trim_start_matches("no capacity: "))
                );
            }
            None => {
                let _ = writeln!(o, "<p>No capacity estimate (see the warnings).</p>");
            }
        }
        return;
    };
    let ion = ion_name(a);
    let electrons = hopmap::text::trim_number(c.redox_electrons_per_formula_unit, 3);
    let mut rows = vec![
        (
            "Redox bound",
            format!(
                "{:.1} mAh/g ({electrons} electron{} per {}{})",
                c.redox_capacity_mah_g,
                if electrons == "1" { "" } else { "s" },
                esc(&c.formula),
                match c.direction {
                    Some(d) => format!(
                        ", on {} of {ion}{}",
                        d.word(),
                        if c.couples.is_empty() {
                            String::new()
                        } else {
                            format!(": {}", esc(&c.couples.join(", ")))
                        }
                    ),
                    None => ", as set".into(),
                }
            ),
        ),
        (
            "Site bound",
            match (c.site_capacity_mah_g, c.site_ions_per_formula_unit) {
                (Some(q), Some(x)) => format!(
                    "{q:.1} mAh/g ({} {ion} per formula unit {} the reachable sites{})",
                    hopmap::text::trim_number(x, 3),
                    if c.direction == Some(hopmap::capacity::RedoxDirection::Insertion) {
                        "of room left on"
                    } else {
                        "held by"
                    },
                    a.packing
                        .as_ref()
                        .map(|p| format!(
                            ", no two closer than {:.2} Å; {} candidate sites",
                            p.min_distance_a, p.candidate_sites
                        ))
                        .unwrap_or_default()
                ),
                _ => "not estimated".into(),
            },
        ),
        (
            "Limited by",
            match c.limited_by {
                hopmap::capacity::CapacityLimit::Redox => {
                    "the redox bound (electrons the framework can exchange)".to_string()
                }
                hopmap::capacity::CapacityLimit::Sites => {
                    "the site bound (room for the mobile ions)".to_string()
                }
            },
        ),
        (
            "Theoretical capacity",
            format!(
                "<b>{:.1} mAh/g</b>{}",
                c.capacity_mah_g,
                c.capacity_mah_cm3
                    .map(|v| format!(", <b>{v:.0} mAh/cm³</b> at the crystal density"))
                    .unwrap_or_default()
            ),
        ),
        ("Molar mass", format!("{:.3} g/mol", c.molar_mass_g_mol)),
    ];
    if let Some(n) = &a.capacity_note {
        rows.push(("Note", esc(n)));
    }
    o.push_str(&kv(&rows));
    let _ = writeln!(
        o,
        "<p class=\"note\">Q = x F / (3.6 M) mAh/g with F = 96485.33212 C/mol (CODATA), x the \
         electrons exchanged per formula unit and M its molar mass.</p>"
    );
}

fn parameters_section(a: &Analysis, o: &mut String) {
    let p = &a.provenance;
    let _ = writeln!(o, "<h2 id=\"parameters\">Parameters and their sources</h2>");
    let pr = &p.probe;
    let rows = vec![
        (
            "Probe valence V<sub>A</sub>",
            format!(
                "{} v.u. ({})",
                pr.valence,
                esc(&pr.valence_origin.to_string())
            ),
        ),
        (
            "Usual coordination N<sub>A</sub>",
            format!(
                "{} ({}; {})",
                pr.coordination,
                esc(&pr.coordination_origin.to_string()),
                esc(&pr.coordination_source)
            ),
        ),
        (
            "Ideal bond valence s<sub>eq</sub> = V<sub>A</sub>/N<sub>A</sub>",
            format!("{:.4} v.u.", pr.s_eq),
        ),
        (
            "Probe radius",
            format!(
                "{:.3} Å ({}; {})",
                pr.radius.radius,
                esc(&pr.radius.entries),
                esc(&pr.radius.origin.to_string())
            ),
        ),
        (
            "Morse depth per bond D<sub>0</sub>",
            format!("{:.3} eV", p.d0_ev),
        ),
        (
            "Energy cap",
            format!(
                "{} eV (site energy), {} v.u. (valence mismatch)",
                a.model.energy_cap, a.model.mismatch_cap
            ),
        ),
    ];
    o.push_str(&kv(&rows));
    let _ = writeln!(
        o,
        "<h3>Bond-valence pairs of the probe</h3>\n<p class=\"note\">s = exp((R<sub>0</sub> − R) / b); \
         reference ids are those of the IUCr table of bond-valence parameters compiled by I. D. \
         Brown (bvparm2013).</p>"
    );
    pairs_table(&p.pairs, o);
    if let Some(v) = &a.valence {
        let _ = writeln!(o, "<h3>Bond-valence pairs of the valence check</h3>");
        pairs_table(&v.pairs, o);
    }
    let _ = writeln!(o, "<h3>Model knobs</h3>");
    o.push_str("<table>\n");
    o.push_str(&th_row(&["knob", "value", "unit", "origin", "rule"]));
    for k in &p.knobs {
        o.push_str(&row(&[
            td(&format!("<code>{}</code>", esc(&k.name))),
            tn(format!("{}", k.value)),
            td(&esc(&k.unit)),
            td(&esc(&k.origin.to_string())),
            td(&esc(&k.rule)),
        ]));
    }
    o.push_str("</table>\n");
    if !p.radii.is_empty() {
        let _ = writeln!(
            o,
            "<h3>Ionic radii of the framework</h3>\n<p class=\"note\">Shannon, Acta Cryst. A32 \
             (1976) 751, at the coordination counted in the structure.</p>"
        );
        o.push_str("<table>\n");
        o.push_str(&th_row(&[
            "species",
            "coordination",
            "radius (Å)",
            "table entries",
            "origin",
        ]));
        for r in &p.radii {
            let sp = hopmap::structure::Species::new(r.element, Some(r.oxidation)).name();
            o.push_str(&row(&[
                td(&esc(&sp)),
                tn(format!("{}", r.coordination)),
                tn(format!("{:.3}", r.radius)),
                td(&esc(&r.entries)),
                td(&esc(&r.origin.to_string())),
            ]));
        }
        o.push_str("</table>\n");
    }
    if !p.notes.is_empty() {
        o.push_str("<ul class=\"small\">\n");
        for n in &p.notes {
            let _ = writeln!(o, "<li>{}</li>", esc(n));
        }
        o.push_str("</ul>\n");
    }
}

fn pairs_table(pairs: &[hopmap::bv::BondParams], o: &mut String) {
    o.push_str("<table>\n");
    o.push_str(&th_row(&[
        "pair",
        "R<sub>0</sub> (Å)",
        "b (Å)",
        "cutoff (Å)",
        "reference",
        "citation",
    ]));
    for p in pairs {
        let fb = if p.is_fallback() {
            " <span class=\"flag\">FALLBACK estimate (O'Keeffe &amp; Brese 1991)</span>"
        } else {
            ""
        };
        o.push_str(&row(&[
            td(&esc(&p.pair_name())),
            tn(format!("{:.4}", p.r0)),
            tn(format!("{:.3}", p.b)),
            tn(format!("{:.2}", p.cutoff_a)),
            td(&format!("<code>{}</code>{fb}", esc(&p.ref_id))),
            td(&esc(&p.citation)),
        ]));
    }
    o.push_str("</table>\n");
}

/// The report of one analysis as a complete HTML document.
pub fn report(a: &Analysis, file: &str) -> String {
    let figs = figures::all(a);
    let (z, formula) = a.structure.formula_and_z();
    let ion = ion_name(a);
    let title = format!("hopmap: {ion} in {formula}");
    let mut header = String::new();
    let _ = writeln!(
        header,
        "<h1>{} pathways in {} <span class=\"small\">(Z = {z}, {})</span></h1>",
        esc(&ion),
        esc(&formula),
        space_group(a)
    );
    let _ = writeln!(
        header,
        "<p class=\"answer\" id=\"answer\"><b>{}</b></p>",
        esc(&answer_sentence(a))
    );
    let _ = writeln!(
        header,
        "<p class=\"meta\">In one line: <code>{}</code>. From <code>{}</code>, hopmap {}, a \
         static bond-valence screen; see the <a href=\"#cautions\">cautions</a>.</p>",
        esc(&a.summary.headline),
        esc(file),
        env!("CARGO_PKG_VERSION")
    );
    header.push_str(
        "<nav><a href=\"#structure\">structure</a><a href=\"#valence\">valence check</a>\
         <a href=\"#channels\">channels</a><a href=\"#mismatch\">valence mismatch</a>\
         <a href=\"#view3d\">3D view</a>\
         <a href=\"#landscape\">landscape</a><a href=\"#profiles\">profiles</a>\
         <a href=\"#sites\">sites</a><a href=\"#hops\">hops</a><a href=\"#transport\">transport</a>\
         <a href=\"#capacity\">capacity</a><a href=\"#parameters\">parameters</a>\
         <a href=\"#warnings\">warnings</a><a href=\"#cautions\">cautions</a></nav>\n",
    );

    let mut o = String::new();
    structure_section(a, file, &mut o);
    channels_section(a, &mut o);
    o.push_str(&super::viewer::section(a));

    let numbered: Vec<(usize, &ReportFigure)> =
        figs.iter().enumerate().map(|(i, f)| (i + 1, f)).collect();
    let _ = writeln!(
        o,
        "<h2 id=\"landscape\">Energy landscape through the lowest channel</h2>"
    );
    let slices: Vec<_> = numbered
        .iter()
        .filter(|(_, f)| f.name.starts_with("slice"))
        .collect();
    if slices.is_empty() {
        let _ = writeln!(o, "<p>No slice could be drawn.</p>");
    }
    for (n, f) in slices {
        o.push_str(&figure_html(f, *n));
    }
    let _ = writeln!(
        o,
        "<h2 id=\"profiles\">Energy profiles of the channels</h2>"
    );
    let profs: Vec<_> = numbered
        .iter()
        .filter(|(_, f)| f.name.starts_with("profile"))
        .collect();
    if profs.is_empty() {
        let _ = writeln!(o, "<p>No channel, so no profile.</p>");
    }
    for (n, f) in profs {
        o.push_str(&figure_html(f, *n));
    }
    sites_section(a, &mut o);
    hops_section(a, &mut o);
    let rate_figs: Vec<(usize, &ReportFigure)> = numbered
        .iter()
        .filter(|(_, f)| f.name == "size-rate")
        .copied()
        .collect();
    transport_section(a, &rate_figs, &mut o);
    capacity_section(a, &mut o);
    parameters_section(a, &mut o);

    let _ = writeln!(o, "<h2 id=\"warnings\">Warnings</h2>");
    if a.warnings.is_empty() {
        let _ = writeln!(o, "<p>None.</p>");
    } else {
        o.push_str("<div class=\"box warn\"><ul>\n");
        for w in &a.warnings {
            let _ = writeln!(o, "<li>{}</li>", esc(w));
        }
        o.push_str("</ul></div>\n");
    }
    let _ = writeln!(o, "<h2 id=\"cautions\">Cautions</h2>");
    o.push_str("<div class=\"box caution\"><ul>\n");
    for c in super::json::CAUTIONS {
        let _ = writeln!(o, "<li>{}</li>", esc(c));
    }
    o.push_str("</ul></div>\n");
    let t: Vec<String> = a
        .timings
        .iter()
        .map(|(k, v)| format!("{} {:.2} s", esc(k), v))
        .collect();
    let _ = writeln!(
        o,
        "<p class=\"meta\">Computed by hopmap {} ({}).</p>",
        env!("CARGO_PKG_VERSION"),
        t.join(", ")
    );
    page(&title, &header, &o)
}

/// The report's figures as (name, standalone SVG).
pub fn figures(a: &Analysis) -> Vec<(String, String)> {
    figures::all(a)
        .into_iter()
        .map(|f| (f.name, f.svg))
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn ids_get_a_prefix_and_references_follow() {
        let s = "<clipPath id=\"clip1\"></clipPath><g clip-path=\"url(#clip1)\"></g>";
        assert_eq!(
            scope_ids(s, "f2-"),
            "<clipPath id=\"f2-clip1\"></clipPath><g clip-path=\"url(#f2-clip1)\"></g>"
        );
    }

    #[test]
    fn scientific_numbers() {
        assert_eq!(sci(3.256e-15, 2), "3.26 × 10<sup>-15</sup>");
        assert_eq!(sci(9.999e-15, 2), "1.00 × 10<sup>-14</sup>");
        assert_eq!(sci(1.5, 2), "1.50");
        assert_eq!(sci(1e13, 1), "1.0 × 10<sup>13</sup>");
    }
}
