//! Batch screening: many structures, one row per structure and mobile ion.
//!
//! The batch core knows nothing about how a row is computed: it takes a function from a job
//! (file, ion) to a [`ScreenRow`] and takes care of the rest: the deterministic job list and its
//! shards, parallel execution, appending each finished row to the output at once (an
//! interrupted run loses nothing), resuming (jobs already in the output are skipped), and
//! merging shard outputs. A bad file becomes an error row; the batch goes on.

use hopmap_report::output::{remove_stale_temporaries, write_atomic};
use rayon::prelude::*;
use std::collections::BTreeSet;
use std::fs::OpenOptions;
use std::io::{BufRead, BufReader, Write};
use std::path::{Path, PathBuf};
use std::sync::Mutex;

/// One result row. Missing values (no 2D network, an error row) are `None`.
///
/// The row describes the networks the answer reports ([`hopmap::summary::Summary`]): its
/// `dimension`, `direction` and `barrier_ev` are those of the network the answer leads with
/// (the lowest), not of every network reached below the energy cap.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct ScreenRow {
    pub file: String,
    pub ion: String,
    pub formula: String,
    pub space_group: String,
    pub space_group_number: Option<u16>,
    /// Dimension of the network the answer leads with (0 = no percolating path).
    pub dimension: Option<u8>,
    /// Its direction: `[uvw]` for 1D, plane normal `(hkl)` for 2D, empty for 3D.
    pub direction: String,
    /// Its barrier (eV) and the model's uncertainty of it (eV).
    pub barrier_ev: Option<f64>,
    pub barrier_uncertainty_ev: Option<f64>,
    /// Barriers of the networks the answer reports, by dimension (a dimension folded into a
    /// higher one is empty).
    pub barrier_1d_ev: Option<f64>,
    pub barrier_2d_ev: Option<f64>,
    pub barrier_3d_ev: Option<f64>,
    /// D at 298.15 K (m^2/s) of that network and its band for the barrier's uncertainty;
    /// empty without bulk transport.
    pub diffusion_298k_m2_s: Option<f64>,
    pub diffusion_low_m2_s: Option<f64>,
    pub diffusion_high_m2_s: Option<f64>,
    /// Nernst-Einstein conductivity at 298.15 K (S/cm) and its band.
    pub conductivity_298k_s_cm: Option<f64>,
    pub conductivity_low_s_cm: Option<f64>,
    pub conductivity_high_s_cm: Option<f64>,
    /// False when D lies below the floor of bulk transport (1e-20 m^2/s).
    pub bulk_transport: Option<bool>,
    /// Theoretical capacity (mAh/g); empty for a solid electrolyte.
    pub capacity_mah_g: Option<f64>,
    pub sites: Option<usize>,
    pub valence_verdict: String,
    pub gii_vu: Option<f64>,
    pub warnings: Vec<String>,
    pub error: String,
}

/// The columns of the CSV output, in order; units are in the names (`_ev`, `_m2_s`, `_s_cm`,
/// `_mah_g`, `_vu`).
pub const COLUMNS: &[&str] = &[
    "file",
    "ion",
    "formula",
    "space_group",
    "space_group_number",
    "dimension",
    "direction",
    "barrier_ev",
    "barrier_uncertainty_ev",
    "barrier_1d_ev",
    "barrier_2d_ev",
    "barrier_3d_ev",
    "diffusion_298k_m2_s",
    "diffusion_low_m2_s",
    "diffusion_high_m2_s",
    "conductivity_298k_s_cm",
    "conductivity_low_s_cm",
    "conductivity_high_s_cm",
    "bulk_transport",
    "capacity_mah_g",
    "sites",
    "valence_verdict",
    "gii_vu",
    "warnings",
    "error",
];

/// Output table format, chosen from the output file's extension.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum TableFormat {
    Csv,
    JsonLines,
}

impl TableFormat {
    /// The format of a table file: `.csv`; `.jsonl` or `.ndjson` for JSON lines. Any other
    /// name (`x.json`, `x.txt`) is an error rather than a silent CSV.
    pub fn of(p: &Path) -> Result<TableFormat, String> {
        match p
            .extension()
            .and_then(|e| e.to_str())
            .map(|e| e.to_ascii_lowercase())
            .as_deref()
        {
            Some("jsonl") | Some("ndjson") => Ok(TableFormat::JsonLines),
            Some("csv") => Ok(TableFormat::Csv),
            _ => Err(format!(
                "{}: a screening table must end in .csv, or .jsonl (or .ndjson) for JSON lines",
                p.display()
            )),
        }
    }

    /// As [`TableFormat::of`], CSV for a name it does not know (tests and internal use).
    pub fn from_path(p: &Path) -> TableFormat {
        Self::of(p).unwrap_or(TableFormat::Csv)
    }
}

/// The path a job is matched by on resume: the canonical path when the file exists (so
/// `in/a.cif`, `./in/a.cif` and a symlink to it are one job), else the path as written.
pub fn job_key(file: &str) -> String {
    std::fs::canonicalize(file)
        .map(|p| p.display().to_string())
        .unwrap_or_else(|_| file.to_string())
}

/// As [`check_table`], for the output of a run: the advice says the file is left untouched.
pub fn check_resumable(out: &Path, format: TableFormat) -> Result<(), String> {
    check_table(out, format).map_err(|e| {
        format!(
            "{e}; it is left untouched: choose another --out, or remove the file to start afresh"
        )
    })
}

/// Says whether an existing file can be resumed as a table of this format: an empty file can; a
/// CSV must start with the hopmap header, a JSON-lines file must hold only hopmap rows. Any other
/// file (a user's CSV, a CIF) is refused so that it is never overwritten.
pub fn check_table(out: &Path, format: TableFormat) -> Result<(), String> {
    let Ok(meta) = std::fs::metadata(out) else {
        return Ok(());
    };
    if !meta.is_file() {
        return Err(format!(
            "{} exists and is not a regular file",
            out.display()
        ));
    }
    if meta.len() == 0 {
        return Ok(());
    }
    let bytes = std::fs::read(out).map_err(|e| format!("cannot read {}: {e}", out.display()))?;
    let text = String::from_utf8_lossy(&bytes);
    let refuse = |why: String| {
        Err(format!(
            "{} is not a hopmap screening table ({why})",
            out.display()
        ))
    };
    match format {
        TableFormat::Csv => {
            // a hopmap table: `file,ion` first, then only column names hopmap writes (tables of
            // an older layout, with fewer columns, are read back by name)
            let first = text.lines().next().unwrap_or("").trim_end_matches('\r');
            let names: Vec<&str> = first.split(',').collect();
            let ours = names.len() >= 2
                && names[..2] == ["file", "ion"]
                && names.iter().all(|n| COLUMNS.contains(n));
            if !ours {
                let shown: String = first.chars().take(60).collect();
                return refuse(format!("its first line is '{shown}'"));
            }
        }
        TableFormat::JsonLines => {
            let complete = match text.rfind('\n') {
                Some(i) => &text[..=i],
                None => "",
            };
            for (n, line) in complete.lines().enumerate() {
                if line.trim().is_empty() {
                    continue;
                }
                let ok = serde_json::from_str::<serde_json::Value>(line)
                    .ok()
                    .as_ref()
                    .and_then(ScreenRow::from_json)
                    .is_some();
                if !ok {
                    return refuse(format!("line {} is not a row of hopmap screen", n + 1));
                }
            }
        }
    }
    Ok(())
}

/// The settings of a screening run that change its rows (grid spacing, parameter file,
/// oxidation states, substitutions, cell handling, version), recorded beside the table in
/// `<table>.run.json` so that a resume with other settings is refused instead of mixing rows.
pub type RunSettings = std::collections::BTreeMap<String, String>;

/// Where the settings of a table are recorded.
pub fn settings_path(out: &Path) -> PathBuf {
    let mut name = out.file_name().unwrap_or_default().to_os_string();
    name.push(".run.json");
    out.with_file_name(name)
}

/// Compares the settings of this run with those recorded for an existing table; records them
/// for a new one. A difference is an error that names each setting.
pub fn check_settings(
    out: &Path,
    settings: &RunSettings,
    table_has_rows: bool,
) -> Result<(), String> {
    let sp = settings_path(out);
    if table_has_rows && let Ok(text) = std::fs::read_to_string(&sp) {
        let v: serde_json::Value = serde_json::from_str(&text).map_err(|e| {
            format!(
                "{}: not a settings record of hopmap screen: {e}",
                sp.display()
            )
        })?;
        let old: RunSettings = v
            .get("settings")
            .and_then(|s| s.as_object())
            .map(|m| {
                m.iter()
                    .map(|(k, v)| (k.clone(), v.as_str().unwrap_or("").to_string()))
                    .collect()
            })
            .unwrap_or_default();
        let diffs: Vec<String> = old
            .keys()
            .chain(settings.keys())
            .collect::<BTreeSet<_>>()
            .into_iter()
            .filter(|k| old.get(*k) != settings.get(*k))
            .map(|k| {
                format!(
                    "{k}: table '{}', this run '{}'",
                    old.get(k).map(String::as_str).unwrap_or("-"),
                    settings.get(k).map(String::as_str).unwrap_or("-")
                )
            })
            .collect();
        if !diffs.is_empty() {
            return Err(format!(
                "{} was computed with other settings ({}); resuming would mix rows of two runs: \
                 rerun with the same settings or choose another --out",
                out.display(),
                diffs.join("; ")
            ));
        }
        return Ok(());
    }
    let doc = serde_json::json!({ "schema": "hopmap.screen-run/1", "settings": settings });
    write_atomic(
        &sp,
        (serde_json::to_string_pretty(&doc).unwrap() + "\n").as_bytes(),
    )
    .map_err(|e| format!("cannot write {}: {e}", sp.display()))
}

/// An exclusive lock on a table for the time of a run (`.<table>.lock` beside it; the
/// operating system releases it when the process ends, however it ends).
pub struct TableLock {
    _file: std::fs::File,
    path: PathBuf,
}

impl TableLock {
    /// Takes the lock, or says that another run holds it.
    pub fn take(out: &Path) -> Result<TableLock, String> {
        let name = out.file_name().and_then(|n| n.to_str()).unwrap_or("table");
        let path = out.with_file_name(format!(".{name}.lock"));
        let file = OpenOptions::new()
            .create(true)
            .truncate(false)
            .write(true)
            .open(&path)
            .map_err(|e| format!("cannot create the lock {}: {e}", path.display()))?;
        match file.try_lock() {
            Ok(()) => Ok(TableLock { _file: file, path }),
            Err(std::fs::TryLockError::WouldBlock) => Err(format!(
                "another hopmap run is writing {} (it holds {}); two runs on one table would \
                 lose rows: give each run its own --out and join them with `hopmap merge`",
                out.display(),
                path.display()
            )),
            Err(std::fs::TryLockError::Error(e)) => {
                Err(format!("cannot lock {}: {e}", path.display()))
            }
        }
    }
}

impl Drop for TableLock {
    fn drop(&mut self) {
        let _ = std::fs::remove_file(&self.path);
    }
}

/// A shard `K/N`: the K-th (1-based) of N deterministic slices of the sorted job list.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Shard {
    pub k: usize,
    pub n: usize,
}

impl std::str::FromStr for Shard {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, String> {
        let (k, n) = s
            .split_once('/')
            .ok_or_else(|| format!("shard '{s}' must look like K/N, e.g. 3/10"))?;
        let k: usize = k
            .trim()
            .parse()
            .map_err(|_| format!("shard '{s}': K is not a whole number"))?;
        let n: usize = n
            .trim()
            .parse()
            .map_err(|_| format!("shard '{s}': N is not a whole number"))?;
        if n == 0 || k == 0 || k > n {
            return Err(format!("shard '{s}': need 1 <= K <= N"));
        }
        Ok(Shard { k, n })
    }
}

/// The structure files named on the command line: files as given, folders searched recursively
/// for `.cif`, `.vasp`, `POSCAR*`, `CONTCAR*`, `.xyz`, `.extxyz`. Sorted and de-duplicated so the
/// job list (and therefore every shard) is the same on every machine.
pub fn collect_files(inputs: &[PathBuf]) -> std::io::Result<Vec<PathBuf>> {
    fn is_structure(p: &Path) -> bool {
        let name = p
            .file_name()
            .and_then(|n| n.to_str())
            .unwrap_or("")
            .to_ascii_lowercase();
        let ext = p
            .extension()
            .and_then(|e| e.to_str())
            .unwrap_or("")
            .to_ascii_lowercase();
        matches!(ext.as_str(), "cif" | "vasp" | "xyz" | "extxyz" | "poscar")
            || name.starts_with("poscar")
            || name.starts_with("contcar")
    }
    // folders are entered once each by canonical path, so a symlink loop ends
    fn walk(
        dir: &Path,
        out: &mut BTreeSet<PathBuf>,
        seen: &mut BTreeSet<PathBuf>,
    ) -> std::io::Result<()> {
        if !seen.insert(std::fs::canonicalize(dir)?) {
            return Ok(());
        }
        let mut entries: Vec<_> = std::fs::read_dir(dir)?
            .filter_map(|e| e.ok())
            .map(|e| e.path())
            .collect();
        entries.sort();
        for p in entries {
            if p.is_dir() {
                walk(&p, out, seen)?;
            } else if is_structure(&p) {
                out.insert(p);
            }
        }
        Ok(())
    }
    let mut out = BTreeSet::new();
    let mut seen = BTreeSet::new();
    for p in inputs {
        if p.is_dir() {
            walk(p, &mut out, &mut seen)?;
        } else if p.exists() {
            out.insert(p.clone());
        } else {
            return Err(std::io::Error::new(
                std::io::ErrorKind::NotFound,
                format!("{} does not exist", p.display()),
            ));
        }
    }
    // one job per file: a file reached by two paths (a symlink, ./x and x) is kept once
    let mut canonical = BTreeSet::new();
    Ok(out
        .into_iter()
        .filter(|p| canonical.insert(std::fs::canonicalize(p).unwrap_or_else(|_| p.clone())))
        .collect())
}

/// The jobs of one shard: files are dealt round-robin to shards in sorted order, every ion of a
/// file stays in the same shard.
pub fn shard_jobs(
    files: &[PathBuf],
    ions: &[String],
    shard: Option<Shard>,
) -> Vec<(PathBuf, String)> {
    files
        .iter()
        .enumerate()
        .filter(|(i, _)| shard.is_none_or(|s| i % s.n == s.k - 1))
        .flat_map(|(_, f)| ions.iter().map(move |ion| (f.clone(), ion.clone())))
        .collect()
}

fn opt_num(x: Option<f64>, decimals: usize) -> String {
    x.map(|v| format!("{v:.decimals$}")).unwrap_or_default()
}

/// Two significant figures in scientific notation (D, conductivity): `2.6e-14`.
fn opt_sci(x: Option<f64>) -> String {
    x.map(|v| format!("{v:.1e}")).unwrap_or_default()
}

fn opt_bool(x: Option<bool>) -> String {
    x.map(|b| if b { "yes" } else { "no" }.to_string())
        .unwrap_or_default()
}

/// One CSV record with the csv crate's quoting, without the line end.
fn csv_record(fields: &[String]) -> String {
    let mut w = csv::WriterBuilder::new()
        .terminator(csv::Terminator::Any(b'\n'))
        .from_writer(Vec::new());
    w.write_record(fields).expect("writing to memory");
    let bytes = w.into_inner().expect("writing to memory");
    String::from_utf8(bytes).expect("fields are text")
}

impl ScreenRow {
    /// The row as CSV fields in [`COLUMNS`] order.
    pub fn csv_fields(&self) -> Vec<String> {
        vec![
            self.file.clone(),
            self.ion.clone(),
            self.formula.clone(),
            self.space_group.clone(),
            self.space_group_number
                .map(|n| n.to_string())
                .unwrap_or_default(),
            self.dimension.map(|n| n.to_string()).unwrap_or_default(),
            self.direction.clone(),
            opt_num(self.barrier_ev, 3),
            opt_num(self.barrier_uncertainty_ev, 2),
            opt_num(self.barrier_1d_ev, 3),
            opt_num(self.barrier_2d_ev, 3),
            opt_num(self.barrier_3d_ev, 3),
            opt_sci(self.diffusion_298k_m2_s),
            opt_sci(self.diffusion_low_m2_s),
            opt_sci(self.diffusion_high_m2_s),
            opt_sci(self.conductivity_298k_s_cm),
            opt_sci(self.conductivity_low_s_cm),
            opt_sci(self.conductivity_high_s_cm),
            opt_bool(self.bulk_transport),
            opt_num(self.capacity_mah_g, 1),
            self.sites.map(|n| n.to_string()).unwrap_or_default(),
            self.valence_verdict.clone(),
            opt_num(self.gii_vu, 3),
            self.warnings.join("; "),
            self.error.clone(),
        ]
    }

    /// The row as one CSV line (newline included), quoted by the csv crate.
    pub fn to_csv_line(&self) -> String {
        csv_record(&self.csv_fields())
    }

    /// The row as one JSON object (units in the key names).
    pub fn to_json(&self) -> serde_json::Value {
        serde_json::json!({
            "file": self.file, "ion": self.ion, "formula": self.formula,
            "space_group": self.space_group, "space_group_number": self.space_group_number,
            "dimension": self.dimension, "direction": self.direction,
            "barrier_ev": self.barrier_ev, "barrier_uncertainty_ev": self.barrier_uncertainty_ev,
            "barrier_1d_ev": self.barrier_1d_ev, "barrier_2d_ev": self.barrier_2d_ev, "barrier_3d_ev": self.barrier_3d_ev,
            "diffusion_298k_m2_s": self.diffusion_298k_m2_s,
            "diffusion_low_m2_s": self.diffusion_low_m2_s,
            "diffusion_high_m2_s": self.diffusion_high_m2_s,
            "conductivity_298k_s_cm": self.conductivity_298k_s_cm,
            "conductivity_low_s_cm": self.conductivity_low_s_cm,
            "conductivity_high_s_cm": self.conductivity_high_s_cm,
            "bulk_transport": self.bulk_transport,
            "capacity_mah_g": self.capacity_mah_g,
            "sites": self.sites,
            "valence_verdict": self.valence_verdict, "gii_vu": self.gii_vu,
            "warnings": self.warnings, "error": self.error,
        })
    }

    /// A row from CSV fields named by a header; None without `file` and `ion`. Columns are
    /// found by name, so tables written before a column was added still read.
    fn from_record(header: &[String], f: &[String]) -> Option<ScreenRow> {
        let get = |k: &str| -> &str {
            header
                .iter()
                .position(|h| h == k)
                .and_then(|i| f.get(i))
                .map(|s| s.as_str())
                .unwrap_or("")
        };
        let num = |k: &str| get(k).parse::<f64>().ok();
        let file = get("file").to_string();
        let ion = get("ion").to_string();
        if file.is_empty() || ion.is_empty() {
            return None;
        }
        Some(ScreenRow {
            file,
            ion,
            formula: get("formula").into(),
            space_group: get("space_group").into(),
            space_group_number: get("space_group_number").parse().ok(),
            dimension: get("dimension").parse().ok(),
            direction: get("direction").into(),
            barrier_ev: num("barrier_ev"),
            barrier_uncertainty_ev: num("barrier_uncertainty_ev"),
            barrier_1d_ev: num("barrier_1d_ev"),
            barrier_2d_ev: num("barrier_2d_ev"),
            barrier_3d_ev: num("barrier_3d_ev"),
            diffusion_298k_m2_s: num("diffusion_298k_m2_s"),
            diffusion_low_m2_s: num("diffusion_low_m2_s"),
            diffusion_high_m2_s: num("diffusion_high_m2_s"),
            conductivity_298k_s_cm: num("conductivity_298k_s_cm"),
            conductivity_low_s_cm: num("conductivity_low_s_cm"),
            conductivity_high_s_cm: num("conductivity_high_s_cm"),
            bulk_transport: match get("bulk_transport") {
                "yes" => Some(true),
                "no" => Some(false),
                _ => None,
            },
            capacity_mah_g: num("capacity_mah_g"),
            sites: get("sites").parse().ok(),
            valence_verdict: get("valence_verdict").into(),
            gii_vu: num("gii_vu"),
            warnings: if get("warnings").is_empty() {
                vec![]
            } else {
                get("warnings").split("; ").map(String::from).collect()
            },
            error: get("error").into(),
        })
    }

    fn from_json(v: &serde_json::Value) -> Option<ScreenRow> {
        let s = |k: &str| v.get(k).and_then(|x| x.as_str()).unwrap_or("").to_string();
        let f = |k: &str| v.get(k).and_then(|x| x.as_f64());
        Some(ScreenRow {
            file: v.get("file")?.as_str()?.to_string(),
            ion: v.get("ion")?.as_str()?.to_string(),
            formula: s("formula"),
            space_group: s("space_group"),
            space_group_number: v
                .get("space_group_number")
                .and_then(|x| x.as_u64())
                .map(|n| n as u16),
            dimension: v.get("dimension").and_then(|x| x.as_u64()).map(|n| n as u8),
            direction: s("direction"),
            barrier_ev: f("barrier_ev"),
            barrier_uncertainty_ev: f("barrier_uncertainty_ev"),
            barrier_1d_ev: f("barrier_1d_ev"),
            barrier_2d_ev: f("barrier_2d_ev"),
            barrier_3d_ev: f("barrier_3d_ev"),
            diffusion_298k_m2_s: f("diffusion_298k_m2_s"),
            diffusion_low_m2_s: f("diffusion_low_m2_s"),
            diffusion_high_m2_s: f("diffusion_high_m2_s"),
            conductivity_298k_s_cm: f("conductivity_298k_s_cm"),
            conductivity_low_s_cm: f("conductivity_low_s_cm"),
            conductivity_high_s_cm: f("conductivity_high_s_cm"),
            bulk_transport: v.get("bulk_transport").and_then(|x| x.as_bool()),
            capacity_mah_g: f("capacity_mah_g"),
            sites: v.get("sites").and_then(|x| x.as_u64()).map(|n| n as usize),
            valence_verdict: s("valence_verdict"),
            gii_vu: f("gii_vu"),
            warnings: v
                .get("warnings")
                .and_then(|w| w.as_array())
                .map(|a| {
                    a.iter()
                        .filter_map(|x| x.as_str().map(String::from))
                        .collect()
                })
                .unwrap_or_default(),
            error: s("error"),
        })
    }

    /// Sort key of the final tables: the job (file, ion).
    fn key(&self) -> (String, String) {
        (self.file.clone(), self.ion.clone())
    }
}

/// Reads the complete rows of a table written by [`run_batch`]; an incomplete last line (no
/// newline: the run was interrupted while writing it) is ignored.
pub fn read_table(path: &Path) -> std::io::Result<Vec<ScreenRow>> {
    let text = std::fs::read_to_string(path)?;
    let format = TableFormat::from_path(path);
    let complete = match text.rfind('\n') {
        Some(i) => &text[..=i],
        None => "",
    };
    let mut rows = Vec::new();
    match format {
        TableFormat::Csv => {
            let mut r = csv::ReaderBuilder::new()
                .has_headers(false)
                .flexible(true)
                .from_reader(complete.as_bytes());
            let mut header: Option<Vec<String>> = None;
            for rec in r.records() {
                // an unclosed quote at the end is the interrupted last record
                let Ok(rec) = rec else { break };
                let fields: Vec<String> = rec.iter().map(String::from).collect();
                match &header {
                    None => {
                        if fields.first().map(|s| s.as_str()) == Some("file") {
                            header = Some(fields);
                            continue;
                        }
                        header = Some(COLUMNS.iter().map(|s| s.to_string()).collect());
                        if let Some(row) = ScreenRow::from_record(header.as_ref().unwrap(), &fields)
                        {
                            rows.push(row);
                        }
                    }
                    Some(h) => {
                        if let Some(row) = ScreenRow::from_record(h, &fields) {
                            rows.push(row);
                        }
                    }
                }
            }
        }
        TableFormat::JsonLines => {
            for line in complete.lines().filter(|l| !l.trim().is_empty()) {
                if let Some(r) = serde_json::from_str::<serde_json::Value>(line)
                    .ok()
                    .as_ref()
                    .and_then(ScreenRow::from_json)
                {
                    rows.push(r);
                }
            }
        }
    }
    Ok(rows)
}

/// Renders a whole table (header included for CSV).
pub fn render_table(rows: &[ScreenRow], format: TableFormat) -> String {
    let mut s = String::new();
    if format == TableFormat::Csv {
        s.push_str(&csv_record(
            &COLUMNS.iter().map(|c| c.to_string()).collect::<Vec<_>>(),
        ));
    }
    for r in rows {
        match format {
            TableFormat::Csv => s.push_str(&r.to_csv_line()),
            TableFormat::JsonLines => {
                s.push_str(&r.to_json().to_string());
                s.push('\n');
            }
        }
    }
    s
}

/// How the error of a row over its time or memory budget begins. Such rows are computed again
/// when a run resumes (with a larger `--time-limit`, `--max-memory` or a coarser grid they may
/// fit); every other row, error rows included, counts as done.
pub const OVER_BUDGET: &str = "over budget: ";

/// What a batch run did.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct BatchSummary {
    pub jobs: usize,
    pub skipped_done: usize,
    pub computed: usize,
    pub errors: usize,
}

/// Runs `jobs` in parallel with `analyse`, appending each row to `out` as it finishes (CSV header
/// written first on a new file). Jobs already present in `out` are skipped (resume). When every
/// job is done the file is rewritten sorted by (file, ion), atomically. `on_done` is called after
/// each job (for a progress bar).
pub fn run_batch<F>(
    jobs: &[(PathBuf, String)],
    out: &Path,
    analyse: F,
    on_done: &(dyn Fn() + Sync),
) -> std::io::Result<(BatchSummary, Vec<ScreenRow>)>
where
    F: Fn(&Path, &str) -> ScreenRow + Sync,
{
    let format = TableFormat::from_path(out);
    remove_stale_temporaries(out);
    let mut existing = if out.exists() {
        read_table(out)?
    } else {
        Vec::new()
    };
    // rows over budget are retried: the job is done again and its old row replaced
    let retry: BTreeSet<(String, String)> = existing
        .iter()
        .filter(|r| r.error.starts_with(OVER_BUDGET))
        .map(|r| (job_key(&r.file), r.ion.clone()))
        .collect();
    let in_this_run: BTreeSet<(String, String)> = jobs
        .iter()
        .map(|(f, ion)| (job_key(&f.display().to_string()), ion.clone()))
        .collect();
    // a retried row keeps the file name it was first written with
    let mut first_name: std::collections::BTreeMap<(String, String), String> = Default::default();
    existing.retain(|r| {
        let k = (job_key(&r.file), r.ion.clone());
        let again = retry.contains(&k) && in_this_run.contains(&k);
        if again {
            first_name.insert(k, r.file.clone());
        }
        !again
    });
    // Drop an interrupted last line before appending: rewrite the complete rows.
    if out.exists() {
        write_atomic(out, render_table(&existing, format).as_bytes())?;
    } else {
        write_atomic(out, render_table(&[], format).as_bytes())?;
    }
    let done: BTreeSet<(String, String)> = existing
        .iter()
        .map(|r| (job_key(&r.file), r.ion.clone()))
        .collect();
    let todo: Vec<&(PathBuf, String)> = jobs
        .iter()
        .filter(|(f, ion)| !done.contains(&(job_key(&f.display().to_string()), ion.clone())))
        .collect();
    let summary = Mutex::new(BatchSummary {
        jobs: jobs.len(),
        skipped_done: jobs.len() - todo.len(),
        ..Default::default()
    });
    let writer = Mutex::new(OpenOptions::new().append(true).open(out)?);
    let new_rows = Mutex::new(Vec::new());
    let io_error: Mutex<Option<std::io::Error>> = Mutex::new(None);
    // after a write error (a full disk) no further job is started: the error is reported at once
    let failed = std::sync::atomic::AtomicBool::new(false);
    todo.par_iter().for_each(|(file, ion)| {
        if failed.load(std::sync::atomic::Ordering::Relaxed) {
            return;
        }
        let mut row = analyse(file, ion);
        if let Some(name) = first_name.get(&(job_key(&row.file), row.ion.clone())) {
            row.file = name.clone();
        }
        let line = match format {
            TableFormat::Csv => row.to_csv_line(),
            TableFormat::JsonLines => row.to_json().to_string() + "\n",
        };
        {
            let mut w = writer.lock().unwrap();
            if let Err(e) = w.write_all(line.as_bytes()).and_then(|_| w.flush()) {
                failed.store(true, std::sync::atomic::Ordering::Relaxed);
                io_error.lock().unwrap().get_or_insert(e);
            }
        }
        {
            let mut s = summary.lock().unwrap();
            s.computed += 1;
            if !row.error.is_empty() {
                s.errors += 1;
            }
        }
        new_rows.lock().unwrap().push(row);
        on_done();
    });
    if let Some(e) = io_error.into_inner().unwrap() {
        return Err(e);
    }
    existing.extend(new_rows.into_inner().unwrap());
    existing.sort_by_key(|r| r.key());
    write_atomic(out, render_table(&existing, format).as_bytes())?;
    Ok((summary.into_inner().unwrap(), existing))
}

/// What a merge did: the joined rows, and the jobs that came more than once (file, ion, how
/// many rows were dropped), so that the caller can say so.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Merged {
    pub rows: Vec<ScreenRow>,
    pub dropped: Vec<(String, String, usize)>,
}

impl Merged {
    /// Rows dropped as duplicates, in all.
    pub fn dropped_rows(&self) -> usize {
        self.dropped.iter().map(|d| d.2).sum()
    }
}

/// Joins shard outputs into one table sorted by (file, ion); a job present in several inputs is
/// kept once (the first non-error row wins, in the order of the inputs) and the duplicates
/// dropped are listed in [`Merged::dropped`].
pub fn merge_tables(inputs: &[PathBuf]) -> Result<Merged, String> {
    let mut all: Vec<ScreenRow> = Vec::new();
    for p in inputs {
        let format = TableFormat::of(p)?;
        let meta = std::fs::metadata(p).map_err(|e| format!("cannot read {}: {e}", p.display()))?;
        if meta.len() == 0 {
            return Err(format!(
                "{} is empty, not a hopmap screening table",
                p.display()
            ));
        }
        check_table(p, format)?;
        all.extend(read_table(p).map_err(|e| format!("cannot read {}: {e}", p.display()))?);
    }
    // stable: among rows of one job, non-error rows first, then input order
    all.sort_by(|a, b| {
        a.key()
            .cmp(&b.key())
            .then(a.error.is_empty().cmp(&b.error.is_empty()).reverse())
    });
    let mut out = Merged::default();
    for r in all {
        match out.rows.last() {
            Some(last) if last.key() == r.key() => match out.dropped.last_mut() {
                Some(d) if d.0 == r.file && d.1 == r.ion => d.2 += 1,
                _ => out.dropped.push((r.file.clone(), r.ion.clone(), 1)),
            },
            _ => out.rows.push(r),
        }
    }
    Ok(out)
}

/// A terminal table of the rows, best first: rows with a percolating network by the barrier of
/// the network the answer leads with, lowest first; then rows without one; error rows last.
/// Units are in the header.
pub fn sorted_view(rows: &[ScreenRow]) -> String {
    let mut v: Vec<&ScreenRow> = rows.iter().collect();
    let best = |r: &ScreenRow| -> f64 {
        match r.dimension {
            Some(d) if d > 0 => r.barrier_ev.unwrap_or(f64::INFINITY),
            _ => f64::INFINITY,
        }
    };
    v.sort_by(|a, b| {
        (a.error.is_empty().cmp(&b.error.is_empty()).reverse())
            .then(best(a).total_cmp(&best(b)))
            .then(a.key().cmp(&b.key()))
    });
    let line = |c: [&str; 12]| {
        format!(
            "{:<32} {:<4} {:<16} {:<11} {:>3} {:<9} {:>14} {:>11} {:>11} {:>10} {:>5} {:<10}\n",
            c[0], c[1], c[2], c[3], c[4], c[5], c[6], c[7], c[8], c[9], c[10], c[11]
        )
    };
    let mut s = line([
        "file",
        "ion",
        "formula",
        "space group",
        "dim",
        "direction",
        "barrier (eV)",
        "D (m^2/s)",
        "sigma (S/cm)",
        "Q (mAh/g)",
        "sites",
        "valence",
    ]);
    for r in v {
        let name = Path::new(&r.file)
            .file_name()
            .and_then(|n| n.to_str())
            .unwrap_or(&r.file)
            .to_string();
        if !r.error.is_empty() {
            s.push_str(&format!(
                "{:<32} {:<4} error: {}\n",
                truncate(&name, 32),
                r.ion,
                r.error
            ));
            continue;
        }
        let dash = || "-".to_string();
        let barrier = match (r.barrier_ev, r.barrier_uncertainty_ev) {
            (Some(b), Some(u)) => format!("{b:.2} ± {u:.2}"),
            (Some(b), None) => format!("{b:.2}"),
            _ => dash(),
        };
        let no_bulk = r.bulk_transport == Some(false) && r.dimension.unwrap_or(0) > 0;
        let sci = |x: Option<f64>| match x {
            Some(v) => format!("{v:.1e}"),
            None if no_bulk => "none".into(),
            None => dash(),
        };
        s.push_str(&line([
            &truncate(&name, 32),
            &r.ion,
            &truncate(&r.formula, 16),
            &truncate(&r.space_group, 11),
            &r.dimension.map(|d| d.to_string()).unwrap_or_else(dash),
            &r.direction,
            &barrier,
            &sci(r.diffusion_298k_m2_s),
            &sci(r.conductivity_298k_s_cm),
            &r.capacity_mah_g
                .map(|q| format!("{q:.0}"))
                .unwrap_or_else(dash),
            &r.sites.map(|n| n.to_string()).unwrap_or_else(dash),
            &r.valence_verdict,
        ]));
    }
    if v_has_no_bulk(rows) {
        s.push_str("  D and sigma at 298.15 K; 'none': no bulk transport (D below 1e-20 m^2/s)\n");
    }
    s
}

fn v_has_no_bulk(rows: &[ScreenRow]) -> bool {
    rows.iter().any(|r| r.bulk_transport == Some(false))
}

fn truncate(s: &str, n: usize) -> String {
    if s.chars().count() <= n {
        s.to_string()
    } else {
        s.chars().take(n - 1).collect::<String>() + "~"
    }
}

/// Reads a table from a reader line by line (used by tests of interrupted files).
pub fn count_lines(path: &Path) -> std::io::Result<usize> {
    Ok(BufReader::new(std::fs::File::open(path)?).lines().count())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn fake(file: &Path, ion: &str) -> ScreenRow {
        let name = file.display().to_string();
        if name.contains("bad") {
            return ScreenRow {
                file: name,
                ion: ion.into(),
                error: "bad.cif:3:1: unterminated quote".into(),
                ..Default::default()
            };
        }
        ScreenRow {
            file: name.clone(),
            ion: ion.into(),
            formula: "LiX, \"odd\"".into(),
            dimension: Some(1),
            barrier_ev: Some(name.len() as f64 / 100.0),
            barrier_uncertainty_ev: Some(0.15),
            barrier_1d_ev: Some(name.len() as f64 / 100.0),
            diffusion_298k_m2_s: Some(2.6e-14),
            bulk_transport: Some(true),
            capacity_mah_g: Some(169.9),
            direction: "[001]".into(),
            warnings: vec!["a warning".into(), "another".into()],
            ..Default::default()
        }
    }

    fn files(n: usize) -> Vec<PathBuf> {
        (0..n)
            .map(|i| {
                PathBuf::from(if i == 3 {
                    format!("dir/bad{i}.cif")
                } else {
                    format!("dir/s{i:02}.cif")
                })
            })
            .collect()
    }

    fn tmp(name: &str) -> PathBuf {
        let d = std::env::temp_dir().join(format!("hopmap-screen-{}-{name}", std::process::id()));
        std::fs::create_dir_all(&d).unwrap();
        d
    }

    #[test]
    fn shards_partition_the_job_list() {
        let f = files(10);
        let ions = vec!["Li".to_string(), "Na".to_string()];
        let all = shard_jobs(&f, &ions, None);
        let mut union: Vec<_> = (1..=3)
            .flat_map(|k| shard_jobs(&f, &ions, Some(Shard { k, n: 3 })))
            .collect();
        union.sort();
        let mut sorted = all.clone();
        sorted.sort();
        assert_eq!(union, sorted);
        assert!(
            "0/3".parse::<Shard>().is_err()
                && "4/3".parse::<Shard>().is_err()
                && "2/3".parse::<Shard>().is_ok()
        );
    }

    #[test]
    fn merged_shards_equal_one_unsharded_run_in_both_formats() {
        for ext in ["csv", "jsonl"] {
            let d = tmp(ext);
            let f = files(7);
            let ions = vec!["Li".to_string(), "Na".to_string()];
            let single = d.join(format!("all.{ext}"));
            let _ = std::fs::remove_file(&single);
            run_batch(&shard_jobs(&f, &ions, None), &single, fake, &|| {}).unwrap();
            let mut parts = vec![];
            for k in 1..=3 {
                let p = d.join(format!("part{k}.{ext}"));
                let _ = std::fs::remove_file(&p);
                run_batch(
                    &shard_jobs(&f, &ions, Some(Shard { k, n: 3 })),
                    &p,
                    fake,
                    &|| {},
                )
                .unwrap();
                parts.push(p);
            }
            let merged = merge_tables(&parts).unwrap();
            assert!(merged.dropped.is_empty(), "disjoint shards drop nothing");
            let merged = merged.rows;
            assert_eq!(merged, read_table(&single).unwrap());
            assert_eq!(merged.len(), 14);
            assert_eq!(
                merged.iter().filter(|r| !r.error.is_empty()).count(),
                2,
                "the bad file is an error row per ion"
            );
        }
    }

    #[test]
    fn a_rerun_skips_done_jobs_and_an_interrupted_line_is_redone() {
        let d = tmp("resume");
        let out = d.join("r.csv");
        let _ = std::fs::remove_file(&out);
        let f = files(5);
        let ions = vec!["Li".to_string()];
        let jobs = shard_jobs(&f, &ions, None);
        run_batch(&jobs[..3], &out, fake, &|| {}).unwrap();
        // simulate an interruption in the middle of writing a row
        let mut text = std::fs::read_to_string(&out).unwrap();
        text.push_str("dir/s04.cif,Li,\"half a ro");
        std::fs::write(&out, text).unwrap();
        let (summary, rows) = run_batch(&jobs, &out, fake, &|| {}).unwrap();
        assert_eq!(summary.skipped_done, 3);
        assert_eq!(summary.computed, 2);
        assert_eq!(rows.len(), 5);
        assert_eq!(read_table(&out).unwrap().len(), 5);
    }

    #[test]
    fn csv_quoting_round_trips() {
        let d = tmp("quoting");
        let out = d.join("q.csv");
        let r = fake(Path::new("x/y, z.cif"), "Li");
        std::fs::write(
            &out,
            render_table(std::slice::from_ref(&r), TableFormat::Csv),
        )
        .unwrap();
        assert_eq!(read_table(&out).unwrap(), vec![r]);
    }

    #[test]
    fn the_csv_header_carries_units_and_reads_back_by_name() {
        let header = render_table(&[], TableFormat::Csv);
        for col in [
            "diffusion_298k_m2_s",
            "conductivity_298k_s_cm",
            "capacity_mah_g",
            "barrier_ev",
        ] {
            assert!(header.contains(col), "{col} missing from {header}");
        }
        // a table of an older layout (fewer columns) still reads, by column name
        let d = tmp("old-layout");
        let out = d.join("old.csv");
        std::fs::write(&out, "file,ion,dimension,barrier_1d_ev\na.cif,Li,1,0.40\n").unwrap();
        let rows = read_table(&out).unwrap();
        assert_eq!(rows.len(), 1);
        assert_eq!(rows[0].barrier_1d_ev, Some(0.40));
    }

    #[test]
    fn merge_lists_the_duplicates_it_drops() {
        let d = tmp("dupes");
        let a = d.join("a.csv");
        let b = d.join("b.csv");
        let row = fake(Path::new("dir/s01.cif"), "Li");
        let other = fake(Path::new("dir/s02.cif"), "Li");
        std::fs::write(&a, render_table(&[row.clone(), other], TableFormat::Csv)).unwrap();
        std::fs::write(
            &b,
            render_table(std::slice::from_ref(&row), TableFormat::Csv),
        )
        .unwrap();
        let m = merge_tables(&[a, b]).unwrap();
        assert_eq!(m.rows.len(), 2);
        assert_eq!(
            m.dropped,
            vec![("dir/s01.cif".to_string(), "Li".to_string(), 1)]
        );
        assert_eq!(m.dropped_rows(), 1);
    }
}
