//! Rust output: a `no_std` crate `rust/` (Cargo.toml, src/lib.rs, tests/golden.rs) on
//! fixed-size arrays. Source is printed from the templates, parsed with `syn` (so a
//! syntax error is a generator error, never a file) and formatted with `prettyplease`.

use super::body::{
    angle_increment, inline, moment_argument, outputs, temp_slots, temporaries, Spelling, StmtStyle,
};
use super::c::wrap_list;
use super::constants::{base_context, strings, use_max, use_pairs, MomentConstants};
use super::golden::{Golden, SIGMAS};
use super::number::Precision;
use super::plan::{Func, Plan};
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

fn body(
    plan: &Plan,
    func: &Func,
    fname: &str,
    pose_seg: Option<usize>,
    init: &str,
    target: &dyn Fn(usize) -> String,
    ret: &str,
) -> (String, String) {
    let b = &func.block;
    let pose_count = pose_seg.map(|s| b.pose_nu_count[s]).unwrap_or(0);
    // Temporaries share array slots once dead, to keep the stack small.
    let (slots, slot_count) = temp_slots(b);
    let syn = Spelling {
        plan,
        precision: Precision::F64,
        pose_count,
        temp_array: true,
        slots: Some(&slots),
    };
    let style = StmtStyle {
        decl: "let ".into(),
        end: ";",
        indent: 4,
        parens: false,
        temp_array: true,
    };
    let mut out = String::new();
    let mut rows = String::new();
    if b.nu_count.iter().any(|&c| c > 0) {
        out.push_str("let mut nu = [0.0; NU_LEN];\n");
    }
    for (seg, &c) in b.nu_count.iter().enumerate() {
        if c > 0 {
            let off = plan.layout.offset[seg];
            let arg = inline(&moment_argument(plan, seg, false), &syn);
            out.push_str(&format!(
                "moments({arg}, {c}, &mut nu, {off}, {});\n",
                off + plan.layout.count[seg]
            ));
        }
    }
    if let (Some(seg), true) = (pose_seg, pose_count > 0) {
        let arg = inline(&moment_argument(plan, seg, true), &syn);
        out.push_str(&format!("let mut pnu = [0.0; {}];\n", 2 * pose_count));
        out.push_str(&format!(
            "moments({arg}, {pose_count}, &mut pnu, 0, {pose_count});\n"
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
            out.push_str(&format!(
                "cphi[{j}] = libm::cos(phi);\nsphi[{j}] = libm::sin(phi);\n"
            ));
        }
    }
    if !b.kernels.is_empty() {
        let upper = fname.to_uppercase();
        let items = use_pairs(&b.kernels);
        let max = use_max(plan);
        rows = format!(
            "/// Kernels of `{fname}`: pairs (row, moment base).\nstatic {upper}_ROWS: [{}; {}] = [{}];\n",
            uint(max),
            2 * b.kernels.len(),
            wrap_list(&items, 4)
        );
        out.push_str(&format!(
            "let mut kern = [0.0; {}];\nkernels(&{upper}_ROWS, &nu, &mut kern);\n",
            b.kernels.len()
        ));
    }
    out.push_str(init);
    if slot_count > 0 {
        // One array, not one `let` per temporary: rustc nests a debug-info scope per
        // `let`, and thousands of them overflow LLVM's DWARF writer.
        out.push_str(&format!("let mut t = [0.0f64; {slot_count}];\n"));
    }
    out.push_str(&temporaries(b, &syn, &style));
    out.push_str(&outputs(b, &syn, &style, target));
    out.push_str(ret);
    (rows, out)
}

pub fn emit(plan: &Plan, meta: &Meta, golden: &Golden) -> Result<Vec<OutFile>, String> {
    let name = plan.name.as_str();
    let n = plan.n;
    let k = plan.k;
    let ops_line = |f: &Func| format!("Operations: {}.", f.ops);
    let mut funcs = Vec::new();
    let mat = |rows: &str, cols: &str| format!("[[f64; {cols}]; {rows}]");
    let q_param = |f: &Func| if f.block.reads_q { "q" } else { "_q" };
    let qd_param = |f: &Func| if f.block.reads_qd { "qd" } else { "_qd" };
    let mut push = |fname: &str,
                    formula: &str,
                    f: &Func,
                    signature: String,
                    init: &str,
                    target: &dyn Fn(usize) -> String,
                    ret: &str| {
        let (rows, body) = body(plan, f, fname, None, init, target, ret);
        funcs.push(RFunc {
            rows,
            formula: formula.into(),
            ops: ops_line(f),
            signature,
            body,
        });
    };
    let mat_target =
        |cols: usize| move |i: usize| format!("out[{}][{}]", i / cols.max(1), i % cols.max(1));
    let nn = mat("NQ", "NQ");
    push(
        "inertia",
        "Inertia matrix `B(q)`, NQ×NQ, symmetric positive definite; `T = ½ q̇ᵀ B q̇`.",
        &plan.inertia,
        format!(
            "pub fn inertia({}: &[f64; NQ]) -> {nn}",
            q_param(&plan.inertia)
        ),
        "let mut out = [[0.0; NQ]; NQ];\n",
        &mat_target(n),
        "out\n",
    );
    push(
        "gravity",
        "Gravity vector `G(q) = ∂U_g/∂q`.",
        &plan.gravity,
        format!(
            "pub fn gravity({}: &[f64; NQ]) -> [f64; NQ]",
            q_param(&plan.gravity)
        ),
        "let mut out = [0.0; NQ];\n",
        &|i| format!("out[{i}]"),
        "out\n",
    );
    push(
        "stiffness",
        "Stiffness matrix `K` (constant, block diagonal): elastic energy `½ qᵀ K q`.",
        &plan.stiffness,
        format!("pub fn stiffness() -> {nn}"),
        "let mut out = [[0.0; NQ]; NQ];\n",
        &mat_target(n),
        "out\n",
    );
    push(
        "damping",
        "Damping matrix `D` (constant): dissipation `½ q̇ᵀ D q̇`.",
        &plan.damping,
        format!("pub fn damping() -> {nn}"),
        "let mut out = [[0.0; NQ]; NQ];\n",
        &mat_target(n),
        "out\n",
    );
    push(
        "actuation",
        "Actuation matrix `A(q)`, NQ×NU: generalized force `A u`.",
        &plan.actuation,
        format!(
            "pub fn actuation({}: &[f64; NQ]) -> {}",
            q_param(&plan.actuation),
            mat("NQ", "NU")
        ),
        "let mut out = [[0.0; NU]; NQ];\n",
        &mat_target(k),
        "out\n",
    );
    push(
        "tip_jacobian",
        "Tip Jacobian, 3×NQ: rows ∂x/∂q, ∂y/∂q, ∂angle/∂q.",
        &plan.tip_jacobian,
        format!(
            "pub fn tip_jacobian({}: &[f64; NQ]) -> {}",
            q_param(&plan.tip_jacobian),
            mat("3", "NQ")
        ),
        "let mut out = [[0.0; NQ]; 3];\n",
        &mat_target(n),
        "out\n",
    );
    push(
        "potential_energy",
        "Potential energy [J]: gravity (zero at q = 0) plus elastic `½ qᵀ K q`.",
        &plan.potential_energy,
        format!(
            "pub fn potential_energy({}: &[f64; NQ]) -> f64",
            q_param(&plan.potential_energy)
        ),
        "",
        &|_| String::new(),
        "",
    );
    let nn2 = n * n;
    push(
        "terms",
        "`B(q)`, `C(q, q̇)` and `G(q)` in one call, equal to [`inertia`], [`coriolis`] and [`gravity`]: the call for a controller that needs all three, with what they share computed once.",
        &plan.terms,
        format!(
            "pub fn terms({}: &[f64; NQ], {}: &[f64; NQ]) -> ({nn}, {nn}, [f64; NQ])",
            q_param(&plan.terms),
            qd_param(&plan.terms),
        ),
        "let mut b = [[0.0; NQ]; NQ];\nlet mut c = [[0.0; NQ]; NQ];\nlet mut g = [0.0; NQ];\n",
        &move |i: usize| {
            if i < nn2 {
                format!("b[{}][{}]", i / n, i % n)
            } else if i < 2 * nn2 {
                format!("c[{}][{}]", (i - nn2) / n, (i - nn2) % n)
            } else {
                format!("g[{}]", i - 2 * nn2)
            }
        },
        "(b, c, g)\n",
    );
    let kinetic = RFunc {
        rows: String::new(),
        formula: "Kinetic energy `T = ½ q̇ᵀ B(q) q̇` [J], with `B` from [`inertia`].".into(),
        ops: format!("Operations: {}.", plan.kinetic_energy),
        signature: "pub fn kinetic_energy(q: &[f64; NQ], qd: &[f64; NQ]) -> f64".into(),
        body: "let b = inertia(q);\nlet mut t = 0.0;\nfor i in 0..NQ {\n\
               let mut bqd = 0.0;\nfor k in 0..NQ {\nbqd += b[i][k] * qd[k];\n}\n\
               t += qd[i] * bqd;\n}\n0.5 * t\n"
            .into(),
    };
    // C alone needs nearly everything B and G need too: it is `terms`, keeping C.
    funcs.insert(
        1,
        RFunc {
            rows: String::new(),
            formula: "Coriolis matrix `C(q, q̇)` (Christoffel symbols of the first kind; `Ḃ − 2C` skew), NQ×NQ. From [`terms`]: C shares nearly all of its work with B and G.".into(),
            ops: ops_line(&plan.terms),
            signature: format!("pub fn coriolis(q: &[f64; NQ], qd: &[f64; NQ]) -> {nn}"),
            body: "terms(q, qd).1\n".into(),
        },
    );
    // The kinetic energy goes before the potential energy.
    let at = funcs
        .iter()
        .position(|f| f.signature.contains("potential_energy("))
        .unwrap_or(funcs.len());
    funcs.insert(at, kinetic);
    let mut pose_names = Vec::new();
    for (j, f) in plan.pose.iter().enumerate() {
        let fname = format!("pose_segment{j}");
        let sig = if f.block.reads_sigma {
            "sigma"
        } else {
            "_sigma"
        };
        let (rows, body) = body(
            plan,
            f,
            &fname,
            Some(j),
            "let mut out = [0.0; 3];\n",
            &|i| format!("out[{i}]"),
            "out\n",
        );
        funcs.push(RFunc {
            rows,
            formula: format!("Backbone pose `[x, y, angle]` of segment {j} at `sigma`."),
            ops: ops_line(f),
            signature: format!(
                "fn {fname}({}: &[f64; NQ], {sig}: f64) -> [f64; 3]",
                q_param(f)
            ),
            body,
        });
        pose_names.push(fname);
    }

    let mc = MomentConstants::new(plan, Precision::F64);
    let series: Vec<String> = mc
        .series
        .iter()
        .map(|row| format!("[{}]", row.join(", ")))
        .collect();
    let mut ctx = base_context(name, meta, plan, n, k);
    ctx.insert("odd_inv", &mc.odd_inv.join(", "));
    ctx.insert("pair_inv", &mc.pair_inv.join(", "));
    ctx.insert("series", &series.join(", "));
    ctx.insert("kernel_nnz", &mc.coef.len());
    ctx.insert("start_type", uint(mc.coef.len()));
    ctx.insert("index_type", uint(plan.moment_max));
    ctx.insert("row_type", uint(use_max(plan)));
    ctx.insert("kernel_start", &strings(&mc.start).join(", "));
    ctx.insert("kernel_first", &strings(&mc.first).join(", "));
    ctx.insert("kernel_coef", &mc.coef.join(", "));
    ctx.insert("functions", &funcs);
    ctx.insert("pose_names", &pose_names);
    ctx.insert("dynamics_ops", &format!("Operations: {}.", plan.dynamics));
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
    for name in ["B", "C", "G", "K", "D", "A", "J", "T", "V", "pose"] {
        out.push_str(&format!(
            "const SCALE_{}: f64 = {};\n",
            name.to_uppercase(),
            super::number::golden_literal(g.scale(name))
        ));
    }
    out
}
