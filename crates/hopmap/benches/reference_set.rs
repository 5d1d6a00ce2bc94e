//! Times the whole main job (model, grids, percolation, site network, profiles, estimates) on
//! every structure of structures/reference/, at the default grid spacing, and prints the figures
//! per stage. Run: `cargo bench --bench reference_set`.

use hopmap::analysis::{self, AnalysisOptions};
use hopmap::element::Element;
use std::time::Instant;

fn main() {
    let dir = concat!(
        concat!(env!("CARGO_MANIFEST_DIR"), "/../.."),
        "/structures/reference"
    );
    let mut files: Vec<_> = std::fs::read_dir(dir)
        .unwrap()
        .filter_map(|e| e.ok())
        .map(|e| e.path())
        .filter(|p| p.extension().is_some_and(|x| x == "cif"))
        .collect();
    files.sort();
    println!("threads: {}", rayon::current_num_threads());
    println!(
        "{:<28} {:>4} {:>10} {:>10} {:>9} {:>9} {:>9} {:>9} {:>9}",
        "structure", "ion", "points", "V (A^3)", "grid s", "perc s", "net s", "prof s", "total s"
    );
    let mut total = 0.0;
    for f in files {
        let name = f.file_stem().unwrap().to_string_lossy().to_string();
        let ion = if name.starts_with("Na") { "Na" } else { "Li" };
        let s = match hopmap::read::read_structure(&f, None) {
            Ok(s) => s,
            Err(e) => {
                println!("{name}: {e}");
                continue;
            }
        };
        let opts = AnalysisOptions::new(Element::from_symbol(ion).unwrap());
        let t = Instant::now();
        let a = match analysis::analyse(&s, &opts) {
            Ok(a) => a,
            Err(e) => {
                println!("{name}: {e}");
                continue;
            }
        };
        let secs = t.elapsed().as_secs_f64();
        total += secs;
        let stage = |k: &str| {
            a.timings
                .iter()
                .find(|(n, _)| *n == k)
                .map(|(_, v)| *v)
                .unwrap_or(0.0)
        };
        println!(
            "{:<28} {:>4} {:>10} {:>10.1} {:>9.3} {:>9.3} {:>9.3} {:>9.3} {:>9.3}",
            name,
            ion,
            a.landscape.energy.len(),
            s.volume(),
            stage("model and grids"),
            stage("percolation"),
            stage("site network"),
            stage("profiles"),
            secs
        );
    }
    println!("total {total:.2} s");
}
