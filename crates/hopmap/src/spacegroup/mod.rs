//! Space groups: symmetry operations, the table of the 530 Hall settings, and look-up by Hall
//! symbol, Hermann-Mauguin symbol or number.
//!
//! The table ([`settings`]) is generated from spglib's database by `tools/gen_spacegroups.py`
//! and lists, for every setting, its full set of operations with the centring translations
//! included: the general position of the International Tables, Vol. A, in that setting. Look-up
//! never parses symbols into operations at run time; it matches names (or operation sets)
//! against the table.
//!
//! Conventions for the *standard setting* of a number, used by [`from_number`] and by
//! [`from_hm`] when the symbol carries no setting suffix (those of the International Tables,
//! Vol. A, for the conventional description): unique axis b with cell choice 1 for monoclinic
//! groups, origin choice 2 (inversion centre at the origin) for the 24 groups listed with two
//! origins, and hexagonal axes for the 7 rhombohedral groups.

pub mod symop;
mod table;

pub use symop::{SymOp, SymOpError};

use crate::lattice::{Frac, Lattice};
use nalgebra::{Matrix3, Vector3};
use std::collections::HashMap;
use std::sync::OnceLock;

/// A space-group setting with its full list of operations (centring translations included).
#[derive(Debug, Clone, PartialEq)]
pub struct SpaceGroup {
    /// International Tables number, 1-230.
    pub number: u16,
    /// Hall symbol of the setting, e.g. `-F 4vw 2vw 3`.
    pub hall: String,
    /// Hermann-Mauguin symbol with setting suffix where one exists, e.g. `F d -3 m :2`.
    pub hm: String,
    /// The general position: every operation of the setting, the identity first, centring
    /// translations included (so `ops.len()` is the multiplicity of the general position in the
    /// conventional cell).
    pub ops: Vec<SymOp>,
    /// Position of the setting in the table of Hall settings, 1-530 (spglib's Hall number).
    pub hall_number: u16,
}

impl SpaceGroup {
    /// Number of operations in the conventional cell, centring included: the multiplicity of
    /// the general position (192 for F m -3 m, 36 for R -3 m in hexagonal axes).
    pub fn order(&self) -> usize {
        self.ops.len()
    }

    /// The table entry of this setting.
    pub fn setting(&self) -> &'static Setting {
        &table::SETTINGS[self.hall_number as usize - 1]
    }

    /// The lattice-centring letter of the symbol: P, A, B, C, I, F or R.
    pub fn centring(&self) -> char {
        self.setting().hm_full.chars().next().unwrap_or('P')
    }

    /// True when the group contains the inversion `-x,-y,-z` (with any translation).
    pub fn is_centrosymmetric(&self) -> bool {
        self.ops
            .iter()
            .any(|op| op.rot == -Matrix3::<i32>::identity())
    }
}

/// One operation of the table: rotation (row major, `x' = R x + t`) and translation in 24ths.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub struct TableOp {
    pub rot: [i8; 9],
    pub trans24: [u8; 3],
}

impl TableOp {
    pub fn to_symop(&self) -> SymOp {
        let r = self.rot.map(|v| v as i32);
        SymOp {
            rot: Matrix3::new(r[0], r[1], r[2], r[3], r[4], r[5], r[6], r[7], r[8]),
            trans: Vector3::new(
                self.trans24[0] as f64 / 24.0,
                self.trans24[1] as f64 / 24.0,
                self.trans24[2] as f64 / 24.0,
            ),
        }
    }
}

/// One of the 530 Hall settings, as stored in the generated table.
#[derive(Debug)]
pub struct Setting {
    /// 1-530, spglib's numbering of the Hall settings.
    pub hall_number: u16,
    /// International Tables number, 1-230.
    pub number: u16,
    /// Hall symbol, e.g. `-P 2ac 2n`.
    pub hall: &'static str,
    /// spglib's "international" symbol: the setting symbol, for monoclinic groups preceded by
    /// the standard short symbol (`P 2_1/c = P 1 2_1/n 1`).
    pub hm: &'static str,
    /// Full Hermann-Mauguin symbol of the setting (`P 2_1/n 2_1/m 2_1/a`).
    pub hm_full: &'static str,
    /// Short symbol of the group as spglib gives it (`Pnma`, `P2_1/c`).
    pub hm_short: &'static str,
    /// spglib's setting code: "" (only one), "1"/"2" origin choice, "H"/"R" axes, "b1", "c2"
    /// (unique axis and cell choice), "cab", "ba-c" (axis permutation), "1cab" (both).
    pub choice: &'static str,
    /// Symbol used before the double-glide letter `e` existed (`C m c a` for `C m c e`), for
    /// groups 39, 41, 64, 67 and 68; empty otherwise.
    pub hm_old: &'static str,
    /// The general position, identity first, centring translations included.
    pub ops: &'static [TableOp],
}

impl Setting {
    /// The setting-specific Hermann-Mauguin symbol, CIF style (no underscores), with the
    /// suffix `:1`, `:2`, `:H` or `:R` where the setting needs one: `P 1 21/n 1`,
    /// `F d -3 m :2`, `R -3 m :H`.
    pub fn hm_symbol(&self) -> String {
        let parts: Vec<&str> = self.hm.split('=').map(str::trim).collect();
        let body = if parts.len() > 1 { parts[1] } else { parts[0] };
        let body = body.replace('_', "");
        match self.suffix() {
            Some(s) => format!("{body} :{s}"),
            None => body,
        }
    }

    /// `1`, `2`, `H` or `R` when the setting is one of an origin-choice or axes pair.
    pub fn suffix(&self) -> Option<char> {
        let c = self.choice.chars().next()?;
        matches!(c, '1' | '2' | 'H' | 'R').then_some(c)
    }

    /// True for the standard setting of the International Tables (see the module notes).
    pub fn is_standard(&self) -> bool {
        standard_index(self.number) == Some(self.hall_number as usize - 1)
    }

    pub fn space_group(&self) -> SpaceGroup {
        SpaceGroup {
            number: self.number,
            hall: self.hall.to_string(),
            hm: self.hm_symbol(),
            ops: self.ops.iter().map(TableOp::to_symop).collect(),
            hall_number: self.hall_number,
        }
    }

    /// Every name this setting answers to in [`from_hm`], in the compact form of
    /// [`compact_hm`]: full and short symbols, the setting symbol, the short symbol of a
    /// monoclinic setting (`P21/n` for `P 1 21/n 1`), the short symbol of a centrosymmetric
    /// orthorhombic setting read off its full symbol, the old symbol with `e` spelled out, and
    /// the old cubic symbols without the bar (`Fd3m`).
    pub fn names(&self) -> Vec<String> {
        let mut raw: Vec<String> = vec![self.hm_full.to_string(), self.hm_short.to_string()];
        raw.extend(self.hm.split('=').map(|s| s.trim().to_string()));
        if !self.hm_old.is_empty() {
            raw.push(self.hm_old.to_string());
        }
        if (47..=74).contains(&self.number) {
            // centrosymmetric orthorhombic: "B 2/b 2/e 2/b" -> "B b e b" (spglib's setting
            // symbol of Hall number 331 is the old "B b c b"; this keeps "B b e b" too)
            let short: Vec<&str> = self
                .hm_full
                .split_whitespace()
                .map(|t| t.rsplit('/').next().unwrap_or(t))
                .collect();
            raw.push(short.join(" "));
        }
        if (3..=15).contains(&self.number) {
            // "P 1 21/n 1" -> "P 21/n": the one axis symbol that is not 1
            let t: Vec<&str> = self.hm_full.split_whitespace().collect();
            if t.len() == 4 {
                let axes: Vec<&str> = t[1..].iter().copied().filter(|s| *s != "1").collect();
                if axes.len() == 1 {
                    raw.push(format!("{} {}", t[0], axes[0]));
                }
            }
        }
        if (200..=206).contains(&self.number) || (221..=230).contains(&self.number) {
            let with_bar: Vec<String> = raw.iter().filter(|s| s.contains("-3")).cloned().collect();
            raw.extend(with_bar.iter().map(|s| s.replace("-3", "3")));
        }
        let mut out: Vec<String> = raw.iter().map(|s| compact_hm(s)).collect();
        out.sort();
        out.dedup();
        out
    }
}

/// The 530 Hall settings in Hall-number order.
pub fn settings() -> &'static [Setting] {
    &table::SETTINGS
}

/// Where the table came from ("spglib 2.8.0").
pub fn table_source() -> &'static str {
    table::SOURCE
}

/// The setting with Hall number `hall_number` (1-530).
pub fn setting(hall_number: u16) -> Option<&'static Setting> {
    (1..=530)
        .contains(&hall_number)
        .then(|| &table::SETTINGS[hall_number as usize - 1])
}

/// Index into the table of the standard setting of `number`: the first listed setting, except
/// that origin choice 2 is taken where the group has two origins.
fn standard_index(number: u16) -> Option<usize> {
    static STANDARD: OnceLock<Vec<Option<usize>>> = OnceLock::new();
    let std = STANDARD.get_or_init(|| {
        let mut v = vec![None; 231];
        for (i, s) in table::SETTINGS.iter().enumerate() {
            let n = s.number as usize;
            if v[n].is_none() || s.choice == "2" {
                v[n] = Some(i);
            }
        }
        v
    });
    std.get(number as usize).copied().flatten()
}

/// Removes one pair of matching quotes around a symbol as it may come out of a CIF value.
/// Only a pair is removed: the `"` that ends Hall symbols such as `P 3 2"` is kept.
fn strip_quotes(s: &str) -> &str {
    let s = s.trim();
    for q in ['\'', '"'] {
        if s.len() >= 2 && s.starts_with(q) && s.ends_with(q) {
            return s[1..s.len() - 1].trim();
        }
    }
    s
}

/// Hall symbol in comparable form: lower case, single spaces, no quotes around it. Spaces are
/// significant in Hall symbols (`P 32` is P 3_2, `P 3 2` is P 3 1 2) and are kept as one.
///
/// Two slips seen in files are repaired: a missing space after the lattice symbol (`-I2yc` for
/// `-I 2yc`) and a space before the `"` of a two-fold axis (`-R 3 2 "`).
pub fn normalise_hall(hall: &str) -> String {
    let s = crate::text::ascii_minus(strip_quotes(hall))
        .split_whitespace()
        .collect::<Vec<_>>()
        .join(" ")
        .to_lowercase()
        .replace(" \"", "\"");
    let mut chars: Vec<char> = s.chars().collect();
    let lattice_end = if chars.first() == Some(&'-') { 2 } else { 1 };
    if chars.len() > lattice_end
        && "pabcirstf".contains(chars[lattice_end - 1])
        && chars[lattice_end] != ' '
    {
        chars.insert(lattice_end, ' ');
    }
    chars.into_iter().collect()
}

/// Looks up a setting by Hall symbol (case and spacing insensitive).
///
/// Runs of spaces count as one space and surrounding quotes are ignored; the symbol must
/// otherwise be spelled as in the table (`-P 2ac 2n`, `F 4d 2 3 -1d`, `P 31 2 (0 0 4)`).
/// Three pairs of settings of group 68 share one Hall symbol and identical operations; the first
/// is returned.
pub fn from_hall(hall: &str) -> Option<SpaceGroup> {
    let key = normalise_hall(hall);
    table::SETTINGS
        .iter()
        .find(|s| normalise_hall(s.hall) == key)
        .map(Setting::space_group)
}

/// A Hermann-Mauguin symbol reduced for comparison: no spaces, no underscores or parentheses
/// around screw subscripts (`2_1` = `2(1)` = `21`), lower case. `P 21/n 21/m 21/a`,
/// `P2_1/n2_1/m2_1/a` and `P2(1)/n2(1)/m2(1)/a` give the same string.
pub fn compact_hm(s: &str) -> String {
    s.chars()
        .filter(|c| !c.is_whitespace() && !matches!(c, '_' | '(' | ')'))
        .flat_map(char::to_lowercase)
        .collect()
}

/// The setting asked for by a suffix after the Hermann-Mauguin symbol.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum HmSuffix {
    /// `:1`, `:2`, or the trailing `S` (= 1) / `Z` (= 2) some databases write.
    Origin(u8),
    /// `:H` or a trailing `H`: hexagonal axes of a rhombohedral group.
    Hexagonal,
    /// `:R` or a trailing `R`: rhombohedral axes.
    Rhombohedral,
    /// Any other setting code, compared with spglib's (`b1`, `cab`, `1ba-c`), lower case.
    Code(String),
}

/// A Hermann-Mauguin symbol split into its compact body and its setting suffix.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct HmQuery {
    /// See [`compact_hm`].
    pub body: String,
    pub suffix: Option<HmSuffix>,
}

/// Reads a Hermann-Mauguin symbol as people write it.
///
/// - Quotes around it and spacing do not matter; neither do underscores before screw
///   subscripts nor letter case (`P 21/c`, `P2_1/c`, `p 21/C`).
/// - An equation of equivalent symbols (`P 21/c = P 1 21/n 1`) is read by its last member.
/// - A suffix after `:` names the setting (`:1`, `:2`, `:H`, `:R`, or a code such as `:b1`).
///   Without a colon, a final `H`, `R`, `S` or `Z` is also read as a suffix (`R -3 m H`,
///   `F d -3 m Z`, the habit of some structure databases: S = origin choice 1, Z = origin
///   choice 2); these letters never occur inside a Hermann-Mauguin symbol after the lattice
///   letter.
///
/// Returns None for an empty symbol.
pub fn normalise_hm(hm: &str) -> Option<HmQuery> {
    let s = strip_quotes(hm);
    let s = s.rsplit('=').next().unwrap_or(s);
    let (body, suffix) = match s.split_once(':') {
        Some((b, suf)) => (compact_hm(b), Some(compact_hm(suf))),
        None => {
            let b = compact_hm(s);
            let last = b.chars().last();
            match last {
                Some(c @ ('h' | 'r' | 's' | 'z')) if b.len() > 2 => {
                    (b[..b.len() - 1].to_string(), Some(c.to_string()))
                }
                _ => (b, None),
            }
        }
    };
    if body.is_empty() {
        return None;
    }
    let suffix = suffix.filter(|s| !s.is_empty()).map(|s| match s.as_str() {
        "1" | "s" => HmSuffix::Origin(1),
        "2" | "z" => HmSuffix::Origin(2),
        "h" => HmSuffix::Hexagonal,
        "r" => HmSuffix::Rhombohedral,
        _ => HmSuffix::Code(s),
    });
    Some(HmQuery { body, suffix })
}

/// Compact name -> indices of the settings answering to it, in table order.
fn name_index() -> &'static HashMap<String, Vec<usize>> {
    static INDEX: OnceLock<HashMap<String, Vec<usize>>> = OnceLock::new();
    INDEX.get_or_init(|| {
        let mut m: HashMap<String, Vec<usize>> = HashMap::new();
        for (i, s) in table::SETTINGS.iter().enumerate() {
            for n in s.names() {
                m.entry(n).or_default().push(i);
            }
        }
        m
    })
}

fn suffix_matches(s: &Setting, suffix: &HmSuffix) -> bool {
    let first = s.choice.chars().next();
    match suffix {
        HmSuffix::Origin(1) => first == Some('1'),
        HmSuffix::Origin(2) => first == Some('2'),
        HmSuffix::Origin(_) => false,
        HmSuffix::Hexagonal => s.choice == "H",
        HmSuffix::Rhombohedral => s.choice == "R",
        HmSuffix::Code(c) => s.choice.eq_ignore_ascii_case(c),
    }
}

/// Looks up a setting by Hermann-Mauguin symbol (any spacing, with or without setting suffix
/// `:1`, `:2`, `:H`, `:R`, and the usual full/short forms). Without a suffix the standard
/// setting of the International Tables is taken (origin choice 2, hexagonal axes).
///
/// Accepted forms, besides full and short symbols of every setting (`P n m a`,
/// `P 21/n 21/m 21/a`, `P b n m`, `P 1 21/c 1`, `P 21/n`): the old symbols of groups 39, 41,
/// 64, 67 and 68 before the `e` glide (`C m c a`, `C c m b`), the old cubic symbols without
/// the bar (`F d 3 m`, `P m 3 m`, `I a 3 d`), and the suffixes of [`normalise_hm`].
///
/// When a symbol fits several settings and no suffix decides, the choice is: the standard
/// setting; else origin choice 2 or hexagonal axes; else unique axis b (`P 21/a` is
/// `P 1 21/a 1`); else the first in table order. An origin suffix on a group with a single
/// origin is ignored; any other suffix that fits none of the settings named by the symbol gives
/// None, as does an unknown symbol.
pub fn from_hm(hm: &str) -> Option<SpaceGroup> {
    let q = normalise_hm(hm)?;
    let cands = name_index().get(&q.body)?;
    let pool: Vec<&Setting> = cands.iter().map(|&i| &table::SETTINGS[i]).collect();
    // an origin suffix on a group with one origin says nothing (`P 42/m m c S` in some files)
    let has_origins = pool.iter().any(|s| s.choice.starts_with(['1', '2']));
    let pool: Vec<&Setting> = match &q.suffix {
        Some(HmSuffix::Origin(_)) if !has_origins => pool,
        Some(suf) => pool
            .into_iter()
            .filter(|s| suffix_matches(s, suf))
            .collect(),
        None => pool,
    };
    let rank = |s: &Setting| -> (u8, u16) {
        let r = if s.is_standard() {
            0
        } else if s.choice.starts_with('2') || s.choice == "H" {
            1
        } else if s.choice.starts_with('b') {
            2
        } else {
            3
        };
        (r, s.hall_number)
    };
    pool.into_iter()
        .min_by_key(|s| rank(s))
        .map(Setting::space_group)
}

/// The standard setting of space group `number` (1-230).
pub fn from_number(number: u16) -> Option<SpaceGroup> {
    standard_index(number).map(|i| table::SETTINGS[i].space_group())
}

/// An operation as comparable integers: rotation, translation in 24ths reduced into [0, 24).
/// None when a translation component is not within 1e-3 of a multiple of 1/24 (a value such as
/// 0.3333 written with four decimals still counts as 1/3).
fn op_key(op: &SymOp) -> Option<([i32; 9], [u8; 3])> {
    let mut t = [0u8; 3];
    for k in 0..3 {
        let x = op.trans[k] * 24.0;
        let n = x.round();
        if (x - n).abs() > 24.0e-3 {
            return None;
        }
        t[k] = (n as i64).rem_euclid(24) as u8;
    }
    let r = &op.rot;
    let rot = [
        r[(0, 0)],
        r[(0, 1)],
        r[(0, 2)],
        r[(1, 0)],
        r[(1, 1)],
        r[(1, 2)],
        r[(2, 0)],
        r[(2, 1)],
        r[(2, 2)],
    ];
    Some((rot, t))
}

fn table_keys() -> &'static Vec<Vec<([i32; 9], [u8; 3])>> {
    static KEYS: OnceLock<Vec<Vec<([i32; 9], [u8; 3])>>> = OnceLock::new();
    KEYS.get_or_init(|| {
        table::SETTINGS
            .iter()
            .map(|s| {
                let mut k: Vec<_> = s
                    .ops
                    .iter()
                    .map(|o| (o.rot.map(|v| v as i32), o.trans24))
                    .collect();
                k.sort();
                k
            })
            .collect()
    })
}

/// Finds the table setting whose operations equal `ops` (as sets, modulo lattice translations).
///
/// `ops` must be the whole general position, centring translations included, as a CIF lists
/// it; order and repeats do not matter. Translations are compared in 24ths with a tolerance of
/// 1e-3 (so `0.3333` is read as 1/3). Returns None when no setting has exactly these
/// operations: a non-standard origin or cell, a list that is not a group, or a partial list.
pub fn identify(ops: &[SymOp]) -> Option<SpaceGroup> {
    let mut keys = ops.iter().map(op_key).collect::<Option<Vec<_>>>()?;
    keys.sort();
    keys.dedup();
    table_keys()
        .iter()
        .position(|k| *k == keys)
        .map(|i| table::SETTINGS[i].space_group())
}

/// The distinct images of `p` under `ops`, wrapped into [0, 1); images closer than `tol` A
/// (periodic distance) are merged. The first image is `p` itself (wrapped) when `ops` starts
/// with the identity.
pub fn orbit(ops: &[SymOp], p: Frac, lattice: &Lattice, tol: f64) -> Vec<Frac> {
    let mut out: Vec<Frac> = Vec::new();
    for op in ops {
        let q = op.apply(p).wrapped();
        if !out.iter().any(|r| lattice.periodic_distance(*r, q) < tol) {
            out.push(q);
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn normaliser_splits_body_and_suffix() {
        let q = normalise_hm("'F d -3 m :2'").unwrap();
        assert_eq!(q.body, "fd-3m");
        assert_eq!(q.suffix, Some(HmSuffix::Origin(2)));
        let q = normalise_hm("R -3 m H").unwrap();
        assert_eq!(q.body, "r-3m");
        assert_eq!(q.suffix, Some(HmSuffix::Hexagonal));
        let q = normalise_hm("P 2_1/c = P 1 21/n 1").unwrap();
        assert_eq!(q.body, "p121/n1");
        assert_eq!(q.suffix, None);
        let q = normalise_hm("F d -3 m S").unwrap();
        assert_eq!(q.suffix, Some(HmSuffix::Origin(1)));
        let q = normalise_hm("P 1 21/c 1 :b1").unwrap();
        assert_eq!(q.suffix, Some(HmSuffix::Code("b1".into())));
        assert_eq!(normalise_hm("  ''  "), None);
        // short symbols that end in a digit or glide letter are left alone
        assert_eq!(normalise_hm("Pnma").unwrap().suffix, None);
        assert_eq!(normalise_hm("R3").unwrap().body, "r3");
    }

    #[test]
    fn hall_symbols_with_typographic_minus_and_any_first_character_read_without_panic() {
        // A Unicode minus pasted from a PDF is the minus of the Hall symbol (International
        // Tables, vol. B, Hall notation): '−P 4n 2n' is -P 4n 2n, group 136 (P 42/m n m, the
        // rutile group; spglib's table of Hall settings).
        let g = from_hall("\u{2212}P 4n 2n").expect("read as -P 4n 2n");
        assert_eq!(g.number, 136);
        for odd in ["\u{00e9}P 2", "\u{2212}", "\u{1F600}x", "--", "\u{00b5}"] {
            let _ = normalise_hall(odd);
            assert!(from_hall(odd).is_none() || odd == "\u{2212}");
        }
    }

    #[test]
    fn quotes_are_stripped_in_pairs_only() {
        assert_eq!(strip_quotes("'P 3 2\"'"), "P 3 2\"");
        assert_eq!(strip_quotes("P 3 2\""), "P 3 2\"");
        assert_eq!(strip_quotes("\"-P 3 2\"\""), "-P 3 2\"");
        assert_eq!(normalise_hall("  -p   2ac  2N "), "-p 2ac 2n");
    }

    #[test]
    fn every_name_belongs_to_one_space_group_number() {
        for (name, idx) in name_index() {
            let n0 = table::SETTINGS[idx[0]].number;
            assert!(
                idx.iter().all(|&i| table::SETTINGS[i].number == n0),
                "the name {name} fits more than one space group"
            );
        }
    }

    #[test]
    fn standard_settings_follow_the_international_tables() {
        assert_eq!(from_number(14).unwrap().setting().choice, "b1");
        assert_eq!(from_number(227).unwrap().hall_number, 526);
        assert_eq!(from_number(166).unwrap().setting().choice, "H");
        assert_eq!(from_number(68).unwrap().setting().choice, "2");
        assert_eq!(from_number(62).unwrap().hm, "P n m a");
        assert_eq!(from_number(227).unwrap().hm, "F d -3 m :2");
        assert_eq!(from_number(14).unwrap().hm, "P 1 21/c 1");
        assert!(from_number(0).is_none());
        assert!(from_number(231).is_none());
    }

    #[test]
    fn identify_reads_rounded_decimals_and_rejects_a_shifted_origin() {
        let g = from_hm("P 31 2 1").unwrap();
        let rounded: Vec<SymOp> = g
            .ops
            .iter()
            .map(|o| SymOp {
                rot: o.rot,
                trans: o.trans.map(|t| (t * 1e4).round() / 1e4),
            })
            .collect();
        assert_eq!(identify(&rounded).unwrap().hall_number, g.hall_number);
        // P -1 with the inversion centre at (1/4, 0, 0) is not a table setting
        let shifted = vec![SymOp::identity(), SymOp::parse_xyz("-x+1/2,-y,-z").unwrap()];
        assert!(identify(&shifted).is_none());
        // the first three operations of P 31 2 1 are the subgroup P 31, itself a table setting
        assert_eq!(identify(&g.ops[..3]).unwrap().number, 144);
        // two of them (x,y,z and the 3-fold screw) are not closed: no setting
        assert!(identify(&g.ops[..2]).is_none());
    }
}
