//! Integration for stiff systems: extrapolated linearly implicit Euler.
//!
//! Soft arms are stiff: the higher curvature coefficients bend fast and are damped
//! hard, so an explicit method takes steps the slow motion does not need (about
//! 20,000 per simulated second on the demo arm). Here each macro step `H` computes
//! the linearly implicit Euler solution with `n_j = j` sub-steps (j = 1..k),
//! `(I − h W) Δ = h f(y_i)`, `y_{i+1} = y_i + Δ`, `h = H/n_j`, with `W` the Jacobian
//! `∂f/∂y` (central differences, refreshed every few steps; time is treated as a
//! state, which adds `h² ∂f/∂t` on the right), and extrapolates the `k`
//! values to order `k` by the Aitken–Neville scheme on the harmonic sequence; the
//! method has an asymptotic expansion in powers of `h` for any `W`, and with `W` the
//! Jacobian it keeps the linearly implicit Euler's damping of stiff components
//! (Deuflhard, *Recent progress in extrapolation methods for ODEs*, SIAM Review 27,
//! 1985; Hairer & Wanner, *Solving ODEs II*, §IV.9). The error estimate is
//! `T_kk − T_{k,k−1}`, in the root-mean-square norm of [`crate::integrate`], and the
//! step size follows it with exponent `1/k`. Output between steps is cubic Hermite
//! interpolation from the values and slopes at both ends.

use crate::integrate::{IntegrateError, Options, Samples, Stats};
use crate::linalg::solve;
use crate::terms::Matrix;

/// Extrapolation depth (order of the extrapolated value).
pub const ORDER: usize = 4;
/// Accepted steps one Jacobian serves.
pub const JACOBIAN_REUSE: usize = 6;

/// Integrates `y' = f(t, y)` from `t0` to `t1`; the same contract as
/// [`crate::integrate::integrate`].
pub fn integrate_stiff<E, F>(
    mut f: F,
    y0: &[f64],
    t0: f64,
    t1: f64,
    outputs: &[f64],
    opts: &Options,
    mut on_step: impl FnMut(f64),
) -> Result<(Samples, Stats), IntegrateError<E>>
where
    F: FnMut(f64, &[f64], &mut [f64]) -> Result<(), E>,
{
    let m = y0.len();
    let mut stats = Stats::default();
    let mut out: Samples = Vec::new();
    let mut next_out = outputs.iter().copied().filter(|t| *t >= t0).peekable();
    while let Some(&t) = next_out.peek() {
        if t > t0 {
            break;
        }
        out.push((t, y0.to_vec()));
        next_out.next();
    }
    let mut eval = |t: f64, y: &[f64], stats: &mut Stats| -> Result<Vec<f64>, IntegrateError<E>> {
        let mut dy = vec![0.0; m];
        stats.evaluations += 1;
        f(t, y, &mut dy).map_err(|error| IntegrateError::Rhs { t, error })?;
        if !dy.iter().all(|v| v.is_finite()) {
            return Err(IntegrateError::NonFinite { t });
        }
        Ok(dy)
    };
    let h_max = opts.h_max.unwrap_or(t1 - t0).min(t1 - t0);
    let mut t = t0;
    let mut y = y0.to_vec();
    let mut fy = eval(t, &y, &mut stats)?;
    let mut h = (1e-4 * (t1 - t0)).min(h_max);
    let mut jac: Matrix = vec![vec![0.0; m]; m];
    let mut ft = vec![0.0; m];
    let mut jac_age = JACOBIAN_REUSE;
    let mut rejected_last = false;
    let scale = |a: &[f64], b: &[f64], i: usize| opts.atol + opts.rtol * a[i].abs().max(b[i].abs());
    while t < t1 {
        if stats.accepted + stats.rejected >= opts.max_steps {
            return Err(IntegrateError::MaxSteps {
                t,
                steps: stats.accepted + stats.rejected,
            });
        }
        let last = t + h >= t1 - 1e-12 * (t1 - t0);
        if last {
            h = t1 - t;
        }
        if h <= 1e-14 * t.abs().max(t1 - t0) {
            return Err(IntegrateError::StepTooSmall { t, h });
        }
        // The Jacobian (and ∂f/∂t, time being a state of its own: (I − hW) Δ = h f +
        // h² ∂f/∂t) by central differences, refreshed every few steps and after a
        // rejection: extrapolation keeps its order with any W, and W only needs to
        // be close enough to ∂f/∂y to damp the stiff components.
        if jac_age >= JACOBIAN_REUSE || rejected_last {
            for c in 0..m {
                let d = 1e-7 * (1.0 + y[c].abs());
                let (mut yp, mut ym) = (y.clone(), y.clone());
                yp[c] += d;
                ym[c] -= d;
                let (fp, fm) = (eval(t, &yp, &mut stats)?, eval(t, &ym, &mut stats)?);
                for r in 0..m {
                    jac[r][c] = (fp[r] - fm[r]) / (2.0 * d);
                }
            }
            let dt = 1e-7 * (1.0 + t.abs());
            let (fp, fm) = (eval(t + dt, &y, &mut stats)?, eval(t - dt, &y, &mut stats)?);
            ft = fp
                .iter()
                .zip(&fm)
                .map(|(a, b)| (a - b) / (2.0 * dt))
                .collect();
            jac_age = 0;
        }
        jac_age += 1;
        // The tableau, row by row.
        let mut rows: Vec<Vec<Vec<f64>>> = Vec::with_capacity(ORDER);
        let mut failed = false;
        for j in 1..=ORDER {
            let sub = h / j as f64;
            let lhs: Matrix = (0..m)
                .map(|r| {
                    (0..m)
                        .map(|c| (if r == c { 1.0 } else { 0.0 }) - sub * jac[r][c])
                        .collect()
                })
                .collect();
            let mut z = y.clone();
            let mut fz = fy.clone();
            for i in 0..j {
                let rhs: Vec<f64> = fz
                    .iter()
                    .zip(&ft)
                    .map(|(v, w)| sub * v + sub * sub * w)
                    .collect();
                let Some(delta) = solve(&lhs, &rhs) else {
                    failed = true;
                    break;
                };
                for (a, d) in z.iter_mut().zip(&delta) {
                    *a += d;
                }
                if i + 1 < j {
                    match eval(t + (i + 1) as f64 * sub, &z, &mut stats) {
                        Ok(v) => fz = v,
                        Err(IntegrateError::NonFinite { .. }) | Err(IntegrateError::Rhs { .. })
                            if h > 1e-12 =>
                        {
                            failed = true;
                            break;
                        }
                        Err(e) => return Err(e),
                    }
                }
            }
            if failed || !z.iter().all(|v| v.is_finite()) {
                failed = true;
                break;
            }
            // Aitken–Neville: T_{j,l+1} = T_{j,l} + (T_{j,l} − T_{j−1,l}) / (n_j/n_{j−l} − 1).
            let mut row = vec![z];
            for l in 1..j {
                let ratio = j as f64 / (j - l) as f64;
                let prev = &rows[j - 2][l - 1];
                let cur = &row[l - 1];
                let next: Vec<f64> = cur
                    .iter()
                    .zip(prev)
                    .map(|(a, b)| a + (a - b) / (ratio - 1.0))
                    .collect();
                row.push(next);
            }
            rows.push(row);
        }
        let err = if failed {
            f64::INFINITY
        } else {
            let top = &rows[ORDER - 1];
            let (best, lower) = (&top[ORDER - 1], &top[ORDER - 2]);
            let sum: f64 = (0..m)
                .map(|i| ((best[i] - lower[i]) / scale(&y, best, i)).powi(2))
                .sum();
            (sum / m as f64).sqrt()
        };
        let factor = if err == 0.0 {
            4.0
        } else if err.is_finite() {
            (0.9 * err.powf(-1.0 / ORDER as f64)).clamp(0.2, 4.0)
        } else {
            0.25
        };
        if err <= 1.0 {
            let y1 = rows[ORDER - 1][ORDER - 1].clone();
            let t_new = if last { t1 } else { t + h };
            let f1 = eval(t_new, &y1, &mut stats)?;
            // Cubic Hermite output on (t, t_new].
            while let Some(&to) = next_out.peek() {
                if to > t_new {
                    break;
                }
                let s = (to - t) / (t_new - t);
                let (h00, h10) = ((1.0 + 2.0 * s) * (1.0 - s).powi(2), s * (1.0 - s).powi(2));
                let (h01, h11) = (s * s * (3.0 - 2.0 * s), s * s * (s - 1.0));
                let dt = t_new - t;
                let v = (0..m)
                    .map(|i| h00 * y[i] + h10 * dt * fy[i] + h01 * y1[i] + h11 * dt * f1[i])
                    .collect();
                out.push((to, v));
                next_out.next();
            }
            stats.accepted += 1;
            t = t_new;
            y = y1;
            fy = f1;
            on_step(t);
            h = (h * factor).min(h_max);
            rejected_last = false;
        } else {
            stats.rejected += 1;
            h *= factor.min(0.7);
            // A fresh Jacobian first; only a second rejection in a row shrinks much.
            rejected_last = jac_age > 1;
        }
    }
    Ok((out, stats))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn run(
        f: impl FnMut(f64, &[f64], &mut [f64]) -> Result<(), String>,
        y0: &[f64],
        t1: f64,
        rtol: f64,
    ) -> (Samples, Stats) {
        let opts = Options {
            rtol,
            atol: rtol * 1e-2,
            ..Options::default()
        };
        integrate_stiff(f, y0, 0.0, t1, &[0.5 * t1, t1], &opts, |_| {}).unwrap()
    }

    #[test]
    fn a_harmonic_oscillator_follows_its_closed_form() {
        // y'' = −y: y = cos t (common practice).
        let (s, _) = run(
            |_, y, dy| {
                dy[0] = y[1];
                dy[1] = -y[0];
                Ok(())
            },
            &[1.0, 0.0],
            10.0,
            1e-10,
        );
        let (t, y) = &s[1];
        assert!((y[0] - t.cos()).abs() < 1e-7, "{} vs {}", y[0], t.cos());
        let (t, y) = &s[0];
        assert!(
            (y[0] - t.cos()).abs() < 1e-6,
            "dense output {} vs {}",
            y[0],
            t.cos()
        );
    }

    #[test]
    fn a_stiff_system_takes_steps_set_by_its_slow_part() {
        // y1' = −1e6 (y1 − cos t) − sin t has the smooth solution y1 = cos t; an
        // explicit method needs h < 3e-6, about 3 million steps over 10 s.
        let (s, stats) = run(
            |t, y, dy| {
                dy[0] = -1e6 * (y[0] - t.cos()) - t.sin();
                Ok(())
            },
            &[1.0],
            10.0,
            1e-8,
        );
        let (t, y) = &s[1];
        assert!((y[0] - t.cos()).abs() < 1e-6, "{} vs {}", y[0], t.cos());
        assert!(stats.accepted < 2_000, "{stats:?}");
    }
}
