//! Emitters: from a derived (or optimised) [`Model`] to C, Rust and Python source
//! trees, each with a cross-check test against golden values of the numeric
//! reference.
//!
//! The pipeline inside: [`plan::Plan`] schedules every function once, language-neutral
//! ([`schedule`]); [`c`], [`rust`] and [`python`] print it through the Tera templates
//! in `templates/`; [`golden`] computes the test values; [`write`] puts the tree in
//! place atomically. Output is byte-for-byte deterministic.

pub mod body;
pub mod c;
pub mod constants;
pub mod golden;
pub mod number;
pub mod ops;
pub mod plan;
pub mod printer;
pub mod python;
pub mod rust;
pub mod schedule;
pub mod templates;
pub mod write;

use crate::derive::Model;
pub use number::Precision;
use sha2::{Digest, Sha256};

/// What every emitted file's header names.
#[derive(Clone, Debug)]
pub struct Meta {
    pub version: String,
    /// SHA-256 of the arm file's text, hex.
    pub arm_sha256: String,
    pub order: u32,
}

impl Meta {
    pub fn new(arm_text: &str, order: u32) -> Meta {
        let digest = Sha256::digest(arm_text.as_bytes());
        let arm_sha256 = digest.iter().map(|b| format!("{b:02x}")).collect();
        Meta {
            version: env!("CARGO_PKG_VERSION").to_string(),
            arm_sha256,
            order,
        }
    }
}

#[derive(Clone, Copy, Debug)]
pub struct Options {
    /// Precision of the C output (Rust and Python are always double).
    pub precision: Precision,
    /// The model went through the optimiser (recorded in the folder's marker, so that
    /// `verify` regenerates the same way).
    pub optimised: bool,
}

impl Default for Options {
    fn default() -> Self {
        Options {
            precision: Precision::F64,
            optimised: false,
        }
    }
}

/// The emitted functions, in the order the emitters write them.
pub const FUNCTIONS: [&str; 11] = [
    "inertia",
    "coriolis",
    "gravity",
    "stiffness",
    "damping",
    "actuation",
    "pose",
    "tip_jacobian",
    "kinetic_energy",
    "potential_energy",
    "forward_dynamics",
];

/// Name of the copy of the arm file at the top of every output folder.
pub const RECORDED_ARM: &str = "arm.toml";

/// One output file: path relative to the output folder, and its text.
pub type OutFile = (String, String);

/// All files for one arm: `c/`, `rust/`, `python/`, sorted by path.
pub fn emit(model: &Model, arm_text: &str, options: Options) -> Result<Vec<OutFile>, String> {
    let model = model.clone();
    let arm_text = arm_text.to_string();
    // Scheduling walks expression trees recursively; give it a deep stack.
    std::thread::Builder::new()
        .stack_size(256 << 20)
        .spawn(move || emit_inner(&model, &arm_text, options))
        .map_err(|e| format!("spawning the emitter thread: {e}"))?
        .join()
        .map_err(|_| "the emitter thread panicked".to_string())?
}

/// Operations the emitted code of `model` would execute (see [`plan::Plan::emitted_ops`]).
pub fn emitted_ops(model: &Model) -> Result<usize, String> {
    let model = model.clone();
    std::thread::Builder::new()
        .stack_size(256 << 20)
        .spawn(move || plan::Plan::new(&model, true).emitted_ops())
        .map_err(|e| format!("spawning the planning thread: {e}"))?
        .join()
        .map_err(|_| "the planning thread panicked".to_string())
}

fn emit_inner(model: &Model, arm_text: &str, options: Options) -> Result<Vec<OutFile>, String> {
    let meta = Meta::new(arm_text, model.arm.expansion_order);
    let plan = plan::Plan::new(model, true);
    let golden = golden::Golden::compute(&model.arm);
    let mut files = Vec::new();
    files.extend(c::emit(&plan, &meta, options.precision, &golden)?);
    files.extend(rust::emit(&plan, &meta, &golden)?);
    files.extend(python::emit(&plan, &meta, &golden)?);
    files.push((
        write::MARKER.to_string(),
        write::marker_text(&meta, &options),
    ));
    // The arm file itself, so that the folder says what model it holds and can be
    // re-derived and checked (`arcwright verify`) or compared without the original.
    files.push((RECORDED_ARM.to_string(), arm_text.to_string()));
    files.sort();
    Ok(files)
}
