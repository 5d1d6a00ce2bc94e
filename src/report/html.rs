//! The self-contained HTML report (inline SVG figures, no network fetches).

use crate::analysis::Analysis;

/// The report of one analysis as a complete HTML document.
pub fn report(a: &Analysis, file: &str) -> String {
    let body = crate::report::terminal::paths(a, file);
    format!(
        "<!DOCTYPE html><html><head><meta charset=\"utf-8\"><title>hopmap</title></head><body><pre>{}</pre></body></html>",
        crate::plot::svg::escape_xml(&body)
    )
}

/// The report's figures as (name, standalone SVG).
pub fn figures(_a: &Analysis) -> Vec<(String, String)> {
    Vec::new()
}
