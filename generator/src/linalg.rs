//! Small dense linear algebra for the solvers (statics): the systems have as many
//! unknowns as the arm has coordinates, a few dozen at most.

use crate::terms::Matrix;

/// Solves `A x = b` by Gaussian elimination with partial pivoting; `None` when `A`
/// is singular to working precision (a pivot below `1e-14` of the largest entry).
pub fn solve(a: &Matrix, b: &[f64]) -> Option<Vec<f64>> {
    let n = b.len();
    let mut m: Vec<Vec<f64>> = a.iter().map(|r| r.to_vec()).collect();
    let mut x = b.to_vec();
    let scale = m
        .iter()
        .flatten()
        .fold(0.0f64, |s, v| s.max(v.abs()))
        .max(f64::MIN_POSITIVE);
    for c in 0..n {
        let p = (c..n).max_by(|&i, &j| m[i][c].abs().total_cmp(&m[j][c].abs()))?;
        if !(m[p][c].abs() > 1e-14 * scale) {
            return None;
        }
        m.swap(c, p);
        x.swap(c, p);
        for r in c + 1..n {
            let f = m[r][c] / m[c][c];
            if f != 0.0 {
                for k in c..n {
                    m[r][k] -= f * m[c][k];
                }
                x[r] -= f * x[c];
            }
        }
    }
    for c in (0..n).rev() {
        let s: f64 = (c + 1..n).map(|k| m[c][k] * x[k]).sum();
        x[c] = (x[c] - s) / m[c][c];
    }
    x.iter().all(|v| v.is_finite()).then_some(x)
}

/// Eigenvalues of the symmetric part `(A + Aᵀ)/2`, ascending, by cyclic Jacobi
/// rotations (accurate to rounding for the small matrices here).
pub fn symmetric_eigenvalues(a: &Matrix) -> Vec<f64> {
    symmetric_eigen(a).0
}

/// Eigenvalues of the symmetric part `(A + Aᵀ)/2`, ascending, and their orthonormal
/// eigenvectors (`vectors[i]` belongs to `values[i]`), by cyclic Jacobi rotations.
pub fn symmetric_eigen(a: &Matrix) -> (Vec<f64>, Vec<Vec<f64>>) {
    let n = a.len();
    let mut v: Vec<Vec<f64>> = (0..n)
        .map(|i| (0..n).map(|j| if i == j { 1.0 } else { 0.0 }).collect())
        .collect();
    let mut m: Vec<Vec<f64>> = (0..n)
        .map(|i| (0..n).map(|j| 0.5 * (a[i][j] + a[j][i])).collect())
        .collect();
    for _sweep in 0..100 {
        let off: f64 = (0..n)
            .flat_map(|i| (0..n).filter(move |&j| j != i).map(move |j| (i, j)))
            .map(|(i, j)| m[i][j] * m[i][j])
            .sum();
        let diag: f64 = (0..n).map(|i| m[i][i] * m[i][i]).sum();
        if off <= 1e-30 * diag.max(f64::MIN_POSITIVE) {
            break;
        }
        for p in 0..n {
            for q in p + 1..n {
                if m[p][q] == 0.0 {
                    continue;
                }
                let theta = (m[q][q] - m[p][p]) / (2.0 * m[p][q]);
                let t = theta.signum() / (theta.abs() + (theta * theta + 1.0).sqrt());
                let t = if theta == 0.0 { 1.0 } else { t };
                let c = 1.0 / (t * t + 1.0).sqrt();
                let s = t * c;
                for k in 0..n {
                    let (mkp, mkq) = (m[k][p], m[k][q]);
                    m[k][p] = c * mkp - s * mkq;
                    m[k][q] = s * mkp + c * mkq;
                }
                for k in 0..n {
                    let (mpk, mqk) = (m[p][k], m[q][k]);
                    m[p][k] = c * mpk - s * mqk;
                    m[q][k] = s * mpk + c * mqk;
                }
                for row in v.iter_mut() {
                    let (vp, vq) = (row[p], row[q]);
                    row[p] = c * vp - s * vq;
                    row[q] = s * vp + c * vq;
                }
            }
        }
    }
    let mut order: Vec<usize> = (0..n).collect();
    order.sort_by(|&i, &j| m[i][i].total_cmp(&m[j][j]));
    let values = order.iter().map(|&i| m[i][i]).collect();
    let vectors = order
        .iter()
        .map(|&i| (0..n).map(|k| v[k][i]).collect())
        .collect();
    (values, vectors)
}

/// `‖v‖₂`.
pub fn norm(v: &[f64]) -> f64 {
    v.iter().map(|x| x * x).sum::<f64>().sqrt()
}

/// An orthonormal basis of the null space of the h×n matrix `s` of full row rank, as
/// n−h columns (returned as rows: `basis[c]` is the c-th vector). Modified
/// Gram–Schmidt, twice, over the rows of `s` and then the unit vectors.
pub fn null_space(s: &Matrix, n: usize) -> Vec<Vec<f64>> {
    let mut basis: Vec<Vec<f64>> = Vec::new();
    let mut range: Vec<Vec<f64>> = Vec::new();
    let reduce = |v: &mut Vec<f64>, against: &[Vec<f64>]| {
        for _ in 0..2 {
            for b in against {
                let d: f64 = v.iter().zip(b).map(|(x, y)| x * y).sum();
                for (x, y) in v.iter_mut().zip(b) {
                    *x -= d * y;
                }
            }
        }
    };
    for row in s {
        let mut v = row.clone();
        reduce(&mut v, &range);
        let l = norm(&v);
        if l > 1e-12 * norm(row) {
            range.push(v.iter().map(|x| x / l).collect());
        }
    }
    for e in 0..n {
        if basis.len() + range.len() == n {
            break;
        }
        let mut v = vec![0.0; n];
        v[e] = 1.0;
        reduce(&mut v, &range);
        reduce(&mut v, &basis);
        let l = norm(&v);
        if l > 1e-8 {
            basis.push(v.iter().map(|x| x / l).collect());
        }
    }
    basis
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn solves_with_pivoting_and_refuses_singular() {
        let a = vec![vec![0.0, 2.0], vec![3.0, 1.0]];
        let x = solve(&a, &[4.0, 5.0]).unwrap();
        assert!(
            (x[0] - 1.0).abs() < 1e-15 && (x[1] - 2.0).abs() < 1e-15,
            "{x:?}"
        );
        assert_eq!(
            solve(&vec![vec![1.0, 2.0], vec![2.0, 4.0]], &[1.0, 2.0]),
            None
        );
    }

    #[test]
    fn eigenvalues_of_a_known_matrix() {
        // [[2, 1], [1, 2]] has eigenvalues 1 and 3; an indefinite one gives a negative.
        let ev = symmetric_eigenvalues(&vec![vec![2.0, 1.0], vec![1.0, 2.0]]);
        assert!(
            (ev[0] - 1.0).abs() < 1e-14 && (ev[1] - 3.0).abs() < 1e-14,
            "{ev:?}"
        );
        let ev = symmetric_eigenvalues(&vec![
            vec![1.0, 2.0, 0.0],
            vec![2.0, 1.0, 0.0],
            vec![0.0, 0.0, 5.0],
        ]);
        assert!(
            (ev[0] + 1.0).abs() < 1e-14 && (ev[2] - 5.0).abs() < 1e-14,
            "{ev:?}"
        );
    }

    #[test]
    fn the_null_space_is_orthonormal_and_orthogonal_to_the_rows() {
        let s = vec![vec![1.0, 0.5, 1.0 / 3.0, 0.0], vec![0.0, 0.0, 0.0, 1.0]];
        let b = null_space(&s, 4);
        assert_eq!(b.len(), 2);
        for (i, v) in b.iter().enumerate() {
            for row in &s {
                assert!(row.iter().zip(v).map(|(a, b)| a * b).sum::<f64>().abs() < 1e-15);
            }
            for (j, w) in b.iter().enumerate() {
                let d: f64 = v.iter().zip(w).map(|(a, b)| a * b).sum();
                assert!((d - if i == j { 1.0 } else { 0.0 }).abs() < 1e-15);
            }
        }
    }
}
