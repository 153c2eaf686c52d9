//! `arcwright generate`: C, Rust and Python code for one arm, with cross-check tests.

use super::eval::load_arm;
use super::CliError;
use crate::derive::{derive, Model};
use crate::emit::{emit, write::write_tree, Options, Precision};
use crate::optimise::{optimise, Limits};
use clap::{Args, ValueEnum};
use std::path::PathBuf;

#[derive(Clone, Copy, Debug, ValueEnum)]
pub enum PrecisionArg {
    F32,
    F64,
}

/// Write C (DIR/c), Rust (DIR/rust) and Python (DIR/python) code for an arm.
///
/// Each language gets the inertia, Coriolis, gravity, stiffness, damping and actuation
/// terms, backbone poses, the tip Jacobian, energies and forward dynamics, and a test
/// that compares them with golden values of the numeric reference. DIR is replaced as
/// a whole (atomically); an existing DIR must be an earlier arcwright output.
#[derive(Args, Debug)]
#[command(
    after_help = "Example:\n  arcwright generate examples/reach_arm.toml --out generated/reach_arm"
)]
pub struct GenerateArgs {
    /// Arm file (TOML).
    arm: PathBuf,
    /// Output folder.
    #[arg(long)]
    out: PathBuf,
    /// Floating-point type of the C code (Rust and Python use f64).
    #[arg(long, value_enum, default_value = "f64")]
    precision: PrecisionArg,
    /// Run the e-graph optimiser on the derived model before emitting.
    #[arg(long)]
    optimise: bool,
}

/// The model the emitters print: derived, and optimised on request. The optimiser is
/// opt-in for now: measured on examples/reach_arm.toml, its output currently prints to
/// more operations than the derived program (the emitters' moment-kernel table catches
/// less of it) and takes ~9 s, so the default emits the derived model directly.
fn model_for_emission(arm: &crate::arm::Arm, optimised: bool) -> Model {
    let model = derive(arm);
    if optimised {
        optimise(&model, &Limits::default()).0
    } else {
        model
    }
}

pub fn run(args: &GenerateArgs) -> Result<(), CliError> {
    let arm = load_arm(&args.arm, None)?;
    let text = std::fs::read_to_string(&args.arm)
        .map_err(|e| CliError::Input(format!("reading {}: {e}", args.arm.display())))?;
    let precision = match args.precision {
        PrecisionArg::F32 => Precision::F32,
        PrecisionArg::F64 => Precision::F64,
    };
    let model = model_for_emission(&arm, args.optimise);
    let files = emit(&model, &text, Options { precision }).map_err(CliError::Failed)?;
    write_tree(&args.out, &files).map_err(CliError::Input)?;
    Ok(())
}
