//! Adaptive Dormand–Prince 5(4) integration with PI step-size control and dense
//! output, for simulating a model (`arcwright simulate`).
//!
//! The method is the classic 7-stage, first-same-as-last pair with the error
//! estimate of the embedded 4th-order solution, Hairer's PI controller
//! (exponents 0.2 − 0.75β and β = 0.04) and the 4th-order continuous extension for
//! output at arbitrary times, as in Hairer, Nørsett & Wanner, *Solving Ordinary
//! Differential Equations I*, §II.4–II.6. Error norm: root mean square of
//! `err_i / (atol + rtol·max(|y_i|, |y_i,new|))`.

use std::fmt;

/// Integration settings.
#[derive(Clone, Debug)]
pub struct Options {
    pub rtol: f64,
    pub atol: f64,
    /// Give up after this many steps (accepted and rejected).
    pub max_steps: usize,
    /// Largest step (default: the whole interval).
    pub h_max: Option<f64>,
}

impl Default for Options {
    fn default() -> Self {
        Options {
            rtol: 1e-8,
            atol: 1e-10,
            max_steps: 200_000,
            h_max: None,
        }
    }
}

/// Work done by one integration.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct Stats {
    pub accepted: usize,
    pub rejected: usize,
    /// Right-hand-side evaluations.
    pub evaluations: usize,
}

/// Why an integration stopped early.
#[derive(Debug)]
pub enum IntegrateError<E> {
    /// The right-hand side failed at time `t`.
    Rhs { t: f64, error: E },
    /// `max_steps` steps were taken and `t` was reached.
    MaxSteps { t: f64, steps: usize },
    /// The controller asked for a step too small to advance time at `t`.
    StepTooSmall { t: f64, h: f64 },
    /// The solution stopped being finite after time `t`.
    NonFinite { t: f64 },
}

impl<E: fmt::Display> fmt::Display for IntegrateError<E> {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            IntegrateError::Rhs { t, error } => write!(f, "at t = {t:.6e} s: {error}"),
            IntegrateError::MaxSteps { t, steps } => {
                write!(f, "at t = {t:.6e} s: gave up after {steps} steps")
            }
            IntegrateError::StepTooSmall { t, h } => {
                write!(
                    f,
                    "at t = {t:.6e} s: the step size fell to {h:.3e} s, too small to advance"
                )
            }
            IntegrateError::NonFinite { t } => {
                write!(f, "at t = {t:.6e} s: the state is no longer finite")
            }
        }
    }
}

// Dormand–Prince 5(4) coefficients.
const C2: f64 = 1.0 / 5.0;
const C3: f64 = 3.0 / 10.0;
const C4: f64 = 4.0 / 5.0;
const C5: f64 = 8.0 / 9.0;
const A21: f64 = 1.0 / 5.0;
const A31: f64 = 3.0 / 40.0;
const A32: f64 = 9.0 / 40.0;
const A41: f64 = 44.0 / 45.0;
const A42: f64 = -56.0 / 15.0;
const A43: f64 = 32.0 / 9.0;
const A51: f64 = 19372.0 / 6561.0;
const A52: f64 = -25360.0 / 2187.0;
const A53: f64 = 64448.0 / 6561.0;
const A54: f64 = -212.0 / 729.0;
const A61: f64 = 9017.0 / 3168.0;
const A62: f64 = -355.0 / 33.0;
const A63: f64 = 46732.0 / 5247.0;
const A64: f64 = 49.0 / 176.0;
const A65: f64 = -5103.0 / 18656.0;
const A71: f64 = 35.0 / 384.0;
const A73: f64 = 500.0 / 1113.0;
const A74: f64 = 125.0 / 192.0;
const A75: f64 = -2187.0 / 6784.0;
const A76: f64 = 11.0 / 84.0;
// Error coefficients: 5th- minus 4th-order weights.
const E1: f64 = 71.0 / 57600.0;
const E3: f64 = -71.0 / 16695.0;
const E4: f64 = 71.0 / 1920.0;
const E5: f64 = -17253.0 / 339200.0;
const E6: f64 = 22.0 / 525.0;
const E7: f64 = -1.0 / 40.0;
// Continuous extension.
const D1: f64 = -12715105075.0 / 11282082432.0;
const D3: f64 = 87487479700.0 / 32700410799.0;
const D4: f64 = -10690763975.0 / 1880347072.0;
const D5: f64 = 701980252875.0 / 199316789632.0;
const D6: f64 = -1453857185.0 / 822651844.0;
const D7: f64 = 69997945.0 / 29380423.0;

/// The solution at the requested output times: `(t, y(t))`.
pub type Samples = Vec<(f64, Vec<f64>)>;

/// Integrates `y' = f(t, y)` from `t0` to `t1 > t0` and returns the solution at each
/// of `outputs` (ascending, inside `[t0, t1]`; values outside are skipped), computed
/// by the continuous extension. `on_step(t)` is called after each accepted step.
pub fn integrate<E, F>(
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
    let n = y0.len();
    let mut stats = Stats::default();
    let mut out = Vec::with_capacity(outputs.len());
    let mut next_out = outputs
        .iter()
        .position(|&t| t >= t0)
        .unwrap_or(outputs.len());
    let mut eval = |t: f64, y: &[f64], dy: &mut [f64], stats: &mut Stats| {
        stats.evaluations += 1;
        f(t, y, dy).map_err(|error| IntegrateError::Rhs { t, error })
    };
    let h_max = opts.h_max.unwrap_or(t1 - t0).min(t1 - t0).max(0.0);
    let mut t = t0;
    let mut y = y0.to_vec();
    if y.iter().any(|v| !v.is_finite()) {
        return Err(IntegrateError::NonFinite { t });
    }
    let mut k1 = vec![0.0; n];
    eval(t, &y, &mut k1, &mut stats)?;
    // Outputs at t0 itself.
    while next_out < outputs.len() && outputs[next_out] <= t0 {
        out.push((outputs[next_out], y.clone()));
        next_out += 1;
    }
    if t1 <= t0 {
        return Ok((out, stats));
    }

    let scale =
        |y: &[f64], y2: &[f64], i: usize| opts.atol + opts.rtol * y[i].abs().max(y2[i].abs());
    let rms = |v: &[f64], y: &[f64], y2: &[f64]| -> f64 {
        if v.is_empty() {
            return 0.0;
        }
        (v.iter()
            .enumerate()
            .map(|(i, e)| (e / scale(y, y2, i)).powi(2))
            .sum::<f64>()
            / v.len() as f64)
            .sqrt()
    };

    // Initial step (Hairer's heuristic).
    let mut h = {
        let d0 = rms(&y, &y, &y);
        let d1 = rms(&k1, &y, &y);
        let h0 = if d0 < 1e-5 || d1 < 1e-5 {
            1e-6
        } else {
            0.01 * d0 / d1
        };
        let h0 = h0.min(h_max);
        let y1: Vec<f64> = (0..n).map(|i| y[i] + h0 * k1[i]).collect();
        let mut f1 = vec![0.0; n];
        eval(t + h0, &y1, &mut f1, &mut stats)?;
        let diff: Vec<f64> = (0..n).map(|i| f1[i] - k1[i]).collect();
        let d2 = rms(&diff, &y, &y) / h0;
        let dm = d1.max(d2);
        let h1 = if dm <= 1e-15 {
            (h0 * 1e-3).max(1e-6)
        } else {
            (0.01 / dm).powf(0.2)
        };
        (100.0 * h0).min(h1).min(h_max)
    };

    const SAFE: f64 = 0.9;
    const BETA: f64 = 0.04;
    const EXPO: f64 = 0.2 - BETA * 0.75;
    const FAC_MIN: f64 = 0.2; // largest shrink: h / 5
    const FAC_MAX: f64 = 10.0; // largest growth: 10 h
    let mut fac_old: f64 = 1e-4;
    let mut last_rejected = false;
    let (mut k2, mut k3, mut k4, mut k5, mut k6, mut k7) = (
        vec![0.0; n],
        vec![0.0; n],
        vec![0.0; n],
        vec![0.0; n],
        vec![0.0; n],
        vec![0.0; n],
    );
    let mut ys = vec![0.0; n];
    let mut y_new = vec![0.0; n];
    let mut err = vec![0.0; n];
    let mut done = false;
    while !done {
        if stats.accepted + stats.rejected >= opts.max_steps {
            return Err(IntegrateError::MaxSteps {
                t,
                steps: stats.accepted + stats.rejected,
            });
        }
        if h < 16.0 * f64::EPSILON * t.abs().max(1e-300) || !h.is_finite() {
            return Err(IntegrateError::StepTooSmall { t, h });
        }
        let last = t + h >= t1 - 1e-12 * (t1 - t0);
        if last {
            h = t1 - t;
        }
        for i in 0..n {
            ys[i] = y[i] + h * A21 * k1[i];
        }
        eval(t + C2 * h, &ys, &mut k2, &mut stats)?;
        for i in 0..n {
            ys[i] = y[i] + h * (A31 * k1[i] + A32 * k2[i]);
        }
        eval(t + C3 * h, &ys, &mut k3, &mut stats)?;
        for i in 0..n {
            ys[i] = y[i] + h * (A41 * k1[i] + A42 * k2[i] + A43 * k3[i]);
        }
        eval(t + C4 * h, &ys, &mut k4, &mut stats)?;
        for i in 0..n {
            ys[i] = y[i] + h * (A51 * k1[i] + A52 * k2[i] + A53 * k3[i] + A54 * k4[i]);
        }
        eval(t + C5 * h, &ys, &mut k5, &mut stats)?;
        for i in 0..n {
            ys[i] =
                y[i] + h * (A61 * k1[i] + A62 * k2[i] + A63 * k3[i] + A64 * k4[i] + A65 * k5[i]);
        }
        let t_new = if last { t1 } else { t + h };
        eval(t_new, &ys, &mut k6, &mut stats)?;
        for i in 0..n {
            y_new[i] =
                y[i] + h * (A71 * k1[i] + A73 * k3[i] + A74 * k4[i] + A75 * k5[i] + A76 * k6[i]);
        }
        eval(t_new, &y_new, &mut k7, &mut stats)?;
        for i in 0..n {
            err[i] =
                h * (E1 * k1[i] + E3 * k3[i] + E4 * k4[i] + E5 * k5[i] + E6 * k6[i] + E7 * k7[i]);
        }
        let e = rms(&err, &y, &y_new);
        if !e.is_finite() || y_new.iter().any(|v| !v.is_finite()) {
            // Retry smaller; a state that stays non-finite ends in StepTooSmall.
            stats.rejected += 1;
            h *= FAC_MIN;
            last_rejected = true;
            if h < 1e-300 {
                return Err(IntegrateError::NonFinite { t });
            }
            continue;
        }
        let fac11 = e.powf(EXPO);
        if e <= 1.0 {
            // Accepted: dense output over [t, t_new], then advance.
            stats.accepted += 1;
            while next_out < outputs.len() && outputs[next_out] <= t_new {
                let theta = ((outputs[next_out] - t) / h).clamp(0.0, 1.0);
                let th1 = 1.0 - theta;
                let yo: Vec<f64> = (0..n)
                    .map(|i| {
                        let ydiff = y_new[i] - y[i];
                        let bspl = h * k1[i] - ydiff;
                        let r4 = ydiff - h * k7[i] - bspl;
                        let r5 = h
                            * (D1 * k1[i]
                                + D3 * k3[i]
                                + D4 * k4[i]
                                + D5 * k5[i]
                                + D6 * k6[i]
                                + D7 * k7[i]);
                        y[i] + theta * (ydiff + th1 * (bspl + theta * (r4 + th1 * r5)))
                    })
                    .collect();
                out.push((outputs[next_out], yo));
                next_out += 1;
            }
            let fac = (fac11 / fac_old.powf(BETA) / SAFE).clamp(1.0 / FAC_MAX, 1.0 / FAC_MIN);
            let mut h_new = h / fac;
            if last_rejected {
                h_new = h_new.min(h);
            }
            fac_old = e.max(1e-4);
            last_rejected = false;
            std::mem::swap(&mut y, &mut y_new);
            std::mem::swap(&mut k1, &mut k7);
            t = t_new;
            on_step(t);
            done = last;
            h = h_new.min(h_max);
        } else {
            stats.rejected += 1;
            h /= (fac11 / SAFE).min(1.0 / FAC_MIN);
            last_rejected = true;
        }
    }
    Ok((out, stats))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn oscillator(w: f64) -> impl FnMut(f64, &[f64], &mut [f64]) -> Result<(), String> {
        move |_t, y, dy| {
            dy[0] = y[1];
            dy[1] = -w * w * y[0];
            Ok(())
        }
    }

    #[test]
    fn harmonic_oscillator_to_tolerance_with_dense_output() {
        let w = 3.0;
        let outs: Vec<f64> = (0..=200).map(|i| i as f64 * 0.05).collect();
        let opts = Options {
            rtol: 1e-10,
            atol: 1e-12,
            ..Options::default()
        };
        let (sol, stats) =
            integrate(oscillator(w), &[1.0, 0.0], 0.0, 10.0, &outs, &opts, |_| {}).unwrap();
        assert_eq!(sol.len(), outs.len());
        let mut worst: f64 = 0.0;
        for (t, y) in &sol {
            worst = worst
                .max((y[0] - (w * t).cos()).abs())
                .max((y[1] + w * (w * t).sin()).abs() / w);
        }
        assert!(worst < 1e-8, "max error {worst:e}");
        // Far fewer steps than outputs need not hold; but the work must be sane.
        assert!(stats.accepted > 50 && stats.accepted < 5000, "{stats:?}");
        assert_eq!(sol.last().unwrap().0, 10.0);
    }

    #[test]
    fn fifth_order_convergence() {
        // Halving the tolerance by 2^5 should roughly halve the step size: count steps.
        let run = |tol: f64| {
            let opts = Options {
                rtol: tol,
                atol: tol,
                ..Options::default()
            };
            let (sol, st) = integrate(
                oscillator(1.0),
                &[1.0, 0.0],
                0.0,
                6.0,
                &[6.0],
                &opts,
                |_| {},
            )
            .unwrap();
            ((sol[0].1[0] - 6f64.cos()).abs(), st.accepted)
        };
        let (e1, n1) = run(1e-6);
        let (e2, n2) = run(1e-6 / 32.0);
        assert!(e2 < e1, "{e1:e} {e2:e}");
        let ratio = n2 as f64 / n1 as f64;
        assert!(
            ratio > 1.5 && ratio < 2.6,
            "step ratio {ratio} ({n1} → {n2})"
        );
    }

    #[test]
    fn errors_are_reported() {
        let opts = Options {
            max_steps: 10,
            ..Options::default()
        };
        let r = integrate(
            oscillator(1000.0),
            &[1.0, 0.0],
            0.0,
            10.0,
            &[],
            &opts,
            |_| {},
        );
        assert!(
            matches!(r, Err(IntegrateError::MaxSteps { steps: 10, .. })),
            "{r:?}"
        );
        let failing = |t: f64, _y: &[f64], dy: &mut [f64]| {
            if t > 0.5 {
                Err("boom".to_string())
            } else {
                dy[0] = 1.0;
                Ok(())
            }
        };
        let r = integrate(failing, &[0.0], 0.0, 1.0, &[], &Options::default(), |_| {});
        match r {
            Err(e @ IntegrateError::Rhs { .. }) => assert!(e.to_string().contains("boom")),
            other => panic!("{other:?}"),
        }
        // Blow-up in finite time: y' = y², y(0) = 1 → y = 1/(1 − t).
        let blow = |_t: f64, y: &[f64], dy: &mut [f64]| -> Result<(), String> {
            dy[0] = y[0] * y[0];
            Ok(())
        };
        let r = integrate(blow, &[1.0], 0.0, 2.0, &[], &Options::default(), |_| {});
        assert!(r.is_err());
    }

    #[test]
    fn outputs_include_the_start_and_skip_outside() {
        let (sol, _) = integrate(
            oscillator(1.0),
            &[1.0, 0.0],
            0.0,
            1.0,
            &[-1.0, 0.0, 0.5, 1.0, 2.0],
            &Options::default(),
            |_| {},
        )
        .unwrap();
        let ts: Vec<f64> = sol.iter().map(|s| s.0).collect();
        assert_eq!(ts, vec![0.0, 0.5, 1.0]);
        assert_eq!(sol[0].1, vec![1.0, 0.0]);
    }
}
