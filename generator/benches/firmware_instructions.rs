//! Instructions per call of the demo's single-precision C on a Cortex-M4F, counted:
//! the code is built for the M4F (Thumb-2, FPv4-SP, hard float, `-Os`) with the
//! `arm-none-eabi` toolchain and run under QEMU's user-mode emulator, one instruction
//! per translation block, with every executed block logged (`-singlestep -d
//! exec,nochain`). A call's count is the difference between a driver that calls the
//! function `1 + REPEAT` times and one that calls it once, over `REPEAT`: start-up and
//! exit cancel. The counts are exact for the executed path and repeatable; cycles
//! depend on the part's flash wait states and are not emulated.
//!
//! Runs with `cargo bench --bench firmware_instructions`; without `arm-none-eabi-gcc` or
//! `qemu-arm` (Debian: gcc-arm-none-eabi, qemu-user) it says so and stops.

use arcwright::arm::parse_arm_file;
use arcwright::derive::derive_emitted;
use arcwright::emit::{emit, Options, Precision};
use arcwright::outdir::write_tree;
use std::io::{BufRead, BufReader};
use std::path::Path;
use std::process::{Command, Stdio};

const REPEAT: usize = 4;

/// A driver without any C library start-up: `_start` calls the function and exits by
/// the Linux system call, so that the emulator counts nothing but the calls.
fn driver(call: &str, calls: usize) -> String {
    format!(
        r#"#include "reach_arm.h"
static float work[REACH_ARM_WORK_LEN];
static volatile float sink;
static void sys_exit(int code)
{{
    register int r0 __asm__("r0") = code;
    register int r7 __asm__("r7") = 1;
    __asm__ volatile("svc 0" : : "r"(r0), "r"(r7));
    for (;;) {{
    }}
}}
void _start(void)
{{
    float q[REACH_ARM_NQ] = {{9.0f, -4.0f, 3.0f, 12.0f, 5.0f, -6.0f}};
    float qd[REACH_ARM_NQ] = {{0.3f, -0.2f, 0.1f, 0.4f, 0.2f, -0.1f}};
    float u[REACH_ARM_NU] = {{0.5f, 0.0f, 0.2f, 0.01f}};
    float target[REACH_ARM_NY] = {{4.0f, -3.0f}};
    float kp[REACH_ARM_NY] = {{0.05f, 0.05f}};
    float kd[REACH_ARM_NY] = {{0.005f, 0.005f}};
    float B[36], C[36], G[6], qdd[6], ur[4];
    reach_arm_equilibrium_info info;
    int i;
    (void)B; (void)C; (void)G; (void)qdd; (void)ur; (void)info; (void)u;
    (void)target; (void)kp; (void)kd;
    for (i = 0; i < {calls}; ++i) {{
        {call};
        q[0] += 1e-3f;
    }}
    sink = q[0] + B[0] + qdd[0] + ur[0];
    sys_exit(0);
}}
"#
    )
}

fn have(tool: &str) -> bool {
    Command::new(tool)
        .arg("--version")
        .output()
        .is_ok_and(|o| o.status.success())
}

/// Instructions the emulator executes for the program at `exe`.
fn count(exe: &Path) -> usize {
    let mut child = Command::new("qemu-arm")
        .args([
            "-cpu",
            "cortex-a7",
            "-singlestep",
            "-d",
            "exec,nochain",
            "-D",
            "/dev/stdout",
        ])
        .arg(exe)
        .stdout(Stdio::piped())
        .spawn()
        .expect("qemu-arm");
    let out = child.stdout.take().expect("stdout");
    let n = BufReader::new(out)
        .lines()
        .map_while(Result::ok)
        .filter(|l| l.starts_with("Trace"))
        .count();
    assert!(
        child.wait().expect("qemu-arm").success(),
        "the driver failed"
    );
    n
}

fn main() {
    if !have("arm-none-eabi-gcc") || !have("qemu-arm") {
        println!(
            "arm-none-eabi-gcc or qemu-arm not found (Debian: gcc-arm-none-eabi, qemu-user): \
             no instruction counts"
        );
        return;
    }
    let root = Path::new(env!("CARGO_MANIFEST_DIR"))
        .parent()
        .unwrap()
        .to_path_buf();
    let arm_path = root.join("examples/reach_arm.toml");
    let text = std::fs::read_to_string(&arm_path).unwrap();
    let (arm, _) = parse_arm_file(&arm_path).unwrap();
    let files = emit(
        &derive_emitted(&arm),
        &text,
        Options {
            precision: Precision::F32,
            ..Options::default()
        },
    )
    .unwrap();
    let out = root.join("target/bench-firmware/reach_arm");
    let _ = std::fs::remove_dir_all(&out);
    write_tree(&out, &files, &|_| {}).unwrap();
    let c = out.join("c");
    let build = std::env::temp_dir().join("arcwright-firmware-instructions");
    let _ = std::fs::remove_dir_all(&build);
    std::fs::create_dir_all(&build).unwrap();
    let flags = [
        "-std=c99",
        "-mcpu=cortex-m4",
        "-mfpu=fpv4-sp-d16",
        "-mfloat-abi=hard",
        "-mthumb",
        "-Os",
        "-ffunction-sections",
        "-fdata-sections",
    ];
    println!("reach_arm, f32, arm-none-eabi-gcc -Os for the Cortex-M4F, counted under qemu-arm:");
    for (name, call) in [
        ("terms_ws", "reach_arm_terms_ws(q, qd, B, C, G, work)"),
        (
            "forward_dynamics_ws",
            "(void)reach_arm_forward_dynamics_ws(q, qd, u, qdd, work)",
        ),
        (
            "regulate_ws (compensated)",
            "(void)reach_arm_regulate_ws(REACH_ARM_LAW_COMPENSATED, target, kp, kd, q, qd, ur, work)",
        ),
        (
            "equilibrium_ws",
            "(void)reach_arm_equilibrium_ws(u, qdd, &info, work)",
        ),
    ] {
        let mut counts = Vec::new();
        let mut flash = 0;
        for calls in [1, 1 + REPEAT] {
            let src = build.join("drv.c");
            std::fs::write(&src, driver(call, calls)).unwrap();
            let exe = build.join(format!("drv{calls}"));
            let ok = Command::new("arm-none-eabi-gcc")
                .args(flags)
                .arg("-I")
                .arg(&c)
                .arg(&src)
                .arg(c.join("reach_arm.c"))
                .args(["-nostartfiles", "-static", "-Wl,--gc-sections", "-lm", "-lc", "-lgcc", "-o"])
                .arg(&exe)
                .status()
                .is_ok_and(|s| s.success());
            assert!(ok, "building the {name} driver failed");
            let size = Command::new("arm-none-eabi-size").arg(&exe).output().unwrap();
            flash = String::from_utf8_lossy(&size.stdout)
                .lines()
                .nth(1)
                .and_then(|l| l.split_whitespace().next()?.parse::<usize>().ok())
                .unwrap_or(0);
            counts.push(count(&exe));
        }
        let per_call = (counts[1] - counts[0]) / REPEAT;
        println!(
            "  {name:<26} {per_call:>8} instructions per call; a firmware of it alone: {flash} bytes of text"
        );
    }
}
