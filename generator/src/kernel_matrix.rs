//! A segment's double kernels by a recurrence in the power, instead of one dot
//! product over the moments each.
//!
//! The double kernel of [`crate::segment_integrals`] splits as `D_st = F_st +
//! conj(F_ts)` with the half kernels
//!
//! ```text
//! F_st(a) = ∫∫_{0 ≤ τ ≤ τ' ≤ 1} τ^s τ'^t Ρ(τ') e^{ia(τ'−τ)} dτ dτ'
//! ```
//!
//! (`Ρ` the weight's tail integral). Integrating the inner integral by parts,
//! `ia ∫_0^{τ'} τ^s e^{−iaτ} dτ = s ∫_0^{τ'} τ^{s−1} e^{−iaτ} dτ − τ'^s e^{−iaτ'}` for
//! `s ≥ 1`, so that
//!
//! ```text
//! F_{s−1,t} = (m_{s+t} + i a F_st) / s,      m_k = ∫_0^1 τ^k Ρ(τ) dτ  (rational).
//! ```
//!
//! Run downward from the top row `F_{P−1,t}` (dot products over the moments) this
//! multiplies errors by `|a|/s` per step, and every entry below the top row costs four
//! operations instead of a dot product of 10–30 terms. Run upward from the bottom row
//! `F_{0,t}` (`F_st = (s F_{s−1,t} − m_{s+t})/(ia)`) it multiplies them by `s/|a|`. So
//! each direction is stable on its own side of `s = |a|`, and [`recur_split`] takes the
//! rows above `⌊|a|⌋` from the top and the others from the bottom.
//!
//! Measured against the dot products (relative error of the worst entry, f64, uniform
//! and tapered weights, 4 to 29 powers):
//! - down from the top row alone (`tests::sweep`): at most 1.2e-15 for `|a| ≤ 4`, but
//!   with 15 powers 3.0e-15 at `|a| = 5`, 1.5e-14 at 6, 1.6e-13 at 7
//!   (`tests::beyond_the_switch_the_recurrence_degrades`);
//! - from both ends (`tests::split_sweep`): at most 1e-14 for `|a| ≤ 20`, 2.3e-14 to 40,
//!   5.2e-14 to 100, and about `1.2e-16 |a|` beyond (1.2e-13 at 1000, 1.5e-11 at 1e5):
//!   `D_st = F_st + conj(F_ts)` is a difference of half kernels that cancel more as
//!   `|a|` grows (both are about `i m/a`).
//!
//! The emitted code runs down from the top row alone for `|a| ≤` [`FAST_BENDING`], where
//! that row's bands can be cut to the precision ([`resolved_band`]), and from both ends
//! beyond. The workspace of a soft arm (a segment bent by at most half a turn,
//! `|a| ≤ π`) is all on the first side.

use crate::exact::Q;
use crate::segment_integrals::{Reducer, WeightId};

/// Largest `|a_j| = |L_j q_{j,0}|` [rad] for which the emitted code takes a segment's
/// double kernels from the top row alone, cut to the precision; beyond, it runs the
/// recurrence from both ends.
pub const FAST_BENDING: f64 = 4.0;

/// How many leading Legendre coefficients of a top-row entry `F = Σ_n c_n ν_n(a)` a
/// precision with unit roundoff `unit` resolves for every `|a| ≤ FAST_BENDING`, the only
/// bending at which the recurrence reads its top row. The moments decay faster than
/// geometrically in `n` there, so the band of a 29-power row shrinks to about 11 terms in
/// single precision and 16 in double (reach_arm).
///
/// The cut is justified by a bound, not a sample. With `x = a/2`, `|ν_n| = |j_n(x)|`,
/// and for real `x`
/// - `|j_n(x)| ≤ |x|ⁿ/(2n+1)!!` (DLMF 10.14.4 for `J_{n+1/2}`, with
///   `j_n = √(π/2x) J_{n+1/2}`), so the dropped tail is at most
///   `T = Σ_{n≥keep} |c_n| ν̄_n (|a|/A)ⁿ`, `ν̄_n = (A/2)ⁿ/(2n+1)!!`, `A = FAST_BENDING`;
/// - `|j_n(x)| ≥ |x|ⁿ/(2n+1)!! · (1 − (x²/2)/(2n+3))` while `x² < 2(2n+3)` (the power
///   series DLMF 10.53.1 alternates with shrinking terms there; `A = 4` keeps
///   `x² ≤ 4 < 6`), so every kept term bounds the kept sum `Σ_{n<keep} |c_n||ν_n|` from
///   below with a power of `|a|/A` no higher than the tail's.
///
/// Hence if `T(A) ≤ unit/4 · max_{n<keep} |c_n| ν̄_n (1 − (A²/8)/(2n+3))`, the cut
/// changes `F` by at most a quarter of `unit · Σ_n |c_n||ν_n(a)|` at every `|a| ≤ A` (at
/// `a = 0` by nothing): a quarter of the scale that the dot product's own rounding
/// error is already proportional to (`|fl(cᵀν) − cᵀν| ≤ γ_len |c|ᵀ|ν|`, Higham,
/// *Accuracy and Stability of Numerical Algorithms*, 2nd ed., §3.1). The recurrence
/// below the top row damps such errors further (by `|a|/s` per row). The bound is
/// evaluated in `f64`, whose own rounding the factor 1/4 leaves room for.
/// `tests::resolved_band_keeps_its_bound` checks it against the dropped terms.
pub fn resolved_band(c: &[Q], unit: f64) -> usize {
    use num_traits::ToPrimitive;
    let x = FAST_BENDING / 2.0;
    let mut nu_bar = 1.0f64;
    let mut upper = Vec::with_capacity(c.len());
    let mut lower = Vec::with_capacity(c.len());
    for (n, cn) in c.iter().enumerate() {
        if n > 0 {
            nu_bar *= x / (2 * n + 1) as f64;
        }
        let v = cn.to_f64().unwrap_or(f64::INFINITY).abs() * nu_bar;
        upper.push(v);
        lower.push(v * (1.0 - (x * x / 2.0) / (2 * n + 3) as f64));
    }
    // Smallest `keep` that meets the bound: the tail grows and the kept terms' best
    // lower bound shrinks as `keep` falls, so stop at the first failure.
    let mut keep = c.len();
    let mut tail = 0.0;
    while keep > 1 {
        let head = lower[..keep - 1].iter().copied().fold(0.0, f64::max);
        if tail + upper[keep - 1] > unit / 4.0 * head {
            break;
        }
        tail += upper[keep - 1];
        keep -= 1;
    }
    keep
}

/// What the recurrence of one weight and size needs: the top row's Legendre
/// coefficients and the tail moments.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct MatrixTable {
    /// The weight's tail integral `Ρ` (monomial coefficients).
    pub tail: Vec<Q>,
    /// Kernel powers `s, t < size`.
    pub size: usize,
    /// `seeds[t]`: Legendre coefficients of `F_{size−1, t}` (`Σ c_n ν_n`), the top row.
    pub seeds: Vec<Vec<Q>>,
    /// `bottom[t]`: those of `F_{0, t}`, the bottom row.
    pub bottom: Vec<Vec<Q>>,
    /// `m_k`, `k < 2 size − 1`.
    pub moments: Vec<Q>,
}

impl MatrixTable {
    /// The table of weight tail `tail` (monomial coefficients of `Ρ`) for powers below
    /// `size`.
    pub fn new(tail: &[Q], size: usize) -> MatrixTable {
        let mut r = Reducer::new();
        let w: WeightId = r.weight_of_tail(tail);
        let top = size as u32 - 1;
        let seeds = (0..size as u32).map(|t| r.half_kernel(w, top, t)).collect();
        let bottom = (0..size as u32).map(|t| r.half_kernel(w, 0, t)).collect();
        let moments = (0..(2 * size - 1) as u32)
            .map(|k| r.tail_moment(w, k))
            .collect();
        MatrixTable {
            tail: tail.to_vec(),
            size,
            seeds,
            bottom,
            moments,
        }
    }

    /// Additions, multiplications and divisions of [`recur_down`] below the top row:
    /// per entry `m·(1/s) − (a/s)·Im F` and `(a/s)·Re F`, with `1/s` and `a/s` formed
    /// once per row.
    pub fn recurrence_ops(&self) -> (usize, usize, usize) {
        let entries = (self.size - 1) * self.size;
        (entries, 3 * entries + self.size - 1, self.size - 1)
    }
}

/// The half kernels `F_st` (`F[s·size + t]`, real and imaginary parts) from the top row
/// `top` (`F_{size−1,t}`) down, in `f64`; what the emitted routines do step for step.
pub fn recur_down(size: usize, moments: &[f64], a: f64, top: &[(f64, f64)]) -> Vec<(f64, f64)> {
    recur_split(size, moments, a, top, &[], 0)
}

/// The half kernels from both ends: rows `s > split` downward from the top row as in
/// [`recur_down`], rows `1 ≤ s ≤ split` upward from the bottom row `bottom`
/// (`F_{0,t}`) by `F_st = (s F_{s−1,t} − m_{s+t}) / (ia)`. Each direction multiplies
/// errors by less than one per step on its side of `s = |a|` (`|a|/s` downward,
/// `s/|a|` upward), so `split = ⌊|a|⌋` (at most `size − 1`) is stable at every `a`.
pub fn recur_split(
    size: usize,
    moments: &[f64],
    a: f64,
    top: &[(f64, f64)],
    bottom: &[(f64, f64)],
    split: usize,
) -> Vec<(f64, f64)> {
    let mut f = vec![(0.0, 0.0); size * size];
    f[(size - 1) * size..].copy_from_slice(top);
    for s in (split + 1..size).rev() {
        let inv = 1.0 / s as f64;
        let ainv = a * inv;
        for t in 0..size {
            let (re, im) = f[s * size + t];
            f[(s - 1) * size + t] = (moments[s + t] * inv - ainv * im, ainv * re);
        }
    }
    if split > 0 {
        f[..size].copy_from_slice(bottom);
        let inv = 1.0 / a;
        for s in 1..=split {
            let kinv = s as f64 * inv;
            for t in 0..size {
                let (re, im) = f[(s - 1) * size + t];
                f[s * size + t] = (kinv * im, moments[s + t] * inv - kinv * re);
            }
        }
    }
    f
}

/// `Re D_st` (or `Im D_st`) from the half kernels.
pub fn double_part(f: &[(f64, f64)], size: usize, s: usize, t: usize, im: bool) -> f64 {
    let (a, b) = (f[s * size + t], f[t * size + s]);
    if im {
        a.1 - b.1
    } else {
        a.0 + b.0
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::exact::{int, Q};
    use num_traits::ToPrimitive;

    fn dot(c: &[Q], nu: &[f64]) -> f64 {
        c.iter().zip(nu).map(|(c, v)| c.to_f64().unwrap() * v).sum()
    }

    /// The recurrence's table and the exact `D_st` rows (`s ≤ t`) of one weight.
    struct Case {
        size: usize,
        table: MatrixTable,
        rows: Vec<(usize, usize, Vec<Q>, Vec<Q>)>,
        count: usize,
    }

    fn case(tail: &[Q], size: usize) -> Case {
        let table = MatrixTable::new(tail, size);
        let mut r = Reducer::new();
        let w = r.weight_of_tail(tail);
        let mut rows = Vec::new();
        for s in 0..size {
            for t in s..size {
                let (sum, diff) = r.double_kernel(w, s as u32, t as u32);
                rows.push((s, t, sum, diff));
            }
        }
        let count = rows
            .iter()
            .map(|r| r.2.len().max(r.3.len()))
            .chain(table.seeds.iter().map(Vec::len))
            .max()
            .unwrap();
        Case {
            size,
            table,
            rows,
            count,
        }
    }

    /// Worst error of the recurrence's `D_st` against the dot products over the
    /// moments, relative to `max(|Re D|, |Im D|)` of the entry; with `cut`, the top
    /// row's bands cut by [`resolved_band`] at double precision, as the emitted code
    /// does for `|a| ≤ FAST_BENDING`.
    fn worst(c: &Case, a: f64, cut: bool) -> f64 {
        let (mut re, mut im) = (vec![0.0; c.count], vec![0.0; c.count]);
        crate::moments::legendre_moments(a, &mut re, &mut im);
        let top: Vec<(f64, f64)> = c
            .table
            .seeds
            .iter()
            .map(|k| {
                if cut {
                    &k[..resolved_band(k, DOUBLE_UNIT)]
                } else {
                    &k[..]
                }
            })
            .map(|k| (dot(k, &re), dot(k, &im)))
            .collect();
        let m: Vec<f64> = c
            .table
            .moments
            .iter()
            .map(|v| v.to_f64().unwrap())
            .collect();
        let f = recur_down(c.size, &m, a, &top);
        worst_entry(c, &f, &re, &im)
    }

    /// The worst entry of the half kernels `f` as double kernels, against their dot
    /// products over the moments `re`, `im`, relative to `max(|Re D|, |Im D|)`.
    fn worst_entry(c: &Case, f: &[(f64, f64)], re: &[f64], im: &[f64]) -> f64 {
        let mut err = 0.0f64;
        for (s, t, sum, diff) in &c.rows {
            let (dr, di) = (dot(sum, re), dot(diff, im));
            let scale = dr.abs().max(di.abs()).max(1e-300);
            err = err.max((double_part(f, c.size, *s, *t, false) - dr).abs() / scale);
            err = err.max((double_part(f, c.size, *s, *t, true) - di).abs() / scale);
        }
        err
    }

    const DOUBLE_UNIT: f64 = 1.0 / (1u64 << 53) as f64;

    fn q(n: i64, d: i64) -> Q {
        Q::new(n.into(), d.into())
    }

    /// The sweep behind [`FAST_BENDING`]: uniform and linear densities, 4 to 29
    /// powers, `|a|` up to the switch and both signs.
    #[test]
    fn sweep() {
        // Ρ = 1 − τ (uniform density) and Ρ = ∫_τ^1 (1 − σ/2) dσ (a taper).
        let tails = [vec![int(1), int(-1)], vec![q(3, 4), int(-1), q(1, 4)]];
        for tail in &tails {
            for size in [4, 9, 15, 22, 29] {
                let c = case(tail, size);
                let mut at = Vec::new();
                for k in 0..=40 {
                    let a = FAST_BENDING * (k as f64 / 20.0 - 1.0);
                    at.push((a, worst(&c, a, true)));
                }
                at.push((1e-9, worst(&c, 1e-9, true)));
                let (a, e) = at
                    .into_iter()
                    .fold((0.0, 0.0), |m, x| if x.1 > m.1 { x } else { m });
                let shown: Vec<String> = tail.iter().map(ToString::to_string).collect();
                println!(
                    "tail [{}], {size} powers: worst {e:.1e} at a = {a}",
                    shown.join(", ")
                );
                assert!(e < 4e-15, "tail {tail:?} size {size} a {a}: {e:e}");
            }
        }
    }

    /// The cut of [`resolved_band`] against the terms it drops, over `|a| ≤ A` in both
    /// precisions: never more than a quarter unit of the entry's `Σ|c_n||ν_n|`.
    #[test]
    fn resolved_band_keeps_its_bound() {
        let tails = [vec![int(1), int(-1)], vec![q(3, 4), int(-1), q(1, 4)]];
        for tail in &tails {
            for size in [4, 9, 15, 22, 29] {
                let table = MatrixTable::new(tail, size);
                let count = table.seeds.iter().map(Vec::len).max().unwrap();
                let (mut re, mut im) = (vec![0.0; count], vec![0.0; count]);
                for (unit, what) in [(2f64.powi(-24), "f32"), (2f64.powi(-53), "f64")] {
                    let (mut kept, mut all) = (0, 0);
                    for c in &table.seeds {
                        let keep = resolved_band(c, unit);
                        assert!(keep >= 1 && keep <= c.len());
                        kept += keep;
                        all += c.len();
                        for k in 0..=80 {
                            let a = FAST_BENDING * (k as f64 / 40.0 - 1.0);
                            crate::moments::legendre_moments(a, &mut re, &mut im);
                            let (dr, di) =
                                (dot(&c[keep..], &re[keep..]), dot(&c[keep..], &im[keep..]));
                            let scale: f64 = c
                                .iter()
                                .zip(re.iter().zip(&im))
                                .map(|(c, (r, i))| c.to_f64().unwrap().abs() * r.hypot(*i))
                                .sum();
                            let dropped = dr.hypot(di);
                            assert!(
                                dropped <= unit / 4.0 * scale,
                                "{what}, tail {tail:?}, {size} powers, a = {a}: dropped \
                                 {dropped:e} against {:e}",
                                unit / 4.0 * scale
                            );
                        }
                    }
                    let shown: Vec<String> = tail.iter().map(ToString::to_string).collect();
                    println!(
                        "{what}, tail [{}], {size} powers: top row {all} -> {kept} terms",
                        shown.join(", ")
                    );
                    if size >= 15 {
                        assert!(
                            2 * kept < all || what == "f64",
                            "{what} {size}: {kept} of {all}"
                        );
                    }
                }
            }
        }
    }

    /// [`recur_split`] against the dot products, with both rows' bands whole.
    fn worst_split(c: &Case, bottom: &[Vec<Q>], a: f64) -> f64 {
        let (mut re, mut im) = (vec![0.0; c.count], vec![0.0; c.count]);
        crate::moments::legendre_moments(a, &mut re, &mut im);
        let row = |k: &Vec<Q>| (dot(k, &re), dot(k, &im));
        let top: Vec<(f64, f64)> = c.table.seeds.iter().map(row).collect();
        let low: Vec<(f64, f64)> = bottom.iter().map(row).collect();
        let m: Vec<f64> = c
            .table
            .moments
            .iter()
            .map(|v| v.to_f64().unwrap())
            .collect();
        let split = if a.abs() < (c.size - 1) as f64 {
            a.abs() as usize
        } else {
            c.size - 1
        };
        let f = recur_split(c.size, &m, a, &top, &low, split);
        worst_entry(c, &f, &re, &im)
    }

    /// The sweep behind the recurrence from both ends: every bending from 0 to 60 (both
    /// signs, steps of 1/4), and far beyond, against the dot products.
    #[test]
    fn split_sweep() {
        let tails = [vec![int(1), int(-1)], vec![q(3, 4), int(-1), q(1, 4)]];
        for tail in &tails {
            for size in [4, 9, 15, 22, 29] {
                let c = case(tail, size);
                let mut r = Reducer::new();
                let w = r.weight_of_tail(tail);
                let bottom: Vec<Vec<Q>> =
                    (0..size as u32).map(|t| r.half_kernel(w, 0, t)).collect();
                let mut at = Vec::new();
                for k in 0..=240 {
                    let a = 0.25 * k as f64;
                    at.push((a, worst_split(&c, &bottom, a)));
                    at.push((-a, worst_split(&c, &bottom, -a)));
                }
                for a in [100.0, 1e3, 1e5] {
                    at.push((a, worst_split(&c, &bottom, a)));
                }
                let by: Vec<String> = [4.0, 5.0, 8.0, 12.0, 20.0, 40.0, 60.0, 1e3]
                    .iter()
                    .map(|&b| {
                        let e = at
                            .iter()
                            .filter(|x| x.0.abs() <= b)
                            .map(|x| x.1)
                            .fold(0.0, f64::max);
                        format!("<={b}: {e:.1e}")
                    })
                    .collect();
                let shown: Vec<String> = tail.iter().map(ToString::to_string).collect();
                println!(
                    "tail [{}], {size} powers: {}",
                    shown.join(", "),
                    by.join(", ")
                );
                for &(a, e) in &at {
                    let bound = match a.abs() {
                        b if b <= 20.0 => 1.5e-14,
                        b => (3e-16 * b).max(8e-14),
                    };
                    assert!(
                        e <= bound,
                        "tail {tail:?} size {size} a {a}: {e:e} > {bound:e}"
                    );
                }
            }
        }
    }

    /// Beyond the switch the recurrence loses digits (why the dot products stay there).
    #[test]
    fn beyond_the_switch_the_recurrence_degrades() {
        let c = case(&[int(1), int(-1)], 15);
        for a in [5.0, 6.0, 7.0, 8.0] {
            println!("15 powers, a = {a}: worst {:.1e}", worst(&c, a, false));
        }
        let e = worst(&c, 7.0, false);
        assert!(e > 1e-14, "{e:e}");
    }
}
