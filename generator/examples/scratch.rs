use arcwright::arm::parse_arm_file;
use arcwright::derive::derive;
use arcwright::evaluate::Evaluator;
use arcwright::reference::{Kinematics, Reference};
use std::time::Instant;

fn frob(a: &[Vec<f64>], b: &[Vec<f64>]) -> (f64, f64) {
    let mut d = 0.0; let mut n = 0.0;
    for (ra, rb) in a.iter().zip(b) { for (x, y) in ra.iter().zip(rb) { d += (x - y) * (x - y); n += y * y; } }
    (d.sqrt(), n.sqrt())
}

fn main() {
    let path = std::env::args().nth(1).unwrap();
    let (arm, _) = parse_arm_file(std::path::Path::new(&path)).unwrap();
    let t = Instant::now();
    let model = derive(&arm);
    println!("derive: {:?}, nodes {}", t.elapsed(), model.program.len());
    counts(&model);
    let ev = Evaluator::new(&model);
    let rf = Reference::new(&arm, Kinematics::Truncated(arm.expansion_order));
    let n = model.n;
    let qs: Vec<Vec<f64>> = vec![
        vec![0.0; n],
        (0..n).map(|i| 0.3 * ((i as f64) * 1.7).sin() * 10.0).collect(),
        (0..n).map(|i| 2.0 * ((i as f64) * 2.3 + 1.0).cos() * 10.0).collect(),
    ];
    for q in &qs {
        let qd: Vec<f64> = (0..n).map(|i| 0.5 + i as f64 * 0.1).collect();
        let t = Instant::now();
        let a = ev.terms(q, &qd);
        let te = t.elapsed();
        let t = Instant::now();
        let b = rf.terms(q, &qd);
        let tr = t.elapsed();
        let (db, nb) = frob(&a.b, &b.b);
        let (dc, nc) = frob(&a.c, &b.c);
        let gd: f64 = a.g.iter().zip(&b.g).map(|(x, y)| (x - y) * (x - y)).sum::<f64>().sqrt();
        let gn: f64 = b.g.iter().map(|y| y * y).sum::<f64>().sqrt();
        let (dj, nj) = frob(&a.tip_jacobian, &b.tip_jacobian);
        let (da, na) = frob(&a.a, &b.a);
        println!("eval {:?} ref {:?}", te, tr);
        println!(" B {:.2e}/{:.2e}  C {:.2e}/{:.2e}  G {:.2e}/{:.2e} J {:.2e}/{:.2e} A {:.2e}/{:.2e} tip {:?} vs {:?} KE {} {} PE {} {}", db, nb, dc, nc, gd, gn, dj, nj, da, na, a.tip_pose, b.tip_pose, a.kinetic_energy, b.kinetic_energy, a.potential_energy, b.potential_energy);
        for j in 0..arm.segments.len() { let p = ev.pose(q, j, 0.37); let r = rf.pose(q, j, 0.37); println!("  pose {j}: {:?} {:?}", p, r); }
    }
}

#[allow(dead_code)]
pub fn counts(model: &arcwright::derive::Model) {
    let p = &model.program;
    let f = |ids: Vec<arcwright::ir::Id>| p.count_ops(&ids);
    println!("B: {:?}", f(model.inertia.iter().flatten().copied().collect()));
    println!("C: {:?}", f(model.coriolis.iter().flatten().copied().collect()));
    println!("G: {:?}", f(model.gravity.clone()));
    let mut all: Vec<_> = model.inertia.iter().flatten().copied().collect();
    all.extend(model.coriolis.iter().flatten().copied()); all.extend(model.gravity.iter().copied());
    println!("B+C+G: {:?}", f(all));
    println!("J: {:?}", f(model.tip_jacobian.iter().flatten().copied().collect()));
}
