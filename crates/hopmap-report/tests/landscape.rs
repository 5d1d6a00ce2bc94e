//! The bond-valence landscapes on the grid: closed forms, symmetry, caps, the volumetric exports,
//! and (when `HOPMAP_PYTHON` is set) an independent NumPy re-evaluation.
//!
//! Bond-valence parameters: Li+ - O2- r0 = 1.1745 A, b = 0.514 A, the softness-sensitive set of
//! Adams, Acta Cryst. B57 (2001) 278, as listed in the IUCr table bvparm2013.cif, row
//! `Li 1   O  -2    1.1745   0.514    c   '6 A cut-off'`; Li+ - F- r0 = 1.0968 A, b = 0.503 A,
//! same set, row `Li 1   F  -1    1.0968   0.503    c   '6 A cut-off'`. N_Li = 5 (common
//! practice for this set). D0, rho and the cells are chosen for the tests.

use hopmap::element::Element;
use hopmap::grid::Grid;
use hopmap::landscape::*;
use hopmap::lattice::{Cart, CellParameters, Frac, Lattice};
use hopmap::structure::Species;
use hopmap_report::volumetric::{
    self as volumetric, BOHR_A, ExportAtom, FieldLabel, model_to_json, write_cube, write_npy,
    write_xsf,
};
use std::path::PathBuf;

const LI_O_R0: f64 = 1.1745;
const LI_O_B: f64 = 0.514;
const N_LI: f64 = 5.0;
const D0: f64 = 0.3;

fn el(s: &str) -> Element {
    Element::from_symbol(s).unwrap()
}

fn cell(a: f64, b: f64, c: f64, alpha: f64, beta: f64, gamma: f64) -> Lattice {
    Lattice::from_parameters(CellParameters {
        a,
        b,
        c,
        alpha,
        beta,
        gamma,
    })
    .unwrap()
}

fn li_probe() -> ProbeIon {
    ProbeIon {
        element: el("Li"),
        valence: 1.0,
        charge: 1.0,
        coordination: N_LI,
        radius: 0.76,
    }
}

fn anion(symbol: &str, q: f64, r0: f64, b: f64, cutoff: f64) -> AnionKind {
    AnionKind {
        species: Species::new(el(symbol), Some(q)),
        r0,
        b,
        rmin: r0 - b * (1.0 / N_LI).ln(),
        d0: D0,
        cutoff,
        radius: 1.40,
        source: "c".into(),
    }
}

fn oxide() -> AnionKind {
    anion("O", -2.0, LI_O_R0, LI_O_B, 6.0)
}

fn cation(symbol: &str, q: f64, rho: f64) -> CationKind {
    CationKind {
        species: Species::new(el(symbol), Some(q)),
        charge: q,
        rho,
        radius: 0.7,
    }
}

fn atom(f: [f64; 3], kind: FrameworkKind, occupancy: f64, label: &str) -> FrameworkAtom {
    FrameworkAtom {
        frac: Frac::new(f[0], f[1], f[2]),
        kind,
        occupancy,
        label: label.into(),
    }
}

fn model(
    lattice: Lattice,
    anions: Vec<AnionKind>,
    cations: Vec<CationKind>,
    atoms: Vec<FrameworkAtom>,
) -> LandscapeModel {
    LandscapeModel {
        lattice,
        probe: li_probe(),
        anions,
        cations,
        atoms,
        mobile: None,
        coulomb_cutoff: 8.0,
        energy_cap: 10.0,
        mismatch_cap: 10.0,
    }
}

/// A skewed cell with two anion kinds, two cation kinds and partial occupancies.
fn triclinic_model() -> LandscapeModel {
    use FrameworkKind::*;
    model(
        cell(5.3, 6.1, 7.2, 82.0, 95.0, 103.0),
        vec![oxide(), anion("F", -1.0, 1.0968, 0.503, 6.0)],
        vec![cation("Ti", 4.0, 1.05), cation("P", 5.0, 0.70)],
        vec![
            atom([0.10, 0.20, 0.30], Anion(0), 1.0, "O1"),
            atom([0.60, 0.15, 0.80], Anion(0), 1.0, "O2"),
            atom([0.35, 0.70, 0.55], Anion(0), 0.5, "O3"),
            atom([0.85, 0.55, 0.10], Anion(1), 1.0, "F1"),
            atom([0.45, 0.40, 0.05], Cation(0), 0.75, "Ti1"),
            atom([0.95, 0.90, 0.60], Cation(1), 1.0, "P1"),
        ],
    )
}

/// Rock-salt-like cubic framework (Fm-3m, MgO-sized, a = 4.21 A): O2- at 4a, Mg2+ at 4b.
fn rock_salt_model() -> LandscapeModel {
    use FrameworkKind::*;
    let fcc = [
        [0.0, 0.0, 0.0],
        [0.5, 0.5, 0.0],
        [0.5, 0.0, 0.5],
        [0.0, 0.5, 0.5],
    ];
    let mut atoms = Vec::new();
    for t in fcc {
        atoms.push(atom(t, Anion(0), 1.0, "O1"));
        atoms.push(atom([t[0] + 0.5, t[1], t[2]], Cation(0), 1.0, "Mg1"));
    }
    model(
        cell(4.21, 4.21, 4.21, 90.0, 90.0, 90.0),
        vec![oxide()],
        vec![cation("Mg", 2.0, 1.1)],
        atoms,
    )
}

/// Morse bond energy with the shift that makes it vanish at the cutoff, from the formula.
fn morse_shifted(k: &AnionKind, r: f64) -> f64 {
    let m = |r: f64| (((k.rmin - r) / k.b).exp() - 1.0).powi(2) - 1.0;
    k.d0 * (m(r) - m(k.cutoff))
}

fn close(a: f64, b: f64, rel: f64) -> bool {
    (a - b).abs() <= rel * b.abs().max(1e-3)
}

/// Agreement of the f32 grid kernel with the f64 evaluation: 1e-5 relative, or absolute below
/// 1 (eV or v.u.): sums of terms of order 1 in f32 carry absolute errors of order 1e-7 even where
/// they cancel to nearly zero. Symmetry-equivalent points computed in different blocks agree to
/// the same figure, not to the last bit.
fn grid_close(a: f64, b: f64) -> bool {
    (a - b).abs() <= 1e-5 * b.abs().max(1.0)
}

/// Deterministic pseudo-random numbers in [0, 1).
struct Lcg(u64);
impl Lcg {
    fn next(&mut self) -> f64 {
        self.0 = self
            .0
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        (self.0 >> 11) as f64 / (1u64 << 53) as f64
    }
}

#[test]
fn one_anion_and_one_cation_give_the_closed_form_energy() {
    // erfc(1) = 0.1572992070502851 (Abramowitz & Stegun, Table 7.1: erf(1) = 0.8427007929).
    assert!((libm::erfc(1.0) - 0.157_299_207_050_285_1).abs() < 1e-15);
    use FrameworkKind::*;
    // A 20 A cell: no second image comes within the cutoffs. O at the origin, Ti4+ 5 A along a.
    let m = model(
        cell(20.0, 17.0, 17.0, 90.0, 90.0, 90.0),
        vec![oxide()],
        vec![cation("Ti", 4.0, 1.05)],
        vec![
            atom([0.0, 0.0, 0.0], Anion(0), 1.0, "O1"),
            atom([0.25, 0.0, 0.0], Cation(0), 1.0, "Ti1"),
        ],
    );
    let k = &m.anions[0];
    let closed = |r_o: f64, r_ti: f64| {
        morse_shifted(k, r_o) + COULOMB_EV_A * 1.0 * 4.0 / r_ti * libm::erfc(r_ti / 1.05)
    };
    // Points (x, y, 0) A: distance to O sqrt(x^2 + y^2), to Ti sqrt((5 - x)^2 + y^2).
    for (x, y) in [
        (1.6, 0.0),
        (2.0, 0.0),
        (2.5, 0.5),
        (3.0, 1.5),
        (3.8, 0.0),
        (2.2, 3.9),
    ] {
        let f = m.lattice.to_frac(Cart::new(x, y, 0.0));
        let (r_o, r_ti) = (f64::hypot(x, y), f64::hypot(5.0 - x, y));
        let (dv, e) = evaluate_point(&m, f);
        assert!(close(e, closed(r_o, r_ti), 1e-12), "E({x}, {y}) = {e}");
        let s = ((LI_O_R0 - r_o) / LI_O_B).exp();
        assert!(close(dv, (s - 1.0).abs(), 1e-12), "dV({x}, {y}) = {dv}");
    }
    // The grid along a (0.1 A spacing) carries the same values, to the f32 kernel's precision.
    let land = compute(&m, [200, 4, 4], &Progress::Silent).unwrap();
    for i in 12..=44 {
        let x = i as f64 * 0.1;
        let e = land.energy.get(i, 0, 0) as f64;
        let want = closed(x, 5.0 - x).min(m.energy_cap);
        assert!(
            grid_close(e, want),
            "grid E at x = {x}: {e}, closed form {want}"
        );
    }
}

#[test]
fn the_morse_minimum_sits_where_the_bond_valence_is_v_over_n() {
    // Rmin = r0 - b ln(V_A / N_A) = 1.1745 + 0.514 ln 5 = 2.00175 A.
    let rmin = LI_O_R0 - LI_O_B * (1.0f64 / N_LI).ln();
    assert!((rmin - 2.001_75).abs() < 1e-5);
    let m = model(
        cell(20.0, 20.0, 20.0, 90.0, 90.0, 90.0),
        vec![oxide()],
        vec![],
        vec![atom([0.0, 0.0, 0.0], FrameworkKind::Anion(0), 1.0, "O1")],
    );
    let (mut best_r, mut best_e) = (0.0, f64::INFINITY);
    for n in 0..=10_000 {
        let r = 1.5 + n as f64 * 1e-4;
        let (_, e) = evaluate_point(&m, m.lattice.to_frac(Cart::new(r, 0.0, 0.0)));
        if e < best_e {
            (best_r, best_e) = (r, e);
        }
    }
    assert!((best_r - rmin).abs() <= 1.5e-4, "minimum at {best_r} A");
    // Well depth D0 per bond (less the tiny shift), and there s = V_A / N_A = 0.2 v.u.
    assert!(close(best_e, morse_shifted(&m.anions[0], rmin), 1e-6));
    assert!((best_e + D0).abs() < 1e-3);
    let (dv, _) = evaluate_point(&m, m.lattice.to_frac(Cart::new(rmin, 0.0, 0.0)));
    assert!((dv - 0.8).abs() < 1e-12, "dV at Rmin = {dv}");
}

#[test]
fn a_commensurate_shift_of_the_framework_shifts_the_grid_by_whole_voxels() {
    let dims = [15, 12, 10];
    let shift = [2, 5, 3];
    let m = triclinic_model();
    let mut moved = m.clone();
    for a in &mut moved.atoms {
        for ax in 0..3 {
            a.frac.0[ax] += shift[ax] as f64 / dims[ax] as f64;
        }
    }
    let g0 = compute(&m, dims, &Progress::Silent).unwrap();
    let g1 = compute(&moved, dims, &Progress::Silent).unwrap();
    for (f0, f1) in [(&g0.energy, &g1.energy), (&g0.mismatch, &g1.mismatch)] {
        for idx in 0..f0.len() {
            let [i, j, k] = f0.ijk(idx);
            let v0 = f0.values[idx] as f64;
            let v1 = f1.get(
                (i + shift[0]) % dims[0],
                (j + shift[1]) % dims[1],
                (k + shift[2]) % dims[2],
            ) as f64;
            assert!(grid_close(v1, v0), "point {i} {j} {k}: {v0} vs {v1}");
        }
    }
}

#[test]
fn symmetry_equivalent_points_of_rock_salt_carry_equal_values() {
    let n = 12;
    let land = compute(&rock_salt_model(), [n, n, n], &Progress::Silent).unwrap();
    let neg = |i: usize| (n - i) % n;
    for g in [&land.energy, &land.mismatch] {
        for idx in 0..g.len() {
            let [i, j, k] = g.ijk(idx);
            let v = g.values[idx] as f64;
            // 3-fold axis along [111], inversion, mirror x <-> y (all in Fm-3m).
            for [a, b, c] in [[j, k, i], [neg(i), neg(j), neg(k)], [j, i, k]] {
                let w = g.get(a, b, c) as f64;
                assert!(
                    grid_close(w, v),
                    "({i},{j},{k}) = {v} but ({a},{b},{c}) = {w}"
                );
            }
        }
    }
}

#[test]
fn capped_values_never_exceed_the_caps_and_are_finite() {
    use FrameworkKind::*;
    // Atoms exactly on grid points: a cation at the origin and an anion at (1/2, 1/2, 1/2).
    let mut m = model(
        cell(5.0, 5.0, 5.0, 90.0, 90.0, 90.0),
        vec![oxide()],
        vec![cation("Nb", 5.0, 0.9)],
        vec![
            atom([0.0, 0.0, 0.0], Cation(0), 1.0, "Nb1"),
            atom([0.5, 0.5, 0.5], Anion(0), 1.0, "O1"),
            atom([0.5, 0.0, 0.0], Anion(0), 1.0, "O2"),
        ],
    );
    m.energy_cap = 5.0;
    m.mismatch_cap = 2.5;
    let land = compute(&m, [10, 10, 10], &Progress::Silent).unwrap();
    for v in &land.energy.values {
        assert!(v.is_finite() && *v <= 5.0, "energy {v}");
    }
    for v in &land.mismatch.values {
        assert!(v.is_finite() && *v >= 0.0 && *v <= 2.5, "mismatch {v}");
    }
    assert_eq!(land.energy.get(0, 0, 0), 5.0, "on the cation");
    assert_eq!(land.energy.get(5, 5, 5), 5.0, "on the anion");
    assert_eq!(land.mismatch.get(5, 5, 5), 2.5, "on the anion");
    let (dv, e) = evaluate_point(&m, Frac::new(0.0, 0.0, 0.0));
    assert!(dv.is_finite() && e == 5.0);
    // Some points are below the caps: the caps cut only the cores.
    assert!(land.energy.values.iter().any(|v| *v < 0.0));
}

#[test]
fn grid_values_agree_with_single_point_evaluation() {
    let m = triclinic_model();
    let dims = [23, 27, 31];
    let land = compute(&m, dims, &Progress::Silent).unwrap();
    assert_eq!(land.stats.points, 23 * 27 * 31);
    assert!(land.stats.neighbour_evaluations > land.stats.points as u64);
    let mut rng = Lcg(7);
    let mut uncapped = 0;
    for _ in 0..300 {
        let idx = (rng.next() * land.energy.len() as f64) as usize;
        let ijk = land.energy.ijk(idx);
        let (dv, e) = evaluate_point(&m, land.energy.frac(ijk));
        let (gdv, ge) = (
            land.mismatch.values[idx] as f64,
            land.energy.values[idx] as f64,
        );
        assert!(grid_close(ge, e), "energy at {ijk:?}: grid {ge}, point {e}");
        assert!(
            grid_close(gdv, dv),
            "mismatch at {ijk:?}: grid {gdv}, point {dv}"
        );
        if e < m.energy_cap {
            uncapped += 1;
        }
    }
    assert!(uncapped > 100, "the comparison must cover uncapped points");
}

fn export_atoms(m: &LandscapeModel) -> Vec<ExportAtom> {
    m.atoms
        .iter()
        .map(|a| {
            let z = match a.kind {
                FrameworkKind::Anion(i) => m.anions[i].species.element.atomic_number(),
                FrameworkKind::Cation(i) => m.cations[i].species.element.atomic_number(),
            };
            (z, m.lattice.to_cart(a.frac))
        })
        .collect()
}

const ENERGY: FieldLabel = FieldLabel {
    name: "site energy of Li+",
    unit: "eV",
};

fn small_triclinic_grid() -> (LandscapeModel, Grid) {
    let m = triclinic_model();
    let land = compute(&m, [7, 8, 9], &Progress::Silent).unwrap();
    (m, land.energy)
}

#[test]
fn cube_header_atoms_and_values_read_back() {
    let (m, grid) = small_triclinic_grid();
    let atoms = export_atoms(&m);
    let mut buf = Vec::new();
    write_cube(&mut buf, &grid, &atoms, ENERGY).unwrap();
    let text = String::from_utf8(buf).unwrap();
    let lines: Vec<&str> = text.lines().collect();
    assert!(lines[0].contains("hopmap") && lines[0].contains("site energy of Li+"));
    assert!(lines[1].contains("eV"));
    let nums = |l: &str| -> Vec<f64> { l.split_whitespace().map(|t| t.parse().unwrap()).collect() };
    let head = nums(lines[2]);
    assert_eq!(head, vec![atoms.len() as f64, 0.0, 0.0, 0.0]);
    for axis in 0..3 {
        let v = nums(lines[3 + axis]);
        assert_eq!(v[0] as usize, grid.dims[axis]);
        let want = m.lattice.vector(axis) / (grid.dims[axis] as f64 * BOHR_A);
        for c in 0..3 {
            assert!((v[1 + c] - want[c]).abs() < 1e-6, "voxel vector {axis}");
        }
    }
    for (n, (z, pos)) in atoms.iter().enumerate() {
        let v = nums(lines[6 + n]);
        assert_eq!(v[0] as u8, *z);
        for c in 0..3 {
            assert!((v[2 + c] * BOHR_A - pos.0[c]).abs() < 1e-5, "atom {n}");
        }
    }
    let values: Vec<f64> = lines[6 + atoms.len()..]
        .iter()
        .flat_map(|l| nums(l))
        .collect();
    assert_eq!(values.len(), grid.len());
    for (a, b) in values.iter().zip(&grid.values) {
        assert!(close(*a, *b as f64, 1e-5), "{a} vs {b}");
    }
    // Six values per line at most, and a new line at the end of each c-row (9 = 6 + 3).
    let body = &lines[6 + atoms.len()..];
    assert_eq!(body.len(), 7 * 8 * 2);
    assert!(body.iter().all(|l| l.split_whitespace().count() <= 6));
}

/// Reads an `.npy` file written by [`write_npy`]: checks the header and returns shape and values.
fn read_npy(bytes: &[u8]) -> ([usize; 3], Vec<f32>) {
    assert_eq!(&bytes[..8], b"\x93NUMPY\x01\x00", "magic and version 1.0");
    let hlen = u16::from_le_bytes([bytes[8], bytes[9]]) as usize;
    assert_eq!((10 + hlen) % 64, 0, "data aligned on 64 bytes");
    let header = std::str::from_utf8(&bytes[10..10 + hlen]).unwrap();
    assert!(header.ends_with('\n'));
    assert!(header.starts_with("{'descr': '<f4', 'fortran_order': False, 'shape': ("));
    let inside = header.split("'shape': (").nth(1).unwrap();
    let shape: Vec<usize> = inside
        .split(')')
        .next()
        .unwrap()
        .split(',')
        .map(|t| t.trim().parse().unwrap())
        .collect();
    let data = &bytes[10 + hlen..];
    let values: Vec<f32> = data
        .chunks_exact(4)
        .map(|c| f32::from_le_bytes([c[0], c[1], c[2], c[3]]))
        .collect();
    ([shape[0], shape[1], shape[2]], values)
}

#[test]
fn npy_header_is_valid_and_the_grid_round_trips() {
    let (_, grid) = small_triclinic_grid();
    let mut buf = Vec::new();
    write_npy(&mut buf, &grid).unwrap();
    let (shape, values) = read_npy(&buf);
    assert_eq!(shape, grid.dims);
    assert_eq!(values, grid.values);
}

#[test]
fn xsf_carries_the_crystal_and_n_plus_one_points_per_axis() {
    let (m, grid) = small_triclinic_grid();
    let atoms = export_atoms(&m);
    let mut buf = Vec::new();
    write_xsf(&mut buf, &grid, &atoms, ENERGY).unwrap();
    let text = String::from_utf8(buf).unwrap();
    let lines: Vec<&str> = text.lines().map(str::trim).collect();
    let at = |tag: &str| lines.iter().position(|l| *l == tag).unwrap();
    let pv = at("PRIMVEC");
    for axis in 0..3 {
        let v: Vec<f64> = lines[pv + 1 + axis]
            .split_whitespace()
            .map(|t| t.parse().unwrap())
            .collect();
        for c in 0..3 {
            assert!((v[c] - m.lattice.vector(axis)[c]).abs() < 1e-7);
        }
    }
    let pc = at("PRIMCOORD");
    assert_eq!(lines[pc + 1], format!("{} 1", atoms.len()));
    let begin = lines
        .iter()
        .position(|l| l.starts_with("BEGIN_DATAGRID_3D_"))
        .unwrap();
    assert_eq!(lines[begin + 1], "8 9 10");
    let end = at("END_DATAGRID_3D");
    let values: Vec<f64> = lines[begin + 6..end]
        .iter()
        .flat_map(|l| l.split_whitespace().map(|t| t.parse::<f64>().unwrap()))
        .collect();
    assert_eq!(values.len(), 8 * 9 * 10);
    // a runs fastest; the last point of each axis repeats the first.
    let xsf = |i: usize, j: usize, k: usize| values[(k * 9 + j) * 8 + i];
    for (i, j, k) in [(0, 0, 0), (3, 5, 2), (6, 7, 8)] {
        let v = grid.get(i, j, k) as f64;
        assert!(close(xsf(i, j, k), v, 1e-5));
    }
    assert_eq!(xsf(7, 2, 3), xsf(0, 2, 3));
    assert_eq!(xsf(1, 8, 3), xsf(1, 0, 3));
    assert_eq!(xsf(1, 2, 9), xsf(1, 2, 0));
}

fn scratch_dir(name: &str) -> PathBuf {
    let d = PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join(name);
    std::fs::create_dir_all(&d).unwrap();
    d
}

#[test]
fn files_are_written_whole_or_not_at_all() {
    let (m, grid) = small_triclinic_grid();
    let dir = scratch_dir("landscape-export");
    let path = dir.join("energy.npy");
    volumetric::write_npy_file(&path, &grid).unwrap();
    let (shape, values) = read_npy(&std::fs::read(&path).unwrap());
    assert_eq!((shape, values), (grid.dims, grid.values.clone()));
    volumetric::write_cube_file(&dir.join("energy.cube"), &grid, &export_atoms(&m), ENERGY)
        .unwrap();
    volumetric::write_xsf_file(&dir.join("energy.xsf"), &grid, &export_atoms(&m), ENERGY).unwrap();
    let leftovers: Vec<_> = std::fs::read_dir(&dir)
        .unwrap()
        .filter_map(|e| e.ok())
        .filter(|e| e.file_name().to_string_lossy().ends_with(".tmp"))
        .collect();
    assert!(leftovers.is_empty(), "temporary files left: {leftovers:?}");
    // A directory that does not exist: an error naming the path, and no file.
    let bad = dir.join("no-such-dir").join("energy.npy");
    let err = volumetric::write_npy_file(&bad, &grid).unwrap_err();
    assert!(err.to_string().contains("no-such-dir"), "{err}");
    assert!(!bad.exists());
}

#[test]
fn model_json_lists_every_atom_with_cartesian_positions() {
    let m = triclinic_model();
    let v: serde_json::Value = serde_json::from_str(&model_to_json(&m)).unwrap();
    let atoms = v["atoms"].as_array().unwrap();
    assert_eq!(atoms.len(), m.atoms.len());
    let c = m.lattice.to_cart(m.atoms[2].frac);
    for ax in 0..3 {
        assert!((atoms[2]["cart"][ax].as_f64().unwrap() - c.0[ax]).abs() < 1e-12);
    }
    assert_eq!(atoms[2]["occupancy"].as_f64(), Some(0.5));
    assert_eq!(v["anion_kinds"][1]["r0"].as_f64(), Some(1.0968));
    assert_eq!(v["cation_kinds"][0]["rho"].as_f64(), Some(1.05));
    assert_eq!(v["morse_shifted_to_zero_at_cutoff"].as_bool(), Some(true));
}

/// Re-evaluates the grid with the independent NumPy script (tools/landscape_reference.py) and
/// requires the f32 kernel's agreement on both fields, where they are not capped: 1e-5 relative,
/// or absolute below 1 eV or v.u. ([`grid_close`]). Runs only when HOPMAP_PYTHON names a python
/// with numpy.
#[test]
fn numpy_reference_agrees_with_the_grid() {
    let Ok(python) = std::env::var("HOPMAP_PYTHON") else {
        eprintln!("skipped: set HOPMAP_PYTHON to a python with numpy to run the NumPy reference");
        return;
    };
    let dir = PathBuf::from(concat!(env!("CARGO_MANIFEST_DIR"), "/../.."))
        .join("target/landscape-reference");
    std::fs::create_dir_all(&dir).unwrap();
    let m = triclinic_model();
    let dims = [21, 24, 29];
    let land = compute(&m, dims, &Progress::Silent).unwrap();
    std::fs::write(dir.join("model.json"), model_to_json(&m)).unwrap();
    volumetric::write_npy_file(&dir.join("ours_mismatch.npy"), &land.mismatch).unwrap();
    volumetric::write_npy_file(&dir.join("ours_energy.npy"), &land.energy).unwrap();
    let script = PathBuf::from(concat!(env!("CARGO_MANIFEST_DIR"), "/../.."))
        .join("tools/landscape_reference.py");
    let out = std::process::Command::new(&python)
        .arg(&script)
        .arg(dir.join("model.json"))
        .args(dims.map(|n| n.to_string()))
        .arg("--out")
        .arg(dir.join("reference"))
        .arg("--compare-mismatch")
        .arg(dir.join("ours_mismatch.npy"))
        .arg("--compare-energy")
        .arg(dir.join("ours_energy.npy"))
        .arg("--tolerance")
        .arg("1e-5")
        .arg("--absolute-below")
        .arg("1")
        .output()
        .expect("HOPMAP_PYTHON must run");
    let stdout = String::from_utf8_lossy(&out.stdout);
    eprintln!("{stdout}{}", String::from_utf8_lossy(&out.stderr));
    assert!(out.status.success(), "NumPy reference disagrees or failed");
    assert!(stdout.contains("max relative error energy"));
}

/// The cube and XSF files read back with ASE (a general-purpose materials library on PyPI,
/// `ase.io.cube.read_cube_data`, `ase.io.xsf.read_xsf`): same cell, atoms and values as the
/// `.npy`. Runs only when HOPMAP_PYTHON names a python with numpy and ase.
#[test]
fn ase_reads_our_cube_and_xsf_files() {
    let Ok(python) = std::env::var("HOPMAP_PYTHON") else {
        eprintln!("skipped: set HOPMAP_PYTHON to a python with numpy and ase");
        return;
    };
    let has_ase = std::process::Command::new(&python)
        .args(["-c", "import ase, numpy"])
        .status()
        .map(|s| s.success())
        .unwrap_or(false);
    if !has_ase {
        eprintln!("skipped: {python} has no ase");
        return;
    }
    let (m, grid) = small_triclinic_grid();
    let dir = scratch_dir("landscape-ase");
    let atoms = export_atoms(&m);
    volumetric::write_cube_file(&dir.join("e.cube"), &grid, &atoms, ENERGY).unwrap();
    volumetric::write_xsf_file(&dir.join("e.xsf"), &grid, &atoms, ENERGY).unwrap();
    volumetric::write_npy_file(&dir.join("e.npy"), &grid).unwrap();
    let script = r#"
import sys, numpy as np
from ase.io.cube import read_cube_data
from ase.io.xsf import read_xsf
d = sys.argv[1]
ref = np.load(d + "/e.npy")
data, atoms = read_cube_data(d + "/e.cube")
assert data.shape == ref.shape, data.shape
assert np.allclose(data, ref, rtol=1e-5, atol=1e-6)
assert atoms.get_chemical_symbols() == ["O", "O", "O", "F", "Ti", "P"]
assert np.allclose(atoms.cell.cellpar(), [5.3, 6.1, 7.2, 82.0, 95.0, 103.0], atol=1e-4)
with open(d + "/e.xsf") as f:
    grid, origin, span, atoms2 = read_xsf(f, read_data=True)
assert grid.shape == tuple(n + 1 for n in ref.shape), grid.shape
assert np.allclose(grid[:-1, :-1, :-1], ref, rtol=1e-5, atol=1e-6)
assert np.allclose(atoms2.cell.cellpar(), [5.3, 6.1, 7.2, 82.0, 95.0, 103.0], atol=1e-6)
print("ase agrees")
"#;
    let out = std::process::Command::new(&python)
        .args(["-c", script])
        .arg(&dir)
        .output()
        .unwrap();
    eprintln!(
        "{}{}",
        String::from_utf8_lossy(&out.stdout),
        String::from_utf8_lossy(&out.stderr)
    );
    assert!(out.status.success(), "ASE does not read our files back");
}
