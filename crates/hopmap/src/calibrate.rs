//! Fitting the energy scale of the site-energy model to reference barriers (science notes,
//! section 2): the Morse well depth per bond `d0_ev` and the screening factor of the cation
//! repulsion `screening_factor`. The charge scale is held at the value of the base knobs.
//!
//! # What is fitted
//! Each [`Reference`] is a structure, a mobile ion, a barrier (eV: measured, or computed by NEB)
//! and, optionally, the dimension of the network the barrier belongs to. The model predicts
//! `Ea_d = E_d - (lowest energy of that network)` from the percolation of the site-energy grid
//! (section 4); without a stated dimension the first network to open (the lowest threshold) is
//! used. The objective is the sum of squared residuals `predicted - reference` over the list. A
//! reference whose network does not open below the energy cap counts as a miss of
//! [`MISSING_PENALTY_EV`].
//!
//! # Why it is fast
//! For fixed bond-valence parameters the site energy is linear in the well depth:
//! `E(r) = d0_ev M(r) + C(r)`, with `M` the Morse sum per unit `d0_ev` (it does not depend on the
//! screening) and `C` the screened cation repulsion (it does not depend on `d0_ev`). Per
//! structure, `M` is computed once and `C` once per screening factor of the [`CalibrationGrid`];
//! each trial `d0_ev` then costs one pass combining two f32 grids and one percolation sweep.
//! The barriers on the grid of knob values are tabulated; between the tabulated values they are
//! interpolated bilinearly (in `d0_ev` the barrier is continuous and piecewise linear, because
//! every threshold is the energy of one voxel, itself linear in `d0_ev`). The minimum of the
//! interpolated objective is the fit; the residuals at the fitted knobs (and at the base knobs,
//! for comparison) are then recomputed exactly with the full pipeline ([`crate::analysis`]).
//!
//! # Leave-one-out
//! For each reference, the knobs are refitted (on the interpolated table) without it and its
//! barrier predicted with them: the leave-one-out error says how well the fit carries over to a
//! structure it has not seen, which the fitted residuals alone overstate.
//!
//! # The reference list (CSV)
//! A header line naming the columns, then one row per reference, RFC 4180 quoting:
//! `file` (structure file: CIF, POSCAR, extended XYZ; relative paths from the list's folder),
//! `ion` (element symbol; empty: the default ion), `barrier_ev` (eV), and optional columns
//! `dimension` (1, 2 or 3; empty: the first network to open), `source` (free text, carried into
//! the reports). Other columns are ignored; blank lines and lines starting with `#` are skipped.

use crate::analysis::{self, AnalysisError, AnalysisOptions, default_spacing_a, grid_dims};
use crate::bv::model::build_model;
use crate::element::Element;
use crate::error::InputError;
use crate::grid::Grid;
use crate::landscape::{self, FrameworkKind, LandscapeModel, Progress};
use crate::percolation::{self, Percolation};
use crate::structure::Structure;
use rayon::prelude::*;
use std::path::{Path, PathBuf};
use std::time::Instant;

/// Residual charged for a reference whose network does not open below the energy cap (eV).
pub const MISSING_PENALTY_EV: f64 = 1.0;

/// One reference barrier.
#[derive(Debug, Clone)]
pub struct Reference {
    /// Name in reports (the file as written in the list).
    pub name: String,
    pub structure: Structure,
    pub ion: Element,
    /// Reference barrier (eV).
    pub barrier_ev: f64,
    /// Dimension of the network the barrier belongs to; `None`: the first network to open.
    pub dimension: Option<u8>,
    /// Where the value comes from, in words (empty when the list gives none).
    pub source: String,
}

/// The knob values at which barriers are tabulated. Both lists ascending and positive; the fit
/// lies inside their ranges.
#[derive(Debug, Clone, PartialEq)]
pub struct CalibrationGrid {
    /// Morse depths per bond for a monovalent probe (eV).
    pub d0_ev: Vec<f64>,
    /// Screening factors (rho = factor x (r_probe + r_cation)).
    pub screening_factor: Vec<f64>,
}

impl Default for CalibrationGrid {
    /// `d0_ev` from 0.1 to 0.8 eV in steps of 0.05 eV, `screening_factor` 0.5 to 1.0 in steps
    /// of 0.1 (90 percolation sweeps per structure). Below a factor of about 0.7 the cation
    /// repulsion hardly reaches the probe and barriers no longer change; well above 1 it
    /// dominates the landscape and the barriers become unphysical (science notes, section 2).
    fn default() -> Self {
        CalibrationGrid {
            d0_ev: (0..=14).map(|i| 0.1 + 0.05 * i as f64).collect(),
            screening_factor: (0..=5).map(|i| 0.5 + 0.1 * i as f64).collect(),
        }
    }
}

impl CalibrationGrid {
    fn check(&self) -> Result<(), CalibrationError> {
        let ok = |v: &[f64]| {
            !v.is_empty()
                && v.iter().all(|x| x.is_finite() && *x > 0.0)
                && v.windows(2).all(|w| w[0] < w[1])
        };
        if !ok(&self.d0_ev) || !ok(&self.screening_factor) {
            return Err(CalibrationError::Grid(
                "the knob values of the calibration grid must be positive, finite and ascending"
                    .into(),
            ));
        }
        Ok(())
    }
}

/// One reference in the result.
#[derive(Debug, Clone, PartialEq)]
pub struct CalibrationRow {
    pub name: String,
    pub ion: Element,
    /// The dimension compared: the reference's, or the first network to open at the fitted
    /// knobs when it gives none.
    pub dimension: u8,
    /// True when the reference stated the dimension.
    pub dimension_given: bool,
    /// Dimension of the first network to open at the fitted knobs (0: none below the cap).
    pub first_dimension: u8,
    pub reference_ev: f64,
    /// Barrier with the base knobs (exact; None when that network does not open).
    pub base_ev: Option<f64>,
    /// Barrier with the fitted knobs (exact).
    pub fitted_ev: Option<f64>,
    /// `fitted - reference` (eV).
    pub residual_ev: Option<f64>,
    /// Knobs fitted without this reference: (d0_ev, screening_factor).
    pub loo_knobs: (f64, f64),
    /// Barrier predicted with those knobs (interpolated in the table).
    pub loo_ev: Option<f64>,
    pub loo_residual_ev: Option<f64>,
    pub grid_dims: [usize; 3],
    /// Grid spacing used (A).
    pub spacing_a: [f64; 3],
    pub source: String,
}

/// The best `d0_ev` at one tabulated screening factor (interpolated objective).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ProfilePoint {
    pub screening_factor: f64,
    pub best_d0_ev: f64,
    /// Root-mean-square residual there (eV).
    pub rms_ev: f64,
}

/// The outcome of [`calibrate`].
#[derive(Debug, Clone, PartialEq)]
pub struct Calibration {
    pub d0_ev: f64,
    pub screening_factor: f64,
    /// Held at the base value.
    pub charge_scale: f64,
    /// Whether D0 = d0_ev x V_A (the base knobs' rule, kept).
    pub d0_scales_with_valence: bool,
    /// The base knobs, for comparison: (d0_ev, screening_factor).
    pub base_knobs: (f64, f64),
    pub rows: Vec<CalibrationRow>,
    /// Mean absolute residual at the fitted knobs (exact; misses count [`MISSING_PENALTY_EV`]).
    pub mae_ev: f64,
    pub rms_ev: f64,
    /// The same with the base knobs.
    pub base_mae_ev: f64,
    pub base_rms_ev: f64,
    /// Mean absolute leave-one-out residual (eV).
    pub loo_mae_ev: f64,
    /// True when the fit sits on the edge of the grid (the optimum may lie outside it).
    pub at_grid_edge: bool,
    /// Best `d0_ev` and residual at each tabulated screening factor: how well the data pin down
    /// the screening.
    pub profile: Vec<ProfilePoint>,
    pub grid: CalibrationGrid,
    /// Percolation sweeps run for the table.
    pub sweeps: usize,
    pub seconds: f64,
}

#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum CalibrationError {
    #[error("the reference list is empty")]
    NoReferences,
    #[error("{0}")]
    Grid(String),
    #[error("reference '{name}': {source}")]
    Analysis {
        name: String,
        #[source]
        source: AnalysisError,
    },
    #[error("reference '{name}': dimension {dimension} is not 1, 2 or 3")]
    Dimension { name: String, dimension: u8 },
}

/// What one percolation told about the barriers: the first dimension to open (0 when none)
/// and the barrier of each dimension that opens.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Outcome {
    pub first_dimension: u8,
    pub barrier_ev: [Option<f64>; 3],
}

impl Outcome {
    pub fn of(p: &Percolation) -> Outcome {
        let first_dimension = p
            .thresholds
            .iter()
            .flatten()
            .next()
            .map(|t| t.dimension)
            .unwrap_or(0);
        Outcome {
            first_dimension,
            barrier_ev: [1u8, 2, 3].map(|d| p.threshold(d).map(|t| t.barrier as f64)),
        }
    }

    /// Barrier of dimension `d`, or of the first network to open when `d` is None.
    pub fn barrier(&self, d: Option<u8>) -> Option<f64> {
        let d = d.unwrap_or(self.first_dimension);
        if (1..=3).contains(&d) {
            self.barrier_ev[d as usize - 1]
        } else {
            None
        }
    }
}

/// The two parts of the site-energy grid of one structure: `E = d0_ev * morse + coulomb`.
#[derive(Debug, Clone)]
pub struct EnergyParts {
    /// Morse sum per unit `d0_ev` (eV per eV), uncapped.
    pub morse: Grid,
    /// Screened cation repulsion (eV) at the screening factor of the options, uncapped.
    pub coulomb: Grid,
    /// The energy cap of the full model (eV).
    pub cap: f64,
}

/// Above any value a sum of bond and Coulomb terms reaches on a grid, inside the f32 range.
const NO_CAP: f64 = 1e30;

/// The model of `opts` with everything resolved, for a structure with oxidation states.
fn model_for(
    s: &Structure,
    opts: &AnalysisOptions,
    knobs: crate::bv::model::ModelKnobs,
) -> Result<LandscapeModel, AnalysisError> {
    let (model, _) = build_model(s, opts.ion, &opts.table, &knobs, &opts.exclude_labels)?;
    if model.atoms.is_empty() {
        return Err(AnalysisError::Structure {
            structure: s.name.clone(),
            message: format!(
                "nothing is left of the framework once {} is removed",
                opts.ion
            ),
        });
    }
    Ok(model)
}

/// Grid dimensions the analysis would use for this structure and options.
pub fn dims_for(s: &Structure, opts: &AnalysisOptions) -> [usize; 3] {
    let spacing = opts
        .spacing_a
        .unwrap_or_else(|| default_spacing_a(s.volume()));
    grid_dims(s, spacing)
}

/// The Morse part of the site energy per unit `d0_ev`, on the grid the analysis would use.
/// `s` must carry oxidation states ([`analysis::with_oxidation_states`]).
pub fn morse_part(s: &Structure, opts: &AnalysisOptions) -> Result<Grid, AnalysisError> {
    let mut knobs = opts.knobs.clone();
    knobs.d0_ev = 1.0;
    knobs.energy_cap_ev = NO_CAP;
    let mut model = model_for(s, opts, knobs)?;
    model
        .atoms
        .retain(|a| matches!(a.kind, FrameworkKind::Anion(_)));
    model.mobile = None;
    Ok(landscape::compute(&model, dims_for(s, opts), &Progress::Silent)?.energy)
}

/// The screened cation repulsion at the options' screening factor and charge scale.
pub fn coulomb_part(s: &Structure, opts: &AnalysisOptions) -> Result<Grid, AnalysisError> {
    let mut knobs = opts.knobs.clone();
    knobs.energy_cap_ev = NO_CAP;
    let mut model = model_for(s, opts, knobs)?;
    let dims = dims_for(s, opts);
    model
        .atoms
        .retain(|a| matches!(a.kind, FrameworkKind::Cation(_)));
    if model.atoms.is_empty() && model.mobile.is_none() {
        return Ok(Grid::new(model.lattice.clone(), dims, 0.0));
    }
    Ok(landscape::compute(&model, dims, &Progress::Silent)?.energy)
}

impl EnergyParts {
    /// Both parts for the options' knobs.
    pub fn compute(s: &Structure, opts: &AnalysisOptions) -> Result<EnergyParts, AnalysisError> {
        Ok(EnergyParts {
            morse: morse_part(s, opts)?,
            coulomb: coulomb_part(s, opts)?,
            cap: opts.knobs.energy_cap_ev,
        })
    }

    /// The site-energy grid at well depth `d0_ev`, capped like the landscape's.
    pub fn energy(&self, d0_ev: f64) -> Grid {
        combine(&self.morse, &self.coulomb, d0_ev, self.cap)
    }
}

/// `min(d0_ev * morse + coulomb, cap)` point by point (NaN becomes the cap).
pub fn combine(morse: &Grid, coulomb: &Grid, d0_ev: f64, cap: f64) -> Grid {
    let mut g = Grid::new(morse.lattice.clone(), morse.dims, 0.0);
    for ((out, m), c) in g.values.iter_mut().zip(&morse.values).zip(&coulomb.values) {
        let v = d0_ev * *m as f64 + *c as f64;
        *out = if v < cap { v as f32 } else { cap as f32 };
    }
    g
}

/// The exact outcome of the full pipeline (percolation only) with the options' knobs.
pub fn evaluate(r: &Reference, base: &AnalysisOptions) -> Result<Outcome, CalibrationError> {
    let mut opts = base.clone();
    opts.ion = r.ion;
    opts.percolation_only = true;
    opts.mismatch_channels = false;
    opts.progress = Progress::Silent;
    let a = analysis::analyse(&r.structure, &opts).map_err(|e| CalibrationError::Analysis {
        name: r.name.clone(),
        source: e,
    })?;
    Ok(Outcome::of(&a.percolation))
}

/// Table of one reference: `table[i_sf][i_d0]`.
struct Table {
    outcomes: Vec<Vec<Outcome>>,
    dims: [usize; 3],
    spacing: [f64; 3],
}

fn tabulate(
    r: &Reference,
    base: &AnalysisOptions,
    grid: &CalibrationGrid,
) -> Result<Table, AnalysisError> {
    let mut opts = base.clone();
    opts.ion = r.ion;
    opts.progress = Progress::Silent;
    let (s, _) = analysis::with_oxidation_states(&r.structure, &opts.table)?;
    let morse = morse_part(&s, &opts)?;
    let mobile = analysis::mobile_sites(&s, r.ion);
    let cap = opts.knobs.energy_cap_ev;
    let mut outcomes = Vec::with_capacity(grid.screening_factor.len());
    for &sf in &grid.screening_factor {
        opts.knobs.screening_factor = sf;
        let coulomb = coulomb_part(&s, &opts)?;
        let row: Vec<Outcome> = grid
            .d0_ev
            .par_iter()
            .map(|&d0| {
                let e = combine(&morse, &coulomb, d0, cap);
                let marks = analysis::occupied_wells(&e, &mobile);
                Outcome::of(&percolation::percolate_marked(&e, cap as f32, &marks))
            })
            .collect();
        outcomes.push(row);
    }
    Ok(Table {
        outcomes,
        dims: morse.dims,
        spacing: morse.spacing(),
    })
}

/// Position of `x` in an ascending list: (lower index, weight of the upper one).
fn bracket(v: &[f64], x: f64) -> (usize, f64) {
    if v.len() == 1 {
        return (0, 0.0);
    }
    let i = v.partition_point(|&y| y <= x).clamp(1, v.len() - 1) - 1;
    let w = ((x - v[i]) / (v[i + 1] - v[i])).clamp(0.0, 1.0);
    (i, w)
}

/// Bilinear interpolation of a reference's barrier in its table at (d0, sf); None when any
/// corner that carries weight has no barrier.
fn interpolated(
    t: &Table,
    grid: &CalibrationGrid,
    dim: Option<u8>,
    d0: f64,
    sf: f64,
) -> Option<f64> {
    let (i, u) = bracket(&grid.screening_factor, sf);
    let (j, w) = bracket(&grid.d0_ev, d0);
    let mut acc = 0.0;
    for (di, wi) in [(0usize, 1.0 - u), (1, u)] {
        for (dj, wj) in [(0usize, 1.0 - w), (1, w)] {
            let weight = wi * wj;
            if weight == 0.0 {
                continue;
            }
            let b = t.outcomes[i + di][j + dj].barrier(dim)?;
            acc += weight * b;
        }
    }
    Some(acc)
}

fn residual_or_penalty(predicted: Option<f64>, reference: f64) -> f64 {
    predicted
        .map(|p| p - reference)
        .unwrap_or(MISSING_PENALTY_EV)
}

/// Sample points of the fine search along one axis: every tabulated value and `sub - 1` points
/// between each pair.
fn fine_axis(v: &[f64], sub: usize) -> Vec<f64> {
    let mut out = Vec::new();
    for w in v.windows(2) {
        for k in 0..sub {
            out.push(w[0] + (w[1] - w[0]) * k as f64 / sub as f64);
        }
    }
    out.extend(v.last());
    out
}

/// Minimum of the interpolated sum of squares over the references in `use_ref`:
/// (d0, sf, sum of squares).
fn fit_on_tables(
    tables: &[Table],
    refs: &[Reference],
    grid: &CalibrationGrid,
    use_ref: &dyn Fn(usize) -> bool,
) -> (f64, f64, f64) {
    let d0s = fine_axis(&grid.d0_ev, 20);
    let sfs = fine_axis(&grid.screening_factor, 10);
    let mut best = (grid.d0_ev[0], grid.screening_factor[0], f64::INFINITY);
    for &sf in &sfs {
        for &d0 in &d0s {
            let mut ss = 0.0;
            for (k, (t, r)) in tables.iter().zip(refs).enumerate() {
                if !use_ref(k) {
                    continue;
                }
                let e =
                    residual_or_penalty(interpolated(t, grid, r.dimension, d0, sf), r.barrier_ev);
                ss += e * e;
            }
            if ss < best.2 {
                best = (d0, sf, ss);
            }
        }
    }
    best
}

fn mean_abs(v: &[f64]) -> f64 {
    v.iter().map(|x| x.abs()).sum::<f64>() / v.len().max(1) as f64
}

fn rms(v: &[f64]) -> f64 {
    (v.iter().map(|x| x * x).sum::<f64>() / v.len().max(1) as f64).sqrt()
}

/// Fits `d0_ev` and `screening_factor` to the references (see the module docs). `base` gives
/// the parameter table, the other knobs (charge scale, cutoffs, cap, probe), the exclusions
/// and the grid spacing (None: the analysis default per structure); its ion is replaced by each
/// reference's. Runs in parallel on the current rayon pool.
pub fn calibrate(
    references: &[Reference],
    base: &AnalysisOptions,
    grid: CalibrationGrid,
) -> Result<Calibration, CalibrationError> {
    calibrate_with_progress(references, base, grid, &|_, _| {})
}

/// As [`calibrate`], calling `done(name, seconds)` as each reference's table is finished.
pub fn calibrate_with_progress(
    references: &[Reference],
    base: &AnalysisOptions,
    grid: CalibrationGrid,
    done: &(dyn Fn(&str, f64) + Sync),
) -> Result<Calibration, CalibrationError> {
    let started = Instant::now();
    if references.is_empty() {
        return Err(CalibrationError::NoReferences);
    }
    grid.check()?;
    for r in references {
        if let Some(d) = r.dimension
            && !(1..=3).contains(&d)
        {
            return Err(CalibrationError::Dimension {
                name: r.name.clone(),
                dimension: d,
            });
        }
    }
    let tables: Vec<Table> = references
        .par_iter()
        .map(|r| {
            let t = Instant::now();
            let table = tabulate(r, base, &grid).map_err(|e| CalibrationError::Analysis {
                name: r.name.clone(),
                source: e,
            })?;
            done(&r.name, t.elapsed().as_secs_f64());
            Ok(table)
        })
        .collect::<Result<_, CalibrationError>>()?;
    let sweeps = references.len() * grid.d0_ev.len() * grid.screening_factor.len();

    let (d0, sf, _) = fit_on_tables(&tables, references, &grid, &|_| true);
    let edge = |v: &[f64], x: f64| {
        v.len() > 1 && ((x - v[0]).abs() < 1e-12 || (x - v[v.len() - 1]).abs() < 1e-12)
    };
    let at_grid_edge = edge(&grid.d0_ev, d0) || edge(&grid.screening_factor, sf);

    // profile: best d0 per tabulated screening factor
    let profile = grid
        .screening_factor
        .iter()
        .map(|&s| {
            let g1 = CalibrationGrid {
                d0_ev: grid.d0_ev.clone(),
                screening_factor: vec![s],
            };
            let idx = grid
                .screening_factor
                .iter()
                .position(|&x| x == s)
                .unwrap_or(0);
            let sub: Vec<Table> = tables
                .iter()
                .map(|t| Table {
                    outcomes: vec![t.outcomes[idx].clone()],
                    dims: t.dims,
                    spacing: t.spacing,
                })
                .collect();
            let (bd, _, ss) = fit_on_tables(&sub, references, &g1, &|_| true);
            ProfilePoint {
                screening_factor: s,
                best_d0_ev: bd,
                rms_ev: (ss / references.len() as f64).sqrt(),
            }
        })
        .collect();

    // leave-one-out on the tables
    let loo: Vec<((f64, f64), Option<f64>)> = (0..references.len())
        .into_par_iter()
        .map(|i| {
            if references.len() == 1 {
                return (
                    (d0, sf),
                    interpolated(&tables[i], &grid, references[i].dimension, d0, sf),
                );
            }
            let (ld, ls, _) = fit_on_tables(&tables, references, &grid, &|k| k != i);
            (
                (ld, ls),
                interpolated(&tables[i], &grid, references[i].dimension, ld, ls),
            )
        })
        .collect();

    // exact barriers at the base and fitted knobs
    let mut fitted_opts = base.clone();
    fitted_opts.knobs.d0_ev = d0;
    fitted_opts.knobs.screening_factor = sf;
    let exact: Vec<(Outcome, Outcome)> = references
        .par_iter()
        .map(|r| Ok((evaluate(r, base)?, evaluate(r, &fitted_opts)?)))
        .collect::<Result<_, CalibrationError>>()?;

    let mut rows = Vec::new();
    let (mut res, mut base_res, mut loo_res) = (vec![], vec![], vec![]);
    for (k, r) in references.iter().enumerate() {
        let (b, f) = &exact[k];
        let dimension = r.dimension.unwrap_or(f.first_dimension);
        let fitted_ev = f.barrier(r.dimension);
        let base_ev = b.barrier(r.dimension);
        let residual_ev = fitted_ev.map(|p| p - r.barrier_ev);
        let ((ld, ls), loo_ev) = loo[k];
        let loo_residual_ev = loo_ev.map(|p| p - r.barrier_ev);
        res.push(residual_or_penalty(fitted_ev, r.barrier_ev));
        base_res.push(residual_or_penalty(base_ev, r.barrier_ev));
        loo_res.push(residual_or_penalty(loo_ev, r.barrier_ev));
        rows.push(CalibrationRow {
            name: r.name.clone(),
            ion: r.ion,
            dimension,
            dimension_given: r.dimension.is_some(),
            first_dimension: f.first_dimension,
            reference_ev: r.barrier_ev,
            base_ev,
            fitted_ev,
            residual_ev,
            loo_knobs: (ld, ls),
            loo_ev,
            loo_residual_ev,
            grid_dims: tables[k].dims,
            spacing_a: tables[k].spacing,
            source: r.source.clone(),
        });
    }
    Ok(Calibration {
        d0_ev: d0,
        screening_factor: sf,
        charge_scale: base.knobs.charge_scale,
        d0_scales_with_valence: base.knobs.d0_scales_with_valence,
        base_knobs: (base.knobs.d0_ev, base.knobs.screening_factor),
        rows,
        mae_ev: mean_abs(&res),
        rms_ev: rms(&res),
        base_mae_ev: mean_abs(&base_res),
        base_rms_ev: rms(&base_res),
        loo_mae_ev: mean_abs(&loo_res),
        at_grid_edge,
        profile,
        grid,
        sweeps,
        seconds: started.elapsed().as_secs_f64(),
    })
}

// ------------------------------------------------------------------------------------------
// The reference list
// ------------------------------------------------------------------------------------------

/// One row of a reference list, before its structure is read.
#[derive(Debug, Clone, PartialEq)]
pub struct ReferenceRow {
    /// The structure file, resolved against the list's folder.
    pub file: PathBuf,
    /// The file as written in the list.
    pub name: String,
    /// Line of the row in the list (1-based).
    pub line: usize,
    pub ion: Element,
    pub barrier_ev: f64,
    pub dimension: Option<u8>,
    pub source: String,
}

pub use crate::csv_record::split_csv_record;

/// Parses a reference list (see the module docs). `list` names the file in errors; relative
/// structure paths are resolved against `folder`. Rows with an empty ion take `default_ion`.
pub fn parse_reference_list(
    text: &str,
    list: &str,
    folder: &Path,
    default_ion: Option<Element>,
) -> Result<Vec<ReferenceRow>, InputError> {
    let mut lines = text
        .lines()
        .enumerate()
        .map(|(i, l)| (i + 1, l.trim_end_matches('\r')))
        .filter(|(_, l)| !l.trim().is_empty() && !l.trim_start().starts_with('#'));
    let Some((hline, header)) = lines.next() else {
        return Err(InputError::new(
            list,
            "the reference list is empty (expected a header: file,ion,barrier_ev[,dimension][,source])",
        ));
    };
    let header: Vec<String> = split_csv_record(header)
        .ok_or_else(|| InputError::new(list, "unclosed quote in the header").at_line(hline))?
        .into_iter()
        .map(|h| h.to_ascii_lowercase())
        .collect();
    let col = |name: &str| header.iter().position(|h| h == name);
    let need = |name: &str| {
        col(name).ok_or_else(|| {
            InputError::new(
                list,
                format!(
                    "the header has no '{name}' column (expected file,ion,barrier_ev[,dimension][,source])"
                ),
            )
            .at_line(hline)
        })
    };
    // a list with one barrier per row, or the reference-set layout with a published range
    // (its mid-point is fitted; rows without a range are skipped)
    let range_cols = (col("barrier_low_ev"), col("barrier_high_ev"));
    let (c_file, c_ion) = (need("file")?, need("ion")?);
    let c_barrier = match (col("barrier_ev"), range_cols) {
        (Some(c), _) => c,
        (None, (Some(c), Some(_))) => c,
        (None, _) => need("barrier_ev")?,
    };
    let c_high = col("barrier_ev")
        .is_none()
        .then_some(range_cols.1)
        .flatten();
    let (c_dim, c_source) = (col("dimension"), col("source").or(col("barrier_sources")));
    let mut out = Vec::new();
    for (ln, l) in lines {
        let f = split_csv_record(l)
            .ok_or_else(|| InputError::new(list, "unclosed quote").at_line(ln))?;
        let get = |c: usize| f.get(c).map(|s| s.as_str()).unwrap_or("");
        let err = |c: usize, msg: String| {
            InputError::new(list, msg)
                .at_line(ln)
                .context(format!("column '{}'", header[c]))
        };
        let name = get(c_file).to_string();
        if name.is_empty() {
            return Err(err(c_file, "no structure file given".into()));
        }
        let ion_text = get(c_ion);
        let ion = if ion_text.is_empty() {
            default_ion.ok_or_else(|| err(c_ion, "no ion given and no default ion".into()))?
        } else {
            Element::from_symbol(ion_text).ok_or_else(|| {
                err(
                    c_ion,
                    format!("'{ion_text}' is not an element symbol (e.g. Li, Na, Mg)"),
                )
            })?
        };
        let bt = get(c_barrier);
        if c_high.is_some() && bt.is_empty() {
            continue;
        }
        let number = |c: usize, t: &str| {
            t.parse::<f64>()
                .ok()
                .filter(|b| b.is_finite() && *b >= 0.0)
                .ok_or_else(|| {
                    err(
                        c,
                        format!("'{t}' is not a barrier in eV (a number, 0 or more)"),
                    )
                })
        };
        if let Some(ch) = c_high {
            let (lo, hi) = (number(c_barrier, bt)?, number(ch, get(ch))?);
            let path = Path::new(get(c_file));
            out.push(ReferenceRow {
                file: if path.is_absolute() {
                    path.to_path_buf()
                } else {
                    folder.join(path)
                },
                name: get(c_file).to_string(),
                line: ln,
                ion,
                barrier_ev: 0.5 * (lo + hi),
                dimension: c_dim
                    .and_then(|c| get(c).parse::<u8>().ok())
                    .filter(|d| (1..=3).contains(d)),
                source: c_source.map(get).unwrap_or("").to_string(),
            });
            continue;
        }
        let barrier_ev = bt
            .parse::<f64>()
            .ok()
            .filter(|b| b.is_finite() && *b >= 0.0)
            .ok_or_else(|| {
                err(
                    c_barrier,
                    format!("'{bt}' is not a barrier in eV (a number, 0 or more)"),
                )
            })?;
        let dimension = match c_dim.map(get).unwrap_or("") {
            "" => None,
            t => match t.parse::<u8>() {
                Ok(d @ 1..=3) => Some(d),
                _ => {
                    return Err(err(
                        c_dim.unwrap_or(0),
                        format!("'{t}' is not a dimension (1, 2, 3, or empty)"),
                    ));
                }
            },
        };
        let path = Path::new(&name);
        let file = if path.is_absolute() {
            path.to_path_buf()
        } else {
            folder.join(path)
        };
        out.push(ReferenceRow {
            file,
            name,
            line: ln,
            ion,
            barrier_ev,
            dimension,
            source: c_source.map(get).unwrap_or("").to_string(),
        });
    }
    if out.is_empty() {
        return Err(
            InputError::new(list, "the reference list has a header but no rows").at_line(hline),
        );
    }
    Ok(out)
}

/// Reads a reference list and every structure it names. A structure that cannot be read is an
/// error at the row that names it.
pub fn read_references(
    path: &Path,
    default_ion: Option<Element>,
) -> Result<Vec<Reference>, InputError> {
    let list = path.display().to_string();
    let text = std::fs::read_to_string(path)
        .map_err(|e| InputError::new(&list, format!("cannot read the file: {e}")))?;
    let folder = path.parent().unwrap_or(Path::new(""));
    let rows = parse_reference_list(&text, &list, folder, default_ion)?;
    rows.into_iter()
        .map(|r| {
            let s = crate::read::read_structure(&r.file, None).map_err(|e| {
                InputError::new(&list, format!("cannot read the structure: {e}"))
                    .at_line(r.line)
                    .context(format!("file '{}'", r.name))
            })?;
            let source = if r.source.is_empty() {
                format!("{list}, line {}", r.line)
            } else {
                r.source
            };
            Ok(Reference {
                name: r.name,
                structure: s,
                ion: r.ion,
                barrier_ev: r.barrier_ev,
                dimension: r.dimension,
                source,
            })
        })
        .collect()
}

// ------------------------------------------------------------------------------------------
// Output
// ------------------------------------------------------------------------------------------

fn ev(x: Option<f64>) -> String {
    x.map(|v| format!("{v:.3}"))
        .unwrap_or_else(|| "none".into())
}

fn signed(x: Option<f64>) -> String {
    x.map(|v| format!("{v:+.3}"))
        .unwrap_or_else(|| "miss".into())
}

/// The fit as a text table, one reference a line, then the knobs and errors (every number with
/// its unit).
pub fn table(c: &Calibration) -> String {
    let mut s = String::new();
    let w = c
        .rows
        .iter()
        .map(|r| r.name.len())
        .max()
        .unwrap_or(4)
        .max(9);
    s.push_str(&format!(
        "{:<w$} {:>3} {:>4} {:>9} {:>9} {:>9} {:>9} {:>9} {:>9}  {}\n",
        "reference",
        "ion",
        "dim",
        "ref (eV)",
        "base (eV)",
        "fit (eV)",
        "res (eV)",
        "LOO (eV)",
        "LOO res",
        "LOO knobs (d0_ev eV, screening)"
    ));
    for r in &c.rows {
        let dim = if r.dimension_given {
            format!("{}D", r.dimension)
        } else {
            format!("{}D*", r.dimension)
        };
        s.push_str(&format!(
            "{:<w$} {:>3} {:>4} {:>9.3} {:>9} {:>9} {:>9} {:>9} {:>9}  {:.3}, {:.2}\n",
            r.name,
            r.ion.symbol(),
            dim,
            r.reference_ev,
            ev(r.base_ev),
            ev(r.fitted_ev),
            signed(r.residual_ev),
            ev(r.loo_ev),
            signed(r.loo_residual_ev),
            r.loo_knobs.0,
            r.loo_knobs.1,
        ));
    }
    if c.rows.iter().any(|r| !r.dimension_given) {
        s.push_str("  * dimension not given: the first network to open\n");
    }
    s.push_str(&format!(
        "fitted: d0_ev = {:.3} eV, screening_factor = {:.3} (charge_scale {} held)\n",
        c.d0_ev, c.screening_factor, c.charge_scale
    ));
    s.push_str(&format!(
        "mean absolute error: {:.3} eV with the base knobs (d0_ev = {} eV, screening_factor = {}), {:.3} eV fitted; leave-one-out {:.3} eV\n",
        c.base_mae_ev, c.base_knobs.0, c.base_knobs.1, c.mae_ev, c.loo_mae_ev
    ));
    s.push_str(&format!(
        "rms error: {:.3} eV base, {:.3} eV fitted\n",
        c.base_rms_ev, c.rms_ev
    ));
    s.push_str("best d0_ev per screening factor (rms error):");
    for p in &c.profile {
        s.push_str(&format!(
            " {:.2}: {:.3} eV ({:.3} eV);",
            p.screening_factor, p.best_d0_ev, p.rms_ev
        ));
    }
    s.push('\n');
    if c.at_grid_edge {
        s.push_str(
            "warning: the fit lies on the edge of the knob grid; the optimum may lie outside it\n",
        );
    }
    s
}

/// Today's date (UTC) as YYYY-MM-DD, from the system clock.
pub fn today_utc() -> String {
    let secs = std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .map(|d| d.as_secs())
        .unwrap_or(0);
    let (y, m, d) = civil_from_days((secs / 86_400) as i64);
    format!("{y:04}-{m:02}-{d:02}")
}

/// Proleptic Gregorian date of a day count since 1970-01-01 (the usual era algorithm).
fn civil_from_days(z: i64) -> (i64, u32, u32) {
    let z = z + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z.rem_euclid(146_097);
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let d = (doy - (153 * mp + 2) / 5 + 1) as u32;
    let m = if mp < 10 { mp + 3 } else { mp - 9 } as u32;
    let y = yoe + era * 400 + if m <= 2 { 1 } else { 0 };
    (y, m, d)
}

/// The fitted knobs as a parameter file in the format [`crate::bv::overrides`] reads, with
/// comments stating the data, the residuals and the date. `data` describes the reference list
/// (e.g. its path).
pub fn to_toml(c: &Calibration, data: &str, date: &str) -> String {
    let mut s = String::new();
    s.push_str("# hopmap parameter file: energy-scale knobs fitted by `hopmap calibrate`.\n");
    s.push_str(&format!("# Date: {date} (UTC).\n"));
    s.push_str(&format!(
        "# Fitted to {} reference barriers from {data}:\n",
        c.rows.len()
    ));
    s.push_str(
        "# the barrier of the stated network (dimension), least squares over d0_ev and screening_factor.\n",
    );
    for line in table(c).lines() {
        s.push_str("#   ");
        s.push_str(line);
        s.push('\n');
    }
    let (na, nb, nc) = c
        .rows
        .iter()
        .fold((f64::MAX, 0.0f64, 0usize), |(lo, hi, n), r| {
            let sp = r.spacing_a.iter().cloned().fold(0.0, f64::max);
            (lo.min(sp), hi.max(sp), n + 1)
        });
    s.push_str(&format!(
        "# Grid spacing {:.3}-{:.3} A over {} structures; knob grid d0_ev {:.3}-{:.3} eV ({} values), screening_factor {:.3}-{:.3} ({} values).\n",
        na,
        nb,
        nc,
        c.grid.d0_ev[0],
        c.grid.d0_ev[c.grid.d0_ev.len() - 1],
        c.grid.d0_ev.len(),
        c.grid.screening_factor[0],
        c.grid.screening_factor[c.grid.screening_factor.len() - 1],
        c.grid.screening_factor.len()
    ));
    s.push_str("# Use with: hopmap paths FILE --params THIS_FILE\n\n");
    s.push_str("[model]\n");
    s.push_str(&format!("d0_ev = {:.4}\n", c.d0_ev));
    s.push_str(&format!("screening_factor = {:.4}\n", c.screening_factor));
    s.push_str(&format!("charge_scale = {}\n", fmt_float(c.charge_scale)));
    s.push_str(&format!(
        "d0_scales_with_valence = {}\n",
        c.d0_scales_with_valence
    ));
    s
}

/// A float as TOML accepts it (always with a decimal point).
fn fmt_float(x: f64) -> String {
    let t = format!("{x}");
    if t.contains('.') || t.contains('e') {
        t
    } else {
        format!("{t}.0")
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn dates_from_day_counts() {
        assert_eq!(civil_from_days(0), (1970, 1, 1));
        assert_eq!(civil_from_days(11_016), (2000, 2, 29));
        assert_eq!(civil_from_days(19_723), (2024, 1, 1));
    }

    #[test]
    fn csv_records_with_quotes() {
        assert_eq!(
            split_csv_record(r#"a.cif, Li ,"0.3","Smith, J. ""x""""#).unwrap(),
            vec!["a.cif", "Li", "0.3", r#"Smith, J. "x""#]
        );
        assert_eq!(split_csv_record(r#"a,"b"#), None);
    }

    #[test]
    fn bad_rows_name_the_file_line_and_column() {
        let li = Element::from_symbol("Li");
        let text = "file,ion,barrier_ev,dimension\n# comment\na.cif,Li,0.3,1\nb.cif,Li,abc,\n";
        let e = parse_reference_list(text, "refs.csv", Path::new("."), li).unwrap_err();
        assert_eq!((e.file.as_str(), e.line), ("refs.csv", Some(4)), "{e}");
        assert!(e.to_string().contains("barrier_ev"), "{e}");
        let text = "file,ion,barrier_ev,dimension\na.cif,Xq,0.3,\n";
        let e = parse_reference_list(text, "refs.csv", Path::new("."), li).unwrap_err();
        assert_eq!(e.line, Some(2), "{e}");
        let text = "file,ion,barrier_ev,dimension\na.cif,Li,0.3,4\n";
        let e = parse_reference_list(text, "refs.csv", Path::new("."), li).unwrap_err();
        assert_eq!(e.line, Some(2), "{e}");
        let e = parse_reference_list("file,barrier_ev\n", "r.csv", Path::new("."), li).unwrap_err();
        assert!(e.message.contains("'ion'"), "{e}");
    }

    #[test]
    fn rows_resolve_paths_and_default_ion() {
        let na = Element::from_symbol("Na");
        let text = "file,ion,barrier_ev,dimension,source\nsub/a.cif,,0.25,,NEB (ours)\n";
        let rows = parse_reference_list(text, "r.csv", Path::new("/data"), na).unwrap();
        assert_eq!(rows[0].file, Path::new("/data/sub/a.cif"));
        assert_eq!(rows[0].ion, na.unwrap());
        assert_eq!(rows[0].dimension, None);
        assert_eq!(rows[0].source, "NEB (ours)");
        assert_eq!(rows[0].line, 2);
    }

    #[test]
    fn brackets_and_fine_axes() {
        let v = [0.1, 0.2, 0.4];
        assert_eq!(bracket(&v, 0.1), (0, 0.0));
        let (i, w) = bracket(&v, 0.3);
        assert_eq!(i, 1);
        assert!((w - 0.5).abs() < 1e-12);
        assert_eq!(bracket(&v, 0.4), (1, 1.0));
        let f = fine_axis(&v, 2);
        assert_eq!(f.len(), 5);
        assert!((f[3] - 0.3).abs() < 1e-12 && f[4] == 0.4);
    }

    fn reference_structure(file: &str) -> Structure {
        let p = Path::new(concat!(env!("CARGO_MANIFEST_DIR"), "/../.."))
            .join("structures/reference")
            .join(file);
        crate::read::read_structure(&p, None).unwrap()
    }

    fn coarse(ion: &str, spacing: f64) -> AnalysisOptions {
        let mut o = AnalysisOptions::new(Element::from_symbol(ion).unwrap());
        o.spacing_a = Some(spacing);
        o
    }

    #[test]
    fn the_energy_grid_is_the_morse_part_times_d0_plus_the_repulsion() {
        // E = d0_ev M + C must reproduce the landscape computed directly at each d0_ev, to f32
        // rounding, below the cap and at it.
        let s = reference_structure("LiFePO4_olivine.cif");
        let mut opts = coarse("Li", 0.3);
        opts.knobs.screening_factor = 0.9;
        let (s, _) = analysis::with_oxidation_states(&s, &opts.table).unwrap();
        let parts = EnergyParts::compute(&s, &opts).unwrap();
        for d0 in [0.15, 0.45] {
            opts.knobs.d0_ev = d0;
            let (_, _, _, _, direct) = analysis::model_and_landscape(&s, &opts).unwrap();
            let split = parts.energy(d0);
            assert_eq!(split.dims, direct.energy.dims);
            let worst = split
                .values
                .iter()
                .zip(&direct.energy.values)
                .map(|(a, b)| (a - b).abs() / b.abs().max(1.0))
                .fold(0.0f32, f32::max);
            assert!(worst < 1e-5, "d0 {d0}: worst relative difference {worst}");
        }
    }

    #[test]
    fn knobs_that_generated_the_barriers_are_found_again() {
        // Targets computed by the model itself at known knobs (off the tabulated values) must be
        // fitted back to those knobs, with residuals near zero.
        let (d0_true, sf_true) = (0.42, 0.85);
        let mut truth = coarse("Li", 0.25);
        truth.knobs.d0_ev = d0_true;
        truth.knobs.screening_factor = sf_true;
        let mut refs = Vec::new();
        for (f, dim) in [
            ("LiFePO4_olivine.cif", 1),
            ("TiO2_rutile.cif", 1),
            ("LiCoO2_layered.cif", 2),
        ] {
            let r = Reference {
                name: f.into(),
                structure: reference_structure(f),
                ion: truth.ion,
                barrier_ev: 0.0,
                dimension: Some(dim),
                source: "model".into(),
            };
            let b = evaluate(&r, &truth).unwrap().barrier(Some(dim)).unwrap();
            refs.push(Reference { barrier_ev: b, ..r });
        }
        let grid = CalibrationGrid {
            d0_ev: vec![0.2, 0.3, 0.4, 0.5, 0.6],
            screening_factor: vec![0.6, 0.8, 1.0],
        };
        let c = calibrate(&refs, &coarse("Li", 0.25), grid).unwrap();
        assert!((c.d0_ev - d0_true).abs() < 0.03, "d0_ev {}", c.d0_ev);
        assert!(c.mae_ev < 0.01, "MAE {} eV", c.mae_ev);
        assert!(!c.at_grid_edge);
        // the base knobs (0.3 eV, 0.75) give clearly larger residuals than the fit
        assert!(
            c.base_mae_ev > 3.0 * c.mae_ev,
            "{} vs {}",
            c.base_mae_ev,
            c.mae_ev
        );
    }

    #[test]
    fn written_parameters_read_back_as_knobs() {
        let c = Calibration {
            d0_ev: 0.4125,
            screening_factor: 0.8,
            charge_scale: 1.0,
            d0_scales_with_valence: true,
            base_knobs: (0.3, 0.75),
            rows: vec![],
            mae_ev: 0.1,
            rms_ev: 0.1,
            base_mae_ev: 0.2,
            base_rms_ev: 0.2,
            loo_mae_ev: 0.15,
            at_grid_edge: false,
            profile: vec![],
            grid: CalibrationGrid::default(),
            sweeps: 0,
            seconds: 0.0,
        };
        let text = to_toml(&c, "refs.csv", "2025-01-02");
        let o = crate::bv::overrides::Overrides::parse(&text, "p.toml").unwrap();
        let mut table = crate::bv::ParameterTable::builtin();
        let mut knobs = crate::bv::model::ModelKnobs::default();
        o.apply(&mut table, &mut knobs);
        assert_eq!(knobs.d0_ev, 0.4125);
        assert_eq!(knobs.screening_factor, 0.8);
        assert!(text.contains("2025-01-02"));
    }
}
