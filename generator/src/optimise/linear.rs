//! Common sub-sums of exact linear forms (the moment kernels `Σ c_n ν_n`).
//!
//! Kernels over the same moments with different coefficients share no node, yet two
//! of them often contain the same pair `c·(ν_a + r ν_b)` up to a factor. Greedily, the
//! pair `(a, b, r)` present in most forms becomes a new sum `t = ν_a + r ν_b` and every
//! form containing it uses `c_a·t` instead (each further use saves a product and a
//! sum); repeat while some pair occurs twice, within an iteration budget.

use crate::exact::Q;
use crate::ir::{Id, Node, Program};
use num_traits::{One, Zero};
use std::collections::{BTreeMap, HashMap};
use std::time::{Duration, Instant};

/// Largest form considered.
const MAX_TERMS: usize = 64;

type Form = BTreeMap<u32, Q>;

pub fn run(src: &Program, roots: &[Id], budget: Duration) -> (Program, Vec<Id>) {
    let start = Instant::now();
    let nodes = src.nodes();
    let live = src.live(roots);
    let mut uses = vec![0u32; nodes.len()];
    for (i, n) in nodes.iter().enumerate() {
        if live[i] {
            match n {
                Node::Add(a, b) | Node::Mul(a, b) => {
                    uses[a.index()] += 1;
                    uses[b.index()] += 1;
                }
                Node::Neg(a) => uses[a.index()] += 1,
                _ => {}
            }
        }
    }
    // Linear forms over leaves (variables, and shared linear nodes, which keep their
    // sharing), where a node is one.
    let mut form: Vec<Option<Form>> = vec![None; nodes.len()];
    let mut shared_form: Vec<Option<Form>> = vec![None; nodes.len()];
    for (i, n) in nodes.iter().enumerate() {
        if !live[i] {
            continue;
        }
        let f = match n {
            Node::Var(_) => Some(BTreeMap::from([(i as u32, Q::one())])),
            Node::Neg(a) => form[a.index()]
                .as_ref()
                .map(|f| f.iter().map(|(k, c)| (*k, -c)).collect()),
            Node::Mul(a, b) => match (
                src.as_const(*a),
                &form[b.index()],
                src.as_const(*b),
                &form[a.index()],
            ) {
                (Some(c), Some(f), _, _) | (_, _, Some(c), Some(f)) => {
                    Some(f.iter().map(|(k, x)| (*k, x * c)).collect())
                }
                _ => None,
            },
            Node::Add(a, b) => match (&form[a.index()], &form[b.index()]) {
                (Some(x), Some(y)) if x.len() + y.len() <= MAX_TERMS => {
                    let mut s = x.clone();
                    for (k, c) in y {
                        let e = s.entry(*k).or_insert_with(Q::zero);
                        *e += c;
                        if e.is_zero() {
                            s.remove(k);
                        }
                    }
                    Some(s)
                }
                _ => None,
            },
            Node::Const(_) => None,
        };
        form[i] = f;
        if uses[i] > 1 {
            shared_form[i] = form[i].take();
            if let Some(f) = &shared_form[i] {
                form[i] = Some(if f.len() >= 2 {
                    BTreeMap::from([(i as u32, Q::one())])
                } else {
                    f.clone()
                });
            }
        }
    }
    // Maximal forms: used by a non-linear node, shared, or an output.
    let mut maximal = vec![false; nodes.len()];
    for i in 0..nodes.len() {
        if let Some(f) = shared_form[i].take() {
            if f.len() >= 2 {
                maximal[i] = true;
            }
            form[i] = Some(f);
        }
    }
    for r in roots {
        maximal[r.index()] = true;
    }
    for (i, n) in nodes.iter().enumerate() {
        if !live[i] || form[i].is_some() {
            continue;
        }
        if let Node::Add(a, b) | Node::Mul(a, b) = n {
            maximal[a.index()] = true;
            maximal[b.index()] = true;
        }
        if let Node::Neg(a) = n {
            maximal[a.index()] = true;
        }
    }
    let targets: Vec<usize> = (0..nodes.len())
        .filter(|&i| maximal[i] && form[i].as_ref().is_some_and(|f| f.len() >= 2))
        .collect();
    let mut forms: Vec<Form> = targets.iter().map(|&i| form[i].clone().unwrap()).collect();

    // Greedy pair extraction; pseudo-variables are numbered from nodes.len().
    let mut ratios: Vec<Q> = Vec::new();
    let mut ratio_ix: HashMap<Q, u32> = HashMap::new();
    let mut pseudo: Vec<(u32, u32, u32)> = Vec::new();
    let mut counts: HashMap<(u32, u32, u32), u32> = HashMap::new();
    let mut intern = |q: Q, ratios: &mut Vec<Q>| -> u32 {
        *ratio_ix.entry(q.clone()).or_insert_with(|| {
            ratios.push(q);
            ratios.len() as u32 - 1
        })
    };
    let mut pairs_of = |f: &Form, ratios: &mut Vec<Q>| -> Vec<(u32, u32, u32)> {
        let v: Vec<(&u32, &Q)> = f.iter().collect();
        let mut out = Vec::with_capacity(v.len() * v.len() / 2);
        for x in 0..v.len() {
            for y in x + 1..v.len() {
                let r = v[y].1 / v[x].1;
                out.push((*v[x].0, *v[y].0, intern(r, ratios)));
            }
        }
        out
    };
    let mut form_pairs: Vec<Vec<(u32, u32, u32)>> = Vec::new();
    for f in &forms {
        let p = pairs_of(f, &mut ratios);
        for k in &p {
            *counts.entry(*k).or_default() += 1;
        }
        form_pairs.push(p);
    }
    while start.elapsed() < budget {
        let best = counts
            .iter()
            .filter(|(_, &c)| c >= 2)
            .max_by(|x, y| x.1.cmp(y.1).then(y.0.cmp(x.0)));
        let Some((&(a, b, r), _)) = best else { break };
        let t = (nodes.len() + pseudo.len()) as u32;
        pseudo.push((a, b, r));
        for (fi, f) in forms.iter_mut().enumerate() {
            let (Some(ca), Some(cb)) = (f.get(&a), f.get(&b)) else {
                continue;
            };
            if cb / ca != ratios[r as usize] {
                continue;
            }
            let ca = ca.clone();
            for k in &form_pairs[fi] {
                let e = counts.get_mut(k).unwrap();
                *e -= 1;
                if *e == 0 {
                    counts.remove(k);
                }
            }
            f.remove(&a);
            f.remove(&b);
            f.insert(t, ca);
            let p = pairs_of(f, &mut ratios);
            for k in &p {
                *counts.entry(*k).or_default() += 1;
            }
            form_pairs[fi] = p;
        }
    }

    // Rebuild.
    let mut out = Program::new();
    let mut map: Vec<Option<Id>> = vec![None; nodes.len()];
    let mut pseudo_id: Vec<Option<Id>> = vec![None; pseudo.len()];
    let mut new_form: HashMap<usize, usize> = HashMap::new();
    for (k, &i) in targets.iter().enumerate() {
        new_form.insert(i, k);
    }
    for (i, n) in nodes.iter().enumerate() {
        if !live[i] {
            continue;
        }
        if let Some(&k) = new_form.get(&i) {
            let terms: Vec<(Q, u32)> = forms[k].iter().map(|(v, c)| (c.clone(), *v)).collect();
            let mut ids = Vec::with_capacity(terms.len());
            for (c, v) in terms {
                let x = leaf(
                    v,
                    nodes.len(),
                    &pseudo,
                    &ratios,
                    &mut pseudo_id,
                    &map,
                    &mut out,
                );
                ids.push((c, x));
            }
            map[i] = Some(out.lin_comb(&ids));
            continue;
        }
        let m = |x: &Id| map[x.index()];
        map[i] = match n {
            Node::Const(c) => Some(out.constant(c.clone())),
            Node::Var(v) => Some(out.var(*v)),
            // Linear nodes only inside maximal forms are not needed on their own.
            Node::Add(a, b) => m(a).zip(m(b)).map(|(x, y)| out.add(x, y)),
            Node::Mul(a, b) => m(a).zip(m(b)).map(|(x, y)| out.mul(x, y)),
            Node::Neg(a) => m(a).map(|x| out.neg(x)),
        };
    }
    let ids = roots
        .iter()
        .map(|r| map[r.index()].expect("root rebuilt"))
        .collect();
    (out, ids)
}

fn leaf(
    v: u32,
    base: usize,
    pseudo: &[(u32, u32, u32)],
    ratios: &[Q],
    pseudo_id: &mut Vec<Option<Id>>,
    map: &[Option<Id>],
    out: &mut Program,
) -> Id {
    if (v as usize) < base {
        return map[v as usize].expect("variable mapped");
    }
    let k = v as usize - base;
    if let Some(id) = pseudo_id[k] {
        return id;
    }
    let (a, b, r) = pseudo[k];
    let x = leaf(a, base, pseudo, ratios, pseudo_id, map, out);
    let y = leaf(b, base, pseudo, ratios, pseudo_id, map, out);
    let ry = out.scale(&ratios[r as usize], y);
    let id = out.add(x, ry);
    pseudo_id[k] = Some(id);
    id
}
