//! Scoring the model against reference hosts: published channel dimensions, directions and
//! barriers (structures/reference/references.csv), and barriers from an independent oracle.
//!
//! The predicates here are the ones every check uses, so that a test, the evidence bench and a
//! user scoring their own list judge a result the same way:
//!
//! - **Dimension** of the first network the analysis reports: thresholds within
//!   [`crate::analysis::CHANNEL_MERGE_EV`] of a higher one are that one ([`first_dimension`]).
//! - **Direction**: the directions `[uvw]` (1D) or plane normals `(hkl)` (2D) of every family of
//!   that dimension opening at its threshold ([`directions_at`]), compared with the published one
//!   up to the point-group operations of the structure ([`equivalent_indices`]).
//! - **Barrier error**: the distance from the predicted barrier to the published range (zero
//!   inside it: where published values disagree, any value between them is as good as another),
//!   and, reported beside it, the distance to the range's mid-point ([`range_error`]).

use crate::element::Element;
use crate::error::InputError;
use crate::percolation::Percolation;
use crate::structure::Structure;
use serde::Deserialize;
use std::path::Path;

/// Thresholds closer than this (eV) open together: symmetry-equivalent grid points differ in the
/// last bits of their f32 energies (summation order).
pub const SAME_ENERGY_EV: f32 = 1e-4;

/// One host/ion row of a reference list.
#[derive(Debug, Clone, PartialEq)]
pub struct ReferenceRow {
    /// Line of the row in the file (1-based).
    pub line: usize,
    /// Structure file, relative to the list's folder.
    pub file: String,
    pub ion: Element,
    /// Published dimension of the lowest network (1, 2, 3).
    pub dimension: u8,
    /// Published direction `[uvw]` (1D) or plane normal `(hkl)` (2D).
    pub direction: Option<[i32; 3]>,
    /// Published barrier range (eV), low and high (equal for a single value).
    pub range_ev: Option<(f64, f64)>,
    /// Structural family, for leave-one-family-out scoring.
    pub family: String,
    pub barrier_sources: String,
    pub structure_source: String,
    pub from_memory: bool,
    /// The site the ion really occupies, in the crystallographer's words.
    pub site: String,
    /// A documented model outlier: "over-predicted: reason" or "under-predicted: reason".
    pub outlier: Option<String>,
}

#[derive(Deserialize)]
struct RawRow {
    file: String,
    ion: String,
    dimension: String,
    #[serde(default)]
    direction: String,
    #[serde(default, rename = "barrier_low_eV")]
    low: String,
    #[serde(default, rename = "barrier_high_eV")]
    high: String,
    #[serde(default)]
    barrier_sources: String,
    #[serde(default)]
    structure_source: String,
    #[serde(default)]
    from_memory: String,
    #[serde(default)]
    family: String,
    #[serde(default)]
    site: String,
    #[serde(default)]
    model_outlier: String,
}

/// `[010]`, `(001)`, `[1-10]` -> the three indices.
pub fn parse_indices(text: &str) -> Option<[i32; 3]> {
    let t = text.trim();
    let inner = t
        .strip_prefix('[')
        .and_then(|x| x.strip_suffix(']'))
        .or_else(|| t.strip_prefix('(').and_then(|x| x.strip_suffix(')')))?;
    let mut out = Vec::new();
    let mut chars = inner.chars();
    while let Some(c) = chars.next() {
        let (neg, d) = if c == '-' {
            (true, chars.next()?)
        } else {
            (false, c)
        };
        let v = d.to_digit(10)? as i32;
        out.push(if neg { -v } else { v });
    }
    out.try_into().ok()
}

/// Reads a reference list (CSV with a header; lines starting with `#` are comments). Columns:
/// `file`, `ion`, `dimension`, `direction`, `barrier_low_eV`, `barrier_high_eV`,
/// `barrier_sources`, `structure_source`, `from_memory`, `family`, `site`, `model_outlier`;
/// others are ignored.
pub fn read_reference_rows(path: &Path) -> Result<Vec<ReferenceRow>, InputError> {
    let name = path.display().to_string();
    let mut reader = csv::ReaderBuilder::new()
        .comment(Some(b'#'))
        .flexible(true)
        .from_path(path)
        .map_err(|e| InputError::new(&name, format!("cannot read the list: {e}")))?;
    let mut rows = Vec::new();
    let headers = reader
        .headers()
        .map_err(|e| InputError::new(&name, format!("cannot read the header: {e}")))?
        .clone();
    for rec in reader.records() {
        let rec = rec.map_err(|e| {
            let mut err = InputError::new(&name, format!("{e}"));
            if let Some(p) = e.position() {
                err = err.at(p.line() as usize, 1);
            }
            err
        })?;
        let line = rec.position().map_or(0, |p| p.line() as usize);
        let r: RawRow = rec
            .deserialize(Some(&headers))
            .map_err(|e| InputError::new(&name, format!("{e}")).at(line, 1))?;
        let bad = |what: String| InputError::new(&name, what).at(line, 1);
        let ion = Element::from_symbol(r.ion.trim())
            .ok_or_else(|| bad(format!("'{}' is not an element symbol", r.ion)))?;
        let dimension: u8 = r
            .dimension
            .trim()
            .parse()
            .ok()
            .filter(|d| (1..=3).contains(d))
            .ok_or_else(|| bad(format!("dimension '{}' is not 1, 2 or 3", r.dimension)))?;
        let direction = match r.direction.trim() {
            "" => None,
            t => Some(
                parse_indices(t)
                    .ok_or_else(|| bad(format!("direction '{t}' is not [uvw] or (hkl)")))?,
            ),
        };
        if dimension < 3 && direction.is_none() {
            return Err(bad("1D and 2D rows need a direction".into()));
        }
        let num = |t: &str| -> Result<Option<f64>, InputError> {
            let t = t.trim();
            if t.is_empty() {
                return Ok(None);
            }
            t.parse::<f64>()
                .ok()
                .filter(|x| x.is_finite() && *x >= 0.0)
                .map(Some)
                .ok_or_else(|| bad(format!("'{t}' is not a barrier in eV")))
        };
        let range_ev = match (num(&r.low)?, num(&r.high)?) {
            (Some(a), Some(b)) if a <= b => Some((a, b)),
            (Some(_), Some(_)) => return Err(bad("barrier range reversed".into())),
            (None, None) => None,
            _ => return Err(bad("give both ends of the barrier range".into())),
        };
        rows.push(ReferenceRow {
            line,
            file: r.file.trim().to_string(),
            ion,
            dimension,
            direction,
            range_ev,
            family: r.family.trim().to_string(),
            barrier_sources: r.barrier_sources,
            structure_source: r.structure_source,
            from_memory: r.from_memory.trim() == "yes",
            site: r.site.trim().to_string(),
            outlier: Some(r.model_outlier.trim().to_string()).filter(|s| !s.is_empty()),
        });
    }
    Ok(rows)
}

fn same_energy(a: f32, b: f32) -> bool {
    (a - b).abs() <= SAME_ENERGY_EV
}

/// Dimension of the first network the analysis reports: networks opening within
/// [`crate::analysis::CHANNEL_MERGE_EV`] of a higher-dimensional one count as that one, as in
/// the headline (0 when none opens).
pub fn first_dimension(p: &Percolation) -> u8 {
    crate::analysis::distinct_thresholds(p)
        .first()
        .map_or(0, |t| t.dimension)
}

/// Primitive, first nonzero component positive.
pub fn normalised(v: [i32; 3]) -> [i32; 3] {
    fn gcd(a: i32, b: i32) -> i32 {
        if b == 0 { a.abs() } else { gcd(b, a % b) }
    }
    let g = gcd(gcd(v[0], v[1]), v[2]).max(1);
    let v = v.map(|x| x / g);
    match v.iter().find(|&&x| x != 0) {
        Some(&x) if x < 0 => v.map(|y| -y),
        _ => v,
    }
}

/// Directions (1D) or plane normals (2D) of the families of dimension `d` opening at `E_d`.
pub fn directions_at(p: &Percolation, d: u8) -> Vec<[i32; 3]> {
    let Some(t) = p.threshold(d) else {
        return vec![];
    };
    let mut out: Vec<[i32; 3]> = p
        .families
        .iter()
        .filter(|f| f.dimension == d && same_energy(f.onset, t.energy))
        .map(|f| normalised(f.span.key()))
        .collect();
    let own = normalised(t.channel.span.key());
    if !out.contains(&own) {
        out.push(own);
    }
    out.sort();
    out
}

/// The symmetry-equivalent directions (`plane == false`: u -> W u) or plane normals
/// (`plane == true`: h -> W^T h) of `v` under the rotations of the structure, in its cell.
pub fn equivalent_indices(s: &Structure, v: [i32; 3], plane: bool) -> Vec<[i32; 3]> {
    let mut out: Vec<[i32; 3]> = Vec::new();
    for op in &s.symmetry.ops {
        let w = op.rot;
        let mut r = [0i32; 3];
        for (i, ri) in r.iter_mut().enumerate() {
            *ri = (0..3)
                .map(|j| if plane { w[(j, i)] } else { w[(i, j)] } * v[j])
                .sum();
        }
        let r = normalised(r);
        if !out.contains(&r) {
            out.push(r);
        }
    }
    out.sort();
    out
}

/// True when the first network has the published dimension and, for 1D and 2D, every family
/// opening with it runs along a direction (or in a plane) equivalent to the published one.
pub fn topology_matches(
    s: &Structure,
    p: &Percolation,
    dimension: u8,
    direction: Option<[i32; 3]>,
) -> bool {
    if first_dimension(p) != dimension {
        return false;
    }
    let Some(v) = direction else {
        return true;
    };
    let allowed = equivalent_indices(s, v, dimension == 2);
    let got = directions_at(p, dimension);
    !got.is_empty() && got.iter().all(|g| allowed.contains(g))
}

/// Distance (eV) from a barrier to a published range (0 inside it), and to its mid-point.
pub fn range_error(barrier: f64, (lo, hi): (f64, f64)) -> (f64, f64) {
    let outside = if barrier < lo {
        lo - barrier
    } else if barrier > hi {
        barrier - hi
    } else {
        0.0
    };
    (outside, (barrier - 0.5 * (lo + hi)).abs())
}

/// Spearman rank correlation of paired values (average ranks for ties); None below 3 pairs.
pub fn spearman(pairs: &[(f64, f64)]) -> Option<f64> {
    if pairs.len() < 3 {
        return None;
    }
    fn ranks(v: &[f64]) -> Vec<f64> {
        let mut idx: Vec<usize> = (0..v.len()).collect();
        idx.sort_by(|&a, &b| v[a].total_cmp(&v[b]));
        let mut r = vec![0.0; v.len()];
        let mut i = 0;
        while i < idx.len() {
            let mut j = i;
            while j + 1 < idx.len() && v[idx[j + 1]] == v[idx[i]] {
                j += 1;
            }
            let mean = (i + j) as f64 / 2.0 + 1.0;
            for k in i..=j {
                r[idx[k]] = mean;
            }
            i = j + 1;
        }
        r
    }
    let a: Vec<f64> = pairs.iter().map(|p| p.0).collect();
    let b: Vec<f64> = pairs.iter().map(|p| p.1).collect();
    let (ra, rb) = (ranks(&a), ranks(&b));
    let n = ra.len() as f64;
    let (ma, mb) = (ra.iter().sum::<f64>() / n, rb.iter().sum::<f64>() / n);
    let cov: f64 = ra.iter().zip(&rb).map(|(x, y)| (x - ma) * (y - mb)).sum();
    let va: f64 = ra.iter().map(|x| (x - ma).powi(2)).sum();
    let vb: f64 = rb.iter().map(|y| (y - mb).powi(2)).sum();
    (va > 0.0 && vb > 0.0).then(|| cov / (va * vb).sqrt())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn indices_parse_with_signs() {
        assert_eq!(parse_indices("[1-10]"), Some([1, -1, 0]));
        assert_eq!(parse_indices("(001)"), Some([0, 0, 1]));
        assert_eq!(parse_indices("[01]"), None);
    }

    #[test]
    fn spearman_of_monotone_pairs_is_one() {
        // exact: a strictly increasing relation has rank correlation 1, a decreasing one -1
        let p: Vec<(f64, f64)> = (0..6).map(|i| (i as f64, (i as f64).exp())).collect();
        assert!((spearman(&p).unwrap() - 1.0).abs() < 1e-12);
        let q: Vec<(f64, f64)> = (0..6).map(|i| (i as f64, -(i as f64))).collect();
        assert!((spearman(&q).unwrap() + 1.0).abs() < 1e-12);
    }

    #[test]
    fn range_error_is_zero_inside() {
        assert_eq!(range_error(0.3, (0.2, 0.4)).0, 0.0);
        assert!((range_error(0.5, (0.2, 0.4)).0 - 0.1).abs() < 1e-12);
        assert!((range_error(0.5, (0.2, 0.4)).1 - 0.2).abs() < 1e-12);
    }
}
