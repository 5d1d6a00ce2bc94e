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
//! on that grid at the same ceiling. With every minimum its own site this holds because the
//! basins drain along face-connected paths that never rise and every face contact between
//! basins is a hop with the lowest contact of its image, so the graph sees every loop of the
//! grid, with the same winding, at the same step of the order. Merged sites (see
//! [`crate::network::merge`]) keep it because no merged site's energy range contains a level at
//! which the percolation reports something; [`crate::network::build`] verifies it on every
//! network. (Fractions differ: the graph counts sites, the grid voxels.)

use super::hops::{BasinHop, Basins, Hop};
use super::merge::Group;
use super::sites::Site;
use crate::grid::Grid;
use crate::lattice::Lattice;
use crate::percolation::{Percolation, Sweep, Wide, total_key};
use petgraph::graph::{NodeIndex, UnGraph};

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
        let links: Vec<Link> = self
            .graph
            .edge_indices()
            .map(|e| {
                let h = &hops[self.graph[e]];
                Link {
                    a: h.from,
                    b: h.to,
                    image: h.image,
                    energy: h.saddle_energy,
                    voxel: h.saddle_voxel,
                }
            })
            .collect();
        percolate_links(&energies, links, lattice, ceiling)
    }
}

/// An edge of a periodic network: node `b`'s image `image` cells away is reached from node `a`
/// over a saddle of energy `energy` at grid point `voxel`.
pub(crate) struct Link {
    pub a: usize,
    pub b: usize,
    pub image: [i32; 3],
    pub energy: f32,
    pub voxel: usize,
}

/// The percolation sweep over a network: links in increasing `(saddle energy, saddle voxel)`
/// (then list position), each node added with its own energy when a link first reaches it.
/// Node indices must follow the `(energy, grid index)` order of the nodes' lowest points, so
/// that ties are broken as on the grid.
pub(crate) fn percolate_links(
    energies: &[f32],
    links: Vec<Link>,
    lattice: &Lattice,
    ceiling: f32,
) -> Percolation {
    let mut links: Vec<(u64, usize, Link)> = links
        .into_iter()
        .enumerate()
        .filter(|(_, l)| l.energy < ceiling)
        .map(|(i, l)| (total_key(l.energy, l.voxel), i, l))
        .collect();
    links.sort_unstable_by_key(|&(k, i, _)| (k, i));
    // (wide records: a graph of sites is small, and its links may carry any image offset)
    let mut sweep = Sweep::<Wide>::new(energies, lattice);
    for (pos, (_, _, l)) in links.iter().enumerate() {
        for s in [l.a, l.b] {
            if !sweep.is_added(s) {
                sweep.add(s, energies[s]);
            }
        }
        sweep.join(l.a, l.b, l.image);
        let last = pos + 1 == links.len() || links[pos + 1].2.energy != l.energy;
        if last {
            sweep.end_group(l.energy);
        }
    }
    sweep.finish(ceiling, Vec::new())
}

/// The percolation of the basin network, each minimum a node (equal to the grid's, see the
/// module notes).
#[derive(Debug, Clone)]
pub struct BasinPercolation {
    pub percolation: Percolation,
    /// Node `i` is the basin `node_basin[i]`: basins by increasing `(value, index)` of their
    /// minimum.
    pub node_basin: Vec<usize>,
    pub ceiling: f32,
}

/// Percolation of the basin network at `ceiling`.
pub fn percolate_basins(
    grid: &Grid,
    basins: &Basins,
    hops: &[BasinHop],
    ceiling: f32,
) -> BasinPercolation {
    let nb = basins.minima.len();
    let mut by_key: Vec<usize> = (0..nb).collect();
    by_key.sort_by_key(|&b| total_key(grid.values[basins.minima[b]], basins.minima[b]));
    let mut rank = vec![0usize; nb];
    for (r, &b) in by_key.iter().enumerate() {
        rank[b] = r;
    }
    let energies: Vec<f32> = by_key
        .iter()
        .map(|&b| grid.values[basins.minima[b]])
        .collect();
    let links = hops
        .iter()
        .map(|h| Link {
            a: rank[h.a as usize],
            b: rank[h.b as usize],
            image: h.image,
            energy: h.saddle_energy,
            voxel: h.saddle_voxel,
        })
        .collect();
    BasinPercolation {
        percolation: percolate_links(&energies, links, &grid.lattice, ceiling),
        node_basin: by_key,
        ceiling,
    }
}

/// Percolation of the network of merged sites, before the sites themselves are built: node
/// `g` is `groups[g]`, with the energy of its first (lowest) minimum; a basin hop links the
/// groups of its two basins, with the image between their group frames.
pub(crate) fn percolate_groups(
    grid: &Grid,
    basins: &Basins,
    hops: &[BasinHop],
    groups: &[Group],
    ceiling: f32,
) -> Percolation {
    let nb = basins.minima.len();
    let mut group_of = vec![0usize; nb];
    let mut cell_of = vec![[0i32; 3]; nb];
    for (g, grp) in groups.iter().enumerate() {
        for &(b, c) in &grp.members {
            group_of[b] = g;
            cell_of[b] = c;
        }
    }
    let energies: Vec<f32> = groups
        .iter()
        .map(|g| grid.values[basins.minima[g.members[0].0]])
        .collect();
    let links = hops
        .iter()
        .filter_map(|h| {
            let (a, b) = (h.a as usize, h.b as usize);
            let (ca, cb) = (cell_of[a], cell_of[b]);
            let image = [
                ca[0] + h.image[0] - cb[0],
                ca[1] + h.image[1] - cb[1],
                ca[2] + h.image[2] - cb[2],
            ];
            (group_of[a] != group_of[b] || image != [0, 0, 0]).then_some(Link {
                a: group_of[a],
                b: group_of[b],
                image,
                energy: h.saddle_energy,
                voxel: h.saddle_voxel,
            })
        })
        .collect();
    percolate_links(&energies, links, &grid.lattice, ceiling)
}

/// True when two percolations of one landscape agree on everything the site graph must
/// reproduce: dimension, thresholds (energy, barrier, span, components, lowest point) and
/// channel families. `voxel_a` and `voxel_b` map each one's lowest points to grid indices.
pub(crate) fn same_percolation(
    a: &Percolation,
    voxel_a: impl Fn(usize) -> usize,
    b: &Percolation,
    voxel_b: impl Fn(usize) -> usize,
) -> bool {
    let thresholds = (0..3).all(|d| match (&a.thresholds[d], &b.thresholds[d]) {
        (None, None) => true,
        (Some(x), Some(y)) => {
            x.energy == y.energy
                && x.barrier == y.barrier
                && x.channel.span == y.channel.span
                && x.components == y.components
                && voxel_a(x.channel.lowest_point) == voxel_b(y.channel.lowest_point)
        }
        _ => false,
    });
    let family = |p: &Percolation| {
        p.families
            .iter()
            .map(|f| {
                (
                    f.dimension,
                    f.span.clone(),
                    f.onset,
                    f.barrier,
                    f.components,
                )
            })
            .collect::<Vec<_>>()
    };
    a.dimension == b.dimension && thresholds && family(a) == family(b)
}
