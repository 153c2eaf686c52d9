//! Exact factoring outside the e-graph: bounded expansion into sums of products,
//! exact collection of like terms, content extraction and greedy multivariate Horner.
//!
//! Each node of the source program is turned, children first, into an exact sparse
//! polynomial over *atoms* (runtime leaves, or already emitted sub-results). A node
//! becomes an atom of its own (is emitted into the target program) when
//! - its polynomial grew beyond `cap` terms, or a product would,
//! - it is used more than once and is not a single term (keeps the source's sharing),
//! - it is an output.
//!
//! Emission factors the polynomial: the rational content is pulled out (so scaled
//! copies of one sum share one node), then the atom present in most terms is factored
//! out, recursively (`x·Q + R`). Because every emitted node goes through the
//! hash-consing [`Program`] and sums and products are built in a canonical order,
//! equal subexpressions anywhere in the model become one node.

use crate::exact::Q;
use crate::ir::{Id, Node, Program};
use num_bigint::BigInt;
use num_integer::Integer;
use num_traits::{One, Signed, Zero};
use std::collections::{BTreeMap, HashMap};

/// Sorted multiset of atoms (target-program ids).
type Mono = Vec<u32>;
/// Sorted by monomial, no zero coefficients.
type Poly = Vec<(Mono, Q)>;

pub struct Settings {
    /// Largest polynomial kept expanded.
    pub cap: usize,
    /// Multi-use nodes with at most this many terms are still inlined into their users.
    pub inline_shared: usize,
    /// Multi-use *linear* nodes (`Σ c·leaf`, e.g. moment kernels) with at most this
    /// many terms are inlined into their users.
    pub inline_linear: usize,
}

impl Default for Settings {
    fn default() -> Self {
        Settings {
            cap: 48,
            inline_shared: 1,
            inline_linear: 0,
        }
    }
}

struct Emitter<'a> {
    out: &'a mut Program,
    memo: HashMap<Poly, Id>,
}

/// Rebuilds `src` restricted to `roots` into a fresh program; returns it and the new
/// id of every root (same order).
pub fn run(src: &Program, roots: &[Id], s: &Settings) -> (Program, Vec<Id>) {
    let nodes = src.nodes();
    let live = src.live(roots);
    let mut uses = vec![0u32; nodes.len()];
    for (i, node) in nodes.iter().enumerate() {
        if !live[i] {
            continue;
        }
        match node {
            Node::Add(a, b) | Node::Mul(a, b) => {
                uses[a.index()] += 1;
                uses[b.index()] += 1;
            }
            Node::Neg(a) => uses[a.index()] += 1,
            _ => {}
        }
    }
    let mut is_root = vec![false; nodes.len()];
    for r in roots {
        is_root[r.index()] = true;
    }
    let mut out = Program::new();
    let mut em = Emitter {
        out: &mut out,
        memo: HashMap::new(),
    };
    let mut polys: Vec<Option<Poly>> = vec![None; nodes.len()];
    let mut remaining = uses.clone();
    let mut root_id: Vec<Option<Id>> = vec![None; nodes.len()];

    for (i, node) in nodes.iter().enumerate() {
        if !live[i] {
            continue;
        }
        let mut take = |polys: &mut Vec<Option<Poly>>, a: Id| -> Poly {
            let k = a.index();
            remaining[k] -= 1;
            if remaining[k] == 0 && !is_root[k] {
                polys[k].take().expect("child polynomial")
            } else {
                polys[k].clone().expect("child polynomial")
            }
        };
        let mut p = match node {
            Node::Const(c) => constant(c.clone()),
            Node::Var(_) => {
                let id = em.out.var(match node {
                    Node::Var(v) => *v,
                    _ => unreachable!(),
                });
                vec![(vec![id.0], Q::one())]
            }
            Node::Neg(a) => {
                let mut p = take(&mut polys, *a);
                for t in &mut p {
                    t.1 = -std::mem::take(&mut t.1);
                }
                p
            }
            Node::Add(a, b) => {
                let pa = take(&mut polys, *a);
                let pb = take(&mut polys, *b);
                add(&pa, &pb)
            }
            Node::Mul(a, b) => {
                let mut pa = take(&mut polys, *a);
                let mut pb = take(&mut polys, *b);
                if pa.len() * pb.len() > s.cap {
                    // Atomise the larger side first, then the other if still too big.
                    if pa.len() < pb.len() {
                        std::mem::swap(&mut pa, &mut pb);
                    }
                    pa = em.atomise(&pa);
                    if pa.len() * pb.len() > s.cap {
                        pb = em.atomise(&pb);
                    }
                }
                mul(&pa, &pb)
            }
        };
        let linear = p.len() <= s.inline_linear && p.iter().all(|(m, _)| m.len() <= 1);
        if p.len() > s.cap || (uses[i] > 1 && p.len() > s.inline_shared && !linear) {
            p = em.atomise(&p);
        }
        if is_root[i] {
            root_id[i] = Some(em.emit(&p));
        }
        polys[i] = Some(p);
    }
    let ids = roots
        .iter()
        .map(|r| root_id[r.index()].expect("root emitted"))
        .collect();
    (out, ids)
}

fn constant(c: Q) -> Poly {
    if c.is_zero() {
        Vec::new()
    } else {
        vec![(Vec::new(), c)]
    }
}

fn add(a: &Poly, b: &Poly) -> Poly {
    let mut out = Vec::with_capacity(a.len() + b.len());
    let (mut i, mut j) = (0, 0);
    while i < a.len() || j < b.len() {
        let ord = if i == a.len() {
            std::cmp::Ordering::Greater
        } else if j == b.len() {
            std::cmp::Ordering::Less
        } else {
            a[i].0.cmp(&b[j].0)
        };
        match ord {
            std::cmp::Ordering::Less => {
                out.push(a[i].clone());
                i += 1;
            }
            std::cmp::Ordering::Greater => {
                out.push(b[j].clone());
                j += 1;
            }
            std::cmp::Ordering::Equal => {
                let c = &a[i].1 + &b[j].1;
                if !c.is_zero() {
                    out.push((a[i].0.clone(), c));
                }
                i += 1;
                j += 1;
            }
        }
    }
    out
}

fn mono_mul(a: &[u32], b: &[u32]) -> Mono {
    let mut m = Vec::with_capacity(a.len() + b.len());
    let (mut i, mut j) = (0, 0);
    while i < a.len() || j < b.len() {
        if j == b.len() || (i < a.len() && a[i] <= b[j]) {
            m.push(a[i]);
            i += 1;
        } else {
            m.push(b[j]);
            j += 1;
        }
    }
    m
}

fn mul(a: &Poly, b: &Poly) -> Poly {
    if a.len() == 1 && a[0].0.is_empty() && a[0].1.is_one() {
        return b.clone();
    }
    if b.len() == 1 && b[0].0.is_empty() && b[0].1.is_one() {
        return a.clone();
    }
    let mut acc: BTreeMap<Mono, Q> = BTreeMap::new();
    for (ma, ca) in a {
        for (mb, cb) in b {
            let m = mono_mul(ma, mb);
            let c = ca * cb;
            match acc.entry(m) {
                std::collections::btree_map::Entry::Occupied(mut e) => {
                    *e.get_mut() += c;
                }
                std::collections::btree_map::Entry::Vacant(e) => {
                    e.insert(c);
                }
            }
        }
    }
    acc.into_iter().filter(|(_, c)| !c.is_zero()).collect()
}

/// The content `c` of a polynomial (gcd of numerators over lcm of denominators, with
/// the sign of the first term), so that `p / c` is primitive with a positive lead.
fn content(p: &Poly) -> Q {
    let mut num = BigInt::zero();
    let mut den = BigInt::one();
    for (_, c) in p {
        num = num.gcd(c.numer());
        den = den.lcm(c.denom());
    }
    let c = Q::new(num, den);
    if p[0].1.is_negative() {
        -c
    } else {
        c
    }
}

impl Emitter<'_> {
    /// Emits `p` as one atom times its content (single terms are left as they are).
    fn atomise(&mut self, p: &Poly) -> Poly {
        if p.len() <= 1 {
            return p.clone();
        }
        let c = content(p);
        let prim: Poly = p.iter().map(|(m, k)| (m.clone(), k / &c)).collect();
        let id = self.emit_primitive(prim);
        vec![(vec![id.0], c)]
    }

    fn emit(&mut self, p: &Poly) -> Id {
        match p.len() {
            0 => self.out.zero(),
            1 => {
                let m = self.monomial(&p[0].0);
                self.out.scale(&p[0].1, m)
            }
            _ => {
                let c = content(p);
                let prim: Poly = p.iter().map(|(m, k)| (m.clone(), k / &c)).collect();
                let id = self.emit_primitive(prim);
                self.out.scale(&c, id)
            }
        }
    }

    fn monomial(&mut self, m: &[u32]) -> Id {
        let mut acc = self.out.one();
        for &a in m {
            acc = self.out.mul(acc, Id(a));
        }
        acc
    }

    fn emit_primitive(&mut self, p: Poly) -> Id {
        if let Some(&id) = self.memo.get(&p) {
            return id;
        }
        let id = self.horner(&p);
        self.memo.insert(p, id);
        id
    }

    /// Greedy multivariate Horner: factor out the atom present in most terms.
    fn horner(&mut self, p: &Poly) -> Id {
        if p.len() <= 1 {
            return self.emit(p);
        }
        let mut count: BTreeMap<u32, usize> = BTreeMap::new();
        for (m, _) in p {
            let mut last = None;
            for &a in m {
                if last != Some(a) {
                    *count.entry(a).or_default() += 1;
                    last = Some(a);
                }
            }
        }
        let best = count
            .iter()
            .fold(None, |best: Option<(u32, usize)>, (&a, &n)| match best {
                Some((_, bn)) if bn >= n => best,
                _ => Some((a, n)),
            });
        match best {
            Some((x, n)) if n >= 2 => {
                let mut quot = Vec::new();
                let mut rest = Vec::new();
                for (m, c) in p {
                    if let Ok(pos) = m.binary_search(&x) {
                        let mut m2 = m.clone();
                        m2.remove(pos);
                        quot.push((m2, c.clone()));
                    } else {
                        rest.push((m.clone(), c.clone()));
                    }
                }
                quot.sort_by(|a, b| a.0.cmp(&b.0));
                let q = self.emit(&quot);
                let xq = self.out.mul(Id(x), q);
                let r = self.emit(&rest);
                self.out.add(xq, r)
            }
            _ => {
                let terms: Vec<Id> = p
                    .iter()
                    .map(|(m, c)| {
                        let mid = self.monomial(m);
                        self.out.scale(c, mid)
                    })
                    .collect();
                self.out.sum(&terms)
            }
        }
    }
}
