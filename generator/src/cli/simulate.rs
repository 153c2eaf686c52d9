//! `arcwright simulate`: the derived model integrated in time under constant inputs.

use super::eval::load_arm;
use super::plot::{self, Axes, Line, Panel};
use super::report::default_out_dir;
use super::{parse_vector, progress, CliError};
use crate::derive::derive;
use crate::dynamics::forward_dynamics;
use crate::evaluate::Evaluator;
use crate::integrate::{integrate, IntegrateError, Options};
use clap::Args;
use std::fmt::Write as _;
use std::path::{Path, PathBuf};
use std::time::Instant;

/// Integrate the arm's dynamics from a start state under constant inputs.
///
/// Uses an adaptive Dormand–Prince 5(4) method with error control on the model derived
/// at the file's expansion order (or --order). Writes trajectory.csv (time, q, q̇, tip
/// pose, energies; one row per output time) and trajectory.svg (backbone snapshots,
/// coordinates and energies over time) into the output folder, and prints a summary.
/// For an undamped arm with zero inputs it also prints the energy drift, a check of
/// the integration. Soft arms have fast bending modes: long simulations take many
/// small steps (loosen --rtol or lower --order to go faster).
#[derive(Args, Debug)]
#[command(
    allow_negative_numbers = true,
    after_help = "Example:\n  arcwright simulate examples/reach_arm.toml --q0 \"10,0,0,5,0,0\" --u \"0.3,0,0,0\" --duration 0.5\n  \
                        arcwright simulate examples/hanging_taper.toml --q0 \"5,0,0,0,0,0,0,0\" --duration 0.2 --out /tmp/swing"
)]
pub struct SimulateArgs {
    /// Arm file (TOML).
    arm: PathBuf,
    /// Start configuration q(0), n comma-separated numbers.
    #[arg(long, allow_hyphen_values = true)]
    q0: String,
    /// Start velocity q̇(0), n numbers (default zero).
    #[arg(long, allow_hyphen_values = true)]
    qd0: Option<String>,
    /// Constant inputs u, one per column of A (default zero).
    #[arg(long, allow_hyphen_values = true)]
    u: Option<String>,
    /// Simulated time [s].
    #[arg(long)]
    duration: f64,
    /// Time between rows of the CSV [s] (default: duration / 500).
    #[arg(long)]
    output_interval: Option<f64>,
    /// Expansion order N, overriding the arm file.
    #[arg(long)]
    order: Option<u32>,
    /// Relative error tolerance per step.
    #[arg(long, default_value_t = 1e-8)]
    rtol: f64,
    /// Absolute error tolerance per step.
    #[arg(long, default_value_t = 1e-10)]
    atol: f64,
    /// Give up after this many steps.
    #[arg(long, default_value_t = 200_000)]
    max_steps: usize,
    /// Number of backbone snapshots in the plot.
    #[arg(long, default_value_t = 8)]
    snapshots: usize,
    /// Folder for trajectory.csv and trajectory.svg (default: <arm name>_simulation beside the arm file).
    #[arg(long)]
    out: Option<PathBuf>,
}

/// Most CSV rows a run may ask for.
const MAX_ROWS: f64 = 1e6;

fn positive(option: &str, v: f64) -> Result<f64, CliError> {
    if v.is_finite() && v > 0.0 {
        Ok(v)
    } else {
        Err(CliError::Input(format!(
            "--{option}: must be a positive number, got {v}"
        )))
    }
}

/// One output row: time, state and what is derived from it.
struct Row {
    t: f64,
    q: Vec<f64>,
    qd: Vec<f64>,
    tip: [f64; 3],
    kinetic: f64,
    potential: f64,
}

pub fn run(args: &SimulateArgs) -> Result<(), CliError> {
    let arm = load_arm(&args.arm, args.order)?;
    let n = arm.n_coords();
    let k = arm.n_inputs();
    let q0 = parse_vector("q0", &args.q0, n)?;
    let qd0 = match &args.qd0 {
        Some(t) => parse_vector("qd0", t, n)?,
        None => vec![0.0; n],
    };
    let u = match &args.u {
        Some(t) => super::parse_inputs(&arm, t)?,
        None => vec![0.0; k],
    };
    let duration = positive("duration", args.duration)?;
    let interval = positive(
        "output-interval",
        args.output_interval.unwrap_or(duration / 500.0),
    )?;
    if duration / interval > MAX_ROWS {
        return Err(CliError::Input(format!(
            "--output-interval: {interval} s gives more than {MAX_ROWS:.0} rows over {duration} s"
        )));
    }
    let opts = Options {
        rtol: positive("rtol", args.rtol)?,
        atol: positive("atol", args.atol)?,
        max_steps: if args.max_steps == 0 {
            return Err(CliError::Input("--max-steps: must be at least 1".into()));
        } else {
            args.max_steps
        },
        h_max: Some(interval.max(duration / 50.0)),
    };
    let out_dir = match &args.out {
        Some(d) => d.clone(),
        None => default_out_dir(&args.arm, &arm.name, "simulation"),
    };
    super::prepare_out_dir(&out_dir)?;

    progress::note(&format!(
        "deriving {} at order {}…",
        arm.name, arm.expansion_order
    ));
    let model = derive(&arm);
    let ev = Evaluator::new(&model);

    let mut times: Vec<f64> = Vec::new();
    let steps = (duration / interval).round() as usize;
    for i in 0..=steps {
        times.push((i as f64 * interval).min(duration));
    }
    if *times.last().expect("at least t = 0") < duration {
        times.push(duration);
    }
    times.dedup();

    let rhs = |_t: f64, y: &[f64], dy: &mut [f64]| -> Result<(), String> {
        let (q, qd) = y.split_at(n);
        let terms = ev.terms(q, qd);
        let qdd = forward_dynamics(&terms, q, qd, &u).map_err(|e| e.to_string())?;
        dy[..n].copy_from_slice(qd);
        dy[n..].copy_from_slice(&qdd);
        Ok(())
    };
    let y0: Vec<f64> = q0.iter().chain(&qd0).copied().collect();
    let bar = progress::fraction_bar("simulating");
    let started = Instant::now();
    let result = integrate(rhs, &y0, 0.0, duration, &times, &opts, |t| {
        bar.set_position((t / duration * 1000.0) as u64);
        bar.set_message(format!("t = {t:.4} s"));
    });
    bar.finish_and_clear();
    let (solution, stats) = result.map_err(|e| {
        let hint = match &e {
            IntegrateError::MaxSteps { .. } => {
                " (the arm's fast bending modes force small steps: shorten --duration, \
                 lower --order, loosen --rtol/--atol or raise --max-steps)"
            }
            IntegrateError::StepTooSmall { .. } | IntegrateError::NonFinite { .. } => {
                " (the motion became singular or unbounded: check the start state and inputs)"
            }
            IntegrateError::Rhs { .. } => "",
        };
        CliError::Failed(format!("simulation failed {e}{hint}"))
    })?;
    let seconds = started.elapsed().as_secs_f64();

    let rows: Vec<Row> = solution
        .iter()
        .map(|(t, y)| {
            let (q, qd) = y.split_at(n);
            let terms = ev.terms(q, qd);
            Row {
                t: *t,
                q: q.to_vec(),
                qd: qd.to_vec(),
                tip: terms.tip_pose,
                kinetic: terms.kinetic_energy,
                potential: terms.potential_energy,
            }
        })
        .collect();
    if rows
        .iter()
        .any(|r| !(r.kinetic.is_finite() && r.potential.is_finite()))
    {
        return Err(CliError::Failed(
            "simulation failed: the energies are not finite along the solution".into(),
        ));
    }

    let csv_path = out_dir.join("trajectory.csv");
    let svg_path = out_dir.join("trajectory.svg");
    let names = coordinate_names(&arm);
    super::write_file(&csv_path, &csv(&names, &rows))?;
    write_plot(
        &svg_path,
        &arm,
        &names,
        &rows,
        &ev,
        arm.segments.len(),
        args.snapshots,
    )
    .map_err(CliError::Failed)?;
    progress::wrote(&csv_path);
    progress::wrote(&svg_path);

    // Summary.
    let mut s = String::new();
    let _ = writeln!(
        s,
        "{}, order {}: simulated {} s in {} steps ({} rejected, {} evaluations), {seconds:.2} s of computing",
        progress::bold(&arm.name),
        arm.expansion_order,
        super::num(duration),
        stats.accepted,
        stats.rejected,
        stats.evaluations
    );
    let last = rows.last().expect("the end time is an output");
    let _ = writeln!(
        s,
        "tip at t = {}: x = {:.6} m, y = {:.6} m, angle = {:.6} rad",
        super::num(last.t),
        last.tip[0],
        last.tip[1],
        last.tip[2]
    );
    let e0 = rows[0].kinetic + rows[0].potential;
    let undamped = arm.segments.iter().all(|seg| seg.damping.is_zero());
    let unforced = u.iter().all(|x| *x == 0.0);
    if undamped && unforced {
        let drift = rows
            .iter()
            .map(|r| (r.kinetic + r.potential - e0).abs())
            .fold(0.0, f64::max);
        let ke_max = rows.iter().map(|r| r.kinetic).fold(0.0, f64::max);
        if ke_max > 0.0 {
            let _ = writeln!(
                s,
                "energy drift (undamped, unforced): max |E(t) − E(0)| = {drift:.3e} J, {:.3e} of the largest kinetic energy",
                drift / ke_max
            );
        } else {
            let _ = writeln!(s, "energy drift (undamped, unforced): max |E(t) − E(0)| = {drift:.3e} J (the arm stays at rest)");
        }
    } else {
        let e1 = last.kinetic + last.potential;
        let why = match (undamped, unforced) {
            (false, true) => "damped",
            (true, false) => "forced",
            _ => "damped and forced",
        };
        let _ = writeln!(
            s,
            "energy: E(0) = {e0:.6e} J, E(end) = {e1:.6e} J ({why}: not conserved)"
        );
    }
    let _ = writeln!(
        s,
        "trajectory: {}, {}",
        csv_path.display(),
        svg_path.display()
    );
    super::print_stdout(&s)
}

/// `q1_0, q1_1, …`: segment (1-based) and curvature coefficient.
fn coordinate_names(arm: &crate::arm::Arm) -> Vec<String> {
    arm.coordinate_labels()
        .into_iter()
        .map(|l| format!("q{l}"))
        .collect()
}

fn csv(names: &[String], rows: &[Row]) -> String {
    let mut s = String::from("t");
    for q in names {
        let _ = write!(s, ",{q}");
    }
    for q in names {
        let _ = write!(s, ",qd{}", &q[1..]);
    }
    s.push_str(",tip_x,tip_y,tip_angle,kinetic_energy,potential_energy,total_energy\n");
    for r in rows {
        s.push_str(&super::num(r.t));
        let energies = [r.kinetic, r.potential, r.kinetic + r.potential];
        for v in r.q.iter().chain(&r.qd).chain(&r.tip).chain(&energies) {
            s.push(',');
            s.push_str(&super::num(*v));
        }
        s.push('\n');
    }
    s
}

fn write_plot(
    path: &Path,
    arm: &crate::arm::Arm,
    names: &[String],
    rows: &[Row],
    ev: &Evaluator,
    segments: usize,
    snapshots: usize,
) -> Result<(), String> {
    let count = snapshots.clamp(1, rows.len());
    let picks: Vec<usize> = if count == 1 {
        vec![rows.len() - 1]
    } else {
        (0..count)
            .map(|i| (i * (rows.len() - 1) + (count - 1) / 2) / (count - 1))
            .collect()
    };
    let mut shapes = Vec::new();
    for (k, &i) in picks.iter().enumerate() {
        let r = &rows[i];
        let mut pts = vec![(0.0, 0.0)];
        for j in 0..segments {
            for s in 1..=24 {
                let p = ev.pose(&r.q, j, s as f64 / 24.0);
                pts.push((p[0], p[1]));
            }
        }
        let t = if count > 1 {
            k as f64 / (count - 1) as f64
        } else {
            1.0
        };
        shapes.push(Line::new(
            Some(format!("t = {:.4} s", r.t)),
            pts,
            plot::ramp(t),
        ));
    }
    let coords = names
        .iter()
        .enumerate()
        .map(|(c, label)| {
            Line::new(
                Some(label.clone()),
                rows.iter().map(|r| (r.t, r.q[c])).collect(),
                plot::colour(c),
            )
            .width(1)
        })
        .collect();
    let series = |f: &dyn Fn(&Row) -> f64| rows.iter().map(|r| (r.t, f(r))).collect::<Vec<_>>();
    let energies = vec![
        Line::new(
            Some("kinetic".into()),
            series(&|r| r.kinetic),
            plot::colour(0),
        ),
        Line::new(
            Some("potential".into()),
            series(&|r| r.potential),
            plot::colour(1),
        ),
        Line::new(
            Some("total".into()),
            series(&|r| r.kinetic + r.potential),
            plot::colour(3),
        ),
    ];
    let panels = [
        Panel {
            title: format!("{}: backbone snapshots", arm.name),
            x_label: "x [m]".into(),
            y_label: "y [m]".into(),
            axes: Axes::Equal,
            integer_x: false,
            lines: shapes,
            gravity: Some(arm.gravity_f64()),
        },
        Panel {
            title: "curvature coefficients".into(),
            x_label: "t [s]".into(),
            y_label: "q [1/m]".into(),
            axes: Axes::Linear,
            integer_x: false,
            lines: coords,
            gravity: None,
        },
        Panel {
            title: "energy".into(),
            x_label: "t [s]".into(),
            y_label: "E [J]".into(),
            axes: Axes::Linear,
            integer_x: false,
            lines: energies,
            gravity: None,
        },
    ];
    plot::write_svg(path, &panels, 3, (1500, 480))
}
