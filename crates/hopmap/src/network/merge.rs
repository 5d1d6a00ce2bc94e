//! Persistence merging: which grid minima make one site (science notes, section 5).
//!
//! Every basin (see [`crate::network::hops`]) has a minimum, but many minima are not places a
//! crystallographer would name: a flat valley floor sampled by a grid splits into several
//! minima a few hundredths of an eV deep, and a site between grid points shows up as two
//! minima one voxel apart. The standard remedy is persistence (watershed merging by depth).
//!
//! **Persistence.** Basin hops are taken in increasing saddle order (the `(value, index)` order
//! of [`crate::percolation`]) by a union-find over basins. When a hop first joins two regions,
//! the region whose minimum is higher ends there: its minimum `m` *dies* at that saddle `s`,
//! draining into the basin on the other side of the hop. Its persistence is `E(s) - E(m)`, the
//! lowest exit of `m` towards anything lower. The lowest minimum of a connected region never
//! dies (infinite persistence).
//!
//! **Merging.** A minimum whose persistence is below the merge depth is merged into the basin it
//! drains to: the death hops of shallow minima are contracted (they form a forest, since each
//! joins two regions that were apart), so a shallow minimum joins the neighbour it drains to
//! over its lowest saddle, and through it whatever that neighbour joined. A merged site keeps
//! its lowest minimum as its position (the midpoint of its two lowest when exactly two are
//! tied, see `position_members`); its `internal_saddle` is its highest contracted saddle,
//! the level from which its minima are connected among themselves. Hops between merged sites
//! are the lowest basin hop of each (site pair, image) (see
//! [`crate::network::hops::site_hops`]), which is the lowest `max(E_u, E_v)` over touching
//! voxel pairs of the merged basins, with the image offsets of the contracted hops.
//!
//! Two rules can keep a shallow minimum apart (it then stays a site of its own, with its small
//! `depth`, flagged shallow by the reports):
//!
//! 1. **Percolation.** The site graph must percolate exactly as the grid does. Call the
//!    energies at which the grid's percolation reports something (a threshold `E_d`, or the
//!    opening of any channel) *levels*. Merging `m` at its saddle `s` changes nothing at a
//!    level `λ` unless `E(m) <= λ < E(s)`: the site graph treats `m` as part of its site from
//!    the site's energy on, the grid joins `m`'s side to the rest only at `s`, and before
//!    `E(m)` nothing on `m`'s side is open. Call such a hop *split at λ*. The site graph's
//!    union-find at `λ` is then the grid's plus the hops split at `λ`, each a bridge (it
//!    joined two separate regions when the grid reached it): the graph can only join more,
//!    never less, and only what the grid joins by the saddles of those hops. If no level lies
//!    in any merged `[E(m), E(s)]`, the hops split at `λ` lie strictly between two consecutive
//!    levels, so everything they join early the grid joins before the next level; a region of
//!    the graph that reached a higher dimension than its grid parts would make the grid open a
//!    channel between two levels, where it opens none. So the graph opens nothing between
//!    levels, and at each level nothing is split and both union-finds are the same: same
//!    components, winding lattices and lowest points, hence the same `E_1D`, `E_2D`, `E_3D`,
//!    barriers, spans, component counts and channel families. In words: merging a minimum at
//!    a saddle less than `depth` above it changes no threshold that lies above the merge saddle
//!    or below the minimum. [`merge`] first merges every shallow minimum and compares the
//!    percolation of the merged network with the unmerged one (which equals the grid's); if
//!    they differ in anything, it keeps apart the minima whose `[E(m), E(s)]` contains a
//!    level, which the argument above makes exact. [`crate::network::build`] checks the final
//!    site graph once more and falls back to unmerged minima should it ever differ.
//! 2. **Symmetry.** Equivalent minima must merge the same way, so that sites still form orbits.
//!    For each site and space-group operation `g`, the image of the site's position must lie
//!    within the symmetry tolerance of a site, or of a minimum of an equally deep site (within
//!    the merge depth: the site's equivalent, whose lowest minimum the grid picked among
//!    equivalent ones), or of one of its own minima. Otherwise the lowest minimum near the
//!    image was merged where its equivalents were not (a well whose persistence is close to
//!    the depth, on a grid that shifts equivalent energies by a few meV): it is kept as a site
//!    of its own, and the merge is redone until nothing changes. Which neighbour a shallow
//!    minimum drains to is not forced to agree among equivalents: on a grid whose point counts
//!    do not respect the symmetry, a minimum with two near-equal exits follows the rounding,
//!    and the hops stay correct (each is the lowest contact of the merged basins). Where a
//!    minimum lies on a mirror between two equivalent sites with exactly tied exits, the tie is
//!    broken by grid index.

use super::graph::{self, BasinPercolation};
use super::hops::{BasinHop, Basins};
use super::sites::PointIndex;
use crate::grid::Grid;
use crate::lattice::Frac;
use crate::percolation::total_key;
use crate::spacegroup::SymOp;
use nalgebra::Vector3;

/// Default merge depth, eV: minima whose lowest exit towards a lower minimum is less than this
/// above them are merged into the site they drain to. 0.05 eV is about 2 kT at room
/// temperature: a well that shallow does not hold the ion for longer than a vibration or two,
/// and it is the scale of the grid's own ripples at 0.1 A spacing (common practice; the same
/// figure as [`crate::analysis::SHALLOW_SITE_EV`], the flag for shallow sites).
pub const MERGE_DEPTH_EV: f32 = 0.05;

/// One site's basins.
#[derive(Debug, Clone, PartialEq)]
pub struct Group {
    /// (basin, cell of its minimum relative to the first member's), lowest minimum first.
    pub members: Vec<(usize, [i32; 3])>,
    /// Highest merge saddle (grid units): the level from which all members are connected among
    /// themselves. None for a single minimum.
    pub internal_saddle: Option<f32>,
}

/// The outcome of persistence merging.
#[derive(Debug, Clone, PartialEq)]
pub struct Merging {
    /// The merge depth used (grid units).
    pub depth: f32,
    /// Sites as groups of basins, by increasing `(value, index)` of their lowest minimum.
    pub groups: Vec<Group>,
    /// Persistence of each basin's minimum (grid units); infinite for the lowest minimum of a
    /// connected region.
    pub persistence: Vec<f32>,
    /// The basin each minimum drains to over its lowest exit (None with infinite persistence).
    pub drains_to: Vec<Option<u32>>,
    /// Minima shallower than the depth kept apart because their merge would straddle a level at
    /// which the percolation reports something (rule 1 of the module notes).
    pub kept_for_percolation: usize,
    /// Minima shallower than the depth kept apart because an equivalent minimum could not merge
    /// the same way (rule 2).
    pub kept_for_symmetry: usize,
    /// True when the merged site graph failed the verification against the unmerged one and
    /// every minimum was kept as its own site instead.
    pub fell_back: bool,
}

/// Where a minimum dies: the hop and its two ends (basins), `from` on the dying side.
#[derive(Debug, Clone, Copy)]
struct Death {
    hop: usize,
    from: u32,
    to: u32,
}

/// Each minimum as its own site.
pub fn unmerged(grid: &Grid, basins: &Basins, hops: &[BasinHop]) -> Merging {
    let (persistence, drains_to, _) = persistence(grid, basins, hops);
    let mut groups: Vec<Group> = (0..basins.minima.len())
        .map(|b| Group {
            members: vec![(b, [0, 0, 0])],
            internal_saddle: None,
        })
        .collect();
    let key = |b: usize| total_key(grid.values[basins.minima[b]], basins.minima[b]);
    groups.sort_by_key(|g| key(g.members[0].0));
    Merging {
        depth: 0.0,
        groups,
        persistence,
        drains_to,
        kept_for_percolation: 0,
        kept_for_symmetry: 0,
        fell_back: false,
    }
}

/// What merging needs besides the basins.
#[derive(Debug, Clone, Copy)]
pub struct MergeOptions {
    /// Merge depth (grid units); see [`MERGE_DEPTH_EV`].
    pub depth: f32,
    /// A symmetry image of a minimum matches a minimum within this distance (A).
    pub symmetry_tolerance: f64,
    /// First try merging also the minima whose merge straddles a level, keeping that only if
    /// the percolation is unchanged (rule 1 of the module notes); false keeps them apart at
    /// once.
    pub try_straddling: bool,
}

/// Merges the minima shallower than `options.depth` into the sites they drain to, under the two
/// rules of the module notes. `reference` is the percolation of the unmerged basins (equal to
/// the grid's); `ops` the space-group operations (empty or the identity alone for P1).
///
/// Rule 1 is applied in two tiers: first every shallow minimum is merged and the merged network
/// is percolated; if that agrees with `reference` in everything the site graph must reproduce,
/// the merge stands. Otherwise the minima whose merge straddles a level are kept apart, which
/// the module notes prove exact.
pub fn merge(
    grid: &Grid,
    basins: &Basins,
    hops: &[BasinHop],
    ops: &[SymOp],
    options: &MergeOptions,
    reference: &BasinPercolation,
) -> Merging {
    let (persistence, drains_to, deaths) = persistence(grid, basins, hops);
    let nb = basins.minima.len();
    let depth = options.depth;
    let mut levels: Vec<f32> = reference
        .percolation
        .openings
        .iter()
        .map(|c| c.onset)
        .collect();
    levels.sort_by(f32::total_cmp);
    let straddles = |m: usize, s: f32| {
        let first = levels.partition_point(|&l| l < grid.values[basins.minima[m]]);
        first < levels.len() && levels[first] <= s
    };
    let mut safe = vec![false; nb];
    let mut straddling = vec![false; nb];
    for m in 0..nb {
        if let Some(d) = deaths[m]
            && persistence[m] < depth
        {
            if straddles(m, hops[d.hop].saddle_energy) {
                straddling[m] = true;
            } else {
                safe[m] = true;
            }
        }
    }
    // candidates in the order of their death hops
    let mut order: Vec<usize> = (0..nb).filter(|&m| safe[m] || straddling[m]).collect();
    order.sort_by_key(|&m| (hops[deaths[m].unwrap().hop].key(), m));
    let run = |candidate: Vec<bool>| {
        symmetric_merge(grid, basins, hops, ops, options, &deaths, &order, candidate)
    };
    let n_straddling = straddling.iter().filter(|&&x| x).count();
    if n_straddling > 0 && options.try_straddling {
        let all: Vec<bool> = (0..nb).map(|m| safe[m] || straddling[m]).collect();
        let (groups, kept_for_symmetry) = run(all);
        let p = graph::percolate_groups(grid, basins, hops, &groups, reference.ceiling);
        let same = graph::same_percolation(
            &reference.percolation,
            |n| basins.minima[reference.node_basin[n]],
            &p,
            |g| basins.minima[groups[g].members[0].0],
        );
        if same {
            return Merging {
                depth,
                groups,
                persistence,
                drains_to,
                kept_for_percolation: 0,
                kept_for_symmetry,
                fell_back: false,
            };
        }
    }
    let (groups, kept_for_symmetry) = run(safe);
    Merging {
        depth,
        groups,
        persistence,
        drains_to,
        kept_for_percolation: n_straddling,
        kept_for_symmetry,
        fell_back: false,
    }
}

/// Contracts the death hops of the candidates, then keeps apart, round after round, the merged
/// minima that rule 2 requires (see [`asymmetric_survivors`]). Returns the groups and the number
/// of minima kept apart for symmetry.
#[allow(clippy::too_many_arguments)]
fn symmetric_merge(
    grid: &Grid,
    basins: &Basins,
    hops: &[BasinHop],
    ops: &[SymOp],
    options: &MergeOptions,
    deaths: &[Option<Death>],
    order: &[usize],
    mut candidate: Vec<bool>,
) -> (Vec<Group>, usize) {
    let symmetric = ops.iter().any(|op| *op != SymOp::identity());
    let mut kept = 0;
    loop {
        let groups = contract(basins, hops, deaths, order, &candidate).groups(grid, basins);
        let promoted = if symmetric {
            asymmetric_survivors(grid, basins, &groups, ops, options, &candidate)
        } else {
            Vec::new()
        };
        if promoted.is_empty() {
            return (groups, kept);
        }
        for m in promoted {
            candidate[m] = false;
            kept += 1;
        }
    }
}

/// Persistence of every minimum, the basin it drains to and its death hop.
#[allow(clippy::type_complexity)]
fn persistence(
    grid: &Grid,
    basins: &Basins,
    hops: &[BasinHop],
) -> (Vec<f32>, Vec<Option<u32>>, Vec<Option<Death>>) {
    let nb = basins.minima.len();
    let key = |b: usize| total_key(grid.values[basins.minima[b]], basins.minima[b]);
    let mut parent: Vec<u32> = (0..nb as u32).collect();
    let mut size = vec![1u32; nb];
    // lowest minimum of each root
    let mut low: Vec<u32> = (0..nb as u32).collect();
    let mut deaths: Vec<Option<Death>> = vec![None; nb];
    let mut order: Vec<usize> = (0..hops.len()).collect();
    order.sort_by_key(|&i| (hops[i].key(), i));
    fn find(p: &mut [u32], mut x: usize) -> usize {
        while p[x] as usize != x {
            p[x] = p[p[x] as usize];
            x = p[x] as usize;
        }
        x
    }
    for i in order {
        let h = &hops[i];
        let (ra, rb) = (
            find(&mut parent, h.a as usize),
            find(&mut parent, h.b as usize),
        );
        if ra == rb {
            continue;
        }
        let (la, lb) = (low[ra] as usize, low[rb] as usize);
        // the region with the higher minimum ends here
        let a_dies = key(la) > key(lb);
        let (dying, from, to, winner_low) = if a_dies {
            (la, h.a, h.b, lb)
        } else {
            (lb, h.b, h.a, la)
        };
        deaths[dying] = Some(Death { hop: i, from, to });
        let (big, small) = if size[ra] >= size[rb] {
            (ra, rb)
        } else {
            (rb, ra)
        };
        parent[small] = big as u32;
        size[big] += size[small];
        low[big] = winner_low as u32;
    }
    let persistence = (0..nb)
        .map(|m| match deaths[m] {
            Some(d) => hops[d.hop].saddle_energy - grid.values[basins.minima[m]],
            None => f32::INFINITY,
        })
        .collect();
    let drains_to = deaths.iter().map(|d| d.map(|d| d.to)).collect();
    (persistence, drains_to, deaths)
}

/// Contracts the death hops of the candidates, in increasing saddle order.
fn contract(
    basins: &Basins,
    hops: &[BasinHop],
    deaths: &[Option<Death>],
    order: &[usize],
    candidate: &[bool],
) -> Forest {
    let mut forest = Forest::new(basins);
    for &m in order {
        if !candidate[m] {
            continue;
        }
        let d = deaths[m].unwrap();
        let h = &hops[d.hop];
        // where the `to` end's minimum sits relative to the `from` end's
        let t = if d.from == h.a {
            h.image
        } else {
            h.image.map(|x| -x)
        };
        forest.join(d.from as usize, d.to as usize, t, h.saddle_energy);
    }
    forest
}

/// Two minima whose values differ by less than this (grid units) are tied: symmetry-equivalent
/// grid points carry values that agree to rounding, not bit for bit.
pub(crate) const TIE: f32 = 1e-4;

/// The minima that place a site: its lowest, or its two lowest when exactly two are tied (a
/// site that the landscape splits into two equal minima across a mirror or a twofold axis
/// sits midway). Three or more tied minima (a ring of equivalent minima merged into one site)
/// have no such midpoint on the site; the lowest is used.
pub(crate) fn position_members<'g>(
    grid: &Grid,
    basins: &Basins,
    group: &'g Group,
) -> &'g [(usize, [i32; 3])] {
    let e0 = grid.values[basins.minima[group.members[0].0]];
    let tied = group
        .members
        .iter()
        .take_while(|&&(b, _)| grid.values[basins.minima[b]] - e0 <= TIE)
        .count();
    &group.members[..if tied == 2 { 2 } else { 1 }]
}

/// The grid position of a site (see `position_members`).
fn group_position(grid: &Grid, basins: &Basins, group: &Group) -> Frac {
    let mut sum = Vector3::zeros();
    let mut n = 0.0;
    for &(b, c) in position_members(grid, basins, group) {
        let p = grid.frac(grid.ijk(basins.minima[b])).0;
        sum += p + Vector3::new(c[0] as f64, c[1] as f64, c[2] as f64);
        n += 1.0;
    }
    Frac(sum / n).wrapped()
}

/// Merged minima that must survive for the sites to be closed under the operations. For each
/// site and operation `g`, the image `q` of the site's position must lie within `tolerance`
/// (A) of a site, or of a minimum of a site as deep as this one (within the merge depth: the
/// site's equivalent, whose lowest minimum the grid picked among equivalent ones), or of a
/// minimum of this site itself. Otherwise the lowest minimum within the tolerance of `q` is
/// returned, to be kept as a site of its own. Images with no minimum within the tolerance are
/// passed over (the grid does not respect the symmetry there).
fn asymmetric_survivors(
    grid: &Grid,
    basins: &Basins,
    groups: &[Group],
    ops: &[SymOp],
    options: &MergeOptions,
    candidate: &[bool],
) -> Vec<usize> {
    let tolerance = options.symmetry_tolerance;
    let nb = basins.minima.len();
    let key = |b: usize| total_key(grid.values[basins.minima[b]], basins.minima[b]);
    let mut minima = PointIndex::new(&grid.lattice, tolerance);
    for b in 0..nb {
        minima.insert(b, grid.frac(grid.ijk(basins.minima[b])));
    }
    let mut group_of = vec![0usize; nb];
    let mut sites = PointIndex::new(&grid.lattice, tolerance);
    let positions: Vec<Frac> = groups
        .iter()
        .map(|g| group_position(grid, basins, g))
        .collect();
    let energy: Vec<f32> = groups
        .iter()
        .map(|g| grid.values[basins.minima[g.members[0].0]])
        .collect();
    for (i, g) in groups.iter().enumerate() {
        for &(b, _) in &g.members {
            group_of[b] = i;
        }
        sites.insert(i, positions[i]);
    }
    let nearest = |v: &[(usize, f64)]| {
        v.iter()
            .min_by(|a, b| a.1.total_cmp(&b.1).then(a.0.cmp(&b.0)))
            .map(|&(n, _)| n)
    };
    let mut out = Vec::new();
    let mut kept = vec![false; nb];
    let mut keep = |m: usize, out: &mut Vec<usize>| {
        if candidate[m] && !kept[m] {
            kept[m] = true;
            out.push(m);
        }
    };
    for (i, &p) in positions.iter().enumerate() {
        for op in ops {
            let q = op.apply(p).wrapped();
            if !sites.within(q).is_empty() {
                continue;
            }
            let near = minima.within(q);
            let Some(n) = nearest(&near) else {
                continue;
            };
            let j = group_of[n];
            if j == i || (energy[j] - energy[i]).abs() <= options.depth {
                continue;
            }
            // the lowest minimum there: the well's own, not one of its shallow satellites
            let lowest = near
                .iter()
                .map(|&(m, _)| m)
                .filter(|&m| group_of[m] != i)
                .min_by_key(|&m| key(m));
            if let Some(m) = lowest {
                keep(m, &mut out);
            }
        }
    }
    out.sort_unstable();
    out
}

/// A union-find over basins whose joins are contracted hops: each basin knows the cell of its
/// minimum relative to its root's, each root its highest contracted saddle.
struct Forest {
    parent: Vec<u32>,
    size: Vec<u32>,
    off: Vec<[i32; 3]>,
    top: Vec<f32>,
}

impl Forest {
    fn new(basins: &Basins) -> Forest {
        let nb = basins.minima.len();
        Forest {
            parent: (0..nb as u32).collect(),
            size: vec![1; nb],
            off: vec![[0; 3]; nb],
            top: vec![f32::NEG_INFINITY; nb],
        }
    }

    /// Root of `x` and the cell of `x`'s minimum relative to the root's.
    fn find(&mut self, x: usize) -> (usize, [i32; 3]) {
        let mut path = Vec::new();
        let mut r = x;
        while self.parent[r] as usize != r {
            path.push(r);
            r = self.parent[r] as usize;
        }
        // compress: walk back from the node nearest the root
        let mut acc = [0i32; 3];
        for &y in path.iter().rev() {
            let o = self.off[y];
            acc = [acc[0] + o[0], acc[1] + o[1], acc[2] + o[2]];
            self.off[y] = acc;
            self.parent[y] = r as u32;
        }
        (r, if path.is_empty() { [0; 3] } else { self.off[x] })
    }

    /// Joins the trees of `u` and `v`, the minimum of `v` lying `t` cells from that of `u`, at
    /// saddle energy `s`.
    fn join(&mut self, u: usize, v: usize, t: [i32; 3], s: f32) {
        let (ru, ou) = self.find(u);
        let (rv, ov) = self.find(v);
        // cell of rv's minimum relative to ru's
        let w = [
            ou[0] + t[0] - ov[0],
            ou[1] + t[1] - ov[1],
            ou[2] + t[2] - ov[2],
        ];
        let (big, small, x) = if self.size[ru] >= self.size[rv] {
            (ru, rv, w)
        } else {
            (rv, ru, w.map(|c| -c))
        };
        self.parent[small] = big as u32;
        self.off[small] = x;
        self.size[big] += self.size[small];
        self.top[big] = self.top[big].max(self.top[small]).max(s);
    }

    /// The groups, lowest minimum first in each, by increasing key of that minimum.
    fn groups(&mut self, grid: &Grid, basins: &Basins) -> Vec<Group> {
        let nb = self.parent.len();
        let key = |b: usize| total_key(grid.values[basins.minima[b]], basins.minima[b]);
        let mut index_of_root = vec![u32::MAX; nb];
        let mut groups: Vec<Group> = Vec::new();
        let mut cells: Vec<Vec<(usize, [i32; 3])>> = Vec::new();
        for b in 0..nb {
            let (r, c) = self.find(b);
            if index_of_root[r] == u32::MAX {
                index_of_root[r] = groups.len() as u32;
                groups.push(Group {
                    members: Vec::new(),
                    internal_saddle: (self.top[r] > f32::NEG_INFINITY).then_some(self.top[r]),
                });
                cells.push(Vec::new());
            }
            cells[index_of_root[r] as usize].push((b, c));
        }
        for (g, mut members) in groups.iter_mut().zip(cells) {
            members.sort_by_key(|&(b, _)| key(b));
            let c0 = members[0].1;
            g.members = members
                .into_iter()
                .map(|(b, c)| (b, [c[0] - c0[0], c[1] - c0[1], c[2] - c0[2]]))
                .collect();
        }
        groups.sort_by_key(|g| key(g.members[0].0));
        groups
    }
}
