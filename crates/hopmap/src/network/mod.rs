//! The site-and-hop network of a landscape (science notes, section 5): sites where the mobile
//! ion rests, hops between them over saddles, the site graph, and channel profiles.
//!
//! Data flow: energy grid -> [`hops::basins`] (steepest descent, basin contacts) ->
//! [`merge::merge`] (shallow minima merged by persistence) -> [`sites::find_sites`] (refined
//! positions, orbits, coordination, labels) -> [`hops::site_hops`] (saddles, barriers, lengths,
//! bottlenecks) -> [`graph::SiteGraph`] (and its percolation, which must equal the grid's).
//! [`build`] runs the whole chain.
//! [`profile`] draws energy against path length along a channel.

pub mod graph;
pub mod hops;
pub mod merge;
pub mod profile;
pub mod sites;

pub use graph::SiteGraph;
pub use hops::{BasinHop, Basins, Bottleneck, Hop};
pub use merge::{MERGE_DEPTH_EV, Merging};
pub use profile::{PointKind, Profile, ProfileOptions, ProfilePoint};
pub use sites::{Coordination, Orbit, Polyhedron, Site, SiteAssignment, SiteOptions};

use crate::grid::Grid;
use crate::lattice::Frac;
use crate::percolation::Percolation;
use crate::spacegroup::SymOp;

/// An ion of the framework (the structure without the mobile ions), as plain data.
#[derive(Debug, Clone, PartialEq)]
pub struct FrameworkIon {
    /// Site label from the structure, e.g. "O1".
    pub label: String,
    /// Element symbol, e.g. "O".
    pub element: String,
    pub frac: Frac,
    /// Formal charge (e).
    pub charge: f64,
    /// Shannon ionic radius (A).
    pub radius: f64,
    pub is_anion: bool,
}

/// A site of the mobile ion in the original structure.
#[derive(Debug, Clone, PartialEq)]
pub struct MobileSite {
    pub label: String,
    pub frac: Frac,
}

/// What the network is built from besides the grid.
#[derive(Debug, Clone, Copy)]
pub struct NetworkInput<'a> {
    /// Space-group operations (identity first); empty means P1.
    pub ops: &'a [SymOp],
    pub framework: &'a [FrameworkIon],
    pub mobile_sites: &'a [MobileSite],
    /// Shannon radius of the mobile ion (A), for bottleneck clearances.
    pub mobile_radius: f64,
}

#[derive(Debug, Clone, PartialEq)]
pub struct NetworkOptions {
    /// Voxels at or above this value are walls (grid units).
    pub ceiling: f32,
    /// Minima whose lowest exit towards a lower minimum is less than this above them are merged
    /// into the site they drain to (grid units: eV on a site-energy grid; default
    /// [`MERGE_DEPTH_EV`]; 0 keeps every minimum). See [`merge`].
    pub merge_depth: f32,
    pub sites: SiteOptions,
}

impl Default for NetworkOptions {
    fn default() -> Self {
        NetworkOptions {
            ceiling: f32::INFINITY,
            merge_depth: MERGE_DEPTH_EV,
            sites: SiteOptions::default(),
        }
    }
}

/// The site-and-hop network of one grid.
#[derive(Debug, Clone)]
pub struct Network {
    pub ceiling: f32,
    pub basins: Basins,
    pub basin_hops: Vec<BasinHop>,
    /// How the basins' minima were merged into sites.
    pub merging: Merging,
    /// Sites by increasing energy.
    pub sites: Vec<Site>,
    pub orbits: Vec<Orbit>,
    pub assignment: SiteAssignment,
    /// Hops by increasing saddle energy.
    pub hops: Vec<Hop>,
    pub graph: SiteGraph,
}

/// Builds the network of `grid`: basins, merged sites, orbits, hops and the site graph.
///
/// The merged site graph is checked against the graph of the unmerged minima (whose
/// percolation equals the grid's): should they ever differ, every minimum is kept as its own
/// site and `merging.fell_back` says so.
pub fn build(grid: &Grid, input: &NetworkInput<'_>, options: &NetworkOptions) -> Network {
    let (basins, basin_hops) = hops::basins(grid, options.ceiling);
    let reference = graph::percolate_basins(grid, &basins, &basin_hops, options.ceiling);
    let merging = if options.merge_depth > 0.0 {
        let merge_options = merge::MergeOptions {
            depth: options.merge_depth,
            symmetry_tolerance: options.sites.symmetry_tolerance,
            try_straddling: true,
        };
        merge::merge(
            grid,
            &basins,
            &basin_hops,
            input.ops,
            &merge_options,
            &reference,
        )
    } else {
        merge::unmerged(grid, &basins, &basin_hops)
    };
    let net = assemble(grid, input, options, basins, basin_hops, merging);
    if net.merging.groups.len() < net.basins.minima.len() {
        let check = net.percolate(grid);
        let same = graph::same_percolation(
            &reference.percolation,
            |n| net.basins.minima[reference.node_basin[n]],
            &check,
            |s| net.sites[s].voxel,
        );
        if !same {
            let mut unmerged = merge::unmerged(grid, &net.basins, &net.basin_hops);
            unmerged.fell_back = true;
            return assemble(grid, input, options, net.basins, net.basin_hops, unmerged);
        }
    }
    net
}

fn assemble(
    grid: &Grid,
    input: &NetworkInput<'_>,
    options: &NetworkOptions,
    basins: Basins,
    basin_hops: Vec<BasinHop>,
    merging: Merging,
) -> Network {
    let (mut sites, orbits, assignment) = sites::find_sites(
        grid,
        &basins,
        &merging,
        input.ops,
        input.framework,
        input.mobile_sites,
        &options.sites,
    );
    let hops = hops::site_hops(
        grid,
        &basin_hops,
        &assignment,
        &sites,
        input.framework,
        input.mobile_radius,
    );
    for h in &hops {
        sites[h.from].depth = sites[h.from].depth.min(h.barrier_forward);
        sites[h.to].depth = sites[h.to].depth.min(h.barrier_backward);
    }
    let graph = SiteGraph::new(&sites, &hops);
    Network {
        ceiling: options.ceiling,
        basins,
        basin_hops,
        merging,
        sites,
        orbits,
        assignment,
        hops,
        graph,
    }
}

impl Network {
    /// Percolation of the site graph (equal to the grid's, see [`graph`]).
    pub fn percolate(&self, grid: &Grid) -> Percolation {
        self.graph
            .percolate(&self.sites, &self.hops, &grid.lattice, self.ceiling)
    }

    /// The site a voxel drains to; None for closed voxels.
    pub fn site_of_voxel(&self, voxel: usize) -> Option<usize> {
        let b = self.basins.label[voxel];
        (b != hops::NO_BASIN).then(|| self.assignment.site_of_basin[b as usize] as usize)
    }
}
