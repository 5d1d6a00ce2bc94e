//! Renderers of a family of frameworks ([`hopmap::family::FamilyStudy`]): the ranked table for
//! the terminal, the JSON document (schema `hopmap.family/1`, documented in the README), the
//! ranked table as CSV (units in the column names), and the self-contained HTML page with its
//! figures: tunnel barrier and crossing cost against block size, the same for every member,
//! capacity bounds (gravimetric and volumetric) and the largest particle charging at 10C and 60C.

use crate::html::{esc, page, scope_ids};
use crate::json::{CAUTIONS, round};
use hopmap::capacity::CapacityLimit;
use hopmap::family::{
    Crossing, FAMILY_C_RATES, FamilyMember, FamilyStudy, MemberKind, MemberResult, ParticleAtRate,
};
use hopmap::summary::Orientation;
use hopmap::transport;
use hopmap_plot::colormap::categorical;
use hopmap_plot::lines::{RegionShape, ShadedRegion};
use hopmap_plot::{Axis, Figure, LegendPosition, LinePlot, MarkerShape, Series};
use serde_json::{Value, json};
use std::fmt::Write;

/// The version of the JSON document.
pub const SCHEMA: &str = "hopmap.family/1";

/// The caution line every family output carries.
pub const FAMILY_CAUTION: &str = "Screening estimates from a static bond-valence model, not cell design; lithium and sodium cells can fail violently: test under your laboratory's safety rules and defer to local regulations and licensed practice.";

/// File name of a member's own report inside the family folder.
pub fn member_report_name(m: &FamilyMember) -> String {
    let slug: String = m
        .label
        .chars()
        .map(|c| {
            if c.is_ascii_alphanumeric() || c == '-' || c == '_' || c == '.' {
                c
            } else {
                '_'
            }
        })
        .collect();
    format!("member-{slug}.html")
}

/// File name of a built member's structure (P 1 CIF) inside the family folder.
pub fn member_cif_name(m: &FamilyMember) -> String {
    member_report_name(m).replace(".html", ".cif")
}

fn directions(o: &[Orientation]) -> String {
    let v: Vec<String> = o
        .iter()
        .map(Orientation::indices)
        .filter(|s| !s.is_empty())
        .collect();
    v.join(" ")
}

/// "1D [010]", "3D".
fn network_text(dimension: u8, o: &[Orientation]) -> String {
    let d = directions(o);
    if d.is_empty() {
        format!("{dimension}D")
    } else {
        format!("{dimension}D {d}")
    }
}

fn size_text(k: &MemberKind) -> String {
    match k {
        MemberKind::Other => "-".into(),
        k => k.size_label(),
    }
}

fn crossing_text(c: Option<&Crossing>) -> String {
    match c {
        Some(Crossing::Opens {
            dimension,
            cost_ev,
            uncertainty_ev,
            ..
        }) => format!("{cost_ev:.2} ± {uncertainty_ev:.2} eV ({dimension}D)"),
        Some(Crossing::AlreadyThreeD) => "none (3D)".into(),
        Some(Crossing::AboveCap { at_least_ev, .. }) => format!("> {at_least_ev:.1} eV"),
        None => "-".into(),
    }
}

/// "33 um (1.8 to >100)": the diameter and, in brackets, its band for the barrier's uncertainty;
/// "> 100 um" where bulk diffusion does not limit the rate.
fn particle_text(p: Option<&ParticleAtRate>) -> String {
    match p.and_then(|p| p.diameter_um.map(|d| (p, d))) {
        Some((p, _)) if p.not_limiting() => "> 100 um".into(),
        Some((p, d)) => match p.band_um {
            Some((lo, hi)) => format!(
                "{} um ({} to {})",
                um(d),
                um(lo.min(hi)),
                if lo.max(hi) > transport::PRACTICAL_PARTICLE_MAX_UM {
                    ">100".to_string()
                } else {
                    um(lo.max(hi))
                }
            ),
            None => format!("{} um", um(d)),
        },
        None => "no bulk transport".into(),
    }
}

fn um(x: f64) -> String {
    if x >= 10.0 {
        format!("{x:.0}")
    } else if x >= 0.1 {
        format!("{x:.2}")
    } else {
        format!("{x:.1e}")
    }
}

fn limited(l: CapacityLimit) -> &'static str {
    match l {
        CapacityLimit::Redox => "redox",
        CapacityLimit::Sites => "sites",
    }
}

fn opt(x: Option<f64>, digits: usize) -> String {
    x.map(|v| format!("{v:.digits$}"))
        .unwrap_or_else(|| "-".into())
}

/// The ranked table for the terminal, with units, then failed members and the caution.
pub fn terminal(s: &FamilyStudy) -> String {
    let mut o = String::new();
    let _ = writeln!(
        o,
        "{}+ through a family of {} frameworks\n  {}",
        s.ion,
        s.members.len(),
        s.ranking_rule
    );
    let header = [
        "rank",
        "member",
        "size",
        "formula",
        "tunnel",
        "barrier (eV)",
        "crossing cost",
        "e-/metal",
        "redox (mAh/g)",
        "sites (mAh/g)",
        "capacity (mAh/cm3)",
        "10C particle",
        "60C particle",
    ];
    let mut rows: Vec<Vec<String>> = vec![header.iter().map(|h| h.to_string()).collect()];
    for m in &s.members {
        let Ok(r) = &m.result else { continue };
        let c = r.capacity.as_ref();
        rows.push(vec![
            m.rank.map(|k| k.to_string()).unwrap_or_else(|| "-".into()),
            m.label.clone(),
            size_text(&m.kind),
            r.formula.clone(),
            r.tunnel
                .as_ref()
                .map(|t| network_text(t.dimension, &t.orientations))
                .unwrap_or_else(|| "none".into()),
            r.tunnel
                .as_ref()
                .map(|t| format!("{:.2} ± {:.2}", t.barrier_ev, t.uncertainty_ev))
                .unwrap_or_else(|| "-".into()),
            crossing_text(r.crossing.as_ref()),
            opt(c.and_then(|c| c.electrons_per_metal), 2),
            opt(c.map(|c| c.redox_mah_g), 0),
            opt(c.and_then(|c| c.site_mah_g), 0),
            c.map(|c| format!("{:.0} ({})", c.capacity_mah_cm3, limited(c.limited_by)))
                .unwrap_or_else(|| "-".into()),
            particle_text(r.particles.first()),
            particle_text(r.particles.get(1)),
        ]);
    }
    let widths: Vec<usize> = (0..header.len())
        .map(|j| rows.iter().map(|r| r[j].chars().count()).max().unwrap_or(0))
        .collect();
    for r in &rows {
        let line: Vec<String> = r
            .iter()
            .zip(&widths)
            .map(|(c, w)| format!("{c:<w$}"))
            .collect();
        let _ = writeln!(o, "  {}", line.join("  ").trim_end());
    }
    for m in &s.members {
        if let (Some(bn), Ok(_)) = (&m.built, &m.result) {
            let _ = writeln!(
                o,
                "  built   {}: {}, refined to GII {:.3} v.u.{}",
                m.label,
                bn.spec,
                bn.refinement.gii_vu,
                if bn.refinement.converged {
                    ""
                } else {
                    " (not converged)"
                }
            );
        }
    }
    for m in &s.members {
        if let Err(e) = &m.result {
            let _ = writeln!(o, "  failed  {} ({}): {e}", m.label, m.origin);
        }
    }
    let _ = writeln!(
        o,
        "  barrier ± the model's uncertainty; crossing cost = threshold of the first network of higher dimension minus the tunnel's; particle = largest diameter bulk diffusion charges at that C-rate"
    );
    let _ = writeln!(o, "  {FAMILY_CAUTION}");
    o
}

fn orientation_list(o: &[Orientation]) -> Vec<String> {
    o.iter()
        .map(Orientation::indices)
        .filter(|s| !s.is_empty())
        .collect()
}

fn kind_json(k: &MemberKind) -> Value {
    match k {
        MemberKind::Block { n, m } => {
            json!({"kind": "block", "block": {"n": n, "m": m, "octahedra": n * m}, "tunnel_kind": null})
        }
        MemberKind::Tunnel(t) => json!({"kind": "tunnel", "block": null, "tunnel_kind": t}),
        MemberKind::Other => json!({"kind": "other", "block": null, "tunnel_kind": null}),
    }
}

fn result_json(r: &MemberResult) -> Value {
    let tunnel = r.tunnel.as_ref().map(|t| {
        json!({
            "dimension": t.dimension,
            "directions": orientation_list(&t.orientations),
            "threshold_ev": round(t.threshold_ev, 4),
            "barrier_ev": round(t.barrier_ev, 4),
            "barrier_uncertainty_ev": round(t.uncertainty_ev, 4),
        })
    });
    let crossing = r.crossing.as_ref().map(|c| match c {
        Crossing::Opens {
            dimension,
            orientations,
            threshold_ev,
            barrier_ev,
            cost_ev,
            uncertainty_ev,
        } => json!({
            "status": "opens",
            "dimension": dimension,
            "directions": orientation_list(orientations),
            "threshold_ev": round(*threshold_ev, 4),
            "barrier_ev": round(*barrier_ev, 4),
            "cost_ev": round(*cost_ev, 4),
            "cost_uncertainty_ev": round(*uncertainty_ev, 4),
            "at_least_ev": null,
        }),
        Crossing::AlreadyThreeD => json!({
            "status": "already_3d", "dimension": null, "directions": [], "threshold_ev": null,
            "barrier_ev": null, "cost_ev": null, "cost_uncertainty_ev": null, "at_least_ev": null,
        }),
        Crossing::AboveCap {
            cap_ev,
            at_least_ev,
        } => json!({
            "status": "above_cap", "dimension": null, "directions": [],
            "threshold_ev": null, "barrier_ev": null, "cost_ev": null,
            "cost_uncertainty_ev": null, "at_least_ev": round(*at_least_ev, 4),
            "cap_ev": round(*cap_ev, 4),
        }),
    });
    let capacity = r.capacity.as_ref().map(|c| {
        json!({
            "formula": c.formula,
            "molar_mass_g_mol": round(c.molar_mass_g_mol, 4),
            "density_g_cm3": round(c.density_g_cm3, 4),
            "direction": c.direction,
            "redox_couples": c.couples,
            "redox_metals_per_formula_unit": round(c.redox_metals_per_formula_unit, 4),
            "redox_electrons_per_formula_unit": round(c.redox_electrons_per_formula_unit, 4),
            "electrons_per_metal": c.electrons_per_metal.map(|v| round(v, 4)),
            "redox_mah_g": round(c.redox_mah_g, 2),
            "redox_mah_cm3": round(c.redox_mah_cm3, 1),
            "site_ions_per_formula_unit": c.site_ions_per_formula_unit.map(|v| round(v, 4)),
            "site_mah_g": c.site_mah_g.map(|v| round(v, 2)),
            "site_mah_cm3": c.site_mah_cm3.map(|v| round(v, 1)),
            "capacity_mah_g": round(c.capacity_mah_g, 2),
            "capacity_mah_cm3": round(c.capacity_mah_cm3, 1),
            "limited_by": limited(c.limited_by),
        })
    });
    let particles: Vec<Value> = r
        .particles
        .iter()
        .map(|p| {
            json!({
                "c_rate": p.c_rate,
                "charge_time_s": 3600.0 / p.c_rate,
                "max_particle_diameter_um": p.diameter_um.map(sig),
                "max_particle_diameter_band_um": p.band_um.map(|(a, b)| [sig(a), sig(b)]),
                "bulk_diffusion_limits": p.diameter_um.map(|_| !p.not_limiting()),
            })
        })
        .collect();
    json!({
        "formula": r.formula,
        "space_group": r.space_group,
        "answer": r.headline,
        "tunnel": tunnel,
        "crossing": crossing,
        "capacity": capacity,
        "capacity_note": r.capacity_note,
        "particles": particles,
        "warnings": r.warnings,
    })
}

/// Six significant digits.
fn sig(x: f64) -> f64 {
    if x == 0.0 || !x.is_finite() {
        return x;
    }
    let d = 5 - x.abs().log10().floor() as i32;
    round(x, d)
}

/// The JSON document of a family (`hopmap.family/1`). `reports` says whether per-member reports
/// were written (their file names are then given).
pub fn json(s: &FamilyStudy, reports: bool) -> Value {
    let members: Vec<Value> = s
        .members
        .iter()
        .map(|m| {
            let mut v = json!({
                "rank": m.rank,
                "label": m.label,
                "origin": m.origin,
                "size_label": m.kind.size_label(),
                "seconds": round(m.seconds, 3),
            });
            let obj = v.as_object_mut().expect("an object");
            obj.insert(
                "built".into(),
                m.built.as_ref().map_or(Value::Null, |b| {
                    json!({
                        "spec": b.spec,
                        "gii_vu": round(b.refinement.gii_vu, 4),
                        "initial_gii_vu": round(b.refinement.initial_gii_vu, 4),
                        "refinement_converged": b.refinement.converged,
                        "construction": b.construction,
                        "cif": if reports && m.result.is_ok() { json!(member_cif_name(m)) } else { Value::Null },
                    })
                }),
            );
            if let Value::Object(k) = kind_json(&m.kind) {
                obj.extend(k);
            }
            match &m.result {
                Ok(r) => {
                    if let Value::Object(k) = result_json(r) {
                        obj.extend(k);
                    }
                    obj.insert("error".into(), Value::Null);
                    obj.insert(
                        "report".into(),
                        if reports {
                            json!(member_report_name(m))
                        } else {
                            Value::Null
                        },
                    );
                }
                Err(e) => {
                    obj.insert(
                        "error".into(),
                        json!({
                            "kind": e.kind.name(),
                            "file": e.file,
                            "place": e.place,
                            "message": e.message,
                            "text": e.to_string(),
                        }),
                    );
                    obj.insert("report".into(), Value::Null);
                }
            }
            v
        })
        .collect();
    json!({
        "schema": SCHEMA,
        "ion": s.ion.symbol(),
        "ranking_rule": s.ranking_rule,
        "c_rates": FAMILY_C_RATES,
        "members": members,
        "cautions": CAUTIONS,
    })
}

/// The ranked table as CSV (header first, units in the column names; empty cells for "not
/// known"), written with the csv crate.
pub fn csv(s: &FamilyStudy) -> Result<String, csv::Error> {
    let mut w = csv::Writer::from_writer(Vec::new());
    w.write_record([
        "rank",
        "label",
        "origin",
        "size",
        "formula",
        "space_group",
        "tunnel_dimension",
        "tunnel_directions",
        "tunnel_barrier_ev",
        "barrier_uncertainty_ev",
        "crossing_dimension",
        "crossing_cost_ev",
        "crossing_barrier_ev",
        "crossing_note",
        "redox_couples",
        "electrons_per_metal",
        "redox_capacity_mah_g",
        "redox_capacity_mah_cm3",
        "site_capacity_mah_g",
        "site_capacity_mah_cm3",
        "capacity_mah_g",
        "capacity_mah_cm3",
        "limited_by",
        "particle_10c_um",
        "particle_10c_low_um",
        "particle_10c_high_um",
        "particle_60c_um",
        "particle_60c_low_um",
        "particle_60c_high_um",
        "error",
    ])?;
    let f = |x: Option<f64>, d: usize| x.map(|v| format!("{v:.d$}")).unwrap_or_default();
    let g = |x: Option<f64>| x.map(|v| format!("{}", sig(v))).unwrap_or_default();
    for m in &s.members {
        let mut row: Vec<String> = vec![
            m.rank.map(|k| k.to_string()).unwrap_or_default(),
            m.label.clone(),
            m.origin.clone(),
            m.kind.size_label(),
        ];
        match &m.result {
            Ok(r) => {
                let t = r.tunnel.as_ref();
                let c = r.capacity.as_ref();
                let (cd, cc, cb, note) = match &r.crossing {
                    Some(Crossing::Opens {
                        dimension,
                        cost_ev,
                        barrier_ev,
                        ..
                    }) => (
                        dimension.to_string(),
                        format!("{cost_ev:.4}"),
                        format!("{barrier_ev:.4}"),
                        String::new(),
                    ),
                    Some(Crossing::AlreadyThreeD) => (
                        String::new(),
                        String::new(),
                        String::new(),
                        "tunnel network already 3D".into(),
                    ),
                    Some(Crossing::AboveCap { at_least_ev, .. }) => (
                        String::new(),
                        String::new(),
                        String::new(),
                        format!("no crossing below the cap: more than {at_least_ev:.2} eV"),
                    ),
                    None => Default::default(),
                };
                let p = |i: usize| r.particles.get(i);
                row.extend([
                    r.formula.clone(),
                    r.space_group.clone(),
                    t.map(|t| t.dimension.to_string()).unwrap_or_default(),
                    t.map(|t| directions(&t.orientations)).unwrap_or_default(),
                    f(t.map(|t| t.barrier_ev), 4),
                    f(t.map(|t| t.uncertainty_ev), 4),
                    cd,
                    cc,
                    cb,
                    note,
                    c.map(|c| c.couples.join(" ")).unwrap_or_default(),
                    f(c.and_then(|c| c.electrons_per_metal), 4),
                    f(c.map(|c| c.redox_mah_g), 2),
                    f(c.map(|c| c.redox_mah_cm3), 1),
                    f(c.and_then(|c| c.site_mah_g), 2),
                    f(c.and_then(|c| c.site_mah_cm3), 1),
                    f(c.map(|c| c.capacity_mah_g), 2),
                    f(c.map(|c| c.capacity_mah_cm3), 1),
                    c.map(|c| limited(c.limited_by).to_string())
                        .unwrap_or_default(),
                    g(p(0).and_then(|p| p.diameter_um)),
                    g(p(0).and_then(|p| p.band_um).map(|b| b.0)),
                    g(p(0).and_then(|p| p.band_um).map(|b| b.1)),
                    g(p(1).and_then(|p| p.diameter_um)),
                    g(p(1).and_then(|p| p.band_um).map(|b| b.0)),
                    g(p(1).and_then(|p| p.band_um).map(|b| b.1)),
                    String::new(),
                ]);
            }
            Err(e) => {
                row.extend(std::iter::repeat_n(String::new(), 25));
                row.push(e.to_string());
            }
        }
        w.write_record(&row)?;
    }
    let bytes = w.into_inner().map_err(|e| e.into_error())?;
    Ok(String::from_utf8_lossy(&bytes).into_owned())
}

/// Error bars as two-point series with no legend entry.
fn error_bars(plot: &mut LinePlot, bars: &[(f64, f64, f64)], colour: hopmap_plot::Rgb) {
    for &(x, lo, hi) in bars {
        plot.series
            .push(Series::line("", vec![(x, lo), (x, hi)]).with_colour(colour));
    }
}

/// Tunnel barrier and crossing cost at x positions, with error bars; legend entries once.
fn barrier_plot(x_axis: Axis, points: &[(f64, &MemberResult)], join: bool) -> LinePlot {
    let mut plot = LinePlot::new(x_axis, Axis::linear("Energy", "eV"));
    plot.legend = LegendPosition::TopLeft;
    let tunnel: Vec<(f64, f64, f64)> = points
        .iter()
        .filter_map(|(x, r)| {
            r.tunnel
                .as_ref()
                .map(|t| (*x, t.barrier_ev, t.uncertainty_ev))
        })
        .collect();
    let cross: Vec<(f64, f64, f64)> = points
        .iter()
        .filter_map(|(x, r)| match &r.crossing {
            Some(Crossing::Opens {
                cost_ev,
                uncertainty_ev,
                ..
            }) => Some((*x, *cost_ev, *uncertainty_ev)),
            _ => None,
        })
        .collect();
    // from zero (no barrier is negative) to the highest bar with room above it for the legend
    let top = tunnel
        .iter()
        .chain(&cross)
        .map(|p| p.1 + p.2)
        .fold(0.1f64, f64::max);
    plot.y = plot.y.clone().with_range(0.0, top * 1.3);
    let (c0, c1) = (categorical(0), categorical(1));
    let mut t = Series::line(
        "tunnel barrier (± model uncertainty)",
        tunnel.iter().map(|p| (p.0, p.1)).collect(),
    )
    .with_colour(c0)
    .with_marker(MarkerShape::Circle);
    t.line = join;
    plot.series.push(t);
    let mut c = Series::line(
        "crossing cost (threshold above the tunnel's)",
        cross.iter().map(|p| (p.0, p.1)).collect(),
    )
    .with_colour(c1)
    .with_marker(MarkerShape::TriangleUp)
    .dashed();
    c.line = join;
    if !cross.is_empty() {
        plot.series.push(c);
    }
    let bars = |v: &[(f64, f64, f64)], dx: f64| -> Vec<(f64, f64, f64)> {
        v.iter()
            .map(|p| (p.0 + dx, (p.1 - p.2).max(0.0), p.1 + p.2))
            .collect()
    };
    error_bars(&mut plot, &bars(&tunnel, 0.0), c0);
    error_bars(&mut plot, &bars(&cross, 0.0), c1);
    plot
}

/// Members with a result, in ranked order, at positions 1, 2, 3, ...
fn ranked_results(s: &FamilyStudy) -> Vec<(f64, &FamilyMember, &MemberResult)> {
    s.answered()
        .enumerate()
        .map(|(i, (m, r))| ((i + 1) as f64, m, r))
        .collect()
}

fn member_axis(s: &FamilyStudy) -> Axis {
    Axis::categories(
        "Member (ranked)",
        "",
        ranked_results(s)
            .iter()
            .map(|(x, m, _)| (*x, m.label.clone()))
            .collect(),
    )
}

fn width_for(n: usize) -> f64 {
    (120.0 * n as f64 + 200.0).max(760.0)
}

/// The figures of the family page as (name, title, caption, standalone SVG).
pub fn figures(s: &FamilyStudy) -> Vec<(String, String, String)> {
    let mut out = Vec::new();
    let ion = s.ion.symbol();
    // 1. blocks against block size
    let mut blocks: Vec<(f64, &MemberResult, String)> = s
        .answered()
        .filter_map(|(m, r)| {
            m.kind
                .octahedra_per_block()
                .map(|n| (n as f64, r, m.kind.size_label()))
        })
        .collect();
    blocks.sort_by(|a, b| a.0.total_cmp(&b.0));
    if !blocks.is_empty() {
        let mut cats: Vec<(f64, String)> = Vec::new();
        for (x, _, l) in &blocks {
            match cats.iter_mut().find(|c| c.0 == *x) {
                Some(c) => c.1 = format!("{} / {l}", c.1),
                None => cats.push((*x, l.clone())),
            }
        }
        let axis = Axis::categories("Block size (n x m octahedra)", "", cats);
        let pts: Vec<(f64, &MemberResult)> = blocks.iter().map(|(x, r, _)| (*x, *r)).collect();
        let plot = barrier_plot(axis, &pts, true);
        out.push((
            "family-block-size".to_string(),
            format!(
                "{ion}+ in shear block phases: tunnel barrier and crossing cost against block size"
            ),
            Figure::lines(760.0, 440.0, plot)
                .with_title(format!("{ion}+ barrier against block size"))
                .to_svg(),
        ));
    }
    let ranked = ranked_results(s);
    if ranked.is_empty() {
        return out;
    }
    let w = width_for(ranked.len());
    // 2. every member
    let pts: Vec<(f64, &MemberResult)> = ranked.iter().map(|(x, _, r)| (*x, *r)).collect();
    let plot = barrier_plot(member_axis(s), &pts, false);
    out.push((
        "family-barriers".to_string(),
        format!("{ion}+: tunnel barrier and crossing cost of every member, in ranked order"),
        Figure::lines(w, 440.0, plot)
            .with_title(format!("{ion}+ barriers, every member"))
            .to_svg(),
    ));
    // 3, 4. capacity bars
    for (name, unit, pick) in [
        (
            "family-capacity-gravimetric",
            "mAh/g",
            (|c: &hopmap::family::MemberCapacity| (Some(c.redox_mah_g), c.site_mah_g))
                as fn(&hopmap::family::MemberCapacity) -> (Option<f64>, Option<f64>),
        ),
        ("family-capacity-volumetric", "mAh/cm³", |c| {
            (Some(c.redox_mah_cm3), c.site_mah_cm3)
        }),
    ] {
        let mut plot = LinePlot::new(
            member_axis(s),
            Axis::linear(
                if unit == "mAh/g" {
                    "Gravimetric capacity"
                } else {
                    "Volumetric capacity"
                },
                unit,
            ),
        );
        plot.legend = LegendPosition::TopRight;
        let mut any = false;
        for (x, _, r) in &ranked {
            let Some(c) = &r.capacity else { continue };
            let (redox, site) = pick(c);
            for (k, (v, label, colour)) in [
                (redox, "redox-limited", categorical(0)),
                (site, "site-limited", categorical(2)),
            ]
            .into_iter()
            .enumerate()
            {
                let Some(v) = v else { continue };
                let x0 = x - 0.36 + 0.36 * k as f64;
                plot.regions.push(ShadedRegion {
                    label: if plot.regions.iter().any(|r| r.label == label) {
                        String::new()
                    } else {
                        label.to_string()
                    },
                    colour,
                    opacity: 0.75,
                    shape: RegionShape::Polygon(vec![
                        (x0 + 0.02, 0.0),
                        (x0 + 0.34, 0.0),
                        (x0 + 0.34, v),
                        (x0 + 0.02, v),
                    ]),
                });
                any = true;
            }
        }
        if any {
            out.push((
                name.to_string(),
                format!("Theoretical capacity bounds ({unit}), every member"),
                Figure::lines(w, 420.0, plot)
                    .with_title(format!("Capacity bounds ({unit})"))
                    .to_svg(),
            ));
        }
    }
    // 5. largest particle at 10C and 60C
    let mut plot = LinePlot::new(member_axis(s), Axis::log("Largest particle diameter", "um"));
    // ranked by barrier, the first members have the largest particles: the lower left is free
    plot.legend = LegendPosition::BottomLeft;
    let mut any = false;
    for (k, (rate, shape)) in FAMILY_C_RATES
        .iter()
        .zip([MarkerShape::Circle, MarkerShape::Square])
        .enumerate()
    {
        let colour = categorical(k + 3);
        let dx = if k == 0 { -0.1 } else { 0.1 };
        let pts: Vec<(f64, f64, Option<(f64, f64)>)> = ranked
            .iter()
            .filter_map(|(x, _, r)| {
                let p = r.particles.get(k)?;
                Some((x + dx, p.diameter_um?, p.band_um))
            })
            .collect();
        if pts.is_empty() {
            continue;
        }
        any = true;
        let mut sr = Series::line(
            format!("{rate:.0}C (bars: barrier ± uncertainty)"),
            pts.iter().map(|p| (p.0, p.1)).collect(),
        )
        .with_colour(colour)
        .with_marker(shape);
        sr.line = false;
        plot.series.push(sr);
        let bars: Vec<(f64, f64, f64)> = pts
            .iter()
            .filter_map(|p| p.2.map(|(lo, hi)| (p.0, lo.min(hi), lo.max(hi))))
            .collect();
        error_bars(&mut plot, &bars, colour);
    }
    if any {
        plot.series.push(
            Series::line(
                "100 um: above it bulk diffusion does not limit",
                vec![(0.5, 100.0), (ranked.len() as f64 + 0.5, 100.0)],
            )
            .with_colour(hopmap_plot::Rgb::new(0x88, 0x88, 0x88))
            .dashed(),
        );
        out.push((
            "family-particles".to_string(),
            format!("Largest particle that bulk diffusion of {ion}+ charges at 10C and 60C"),
            Figure::lines(w, 440.0, plot)
                .with_title(format!("{ion}+: largest particle charged at 10C and 60C"))
                .to_svg(),
        ));
    }
    out
}

/// The family page: the ranked table, the figures, the members that failed, the definitions
/// and the cautions. `reports`: link each member to its own report (written beside the page).
pub fn html(s: &FamilyStudy, reports: bool) -> String {
    html_with_notes(s, reports, &[])
}

/// As [`html`], with notes shown in a box above the table (e.g. that a study is invented).
pub fn html_with_notes(s: &FamilyStudy, reports: bool, notes: &[&str]) -> String {
    let ion = s.ion.symbol();
    let mut b = String::new();
    let best = s.members.iter().find(|m| m.rank == Some(1));
    let mut header = format!(
        "<h1>{ion}+ through a family of {} frameworks</h1>\n",
        s.members.len()
    );
    if let Some((m, r)) = best.and_then(|m| m.result.as_ref().ok().map(|r| (m, r))) {
        let _ = writeln!(
            header,
            "<p class=\"answer\"><b>Lowest tunnel barrier: {} ({}), {}.</b></p>",
            esc(&m.label),
            esc(&r.formula),
            esc(&r.headline)
        );
    }
    let _ = writeln!(
        header,
        "<p class=\"meta\">{}. hopmap {}, a static bond-valence screen; see the \
         <a href=\"#cautions\">cautions</a>.</p>",
        esc(&capitalise(s.ranking_rule)),
        env!("CARGO_PKG_VERSION")
    );
    let _ = writeln!(
        header,
        "<p class=\"note\"><b>Caution:</b> {}</p>",
        esc(FAMILY_CAUTION)
    );
    for n in notes {
        let _ = writeln!(b, "<div class=\"box warn\"><b>{}</b></div>", esc(n));
    }
    let _ = writeln!(b, "<h2 id=\"table\">Ranked table</h2>");
    let _ = writeln!(
        b,
        "<table>\n<tr><th>rank</th><th>member</th><th>size</th><th>formula</th><th>tunnel</th>\
         <th>barrier (eV)</th><th>crossing cost (eV)</th><th>redox couples</th>\
         <th>e⁻ per metal</th><th>redox-limited (mAh/g | mAh/cm³)</th>\
         <th>site-limited (mAh/g | mAh/cm³)</th><th>largest particle at 10C (µm; band)</th>\
         <th>at 60C (µm; band)</th></tr>"
    );
    for m in &s.members {
        let Ok(r) = &m.result else { continue };
        let c = r.capacity.as_ref();
        let name = if reports {
            format!(
                "<a href=\"{}\">{}</a>",
                esc(&member_report_name(m)),
                esc(&m.label)
            )
        } else {
            esc(&m.label)
        };
        let both = |g: Option<f64>, v: Option<f64>| match (g, v) {
            (Some(g), Some(v)) => format!("{g:.0} | {v:.0}"),
            _ => "–".into(),
        };
        let row_class = if m.rank == Some(1) {
            " class=\"best\""
        } else {
            ""
        };
        let _ = writeln!(
            b,
            "<tr{row_class}><td class=\"num\">{}</td><td>{name}</td><td>{}</td><td>{}</td><td>{}</td>\
             <td class=\"num\">{}</td><td class=\"num\">{}</td><td>{}</td><td class=\"num\">{}</td>\
             <td class=\"num\">{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td></tr>",
            m.rank.map(|k| k.to_string()).unwrap_or_else(|| "–".into()),
            esc(&size_text(&m.kind)),
            esc(&r.formula),
            esc(&r
                .tunnel
                .as_ref()
                .map(|t| network_text(t.dimension, &t.orientations))
                .unwrap_or_else(|| "no path".into())),
            r.tunnel
                .as_ref()
                .map(|t| format!("{:.2} ± {:.2}", t.barrier_ev, t.uncertainty_ev))
                .unwrap_or_else(|| "–".into()),
            esc(&crossing_text(r.crossing.as_ref()).replace(" eV", "")),
            esc(&c
                .map(|c| c.couples.join(", "))
                .unwrap_or_else(|| "none".into())),
            c.and_then(|c| c.electrons_per_metal)
                .map(|v| format!("{v:.2}"))
                .unwrap_or_else(|| "–".into()),
            both(c.map(|c| c.redox_mah_g), c.map(|c| c.redox_mah_cm3)),
            both(c.and_then(|c| c.site_mah_g), c.and_then(|c| c.site_mah_cm3)),
            esc(&particle_text(r.particles.first()).replace(" um", "")),
            esc(&particle_text(r.particles.get(1)).replace(" um", "")),
        );
    }
    let _ = writeln!(b, "</table>");
    let failed: Vec<&FamilyMember> = s.members.iter().filter(|m| m.result.is_err()).collect();
    if !failed.is_empty() {
        let _ = writeln!(
            b,
            "<div class=\"box warn\"><p><b>Members not analysed</b> (the others are answered):</p><ul>"
        );
        for m in failed {
            if let Err(e) = &m.result {
                let _ = writeln!(
                    b,
                    "<li>{} (<code>{}</code>): {}</li>",
                    esc(&m.label),
                    esc(&m.origin),
                    esc(&e.to_string())
                );
            }
        }
        let _ = writeln!(b, "</ul></div>");
    }
    let _ = writeln!(b, "<h2 id=\"figures\">Figures</h2>");
    for (i, (name, caption, svg)) in figures(s).iter().enumerate() {
        let _ = writeln!(
            b,
            "<figure id=\"fig-{name}\">\n{}<figcaption>Figure {}. {}.</figcaption>\n</figure>",
            scope_ids(svg, &format!("{name}-")),
            i + 1,
            esc(caption)
        );
    }
    let _ = writeln!(
        b,
        "<h2 id=\"members\">Where each member comes from</h2>\n<table>\n<tr><th>member</th>\
         <th>from</th><th>structure</th><th>time (s)</th></tr>"
    );
    for m in &s.members {
        let how = match &m.built {
            Some(bn) => format!(
                "built by hopmap ({}), bond-valence refinement to GII {:.3} v.u. (ideal framework {:.3} v.u.{})",
                bn.spec,
                bn.refinement.gii_vu,
                bn.refinement.initial_gii_vu,
                if bn.refinement.converged {
                    ""
                } else {
                    "; refinement not converged"
                }
            ),
            None if m.result.is_ok() => "file".to_string(),
            None => "not analysed".to_string(),
        };
        let _ = writeln!(
            b,
            "<tr><td>{}</td><td><code>{}</code></td><td>{}</td><td class=\"num\">{:.1}</td></tr>",
            esc(&m.label),
            esc(&m.origin),
            esc(&how),
            m.seconds
        );
    }
    let _ = writeln!(b, "</table>");
    let _ = writeln!(b, "<h2 id=\"definitions\">What the columns mean</h2>\n<ul>");
    for d in [
        "Tunnel: the network the ion percolates through first (lowest threshold), its dimension and direction [uvw] (plane normal (hkl) for layers) in the analysed cell; barrier from the ion's starting level, ± the model's uncertainty (its leave-one-family-out error on the reference set).",
        "Crossing cost: the threshold of the first network of higher dimension minus the tunnel's threshold (eV): what leaving the tunnels costs, across the shear borders of a block phase or between the tunnels of a bronze; ± the model's barrier uncertainty. 'none (3D)': the first network is already three-dimensional.",
        "Capacity: Q = x F / (3.6 M) per gram of the host formula unit as analysed, times the crystallographic density for mAh/cm³. Redox-limited: the electrons the redox-active cations can take or give over the couples of intercalation chemistry (Ti4+/Ti3+, Nb5+ to Nb3+, Mo6+ to Mo4+, W6+/W5+; common practice); e⁻ per metal: those electrons per redox-active transition-metal atom. Site-limited: the ions the reachable sites hold, at least 2.3 Å apart.",
        "Largest particle: diameter 2L with L = sqrt(2 d D t) for a charge in t = 3600/n s at nC, D from the hopping model on the tunnel network at 298.15 K; the band is the barrier ± its uncertainty. Above 100 µm bulk diffusion does not limit the rate.",
    ] {
        let _ = writeln!(b, "<li>{}</li>", esc(d));
    }
    let _ = writeln!(b, "</ul>");
    let _ = writeln!(b, "<h2 id=\"cautions\">Cautions</h2>");
    b.push_str("<div class=\"box caution\"><ul>\n");
    for c in CAUTIONS {
        let _ = writeln!(b, "<li>{}</li>", esc(c));
    }
    b.push_str("</ul></div>\n");
    page(&format!("hopmap family: {ion}+"), &header, &b)
}

fn capitalise(s: &str) -> String {
    let mut c = s.chars();
    match c.next() {
        Some(f) => f.to_uppercase().collect::<String>() + c.as_str(),
        None => String::new(),
    }
}
