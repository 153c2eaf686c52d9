//! How accurate the single-precision C is where it matters most, forward dynamics:
//! `q̈` of the demo's f32 `forward_dynamics` against the derived model in double
//! precision, over 20,000 states (each segment bent by up to ±2 rad per coefficient,
//! velocities in [−1, 1], inputs in [−0.1, 0.1]; seeded). Prints the median and worst
//! relative error `‖Δq̈‖ / ‖q̈‖` and the condition of `B` (plain and with its diagonal
//! scaled to one, which is what bounds the Cholesky solve), and `B`'s entries' own f32
//! error, which a double-precision solve would not remove.
//!
//! Runs with `cargo bench --bench f32_accuracy` (needs gcc).

use arcwright::arm::parse_arm_file;
use arcwright::dynamics::forward_dynamics;
use arcwright::emit::{emit, Options, Precision};
use arcwright::evaluate::Evaluator;
use arcwright::linalg::symmetric_eigenvalues;
use arcwright::outdir::write_tree;
use num_traits::ToPrimitive;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use std::io::Write;
use std::path::Path;
use std::process::{Command, Stdio};

const STATES: usize = 20_000;

const DRIVER: &str = r#"
#include "reach_arm.h"
#include <stdio.h>
static float work[REACH_ARM_WORK_LEN];
int main(void) {
    float q[REACH_ARM_NQ], qd[REACH_ARM_NQ], u[REACH_ARM_NU], qdd[REACH_ARM_NQ];
    float b[REACH_ARM_NQ * REACH_ARM_NQ];
    int i;
    for (;;) {
        for (i = 0; i < REACH_ARM_NQ; ++i) if (scanf("%f", &q[i]) != 1) return 0;
        for (i = 0; i < REACH_ARM_NQ; ++i) if (scanf("%f", &qd[i]) != 1) return 1;
        for (i = 0; i < REACH_ARM_NU; ++i) if (scanf("%f", &u[i]) != 1) return 1;
        printf("%d", (int)reach_arm_forward_dynamics_ws(q, qd, u, qdd, work));
        for (i = 0; i < REACH_ARM_NQ; ++i) printf(" %.9g", (double)qdd[i]);
        reach_arm_inertia_ws(q, b, work);
        for (i = 0; i < REACH_ARM_NQ * REACH_ARM_NQ; ++i) printf(" %.9g", (double)b[i]);
        printf("\n");
    }
}
"#;

fn main() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR"))
        .parent()
        .unwrap()
        .to_path_buf();
    let arm_path = root.join("examples/reach_arm.toml");
    let text = std::fs::read_to_string(&arm_path).unwrap();
    let (arm, _) = parse_arm_file(&arm_path).unwrap();
    // The f64 side is the derived model the C was printed from.
    let model = arcwright::derive::derive_emitted(&arm);
    let files = emit(
        &model,
        &text,
        Options {
            precision: Precision::F32,
            ..Options::default()
        },
    )
    .unwrap();
    let out = root.join("target/bench-f32-accuracy/reach_arm");
    let _ = std::fs::remove_dir_all(&out);
    write_tree(&out, &files, &|_| {}).unwrap();
    let build = std::env::temp_dir().join("arcwright-f32-accuracy");
    let _ = std::fs::remove_dir_all(&build);
    std::fs::create_dir_all(&build).unwrap();
    std::fs::write(build.join("drv.c"), DRIVER).unwrap();
    let exe = build.join("drv");
    let ok = Command::new("gcc")
        .args(["-std=c99", "-O2", "-I"])
        .arg(out.join("c"))
        .arg(build.join("drv.c"))
        .arg(out.join("c/reach_arm.c"))
        .args(["-lm", "-o"])
        .arg(&exe)
        .status()
        .is_ok_and(|s| s.success());
    if !ok {
        println!("gcc not available: no f32 figures");
        return;
    }
    let ev = Evaluator::new(&model);
    let (n, k) = (arm.n_coords(), arm.n_inputs());
    let mut rng = ChaCha8Rng::seed_from_u64(20_000);
    let mut states = Vec::with_capacity(STATES);
    let mut input = String::new();
    for _ in 0..STATES {
        let mut q = Vec::with_capacity(n);
        for s in &arm.segments {
            let l = s.length.to_f64().unwrap();
            for i in 0..s.n_coords() {
                let alpha: f64 = rng.gen_range(-2.0..=2.0);
                q.push(alpha * (i + 1) as f64 / l);
            }
        }
        let qd: Vec<f64> = (0..n).map(|_| rng.gen_range(-1.0..=1.0)).collect();
        let u: Vec<f64> = (0..k).map(|_| rng.gen_range(-0.1..=0.1)).collect();
        // The f32 code sees the states rounded to f32; so does its f64 reference.
        let r = |v: &Vec<f64>| v.iter().map(|x| *x as f32 as f64).collect::<Vec<f64>>();
        let (q, qd, u) = (r(&q), r(&qd), r(&u));
        for v in q.iter().chain(&qd).chain(&u) {
            input.push_str(&format!("{:e} ", *v as f32));
        }
        input.push('\n');
        states.push((q, qd, u));
    }
    let mut child = Command::new(&exe)
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .spawn()
        .unwrap();
    // Fed from a thread: the driver answers as it reads, and both pipes are bounded.
    let mut stdin = child.stdin.take().unwrap();
    let feeder = std::thread::spawn(move || stdin.write_all(input.as_bytes()).unwrap());
    let output = child.wait_with_output().unwrap();
    feeder.join().unwrap();
    let lines: Vec<&str> = std::str::from_utf8(&output.stdout)
        .unwrap()
        .lines()
        .collect();
    assert_eq!(lines.len(), STATES, "the driver answered every state");
    let mut errors = Vec::with_capacity(STATES);
    let mut b_errors = Vec::with_capacity(STATES);
    let (mut cond_max, mut scaled_max): (f64, f64) = (0.0, 0.0);
    let mut failed = 0;
    for ((q, qd, u), line) in states.iter().zip(lines) {
        let f: Vec<f64> = line
            .split_whitespace()
            .map(|w| w.parse().unwrap())
            .collect();
        if f[0] != 0.0 {
            failed += 1;
            continue;
        }
        let t = ev.terms(q, qd);
        let want = forward_dynamics(&t, q, qd, u).unwrap();
        let got = &f[1..1 + n];
        let b32 = &f[1 + n..];
        let norm = |v: &mut dyn Iterator<Item = f64>| v.map(|x| x * x).sum::<f64>().sqrt();
        errors.push(
            norm(&mut got.iter().zip(&want).map(|(a, b)| a - b)) / norm(&mut want.iter().copied()),
        );
        let bflat: Vec<f64> = t.b.iter().flatten().copied().collect();
        b_errors.push(
            norm(&mut b32.iter().zip(&bflat).map(|(a, b)| a - b))
                / norm(&mut bflat.iter().copied()),
        );
        let eig = symmetric_eigenvalues(&t.b);
        cond_max = cond_max.max(eig[n - 1] / eig[0]);
        let d: Vec<f64> = (0..n).map(|i| t.b[i][i].sqrt()).collect();
        let scaled: Vec<Vec<f64>> = (0..n)
            .map(|i| (0..n).map(|j| t.b[i][j] / (d[i] * d[j])).collect())
            .collect();
        let eig = symmetric_eigenvalues(&scaled);
        scaled_max = scaled_max.max(eig[n - 1] / eig[0]);
    }
    errors.sort_by(f64::total_cmp);
    b_errors.sort_by(f64::total_cmp);
    let median = |v: &[f64]| v[v.len() / 2];
    println!(
        "reach_arm f32 forward_dynamics over {} states ({failed} refused): relative error of q'' \
         median {:.2e}, 99th percentile {:.2e}, worst {:.2e}",
        errors.len(),
        median(&errors),
        errors[errors.len() * 99 / 100],
        errors[errors.len() - 1]
    );
    println!(
        "  B's own f32 error (relative, Frobenius): median {:.2e}, worst {:.2e}",
        median(&b_errors),
        b_errors[b_errors.len() - 1]
    );
    println!(
        "  cond(B) up to {cond_max:.2e}; with B's diagonal scaled to one, up to {scaled_max:.2e}"
    );
}
