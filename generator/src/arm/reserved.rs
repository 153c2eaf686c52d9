//! Names an arm may not take. The arm's name becomes a C prefix and header name, a Rust
//! crate and a Python module, so it must be none of the four languages' keywords or
//! reserved identifiers, and must not shadow a header, crate or module that the emitted
//! code (or its tests) include or import. Lists as of C99, C++20, Rust 2021 and
//! Python 3.12 (common practice: the languages' reference manuals).

/// Why a name is refused: which language (or library) reserves it.
pub fn reserved_by(name: &str) -> Option<&'static str> {
    const TABLE: &[(&str, &[&str])] = &[
        (
            "a C99 keyword",
            &[
                "auto", "break", "case", "char", "const", "continue", "default", "do", "double",
                "else", "enum", "extern", "float", "for", "goto", "if", "inline", "int", "long",
                "register", "restrict", "return", "short", "signed", "sizeof", "static", "struct",
                "switch", "typedef", "union", "unsigned", "void", "volatile", "while",
            ],
        ),
        (
            "a C++ keyword",
            &[
                "alignas",
                "alignof",
                "and",
                "and_eq",
                "asm",
                "bitand",
                "bitor",
                "bool",
                "catch",
                "char8_t",
                "char16_t",
                "char32_t",
                "class",
                "compl",
                "concept",
                "consteval",
                "constexpr",
                "constinit",
                "const_cast",
                "co_await",
                "co_return",
                "co_yield",
                "decltype",
                "delete",
                "dynamic_cast",
                "explicit",
                "export",
                "false",
                "friend",
                "mutable",
                "namespace",
                "new",
                "noexcept",
                "not",
                "not_eq",
                "nullptr",
                "operator",
                "or",
                "or_eq",
                "private",
                "protected",
                "public",
                "reinterpret_cast",
                "requires",
                "static_assert",
                "static_cast",
                "template",
                "this",
                "thread_local",
                "throw",
                "true",
                "try",
                "typeid",
                "typename",
                "using",
                "virtual",
                "wchar_t",
                "xor",
                "xor_eq",
            ],
        ),
        (
            "a Rust keyword",
            &[
                "as", "async", "await", "crate", "dyn", "fn", "impl", "in", "let", "loop", "match",
                "mod", "move", "mut", "pub", "ref", "self", "super", "trait", "type", "unsafe",
                "use", "where", "abstract", "become", "box", "final", "macro", "override", "priv",
                "typeof", "unsized", "yield", "try", "gen", "union",
            ],
        ),
        (
            "a Python keyword",
            &[
                "none", "false", "true", "assert", "def", "del", "elif", "except", "finally",
                "from", "global", "import", "is", "lambda", "nonlocal", "pass", "raise", "with",
                "async", "await", "match", "case", "type",
            ],
        ),
        (
            "a standard C header the emitted C includes or may meet (NAME.h would shadow it)",
            &[
                "assert",
                "complex",
                "ctype",
                "errno",
                "fenv",
                "float",
                "inttypes",
                "iso646",
                "limits",
                "locale",
                "math",
                "setjmp",
                "signal",
                "stdalign",
                "stdarg",
                "stdbool",
                "stddef",
                "stdint",
                "stdio",
                "stdlib",
                "stdnoreturn",
                "string",
                "tgmath",
                "threads",
                "time",
                "uchar",
                "wchar",
                "wctype",
            ],
        ),
        (
            "a Rust crate the emitted crate builds against (core, std, libm, …)",
            &["core", "std", "alloc", "libm", "test", "proc_macro"],
        ),
        (
            "a Python module the emitted code or its users import (NAME.py would shadow it)",
            &[
                "numpy",
                "scipy",
                "math",
                "test",
                "tests",
                "unittest",
                "typing",
                "os",
                "sys",
                "abc",
                "array",
                "builtins",
                "cmath",
                "copy",
                "enum",
                "functools",
                "io",
                "itertools",
                "random",
                "re",
                "site",
                "struct",
                "types",
            ],
        ),
    ];
    TABLE
        .iter()
        .find(|(_, words)| words.contains(&name))
        .map(|(why, _)| *why)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_reported_traps_are_reserved() {
        assert_eq!(reserved_by("return"), Some("a C99 keyword"));
        assert_eq!(reserved_by("fn"), Some("a Rust keyword"));
        assert_eq!(reserved_by("class"), Some("a C++ keyword"));
        assert_eq!(reserved_by("lambda"), Some("a Python keyword"));
        assert!(reserved_by("numpy").unwrap().contains("Python module"));
        assert!(reserved_by("core").unwrap().contains("Rust crate"));
        assert!(reserved_by("test").is_some());
        assert!(reserved_by("math").is_some());
        for ok in ["reach_arm", "gripper", "arm", "hanging_taper"] {
            assert_eq!(reserved_by(ok), None, "{ok}");
        }
    }
}
