//! Profile lengths are the length of the path the ion travels, not of the grid's staircase.

use hopmap::{AnalysisOptions, analyse_file};

/// Olivine LiFePO4 (Streltsov et al., Acta Cryst. B49 (1993) 147): Li runs along b, one repeat
/// b = 6.01 A holds two Li-Li hops of 3.0 A. The path cannot be shorter than the straight
/// repeat (exact), and the curved path of the ion between the M1 sites bows out by a few tenths
/// of an angstrom (the curved trajectory of Islam, Driscoll, Fisher & Slater, Chem. Mater. 17
/// (2005) 5085): well under 1.25 times the repeat. The voxel staircase measured 11.1 A.
#[test]
fn the_olivine_channel_profile_measures_the_smoothed_path() {
    let path = concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/../../structures/reference/LiFePO4_olivine.cif"
    );
    let opts = AnalysisOptions::builder("Li").build().unwrap();
    let a = analyse_file(path.as_ref(), &opts).unwrap();
    let p = a
        .profiles
        .iter()
        .find(|p| p.dimension == 1)
        .expect("a 1D profile along b");
    assert_eq!(p.translation.map(|t| t.abs()), [0, 1, 0]);
    let repeat = a.structure.lattice.vector(1).norm();
    assert!(
        p.length >= repeat - 1e-6,
        "{} A for a {} A repeat",
        p.length,
        repeat
    );
    assert!(
        p.length < 1.25 * repeat,
        "{} A for a {} A repeat",
        p.length,
        repeat
    );
    // distances along the profile grow from 0 to the length
    assert_eq!(p.points.first().unwrap().distance, 0.0);
    assert!((p.points.last().unwrap().distance - p.length).abs() < 1e-9);
    assert!(p.points.windows(2).all(|w| w[1].distance >= w[0].distance));
}
