//! JSON output. The schemas are documented in the README and kept stable: fields may be added,
//! never renamed or removed without a version bump of `schema`.

use hopmap::structure::{Occupant, Structure};
use serde_json::{Value, json};

/// Rounds to a fixed number of decimals so the JSON is readable and diff-friendly.
/// Every float of a document to [`SIGNIFICANT_DIGITS`] significant digits: a number for
/// people and programs, never the binary noise of a computation (`6.9999959999999914`).
pub fn tidy(v: Value) -> Value {
    match v {
        Value::Number(n) if n.is_f64() => {
            let x = n.as_f64().unwrap_or(0.0);
            let t: f64 = format!("{:.*e}", SIGNIFICANT_DIGITS - 1, x)
                .parse()
                .unwrap_or(x);
            serde_json::Number::from_f64(t)
                .map(Value::Number)
                .unwrap_or(Value::Null)
        }
        Value::Array(a) => Value::Array(a.into_iter().map(tidy).collect()),
        Value::Object(m) => Value::Object(m.into_iter().map(|(k, v)| (k, tidy(v))).collect()),
        other => other,
    }
}

/// Significant digits of the floats in JSON documents (see [`tidy`]).
pub const SIGNIFICANT_DIGITS: usize = 6;

pub fn round(x: f64, decimals: i32) -> f64 {
    let p = 10f64.powi(decimals);
    (x * p).round() / p
}

fn occupants(os: &[Occupant]) -> Value {
    Value::Array(
        os.iter()
            .map(|o| {
                json!({
                    "species": o.species.name(),
                    "element": o.species.element.symbol(),
                    "oxidation_state": o.species.oxidation,
                    "occupancy": round(o.occupancy, 4),
                    "label": o.label,
                })
            })
            .collect(),
    )
}

/// `hopmap inspect --json`.
pub fn structure(s: &Structure, file: &str) -> Value {
    tidy(structure_raw(s, file))
}

fn structure_raw(s: &Structure, file: &str) -> Value {
    let p = s.lattice.parameters();
    let (z, formula) = s.formula_and_z();
    let composition: serde_json::Map<String, Value> = s
        .cell_composition()
        .iter()
        .map(|(e, n)| (e.symbol().to_string(), json!(round(*n, 4))))
        .collect();
    let sites: Vec<Value> = s
        .asymmetric_sites
        .iter()
        .map(|a| {
            json!({
                "label": a.label,
                "occupants": occupants(&a.occupants),
                "frac": [round(a.frac.0.x, 5), round(a.frac.0.y, 5), round(a.frac.0.z, 5)],
                "multiplicity": a.multiplicity,
                "wyckoff": a.wyckoff,
            })
        })
        .collect();
    json!({
        "schema": "hopmap.structure/1",
        "file": file,
        "block": s.name,
        "formula": formula,
        "z": round(z, 4),
        "formula_mass_g_mol": round(s.formula_mass(), 4),
        "space_group": {
            "number": s.symmetry.number,
            "symbol": s.symmetry.hm_symbol,
            "hall": s.symmetry.hall_symbol,
            "operations": s.symmetry.ops.len(),
            "source": s.symmetry.source,
        },
        "cell": {
            "a": round(p.a, 5), "b": round(p.b, 5), "c": round(p.c, 5),
            "alpha": round(p.alpha, 4), "beta": round(p.beta, 4), "gamma": round(p.gamma, 4),
            "volume": round(s.volume(), 4),
        },
        "analysed_cell": hopmap::symmetry::analysed_cell(s),
        "cell_transformation": s.symmetry.transformation.as_ref().map(|t| {
            let ip = t.input_cell;
            let m = t.linear;
            json!({
                "conventional": t.conventional,
                "linear": [
                    [round(m[(0, 0)], 6), round(m[(0, 1)], 6), round(m[(0, 2)], 6)],
                    [round(m[(1, 0)], 6), round(m[(1, 1)], 6), round(m[(1, 2)], 6)],
                    [round(m[(2, 0)], 6), round(m[(2, 1)], 6), round(m[(2, 2)], 6)],
                ],
                "origin_shift": [
                    round(t.origin_shift.x, 6), round(t.origin_shift.y, 6), round(t.origin_shift.z, 6)
                ],
                "input_cell": {
                    "a": round(ip.a, 5), "b": round(ip.b, 5), "c": round(ip.c, 5),
                    "alpha": round(ip.alpha, 4), "beta": round(ip.beta, 4), "gamma": round(ip.gamma, 4),
                },
                "input_positions": t.input_positions,
            })
        }),
        "density_g_cm3": round(s.density(), 4),
        "positions_in_cell": s.sites.len(),
        "composition": composition,
        "oxidation_states_assigned": s.oxidation_states_assigned,
        "sites": sites,
        "warnings": s.warnings,
    })
}

use hopmap::analysis::{Analysis, ChannelTransport};
use hopmap::bv::ValenceReport;
use hopmap::percolation::{Percolation, Span, format_indices};
use hopmap::summary::{Orientation, Summary};

/// The cautions every report carries (science notes, section 7).
pub const CAUTIONS: &[&str] = &[
    "Bond-valence landscapes are static, empirical screens: they ignore lattice relaxation, ion-ion correlation at high filling and electronic effects. Use them to rank candidates and pre-select for DFT or experiment, not as a substitute, and not as cell design.",
    "Rate estimates are upper bounds set by bulk transport: real electrodes are often limited by the electrolyte, contacts and the counter electrode.",
    "Lithium and sodium cells can fail violently: test candidate materials under your laboratory's safety rules, and defer to local regulations and licensed practice.",
];

fn span_json(span: &Span) -> (Vec<String>, Value) {
    match span {
        Span::Line { direction, repeat } => (
            vec![format!("[{}]", format_indices(*direction))],
            json!({"kind": "line", "direction": direction, "repeat": repeat}),
        ),
        Span::Plane { vectors, normal } => (
            vec![format!("({})", format_indices(*normal))],
            json!({"kind": "plane", "normal": normal, "vectors": vectors}),
        ),
        Span::Space { vectors } => (vec![], json!({"kind": "space", "vectors": vectors})),
        Span::Closed => (vec![], json!({"kind": "closed"})),
    }
}

/// Channels of one percolation, energies in `unit` ("ev" or "vu").
fn channels(p: &Percolation, unit: &str) -> Vec<Value> {
    p.thresholds
        .iter()
        .flatten()
        .map(|t| {
            let (_, span) = span_json(&t.channel.span);
            let dirs: Vec<String> = hopmap::summary::orientations_at(p, t)
                .iter()
                .map(Orientation::indices)
                .filter(|d| !d.is_empty())
                .collect();
            let mut m = serde_json::Map::new();
            m.insert("dimension".into(), json!(t.dimension));
            m.insert(
                format!("threshold_{unit}"),
                json!(round(t.energy as f64, 4)),
            );
            m.insert(format!("barrier_{unit}"), json!(round(t.barrier as f64, 4)));
            m.insert(
                format!("lowest_{unit}"),
                json!(round(t.channel.lowest as f64, 4)),
            );
            m.insert(
                format!("occupied_level_{unit}"),
                json!(t.marked_lowest.map(|x| round(x as f64, 4))),
            );
            m.insert("directions".into(), json!(dirs));
            m.insert("span".into(), span);
            m.insert("components".into(), json!(t.components));
            m.insert("accessible_fraction".into(), json!(round(t.fraction, 5)));
            if unit == "ev" {
                m.insert(
                    "merged_with_higher".into(),
                    json!(hopmap::summary::folded_into_higher(p, t)),
                );
            }
            Value::Object(m)
        })
        .collect()
}

fn families(p: &Percolation, unit: &str) -> Vec<Value> {
    p.families
        .iter()
        .map(|f| {
            let (dirs, _) = span_json(&f.span);
            let mut m = serde_json::Map::new();
            m.insert("dimension".into(), json!(f.dimension));
            m.insert("directions".into(), json!(dirs));
            m.insert(format!("onset_{unit}"), json!(round(f.onset as f64, 4)));
            m.insert(format!("barrier_{unit}"), json!(round(f.barrier as f64, 4)));
            m.insert("components".into(), json!(f.components));
            Value::Object(m)
        })
        .collect()
}

/// The networks the answer reports (`hopmap::summary`).
fn networks_json(s: &Summary) -> Vec<Value> {
    s.networks
        .iter()
        .map(|n| {
            json!({
                "dimension": n.dimension,
                "threshold_ev": round(n.threshold_ev, 4),
                "barrier_ev": round(n.barrier_ev, 4),
                "barrier_uncertainty_ev": n.uncertainty_ev,
                "lowest_ev": round(n.lowest_ev, 4),
                "occupied_level_ev": n.occupied_level_ev.map(|x| round(x, 4)),
                "directions": n.orientations.iter().map(Orientation::indices).filter(|d| !d.is_empty()).collect::<Vec<_>>(),
                "components": n.components,
                "accessible_fraction": round(n.accessible_fraction, 5),
                "folded_dimensions": n.folded,
            })
        })
        .collect()
}

fn frac3(f: hopmap::lattice::Frac) -> Value {
    json!([round(f.0.x, 4), round(f.0.y, 4), round(f.0.z, 4)])
}

fn transport_json(t: &ChannelTransport) -> Value {
    json!({
        "dimension": t.dimension,
        "barrier_ev": round(t.barrier_ev, 4),
        "hop_length_a": round(t.hop_length_a, 4),
        "temperature_k": t.temperature_k,
        "diffusion_m2_s": t.diffusion_m2_s,
        "barrier_uncertainty_ev": t.barrier_uncertainty_ev,
        "diffusion_band_m2_s": t.diffusion_band_m2_s.map(|(lo, hi)| [lo, hi]),
        "conductivity_band_s_cm": t.conductivity_band_s_cm.map(|(lo, hi)| [lo, hi]),
        "bulk_transport": t.bulk_transport,
        "basis": t.basis,
        "carriers_per_m3": t.carriers_per_m3,
        "conductivity_s_cm": t.conductivity_s_cm,
        "attempt_frequency_hz": t.model.as_ref().map(|m| m.attempt_frequency_hz),
        "correlation_factor": t.model.as_ref().map(|m| m.correlation_factor),
        "site_filling": t.model.as_ref().map(|m| m.site_filling),
        "arrhenius": t.arrhenius.iter().map(|(tk, d)| json!({"temperature_k": tk, "diffusion_m2_s": d})).collect::<Vec<_>>(),
        "rates": if t.bulk_transport { t.rates.iter().enumerate().map(|(i, r)| json!({
            "c_rate": r.c_rate,
            "charge_time_s": round(r.charge_time_s, 3),
            "diffusion_length_um": r.diffusion_length_um,
            "max_particle_diameter_um": r.max_particle_diameter_um,
            "max_particle_diameter_band_um": t.particle_band_um.get(i).map(|(lo, hi)| [*lo, *hi]),
        })).collect::<Vec<_>>() } else { vec![] },
    })
}

/// `hopmap paths --json`.
pub fn paths(a: &Analysis, file: &str) -> Value {
    tidy(paths_raw(a, file))
}

fn paths_raw(a: &Analysis, file: &str) -> Value {
    let net = a.network.as_ref();
    let sites: Vec<Value> = net
        .map(|n| {
            n.sites
                .iter()
                .enumerate()
                .map(|(i, s)| {
                    json!({
                        "index": i,
                        "orbit": s.orbit,
                        "multiplicity": n.orbits.get(s.orbit).map(|o| o.multiplicity),
                        "frac": frac3(s.frac),
                        "energy_ev": round(s.energy as f64, 4),
                        "coordination": s.coordination.to_string(),
                        "coordination_number": s.coordination.count,
                        "label": s.label,
                        "label_distance_a": s.label_distance.map(|d| round(d, 3)),
                        "depth_ev": if s.depth.is_finite() { Some(round(s.depth as f64, 4)) } else { None },
                        "shallow": (s.depth as f64) < hopmap::analysis::SHALLOW_SITE_EV,
                        "merged_minima": s.minima,
                    })
                })
                .collect()
        })
        .unwrap_or_default();
    let hops: Vec<Value> = net
        .map(|n| {
            n.hops
                .iter()
                .map(|h| {
                    json!({
                        "from": h.from,
                        "to": h.to,
                        "image": h.image,
                        "saddle_ev": round(h.saddle_energy as f64, 4),
                        "saddle_frac": frac3(h.saddle),
                        "length_a": round(h.length, 4),
                        "barrier_forward_ev": round(h.barrier_forward as f64, 4),
                        "barrier_backward_ev": round(h.barrier_backward as f64, 4),
                        "bottleneck": h.bottleneck.as_ref().map(|b| json!({
                            "radius_a": round(b.radius, 3),
                            "clearance_a": round(b.clearance, 3),
                            "nearest_ion_distance_a": round(b.distance, 3),
                        })),
                    })
                })
                .collect()
        })
        .unwrap_or_default();
    let profiles: Vec<Value> = a
        .profiles
        .iter()
        .map(|p| {
            json!({
                "dimension": p.dimension,
                "translation": p.translation,
                "length_a": round(p.length, 4),
                "bottleneck_ev": round(p.bottleneck as f64, 4),
                "points": p.points.iter().map(|q| json!([round(q.distance, 4), round(q.energy as f64, 4)])).collect::<Vec<_>>(),
                "points_frac": p.points.iter().map(|q| frac3(q.frac)).collect::<Vec<_>>(),
                "sites": p.sites().map(|q| json!({"distance_a": round(q.distance, 4), "energy_ev": round(q.energy as f64, 4), "frac": frac3(q.frac)})).collect::<Vec<_>>(),
                "saddles": p.saddles().map(|q| json!({"distance_a": round(q.distance, 4), "energy_ev": round(q.energy as f64, 4), "frac": frac3(q.frac)})).collect::<Vec<_>>(),
            })
        })
        .collect();
    let prov = &a.provenance;
    let pairs: Vec<Value> = prov
        .pairs
        .iter()
        .map(|p| {
            json!({
                "pair": p.pair_name(),
                "r0_a": p.r0,
                "b_a": p.b,
                "cutoff_a": p.cutoff_a,
                "reference": p.ref_id,
                "citation": p.citation,
                "fallback": p.is_fallback(),
            })
        })
        .collect();
    let knobs: Vec<Value> = prov
        .knobs
        .iter()
        .map(|k| json!({"name": k.name, "value": k.value, "unit": k.unit, "origin": k.origin.to_string(), "rule": k.rule}))
        .collect();
    let p = &a.percolation;
    json!({
        "schema": "hopmap.paths/1",
        "file": file,
        "answer": a.summary.headline,
        "networks": networks_json(&a.summary),
        "hop_groups": a.summary.hop_groups.iter().map(|g| json!({
            "from_orbit": g.from_orbit,
            "to_orbit": g.to_orbit,
            "count": g.count,
            "length_a": round(g.length_a, 3),
            "saddle_ev": round(g.saddle_ev, 4),
            "barrier_forward_ev": round(g.barrier_forward_ev, 4),
            "barrier_backward_ev": round(g.barrier_backward_ev, 4),
            "opening_a": g.opening_a.map(|x| round(x, 3)),
            "clearance_a": g.clearance_a.map(|x| round(x, 3)),
        })).collect::<Vec<_>>(),
        "deeper_pocket": a.summary.deeper_pocket.as_ref().map(|d| json!({
            "depth_ev": round(d.depth_ev, 4),
            "frac": d.frac.map(|x| round(x, 4)),
        })),
        "structure": structure(&a.structure, file),
        "ion": {
            "element": a.model.probe.element.symbol(),
            "valence": a.model.probe.valence,
            "coordination": a.model.probe.coordination,
            "radius_a": a.model.probe.radius,
        },
        "grid": {
            "dims": a.landscape.energy.dims,
            "spacing_a": a.spacing_a.map(|x| round(x, 5)),
            "points": a.landscape.energy.len(),
            "energy_cap_ev": a.model.energy_cap,
            "mismatch_cap_vu": a.model.mismatch_cap,
        },
        "dimension": p.dimension,
        "no_path_below_ev": if p.dimension == 0 { Some(p.ceiling as f64) } else { None },
        "lowest_energy_ev": p.lowest.map(|x| round(x as f64, 4)),
        "channels": channels(p, "ev"),
        "channel_families": families(p, "ev"),
        "mismatch_channels": a.mismatch_percolation.as_ref().map(|m| channels(m, "vu")),
        "site_graph_agrees": a.graph_percolation.as_ref().map(|g| (1..=3).all(|d| g.energy(d) == p.energy(d))),
        "sites": sites,
        "site_orbits": net.map(|n| n.orbits.iter().map(|o| json!({
            "sites": o.sites, "multiplicity": o.multiplicity, "energy_ev": round(o.energy as f64, 4),
        })).collect::<Vec<_>>()).unwrap_or_default(),
        "hops": hops,
        "profiles": profiles,
        "transport": a.transport.iter().map(transport_json).collect::<Vec<_>>(),
        "capacity": a.capacity.as_ref().map(|c| json!({
            "formula": c.formula,
            "molar_mass_g_mol": round(c.molar_mass_g_mol, 4),
            "redox_electrons_per_formula_unit": round(c.redox_electrons_per_formula_unit, 4),
            "redox_direction": c.direction.map(|d| d.word()),
            "redox_couples": c.couples,
            "redox_capacity_mah_g": round(c.redox_capacity_mah_g, 2),
            "site_ions_per_formula_unit": c.site_ions_per_formula_unit.map(|x| round(x, 4)),
            "site_capacity_mah_g": c.site_capacity_mah_g.map(|x| round(x, 2)),
            "capacity_mah_g": round(c.capacity_mah_g, 2),
            "capacity_mah_cm3": c.capacity_mah_cm3.map(|x| round(x, 1)),
            "limited_by": format!("{:?}", c.limited_by).to_lowercase(),
        })),
        "capacity_note": a.capacity_note,
        "valence": a.valence.as_ref().map(|v| json!({"gii_vu": round(v.gii, 4), "verdict": v.verdict.word()})),
        "oxidation_states_note": a.oxidation_note,
        "parameters": {
            "d0_ev": prov.d0_ev,
            "probe_coordination": prov.probe.coordination,
            "probe_coordination_source": prov.probe.coordination_source,
            "ideal_bond_valence_vu": prov.probe.s_eq,
            "pairs": pairs,
            "knobs": knobs,
            "uses_fallback": prov.uses_fallback,
            "notes": prov.notes,
        },
        "timings_s": a.timings.iter().map(|(k, v)| json!({"stage": k, "seconds": round(*v, 4)})).collect::<Vec<_>>(),
        "warnings": a.warnings.iter().map(|w| w.message.as_str()).collect::<Vec<_>>(),
        "warning_kinds": a.warnings.iter().map(|w| w.kind.name()).collect::<Vec<_>>(),
        "cautions": CAUTIONS,
    })
}

/// `hopmap valence --json`.
pub fn valence(v: &ValenceReport, s: &Structure, note: Option<&str>) -> Value {
    tidy(valence_raw(v, s, note))
}

fn valence_raw(v: &ValenceReport, s: &Structure, note: Option<&str>) -> Value {
    json!({
        "schema": "hopmap.valence/1",
        "structure": v.structure,
        "formula": s.formula_and_z().1,
        "oxidation_states_assigned": s.oxidation_states_assigned,
        "assignment_note": note,
        "gii_vu": round(v.gii, 4),
        "verdict": v.verdict.word(),
        "thresholds_vu": [hopmap::bv::valence::GII_PLAUSIBLE, hopmap::bv::valence::GII_SUSPECT],
        "verdict_rule": hopmap::bv::valence::VERDICT_RULE,
        "ions": v.ions.iter().map(|i| json!({
            "label": i.label, "site": i.site_label, "species": i.species,
            "formal_vu": i.formal, "bvs_vu": round(i.bvs, 4), "deviation_vu": round(i.deviation, 4),
            "multiplicity": i.multiplicity, "occupancy": i.occupancy,
            "coordination": round(i.coordination, 3), "contacts": i.contacts,
        })).collect::<Vec<_>>(),
        "pairs": v.pairs.iter().map(|p| json!({
            "pair": p.pair_name(), "r0_a": p.r0, "b_a": p.b, "cutoff_a": p.cutoff_a,
            "reference": p.ref_id, "citation": p.citation, "fallback": p.is_fallback(),
        })).collect::<Vec<_>>(),
        "uses_fallback": v.uses_fallback,
        "notes": v.notes,
    })
}

/// `hopmap rate --json`.
pub fn rate(a: &Analysis, file: &str, particle_um: Option<f64>) -> Value {
    tidy(rate_raw(a, file, particle_um))
}

fn rate_raw(a: &Analysis, file: &str, particle_um: Option<f64>) -> Value {
    let best = a.transport.first();
    json!({
        "schema": "hopmap.rate/1",
        "file": file,
        "answer": a.summary.headline,
        "transport": a.transport.iter().map(transport_json).collect::<Vec<_>>(),
        "particle_diameter_um": particle_um,
        "max_c_rate_for_particle": particle_um.and_then(|um| best.and_then(|t| hopmap::transport::max_c_rate_for_particle(t.diffusion_m2_s, t.dimension, um * 1000.0).ok())),
        "capacity": paths(a, file).get("capacity").cloned(),
        "cautions": CAUTIONS,
    })
}

/// `hopmap build --json`: a built framework (schema `hopmap.build/1`, see the README).
pub fn build(b: &hopmap::build::BuiltFramework, cif_path: Option<&str>) -> Value {
    tidy(build_raw(b, cif_path))
}

fn build_raw(b: &hopmap::build::BuiltFramework, cif_path: Option<&str>) -> Value {
    let s = &b.structure;
    let p = s.lattice.parameters();
    let (z, formula) = s.formula_and_z();
    let r = &b.refinement;
    json!({
        "schema": "hopmap.build/1",
        "spec": b.spec.to_text(),
        "label": b.spec.label(),
        "formula": formula,
        "z": z,
        "space_group": s.symmetry.hm_symbol,
        "space_group_number": s.symmetry.number,
        "cell": {
            "a_a": round(p.a, 4), "b_a": round(p.b, 4), "c_a": round(p.c, 4),
            "alpha_deg": round(p.alpha, 3), "beta_deg": round(p.beta, 3),
            "gamma_deg": round(p.gamma, 3), "volume_a3": round(s.volume(), 2),
        },
        "cell_accuracy": hopmap::build::CELL_ACCURACY,
        "metal_oxygen_a": round(b.metal_oxygen_a, 4),
        "refinement": {
            "refined": r.iterations > 0,
            "gii_vu": round(r.gii_vu, 4),
            "initial_gii_vu": round(r.initial_gii_vu, 4),
            "site_gii_vu": round(r.site_gii_vu, 4),
            "initial_site_gii_vu": round(r.initial_site_gii_vu, 4),
            "iterations": r.iterations,
            "converged": r.converged,
            "rms_shift_a": round(r.rms_shift_a, 4),
            "max_floor_violation_a": round(r.max_floor_violation_a, 4),
        },
        "atoms_in_cell": s.sites.len(),
        "construction": b.construction,
        "cif": cif_path,
        "caution": hopmap::build::CAUTION,
    })
}
