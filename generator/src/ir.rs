//! The derived model as a straight-line program: a hash-consed DAG of additions,
//! multiplications and negations over exact rational constants and named variables.
//!
//! Why a DAG and not expanded polynomials: the dynamics of a chain compose segment
//! by segment. Expanded, the products of one segment's polynomials with the next
//! one's swell beyond any use; kept as a program over named intermediates, the size
//! grows with the sum of the segments, and the optimiser and emitters see the same
//! structure a careful hand derivation would have.

use crate::exact::Q;
use num_traits::{One, Zero};
use rustc_hash::FxHashMap as HashMap;

/// Handle of a node. Nodes are created children-first, so ids are a topological order.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub struct Id(pub u32);

impl Id {
    pub fn index(self) -> usize {
        self.0 as usize
    }
}

/// The leaves a program reads. Every one except `Q`, `Qd` and `Sigma` is a function of
/// those inputs that the runtime computes by a dedicated routine (trigonometry and the
/// Legendre moments), which is what keeps the algebra polynomial.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum Var {
    /// Configuration coordinate `q[i]`.
    Q(u16),
    /// Velocity `q̇[i]`.
    Qd(u16),
    /// Acceleration `q̈[i]`: read by the regressor only.
    Qdd(u16),
    /// Normalised arc coordinate σ of a pose query.
    Sigma,
    /// Re (`im = false`) or Im (`im = true`) of `ν_n(a_seg)`, `a_seg = L q_{seg,0}`, with
    /// `ν_n(a) = ∫_0^1 P̃_n(t) e^{iat} dt = e^{ia/2} iⁿ j_n(a/2)`.
    Nu { seg: u16, n: u16, im: bool },
    /// The same moment at argument `a_seg σ`, for backbone poses inside a segment.
    PoseNu { seg: u16, n: u16, im: bool },
    /// `cos Φ_seg`, Φ_seg the (exact) tangent angle at the end of segment `seg`.
    CosPhi(u16),
    /// `sin Φ_seg`.
    SinPhi(u16),
    /// Runtime parameter `θ[k]` (see [`crate::params::ParamLayout`]): a leaf the
    /// emitted code reads from its parameter struct, constant in `q` and `q̇`.
    Param(u16),
}

#[derive(Clone, Debug, PartialEq, Eq, Hash)]
pub enum Node {
    Const(Q),
    Var(Var),
    Add(Id, Id),
    Mul(Id, Id),
    Neg(Id),
}

/// A growing, hash-consed expression DAG with light algebraic simplification
/// (constant folding, neutral elements, canonical operand order).
#[derive(Clone, Debug)]
pub struct Program {
    nodes: Vec<Node>,
    index: HashMap<Node, Id>,
}

impl Default for Program {
    fn default() -> Self {
        Self::new()
    }
}

impl Program {
    pub fn new() -> Self {
        let mut p = Program {
            nodes: Vec::new(),
            index: HashMap::default(),
        };
        p.intern(Node::Const(Q::zero()));
        p.intern(Node::Const(Q::one()));
        p
    }

    pub fn nodes(&self) -> &[Node] {
        &self.nodes
    }

    pub fn node(&self, id: Id) -> &Node {
        &self.nodes[id.index()]
    }

    pub fn len(&self) -> usize {
        self.nodes.len()
    }

    pub fn is_empty(&self) -> bool {
        self.nodes.is_empty()
    }

    fn intern(&mut self, node: Node) -> Id {
        if let Some(&id) = self.index.get(&node) {
            return id;
        }
        let id = Id(self.nodes.len() as u32);
        self.nodes.push(node.clone());
        self.index.insert(node, id);
        id
    }

    /// A node as given, hash-consed but not simplified: for passes that copy an
    /// already canonical program or build a deliberate non-canonical grouping.
    pub(crate) fn raw(&mut self, node: Node) -> Id {
        self.intern(node)
    }

    pub fn zero(&self) -> Id {
        Id(0)
    }

    pub fn one(&self) -> Id {
        Id(1)
    }

    pub fn constant(&mut self, c: Q) -> Id {
        self.intern(Node::Const(c))
    }

    pub fn var(&mut self, v: Var) -> Id {
        self.intern(Node::Var(v))
    }

    /// The exact value of a constant node.
    pub fn as_const(&self, id: Id) -> Option<&Q> {
        match &self.nodes[id.index()] {
            Node::Const(c) => Some(c),
            _ => None,
        }
    }

    pub fn is_zero(&self, id: Id) -> bool {
        self.as_const(id).is_some_and(Zero::is_zero)
    }

    /// Splits `c·x` into `(c, x)`; a plain node is `(1, x)`, a constant is `(c, 1)`.
    fn split_scale(&self, id: Id) -> (Q, Id) {
        match &self.nodes[id.index()] {
            Node::Const(c) => (c.clone(), self.one()),
            Node::Neg(x) => {
                let (c, y) = self.split_scale(*x);
                (-c, y)
            }
            Node::Mul(a, b) => match (&self.nodes[a.index()], &self.nodes[b.index()]) {
                (Node::Const(c), _) => (c.clone(), *b),
                (_, Node::Const(c)) => (c.clone(), *a),
                _ => (Q::one(), id),
            },
            _ => (Q::one(), id),
        }
    }

    /// `c · x` in canonical form: constants folded, `±1` as identity or negation.
    pub fn scale(&mut self, c: &Q, x: Id) -> Id {
        let (d, y) = self.split_scale(x);
        let k = c * d;
        if k.is_zero() {
            return self.zero();
        }
        if y == self.one() {
            return self.constant(k);
        }
        if k.is_one() {
            return y;
        }
        if (-&k).is_one() {
            return self.intern(Node::Neg(y));
        }
        let kc = self.constant(k);
        self.intern(Node::Mul(kc, y))
    }

    pub fn add(&mut self, a: Id, b: Id) -> Id {
        if self.is_zero(a) {
            return b;
        }
        if self.is_zero(b) {
            return a;
        }
        if let (Some(x), Some(y)) = (self.as_const(a), self.as_const(b)) {
            let s = x + y;
            return self.constant(s);
        }
        let (ca, xa) = self.split_scale(a);
        let (cb, xb) = self.split_scale(b);
        if xa == xb {
            let s = ca + cb;
            return self.scale(&s, xa);
        }
        // a + (−b) and (−a) + b are subtractions; keep the positive operand first.
        let (a, b) = if a <= b { (a, b) } else { (b, a) };
        self.intern(Node::Add(a, b))
    }

    pub fn neg(&mut self, a: Id) -> Id {
        self.scale(&-Q::one(), a)
    }

    pub fn sub(&mut self, a: Id, b: Id) -> Id {
        let nb = self.neg(b);
        self.add(a, nb)
    }

    pub fn mul(&mut self, a: Id, b: Id) -> Id {
        if let Some(c) = self.as_const(a).cloned() {
            return self.scale(&c, b);
        }
        if let Some(c) = self.as_const(b).cloned() {
            return self.scale(&c, a);
        }
        let (ca, xa) = self.split_scale(a);
        let (cb, xb) = self.split_scale(b);
        let k = ca * cb;
        let (x, y) = if xa <= xb { (xa, xb) } else { (xb, xa) };
        let m = self.intern(Node::Mul(x, y));
        self.scale(&k, m)
    }

    /// Sum of many terms as a balanced tree, so that depth stays logarithmic.
    pub fn sum(&mut self, terms: &[Id]) -> Id {
        let terms: Vec<Id> = terms
            .iter()
            .copied()
            .filter(|&t| !self.is_zero(t))
            .collect();
        self.sum_balanced(&terms)
    }

    fn sum_balanced(&mut self, terms: &[Id]) -> Id {
        match terms.len() {
            0 => self.zero(),
            1 => terms[0],
            n => {
                let (l, r) = terms.split_at(n / 2);
                let a = self.sum_balanced(l);
                let b = self.sum_balanced(r);
                self.add(a, b)
            }
        }
    }

    /// `Σ c_i x_i`.
    pub fn lin_comb(&mut self, terms: &[(Q, Id)]) -> Id {
        let scaled: Vec<Id> = terms.iter().map(|(c, x)| self.scale(c, *x)).collect();
        self.sum(&scaled)
    }

    /// Product of many factors as a balanced tree.
    pub fn product(&mut self, factors: &[Id]) -> Id {
        match factors.len() {
            0 => self.one(),
            1 => factors[0],
            n => {
                let (l, r) = factors.split_at(n / 2);
                let a = self.product(l);
                let b = self.product(r);
                self.mul(a, b)
            }
        }
    }

    /// Additions, multiplications and negations the given roots need.
    pub fn count_ops(&self, roots: &[Id]) -> OpCount {
        let live = self.live(roots);
        let mut count = OpCount::default();
        for (i, node) in self.nodes.iter().enumerate() {
            if !live[i] {
                continue;
            }
            match node {
                Node::Add(..) => count.adds += 1,
                Node::Mul(..) => count.muls += 1,
                Node::Neg(..) => count.negs += 1,
                _ => {}
            }
        }
        count
    }

    /// Which nodes the given roots depend on (themselves included).
    pub fn live(&self, roots: &[Id]) -> Vec<bool> {
        let mut live = vec![false; self.nodes.len()];
        for r in roots {
            live[r.index()] = true;
        }
        for i in (0..self.nodes.len()).rev() {
            if !live[i] {
                continue;
            }
            match &self.nodes[i] {
                Node::Add(a, b) | Node::Mul(a, b) => {
                    live[a.index()] = true;
                    live[b.index()] = true;
                }
                Node::Neg(a) => live[a.index()] = true,
                _ => {}
            }
        }
        live
    }
}

/// Operation counts of the live part of a program.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct OpCount {
    pub adds: usize,
    pub muls: usize,
    pub negs: usize,
}

/// A complex value as a pair of real nodes (planar vectors and unit rotations).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub struct Cx {
    pub re: Id,
    pub im: Id,
}

impl Program {
    pub fn cx_zero(&self) -> Cx {
        Cx {
            re: self.zero(),
            im: self.zero(),
        }
    }

    pub fn cx_add(&mut self, a: Cx, b: Cx) -> Cx {
        Cx {
            re: self.add(a.re, b.re),
            im: self.add(a.im, b.im),
        }
    }

    pub fn cx_mul(&mut self, a: Cx, b: Cx) -> Cx {
        let rr = self.mul(a.re, b.re);
        let ii = self.mul(a.im, b.im);
        let ri = self.mul(a.re, b.im);
        let ir = self.mul(a.im, b.re);
        Cx {
            re: self.sub(rr, ii),
            im: self.add(ri, ir),
        }
    }

    /// `i·a`
    pub fn cx_times_i(&mut self, a: Cx) -> Cx {
        Cx {
            re: self.neg(a.im),
            im: a.re,
        }
    }

    pub fn cx_scale(&mut self, c: &Q, a: Cx) -> Cx {
        Cx {
            re: self.scale(c, a.re),
            im: self.scale(c, a.im),
        }
    }

    /// `Re(conj(a)·b)`, the planar dot product.
    pub fn cx_dot(&mut self, a: Cx, b: Cx) -> Id {
        let rr = self.mul(a.re, b.re);
        let ii = self.mul(a.im, b.im);
        self.add(rr, ii)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::exact::{int, rat};

    #[test]
    fn hash_consing_and_folding() {
        let mut p = Program::new();
        let x = p.var(Var::Q(0));
        let y = p.var(Var::Q(1));
        let a = p.add(x, y);
        let b = p.add(y, x);
        assert_eq!(a, b);
        let two_x = p.add(x, x);
        assert_eq!(p.split_scale(two_x), (int(2), x));
        let zero = p.sub(x, x);
        assert!(p.is_zero(zero));
        let h = p.scale(&rat(1, 2), two_x);
        assert_eq!(h, x);
        let c = p.constant(int(3));
        let m = p.mul(c, h);
        let m2 = p.mul(m, c);
        assert_eq!(p.split_scale(m2), (int(9), x));
    }
}
