//! The emitted code of every demo arm (examples/*.toml), built and run in its own
//! language against the golden values it ships with: C with gcc (strict warnings, and
//! as C++ with g++), the Rust crate with `cargo test`, Python with python3 + NumPy.
//! Also: `generated/` is byte-for-byte what the generator writes today; the f32 C
//! compiles without a single promotion to double and passes its own shipped checks
//! (64 units of f32 rounding of each quantity's scale; equilibria 1e-4); the C is clean
//! under review warnings, as C90, and under clang's `-Weverything`; and (when
//! arm-none-eabi-gcc is installed) the f32 C is warning-clean for a Cortex-M4F (its -Os
//! flash size is in the `emitted_c` bench).
//!
//! A missing tool skips its check with a printed reason (`.ci/run` installs them all).

use arcwright::arm::parse_arm_file;
use arcwright::derive::derive_emitted;
use arcwright::emit::{emit, CStandard, Options, Precision};
use arcwright::outdir::write_tree;
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::process::Command;
use std::sync::{Mutex, OnceLock};

fn root() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .parent()
        .expect("workspace root")
        .to_path_buf()
}

fn arms() -> Vec<PathBuf> {
    let mut v: Vec<PathBuf> = std::fs::read_dir(root().join("examples"))
        .expect("examples/")
        .filter_map(|e| e.ok().map(|e| e.path()))
        .filter(|p| p.extension().is_some_and(|e| e == "toml"))
        .collect();
    v.sort();
    v
}

fn arm_name(path: &Path) -> String {
    path.file_stem().unwrap().to_string_lossy().into_owned()
}

/// Generates (once per arm and precision) into target/emitted-tests/<precision>/<arm>.
fn generated(path: &Path, precision: Precision) -> PathBuf {
    static DONE: OnceLock<Mutex<BTreeMap<String, PathBuf>>> = OnceLock::new();
    let key = format!("{precision:?}/{}", arm_name(path));
    let mut done = DONE
        .get_or_init(|| Mutex::new(BTreeMap::new()))
        .lock()
        .unwrap_or_else(|e| e.into_inner());
    if let Some(p) = done.get(&key) {
        return p.clone();
    }
    let out = root().join("target/emitted-tests").join(&key);
    let text = std::fs::read_to_string(path).expect("arm file");
    let (arm, _) = parse_arm_file(path).expect("demo arm parses");
    let model = derive_emitted(&arm);
    let files = emit(
        &model,
        &text,
        Options {
            precision,
            ..Options::default()
        },
    )
    .expect("emits");
    write_tree(&out, &files, &|_| {}).expect("writes");
    done.insert(key, out.clone());
    out
}

fn have(tool: &str, arg: &str) -> bool {
    Command::new(tool)
        .arg(arg)
        .output()
        .is_ok_and(|o| o.status.success())
}

fn run(cmd: &mut Command, what: &str) -> String {
    let out = cmd
        .output()
        .unwrap_or_else(|e| panic!("{what}: cannot run: {e}"));
    let text = format!(
        "{}{}",
        String::from_utf8_lossy(&out.stdout),
        String::from_utf8_lossy(&out.stderr)
    );
    assert!(out.status.success(), "{what} failed:\n{text}");
    text
}

const STRICT: &[&str] = &[
    "-Wall",
    "-Wextra",
    "-Werror",
    "-pedantic",
    "-Wconversion",
    "-Wshadow",
    // The shipped checks call the plain forms too (they are opt-in).
    "-DARCWRIGHT_PLAIN_FUNCTIONS",
];

/// The files of an output folder as `generate --check` sees them (no links followed,
/// build products of the shipped tests passed over).
fn files_under(dir: &Path) -> BTreeMap<PathBuf, Vec<u8>> {
    arcwright::outdir::walk::walk(dir)
        .unwrap_or_else(|e| panic!("{e}"))
        .files
        .into_iter()
        .map(|rel| {
            let bytes = std::fs::read(dir.join(&rel)).unwrap();
            (PathBuf::from(rel), bytes)
        })
        .collect()
}

#[test]
fn generated_folder_is_current() {
    for arm in arms() {
        let name = arm_name(&arm);
        let fresh = files_under(&generated(&arm, Precision::F64));
        let committed_dir = root().join("generated").join(&name);
        assert!(committed_dir.is_dir(), "generated/{name} is missing: run `arcwright generate examples/{name}.toml --out generated/{name}`");
        let committed = files_under(&committed_dir);
        let a: Vec<_> = fresh.keys().collect();
        let b: Vec<_> = committed.keys().collect();
        assert_eq!(
            a, b,
            "generated/{name} has other files than the generator writes; regenerate it"
        );
        for (p, bytes) in &fresh {
            assert!(
                committed[p] == *bytes,
                "generated/{name}/{} is stale: run `arcwright generate examples/{name}.toml --out generated/{name}`",
                p.display()
            );
        }
    }
}

#[test]
fn c_matches_reference() {
    if !have("gcc", "--version") {
        println!("SKIP C checks: gcc not found");
        return;
    }
    for arm in arms() {
        let name = arm_name(&arm);
        let dir = generated(&arm, Precision::F64).join("c");
        // Build products go outside the output tree (another test reads it).
        let bin = root().join("target/emitted-tests/bin");
        std::fs::create_dir_all(&bin).unwrap();
        let exe = bin.join(format!("test_{name}"));
        // -O2, what firmware is built with (seconds since bodies are split into parts).
        run(
            Command::new("gcc")
                .args(["-std=c99", "-O2"])
                .args(STRICT)
                .arg(dir.join(format!("test_{name}.c")))
                .arg(dir.join(format!("{name}.c")))
                .args(["-lm", "-o"])
                .arg(&exe),
            &format!("gcc {name}"),
        );
        let text = run(&mut Command::new(&exe), &format!("C cross-check of {name}"));
        println!("C {name}: {}", text.lines().last().unwrap_or(""));
        if have("g++", "--version") {
            run(
                Command::new("g++")
                    .args(["-x", "c++", "-O0", "-fsyntax-only"])
                    .args(STRICT)
                    .arg(dir.join(format!("{name}.c"))),
                &format!("g++ {name}"),
            );
        } else {
            println!("SKIP C++ build: g++ not found");
        }
    }
}

/// `-ffast-math` lets the compiler assume no NaN or infinity, so a check written with
/// `isfinite` may vanish; the emitted checks read the bits instead. The shipped test,
/// NaN input included, must pass in such a build (both precisions).
#[test]
fn c_checks_hold_under_fast_math() {
    if !have("gcc", "--version") {
        println!("SKIP fast-math C checks: gcc not found");
        return;
    }
    for arm in arms() {
        let name = arm_name(&arm);
        for (precision, tag) in [(Precision::F64, "f64"), (Precision::F32, "f32")] {
            let dir = generated(&arm, precision).join("c");
            let bin = root().join("target/emitted-tests/bin");
            std::fs::create_dir_all(&bin).unwrap();
            let exe = bin.join(format!("test_{name}_{tag}_fast_math"));
            run(
                Command::new("gcc")
                    .args(["-std=c99", "-O1", "-ffast-math"])
                    .args(STRICT)
                    .arg(format!(
                        "-D{}_SQRT(x)=__builtin_sqrt{}(x)",
                        name.to_uppercase(),
                        if precision == Precision::F32 { "f" } else { "" }
                    ))
                    .arg(dir.join(format!("test_{name}.c")))
                    .arg(dir.join(format!("{name}.c")))
                    .args(["-lm", "-o"])
                    .arg(&exe),
                &format!("gcc -ffast-math {tag} {name}"),
            );
            let text = run(&mut Command::new(&exe), &format!("fast-math {tag} {name}"));
            println!(
                "C fast-math {tag} {name}: {}",
                text.lines().last().unwrap_or("")
            );
        }
    }
}

/// Warnings a MISRA-style review of the model's C asks for beyond [`STRICT`] (no bad
/// function casts, prototypes everywhere, no undefined macro in `#if`, no unused
/// macro, no cast dropping `const`, no redundant declaration).
const REVIEW: &[&str] = &[
    "-Wbad-function-cast",
    "-Wstrict-prototypes",
    "-Wmissing-prototypes",
    "-Wundef",
    "-Wunused-macros",
    "-Wcast-qual",
    "-Wredundant-decls",
    "-Wfloat-equal",
];

/// The model's C, as generated by default (C99) and with `--c-standard c90`, builds
/// clean under [`STRICT`] and [`REVIEW`] (C90: `-std=c90 -Wdeclaration-after-statement`;
/// single precision calls the C99 float functions `sinf` …, which a C90 library offers
/// as an extension, here glibc's with `_ISOC99_SOURCE`), and the C90 build passes the
/// shipped checks (the test file itself stays C99), both precisions.
#[test]
fn c_builds_clean_for_review_and_as_c90() {
    if !have("gcc", "--version") {
        println!("SKIP C90 and review builds: gcc not found");
        return;
    }
    let clang = have("clang", "--version");
    let bin = root().join("target/emitted-tests/bin");
    std::fs::create_dir_all(&bin).unwrap();
    for arm in arms() {
        let name = arm_name(&arm);
        let text = std::fs::read_to_string(&arm).unwrap();
        let (parsed, _) = parse_arm_file(&arm).unwrap();
        let model = derive_emitted(&parsed);
        for (precision, tag) in [(Precision::F64, "f64"), (Precision::F32, "f32")] {
            let c99 = generated(&arm, precision).join("c");
            run(
                Command::new("gcc")
                    .args(["-std=c99", "-c"])
                    .args(STRICT)
                    .args(REVIEW)
                    .arg(c99.join(format!("{name}.c")))
                    .arg("-o")
                    .arg(bin.join(format!("{name}_{tag}_review.o"))),
                &format!("gcc C99 review warnings {tag} {name}"),
            );
            let out = root().join(format!("target/emitted-tests/c90/{tag}/{name}"));
            let files = emit(
                &model,
                &text,
                Options {
                    precision,
                    c_standard: CStandard::C90,
                    ..Options::default()
                },
            )
            .expect("emits");
            write_tree(&out, &files, &|_| {}).expect("writes");
            let c = out.join("c");
            let source = std::fs::read_to_string(c.join(format!("{name}.c"))).unwrap();
            // Temporaries are assigned, not declared where computed.
            let declared_late = ["const double t", "const float t"].iter().any(|d| {
                source
                    .match_indices(d)
                    .any(|(i, _)| source[i + d.len()..].starts_with(|c: char| c.is_ascii_digit()))
            });
            assert!(!declared_late, "C90 {tag} {name}: a const temporary");
            let model_obj = bin.join(format!("{name}_{tag}_c90.o"));
            let mut cc = Command::new("gcc");
            cc.args(["-std=c90", "-O1", "-c", "-Wdeclaration-after-statement"])
                .args(STRICT)
                .args(REVIEW);
            if precision == Precision::F32 {
                cc.arg("-D_ISOC99_SOURCE");
            }
            run(
                cc.arg(c.join(format!("{name}.c")))
                    .arg("-o")
                    .arg(&model_obj),
                &format!("gcc -std=c90 {tag} {name}"),
            );
            let exe = bin.join(format!("test_{name}_{tag}_c90"));
            run(
                Command::new("gcc")
                    .args(["-std=c99", "-O1"])
                    .args(STRICT)
                    .arg("-I")
                    .arg(&c)
                    .arg(c.join(format!("test_{name}.c")))
                    .arg(&model_obj)
                    .args(["-lm", "-o"])
                    .arg(&exe),
                &format!("gcc test of the C90 {tag} {name}"),
            );
            let text = run(&mut Command::new(&exe), &format!("C90 {tag} {name}"));
            let last = text.lines().last().unwrap_or("");
            println!("C90 {tag} {name}: {last}");
            assert!(last.ends_with(" 0 failed"), "C90 {tag} {name}: {last}");
            if clang {
                clang_everything(&c99, &name, "c99", tag);
                clang_everything(&c, &name, "c90", tag);
            }
        }
    }
    if !clang {
        println!("SKIP clang -Weverything builds: clang not found (apt-get install clang)");
    }
}

/// clang's `-Weverything` as errors on the model's C and its shipped test, but for two
/// warnings that are not defects: `-Wpadded` (the compiler says where it pads a struct;
/// the equilibrium report has a trailing 4 bytes in double precision) and, in C99,
/// `-Wdeclaration-after-statement` (the C90 style, which `--c-standard c90` gives).
fn clang_everything(dir: &Path, name: &str, standard: &str, tag: &str) {
    let mut cc = Command::new("clang");
    cc.arg(format!("-std={standard}"))
        .args(["-fsyntax-only", "-Weverything", "-Werror", "-Wno-padded"])
        .arg("-DARCWRIGHT_PLAIN_FUNCTIONS");
    if standard == "c99" {
        cc.arg("-Wno-declaration-after-statement");
    } else if tag == "f32" {
        // C90 has no float functions; the C library offers C99's as an extension.
        cc.arg("-D_ISOC99_SOURCE");
    }
    if standard == "c99" {
        cc.arg("-I")
            .arg(dir)
            .arg(dir.join(format!("test_{name}.c")));
    }
    run(
        cc.arg(dir.join(format!("{name}.c"))),
        &format!("clang -Weverything {standard} {tag} {name}"),
    );
}

/// Every square root of the C goes through `NAME_SQRT`, so a firmware can swap the C
/// library's (and its errno path) for its own: with the hook defined away the object
/// refers to no `sqrt`/`sqrtf`, and without it, it does. The fast-math build above,
/// where `__builtin_sqrt` has no errno path, runs the shipped test through the hook.
#[test]
fn c_square_roots_go_through_the_hook() {
    if !have("gcc", "--version") || !have("nm", "--version") {
        println!("SKIP square-root hook: gcc or nm not found");
        return;
    }
    let arm = &arms()[0];
    let name = arm_name(arm);
    let upper = name.to_uppercase();
    for (precision, tag) in [(Precision::F64, "f64"), (Precision::F32, "f32")] {
        let dir = generated(arm, precision).join("c");
        let bin = root().join("target/emitted-tests/bin");
        std::fs::create_dir_all(&bin).unwrap();
        let refs = |define: Option<String>| -> bool {
            let obj = bin.join(format!("{name}_{tag}_sqrt_hook.o"));
            let mut cmd = Command::new("gcc");
            cmd.args(["-std=c99", "-O0", "-c"]).args(STRICT);
            if let Some(d) = define {
                cmd.arg(d);
            }
            run(
                cmd.arg(dir.join(format!("{name}.c"))).arg("-o").arg(&obj),
                &format!("gcc {tag} {name} (square-root hook)"),
            );
            let syms = run(Command::new("nm").arg("-u").arg(&obj), "nm");
            syms.lines()
                .any(|l| matches!(l.split_whitespace().last(), Some("sqrt" | "sqrtf")))
        };
        assert!(
            refs(None),
            "{tag}: the library square root is not called at all"
        );
        assert!(
            !refs(Some(format!("-D{upper}_SQRT(x)=(x)"))),
            "{tag}: a square root bypasses {upper}_SQRT"
        );
    }
}

/// Arms whose actuation does not depend on q (none at all; bending moments only) leave
/// parameters unused; the C must still build under the strict warnings and pass, and
/// the Rust crate without a warning.
#[test]
fn c_of_arms_with_constant_actuation_builds_strict() {
    if !have("gcc", "--version") {
        println!("SKIP: gcc not found");
        return;
    }
    let seg = "[[segment]]\nlength = 0.1\ncurvature_degree = 1\ndensity = 0.2\nbending_stiffness = 0.01\n";
    for (name, extra) in [
        ("bare", ""),
        ("bent", "[[actuator]]\nkind = \"moment\"\nsegment = 1\n"),
    ] {
        let text =
            format!("name = \"{name}\"\nexpansion_order = 1\ngravity = [0.0, -9.81]\n{seg}{extra}");
        let arm = arcwright::arm::parse_arm_str(&text, "test.toml").expect("parses");
        let files = emit(&derive_emitted(&arm), &text, Options::default()).expect("emits");
        let out = root()
            .join("target/emitted-tests/constant-actuation")
            .join(name);
        write_tree(&out, &files, &|_| {}).expect("writes");
        shipped_c(&out, name, name);
        let text = run(
            Command::new(env!("CARGO"))
                .args(["test", "--quiet"])
                .current_dir(out.join("rust"))
                .env("CARGO_TARGET_DIR", root().join("target/generated-rust"))
                .env("RUSTFLAGS", "-D warnings"),
            &format!("cargo test of the {name} crate"),
        );
        assert!(text.contains(" 0 failed"), "Rust {name}:\n{text}");
    }
}

/// Builds the shipped C test of the output folder `out` (arm `name`) at `-O1` under the
/// strict warnings, runs it, and returns its summary line once it says nothing failed.
fn shipped_c(out: &Path, name: &str, what: &str) -> String {
    let exe = out.with_extension("bin");
    run(
        Command::new("gcc")
            .args(["-std=c99", "-O1"])
            .args(STRICT)
            .arg(out.join(format!("c/test_{name}.c")))
            .arg(out.join(format!("c/{name}.c")))
            .args(["-lm", "-o"])
            .arg(&exe),
        &format!("gcc {what}"),
    );
    let text = run(&mut Command::new(&exe), &format!("C checks of {what}"));
    let last = text.lines().last().unwrap_or("").to_string();
    assert!(last.ends_with(" 0 failed"), "C {what}: {last}");
    last
}

/// An arm whose first segment takes its double kernels from the recurrence and whose
/// second keeps them as dot products (constant curvature: few kernels of low powers),
/// so that a range of dot products follows a family in `kern[]`: the shipped C checks
/// must pass, as on the demo arms.
#[test]
fn c_of_an_arm_mixing_recurrence_and_dot_product_kernels_matches_reference() {
    if !have("gcc", "--version") {
        println!("SKIP: gcc not found");
        return;
    }
    let text = "name = \"mixed\"\nexpansion_order = 3\ngravity = [0.0, -9.81]\n\
                [[segment]]\nlength = 0.12\ncurvature_degree = 2\ndensity = 0.3\n\
                bending_stiffness = 0.012\n\
                [[segment]]\nlength = 0.1\ncurvature_degree = 0\ndensity = 0.25\n\
                bending_stiffness = 0.008\n\
                [[actuator]]\nkind = \"moment\"\nsegment = 2\n";
    let arm = arcwright::arm::parse_arm_str(text, "mixed.toml").expect("parses");
    let model = derive_emitted(&arm);
    let plan = arcwright::emit::plan::Plan::new(&model, true, Precision::F64).expect("plans");
    let mixed = |f: &arcwright::emit::plan::Func| {
        f.families
            .iter()
            .any(|fam| f.dots.iter().any(|d| d.start >= fam.start + fam.count))
    };
    // terms' kernels are evaluated by the helper it shares with the regressor.
    let kernels_of_terms = plan.shares.as_ref().unwrap_or(&plan.terms);
    assert!(
        mixed(kernels_of_terms),
        "the arm no longer has a dot-product range after a family: choose another"
    );
    let files = emit(&model, text, Options::default()).expect("emits");
    let out = root().join("target/emitted-tests/mixed-kernels");
    write_tree(&out, &files, &|_| {}).expect("writes");
    println!("C mixed: {}", shipped_c(&out, "mixed", "mixed"));
}

/// Invented arms beyond the demos (tests/arms/*.toml: mixed degrees and tapers, only
/// constant curvature, a cubic segment with an end force, order 5, a nearly singular
/// allocation, five inputs): their shipped C checks pass in both precisions and their
/// Python checks in double. Where a precision cannot factor `B` (its smallest relative
/// pivot near or below `NAME_PIVOT_FLOOR`) or resolve an equilibrium or the regulators'
/// inputs as finely as on the demos, the checks know it from the conditioning the
/// golden set carries.
#[test]
fn shipped_checks_of_invented_arms_pass() {
    if !have("gcc", "--version") {
        println!("SKIP: gcc not found");
        return;
    }
    let mut paths: Vec<PathBuf> = std::fs::read_dir(root().join("tests/arms"))
        .expect("tests/arms")
        .filter_map(|e| e.ok().map(|e| e.path()))
        .filter(|p| p.extension().is_some_and(|e| e == "toml"))
        .collect();
    paths.sort();
    assert!(paths.len() >= 6, "tests/arms holds {} arms", paths.len());
    let python = Command::new("python3")
        .args(["-c", "import numpy"])
        .output()
        .is_ok_and(|o| o.status.success());
    for path in &paths {
        let name = arm_name(path);
        let text = std::fs::read_to_string(path).unwrap();
        let (arm, _) = parse_arm_file(path).expect("test arm parses");
        let model = derive_emitted(&arm);
        for (precision, tag) in [(Precision::F64, "f64"), (Precision::F32, "f32")] {
            let files = emit(
                &model,
                &text,
                Options {
                    precision,
                    ..Options::default()
                },
            )
            .expect("emits");
            let out = root().join(format!("target/emitted-tests/invented/{tag}/{name}"));
            write_tree(&out, &files, &|_| {}).expect("writes");
            let last = shipped_c(&out, &name, &format!("{tag} {name}"));
            println!("C {tag} {name}: {last}");
            if precision == Precision::F64 && python {
                let text = run(
                    Command::new("python3")
                        .arg(out.join(format!("python/test_{name}.py")))
                        .env("PYTHONDONTWRITEBYTECODE", "1"),
                    &format!("Python checks of {name}"),
                );
                println!("Python {name}: {}", text.lines().last().unwrap_or(""));
            }
        }
    }
}

#[test]
fn c_single_precision_never_promotes_to_double_and_matches_reference() {
    if !have("gcc", "--version") {
        println!("SKIP f32 C checks: gcc not found");
        return;
    }
    for arm in arms() {
        let name = arm_name(&arm);
        let dir = generated(&arm, Precision::F32).join("c");
        let bin = root().join("target/emitted-tests/bin");
        std::fs::create_dir_all(&bin).unwrap();
        let exe = bin.join(format!("test_{name}_f32"));
        run(
            Command::new("gcc")
                .args(["-std=c99", "-O0", "-Wdouble-promotion"])
                .args(STRICT)
                .arg(dir.join(format!("test_{name}.c")))
                .arg(dir.join(format!("{name}.c")))
                .args(["-lm", "-o"])
                .arg(&exe),
            &format!("gcc f32 {name}"),
        );
        // The shipped checks in single precision: 64 units of rounding (7.6e-6) against the f64
        // reference, with the same per-quantity floors.
        let text = run(
            &mut Command::new(&exe),
            &format!("f32 C cross-check of {name}"),
        );
        println!("C f32 {name}: {}", text.lines().last().unwrap_or(""));
        if have("arm-none-eabi-gcc", "--version") {
            // Warning-clean for the Cortex-M4F target; the full -Os build and its flash
            // size are measured by `cargo bench --bench emitted_c` (minutes per arm).
            run(
                Command::new("arm-none-eabi-gcc")
                    .args([
                        "-std=c99",
                        "-mcpu=cortex-m4",
                        "-mfpu=fpv4-sp-d16",
                        "-mfloat-abi=hard",
                        "-fsyntax-only",
                    ])
                    .args(STRICT)
                    .arg("-Wdouble-promotion")
                    .arg(dir.join(format!("{name}.c"))),
                &format!("arm-none-eabi-gcc {name}"),
            );
        } else {
            println!("SKIP Cortex-M4F build of {name}: arm-none-eabi-gcc not found (apt-get install gcc-arm-none-eabi)");
        }
    }
}

#[test]
fn rust_crate_matches_reference() {
    let target = root().join("target/generated-rust");
    for arm in arms() {
        let name = arm_name(&arm);
        for (precision, real) in [(Precision::F64, "f64"), (Precision::F32, "f32")] {
            let dir = generated(&arm, precision).join("rust");
            let lib = std::fs::read_to_string(dir.join("src/lib.rs")).expect("lib.rs");
            assert!(
                lib.contains(&format!("pub type Real = {real};")),
                "{name}: the {real} crate is not {real}"
            );
            let text = run(
                Command::new(env!("CARGO"))
                    .args(["test", "--quiet"])
                    .current_dir(&dir)
                    .env("CARGO_TARGET_DIR", &target)
                    .env("RUSTFLAGS", "-D warnings"),
                &format!("cargo test of the {real} {name} crate"),
            );
            let tests = std::fs::read_to_string(dir.join("tests/golden.rs"))
                .expect("golden.rs")
                .matches("#[test]")
                .count();
            assert!(
                tests >= 8 && text.contains(&format!("{tests} passed")),
                "{real} {name}: not all {tests} golden and workspace tests ran:\n{text}"
            );
            println!("Rust {real} {name}: {tests} passed");
        }
    }
}

#[test]
fn python_matches_reference() {
    let numpy = Command::new("python3")
        .args(["-c", "import numpy"])
        .output()
        .is_ok_and(|o| o.status.success());
    if !numpy {
        println!("SKIP Python checks: python3 with numpy not found (pip install -r tests/requirements.txt)");
        return;
    }
    for arm in arms() {
        let name = arm_name(&arm);
        let dir = generated(&arm, Precision::F64).join("python");
        let text = run(
            Command::new("python3")
                .arg(dir.join(format!("test_{name}.py")))
                .env("PYTHONDONTWRITEBYTECODE", "1"),
            &format!("Python cross-check of {name}"),
        );
        println!("Python {name}: {}", text.lines().last().unwrap_or(""));
    }
}

#[test]
fn generate_cli_refuses_foreign_folder_and_bad_precision() {
    let bin = env!("CARGO_BIN_EXE_arcwright");
    let tmp = root().join("target/emitted-tests/cli");
    let _ = std::fs::remove_dir_all(&tmp);
    std::fs::create_dir_all(tmp.join("mine")).unwrap();
    std::fs::write(tmp.join("mine/notes.txt"), "keep me").unwrap();
    let arm = root().join("examples/reach_arm.toml");
    let out = Command::new(bin)
        .arg("generate")
        .arg(&arm)
        .arg("--out")
        .arg(tmp.join("mine"))
        .output()
        .unwrap();
    assert_eq!(
        out.status.code(),
        Some(2),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    assert_eq!(
        std::fs::read_to_string(tmp.join("mine/notes.txt")).unwrap(),
        "keep me"
    );
    let out = Command::new(bin)
        .arg("generate")
        .arg(&arm)
        .args(["--precision", "f16", "--out"])
        .arg(tmp.join("x"))
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    let out = Command::new(bin)
        .arg("generate")
        .arg(tmp.join("missing.toml"))
        .arg("--out")
        .arg(tmp.join("y"))
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(!tmp.join("y").exists());
}

#[test]
fn every_language_names_the_arm_file_it_was_generated_from() {
    // MODEL_SHA256 is what a firmware logs: it must be the SHA-256 of the folder's
    // arm.toml, in all three languages.
    use sha2::{Digest, Sha256};
    for arm in arms() {
        let name = arm_name(&arm);
        let dir = generated(&arm, Precision::F64);
        let text = std::fs::read(dir.join("arm.toml")).expect("arm.toml");
        let sha: String = Sha256::digest(&text)
            .iter()
            .map(|b| format!("{b:02x}"))
            .collect();
        let up = name.to_uppercase();
        for (file, line) in [
            (
                format!("c/{name}.h"),
                format!("#define {up}_MODEL_SHA256 \"{sha}\""),
            ),
            (
                "rust/src/lib.rs".to_string(),
                format!("pub const MODEL_SHA256: &str = \"{sha}\";"),
            ),
            (
                format!("python/{name}.py"),
                format!("MODEL_SHA256 = \"{sha}\""),
            ),
        ] {
            let src = std::fs::read_to_string(dir.join(&file)).expect("emitted file");
            assert!(src.contains(&line), "{file} lacks `{line}`");
        }
    }
}

#[test]
fn c_without_the_plain_forms_fits_a_2_kb_stack_limit() {
    // What a firmware build sees by default: only the _ws forms, whose scratch the
    // caller owns; every frame (helpers included) under 2 KB at -O2 and -Os.
    if !have("gcc", "--version") {
        println!("SKIP: gcc not found");
        return;
    }
    for arm in arms() {
        let name = arm_name(&arm);
        for precision in [Precision::F64, Precision::F32] {
            let dir = generated(&arm, precision).join("c");
            for opt in ["-O2", "-Os"] {
                run(
                    Command::new("gcc")
                        .args(["-std=c99", opt, "-c", "-o", "/dev/null"])
                        .args(["-Wall", "-Wextra", "-Werror", "-pedantic"])
                        .arg("-Wstack-usage=2048")
                        .arg(dir.join(format!("{name}.c"))),
                    &format!("gcc {opt} -Wstack-usage=2048 {name} ({precision:?})"),
                );
            }
        }
    }
}

#[test]
fn c_forward_dynamics_checks_the_workspace_when_asked() {
    // Built with ARCWRIGHT_CHECK_RANGE, forward dynamics refuses a configuration outside
    // the arm file's [sampling] bounds with its own code, and answers inside them.
    if !have("gcc", "--version") {
        println!("SKIP: gcc not found");
        return;
    }
    let arm = root().join("examples/reach_arm.toml");
    let dir = generated(&arm, Precision::F64).join("c");
    let scratch = tempfile::tempdir().unwrap();
    let driver = scratch.path().join("range.c");
    std::fs::write(
        &driver,
        r#"#include "reach_arm.h"
#include <stdio.h>
static double work[REACH_ARM_WORK_LEN];
int main(void) {
    double q[REACH_ARM_NQ] = {1.0, 0.5, -0.2, -1.5, 0.3, 0.1};
    double qd[REACH_ARM_NQ] = {0.0}, u[REACH_ARM_NU] = {0.0}, qdd[REACH_ARM_NQ];
    int inside = reach_arm_forward_dynamics_ws(q, qd, u, qdd, work);
    q[3] = 80.0; /* 8 rad of base bending on a 0.1 m segment */
    int outside = reach_arm_forward_dynamics_ws(q, qd, u, qdd, work);
    printf("%d %d %d\n", inside, outside, (int)REACH_ARM_ERR_OUT_OF_RANGE);
    return 0;
}
"#,
    )
    .unwrap();
    let exe = scratch.path().join("range");
    run(
        Command::new("gcc")
            .args(["-std=c99", "-O1", "-DARCWRIGHT_CHECK_RANGE"])
            .args(STRICT)
            .arg("-I")
            .arg(&dir)
            .arg(&driver)
            .arg(dir.join("reach_arm.c"))
            .args(["-lm", "-o"])
            .arg(&exe),
        "gcc -DARCWRIGHT_CHECK_RANGE",
    );
    let out = run(&mut Command::new(&exe), "the range driver");
    assert_eq!(out.trim(), "0 8 8", "inside, outside, the code: {out}");
}
