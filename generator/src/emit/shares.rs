//! What two emitted functions have in common, computed once by a helper of their own.
//!
//! `terms` (B, C, G) and the regressor `Y` are the same sums over the arm's fields,
//! assembled differently: `B` weighs each segment's mass-like moments by its
//! parameters, `Y` keeps them apart. On reach_arm 24,383 of the 25,273 operation
//! nodes of the two are common. Emitted apart, the regressor repeats the code of
//! `terms` (about 100 KB of the demo's 365 KB object at `-O2`, and a quarter of its
//! compile time). Here the common part becomes one helper, `shares`, whose outputs
//! are the common values the rest reads (the *frontier*); each of the two functions
//! calls it and finishes from `s[]`.
//!
//! The moments, angles and moment kernels are always the helper's: the rest is
//! straight-line code over `q`, `q̇`, `q̈`, the parameters and `s[]`, so the two
//! functions need no preamble of their own.

use crate::ir::{Id, Node, Program, Var};
use std::collections::BTreeMap;

/// The common values that `a`'s and `b`'s own code reads, in node order, and their
/// index in `s[]`. Empty when the two have nothing in common worth a call.
///
/// `moment_form(i)` tells whether node `i` is a linear form in the moments
/// ([`super::schedule::Scheduler::is_moment_form`]): such forms, and the moment and
/// angle leaves, stay with the helper even when only one function reads them.
pub fn frontier(
    prog: &Program,
    a: &[Id],
    b: &[Id],
    moment_form: impl Fn(usize) -> bool,
) -> BTreeMap<Id, usize> {
    let nodes = prog.nodes();
    let (la, lb) = (prog.live(a), prog.live(b));
    let preamble = |i: usize| {
        moment_form(i)
            || matches!(
                nodes[i],
                Node::Var(
                    Var::Nu { .. }
                        | Var::PoseNu { .. }
                        | Var::CosPhi(_)
                        | Var::SinPhi(_)
                        | Var::Sigma
                )
            )
    };
    // Downward closed: below a common node all is common, below a moment form all are
    // moment forms or constants.
    let shared = |i: usize| (la[i] && lb[i]) || ((la[i] || lb[i]) && preamble(i));
    // What the rest reads directly, never through s[].
    let direct = |i: usize| {
        matches!(
            nodes[i],
            Node::Const(_) | Node::Var(Var::Q(_) | Var::Qd(_) | Var::Qdd(_) | Var::Param(_))
        )
    };
    let mut wanted = vec![false; nodes.len()];
    let mut want = |i: usize| {
        if shared(i) && !direct(i) {
            wanted[i] = true;
        }
    };
    for r in a.iter().chain(b) {
        want(r.index());
    }
    for (i, node) in nodes.iter().enumerate() {
        if !(la[i] || lb[i]) || shared(i) {
            continue;
        }
        match node {
            Node::Add(x, y) | Node::Mul(x, y) => {
                want(x.index());
                want(y.index());
            }
            Node::Neg(x) => want(x.index()),
            Node::Const(_) | Node::Var(_) => {}
        }
    }
    let mut out = BTreeMap::new();
    for (i, _) in wanted.iter().enumerate().filter(|(_, w)| **w) {
        let k = out.len();
        out.insert(Id(i as u32), k);
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::exact::int;

    #[test]
    fn the_frontier_is_what_each_side_reads_of_the_common_part() {
        let mut p = Program::new();
        let (q0, q1) = (p.var(Var::Q(0)), p.var(Var::Q(1)));
        let qd0 = p.var(Var::Qd(0));
        let c = p.var(Var::CosPhi(0));
        let common = p.mul(q0, q1); // read by both sides
        let deep = p.mul(common, q0); // below nothing but `common`'s readers: common too
        let two = p.constant(int(2));
        let a_only = p.mul(deep, qd0);
        let b_only = p.mul(deep, two);
        let b_angle = p.mul(b_only, c); // an angle read by one side stays with the helper
        let f = frontier(&p, &[a_only, deep], &[b_angle], |_| false);
        let ids: Vec<Id> = f.keys().copied().collect();
        assert_eq!(ids, vec![c, deep], "frontier {ids:?}");
        assert_eq!(f[&c], 0);
        assert_eq!(f[&deep], 1);
        // Only inputs in common: nothing to share.
        let f = frontier(&p, &[a_only], &[q1], |_| false);
        assert!(f.is_empty(), "{f:?}");
    }

    /// On a two-segment arm the helper does nearly all the work of both callers, which
    /// keep only straight-line code of their own, and each caller's count is the
    /// helper's plus its own.
    #[test]
    fn terms_and_the_regressor_finish_from_the_helper() {
        use crate::emit::plan::Plan;
        use crate::emit::Precision;
        let arm = crate::arm::parse_arm_str(
            "name = \"pair\"\nexpansion_order = 3\ngravity = [0.0, -9.81]\n\
             [[segment]]\nlength = 0.12\ncurvature_degree = 2\ndensity = 0.3\n\
             bending_stiffness = 0.012\n\
             [[segment]]\nlength = 0.1\ncurvature_degree = 1\ndensity = 0.25\n\
             bending_stiffness = 0.008\n\
             [[actuator]]\nkind = \"moment\"\nsegment = 2\n",
            "pair.toml",
        )
        .unwrap();
        let plan = Plan::new(&crate::derive::derive_emitted(&arm), true, Precision::F64).unwrap();
        let helper = plan
            .shares
            .as_ref()
            .expect("a parametric model has a helper");
        let y = plan.regressor.as_ref().expect("and a regressor");
        assert!(helper.kern_len > 0 && !helper.block.outputs.is_empty());
        for (name, f) in [("terms", &plan.terms), ("regressor", y)] {
            assert!(f.over_shares, "{name}");
            assert_eq!(f.kern_len, 0, "{name} evaluates kernels of its own");
            assert!(
                f.block.nu_count.iter().all(|&c| c == 0),
                "{name} reads moments"
            );
            assert_eq!(f.block.angles, 0, "{name} computes angles");
            let own = f.ops - helper.ops;
            assert!(
                own.add + own.mul < (helper.ops.add + helper.ops.mul) / 5,
                "{name}: {own:?} of its own against the helper's {:?}",
                helper.ops
            );
            assert_eq!(
                f.ops_beyond - f.ops,
                helper.ops_beyond - helper.ops,
                "{name}"
            );
        }
    }
}
