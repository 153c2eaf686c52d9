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
    /// With `temp_array`: the array slot of each temporary (see [`temp_slots`]);
    /// `None` keeps one slot per temporary.
    pub slots: Option<&'a [usize]>,
}

impl Syntax for Spelling<'_> {
    fn leaf(&self, leaf: &Leaf) -> String {
        match leaf {
            Leaf::Temp(t) if self.temp_array => match self.slots {
                Some(slots) => format!("t[{}]", slots[*t]),
                None => format!("t[{t}]"),
            },
            Leaf::Temp(t) => format!("t{t}"),
            Leaf::Kernel(r) => format!("kern[{r}]"),
            Leaf::Input(v) => match *v {
                Var::Q(i) => format!("q[{i}]"),
                Var::Qd(i) => format!("qd[{i}]"),
                Var::Sigma => "sigma".into(),
                Var::Nu { seg, n, im } => format!("nu[{}]", self.plan.layout.index(seg, n, im)),
                Var::PoseNu { n, im, .. } => {
                    format!("pnu[{}]", n as usize + if im { self.pose_count } else { 0 })
                }
                Var::CosPhi(j) => format!("cphi[{j}]"),
                Var::SinPhi(j) => format!("sphi[{j}]"),
            },
        }
    }

    fn literal(&self, q: &Q) -> String {
        literal(q, self.precision)
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
pub fn temporaries(block: &Block, syn: &dyn Syntax, style: &StmtStyle) -> String {
    statements(&block.stmts, syn, style)
}

/// Some statements of a block, one each.
pub fn statements(stmts: &[Stmt], syn: &dyn Syntax, style: &StmtStyle) -> String {
    let mut out = String::new();
    for s in stmts {
        let prefix = if style.temp_array {
            format!("{} = ", syn.leaf(&Leaf::Temp(s.temp)))
        } else {
            format!("{}t{} = ", style.decl, s.temp)
        };
        out.push_str(&statement(
            &prefix,
            &s.expr,
            style.end,
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
/// microcontroller's stack). Returns the slot of each temporary and the slot count.
pub fn temp_slots(block: &Block) -> (Vec<usize>, usize) {
    let n = block.stmts.len();
    let temps = block.stmts.iter().map(|s| s.temp + 1).max().unwrap_or(0);
    // Last statement reading each temporary; outputs read after every statement.
    let mut last = vec![0usize; temps];
    for (k, s) in block.stmts.iter().enumerate() {
        last[s.temp] = last[s.temp].max(k);
        for_each_leaf(&s.expr, &mut |l| {
            if let Leaf::Temp(t) = l {
                last[*t] = last[*t].max(k);
            }
        });
    }
    for e in &block.outputs {
        for_each_leaf(e, &mut |l| {
            if let Leaf::Temp(t) = l {
                last[*t] = n;
            }
        });
    }
    // Temporaries whose last reader is statement k, freed once k is written.
    let mut dies_at: Vec<Vec<usize>> = vec![Vec::new(); n + 1];
    for s in &block.stmts {
        dies_at[last[s.temp]].push(s.temp);
    }
    let mut slot = vec![usize::MAX; temps];
    let mut free: std::collections::BTreeSet<usize> = std::collections::BTreeSet::new();
    let mut count = 0usize;
    for (k, s) in block.stmts.iter().enumerate() {
        let c = match free.pop_first() {
            Some(c) => c,
            None => {
                count += 1;
                count - 1
            }
        };
        slot[s.temp] = c;
        // Slots of temporaries read for the last time here are free for the next one;
        // this statement's own target cannot be among them unless nothing reads it.
        for &t in &dies_at[k] {
            free.insert(slot[t]);
        }
    }
    (slot, count)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::arm::parse_arm_str;
    use crate::derive::derive_statics;

    /// Replays every block of a two-segment model with slot-reused temporaries: each
    /// read must find in its slot the temporary it means, never a later one.
    #[test]
    fn reused_slots_never_overwrite_a_live_temporary() {
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
        let plan = Plan::new(&derive_statics(&arm), true).unwrap();
        let mut checked = 0;
        for f in [
            &plan.inertia,
            &plan.terms,
            &plan.gravity,
            &plan.tip_jacobian,
        ] {
            let b = &f.block;
            let (slot, count) = temp_slots(b);
            let temps = b.stmts.iter().map(|s| s.temp + 1).max().unwrap_or(0);
            assert!(count <= temps);
            let mut owner = vec![usize::MAX; count];
            let check = |e: &Expr, owner: &[usize]| {
                for_each_leaf(e, &mut |l| {
                    if let Leaf::Temp(t) = l {
                        assert_eq!(owner[slot[*t]], *t, "slot of t{t} was overwritten");
                    }
                });
            };
            for s in &b.stmts {
                check(&s.expr, &owner);
                owner[slot[s.temp]] = s.temp;
                checked += 1;
            }
            for e in &b.outputs {
                check(e, &owner);
            }
        }
        assert!(
            checked > 100,
            "too few statements to mean anything: {checked}"
        );
    }
}
