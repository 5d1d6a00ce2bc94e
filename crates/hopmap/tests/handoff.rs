//! Hand-off to first-principles calculations: the NEB geometry of a hop and filled host cells,
//! checked on olivine LiFePO4 and FePO4 (structures/reference, published crystallography; the
//! source is in each file's header).
//!
//! References used below:
//! - Olivine LiFePO4 conducts along b through a chain of Li sites (M1, 4a) b/2 = 3.00 A apart
//!   (Morgan, Van der Ven & Ceder, Electrochem. Solid-State Lett. 7 (2004) A30; Islam et al.,
//!   Chem. Mater. 17 (2005) 5085: a curved path between neighbouring M1 sites along b).
//! - The shortest lattice translation of a supercell is computed here by brute force over
//!   small integer combinations (exact arithmetic, independent of the library's bound).
//! - Contact distance: Li-O distances below about 1.8 A are not found in ordered oxides
//!   (common practice; the LiO6 octahedron of olivine has Li-O 2.1-2.2 A, from the file); the
//!   tests ask that no image come closer than 1.6 A to any framework atom.

use hopmap::analysis::{self, Analysis, AnalysisOptions};
use hopmap::element::Element;
use hopmap::handoff::{
    self, HandoffError, HopChoice, Mode, NebOptions, PopulateOptions, neb_setup, populate,
};
use hopmap::lattice::{Frac, Lattice};
use nalgebra::Vector3;
use std::path::{Path, PathBuf};
use std::sync::OnceLock;

const CONTACT_A: f64 = 1.6;

fn reference(name: &str) -> PathBuf {
    Path::new(concat!(env!("CARGO_MANIFEST_DIR"), "/../.."))
        .join("structures/reference")
        .join(name)
}

fn analyse(name: &str) -> Analysis {
    let s = hopmap::read::read_structure(&reference(name), None).unwrap();
    let mut o = AnalysisOptions::new(Element::from_symbol("Li").unwrap());
    o.spacing_a = Some(0.1);
    analysis::analyse(&s, &o).unwrap()
}

fn lfp() -> &'static Analysis {
    static A: OnceLock<Analysis> = OnceLock::new();
    A.get_or_init(|| analyse("LiFePO4_olivine.cif"))
}

fn fp() -> &'static Analysis {
    static A: OnceLock<Analysis> = OnceLock::new();
    A.get_or_init(|| analyse("FePO4_olivine.cif"))
}

/// Shortest nonzero lattice vector by brute force over coefficients -4..=4.
fn brute_shortest(l: &Lattice) -> f64 {
    let mut best = f64::INFINITY;
    for i in -4i32..=4 {
        for j in -4i32..=4 {
            for k in -4i32..=4 {
                if (i, j, k) != (0, 0, 0) {
                    best =
                        best.min(l.frac_delta_length(Vector3::new(i as f64, j as f64, k as f64)));
                }
            }
        }
    }
    best
}

/// Trilinear interpolation of the energy grid at a fractional position.
fn grid_energy(a: &Analysis, f: Vector3<f64>) -> f64 {
    let g = &a.landscape.energy;
    let x = [0, 1, 2].map(|i| f[i].rem_euclid(1.0) * g.dims[i] as f64);
    let i0 = x.map(|v| v.floor() as usize);
    let t = [0, 1, 2].map(|i| x[i] - i0[i] as f64);
    let mut e = 0.0;
    for c in 0..8 {
        let d = [c & 1, (c >> 1) & 1, (c >> 2) & 1];
        let idx = [0, 1, 2].map(|i| (i0[i] + d[i]) % g.dims[i]);
        let w: f64 = (0..3)
            .map(|i| if d[i] == 1 { t[i] } else { 1.0 - t[i] })
            .product();
        e += w * g.get(idx[0], idx[1], idx[2]) as f64;
    }
    e
}

#[test]
fn olivine_lifepo4_default_hop_runs_along_b_between_two_li_sites_3_a_apart() {
    let a = lfp();
    let s = neb_setup(a, &NebOptions::default()).unwrap();
    assert_eq!(s.mode, Mode::Vacancy, "the file holds Li");
    assert_eq!(s.channel_dimension, Some(1));
    // b/2 of the file's cell (6.010 A) is 3.005 A
    assert!((s.end_to_end_a - 3.005).abs() < 0.01, "{}", s.end_to_end_a);
    let d = s.end.frac.0 - s.start.frac.0;
    assert!(d.x.abs() < 1e-9 && d.z.abs() < 1e-9, "not along b: {d:?}");
    assert!((d.y.abs() - 0.5).abs() < 1e-9, "{d:?}");
    assert_eq!(s.start.label.as_deref(), Some("Li1"));
    assert_eq!(s.end.label.as_deref(), Some("Li1"));
    // the path is curved (Islam et al. 2005): longer than the straight line, but not wildly
    assert!(
        s.path_length_a > s.end_to_end_a + 0.1 && s.path_length_a < 1.5 * s.end_to_end_a,
        "{}",
        s.path_length_a
    );
    // 1x2x2 of a = 10.33, b = 6.01, c = 4.69 A: 112 sites, one Li removed (vacancy)
    assert_eq!(s.supercell.multiples, [1, 2, 2]);
    assert_eq!(s.host.len() + 1, 111);
    assert_eq!(s.images.len(), handoff::DEFAULT_IMAGES + 2);
}

#[test]
fn first_and_last_images_sit_on_the_files_li_sites_and_those_sites_are_emptied() {
    let a = lfp();
    let s = neb_setup(a, &NebOptions::default()).unwrap();
    let sc = &s.supercell.lattice;
    let li: Vec<Frac> = a
        .structure
        .sites
        .iter()
        .filter(|x| x.has_element(Element::from_symbol("Li").unwrap()))
        .map(|x| x.frac)
        .collect();
    for im in [s.images.first().unwrap(), s.images.last().unwrap()] {
        // back in the analysed cell: on a Li site of the file
        let cart = sc.to_cart(im.frac);
        let f = a.structure.lattice.to_frac(cart);
        let d = li
            .iter()
            .map(|p| a.structure.lattice.periodic_distance(*p, f))
            .fold(f64::INFINITY, f64::min);
        assert!(d < 1e-6, "end image {d} A from the nearest Li site");
        // and no Li of the host is left there (vacancy mode takes both end ions out)
        let left = s
            .host
            .iter()
            .filter(|h| h.element.symbol() == "Li")
            .map(|h| sc.periodic_distance(h.frac, im.frac))
            .fold(f64::INFINITY, f64::min);
        assert!(left > 2.5, "a host Li {left} A from an end point");
    }
}

#[test]
fn no_image_comes_closer_than_1_6_a_to_a_framework_atom() {
    let s = neb_setup(lfp(), &NebOptions::default()).unwrap();
    let sc = &s.supercell.lattice;
    for (k, im) in s.images.iter().enumerate() {
        // recomputed here against every framework atom of the supercell
        let d = s
            .host
            .iter()
            .filter(|h| h.element.symbol() != "Li")
            .map(|h| sc.periodic_distance(h.frac, im.frac))
            .fold(f64::INFINITY, f64::min);
        assert!((d - im.nearest_framework_a).abs() < 1e-9);
        assert!(d >= CONTACT_A, "image {k}: {d:.2} A from a framework atom");
    }
}

#[test]
fn periodic_images_of_the_moving_ion_are_at_least_the_minimum_distance_apart() {
    for min in [9.0, 12.0] {
        let o = NebOptions {
            min_image_a: min,
            ..Default::default()
        };
        let s = neb_setup(lfp(), &o).unwrap();
        let brute = brute_shortest(&s.supercell.lattice);
        assert!(brute >= min, "{min}: shortest translation {brute}");
        assert!((brute - s.supercell.shortest_translation_a).abs() < 1e-9);
        // and the supercell is the smallest diagonal one: one fewer along any axis fails
        let m = s.supercell.multiples;
        let w = lfp().structure.lattice.perpendicular_widths();
        for i in 0..3 {
            if m[i] > 1 {
                assert!((m[i] - 1) as f64 * w[i] < min);
            }
        }
    }
}

#[test]
fn energies_along_the_images_match_the_landscape_profile() {
    let a = lfp();
    let s = neb_setup(a, &NebOptions::default()).unwrap();
    for (k, im) in s.images.iter().enumerate() {
        // the image's energy (evaluated off the grid) against the grid itself
        let f = a
            .structure
            .lattice
            .to_frac(s.supercell.lattice.to_cart(im.frac))
            .0;
        let g = grid_energy(a, f);
        assert!(
            (g - im.bv_energy_ev).abs() < 0.03,
            "image {k}: {:.4} eV exact vs {:.4} eV on the grid",
            im.bv_energy_ev,
            g
        );
    }
    // the smoothed path crosses the pass at the height of the channel's bottleneck
    let ch = &a.percolation.thresholds[0].as_ref().unwrap();
    let profile_barrier = ch.barrier as f64;
    assert!(
        (s.bv_barrier_ev - profile_barrier).abs() < 0.05,
        "path {:.3} eV vs profile {:.3} eV",
        s.bv_barrier_ev,
        profile_barrier
    );
    // the middle image is the highest of the band, the ends the lowest (a symmetric hop)
    let e: Vec<f64> = s.images.iter().map(|i| i.bv_energy_ev).collect();
    let mid = e.len() / 2;
    assert!(e.iter().all(|x| *x <= e[mid] + 1e-9));
    assert!((e[0] - e[e.len() - 1]).abs() < 1e-3);
    // equal arc length between images
    let arcs: Vec<f64> = s
        .images
        .windows(2)
        .map(|w| w[1].arc_a - w[0].arc_a)
        .collect();
    for x in &arcs {
        assert!((x - arcs[0]).abs() < 1e-6, "{arcs:?}");
    }
}

#[test]
fn a_hop_chosen_by_index_follows_that_hop() {
    let a = lfp();
    let net = a.network.as_ref().unwrap();
    // the lowest hop of the network is a b-axis Li1-Li1 hop in olivine
    let o = NebOptions {
        choice: HopChoice::Hop(0),
        ..Default::default()
    };
    let s = neb_setup(a, &o).unwrap();
    assert_eq!(s.hop, Some(0));
    assert!((s.end_to_end_a - net.hops[0].length).abs() < 0.05);
    assert!((s.bv_barrier_ev - net.hops[0].barrier_forward as f64).abs() < 0.05);
}

#[test]
fn requests_that_make_no_sense_are_refused_with_a_reason() {
    let a = lfp();
    let count = a.network.as_ref().unwrap().hops.len();
    let e = neb_setup(
        a,
        &NebOptions {
            choice: HopChoice::Hop(count + 3),
            ..Default::default()
        },
    )
    .unwrap_err();
    assert!(matches!(e, HandoffError::HopIndex { .. }), "{e}");
    // a 4 A image distance gives the 1x1x1 cell, whose c (4.69 A) is shorter than twice the hop
    let e = neb_setup(
        a,
        &NebOptions {
            min_image_a: 4.0,
            ..Default::default()
        },
    )
    .unwrap_err();
    assert!(matches!(e, HandoffError::HopTooLong { .. }), "{e}");
    assert!(e.to_string().contains("longer than the cell"), "{e}");
    // FePO4 holds no Li: no vacancy hop
    let e = neb_setup(
        fp(),
        &NebOptions {
            mode: Some(Mode::Vacancy),
            ..Default::default()
        },
    )
    .unwrap_err();
    assert!(matches!(e, HandoffError::Mode(_)), "{e}");
}

#[test]
fn in_empty_fepo4_one_li_hops_alone_between_landscape_sites_along_b() {
    let s = neb_setup(fp(), &NebOptions::default()).unwrap();
    assert_eq!(s.mode, Mode::Interstitial);
    assert!(s.host.iter().all(|h| h.element.symbol() != "Li"));
    let d = s.end.frac.0 - s.start.frac.0;
    assert!(
        (d.y.abs() - 0.5).abs() < 0.05 && d.x.abs() < 0.05 && d.z.abs() < 0.05,
        "{d:?}"
    );
    assert!(s.start.site.is_some() && s.end.site.is_some());
}

#[test]
fn interstitial_mode_in_lifepo4_takes_every_li_out() {
    let s = neb_setup(
        lfp(),
        &NebOptions {
            mode: Some(Mode::Interstitial),
            ..Default::default()
        },
    )
    .unwrap();
    assert_eq!(
        s.host.iter().filter(|h| h.element.symbol() == "Li").count(),
        0
    );
    assert_eq!(s.host.len() + 1, 112 - 16 + 1);
}

#[test]
fn lifepo4_filled_to_x_1_puts_li_back_on_its_four_m1_sites() {
    // FePO4 host, x = 1: the four M1 (4a) sites of triphylite, 3.0 A apart along b
    let p = populate(
        fp(),
        &PopulateOptions {
            x: 1.0,
            min_distance_a: 2.5,
        },
    )
    .unwrap();
    assert_eq!(p.formula_units, 4.0);
    assert_eq!(p.placed.len(), 4);
    assert!(p.proven_lowest);
    let lfp = lfp();
    for site in &p.placed {
        let d = lfp
            .structure
            .sites
            .iter()
            .filter(|x| x.has_element(Element::from_symbol("Li").unwrap()))
            .map(|x| lfp.structure.lattice.periodic_distance(x.frac, site.frac))
            .fold(f64::INFINITY, f64::min);
        // the cells of the two files differ slightly (FePO4 is the delithiated phase)
        assert!(
            d < 0.3,
            "placed Li {d:.2} A from the nearest M1 site of LiFePO4"
        );
    }
    // every pair at least the stated distance apart
    for (i, x) in p.placed.iter().enumerate() {
        for y in &p.placed[i + 1..] {
            assert!(p.structure.lattice.periodic_distance(x.frac, y.frac) >= 2.5);
        }
    }
    // the written structure: the host plus four Li
    let li = p
        .structure
        .sites
        .iter()
        .filter(|x| x.has_element(Element::from_symbol("Li").unwrap()))
        .count();
    assert_eq!(li, 4);
    assert_eq!(p.structure.sites.len(), 24 + 4);
}

#[test]
fn a_half_filled_host_takes_the_lowest_sites_and_an_impossible_filling_is_refused() {
    let p = populate(
        lfp(),
        &PopulateOptions {
            x: 0.5,
            min_distance_a: 2.5,
        },
    )
    .unwrap();
    assert_eq!(p.placed.len(), 2);
    let lowest = lfp().network.as_ref().unwrap().sites[0].energy as f64;
    for s in &p.placed {
        assert!((s.energy_ev - lowest).abs() < 1e-6);
    }
    // 16 ions per cell 2.5 A apart do not fit in olivine's 291 A^3 channels
    let e = populate(
        lfp(),
        &PopulateOptions {
            x: 4.0,
            min_distance_a: 2.5,
        },
    )
    .unwrap_err();
    assert!(matches!(e, HandoffError::Filling(_)), "{e}");
}
