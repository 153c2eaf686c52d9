//! Python output: `python/NAME.py` (NumPy arrays in and out, docstrings, a
//! `solve_ivp`-ready right-hand side) and `python/test_NAME.py`.

use super::body::{
    angle_increment, inline, moment_argument, outputs, temporaries, Spelling, StmtStyle,
};
use super::c::wrap_list;
use super::constants::{
    base_context, family_pairs, matrix_table_context, strings, use_pairs, MomentConstants,
};
use super::golden::{Golden, SIGMAS};
use super::number::{f64_literal, golden_literal, Precision};
use super::plan::{Func, Plan, PARAMETRIC_FUNCTIONS};
use super::templates::render;
use super::{Meta, OutFile};
use serde::Serialize;

#[derive(Serialize)]
struct PyFunc {
    rows: String,
    formula: String,
    ops: String,
    signature: String,
    body: String,
}

fn tuple(items: &[String], indent: usize) -> String {
    if items.is_empty() {
        return "()".into();
    }
    format!("(\n{},\n)", wrap_list(items, indent))
}

struct Spec<'a> {
    fname: &'a str,
    formula: &'a str,
    params: &'a [&'a str],
    init: &'a str,
    ret: &'a str,
}

fn function(
    plan: &Plan,
    f: &Func,
    spec: &Spec,
    pose_seg: Option<usize>,
    target: &dyn Fn(usize) -> String,
) -> PyFunc {
    let b = &f.block;
    let pose_count = pose_seg.map(|s| b.pose_nu_count[s]).unwrap_or(0);
    let syn = Spelling {
        plan,
        precision: Precision::F64,
        pose_count,
        temp_array: false,
        slots: None,
        param_prefix: "P.",
        rust: false,
    };
    let style = StmtStyle {
        decl: String::new(),
        end: "",
        indent: 4,
        parens: true,
        temp_array: false,
    };
    let mut out = String::new();
    let mut rows = String::new();
    for p in spec.params {
        match *p {
            "q" | "qd" | "qdd" if pose_seg.is_none() || *p == "q" => {
                out.push_str(&format!("    {p} = _vector({p}, NQ, \"{p}\")\n"));
            }
            _ => {}
        }
    }
    if b.nu_count.iter().any(|&c| c > 0) {
        out.push_str("    nu = [0.0] * _NU_LEN\n");
    }
    for (seg, &c) in b.nu_count.iter().enumerate() {
        if c > 0 {
            let off = plan.layout.offset[seg];
            let im = off + plan.layout.count[seg];
            let arg = inline(&moment_argument(plan, seg, false), &syn);
            out.push_str(&match f.moment_counts(seg) {
                None => format!("    _moments({arg}, {c}, nu, {off}, {im})\n"),
                // The fast path reads fewer: its top rows are cut to the precision.
                Some((fast, full)) => format!(
                    "    a = {arg}\n    _moments(a, {fast} if abs(a) <= _FAST_BENDING else {full}, nu, {off}, {im})\n"
                ),
            });
        }
    }
    if let (Some(seg), true) = (pose_seg, pose_count > 0) {
        let arg = inline(&moment_argument(plan, seg, true), &syn);
        out.push_str(&format!("    pnu = [0.0] * {}\n", 2 * pose_count));
        out.push_str(&format!(
            "    _moments({arg}, {pose_count}, pnu, 0, {pose_count})\n"
        ));
    }
    if b.angles > 0 {
        out.push_str(&format!(
            "    cphi = [0.0] * {a}\n    sphi = [0.0] * {a}\n",
            a = b.angles
        ));
        for j in 0..b.angles {
            let inc = inline(&angle_increment(&plan.angle_steps[j]), &syn);
            let op = if j == 0 { "=" } else { "+=" };
            out.push_str(&format!("    phi {op} {inc}\n    cphi[{j}] = math.cos(phi)\n    sphi[{j}] = math.sin(phi)\n"));
        }
    }
    let upper = spec.fname.trim_start_matches('_').to_uppercase();
    if f.families.is_empty() && !f.dots.is_empty() {
        // No families: one range, all of kern[].
        let items = use_pairs(f.dot_uses());
        rows = format!(
            "# pairs (row, moment base)\n_{upper}_ROWS = _kernel_plan({})\n",
            tuple(&items, 4)
        );
        out.push_str(&format!("    kern = _kernels(_{upper}_ROWS, nu)\n"));
    } else if f.kern_len > 0 {
        out.push_str(&format!("    kern = [0.0] * {}\n", f.kern_len));
        for (i, d) in f.dots.iter().enumerate() {
            let (start, end) = (d.start, d.start + d.uses.len());
            rows.push_str(&format!(
                "# pairs (row, moment base) of kernels {start} .. {end}\n_{upper}_ROWS{i} = _kernel_plan({})\n",
                tuple(&use_pairs(&d.uses), 4)
            ));
            out.push_str(&format!(
                "    kern[{start}:{end}] = _kernels(_{upper}_ROWS{i}, nu)\n"
            ));
        }
        for (k, fam) in f.families.iter().enumerate() {
            let size = plan.matrix_tables[fam.table].size;
            let arg = inline(&moment_argument(plan, fam.seg, false), &syn);
            let pairs = family_pairs(fam);
            let (s0, s1) = (fam.start, fam.start + fam.count);
            rows.push_str(&format!(
                "# kernels {s0} .. {s1}: segment {seg}'s double kernels (see _family)\n\
                 _{upper}_FAMILY{k} = _family_plan(\n    {size}, {t},\n    {},\n    {},\n    {},\n)\n",
                tuple(&use_pairs(&fam.seeds), 4),
                tuple(&use_pairs(&fam.ends), 4),
                tuple(&pairs, 4),
                seg = fam.seg + 1,
                t = fam.table,
            ));
            out.push_str(&format!(
                "    kern[{s0}:{s1}] = _family(_{upper}_FAMILY{k}, {arg}, nu)\n"
            ));
        }
    }
    let with = PARAMETRIC_FUNCTIONS.contains(&spec.fname);
    if with {
        out.push_str(&format!("    P = _params({})\n", param_names(plan)));
    }
    if f.over_shares {
        out.push_str("    s = _shares(q, qd, P)\n");
    }
    out.push_str(spec.init);
    out.push_str(&temporaries(b, &syn, &style));
    out.push_str(&outputs(b, &syn, &style, target));
    out.push_str(spec.ret);
    PyFunc {
        rows,
        formula: spec.formula.into(),
        ops: super::plan::ops_sentence(f.ops, f.ops_beyond),
        signature: signature(plan, spec.fname, spec.params, with),
        body: out,
    }
}

/// The runtime parameters' names, comma-separated, in struct order.
fn param_names(plan: &Plan) -> String {
    plan.params
        .fields()
        .iter()
        .map(|f| f.kind.field())
        .collect::<Vec<_>>()
        .join(", ")
}

/// `density_scale=PARAMS_DEFAULT.density_scale, …`: the runtime parameters as
/// keyword arguments with the arm file's values as defaults.
fn param_keywords(plan: &Plan) -> String {
    plan.params
        .fields()
        .iter()
        .map(|f| format!("{0}=PARAMS_DEFAULT.{0}", f.kind.field()))
        .collect::<Vec<_>>()
        .join(", ")
}

/// `name(args, *, density_scale=PARAMS_DEFAULT.density_scale, …)` for a function that
/// takes the runtime parameters (keyword-only), `name(args)` for one that does not.
fn signature(plan: &Plan, fname: &str, params: &[&str], with: bool) -> String {
    let mut all: Vec<String> = params.iter().map(|p| p.to_string()).collect();
    if with {
        all.push(format!("*, {}", param_keywords(plan)));
    }
    format!("{fname}({})", all.join(", "))
}

/// Where output `i` of `terms` (B, C, G) or of `_terms_actuation` (and then A) goes.
fn terms_target(n: usize, k: usize) -> impl Fn(usize) -> String {
    let nn = n * n;
    move |i| {
        if i < nn {
            format!("b[{}, {}]", i / n, i % n)
        } else if i < 2 * nn {
            format!("c[{}, {}]", (i - nn) / n, (i - nn) % n)
        } else if i < 2 * nn + n {
            format!("g[{}]", i - 2 * nn)
        } else {
            let at = i - 2 * nn - n;
            format!("a[{}, {}]", at / k, at % k)
        }
    }
}

pub fn emit(plan: &Plan, meta: &Meta, golden: &Golden) -> Result<Vec<OutFile>, String> {
    let name = plan.name.as_str();
    let n = plan.n;
    let k = plan.k;
    let mut funcs = Vec::new();
    let mat = |i: usize, cols: usize| format!("out[{}, {}]", i / cols.max(1), i % cols.max(1));
    let zeros = |r: &str, c: &str| format!("    out = np.zeros(({r}, {c}))\n");
    let nn = zeros("NQ", "NQ");
    let ret = "    return out\n";
    type Target = Box<dyn Fn(usize) -> String>;
    let specs: Vec<(Spec, &Func, Target)> = vec![
        (
            Spec {
                fname: "inertia",
                formula:
                    "Inertia matrix B(q), NQ x NQ, symmetric positive definite; T = 1/2 q'^T B q'.",
                params: &["q"],
                init: &nn,
                ret,
            },
            &plan.inertia,
            Box::new(move |i| mat(i, n)),
        ),
        (
            Spec {
                fname: "gravity",
                formula: "Gravity vector G(q) = dU_g/dq, length NQ.",
                params: &["q"],
                init: "    out = np.zeros(NQ)\n",
                ret,
            },
            &plan.gravity,
            Box::new(|i| format!("out[{i}]")),
        ),
        (
            Spec {
                fname: "stiffness",
                formula:
                    "Stiffness matrix K (constant, block diagonal): elastic energy 1/2 q^T K q.",
                params: &[],
                init: &nn,
                ret,
            },
            &plan.stiffness,
            Box::new(move |i| mat(i, n)),
        ),
        (
            Spec {
                fname: "damping",
                formula: "Damping matrix D (constant): dissipation 1/2 q'^T D q'.",
                params: &[],
                init: &nn,
                ret,
            },
            &plan.damping,
            Box::new(move |i| mat(i, n)),
        ),
        (
            Spec {
                fname: "actuation",
                formula: "Actuation matrix A(q), NQ x NU: generalized force A u.",
                params: &["q"],
                init: "    out = np.zeros((NQ, NU))\n",
                ret,
            },
            &plan.actuation,
            Box::new(move |i| mat(i, k)),
        ),
        (
            Spec {
                fname: "tip_jacobian",
                formula: "Tip Jacobian, 3 x NQ: rows dx/dq, dy/dq, dangle/dq.",
                params: &["q"],
                init: "    out = np.zeros((3, NQ))\n",
                ret,
            },
            &plan.tip_jacobian,
            Box::new(move |i| mat(i, n)),
        ),
        (
            Spec {
                fname: "potential_energy",
                formula: "Potential energy [J]: gravity (zero at q = 0) plus elastic 1/2 q^T K q.",
                params: &["q"],
                init: "",
                ret: "",
            },
            &plan.potential_energy,
            Box::new(|_| String::new()),
        ),
    ];
    // G and, after it, more NQ-row outputs (name, columns, their constant) in one
    // schedule, `_{fname}(q, P)` returning them all: what the statics need at one point,
    // with what they share computed once. And the public function that keeps one of them.
    let g_and = |f: &Func, fname: &str, more: &[(&'static str, usize, &str)], formula: &str| {
        let helper = format!("_{fname}");
        let mut init = String::from("    g = np.zeros(NQ)\n");
        let mut ret = String::from("    return g");
        for (array, _, width) in more {
            init.push_str(&format!("    {array} = np.zeros((NQ, {width}))\n"));
            ret.push_str(&format!(", {array}"));
        }
        ret.push('\n');
        let more: Vec<(&'static str, usize)> = more.iter().map(|(a, c, _)| (*a, *c)).collect();
        let mut all = function(
            plan,
            f,
            &Spec {
                fname: &helper,
                formula: &format!("{formula}, at the parameters P (as _params returns them)."),
                params: &[],
                init: &init,
                ret: &ret,
            },
            None,
            &move |i| {
                let mut at = n;
                if i < at {
                    return format!("g[{i}]");
                }
                for (array, cols) in &more {
                    if i < at + n * cols {
                        return format!("{array}[{}, {}]", (i - at) / cols, (i - at) % cols);
                    }
                    at += n * cols;
                }
                unreachable!("output {i} beyond the arrays")
            },
        );
        all.signature = format!("{helper}(q, P)");
        all
    };
    let keeping = |public: &str, formula: &str, f: &Func, helper: &str, which: usize| {
        PyFunc {
        rows: String::new(),
        formula: formula.into(),
        ops: super::plan::ops_sentence(f.ops, f.ops_beyond),
        signature: signature(plan, public, &["q"], true),
        body: format!(
            "    q = _vector(q, NQ, \"q\")\n    P = _params({})\n    return _{helper}(q, P)[{which}]\n",
            param_names(plan)
        ),
    }
    };
    for (spec, f, target) in &specs {
        if spec.fname == "gravity" && plan.gravity_with_actuation {
            // gravity() is G with a q-dependent A, keeping G.
            funcs.push(g_and(
                f,
                "gravity_actuation",
                &[("out", k, "NU")],
                "(G(q), A(q)) in one call: A's end forces lie inside G's sums. What the statics' residual and the regulator need",
            ));
            funcs.push(keeping(
                "gravity",
                "Gravity vector G(q) = dU_g/dq, length NQ. Computed with A(q), whose end forces lie inside its sums.",
                f,
                "gravity_actuation",
                0,
            ));
            continue;
        }
        funcs.push(function(plan, f, spec, None, target.as_ref()));
    }
    // gravity_jacobian() is G with dG/dq, keeping dG/dq.
    let (more, formula) = if plan.gravity_with_actuation {
        (
            vec![("out", n, "NQ"), ("a", k, "NU")],
            "(G(q), dG/dq, A(q)) in one call, sharing their moments, kernels and sums (A's end forces lie inside G's): what a Newton step of the statics needs",
        )
    } else {
        (
            vec![("out", n, "NQ")],
            "(G(q), dG/dq) in one call, sharing their moments, kernels and sums: what a Newton step of the statics needs",
        )
    };
    funcs.push(g_and(
        &plan.gravity_jacobian,
        "gravity_linearised",
        &more,
        formula,
    ));
    funcs.push(keeping(
        "gravity_jacobian",
        "Gravity Jacobian dG/dq, NQ x NQ: the Hessian of U_g, so symmetric. Computed with G(q), which shares nearly all of its work.",
        &plan.gravity_jacobian,
        "gravity_linearised",
        1,
    ));
    if let Some(f) = &plan.actuation_jacobian {
        funcs.push(function(
            plan,
            f,
            &Spec {
                fname: "_actuation_jacobian",
                formula: "dA_ic/dq_x as out[x, i, c]: the statics functions' d(A u)/dq.",
                params: &["q"],
                init: "    out = np.zeros((NQ, NQ, NU))\n",
                ret,
            },
            None,
            &move |i| format!("out[{}, {}, {}]", i / (n * k), (i / k) % n, i % k),
        ));
    }
    // C alone needs nearly everything B and G need too: it is terms(), keeping C.
    funcs.insert(
        1,
        PyFunc {
            rows: String::new(),
            formula: "Coriolis matrix C(q, q') (Christoffel symbols of the first kind; B' - 2C skew), NQ x NQ. From terms(): C shares nearly all of its work with B and G.".into(),
            ops: super::plan::ops_sentence(plan.terms.ops, plan.terms.ops_beyond),
            signature: signature(plan, "coriolis", &["q", "qd"], true),
            body: format!(
                "    P = _params({})\n    return terms(q, qd, **P._asdict())[1]\n",
                param_names(plan)
            ),
        },
    );
    // Before the potential energy, the last of the list.
    funcs.insert(
        funcs.len() - 1,
        PyFunc {
            rows: String::new(),
            formula: "Kinetic energy T = 1/2 q'^T B(q) q' [J], with B from inertia().".into(),
            ops: super::plan::ops_sentence(plan.kinetic_energy, plan.kinetic_energy_beyond),
            signature: signature(plan, "kinetic_energy", &["q", "qd"], true),
            body: format!(
                "    P = _params({})\n    qd = np.asarray(_vector(qd, NQ, \"qd\"))\n    \
                 return float(0.5 * qd @ inertia(q, **P._asdict()) @ qd)\n",
                param_names(plan)
            ),
        },
    );
    if let Some(f) = &plan.regressor {
        let ny = plan.params.linear_len();
        funcs.push(function(
            plan,
            f,
            &Spec {
                fname: "regressor",
                formula: "Regressor Y(q, q', q''), NQ x NTHETA: Y theta = B q'' + C q' + G + K q + D q' exactly, for the linear parameters theta (the fields of Params but gravity, in order). Gravity is not in theta: the keyword gravity is read, the other parameters are ignored.",
                params: &["q", "qd", "qdd"],
                init: "    out = np.zeros((NQ, NTHETA))\n",
                ret,
            },
            None,
            &move |i| mat(i, ny),
        ));
    }
    if let Some(helper) = &plan.shares {
        let b = &helper.block;
        let mut shares = function(
            plan,
            helper,
            &Spec {
                fname: "_shares",
                formula: "What terms() and regressor() have in common: the values s that the rest of each reads, at the parameters P (as _params returns them).",
                params: &[],
                init: &format!("    s = [0.0] * {}\n", b.outputs.len()),
                ret: "    return s\n",
            },
            None,
            &|i| format!("s[{i}]"),
        );
        shares.signature = "_shares(q, qd, P)".into();
        funcs.push(shares);
    }
    let tspec = Spec {
        fname: "terms",
        formula: "B(q), C(q, q') and G(q) in one call, equal to inertia(q), coriolis(q, qd) and gravity(q) to rounding (shared sums are added in another order): the call for a controller that needs all three, with what they share computed once. Returns (B, C, G).",
        params: &["q", "qd"],
        init: "    b = np.zeros((NQ, NQ))\n    c = np.zeros((NQ, NQ))\n    g = np.zeros(NQ)\n",
        ret: "    return b, c, g\n",
    };
    match &plan.terms_actuation {
        // With an end force, terms() is the schedule with A, keeping B, C and G.
        Some(f) => funcs.push(PyFunc {
            rows: String::new(),
            formula: format!(
                "{} Computed with A(q), whose end forces lie inside their sums.",
                tspec.formula
            ),
            ops: super::plan::ops_sentence(f.ops, f.ops_beyond),
            signature: signature(plan, "terms", &["q", "qd"], true),
            body: format!(
                "    q = _vector(q, NQ, \"q\")\n    qd = _vector(qd, NQ, \"qd\")\n    P = _params({})\n\
                 \x20   b, c, g, _ = _terms_actuation(q, qd, P)\n    return b, c, g\n",
                param_names(plan)
            ),
        }),
        None => funcs.push(function(
            plan,
            &plan.terms,
            &tspec,
            None,
            &terms_target(n, k),
        )),
    }
    if let Some(f) = &plan.terms_actuation {
        let mut all = function(
            plan,
            f,
            &Spec {
                fname: "_terms_actuation",
                formula: "(B(q), C(q, q'), G(q), A(q)) in one call: A's end forces lie inside the sums of terms(), so they come at no cost. What forward_dynamics() needs, at the parameters P (as _params returns them).",
                params: &[],
                init: "    b = np.zeros((NQ, NQ))\n    c = np.zeros((NQ, NQ))\n    g = np.zeros(NQ)\n    a = np.zeros((NQ, NU))\n",
                ret: "    return b, c, g, a\n",
            },
            None,
            &terms_target(n, k),
        );
        all.signature = "_terms_actuation(q, qd, P)".into();
        funcs.push(all);
    }
    let mut pose_names = Vec::new();
    for (j, f) in plan.pose.iter().enumerate() {
        let fname = format!("_pose_segment{j}");
        let formula = format!("Backbone pose [x, y, angle] of segment {j} at sigma.");
        let spec = Spec {
            fname: &fname,
            formula: &formula,
            params: &["q", "sigma"],
            init: "    out = np.zeros(3)\n",
            ret,
        };
        funcs.push(function(plan, f, &spec, Some(j), &|i| format!("out[{i}]")));
        pose_names.push(fname.clone());
    }

    let mc = MomentConstants::new(plan, Precision::F64);
    let series: Vec<String> = mc
        .series
        .iter()
        .map(|row| format!("({})", row.join(", ")))
        .collect();
    let mut ctx = base_context(name, meta, plan, n, k);
    ctx.insert(
        "non_finite_policy",
        &super::constants::non_finite_policy("raises DynamicsError", ""),
    );
    ctx.insert("gravity_actuation", &plan.gravity_with_actuation);
    ctx.insert("terms_actuation", &plan.terms_actuation.is_some());
    ctx.insert("odd_inv", &format!("\n{},\n", wrap_list(&mc.odd_inv, 4)));
    ctx.insert("pair_inv", &format!("\n{},\n", wrap_list(&mc.pair_inv, 4)));
    ctx.insert("series", &format!("\n    {},\n", series.join(",\n    ")));
    ctx.insert(
        "kernel_start",
        &format!("\n{},\n", wrap_list(&strings(&mc.start), 4)),
    );
    ctx.insert(
        "kernel_first",
        &format!("\n{},\n", wrap_list(&strings(&mc.first), 4)),
    );
    ctx.insert("kernel_coef", &format!("\n{},\n", wrap_list(&mc.coef, 4)));
    ctx.insert(
        "matrix_tables",
        &matrix_table_context(plan, Precision::F64, &|v| v.join(", ")),
    );
    ctx.insert("functions", &funcs);
    ctx.insert("ntheta", &plan.params.linear_len());
    // The runtime parameters: keyword-only arguments, the arm file's values by default.
    let fields = plan.params.fields();
    ctx.insert("param_names", &param_names(plan));
    ctx.insert("param_sig", &param_keywords(plan));
    let defaults: Vec<(String, String, String, &str)> = fields
        .iter()
        .map(|f| {
            let vals: Vec<String> = f
                .of(&plan.param_defaults)
                .iter()
                .map(|q| super::number::literal(q, Precision::F64))
                .collect();
            let (value, shape) = match f.len {
                Some(l) => (format!("({},)", vals.join(", ")), l.to_string()),
                None => (vals[0].clone(), "None".into()),
            };
            (f.kind.field().to_string(), value, shape, f.kind.doc())
        })
        .collect();
    ctx.insert("param_defaults", &defaults);
    ctx.insert("pose_names", &pose_names);
    ctx.insert(
        "dynamics_ops",
        &super::plan::ops_sentence(plan.dynamics, plan.dynamics_beyond),
    );
    super::control_code::insert_python(&mut ctx, plan);
    ctx.insert("rtol", &golden.rtol(Precision::F64));
    ctx.insert("rtol_reason", golden.rtol_reason(Precision::F64));
    ctx.insert("rtol_equilibrium", golden.rtol_equilibrium(Precision::F64));
    ctx.insert("eq_rounding", golden.eq_rounding(Precision::F64));
    ctx.insert("golden", &golden_python(golden));
    ctx.insert(
        "sigmas",
        &SIGMAS
            .iter()
            .map(|s| f64_literal(*s))
            .collect::<Vec<_>>()
            .join(", "),
    );
    Ok(vec![
        (
            format!("python/{name}.py"),
            render("python/module.py", &ctx)?,
        ),
        (
            format!("python/test_{name}.py"),
            render("python/test.py", &ctx)?,
        ),
    ])
}

fn golden_python(g: &Golden) -> String {
    let mut out = String::from("LABELS = [\n");
    for l in &g.labels {
        out.push_str(&format!("    {l:?},\n"));
    }
    out.push_str("]\n");
    // (The allocation's conditioning matters only to the single-precision C checks.)
    for a in g.arrays.iter().filter(|a| a.name != "regcond") {
        out.push_str(&format!("G_{} = np.array([\n", a.name.to_uppercase()));
        for c in 0..g.labels.len() {
            let items = if a.len == 0 {
                Vec::new()
            } else {
                g.literals(a.name, c)
            };
            out.push_str(&format!("    [\n{}\n    ],\n", wrap_list(&items, 8)));
        }
        out.push_str("])\n");
    }
    for name in g.scaled() {
        out.push_str(&format!(
            "SCALE_{} = {}\n",
            name.to_uppercase(),
            golden_literal(g.scale(name))
        ));
    }
    out
}
