//! Newton with load continuation for a residual known only by its values.
//!
//! The closed-loop problems (a held shape, the rest shape under a regulator, a tip
//! target) have residuals that pass through the input allocation, which is smooth
//! only piecewise (an input meeting its limit switches the active set). Their
//! Jacobians are taken by central differences; the residual itself is exact, so
//! Newton still converges to it, only less than quadratically near a switch. As in
//! [`crate::statics::equilibrium`], the load factor λ goes from 0 to 1 in steps that
//! keep each solve near the previous solution, so that the branch followed is the
//! one reached when the load is applied slowly.

use crate::linalg::{norm, solve};
use crate::statics::{Options, StaticsError};
use crate::terms::Matrix;

/// A residual's value and the scale it is measured against.
pub struct Residual {
    pub r: Vec<f64>,
    pub scale: f64,
}

/// `R(x, λ)`: the residual at `x` under load fraction λ.
pub type ResidualFn<'a> = dyn FnMut(&[f64], f64) -> Result<Residual, StaticsError> + 'a;

/// A root and how it was reached.
pub struct Root {
    pub x: Vec<f64>,
    pub iterations: usize,
    pub load_steps: usize,
    /// `‖R‖ / scale` at the root.
    pub relative_residual: f64,
}

/// Solves `R(x, λ) = 0` from `x0` (a root or a good guess at λ = 0) up to λ = 1.
/// `step_limit(dx)` is the largest factor ≤ 1 of a Newton step `dx` to take (it keeps
/// the bending change per iteration bounded).
pub fn continue_root(
    residual: &mut ResidualFn,
    step_limit: &dyn Fn(&[f64]) -> f64,
    x0: Vec<f64>,
    opts: &Options,
) -> Result<Root, StaticsError> {
    let mut iterations = 0usize;
    let mut x = x0;
    // λ = 0 first: the start need not be a root (a pretension bends the arm).
    let mut last = newton(residual, step_limit, x.clone(), 0.0, opts, &mut iterations)
        .map_err(|r| not_converged(0.0, r, iterations))?;
    x = last.0.clone();
    let (mut lambda, mut step) = (0.0f64, 1.0f64);
    let mut load_steps = 0usize;
    let mut previous: Option<(Vec<f64>, f64)> = None;
    while lambda < 1.0 {
        let target = if lambda + step >= 1.0 - 1e-15 {
            1.0
        } else {
            lambda + step
        };
        // Predictor: linear extrapolation through the last two roots.
        let guess = match &previous {
            Some((xp, lp)) if lambda > *lp => {
                let s = (target - lambda) / (lambda - lp);
                x.iter().zip(xp).map(|(a, b)| a + s * (a - b)).collect()
            }
            _ => x.clone(),
        };
        match newton(residual, step_limit, guess, target, opts, &mut iterations) {
            Ok((root, rel)) => {
                previous = Some((std::mem::replace(&mut x, root), lambda));
                lambda = target;
                last = (x.clone(), rel);
                load_steps += 1;
                step = (2.0 * step).min(1.0);
            }
            Err(res) => {
                step *= 0.5;
                if step < opts.min_step || iterations >= opts.max_iterations {
                    return Err(not_converged(lambda, res, iterations));
                }
            }
        }
    }
    Ok(Root {
        x: last.0,
        iterations,
        load_steps,
        relative_residual: last.1,
    })
}

fn not_converged(load: f64, residual: f64, iterations: usize) -> StaticsError {
    StaticsError::NotConverged {
        load,
        residual,
        iterations,
        turn: None,
    }
}

/// Damped Newton at one λ; the root and its relative residual, or the last residual.
fn newton(
    residual: &mut ResidualFn,
    step_limit: &dyn Fn(&[f64]) -> f64,
    mut x: Vec<f64>,
    lambda: f64,
    opts: &Options,
    iterations: &mut usize,
) -> Result<(Vec<f64>, f64), f64> {
    let m = x.len();
    let mut here = residual(&x, lambda).map_err(|_| f64::INFINITY)?;
    for _ in 0..opts.iterations_per_step {
        let res = norm(&here.r);
        if res <= opts.tolerance * here.scale {
            return Ok((x, res / here.scale));
        }
        if *iterations >= opts.max_iterations {
            break;
        }
        *iterations += 1;
        let jac = jacobian(residual, &x, lambda).map_err(|_| res)?;
        let Some(s) = solve(&jac, &here.r) else {
            return Err(res);
        };
        let dx: Vec<f64> = s.iter().map(|v| -v).collect();
        let mut alpha = step_limit(&dx);
        let mut accepted = false;
        for _ in 0..30 {
            let cand: Vec<f64> = (0..m).map(|i| x[i] + alpha * dx[i]).collect();
            match residual(&cand, lambda) {
                Ok(c) if norm(&c.r) < res || norm(&c.r) <= opts.tolerance * c.scale => {
                    x = cand;
                    here = c;
                    accepted = true;
                    break;
                }
                _ => alpha *= 0.5,
            }
        }
        if !accepted {
            return Err(res);
        }
    }
    let res = norm(&here.r);
    if res <= opts.tolerance * here.scale {
        Ok((x, res / here.scale))
    } else {
        Err(res)
    }
}

/// `∂R/∂x` by central differences, step `1e-6 (1 + |x_i|)`.
fn jacobian(residual: &mut ResidualFn, x: &[f64], lambda: f64) -> Result<Matrix, StaticsError> {
    let m = x.len();
    let mut jac = vec![vec![0.0; m]; m];
    for c in 0..m {
        let h = 1e-6 * (1.0 + x[c].abs());
        let (mut xp, mut xm) = (x.to_vec(), x.to_vec());
        xp[c] += h;
        xm[c] -= h;
        let (rp, rm) = (residual(&xp, lambda)?, residual(&xm, lambda)?);
        for r in 0..m {
            jac[r][c] = (rp.r[r] - rm.r[r]) / (2.0 * h);
        }
    }
    Ok(jac)
}
