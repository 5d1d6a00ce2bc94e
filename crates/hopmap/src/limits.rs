//! Resource bounds: what hopmap refuses before it reads, allocates or computes, and why.
//!
//! Every bound here is checked *before* the work it protects: a file's size before it is read,
//! an atom count before positions are stored, a cell's shape before a neighbour search, and a
//! grid's points, memory and time before it is allocated ([`plan_grid`]). A refusal is a plain
//! sentence that names the bound and, for grids, a spacing that would fit. The README lists
//! these bounds under "Limits".

use crate::lattice::Lattice;

/// Largest structure file read (bytes): 64 MiB, about 1.5 million atom lines of a P 1 CIF.
pub use hopmap_cif::MAX_FILE_BYTES;

/// Most atom positions in the full cell. The landscape evaluates every framework atom near
/// every grid point; above this the cell is a supercell or a model of disorder, not a crystal
/// to screen.
pub const MAX_ATOMS: usize = 100_000;

/// Longest cell edge (A). The largest inorganic cells in the structure databases are a few
/// hundred angstrom (common practice); 1000 A also bounds the default grid (see
/// [`plan_grid`]).
pub const MAX_CELL_LENGTH_A: f64 = 1000.0;

/// Smallest perpendicular width of the cell (A): the distance between opposite faces. No
/// crystal repeats in less than about 2 A (the shortest lattice translations of metals are
/// 2.2-2.5 A, common practice); a thinner cell is a flat cell or a typing slip, and its
/// neighbour search would take without end.
pub const MIN_CELL_WIDTH_A: f64 = 1.0;

/// Smallest volume per atom position (A^3). The densest solids hold one atom in about 5.7 A^3
/// (diamond, from the handbook cell a = 3.567 A with 8 atoms; common practice); below 1 A^3
/// atoms would have to overlap.
pub const MIN_VOLUME_PER_ATOM_A3: f64 = 1.0;

/// Most symmetry operations in a list: 192 is the order of the largest space groups in a
/// centred cell (F m -3 m and the other F-centred cubic groups, International Tables Vol. A).
pub const MAX_SYMMETRY_OPERATIONS: usize = 192;

/// Finest grid spacing accepted (A).
pub const MIN_SPACING_A: f64 = 0.02;
/// Coarsest grid spacing accepted (A): beyond this the grid no longer resolves a bottleneck.
pub const MAX_SPACING_A: f64 = 2.0;

/// Peak memory per grid point (bytes) over the whole analysis: two f32 fields (8 bytes), the
/// union-find records of the two percolations running side by side, the basin labels of the
/// site network and the profiles' covering. Measured as the peak heap of `analyse` by
/// `cargo bench -p hopmap --bench paths_stages` (olivine LiFePO4, TiNb2O7, LLZO garnet and the
/// olivine supercells up to 3x3x3): 39 bytes per point with the 8-byte records, 54-55 when a
/// percolation falls back to its 16-byte records (see `percolation::Narrow`); the budget
/// covers the fallback, rounded up.
pub const BYTES_PER_GRID_POINT: u64 = 56;

/// Grid evaluation cost (seconds per grid point and framework atom within the 6 A cutoff, one
/// core), for the time estimate. Measured on olivine LiFePO4 at 0.07 A (3.2 s for 0.87e6
/// points, about 87 atoms within 6 A, 2 cores), rounded up; the estimate is good to a factor
/// of about three.
pub const SECONDS_PER_POINT_NEIGHBOUR: f64 = 1e-7;

/// The whole-analysis budget of one structure.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Budget {
    /// Largest memory the grids may take (bytes). Default 4 GiB.
    pub max_memory_bytes: u64,
    /// Longest estimated grid time (s) accepted before starting; None: no bound. Also the
    /// wall-clock limit a batch driver applies while the grid runs.
    pub max_seconds: Option<f64>,
}

impl Default for Budget {
    fn default() -> Self {
        Budget {
            max_memory_bytes: 4 << 30,
            max_seconds: None,
        }
    }
}

/// A sentence for a byte count: `3.1 GB`, `512 MB`.
pub fn human_bytes(b: f64) -> String {
    if b >= 1e9 {
        format!("{:.1} GB", b / 1e9)
    } else {
        format!("{:.0} MB", (b / 1e6).max(1.0))
    }
}

/// A number for messages: as written when that is short (`0.0100001`, `5.1295`, `-5`), else
/// scientific with four significant digits (`1.000e300`), so that an absurd input never prints
/// a 300-digit number.
pub fn short_number(x: f64) -> String {
    let plain = format!("{x}");
    let a = x.abs();
    if plain.len() <= 12 {
        plain
    } else if (1e-4..1e9).contains(&a) {
        // seven significant digits, trailing zeros dropped: 179.99900000000002 -> 179.999
        let decimals = (6 - a.log10().floor() as i32).max(0) as usize;
        let s = format!("{x:.decimals$}");
        if s.contains('.') {
            s.trim_end_matches('0').trim_end_matches('.').to_string()
        } else {
            s
        }
    } else {
        format!("{x:.3e}")
    }
}

/// Checks that a lattice describes a crystal hopmap can analyse: edges at most
/// [`MAX_CELL_LENGTH_A`], perpendicular widths at least [`MIN_CELL_WIDTH_A`] (this catches
/// flat cells: an angle of 179.999 degrees, c = 1e-5 A).
pub fn check_lattice(lattice: &Lattice) -> Result<(), String> {
    let p = lattice.parameters();
    for (i, name) in ["a", "b", "c"].iter().enumerate() {
        // the length without overflow for edges near f64::MAX
        let e = lattice.vector(i);
        let m = e.amax();
        let v = if m > 0.0 { m * (e / m).norm() } else { 0.0 };
        if v.is_nan() || v > MAX_CELL_LENGTH_A {
            return Err(format!(
                "cell edge {name} = {} A is longer than hopmap analyses ({} A at most)",
                short_number(v),
                MAX_CELL_LENGTH_A
            ));
        }
    }
    let w = lattice.perpendicular_widths();
    for (i, name) in ["a", "b", "c"].iter().enumerate() {
        if w[i].is_nan() || w[i] < MIN_CELL_WIDTH_A {
            return Err(format!(
                "the cell is flat: its width across the {name} direction is {} A (at least {} A \
                 is needed; cell a = {}, b = {}, c = {} A, alpha = {}, beta = {}, gamma = {} deg)",
                short_number(w[i]),
                MIN_CELL_WIDTH_A,
                short_number(p.a),
                short_number(p.b),
                short_number(p.c),
                short_number(p.alpha),
                short_number(p.beta),
                short_number(p.gamma),
            ));
        }
    }
    Ok(())
}

/// Checks the number of atom positions in a cell of the given volume: at most [`MAX_ATOMS`] and
/// at least [`MIN_VOLUME_PER_ATOM_A3`] each.
pub fn check_atom_count(count: usize, volume_a3: f64) -> Result<(), String> {
    if count > MAX_ATOMS {
        return Err(format!(
            "the cell holds {count} atom positions; hopmap analyses at most {MAX_ATOMS}"
        ));
    }
    if count > 0 && volume_a3 / (count as f64) < MIN_VOLUME_PER_ATOM_A3 {
        return Err(format!(
            "{count} atom positions in a cell of {} A^3 leave {} A^3 per atom (at least {} \
             A^3 is needed; atoms would overlap): check the cell parameters",
            short_number(volume_a3),
            short_number(volume_a3 / count as f64),
            MIN_VOLUME_PER_ATOM_A3
        ));
    }
    Ok(())
}

/// Checks a grid spacing asked for (A): finite, between [`MIN_SPACING_A`] and
/// [`MAX_SPACING_A`] inclusive. The message states exactly the bounds checked.
pub fn check_spacing(spacing_a: f64) -> Result<(), String> {
    if spacing_a.is_finite() && (MIN_SPACING_A..=MAX_SPACING_A).contains(&spacing_a) {
        Ok(())
    } else {
        Err(format!(
            "grid spacing {} A is outside {MIN_SPACING_A}-{MAX_SPACING_A} A (both included)",
            short_number(spacing_a)
        ))
    }
}

/// A grid decided before it is allocated.
#[derive(Debug, Clone, PartialEq)]
pub struct GridPlan {
    /// The spacing used (A).
    pub spacing_a: f64,
    /// Points per axis.
    pub dims: [usize; 3],
    pub points: u64,
    /// Estimated peak memory of the analysis (bytes).
    pub memory_bytes: u64,
    /// Estimated grid time on one core (s).
    pub seconds_one_core: f64,
}

/// Points of a grid at a spacing, computed in floating point so that absurd cells cannot
/// overflow (the symmetry-compatible dimensions are at most a few points more per axis).
pub fn points_at(lattice: &Lattice, spacing_a: f64) -> f64 {
    let p = lattice.parameters();
    [p.a, p.b, p.c]
        .iter()
        .map(|l| (l / spacing_a).ceil().max(1.0))
        .product()
}

/// The spacing (A, rounded up to 0.01 A) at which a grid of this lattice fits a number of
/// points.
pub fn spacing_for_points(lattice: &Lattice, points: f64) -> f64 {
    let mut s = (lattice.volume() / points).cbrt().max(MIN_SPACING_A);
    s = (s * 100.0).ceil() / 100.0;
    while points_at(lattice, s) > points && s < 100.0 {
        s += 0.01;
    }
    s
}

/// Decides the grid of an analysis before anything is allocated: checks the spacing, estimates
/// the points, the memory ([`BYTES_PER_GRID_POINT`]) and the time
/// ([`SECONDS_PER_POINT_NEIGHBOUR`] times the framework atoms within 6 A of a point), and
/// refuses a grid over the budget with the estimate and a spacing that would fit. `dims` turns
/// an accepted spacing into symmetry-compatible points per axis.
pub fn plan_grid(
    lattice: &Lattice,
    atoms_in_cell: usize,
    spacing_a: f64,
    budget: &Budget,
    dims: impl Fn(f64) -> [usize; 3],
) -> Result<GridPlan, String> {
    check_spacing(spacing_a)?;
    let points_f = points_at(lattice, spacing_a);
    let memory_f = points_f * BYTES_PER_GRID_POINT as f64;
    let density = atoms_in_cell as f64 / lattice.volume();
    let neighbours = (density * 4.0 / 3.0 * std::f64::consts::PI * 216.0).max(1.0);
    let seconds_f = points_f * neighbours * SECONDS_PER_POINT_NEIGHBOUR;
    if memory_f > budget.max_memory_bytes as f64 {
        let fit = spacing_for_points(
            lattice,
            budget.max_memory_bytes as f64 / BYTES_PER_GRID_POINT as f64,
        );
        if fit > MAX_SPACING_A {
            return Err(format!(
                "a grid at {} A would have {:.2e} points and need about {} of memory, over the \
                 budget of {}; even the coarsest spacing, {MAX_SPACING_A} A, would not fit (the \
                 cell of {} A^3 is too large to analyse)",
                short_number(spacing_a),
                points_f,
                human_bytes(memory_f),
                human_bytes(budget.max_memory_bytes as f64),
                short_number(lattice.volume()),
            ));
        }
        return Err(format!(
            "a grid at {} A would have {:.2e} points and need about {} of memory, over the \
             budget of {}; a spacing of {} A or coarser fits",
            short_number(spacing_a),
            points_f,
            human_bytes(memory_f),
            human_bytes(budget.max_memory_bytes as f64),
            short_number(fit)
        ));
    }
    if let Some(max_s) = budget.max_seconds
        && seconds_f > max_s
    {
        let fit_points = points_f * max_s / seconds_f;
        let fit = spacing_for_points(lattice, fit_points.max(1.0));
        if fit > MAX_SPACING_A {
            return Err(format!(
                "a grid at {} A would take about {} s on one core, over the time budget of {} \
                 s, and even the coarsest spacing, {MAX_SPACING_A} A, would not fit",
                short_number(spacing_a),
                short_number(seconds_f.round()),
                short_number(max_s),
            ));
        }
        return Err(format!(
            "a grid at {} A would have {:.2e} points and take about {} s on one core, over the \
             time budget of {} s; a spacing of {} A or coarser fits",
            short_number(spacing_a),
            points_f,
            short_number(seconds_f.round()),
            short_number(max_s),
            short_number(fit)
        ));
    }
    let d = dims(spacing_a);
    let points = d.iter().map(|&n| n as u64).product::<u64>();
    Ok(GridPlan {
        spacing_a,
        dims: d,
        points,
        memory_bytes: points * BYTES_PER_GRID_POINT,
        seconds_one_core: points as f64 * neighbours * SECONDS_PER_POINT_NEIGHBOUR,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::lattice::CellParameters;

    fn cubic(a: f64) -> Lattice {
        Lattice::from_parameters(CellParameters {
            a,
            b: a,
            c: a,
            alpha: 90.0,
            beta: 90.0,
            gamma: 90.0,
        })
        .unwrap()
    }

    #[test]
    fn spacing_bounds_in_the_message_are_the_bounds_checked() {
        assert!(check_spacing(MIN_SPACING_A).is_ok());
        assert!(check_spacing(MAX_SPACING_A).is_ok());
        for bad in [
            MIN_SPACING_A - 1e-9,
            0.0,
            -1.0,
            f64::NAN,
            f64::INFINITY,
            2.0001,
        ] {
            let e = check_spacing(bad).unwrap_err();
            assert!(e.contains("0.02-2 A"), "{e}");
        }
    }

    #[test]
    fn a_grid_over_the_memory_budget_is_refused_with_a_spacing_that_fits() {
        // 300 A cube at 0.1 A: 2.7e10 points, 1.3 TB
        let l = cubic(300.0);
        let e = plan_grid(&l, 8, 0.1, &Budget::default(), |_| [1, 1, 1]).unwrap_err();
        assert!(e.contains("2.70e10 points"), "{e}");
        let fit: f64 = e.rsplit("spacing of ").next().unwrap()[..4]
            .trim()
            .parse()
            .unwrap();
        // the suggested spacing really fits the budget
        assert!(points_at(&l, fit) * (BYTES_PER_GRID_POINT as f64) <= (4u64 << 30) as f64);
        assert!(plan_grid(&l, 8, fit, &Budget::default(), |_| [1, 1, 1]).is_ok());
    }

    #[test]
    fn a_cell_too_large_for_any_spacing_is_refused_without_a_spacing_out_of_range() {
        let e = plan_grid(&cubic(1000.0), 8, 0.25, &Budget::default(), |_| [1, 1, 1]).unwrap_err();
        assert!(e.contains("even the coarsest spacing, 2 A"), "{e}");
    }

    #[test]
    fn short_numbers_never_run_to_hundreds_of_digits() {
        assert_eq!(short_number(1e300), "1.000e300");
        assert_eq!(short_number(5.1295), "5.1295");
        assert_eq!(short_number(90.0), "90");
        assert_eq!(short_number(0.0100001), "0.0100001");
        assert_eq!(short_number(f64::NAN), "NaN");
        assert_eq!(short_number(179.99900000000002), "179.999");
        assert_eq!(short_number(8.953e-5), "0.00008953");
    }
}
