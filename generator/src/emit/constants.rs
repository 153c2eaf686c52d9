//! What every language's moment routine and kernel table print, computed once: the
//! series and recurrence constants as exact literals, the kernel table in bands, and the template context entries all languages share.

use super::number::{literal, Precision};
use super::plan::{moment_ops, DotRange, Family, Plan};
use super::schedule::KernelUse;
use super::Meta;
use crate::exact::{int, Q};
use crate::moments::{MILLER_EXTRA, SERIES_TERMS};
use tera::Context;

/// Literals of the moment routine and of the kernel table.
pub struct MomentConstants {
    /// `1/(2n+1)` for `n < moment_max`.
    pub odd_inv: Vec<String>,
    /// `1/((2n+1)(2n+3))` for `n < moment_max`: the scaled recurrence's coefficients.
    pub pair_inv: Vec<String>,
    /// Power-series factors `1/(k(2n+2k+1))`, `k = 1..SERIES_TERMS`, one row per
    /// `n ≤ moment_max` (the series seeds orders `count − 1` and `count`).
    pub series: Vec<Vec<String>>,
    /// Kernel table in bands: row `r`'s coefficients are `coef[start[r]..start[r+1]]`,
    /// for the moments `first[r]`, `first[r] + 1`, … (zeros inside a band kept, so that
    /// the evaluation is a contiguous dot product with no index array).
    pub start: Vec<usize>,
    pub first: Vec<usize>,
    pub coef: Vec<String>,
}

impl MomentConstants {
    pub fn new(plan: &Plan, precision: Precision) -> Self {
        let lit = |q: &Q| literal(q, precision);
        let one = || Q::from_integer(1.into());
        let mm = plan.moment_max;
        let odd_inv = (0..mm)
            .map(|n| lit(&(one() / int(2 * n as i64 + 1))))
            .collect();
        let pair_inv = (0..mm)
            .map(|n| lit(&(one() / int(((2 * n + 1) * (2 * n + 3)) as i64))))
            .collect();
        let series = (0..=mm)
            .map(|n| {
                (1..SERIES_TERMS)
                    .map(|k| lit(&(one() / int((k * (2 * n + 2 * k + 1)) as i64))))
                    .collect()
            })
            .collect();
        let mut start = vec![0usize];
        let mut first = Vec::new();
        let mut coef = Vec::new();
        for row in &plan.table.rows {
            let lo = row.first().map_or(0, |(n, _)| *n);
            let hi = row.last().map_or(0, |(n, _)| *n + 1);
            let mut band = vec![Q::from_integer(0.into()); hi.saturating_sub(lo)];
            for (n, c) in row {
                band[n - lo] = c.clone();
            }
            first.push(lo);
            coef.extend(band.iter().map(lit));
            start.push(coef.len());
        }
        MomentConstants {
            odd_inv,
            pair_inv,
            series,
            start,
            first,
            coef,
        }
    }
}

/// What every emitted function does with non-finite and huge input, as the header of
/// each language states it (one text, so the three cannot drift apart). `{err}` is
/// replaced by the language's way of reporting a `forward_dynamics` error.
const NON_FINITE_POLICY: &str = "\
Non-finite and huge input, function by function (the same in C, Rust and Python):
- forward_dynamics checks q, q' and u first: a NaN or an infinity is reported as a
  non-finite input, and a result that is not finite as such, with q'' NaN where it
  is returned:
    {err}.
  In C these checks read the bits, so they hold under -ffast-math.
- pose gives [NaN, NaN, NaN] for a segment outside 0..NSEG-1, or sigma outside [0, 1]
  or NaN.
- Every other function checks nothing, for speed: a NaN or an infinity in q or q'
  becomes NaN (or an infinity) in the entries that depend on it, never a crash or an
  out-of-bounds access. stiffness and damping take no input.
- Accuracy is checked by the shipped tests for bending up to the arm file's
  [sampling] bounds (at most 4 pi rad per segment); far beyond, digits are lost, and
  extreme values overflow to infinities or NaN, which forward_dynamics reports.";

/// The policy text for one language: `how` names its error, `prefix` starts each line.
pub fn non_finite_policy(how: &str, prefix: &str) -> String {
    NON_FINITE_POLICY
        .replace("{err}", how)
        .lines()
        .map(|l| format!("{prefix}{l}").trim_end().to_string())
        .collect::<Vec<_>>()
        .join("\n")
}

/// Context entries every language's templates read.
pub fn base_context(name: &str, meta: &Meta, plan: &Plan, n: usize, k: usize) -> Context {
    let mut ctx = Context::new();
    ctx.insert("name", name);
    ctx.insert("version", &meta.version);
    ctx.insert("arm_sha256", &meta.arm_sha256);
    ctx.insert("order", &meta.order);
    ctx.insert("n", &n);
    ctx.insert("k", &k);
    ctx.insert("nseg", &plan.segments);
    ctx.insert("nu_len", &plan.layout.len.max(1));
    ctx.insert("moment_max", &plan.moment_max);
    ctx.insert("series_terms", &SERIES_TERMS);
    ctx.insert("miller_extra", &MILLER_EXTRA);
    ctx.insert(
        "moment_ops",
        &moment_ops(plan.moment_max, false).to_string(),
    );
    ctx.insert("kernel_rows", &plan.table.rows.len());
    ctx
}

/// `row, base` of every kernel use, flat.
pub fn use_pairs<'a>(uses: impl IntoIterator<Item = &'a KernelUse>) -> Vec<String> {
    uses.into_iter()
        .flat_map(|u| [u.row.to_string(), u.base.to_string()])
        .collect()
}

/// Triples `row, real base, imaginary base` of kernel rows evaluated at both parts of
/// one segment's moments, from (real use, imaginary use) pairs of one row.
fn reim_triples<'a>(pairs: impl Iterator<Item = (&'a KernelUse, &'a KernelUse)>) -> Vec<String> {
    pairs
        .flat_map(|(a, b)| {
            debug_assert_eq!(a.row, b.row);
            [a.row.to_string(), a.base.to_string(), b.base.to_string()]
        })
        .collect()
}

/// A dot range's leading pairs ([`DotRange::reim`]) as triples.
pub fn dot_pair_triples(d: &DotRange) -> Vec<String> {
    reim_triples(d.uses[..2 * d.reim].chunks(2).map(|p| (&p[0], &p[1])))
}

/// A family's half-kernel rows as triples: each row is `size` uses at the real base,
/// then the same rows at the imaginary base (the top row; for `ends`, then the bottom).
pub fn half_kernel_triples(uses: &[KernelUse], size: usize) -> Vec<String> {
    reim_triples(
        uses.chunks(2 * size)
            .flat_map(|row| row[..size].iter().zip(&row[size..])),
    )
}

/// Largest value in any function's kernel-use pairs: every such array, and the kernel
/// routine's parameter, share one element type.
pub fn use_max(plan: &Plan) -> usize {
    plan.table.rows.len().max(plan.layout.len)
}

/// Numbers as strings, for lists that templates print.
pub fn strings(v: &[usize]) -> Vec<String> {
    v.iter().map(usize::to_string).collect()
}

/// A family's entry pairs `first, second, …` (indices into its half kernels).
pub fn family_pairs(f: &Family) -> Vec<String> {
    f.entries
        .iter()
        .flat_map(|e| [e.first.to_string(), e.second.to_string()])
        .collect()
}

/// Largest half-kernel index of any family, plus one: the pair arrays' element type.
pub fn pair_max(plan: &Plan) -> usize {
    plan.matrix_tables
        .iter()
        .map(|t| 2 * t.size * t.size)
        .max()
        .unwrap_or(0)
}

/// The kernel recurrence's tables for the templates: index, size, and the tail moments
/// `m_k` as literals, joined by `sep`.
pub fn matrix_table_context(
    plan: &Plan,
    precision: Precision,
    sep: &dyn Fn(&[String]) -> String,
) -> Vec<std::collections::BTreeMap<&'static str, String>> {
    plan.matrix_tables
        .iter()
        .enumerate()
        .map(|(i, t)| {
            let v: Vec<String> = t.moments.iter().map(|q| literal(q, precision)).collect();
            std::collections::BTreeMap::from([
                ("index", i.to_string()),
                ("size", t.size.to_string()),
                ("len", v.len().to_string()),
                ("values", sep(&v)),
            ])
        })
        .collect()
}
