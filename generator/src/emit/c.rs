//! C99 output: `c/NAME.h`, `c/NAME.c` and the cross-check `c/test_NAME.c`.

use super::body::{
    angle_increment, for_each_leaf, inline, moment_argument, outputs, statements, temp_slots,
    temporaries, Spelling, StmtStyle,
};
use super::constants::{
    base_context, dot_pair_triples, family_pairs, half_kernel_triples, matrix_table_context,
    pair_max, strings, use_max, use_pairs, MomentConstants,
};
use super::control_code::{StaticsCallees, StaticsLayout};
use super::golden::Golden;
use super::number::Precision;
use super::plan::{Func, Plan, PARAMETRIC_FUNCTIONS};
use super::schedule::{Block, KernelUse, Leaf, Stmt};
use super::templates::render;
use super::{CStandard, Meta};
use crate::ir::Var;
use serde::Serialize;

#[derive(Serialize)]
struct CFunc {
    rows: String,
    formula: String,
    ops: String,
    signature: String,
    body: String,
    /// A plain form (scratch on its own stack): compiled only on request, see
    /// `PLAIN_MACRO`.
    plain: bool,
}

/// Defining this macro (for the arm's `.c` and for the code that calls it) brings in
/// the plain forms, which put their scratch on the stack: opt-in, because a firmware
/// built with a stack limit (`-Wstack-usage=`) should see only the `_ws` forms.
pub const PLAIN_MACRO: &str = "ARCWRIGHT_PLAIN_FUNCTIONS";

fn real(p: Precision) -> &'static str {
    match p {
        Precision::F32 => "float",
        Precision::F64 => "double",
    }
}

/// Comma-separated values, several per line, indented.
pub(super) fn wrap_list(items: &[String], indent: usize) -> String {
    let pad = " ".repeat(indent);
    let mut out = String::new();
    let mut line = pad.clone();
    for (i, it) in items.iter().enumerate() {
        let piece = if i + 1 < items.len() {
            format!("{it},")
        } else {
            it.clone()
        };
        if line.len() > indent && line.len() + 1 + piece.len() > super::printer::WIDTH {
            out.push_str(line.trim_end());
            out.push('\n');
            line = pad.clone();
        }
        if line.len() > indent {
            line.push(' ');
        }
        line.push_str(&piece);
    }
    out.push_str(&line);
    out
}

/// Smallest unsigned type for values up to `max`.
fn uint_type(max: usize) -> &'static str {
    if max <= u8::MAX as usize {
        "unsigned char"
    } else if max <= u16::MAX as usize {
        "unsigned short"
    } else {
        "unsigned long"
    }
}

struct Printer<'a> {
    plan: &'a Plan,
    precision: Precision,
    standard: CStandard,
    name: &'a str,
    /// Scratch of the shares helper ([`Plan::shares`]), lent by the functions over it.
    shares_work: usize,
}

impl Printer<'_> {
    fn real(&self) -> &'static str {
        real(self.precision)
    }
    fn upper(&self) -> String {
        self.name.to_uppercase()
    }
    fn fabs(&self) -> String {
        format!("fabs{}", self.fs())
    }
    fn fs(&self) -> &'static str {
        if self.precision == Precision::F32 {
            "f"
        } else {
            ""
        }
    }

    /// The body of one function's `_ws` form: preamble, temporaries, outputs, with the
    /// moment, kernel and temporary arrays carved out of the caller's `work`. Returns
    /// the constant tables it reads, the body, and the scratch length it needs.
    fn body(
        &self,
        func: &Func,
        fname: &str,
        pose_seg: Option<usize>,
        target: &dyn Fn(usize) -> String,
    ) -> (String, String, usize) {
        let b = &func.block;
        let plan = self.plan;
        let r = self.real();
        let pose_count = pose_seg.map(|s| b.pose_nu_count[s]).unwrap_or(0);
        // Long bodies go into parts over one scratch array (see `parts`).
        let split = b.stmts.len() > PART_STATEMENTS;
        let (slots, slot_count) = if split {
            temp_slots(b, Some(PART_STATEMENTS))
        } else {
            (Vec::new(), 0)
        };
        let syn = Spelling {
            plan,
            precision: self.precision,
            pose_count,
            temp_array: split,
            slots: split.then_some(slots.as_slice()),
            param_prefix: "P->",
            rust: false,
        };
        let style = self.stmt_style(split);
        // Declarations (the pieces of `work`, and under C90 the temporaries) come
        // first, the code after them.
        let mut decls = String::new();
        let mut out = String::new();
        let mut rows = String::new();
        let mut used = 0usize;
        let mut carve = |decls: &mut String, what: &str, len: usize| {
            decls.push_str(&format!(
                "    {r} *const {what} = &work[{used}]; /* {len} */\n"
            ));
            used += len;
        };
        // A function over the shares helper: s[] first, the helper's scratch after it,
        // which the function's own temporaries reuse once the helper returns.
        let mut lent = 0;
        if let (true, Some(helper)) = (func.over_shares, &plan.shares) {
            let len = helper.block.outputs.len();
            carve(&mut decls, "s", len);
            out.push_str(&format!(
                "    {}_shares(P, q, qd, s, &work[{len}]);\n",
                self.name
            ));
            lent = len + self.shares_work;
        }
        let needs_nu = b.nu_count.iter().any(|&c| c > 0);
        if needs_nu {
            carve(&mut decls, "nu", plan.layout.len.max(1));
        }
        if pose_count > 0 {
            carve(&mut decls, "pnu", 2 * pose_count);
        }
        if func.kern_len > 0 {
            carve(&mut decls, "kern", func.kern_len);
        }
        let singles = use_pairs(func.single_uses());
        if !singles.is_empty() {
            rows = format!(
                "/* Dot-product kernels of {n}_{fname}: pairs (row, moment base). */\n\
                 static const {} {n}_{fname}_rows[{}] = {{\n{}\n}};\n",
                uint_type(use_max(plan)),
                singles.len(),
                wrap_list(&singles, 4),
                n = self.name,
            );
        }
        for (k, d) in func.dots.iter().enumerate().filter(|(_, d)| d.reim > 0) {
            let items = dot_pair_triples(d);
            rows.push_str(&format!(
                "/* Dot-product kernels {start} .. {end} of {n}_{fname}: one row at both parts \
                 of a segment's moments, (row, real base, imaginary base). */\n\
                 static const {} {n}_{fname}_reim{k}[{}] = {{\n{}\n}};\n",
                uint_type(use_max(plan)),
                items.len(),
                wrap_list(&items, 4),
                start = d.start,
                end = d.start + 2 * d.reim,
                n = self.name,
            ));
        }
        if b.angles > 0 {
            decls.push_str(&format!(
                "    {r} cphi[{}];\n    {r} sphi[{}];\n    {r} phi;\n",
                b.angles, b.angles
            ));
        }
        for (seg, &c) in b.nu_count.iter().enumerate() {
            if c > 0 {
                let off = plan.layout.offset[seg];
                let im = off + plan.layout.count[seg];
                let arg = inline(&moment_argument(plan, seg, false), &syn);
                let n = self.name;
                out.push_str(&match func.moment_counts(seg) {
                    None => format!("    {n}_moments({arg}, {c}, &nu[{off}], &nu[{im}]);\n"),
                    // The fast path reads fewer: its top rows are cut to the precision.
                    Some((fast, full)) => format!(
                        "    {{\n        const {r} a = {arg};\n        \
                         {n}_moments(a, {abs}(a) <= {upper}_FAST_BENDING ? {fast} : {full}, \
                         &nu[{off}], &nu[{im}]);\n    }}\n",
                        abs = self.fabs(),
                        upper = self.upper(),
                    ),
                });
            }
        }
        if let Some(seg) = pose_seg {
            if pose_count > 0 {
                let arg = inline(&moment_argument(plan, seg, true), &syn);
                out.push_str(&format!(
                    "    {}_moments({arg}, {pose_count}, &pnu[0], &pnu[{pose_count}]);\n",
                    self.name
                ));
            }
        }
        for j in 0..b.angles {
            let inc = inline(&angle_increment(&plan.angle_steps[j]), &syn);
            if j == 0 {
                out.push_str(&format!("    phi = {inc};\n"));
            } else {
                out.push_str(&format!("    phi += {inc};\n"));
            }
            out.push_str(&format!(
                "    cphi[{j}] = cos{}(phi);\n    sphi[{j}] = sin{}(phi);\n",
                self.fs(),
                self.fs()
            ));
        }
        if func.kern_len > 0 {
            let n = self.name;
            let at_kern = |i: usize| {
                if i == 0 {
                    "kern".to_string()
                } else {
                    format!("&kern[{i}]")
                }
            };
            let mut at = 0;
            for (k, d) in func.dots.iter().enumerate() {
                if d.reim > 0 {
                    out.push_str(&format!(
                        "    {n}_kernel_reim({n}_{fname}_reim{k}, {}, nu, {}, &kern[{}], 2);\n",
                        d.reim,
                        at_kern(d.start),
                        d.start + 1
                    ));
                }
                let count = d.singles().len();
                if count > 0 {
                    let rows = if at == 0 {
                        format!("{n}_{fname}_rows")
                    } else {
                        format!("&{n}_{fname}_rows[{}]", 2 * at)
                    };
                    out.push_str(&format!(
                        "    {n}_kernels({rows}, {count}, nu, {});\n",
                        at_kern(d.start + 2 * d.reim)
                    ));
                    at += count;
                }
            }
            if !func.families.is_empty() {
                carve(&mut decls, "F", func.matrix_scratch(&plan.matrix_tables));
            }
            for (k, f) in func.families.iter().enumerate() {
                let size = plan.matrix_tables[f.table].size;
                let arg = inline(&moment_argument(plan, f.seg, false), &syn);
                let rt = uint_type(use_max(plan));
                let idx = family_pairs(f);
                let list = |uses: &[KernelUse]| {
                    let items = half_kernel_triples(uses, size);
                    (items.len(), wrap_list(&items, 4))
                };
                let (ns, seeds) = list(&f.seeds);
                let (ne, ends) = list(&f.ends);
                rows.push_str(&format!(
                    "/* Kernels {start} .. {end} of {n}_{fname}: segment {seg}'s double kernels, \
                     read off its half kernels F (see {n}_kernel_recurrence). Its rows' uses \
                     (row, real base, imaginary base): the top row's cut to the precision, for \
                     |a| <= {upper}_FAST_BENDING; the top and bottom rows' whole, beyond. Then \
                     per kernel the two entries of F. */\n\
                     static const {rt} {n}_{fname}_seeds{k}[{ns}] = {{\n{seeds}\n}};\n\
                     static const {rt} {n}_{fname}_ends{k}[{ne}] = {{\n{ends}\n}};\n\
                     static const {it} {n}_{fname}_pairs{k}[{ni}] = {{\n{}\n}};\n",
                    wrap_list(&idx, 4),
                    start = f.start,
                    end = f.start + f.count,
                    seg = f.seg + 1,
                    upper = self.upper(),
                    it = uint_type(pair_max(plan)),
                    ni = idx.len(),
                ));
                out.push_str(&format!(
                    "    {{\n        const {r} a = {arg};\n        int split = 0;\n        \
                     if ({abs}(a) <= {upper}_FAST_BENDING) {{\n            \
                     {n}_kernel_reim({n}_{fname}_seeds{k}, {size}, nu, &F[{top_re}], &F[{top_im}], 1);\n        \
                     }} else {{\n            \
                     {n}_kernel_reim({n}_{fname}_ends{k}, {size}, nu, &F[{top_re}], &F[{top_im}], 1);\n            \
                     {n}_kernel_reim(&{n}_{fname}_ends{k}[{size3}], {size}, nu, F, &F[{bottom_im}], 1);\n            \
                     split = {n}_recurrence_split(a, {size});\n        \
                     }}\n        \
                     {n}_kernel_recurrence({size}, a, split, {n}_tail_moments{t}, F);\n        \
                     {n}_kernel_entries({n}_{fname}_pairs{k}, {sums}, {count}, F, &kern[{start}]);\n    \
                     }}\n",
                    abs = self.fabs(),
                    upper = self.upper(),
                    top_re = (size - 1) * size,
                    top_im = size * size + (size - 1) * size,
                    bottom_im = size * size,
                    size3 = 3 * size,
                    t = f.table,
                    sums = f.sums,
                    count = f.count,
                    start = f.start,
                ));
            }
        }
        if !b.reads_q && fname != "stiffness" && fname != "damping" {
            out.push_str("    (void)q;\n");
        }
        if !b.reads_params && PARAMETRIC_FUNCTIONS.contains(&fname) {
            out.push_str("    (void)P;\n");
        }
        if split {
            carve(&mut decls, "t", slot_count);
            let (defs, calls) = self.parts(b, fname, &syn, &style);
            rows.push_str(&defs);
            out.push_str(&calls);
        } else {
            decls.push_str(&self.hoisted(&b.stmts, &syn));
            out.push_str(&temporaries(b, &syn, &style));
        }
        out.push_str(&outputs(b, &syn, &style, target));
        (rows, format!("{decls}{out}"), used.max(lent))
    }

    /// How temporaries are written: `const` where computed (C99), or assigned to
    /// variables declared at the top of the block (C90, see [`Self::hoisted`]).
    fn stmt_style(&self, temp_array: bool) -> StmtStyle {
        StmtStyle {
            decl: match self.standard {
                CStandard::C99 => format!("const {} ", self.real()),
                CStandard::C90 => String::new(),
            },
            end: ";",
            indent: 4,
            parens: false,
            temp_array,
        }
    }

    /// Under C90, the declarations of the local temporaries among `stmts` (those not
    /// kept in the scratch array `t`); nothing under C99.
    fn hoisted(&self, stmts: &[Stmt], syn: &Spelling) -> String {
        if self.standard == CStandard::C99 {
            return String::new();
        }
        let names: Vec<String> = stmts
            .iter()
            .filter(|s| !syn.in_array(s.temp))
            .map(|s| format!("t{}", s.temp))
            .collect();
        if names.is_empty() {
            return String::new();
        }
        let mut out = String::new();
        for chunk in names.chunks(10) {
            out.push_str(&format!("    {} {};\n", self.real(), chunk.join(", ")));
        }
        out
    }

    /// A long body as static parts of at most [`PART_STATEMENTS`] statements each,
    /// writing their temporaries into the caller's scratch array `t`. Compilers
    /// optimise one huge basic block in time that grows faster than its length; parts
    /// keep `gcc -O2` roughly linear (measured: 25 s for one 25k-operation body, 6 s
    /// as parts). Returns the part definitions and the calls.
    fn parts(&self, b: &Block, fname: &str, syn: &Spelling, style: &StmtStyle) -> (String, String) {
        let r = self.real();
        let chunks: Vec<&[Stmt]> = b.stmts.chunks(PART_STATEMENTS).collect();
        let mut defs = String::new();
        let mut calls = String::new();
        for (c, chunk) in chunks.iter().enumerate() {
            // The inputs this part reads, in a fixed order.
            let mut reads = [false; 11];
            for s in chunk.iter() {
                for_each_leaf(&s.expr, &mut |l| {
                    let k = match l {
                        Leaf::Input(Var::Q(_)) => 0,
                        Leaf::Input(Var::Qd(_)) => 1,
                        Leaf::Input(Var::Sigma) => 2,
                        Leaf::Input(Var::Nu { .. }) => 3,
                        Leaf::Input(Var::PoseNu { .. }) => 4,
                        Leaf::Input(Var::CosPhi(_)) => 5,
                        Leaf::Input(Var::SinPhi(_)) => 6,
                        Leaf::Kernel(_) => 7,
                        Leaf::Input(Var::Param(_)) => 8,
                        Leaf::Input(Var::Qdd(_)) => 9,
                        Leaf::Shared(_) => 10,
                        Leaf::Temp(_) => return,
                    };
                    reads[k] = true;
                });
            }
            let names = [
                "q", "qd", "sigma", "nu", "pnu", "cphi", "sphi", "kern", "P", "qdd", "s",
            ];
            let mut params = Vec::new();
            let mut args = Vec::new();
            for (k, name) in names.iter().enumerate() {
                if reads[k] {
                    params.push(match *name {
                        "sigma" => format!("{r} sigma"),
                        "P" => format!("const {}_params *P", self.name),
                        _ => format!("const {r} {name}[]"),
                    });
                    args.push(name.to_string());
                }
            }
            params.push(format!("{r} t[]"));
            args.push("t".into());
            let part = format!("{}_{fname}_part{}", self.name, c + 1);
            defs.push_str(&format!(
                "/* Part {} of {} of {}_{fname}: temporaries into the caller's scratch t[]. */\n\
                 static void {part}({})\n{{\n{}{}}}\n\n",
                c + 1,
                chunks.len(),
                self.name,
                params.join(", "),
                self.hoisted(chunk, syn),
                statements(chunk, syn, style),
            ));
            calls.push_str(&format!("    {part}({});\n", args.join(", ")));
        }
        (defs, calls)
    }
}

/// Where output `i` of `terms` (B, C, G) or of `terms_actuation` (and then A) goes.
fn terms_target(n: usize) -> impl Fn(usize) -> String {
    let nn = n * n;
    move |i| {
        if i < nn {
            format!("B[{i}]")
        } else if i < 2 * nn {
            format!("C[{}]", i - nn)
        } else if i < 2 * nn + n {
            format!("G[{}]", i - 2 * nn)
        } else {
            format!("A[{}]", i - 2 * nn - n)
        }
    }
}

/// Where forward dynamics keeps its arrays in the caller's scratch: offsets of
/// `B, C, G, K, D, A, m, f` and of the scratch it lends to `terms` and `actuation`.
#[derive(Serialize)]
struct ForwardLayout {
    b: usize,
    c: usize,
    g: usize,
    k: usize,
    d: usize,
    a: usize,
    m: usize,
    f: usize,
    rest: usize,
    len: usize,
}

impl ForwardLayout {
    fn new(n: usize, k: usize, callee: usize) -> ForwardLayout {
        let nn = n * n;
        let b = 0;
        let c = b + nn;
        let g = c + nn;
        let kk = g + n;
        let d = kk + nn;
        let a = d + nn;
        let m = a + n * k;
        let f = m + n * (n + 1) / 2;
        let rest = f + n;
        ForwardLayout {
            b,
            c,
            g,
            k: kk,
            d,
            a,
            m,
            f,
            rest,
            len: rest + callee,
        }
    }
}

/// The scratch length recorded for `fname`.
fn work_of(work: &[(String, usize)], fname: &str) -> usize {
    work.iter()
        .find(|(f, _)| f == fname)
        .map(|(_, l)| *l)
        .unwrap_or(0)
}

/// Smallest Cholesky pivot of forward dynamics relative to its diagonal entry: 64
/// units of rounding, below which `B` is singular to working precision (C spelling).
pub(crate) fn pivot_floor(precision: Precision) -> &'static str {
    match precision {
        Precision::F64 => "1.4e-14",
        Precision::F32 => "7.6e-6f",
    }
}

/// The allocation conditioning (`regcond`) above which the shipped tests check the
/// regulators' inputs: single precision resolves the allocation only where the smaller
/// of `S A (S A)^T` and `(S A)^T S A` is well posed (measured on reach_arm, eigenvalue
/// ratio 1.4e-4: the compensated inputs at the second parameter set differ from the
/// reference by 3.6e-3 relative and flip to SATURATED at one state, so 1e-4 was too
/// permissive).
pub(crate) fn well_posed(precision: Precision) -> &'static str {
    match precision {
        Precision::F64 => "0.0",
        Precision::F32 => "1e-3",
    }
}

/// Longest straight-line body printed as one function; longer ones become parts.
const PART_STATEMENTS: usize = 64;

pub fn emit(
    plan: &Plan,
    meta: &Meta,
    precision: Precision,
    standard: CStandard,
    golden: &Golden,
) -> Result<Vec<(String, String)>, String> {
    let name = plan.name.as_str();
    let up = name.to_uppercase();
    let r = real(precision);
    let p = Printer {
        plan,
        precision,
        standard,
        name,
        shares_work: 0,
    };
    let n = plan.n;
    let k = plan.k;
    let ops_line = |f: &Func| super::plan::ops_sentence(f.ops, f.ops_beyond);

    let mut funcs: Vec<CFunc> = Vec::new();
    // The helper of terms and the regressor comes first: both call it.
    let mut shares_work = 0;
    if let Some(helper) = &plan.shares {
        let (rows, body, len) = p.body(helper, "shares", None, &|i| format!("s[{i}]"));
        let b = &helper.block;
        let mut unused = String::new();
        // (`body` says so for q, as for every function that takes it.)
        for (read, what) in [(b.reads_qd, "qd"), (b.reads_params, "P")] {
            if !read {
                unused.push_str(&format!("    (void){what};\n"));
            }
        }
        if len == 0 {
            unused.push_str("    (void)work;\n");
        }
        funcs.push(CFunc {
            rows,
            formula: format!(
                "What {name}_terms_with_ws and {name}_regressor_with_ws have in common: the \
                 {} values s[] that the rest of each reads. At the runtime parameters *P. \
                 Scratch: work[0 .. {len}).",
                b.outputs.len()
            ),
            ops: ops_line(helper),
            signature: format!(
                "static void {name}_shares(const {name}_params *P, const {r} q[{up}_NQ], \
                 const {r} qd[{up}_NQ], {r} s[], {r} work[])"
            ),
            body: format!("{unused}{body}"),
            plain: false,
        });
        shares_work = len;
    }
    let p = Printer { shares_work, ..p };
    // G and, after it, more outputs (name, declared length, values) in one schedule:
    // what the statics need at one point, with what they share computed once. Returns
    // the scratch length.
    let mut g_and = |f: &Func, fname: &str, more: &[(&str, String, usize)], formula: &str| {
        let (rows, body, len) = p.body(f, fname, None, &|i: usize| {
            let mut at = n;
            if i < at {
                return format!("G[{i}]");
            }
            for (array, _, count) in more {
                if i < at + count {
                    return format!("{array}[{}]", i - at);
                }
                at += count;
            }
            unreachable!("output {i} beyond the arrays")
        });
        let arrays: String = more
            .iter()
            .map(|(array, decl, _)| format!("{r} {array}[{decl}], "))
            .collect();
        let mut unused = String::new();
        if !f.block.reads_params {
            unused.push_str("    (void)P;\n");
        }
        if len == 0 {
            unused.push_str("    (void)work;\n");
        }
        funcs.push(CFunc {
            rows,
            formula: format!("{formula} At the runtime parameters *P. Scratch: work[0 .. {len})."),
            ops: ops_line(f),
            signature: format!(
                "static void {name}_{fname}_with_ws(const {name}_params *P, \
                 const {r} q[{up}_NQ], {r} G[{up}_NQ], {arrays}{r} work[])"
            ),
            body: format!("{unused}{body}"),
            plain: false,
        });
        len
    };
    let nk = n * k;
    let dg_out = ("dG", format!("{up}_NQ * {up}_NQ"), n * n);
    let a_out = ("A", format!("{up}_NQ * {up}_NU"), nk);
    // gravity_jacobian is the first, keeping dG.
    let (more, formula) = if plan.gravity_with_actuation {
        (
            vec![dg_out, a_out.clone()],
            "G(q), dG/dq (n x n, row-major) and A(q) (n x k) in one call, sharing their \
             moments, kernels and sums (A's end forces lie inside G's): what a Newton step of \
             the statics needs.",
        )
    } else {
        (
            vec![dg_out],
            "G(q) and dG/dq (n x n, row-major) in one call, sharing their moments, kernels and \
             sums: what a Newton step of the statics needs.",
        )
    };
    let linearised_work = g_and(&plan.gravity_jacobian, "gravity_linearised", &more, formula);
    // gravity is the second, keeping G, when A depends on q.
    let gravity_actuation_work = plan.gravity_with_actuation.then(|| {
        g_and(
            &plan.gravity,
            "gravity_actuation",
            &[a_out],
            "G(q) and A(q) (n x k, row-major) in one call: A's end forces lie inside G's \
             sums. What the statics' residual and the regulator need.",
        )
    });
    // With an end force, B, C, G and A in one schedule for forward dynamics.
    let terms_actuation_work = plan.terms_actuation.as_ref().map(|f| {
        let (rows, body, len) = p.body(f, "terms_actuation", None, &terms_target(n));
        funcs.push(CFunc {
            rows,
            formula: format!(
                "B(q), C(q, q') (both n x n, row-major), G(q) and A(q) (n x k, row-major) in \
                 one call: A's end forces lie inside the sums of terms, so they come at no \
                 cost. What forward dynamics needs. At the runtime parameters *P. Scratch: \
                 work[0 .. {len})."
            ),
            ops: ops_line(f),
            signature: format!(
                "static void {name}_terms_actuation_with_ws(const {name}_params *P, \
                 const {r} q[{up}_NQ], const {r} qd[{up}_NQ], {r} B[{up}_NQ * {up}_NQ], \
                 {r} C[{up}_NQ * {up}_NQ], {r} G[{up}_NQ], {r} A[{up}_NQ * {up}_NU], {r} work[])"
            ),
            body,
            plain: false,
        });
        len
    });
    let mut constant_funcs: Vec<CFunc> = Vec::new();
    // Scratch of every `_ws` function, by name (for the header and the wrappers).
    let mut work: Vec<(String, usize)> = Vec::new();
    // One public function: its `_ws` form, which does the work in the caller's scratch,
    // and the plain form, which declares that scratch on its stack and calls it.
    // A function whose result depends on a runtime parameter does its work in
    // `_with_ws(P, …)`; `_ws(…)` calls it with the arm file's values, and the plain
    // forms `_with(P, …)` and `(…)` call those with scratch on their stack.
    let mut public = |fname: &str,
                      formula: &str,
                      ops: String,
                      ret: &str,
                      params: &[(String, &str)],
                      rows: String,
                      body: String,
                      len: usize| {
        let decls: Vec<&str> = params.iter().map(|(d, _)| d.as_str()).collect();
        let args: Vec<&str> = params.iter().map(|(_, a)| *a).collect();
        let ret_kw = if ret == "void" { "" } else { "return " };
        let with = PARAMETRIC_FUNCTIONS.contains(&fname);
        let body = if len == 0 {
            format!("    (void)work;\n{body}")
        } else {
            body
        };
        let scratch = if len == 0 {
            // The macro is 1 all the same: a C array cannot be empty.
            format!(
                "Scratch: none; work may be a null pointer ({up}_{}_WORK is 1 only because a \
                 C array cannot be empty).",
                fname.to_uppercase()
            )
        } else {
            format!(
                "Scratch: work[0 .. {up}_{}_WORK), {len} reals.",
                fname.to_uppercase()
            )
        };
        let p_decl = format!("const {name}_params *P, ");
        let worker = if with {
            format!("{name}_{fname}_with_ws")
        } else {
            format!("{name}_{fname}_ws")
        };
        funcs.push(CFunc {
            rows,
            formula: if with {
                format!("{formula} At the runtime parameters *P. {scratch}")
            } else {
                format!("{formula} {scratch}")
            },
            ops: ops.clone(),
            signature: format!(
                "{ret} {worker}({}{}, {r} work[])",
                if with { p_decl.as_str() } else { "" },
                decls.join(", ")
            ),
            body,
            plain: false,
        });
        if with {
            funcs.push(CFunc {
                rows: String::new(),
                formula: format!("{worker} at the arm file's parameters."),
                ops: ops.clone(),
                signature: format!("{ret} {name}_{fname}_ws({}, {r} work[])", decls.join(", ")),
                body: format!(
                    "    {ret_kw}{worker}(&{up}_PARAMS_DEFAULT, {}, work);\n",
                    args.join(", ")
                ),
                plain: false,
            });
        }
        let forms: &[(&str, &str, &str)] = if with {
            &[("_with", "P, ", "_with_ws"), ("", "", "_ws")]
        } else {
            &[("", "", "_ws")]
        };
        for (suffix, p_arg, callee) in forms {
            let call = if len == 0 {
                format!(
                    "    {ret_kw}{name}_{fname}{callee}({p_arg}{}, 0); /* needs no scratch */\n",
                    args.join(", ")
                )
            } else {
                format!(
                    "    {r} work[{up}_{}_WORK];\n    {ret_kw}{name}_{fname}{callee}({p_arg}{}, work);\n",
                    fname.to_uppercase(),
                    args.join(", ")
                )
            };
            funcs.push(CFunc {
                rows: String::new(),
                formula: format!(
                    "{name}_{fname}{callee} with its scratch on this function's stack."
                ),
                ops: ops.clone(),
                signature: format!(
                    "{ret} {name}_{fname}{suffix}({}{})",
                    if p_arg.is_empty() {
                        ""
                    } else {
                        p_decl.as_str()
                    },
                    decls.join(", ")
                ),
                body: call,
                plain: true,
            });
        }
        work.push((fname.to_string(), len));
    };

    // Arrays are declared with their lengths (which documents them and lets compilers
    // check calls); a C array cannot have length 0, so an arm without inputs keeps A[].
    let q = (format!("const {r} q[{up}_NQ]"), "q");
    let qd = (format!("const {r} qd[{up}_NQ]"), "qd");
    let nn_len = format!("{up}_NQ * {up}_NQ");
    let a_len = if k > 0 {
        format!("{up}_NQ * {up}_NU")
    } else {
        String::new()
    };
    let out = |arr: &'static str| {
        let len = match arr {
            "B" | "C" | "dG" => nn_len.clone(),
            "G" => format!("{up}_NQ"),
            "A" => a_len.clone(),
            "J" => format!("3 * {up}_NQ"),
            "Y" => format!("{up}_NQ * {up}_NTHETA"),
            _ => String::new(),
        };
        (format!("{r} {arr}[{len}]"), arr)
    };
    let flat = |arr: &'static str| move |i: usize| format!("{arr}[{i}]");
    let mut generated = |fname: &str,
                         formula: &str,
                         func: &Func,
                         ret: &str,
                         params: &[(String, &str)],
                         target: &dyn Fn(usize) -> String| {
        let (rows, body, len) = p.body(func, fname, None, target);
        // An arm without inputs has an empty A: its output array is never written.
        let body = match params.last() {
            Some((_, out)) if func.block.outputs.is_empty() => format!("    (void){out};\n{body}"),
            _ => body,
        };
        public(fname, formula, ops_line(func), ret, params, rows, body, len);
        len
    };
    // K and D are constants: no scratch, no `_ws` form.
    for (fname, formula, func, arr) in [
        ("stiffness", "K, n x n, row-major.", &plan.stiffness, "K"),
        ("damping", "D, n x n, row-major.", &plan.damping, "D"),
    ] {
        let (rows, body, len) = p.body(func, fname, None, &flat(arr));
        constant_funcs.push(CFunc {
            rows,
            formula: format!("{formula} At the runtime parameters *P."),
            ops: ops_line(func),
            signature: format!(
                "void {name}_{fname}_with(const {name}_params *P, {r} {arr}[{up}_NQ * {up}_NQ])"
            ),
            // (A constant needs no scratch; should one ever need some, it gets its own.)
            body: if len == 0 {
                body
            } else {
                format!("    {r} work[{len}];\n{body}")
            },
            plain: false,
        });
        constant_funcs.push(CFunc {
            rows: String::new(),
            formula: format!("{name}_{fname}_with at the arm file's parameters."),
            ops: ops_line(func),
            signature: format!("void {name}_{fname}({r} {arr}[{up}_NQ * {up}_NQ])"),
            body: format!("    {name}_{fname}_with(&{up}_PARAMS_DEFAULT, {arr});\n"),
            plain: false,
        });
    }
    let inertia_work = generated(
        "inertia",
        "B(q), n x n, row-major.",
        &plan.inertia,
        "void",
        &[q.clone(), out("B")],
        &flat("B"),
    );
    if gravity_actuation_work.is_none() {
        generated(
            "gravity",
            "G(q) = dU_g/dq.",
            &plan.gravity,
            "void",
            &[q.clone(), out("G")],
            &flat("G"),
        );
    }
    let actuation_work = generated(
        "actuation",
        "A(q), n x k, row-major.",
        &plan.actuation,
        "void",
        &[q.clone(), out("A")],
        &flat("A"),
    );
    generated(
        "tip_jacobian",
        "Tip Jacobian, 3 x n, row-major.",
        &plan.tip_jacobian,
        "void",
        &[q.clone(), out("J")],
        &flat("J"),
    );
    if let Some(f) = &plan.regressor {
        generated(
            "regressor",
            "Regressor Y(q, q', q''), n x NTHETA, row-major: Y theta = B q'' + C q' + G + K q + D q' \
             for the linear parameters theta (the fields of NAME_params but gravity, in order).",
            f,
            "void",
            &[
                q.clone(),
                qd.clone(),
                (format!("const {r} qdd[{up}_NQ]"), "qdd"),
                out("Y"),
            ],
            &flat("Y"),
        );
    }
    generated(
        "potential_energy",
        "U = U_g + 1/2 q^T K q.",
        &plan.potential_energy,
        r,
        std::slice::from_ref(&q),
        &|_| String::new(),
    );
    let nn = n * n;
    let terms_params = [q.clone(), qd.clone(), out("B"), out("C"), out("G")];
    let terms_work = match (terms_actuation_work, &plan.terms_actuation) {
        // With an end force, terms is the schedule with A, keeping B, C and G.
        (Some(len), Some(f)) => {
            public(
                "terms",
                "B(q), C(q, q') (both n x n, row-major) and G(q) in one call. Computed with \
                 A(q), whose end forces lie inside their sums.",
                ops_line(f),
                "void",
                &terms_params,
                String::new(),
                format!(
                    "    {r} *const A = &work[0]; /* {nk} */\n\
                     \x20   {name}_terms_actuation_with_ws(P, q, qd, B, C, G, A, &work[{nk}]);\n"
                ),
                nk + len,
            );
            nk + len
        }
        _ => generated(
            "terms",
            "B(q), C(q, q') (both n x n, row-major) and G(q) in one call.",
            &plan.terms,
            "void",
            &terms_params,
            &terms_target(n),
        ),
    };
    public(
        "kinetic_energy",
        "T = 1/2 q'^T B q', with B from the inertia function.",
        super::plan::ops_sentence(plan.kinetic_energy, plan.kinetic_energy_beyond),
        r,
        &[q.clone(), qd.clone()],
        String::new(),
        format!(
            "    {r} *const B = &work[0]; /* {nn} */\n    {r} t = 0.0{f};\n    int i;\n    int k;\n\
             \x20   {name}_inertia_with_ws(P, q, B, &work[{nn}]);\n    for (i = 0; i < {up}_NQ; ++i) {{\n\
             \x20       {r} bqd = 0.0{f};\n        for (k = 0; k < {up}_NQ; ++k) {{\n\
             \x20           bqd += B[i * {up}_NQ + k] * qd[k];\n        }}\n\
             \x20       t += qd[i] * bqd;\n    }}\n    return 0.5{f} * t;\n",
            f = p.fs(),
        ),
        nn + inertia_work,
    );
    let gravity_jacobian_work =
        n + if plan.gravity_with_actuation { nk } else { 0 } + linearised_work;
    public(
        "gravity_jacobian",
        "dG/dq, n x n, row-major: the Hessian of U_g, symmetric. Computed with G(q), which \
         shares nearly all of its work.",
        ops_line(&plan.gravity_jacobian),
        "void",
        &[q.clone(), out("dG")],
        String::new(),
        if plan.gravity_with_actuation {
            format!(
                "    {r} *const G = &work[0]; /* {n} */\n    {r} *const A = &work[{n}]; /* {nk} */\n\
                 \x20   {name}_gravity_linearised_with_ws(P, q, G, dG, A, &work[{}]);\n",
                n + nk
            )
        } else {
            format!(
                "    {r} *const G = &work[0]; /* {n} */\n\
                 \x20   {name}_gravity_linearised_with_ws(P, q, G, dG, &work[{n}]);\n"
            )
        },
        gravity_jacobian_work,
    );
    if let Some(len) = gravity_actuation_work {
        public(
            "gravity",
            "G(q) = dU_g/dq. Computed with A(q), whose end forces lie inside its sums.",
            ops_line(&plan.gravity),
            "void",
            &[q.clone(), out("G")],
            String::new(),
            format!(
                "    {r} *const A = &work[0]; /* {nk} */\n\
                 \x20   {name}_gravity_actuation_with_ws(P, q, G, A, &work[{nk}]);\n"
            ),
            nk + len,
        );
    }
    // C alone needs nearly everything B and G need too, so it costs about as much as
    // terms: it is terms, keeping C.
    public(
        "coriolis",
        "C(q, q'), n x n, row-major, from terms (C shares nearly all of its work with B \
         and G).",
        ops_line(&plan.terms),
        "void",
        &[q.clone(), qd.clone(), out("C")],
        String::new(),
        format!(
            "    {r} *const B = &work[0]; /* {nn} */\n    {r} *const G = &work[{nn}]; /* {n} */\n\
             \x20   {name}_terms_with_ws(P, q, qd, B, C, G, &work[{}]);\n",
            nn + n
        ),
        nn + n + terms_work,
    );
    let mut pose_names = Vec::new();
    let mut pose_work = 0usize;
    for (j, f) in plan.pose.iter().enumerate() {
        let fname = format!("pose_segment{j}");
        let (rows, body, len) = p.body(f, &fname, Some(j), &|i| format!("pose[{i}]"));
        pose_names.push(format!("{name}_{fname}"));
        pose_work = pose_work.max(len);
        let mut body = body;
        if len == 0 {
            body = format!("    (void)work;\n{body}");
        }
        if !f.block.reads_sigma {
            body = format!("    (void)sigma;\n{body}");
        }
        funcs.push(CFunc {
            rows,
            formula: format!("Backbone pose [x, y, angle] of segment {j} at sigma."),
            ops: ops_line(f),
            signature: format!(
                "static void {name}_{fname}(const {r} q[{up}_NQ], {r} sigma, {r} pose[3], {r} work[])"
            ),
            body,
            plain: false,
        });
    }
    // The derivative of A for end forces: used by the statics functions only, so it
    // has no plain form.
    let mut da_work = 0usize;
    if let Some(f) = &plan.actuation_jacobian {
        let (rows, body, len) = p.body(f, "actuation_jacobian", None, &flat("dA"));
        da_work = len;
        funcs.push(CFunc {
            rows,
            formula: "dA_ik/dq_x at dA[(x * n + i) * k + c]: the statics functions' d(A u)/dq."
                .into(),
            ops: ops_line(f),
            signature: format!(
                "static void {name}_actuation_jacobian_ws(const {r} q[{up}_NQ], {r} dA[], {r} work[])"
            ),
            body: if len == 0 {
                format!("    (void)work;\n{body}")
            } else {
                body
            },
            plain: false,
        });
    }
    funcs.splice(0..0, constant_funcs);
    // Forward dynamics: B, C, G, K, D, A, the packed factor m and f, then the scratch of
    // terms and actuation (called one after the other, so they share it).
    let fd = ForwardLayout::new(
        n,
        k,
        terms_actuation_work.unwrap_or(terms_work.max(actuation_work)),
    );
    work.push(("pose".into(), pose_work));
    work.push(("forward_dynamics".into(), fd.len));
    let gravity_work = work_of(&work, "gravity");
    let st = StaticsLayout::new(
        n,
        k,
        plan.outputs.len(),
        plan.actuation_jacobian.is_some(),
        StaticsCallees {
            gravity: gravity_work,
            actuation: actuation_work,
            gravity_jacobian: gravity_jacobian_work,
            actuation_jacobian: da_work,
        },
    );
    work.push(("static_residual".into(), st.residual.len));
    work.push(("static_jacobian".into(), st.jacobian.len));
    work.push(("equilibrium".into(), st.equilibrium.len));
    if k > 0 {
        work.push(("regulate".into(), st.regulate.len));
    }
    let work_len = work.iter().map(|(_, l)| *l).max().unwrap_or(0).max(1);
    let mc = MomentConstants::new(plan, precision);
    let series: Vec<String> = mc
        .series
        .iter()
        .map(|row| format!("{{\n{}\n    }}", wrap_list(row, 8)))
        .collect();
    let nnz = mc.coef.len();
    let (big, small) = precision.rescale_bounds();

    let mut ctx = base_context(name, meta, plan, n, k);
    ctx.insert(
        "non_finite_policy",
        &super::constants::non_finite_policy(
            &format!(
                "{up}_ERR_NONFINITE_INPUT, {up}_ERR_NONFINITE_RESULT",
                up = name.to_uppercase()
            ),
            " * ",
        ),
    );
    ctx.insert("name_upper", &up);
    ctx.insert("plain_macro", PLAIN_MACRO);
    ctx.insert(
        "nu_bound",
        &if k > 0 {
            format!("{up}_NU")
        } else {
            String::new()
        },
    );
    ctx.insert("a_bound", &a_len);
    // The runtime parameters: one struct field per kind, and the arm file's values as
    // a brace initialiser in the same order.
    #[derive(Serialize)]
    struct ParamField {
        decl: String,
        doc: &'static str,
    }
    let lit = |q: &crate::exact::Q| super::number::literal(q, precision);
    let mut param_fields = Vec::new();
    let mut init = Vec::new();
    for f in plan.params.fields() {
        let values = f.of(&plan.param_defaults);
        let vals: Vec<String> = values.iter().map(lit).collect();
        param_fields.push(ParamField {
            decl: match f.len {
                Some(l) => format!("{r} {}[{l}]", f.kind.field()),
                None => format!("{r} {}", f.kind.field()),
            },
            doc: f.kind.doc(),
        });
        init.push(match f.len {
            Some(_) => format!("{{{}}}", vals.join(", ")),
            None => vals[0].clone(),
        });
    }
    ctx.insert("param_fields", &param_fields);
    ctx.insert("param_init", &format!("{{{}}}", init.join(", ")));
    ctx.insert("param_count", &plan.params.len());
    #[derive(Serialize)]
    struct ParamCheck {
        field: &'static str,
        len: Option<usize>,
    }
    let checks: Vec<ParamCheck> = plan
        .params
        .fields()
        .iter()
        .map(|f| ParamCheck {
            field: f.kind.field(),
            len: f.len,
        })
        .collect();
    ctx.insert("param_checks", &checks);
    let assign: Vec<(String, usize)> = (0..plan.params.len())
        .map(|k| (plan.params.spelling(k), k))
        .collect();
    ctx.insert("param_assign", &assign);
    ctx.insert("real_size", &precision.bytes());
    ctx.insert("real", r);
    ctx.insert("sfx", if precision == Precision::F32 { "f" } else { "" });
    ctx.insert("fs", p.fs());
    // The finiteness test reads the exponent bits (see the template), so it needs the
    // unsigned type of the real's width and the exponent mask.
    let (bits, exponent, mantissa) = match precision {
        Precision::F32 => ("uint32_t", "UINT32_C(0x7F800000)", "UINT32_C(0x007FFFFF)"),
        Precision::F64 => (
            "uint64_t",
            "UINT64_C(0x7FF0000000000000)",
            "UINT64_C(0x000FFFFFFFFFFFFF)",
        ),
    };
    ctx.insert("real_bits", bits);
    ctx.insert("c90", &(standard == CStandard::C90));
    ctx.insert(
        "quiet_nan_bits",
        match precision {
            Precision::F32 => "UINT32_C(0x7FC00000)",
            Precision::F64 => "UINT64_C(0x7FF8000000000000)",
        },
    );
    ctx.insert("exponent_mask", exponent);
    ctx.insert("mantissa_mask", mantissa);
    ctx.insert("big", big);
    ctx.insert("small", small);
    ctx.insert("odd_inv", &wrap_list(&mc.odd_inv, 4));
    ctx.insert("pair_inv", &wrap_list(&mc.pair_inv, 4));
    ctx.insert("series", &format!("    {}", series.join(",\n    ")));
    ctx.insert("kernel_nnz", &nnz);
    ctx.insert("start_type", uint_type(nnz));
    ctx.insert("index_type", uint_type(plan.moment_max));
    ctx.insert("row_type", uint_type(use_max(plan)));
    ctx.insert("kernel_routines", &plan.kernel_routines());
    ctx.insert("kernel_start", &wrap_list(&strings(&mc.start), 4));
    ctx.insert("kernel_first", &wrap_list(&strings(&mc.first), 4));
    ctx.insert("kernel_coef", &wrap_list(&mc.coef, 4));
    ctx.insert("functions", &funcs);
    ctx.insert("shares", &plan.shares.is_some());
    ctx.insert("gravity_actuation", &plan.gravity_with_actuation);
    ctx.insert("terms_actuation", &plan.terms_actuation.is_some());
    ctx.insert(
        "matrix_tables",
        &matrix_table_context(plan, precision, &|v| wrap_list(v, 4)),
    );
    ctx.insert("pair_type", uint_type(pair_max(plan)));
    ctx.insert("pose_names", &pose_names);
    ctx.insert("pose_work", &pose_work);
    ctx.insert("fd", &fd);
    ctx.insert("work_len", &work_len);
    // A function that needs no scratch still gets a length of 1, so that sizing an
    // array by the macro is always valid C.
    let work: Vec<(String, usize)> = work.into_iter().map(|(f, l)| (f, l.max(1))).collect();
    ctx.insert("work", &work);
    for (key, f) in [
        ("inertia", &plan.inertia),
        ("coriolis", &plan.terms),
        ("gravity", &plan.gravity),
        ("stiffness", &plan.stiffness),
        ("damping", &plan.damping),
        ("actuation", &plan.actuation),
        ("tip_jacobian", &plan.tip_jacobian),
        ("potential_energy", &plan.potential_energy),
        ("terms", &plan.terms),
    ] {
        ctx.insert(format!("{key}_ops"), &ops_line(f));
    }
    if let Some(f) = &plan.regressor {
        ctx.insert("regressor_ops", &ops_line(f));
    }
    ctx.insert("ntheta", &plan.params.linear_len());
    ctx.insert(
        "kinetic_energy_ops",
        &super::plan::ops_sentence(plan.kinetic_energy, plan.kinetic_energy_beyond),
    );
    ctx.insert(
        "dynamics_ops",
        &super::plan::ops_sentence(plan.dynamics, plan.dynamics_beyond),
    );
    ctx.insert(
        "pose_ops",
        &plan.pose.iter().map(ops_line).collect::<Vec<_>>(),
    );
    super::control_code::insert_c(&mut ctx, plan, precision, &st);
    ctx.insert("gravity_jacobian_ops", &ops_line(&plan.gravity_jacobian));
    ctx.insert("golden", &golden.c_data(precision));
    ctx.insert("rtol", &golden.rtol(precision));
    ctx.insert("rtol_reason", golden.rtol_reason(precision));
    ctx.insert("rtol_equilibrium", golden.rtol_equilibrium(precision));
    ctx.insert("eq_rounding", golden.eq_rounding(precision));
    // A state at which every arm's model overflows: `a = L q` far beyond what the
    // moments and angle sums survive.
    ctx.insert(
        "huge",
        match precision {
            Precision::F64 => "1e200",
            Precision::F32 => "3e38f",
        },
    );
    ctx.insert("pivot_floor", pivot_floor(precision));
    ctx.insert("well_posed", well_posed(precision));

    Ok(vec![
        (format!("c/{name}.h"), render("c/header.h", &ctx)?),
        (format!("c/{name}.c"), render("c/source.c", &ctx)?),
        (format!("c/test_{name}.c"), render("c/test.c", &ctx)?),
    ])
}
