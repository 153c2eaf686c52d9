use super::*;
use crate::derive::{derive, Model};
use crate::evaluate::Evaluator;
use crate::terms::Matrix;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

/// Two short segments (degree 1 and 2, order 2) with payload, tendon, moment and
/// end-force inputs: every kind of output, still fast to derive.
const ARM: &str = r#"
name = "opt_test"
gravity = [0.3, -9.81]
expansion_order = 2
[[segment]]
length = 0.12
curvature_degree = 1
density = [0.3, -0.1]
bending_stiffness = 0.012
rotary_inertia = 1e-5
damping = 2e-4
[[segment]]
length = 0.1
curvature_degree = 2
density = 0.25
bending_stiffness = 0.008
[payload]
mass = 0.01
rotary_inertia = 2e-7
[[actuator]]
kind = "tendon"
offset = 0.01
through_segment = 2
[[actuator]]
kind = "moment"
segment = 1
[[actuator]]
kind = "end_force"
segment = 2
"#;

fn model() -> Model {
    let arm = crate::arm::parse_arm_str(ARM, "opt_test.toml").expect("test arm");
    derive(&arm)
}

fn frob(m: &Matrix) -> f64 {
    m.iter().flatten().map(|x| x * x).sum::<f64>().sqrt()
}

fn diff(a: &Matrix, b: &Matrix) -> f64 {
    a.iter()
        .flatten()
        .zip(b.iter().flatten())
        .map(|(x, y)| (x - y) * (x - y))
        .sum::<f64>()
        .sqrt()
}

fn close(what: &str, a: &Matrix, b: &Matrix, floor: f64) {
    let d = diff(a, b);
    let scale = frob(b).max(floor).max(f64::MIN_POSITIVE);
    assert!(
        d <= 1e-12 * scale,
        "{what}: |Δ| = {d:e}, |·| = {:e}",
        frob(b)
    );
}

/// States: q = 0, and a_j = L_j q_{j,0} at 1e-9, ±π, ±3π, plus random ones.
fn states(m: &Model) -> Vec<(Vec<f64>, Vec<f64>)> {
    let arm = &m.arm;
    let mut rng = ChaCha8Rng::seed_from_u64(7);
    let mut out = vec![(vec![0.0; m.n], vec![0.0; m.n])];
    for a in [
        1e-9,
        std::f64::consts::PI,
        -std::f64::consts::PI,
        3.0 * std::f64::consts::PI,
        -3.0 * std::f64::consts::PI,
        0.0,
    ] {
        for _ in 0..2 {
            let mut q: Vec<f64> = (0..m.n).map(|_| rng.gen_range(-12.0..12.0)).collect();
            if a != 0.0 {
                for (j, s) in arm.segments.iter().enumerate() {
                    let l: f64 = num_traits::ToPrimitive::to_f64(&s.length).unwrap();
                    q[arm.coord_offset(j)] = a / l;
                }
            }
            let qd = (0..m.n).map(|_| rng.gen_range(-3.0..3.0)).collect();
            out.push((q, qd));
        }
    }
    out
}

fn assert_equivalent(orig: &Model, opt: &Model) {
    let (e0, e1) = (Evaluator::new(orig), Evaluator::new(opt));
    for (q, qd) in states(orig) {
        let (t0, t1) = (e0.terms(&q, &qd), e1.terms(&q, &qd));
        let nb = frob(&t0.b);
        close("B", &t1.b, &t0.b, 0.0);
        close("C", &t1.c, &t0.c, 1e-12 * nb);
        close("G", &vec![t1.g.clone()], &vec![t0.g.clone()], 0.0);
        close("K", &t1.k, &t0.k, 0.0);
        close("D", &t1.d, &t0.d, 0.0);
        close("A", &t1.a, &t0.a, 0.0);
        close(
            "tip pose",
            &vec![t1.tip_pose.to_vec()],
            &vec![t0.tip_pose.to_vec()],
            0.0,
        );
        close("tip Jacobian", &t1.tip_jacobian, &t0.tip_jacobian, 0.0);
        close(
            "kinetic energy",
            &vec![vec![t1.kinetic_energy]],
            &vec![vec![t0.kinetic_energy]],
            0.0,
        );
        close(
            "potential energy",
            &vec![vec![t1.potential_energy]],
            &vec![vec![t0.potential_energy]],
            0.0,
        );
        for j in 0..orig.arm.segments.len() {
            for sigma in [0.0, 0.37, 1.0] {
                let (p0, p1) = (e0.pose(&q, j, sigma), e1.pose(&q, j, sigma));
                close("pose", &vec![p1.to_vec()], &vec![p0.to_vec()], 0.0);
            }
        }
    }
}

#[test]
fn optimised_model_is_equivalent_and_leaner() {
    let m = model();
    let (o, report) = optimise(&m, &Limits::default());
    assert_equivalent(&m, &o);
    assert!(
        total_ops(report.total_after) < total_ops(report.total_before),
        "{report}"
    );
    // Every function is reported, none got more expensive than it was.
    assert_eq!(report.per_function.len(), 10 + m.pose.len());
    let text = report.to_string();
    assert!(
        text.contains("coriolis") && text.contains("limits hit"),
        "{text}"
    );
}

#[test]
fn output_is_deterministic() {
    let m = model();
    let (a, ra) = optimise(&m, &Limits::default());
    let (b, rb) = optimise(&m, &Limits::default());
    assert_eq!(a.program.nodes(), b.program.nodes());
    assert_eq!(a.inertia, b.inertia);
    assert_eq!(a.coriolis, b.coriolis);
    assert_eq!(a.gravity, b.gravity);
    assert_eq!(a.tip_jacobian, b.tip_jacobian);
    assert_eq!(a.pose, b.pose);
    assert_eq!(ra.total_after, rb.total_after);
}

#[test]
fn tiny_limits_still_give_a_correct_reported_result() {
    let m = model();
    let limits = Limits {
        max_nodes: 50,
        max_iterations: 1,
        time_limit: std::time::Duration::from_secs(60),
    };
    let (o, report) = optimise(&m, &limits);
    assert_equivalent(&m, &o);
    assert!(report.egraph.hit_node_limit > 0, "{report}");
    assert!(report.limits_hit());
    // A spent time budget skips the e-graph windows but keeps a correct result.
    let none = Limits {
        max_nodes: 50,
        max_iterations: 1,
        time_limit: std::time::Duration::ZERO,
    };
    let (o, report) = optimise(&m, &none);
    assert_equivalent(&m, &o);
    assert!(report.egraph.skipped_for_time > 0, "{report}");
    assert!(total_ops(report.total_after) <= total_ops(report.total_before));
}
