//! The site graph: sites as nodes, hops as edges carrying image offsets, and its own
//! percolation.
//!
//! The graph percolation adds hops in increasing saddle energy (ties broken by the grid index
//! of the saddle voxel, the order of [`crate::percolation`]) to the same union-find with image
//! offsets that runs on the grid. A site is entered only through its hops, and a saddle is never
//! lower than the sites it joins, so a site counts only once its energy is reached; a low site
//! without hops percolates nowhere.
//!
//! Invariant: on every grid, the graph percolation gives the same `E_1D`, `E_2D`, `E_3D`,
//! barriers, spans, component counts and channel families as [`crate::percolation::percolate`]
//! on that grid at the same ceiling. The basins drain along face-connected paths that never
//! rise, every face contact between basins is a hop with the lowest contact of its image, and
//! merged sites are kept only when their minima connect before any hop leaves them; so the
//! graph sees every loop of the grid, with the same winding, at the same step of the order.
//! (Fractions differ: the graph counts sites, the grid voxels.)

use super::hops::Hop;
use super::sites::Site;
use crate::lattice::Lattice;
use crate::percolation::{Percolation, Sweep, total_key};
use petgraph::graph::{EdgeIndex, NodeIndex, UnGraph};

/// Sites as nodes (node `i` is site `i`, its weight the site index) and hops as edges (the
/// weight is the index into the hop list; the hop itself says which way its image points).
#[derive(Debug, Clone)]
pub struct SiteGraph {
    pub graph: UnGraph<usize, usize>,
}

impl SiteGraph {
    pub fn new(sites: &[Site], hops: &[Hop]) -> SiteGraph {
        let mut graph = UnGraph::with_capacity(sites.len(), hops.len());
        for i in 0..sites.len() {
            graph.add_node(i);
        }
        for (h, hop) in hops.iter().enumerate() {
            graph.add_edge(NodeIndex::new(hop.from), NodeIndex::new(hop.to), h);
        }
        SiteGraph { graph }
    }

    /// The hops (indices into the hop list) that touch `site`; a hop from a site to its own
    /// image appears once.
    pub fn hops_of(&self, site: usize) -> Vec<usize> {
        let mut v: Vec<usize> = self
            .graph
            .edges(NodeIndex::new(site))
            .map(|e| *e.weight())
            .collect();
        v.sort_unstable();
        v.dedup();
        v
    }

    /// Number of distinct neighbouring site images of `site`.
    pub fn degree(&self, site: usize) -> usize {
        self.graph.edges(NodeIndex::new(site)).count()
    }

    /// Percolation of the site network (see the module notes). `ceiling` is carried into the
    /// result; hops at or above it are ignored.
    pub fn percolate(
        &self,
        sites: &[Site],
        hops: &[Hop],
        lattice: &Lattice,
        ceiling: f32,
    ) -> Percolation {
        let energies: Vec<f32> = sites.iter().map(|s| s.energy).collect();
        let mut edges: Vec<EdgeIndex> = self
            .graph
            .edge_indices()
            .filter(|&e| hops[self.graph[e]].saddle_energy < ceiling)
            .collect();
        edges.sort_by_key(|&e| {
            let h = &hops[self.graph[e]];
            (total_key(h.saddle_energy, h.saddle_voxel), self.graph[e])
        });
        let mut sweep = Sweep::<i32>::new(&energies, lattice);
        for (pos, &e) in edges.iter().enumerate() {
            let h = &hops[self.graph[e]];
            for s in [h.from, h.to] {
                if !sweep.is_added(s) {
                    sweep.add(s, energies[s]);
                }
            }
            sweep.join(h.from, h.to, h.image);
            let last = pos + 1 == edges.len()
                || hops[self.graph[edges[pos + 1]]].saddle_energy != h.saddle_energy;
            if last {
                sweep.end_group(h.saddle_energy);
            }
        }
        sweep.finish(ceiling, Vec::new())
    }
}
