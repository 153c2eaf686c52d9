//! Exact canonical forms of one segment's local integrals.
//!
//! Inside a segment every quantity the dynamics need is a polynomial in the segment's
//! higher curvature coordinates `q_{j,1..m}`, linear in the Legendre moments
//! `Re ν_n(a)`, `Im ν_n(a)` (or free of them), with rational coefficients. Keeping it
//! in this canonical form lets the derivation differentiate exactly and collect terms
//! before anything is lowered into the program.

use crate::exact::Q;
use num_traits::{One, Zero};
use std::collections::BTreeMap;

/// A monomial in the local coordinates `q_{j,1..8}`: 8 bits of exponent per slot,
/// slot `i − 1` for `q_{j,i}`. Exponents stay below 2N + 3 ≤ 23.
pub type Mono = u64;

pub const MONO_ONE: Mono = 0;

/// The unit monomial `q_{j,i}` (i ≥ 1).
pub fn mono_unit(i: usize) -> Mono {
    1u64 << (8 * (i - 1))
}

/// Exponent of `q_{j,i}` (i ≥ 1) in a monomial.
pub fn mono_exp(m: Mono, i: usize) -> u32 {
    ((m >> (8 * (i - 1))) & 0xff) as u32
}

/// Multiplication of monomials is addition of packed exponents.
pub fn mono_mul(a: Mono, b: Mono) -> Mono {
    a + b
}

/// What a term multiplies besides its monomial: 1, `Re ν_n` or `Im ν_n`.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub enum Atom {
    One,
    NuRe(u16),
    NuIm(u16),
}

/// `Σ coef · monomial · atom`, real-valued.
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub struct LinForm {
    pub terms: BTreeMap<(Mono, Atom), Q>,
}

impl LinForm {
    pub fn new() -> Self {
        LinForm::default()
    }

    pub fn is_zero(&self) -> bool {
        self.terms.is_empty()
    }

    pub fn add_term(&mut self, mono: Mono, atom: Atom, coef: &Q) {
        if coef.is_zero() {
            return;
        }
        let key = (mono, atom);
        let sum = match self.terms.get(&key) {
            Some(c) => c + coef,
            None => coef.clone(),
        };
        if sum.is_zero() {
            self.terms.remove(&key);
        } else {
            self.terms.insert(key, sum);
        }
    }

    pub fn add_form(&mut self, other: &LinForm, scale: &Q) {
        for ((m, a), c) in &other.terms {
            self.add_term(*m, *a, &(c * scale));
        }
    }

    /// `∂/∂q_{j,i}` for `i ≥ 1`.
    pub fn derivative_coord(&self, i: usize) -> LinForm {
        let mut out = LinForm::new();
        let unit = mono_unit(i);
        for ((m, a), c) in &self.terms {
            let e = mono_exp(*m, i);
            if e > 0 {
                out.add_term(m - unit, *a, &(c * Q::from_integer(e.into())));
            }
        }
        out
    }

    /// `∂/∂a` through the moments: `ν_n' = i·w_n` with
    /// `w_n = ½ν_n + ((n+1) ν_{n+1} + n ν_{n−1}) / (2(2n+1))`, from `t P̃_n(t)` written on
    /// shifted Legendre polynomials (Bonnet's recursion). So `Re ν_n' = −Im w_n` and
    /// `Im ν_n' = Re w_n`.
    pub fn derivative_a(&self) -> LinForm {
        let mut out = LinForm::new();
        for ((m, a), c) in &self.terms {
            let (n, sign, to_re) = match a {
                Atom::One => continue,
                Atom::NuRe(n) => (*n, -Q::one(), false),
                Atom::NuIm(n) => (*n, Q::one(), true),
            };
            let atom = |k: u16| if to_re { Atom::NuRe(k) } else { Atom::NuIm(k) };
            let c = c * sign;
            let nn = i64::from(n);
            let den = Q::from_integer((2 * (2 * nn + 1)).into());
            out.add_term(*m, atom(n), &(&c / Q::from_integer(2.into())));
            out.add_term(
                *m,
                atom(n + 1),
                &(&c * Q::from_integer((nn + 1).into()) / &den),
            );
            if n > 0 {
                out.add_term(*m, atom(n - 1), &(&c * Q::from_integer(nn.into()) / &den));
            }
        }
        out
    }
}

/// A complex local quantity (a planar vector in the segment's base frame).
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub struct CForm {
    pub re: LinForm,
    pub im: LinForm,
}

impl CForm {
    pub fn new() -> Self {
        CForm::default()
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::exact::{int, rat};

    #[test]
    fn monomials_pack_and_differentiate() {
        let m = mono_mul(mono_unit(1), mono_mul(mono_unit(1), mono_unit(3)));
        assert_eq!(mono_exp(m, 1), 2);
        assert_eq!(mono_exp(m, 3), 1);
        let mut f = LinForm::new();
        f.add_term(m, Atom::One, &int(3));
        let d = f.derivative_coord(1);
        assert_eq!(
            d.terms
                .get(&(mono_mul(mono_unit(1), mono_unit(3)), Atom::One)),
            Some(&int(6))
        );
    }

    #[test]
    fn moment_derivative_of_nu0() {
        // ν_0' = i(½ν_0 + ½ν_1), so (Re ν_0)' = −½ Im ν_0 − ½ Im ν_1.
        let mut f = LinForm::new();
        f.add_term(MONO_ONE, Atom::NuRe(0), &int(1));
        let d = f.derivative_a();
        assert_eq!(d.terms.get(&(MONO_ONE, Atom::NuIm(0))), Some(&rat(-1, 2)));
        assert_eq!(d.terms.get(&(MONO_ONE, Atom::NuIm(1))), Some(&rat(-1, 2)));
    }
}
