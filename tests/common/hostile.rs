//! Reading tests/hostile/cases.toml, shared by the test that runs the corpus and the
//! benchmark that measures it.

use std::path::{Path, PathBuf};

/// One case of cases.toml.
pub struct Case {
    pub args: Vec<String>,
    pub exit: i32,
    pub stderr: String,
}

/// The corpus folder (cases run with it as working folder).
pub fn corpus() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("../tests/hostile")
        .to_path_buf()
}

pub fn cases() -> Vec<Case> {
    let text = std::fs::read_to_string(corpus().join("cases.toml")).expect("cases.toml");
    let doc: toml::Table = toml::from_str(&text).expect("cases.toml parses");
    doc["case"]
        .as_array()
        .expect("[[case]] tables")
        .iter()
        .map(|c| Case {
            args: c["args"]
                .as_array()
                .expect("args")
                .iter()
                .map(|a| a.as_str().expect("string args").to_string())
                .collect(),
            exit: c["exit"].as_integer().expect("exit") as i32,
            stderr: c["stderr"].as_str().expect("stderr").to_string(),
        })
        .collect()
}

/// The case's arguments with `@out` replaced by a path inside `scratch`.
pub fn args_in(case: &Case, scratch: &Path) -> Vec<String> {
    case.args
        .iter()
        .map(|a| {
            if a == "@out" {
                scratch.join("out").display().to_string()
            } else {
                a.clone()
            }
        })
        .collect()
}
