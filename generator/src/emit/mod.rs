//! Emitters: from a derived (or optimised) [`Model`] to C, Rust and Python source
//! trees, each with a cross-check test against golden values of the numeric
//! reference.
//!
//! The pipeline inside: [`plan::Plan`] schedules every function once, language-neutral
//! ([`schedule`]); [`c`], [`rust`] and [`python`] print it through the Tera templates
//! in `templates/`; [`golden`] computes the test values; [`marker`] records what was
//! written. Putting the tree on disk is [`crate::outdir`]'s job. Output is byte-for-byte
//! deterministic.

pub mod body;
pub mod c;
pub mod constants;
pub mod control_code;
pub mod golden;
pub mod marker;
pub mod number;
pub mod ops;
pub mod plan;
pub mod printer;
pub mod python;
pub mod rust;
pub mod schedule;
pub mod shares;
pub mod templates;

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

/// A target language.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord)]
pub enum Language {
    C,
    Rust,
    Python,
}

impl Language {
    pub const ALL: [Language; 3] = [Language::C, Language::Rust, Language::Python];

    /// The name on the command line and in the marker.
    pub fn name(self) -> &'static str {
        match self {
            Language::C => "c",
            Language::Rust => "rust",
            Language::Python => "python",
        }
    }

    pub fn from_name(name: &str) -> Option<Language> {
        Language::ALL.into_iter().find(|l| l.name() == name)
    }

    fn bit(self) -> u8 {
        1 << (self as u8)
    }
}

/// A set of target languages.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Languages(u8);

impl Languages {
    pub const ALL: Languages = Languages(0b111);
    pub const NONE: Languages = Languages(0);

    pub fn only(l: Language) -> Languages {
        Languages(l.bit())
    }
    pub fn insert(&mut self, l: Language) {
        self.0 |= l.bit();
    }
    pub fn contains(self, l: Language) -> bool {
        self.0 & l.bit() != 0
    }
    pub fn is_empty(self) -> bool {
        self.0 == 0
    }
    pub fn iter(self) -> impl Iterator<Item = Language> {
        Language::ALL.into_iter().filter(move |l| self.contains(*l))
    }
    pub fn names(self) -> Vec<&'static str> {
        self.iter().map(Language::name).collect()
    }
}

impl FromIterator<Language> for Languages {
    fn from_iter<I: IntoIterator<Item = Language>>(iter: I) -> Self {
        let mut set = Languages::NONE;
        for l in iter {
            set.insert(l);
        }
        set
    }
}

/// The C standard the C output is written to.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
pub enum CStandard {
    /// C99: temporaries are `const` and declared where they are computed.
    #[default]
    C99,
    /// C90 (ANSI C, as older or qualified toolchains and C90-based coding rules ask):
    /// every declaration at the top of its block, no C99-only library macro.
    C90,
}

/// How a folder is generated; all of it is recorded in the folder's marker, so that
/// `verify` regenerates the same way.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Options {
    /// Precision of the C and Rust output (Python is always double).
    pub precision: Precision,
    /// Standard of the C output.
    pub c_standard: CStandard,
    /// The model went through the optimiser.
    pub optimised: bool,
    /// The languages written.
    pub languages: Languages,
}

impl Default for Options {
    fn default() -> Self {
        Options {
            precision: Precision::F64,
            c_standard: CStandard::C99,
            optimised: false,
            languages: Languages::ALL,
        }
    }
}

/// The emitted functions, in the order the emitters write them.
pub const FUNCTIONS: [&str; 12] = [
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
    "gravity_jacobian",
];

/// Name of the copy of the arm file at the top of every output folder.
pub const RECORDED_ARM: &str = "arm.toml";

/// Name of the ignore file at the top of every output folder.
pub const IGNORE_FILE: &str = ".gitignore";

/// What building and running the shipped tests leaves in an output folder. `generate`
/// and `verify` pass over these (and only these) and `generate` deletes them with the
/// old tree; the folder's `.gitignore` lists them.
pub const BUILD_ARTEFACTS: [&str; 3] = ["rust/target/", "rust/Cargo.lock", "python/__pycache__/"];

/// One output file: path relative to the output folder, and its text.
pub type OutFile = (String, String);

/// All files for one arm: `c/`, `rust/`, `python/` (those of `options.languages`), the
/// arm file, the ignore file and the marker, sorted by path.
pub fn emit(model: &Model, arm_text: &str, options: Options) -> Result<Vec<OutFile>, String> {
    emit_with_progress(model, arm_text, options, &|_| {})
}

/// Steps [`emit_with_progress`] reports: scheduling, golden values, then one per
/// language written.
pub fn emit_steps(options: &Options) -> u64 {
    2 + options.languages.iter().count() as u64
}

/// [`emit`], calling `progress` with the name of each step before it starts.
pub fn emit_with_progress(
    model: &Model,
    arm_text: &str,
    options: Options,
    progress: &(dyn Fn(&str) + Sync),
) -> Result<Vec<OutFile>, String> {
    // Scheduling walks expression trees recursively; give it a deep stack.
    std::thread::scope(|scope| {
        std::thread::Builder::new()
            .stack_size(256 << 20)
            .spawn_scoped(scope, || emit_inner(model, arm_text, options, progress))
            .map_err(|e| format!("spawning the emitter thread: {e}"))?
            .join()
            .map_err(|_| "the emitter thread panicked".to_string())?
    })
}

/// Operations the emitted code of `model` would execute (see [`plan::Plan::emitted_ops`]).
pub fn emitted_ops(model: &Model) -> Result<usize, String> {
    let model = model.clone();
    std::thread::Builder::new()
        .stack_size(256 << 20)
        .spawn(move || plan::Plan::new(&model, true, Precision::F64).map(|p| p.emitted_ops()))
        .map_err(|e| format!("spawning the planning thread: {e}"))?
        .join()
        .map_err(|_| "the planning thread panicked".to_string())?
}

fn emit_inner(
    model: &Model,
    arm_text: &str,
    options: Options,
    progress: &(dyn Fn(&str) + Sync),
) -> Result<Vec<OutFile>, String> {
    let meta = Meta::new(arm_text, model.arm.expansion_order);
    progress("scheduling the code");
    let plan = plan::Plan::new(model, true, Precision::F64)?;
    // Single precision resolves fewer moments on the fast path: C and Rust in it get
    // their own plan (Python is always double).
    let single = options.precision == Precision::F32
        && (options.languages.contains(Language::C) || options.languages.contains(Language::Rust));
    let single_plan = if single {
        Some(plan::Plan::new(model, true, Precision::F32)?)
    } else {
        None
    };
    let typed_plan = single_plan.as_ref().unwrap_or(&plan);
    progress("golden values from the numeric reference");
    let golden = golden::Golden::compute(model)?;
    let mut files = Vec::new();
    for language in options.languages.iter() {
        progress(match language {
            Language::C => "printing C",
            Language::Rust => "printing Rust",
            Language::Python => "printing Python",
        });
        files.extend(match language {
            Language::C => c::emit(
                typed_plan,
                &meta,
                options.precision,
                options.c_standard,
                &golden,
            )?,
            Language::Rust => rust::emit(typed_plan, &meta, options.precision, &golden)?,
            Language::Python => python::emit(&plan, &meta, &golden)?,
        });
    }
    // The arm file itself, so that the folder says what model it holds and can be
    // re-derived and checked (`arcwright verify`) or compared without the original.
    files.push((RECORDED_ARM.to_string(), arm_text.to_string()));
    files.push((IGNORE_FILE.to_string(), ignore_file()));
    if let Some((path, _)) = files.iter().find(|(_, t)| t.contains(number::NON_FINITE)) {
        return Err(format!(
            "{path}: a constant of the model is not finite in {} precision; the arm's numbers \
             are too large or too small for it (see the supported ranges in the README)",
            match options.precision {
                Precision::F32 if !path.starts_with("python/") => "single",
                _ => "double",
            }
        ));
    }
    files.sort();
    let marker = marker::text(&meta, &options, &files);
    files.push((marker::MARKER.to_string(), marker));
    files.sort();
    Ok(files)
}

/// The output folder's `.gitignore`: the build products of the shipped tests.
fn ignore_file() -> String {
    let mut out = String::from(
        "# Written by arcwright: what building and running the shipped tests leaves here.\n",
    );
    for a in BUILD_ARTEFACTS {
        out.push('/');
        out.push_str(a);
        out.push('\n');
    }
    out
}
