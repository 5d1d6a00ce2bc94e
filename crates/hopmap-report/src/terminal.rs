//! Plain-text summaries for the terminal. Every number carries its unit.

use hopmap::structure::Structure;
use std::fmt::Write;

/// `hopmap inspect`.
pub fn structure(s: &Structure, file: &str) -> String {
    let mut o = String::new();
    let p = s.lattice.parameters();
    let (z, formula) = s.formula_and_z();
    let sg = match (&s.symmetry.hm_symbol, s.symmetry.number) {
        (Some(h), Some(n)) => format!("{h} (No. {n})"),
        (Some(h), None) => h.clone(),
        (None, Some(n)) => format!("No. {n}"),
        (None, None) => format!("unidentified ({} operations)", s.symmetry.ops.len()),
    };
    let z = hopmap::structure::format_z(z);
    let _ = writeln!(o, "{file}: {formula}, Z = {z}  [data block '{}']", s.name);
    let _ = writeln!(
        o,
        "  space group   {sg}, symmetry from {}",
        s.symmetry.source
    );
    let _ = writeln!(
        o,
        "  cell          a = {:.4} A, b = {:.4} A, c = {:.4} A, alpha = {:.3} deg, beta = {:.3} deg, gamma = {:.3} deg",
        p.a, p.b, p.c, p.alpha, p.beta, p.gamma
    );
    if let Some(n) = hopmap::symmetry::cell_note(s) {
        let _ = writeln!(o, "  which cell    {n}");
    }
    let _ = writeln!(
        o,
        "  volume        {:.3} A^3, density {:.4} g/cm^3, formula mass {:.3} g/mol",
        s.volume(),
        s.density(),
        s.formula_mass()
    );
    let _ = writeln!(o, "  in the cell   {} positions", s.sites.len());
    let _ = writeln!(
        o,
        "  sites ({} in the asymmetric unit):",
        s.asymmetric_sites.len()
    );
    let _ = writeln!(
        o,
        "    {:<10} {:<24} {:>9} {:>9} {:>9} {:>5} {:>7}",
        "label", "species (occupancy)", "x", "y", "z", "mult", "Wyckoff"
    );
    for a in &s.asymmetric_sites {
        let sp: Vec<String> = a
            .occupants
            .iter()
            .map(|oc| {
                if (oc.occupancy - 1.0).abs() < 1e-6 {
                    oc.species.name()
                } else {
                    format!("{}({:.3})", oc.species.name(), oc.occupancy)
                }
            })
            .collect();
        let _ = writeln!(
            o,
            "    {:<10} {:<24} {:>9.5} {:>9.5} {:>9.5} {:>5} {:>7}",
            a.label,
            sp.join(" "),
            a.frac.0.x,
            a.frac.0.y,
            a.frac.0.z,
            a.multiplicity,
            a.wyckoff.as_deref().unwrap_or("-")
        );
    }
    if s.oxidation_states_assigned {
        let _ = writeln!(
            o,
            "  oxidation states were assigned by hopmap (the file gives none)"
        );
    }
    if s.warnings.is_empty() {
        let _ = writeln!(o, "  warnings      none");
    } else {
        let _ = writeln!(o, "  warnings:");
        for w in &s.warnings {
            let _ = writeln!(o, "    - {w}");
        }
    }
    o
}

use hopmap::analysis::{Analysis, ChannelTransport};
use hopmap::bv::ValenceReport;
use hopmap::percolation::{Percolation, format_indices};

fn channel_table(o: &mut String, p: &Percolation, unit: &str) {
    let _ = writeln!(
        o,
        "    {:>3} {:>14} {:>12} {:<24} {:>10} {:>11}",
        "dim",
        format!("threshold ({unit})"),
        format!("barrier ({unit})"),
        "direction",
        "channels",
        "accessible"
    );
    for t in p.thresholds.iter().flatten() {
        let dirs: Vec<String> = hopmap::summary::orientations_at(p, t)
            .iter()
            .map(|o| o.words())
            .collect();
        let _ = writeln!(
            o,
            "    {:>3} {:>14.3} {:>12.3} {:<24} {:>10} {:>10.1}%",
            format!("{}D", t.dimension),
            t.energy,
            t.barrier,
            dirs.join("; "),
            t.components,
            t.fraction * 100.0
        );
    }
    if p.dimension == 0 {
        let _ = writeln!(o, "    no percolating path below {:.2} {unit}", p.ceiling);
    }
}

/// `hopmap paths`.
pub fn paths(a: &Analysis, file: &str) -> String {
    let mut o = String::new();
    let (z, formula) = a.structure.formula_and_z();
    let z = hopmap::structure::format_z(z);
    let _ = writeln!(o, "{}", a.summary.headline);
    let _ = writeln!(
        o,
        "  {file}: {formula} (Z = {z}), {}, V = {:.2} A^3",
        a.structure
            .symmetry
            .hm_symbol
            .as_deref()
            .unwrap_or("space group not identified"),
        a.structure.volume()
    );
    if let Some(n) = hopmap::symmetry::cell_note(&a.structure) {
        let _ = writeln!(o, "  cell: {n}");
    }
    let g = &a.landscape.energy;
    let _ = writeln!(
        o,
        "  probe {}{}+ (N = {}, r = {:.2} A); grid {} x {} x {} at {:.3}/{:.3}/{:.3} A; lowest site energy {} eV",
        a.model.probe.element,
        if a.model.probe.valence == 1.0 {
            String::new()
        } else {
            format!("{}", a.model.probe.valence)
        },
        a.model.probe.coordination,
        a.model.probe.radius,
        g.dims[0],
        g.dims[1],
        g.dims[2],
        a.spacing_a[0],
        a.spacing_a[1],
        a.spacing_a[2],
        lowest_energy_text(a)
    );
    if let Some(v) = &a.valence {
        let _ = writeln!(
            o,
            "  valence check: GII = {:.3} v.u., {} (plausible below {} v.u., suspect above {} v.u.; sources in `hopmap valence`)",
            v.gii,
            v.verdict.word(),
            hopmap::bv::valence::GII_PLAUSIBLE,
            hopmap::bv::valence::GII_SUSPECT
        );
    }
    if let Some(n) = &a.oxidation_note {
        let _ = writeln!(o, "  oxidation states: {n}");
    }
    let _ = writeln!(o, "\n  channels (site energy):");
    channel_table(&mut o, &a.percolation, "eV");
    if let Some(mismatch) = &a.mismatch_percolation {
        let _ = writeln!(o, "\n  channels (valence mismatch):");
        channel_table(&mut o, mismatch, "v.u.");
    }
    if let Some(net) = &a.network {
        let _ = writeln!(
            o,
            "\n  sites ({} in the cell, {} orbits; from {} grid minima, those less than {:.2} eV deep merged into the site they drain to):",
            net.sites.len(),
            net.orbits.len(),
            net.basins.minima.len(),
            net.merging.depth
        );
        let _ = writeln!(
            o,
            "    {:>4} {:>5} {:>9} {:>9} {:>9} {:>12} {:<26} {:<10}",
            "site", "mult", "x", "y", "z", "energy (eV)", "coordination", "label"
        );
        let level = a.percolation.highest_threshold().unwrap_or(f32::INFINITY);
        let mut shallow = 0;
        let mut above = 0;
        for (oi, orb) in net.orbits.iter().enumerate() {
            let s = &net.sites[orb.sites[0]];
            if s.depth < hopmap::analysis::SHALLOW_SITE_EV as f32 {
                shallow += 1;
                continue;
            }
            // a minimum above the highest threshold lies outside every network at its threshold
            // (e.g. a tetrahedron sharing faces with framework octahedra, eV above it)
            let outside = s.energy > level + 1e-4;
            above += usize::from(outside);
            let _ = writeln!(
                o,
                "    {:>4} {:>5} {:>9.4} {:>9.4} {:>9.4} {:>12.3} {:<26} {:<10}{}",
                oi,
                orb.multiplicity,
                s.frac.0.x,
                s.frac.0.y,
                s.frac.0.z,
                s.energy,
                s.coordination.to_string(),
                s.label.as_deref().unwrap_or("-"),
                if outside { " *" } else { "" }
            );
        }
        if above > 0 {
            let _ = writeln!(
                o,
                "    (* above the highest threshold, {level:.3} eV: no network passes through it at its threshold)"
            );
        }
        if shallow > 0 {
            let _ = writeln!(
                o,
                "    ({shallow} more orbits are shallow minima, less than {:.2} eV deep; see --json)",
                hopmap::analysis::SHALLOW_SITE_EV
            );
        }
        let mut seen = std::collections::BTreeSet::new();
        let shown: Vec<_> = net
            .hops
            .iter()
            .filter(|h| h.saddle_energy <= level + 1e-4)
            // steps inside one flat valley (shorter than 0.5 A) are not hops worth a row
            .filter(|h| h.length >= 0.5)
            // one row per symmetry-distinct hop: orbit pair, length and saddle
            .filter(|h| {
                let (a, b) = (net.sites[h.from].orbit, net.sites[h.to].orbit);
                let key = (
                    a.min(b),
                    a.max(b),
                    (h.length * 100.0).round() as i64,
                    (h.saddle_energy * 1000.0).round() as i64,
                );
                seen.insert(key)
            })
            .collect();
        if shown.is_empty() {
            let _ = writeln!(
                o,
                "\n  hops: none below the energy cap of {} eV",
                hopmap::text::trim_number(a.model.energy_cap, 2)
            );
        } else {
            let _ = writeln!(
                o,
                "\n  symmetry-distinct hops up to the highest threshold ({} distinct of {} in the cell):",
                shown.len(),
                net.hops.len()
            );
            let _ = writeln!(
                o,
                "    {:>5} {:>5} {:<10} {:>11} {:>13} {:>13} {:>12} {:>14}",
                "orbit",
                "orbit",
                "image",
                "length (A)",
                "saddle (eV)",
                "fwd/back (eV)",
                "opening (A)",
                "clearance (A)"
            );
            for h in shown.iter().take(30) {
                let (r, c) = h
                    .bottleneck
                    .as_ref()
                    .map(|b| (format!("{:.2}", b.radius), format!("{:+.2}", b.clearance)))
                    .unwrap_or(("-".into(), "-".into()));
                let _ = writeln!(
                    o,
                    "    {:>5} {:>5} {:<10} {:>11.3} {:>13.3} {:>13} {:>12} {:>14}",
                    net.sites[h.from].orbit,
                    net.sites[h.to].orbit,
                    format!("[{}]", format_indices(h.image)),
                    h.length,
                    h.saddle_energy,
                    format!("{:.2}/{:.2}", h.barrier_forward, h.barrier_backward),
                    r,
                    c
                );
            }
            if shown.len() > 30 {
                let _ = writeln!(o, "    ... {} more (see --json)", shown.len() - 30);
            }
        }
    }
    rate_section(&mut o, a, None);
    if !a.warnings.is_empty() {
        let _ = writeln!(o, "\n  warnings:");
        for w in &a.warnings {
            let _ = writeln!(o, "    - {w}");
        }
    }
    let _ = writeln!(
        o,
        "\n  Screening estimate from a static bond-valence model, not cell design; see the cautions in the README."
    );
    o
}

/// The lowest site energy of the landscape, in words when the whole grid sits at the cap.
pub fn lowest_energy_text(a: &Analysis) -> String {
    let (lo, _) = a.landscape.energy.min_max();
    if (lo as f64) < a.model.energy_cap {
        format!("{:.3}", a.percolation.lowest.unwrap_or(lo))
    } else {
        format!("at the cap of {:.0}", a.model.energy_cap)
    }
}

/// A length in um with as many digits as a reader needs.
fn um_text(x: f64) -> String {
    if x >= 100.0 {
        format!("{x:.0}")
    } else if x >= 1.0 {
        format!("{x:.1}")
    } else if x >= 0.01 {
        format!("{x:.3}")
    } else {
        format!("{x:.1e}")
    }
}

/// "2.1e-12 m^2/s (5.9e-14 to 7.6e-11 for +/-0.15 eV)" or the bare value for a measured D.
fn with_band(value: f64, band: Option<(f64, f64)>, unit: &str, t: &ChannelTransport) -> String {
    match (band, t.barrier_uncertainty_ev) {
        (Some((lo, hi)), Some(u)) => {
            format!("{value:.1e} {unit} ({lo:.0e} to {hi:.0e} for a barrier +/-{u:.2} eV)")
        }
        _ => format!("{value:.2e} {unit}"),
    }
}

fn rate_section(o: &mut String, a: &Analysis, particle_um: Option<f64>) {
    if let Some(t) = a.transport.first() {
        let _ = writeln!(
            o,
            "\n  transport in the {}D network ({}): barrier {:.3} eV, hop {:.2} A",
            t.dimension, t.basis, t.barrier_ev, t.hop_length_a,
        );
        if !t.bulk_transport {
            let _ = writeln!(
                o,
                "    no bulk transport at {} K: D is below {:.0e} m^2/s (less than 0.1 um in a day)",
                t.temperature_k,
                hopmap::analysis::NO_BULK_TRANSPORT_M2_S
            );
        } else {
            let _ = writeln!(
                o,
                "    D({} K) = {}",
                t.temperature_k,
                with_band(t.diffusion_m2_s, t.diffusion_band_m2_s, "m^2/s", t)
            );
            if let Some(c) = t.conductivity_s_cm {
                let _ = writeln!(
                    o,
                    "    sigma = {} (Nernst-Einstein, Haven ratio 1)",
                    with_band(c, t.conductivity_band_s_cm, "S/cm", t)
                );
            }
            let _ = writeln!(
                o,
                "    {:>6} {:>14} {:>22} {:>24} {:>22}",
                "C-rate",
                "charge time",
                "diffusion length (um)",
                "largest particle (um)",
                "band (um)"
            );
            for (i, r) in t.rates.iter().enumerate() {
                let band = t
                    .particle_band_um
                    .get(i)
                    .map(|(lo, hi)| format!("{} to {}", um_text(*lo), um_text(*hi)))
                    .unwrap_or_default();
                let _ = writeln!(
                    o,
                    "    {:>6} {:>12.0} s {:>22.3} {:>24.3} {:>22}",
                    format!("{}C", r.c_rate),
                    r.charge_time_s,
                    r.diffusion_length_um,
                    r.max_particle_diameter_um,
                    band
                );
            }
        }
        if let Some(um) = particle_um
            && let Ok(c) = hopmap::transport::max_c_rate_for_particle(
                t.diffusion_m2_s,
                t.dimension,
                um * 1000.0,
            )
        {
            let _ = writeln!(
                o,
                "    a {um} um particle charges by bulk diffusion at up to {c:.3}C"
            );
        }
    }
    if let Some(line) = capacity_text(a) {
        let _ = writeln!(o, "\n  capacity: {line}");
    }
}

/// The capacity in one sentence, numbers rounded for people; the reason in words when there is
/// none (a solid electrolyte). None when no estimate was made.
pub fn capacity_text(a: &Analysis) -> Option<String> {
    use hopmap::text::trim_number;
    let ion = a.model.probe.element.symbol();
    let Some(c) = &a.capacity else {
        return a.capacity_note.clone();
    };
    if let Some(note) = &a.capacity_note {
        return Some(note.clone());
    }
    let site = match (c.site_capacity_mah_g, c.site_ions_per_formula_unit) {
        (Some(q), Some(x)) => format!(
            "{q:.0} mAh/g ({} {ion} per {} on the reachable sites)",
            trim_number(x, 2),
            c.formula
        ),
        _ => "not estimated".into(),
    };
    let how = match c.direction {
        Some(d) => format!(
            "on {} of {ion}{}",
            d.word(),
            if c.couples.is_empty() {
                String::new()
            } else {
                format!(", {}", c.couples.join(", "))
            }
        ),
        None => "as set".into(),
    };
    Some(format!(
        "{:.0} mAh/g{} (redox bound {:.0} mAh/g, {} e per {} {how}; site bound {site}; limited by the {} bound)",
        c.capacity_mah_g,
        c.capacity_mah_cm3
            .map(|x| format!(", {x:.0} mAh/cm^3"))
            .unwrap_or_default(),
        c.redox_capacity_mah_g,
        trim_number(c.redox_electrons_per_formula_unit, 3),
        c.formula,
        match c.limited_by {
            hopmap::capacity::CapacityLimit::Redox => "redox",
            hopmap::capacity::CapacityLimit::Sites => "site",
        }
    ))
}

/// `hopmap rate`.
pub fn rate(a: &Analysis, file: &str, particle_um: Option<f64>) -> String {
    let mut o = String::new();
    let _ = writeln!(o, "{}", a.summary.headline);
    let _ = writeln!(o, "  {file}");
    rate_section(&mut o, a, particle_um);
    let _ = writeln!(o, "\n  {}", hopmap::transport::RATE_CAUTION);
    o
}

/// `hopmap valence`.
pub fn valence(v: &ValenceReport, s: &Structure, note: Option<&str>) -> String {
    let mut o = String::new();
    let _ = writeln!(
        o,
        "{}: {} - GII = {:.3} v.u.: {}",
        v.structure,
        s.formula_and_z().1,
        v.gii,
        v.verdict.word()
    );
    let _ = writeln!(o, "  ({})", hopmap::bv::valence::VERDICT_RULE);
    if let Some(n) = note {
        let _ = writeln!(o, "  oxidation states: {n}");
    }
    let _ = writeln!(
        o,
        "    {:<10} {:<8} {:>10} {:>10} {:>12} {:>6} {:>6}",
        "label", "species", "formal", "BVS (v.u.)", "dev. (v.u.)", "mult", "CN"
    );
    for i in &v.ions {
        let _ = writeln!(
            o,
            "    {:<10} {:<8} {:>10.2} {:>10.3} {:>+12.3} {:>6} {:>6.1}",
            i.label, i.species, i.formal, i.bvs, i.deviation, i.multiplicity, i.coordination
        );
    }
    let _ = writeln!(o, "  parameters:");
    for p in &v.pairs {
        let _ = writeln!(
            o,
            "    {:<12} R0 = {:.4} A, b = {:.3} A, cutoff {:.2} A, ref {}{}",
            p.pair_name(),
            p.r0,
            p.b,
            p.cutoff_a,
            p.ref_id,
            if p.is_fallback() {
                " (FALLBACK estimate)"
            } else {
                ""
            }
        );
    }
    for n in &v.notes {
        let _ = writeln!(o, "  note: {n}");
    }
    o
}

/// `hopmap build`: what was built, its cell and symmetry, and how well the bond-valence sums
/// meet the valences.
pub fn build(b: &hopmap::build::BuiltFramework, cif_path: Option<&str>) -> String {
    let mut o = String::new();
    let s = &b.structure;
    let p = s.lattice.parameters();
    let (z, formula) = s.formula_and_z();
    let r = &b.refinement;
    let _ = writeln!(
        o,
        "{} ({}): {formula}, Z = {z}",
        b.spec.to_text(),
        b.spec.label()
    );
    let _ = writeln!(
        o,
        "  cell a = {:.4} A, b = {:.4} A, c = {:.4} A, alpha = {:.2} deg, beta = {:.2} deg, \
         gamma = {:.2} deg, V = {:.1} A^3 ({} atoms)",
        p.a,
        p.b,
        p.c,
        p.alpha,
        p.beta,
        p.gamma,
        s.volume(),
        s.sites.len()
    );
    let _ = writeln!(o, "  accuracy: {}", hopmap::build::CELL_ACCURACY);
    let _ = writeln!(
        o,
        "  space group {} ({}), found by a symmetry search on the built cell",
        s.symmetry.hm_symbol.as_deref().unwrap_or("?"),
        s.symmetry
            .number
            .map(|n| n.to_string())
            .unwrap_or_else(|| "?".into())
    );
    if r.iterations > 0 {
        let _ = writeln!(
            o,
            "  GII {:.3} -> {:.3} v.u. (each occupant against its own valence); site average \
             {:.3} -> {:.3} v.u.; {} iterations{}, rms shift {:.3} A, largest floor violation \
             {:.3} A",
            r.initial_gii_vu,
            r.gii_vu,
            r.initial_site_gii_vu,
            r.site_gii_vu,
            r.iterations,
            if r.converged {
                ", converged"
            } else {
                ", not converged"
            },
            r.rms_shift_a,
            r.max_floor_violation_a
        );
    } else {
        let _ = writeln!(
            o,
            "  not refined: GII {:.3} v.u. (site average {:.3} v.u.) for the ideal octahedra",
            r.gii_vu, r.site_gii_vu
        );
    }
    let _ = writeln!(o, "  construction:");
    for l in &b.construction {
        let _ = writeln!(o, "    {l}");
    }
    if let Some(path) = cif_path {
        let _ = writeln!(o, "  wrote {path}");
    }
    let _ = writeln!(o, "  {}", hopmap::build::CAUTION);
    o
}
