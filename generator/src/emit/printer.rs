//! Printing scheduled expressions as source text; each language supplies the spelling
//! of leaves and literals through [`Syntax`].

use super::schedule::{Expr, Factor, Leaf, Term};
use crate::exact::Q;
use num_traits::{One, Signed};

pub trait Syntax {
    fn leaf(&self, leaf: &Leaf) -> String;
    fn literal(&self, q: &Q) -> String;
}

/// Target width of a line of emitted code.
pub const WIDTH: usize = 96;

fn term_body(t: &Term, syn: &dyn Syntax) -> String {
    let c = t.coef.abs();
    let mut parts: Vec<String> = Vec::new();
    if !c.is_one() || t.factors.is_empty() {
        parts.push(syn.literal(&c));
    }
    for f in &t.factors {
        parts.push(match f {
            Factor::Leaf(l) => syn.leaf(l),
            Factor::Paren(e) => format!("({})", inline(e, syn)),
        });
    }
    parts.join(" * ")
}

/// An expression on one line.
pub fn inline(e: &Expr, syn: &dyn Syntax) -> String {
    pieces(e, syn).concat()
}

/// Pieces `a`, ` + b`, ` - c`… of a sum.
fn pieces(e: &Expr, syn: &dyn Syntax) -> Vec<String> {
    if e.terms.is_empty() {
        return vec![syn.literal(&Q::from_integer(0.into()))];
    }
    let mut out = Vec::with_capacity(e.terms.len());
    for (i, t) in e.terms.iter().enumerate() {
        let body = term_body(t, syn);
        let neg = t.coef.is_negative();
        out.push(match (i, neg) {
            (0, false) => body,
            (0, true) => format!("-{body}"),
            (_, false) => format!(" + {body}"),
            (_, true) => format!(" - {body}"),
        });
    }
    out
}

/// `prefix expr suffix`, wrapped at [`WIDTH`] with continuation lines indented by
/// `indent + 4`; every line starts with `indent` spaces. With `parens`, a wrapped
/// expression is enclosed in parentheses (Python needs them to continue a line).
pub fn statement(
    prefix: &str,
    e: &Expr,
    suffix: &str,
    syn: &dyn Syntax,
    indent: usize,
    parens: bool,
) -> String {
    let ps = pieces(e, syn);
    let pad = " ".repeat(indent);
    let one_line = format!("{pad}{prefix}{}{suffix}", ps.concat());
    if one_line.len() <= WIDTH {
        return one_line + "\n";
    }
    let cont = " ".repeat(indent + 4);
    let mut out = String::new();
    let mut line = format!("{pad}{prefix}{}", if parens { "(" } else { "" });
    let mut first = true;
    for p in ps {
        if !first && line.len() + p.len() > WIDTH {
            out.push_str(line.trim_end());
            out.push('\n');
            line = format!("{cont}{}", p.trim_start());
        } else {
            line.push_str(&p);
        }
        first = false;
    }
    line.push_str(if parens { ")" } else { "" });
    line.push_str(suffix);
    out.push_str(&line);
    out.push('\n');
    out
}
