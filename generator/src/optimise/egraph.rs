//! The e-graph stage: `egg` on bounded windows of the factored program.
//!
//! The program is cut, in its (topological) node order, into windows of a few
//! thousand nodes; nodes of earlier windows are opaque leaves. Each window gets an
//! e-graph with only rewrites that pay (factoring out a common factor, constant
//! folding by analysis, moving signs outwards) and no associativity or
//! commutativity. Extraction counts flops on the DAG: a greedy tree-cost pass, then
//! re-extraction in which classes the previous choice already computes are free as
//! children, kept only while the shared count goes down. A window's result replaces
//! it only if it is cheaper, so this stage never makes the program worse.

use super::report::EgraphStats;
use super::Limits;
use crate::exact::Q;
use crate::ir::{Id, Node, Program};
use egg::{
    define_language, rewrite as rw, Analysis, DidMerge, EGraph, Rewrite, Runner, StopReason,
};
use std::collections::BTreeMap;
use std::time::Instant;

define_language! {
    enum Math {
        "+" = Add([egg::Id; 2]),
        "*" = Mul([egg::Id; 2]),
        "-" = Neg([egg::Id; 1]),
        Num(Q),
        Leaf(u32),
    }
}

#[derive(Default)]
struct Fold;

impl Analysis<Math> for Fold {
    type Data = Option<Q>;

    fn make(egraph: &mut EGraph<Math, Self>, enode: &Math) -> Self::Data {
        let c = |i: &egg::Id| egraph[*i].data.as_ref();
        match enode {
            Math::Num(q) => Some(q.clone()),
            Math::Add([a, b]) => Some(c(a)? + c(b)?),
            Math::Mul([a, b]) => Some(c(a)? * c(b)?),
            Math::Neg([a]) => Some(-c(a)?.clone()),
            Math::Leaf(_) => None,
        }
    }

    fn merge(&mut self, to: &mut Self::Data, from: Self::Data) -> DidMerge {
        match (to.as_ref(), from) {
            (None, Some(f)) => {
                *to = Some(f);
                DidMerge(true, false)
            }
            (Some(_), None) => DidMerge(false, true),
            _ => DidMerge(false, false),
        }
    }

    fn modify(egraph: &mut EGraph<Math, Self>, id: egg::Id) {
        if let Some(c) = egraph[id].data.clone() {
            let k = egraph.add(Math::Num(c));
            egraph.union(id, k);
        }
    }
}

fn rules() -> Vec<Rewrite<Math, Fold>> {
    vec![
        // a·b + a·c → a·(b + c), in the four operand orders (no commutativity rule).
        rw!("factor-ll"; "(+ (* ?a ?b) (* ?a ?c))" => "(* ?a (+ ?b ?c))"),
        rw!("factor-lr"; "(+ (* ?a ?b) (* ?c ?a))" => "(* ?a (+ ?b ?c))"),
        rw!("factor-rl"; "(+ (* ?b ?a) (* ?a ?c))" => "(* ?a (+ ?b ?c))"),
        rw!("factor-rr"; "(+ (* ?b ?a) (* ?c ?a))" => "(* ?a (+ ?b ?c))"),
        // a·b − a·c → a·(b − c)
        rw!("factor-sub-l"; "(+ (* ?a ?b) (- (* ?a ?c)))" => "(* ?a (+ ?b (- ?c)))"),
        rw!("factor-sub-r"; "(+ (* ?b ?a) (- (* ?c ?a)))" => "(* ?a (+ ?b (- ?c)))"),
        // a + a·c → a·(1 + c)
        rw!("factor-one"; "(+ ?a (* ?a ?c))" => "(* ?a (+ ?c 1))"),
        // Signs outwards, where they merge into subtractions or cancel.
        rw!("neg-mul-l"; "(* (- ?a) ?b)" => "(- (* ?a ?b))"),
        rw!("neg-mul-r"; "(* ?a (- ?b))" => "(- (* ?a ?b))"),
        rw!("neg-add"; "(+ (- ?a) (- ?b))" => "(- (+ ?a ?b))"),
        rw!("neg-neg"; "(- (- ?a))" => "?a"),
        rw!("mul-minus-one"; "(* ?a -1)" => "(- ?a)"),
        rw!("mul-one"; "(* ?a 1)" => "?a"),
        rw!("add-zero"; "(+ ?a 0)" => "?a"),
    ]
}

/// Nodes of the source program per window.
const WINDOW: usize = 3000;

pub fn run(src: &Program, roots: &[Id], limits: &Limits) -> (Program, Vec<Id>, EgraphStats) {
    let start = Instant::now();
    let mut stats = EgraphStats::default();
    let nodes = src.nodes();
    let live = src.live(roots);
    // Which live nodes are needed outside their window: set per window below.
    let mut last_use_window = vec![0usize; nodes.len()];
    let order: Vec<usize> = (0..nodes.len()).filter(|&i| live[i]).collect();
    let window_of = |pos: usize| pos / WINDOW;
    let mut pos_of = vec![usize::MAX; nodes.len()];
    for (pos, &i) in order.iter().enumerate() {
        pos_of[i] = pos;
    }
    for &i in &order {
        let w = window_of(pos_of[i]);
        for c in children(&nodes[i]) {
            let lw = &mut last_use_window[c.index()];
            *lw = (*lw).max(w);
        }
    }
    let mut is_root = vec![false; nodes.len()];
    for r in roots {
        is_root[r.index()] = true;
    }
    let rules = rules();
    let mut out = Program::new();
    let mut map: Vec<Option<Id>> = vec![None; nodes.len()];
    for (w, chunk) in order.chunks(WINDOW).enumerate() {
        stats.windows += 1;
        let exported: Vec<usize> = chunk
            .iter()
            .copied()
            .filter(|&i| is_root[i] || last_use_window[i] > w)
            .collect();
        let copy = |out: &mut Program, map: &mut Vec<Option<Id>>| {
            for &i in chunk {
                map[i] = Some(copy_node(out, &nodes[i], map));
            }
        };
        for &i in chunk {
            if let Node::Var(v) = &nodes[i] {
                map[i] = Some(out.var(*v));
            }
        }
        if start.elapsed() >= limits.time_limit {
            stats.skipped_for_time += 1;
            copy(&mut out, &mut map);
            continue;
        }
        match optimise_window(nodes, chunk, &exported, &map, &rules, limits, &mut stats) {
            Some((expr, outs)) => {
                // Build into a scratch copy first to compare costs on the real builder.
                let mut trial = out.clone();
                let ids = build(&mut trial, &expr);
                let new_outs: Vec<Id> = outs.iter().map(|c| ids[c]).collect();
                let mut base_map = map.clone();
                let mut base = out.clone();
                for &i in chunk {
                    base_map[i] = Some(copy_node(&mut base, &nodes[i], &base_map));
                }
                let base_outs: Vec<Id> = exported.iter().map(|&i| base_map[i].unwrap()).collect();
                let cost_new = window_cost(&trial, &new_outs, out.len());
                let cost_old = window_cost(&base, &base_outs, out.len());
                if cost_new < cost_old {
                    stats.improved += 1;
                    out = trial;
                    for (&i, id) in exported.iter().zip(new_outs) {
                        map[i] = Some(id);
                    }
                } else {
                    out = base;
                    map = base_map;
                }
            }
            None => copy(&mut out, &mut map),
        }
    }
    let ids = roots
        .iter()
        .map(|r| map[r.index()].expect("root mapped"))
        .collect();
    stats.time = start.elapsed();
    (out, ids, stats)
}

fn children(n: &Node) -> Vec<Id> {
    match n {
        Node::Add(a, b) | Node::Mul(a, b) => vec![*a, *b],
        Node::Neg(a) => vec![*a],
        _ => vec![],
    }
}

fn copy_node(out: &mut Program, n: &Node, map: &[Option<Id>]) -> Id {
    let m = |x: &Id| map[x.index()].expect("child mapped");
    match n {
        Node::Const(c) => out.constant(c.clone()),
        Node::Var(v) => out.var(*v),
        Node::Add(a, b) => out.add(m(a), m(b)),
        Node::Mul(a, b) => out.mul(m(a), m(b)),
        Node::Neg(a) => out.neg(m(a)),
    }
}

/// Ops of the nodes added after `base_len` that the given outputs need.
fn window_cost(p: &Program, outs: &[Id], base_len: usize) -> usize {
    let live = p.live(outs);
    p.nodes()
        .iter()
        .enumerate()
        .skip(base_len)
        .filter(|(i, n)| live[*i] && matches!(n, Node::Add(..) | Node::Mul(..) | Node::Neg(..)))
        .count()
}

/// An extracted DAG: nodes in dependency order over leaves (target ids) and constants.
struct Extracted {
    nodes: Vec<(egg::Id, Math)>,
}

/// Builds an extracted DAG into `out`; returns the target id of every e-class built.
fn build(out: &mut Program, e: &Extracted) -> BTreeMap<egg::Id, Id> {
    let mut ids: BTreeMap<egg::Id, Id> = BTreeMap::new();
    for (class, node) in &e.nodes {
        let id = match node {
            Math::Num(q) => out.constant(q.clone()),
            Math::Leaf(t) => Id(*t),
            Math::Add([a, b]) => out.add(ids[a], ids[b]),
            Math::Mul([a, b]) => out.mul(ids[a], ids[b]),
            Math::Neg([a]) => out.neg(ids[a]),
        };
        ids.insert(*class, id);
    }
    ids
}

type WindowResult = (Extracted, Vec<egg::Id>);

fn optimise_window(
    nodes: &[Node],
    chunk: &[usize],
    exported: &[usize],
    map: &[Option<Id>],
    rules: &[Rewrite<Math, Fold>],
    limits: &Limits,
    stats: &mut EgraphStats,
) -> Option<WindowResult> {
    let mut eg: EGraph<Math, Fold> = EGraph::default();
    let mut class: BTreeMap<usize, egg::Id> = BTreeMap::new();
    let get = |eg: &mut EGraph<Math, Fold>, class: &BTreeMap<usize, egg::Id>, x: &Id| -> egg::Id {
        match class.get(&x.index()) {
            Some(&c) => c,
            None => match &nodes[x.index()] {
                Node::Const(q) => eg.add(Math::Num(q.clone())),
                _ => eg.add(Math::Leaf(map[x.index()].expect("input mapped").0)),
            },
        }
    };
    let mut ops = 0;
    for &i in chunk {
        let c = match &nodes[i] {
            Node::Const(q) => eg.add(Math::Num(q.clone())),
            Node::Var(v) => eg.add(Math::Leaf(leaf_of(*v, map, i))),
            Node::Add(a, b) => {
                ops += 1;
                let (x, y) = (get(&mut eg, &class, a), get(&mut eg, &class, b));
                eg.add(Math::Add([x, y]))
            }
            Node::Mul(a, b) => {
                ops += 1;
                let (x, y) = (get(&mut eg, &class, a), get(&mut eg, &class, b));
                eg.add(Math::Mul([x, y]))
            }
            Node::Neg(a) => {
                ops += 1;
                let x = get(&mut eg, &class, a);
                eg.add(Math::Neg([x]))
            }
        };
        class.insert(i, c);
    }
    if ops == 0 {
        return None;
    }
    let roots: Vec<egg::Id> = exported.iter().map(|i| class[i]).collect();
    let runner = Runner::default()
        .with_egraph(eg)
        .with_node_limit(limits.max_nodes)
        .with_iter_limit(limits.max_iterations)
        .with_time_limit(limits.time_limit)
        .run(rules);
    let eg = runner.egraph;
    let size = eg.total_number_of_nodes();
    stats.max_egraph_nodes = stats.max_egraph_nodes.max(size);
    stats.max_egraph_classes = stats.max_egraph_classes.max(eg.number_of_classes());
    match runner.stop_reason {
        Some(StopReason::NodeLimit(_)) => stats.hit_node_limit += 1,
        Some(StopReason::IterationLimit(_)) => stats.hit_iteration_limit += 1,
        Some(StopReason::TimeLimit(_)) => stats.hit_time_limit += 1,
        _ => {}
    }
    if size > limits.max_nodes {
        stats.overshot_node_limit += 1;
    }
    let roots: Vec<egg::Id> = roots.iter().map(|r| eg.find(*r)).collect();
    let extracted = extract_dag(&eg, &roots)?;
    Some((extracted, roots))
}

fn leaf_of(_v: crate::ir::Var, map: &[Option<Id>], i: usize) -> u32 {
    map[i].expect("variable interned").0
}

fn op_cost(n: &Math) -> usize {
    match n {
        Math::Add(_) | Math::Mul(_) | Math::Neg(_) => 1,
        _ => 0,
    }
}

/// Flop-counting extraction on the DAG: start from the tree-cost greedy choice, then
/// re-choose with the classes of the current DAG free as children; keep a new choice
/// only if it is acyclic and its DAG needs fewer ops.
fn extract_dag(eg: &EGraph<Math, Fold>, roots: &[egg::Id]) -> Option<Extracted> {
    let mut ids: Vec<egg::Id> = eg.classes().map(|c| c.id).collect();
    ids.sort();
    let mut free: BTreeMap<egg::Id, bool> = BTreeMap::new();
    let mut best: Option<(usize, BTreeMap<egg::Id, Math>)> = None;
    for _round in 0..4 {
        let choice = choose(eg, &ids, &free);
        let Some(dag) = reachable(eg, &choice, roots) else {
            break;
        };
        let cost: usize = dag.iter().map(|c| op_cost(&choice[c])).sum();
        let better = best.as_ref().is_none_or(|(b, _)| cost < *b);
        if !better {
            break;
        }
        free = ids.iter().map(|c| (*c, dag.contains(c))).collect();
        best = Some((cost, choice));
    }
    let (_, choice) = best?;
    // Emit in dependency order.
    let mut order = Vec::new();
    let mut state: BTreeMap<egg::Id, u8> = BTreeMap::new();
    for r in roots {
        post_order(eg, &choice, *r, &mut state, &mut order)?;
    }
    Some(Extracted {
        nodes: order.into_iter().map(|c| (c, choice[&c].clone())).collect(),
    })
}

/// Bellman-Ford style cost fixpoint; `free` children cost nothing.
fn choose(
    eg: &EGraph<Math, Fold>,
    ids: &[egg::Id],
    free: &BTreeMap<egg::Id, bool>,
) -> BTreeMap<egg::Id, Math> {
    let mut cost: BTreeMap<egg::Id, usize> = BTreeMap::new();
    let mut choice: BTreeMap<egg::Id, Math> = BTreeMap::new();
    loop {
        let mut changed = false;
        for &c in ids {
            for n in &eg[c].nodes {
                let mut total = op_cost(n);
                let mut ok = true;
                for ch in n.children() {
                    let ch = eg.find(*ch);
                    if free.get(&ch).copied().unwrap_or(false) && ch != c {
                        continue;
                    }
                    match cost.get(&ch) {
                        Some(k) => total += k,
                        None => {
                            ok = false;
                            break;
                        }
                    }
                }
                if ok && cost.get(&c).is_none_or(|&k| total < k) {
                    cost.insert(c, total);
                    choice.insert(c, n.clone());
                    changed = true;
                }
            }
        }
        if !changed {
            return choice;
        }
    }
}

use egg::Language;

fn reachable(
    eg: &EGraph<Math, Fold>,
    choice: &BTreeMap<egg::Id, Math>,
    roots: &[egg::Id],
) -> Option<std::collections::BTreeSet<egg::Id>> {
    let mut order = Vec::new();
    let mut state = BTreeMap::new();
    for r in roots {
        post_order(eg, choice, *r, &mut state, &mut order)?;
    }
    Some(order.into_iter().collect())
}

/// Depth-first post-order over the chosen nodes; `None` on a cycle.
fn post_order(
    eg: &EGraph<Math, Fold>,
    choice: &BTreeMap<egg::Id, Math>,
    root: egg::Id,
    state: &mut BTreeMap<egg::Id, u8>,
    order: &mut Vec<egg::Id>,
) -> Option<()> {
    // Iterative, so deep programs do not overflow the stack.
    let mut stack = vec![(eg.find(root), false)];
    while let Some((c, done)) = stack.pop() {
        if done {
            state.insert(c, 2);
            order.push(c);
            continue;
        }
        match state.get(&c) {
            Some(2) => continue,
            Some(1) => return None,
            _ => {}
        }
        state.insert(c, 1);
        stack.push((c, true));
        for ch in choice.get(&c)?.children() {
            let ch = eg.find(*ch);
            match state.get(&ch) {
                Some(2) => {}
                Some(1) => return None,
                _ => stack.push((ch, false)),
            }
        }
    }
    Some(())
}
