//! The corpus of hostile and careless input (tests/hostile/cases.toml): every case
//! gets its exit code and message, never a panic, and leaves no output behind.

mod common;

use common::hostile::{args_in, cases, corpus};
use std::process::Command;

#[test]
fn every_hostile_input_gets_its_answer() {
    let cases = cases();
    assert!(cases.len() >= 30, "the corpus shrank to {}", cases.len());
    let mut failures = Vec::new();
    for case in &cases {
        let scratch = tempfile::tempdir().unwrap();
        let args = args_in(case, scratch.path());
        let out = Command::new(env!("CARGO_BIN_EXE_arcwright"))
            .args(&args)
            .arg("--quiet")
            .current_dir(corpus())
            .output()
            .expect("running arcwright");
        let err = String::from_utf8_lossy(&out.stderr);
        let what = format!("arcwright {}", case.args.join(" "));
        if out.status.code() != Some(case.exit) {
            failures.push(format!(
                "{what}: exit {:?}, want {}: {err}",
                out.status.code(),
                case.exit
            ));
        } else if !err.contains(&case.stderr) {
            failures.push(format!("{what}: stderr lacks {:?}: {err}", case.stderr));
        } else if err.contains("panicked") {
            failures.push(format!("{what}: panicked: {err}"));
        }
        let left: Vec<_> = std::fs::read_dir(scratch.path())
            .unwrap()
            .flatten()
            .map(|e| e.file_name())
            .collect();
        if !left.is_empty() {
            failures.push(format!("{what}: left {left:?} behind"));
        }
    }
    assert!(failures.is_empty(), "{}", failures.join("\n"));
}
