//! The `arcwright` command line. Exit codes: 0 ok, 1 a check failed, 2 bad input.

mod arm_input;
mod compare;
mod completions;
mod eval;
mod generate;
mod identify;
mod json;
mod new;
mod plot;
mod progress;
mod report;
mod simulate;
mod stack;
mod statics;
mod toolchain;
mod verify;

use clap::{Parser, Subcommand};
use std::fmt;
use std::process::ExitCode;

/// Exact dynamics of planar soft continuum arms, as code you can read and trust.
#[derive(Parser, Debug)]
#[command(name = "arcwright", version, about, long_about = None)]
pub struct Cli {
    #[command(subcommand)]
    command: Command,
    /// No progress bars or notes on standard error; results, warnings and errors only.
    #[arg(long, short, global = true)]
    quiet: bool,
    /// Go on with an arm whose estimated memory or time is beyond the budget (4 GB,
    /// 10 min) instead of refusing it.
    #[arg(long, global = true)]
    allow_large: bool,
}

#[derive(Subcommand, Debug)]
enum Command {
    Eval(eval::EvalArgs),
    Generate(generate::GenerateArgs),
    Report(report::ReportArgs),
    Simulate(simulate::SimulateArgs),
    Statics(statics::StaticsArgs),
    Identify(identify::IdentifyArgs),
    New(new::NewArgs),
    Verify(verify::VerifyArgs),
    Stack(stack::StackArgs),
    Compare(compare::CompareArgs),
    Completions(completions::CompletionsArgs),
}

/// A command failure with the exit code it maps to.
#[derive(Debug)]
pub enum CliError {
    /// Bad input: arm file, option values. Exit 2.
    Input(String),
    /// A check or computation failed on valid input. Exit 1.
    Failed(String),
}

impl fmt::Display for CliError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            CliError::Input(m) | CliError::Failed(m) => f.write_str(m),
        }
    }
}

impl CliError {
    fn code(&self) -> u8 {
        match self {
            CliError::Input(_) => 2,
            CliError::Failed(_) => 1,
        }
    }
}

/// Runs the command line; returns the process exit code.
pub fn main() -> ExitCode {
    let cli = match Cli::try_parse() {
        Ok(c) => c,
        Err(e) => {
            let code = if e.use_stderr() { 2 } else { 0 };
            let _ = e.print();
            return ExitCode::from(code);
        }
    };
    progress::set_quiet(cli.quiet);
    ALLOW_LARGE.store(cli.allow_large, std::sync::atomic::Ordering::Relaxed);
    let result = match cli.command {
        Command::Eval(args) => eval::run(&args),
        Command::Generate(args) => generate::run(&args),
        Command::Report(args) => report::run(&args),
        Command::Simulate(args) => simulate::run(&args),
        Command::Statics(args) => statics::run(&args),
        Command::Identify(args) => identify::run(&args),
        Command::New(args) => new::run(&args),
        Command::Verify(args) => verify::run(&args),
        Command::Stack(args) => stack::run(&args),
        Command::Compare(args) => compare::run(&args),
        Command::Completions(args) => completions::run(&args),
    };
    match result {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("error: {e}");
            ExitCode::from(e.code())
        }
    }
}

/// `--allow-large`, set once at start.
static ALLOW_LARGE: std::sync::atomic::AtomicBool = std::sync::atomic::AtomicBool::new(false);

/// Refuses `what` when its estimated cost is beyond the budget (see [`crate::cost`]),
/// unless `--allow-large` was given.
pub(crate) fn within_budget(what: &str, estimate: crate::cost::Estimate) -> Result<(), CliError> {
    crate::cost::check(
        what,
        estimate,
        ALLOW_LARGE.load(std::sync::atomic::Ordering::Relaxed),
    )
    .map_err(CliError::Input)
}

/// The marker of an output folder of `generate` that a command reads (`verify`,
/// `stack`): a clear error when `dir` is missing, not a folder, or not one arcwright
/// wrote.
pub(crate) fn output_folder(
    dir: &std::path::Path,
) -> Result<crate::emit::marker::Record, CliError> {
    match std::fs::symlink_metadata(dir) {
        Err(_) => Err(CliError::Input(format!(
            "{}: no such folder",
            dir.display()
        ))),
        Ok(m) if !m.is_dir() => Err(CliError::Input(format!(
            "{}: not a folder (give the output folder that `generate --out` wrote)",
            dir.display()
        ))),
        Ok(_) => crate::outdir::read_marker(dir).ok_or_else(|| {
            CliError::Input(format!(
                "{}: not an arcwright output folder (no {} file that arcwright wrote)",
                dir.display(),
                crate::emit::marker::MARKER
            ))
        }),
    }
}

/// Writes to standard output; a closed pipe (`arcwright … | head`) is not an error.
pub(crate) fn print_stdout(text: &str) -> Result<(), CliError> {
    use std::io::Write;
    let mut out = std::io::stdout().lock();
    match out.write_all(text.as_bytes()).and_then(|()| out.flush()) {
        Ok(()) => Ok(()),
        Err(e) if e.kind() == std::io::ErrorKind::BrokenPipe => Ok(()),
        Err(e) => Err(CliError::Failed(format!("writing to standard output: {e}"))),
    }
}

/// Makes `dir` an existing folder for a command's plain output files (`report`,
/// `simulate`), before any work is done, so a bad `--out` costs nothing.
pub(crate) fn prepare_out_dir(dir: &std::path::Path) -> Result<(), CliError> {
    if std::fs::symlink_metadata(dir).is_ok() && !dir.is_dir() {
        return Err(CliError::Input(format!(
            "--out: {} exists and is not a folder",
            dir.display()
        )));
    }
    std::fs::create_dir_all(dir)
        .map_err(|e| CliError::Input(format!("--out: cannot create {}: {e}", dir.display())))
}

/// Writes one output file whole or not at all: to a temporary file beside it, then
/// renamed over it (a kill leaves the previous file or the new one, never half).
pub(crate) fn write_file(path: &std::path::Path, text: &str) -> Result<(), CliError> {
    use std::io::Write as _;
    let dir = match path.parent() {
        Some(d) if !d.as_os_str().is_empty() => d,
        _ => std::path::Path::new("."),
    };
    let fail = |e: std::io::Error| CliError::Failed(format!("writing {}: {e}", path.display()));
    let mut tmp = tempfile::Builder::new()
        .prefix(".arcwright-file-")
        .tempfile_in(dir)
        .map_err(fail)?;
    tmp.write_all(text.as_bytes())
        .and_then(|()| tmp.as_file().sync_all())
        .map_err(fail)?;
    tmp.persist(path).map_err(|e| fail(e.error))?;
    Ok(())
}

/// A number for people and CSV readers alike: the shortest text that reads back to the
/// same double, in plain decimals between 1e-4 and 1e15 and in exponent form outside
/// (so 1e-300 is `1e-300`, not 300 zeros).
pub(crate) fn num(x: f64) -> String {
    if x == 0.0 {
        return "0".into(); // also -0.0
    }
    let a = x.abs();
    if a != 0.0 && a.is_finite() && !(1e-4..1e15).contains(&a) {
        format!("{x:e}")
    } else {
        format!("{x}")
    }
}

/// Bending [rad] of a segment at rest beyond which an input is "far beyond what the
/// arm can take": ten full turns.
const SUSPICIOUS_BENDING: f64 = 20.0 * std::f64::consts::PI;

/// Parses `--u` for `arm`: one number per input, tendon tensions ≥ 0 (a tendon only
/// pulls; a negative tension is refused), and a warning when the inputs would bend a
/// segment by more than ten turns at rest (linear estimate), which is almost surely a
/// unit slip.
pub(crate) fn parse_inputs(arm: &crate::arm::Arm, text: &str) -> Result<Vec<f64>, CliError> {
    let u = parse_vector("u", text, arm.n_inputs())?;
    let mut at = 0;
    for (i, a) in arm.actuators.iter().enumerate() {
        if matches!(a, crate::arm::Actuator::Tendon { .. }) && u[at] < 0.0 {
            return Err(CliError::Input(format!(
                "--u: entry {} is the tension of the tendon actuator[{}] and must be ≥ 0 \
                 (a tendon only pulls), got {}",
                at + 1,
                i + 1,
                num(u[at])
            )));
        }
        at += a.n_inputs();
    }
    for (i, (v, lim)) in u.iter().zip(&arm.input_limits).enumerate() {
        if !lim.contains(*v) {
            return Err(CliError::Input(format!(
                "--u: entry {} ({}) is {}, outside the limits the arm file sets for it, [{}, {}]",
                i + 1,
                arm.input_name(i),
                num(*v),
                num(lim.lo),
                num(lim.hi)
            )));
        }
    }
    if let Ok(q) = crate::statics::linear_rest_shape(arm, &u) {
        let bending = crate::statics::segment_bending(arm, &q);
        if let Some((j, b)) = bending
            .iter()
            .enumerate()
            .find(|(_, b)| !(**b <= SUSPICIOUS_BENDING))
        {
            progress::warning(&format!(
                "--u: these inputs would bend segment {} by about {b:.0} rad at rest (linear \
                 estimate K⁻¹A(0)u, more than ten turns); check their units (N, N m) and size",
                j + 1
            ));
        }
    }
    Ok(u)
}

/// Parses a list of outputs such as `--control "1_0,2_mean"`.
pub(crate) fn parse_outputs(
    option: &str,
    arm: &crate::arm::Arm,
    text: &str,
) -> Result<Vec<crate::control::Output>, CliError> {
    let mut out = Vec::new();
    for part in text.split(',') {
        let i = crate::control::Output::parse(arm, part)
            .map_err(|e| CliError::Input(format!("--{option}: {e}")))?;
        if out.contains(&i) {
            return Err(CliError::Input(format!(
                "--{option}: coordinate {} is listed twice",
                part.trim()
            )));
        }
        out.push(i);
    }
    Ok(out)
}

/// Parses `output=value` pairs such as `--hold "1_0=4,2_mean=-3"`.
pub(crate) fn parse_assignments(
    option: &str,
    arm: &crate::arm::Arm,
    text: &str,
) -> Result<Vec<(crate::control::Output, f64)>, CliError> {
    let mut out: Vec<(crate::control::Output, f64)> = Vec::new();
    for part in text.split(',') {
        let Some((label, value)) = part.split_once('=') else {
            return Err(CliError::Input(format!(
                "--{option}: `{}` is not label=value (for example 1_0=4.5)",
                part.trim()
            )));
        };
        let i = crate::control::Output::parse(arm, label)
            .map_err(|e| CliError::Input(format!("--{option}: {e}")))?;
        let v: f64 = value.trim().parse().map_err(|_| {
            CliError::Input(format!(
                "--{option}: the value of {} is `{}`, not a number",
                label.trim(),
                value.trim()
            ))
        })?;
        if !v.is_finite() {
            return Err(CliError::Input(format!(
                "--{option}: the value of {} must be finite, got {}",
                label.trim(),
                value.trim()
            )));
        }
        if out.iter().any(|(j, _)| *j == i) {
            return Err(CliError::Input(format!(
                "--{option}: coordinate {} is listed twice",
                label.trim()
            )));
        }
        out.push((i, v));
    }
    Ok(out)
}

/// Parses a comma-separated vector option such as `--q "0.1, -2, 3e-1"`.
pub(crate) fn parse_vector(
    option: &str,
    text: &str,
    expected: usize,
) -> Result<Vec<f64>, CliError> {
    let text = text.trim();
    let parts: Vec<&str> = if text.is_empty() {
        Vec::new()
    } else {
        text.split(',').collect()
    };
    let mut out = Vec::with_capacity(parts.len());
    for (i, p) in parts.iter().enumerate() {
        let p = p.trim();
        let v: f64 = p.parse().map_err(|_| {
            CliError::Input(format!(
                "--{option}: entry {} is `{p}`, not a number",
                i + 1
            ))
        })?;
        if !v.is_finite() {
            return Err(CliError::Input(format!(
                "--{option}: entry {} is `{p}`, not a finite number",
                i + 1
            )));
        }
        out.push(v);
    }
    if out.len() != expected {
        return Err(CliError::Input(format!(
            "--{option}: expected {expected} comma-separated numbers, got {}",
            out.len()
        )));
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn numbers_print_short_at_any_scale() {
        assert_eq!(num(1e-300), "1e-300");
        assert_eq!(num(0.5), "0.5");
        assert_eq!(num(0.0), "0");
        assert_eq!(num(-0.0), "0");
        assert_eq!(num(-2.5e20), "-2.5e20");
        assert_eq!(num(0.00012), "0.00012");
        for x in [1e-300, 0.1 + 0.2, 123456.789, -7e-9] {
            assert_eq!(num(x).parse::<f64>().unwrap(), x);
        }
    }

    #[test]
    fn vectors_parse_and_reject() {
        assert_eq!(
            parse_vector("q", " 1, -2.5,3e-1 ", 3).unwrap(),
            vec![1.0, -2.5, 0.3]
        );
        assert!(parse_vector("q", "1,2", 3)
            .unwrap_err()
            .to_string()
            .contains("expected 3"));
        assert!(parse_vector("q", "1,x,3", 3)
            .unwrap_err()
            .to_string()
            .contains("entry 2"));
        assert!(parse_vector("q", "1,NaN,3", 3)
            .unwrap_err()
            .to_string()
            .contains("finite"));
        assert_eq!(parse_vector("u", "", 0).unwrap(), Vec::<f64>::new());
    }
}
