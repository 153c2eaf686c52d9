//! Shared scaled factors: `c·(x·y)` rewritten as `(c·x)·y` where `c·x` recurs.
//!
//! The program's canonical form pulls every rational constant to the front of a
//! product (`mul(k, c·m) = c·(k·m)`), which is what lets sums collect like terms while
//! they are built. It also hides a sharing that the model is full of: a field's
//! coefficient `c·m` (a constant times a monomial of the segment's coordinates)
//! multiplies every kernel of a row of `𝔻·b` and every entry of the Gram forms, and
//! each of those products then costs two multiplications instead of one. After the
//! derivation, with all merging done, this pass reassociates such products so that
//! the scaled factor is one node, computed once.
//!
//! The rewrite is exact (reassociation of rational constants); in floating point it
//! changes rounding by an ulp or so per product.

use crate::ir::{Id, Node, Program, Var};
use std::collections::BTreeMap;

/// A copy of `src` with its scaled products reassociated where that saves work, and
/// the id of every old node in the new program (`None` for nodes no root reaches).
pub fn share(src: &Program, roots: &[Id]) -> (Program, Vec<Option<Id>>) {
    let nodes = src.nodes();
    let live = src.live(roots);
    let mut uses = vec![0u32; nodes.len()];
    for r in roots {
        uses[r.index()] += 1;
    }
    for (i, n) in nodes.iter().enumerate() {
        if !live[i] {
            continue;
        }
        match n {
            Node::Add(a, b) | Node::Mul(a, b) => {
                uses[a.index()] += 1;
                uses[b.index()] += 1;
            }
            Node::Neg(a) => uses[a.index()] += 1,
            _ => {}
        }
    }
    // Linear forms in the moments (the kernels): scaling one would make a new kernel,
    // a row of its own in the emitted table, so they are never the scaled factor.
    let mut in_moments = vec![false; nodes.len()];
    for (i, n) in nodes.iter().enumerate() {
        in_moments[i] = match n {
            Node::Var(Var::Nu { .. } | Var::PoseNu { .. }) => true,
            Node::Add(a, b) => in_moments[a.index()] && in_moments[b.index()],
            Node::Neg(a) => in_moments[a.index()],
            Node::Mul(a, b) => src.as_const(*a).is_some() && in_moments[b.index()],
            _ => false,
        };
    }
    // Candidates: for each live `c·P` with `P = x·y` used only there, the factors
    // `(c, x)` and `(c, y)` it could be regrouped by.
    let mut candidates: BTreeMap<(Id, Id), Vec<usize>> = BTreeMap::new();
    let mut scaled_product = vec![None; nodes.len()];
    for (i, n) in nodes.iter().enumerate() {
        let Node::Mul(c, p) = n else { continue };
        if !live[i] || src.as_const(*c).is_none() || uses[p.index()] != 1 {
            continue;
        }
        let Node::Mul(x, y) = src.node(*p) else {
            continue;
        };
        if src.as_const(*x).is_some() || src.as_const(*y).is_some() {
            continue;
        }
        scaled_product[i] = Some((*c, *x, *y));
        for f in [x, y] {
            if !in_moments[f.index()] && (f == x || x != y) {
                candidates.entry((*c, *f)).or_default().push(i);
            }
        }
    }
    // Existing scaled nodes cost nothing more when reused.
    let mut existing: BTreeMap<(Id, Id), bool> = BTreeMap::new();
    for (i, n) in nodes.iter().enumerate() {
        if let Node::Mul(c, x) = n {
            if live[i] && src.as_const(*c).is_some() && scaled_product[i].is_none() {
                existing.insert((*c, *x), true);
            }
        }
    }
    // Greedy: the factor that most products share first; a product takes the first
    // factor assigned to it. A new factor needs two products to pay.
    let mut order: Vec<(&(Id, Id), &Vec<usize>)> = candidates.iter().collect();
    order.sort_by(|a, b| b.1.len().cmp(&a.1.len()).then(a.0.cmp(b.0)));
    let mut chosen: Vec<Option<(Id, Id)>> = vec![None; nodes.len()];
    for (&(c, f), users) in order {
        let free: Vec<usize> = users
            .iter()
            .copied()
            .filter(|&i| chosen[i].is_none())
            .collect();
        let need = if existing.contains_key(&(c, f)) { 1 } else { 2 };
        if free.len() < need {
            continue;
        }
        for i in free {
            chosen[i] = Some((c, f));
        }
    }

    let mut out = Program::new();
    let mut map: Vec<Option<Id>> = vec![None; nodes.len()];
    let get = |map: &[Option<Id>], id: &Id| map[id.index()].expect("children first");
    for (i, n) in nodes.iter().enumerate() {
        if !live[i] {
            continue;
        }
        let new = match (chosen[i], scaled_product[i]) {
            (Some((c, f)), Some((_, x, y))) => {
                let other = if f == x { y } else { x };
                let cf = out.raw(Node::Mul(get(&map, &c), get(&map, &f)));
                let o = get(&map, &other);
                out.raw(Node::Mul(cf.min(o), cf.max(o)))
            }
            _ => out.raw(match n {
                Node::Const(_) | Node::Var(_) => n.clone(),
                Node::Add(a, b) => Node::Add(get(&map, a), get(&map, b)),
                Node::Mul(a, b) => Node::Mul(get(&map, a), get(&map, b)),
                Node::Neg(a) => Node::Neg(get(&map, a)),
            }),
        };
        map[i] = Some(new);
    }
    (out, map)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::exact::int;

    /// `3·m·k1 + 3·m·k2` needs one product less once `3·m` is shared, and keeps its
    /// value.
    #[test]
    fn a_recurring_scaled_factor_is_computed_once() {
        let mut p = Program::new();
        let m = p.var(Var::Q(1));
        let k1 = p.var(Var::Q(2));
        let k2 = p.var(Var::Q(3));
        let three = p.constant(int(3));
        let a = p.mul(m, k1);
        let a = p.mul(three, a);
        let b = p.mul(m, k2);
        let b = p.mul(three, b);
        let s = p.add(a, b);
        let before = p.count_ops(&[s]);
        let (q, map) = share(&p, &[s]);
        let s2 = map[s.index()].unwrap();
        let after = q.count_ops(&[s2]);
        assert_eq!(before.muls, 4);
        assert_eq!(after.muls, 3);
        let x = [0.0, 0.7, -1.3, 2.1];
        let val = |p: &Program, id: Id| {
            let mut v = vec![0.0f64; p.len()];
            for (i, n) in p.nodes().iter().enumerate() {
                v[i] = match n {
                    Node::Const(c) => num_traits::ToPrimitive::to_f64(c).unwrap(),
                    Node::Var(Var::Q(k)) => x[*k as usize],
                    Node::Var(_) => unreachable!("only q here"),
                    Node::Add(a, b) => v[a.index()] + v[b.index()],
                    Node::Mul(a, b) => v[a.index()] * v[b.index()],
                    Node::Neg(a) => -v[a.index()],
                };
            }
            v[id.index()]
        };
        assert!((val(&p, s) - val(&q, s2)).abs() < 1e-15);
    }
}
