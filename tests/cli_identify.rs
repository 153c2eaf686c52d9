//! `arcwright identify`, driven like a user drives it: rest shapes and a logged motion
//! of a "true" arm (the demo arm with changed numbers, made by `statics` and
//! `simulate` with `--set`), fitted back; bad data refused with its file, row and
//! column, and nothing written.

#[path = "common/mod.rs"]
mod common;

use common::{arcwright, stderr, stdout};
use serde_json::Value;
use std::fmt::Write as _;
use std::path::Path;

const ARM: &str = "examples/twin_tendon.toml";

/// Stiffer base, softer tip, heavier base, lighter tip than the arm file
/// (×1.2, ×0.85, ×1.1, ×0.9): invented for the test.
const TRUTH: &str = "segment[1].bending_stiffness=0.018,segment[2].bending_stiffness=0.00765,\
                     segment[1].density=0.385,segment[2].density=0.225";

fn ok(args: &[&str]) -> String {
    let out = arcwright(args);
    assert!(
        out.status.success(),
        "{args:?}: exit {:?}\n{}\n{}",
        out.status.code(),
        stdout(&out),
        stderr(&out)
    );
    stdout(&out)
}

/// Rest shapes of the true arm under 16 tendon patterns, with the tensions recorded
/// to 1 mN (the measurement error of the test).
fn rest_shapes_csv(path: &Path) {
    let mut csv = String::from("q1_0,q2_0,u1,u2,u3,u4,tip_x\n");
    for i in 0..16 {
        let u: Vec<f64> = (0..4)
            .map(|c| 0.2 + ((i * 7 + c * 5) % 11) as f64 * 0.27)
            .collect();
        let us = u
            .iter()
            .map(|v| v.to_string())
            .collect::<Vec<_>>()
            .join(",");
        let out: Value =
            serde_json::from_str(&ok(&["statics", ARM, "--set", TRUTH, "--u", &us, "--json"]))
                .unwrap();
        let q: Vec<f64> = out["q"]
            .as_array()
            .unwrap()
            .iter()
            .map(|v| v.as_f64().unwrap())
            .collect();
        let noisy: Vec<String> = u
            .iter()
            .enumerate()
            .map(|(c, v)| format!("{:.3}", v + 4e-4 * (((i + c) % 5) as f64 - 2.0)))
            .collect();
        let _ = writeln!(csv, "{},{},{},0.1", q[0], q[1], noisy.join(","));
    }
    std::fs::write(path, csv).unwrap();
}

fn fitted(report: &Value, name: &str) -> (f64, f64) {
    let f = report["fitted"]
        .as_array()
        .unwrap()
        .iter()
        .find(|f| f["name"] == name)
        .unwrap_or_else(|| panic!("{name} not fitted: {report}"));
    (
        f["value"].as_f64().unwrap(),
        f["standard_error"].as_f64().unwrap(),
    )
}

#[test]
fn rest_shapes_give_back_the_true_stiffness_and_density_and_a_usable_arm_file() {
    let dir = tempfile::tempdir().unwrap();
    let poses = dir.path().join("poses.csv");
    rest_shapes_csv(&poses);
    let out = dir.path().join("fitted.toml");
    let plot = dir.path().join("fit.svg");
    let report: Value = serde_json::from_str(&ok(&[
        "identify",
        ARM,
        "--static",
        poses.to_str().unwrap(),
        "--fit",
        "bending_stiffness,density",
        "--out",
        out.to_str().unwrap(),
        "--plot",
        plot.to_str().unwrap(),
        "--json",
    ]))
    .unwrap();
    for (name, truth) in [
        ("segment[1].bending_stiffness", 1.2),
        ("segment[2].bending_stiffness", 0.85),
        ("segment[1].density", 1.1),
        ("segment[2].density", 0.9),
    ] {
        let (v, se) = fitted(&report, name);
        assert!(
            (v - truth).abs() <= 4.0 * se + 1e-9,
            "{name}: {v} ± {se}, truth {truth}"
        );
        assert!(se < 0.05 * truth, "{name}: {v} ± {se}");
    }
    assert!(
        report["residual_after"].as_f64().unwrap() < report["residual_before"].as_f64().unwrap()
    );
    // The fitted arm file is a valid arm file with the new numbers in it.
    let text = std::fs::read_to_string(&out).unwrap();
    assert!(text.contains("Fitted by `arcwright identify`"), "{text}");
    assert!(
        text.contains("bending_stiffness = 0.0179") || text.contains("bending_stiffness = 0.0180"),
        "{text}"
    );
    ok(&["eval", out.to_str().unwrap(), "--q", "1,-1"]);
    let generated = dir.path().join("generated");
    ok(&[
        "generate",
        out.to_str().unwrap(),
        "--out",
        generated.to_str().unwrap(),
        "--lang",
        "python",
        "-q",
    ]);
    let svg = std::fs::read_to_string(&plot).unwrap();
    assert!(svg.contains("<svg") && svg.contains("coordinate 1_0"));
    // The human report names what it fitted and its errors.
    let text = ok(&["identify", ARM, "--static", poses.to_str().unwrap()]);
    assert!(
        text.contains("segment[1].bending_stiffness") && text.contains("std. error"),
        "{text}"
    );
}

#[test]
fn a_logged_motion_gives_back_the_damping() {
    let dir = tempfile::tempdir().unwrap();
    // Damping ×1.3 at the base, ×0.7 at the tip; the rest as in the arm file.
    let truth = "segment[1].damping=0.00039,segment[2].damping=0.00014";
    ok(&[
        "simulate",
        ARM,
        "--set",
        truth,
        "--u",
        "2.5,0.2,0.2,1.8",
        "--duration",
        "0.4",
        "--output-interval",
        "0.0005",
        "--rtol",
        "1e-11",
        "--atol",
        "1e-13",
        "--out",
        dir.path().to_str().unwrap(),
        "--json",
    ]);
    let log = dir.path().join("trajectory.csv");
    let report: Value = serde_json::from_str(&ok(&[
        "identify",
        ARM,
        "--dynamic",
        log.to_str().unwrap(),
        "--fit",
        "damping",
        "--json",
    ]))
    .unwrap();
    for (name, truth) in [("segment[1].damping", 1.3), ("segment[2].damping", 0.7)] {
        let (v, se) = fitted(&report, name);
        assert!(
            (v - truth).abs() <= 0.02 * truth,
            "{name}: {v} ± {se}, truth {truth}"
        );
    }
}

/// Runs identify on a data file and expects exit 2 with `message` in stderr and no
/// arm file written.
fn refused(dir: &Path, csv: &str, flag: &str, message: &str) {
    let data = dir.join("data.csv");
    std::fs::write(&data, csv).unwrap();
    let out_file = dir.join("never.toml");
    let out = arcwright(&[
        "identify",
        ARM,
        flag,
        data.to_str().unwrap(),
        "--out",
        out_file.to_str().unwrap(),
    ]);
    let err = stderr(&out);
    assert_eq!(out.status.code(), Some(2), "{csv}\n{err}");
    assert!(
        err.contains(message),
        "{csv}\nwanted `{message}` in:\n{err}"
    );
    assert!(!out_file.exists(), "{csv}: wrote an arm file");
}

#[test]
fn bad_data_is_refused_with_its_file_row_and_column() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let good = "q1_0,q2_0,u1,u2,u3,u4\n1,2,0.5,0.2,0.2,0.2\n";
    refused(
        d,
        "q1_0,u1,u2,u3,u4\n1,0.5,0.2,0.2,0.2\n",
        "--static",
        "data.csv:1: no column q2_0",
    );
    refused(
        d,
        &good.replace("u4\n", "u4,u5\n").replace("0.2\n", "0.2,1\n"),
        "--static",
        "column u5: the arm has 4 input(s)",
    );
    refused(
        d,
        &good.replace("q2_0", "q3_0"),
        "--static",
        "column q3_0: the arm has no such coordinate",
    );
    refused(
        d,
        &format!("{good}1,NaN,0.5,0.2,0.2,0.2\n"),
        "--static",
        "data.csv:3: column q2_0: NaN (every value must be finite)",
    );
    refused(
        d,
        &format!("{good}1,2,0.5\n"),
        "--static",
        "data.csv:3: 3 cells, the header has 6",
    );
    refused(d, "q1_0,q2_0,u1,u2,u3,u4\n", "--static", "no data rows");
    refused(d, good, "--static", "too few rows");
    refused(
        d,
        "t,q1_0,q2_0,u1,u2,u3,u4\n0,1,2,0.5,0.2,0.2,0.2\n0.1,1,2,0.5,0.2,0.2,0.2\n",
        "--dynamic",
        "the smoothing differentiator needs at least 9",
    );
    let uneven: String = std::iter::once("t,q1_0,q2_0,u1,u2,u3,u4".to_string())
        .chain((0..12).map(|i| {
            let t = if i == 6 { 0.0065 } else { i as f64 * 0.001 };
            format!("{t},1,2,0.5,0.2,0.2,0.2")
        }))
        .collect::<Vec<_>>()
        .join("\n");
    refused(d, &uneven, "--dynamic", "data.csv:8: column t");
    // The arm file itself is never the output.
    let data = d.join("data.csv");
    std::fs::write(&data, good).unwrap();
    let out = arcwright(&[
        "identify",
        ARM,
        "--static",
        data.to_str().unwrap(),
        "--out",
        ARM,
    ]);
    assert_eq!(out.status.code(), Some(2));
    assert!(
        stderr(&out).contains("that is the arm file"),
        "{}",
        stderr(&out)
    );
}
