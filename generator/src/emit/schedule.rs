//! Scheduling a program's DAG into straight-line statements over named temporaries,
//! language-neutral: the emitters only choose syntax.
//!
//! For one group of outputs (one emitted function):
//! - only live nodes are scheduled ([`Program::live`]);
//! - a node used more than once becomes a temporary `t<k>`; a node used once is
//!   inlined into its user, so sums flatten into one signed sum of products,
//!   `x * 1` and `0 + x` never appear, and `a + (−b)` prints as `a − b`;
//! - a *moment kernel* — a linear combination of two or more Legendre moments with
//!   rational coefficients, `Σ_n c_n ν_n` — is not printed as code at all: its
//!   coefficients go into one sparse table shared by every function, and a function
//!   evaluates the rows it needs in a loop. These combinations are about half of all
//!   operations of a derived model; as a table they cost the same flops but a
//!   fraction of the code size and compile time.

use super::ops::Ops;
use crate::derive::KernelEntry;
use crate::exact::Q;
use crate::ir::{Id, Node, Program, Var};
use num_traits::{One, Signed, Zero};
use std::collections::BTreeMap;

/// Where each segment's Legendre moments live in the flat moment array `nu`:
/// `Re ν_n` at `offset[seg] + n`, `Im ν_n` at `offset[seg] + count[seg] + n`.
#[derive(Clone, Debug)]
pub struct NuLayout {
    pub offset: Vec<usize>,
    pub count: Vec<usize>,
    pub len: usize,
}

impl NuLayout {
    /// The layout of every `Var::Nu` a program's live roots read.
    pub fn of(prog: &Program, roots: &[Id], segments: usize) -> NuLayout {
        let live = prog.live(roots);
        let mut count = vec![0usize; segments];
        for (i, node) in prog.nodes().iter().enumerate() {
            if let (true, Node::Var(Var::Nu { seg, n, .. })) = (live[i], node) {
                let c = &mut count[*seg as usize];
                *c = (*c).max(*n as usize + 1);
            }
        }
        let mut offset = Vec::with_capacity(segments);
        let mut len = 0;
        for c in &count {
            offset.push(len);
            len += 2 * c;
        }
        NuLayout { offset, count, len }
    }

    /// The layout with room for at least `reach[seg]` moments per segment.
    pub fn with_reach(&self, reach: &[usize]) -> NuLayout {
        let mut offset = Vec::with_capacity(self.count.len());
        let mut count = Vec::with_capacity(self.count.len());
        let mut len = 0;
        for (c, r) in self.count.iter().zip(reach) {
            let c = if *c > 0 { (*c).max(*r) } else { 0 };
            offset.push(len);
            count.push(c);
            len += 2 * c;
        }
        NuLayout { offset, count, len }
    }

    /// The segment and moment order `n` of entry `idx` (real or imaginary part).
    pub fn locate(&self, idx: usize) -> (usize, usize) {
        let seg = self.offset.iter().rposition(|&o| o <= idx).unwrap_or(0);
        let mut k = idx - self.offset[seg];
        if k >= self.count[seg] {
            k -= self.count[seg];
        }
        (seg, k)
    }

    pub fn index(&self, seg: u16, n: u16, im: bool) -> usize {
        self.base(seg, im) + n as usize
    }

    /// Where segment `seg`'s real (or imaginary) moments start.
    pub fn base(&self, seg: u16, im: bool) -> usize {
        let s = seg as usize;
        self.offset[s] + if im { self.count[s] } else { 0 }
    }
}

/// Marks a linear form whose moments come from more than one base.
const MIXED: usize = usize::MAX;

/// A value an expression reads.
#[derive(Clone, Debug, PartialEq)]
pub enum Leaf {
    /// A runtime input or runtime-computed variable (q, q̇, σ, moments, cos/sin Φ).
    Input(Var),
    /// Temporary `t<k>`.
    Temp(usize),
    /// Row `k` of this function's kernel list (`kern[k]`).
    Kernel(usize),
    /// Value `k` of the shares the function's helper computed (`s[k]`, see
    /// [`super::shares`]).
    Shared(usize),
}

#[derive(Clone, Debug, PartialEq)]
pub enum Factor {
    Leaf(Leaf),
    /// A short flat sum inside a product.
    Paren(Expr),
}

/// `coef · Π factors` (a constant when there are no factors).
#[derive(Clone, Debug, PartialEq)]
pub struct Term {
    pub coef: Q,
    pub factors: Vec<Factor>,
}

/// A signed sum of products; no terms means 0.
#[derive(Clone, Debug, PartialEq, Default)]
pub struct Expr {
    pub terms: Vec<Term>,
}

impl Expr {
    fn leaf(l: Leaf) -> Expr {
        Expr {
            terms: vec![Term {
                coef: Q::one(),
                factors: vec![Factor::Leaf(l)],
            }],
        }
    }

    fn constant(c: Q) -> Expr {
        if c.is_zero() {
            Expr::default()
        } else {
            Expr {
                terms: vec![Term {
                    coef: c,
                    factors: Vec::new(),
                }],
            }
        }
    }

    fn negate(mut self) -> Expr {
        for t in &mut self.terms {
            t.coef = -t.coef.clone();
        }
        self
    }

    fn is_flat(&self) -> bool {
        self.terms
            .iter()
            .all(|t| t.factors.iter().all(|f| matches!(f, Factor::Leaf(_))))
    }

    /// Puts a positive term first so the sum does not start with a unary minus.
    fn lead_positive(&mut self) {
        if self.terms.first().is_some_and(|t| t.coef.is_negative()) {
            if let Some(p) = self.terms.iter().position(|t| t.coef.is_positive()) {
                let t = self.terms.remove(p);
                self.terms.insert(0, t);
            }
        }
        for t in &mut self.terms {
            for f in &mut t.factors {
                if let Factor::Paren(e) = f {
                    e.lead_positive();
                }
            }
        }
    }

    /// Operations this expression costs as printed.
    pub fn ops(&self) -> Ops {
        let mut ops = Ops::default();
        if self.terms.is_empty() {
            return ops;
        }
        ops.add += self.terms.len() - 1;
        let first = &self.terms[0];
        if first.coef.is_negative() && first.coef.abs().is_one() && !first.factors.is_empty() {
            ops.add += 1; // unary minus on a variable
        }
        for t in &self.terms {
            if t.factors.is_empty() {
                continue;
            }
            ops.mul += t.factors.len() - 1;
            if !t.coef.abs().is_one() {
                ops.mul += 1;
            }
            for f in &t.factors {
                if let Factor::Paren(e) = f {
                    ops += e.ops();
                }
            }
        }
        ops
    }
}

/// `temp = expr`.
#[derive(Clone, Debug)]
pub struct Stmt {
    pub temp: usize,
    pub expr: Expr,
}

/// One row of the shared kernel table: `Σ coef · nu[base + n]` over its `(n, coef)`,
/// with `base` the start of one segment's real or imaginary moments. A row is a
/// pattern, not a value: every segment (and both parts) with the same weight shape
/// reads the same row at its own base.
pub type KernelRow = Vec<(usize, Q)>;

/// One evaluation of a kernel row: the row and the moment base it reads.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct KernelUse {
    pub row: usize,
    pub base: usize,
}

/// A kernel root that is `scale ·` one part of a double kernel `D_st` (node `node`):
/// its kernel use is the part itself, read off the segment's half kernels on the fast
/// path ([`crate::kernel_matrix`]), and `scale` goes into the code that reads it, where
/// it merges with the constant factor the use has anyway.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct MatrixUse {
    pub entry: KernelEntry,
    pub node: Id,
    pub scale: Q,
}

/// Kernel rows of all functions, in first-use order, deduplicated by pattern.
#[derive(Clone, Debug, Default)]
pub struct KernelTable {
    pub rows: Vec<KernelRow>,
    by_row: BTreeMap<KernelRow, usize>,
    by_node: BTreeMap<Id, KernelUse>,
}

impl KernelTable {
    /// Raises `counts[seg]` to cover every moment that use `u` reads.
    pub fn note_reach(&self, u: &KernelUse, layout: &NuLayout, counts: &mut [usize]) {
        for (n, _) in &self.rows[u.row] {
            let (seg, k) = layout.locate(u.base + n);
            counts[seg] = counts[seg].max(k + 1);
        }
    }

    /// The index of `row`, added when new.
    pub fn intern(&mut self, row: KernelRow) -> usize {
        let next = self.rows.len();
        let r = *self.by_row.entry(row.clone()).or_insert(next);
        if r == next {
            self.rows.push(row);
        }
        r
    }
}

/// One function's schedule.
#[derive(Clone, Debug)]
pub struct Block {
    /// Table rows this function evaluates, in `kern[]` order: the uses that are not
    /// double-kernel parts first, then those that are, grouped by segment and weight.
    pub kernels: Vec<KernelUse>,
    /// The first `2 · reim` kernels are (real, imaginary) pairs: one row at one
    /// segment's real and imaginary moment bases, which one pass over the row's
    /// coefficients evaluates together.
    pub reim: usize,
    /// Per kernel use, the double-kernel part it is, if any.
    pub matrix: Vec<Option<MatrixUse>>,
    pub stmts: Vec<Stmt>,
    /// One expression per requested root.
    pub outputs: Vec<Expr>,
    /// Moments needed per segment (0 = none), from `Var::Nu` and the kernel rows.
    pub nu_count: Vec<usize>,
    /// The same from `Var::Nu` alone (what the code reads besides kernel rows).
    pub nu_read: Vec<usize>,
    /// Moments needed from `Var::PoseNu`, per segment.
    pub pose_nu_count: Vec<usize>,
    /// Highest `j` of `cos Φ_j`/`sin Φ_j` read, plus one.
    pub angles: usize,
    /// Whether `q`, `q̇` or σ are read (directly, or through moments and angles).
    pub reads_q: bool,
    pub reads_qd: bool,
    pub reads_sigma: bool,
    /// Whether a runtime parameter ([`Var::Param`]) is read.
    pub reads_params: bool,
    /// Straight-line and kernel-table operations (moments and angles not included).
    pub ops: Ops,
}

pub struct Scheduler<'p> {
    prog: &'p Program,
    layout: &'p NuLayout,
    entries: &'p BTreeMap<Id, KernelEntry>,
    /// Number of moment leaves below a node when it is a linear form in `Var::Nu`, else 0.
    lin: Vec<u32>,
    /// For a linear form in the moments: the one moment base all its leaves read
    /// ([`NuLayout::base`]), or `MIXED` when they read several.
    base: Vec<usize>,
    pub table: KernelTable,
}

struct BlockState<'s> {
    /// Nodes another function computed for this one: read as [`Leaf::Shared`].
    shared: &'s BTreeMap<Id, usize>,
    kernel_pos: BTreeMap<usize, usize>,
    /// The factor a kernel root's readers apply to its use (double-kernel parts).
    kernel_scale: BTreeMap<usize, Q>,
    kernels: Vec<KernelUse>,
    temp_of: BTreeMap<u32, usize>,
    stmts: Vec<Stmt>,
    next_temp: usize,
}

impl<'p> Scheduler<'p> {
    pub fn new(
        prog: &'p Program,
        layout: &'p NuLayout,
        entries: &'p BTreeMap<Id, KernelEntry>,
    ) -> Self {
        let nodes = prog.nodes();
        let mut lin = vec![0u32; nodes.len()];
        let mut base = vec![MIXED; nodes.len()];
        for (i, node) in nodes.iter().enumerate() {
            (lin[i], base[i]) = match node {
                Node::Var(Var::Nu { seg, im, .. }) => (1, layout.base(*seg, *im)),
                Node::Neg(a) => (lin[a.index()], base[a.index()]),
                Node::Mul(a, b) if matches!(nodes[a.index()], Node::Const(_)) => {
                    (lin[b.index()], base[b.index()])
                }
                Node::Add(a, b) if lin[a.index()] > 0 && lin[b.index()] > 0 => {
                    let same = base[a.index()] == base[b.index()];
                    (
                        lin[a.index()] + lin[b.index()],
                        if same { base[a.index()] } else { MIXED },
                    )
                }
                _ => (0, MIXED),
            };
        }
        Scheduler {
            prog,
            layout,
            entries,
            lin,
            base,
            table: KernelTable::default(),
        }
    }

    fn is_kernel_candidate(&self, i: usize) -> bool {
        self.lin[i] >= 2 && self.base[i] != MIXED
    }

    /// Coefficients of a linear form in the moments.
    fn collect_linear(&self, id: Id, scale: &Q, acc: &mut BTreeMap<usize, Q>) {
        match self.prog.node(id) {
            Node::Var(Var::Nu { seg, n, im }) => {
                *acc.entry(self.layout.index(*seg, *n, *im))
                    .or_insert_with(Q::zero) += scale;
            }
            Node::Neg(a) => self.collect_linear(*a, &-scale.clone(), acc),
            Node::Mul(a, b) => {
                let c = self.prog.as_const(*a).cloned().unwrap_or_else(Q::one);
                self.collect_linear(*b, &(scale * c), acc);
            }
            Node::Add(a, b) => {
                self.collect_linear(*a, scale, acc);
                self.collect_linear(*b, scale, acc);
            }
            _ => unreachable!("not a linear form in the moments"),
        }
    }

    /// The double-kernel part a kernel root is, through signs and constant factors.
    fn matrix_use(&self, id: Id) -> Option<MatrixUse> {
        let mut id = id;
        let mut scale = Q::one();
        loop {
            if let Some(&entry) = self.entries.get(&id) {
                return Some(MatrixUse {
                    entry,
                    node: id,
                    scale,
                });
            }
            match self.prog.node(id) {
                Node::Neg(a) => {
                    scale = -scale;
                    id = *a;
                }
                Node::Mul(a, b) => {
                    scale *= self.prog.as_const(*a)?;
                    id = *b;
                }
                _ => return None,
            }
        }
    }

    fn table_row(&mut self, id: Id) -> KernelUse {
        if let Some(&u) = self.table.by_node.get(&id) {
            return u;
        }
        let mut acc = BTreeMap::new();
        self.collect_linear(id, &Q::one(), &mut acc);
        let base = self.base[id.index()];
        let row: KernelRow = acc
            .into_iter()
            .filter(|(_, c)| !c.is_zero())
            .map(|(i, c)| (i - base, c))
            .collect();
        let r = self.table.intern(row);
        let u = KernelUse { row: r, base };
        self.table.by_node.insert(id, u);
        u
    }

    /// Whether node `i` is a linear form in the moments (a moment leaf included).
    pub fn is_moment_form(&self, i: usize) -> bool {
        self.lin[i] > 0
    }

    /// Schedules the given roots. `kernels` turns moment kernels into table rows.
    pub fn block(&mut self, roots: &[Id], use_kernels: bool) -> Block {
        self.block_over(roots, use_kernels, &BTreeMap::new())
    }

    /// Schedules the given roots over values computed elsewhere: a node in `shared` is
    /// read as [`Leaf::Shared`] and what lies below it is not this block's.
    pub fn block_over(
        &mut self,
        roots: &[Id],
        use_kernels: bool,
        shared: &BTreeMap<Id, usize>,
    ) -> Block {
        let prog = self.prog;
        let nodes = prog.nodes();
        let n = nodes.len();
        // Pass 1: which linear forms are consumed by non-linear code (kernel roots).
        let mut kroot = vec![false; n];
        if use_kernels {
            let live = prog.live(roots);
            for i in 0..n {
                if !live[i] || self.lin[i] > 0 {
                    continue;
                }
                match &nodes[i] {
                    Node::Add(a, b) | Node::Mul(a, b) => {
                        for c in [a, b] {
                            if self.is_kernel_candidate(c.index()) {
                                kroot[c.index()] = true;
                            }
                        }
                    }
                    Node::Neg(a) if self.is_kernel_candidate(a.index()) => kroot[a.index()] = true,
                    _ => {}
                }
            }
            for r in roots {
                if self.is_kernel_candidate(r.index()) {
                    kroot[r.index()] = true;
                }
            }
        }
        // Pass 2: liveness and use counts, stopping at kernel roots.
        let mut live = vec![false; n];
        let mut uses = vec![0u32; n];
        for r in roots {
            live[r.index()] = true;
            uses[r.index()] += 1;
        }
        for i in (0..n).rev() {
            if !live[i] || kroot[i] || shared.contains_key(&Id(i as u32)) {
                continue;
            }
            match &nodes[i] {
                Node::Add(a, b) | Node::Mul(a, b) => {
                    for c in [a, b] {
                        live[c.index()] = true;
                        uses[c.index()] += 1;
                    }
                }
                Node::Neg(a) => {
                    live[a.index()] = true;
                    uses[a.index()] += 1;
                }
                _ => {}
            }
        }
        // Inputs the block reads.
        let segs = self.layout.count.len();
        let mut nu_count = vec![0usize; segs];
        let mut pose_nu_count = vec![0usize; segs];
        let mut angles = 0usize;
        let (mut reads_q, mut reads_qd, mut reads_sigma) = (false, false, false);
        let mut reads_params = false;
        let mut note_var = |v: &Var| match *v {
            Var::Nu { seg, n, .. } => {
                let c = &mut nu_count[seg as usize];
                *c = (*c).max(n as usize + 1);
            }
            Var::PoseNu { seg, n, .. } => {
                let c = &mut pose_nu_count[seg as usize];
                *c = (*c).max(n as usize + 1);
            }
            Var::CosPhi(j) | Var::SinPhi(j) => angles = angles.max(j as usize + 1),
            Var::Q(_) => reads_q = true,
            Var::Qd(_) | Var::Qdd(_) => reads_qd = true,
            Var::Sigma => reads_sigma = true,
            Var::Param(_) => reads_params = true,
        };
        for i in 0..n {
            if !live[i] || shared.contains_key(&Id(i as u32)) {
                continue;
            }
            if let Node::Var(v) = &nodes[i] {
                note_var(v);
            }
        }
        let nu_read = nu_count.clone();
        let mut st = BlockState {
            shared,
            kernel_pos: BTreeMap::new(),
            kernel_scale: BTreeMap::new(),
            kernels: Vec::new(),
            temp_of: BTreeMap::new(),
            stmts: Vec::new(),
            next_temp: 0,
        };
        // Kernel rows first: those that are no double-kernel part in node order, then
        // the parts grouped by (segment, weight), in each group the real parts before
        // the imaginary ones (so that the emitted loops over them need no branch), each
        // in node order.
        // (family key: segment, weight and imaginary part, or none), node, the part
        type Ordered = (Option<(usize, usize, bool)>, usize, Option<MatrixUse>);
        let mut order: Vec<Ordered> = (0..n)
            .filter(|&i| live[i] && kroot[i])
            .map(|i| {
                let m = self.matrix_use(Id(i as u32));
                (
                    m.as_ref()
                        .map(|m| (m.entry.seg, m.entry.weight, m.entry.im)),
                    i,
                    m,
                )
            })
            .collect();
        order.sort_by_key(|o| (o.0, o.1));
        let mut rows: Vec<(Ordered, KernelUse)> = Vec::with_capacity(order.len());
        for o in order {
            let u = match &o.2 {
                Some(m) => {
                    st.kernel_scale.insert(o.1, m.scale.clone());
                    self.table_row(m.node)
                }
                None => self.table_row(Id(o.1 as u32)),
            };
            rows.push((o, u));
        }
        // The dot-product rows by length, so that the emitted loops' trip counts come
        // in long stretches of one value (branch prediction; about 1 % of `terms` at
        // `-O2` on x86-64).
        rows.sort_by_key(|(o, u)| {
            let len = if o.0.is_none() {
                self.table.rows[u.row].len()
            } else {
                0
            };
            (o.0, len, o.1)
        });
        // One kern[] slot per kernel up to a constant factor: kernel roots that are
        // constant multiples of one double-kernel part read the same use, and so does a
        // dot product proportional to an earlier one at the same moment base, each with
        // its factor in the code that reads it.
        let mut first_of: BTreeMap<(bool, usize, KernelRow), (usize, Q)> = BTreeMap::new();
        let mut aliases: Vec<(usize, usize)> = Vec::new();
        let table = &self.table;
        rows.retain(|((part, i, _), u)| {
            let row = &table.rows[u.row];
            // A double-kernel part's row is its bare part, which the families compute:
            // only the same use is the same kernel.
            let lead = match (part, row.first()) {
                (None, Some((_, c))) => c.clone(),
                _ => Q::one(),
            };
            let shape: KernelRow = row.iter().map(|(n, c)| (*n, c / &lead)).collect();
            match first_of.entry((part.is_some(), u.base, shape)) {
                std::collections::btree_map::Entry::Vacant(v) => {
                    v.insert((*i, lead));
                    true
                }
                std::collections::btree_map::Entry::Occupied(o) => {
                    let (first, first_lead) = o.get();
                    if part.is_none() {
                        st.kernel_scale.insert(*i, &lead / first_lead);
                    }
                    aliases.push((*i, *first));
                    false
                }
            }
        });
        let plain = rows.iter().take_while(|(o, _)| o.0.is_none()).count();
        let rest = rows.split_off(plain);
        let (reim, mut rows) = self.pair_parts(rows);
        rows.extend(rest);
        let mut matrix = Vec::with_capacity(rows.len());
        for ((_, i, m), u) in rows {
            // the moments a kernel reads count as read
            self.table.note_reach(&u, self.layout, &mut nu_count);
            st.kernel_pos.insert(i, st.kernels.len());
            st.kernels.push(u);
            matrix.push(m);
        }
        for (i, first) in aliases {
            let k = st.kernel_pos[&first];
            st.kernel_pos.insert(i, k);
        }
        for i in 0..n {
            let is_op = matches!(nodes[i], Node::Add(..) | Node::Mul(..) | Node::Neg(..));
            let computed = !kroot[i] && !shared.contains_key(&Id(i as u32));
            if live[i] && computed && is_op && uses[i] >= 2 {
                let mut expr = self.build(Id(i as u32), &kroot, &mut st);
                expr.lead_positive();
                let t = st.next_temp;
                st.next_temp += 1;
                st.stmts.push(Stmt { temp: t, expr });
                st.temp_of.insert(i as u32, t);
            }
        }
        let mut outputs = Vec::with_capacity(roots.len());
        for r in roots {
            let mut e = self.operand(*r, &kroot, &mut st);
            e.lead_positive();
            outputs.push(e);
        }
        let mut ops = Ops::default();
        for s in &st.stmts {
            ops += s.expr.ops();
        }
        for e in &outputs {
            ops += e.ops();
        }
        for u in &st.kernels {
            let nnz = self.table.rows[u.row].len();
            ops += Ops {
                add: nnz,
                mul: nnz,
                ..Ops::default()
            };
        }
        reads_q |= angles > 0 || nu_count.iter().chain(&pose_nu_count).any(|&c| c > 0);
        reads_sigma |= pose_nu_count.iter().any(|&c| c > 0);
        Block {
            kernels: st.kernels,
            reim,
            matrix,
            stmts: st.stmts,
            outputs,
            nu_count,
            nu_read,
            pose_nu_count,
            angles,
            reads_q,
            reads_qd,
            reads_sigma,
            reads_params,
            ops,
        }
    }

    /// Dot-product rows (in their order) regrouped: every row used at both a segment's
    /// real and its imaginary moment base as an adjacent pair (real first), the pairs
    /// by row length, then the rest as they came. Returns the number of pairs.
    fn pair_parts<T>(&self, rows: Vec<(T, KernelUse)>) -> (usize, Vec<(T, KernelUse)>) {
        let part = |u: &KernelUse| {
            let (seg, _) = self.layout.locate(u.base);
            (seg, u.base != self.layout.base(seg as u16, false))
        };
        let mut real: BTreeMap<(usize, usize), Vec<usize>> = BTreeMap::new();
        for (k, (_, u)) in rows.iter().enumerate() {
            if let (seg, false) = part(u) {
                real.entry((u.row, seg)).or_default().push(k);
            }
        }
        let mut pairs: Vec<(usize, usize)> = Vec::new();
        for (k, (_, u)) in rows.iter().enumerate() {
            if let (seg, true) = part(u) {
                if let Some(r) = real.get_mut(&(u.row, seg)).and_then(|v| v.pop()) {
                    pairs.push((r, k));
                }
            }
        }
        let key = |&(r, _): &(usize, usize)| {
            let u = &rows[r].1;
            (self.table.rows[u.row].len(), u.row, part(u).0)
        };
        pairs.sort_by_key(key);
        let mut order: Vec<usize> = pairs.iter().flat_map(|&(r, i)| [r, i]).collect();
        let mut paired = vec![false; rows.len()];
        for &k in &order {
            paired[k] = true;
        }
        order.extend((0..rows.len()).filter(|&k| !paired[k]));
        let mut slots: Vec<Option<(T, KernelUse)>> = rows.into_iter().map(Some).collect();
        let out = order.into_iter().filter_map(|k| slots[k].take()).collect();
        (pairs.len(), out)
    }

    /// The expression that reads node `id` from its user's point of view.
    fn operand(&mut self, id: Id, kroot: &[bool], st: &mut BlockState) -> Expr {
        let i = id.index();
        if let Some(&k) = st.shared.get(&id) {
            return Expr::leaf(Leaf::Shared(k));
        }
        if let Some(&t) = st.temp_of.get(&(i as u32)) {
            return Expr::leaf(Leaf::Temp(t));
        }
        if kroot[i] {
            let mut e = Expr::leaf(Leaf::Kernel(st.kernel_pos[&i]));
            if let Some(c) = st.kernel_scale.get(&i) {
                e.terms[0].coef = c.clone();
            }
            return e;
        }
        match self.prog.node(id) {
            Node::Const(c) => Expr::constant(c.clone()),
            Node::Var(v) => Expr::leaf(Leaf::Input(*v)),
            _ => self.build(id, kroot, st),
        }
    }

    /// The inlined expression of an operation node.
    fn build(&mut self, id: Id, kroot: &[bool], st: &mut BlockState) -> Expr {
        match self.prog.node(id).clone() {
            Node::Add(a, b) => {
                let mut e = self.operand(a, kroot, st);
                e.terms.extend(self.operand(b, kroot, st).terms);
                e
            }
            Node::Neg(a) => self.operand(a, kroot, st).negate(),
            Node::Mul(a, b) => {
                let ea = self.operand(a, kroot, st);
                let eb = self.operand(b, kroot, st);
                let ta = self.as_term(ea, st);
                let tb = self.as_term(eb, st);
                let mut factors = ta.factors;
                factors.extend(tb.factors);
                Expr {
                    terms: vec![Term {
                        coef: ta.coef * tb.coef,
                        factors,
                    }],
                }
            }
            Node::Const(c) => Expr::constant(c),
            Node::Var(v) => Expr::leaf(Leaf::Input(v)),
        }
    }

    /// A factor of a product: a single term as it is, a short flat sum in parentheses,
    /// anything longer in a temporary of its own.
    fn as_term(&mut self, mut e: Expr, st: &mut BlockState) -> Term {
        match e.terms.len() {
            0 => Term {
                coef: Q::zero(),
                factors: Vec::new(),
            },
            1 => e.terms.pop().unwrap_or_else(|| unreachable!()),
            k => {
                e.lead_positive();
                if k <= 4 && e.is_flat() {
                    Term {
                        coef: Q::one(),
                        factors: vec![Factor::Paren(e)],
                    }
                } else {
                    let t = st.next_temp;
                    st.next_temp += 1;
                    st.stmts.push(Stmt { temp: t, expr: e });
                    Term {
                        coef: Q::one(),
                        factors: vec![Factor::Leaf(Leaf::Temp(t))],
                    }
                }
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use crate::emit::plan::Plan;
    use crate::emit::Precision;

    /// Every function's leading kernels are (real, imaginary) pairs of one row at one
    /// segment, and what is left to evaluate alone holds no such pair.
    #[test]
    fn dot_rows_at_both_parts_of_a_segment_are_paired() {
        let arm = crate::arm::parse_arm_str(
            "name = \"pairs\"\nexpansion_order = 3\ngravity = [0.0, -9.81]\n\
             [[segment]]\nlength = 0.12\ncurvature_degree = 2\ndensity = 0.3\n\
             bending_stiffness = 0.012\n\
             [[segment]]\nlength = 0.1\ncurvature_degree = 0\ndensity = 0.25\n\
             bending_stiffness = 0.008\n\
             [[actuator]]\nkind = \"moment\"\nsegment = 2\n",
            "pairs.toml",
        )
        .unwrap();
        let plan = Plan::new(&crate::derive::derive_emitted(&arm), true, Precision::F64).unwrap();
        let layout = &plan.layout;
        let part = |base: usize| {
            let (seg, _) = layout.locate(base);
            (seg, base != layout.base(seg as u16, false))
        };
        let mut pairs = 0;
        for f in plan.funcs() {
            for d in &f.dots {
                for p in d.uses[..2 * d.reim].chunks(2) {
                    assert_eq!(p[0].row, p[1].row);
                    let ((s0, im0), (s1, im1)) = (part(p[0].base), part(p[1].base));
                    assert!(s0 == s1 && !im0 && im1, "{p:?}");
                }
                pairs += d.reim;
                if d.start == 0 {
                    let alone = d.singles();
                    for u in alone.iter().filter(|u| !part(u.base).1) {
                        let seg = part(u.base).0;
                        assert!(
                            !alone
                                .iter()
                                .any(|v| v.row == u.row && part(v.base) == (seg, true)),
                            "{u:?} was left without its imaginary part"
                        );
                    }
                }
            }
        }
        assert!(pairs > 10, "too few pairs to mean anything: {pairs}");
    }

    /// A kernel is evaluated once per function however many constant multiples of it
    /// the code reads: no two dot-product uses of a function are proportional, and no
    /// two of its double-kernel entries are the same.
    #[test]
    fn every_kernel_is_evaluated_once_per_function() {
        let arm = crate::arm::parse_arm_str(
            "name = \"once\"\nexpansion_order = 4\ngravity = [0.0, -9.81]\n\
             [[segment]]\nlength = 0.12\ncurvature_degree = 2\ndensity = 0.3\n\
             bending_stiffness = 0.012\n\
             [[segment]]\nlength = 0.1\ncurvature_degree = 1\ndensity = [0.25, -0.1]\n\
             bending_stiffness = 0.008\n\
             [[actuator]]\nkind = \"moment\"\nsegment = 2\n",
            "once.toml",
        )
        .unwrap();
        let plan = Plan::new(&crate::derive::derive_emitted(&arm), true, Precision::F64).unwrap();
        let mut entries = 0;
        for f in plan.funcs() {
            let mut seen = std::collections::BTreeSet::new();
            for u in f.dot_uses() {
                let row = &plan.table.rows[u.row];
                let lead = &row[0].1;
                let shape: Vec<(usize, crate::exact::Q)> =
                    row.iter().map(|(n, c)| (*n, c / lead)).collect();
                assert!(seen.insert((u.base, shape)), "{u:?} evaluated twice");
            }
            for fam in &f.families {
                let mut seen = std::collections::BTreeSet::new();
                for (k, e) in fam.entries.iter().enumerate() {
                    let part = k >= fam.sums;
                    assert!(
                        seen.insert((part, e.first, e.second)),
                        "segment {}: entry {k} repeats an earlier one",
                        fam.seg
                    );
                }
                entries += fam.entries.len();
            }
        }
        assert!(entries > 100, "too few entries to mean anything: {entries}");
    }
}
