//! Forward dynamics from evaluated terms: solve `B q̈ = A u − C q̇ − G − K q − D q̇`.

use crate::terms::Terms;
use std::fmt;

/// Why forward dynamics could not be computed.
#[derive(Clone, Debug, PartialEq)]
pub enum DynamicsError {
    /// `B` failed its Cholesky factorisation at this pivot: not positive definite.
    NotPositiveDefinite { pivot: usize },
    /// An input or an evaluated term was NaN or infinite.
    NonFinite(&'static str),
}

impl fmt::Display for DynamicsError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            DynamicsError::NotPositiveDefinite { pivot } => {
                write!(
                    f,
                    "inertia matrix is not positive definite (Cholesky pivot {pivot})"
                )
            }
            DynamicsError::NonFinite(what) => write!(f, "{what} is not finite"),
        }
    }
}

impl std::error::Error for DynamicsError {}

fn finite(v: &[f64], what: &'static str) -> Result<(), DynamicsError> {
    if v.iter().all(|x| x.is_finite()) {
        Ok(())
    } else {
        Err(DynamicsError::NonFinite(what))
    }
}

/// The right-hand side `A u − C q̇ − G − K q − D q̇`.
pub fn generalized_force(t: &Terms, q: &[f64], qd: &[f64], u: &[f64]) -> Vec<f64> {
    (0..t.n)
        .map(|i| {
            let mut f = -t.g[i];
            for (k, uk) in u.iter().enumerate() {
                f += t.a[i][k] * uk;
            }
            for k in 0..t.n {
                f -= (t.c[i][k] + t.d[i][k]) * qd[k] + t.k[i][k] * q[k];
            }
            f
        })
        .collect()
}

/// `q̈` at the state the terms were evaluated at.
pub fn forward_dynamics(
    t: &Terms,
    q: &[f64],
    qd: &[f64],
    u: &[f64],
) -> Result<Vec<f64>, DynamicsError> {
    finite(q, "q")?;
    finite(qd, "qd")?;
    finite(u, "u")?;
    let rhs = generalized_force(t, q, qd, u);
    finite(&rhs, "the generalized force")?;
    cholesky_solve(&t.b, &rhs)
}

/// The lower Cholesky factor of symmetric `m`, with its smallest pivot relative to the
/// diagonal entry it came from (what the emitted forward dynamics compares with its
/// `PIVOT_FLOOR`); `Err(i)` at the first pivot that is not positive and finite.
pub fn cholesky_factor(m: &[Vec<f64>]) -> Result<(Vec<Vec<f64>>, f64), usize> {
    let n = m.len();
    let mut l = vec![vec![0.0; n]; n];
    let mut smallest = f64::INFINITY;
    for i in 0..n {
        for j in 0..=i {
            let mut s = m[i][j];
            for k in 0..j {
                s -= l[i][k] * l[j][k];
            }
            if i == j {
                if !(s > 0.0) || !s.is_finite() {
                    return Err(i);
                }
                smallest = smallest.min(s / m[i][i]);
                l[i][i] = s.sqrt();
            } else {
                l[i][j] = s / l[j][j];
            }
        }
    }
    Ok((l, smallest))
}

/// Solves `M x = b` for symmetric positive definite `M` (lower Cholesky factor).
pub fn cholesky_solve(m: &[Vec<f64>], b: &[f64]) -> Result<Vec<f64>, DynamicsError> {
    let n = b.len();
    let (l, _) =
        cholesky_factor(m).map_err(|pivot| DynamicsError::NotPositiveDefinite { pivot })?;
    let mut y = vec![0.0; n];
    for i in 0..n {
        let mut s = b[i];
        for k in 0..i {
            s -= l[i][k] * y[k];
        }
        y[i] = s / l[i][i];
    }
    let mut x = vec![0.0; n];
    for i in (0..n).rev() {
        let mut s = y[i];
        for k in i + 1..n {
            s -= l[k][i] * x[k];
        }
        x[i] = s / l[i][i];
    }
    Ok(x)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn solves_spd_and_rejects_indefinite() {
        let m = vec![vec![4.0, 2.0], vec![2.0, 3.0]];
        let x = cholesky_solve(&m, &[2.0, 1.0]).unwrap();
        assert!((4.0 * x[0] + 2.0 * x[1] - 2.0).abs() < 1e-15);
        assert!((2.0 * x[0] + 3.0 * x[1] - 1.0).abs() < 1e-15);
        let bad = vec![vec![1.0, 2.0], vec![2.0, 1.0]];
        assert_eq!(
            cholesky_solve(&bad, &[1.0, 1.0]),
            Err(DynamicsError::NotPositiveDefinite { pivot: 1 })
        );
    }
}
