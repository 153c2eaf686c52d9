//! Function bodies shared by the three languages: the spelling of leaves, the
//! preamble (moments, cumulative angles, kernel rows) and the straight-line part.

use super::number::{literal, Precision};
use super::plan::{AngleStep, Plan};
use super::printer::{statement, Syntax};
use super::schedule::{Block, Expr, Factor, Leaf, Stmt, Term};
use crate::exact::Q;
use crate::ir::Var;
use num_traits::One;

/// Leaf and literal spelling common to C, Rust and Python: `q[i]`, `qd[i]`, `sigma`,
/// `nu[i]` (flat moments), `pnu[i]` (pose moments), `cphi[j]`, `sphi[j]`, `t<k>`,
/// `kern[r]`.
pub struct Spelling<'a> {
    pub plan: &'a Plan,
    pub precision: Precision,
    /// Moment count of the pose moments of the function being printed.
    pub pose_count: usize,
    /// Temporaries as elements `t[k]` of one array instead of variables `t<k>`.
    pub temp_array: bool,
    /// With `temp_array`: the array slot of each temporary (see [`temp_slots`]), or
    /// none for a temporary that lives inside one part of a split body, which is then
    /// a named local `t<k>`; `None` keeps one slot per temporary.
    pub slots: Option<&'a [Option<usize>]>,
    /// What precedes a runtime parameter's field name: `P->` (C), `p.` (Rust), `` (Python).
    pub param_prefix: &'static str,
    /// Literals spelled for Rust (`0.5f32`, not C's `0.5f`).
    pub rust: bool,
}

impl Spelling<'_> {
    /// Whether temporary `t` is an element of the array `t` (else a named local).
    pub fn in_array(&self, t: usize) -> bool {
        self.temp_array && self.slots.is_none_or(|s| s[t].is_some())
    }
}

impl Syntax for Spelling<'_> {
    fn leaf(&self, leaf: &Leaf) -> String {
        match leaf {
            Leaf::Temp(t) if self.temp_array => match self.slots.map(|s| s[*t]) {
                Some(Some(slot)) => format!("t[{slot}]"),
                Some(None) => format!("t{t}"),
                None => format!("t[{t}]"),
            },
            Leaf::Temp(t) => format!("t{t}"),
            Leaf::Kernel(r) => format!("kern[{r}]"),
            Leaf::Shared(k) => format!("s[{k}]"),
            Leaf::Input(v) => match *v {
                Var::Q(i) => format!("q[{i}]"),
                Var::Qd(i) => format!("qd[{i}]"),
                Var::Qdd(i) => format!("qdd[{i}]"),
                Var::Sigma => "sigma".into(),
                Var::Nu { seg, n, im } => format!("nu[{}]", self.plan.layout.index(seg, n, im)),
                Var::PoseNu { n, im, .. } => {
                    format!("pnu[{}]", n as usize + if im { self.pose_count } else { 0 })
                }
                Var::CosPhi(j) => format!("cphi[{j}]"),
                Var::SinPhi(j) => format!("sphi[{j}]"),
                Var::Param(k) => format!(
                    "{}{}",
                    self.param_prefix,
                    self.plan.params.spelling(k as usize)
                ),
            },
        }
    }

    fn literal(&self, q: &Q) -> String {
        let c = literal(q, self.precision);
        if self.rust {
            super::number::rust_spelling(c)
        } else {
            c
        }
    }
}

fn q_term(c: &Q, idx: usize) -> Term {
    Term {
        coef: c.clone(),
        factors: vec![Factor::Leaf(Leaf::Input(Var::Q(idx as u16)))],
    }
}

/// `Σ c_i q[i]`, the increment of the cumulative angle over one segment.
pub fn angle_increment(step: &AngleStep) -> Expr {
    Expr {
        terms: step.terms.iter().map(|(c, i)| q_term(c, *i)).collect(),
    }
}

/// The moment argument `a_j = L_j q_{j,0}` (times σ for a pose).
pub fn moment_argument(plan: &Plan, seg: usize, pose: bool) -> Expr {
    let mut t = q_term(&plan.seg_length[seg], plan.seg_offset[seg]);
    if pose {
        t.factors.push(Factor::Leaf(Leaf::Input(Var::Sigma)));
    }
    if t.coef.is_one() {
        t.coef = Q::one();
    }
    Expr { terms: vec![t] }
}

/// How one language declares a temporary and ends a statement.
pub struct StmtStyle {
    /// `const double `, `let `, or ``.
    pub decl: String,
    pub end: &'static str,
    pub indent: usize,
    /// Wrap continued expressions in parentheses (Python).
    pub parens: bool,
    /// Temporaries are elements of an array `t` (declared by the caller).
    pub temp_array: bool,
}

/// The temporaries of a block, one statement each.
pub fn temporaries(block: &Block, syn: &Spelling, style: &StmtStyle) -> String {
    statements(&block.stmts, syn, style)
}

/// Some statements of a block, one each. A temporary kept in a reused array slot is
/// named in a comment (`t[17] = …; /* t812 */`), so that under a debugger a slot
/// reads as the temporary it holds at that point.
pub fn statements(stmts: &[Stmt], syn: &Spelling, style: &StmtStyle) -> String {
    let mut out = String::new();
    for s in stmts {
        let (prefix, end) = if style.temp_array && syn.in_array(s.temp) {
            let named = if syn.slots.is_some() {
                format!("{} /* t{} */", style.end, s.temp)
            } else {
                style.end.to_string()
            };
            (format!("{} = ", syn.leaf(&Leaf::Temp(s.temp))), named)
        } else {
            (
                format!("{}t{} = ", style.decl, s.temp),
                style.end.to_string(),
            )
        };
        out.push_str(&statement(
            &prefix,
            &s.expr,
            &end,
            syn,
            style.indent,
            style.parens,
        ));
    }
    out
}

/// `target(i) = output_i` for every output of a block (`return output_i` for an empty target).
pub fn outputs(
    block: &Block,
    syn: &dyn Syntax,
    style: &StmtStyle,
    target: impl Fn(usize) -> String,
) -> String {
    let mut out = String::new();
    for (i, e) in block.outputs.iter().enumerate() {
        let t = target(i);
        let prefix = if t.is_empty() {
            "return ".to_string()
        } else {
            format!("{t} = ")
        };
        out.push_str(&statement(
            &prefix,
            e,
            style.end,
            syn,
            style.indent,
            style.parens,
        ));
    }
    out
}

/// One expression on a single line.
pub fn inline(e: &Expr, syn: &dyn Syntax) -> String {
    super::printer::inline(e, syn)
}

/// Calls `f` on every leaf an expression reads.
pub fn for_each_leaf(e: &Expr, f: &mut dyn FnMut(&Leaf)) {
    for t in &e.terms {
        for factor in &t.factors {
            match factor {
                Factor::Leaf(l) => f(l),
                Factor::Paren(inner) => for_each_leaf(inner, f),
            }
        }
    }
}

/// Array slots for a block's temporaries, reused once a temporary is dead: a
/// temporary's slot is freed after its last reader, so the scratch array holds the
/// most temporaries ever alive at once rather than all of them (which matters on a
/// microcontroller's stack). With `part` (the statements per part of a split body),
/// a temporary whose readers are all in the part that defines it gets no slot: it is
/// a named local of that part, which costs nothing at -O2 and reads better. Returns
/// the slot of each temporary and the slot count.
pub fn temp_slots(block: &Block, part: Option<usize>) -> (Vec<Option<usize>>, usize) {
    let n = block.stmts.len();
    let temps = block.stmts.iter().map(|s| s.temp + 1).max().unwrap_or(0);
    let part_of = |k: usize| part.map_or(0, |p| k / p);
    // Last statement reading each temporary; outputs read after every statement.
    let mut last = vec![0usize; temps];
    let mut defined = vec![0usize; temps];
    let mut crosses = vec![part.is_none(); temps];
    // Writes and reads of each temporary.
    let mut refs = vec![0usize; temps];
    for (k, s) in block.stmts.iter().enumerate() {
        last[s.temp] = last[s.temp].max(k);
        defined[s.temp] = k;
        refs[s.temp] += 1;
        for_each_leaf(&s.expr, &mut |l| {
            if let Leaf::Temp(t) = l {
                last[*t] = last[*t].max(k);
                refs[*t] += 1;
                if part_of(k) != part_of(defined[*t]) {
                    crosses[*t] = true;
                }
            }
        });
    }
    for e in &block.outputs {
        for_each_leaf(e, &mut |l| {
            if let Leaf::Temp(t) = l {
                last[*t] = n;
                refs[*t] += 1;
                crosses[*t] = true;
            }
        });
    }
    // Temporaries whose last reader is statement k, freed once k is written.
    let mut dies_at: Vec<Vec<usize>> = vec![Vec::new(); n + 1];
    for s in block.stmts.iter().filter(|s| crosses[s.temp]) {
        dies_at[last[s.temp]].push(s.temp);
    }
    let mut slot = vec![None; temps];
    let mut free: std::collections::BTreeSet<usize> = std::collections::BTreeSet::new();
    let mut count = 0usize;
    for (k, s) in block.stmts.iter().enumerate() {
        if crosses[s.temp] {
            let c = match free.pop_first() {
                Some(c) => c,
                None => {
                    count += 1;
                    count - 1
                }
            };
            slot[s.temp] = Some(c);
        }
        // Slots of temporaries read for the last time here are free for the next one;
        // this statement's own target cannot be among them unless nothing reads it.
        for &t in &dies_at[k] {
            free.insert(slot[t].expect("a crossing temporary has a slot"));
        }
    }
    // In a split body the most used slots come first: a load or store at a small offset
    // from the array is one instruction on a microcontroller (the Cortex-M4F reaches
    // t[255] in single precision), a larger one needs its address formed first.
    // (Measured on reach_arm's f32 C terms_ws at -Os: 341 instructions and 1.4 KB of
    // text fewer; the Rust crate, one body per function, gained nothing.)
    if part.is_none() {
        return (slot, count);
    }
    let mut uses = vec![0usize; count];
    for (t, c) in slot.iter().enumerate() {
        if let Some(c) = c {
            uses[*c] += refs[t];
        }
    }
    let mut order: Vec<usize> = (0..count).collect();
    order.sort_by_key(|&c| (std::cmp::Reverse(uses[c]), c));
    let mut renamed = vec![0usize; count];
    for (new, &old) in order.iter().enumerate() {
        renamed[old] = new;
    }
    for c in slot.iter_mut().flatten() {
        *c = renamed[*c];
    }
    (slot, count)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::arm::parse_arm_str;
    use crate::derive::derive_emitted;

    /// Replays every block of a two-segment model with slot-reused temporaries: each
    /// read must find in its slot the temporary it means, never a later one.
    #[test]
    fn reused_slots_never_overwrite_a_live_temporary_and_locals_stay_in_their_part() {
        let arm = parse_arm_str(
            r#"
name = "slots"
gravity = [0.0, -9.81]
expansion_order = 3
[[segment]]
length = 0.1
curvature_degree = 1
density = 0.3
bending_stiffness = 0.01
[[segment]]
length = 0.08
curvature_degree = 2
density = [0.2, -0.05]
bending_stiffness = 0.008
"#,
            "slots.toml",
        )
        .unwrap();
        let plan = Plan::new(&derive_emitted(&arm), true, Precision::F64).unwrap();
        let mut checked = 0;
        let funcs = [
            &plan.inertia,
            &plan.terms,
            &plan.gravity,
            &plan.tip_jacobian,
        ];
        for f in funcs.into_iter().chain(&plan.shares) {
            let b = &f.block;
            // One slot per live temporary, and (parts of 7 statements) slots only for
            // temporaries read outside the part that defines them.
            for part in [None, Some(7)] {
                let (slot, count) = temp_slots(b, part);
                let temps = b.stmts.iter().map(|s| s.temp + 1).max().unwrap_or(0);
                assert!(count <= temps);
                let part_of = |k: usize| part.map_or(0, |p| k / p);
                let mut defined_in = vec![usize::MAX; temps];
                let mut owner = vec![usize::MAX; count];
                let check = |e: &Expr, owner: &[usize], defined_in: &[usize], k: Option<usize>| {
                    for_each_leaf(e, &mut |l| {
                        if let Leaf::Temp(t) = l {
                            match slot[*t] {
                                Some(s) => {
                                    assert_eq!(owner[s], *t, "slot of t{t} was overwritten")
                                }
                                None => assert_eq!(
                                    k.map(part_of),
                                    Some(defined_in[*t]),
                                    "the local t{t} is read outside its part"
                                ),
                            }
                        }
                    });
                };
                for (k, s) in b.stmts.iter().enumerate() {
                    check(&s.expr, &owner, &defined_in, Some(k));
                    defined_in[s.temp] = part_of(k);
                    if let Some(c) = slot[s.temp] {
                        owner[c] = s.temp;
                    }
                    checked += 1;
                }
                for e in &b.outputs {
                    check(e, &owner, &defined_in, None);
                }
            }
        }
        assert!(
            checked > 100,
            "too few statements to mean anything: {checked}"
        );
    }
}
