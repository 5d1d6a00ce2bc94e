//! Reading speed of the CIF reader: the whole shared corpus (parse, then build every structure
//! in the full cell), and a generated 10,000-atom P1 file. Files are loaded into memory first,
//! so the figures are parse and expansion time, not disk time.
//!
//! cargo bench --bench read_files

use hopmap::cif;
use hopmap::read::cif::{blocks_with_atoms, structure_from_block};
use std::path::Path;
use std::time::{Duration, Instant};

const REPEATS: usize = 7;

/// Best and median wall time of `REPEATS` runs of `f`.
fn time<F: FnMut() -> usize>(mut f: F) -> (Duration, Duration, usize) {
    let mut times = Vec::with_capacity(REPEATS);
    let mut out = 0;
    for _ in 0..REPEATS {
        let t = Instant::now();
        out = std::hint::black_box(f());
        times.push(t.elapsed());
    }
    times.sort();
    (times[0], times[REPEATS / 2], out)
}

fn ms(d: Duration) -> f64 {
    d.as_secs_f64() * 1e3
}

fn read_all(files: &[(String, Vec<u8>)]) -> usize {
    let mut sites = 0;
    for (name, bytes) in files {
        if let Ok(doc) = cif::parse(bytes) {
            for b in blocks_with_atoms(&doc) {
                if let Ok(s) = structure_from_block(b, name) {
                    sites += s.sites.len();
                }
            }
        }
    }
    sites
}

/// A P1 cell of 50 A with `n` atoms on a jittered grid (about 2.3 A apart, so no close-contact
/// warnings), written the way refinement programs write CIFs.
fn p1_cif(n: usize) -> String {
    let per_axis = (n as f64).cbrt().ceil() as usize;
    let mut s = String::from(
        "data_p1_generated\n_cell_length_a 50.000(1)\n_cell_length_b 50.000(1)\n\
         _cell_length_c 50.000(1)\n_cell_angle_alpha 90\n_cell_angle_beta 90\n\
         _cell_angle_gamma 90\n_space_group_name_H-M_alt 'P 1'\nloop_\n\
         _space_group_symop_operation_xyz\n'x, y, z'\nloop_\n_atom_site_label\n\
         _atom_site_type_symbol\n_atom_site_fract_x\n_atom_site_fract_y\n_atom_site_fract_z\n\
         _atom_site_occupancy\n_atom_site_U_iso_or_equiv\n",
    );
    let mut seed: u64 = 0x9E37_79B9_7F4A_7C15;
    let mut jitter = || {
        seed = seed
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        ((seed >> 33) as f64 / (1u64 << 31) as f64 - 0.5) * 0.004
    };
    for i in 0..n {
        let (a, b, c) = (
            i % per_axis,
            (i / per_axis) % per_axis,
            i / (per_axis * per_axis),
        );
        let f = |k: usize, j: f64| (k as f64 + 0.5) / per_axis as f64 + j;
        let (el, ox) = if i % 2 == 0 {
            ("Li", "1+")
        } else {
            ("F", "1-")
        };
        s.push_str(&format!(
            "{el}{} {el}{ox} {:.5}(3) {:.5}(3) {:.5}(3) 1 0.0123(4)\n",
            i + 1,
            f(a, jitter()),
            f(b, jitter()),
            f(c, jitter())
        ));
    }
    s
}

fn main() {
    let root = Path::new(concat!(
        concat!(env!("CARGO_MANIFEST_DIR"), "/../.."),
        "/../shared/cif-corpus"
    ));
    if root.is_dir() {
        let mut files = Vec::new();
        for folder in ["syntax", "inorganic"] {
            let mut paths: Vec<_> = std::fs::read_dir(root.join(folder))
                .expect("corpus folder")
                .filter_map(|e| e.ok().map(|e| e.path()))
                .collect();
            paths.sort();
            for p in paths {
                let bytes = std::fs::read(&p).expect("corpus file");
                files.push((p.display().to_string(), bytes));
            }
        }
        let mb = files.iter().map(|(_, b)| b.len()).sum::<usize>() as f64 / 1e6;
        let (best, median, sites) = time(|| read_all(&files));
        println!(
            "corpus: {} files, {mb:.1} MB, parse + full-cell structures ({sites} sites): \
             best {:.1} ms, median {:.1} ms",
            files.len(),
            ms(best),
            ms(median)
        );
        let (best, median, _) =
            time(|| files.iter().filter(|(_, b)| cif::parse(b).is_ok()).count());
        println!(
            "corpus: parse only: best {:.1} ms, median {:.1} ms",
            ms(best),
            ms(median)
        );
    } else {
        println!("note: ../shared/cif-corpus is missing; corpus timing skipped");
    }

    let text = p1_cif(10_000);
    let (best, median, _) = time(|| {
        cif::parse(text.as_bytes())
            .expect("generated CIF")
            .blocks
            .len()
    });
    println!(
        "P1, 10000 atoms ({:.2} MB): parse: best {:.2} ms, median {:.2} ms",
        text.len() as f64 / 1e6,
        ms(best),
        ms(median)
    );
    let (best, median, n) = time(|| {
        let doc = cif::parse(text.as_bytes()).expect("generated CIF");
        let s = structure_from_block(&doc.blocks[0], "p1.cif").expect("structure");
        assert!(
            s.warnings.is_empty(),
            "{:?}",
            &s.warnings[..s.warnings.len().min(3)]
        );
        s.sites.len()
    });
    println!(
        "P1, 10000 atoms: parse + structure ({n} sites): best {:.2} ms, median {:.2} ms",
        ms(best),
        ms(median)
    );
}
