//! Optimiser benchmark (not a timed test): op counts before and after, per function
//! and for B+C+G together, and the optimisation time, on the demo arm and two
//! single-segment arms; and B+C+G as fully expanded polynomials (the unoptimised
//! form), for the single-segment arms always and for the demo with `--expanded`
//! (measured: 86,710,854 operations, 3,265 times the derived program, in 13 min).
//!
//! Run with `cargo bench -p arcwright --bench optimise [-- [--expanded] PATH.toml ...]`.

use arcwright::arm::{parse_arm_file, parse_arm_str};
use arcwright::derive::derive;
use arcwright::exact::Q;
use arcwright::ir::{Id, Node, OpCount, Program, Var};
use arcwright::optimise::{optimise, Limits};
use num_traits::{One, Signed, Zero};
use std::collections::{BTreeMap, HashMap};
use std::rc::Rc;
use std::time::Instant;

fn single(degree: u32, order: u32) -> String {
    format!(
        "name = \"single_d{degree}_o{order}\"\ngravity = [0.0, -9.81]\nexpansion_order = {order}\n\
         [[segment]]\nlength = 0.12\ncurvature_degree = {degree}\ndensity = 0.3\nbending_stiffness = 0.012\n"
    )
}

/// A polynomial in the program's leaves: sorted leaf indices (with repetition) to
/// coefficient.
type Poly = HashMap<Vec<u16>, Q>;

/// Operations of B, C and G as fully expanded polynomials, each distinct entry on its
/// own with no sharing: per monomial of degree d, d − 1 multiplications plus one for a
/// coefficient other than ±1, and one addition fewer than monomials. `None` when some
/// intermediate polynomial passes `cap` monomials (the count is then only bounded).
fn expanded_ops(prog: &Program, roots: &[Id], cap: usize) -> Option<(usize, usize)> {
    let mut leaves: BTreeMap<Var, u16> = BTreeMap::new();
    let mut memo: Vec<Option<Rc<Poly>>> = vec![None; prog.len()];
    let live = prog.live(roots);
    for (i, node) in prog.nodes().iter().enumerate() {
        if !live[i] {
            continue;
        }
        let get = |id: &Id, memo: &Vec<Option<Rc<Poly>>>| memo[id.index()].clone().unwrap();
        let p: Poly = match node {
            Node::Const(c) => [(Vec::new(), c.clone())].into_iter().collect(),
            Node::Var(v) => {
                let next = leaves.len() as u16;
                let k = *leaves.entry(*v).or_insert(next);
                [(vec![k], Q::one())].into_iter().collect()
            }
            Node::Neg(a) => get(a, &memo).iter().map(|(m, c)| (m.clone(), -c)).collect(),
            Node::Add(a, b) => {
                let mut p = (*get(a, &memo)).clone();
                for (m, c) in get(b, &memo).iter() {
                    *p.entry(m.clone()).or_insert_with(Q::zero) += c;
                }
                p.retain(|_, c| !c.is_zero());
                p
            }
            Node::Mul(a, b) => {
                let (pa, pb) = (get(a, &memo), get(b, &memo));
                if pa.len().saturating_mul(pb.len()) > 4 * cap {
                    return None;
                }
                let mut p = Poly::new();
                for (ma, ca) in pa.iter() {
                    for (mb, cb) in pb.iter() {
                        let mut m: Vec<u16> = ma.iter().chain(mb).copied().collect();
                        m.sort_unstable();
                        *p.entry(m).or_insert_with(Q::zero) += ca * cb;
                    }
                }
                p.retain(|_, c| !c.is_zero());
                p
            }
        };
        if p.len() > cap {
            return None;
        }
        memo[i] = Some(Rc::new(p));
    }
    let mut distinct: Vec<Id> = roots.to_vec();
    distinct.sort();
    distinct.dedup();
    let (mut adds, mut muls) = (0, 0);
    for r in distinct {
        let p = memo[r.index()].clone().unwrap();
        adds += p.len().saturating_sub(1);
        for (m, c) in p.iter() {
            if !m.is_empty() {
                muls += m.len() - 1 + usize::from(!c.abs().is_one());
            }
        }
    }
    Some((adds, muls))
}

fn total(c: OpCount) -> usize {
    c.adds + c.muls + c.negs
}

fn run(label: &str, arm: &arcwright::arm::Arm, expand: bool) {
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
    let mut roots: Vec<_> = model.inertia.iter().flatten().copied().collect();
    roots.extend(model.coriolis.iter().flatten().copied());
    roots.extend(model.gravity.iter().copied());
    if !expand {
        println!("B+C+G fully expanded: not counted (pass --expanded; about 13 min on the demo)");
        return;
    }
    let t = Instant::now();
    match expanded_ops(&model.program, &roots, 3_000_000) {
        Some((adds, muls)) => println!(
            "B+C+G fully expanded, no sharing: {} ops (+{adds} *{muls}), {:.0}x the derived program; expanded in {:.2?}",
            adds + muls,
            (adds + muls) as f64 / total(b).max(1) as f64,
            t.elapsed()
        ),
        None => println!(
            "B+C+G fully expanded: more than 3 million monomials in one entry (not counted)"
        ),
    }
}

fn main() {
    let expand_all = std::env::args().any(|a| a == "--expanded");
    let args: Vec<String> = std::env::args()
        .skip(1)
        .filter(|a| !a.starts_with("--"))
        .collect();
    if !args.is_empty() {
        for p in &args {
            let (arm, _) = parse_arm_file(std::path::Path::new(p)).expect("arm file");
            run(p, &arm, expand_all);
        }
        return;
    }
    for (d, o) in [(1, 2), (2, 2)] {
        let arm = parse_arm_str(&single(d, o), "bench.toml").expect("arm");
        run(
            &format!("single segment, degree {d}, order {o}"),
            &arm,
            true,
        );
    }
    let root = concat!(env!("CARGO_MANIFEST_DIR"), "/../examples/reach_arm.toml");
    let (arm, _) = parse_arm_file(std::path::Path::new(root)).expect("reach_arm.toml");
    run("examples/reach_arm.toml", &arm, expand_all);
}
