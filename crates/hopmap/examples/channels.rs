//! The library in a few lines: read a CIF, compute the landscape of a mobile ion, get its
//! channels, sites and hops.
//!
//! Run: `cargo run --release --example channels -- structures/reference/LiFePO4_olivine.cif Li`

use hopmap::analysis::{self, AnalysisOptions};
use hopmap::element::Element;
use hopmap::percolation::Span;
use std::path::PathBuf;

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let mut args = std::env::args().skip(1);
    let file = PathBuf::from(
        args.next()
            .unwrap_or_else(|| "structures/reference/LiFePO4_olivine.cif".into()),
    );
    let ion = Element::from_symbol(&args.next().unwrap_or_else(|| "Li".into()))
        .ok_or("unknown element")?;

    // file -> structure (CIF, POSCAR or extended XYZ)
    let structure = hopmap::read::read_structure(&file, None)?;
    // structure -> model -> grids -> percolation -> site network -> estimates
    let result = analysis::analyse(&structure, &AnalysisOptions::new(ion))?;

    println!("{}", analysis::headline(&result));
    for t in result.percolation.thresholds.iter().flatten() {
        let direction = match &t.channel.span {
            Span::Line { direction, .. } => format!("along {direction:?}"),
            Span::Plane { normal, .. } => format!("plane normal {normal:?}"),
            _ => "3D".into(),
        };
        println!(
            "  {}D: threshold {:.3} eV, barrier {:.3} eV, {direction}",
            t.dimension, t.energy, t.barrier
        );
    }
    if let Some(net) = &result.network {
        println!(
            "  {} sites in {} orbits, {} hops",
            net.sites.len(),
            net.orbits.len(),
            net.hops.len()
        );
    }
    // the raw grid is plain data: values in eV, c fastest
    let (lo, hi) = result.landscape.energy.min_max();
    println!(
        "  site energy from {lo:.3} to {hi:.3} eV on {:?} points",
        result.landscape.energy.dims
    );
    Ok(())
}
