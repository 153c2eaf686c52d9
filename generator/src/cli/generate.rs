//! `arcwright generate`: C, Rust and Python code for one arm, with cross-check tests.

use super::arm_input::load_arm;
use super::CliError;
use crate::arm::{parse_arm_str, MAX_EXPANSION_ORDER};
use crate::cost::{estimate, Work};
use crate::derive::{derive_steps, derive_with_progress, DeriveStep, Model};
use crate::emit::{
    emit_steps, emit_with_progress, emitted_ops, CStandard, Language, Options, Precision,
};
use crate::optimise::{optimise, Limits};
use crate::outdir::{compare, write_tree};
use clap::{Args, ValueEnum};
use std::path::PathBuf;

#[derive(Clone, Copy, Debug, ValueEnum)]
pub enum PrecisionArg {
    F32,
    F64,
}

/// The C standard of `generate --c-standard`.
#[derive(Clone, Copy, Debug, PartialEq, Eq, ValueEnum)]
pub enum CStandardArg {
    C99,
    C90,
}

/// A target language of `generate`.
#[derive(Clone, Copy, Debug, PartialEq, Eq, ValueEnum)]
pub enum LanguageArg {
    C,
    Rust,
    Python,
}

impl From<LanguageArg> for Language {
    fn from(l: LanguageArg) -> Language {
        match l {
            LanguageArg::C => Language::C,
            LanguageArg::Rust => Language::Rust,
            LanguageArg::Python => Language::Python,
        }
    }
}

/// Write C (DIR/c), Rust (DIR/rust) and Python (DIR/python) code for an arm.
///
/// Each language gets the inertia, Coriolis, gravity, stiffness, damping and actuation
/// terms, backbone poses, the tip Jacobian, energies and forward dynamics, and a test
/// that compares them with golden values of the numeric reference. DIR also receives a
/// copy of the arm file (arm.toml, with the order used). DIR is replaced as a whole, in
/// one atomic step; an existing DIR must be an earlier arcwright output holding only
/// files arcwright wrote (anything else, a file you added or edited or a link, is
/// listed and nothing is replaced).
#[derive(Args, Debug)]
#[command(
    allow_negative_numbers = true,
    after_help = "Examples:\n  \
    arcwright generate examples/reach_arm.toml --out generated/reach_arm\n  \
    arcwright generate examples/reach_arm.toml --out fw/model --lang c --precision f32\n  \
    arcwright generate examples/reach_arm.toml --out generated/reach_arm --check   # in CI: exit 1 if stale"
)]
pub struct GenerateArgs {
    /// Arm file (TOML).
    arm: PathBuf,
    /// Output folder.
    #[arg(long)]
    out: PathBuf,
    /// Languages to write, comma-separated.
    #[arg(
        long,
        value_enum,
        value_delimiter = ',',
        default_value = "c,rust,python"
    )]
    lang: Vec<LanguageArg>,
    /// Expansion order N, overriding the arm file (the recorded arm.toml says N).
    #[arg(long)]
    order: Option<u32>,
    /// Floating-point type of the C and Rust code (Python uses f64).
    #[arg(long, value_enum, default_value = "f64")]
    precision: PrecisionArg,
    /// C standard of the C code: c90 puts every declaration at the top of its block
    /// (temporaries lose their `const`) and needs no C99 library macro; the shipped C
    /// test itself stays C99.
    #[arg(long, value_enum, default_value = "c99")]
    c_standard: CStandardArg,
    /// Write nothing; list the files that would change and exit 1 if any would.
    #[arg(long)]
    check: bool,
    /// Run the e-graph optimiser on the derived model, and emit its result if that
    /// needs fewer operations (a note on standard error says which was emitted).
    #[arg(long)]
    optimise: bool,
}

/// The model the emitters print: derived, and on request optimised, but only when
/// the optimised program emits fewer operations than the derived one; otherwise the
/// derived model, with a note saying so. The derivation already shares what the
/// optimiser looks for: measured, `--optimise` saves 1–3% on small arms and would cost
/// 10% (two segments of degree 2, order 2) to 70% (examples/reach_arm.toml), because
/// expanding products undoes the factored kernel rows. `verify` calls this too, so a
/// folder written with `--optimise` is rebuilt the same way.
pub(crate) fn model_for_emission(
    arm: &crate::arm::Arm,
    optimised: bool,
    progress: &(dyn Fn(DeriveStep) + Sync),
) -> Result<(Model, Option<String>), CliError> {
    let model = derive_with_progress(arm, progress);
    if !optimised {
        return Ok((model, None));
    }
    let candidate = optimise(&model, &Limits::default()).0;
    let before = emitted_ops(&model).map_err(CliError::Failed)?;
    let after = emitted_ops(&candidate).map_err(CliError::Failed)?;
    Ok(if after < before {
        let note = format!("--optimise: {before} -> {after} emitted operations");
        (candidate, Some(note))
    } else {
        let note = format!(
            "--optimise: the optimised program would emit {after} operations against the \
             derived program's {before}; emitting the derived program"
        );
        (model, Some(note))
    })
}

/// The arm file's text with `expansion_order` set to `order`, comments kept.
fn with_order(text: &str, order: u32) -> Result<String, CliError> {
    let mut doc: toml_edit::DocumentMut = text
        .parse()
        .map_err(|e| CliError::Input(format!("re-reading the arm file: {e}")))?;
    doc["expansion_order"] = toml_edit::value(i64::from(order));
    Ok(doc.to_string())
}

pub fn run(args: &GenerateArgs) -> Result<(), CliError> {
    // Validate the file as written first, so errors point into it.
    load_arm(&args.arm, args.order)?;
    let mut text = std::fs::read_to_string(&args.arm)
        .map_err(|e| CliError::Input(format!("reading {}: {e}", args.arm.display())))?;
    if let Some(order) = args.order.filter(|n| *n <= MAX_EXPANSION_ORDER) {
        text = with_order(&text, order)?;
    }
    let arm = parse_arm_str(&text, &args.arm.display().to_string())
        .map_err(|e| CliError::Input(e.to_string()))?;
    super::within_budget("generate on this arm", estimate(&arm, Work::Generate))?;
    // A wrong --out fails before the derivation, not after it.
    if !args.check {
        crate::outdir::replace::preflight(&args.out).map_err(CliError::Input)?;
    }
    let precision = match args.precision {
        PrecisionArg::F32 => Precision::F32,
        PrecisionArg::F64 => Precision::F64,
    };
    let options = Options {
        precision,
        c_standard: match args.c_standard {
            CStandardArg::C99 => CStandard::C99,
            CStandardArg::C90 => CStandard::C90,
        },
        optimised: args.optimise,
        languages: args.lang.iter().map(|l| Language::from(*l)).collect(),
    };
    let bar = super::progress::bar(derive_steps(&arm) + emit_steps(&options), "generate");
    let (model, note) = model_for_emission(&arm, args.optimise, &|step| {
        bar.set_message(match step {
            DeriveStep::Segment { j, of } => format!("deriving: segment {} of {of}", j + 1),
            DeriveStep::Differentiating => "deriving: gravity and Jacobians".to_string(),
        });
        bar.inc(1);
    })?;
    let emitted = emit_with_progress(&model, &text, options, &|step| {
        bar.set_message(step.to_string());
        bar.inc(1);
    });
    bar.finish_and_clear();
    if let Some(note) = note {
        super::progress::note(&note);
    }
    let files = emitted.map_err(CliError::Failed)?;
    if args.check {
        let changes = compare(&args.out, &files).map_err(CliError::Input)?;
        if changes.is_empty() {
            return super::print_stdout(&format!("{} is up to date\n", args.out.display()));
        }
        let mut msg = format!(
            "{} differs from what `generate` writes now:\n",
            args.out.display()
        );
        for c in &changes {
            msg.push_str(&format!("  {c}\n"));
        }
        super::print_stdout(&msg)?;
        return Err(CliError::Failed(format!(
            "{} path(s) differ",
            changes.len()
        )));
    }
    write_tree(&args.out, &files, &|parent| {
        super::progress::note(&format!(
            "waiting for another arcwright run writing into {}",
            parent.display()
        ))
    })
    .map_err(CliError::Input)?;
    super::progress::wrote(&args.out);
    Ok(())
}
