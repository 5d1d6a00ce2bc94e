//! A family of frameworks compared: the main job run over several members (structure files, or
//! frameworks built in memory) and one table of what a chemist choosing between block sizes or
//! tunnel types asks for.
//!
//! Per member, read from its finished [`Analysis`] and nothing else:
//!
//! - **tunnel**: the network the answer leads with ([`crate::summary::Summary::networks`], the
//!   lowest): its dimension, direction, barrier (eV) and the model's uncertainty of it;
//! - **crossing**: what it costs to leave the tunnels, i.e. to cross between blocks (a shear
//!   border) or between tunnels: the first reported network of higher dimension, with
//!   `cost = E_next - E_tunnel` (eV, the threshold it opens at above the tunnel's threshold) and
//!   its barrier from the ion's starting level. Its uncertainty is the model's barrier
//!   uncertainty ([`crate::analysis::BARRIER_UNCERTAINTY_EV`]), not reduced for the correlation of
//!   two thresholds of one landscape;
//! - **capacity**: the redox-limited and site-limited bounds of [`crate::capacity`], both
//!   gravimetric (mAh/g, `Q = x F / (3.6 M)`) and volumetric (mAh/cm^3, times the crystallographic
//!   density), the redox couples and the electrons per redox-active transition-metal atom (the
//!   couples of [`crate::capacity::redox_window`]: Ti4+ -> Ti3+ 1 e, Nb5+ -> Nb3+ 2 e, Mo6+ ->
//!   Mo4+ 2 e, W6+ -> W5+ 1 e; common practice);
//! - **rate**: the largest particle (diameter `2 L`, `L = sqrt(2 d D t)`, um) that bulk diffusion
//!   down the tunnel network charges in time at 10C and 60C, with the band of the barrier's
//!   uncertainty ([`crate::transport::rate_table`]).
//!
//! Members are files or framework specifications built first ([`crate::build`]); they are
//! built and analysed in parallel (rayon; each analysis is parallel inside too). A member that
//! cannot be read, built or analysed becomes a row with its error: one bad member never stops
//! the family. Ranking rule: [`RANKING_RULE`].

use crate::analysis::{Analysis, AnalysisOptions};
use crate::api::{Error, ErrorKind};
use crate::build::{self, BuildError, BuildOptions, FrameworkSpec, Refinement};
use crate::capacity::{self, CapacityLimit};
use crate::element::Element;
use crate::structure::Structure;
use crate::summary::Orientation;
use crate::transport;
use rayon::prelude::*;
use std::path::PathBuf;

/// How the members are ranked, in one sentence (every renderer prints it).
pub const RANKING_RULE: &str = "ranked by the barrier of the tunnel network, lowest first (ties: the larger particle charging at 10C first); members with no path below the energy cap follow, then members that failed, each in the order given";

/// The C-rates of the family's rate columns: a full charge in 6 min and in 1 min.
pub const FAMILY_C_RATES: [f64; 2] = [10.0, 60.0];

/// What kind of framework a member is, for the figures: a crystallographic-shear block phase
/// of `n x m` corner-sharing octahedra, a tunnel (bronze, rutile, hollandite) framework, or
/// anything else.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum MemberKind {
    Block {
        n: u32,
        m: u32,
    },
    /// The tunnel kind in words, e.g. "hexagonal tunnel".
    Tunnel(String),
    Other,
}

impl MemberKind {
    /// "3x4" for a block, the tunnel kind, or the empty string.
    pub fn size_label(&self) -> String {
        match self {
            MemberKind::Block { n, m } => format!("{n}x{m}"),
            MemberKind::Tunnel(t) => t.clone(),
            MemberKind::Other => String::new(),
        }
    }

    /// Octahedra per block (`n m`), the block-size axis of the figures.
    pub fn octahedra_per_block(&self) -> Option<u32> {
        match self {
            MemberKind::Block { n, m } => Some(n * m),
            _ => None,
        }
    }

    /// Reads a block size written `NxM` (`3x4`, `4X5`); None for anything else.
    pub fn parse_block(text: &str) -> Option<MemberKind> {
        let (a, b) = text.trim().split_once(['x', 'X'])?;
        let n: u32 = a.trim().parse().ok()?;
        let m: u32 = b.trim().parse().ok()?;
        (n >= 1 && m >= 1 && n <= 64 && m <= 64).then_some(MemberKind::Block { n, m })
    }
}

/// Where a member's structure comes from.
#[derive(Debug, Clone)]
pub enum MemberSource {
    /// A structure file (CIF, POSCAR, extended XYZ), read with its symmetry completed.
    File(PathBuf),
    /// A structure already in memory.
    Structure(Box<Structure>),
    /// A framework to build first ([`crate::build`]), with the builder's default options.
    Spec(Box<FrameworkSpec>),
    /// A member that could not be made (a specification that does not parse or build).
    Failed(Error),
}

/// One member as asked for: its label, kind, where it comes from, and the text that named it
/// (the path or the specification).
#[derive(Debug, Clone)]
pub struct MemberInput {
    pub label: String,
    pub kind: MemberKind,
    pub origin: String,
    pub source: MemberSource,
}

impl MemberInput {
    /// A member built from a framework specification ([`FrameworkSpec::parse`], e.g.
    /// `block:3x4:tet:Nb:W`): its kind and default label come from the spec. A spec that does not
    /// parse becomes a member that failed, with the builder's message.
    pub fn from_spec(text: &str, label: Option<&str>) -> MemberInput {
        match FrameworkSpec::parse(text) {
            Ok(spec) => MemberInput {
                label: label.map(str::to_string).unwrap_or_else(|| spec.label()),
                kind: kind_of(&spec),
                origin: text.to_string(),
                source: MemberSource::Spec(Box::new(spec)),
            },
            Err(e) => MemberInput {
                label: label.unwrap_or(text).to_string(),
                kind: MemberKind::Other,
                origin: text.to_string(),
                source: MemberSource::Failed(build_error(&e)),
            },
        }
    }
}

/// The figure kind of a spec: block size, or the bronze's tunnel kind.
pub fn kind_of(spec: &FrameworkSpec) -> MemberKind {
    match spec {
        FrameworkSpec::Block { n, m, .. } => MemberKind::Block { n: *n, m: *m },
        FrameworkSpec::Bronze { kind, .. } => MemberKind::Tunnel(format!("{} bronze", kind.word())),
    }
}

/// A builder error as a library error: a spec that does not parse or balance is bad input; a
/// framework that could not be built is a structure problem.
fn build_error(e: &BuildError) -> Error {
    let kind = match e {
        BuildError::Spec { .. } | BuildError::Charge { .. } => ErrorKind::Input,
        BuildError::Build { .. } => ErrorKind::Structure,
    };
    Error {
        kind,
        file: None,
        place: None,
        message: e.to_string(),
    }
}

/// How a built member was made.
#[derive(Debug, Clone, PartialEq)]
pub struct BuiltNote {
    /// The spec in its compact text form.
    pub spec: String,
    pub construction: Vec<String>,
    pub refinement: Refinement,
}

/// The tunnel network of a member (the lowest network the answer reports).
#[derive(Debug, Clone, PartialEq)]
pub struct Tunnel {
    pub dimension: u8,
    /// Every direction (1D) or plane (2D) opening at the threshold; `[Space]` for 3D.
    pub orientations: Vec<Orientation>,
    pub threshold_ev: f64,
    pub barrier_ev: f64,
    pub uncertainty_ev: f64,
}

/// What it costs the ion to leave the tunnels.
#[derive(Debug, Clone, PartialEq)]
pub enum Crossing {
    /// A network of higher dimension opens `cost_ev` above the tunnel's threshold.
    Opens {
        dimension: u8,
        orientations: Vec<Orientation>,
        threshold_ev: f64,
        /// Its barrier from the ion's starting level (eV).
        barrier_ev: f64,
        /// Its threshold minus the tunnel's (eV).
        cost_ev: f64,
        uncertainty_ev: f64,
    },
    /// The tunnel network is already three-dimensional: nothing to cross.
    AlreadyThreeD,
    /// No network of higher dimension opens below the energy cap: crossing costs at least
    /// `at_least_ev` (the cap minus the tunnel's threshold).
    AboveCap { cap_ev: f64, at_least_ev: f64 },
}

impl Crossing {
    /// The crossing cost (eV), when a crossing network opens.
    pub fn cost_ev(&self) -> Option<f64> {
        match self {
            Crossing::Opens { cost_ev, .. } => Some(*cost_ev),
            _ => None,
        }
    }
}

/// The capacity bounds of a member, gravimetric and volumetric.
#[derive(Debug, Clone, PartialEq)]
pub struct MemberCapacity {
    /// The formula unit the capacities are quoted against (the host as analysed).
    pub formula: String,
    pub molar_mass_g_mol: f64,
    pub density_g_cm3: f64,
    /// "insertion" or "extraction" (the direction with the larger capacity).
    pub direction: Option<&'static str>,
    /// The couples behind the redox bound ("Nb5+/Nb3+").
    pub couples: Vec<String>,
    /// Redox-active transition-metal atoms per formula unit (elements of
    /// [`capacity::redox_window`]).
    pub redox_metals_per_formula_unit: f64,
    pub redox_electrons_per_formula_unit: f64,
    /// Electrons per redox-active transition-metal atom: the redox bound over those atoms.
    pub electrons_per_metal: Option<f64>,
    pub redox_mah_g: f64,
    pub redox_mah_cm3: f64,
    /// Ions per formula unit the reachable sites take (insertion: the room left on them).
    pub site_ions_per_formula_unit: Option<f64>,
    pub site_mah_g: Option<f64>,
    pub site_mah_cm3: Option<f64>,
    /// The smaller bound.
    pub capacity_mah_g: f64,
    pub capacity_mah_cm3: f64,
    pub limited_by: CapacityLimit,
}

/// The largest particle that charges at one C-rate through the tunnel network.
#[derive(Debug, Clone, PartialEq)]
pub struct ParticleAtRate {
    pub c_rate: f64,
    /// Diameter (um); None when there is no bulk transport ([`crate::analysis::NO_BULK_TRANSPORT_M2_S`]).
    pub diameter_um: Option<f64>,
    /// Diameters at the barrier plus and minus its uncertainty (low, high; um).
    pub band_um: Option<(f64, f64)>,
}

impl ParticleAtRate {
    /// True when the diameter exceeds [`transport::PRACTICAL_PARTICLE_MAX_UM`]: bulk diffusion
    /// is then not what limits the rate.
    pub fn not_limiting(&self) -> bool {
        self.diameter_um
            .is_some_and(|d| d > transport::PRACTICAL_PARTICLE_MAX_UM)
    }
}

/// What the family table shows for a member that was analysed.
#[derive(Debug, Clone)]
pub struct MemberResult {
    pub formula: String,
    pub space_group: String,
    /// The headline of the analysis.
    pub headline: String,
    pub tunnel: Option<Tunnel>,
    /// None when nothing percolates.
    pub crossing: Option<Crossing>,
    pub capacity: Option<MemberCapacity>,
    /// Why there is no capacity, when there is none.
    pub capacity_note: Option<String>,
    /// At [`FAMILY_C_RATES`].
    pub particles: Vec<ParticleAtRate>,
    pub warnings: Vec<String>,
    /// The analysis itself, for per-member reports.
    pub analysis: Box<Analysis>,
}

/// One row of the family.
#[derive(Debug, Clone)]
pub struct FamilyMember {
    pub label: String,
    pub kind: MemberKind,
    pub origin: String,
    pub result: Result<MemberResult, Error>,
    /// Place in the ranking (1 = best); None for a failed member.
    pub rank: Option<usize>,
    /// How the framework was built, for a member given as a spec that built.
    pub built: Option<BuiltNote>,
    /// Seconds the member took: reading or building, and the analysis.
    pub seconds: f64,
}

/// The family: members in ranked order, the ion and the rule.
#[derive(Debug, Clone)]
pub struct FamilyStudy {
    pub ion: Element,
    pub members: Vec<FamilyMember>,
    pub ranking_rule: &'static str,
}

impl FamilyStudy {
    /// Members that were analysed.
    pub fn answered(&self) -> impl Iterator<Item = (&FamilyMember, &MemberResult)> {
        self.members
            .iter()
            .filter_map(|m| m.result.as_ref().ok().map(|r| (m, r)))
    }
}

/// Reads the family's figures off one finished analysis.
pub fn member_result(a: Analysis) -> MemberResult {
    let tunnel = a.summary.first().map(|n| Tunnel {
        dimension: n.dimension,
        orientations: n.orientations.clone(),
        threshold_ev: n.threshold_ev,
        barrier_ev: n.barrier_ev,
        uncertainty_ev: n.uncertainty_ev,
    });
    let crossing = tunnel.as_ref().map(|t| {
        if t.dimension >= 3 {
            return Crossing::AlreadyThreeD;
        }
        match a
            .summary
            .networks
            .iter()
            .find(|n| n.dimension > t.dimension)
        {
            Some(n) => Crossing::Opens {
                dimension: n.dimension,
                orientations: n.orientations.clone(),
                threshold_ev: n.threshold_ev,
                barrier_ev: n.barrier_ev,
                cost_ev: n.threshold_ev - t.threshold_ev,
                uncertainty_ev: n.uncertainty_ev,
            },
            None => Crossing::AboveCap {
                cap_ev: a.model.energy_cap,
                at_least_ev: a.model.energy_cap - t.threshold_ev,
            },
        }
    });
    let capacity = member_capacity(&a);
    let particles = tunnel
        .as_ref()
        .map(|t| particles_at(&a, t.dimension))
        .unwrap_or_default();
    let (_, formula) = a.structure.formula_and_z();
    MemberResult {
        formula,
        space_group: a
            .structure
            .symmetry
            .hm_symbol
            .clone()
            .unwrap_or_else(|| "P 1".into()),
        headline: a.summary.headline.clone(),
        tunnel,
        crossing,
        capacity,
        capacity_note: a.capacity_note.clone(),
        particles,
        warnings: a.warnings.iter().map(|w| w.message.clone()).collect(),
        analysis: Box::new(a),
    }
}

/// Capacity bounds of an analysis, gravimetric and volumetric, with electrons per metal atom.
fn member_capacity(a: &Analysis) -> Option<MemberCapacity> {
    let c = a.capacity.as_ref()?;
    let density = a.structure.density();
    let (z, _) = a.structure.formula_and_z();
    let metals: f64 = a
        .structure
        .cell_composition()
        .iter()
        .filter(|(e, _)| **e != a.ion && capacity::redox_window(**e).is_some())
        .map(|(_, n)| n / z)
        .sum();
    let vol = |q: f64| capacity::volumetric_capacity_mah_cm3(q, density);
    Some(MemberCapacity {
        formula: c.formula.clone(),
        molar_mass_g_mol: c.molar_mass_g_mol,
        density_g_cm3: density,
        direction: c.direction.map(|d| d.word()),
        couples: c.couples.clone(),
        redox_metals_per_formula_unit: metals,
        redox_electrons_per_formula_unit: c.redox_electrons_per_formula_unit,
        electrons_per_metal: (metals > 0.0).then(|| c.redox_electrons_per_formula_unit / metals),
        redox_mah_g: c.redox_capacity_mah_g,
        redox_mah_cm3: vol(c.redox_capacity_mah_g),
        site_ions_per_formula_unit: c.site_ions_per_formula_unit,
        site_mah_g: c.site_capacity_mah_g,
        site_mah_cm3: c.site_capacity_mah_g.map(vol),
        capacity_mah_g: c.capacity_mah_g,
        capacity_mah_cm3: vol(c.capacity_mah_g),
        limited_by: c.limited_by,
    })
}

/// The largest particle at [`FAMILY_C_RATES`] for the transport of the network of `dimension`.
fn particles_at(a: &Analysis, dimension: u8) -> Vec<ParticleAtRate> {
    let t = a.transport.iter().find(|t| t.dimension == dimension);
    let diameters = |d: f64| {
        transport::rate_table(d, dimension, &FAMILY_C_RATES)
            .ok()
            .map(|rows| {
                rows.iter()
                    .map(|r| r.max_particle_diameter_um)
                    .collect::<Vec<_>>()
            })
    };
    let mid = t
        .filter(|t| t.bulk_transport)
        .and_then(|t| diameters(t.diffusion_m2_s));
    let band = t
        .filter(|t| t.bulk_transport)
        .and_then(|t| t.diffusion_band_m2_s)
        .and_then(|(lo, hi)| Some((diameters(lo)?, diameters(hi)?)));
    FAMILY_C_RATES
        .iter()
        .enumerate()
        .map(|(i, &c)| ParticleAtRate {
            c_rate: c,
            diameter_um: mid.as_ref().map(|v| v[i]),
            band_um: band.as_ref().map(|(lo, hi)| (lo[i], hi[i])),
        })
        .collect()
}

/// Analyses one member.
fn run_member(input: MemberInput, opts: &AnalysisOptions) -> FamilyMember {
    let start = std::time::Instant::now();
    let mut built = None;
    let result = match input.source {
        MemberSource::File(p) => crate::api::analyse_file(&p, opts),
        MemberSource::Structure(s) => {
            crate::api::analyse_structure(&s, opts).map_err(|e| e.in_file(&input.origin))
        }
        MemberSource::Spec(spec) => match build::build(&spec, &BuildOptions::default()) {
            Ok(b) => {
                built = Some(BuiltNote {
                    spec: spec.to_text(),
                    construction: b.construction.clone(),
                    refinement: b.refinement.clone(),
                });
                crate::api::analyse_structure(&b.structure, opts)
                    .map_err(|e| e.in_file(&input.origin))
            }
            Err(e) => Err(build_error(&e)),
        },
        MemberSource::Failed(e) => Err(e),
    }
    .map(member_result);
    FamilyMember {
        label: input.label,
        kind: input.kind,
        origin: input.origin,
        result,
        rank: None,
        built,
        seconds: start.elapsed().as_secs_f64(),
    }
}

/// Runs the main job over every member, in parallel, and ranks the rows ([`RANKING_RULE`]).
pub fn study(inputs: Vec<MemberInput>, opts: &AnalysisOptions) -> FamilyStudy {
    study_reporting(inputs, opts, &|_| {})
}

/// [`study`], calling `done` as each member's analysis ends (members run in parallel, so in
/// the order they finish): what a front end needs to show progress.
pub fn study_reporting(
    inputs: Vec<MemberInput>,
    opts: &AnalysisOptions,
    done: &(dyn Fn(&FamilyMember) + Sync),
) -> FamilyStudy {
    let members: Vec<FamilyMember> = inputs
        .into_par_iter()
        .map(|m| {
            let member = run_member(m, opts);
            done(&member);
            member
        })
        .collect();
    FamilyStudy {
        ion: opts.ion,
        members: rank(members),
        ranking_rule: RANKING_RULE,
    }
}

/// Orders members by [`RANKING_RULE`] and numbers the ranks of those with a path.
pub fn rank(members: Vec<FamilyMember>) -> Vec<FamilyMember> {
    let mut keyed: Vec<(usize, FamilyMember)> = members.into_iter().enumerate().collect();
    // group 0: a tunnel network; 1: analysed, nothing percolates; 2: failed
    let group = |m: &FamilyMember| match &m.result {
        Ok(r) if r.tunnel.is_some() => 0,
        Ok(_) => 1,
        Err(_) => 2,
    };
    let barrier = |m: &FamilyMember| {
        m.result
            .as_ref()
            .ok()
            .and_then(|r| r.tunnel.as_ref())
            .map_or(f64::INFINITY, |t| t.barrier_ev)
    };
    let particle = |m: &FamilyMember| {
        m.result
            .as_ref()
            .ok()
            .and_then(|r| r.particles.first())
            .and_then(|p| p.diameter_um)
            .unwrap_or(0.0)
    };
    keyed.sort_by(|(i, a), (j, b)| {
        group(a)
            .cmp(&group(b))
            .then(barrier(a).total_cmp(&barrier(b)))
            .then(particle(b).total_cmp(&particle(a)))
            .then(i.cmp(j))
    });
    let mut out: Vec<FamilyMember> = keyed.into_iter().map(|(_, m)| m).collect();
    for (k, m) in out.iter_mut().enumerate() {
        m.rank = (group(m) == 0).then_some(k + 1);
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn block_sizes_read_as_n_by_m() {
        assert_eq!(
            MemberKind::parse_block("3x4"),
            Some(MemberKind::Block { n: 3, m: 4 })
        );
        assert_eq!(
            MemberKind::parse_block("4X5").and_then(|k| k.octahedra_per_block()),
            Some(20)
        );
        assert_eq!(MemberKind::parse_block("hexagonal"), None);
        assert_eq!(MemberKind::parse_block("0x3"), None);
        assert_eq!(MemberKind::Block { n: 3, m: 3 }.size_label(), "3x3");
    }
}
