//! Transport as the host fills (kinetic Monte Carlo) and what a blocked channel costs, checked
//! against exact results and published values. Every statistical check uses a fixed seed and a
//! tolerance set from the standard error the runs themselves measure.

use hopmap::analysis::{self, AnalysisOptions};
use hopmap::blocking;
use hopmap::element::Element;
use hopmap::kmc::{self, CubicLattice, HopNetwork, KmcOptions, NetHop, NetSite, RunLength};
use hopmap::lattice::{Frac, Lattice};
use hopmap::transport;
use rand_xoshiro::Xoshiro256PlusPlus;
use rand_xoshiro::rand_core::SeedableRng;
use std::path::Path;

/// Independent walkers, no repulsion, no exclusion: the setting of a dilute carrier.
fn bare(runs: usize) -> KmcOptions {
    KmcOptions {
        exclusion_a: 0.0,
        repulsion: None,
        runs,
        seed: 7,
        warmup_hops_per_ion: 0.0,
        ..KmcOptions::default()
    }
}

/// Tracer correlation factors of the vacancy mechanism: one vacancy among the sites of a cubic
/// lattice. Published values: simple cubic 0.6531, bcc 0.7272, fcc 0.7815 (K. Compaan and
/// Y. Haven, Trans. Faraday Soc. 52 (1956) 786; also the tables of standard diffusion texts).
#[test]
fn vacancy_correlation_factors_match_compaan_and_haven() {
    // supercells of 512, 432 and 500 sites
    for (kind, published, box_a) in [
        (CubicLattice::Simple, 0.6531, 24.0),
        (CubicLattice::BodyCentred, 0.7272, 18.0),
        (CubicLattice::FaceCentred, 0.7815, 15.0),
    ] {
        let net = HopNetwork::cubic(kind, 3.0, 0.3);
        let opts = KmcOptions {
            length: RunLength::HopsPerIon(300.0),
            min_supercell_a: box_a,
            ..bare(8)
        };
        let sites_per_cell = net.sites.len() as f64;
        // one vacancy: the supercell's sites minus one
        let probe = kmc::run(&net, 1, &opts, 1).unwrap();
        let cells = (probe.repeats[0] * probe.repeats[1] * probe.repeats[2]) as f64;
        let x = sites_per_cell - 1.0 / cells;
        let point = kmc::fill_point(&net, x, &opts).unwrap();
        assert_eq!(point.runs[0].ions, probe.sites - 1);
        let f_msd = point.correlation_factor;
        let f = kmc::Estimate::of(
            &point
                .runs
                .iter()
                .filter_map(|r| r.correlation_factor_from_hops())
                .collect::<Vec<_>>(),
        );
        println!(
            "{kind:?}: f = {:.4} +/- {:.4} from the hop sequence, {:.4} +/- {:.4} from the displacements (published {published}), {} sites",
            f.mean, f.stderr, f_msd.mean, f_msd.stderr, probe.sites
        );
        assert!((f_msd.mean - published).abs() < 4.0 * f_msd.stderr + 0.005);
        // statistical error of the runs, plus 0.005 for the finite box and run length (the
        // tracer's displacement has an O(1) offset over ~300 hops, and a vacancy in a periodic
        // box of ~500 sites revisits the tracer slightly more often than in an infinite crystal)
        let tol = 4.0 * f.stderr + 0.005;
        assert!(
            (f.mean - published).abs() < tol,
            "{kind:?}: f = {} +/- {}, published {published}",
            f.mean,
            f.stderr
        );
    }
}

/// Mean-square displacement of a single walker estimated over many runs: returns D (A^2/s along
/// x) with its standard error.
fn single_walker_d(net: &HopNetwork, opts: &KmcOptions) -> (f64, f64) {
    let point = kmc::fill_point(net, 1e-9, opts).unwrap();
    assert_eq!(point.runs[0].ions, 1);
    let d = point.diffusion_axes_m2_s[0];
    (d.mean * 1e20, d.stderr * 1e20)
}

/// The dilute limit on an exact toy chain: one walker on a periodic chain of two unequal sites
/// and two unequal saddles has the D of the series-resistance formula the analysis uses for its
/// hopping model (`analysis::chain_diffusion_per_attempt`; the exact steady-flux result for a
/// periodic 1D chain with detailed balance, e.g. Derrida, J. Stat. Phys. 31 (1983) 433).
#[test]
fn dilute_walker_on_a_chain_has_the_exact_chain_diffusion() {
    let period = 6.0;
    let lattice =
        Lattice::from_vectors([period, 0.0, 0.0], [0.0, 30.0, 0.0], [0.0, 0.0, 30.0]).unwrap();
    let site = |x: f64, e: f64| NetSite {
        frac: Frac::new(x, 0.0, 0.0),
        energy_ev: e,
        label: None,
    };
    let net = HopNetwork {
        lattice,
        sites: vec![site(0.0, 0.0), site(0.4, 0.05)],
        hops: vec![
            NetHop {
                from: 0,
                to: 1,
                image: [0, 0, 0],
                saddle_ev: 0.30,
            },
            NetHop {
                from: 1,
                to: 0,
                image: [1, 0, 0],
                saddle_ev: 0.36,
            },
        ],
        dimension: 1,
    };
    let opts = KmcOptions {
        length: RunLength::Time(4e-5), // about 2000 hops
        min_supercell_a: 30.0,
        ..bare(1600)
    };
    let (d, se) = single_walker_d(&net, &opts);
    let kt = transport::BOLTZMANN_EV_PER_K * opts.temperature_k;
    let exact = opts.attempt_frequency_hz
        * analysis::chain_diffusion_per_attempt(&[0.0, 0.05], &[0.30, 0.36], period, kt).unwrap();
    println!("two-site chain: KMC D = {d:.4e} +/- {se:.2e} A^2/s, exact {exact:.4e}");
    assert!((d - exact).abs() < 4.0 * se, "{d} +/- {se} vs {exact}");
    assert!(
        se < 0.06 * exact,
        "the check must be able to fail: {se} vs {exact}"
    );
}

/// The dilute limit on a real network: one Li on the site network of olivine LiFePO4 (the
/// bundled refinement, Streltsov et al. 1993, source in the file) diffuses along b with the
/// hopping-model D the analysis reports for its 1D channels.
#[test]
fn dilute_lithium_in_olivine_matches_the_analysis_hopping_model() {
    let path = Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("../../structures/reference/LiFePO4_olivine.cif");
    let s = hopmap::read::read_structure(&path, None).unwrap();
    let a = analysis::analyse(
        &s,
        &AnalysisOptions::new(Element::from_symbol("Li").unwrap()),
    )
    .unwrap();
    let t = a
        .transport
        .iter()
        .find(|t| t.dimension == 1)
        .expect("olivine has 1D channels");
    let net = a.network.as_ref().unwrap();
    let hops = HopNetwork::from_network(net, &s.lattice, f64::INFINITY, 1);
    // about 1000 hops along the channel: two directions at nu0 / 2 exp(-Ea / kT) each
    let kt = transport::BOLTZMANN_EV_PER_K * transport::ROOM_TEMPERATURE_K;
    let rate = transport::DEFAULT_ATTEMPT_FREQUENCY_HZ * (-t.barrier_ev / kt).exp();
    let opts = KmcOptions {
        length: RunLength::Time(1000.0 / rate),
        ..bare(1600)
    };
    let point = kmc::fill_point(&hops, 1e-9, &opts).unwrap();
    let d = point.diffusion_m2_s;
    println!(
        "LiFePO4 dilute: KMC D = {:.3e} +/- {:.2e} m^2/s along ({:.2}, {:.2}, {:.2}), analysis {:.3e} (hop {:.3} A)",
        d.mean,
        d.stderr,
        point.direction[0],
        point.direction[1],
        point.direction[2],
        t.diffusion_m2_s,
        t.hop_length_a
    );
    // along b (y for this orthorhombic cell)
    assert!(point.direction[1].abs() > 0.99);
    assert!(
        (d.mean - t.diffusion_m2_s).abs() < 4.0 * d.stderr,
        "{} +/- {} vs {}",
        d.mean,
        d.stderr,
        t.diffusion_m2_s
    );
}

/// Single-file diffusion: in a 1D channel at finite filling ions cannot pass each other and the
/// tracer's mean-square displacement grows as the square root of time (T. E. Harris, J. Appl.
/// Probab. 2 (1965) 323), as `<x^2> = a^2 (1 - c) / c * 2 sqrt(G t / pi)` for hops at rate `G`
/// to each side (R. Arratia, Ann. Probab. 11 (1983) 362; C. Kollmann, Phys. Rev. Lett. 90 (2003)
/// 180602; the prefactor from memory, the exponent checked on its own).
#[test]
fn single_file_msd_grows_as_the_square_root_of_time() {
    // chains 1 A apart-free: hop rate G = nu0 / 2 = 1 /s to each side with zero barrier
    let net = HopNetwork::chain(1.0, 600.0, 0.0);
    let times = [25.0, 50.0, 100.0, 200.0, 400.0];
    let opts = KmcOptions {
        attempt_frequency_hz: 2.0,
        length: RunLength::Time(400.0),
        min_supercell_a: 600.0,
        sample_times_s: times.to_vec(),
        max_events: u64::MAX,
        warmup_hops_per_ion: 0.0,
        ..bare(4)
    };
    let c = 0.5;
    let point = kmc::fill_point(&net, c, &opts).unwrap();
    let msd: Vec<f64> = (0..times.len())
        .map(|i| {
            point
                .runs
                .iter()
                .map(|r| r.samples[i].msd_a2[0])
                .sum::<f64>()
                / point.runs.len() as f64
        })
        .collect();
    let (lx, ly): (Vec<f64>, Vec<f64>) = times
        .iter()
        .zip(&msd)
        .map(|(t, m)| (t.ln(), m.ln()))
        .unzip();
    let mx = lx.iter().sum::<f64>() / lx.len() as f64;
    let my = ly.iter().sum::<f64>() / ly.len() as f64;
    let slope = lx
        .iter()
        .zip(&ly)
        .map(|(x, y)| (x - mx) * (y - my))
        .sum::<f64>()
        / lx.iter().map(|x| (x - mx).powi(2)).sum::<f64>();
    let law = |t: f64| (1.0 - c) / c * 2.0 * (t / std::f64::consts::PI).sqrt();
    println!(
        "single file: MSD {msd:?}, slope {slope:.3}, law at 400 s {:.2}",
        law(400.0)
    );
    // free diffusion would give slope 1; the exponent 1/2 within 0.08 (the walk approaches
    // the law from above at early times)
    assert!((slope - 0.5).abs() < 0.08, "slope {slope}");
    let ratio = msd[4] / law(400.0);
    assert!((ratio - 1.0).abs() < 0.15, "MSD / law at 400 s = {ratio}");
}

/// The same seed gives the same numbers, whatever the thread count.
#[test]
fn kmc_runs_are_reproducible_from_the_seed() {
    let net = HopNetwork::cubic(CubicLattice::Simple, 3.0, 0.2);
    let opts = KmcOptions {
        length: RunLength::HopsPerIon(50.0),
        exclusion_a: 3.5,
        runs: 3,
        ..KmcOptions::default()
    };
    let a = kmc::fill_curve(&net, &[0.1, 0.3], &opts);
    let b = kmc::fill_curve(&net, &[0.1, 0.3], &opts);
    assert_eq!(a, b);
    let other = kmc::fill_curve(&net, &[0.1], &KmcOptions { seed: 99, ..opts });
    assert_ne!(
        a[0].as_ref().unwrap().diffusion_m2_s,
        other[0].as_ref().unwrap().diffusion_m2_s
    );
}

/// Exclusion: with nearest neighbours closer than the exclusion distance a simple cubic lattice
/// holds at most half its sites (the checkerboard), and asking for more is an error, not a
/// silent partial filling.
#[test]
fn exclusion_limits_the_filling_and_says_so() {
    let net = HopNetwork::cubic(CubicLattice::Simple, 2.0, 0.2);
    let opts = KmcOptions {
        exclusion_a: 2.5,
        repulsion: None,
        ..KmcOptions::default()
    };
    match kmc::fill_point(&net, 0.9, &opts) {
        Err(kmc::KmcError::TooFull { placed, wanted, .. }) => assert!(placed < wanted),
        other => panic!("expected TooFull, got {other:?}"),
    }
}

/// Blocking in one dimension: parallel straight channels (no hops between them) cut by a
/// sphere; each channel of N sites inside keeps on average exactly
/// `2 q (1 - q^N) / p - N q^N` reachable sites (the module's exact law, derived there: site i
/// is cut off only by defects on both sides). The Monte Carlo over particles must agree
/// within its standard error.
#[test]
fn one_dimensional_blocking_follows_the_exact_law() {
    let spacing = 3.0;
    let width = 5.0;
    let net = HopNetwork::chain(spacing, width, 0.3);
    let diameter = 120.0;
    let centre = Frac::new(0.37, 0.41, 0.43);
    let p = 0.03;
    // sites per channel inside the sphere, by direct geometry
    let r = diameter / 2.0;
    let c = [0.37 * spacing, 0.41 * width, 0.43 * width];
    let mut expected_reach = 0.0;
    let mut total = 0usize;
    for j in -20i32..=20 {
        for k in -20i32..=20 {
            let (y, z) = (j as f64 * width - c[1], k as f64 * width - c[2]);
            let n = (-60i32..=60)
                .filter(|&i| {
                    let x = i as f64 * spacing - c[0];
                    (x * x + y * y + z * z).sqrt() <= r
                })
                .count();
            expected_reach += blocking::chain_accessible_fraction(n, p) * n as f64;
            total += n;
        }
    }
    let expected = expected_reach / total as f64;
    let mut rng = Xoshiro256PlusPlus::seed_from_u64(3);
    let shares: Vec<f64> = (0..400)
        .map(|_| {
            let s = blocking::sample_particle_at(&net, diameter, centre, p, &mut rng);
            assert_eq!(s.sites, total);
            s.reachable as f64 / s.sites as f64
        })
        .collect();
    let est = kmc::Estimate::of(&shares);
    println!(
        "1D blocking: MC {:.4} +/- {:.4}, exact {expected:.4}",
        est.mean, est.stderr
    );
    assert!((est.mean - expected).abs() < 4.0 * est.stderr);
    // and the law itself against a direct enumeration over all defect patterns of a short
    // channel (exact by construction)
    for n in 1..=10usize {
        let mut sum = 0.0;
        for mask in 0u32..(1 << n) {
            let defects = mask.count_ones() as i32;
            let prob = p.powi(defects) * (1.0 - p).powi(n as i32 - defects);
            let free = |i: usize| mask & (1 << i) == 0;
            let reach = (0..n)
                .filter(|&i| (0..=i).all(free) || (i..n).all(free))
                .count();
            sum += prob * reach as f64 / n as f64;
        }
        assert!((sum - blocking::chain_accessible_fraction(n, p)).abs() < 1e-12);
    }
}

/// Cross-linked networks tolerate defects: at 5% defects a simple cubic network keeps nearly all
/// its sites reachable in a 20 nm particle (the isolated clusters need every neighbour blocked;
/// the site-percolation threshold of the simple cubic lattice is 0.3116, Stauffer and Aharony,
/// Introduction to Percolation Theory), while parallel 1D channels keep far less.
#[test]
fn cross_linked_networks_tolerate_far_more_defects_than_channels() {
    let cubic = HopNetwork::cubic(CubicLattice::Simple, 3.0, 0.3);
    let chains = HopNetwork::chain(3.0, 3.0, 0.3);
    let p = 0.05;
    let s3 = blocking::particle_share(&cubic, 200.0, p, 50_000, 1);
    let s1 = blocking::particle_share(&chains, 200.0, p, 50_000, 1);
    let law = blocking::sphere_chain_share(200.0, 3.0, p);
    println!(
        "share at p = 5%, 20 nm: 3D {:.4}, 1D {:.4} (chord law {law:.4})",
        s3.mean, s1.mean
    );
    assert!(s3.mean > 0.99);
    assert!(s1.mean < 0.75);
    assert!((s1.mean - law).abs() < 0.03);
    let limit = |net: &HopNetwork| blocking::largest_particle(net, 0.03, 0.9, 300.0, 5);
    assert_eq!(
        limit(&cubic),
        blocking::ParticleLimit::NoLimitUpTo(300.0),
        "3D: no limit"
    );
    match limit(&chains) {
        blocking::ParticleLimit::Diameter(d) => {
            // the channel law: the longest channel keeping 90% at 3% defects; a sphere's chords
            // are shorter than its diameter, so it may be somewhat larger
            let n = blocking::longest_chain(0.03, 0.9).unwrap();
            println!("1D largest particle {d:.0} A; longest channel {n} sites");
            assert!(d > 3.0 * n as f64 * 0.8 && d < 3.0 * n as f64 * 2.0);
        }
        other => panic!("1D channels must have a limit: {other:?}"),
    }
}
