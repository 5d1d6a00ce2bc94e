//! Any bytes through the CIF grammar, and any document that parses through the structure
//! reader: both must return (a value or an error) without panicking, in bounded time.
//!
//! cargo +nightly fuzz run cif_grammar fuzz/corpus/cif_grammar ../shared/cif-corpus/syntax
#![no_main]

use hopmap::cif;
use hopmap::read::cif::{blocks_with_atoms, structure_from_block};
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    if let Ok(doc) = cif::parse(data) {
        for block in blocks_with_atoms(&doc) {
            let _ = structure_from_block(block, "fuzz.cif");
        }
    }
});
