//! Progress bars, notes and colours for the long-running commands.
//!
//! Progress and notes go to standard error and only when it is a terminal and
//! `--quiet` was not given, so piped output and scripts see results and errors only.
//! Colours follow the terminal too (and `NO_COLOR` / `CLICOLOR_FORCE`).

use indicatif::{ProgressBar, ProgressStyle};
use std::io::IsTerminal;
use std::sync::atomic::{AtomicBool, Ordering};
use std::time::Duration;

static QUIET: AtomicBool = AtomicBool::new(false);

/// Set once from the global `--quiet` flag.
pub(crate) fn set_quiet(quiet: bool) {
    QUIET.store(quiet, Ordering::Relaxed);
}

pub(crate) fn quiet() -> bool {
    QUIET.load(Ordering::Relaxed)
}

/// Whether progress bars are drawn: stderr is a terminal and not `--quiet`.
fn interactive() -> bool {
    !quiet() && std::io::stderr().is_terminal()
}

/// A bar of `len` steps with a label; hidden when not interactive.
pub(crate) fn bar(len: u64, label: &str) -> ProgressBar {
    if !interactive() {
        return ProgressBar::hidden();
    }
    let pb = ProgressBar::new(len);
    pb.set_style(
        ProgressStyle::with_template(
            "{prefix:.bold} [{bar:30.cyan/blue}] {pos}/{len} {msg} ({elapsed})",
        )
        .expect("valid progress template")
        .progress_chars("=> "),
    );
    pb.set_prefix(label.to_string());
    pb.enable_steady_tick(Duration::from_millis(200));
    pb
}

/// A bar over a continuous quantity (simulated time), shown as a percentage.
pub(crate) fn fraction_bar(label: &str) -> ProgressBar {
    if !interactive() {
        return ProgressBar::hidden();
    }
    let pb = ProgressBar::new(1000);
    pb.set_style(
        ProgressStyle::with_template(
            "{prefix:.bold} [{bar:30.cyan/blue}] {percent:>3}% {msg} ({elapsed}, eta {eta})",
        )
        .expect("valid progress template")
        .progress_chars("=> "),
    );
    pb.set_prefix(label.to_string());
    pb.enable_steady_tick(Duration::from_millis(200));
    pb
}

/// An informational line on standard error (not with `--quiet`).
pub(crate) fn note(text: &str) {
    if !quiet() {
        eprintln!("{text}");
    }
}

/// A warning on standard error, also with `--quiet`: valid input that looks wrong is
/// worth a line even in a script.
pub(crate) fn warning(text: &str) {
    eprintln!(
        "{} {text}",
        console::style("warning:").yellow().for_stderr()
    );
}

/// "wrote PATH" on standard error, the verb in green on a terminal.
pub(crate) fn wrote(path: &std::path::Path) {
    if !quiet() {
        eprintln!(
            "{} {}",
            console::style("wrote").green().for_stderr(),
            path.display()
        );
    }
}

/// Bold text for standard output (plain when stdout is not a terminal).
pub(crate) fn bold(text: &str) -> String {
    console::style(text).bold().to_string()
}
