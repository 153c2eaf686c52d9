//! Output folders as a careless user (or a crash) treats them: `generate` never deletes
//! a file it did not write, never walks through a link, leaves either the old or the
//! complete new tree when killed at any moment, lets two runs into one folder take
//! turns, and writes the same bytes whatever the working folder, locale or time zone.

mod common;

use common::{stderr, stdout};
use std::fs;
use std::path::{Path, PathBuf};
use std::process::{Command, Output, Stdio};
use std::time::{Duration, Instant};

const OLD_ARM: &str = "name = \"small\"\nexpansion_order = 1\ngravity = [0.0, -9.81]\n\
    [[segment]]\nlength = 0.1\ncurvature_degree = 1\ndensity = 0.2\nbending_stiffness = 0.01\n";
const NEW_ARM: &str = "name = \"small\"\nexpansion_order = 2\ngravity = [0.0, -9.81]\n\
    [[segment]]\nlength = 0.12\ncurvature_degree = 1\ndensity = 0.2\nbending_stiffness = 0.01\n";

fn bin() -> Command {
    Command::new(env!("CARGO_BIN_EXE_arcwright"))
}

fn run_in(dir: &Path, args: &[&str]) -> Output {
    bin()
        .args(args)
        .current_dir(dir)
        .output()
        .expect("running arcwright")
}

/// A scratch folder holding `old.toml` and `new.toml`.
fn scratch() -> tempfile::TempDir {
    let t = tempfile::tempdir().unwrap();
    fs::write(t.path().join("old.toml"), OLD_ARM).unwrap();
    fs::write(t.path().join("new.toml"), NEW_ARM).unwrap();
    t
}

fn leftovers(dir: &Path) -> Vec<String> {
    fs::read_dir(dir)
        .unwrap()
        .flatten()
        .map(|e| e.file_name().to_string_lossy().into_owned())
        .filter(|n| n.starts_with(".arcwright-"))
        .collect()
}

/// Whether `out` is exactly what `generate ARM` writes (and nothing else).
fn is_complete(dir: &Path, arm: &str) -> bool {
    run_in(dir, &["generate", arm, "--out", "out", "--check", "-q"])
        .status
        .success()
}

#[test]
fn a_bare_marker_does_not_make_a_folder_ours() {
    // The reproduction of the report: the user's thesis must survive.
    let t = scratch();
    let c = t.path().join("c");
    fs::create_dir(&c).unwrap();
    fs::write(c.join("ARCWRIGHT_OUTPUT"), "").unwrap();
    fs::write(c.join("thesis.tex"), "x").unwrap();
    let out = run_in(t.path(), &["generate", "new.toml", "--out", "c"]);
    assert_eq!(out.status.code(), Some(2), "{}", stderr(&out));
    assert!(stderr(&out).contains("not an arcwright output folder"));
    assert_eq!(fs::read_to_string(c.join("thesis.tex")).unwrap(), "x");
    assert!(leftovers(t.path()).is_empty());
}

#[test]
fn files_a_user_added_or_edited_are_listed_and_kept() {
    let t = scratch();
    let ok = run_in(t.path(), &["generate", "old.toml", "--out", "out", "-q"]);
    assert!(ok.status.success(), "{}", stderr(&ok));
    let out_dir = t.path().join("out");
    fs::write(out_dir.join("c/my_driver.c"), "mine").unwrap();
    fs::write(out_dir.join("arm.toml"), "edited").unwrap();
    let out = run_in(t.path(), &["generate", "new.toml", "--out", "out"]);
    assert_eq!(out.status.code(), Some(2), "{}", stderr(&out));
    let err = stderr(&out);
    assert!(
        err.contains("c/my_driver.c (not written by arcwright)"),
        "{err}"
    );
    assert!(
        err.contains("arm.toml (edited since arcwright wrote it)"),
        "{err}"
    );
    assert_eq!(
        fs::read_to_string(out_dir.join("c/my_driver.c")).unwrap(),
        "mine"
    );
    // --check and verify say the same, one path a line.
    let check = run_in(
        t.path(),
        &["generate", "old.toml", "--out", "out", "--check"],
    );
    assert_eq!(check.status.code(), Some(1));
    assert!(stdout(&check).contains("\n  foreign  c/my_driver.c (not written by arcwright)\n"));
}

#[cfg(unix)]
#[test]
fn links_inside_or_as_the_folder_are_never_followed() {
    use std::os::unix::fs::symlink;
    let t = scratch();
    assert!(
        run_in(t.path(), &["generate", "old.toml", "--out", "out", "-q"])
            .status
            .success()
    );
    let out_dir = t.path().join("out");
    symlink("/", out_dir.join("rootlink")).unwrap();
    fs::create_dir(out_dir.join("sub")).unwrap();
    symlink("..", out_dir.join("sub/up")).unwrap();
    let check = run_in(
        t.path(),
        &["generate", "old.toml", "--out", "out", "--check"],
    );
    assert_eq!(check.status.code(), Some(1), "{}", stderr(&check));
    let text = stdout(&check);
    assert!(
        text.contains("foreign  rootlink (a symbolic link)"),
        "{text}"
    );
    assert!(text.contains("foreign  sub/up (a symbolic link)"), "{text}");
    let verify = run_in(
        t.path(),
        &["verify", "out", "--skip", "c,rust,python", "--samples", "1"],
    );
    assert_eq!(verify.status.code(), Some(1));
    assert!(stdout(&verify).contains("foreign  rootlink (a symbolic link)"));
    let gen = run_in(t.path(), &["generate", "new.toml", "--out", "out"]);
    assert_eq!(gen.status.code(), Some(2));
    assert!(
        is_complete(t.path(), "old.toml") || {
            // The links make --check fail; the tree itself must still be the old one.
            fs::read_to_string(out_dir.join("arm.toml")).unwrap() == OLD_ARM
        }
    );
    // The root of the machine is not an output folder, and is not walked.
    let root = run_in(t.path(), &["generate", "new.toml", "--out", "/", "--check"]);
    assert_eq!(root.status.code(), Some(2));
    assert!(stderr(&root).contains("not an arcwright output folder"));
}

#[test]
fn a_kill_at_any_moment_leaves_the_old_or_the_complete_new_tree() {
    let t = scratch();
    let dir = t.path();
    assert!(run_in(dir, &["generate", "old.toml", "--out", "out", "-q"])
        .status
        .success());
    // How long one replacement takes here, to spread the kills over it.
    let start = Instant::now();
    assert!(run_in(dir, &["generate", "new.toml", "--out", "out", "-q"])
        .status
        .success());
    let span = start.elapsed().as_secs_f64();
    let mut rng = common::rng(13);
    let mut killed_mid_run = 0;
    for trial in 0..24 {
        let arm = if trial % 2 == 0 {
            "old.toml"
        } else {
            "new.toml"
        };
        let delay = rand::Rng::gen_range(&mut rng, 0.0..1.2) * span;
        let mut child = bin()
            .args(["generate", arm, "--out", "out", "-q"])
            .current_dir(dir)
            .stdout(Stdio::null())
            .stderr(Stdio::null())
            .spawn()
            .unwrap();
        std::thread::sleep(Duration::from_secs_f64(delay));
        let _ = child.kill();
        let status = child.wait().unwrap();
        if !status.success() {
            killed_mid_run += 1;
        }
        assert!(
            dir.join("out").is_dir(),
            "trial {trial}: the folder vanished (kill after {delay:.3} s)"
        );
        assert!(
            is_complete(dir, "old.toml") || is_complete(dir, "new.toml"),
            "trial {trial}: a mixture of trees after a kill at {delay:.3} s"
        );
    }
    assert!(killed_mid_run > 0, "no kill landed inside a run");
    assert!(run_in(dir, &["generate", "new.toml", "--out", "out", "-q"])
        .status
        .success());
    assert!(is_complete(dir, "new.toml"));
    assert_eq!(
        leftovers(dir),
        Vec::<String>::new(),
        "a run clears what killed runs left"
    );
}

#[test]
fn two_runs_into_one_folder_take_turns() {
    let t = scratch();
    let dir = t.path();
    for _ in 0..3 {
        let spawn = |arm: &str| {
            bin()
                .args(["generate", arm, "--out", "out", "-q"])
                .current_dir(dir)
                .stderr(Stdio::piped())
                .spawn()
                .unwrap()
        };
        let a = spawn("old.toml");
        let b = spawn("new.toml");
        for child in [a, b] {
            let out = child.wait_with_output().unwrap();
            assert!(
                out.status.success(),
                "{}",
                String::from_utf8_lossy(&out.stderr)
            );
        }
        assert!(is_complete(dir, "old.toml") || is_complete(dir, "new.toml"));
        assert!(leftovers(dir).is_empty());
    }
}

#[test]
fn output_is_the_same_whatever_the_folder_locale_or_time_zone() {
    let t = scratch();
    let arm = t.path().join("new.toml");
    let mut trees: Vec<Vec<(PathBuf, Vec<u8>)>> = Vec::new();
    for (i, (lang, tz)) in [("C", "UTC"), ("de_DE.UTF-8", "Pacific/Kiritimati")]
        .into_iter()
        .enumerate()
    {
        let cwd = t.path().join(format!("cwd{i}"));
        fs::create_dir(&cwd).unwrap();
        let out = bin()
            .args(["generate", arm.to_str().unwrap(), "--out", "o", "-q"])
            .current_dir(&cwd)
            .env("LANG", lang)
            .env("LC_ALL", lang)
            .env("TZ", tz)
            .output()
            .unwrap();
        assert!(out.status.success(), "{}", stderr(&out));
        let listing = arcwright::outdir::walk::walk(&cwd.join("o")).unwrap();
        trees.push(
            listing
                .files
                .iter()
                .map(|p| (PathBuf::from(p), fs::read(cwd.join("o").join(p)).unwrap()))
                .collect(),
        );
    }
    assert!(trees[0].len() > 5);
    assert_eq!(trees[0], trees[1]);
}
