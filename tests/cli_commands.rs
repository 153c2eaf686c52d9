//! `arcwright report`, `simulate` and `new` driven like a user drives them: files
//! written and readable, numbers that make sense, clear errors and exit codes.

#[path = "common/mod.rs"]
mod common;

use common::{arcwright, stderr, stdout};

use std::path::Path;
use std::process::{Command, Output};

fn ok(out: &Output) -> String {
    assert!(
        out.status.success(),
        "exit {:?}\nstdout: {}\nstderr: {}",
        out.status.code(),
        stdout(out),
        stderr(out)
    );
    stdout(out)
}

fn s(p: &Path) -> &str {
    p.to_str().expect("utf-8 temp path")
}

/// Parses an SVG file as XML and returns its polylines' point counts.
fn svg_polylines(path: &Path) -> (String, Vec<usize>) {
    let text = std::fs::read_to_string(path).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    let doc = roxmltree::Document::parse(&text)
        .unwrap_or_else(|e| panic!("{} is not XML: {e}", path.display()));
    assert_eq!(doc.root_element().tag_name().name(), "svg");
    let lines = doc
        .descendants()
        .filter(|n| n.has_tag_name("polyline"))
        .map(|n| {
            n.attribute("points")
                .unwrap_or("")
                .split_whitespace()
                .count()
        })
        .collect();
    let texts: Vec<&str> = doc.descendants().filter_map(|n| n.text()).collect();
    (texts.join("|"), lines)
}

/// A single undamped segment under gravity: quick to derive and to simulate.
const FREE_ARM: &str = r#"
name = "free_rod"
gravity = [0.0, -9.81]
expansion_order = 2
[[segment]]
length = 0.2
curvature_degree = 1
density = 0.3
bending_stiffness = 0.02
[payload]
mass = 0.005
[[actuator]]
kind = "moment"
segment = 1
"#;

#[test]
fn report_json_errors_fall_with_order_and_plots_are_written() {
    let dir = tempfile::tempdir().unwrap();
    let out = arcwright(&[
        "report",
        "examples/reach_arm.toml",
        "--max-order",
        "3",
        "--samples",
        "12",
        "--json",
        "--out",
        s(dir.path()),
    ]);
    let text = ok(&out);
    let v: serde_json::Value = serde_json::from_str(&text).expect("report --json prints JSON");
    assert_eq!(v["arm"], "reach_arm");
    assert_eq!(v["samples"], 12);
    assert_eq!(v["sampling"]["source"], "default");
    let rows = v["orders"].as_array().unwrap();
    assert_eq!(rows.len(), 4);
    let col = |key: &str| -> Vec<f64> { rows.iter().map(|r| r[key].as_f64().unwrap()).collect() };
    for key in ["tip_position_error", "inertia_error", "gravity_error"] {
        let e = col(key);
        assert!(e.iter().all(|x| x.is_finite() && *x >= 0.0), "{key}: {e:?}");
        assert!(
            e.windows(2).all(|w| w[1] < w[0]),
            "{key} should fall with the order: {e:?}"
        );
        assert!(e[3] < 0.2 * e[0], "{key}: {e:?}");
    }
    let ops: Vec<u64> = rows
        .iter()
        .map(|r| r["ops_dynamics"]["total"].as_u64().unwrap())
        .collect();
    assert!(ops.windows(2).all(|w| w[1] > w[0]), "{ops:?}");
    for r in rows {
        assert!(
            r["ops_all"]["total"].as_u64().unwrap() >= r["ops_dynamics"]["total"].as_u64().unwrap()
        );
        assert!(r["derive_seconds"].as_f64().unwrap() >= 0.0);
    }
    // The same JSON lands in the folder, beside the plots.
    let saved: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.path().join("report.json")).unwrap())
            .unwrap();
    assert_eq!(saved, v);

    let (texts, lines) = svg_polylines(&dir.path().join("error_vs_order.svg"));
    for label in ["tip position", "inertia B", "gravity G", "B + C + G"] {
        assert!(texts.contains(label), "legend lacks {label}");
    }
    // Three error series and two cost series, one point per order each.
    assert!(lines.iter().filter(|&&p| p == 4).count() >= 5, "{lines:?}");
    let (texts, lines) = svg_polylines(&dir.path().join("backbones.svg"));
    assert!(texts.contains("exact") && texts.contains("order 3"));
    // Six samples × (exact + four orders), each a backbone of 2 × 24 intervals.
    assert!(
        lines.iter().filter(|&&p| p == 49).count() >= 30,
        "{lines:?}"
    );
}

#[test]
fn report_table_and_default_folder_beside_the_arm_file() {
    let dir = tempfile::tempdir().unwrap();
    let arm = dir.path().join("rod.toml");
    std::fs::write(&arm, format!("{FREE_ARM}[sampling]\nbase_bending = 1.0\nextra_bending = 0.5\nsamples = 5\nseed = 3\n"))
        .unwrap();
    let out = arcwright(&["report", s(&arm), "--max-order", "2", "--tolerance", "0.05"]);
    let text = ok(&out);
    assert!(text.contains("free_rod"), "{text}");
    assert!(text.contains("5 sampled configurations (seed 3)"), "{text}");
    assert!(text.contains("from the arm file"), "{text}");
    assert!(
        text.contains("order") && text.contains("tip position") && text.contains("ops B+C+G"),
        "{text}"
    );
    let rows = text
        .lines()
        .filter(|l| l.trim_start().starts_with(|c: char| c.is_ascii_digit()))
        .count();
    assert_eq!(rows, 3, "{text}");
    assert!(
        text.contains("lowest order with every error ≤ 5e-2: 1"),
        "{text}"
    );
    let folder = dir.path().join("free_rod_report");
    for f in ["error_vs_order.svg", "backbones.svg", "report.json"] {
        assert!(folder.join(f).is_file(), "missing {f}");
    }
    // Piped: no progress bars, but notes name the files; --quiet silences them.
    assert!(stderr(&out).contains("wrote"), "{}", stderr(&out));
    let quiet = arcwright(&["report", s(&arm), "--max-order", "0", "--quiet"]);
    ok(&quiet);
    assert_eq!(stderr(&quiet), "");
}

#[test]
fn simulate_writes_the_trajectory_and_checks_energy_when_undamped() {
    let dir = tempfile::tempdir().unwrap();
    let arm = dir.path().join("rod.toml");
    std::fs::write(&arm, FREE_ARM).unwrap();
    let out_dir = dir.path().join("run");
    let out = arcwright(&[
        "simulate",
        s(&arm),
        "--q0",
        "4,-3",
        "--qd0",
        "0,10",
        "--duration",
        "0.05",
        "--output-interval",
        "0.001",
        "--out",
        s(&out_dir),
    ]);
    let text = ok(&out);
    let csv = std::fs::read_to_string(out_dir.join("trajectory.csv")).unwrap();
    let mut lines = csv.lines();
    assert_eq!(
        lines.next().unwrap(),
        "t,q1_0,q1_1,qd1_0,qd1_1,tip_x,tip_y,tip_angle,kinetic_energy,potential_energy,total_energy,u1"
    );
    let rows: Vec<Vec<f64>> = lines
        .map(|l| {
            l.split(',')
                .map(|x| x.parse::<f64>().expect("CSV numbers"))
                .collect()
        })
        .collect();
    assert_eq!(rows.len(), 51);
    assert!(rows.iter().all(|r| r.len() == 12 && r[11] == 0.0));
    assert_eq!(rows[0][..5], [0.0, 4.0, -3.0, 0.0, 10.0]);
    assert!((rows[50][0] - 0.05).abs() < 1e-12);
    // The tip angle is the integral of the curvature: L (q0 + q1 / 2).
    for r in &rows {
        assert!((r[7] - 0.2 * (r[1] + r[2] / 2.0)).abs() < 1e-12);
        assert!((r[10] - r[8] - r[9]).abs() < 1e-12);
    }
    // Undamped and unforced: energy is conserved and the drift is printed.
    let drift_line = text
        .lines()
        .find(|l| l.starts_with("energy drift (undamped, unforced)"))
        .expect(&text);
    let rel: f64 = drift_line
        .split("J, ")
        .nth(1)
        .and_then(|p| p.split_whitespace().next())
        .and_then(|x| x.parse().ok())
        .unwrap_or_else(|| panic!("no relative drift in {drift_line}"));
    assert!(rel < 1e-6, "{drift_line}");
    let e: Vec<f64> = rows.iter().map(|r| r[10]).collect();
    assert!(e
        .iter()
        .all(|x| (x - e[0]).abs() < 1e-6 * e[0].abs().max(1e-3)));
    let (texts, polylines) = svg_polylines(&out_dir.join("trajectory.svg"));
    assert!(
        texts.contains("backbone snapshots") && texts.contains("q1_1") && texts.contains("total")
    );
    assert!(
        polylines.iter().filter(|&&p| p == 51).count() >= 5,
        "{polylines:?}"
    ); // 2 coordinates + 3 energies
    assert!(
        polylines.iter().filter(|&&p| p == 25).count() >= 8,
        "{polylines:?}"
    ); // snapshots
}

#[test]
fn simulate_damped_and_forced_demo_arm() {
    let dir = tempfile::tempdir().unwrap();
    let out = arcwright(&[
        "simulate",
        "examples/reach_arm.toml",
        "--q0",
        "8,0,0,4,0,0",
        "--u",
        "0.3,0,0,0",
        "--duration",
        "0.004",
        "--order",
        "1",
        "--out",
        s(dir.path()),
    ]);
    let text = ok(&out);
    assert!(!text.contains("energy drift"), "{text}");
    assert!(text.contains("damped and forced: not conserved"), "{text}");
    let csv = std::fs::read_to_string(dir.path().join("trajectory.csv")).unwrap();
    assert_eq!(csv.lines().count(), 1 + 501);
}

#[test]
fn simulate_errors_exit_codes() {
    // Wrong vector length: bad input.
    let out = arcwright(&[
        "simulate",
        "examples/reach_arm.toml",
        "--q0",
        "1,2,3",
        "--duration",
        "0.1",
    ]);
    assert_eq!(out.status.code(), Some(2), "{}", stderr(&out));
    assert!(
        stderr(&out).contains("--q0: expected 6 comma-separated numbers, got 3"),
        "{}",
        stderr(&out)
    );
    let out = arcwright(&[
        "simulate",
        "examples/reach_arm.toml",
        "--q0",
        "0,0,0,0,0,0",
        "--duration",
        "-1",
    ]);
    assert_eq!(out.status.code(), Some(2));
    assert!(stderr(&out).contains("--duration"), "{}", stderr(&out));
    let out = arcwright(&[
        "simulate",
        "examples/reach_arm.toml",
        "--q0",
        "0,0,0,0,0,0",
        "--duration",
        "1",
        "--u",
        "1",
    ]);
    assert_eq!(out.status.code(), Some(2));
    // A state the model cannot evaluate: the computation fails, exit 1, nothing written.
    let dir = tempfile::tempdir().unwrap();
    let out = arcwright(&[
        "simulate",
        "examples/reach_arm.toml",
        "--q0",
        "1e300,0,0,0,0,0",
        "--duration",
        "0.1",
        "--order",
        "0",
        "--out",
        s(dir.path()),
    ]);
    assert_eq!(out.status.code(), Some(1), "{}", stderr(&out));
    assert!(
        stderr(&out).contains("simulation failed at t = "),
        "{}",
        stderr(&out)
    );
    assert!(!dir.path().join("trajectory.csv").exists());
    // The step guard.
    let out = arcwright(&[
        "simulate",
        "examples/reach_arm.toml",
        "--q0",
        "8,0,0,4,0,0",
        "--duration",
        "1",
        "--order",
        "0",
        "--max-steps",
        "20",
        "--out",
        s(dir.path()),
    ]);
    assert_eq!(out.status.code(), Some(1), "{}", stderr(&out));
    assert!(
        stderr(&out).contains("gave up after 20 steps"),
        "{}",
        stderr(&out)
    );
}

#[test]
fn bad_arm_file_is_exit_2_with_its_location() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("bad.toml");
    std::fs::write(&path, "name = \"a\"\n[[segment]]\nlength = -1\ncurvature_degree = 0\ndensity = 1\nbending_stiffness = 1\n").unwrap();
    for args in [
        vec!["report", s(&path)],
        vec!["simulate", s(&path), "--q0", "0", "--duration", "1"],
    ] {
        let out = arcwright(&args);
        assert_eq!(out.status.code(), Some(2), "{args:?}");
        let err = stderr(&out);
        assert!(
            err.contains("bad.toml:3:10: segment[1].length: must be positive"),
            "{err}"
        );
    }
    std::fs::write(&path, format!("{FREE_ARM}[sampling]\nsamples = 0\n")).unwrap();
    let out = arcwright(&["report", s(&path)]);
    assert_eq!(out.status.code(), Some(2));
    assert!(
        stderr(&out).contains("bad.toml:16:11: sampling.samples: must be an integer in 1..="),
        "{}",
        stderr(&out)
    );
    // The table's old name still reads, with a warning, and errors name it as written.
    std::fs::write(&path, format!("{FREE_ARM}[workspace]\nsamples = 0\n")).unwrap();
    let out = arcwright(&["report", s(&path)]);
    assert!(
        stderr(&out).contains("bad.toml:16:11: workspace.samples: must be an integer in 1..="),
        "{}",
        stderr(&out)
    );
    std::fs::write(&path, format!("{FREE_ARM}[workspace]\nsamples = 3\n")).unwrap();
    let out = arcwright(&["eval", s(&path), "--q", "0,0"]);
    assert!(out.status.success(), "{}", stderr(&out));
    assert!(
        stderr(&out).starts_with("warning: ")
            && stderr(&out)
                .contains("bad.toml:15:1: workspace: [workspace] is the old name of [sampling]"),
        "{}",
        stderr(&out)
    );
    std::fs::write(
        &path,
        format!("{FREE_ARM}[workspace]\nsamples = 3\n[sampling]\nsamples = 3\n"),
    )
    .unwrap();
    let out = arcwright(&["eval", s(&path), "--q", "0,0"]);
    assert_eq!(out.status.code(), Some(2));
    assert!(
        stderr(&out).contains("keep [sampling] only"),
        "{}",
        stderr(&out)
    );
    let out = arcwright(&["report", "examples/reach_arm.toml", "--max-order", "11"]);
    assert_eq!(out.status.code(), Some(2));
    assert!(stderr(&out).contains("--max-order"));
}

#[test]
fn new_writes_a_starter_that_parses_and_evaluates() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("My-Arm.toml");
    ok(&arcwright(&["new", s(&path)]));
    let text = std::fs::read_to_string(&path).unwrap();
    assert!(text.contains("name = \"my_arm\""), "{text}");
    assert!(
        text.lines()
            .filter(|l| l.trim_start().starts_with('#'))
            .count()
            > 10,
        "a starter explains itself"
    );
    let out = ok(&arcwright(&["eval", s(&path), "--q", "2,0,3,0"]));
    let v: serde_json::Value = serde_json::from_str(&out).unwrap();
    assert_eq!(v["n"], 4);
    // The starter's order is the one its own report suggests at the default tolerance.
    let report_dir = dir.path().join("report");
    let out = ok(&arcwright(&[
        "report",
        s(&path),
        "--json",
        "--samples",
        "60",
        "--out",
        s(&report_dir),
        "-q",
    ]));
    let v: serde_json::Value = serde_json::from_str(&out).unwrap();
    assert_eq!(v["suggested_order"], 4, "{out}");
    // A file name that makes no arm name is refused, not silently renamed.
    let out = arcwright(&["new", s(&dir.path().join("123.toml"))]);
    assert_eq!(out.status.code(), Some(2));
    assert!(
        stderr(&out).contains("pass --name NAME"),
        "{}",
        stderr(&out)
    );
    // A folder that does not exist yet is made.
    ok(&arcwright(&[
        "new",
        s(&dir.path().join("fresh/dir/arm.toml")),
        "-q",
    ]));
    // No silent overwrite.
    std::fs::write(&path, "mine").unwrap();
    let out = arcwright(&["new", s(&path)]);
    assert_eq!(out.status.code(), Some(2));
    assert!(
        stderr(&out).contains("already exists; pass --force"),
        "{}",
        stderr(&out)
    );
    assert_eq!(std::fs::read_to_string(&path).unwrap(), "mine");
    ok(&arcwright(&[
        "new",
        s(&path),
        "--force",
        "--name",
        "bench_arm",
    ]));
    assert!(std::fs::read_to_string(&path)
        .unwrap()
        .contains("name = \"bench_arm\""));
    let out = arcwright(&["new", s(&dir.path().join("x.toml")), "--name", "Bad Name"]);
    assert_eq!(out.status.code(), Some(2));
    // Default path: arm.toml in the working directory.
    let status = Command::new(env!("CARGO_BIN_EXE_arcwright"))
        .args(["new", "-q"])
        .current_dir(dir.path())
        .output()
        .unwrap();
    assert!(status.status.success());
    assert!(dir.path().join("arm.toml").is_file());
}

#[test]
fn every_command_has_help_with_an_example() {
    for cmd in ["eval", "report", "simulate", "new"] {
        let out = arcwright(&[cmd, "--help"]);
        let text = ok(&out);
        assert!(
            text.contains("Example:"),
            "{cmd} --help lacks an example:\n{text}"
        );
        assert!(text.contains("--quiet"), "{cmd} --help lacks --quiet");
    }
}

/// `statics` as a user runs it: the elastica through `--exact --json` (values from
/// tests/outside/elastica.json: mpmath 1.3.0 elliptic integrals, cross-checked with
/// SciPy 1.17.1), a table for people, exit 1 when no equilibrium is found, exit 2 for
/// bad input.
#[test]
fn statics_finds_the_elastica_and_says_when_it_cannot() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("cantilever.toml");
    std::fs::write(
        &path,
        "name = \"cantilever\"\n[[segment]]\nlength = 0.25\ncurvature_degree = 6\ndensity = 0.4\n\
         bending_stiffness = 0.03\n[[actuator]]\nkind = \"end_force\"\nsegment = 1\n",
    )
    .unwrap();
    let data = common::outside_json("elastica.json");
    let case = data["cases"]
        .as_array()
        .unwrap()
        .iter()
        .find(|c| c["alpha"].as_f64() == Some(2.0))
        .unwrap();
    let p = 2.0 * 0.03 / (0.25 * 0.25);
    let out = ok(&arcwright(&[
        "statics",
        s(&path),
        "--exact",
        "--json",
        "--u",
        &format!("0,{p}"),
    ]));
    let v: serde_json::Value = serde_json::from_str(&out).unwrap();
    for key in ["q", "u", "tip_pose", "residual", "iterations", "stable"] {
        assert!(v.get(key).is_some(), "{key} missing: {out}");
    }
    assert_eq!(v["kinematics"], "exact");
    assert_eq!(v["stable"], true);
    let tip: Vec<f64> = v["tip_pose"]
        .as_array()
        .unwrap()
        .iter()
        .map(|x| x.as_f64().unwrap())
        .collect();
    let want_y = case["y_tip_over_L"]["value"].as_f64().unwrap() * 0.25;
    let want_theta = case["theta_tip"]["value"].as_f64().unwrap();
    assert!(
        (tip[1] - want_y).abs() < 1e-6 && (tip[2] - want_theta).abs() < 1e-6,
        "{out}"
    );

    let table = ok(&arcwright(&["statics", s(&path), "--u", &format!("0,{p}")]));
    assert!(table.contains("1_6 "), "{table}");
    assert!(
        table.contains("stable: a minimum of the potential energy"),
        "{table}"
    );

    // A tolerance no arithmetic meets: no silent answer, exit 1 with the last residual.
    let out = arcwright(&["statics", s(&path), "--u", "0,1", "--tolerance", "1e-30"]);
    assert_eq!(out.status.code(), Some(1), "{}", stderr(&out));
    assert!(
        stderr(&out).contains("no equilibrium found"),
        "{}",
        stderr(&out)
    );
    assert!(stderr(&out).contains("last residual"), "{}", stderr(&out));
    // Bad input.
    for (args, needle) in [
        (vec!["--u", "1"], "--u: expected 2 comma-separated numbers"),
        (vec!["--tolerance", "0"], "--tolerance: must be in (0, 1)"),
        (vec!["--exact", "--order", "3"], "cannot be used with"),
    ] {
        let mut a = vec!["statics", s(&path)];
        a.extend(args);
        let out = arcwright(&a);
        assert_eq!(out.status.code(), Some(2), "{a:?}: {}", stderr(&out));
        assert!(stderr(&out).contains(needle), "{a:?}: {}", stderr(&out));
    }
}
