//! Any text through the extended XYZ reader: a value or an error, never a panic or a huge
//! allocation.
//!
//! cargo +nightly fuzz run extxyz fuzz/corpus/extxyz testdata/robust
#![no_main]

use hopmap::read::xyz::parse_extxyz;
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    if let Ok(text) = std::str::from_utf8(data) {
        let _ = parse_extxyz(text, "fuzz.xyz", "fuzz");
    }
});
