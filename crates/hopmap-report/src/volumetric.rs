//! Volumetric files of a landscape grid, and a JSON description of a landscape model.
//!
//! - Gaussian cube: two comment lines, then the atom count and origin, the three voxel vectors
//!   with their point counts, the atoms (atomic number, charge column, position) and the values,
//!   six per line, c fastest (the order of [`Grid`]). Lengths in bohr, as the format requires.
//! - XSF: `CRYSTAL`, `PRIMVEC` and `PRIMCOORD` in angstrom, then a periodic general grid in a
//!   `BEGIN_BLOCK_DATAGRID_3D` block. XSF grids include the far face of the cell, so every axis
//!   carries n + 1 points, the last equal to the first; values run with a fastest.
//! - NumPy `.npy`, format version 1.0: little-endian float32 (`'<f4'`), C order,
//!   shape (na, nb, nc); `numpy.load` reads it as `grid[i, j, k]`.
//!
//! Writers take any [`Write`]; the `write_*_file` functions write a temporary file next to the
//! target and rename it into place, so that a failed write leaves no partial output.

use hopmap::grid::Grid;
use hopmap::landscape::{COULOMB_EV_A, FrameworkKind, LandscapeModel};
use hopmap::lattice::Cart;
use rayon::prelude::*;
use std::fs;
use std::io::{self, BufWriter, Write};
use std::path::Path;

/// Bohr radius in angstrom (CODATA 2018).
pub const BOHR_A: f64 = 0.529_177_210_903;

/// A framework atom as the volumetric formats want it: atomic number and Cartesian position (A).
pub type ExportAtom = (u8, Cart);

/// What a grid holds, for the comment lines and block names of the files.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct FieldLabel<'a> {
    /// The quantity in words, e.g. "site energy of Li+".
    pub name: &'a str,
    /// Its unit, e.g. "eV" or "v.u.".
    pub unit: &'a str,
}

/// Writes `grid` as a Gaussian cube file. The origin is the cell origin; voxel vectors are the
/// lattice vectors divided by the point counts.
pub fn write_cube(
    w: &mut impl Write,
    grid: &Grid,
    atoms: &[ExportAtom],
    field: FieldLabel,
) -> io::Result<()> {
    let [na, nb, nc] = grid.dims;
    writeln!(w, "hopmap bond-valence landscape: {}", one_line(field.name))?;
    writeln!(
        w,
        "field {} in {}, grid {na} x {nb} x {nc} over the unit cell, lengths in bohr",
        one_line(field.name),
        one_line(field.unit)
    )?;
    writeln!(w, "{:5}{:12.6}{:12.6}{:12.6}", atoms.len(), 0.0, 0.0, 0.0)?;
    for (axis, n) in grid.dims.iter().enumerate() {
        let v = grid.lattice.vector(axis) / (*n as f64 * BOHR_A);
        writeln!(w, "{:5}{:12.6}{:12.6}{:12.6}", n, v.x, v.y, v.z)?;
    }
    for (z, pos) in atoms {
        let p = pos.0 / BOHR_A;
        writeln!(
            w,
            "{:5}{:12.6}{:12.6}{:12.6}{:12.6}",
            z, *z as f64, p.x, p.y, p.z
        )?;
    }
    // rows of nc values, six to a line; blocks of rows formatted in parallel, written in order
    let rows_per_block = (BLOCK_VALUES / nc).max(1);
    let blocks: Vec<String> = grid
        .values
        .par_chunks(rows_per_block * nc)
        .map(|rows| {
            let mut s = String::with_capacity(rows.len() * 14);
            for row in rows.chunks(nc) {
                for line in row.chunks(6) {
                    for v in line {
                        push_value(&mut s, *v);
                    }
                    s.push('\n');
                }
            }
            s
        })
        .collect();
    for b in &blocks {
        w.write_all(b.as_bytes())?;
    }
    Ok(())
}

/// Values per block of text formatted on one thread.
const BLOCK_VALUES: usize = 1 << 16;

/// Writes `grid` as an XSF file: the crystal (lattice vectors and framework atoms, A) and the
/// field as a periodic 3D data grid of (na + 1) x (nb + 1) x (nc + 1) points.
pub fn write_xsf(
    w: &mut impl Write,
    grid: &Grid,
    atoms: &[ExportAtom],
    field: FieldLabel,
) -> io::Result<()> {
    let [na, nb, nc] = grid.dims;
    writeln!(
        w,
        "# hopmap bond-valence landscape: {}",
        one_line(field.name)
    )?;
    writeln!(
        w,
        "# unit of the data grid: {}; lengths in angstrom",
        one_line(field.unit)
    )?;
    writeln!(w, "CRYSTAL")?;
    writeln!(w, "PRIMVEC")?;
    for axis in 0..3 {
        let v = grid.lattice.vector(axis);
        writeln!(w, "  {:14.8} {:14.8} {:14.8}", v.x, v.y, v.z)?;
    }
    writeln!(w, "PRIMCOORD")?;
    writeln!(w, "  {} 1", atoms.len())?;
    for (z, pos) in atoms {
        writeln!(
            w,
            "  {:3} {:14.8} {:14.8} {:14.8}",
            z, pos.0.x, pos.0.y, pos.0.z
        )?;
    }
    let name = block_name(field);
    writeln!(w, "BEGIN_BLOCK_DATAGRID_3D")?;
    writeln!(w, "  hopmap_{name}")?;
    writeln!(w, "  BEGIN_DATAGRID_3D_{name}")?;
    writeln!(w, "    {} {} {}", na + 1, nb + 1, nc + 1)?;
    writeln!(w, "    {:14.8} {:14.8} {:14.8}", 0.0, 0.0, 0.0)?;
    for axis in 0..3 {
        let v = grid.lattice.vector(axis);
        writeln!(w, "    {:14.8} {:14.8} {:14.8}", v.x, v.y, v.z)?;
    }
    // (na + 1)(nb + 1)(nc + 1) values, a fastest, six to a line counted over the whole grid;
    // planes of fixed k formatted in parallel, written in order
    let plane = (na + 1) * (nb + 1);
    let planes: Vec<String> = (0..=nc)
        .into_par_iter()
        .map(|k| {
            let mut s = String::with_capacity(plane * 14);
            let mut index = k * plane;
            for j in 0..=nb {
                for i in 0..=na {
                    push_value(&mut s, grid.get(i % na, j % nb, k % nc));
                    index += 1;
                    if index % 6 == 0 {
                        s.push('\n');
                    }
                }
            }
            s
        })
        .collect();
    for p in &planes {
        w.write_all(p.as_bytes())?;
    }
    if (plane * (nc + 1)) % 6 != 0 {
        writeln!(w)?;
    }
    writeln!(w, "  END_DATAGRID_3D")?;
    writeln!(w, "END_BLOCK_DATAGRID_3D")?;
    Ok(())
}

/// Writes `grid` as a NumPy `.npy` file (format 1.0, `'<f4'`, C order, shape (na, nb, nc)).
pub fn write_npy(w: &mut impl Write, grid: &Grid) -> io::Result<()> {
    let [na, nb, nc] = grid.dims;
    let mut header =
        format!("{{'descr': '<f4', 'fortran_order': False, 'shape': ({na}, {nb}, {nc}), }}");
    // Magic (6) + version (2) + header length (2) + header, padded with spaces and ended by a
    // newline so that the data starts on a multiple of 64 bytes.
    let unpadded = 10 + header.len() + 1;
    let total = unpadded.div_ceil(64) * 64;
    header.push_str(&" ".repeat(total - unpadded));
    header.push('\n');
    let len = u16::try_from(header.len())
        .map_err(|_| io::Error::new(io::ErrorKind::InvalidInput, "npy header too long"))?;
    w.write_all(b"\x93NUMPY\x01\x00")?;
    w.write_all(&len.to_le_bytes())?;
    w.write_all(header.as_bytes())?;
    let mut buf = Vec::with_capacity(4 * 4096);
    for chunk in grid.values.chunks(4096) {
        buf.clear();
        for v in chunk {
            buf.extend_from_slice(&v.to_le_bytes());
        }
        w.write_all(&buf)?;
    }
    Ok(())
}

/// [`write_cube`] to a file, atomically (temporary file, then rename).
pub fn write_cube_file(
    path: &Path,
    grid: &Grid,
    atoms: &[ExportAtom],
    field: FieldLabel,
) -> io::Result<()> {
    write_atomically(path, |w| write_cube(w, grid, atoms, field))
}

/// [`write_xsf`] to a file, atomically (temporary file, then rename).
pub fn write_xsf_file(
    path: &Path,
    grid: &Grid,
    atoms: &[ExportAtom],
    field: FieldLabel,
) -> io::Result<()> {
    write_atomically(path, |w| write_xsf(w, grid, atoms, field))
}

/// [`write_npy`] to a file, atomically (temporary file, then rename).
pub fn write_npy_file(path: &Path, grid: &Grid) -> io::Result<()> {
    write_atomically(path, |w| write_npy(w, grid))
}

/// Writes through `body` atomically ([`crate::output::write_atomic_with`]); errors name `path`.
fn write_atomically(
    path: &Path,
    body: impl FnOnce(&mut BufWriter<&fs::File>) -> io::Result<()>,
) -> io::Result<()> {
    crate::output::write_atomic_with(path, body)
        .map_err(|e| io::Error::new(e.kind(), format!("{}: {e}", path.display())))
}

/// One value as ` -1.23456E-01` (a space and 12 characters, the usual `%12.5E` of cube files),
/// appended to `s`.
fn push_value(s: &mut String, v: f32) {
    use std::fmt::Write as _;
    if !v.is_finite() {
        let _ = write!(s, " {v:>12}");
        return;
    }
    let mut text = [0u8; 32];
    let mut cursor = io::Cursor::new(&mut text[..]);
    let _ = write!(cursor, "{:.5E}", v as f64);
    let len = cursor.position() as usize;
    let t = std::str::from_utf8(&text[..len]).unwrap_or("0.00000E0");
    let (mantissa, exponent) = t.split_once('E').unwrap_or((t, "0"));
    let e: i32 = exponent.parse().unwrap_or(0);
    let sign = if e < 0 { '-' } else { '+' };
    let _ = write!(s, " {mantissa:>8}E{sign}{:02}", e.abs());
}

fn one_line(s: &str) -> String {
    s.replace(['\n', '\r'], " ")
}

/// The field name as an XSF block name: letters, digits and underscores.
fn block_name(field: FieldLabel) -> String {
    let raw = format!("{} {}", field.name, field.unit);
    let mut out = String::new();
    for c in raw.chars() {
        if c.is_ascii_alphanumeric() {
            out.push(c);
        } else if c == '+' {
            out.push('p');
        } else if !out.ends_with('_') {
            out.push('_');
        }
    }
    out.trim_matches('_').to_string()
}

/// The model as JSON, for independent re-evaluation (`tools/landscape_reference.py`): lattice
/// vectors (rows, A), probe, anion kinds (r0, b, Rmin in A, D0 in eV, cutoff in A), cation kinds
/// (charge in e, rho in A), atoms with kind, occupancy and fractional and Cartesian positions (A),
/// the Coulomb cutoff (A), the caps, the Coulomb constant (eV A) and the Morse-shift convention.
pub fn model_to_json(model: &LandscapeModel) -> String {
    use serde_json::json;
    let lattice: Vec<[f64; 3]> = (0..3)
        .map(|i| {
            let v = model.lattice.vector(i);
            [v.x, v.y, v.z]
        })
        .collect();
    let anions: Vec<_> = model
        .anions
        .iter()
        .map(|k| {
            json!({
                "species": k.species.name(), "r0": k.r0, "b": k.b, "rmin": k.rmin,
                "d0": k.d0, "cutoff": k.cutoff, "radius": k.radius, "source": k.source,
            })
        })
        .collect();
    let cations: Vec<_> = model
        .cations
        .iter()
        .map(|k| json!({"species": k.species.name(), "charge": k.charge, "rho": k.rho, "radius": k.radius}))
        .collect();
    let atoms: Vec<_> = model
        .atoms
        .iter()
        .map(|a| {
            let (kind, index) = match a.kind {
                FrameworkKind::Anion(i) => ("anion", i),
                FrameworkKind::Cation(i) => ("cation", i),
            };
            let c = model.lattice.to_cart(a.frac);
            json!({
                "label": a.label, "kind": kind, "index": index, "occupancy": a.occupancy,
                "frac": [a.frac.0.x, a.frac.0.y, a.frac.0.z], "cart": [c.0.x, c.0.y, c.0.z],
            })
        })
        .collect();
    let p = &model.probe;
    let doc = json!({
        "format": "hopmap landscape model 1",
        "lengths": "angstrom", "energies": "eV", "valences": "v.u.",
        "lattice_vectors": lattice,
        "probe": {
            "element": p.element.symbol(), "valence": p.valence, "charge": p.charge,
            "coordination": p.coordination, "radius": p.radius,
        },
        "anion_kinds": anions,
        "cation_kinds": cations,
        "atoms": atoms,
        "coulomb_cutoff": model.coulomb_cutoff,
        "coulomb_constant": COULOMB_EV_A,
        "energy_cap": model.energy_cap,
        "mismatch_cap": model.mismatch_cap,
        "morse_shifted_to_zero_at_cutoff": true,
    });
    serde_json::to_string_pretty(&doc).expect("a JSON value always serialises")
}
