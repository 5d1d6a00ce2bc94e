//! Batch screening: many structures, one row per structure and mobile ion.
//!
//! The batch core knows nothing about how a row is computed: it takes a function from a job
//! (file, ion) to a [`ScreenRow`] and takes care of the rest: the deterministic job list and its
//! shards, parallel execution, appending each finished row to the output at once (an
//! interrupted run loses nothing), resuming (jobs already in the output are skipped), and
//! merging shard outputs. A bad file becomes an error row; the batch goes on.

use hopmap_report::output::write_atomic;
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
    pub fn from_path(p: &Path) -> TableFormat {
        match p
            .extension()
            .and_then(|e| e.to_str())
            .map(|e| e.to_ascii_lowercase())
            .as_deref()
        {
            Some("jsonl") | Some("ndjson") => TableFormat::JsonLines,
            _ => TableFormat::Csv,
        }
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
    fn walk(dir: &Path, out: &mut BTreeSet<PathBuf>) -> std::io::Result<()> {
        let mut entries: Vec<_> = std::fs::read_dir(dir)?
            .filter_map(|e| e.ok())
            .map(|e| e.path())
            .collect();
        entries.sort();
        for p in entries {
            if p.is_dir() {
                walk(&p, out)?;
            } else if is_structure(&p) {
                out.insert(p);
            }
        }
        Ok(())
    }
    let mut out = BTreeSet::new();
    for p in inputs {
        if p.is_dir() {
            walk(p, &mut out)?;
        } else {
            out.insert(p.clone());
        }
    }
    Ok(out.into_iter().collect())
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
    let mut existing = if out.exists() {
        read_table(out)?
    } else {
        Vec::new()
    };
    // Drop an interrupted last line before appending: rewrite the complete rows.
    if out.exists() {
        write_atomic(out, render_table(&existing, format).as_bytes())?;
    } else {
        write_atomic(out, render_table(&[], format).as_bytes())?;
    }
    let done: BTreeSet<(String, String)> = existing.iter().map(|r| r.key()).collect();
    let todo: Vec<&(PathBuf, String)> = jobs
        .iter()
        .filter(|(f, ion)| !done.contains(&(f.display().to_string(), ion.clone())))
        .collect();
    let summary = Mutex::new(BatchSummary {
        jobs: jobs.len(),
        skipped_done: jobs.len() - todo.len(),
        ..Default::default()
    });
    let writer = Mutex::new(OpenOptions::new().append(true).open(out)?);
    let new_rows = Mutex::new(Vec::new());
    let io_error: Mutex<Option<std::io::Error>> = Mutex::new(None);
    todo.par_iter().for_each(|(file, ion)| {
        let row = analyse(file, ion);
        let line = match format {
            TableFormat::Csv => row.to_csv_line(),
            TableFormat::JsonLines => row.to_json().to_string() + "\n",
        };
        {
            let mut w = writer.lock().unwrap();
            if let Err(e) = w.write_all(line.as_bytes()).and_then(|_| w.flush()) {
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
pub fn merge_tables(inputs: &[PathBuf]) -> std::io::Result<Vec<ScreenRow>> {
    let mut all: Vec<ScreenRow> = Vec::new();
    for p in inputs {
        all.extend(read_table(p)?);
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
