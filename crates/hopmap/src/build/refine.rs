//! Distance least squares on bond valence: the ideal framework's coordinates and cell moved so
//! that every ion's bond-valence sum meets its formal valence.
//!
//! Minimised, by Levenberg-Marquardt over the free fractional coordinates and the allowed cell
//! strains of [`super::geometry::Ideal`]:
//!
//! `sum_ions (V_i - V_formal,i)^2 + sum_pairs (w max(0, floor - r))^2`
//!
//! with `V_i = sum_j s_ij`, `s = exp((R0 - r) / b)` over every cation-anion contact within the
//! first-shell cutoff of [`crate::bv`] (R0 and b from hopmap's table, [`crate::bv::params`]). A
//! mixed site counts the occupancy-weighted bond valence of its occupants and their weighted
//! formal valence (Ti1/3 Nb2/3: 4.667 v.u.). The soft floors keep metal pairs at least 3.15 A
//! apart and oxygen pairs 2.55 A (2.40 A inside a tetrahedron), weight w = 3 v.u./A, as in
//! `structures/reference/block_oxide_model.py`: without them the shared edges of the shear
//! borders collapse, since bond valence alone does not see cation-cation repulsion.
//!
//! The coordinate along the octahedron chains stays fixed (atoms on the mirror planes) unless
//! the framework has none (tetrahedral joins). The unknowns are the coordinate steps that keep the
//! ideal's symmetry (a basis of the range of the group average) and the cell strains, so the
//! refined structure has the ideal's space group and the normal equations are smaller by about
//! the order of the group.

use super::geometry::{Ideal, Role};
use super::{BuildError, BuildOptions, BuiltFramework, FrameworkSpec, Refinement};
use crate::bv::{PairRole, ParameterTable};
use crate::element::Element;
use crate::read::parts::{Parts, structure_from_parts};
use crate::structure::Structure;
use nalgebra::{DMatrix, DVector, Matrix3, Vector3};

/// Floor on metal-metal distances (A).
pub const METAL_METAL_FLOOR_A: f64 = 3.15;
/// Floor on oxygen-oxygen distances (A).
pub const OXYGEN_OXYGEN_FLOOR_A: f64 = 2.55;
/// Floor on the oxygen-oxygen edges of a tetrahedron (A).
pub const TETRAHEDRON_EDGE_FLOOR_A: f64 = 2.40;
/// Weight of the octahedron-edge restraint (v.u. per A).
pub const EDGE_WEIGHT: f64 = 0.3;
/// Largest move of an atom in one refinement step (A).
pub const MAX_STEP_A: f64 = 0.1;
/// Weight of a floor violation (v.u. per A).
pub const FLOOR_WEIGHT: f64 = 3.0;

/// A cation-anion contact: cation atom, anion atom, image of the anion.
struct Contact {
    cation: usize,
    anion: usize,
    image: Vector3<f64>,
}

/// A pair under a distance floor.
struct Floor {
    i: usize,
    j: usize,
    image: Vector3<f64>,
    floor: f64,
}

/// Bond-valence terms of a cation atom: (occupancy, R0, b) per occupant, and the cutoff.
struct CationTerms {
    terms: Vec<(f64, f64, f64)>,
    cutoff: f64,
}

struct Problem {
    lattice0: Matrix3<f64>,
    strains: Vec<Matrix3<f64>>,
    frac0: Vec<Vector3<f64>>,
    /// For each atom, the parameter index of each fractional coordinate (None: fixed).
    index: Vec<[Option<usize>; 3]>,
    n_params: usize,
    cation: Vec<Option<CationTerms>>,
    /// Occupancy of each atom (total over occupants).
    occupancy: Vec<f64>,
    /// Formal valence magnitude per atom (occupancy-weighted mean over occupants).
    formal: Vec<f64>,
    contacts: Vec<Contact>,
    floors: Vec<Floor>,
    /// Octahedron edges (oxygen pairs at R sqrt 2 in the ideal) restrained weakly to that
    /// length; `floor` holds the length.
    edges: Vec<Floor>,
}

impl Problem {
    fn new(ideal: &Ideal, table: &ParameterTable) -> Result<Problem, String> {
        let oxygen = Element::from_symbol("O").expect("oxygen");
        let mut index = Vec::new();
        let mut n = 0;
        for _ in &ideal.atoms {
            let mut ix = [None; 3];
            for (k, slot) in ix.iter_mut().enumerate() {
                if k != ideal.short_axis || ideal.free_short {
                    *slot = Some(n);
                    n += 1;
                }
            }
            index.push(ix);
        }
        let n_params = n + ideal.strains.len();
        let mut cation = Vec::new();
        let mut formal = Vec::new();
        let mut occupancy = Vec::new();
        for a in &ideal.atoms {
            let occ: f64 = a.occupants.iter().map(|o| o.occupancy).sum();
            occupancy.push(occ);
            formal.push(a.valence().abs() / occ);
            if a.role == Role::Oxygen {
                cation.push(None);
                continue;
            }
            let mut terms = Vec::new();
            let mut cutoff: f64 = 0.0;
            for o in &a.occupants {
                let p = table
                    .resolve(o.element, o.valence, oxygen, -2.0, PairRole::Framework)
                    .map_err(|e| e.to_string())?;
                terms.push((o.occupancy, p.r0, p.b));
                cutoff = cutoff.max(p.cutoff_a);
            }
            cation.push(Some(CationTerms { terms, cutoff }));
        }
        let lattice0 = ideal.lattice;
        let max_cut = cation
            .iter()
            .flatten()
            .map(|c| c.cutoff)
            .fold(METAL_METAL_FLOOR_A, f64::max)
            + 1.0;
        let frac0: Vec<Vector3<f64>> = ideal.atoms.iter().map(|a| a.frac).collect();
        let reach: Vec<i32> = (0..3)
            .map(|k| {
                let width = perpendicular_width(&lattice0, k);
                (max_cut / width).ceil() as i32 + 1
            })
            .collect();
        // Tetrahedra: oxygens within bonding distance of a tetrahedral atom.
        let r = ideal.metal_oxygen_a;
        let mut in_tetrahedron: Vec<Option<usize>> = vec![None; frac0.len()];
        let mut contacts = Vec::new();
        let mut floors = Vec::new();
        let mut edges = Vec::new();
        for i in 0..frac0.len() {
            for j in 0..frac0.len() {
                let d0 = (frac0[j] - frac0[i]).map(|x| x - x.round());
                for a in -reach[0]..=reach[0] {
                    for b in -reach[1]..=reach[1] {
                        for c in -reach[2]..=reach[2] {
                            let t = Vector3::new(a as f64, b as f64, c as f64);
                            let image = d0 + t - (frac0[j] - frac0[i]);
                            let dist = (lattice0 * (d0 + t)).norm();
                            if dist < 1e-6 || dist > max_cut {
                                continue;
                            }
                            let (ri, rj) = (ideal.atoms[i].role, ideal.atoms[j].role);
                            let metal = |x: Role| matches!(x, Role::Octahedral | Role::Tetrahedral);
                            if cation[i].is_some() && rj == Role::Oxygen {
                                contacts.push(Contact {
                                    cation: i,
                                    anion: j,
                                    image,
                                });
                                if ri == Role::Tetrahedral && dist < r {
                                    in_tetrahedron[j] = Some(i);
                                }
                            }
                            if j > i && metal(ri) && metal(rj) && dist < METAL_METAL_FLOOR_A + 1.0 {
                                floors.push(Floor {
                                    i,
                                    j,
                                    image,
                                    floor: METAL_METAL_FLOOR_A,
                                });
                            }
                            if j > i
                                && ri == Role::Oxygen
                                && rj == Role::Oxygen
                                && dist < OXYGEN_OXYGEN_FLOOR_A + 1.0
                            {
                                floors.push(Floor {
                                    i,
                                    j,
                                    image,
                                    floor: OXYGEN_OXYGEN_FLOOR_A,
                                });
                                if (dist - r * std::f64::consts::SQRT_2).abs() < 1e-3 * r {
                                    edges.push(Floor {
                                        i,
                                        j,
                                        image,
                                        floor: r * std::f64::consts::SQRT_2,
                                    });
                                }
                            }
                        }
                    }
                }
            }
        }
        for f in &mut floors {
            if f.floor == OXYGEN_OXYGEN_FLOOR_A
                && in_tetrahedron[f.i].is_some()
                && in_tetrahedron[f.i] == in_tetrahedron[f.j]
            {
                f.floor = TETRAHEDRON_EDGE_FLOOR_A;
            }
        }
        edges.retain(|e| {
            in_tetrahedron[e.i].is_none() || in_tetrahedron[e.i] != in_tetrahedron[e.j]
        });
        Ok(Problem {
            edges,
            lattice0,
            strains: ideal.strains.clone(),
            frac0,
            index,
            n_params,
            cation,
            occupancy,
            formal,
            contacts,
            floors,
        })
    }

    /// Scales `step` down so that no atom moves more than [`MAX_STEP_A`] and no strain
    /// changes by more than 2 % in one iteration: the contact list is fixed from the ideal, so
    /// the refinement must move atoms little and surely.
    fn cap_step(&self, p: &DVector<f64>, step: &mut DVector<f64>) {
        let (lattice, _) = self.state(p);
        let mut worst: f64 = 0.0;
        for ix in &self.index {
            let d = Vector3::from_fn(|k, _| ix[k].map(|c| step[c]).unwrap_or(0.0));
            worst = worst.max((lattice * d).norm() / MAX_STEP_A);
        }
        for k in self.n_coords()..self.n_params {
            worst = worst.max(step[k].abs() / 0.02);
        }
        if worst > 1.0 {
            *step /= worst;
        }
    }

    fn n_coords(&self) -> usize {
        self.n_params - self.strains.len()
    }

    fn state(&self, p: &DVector<f64>) -> (Matrix3<f64>, Vec<Vector3<f64>>) {
        let mut strain = Matrix3::identity();
        for (k, e) in self.strains.iter().enumerate() {
            strain += e * p[self.n_coords() + k];
        }
        let lattice = strain * self.lattice0;
        let frac = self
            .frac0
            .iter()
            .zip(&self.index)
            .map(|(f, ix)| {
                let mut g = *f;
                for k in 0..3 {
                    if let Some(i) = ix[k] {
                        g[k] += p[i];
                    }
                }
                g
            })
            .collect();
        (lattice, frac)
    }

    /// Residuals and the Jacobian as sparse rows (column, value).
    fn evaluate(&self, p: &DVector<f64>, jacobian: bool) -> (DVector<f64>, Vec<Vec<(usize, f64)>>) {
        let (lattice, frac) = self.state(p);
        let n_atoms = frac.len();
        let n_res = n_atoms + self.floors.len() + self.edges.len();
        let mut res = DVector::zeros(n_res);
        let mut rows: Vec<Vec<(usize, f64)>> = vec![Vec::new(); if jacobian { n_res } else { 0 }];
        for (i, f) in self.formal.iter().enumerate() {
            res[i] = -f;
        }
        let nc = self.n_coords();
        // d r / d params of a pair: gradient with respect to delta-f (3) and the strains.
        let pair_grad = |d_frac: Vector3<f64>, cart: Vector3<f64>, r: f64| {
            let g = lattice.transpose() * cart / r;
            let strain: Vec<f64> = self
                .strains
                .iter()
                .map(|e| cart.dot(&(e * self.lattice0 * d_frac)) / r)
                .collect();
            (g, strain)
        };
        let push = |rows: &mut Vec<Vec<(usize, f64)>>,
                    row: usize,
                    i: usize,
                    j: usize,
                    g: &Vector3<f64>,
                    strain: &[f64],
                    scale: f64| {
            for k in 0..3 {
                if let Some(c) = self.index[j][k] {
                    rows[row].push((c, scale * g[k]));
                }
                if let Some(c) = self.index[i][k] {
                    rows[row].push((c, -scale * g[k]));
                }
            }
            for (k, s) in strain.iter().enumerate() {
                rows[row].push((nc + k, scale * s));
            }
        };
        for c in &self.contacts {
            let d_frac = frac[c.anion] + c.image - frac[c.cation];
            let cart = lattice * d_frac;
            let r = cart.norm();
            let Some(terms) = &self.cation[c.cation] else {
                continue;
            };
            if r > terms.cutoff {
                continue;
            }
            let (mut s, mut ds) = (0.0, 0.0);
            for (w, r0, b) in &terms.terms {
                let v = w * ((r0 - r) / b).exp();
                s += v;
                ds -= v / b;
            }
            let occ_i = self.occupancy[c.cation];
            let occ_j = self.occupancy[c.anion];
            res[c.cation] += s / occ_i * occ_j;
            res[c.anion] += s;
            if jacobian {
                let (g, strain) = pair_grad(d_frac, cart, r);
                push(
                    &mut rows,
                    c.cation,
                    c.cation,
                    c.anion,
                    &g,
                    &strain,
                    ds / occ_i * occ_j,
                );
                push(&mut rows, c.anion, c.cation, c.anion, &g, &strain, ds);
            }
        }
        for (k, f) in self.floors.iter().enumerate() {
            let d_frac = frac[f.j] + f.image - frac[f.i];
            let cart = lattice * d_frac;
            let r = cart.norm();
            if r < f.floor {
                res[n_atoms + k] = FLOOR_WEIGHT * (f.floor - r);
                if jacobian {
                    let (g, strain) = pair_grad(d_frac, cart, r);
                    push(&mut rows, n_atoms + k, f.i, f.j, &g, &strain, -FLOOR_WEIGHT);
                }
            }
        }
        let base = n_atoms + self.floors.len();
        for (k, e) in self.edges.iter().enumerate() {
            let d_frac = frac[e.j] + e.image - frac[e.i];
            let cart = lattice * d_frac;
            let r = cart.norm();
            res[base + k] = EDGE_WEIGHT * (r - e.floor);
            if jacobian {
                let (g, strain) = pair_grad(d_frac, cart, r);
                push(&mut rows, base + k, e.i, e.j, &g, &strain, EDGE_WEIGHT);
            }
        }
        (res, rows)
    }
}

impl Problem {
    /// Root-mean-square deviation of the site bond-valence sums from the site valences (v.u.):
    /// the refinement's own measure, a mixed site counted once with its average valence.
    fn site_gii(&self, p: &DVector<f64>) -> f64 {
        let (res, _) = self.evaluate(p, false);
        let n = self.frac0.len();
        let (mut num, mut den) = (0.0, 0.0);
        for i in 0..n {
            num += self.occupancy[i] * res[i] * res[i];
            den += self.occupancy[i];
        }
        (num / den).sqrt()
    }
}

/// Width of the cell perpendicular to the planes of the other two vectors (A).
fn perpendicular_width(lattice: &Matrix3<f64>, k: usize) -> f64 {
    let (a, b) = ((k + 1) % 3, (k + 2) % 3);
    let n = lattice.column(a).cross(&lattice.column(b));
    lattice.determinant().abs() / n.norm()
}

/// The symmetry of the ideal framework as permutations of its atoms. The group average of a
/// step (`delta_j = 1/|G| sum_g R_g delta_(g^-1 j)`) spans the symmetric steps the refinement
/// may take, so that it keeps the symmetry even where breaking it would lower the residual (a
/// symmetric start is a saddle of some distortions; rounding would otherwise let them grow).
struct Symmetrizer {
    ops: Vec<(Matrix3<f64>, Vec<usize>)>,
}

impl Symmetrizer {
    fn new(ops: &[crate::spacegroup::SymOp], atoms: &[super::geometry::Atom]) -> Symmetrizer {
        let mut out = Vec::new();
        for op in ops {
            let rot = op.rot.map(f64::from);
            let mut perm = Vec::with_capacity(atoms.len());
            for a in atoms {
                let g = rot * a.frac + op.trans;
                let hit = atoms.iter().position(|b| {
                    b.role == a.role
                        && b.occupants == a.occupants
                        && (g - b.frac).iter().all(|d| (d - d.round()).abs() < 1e-4)
                });
                match hit {
                    Some(j) => perm.push(j),
                    None => break,
                }
            }
            if perm.len() == atoms.len() {
                out.push((rot, perm));
            }
        }
        Symmetrizer { ops: out }
    }

    /// The symmetric part of the coordinate part of `step`.
    fn project(&self, problem: &Problem, step: &mut DVector<f64>) {
        if self.ops.len() < 2 {
            return;
        }
        let n = problem.frac0.len();
        let delta: Vec<Vector3<f64>> = (0..n)
            .map(|i| Vector3::from_fn(|k, _| problem.index[i][k].map(|c| step[c]).unwrap_or(0.0)))
            .collect();
        let mut sum = vec![Vector3::zeros(); n];
        for (rot, perm) in &self.ops {
            for (i, d) in delta.iter().enumerate() {
                sum[perm[i]] += rot * d;
            }
        }
        let g = self.ops.len() as f64;
        for (i, s) in sum.iter().enumerate() {
            for k in 0..3 {
                if let Some(c) = problem.index[i][k] {
                    step[c] = s[k] / g;
                }
            }
        }
    }
}

/// Outcome of the least squares.
struct Fit {
    params: DVector<f64>,
    iterations: usize,
    converged: bool,
}

/// The refinement's unknowns: the strains, and the coordinate steps that keep the ideal's
/// symmetry, as coefficients on an orthonormal basis of those steps (the range of the group
/// average, by Gram-Schmidt). Without symmetry every coordinate is its own unknown. Working in
/// the symmetric subspace keeps the symmetry exactly and shrinks the normal equations by about
/// the order of the group.
struct Unknowns {
    /// Columns: symmetric coordinate steps (n_coords x k); None: the identity.
    basis: Option<DMatrix<f64>>,
    n_coords: usize,
    n_strains: usize,
}

impl Unknowns {
    fn new(problem: &Problem, symmetry: &Symmetrizer) -> Unknowns {
        let nc = problem.n_coords();
        let n_strains = problem.n_params - nc;
        if symmetry.ops.len() < 2 {
            return Unknowns {
                basis: None,
                n_coords: nc,
                n_strains,
            };
        }
        let mut cols: Vec<DVector<f64>> = Vec::new();
        for c in 0..nc {
            let mut v = DVector::zeros(problem.n_params);
            v[c] = 1.0;
            symmetry.project(problem, &mut v);
            let mut w: DVector<f64> = v.rows(0, nc).into_owned();
            if w.norm() < 1e-9 {
                continue;
            }
            for _ in 0..2 {
                for b in &cols {
                    let d = b.dot(&w);
                    if d != 0.0 {
                        w.axpy(-d, b, 1.0);
                    }
                }
            }
            let norm = w.norm();
            if norm > 1e-6 {
                cols.push(w / norm);
            }
        }
        let basis = if cols.is_empty() {
            DMatrix::zeros(nc, 0)
        } else {
            DMatrix::from_columns(&cols)
        };
        Unknowns {
            basis: Some(basis),
            n_coords: nc,
            n_strains,
        }
    }

    fn len(&self) -> usize {
        self.basis
            .as_ref()
            .map(|b| b.ncols())
            .unwrap_or(self.n_coords)
            + self.n_strains
    }

    /// A Jacobian row over the parameters as a row over the unknowns (sparse).
    fn reduce(&self, row: &[(usize, f64)]) -> Vec<(usize, f64)> {
        let Some(b) = &self.basis else {
            return row.to_vec();
        };
        let k = b.ncols();
        let mut dense = vec![0.0; k + self.n_strains];
        for &(c, v) in row {
            if c < self.n_coords {
                for (j, x) in b.row(c).iter().enumerate() {
                    dense[j] += v * x;
                }
            } else {
                dense[k + c - self.n_coords] += v;
            }
        }
        dense
            .into_iter()
            .enumerate()
            .filter(|(_, v)| *v != 0.0)
            .collect()
    }

    /// The parameter step of a step of the unknowns.
    fn expand(&self, q: &DVector<f64>) -> DVector<f64> {
        let Some(b) = &self.basis else {
            return q.clone();
        };
        let k = b.ncols();
        let coords = b * q.rows(0, k);
        let mut out = DVector::zeros(self.n_coords + self.n_strains);
        out.rows_mut(0, self.n_coords).copy_from(&coords);
        out.rows_mut(self.n_coords, self.n_strains)
            .copy_from(&q.rows(k, self.n_strains));
        out
    }
}

fn levenberg_marquardt(problem: &Problem, symmetry: &Symmetrizer, max_iterations: usize) -> Fit {
    let unknowns = Unknowns::new(problem, symmetry);
    let n = unknowns.len();
    let mut p = DVector::zeros(problem.n_params);
    let (mut res, mut rows) = problem.evaluate(&p, true);
    let mut cost = res.norm_squared();
    let mut lambda = 1e-3;
    let mut converged = false;
    let mut iterations = 0;
    while iterations < max_iterations {
        iterations += 1;
        let mut jtj = DMatrix::<f64>::zeros(n, n);
        let mut jtr = DVector::<f64>::zeros(n);
        for (row, r) in rows.iter().zip(res.iter()) {
            let row = unknowns.reduce(row);
            for &(a, va) in &row {
                jtr[a] += va * r;
                for &(b, vb) in &row {
                    jtj[(a, b)] += va * vb;
                }
            }
        }
        // Marquardt's scaling, floored so that directions with no first-order effect at a
        // symmetric point (a coordinate across a mirror) are still damped.
        let mean_diag = (0..n).map(|k| jtj[(k, k)]).sum::<f64>() / n.max(1) as f64;
        let floor_diag = 1e-3 * mean_diag + 1e-12;
        let mut improved = false;
        for _ in 0..12 {
            let mut m = jtj.clone();
            for k in 0..n {
                m[(k, k)] += lambda * jtj[(k, k)].max(floor_diag);
            }
            let Some(chol) = m.cholesky() else {
                lambda *= 10.0;
                continue;
            };
            let mut step = unknowns.expand(&chol.solve(&(-&jtr)));
            problem.cap_step(&p, &mut step);
            let trial = &p + &step;
            let (r2, _) = problem.evaluate(&trial, false);
            let c2 = r2.norm_squared();
            if c2 < cost {
                let small_change = cost - c2 < 1e-12 * cost.max(1e-12);
                let small_step = step.amax() < 1e-10;
                p = trial;
                (res, rows) = problem.evaluate(&p, true);
                cost = c2;
                lambda = (lambda / 3.0).max(1e-12);
                improved = true;
                if small_change || small_step {
                    converged = true;
                }
                break;
            }
            lambda *= 10.0;
        }
        if !improved {
            // No step lowers the cost at any damping: a minimum to working precision.
            converged = true;
        }
        if converged {
            break;
        }
    }
    Fit {
        params: p,
        iterations,
        converged,
    }
}

/// The structure of a framework state (P 1 positions, symmetry found on the built cell).
fn to_structure(
    name: &str,
    ideal: &Ideal,
    lattice: &Matrix3<f64>,
    frac: &[Vector3<f64>],
) -> Result<Structure, String> {
    let mut species = Vec::new();
    let mut positions = Vec::new();
    let mut occupancy = Vec::new();
    for (a, f) in ideal.atoms.iter().zip(frac) {
        for o in &a.occupants {
            let q = o.valence;
            let mag = super::fmt_amount(q.abs());
            species.push(format!(
                "{}{}{}",
                o.element,
                mag,
                if q < 0.0 { '-' } else { '+' }
            ));
            positions.push([f.x, f.y, f.z]);
            occupancy.push(o.occupancy);
        }
    }
    let col = |k: usize| {
        let v = lattice.column(k);
        [v.x, v.y, v.z]
    };
    let parts = Parts {
        name: name.to_string(),
        lattice: [col(0), col(1), col(2)],
        species,
        frac: positions,
        occupancy,
    };
    structure_from_parts(&parts, true).map_err(|e| e.to_string())
}

/// Refines `ideal` (unless asked not to) and returns the built framework with its record.
pub fn finish(
    spec: &FrameworkSpec,
    ideal: Ideal,
    options: &BuildOptions,
) -> Result<BuiltFramework, BuildError> {
    let text = spec.to_text();
    let fail = |message: String| BuildError::Build {
        spec: text.clone(),
        message,
    };
    let table = ParameterTable::builtin();
    let problem = Problem::new(&ideal, &table).map_err(&fail)?;
    let name = format!("hopmap_build_{}", text.replace([':', ','], "_"));
    let gii = |s: &Structure| {
        crate::bv::valence_check(s, &table)
            .map(|r| r.gii)
            .map_err(|e| fail(e.to_string()))
    };
    let start = to_structure(&name, &ideal, &ideal.lattice, &problem.frac0).map_err(&fail)?;
    let initial_gii_vu = gii(&start)?;
    let floor_violation = |p: &DVector<f64>| {
        let (res, _) = problem.evaluate(p, false);
        res.iter()
            .skip(problem.frac0.len())
            .take(problem.floors.len())
            .fold(0.0f64, |m, r| m.max(r / FLOOR_WEIGHT))
    };
    let mut construction = vec![format!("hopmap build {text}")];
    construction.extend(ideal.construction.iter().cloned());
    for a in ideal
        .atoms
        .iter()
        .filter(|a| a.role != Role::Oxygen)
        .map(|a| (a.role, &a.occupants))
        .fold(Vec::new(), |mut v: Vec<_>, x| {
            if !v.contains(&x) {
                v.push(x);
            }
            v
        })
    {
        let what = match a.0 {
            Role::Octahedral => "octahedral sites",
            Role::Tetrahedral => "tetrahedral sites",
            Role::Tunnel => "tunnel sites",
            Role::Oxygen => "oxygen sites",
        };
        let list: Vec<String> =
            a.1.iter()
                .map(|o| {
                    format!(
                        "{}{}+ x {}",
                        o.element,
                        super::fmt_amount(o.valence),
                        super::fmt_amount(o.occupancy)
                    )
                })
                .collect();
        construction.push(format!("{what}: {} (at random)", list.join(", ")));
    }
    let (structure, refinement) = if options.refine {
        let symmetry = Symmetrizer::new(&start.symmetry.ops, &ideal.atoms);
        let fit = levenberg_marquardt(&problem, &symmetry, options.max_iterations);
        let (lattice, frac) = problem.state(&fit.params);
        let structure = to_structure(&name, &ideal, &lattice, &frac).map_err(&fail)?;
        // RMS displacement in the refined cell, the mean (a free translation) removed.
        let shifts: Vec<Vector3<f64>> = frac
            .iter()
            .zip(&problem.frac0)
            .map(|(f, g)| f - g)
            .collect();
        let mean = shifts.iter().sum::<Vector3<f64>>() / shifts.len() as f64;
        let rms = (shifts
            .iter()
            .map(|s| (lattice * (s - mean)).norm_squared())
            .sum::<f64>()
            / shifts.len() as f64)
            .sqrt();
        let refinement = Refinement {
            gii_vu: gii(&structure)?,
            initial_gii_vu,
            site_gii_vu: problem.site_gii(&fit.params),
            initial_site_gii_vu: problem.site_gii(&DVector::zeros(problem.n_params)),
            iterations: fit.iterations,
            rms_shift_a: rms,
            converged: fit.converged,
            max_floor_violation_a: floor_violation(&fit.params),
        };
        construction.push(format!(
            "refined by bond-valence distance least squares (Levenberg-Marquardt, {} \
             iterations{}): every ion's bond-valence sum to its formal valence, floors \
             metal-metal {METAL_METAL_FLOOR_A} A, O-O {OXYGEN_OXYGEN_FLOOR_A} A \
             ({TETRAHEDRON_EDGE_FLOOR_A} A in a tetrahedron); {}; GII {:.3} -> {:.3} v.u.",
            fit.iterations,
            if fit.converged { "" } else { ", not converged" },
            if ideal.free_short {
                "cell and every coordinate free"
            } else {
                "cell and coordinates in the plane free, atoms kept on their mirror planes"
            },
            initial_gii_vu,
            refinement.gii_vu
        ));
        (structure, refinement)
    } else {
        construction.push(format!(
            "not refined: the ideal octahedra as built; GII {initial_gii_vu:.3} v.u."
        ));
        let p0 = DVector::zeros(problem.n_params);
        (
            start,
            Refinement {
                gii_vu: initial_gii_vu,
                initial_gii_vu,
                site_gii_vu: problem.site_gii(&p0),
                initial_site_gii_vu: problem.site_gii(&p0),
                iterations: 0,
                rms_shift_a: 0.0,
                converged: false,
                max_floor_violation_a: floor_violation(&p0),
            },
        )
    };
    construction.push(
        "an idealised model built from the framework type, not a published structure: fit for \
         channel and direction screening, bond lengths as the refinement left them"
            .into(),
    );
    Ok(BuiltFramework {
        structure,
        spec: spec.clone(),
        construction,
        refinement,
        metal_oxygen_a: ideal.metal_oxygen_a,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::build::{BuildOptions, FrameworkSpec, geometry};

    /// The analytic Jacobian equals central finite differences of the residuals (exact
    /// calculus, checked at a displaced point where the floors are active).
    #[test]
    fn jacobian_matches_finite_differences() {
        let spec = FrameworkSpec::parse("block:3x3:ribbon:Ti1Nb2").unwrap();
        let ideal = geometry::ideal(&spec, &BuildOptions::default()).unwrap();
        let problem = Problem::new(&ideal, &ParameterTable::builtin()).unwrap();
        let n = problem.n_params;
        let p = DVector::from_fn(n, |i, _| 1e-3 * ((i * 7919 % 13) as f64 - 6.0));
        let (r0, rows) = problem.evaluate(&p, true);
        let mut jac = DMatrix::<f64>::zeros(r0.len(), n);
        for (i, row) in rows.iter().enumerate() {
            for &(c, v) in row {
                jac[(i, c)] += v;
            }
        }
        let h = 1e-6;
        let mut worst: f64 = 0.0;
        for c in 0..n {
            let mut a = p.clone();
            a[c] += h;
            let mut b = p.clone();
            b[c] -= h;
            let fd = (problem.evaluate(&a, false).0 - problem.evaluate(&b, false).0) / (2.0 * h);
            for i in 0..r0.len() {
                worst = worst.max((fd[i] - jac[(i, c)]).abs());
            }
        }
        assert!(worst < 1e-4, "largest Jacobian difference {worst}");
    }
}
