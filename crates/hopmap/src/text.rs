//! Small text repairs shared by the readers: real files carry typographic characters pasted from
//! word processors and PDFs where the grammar expects ASCII.

pub use hopmap_cif::ascii_minus;

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
