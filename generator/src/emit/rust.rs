//! Rust output: a `no_std` crate `rust/` (Cargo.toml, src/lib.rs, tests/golden.rs) on
//! fixed-size arrays. Source is printed from the templates, parsed with `syn` (so a
//! syntax error is a generator error, never a file) and formatted with `prettyplease`.

use super::body::{
    angle_increment, inline, moment_argument, outputs, temp_slots, temporaries, Spelling, StmtStyle,
};
use super::c::wrap_list;
use super::constants::{
    base_context, dot_pair_triples, family_pairs, half_kernel_triples, matrix_table_context,
    pair_max, strings, use_max, use_pairs, MomentConstants,
};
use super::golden::{Golden, SIGMAS};
use super::number::{rust_spelling, Precision};
use super::plan::{Func, Plan, PARAMETRIC_FUNCTIONS};
use super::templates::render;
use super::{Meta, OutFile};
use serde::Serialize;

#[derive(Serialize)]
struct RFunc {
    rows: String,
    formula: String,
    ops: String,
    signature: String,
    body: String,
}

fn uint(max: usize) -> &'static str {
    if max <= u8::MAX as usize {
        "u8"
    } else if max <= u16::MAX as usize {
        "u16"
    } else {
        "u32"
    }
}

/// The suffix of `libm`'s single-precision functions (`sinf`), none for double.
pub(crate) fn libm_suffix(precision: Precision) -> &'static str {
    match precision {
        Precision::F32 => "f",
        Precision::F64 => "",
    }
}

/// Parses and pretty-prints Rust source.
fn format_rust(what: &str, src: &str) -> Result<String, String> {
    let file = syn::parse_file(src).map_err(|e| {
        let line = e.span().start().line;
        let context: String = src
            .lines()
            .skip(line.saturating_sub(3))
            .take(5)
            .collect::<Vec<_>>()
            .join("\n");
        format!("emitted Rust ({what}) does not parse: {e} at line {line}:\n{context}")
    })?;
    Ok(prettyplease::unparse(&file))
}

/// What every function body of the crate is printed for: the plan and the precision.
#[derive(Clone, Copy)]
struct Target<'a> {
    plan: &'a Plan,
    precision: Precision,
    /// Scratch of the shares helper ([`Plan::shares`]), lent by the functions over it.
    shares_work: usize,
}

/// The body of one function's `_in` form, which works in the scratch slice `work`:
/// the moment, kernel and temporary arrays are split off its front. Returns the
/// constant tables it reads, the body, and the scratch length it needs.
fn body(
    target_crate: Target,
    func: &Func,
    fname: &str,
    pose_seg: Option<usize>,
    init: &str,
    target: &dyn Fn(usize) -> String,
    ret: &str,
) -> (String, String, usize) {
    let Target {
        plan,
        precision,
        shares_work,
    } = target_crate;
    let b = &func.block;
    let fs = libm_suffix(precision);
    let pose_count = pose_seg.map(|s| b.pose_nu_count[s]).unwrap_or(0);
    // Temporaries share array slots once dead, to keep the scratch small.
    let (slots, slot_count) = temp_slots(b, None);
    let syn = Spelling {
        plan,
        precision,
        pose_count,
        temp_array: true,
        slots: Some(&slots),
        param_prefix: "p.",
        rust: true,
    };
    let style = StmtStyle {
        decl: "let ".into(),
        end: ";",
        indent: 4,
        parens: false,
        temp_array: true,
    };
    // The scratch pieces, in order: moments, pose moments, kernels, temporaries.
    let mut pieces: Vec<(&str, usize)> = Vec::new();
    if b.nu_count.iter().any(|&c| c > 0) {
        pieces.push(("nu", plan.layout.len.max(1)));
    }
    if pose_count > 0 {
        pieces.push(("pnu", 2 * pose_count));
    }
    if func.kern_len > 0 {
        pieces.push(("kern", func.kern_len));
    }
    if !func.families.is_empty() {
        // A power of two, so that `kernel_entries` proves its lookups in range with a
        // mask instead of a compare and select per lookup.
        pieces.push((
            "hk",
            func.matrix_scratch(&plan.matrix_tables).next_power_of_two(),
        ));
    }
    if slot_count > 0 {
        pieces.push(("t", slot_count));
    }
    let mut len: usize = pieces.iter().map(|(_, l)| l).sum();
    let mut out = String::new();
    // A function over the shares helper: s[] first, the helper's scratch after it,
    // which the function's own pieces reuse once the helper returns.
    if let (true, Some(helper)) = (func.over_shares, &plan.shares) {
        let s_len = helper.block.outputs.len();
        out.push_str(&format!(
            "let (s, work) = work.split_at_mut({s_len});\nshares_in(p, q, qd, s, work);\n"
        ));
        len = s_len + len.max(shares_work);
    }
    for (i, (what, l)) in pieces.iter().enumerate() {
        let l = if *what == "nu" {
            "NU_LEN".to_string()
        } else {
            l.to_string()
        };
        if i + 1 < pieces.len() {
            out.push_str(&format!("let ({what}, work) = work.split_at_mut({l});\n"));
        } else {
            out.push_str(&format!("let {what} = &mut work[..{l}];\n"));
        }
    }
    let mut rows = String::new();
    for (seg, &c) in b.nu_count.iter().enumerate() {
        if c > 0 {
            let off = plan.layout.offset[seg];
            let im = off + plan.layout.count[seg];
            let arg = inline(&moment_argument(plan, seg, false), &syn);
            out.push_str(&match func.moment_counts(seg) {
                None => format!("moments({arg}, {c}, nu, {off}, {im});\n"),
                // The fast path reads fewer: its top rows are cut to the precision.
                Some((fast, full)) => format!(
                    "{{\nlet a = {arg};\n\
                     let count = if libm::fabs{fs}(a) <= FAST_BENDING {{ {fast} }} else {{ {full} }};\n\
                     moments(a, count, nu, {off}, {im});\n}}\n"
                ),
            });
        }
    }
    if let (Some(seg), true) = (pose_seg, pose_count > 0) {
        let arg = inline(&moment_argument(plan, seg, true), &syn);
        out.push_str(&format!(
            "moments({arg}, {pose_count}, pnu, 0, {pose_count});\n"
        ));
    }
    if b.angles > 0 {
        out.push_str(&format!(
            "let mut cphi = [0.0; {a}];\nlet mut sphi = [0.0; {a}];\n",
            a = b.angles
        ));
        for j in 0..b.angles {
            let inc = inline(&angle_increment(&plan.angle_steps[j]), &syn);
            if j == 0 {
                let m = if b.angles > 1 { "mut " } else { "" };
                out.push_str(&format!("let {m}phi = {inc};\n"));
            } else {
                out.push_str(&format!("phi += {inc};\n"));
            }
            out.push_str(&format!("(sphi[{j}], cphi[{j}]) = sin_cos(phi);\n"));
        }
    }
    let upper = fname.to_uppercase();
    let max = use_max(plan);
    let singles = use_pairs(func.single_uses());
    if !singles.is_empty() {
        rows = format!(
            "/// Dot-product kernels of `{fname}`: pairs (row, moment base).\nstatic {upper}_ROWS: [{}; {}] = [{}];\n",
            uint(max),
            singles.len(),
            wrap_list(&singles, 4)
        );
    }
    let mut at = 0;
    for (k, d) in func.dots.iter().enumerate() {
        if d.reim > 0 {
            let items = dot_pair_triples(d);
            let end = d.start + 2 * d.reim;
            rows.push_str(&format!(
                "/// Dot-product kernels {}..{end} of `{fname}`: one row at both parts of a \
                 segment's moments, (row, real base, imaginary base).\n\
                 static {upper}_REIM{k}: [{}; {}] = [{}];\n",
                d.start,
                uint(max),
                items.len(),
                wrap_list(&items, 4)
            ));
            out.push_str(&format!(
                "kernels_reim(&{upper}_REIM{k}, nu, &mut kern[{}..{end}]);\n",
                d.start
            ));
        }
        let count = d.singles().len();
        if count > 0 {
            let (a, b) = (2 * at, 2 * (at + count));
            let from = d.start + 2 * d.reim;
            out.push_str(&format!(
                "kernels(&{upper}_ROWS[{a}..{b}], nu, &mut kern[{from}..{}]);\n",
                from + count
            ));
            at += count;
        }
    }
    for (k, f) in func.families.iter().enumerate() {
        let size = plan.matrix_tables[f.table].size;
        let arg = inline(&moment_argument(plan, f.seg, false), &syn);
        let seeds = half_kernel_triples(&f.seeds, size);
        let ends = half_kernel_triples(&f.ends, size);
        let idx = family_pairs(f);
        rows.push_str(&format!(
            "/// Kernels {start}..{end} of `{fname}`: segment {seg}'s double kernels, read off \
             its half kernels (`kernel_recurrence`). Its rows' uses (row, real base, imaginary \
             base): the \
             top row's cut to the precision, for `|a| ≤ FAST_BENDING`; the top and bottom \
             rows' whole, beyond. Then per kernel two entries of the half kernels.\n\
             static {upper}_SEEDS{k}: [{rt}; {ns}] = [{}];\n\
             static {upper}_ENDS{k}: [{rt}; {ne}] = [{}];\n\
             static {upper}_PAIRS{k}: [{pt}; {ni}] = [{}];\n",
            wrap_list(&seeds, 4),
            wrap_list(&ends, 4),
            wrap_list(&idx, 4),
            start = f.start,
            end = f.start + f.count,
            seg = f.seg + 1,
            rt = uint(max),
            pt = uint(pair_max(plan)),
            ns = seeds.len(),
            ne = ends.len(),
            ni = idx.len(),
        ));
        let (s0, s1) = (f.start, f.start + f.count);
        out.push_str(&format!(
            "{{\nlet a = {arg};\n\
             let split = {{\n\
             let (real, imag) = hk.split_at_mut({half});\n\
             if libm::fabs{fs}(a) <= FAST_BENDING {{\n\
             kernels_reim_apart(&{upper}_SEEDS{k}, nu, &mut real[{top}..], &mut imag[{top}..]);\n\
             0\n\
             }} else {{\n\
             kernels_reim_apart(&{upper}_ENDS{k}[..{size3}], nu, &mut real[{top}..], &mut imag[{top}..]);\n\
             kernels_reim_apart(&{upper}_ENDS{k}[{size3}..], nu, real, imag);\n\
             recurrence_split(a, {size})\n\
             }}\n\
             }};\n\
             kernel_recurrence({size}, a, split, &TAIL_MOMENTS{t}, hk);\n\
             kernel_entries::<{n_f}>(&{upper}_PAIRS{k}, {sums}, hk, &mut kern[{s0}..{s1}]);\n\
             }}\n",
            size3 = 3 * size,
            n_f = (2 * size * size).next_power_of_two(),
            half = size * size,
            top = (size - 1) * size,
            t = f.table,
            sums = f.sums,
        ));
    }
    if !b.reads_params && PARAMETRIC_FUNCTIONS.contains(&fname) {
        out.push_str("let _ = p;\n");
    }
    out.push_str(init);
    out.push_str(&temporaries(b, &syn, &style));
    out.push_str(&outputs(b, &syn, &style, target));
    out.push_str(ret);
    (rows, out, len)
}

/// Where output `i` of `terms` (B, C, G) or of `terms_actuation` (and then A) goes.
fn terms_target(n: usize, k: usize) -> impl Fn(usize) -> String {
    let nn = n * n;
    move |i| {
        if i < nn {
            format!("b[{}][{}]", i / n, i % n)
        } else if i < 2 * nn {
            format!("c[{}][{}]", (i - nn) / n, (i - nn) % n)
        } else if i < 2 * nn + n {
            format!("g[{}]", i - 2 * nn)
        } else {
            let at = i - 2 * nn - n;
            format!("a[{}][{}]", at / k, at % k)
        }
    }
}

pub fn emit(
    plan: &Plan,
    meta: &Meta,
    precision: Precision,
    golden: &Golden,
) -> Result<Vec<OutFile>, String> {
    let mut tc = Target {
        plan,
        precision,
        shares_work: 0,
    };
    let name = plan.name.as_str();
    let n = plan.n;
    let k = plan.k;
    let ops_line = |f: &Func| super::plan::ops_sentence(f.ops, f.ops_beyond);
    let mut funcs = Vec::new();
    // The helper of `terms` and the regressor: both call it.
    if let Some(helper) = &plan.shares {
        let b = &helper.block;
        let s_len = b.outputs.len();
        let (rows, body, len) = body(
            tc,
            helper,
            "shares",
            None,
            &format!("let s = &mut s[..{s_len}];\n"),
            &|i| format!("s[{i}]"),
            "",
        );
        let unused = |read: bool| if read { "" } else { "_" };
        let w = if len == 0 { "_work" } else { "work" };
        funcs.push(RFunc {
            rows,
            formula: format!(
                "What [`terms`] and [`regressor`] have in common: the {s_len} values `s` that \
                 the rest of each reads, at the runtime parameters `p`, in `work` (at least \
                 {len} reals)."
            ),
            ops: ops_line(helper),
            signature: format!(
                "fn shares_in({}p: &Params, {}q: &[Real; NQ], {}qd: &[Real; NQ], s: &mut [Real], \
                 {w}: &mut [Real])",
                unused(b.reads_params),
                unused(b.reads_q),
                unused(b.reads_qd),
            ),
            body,
        });
        tc.shares_work = len;
    }
    // G and, after it, more NQ-row outputs (name, columns, their constant) in one
    // schedule: what the statics need at one point, with what they share computed once.
    // Returns the scratch length.
    let mut g_and = |f: &Func, fname: &str, more: &[(&str, usize, &str)], formula: &str| {
        let mut init = String::from("let mut g = [0.0; NQ];\n");
        let mut ret = String::from("(g");
        let mut ty = String::from("([Real; NQ]");
        for (array, _, width) in more {
            init.push_str(&format!("let mut {array} = [[0.0; {width}]; NQ];\n"));
            ret.push_str(&format!(", {array}"));
            ty.push_str(&format!(", [[Real; {width}]; NQ]"));
        }
        ret.push_str(")\n");
        ty.push(')');
        let (rows, body, len) = body(
            tc,
            f,
            fname,
            None,
            &init,
            &|i: usize| {
                let mut at = n;
                if i < at {
                    return format!("g[{i}]");
                }
                for (array, cols, _) in more {
                    if i < at + n * cols {
                        return format!("{array}[{}][{}]", (i - at) / cols, (i - at) % cols);
                    }
                    at += n * cols;
                }
                unreachable!("output {i} beyond the arrays")
            },
            &ret,
        );
        let unused = |read: bool| if read { "" } else { "_" };
        let w = if len == 0 { "_work" } else { "work" };
        funcs.push(RFunc {
            rows,
            formula: format!("{formula}, in `work` (at least {len} reals)."),
            ops: ops_line(f),
            signature: format!(
                "fn {fname}_in({}p: &Params, {}q: &[Real; NQ], {w}: &mut [Real]) -> {ty}",
                unused(f.block.reads_params),
                unused(f.block.reads_q),
            ),
            body,
        });
        len
    };
    // `gravity_jacobian` is the first, keeping ∂G/∂q.
    let (more, formula) = if plan.gravity_with_actuation {
        (
            vec![("out", n, "NQ"), ("a", k, "NU")],
            "`G(q)`, `∂G/∂q` and `A(q)` in one call, sharing their moments, kernels and sums \
             (`A`'s end forces lie inside `G`'s): what a Newton step of the statics needs",
        )
    } else {
        (
            vec![("out", n, "NQ")],
            "`G(q)` and `∂G/∂q` in one call, sharing their moments, kernels and sums: what a \
             Newton step of the statics needs",
        )
    };
    let linearised_work = g_and(&plan.gravity_jacobian, "gravity_linearised", &more, formula);
    // `gravity` is the second, keeping G, when A depends on q.
    let gravity_actuation_work = plan.gravity_with_actuation.then(|| {
        g_and(
            &plan.gravity,
            "gravity_actuation",
            &[("a", k, "NU")],
            "`G(q)` and `A(q)` in one call: `A`'s end forces lie inside `G`'s sums. What the \
             statics' residual and the regulator need",
        )
    });
    let tc = tc;
    let mat = |rows: &str, cols: &str| format!("[[Real; {cols}]; {rows}]");
    let mut work_len = 0usize;
    // One public function in three: `F_in` does the work in a scratch slice, `F` lends
    // it scratch on the stack, `F_ws` the caller's [`Workspace`].
    // With an end force, B, C, G and A in one schedule for forward dynamics.
    let terms_actuation_work = plan.terms_actuation.as_ref().map(|f| {
        let nn = mat("NQ", "NQ");
        let (rows, body, len) = body(
            tc,
            f,
            "terms_actuation",
            None,
            "let mut b = [[0.0; NQ]; NQ];\nlet mut c = [[0.0; NQ]; NQ];\nlet mut g = [0.0; NQ];\n\
             let mut a = [[0.0; NU]; NQ];\n",
            &terms_target(n, k),
            "(b, c, g, a)\n",
        );
        funcs.push(RFunc {
            rows,
            formula: format!(
                "`B(q)`, `C(q, q̇)`, `G(q)` and `A(q)` in one call: `A`'s end forces lie inside \
                 the sums of [`terms`], so they come at no cost. What forward dynamics needs, \
                 in `work` (at least {len} reals)."
            ),
            ops: ops_line(f),
            signature: format!(
                "fn terms_actuation_in(p: &Params, q: &[Real; NQ], qd: &[Real; NQ], work: &mut \
                 [Real]) -> ({nn}, {nn}, [Real; NQ], {})",
                mat("NQ", "NU")
            ),
            body,
        });
        len
    });
    let mut public = |fname: &str,
                      formula: &str,
                      ops: String,
                      params: &[(&str, &str, bool)],
                      ret: &str,
                      rows: String,
                      body: String,
                      len: usize| {
        let decl = |used: bool| {
            params
                .iter()
                .map(|(p, ty, read)| {
                    let u = if used && !read { "_" } else { "" };
                    format!("{u}{p}: {ty}")
                })
                .collect::<Vec<_>>()
                .join(", ")
        };
        let args: Vec<&str> = params.iter().map(|(p, _, _)| *p).collect();
        let args = args.join(", ");
        let w = if len == 0 { "_work" } else { "work" };
        // A function whose result depends on a runtime parameter takes `p: &Params` in
        // `_in` and gets `_with` forms.
        let with = PARAMETRIC_FUNCTIONS.contains(&fname);
        let (p_decl, p_default, p_arg) = if with {
            ("p: &Params, ", "&Params::DEFAULT, ", "p, ")
        } else {
            ("", "", "")
        };
        funcs.push(RFunc {
            rows,
            formula: format!(
                "The work of [`{fname}`] and [`{fname}_ws`], in `work` (at least {len} reals)."
            ),
            ops: ops.clone(),
            signature: format!(
                "fn {fname}_in({p_decl}{}, {w}: &mut [Real]) -> {ret}",
                decl(true)
            ),
            body,
        });
        let stack = if len == 0 {
            "&mut []".to_string()
        } else {
            format!("&mut [0.0; {len}]")
        };
        let at = if with {
            " At the arm file's parameters ([`Params::DEFAULT`])."
        } else {
            ""
        };
        funcs.push(RFunc {
            rows: String::new(),
            formula: format!("{formula}{at}"),
            ops: ops.clone(),
            signature: format!("pub fn {fname}({}) -> {ret}", decl(false)),
            body: format!("{fname}_in({p_default}{args}, {stack})\n"),
        });
        funcs.push(RFunc {
            rows: String::new(),
            formula: format!(
                "[`{fname}`] with its scratch in the caller's [`Workspace`] instead of on \
                 the stack ({len} reals); the same values."
            ),
            ops: ops.clone(),
            signature: format!(
                "pub fn {fname}_ws({}, ws: &mut Workspace) -> {ret}",
                decl(false)
            ),
            body: format!("{fname}_in({p_default}{args}, &mut ws.0)\n"),
        });
        if with {
            funcs.push(RFunc {
                rows: String::new(),
                formula: format!("[`{fname}`] at the runtime parameters `p`."),
                ops: ops.clone(),
                signature: format!("pub fn {fname}_with({p_decl}{}) -> {ret}", decl(false)),
                body: format!("{fname}_in({p_arg}{args}, {stack})\n"),
            });
            funcs.push(RFunc {
                rows: String::new(),
                formula: format!(
                    "[`{fname}_with`] with its scratch in the caller's [`Workspace`]."
                ),
                ops,
                signature: format!(
                    "pub fn {fname}_with_ws({p_decl}{}, ws: &mut Workspace) -> {ret}",
                    decl(false)
                ),
                body: format!("{fname}_in({p_arg}{args}, &mut ws.0)\n"),
            });
        }
        work_len = work_len.max(len);
    };
    let q_of = |f: &Func| ("q", "&[Real; NQ]", f.block.reads_q);
    let qd_of = |f: &Func| ("qd", "&[Real; NQ]", f.block.reads_qd);
    let mat_target =
        |cols: usize| move |i: usize| format!("out[{}][{}]", i / cols.max(1), i % cols.max(1));
    let nn = mat("NQ", "NQ");
    let mut generated = |fname: &str,
                         formula: &str,
                         f: &Func,
                         params: &[(&str, &str, bool)],
                         ret: &str,
                         init: &str,
                         target: &dyn Fn(usize) -> String,
                         result: &str| {
        let (rows, body, len) = body(tc, f, fname, None, init, target, result);
        public(fname, formula, ops_line(f), params, ret, rows, body, len);
        len
    };
    let inertia_work = generated(
        "inertia",
        "Inertia matrix `B(q)`, NQ×NQ, symmetric positive definite; `T = ½ q̇ᵀ B q̇`.",
        &plan.inertia,
        &[q_of(&plan.inertia)],
        &nn,
        "let mut out = [[0.0; NQ]; NQ];\n",
        &mat_target(n),
        "out\n",
    );
    let gravity_work = match gravity_actuation_work {
        Some(len) => len,
        None => generated(
            "gravity",
            "Gravity vector `G(q) = ∂U_g/∂q`.",
            &plan.gravity,
            &[q_of(&plan.gravity)],
            "[Real; NQ]",
            "let mut out = [0.0; NQ];\n",
            &|i| format!("out[{i}]"),
            "out\n",
        ),
    };
    let actuation_work = generated(
        "actuation",
        "Actuation matrix `A(q)`, NQ×NU: generalized force `A u`.",
        &plan.actuation,
        &[q_of(&plan.actuation)],
        &mat("NQ", "NU"),
        // An arm without inputs has an empty A: nothing is written into it.
        if plan.actuation.block.outputs.is_empty() {
            "let out = [[0.0; NU]; NQ];\n"
        } else {
            "let mut out = [[0.0; NU]; NQ];\n"
        },
        &mat_target(k),
        "out\n",
    );
    generated(
        "tip_jacobian",
        "Tip Jacobian, 3×NQ: rows ∂x/∂q, ∂y/∂q, ∂angle/∂q.",
        &plan.tip_jacobian,
        &[q_of(&plan.tip_jacobian)],
        &mat("3", "NQ"),
        "let mut out = [[0.0; NQ]; 3];\n",
        &mat_target(n),
        "out\n",
    );
    generated(
        "potential_energy",
        "Potential energy [J]: gravity (zero at q = 0) plus elastic `½ qᵀ K q`.",
        &plan.potential_energy,
        &[q_of(&plan.potential_energy)],
        "Real",
        "",
        &|_| String::new(),
        "",
    );
    let terms_ret = format!("({nn}, {nn}, [Real; NQ])");
    // With an end force, `terms` is the schedule with A, keeping B, C and G (below).
    let terms_work = plan.terms_actuation.is_none().then(|| {
        generated(
                "terms",
                "`B(q)`, `C(q, q̇)` and `G(q)` in one call, equal to [`inertia`], [`coriolis`] and [`gravity`] to rounding (shared sums are added in another order): the call for a controller that needs all three, with what they share computed once.",
                &plan.terms,
                &[q_of(&plan.terms), qd_of(&plan.terms)],
                &terms_ret,
                "let mut b = [[0.0; NQ]; NQ];\nlet mut c = [[0.0; NQ]; NQ];\nlet mut g = [0.0; NQ];\n",
                &terms_target(n, k),
                "(b, c, g)\n",
            )
    });
    if let Some(f) = &plan.regressor {
        let ny = plan.params.linear_len();
        generated(
            "regressor",
            "Regressor `Y(q, q̇, q̈)`, NQ×NTHETA: `Y θ = B q̈ + C q̇ + G + K q + D q̇` exactly, for the linear parameters `θ` (the fields of [`Params`] but gravity, in order). Gravity is not in `θ`: the `_with` forms read `p.gravity` and ignore `p`'s other fields.",
            f,
            &[
                q_of(f),
                qd_of(f),
                ("qdd", "&[Real; NQ]", true),
            ],
            &mat("NQ", "NTHETA"),
            "let mut out = [[0.0; NTHETA]; NQ];\n",
            &mat_target(ny),
            "out\n",
        );
    }
    let terms_work = match terms_actuation_work.zip(plan.terms_actuation.as_ref()) {
        Some((len, f)) => {
            public(
                "terms",
                "`B(q)`, `C(q, q̇)` and `G(q)` in one call, equal to [`inertia`], [`coriolis`] and [`gravity`] to rounding (shared sums are added in another order): the call for a controller that needs all three, with what they share computed once. Computed with `A(q)`, whose end forces lie inside their sums.",
                ops_line(f),
                &[q_of(f), qd_of(f)],
                &terms_ret,
                String::new(),
                "let (b, c, g, _) = terms_actuation_in(p, q, qd, work);\n(b, c, g)\n".into(),
                len,
            );
            len
        }
        // Generated above.
        None => terms_work.unwrap_or(0),
    };
    let both = [("q", "&[Real; NQ]", true), ("qd", "&[Real; NQ]", true)];
    public(
        "gravity_jacobian",
        "Gravity Jacobian `∂G/∂q`, NQ×NQ: the Hessian of `U_g`, so symmetric. Computed with `G(q)`, which shares nearly all of its work.",
        ops_line(&plan.gravity_jacobian),
        &[q_of(&plan.gravity_jacobian)],
        &nn,
        String::new(),
        "gravity_linearised_in(p, q, work).1\n".into(),
        linearised_work,
    );
    let gravity_jacobian_work = linearised_work;
    if let Some(len) = gravity_actuation_work {
        public(
            "gravity",
            "Gravity vector `G(q) = ∂U_g/∂q`. Computed with `A(q)`, whose end forces lie inside its sums.",
            ops_line(&plan.gravity),
            &[q_of(&plan.gravity)],
            "[Real; NQ]",
            String::new(),
            "gravity_actuation_in(p, q, work).0\n".into(),
            len,
        );
    }
    // C alone needs nearly everything B and G need too: it is `terms`, keeping C.
    public(
        "coriolis",
        "Coriolis matrix `C(q, q̇)` (Christoffel symbols of the first kind; `Ḃ − 2C` skew), NQ×NQ. From [`terms`]: C shares nearly all of its work with B and G.",
        ops_line(&plan.terms),
        &both,
        &nn,
        String::new(),
        "terms_in(p, q, qd, work).1\n".into(),
        terms_work,
    );
    public(
        "kinetic_energy",
        "Kinetic energy `T = ½ q̇ᵀ B(q) q̇` [J], with `B` from [`inertia`].",
        super::plan::ops_sentence(plan.kinetic_energy, plan.kinetic_energy_beyond),
        &both,
        "Real",
        String::new(),
        "let b = inertia_in(p, q, work);\nlet mut t = 0.0;\nfor i in 0..NQ {\n\
         let mut bqd = 0.0;\nfor k in 0..NQ {\nbqd += b[i][k] * qd[k];\n}\n\
         t += qd[i] * bqd;\n}\n0.5 * t\n"
            .into(),
        inertia_work,
    );
    // K and D are constants: no scratch, no `_ws` form.
    for (fname, formula, f) in [
        (
            "stiffness",
            "Stiffness matrix `K` (constant, block diagonal): elastic energy `½ qᵀ K q`.",
            &plan.stiffness,
        ),
        (
            "damping",
            "Damping matrix `D` (constant): dissipation `½ q̇ᵀ D q̇`.",
            &plan.damping,
        ),
    ] {
        let (rows, body, len_k) = body(
            tc,
            f,
            fname,
            None,
            "let mut out = [[0.0; NQ]; NQ];\n",
            &mat_target(n),
            "out\n",
        );
        funcs.push(RFunc {
            rows,
            formula: format!("{formula} At the runtime parameters `p`."),
            ops: ops_line(f),
            signature: format!("pub fn {fname}_with(p: &Params) -> {nn}"),
            // (A constant needs no scratch; should one ever need some, it gets its own.)
            body: if len_k == 0 {
                body
            } else {
                format!("let work: &mut [Real] = &mut [0.0; {len_k}];\n{body}")
            },
        });
        funcs.push(RFunc {
            rows: String::new(),
            formula: format!("[`{fname}_with`] at the arm file's parameters."),
            ops: ops_line(f),
            signature: format!("pub fn {fname}() -> {nn}"),
            body: format!("{fname}_with(&Params::DEFAULT)\n"),
        });
    }
    let mut pose_names = Vec::new();
    let mut pose_work = 0usize;
    for (j, f) in plan.pose.iter().enumerate() {
        let fname = format!("pose_segment{j}");
        let sig = if f.block.reads_sigma {
            "sigma"
        } else {
            "_sigma"
        };
        let (rows, body, len) = body(
            tc,
            f,
            &fname,
            Some(j),
            "let mut out = [0.0; 3];\n",
            &|i| format!("out[{i}]"),
            "out\n",
        );
        pose_work = pose_work.max(len);
        let w = if len == 0 { "_work" } else { "work" };
        funcs.push(RFunc {
            rows,
            formula: format!("Backbone pose `[x, y, angle]` of segment {j} at `sigma`."),
            ops: ops_line(f),
            signature: format!(
                "fn {fname}({}: &[Real; NQ], {sig}: Real, {w}: &mut [Real]) -> [Real; 3]",
                if f.block.reads_q { "q" } else { "_q" }
            ),
            body,
        });
        pose_names.push(fname);
    }
    // The derivative of A for end forces, `[x][i][c]`: used by the statics functions only.
    let mut da_work = 0usize;
    if let Some(f) = &plan.actuation_jacobian {
        let (rows, body, len) = body(
            tc,
            f,
            "actuation_jacobian",
            None,
            "let mut out = [[[0.0; NU]; NQ]; NQ];\n",
            &move |i: usize| format!("out[{}][{}][{}]", i / (n * k), (i / k) % n, i % k),
            "out\n",
        );
        da_work = len;
        funcs.push(RFunc {
            rows,
            formula: "`∂A_ic/∂q_x` as `[x][i][c]`: the statics functions' `∂(A u)/∂q`.".into(),
            ops: ops_line(f),
            signature: format!(
                "fn actuation_jacobian_in(q: &[Real; NQ], {}: &mut [Real]) -> [[[Real; NU]; NQ]; NQ]",
                if len == 0 { "_work" } else { "work" }
            ),
            body,
        });
    }
    let statics_work = gravity_work
        .max(actuation_work)
        .max(gravity_jacobian_work)
        .max(da_work)
        .max(1);
    let dynamics_work = terms_actuation_work.unwrap_or(terms_work.max(actuation_work));
    work_len = work_len
        .max(pose_work)
        .max(dynamics_work)
        .max(statics_work)
        .max(1);
    let mut mc = MomentConstants::new(plan, precision);
    for list in [&mut mc.odd_inv, &mut mc.pair_inv, &mut mc.coef] {
        *list = list.drain(..).map(rust_spelling).collect();
    }
    for row in &mut mc.series {
        *row = row.drain(..).map(rust_spelling).collect();
    }
    let series: Vec<String> = mc
        .series
        .iter()
        .map(|row| format!("[{}]", row.join(", ")))
        .collect();
    let mut ctx = base_context(name, meta, plan, n, k);
    ctx.insert(
        "non_finite_policy",
        &super::constants::non_finite_policy(
            "Err(DynamicsError::NonFiniteInput), Err(NonFiniteResult)",
            "//! ",
        ),
    );
    ctx.insert("odd_inv", &mc.odd_inv.join(", "));
    ctx.insert("pair_inv", &mc.pair_inv.join(", "));
    ctx.insert("series", &series.join(", "));
    ctx.insert("kernel_nnz", &mc.coef.len());
    ctx.insert(
        "matrix_tables",
        &matrix_table_context(plan, precision, &|v| {
            v.iter()
                .cloned()
                .map(rust_spelling)
                .collect::<Vec<_>>()
                .join(", ")
        }),
    );
    ctx.insert("pair_type", uint(pair_max(plan)));
    ctx.insert("start_type", uint(mc.coef.len()));
    ctx.insert("index_type", uint(plan.moment_max));
    ctx.insert("row_type", uint(use_max(plan)));
    ctx.insert("kernel_routines", &plan.kernel_routines());
    ctx.insert("gravity_actuation", &plan.gravity_with_actuation);
    ctx.insert("kernel_start", &strings(&mc.start).join(", "));
    ctx.insert("kernel_first", &strings(&mc.first).join(", "));
    ctx.insert("kernel_coef", &mc.coef.join(", "));
    ctx.insert("functions", &funcs);
    ctx.insert("pose_names", &pose_names);
    ctx.insert("pose_work", &pose_work);
    ctx.insert("dynamics_work", &dynamics_work);
    ctx.insert("terms_actuation", &plan.terms_actuation.is_some());
    ctx.insert("work_len", &work_len);
    ctx.insert(
        "dynamics_ops",
        &super::plan::ops_sentence(plan.dynamics, plan.dynamics_beyond),
    );
    ctx.insert("statics_work", &statics_work);
    ctx.insert("ntheta", &plan.params.linear_len());
    // The runtime parameters' struct fields and the arm file's values.
    let fields: Vec<(String, String, &str)> = plan
        .params
        .fields()
        .iter()
        .map(|f| {
            let vals: Vec<String> = f
                .of(&plan.param_defaults)
                .iter()
                .map(|q| rust_spelling(super::number::literal(q, precision)))
                .collect();
            match f.len {
                Some(l) => (
                    format!("{}: [Real; {l}]", f.kind.field()),
                    format!("{}: [{}]", f.kind.field(), vals.join(", ")),
                    f.kind.doc(),
                ),
                None => (
                    format!("{}: Real", f.kind.field()),
                    format!("{}: {}", f.kind.field(), vals[0]),
                    f.kind.doc(),
                ),
            }
        })
        .collect();
    ctx.insert("param_fields", &fields);
    let finite: Vec<String> = plan
        .params
        .fields()
        .iter()
        .map(|f| match f.len {
            Some(_) => format!("self.{}.iter().all(|v| v.is_finite())", f.kind.field()),
            None => format!("self.{}.is_finite()", f.kind.field()),
        })
        .collect();
    ctx.insert("param_finite", &finite.join("\n            && "));
    let assign: Vec<(String, usize)> = (0..plan.params.len())
        .map(|k| (plan.params.spelling(k), k))
        .collect();
    ctx.insert("param_assign", &assign);
    super::control_code::insert_rust(&mut ctx, plan, precision);
    let settings = super::control_code::Settings::of(precision);
    ctx.insert(
        "real",
        if precision == Precision::F32 {
            "f32"
        } else {
            "f64"
        },
    );
    ctx.insert("real_size", &precision.bytes());
    ctx.insert("fs", libm_suffix(precision));
    ctx.insert("half_pi_parts", &half_pi_parts());
    let (big, small) = precision.rescale_bounds();
    ctx.insert("big", &rust_spelling(big.to_string()));
    ctx.insert("small", &rust_spelling(small.to_string()));
    ctx.insert("tiny", &rust_spelling(settings.tiny.to_string()));
    ctx.insert("one_ulp", &rust_spelling(settings.one_ulp.to_string()));
    ctx.insert(
        "pivot_floor",
        &rust_spelling(super::c::pivot_floor(precision).to_string()),
    );
    ctx.insert("rtol", &golden.rtol(precision));
    ctx.insert("well_posed", super::c::well_posed(precision));
    ctx.insert("rtol_reason", golden.rtol_reason(precision));
    ctx.insert("rtol_equilibrium", golden.rtol_equilibrium(precision));
    ctx.insert("eq_rounding", golden.eq_rounding(precision));
    ctx.insert("golden", &golden_rust(golden));
    ctx.insert(
        "sigmas",
        &SIGMAS
            .iter()
            .map(|s| super::number::f64_literal(*s))
            .collect::<Vec<_>>()
            .join(", "),
    );
    let lib = format_rust("src/lib.rs", &render("rust/lib.rs", &ctx)?)?;
    let test = format_rust("tests/golden.rs", &render("rust/golden.rs", &ctx)?)?;
    Ok(vec![
        ("rust/Cargo.toml".into(), render("rust/Cargo.toml", &ctx)?),
        ("rust/src/lib.rs".into(), lib),
        ("rust/tests/golden.rs".into(), test),
    ])
}

/// Golden data as Rust statics: `G_<NAME>: [[f64; len]; NCASES]`.
fn golden_rust(g: &Golden) -> String {
    let cases = g.labels.len();
    let mut out = format!("const NCASES: usize = {cases};\nstatic LABELS: [&str; NCASES] = [");
    out.push_str(
        &g.labels
            .iter()
            .map(|l| format!("{l:?}"))
            .collect::<Vec<_>>()
            .join(", "),
    );
    out.push_str("];\n");
    for a in &g.arrays {
        let len = a.len.max(1);
        out.push_str(&format!(
            "static G_{}: [[f64; {len}]; NCASES] = [",
            a.name.to_uppercase()
        ));
        for c in 0..cases {
            out.push_str(&format!("[{}],", g.literals(a.name, c).join(", ")));
        }
        out.push_str("];\n");
    }
    for name in g.scaled() {
        out.push_str(&format!(
            "const SCALE_{}: f64 = {};\n",
            name.to_uppercase(),
            super::number::golden_literal(g.scale(name))
        ));
    }
    out
}

/// `π/2` as `P1 + P2 + P3` for the single-precision `sin_cos` of the Rust crate: `P1`
/// rounded to 8 significant bits, `P2` (the rest) to 12, `P3` the remainder to `f32`;
/// printed as `f32` literals that read back exactly.
fn half_pi_parts() -> String {
    let round_to_bits = |x: f64, bits: i32| {
        let scale = 2f64.powi(bits - 1 - x.abs().log2().floor() as i32);
        (x * scale).round() / scale
    };
    let half_pi = std::f64::consts::FRAC_PI_2;
    let p1 = round_to_bits(half_pi, 8);
    let p2 = round_to_bits(half_pi - p1, 12);
    let p3 = (half_pi - p1 - p2) as f32;
    format!("{:?}, {:?}, {:?}", p1 as f32, p2 as f32, p3)
}
