//! The bundled demo study: five invented model frameworks of the fictional Quillfeather Group
//! (structures/demo, embedded in the binary so that `hopmap demo` works from any folder).
//!
//! Each framework is analysed for Li+ and for Na+ with the default options; every analysis
//! gets its own HTML report, and an index page `report.html` tells the scenario and ranks the
//! ten cases by the largest particle that bulk diffusion charges at 10C; a family page compares
//! the five frameworks for Li+ ([`hopmap::family`]). A structure that fails becomes a row with its
//! error; the others go on. Every file is written atomically.

use hopmap::analysis::{self, Analysis, AnalysisOptions};
use hopmap::element::Element;
use hopmap::family::{MemberInput, MemberKind, MemberSource};
use hopmap::transport::PRACTICAL_PARTICLE_MAX_UM;
use hopmap_report::html::{self, esc, sci};
use hopmap_report::output::write_atomic;
use rayon::prelude::*;
use std::fmt::Write;
use std::path::{Path, PathBuf};
use std::time::Instant;

/// One embedded demo structure.
#[derive(Debug, Clone, Copy)]
pub struct DemoStructure {
    /// File name in structures/demo.
    pub file: &'static str,
    /// A short description of the model.
    pub model: &'static str,
    pub cif: &'static str,
}

/// The demo structures, in the order of the scenario.
pub const STRUCTURES: &[DemoStructure] = &[
    DemoStructure {
        file: "QF1_rutile_tunnel.cif",
        model: "QF-1, (Ti0.75Sn0.25)O2, rutile-type 1x1 channels",
        cif: include_str!("../../../structures/demo/QF1_rutile_tunnel.cif"),
    },
    DemoStructure {
        file: "QF2_hollandite_tunnel.cif",
        model: "QF-2, (Mn0.75Ti0.25)O2, hollandite-type 2x2 tunnels",
        cif: include_str!("../../../structures/demo/QF2_hollandite_tunnel.cif"),
    },
    DemoStructure {
        file: "QF3_reo3_cube.cif",
        model: "QF-3, (Mo0.5W0.5)O3, ReO3-type cube framework",
        cif: include_str!("../../../structures/demo/QF3_reo3_cube.cif"),
    },
    DemoStructure {
        file: "QF4_shear_slab.cif",
        model: "QF-4, WNb2O8, ReO3-type slabs cut by shear planes",
        cif: include_str!("../../../structures/demo/QF4_shear_slab.cif"),
    },
    DemoStructure {
        file: "QF5_hexagonal_bronze.cif",
        model: "QF-5, Na0.1WO3, hexagonal tungsten bronze",
        cif: include_str!("../../../structures/demo/QF5_hexagonal_bronze.cif"),
    },
];

/// The mobile ions of the study.
pub const IONS: [&str; 2] = ["Li", "Na"];

/// The C-rate of the ranking (a 6-minute charge).
pub const RANK_C_RATE: f64 = 10.0;

/// The scenario in one paragraph (HTML-safe text).
pub const SCENARIO: &str = "The Quillfeather Group for Fast-Charging Frameworks, at the Norrvik \
Institute of Electrochemical Materials, wants an anode host that takes lithium, or sodium, in a \
few minutes. Its members argue over which kind of open framework to make first: narrow \
rutile-type 1x1 channels, wide hollandite-type 2x2 tunnels, the three-dimensional cavity network \
of a ReO3-type cube framework, ReO3-type slabs cut by crystallographic shear planes, or a \
tungsten bronze whose hexagonal tunnels are already partly filled with sodium. Before anyone \
fires a furnace they screen five idealised model frameworks, QF-1 to QF-5, for Li+ and Na+: \
where can the ion sit, in how many dimensions do the channels percolate, how high are the \
bottlenecks, and how large may a particle be for bulk diffusion to fill it in a 6-minute (10C) \
charge.";

/// The plain statement that goes with the scenario everywhere it is shown.
pub const INVENTED: &str = "Everything in this study is invented: the group, the institute and \
the five frameworks are fictional, and the compositions, cells and coordinates were chosen for \
the demo; they are not published or characterised phases.";

/// What one analysis of the study found, for the comparison table.
#[derive(Debug, Clone, PartialEq)]
pub struct DemoResult {
    pub headline: String,
    /// The answer in plain words ([`html::answer_sentence`]).
    pub answer: String,
    pub dimension: u8,
    /// Barriers of the 1D, 2D and 3D networks (eV), when reached.
    pub barriers_ev: [Option<f64>; 3],
    /// Dimension of the network with the best rate (the largest particle at 10C).
    pub best_dimension: Option<u8>,
    /// Its direction `[uvw]`, plane `(hkl)` or "3D".
    pub best_direction: String,
    pub best_barrier_ev: Option<f64>,
    /// D at 298.15 K of that network (m^2/s); None when no network has bulk transport.
    pub diffusion_m2_s: Option<f64>,
    /// Largest particle diameter bulk diffusion charges at 10C (um); None without bulk
    /// transport.
    pub particle_10c_um: Option<f64>,
    /// The same for the barrier plus and minus its uncertainty (low, high; um).
    pub particle_10c_band_um: Option<(f64, f64)>,
    pub capacity_mah_g: Option<f64>,
    pub capacity_mah_cm3: Option<f64>,
    /// Why there is no capacity (a solid electrolyte), when there is none.
    pub capacity_note: Option<String>,
    /// File name of the per-case report (relative to the output folder).
    pub report: String,
    pub seconds: f64,
}

/// One row of the study: a structure, an ion, and what came of it.
#[derive(Debug, Clone, PartialEq)]
pub struct DemoRow {
    pub structure: String,
    pub model: String,
    pub ion: String,
    pub formula: Option<String>,
    pub outcome: Result<DemoResult, String>,
}

/// What a demo run wrote and found.
#[derive(Debug, Clone)]
pub struct DemoRun {
    pub out: PathBuf,
    pub index: PathBuf,
    /// Every file written (index, reports, structure copies).
    pub files: Vec<PathBuf>,
    /// Rows in rank order (failed rows last).
    pub rows: Vec<DemoRow>,
    /// The terminal summary.
    pub summary: String,
}

/// Why the demo could not write its output.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum DemoError {
    #[error("cannot write {path}: {message}")]
    Write { path: String, message: String },
}

fn write(path: &Path, text: &str, files: &mut Vec<PathBuf>) -> Result<(), DemoError> {
    write_atomic(path, text.as_bytes()).map_err(|e| DemoError::Write {
        path: path.display().to_string(),
        message: e.to_string(),
    })?;
    files.push(path.to_path_buf());
    Ok(())
}

fn stem(file: &str) -> &str {
    file.strip_suffix(".cif").unwrap_or(file)
}

/// Reads an embedded CIF: its first data block with atom sites.
pub fn read_embedded(s: &DemoStructure) -> Result<hopmap::structure::Structure, String> {
    let doc =
        hopmap::cif::parse(s.cif.as_bytes()).map_err(|e| e.into_input_error(s.file).to_string())?;
    let block = hopmap::read::cif::blocks_with_atoms(&doc)
        .first()
        .copied()
        .ok_or_else(|| format!("{}: no data block lists atom sites", s.file))?;
    hopmap::read::cif::structure_from_block(block, s.file).map_err(|e| e.to_string())
}

/// The comparison numbers of one analysis. Only networks with bulk transport at room
/// temperature (D above [`analysis::NO_BULK_TRANSPORT_M2_S`]) are ranked; the capacity is the
/// analysis's own (none for a framework with no redox-active cation).
pub fn summarise(a: &Analysis, report: String, seconds: f64) -> DemoResult {
    let barriers_ev = [1u8, 2, 3].map(|d| {
        a.summary
            .networks
            .iter()
            .find(|n| n.dimension == d)
            .map(|n| n.barrier_ev)
    });
    let at_rate = |d: f64, dim: u8| {
        hopmap::transport::rate_table(d, dim, &[RANK_C_RATE])
            .ok()
            .and_then(|r| r.first().map(|r| r.max_particle_diameter_um))
    };
    let best = a
        .transport
        .iter()
        .filter(|t| t.bulk_transport)
        .filter_map(|t| at_rate(t.diffusion_m2_s, t.dimension).map(|x| (t, x)))
        .max_by(|x, y| x.1.total_cmp(&y.1));
    let best_direction = best
        .and_then(|(t, _)| {
            a.summary
                .networks
                .iter()
                .find(|n| n.dimension == t.dimension)
        })
        .map(|n| match n.dimension {
            3 => "3D".to_string(),
            _ => n
                .orientations
                .iter()
                .map(|o| o.indices())
                .collect::<Vec<_>>()
                .join(" "),
        })
        .unwrap_or_else(|| "-".into());
    let particle_band = best.and_then(|(t, _)| {
        let (lo, hi) = t.diffusion_band_m2_s?;
        Some((at_rate(lo, t.dimension)?, at_rate(hi, t.dimension)?))
    });
    DemoResult {
        headline: analysis::headline(a),
        answer: html::answer_sentence(a),
        dimension: a.summary.first().map(|n| n.dimension).unwrap_or(0),
        barriers_ev,
        best_dimension: best.map(|(t, _)| t.dimension),
        best_direction,
        best_barrier_ev: best.map(|(t, _)| t.barrier_ev),
        diffusion_m2_s: best.map(|(t, _)| t.diffusion_m2_s),
        particle_10c_um: best.map(|(_, x)| x),
        particle_10c_band_um: particle_band,
        capacity_mah_g: a
            .capacity
            .as_ref()
            .map(|c| c.capacity_mah_g)
            .filter(|q| *q > 0.0),
        capacity_mah_cm3: a
            .capacity
            .as_ref()
            .filter(|c| c.capacity_mah_g > 0.0)
            .and_then(|c| c.capacity_mah_cm3),
        capacity_note: a.capacity_note.clone(),
        report,
        seconds,
    }
}

/// A particle size for people: "no bulk transport" when there is none, "over 100" beyond the
/// size of electrode particles ([`hopmap::transport::PRACTICAL_PARTICLE_MAX_UM`]), else three
/// significant figures.
pub fn particle_text(x: Option<f64>) -> String {
    match x {
        None => "no bulk transport".into(),
        Some(v) if v > PRACTICAL_PARTICLE_MAX_UM => format!("over {PRACTICAL_PARTICLE_MAX_UM:.0}"),
        Some(v) => sig3(v),
    }
}

/// The claim of the index page about the best case, made only from the numbers its table shows.
pub fn particle_claim(x: &DemoResult) -> String {
    let Some(p) = x.particle_10c_um else {
        return "None of its networks carries bulk transport at room temperature on this model."
            .into();
    };
    let band = x
        .particle_10c_band_um
        .filter(|(lo, _)| *lo <= PRACTICAL_PARTICLE_MAX_UM)
        .map(|(lo, hi)| {
            format!(
                " ({} to {} µm for the barrier's ±{:.2} eV)",
                particle_text(Some(lo)),
                particle_text(Some(hi)),
                analysis::BARRIER_UNCERTAINTY_EV
            )
        })
        .unwrap_or_default();
    if p > PRACTICAL_PARTICLE_MAX_UM {
        format!(
            "Bulk diffusion would fill particles larger than electrode particles are made \
             (over {PRACTICAL_PARTICLE_MAX_UM:.0} µm){band} in a 10C charge: on this model the \
             rate is set by the electrolyte and contacts, not by the framework."
        )
    } else {
        format!(
            "A particle up to {} µm across{band} charges by bulk diffusion at 10C.",
            sig3(p)
        )
    }
}

/// Analyses one case and writes its report; the row carries the error when anything fails.
fn run_case(s: &DemoStructure, ion: &str, out: &Path) -> (DemoRow, Vec<PathBuf>) {
    let t0 = Instant::now();
    let mut row = DemoRow {
        structure: stem(s.file).to_string(),
        model: s.model.to_string(),
        ion: ion.to_string(),
        formula: None,
        outcome: Err(String::new()),
    };
    let mut files = Vec::new();
    let result = (|| -> Result<DemoResult, String> {
        let structure = read_embedded(s)?;
        row.formula = Some(structure.formula_and_z().1);
        let element = Element::from_symbol(ion).ok_or_else(|| format!("unknown ion {ion}"))?;
        let a = analysis::analyse(&structure, &AnalysisOptions::new(element))
            .map_err(|e| e.to_string())?;
        let name = format!("{}-{}.html", stem(s.file), ion);
        let page = html::report(&a, &format!("structures/{}", s.file));
        write(&out.join(&name), &page, &mut files).map_err(|e| e.to_string())?;
        Ok(summarise(&a, name, t0.elapsed().as_secs_f64()))
    })();
    row.outcome = result;
    (row, files)
}

/// Orders rows: largest particle at 10C first, then the others that worked, then failures.
pub fn rank(rows: &mut [DemoRow]) {
    let key = |r: &DemoRow| match &r.outcome {
        Ok(x) => (0, -x.particle_10c_um.unwrap_or(-1.0)),
        Err(_) => (1, 0.0),
    };
    rows.sort_by(|x, y| {
        let (a, b) = (key(x), key(y));
        a.0.cmp(&b.0).then(a.1.total_cmp(&b.1))
    });
}

/// Three significant figures; below 0.001, scientific.
fn sig3(v: f64) -> String {
    if v == 0.0 || !v.is_finite() {
        return format!("{v}");
    }
    if v.abs() < 1e-3 {
        return sci(v, 2);
    }
    let e = v.abs().log10().floor() as i32;
    let d = (2 - e).max(0) as usize;
    format!("{v:.d$}")
}

fn opt(x: Option<f64>, f: impl Fn(f64) -> String) -> String {
    x.map(f).unwrap_or_else(|| "–".into())
}

fn barriers_text(b: &[Option<f64>; 3], sep: &str) -> String {
    let parts: Vec<String> = b
        .iter()
        .enumerate()
        .filter_map(|(i, x)| x.map(|v| format!("{}D {v:.2}", i + 1)))
        .collect();
    if parts.is_empty() {
        "none".into()
    } else {
        parts.join(sep)
    }
}

/// The figure of the index page: barrier against capacity for every case that has both, a
/// labelled point each, Li+ and Na+ apart. None when no case has both.
pub fn index_figure(rows: &[DemoRow]) -> Option<String> {
    use hopmap_plot::{Axis, Figure, LinePlot, MarkerSet, MarkerShape, colormap::categorical};
    let mut plot = LinePlot::new(
        Axis::linear("barrier", "eV"),
        Axis::linear("capacity", "mAh/g"),
    );
    for (k, (ion, shape)) in [("Li", MarkerShape::Circle), ("Na", MarkerShape::Square)]
        .into_iter()
        .enumerate()
    {
        let points: Vec<(f64, f64, Option<String>)> = rows
            .iter()
            .filter(|r| r.ion == ion)
            .filter_map(|r| {
                let x = r.outcome.as_ref().ok()?;
                Some((
                    x.best_barrier_ev?,
                    x.capacity_mah_g?,
                    Some(r.structure.split('_').next().unwrap_or("").to_string()),
                ))
            })
            .collect();
        if !points.is_empty() {
            plot.markers.push(MarkerSet {
                legend: format!("{ion}+"),
                shape,
                colour: categorical(k),
                points,
            });
        }
    }
    if plot.markers.is_empty() {
        return None;
    }
    plot.legend = hopmap_plot::LegendPosition::TopRight;
    Some(
        Figure::lines(720.0, 420.0, plot)
            .with_title("Barrier and capacity of the demo frameworks (invented)")
            .to_svg(),
    )
}

/// The index page of the study.
pub fn index_page(rows: &[DemoRow]) -> String {
    let mut h = String::new();
    let _ = writeln!(
        h,
        "<h1>Demo study: which open framework charges fastest? <span class=\"small\">(invented \
         scenario)</span></h1>"
    );
    let ok: Vec<&DemoRow> = rows.iter().filter(|r| r.outcome.is_ok()).collect();
    if let Some(top) = ok.first()
        && let Ok(x) = &top.outcome
    {
        let _ = writeln!(
            h,
            "<p class=\"answer\" id=\"answer\"><b>Best on this screen: {} ({}). {} {}</b></p>",
            esc(&top.structure),
            esc(&top.model),
            esc(&x.answer),
            esc(&particle_claim(x))
        );
    }
    let mut o = String::new();
    let _ = writeln!(o, "<h2 id=\"scenario\">The scenario</h2>");
    let _ = writeln!(o, "<p>{}</p>", esc(SCENARIO));
    let _ = writeln!(o, "<div class=\"box warn\"><b>{}</b></div>", esc(INVENTED));
    let _ = writeln!(
        o,
        "<p>The five frameworks side by side for Li+, as a family, beside the block sizes the \
         group is weighing (3 x 3 to 4 x 5, built by <code>hopmap build</code>): tunnel \
         barrier, the cost of leaving the tunnels, capacity bounds in mAh/g and mAh/cm³, and the \
         largest particle at 10C and 60C: <a href=\"{FAMILY_PAGE}\">{FAMILY_PAGE}</a>.</p>"
    );
    if let Some(svg) = index_figure(rows) {
        let _ = writeln!(
            o,
            "<h2 id=\"overview\">Overview</h2>\n<figure id=\"fig-overview\">\n{svg}\n\
             <figcaption>Figure 1. Barrier of the network with the best rate against the \
             theoretical capacity, one point per framework and ion (Li+ circles, Na+ squares); \
             frameworks without bulk transport at room temperature or without a capacity are \
             listed in the table only. Barriers carry the model's uncertainty of ±{:.2} eV.\
             </figcaption>\n</figure>",
            analysis::BARRIER_UNCERTAINTY_EV
        );
    }
    let _ = writeln!(o, "<h2 id=\"ranking\">Ranking</h2>");
    let _ = writeln!(
        o,
        "<p class=\"note\">Ranked by the largest particle that bulk diffusion charges in a \
         10C charge (6 minutes), through the network with the best rate. Barriers are those of \
         the 1D, 2D and 3D networks of the site-energy landscape; D at 298.15 K from the hopping \
         model (attempt frequency 10<sup>13</sup> Hz, dilute limit). Capacity: the theoretical \
         capacity from the redox of the framework's cations (extraction when the structure holds \
         the ion, insertion into an empty host), limited by the room on the reachable sites (no \
         two ions closer than 2.3 Å); none for a framework without a redox-active cation. \
         Particles larger than {PRACTICAL_PARTICLE_MAX_UM:.0} µm are given as \"over \
         {PRACTICAL_PARTICLE_MAX_UM:.0}\": bulk diffusion does not limit the rate there. Click a \
         structure for its full report.</p>"
    );
    o.push_str(
        "<table>\n<tr><th>rank</th><th>structure</th><th>ion</th><th>formula</th>\
        <th>dimension</th><th>barriers (eV)</th><th>best network</th><th>direction</th>\
        <th>D at 298 K (m²/s)</th><th>largest particle at 10C (µm)</th>\
        <th>capacity (mAh/g)</th><th>capacity (mAh/cm³)</th></tr>\n",
    );
    let mut rank_no = 0;
    for r in rows {
        match &r.outcome {
            Ok(x) => {
                rank_no += 1;
                let cls = if rank_no == 1 { " class=\"best\"" } else { "" };
                let _ = writeln!(
                    o,
                    "<tr{cls}><td class=\"num\">{rank_no}</td><td><a href=\"{}\">{}</a><br>\
                     <span class=\"small\">{}</span></td><td>{}+</td><td>{}</td>\
                     <td class=\"num\">{}</td><td>{}</td><td>{}</td><td>{}</td>\
                     <td class=\"num\">{}</td><td class=\"num\"><b>{}</b></td>\
                     <td class=\"num\">{}</td><td class=\"num\">{}</td></tr>",
                    esc(&x.report),
                    esc(&r.structure),
                    esc(&r.model),
                    esc(&r.ion),
                    esc(r.formula.as_deref().unwrap_or("")),
                    if x.dimension == 0 {
                        "none".to_string()
                    } else {
                        format!("{}D", x.dimension)
                    },
                    barriers_text(&x.barriers_ev, "<br>"),
                    x.best_dimension
                        .map(|d| format!("{d}D, {:.2} eV", x.best_barrier_ev.unwrap_or(0.0)))
                        .unwrap_or_else(|| "–".into()),
                    esc(&x.best_direction),
                    x.diffusion_m2_s
                        .map(|v| sci(v, 2))
                        .unwrap_or_else(|| "no bulk transport".into()),
                    particle_text(x.particle_10c_um),
                    opt(x.capacity_mah_g, |v| format!("{v:.0}")),
                    opt(x.capacity_mah_cm3, |v| format!("{v:.0}")),
                );
            }
            Err(e) => {
                let _ = writeln!(
                    o,
                    "<tr><td class=\"num\">–</td><td>{}<br><span class=\"small\">{}</span></td>\
                     <td>{}+</td><td>{}</td><td colspan=\"8\"><span class=\"flag\">failed:</span> \
                     {}</td></tr>",
                    esc(&r.structure),
                    esc(&r.model),
                    esc(&r.ion),
                    esc(r.formula.as_deref().unwrap_or("")),
                    esc(e)
                );
            }
        }
    }
    o.push_str("</table>\n");
    let _ = writeln!(
        o,
        "<p class=\"note\">The input structures are copied next to this page in \
         <code>structures/</code>: {}.</p>",
        STRUCTURES
            .iter()
            .map(|s| format!("<a href=\"structures/{f}\">{f}</a>", f = esc(s.file)))
            .collect::<Vec<_>>()
            .join(", ")
    );
    let _ = writeln!(o, "<h2 id=\"cautions\">Cautions</h2>");
    o.push_str("<div class=\"box caution\"><ul>\n");
    for c in hopmap_report::json::CAUTIONS {
        let _ = writeln!(o, "<li>{}</li>", esc(c));
    }
    o.push_str("</ul></div>\n");
    html::page("hopmap demo study (invented scenario)", &h, &o)
}

/// The terminal summary: the ranked table and where the report is.
pub fn terminal_summary(rows: &[DemoRow], index: &Path, seconds: f64) -> String {
    let mut o = String::new();
    let _ = writeln!(
        o,
        "hopmap demo: five invented frameworks of the fictional Quillfeather Group, Li+ and Na+"
    );
    let _ = writeln!(
        o,
        "  (compositions invented for the demo; not published phases)\n"
    );
    let _ = writeln!(
        o,
        "  {:>4}  {:<26} {:<3} {:<22} {:<9} {:>15} {:>14} {:>15}",
        "rank",
        "structure",
        "ion",
        "barriers (eV)",
        "direction",
        "D 298 K (m2/s)",
        "10C max (um)",
        "capacity(mAh/g)"
    );
    let mut n = 0;
    for r in rows {
        match &r.outcome {
            Ok(x) => {
                n += 1;
                let _ = writeln!(
                    o,
                    "  {:>4}  {:<26} {:<3} {:<22} {:<9} {:>15} {:>14} {:>15}",
                    n,
                    r.structure,
                    r.ion,
                    barriers_text(&x.barriers_ev, " "),
                    x.best_direction,
                    x.diffusion_m2_s
                        .map(|v| format!("{v:.1e}"))
                        .unwrap_or_else(|| "none".into()),
                    match x.particle_10c_um {
                        None => "none".into(),
                        p => particle_text(p),
                    },
                    match (&x.capacity_mah_g, &x.capacity_note) {
                        (Some(q), _) => format!("{q:.0}"),
                        (None, Some(_)) => "electrolyte".into(),
                        (None, None) => "-".into(),
                    },
                );
            }
            Err(e) => {
                let _ = writeln!(
                    o,
                    "  {:>4}  {:<26} {:<3} failed: {e}",
                    "-", r.structure, r.ion
                );
            }
        }
    }
    let _ = writeln!(o, "\n  report: {}  ({seconds:.1} s)", index.display());
    let _ = writeln!(
        o,
        "  Screening estimates from a static bond-valence model: rank and pre-select, do not design cells from them."
    );
    o
}

/// The family page of the study, beside the index.
pub const FAMILY_PAGE: &str = "family.html";

/// The tunnel kind of each demo framework for the family page (none for the cube and the
/// shear slabs, which are not n x m block phases).
fn family_kind(s: &DemoStructure) -> MemberKind {
    match s.file {
        "QF1_rutile_tunnel.cif" => MemberKind::Tunnel("rutile 1x1".into()),
        "QF2_hollandite_tunnel.cif" => MemberKind::Tunnel("hollandite 2x2".into()),
        "QF5_hexagonal_bronze.cif" => MemberKind::Tunnel("hexagonal bronze".into()),
        _ => MemberKind::Other,
    }
}

/// Block sizes the study weighs beside its five frameworks, built by [`hopmap::build`]
/// (idealised frameworks refined by bond valence, not published refinements).
pub const BUILT_MEMBERS: [&str; 4] = [
    "block:3x3:ribbon:Ti1Nb2",
    "block:3x4:tet:Nb:W",
    "block:4x4:tet:Nb,W:W",
    "block:4x5:tet:Nb,W:W",
];

/// Says what the built members are.
const BUILT_NOTE: &str = "The n x m block members are idealised frameworks built by hopmap build \
(ReO3-type blocks of octahedra of one M-O distance, coordinates refined by bond valence): \
candidates of the study, not published refinements.";

/// The five frameworks and the built block sizes compared for Li+ as a family
/// ([`hopmap::family`]), as an HTML page.
pub fn family_page() -> String {
    let mut members: Vec<MemberInput> = STRUCTURES
        .iter()
        .map(|s| MemberInput {
            label: s.model.split(',').next().unwrap_or(s.file).to_string(),
            kind: family_kind(s),
            origin: format!("structures/{}", s.file),
            source: match read_embedded(s) {
                Ok(x) => MemberSource::Structure(Box::new(x)),
                Err(e) => MemberSource::Failed(hopmap::Error {
                    kind: hopmap::ErrorKind::Input,
                    file: None,
                    place: None,
                    message: e,
                }),
            },
        })
        .collect();
    members.extend(
        BUILT_MEMBERS
            .iter()
            .map(|t| MemberInput::from_spec(t, None)),
    );
    let opts = AnalysisOptions::new(Element::from_symbol("Li").expect("Li is an element"));
    hopmap_report::family::html_with_notes(
        &hopmap::family::study(members, &opts),
        false,
        &[INVENTED, BUILT_NOTE],
    )
}

/// Runs the demo study into `out` (created if needed). `progress` prints one line per finished
/// case on stderr.
pub fn run(out: &Path, progress: bool) -> Result<DemoRun, DemoError> {
    let t0 = Instant::now();
    std::fs::create_dir_all(out.join("structures")).map_err(|e| DemoError::Write {
        path: out.display().to_string(),
        message: e.to_string(),
    })?;
    let mut files = Vec::new();
    for s in STRUCTURES {
        write(&out.join("structures").join(s.file), s.cif, &mut files)?;
    }
    let jobs: Vec<(&DemoStructure, &str)> = STRUCTURES
        .iter()
        .flat_map(|s| IONS.iter().map(move |ion| (s, *ion)))
        .collect();
    let results: Vec<(DemoRow, Vec<PathBuf>)> = jobs
        .par_iter()
        .map(|(s, ion)| {
            let r = run_case(s, ion, out);
            if progress {
                match &r.0.outcome {
                    Ok(x) => eprintln!(
                        "  {} with {}+: {} ({:.1} s)",
                        r.0.structure, ion, x.headline, x.seconds
                    ),
                    Err(e) => eprintln!("  {} with {}+: failed: {e}", r.0.structure, ion),
                }
            }
            r
        })
        .collect();
    let mut rows = Vec::new();
    for (row, f) in results {
        rows.push(row);
        files.extend(f);
    }
    rank(&mut rows);
    write(&out.join(FAMILY_PAGE), &family_page(), &mut files)?;
    let index = out.join("report.html");
    write(&index, &index_page(&rows), &mut files)?;
    let summary = terminal_summary(&rows, &index, t0.elapsed().as_secs_f64());
    Ok(DemoRun {
        out: out.to_path_buf(),
        index,
        files,
        rows,
        summary,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_embedded_structure_reads() {
        for s in STRUCTURES {
            let st = read_embedded(s).unwrap_or_else(|e| panic!("{e}"));
            assert!(!st.sites.is_empty(), "{}", s.file);
        }
    }

    #[test]
    fn failures_rank_last() {
        let row = |name: &str, x: Option<f64>| DemoRow {
            structure: name.into(),
            model: String::new(),
            ion: "Li".into(),
            formula: None,
            outcome: match x {
                Some(v) => Ok(DemoResult {
                    headline: String::new(),
                    answer: String::new(),
                    dimension: 1,
                    barriers_ev: [Some(0.3), None, None],
                    best_dimension: Some(1),
                    best_direction: "[001]".into(),
                    best_barrier_ev: Some(0.3),
                    diffusion_m2_s: Some(1e-12),
                    particle_10c_um: Some(v),
                    particle_10c_band_um: None,
                    capacity_mah_g: None,
                    capacity_mah_cm3: None,
                    capacity_note: None,
                    report: String::new(),
                    seconds: 0.0,
                }),
                None => Err("broken".into()),
            },
        };
        let mut rows = vec![row("a", None), row("b", Some(1.0)), row("c", Some(5.0))];
        rank(&mut rows);
        let names: Vec<&str> = rows.iter().map(|r| r.structure.as_str()).collect();
        assert_eq!(names, ["c", "b", "a"]);
    }

    #[test]
    fn particle_claims_stay_within_what_electrodes_hold() {
        assert_eq!(particle_text(None), "no bulk transport");
        assert_eq!(particle_text(Some(1256.0)), "over 100");
        assert_eq!(particle_text(Some(8.63)), "8.63");
        let mut x = DemoResult {
            headline: String::new(),
            answer: String::new(),
            dimension: 1,
            barriers_ev: [Some(0.3), None, None],
            best_dimension: Some(1),
            best_direction: "[001]".into(),
            best_barrier_ev: Some(0.3),
            diffusion_m2_s: Some(1e-10),
            particle_10c_um: Some(1256.0),
            particle_10c_band_um: Some((50.0, 9000.0)),
            capacity_mah_g: None,
            capacity_mah_cm3: None,
            capacity_note: None,
            report: String::new(),
            seconds: 0.0,
        };
        let c = particle_claim(&x);
        assert!(!c.contains("1256") && c.contains("over 100"), "{c}");
        x.particle_10c_um = None;
        assert!(particle_claim(&x).contains("bulk transport"));
    }
}
