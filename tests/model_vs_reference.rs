//! The derived model against the independent quadrature reference of the same order.
//!
//! Both evaluate MODEL.md's order-N truncated kinematics; the model through exact
//! algebra and Legendre moments, the reference by Gauss–Legendre quadrature with no
//! algebra. They must agree to near machine precision everywhere, including the
//! straight segment (a = 0) and the points where a closed form with powers of 1/a would
//! lose its digits.

#[path = "common/mod.rs"]
mod common;

use arcwright::derive::derive;
use arcwright::evaluate::Evaluator;
use arcwright::reference::{Kinematics, Reference};
use arcwright::terms::Terms;
use common::*;
use std::f64::consts::PI;

const TOL: f64 = 1e-10;

/// Worst relative error per quantity, with floors where a quantity can vanish: `C` is
/// zero at rest (mirror symmetry), so it is measured against `‖B‖·‖q̇‖`; energies
/// against the scale of their terms.
fn compare(m: &Terms, r: &Terms, qd: &[f64]) -> Vec<(&'static str, f64)> {
    let nb = frob(&r.b);
    let qd_norm = qd.iter().map(|x| x.abs()).sum::<f64>().max(1.0);
    vec![
        ("B", rel_err(&m.b, &r.b, 0.0)),
        ("C", rel_err(&m.c, &r.c, 1e-8 * nb * qd_norm)),
        ("G", rel_err_vec(&m.g, &r.g, 1e-12)),
        ("K", rel_err(&m.k, &r.k, 0.0)),
        ("D", rel_err(&m.d, &r.d, 1e-300)),
        ("A", rel_err(&m.a, &r.a, 1e-12)),
        ("tip_pose", rel_err_vec(&m.tip_pose, &r.tip_pose, 1e-12)),
        (
            "tip_jacobian",
            rel_err(&m.tip_jacobian, &r.tip_jacobian, 0.0),
        ),
        (
            "kinetic_energy",
            (m.kinetic_energy - r.kinetic_energy).abs() / (0.5 * nb * qd_norm * qd_norm),
        ),
        (
            "potential_energy",
            (m.potential_energy - r.potential_energy).abs() / r.potential_energy.abs().max(1e-9),
        ),
    ]
}

fn check_arm(name: &str, randoms: usize) {
    let arm = demo_arm(name);
    let model = derive(&arm);
    let ev = Evaluator::new(&model);
    let rf = Reference::new(&arm, Kinematics::Truncated(arm.expansion_order));
    let n = arm.n_coords();
    let mut rng = rng(0x5eed + name.len() as u64);
    let mut states: Vec<(String, Vec<f64>)> = vec![("q = 0".into(), vec![0.0; n])];
    for a in [0.0, 1e-9, -1e-9, PI, -PI, 3.0 * PI, -3.0 * PI] {
        for rest in [0.0, 0.4] {
            states.push((format!("a = {a}, higher = {rest}"), q_with_a(&arm, a, rest)));
        }
    }
    for i in 0..randoms {
        states.push((format!("random #{i}"), random_q(&arm, &mut rng, 1.0)));
    }
    let mut worst: Vec<(&str, f64, String)> = Vec::new();
    for (label, q) in &states {
        let qd = random_qd(n, &mut rng);
        let tm = ev.terms(q, &qd);
        let tr = rf.terms(q, &qd);
        for (what, e) in compare(&tm, &tr, &qd) {
            match worst.iter_mut().find(|w| w.0 == what) {
                Some(w) if w.1 < e => *w = (what, e, label.clone()),
                Some(_) => {}
                None => worst.push((what, e, label.clone())),
            }
        }
        for seg in 0..arm.segments.len() {
            for sigma in [0.0, 0.31, 1.0] {
                let pm = ev.pose(q, seg, sigma);
                let pr = rf.pose(q, seg, sigma);
                let e = rel_err_vec(&pm, &pr, 1e-12);
                assert!(
                    e < TOL,
                    "{name}: pose of segment {seg} at σ = {sigma}, {label}: {pm:?} vs {pr:?}"
                );
            }
        }
    }
    for (what, e, label) in &worst {
        println!("{name}: {what:>16} worst relative error {e:.2e} ({label})");
    }
    for (what, e, label) in &worst {
        assert!(*e < TOL, "{name}: {what} differs by {e:.2e} at {label}");
    }
}

#[test]
fn reach_arm_matches_reference() {
    check_arm("reach_arm", 200);
}

#[test]
fn hanging_taper_matches_reference() {
    check_arm("hanging_taper", 200);
}

#[test]
fn high_degree_and_order_match_reference() {
    // Degree 5 at order 7: powers of τ up to 43, where the monomial basis would have
    // lost most of its digits.
    let arm = arm_from(
        r#"
name = "deep"
gravity = [0.0, -9.81]
expansion_order = 7
[[segment]]
length = 0.2
curvature_degree = 5
density = [0.4, -0.1]
bending_stiffness = 0.02
rotary_inertia = 1e-5
[payload]
mass = 0.02
"#,
    );
    let model = derive(&arm);
    let ev = Evaluator::new(&model);
    let rf = Reference::new(&arm, Kinematics::Truncated(7));
    let mut rng = rng(7);
    for _ in 0..20 {
        let q = random_q(&arm, &mut rng, 0.8);
        let qd = random_qd(arm.n_coords(), &mut rng);
        for (what, e) in compare(&ev.terms(&q, &qd), &rf.terms(&q, &qd), &qd) {
            assert!(e < TOL, "{what}: {e:.2e} at q = {q:?}");
        }
    }
}
