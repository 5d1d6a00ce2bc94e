//! The library's front door: options checked once through a builder, one error type with a kind
//! and a place, and the whole job from a file, a string or parts in one call.
//!
//! ```no_run
//! use hopmap::{AnalysisOptions, analyse_file};
//! let opts = AnalysisOptions::builder("Li").spacing_a(0.2).temperature_k(300.0).build()?;
//! let a = analyse_file("structures/reference/LiFePO4_olivine.cif".as_ref(), &opts)?;
//! println!("{}", a.summary.headline);
//! # Ok::<(), hopmap::Error>(())
//! ```

use crate::analysis::{self, Analysis, AnalysisError, AnalysisOptions, RateOptions};
use crate::bv::OxidationSetting;
use crate::bv::overrides::Overrides;
use crate::element::Element;
use crate::error::InputError;
use crate::landscape::{Progress, ProgressSink};
use crate::structure::Structure;
use std::fmt;
use std::path::{Path, PathBuf};
use std::sync::Arc;

/// What went wrong, so that a program can react without reading the sentence.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum ErrorKind {
    /// The input could not be read: a missing file, bad syntax, an impossible cell.
    Input,
    /// An option is out of its range or names something unknown.
    Options,
    /// The bond-valence model cannot be built: a missing pair, state or radius.
    Model,
    /// The structure cannot host the analysis (no framework, no site of the ion, ...).
    Structure,
    /// The structure's grid would exceed the memory or time budget ([`crate::limits`]); the
    /// message gives the estimate and a spacing that would fit.
    OverBudget,
    /// The caller's progress callback asked to stop.
    Cancelled,
}

impl ErrorKind {
    pub fn name(&self) -> &'static str {
        match self {
            ErrorKind::Input => "input",
            ErrorKind::Options => "options",
            ErrorKind::Model => "model",
            ErrorKind::Structure => "structure",
            ErrorKind::OverBudget => "over budget",
            ErrorKind::Cancelled => "cancelled",
        }
    }
}

/// Every error of the library: its kind, the file (or source) and the place in it when known,
/// and a plain sentence.
#[derive(Debug, Clone, PartialEq)]
pub struct Error {
    pub kind: ErrorKind,
    /// The file as the user named it, or the name of an in-memory source.
    pub file: Option<String>,
    /// Where in it, in words: `line 12, column 5`, `data block 'x', site 'Li1'`, `entry 3`,
    /// or the option's name.
    pub place: Option<String>,
    pub message: String,
}

impl Error {
    pub fn options(option: &str, message: impl Into<String>) -> Self {
        Error {
            kind: ErrorKind::Options,
            file: None,
            place: Some(option.to_string()),
            message: message.into(),
        }
    }

    /// The same error, naming the file it concerns (when it names none yet).
    pub fn in_file(mut self, file: &str) -> Self {
        if self.file.is_none() {
            self.file = Some(file.to_string());
        }
        self
    }
}

impl fmt::Display for Error {
    /// `file: place: message`, leaving out what is unknown.
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        if let Some(file) = &self.file {
            write!(f, "{file}: ")?;
        }
        if let Some(p) = &self.place {
            write!(f, "{p}: ")?;
        }
        write!(f, "{}", self.message)
    }
}

impl std::error::Error for Error {}

impl From<InputError> for Error {
    fn from(e: InputError) -> Self {
        let mut place = Vec::new();
        if let Some(l) = e.line {
            place.push(match e.column {
                Some(c) => format!("line {l}, column {c}"),
                None => format!("line {l}"),
            });
        }
        if let Some(c) = e.context {
            place.push(c);
        }
        Error {
            kind: ErrorKind::Input,
            file: Some(e.file),
            place: (!place.is_empty()).then(|| place.join(", ")),
            message: e.message,
        }
    }
}

impl From<AnalysisError> for Error {
    fn from(e: AnalysisError) -> Self {
        let (kind, place, message) = match e {
            AnalysisError::Model(m) => (ErrorKind::Model, None, m.to_string()),
            AnalysisError::Cancelled(c) => (ErrorKind::Cancelled, None, c.to_string()),
            AnalysisError::Structure { structure, message } => (
                ErrorKind::Structure,
                Some(format!("structure '{structure}'")),
                message,
            ),
            AnalysisError::Options(message) => (ErrorKind::Options, None, message),
            AnalysisError::OverBudget { structure, message } => (
                ErrorKind::OverBudget,
                Some(format!("structure '{structure}'")),
                message,
            ),
        };
        Error {
            kind,
            file: None,
            place,
            message,
        }
    }
}

/// Builds [`AnalysisOptions`], checking every value once ([`OptionsBuilder::build`]). The
/// defaults are the command line's.
#[derive(Clone, Debug)]
pub struct OptionsBuilder {
    ion: String,
    spacing_a: Option<f64>,
    parameter_file: Option<PathBuf>,
    oxidation: Option<String>,
    exclude_labels: Vec<String>,
    rate: RateOptions,
    diffusivity_m2_s: Option<f64>,
    progress: Progress,
    percolation_only: bool,
    mismatch_channels: bool,
}

impl AnalysisOptions {
    /// A builder for the mobile ion `ion` (an element symbol: Li, Na, Mg, ...).
    pub fn builder(ion: &str) -> OptionsBuilder {
        OptionsBuilder {
            ion: ion.to_string(),
            spacing_a: None,
            parameter_file: None,
            oxidation: None,
            exclude_labels: vec![],
            rate: RateOptions::default(),
            diffusivity_m2_s: None,
            progress: Progress::Silent,
            percolation_only: false,
            mismatch_channels: true,
        }
    }
}

impl OptionsBuilder {
    /// Grid spacing, A (default: 0.1 A, coarser for large cells).
    pub fn spacing_a(mut self, s: f64) -> Self {
        self.spacing_a = Some(s);
        self
    }
    /// A parameter file (TOML): bond-valence pairs, radii, model knobs.
    pub fn parameter_file(mut self, p: impl Into<PathBuf>) -> Self {
        self.parameter_file = Some(p.into());
        self
    }
    /// Oxidation states by element or site label, `Co=3.5,Fe1=2`; they replace the file's.
    pub fn oxidation(mut self, text: &str) -> Self {
        self.oxidation = Some(text.to_string());
        self
    }
    /// Site labels removed from the framework besides the mobile ion.
    pub fn exclude_labels<S: AsRef<str>>(mut self, labels: &[S]) -> Self {
        self.exclude_labels = labels.iter().map(|s| s.as_ref().to_string()).collect();
        self
    }
    /// Temperature of the transport estimates, K.
    pub fn temperature_k(mut self, t: f64) -> Self {
        self.rate.temperature_k = t;
        self
    }
    /// Attempt frequency of the hopping model, Hz.
    pub fn attempt_frequency_hz(mut self, f: f64) -> Self {
        self.rate.attempt_frequency_hz = f;
        self
    }
    /// Correlation factor f of the hopping model, in (0, 1].
    pub fn correlation_factor(mut self, f: f64) -> Self {
        self.rate.correlation_factor = f;
        self
    }
    /// Site filling c of the hopping model, in [0, 1).
    pub fn site_filling(mut self, c: f64) -> Self {
        self.rate.site_filling = c;
        self
    }
    /// A measured diffusion coefficient (m^2/s) at the temperature of the estimates, used
    /// instead of the barrier.
    pub fn measured_diffusivity_m2_s(mut self, d: f64) -> Self {
        self.diffusivity_m2_s = Some(d);
        self
    }
    /// Mobile ions inserted per formula unit for the redox capacity.
    pub fn ions_per_formula_unit(mut self, x: f64) -> Self {
        self.rate.ions_per_formula_unit = Some(x);
        self
    }
    /// Minimum ion-ion distance for the site-limited capacity, A.
    pub fn min_ion_distance_a(mut self, d: f64) -> Self {
        self.rate.min_ion_distance_a = d;
        self
    }
    /// Where the landscape reports its progress; the sink may cancel.
    pub fn progress(mut self, sink: Arc<dyn ProgressSink>) -> Self {
        self.progress = Progress::Report(sink);
        self
    }
    /// Percolation only: no site network, profiles or estimates.
    pub fn percolation_only(mut self, yes: bool) -> Self {
        self.percolation_only = yes;
        self
    }

    /// Percolate the valence-mismatch grid too (default yes); screening turns it off.
    pub fn mismatch_channels(mut self, yes: bool) -> Self {
        self.mismatch_channels = yes;
        self
    }

    /// Checks every value and builds the options. Errors name the option.
    pub fn build(self) -> Result<AnalysisOptions, Error> {
        let ion = Element::from_symbol(self.ion.trim()).ok_or_else(|| {
            Error::options(
                "ion",
                format!("'{}' is not an element symbol (e.g. Li, Na, Mg)", self.ion),
            )
        })?;
        if let Some(s) = self.spacing_a {
            crate::limits::check_spacing(s).map_err(|m| Error::options("spacing", m))?;
        }
        let mut o = AnalysisOptions::new(ion);
        if let Some(p) = &self.parameter_file {
            let ov = Overrides::read(p)?;
            ov.apply(&mut o.table, &mut o.knobs);
        }
        if let Some(text) = &self.oxidation {
            let settings = OxidationSetting::parse_list(text, "oxidation")
                .map_err(|e| Error::options("oxidation", e))?;
            o.table.oxidation.extend(settings);
        }
        o.spacing_a = self.spacing_a;
        o.exclude_labels = self.exclude_labels;
        o.progress = self.progress;
        o.percolation_only = self.percolation_only;
        o.mismatch_channels = self.mismatch_channels;
        o.rate = RateOptions {
            measured_diffusion: self.diffusivity_m2_s.map(|d| (d, self.rate.temperature_k)),
            ..self.rate
        };
        // the physical ranges are the core's (crate::limits, RateOptions::validate), one set
        // for the library, the command line and the bindings
        o.validate()?;
        Ok(o)
    }
}

/// Reads a structure file (CIF, POSCAR, extended XYZ) and analyses it.
pub fn analyse_file(path: &Path, opts: &AnalysisOptions) -> Result<Analysis, Error> {
    let s = crate::read::read_structure(path, None)?;
    analyse_structure(&s, opts).map_err(|e| e.in_file(&path.display().to_string()))
}

/// Analyses a structure already in memory ([`crate::read::read_str`],
/// [`crate::read::structure_from_parts`]).
pub fn analyse_structure(s: &Structure, opts: &AnalysisOptions) -> Result<Analysis, Error> {
    Ok(analysis::analyse(s, opts)?)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn builder_checks_each_option_and_names_it() {
        let e = AnalysisOptions::builder("Xq").build().unwrap_err();
        assert_eq!(
            (e.kind, e.place.as_deref()),
            (ErrorKind::Options, Some("ion"))
        );
        for s in [0.0, 0.01, -1.0, 2.5, f64::NAN] {
            let e = AnalysisOptions::builder("Li")
                .spacing_a(s)
                .build()
                .unwrap_err();
            assert_eq!(e.place.as_deref(), Some("spacing"), "{s}");
        }
        assert!(
            AnalysisOptions::builder("Li")
                .spacing_a(2.0)
                .build()
                .is_ok()
        );
        assert!(
            AnalysisOptions::builder("Li")
                .temperature_k(0.0)
                .build()
                .is_err()
        );
        assert!(
            AnalysisOptions::builder("Li")
                .site_filling(1.0)
                .build()
                .is_err()
        );
        assert!(
            AnalysisOptions::builder("Li")
                .correlation_factor(0.0)
                .build()
                .is_err()
        );
        assert!(
            AnalysisOptions::builder("Li")
                .oxidation("Co=x")
                .build()
                .is_err()
        );
        let o = AnalysisOptions::builder("Na")
            .spacing_a(0.25)
            .temperature_k(350.0)
            .measured_diffusivity_m2_s(1e-14)
            .oxidation("Co=3.5")
            .build()
            .unwrap();
        assert_eq!(o.ion, Element::from_symbol("Na").unwrap());
        assert_eq!(o.spacing_a, Some(0.25));
        assert_eq!(o.rate.measured_diffusion, Some((1e-14, 350.0)));
    }

    #[test]
    fn input_errors_keep_file_and_place() {
        let e: Error = InputError::new("x.cif", "bad number")
            .at(3, 7)
            .context("data block 'a'")
            .into();
        assert_eq!(e.kind, ErrorKind::Input);
        assert_eq!(
            e.to_string(),
            "x.cif: line 3, column 7, data block 'a': bad number"
        );
        let e = analyse_file(
            "no/such/file.cif".as_ref(),
            &AnalysisOptions::builder("Li").build().unwrap(),
        )
        .unwrap_err();
        assert_eq!(e.kind, ErrorKind::Input);
        assert_eq!(e.file.as_deref(), Some("no/such/file.cif"));
    }
}
