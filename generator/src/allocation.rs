//! Input allocation: the inputs `u` that produce wanted generalised forces `M u = b`
//! within the actuators' limits, with the smallest norm when several do.
//!
//! Every command that chooses inputs goes through [`allocate`]: `statics --hold` and
//! `--tip` (with `M = S A(q)`, `b = S (K q + G)`), and both regulators. Tendons pull
//! only, so their lower bound is the pretension: an antagonistic pair then shares the
//! work with one tendon at its pretension and the other carrying the difference.
//!
//! The problem is the box-constrained, strictly convex quadratic programme
//! `min ½‖M u − b‖² + ½ μ ‖u‖²` over `lo ≤ u ≤ hi`, solved by a primal active-set
//! method (each iteration fixes or frees one input; the objective falls strictly, so a
//! set never repeats and the loop ends). The small `μ = 1e-12 · tr(MᵀM)/k` makes the
//! solution unique when inputs outnumber equations; afterwards the free inputs are
//! *polished* to the exact minimum-norm solution of `M_F u_F = b − M_B u_B` when the
//! free columns have full row rank, so a feasible target is met to rounding and not
//! to `μ`. When the limits do not allow `M u = b`, the result is the nearest the
//! limits allow in the least-squares sense and `shortfall = b − M u` says by how much.
//!
//! The emitted `regulate` functions follow this algorithm step for step.

use crate::arm::InputLimits;
use crate::linalg::norm;
use crate::terms::Matrix;

/// Most active-set iterations: each fixes or frees one input; the cap is a guard.
pub fn max_iterations(k: usize) -> usize {
    4 * k + 8
}

/// Relative regularisation of the normal equations.
pub const REGULARISATION: f64 = 1e-12;

/// Smallest Cholesky pivot of the free columns' Gram matrix, relative to its largest
/// diagonal entry, for which the minimum-norm polish is used.
pub const POLISH_PIVOT: f64 = 1e-10;

/// Solves the symmetric `a x = b` by Cholesky, `None` when a pivot is at most
/// `floor` times the largest diagonal entry (or not finite). Written as the emitted
/// regulators write it, loop for loop.
pub fn cholesky_solve_checked(a: &Matrix, b: &[f64], floor: f64) -> Option<Vec<f64>> {
    let h = b.len();
    let top = (0..h).map(|i| a[i][i]).fold(0.0f64, f64::max);
    let mut l = vec![vec![0.0; h]; h];
    for i in 0..h {
        for j in 0..=i {
            let mut s = a[i][j];
            for c in 0..j {
                s -= l[i][c] * l[j][c];
            }
            if i == j {
                if !(s > floor * top) {
                    return None;
                }
                l[i][i] = s.sqrt();
            } else {
                l[i][j] = s / l[j][j];
            }
        }
    }
    let mut x = b.to_vec();
    for i in 0..h {
        for c in 0..i {
            x[i] -= l[i][c] * x[c];
        }
        x[i] /= l[i][i];
    }
    for i in (0..h).rev() {
        for c in i + 1..h {
            x[i] -= l[c][i] * x[c];
        }
        x[i] /= l[i][i];
    }
    Some(x)
}

/// The chosen inputs and what they leave undone.
#[derive(Clone, Debug, PartialEq)]
pub struct Allocation {
    pub u: Vec<f64>,
    /// `b − M u`: zero (to rounding) when the limits allow the target.
    pub shortfall: Vec<f64>,
    /// Which inputs sit at a limit.
    pub at_limit: Vec<bool>,
}

impl Allocation {
    /// Whether `M u = b` holds to `tolerance` relative to `‖b‖` (and an absolute floor).
    pub fn met(&self, b: &[f64], tolerance: f64) -> bool {
        norm(&self.shortfall) <= tolerance * (norm(b) + 1e-300)
    }
}

/// The inputs `lo ≤ u ≤ hi` that come nearest to `M u = b` (h×k `m`), of least norm.
pub fn allocate(m: &[Vec<f64>], b: &[f64], limits: &[InputLimits]) -> Allocation {
    let k = limits.len();
    let h = b.len();
    debug_assert!(m.len() == h && m.iter().all(|r| r.len() == k));
    // Normal equations H u = f with H = MᵀM + μI.
    let mut hess = vec![vec![0.0; k]; k];
    let mut f = vec![0.0; k];
    for row in 0..h {
        for i in 0..k {
            f[i] += m[row][i] * b[row];
            for j in 0..k {
                hess[i][j] += m[row][i] * m[row][j];
            }
        }
    }
    let trace: f64 = (0..k).map(|i| hess[i][i]).sum();
    let mu = if trace > 0.0 {
        REGULARISATION * trace / k as f64
    } else {
        1.0
    };
    for (i, r) in hess.iter_mut().enumerate() {
        r[i] += mu;
    }
    // Feasible start: every input at the point of its range nearest 0; those moved
    // there (a pretension) start fixed.
    let mut u: Vec<f64> = limits.iter().map(|l| 0.0f64.clamp(l.lo, l.hi)).collect();
    let mut fixed: Vec<bool> = u.iter().map(|v| *v != 0.0).collect();
    for _ in 0..max_iterations(k) {
        let Some(target) = free_optimum(&hess, &f, &u, &fixed) else {
            break;
        };
        // Walk from u toward the free optimum until an input meets a limit.
        let mut alpha = 1.0f64;
        let mut blocking = None;
        for i in (0..k).filter(|i| !fixed[*i]) {
            let d = target[i] - u[i];
            let bound = if d < 0.0 { limits[i].lo } else { limits[i].hi };
            if d != 0.0 && bound.is_finite() {
                let reach = (bound - u[i]) / d;
                if reach < alpha {
                    alpha = reach.max(0.0);
                    blocking = Some((i, bound));
                }
            }
        }
        for i in (0..k).filter(|i| !fixed[*i]) {
            u[i] += alpha * (target[i] - u[i]);
        }
        if let Some((i, bound)) = blocking {
            u[i] = bound;
            fixed[i] = true;
            continue;
        }
        // At the optimum of this set: free the fixed input whose multiplier has the
        // wrong sign (the gradient pushes it back inside), if any.
        let grad: Vec<f64> = (0..k)
            .map(|i| (0..k).map(|j| hess[i][j] * u[j]).sum::<f64>() - f[i])
            .collect();
        let scale = norm(&f) + trace.sqrt() * norm(&u) + f64::MIN_POSITIVE;
        let release = (0..k)
            .filter(|i| fixed[*i])
            .map(|i| {
                let wrong = if u[i] <= limits[i].lo {
                    -grad[i]
                } else {
                    grad[i]
                };
                (i, wrong)
            })
            .filter(|(_, w)| *w > 1e-14 * scale)
            .max_by(|a, b| a.1.total_cmp(&b.1));
        match release {
            Some((i, _)) => fixed[i] = false,
            None => break,
        }
    }
    polish(m, b, limits, &mut u, &fixed);
    let shortfall: Vec<f64> = (0..h)
        .map(|r| b[r] - (0..k).map(|i| m[r][i] * u[i]).sum::<f64>())
        .collect();
    let at_limit = (0..k)
        .map(|i| u[i] <= limits[i].lo || u[i] >= limits[i].hi)
        .collect();
    Allocation {
        u,
        shortfall,
        at_limit,
    }
}

/// The minimiser over the free inputs with the fixed ones held: `H_FF u_F = f_F − H_FB u_B`.
fn free_optimum(hess: &Matrix, f: &[f64], u: &[f64], fixed: &[bool]) -> Option<Vec<f64>> {
    let free: Vec<usize> = (0..u.len()).filter(|i| !fixed[*i]).collect();
    let mut out = u.to_vec();
    if free.is_empty() {
        return Some(out);
    }
    let a: Matrix = free
        .iter()
        .map(|&i| free.iter().map(|&j| hess[i][j]).collect())
        .collect();
    let rhs: Vec<f64> = free
        .iter()
        .map(|&i| {
            f[i] - (0..u.len())
                .filter(|j| fixed[*j])
                .map(|j| hess[i][j] * u[j])
                .sum::<f64>()
        })
        .collect();
    // H_FF is symmetric positive definite (μ > 0): Cholesky, as the emitted code.
    let x = cholesky_solve_checked(&a, &rhs, 0.0)?;
    for (c, &i) in free.iter().enumerate() {
        out[i] = x[c];
    }
    Some(out)
}

/// Replaces the free inputs by the exact minimum-norm solution of
/// `M_F u_F = b − M_B u_B`, `u_F = M_Fᵀ (M_F M_Fᵀ)⁻¹ r`, when `M_F M_Fᵀ` is well
/// conditioned and the result stays within the limits.
fn polish(m: &[Vec<f64>], b: &[f64], limits: &[InputLimits], u: &mut [f64], fixed: &[bool]) {
    let h = b.len();
    let free: Vec<usize> = (0..u.len()).filter(|i| !fixed[*i]).collect();
    if free.len() < h || h == 0 {
        return;
    }
    let r: Vec<f64> = (0..h)
        .map(|row| {
            b[row]
                - (0..u.len())
                    .filter(|i| fixed[*i])
                    .map(|i| m[row][i] * u[i])
                    .sum::<f64>()
        })
        .collect();
    let gram: Matrix = (0..h)
        .map(|a| {
            (0..h)
                .map(|c| free.iter().map(|&i| m[a][i] * m[c][i]).sum())
                .collect()
        })
        .collect();
    // Cholesky of the Gram matrix; it is used only when every pivot is well above
    // rounding of its largest diagonal entry (rank-deficient free columns, when
    // inputs act on the same outputs, keep the regularised solution instead).
    let Some(y) = cholesky_solve_checked(&gram, &r, POLISH_PIVOT) else {
        return;
    };
    let cand: Vec<f64> = free
        .iter()
        .map(|&i| (0..h).map(|row| m[row][i] * y[row]).sum())
        .collect();
    if cand
        .iter()
        .zip(&free)
        .all(|(v, &i)| v.is_finite() && limits[i].contains(*v))
    {
        for (v, &i) in cand.iter().zip(&free) {
            u[i] = *v;
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const FREE: InputLimits = InputLimits::FREE;
    fn tendon(pre: f64) -> InputLimits {
        InputLimits {
            lo: pre,
            hi: f64::INFINITY,
        }
    }

    #[test]
    fn an_unbounded_square_system_is_solved_exactly() {
        let m = vec![vec![2.0, 1.0], vec![1.0, 3.0]];
        let a = allocate(&m, &[3.0, 5.0], &[FREE, FREE]);
        assert!((a.u[0] - 0.8).abs() < 1e-15 && (a.u[1] - 1.4).abs() < 1e-15);
        assert!(norm(&a.shortfall) < 1e-14);
    }

    #[test]
    fn more_inputs_than_equations_gives_the_minimum_norm_solution() {
        // u1 + u2 + u3 = 3: the minimum-norm solution is (1, 1, 1).
        let a = allocate(&[vec![1.0, 1.0, 1.0]], &[3.0], &[FREE; 3]);
        for v in &a.u {
            assert!((v - 1.0).abs() < 1e-14, "{:?}", a.u);
        }
    }

    #[test]
    fn an_antagonistic_pair_pulls_with_one_tendon_at_its_pretension() {
        // Torque from two tendons at ±d: τ = d (u1 − u2).
        let m = vec![vec![0.01, -0.01]];
        let lim = [tendon(0.5), tendon(0.5)];
        let a = allocate(&m, &[-0.02], &lim);
        assert!((a.u[0] - 0.5).abs() < 1e-14, "{:?}", a.u);
        assert!((a.u[1] - 2.5).abs() < 1e-12, "{:?}", a.u);
        assert!(a.met(&[-0.02], 1e-12));
        assert_eq!(a.at_limit, vec![true, false]);
        let b = allocate(&m, &[0.03], &lim);
        assert!((b.u[0] - 3.5).abs() < 1e-12 && (b.u[1] - 0.5).abs() < 1e-14);
    }

    #[test]
    fn a_target_beyond_the_limits_reports_its_shortfall() {
        let lim = [InputLimits { lo: 0.0, hi: 2.0 }];
        let a = allocate(&[vec![0.5]], &[1.5], &lim);
        assert_eq!(a.u, vec![2.0]);
        assert!((a.shortfall[0] - 0.5).abs() < 1e-15);
        assert!(!a.met(&[1.5], 1e-6));
        // Pulling the wrong way: the tendon stays slack at its pretension.
        let b = allocate(&[vec![0.5]], &[-1.0], &[tendon(0.0)]);
        assert_eq!(b.u, vec![0.0]);
        assert!((b.shortfall[0] + 1.0).abs() < 1e-15);
    }

    #[test]
    fn the_solution_satisfies_the_optimality_conditions_on_random_problems() {
        // KKT of the regularised problem, checked on many small random cases: every
        // free input has zero gradient, every input at a limit a gradient pointing out.
        let mut seed = 0x2545_f491_4f6c_dd1du64;
        let mut rnd = || {
            seed ^= seed << 13;
            seed ^= seed >> 7;
            seed ^= seed << 17;
            (seed >> 11) as f64 / (1u64 << 53) as f64 * 2.0 - 1.0
        };
        for _ in 0..500 {
            let h = 1 + (rnd().abs() * 3.0) as usize;
            let k = 1 + (rnd().abs() * 5.0) as usize;
            let m: Matrix = (0..h).map(|_| (0..k).map(|_| rnd()).collect()).collect();
            let b: Vec<f64> = (0..h).map(|_| 3.0 * rnd()).collect();
            let lim: Vec<InputLimits> = (0..k)
                .map(|_| {
                    let lo = if rnd() > 0.0 {
                        rnd().abs() * 0.5
                    } else {
                        f64::NEG_INFINITY
                    };
                    let hi = if rnd() > 0.0 {
                        1.0 + rnd().abs()
                    } else {
                        f64::INFINITY
                    };
                    InputLimits { lo, hi }
                })
                .collect();
            let a = allocate(&m, &b, &lim);
            for i in 0..k {
                assert!(lim[i].contains(a.u[i]), "{:?} {:?}", a.u, lim);
                // Gradient of ½‖Mu − b‖²: −Mᵀ shortfall.
                let g: f64 = -(0..h).map(|r| m[r][i] * a.shortfall[r]).sum::<f64>();
                let tol = 1e-8 * (1.0 + norm(&b));
                if a.u[i] > lim[i].lo && a.u[i] < lim[i].hi {
                    assert!(g.abs() < tol, "free input {i} has gradient {g}");
                } else if a.u[i] <= lim[i].lo {
                    assert!(g > -tol, "input {i} at its lower limit wants to go lower");
                } else {
                    assert!(g < tol, "input {i} at its upper limit wants to go higher");
                }
            }
        }
    }
}
