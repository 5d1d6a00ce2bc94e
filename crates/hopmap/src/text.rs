//! Small text repairs shared by the readers: real files carry typographic characters pasted from
//! word processors and PDFs where the grammar expects ASCII.

pub use hopmap_cif::ascii_minus;

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
