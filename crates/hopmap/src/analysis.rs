//! The main job, glued together: structure -> oxidation states -> valence check -> landscape
//! model -> grids -> percolation (energy and valence mismatch) -> site network -> profiles ->
//! transport and capacity estimates. This is the only module that knows the whole pipeline;
//! every stage it calls takes and returns plain data.

use crate::bv::model::{ModelKnobs, ModelProvenance, build_model};
use crate::bv::{ParameterTable, ValenceReport, assign_oxidation_states, valence::valence_check};
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

/// Radius (A) around an occupied site of the mobile ion within which its well is read off the
/// grid: the lowest point this close to the site is where the ion sits in the landscape.
pub const OCCUPIED_WELL_RADIUS_A: f64 = 0.5;

/// An empty pocket deeper than the occupied sites by more than this (eV) is reported apart.
pub const DEEPER_VOID_EV: f64 = 0.05;

/// Uncertainty of a barrier from the model (eV): its mean absolute error against published
/// barriers of the reference set, scored leave-one-family-out (`cargo bench --bench
/// model_evidence`; the table is in the science notes). Every number derived from a barrier
/// (D, conductivity, diffusion length, largest particle) is given with the band this makes: at
/// room temperature 0.1 eV is a factor of about 50 in D.
pub const BARRIER_UNCERTAINTY_EV: f64 = 0.15;

/// Below this diffusion coefficient (m^2/s) there is no bulk transport worth the name at the
/// temperature: an ion covers less than 0.1 um in a day (`sqrt(6 D t)` with t = 86400 s gives
/// 0.07 um). Renderers then say "no bulk transport" instead of printing the number.
pub const NO_BULK_TRANSPORT_M2_S: f64 = 1e-20;

/// Minima shallower than this (eV, the lowest barrier out of the site) are listed apart in
/// summaries: they are points in flat valleys or grid artefacts rather than sites an ion rests on.
/// The same depth merges minima into sites ([`network::MERGE_DEPTH_EV`]) and wells along a
/// channel profile for the hop length.
pub const SHALLOW_SITE_EV: f64 = network::MERGE_DEPTH_EV as f64;

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
    /// Percolate the valence-mismatch grid as well (the second channel table of the reports).
    /// Screening and calibration never read it and turn it off: it is a quarter to a third of
    /// the CPU after the grid.
    pub mismatch_channels: bool,
    /// Memory and time the grid of one structure may take ([`crate::limits::plan_grid`]).
    pub budget: crate::limits::Budget,
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
            mismatch_channels: true,
            budget: crate::limits::Budget::default(),
        }
    }

    /// Checks every option that has a physical range (spacing, temperature, rates, filling,
    /// distances) before any structure is read: a bad option is the same mistake for every
    /// structure of a batch, so it is reported once ([`AnalysisError::Options`]).
    pub fn validate(&self) -> Result<(), AnalysisError> {
        if let Some(s) = self.spacing_a {
            crate::limits::check_spacing(s).map_err(AnalysisError::Options)?;
        }
        self.rate.validate()
    }
}

impl RateOptions {
    /// Largest minimum ion-ion distance accepted (A): no ion keeps its neighbours 10 A away.
    pub const MAX_MIN_ION_DISTANCE_A: f64 = 10.0;

    /// Checks the physical ranges: temperature above 0 K (at most 5000 K), attempt frequency
    /// above 0, correlation factor in (0, 1], site filling in [0, 1), a measured D above 0,
    /// C-rates above 0, the minimum ion distance in (0, 10] A, inserted ions at least 0.
    pub fn validate(&self) -> Result<(), AnalysisError> {
        self.check().map_err(|(_, m)| AnalysisError::Options(m))
    }

    /// As [`RateOptions::validate`], with the name of the option at fault (`temperature`,
    /// `attempt frequency`, `correlation factor`, `site filling`, `measured diffusivity`,
    /// `C-rate`, `minimum ion distance`, `ions per formula unit`).
    pub fn check(&self) -> Result<(), (&'static str, String)> {
        use crate::limits::short_number as n;
        let t = self.temperature_k;
        if !(t > 0.0 && t <= 5000.0) {
            return Err((
                "temperature",
                format!(
                    "temperature {} K must lie above 0 K and at most 5000 K",
                    n(t)
                ),
            ));
        }
        let f = self.attempt_frequency_hz;
        if !(f > 0.0 && f.is_finite()) {
            return Err((
                "attempt frequency",
                format!("attempt frequency {} Hz must be a positive number", n(f)),
            ));
        }
        let c = self.correlation_factor;
        if !(c > 0.0 && c <= 1.0) {
            return Err((
                "correlation factor",
                format!("correlation factor {} must lie above 0 and at most 1", n(c)),
            ));
        }
        let x = self.site_filling;
        if !(0.0..1.0).contains(&x) {
            return Err((
                "site filling",
                format!(
                    "site filling {} must lie in [0, 1) (0 = dilute; a full lattice has no vacancy to hop into)",
                    n(x)
                ),
            ));
        }
        if let Some((d, tk)) = self.measured_diffusion {
            if !(d > 0.0 && d.is_finite()) {
                return Err((
                    "measured diffusivity",
                    format!(
                        "measured diffusion coefficient {} m^2/s must be a positive number",
                        n(d)
                    ),
                ));
            }
            if !(tk > 0.0 && tk <= 5000.0) {
                return Err((
                    "measured diffusivity",
                    format!(
                        "temperature of the measured diffusion coefficient {} K must lie above 0 K and at most 5000 K",
                        n(tk)
                    ),
                ));
            }
        }
        if let Some(r) = self.c_rates.iter().find(|r| !(**r > 0.0 && r.is_finite())) {
            return Err((
                "C-rate",
                format!("C-rate {} must be a positive number", n(*r)),
            ));
        }
        let m = self.min_ion_distance_a;
        if !(m > 0.0 && m <= Self::MAX_MIN_ION_DISTANCE_A) {
            return Err((
                "minimum ion distance",
                format!(
                    "minimum ion distance {} A must lie above 0 and at most {} A",
                    n(m),
                    Self::MAX_MIN_ION_DISTANCE_A
                ),
            ));
        }
        if let Some(x) = self.ions_per_formula_unit
            && !(x >= 0.0 && x.is_finite())
        {
            return Err((
                "ions per formula unit",
                format!(
                    "inserted ions per formula unit {} must be a number at least 0",
                    n(x)
                ),
            ));
        }
        Ok(())
    }
}

/// What a warning is about, so that a program can filter warnings without reading sentences.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum WarningKind {
    /// Reading the file, its symmetry, its oxidation states.
    Structure,
    /// A bond-valence parameter or radius from a fallback rule.
    Parameters,
    /// The bond-valence check of the structure.
    Valence,
    /// The landscape: an empty host, a pocket deeper than the occupied sites.
    Landscape,
    /// The site network and its internal checks.
    Network,
    /// The transport estimates.
    Transport,
    /// The capacity estimates.
    Capacity,
}

impl WarningKind {
    /// The kind's name in outputs (`structure`, `parameters`, ...).
    pub fn name(&self) -> &'static str {
        match self {
            WarningKind::Structure => "structure",
            WarningKind::Parameters => "parameters",
            WarningKind::Valence => "valence",
            WarningKind::Landscape => "landscape",
            WarningKind::Network => "network",
            WarningKind::Transport => "transport",
            WarningKind::Capacity => "capacity",
        }
    }
}

/// A problem that did not stop the analysis: its kind and a plain sentence. Reads as the
/// sentence (`Display`, and `Deref` to `str`).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Warning {
    pub kind: WarningKind,
    pub message: String,
}

impl Warning {
    pub fn new(kind: WarningKind, message: impl Into<String>) -> Self {
        Warning {
            kind,
            message: message.into(),
        }
    }
}

impl std::fmt::Display for Warning {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(&self.message)
    }
}

impl std::ops::Deref for Warning {
    type Target = str;
    fn deref(&self) -> &str {
        &self.message
    }
}

/// Transport through one percolating network.
#[derive(Debug, Clone, PartialEq)]
pub struct ChannelTransport {
    pub dimension: u8,
    pub barrier_ev: f64,
    /// Hop length of the hopping model (A): the length that makes the hopping model with the
    /// channel's barrier reproduce the exact diffusion of the chain of sites and saddles along
    /// the channel's profile ([`chain_diffusion_per_attempt`]), or the mean length of the open
    /// hops when there is no profile.
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
    /// The model's barrier uncertainty (eV) behind the bands below; None for a measured D.
    pub barrier_uncertainty_ev: Option<f64>,
    /// D at the barrier plus and minus the uncertainty (low, high; m^2/s).
    pub diffusion_band_m2_s: Option<(f64, f64)>,
    /// Conductivity at the same two barriers (low, high; S/cm).
    pub conductivity_band_s_cm: Option<(f64, f64)>,
    /// Largest particle diameter at each C-rate of `rates` for the low and high D (um).
    pub particle_band_um: Vec<(f64, f64)>,
    /// False when D is below [`NO_BULK_TRANSPORT_M2_S`]: the numbers then mean nothing
    /// for a battery and renderers say so in words.
    pub bulk_transport: bool,
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
    /// Percolation of the valence-mismatch grid (v.u.); None when the caller asked not to
    /// compute it ([`AnalysisOptions::mismatch_channels`]).
    pub mismatch_percolation: Option<Percolation>,
    pub network: Option<Network>,
    /// The site graph's own percolation (must equal `percolation`).
    pub graph_percolation: Option<Percolation>,
    pub profiles: Vec<Profile>,
    pub transport: Vec<ChannelTransport>,
    pub capacity: Option<CapacityReport>,
    /// Why there is no capacity, in plain words, when there is none (a solid electrolyte: no
    /// redox-active cation in the framework).
    pub capacity_note: Option<String>,
    pub packing: Option<SitePacking>,
    pub warnings: Vec<Warning>,
    /// Seconds per stage.
    pub timings: Vec<(&'static str, f64)>,
    /// The interpretation every renderer reads: networks, orientations, hop groups, headline.
    pub summary: crate::summary::Summary,
}

#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum AnalysisError {
    #[error("{0}")]
    Model(#[from] crate::bv::BvError),
    #[error("analysis stopped on request")]
    Cancelled(#[from] landscape::Cancelled),
    #[error("structure '{structure}': {message}")]
    Structure { structure: String, message: String },
    /// An option out of its range: the same for every structure of a batch.
    #[error("{0}")]
    Options(String),
    /// The structure's grid would exceed the memory or time budget ([`crate::limits`]).
    #[error("structure '{structure}': {message}")]
    OverBudget { structure: String, message: String },
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

/// Grid points per axis for a spacing (A), compatible with the structure's symmetry
/// ([`Grid::dims_for_symmetry`]).
pub fn grid_dims(structure: &Structure, spacing_a: f64) -> [usize; 3] {
    Grid::dims_for_symmetry(&structure.lattice, spacing_a, &structure.symmetry.ops)
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

/// The grid point where each occupied site of the mobile ion sits in the landscape: the lowest
/// point within [`OCCUPIED_WELL_RADIUS_A`] of the site. Barriers are measured from these points
/// (see [`percolation::percolate_marked`]).
pub fn occupied_wells(grid: &Grid, sites: &[MobileSite]) -> Vec<usize> {
    let mut v: Vec<usize> = sites
        .iter()
        .map(|s| grid.lowest_within(s.frac, OCCUPIED_WELL_RADIUS_A))
        .collect();
    v.sort_unstable();
    v.dedup();
    v
}

/// Says so when a network's lowest point is an empty pocket clearly deeper than the sites the
/// ion occupies (the barrier is then measured from the occupied sites).
fn deeper_void_warning(p: &Percolation, grid: &Grid, warnings: &mut Vec<Warning>) {
    let Some(t) = p.thresholds.iter().flatten().next() else {
        return;
    };
    let Some(occupied) = t.marked_lowest else {
        return;
    };
    let depth = occupied - t.channel.lowest;
    if depth as f64 > DEEPER_VOID_EV {
        let f = grid.frac(grid.ijk(t.channel.lowest_point)).wrapped();
        warnings.push(Warning::new(WarningKind::Landscape, format!(
            "the landscape's lowest point, an empty pocket at ({:.3}, {:.3}, {:.3}), lies {:.2} eV below the sites the ion occupies; barriers are measured from the occupied sites",
            f.0.x, f.0.y, f.0.z, depth
        )));
    }
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
    opts.validate()?;
    let spacing = opts
        .spacing_a
        .unwrap_or_else(|| default_spacing_a(s.volume()));
    let plan = crate::limits::plan_grid(&s.lattice, s.sites.len(), spacing, &opts.budget, |sp| {
        grid_dims(&s, sp)
    })
    .map_err(|message| AnalysisError::OverBudget {
        structure: s.name.clone(),
        message,
    })?;
    let land = landscape::compute(&model, plan.dims, &opts.progress)?;
    Ok((s, note, model, prov, land))
}

/// Runs the whole job on one structure.
pub fn analyse(structure: &Structure, opts: &AnalysisOptions) -> Result<Analysis, AnalysisError> {
    let mut timings = Vec::new();
    let t0 = Instant::now();
    let (s, oxidation_note, model, provenance, land) = model_and_landscape(structure, opts)?;
    let mut warnings: Vec<Warning> = s
        .warnings
        .iter()
        .map(|w| Warning::new(WarningKind::Structure, w.clone()))
        .collect();
    timings.push(("model and grids", t0.elapsed().as_secs_f64()));
    if provenance.uses_fallback {
        warnings.push(Warning::new(
            WarningKind::Parameters,
            "a probe-anion pair uses the O'Keeffe-Brese estimate of R0 (no tabulated parameters): treat barriers with extra caution",
        ));
    }
    if provenance.removed_mobile == 0.0 {
        warnings.push(Warning::new(
            WarningKind::Landscape,
            format!(
                "the structure has no {0}: its framework is analysed as an empty host for {0}",
                opts.ion
            ),
        ));
    }
    for r in provenance
        .radii
        .iter()
        .chain(std::iter::once(&provenance.probe.radius))
        .filter(|r| r.origin == crate::bv::ValueOrigin::Fallback)
    {
        let why = r.notes.last().cloned().unwrap_or_default();
        let w = Warning::new(
            WarningKind::Parameters,
            format!("radius of {} is a fallback: {why}", r.species_name()),
        );
        if !warnings.contains(&w) {
            warnings.push(w);
        }
    }
    other_mobile_ions_warning(&s, opts, &provenance, &mut warnings);
    // first-shell parameters for every pair: the convention of the GII thresholds, and the same
    // index `hopmap valence` prints for the file
    let valence = match valence_check(&s, &opts.table) {
        Ok(v) => Some(v),
        Err(e) => {
            warnings.push(Warning::new(
                WarningKind::Valence,
                format!("valence check not possible: {e}"),
            ));
            None
        }
    };
    let spacing_a = land.energy.spacing();
    if opts.spacing_a.is_none() {
        let coarse = default_spacing_a(s.volume());
        if coarse > 0.1 + 1e-9 {
            let fine = crate::limits::points_at(&s.lattice, 0.1);
            warnings.push(Warning::new(
                WarningKind::Landscape,
                format!(
                    "the cell of {:.0} A^3 is large: the grid was coarsened from 0.1 A to {:.3} A to keep about 1e6 points; barriers can move by several hundredths of an eV (pass --spacing 0.1 for the fine grid: {:.1e} points, about {})",
                    s.volume(),
                    coarse,
                    fine,
                    crate::limits::human_bytes(fine * crate::limits::BYTES_PER_GRID_POINT as f64)
                ),
            ));
        }
    }

    let t = Instant::now();
    let ceiling = model.energy_cap as f32;
    let mobile = mobile_sites(&s, opts.ion);
    let marks = occupied_wells(&land.energy, &mobile);
    let with_network = !opts.percolation_only;
    let framework = framework_ions(&model);
    let input = NetworkInput {
        ops: &s.symmetry.ops,
        framework: &framework,
        mobile_sites: &mobile,
        mobile_radius: model.probe.radius,
    };
    let net_opts = NetworkOptions {
        ceiling,
        ..Default::default()
    };
    // Four stages after the grids: the energy percolation, then the channel profiles (which
    // read it); the valence-mismatch percolation and the site network, which read only the
    // grids. The two independent ones are handed to the other core while this one sweeps the
    // energy grid and then searches the profiles, whose searches the other core takes up when
    // it is done: neither core waits at a stage boundary. Each records its own wall time.
    let mut mismatch_percolation = None;
    let mut network_out = None;
    let (percolation, percolation_s, profiles_out) = rayon::scope(|scope| {
        scope.spawn(|_| {
            mismatch_percolation = opts
                .mismatch_channels
                .then(|| percolation::percolate(&land.mismatch, model.mismatch_cap as f32));
        });
        if with_network {
            scope.spawn(|_| {
                let t = Instant::now();
                let net = network::build(&land.energy, &input, &net_opts);
                let graph_perc = net.percolate(&land.energy);
                network_out = Some((net, graph_perc, t.elapsed().as_secs_f64()));
            });
        }
        let p = percolation::percolate_marked(&land.energy, ceiling, &marks);
        let percolation_s = t.elapsed().as_secs_f64();
        let found = with_network.then(|| {
            let t = Instant::now();
            (
                profiles(&land.energy, &p, ceiling),
                t.elapsed().as_secs_f64(),
            )
        });
        (p, percolation_s, found)
    });
    deeper_void_warning(&percolation, &land.energy, &mut warnings);
    timings.push(("percolation", percolation_s));

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
        capacity_note: None,
        packing: None,
        warnings,
        timings,
        summary: crate::summary::Summary {
            ion: opts.ion,
            networks: vec![],
            no_path_below_ev: None,
            hop_groups: vec![],
            deeper_pocket: None,
            headline: String::new(),
            figures: Default::default(),
        },
    };
    let (Some((net, graph_perc, net_s)), Some((found_profiles, profiles_s))) =
        (network_out, profiles_out)
    else {
        // percolation only
        out.summary = crate::summary::summarise(&out);
        return Ok(out);
    };
    for d in 1..=3u8 {
        let (g, v) = (out.percolation.energy(d), graph_perc.energy(d));
        if g != v {
            out.warnings.push(Warning::new(
                WarningKind::Network,
                format!(
                    "internal check: the site graph percolates in {d}D at {v:?} eV but the grid at {g:?} eV; please report this structure"
                ),
            ));
        }
    }
    out.timings.push(("site network", net_s));
    out.profiles = found_profiles;
    out.timings.push(("profiles", profiles_s));

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
    let (cap, packing, cap_note) = capacity_estimate(
        &out.structure,
        opts.ion,
        probe_charge,
        &out.percolation,
        &net,
        &opts.rate,
        &mut out.warnings,
    );
    out.capacity = cap;
    out.capacity_note = cap_note;
    out.packing = packing;
    out.network = Some(net);
    out.graph_percolation = Some(graph_perc);
    out.summary = crate::summary::summarise(&out);
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

/// Diffusion along a periodic chain of sites, exactly: sites `i` with energies `E_i` (eV) and the
/// saddle `S_i` (eV) between site `i` and the next, one period of length `L` (A). With per-
/// direction hop rates `w_i = nu exp(-(S_i - E_i) / kT) / 2` and equilibrium occupations
/// `pi_i ~ exp(-E_i / kT)` over one period, a steady flux through the chain gives (the resistances
/// of its bonds add in series; detailed balance)
///
/// `D = L^2 / sum_i 1 / (pi_i w_i)`
///
/// which for N equal sites is the random walk `D = (L/N)^2 w`. Returns `D / nu` (A^2, per unit
/// attempt frequency).
pub fn chain_diffusion_per_attempt(
    sites_ev: &[f64],
    saddles_ev: &[f64],
    period_a: f64,
    kt_ev: f64,
) -> Option<f64> {
    if sites_ev.is_empty() || sites_ev.len() != saddles_ev.len() || !(period_a > 0.0 && kt_ev > 0.0)
    {
        return None;
    }
    let e0 = sites_ev.iter().copied().fold(f64::INFINITY, f64::min);
    let z: f64 = sites_ev.iter().map(|e| (-(e - e0) / kt_ev).exp()).sum();
    let resistance: f64 = sites_ev
        .iter()
        .zip(saddles_ev)
        .map(|(e, s)| {
            let pi = (-(e - e0) / kt_ev).exp() / z;
            let w = 0.5 * (-(s - e) / kt_ev).exp();
            1.0 / (pi * w)
        })
        .sum();
    (resistance.is_finite() && resistance > 0.0).then(|| period_a * period_a / resistance)
}

/// Removes from a periodic chain (site `i` is followed by saddle `i`, then site `i + 1`) every
/// well shallower than `depth` (eV) below the lower of its two saddles, shallowest first, keeping
/// the higher of those two saddles: a walker does not rest in a dip shallower than a few kT, so
/// such a dip neither adds a hop nor splits a barrier in two. At least one site is kept.
fn merge_shallow_wells(sites: &mut Vec<f64>, saddles: &mut Vec<f64>, depth: f64) {
    while sites.len() > 1 {
        let n = sites.len();
        let (k, d) = (0..n)
            .map(|k| {
                let left = saddles[(k + n - 1) % n];
                (k, left.min(saddles[k]) - sites[k])
            })
            .min_by(|a, b| a.1.total_cmp(&b.1))
            .expect("non-empty");
        if d >= depth {
            break;
        }
        let left = (k + n - 1) % n;
        let high = saddles[left].max(saddles[k]);
        saddles[left] = high;
        sites.remove(k);
        saddles.remove(k);
    }
}

/// Hop length (A) of the hopping model from a channel profile: the length `a` for which the
/// hopping model with the channel's barrier `Ea` gives the diffusion coefficient of the periodic
/// chain of minima and saddles along the profile ([`chain_diffusion_per_attempt`]) at the
/// temperature: `a^2 nu exp(-Ea/kT) / 2 = D_chain`. For N equal sites per repeat it is the
/// repeat over N (olivine: b/2); a shallow intermediate minimum hardly shortens it, a deep one
/// (the tetrahedral site between two octahedral sites of a layered oxide) brings it from the
/// repeat towards the repeat over sqrt(2). Never longer than the repeat.
fn hop_length_from_profile(
    p: &Profile,
    lattice: &crate::lattice::Lattice,
    barrier_ev: f64,
    temperature_k: f64,
) -> Option<f64> {
    let t = nalgebra::Vector3::new(
        p.translation[0] as f64,
        p.translation[1] as f64,
        p.translation[2] as f64,
    );
    let repeat = lattice.frac_delta_length(t);
    // minima along one period (the last point is the image of the first) and the highest point
    // between each minimum and the next
    let e: Vec<f64> = p.points.iter().map(|q| q.energy as f64).collect();
    if e.len() < 3 {
        return None;
    }
    let n = e.len() - 1;
    let at = |i: usize| e[i % n];
    let minima: Vec<usize> = (0..n)
        .filter(|&i| at(i + n - 1) > at(i) && at(i + 1) >= at(i))
        .collect();
    if minima.is_empty() {
        return None;
    }
    let mut sites: Vec<f64> = minima.iter().map(|&i| at(i)).collect();
    let mut saddles: Vec<f64> = minima
        .iter()
        .enumerate()
        .map(|(k, &i)| {
            let next = minima.get(k + 1).copied().unwrap_or(minima[0] + n);
            (i..=next).map(at).fold(f64::NEG_INFINITY, f64::max)
        })
        .collect();
    merge_shallow_wells(&mut sites, &mut saddles, SHALLOW_SITE_EV);
    let kt = transport::BOLTZMANN_EV_PER_K * temperature_k;
    let d = chain_diffusion_per_attempt(&sites, &saddles, repeat, kt)?;
    let a = (d / (0.5 * (-barrier_ev / kt).exp())).sqrt();
    (a.is_finite() && a > 0.0).then_some(a.min(repeat))
}

/// Mean length (A) of the open hops at `level`, in the network reached at that level.
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

/// The thresholds worth reporting on their own: a dimension reached at the same energy as a
/// higher one, or within [`CHANNEL_MERGE_EV`] below it (a spinel's 1D, 2D and 3D networks all
/// open at once), is left to the higher one (the rule of [`crate::summary::networks`]).
pub fn distinct_thresholds(p: &Percolation) -> Vec<&percolation::Threshold> {
    p.thresholds
        .iter()
        .flatten()
        .filter(|t| !crate::summary::folded_into_higher(p, t))
        .collect()
}

/// Mobile ions per m^3: those of the structure, or `inserted` per formula unit for a host.
fn carriers_per_m3(s: &Structure, ion: Element, inserted: Option<f64>) -> Option<f64> {
    let present = s.cell_composition().get(&ion).copied().unwrap_or(0.0);
    let (z, _) = s.formula_and_z();
    let per_cell = match inserted {
        Some(x) => x * z,
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
    warnings: &mut Vec<Warning>,
) -> Vec<ChannelTransport> {
    let mut out = Vec::new();
    for t in distinct_thresholds(p) {
        let Some(hop) = profiles
            .iter()
            .find(|p| p.dimension == t.dimension)
            .and_then(|p| hop_length_from_profile(p, lattice, t.barrier as f64, r.temperature_k))
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
                        warnings.push(Warning::new(
                            WarningKind::Transport,
                            format!(
                                "transport estimate of the {}D network skipped: {e}",
                                t.dimension
                            ),
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
        let sigma = |d: f64| {
            carriers
                .and_then(|n| transport::nernst_einstein(n, charge, d, temperature_k).ok())
                .map(|c| c.siemens_per_cm())
        };
        let conductivity_s_cm = sigma(diffusion);
        // the band of the model's barrier uncertainty (not for a measured D)
        let band = model.as_ref().map(|m| {
            let at = |ea: f64| {
                HoppingModel {
                    barrier_ev: ea.max(0.0),
                    ..*m
                }
                .diffusion_coefficient(temperature_k)
            };
            (
                at(barrier + BARRIER_UNCERTAINTY_EV),
                at(barrier - BARRIER_UNCERTAINTY_EV),
            )
        });
        let particle_band_um = match band {
            Some((lo, hi)) => {
                let table =
                    |d: f64| transport::rate_table(d, t.dimension, &r.c_rates).unwrap_or_default();
                table(lo)
                    .iter()
                    .zip(table(hi).iter())
                    .map(|(a, b)| (a.max_particle_diameter_um, b.max_particle_diameter_um))
                    .collect()
            }
            None => vec![],
        };
        out.push(ChannelTransport {
            barrier_uncertainty_ev: model.as_ref().map(|_| BARRIER_UNCERTAINTY_EV),
            diffusion_band_m2_s: band,
            conductivity_band_s_cm: band.and_then(|(lo, hi)| Some((sigma(lo)?, sigma(hi)?))),
            particle_band_um,
            bulk_transport: diffusion >= NO_BULK_TRANSPORT_M2_S,
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

/// Capacity estimate and the site packing behind it; when there is no capacity, why, in words.
fn capacity_estimate(
    s: &Structure,
    ion: Element,
    charge: u8,
    p: &Percolation,
    net: &Network,
    r: &RateOptions,
    warnings: &mut Vec<Warning>,
) -> (Option<CapacityReport>, Option<SitePacking>, Option<String>) {
    let (z, _) = s.formula_and_z();
    let comp = s.cell_composition();
    let per_fu: capacity::Composition = comp.iter().map(|(e, n)| (*e, n / z)).collect();
    let present = per_fu.get(&ion).copied().unwrap_or(0.0);
    // sites in the highest-dimensional network reached, at its threshold
    let packing = p.thresholds.iter().flatten().last().and_then(|t| {
        let level = t.energy;
        let open: Vec<&network::Site> = net.sites.iter().filter(|x| x.energy <= level).collect();
        let cands: Vec<CandidateSite> = open
            .iter()
            .map(|site| CandidateSite {
                frac: site.frac,
                energy_ev: Some(site.energy as f64),
            })
            .collect();
        if cands.is_empty() {
            return None;
        }
        let groups: Vec<usize> = open.iter().map(|x| x.orbit).collect();
        match capacity::pack_sites_best(&s.lattice, &cands, &groups, r.min_ion_distance_a) {
            Ok(pk) => Some(pk),
            Err(e) => {
                warnings.push(Warning::new(
                    WarningKind::Capacity,
                    format!("site-limited capacity skipped: {e}"),
                ));
                None
            }
        }
    });
    let site = packing.as_ref().map(|pk| (pk, z));
    let skipped = |e: capacity::CapacityError, warnings: &mut Vec<Warning>| {
        warnings.push(Warning::new(
            WarningKind::Capacity,
            format!("capacity estimate skipped: {e}"),
        ));
    };
    // an amount set by the user: that many ions (times their charge) per formula unit
    if let Some(ions) = r.ions_per_formula_unit {
        return match CapacityReport::new(
            &per_fu,
            ions * charge as f64,
            site,
            charge,
            Some(s.density()),
        ) {
            Ok(c) => (Some(c), packing, None),
            Err(e) => {
                skipped(e, warnings);
                (None, packing, None)
            }
        };
    }
    // otherwise what the redox-active cations of the framework allow
    let mut cations: Vec<capacity::FrameworkCation> = Vec::new();
    // mobile ions sharing a site with a framework cation stay where they are (Li on the 16d
    // site of Li4Ti5O12): they do not take room on the reachable sites
    let mut pinned = 0.0;
    for site in &s.sites {
        let shared = site.occupants.iter().any(|o| o.species.element != ion);
        for o in &site.occupants {
            let q = o.species.oxidation.unwrap_or(0.0);
            if o.species.element == ion {
                if shared {
                    pinned += o.occupancy / z;
                }
                continue;
            }
            if q <= 0.0 {
                continue;
            }
            match cations
                .iter_mut()
                .find(|c| c.element == o.species.element && (c.state - q).abs() < 1e-6)
            {
                Some(c) => c.amount += o.occupancy / z,
                None => cations.push(capacity::FrameworkCation {
                    element: o.species.element,
                    state: q,
                    amount: o.occupancy / z,
                }),
            }
        }
    }
    let towards = |d| capacity::redox_bound_towards(&cations, present, charge, d);
    let (Some(ext), Some(ins)) = (
        towards(capacity::RedoxDirection::Extraction),
        towards(capacity::RedoxDirection::Insertion),
    ) else {
        let mut names: Vec<String> = cations
            .iter()
            .map(|c| c.element.symbol().to_string())
            .collect();
        names.dedup();
        let note = format!(
            "no capacity: no framework cation can change its oxidation state ({}), so this is a solid electrolyte, not an electrode",
            if names.is_empty() {
                "there are no framework cations".to_string()
            } else {
                format!("{} only", names.join(", "))
            }
        );
        return (None, packing, Some(note));
    };
    let site_ions = packing.as_ref().map(|pk| pk.ions_per_cell / z + pinned);
    // the larger of the two directions (ties to extraction): a lithiated cathode gives up its
    // ions (LiCoO2), a titanate or an empty host takes them in (Li4Ti5O12), a partly filled
    // bronze goes the way with more room
    let report = |b: &capacity::RedoxBound| {
        CapacityReport::from_redox(&per_fu, b, site_ions, present, charge, Some(s.density()))
    };
    let chosen = match (report(&ext), report(&ins)) {
        (Ok(e), Ok(i)) => Ok(if i.capacity_mah_g > e.capacity_mah_g + 1e-9 {
            i
        } else {
            e
        }),
        (Ok(e), Err(_)) => Ok(e),
        (Err(_), Ok(i)) => Ok(i),
        (Err(e), Err(_)) => Err(e),
    };
    match chosen {
        Ok(c) => {
            let note = (c.capacity_mah_g <= 0.0).then(|| {
                "no capacity: the framework's cations can neither be oxidised with the ions present nor reduced with room for more".to_string()
            });
            (Some(c), packing, note)
        }
        Err(e) => {
            skipped(e, warnings);
            (None, packing, None)
        }
    }
}

/// Says which other mobile ions stay in the framework when the probe is another ion (Li left
/// in place under `--ion Mg`), and how to take them out (`--exclude`).
fn other_mobile_ions_warning(
    s: &Structure,
    opts: &AnalysisOptions,
    provenance: &ModelProvenance,
    warnings: &mut Vec<Warning>,
) {
    const USUAL_MOBILE: [&str; 4] = ["Li", "Na", "K", "Ag"];
    let excluded: Vec<&str> = provenance
        .excluded
        .iter()
        .map(|(l, _)| l.as_str())
        .collect();
    for sym in USUAL_MOBILE {
        let Some(e) = Element::from_symbol(sym) else {
            continue;
        };
        if e == opts.ion {
            continue;
        }
        let mut labels: Vec<String> = Vec::new();
        for site in &s.sites {
            let site_label = s
                .asymmetric_sites
                .get(site.asym_index)
                .map(|a| a.label.as_str())
                .unwrap_or(site.label());
            for o in site.occupants.iter().filter(|o| o.species.element == e) {
                if excluded.contains(&o.label.as_str()) || excluded.contains(&site_label) {
                    continue;
                }
                if !labels.contains(&o.label) {
                    labels.push(o.label.clone());
                }
            }
        }
        if labels.is_empty() {
            continue;
        }
        warnings.push(Warning::new(
            WarningKind::Landscape,
            format!(
                "{sym} ({}) stays in the framework as fixed {sym}+ ions while {} is the mobile ion; to treat those sites as empty, add --exclude {}",
                labels.join(", "),
                opts.ion,
                labels.join(",")
            ),
        ));
    }
}

/// The headline in one sentence, e.g. "Li: 1D channels along \[010\], barrier 0.41 ± 0.15 eV; 2D
/// at 0.79 eV; 3D at 1.80 eV" (see [`crate::summary`]).
pub fn headline(a: &Analysis) -> String {
    a.summary.headline.clone()
}
