//! The grid kernel against the peers in `../shared/bench/` and against the machine's arithmetic
//! limit, side by side in one run, as ratios.
//!
//! Run: `cargo bench --bench peers`. The peers need a Python with numpy, scipy, numba and
//! pymatgen: `HOPMAP_BENCH_PYTHON=/path/to/python` (default `target/bench-venv/bin/python` when
//! it exists); the shared folder is `HOPMAP_SHARED` (default `../shared` beside the workspace).
//! Without them the bench prints hopmap's own figures and the limit, and says what it skipped.
//!
//! The field is the one the peers compute: the valence mismatch |sum_O occ exp((R0 - R)/b) - V|
//! of Li+ (R0 = 1.1745 A, b = 0.514 A, V = 1, O2- anions only, 6 A cutoff) on the grid
//! ceil(|a|/h) x ceil(|b|/h) x ceil(|c|/h), h = 0.1 A, for olivine LiFePO4
//! (`structures/reference/LiFePO4_olivine.cif`). hopmap evaluates it with
//! `landscape::compute_mismatch`, the kernel of `paths` without the energy terms.
//!
//! Every timing is CPU seconds (all threads; one thread for the per-core comparison), the
//! smallest of 5 repeats; the peers print their own (numba: process CPU time, compilation
//! excluded; NumPy: seconds of its single-threaded compute). The arithmetic limit counts the
//! pairs within the cutoff times the floating-point operations the kernel spends on each
//! ([`FLOPS_PER_PAIR`]: an FMA counts 2, any other operation 1), at the FMA peak measured here
//! on one core (16-lane FMAs on 12 independent registers). The bench also times the energy
//! field (both landscapes, the model `paths` uses) and prints its cost per pair.

#[path = "support/cpu.rs"]
mod cpu;

use cpu::measure;
use hopmap::analysis::with_oxidation_states;
use hopmap::bv::{ModelKnobs, ParameterTable, build_model};
use hopmap::element::Element;
use hopmap::landscape::{FrameworkKind, Isa, Progress, compute_mismatch, compute_with_isa};
use hopmap::read::read_structure;
use std::path::{Path, PathBuf};
use std::process::Command;

/// Floating-point operations per anion pair in the mismatch-only kernel, as written in
/// `landscape/kernel.rs`, for a pair of the core of a block's list (every lane inside the
/// cutoff, no test): distance 8 (3 sub, 1 mul, 2 FMA), square root 1, the exponent's argument 2
/// (one FMA), `simd::exp_in_range` 19 (reduction: 3 FMAs and a sub, 7; degree-5 polynomial, 5
/// FMAs, 10; scaling by 2^n, a shift and an integer add into the exponent bits, 2), the sum 2
/// (one FMA).
/// An FMA counts 2, every other operation 1. The extra work of a shell pair (cutoff test, clamp,
/// two selects, the count: 5) and every lane computed outside the cutoff are counted as waste,
/// not as work, so the limit is what this arithmetic would cost with nothing wasted.
const FLOPS_PER_PAIR: f64 = 32.0;

/// FMA throughput of one core (GFLOP/s, an FMA = 2 flops) on the widest vectors the kernel
/// uses: 12 independent chains of 16 (or 8) lanes, so that latency does not limit it.
fn fma_peak_gflops(isa: Isa) -> f64 {
    fn chains<const N: usize>(iters: usize) -> f32 {
        let mut acc = [[1.0f32; N]; 12];
        for _ in 0..iters {
            for a in acc.iter_mut() {
                for x in a.iter_mut() {
                    *x = *x * 0.999_999 + 1e-7;
                }
            }
        }
        acc.iter().flatten().sum()
    }
    // Explicit FMA instructions on 12 independent registers.
    #[cfg(target_arch = "x86_64")]
    #[target_feature(enable = "avx512f,fma")]
    fn wide16(iters: usize) -> f32 {
        use std::arch::x86_64::*;
        let mut acc = [_mm512_set1_ps(1.0); 12];
        let (m, c) = (_mm512_set1_ps(0.999_999), _mm512_set1_ps(1e-7));
        for _ in 0..iters {
            for a in acc.iter_mut() {
                *a = _mm512_fmadd_ps(*a, m, c);
            }
        }
        let mut out = [0.0f32; 16];
        let mut sum = _mm512_set1_ps(0.0);
        for a in acc {
            sum = _mm512_add_ps(sum, a);
        }
        // SAFETY: `out` holds 16 f32, the width of the store.
        unsafe { _mm512_storeu_ps(out.as_mut_ptr(), sum) };
        out.iter().sum()
    }
    #[cfg(target_arch = "x86_64")]
    #[target_feature(enable = "avx2,fma")]
    fn wide8(iters: usize) -> f32 {
        use std::arch::x86_64::*;
        let mut acc = [_mm256_set1_ps(1.0); 12];
        let (m, c) = (_mm256_set1_ps(0.999_999), _mm256_set1_ps(1e-7));
        for _ in 0..iters {
            for a in acc.iter_mut() {
                *a = _mm256_fmadd_ps(*a, m, c);
            }
        }
        let mut out = [0.0f32; 8];
        let mut sum = _mm256_set1_ps(0.0);
        for a in acc {
            sum = _mm256_add_ps(sum, a);
        }
        // SAFETY: `out` holds 8 f32, the width of the store.
        unsafe { _mm256_storeu_ps(out.as_mut_ptr(), sum) };
        out.iter().sum()
    }
    let iters = 50_000_000;
    let (lanes, run): (usize, Box<dyn Fn() -> f32>) = match isa {
        // SAFETY: Isa::detect chose these only after the processor reported the features.
        #[cfg(target_arch = "x86_64")]
        Isa::Avx512 => (16, Box::new(move || unsafe { wide16(iters) })),
        #[cfg(target_arch = "x86_64")]
        Isa::Avx2Fma => (8, Box::new(move || unsafe { wide8(iters) })),
        _ => (8, Box::new(move || chains::<8>(iters))),
    };
    let mut best = f64::INFINITY;
    for _ in 0..3 {
        let (x, wall, cpu) = measure(&run);
        std::hint::black_box(x);
        best = best.min(if cpu.is_finite() { cpu } else { wall });
    }
    (iters * 12 * lanes * 2) as f64 / best * 1e-9
}

fn workspace() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("../..")
}

/// Runs a peer script, returns its stdout (None, with a note, when it fails).
fn peer(python: &Path, script: &Path, args: &[String]) -> Option<String> {
    let out = Command::new(python)
        .arg(script)
        .args(args)
        .env("OMP_NUM_THREADS", "1")
        .env("OPENBLAS_NUM_THREADS", "1")
        .env("NUMBA_NUM_THREADS", "1")
        .output();
    match out {
        Ok(o) if o.status.success() => Some(String::from_utf8_lossy(&o.stdout).into_owned()),
        Ok(o) => {
            println!(
                "  {} failed: {}",
                script.display(),
                String::from_utf8_lossy(&o.stderr)
                    .lines()
                    .last()
                    .unwrap_or("")
            );
            None
        }
        Err(e) => {
            println!("  {} could not start: {e}", script.display());
            None
        }
    }
}

/// The number after `key` in a peer's line of output.
fn field(text: &str, key: &str) -> Option<f64> {
    let mut words = text.split_whitespace();
    while let Some(w) = words.next() {
        if w == key {
            return words.next()?.parse().ok();
        }
    }
    None
}

/// Values of a little-endian `.npy` file of float32 (C order).
fn read_npy_f32(path: &Path) -> Option<Vec<f32>> {
    let bytes = std::fs::read(path).ok()?;
    if bytes.len() < 10 || &bytes[..6] != b"\x93NUMPY" {
        return None;
    }
    let (hlen, start) = if bytes[6] == 1 {
        (u16::from_le_bytes([bytes[8], bytes[9]]) as usize, 10)
    } else {
        (
            u32::from_le_bytes([bytes[8], bytes[9], bytes[10], bytes[11]]) as usize,
            12,
        )
    };
    let header = String::from_utf8_lossy(&bytes[start..start + hlen]);
    if !header.contains("<f4") || header.contains("'fortran_order': True") {
        return None;
    }
    Some(
        bytes[start + hlen..]
            .chunks_exact(4)
            .map(|c| f32::from_le_bytes([c[0], c[1], c[2], c[3]]))
            .collect(),
    )
}

fn main() {
    let cif = workspace().join("structures/reference/LiFePO4_olivine.cif");
    let spacing = 0.1;
    let li = Element::from_symbol("Li").unwrap();
    let s = read_structure(&cif, None).expect("olivine reads");
    let table = ParameterTable::builtin();
    let (s, _) = with_oxidation_states(&s, &table).expect("oxidation states");
    let (mut model, _) =
        build_model(&s, li, &table, &ModelKnobs::default(), &[]).expect("model builds");
    let full_model = model.clone();
    // the peers' field: O2- only, their parameters, V = 1
    let o = Element::from_symbol("O").unwrap();
    model.atoms.retain(|a| match a.kind {
        FrameworkKind::Anion(i) => model.anions[i].species.element == o,
        FrameworkKind::Cation(_) => false,
    });
    for k in &mut model.anions {
        k.r0 = 1.1745;
        k.b = 0.514;
        k.rmin = k.r0;
        k.cutoff = 6.0;
    }
    model.probe.valence = 1.0;
    model.mismatch_cap = f64::from(f32::MAX);
    let p = s.lattice.parameters();
    let dims = [p.a, p.b, p.c].map(|x| ((x / spacing).ceil() as usize).max(1));
    let points = dims[0] * dims[1] * dims[2];
    let isa = Isa::detect();
    let threads = rayon::current_num_threads();

    println!("Valence-mismatch field of Li+ in olivine LiFePO4, grid {dims:?} ({points} points)");
    println!("hopmap kernel: {} ({} lanes)", isa.name(), isa.lanes());
    let one = rayon::ThreadPoolBuilder::new()
        .num_threads(1)
        .build()
        .unwrap();
    // The one-thread runs first, then the runs on every thread, with a pause before each so
    // that the idle workers of the other pool have gone to sleep: the CPU counters sum every
    // thread of the process, and a worker still spinning would count against the run.
    let pause = || std::thread::sleep(std::time::Duration::from_millis(50));
    let mut best1 = f64::INFINITY;
    let mut best_all = f64::INFINITY;
    let mut grid = None;
    for _ in 0..5 {
        pause();
        let ((g, stats), _, cpu) =
            measure(|| one.install(|| compute_mismatch(&model, dims, &Progress::Silent).unwrap()));
        best1 = best1.min(cpu);
        grid = Some((g, stats));
    }
    for _ in 0..5 {
        pause();
        let (_, wall_all, _) =
            measure(|| compute_mismatch(&model, dims, &Progress::Silent).unwrap());
        best_all = best_all.min(wall_all);
    }
    let (grid, stats) = grid.unwrap();
    let pairs = stats.neighbour_evaluations as f64;
    let peak = fma_peak_gflops(isa);
    let limit = pairs * FLOPS_PER_PAIR / (peak * 1e9);
    println!(
        "  pairs within the cutoff: {:.1} per point; {FLOPS_PER_PAIR} flops per pair",
        pairs / points as f64
    );
    println!("  FMA peak measured on one core: {peak:.1} GFLOP/s");
    println!("  {:<34} {:>12} {:>14}", "", "core-s", "x hopmap (1 core)");
    println!(
        "  {:<34} {:>12.4} {:>14.2}",
        "arithmetic limit",
        limit,
        limit / best1
    );
    println!("  {:<34} {:>12.4} {:>14.2}", "hopmap, 1 thread", best1, 1.0);
    println!(
        "  {:<34} {:>12.4} {:>14}",
        format!("hopmap, {threads} threads (wall s)"),
        best_all,
        "-"
    );
    println!(
        "  hopmap takes {:.1}x the time of the arithmetic limit",
        best1 / limit
    );

    // The energy field as well (what `paths` computes): every anion with the builtin
    // parameters and the screened Coulomb repulsion of the cations, on one thread.
    let mut best_both = f64::INFINITY;
    let mut pairs_both = 0.0;
    for _ in 0..5 {
        pause();
        let (l, _, cpu) = measure(|| {
            one.install(|| compute_with_isa(&full_model, dims, &Progress::Silent, isa).unwrap())
        });
        best_both = best_both.min(cpu);
        pairs_both = l.stats.neighbour_evaluations as f64;
    }
    println!(
        "  both fields (bond valence, Morse and screened Coulomb, the model of `paths`): \
         {:.1} pairs per point, {best_both:.4} core-s on 1 thread ({:.2} ns per pair)",
        pairs_both / points as f64,
        best_both / pairs_both * 1e9
    );

    let python = std::env::var_os("HOPMAP_BENCH_PYTHON")
        .map(PathBuf::from)
        .or_else(|| {
            let p = workspace().join("target/bench-venv/bin/python");
            p.exists().then_some(p)
        });
    let shared = std::env::var_os("HOPMAP_SHARED")
        .map(PathBuf::from)
        .unwrap_or_else(|| workspace().join("../shared"));
    let bench = shared.join("bench");
    let (Some(python), true) = (python, bench.join("peer_numba_celllist.py").exists()) else {
        println!(
            "  peers skipped: set HOPMAP_BENCH_PYTHON (numpy, scipy, numba, pymatgen) and have {}",
            bench.display()
        );
        return;
    };
    let tmp = std::env::temp_dir().join(format!("hopmap-peers-{}", std::process::id()));
    std::fs::create_dir_all(&tmp).expect("temporary folder");
    let cif_arg = cif.display().to_string();
    let sp = format!("{spacing}");
    let npy_numba = tmp.join("numba.npy");
    let npy_numpy = tmp.join("numpy.npy");
    let mut rows: Vec<(String, f64, Option<PathBuf>)> = Vec::new();
    if let Some(out) = peer(
        &python,
        &bench.join("peer_numba_celllist.py"),
        &[
            cif_arg.clone(),
            sp.clone(),
            "1".into(),
            npy_numba.display().to_string(),
            "Li".into(),
            "0.25".into(),
            "5".into(),
        ],
    ) && let Some(cpu) = field(&out, "cpu_seconds")
    {
        rows.push(("numba cell list, 1 thread".into(), cpu, Some(npy_numba)));
    }
    if let Some(out) = peer(
        &python,
        &bench.join("peer_numpy.py"),
        &[cif_arg, sp, npy_numpy.display().to_string()],
    ) && let Some(secs) = field(&out, "seconds")
    {
        rows.push((
            "NumPy (1 thread, its seconds)".into(),
            secs,
            Some(npy_numpy),
        ));
    }
    for (name, secs, npy) in &rows {
        let agree = npy
            .as_ref()
            .and_then(|p| read_npy_f32(p))
            .filter(|v| v.len() == grid.values.len())
            .map(|v| {
                v.iter()
                    .zip(&grid.values)
                    .map(|(a, b)| (a - b).abs() / a.abs().max(1.0))
                    .fold(0.0f32, f32::max)
            });
        let agree = match agree {
            Some(d) => format!("largest difference {d:.1e} (relative, or v.u. below 1)"),
            None => "values not compared".into(),
        };
        println!(
            "  {:<34} {:>12.4} {:>14.2}   {agree}",
            name,
            secs,
            secs / best1
        );
    }
    let _ = std::fs::remove_dir_all(&tmp);
}
