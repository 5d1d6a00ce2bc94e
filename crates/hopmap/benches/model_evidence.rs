//! The evidence for the model's knobs: every row of the reference set
//! (structures/reference/references.csv) scored against its published barrier range, with the
//! knobs fitted leave-one-family-out, beside the oracle's barriers (tools/oracle/results.csv,
//! a universal machine-learned potential, when present).
//!
//! `cargo bench --bench model_evidence` prints, for the shipped default knobs: each row's
//! topology check, barrier, published range, errors, oracle barrier and whether the lowest point
//! of the first network is a site the ion occupies; then the mean absolute errors with `d0_ev`
//! fitted on all rows and leave-one-family-out (for each family, `d0_ev` is fitted on the other
//! families only, and the family's rows predicted with it).
//!
//! With `HOPMAP_SWEEP` set it also scores a grid of the other knobs, nested the same way: for each
//! left-out family the setting and `d0_ev` that best fit the other families are chosen, so the
//! leave-one-family-out error includes the choice of the setting. Format (any subset):
//! `HOPMAP_SWEEP="screening_factor=0.75,1.0;d0_length_exponent=0,2;charge_shell_exponent=0;mobile_charge_scale=0"`.
//! Besides the model's knobs, `saturation=a` adds a valence-saturation term
//! `a N_A D0 (dV / V_A)^2` to the Morse part, `relax_stiffness=kappa` lets every anion
//! give way along its bond on a spring of stiffness `kappa D0`, and `relax_away=kappa` the same
//! away from the probe only (candidate rules, rejected in docs/model.md).
//! `HOPMAP_SWEEP_SPACING` (A, default 0.2) sets the grid of the sweep; the default-knob table uses
//! the analysis grid (`analysis::default_spacing_a`, what a user's run gets).
//!
//! The fit minimises the squared distance to the published ranges (zero inside a range) plus a
//! tenth of the squared distance to the mid-points, so that a range is preferred but the fit is
//! still determined when every row lies inside its range.

use hopmap::analysis::{self, AnalysisOptions};
use hopmap::bv::model::ModelKnobs;
use hopmap::calibrate::{combine, coulomb_part, morse_part};
use hopmap::element::Element;
use hopmap::grid::Grid;
use hopmap::percolation::{self, Percolation};
use hopmap::scoring::{self, ReferenceRow};
use hopmap::structure::Structure;
use rayon::prelude::*;
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

/// Penalty (eV) for a row whose network does not open below the cap.
const MISSING_EV: f64 = 1.0;
/// Relaxed ends this far apart in energy (eV), after an end ion slid, are different wells.
const OTHER_WELL_EV: f64 = 0.1;
/// Lowest point of a network counted as an occupied site when within this of the occupied level.
const SITE_TOLERANCE_EV: f32 = 0.02;

fn folder() -> PathBuf {
    Path::new(concat!(env!("CARGO_MANIFEST_DIR"), "/../..")).join("structures/reference")
}

/// One oracle row that enters the rank correlation.
#[derive(Debug, Clone, Copy)]
struct OracleRow {
    /// The oracle's NEB barrier (eV).
    barrier_ev: f64,
    /// hopmap's barrier of the same hop (eV): its highest saddle minus the lower end site, as
    /// stored by `mlip_oracle.py run-set` (refreshed with `--refresh-hopmap`).
    hop_barrier_ev: f64,
}

/// The oracle's rows, (file, ion) -> row, paired as `mlip_oracle.py summary` pairs them: a
/// converged NEB (`converged` = yes) whose band has a top (no "highest energy at an end point"
/// in `notes`, except over a whole channel repeat, where that is a flat channel), whose ends
/// are not in two different wells after an end ion slid (notes "slid", ends more than
/// [`OTHER_WELL_EV`] apart), and hopmap's barrier of the same hop (`hopmap_hop_barrier_ev`,
/// empty for a stale row). Other rows are left out.
fn oracle_barriers() -> BTreeMap<(String, String), OracleRow> {
    let path =
        Path::new(concat!(env!("CARGO_MANIFEST_DIR"), "/../..")).join("tools/oracle/results.csv");
    let mut out = BTreeMap::new();
    let Ok(mut r) = csv::ReaderBuilder::new()
        .comment(Some(b'#'))
        .flexible(true)
        .from_path(&path)
    else {
        return out;
    };
    let Ok(h) = r.headers().cloned() else {
        return out;
    };
    let col = |n: &str| h.iter().position(|x| x == n);
    let (Some(cf), Some(ci), Some(cb), Some(ch), Some(cc), Some(cn), Some(ck)) = (
        col("file"),
        col("ion"),
        col("barrier_ev"),
        col("hopmap_hop_barrier_ev"),
        col("converged"),
        col("notes"),
        col("hop_kind"),
    ) else {
        return out;
    };
    let c_ends = col("end_minus_start_ev");
    for rec in r.records().flatten() {
        let no_top = rec
            .get(cn)
            .is_some_and(|n| n.contains("highest energy at an end point"))
            && rec.get(ck) != Some("channel repeat");
        let num = |c: usize| rec.get(c).and_then(|x| x.parse::<f64>().ok());
        // an end ion that slid into another well: the band is not the hop hopmap names
        let other_well = rec.get(cn).is_some_and(|n| n.contains(" slid "))
            && c_ends
                .and_then(num)
                .is_some_and(|d| d.abs() > OTHER_WELL_EV);
        if no_top || other_well {
            continue;
        }
        if let (Some(f), Some(i), Some(b), Some(hb), Some("yes")) =
            (rec.get(cf), rec.get(ci), num(cb), num(ch), rec.get(cc))
        {
            let name = Path::new(f)
                .file_name()
                .map(|x| x.to_string_lossy().to_string())
                .unwrap_or_default();
            out.insert(
                (name, i.to_string()),
                OracleRow {
                    barrier_ev: b,
                    hop_barrier_ev: hb,
                },
            );
        }
    }
    out
}

/// What one model setting gives for one row.
#[derive(Debug, Clone, Copy)]
struct Result1 {
    barrier: Option<f64>,
    topology_ok: bool,
    /// None: the host holds no ion (nothing to check).
    site_ok: Option<bool>,
}

fn outcome(s: &Structure, row: &ReferenceRow, p: &Percolation) -> Result1 {
    let barrier = p.threshold(row.dimension).map(|t| t.barrier as f64);
    let topology_ok = scoring::topology_matches(s, p, row.dimension, row.direction);
    let site_ok = p.thresholds.iter().flatten().next().and_then(|t| {
        t.marked_lowest
            .map(|m| m - t.channel.lowest <= SITE_TOLERANCE_EV)
    });
    Result1 {
        barrier,
        topology_ok,
        site_ok,
    }
}

fn percolate(e: &Grid, s: &Structure, ion: Element, cap: f64) -> Percolation {
    let marks = analysis::occupied_wells(e, &analysis::mobile_sites(s, ion));
    percolation::percolate_marked(e, cap as f32, &marks)
}

/// One discrete setting of the knobs other than `d0_ev`.
#[derive(Debug, Clone)]
struct Setting {
    names: Vec<(String, f64)>,
}

impl Setting {
    fn apply(&self, k: &mut ModelKnobs) {
        for (n, v) in &self.names {
            match n.as_str() {
                "screening_factor" => k.screening_factor = *v,
                "d0_length_exponent" => k.d0_length_exponent = *v,
                "d0_chalcogenide_factor" => k.d0_chalcogenide_factor = *v,
                "charge_shell_exponent" => k.charge_shell_exponent = *v,
                "mobile_charge_scale" => k.mobile_charge_scale = *v,
                "mobile_excluded_nearest" => k.mobile_excluded_nearest = *v as usize,
                "vacancy_share_threshold" => k.vacancy_share_threshold = *v,
                "softness_transfer" => k.softness_transfer = *v != 0.0,
                "saturation" | "relax_stiffness" | "relax_away" => {}
                other => panic!("HOPMAP_SWEEP: unknown knob '{other}'"),
            }
        }
    }
    fn get(&self, name: &str) -> Option<f64> {
        self.names.iter().find(|(n, _)| n == name).map(|(_, v)| *v)
    }
    fn label(&self) -> String {
        self.names
            .iter()
            .map(|(n, v)| format!("{n}={v}"))
            .collect::<Vec<_>>()
            .join(" ")
    }
}

fn parse_sweep(text: &str) -> Vec<Setting> {
    let mut axes: Vec<(String, Vec<f64>)> = Vec::new();
    for part in text.split(';').filter(|p| !p.trim().is_empty()) {
        let (n, vs) = part.split_once('=').expect("HOPMAP_SWEEP: knob=values");
        let vs: Vec<f64> = vs
            .split(',')
            .map(|v| v.trim().parse().expect("HOPMAP_SWEEP: a number"))
            .collect();
        axes.push((n.trim().to_string(), vs));
    }
    let mut out = vec![Setting { names: vec![] }];
    for (n, vs) in axes {
        let mut next = Vec::new();
        for s in &out {
            for v in &vs {
                let mut t = s.clone();
                t.names.push((n.clone(), *v));
                next.push(t);
            }
        }
        out = next;
    }
    out
}

fn d0_values() -> Vec<f64> {
    (0..=16).map(|i| 0.06 + 0.03 * i as f64).collect()
}

/// Results of every setting and every `d0_ev` for one row: `[setting][d0]`.
/// The model of `o` per unit `d0_ev`, uncapped, with the anions alone (the Morse part's model,
/// as `calibrate::morse_part` builds it), for the bench-only candidate rules below.
fn anion_model(s: &Structure, o: &AnalysisOptions) -> hopmap::landscape::LandscapeModel {
    let mut knobs = o.knobs.clone();
    knobs.d0_ev = 1.0;
    knobs.energy_cap_ev = 1e30;
    let (mut model, _) =
        hopmap::bv::model::build_model(s, o.ion, &o.table, &knobs, &o.exclude_labels)
            .expect("model");
    model
        .atoms
        .retain(|x| matches!(x.kind, hopmap::landscape::FrameworkKind::Anion(_)));
    model.mobile = None;
    model
}

/// Morse part per unit `d0_ev` plus a valence-saturation term `a N_A D0 (dV / V_A)^2`, with
/// `dV` the bond valence mismatch of the probe and `D0` the deepest pair's depth per unit `d0_ev`.
fn saturated_morse(s: &Structure, o: &AnalysisOptions, a: f64) -> Grid {
    let model = anion_model(s, o);
    let dims = hopmap::calibrate::dims_for(s, o);
    let l = hopmap::landscape::compute(&model, dims, &hopmap::landscape::Progress::Silent)
        .expect("landscape");
    let d0 = model.anions.iter().map(|k| k.d0).fold(0.0, f64::max);
    let k = a * model.probe.coordination * d0;
    let v = model.probe.valence;
    let mut g = l.energy.clone();
    for (e, m) in g.values.iter_mut().zip(l.mismatch.values.iter()) {
        let x = *m as f64 / v;
        *e = (*e as f64 + k * x * x) as f32;
    }
    g
}

/// The Morse pair energy per unit depth with the anion free to move along the bond on a
/// harmonic spring of stiffness `kappa D0` (1/A^2 times the depth): `min_d [m(R + d) + kappa
/// d^2 / 2]`, minus the rigid `m(R)`, with `m = x^2 - 2x`, `x = exp((Rmin - R) / b)`. Tabulated
/// every 0.002 A up to `cutoff`. `away_only`: the anion may only move away from the probe
/// (`d >= 0`), which softens the repulsive wall and leaves the attractive side rigid.
fn relaxation_table(rmin: f64, b: f64, kappa: f64, cutoff: f64, away_only: bool) -> Vec<f64> {
    let m = |r: f64| {
        let x = ((rmin - r) / b).exp();
        x * x - 2.0 * x
    };
    let n = (cutoff / 0.002).ceil() as usize + 2;
    (0..n)
        .map(|i| {
            let r = i as f64 * 0.002;
            // coarse scan of the displacement, then a finer one around the best
            let f = |d: f64| m(r + d) + 0.5 * kappa * d * d;
            let lowest = if away_only { 0 } else { -100 };
            let mut best = (0.0, f(0.0));
            for j in lowest..=300 {
                let d = j as f64 * 0.01;
                let v = f(d);
                if v < best.1 {
                    best = (d, v);
                }
            }
            let c = best.0;
            for j in -100..=100 {
                let d = c + j as f64 * 0.0001;
                if away_only && d < 0.0 {
                    continue;
                }
                let v = f(d);
                if v < best.1 {
                    best = (d, v);
                }
            }
            best.1 - m(r)
        })
        .collect()
}

/// Adds the relaxation of the anions (see [`relaxation_table`]) to a Morse part per unit
/// `d0_ev`.
fn add_relaxation(g: &mut Grid, s: &Structure, o: &AnalysisOptions, kappa: f64, away_only: bool) {
    use hopmap::landscape::FrameworkKind;
    let model = anion_model(s, o);
    let anions: Vec<(hopmap::lattice::Frac, usize, f64)> = model
        .atoms
        .iter()
        .filter_map(|a| match a.kind {
            FrameworkKind::Anion(k) => Some((a.frac, k, a.occupancy)),
            FrameworkKind::Cation(_) => None,
        })
        .collect();
    let cut = model.anions.iter().map(|k| k.cutoff).fold(0.0, f64::max);
    let fracs: Vec<_> = anions.iter().map(|a| a.0).collect();
    let search = hopmap::neighbours::NeighbourSearch::new(&model.lattice, &fracs, cut);
    let tables: Vec<Vec<f64>> = model
        .anions
        .iter()
        .map(|k| relaxation_table(k.rmin, k.b, kappa, k.cutoff, away_only))
        .collect();
    let dims = g.dims;
    let delta: Vec<f32> = (0..g.values.len())
        .into_par_iter()
        .map(|idx| {
            let k3 = idx % dims[2];
            let j = (idx / dims[2]) % dims[1];
            let i = idx / (dims[1] * dims[2]);
            let p = hopmap::lattice::Frac::new(
                i as f64 / dims[0] as f64,
                j as f64 / dims[1] as f64,
                k3 as f64 / dims[2] as f64,
            );
            let mut sum = 0.0;
            search.for_each_within(p, cut, |nb| {
                let (_, kind, occ) = anions[nb.index];
                let ak = &model.anions[kind];
                if nb.distance < ak.cutoff {
                    let t = &tables[kind];
                    let x = nb.distance / 0.002;
                    let i0 = (x.floor() as usize).min(t.len() - 2);
                    let w = x - i0 as f64;
                    sum += occ * ak.d0 * (t[i0] * (1.0 - w) + t[i0 + 1] * w);
                }
            });
            sum as f32
        })
        .collect();
    for (v, d) in g.values.iter_mut().zip(delta) {
        *v += d;
    }
}

fn tabulate(
    s: &Structure,
    row: &ReferenceRow,
    settings: &[Setting],
    spacing: Option<f64>,
) -> Vec<Vec<Result1>> {
    let mut opts = AnalysisOptions::new(row.ion);
    opts.spacing_a = spacing;
    let cap = opts.knobs.energy_cap_ev;
    let mut morse_cache: Vec<(String, Grid)> = Vec::new();
    settings
        .iter()
        .map(|set| {
            let mut o = opts.clone();
            set.apply(&mut o.knobs);
            let mkey = format!(
                "{} {} {} {:?}",
                o.knobs.d0_length_exponent,
                o.knobs.softness_transfer,
                o.knobs.d0_chalcogenide_factor,
                (
                    set.get("saturation"),
                    set.get("relax_stiffness"),
                    set.get("relax_away")
                )
            );
            let morse = match morse_cache.iter().find(|(k, _)| *k == mkey) {
                Some((_, g)) => g.clone(),
                None => {
                    let mut g = match set.get("saturation") {
                        Some(a) if a > 0.0 => saturated_morse(s, &o, a),
                        _ => morse_part(s, &o).expect("morse part"),
                    };
                    if let Some(kappa) = set.get("relax_stiffness").filter(|k| *k > 0.0) {
                        add_relaxation(&mut g, s, &o, kappa, false);
                    }
                    if let Some(kappa) = set.get("relax_away").filter(|k| *k > 0.0) {
                        add_relaxation(&mut g, s, &o, kappa, true);
                    }
                    morse_cache.push((mkey, g.clone()));
                    g
                }
            };
            let coulomb = coulomb_part(s, &o).expect("coulomb part");
            d0_values()
                .par_iter()
                .map(|&d0| {
                    let e = combine(&morse, &coulomb, d0, cap);
                    outcome(s, row, &percolate(&e, s, row.ion, cap))
                })
                .collect()
        })
        .collect()
}

fn loss(r: &Result1, row: &ReferenceRow) -> f64 {
    let Some((lo, hi)) = row.range_ev else {
        return 0.0;
    };
    match r.barrier {
        Some(b) => {
            let (out, mid) = scoring::range_error(b, (lo, hi));
            out * out + 0.1 * mid * mid
        }
        None => MISSING_EV * MISSING_EV,
    }
}

/// Best (setting, d0 index) over the rows for which `use_row` holds.
fn fit(
    tables: &[Vec<Vec<Result1>>],
    rows: &[ReferenceRow],
    use_row: &dyn Fn(usize) -> bool,
) -> (usize, usize, f64) {
    let nset = tables[0].len();
    let nd = tables[0][0].len();
    let mut best = (0, 0, f64::INFINITY);
    for si in 0..nset {
        for di in 0..nd {
            let l: f64 = (0..rows.len())
                .filter(|&k| use_row(k))
                .map(|k| loss(&tables[k][si][di], &rows[k]))
                .sum();
            if l < best.2 {
                best = (si, di, l);
            }
        }
    }
    best
}

struct Loaded {
    row: ReferenceRow,
    structure: Structure,
}

fn load() -> Vec<Loaded> {
    let rows = scoring::read_reference_rows(&folder().join("references.csv"))
        .unwrap_or_else(|e| panic!("{e}"));
    rows.into_iter()
        .map(|row| {
            let s = hopmap::read::read_structure(&folder().join(&row.file), None)
                .unwrap_or_else(|e| panic!("{e}"));
            let (s, _) = analysis::with_oxidation_states(&s, &AnalysisOptions::new(row.ion).table)
                .unwrap_or_else(|e| panic!("{}: {e}", row.file));
            Loaded { row, structure: s }
        })
        .collect()
}

fn family(r: &ReferenceRow) -> String {
    if r.family.is_empty() {
        r.file.clone()
    } else {
        r.family.clone()
    }
}

fn summarise(
    title: &str,
    data: &[Loaded],
    tables: &[Vec<Vec<Result1>>],
    settings: &[Setting],
    oracle: &BTreeMap<(String, String), OracleRow>,
    print_rows: bool,
) {
    let rows: Vec<ReferenceRow> = data.iter().map(|d| d.row.clone()).collect();
    let d0s = d0_values();
    let (bs, bd, _) = fit(tables, &rows, &|_| true);
    // leave one family out: the setting and d0 chosen without the family
    let families: Vec<String> = {
        let mut f: Vec<String> = rows.iter().map(family).collect();
        f.sort();
        f.dedup();
        f
    };
    let mut lofo: Vec<Option<(usize, usize)>> = vec![None; rows.len()];
    for fam in &families {
        let (si, di, _) = fit(tables, &rows, &|k| family(&rows[k]) != *fam);
        for k in 0..rows.len() {
            if family(&rows[k]) == *fam {
                lofo[k] = Some((si, di));
            }
        }
    }
    println!("\n== {title}");
    println!(
        "fitted on all rows: {} d0_ev={:.2} eV",
        settings[bs].label(),
        d0s[bd]
    );
    if print_rows {
        println!(
            "{:<30} {:>3} {:<15} {:>4} {:>5} {:>11} {:>7} {:>7} {:>6} {:>6} {:>7} {:>5}",
            "structure",
            "ion",
            "family",
            "dim",
            "topo",
            "range eV",
            "fit eV",
            "LOFO eV",
            "out",
            "mid",
            "oracle",
            "site"
        );
    }
    let (mut fit_out, mut fit_mid, mut lo_out, mut lo_mid) = (vec![], vec![], vec![], vec![]);
    let (mut topo_ok, mut site_ok, mut site_n) = (0, 0, 0);
    // the oracle against hopmap's barrier of the same hop (the summary's pairing), and against
    // this table's barrier of the published dimension
    let mut oracle_pairs = Vec::new();
    let mut oracle_network_pairs = Vec::new();
    let mut published_pairs = Vec::new();
    for (k, d) in data.iter().enumerate() {
        let r = &d.row;
        let at_fit = tables[k][bs][bd];
        let (ls, ld) = lofo[k].unwrap();
        let at_lofo = tables[k][ls][ld];
        if at_fit.topology_ok {
            topo_ok += 1;
        }
        if let Some(ok) = at_fit.site_ok {
            site_n += 1;
            if ok {
                site_ok += 1;
            }
        }
        let mut errs = ("-".to_string(), "-".to_string());
        if let Some(range) = r.range_ev {
            let e_fit = at_fit
                .barrier
                .map(|b| scoring::range_error(b, range))
                .unwrap_or((MISSING_EV, MISSING_EV));
            let e_lo = at_lofo
                .barrier
                .map(|b| scoring::range_error(b, range))
                .unwrap_or((MISSING_EV, MISSING_EV));
            fit_out.push(e_fit.0);
            fit_mid.push(e_fit.1);
            lo_out.push(e_lo.0);
            lo_mid.push(e_lo.1);
            errs = (format!("{:.2}", e_lo.0), format!("{:.2}", e_lo.1));
            if let Some(b) = at_fit.barrier {
                published_pairs.push((b, 0.5 * (range.0 + range.1)));
            }
        }
        let name = Path::new(&r.file)
            .file_name()
            .unwrap()
            .to_string_lossy()
            .to_string();
        let orc_row = oracle
            .get(&(name.clone(), r.ion.symbol().to_string()))
            .copied();
        let orc = orc_row.map(|o| o.barrier_ev);
        if let Some(o) = orc_row {
            oracle_pairs.push((o.hop_barrier_ev, o.barrier_ev));
            if let Some(b) = at_fit.barrier {
                oracle_network_pairs.push((b, o.barrier_ev));
            }
        }
        if print_rows {
            println!(
                "{:<30} {:>3} {:<15} {:>4} {:>5} {:>11} {:>7} {:>7} {:>6} {:>6} {:>7} {:>5}",
                name.trim_end_matches(".cif"),
                r.ion.symbol(),
                family(r),
                format!("{}D", r.dimension),
                if at_fit.topology_ok { "ok" } else { "WRONG" },
                r.range_ev
                    .map(|(a, b)| format!("{a:.2}-{b:.2}"))
                    .unwrap_or("-".into()),
                at_fit
                    .barrier
                    .map(|b| format!("{b:.2}"))
                    .unwrap_or("none".into()),
                at_lofo
                    .barrier
                    .map(|b| format!("{b:.2}"))
                    .unwrap_or("none".into()),
                errs.0,
                errs.1,
                orc.map(|o| format!("{o:.2}")).unwrap_or("-".into()),
                match at_fit.site_ok {
                    Some(true) => "real",
                    Some(false) => "VOID",
                    None => "-",
                },
            );
        }
    }
    let mean = |v: &[f64]| v.iter().sum::<f64>() / v.len().max(1) as f64;
    println!(
        "barrier rows {}: MAE to range {:.3} eV (fit) {:.3} eV (leave-one-family-out, {} families); MAE to mid-point {:.3} eV (fit) {:.3} eV (LOFO)",
        fit_out.len(),
        mean(&fit_out),
        mean(&lo_out),
        families.len(),
        mean(&fit_mid),
        mean(&lo_mid)
    );
    println!(
        "topology right on {topo_ok}/{} rows; lowest point of the first network is an occupied site in {site_ok}/{site_n} hosts that hold the ion",
        rows.len()
    );
    println!(
        "rank correlation (Spearman) with the oracle (converged rows, hopmap's barrier of the same hop): {} over {} rows (this table's barrier instead: {} over {} rows); with the published mid-points: {} over {} rows",
        scoring::spearman(&oracle_pairs)
            .map(|x| format!("{x:.2}"))
            .unwrap_or("-".into()),
        oracle_pairs.len(),
        scoring::spearman(&oracle_network_pairs)
            .map(|x| format!("{x:.2}"))
            .unwrap_or("-".into()),
        oracle_network_pairs.len(),
        scoring::spearman(&published_pairs)
            .map(|x| format!("{x:.2}"))
            .unwrap_or("-".into()),
        published_pairs.len()
    );
}

fn main() {
    // `cargo bench` passes --bench; nothing else is read from the command line
    let data = load();
    let oracle = oracle_barriers();
    let spacing_for = |_: &Structure| None;
    // the shipped knobs, d0 refitted leave-one-family-out
    let base = Setting { names: vec![] };
    let t = std::time::Instant::now();
    let tables: Vec<Vec<Vec<Result1>>> = data
        .iter()
        .map(|d| {
            tabulate(
                &d.structure,
                &d.row,
                std::slice::from_ref(&base),
                spacing_for(&d.structure),
            )
        })
        .collect();
    summarise(
        "default knobs (ModelKnobs::default), d0_ev refitted",
        &data,
        &tables,
        std::slice::from_ref(&base),
        &oracle,
        true,
    );
    println!("({:.1} s)", t.elapsed().as_secs_f64());
    if let Ok(sweep) = std::env::var("HOPMAP_SWEEP") {
        let settings = parse_sweep(&sweep);
        let spacing: f64 = std::env::var("HOPMAP_SWEEP_SPACING")
            .ok()
            .and_then(|s| s.parse().ok())
            .unwrap_or(0.2);
        let t = std::time::Instant::now();
        let tables: Vec<Vec<Vec<Result1>>> = data
            .iter()
            .map(|d| {
                eprintln!("  sweep: {} {}", d.row.file, d.row.ion);
                tabulate(&d.structure, &d.row, &settings, Some(spacing))
            })
            .collect();
        for (si, set) in settings.iter().enumerate() {
            let one: Vec<Vec<Vec<Result1>>> = tables.iter().map(|t| vec![t[si].clone()]).collect();
            summarise(
                &format!("setting {}", set.label()),
                &data,
                &one,
                std::slice::from_ref(set),
                &oracle,
                false,
            );
        }
        summarise(
            &format!(
                "nested over {} settings (spacing {spacing} A)",
                settings.len()
            ),
            &data,
            &tables,
            &settings,
            &oracle,
            true,
        );
        println!("({:.1} s)", t.elapsed().as_secs_f64());
    }
}
