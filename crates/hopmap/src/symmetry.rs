//! Symmetry of structures read without any: P 1 CIFs, POSCAR/CONTCAR, extended XYZ.
//!
//! A file that lists its own symmetry operations (or a symbol that gives them) keeps them: this
//! module does nothing to it. A structure read with the identity alone is handed to moyo (a
//! crystal-symmetry finder, the Rust core of the moyo project built on nalgebra), at a tolerance
//! of [`SYMPREC_A`] on atomic positions. Atoms are told apart by their occupants (element,
//! occupancy and oxidation state, so a mixed or partly occupied site only matches its like).
//!
//! What comes back:
//! - By default the structure is rewritten in the **conventional cell** of the space group found,
//!   in its standard setting (moyo's `Setting::Standard`: unique axis b, hexagonal axes for
//!   rhombohedral groups, origin choice 2): `A_conv = A_input P` and `x_conv = P^-1 (x_input -
//!   p)` with moyo's transformation (P, p), then each atom moved onto its exact symmetric
//!   position (by at most the tolerance), the origin set by a fixed rule among the equivalent
//!   ones (`canonical_shift`), the sites put in a fixed order, and the lattice in the standard
//!   orientation. A primitive cell, a supercell or a cell with a shifted origin of one
//!   crystal therefore all come out as the same conventional cell, and channel directions,
//!   site orbits and hop groups are those of the conventional setting.
//! - With `keep_cell`, the input cell stays as it is and only the operations found (in the
//!   input cell's basis), the orbits and the Wyckoff letters are filled in; directions then
//!   refer to the input cell.
//!
//! Either way [`crate::structure::SymmetryInfo::source`] says where the symmetry came from and
//! [`crate::structure::SymmetryInfo::transformation`] records the input cell and (P, p).
//! When moyo finds nothing beyond P 1, or fails, or the cell holds more than
//! [`MAX_SEARCH_POSITIONS`] positions, the structure stays P 1 and the source says so.

use crate::lattice::{CellParameters, Frac, Lattice};
use crate::spacegroup::SymOp;
use crate::structure::{AsymmetricSite, CellTransformation, Site, Structure};
use moyo::MoyoDataset;
use moyo::base::{AngleTolerance, Cell};
use moyo::data::Setting;
use nalgebra::{Matrix3, Vector3};
use std::collections::HashMap;

/// Tolerance on atomic positions (A) for finding symmetry in a P 1 structure: the usual
/// default of crystal-symmetry finders for refined and DFT-relaxed structures (common
/// practice; spglib's and pymatgen's documented examples use 0.01 A).
pub const SYMPREC_A: f64 = 0.01;

/// P 1 cells with more positions than this are left as they are: the search time grows
/// faster than the square of the number of atoms on nearly periodic cells (0.7 s at 4000
/// positions, 30 s at 10 000 on one core), and cells that large are supercells or snapshots
/// whose symmetry is rarely wanted. The source says the search was skipped.
pub const MAX_SEARCH_POSITIONS: usize = 5000;

/// Fills in the symmetry of a structure read as P 1 (see the module docs); structures with more
/// than the identity are returned unchanged.
pub fn complete_symmetry(s: Structure, keep_cell: bool) -> Structure {
    if s.symmetry.ops.len() > 1 || s.sites.is_empty() {
        return s;
    }
    if s.sites.len() > MAX_SEARCH_POSITIONS {
        let mut s = s;
        s.symmetry.source = format!(
            "{}; no symmetry search for a P 1 cell of {} positions (above {MAX_SEARCH_POSITIONS})",
            s.symmetry.source,
            s.sites.len()
        );
        return s;
    }
    let (cell, _) = moyo_cell(&s);
    let input_source = s.symmetry.source.clone();
    let ds = match MoyoDataset::new(
        &cell,
        SYMPREC_A,
        AngleTolerance::Default,
        Setting::Standard,
        false,
    ) {
        Ok(d) => d,
        Err(e) => {
            let mut s = s;
            s.symmetry.source = format!(
                "{input_source}; symmetry search by moyo at {SYMPREC_A} A failed ({e}), P 1 kept"
            );
            return s;
        }
    };
    if ds.number == 1 {
        let mut s = s;
        s.symmetry.source = format!(
            "{input_source}; moyo finds no symmetry beyond P 1 at {SYMPREC_A} A (cell as read)"
        );
        return s;
    }
    let transformation = CellTransformation {
        linear: ds.std_linear,
        origin_shift: ds.std_origin_shift,
        input_cell: s.lattice.parameters(),
        input_positions: s.sites.len(),
        conventional: !keep_cell,
    };
    if !keep_cell {
        match conventional(&s, &ds) {
            Ok((mut c, shift)) => {
                let transformation = CellTransformation {
                    origin_shift: transformation.origin_shift - ds.std_linear * shift,
                    ..transformation
                };
                c.symmetry.source = format!(
                    "a search by moyo at {SYMPREC_A} A in the P 1 input ({input_source}); \
                     rewritten in the conventional cell of {} (standard setting), the input's \
                     atoms at their positions",
                    c.symmetry.hm_symbol.clone().unwrap_or_default()
                );
                c.symmetry.transformation = Some(transformation);
                return c;
            }
            Err(why) => {
                let mut s = in_input_cell(s, &ds, transformation);
                s.warnings.push(format!(
                    "the conventional cell of the symmetry found could not be built ({why}); \
                     the input cell is kept and directions refer to it"
                ));
                return s;
            }
        }
    }
    in_input_cell(s, &ds, transformation)
}

/// moyo's cell of a structure: one atom per site, atom types by occupants.
fn moyo_cell(s: &Structure) -> (Cell, Vec<i32>) {
    let m = s.lattice.matrix();
    let lattice = moyo::base::Lattice::new(m.transpose());
    let mut kinds: HashMap<String, i32> = HashMap::new();
    let types: Vec<i32> = s
        .sites
        .iter()
        .map(|site| {
            let key: Vec<String> = site
                .occupants
                .iter()
                .map(|o| {
                    format!(
                        "{}:{:.3}:{}",
                        o.species.element.atomic_number(),
                        o.occupancy,
                        o.species
                            .oxidation
                            .map(|q| format!("{q:.3}"))
                            .unwrap_or_default()
                    )
                })
                .collect();
            let key = key.join("|");
            let n = kinds.len() as i32;
            *kinds.entry(key).or_insert(n)
        })
        .collect();
    let positions = s.sites.iter().map(|x| x.frac.0).collect();
    (Cell::new(lattice, positions, types.clone()), types)
}

/// Hermann-Mauguin and Hall symbols of a Hall number, from hopmap's own table (generated from
/// spglib's database, whose Hall numbering moyo shares).
fn symbols(hall_number: i32, number: i32) -> (Option<String>, Option<String>) {
    match u16::try_from(hall_number)
        .ok()
        .and_then(crate::spacegroup::setting)
        .filter(|st| st.number as i32 == number)
    {
        Some(st) => (Some(st.hm_symbol()), Some(st.hall.to_string())),
        None => (None, None),
    }
}

fn to_symop(op: &moyo::base::Operation) -> SymOp {
    SymOp {
        rot: op.rotation,
        trans: op.translation.map(|t| {
            let r = t - t.floor();
            if r > 1.0 - 1e-9 { 0.0 } else { r }
        }),
    }
}

/// Orbits (moyo's representative index per site) to asymmetric sites. With `relabel`, labels
/// are kept when every member of an orbit carries the same ones and no other orbit does, else
/// made from the element and a running number; without it every atom keeps its own labels and
/// an asymmetric site takes its representative's (the input cell kept: the file's labels stay
/// valid for --oxidation and --exclude).
fn group_orbits(s: &mut Structure, orbits: &[usize], wyckoffs: &[char], relabel: bool) {
    let mut reps: Vec<usize> = orbits.to_vec();
    reps.sort();
    reps.dedup();
    let n_sites = s.sites.len();
    let members = |r: usize| (0..n_sites).filter(move |&i| orbits[i] == r);
    let labels_of =
        |site: &Site| -> Vec<String> { site.occupants.iter().map(|o| o.label.clone()).collect() };
    // labels shared by every member of exactly one orbit can stay
    let mut owner: HashMap<Vec<String>, Option<usize>> = HashMap::new();
    let mut uniform: HashMap<usize, bool> = HashMap::new();
    for &r in &reps {
        let first = labels_of(&s.sites[r]);
        let same = members(r).all(|i| labels_of(&s.sites[i]) == first);
        uniform.insert(r, same);
        for i in members(r) {
            let l = labels_of(&s.sites[i]);
            owner
                .entry(l)
                .and_modify(|o| {
                    if *o != Some(r) {
                        *o = None
                    }
                })
                .or_insert(Some(r));
        }
    }
    let mut count: HashMap<String, usize> = HashMap::new();
    let mut asym = Vec::with_capacity(reps.len());
    let mut index_of: HashMap<usize, usize> = HashMap::new();
    for &r in &reps {
        let first = labels_of(&s.sites[r]);
        let keep = !relabel || (uniform[&r] && owner.get(&first) == Some(&Some(r)));
        let new_labels: Vec<String> = if keep {
            first
        } else {
            s.sites[r]
                .occupants
                .iter()
                .map(|o| {
                    let sym = o.species.element.symbol().to_string();
                    let n = count.entry(sym.clone()).or_insert(0);
                    *n += 1;
                    format!("{sym}{n}")
                })
                .collect()
        };
        let mut occupants = s.sites[r].occupants.clone();
        for (o, l) in occupants.iter_mut().zip(&new_labels) {
            o.label = l.clone();
        }
        let ids: Vec<usize> = members(r).collect();
        if relabel {
            for &i in &ids {
                for (o, l) in s.sites[i].occupants.iter_mut().zip(&new_labels) {
                    o.label = l.clone();
                }
            }
        }
        index_of.insert(r, asym.len());
        asym.push(AsymmetricSite {
            label: new_labels.first().cloned().unwrap_or_default(),
            frac: s.sites[r].frac,
            occupants,
            multiplicity: ids.len(),
            wyckoff: wyckoffs
                .get(r)
                .filter(|c| !c.is_whitespace())
                .map(|c| c.to_string()),
        });
    }
    for (i, site) in s.sites.iter_mut().enumerate() {
        site.asym_index = index_of[&orbits[i]];
    }
    s.asymmetric_sites = asym;
}

fn fill_symmetry(s: &mut Structure, ds: &MoyoDataset) {
    let (hm, hall) = symbols(ds.hall_number, ds.number);
    let mut ops: Vec<SymOp> = ds.operations.iter().map(to_symop).collect();
    // identity first, as the readers do
    if let Some(i) = ops
        .iter()
        .position(|o| o.rot == Matrix3::identity() && o.trans.iter().all(|t| t.abs() < 1e-9))
    {
        ops.swap(0, i);
    }
    s.symmetry.number = u16::try_from(ds.number).ok();
    s.symmetry.hm_symbol = hm.or_else(|| Some(ds.hm_symbol.clone()));
    s.symmetry.hall_symbol = hall;
    s.symmetry.ops = ops;
}

/// keep_cell: the operations found, in the input cell.
fn in_input_cell(mut s: Structure, ds: &MoyoDataset, t: CellTransformation) -> Structure {
    let input_source = s.symmetry.source.clone();
    fill_symmetry(&mut s, ds);
    group_orbits(&mut s, &ds.orbits, &ds.wyckoffs, false);
    s.symmetry.source = format!(
        "a search by moyo at {SYMPREC_A} A in the P 1 input ({input_source}); the input cell \
         is kept, so directions refer to it, not to the conventional cell of {}",
        s.symmetry.hm_symbol.clone().unwrap_or_default()
    );
    s.symmetry.transformation = Some(CellTransformation {
        conventional: false,
        ..t
    });
    s
}

/// Moyo's dataset of a conventional cell built from the input, which must keep the input's
/// space group `number`.
fn conventional_dataset(s: &Structure, number: i32) -> Result<MoyoDataset, String> {
    let (cell, _) = moyo_cell(s);
    let ds = MoyoDataset::new(
        &cell,
        SYMPREC_A,
        AngleTolerance::Default,
        Setting::Standard,
        false,
    )
    .map_err(|e| format!("moyo on the conventional cell: {e}"))?;
    if ds.number != number {
        return Err(format!(
            "the conventional cell has space group {} where the input had {}",
            ds.number, number
        ));
    }
    Ok(ds)
}
/// The same crystal in the conventional cell of `ds` (see the module docs).
fn conventional(s: &Structure, ds: &MoyoDataset) -> Result<(Structure, Vector3<f64>), String> {
    let p = ds.std_linear;
    let p_inv = p
        .try_inverse()
        .ok_or_else(|| "singular transformation".to_string())?;
    let origin = ds.std_origin_shift;
    let matrix = s.lattice.matrix() * p;
    let lattice = Lattice::from_matrix(matrix).map_err(|e| e.to_string())?;
    // the input lattice's translations, modulo the conventional lattice (the centring)
    let wrap = |v: Vector3<f64>| {
        v.map(|x| {
            let r = x - x.floor();
            if r > 1.0 - 1e-6 { 0.0 } else { r }
        })
    };
    let same = |a: &Vector3<f64>, b: &Vector3<f64>| {
        (a - b).iter().all(|d| {
            let d = d - d.round();
            d.abs() < 1e-5
        })
    };
    let mut centring: Vec<Vector3<f64>> = vec![Vector3::zeros()];
    let gens: Vec<Vector3<f64>> = (0..3).map(|i| wrap(p_inv * Vector3::ith(i, 1.0))).collect();
    let mut k = 0;
    while k < centring.len() {
        for g in &gens {
            let v = wrap(centring[k] + g);
            if !centring.iter().any(|c| same(c, &v)) {
                centring.push(v);
            }
        }
        if centring.len() > 64 {
            return Err("more than 64 centring vectors".into());
        }
        k += 1;
    }
    let det = p.determinant().abs();
    let expected = s.sites.len() as f64 * det;
    let mut sites: Vec<Site> = Vec::new();
    let tol = SYMPREC_A.max(1e-4);
    for site in &s.sites {
        let base = p_inv * (site.frac.0 - origin);
        for c in &centring {
            let f = Frac(wrap(base + c));
            let dup = sites
                .iter()
                .any(|x| lattice.periodic_distance(x.frac, f) < tol);
            if !dup {
                sites.push(Site {
                    frac: f,
                    occupants: site.occupants.clone(),
                    asym_index: 0,
                });
            }
        }
    }
    if (sites.len() as f64 - expected).abs() > 0.5 {
        return Err(format!(
            "{} positions in the conventional cell where {expected:.0} were expected",
            sites.len()
        ));
    }
    let mut out = Structure {
        name: s.name.clone(),
        lattice,
        symmetry: s.symmetry.clone(),
        asymmetric_sites: Vec::new(),
        sites,
        warnings: s.warnings.clone(),
        oxidation_states_assigned: s.oxidation_states_assigned,
    };
    let ds2 = conventional_dataset(&out, ds.number)?;
    fill_symmetry(&mut out, &ds2);
    symmetrise(&mut out, &ds2.orbits);
    // the canonical description: the origin of `canonical_shift`, the sites in a fixed order
    // (kind, then coordinates), so that every cell of one crystal gives the same structure
    let c = canonical_shift(&out);
    for site in &mut out.sites {
        site.frac = Frac(wrap(site.frac.0 + c));
    }
    out.sites
        .sort_by_cached_key(|x| (kind_key(x), rounded(x.frac.0)));
    let ds3 = conventional_dataset(&out, ds.number)?;
    fill_symmetry(&mut out, &ds3);
    // moyo's Wyckoff letters hold for its own choice of origin; ours are looked up in its table
    // of Wyckoff positions for this description
    let wyckoffs = wyckoff_letters(&out, ds.hall_number, &ds3.orbits);
    group_orbits(&mut out, &ds3.orbits, &wyckoffs, true);
    Ok((out, c))
}

/// The Wyckoff letter of each site's orbit in the setting of `hall_number` (moyo's table of
/// Wyckoff positions, the International Tables' coordinates): the position of the orbit's
/// multiplicity whose coordinate triplet ("x,2x,1/4") holds one of the orbit's points. A
/// space character where none matches (not expected; then the column stays empty).
fn wyckoff_letters(s: &Structure, hall_number: i32, orbits: &[usize]) -> Vec<char> {
    let table: Vec<_> = moyo::data::iter_wyckoff_positions_from_hall_number(hall_number).collect();
    let mut size: HashMap<usize, usize> = HashMap::new();
    for &r in orbits {
        *size.entry(r).or_insert(0) += 1;
    }
    let tol = 2.0 * SYMPREC_A;
    let mut letter_of: HashMap<usize, char> = HashMap::new();
    for (&r, &m) in &size {
        let members: Vec<Vector3<f64>> = (0..orbits.len())
            .filter(|&i| orbits[i] == r)
            .map(|i| s.sites[i].frac.0)
            .collect();
        let found = table
            .iter()
            .filter(|w| w.multiplicity == m)
            .find(|w| {
                parse_wyckoff(w.coordinates).is_some_and(|(l, o)| {
                    members
                        .iter()
                        .any(|y| on_wyckoff(&s.lattice, &l, &o, y, tol))
                })
            })
            .map(|w| w.letter);
        letter_of.insert(r, found.unwrap_or(' '));
    }
    orbits
        .iter()
        .map(|r| letter_of.get(r).copied().unwrap_or(' '))
        .collect()
}

/// "x,2x,1/4" -> (L, o) with a point `L p + o` for parameters p = (x, y, z).
fn parse_wyckoff(text: &str) -> Option<(Matrix3<f64>, Vector3<f64>)> {
    let parts: Vec<&str> = text.split(',').map(str::trim).collect();
    if parts.len() != 3 {
        return None;
    }
    let mut l = Matrix3::zeros();
    let mut o = Vector3::zeros();
    for (row, part) in parts.iter().enumerate() {
        let mut terms: Vec<String> = Vec::new();
        let mut term = String::new();
        for c in part.chars() {
            if (c == '+' || c == '-') && !term.is_empty() {
                terms.push(std::mem::take(&mut term));
            }
            term.push(c);
        }
        terms.push(term);
        for t in terms.iter().filter(|t| !t.is_empty()) {
            let (sign, body) = match t.as_bytes()[0] {
                b'-' => (-1.0, &t[1..]),
                b'+' => (1.0, &t[1..]),
                _ => (1.0, &t[..]),
            };
            let var = body.chars().last().and_then(|c| match c {
                'x' => Some(0),
                'y' => Some(1),
                'z' => Some(2),
                _ => None,
            });
            if let Some(col) = var {
                let coef = &body[..body.len() - 1];
                let c: f64 = if coef.is_empty() {
                    1.0
                } else {
                    coef.parse().ok()?
                };
                l[(row, col)] += sign * c;
            } else if let Some((n, d)) = body.split_once('/') {
                o[row] += sign * n.parse::<f64>().ok()? / d.parse::<f64>().ok()?;
            } else {
                o[row] += sign * body.parse::<f64>().ok()?;
            }
        }
    }
    Some((l, o))
}

/// True when `y` lies on the Wyckoff position `L p + o` (modulo lattice translations).
fn on_wyckoff(
    lattice: &Lattice,
    l: &Matrix3<f64>,
    o: &Vector3<f64>,
    y: &Vector3<f64>,
    tol: f64,
) -> bool {
    let pinv = l.pseudo_inverse(1e-9).unwrap_or(Matrix3::zeros());
    for i in -2..=2 {
        for j in -2..=2 {
            for k in -2..=2 {
                let t = y + Vector3::new(i as f64, j as f64, k as f64) - o;
                let d = l * (pinv * t) - t;
                if (lattice.matrix() * d).norm() < tol {
                    return true;
                }
            }
        }
    }
    false
}

/// Moves every atom onto its exact symmetric position (by at most the tolerance of the search):
/// the representative of each orbit to the average of its images under the operations that
/// leave it in place (its site symmetry), every other member to the image of the
/// representative it lies on. Removes the rounding noise of the input (a special position
/// written 0.333333, a DFT cell relaxed to 1e-4 A), so that every cell of one crystal gives
/// the same numbers; the lattice is set in the standard orientation (a along x, b in the x-y
/// plane) from its parameters.
fn symmetrise(s: &mut Structure, orbits: &[usize]) {
    let ops = s.symmetry.ops.clone();
    let lattice = &s.lattice;
    let tol = 2.0 * SYMPREC_A;
    let near = |a: Vector3<f64>, b: Vector3<f64>| {
        let d = a - b;
        let d = d.map(|t| t - t.round());
        (lattice.matrix() * d).norm() < tol
    };
    let unwrap_to = |y: Vector3<f64>, x: Vector3<f64>| y - (y - x).map(|t| t.round());
    let mut fixed: HashMap<usize, Vector3<f64>> = HashMap::new();
    for &r in orbits {
        if fixed.contains_key(&r) {
            continue;
        }
        let x = s.sites[r].frac.0;
        let mut sum = Vector3::zeros();
        let mut n = 0.0;
        for op in &ops {
            let y = op.apply(Frac(x)).0;
            if near(y, x) {
                sum += unwrap_to(y, x);
                n += 1.0;
            }
        }
        fixed.insert(r, if n > 0.0 { sum / n } else { x });
    }
    let moved: Vec<Vector3<f64>> = (0..s.sites.len())
        .map(|i| {
            let x = s.sites[i].frac.0;
            let rep = fixed[&orbits[i]];
            ops.iter()
                .map(|op| op.apply(Frac(rep)).0)
                .find(|y| near(*y, x))
                .map(|y| wrap(unwrap_to(y, x)))
                .unwrap_or(x)
        })
        .collect();
    for (site, f) in s.sites.iter_mut().zip(moved) {
        site.frac = Frac(f);
    }
    if let Ok(l) = Lattice::from_parameters(s.lattice.parameters()) {
        s.lattice = l;
    }
}

/// The origin shift (fractions of the conventional cell) that makes the description of a
/// structure independent of the cell it was found in. The space group in its standard setting
/// leaves a choice of origin among points that the operations treat alike (rutile's Ti at
/// (0,0,0) or (0,0,1/2), the four -43m points of F-43m, Li or Co on 3a of layered LiCoO2);
/// moyo's choice follows the input's origin. Among the shifts c (in steps of 1/24) that keep
/// every operation of the group in the group (`(W, w + (W - I) c)` for each `(W, w)`), the one
/// is taken whose sorted list of sites is smallest, sites ordered by kind (the most
/// electropositive element first, by Pauling electronegativity) and then by their fractional
/// coordinates: the most electropositive cation goes to the origin where it can (Li on 3a in
/// LiCoO2, Ti in rutile). Any P 1 cell of one crystal then comes out identical; a file that
/// gives its own symmetry keeps its origin, which agrees with this choice for every structure
/// of structures/reference (tests/invariance.rs) but need not in general: the answers then
/// differ only by where the grid points fall.
fn canonical_shift(s: &Structure) -> Vector3<f64> {
    let ops = &s.symmetry.ops;
    let key_of = kind_key;
    let mut kinds: Vec<(i32, String)> = s.sites.iter().map(key_of).collect();
    kinds.sort();
    kinds.dedup();
    let rank: Vec<usize> = s
        .sites
        .iter()
        .map(|x| kinds.binary_search(&key_of(x)).unwrap_or(0))
        .collect();
    let same_mod_1 =
        |a: &Vector3<f64>, b: &Vector3<f64>| (a - b).iter().all(|d| (d - d.round()).abs() < 1e-5);
    let admissible = |c: &Vector3<f64>| {
        ops.iter().all(|op| {
            let w = op.rot.map(|x| x as f64);
            let t = op.trans + (w - Matrix3::identity()) * c;
            ops.iter()
                .any(|o2| o2.rot == op.rot && same_mod_1(&o2.trans, &t))
        })
    };
    let description = |c: &Vector3<f64>| -> Vec<(usize, [i64; 3])> {
        let mut v: Vec<(usize, [i64; 3])> = s
            .sites
            .iter()
            .zip(&rank)
            .map(|(x, r)| (*r, rounded(x.frac.0 + c)))
            .collect();
        v.sort();
        v
    };
    let mut best = Vector3::zeros();
    let mut best_key = description(&best);
    const STEPS: i32 = 24;
    for i in 0..STEPS {
        for j in 0..STEPS {
            for k in 0..STEPS {
                if i == 0 && j == 0 && k == 0 {
                    continue;
                }
                let c = Vector3::new(i as f64, j as f64, k as f64) / STEPS as f64;
                if !admissible(&c) {
                    continue;
                }
                let key = description(&c);
                if key < best_key {
                    best_key = key;
                    best = c;
                }
            }
        }
    }
    best
}

/// The kind of a site for the canonical description: the Pauling electronegativity (x 100) of
/// its most electropositive occupant, then its occupants (element, occupancy, state).
fn kind_key(site: &Site) -> (i32, String) {
    let chi = site
        .occupants
        .iter()
        .map(|o| {
            let x = o.species.element.electronegativity();
            (if x.is_nan() { 4.0 } else { x } * 100.0).round() as i32
        })
        .min()
        .unwrap_or(0);
    let k: Vec<String> = site
        .occupants
        .iter()
        .map(|o| {
            format!(
                "{:03}:{:.3}:{:?}",
                o.species.element.atomic_number(),
                o.occupancy,
                o.species.oxidation.map(|q| (q * 1000.0).round() as i64)
            )
        })
        .collect();
    (chi, k.join("|"))
}

/// Fractional coordinates in [0, 1) as integers of 1e-4, 1 wrapping to 0.
fn rounded(v: Vector3<f64>) -> [i64; 3] {
    let f = wrap(v);
    [f.x, f.y, f.z].map(|t| {
        let n = (t * 1e4).round() as i64;
        if n >= 10_000 { 0 } else { n }
    })
}

fn wrap(v: Vector3<f64>) -> Vector3<f64> {
    v.map(|x| {
        let r = x - x.floor();
        if r > 1.0 - 1e-9 { 0.0 } else { r }
    })
}

/// Cell parameters as words: "a = 2.816 A, b = 2.816 A, c = 14.05 A, alpha = 90, ...".
pub fn cell_words(p: &CellParameters) -> String {
    format!(
        "a = {:.4} A, b = {:.4} A, c = {:.4} A, alpha = {:.3}, beta = {:.3}, gamma = {:.3} deg",
        p.a, p.b, p.c, p.alpha, p.beta, p.gamma
    )
}

/// Which cell the structure (and so every direction and plane) is given in: "as read" (the file
/// had its own symmetry), "conventional" (a P 1 input rewritten in the conventional cell of the
/// symmetry found) or "input" (a P 1 input kept in its own cell).
pub fn analysed_cell(s: &Structure) -> &'static str {
    match &s.symmetry.transformation {
        None => "as read",
        Some(t) if t.conventional => "conventional",
        Some(_) => "input",
    }
}

/// One sentence on the cell for reports, or None when the file gave its own symmetry.
pub fn cell_note(s: &Structure) -> Option<String> {
    let t = s.symmetry.transformation.as_ref()?;
    let sg = s.symmetry.hm_symbol.clone().unwrap_or_default();
    Some(if t.conventional {
        format!(
            "the conventional cell of {sg}, found in the P 1 input ({} positions, {}); \
             directions and planes refer to this cell",
            t.input_positions,
            cell_words(&t.input_cell)
        )
    } else {
        format!(
            "the P 1 input cell as read (symmetry {sg} found in it); directions and planes refer \
             to this cell, not to the conventional cell of {sg}"
        )
    })
}

/// A lattice direction `[uvw]` of the input cell in the conventional cell of `t`
/// (`u_conv = linear^-1 u`), as the shortest whole-number indices along it.
pub fn direction_in_conventional(t: &CellTransformation, uvw: [i32; 3]) -> Option<[i32; 3]> {
    let inv = t.linear.try_inverse()?;
    let v = inv * Vector3::new(uvw[0] as f64, uvw[1] as f64, uvw[2] as f64);
    smallest_integers(v)
}

/// A plane `(hkl)` of the input cell in the conventional cell of `t` (`h_conv = linear^T h`).
pub fn plane_in_conventional(t: &CellTransformation, hkl: [i32; 3]) -> Option<[i32; 3]> {
    let v = t.linear.transpose() * Vector3::new(hkl[0] as f64, hkl[1] as f64, hkl[2] as f64);
    smallest_integers(v)
}

/// The shortest whole-number vector along `v` (components up to 24 in size), sign kept.
fn smallest_integers(v: Vector3<f64>) -> Option<[i32; 3]> {
    let m = v.amax();
    if m < 1e-9 {
        return None;
    }
    for k in 1..=24 {
        let w = v * (k as f64) / m;
        if w.iter().all(|x| (x - x.round()).abs() < 1e-4) {
            let r = w.map(|x| x.round() as i32);
            let g = r.iter().fold(0i32, |g, x| gcd(g, x.abs()));
            return Some([r[0] / g, r[1] / g, r[2] / g]);
        }
    }
    None
}

fn gcd(a: i32, b: i32) -> i32 {
    if b == 0 { a } else { gcd(b, a % b) }
}
