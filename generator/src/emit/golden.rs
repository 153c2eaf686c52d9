//! Golden values for the cross-check tests that ship with the emitted code, computed
//! by the independent numeric reference (quadrature of the truncated kinematics of the
//! arm's own order), never by the derived program the code was printed from.

use super::number::{golden_literal, Precision};
use crate::arm::Arm;
use crate::control::{default_outputs, Law, Regulator};
use crate::dynamics::generalized_force;
use crate::reference::{Kinematics, Reference};
use crate::statics::{
    equilibrium, linear_rest_shape, most_bent, order_advice, shape_gain, Options, Quadrature,
};
use crate::terms::Matrix;
use num_traits::ToPrimitive;

/// The quantities whose tests judge entries against their largest magnitude over
/// all configurations (see [`Golden::scale`]).
pub const SCALED: [&str; 28] = [
    "B", "C", "G", "K", "D", "A", "J", "T", "V", "pose", "dG", "R", "Js", "qeq", "ubase", "ucomp",
    "pB", "pC", "pG", "pK", "pD", "pT", "pV", "pdG", "pR", "pqeq", "pucomp", "Y",
];

/// The arrays of the regulator checks.
const REGULATOR_ARRAYS: [&str; 13] = [
    "ytarget",
    "kp",
    "kd",
    "ubase",
    "ucomp",
    "regsat",
    "regcond",
    "reggain",
    "regnormal",
    "pucomp",
    "pregsat",
    "preggain",
    "pregnormal",
];

/// Relative shortfall `‖b − S A u‖ / ‖b‖` above which a regulator reports that the
/// limits keep it from its wanted force (the emitted `regulate`'s rule).
pub const SATURATION: f64 = 1e-9;

/// Arc coordinates at which every segment's pose is checked.
pub const SIGMAS: [f64; 3] = [0.0, 0.37, 1.0];

/// One named array of golden numbers: `cases × len` values.
pub struct Array {
    pub name: &'static str,
    pub len: usize,
    pub values: Vec<Vec<f64>>,
}

pub struct Golden {
    pub labels: Vec<String>,
    pub arrays: Vec<Array>,
}

/// Bend angles `α_i` per segment turned into coordinates: `q_{j,i} = α_i (i+1)/L_j`, so
/// that `α_0 = a_j` is the moment argument and `α_i` the angle coordinate `i` adds.
fn coords(arm: &Arm, alpha: impl Fn(usize, usize) -> f64) -> Vec<f64> {
    let mut q = Vec::new();
    for (j, s) in arm.segments.iter().enumerate() {
        let l = s.length.to_f64().unwrap_or(f64::NAN);
        for i in 0..s.n_coords() {
            q.push(alpha(j, i) * (i + 1) as f64 / l);
        }
    }
    q
}

/// A fixed, irregular pattern in [−1, 1].
fn pattern(i: usize, salt: usize) -> f64 {
    let v = ((i * 7 + salt * 13 + 3) % 17) as f64 / 8.0 - 1.0;
    if v == 0.0 {
        0.3
    } else {
        v
    }
}

/// The configurations: straight, tiny (`a_j = 1e-9`), small, large and mixed curvature
/// (`a_j = 0` exactly with bent higher terms, `a_j = 1e-9`, large), `a_j = 2` (the
/// moment routine's branch switch), and `|a_j| = 5` and 11 (beyond the cut top rows:
/// the kernel recurrence from both ends).
fn configurations(arm: &Arm) -> Vec<(String, Vec<f64>)> {
    vec![
        ("straight".into(), coords(arm, |_, _| 0.0)),
        (
            "tiny a = 1e-9".into(),
            coords(arm, |_, i| if i == 0 { 1e-9 } else { 0.0 }),
        ),
        (
            "small".into(),
            coords(
                arm,
                |j, i| if i == 0 { 0.2 } else { 0.1 } * pattern(j * 5 + i, 1),
            ),
        ),
        (
            "large".into(),
            coords(arm, |j, i| {
                if i == 0 {
                    if j % 2 == 0 {
                        3.5
                    } else {
                        -2.6
                    }
                } else {
                    0.8 * pattern(j * 5 + i, 2)
                }
            }),
        ),
        (
            "mixed".into(),
            coords(arm, |j, i| match (j % 3, i) {
                (0, 0) => 0.0,
                (0, _) => 0.5,
                (1, 0) => 1e-9,
                (1, _) => -0.4,
                (_, 0) => 3.0,
                (_, _) => 0.3,
            }),
        ),
        (
            "branch switch a = 2".into(),
            coords(arm, |_, i| if i == 0 { 2.0 } else { 0.2 }),
        ),
        (
            // Beyond kernel_matrix::FAST_BENDING: the recurrence runs from both ends,
            // turning at row 5 ...
            "beyond the cut top rows a = 5".into(),
            coords(arm, |j, i| match (j % 2, i) {
                (0, 0) => 5.0,
                (_, 0) => -5.0,
                _ => 0.15 * pattern(j * 5 + i, 3),
            }),
        ),
        (
            // ... and at row 11, or (up to 12 powers) from the bottom row alone.
            "bent twice over a = 11".into(),
            coords(arm, |j, i| match (j % 2, i) {
                (0, 0) => -11.0,
                (_, 0) => 11.0,
                _ => 0.1 * pattern(j * 5 + i, 4),
            }),
        ),
    ]
}

/// `B`'s smallest Cholesky pivot relative to its diagonal entry
/// ([`crate::dynamics::cholesky_factor`]); 0 where `B` is not positive definite.
fn relative_pivot(b: &[Vec<f64>]) -> f64 {
    crate::dynamics::cholesky_factor(b).map_or(0.0, |(_, pivot)| pivot)
}

fn flat(m: &[Vec<f64>]) -> Vec<f64> {
    m.iter().flatten().copied().collect()
}

/// The reference's equilibrium under `u`: the load continuation runs on the derived
/// model `fast` (cheap), and Newton on the reference's own equations (quadrature of the
/// same truncated kinematics, exact derivatives of its integrands) refines its answer
/// to the reference's root; should that fail, the continuation runs on the reference.
///
/// When the continuation on the derived model finds no equilibrium, none is sought on
/// the reference: the two agree to about 1e-10, so the path has a fold (or a stall)
/// on both, and the reference's continuation would fail the same way, only slower.
/// On a 10-segment arm that repeat took 25 of generate's 29 s. A case without an
/// equilibrium is fine: `static_case` lowers the load, and the second parameter set
/// simply goes unchecked (`peqok` 0).
fn reference_equilibrium(
    fast: &dyn crate::statics::StaticModel,
    exact: &Quadrature,
    u: &[f64],
) -> Result<crate::statics::Equilibrium, crate::statics::StaticsError> {
    let opts = Options::default();
    let near = equilibrium(fast, u, &opts)?;
    crate::statics::refine(exact, &near.q, u, &opts).or_else(|_| equilibrium(exact, u, &opts))
}

/// The equilibrium case of configuration `c`: no input for the first (gravity
/// alone), then the configuration's input pattern scaled so that the linear estimate
/// bends the most-bent segment by `0.4 c` rad ([`reference_equilibrium`]); a load the
/// solver cannot follow is halved until it can.
fn static_case(
    arm: &Arm,
    fast: &dyn crate::statics::StaticModel,
    reference: &Reference,
    c: usize,
    u: &[f64],
) -> Result<(Vec<f64>, Vec<f64>, bool), String> {
    let model = Quadrature(Reference::new(arm, reference.kinematics()));
    let mut scale = 0.0;
    if c > 0 && !u.is_empty() {
        if let Ok(q) = linear_rest_shape(arm, u) {
            let worst = most_bent(arm, &q);
            if worst > 0.0 {
                scale = 0.4 * c as f64 / worst;
            }
        }
    }
    // Halving ends: below 1e-12 the load is dropped, and gravity alone decides.
    loop {
        let ueq: Vec<f64> = u.iter().map(|v| scale * v).collect();
        match reference_equilibrium(fast, &model, &ueq) {
            Ok(eq) => return Ok((ueq, eq.q, eq.stable)),
            Err(e) if scale == 0.0 => {
                let order = arm.expansion_order;
                let why = match order_advice(arm, &ueq, &Options::default()) {
                    Some(advice) => advice.sentence(order),
                    None => "it is too soft or too heavy to hold itself (compare each \
                             [[segment]]'s bending_stiffness with its density and length, \
                             and the gravity)"
                        .to_string(),
                };
                return Err(format!(
                    "the order-{order} model finds no rest shape under the arm's own weight \
                     ({e}): {why}; the emitted equilibrium and its tests need one"
                ));
            }
            Err(_) => scale = if scale < 1e-12 { 0.0 } else { 0.5 * scale },
        }
    }
}

/// Both regulators at one state.
struct RegulatorCase {
    target: Vec<f64>,
    kp: Vec<f64>,
    kd: Vec<f64>,
    u_baseline: Vec<f64>,
    u_compensated: Vec<f64>,
    saturated: Vec<f64>,
    conditioning: f64,
    /// How much the inputs move per unit of relative change in what they are computed
    /// from (`K`, `G`, `A`, `q`, `q̇`), measured: the largest `|Δu_i| / (ε (|u_i| +
    /// max|u|))` over both laws and three perturbations of every entry by `±ε`
    /// (`ε = 1e-7`), at least 1. The errors of those inputs (the tests' `RTOL`) reach the
    /// inputs magnified by it.
    gain: f64,
    /// The condition of the normal equations the allocation solves: the inverse of
    /// `conditioning`, at most 1e12 (the regularisation bounds it), at least 1. Their
    /// own rounding reaches the inputs magnified by it.
    normal: f64,
}

/// Targets near the state's outputs, gains that vary per output, and at the fourth
/// configuration gains a thousand times larger (so that limits, where the arm has
/// them, are reached).
fn regulator_case(
    arm: &Arm,
    k: &Matrix,
    g: &[f64],
    a: &Matrix,
    q: &[f64],
    qd: &[f64],
    c: usize,
) -> RegulatorCase {
    let outputs = default_outputs(arm);
    let h = outputs.len();
    let s = crate::control::selection(arm, &outputs);
    let target: Vec<f64> = (0..h)
        .map(|i| s[i].iter().zip(q).map(|(a, b)| a * b).sum::<f64>() + 0.5 * pattern(i, c + 3))
        .collect();
    let boost = if c == 3 { 1e3 } else { 1.0 };
    let kp: Vec<f64> = (0..h)
        .map(|i| boost * 0.05 * (1.0 + 0.25 * i as f64))
        .collect();
    let kd: Vec<f64> = (0..h)
        .map(|i| boost * 0.004 * (1.0 + 0.5 * i as f64))
        .collect();
    if arm.n_inputs() == 0 {
        return RegulatorCase {
            target,
            kp,
            kd,
            u_baseline: Vec::new(),
            u_compensated: Vec::new(),
            saturated: vec![0.0, 0.0],
            conditioning: 0.0,
            gain: 1.0,
            normal: 1.0,
        };
    }
    let solve = |law, k: &Matrix, g: &[f64], a: &Matrix, q: &[f64], qd: &[f64]| {
        let reg = Regulator::new(
            arm,
            law,
            outputs.clone(),
            target.clone(),
            kp.clone(),
            kd.clone(),
        )
        .expect("golden regulator");
        let ctl = reg.input(k, g, a, q, qd);
        let sat = !ctl.allocation.met(&ctl.b, SATURATION);
        (ctl.allocation.u, f64::from(u8::from(sat)))
    };
    let run = |law| solve(law, k, g, a, q, qd);
    // Every entry scaled by 1 ± ε, the sign from a fixed pattern per perturbation.
    const EPS: f64 = 1e-7;
    let nudge = |v: &[f64], salt: usize| -> Vec<f64> {
        v.iter()
            .enumerate()
            .map(|(i, x)| x * (1.0 + EPS * pattern(i, salt).signum()))
            .collect()
    };
    let nudge_m = |m: &Matrix, salt: usize| -> Matrix {
        m.iter()
            .enumerate()
            .map(|(r, row)| nudge(row, salt * 31 + r))
            .collect()
    };
    // The smaller of M Mᵀ and Mᵀ M (M = S A): the other one is singular when M is not
    // square. Its eigenvalue ratio says how well posed the allocation is, and its
    // inverse is what the normal equations' rounding is magnified by.
    let m = crate::control::s_times(&s, a);
    let (rows, cols) = (m.len(), m.first().map_or(0, Vec::len));
    let gram: Vec<Vec<f64>> = if rows <= cols {
        m.iter()
            .map(|x| {
                m.iter()
                    .map(|y| x.iter().zip(y).map(|(p, q)| p * q).sum())
                    .collect()
            })
            .collect()
    } else {
        (0..cols)
            .map(|i| {
                (0..cols)
                    .map(|j| m.iter().map(|r| r[i] * r[j]).sum())
                    .collect()
            })
            .collect()
    };
    let eig = crate::linalg::symmetric_eigenvalues(&gram);
    let conditioning = match (eig.first(), eig.last()) {
        (Some(&lo), Some(&hi)) if hi > 0.0 => lo.max(0.0) / hi,
        _ => 0.0,
    };
    // The allocation's regularisation bounds it.
    let normal = (1.0 / conditioning.max(crate::allocation::REGULARISATION)).max(1.0);
    let (u_baseline, sb) = run(Law::Baseline);
    let (u_compensated, sc) = run(Law::Compensated);
    let mut gain = 1.0f64;
    for (law, u0) in [
        (Law::Baseline, &u_baseline),
        (Law::Compensated, &u_compensated),
    ] {
        let size = u0.iter().fold(0.0f64, |m, v| m.max(v.abs()));
        for salt in 0..3 {
            let (u1, _) = solve(
                law,
                &nudge_m(k, salt),
                &nudge(g, salt + 7),
                &nudge_m(a, salt + 11),
                &nudge(q, salt + 13),
                &nudge(qd, salt + 17),
            );
            for (x, y) in u0.iter().zip(&u1) {
                let scale = x.abs() + size;
                if scale > 0.0 {
                    gain = gain.max((x - y).abs() / (EPS * scale));
                }
            }
        }
    }
    RegulatorCase {
        target,
        kp,
        kd,
        u_baseline,
        u_compensated,
        saturated: vec![sb, sc],
        conditioning,
        gain,
        normal,
    }
}

/// One test state.
pub struct State {
    pub label: String,
    pub q: Vec<f64>,
    pub qd: Vec<f64>,
    pub u: Vec<f64>,
}

/// The states every shipped test checks (and `verify` measures): the configurations
/// with fixed, irregular velocities and inputs.
pub fn states(arm: &Arm) -> Vec<State> {
    let (n, k) = (arm.n_coords(), arm.n_inputs());
    configurations(arm)
        .into_iter()
        .enumerate()
        .map(|(c, (label, q))| State {
            label,
            q,
            qd: (0..n).map(|i| 0.7 * pattern(i, c + 5)).collect(),
            u: (0..k).map(|i| 0.05 * pattern(i, c + 9)).collect(),
        })
        .collect()
}

impl Golden {
    /// The golden values of `arm`; an error when the reference finds no equilibrium of
    /// the arm even under gravity alone (an arm too soft to hold itself).
    pub fn compute(model: &crate::derive::Model) -> Result<Golden, String> {
        let arm = &model.arm;
        // The derived model only starts the equilibrium solves (see reference_equilibrium).
        let fast = crate::statics::Derived(crate::evaluate::Evaluator::new(model));
        let reference = Reference::new(arm, Kinematics::Truncated(arm.expansion_order));
        let n = arm.n_coords();
        let k = arm.n_inputs();
        let mut labels = Vec::new();
        let h = default_outputs(arm).len();
        let np = crate::params::ParamLayout::of(arm).len();
        let ny = crate::params::ParamLayout::of(arm).linear_len();
        let names: [(&'static str, usize); 54] = [
            ("q", n),
            ("qd", n),
            ("u", k),
            ("B", n * n),
            ("C", n * n),
            ("G", n),
            ("K", n * n),
            ("D", n * n),
            ("A", n * k),
            ("J", 3 * n),
            ("T", 1),
            ("V", 1),
            ("rhs", n),
            ("pose", arm.segments.len() * SIGMAS.len() * 3),
            ("Bnorm", 1),
            // The smallest pivot of B's Cholesky factor relative to its diagonal entry,
            // what forward dynamics compares with NAME_PIVOT_FLOOR.
            ("Bpivot", 1),
            // Statics: ∂G/∂q, the residual K q + G − A u and its Jacobian at (q, u).
            ("dG", n * n),
            ("R", n),
            ("Js", n * n),
            // An equilibrium: its inputs, shape and stability.
            ("ueq", k),
            ("qeq", n),
            ("eqstable", 1),
            // How much the equilibrium's shape can move per unit of relative residual
            // (crate::statics::shape_gain).
            ("eqgain", 1),
            // Both regulators at (q, q̇): target, gains, inputs, and for each law
            // whether the limits kept it from its wanted force (1) or not (0).
            ("ytarget", h),
            ("kp", h),
            ("kd", h),
            ("ubase", k),
            ("ucomp", k),
            ("regsat", 2),
            // How well posed the allocation is: the smallest over the largest
            // eigenvalue of the smaller of S A (S A)ᵀ and (S A)ᵀ S A (single precision
            // cannot resolve small ones).
            ("regcond", 1),
            // How much the inputs move per unit of relative change in K, G, A, q, q̇:
            // the regulator checks scale their tolerance by it (RegulatorCase::gain).
            ("reggain", 1),
            ("regnormal", 1),
            // At the second parameter set `theta` (crate::params::test_values): the
            // reference evaluated on the arm with those values written in.
            ("theta", np),
            ("pB", n * n),
            ("pC", n * n),
            ("pG", n),
            ("pK", n * n),
            ("pD", n * n),
            ("pT", 1),
            ("pV", 1),
            ("prhs", n),
            ("pBnorm", 1),
            ("pBpivot", 1),
            ("pdG", n * n),
            ("pR", n),
            // The equilibrium under `ueq` (peqok 0: the reference found none, no check).
            ("peqok", 1),
            ("pqeq", n),
            ("peqgain", 1),
            // The compensated regulator and whether it saturates.
            ("pucomp", k),
            ("pregsat", 1),
            ("preggain", 1),
            ("pregnormal", 1),
            // The regressor at (q, q̇, q̈ = qddY): column k is the reference's
            // B q̈ + C q̇ + G + K q + D q̇ of the arm with every parameter zero but θ_k = 1.
            ("qddY", n),
            ("Y", n * ny),
        ];
        let theta = crate::params::test_values(arm);
        let theta_f64: Vec<f64> = theta
            .iter()
            .map(|v| v.to_f64().unwrap_or(f64::NAN))
            .collect();
        let arm_p = crate::params::apply(arm, &theta);
        let reference_p = Reference::new(&arm_p, Kinematics::Truncated(arm.expansion_order));
        let model_p = Quadrature(Reference::new(&arm_p, reference_p.kinematics()));
        let model_q = Quadrature(Reference::new(arm, reference.kinematics()));
        let fast_p =
            crate::statics::Derived(crate::evaluate::Evaluator::new(model).with_params(&theta_f64));
        let layout = crate::params::ParamLayout::of(arm);
        let unit_arms: Vec<Arm> = (0..ny)
            .map(|k| {
                let mut t: Vec<crate::exact::Q> = vec![crate::exact::int(0); layout.len()];
                t[k] = crate::exact::int(1);
                for c in 0..2 {
                    t[layout.index(crate::params::ParamKind::Gravity, c)] = arm.gravity[c].clone();
                }
                crate::params::apply(arm, &t)
            })
            .collect();
        let unit_refs: Vec<Reference> = unit_arms
            .iter()
            .map(|a| Reference::new(a, Kinematics::Truncated(arm.expansion_order)))
            .collect();
        let mut arrays: Vec<Array> = names
            .iter()
            .map(|&(name, len)| Array {
                name,
                len,
                values: Vec::new(),
            })
            .collect();
        for (c, state) in states(arm).into_iter().enumerate() {
            let State { label, q, qd, u } = state;
            let t = reference.terms(&q, &qd);
            let rhs = generalized_force(&t, &q, &qd, &u);
            let mut pose = Vec::new();
            for j in 0..arm.segments.len() {
                for &s in &SIGMAS {
                    pose.extend(reference.pose(&q, j, s));
                }
            }
            let bnorm =
                t.b.iter()
                    .map(|r| r.iter().map(|v| v.abs()).sum::<f64>())
                    .fold(0.0, f64::max);
            let st = reference.static_terms(&q);
            let residual: Vec<f64> = (0..n)
                .map(|i| {
                    (0..n).map(|x| t.k[i][x] * q[x]).sum::<f64>() + st.g[i]
                        - (0..k).map(|c| st.a[i][c] * u[c]).sum::<f64>()
                })
                .collect();
            let js: Vec<f64> = (0..n)
                .flat_map(|i| {
                    let (t, st, u) = (&t, &st, &u);
                    (0..n).map(move |x| {
                        t.k[i][x] + st.dg[i][x] - (0..k).map(|c| st.da[x][i][c] * u[c]).sum::<f64>()
                    })
                })
                .collect();
            let (ueq, qeq, stable) = static_case(arm, &fast, &reference, c, &u)?;
            let eqgain = shape_gain(&model_q, &qeq, &ueq).map_err(|e| e.to_string())?;
            let reg = regulator_case(arm, &t.k, &st.g, &st.a, &q, &qd, c);
            // The same at the second parameter set.
            let tp = reference_p.terms(&q, &qd);
            let rhs_p = generalized_force(&tp, &q, &qd, &u);
            let bnorm_p =
                tp.b.iter()
                    .map(|r| r.iter().map(|v| v.abs()).sum::<f64>())
                    .fold(0.0, f64::max);
            let stp = reference_p.static_terms(&q);
            let residual_p: Vec<f64> = (0..n)
                .map(|i| {
                    (0..n).map(|x| tp.k[i][x] * q[x]).sum::<f64>() + stp.g[i]
                        - (0..k).map(|c| stp.a[i][c] * u[c]).sum::<f64>()
                })
                .collect();
            let (peqok, pqeq) = match reference_equilibrium(&fast_p, &model_p, &ueq) {
                Ok(eq) => (1.0, eq.q),
                Err(_) => (0.0, vec![0.0; n]),
            };
            let peqgain = if peqok > 0.5 {
                shape_gain(&model_p, &pqeq, &ueq).map_err(|e| e.to_string())?
            } else {
                1.0
            };
            let reg_p = regulator_case(&arm_p, &tp.k, &stp.g, &stp.a, &q, &qd, c);
            let qdd_y: Vec<f64> = (0..n).map(|i| 3.0 * pattern(i, c + 17)).collect();
            let mut y = vec![0.0; n * ny];
            let unit_terms = reference.terms_of_variants(&unit_refs, &q, &qd);
            for (kk, t) in unit_terms.iter().enumerate() {
                for i in 0..n {
                    let mut f = t.g[i];
                    for l in 0..n {
                        f += t.b[i][l] * qdd_y[l]
                            + (t.c[i][l] + t.d[i][l]) * qd[l]
                            + t.k[i][l] * q[l];
                    }
                    y[i * ny + kk] = f;
                }
            }
            let values = [
                q.clone(),
                qd,
                u,
                flat(&t.b),
                flat(&t.c),
                t.g.clone(),
                flat(&t.k),
                flat(&t.d),
                flat(&t.a),
                flat(&t.tip_jacobian),
                vec![t.kinetic_energy],
                vec![t.potential_energy],
                rhs,
                pose,
                vec![bnorm],
                vec![relative_pivot(&t.b)],
                flat(&st.dg),
                residual,
                js,
                ueq,
                qeq,
                vec![f64::from(u8::from(stable))],
                vec![eqgain],
                reg.target,
                reg.kp,
                reg.kd,
                reg.u_baseline,
                reg.u_compensated,
                reg.saturated,
                vec![reg.conditioning],
                vec![reg.gain],
                vec![reg.normal],
                theta_f64.clone(),
                flat(&tp.b),
                flat(&tp.c),
                tp.g.clone(),
                flat(&tp.k),
                flat(&tp.d),
                vec![tp.kinetic_energy],
                vec![tp.potential_energy],
                rhs_p,
                vec![bnorm_p],
                vec![relative_pivot(&tp.b)],
                flat(&stp.dg),
                residual_p,
                vec![peqok],
                pqeq,
                vec![peqgain],
                reg_p.u_compensated,
                vec![reg_p.saturated[1]],
                vec![reg_p.gain],
                vec![reg_p.normal],
                qdd_y,
                y,
            ];
            for (a, v) in arrays.iter_mut().zip(values) {
                a.values.push(v);
            }
            labels.push(label);
        }
        // An arm without actuators has no regulator (nothing is emitted to test).
        if k == 0 {
            arrays.retain(|a| !REGULATOR_ARRAYS.contains(&a.name));
        }
        Ok(Golden { labels, arrays })
    }

    /// The names of [`SCALED`] this golden set holds.
    pub fn scaled(&self) -> impl Iterator<Item = &'static str> + '_ {
        SCALED
            .into_iter()
            .filter(|n| self.arrays.iter().any(|a| a.name == *n))
    }

    pub fn array(&self, name: &str) -> &Array {
        self.arrays
            .iter()
            .find(|a| a.name == name)
            .unwrap_or_else(|| panic!("no golden array {name}"))
    }

    /// Relative tolerance of the cross-checks at a precision.
    pub fn rtol(&self, precision: Precision) -> String {
        match precision {
            // 64 units of rounding (2^-52) of the quantity's scale: measured, every f64
            // check of the demo arms but the equilibrium passes at 1e-14 (45 units) in C
            // (-O2), so a loss of a few digits anywhere fails.
            Precision::F64 => "1.4e-14".into(),
            // 64 units of rounding of the quantity's scale: measured, every f32 check
            // but the equilibrium passes at 2e-6 (17 units) on the demo arms.
            Precision::F32 => "7.6e-6".into(),
        }
    }

    /// Why the tolerance is what it is, for the test file's comment.
    pub fn rtol_reason(&self, precision: Precision) -> &'static str {
        match precision {
            Precision::F64 => {
                "Double precision: 64 units of rounding (2^-52) of each quantity's scale (the \
                 golden values carry 15 digits). Forward dynamics is judged by its residual, a \
                 backward error that does not grow with the condition of B."
            }
            Precision::F32 => {
                "Single precision: 64 units of rounding (2^-23) of each quantity's scale. \
                 Forward dynamics is judged by its residual, a backward error that does not \
                 grow with the condition of B."
            }
        }
    }

    /// Tolerance of the equilibrium checks: ten times the solver's relative residual.
    pub fn rtol_equilibrium(&self, precision: Precision) -> &'static str {
        match precision {
            Precision::F64 => "1e-9",
            Precision::F32 => "1e-4",
        }
    }

    /// Four units of rounding: the relative residual an equilibrium solve in this
    /// precision resolves, which the checks multiply by the state's `eqgain`.
    pub fn eq_rounding(&self, precision: Precision) -> &'static str {
        match precision {
            Precision::F64 => "4.4e-16",
            Precision::F32 => "2.4e-7",
        }
    }

    /// Absolute floor per checked quantity: the largest magnitude of that quantity
    /// over all configurations (times the relative tolerance in the tests), so that
    /// entries that vanish (C at q = 0) are judged against the quantity's scale.
    pub fn scale(&self, name: &str) -> f64 {
        self.array(name)
            .values
            .iter()
            .flatten()
            .fold(0.0f64, |m, v| m.max(v.abs()))
            .max(f64::MIN_POSITIVE)
    }

    /// Values of one case as literals.
    pub fn literals(&self, name: &str, case: usize) -> Vec<String> {
        let a = self.array(name);
        if a.len == 0 {
            return vec!["0.0".into()];
        }
        a.values[case].iter().map(|v| golden_literal(*v)).collect()
    }

    /// The golden data as C arrays (`static const double g_<name>[cases][len]`).
    pub fn c_data(&self, _precision: Precision) -> String {
        let mut out = String::new();
        let cases = self.labels.len();
        out.push_str(&format!("#define NCASES {cases}\n"));
        let labels: Vec<String> = self.labels.iter().map(|l| format!("\"{l}\"")).collect();
        out.push_str(&format!(
            "static const char *const case_label[NCASES] = {{\n{}\n}};\n",
            super::c::wrap_list(&labels, 4)
        ));
        for a in &self.arrays {
            out.push_str(&format!(
                "static const double g_{}[NCASES][{}] = {{\n",
                a.name,
                a.len.max(1)
            ));
            for c in 0..cases {
                out.push_str(&format!(
                    "    {{\n{}\n    }},\n",
                    super::c::wrap_list(&self.literals(a.name, c), 8)
                ));
            }
            out.push_str("};\n");
        }
        for name in self.scaled() {
            out.push_str(&format!(
                "static const double scale_{name} = {};\n",
                golden_literal(self.scale(name))
            ));
        }
        out
    }
}
