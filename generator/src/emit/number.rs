//! Exact rationals as source-code literals.
//!
//! A constant is rounded once, from the exact rational to the nearest binary number
//! of the target precision, and printed with the shortest decimal that reads back to
//! that same number (at most 17 significant digits in double, 9 in single): exactly
//! enough, and no noise digits in review diffs.

use crate::exact::Q;
use num_traits::{Signed, ToPrimitive};

/// Target floating-point precision.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Precision {
    F32,
    F64,
}

impl Precision {
    /// Bytes of one real.
    pub fn bytes(self) -> usize {
        match self {
            Precision::F32 => 4,
            Precision::F64 => 8,
        }
    }

    /// Bounds of the moments' Miller recurrence, as C literals: a value beyond the
    /// first is scaled by the second, far from overflow and underflow.
    pub fn rescale_bounds(self) -> (&'static str, &'static str) {
        match self {
            Precision::F64 => ("1e200", "1e-200"),
            Precision::F32 => ("1e30f", "1e-30f"),
        }
    }

    /// Unit roundoff `u` of round-to-nearest: half the gap between 1 and the next number.
    pub fn unit_roundoff(self) -> f64 {
        match self {
            Precision::F32 => f64::from(f32::EPSILON) / 2.0,
            Precision::F64 => f64::EPSILON / 2.0,
        }
    }
}

/// What a constant that is not finite at the target precision prints as: no language
/// reads it, and [`super::emit`] refuses any output that holds it, so a model whose
/// numbers overflow never reaches disk as code that does not compile (or, worse, does).
pub const NON_FINITE: &str = "ARCWRIGHT_NON_FINITE_CONSTANT";

/// `x` as a literal that reads back exactly: always with a `.` or an exponent.
pub fn f64_literal(x: f64) -> String {
    if !x.is_finite() {
        return NON_FINITE.into();
    }
    let a = x.abs();
    let s = if a != 0.0 && !(1e-4..1e16).contains(&a) {
        format!("{x:e}")
    } else {
        format!("{x}")
    };
    if s.contains(['.', 'e', 'N', 'i']) {
        s
    } else {
        format!("{s}.0")
    }
}

fn f32_literal(x: f32) -> String {
    if !x.is_finite() {
        return NON_FINITE.into();
    }
    let a = x.abs();
    let s = if a != 0.0 && !(1e-4..1e9).contains(&a) {
        format!("{x:e}")
    } else {
        format!("{x}")
    };
    if s.contains(['.', 'e']) {
        s
    } else {
        format!("{s}.0")
    }
}

/// The literal of an exact constant at the given precision (`f` suffix in single).
pub fn literal(q: &Q, precision: Precision) -> String {
    let x = q.to_f64().unwrap_or(f64::NAN);
    match precision {
        Precision::F64 => f64_literal(x),
        Precision::F32 => match f32_literal(rational_to_f32(q, x)) {
            s if s == NON_FINITE => s,
            s => format!("{s}f"),
        },
    }
}

/// A C literal (`literal`) as Rust spells it: without single precision's `f` suffix,
/// the digits typed by their context (every value of the emitted crate is a `Real`,
/// so an unsuffixed literal is an `f32` there, and one in the wrong place fails to
/// compile); anything else is unchanged (double literals, names, the sentinel).
pub fn rust_spelling(c: String) -> String {
    let numeric = c.starts_with(|ch: char| ch.is_ascii_digit() || ch == '-' || ch == '.');
    match c.strip_suffix('f') {
        Some(body) if numeric => body.to_string(),
        _ => c,
    }
}

/// Nearest `f32` to `q`: the nearest double rounded again is off by one unit only in
/// a double-rounding tie, which is resolved here against the exact value.
fn rational_to_f32(q: &Q, x: f64) -> f32 {
    let y = x as f32;
    if !y.is_finite() || y == 0.0 {
        return y;
    }
    let exact = |v: f32| -> Q { Q::from_float(v as f64).unwrap_or_default() };
    let down = f32::from_bits(y.to_bits() - 1);
    let up = f32::from_bits(y.to_bits() + 1);
    let mut best = y;
    let mut err = (exact(y) - q).abs();
    for c in [down, up] {
        let e = (exact(c) - q).abs();
        if e < err {
            best = c;
            err = e;
        }
    }
    best
}

/// A golden value in 15 significant digits: stable against last-bit differences of
/// the platform's math library, and within a third of the 1.4e-14 test tolerance.
pub fn golden_literal(x: f64) -> String {
    if !x.is_finite() {
        return NON_FINITE.into();
    }
    if x == 0.0 {
        return "0.0".into();
    }
    let s = format!("{x:.14e}");
    // 1.23400000000000e-3 -> 1.234e-3
    let (mant, exp) = s.split_once('e').unwrap_or((&s, "0"));
    let mant = mant.trim_end_matches('0').trim_end_matches('.');
    let mant = if mant.contains('.') {
        mant.to_string()
    } else {
        format!("{mant}.0")
    };
    if exp == "0" {
        mant
    } else {
        format!("{mant}e{exp}")
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::exact::rat;

    #[test]
    fn literals_read_back() {
        assert_eq!(literal(&rat(1, 2), Precision::F64), "0.5");
        assert_eq!(literal(&rat(3, 1), Precision::F64), "3.0");
        assert_eq!(literal(&rat(1, 3), Precision::F64), "0.3333333333333333");
        assert_eq!(literal(&rat(1, 3), Precision::F32), "0.33333334f");
        assert_eq!(literal(&rat(1, 100_000_000), Precision::F64), "1e-8");
        assert_eq!(literal(&rat(-3, 1), Precision::F32), "-3.0f");
        for x in [1.0 / 3.0, 2.5e-7, -123456.789, 1e300] {
            assert_eq!(f64_literal(x).parse::<f64>().unwrap(), x);
            assert_eq!(
                golden_literal(x).parse::<f64>().unwrap(),
                format!("{x:.14e}").parse::<f64>().unwrap()
            );
        }
        assert_eq!(golden_literal(0.25), "2.5e-1");
        for bad in [f64::NAN, f64::INFINITY, -f64::INFINITY] {
            assert_eq!(f64_literal(bad), NON_FINITE);
            assert_eq!(golden_literal(bad), NON_FINITE);
        }
        assert_eq!(literal(&rat(10, 1).pow(40), Precision::F32), NON_FINITE);
        assert_eq!(literal(&rat(10, 1).pow(40), Precision::F64), "1e40");
    }
}
