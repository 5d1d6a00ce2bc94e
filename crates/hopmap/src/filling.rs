//! The filling study of one analysis: transport against filling by kinetic Monte Carlo
//! ([`crate::kmc`]) and the cost of blocked channels per channel family ([`crate::blocking`]),
//! gathered into one plain [`FillStudy`] that the renderers read.

use crate::analysis::{self, Analysis};
use crate::blocking::{self, ParticleLimit};
use crate::kmc::{self, Estimate, FillPoint, HopNetwork, KmcOptions};

/// How the fillings are given.
#[derive(Debug, Clone, PartialEq)]
pub enum Fillings {
    /// Mobile ions per formula unit.
    PerFormulaUnit(Vec<f64>),
    /// Ions per site of the network (0-1).
    SiteFraction(Vec<f64>),
}

/// Options of the study.
#[derive(Debug, Clone, PartialEq)]
pub struct FillOptions {
    pub kmc: KmcOptions,
    pub fillings: Fillings,
    /// Defect fractions of the blocking tables.
    pub defect_fractions: Vec<f64>,
    /// Share of the capacity a particle must keep reachable.
    pub share: f64,
    /// Particle diameter of the share table, A.
    pub particle_diameter_a: f64,
    /// Largest particle simulated site by site, A.
    pub max_diameter_a: f64,
    /// A channel family takes the hops up to this much above its threshold, eV (hops a few kT
    /// dearer are still taken at room temperature).
    pub family_slack_ev: f64,
    /// Skip the blocking tables.
    pub skip_blocking: bool,
}

impl Default for FillOptions {
    fn default() -> Self {
        FillOptions {
            kmc: KmcOptions::default(),
            fillings: Fillings::PerFormulaUnit((1..=20).map(|i| i as f64 * 0.1).collect()),
            defect_fractions: blocking::DEFAULT_DEFECT_FRACTIONS.to_vec(),
            share: blocking::DEFAULT_SHARE,
            particle_diameter_a: 200.0,
            max_diameter_a: 300.0,
            family_slack_ev: 0.1,
            skip_blocking: false,
        }
    }
}

/// One filling of the curve.
#[derive(Debug, Clone, PartialEq)]
pub struct FillRow {
    /// Ions per formula unit.
    pub x_per_formula_unit: f64,
    /// Ions per site of the network.
    pub site_fraction: f64,
    /// The KMC result, or why this filling could not be made (e.g. more ions than fit).
    pub result: Result<FillPoint, String>,
}

/// One defect fraction of a family's blocking table.
#[derive(Debug, Clone, PartialEq)]
pub struct BlockingRow {
    pub defect_fraction: f64,
    /// Largest spherical particle keeping the share, simulated on the family's network.
    pub limit: ParticleLimit,
    /// For a single-file family: the largest sphere by the exact channel law averaged over its
    /// chords, A.
    pub law_limit_a: Option<f64>,
    /// Mean capacity share of particles of the table's diameter (simulated).
    pub share_at_particle: Estimate,
    /// For a single-file family: the same share by the channel law.
    pub share_law: Option<f64>,
}

/// A channel family: the hops open at one distinct threshold (plus the slack).
#[derive(Debug, Clone, PartialEq)]
pub struct FamilyBlocking {
    pub dimension: u8,
    pub barrier_ev: f64,
    pub threshold_ev: f64,
    pub sites_per_cell: usize,
    pub hops_per_cell: usize,
    /// Mean hop length of the family, A.
    pub spacing_a: f64,
    /// Every site of the family has exactly two hops: isolated straight channels, where ions
    /// move in single file and the exact 1D law applies.
    pub single_file: bool,
    pub rows: Vec<BlockingRow>,
}

/// Everything the filling study found.
#[derive(Debug, Clone, PartialEq)]
pub struct FillStudy {
    pub ion: String,
    pub charge: f64,
    pub formula: String,
    pub z: f64,
    /// Dimension `d` of the channel network the attempt frequency is shared over.
    pub dimension: u8,
    pub sites_per_cell: usize,
    pub hops_per_cell: usize,
    pub sites_per_formula_unit: f64,
    pub repeats: [usize; 3],
    pub options: FillOptions,
    pub rows: Vec<FillRow>,
    /// The analysis's hopping-model D of the first channel network (the dilute limit), m^2/s.
    pub dilute_reference_m2_s: Option<f64>,
    pub families: Vec<FamilyBlocking>,
    /// Cautions for every rendering.
    pub notes: Vec<String>,
}

/// Why a study cannot be made.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum FillError {
    #[error("the analysis found no site network (run without --percolation-only)")]
    NoNetwork,
    #[error("no channel network percolates below the ceiling, so there is no transport to fill")]
    NoChannels,
    #[error("{0}")]
    Kmc(#[from] kmc::KmcError),
}

/// Hops whose lower barrier exceeds the channel barrier by more than this many kT are left out
/// of the KMC network: at 20 kT they are 2e9 times slower than the channel's hops.
pub const SKIP_HOP_KT: f64 = 20.0;

/// Single-file caution for 1D networks.
pub const SINGLE_FILE_NOTE: &str = "In one-dimensional channels ions cannot pass each other: the \
    tracer's mean-square displacement grows as the square root of time, so its D falls with the \
    length of the run and of the channel; the values are for the run time shown.";

/// Caution on the model.
pub const KMC_CAUTION: &str = "Kinetic Monte Carlo on the bond-valence site network: barriers \
    from a static empirical landscape, repulsion from a screened Coulomb knob, no relaxation of \
    the host. Error bars are the statistical errors of independent runs only; the barrier \
    uncertainty of the model (about 0.15 eV) moves D by orders of magnitude. Screening \
    estimates, not cell design.";

/// Runs the study on the network of `a`.
pub fn study(a: &Analysis, opts: &FillOptions) -> Result<FillStudy, FillError> {
    let net = a.network.as_ref().ok_or(FillError::NoNetwork)?;
    let distinct = analysis::distinct_thresholds(&a.percolation);
    let first = distinct.first().ok_or(FillError::NoChannels)?;
    let lattice = &a.structure.lattice;
    let mut hops = HopNetwork::from_network(net, lattice, f64::INFINITY, first.dimension);
    // hops dearer than the channel's barrier by more than SKIP_HOP_KT kT both ways never fire
    // within a run
    let kt = crate::transport::BOLTZMANN_EV_PER_K * opts.kmc.temperature_k;
    let dearest = first.barrier as f64 + SKIP_HOP_KT * kt;
    hops.hops.retain(|h| {
        let e_from = hops.sites[h.from].energy_ev;
        let e_to = hops.sites[h.to].energy_ev;
        h.saddle_ev - e_from.max(e_to) <= dearest
    });
    let (z, formula) = a.structure.formula_and_z();
    let sites = hops.sites.len();
    let sites_per_fu = sites as f64 / z;
    let ions_per_cell: Vec<(f64, f64)> = match &opts.fillings {
        Fillings::PerFormulaUnit(xs) => xs.iter().map(|&x| (x, x * z)).collect(),
        Fillings::SiteFraction(fs) => fs
            .iter()
            .map(|&f| (f * sites_per_fu, f * sites as f64))
            .collect(),
    };
    let mut kopts = opts.kmc.clone();
    kopts.charge = a.model.probe.valence.abs().max(1.0);
    let per_cell: Vec<f64> = ions_per_cell.iter().map(|p| p.1).collect();
    let curve = kmc::fill_curve(&hops, &per_cell, &kopts);
    let probe_ions = kmc::supercell_ions(&hops, 1.0, &kopts);
    let repeats = {
        let cells = probe_ions;
        // the supercell the runs used (ions per cell 1 gives the number of cells)
        let widths = lattice.perpendicular_widths();
        let cutoff = kopts.repulsion.map(|r| r.cutoff_a).unwrap_or(0.0);
        let w = kopts
            .min_supercell_a
            .max(2.0 * cutoff.max(kopts.exclusion_a) + 1e-6);
        let r = [0, 1, 2].map(|k| ((w / widths[k]).ceil() as usize).max(3));
        debug_assert_eq!(r[0] * r[1] * r[2], cells);
        r
    };
    let rows = ions_per_cell
        .iter()
        .zip(curve)
        .map(|(&(x, per_cell), r)| FillRow {
            x_per_formula_unit: x,
            site_fraction: per_cell / sites as f64,
            result: r.map_err(|e| e.to_string()),
        })
        .collect();
    let dilute_reference_m2_s = a
        .transport
        .iter()
        .find(|t| t.dimension == first.dimension && t.model.is_some())
        .map(|t| t.diffusion_m2_s);
    let families = if opts.skip_blocking {
        vec![]
    } else {
        distinct
            .iter()
            .filter_map(|t| {
                let level = t.energy as f64 + opts.family_slack_ev;
                let fam =
                    HopNetwork::from_network(net, lattice, level, t.dimension).connected_part();
                if fam.hops.is_empty() {
                    return None;
                }
                Some(family_blocking(
                    &fam,
                    t.dimension,
                    t.barrier as f64,
                    t.energy as f64,
                    opts,
                ))
            })
            .collect()
    };
    let mut notes = vec![KMC_CAUTION.to_string()];
    // single file: the first family's sites each have exactly two hops
    let first_family = HopNetwork::from_network(
        net,
        lattice,
        first.energy as f64 + opts.family_slack_ev,
        first.dimension,
    )
    .connected_part();
    let mut degree = vec![0usize; first_family.sites.len()];
    for h in &first_family.hops {
        degree[h.from] += 1;
        degree[h.to] += 1;
    }
    if first.dimension == 1 && degree.iter().all(|&d| d == 2) {
        notes.push(SINGLE_FILE_NOTE.to_string());
    }
    Ok(FillStudy {
        ion: a.ion.symbol().to_string(),
        charge: kopts.charge,
        formula,
        z,
        dimension: first.dimension,
        sites_per_cell: sites,
        hops_per_cell: hops.hops.len(),
        sites_per_formula_unit: sites_per_fu,
        repeats,
        options: FillOptions {
            kmc: kopts,
            ..opts.clone()
        },
        rows,
        dilute_reference_m2_s,
        families,
        notes,
    })
}

fn family_blocking(
    fam: &HopNetwork,
    dimension: u8,
    barrier_ev: f64,
    threshold_ev: f64,
    opts: &FillOptions,
) -> FamilyBlocking {
    let spacing = fam
        .hops
        .iter()
        .map(|h| fam.hop_vector(h).norm())
        .sum::<f64>()
        / fam.hops.len() as f64;
    let seed = opts.kmc.seed;
    let mut degree = vec![0usize; fam.sites.len()];
    for h in &fam.hops {
        degree[h.from] += 1;
        degree[h.to] += 1;
    }
    let single_file = dimension == 1 && degree.iter().all(|&d| d == 2);
    let rows = opts
        .defect_fractions
        .iter()
        .enumerate()
        .map(|(i, &p)| {
            let s = kmc::stream_seed(seed, 1000 + i as u64);
            let limit = blocking::largest_particle(fam, p, opts.share, opts.max_diameter_a, s);
            let share_at_particle =
                blocking::particle_share(fam, opts.particle_diameter_a, p, 20_000, s ^ 1);
            let (law_limit_a, share_law) = if single_file {
                (
                    sphere_law_limit(spacing, p, opts.share),
                    Some(blocking::sphere_chain_share(
                        opts.particle_diameter_a,
                        spacing,
                        p,
                    )),
                )
            } else {
                (None, None)
            };
            BlockingRow {
                defect_fraction: p,
                limit,
                law_limit_a,
                share_at_particle,
                share_law,
            }
        })
        .collect();
    FamilyBlocking {
        dimension,
        barrier_ev,
        threshold_ev,
        sites_per_cell: fam.sites.len(),
        hops_per_cell: fam.hops.len(),
        spacing_a: spacing,
        single_file,
        rows,
    }
}

/// The largest sphere (A) whose chords keep `share` by the channel law.
fn sphere_law_limit(spacing: f64, p: f64, share: f64) -> Option<f64> {
    let n = blocking::longest_chain(p, share)?;
    // the sphere keeps more than its longest chord: search upwards from the channel length
    let (mut lo, mut hi) = (spacing * n as f64, spacing * n as f64 * 4.0);
    if blocking::sphere_chain_share(hi, spacing, p) >= share {
        return Some(hi);
    }
    for _ in 0..40 {
        let mid = 0.5 * (lo + hi);
        if blocking::sphere_chain_share(mid, spacing, p) >= share {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    Some(lo)
}
