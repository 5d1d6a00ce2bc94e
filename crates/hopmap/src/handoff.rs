//! Hand-off to first-principles calculations: the geometry of a nudged-elastic-band (NEB)
//! calculation of one hop, and host cells filled with the mobile ion.
//!
//! Both read a finished [`Analysis`] and return plain data; writing POSCAR, extended XYZ, CIF
//! and JSON is the report crate's job.
//!
//! **NEB images** ([`neb_setup`]). The hop is either the rate-limiting pass of a channel (the
//! stretch of the channel's profile around its highest point, between the nearest sites of the
//! ion on either side) or a hop of the site network chosen by index. The end points are real
//! sites of the ion: the sites the file occupies when it holds the ion, else the refined minima
//! of the landscape that are not shallow. The moving ion follows hopmap's lowest-energy voxel
//! path, smoothed (the staircase of face steps removed by repeated three-point averaging at a
//! 0.05 A spacing, the ends held) and resampled to equal arc length; its energy at every image
//! is evaluated off the grid with the model itself. The supercell is the diagonal multiple of
//! the cell whose perpendicular widths all reach the requested distance, so that every lattice
//! translation of the supercell (every periodic image of the moving ion) is at least that long.
//! *Vacancy mode*: every ion of the file stays, the ions on the start and end sites are taken
//! out and the moving ion travels between them (a vacancy hop; the cell is one ion short).
//! *Interstitial mode*: every ion of the mobile element is taken out and one ion travels in the
//! empty host (the dilute limit).
//!
//! **Filled hosts** ([`populate`]). The host (the structure without the mobile ion) with ions on
//! the lowest-energy set of network sites that keeps every pair at least a stated distance
//! apart, at the filling asked: a branch-and-bound search over the sites by energy, bounded by
//! a node budget (the result says whether the set is proven lowest).

use crate::analysis::{Analysis, BARRIER_UNCERTAINTY_EV};
use crate::element::Element;
use crate::landscape::evaluate_point;
use crate::lattice::{Frac, Lattice};
use crate::network::merge::MERGE_DEPTH_EV;
use crate::network::profile::{Profile, TIE_TOLERANCE, path_between};
use crate::structure::{AsymmetricSite, Occupant, Site, Species, Structure, SymmetryInfo};
use nalgebra::{Matrix3, Vector3};

/// Default distance between periodic images of the moving ion, A.
pub const DEFAULT_MIN_IMAGE_A: f64 = 9.0;
/// Default number of intermediate images.
pub const DEFAULT_IMAGES: usize = 5;
/// A path point or network site this close to a site of the ion is on that site, A.
pub const ON_SITE_A: f64 = 0.5;
/// Largest supercell written, atoms.
pub const MAX_SUPERCELL_ATOMS: usize = 3000;
/// Default smallest distance between the ions placed by [`populate`], A.
pub const DEFAULT_MIN_ION_DISTANCE_A: f64 = 2.5;
/// Spacing of the smoothed path, A.
const PATH_STEP_A: f64 = 0.05;
/// Passes of three-point averaging over the smoothed path.
const SMOOTHING_PASSES: usize = 40;
/// Nodes the site search of [`populate`] may visit before it settles for the best found.
const SEARCH_BUDGET: usize = 2_000_000;

/// How the cell around the moving ion is built.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Mode {
    /// The file's ions stay; the moving ion hops into a vacancy.
    Vacancy,
    /// One ion alone in the host without the mobile element.
    Interstitial,
}

impl Mode {
    pub fn name(&self) -> &'static str {
        match self {
            Mode::Vacancy => "vacancy",
            Mode::Interstitial => "interstitial",
        }
    }
}

/// Which hop to hand on.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum HopChoice {
    /// The rate-limiting pass of the channel network of this dimension (None: the lowest
    /// network the answer reports).
    Channel(Option<u8>),
    /// The hop with this index in the site network (`hops[]` of `paths --json`).
    Hop(usize),
}

#[derive(Debug, Clone, PartialEq)]
pub struct NebOptions {
    pub choice: HopChoice,
    /// None: vacancy when the file holds the ion, interstitial otherwise.
    pub mode: Option<Mode>,
    /// Smallest distance between periodic images of the moving ion, A.
    pub min_image_a: f64,
    /// Intermediate images (the end points come on top).
    pub images: usize,
}

impl Default for NebOptions {
    fn default() -> Self {
        NebOptions {
            choice: HopChoice::Channel(None),
            mode: None,
            min_image_a: DEFAULT_MIN_IMAGE_A,
            images: DEFAULT_IMAGES,
        }
    }
}

/// An atom of a cell handed on.
#[derive(Debug, Clone, PartialEq)]
pub struct CellAtom {
    pub element: Element,
    pub oxidation: Option<f64>,
    pub label: String,
    /// Fractional position in the cell it belongs to, in [0, 1).
    pub frac: Frac,
}

/// A diagonal supercell of the analysed cell.
#[derive(Debug, Clone, PartialEq)]
pub struct Supercell {
    /// Multiples of the cell along a, b, c (the supercell matrix is their diagonal).
    pub multiples: [usize; 3],
    pub lattice: Lattice,
    /// Shortest nonzero lattice translation of the supercell, A: the distance between periodic
    /// images of any one atom.
    pub shortest_translation_a: f64,
}

impl Supercell {
    /// The supercell matrix, rows a', b', c' in units of a, b, c.
    pub fn matrix(&self) -> [[i64; 3]; 3] {
        let m = self.multiples.map(|x| x as i64);
        [[m[0], 0, 0], [0, m[1], 0], [0, 0, m[2]]]
    }
}

/// One end of the hop.
#[derive(Debug, Clone, PartialEq)]
pub struct EndPoint {
    /// Position in the analysed cell, unwrapped along the path (may lie outside [0, 1)).
    pub frac: Frac,
    /// Label of the file's site of the ion, when the end is one.
    pub label: Option<String>,
    /// Index of the network site at the end, when there is one within [`ON_SITE_A`].
    pub site: Option<usize>,
    /// Bond-valence site energy at the end, eV.
    pub energy_ev: f64,
}

/// One image of the band.
#[derive(Debug, Clone, PartialEq)]
pub struct NebImage {
    /// Position of the moving ion in the supercell, fractional, in [0, 1).
    pub frac: Frac,
    /// Cartesian position in the supercell, A.
    pub cart: [f64; 3],
    /// Arc length along the smoothed path from the start, A.
    pub arc_a: f64,
    /// Bond-valence site energy of the ion there, eV.
    pub bv_energy_ev: f64,
    /// Distance from the ion to the nearest framework atom (any element but the mobile one), A.
    pub nearest_framework_a: f64,
    /// Label of that atom.
    pub nearest_framework_label: String,
}

/// Everything a NEB calculation of one hop needs.
#[derive(Debug, Clone, PartialEq)]
pub struct NebSetup {
    pub ion: Element,
    /// Formal charge of the moving ion.
    pub ion_charge: f64,
    pub mode: Mode,
    /// Why this mode (chosen by the user, or the default for this file).
    pub mode_reason: String,
    /// What the hop is, in words.
    pub chosen_by: String,
    /// Dimension of the channel the pass belongs to (None for a hop chosen by index).
    pub channel_dimension: Option<u8>,
    /// The network hop (index into `network.hops`) whose saddle the path crosses, when known.
    pub hop: Option<usize>,
    pub start: EndPoint,
    pub end: EndPoint,
    /// Straight distance between the end points, A.
    pub end_to_end_a: f64,
    /// Length of the smoothed path, A.
    pub path_length_a: f64,
    pub supercell: Supercell,
    /// Every atom of the supercell except the moving ion (the same in every image).
    pub host: Vec<CellAtom>,
    /// Atoms of the file taken out of the supercell (labels and why).
    pub removed: Vec<String>,
    pub images: Vec<NebImage>,
    /// (arc length A, bond-valence energy eV) along the smoothed path, every 0.05 A.
    pub path_energies: Vec<(f64, f64)>,
    /// Highest grid value along the voxel path the images follow, eV.
    pub grid_saddle_ev: f64,
    /// Highest energy along the smoothed path minus the start's, eV.
    pub bv_barrier_ev: f64,
    /// Highest energy along the smoothed path minus the end's, eV.
    pub bv_barrier_backward_ev: f64,
    /// The model's barrier uncertainty, eV.
    pub uncertainty_ev: f64,
    pub notes: Vec<String>,
}

#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum HandoffError {
    #[error(
        "no site network: the landscape has no open region for {0} (nothing percolates below the cap)"
    )]
    NoNetwork(String),
    #[error("no hop to hand on: {0}")]
    NoHop(String),
    #[error("hop {index} does not exist: the network has {count} hops (0 to {last})", last = .count.saturating_sub(1))]
    HopIndex { index: usize, count: usize },
    #[error("{0}")]
    Mode(String),
    #[error(
        "the hop is longer than the cell allows: its ends are {length_a:.2} A apart, more than half the shortest translation of the {multiples} supercell ({shortest_a:.2} A), so the moving ion would meet its own periodic image; raise the image distance to at least {need_a:.1} A"
    )]
    HopTooLong {
        length_a: f64,
        shortest_a: f64,
        multiples: String,
        need_a: f64,
    },
    #[error("the supercell would hold {atoms} atoms (more than {max}); lower the image distance")]
    TooLarge { atoms: usize, max: usize },
    #[error("{0}")]
    Filling(String),
}

/// A point of the candidate list: a site of the ion to end a pass on.
#[derive(Debug, Clone)]
struct Target {
    frac: Frac,
    label: Option<String>,
}

/// The majority occupant of a site.
fn majority(site: &Site) -> Option<&Occupant> {
    site.occupants
        .iter()
        .max_by(|a, b| a.occupancy.total_cmp(&b.occupancy))
}

/// Sites whose majority occupant is the mobile ion.
fn ion_sites(s: &Structure, ion: Element) -> Vec<(Frac, String)> {
    s.sites
        .iter()
        .filter_map(|site| {
            majority(site)
                .filter(|o| o.species.element == ion)
                .map(|o| {
                    (
                        Frac(site.frac.0.map(crate::lattice::wrap_unit)),
                        o.label.clone(),
                    )
                })
        })
        .collect()
}

/// The integer translation that brings `p` nearest to `q + n`: `n = round(p - q)`.
fn nearest_copy(p: Vector3<f64>, q: Vector3<f64>) -> Vector3<f64> {
    q + (p - q).map(f64::round)
}

/// The copy of a target nearest to `p` and its distance (A); exact for skewed cells.
fn near_target(lat: &Lattice, p: Vector3<f64>, t: &Target) -> (Vector3<f64>, f64) {
    let base = nearest_copy(p, t.frac.0);
    let mut best = (base, f64::INFINITY);
    for i in -1..=1 {
        for j in -1..=1 {
            for k in -1..=1 {
                let c = base + Vector3::new(i as f64, j as f64, k as f64);
                let d = lat.frac_delta_length(c - p);
                if d < best.1 {
                    best = (c, d);
                }
            }
        }
    }
    best
}

/// Diagonal supercell whose perpendicular widths all reach `min_image_a`.
pub fn supercell_for(lat: &Lattice, min_image_a: f64) -> Supercell {
    let w = lat.perpendicular_widths();
    let multiples = [0, 1, 2].map(|i| ((min_image_a / w[i]).ceil() as usize).max(1));
    let m = lat.matrix();
    let cols: Vec<Vector3<f64>> = (0..3)
        .map(|i| m.column(i).into_owned() * multiples[i] as f64)
        .collect();
    let lattice =
        Lattice::from_matrix(Matrix3::from_columns(&cols)).unwrap_or_else(|_| lat.clone());
    let shortest_translation_a = shortest_translation(&lattice);
    Supercell {
        multiples,
        lattice,
        shortest_translation_a,
    }
}

/// Shortest nonzero lattice vector, A. Any vector with a coefficient `n_i` is at least
/// `|n_i|` perpendicular widths long, so coefficients up to `ceil(L / w_i)` (L the shortest
/// cell vector) cover every candidate.
pub fn shortest_translation(lat: &Lattice) -> f64 {
    let w = lat.perpendicular_widths();
    let l = (0..3)
        .map(|i| lat.vector(i).norm())
        .fold(f64::INFINITY, f64::min);
    let r = [0, 1, 2].map(|i| ((l / w[i]).ceil() as i64).clamp(1, 6));
    let mut best = l;
    for i in -r[0]..=r[0] {
        for j in -r[1]..=r[1] {
            for k in -r[2]..=r[2] {
                if (i, j, k) != (0, 0, 0) {
                    let d = lat.frac_delta_length(Vector3::new(i as f64, j as f64, k as f64));
                    best = best.min(d);
                }
            }
        }
    }
    best
}

/// Points every `step` A along a polyline (the two ends included, equal spacing).
fn resample(points: &[Vector3<f64>], lat: &Lattice, n: usize) -> Vec<Vector3<f64>> {
    let seg: Vec<f64> = points
        .windows(2)
        .map(|w| lat.frac_delta_length(w[1] - w[0]))
        .collect();
    let total: f64 = seg.iter().sum();
    let mut out = Vec::with_capacity(n);
    let mut i = 0;
    let mut acc = 0.0;
    for k in 0..n {
        let t = if n > 1 {
            total * k as f64 / (n - 1) as f64
        } else {
            0.0
        };
        while i + 1 < seg.len() && acc + seg[i] < t {
            acc += seg[i];
            i += 1;
        }
        if seg.is_empty() {
            out.push(points[0]);
            continue;
        }
        let f = if seg[i] > 0.0 {
            ((t - acc) / seg[i]).clamp(0.0, 1.0)
        } else {
            0.0
        };
        out.push(points[i] + (points[i + 1] - points[i]) * f);
    }
    if let (Some(o), Some(p)) = (out.last_mut(), points.last()) {
        *o = *p;
    }
    out
}

fn polyline_length(points: &[Vector3<f64>], lat: &Lattice) -> f64 {
    points
        .windows(2)
        .map(|w| lat.frac_delta_length(w[1] - w[0]))
        .sum()
}

/// The smoothed path: resampled every [`PATH_STEP_A`], then three-point averaging with the
/// ends held, then resampled again.
fn smooth(points: &[Vector3<f64>], lat: &Lattice) -> Vec<Vector3<f64>> {
    let n = ((polyline_length(points, lat) / PATH_STEP_A).ceil() as usize + 1).max(2);
    let mut p = resample(points, lat, n);
    for _ in 0..SMOOTHING_PASSES {
        let q = p.clone();
        for i in 1..p.len().saturating_sub(1) {
            p[i] = (q[i - 1] + q[i] * 2.0 + q[i + 1]) / 4.0;
        }
    }
    let n = ((polyline_length(&p, lat) / PATH_STEP_A).ceil() as usize + 1).max(2);
    resample(&p, lat, n)
}

/// Walks from `k` along the profile (repeated periodically) in direction `dir` to the first
/// point within [`ON_SITE_A`] of a target, then on while it comes closer; returns the
/// (unbounded) point index and the target copy.
fn walk_to_target(
    lat: &Lattice,
    profile: &Profile,
    k: usize,
    dir: i64,
    targets: &[Target],
) -> Option<(i64, Vector3<f64>, usize)> {
    let n = profile.points.len() as i64;
    if n < 2 {
        return None;
    }
    let period = n - 1; // the last point is the first plus the translation
    let t = Vector3::new(
        profile.translation[0] as f64,
        profile.translation[1] as f64,
        profile.translation[2] as f64,
    );
    let at = |i: i64| -> Vector3<f64> {
        let r = i.rem_euclid(period);
        let c = i.div_euclid(period);
        profile.points[r as usize].frac.0 + t * c as f64
    };
    let nearest = |p: Vector3<f64>| {
        targets
            .iter()
            .enumerate()
            .map(|(ti, tg)| {
                let (c, d) = near_target(lat, p, tg);
                (ti, c, d)
            })
            .min_by(|a, b| a.2.total_cmp(&b.2))
    };
    let mut i = k as i64;
    for _ in 0..(2 * period) {
        i += dir;
        let (ti, c, d) = nearest(at(i))?;
        if d <= ON_SITE_A {
            let (mut best_i, mut best_c, mut best_d) = (i, c, d);
            loop {
                let j = best_i + dir;
                let (tj, cj, dj) = nearest(at(j))?;
                if tj == ti && dj < best_d {
                    (best_i, best_c, best_d) = (j, cj, dj);
                } else {
                    break;
                }
            }
            return Some((best_i, best_c, ti));
        }
    }
    None
}

/// The landscape's own sites that are not shallow, as end points.
fn landscape_targets(net: &crate::network::Network) -> Vec<Target> {
    net.sites
        .iter()
        .enumerate()
        .filter(|(_, s)| s.depth >= MERGE_DEPTH_EV)
        .map(|(i, s)| Target {
            frac: s.frac,
            label: Some(format!("site {i}")),
        })
        .collect()
}

/// The hop chosen: its voxel path (unwrapped fractional points), its ends and how it was chosen.
struct Chosen {
    voxels: Vec<Vector3<f64>>,
    p_start: Vector3<f64>,
    p_end: Vector3<f64>,
    chosen_by: String,
    dimension: Option<u8>,
    hop_index: Option<usize>,
    lab: (Option<String>, Option<String>),
}

/// The NEB geometry of one hop of `a` (see the module notes).
pub fn neb_setup(a: &Analysis, o: &NebOptions) -> Result<NebSetup, HandoffError> {
    let net = a
        .network
        .as_ref()
        .ok_or_else(|| HandoffError::NoNetwork(a.ion.to_string()))?;
    let grid = &a.landscape.energy;
    let lat = &a.structure.lattice;
    let ion = a.ion;
    let ions = ion_sites(&a.structure, ion);
    let has_ion = !ions.is_empty();
    let mode = o.mode.unwrap_or(if has_ion {
        Mode::Vacancy
    } else {
        Mode::Interstitial
    });
    let mode_reason = match (o.mode, has_ion) {
        (Some(_), _) => "chosen".to_string(),
        (None, true) => format!("the default: the file holds {ion}"),
        (None, false) => format!("the default: the file holds no {ion}"),
    };
    if mode == Mode::Vacancy && !has_ion {
        return Err(HandoffError::Mode(format!(
            "vacancy mode needs sites of {ion} in the file, and it has none; use interstitial mode"
        )));
    }
    let site_of = |f: Vector3<f64>| -> Option<usize> {
        net.sites
            .iter()
            .enumerate()
            .map(|(i, s)| (i, lat.periodic_distance(s.frac, Frac(f))))
            .filter(|(_, d)| *d <= ON_SITE_A)
            .min_by(|x, y| x.1.total_cmp(&y.1))
            .map(|(i, _)| i)
    };
    let targets: Vec<Target> = if has_ion {
        ions.iter()
            .map(|(f, l)| Target {
                frac: *f,
                label: Some(l.clone()),
            })
            .collect()
    } else {
        landscape_targets(net)
    };
    let mut late_notes: Vec<String> = Vec::new();

    // the voxel path (unwrapped fractional points) and its two ends
    let Chosen {
        voxels,
        p_start,
        p_end,
        chosen_by,
        dimension,
        hop_index,
        lab,
    } = match o.choice {
        HopChoice::Channel(d) => {
            let d = match d {
                Some(d) => d,
                None => a
                    .summary
                    .networks
                    .first()
                    .map(|n| n.dimension)
                    .ok_or_else(|| {
                        HandoffError::NoHop(format!("{ion} has no channel below the energy cap"))
                    })?,
            };
            let profile = a
                .profiles
                .iter()
                .find(|p| p.dimension == d)
                .ok_or_else(|| {
                    HandoffError::NoHop(format!("{ion} has no {d}D channel with a profile"))
                })?;
            if targets.is_empty() {
                return Err(HandoffError::NoHop(format!(
                    "the landscape has no site of {ion} deeper than {MERGE_DEPTH_EV} eV to end a hop on"
                )));
            }
            let k = profile
                .points
                .iter()
                .enumerate()
                .max_by(|x, y| x.1.energy.total_cmp(&y.1.energy).then(y.0.cmp(&x.0)))
                .map(|(i, _)| i)
                .ok_or_else(|| HandoffError::NoHop("the channel profile is empty".into()))?;
            let mut targets = targets.clone();
            let mut back = walk_to_target(lat, profile, k, -1, &targets);
            let mut fwd = walk_to_target(lat, profile, k, 1, &targets);
            if (back.is_none() || fwd.is_none()) && has_ion && mode == Mode::Interstitial {
                // the path misses the file's sites: end on the landscape's own sites
                targets = landscape_targets(net);
                back = walk_to_target(lat, profile, k, -1, &targets);
                fwd = walk_to_target(lat, profile, k, 1, &targets);
                late_notes.push(format!(
                    "the channel's path does not pass the file's {ion} sites on both sides of its highest point: the ends are minima of the landscape"
                ));
            }
            let (Some((i0, c0, t0)), Some((i1, c1, t1))) = (back, fwd) else {
                return Err(HandoffError::NoHop(format!(
                    "the channel's lowest path does not pass within {ON_SITE_A} A of a site of {ion}{} on both sides of its highest point; try interstitial mode or a hop by index",
                    if has_ion { " the file occupies" } else { "" }
                )));
            };
            let n = profile.points.len() as i64 - 1;
            let tr = Vector3::new(
                profile.translation[0] as f64,
                profile.translation[1] as f64,
                profile.translation[2] as f64,
            );
            let pts: Vec<Vector3<f64>> = (i0..=i1)
                .map(|i| {
                    profile.points[i.rem_euclid(n) as usize].frac.0 + tr * i.div_euclid(n) as f64
                })
                .collect();
            // the network hop whose saddle is the pass's highest point
            let top = profile.points[k].frac.0;
            let hop = net
                .hops
                .iter()
                .enumerate()
                .filter(|(_, h)| {
                    let e = profile.points[k].energy;
                    (h.saddle_energy - e).abs() <= TIE_TOLERANCE * e.abs().max(1.0)
                })
                .min_by(|x, y| {
                    lat.periodic_distance(x.1.saddle, Frac(top))
                        .total_cmp(&lat.periodic_distance(y.1.saddle, Frac(top)))
                })
                .map(|(i, _)| i);
            let words = a
                .summary
                .networks
                .iter()
                .find(|nw| nw.dimension == d)
                .map(|nw| {
                    let dirs: Vec<String> = nw.orientations.iter().map(|x| x.indices()).collect();
                    if dirs.is_empty() {
                        String::new()
                    } else {
                        format!(" along {}", dirs.join(", "))
                    }
                })
                .unwrap_or_default();
            Chosen {
                voxels: pts,
                p_start: c0,
                p_end: c1,
                chosen_by: format!("the rate-limiting pass of the {d}D channel network{words}"),
                dimension: Some(d),
                hop_index: hop,
                lab: (targets[t0].label.clone(), targets[t1].label.clone()),
            }
        }
        HopChoice::Hop(index) => {
            let hop = net.hops.get(index).ok_or(HandoffError::HopIndex {
                index,
                count: net.hops.len(),
            })?;
            let (sa, sb) = (&net.sites[hop.from], &net.sites[hop.to]);
            // The hop's image runs between the sites' stored positions; a site refined to just
            // below a cell face is stored on the far side of its voxel, so the path between the
            // voxels takes the image between the voxels' cells.
            let beyond_voxel = |frac: Vector3<f64>, voxel: usize| {
                let v = grid.frac(grid.ijk(voxel)).0;
                [0, 1, 2].map(|k| (frac[k] - v[k]).round() as i32)
            };
            let (da, db) = (
                beyond_voxel(sa.frac.0, sa.voxel),
                beyond_voxel(sb.frac.0, sb.voxel),
            );
            let voxel_image = [0, 1, 2].map(|k| hop.image[k] + db[k] - da[k]);
            let path = path_between(
                grid,
                sa.voxel,
                sb.voxel,
                voxel_image,
                hop.saddle_voxel,
                crate::network::ProfileOptions::default().energy_weight,
            )
            .ok_or_else(|| {
                HandoffError::NoHop(format!(
                    "hop {index}: no path between its sites below its saddle"
                ))
            })?;
            let pts: Vec<Vector3<f64>> = path
                .iter()
                .map(|&(x, c)| {
                    grid.frac(grid.ijk(x)).0 + Vector3::new(c[0] as f64, c[1] as f64, c[2] as f64)
                })
                .collect();
            let end_of = |f: Vector3<f64>| -> (Vector3<f64>, Option<String>) {
                if has_ion {
                    let best = targets
                        .iter()
                        .map(|t| (near_target(lat, f, t), t))
                        .min_by(|x, y| x.0.1.total_cmp(&y.0.1));
                    if let Some(((c, d), t)) = best
                        && d <= ON_SITE_A
                    {
                        return (c, t.label.clone());
                    }
                }
                (f, None)
            };
            // the copies of the two sites at the ends of the grid path (a site refined to
            // just below a cell face is stored wrapped to the far side of the cell)
            let (first, last) = (pts[0], pts[pts.len() - 1]);
            let (c0, l0) = end_of(nearest_copy(first, sa.frac.0));
            let (c1, l1) = end_of(nearest_copy(last, sb.frac.0));
            if mode == Mode::Vacancy && (l0.is_none() || l1.is_none()) {
                return Err(HandoffError::Mode(format!(
                    "hop {index} does not run between two sites the file's {ion} occupies, so there is no vacancy hop; use interstitial mode"
                )));
            }
            Chosen {
                voxels: pts,
                p_start: c0,
                p_end: c1,
                chosen_by: format!(
                    "hop {index} of the site network (site {} to site {}, image [{} {} {}])",
                    hop.from, hop.to, hop.image[0], hop.image[1], hop.image[2]
                ),
                dimension: None,
                hop_index: Some(index),
                lab: (l0, l1),
            }
        }
    };
    let grid_saddle_ev = voxels
        .iter()
        .map(|f| {
            let ijk = grid.nearest_point(Frac(*f));
            grid.get(ijk[0], ijk[1], ijk[2]) as f64
        })
        .fold(f64::NEG_INFINITY, f64::max);

    // the polyline from end to end, smoothed
    let mut poly = Vec::with_capacity(voxels.len() + 2);
    poly.push(p_start);
    poly.extend(voxels.iter().copied());
    poly.push(p_end);
    poly.dedup_by(|x, y| lat.frac_delta_length(*x - *y) < 1e-9);
    if poly.len() < 2 {
        return Err(HandoffError::NoHop("the hop's two ends coincide".into()));
    }
    let fine = smooth(&poly, lat);
    let path_length_a = polyline_length(&fine, lat);
    let end_to_end_a = lat.frac_delta_length(p_end - p_start);
    if end_to_end_a < 0.3 {
        return Err(HandoffError::NoHop(format!(
            "the hop's two ends are only {end_to_end_a:.2} A apart"
        )));
    }

    // the supercell
    let sc = supercell_for(lat, o.min_image_a);
    let copies: usize = sc.multiples.iter().product();
    let per_cell = a.structure.sites.len();
    if per_cell * copies > MAX_SUPERCELL_ATOMS {
        return Err(HandoffError::TooLarge {
            atoms: per_cell * copies,
            max: MAX_SUPERCELL_ATOMS,
        });
    }
    if end_to_end_a > sc.shortest_translation_a / 2.0 {
        return Err(HandoffError::HopTooLong {
            length_a: end_to_end_a,
            shortest_a: sc.shortest_translation_a,
            multiples: multiples_text(sc.multiples),
            need_a: (2.0 * end_to_end_a * 10.0).ceil() / 10.0,
        });
    }
    let mult = Vector3::new(
        sc.multiples[0] as f64,
        sc.multiples[1] as f64,
        sc.multiples[2] as f64,
    );
    // the copy of the path in the supercell whose midpoint is nearest the supercell's centre
    let mid = (p_start + p_end) / 2.0;
    let shift = (mult / 2.0 - mid).map(f64::floor);
    let shift = Vector3::new(
        shift.x.clamp(-1e6, 1e6),
        shift.y.clamp(-1e6, 1e6),
        shift.z.clamp(-1e6, 1e6),
    );
    let to_super = |f: Vector3<f64>| -> Vector3<f64> { (f + shift).component_div(&mult) };

    // host atoms
    let mut host = Vec::new();
    let mut removed = Vec::new();
    let mut notes = late_notes;
    let partial = a
        .structure
        .sites
        .iter()
        .any(|s| s.occupants.len() > 1 || s.total_occupancy() < 0.999);
    if partial {
        notes.push("the file has partly occupied or mixed sites: each site of the supercell holds its majority occupant; order the cell yourself before a production calculation".to_string());
    }
    let ends_super = [to_super(p_start), to_super(p_end)];
    for site in &a.structure.sites {
        let Some(occ) = majority(site) else { continue };
        let is_ion = occ.species.element == ion;
        if is_ion && mode == Mode::Interstitial {
            continue;
        }
        for i in 0..sc.multiples[0] {
            for j in 0..sc.multiples[1] {
                for k in 0..sc.multiples[2] {
                    let f = (site.frac.0.map(crate::lattice::wrap_unit)
                        + Vector3::new(i as f64, j as f64, k as f64))
                    .component_div(&mult);
                    if is_ion
                        && ends_super
                            .iter()
                            .any(|e| sc.lattice.periodic_distance(Frac(f), Frac(*e)) < ON_SITE_A)
                    {
                        removed.push(format!(
                            "{} at ({:.4}, {:.4}, {:.4}) (an end site of the hop)",
                            occ.label, f.x, f.y, f.z
                        ));
                        continue;
                    }
                    host.push(CellAtom {
                        element: occ.species.element,
                        oxidation: occ.species.oxidation,
                        label: occ.label.clone(),
                        frac: Frac(f.map(crate::lattice::wrap_unit)),
                    });
                }
            }
        }
    }
    if mode == Mode::Interstitial && has_ion {
        removed.push(format!(
            "every {ion} of the file (one {ion} in the empty host)"
        ));
    }
    if mode == Mode::Vacancy {
        notes.push(format!(
            "the supercell is one {ion} short of the file's composition (the vacancy the ion hops into); run it charged or let the framework's redox ion compensate"
        ));
    }

    // energies along the path and at the images
    let energy = |f: Vector3<f64>| evaluate_point(&a.model, Frac(f)).1;
    let mut path_energies = Vec::with_capacity(fine.len());
    let mut s = 0.0;
    for (i, p) in fine.iter().enumerate() {
        if i > 0 {
            s += lat.frac_delta_length(*p - fine[i - 1]);
        }
        path_energies.push((s, energy(*p)));
    }
    let e_start = path_energies.first().map_or(0.0, |x| x.1);
    let e_end = path_energies.last().map_or(0.0, |x| x.1);
    let e_top = path_energies
        .iter()
        .map(|x| x.1)
        .fold(f64::NEG_INFINITY, f64::max);
    let pts = resample(&fine, lat, o.images + 2);
    // arc length along the smoothed path (the images split it into equal parts)
    let arc: Vec<f64> = (0..pts.len())
        .map(|k| path_length_a * k as f64 / (pts.len() - 1).max(1) as f64)
        .collect();
    let framework: Vec<&CellAtom> = host.iter().filter(|h| h.element != ion).collect();
    let images = pts
        .iter()
        .zip(&arc)
        .map(|(p, &arc_a)| {
            let f = to_super(*p).map(crate::lattice::wrap_unit);
            let cart = sc.lattice.to_cart(Frac(f)).0;
            let (d, lbl) = framework
                .iter()
                .map(|h| (sc.lattice.periodic_distance(Frac(f), h.frac), &h.label))
                .min_by(|x, y| x.0.total_cmp(&y.0))
                .map(|(d, l)| (d, l.clone()))
                .unwrap_or((f64::INFINITY, String::new()));
            NebImage {
                frac: Frac(f),
                cart: [cart.x, cart.y, cart.z],
                arc_a,
                bv_energy_ev: energy(*p),
                nearest_framework_a: d,
                nearest_framework_label: lbl,
            }
        })
        .collect();
    Ok(NebSetup {
        ion,
        ion_charge: a.model.probe.valence,
        mode,
        mode_reason,
        chosen_by,
        channel_dimension: dimension,
        hop: hop_index,
        start: EndPoint {
            frac: Frac(p_start),
            label: lab.0,
            site: site_of(p_start),
            energy_ev: e_start,
        },
        end: EndPoint {
            frac: Frac(p_end),
            label: lab.1,
            site: site_of(p_end),
            energy_ev: e_end,
        },
        end_to_end_a,
        path_length_a,
        supercell: sc,
        host,
        removed,
        images,
        path_energies,
        grid_saddle_ev,
        bv_barrier_ev: e_top - e_start,
        bv_barrier_backward_ev: e_top - e_end,
        uncertainty_ev: BARRIER_UNCERTAINTY_EV,
        notes,
    })
}

pub fn multiples_text(m: [usize; 3]) -> String {
    format!("{}x{}x{}", m[0], m[1], m[2])
}

// ---------------------------------------------------------------------------------------------
// filled hosts

#[derive(Debug, Clone, PartialEq)]
pub struct PopulateOptions {
    /// Ions per formula unit of the host.
    pub x: f64,
    /// Smallest distance between two placed ions (periodic images included), A.
    pub min_distance_a: f64,
}

/// A network site chosen for an ion.
#[derive(Debug, Clone, PartialEq)]
pub struct PlacedSite {
    /// Index into the network's sites.
    pub site: usize,
    pub orbit: usize,
    pub frac: Frac,
    pub energy_ev: f64,
    /// Label of the file's site of the ion there, if any.
    pub label: Option<String>,
}

#[derive(Debug, Clone, PartialEq)]
pub struct Populated {
    /// The host with the ions placed, in P 1.
    pub structure: Structure,
    /// Formula of the host (the structure without the mobile ion) and its formula units per cell.
    pub host_formula: String,
    pub formula_units: f64,
    pub requested_x: f64,
    /// Ions per formula unit actually placed (a whole number of ions per cell).
    pub x: f64,
    pub placed: Vec<PlacedSite>,
    /// Sum of the placed sites' energies, eV (single-ion energies: no ion-ion term beyond the
    /// distance rule).
    pub total_energy_ev: f64,
    /// True when the search finished: no set of sites obeying the distance rule has a lower sum.
    pub proven_lowest: bool,
    pub min_distance_a: f64,
    pub notes: Vec<String>,
}

/// The host of `a` with its ions on the lowest-energy set of sites that keeps them apart.
pub fn populate(a: &Analysis, o: &PopulateOptions) -> Result<Populated, HandoffError> {
    let net = a
        .network
        .as_ref()
        .ok_or_else(|| HandoffError::NoNetwork(a.ion.to_string()))?;
    let ion = a.ion;
    let lat = &a.structure.lattice;
    if !(o.x > 0.0 && o.x.is_finite()) {
        return Err(HandoffError::Filling(format!(
            "the filling x = {} must be a positive number of ions per formula unit",
            o.x
        )));
    }
    if !(o.min_distance_a >= 0.0 && o.min_distance_a.is_finite()) {
        return Err(HandoffError::Filling(format!(
            "the minimum distance {} A must be zero or positive",
            o.min_distance_a
        )));
    }
    // the host: every occupant but the ion's
    let mut host = a.structure.clone();
    for s in &mut host.sites {
        s.occupants.retain(|oc| oc.species.element != ion);
    }
    host.sites.retain(|s| !s.occupants.is_empty());
    for s in &mut host.asymmetric_sites {
        s.occupants.retain(|oc| oc.species.element != ion);
    }
    host.asymmetric_sites.retain(|s| !s.occupants.is_empty());
    let (z, host_formula) = host.formula_and_z();
    let want = o.x * z;
    let count = want.round() as usize;
    let mut notes = Vec::new();
    if count == 0 {
        return Err(HandoffError::Filling(format!(
            "x = {} per formula unit of {host_formula} is {want:.2} ions in the cell ({z} formula units): nothing to place",
            o.x
        )));
    }
    if (want - count as f64).abs() > 1e-6 {
        notes.push(format!(
            "x = {} is {want:.3} ions per cell ({z} formula units of {host_formula}); {count} placed (x = {:.4}); use a supercell for other fillings",
            o.x,
            count as f64 / z
        ));
    }
    if shortest_translation(lat) < o.min_distance_a {
        return Err(HandoffError::Filling(format!(
            "the cell's shortest translation ({:.2} A) is below the minimum distance {} A: an ion would be too close to its own periodic image",
            shortest_translation(lat),
            o.min_distance_a
        )));
    }
    let sites = &net.sites; // by increasing energy
    let n = sites.len();
    let conflict: Vec<Vec<bool>> = (0..n)
        .map(|i| {
            (0..n)
                .map(|j| {
                    i != j && lat.periodic_distance(sites[i].frac, sites[j].frac) < o.min_distance_a
                })
                .collect()
        })
        .collect();
    let e: Vec<f64> = sites.iter().map(|s| s.energy as f64).collect();
    let (best, proven) = choose_sites(&e, &conflict, count);
    let Some(best) = best else {
        let greedy_max = greedy(&e, &conflict, n).len();
        return Err(HandoffError::Filling(format!(
            "{count} {ion} cannot be placed {} A apart on the {n} sites of the landscape (about {greedy_max} fit); lower the filling or the distance",
            o.min_distance_a
        )));
    };
    if !proven {
        notes.push(format!(
            "the search stopped after {SEARCH_BUDGET} steps: the set is the lowest found, not proven lowest"
        ));
    }
    let ions = ion_sites(&a.structure, ion);
    let charge = a.model.probe.valence;
    let placed: Vec<PlacedSite> = best
        .iter()
        .map(|&i| PlacedSite {
            site: i,
            orbit: sites[i].orbit,
            frac: sites[i].frac,
            energy_ev: e[i],
            label: ions
                .iter()
                .find(|(f, _)| lat.periodic_distance(*f, sites[i].frac) <= ON_SITE_A)
                .map(|(_, l)| l.clone()),
        })
        .collect();
    let total_energy_ev = placed.iter().map(|p| p.energy_ev).sum();
    // the filled structure, in P 1
    let mut out = host.clone();
    for (k, p) in placed.iter().enumerate() {
        out.sites.push(Site {
            frac: p.frac,
            occupants: vec![Occupant {
                species: Species::new(ion, Some(charge)),
                occupancy: 1.0,
                label: format!("{}{}", ion.symbol(), k + 1),
            }],
            asym_index: 0,
        });
    }
    out.asymmetric_sites = out
        .sites
        .iter()
        .map(|s| AsymmetricSite {
            label: s.label().to_string(),
            frac: s.frac,
            occupants: s.occupants.clone(),
            multiplicity: 1,
            wyckoff: None,
        })
        .collect();
    for (i, s) in out.sites.iter_mut().enumerate() {
        s.asym_index = i;
    }
    out.symmetry = SymmetryInfo::p1("hopmap populate: the host's cell in P 1");
    out.name = format!(
        "{}_{}{}",
        a.structure.name,
        ion.symbol(),
        format_x(count as f64 / z)
    );
    out.warnings.clear();
    Ok(Populated {
        structure: out,
        host_formula,
        formula_units: z,
        requested_x: o.x,
        x: count as f64 / z,
        placed,
        total_energy_ev,
        proven_lowest: proven,
        min_distance_a: o.min_distance_a,
        notes,
    })
}

fn format_x(x: f64) -> String {
    let s = format!("{x:.3}");
    s.trim_end_matches('0').trim_end_matches('.').to_string()
}

/// Sites by increasing energy, each taken when it keeps clear of those taken, up to `count`.
fn greedy(e: &[f64], conflict: &[Vec<bool>], count: usize) -> Vec<usize> {
    let mut chosen: Vec<usize> = Vec::new();
    for (i, row) in conflict.iter().enumerate().take(e.len()) {
        if chosen.len() == count {
            break;
        }
        if chosen.iter().all(|&j| !row[j]) {
            chosen.push(i);
        }
    }
    chosen
}

/// The set of `count` mutually clear sites of least total energy (`e` increasing), by depth-
/// first branch and bound seeded with the greedy set; the bound adds the next cheapest
/// energies ignoring conflicts. Returns the set (None if none exists) and whether the search
/// finished within the budget.
fn choose_sites(e: &[f64], conflict: &[Vec<bool>], count: usize) -> (Option<Vec<usize>>, bool) {
    struct S<'a> {
        e: &'a [f64],
        conflict: &'a [Vec<bool>],
        count: usize,
        best: Option<(f64, Vec<usize>)>,
        nodes: usize,
        chosen: Vec<usize>,
    }
    fn go(s: &mut S, from: usize, sum: f64) -> bool {
        s.nodes += 1;
        if s.nodes > SEARCH_BUDGET {
            return false;
        }
        let need = s.count - s.chosen.len();
        if need == 0 {
            if s.best.as_ref().is_none_or(|(b, _)| sum < *b - 1e-12) {
                s.best = Some((sum, s.chosen.clone()));
            }
            return true;
        }
        for i in from..s.e.len() {
            if s.e.len() - i < need {
                break;
            }
            let bound = sum + s.e[i..i + need].iter().sum::<f64>();
            if let Some((b, _)) = &s.best
                && bound >= *b - 1e-12
            {
                break; // energies increase: later starts are no better
            }
            if s.chosen.iter().any(|&j| s.conflict[i][j]) {
                continue;
            }
            s.chosen.push(i);
            let ok = go(s, i + 1, sum + s.e[i]);
            s.chosen.pop();
            if !ok {
                return false;
            }
        }
        true
    }
    let g = greedy(e, conflict, count);
    let mut s = S {
        e,
        conflict,
        count,
        best: (g.len() == count).then(|| (g.iter().map(|&i| e[i]).sum(), g.clone())),
        nodes: 0,
        chosen: Vec::new(),
    };
    let finished = go(&mut s, 0, 0.0);
    (s.best.map(|(_, v)| v), finished)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn branch_and_bound_beats_greedy_when_the_lowest_site_blocks_two_good_ones() {
        // site 0 (-1.0) conflicts with 1 and 2 (-0.9 each); 3 is far (-0.1): two ions
        let e = [-1.0, -0.9, -0.9, -0.1];
        let mut c = vec![vec![false; 4]; 4];
        for j in [1, 2] {
            c[0][j] = true;
            c[j][0] = true;
        }
        assert_eq!(greedy(&e, &c, 2), vec![0, 3]); // -1.1
        let (best, proven) = choose_sites(&e, &c, 2);
        assert!(proven);
        assert_eq!(best, Some(vec![1, 2])); // -1.8
    }

    #[test]
    fn no_set_when_every_pair_conflicts() {
        let e = [-1.0, -0.5];
        let c = vec![vec![false, true], vec![true, false]];
        assert_eq!(choose_sites(&e, &c, 2).0, None);
    }

    #[test]
    fn the_shortest_translation_of_a_sheared_cell_is_a_combination() {
        // a = (4,0,0), b = (3.9,1,0): b - a is 1.005 A long
        let lat = Lattice::from_vectors([4.0, 0.0, 0.0], [3.9, 1.0, 0.0], [0.0, 0.0, 5.0]).unwrap();
        let d = shortest_translation(&lat);
        assert!((d - (0.1f64.powi(2) + 1.0).sqrt()).abs() < 1e-9, "{d}");
    }

    #[test]
    fn resampling_gives_equal_arcs() {
        let lat = Lattice::from_vectors([1.0, 0.0, 0.0], [0.0, 1.0, 0.0], [0.0, 0.0, 1.0]).unwrap();
        let pts = vec![
            Vector3::new(0.0, 0.0, 0.0),
            Vector3::new(1.0, 0.0, 0.0),
            Vector3::new(1.0, 2.0, 0.0),
        ];
        let r = resample(&pts, &lat, 4);
        assert_eq!(r.len(), 4);
        for w in r.windows(2) {
            assert!((lat.frac_delta_length(w[1] - w[0]) - 1.0).abs() < 1e-12);
        }
    }
}
