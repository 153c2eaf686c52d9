//! Worst-case stack of the emitted C's functions, from the compiler's own frame sizes.
//!
//! A function's frame depends on the compiler, the target and the flags, so the
//! generated header cannot state it. What the generator does know is the shape of
//! its own C: every function is defined at column 0 with its body closed by a `}` at
//! column 0, there is no recursion and no function pointer. So the worst case of a
//! public function is its frame (`-fstack-usage`, gcc and clang) plus the largest worst
//! case among the functions it calls, where a helper the compiler inlined (absent from
//! the frame list) passes its own callees on to its caller. Calls into the C library
//! (`sin`, `cos`, `sqrt`) are listed apart: their frames are the library's.

use std::collections::{BTreeMap, BTreeSet};

/// One function's frame as the compiler reported it.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Frame {
    pub bytes: u64,
    /// `false` for `dynamic` without `bounded` (a variable-length array or `alloca`).
    pub bounded: bool,
}

/// Parses a `-fstack-usage` file: `file:line[:column]:function<TAB>bytes<TAB>kinds`.
/// `what` names the file in errors.
pub fn parse_frames(text: &str, what: &str) -> Result<BTreeMap<String, Frame>, String> {
    let mut out = BTreeMap::new();
    for (k, line) in text.lines().enumerate() {
        if line.trim().is_empty() {
            continue;
        }
        let bad = || format!("{what}, line {}: not a stack-usage line: {line:?}", k + 1);
        let mut fields = line.split('\t');
        let place = fields.next().ok_or_else(bad)?;
        let bytes = fields.next().ok_or_else(bad)?;
        let kinds = fields.next().ok_or_else(bad)?;
        let name = place
            .rsplit(':')
            .next()
            .filter(|n| !n.is_empty())
            .ok_or_else(bad)?;
        let bytes: u64 = bytes.trim().parse().map_err(|_| bad())?;
        let kinds: Vec<&str> = kinds.trim().split(',').collect();
        let bounded = !kinds.contains(&"dynamic") || kinds.contains(&"bounded");
        out.insert(name.to_string(), Frame { bytes, bounded });
    }
    Ok(out)
}

/// A function defined in the emitted source.
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub struct Defined {
    /// Not `static`: part of the header's interface.
    pub public: bool,
    /// Functions it calls, defined in the source or not.
    pub calls: BTreeSet<String>,
}

const NOT_CALLS: [&str; 8] = [
    "if", "for", "while", "switch", "return", "sizeof", "defined", "do",
];

/// The functions the emitted C source defines and what each calls. A definition
/// starts at column 0, may continue its parameter list on indented lines, and opens
/// its body with a `{` line; a call through a function-like macro of the source
/// (`NAME_SQRT(x)`) counts as the calls in the macro's body.
pub fn call_graph(source: &str) -> BTreeMap<String, Defined> {
    let clean = without_comments(source);
    let lines: Vec<&str> = clean.lines().collect();
    let mut macros: BTreeMap<String, Vec<String>> = BTreeMap::new();
    for l in &lines {
        if let Some(rest) = l.strip_prefix("#define ") {
            if let Some((head, body)) = rest.split_once(") ") {
                if let Some((name, _)) = head.split_once('(') {
                    macros.insert(name.to_string(), called_names(body));
                }
            }
        }
    }
    let calls_in = |line: &str| -> Vec<String> {
        called_names(line)
            .into_iter()
            .flat_map(|w| match macros.get(&w) {
                Some(body) => body.clone(),
                // A macro of a standard header (`UINT64_C`), not a call.
                None if w.bytes().all(|c| !c.is_ascii_lowercase()) => Vec::new(),
                None => vec![w],
            })
            .collect()
    };
    let mut out = BTreeMap::new();
    let mut k = 0;
    while k < lines.len() {
        let line = lines[k];
        let starts = line.chars().next().is_some_and(|c| c.is_ascii_alphabetic());
        if !starts || line.starts_with("typedef") || !line.contains('(') {
            k += 1;
            continue;
        }
        // The declarator's continuation lines, then `{` (a definition) or not.
        let mut j = k;
        while !lines[j].trim_end().ends_with(';')
            && lines.get(j + 1).is_some_and(|l| l.starts_with(' '))
        {
            j += 1;
        }
        let opens = !lines[j].trim_end().ends_with(';')
            && lines.get(j + 1).is_some_and(|l| l.trim_end() == "{");
        let name = called_names(line).into_iter().next();
        let (Some(name), true) = (name, opens) else {
            k = j + 1;
            continue;
        };
        let mut calls = BTreeSet::new();
        let mut b = j + 2;
        while b < lines.len() && !lines[b].starts_with('}') {
            calls.extend(calls_in(lines[b]));
            b += 1;
        }
        let public = !line.starts_with("static ");
        out.insert(name, Defined { public, calls });
        k = b + 1;
    }
    out
}

/// `source` with every comment blanked out, line breaks kept.
fn without_comments(source: &str) -> String {
    let mut out = String::with_capacity(source.len());
    let mut rest = source;
    while let Some(i) = rest.find("/*") {
        out.push_str(&rest[..i]);
        let after = &rest[i + 2..];
        let end = after.find("*/").map_or(after.len(), |e| e + 2);
        out.extend(after[..end].chars().filter(|&c| c == '\n'));
        rest = &after[end..];
    }
    out.push_str(rest);
    out.lines()
        .map(|l| l.split("//").next().unwrap_or(""))
        .collect::<Vec<_>>()
        .join("\n")
}

/// Identifiers directly followed by `(` (a call or a declarator), keywords left out.
fn called_names(code: &str) -> Vec<String> {
    let b = code.as_bytes();
    let mut out = Vec::new();
    let mut i = 0;
    while i < b.len() {
        if b[i].is_ascii_alphabetic() || b[i] == b'_' {
            let start = i;
            while i < b.len() && (b[i].is_ascii_alphanumeric() || b[i] == b'_') {
                i += 1;
            }
            let word = &code[start..i];
            if b.get(i) == Some(&b'(') && !NOT_CALLS.contains(&word) {
                out.push(word.to_string());
            }
        } else {
            i += 1;
        }
    }
    out
}

/// The worst case of one public function.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Usage {
    pub name: String,
    /// Its own frame.
    pub own: u64,
    /// Its frame plus the deepest chain of frames below it.
    pub worst: u64,
    /// That chain, the function first (inlined helpers left out).
    pub chain: Vec<String>,
    /// Every frame on every path is bounded.
    pub bounded: bool,
    /// C library functions reachable from it (their frames are not counted).
    pub library: BTreeSet<String>,
}

/// Worst cases of every public function the compiler emitted a frame for, largest
/// first (then by name).
pub fn worst_cases(
    graph: &BTreeMap<String, Defined>,
    frames: &BTreeMap<String, Frame>,
) -> Result<Vec<Usage>, String> {
    let mut memo: BTreeMap<String, Usage> = BTreeMap::new();
    let mut out = Vec::new();
    for (name, d) in graph {
        if d.public && frames.contains_key(name) {
            let mut path = Vec::new();
            out.push(usage(name, graph, frames, &mut memo, &mut path)?);
        }
    }
    out.sort_by(|a, b| b.worst.cmp(&a.worst).then(a.name.cmp(&b.name)));
    Ok(out)
}

fn usage(
    name: &str,
    graph: &BTreeMap<String, Defined>,
    frames: &BTreeMap<String, Frame>,
    memo: &mut BTreeMap<String, Usage>,
    path: &mut Vec<String>,
) -> Result<Usage, String> {
    if let Some(u) = memo.get(name) {
        return Ok(u.clone());
    }
    if path.iter().any(|p| p == name) {
        return Err(format!(
            "recursion through {}: no worst case exists",
            path.join(" -> ")
        ));
    }
    path.push(name.to_string());
    let frame = frames.get(name).copied();
    let mut best: Option<Usage> = None;
    let mut library = BTreeSet::new();
    let mut bounded = frame.is_none_or(|f| f.bounded);
    for callee in &graph[name].calls {
        if !graph.contains_key(callee) {
            library.insert(callee.clone());
            continue;
        }
        let u = usage(callee, graph, frames, memo, path)?;
        bounded &= u.bounded;
        library.extend(u.library.iter().cloned());
        if best.as_ref().is_none_or(|b| u.worst > b.worst) {
            best = Some(u);
        }
    }
    path.pop();
    let own = frame.map_or(0, |f| f.bytes);
    let mut chain = Vec::new();
    if frame.is_some() {
        chain.push(name.to_string());
    }
    let below = best.map_or((0, Vec::new()), |b| (b.worst, b.chain));
    chain.extend(below.1);
    let u = Usage {
        name: name.to_string(),
        own,
        worst: own + below.0,
        chain,
        bounded,
        library,
    };
    memo.insert(name.to_string(), u.clone());
    Ok(u)
}

#[cfg(test)]
mod tests {
    use super::*;

    const SOURCE: &str = "\
#define M_SQRT(x) sqrt(x)
void m_ws(double x[], int n);
static void m_leaf(double x[])
{
    x[0] = M_SQRT(x[1]); /* a call(in a comment,
     * over(two lines) */
}

static void m_inlined(double x[])
{
    m_leaf(x);
}

void m_ws(double x[],
    int n)
{
    if (x[0] > 0) {
        m_inlined(x);
    }
    m_small(x);
}

static void m_small(double x[])
{
    x[1] = 0;
}
";

    #[test]
    fn frames_of_gcc_and_clang_are_read_and_bad_lines_named() {
        let gcc = "m.c:12:6:m_ws\t48\tdynamic,bounded\nm.c:1:13:m_leaf\t16\tstatic\n\
                   m.c:20:13:m_small\t8\tstatic\nm.c:30:6:m_vla\t64\tdynamic\n";
        let f = parse_frames(gcc, "m.su").unwrap();
        assert_eq!(
            f["m_ws"],
            Frame {
                bytes: 48,
                bounded: true
            }
        );
        assert_eq!(f["m_leaf"].bytes, 16);
        assert!(!f["m_vla"].bounded);
        let clang = parse_frames("m.c:12:m_ws\t40\tstatic\n", "m.su").unwrap();
        assert_eq!(clang["m_ws"].bytes, 40);
        let e = parse_frames("m.c:1:2:f\t16\tstatic\nm.c:3:g\tmany\tstatic\n", "m.su");
        assert!(e.unwrap_err().contains("m.su, line 2"));
    }

    /// The inlined helper has no frame; its callee's counts under its caller, and the
    /// library call is listed, not counted.
    #[test]
    fn the_deepest_chain_passes_through_inlined_helpers() {
        let g = call_graph(SOURCE);
        assert_eq!(g.len(), 4);
        assert!(g["m_ws"].public && !g["m_leaf"].public);
        assert_eq!(
            g["m_ws"].calls,
            BTreeSet::from(["m_inlined".to_string(), "m_small".to_string()])
        );
        assert_eq!(g["m_leaf"].calls, BTreeSet::from(["sqrt".to_string()]));
        let frames = parse_frames(
            "m.c:12:6:m_ws\t48\tstatic\nm.c:1:13:m_leaf\t16\tstatic\nm.c:20:13:m_small\t8\tstatic\n",
            "m.su",
        )
        .unwrap();
        let u = worst_cases(&g, &frames).unwrap();
        assert_eq!(u.len(), 1);
        assert_eq!(u[0].own, 48);
        assert_eq!(u[0].worst, 64);
        assert_eq!(u[0].chain, ["m_ws", "m_leaf"]);
        assert!(u[0].bounded);
        assert_eq!(u[0].library, BTreeSet::from(["sqrt".to_string()]));
    }

    #[test]
    fn recursion_is_an_error_not_a_loop() {
        let src = "void a(void)\n{\n    b();\n}\n\nstatic void b(void)\n{\n    a();\n}\n";
        let g = call_graph(src);
        let frames = parse_frames("x.c:1:6:a\t8\tstatic\nx.c:6:13:b\t8\tstatic\n", "x.su").unwrap();
        assert!(worst_cases(&g, &frames).unwrap_err().contains("recursion"));
    }
}
