//! Calibrating the energy scale of the model from Rust: read a reference list, fit d0_ev and
//! screening_factor on a small knob grid, print the table and the parameter file.
//!
//! Run: `cargo run --release --example calibrate_references [-- LIST.csv]`
//! (default list: the bundled structures/reference/references.csv, on a coarse 0.2 A grid so that
//! it finishes in seconds; use the default spacing for a fit you mean to keep).

use hopmap::analysis::AnalysisOptions;
use hopmap::calibrate::{self, CalibrationGrid};
use hopmap::element::Element;
use std::path::PathBuf;

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let list = std::env::args()
        .nth(1)
        .map(PathBuf::from)
        .unwrap_or_else(|| {
            PathBuf::from(concat!(env!("CARGO_MANIFEST_DIR"), "/../.."))
                .join("structures/reference/references.csv")
        });
    let li = Element::from_symbol("Li").ok_or("no Li")?;
    let references = calibrate::read_references(&list, Some(li))?;

    let mut base = AnalysisOptions::new(li);
    base.spacing_a = Some(0.2);
    let grid = CalibrationGrid {
        d0_ev: vec![0.15, 0.2, 0.25, 0.3, 0.35, 0.4, 0.5],
        screening_factor: vec![0.6, 0.75, 0.9],
    };
    let fit = calibrate::calibrate(&references, &base, grid)?;
    print!("{}", calibrate::table(&fit));
    println!(
        "\n{}",
        calibrate::to_toml(&fit, &list.display().to_string(), &calibrate::today_utc())
    );
    Ok(())
}
