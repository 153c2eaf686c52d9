//! Legendre moments `ν_n(a) = ∫_0^1 P̃_n(t) e^{iat} dt = e^{ia/2} iⁿ j_n(a/2)` in double
//! precision, for every `n` up to a bound, at any real `a`.
//!
//! `j_n` are the spherical Bessel functions, computed for `n < count` in one of three
//! regimes of `x = a/2`, none of which divides by a small `a`:
//! - `|x| < 1`: the scaled `H_n = (2n+1)!! j_n / xⁿ`, within 20% of 1 here, summed from
//!   its power series at the top two orders and carried down by the three-term
//!   recurrence of `j_n` in scaled form, `H_{n−1} = H_n − x² H_{n+1} / ((2n+1)(2n+3))`
//!   (every coefficient below 1/15, so rounding errors shrink). Exact at 0; two series
//!   instead of one per order.
//! - `1 ≤ |x| < count`: Miller's downward recurrence gives the minimal solution,
//!   normalised by `j_0 = sin x / x` or `j_1 = sin x/x² − cos x/x`, whichever is larger
//!   (they never vanish together).
//! - `|x| ≥ count`: the upward recurrence from `j_0, j_1`, stable for every `n < |x|`;
//!   a NaN argument lands here and stays NaN.
//!
//! Every loop has a bound fixed by `count`. The emitted code uses the same algorithm, so
//! this routine is also the model for the generated ones.

/// Power-series threshold on `|x| = |a|/2`.
pub const SERIES_LIMIT: f64 = 1.0;
/// Terms of the power series: `(x²/2)^k / (k! (2n+3)…(2n+2k+1))` is below 1e-19 at `k = 11`.
pub const SERIES_TERMS: usize = 12;
/// Extra start depth of Miller's recurrence beyond `max(nmax, |x|)`.
pub const MILLER_EXTRA: usize = 24;

/// `Σ_k (−x²/2)^k / (k! (2n+3)(2n+5)…(2n+2k+1))`, the power series of `(2n+1)!! j_n / xⁿ`.
fn scaled_series(x: f64, n: usize) -> f64 {
    let h = -0.5 * x * x;
    let mut term = 1.0;
    let mut sum = 1.0;
    for k in 1..SERIES_TERMS {
        term *= h / (k * (2 * n + 2 * k + 1)) as f64;
        sum += term;
    }
    sum
}

/// Spherical Bessel functions `j_0(x) … j_nmax(x)` into `out` (length `nmax + 1`).
pub fn spherical_bessel(x: f64, out: &mut [f64]) {
    let nmax = out.len() - 1;
    if x.abs() < SERIES_LIMIT {
        let x2 = x * x;
        let mut above = scaled_series(x, nmax + 1);
        let mut cur = scaled_series(x, nmax);
        out[nmax] = cur;
        for n in (1..=nmax).rev() {
            let below = cur - x2 / ((2 * n + 1) * (2 * n + 3)) as f64 * above;
            above = cur;
            cur = below;
            out[n - 1] = cur;
        }
        // j_n = xⁿ/(2n+1)!! H_n
        let mut lead = 1.0;
        for (n, slot) in out.iter_mut().enumerate() {
            if n > 0 {
                lead *= x / (2 * n + 1) as f64;
            }
            *slot *= lead;
        }
        return;
    }
    let (s, c) = x.sin_cos();
    if !(x.abs() < (nmax + 1) as f64) {
        out[0] = s / x;
        if nmax > 0 {
            out[1] = (out[0] - c) / x;
        }
        for n in 2..=nmax {
            out[n] = (2 * n - 1) as f64 / x * out[n - 1] - out[n - 2];
        }
        return;
    }
    // Miller: f_{k−1} = (2k+1)/x f_k − f_{k+1}, from far above with f = 0, 1.
    let start = nmax.max(x.abs().ceil() as usize) + MILLER_EXTRA;
    let mut above = 0.0;
    let mut cur = 1.0_f64;
    for slot in out.iter_mut() {
        *slot = 0.0;
    }
    for k in (1..=start).rev() {
        let below = (2 * k + 1) as f64 / x * cur - above;
        above = cur;
        cur = below;
        if k - 1 <= nmax {
            out[k - 1] = cur;
        }
        if k <= nmax {
            out[k] = above;
        }
        if cur.abs() > 1e200 {
            let s = 1e-200;
            cur *= s;
            above *= s;
            for v in out.iter_mut() {
                *v *= s;
            }
        }
    }
    let j0 = s / x;
    let j1 = (s / x - c) / x;
    // f_1 is the value one step above f_0: `above` after the loop.
    let scale = if j0.abs() >= j1.abs() {
        j0 / cur
    } else {
        j1 / above
    };
    for v in out.iter_mut() {
        *v *= scale;
    }
}

/// `Re ν_n(a)` and `Im ν_n(a)` for `n = 0..re.len()`.
pub fn legendre_moments(a: f64, re: &mut [f64], im: &mut [f64]) {
    let x = 0.5 * a;
    let mut j = vec![0.0; re.len()];
    spherical_bessel(x, &mut j);
    let (s, c) = x.sin_cos();
    for n in 0..re.len() {
        // e^{ix} iⁿ = cos(x + nπ/2) + i sin(x + nπ/2)
        let (r, i) = match n % 4 {
            0 => (c, s),
            1 => (-s, c),
            2 => (-c, -s),
            _ => (s, -c),
        };
        re[n] = r * j[n];
        im[n] = i * j[n];
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// `∫_0^1 P̃_n(t) e^{iat} dt` by composite Gauss–Legendre (64 panels × 8 points),
    /// with `P̃_n` by Bonnet's recursion: an independent check of the closed form.
    #[allow(clippy::excessive_precision)] // the table's digits, as printed
    fn by_quadrature(a: f64, n: usize) -> (f64, f64) {
        // 8-point Gauss–Legendre nodes and weights on [−1, 1] (Abramowitz & Stegun, Table 25.4).
        const X: [f64; 4] = [
            0.1834346424956498,
            0.5255324099163290,
            0.7966664774136267,
            0.9602898564975363,
        ];
        const W: [f64; 4] = [
            0.3626837833783620,
            0.3137066458778873,
            0.2223810344533745,
            0.1012285362903763,
        ];
        let panels = 64;
        let (mut re, mut im) = (0.0, 0.0);
        for p in 0..panels {
            let (lo, hi) = (p as f64 / panels as f64, (p + 1) as f64 / panels as f64);
            for k in 0..8 {
                let xi = if k < 4 { -X[k] } else { X[k - 4] };
                let w = W[k % 4];
                let t = 0.5 * (lo + hi) + 0.5 * (hi - lo) * xi;
                let u = 2.0 * t - 1.0;
                let (mut p0, mut p1) = (1.0, u);
                let pn = if n == 0 {
                    1.0
                } else {
                    for m in 1..n {
                        let p2 = ((2 * m + 1) as f64 * u * p1 - m as f64 * p0) / (m + 1) as f64;
                        p0 = p1;
                        p1 = p2;
                    }
                    p1
                };
                let wt = w * 0.5 * (hi - lo) * pn;
                re += wt * (a * t).cos();
                im += wt * (a * t).sin();
            }
        }
        (re, im)
    }

    #[test]
    fn moments_match_quadrature_across_branches() {
        let n = 12;
        for &a in &[
            0.0,
            1e-9,
            -1e-9,
            0.5,
            1.999,
            2.001,
            -3.0,
            std::f64::consts::PI,
            3.0 * std::f64::consts::PI,
            -9.7,
            25.0,
        ] {
            let mut re = vec![0.0; n];
            let mut im = vec![0.0; n];
            legendre_moments(a, &mut re, &mut im);
            for k in 0..n {
                let (qr, qi) = by_quadrature(a, k);
                assert!(
                    (re[k] - qr).abs() < 2e-15,
                    "Re ν_{k}({a}): {} vs {}",
                    re[k],
                    qr
                );
                assert!(
                    (im[k] - qi).abs() < 2e-15,
                    "Im ν_{k}({a}): {} vs {}",
                    im[k],
                    qi
                );
            }
        }
    }

    #[test]
    fn branches_agree_at_the_switch() {
        let mut lo = vec![0.0; 20];
        let mut hi = vec![0.0; 20];
        spherical_bessel(SERIES_LIMIT * (1.0 - 1e-15), &mut lo);
        spherical_bessel(SERIES_LIMIT, &mut hi);
        for n in 0..20 {
            let scale = lo[n].abs().max(1e-300);
            assert!(
                (lo[n] - hi[n]).abs() / scale < 1e-13,
                "j_{n}: {} vs {}",
                lo[n],
                hi[n]
            );
        }
    }

    #[test]
    fn huge_and_nan_arguments_stay_finite_or_nan_without_panicking() {
        let mut j = vec![0.0; 30];
        for x in [1e300, -1e300, 1e6, f64::INFINITY] {
            spherical_bessel(x, &mut j);
            assert!(
                j.iter().all(|v| v.is_finite() || x.is_infinite()),
                "x = {x}: {j:?}"
            );
        }
        spherical_bessel(f64::NAN, &mut j);
        assert!(j[0].is_nan());
        // At the switch |x| = count, the upward branch agrees with Miller's.
        let mut miller = vec![0.0; 30];
        spherical_bessel(30.0 * (1.0 - 1e-15), &mut miller);
        spherical_bessel(30.0, &mut j);
        for n in 0..30 {
            assert!(
                (j[n] - miller[n]).abs() < 1e-13,
                "j_{n}: {} vs {}",
                j[n],
                miller[n]
            );
        }
    }

    /// The small-argument branch at many orders, against each order's own power series
    /// (independent of the recurrence), including x = 0 exactly.
    #[test]
    fn scaled_recurrence_matches_the_series_of_every_order() {
        for &x in &[0.0, 1e-12, -0.3, 0.77, -0.999_999] {
            let mut j = vec![0.0; 40];
            spherical_bessel(x, &mut j);
            let mut lead = 1.0;
            for n in 0..40 {
                if n > 0 {
                    lead *= x / (2 * n + 1) as f64;
                }
                let direct = lead * scaled_series(x, n);
                let scale = direct.abs().max(f64::MIN_POSITIVE);
                // A few ulps: each of up to 39 recurrence steps rounds once.
                assert!(
                    (j[n] - direct).abs() <= 1e-15 * scale,
                    "j_{n}({x}): {} vs {direct}",
                    j[n]
                );
            }
        }
    }

    #[test]
    fn sum_rule_holds() {
        // Σ (2n+1) j_n(x)² = 1 (a standard identity of spherical Bessel functions).
        for &x in &[0.3, 1.5, 4.0, 12.0] {
            let mut j = vec![0.0; 60];
            spherical_bessel(x, &mut j);
            let s: f64 = j
                .iter()
                .enumerate()
                .map(|(n, v)| (2 * n + 1) as f64 * v * v)
                .sum();
            assert!((s - 1.0).abs() < 1e-13, "x = {x}: {s}");
        }
    }
}
