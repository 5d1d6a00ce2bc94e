//! The main job, glued together: structure -> oxidation states -> valence check -> landscape
//! model -> grids -> percolation (energy and valence mismatch) -> site network -> profiles ->
//! transport and capacity estimates. This is the only module that knows the whole pipeline;
//! every stage it calls takes and returns plain data.

use crate::bv::model::{ModelKnobs, ModelProvenance, build_model};
use crate::bv::{
    ParameterTable, ValenceReport, assign_oxidation_states, valence::valence_check_with,
};
use crate::capacity::{self, CandidateSite, CapacityReport, SitePacking};
use crate::element::Element;
use crate::grid::Grid;
use crate::landscape::{self, FrameworkKind, Landscape, LandscapeModel, Progress};
use crate::network::{
    self, FrameworkIon, MobileSite, Network, NetworkInput, NetworkOptions, Profile, ProfileOptions,
};
use crate::percolation::{self, Percolation};
use crate::structure::Structure;
use crate::transport::{self, HoppingModel, RateRow};
use std::time::Instant;

/// Grid spacing used when none is asked for: 0.1 A for cells up to 1000 A^3 (about 1e6
/// points); larger cells get a coarser spacing that keeps the grid near 1e6 points, never
/// coarser than 0.25 A.
pub fn default_spacing_a(volume_a3: f64) -> f64 {
    let s = 0.1 * (volume_a3 / 1000.0).cbrt();
    s.clamp(0.1, 0.25)
}

/// Minima shallower than this (eV, the lowest barrier out of the site) are listed apart in
/// summaries: they are points in flat valleys or grid artefacts rather than sites an ion rests on.
pub const SHALLOW_SITE_EV: f64 = 0.05;

/// Options of the transport and capacity estimates.
#[derive(Debug, Clone, PartialEq)]
pub struct RateOptions {
    pub temperature_k: f64,
    pub attempt_frequency_hz: f64,
    pub correlation_factor: f64,
    pub site_filling: f64,
    /// A measured diffusion coefficient (m^2/s) at a temperature (K), replacing the hopping
    /// model's estimate.
    pub measured_diffusion: Option<(f64, f64)>,
    pub c_rates: Vec<f64>,
    /// Minimum distance between two mobile ions for the site-limited capacity (A).
    pub min_ion_distance_a: f64,
    /// Ions (or electrons) inserted per formula unit for the redox capacity; None: the mobile
    /// ions the structure already holds per formula unit (none for an empty host: then only the
    /// site bound is given).
    pub ions_per_formula_unit: Option<f64>,
}

impl Default for RateOptions {
    fn default() -> Self {
        RateOptions {
            temperature_k: transport::ROOM_TEMPERATURE_K,
            attempt_frequency_hz: transport::DEFAULT_ATTEMPT_FREQUENCY_HZ,
            correlation_factor: 1.0,
            site_filling: 0.0,
            measured_diffusion: None,
            c_rates: transport::DEFAULT_C_RATES.to_vec(),
            min_ion_distance_a: capacity::DEFAULT_MIN_LI_LI_DISTANCE_A,
            ions_per_formula_unit: None,
        }
    }
}

#[derive(Debug, Clone)]
pub struct AnalysisOptions {
    pub ion: Element,
    /// Grid spacing (A); None: [`default_spacing_a`].
    pub spacing_a: Option<f64>,
    pub table: ParameterTable,
    pub knobs: ModelKnobs,
    pub exclude_labels: Vec<String>,
    pub progress: Progress,
    pub rate: RateOptions,
    /// Skip the site network, profiles and estimates (percolation only: calibration, screening).
    pub percolation_only: bool,
}

impl AnalysisOptions {
    pub fn new(ion: Element) -> Self {
        AnalysisOptions {
            ion,
            spacing_a: None,
            table: ParameterTable::builtin(),
            knobs: ModelKnobs::default(),
            exclude_labels: vec![],
            progress: Progress::Silent,
            rate: RateOptions::default(),
            percolation_only: false,
        }
    }
}

/// Transport through one percolating network.
#[derive(Debug, Clone, PartialEq)]
pub struct ChannelTransport {
    pub dimension: u8,
    pub barrier_ev: f64,
    /// Hop length of the hopping model (A): the channel's repeat over the rate-limiting passes
    /// along its profile (see `hop_length_from_profile`), or the mean length of the open hops
    /// when there is no profile.
    pub hop_length_a: f64,
    /// Diffusion coefficient at the chosen temperature (m^2/s).
    pub diffusion_m2_s: f64,
    /// "hopping model" or "measured".
    pub basis: String,
    pub model: Option<HoppingModel>,
    pub arrhenius: Vec<(f64, f64)>,
    pub rates: Vec<RateRow>,
    /// Carriers per m^3 used for the conductivity (the mobile ions of the structure, or the
    /// inserted amount for an empty host).
    pub carriers_per_m3: Option<f64>,
    /// Nernst-Einstein conductivity at the temperature, S/cm (Haven ratio 1).
    pub conductivity_s_cm: Option<f64>,
    pub temperature_k: f64,
}

/// Everything the main job found.
#[derive(Debug, Clone)]
pub struct Analysis {
    /// The structure with oxidation states (assigned when the file had none).
    pub structure: Structure,
    pub ion: Element,
    pub oxidation_note: Option<String>,
    pub valence: Option<ValenceReport>,
    pub model: LandscapeModel,
    pub provenance: ModelProvenance,
    pub spacing_a: [f64; 3],
    pub landscape: Landscape,
    /// Percolation of the site-energy grid (eV).
    pub percolation: Percolation,
    /// Percolation of the valence-mismatch grid (v.u.).
    pub mismatch_percolation: Percolation,
    pub network: Option<Network>,
    /// The site graph's own percolation (must equal `percolation`).
    pub graph_percolation: Option<Percolation>,
    pub profiles: Vec<Profile>,
    pub transport: Vec<ChannelTransport>,
    pub capacity: Option<CapacityReport>,
    pub packing: Option<SitePacking>,
    pub warnings: Vec<String>,
    /// Seconds per stage.
    pub timings: Vec<(&'static str, f64)>,
}

#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum AnalysisError {
    #[error("{0}")]
    Model(#[from] crate::bv::BvError),
    #[error("structure '{structure}': {message}")]
    Structure { structure: String, message: String },
}

/// Gives every occupant an oxidation state: the user's settings, then the file's, then assigned
/// ones; warnings of the assignment (a residual charge) join the structure's warnings.
pub fn with_oxidation_states(
    s: &Structure,
    table: &ParameterTable,
) -> Result<(Structure, Option<String>), AnalysisError> {
    let a = assign_oxidation_states(s, table)?;
    let mut out = a.structure;
    out.warnings.extend(a.warnings);
    Ok((out, (!a.nothing_assigned).then_some(a.note)))
}

/// Grid points per axis for a spacing (A).
pub fn grid_dims(structure: &Structure, spacing_a: f64) -> [usize; 3] {
    Grid::dims_for_spacing(&structure.lattice, spacing_a)
}

/// The plain framework ions of a model, for the network's coordination and bottlenecks.
pub fn framework_ions(model: &LandscapeModel) -> Vec<FrameworkIon> {
    model
        .atoms
        .iter()
        .map(|a| match a.kind {
            FrameworkKind::Anion(i) => {
                let k = &model.anions[i];
                FrameworkIon {
                    label: a.label.clone(),
                    element: k.species.element.symbol().to_string(),
                    frac: a.frac,
                    charge: k.species.oxidation.unwrap_or(0.0),
                    radius: k.radius,
                    is_anion: true,
                }
            }
            FrameworkKind::Cation(i) => {
                let k = &model.cations[i];
                FrameworkIon {
                    label: a.label.clone(),
                    element: k.species.element.symbol().to_string(),
                    frac: a.frac,
                    charge: k.species.oxidation.unwrap_or(k.charge),
                    radius: k.radius,
                    is_anion: false,
                }
            }
        })
        .collect()
}

/// Sites of the mobile ion in the original structure (every occupant of that element).
pub fn mobile_sites(s: &Structure, ion: Element) -> Vec<MobileSite> {
    s.sites
        .iter()
        .filter_map(|site| {
            site.occupants
                .iter()
                .find(|o| o.species.element == ion)
                .map(|o| MobileSite {
                    label: o.label.clone(),
                    frac: site.frac,
                })
        })
        .collect()
}

/// Model and grids only: the first half of [`analyse`], shared with `hopmap grid` and the
/// calibration.
pub fn model_and_landscape(
    structure: &Structure,
    opts: &AnalysisOptions,
) -> Result<
    (
        Structure,
        Option<String>,
        LandscapeModel,
        ModelProvenance,
        Landscape,
    ),
    AnalysisError,
> {
    let (s, note) = with_oxidation_states(structure, &opts.table)?;
    let (model, prov) = build_model(&s, opts.ion, &opts.table, &opts.knobs, &opts.exclude_labels)?;
    if model.atoms.is_empty() {
        return Err(AnalysisError::Structure {
            structure: s.name.clone(),
            message: format!(
                "nothing is left of the framework once {} is removed",
                opts.ion
            ),
        });
    }
    let spacing = opts
        .spacing_a
        .unwrap_or_else(|| default_spacing_a(s.volume()));
    let dims = grid_dims(&s, spacing);
    let land = landscape::compute(&model, dims, opts.progress);
    Ok((s, note, model, prov, land))
}

/// Runs the whole job on one structure.
pub fn analyse(structure: &Structure, opts: &AnalysisOptions) -> Result<Analysis, AnalysisError> {
    let mut timings = Vec::new();
    let t0 = Instant::now();
    let (s, oxidation_note, model, provenance, land) = model_and_landscape(structure, opts)?;
    let mut warnings: Vec<String> = s.warnings.clone();
    timings.push(("model and grids", t0.elapsed().as_secs_f64()));
    if provenance.uses_fallback {
        warnings.push(
            "a probe-anion pair uses the O'Keeffe-Brese estimate of R0 (no tabulated parameters): treat barriers with extra caution"
                .to_string(),
        );
    }
    if provenance.removed_mobile == 0.0 {
        warnings.push(format!(
            "the structure has no {0}: its framework is analysed as an empty host for {0}",
            opts.ion
        ));
    }
    for r in provenance
        .radii
        .iter()
        .chain(std::iter::once(&provenance.probe.radius))
        .filter(|r| r.origin == crate::bv::ValueOrigin::Fallback)
    {
        let why = r.notes.last().cloned().unwrap_or_default();
        let w = format!("radius of {} is a fallback: {why}", r.species_name());
        if !warnings.contains(&w) {
            warnings.push(w);
        }
    }
    let valence = match valence_check_with(&s, &opts.table, Some(opts.ion)) {
        Ok(v) => Some(v),
        Err(e) => {
            warnings.push(format!("valence check not possible: {e}"));
            None
        }
    };
    let spacing_a = land.energy.spacing();

    let t = Instant::now();
    let ceiling = model.energy_cap as f32;
    let percolation = percolation::percolate(&land.energy, ceiling);
    let mismatch_percolation = percolation::percolate(&land.mismatch, model.mismatch_cap as f32);
    timings.push(("percolation", t.elapsed().as_secs_f64()));

    let mut out = Analysis {
        structure: s,
        ion: opts.ion,
        oxidation_note,
        valence,
        model,
        provenance,
        spacing_a,
        landscape: land,
        percolation,
        mismatch_percolation,
        network: None,
        graph_percolation: None,
        profiles: vec![],
        transport: vec![],
        capacity: None,
        packing: None,
        warnings,
        timings,
    };
    if opts.percolation_only {
        return Ok(out);
    }

    let t = Instant::now();
    let framework = framework_ions(&out.model);
    let mobile = mobile_sites(&out.structure, opts.ion);
    let input = NetworkInput {
        ops: &out.structure.symmetry.ops,
        framework: &framework,
        mobile_sites: &mobile,
        mobile_radius: out.model.probe.radius,
    };
    let net_opts = NetworkOptions {
        ceiling,
        ..Default::default()
    };
    let net = network::build(&out.landscape.energy, &input, &net_opts);
    let graph_perc = net.percolate(&out.landscape.energy);
    for d in 1..=3u8 {
        let (g, v) = (out.percolation.energy(d), graph_perc.energy(d));
        if g != v {
            out.warnings.push(format!(
                "internal check: the site graph percolates in {d}D at {v:?} eV but the grid at {g:?} eV; please report this structure"
            ));
        }
    }
    timings_push(&mut out, "site network", t);

    let t = Instant::now();
    out.profiles = profiles(&out.landscape.energy, &out.percolation, ceiling);
    timings_push(&mut out, "profiles", t);

    let carriers = carriers_per_m3(&out.structure, opts.ion, opts.rate.ions_per_formula_unit);
    let charge = out.model.probe.valence;
    out.transport = channel_transport(
        &out.percolation,
        &net,
        &opts.rate,
        &out.profiles,
        &out.structure.lattice,
        carriers,
        charge,
        &mut out.warnings,
    );
    let probe_charge = out.model.probe.valence.round().max(1.0) as u8;
    let (cap, packing) = capacity_estimate(
        &out.structure,
        opts.ion,
        probe_charge,
        &out.percolation,
        &net,
        &opts.rate,
        &mut out.warnings,
    );
    out.capacity = cap;
    out.packing = packing;
    out.network = Some(net);
    out.graph_percolation = Some(graph_perc);
    Ok(out)
}

/// The lowest path through one repeat of every channel reached (below the ceiling of the
/// percolation, so that its highest point is the channel's threshold).
fn profiles(grid: &Grid, p: &Percolation, ceiling: f32) -> Vec<Profile> {
    let o = ProfileOptions {
        ceiling,
        ..Default::default()
    };
    network::profile::channel_profiles(grid, p, &o)
}

fn timings_push(a: &mut Analysis, name: &'static str, t: Instant) {
    a.timings.push((name, t.elapsed().as_secs_f64()));
}

/// Hop length (A) of the hopping model from a channel profile: the repeat length of the
/// channel divided by the number of rate-limiting passes along one repeat, i.e. of the times
/// the path climbs to within [`SHALLOW_SITE_EV`] of its highest point after having been at
/// least twice that far below it.
///
/// Random-walk arithmetic: along a periodic chain of period L crossed over n equal barriers,
/// a walker makes hops of L/n at the rate over one barrier, so `D = (L/n)^2 Gamma / 2`; when one
/// barrier per period dominates and the others are lower, the period is crossed at about the
/// rate over that one, so `D ~ L^2 Gamma / 2` and the intermediate minima (a tunnel's cavity and
/// window sites, say) do not shorten the hop. Counting the passes near the top covers both.
fn hop_length_from_profile(p: &Profile, lattice: &crate::lattice::Lattice) -> Option<f64> {
    let t = nalgebra::Vector3::new(
        p.translation[0] as f64,
        p.translation[1] as f64,
        p.translation[2] as f64,
    );
    let repeat = lattice.frac_delta_length(t);
    let band = SHALLOW_SITE_EV as f32;
    let top = p
        .points
        .iter()
        .map(|q| q.energy)
        .fold(f32::NEG_INFINITY, f32::max);
    let mut passes = 0usize;
    let mut armed = true;
    for q in &p.points {
        if armed && q.energy >= top - band {
            passes += 1;
            armed = false;
        } else if !armed && q.energy <= top - 2.0 * band {
            armed = true;
        }
    }
    let passes = passes.max(1);
    (repeat > 0.0).then(|| repeat / passes as f64)
}

/// Mean length (A) of the hops open at `level`, in the network reached at that level.
fn mean_hop_length(net: &Network, level: f32) -> Option<f64> {
    let open: Vec<f64> = net
        .hops
        .iter()
        .filter(|h| h.saddle_energy <= level)
        .map(|h| h.length)
        .collect();
    if open.is_empty() {
        None
    } else {
        Some(open.iter().sum::<f64>() / open.len() as f64)
    }
}

/// Networks whose thresholds lie closer than this (eV) are one network of the higher
/// dimension: less than kT at room temperature (25.7 meV), so an ion that crosses the lower
/// bottleneck crosses the other as readily, and of the order of the scatter of a threshold
/// between grids placed differently in the cell (primitive and conventional cells, a shifted
/// origin, spacings of 0.1-0.2 A). A layered LiCoO2 read from a primitive cell opens 1D
/// channels 2 meV below its 2D layers: that is reported as 2D layers.
pub const CHANNEL_MERGE_EV: f32 = 0.02;

/// True when a higher-dimensional network opens within [`CHANNEL_MERGE_EV`] of `t`.
pub fn merged_with_higher(p: &Percolation, t: &percolation::Threshold) -> bool {
    p.thresholds
        .iter()
        .flatten()
        .any(|u| u.dimension > t.dimension && u.energy - t.energy < CHANNEL_MERGE_EV)
}

/// The thresholds worth reporting on their own: a dimension reached at the same energy as a
/// higher one, or within [`CHANNEL_MERGE_EV`] below it (a spinel's 1D, 2D and 3D networks all
/// open at once), is left to the higher one.
pub fn distinct_thresholds(p: &Percolation) -> Vec<&percolation::Threshold> {
    p.thresholds
        .iter()
        .flatten()
        .filter(|t| !merged_with_higher(p, t))
        .collect()
}

/// Mobile ions per m^3: those of the structure, or `inserted` per formula unit for a host.
fn carriers_per_m3(s: &Structure, ion: Element, inserted: Option<f64>) -> Option<f64> {
    let present = s.cell_composition().get(&ion).copied().unwrap_or(0.0);
    let (z, _) = s.formula_and_z();
    let per_cell = match inserted {
        Some(x) => x * z as f64,
        None => present,
    };
    transport::carrier_density_per_cell(per_cell, s.volume()).ok()
}

fn channel_transport(
    p: &Percolation,
    net: &Network,
    r: &RateOptions,
    profiles: &[Profile],
    lattice: &crate::lattice::Lattice,
    carriers: Option<f64>,
    charge: f64,
    warnings: &mut Vec<String>,
) -> Vec<ChannelTransport> {
    let mut out = Vec::new();
    for t in distinct_thresholds(p) {
        let Some(hop) = profiles
            .iter()
            .find(|p| p.dimension == t.dimension)
            .and_then(|p| hop_length_from_profile(p, lattice))
            .or_else(|| mean_hop_length(net, t.energy))
        else {
            continue;
        };
        let barrier = t.barrier as f64;
        let (diffusion, basis, model) = match r.measured_diffusion {
            Some((d, _)) => (d, "measured".to_string(), None),
            None => {
                let m = HoppingModel::new(barrier, hop, t.dimension)
                    .and_then(|m| m.with_attempt_frequency(r.attempt_frequency_hz))
                    .and_then(|m| m.with_correlation_factor(r.correlation_factor))
                    .and_then(|m| m.with_site_filling(r.site_filling));
                match m {
                    Ok(m) => (
                        m.diffusion_coefficient(r.temperature_k),
                        "hopping model".to_string(),
                        Some(m),
                    ),
                    Err(e) => {
                        warnings.push(format!(
                            "transport estimate of the {}D network skipped: {e}",
                            t.dimension
                        ));
                        continue;
                    }
                }
            }
        };
        let arrhenius = match &model {
            Some(m) => transport::default_temperatures_k()
                .into_iter()
                .map(|tk| (tk, m.diffusion_coefficient(tk)))
                .collect(),
            None => vec![],
        };
        let rates = transport::rate_table(diffusion, t.dimension, &r.c_rates).unwrap_or_default();
        let temperature_k = r
            .measured_diffusion
            .map(|(_, tk)| tk)
            .unwrap_or(r.temperature_k);
        let conductivity_s_cm = carriers
            .and_then(|n| transport::nernst_einstein(n, charge, diffusion, temperature_k).ok())
            .map(|c| c.siemens_per_cm());
        out.push(ChannelTransport {
            dimension: t.dimension,
            barrier_ev: barrier,
            hop_length_a: hop,
            diffusion_m2_s: diffusion,
            basis,
            model,
            arrhenius,
            rates,
            carriers_per_m3: carriers,
            conductivity_s_cm,
            temperature_k,
        });
    }
    out
}

fn capacity_estimate(
    s: &Structure,
    ion: Element,
    charge: u8,
    p: &Percolation,
    net: &Network,
    r: &RateOptions,
    warnings: &mut Vec<String>,
) -> (Option<CapacityReport>, Option<SitePacking>) {
    let (z, _) = s.formula_and_z();
    let comp = s.cell_composition();
    let per_fu: capacity::Composition = comp.iter().map(|(e, n)| (*e, n / z as f64)).collect();
    let present = per_fu.get(&ion).copied().unwrap_or(0.0);
    let ions = r.ions_per_formula_unit.unwrap_or(present);
    // sites in the highest-dimensional network reached, at its threshold
    let packing = p.thresholds.iter().flatten().last().and_then(|t| {
        let level = t.energy;
        let cands: Vec<CandidateSite> = net
            .sites
            .iter()
            .filter(|site| site.energy <= level)
            .map(|site| CandidateSite {
                frac: site.frac,
                energy_ev: Some(site.energy as f64),
            })
            .collect();
        if cands.is_empty() {
            return None;
        }
        match capacity::pack_sites(&s.lattice, &cands, r.min_ion_distance_a) {
            Ok(pk) => Some(pk),
            Err(e) => {
                warnings.push(format!("site-limited capacity skipped: {e}"));
                None
            }
        }
    });
    let redox_electrons = ions * charge as f64;
    let site = packing.as_ref().map(|pk| (pk, z as f64));
    match CapacityReport::new(&per_fu, redox_electrons, site, charge, Some(s.density())) {
        Ok(c) => (Some(c), packing),
        Err(e) => {
            warnings.push(format!("capacity estimate skipped: {e}"));
            (None, packing)
        }
    }
}

/// The headline in one sentence, e.g. "Li+: 1D channels along [010], barrier 0.32 eV; 2D at
/// 0.95 eV; 3D at 1.40 eV". Energies after the first are the thresholds relative to the lowest
/// site energy of the network (i.e. barriers).
pub fn headline(a: &Analysis) -> String {
    let p = &a.percolation;
    let ion = a.model.probe.element.symbol();
    if p.dimension == 0 {
        return format!(
            "{ion}: no percolating path below {:.1} eV (the energy cap)",
            p.ceiling
        );
    }
    let mut parts = Vec::new();
    for t in distinct_thresholds(p) {
        // a dimension reached at (nearly) the same energy as a higher one is reported as the
        // higher one
        let what = match &t.channel.span {
            percolation::Span::Line { direction, .. } => {
                let dirs: Vec<String> = p
                    .families
                    .iter()
                    .filter(|f| f.dimension == 1 && (f.onset - t.energy).abs() < 1e-6)
                    .map(|f| format!("[{}]", percolation::format_indices(f.span.key())))
                    .collect();
                let dirs = if dirs.is_empty() {
                    format!("[{}]", percolation::format_indices(*direction))
                } else {
                    dirs.join(", ")
                };
                format!("1D channels along {dirs}")
            }
            percolation::Span::Plane { normal, .. } => format!(
                "2D layers in the ({}) plane",
                percolation::format_indices(*normal)
            ),
            percolation::Span::Space { .. } => "3D network".to_string(),
            percolation::Span::Closed => continue,
        };
        if parts.is_empty() {
            parts.push(format!("{what}, barrier {:.2} eV", t.barrier));
        } else {
            parts.push(format!(
                "{} at {:.2} eV",
                what.split(' ').next().unwrap_or(""),
                t.barrier
            ));
        }
    }
    format!("{ion}: {}", parts.join("; "))
}
