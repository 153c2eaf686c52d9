//! `arcwright verify`, `compare`, `stack` and `completions` driven as a reviewer drives them:
//! what they name, what they print and their exit codes. `verify` runs on a small arm
//! generated into a temporary folder (the demo arm's C file takes minutes to compile)
//! and skips the Rust cross-check, which compiles a crate.

#[path = "common/mod.rs"]
mod common;

use common::{arcwright, repo_root, stdout};

use std::fs;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};

fn describe(out: &Output) -> String {
    format!(
        "exit {:?}\nstdout: {}\nstderr: {}",
        out.status.code(),
        stdout(out),
        String::from_utf8_lossy(&out.stderr)
    )
}

fn path(p: &Path) -> &str {
    p.to_str().expect("UTF-8 path")
}

/// The demo arm with one line replaced (`field = old` in segment `segment`, 1-based).
fn changed_arm(dir: &Path, segment: usize, field: &str, value: &str) -> PathBuf {
    let text = fs::read_to_string(repo_root().join("examples/reach_arm.toml")).unwrap();
    let mut seen = 0;
    let mut done = false;
    let lines: Vec<String> = text
        .lines()
        .map(|l| {
            if l.trim() == "[[segment]]" || l.trim_start().starts_with("[[segment]]") {
                seen += 1;
            }
            if seen == segment && !done && l.trim_start().starts_with(&format!("{field} =")) {
                done = true;
                format!("{field} = {value}")
            } else {
                l.to_string()
            }
        })
        .collect();
    assert!(done, "no {field} in segment {segment}");
    let p = dir.join(format!("{field}_{segment}.toml"));
    fs::write(&p, lines.join("\n") + "\n").unwrap();
    p
}

/// Function names from the `changed functions:` line.
fn changed_functions(text: &str) -> Vec<String> {
    let line = text
        .lines()
        .find_map(|l| l.strip_prefix("changed functions: "))
        .expect("a changed functions line");
    line.split(", ").map(str::to_string).collect()
}

#[test]
fn compare_names_the_changed_parameter_and_functions() {
    let tmp = tempfile::tempdir().unwrap();
    let stiff = changed_arm(tmp.path(), 2, "bending_stiffness", "0.009");
    let out = arcwright(&["compare", "examples/reach_arm.toml", path(&stiff), "-q"]);
    assert!(out.status.success(), "{}", describe(&out));
    let text = stdout(&out);
    assert!(
        text.contains("segment[2].bending_stiffness  0.008 → 0.009"),
        "{text}"
    );
    assert!(
        !text.contains("segment[1]."),
        "only segment 2 changed:\n{text}"
    );
    let changed = changed_functions(&text);
    for f in ["stiffness", "potential_energy", "forward_dynamics"] {
        assert!(changed.iter().any(|c| c == f), "{f} not listed:\n{text}");
    }
    for f in ["inertia", "coriolis", "gravity", "pose", "damping"] {
        assert!(!changed.iter().any(|c| c == f), "{f} listed:\n{text}");
    }

    let dense = changed_arm(tmp.path(), 1, "density", "0.33");
    let out = arcwright(&[
        "compare",
        "examples/reach_arm.toml",
        path(&dense),
        "--json",
        "-q",
    ]);
    assert!(out.status.success(), "{}", describe(&out));
    let v: serde_json::Value = serde_json::from_str(&stdout(&out)).expect("JSON");
    assert_eq!(v["parameters"][0]["path"], "segment[1].density");
    assert_eq!(v["parameters"].as_array().unwrap().len(), 1);
    let changed: Vec<&str> = v["changed_functions"]
        .as_array()
        .unwrap()
        .iter()
        .map(|x| x.as_str().unwrap())
        .collect();
    for f in [
        "inertia",
        "coriolis",
        "gravity",
        "kinetic_energy",
        "forward_dynamics",
    ] {
        assert!(changed.contains(&f), "{f} not in {changed:?}");
    }
    for f in ["stiffness", "damping", "actuation", "pose"] {
        assert!(!changed.contains(&f), "{f} in {changed:?}");
    }
    let inertia = v["quantities"]
        .as_array()
        .unwrap()
        .iter()
        .find(|q| q["name"] == "inertia")
        .unwrap();
    let rel = inertia["max_rel_change"].as_f64().unwrap();
    // Density 0.30 → 0.33 on one of two segments: B moves by well under 10 %.
    assert!(rel > 1e-4 && rel < 0.1, "{rel}");
}

#[test]
fn compare_tolerance_sets_the_exit_status() {
    let tmp = tempfile::tempdir().unwrap();
    let stiff = changed_arm(tmp.path(), 2, "bending_stiffness", "0.009");
    let new = path(&stiff);
    let same = arcwright(&[
        "compare",
        "examples/reach_arm.toml",
        "examples/reach_arm.toml",
        "--tolerance",
        "0",
        "-q",
    ]);
    assert_eq!(same.status.code(), Some(0), "{}", describe(&same));
    assert!(stdout(&same).contains("changed functions: none"));
    let loose = arcwright(&[
        "compare",
        "examples/reach_arm.toml",
        new,
        "--tolerance",
        "10",
        "-q",
    ]);
    assert_eq!(loose.status.code(), Some(0), "{}", describe(&loose));
    let tight = arcwright(&[
        "compare",
        "examples/reach_arm.toml",
        new,
        "--tolerance",
        "1e-3",
        "-q",
    ]);
    assert_eq!(tight.status.code(), Some(1), "{}", describe(&tight));
    assert!(stdout(&tight).contains("exceeded"));
    let report_only = arcwright(&["compare", "examples/reach_arm.toml", new, "-q"]);
    assert_eq!(
        report_only.status.code(),
        Some(0),
        "{}",
        describe(&report_only)
    );
    let bad = arcwright(&["compare", "examples/reach_arm.toml", "no/such.toml", "-q"]);
    assert_eq!(bad.status.code(), Some(2), "{}", describe(&bad));
    // A different number of segments: reported as structural, a tolerance fails it.
    let other = arcwright(&[
        "compare",
        "examples/reach_arm.toml",
        "examples/hanging_taper.toml",
        "--tolerance",
        "1",
        "-q",
    ]);
    assert_eq!(other.status.code(), Some(1), "{}", describe(&other));
    let text = stdout(&other);
    assert!(text.contains("structural change"), "{text}");
    assert!(text.contains("tip_pose"), "{text}");
}

const SMALL_ARM: &str = r#"name = "small_arm"
gravity = [0.0, -9.81]
expansion_order = 2

[[segment]]
length = 0.1
curvature_degree = 1
density = 0.2
bending_stiffness = 0.01
damping = 1e-4

[[actuator]]
kind = "moment"
segment = 1
"#;

#[test]
fn verify_passes_on_fresh_output_and_catches_a_stale_file() {
    let tmp = tempfile::tempdir().unwrap();
    let arm = tmp.path().join("small_arm.toml");
    fs::write(&arm, SMALL_ARM).unwrap();
    let out_dir = tmp.path().join("out");
    let gen = arcwright(&["generate", path(&arm), "--out", path(&out_dir), "-q"]);
    assert!(gen.status.success(), "{}", describe(&gen));

    let out = arcwright(&[
        "verify",
        path(&out_dir),
        "--arm",
        path(&arm),
        "--skip",
        "rust",
        "-q",
    ]);
    assert_eq!(out.status.code(), Some(0), "{}", describe(&out));
    let text = stdout(&out);
    assert!(text.contains("Rust test    skipped  --skip rust"), "{text}");
    for f in [
        "inertia",
        "coriolis",
        "gravity",
        "stiffness",
        "pose",
        "forward_dynamics",
    ] {
        let row = text
            .lines()
            .find(|l| l.split_whitespace().next() == Some(f))
            .unwrap_or_else(|| panic!("no row for {f}:\n{text}"));
        let err: f64 = row.split_whitespace().nth(1).unwrap().parse().unwrap();
        assert!(err < 1e-9, "{row}");
    }
    assert!(text.contains("numeric reference"), "{text}");

    // One byte of the C file changed by hand: an edit the marker's manifest catches,
    // exit 1.
    let c_file = out_dir.join("c/small_arm.c");
    let mut bytes = fs::read(&c_file).unwrap();
    let at = bytes.iter().rposition(|&b| b == b'1').unwrap();
    bytes[at] = b'2';
    fs::write(&c_file, bytes).unwrap();
    let out = arcwright(&[
        "verify",
        path(&out_dir),
        "--arm",
        path(&arm),
        "--skip",
        "c,rust,python",
        "-q",
    ]);
    assert_eq!(out.status.code(), Some(1), "{}", describe(&out));
    assert!(
        stdout(&out).contains("foreign  c/small_arm.c (edited since arcwright wrote it)"),
        "{}",
        describe(&out)
    );

    // Bad input: no folder, a folder that is no arcwright output.
    let out = arcwright(&[
        "verify",
        path(&tmp.path().join("nothing")),
        "--arm",
        path(&arm),
        "-q",
    ]);
    assert_eq!(out.status.code(), Some(2), "{}", describe(&out));
    let out = arcwright(&["verify", path(tmp.path()), "--arm", path(&arm), "-q"]);
    assert_eq!(out.status.code(), Some(2), "{}", describe(&out));
}

#[test]
fn verify_regenerates_with_the_options_the_marker_records() {
    // Optimised, single-precision output: verify needs no flag to rebuild it
    // byte for byte.
    let tmp = tempfile::tempdir().unwrap();
    let arm = tmp.path().join("small_arm.toml");
    fs::write(&arm, SMALL_ARM).unwrap();
    let out_dir = tmp.path().join("out");
    let gen = arcwright(&[
        "generate",
        path(&arm),
        "--out",
        path(&out_dir),
        "--optimise",
        "--precision",
        "f32",
        "-q",
    ]);
    assert!(gen.status.success(), "{}", describe(&gen));
    // Without -q, generate says whether the optimised program was the leaner one.
    let again = arcwright(&[
        "generate",
        path(&arm),
        "--out",
        path(&out_dir),
        "--optimise",
        "--precision",
        "f32",
    ]);
    assert!(again.status.success(), "{}", describe(&again));
    let err = String::from_utf8_lossy(&again.stderr);
    assert!(
        err.contains("--optimise: ") && err.contains("emitted operations")
            || err.contains("emitting the derived program"),
        "{err}"
    );
    let marker = fs::read_to_string(out_dir.join("ARCWRIGHT_OUTPUT")).unwrap();
    assert!(
        marker.contains("Generated with: --precision f32 --optimise"),
        "{marker}"
    );
    let out = arcwright(&[
        "verify",
        path(&out_dir),
        "--skip",
        "c,rust,python",
        "--samples",
        "2",
        "-q",
    ]);
    assert_eq!(out.status.code(), Some(0), "{}", describe(&out));
}

#[test]
fn verify_checks_a_single_language_folder_as_it_was_generated() {
    // The README's firmware example: C only, single precision. verify must not miss
    // the other languages, and must run the C checks it has.
    let tmp = tempfile::tempdir().unwrap();
    let arm = tmp.path().join("small_arm.toml");
    fs::write(&arm, SMALL_ARM).unwrap();
    let out_dir = tmp.path().join("f32");
    let gen = arcwright(&[
        "generate",
        path(&arm),
        "--out",
        path(&out_dir),
        "--lang",
        "c",
        "--precision",
        "f32",
        "-q",
    ]);
    assert!(gen.status.success(), "{}", describe(&gen));
    assert!(!out_dir.join("rust").exists() && !out_dir.join("python").exists());
    let out = arcwright(&["verify", path(&out_dir), "--samples", "2", "-q"]);
    assert_eq!(out.status.code(), Some(0), "{}", describe(&out));
    let text = stdout(&out);
    assert!(
        text.contains(
            "Rust test    skipped  the folder holds no rust code (generated with --lang c)"
        ),
        "{text}"
    );
    if Command::new("cc").arg("--version").output().is_ok() {
        assert!(text.contains("C test       ok"), "{text}");
    }
}

#[test]
fn build_products_of_the_shipped_tests_disturb_neither_verify_nor_check() {
    let tmp = tempfile::tempdir().unwrap();
    let arm = tmp.path().join("small_arm.toml");
    fs::write(&arm, SMALL_ARM).unwrap();
    let out_dir = tmp.path().join("out");
    let gen = arcwright(&["generate", path(&arm), "--out", path(&out_dir), "-q"]);
    assert!(gen.status.success(), "{}", describe(&gen));
    // What importing the module in place and `cargo test` in rust/ leave behind.
    fs::create_dir_all(out_dir.join("python/__pycache__")).unwrap();
    fs::write(
        out_dir.join("python/__pycache__/small_arm.cpython-311.pyc"),
        "x",
    )
    .unwrap();
    fs::create_dir_all(out_dir.join("rust/target/debug/deps")).unwrap();
    for i in 0..200 {
        fs::write(out_dir.join(format!("rust/target/debug/deps/f{i}")), "x").unwrap();
    }
    fs::write(out_dir.join("rust/Cargo.lock"), "x").unwrap();
    let ignore = fs::read_to_string(out_dir.join(".gitignore")).unwrap();
    for a in ["/rust/target/", "/rust/Cargo.lock", "/python/__pycache__/"] {
        assert!(ignore.lines().any(|l| l == a), "{ignore}");
    }
    let check = arcwright(&["generate", path(&arm), "--out", path(&out_dir), "--check"]);
    assert_eq!(check.status.code(), Some(0), "{}", describe(&check));
    let out = arcwright(&[
        "verify",
        path(&out_dir),
        "--skip",
        "c,rust,python",
        "--samples",
        "1",
        "-q",
    ]);
    assert_eq!(out.status.code(), Some(0), "{}", describe(&out));
    // Anything else is listed, readably, and both say so.
    fs::write(out_dir.join("python/notes.txt"), "mine").unwrap();
    let check = arcwright(&["generate", path(&arm), "--out", path(&out_dir), "--check"]);
    assert_eq!(check.status.code(), Some(1));
    let out = arcwright(&[
        "verify",
        path(&out_dir),
        "--skip",
        "c,rust,python",
        "--samples",
        "1",
        "-q",
    ]);
    assert_eq!(out.status.code(), Some(1));
    for text in [stdout(&check), stdout(&out)] {
        assert!(
            text.contains("foreign  python/notes.txt (not written by arcwright)"),
            "{text}"
        );
        assert!(!text.contains("target/debug"), "{text}");
    }
}

#[test]
fn verify_reads_the_recorded_arm_of_the_shipped_output() {
    // Only the checks that need no compiler: recorded arm, files, error table.
    let out = arcwright(&[
        "verify",
        "generated/reach_arm",
        "--skip",
        "c,rust,python",
        "--samples",
        "4",
        "-q",
    ]);
    let text = stdout(&out);
    if !repo_root().join("generated/reach_arm/arm.toml").is_file() {
        assert_eq!(out.status.code(), Some(2), "{}", describe(&out));
        return;
    }
    assert_eq!(out.status.code(), Some(0), "{}", describe(&out));
    assert!(text.contains("arm file     ok"), "{text}");
    assert!(text.contains("kinetic_energy"), "{text}");
}

/// A machine without compilers or Python: every shipped check is skipped with its
/// reason, and what verify can do in-process still runs.
#[test]
fn verify_without_compilers_says_what_it_skipped() {
    let empty = tempfile::tempdir().unwrap();
    let out = Command::new(env!("CARGO_BIN_EXE_arcwright"))
        .args(["verify", "generated/reach_arm", "--samples", "4", "-q"])
        .current_dir(repo_root())
        .env("PATH", empty.path())
        .env_remove("CC")
        .output()
        .expect("running arcwright");
    let text = stdout(&out);
    assert_eq!(out.status.code(), Some(0), "{}", describe(&out));
    assert!(text.contains("C test       skipped"), "{text}");
    assert!(text.contains("Rust test    skipped"), "{text}");
    assert!(text.contains("Python test  skipped"), "{text}");
    assert!(text.contains("files        ok"), "{text}");
}

/// Every file under `dir` with its bytes, to show that a command wrote nothing there.
fn snapshot(dir: &Path) -> Vec<(PathBuf, Vec<u8>)> {
    let mut out = Vec::new();
    let mut todo = vec![dir.to_path_buf()];
    while let Some(d) = todo.pop() {
        for e in fs::read_dir(&d).unwrap().flatten() {
            let p = e.path();
            if p.is_dir() {
                todo.push(p);
            } else {
                out.push((p.clone(), fs::read(&p).unwrap()));
            }
        }
    }
    out.sort();
    out
}

/// `stack` on the shipped small demo: a row per public function whose worst case is at
/// least its own frame, a limit that fails by name, bad folders refused, and nothing
/// written into the folder.
#[test]
fn stack_reports_every_public_function_and_enforces_a_limit() {
    if Command::new("cc").arg("--version").output().is_err() {
        println!("SKIP: no cc on PATH");
        return;
    }
    let dir = repo_root().join("generated/twin_tendon");
    let before = snapshot(&dir);
    let out = arcwright(&[
        "stack",
        "generated/twin_tendon",
        "--cc",
        "cc",
        "--cflags",
        "-O1",
        "-q",
    ]);
    let text = stdout(&out);
    assert_eq!(out.status.code(), Some(0), "{}", describe(&out));
    let mut rows = 0;
    for l in text.lines().filter(|l| l.starts_with("twin_tendon_")) {
        let f: Vec<&str> = l.split_whitespace().collect();
        let (frame, worst): (u64, u64) = (f[1].parse().unwrap(), f[2].parse().unwrap());
        assert!(worst >= frame, "{l}");
        rows += 1;
    }
    for f in [
        "twin_tendon_terms_ws ",
        "twin_tendon_forward_dynamics_ws ",
        "twin_tendon_regulate_ws ",
    ] {
        assert!(text.contains(f), "{f} missing:\n{text}");
    }
    assert!(
        !text.contains("twin_tendon_terms "),
        "plain forms only with --plain:\n{text}"
    );
    assert!(rows >= 20, "{text}");
    assert!(
        text.contains("C library functions reached") && text.contains("sin"),
        "{text}"
    );

    let out = arcwright(&[
        "stack",
        "generated/twin_tendon",
        "--cc",
        "cc",
        "--cflags",
        "-O1",
        "--limit",
        "1",
        "-q",
    ]);
    assert_eq!(out.status.code(), Some(1), "{}", describe(&out));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains("above --limit 1 bytes") && err.contains("twin_tendon_terms_ws"),
        "{err}"
    );
    assert_eq!(snapshot(&dir), before, "stack wrote into the output folder");

    let out = arcwright(&["stack", "examples", "-q"]);
    assert_eq!(out.status.code(), Some(2), "{}", describe(&out));
    assert!(String::from_utf8_lossy(&out.stderr).contains("not an arcwright output folder"));
    let out = arcwright(&[
        "stack",
        "generated/twin_tendon",
        "--cc",
        "no-such-compiler",
        "-q",
    ]);
    assert_eq!(out.status.code(), Some(2), "{}", describe(&out));
}

#[test]
fn bash_completions_mention_the_program() {
    let out = arcwright(&["completions", "bash"]);
    assert!(out.status.success(), "{}", describe(&out));
    let text = stdout(&out);
    assert!(text.contains("arcwright"));
    assert!(text.contains("verify") && text.contains("compare"));
    let bad = arcwright(&["completions", "no-such-shell"]);
    assert_eq!(bad.status.code(), Some(2));
}
