//! `arcwright stack`: the worst-case stack of each emitted C function on this
//! machine's compiler, for the target and flags the firmware is built with.
//!
//! The C is compiled with `-fstack-usage` in a temporary folder (nothing is written
//! into DIR); the frames and the emitted source's call graph give each public
//! function's worst case (see [`crate::stack_usage`]). The caller-owned scratch of the
//! `_ws` forms is listed beside it from the header, since firmware budgets both.

use super::toolchain::{c_compiler, find_program};
use super::{progress, CliError};
use crate::stack_usage::{call_graph, parse_frames, worst_cases};
use clap::Args;
use std::collections::BTreeSet;
use std::fmt::Write as _;
use std::fs;
use std::path::{Path, PathBuf};
use std::process::Command;

/// Worst-case stack of each emitted C function, measured with this machine's compiler.
///
/// Compiles DIR's C (in a temporary folder) with `-fstack-usage` and the given flags,
/// and prints each public function's own frame, its worst case with everything it
/// calls, the deepest call chain and its caller-owned scratch. Frames of the C
/// library's functions (sin, cos, sqrt) are not counted; the command names the ones
/// reached. Exit 0, 1 when a function is above --limit or the compiler fails, 2 for
/// bad input.
#[derive(Args, Debug)]
#[command(after_help = "Examples:\n  arcwright stack generated/reach_arm\n  \
                  arcwright stack out/arm --cc arm-none-eabi-gcc \\\n      \
                  --cflags \"-mcpu=cortex-m4 -mfpu=fpv4-sp-d16 -mfloat-abi=hard -mthumb -Os\" --limit 1024")]
pub struct StackArgs {
    /// Output folder written by `arcwright generate`.
    dir: PathBuf,
    /// C compiler (gcc or clang, or a cross compiler of either; default: $CC, else cc,
    /// gcc or clang on PATH).
    #[arg(long)]
    cc: Option<PathBuf>,
    /// Compiler flags, as one string split at spaces (target, optimisation level).
    #[arg(long, default_value = "-O2", allow_hyphen_values = true)]
    cflags: String,
    /// Also the plain forms, which put their scratch on the stack (they are compiled
    /// only with ARCWRIGHT_PLAIN_FUNCTIONS defined).
    #[arg(long)]
    plain: bool,
    /// Fail (exit 1) when a function's worst case is above this many bytes.
    #[arg(long)]
    limit: Option<u64>,
}

pub fn run(args: &StackArgs) -> Result<(), CliError> {
    let dir = &args.dir;
    let record = super::output_folder(dir)?;
    let name = model_name(dir, record.files.as_ref())?;
    let cc = match &args.cc {
        Some(p) if p.is_file() || find_program(&p.to_string_lossy()).is_some() => p.clone(),
        Some(p) => {
            return Err(CliError::Input(format!(
                "--cc: {} is neither a file nor a program on PATH",
                p.display()
            )))
        }
        None => c_compiler().ok_or_else(|| {
            CliError::Input(
                "no C compiler ($CC, cc, gcc, clang) on PATH; name one with --cc".into(),
            )
        })?,
    };
    let flags: Vec<&str> = args.cflags.split_whitespace().collect();

    let scratch = tempfile::Builder::new()
        .prefix("arcwright-stack-")
        .tempdir()
        .map_err(|e| CliError::Failed(format!("creating a temporary folder: {e}")))?;
    let c_dir = dir.join("c");
    let read = |file: &str| {
        fs::read_to_string(c_dir.join(file))
            .map_err(|e| CliError::Input(format!("reading {}: {e}", c_dir.join(file).display())))
    };
    let source = read(&format!("{name}.c"))?;
    let header = read(&format!("{name}.h"))?;
    for (file, text) in [
        (format!("{name}.c"), &source),
        (format!("{name}.h"), &header),
    ] {
        fs::write(scratch.path().join(&file), text)
            .map_err(|e| CliError::Failed(format!("copying {file}: {e}")))?;
    }
    let bar = progress::bar(1, "compiling with -fstack-usage");
    let mut cmd = Command::new(&cc);
    cmd.arg("-std=c99")
        .args(&flags)
        .arg("-fstack-usage")
        .args(["-c", &format!("{name}.c"), "-o", &format!("{name}.o")])
        .current_dir(scratch.path());
    if args.plain {
        cmd.arg(format!("-D{}", crate::emit::c::PLAIN_MACRO));
    }
    let built = cmd.output();
    bar.finish_and_clear();
    let cc_name = cc.display().to_string();
    let shown = format!("{cc_name} -std=c99 {} -fstack-usage", flags.join(" "));
    match built {
        Err(e) => return Err(CliError::Failed(format!("running {cc_name}: {e}"))),
        Ok(o) if !o.status.success() => {
            let err = String::from_utf8_lossy(&o.stderr);
            let last: Vec<&str> = err.lines().filter(|l| !l.trim().is_empty()).collect();
            return Err(CliError::Failed(format!(
                "{shown} failed: {}",
                last[last.len().saturating_sub(4)..].join(" | ")
            )));
        }
        Ok(_) => {}
    }
    let su_path = scratch.path().join(format!("{name}.su"));
    let su = fs::read_to_string(&su_path).map_err(|_| {
        CliError::Failed(format!(
            "{cc_name} wrote no {name}.su: it does not support -fstack-usage (gcc and clang do)"
        ))
    })?;
    let frames = parse_frames(&su, &format!("{name}.su")).map_err(CliError::Failed)?;
    let graph = call_graph(&source);
    let usages = worst_cases(&graph, &frames).map_err(CliError::Failed)?;
    if usages.is_empty() {
        return Err(CliError::Failed(format!(
            "{name}.su lists none of {name}.c's public functions"
        )));
    }

    let prefix = format!("{name}_");
    let short = |f: &str| f.strip_prefix(&prefix).unwrap_or(f).to_string();
    let mut out = String::new();
    let _ = writeln!(
        out,
        "{}: worst-case stack per function, {shown}\n(frames from the compiler, plus the deepest chain of calls; C library frames not counted)\n",
        progress::bold(&name)
    );
    let head = format!(
        "{:<34} {:>7} {:>7} {:>9}  {}",
        "function", "frame", "worst", "scratch", "deepest chain"
    );
    let _ = writeln!(out, "{}", progress::bold(&head));
    let mut library = BTreeSet::new();
    let mut over = Vec::new();
    for u in &usages {
        library.extend(u.library.iter().cloned());
        let worst = if u.bounded {
            u.worst.to_string()
        } else {
            "unbounded".to_string()
        };
        let chain: Vec<String> = u.chain.iter().map(|f| short(f)).collect();
        let _ = writeln!(
            out,
            "{:<34} {:>7} {:>7} {:>9}  {}",
            u.name,
            u.own,
            worst,
            scratch_bytes(&header, &name, &u.name).map_or("-".to_string(), |b| format!("{b} B")),
            chain.join(" > ")
        );
        if let Some(limit) = args.limit {
            if !u.bounded || u.worst > limit {
                over.push(format!("{} ({worst})", u.name));
            }
        }
    }
    let _ = writeln!(
        out,
        "\nframe and worst in bytes; scratch: the caller-owned work array of the _ws forms (NAME_<FUNCTION>_WORK)"
    );
    if !library.is_empty() {
        let names: Vec<&str> = library.iter().map(String::as_str).collect();
        let _ = writeln!(
            out,
            "C library functions reached, whose frames are the library's: {}",
            names.join(", ")
        );
    }
    super::print_stdout(&out)?;
    match (args.limit, over.is_empty()) {
        (Some(limit), false) => Err(CliError::Failed(format!(
            "above --limit {limit} bytes: {}",
            over.join(", ")
        ))),
        _ => Ok(()),
    }
}

/// The model's file stem: the C source the marker lists (`c/NAME.c`), else the one in
/// `DIR/c` that is not a test.
fn model_name(
    dir: &Path,
    files: Option<&std::collections::BTreeMap<String, String>>,
) -> Result<String, CliError> {
    let from_list = |paths: Vec<String>| -> Option<String> {
        paths.into_iter().find_map(|p| {
            let f = p.strip_prefix("c/")?.strip_suffix(".c")?;
            (!f.starts_with("test_") && !f.contains('/')).then(|| f.to_string())
        })
    };
    let found = match files {
        Some(list) => from_list(list.keys().cloned().collect()),
        None => fs::read_dir(dir.join("c")).ok().and_then(|rd| {
            from_list(
                rd.flatten()
                    .map(|e| format!("c/{}", e.file_name().to_string_lossy()))
                    .collect(),
            )
        }),
    };
    found.ok_or_else(|| {
        CliError::Input(format!(
            "{}: the folder holds no C code (generate with --lang c)",
            dir.display()
        ))
    })
}

/// Bytes of `NAME_<FUNCTION>_WORK` for a `_ws` or `_with_ws` function, from the
/// header's `#define … /* N bytes */`.
fn scratch_bytes(header: &str, name: &str, function: &str) -> Option<u64> {
    let stem = function.strip_prefix(&format!("{name}_"))?;
    let stem = stem
        .strip_suffix("_with_ws")
        .or_else(|| stem.strip_suffix("_ws"))?;
    let key = format!(
        "#define {}_{}_WORK ",
        name.to_uppercase(),
        stem.to_uppercase()
    );
    let line = header.lines().find(|l| l.starts_with(&key))?;
    let bytes = line.split("/*").nth(1)?.split_whitespace().next()?;
    bytes.parse().ok()
}
