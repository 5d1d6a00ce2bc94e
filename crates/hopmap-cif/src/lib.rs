//! CIF: the grammar (bytes to document) and the document model (blocks, items, loops).
//!
//! Two layers, and this module is only the first of the two that make up CIF reading:
//!
//! - [`grammar`] turns bytes into a [`Document`]: data blocks, save frames, tag-value pairs and
//!   loops, with every quoting rule of CIF 1.1 and the CIF 2.0 forms met in practice.
//! - [`document`] is the plain data model with look-ups by tag.
//!
//! The grammar knows nothing about atoms, cells or symmetry; reading a crystal structure out of
//! a block is the job of the structure reader (`hopmap::read::cif`).
//!
//! # Decisions worth knowing
//!
//! - **Version.** A file whose first line starts with the magic `#\#CIF_2.0` is read with the
//!   CIF 2.0 rules (lists `[ ]`, tables `{ }`, triple-quoted strings, quotes that close at the
//!   first matching quote). Every other file is read as CIF 1.1, where a quote closes only when
//!   followed by white space (`'O'Neil'` is valid) and a word starting with `[` or `$` is
//!   ordinary text (real files write `[Pt(en)~2~]Cl2` unquoted).
//! - **Encodings.** A UTF-8 byte-order mark is skipped; CRLF and lone CR line ends are read as
//!   LF. Bytes that are not UTF-8 are replaced by U+FFFD and the document gets one warning
//!   naming the line of the first bad byte: old files in Latin-1 usually differ only in a name
//!   or a comment, which is no reason to refuse the structure.
//! - **Ctrl-Z** (0x1A, the old DOS end-of-file mark) at the end of a file is ignored. Elsewhere,
//!   outside strings, it is read as white space with a warning; inside a quoted string or a
//!   text field it is kept as a character with a warning.
//! - **Duplicate tags** in one block or frame: a repeat with the same value is dropped with a
//!   warning (real files repeat `_chemical_formula_weight`). A repeat with a different value is
//!   a warning too, the first value is kept and the repeat is stored in [`Block::duplicates`], so
//!   that the structure reader can refuse a cell length given twice while a file with two
//!   different `_diffrn_ambient_temperature` still yields its structure. A looped tag that
//!   appears twice is an error: the table itself would be ambiguous.
//! - **Reserved words.** `data_` and `save_` start headers whenever an unquoted word begins with
//!   them (so `_tag data_x` is an error: the tag has no value). `loop_`, `global_` and `stop_`
//!   are reserved only as whole words; `global_x` is an ordinary value. `global_` opens a STAR
//!   global block: it is kept (see [`Block::global`]) with a warning, since CIF does not allow
//!   it. `stop_` is an error.
//! - **Text fields** are kept as written between the `;` lines, without the newline that ends
//!   the opening line when that line is empty. The line-folding and prefix protocols are not
//!   undone.

pub mod document;
pub mod error;
pub mod grammar;

pub use document::{Block, CifWarning, Document, Item, Loop, Pair, Value, Version};
pub use grammar::{CifError, parse};

use crate::error::InputError;
use std::path::Path;

/// Reads and parses a CIF file. The error names the file, and the line and column when the
/// problem is in the text.
pub fn parse_file(path: &Path) -> Result<Document, InputError> {
    let file = path.display().to_string();
    let bytes = read_input_file(path)?;
    parse(&bytes).map_err(|e| e.into_input_error(&file))
}

/// Largest input file read (bytes): 64 MiB, about 1.5 million atom lines of a P 1 CIF.
pub const MAX_FILE_BYTES: u64 = 64 << 20;

/// Reads a whole input file, after checking that it is a regular file (a FIFO, a device or a
/// folder would block or never end) of at most [`MAX_FILE_BYTES`]. Errors name the file.
pub fn read_input_file(path: &Path) -> Result<Vec<u8>, InputError> {
    use std::io::Read;
    let file = path.display().to_string();
    let meta = std::fs::metadata(path)
        .map_err(|e| InputError::new(file.clone(), format!("cannot read the file: {e}")))?;
    if !meta.is_file() {
        let what = if meta.is_dir() {
            "a folder"
        } else {
            "not a regular file (a pipe, socket or device)"
        };
        return Err(InputError::new(
            file,
            format!("cannot read the file: it is {what}"),
        ));
    }
    if meta.len() > MAX_FILE_BYTES {
        return Err(InputError::new(
            file,
            format!(
                "the file is {:.0} MB, larger than the {} MB hopmap reads",
                meta.len() as f64 / 1e6,
                MAX_FILE_BYTES >> 20
            ),
        ));
    }
    let mut bytes = Vec::with_capacity(meta.len() as usize);
    std::fs::File::open(path)
        .and_then(|f| f.take(MAX_FILE_BYTES + 1).read_to_end(&mut bytes))
        .map_err(|e| InputError::new(file.clone(), format!("cannot read the file: {e}")))?;
    if bytes.len() as u64 > MAX_FILE_BYTES {
        return Err(InputError::new(
            file,
            format!(
                "the file grew past the {} MB hopmap reads",
                MAX_FILE_BYTES >> 20
            ),
        ));
    }
    Ok(bytes)
}

/// As [`read_input_file`], as UTF-8 text.
pub fn read_input_text(path: &Path) -> Result<String, InputError> {
    let bytes = read_input_file(path)?;
    String::from_utf8(bytes).map_err(|e| {
        InputError::new(
            path.display().to_string(),
            format!(
                "cannot read the file: it is not UTF-8 text (byte {} is invalid)",
                e.utf8_error().valid_up_to()
            ),
        )
    })
}

/// Replaces the Unicode minus sign and dashes (U+2010-U+2015, U+2212, U+FE63, U+FF0D) by the
/// ASCII hyphen-minus, so that `−0.25` and `−P 4n 2n` read as `-0.25` and `-P 4n 2n`: real
/// files carry typographic characters pasted from word processors and PDFs where the grammar
/// expects ASCII.
pub fn ascii_minus(s: &str) -> std::borrow::Cow<'_, str> {
    let is_dash = |c: char| {
        matches!(
            c,
            '\u{2010}'..='\u{2015}' | '\u{2212}' | '\u{FE63}' | '\u{FF0D}'
        )
    };
    if s.chars().any(is_dash) {
        std::borrow::Cow::Owned(
            s.chars()
                .map(|c| if is_dash(c) { '-' } else { c })
                .collect(),
        )
    } else {
        std::borrow::Cow::Borrowed(s)
    }
}

/// Reads a CIF number with its standard uncertainty in parentheses, in units of the last digit
/// of the mantissa: `4.5937(3)` is 4.5937 with s.u. 0.0003, `1203(12)` is 1203 with s.u. 12,
/// `0.42E3(15)` is 420 with s.u. 150, `-.5(5)` is -0.5 with s.u. 0.5. Numbers without
/// parentheses give `None` for the s.u. Anything that is not a CIF number (`?`, `12..3`, `e5`,
/// `1,5`, `inf`) gives `None`.
///
/// A typographic minus sign or dash pasted from a PDF (`−0.25`, `1.2e−3`) reads as `-`.
pub fn parse_number_with_su(s: &str) -> Option<(f64, Option<f64>)> {
    if !s.is_ascii() {
        return match ascii_minus(s) {
            std::borrow::Cow::Owned(t) => parse_number_with_su(&t),
            std::borrow::Cow::Borrowed(_) => None,
        };
    }
    let (num, su_digits) = match s.strip_suffix(')') {
        Some(head) => {
            let open = head.rfind('(')?;
            let digits = &head[open + 1..];
            if digits.is_empty() || !digits.bytes().all(|b| b.is_ascii_digit()) {
                return None;
            }
            (&head[..open], Some(digits))
        }
        None => (s, None),
    };
    let b = num.as_bytes();
    let mut i = 0;
    let negative = match b.first() {
        Some(b'-') => {
            i += 1;
            true
        }
        Some(b'+') => {
            i += 1;
            false
        }
        _ => false,
    };
    let int_start = i;
    while i < b.len() && b[i].is_ascii_digit() {
        i += 1;
    }
    let int_part = &num[int_start..i];
    let mut frac_part = "";
    if i < b.len() && b[i] == b'.' {
        i += 1;
        let f0 = i;
        while i < b.len() && b[i].is_ascii_digit() {
            i += 1;
        }
        frac_part = &num[f0..i];
    }
    if int_part.is_empty() && frac_part.is_empty() {
        return None;
    }
    let mut exponent: i32 = 0;
    if i < b.len() && (b[i] == b'e' || b[i] == b'E') {
        i += 1;
        let e0 = i;
        if i < b.len() && (b[i] == b'+' || b[i] == b'-') {
            i += 1;
        }
        let d0 = i;
        while i < b.len() && b[i].is_ascii_digit() {
            i += 1;
        }
        if d0 == i {
            return None;
        }
        exponent = num[e0..i].parse().ok()?;
    }
    if i != b.len() {
        return None;
    }
    let normalised = format!(
        "{}{}.{}e{}",
        if negative { "-" } else { "" },
        if int_part.is_empty() { "0" } else { int_part },
        if frac_part.is_empty() { "0" } else { frac_part },
        exponent
    );
    let value: f64 = normalised.parse().ok()?;
    if !value.is_finite() {
        return None;
    }
    let su = match su_digits {
        None => None,
        Some(d) => {
            let n: f64 = d.parse().ok()?;
            let scale = exponent as f64 - frac_part.len() as f64;
            let su = n * 10f64.powf(scale);
            if !su.is_finite() {
                return None;
            }
            Some(su)
        }
    };
    Some((value, su))
}

#[cfg(test)]
mod tests {
    use super::parse_number_with_su as p;

    fn close(a: f64, b: f64) -> bool {
        (a - b).abs() <= 1e-12 * a.abs().max(b.abs()).max(1.0)
    }

    #[test]
    fn su_is_in_units_of_the_last_digit() {
        let (v, su) = p("4.5937(3)").unwrap();
        assert!(close(v, 4.5937) && close(su.unwrap(), 0.0003));
        let (v, su) = p("1203(12)").unwrap();
        assert!(close(v, 1203.0) && close(su.unwrap(), 12.0));
        let (v, su) = p("0.42E3(15)").unwrap();
        assert!(close(v, 420.0) && close(su.unwrap(), 150.0));
        let (v, su) = p("-.5(5)").unwrap();
        assert!(close(v, -0.5) && close(su.unwrap(), 0.5));
        let (v, su) = p("12.(2)").unwrap();
        assert!(close(v, 12.0) && close(su.unwrap(), 2.0));
        assert_eq!(p("0.25"), Some((0.25, None)));
        assert_eq!(p("+3"), Some((3.0, None)));
        assert_eq!(p("1.e5"), Some((1e5, None)));
    }

    #[test]
    fn non_numbers_are_refused() {
        for s in [
            "", "?", ".", "12..3", "e5", "1,5", "inf", "NaN", "1(2", "1()", "1(a)", "-", "1e",
            "1e+", "0x10", "1.5.2", "(3)",
        ] {
            assert_eq!(p(s), None, "{s:?}");
        }
    }
}
