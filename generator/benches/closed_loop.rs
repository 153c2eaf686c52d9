//! Closed-loop simulation of the demo arm (examples/reach_arm.toml, order 4, the
//! compensated regulator on each segment's mean curvature, target (4, −3), Kp 0.005,
//! Kd 0.0005, rtol 1e-8): the stiff method against Dormand–Prince on the same run,
//! then the 10 s run the issue asks for with the stiff method alone. Steps and
//! evaluations are stable; seconds depend on the machine.

use arcwright::arm::parse_arm_file;
use arcwright::control::{default_outputs, Law, Regulator};
use arcwright::derive::derive;
use arcwright::dynamics::forward_dynamics;
use arcwright::evaluate::Evaluator;
use arcwright::integrate::{integrate, Options};
use arcwright::stiff::integrate_stiff;
use std::path::Path;
use std::time::Instant;

fn main() {
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("../examples/reach_arm.toml");
    let (arm, _) = parse_arm_file(&path).expect("the demo arm");
    let model = derive(&arm);
    let ev = Evaluator::new(&model);
    let n = arm.n_coords();
    let reg = Regulator::new(
        &arm,
        Law::Compensated,
        default_outputs(&arm),
        vec![4.0, -3.0],
        vec![0.005; 2],
        vec![0.0005; 2],
    )
    .unwrap();
    let rhs = |_t: f64, y: &[f64], dy: &mut [f64]| -> Result<(), String> {
        let (q, qd) = y.split_at(n);
        let t = ev.terms(q, qd);
        let u = reg.input(&t.k, &t.g, &t.a, q, qd).allocation.u;
        let qdd = forward_dynamics(&t, q, qd, &u).map_err(|e| e.to_string())?;
        dy[..n].copy_from_slice(qd);
        dy[n..].copy_from_slice(&qdd);
        Ok(())
    };
    let y0 = vec![0.0; 2 * n];
    println!("method      simulated  steps  rejected  evaluations  seconds  final y");
    for (name, duration) in [("explicit", 0.5), ("stiff", 0.5), ("stiff", 10.0)] {
        let opts = Options {
            max_steps: 10_000_000,
            h_max: Some(duration / 50.0),
            ..Options::default()
        };
        let t0 = Instant::now();
        let (sol, stats) = if name == "explicit" {
            integrate(rhs, &y0, 0.0, duration, &[duration], &opts, |_| {})
        } else {
            integrate_stiff(rhs, &y0, 0.0, duration, &[duration], &opts, |_| {})
        }
        .expect("the run");
        let secs = t0.elapsed().as_secs_f64();
        let q = &sol.last().unwrap().1[..n];
        let y: Vec<String> = reg
            .s
            .iter()
            .map(|r| format!("{:.9}", r.iter().zip(q).map(|(a, b)| a * b).sum::<f64>()))
            .collect();
        println!(
            "{name:<10} {duration:>6} s  {:>6}  {:>8}  {:>11}  {secs:>7.2}  [{}]",
            stats.accepted,
            stats.rejected,
            stats.evaluations,
            y.join(", ")
        );
    }
}
