//! Any text through the POSCAR/CONTCAR reader, and a structure it reads through the symmetry
//! search: a value or an error, never a panic, a huge allocation or a run without end.
//!
//! cargo +nightly fuzz run poscar fuzz/corpus/poscar testdata/cathodes testdata/robust
#![no_main]

use hopmap::read::poscar::parse_poscar;
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    if let Ok(text) = std::str::from_utf8(data)
        && let Ok(s) = parse_poscar(text, "fuzz.vasp", "fuzz")
        && s.sites.len() <= 64
    {
        let _ = hopmap::symmetry::complete_symmetry(s, false);
    }
});
