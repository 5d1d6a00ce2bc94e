//! The bundled reference set (structures/reference/references.csv): published structures whose
//! channel dimension, direction and barrier are known. Each row names its sources in the CSV
//! (barrier sources, method, what the value measures, structure source, and whether the values
//! are quoted from memory); `cargo bench --bench model_evidence` scores the same rows with the
//! knobs refitted leave-one-family-out and prints the table of the science notes
//! (docs/model.md).
//!
//! Checks, with the model's default knobs (`ModelKnobs::default()`), using the predicates of
//! `hopmap::scoring` (the ones the bench uses):
//!
//! - **Topology.** The first network to open has the published dimension, and for 1D and 2D
//!   every family opening with it runs along a direction equivalent to the published one under
//!   the point group of the structure, except the rows of [`KNOWN_TOPOLOGY_MISSES`], each with
//!   its reason; a listed row that comes out right fails the test until it leaves the list.
//! - **Barriers.** The mean distance of the barriers to their published ranges is at most
//!   [`MAX_MAE_TO_RANGE_EV`]; no row is further than [`ROW_TOLERANCE_EV`] from its range unless
//!   the CSV flags it as a model outlier (column `model_outlier`: "over-predicted: reason" or
//!   "under-predicted: reason"), and a flagged row must still lie beyond that end of its range.
//! - **Sites.** In at least [`MIN_REAL_SITE_SHARE`] of the hosts that hold the ion, the lowest
//!   point of the first network is a site the ion occupies (within 0.02 eV of the occupied
//!   level), not an empty pocket.
//! - **Site graph.** The site-and-hop graph percolates at exactly the grid's E_1D, E_2D, E_3D.
//! - **Sites after merging.** Persistence merging (sites and hops before and after, printed)
//!   leaves shallow sites only where the merge keeps them apart on purpose; on olivine and
//!   TiNb2O7 the merged sites form complete orbits with equal energies and hops; the olivine Li
//!   site is 4a and its step along the chain is b/2.
//! - **Valence check.** No structure is suspect (GII <= 0.4 v.u.; `GII_SUSPECT` gives the limit
//!   and its sources, Salinas-Sanchez et al. 1992 among them), or it is documented below.
//!
//! Cells above 500 A^3 use a 0.15 A grid to keep the whole test within about a minute on two
//! shared cores; the others use the analysis default (0.1 A).

use hopmap::analysis::{self, Analysis, AnalysisOptions};
use hopmap::bv::ValenceReport;
use hopmap::bv::valence::Verdict;
use hopmap::element::Element;
use hopmap::percolation::format_indices;
use hopmap::scoring::{self, ReferenceRow};
use rayon::prelude::*;
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::sync::OnceLock;

/// The target for the mean distance to the published ranges (eV), met by the default
/// knobs on the whole set (the leave-one-family-out figure is the bench's).
const MAX_MAE_TO_RANGE_EV: f64 = 0.10;

/// Largest distance (eV) of one row from its published range before it must carry a
/// `model_outlier` flag: the ranges already span the methods (DFT-NEB, atomistic potentials,
/// impedance, NMR), and a static bond-valence screen ignores relaxation and ion-ion correlation
/// (science notes, section 7). A choice, not a sourced value.
const ROW_TOLERANCE_EV: f64 = 0.30;

/// Share of the hosts holding the ion whose first network's lowest point is an occupied site.
const MIN_REAL_SITE_SHARE: f64 = 0.9;

/// Cells larger than this (A^3) use [`BIG_CELL_SPACING_A`].
const BIG_CELL_A3: f64 = 500.0;
const BIG_CELL_SPACING_A: f64 = 0.15;

/// Rows whose first network the model gets wrong, and why (file, ion, reason). Kept true by
/// the topology test in both directions.
const KNOWN_TOPOLOGY_MISSES: &[(&str, &str, &str)] = &[
    (
        "Li10GeP2S12_ordered_dft.cif",
        "Li",
        "DFT finds the c-axis chains lowest (Mo, Ong & Ceder 2012); in the landscape the in-plane \
         path through the empty 4c-type pockets opens with the 3D network that holds the c \
         chains (within 0.02 eV), so the answer is a 3D network",
    ),
    (
        "TiO2_bronze_mp.cif",
        "Li",
        "the model's lowest channel runs along c of this cell; the published fast direction is b",
    ),
    (
        "Li3V2PO43_nasicon_mp.cif",
        "Li",
        "the ordered DFT cell of the monoclinic phase: a 1D path opens 12 meV before the 3D net",
    ),
];

fn folder() -> PathBuf {
    Path::new(concat!(env!("CARGO_MANIFEST_DIR"), "/../..")).join("structures/reference")
}

fn read_rows() -> Vec<ReferenceRow> {
    scoring::read_reference_rows(&folder().join("references.csv")).unwrap_or_else(|e| panic!("{e}"))
}

struct Outcome {
    row: ReferenceRow,
    analysis: Analysis,
    seconds: f64,
}

fn run_row(row: &ReferenceRow) -> Outcome {
    let path = folder().join(&row.file);
    let s = hopmap::read::read_structure(&path, None)
        .unwrap_or_else(|e| panic!("references.csv line {}: {e}", row.line));
    let mut opts = AnalysisOptions::new(row.ion);
    if s.volume() > BIG_CELL_A3 {
        opts.spacing_a = Some(BIG_CELL_SPACING_A);
    }
    let t = std::time::Instant::now();
    let analysis = analysis::analyse(&s, &opts)
        .unwrap_or_else(|e| panic!("references.csv line {}: {}: {e}", row.line, row.file));
    Outcome {
        row: row.clone(),
        analysis,
        seconds: t.elapsed().as_secs_f64(),
    }
}

fn barrier_of(o: &Outcome) -> Option<f64> {
    o.analysis
        .percolation
        .threshold(o.row.dimension)
        .map(|t| t.barrier as f64)
}

/// True when the lowest point of the first network is an occupied site (None: no ion there).
fn lowest_is_occupied(o: &Outcome) -> Option<bool> {
    let t = o.analysis.percolation.thresholds.iter().flatten().next()?;
    t.marked_lowest.map(|m| m - t.channel.lowest <= 0.02)
}

fn fmt_dir(d: u8, v: &[[i32; 3]]) -> String {
    let (l, r) = if d == 2 { ("(", ")") } else { ("[", "]") };
    if d == 3 || v.is_empty() {
        return "-".into();
    }
    v.iter()
        .map(|x| format!("{l}{}{r}", format_indices(*x)))
        .collect::<Vec<_>>()
        .join(" ")
}

fn report(out: &[Outcome]) -> String {
    let mut s = String::new();
    s.push_str(&format!(
        "\nreference set ({} rows; ModelKnobs::default())\n{:<32} {:>3} {:>4} {:>4} {:>11} {:>11} {:>11} {:>7} {:>6} {:>5}\n",
        out.len(),
        "structure",
        "ion",
        "dim",
        "pred",
        "direction",
        "predicted",
        "range eV",
        "eV",
        "off",
        "site"
    ));
    let mut off_all = Vec::new();
    for o in out {
        let r = &o.row;
        let p = &o.analysis.percolation;
        let b = barrier_of(o);
        let (range, off) = match (r.range_ev, b) {
            (Some(rg), Some(b)) => {
                let e = scoring::range_error(b, rg).0;
                off_all.push(e);
                (format!("{:.2}-{:.2}", rg.0, rg.1), format!("{e:.2}"))
            }
            (Some(rg), None) => (format!("{:.2}-{:.2}", rg.0, rg.1), "none".into()),
            _ => ("-".into(), "-".into()),
        };
        s.push_str(&format!(
            "{:<32} {:>3} {:>4} {:>4} {:>11} {:>11} {:>11} {:>7} {:>6} {:>5}\n",
            r.file.trim_end_matches(".cif"),
            r.ion.symbol(),
            format!("{}D", r.dimension),
            format!("{}D", scoring::first_dimension(p)),
            r.direction
                .map(|v| fmt_dir(r.dimension, &[v]))
                .unwrap_or("-".into()),
            fmt_dir(r.dimension, &scoring::directions_at(p, r.dimension)),
            range,
            b.map(|x| format!("{x:.2}")).unwrap_or("none".into()),
            off,
            match lowest_is_occupied(o) {
                Some(true) => "real",
                Some(false) => "VOID",
                None => "-",
            }
        ));
    }
    let mae = off_all.iter().sum::<f64>() / off_all.len().max(1) as f64;
    s.push_str(&format!(
        "mean distance to the published ranges: {mae:.3} eV over {} barriers\n",
        off_all.len()
    ));
    let total: f64 = out.iter().map(|o| o.seconds).sum();
    s.push_str(&format!("analysis time: {total:.1} s summed over rows\n"));
    s
}

fn outcomes() -> &'static [Outcome] {
    static CELL: OnceLock<Vec<Outcome>> = OnceLock::new();
    CELL.get_or_init(|| {
        let rows = read_rows();
        let out: Vec<Outcome> = rows.par_iter().map(run_row).collect();
        println!("{}", report(&out));
        out
    })
}

#[test]
fn the_first_network_to_open_has_the_published_dimension_and_direction() {
    let mut failures = Vec::new();
    for o in outcomes() {
        let r = &o.row;
        let p = &o.analysis.percolation;
        let ok = scoring::topology_matches(&o.analysis.structure, p, r.dimension, r.direction);
        let known = KNOWN_TOPOLOGY_MISSES
            .iter()
            .find(|k| k.0 == r.file && k.1 == r.ion.symbol());
        match (ok, known) {
            (true, Some(_)) => failures.push(format!(
                "{} ({}): now right ({}D first): take it off KNOWN_TOPOLOGY_MISSES",
                r.file,
                r.ion,
                r.dimension
            )),
            (false, None) => failures.push(format!(
                "{} ({}): first network {}D {} (E_1 {:?}, E_2 {:?}, E_3 {:?} eV), published {}D {} [{}]",
                r.file,
                r.ion,
                scoring::first_dimension(p),
                fmt_dir(r.dimension, &scoring::directions_at(p, r.dimension)),
                p.energy(1),
                p.energy(2),
                p.energy(3),
                r.dimension,
                r.direction
                    .map(|v| fmt_dir(r.dimension, &[v]))
                    .unwrap_or("-".into()),
                r.structure_source
            )),
            (false, Some((_, _, why))) => println!("{} ({}): known miss: {why}", r.file, r.ion),
            (true, None) => {}
        }
    }
    let known = KNOWN_TOPOLOGY_MISSES.len();
    let rows = outcomes().len();
    println!("topology right on {} of {rows} rows", rows - known);
    assert!(failures.is_empty(), "{}", failures.join("\n"));
}

#[test]
fn published_barriers_are_reproduced_on_average_and_row_by_row() {
    let mut failures = Vec::new();
    let mut offs = Vec::new();
    for o in outcomes() {
        let r = &o.row;
        let Some(range) = r.range_ev else { continue };
        let Some(b) = barrier_of(o) else {
            failures.push(format!(
                "{}: no {}D network below the cap",
                r.file, r.dimension
            ));
            offs.push(1.0);
            continue;
        };
        let off = scoring::range_error(b, range).0;
        offs.push(off);
        match &r.outlier {
            None if off > ROW_TOLERANCE_EV => failures.push(format!(
                "{} ({}): {}D barrier {b:.3} eV is {off:.3} eV outside {:.2}-{:.2} eV ({})",
                r.file, r.ion, r.dimension, range.0, range.1, r.barrier_sources
            )),
            None => {}
            // A flagged row must still show the bias its flag states: when the model
            // reproduces it, the flag has to go.
            Some(why) => {
                let still = if why.starts_with("over-predicted") {
                    b > range.1
                } else if why.starts_with("under-predicted") {
                    b < range.0
                } else {
                    panic!(
                        "{}: model_outlier must start with 'over-predicted' or 'under-predicted'",
                        r.file
                    )
                };
                println!(
                    "{} ({}): model outlier, {b:.3} eV against {:.2}-{:.2} eV: {why}",
                    r.file, r.ion, range.0, range.1
                );
                if !still {
                    failures.push(format!(
                        "{} ({}): flagged '{why}' but the barrier {b:.3} eV now lies within \
                         {:.2}-{:.2} eV or on the other side: update the model_outlier column",
                        r.file, r.ion, range.0, range.1
                    ));
                }
            }
        }
    }
    assert!(offs.len() >= 40, "only {} rows carry a barrier", offs.len());
    let mae = offs.iter().sum::<f64>() / offs.len() as f64;
    println!(
        "mean distance to the published ranges: {mae:.3} eV over {} rows",
        offs.len()
    );
    if mae > MAX_MAE_TO_RANGE_EV {
        failures.push(format!(
            "mean distance to the published ranges {mae:.3} eV is above {MAX_MAE_TO_RANGE_EV} eV"
        ));
    }
    assert!(failures.is_empty(), "{}", failures.join("\n"));
}

#[test]
fn the_lowest_point_of_the_first_network_is_a_site_the_ion_occupies() {
    let (mut real, mut voids) = (0usize, Vec::new());
    for o in outcomes() {
        match lowest_is_occupied(o) {
            Some(true) => real += 1,
            Some(false) => voids.push(format!("{} ({})", o.row.file, o.row.ion)),
            None => {}
        }
    }
    let n = real + voids.len();
    let share = real as f64 / n as f64;
    println!(
        "lowest point an occupied site in {real} of {n} hosts; empty pockets lowest in: {}",
        voids.join(", ")
    );
    assert!(n >= 30, "only {n} hosts hold the ion");
    assert!(
        share >= MIN_REAL_SITE_SHARE,
        "only {real} of {n} ({:.0}%); empty pockets lowest in {}",
        100.0 * share,
        voids.join(", ")
    );
}

/// Crystallographic-shear block oxides (blocks of corner-sharing octahedra joined by edge sharing
/// at the block borders) conduct fast down the tunnels along the short axis, while hops between
/// blocks cost much more (common practice, no single source). "Much more" is put at 0.3 eV
/// between the 1D threshold and the next network to open: our own reading of "much", not a
/// sourced value. Checked on the bond-valence model of the published TiNb2O7 topology
/// (TiNb2O7_block.cif, where the contrast must also be twice the 1D barrier) and on the same
/// framework ordered and relaxed by a universal machine-learned potential
/// (TiNb2O7_block_relaxed.cif), whose bond lengths are not ours.
#[test]
fn in_the_tinb2o7_block_oxide_lithium_runs_down_the_tunnels_and_crossing_the_shear_borders_costs_far_more()
 {
    for (file, tunnel, twice) in [
        ("TiNb2O7_block.cif", [0, 1, 0], true),
        ("TiNb2O7_block_relaxed.cif", [1, 0, 0], false),
    ] {
        let o = outcomes()
            .iter()
            .find(|o| o.row.file == file && o.row.ion == Element::from_symbol("Li").unwrap())
            .unwrap_or_else(|| panic!("references.csv has the {file} row for Li"));
        let p = &o.analysis.percolation;
        let e1 = p.energy(1).expect("a 1D channel opens");
        assert_eq!(
            scoring::first_dimension(p),
            1,
            "{file}: the tunnels open first, alone"
        );
        assert_eq!(
            scoring::directions_at(p, 1),
            vec![tunnel],
            "{file}: tunnel direction"
        );
        let b1 = p.threshold(1).unwrap().barrier;
        let next = p
            .energy(2)
            .or(p.energy(3))
            .expect("crossing the borders is possible below the cap");
        println!(
            "{file}: tunnels {b1:.3} eV; the next network opens {:.3} eV higher",
            next - e1
        );
        assert!(
            next - e1 >= 0.3 && (!twice || next - e1 >= 2.0 * b1),
            "{file}: inter-block networks open only {:.3} eV above the tunnels (1D barrier {b1:.3} eV)",
            next - e1
        );
    }
}

/// The hop length of the hopping model reproduces the exact diffusion of the chain of sites
/// along the channel (analysis::chain_diffusion_per_attempt, checked on exact results in
/// tests/transport.rs). Expected values from the crystallography of each file: olivine
/// LiFePO4, two equivalent M1 (4a) sites per b repeat, so b/2; rutile, two empty octahedral
/// sites per c, so c/2; the TiNb2O7 tunnel, one dominant barrier per b repeat, so b; layered
/// LiCoO2, octahedral sites a apart with a deep tetrahedral site between them, so between
/// a/sqrt(2) (two-site chain, deep intermediate; less 10% for the other minima and grid noise of
/// the profile) and a.
#[test]
fn the_hop_length_follows_the_sites_along_the_channel() {
    for (file, dim, lo, hi) in [
        (
            "LiFePO4_olivine.cif",
            1u8,
            0.98 * 6.010 / 2.0,
            1.02 * 6.010 / 2.0,
        ),
        (
            "TiO2_rutile.cif",
            1,
            0.98 * 2.9587 / 2.0,
            1.02 * 2.9587 / 2.0,
        ),
        ("TiNb2O7_block.cif", 1, 0.98 * 3.801, 3.801 + 1e-6),
        (
            "LiCoO2_layered.cif",
            2,
            0.9 * 2.8156 / 2f64.sqrt(),
            2.8156 + 1e-6,
        ),
    ] {
        let o = outcomes()
            .iter()
            .find(|o| o.row.file == file)
            .unwrap_or_else(|| panic!("references.csv has {file}"));
        let t = o
            .analysis
            .transport
            .iter()
            .find(|t| t.dimension == dim)
            .unwrap_or_else(|| panic!("{file}: no {dim}D transport estimate"));
        assert!(
            (lo..=hi).contains(&t.hop_length_a),
            "{file}: hop {:.4} A, expected {lo:.3}-{hi:.3} A",
            t.hop_length_a
        );
    }
}

#[test]
fn the_site_graph_percolates_at_the_grid_energies_on_every_reference() {
    for o in outcomes() {
        let a = &o.analysis;
        let g = a
            .graph_percolation
            .as_ref()
            .unwrap_or_else(|| panic!("{}: no site graph", o.row.file));
        for d in 1..=3u8 {
            assert_eq!(
                g.energy(d),
                a.percolation.energy(d),
                "{} ({}): E_{d}D of the site graph vs the grid",
                o.row.file,
                o.row.ion
            );
        }
    }
}

/// GII with the occupants of each mixed site pooled into one ion: occupancy-weighted mean
/// formal valence and bond-valence sum per site, weighted by multiplicity x total occupancy.
/// The split occupants of a mixed site (Mn3+/Mn4+ on one spinel site, O/F on one anion site)
/// sit at the same place and have the same bonds, so only their mean can match its formal
/// valence.
fn site_pooled_gii(v: &ValenceReport) -> f64 {
    let mut sites: BTreeMap<&str, (f64, f64, f64, usize)> = BTreeMap::new();
    for i in &v.ions {
        let e = sites
            .entry(i.site_label.as_str())
            .or_insert((0.0, 0.0, 0.0, 0));
        e.0 += i.occupancy * i.formal;
        e.1 += i.occupancy * i.bvs;
        e.2 += i.occupancy;
        e.3 = i.multiplicity;
    }
    let (mut num, mut den) = (0.0, 0.0);
    for (formal, bvs, occ, mult) in sites.values() {
        if *occ == 0.0 {
            continue;
        }
        let dev = (bvs / occ).abs() - (formal / occ).abs();
        let w = *mult as f64 * occ;
        num += w * dev * dev;
        den += w;
    }
    (num / den).sqrt()
}

/// The three ions furthest from their formal valence, for messages.
fn worst_ions(v: &ValenceReport) -> String {
    let mut ions: Vec<_> = v.ions.iter().collect();
    ions.sort_by(|a, b| b.deviation.abs().total_cmp(&a.deviation.abs()));
    ions.iter()
        .take(3)
        .map(|i| {
            format!(
                "{} {} BVS {:.2} v.u. ({:+.2})",
                i.label, i.species, i.bvs, i.deviation
            )
        })
        .collect::<Vec<_>>()
        .join(", ")
}

/// Structures known to fail the GII test for a reason outside the structure, with the largest
/// GII accepted (v.u.) so that a regression still shows.
const KNOWN_STRAINED: &[(&str, f64, &str)] = &[
    (
        "NaFePO4_olivine_mp.cif",
        0.23,
        "Na squeezed into the small M1 octahedron of the (metastable) olivine frame sums to 1.3 \
         v.u. in this DFT-relaxed entry, and P and Fe come out under-bonded by GGA's long bonds",
    ),
    (
        "Li2O_antifluorite_mp.cif",
        0.23,
        "DFT (GGA) lattice about 1% long: the O2- sums (-1.69 v.u.) and Li+ sums come out low; \
         every Li-O length is fixed by the cubic cell",
    ),
    (
        "Li3N_alpha.cif",
        0.37,
        "N in alpha-Li3N sums to 2.4 v.u. with the only Li-N parameter of the table (Brese & \
         O'Keeffe 1991); every Li-N length is fixed by the cell (the known under-bonding of N in \
         Li3N, common practice)",
    ),
    (
        "Li3OCl_antiperovskite.cif",
        0.38,
        "the cubic antiperovskite's O is under-bonded (Li-O = a/2 fixed by the cell) and its Cl \
         over-bonded: the metastable, strained frame that makes Li mobile (common practice)",
    ),
    (
        "Li3OBr_antiperovskite.cif",
        0.53,
        "as Li3OCl, stretched further by the larger Br (O about 1.2 v.u.)",
    ),
    (
        "Li0.33La0.56TiO3_perovskite.cif",
        0.24,
        "a mean-field cubic model with Li and La sharing the A site: Li on the oversized A site \
         is under-bonded, as the fast-ion conductor's Li is",
    ),
    (
        "NaAl11O17_beta_alumina.cif",
        0.22,
        "Na on the oversized Beevers-Ross site is under-bonded (0.6 v.u.), which is why it moves \
         (common practice); tetrahedral Al2 sums to 2.6 v.u. with R0(Al-O) of the table",
    ),
    (
        "AgAl11O17_beta_alumina.cif",
        0.23,
        "the Na beta-alumina frame with Ag on the Beevers-Ross site (ion-exchange model): Ag \
         under-bonded as Na is there",
    ),
    (
        "Na3SbS4_cubic.cif",
        0.26,
        "Sb5+ over-bonded (5.6 v.u.) with the only Sb-S parameter of the table (Sb of unspecified \
         valence, ref b); the cubic cell is a model of the tetragonal phase",
    ),
    (
        "TiNb2O7_block_relaxed.cif",
        0.23,
        "relaxed by a machine-learned potential with one Ti/Nb order: its Nb-O bonds are the \
         potential's (GGA-like, long), so Nb5+ sums come out 0.3-0.5 v.u. low",
    ),
    (
        "LiCoO2_layered.cif",
        0.25,
        "the only Co3+-O2- row of the IUCr table (Brese & O'Keeffe 1991, R0 = 1.70 A) over-bonds \
         low-spin Co3+ in this well-refined structure (BVS ~3.3 v.u.), and the O2- sums follow",
    ),
    (
        "Li6PS5Cl_argyrodite.cif",
        0.22,
        "the 'free' S2- on 4c is bonded only by the half-occupied Li 48h positions and comes out \
         under-bonded (BVS ~1.5 v.u.); the file keeps the ordered anion model (the S/Cl exchange \
         between 4a and 4c reported for this compound is left out, see its header), which puts \
         the whole mismatch on that site. GII 0.14 v.u. with first-shell Li-S parameters; 0.20 \
         with the softness-sensitive set the analysis uses for the mobile ion",
    ),
];

#[test]
fn every_reference_passes_the_valence_check_or_its_failure_is_explained() {
    let mut failures = Vec::new();
    for o in outcomes() {
        let r = &o.row;
        let Some(v) = &o.analysis.valence else {
            failures.push(format!("{}: no valence check", r.file));
            continue;
        };
        if v.verdict != Verdict::Suspect {
            continue;
        }
        let pooled = site_pooled_gii(v);
        let mixed = v.ions.iter().any(|i| i.label != i.site_label);
        if let Some((_, max, why)) = KNOWN_STRAINED.iter().find(|k| k.0 == r.file) {
            println!(
                "{}: GII {:.3} v.u. (suspect) explained: {why}",
                r.file, v.gii
            );
            if v.gii > *max {
                failures.push(format!("{}: GII {:.3} v.u. above {max}", r.file, v.gii));
            }
        } else if mixed && pooled <= 0.2 {
            println!(
                "{}: GII {:.3} v.u. counts the occupants of mixed sites one by one; pooled per site {:.3} v.u.",
                r.file, v.gii, pooled
            );
        } else {
            failures.push(format!(
                "{}: GII {:.3} v.u. (pooled per site {pooled:.3} v.u.): suspect; {}",
                r.file,
                v.gii,
                worst_ions(v)
            ));
        }
    }
    assert!(failures.is_empty(), "{}", failures.join("\n"));
}

#[test]
fn direction_equivalents_follow_the_point_group() {
    // Independent of the model: the orbit sizes of <100> and {001} in the point groups of the
    // reference files (International Tables, Vol. A: cubic m-3m has 3 <100> axes, tetragonal
    // 4/m has one [001] axis, hexagonal 6/mmm one (001) plane family).
    let read = |f: &str| hopmap::read::read_structure(&folder().join(f), None).unwrap();
    let spinel = read("LiMn2O4_spinel.cif");
    assert_eq!(
        scoring::equivalent_indices(&spinel, [0, 0, 1], false).len(),
        3
    );
    let holl = read("MnO2_hollandite.cif");
    assert_eq!(
        scoring::equivalent_indices(&holl, [0, 0, 1], false),
        vec![[0, 0, 1]]
    );
    assert_eq!(
        scoring::equivalent_indices(&holl, [1, 0, 0], false).len(),
        2
    );
    let p2 = read("Na0.74CoO2_P2.cif");
    assert_eq!(
        scoring::equivalent_indices(&p2, [0, 0, 1], true),
        vec![[0, 0, 1]]
    );
    // hexagonal: (100), (010), (1-10) are one family of planes
    assert_eq!(scoring::equivalent_indices(&p2, [1, 0, 0], true).len(), 3);
    assert_eq!(scoring::parse_indices("[1-10]"), Some([1, -1, 0]));
    assert_eq!(scoring::parse_indices("(001)"), Some([0, 0, 1]));
}

// ------------------------------------------------------------------------------------------
// Sites and hops after persistence merging
// ------------------------------------------------------------------------------------------

/// Grid noise (eV): the reference grids' point counts do not respect the space groups (61
/// points along the olivine b axis, for one), so symmetry-equivalent minima and saddles land
/// on inequivalent grid points and differ by up to about 0.03 eV (measured on these files).
/// Equal energies and equal hops are compared within this.
const GRID_NOISE_EV: f32 = 0.04;

/// The network of `a`'s grid with every minimum its own site (no merging).
fn unmerged(a: &Analysis) -> hopmap::network::Network {
    let input = hopmap::network::NetworkInput {
        ops: &a.structure.symmetry.ops,
        framework: &[],
        mobile_sites: &[],
        mobile_radius: a.model.probe.radius,
    };
    let options = hopmap::network::NetworkOptions {
        ceiling: a.percolation.ceiling,
        merge_depth: 0.0,
        ..Default::default()
    };
    hopmap::network::build(&a.landscape.energy, &input, &options)
}

fn highest_threshold(a: &Analysis) -> f32 {
    a.percolation
        .thresholds
        .iter()
        .flatten()
        .last()
        .map_or(f32::NEG_INFINITY, |t| t.energy)
}

/// Sites, orbits, hops, shortest hop (up to the highest threshold) of a network.
fn counts(n: &hopmap::network::Network, level: f32) -> (usize, usize, usize, f64) {
    let shortest = n
        .hops
        .iter()
        .filter(|h| h.saddle_energy <= level)
        .map(|h| h.length)
        .fold(f64::INFINITY, f64::min);
    (n.sites.len(), n.orbits.len(), n.hops.len(), shortest)
}

/// Persistence merging on every reference: sites, orbits and hops before (every grid minimum a
/// site) and after, printed; after merging, the only sites whose lowest minimum has a
/// persistence below the merge depth are those the merge kept apart on purpose (for the
/// percolation or the symmetry, counted by the merge), and the merged site graph passed its
/// own check. (The definition of persistence merging, network::merge; no outside value.)
#[test]
fn persistence_merging_leaves_only_deliberate_shallow_sites_on_every_reference() {
    let mut table = String::from(
        "file                         ion  minima  sites (before -> after)  orbits        hops          shortest hop up to E_top (A)  kept (perc./sym.)  network s\n",
    );
    let mut failures = Vec::new();
    for o in outcomes() {
        let a = &o.analysis;
        let net = a.network.as_ref().expect("the main job builds the network");
        let level = highest_threshold(a);
        let before = counts(&unmerged(a), level);
        let after = counts(net, level);
        let m = &net.merging;
        let seconds = a
            .timings
            .iter()
            .find(|t| t.0 == "site network")
            .map_or(f64::NAN, |t| t.1);
        table.push_str(&format!(
            "{:<28} {:<4} {:>6}  {:>5} -> {:<5}            {:>4} -> {:<4}  {:>5} -> {:<5}  {:>6.3} -> {:<6.3}              {:>3}/{:<3}          {:.3}\n",
            o.row.file,
            a.model.probe.element.symbol(),
            net.basins.minima.len(),
            before.0,
            after.0,
            before.1,
            after.1,
            before.2,
            after.2,
            before.3,
            after.3,
            m.kept_for_percolation,
            m.kept_for_symmetry,
            seconds,
        ));
        let shallow_left = net
            .sites
            .iter()
            .filter(|s| m.persistence[net.basins.label[s.voxel] as usize] < m.depth)
            .count();
        if m.fell_back
            || after.0 > before.0
            || shallow_left > m.kept_for_percolation + m.kept_for_symmetry
        {
            failures.push(format!(
                "{}: fell back {}, {} -> {} sites, {shallow_left} shallow sites left, {} + {} kept",
                o.row.file,
                m.fell_back,
                before.0,
                after.0,
                m.kept_for_percolation,
                m.kept_for_symmetry
            ));
        }
    }
    println!("{table}");
    assert!(failures.is_empty(), "{failures:#?}");
}

/// The analysis of one reference file (its first row).
fn outcome(file: &str) -> &'static Outcome {
    outcomes()
        .iter()
        .find(|o| o.row.file == file)
        .unwrap_or_else(|| panic!("references.csv has {file}"))
}

/// The hops up to `top` as steps out of each site: (hop index, site reached, its image).
fn steps_by_site(n: &hopmap::network::Network, top: f32) -> Vec<Vec<(usize, usize, [i32; 3])>> {
    let mut out = vec![Vec::new(); n.sites.len()];
    for (i, h) in n.hops.iter().enumerate() {
        if h.saddle_energy > top {
            continue;
        }
        out[h.from].push((i, h.to, h.image));
        out[h.to].push((i, h.from, h.image.map(|x| -x)));
    }
    out
}

/// Level of the lowest path from `from` to the image `image` of `to` that does not use hop
/// `skip` (the highest saddle along it, minimised), through `steps` and cells within two of the
/// start; infinite when there is none.
fn bypass_level(
    n: &hopmap::network::Network,
    steps: &[Vec<(usize, usize, [i32; 3])>],
    skip: usize,
    from: usize,
    to: usize,
    image: [i32; 3],
) -> f32 {
    use std::cmp::Reverse;
    use std::collections::{BinaryHeap, HashMap};
    let key = |e: f32| (e as f64 * 1e7).round() as i64;
    let mut best: HashMap<(usize, [i32; 3]), i64> = HashMap::new();
    let mut heap = BinaryHeap::new();
    heap.push(Reverse((i64::MIN, from, [0i32; 3])));
    while let Some(Reverse((level, s, cell))) = heap.pop() {
        if (s, cell) == (to, image) {
            return level as f32 / 1e7;
        }
        if best.get(&(s, cell)).is_some_and(|&b| b < level) {
            continue;
        }
        for &(i, t, d) in &steps[s] {
            if i == skip {
                continue;
            }
            let c = [cell[0] + d[0], cell[1] + d[1], cell[2] + d[2]];
            if c.iter().any(|x| x.abs() > 2) {
                continue;
            }
            let l = level.max(key(n.hops[i].saddle_energy));
            if best.get(&(t, c)).is_none_or(|&b| l < b) {
                best.insert((t, c), l);
                heap.push(Reverse((l, t, c)));
            }
        }
    }
    f32::INFINITY
}

/// A hop seen from one end: the other end's orbit, the length (A) and the saddle (eV).
type HopView = (usize, f64, f32);

/// The hops of `site` up to `top`, split into *direct* ones (every other path between the two
/// ends is higher by more than the grid noise) and the others that are not clearly bypassed
/// (no other path lower by more than the noise). Hops that are clearly bypassed are contacts of
/// two basins along a ridge far above the way round: whether the grid gives them a face in
/// common is a matter of rounding.
fn hop_views(
    n: &hopmap::network::Network,
    steps: &[Vec<(usize, usize, [i32; 3])>],
    site: usize,
    top: f32,
) -> (Vec<HopView>, Vec<HopView>) {
    let (mut direct, mut open) = (Vec::new(), Vec::new());
    for (i, h) in n.hops.iter().enumerate() {
        if h.saddle_energy > top || (h.from != site && h.to != site) {
            continue;
        }
        let other = if h.from == site { h.to } else { h.from };
        let view = (n.sites[other].orbit, h.length, h.saddle_energy);
        let alt = bypass_level(n, steps, i, h.from, h.to, h.image);
        if alt > h.saddle_energy + GRID_NOISE_EV {
            direct.push(view);
        }
        if alt >= h.saddle_energy - GRID_NOISE_EV {
            open.push(view);
        }
    }
    (direct, open)
}

/// Every hop of `direct` has its own counterpart in `open` (same orbit, length within 0.1 A,
/// saddle within the grid noise).
fn all_matched(direct: &[HopView], open: &[HopView]) -> bool {
    let mut used = vec![false; open.len()];
    direct.iter().all(|d| {
        let hit = open
            .iter()
            .enumerate()
            .filter(|(k, o)| {
                !used[*k]
                    && o.0 == d.0
                    && (o.1 - d.1).abs() < 0.1
                    && (o.2 - d.2).abs() <= GRID_NOISE_EV
            })
            .min_by(|x, y| (x.1.2 - d.2).abs().total_cmp(&(y.1.2 - d.2).abs()))
            .map(|(k, _)| k);
        hit.map(|k| used[k] = true).is_some()
    })
}

/// Symmetry of the merged sites, on the two structures with the most minima: olivine LiFePO4
/// (Pnma) and the TiNb2O7 block oxide (C2/m). Equivalent minima must merge the same way, so
/// every orbit is complete (each operation maps each member onto a member), its members have
/// equal energies and equal hops (within the grid noise). Hops are compared among those not
/// bypassed by a lower path, see [`hop_views`].
#[test]
fn merged_sites_form_complete_orbits_with_equal_energies_and_hops() {
    let mut failures = Vec::new();
    for file in ["LiFePO4_olivine.cif", "TiNb2O7_block.cif"] {
        let a = &outcome(file).analysis;
        let net = a.network.as_ref().unwrap();
        let top = highest_threshold(a) + GRID_NOISE_EV;
        let steps = steps_by_site(net, top);
        for (oi, orbit) in net.orbits.iter().enumerate() {
            if !orbit.complete || orbit.energy_spread > GRID_NOISE_EV {
                failures.push(format!(
                    "{file}: orbit {oi} complete {} spread {:.4} eV",
                    orbit.complete, orbit.energy_spread
                ));
            }
            let views: Vec<_> = orbit
                .sites
                .iter()
                .map(|&s| hop_views(net, &steps, s, top))
                .collect();
            for (k, v) in views.iter().enumerate().skip(1) {
                if !all_matched(&views[0].0, &v.1) || !all_matched(&v.0, &views[0].1) {
                    failures.push(format!(
                        "{file}: orbit {oi}: site {} has direct hops {:?}, site {} {:?}",
                        orbit.sites[0], views[0].0, orbit.sites[k], v.0
                    ));
                }
            }
        }
        println!(
            "{file}: {} sites in {} orbits (multiplicities {:?})",
            net.sites.len(),
            net.orbits.len(),
            net.orbits
                .iter()
                .map(|o| o.multiplicity)
                .collect::<Vec<_>>()
        );
    }
    assert!(failures.is_empty(), "{failures:#?}");
}

/// Olivine LiFePO4 (Pnma, the file's cell a = 10.33, b = 6.01, c = 4.69 A): Li sits on the 4a
/// position (0, 0, 0) with its three equivalents, the M1 chains along b (published
/// crystallography, the structure source in references.csv). The lowest site of the map must be
/// that site, with that orbit; and the step from it to the next Li site along the chain, at
/// the channel's threshold E_1D, must be b/2 = 3.005 A long. The map takes that step through
/// at most two interstitials between the two Li sites: the curved path between M1 sites of the
/// field (Islam et al., Chem. Mater. 17 (2005) 5085; from memory) passes a tetrahedral hollow,
/// here one or two shallow minima above the Li site.
#[test]
fn the_olivine_lithium_site_is_4a_and_its_step_along_the_chain_is_half_b() {
    let a = &outcome("LiFePO4_olivine.cif").analysis;
    let net = a.network.as_ref().unwrap();
    let lattice = &a.structure.lattice;
    let li = &net.sites[0];
    assert_eq!(li.label.as_deref(), Some("Li1"));
    let orbit = &net.orbits[li.orbit];
    assert_eq!(orbit.multiplicity, 4, "{orbit:?}");
    let origin = hopmap::lattice::Frac::new(0.0, 0.0, 0.0);
    let at_origin = orbit
        .sites
        .iter()
        .find(|&&s| lattice.periodic_distance(net.sites[s].frac, origin) < 0.1)
        .copied()
        .expect("an Li site at (0, 0, 0)");
    // breadth-first over hops open at E_1D, through at most one intermediate site, to the
    // nearest Li site displaced along b
    // open at E_1D: symmetry-equivalent saddles of the f32 grid agree within the kernel's
    // tested 1e-5 (`profile::TIE_TOLERANCE`), not to the last bit
    let e1 = a.percolation.energy(1).unwrap();
    let e1_open = e1 + hopmap::network::profile::TIE_TOLERANCE * e1.abs().max(1.0);
    let b = lattice.frac_delta_length(nalgebra::Vector3::new(0.0, 1.0, 0.0));
    let mut best: Option<(f64, usize)> = None;
    let steps = |s: usize| {
        net.hops
            .iter()
            .filter(move |h| h.saddle_energy <= e1_open && (h.from == s || h.to == s))
            .map(move |h| {
                if h.from == s {
                    (h.to, h.image.map(|x| x as f64))
                } else {
                    (h.from, h.image.map(|x| -x as f64))
                }
            })
    };
    let p0 = net.sites[at_origin].frac.0;
    // walks of up to three hops: Li, up to two interstitials, Li
    let mut walks: Vec<(usize, [f64; 3], usize)> = vec![(at_origin, [0.0; 3], 0)];
    let mut frontier = walks.clone();
    for depth in 0..3 {
        let mut next = Vec::new();
        for &(s0, c0, _) in &frontier {
            if depth > 0 && net.sites[s0].orbit == li.orbit {
                continue;
            }
            for (s1, c1) in steps(s0) {
                next.push((s1, [c0[0] + c1[0], c0[1] + c1[1], c0[2] + c1[2]], depth));
            }
        }
        walks.extend(next.iter().copied());
        frontier = next;
    }
    {
        for (s, c, between) in walks {
            if net.sites[s].orbit != li.orbit {
                continue;
            }
            let d = net.sites[s].frac.0 + nalgebra::Vector3::new(c[0], c[1], c[2]) - p0;
            let len = lattice.frac_delta_length(d);
            // displaced along b: the b component carries the whole step
            let along_b = (d.y.abs() * b - len).abs() < 0.3;
            if len > 0.1 && along_b && best.is_none_or(|(l, _)| len < l) {
                best = Some((len, between));
            }
        }
    }
    let (len, between) = best.expect("a step along b to the next Li site at E_1D");
    println!("Li-Li step along b: {len:.3} A, through {between} intermediate site(s)");
    assert!((2.9..=3.1).contains(&len), "{len:.3} A");
    assert!((b / 2.0 - len).abs() < 0.05);
}
