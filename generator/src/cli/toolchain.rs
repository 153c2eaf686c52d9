//! Programs on this machine that commands run: the C compiler, Python, Cargo.

use std::path::PathBuf;

/// `name` on `PATH`.
pub(crate) fn find_program(name: &str) -> Option<PathBuf> {
    let path = std::env::var_os("PATH")?;
    std::env::split_paths(&path)
        .map(|d| d.join(name))
        .find(|p| p.is_file())
}

/// The C compiler: `$CC` when it names one, else the first of `cc`, `gcc`, `clang` on
/// `PATH`.
pub(crate) fn c_compiler() -> Option<PathBuf> {
    std::env::var_os("CC")
        .map(PathBuf::from)
        .filter(|p| p.is_file() || find_program(&p.to_string_lossy()).is_some())
        .or_else(|| ["cc", "gcc", "clang"].iter().find_map(|c| find_program(c)))
}
