//! Worst time and memory over the hostile-input corpus (tests/hostile/cases.toml):
//! every case must be answered fast and small, however large the arm it names.
//! Memory is the peak resident size of the child, read with GNU time
//! (`/usr/bin/time -f`); without it only times are printed.

// The test reads every field; this bench only the arguments.
#[allow(dead_code)]
#[path = "../../tests/common/hostile.rs"]
mod hostile;

use std::path::Path;
use std::process::Command;
use std::time::Instant;

fn main() {
    let bin = Path::new(env!("CARGO_MANIFEST_DIR")).join("../target/release/arcwright");
    let bin = if bin.exists() {
        bin
    } else {
        Path::new(env!("CARGO_MANIFEST_DIR")).join("../target/debug/arcwright")
    };
    let gnu_time = Path::new("/usr/bin/time").exists();
    let mut rows = Vec::new();
    for case in hostile::cases() {
        let scratch = tempfile::tempdir().unwrap();
        let args = hostile::args_in(&case, scratch.path());
        let mut cmd = if gnu_time {
            let mut c = Command::new("/usr/bin/time");
            c.args(["-f", "%M"]).arg(&bin);
            c
        } else {
            Command::new(&bin)
        };
        let t0 = Instant::now();
        let out = cmd
            .args(&args)
            .arg("--quiet")
            .current_dir(hostile::corpus())
            .output()
            .expect("running arcwright");
        let seconds = t0.elapsed().as_secs_f64();
        let kb: Option<u64> = gnu_time
            .then(|| {
                String::from_utf8_lossy(&out.stderr)
                    .lines()
                    .last()
                    .and_then(|l| l.trim().parse().ok())
            })
            .flatten();
        rows.push((case.args.join(" "), seconds, kb));
    }
    rows.sort_by(|a, b| b.1.total_cmp(&a.1));
    println!("{:>9} {:>10}  case (slowest first)", "seconds", "peak KB");
    for (what, s, kb) in &rows {
        let kb = kb.map_or("-".to_string(), |k| k.to_string());
        println!("{s:>9.3} {kb:>10}  {what}");
    }
    let worst_kb = rows.iter().filter_map(|r| r.2).max();
    println!(
        "\n{} cases; worst time {:.3} s, worst peak memory {}",
        rows.len(),
        rows.first().map_or(0.0, |r| r.1),
        worst_kb.map_or("unmeasured".into(), |k| format!(
            "{:.1} MB",
            k as f64 / 1024.0
        ))
    );
}
