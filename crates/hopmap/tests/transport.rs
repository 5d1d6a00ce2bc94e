//! Transport and capacity estimates against handbook arithmetic and the CODATA constants.

use hopmap::capacity::{
    CandidateSite, CapacityError, CapacityLimit, CapacityReport, FormulaError,
    formula_capacity_mah_g, gravimetric_capacity_mah_g, molar_mass_g_mol, pack_sites,
    parse_formula, volumetric_capacity_mah_cm3,
};
use hopmap::element::Element;
use hopmap::lattice::{CellParameters, Frac, Lattice};
use hopmap::transport::*;

fn el(s: &str) -> Element {
    Element::from_symbol(s).unwrap()
}

fn cubic(a: f64) -> Lattice {
    Lattice::from_parameters(CellParameters {
        a,
        b: a,
        c: a,
        alpha: 90.0,
        beta: 90.0,
        gamma: 90.0,
    })
    .unwrap()
}

fn rel(a: f64, b: f64) -> f64 {
    ((a - b) / b).abs()
}

// ---------------------------------------------------------------------------------------------
// Constants

#[test]
fn constants_are_the_codata_2018_values() {
    // CODATA 2018 recommended values (NIST, physics.nist.gov/constants); e, N_A, kB (J/K) exact.
    assert_eq!(BOLTZMANN_EV_PER_K, 8.617333262e-5);
    assert_eq!(ELEMENTARY_CHARGE_C, 1.602176634e-19);
    assert_eq!(FARADAY_C_PER_MOL, 96485.33212);
    assert_eq!(AVOGADRO_PER_MOL, 6.02214076e23);
    // They hang together: F = e N_A and kB(J/K) = kB(eV/K) e, to the printed digits.
    assert!(rel(ELEMENTARY_CHARGE_C * AVOGADRO_PER_MOL, FARADAY_C_PER_MOL) < 1e-10);
    assert!(rel(BOLTZMANN_EV_PER_K * ELEMENTARY_CHARGE_C, BOLTZMANN_J_PER_K) < 1e-9);
}

// ---------------------------------------------------------------------------------------------
// Theoretical capacity (science notes, section 6: handbook-level values, common practice)

#[test]
fn handbook_gravimetric_capacities_to_a_tenth_of_a_mah_per_g() {
    // (formula, electrons per formula unit, handbook value in mAh/g). Masses from the standard
    // atomic weights of crate::element (the same numbers pymatgen's Composition.weight gives).
    let cases = [
        ("LiFePO4", 1.0, 169.9),
        ("Li4Ti5O12", 3.0, 175.1), // Li4Ti5O12 -> Li7Ti5O12
        ("LiCoO2", 1.0, 273.8),
        ("LiMn2O4", 1.0, 148.2),
        // Graphite, one Li per C6: the familiar 372 mAh/g is quoted per gram of the host C6.
        ("C6", 1.0, 371.9),
    ];
    for (f, x, q) in cases {
        let got = formula_capacity_mah_g(f, x).unwrap();
        assert!((got - q).abs() < 0.05, "{f}: {got:.3} mAh/g, handbook {q}");
    }
    // Five electrons per TiNb2O7 (Ti4+/Ti3+ and two Nb5+/Nb3+): 387.6 mAh/g is the figure quoted
    // for this anode, e.g. by Han, Huang & Goodenough, Chem. Mater. 23 (2011) 2027 (from memory);
    // the arithmetic gives 387.67, so the quote is truncated rather than rounded.
    let tno = formula_capacity_mah_g("TiNb2O7", 5.0).unwrap();
    assert!((tno - 387.6).abs() < 0.1, "TiNb2O7: {tno:.3} mAh/g");
    // Quoted per gram of the lithiated LiC6 instead, the same reaction gives 339.2 mAh/g
    // (arithmetic: 96485.33212 / (3.6 x 79.005)).
    let lic6 = formula_capacity_mah_g("LiC6", 1.0).unwrap();
    assert!((lic6 - 339.2).abs() < 0.05, "{lic6}");
}

#[test]
fn capacity_is_x_f_over_3_6_m() {
    // Hand arithmetic: 2 electrons on 100 g/mol: 2 x 96485.33212 / 360 = 536.0296 mAh/g.
    assert!((gravimetric_capacity_mah_g(2.0, 100.0) - 536.029_622_9).abs() < 1e-6);
    // Volumetric = gravimetric x density; LiFePO4 at 3.6 g/cm^3 (density from memory, about
    // 3.6 g/cm^3) gives about 612 mAh/cm^3.
    let q = formula_capacity_mah_g("LiFePO4", 1.0).unwrap();
    assert!((volumetric_capacity_mah_cm3(q, 3.6) - q * 3.6).abs() < 1e-12);
    assert!((volumetric_capacity_mah_cm3(q, 3.6) - 611.6).abs() < 0.1);
}

// ---------------------------------------------------------------------------------------------
// Formula parser

#[test]
fn formulas_with_brackets_and_fractions_are_read() {
    let c = parse_formula("LiTi2(PO4)3").unwrap();
    assert_eq!(c[&el("Li")], 1.0);
    assert_eq!(c[&el("Ti")], 2.0);
    assert_eq!(c[&el("P")], 3.0);
    assert_eq!(c[&el("O")], 12.0);
    let c = parse_formula("Li7La3Zr2O12").unwrap();
    assert_eq!(c.len(), 4);
    assert_eq!(c[&el("La")], 3.0);
    assert_eq!(c[&el("Zr")], 2.0);
    let c = parse_formula("Li0.5CoO2").unwrap();
    assert_eq!(c[&el("Li")], 0.5);
    assert_eq!(c[&el("Co")], 1.0);
    let c = parse_formula("LiC6").unwrap();
    assert_eq!(c[&el("C")], 6.0);
    // Repeated elements add up; square brackets nest with round ones.
    let c = parse_formula("[Co(NH3)6]Cl3").unwrap();
    assert_eq!(c[&el("N")], 6.0);
    assert_eq!(c[&el("H")], 18.0);
    assert_eq!(c[&el("Cl")], 3.0);
    let c = parse_formula("CH3COOH").unwrap();
    assert_eq!(c[&el("C")], 2.0);
    assert_eq!(c[&el("O")], 2.0);
    assert_eq!(c[&el("H")], 4.0);
    // Molar mass of LiFePO4 with the standard atomic weights: 157.76 g/mol.
    let m = molar_mass_g_mol(&parse_formula("  LiFePO4 ").unwrap());
    assert!((m - 157.757).abs() < 0.001, "{m}");
}

#[test]
fn bad_formulas_name_the_column() {
    let e = |f: &str| -> FormulaError { parse_formula(f).unwrap_err() };
    assert!(e("").message.contains("empty"));
    let x = e("LiXxO2");
    assert_eq!(x.column, 3);
    assert!(x.message.contains("'Xx' is not an element"), "{x}");
    let x = e("lifepo4");
    assert_eq!(x.column, 1);
    assert!(x.message.contains("capital"), "{x}");
    let x = e("LiTi2(PO4");
    assert_eq!(x.column, 6);
    assert!(x.message.contains("never closed"), "{x}");
    let x = e("LiPO4)");
    assert_eq!(x.column, 6);
    assert!(x.message.contains("never opened"), "{x}");
    let x = e("Li0O");
    assert!(x.message.contains("positive"), "{x}");
    let x = e("Li2+");
    assert_eq!(x.column, 4);
    assert!(x.message.contains("unexpected character '+'"), "{x}");
    let x = e("Li1.2.3O");
    assert!(x.message.contains("not a number"), "{x}");
    let x = e("Li(PO4]");
    assert!(x.message.contains("does not match"), "{x}");
    assert_eq!(
        e("Fe()").to_string(),
        "formula 'Fe()', column 4: empty brackets"
    );
}

// ---------------------------------------------------------------------------------------------
// Site-packing bound

fn simple_cubic_sites(n: usize) -> Vec<CandidateSite> {
    let mut v = Vec::new();
    for i in 0..n {
        for j in 0..n {
            for k in 0..n {
                v.push(CandidateSite {
                    frac: Frac::new(
                        i as f64 / n as f64,
                        j as f64 / n as f64,
                        k as f64 / n as f64,
                    ),
                    energy_ev: None,
                });
            }
        }
    }
    v
}

#[test]
fn sites_farther_apart_than_the_minimum_distance_are_all_kept() {
    // 4 x 4 x 4 simple cubic site lattice, spacing 2 A, minimum distance 1.9 A.
    let p = pack_sites(&cubic(8.0), &simple_cubic_sites(4), 1.9).unwrap();
    assert_eq!(p.kept.len(), 64);
    assert_eq!(p.ions_per_cell, 64.0);
    assert_eq!(p.supercell, [1, 1, 1]);
}

#[test]
fn nearest_neighbour_exclusion_on_a_simple_cubic_lattice_keeps_half() {
    // Spacing 2 A, minimum 2.5 A: nearest neighbours (2 A) exclude each other, face diagonals
    // (2.83 A) do not. The largest packing is the rock-salt checkerboard, one half of the sites
    // (a fact of lattice geometry); the greedy order finds it here.
    let l = cubic(8.0);
    let sites = simple_cubic_sites(4);
    let p = pack_sites(&l, &sites, 2.5).unwrap();
    assert_eq!(p.kept.len(), 32);
    for (a, (i, _)) in p.kept.iter().enumerate() {
        for (j, _) in &p.kept[a + 1..] {
            assert!(l.periodic_distance(sites[*i].frac, sites[*j].frac) >= 2.5);
        }
    }
    // A one-site cell narrower than the minimum distance is packed in a 2 x 2 x 2 supercell:
    // the same checkerboard, half an ion per cell.
    let one = [CandidateSite {
        frac: Frac::new(0.0, 0.0, 0.0),
        energy_ev: None,
    }];
    let p = pack_sites(&cubic(2.0), &one, 2.5).unwrap();
    assert_eq!(p.supercell, [2, 2, 2]);
    assert_eq!(p.ions_per_cell, 0.5);
}

#[test]
fn the_greedy_packing_is_valid_and_maximal() {
    // Spacing 2 A, minimum 3 A: only body diagonals (3.46 A) and longer survive. Whatever the
    // greedy picks must respect the distance, and no rejected site may fit.
    let l = cubic(8.0);
    let sites = simple_cubic_sites(4);
    let p = pack_sites(&l, &sites, 3.0).unwrap();
    let kept: Vec<usize> = p.kept.iter().map(|(i, _)| *i).collect();
    for (a, &i) in kept.iter().enumerate() {
        for &j in &kept[a + 1..] {
            assert!(l.periodic_distance(sites[i].frac, sites[j].frac) >= 3.0 - 1e-9);
        }
    }
    for (i, s) in sites.iter().enumerate() {
        if !kept.contains(&i) {
            assert!(
                kept.iter()
                    .any(|&j| l.periodic_distance(s.frac, sites[j].frac) < 3.0),
                "site {i} would still fit: the packing is not maximal"
            );
        }
    }
    // At most the body-centred arrangement (1 in 4 here) by the volume per ion.
    assert!(kept.len() <= 16 && kept.len() >= 8, "{}", kept.len());
}

#[test]
fn lower_energy_sites_are_preferred() {
    // Two sites 1 A apart along a, minimum 2 A: the one with the lower energy stays, even when
    // it comes second in position and in input order.
    let l = cubic(10.0);
    let sites = [
        CandidateSite {
            frac: Frac::new(0.1, 0.5, 0.5),
            energy_ev: Some(0.3),
        },
        CandidateSite {
            frac: Frac::new(0.2, 0.5, 0.5),
            energy_ev: Some(-0.1),
        },
    ];
    let p = pack_sites(&l, &sites, 2.0).unwrap();
    assert_eq!(p.kept, vec![(1, [0, 0, 0])]);
    assert_eq!(
        pack_sites(&l, &[], 2.0).unwrap_err(),
        CapacityError::NoSites
    );
    assert!(pack_sites(&l, &sites, -1.0).is_err());
}

#[test]
fn capacity_report_names_the_limiting_bound() {
    let comp = parse_formula("LiCoO2").unwrap();
    // Site bound below the redox bound: 32 ions per cell, Z = 64 -> 0.5 Li per LiCoO2.
    let packing = pack_sites(&cubic(8.0), &simple_cubic_sites(4), 2.5).unwrap();
    let r = CapacityReport::new(&comp, 1.0, Some((&packing, 64.0)), 1, Some(5.0)).unwrap();
    assert_eq!(r.limited_by, CapacityLimit::Sites);
    assert_eq!(r.site_ions_per_formula_unit, Some(0.5));
    assert!((r.redox_capacity_mah_g - 273.8).abs() < 0.05);
    assert!((r.capacity_mah_g - 136.9).abs() < 0.05);
    assert!((r.capacity_mah_cm3.unwrap() - 5.0 * r.capacity_mah_g).abs() < 1e-9);
    assert_eq!(r.formula, "LiCoO2");
    // Plenty of sites: the redox bound limits.
    let r = CapacityReport::new(&comp, 1.0, Some((&packing, 16.0)), 1, None).unwrap();
    assert_eq!(r.limited_by, CapacityLimit::Redox);
    assert!((r.capacity_mah_g - 273.8).abs() < 0.05);
    // A divalent ion carries two electrons per site.
    let r = CapacityReport::new(&comp, 4.0, Some((&packing, 64.0)), 2, None).unwrap();
    assert!((r.site_capacity_mah_g.unwrap() - 273.8).abs() < 0.05);
}

// ---------------------------------------------------------------------------------------------
// Hopping model, Arrhenius behaviour

#[test]
fn hopping_model_matches_hand_arithmetic() {
    // Ea = 0.3 eV, a = 3 A, 3D, nu0 = 1e13 /s, T = 300 K:
    // D = (3e-10)^2 x 1e13 / 6 x exp(-0.3 / (8.617333262e-5 x 300)) = 1.368715e-12 m^2/s
    let m = HoppingModel::new(0.3, 3.0, 3).unwrap();
    let expected = 1.5e-7 * (-0.3f64 / (8.617333262e-5 * 300.0)).exp();
    assert!(rel(m.diffusion_coefficient(300.0), expected) < 1e-12);
    assert!(rel(expected, 1.368_715e-12) < 1e-6, "{expected}");
    // Filling and correlation scale D linearly.
    let m2 = m
        .with_site_filling(0.5)
        .unwrap()
        .with_correlation_factor(0.5)
        .unwrap();
    assert!(rel(m2.diffusion_coefficient(300.0), expected * 0.25) < 1e-12);
}

#[test]
fn arrhenius_fit_recovers_the_barrier() {
    let m = HoppingModel::new(0.42, 2.95, 1).unwrap();
    let rows = arrhenius_table(&Transport::Hopping(m), &default_temperatures_k()).unwrap();
    assert_eq!(rows.len(), 8);
    assert!(rows.iter().any(|r| r.temperature_k == 298.15));
    let pts: Vec<(f64, f64)> = rows
        .iter()
        .map(|r| (r.temperature_k, r.diffusion_m2_s))
        .collect();
    let fit = fit_arrhenius(&pts).unwrap();
    assert!(rel(fit.activation_energy_ev, 0.42) < 1e-9, "{fit:?}");
    assert!(rel(fit.prefactor_m2_s, m.prefactor_m2_s()) < 1e-9);
    assert!(fit.r_squared > 1.0 - 1e-12);
    // Noise lowers r^2 below 1.
    let noisy: Vec<(f64, f64)> = pts
        .iter()
        .enumerate()
        .map(|(i, &(t, d))| (t, d * if i % 2 == 0 { 1.3 } else { 0.77 }))
        .collect();
    assert!(fit_arrhenius(&noisy).unwrap().r_squared < 0.999);
    assert_eq!(
        fit_arrhenius(&[(300.0, 1e-12)]).unwrap_err(),
        TransportError::TooFewTemperatures(1)
    );
    assert!(fit_arrhenius(&[(300.0, 1e-12), (300.0, 2e-12)]).is_err());
    assert!(fit_arrhenius(&[(300.0, -1.0), (350.0, 1e-12)]).is_err());
}

#[test]
fn temperature_ranges_are_inclusive() {
    let t = temperature_range_k(250.0, 400.0, 50.0).unwrap();
    assert_eq!(t, vec![250.0, 300.0, 350.0, 400.0]);
    assert!(temperature_range_k(400.0, 250.0, 10.0).is_err());
}

#[test]
fn a_measurement_moves_in_temperature_only_with_an_activation_energy() {
    let t = Transport::measured(1e-13, 300.0, MeasurementMethod::PfgNmr).unwrap();
    assert_eq!(t.diffusion_at(300.0).unwrap().diffusion_m2_s, 1e-13);
    match t.diffusion_at(350.0) {
        Err(TransportError::NoTemperatureDependence {
            measured_at_k,
            requested_k,
        }) => {
            assert_eq!(measured_at_k, 300.0);
            assert_eq!(requested_k, 350.0);
        }
        other => panic!("{other:?}"),
    }
    let t = t.with_activation(0.5, ActivationOrigin::Assumed).unwrap();
    let d350 = t.diffusion_at(350.0).unwrap();
    assert!(d350.basis.contains("assumed"));
    let expected = 1e-13 * (-0.5 / BOLTZMANN_EV_PER_K * (1.0 / 350.0 - 1.0 / 300.0)).exp();
    assert!(rel(d350.diffusion_m2_s, expected) < 1e-12);
    // The fit through the extrapolated values returns the activation energy.
    let rows = arrhenius_table(&t, &[260.0, 300.0, 340.0, 380.0]).unwrap();
    let pts: Vec<_> = rows
        .iter()
        .map(|r| (r.temperature_k, r.diffusion_m2_s))
        .collect();
    assert!(rel(fit_arrhenius(&pts).unwrap().activation_energy_ev, 0.5) < 1e-9);
}

// ---------------------------------------------------------------------------------------------
// Nernst-Einstein

#[test]
fn nernst_einstein_matches_hand_arithmetic() {
    // n = 1e28 /m^3, q = e, D = 1e-12 m^2/s, T = 300 K:
    // sigma = 1e28 x (1.602176634e-19)^2 x 1e-12 / (1.380649e-23 x 300) = 0.0619750 S/m.
    let s = nernst_einstein(1e28, 1.0, 1e-12, 300.0).unwrap();
    assert!(rel(s.siemens_per_m, 0.061_974_959_3) < 1e-8, "{s:?}");
    assert!(rel(s.siemens_per_cm(), 6.197_495_93e-4) < 1e-8);
    // A divalent carrier conducts four times as much at the same n and D.
    let s2 = nernst_einstein(1e28, 2.0, 1e-12, 300.0).unwrap();
    assert!(rel(s2.siemens_per_m, 4.0 * s.siemens_per_m) < 1e-12);
    assert!(nernst_einstein(1e28, 1.0, 1e-12, 0.0).is_err());
}

#[test]
fn carrier_density_per_cell_and_per_formula_unit_agree() {
    // Four Li in a 291.2 A^3 cell (olivine-sized): 4 / 291.2e-30 = 1.37363e28 /m^3.
    let a = carrier_density_per_cell(4.0, 291.2).unwrap();
    let b = carrier_density_per_formula_unit(1.0, 4.0, 291.2).unwrap();
    assert!(rel(a, 1.373_626_37e28) < 1e-8);
    assert!(rel(a, b) < 1e-14);
}

// ---------------------------------------------------------------------------------------------
// Rate capability

#[test]
fn diffusion_lengths_over_one_hour_in_3d() {
    // Science notes section 6 (common practice): D = 1e-12 m^2/s over one hour gives ~147 um,
    // 1e-14 m^2/s gives ~15 um; exactly sqrt(6 D t).
    let l = diffusion_length_m(1e-12, 3, 3600.0).unwrap() * 1e6;
    assert!((l - 147.0).abs() < 0.5, "{l}");
    assert!((l - (6.0f64 * 1e-12 * 3600.0).sqrt() * 1e6).abs() < 1e-9);
    let l = diffusion_length_m(1e-14, 3, 3600.0).unwrap() * 1e6;
    assert!((l - 14.7).abs() < 0.05, "{l}");
    // 1D: sqrt(2 D t).
    let l1 = diffusion_length_m(1e-12, 1, 3600.0).unwrap();
    assert!(rel(l1, (2.0f64 * 1e-12 * 3600.0).sqrt()) < 1e-12);
}

#[test]
fn rate_table_and_its_inverses_agree() {
    let d = 1e-14;
    let rows = rate_table(d, 3, &DEFAULT_C_RATES).unwrap();
    assert_eq!(rows.len(), 7);
    assert_eq!(rows[0].charge_time_s, 3600.0);
    assert_eq!(rows[6].charge_time_s, 60.0);
    // 1C: L = 14.70 um, largest particle diameter 2L = 29.39 um.
    assert!((rows[0].diffusion_length_um - 14.697).abs() < 1e-3);
    assert!((rows[0].max_particle_diameter_um - 29.394).abs() < 1e-3);
    assert!(
        rel(
            rows[0].max_particle_diameter_nm,
            rows[0].max_particle_diameter_um * 1e3
        ) < 1e-12
    );
    for r in &rows {
        // The largest particle at a C-rate charges at exactly that C-rate ...
        let c = max_c_rate_for_particle(d, 3, r.max_particle_diameter_nm).unwrap();
        assert!(rel(c, r.c_rate) < 1e-12);
        // ... and needs exactly this D to do so.
        let need = required_diffusion_m2_s(r.max_particle_diameter_nm, r.c_rate, 3).unwrap();
        assert!(rel(need, d) < 1e-12);
    }
    // Hand arithmetic: a 100 nm particle at 60C (60 s) in 3D needs (50e-9)^2 / (6 x 60) =
    // 6.94e-18 m^2/s.
    let need = required_diffusion_m2_s(100.0, 60.0, 3).unwrap();
    assert!(rel(need, 2.5e-15 / 360.0) < 1e-12);
    assert!(rate_table(d, 0, &DEFAULT_C_RATES).is_err());
    assert!(rate_table(d, 3, &[0.0]).is_err());
}

/// Exact results for hopping on a periodic 1D chain (the series-resistance formula of
/// analysis::chain_diffusion_per_attempt): N equal sites per period L with barrier Ea give the
/// simple random walk D = (L/N)^2 w, w = nu exp(-Ea/kT)/2 per direction; two sites per period at
/// energies 0 and e with both saddles at Ea give D = L^2 w / (2 (1 + exp(-e/kT))) (detailed
/// balance: every bond carries the same resistance exp(Ea/kT)(1 + exp(-e/kT))/ (1/2)).
#[test]
fn periodic_chain_diffusion_matches_the_random_walk_and_the_two_site_chain() {
    use hopmap::analysis::chain_diffusion_per_attempt;
    let kt = hopmap::transport::BOLTZMANN_EV_PER_K * 298.15;
    let (ea, l) = (0.3_f64, 6.0_f64);
    let w = 0.5 * (-ea / kt).exp();
    for n in 1..=4usize {
        let d = chain_diffusion_per_attempt(&vec![0.0; n], &vec![ea; n], l, kt).unwrap();
        let walk = (l / n as f64).powi(2) * w;
        assert!((d / walk - 1.0).abs() < 1e-12, "N = {n}: {d} vs {walk}");
    }
    for e in [0.02, 0.1, 0.25] {
        let d = chain_diffusion_per_attempt(&[0.0, e], &[ea, ea], l, kt).unwrap();
        let exact = l * l * w / (2.0 * (1.0 + (-e / kt).exp()));
        assert!((d / exact - 1.0).abs() < 1e-12, "e = {e}: {d} vs {exact}");
    }
    // nothing to hop between
    assert!(chain_diffusion_per_attempt(&[], &[], l, kt).is_none());
}
