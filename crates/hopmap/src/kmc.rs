//! Kinetic Monte Carlo of many mobile ions on the site-and-hop network: transport as the host
//! fills.
//!
//! The static analysis describes one ion in an empty host. Here many ions share the physical
//! site network ([`crate::network`]): an ion hops only to a free site, two ions closer than the
//! exclusion distance never both sit, and mobile ions repel each other by a screened Coulomb
//! term. The walk is rejection-free (the residence-time algorithm of Bortz, Kalos and Lebowitz,
//! J. Comput. Phys. 17 (1975) 10): every event is a hop, chosen with probability proportional to
//! its rate, and time advances by an exponential waiting time of the total rate.
//!
//! Rates. A hop from site `i` over the saddle `S` to site `j` costs the barrier `S - E_i` of the
//! landscape, shifted by half the change `dU` of the ions' repulsion (the kinetically resolved
//! barrier, common practice in lattice KMC), and never less than the net energy change nor less
//! than zero, so detailed balance holds exactly:
//!
//! `Eb = max(S - E_i + dU / 2, E_j - E_i + dU, 0)`, `k = nu0 / (2 d) exp(-Eb / kB T)`.
//!
//! The attempt frequency `nu0` is the ion's, shared over the `2 d` directions of a
//! `d`-dimensional channel network: the convention of the hopping model
//! ([`crate::transport::HoppingModel`], `D = a^2 nu0 exp(-Ea / kB T) / (2 d)`), so that one ion
//! alone on a chain of equal sites has exactly the hopping-model D.
//!
//! Repulsion between mobile ions of charge `q` (e): `U(r) = 14.3996 q^2 / (eps_r r) exp(-r /
//! lambda)` eV (r in A), shifted to zero at the cut-off. The defaults ([`Repulsion::default`])
//! are model choices, not fits: a static relative permittivity of 10, the order of that of
//! transition-metal oxides (common practice), and a screening length of 3 A, about one ion-ion
//! spacing, cut off at 2.5 screening lengths.
//!
//! Outputs per run (measured after a warm-up): the tracer mean-square displacement tensor, from
//! which the tracer diffusion tensor `D_ab = <dr_a dr_b> / (2 t)`; the tracer correlation factor
//! `f = <|R|^2> / <sum of squared hop lengths>` (the ratio of the tracer's mean-square
//! displacement to that of an uncorrelated walk making the same hops); optional samples of the
//! mean-square displacement against time. [`fill_point`] runs independent walks in parallel
//! (rayon) from seeds derived from one seed, and reports means with standard errors over runs.
//! Results are reproducible: the same seed gives the same numbers on any number of threads.

use crate::lattice::{Frac, Lattice};
use crate::network::Network;
use crate::transport;
use nalgebra::{Matrix3, SymmetricEigen, Vector3};
use rand_xoshiro::Xoshiro256PlusPlus;
use rand_xoshiro::rand_core::{RngCore, SeedableRng};
use rayon::prelude::*;

/// Coulomb constant e^2 / (4 pi eps0), eV A (CODATA 2018).
pub const COULOMB_EV_A: f64 = 14.399_645;

/// Hops of one ion over which [`RunResult::correlation_factor_from_hops`] sums correlations.
pub const CORRELATION_WINDOW: usize = 32;

/// Default number of independent runs per filling.
pub const DEFAULT_RUNS: usize = 8;

/// A site of a KMC network.
#[derive(Debug, Clone, PartialEq)]
pub struct NetSite {
    pub frac: Frac,
    /// Site energy, eV.
    pub energy_ev: f64,
    pub label: Option<String>,
}

/// A hop between two sites of a KMC network, usable both ways: from `sites[from].frac` to
/// `sites[to].frac + image`.
#[derive(Debug, Clone, PartialEq)]
pub struct NetHop {
    pub from: usize,
    pub to: usize,
    pub image: [i32; 3],
    /// Saddle energy, eV.
    pub saddle_ev: f64,
}

/// The periodic site-and-hop network the ions walk on: one unit cell of sites and hops.
#[derive(Debug, Clone, PartialEq)]
pub struct HopNetwork {
    pub lattice: Lattice,
    pub sites: Vec<NetSite>,
    pub hops: Vec<NetHop>,
    /// Dimension `d` of the channel network (1, 2 or 3): the attempt frequency is shared over
    /// `2 d` directions (see the module notes).
    pub dimension: u8,
}

impl HopNetwork {
    /// The network of the analysis: every site, and every hop whose saddle is at or below
    /// `max_saddle_ev` (eV; use infinity for all of them).
    pub fn from_network(
        net: &Network,
        lattice: &Lattice,
        max_saddle_ev: f64,
        dimension: u8,
    ) -> HopNetwork {
        let sites = net
            .sites
            .iter()
            .map(|s| NetSite {
                frac: s.frac,
                energy_ev: s.energy as f64,
                label: s.label.clone(),
            })
            .collect();
        let hops = net
            .hops
            .iter()
            .filter(|h| (h.saddle_energy as f64) <= max_saddle_ev && h.saddle_energy.is_finite())
            .map(|h| NetHop {
                from: h.from,
                to: h.to,
                image: h.image,
                saddle_ev: h.saddle_energy as f64,
            })
            .collect();
        HopNetwork {
            lattice: lattice.clone(),
            sites,
            hops,
            dimension: dimension.clamp(1, 3),
        }
    }

    /// Keeps only the sites touched by some hop (renumbered), e.g. after a filter on hops.
    pub fn connected_part(&self) -> HopNetwork {
        let mut keep = vec![usize::MAX; self.sites.len()];
        let mut sites = Vec::new();
        for h in &self.hops {
            for s in [h.from, h.to] {
                if keep[s] == usize::MAX {
                    keep[s] = sites.len();
                    sites.push(self.sites[s].clone());
                }
            }
        }
        HopNetwork {
            lattice: self.lattice.clone(),
            sites,
            hops: self
                .hops
                .iter()
                .map(|h| NetHop {
                    from: keep[h.from],
                    to: keep[h.to],
                    ..h.clone()
                })
                .collect(),
            dimension: self.dimension,
        }
    }

    /// Cartesian vector of a hop (A).
    pub fn hop_vector(&self, h: &NetHop) -> Vector3<f64> {
        let im = Vector3::new(h.image[0] as f64, h.image[1] as f64, h.image[2] as f64);
        self.lattice.matrix() * (self.sites[h.to].frac.0 + im - self.sites[h.from].frac.0)
    }

    /// Exact toy lattices of equal sites and equal barriers (`barrier_ev`) between nearest
    /// neighbours, in a cubic cell of edge `a` (A).
    pub fn cubic(kind: CubicLattice, a: f64, barrier_ev: f64) -> HopNetwork {
        let basis: Vec<[f64; 3]> = match kind {
            CubicLattice::Simple => vec![[0.0; 3]],
            CubicLattice::BodyCentred => vec![[0.0; 3], [0.5; 3]],
            CubicLattice::FaceCentred => {
                vec![[0.0; 3], [0.5, 0.5, 0.0], [0.5, 0.0, 0.5], [0.0, 0.5, 0.5]]
            }
        };
        let lattice = Lattice::from_vectors([a, 0.0, 0.0], [0.0, a, 0.0], [0.0, 0.0, a])
            .expect("a cubic cell is a lattice");
        let sites: Vec<NetSite> = basis
            .iter()
            .map(|f| NetSite {
                frac: Frac::new(f[0], f[1], f[2]),
                energy_ev: 0.0,
                label: None,
            })
            .collect();
        let nn = match kind {
            CubicLattice::Simple => a,
            CubicLattice::BodyCentred => a * 3f64.sqrt() / 2.0,
            CubicLattice::FaceCentred => a / 2f64.sqrt(),
        };
        let mut hops = Vec::new();
        for (i, si) in sites.iter().enumerate() {
            for (j, sj) in sites.iter().enumerate() {
                for x in -1..=1 {
                    for y in -1..=1 {
                        for z in -1..=1 {
                            let im = [x, y, z];
                            let d =
                                sj.frac.0 + Vector3::new(x as f64, y as f64, z as f64) - si.frac.0;
                            let len = (d * a).norm();
                            // each undirected hop once
                            let forward = (j, im) > (i, [0, 0, 0]);
                            if (len - nn).abs() < 1e-6 && forward {
                                hops.push(NetHop {
                                    from: i,
                                    to: j,
                                    image: im,
                                    saddle_ev: barrier_ev,
                                });
                            }
                        }
                    }
                }
            }
        }
        HopNetwork {
            lattice,
            sites,
            hops,
            dimension: 3,
        }
    }

    /// A 1D chain of equal sites `spacing_a` apart along x, with the chains `width_a` apart
    /// (no hops between them), barrier `barrier_ev`.
    pub fn chain(spacing_a: f64, width_a: f64, barrier_ev: f64) -> HopNetwork {
        let lattice = Lattice::from_vectors(
            [spacing_a, 0.0, 0.0],
            [0.0, width_a, 0.0],
            [0.0, 0.0, width_a],
        )
        .expect("an orthogonal cell is a lattice");
        HopNetwork {
            lattice,
            sites: vec![NetSite {
                frac: Frac::new(0.0, 0.0, 0.0),
                energy_ev: 0.0,
                label: None,
            }],
            hops: vec![NetHop {
                from: 0,
                to: 0,
                image: [1, 0, 0],
                saddle_ev: barrier_ev,
            }],
            dimension: 1,
        }
    }
}

/// The three cubic Bravais lattices.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum CubicLattice {
    Simple,
    BodyCentred,
    FaceCentred,
}

/// Screened Coulomb repulsion between mobile ions (see the module notes).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Repulsion {
    pub relative_permittivity: f64,
    pub screening_length_a: f64,
    /// Pairs farther apart than this (A) do not interact; the potential is shifted to zero here.
    pub cutoff_a: f64,
}

impl Default for Repulsion {
    fn default() -> Self {
        Repulsion {
            relative_permittivity: 10.0,
            screening_length_a: 3.0,
            cutoff_a: 7.5,
        }
    }
}

impl Repulsion {
    fn raw(&self, r: f64, charge: f64) -> f64 {
        COULOMB_EV_A * charge * charge / (self.relative_permittivity * r)
            * (-r / self.screening_length_a).exp()
    }
    /// Pair energy at distance `r` (A) of two ions of charge number `charge`, eV.
    pub fn energy_ev(&self, r: f64, charge: f64) -> f64 {
        if r >= self.cutoff_a || r <= 0.0 {
            0.0
        } else {
            self.raw(r, charge) - self.raw(self.cutoff_a, charge)
        }
    }
}

/// How long a run lasts after its warm-up.
#[derive(Debug, Clone, PartialEq)]
pub enum RunLength {
    /// Until the ions have made this many hops each on average (or `max_events` is reached).
    HopsPerIon(f64),
    /// Until this simulated time, s.
    Time(f64),
}

/// Settings of a KMC run.
#[derive(Debug, Clone, PartialEq)]
pub struct KmcOptions {
    pub temperature_k: f64,
    /// Attempt frequency of the ion, Hz (shared over `2 d` directions).
    pub attempt_frequency_hz: f64,
    /// Two ions closer than this (A) never both sit; 0 allows any pair of distinct sites.
    pub exclusion_a: f64,
    /// None: no repulsion between mobile ions.
    pub repulsion: Option<Repulsion>,
    /// Charge number of the mobile ion (1 for Li+, 2 for Mg2+).
    pub charge: f64,
    pub runs: usize,
    pub seed: u64,
    /// Warm-up before measuring, in hops per ion.
    pub warmup_hops_per_ion: f64,
    pub length: RunLength,
    /// Upper bound on the events of one run's measurement (and of its warm-up).
    pub max_events: u64,
    /// Each side of the supercell is at least this wide (A).
    pub min_supercell_a: f64,
    /// Times (s) at which to record the mean-square displacement.
    pub sample_times_s: Vec<f64>,
}

impl Default for KmcOptions {
    fn default() -> Self {
        KmcOptions {
            temperature_k: transport::ROOM_TEMPERATURE_K,
            attempt_frequency_hz: transport::DEFAULT_ATTEMPT_FREQUENCY_HZ,
            exclusion_a: crate::capacity::DEFAULT_MIN_LI_LI_DISTANCE_A,
            repulsion: Some(Repulsion::default()),
            charge: 1.0,
            runs: DEFAULT_RUNS,
            seed: 1,
            warmup_hops_per_ion: 20.0,
            length: RunLength::HopsPerIon(100.0),
            max_events: 3_000_000,
            min_supercell_a: 18.0,
            sample_times_s: vec![],
        }
    }
}

/// Why a KMC run cannot be made.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum KmcError {
    #[error("the network has no sites")]
    NoSites,
    #[error("bad KMC setting {name} = {value}: {why}")]
    BadSetting {
        name: &'static str,
        value: f64,
        why: &'static str,
    },
    #[error(
        "only {placed} of {wanted} ions fit in the {sites}-site supercell with ions at least {exclusion_a} A apart"
    )]
    TooFull {
        wanted: usize,
        placed: usize,
        sites: usize,
        exclusion_a: f64,
    },
}

/// The mean-square displacement at one time.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct MsdSample {
    pub time_s: f64,
    /// Mean over ions of dx^2, dy^2, dz^2, A^2.
    pub msd_a2: [f64; 3],
}

/// What one run measured.
#[derive(Debug, Clone, PartialEq)]
pub struct RunResult {
    pub ions: usize,
    pub sites: usize,
    /// Supercell repeats along a, b, c.
    pub repeats: [usize; 3],
    /// Measured time, s (0 when no hop was possible).
    pub time_s: f64,
    pub events: u64,
    /// Mean over ions of the displacement dyad, A^2.
    pub msd_a2: Matrix3<f64>,
    /// Mean over ions of the summed squared hop vectors, A^2.
    pub hop_sq_a2: f64,
    /// Mean over ions of the summed products `d_i . d_j` of hops of the same ion at most
    /// [`CORRELATION_WINDOW`] hops apart (i < j), A^2.
    pub hop_cross_a2: f64,
    /// True when no hop was possible at all (every ion blocked).
    pub frozen: bool,
    pub samples: Vec<MsdSample>,
}

impl RunResult {
    /// Tracer diffusion tensor, m^2/s.
    pub fn diffusion_m2_s(&self) -> Matrix3<f64> {
        if self.time_s > 0.0 {
            self.msd_a2 * (1e-20 / (2.0 * self.time_s))
        } else {
            Matrix3::zeros()
        }
    }
    /// Tracer correlation factor from the displacements, `<|R|^2> / <sum |d|^2>`; None without
    /// hops. It includes every correlation over the run (in a single-file channel it falls
    /// with the length of the run).
    pub fn correlation_factor(&self) -> Option<f64> {
        (self.hop_sq_a2 > 0.0).then(|| self.msd_a2.trace() / self.hop_sq_a2)
    }
    /// Tracer correlation factor from the hop sequence, `1 + 2 sum_k <d_i . d_(i+k)> / <|d|^2>`
    /// over the `k <= CORRELATION_WINDOW` following hops of the same ion (the definition of
    /// Compaan and Haven); a low-variance estimate when correlations die out within the window.
    pub fn correlation_factor_from_hops(&self) -> Option<f64> {
        (self.hop_sq_a2 > 0.0).then(|| 1.0 + 2.0 * self.hop_cross_a2 / self.hop_sq_a2)
    }
}

/// A mean with its standard error over independent runs.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Estimate {
    pub mean: f64,
    /// Standard error of the mean (sample standard deviation / sqrt(runs)); 0 for one run.
    pub stderr: f64,
}

impl Estimate {
    pub fn of(values: &[f64]) -> Estimate {
        let n = values.len();
        if n == 0 {
            return Estimate {
                mean: f64::NAN,
                stderr: f64::NAN,
            };
        }
        let mean = values.iter().sum::<f64>() / n as f64;
        let stderr = if n > 1 {
            let var = values.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (n - 1) as f64;
            (var / n as f64).sqrt()
        } else {
            0.0
        };
        Estimate { mean, stderr }
    }
}

/// Transport at one filling, from independent runs.
#[derive(Debug, Clone, PartialEq)]
pub struct FillPoint {
    /// Mobile ions per unit cell.
    pub ions_per_cell: f64,
    /// Ions per site of the network.
    pub site_fraction: f64,
    pub runs: Vec<RunResult>,
    /// Tracer D along x, y, z (Cartesian axes of the cell: a along x, b in the xy plane), m^2/s.
    pub diffusion_axes_m2_s: [Estimate; 3],
    /// Tracer D along the principal direction of fastest transport, m^2/s.
    pub diffusion_m2_s: Estimate,
    /// That direction (unit Cartesian vector).
    pub direction: [f64; 3],
    /// Tracer correlation factor (all directions).
    pub correlation_factor: Estimate,
    /// Nernst-Einstein conductivity from the tracer D along the fast direction (Haven ratio 1),
    /// S/cm.
    pub conductivity_s_cm: Estimate,
    /// Carriers per m^3 at this filling.
    pub carriers_per_m3: f64,
    /// Mean measured time per run, s.
    pub time_s: f64,
    /// Events per run (mean).
    pub events: f64,
}

/// Splits a seed into independent stream seeds (SplitMix64 finaliser, Steele, Lea and Flood,
/// OOPSLA 2014).
pub fn stream_seed(seed: u64, stream: u64) -> u64 {
    let mut z = seed.wrapping_add(0x9E37_79B9_7F4A_7C15u64.wrapping_mul(stream.wrapping_add(1)));
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}

fn check(opts: &KmcOptions) -> Result<(), KmcError> {
    let bad = |name, value, why| Err(KmcError::BadSetting { name, value, why });
    if !(opts.temperature_k.is_finite() && opts.temperature_k > 0.0) {
        return bad("temperature (K)", opts.temperature_k, "must be positive");
    }
    if !(opts.attempt_frequency_hz.is_finite() && opts.attempt_frequency_hz > 0.0) {
        return bad(
            "attempt frequency (Hz)",
            opts.attempt_frequency_hz,
            "must be positive",
        );
    }
    if !(opts.exclusion_a.is_finite() && opts.exclusion_a >= 0.0) {
        return bad("exclusion distance (A)", opts.exclusion_a, "must be >= 0");
    }
    if let Some(r) = opts.repulsion {
        if !(r.relative_permittivity.is_finite() && r.relative_permittivity > 0.0) {
            return bad(
                "relative permittivity",
                r.relative_permittivity,
                "must be positive",
            );
        }
        if !(r.screening_length_a.is_finite() && r.screening_length_a > 0.0) {
            return bad(
                "screening length (A)",
                r.screening_length_a,
                "must be positive",
            );
        }
        if !(r.cutoff_a.is_finite() && r.cutoff_a > 0.0 && r.cutoff_a <= 30.0) {
            return bad("repulsion cut-off (A)", r.cutoff_a, "must lie in (0, 30]");
        }
    }
    if opts.runs == 0 {
        return bad("runs", 0.0, "must be at least 1");
    }
    match opts.length {
        RunLength::HopsPerIon(h) if !(h.is_finite() && h > 0.0) => {
            return bad("hops per ion", h, "must be positive");
        }
        RunLength::Time(t) if !(t.is_finite() && t > 0.0) => {
            return bad("run time (s)", t, "must be positive");
        }
        _ => {}
    }
    Ok(())
}

/// The network repeated into a supercell, with every list the event loop needs.
struct Supercell {
    repeats: [usize; 3],
    n: usize,
    energy: Vec<f64>,
    /// Directed hops out of each site (CSR).
    out_start: Vec<usize>,
    out: Vec<DirectedHop>,
    excl_start: Vec<usize>,
    excl: Vec<u32>,
    int_start: Vec<usize>,
    int: Vec<(u32, f64)>,
    infl_start: Vec<usize>,
    infl: Vec<u32>,
    volume_a3: f64,
}

#[derive(Clone, Copy)]
struct DirectedHop {
    to: u32,
    vector: [f64; 3],
    /// Saddle minus the energy of the start, eV.
    barrier_ev: f64,
    /// Energy of the end minus that of the start, eV.
    delta_ev: f64,
    /// Repulsion between the start and the end, eV.
    pair_ev: f64,
    /// The start lies within the exclusion distance of the end.
    start_excludes_end: bool,
    /// Rate without repulsion, 1/s.
    base_rate: f64,
}

fn csr(lists: Vec<Vec<u32>>) -> (Vec<usize>, Vec<u32>) {
    let mut start = Vec::with_capacity(lists.len() + 1);
    let mut flat = Vec::new();
    start.push(0);
    for l in lists {
        flat.extend(l);
        start.push(flat.len());
    }
    (start, flat)
}

impl Supercell {
    fn build(net: &HopNetwork, opts: &KmcOptions) -> Supercell {
        let lat = &net.lattice;
        let widths = lat.perpendicular_widths();
        let kt = transport::BOLTZMANN_EV_PER_K * opts.temperature_k;
        let k0 = opts.attempt_frequency_hz / (2.0 * net.dimension.clamp(1, 3) as f64);
        let cutoff = opts.repulsion.map(|r| r.cutoff_a).unwrap_or(0.0);
        let max_hop = net
            .hops
            .iter()
            .map(|h| net.hop_vector(h).norm())
            .fold(0.0f64, f64::max);
        let reach = cutoff.max(opts.exclusion_a);
        let min_width = opts.min_supercell_a.max(2.0 * reach + 1e-6);
        let mut repeats = [1usize; 3];
        for k in 0..3 {
            repeats[k] = ((min_width / widths[k]).ceil() as usize).max(3);
        }
        let ns = net.sites.len();
        let cells = repeats[0] * repeats[1] * repeats[2];
        let n = ns * cells;
        let index = |cell: [usize; 3], s: usize| -> usize {
            ((cell[0] * repeats[1] + cell[1]) * repeats[2] + cell[2]) * ns + s
        };
        let super_lat = Lattice::from_matrix(Matrix3::from_columns(&[
            lat.vector(0) * repeats[0] as f64,
            lat.vector(1) * repeats[1] as f64,
            lat.vector(2) * repeats[2] as f64,
        ]))
        .expect("a supercell of a lattice is a lattice");
        let mut energy = vec![0.0; n];
        let mut cells_list = Vec::with_capacity(cells);
        for i in 0..repeats[0] {
            for j in 0..repeats[1] {
                for k in 0..repeats[2] {
                    cells_list.push([i, j, k]);
                }
            }
        }
        for &c in &cells_list {
            for (s, site) in net.sites.iter().enumerate() {
                let id = index(c, s);
                energy[id] = site.energy_ev;
            }
        }
        // pairs within a distance: unit-cell site pairs over the lattice translations that
        // reach that far, carried to every cell of the supercell
        let pairs_within = |r: f64| -> Vec<Vec<(u32, f64)>> {
            let mut out = vec![Vec::new(); n];
            if r <= 0.0 {
                return out;
            }
            let reach_cells: [i64; 3] = [0, 1, 2].map(|k| (r / widths[k]).ceil() as i64 + 1);
            let mut unit: Vec<Vec<(usize, [i64; 3], f64)>> = vec![Vec::new(); ns];
            for (a, sa) in net.sites.iter().enumerate() {
                for (b, sb) in net.sites.iter().enumerate() {
                    for x in -reach_cells[0]..=reach_cells[0] {
                        for y in -reach_cells[1]..=reach_cells[1] {
                            for z in -reach_cells[2]..=reach_cells[2] {
                                if a == b && x == 0 && y == 0 && z == 0 {
                                    continue;
                                }
                                let d = sb.frac.0 + Vector3::new(x as f64, y as f64, z as f64)
                                    - sa.frac.0;
                                let len = lat.frac_delta_length(d);
                                if len < r {
                                    unit[a].push((b, [x, y, z], len));
                                }
                            }
                        }
                    }
                }
            }
            for &c in &cells_list {
                for (a, list) in unit.iter().enumerate() {
                    let ia = index(c, a);
                    for &(b, off, len) in list {
                        let tc = [0, 1, 2]
                            .map(|k| (c[k] as i64 + off[k]).rem_euclid(repeats[k] as i64) as usize);
                        let ib = index(tc, b);
                        if ib != ia {
                            out[ia].push((ib as u32, len));
                        }
                    }
                }
            }
            out
        };
        let infl_r = reach + max_hop + 1e-6;
        let near = pairs_within(infl_r);
        let mut excl_l = vec![Vec::new(); n];
        let mut int = Vec::new();
        let mut int_start = vec![0];
        let mut infl_l = vec![Vec::new(); n];
        for a in 0..n {
            infl_l[a].push(a as u32);
            for &(b, len) in &near[a] {
                infl_l[a].push(b);
                if len < opts.exclusion_a {
                    excl_l[a].push(b);
                }
                if let Some(rep) = opts.repulsion {
                    let u = rep.energy_ev(len, opts.charge);
                    if u != 0.0 {
                        int.push((b, u));
                    }
                }
            }
            infl_l[a].sort_unstable();
            infl_l[a].dedup();
            excl_l[a].sort_unstable();
            excl_l[a].dedup();
            int_start.push(int.len());
        }
        let pair_energy = |a: usize, b: usize| -> f64 {
            int[int_start[a]..int_start[a + 1]]
                .iter()
                .filter(|(k, _)| *k as usize == b)
                .map(|(_, u)| u)
                .sum()
        };
        let excludes = |a: usize, b: usize| -> bool { excl_l[b].contains(&(a as u32)) };
        // directed hops
        let mut out_l: Vec<Vec<DirectedHop>> = vec![Vec::new(); n];
        for &c in &cells_list {
            for h in &net.hops {
                let v = net.hop_vector(h);
                for (from, to, image, sign) in [
                    (h.from, h.to, h.image, 1.0),
                    (h.to, h.from, h.image.map(|x| -x), -1.0),
                ] {
                    let a = index(c, from);
                    let tc = [0, 1, 2].map(|k| {
                        (c[k] as i64 + image[k] as i64).rem_euclid(repeats[k] as i64) as usize
                    });
                    let b = index(tc, to);
                    if a == b {
                        continue;
                    }
                    let vec = v * sign;
                    let barrier_ev = (h.saddle_ev - energy[a]).max(0.0);
                    let eb = barrier_ev.max(energy[b] - energy[a]);
                    out_l[a].push(DirectedHop {
                        base_rate: k0 * (-eb / kt).exp(),
                        to: b as u32,
                        vector: [vec[0], vec[1], vec[2]],
                        barrier_ev,
                        delta_ev: energy[b] - energy[a],
                        pair_ev: pair_energy(a, b),
                        start_excludes_end: excludes(a, b),
                    });
                }
            }
        }
        let mut out_start = vec![0];
        let mut out = Vec::new();
        for l in out_l {
            out.extend(l);
            out_start.push(out.len());
        }
        let (excl_start, excl) = csr(excl_l);
        let (infl_start, infl) = csr(infl_l);
        Supercell {
            repeats,
            n,
            energy,
            out_start,
            out,
            excl_start,
            excl,
            int_start,
            int,
            infl_start,
            infl,
            volume_a3: super_lat.volume(),
        }
    }
}

/// A Fenwick (binary indexed) tree of non-negative rates.
struct Fenwick {
    tree: Vec<f64>,
    values: Vec<f64>,
}

impl Fenwick {
    fn new(n: usize) -> Self {
        Fenwick {
            tree: vec![0.0; n + 1],
            values: vec![0.0; n],
        }
    }
    fn set(&mut self, i: usize, v: f64) {
        let delta = v - self.values[i];
        self.values[i] = v;
        let mut k = i + 1;
        while k < self.tree.len() {
            self.tree[k] += delta;
            k += k & k.wrapping_neg();
        }
    }
    fn rebuild(&mut self) {
        let n = self.values.len();
        self.tree.iter_mut().for_each(|t| *t = 0.0);
        for i in 0..n {
            let mut k = i + 1;
            while k <= n {
                self.tree[k] += self.values[i];
                k += k & k.wrapping_neg();
            }
        }
    }
    fn total(&self) -> f64 {
        let mut k = self.values.len();
        let mut s = 0.0;
        while k > 0 {
            s += self.tree[k];
            k -= k & k.wrapping_neg();
        }
        s
    }
    /// The index whose cumulative range holds `r` (0 <= r < total).
    fn find(&self, mut r: f64) -> usize {
        let n = self.values.len();
        let mut pos = 0;
        let mut step = n.next_power_of_two();
        while step > 0 {
            let next = pos + step;
            if next <= n && self.tree[next] <= r {
                r -= self.tree[next];
                pos = next;
            }
            step >>= 1;
        }
        // skip zero-rate entries that rounding may land on
        let mut i = pos.min(n - 1);
        while self.values[i] <= 0.0 && i + 1 < n {
            i += 1;
        }
        if self.values[i] <= 0.0 {
            while i > 0 && self.values[i] <= 0.0 {
                i -= 1;
            }
        }
        i
    }
}

const EMPTY: u32 = u32::MAX;

struct State<'a> {
    sc: &'a Supercell,
    occ: Vec<u32>,
    site_of: Vec<u32>,
    block: Vec<u32>,
    phi: Vec<f64>,
    rates: Fenwick,
    k0: f64,
    kt: f64,
    disp: Vec<[f64; 3]>,
    hop_sq: Vec<f64>,
    /// Event stamp per ion, so that one event recomputes each ion's rate once.
    stamp: Vec<u64>,
    event: u64,
    /// Last hops of each ion (ring of CORRELATION_WINDOW) and how many were recorded.
    history: Vec<[[f64; 3]; CORRELATION_WINDOW]>,
    recorded: Vec<usize>,
    cross: f64,
    scratch: Vec<f64>,
}

impl<'a> State<'a> {
    fn hop_rate(&self, s: usize, h: &DirectedHop) -> f64 {
        let t = h.to as usize;
        if self.occ[t] != EMPTY {
            return 0.0;
        }
        let blockers = self.block[t] - u32::from(h.start_excludes_end);
        if blockers > 0 {
            return 0.0;
        }
        let du = self.phi[t] - h.pair_ev - self.phi[s];
        if du == 0.0 {
            return h.base_rate;
        }
        let eb = (h.barrier_ev + 0.5 * du).max(h.delta_ev + du).max(0.0);
        self.k0 * (-eb / self.kt).exp()
    }
    fn ion_rate(&self, ion: usize) -> f64 {
        let s = self.site_of[ion] as usize;
        let sc = self.sc;
        sc.out[sc.out_start[s]..sc.out_start[s + 1]]
            .iter()
            .map(|h| self.hop_rate(s, h))
            .sum()
    }
    fn place(&mut self, ion: usize, s: usize) {
        let sc = self.sc;
        self.occ[s] = ion as u32;
        self.site_of[ion] = s as u32;
        for &k in &sc.excl[sc.excl_start[s]..sc.excl_start[s + 1]] {
            self.block[k as usize] += 1;
        }
        for &(k, u) in &sc.int[sc.int_start[s]..sc.int_start[s + 1]] {
            self.phi[k as usize] += u;
        }
    }
    fn remove(&mut self, s: usize) {
        let sc = self.sc;
        self.occ[s] = EMPTY;
        for &k in &sc.excl[sc.excl_start[s]..sc.excl_start[s + 1]] {
            self.block[k as usize] -= 1;
        }
        for &(k, u) in &sc.int[sc.int_start[s]..sc.int_start[s + 1]] {
            self.phi[k as usize] -= u;
        }
    }
    fn refresh_around(&mut self, s: usize) {
        let sc = self.sc;
        for &k in &sc.infl[sc.infl_start[s]..sc.infl_start[s + 1]] {
            let ion = self.occ[k as usize];
            if ion != EMPTY && self.stamp[ion as usize] != self.event {
                self.stamp[ion as usize] = self.event;
                let r = self.ion_rate(ion as usize);
                self.rates.set(ion as usize, r);
            }
        }
    }
    /// The waiting time to the next event (s) and the total rate; None when no hop is possible.
    fn wait(&self, rng: &mut Xoshiro256PlusPlus) -> Option<(f64, f64)> {
        let total = self.rates.total();
        (total > 0.0).then(|| (-(1.0 - uniform(rng)).ln() / total, total))
    }
    /// Makes one hop, chosen with probability proportional to its rate.
    fn hop(&mut self, rng: &mut Xoshiro256PlusPlus, total: f64) {
        let r = uniform(rng) * total;
        let ion = self.rates.find(r);
        let s = self.site_of[ion] as usize;
        let sc = self.sc;
        let hops = &sc.out[sc.out_start[s]..sc.out_start[s + 1]];
        self.scratch.clear();
        let mut sum = 0.0;
        for h in hops {
            sum += self.hop_rate(s, h);
            self.scratch.push(sum);
        }
        if sum.is_nan() || sum <= 0.0 {
            // the tree's value was stale by rounding: correct it; no hop this time
            self.rates.set(ion, 0.0);
            return;
        }
        let pick = uniform(rng) * sum;
        let k = self
            .scratch
            .iter()
            .position(|&c| c > pick)
            .unwrap_or(hops.len() - 1);
        let h = hops[k];
        let t = h.to as usize;
        self.remove(s);
        self.place(ion, t);
        for (d, v) in self.disp[ion].iter_mut().zip(h.vector) {
            *d += v;
        }
        self.hop_sq[ion] += h.vector.iter().map(|v| v * v).sum::<f64>();
        let n = self.recorded[ion];
        let ring = &mut self.history[ion];
        for k in 0..n.min(CORRELATION_WINDOW) {
            let prev = ring[(n - 1 - k) % CORRELATION_WINDOW];
            self.cross += prev[0] * h.vector[0] + prev[1] * h.vector[1] + prev[2] * h.vector[2];
        }
        ring[n % CORRELATION_WINDOW] = h.vector;
        self.recorded[ion] = n + 1;
        self.rates.set(ion, 0.0);
        self.event += 1;
        self.refresh_around(s);
        self.refresh_around(t);
    }
}

fn uniform(rng: &mut Xoshiro256PlusPlus) -> f64 {
    (rng.next_u64() >> 11) as f64 * (1.0 / (1u64 << 53) as f64)
}

/// Number of ions for `ions_per_cell` in the supercell of `net` (at least one).
pub fn supercell_ions(net: &HopNetwork, ions_per_cell: f64, opts: &KmcOptions) -> usize {
    let widths = net.lattice.perpendicular_widths();
    let cutoff = opts.repulsion.map(|r| r.cutoff_a).unwrap_or(0.0);
    let min_width = opts
        .min_supercell_a
        .max(2.0 * cutoff.max(opts.exclusion_a) + 1e-6);
    let cells: usize = (0..3)
        .map(|k| ((min_width / widths[k]).ceil() as usize).max(3))
        .product();
    ((ions_per_cell * cells as f64).round() as usize).max(1)
}

/// One run with `ions` ions in the supercell of `net`, from the seed `seed`.
pub fn run(
    net: &HopNetwork,
    ions: usize,
    opts: &KmcOptions,
    seed: u64,
) -> Result<RunResult, KmcError> {
    check(opts)?;
    if net.sites.is_empty() {
        return Err(KmcError::NoSites);
    }
    let sc = Supercell::build(net, opts);
    run_on(&sc, ions, opts, seed, net.dimension)
}

fn run_on(
    sc: &Supercell,
    ions: usize,
    opts: &KmcOptions,
    seed: u64,
    dimension: u8,
) -> Result<RunResult, KmcError> {
    let mut rng = Xoshiro256PlusPlus::seed_from_u64(seed);
    let kt = transport::BOLTZMANN_EV_PER_K * opts.temperature_k;
    let mut st = State {
        sc,
        occ: vec![EMPTY; sc.n],
        site_of: vec![0; ions],
        block: vec![0; sc.n],
        phi: vec![0.0; sc.n],
        rates: Fenwick::new(ions.max(1)),
        k0: opts.attempt_frequency_hz / (2.0 * dimension.clamp(1, 3) as f64),
        kt,
        disp: vec![[0.0; 3]; ions],
        hop_sq: vec![0.0; ions],
        stamp: vec![0; ions],
        event: 0,
        history: vec![[[0.0; 3]; CORRELATION_WINDOW]; ions],
        recorded: vec![0; ions],
        cross: 0.0,
        scratch: Vec::new(),
    };
    // placement: low energy first, ties (and near-ties) broken at random
    let mut order: Vec<(f64, usize)> = (0..sc.n)
        .map(|s| (sc.energy[s] - kt * (1.0 - uniform(&mut rng)).ln(), s))
        .collect();
    order.sort_by(|a, b| a.0.total_cmp(&b.0));
    let mut placed = 0;
    for &(_, s) in &order {
        if placed == ions {
            break;
        }
        if st.occ[s] == EMPTY && st.block[s] == 0 {
            st.place(placed, s);
            placed += 1;
        }
    }
    if placed < ions {
        return Err(KmcError::TooFull {
            wanted: ions,
            placed,
            sites: sc.n,
            exclusion_a: opts.exclusion_a,
        });
    }
    for ion in 0..ions {
        let r = st.ion_rate(ion);
        st.rates.set(ion, r);
    }
    let rebuild_every = 1 << 16;
    // warm-up
    let warm_events = ((opts.warmup_hops_per_ion * ions as f64) as u64).min(opts.max_events);
    let mut frozen = false;
    for e in 0..warm_events {
        if e.is_multiple_of(rebuild_every) {
            st.rates.rebuild();
        }
        match st.wait(&mut rng) {
            Some((_, total)) => st.hop(&mut rng, total),
            None => {
                frozen = true;
                break;
            }
        }
    }
    st.disp.iter_mut().for_each(|d| *d = [0.0; 3]);
    st.hop_sq.iter_mut().for_each(|h| *h = 0.0);
    st.recorded.iter_mut().for_each(|r| *r = 0);
    st.cross = 0.0;
    let mut time = 0.0;
    let mut events = 0u64;
    let mut samples = Vec::new();
    let mut next_sample = 0;
    let mut sample_times = opts.sample_times_s.clone();
    sample_times.sort_by(f64::total_cmp);
    let msd_axes = |st: &State| -> [f64; 3] {
        let mut m = [0.0; 3];
        for d in &st.disp {
            for a in 0..3 {
                m[a] += d[a] * d[a];
            }
        }
        m.map(|v| v / ions as f64)
    };
    if !frozen {
        loop {
            let done = match opts.length {
                RunLength::HopsPerIon(h) => events as f64 >= h * ions as f64,
                RunLength::Time(t) => time >= t,
            };
            if done || events >= opts.max_events {
                break;
            }
            if events.is_multiple_of(rebuild_every) {
                st.rates.rebuild();
            }
            let Some((dt, total)) = st.wait(&mut rng) else {
                frozen = events == 0;
                break;
            };
            let t_after = time + dt;
            // samples inside this waiting time see the present state
            if next_sample < sample_times.len() && sample_times[next_sample] < t_after {
                let m = msd_axes(&st);
                while next_sample < sample_times.len() && sample_times[next_sample] < t_after {
                    samples.push(MsdSample {
                        time_s: sample_times[next_sample],
                        msd_a2: m,
                    });
                    next_sample += 1;
                }
            }
            if let RunLength::Time(t) = opts.length
                && t_after > t
            {
                // the next hop comes after the end of the run (waiting times forget)
                time = t;
                break;
            }
            st.hop(&mut rng, total);
            time = t_after;
            events += 1;
        }
    }
    let mut msd = Matrix3::zeros();
    for d in &st.disp {
        let v = Vector3::new(d[0], d[1], d[2]);
        msd += v * v.transpose();
    }
    let n = ions.max(1) as f64;
    Ok(RunResult {
        ions,
        sites: sc.n,
        repeats: sc.repeats,
        time_s: if frozen { 0.0 } else { time },
        events,
        msd_a2: msd / n,
        hop_sq_a2: st.hop_sq.iter().sum::<f64>() / n,
        hop_cross_a2: st.cross / n,
        frozen,
        samples,
    })
}

/// Transport at `ions_per_cell` mobile ions per unit cell: `opts.runs` independent runs in
/// parallel, with means and standard errors over runs.
pub fn fill_point(
    net: &HopNetwork,
    ions_per_cell: f64,
    opts: &KmcOptions,
) -> Result<FillPoint, KmcError> {
    let curve = fill_curve(net, &[ions_per_cell], opts);
    curve.into_iter().next().expect("one point asked")
}

/// [`fill_point`] for several fillings, every (filling, run) pair in one parallel pool.
pub fn fill_curve(
    net: &HopNetwork,
    ions_per_cell: &[f64],
    opts: &KmcOptions,
) -> Vec<Result<FillPoint, KmcError>> {
    if let Err(e) = check(opts) {
        return ions_per_cell.iter().map(|_| Err(e.clone())).collect();
    }
    if net.sites.is_empty() {
        return ions_per_cell
            .iter()
            .map(|_| Err(KmcError::NoSites))
            .collect();
    }
    let sc = Supercell::build(net, opts);
    let cells = (sc.repeats[0] * sc.repeats[1] * sc.repeats[2]) as f64;
    let jobs: Vec<(usize, usize)> = (0..ions_per_cell.len())
        .flat_map(|p| (0..opts.runs).map(move |r| (p, r)))
        .collect();
    let results: Vec<Result<RunResult, KmcError>> = jobs
        .par_iter()
        .map(|&(p, r)| {
            let ions = ((ions_per_cell[p] * cells).round() as usize).max(1);
            let seed = stream_seed(opts.seed, (p as u64) << 32 | r as u64);
            run_on(&sc, ions, opts, seed, net.dimension)
        })
        .collect();
    let mut out = Vec::new();
    let mut it = results.into_iter();
    for &x in ions_per_cell {
        let runs: Result<Vec<RunResult>, KmcError> = (&mut it).take(opts.runs).collect();
        out.push(runs.map(|runs| summarise(runs, x, sc.volume_a3 / cells, opts)));
    }
    out
}

fn summarise(runs: Vec<RunResult>, x: f64, cell_volume_a3: f64, opts: &KmcOptions) -> FillPoint {
    let ions = runs[0].ions;
    let cells = (runs[0].repeats[0] * runs[0].repeats[1] * runs[0].repeats[2]) as f64;
    let tensors: Vec<Matrix3<f64>> = runs.iter().map(|r| r.diffusion_m2_s()).collect();
    let mean = tensors.iter().fold(Matrix3::zeros(), |a, t| a + t) / runs.len() as f64;
    let eig = SymmetricEigen::new(mean);
    let k = eig.eigenvalues.imax();
    let dir = eig.eigenvectors.column(k).into_owned();
    let along: Vec<f64> = tensors
        .iter()
        .map(|t| (dir.transpose() * t * dir)[0])
        .collect();
    let axes =
        [0, 1, 2].map(|a| Estimate::of(&tensors.iter().map(|t| t[(a, a)]).collect::<Vec<_>>()));
    let f: Vec<f64> = runs.iter().filter_map(|r| r.correlation_factor()).collect();
    let carriers = ions as f64 / (cell_volume_a3 * cells * 1e-30);
    let sigma: Vec<f64> = along
        .iter()
        .map(|&d| {
            transport::nernst_einstein(carriers, opts.charge, d, opts.temperature_k)
                .map(|c| c.siemens_per_cm())
                .unwrap_or(0.0)
        })
        .collect();
    let sites = runs[0].sites as f64;
    FillPoint {
        ions_per_cell: x,
        site_fraction: ions as f64 / sites,
        diffusion_axes_m2_s: axes,
        diffusion_m2_s: Estimate::of(&along),
        direction: [dir[0], dir[1], dir[2]],
        correlation_factor: Estimate::of(&f),
        conductivity_s_cm: Estimate::of(&sigma),
        carriers_per_m3: carriers,
        time_s: runs.iter().map(|r| r.time_s).sum::<f64>() / runs.len() as f64,
        events: runs.iter().map(|r| r.events as f64).sum::<f64>() / runs.len() as f64,
        runs,
    }
}
