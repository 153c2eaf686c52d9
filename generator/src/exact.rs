//! Exact rational helpers for the derivation: factorials, binomials and the change
//! from monomials to shifted Legendre polynomials on [0, 1].
//!
//! Why Legendre: every integral of the model ends as `∫_0^1 p(u) e^{iau} du` for a
//! polynomial `p`. Written on monomials `u^r` this is a long alternating sum of
//! moments whose terms dwarf the result; written on shifted Legendre polynomials
//! `P̃_n` it is `Σ c_n ν_n(a)` with bounded `c_n` and rapidly decaying `ν_n`, which
//! double precision evaluates to the last few bits.

use num_bigint::BigInt;
use num_rational::BigRational;
use num_traits::{One, Zero};

pub type Q = BigRational;

/// `n / d` as an exact rational.
pub fn rat(n: i64, d: i64) -> Q {
    Q::new(BigInt::from(n), BigInt::from(d))
}

/// An integer as an exact rational.
pub fn int(n: i64) -> Q {
    Q::from_integer(BigInt::from(n))
}

/// Factorials and the monomial-to-Legendre table, grown on demand.
#[derive(Default)]
pub struct Tables {
    fact: Vec<BigInt>,
    /// `to_legendre[e][n] = (2n+1) ∫_0^1 u^e P̃_n(u) du`, the n-th shifted-Legendre
    /// coefficient of `u^e`.
    to_legendre: Vec<Vec<Q>>,
}

impl Tables {
    pub fn new() -> Self {
        Tables::default()
    }

    pub fn factorial(&mut self, n: usize) -> BigInt {
        if self.fact.is_empty() {
            self.fact.push(BigInt::one());
        }
        while self.fact.len() <= n {
            let k = self.fact.len();
            let next = &self.fact[k - 1] * BigInt::from(k);
            self.fact.push(next);
        }
        self.fact[n].clone()
    }

    pub fn binomial(&mut self, n: usize, k: usize) -> BigInt {
        if k > n {
            return BigInt::zero();
        }
        self.factorial(n) / (self.factorial(k) * self.factorial(n - k))
    }

    /// Row `e` of the monomial-to-Legendre table: coefficients of `u^e` on `P̃_0..P̃_e`.
    ///
    /// Uses `∫_0^1 u^e P̃_n(u) du = e!² / ((e+n+1)! (e−n)!)` for `n ≤ e` (Rodrigues'
    /// formula and repeated integration by parts); the coefficients are positive.
    fn legendre_row(&mut self, e: usize) -> &[Q] {
        while self.to_legendre.len() <= e {
            let r = self.to_legendre.len();
            let fe = self.factorial(r);
            let mut row = Vec::with_capacity(r + 1);
            for n in 0..=r {
                let num = &fe * &fe * BigInt::from(2 * n + 1);
                let den = self.factorial(r + n + 1) * self.factorial(r - n);
                row.push(Q::new(num, den));
            }
            self.to_legendre.push(row);
        }
        &self.to_legendre[e]
    }

    /// Shifted-Legendre coefficients of the polynomial with monomial coefficients
    /// `p` (lowest power first): `p(u) = Σ_n c_n P̃_n(u)`. Trailing zeros trimmed.
    pub fn to_legendre(&mut self, p: &[Q]) -> Vec<Q> {
        let mut out = vec![Q::zero(); p.len()];
        for (e, pe) in p.iter().enumerate() {
            if pe.is_zero() {
                continue;
            }
            let row = self.legendre_row(e).to_vec();
            for (n, c) in row.iter().enumerate() {
                out[n] += pe * c;
            }
        }
        while out.len() > 1 && out.last().is_some_and(Zero::is_zero) {
            out.pop();
        }
        out
    }
}

/// Monomial coefficients of `Ρ(v) = ∫_v^1 p(σ) dσ` for `p` given by monomial
/// coefficients: the weight a point at `v` sees from everything beyond it.
pub fn tail_integral(p: &[Q]) -> Vec<Q> {
    let mut out = vec![Q::zero(); p.len() + 1];
    for (c, pc) in p.iter().enumerate() {
        let term = pc / int(c as i64 + 1);
        out[0] += &term;
        out[c + 1] -= term;
    }
    out
}

/// `∫_0^1 p(σ) dσ` for monomial coefficients `p`.
pub fn integral01(p: &[Q]) -> Q {
    p.iter()
        .enumerate()
        .fold(Q::zero(), |acc, (c, pc)| acc + pc / int(c as i64 + 1))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn legendre_round_trip_of_low_monomials() {
        // u = (P̃_0 + P̃_1)/2 and u² = P̃_0/3 + P̃_1/2 + P̃_2/6, with P̃_1 = 2u − 1 and
        // P̃_2 = 6u² − 6u + 1 (shifted Legendre polynomials, common practice).
        let mut t = Tables::new();
        assert_eq!(t.to_legendre(&[int(0), int(1)]), vec![rat(1, 2), rat(1, 2)]);
        assert_eq!(
            t.to_legendre(&[int(0), int(0), int(1)]),
            vec![rat(1, 3), rat(1, 2), rat(1, 6)]
        );
    }

    #[test]
    fn tail_integral_of_uniform_weight() {
        // ∫_v^1 dσ = 1 − v
        assert_eq!(tail_integral(&[int(1)]), vec![int(1), int(-1)]);
        assert_eq!(integral01(&[int(1), int(1)]), rat(3, 2));
    }
}
