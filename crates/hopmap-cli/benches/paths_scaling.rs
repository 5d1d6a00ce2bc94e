//! What a supercell costs against its cell, as the `paths` command a user runs.
//!
//! Run: `cargo bench -p hopmap-cli --bench paths_scaling` (add `-- --rounds N`, default 6).
//!
//! Olivine LiFePO4 from `structures/reference/` is written as two P 1 CIF files: its cell, and
//! its 3x3x3 supercell ([`hopmap::structure::Structure::supercell`], 27 times the atoms and
//! the grid points). Each run is the release `hopmap paths -q --keep-cell --spacing 0.1 FILE`
//! in a fresh process: reading, the model, the grids, the whole analysis and the report, with
//! the process's own start, page faults and exit. Its cost is the CPU seconds of the process
//! (user + system, every thread; `getrusage` of the waited-for children).
//!
//! A round runs the cell 27 times and the supercell once, in turn (the supercell first in
//! every other round), so that both sizes take about the same stretch of time and meet the
//! same disturbances on a shared machine. The ratio of a round is the supercell's CPU seconds
//! over the cell's mean; the bench prints every round, and the median and range of the ratios.
//! A cost linear in the cell's size gives 27; the goal is at most 30.

use std::path::{Path, PathBuf};
use std::process::Command;

const CELLS_PER_ROUND: usize = 27;

/// CPU seconds (user + system) of every child process waited for so far, and the largest
/// resident set of any of them (bytes).
fn children_usage() -> (f64, u64) {
    // SAFETY: getrusage writes one `rusage` into the zeroed struct it is given
    let usage = unsafe {
        let mut u: libc::rusage = std::mem::zeroed();
        assert_eq!(libc::getrusage(libc::RUSAGE_CHILDREN, &mut u), 0);
        u
    };
    let seconds = |t: libc::timeval| t.tv_sec as f64 + t.tv_usec as f64 * 1e-6;
    // ru_maxrss is in KiB on Linux
    (
        seconds(usage.ru_utime) + seconds(usage.ru_stime),
        usage.ru_maxrss as u64 * 1024,
    )
}

/// Runs `hopmap paths` on `file` `times` times in a row; returns the CPU seconds they took.
fn paths(file: &Path, times: usize) -> f64 {
    let (before, _) = children_usage();
    for _ in 0..times {
        let out = Command::new(env!("CARGO_BIN_EXE_hopmap"))
            .args(["paths", "-q", "--keep-cell", "--spacing", "0.1"])
            .arg(file)
            .output()
            .expect("hopmap runs");
        assert!(
            out.status.success(),
            "hopmap paths {}: {}",
            file.display(),
            String::from_utf8_lossy(&out.stderr)
        );
    }
    children_usage().0 - before
}

fn median(v: &[f64]) -> f64 {
    let mut s = v.to_vec();
    s.sort_by(f64::total_cmp);
    let m = s.len() / 2;
    if s.len() % 2 == 1 {
        s[m]
    } else {
        (s[m - 1] + s[m]) / 2.0
    }
}

fn main() {
    let args: Vec<String> = std::env::args().collect();
    let rounds: usize = args
        .iter()
        .position(|a| a == "--rounds")
        .and_then(|i| args.get(i + 1))
        .map(|n| n.parse().expect("--rounds takes a number"))
        .unwrap_or(6)
        .max(1);
    let source = PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .join("../../structures/reference/LiFePO4_olivine.cif");
    let cell = hopmap::read::read_structure(&source, None).unwrap_or_else(|e| panic!("{e}"));
    let big = cell.supercell([3, 3, 3]).expect("a 3x3x3 supercell");
    let dir = tempfile::tempdir().expect("a temporary folder");
    let (cell_file, big_file) = (dir.path().join("cell.cif"), dir.path().join("3x3x3.cif"));
    hopmap_report::write_cif::write_cif_p1(&cell_file, &cell).expect("the cell written");
    hopmap_report::write_cif::write_cif_p1(&big_file, &big).expect("the supercell written");

    println!(
        "`hopmap paths -q --keep-cell --spacing 0.1`, olivine LiFePO4 ({} sites) and its 3x3x3 \
         P 1 supercell ({} sites); CPU s of each process (user + system)",
        cell.sites.len(),
        big.sites.len()
    );
    // one run of each first, so that both files and the binary are in the page cache
    paths(&cell_file, 1);
    paths(&big_file, 1);
    println!(
        "\n  {:>5} {:>20} {:>14} {:>10}",
        "round", "cell, mean of 27, s", "supercell, s", "ratio"
    );
    let mut ratios = Vec::new();
    let mut big_peak = 0;
    for round in 1..=rounds {
        let (cells, supercell) = if round % 2 == 1 {
            let c = paths(&cell_file, CELLS_PER_ROUND);
            (c, paths(&big_file, 1))
        } else {
            let s = paths(&big_file, 1);
            (paths(&cell_file, CELLS_PER_ROUND), s)
        };
        big_peak = big_peak.max(children_usage().1);
        let mean = cells / CELLS_PER_ROUND as f64;
        ratios.push(supercell / mean);
        println!(
            "  {round:>5} {mean:>20.3} {supercell:>14.3} {:>9.1}x",
            supercell / mean
        );
    }
    let (lo, hi) = ratios
        .iter()
        .fold((f64::INFINITY, 0.0f64), |(l, h), &r| (l.min(r), h.max(r)));
    println!(
        "\n  supercell / cell: median {:.1}x over {rounds} rounds (range {lo:.1}-{hi:.1}x); \
         27x is linear in size, the goal is at most 30x",
        median(&ratios)
    );
    println!(
        "  largest resident memory of one run (the supercell's): {:.0} MB",
        big_peak as f64 / 1e6
    );
}
