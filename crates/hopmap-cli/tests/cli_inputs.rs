//! The command line with P 1 inputs and user-set oxidation states: which cell the answer is
//! given in, and the options' errors (exit code 2 for usage, 1 for a structure it cannot
//! apply to).

use std::process::Output;

mod common;
use common::{hopmap, root};

fn json(o: &Output) -> serde_json::Value {
    assert!(
        o.status.success(),
        "hopmap failed: {}",
        String::from_utf8_lossy(&o.stderr)
    );
    serde_json::from_slice(&o.stdout).expect("stdout is JSON")
}

#[test]
fn a_poscar_is_answered_in_the_conventional_cell_and_says_so() {
    let poscar = root("testdata/cathodes/LiCoO2_primitive.vasp");
    let v = json(&hopmap(&[
        "paths",
        &poscar,
        "--spacing",
        "0.25",
        "--json",
        "-q",
    ]));
    let s = &v["structure"];
    assert_eq!(s["analysed_cell"], "conventional");
    assert_eq!(s["space_group"]["number"], 166);
    assert_eq!(s["cell_transformation"]["input_positions"], 4);
    assert_eq!(s["positions_in_cell"], 12);
    assert_eq!(s["formula"], "LiCoO2");
    assert_eq!(s["z"], 3.0);
    assert!(
        v["answer"].as_str().unwrap().contains("(001)"),
        "{}",
        v["answer"]
    );
    // the terminal summary names the cell too
    let t = hopmap(&["inspect", &poscar]);
    let text = String::from_utf8_lossy(&t.stdout);
    assert!(
        text.contains("which cell    the conventional cell of R -3 m"),
        "{text}"
    );
    // and --keep-cell keeps the 4-atom cell
    let k = json(&hopmap(&["inspect", &poscar, "--keep-cell", "--json"]));
    assert_eq!(k["analysed_cell"], "input");
    assert_eq!(k["positions_in_cell"], 4);
    assert_eq!(k["space_group"]["number"], 166);
}

#[test]
fn oxidation_states_from_the_command_line_replace_the_assignment() {
    let poscar = root("testdata/cathodes/Li0.5CoO2_delithiated.vasp");
    let v = json(&hopmap(&[
        "valence",
        &poscar,
        "--json",
        "--oxidation",
        "Co=3.5,Li=1,O=-2",
    ]));
    let note = v["assignment_note"].as_str().unwrap_or_default();
    assert!(note.contains("set by the user"), "{v}");
    let co: Vec<f64> = v["ions"]
        .as_array()
        .unwrap()
        .iter()
        .filter(|i| i["species"].as_str().unwrap().starts_with("Co"))
        .map(|i| i["formal_vu"].as_f64().unwrap())
        .collect();
    assert!(
        !co.is_empty() && co.iter().all(|q| (q - 3.5).abs() < 1e-9),
        "{co:?}"
    );
}

#[test]
fn bad_oxidation_settings_are_errors_naming_them() {
    let poscar = root("testdata/cathodes/LiNiO2_primitive.vasp");
    let o = hopmap(&["valence", &poscar, "--oxidation", "Ni:3"]);
    assert_eq!(o.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&o.stderr).contains("Ni:3"));
    let o = hopmap(&["valence", &poscar, "--oxidation", "Ni7=3"]);
    assert_eq!(o.status.code(), Some(1));
    assert!(String::from_utf8_lossy(&o.stderr).contains("'Ni7'"));
}
