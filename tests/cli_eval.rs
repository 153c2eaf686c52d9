//! `arcwright eval` driven like a user drives it: JSON out, clear errors, exit codes.

#[path = "common/mod.rs"]
mod common;

use common::*;
use std::process::Output;

fn json(out: &Output) -> serde_json::Value {
    assert!(
        out.status.success(),
        "stderr: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    serde_json::from_slice(&out.stdout).expect("eval prints JSON")
}

#[test]
fn eval_prints_every_quantity_and_agrees_with_the_reference() {
    let q = "8,-20,15,12,5,-30";
    let model = json(&arcwright(&[
        "eval",
        "examples/reach_arm.toml",
        "--q",
        q,
        "--qd",
        "1,0,0,0,0,-2",
        "--u",
        "0.2,0,0.1,0",
    ]));
    for key in [
        "n",
        "B",
        "C",
        "G",
        "K",
        "D",
        "A",
        "tip_pose",
        "tip_jacobian",
        "kinetic_energy",
        "potential_energy",
        "qdd",
    ] {
        assert!(model.get(key).is_some(), "missing {key}");
    }
    assert_eq!(model["n"], 6);
    assert_eq!(model["A"].as_array().unwrap().len(), 6);
    assert_eq!(model["A"][0].as_array().unwrap().len(), 4);
    assert_eq!(model["tip_jacobian"].as_array().unwrap().len(), 3);
    let reference = json(&arcwright(&[
        "eval",
        "examples/reach_arm.toml",
        "--q",
        q,
        "--qd",
        "1,0,0,0,0,-2",
        "--reference",
    ]));
    let b = |v: &serde_json::Value| -> Vec<Vec<f64>> {
        v["B"]
            .as_array()
            .unwrap()
            .iter()
            .map(|r| {
                r.as_array()
                    .unwrap()
                    .iter()
                    .map(|x| x.as_f64().unwrap())
                    .collect()
            })
            .collect()
    };
    assert!(rel_err(&b(&model), &b(&reference), 0.0) < 1e-12);
    // The untruncated kinematics differ, but only by the truncation error.
    let exact = json(&arcwright(&[
        "eval",
        "examples/reach_arm.toml",
        "--q",
        q,
        "--exact",
    ]));
    let e = rel_err(&b(&model), &b(&exact), 0.0);
    assert!(e > 0.0 && e < 1e-2, "truncation error {e}");
}

#[test]
fn eval_order_override_changes_the_model() {
    let q = "8,-20,15,12,5,-30";
    let n4 = json(&arcwright(&["eval", "examples/reach_arm.toml", "--q", q]));
    let n1 = json(&arcwright(&[
        "eval",
        "examples/reach_arm.toml",
        "--q",
        q,
        "--order",
        "1",
    ]));
    assert_ne!(n4["tip_pose"], n1["tip_pose"]);
    let out = arcwright(&["eval", "examples/reach_arm.toml", "--q", q, "--order", "11"]);
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("--order"));
}

#[test]
fn eval_rejects_bad_vectors_with_exit_2() {
    for (args, needle) in [
        (vec!["--q", "1,2"], "expected 6"),
        (vec!["--q", "1,2,3,4,5,x"], "entry 6"),
        (vec!["--q", "1,2,3,4,5,nan"], "finite"),
        (vec!["--q", "0,0,0,0,0,0", "--u", "1"], "--u"),
        (vec!["--q", "0,0,0,0,0,0", "--qd", "1,2,3"], "--qd"),
    ] {
        let mut all = vec!["eval", "examples/reach_arm.toml"];
        all.extend(args.iter());
        let out = arcwright(&all);
        assert_eq!(out.status.code(), Some(2), "{args:?}");
        let err = String::from_utf8_lossy(&out.stderr);
        assert!(err.contains(needle), "{args:?}: {err}");
    }
}

#[test]
fn bad_arm_files_name_file_line_column_and_field() {
    let dir = tempfile::tempdir().unwrap();
    let cases = [
        ("name = \"x\"\n[[segment]]\nlength = -0.1\ncurvature_degree = 0\ndensity = 1\nbending_stiffness = 1\n", "bad.toml:3:10", "length"),
        ("name = \"x\"\n[[segment]]\nlength = 0.1\ncurvature_degree = 9\ndensity = 1\nbending_stiffness = 1\n", "bad.toml:4:20", "curvature_degree"),
        ("name = \"Arm\"\n[[segment]]\nlength = 0.1\ncurvature_degree = 0\ndensity = 1\nbending_stiffness = 1\n", "bad.toml:1:8", "name"),
        ("name = \"x\"\n[[segment]]\nlenght = 0.1\n", "bad.toml:3:1", "length"),
        ("name = \"x\"\n[[segment]\n", "bad.toml:2", ""),
        ("name = \"x\"\n[[segment]]\nlength = 0.1\ncurvature_degree = 0\ndensity = 1\nbending_stiffness = 1\n[[actuator]]\nkind = \"moment\"\nsegment = 2\n", "bad.toml:9:11", "segment"),
    ];
    for (text, location, field) in cases {
        let path = dir.path().join("bad.toml");
        std::fs::write(&path, text).unwrap();
        let out = arcwright(&["eval", path.to_str().unwrap(), "--q", "0"]);
        assert_eq!(out.status.code(), Some(2), "{text}");
        let err = String::from_utf8_lossy(&out.stderr);
        assert!(err.contains(location), "expected {location} in: {err}");
        assert!(err.contains(field), "expected {field} in: {err}");
        assert!(!err.contains("panicked"), "{err}");
    }
}
