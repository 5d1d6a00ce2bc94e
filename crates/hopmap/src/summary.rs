//! One reading of an analysis, shared by every renderer: which networks the answer reports (and
//! which thresholds it folds into them), along which directions or in which planes, over what
//! barrier and with what uncertainty; the hops grouped by symmetry; the headline sentence; the
//! row of a screening table. The terminal, JSON, HTML, the screening table, the demo study and
//! the Python binding all read this, so a rule about what to report is written once.
//!
//! Directions are types, not strings: a channel runs along a lattice direction `[uvw]`, a layer
//! lies in a lattice plane `(hkl)` (its normal), a 3D network spans all of space.

use crate::analysis::{Analysis, BARRIER_UNCERTAINTY_EV, CHANNEL_MERGE_EV};
use crate::element::Element;
use crate::percolation::{Percolation, Span, Threshold, format_indices};

/// Families of one dimension open "with" a threshold when their onsets differ by less than
/// this (eV): symmetry-equivalent grid points differ only in the last bits of their f32 energies.
const SAME_ONSET_EV: f32 = 1e-4;

/// Hops shorter than this (A) join split minima of one site; hop groups leave them out.
pub const SHORT_HOP_A: f64 = 0.5;

/// Where a network runs.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Orientation {
    /// A channel along the lattice direction `[uvw]`.
    Line([i32; 3]),
    /// A layer in the lattice plane `(hkl)`, given by its normal.
    Plane([i32; 3]),
    /// A network spanning all three dimensions.
    Space,
}

impl Orientation {
    /// The orientation of a percolating region's span (None for a closed pocket).
    pub fn of(span: &Span) -> Option<Orientation> {
        match span {
            Span::Line { direction, .. } => Some(Orientation::Line(*direction)),
            Span::Plane { normal, .. } => Some(Orientation::Plane(*normal)),
            Span::Space { .. } => Some(Orientation::Space),
            Span::Closed => None,
        }
    }

    /// `[010]`, `(001)`, or the empty string for a 3D network.
    pub fn indices(&self) -> String {
        match self {
            Orientation::Line(v) => format!("[{}]", format_indices(*v)),
            Orientation::Plane(v) => format!("({})", format_indices(*v)),
            Orientation::Space => String::new(),
        }
    }

    /// "along \[010\]", "in the (001) plane", "in all directions".
    pub fn words(&self) -> String {
        match self {
            Orientation::Line(v) => format!("along [{}]", format_indices(*v)),
            Orientation::Plane(v) => format!("in the ({}) plane", format_indices(*v)),
            Orientation::Space => "in all directions".into(),
        }
    }
}

/// A network the answer reports: the first percolation in `dimension` dimensions, with every
/// lower-dimensional network that opened within [`CHANNEL_MERGE_EV`] below it folded in.
#[derive(Debug, Clone, PartialEq)]
pub struct Network {
    pub dimension: u8,
    /// `E_d` (eV).
    pub threshold_ev: f64,
    /// `E_d` minus the level the ion starts from (eV); see [`Threshold::barrier`].
    pub barrier_ev: f64,
    /// The model's uncertainty of that barrier (eV).
    pub uncertainty_ev: f64,
    /// Lowest energy of the network (eV).
    pub lowest_ev: f64,
    /// Energy of the occupied sites in the network (eV), when the file holds the ion there.
    pub occupied_level_ev: Option<f64>,
    /// Every direction (1D) or plane (2D) opening at this threshold; `[Space]` for 3D.
    pub orientations: Vec<Orientation>,
    /// Separate regions percolating in at least this many dimensions at the threshold.
    pub components: usize,
    /// Fraction of the cell in those regions.
    pub accessible_fraction: f64,
    /// Lower dimensions that opened within [`CHANNEL_MERGE_EV`] and are told as this one.
    pub folded: Vec<u8>,
}

/// Symmetry-equivalent hops, as one row: same pair of site orbits, same length (0.01 A) and
/// saddle energy (0.005 eV); a hop read backwards joins its group with the barriers swapped.
#[derive(Debug, Clone, PartialEq)]
pub struct HopGroup {
    pub from_orbit: usize,
    pub to_orbit: usize,
    /// Hops of the cell in the group.
    pub count: usize,
    pub length_a: f64,
    pub saddle_ev: f64,
    pub barrier_forward_ev: f64,
    pub barrier_backward_ev: f64,
    /// Opening at the saddle: distance to the nearest framework ion minus its radius (A).
    pub opening_a: Option<f64>,
    /// That opening minus the mobile ion's radius (A).
    pub clearance_a: Option<f64>,
}

/// An empty pocket of the landscape deeper than the sites the ion occupies.
#[derive(Debug, Clone, PartialEq)]
pub struct DeeperPocket {
    /// How far below the occupied sites (eV).
    pub depth_ev: f64,
    /// Where (fractional coordinates).
    pub frac: [f64; 3],
}

/// The interpretation of one analysis.
#[derive(Debug, Clone, PartialEq)]
pub struct Summary {
    pub ion: Element,
    /// The networks the answer reports, lowest first.
    pub networks: Vec<Network>,
    /// The energy cap below which nothing percolated, when nothing did (eV).
    pub no_path_below_ev: Option<f64>,
    /// Hops open up to the highest threshold reached, grouped, lowest saddle first.
    pub hop_groups: Vec<HopGroup>,
    /// An empty pocket deeper than the occupied sites, if any.
    pub deeper_pocket: Option<DeeperPocket>,
    /// The answer in one line, e.g. "Li: 1D channels along \[010\], barrier 0.41 ± 0.15 eV; 2D at
    /// 0.79 eV; 3D at 1.80 eV".
    pub headline: String,
    /// The numbers a screener sorts by, for the network the answer leads with.
    pub figures: KeyFigures,
}

/// The numbers of the network the answer leads with (the first of [`Summary::networks`]):
/// what a screening row shows. Everything is None when nothing percolates; D and the
/// conductivity are None when there is no bulk transport (see [`KeyFigures::bulk_transport`]).
#[derive(Debug, Clone, PartialEq, Default)]
pub struct KeyFigures {
    /// Dimension of that network (0: nothing percolates below the energy cap).
    pub dimension: u8,
    /// Its direction `[uvw]` (1D) or plane `(hkl)` (2D); empty for 3D or none.
    pub direction: String,
    pub barrier_ev: Option<f64>,
    pub barrier_uncertainty_ev: Option<f64>,
    /// D at the temperature of the estimate (m^2/s), with its band (low, high) for the
    /// barrier's uncertainty; None below [`crate::analysis::NO_BULK_TRANSPORT_M2_S`].
    pub diffusion_m2_s: Option<f64>,
    pub diffusion_band_m2_s: Option<(f64, f64)>,
    /// Nernst-Einstein conductivity (S/cm) and its band; None without bulk transport.
    pub conductivity_s_cm: Option<f64>,
    pub conductivity_band_s_cm: Option<(f64, f64)>,
    /// Temperature of D and the conductivity (K).
    pub temperature_k: Option<f64>,
    /// False when the network's D is below the floor of bulk transport (or was not estimated).
    pub bulk_transport: bool,
    /// Theoretical capacity (mAh/g); None for a solid electrolyte or when not estimated.
    pub capacity_mah_g: Option<f64>,
}

/// The key figures of the first network of `networks` in an analysis (see [`KeyFigures`]).
pub fn key_figures(a: &Analysis, networks: &[Network]) -> KeyFigures {
    let Some(n) = networks.first() else {
        return KeyFigures {
            capacity_mah_g: a.capacity.as_ref().map(|c| c.capacity_mah_g),
            ..Default::default()
        };
    };
    let t = a.transport.iter().find(|t| t.dimension == n.dimension);
    let bulk = t.is_some_and(|t| t.bulk_transport);
    KeyFigures {
        dimension: n.dimension,
        direction: n
            .orientations
            .first()
            .map(Orientation::indices)
            .unwrap_or_default(),
        barrier_ev: Some(n.barrier_ev),
        barrier_uncertainty_ev: Some(n.uncertainty_ev),
        diffusion_m2_s: t.filter(|_| bulk).map(|t| t.diffusion_m2_s),
        diffusion_band_m2_s: t.filter(|_| bulk).and_then(|t| t.diffusion_band_m2_s),
        conductivity_s_cm: t.filter(|_| bulk).and_then(|t| t.conductivity_s_cm),
        conductivity_band_s_cm: t.filter(|_| bulk).and_then(|t| t.conductivity_band_s_cm),
        temperature_k: t.map(|t| t.temperature_k),
        bulk_transport: bulk,
        capacity_mah_g: a
            .capacity
            .as_ref()
            .map(|c| c.capacity_mah_g)
            .filter(|q| *q > 0.0),
    }
}

impl Summary {
    /// The network the answer leads with (the lowest), if any.
    pub fn first(&self) -> Option<&Network> {
        self.networks.first()
    }
}

/// The orientations of every family of dimension `t.dimension` opening with `t`, the deepest
/// region's own first.
pub fn orientations_at(p: &Percolation, t: &Threshold) -> Vec<Orientation> {
    let mut out: Vec<Orientation> = Orientation::of(&t.channel.span).into_iter().collect();
    for f in p
        .families
        .iter()
        .filter(|f| f.dimension == t.dimension && (f.onset - t.energy).abs() < SAME_ONSET_EV)
    {
        if let Some(o) = Orientation::of(&f.span)
            && !out.contains(&o)
        {
            out.push(o);
        }
    }
    out
}

/// True when a higher-dimensional network opens within [`CHANNEL_MERGE_EV`] of `t`.
pub fn folded_into_higher(p: &Percolation, t: &Threshold) -> bool {
    p.thresholds
        .iter()
        .flatten()
        .any(|u| u.dimension > t.dimension && u.energy - t.energy < CHANNEL_MERGE_EV)
}

/// The networks an answer reports (see [`Network`]), on any percolation of a site-energy grid.
pub fn networks(p: &Percolation) -> Vec<Network> {
    let mut out: Vec<Network> = Vec::new();
    let mut pending: Vec<u8> = Vec::new();
    for t in p.thresholds.iter().flatten() {
        if folded_into_higher(p, t) {
            pending.push(t.dimension);
            continue;
        }
        out.push(Network {
            dimension: t.dimension,
            threshold_ev: t.energy as f64,
            barrier_ev: t.barrier as f64,
            uncertainty_ev: BARRIER_UNCERTAINTY_EV,
            lowest_ev: t.channel.lowest as f64,
            occupied_level_ev: t.marked_lowest.map(|x| x as f64),
            orientations: orientations_at(p, t),
            components: t.components,
            accessible_fraction: t.fraction,
            folded: std::mem::take(&mut pending),
        });
    }
    out
}

/// Hops open up to `level` (eV), grouped by symmetry (see [`HopGroup`]).
pub fn hop_groups(a: &Analysis, level: f64) -> Vec<HopGroup> {
    let Some(net) = &a.network else {
        return vec![];
    };
    let mut groups: Vec<HopGroup> = Vec::new();
    for h in net
        .hops
        .iter()
        .filter(|h| h.saddle_energy as f64 <= level + 1e-4 && h.length >= SHORT_HOP_A)
    {
        let (of, ot) = (net.sites[h.from].orbit, net.sites[h.to].orbit);
        let (f, t, fw, bw) = if of <= ot {
            (of, ot, h.barrier_forward, h.barrier_backward)
        } else {
            (ot, of, h.barrier_backward, h.barrier_forward)
        };
        let found = groups.iter_mut().find(|g| {
            g.from_orbit == f
                && g.to_orbit == t
                && (g.length_a - h.length).abs() < 0.01
                && (g.saddle_ev - h.saddle_energy as f64).abs() < 0.005
        });
        match found {
            Some(g) => g.count += 1,
            None => groups.push(HopGroup {
                from_orbit: f,
                to_orbit: t,
                count: 1,
                length_a: h.length,
                saddle_ev: h.saddle_energy as f64,
                barrier_forward_ev: fw as f64,
                barrier_backward_ev: bw as f64,
                opening_a: h.bottleneck.as_ref().map(|b| b.radius),
                clearance_a: h.bottleneck.as_ref().map(|b| b.clearance),
            }),
        }
    }
    groups.sort_by(|x, y| x.saddle_ev.total_cmp(&y.saddle_ev));
    groups
}

/// The headline of a set of networks (see [`Summary::headline`]).
pub fn headline(ion: Element, networks: &[Network], no_path_below_ev: Option<f64>) -> String {
    let ion = ion.symbol();
    if networks.is_empty() {
        return match no_path_below_ev {
            Some(cap) => format!(
                "{ion}: no percolating path below {} eV (the energy cap)",
                crate::text::trim_number(cap, 2)
            ),
            None => format!("{ion}: no percolating path"),
        };
    }
    let parts: Vec<String> = networks
        .iter()
        .enumerate()
        .map(|(i, n)| {
            let what = match n.dimension {
                1 => format!(
                    "1D channels along {}",
                    n.orientations
                        .iter()
                        .map(Orientation::indices)
                        .collect::<Vec<_>>()
                        .join(", ")
                ),
                2 => format!(
                    "2D layers in the {} plane",
                    n.orientations
                        .iter()
                        .map(Orientation::indices)
                        .collect::<Vec<_>>()
                        .join(", ")
                ),
                _ => "3D network".to_string(),
            };
            if i == 0 {
                format!(
                    "{what}, barrier {:.2} ± {:.2} eV",
                    n.barrier_ev, n.uncertainty_ev
                )
            } else {
                format!("{}D at {:.2} eV", n.dimension, n.barrier_ev)
            }
        })
        .collect();
    format!("{ion}: {}", parts.join("; "))
}

/// The interpretation of an analysis.
pub fn summarise(a: &Analysis) -> Summary {
    let p = &a.percolation;
    let networks = networks(p);
    let no_path_below_ev = (p.dimension == 0).then_some(p.ceiling as f64);
    let level = p
        .thresholds
        .iter()
        .flatten()
        .last()
        .map(|t| t.energy as f64)
        .unwrap_or(f64::NEG_INFINITY);
    let deeper_pocket = p.thresholds.iter().flatten().next().and_then(|t| {
        let occupied = t.marked_lowest?;
        let depth = (occupied - t.channel.lowest) as f64;
        (depth > crate::analysis::DEEPER_VOID_EV).then(|| {
            let g = &a.landscape.energy;
            let f = g.frac(g.ijk(t.channel.lowest_point)).wrapped().0;
            DeeperPocket {
                depth_ev: depth,
                frac: [f.x, f.y, f.z],
            }
        })
    });
    Summary {
        ion: a.ion,
        headline: headline(a.model.probe.element, &networks, no_path_below_ev),
        figures: key_figures(a, &networks),
        networks,
        no_path_below_ev,
        hop_groups: hop_groups(a, level),
        deeper_pocket,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn orientations_print_as_indices_and_words() {
        assert_eq!(Orientation::Line([0, 1, 0]).indices(), "[010]");
        assert_eq!(Orientation::Plane([1, -1, 0]).indices(), "(1-10)");
        assert_eq!(Orientation::Space.words(), "in all directions");
        assert_eq!(Orientation::Plane([0, 0, 1]).words(), "in the (001) plane");
    }
}
