//! What the emitted statics and regulator functions need beyond the schedules: the
//! controlled outputs `y = S q` and the segments' bending bound as code, the
//! actuators' limits, the solver settings, and (for C, whose scratch the caller owns)
//! where each function keeps its arrays. The algorithms themselves are in the
//! templates, written loop for loop as [`crate::statics::equilibrium`] and
//! [`crate::allocation::allocate`], which the CLI uses.

use super::number::{literal, Precision};
use super::ops::Ops;
use super::plan::Plan;
use crate::allocation::{max_iterations, POLISH_PIVOT, REGULARISATION};
use crate::exact::Q;
use serde::Serialize;
use tera::Context;

/// The scratch of the functions the statics functions call.
pub struct StaticsCallees {
    pub gravity: usize,
    pub actuation: usize,
    pub gravity_jacobian: usize,
    pub actuation_jacobian: usize,
}

/// Offsets into a C `_ws` function's scratch, and its length.
#[derive(Serialize, Default)]
pub struct Layout {
    #[serde(flatten)]
    pub at: std::collections::BTreeMap<&'static str, usize>,
    pub len: usize,
}

impl Layout {
    /// Arrays of the given lengths one after the other, then `rest` reals for callees.
    fn of(arrays: &[(&'static str, usize)], rest: usize) -> Layout {
        let mut at = std::collections::BTreeMap::new();
        let mut used = 0;
        for &(name, len) in arrays {
            at.insert(name, used);
            used += len;
        }
        at.insert("rest", used);
        Layout {
            at,
            len: used + rest,
        }
    }
}

/// Where `static_residual`, `static_jacobian`, the linearisation inside `equilibrium`,
/// `equilibrium` and `regulate` keep their arrays.
pub struct StaticsLayout {
    pub residual: Layout,
    pub jacobian: Layout,
    pub linearise: Layout,
    pub equilibrium: Layout,
    pub regulate: Layout,
}

impl StaticsLayout {
    pub fn new(n: usize, k: usize, h: usize, has_da: bool, c: StaticsCallees) -> StaticsLayout {
        let nn = n * n;
        let da = if has_da { nn * k } else { 0 };
        let residual = Layout::of(&[("k", nn), ("a", n * k)], c.gravity.max(c.actuation));
        let jacobian = Layout::of(
            &[("k", nn), ("da", da)],
            c.gravity_jacobian.max(c.actuation_jacobian),
        );
        let linearise = Layout::of(
            &[("g", n), ("a", n * k), ("da", da)],
            c.gravity
                .max(c.actuation)
                .max(c.gravity_jacobian)
                .max(c.actuation_jacobian),
        );
        let equilibrium = Layout::of(
            &[
                ("k", nn),
                ("r", n),
                ("jac", nn),
                ("load", n),
                ("tangent", n),
                ("trial", n),
                ("dq", n),
                ("cand", n),
                ("lu", nn),
            ],
            linearise.len,
        );
        let regulate = Layout::of(
            &[
                ("a", n * k),
                ("m", h * k),
                ("b", h),
                ("y", h),
                ("yd", h),
                ("hess", k * k),
                ("f", k),
                ("opt", k),
                ("grad", k),
                ("sub", k * k),
                ("rhs", k.max(h)),
                ("gram", h * h),
                ("g", n),
                ("k", nn),
            ],
            c.gravity.max(c.actuation),
        );
        StaticsLayout {
            residual,
            jacobian,
            linearise,
            equilibrium,
            regulate,
        }
    }
}

/// One controlled output as the emitters print it.
#[derive(Serialize)]
struct OutputCode {
    label: String,
    /// For comments: `q[0] + 1/2 q[1] + 1/3 q[2]`.
    formula: String,
    /// C: over a strided `v` (`v[i * stride]`).
    code: String,
}

/// One segment's bending bound as C: `L_j (|v_a| + |v_b| + …)`.
#[derive(Serialize)]
struct SegmentCode {
    length: String,
    sum: String,
}

/// The comment form of `Σ c_i q[i]`.
pub fn formula(terms: &[(Q, usize)]) -> String {
    terms
        .iter()
        .map(|(c, i)| {
            if c == &Q::from_integer(1.into()) {
                format!("q[{i}]")
            } else {
                format!("{c} q[{i}]")
            }
        })
        .collect::<Vec<_>>()
        .join(" + ")
}

/// `Σ c_i v[index(i)]` with the given spelling of an element.
pub fn linear_code(
    terms: &[(Q, usize)],
    precision: Precision,
    element: &dyn Fn(usize) -> String,
) -> String {
    terms
        .iter()
        .map(|(c, i)| {
            if c == &Q::from_integer(1.into()) {
                element(*i)
            } else {
                format!("{} * {}", literal(c, precision), element(*i))
            }
        })
        .collect::<Vec<_>>()
        .join(" + ")
}

/// A limit as a C literal: ±the largest finite real where there is none, so that the
/// code needs no infinities (which `-ffinite-math-only` may assume away).
fn c_limit(x: f64, precision: Precision) -> String {
    let max = match precision {
        Precision::F64 => "DBL_MAX",
        Precision::F32 => "FLT_MAX",
    };
    if x == f64::INFINITY {
        max.to_string()
    } else if x == f64::NEG_INFINITY {
        format!("-{max}")
    } else {
        let q = Q::from_float(x).expect("finite limit");
        literal(&q, precision)
    }
}

/// Solver settings as literals of the precision: the equilibrium tolerance, the
/// allocation's regularisation and polish pivot, the saturation threshold, and the
/// floor added to norms.
pub struct Settings {
    pub eq_tolerance: &'static str,
    pub regularisation: String,
    pub polish_pivot: String,
    pub saturation: String,
    pub tiny: &'static str,
    pub one_ulp: &'static str,
}

impl Settings {
    pub fn of(precision: Precision) -> Settings {
        match precision {
            Precision::F64 => Settings {
                eq_tolerance: "1e-12",
                regularisation: format!("{REGULARISATION:e}"),
                polish_pivot: format!("{POLISH_PIVOT:e}"),
                saturation: format!("{:e}", super::golden::SATURATION),
                tiny: "1e-300",
                one_ulp: "1e-15",
            },
            // Single precision resolves about 1e-7: the settings scale with it.
            Precision::F32 => Settings {
                eq_tolerance: "1e-5f",
                regularisation: "1e-6f".into(),
                polish_pivot: "1e-5f".into(),
                saturation: "1e-4f".into(),
                tiny: "1e-30f",
                one_ulp: "1e-7f",
            },
        }
    }
}

/// Everything the C statics template reads.
pub fn insert_c(ctx: &mut Context, plan: &Plan, precision: Precision, st: &StaticsLayout) {
    StaticsOps::of(plan).insert(ctx, " * ");
    insert_range(
        ctx,
        plan,
        precision,
        if precision == Precision::F32 {
            "fabsf"
        } else {
            "fabs"
        },
    );
    let fs = if precision == Precision::F32 { "f" } else { "" };
    let segments: Vec<SegmentCode> = (0..plan.segments)
        .map(|j| SegmentCode {
            length: literal(&plan.seg_length[j], precision),
            sum: (0..plan.seg_coords[j])
                .map(|i| format!("fabs{fs}(v[{}])", plan.seg_offset[j] + i))
                .collect::<Vec<_>>()
                .join(" + "),
        })
        .collect();
    let outputs: Vec<OutputCode> = plan
        .outputs
        .iter()
        .map(|o| OutputCode {
            label: o.label.clone(),
            formula: formula(&o.terms),
            code: linear_code(&o.terms, precision, &|i| {
                if i == 0 {
                    "v[0]".into()
                } else {
                    format!("v[{i} * stride]")
                }
            }),
        })
        .collect();
    let lo: Vec<String> = plan
        .limits
        .iter()
        .map(|l| c_limit(l.lo, precision))
        .collect();
    let hi: Vec<String> = plan
        .limits
        .iter()
        .map(|l| c_limit(l.hi, precision))
        .collect();
    let set = Settings::of(precision);
    ctx.insert("segments", &segments);
    ctx.insert("outputs", &outputs);
    ctx.insert("ny", &plan.outputs.len());
    ctx.insert(
        "select_strides",
        &plan
            .outputs
            .iter()
            .any(|o| o.terms.iter().any(|(_, i)| *i != 0)),
    );
    ctx.insert("u_lo", &super::c::wrap_list(&lo, 4));
    ctx.insert("u_hi", &super::c::wrap_list(&hi, 4));
    ctx.insert(
        "real_max",
        match precision {
            Precision::F64 => "DBL_MAX",
            Precision::F32 => "FLT_MAX",
        },
    );
    ctx.insert("eq_tolerance", set.eq_tolerance);
    ctx.insert("regularisation", &set.regularisation);
    ctx.insert("polish_pivot", &set.polish_pivot);
    ctx.insert("saturation", &set.saturation);
    ctx.insert("tiny", set.tiny);
    ctx.insert("one_ulp", set.one_ulp);
    ctx.insert("reg_iterations", &max_iterations(plan.k));
    ctx.insert("has_da", &plan.actuation_jacobian.is_some());
    ctx.insert("sr", &st.residual);
    ctx.insert("sj", &st.jacobian);
    ctx.insert("lin", &st.linearise);
    ctx.insert("eq", &st.equilibrium);
    ctx.insert("reg", &st.regulate);
}

/// Everything the Rust statics section reads, for a crate of precision `precision`.
/// The geometry's literals keep double digits (typed `Real` by their context); the
/// solver settings are the precision's (see [`Settings`]).
pub fn insert_rust(ctx: &mut Context, plan: &Plan, precision: Precision) {
    use super::number::rust_spelling;
    let fabs = &format!("libm::fabs{}", super::rust::libm_suffix(precision));
    let p = Precision::F64;
    StaticsOps::of(plan).insert(ctx, "/// ");
    insert_range(ctx, plan, p, fabs);
    let segments: Vec<SegmentCode> = (0..plan.segments)
        .map(|j| SegmentCode {
            length: literal(&plan.seg_length[j], p),
            sum: (0..plan.seg_coords[j])
                .map(|i| format!("{fabs}(v[{}])", plan.seg_offset[j] + i))
                .collect::<Vec<_>>()
                .join(" + "),
        })
        .collect();
    #[derive(Serialize)]
    struct RustOutput {
        label: String,
        formula: String,
        rust: String,
    }
    let outputs: Vec<RustOutput> = plan
        .outputs
        .iter()
        .map(|o| RustOutput {
            label: o.label.clone(),
            formula: formula(&o.terms),
            rust: linear_code(&o.terms, p, &|i| format!("v[{i}]")),
        })
        .collect();
    let bound = |x: f64| {
        if x == f64::INFINITY {
            "Real::INFINITY".to_string()
        } else if x == f64::NEG_INFINITY {
            "Real::NEG_INFINITY".to_string()
        } else {
            super::number::f64_literal(x)
        }
    };
    let limits: Vec<String> = plan
        .limits
        .iter()
        .map(|l| format!("[{}, {}]", bound(l.lo), bound(l.hi)))
        .collect();
    let set = Settings::of(precision);
    ctx.insert("segments", &segments);
    ctx.insert("outputs", &outputs);
    ctx.insert("ny", &plan.outputs.len());
    ctx.insert("rust_limits", &limits.join(", "));
    ctx.insert("eq_tolerance", &rust_spelling(set.eq_tolerance.to_string()));
    ctx.insert("regularisation", &rust_spelling(set.regularisation.clone()));
    ctx.insert("polish_pivot", &rust_spelling(set.polish_pivot.clone()));
    ctx.insert("saturation", &rust_spelling(set.saturation.clone()));
    ctx.insert("reg_iterations", &max_iterations(plan.k));
    ctx.insert("has_da", &plan.actuation_jacobian.is_some());
}

/// Everything the Python statics section reads.
pub fn insert_python(ctx: &mut Context, plan: &Plan) {
    StaticsOps::of(plan).insert(ctx, "    ");
    insert_range(ctx, plan, Precision::F64, "abs");
    let p = Precision::F64;
    let lengths: Vec<String> = plan.seg_length.iter().map(|l| literal(l, p)).collect();
    let spans: Vec<String> = (0..plan.segments)
        .map(|j| {
            format!(
                "({}, {})",
                plan.seg_offset[j],
                plan.seg_offset[j] + plan.seg_coords[j]
            )
        })
        .collect();
    #[derive(Serialize)]
    struct PyOutput {
        label: String,
        formula: String,
        python: String,
    }
    let outputs: Vec<PyOutput> = plan
        .outputs
        .iter()
        .map(|o| PyOutput {
            label: o.label.clone(),
            formula: formula(&o.terms),
            python: linear_code(&o.terms, p, &|i| format!("v[{i}]")),
        })
        .collect();
    let bound = |x: f64| {
        if x == f64::INFINITY {
            "math.inf".to_string()
        } else if x == f64::NEG_INFINITY {
            "-math.inf".to_string()
        } else {
            super::number::f64_literal(x)
        }
    };
    let limits: Vec<String> = plan
        .limits
        .iter()
        .map(|l| format!("({}, {})", bound(l.lo), bound(l.hi)))
        .collect();
    let set = Settings::of(p);
    ctx.insert("seg_lengths", &lengths.join(", "));
    ctx.insert("seg_spans", &spans.join(", "));
    ctx.insert("outputs", &outputs);
    ctx.insert("ny", &plan.outputs.len());
    ctx.insert("py_limits", &limits.join(", "));
    ctx.insert("eq_tolerance", set.eq_tolerance);
    ctx.insert("regularisation", &set.regularisation);
    ctx.insert("polish_pivot", &set.polish_pivot);
    ctx.insert("saturation", &set.saturation);
    ctx.insert("reg_iterations", &max_iterations(plan.k));
    ctx.insert("has_da", &plan.actuation_jacobian.is_some());
}

/// Worst-case operation counts of the statics and regulator functions, for their
/// comments: the straight-line parts exactly as [`Ops`] counts the schedules, the
/// loops at their largest trip counts.
pub struct StaticsOps {
    pub residual: Ops,
    pub jacobian: Ops,
    /// One Newton iteration of `equilibrium` (linearisation with the Jacobian, the
    /// norm, the solve) and one backtracking trial (the residual only).
    pub newton: Ops,
    pub trial: Ops,
    /// `regulate` before its active-set loop (compensated law), and one iteration.
    pub regulate: Ops,
    pub active_set: Ops,
}

fn mul_add(count: usize) -> Ops {
    Ops {
        add: count,
        mul: count,
        ..Ops::default()
    }
}

impl StaticsOps {
    pub fn of(plan: &Plan) -> StaticsOps {
        let (n, k, h) = (plan.n, plan.k, plan.outputs.len());
        let da = plan
            .actuation_jacobian
            .as_ref()
            .map_or(Ops::default(), |f| f.ops_beyond);
        let da_u = if plan.actuation_jacobian.is_some() {
            mul_add(n * n * k)
        } else {
            Ops::default()
        };
        // G and A: one schedule when A depends on q (`Plan::gravity_with_actuation`).
        let g_and_a = if plan.gravity_with_actuation {
            plan.gravity.ops_beyond
        } else {
            plan.gravity.ops_beyond + plan.actuation.ops_beyond
        };
        let residual = g_and_a + mul_add(n * n + n * k);
        let jacobian = plan.gravity_jacobian.ops_beyond
            + da
            + da_u
            + Ops {
                add: n * n,
                ..Ops::default()
            };
        let norm = |len: usize| {
            mul_add(len)
                + Ops {
                    sqrt: 1,
                    ..Ops::default()
                }
        };
        // Residual, load, scale (three norms), then ‖r‖.
        let trial = residual
            + mul_add(n)
            + Ops {
                add: n + 3,
                mul: 1,
                ..Ops::default()
            }
            + norm(n) * 3
            + norm(n);
        // Gaussian elimination with back substitution.
        let mut solve = Ops::default();
        for c in 0..n {
            let below = n - c - 1;
            solve += mul_add(below * (n - c + 1));
            solve.div += below + 1;
            solve += mul_add(below);
            solve.add += 1;
        }
        let bending = Ops {
            add: n,
            mul: plan.segments,
            ..Ops::default()
        };
        // With the Jacobian the linearisation takes G from the Jacobian's schedule
        // (`Plan::gravity_jacobian`), and A too when that schedules it, not as a trial
        // does.
        let a_apart = if plan.gravity_with_actuation {
            Ops::default()
        } else {
            plan.actuation.ops_beyond
        };
        let newton = trial - g_and_a + a_apart + jacobian + mul_add(n * n) + solve + bending;
        let s_terms: usize = plan.outputs.iter().map(|o| o.terms.len()).sum();
        let select = Ops {
            add: s_terms.saturating_sub(h),
            mul: s_terms,
            ..Ops::default()
        };
        let regulate = g_and_a
            + mul_add(n * n)
            + select * (3 + k)
            + mul_add(h * 2)
            + Ops {
                add: 2 * h,
                ..Ops::default()
            }
            + mul_add(h * k * (k + 1))
            + Ops {
                add: k + k,
                mul: 1,
                div: 1,
                ..Ops::default()
            };
        // Free optimum (all free, the worst), walk, gradient, release test; the polish
        // (once, after the loop) is of the same order.
        let mut chol = Ops::default();
        for i in 0..k {
            for j in 0..=i {
                chol += mul_add(j);
                if i == j {
                    chol.sqrt += 1;
                } else {
                    chol.div += 1;
                }
            }
            chol += mul_add(2 * i);
            chol.div += 2;
        }
        let active_set = mul_add(k * k) * 2
            + chol
            + Ops {
                add: 4 * k,
                mul: 2 * k,
                div: k,
                ..Ops::default()
            }
            + norm(k) * 2;
        StaticsOps {
            residual,
            jacobian,
            newton,
            trial,
            regulate,
            active_set,
        }
    }

    /// The comment lines, continued with `prefix` (` * `, `/// `, four spaces).
    pub fn insert(&self, ctx: &mut Context, prefix: &str) {
        ctx.insert("residual_ops", &format!("Operations: {}.", self.residual));
        ctx.insert("jacobian_ops", &format!("Operations: {}.", self.jacobian));
        ctx.insert(
            "equilibrium_ops",
            &format!(
                "Operations per Newton iteration, at most: {}.\n{prefix}Per backtracking trial: {}.",
                self.newton, self.trial
            ),
        );
        ctx.insert(
            "regulate_ops",
            &format!(
                "Operations before the allocation, at most: {}.\n{prefix}Per active-set iteration: {}.",
                self.regulate, self.active_set
            ),
        );
    }
}

/// One segment's range test as code: `|L q_{j,0}|` and `Σ_{i≥1} L |q_{j,i}|/(i+1)`.
#[derive(Serialize)]
struct RangeCode {
    base: String,
    extra: String,
}

/// The range check's per-segment expressions, spelled by `abs` and the precision.
fn range_code(plan: &Plan, precision: Precision, abs: &str) -> Vec<RangeCode> {
    (0..plan.segments)
        .map(|j| {
            let l = &plan.seg_length[j];
            let at = plan.seg_offset[j];
            let extra: Vec<String> = (1..plan.seg_coords[j])
                .map(|i| {
                    let c = l / Q::from_integer((i as i64 + 1).into());
                    format!("{} * {abs}(q[{}])", literal(&c, precision), at + i)
                })
                .collect();
            RangeCode {
                base: format!("{} * {abs}(q[{at}])", literal(l, precision)),
                extra: if extra.is_empty() {
                    String::new()
                } else {
                    extra.join(" + ")
                },
            }
        })
        .collect()
}

/// What every language's range check reads.
pub fn insert_range(ctx: &mut Context, plan: &Plan, precision: Precision, abs: &str) {
    let lit = |x: f64| {
        let q = Q::from_float(x).expect("finite bound");
        literal(&q, precision)
    };
    ctx.insert("range_segments", &range_code(plan, precision, abs));
    ctx.insert("range_base", &lit(plan.range.base_bending));
    ctx.insert("range_extra", &lit(plan.range.extra_bending));
}
