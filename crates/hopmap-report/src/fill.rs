//! Renderers of the filling study ([`hopmap::filling::FillStudy`]): terminal text, the JSON
//! document (schema `hopmap.fill/1`, documented in the README) and the HTML page with the
//! figure of D against the filling.

use crate::html::{esc, page, sci, scope_ids};
use crate::json::round;
use hopmap::blocking::ParticleLimit;
use hopmap::filling::FillStudy;
use hopmap::kmc::{Estimate, RunLength};
use hopmap_plot::{Axis, Figure, LinePlot, MarkerShape, Series};
use serde_json::{Value, json};
use std::fmt::Write;

/// The version of the JSON document.
pub const SCHEMA: &str = "hopmap.fill/1";

/// A number in plain scientific notation for the terminal (HTML uses [`sci`]).
fn num(x: f64, digits: usize) -> String {
    if !x.is_finite() {
        "-".into()
    } else if x == 0.0 {
        "0".into()
    } else {
        format!("{:.*e}", digits.saturating_sub(1), x)
    }
}

fn pm(e: &Estimate) -> String {
    if !e.mean.is_finite() {
        return "-".into();
    }
    format!("{} ± {}", num(e.mean, 3), num(e.stderr, 2))
}

fn pm_html(e: &Estimate) -> String {
    if !e.mean.is_finite() {
        return "-".into();
    }
    if e.mean == 0.0 {
        return "0".into();
    }
    format!("{} ± {}", sci(e.mean, 3), sci(e.stderr, 2))
}

fn fixed(e: &Estimate) -> String {
    if !e.mean.is_finite() {
        return "-".into();
    }
    format!("{:.3} ± {:.3}", e.mean, e.stderr)
}

fn limit_text(l: &ParticleLimit) -> String {
    match l {
        ParticleLimit::Diameter(d) => format!("{:.1} nm", d / 10.0),
        ParticleLimit::Below(d) => format!("< {:.1} nm", d / 10.0),
        ParticleLimit::NoLimitUpTo(d) => format!("> {:.0} nm (no limit found)", d / 10.0),
    }
}

fn run_length(s: &FillStudy) -> String {
    match s.options.kmc.length {
        RunLength::HopsPerIon(h) => format!("{h} hops per ion"),
        RunLength::Time(t) => format!("{} s", sci(t, 2)),
    }
}

fn settings_lines(s: &FillStudy) -> Vec<String> {
    let k = &s.options.kmc;
    let rep = match k.repulsion {
        Some(r) => format!(
            "screened Coulomb, eps_r = {}, screening length {} A, cut-off {} A",
            r.relative_permittivity, r.screening_length_a, r.cutoff_a
        ),
        None => "none".to_string(),
    };
    vec![
        format!(
            "network: {} sites and {} hops per cell ({:.2} sites per formula unit), supercell {}x{}x{}",
            s.sites_per_cell,
            s.hops_per_cell,
            s.sites_per_formula_unit,
            s.repeats[0],
            s.repeats[1],
            s.repeats[2]
        ),
        format!(
            "T = {} K, attempt frequency {} Hz shared over the 2d = {} directions of the {}D network",
            k.temperature_k,
            num(k.attempt_frequency_hz, 2),
            2 * s.dimension,
            s.dimension
        ),
        format!("exclusion distance {} A; repulsion: {rep}", k.exclusion_a),
        format!(
            "{} independent runs per filling (seed {}), warm-up {} hops per ion, measured over {}",
            k.runs,
            k.seed,
            k.warmup_hops_per_ion,
            run_length(s)
        ),
    ]
}

/// Terminal text of `hopmap fill`.
pub fn terminal(s: &FillStudy, file: &str) -> String {
    let mut o = String::new();
    let _ = writeln!(
        o,
        "{}+ in {} ({file}): transport as the host fills (kinetic Monte Carlo)",
        s.ion, s.formula
    );
    for l in settings_lines(s) {
        let _ = writeln!(o, "  {l}");
    }
    if let Some(d) = s.dilute_reference_m2_s {
        let _ = writeln!(
            o,
            "  dilute limit of the analysis (hopping model, {}D): D = {} m^2/s",
            s.dimension,
            num(d, 2)
        );
    }
    let _ = writeln!(o);
    let _ = writeln!(
        o,
        "  {:>6} {:>6}  {:>22}  {:>9}  {:>17}  {:>22}  {:>10}",
        "x/f.u.",
        "sites",
        "D fast dir. (m^2/s)",
        "direction",
        "correlation f",
        "sigma N-E (S/cm)",
        "time (s)"
    );
    for r in &s.rows {
        match &r.result {
            Ok(p) => {
                let _ = writeln!(
                    o,
                    "  {:>6.2} {:>6.3}  {:>22}  {:>9}  {:>17}  {:>22}  {:>10}",
                    r.x_per_formula_unit,
                    r.site_fraction,
                    pm(&p.diffusion_m2_s),
                    if p.diffusion_m2_s.mean > 0.0 {
                        format!(
                            "{:.2},{:.2},{:.2}",
                            p.direction[0].abs(),
                            p.direction[1].abs(),
                            p.direction[2].abs()
                        )
                    } else {
                        "-".to_string()
                    },
                    fixed(&p.correlation_factor),
                    pm(&p.conductivity_s_cm),
                    num(p.time_s, 2)
                );
            }
            Err(e) => {
                let _ = writeln!(
                    o,
                    "  {:>6.2} {:>6.3}  not made: {e}",
                    r.x_per_formula_unit, r.site_fraction
                );
            }
        }
    }
    let _ = writeln!(
        o,
        "  (D along the principal direction of fastest transport, Cartesian unit vector; ± one \
         standard error over runs; sigma by Nernst-Einstein with Haven ratio 1)"
    );
    for f in &s.families {
        let _ = writeln!(o);
        let _ = writeln!(
            o,
            "  blocking, {}D family (barrier {:.2} eV; {} sites, {} hops per cell, hop {:.2} A; {}): \
             immobile defects on a fraction p of its sites",
            f.dimension,
            f.barrier_ev,
            f.sites_per_cell,
            f.hops_per_cell,
            f.spacing_a,
            if f.single_file {
                "isolated channels, single file"
            } else {
                "cross-linked"
            }
        );
        let _ = writeln!(
            o,
            "    {:>6}  {:>28}  {:>16}  {:>22}  {:>14}",
            "p",
            format!("largest particle ({:.0}% kept)", s.options.share * 100.0),
            "1D law",
            format!("share at {:.0} nm", s.options.particle_diameter_a / 10.0),
            "1D law share"
        );
        for r in &f.rows {
            let _ = writeln!(
                o,
                "    {:>6}  {:>28}  {:>16}  {:>22}  {:>14}",
                r.defect_fraction,
                limit_text(&r.limit),
                r.law_limit_a
                    .map(|d| format!("{:.1} nm", d / 10.0))
                    .unwrap_or_else(|| "-".into()),
                fixed(&r.share_at_particle),
                r.share_law
                    .map(|v| format!("{v:.3}"))
                    .unwrap_or_else(|| "-".into())
            );
        }
    }
    let _ = writeln!(o);
    for n in &s.notes {
        let _ = writeln!(o, "  {n}");
    }
    o
}

fn est(e: &Estimate, digits: i32) -> Value {
    let r = |x: f64| {
        if x.is_finite() {
            json!(sig(x, digits))
        } else {
            Value::Null
        }
    };
    json!({ "mean": r(e.mean), "stderr": r(e.stderr) })
}

/// Rounds to `digits` significant digits (through the decimal text, so no binary residue).
fn sig(x: f64, digits: i32) -> f64 {
    if x == 0.0 || !x.is_finite() {
        return x;
    }
    format!("{:.*e}", (digits - 1).max(0) as usize, x)
        .parse()
        .unwrap_or(x)
}

/// The JSON document of `hopmap fill --json`.
pub fn json(s: &FillStudy, file: &str) -> Value {
    let k = &s.options.kmc;
    let rows: Vec<Value> = s
        .rows
        .iter()
        .map(|r| match &r.result {
            Ok(p) => json!({
                "x_per_formula_unit": round(r.x_per_formula_unit, 4),
                "site_fraction": round(r.site_fraction, 4),
                "ions_in_supercell": p.runs[0].ions,
                "diffusion_m2_s": est(&p.diffusion_m2_s, 4),
                "direction_cartesian": p.direction.map(|v| round(v, 4)),
                "diffusion_xyz_m2_s": p.diffusion_axes_m2_s.iter().map(|e| est(e, 4)).collect::<Vec<_>>(),
                "correlation_factor": est(&p.correlation_factor, 4),
                "conductivity_s_cm": est(&p.conductivity_s_cm, 4),
                "carriers_per_m3": sig(p.carriers_per_m3, 5),
                "time_s": sig(p.time_s, 4),
                "events_per_run": p.events.round(),
                "error": Value::Null,
            }),
            Err(e) => json!({
                "x_per_formula_unit": round(r.x_per_formula_unit, 4),
                "site_fraction": round(r.site_fraction, 4),
                "error": e,
            }),
        })
        .collect();
    let families: Vec<Value> = s
        .families
        .iter()
        .map(|f| {
            json!({
                "dimension": f.dimension,
                "barrier_ev": round(f.barrier_ev, 4),
                "threshold_ev": round(f.threshold_ev, 4),
                "sites_per_cell": f.sites_per_cell,
                "hops_per_cell": f.hops_per_cell,
                "hop_length_a": round(f.spacing_a, 3),
                "single_file": f.single_file,
                "rows": f.rows.iter().map(|r| {
                    let (kind, d) = match r.limit {
                        ParticleLimit::Diameter(d) => ("diameter", d),
                        ParticleLimit::Below(d) => ("below", d),
                        ParticleLimit::NoLimitUpTo(d) => ("no_limit_up_to", d),
                    };
                    json!({
                        "defect_fraction": r.defect_fraction,
                        "largest_particle": { "kind": kind, "diameter_nm": round(d / 10.0, 2) },
                        "law_largest_particle_nm": r.law_limit_a.map(|d| round(d / 10.0, 2)),
                        "share_at_particle": est(&r.share_at_particle, 4),
                        "law_share_at_particle": r.share_law.map(|v| round(v, 4)),
                    })
                }).collect::<Vec<_>>(),
            })
        })
        .collect();
    json!({
        "schema": SCHEMA,
        "file": file,
        "ion": s.ion,
        "charge": s.charge,
        "formula": s.formula,
        "z": s.z,
        "network": {
            "dimension": s.dimension,
            "sites_per_cell": s.sites_per_cell,
            "hops_per_cell": s.hops_per_cell,
            "sites_per_formula_unit": round(s.sites_per_formula_unit, 4),
            "supercell": s.repeats,
        },
        "settings": {
            "temperature_k": k.temperature_k,
            "attempt_frequency_hz": k.attempt_frequency_hz,
            "exclusion_a": k.exclusion_a,
            "repulsion": k.repulsion.map(|r| json!({
                "relative_permittivity": r.relative_permittivity,
                "screening_length_a": r.screening_length_a,
                "cutoff_a": r.cutoff_a,
            })),
            "runs": k.runs,
            "seed": k.seed,
            "warmup_hops_per_ion": k.warmup_hops_per_ion,
            "run_length": run_length(s),
            "defect_share_kept": s.options.share,
            "particle_diameter_nm": round(s.options.particle_diameter_a / 10.0, 3),
            "max_simulated_diameter_nm": round(s.options.max_diameter_a / 10.0, 3),
            "family_slack_ev": s.options.family_slack_ev,
        },
        "dilute_reference_diffusion_m2_s": s.dilute_reference_m2_s.map(|d| sig(d, 4)),
        "fillings": rows,
        "blocking": families,
        "notes": s.notes,
    })
}

/// The figure of D against the filling, with error bars of one standard error.
pub fn figure(s: &FillStudy) -> String {
    let pts: Vec<(f64, f64, f64)> = s
        .rows
        .iter()
        .filter_map(|r| {
            let p = r.result.as_ref().ok()?;
            (p.diffusion_m2_s.mean > 0.0).then_some((
                r.x_per_formula_unit,
                p.diffusion_m2_s.mean,
                p.diffusion_m2_s.stderr,
            ))
        })
        .collect();
    let mut plot = LinePlot::new(
        Axis::linear(format!("{} per formula unit x", s.ion), ""),
        Axis::log("Tracer D (fast direction)", "m²/s"),
    );
    plot.series.push(
        Series::line(
            "KMC, mean of runs",
            pts.iter().map(|p| (p.0, p.1)).collect(),
        )
        .with_marker(MarkerShape::Circle)
        .with_colour(hopmap_plot::colormap::categorical(0)),
    );
    for &(x, d, e) in &pts {
        // one standard error; a bar reaching zero is cut at a tenth of the mean
        let lo = (d - e).max(d * 0.1);
        plot.series.push(
            Series::line("", vec![(x, lo), (x, d + e)])
                .with_colour(hopmap_plot::colormap::categorical(0)),
        );
    }
    if let Some(d) = s.dilute_reference_m2_s {
        let (x0, x1) = pts
            .iter()
            .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), p| {
                (a.min(p.0), b.max(p.0))
            });
        if x0.is_finite() {
            plot.series.push(
                Series::line("dilute limit (hopping model)", vec![(x0, d), (x1, d)])
                    .dashed()
                    .with_colour(hopmap_plot::colormap::categorical(1)),
            );
        }
    }
    Figure::lines(760.0, 420.0, plot)
        .with_title(format!(
            "{}+ in {}: tracer D against filling, {} K",
            s.ion, s.formula, s.options.kmc.temperature_k
        ))
        .to_svg()
}

/// The HTML page of `hopmap fill --report`.
pub fn html(s: &FillStudy, file: &str) -> String {
    let mut b = String::new();
    let _ = writeln!(
        b,
        "<h2 id=\"fill\">Transport as the host fills</h2>\n<ul>{}</ul>",
        settings_lines(s)
            .iter()
            .map(|l| format!("<li>{}</li>", esc(l)))
            .collect::<String>()
    );
    let _ = writeln!(
        b,
        "<figure id=\"fig-fill\">\n{}<figcaption>Figure 1. Tracer diffusion coefficient along the \
         direction of fastest transport against the filling (ions per formula unit), mean of {} \
         independent kinetic Monte Carlo runs; bars: one standard error over runs. Dashed: the \
         dilute-limit hopping model of the analysis.</figcaption>\n</figure>",
        scope_ids(&figure(s), "fill-"),
        s.options.kmc.runs
    );
    let _ = writeln!(
        b,
        "<table>\n<tr><th>x per f.u.</th><th>site fraction</th><th>D (m²/s)</th>\
         <th>correlation factor</th><th>σ Nernst-Einstein (S/cm)</th><th>time (s)</th></tr>"
    );
    for r in &s.rows {
        match &r.result {
            Ok(p) => {
                let _ = writeln!(
                    b,
                    "<tr><td>{:.2}</td><td>{:.3}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>",
                    r.x_per_formula_unit,
                    r.site_fraction,
                    pm_html(&p.diffusion_m2_s),
                    fixed(&p.correlation_factor),
                    pm_html(&p.conductivity_s_cm),
                    sci(p.time_s, 2)
                );
            }
            Err(e) => {
                let _ = writeln!(
                    b,
                    "<tr><td>{:.2}</td><td>{:.3}</td><td colspan=\"4\">not made: {}</td></tr>",
                    r.x_per_formula_unit,
                    r.site_fraction,
                    esc(e)
                );
            }
        }
    }
    let _ = writeln!(b, "</table>");
    if !s.families.is_empty() {
        let _ = writeln!(
            b,
            "<h2 id=\"blocking\">What a blocked channel costs</h2>\n<p class=\"note\">Immobile \
             defects on a fraction p of a channel family's sites; the share of the defect-free \
             sites reachable from the surface of a spherical particle. The largest particle keeps \
             {:.0}% of its capacity. 1D law: the exact channel law averaged over the chords of the \
             sphere.</p>",
            s.options.share * 100.0
        );
        for f in &s.families {
            let _ = writeln!(
                b,
                "<h3>{}D family, barrier {:.2} eV ({} sites, {} hops per cell; {})</h3>\n<table>\n\
                 <tr><th>p</th><th>largest particle</th><th>1D law</th><th>share at {:.0} nm</th><th>1D law share</th></tr>",
                f.dimension,
                f.barrier_ev,
                f.sites_per_cell,
                f.hops_per_cell,
                if f.single_file {
                    "isolated channels, single file"
                } else {
                    "cross-linked"
                },
                s.options.particle_diameter_a / 10.0
            );
            for r in &f.rows {
                let _ = writeln!(
                    b,
                    "<tr><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>",
                    r.defect_fraction,
                    esc(&limit_text(&r.limit)),
                    r.law_limit_a
                        .map(|d| format!("{:.1} nm", d / 10.0))
                        .unwrap_or_else(|| "-".into()),
                    fixed(&r.share_at_particle),
                    r.share_law
                        .map(|v| format!("{v:.3}"))
                        .unwrap_or_else(|| "-".into())
                );
            }
            let _ = writeln!(b, "</table>");
        }
    }
    let _ = writeln!(
        b,
        "<div class=\"box\"><ul>{}</ul></div>",
        s.notes
            .iter()
            .map(|n| format!("<li>{}</li>", esc(n)))
            .collect::<String>()
    );
    let header = format!(
        "<h1>{}+ in {}: filling and blocking</h1><p>{}</p>",
        esc(&s.ion),
        esc(&s.formula),
        esc(file)
    );
    page(&format!("hopmap fill: {file}"), &header, &b)
}
