//! Helpers shared by the cross-check tests.
// Indexed loops read best in these small dense solvers.
#![allow(dead_code, clippy::needless_range_loop)]

pub mod hostile;

use arcwright::arm::{parse_arm_file, parse_arm_str, Arm};
use num_traits::ToPrimitive;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};

pub fn repo_root() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .parent()
        .unwrap()
        .to_path_buf()
}

/// Runs the `arcwright` binary from the repository root.
pub fn arcwright(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_arcwright"))
        .args(args)
        .current_dir(repo_root())
        .output()
        .expect("running arcwright")
}

pub fn stdout(out: &Output) -> String {
    String::from_utf8_lossy(&out.stdout).into_owned()
}

pub fn stderr(out: &Output) -> String {
    String::from_utf8_lossy(&out.stderr).into_owned()
}

pub fn demo_arm(name: &str) -> Arm {
    let path = repo_root().join("examples").join(format!("{name}.toml"));
    parse_arm_file(&path).unwrap_or_else(|e| panic!("{e}")).0
}

pub fn arm_from(text: &str) -> Arm {
    parse_arm_str(text, "test.toml").unwrap_or_else(|e| panic!("{e}"))
}

pub const DEMO_ARMS: [&str; 2] = ["reach_arm", "hanging_taper"];

/// ‖a − b‖_F / max(‖b‖_F, floor).
pub fn rel_err(a: &[Vec<f64>], b: &[Vec<f64>], floor: f64) -> f64 {
    let mut d = 0.0;
    let mut n = 0.0;
    for (ra, rb) in a.iter().zip(b) {
        assert_eq!(ra.len(), rb.len());
        for (x, y) in ra.iter().zip(rb) {
            d += (x - y) * (x - y);
            n += y * y;
        }
    }
    d.sqrt() / n.sqrt().max(floor)
}

pub fn rel_err_vec(a: &[f64], b: &[f64], floor: f64) -> f64 {
    rel_err(&[a.to_vec()], &[b.to_vec()], floor)
}

pub fn frob(a: &[Vec<f64>]) -> f64 {
    a.iter().flatten().map(|x| x * x).sum::<f64>().sqrt()
}

pub fn rng(seed: u64) -> ChaCha8Rng {
    ChaCha8Rng::seed_from_u64(seed)
}

/// A random configuration: each segment's total base bending `a_j = L_j q_{j,0}` up to
/// ±3π, higher coefficients giving up to about ±`spread` rad of extra bending.
pub fn random_q(arm: &Arm, rng: &mut ChaCha8Rng, spread: f64) -> Vec<f64> {
    let mut q = Vec::new();
    for seg in &arm.segments {
        let l = seg.length.to_f64().unwrap();
        q.push(rng.gen_range(-3.0 * std::f64::consts::PI..3.0 * std::f64::consts::PI) / l);
        for i in 1..seg.n_coords() {
            q.push(rng.gen_range(-spread..spread) * (i + 1) as f64 / l);
        }
    }
    q
}

pub fn random_qd(n: usize, rng: &mut ChaCha8Rng) -> Vec<f64> {
    (0..n).map(|_| rng.gen_range(-20.0..20.0)).collect()
}

/// Configurations that put every segment's `a_j` at the given value, higher
/// coefficients as given by `rest`.
pub fn q_with_a(arm: &Arm, a: f64, rest: f64) -> Vec<f64> {
    let mut q = Vec::new();
    for seg in &arm.segments {
        let l = seg.length.to_f64().unwrap();
        q.push(a / l);
        for i in 1..seg.n_coords() {
            q.push(rest / (i as f64 * l));
        }
    }
    q
}

pub fn mat_vec(m: &[Vec<f64>], v: &[f64]) -> Vec<f64> {
    m.iter()
        .map(|r| r.iter().zip(v).map(|(a, b)| a * b).sum())
        .collect()
}

/// Eigenvalues of a symmetric matrix by cyclic Jacobi rotations, ascending.
pub fn symmetric_eigenvalues(mut a: Vec<Vec<f64>>) -> Vec<f64> {
    let n = a.len();
    for _sweep in 0..100 {
        let off: f64 = (0..n)
            .flat_map(|i| (0..n).filter(move |&j| j != i).map(move |j| (i, j)))
            .map(|(i, j)| a[i][j] * a[i][j])
            .sum();
        if off < 1e-30 * frob(&a).powi(2) {
            break;
        }
        for p in 0..n {
            for q in p + 1..n {
                if a[p][q] == 0.0 {
                    continue;
                }
                let theta = (a[q][q] - a[p][p]) / (2.0 * a[p][q]);
                let t = theta.signum() / (theta.abs() + (theta * theta + 1.0).sqrt());
                let t = if theta == 0.0 { 1.0 } else { t };
                let c = 1.0 / (t * t + 1.0).sqrt();
                let s = t * c;
                for k in 0..n {
                    let akp = a[k][p];
                    let akq = a[k][q];
                    a[k][p] = c * akp - s * akq;
                    a[k][q] = s * akp + c * akq;
                }
                for k in 0..n {
                    let apk = a[p][k];
                    let aqk = a[q][k];
                    a[p][k] = c * apk - s * aqk;
                    a[q][k] = s * apk + c * aqk;
                }
            }
        }
    }
    let mut ev: Vec<f64> = (0..n).map(|i| a[i][i]).collect();
    ev.sort_by(|x, y| x.partial_cmp(y).unwrap());
    ev
}

/// Solves `A x = b` by Gaussian elimination with partial pivoting.
pub fn solve(mut a: Vec<Vec<f64>>, mut b: Vec<f64>) -> Vec<f64> {
    let n = b.len();
    for c in 0..n {
        let p = (c..n)
            .max_by(|&i, &j| a[i][c].abs().partial_cmp(&a[j][c].abs()).unwrap())
            .unwrap();
        a.swap(c, p);
        b.swap(c, p);
        for r in c + 1..n {
            let f = a[r][c] / a[c][c];
            for k in c..n {
                a[r][k] -= f * a[c][k];
            }
            b[r] -= f * b[c];
        }
    }
    let mut x = vec![0.0; n];
    for r in (0..n).rev() {
        let s: f64 = (r + 1..n).map(|k| a[r][k] * x[k]).sum();
        x[r] = (b[r] - s) / a[r][r];
    }
    x
}

/// Reads a JSON file under tests/outside.
pub fn outside_json(name: &str) -> serde_json::Value {
    let path = repo_root().join("tests").join("outside").join(name);
    let text = std::fs::read_to_string(&path).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    serde_json::from_str(&text).unwrap()
}
