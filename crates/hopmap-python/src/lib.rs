//! `hopmap._hopmap`: the compiled half of the Python package. The Python half
//! (`python/hopmap/`) converts pymatgen and ASE objects to parts, wraps the result, and defines
//! the exceptions this module raises.
//!
//! Everything here is a thin translation: options go through the library's builder, the whole
//! job runs with the interpreter lock released, and results come back as the JSON the command
//! line prints (parsed by the Python side), NumPy arrays for grids and sites, and strings for
//! the terminal text and the HTML report.

use hopmap::analysis::Analysis;
use hopmap::landscape::ProgressSink;
use hopmap::read::{Format, Parts};
use hopmap::{AnalysisOptions, Error, ErrorKind};
use numpy::{PyArray1, PyArray2, PyArrayMethods};
use pyo3::prelude::*;
use pyo3::types::{PyDict, PyList, PyTuple};
use std::path::Path;
use std::sync::Arc;

/// Raises the Python exception of the error's kind (classes in `hopmap.errors`), with the
/// file, the place and the message as attributes.
fn raise(py: Python<'_>, e: Error) -> PyErr {
    let class = match e.kind {
        ErrorKind::Input => "InputError",
        ErrorKind::Options => "OptionsError",
        ErrorKind::Model => "ModelError",
        ErrorKind::Structure => "StructureError",
        ErrorKind::OverBudget => "OverBudgetError",
        ErrorKind::Cancelled => "Cancelled",
    };
    let made = py.import("hopmap.errors").and_then(|m| {
        m.getattr(class)?.call1((
            e.to_string(),
            e.kind.name(),
            e.file.clone(),
            e.place.clone(),
            e.message.clone(),
        ))
    });
    match made {
        Ok(obj) => PyErr::from_value(obj),
        Err(import_failed) => import_failed,
    }
}

/// A Python callable `progress(stage, done, total) -> bool | None` as the library's progress
/// sink; returning `False` (or raising) cancels the analysis.
struct CallbackSink(Py<PyAny>);

impl ProgressSink for CallbackSink {
    fn update(&self, stage: &'static str, done: u64, total: u64, _points: u64) -> bool {
        Python::attach(|py| match self.0.call1(py, (stage, done, total)) {
            Ok(r) => !matches!(r.extract::<bool>(py), Ok(false)),
            Err(e) => {
                e.restore(py);
                false
            }
        })
    }
}

/// The options dict of the Python `analyse` (the command line's names, with underscores).
fn options(py: Python<'_>, ion: &str, kw: Option<&Bound<'_, PyDict>>) -> PyResult<AnalysisOptions> {
    let mut b = AnalysisOptions::builder(ion);
    if let Some(kw) = kw {
        for (k, v) in kw.iter() {
            let key: String = k.extract()?;
            if v.is_none() {
                continue;
            }
            b = match key.as_str() {
                "spacing" => b.spacing_a(v.extract()?),
                "temperature" => b.temperature_k(v.extract()?),
                "attempt_frequency" => b.attempt_frequency_hz(v.extract()?),
                "correlation_factor" => b.correlation_factor(v.extract()?),
                "site_filling" => b.site_filling(v.extract()?),
                "diffusivity" => b.measured_diffusivity_m2_s(v.extract()?),
                "inserted" => b.ions_per_formula_unit(v.extract()?),
                "min_ion_distance" => b.min_ion_distance_a(v.extract()?),
                "oxidation" => b.oxidation(&v.extract::<String>()?),
                "exclude" => b.exclude_labels(&v.extract::<Vec<String>>()?),
                "params" => b.parameter_file(v.extract::<String>()?),
                "progress" => b.progress(Arc::new(CallbackSink(v.clone().unbind()))),
                other => {
                    return Err(raise(
                        py,
                        Error::options(other, "unknown option of analyse()"),
                    ));
                }
            };
        }
    }
    b.build().map_err(|e| raise(py, e))
}

/// Runs the analysis with the interpreter lock released; a cancelling callback's own Python
/// exception, if it raised one, wins over the cancellation.
fn run(
    py: Python<'_>,
    s: &hopmap::structure::Structure,
    opts: &AnalysisOptions,
    file: &str,
) -> PyResult<Result> {
    let out = py.detach(|| hopmap::analyse_structure(s, opts));
    if let Some(e) = PyErr::take(py) {
        return Err(e);
    }
    let a = out.map_err(|e| raise(py, e.in_file(file)))?;
    Ok(Result {
        a,
        file: file.to_string(),
    })
}

/// Analyses a structure file (CIF, POSCAR, extended XYZ) for the mobile ion `ion`.
#[pyfunction]
#[pyo3(signature = (path, ion, block=None, keep_cell=false, options=None))]
fn analyse_path(
    py: Python<'_>,
    path: &str,
    ion: &str,
    block: Option<&str>,
    keep_cell: bool,
    options: Option<&Bound<'_, PyDict>>,
) -> PyResult<Result> {
    let opts = self::options(py, ion, options)?;
    let s = py
        .detach(|| hopmap::read::read_structure_with(Path::new(path), block, keep_cell))
        .map_err(|e| raise(py, e.into()))?;
    run(py, &s, &opts, path)
}

/// Analyses structure text held in memory; `format` is `cif`, `poscar` or `xyz`.
#[pyfunction]
#[pyo3(signature = (text, format, name, ion, options=None))]
fn analyse_text(
    py: Python<'_>,
    text: &str,
    format: &str,
    name: &str,
    ion: &str,
    options: Option<&Bound<'_, PyDict>>,
) -> PyResult<Result> {
    let format = match format.to_ascii_lowercase().as_str() {
        "cif" => Format::Cif,
        "poscar" | "vasp" => Format::Poscar,
        "xyz" | "extxyz" => Format::ExtXyz,
        other => {
            return Err(raise(
                py,
                Error::options("format", format!("'{other}': use cif, poscar or xyz")),
            ));
        }
    };
    let opts = self::options(py, ion, options)?;
    let s = hopmap::read::read_str(text, format, name, None).map_err(|e| raise(py, e.into()))?;
    run(py, &s, &opts, name)
}

/// Analyses a structure given as parts: cell vectors (rows, A), species (`Li+`, `Fe2+`, `O`),
/// fractional positions and occupancies (entries at one position make a mixed site).
#[pyfunction]
#[pyo3(signature = (name, lattice, species, frac, occupancy, ion, keep_cell=false, options=None))]
fn analyse_parts(
    py: Python<'_>,
    name: &str,
    lattice: [[f64; 3]; 3],
    species: Vec<String>,
    frac: Vec<[f64; 3]>,
    occupancy: Vec<f64>,
    ion: &str,
    keep_cell: bool,
    options: Option<&Bound<'_, PyDict>>,
) -> PyResult<Result> {
    let opts = self::options(py, ion, options)?;
    let parts = Parts {
        name: name.to_string(),
        lattice,
        species,
        frac,
        occupancy,
    };
    let s =
        hopmap::read::structure_from_parts(&parts, keep_cell).map_err(|e| raise(py, e.into()))?;
    run(py, &s, &opts, name)
}

/// The result of one analysis (wrapped by `hopmap.Analysis` on the Python side).
#[pyclass(module = "hopmap._hopmap", frozen)]
struct Result {
    a: Analysis,
    file: String,
}

#[pymethods]
impl Result {
    /// The one-sentence answer: dimension, directions and barrier of the lowest network.
    #[getter]
    fn answer(&self) -> String {
        self.a.summary.headline.clone()
    }

    /// The mobile ion's element symbol.
    #[getter]
    fn ion(&self) -> String {
        self.a.ion.symbol().to_string()
    }

    /// The document `hopmap paths --json` prints, as a JSON string.
    fn json(&self) -> PyResult<String> {
        serde_json::to_string(&hopmap_report::json::paths(&self.a, &self.file))
            .map_err(|e| pyo3::exceptions::PyValueError::new_err(e.to_string()))
    }

    /// The text `hopmap paths` prints.
    fn terminal(&self) -> String {
        hopmap_report::terminal::paths(&self.a, &self.file)
    }

    /// The self-contained HTML report `hopmap paths --report` writes.
    fn html(&self) -> String {
        hopmap_report::html::report(&self.a, &self.file)
    }

    /// The report's figures as (name, SVG text) pairs.
    fn figures(&self) -> Vec<(String, String)> {
        hopmap_report::html::figures(&self.a)
    }

    /// Warnings as (kind, sentence) pairs.
    fn warnings(&self) -> Vec<(String, String)> {
        self.a
            .warnings
            .iter()
            .map(|w| (w.kind.name().to_string(), w.message.clone()))
            .collect()
    }

    /// Cell vectors as rows, A: shape (3, 3).
    fn lattice<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyArray2<f64>>> {
        let m = self.a.structure.lattice.matrix();
        // columns of the matrix are the cell vectors
        let rows: Vec<Vec<f64>> = (0..3)
            .map(|i| (0..3).map(|j| m[(j, i)]).collect())
            .collect();
        Ok(PyArray2::from_vec2(py, &rows)?)
    }

    /// The site-energy grid (eV) as an array of shape (na, nb, nc): point (i, j, k) sits at
    /// fractional position (i/na, j/nb, k/nc).
    fn energy_grid<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyAny>> {
        grid_array(py, &self.a.landscape.energy)
    }

    /// The valence-mismatch grid |dV| (v.u.), shape (na, nb, nc).
    fn mismatch_grid<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyAny>> {
        grid_array(py, &self.a.landscape.mismatch)
    }

    /// The sites of the mobile ion found in the landscape: `frac` (n, 3), `energy_ev` (n,),
    /// `orbit` (n,), `multiplicity` (n,), `label` (the file's site of the ion within reach, or
    /// None) and `occupied` (n,) booleans.
    fn sites<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyDict>> {
        let d = PyDict::new(py);
        let sites = self
            .a
            .network
            .as_ref()
            .map(|n| n.sites.as_slice())
            .unwrap_or(&[]);
        let orbits = self
            .a
            .network
            .as_ref()
            .map(|n| n.orbits.as_slice())
            .unwrap_or(&[]);
        let frac: Vec<Vec<f64>> = sites
            .iter()
            .map(|s| s.frac.0.iter().copied().collect())
            .collect();
        let frac = if frac.is_empty() {
            PyArray1::<f64>::from_vec(py, vec![]).reshape([0, 3])?
        } else {
            PyArray2::from_vec2(py, &frac)?
        };
        d.set_item("frac", frac)?;
        d.set_item(
            "energy_ev",
            PyArray1::from_vec(py, sites.iter().map(|s| s.energy as f64).collect()),
        )?;
        d.set_item(
            "orbit",
            PyArray1::from_vec(py, sites.iter().map(|s| s.orbit as i64).collect()),
        )?;
        d.set_item(
            "multiplicity",
            PyArray1::from_vec(
                py,
                sites
                    .iter()
                    .map(|s| orbits.get(s.orbit).map_or(1, |o| o.multiplicity) as i64)
                    .collect(),
            ),
        )?;
        d.set_item(
            "label",
            PyList::new(py, sites.iter().map(|s| s.label.clone()))?,
        )?;
        d.set_item(
            "occupied",
            PyArray1::from_vec(py, sites.iter().map(|s| s.label.is_some()).collect()),
        )?;
        Ok(d)
    }

    /// The hops between sites: `from`, `to` (site indices), `image` (n, 3) lattice translation
    /// of the end site, `barrier_ev` (forward), `saddle_ev`, `length_a`.
    fn hops<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyDict>> {
        let d = PyDict::new(py);
        let hops = self
            .a
            .network
            .as_ref()
            .map(|n| n.hops.as_slice())
            .unwrap_or(&[]);
        d.set_item(
            "from",
            PyArray1::from_vec(py, hops.iter().map(|h| h.from as i64).collect()),
        )?;
        d.set_item(
            "to",
            PyArray1::from_vec(py, hops.iter().map(|h| h.to as i64).collect()),
        )?;
        let image: Vec<i64> = hops.iter().flat_map(|h| h.image.map(i64::from)).collect();
        d.set_item(
            "image",
            PyArray1::from_vec(py, image).reshape([hops.len(), 3])?,
        )?;
        d.set_item(
            "barrier_ev",
            PyArray1::from_vec(py, hops.iter().map(|h| h.barrier_forward as f64).collect()),
        )?;
        d.set_item(
            "saddle_ev",
            PyArray1::from_vec(py, hops.iter().map(|h| h.saddle_energy as f64).collect()),
        )?;
        d.set_item(
            "length_a",
            PyArray1::from_vec(py, hops.iter().map(|h| h.length).collect()),
        )?;
        Ok(d)
    }

    /// The analysed structure (oxidation states filled in) as parts: a list of
    /// (species, frac, occupancy) per occupant of every site of the cell.
    fn structure_parts<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyList>> {
        let mut out = Vec::new();
        for site in &self.a.structure.sites {
            for o in &site.occupants {
                let f = site.frac.0;
                out.push(PyTuple::new(
                    py,
                    [
                        o.species.name().into_pyobject(py)?.into_any(),
                        [f[0], f[1], f[2]].into_pyobject(py)?.into_any(),
                        o.occupancy.into_pyobject(py)?.into_any(),
                    ],
                )?);
            }
        }
        PyList::new(py, out)
    }

    fn __repr__(&self) -> String {
        format!(
            "<hopmap result for {} ({}): {}>",
            self.file,
            self.a.ion.symbol(),
            self.a.summary.headline
        )
    }
}

fn grid_array<'py>(py: Python<'py>, g: &hopmap::grid::Grid) -> PyResult<Bound<'py, PyAny>> {
    let [na, nb, nc] = g.dims;
    // Grid::index is (i * nb + j) * nc + k: C order of shape (na, nb, nc)
    let a = PyArray1::from_slice(py, &g.values).reshape([na, nb, nc])?;
    Ok(a.into_any())
}

#[pymodule]
fn _hopmap(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_function(wrap_pyfunction!(analyse_path, m)?)?;
    m.add_function(wrap_pyfunction!(analyse_text, m)?)?;
    m.add_function(wrap_pyfunction!(analyse_parts, m)?)?;
    m.add_class::<Result>()?;
    m.add("__version__", env!("CARGO_PKG_VERSION"))?;
    Ok(())
}
