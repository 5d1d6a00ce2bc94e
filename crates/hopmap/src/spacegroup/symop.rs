//! Symmetry operations in the `x,y,z` notation of CIF files and the International Tables.

use crate::lattice::Frac;
use nalgebra::{Matrix3, Vector3};
use std::fmt;

/// A crystallographic symmetry operation acting on fractional coordinates:
/// `x' = rot * x + trans`. Rotations are integer matrices; translations are kept in [0, 1).
#[derive(Debug, Clone, PartialEq)]
pub struct SymOp {
    pub rot: Matrix3<i32>,
    pub trans: Vector3<f64>,
}

#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error("symmetry operation '{op}': {reason}")]
pub struct SymOpError {
    pub op: String,
    pub reason: String,
}

impl SymOp {
    pub fn identity() -> Self {
        SymOp {
            rot: Matrix3::identity(),
            trans: Vector3::zeros(),
        }
    }

    pub fn apply(&self, f: Frac) -> Frac {
        Frac(self.rot.map(|v| v as f64) * f.0 + self.trans)
    }

    /// Applies only the rotation part (for displacement vectors).
    pub fn rotate(&self, v: Vector3<f64>) -> Vector3<f64> {
        self.rot.map(|v| v as f64) * v
    }

    /// `self` after `other`: x -> self(other(x)), translation reduced into [0, 1).
    pub fn compose(&self, other: &SymOp) -> SymOp {
        let rot = self.rot * other.rot;
        let trans = (self.rot.map(|v| v as f64) * other.trans + self.trans).map(reduce_translation);
        SymOp { rot, trans }
    }

    /// True when both operations are the same modulo lattice translations.
    pub fn same_modulo_lattice(&self, other: &SymOp) -> bool {
        self.rot == other.rot
            && (self.trans - other.trans)
                .iter()
                .all(|d| (d - d.round()).abs() < 1e-6)
    }

    /// Parses `x,y,z`, `-x+1/2, y, -z+1/2`, `x-y,x,z+0.25`, `+X,+Y,+Z` (any case, spaces,
    /// optional quotes already removed). Translations may be fractions or decimals.
    pub fn parse_xyz(s: &str) -> Result<SymOp, SymOpError> {
        let err = |reason: String| SymOpError {
            op: s.to_string(),
            reason,
        };
        let parts: Vec<&str> = s.split(',').collect();
        if parts.len() != 3 {
            return Err(err(format!(
                "expected 3 comma-separated components, found {}",
                parts.len()
            )));
        }
        let mut rot = Matrix3::<i32>::zeros();
        let mut trans = Vector3::<f64>::zeros();
        for (row, part) in parts.iter().enumerate() {
            let chars: Vec<char> = crate::text::ascii_minus(part)
                .chars()
                .filter(|c| !c.is_whitespace())
                .collect();
            if chars.is_empty() {
                return Err(err(format!("component {} is empty", row + 1)));
            }
            let mut i = 0;
            let mut any = false;
            while i < chars.len() {
                let mut sign = 1.0;
                let mut have_sign = false;
                while i < chars.len() && (chars[i] == '+' || chars[i] == '-') {
                    if chars[i] == '-' {
                        sign = -sign;
                    }
                    have_sign = true;
                    i += 1;
                }
                if i >= chars.len() {
                    return Err(err(format!("component {} ends with a sign", row + 1)));
                }
                if !have_sign && any {
                    return Err(err(format!("missing '+' or '-' in component {}", row + 1)));
                }
                let c = chars[i].to_ascii_lowercase();
                if let Some(col) = "xyz".find(c) {
                    add_coefficient(&mut rot[(row, col)], sign, 1.0).map_err(&err)?;
                    i += 1;
                } else if c.is_ascii_digit() || c == '.' {
                    let start = i;
                    while i < chars.len()
                        && (chars[i].is_ascii_digit() || chars[i] == '.' || chars[i] == '/')
                    {
                        i += 1;
                    }
                    let num: String = chars[start..i].iter().collect();
                    let value = parse_number(&num)
                        .ok_or_else(|| err(format!("cannot read the number '{num}'")))?;
                    // a coefficient times an axis, as in "2x" (rare but legal in some writers)
                    if i < chars.len() && "xyzXYZ".contains(chars[i]) {
                        let col = "xyz".find(chars[i].to_ascii_lowercase()).unwrap();
                        add_coefficient(&mut rot[(row, col)], sign, value).map_err(&err)?;
                        i += 1;
                    } else if i < chars.len() && chars[i] == '*' {
                        i += 1;
                        let col = chars
                            .get(i)
                            .and_then(|c| "xyz".find(c.to_ascii_lowercase()));
                        let col = col.ok_or_else(|| err("expected x, y or z after '*'".into()))?;
                        add_coefficient(&mut rot[(row, col)], sign, value).map_err(&err)?;
                        i += 1;
                    } else {
                        add_translation(&mut trans[row], sign, value).map_err(&err)?;
                    }
                } else {
                    return Err(err(format!("unexpected character '{}'", chars[i])));
                }
                any = true;
            }
        }
        let det = rot.map(|v| v as f64).determinant();
        if (det.abs() - 1.0).abs() > 1e-9 {
            return Err(err(format!(
                "rotation part has determinant {det}, not +1 or -1"
            )));
        }
        Ok(SymOp {
            rot,
            trans: trans.map(reduce_translation),
        })
    }
}

/// The largest coefficient of an axis accepted in a written operation. A rotation of a lattice
/// onto itself has small integer entries in any sensible setting; larger ones are damage.
const MAX_COEFFICIENT: f64 = 12.0;

/// Adds `sign * value` to one entry of the rotation, refusing a coefficient that is not a small
/// integer or a sum that leaves the same range (a written operation is text from a file, so a
/// huge or repeated coefficient is an error, never an overflow).
fn add_coefficient(entry: &mut i32, sign: f64, value: f64) -> Result<(), String> {
    if value.fract() != 0.0 {
        return Err(format!("non-integer coefficient {value}"));
    }
    if value > MAX_COEFFICIENT {
        return Err(format!(
            "coefficient {value} of an axis is outside -{MAX_COEFFICIENT}..{MAX_COEFFICIENT}"
        ));
    }
    let sum = f64::from(*entry) + sign * value;
    if sum.abs() > MAX_COEFFICIENT {
        return Err(format!(
            "the coefficients of one axis add up to {sum}, outside \
             -{MAX_COEFFICIENT}..{MAX_COEFFICIENT}"
        ));
    }
    *entry = sum as i32;
    Ok(())
}

/// The largest translation accepted in a written operation, in cells. The translations of a
/// space group lie within a cell of the origin in every setting in use; a far larger one is
/// damage, and past about 10^15 cells a float no longer holds its fraction, so it would be
/// read as some other translation without a word.
const MAX_TRANSLATION: f64 = 100.0;

/// Adds the translation term `sign * value` to one component, refusing a term or a sum outside
/// -[`MAX_TRANSLATION`]..[`MAX_TRANSLATION`] cells.
fn add_translation(component: &mut f64, sign: f64, value: f64) -> Result<(), String> {
    let sum = *component + sign * value;
    if value > MAX_TRANSLATION || sum.abs() > MAX_TRANSLATION {
        let t = if value > MAX_TRANSLATION {
            sign * value
        } else {
            sum
        };
        // (a number of hundreds of digits in a message helps nobody)
        let t = if t.abs() < 1e6 {
            format!("{t}")
        } else {
            format!("{t:e}")
        };
        return Err(format!(
            "translation {t} is outside -{MAX_TRANSLATION}..{MAX_TRANSLATION} cells"
        ));
    }
    *component = sum;
    Ok(())
}

/// Reads `n`, `n.m` or `n/m`; `None` for text that is not a finite number (or a zero
/// denominator), so that no infinite or undefined translation enters an operation.
fn parse_number(s: &str) -> Option<f64> {
    let value = if let Some((n, d)) = s.split_once('/') {
        let (n, d): (f64, f64) = (n.parse().ok()?, d.parse().ok()?);
        if d == 0.0 {
            return None;
        }
        n / d
    } else {
        s.parse().ok()?
    };
    value.is_finite().then_some(value)
}

/// Reduces a translation component into [0, 1), snapping values within 1e-6 of a multiple of
/// 1/24 (every crystallographic translation is one) to that multiple.
pub fn reduce_translation(t: f64) -> f64 {
    let snapped = (t * 24.0).round() / 24.0;
    let t = if (t - snapped).abs() < 1e-6 {
        snapped
    } else {
        t
    };
    crate::lattice::wrap_unit(t)
}

impl fmt::Display for SymOp {
    /// Writes the operation in `x,y,z` form with fractional translations (`-x+1/2,y,-z`).
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let mut out = Vec::with_capacity(3);
        for row in 0..3 {
            let mut s = String::new();
            for (col, axis) in ['x', 'y', 'z'].iter().enumerate() {
                let v = self.rot[(row, col)];
                match v {
                    0 => {}
                    1 => s.push_str(if s.is_empty() { "" } else { "+" }),
                    -1 => s.push('-'),
                    v if v > 0 => {
                        s.push_str(&format!("{}{v}*", if s.is_empty() { "" } else { "+" }))
                    }
                    v => s.push_str(&format!("{v}*")),
                }
                if v != 0 {
                    s.push(*axis);
                }
            }
            let t = self.trans[row];
            if t.abs() > 1e-9 {
                let n24 = (t * 24.0).round() as i64;
                if ((n24 as f64) / 24.0 - t).abs() < 1e-9 {
                    let g = gcd(n24, 24);
                    s.push_str(&format!("+{}/{}", n24 / g, 24 / g));
                } else {
                    s.push_str(&format!("+{t:.6}"));
                }
            }
            if s.is_empty() {
                s.push('0');
            }
            out.push(s);
        }
        f.write_str(&out.join(","))
    }
}

fn gcd(a: i64, b: i64) -> i64 {
    if b == 0 { a.abs() } else { gcd(b, a % b) }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn parses_the_usual_forms() {
        let op = SymOp::parse_xyz("-x+1/2, y, -z+1/2").unwrap();
        assert_eq!(op.rot, Matrix3::new(-1, 0, 0, 0, 1, 0, 0, 0, -1));
        assert!((op.trans - Vector3::new(0.5, 0.0, 0.5)).norm() < 1e-12);
        let op = SymOp::parse_xyz("x-y,+X,z+0.25").unwrap();
        assert_eq!(op.rot, Matrix3::new(1, -1, 0, 1, 0, 0, 0, 0, 1));
        assert!((op.trans[2] - 0.25).abs() < 1e-12);
        let op = SymOp::parse_xyz("1/2+x,1/2-y,-z").unwrap();
        assert!((op.trans - Vector3::new(0.5, 0.5, 0.0)).norm() < 1e-12);
        let op = SymOp::parse_xyz("-x-1/3,y,z").unwrap();
        assert!((op.trans[0] - 2.0 / 3.0).abs() < 1e-12);
    }

    #[test]
    fn rejects_nonsense() {
        assert!(SymOp::parse_xyz("x,y").is_err());
        assert!(SymOp::parse_xyz("x,y,q").is_err());
        assert!(SymOp::parse_xyz("x,x,z").is_err());
        assert!(SymOp::parse_xyz("x,y,z+1/0").is_err());
        // damaged text from a file: huge, repeated or infinite coefficients are errors, never an
        // overflow (found by fuzzing the reader)
        assert!(SymOp::parse_xyz("99999999999x,y,z").is_err());
        assert!(SymOp::parse_xyz("2147483647*x+x,y,z").is_err());
        assert!(SymOp::parse_xyz(&format!("{},y,z", "x+".repeat(20) + "x")).is_err());
        assert!(SymOp::parse_xyz(&format!("x,y,z+{}", "9".repeat(400))).is_err());
        // finite, but far beyond any translation of a space group (and beyond what a float
        // holds to the fraction): refused, where it was once read as some other translation
        assert!(SymOp::parse_xyz(&format!("x,y,z+{}", "9".repeat(300))).is_err());
        assert!(SymOp::parse_xyz("x,y,z+1000000000000000000.5").is_err());
        assert!(SymOp::parse_xyz("x,y+101,z").is_err());
        assert!(SymOp::parse_xyz("x,y+60+60,z").is_err());
        assert_eq!(
            SymOp::parse_xyz("x+99/2,y-3/2,z+1").unwrap(),
            SymOp::parse_xyz("x+1/2,y+1/2,z").unwrap()
        );
        assert!(SymOp::parse_xyz("1.5x,y,z").is_err());
        assert!(SymOp::parse_xyz("1.5*x,y,z").is_err());
        // a legal coefficient still reads
        assert_eq!(SymOp::parse_xyz("2x-x,y,z").unwrap(), SymOp::identity());
    }

    #[test]
    fn display_round_trips() {
        for s in ["-x+1/2,y,-z+1/2", "x-y,x,z+1/6", "-y,x-y,z+2/3", "x,y,z"] {
            let op = SymOp::parse_xyz(s).unwrap();
            assert_eq!(
                SymOp::parse_xyz(&op.to_string()).unwrap(),
                op,
                "{s} -> {op}"
            );
        }
    }
}
