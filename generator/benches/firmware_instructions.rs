//! Instructions per call of the demo's single-precision C on a Cortex-M4F, counted:
//! the code is built for the M4F (Thumb-2, FPv4-SP, hard float, `-Os`) with the
//! `arm-none-eabi` toolchain and run under QEMU's user-mode emulator, one instruction
//! per translation block, with every executed block logged (`-singlestep -d
//! exec,nochain`). A call's count is the difference between a driver that calls the
//! function `1 + REPEAT` times and one that calls it once, over `REPEAT`: start-up and
//! exit cancel. The counts are exact for the executed path and repeatable; cycles
//! depend on the part's flash wait states and are not emulated.
//!
//! The f32 Rust crate is counted the same way when Rust's `thumbv7em-none-eabihf` target
//! is installed (`rustup target add thumbv7em-none-eabihf`): built at opt-level "s" with
//! LTO and `panic = "abort"` into a static library that a C driver of the same shape
//! calls.
//!
//! Runs with `cargo bench --bench firmware_instructions`; without `arm-none-eabi-gcc` or
//! `qemu-arm` (Debian: gcc-arm-none-eabi, qemu-user) it says so and stops.

use arcwright::arm::parse_arm_file;
use arcwright::derive::derive_emitted;
use arcwright::emit::{emit, Options, Precision};
use arcwright::outdir::write_tree;
use std::io::{BufRead, BufReader};
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};

const REPEAT: usize = 4;

/// `_exit` by the Linux system call, for drivers that have no C library start-up.
const SYS_EXIT: &str = r#"static void sys_exit(int code)
{
    register int r0 __asm__("r0") = code;
    register int r7 __asm__("r7") = 1;
    __asm__ volatile("svc 0" : : "r"(r0), "r"(r7));
    for (;;) {
    }
}
"#;

/// A driver without any C library start-up: `_start` calls the function and exits by
/// the Linux system call, so that the emulator counts nothing but the calls.
fn driver(call: &str, calls: usize) -> String {
    format!(
        r#"#include "reach_arm.h"
static float work[REACH_ARM_WORK_LEN];
static volatile float sink;
{SYS_EXIT}
void _start(void)
{{
    float q[REACH_ARM_NQ] = {{9.0f, -4.0f, 3.0f, 12.0f, 5.0f, -6.0f}};
    /* Both segments bent beyond FAST_BENDING (a_1 = 4.8, a_2 = -4.5 rad). */
    float qb[REACH_ARM_NQ] = {{40.0f, -4.0f, 3.0f, -45.0f, 5.0f, -6.0f}};
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
        qb[0] += 1e-3f;
    }}
    sink = q[0] + qb[0] + B[0] + qdd[0] + ur[0];
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

/// The Rust crate's functions as C symbols, over a workspace of its own.
const RUST_SHIM: &str = r#"#![no_std]
use reach_arm::{Real, Workspace, NQ, NU};

#[panic_handler]
fn panic(_: &core::panic::PanicInfo) -> ! {
    loop {}
}

static mut WS: Workspace = Workspace::new();

/// # Safety
/// Called from the one-threaded driver only, with valid arrays.
#[no_mangle]
pub unsafe extern "C" fn rs_terms(q: *const [Real; NQ], qd: *const [Real; NQ], out: *mut Real) {
    let ws = &mut *core::ptr::addr_of_mut!(WS);
    let (b, c, g) = reach_arm::terms_ws(&*q, &*qd, ws);
    *out = b[0][0] + c[1][2] + g[3];
}

/// # Safety
/// As `rs_terms`.
#[no_mangle]
pub unsafe extern "C" fn rs_forward_dynamics(
    q: *const [Real; NQ],
    qd: *const [Real; NQ],
    u: *const [Real; NU],
    out: *mut Real,
) {
    let ws = &mut *core::ptr::addr_of_mut!(WS);
    if let Ok(qdd) = reach_arm::forward_dynamics_ws(&*q, &*qd, &*u, ws) {
        *out = qdd[0];
    }
}
"#;

/// The C driver of the Rust static library: the same states as [`driver`].
fn rust_driver(call: &str, calls: usize) -> String {
    format!(
        r#"extern void rs_terms(const float *q, const float *qd, float *out);
extern void rs_forward_dynamics(const float *q, const float *qd, const float *u, float *out);
static volatile float sink;
{SYS_EXIT}
void _start(void)
{{
    float q[6] = {{9.0f, -4.0f, 3.0f, 12.0f, 5.0f, -6.0f}};
    float qd[6] = {{0.3f, -0.2f, 0.1f, 0.4f, 0.2f, -0.1f}};
    float u[4] = {{0.5f, 0.0f, 0.2f, 0.01f}};
    float out = 0.0f;
    int i;
    for (i = 0; i < {calls}; ++i) {{
        {call};
        q[0] += 1e-3f;
    }}
    sink = out + u[0];
    sys_exit(0);
}}
"#
    )
}

const M4F_FLAGS: [&str; 8] = [
    "-std=c99",
    "-mcpu=cortex-m4",
    "-mfpu=fpv4-sp-d16",
    "-mfloat-abi=hard",
    "-mthumb",
    "-Os",
    "-ffunction-sections",
    "-fdata-sections",
];

/// Builds the driver `source(calls)` with `objects` for one and for `1 + REPEAT` calls
/// and returns the instructions per call and the firmware's bytes of text.
fn per_call(
    build: &Path,
    what: &str,
    objects: &[PathBuf],
    include: Option<&Path>,
    source: &dyn Fn(usize) -> String,
) -> (usize, usize) {
    let mut counts = Vec::new();
    let mut flash = 0;
    for calls in [1, 1 + REPEAT] {
        let src = build.join("drv.c");
        std::fs::write(&src, source(calls)).unwrap();
        let exe = build.join(format!("drv{calls}"));
        let mut cc = Command::new("arm-none-eabi-gcc");
        cc.args(M4F_FLAGS);
        if let Some(dir) = include {
            cc.arg("-I").arg(dir);
        }
        let ok = cc
            .arg(&src)
            .args(objects)
            .args([
                "-nostartfiles",
                "-static",
                "-Wl,--gc-sections",
                // The driver's inline assembly says nothing about the stack.
                "-Wl,-z,noexecstack",
                "-lm",
                "-lc",
                "-lgcc",
                "-o",
            ])
            .arg(&exe)
            .status()
            .is_ok_and(|s| s.success());
        assert!(ok, "building the {what} driver failed");
        let size = Command::new("arm-none-eabi-size")
            .arg(&exe)
            .output()
            .unwrap();
        flash = String::from_utf8_lossy(&size.stdout)
            .lines()
            .nth(1)
            .and_then(|l| l.split_whitespace().next()?.parse::<usize>().ok())
            .unwrap_or(0);
        counts.push(count(&exe));
    }
    ((counts[1] - counts[0]) / REPEAT, flash)
}

/// Builds the f32 Rust crate at `crate_dir` into a static library for the M4F; `None`
/// (with the reason printed) when the target is not installed.
fn rust_library(build: &Path, crate_dir: &Path) -> Option<PathBuf> {
    let installed = Command::new("rustup")
        .args(["target", "list", "--installed"])
        .output()
        .is_ok_and(|o| {
            String::from_utf8_lossy(&o.stdout)
                .lines()
                .any(|l| l.trim() == "thumbv7em-none-eabihf")
        });
    if !installed {
        println!("Rust: the thumbv7em-none-eabihf target is not installed (rustup target add thumbv7em-none-eabihf): not counted");
        return None;
    }
    let shim = build.join("rust-shim");
    std::fs::create_dir_all(shim.join("src")).unwrap();
    std::fs::write(
        shim.join("Cargo.toml"),
        format!(
            "[package]\nname = \"m4f_shim\"\nversion = \"0.0.0\"\nedition = \"2021\"\n\n\
             [lib]\ncrate-type = [\"staticlib\"]\n\n[dependencies]\nreach_arm = {{ path = {:?} }}\n\n\
             [profile.release]\nopt-level = \"s\"\nlto = true\npanic = \"abort\"\ncodegen-units = 1\n\n[workspace]\n",
            crate_dir
        ),
    )
    .unwrap();
    std::fs::write(shim.join("src/lib.rs"), RUST_SHIM).unwrap();
    let ok = Command::new("cargo")
        .args([
            "build",
            "-q",
            "--release",
            "--target",
            "thumbv7em-none-eabihf",
        ])
        .current_dir(&shim)
        .env_remove("CARGO_TARGET_DIR")
        .status()
        .is_ok_and(|s| s.success());
    assert!(ok, "building the Rust crate for the Cortex-M4F failed");
    Some(shim.join("target/thumbv7em-none-eabihf/release/libm4f_shim.a"))
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
    println!("reach_arm, f32, arm-none-eabi-gcc -Os for the Cortex-M4F, counted under qemu-arm:");
    let objects = [c.join("reach_arm.c")];
    for (name, call) in [
        ("terms_ws", "reach_arm_terms_ws(q, qd, B, C, G, work)"),
        (
            "terms_ws, |a_j| > 4",
            "reach_arm_terms_ws(qb, qd, B, C, G, work)",
        ),
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
        let (n, flash) = per_call(&build, name, &objects, Some(&c), &|calls| driver(call, calls));
        println!(
            "  {name:<26} {n:>8} instructions per call; a firmware of it alone: {flash} bytes of text"
        );
    }
    if let Some(lib) = rust_library(&build, &out.join("rust")) {
        println!("the same f32 crate in Rust (opt-level \"s\", LTO), called from C:");
        for (name, call) in [
            ("terms_ws", "rs_terms(q, qd, &out)"),
            ("forward_dynamics_ws", "rs_forward_dynamics(q, qd, u, &out)"),
        ] {
            let (n, flash) = per_call(&build, name, std::slice::from_ref(&lib), None, &|calls| {
                rust_driver(call, calls)
            });
            println!(
                "  {name:<26} {n:>8} instructions per call; a firmware of it alone: {flash} bytes of text"
            );
        }
    }
}
