//! Speed and size of the emitted C for examples/reach_arm.toml (two segments, degree 2,
//! order 4), against the Rust numeric reference: `cargo bench --bench emitted_c`.
//!
//! Prints: op counts per function, gcc -O2 compile time and object size, ns per call of
//! B + C + G in C and in the reference (and the derived-program interpreter), the f32
//! Cortex-M4F flash size when arm-none-eabi-gcc is installed, and `generate` end to end.

use arcwright::arm::parse_arm_file;
use arcwright::derive::derive_emitted;
use arcwright::emit::{emit, plan::Plan, Options, Precision};
use arcwright::evaluate::Evaluator;
use arcwright::outdir::write_tree;
use arcwright::reference::{Kinematics, Reference};
use std::path::Path;
use std::process::Command;
use std::time::Instant;

const DRIVER: &str = r#"
#define _POSIX_C_SOURCE 199309L
#include "reach_arm.h"
#include <stdio.h>
#include <time.h>
static double since(const struct timespec *a, long n) {
    struct timespec b;
    clock_gettime(CLOCK_MONOTONIC, &b);
    return ((double)(b.tv_sec - a->tv_sec) * 1e9 + (double)(b.tv_nsec - a->tv_nsec)) / (double)n;
}
int main(void) {
    double q[REACH_ARM_NQ] = {9.0, -4.0, 3.0, 12.0, 5.0, -6.0};
    double qd[REACH_ARM_NQ] = {0.3, -0.2, 0.1, 0.4, 0.2, -0.1};
    double B[36], C[36], G[6], sink = 0.0, separate = 1e300, together = 1e300, t;
    double u[REACH_ARM_NU] = {0.5, 0.0, 0.2, 0.01}, ur[REACH_ARM_NU], qe[REACH_ARM_NQ];
    double target[REACH_ARM_NY] = {4.0, -3.0}, kp[REACH_ARM_NY] = {0.05, 0.05};
    double kd[REACH_ARM_NY] = {0.005, 0.005}, equilibrium = 1e300, regulate = 1e300;
    reach_arm_equilibrium_info info;
    int status = 0;
    struct timespec a;
    long i, n = 5000;
    int rep;
    /* Best of five runs of each: the machine is shared, and noise only adds time. */
    for (rep = 0; rep < 5; ++rep) {
        clock_gettime(CLOCK_MONOTONIC, &a);
        for (i = 0; i < n; ++i) {
            q[0] += 1e-9;
            reach_arm_inertia(q, B);
            reach_arm_coriolis(q, qd, C);
            reach_arm_gravity(q, G);
            sink += B[7] + C[8] + G[2];
        }
        t = since(&a, n);
        separate = t < separate ? t : separate;
        clock_gettime(CLOCK_MONOTONIC, &a);
        for (i = 0; i < n; ++i) {
            q[0] += 1e-9;
            reach_arm_terms(q, qd, B, C, G);
            sink += B[7] + C[8] + G[2];
        }
        t = since(&a, n);
        together = t < together ? t : together;
        clock_gettime(CLOCK_MONOTONIC, &a);
        for (i = 0; i < n / 50; ++i) {
            u[0] = 0.5 + 1e-9 * (double)i;
            status |= reach_arm_equilibrium(u, qe, &info);
            sink += qe[1];
        }
        t = since(&a, n / 50);
        equilibrium = t < equilibrium ? t : equilibrium;
        clock_gettime(CLOCK_MONOTONIC, &a);
        for (i = 0; i < n; ++i) {
            q[0] += 1e-9;
            status |= reach_arm_regulate(REACH_ARM_LAW_COMPENSATED, target, kp, kd, q, qd, ur) & 1;
            sink += ur[1];
        }
        t = since(&a, n);
        regulate = t < regulate ? t : regulate;
    }
    printf("%.0f %.0f %.0f %.0f %d %d %g\n", separate, together, equilibrium, regulate,
        info.iterations, status, sink);
    return 0;
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

    let t = Instant::now();
    let model = derive_emitted(&arm);
    let files = emit(&model, &text, Options::default()).unwrap();
    let out = root.join("target/bench-emitted/reach_arm");
    // The bench's own folder, which its compiler runs fill with files arcwright did
    // not write (and so would refuse to replace): start it afresh.
    let _ = std::fs::remove_dir_all(&out);
    write_tree(&out, &files, &|_| {}).unwrap();
    println!(
        "generate (derive + plan + golden + emit + write), in-process: {:.2?}",
        t.elapsed()
    );

    let plan = Plan::new(&model, true, Precision::F64).unwrap();
    println!(
        "kernel table: {} rows, {} non-zeros",
        plan.table.rows.len(),
        plan.table_nnz()
    );
    for (name, f) in [
        ("inertia", &plan.inertia),
        ("gravity", &plan.gravity),
        ("actuation", &plan.actuation),
        ("tip_jacobian", &plan.tip_jacobian),
        ("potential_energy", &plan.potential_energy),
        ("terms (B, C, G)", &plan.terms),
    ] {
        println!("ops {name:>17}: {}", f.ops);
    }
    println!("ops {:>17}: {}", "kinetic_energy", plan.kinetic_energy);
    println!("ops {:>17}: {}", "forward_dynamics", plan.dynamics);
    let plain = Plan::new(&model, false, Precision::F64).unwrap();
    println!(
        "without the kernel table: inertia {}, terms {}",
        plain.inertia.ops, plain.terms.ops
    );

    let c = out.join("c");
    std::fs::write(c.join("bench.c"), DRIVER).unwrap();
    let t = Instant::now();
    let ok = Command::new("gcc")
        .args([
            "-std=c99",
            "-O2",
            "-DARCWRIGHT_PLAIN_FUNCTIONS",
            "-c",
            "reach_arm.c",
            "-o",
            "reach_arm.o",
        ])
        .current_dir(&c)
        .status()
        .is_ok_and(|s| s.success());
    if !ok {
        println!("gcc not available: no C figures");
        return;
    }
    println!("gcc -O2 compile of reach_arm.c: {:.1?}", t.elapsed());
    let size = Command::new("size")
        .arg("reach_arm.o")
        .current_dir(&c)
        .output()
        .unwrap();
    print!(
        "object size (gcc -O2, f64):\n{}",
        String::from_utf8_lossy(&size.stdout)
    );
    Command::new("gcc")
        .args([
            "-std=c99",
            "-O2",
            "-DARCWRIGHT_PLAIN_FUNCTIONS",
            "bench.c",
            "reach_arm.o",
            "-lm",
            "-o",
            "bench",
        ])
        .current_dir(&c)
        .status()
        .unwrap();
    let run = Command::new(c.join("bench")).output().unwrap();
    let figures: Vec<f64> = String::from_utf8_lossy(&run.stdout)
        .split_whitespace()
        .take(6)
        .map(|w| w.parse().unwrap())
        .collect();
    let (separate, ns) = (figures[0], figures[1]);
    println!("emitted C (f64, -O2), B + C + G by reach_arm_terms: {ns:.0} ns/call");
    println!("emitted C (f64, -O2), B + C + G as three calls: {separate:.0} ns/call");
    println!(
        "emitted C (f64, -O2), reach_arm_equilibrium under u = (0.5, 0, 0.2, 0.01): \
         {:.0} ns/call, {} Newton iterations (status {})",
        figures[2], figures[4], figures[5]
    );
    println!(
        "emitted C (f64, -O2), reach_arm_regulate (compensated): {:.0} ns/call",
        figures[3]
    );

    let q = [9.0, -4.0, 3.0, 12.0, 5.0, -6.0];
    let qd = [0.3, -0.2, 0.1, 0.4, 0.2, -0.1];
    let reference = Reference::new(&arm, Kinematics::Truncated(arm.expansion_order));
    let n = 200;
    let t = Instant::now();
    let mut sink = 0.0;
    for _ in 0..n {
        sink += reference.inertia(&q)[1][1]
            + reference.coriolis(&q, &qd)[1][2]
            + reference.gravity(&q)[2];
    }
    let ns_ref = t.elapsed().as_nanos() as f64 / n as f64;
    println!(
        "Rust numeric reference, B + C + G: {ns_ref:.0} ns/call ({:.0}x the C) [{sink:.3}]",
        ns_ref / ns
    );
    let ev = Evaluator::new(&model);
    let t = Instant::now();
    for _ in 0..n {
        sink += ev.terms(&q, &qd).b[1][1];
    }
    let ns_ev = t.elapsed().as_nanos() as f64 / n as f64;
    println!("derived-program interpreter, all terms: {ns_ev:.0} ns/call [{sink:.3}]");

    // f32 for a Cortex-M4F.
    let out32 = root.join("target/bench-emitted/reach_arm_f32");
    let files32 = emit(
        &model,
        &text,
        Options {
            precision: Precision::F32,
            ..Options::default()
        },
    )
    .unwrap();
    let _ = std::fs::remove_dir_all(&out32);
    write_tree(&out32, &files32, &|_| {}).unwrap();
    let c32 = out32.join("c");
    let t = Instant::now();
    let arm_ok = Command::new("arm-none-eabi-gcc")
        .args([
            "-std=c99",
            "-mcpu=cortex-m4",
            "-mfpu=fpv4-sp-d16",
            "-mfloat-abi=hard",
            "-mthumb",
            "-Os",
            "-DARCWRIGHT_PLAIN_FUNCTIONS",
            "-fstack-usage",
            "-c",
            "reach_arm.c",
            "-o",
            "m4.o",
        ])
        .current_dir(&c32)
        .status()
        .is_ok_and(|s| s.success());
    if arm_ok {
        println!("arm-none-eabi-gcc -Os compile: {:.1?}", t.elapsed());
        let size = Command::new("arm-none-eabi-size")
            .arg("m4.o")
            .current_dir(&c32)
            .output()
            .unwrap();
        print!(
            "Cortex-M4F (f32, -Os) size:\n{}",
            String::from_utf8_lossy(&size.stdout)
        );
        // Stack frames (gcc -fstack-usage): a public function's frame plus its largest
        // part is its worst case; forward dynamics adds the frame of terms.
        if let Ok(su) = std::fs::read_to_string(c32.join("m4.su")) {
            let mut frames: Vec<(usize, String)> = su
                .lines()
                .filter_map(|l| {
                    let mut f = l.split('\t');
                    let name = f.next()?.rsplit(':').next()?.to_string();
                    Some((f.next()?.parse().ok()?, name))
                })
                .collect();
            frames.sort();
            let (ws, plain): (Vec<_>, Vec<_>) =
                frames.iter().rev().partition(|(_, n)| n.ends_with("_ws"));
            println!("largest stack frames on the Cortex-M4F [bytes], plain functions:");
            for (bytes, name) in plain.iter().take(6) {
                println!("  {bytes:>6}  {name}");
            }
            // The _ws forms keep their arrays in the caller's scratch; what remains is
            // their own frame plus the deepest helper they call (a part, the moments).
            println!("  with caller-owned scratch (_ws), frames:");
            for (bytes, name) in ws.iter().take(4) {
                println!("  {bytes:>6}  {name}");
            }
            let helpers = [
                "_part",
                "_moments",
                "_kernels",
                "_scaled_series",
                "_pose_segment",
            ];
            if let Some((bytes, name)) = plain
                .iter()
                .find(|(_, n)| helpers.iter().any(|h| n.contains(h)))
            {
                println!("  {bytes:>6}  {name} (largest helper they call)");
            }
        }
    } else {
        println!("arm-none-eabi-gcc not available: no Cortex-M4F size");
    }

    let bin = root.join("target/release/arcwright");
    if bin.exists() {
        let t = Instant::now();
        let st = Command::new(&bin)
            .arg("generate")
            .arg(&arm_path)
            .arg("--out")
            .arg(root.join("target/bench-emitted/cli"))
            .status()
            .unwrap();
        println!(
            "`arcwright generate` (release binary) end to end: {:.2?} ({st})",
            t.elapsed()
        );
    }
}
