//! Physics that no code in this project wrote: closed-form and handbook results the
//! model must reproduce, each with its source named beside the value.

#[path = "common/mod.rs"]
mod common;

use arcwright::derive::{derive, derive_statics};
use arcwright::dynamics::forward_dynamics;
use arcwright::evaluate::Evaluator;
use arcwright::reference::{Kinematics, Reference};
use arcwright::statics::{equilibrium, Derived, Options, Quadrature};
use common::*;

fn uniform_segment(degree: u32, order: u32, extra: &str) -> String {
    format!(
        r#"
name = "probe"
expansion_order = {order}
{extra}
[[segment]]
length = 0.25
curvature_degree = {degree}
density = 0.4
bending_stiffness = 0.03
"#
    )
}

/// Constant curvature κ bends a segment into a circular arc:
/// `x = sin(κs)/κ`, `y = (1 − cos(κs))/κ`, angle `κs` (circular-arc kinematics, common
/// practice). Constant-curvature segments are exact at every order.
#[test]
fn constant_curvature_is_a_circular_arc() {
    for order in [0, 1, 4] {
        let arm = arm_from(&uniform_segment(0, order, ""));
        let model = derive(&arm);
        let ev = Evaluator::new(&model);
        for kappa in [0.0, 1e-9, -3.0, 12.5, 3.0 * std::f64::consts::PI / 0.25] {
            for sigma in [0.0, 0.2, 0.7, 1.0] {
                let s = 0.25 * sigma;
                let want = if kappa == 0.0 {
                    [s, 0.0, 0.0]
                } else {
                    // 1 − cos x = 2 sin²(x/2), without cancellation near κ = 0
                    let half = (0.5 * kappa * s).sin();
                    [
                        (kappa * s).sin() / kappa,
                        2.0 * half * half / kappa,
                        kappa * s,
                    ]
                };
                let got = ev.pose(&[kappa], 0, sigma);
                for k in 0..3 {
                    assert!(
                        (got[k] - want[k]).abs() < 1e-15,
                        "κ = {kappa}, σ = {sigma}, N = {order}: {got:?} vs {want:?}"
                    );
                }
            }
        }
    }
}

/// The linearised single-segment model is a Ritz discretisation of the clamped-free
/// Euler–Bernoulli beam with polynomial curvature shapes: its frequencies approach
/// `ω_n = (β_n L)² √(EI / (ρ L⁴))` from above as the degree rises. `β_n L` are the roots
/// of `1 + cos βL cosh βL = 0` (handbook values, e.g. Blevins, *Formulas for Natural
/// Frequency and Mode Shape*, Table 8-1; recomputed with mpmath 1.3.0 and SciPy 1.17.1
/// in tests/outside/beam_frequencies.py).
#[test]
fn clamped_free_beam_frequencies_are_the_ritz_limit() {
    let roots = outside_json("beam_frequencies.json");
    let beta: Vec<f64> = (0..2)
        .map(|i| roots["roots"][i]["beta_L"].as_f64().unwrap())
        .collect();
    let (l, rho, ei) = (0.25_f64, 0.4_f64, 0.03_f64);
    let omega: Vec<f64> = beta
        .iter()
        .map(|b| b * b * (ei / (rho * l.powi(4))).sqrt())
        .collect();
    let mut prev = [f64::INFINITY; 2];
    let mut last_err = [0.0; 2];
    for degree in 1..=6 {
        let arm = arm_from(&uniform_segment(degree, 1, ""));
        let model = derive(&arm);
        let t =
            Evaluator::new(&model).terms(&vec![0.0; arm.n_coords()], &vec![0.0; arm.n_coords()]);
        let w2 = generalized_eigenvalues(&t.k, &t.b);
        for k in 0..2 {
            let w = w2[k].sqrt();
            assert!(
                w >= omega[k] * (1.0 - 1e-9),
                "degree {degree}: ω_{} = {w} below the exact {}",
                k + 1,
                omega[k]
            );
            assert!(
                w <= prev[k] * (1.0 + 1e-9),
                "degree {degree}: ω_{} rose",
                k + 1
            );
            prev[k] = w;
            last_err[k] = (w - omega[k]) / omega[k];
        }
        println!(
            "degree {degree}: ω1 error {:.2e}, ω2 error {:.2e}",
            last_err[0], last_err[1]
        );
    }
    assert!(last_err[0] < 1e-9, "ω1 error at degree 6: {}", last_err[0]);
    assert!(last_err[1] < 1e-5, "ω2 error at degree 6: {}", last_err[1]);
}

/// Eigenvalues of `K v = λ B v` through `B = LLᵀ`, `L⁻¹ K L⁻ᵀ`.
fn generalized_eigenvalues(k: &[Vec<f64>], b: &[Vec<f64>]) -> Vec<f64> {
    let n = k.len();
    let mut l = vec![vec![0.0; n]; n];
    for i in 0..n {
        for j in 0..=i {
            let s: f64 = b[i][j] - (0..j).map(|m| l[i][m] * l[j][m]).sum::<f64>();
            l[i][j] = if i == j { s.sqrt() } else { s / l[j][j] };
        }
    }
    // X = L⁻¹ K, then M = X L⁻ᵀ = L⁻¹ Xᵀ (K symmetric)
    let lsolve = |rhs: &[f64]| -> Vec<f64> {
        let mut y = vec![0.0; n];
        for i in 0..n {
            y[i] = (rhs[i] - (0..i).map(|m| l[i][m] * y[m]).sum::<f64>()) / l[i][i];
        }
        y
    };
    let cols: Vec<Vec<f64>> = (0..n)
        .map(|c| lsolve(&(0..n).map(|r| k[r][c]).collect::<Vec<_>>()))
        .collect();
    // cols[c] = column c of L⁻¹K; M = L⁻¹ (L⁻¹K)ᵀ
    let m_cols: Vec<Vec<f64>> = (0..n)
        .map(|c| lsolve(&(0..n).map(|r| cols[r][c]).collect::<Vec<_>>()))
        .collect();
    let m: Vec<Vec<f64>> = (0..n)
        .map(|r| {
            (0..n)
                .map(|c| 0.5 * (m_cols[c][r] + m_cols[r][c]))
                .collect()
        })
        .collect();
    symmetric_eigenvalues(m)
}

/// Small deflection of a cantilever: tip force `P` gives `δ = P L³ / (3 EI)`, its own
/// weight `w = ρ g` gives `δ = w L⁴ / (8 EI)` (Euler–Bernoulli beam theory; e.g. Gere &
/// Goodno, *Mechanics of Materials*, Appendix G, cases 1 and 4; quoted from memory). The
/// curvature of the first is linear in s and of the second quadratic, so curvature
/// degrees 1 and 2 represent them exactly and the linearised model must match to
/// rounding.
#[test]
fn small_deflection_cantilever_formulas() {
    let (l, rho, ei) = (0.25_f64, 0.4_f64, 0.03_f64);
    // Tip force P along +y, linearised at rest: K q = A(0) u.
    let arm = arm_from(&format!(
        "{}\n[[actuator]]\nkind = \"end_force\"\nsegment = 1\n",
        uniform_segment(1, 2, "")
    ));
    let model = derive(&arm);
    let t = Evaluator::new(&model).terms(&[0.0, 0.0], &[0.0, 0.0]);
    let p = 1e-3;
    let rhs: Vec<f64> = (0..2).map(|i| t.a[i][1] * p).collect();
    let q = solve(t.k.clone(), rhs);
    let tip_y: f64 = (0..2).map(|i| t.tip_jacobian[1][i] * q[i]).sum();
    let want = p * l.powi(3) / (3.0 * ei);
    assert!(
        (tip_y - want).abs() < 1e-12 * want,
        "tip force: {tip_y} vs {want}"
    );

    // Own weight, horizontal arm: K q = −G(0).
    let g = 9.81;
    let arm = arm_from(&uniform_segment(2, 2, "gravity = [0.0, -9.81]"));
    let model = derive(&arm);
    let t = Evaluator::new(&model).terms(&[0.0; 3], &[0.0; 3]);
    let q = solve(t.k.clone(), t.g.iter().map(|x| -x).collect());
    let tip_y: f64 = (0..3).map(|i| t.tip_jacobian[1][i] * q[i]).sum();
    let want = -rho * g * l.powi(4) / (8.0 * ei);
    assert!(
        (tip_y - want).abs() < 1e-12 * want.abs(),
        "own weight: {tip_y} vs {want}"
    );

    // The same two through the nonlinear static solver at a small load, where the
    // handbook's linear theory holds to the square of the deflection: 1e-6 relative.
    let tiny = 1e-4; // P L²/EI and w L³/EI
    let arm = arm_from(&format!(
        "{}\n[[actuator]]\nkind = \"end_force\"\nsegment = 1\n",
        uniform_segment(1, 4, "")
    ));
    let p = tiny * ei / (l * l);
    let model = derive_statics(&arm);
    let eq = equilibrium(
        &Derived(Evaluator::new(&model)),
        &[0.0, p],
        &Options::default(),
    )
    .expect("an equilibrium");
    let want = p * l.powi(3) / (3.0 * ei);
    assert!(
        (eq.tip_pose[1] - want).abs() < 1e-6 * want,
        "statics, tip force: {} vs {want}",
        eq.tip_pose[1]
    );
    let w = tiny * ei / l.powi(3);
    let g = w / rho;
    let arm = arm_from(&uniform_segment(2, 4, &format!("gravity = [0.0, {}]", -g)));
    let model = derive_statics(&arm);
    let eq = equilibrium(&Derived(Evaluator::new(&model)), &[], &Options::default())
        .expect("an equilibrium");
    let want = -w * l.powi(4) / (8.0 * ei);
    assert!(
        (eq.tip_pose[1] - want).abs() < 1e-6 * want.abs(),
        "statics, own weight: {} vs {want}",
        eq.tip_pose[1]
    );
}

/// Large deflection of a cantilever under a tip force of fixed direction perpendicular
/// to its axis: the elastica, solved by elliptic integrals (mpmath 1.3.0, cross-checked
/// with SciPy 1.17.1 `ellipkinc` and `solve_ivp`, tests/outside/elastica.py). The static
/// solver (`arcwright statics --exact`: Newton with load continuation on the exact
/// kinematics) at curvature degree 6 must reach it to 1e-6 at P L²/EI = 1, 2 and 5,
/// and the derived order-N model at degree 3 must approach it as the order rises.
#[test]
fn large_deflection_elastica() {
    let data = outside_json("elastica.json");
    let (l, ei) = (0.25_f64, 0.03_f64);
    let with_tip_force = |degree: u32, order: u32| {
        arm_from(&format!(
            "{}\n[[actuator]]\nkind = \"end_force\"\nsegment = 1\n",
            uniform_segment(degree, order, "")
        ))
    };
    for case in data["cases"].as_array().unwrap() {
        let alpha = case["alpha"].as_f64().unwrap();
        let x = case["x_tip_over_L"]["value"].as_f64().unwrap();
        let y = case["y_tip_over_L"]["value"].as_f64().unwrap();
        let theta = case["theta_tip"]["value"].as_f64().unwrap();
        let p = alpha * ei / (l * l);
        let arm = with_tip_force(6, 0);
        let model = Quadrature(Reference::new(&arm, Kinematics::Exact));
        let eq = equilibrium(&model, &[0.0, p], &Options::default()).expect("an equilibrium");
        let tip = eq.tip_pose;
        let err = ((tip[0] / l - x).abs())
            .max((tip[1] / l - y).abs())
            .max((tip[2] - theta).abs());
        println!(
            "α = {alpha}: statics, exact kinematics, degree 6: tip error {err:.2e} \
             ({} Newton iterations, {} load steps)",
            eq.iterations, eq.load_steps
        );
        assert!(
            eq.stable,
            "α = {alpha}: the elastica under a tip force is stable"
        );
        if [1.0, 2.0, 5.0].contains(&alpha) {
            assert!(
                err < 1e-6,
                "α = {alpha}: tip {:?} vs ({x}, {y}, {theta})",
                [tip[0] / l, tip[1] / l, tip[2]]
            );
        }
    }
    // The derived model converges with the order (moderate load, degree 3).
    let case = &data["cases"][2];
    let alpha = case["alpha"].as_f64().unwrap();
    let y = case["y_tip_over_L"]["value"].as_f64().unwrap();
    let p = alpha * ei / (l * l);
    let mut errs = Vec::new();
    for order in [2, 4, 6] {
        let model = derive_statics(&with_tip_force(3, order));
        let eq = equilibrium(
            &Derived(Evaluator::new(&model)),
            &[0.0, p],
            &Options::default(),
        )
        .expect("an equilibrium");
        errs.push((eq.tip_pose[1] / l - y).abs());
    }
    println!("α = {alpha}, degree 3, orders 2/4/6: tip y errors {errs:?}");
    assert!(errs[0] > errs[1] && errs[1] > errs[2], "{errs:?}");
    assert!(errs[2] < 1e-3, "{errs:?}");
}

/// With no damping and no input, the total energy `T + U` is conserved by the exact
/// dynamics (Lagrangian mechanics, common practice); a fourth-order Runge–Kutta run of
/// the derived `q̈` must keep it to its own truncation error.
#[test]
fn undamped_unforced_motion_conserves_energy() {
    let arm = arm_from(
        r#"
name = "swing"
gravity = [0.0, -9.81]
expansion_order = 3
[[segment]]
length = 0.2
curvature_degree = 1
density = 0.3
bending_stiffness = 0.004
[[segment]]
length = 0.15
curvature_degree = 0
density = 0.2
bending_stiffness = 0.003
[payload]
mass = 0.005
"#,
    );
    let model = derive(&arm);
    let ev = Evaluator::new(&model);
    let n = arm.n_coords();
    let f = |x: &[f64]| -> Vec<f64> {
        let (q, qd) = x.split_at(n);
        let t = ev.terms(q, qd);
        let qdd = forward_dynamics(&t, q, qd, &[]).unwrap();
        qd.iter().copied().chain(qdd).collect()
    };
    let energy = |x: &[f64]| {
        let t = ev.terms(&x[..n], &x[n..]);
        t.kinetic_energy + t.potential_energy
    };
    let mut x = vec![12.0, -30.0, 8.0, 1.0, -2.0, 3.0];
    let e0 = energy(&x);
    let dt = 2e-5;
    let mut drift: f64 = 0.0;
    for _ in 0..2000 {
        let k1 = f(&x);
        let k2 = f(&x
            .iter()
            .zip(&k1)
            .map(|(a, b)| a + 0.5 * dt * b)
            .collect::<Vec<_>>());
        let k3 = f(&x
            .iter()
            .zip(&k2)
            .map(|(a, b)| a + 0.5 * dt * b)
            .collect::<Vec<_>>());
        let k4 = f(&x
            .iter()
            .zip(&k3)
            .map(|(a, b)| a + dt * b)
            .collect::<Vec<_>>());
        for i in 0..2 * n {
            x[i] += dt / 6.0 * (k1[i] + 2.0 * k2[i] + 2.0 * k3[i] + k4[i]);
        }
        drift = drift.max((energy(&x) - e0).abs() / e0.abs());
    }
    println!("relative energy drift over 0.04 s: {drift:.2e}");
    assert!(drift < 1e-8, "energy drift {drift:.2e}");
}

/// `Ḃ − 2C` is skew-symmetric when `C` comes from Christoffel symbols of the first kind
/// (common practice; the passivity property used by PD+ and adaptive control).
#[test]
fn bdot_minus_two_c_is_skew() {
    let arm = demo_arm("reach_arm");
    let model = derive(&arm);
    let ev = Evaluator::new(&model);
    let mut rng = rng(11);
    for _ in 0..10 {
        let q = random_q(&arm, &mut rng, 1.0);
        let qd = random_qd(arm.n_coords(), &mut rng);
        // Ḃ by a Richardson-extrapolated central difference along q̇.
        let b_at = |h: f64| {
            let qp: Vec<f64> = q.iter().zip(&qd).map(|(a, b)| a + h * b).collect();
            ev.terms(&qp, &qd).b
        };
        let diff = |h: f64| -> Vec<Vec<f64>> {
            let (p, m) = (b_at(h), b_at(-h));
            p.iter()
                .zip(&m)
                .map(|(rp, rm)| {
                    rp.iter()
                        .zip(rm)
                        .map(|(a, b)| (a - b) / (2.0 * h))
                        .collect()
                })
                .collect()
        };
        let h = 1e-4;
        let (d1, d2) = (diff(h), diff(h / 2.0));
        let bdot: Vec<Vec<f64>> = d1
            .iter()
            .zip(&d2)
            .map(|(r1, r2)| {
                r1.iter()
                    .zip(r2)
                    .map(|(a, b)| (4.0 * b - a) / 3.0)
                    .collect()
            })
            .collect();
        let c = ev.terms(&q, &qd).c;
        let n = arm.n_coords();
        let s: Vec<Vec<f64>> = (0..n)
            .map(|i| (0..n).map(|k| bdot[i][k] - 2.0 * c[i][k]).collect())
            .collect();
        let sym: Vec<Vec<f64>> = (0..n)
            .map(|i| (0..n).map(|k| s[i][k] + s[k][i]).collect())
            .collect();
        let ratio = frob(&sym) / frob(&bdot);
        assert!(ratio < 1e-7, "‖(Ḃ−2C) + (Ḃ−2C)ᵀ‖ / ‖Ḃ‖ = {ratio:.2e}");
    }
}

/// One small case derived independently with SymPy 1.14 straight from MODEL.md's
/// definitions (tests/outside/sympy_segment.py): one segment of degree 1 at order 2
/// with a tip mass under gravity.
#[test]
fn agrees_with_an_independent_sympy_derivation() {
    let data = outside_json("sympy_segment.json");
    let arm = arm_from(
        r#"
name = "sympy_case"
gravity = [0, -9.81]
expansion_order = 2
[[segment]]
length = 0.3
curvature_degree = 1
density = 0.5
bending_stiffness = 0.02
[payload]
mass = 0.05
"#,
    );
    let model = derive(&arm);
    let ev = Evaluator::new(&model);
    let num = |v: &serde_json::Value| v.as_str().unwrap().parse::<f64>().unwrap();
    let mat = |v: &serde_json::Value| -> Vec<Vec<f64>> {
        v.as_array()
            .unwrap()
            .iter()
            .map(|r| r.as_array().unwrap().iter().map(num).collect())
            .collect()
    };
    for state in data["states"].as_array().unwrap() {
        let q: Vec<f64> = state["q"].as_array().unwrap().iter().map(num).collect();
        let qd: Vec<f64> = state["qdot"].as_array().unwrap().iter().map(num).collect();
        let t = ev.terms(&q, &qd);
        let b = mat(&state["B"]["value"]);
        let c = mat(&state["C"]["value"]);
        let g: Vec<f64> = state["G"]["value"]
            .as_array()
            .unwrap()
            .iter()
            .map(num)
            .collect();
        let tip: Vec<f64> = state["tip"]["value"]
            .as_array()
            .unwrap()
            .iter()
            .map(num)
            .collect();
        assert!(
            rel_err(&t.b, &b, 0.0) < 1e-13,
            "B at {q:?}: {:?} vs {b:?}",
            t.b
        );
        assert!(
            rel_err(&t.c, &c, 1e-12 * frob(&b)) < 1e-12,
            "C at {q:?}: {:?} vs {c:?}",
            t.c
        );
        assert!(
            rel_err_vec(&t.g, &g, 1e-12) < 1e-13,
            "G at {q:?}: {:?} vs {g:?}",
            t.g
        );
        assert!(
            rel_err_vec(&t.tip_pose[..2], &tip, 1e-12) < 1e-13,
            "tip at {q:?}"
        );
    }
    // K is exact: EI L/(i+k+1) (MODEL.md), and SymPy's exact fractions say the same.
    let t = ev.terms(&[0.0, 0.0], &[0.0, 0.0]);
    let fraction = |v: &serde_json::Value| {
        let (a, b) = v.as_str().unwrap().split_once('/').unwrap();
        a.parse::<f64>().unwrap() / b.parse::<f64>().unwrap()
    };
    for i in 0..2 {
        for k in 0..2 {
            let want = fraction(&data["K"]["value"][i][k]);
            assert!(
                (t.k[i][k] - want).abs() <= 1e-16 * want,
                "K[{i}][{k}]: {} vs {want}",
                t.k[i][k]
            );
        }
    }
}

/// The order-N model approaches the exact kinematics as N rises (the truncation error
/// of `e^{iδ}`'s Taylor series falls like `|δ|^{N+1}/(N+1)!`).
#[test]
fn truncation_error_falls_with_order() {
    let arm = demo_arm("reach_arm");
    let exact = Reference::new(&arm, Kinematics::Exact);
    let q = vec![20.0, -30.0, 25.0, -10.0, 40.0, -35.0];
    let qd = vec![0.0; 6];
    let te = exact.terms(&q, &qd);
    let mut prev = f64::INFINITY;
    for order in 0..=8 {
        let model = derive(&arm.with_order(order));
        let t = Evaluator::new(&model).terms(&q, &qd);
        let err = rel_err(&t.b, &te.b, 0.0)
            .max(rel_err_vec(&t.tip_pose, &te.tip_pose, 0.0))
            .max(rel_err_vec(&t.g, &te.g, 0.0));
        println!("order {order}: truncation error {err:.2e}");
        assert!(
            err < prev,
            "order {order}: {err:.2e} did not fall below {prev:.2e}"
        );
        prev = err;
    }
    assert!(prev < 1e-6, "order 8: {prev:.2e}");
}
