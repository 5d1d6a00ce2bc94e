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

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn typographic_minus_signs_become_ascii() {
        assert_eq!(ascii_minus("\u{2212}P 4n 2n"), "-P 4n 2n");
        assert_eq!(ascii_minus("x\u{2013}1/2"), "x-1/2");
        assert_eq!(ascii_minus("plain"), "plain");
    }
}
