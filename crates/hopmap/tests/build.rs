//! Built frameworks against published structures and hand counts.

use hopmap::build::{BuildOptions, FrameworkSpec, build};

#[test]
fn print_all() {
    let only = std::env::var("ONLY").ok();
    for text in [
        "block:3x3:ribbon:Ti1Nb2",
        "block:3x4:ribbon:Ti,Nb",
        "block:4x4:ribbon:Nb",
        "block:4x5:ribbon:Nb,W",
        "block:3x3:tet:Nb:P",
        "block:3x4:tet:Nb:W",
        "block:4x4:tet:Nb,W:W",
        "block:4x5:tet:Nb,W:W",
        "bronze:hexagonal:W:K0.3",
        "bronze:tetragonal:W:K0.4",
    ] {
        if only.as_deref().is_some_and(|o| o != text) {
            continue;
        }
        let spec = FrameworkSpec::parse(text).unwrap();
        let t = std::time::Instant::now();
        let b = build(
            &spec,
            &BuildOptions {
                refine: std::env::var("NOREF").is_err(),
                ..Default::default()
            },
        );
        match b {
            Ok(b) => {
                let p = b.structure.lattice.parameters();
                let (z, f) = b.structure.formula_and_z();
                println!(
                    "{text}: {f} Z={z} {:?} a={:.3} b={:.3} c={:.3} al={:.2} be={:.2} ga={:.2} GII {:.3} -> {:.3} it {} conv {} floor {:.3} rms {:.3} {:.2}s",
                    b.structure.symmetry.hm_symbol,
                    p.a,
                    p.b,
                    p.c,
                    p.alpha,
                    p.beta,
                    p.gamma,
                    b.refinement.initial_gii_vu,
                    b.refinement.gii_vu,
                    b.refinement.iterations,
                    b.refinement.converged,
                    b.refinement.max_floor_violation_a,
                    b.refinement.rms_shift_a,
                    t.elapsed().as_secs_f64()
                );
            }
            Err(e) => println!("{text}: ERROR {e}"),
        }
    }
}
