//! Small text repairs shared by the readers: real files carry typographic characters pasted from
//! word processors and PDFs where the grammar expects ASCII.

/// Replaces the Unicode minus sign and dashes (U+2010-U+2015, U+2212, U+FE63, U+FF0D) by the
/// ASCII hyphen-minus, so that `−0.25` and `−P 4n 2n` read as `-0.25` and `-P 4n 2n`.
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

/// A number for people: at most `decimals` decimals, trailing zeros and a trailing point
/// dropped (`1.3333340000000007` -> "1.333", `7.0` -> "7", `-0.0` -> "0").
pub fn trim_number(x: f64, decimals: usize) -> String {
    if !x.is_finite() {
        return "-".into();
    }
    let s = format!("{x:.decimals$}");
    let s = if s.contains('.') {
        s.trim_end_matches('0').trim_end_matches('.').to_string()
    } else {
        s
    };
    if s == "-0" { "0".into() } else { s }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn numbers_for_people_drop_float_noise() {
        assert_eq!(trim_number(1.3333340000000007, 3), "1.333");
        assert_eq!(trim_number(6.9999959999999914, 3), "7");
        assert_eq!(trim_number(0.74, 3), "0.74");
        assert_eq!(trim_number(-0.0001, 2), "0");
    }

    #[test]
    fn typographic_minus_signs_become_ascii() {
        assert_eq!(ascii_minus("\u{2212}P 4n 2n"), "-P 4n 2n");
        assert_eq!(ascii_minus("x\u{2013}1/2"), "x-1/2");
        assert_eq!(ascii_minus("plain"), "plain");
    }
}
