//! Files for first-principles calculations: the NEB folder of one hop (numbered folders with a
//! POSCAR each, one extended XYZ of every image, a JSON summary) and filled host cells (CIF,
//! POSCAR, JSON). The geometry comes from `hopmap::handoff`; this module only writes it out.

use crate::json::round;
use crate::output::write_atomic;
use hopmap::element::Element;
use hopmap::handoff::{NebSetup, Populated, multiples_text};
use hopmap::lattice::{Frac, Lattice};
use hopmap::structure::Structure;
use serde_json::{Value, json};
use std::fmt::Write as _;
use std::path::{Path, PathBuf};

/// Schema of the NEB summary (`neb.json`).
pub const NEB_SCHEMA: &str = "hopmap.neb/1";
/// Schema of the filled-host summary.
pub const POPULATE_SCHEMA: &str = "hopmap.populate/1";
/// Schema of the machine-learned second opinion written by the Python extra.
pub const MLIP_SCHEMA: &str = "hopmap.mlip/1";

/// A VASP 5 POSCAR (element line, direct coordinates). Atoms are grouped by element in the
/// order their elements first appear, keeping their order within a group, so an atom listed
/// first stays first.
pub fn poscar(lattice: &Lattice, atoms: &[(Element, Frac)], comment: &str) -> String {
    let mut order: Vec<Element> = Vec::new();
    for (e, _) in atoms {
        if !order.contains(e) {
            order.push(*e);
        }
    }
    let mut out = String::new();
    let _ = writeln!(out, "{}", comment.replace('\n', " "));
    out.push_str("1.0\n");
    for i in 0..3 {
        let v = lattice.vector(i);
        let _ = writeln!(out, "  {:16.10} {:16.10} {:16.10}", v.x, v.y, v.z);
    }
    let names: Vec<&str> = order.iter().map(|e| e.symbol()).collect();
    let _ = writeln!(out, "  {}", names.join(" "));
    let counts: Vec<String> = order
        .iter()
        .map(|e| atoms.iter().filter(|(x, _)| x == e).count().to_string())
        .collect();
    let _ = writeln!(out, "  {}", counts.join(" "));
    out.push_str("Direct\n");
    for e in &order {
        for (x, f) in atoms.iter().filter(|(x, _)| x == e) {
            let _ = writeln!(
                out,
                "  {:14.10} {:14.10} {:14.10} {}",
                f.0.x,
                f.0.y,
                f.0.z,
                x.symbol()
            );
        }
    }
    out
}

/// The atoms of one image in file order: the moving ion first, then the host grouped as in
/// [`poscar`].
fn image_atoms(setup: &NebSetup, k: usize) -> Vec<(Element, Frac)> {
    let mut v = vec![(setup.ion, setup.images[k].frac)];
    v.extend(setup.host.iter().map(|h| (h.element, h.frac)));
    let mut order: Vec<Element> = Vec::new();
    for (e, _) in &v {
        if !order.contains(e) {
            order.push(*e);
        }
    }
    order
        .iter()
        .flat_map(|e| v.iter().filter(move |(x, _)| x == e).cloned())
        .collect()
}

/// Every image as one extended XYZ file (Cartesian A, the supercell as `Lattice`, periodic):
/// per frame `image`, `arc_a` and `bv_energy_ev` in the comment line.
pub fn extended_xyz(setup: &NebSetup) -> String {
    let lat = &setup.supercell.lattice;
    let mut out = String::new();
    let cell: Vec<String> = (0..3)
        .flat_map(|i| {
            let v = lat.vector(i);
            [v.x, v.y, v.z]
        })
        .map(|x| format!("{x:.10}"))
        .collect();
    for (k, im) in setup.images.iter().enumerate() {
        let atoms = image_atoms(setup, k);
        let _ = writeln!(out, "{}", atoms.len());
        let _ = writeln!(
            out,
            "Lattice=\"{}\" Properties=species:S:1:pos:R:3 pbc=\"T T T\" image={} arc_a={:.4} bv_energy_ev={:.5}",
            cell.join(" "),
            k,
            im.arc_a,
            im.bv_energy_ev
        );
        for (e, f) in atoms {
            let c = lat.to_cart(f).0;
            let _ = writeln!(
                out,
                "{:<3} {:16.10} {:16.10} {:16.10}",
                e.symbol(),
                c.x,
                c.y,
                c.z
            );
        }
    }
    out
}

/// Name of image `k`'s folder: two digits (VASP's convention), three above 99 images.
pub fn folder_name(k: usize, count: usize) -> String {
    if count > 100 {
        format!("{k:03}")
    } else {
        format!("{k:02}")
    }
}

fn frac_json(f: &Frac) -> Value {
    json!([round(f.0.x, 6), round(f.0.y, 6), round(f.0.z, 6)])
}

/// The `hopmap.neb/1` document (see the README).
pub fn neb_json(setup: &NebSetup, file: &str, mlip: Option<&Value>) -> Value {
    let n = setup.images.len();
    let top = setup
        .images
        .iter()
        .map(|i| i.bv_energy_ev)
        .fold(f64::NEG_INFINITY, f64::max);
    let end = |e: &hopmap::handoff::EndPoint| {
        json!({
            "frac_cell": frac_json(&e.frac),
            "label": e.label,
            "site": e.site,
            "bv_energy_ev": round(e.energy_ev, 4),
        })
    };
    let m = setup.supercell.matrix();
    json!({
        "schema": NEB_SCHEMA,
        "file": file,
        "ion": setup.ion.symbol(),
        "ion_charge": setup.ion_charge,
        "mode": setup.mode.name(),
        "mode_reason": setup.mode_reason,
        "hop": {
            "chosen_by": setup.chosen_by,
            "channel_dimension": setup.channel_dimension,
            "network_hop": setup.hop,
            "start": end(&setup.start),
            "end": end(&setup.end),
            "end_to_end_a": round(setup.end_to_end_a, 4),
            "path_length_a": round(setup.path_length_a, 4),
        },
        "supercell": {
            "matrix": m,
            "multiples": setup.supercell.multiples,
            "lattice_a": (0..3).map(|i| {
                let v = setup.supercell.lattice.vector(i);
                json!([round(v.x, 6), round(v.y, 6), round(v.z, 6)])
            }).collect::<Vec<_>>(),
            "shortest_translation_a": round(setup.supercell.shortest_translation_a, 4),
            "atoms": setup.host.len() + 1,
        },
        "moving_atom_index": 0,
        "removed": setup.removed,
        "images": setup.images.iter().enumerate().map(|(k, im)| json!({
            "index": k,
            "folder": folder_name(k, n),
            "frac": frac_json(&im.frac),
            "cart_a": im.cart.map(|x| round(x, 5)),
            "arc_a": round(im.arc_a, 4),
            "bv_energy_ev": round(im.bv_energy_ev, 5),
            "bv_relative_ev": round(im.bv_energy_ev - setup.start.energy_ev, 5),
            "nearest_framework_a": round(im.nearest_framework_a, 4),
            "nearest_framework_label": im.nearest_framework_label,
        })).collect::<Vec<_>>(),
        "bv_profile": setup.path_energies.iter().map(|(s, e)| json!([round(*s, 4), round(*e, 5)])).collect::<Vec<_>>(),
        "bv_barrier_ev": round(setup.bv_barrier_ev, 4),
        "bv_barrier_backward_ev": round(setup.bv_barrier_backward_ev, 4),
        "bv_barrier_images_ev": round(top - setup.start.energy_ev, 4),
        "bv_barrier_uncertainty_ev": setup.uncertainty_ev,
        "grid_saddle_ev": round(setup.grid_saddle_ev, 4),
        "mlip": mlip,
        "notes": setup.notes,
        "cautions": cautions(),
    })
}

fn cautions() -> Vec<&'static str> {
    vec![
        "bond-valence energies are a static, empirical screen: the images are a starting band for a NEB calculation, not its result",
        "the supercell keeps the analysed cell's atoms unrelaxed; relax the end points with your own method before the band",
    ]
}

/// Every file of the NEB folder, as (path relative to the folder, contents).
pub fn neb_files(setup: &NebSetup, file: &str, mlip: Option<&Value>) -> Vec<(PathBuf, String)> {
    let n = setup.images.len();
    let mut files = Vec::with_capacity(n + 2);
    for (k, im) in setup.images.iter().enumerate() {
        let comment = format!(
            "hopmap neb {file}: {} image {k} of {} ({} mode), BV energy {:.4} eV",
            setup.ion.symbol(),
            n - 1,
            setup.mode.name(),
            im.bv_energy_ev
        );
        files.push((
            Path::new(&folder_name(k, n)).join("POSCAR"),
            poscar(&setup.supercell.lattice, &image_atoms(setup, k), &comment),
        ));
    }
    files.push((PathBuf::from("images.xyz"), extended_xyz(setup)));
    let doc = neb_json(setup, file, mlip);
    files.push((
        PathBuf::from("neb.json"),
        serde_json::to_string_pretty(&doc).unwrap_or_default() + "\n",
    ));
    files
}

/// Writes `files` under `dir`, each atomically (creating the folders first): every file's
/// contents are complete before the first one is written.
pub fn write_files(dir: &Path, files: &[(PathBuf, String)]) -> std::io::Result<Vec<PathBuf>> {
    let mut written = Vec::with_capacity(files.len());
    for (rel, contents) in files {
        let p = dir.join(rel);
        if let Some(parent) = p.parent() {
            std::fs::create_dir_all(parent)?;
        }
        write_atomic(&p, contents.as_bytes())?;
        written.push(p);
    }
    Ok(written)
}

/// What `hopmap neb` prints.
pub fn neb_text(setup: &NebSetup, file: &str, dir: &Path, mlip: Option<&Value>) -> String {
    let mut out = String::new();
    let n = setup.images.len();
    let _ = writeln!(
        out,
        "{file}: {} hop for a NEB calculation, {} mode ({})",
        setup.ion.symbol(),
        setup.mode.name(),
        setup.mode_reason
    );
    let _ = writeln!(out, "  hop        {}", setup.chosen_by);
    let lbl = |e: &hopmap::handoff::EndPoint| {
        let f = e.frac.0;
        format!(
            "{} ({:.4}, {:.4}, {:.4})",
            e.label.clone().unwrap_or_else(|| "site".into()),
            f.x,
            f.y,
            f.z
        )
    };
    let _ = writeln!(
        out,
        "  ends       {} -> {}, {:.2} A apart; path {:.2} A",
        lbl(&setup.start),
        lbl(&setup.end),
        setup.end_to_end_a,
        setup.path_length_a
    );
    let _ = writeln!(
        out,
        "  supercell  {} of the analysed cell, {} atoms; periodic images of the moving ion {:.2} A apart",
        multiples_text(setup.supercell.multiples),
        setup.host.len() + 1,
        setup.supercell.shortest_translation_a
    );
    for r in &setup.removed {
        let _ = writeln!(out, "  removed    {r}");
    }
    let _ = writeln!(
        out,
        "  images     {} ({} intermediate), equal arc length along hopmap's lowest-energy path",
        n,
        n.saturating_sub(2)
    );
    let _ = writeln!(
        out,
        "  {:>6} {:>8} {:>12} {:>16}",
        "image", "arc (A)", "BV E (eV)", "nearest (A)"
    );
    for (k, im) in setup.images.iter().enumerate() {
        let _ = writeln!(
            out,
            "  {:>6} {:>8.3} {:>12.3} {:>10.2} {}",
            folder_name(k, n),
            im.arc_a,
            im.bv_energy_ev - setup.start.energy_ev,
            im.nearest_framework_a,
            im.nearest_framework_label
        );
    }
    let _ = writeln!(
        out,
        "  barrier    bond valence {:.2} ± {:.2} eV (highest point of the path over the start; {:.2} eV over the end)",
        setup.bv_barrier_ev, setup.uncertainty_ev, setup.bv_barrier_backward_ev
    );
    if let Some(m) = mlip {
        let b = m.get("barrier_ev").and_then(Value::as_f64);
        let model = m.get("model").and_then(Value::as_str).unwrap_or("?");
        let conv = m.get("converged").and_then(Value::as_bool).unwrap_or(false);
        if let Some(b) = b {
            let _ = writeln!(
                out,
                "  barrier    machine-learned potential {b:.2} eV ({model}, climbing-image NEB{}; such potentials read barriers low by about 0.1 eV)",
                if conv { "" } else { ", NOT converged" }
            );
        }
    }
    for note in &setup.notes {
        let _ = writeln!(out, "  note       {note}");
    }
    let _ = writeln!(
        out,
        "  written    {}/00 ... {}/{} (POSCAR), images.xyz, neb.json",
        dir.display(),
        dir.display(),
        folder_name(n - 1, n)
    );
    for c in cautions() {
        let _ = writeln!(out, "  caution    {c}");
    }
    out
}

/// POSCAR of a structure: each site's majority occupant.
pub fn poscar_of(s: &Structure, comment: &str) -> String {
    let atoms: Vec<(Element, Frac)> = s
        .sites
        .iter()
        .filter_map(|site| {
            site.occupants
                .iter()
                .max_by(|a, b| a.occupancy.total_cmp(&b.occupancy))
                .map(|o| {
                    (
                        o.species.element,
                        Frac(site.frac.0.map(hopmap::lattice::wrap_unit)),
                    )
                })
        })
        .collect();
    poscar(&s.lattice, &atoms, comment)
}

/// The `hopmap.populate/1` document (see the README).
pub fn populate_json(p: &Populated, file: &str, ion: Element) -> Value {
    json!({
        "schema": POPULATE_SCHEMA,
        "file": file,
        "ion": ion.symbol(),
        "host_formula": p.host_formula,
        "formula_units": p.formula_units,
        "requested_x": p.requested_x,
        "x": round(p.x, 6),
        "ions": p.placed.len(),
        "min_distance_a": p.min_distance_a,
        "total_energy_ev": round(p.total_energy_ev, 4),
        "proven_lowest": p.proven_lowest,
        "sites": p.placed.iter().map(|s| json!({
            "site": s.site,
            "orbit": s.orbit,
            "frac": frac_json(&s.frac),
            "energy_ev": round(s.energy_ev, 4),
            "label": s.label,
        })).collect::<Vec<_>>(),
        "notes": p.notes,
        "cautions": [
            "site energies are single-ion bond-valence energies: ion-ion interaction enters only through the distance rule; relax the cell before trusting its energy",
        ],
    })
}

/// What `hopmap populate` prints.
pub fn populate_text(p: &Populated, file: &str, ion: Element, written: &[PathBuf]) -> String {
    let mut out = String::new();
    let _ = writeln!(
        out,
        "{file}: {} on the host {} ({} formula units per cell): x = {} asked, {} placed ({} ions per cell, at least {} A apart)",
        ion.symbol(),
        p.host_formula,
        p.formula_units,
        p.requested_x,
        (p.x * 1e4).round() / 1e4,
        p.placed.len(),
        p.min_distance_a
    );
    let _ = writeln!(
        out,
        "  {:>4} {:>5} {:>6} {:>28} {:>10} {:>8}",
        "ion", "site", "orbit", "frac", "E (eV)", "label"
    );
    for (k, s) in p.placed.iter().enumerate() {
        let f = s.frac.0;
        let _ = writeln!(
            out,
            "  {:>4} {:>5} {:>6} {:>28} {:>10.3} {:>8}",
            k + 1,
            s.site,
            s.orbit,
            format!("({:.4}, {:.4}, {:.4})", f.x, f.y, f.z),
            s.energy_ev,
            s.label.clone().unwrap_or_else(|| "-".into())
        );
    }
    let _ = writeln!(
        out,
        "  total      {:.3} eV ({})",
        p.total_energy_ev,
        if p.proven_lowest {
            "the lowest sum of site energies under the distance rule"
        } else {
            "the lowest found; the search stopped early"
        }
    );
    for n in &p.notes {
        let _ = writeln!(out, "  note       {n}");
    }
    for w in written {
        let _ = writeln!(out, "  written    {}", w.display());
    }
    let _ = writeln!(
        out,
        "  caution    single-ion bond-valence site energies: a starting cell for DFT, not a prediction of the ordering"
    );
    out
}
