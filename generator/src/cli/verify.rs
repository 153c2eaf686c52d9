//! `arcwright verify`: is an output folder what `generate` writes now, do its shipped
//! cross-checks pass on this machine, and how far is each function from the numeric
//! reference.
//!
//! The output folder does not name its arm file, so `verify` reads `DIR/arm.toml` when
//! it exists and otherwise needs `--arm`; either way the file's SHA-256 must match the
//! one the folder's marker records. The files are compared byte for byte with a fresh
//! generation (through the emit API) in a temporary folder. The shipped tests (C, Rust,
//! Python) run on a copy of the folder, so nothing is written into it. They print pass
//! and fail counts only, so the table of errors per function is measured here: the
//! derived model (the program the emitters print, evaluated in f64) against the
//! numeric reference of the same truncated kinematics.

use super::arm_input::load_arm;
use super::report::sample_configurations;
use super::toolchain::{c_compiler, find_program};
use super::{progress, CliError};
use crate::arm::{Arm, MAX_SAMPLES};
use crate::dynamics::{forward_dynamics, generalized_force};
use crate::emit::golden::{self, SIGMAS};
use crate::emit::FUNCTIONS;
use crate::emit::{emit, CStandard, Language, Languages, Meta, Options, Precision};
use crate::evaluate::Evaluator;
use crate::outdir::{compare, walk::walk};
use crate::reference::{Kinematics, Reference};
use clap::{Args, ValueEnum};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use std::collections::BTreeMap;
use std::fmt::Write as _;
use std::fs;
use std::path::{Path, PathBuf};
use std::process::Command;

/// A shipped cross-check.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord, ValueEnum)]
pub enum Check {
    C,
    Rust,
    Python,
}

/// Check an output folder of `arcwright generate`: up to date, tests pass, errors small.
///
/// Re-derives the arm (DIR/arm.toml, else --arm; its SHA-256 must match the folder's
/// marker), compares every file byte for byte with what `generate` writes now, runs
/// the shipped C, Rust and Python tests that this machine can run (on a copy of the
/// folder) and prints the largest relative error of each function against the numeric
/// reference. Exit 0 when everything that ran passed, 1 when a check failed, 2 for bad
/// input.
#[derive(Args, Debug)]
#[command(
    allow_negative_numbers = true,
    after_help = "Examples:\n  arcwright verify generated/reach_arm --arm examples/reach_arm.toml\n  \
                        arcwright verify generated/reach_arm --arm examples/reach_arm.toml --skip rust,python"
)]
pub struct VerifyArgs {
    /// Output folder written by `arcwright generate`.
    dir: PathBuf,
    /// Arm file the folder was generated from (default: DIR/arm.toml).
    #[arg(long)]
    arm: Option<PathBuf>,
    /// Shipped tests not to run, comma-separated (c, rust, python). The Rust test
    /// compiles the generated crate, which takes a while.
    #[arg(long, value_enum, value_delimiter = ',')]
    skip: Vec<Check>,
    /// The folder was generated with --optimise. Only needed for folders whose marker
    /// does not record the generate options (written before it did).
    #[arg(long)]
    optimise: bool,
    /// Sampling configurations for the error table, besides the shipped tests' cases.
    #[arg(long, default_value_t = 20)]
    samples: usize,
    /// Largest relative error of a function accepted in the table.
    #[arg(long, default_value_t = 1e-9)]
    tolerance: f64,
}

/// Outcome of one check line.
enum Outcome {
    Ok(String),
    Failed(String),
    Skipped(String),
}

struct Report {
    lines: Vec<(String, Outcome)>,
}

impl Report {
    fn push(&mut self, what: &str, o: Outcome) {
        self.lines.push((what.to_string(), o));
    }
    fn failed(&self) -> Vec<&str> {
        self.lines
            .iter()
            .filter(|(_, o)| matches!(o, Outcome::Failed(_)))
            .map(|(w, _)| w.as_str())
            .collect()
    }
}

pub fn run(args: &VerifyArgs) -> Result<(), CliError> {
    let dir = &args.dir;
    let record = super::output_folder(dir)?;
    if args.samples > MAX_SAMPLES {
        return Err(CliError::Input(format!(
            "--samples: must be at most {MAX_SAMPLES}, got {}",
            args.samples
        )));
    }
    if !(args.tolerance.is_finite() && args.tolerance > 0.0) {
        return Err(CliError::Input(format!(
            "--tolerance: must be a positive number, got {}",
            args.tolerance
        )));
    }
    let recorded = dir.join("arm.toml");
    let arm_path = match &args.arm {
        Some(p) => p.clone(),
        None if recorded.is_file() => recorded,
        None => {
            return Err(CliError::Input(format!(
                "{} does not record its arm file (no arm.toml); pass it with --arm",
                dir.display()
            )))
        }
    };
    let arm = load_arm(&arm_path, None)?;
    super::within_budget(
        "verify on this arm",
        crate::cost::estimate(&arm, crate::cost::Work::Generate),
    )?;
    let text = fs::read_to_string(&arm_path)
        .map_err(|e| CliError::Input(format!("reading {}: {e}", arm_path.display())))?;

    let mut report = Report { lines: Vec::new() };
    let mut out = String::new();
    let _ = writeln!(
        out,
        "{}: verifying {} (arm file {})\n",
        progress::bold(&arm.name),
        dir.display(),
        arm_path.display()
    );

    // The arm file behind the folder.
    let sha = Meta::new(&text, arm.expansion_order).arm_sha256;
    if record.arm_sha256 == sha {
        report.push(
            "arm file",
            Outcome::Ok("SHA-256 matches the folder's marker".into()),
        );
    } else {
        report.push(
            "arm file",
            Outcome::Failed(format!(
                "SHA-256 {sha} but the folder was generated from {}: the folder is stale or the arm file is another",
                record.arm_sha256
            )),
        );
    }

    // Byte comparison with a fresh generation.
    let options = record.options.unwrap_or(Options {
        precision: detect_precision(dir, &arm.name),
        c_standard: CStandard::C99,
        optimised: args.optimise,
        languages: Languages::ALL,
    });
    let scratch = tempfile::Builder::new()
        .prefix("arcwright-verify-")
        .tempdir()
        .map_err(|e| CliError::Failed(format!("creating a temporary folder: {e}")))?;
    let bar = progress::bar(1, "deriving and generating");
    let (model, _) = super::generate::model_for_emission(&arm, options.optimised, &|_| {})?;
    let files = emit(&model, &text, options).map_err(CliError::Failed)?;
    bar.finish_and_clear();
    report.push("files", compare_with(dir, &files));

    // Shipped tests, on a copy so that nothing (bytecode, Cargo.lock) lands in DIR.
    let shipped = scratch.path().join("shipped");
    copy_tree(dir, &shipped).map_err(CliError::Failed)?;
    let name = &arm.name;
    for check in [Check::C, Check::Rust, Check::Python] {
        let (label, language) = match check {
            Check::C => ("C test", Language::C),
            Check::Rust => ("Rust test", Language::Rust),
            Check::Python => ("Python test", Language::Python),
        };
        let outcome = if !options.languages.contains(language) {
            Outcome::Skipped(format!(
                "the folder holds no {} code (generated with --lang {})",
                language.name(),
                options.languages.names().join(",")
            ))
        } else if args.skip.contains(&check) {
            Outcome::Skipped(format!(
                "--skip {}",
                check
                    .to_possible_value()
                    .map(|v| v.get_name().to_string())
                    .unwrap_or_default()
            ))
        } else {
            let bar = progress::bar(1, label);
            let o = match check {
                Check::C => run_c(&shipped, scratch.path(), name),
                Check::Rust => run_rust(&shipped),
                Check::Python => run_python(&shipped, name),
            };
            bar.finish_and_clear();
            o
        };
        report.push(label, outcome);
    }

    // Errors per function, measured here.
    let bar = progress::bar(1, "errors per function");
    let rows = error_table(&arm, &model, args.samples);
    bar.finish_and_clear();
    let bad: Vec<&str> = rows
        .iter()
        .filter(|r| !(r.max_rel <= args.tolerance))
        .map(|r| r.function)
        .collect();
    report.push(
        "error table",
        if bad.is_empty() {
            Outcome::Ok(format!("every function within {:e}", args.tolerance))
        } else {
            Outcome::Failed(format!("above {:e}: {}", args.tolerance, bad.join(", ")))
        },
    );

    for (what, o) in &report.lines {
        let (tag, msg) = match o {
            Outcome::Ok(m) => ("ok", m),
            Outcome::Failed(m) => ("FAILED", m),
            Outcome::Skipped(m) => ("skipped", m),
        };
        let _ = writeln!(out, "{what:<12} {tag:<8} {msg}");
    }
    let golden_cases = golden::states(&arm).len();
    let _ = writeln!(
        out,
        "\nlargest relative error per function, measured by verify (not by the shipped tests, which\n\
         print pass/fail counts): the derived model (the program the emitted code prints, evaluated\n\
         in f64) against the numeric reference (Gauss–Legendre quadrature of the truncated kinematics,\n\
         order {}), at the shipped tests' {golden_cases} cases and {} sampled configurations (seed {})\n",
        arm.expansion_order,
        args.samples,
        arm.sampling_or_default().seed
    );
    let header = format!(
        "{:<18} {:>14}  {}",
        "function", "max rel error", "measured as"
    );
    let _ = writeln!(out, "{}", progress::bold(&header));
    for r in &rows {
        let _ = writeln!(out, "{:<18} {:>14}  {}", r.function, sci(r.max_rel), r.how);
    }
    super::print_stdout(&out)?;
    let failed = report.failed();
    if failed.is_empty() {
        Ok(())
    } else {
        Err(CliError::Failed(format!(
            "verify: {} failed",
            failed.join(", ")
        )))
    }
}

/// The C precision the folder was written with, from its header's note (for markers
/// that do not record it).
fn detect_precision(dir: &Path, name: &str) -> Precision {
    match fs::read_to_string(dir.join("c").join(format!("{name}.h"))) {
        Ok(h) if h.contains("Floating point: float.") => Precision::F32,
        _ => Precision::F64,
    }
}

/// The file comparison with a fresh generation, as one check line (the list of
/// differences one per line, as `generate --check` prints it).
fn compare_with(dir: &Path, files: &[crate::emit::OutFile]) -> Outcome {
    match compare(dir, files) {
        Err(e) => Outcome::Failed(e),
        Ok(d) if d.is_empty() => Outcome::Ok(format!(
            "all {} files as `generate` writes them now",
            files.len()
        )),
        Ok(d) => {
            let mut msg = format!(
                "{} path(s) differ from what `generate` writes now:",
                d.len()
            );
            for x in &d {
                msg.push_str(&format!("\n    {x}"));
            }
            Outcome::Failed(msg)
        }
    }
}

/// Copies the regular files of `from` (never a link, never a build product) to `to`.
fn copy_tree(from: &Path, to: &Path) -> Result<(), String> {
    for rel in walk(from)?.files {
        let dst = to.join(&rel);
        if let Some(p) = dst.parent() {
            fs::create_dir_all(p).map_err(|e| format!("creating {}: {e}", p.display()))?;
        }
        fs::copy(from.join(&rel), &dst).map_err(|e| format!("copying {rel}: {e}"))?;
    }
    Ok(())
}

/// A program on PATH.
/// The last lines of a command's output, for a failure message.
fn tail(out: &std::process::Output) -> String {
    let text = format!(
        "{}{}",
        String::from_utf8_lossy(&out.stdout),
        String::from_utf8_lossy(&out.stderr)
    );
    let lines: Vec<&str> = text.lines().filter(|l| !l.trim().is_empty()).collect();
    lines[lines.len().saturating_sub(6)..].join(" | ")
}

/// The "N passed, M failed" line of the C and Python tests.
fn counts(out: &std::process::Output) -> String {
    String::from_utf8_lossy(&out.stdout)
        .lines()
        .rev()
        .find(|l| l.contains(" passed, "))
        .unwrap_or("no summary line")
        .trim()
        .to_string()
}

fn run_c(shipped: &Path, scratch: &Path, name: &str) -> Outcome {
    let Some(cc) = c_compiler() else {
        return Outcome::Skipped("no C compiler (cc, gcc, clang) on PATH".into());
    };
    let c = shipped.join("c");
    let exe = scratch.join(format!("test_{name}"));
    let build = Command::new(&cc)
        // -O2, as firmware is built: the values are checked as they will run.
        .args(["-std=c99", "-O2", "-o"])
        .arg(&exe)
        .arg(format!("-D{}", crate::emit::c::PLAIN_MACRO))
        .arg(c.join(format!("test_{name}.c")))
        .arg(c.join(format!("{name}.c")))
        .arg("-lm")
        .output();
    let cc_name = cc
        .file_name()
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or_default();
    match build {
        Err(e) => return Outcome::Failed(format!("running {}: {e}", cc.display())),
        Ok(o) if !o.status.success() => {
            return Outcome::Failed(format!("{cc_name} -std=c99 -O2 failed: {}", tail(&o)))
        }
        Ok(_) => {}
    }
    match Command::new(&exe).current_dir(&c).output() {
        Err(e) => Outcome::Failed(format!("running the test: {e}")),
        Ok(o) if o.status.success() => {
            Outcome::Ok(format!("{} ({cc_name} -std=c99 -O2)", counts(&o)))
        }
        Ok(o) => Outcome::Failed(format!("{} | {}", counts(&o), tail(&o))),
    }
}

fn run_python(shipped: &Path, name: &str) -> Outcome {
    let Some(py) = find_program("python3") else {
        return Outcome::Skipped("no python3 on PATH".into());
    };
    let numpy = Command::new(&py).args(["-c", "import numpy"]).output();
    if !matches!(&numpy, Ok(o) if o.status.success()) {
        return Outcome::Skipped("python3 cannot import NumPy".into());
    }
    let dir = shipped.join("python");
    match Command::new(&py)
        .arg(format!("test_{name}.py"))
        .current_dir(&dir)
        .env("PYTHONDONTWRITEBYTECODE", "1")
        .output()
    {
        Err(e) => Outcome::Failed(format!("running python3: {e}")),
        Ok(o) if o.status.success() => Outcome::Ok(format!("{} (python3)", counts(&o))),
        Ok(o) => Outcome::Failed(format!("{} | {}", counts(&o), tail(&o))),
    }
}

fn run_rust(shipped: &Path) -> Outcome {
    let cargo = find_program("cargo").or_else(|| {
        std::env::var_os("CARGO")
            .map(PathBuf::from)
            .filter(|p| p.is_file())
    });
    let Some(cargo) = cargo else {
        return Outcome::Skipped("no cargo on PATH".into());
    };
    // cargo alone is not a toolchain: without a runnable rustc the check cannot run,
    // which is a skip, not a failure of the shipped code.
    if find_program("rustc").is_none() {
        return Outcome::Skipped("cargo found but no rustc on PATH".into());
    }
    // A target folder that outlives the run, so a second verify compiles incrementally.
    let target = std::env::temp_dir().join("arcwright-verify-target");
    match Command::new(&cargo)
        .args(["test", "--quiet", "--manifest-path"])
        .arg(shipped.join("rust").join("Cargo.toml"))
        .env("CARGO_TARGET_DIR", &target)
        .output()
    {
        Err(e) => Outcome::Failed(format!("running cargo: {e}")),
        Ok(o) => {
            let text = String::from_utf8_lossy(&o.stdout);
            let (mut passed, mut failed) = (0usize, 0usize);
            for l in text.lines().filter(|l| l.starts_with("test result:")) {
                let num = |key: &str| -> usize {
                    l.split(';')
                        .find(|p| p.contains(key))
                        .and_then(|p| p.split_whitespace().rev().nth(1))
                        .and_then(|n| n.trim_end_matches('.').parse().ok())
                        .unwrap_or(0)
                };
                passed += num(" passed");
                failed += num(" failed");
            }
            let summary = format!("{passed} passed, {failed} failed (cargo test)");
            if o.status.success() {
                Outcome::Ok(summary)
            } else {
                Outcome::Failed(format!("{summary} | {}", tail(&o)))
            }
        }
    }
}

/// One row of the error table.
struct Row {
    function: &'static str,
    max_rel: f64,
    how: &'static str,
}

fn flat(m: &[Vec<f64>]) -> Vec<f64> {
    m.iter().flatten().copied().collect()
}

fn max_abs(v: &[f64]) -> f64 {
    v.iter().fold(0.0, |a: f64, x| {
        if x.is_nan() || a.is_nan() {
            f64::NAN
        } else {
            a.max(x.abs())
        }
    })
}

fn max_diff(a: &[f64], b: &[f64]) -> f64 {
    let d: Vec<f64> = a.iter().zip(b).map(|(x, y)| x - y).collect();
    if a.len() != b.len() {
        return f64::NAN;
    }
    max_abs(&d)
}

/// Errors of the derived model against the reference at the shipped tests' cases and
/// `samples` sampled configurations.
fn error_table(arm: &Arm, model: &crate::derive::Model, samples: usize) -> Vec<Row> {
    let n = arm.n_coords();
    let k = arm.n_inputs();
    let mut states: Vec<(Vec<f64>, Vec<f64>, Vec<f64>)> = golden::states(arm)
        .into_iter()
        .map(|s| (s.q, s.qd, s.u))
        .collect();
    let ws = arm.sampling_or_default();
    let mut rng = ChaCha8Rng::seed_from_u64(ws.seed ^ 0x5eed);
    for q in sample_configurations(arm, &ws, samples, ws.seed) {
        let qd = (0..n).map(|_| rng.gen_range(-1.0..=1.0)).collect();
        let u = (0..k).map(|_| rng.gen_range(-0.1..=0.1)).collect();
        states.push((q, qd, u));
    }
    let ev = Evaluator::new(model);
    let rf = Reference::new(arm, Kinematics::Truncated(arm.expansion_order));
    // Every emitted function but forward dynamics, which is measured by its residual below.
    let names: Vec<&str> = FUNCTIONS
        .iter()
        .copied()
        .filter(|f| *f != "forward_dynamics")
        .collect();
    // Per function: (max difference, max |reference|) at each state.
    let mut per: BTreeMap<&str, Vec<(f64, f64)>> = BTreeMap::new();
    let mut fd_worst: f64 = 0.0;
    for (q, qd, u) in &states {
        let got = ev.terms(q, qd);
        let want = rf.terms(q, qd);
        let mut pose_got = Vec::new();
        let mut pose_want = Vec::new();
        for j in 0..arm.segments.len() {
            for &s in &SIGMAS {
                pose_got.extend(ev.pose(q, j, s));
                pose_want.extend(rf.pose(q, j, s));
            }
        }
        let dg_got = ev.static_terms(q).map(|s| flat(&s.dg)).unwrap_or_default();
        let pairs: [(Vec<f64>, Vec<f64>); 11] = [
            (flat(&got.b), flat(&want.b)),
            (flat(&got.c), flat(&want.c)),
            (got.g.clone(), want.g.clone()),
            (flat(&got.k), flat(&want.k)),
            (flat(&got.d), flat(&want.d)),
            (flat(&got.a), flat(&want.a)),
            (pose_got, pose_want),
            (flat(&got.tip_jacobian), flat(&want.tip_jacobian)),
            (vec![got.kinetic_energy], vec![want.kinetic_energy]),
            (vec![got.potential_energy], vec![want.potential_energy]),
            (dg_got, flat(&rf.gravity_jacobian(q))),
        ];
        for (name, (g, w)) in names.iter().zip(pairs) {
            per.entry(name)
                .or_default()
                .push((max_diff(&g, &w), max_abs(&w)));
        }
        // Forward dynamics: residual of the reference equations at the model's q̈
        // (B is badly conditioned, so q̈ itself is not the right yardstick).
        let rel = match forward_dynamics(&got, q, qd, u) {
            Ok(qdd) => {
                let rhs = generalized_force(&want, q, qd, u);
                let res: Vec<f64> = want
                    .b
                    .iter()
                    .zip(&rhs)
                    .map(|(row, r)| row.iter().zip(&qdd).map(|(b, x)| b * x).sum::<f64>() - r)
                    .collect();
                let bnorm = want
                    .b
                    .iter()
                    .map(|r| r.iter().map(|v| v.abs()).sum::<f64>())
                    .fold(0.0, f64::max);
                max_abs(&res) / (bnorm * max_abs(&qdd) + max_abs(&rhs)).max(f64::MIN_POSITIVE)
            }
            Err(_) => f64::NAN,
        };
        fd_worst = if rel.is_nan() || fd_worst.is_nan() {
            f64::NAN
        } else {
            fd_worst.max(rel)
        };
    }
    let mut rows: Vec<Row> = names
        .iter()
        .map(|name| {
            let v = &per[name];
            let floor = 1e-3 * v.iter().map(|x| x.1).fold(0.0, f64::max);
            let max_rel = v.iter().fold(0.0f64, |acc, &(d, w)| {
                let r = if d == 0.0 { 0.0 } else { d / w.max(floor) };
                if acc.is_nan() || r.is_nan() {
                    f64::NAN
                } else {
                    acc.max(r)
                }
            });
            Row {
                function: name,
                max_rel,
                how: "max |Δ| / max |reference| per state (floored at 1e-3 of the largest)",
            }
        })
        .collect();
    rows.push(Row {
        function: "forward_dynamics",
        max_rel: fd_worst,
        how: "residual ‖B_ref q̈ − rhs_ref‖ / (‖B_ref‖ ‖q̈‖ + ‖rhs_ref‖), ∞-norms",
    });
    rows
}

/// `2.2e-15`, columns lined up.
fn sci(x: f64) -> String {
    if x.is_nan() {
        return "NaN".into();
    }
    let s = format!("{x:.1e}");
    match s.split_once('e') {
        Some((m, e)) => {
            let (sign, d) = e.strip_prefix('-').map(|d| ('-', d)).unwrap_or(('+', e));
            format!("{m}e{sign}{d:0>2}")
        }
        None => s,
    }
}
