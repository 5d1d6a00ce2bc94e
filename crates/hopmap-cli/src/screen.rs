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
#[derive(Debug, Clone, PartialEq, Default)]
pub struct ScreenRow {
    pub file: String,
    pub ion: String,
    pub formula: String,
    pub space_group: String,
    pub space_group_number: Option<u16>,
    /// Highest dimensionality reached below the ceiling (0 = no percolating path).
    pub dimension: Option<u8>,
    pub barrier_1d_ev: Option<f64>,
    pub barrier_2d_ev: Option<f64>,
    pub barrier_3d_ev: Option<f64>,
    /// Direction of the lowest channel: `[uvw]` for 1D, plane normal `(hkl)` for 2D.
    pub direction: String,
    pub sites: Option<usize>,
    pub valence_verdict: String,
    pub gii_vu: Option<f64>,
    pub warnings: Vec<String>,
    pub error: String,
}

/// The columns of the CSV output, in order.
pub const COLUMNS: &[&str] = &[
    "file",
    "ion",
    "formula",
    "space_group",
    "space_group_number",
    "dimension",
    "barrier_1d_ev",
    "barrier_2d_ev",
    "barrier_3d_ev",
    "direction",
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
            let first = text.lines().next().unwrap_or("");
            if first.trim_end_matches('\r') != COLUMNS.join(",") {
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

fn csv_field(s: &str) -> String {
    if s.contains([',', '"', '\n', '\r']) {
        format!("\"{}\"", s.replace('"', "\"\""))
    } else {
        s.to_string()
    }
}

fn opt_num(x: Option<f64>, decimals: usize) -> String {
    x.map(|v| format!("{v:.decimals$}")).unwrap_or_default()
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
            opt_num(self.barrier_1d_ev, 3),
            opt_num(self.barrier_2d_ev, 3),
            opt_num(self.barrier_3d_ev, 3),
            self.direction.clone(),
            self.sites.map(|n| n.to_string()).unwrap_or_default(),
            self.valence_verdict.clone(),
            opt_num(self.gii_vu, 3),
            self.warnings.join("; "),
            self.error.clone(),
        ]
    }

    pub fn to_csv_line(&self) -> String {
        let f: Vec<String> = self.csv_fields().iter().map(|s| csv_field(s)).collect();
        f.join(",") + "\n"
    }

    /// The row as one JSON object (units in the key names).
    pub fn to_json(&self) -> serde_json::Value {
        serde_json::json!({
            "file": self.file, "ion": self.ion, "formula": self.formula,
            "space_group": self.space_group, "space_group_number": self.space_group_number,
            "dimension": self.dimension,
            "barrier_1d_ev": self.barrier_1d_ev, "barrier_2d_ev": self.barrier_2d_ev, "barrier_3d_ev": self.barrier_3d_ev,
            "direction": self.direction, "sites": self.sites,
            "valence_verdict": self.valence_verdict, "gii_vu": self.gii_vu,
            "warnings": self.warnings, "error": self.error,
        })
    }

    fn from_fields(f: &[String]) -> Option<ScreenRow> {
        if f.len() != COLUMNS.len() {
            return None;
        }
        let num = |s: &str| s.parse::<f64>().ok();
        Some(ScreenRow {
            file: f[0].clone(),
            ion: f[1].clone(),
            formula: f[2].clone(),
            space_group: f[3].clone(),
            space_group_number: f[4].parse().ok(),
            dimension: f[5].parse().ok(),
            barrier_1d_ev: num(&f[6]),
            barrier_2d_ev: num(&f[7]),
            barrier_3d_ev: num(&f[8]),
            direction: f[9].clone(),
            sites: f[10].parse().ok(),
            valence_verdict: f[11].clone(),
            gii_vu: num(&f[12]),
            warnings: if f[13].is_empty() {
                vec![]
            } else {
                f[13].split("; ").map(String::from).collect()
            },
            error: f[14].clone(),
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
            barrier_1d_ev: f("barrier_1d_ev"),
            barrier_2d_ev: f("barrier_2d_ev"),
            barrier_3d_ev: f("barrier_3d_ev"),
            direction: s("direction"),
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

use hopmap::csv_record::split_csv_record;

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
            // records may contain quoted newlines: join physical lines until quotes balance
            let mut pending = String::new();
            for (n, line) in complete.lines().enumerate() {
                if !pending.is_empty() {
                    pending.push('\n');
                }
                pending.push_str(line);
                match split_csv_record(&pending) {
                    Some(fields) => {
                        if !(n == 0 && fields.first().map(|s| s.as_str()) == Some("file"))
                            && let Some(r) = ScreenRow::from_fields(&fields)
                        {
                            rows.push(r);
                        }
                        pending.clear();
                    }
                    None => continue,
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
        s.push_str(&COLUMNS.join(","));
        s.push('\n');
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

/// Joins shard outputs into one table sorted by (file, ion); a job present in several inputs is
/// kept once (the first non-error row wins).
pub fn merge_tables(inputs: &[PathBuf]) -> Result<Vec<ScreenRow>, String> {
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
    all.sort_by(|a, b| {
        a.key()
            .cmp(&b.key())
            .then(a.error.is_empty().cmp(&b.error.is_empty()).reverse())
    });
    all.dedup_by(|b, a| a.key() == b.key());
    Ok(all)
}

/// A terminal table of the rows, best first: highest dimensionality, then lowest barrier of it.
pub fn sorted_view(rows: &[ScreenRow]) -> String {
    let mut v: Vec<&ScreenRow> = rows.iter().collect();
    let best = |r: &ScreenRow| -> (i32, f64) {
        let d = r.dimension.unwrap_or(0) as i32;
        let b = match d {
            3 => r.barrier_3d_ev,
            2 => r.barrier_2d_ev,
            1 => r.barrier_1d_ev,
            _ => None,
        };
        (-d, b.unwrap_or(f64::INFINITY))
    };
    v.sort_by(|a, b| {
        let (da, ba) = best(a);
        let (db, bb) = best(b);
        (a.error.is_empty().cmp(&b.error.is_empty()).reverse())
            .then(da.cmp(&db))
            .then(ba.total_cmp(&bb))
            .then(a.key().cmp(&b.key()))
    });
    let mut s = format!(
        "{:<36} {:<4} {:<16} {:<12} {:>3} {:>10} {:>10} {:>10} {:<9} {:>5} {:<10}\n",
        "file",
        "ion",
        "formula",
        "space group",
        "dim",
        "Ea1D (eV)",
        "Ea2D (eV)",
        "Ea3D (eV)",
        "direction",
        "sites",
        "valence"
    );
    for r in v {
        let name = Path::new(&r.file)
            .file_name()
            .and_then(|n| n.to_str())
            .unwrap_or(&r.file)
            .to_string();
        if !r.error.is_empty() {
            s.push_str(&format!(
                "{:<36} {:<4} error: {}\n",
                truncate(&name, 36),
                r.ion,
                r.error
            ));
            continue;
        }
        let f = |x: Option<f64>| x.map(|v| format!("{v:.3}")).unwrap_or_else(|| "-".into());
        s.push_str(&format!(
            "{:<36} {:<4} {:<16} {:<12} {:>3} {:>10} {:>10} {:>10} {:<9} {:>5} {:<10}\n",
            truncate(&name, 36),
            r.ion,
            truncate(&r.formula, 16),
            truncate(&r.space_group, 12),
            r.dimension
                .map(|d| d.to_string())
                .unwrap_or_else(|| "-".into()),
            f(r.barrier_1d_ev),
            f(r.barrier_2d_ev),
            f(r.barrier_3d_ev),
            r.direction,
            r.sites.map(|n| n.to_string()).unwrap_or_else(|| "-".into()),
            r.valence_verdict
        ));
    }
    s
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
            barrier_1d_ev: Some(name.len() as f64 / 100.0),
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
        let r = fake(Path::new("x/y, z.cif"), "Li");
        let fields = split_csv_record(r.to_csv_line().trim_end()).unwrap();
        assert_eq!(ScreenRow::from_fields(&fields).unwrap(), r);
    }
}
