//! Optimiser benchmark (not a timed test): op counts before and after, per function
//! and for B+C+G together, and the optimisation time, on the demo arm and two
//! single-segment arms.
//!
//! Run with `cargo bench -p arcwright --bench optimise [-- PATH.toml ...]`.

use arcwright::arm::{parse_arm_file, parse_arm_str};
use arcwright::derive::derive;
use arcwright::ir::OpCount;
use arcwright::optimise::{optimise, Limits};
use std::time::Instant;

fn single(degree: u32, order: u32) -> String {
    format!(
        "name = \"single_d{degree}_o{order}\"\ngravity = [0.0, -9.81]\nexpansion_order = {order}\n\
         [[segment]]\nlength = 0.12\ncurvature_degree = {degree}\ndensity = 0.3\nbending_stiffness = 0.012\n"
    )
}

fn total(c: OpCount) -> usize {
    c.adds + c.muls + c.negs
}

fn run(label: &str, arm: &arcwright::arm::Arm) {
    let t = Instant::now();
    let model = derive(arm);
    let derive_time = t.elapsed();
    let t = Instant::now();
    let (opt, report) = optimise(&model, &Limits::default());
    let opt_time = t.elapsed();
    let bcg = |m: &arcwright::derive::Model| {
        let mut roots: Vec<_> = m.inertia.iter().flatten().copied().collect();
        roots.extend(m.coriolis.iter().flatten().copied());
        roots.extend(m.gravity.iter().copied());
        m.program.count_ops(&roots)
    };
    let (b, a) = (bcg(&model), bcg(&opt));
    println!(
        "== {label}: {} nodes, derived in {derive_time:.2?}",
        model.program.len()
    );
    println!(
        "B+C+G ops: {} (+{} *{} -{}) -> {} (+{} *{} -{}), {:.2}x, optimised in {opt_time:.2?}",
        total(b),
        b.adds,
        b.muls,
        b.negs,
        total(a),
        a.adds,
        a.muls,
        a.negs,
        total(b) as f64 / total(a).max(1) as f64
    );
    println!("{report}");
}

fn main() {
    let args: Vec<String> = std::env::args()
        .skip(1)
        .filter(|a| !a.starts_with("--"))
        .collect();
    if !args.is_empty() {
        for p in &args {
            let (arm, _) = parse_arm_file(std::path::Path::new(p)).expect("arm file");
            run(p, &arm);
        }
        return;
    }
    for (d, o) in [(1, 2), (2, 2)] {
        let arm = parse_arm_str(&single(d, o), "bench.toml").expect("arm");
        run(&format!("single segment, degree {d}, order {o}"), &arm);
    }
    let root = concat!(env!("CARGO_MANIFEST_DIR"), "/../examples/reach_arm.toml");
    let (arm, _) = parse_arm_file(std::path::Path::new(root)).expect("reach_arm.toml");
    run("examples/reach_arm.toml", &arm);
}
