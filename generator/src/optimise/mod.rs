//! The optimiser: an equivalent [`Model`] whose program needs far fewer operations.
//!
//! Strategy (measured on the demo arm; see `benches/optimise.rs`):
//! 1. [`horner`], outside any e-graph: every node is expanded, exactly and with a
//!    bound on size, into a sum of products over atoms; like terms are collected, the
//!    rational content is pulled out and the sum is factored greedily (multivariate
//!    Horner). Multi-use nodes stay atoms, so the source's sharing survives; the
//!    rebuild goes through the hash-consing [`Program`], which merges equal
//!    subexpressions across all functions of the model.
//! 2. [`linear`]: common sub-sums of the exact linear forms (the moment kernels
//!    `Σ c_n ν_n`), by greedy extraction of the most frequent scaled pair.
//! 3. [`egraph`]: `egg` on windows of the result (a bounded cone at a time) with only
//!    rewrites that pay (factoring, constant folding, sign moves), extraction by a
//!    flop-counting cost made DAG-aware by re-extraction, a window's result taken only
//!    if it is cheaper. Hard limits on nodes, iterations and time per window and in
//!    total; a window that hits one keeps the best it has, which is still equivalent.
//! 4. [`crate::scaled_factors`], as at the end of the derivation: a constant times a
//!    factor that recurs in products becomes one node.
//!
//! Everything iterates in program order or over ordered maps, and egg runs with its
//! `deterministic` feature, so equal inputs give byte-identical programs.

mod egraph;
mod horner;
mod linear;
mod report;

pub use report::{FunctionOps, Report};

use crate::derive::Model;
use crate::ir::{Id, OpCount, Program};
use std::time::{Duration, Instant};

/// Hard limits of the e-graph stage.
#[derive(Clone, Debug)]
pub struct Limits {
    /// E-nodes per e-graph (one window). egg checks this after a whole batch of rule
    /// matches, so a graph can end somewhat above it; the report says when it did.
    pub max_nodes: usize,
    /// Rewrite iterations per window.
    pub max_iterations: usize,
    /// Wall-clock budget of the whole e-graph stage; windows not reached keep the
    /// factored form of stage 1.
    pub time_limit: Duration,
}

impl Default for Limits {
    fn default() -> Self {
        Limits {
            max_nodes: 20_000,
            max_iterations: 6,
            time_limit: Duration::from_secs(30),
        }
    }
}

/// Named output groups of a model, in a fixed order.
fn functions(m: &Model) -> Vec<(String, Vec<Id>)> {
    let mat = |x: &Vec<Vec<Id>>| x.iter().flatten().copied().collect::<Vec<_>>();
    let mut f = vec![
        ("inertia".to_string(), mat(&m.inertia)),
        ("coriolis".to_string(), mat(&m.coriolis)),
        ("gravity".to_string(), m.gravity.clone()),
        ("stiffness".to_string(), mat(&m.stiffness)),
        ("damping".to_string(), mat(&m.damping)),
        ("actuation".to_string(), mat(&m.actuation)),
        ("tip_pose".to_string(), m.tip_pose.to_vec()),
        ("tip_jacobian".to_string(), mat(&m.tip_jacobian)),
        ("kinetic_energy".to_string(), vec![m.kinetic_energy]),
        ("potential_energy".to_string(), vec![m.potential_energy]),
    ];
    for (j, p) in m.pose.iter().enumerate() {
        f.push((format!("pose_{}", j + 1), p.to_vec()));
    }
    if let Some(s) = &m.statics {
        f.push(("gravity_jacobian".to_string(), mat(&s.gravity_jacobian)));
        f.push((
            "actuation_jacobian".to_string(),
            s.actuation_jacobian.iter().flat_map(mat).collect(),
        ));
    }
    if let Some(y) = &m.regressor {
        f.push(("regressor".to_string(), mat(y)));
    }
    f
}

/// The model with every output id replaced, in the order of [`functions`].
fn remap(m: &Model, program: Program, ids: &[Id]) -> Model {
    let mut it = ids.iter().copied();
    let mut next = || it.next().expect("one id per output");
    let mat = |x: &Vec<Vec<Id>>, next: &mut dyn FnMut() -> Id| -> Vec<Vec<Id>> {
        x.iter()
            .map(|r| r.iter().map(|_| next()).collect())
            .collect()
    };
    let inertia = mat(&m.inertia, &mut next);
    let coriolis = mat(&m.coriolis, &mut next);
    let gravity = m.gravity.iter().map(|_| next()).collect();
    let stiffness = mat(&m.stiffness, &mut next);
    let damping = mat(&m.damping, &mut next);
    let actuation = mat(&m.actuation, &mut next);
    let tip_pose = [next(), next(), next()];
    let tip_jacobian = mat(&m.tip_jacobian, &mut next);
    let kinetic_energy = next();
    let potential_energy = next();
    let pose = m.pose.iter().map(|_| [next(), next(), next()]).collect();
    let statics = m.statics.as_ref().map(|s| crate::derive::StaticRoots {
        gravity_jacobian: mat(&s.gravity_jacobian, &mut next),
        actuation_jacobian: s
            .actuation_jacobian
            .iter()
            .map(|x| mat(x, &mut next))
            .collect(),
    });
    let regressor = m.regressor.as_ref().map(|y| mat(y, &mut next));
    Model {
        arm: m.arm.clone(),
        program,
        n: m.n,
        n_inputs: m.n_inputs,
        inertia,
        coriolis,
        gravity,
        stiffness,
        damping,
        actuation,
        tip_pose,
        tip_jacobian,
        statics,
        kinetic_energy,
        potential_energy,
        pose,
        parametric: m.parametric,
        regressor,
        // The optimised program has new nodes: its kernels are all dot products.
        kernel_entries: Default::default(),
        kernel_weights: m.kernel_weights.clone(),
    }
}

/// An equivalent model with a new program; see the module documentation.
pub fn optimise(model: &Model, limits: &Limits) -> (Model, Report) {
    let start = Instant::now();
    let funcs = functions(model);
    let roots: Vec<Id> = funcs.iter().flat_map(|(_, r)| r.iter().copied()).collect();

    let (p1, ids1) = horner::run(&model.program, &roots, &horner::Settings::default());
    // Common sub-sums of the moment kernels, with a share of the time budget.
    let (p1, ids1) = linear::run(&p1, &ids1, limits.time_limit / 4);
    let after_factoring = start.elapsed();
    let (p2, ids2, eg) = egraph::run(&p1, &ids1, limits);
    // The stages rebuild through the canonical constructors, which pull constants out
    // of products again; share the scaled factors as the derivation does.
    let (p2, map) = crate::scaled_factors::share(&p2, &ids2);
    let ids2: Vec<Id> = ids2
        .iter()
        .map(|id| map[id.index()].expect("roots are live"))
        .collect();

    let mut per_function = Vec::new();
    let mut at = 0;
    for (name, r) in &funcs {
        let new = &ids2[at..at + r.len()];
        at += r.len();
        per_function.push(FunctionOps {
            name: name.clone(),
            before: model.program.count_ops(r),
            after: p2.count_ops(new),
        });
    }
    let out = remap(model, p2, &ids2);
    let report = Report {
        per_function,
        total_before: model.program.count_ops(&roots),
        total_after: out.program.count_ops(&ids2),
        nodes_before: model.program.len(),
        nodes_after: out.program.len(),
        after_factoring: p1.count_ops(&ids1),
        factoring_time: after_factoring,
        egraph: eg,
        elapsed: start.elapsed(),
    };
    (out, report)
}

/// `adds + muls + negs`.
pub fn total_ops(c: OpCount) -> usize {
    c.adds + c.muls + c.negs
}

#[cfg(test)]
mod tests;
