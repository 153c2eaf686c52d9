//! Derivation time and program size (run with `cargo bench --bench derive`).
//!
//! Figures for the project's speed goals: the two-segment degree-2 order-4 demo should
//! derive in under a second in release, a three-segment degree-3 order-6 arm in under
//! ten. Also prints the accuracy of the derived C (Coriolis) against the quadrature
//! reference at `a = 0.9`, where a closed form with powers of `1/a` loses digits.

use arcwright::arm::{parse_arm_file, parse_arm_str, Arm};
use arcwright::derive::derive;
use arcwright::evaluate::{main_roots, Evaluator};
use arcwright::reference::{Kinematics, Reference};
use std::path::Path;
use std::time::Instant;

const THREE_SEGMENTS: &str = r#"
name = "bench_three"
gravity = [0.0, -9.81]
expansion_order = 6
[[segment]]
length = 0.1
curvature_degree = 3
density = 0.3
bending_stiffness = 0.01
[[segment]]
length = 0.1
curvature_degree = 3
density = 0.25
bending_stiffness = 0.008
[[segment]]
length = 0.08
curvature_degree = 3
density = 0.2
bending_stiffness = 0.006
"#;

fn time_derive(label: &str, arm: &Arm, runs: usize) {
    let mut best = f64::INFINITY;
    let mut nodes = 0;
    let mut ops = 0;
    for _ in 0..runs {
        let t = Instant::now();
        let model = derive(arm);
        best = best.min(t.elapsed().as_secs_f64());
        nodes = model.program.len();
        let c = model.program.count_ops(&main_roots(&model));
        ops = c.adds + c.muls + c.negs;
    }
    println!(
        "{label:<44} derive {best:>8.3} s   program {nodes:>8} nodes, {ops:>8} ops (unoptimised)"
    );
}

fn coriolis_digits(arm: &Arm) {
    let model = derive(arm);
    let ev = Evaluator::new(&model);
    let rf = Reference::new(arm, Kinematics::Truncated(arm.expansion_order));
    let n = arm.n_coords();
    let l0 = 0.3;
    let mut q = vec![0.0; n];
    q[0] = 0.9 / l0;
    q[1] = 1.3;
    let qd: Vec<f64> = (0..n).map(|i| 0.7 - 0.3 * i as f64).collect();
    let (cm, cr) = (ev.terms(&q, &qd).c, rf.coriolis(&q, &qd));
    let mut worst: f64 = 0.0;
    for (rm, rr) in cm.iter().zip(&cr) {
        for (a, b) in rm.iter().zip(rr) {
            worst = worst.max((a - b).abs() / b.abs().max(1e-300));
        }
    }
    println!("single segment, degree {} order {}: worst entrywise relative error of C at a = 0.9: {worst:.1e}", arm.segments[0].curvature_degree, arm.expansion_order);
}

fn main() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).parent().unwrap();
    let demo = parse_arm_file(&root.join("examples/reach_arm.toml"))
        .unwrap()
        .0;
    time_derive("reach_arm (2 segments, degree 2, order 4)", &demo, 5);
    let taper = parse_arm_file(&root.join("examples/hanging_taper.toml"))
        .unwrap()
        .0;
    time_derive("hanging_taper (3 segments, tapered)", &taper, 3);
    let three = parse_arm_str(THREE_SEGMENTS, "bench").unwrap();
    time_derive("3 segments, degree 3, order 6", &three, 1);
    for (degree, order) in [(1, 2), (2, 2)] {
        let text = format!(
            "name = \"one\"\ngravity = [0.0, -9.81]\nexpansion_order = {order}\n[[segment]]\nlength = 0.3\ncurvature_degree = {degree}\ndensity = 0.5\nbending_stiffness = 0.02\n"
        );
        let arm = parse_arm_str(&text, "bench").unwrap();
        time_derive(
            &format!("1 segment, degree {degree}, order {order}"),
            &arm,
            5,
        );
        coriolis_digits(&arm);
    }
}
