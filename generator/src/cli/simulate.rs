//! `arcwright simulate`: the derived model integrated in time, under constant inputs
//! or in closed loop with a regulator of [`crate::control`].

use super::arm_input::load_arm_with;
use super::plot::{self, Axes, Line, Panel};
use super::report::default_out_dir;
use super::{parse_vector, progress, CliError};
use crate::arm::Arm;
use crate::control::{closed_loop_rest, default_outputs, hold, Law, Regulator};
use crate::derive::{derive, derive_statics};
use crate::dynamics::forward_dynamics;
use crate::evaluate::Evaluator;
use crate::integrate::{integrate, IntegrateError, Options, Samples, Stats};
use crate::statics::Derived;
use crate::stiff::integrate_stiff;
use clap::{Args, ValueEnum};
use serde::Serialize;
use std::fmt::Write as _;
use std::path::{Path, PathBuf};
use std::time::Instant;

/// Integrate the arm's dynamics from a start state, under constant inputs or in
/// closed loop with a regulator.
///
/// A damped or regulated arm is integrated by a method for stiff systems
/// (extrapolated linearly implicit Euler with the Jacobian of the forward dynamics),
/// an undamped one by adaptive Dormand–Prince 5(4); --method chooses. Both control the error per step on the model derived at the
/// file's expansion order (or --order). Writes trajectory.csv (time, q, q̇, tip pose,
/// energies, inputs; one row per output time) and trajectory.svg into the output
/// folder, and prints a summary. For an undamped arm with zero inputs it also prints
/// the energy drift, a check of the integration.
///
/// --controller baseline|compensated|both regulates the controlled coordinates
/// (--control, default each segment's constant curvature) to --target with gains
/// --kp and --kd (one value, or one per controlled coordinate), within the arm file's
/// input limits. `both` runs the two laws on the same arm (trajectory_baseline.csv,
/// trajectory_compensated.csv, one picture). The summary (--json: one object per run)
/// gives the steady-state error, 2 % settling time, overshoot and peak inputs, and the
/// rest shape predicted by statics beside the one reached.
#[derive(Args, Debug)]
#[command(
    allow_negative_numbers = true,
    after_help = "Example:\n  arcwright simulate examples/reach_arm.toml --q0 \"10,0,0,5,0,0\" --u \"0.3,0,0,0\" --duration 0.5\n  \
                        arcwright simulate examples/hanging_taper.toml --q0 \"5,0,0,0,0,0,0,0\" --duration 0.2 --out /tmp/swing"
)]
pub struct SimulateArgs {
    /// Arm file (TOML).
    arm: PathBuf,
    /// Start configuration q(0), n comma-separated numbers (default zero: straight).
    #[arg(long, allow_hyphen_values = true)]
    q0: Option<String>,
    /// Start velocity q̇(0), n numbers (default zero).
    #[arg(long, allow_hyphen_values = true)]
    qd0: Option<String>,
    /// Constant inputs u, one per column of A (default zero).
    #[arg(long, allow_hyphen_values = true, conflicts_with = "controller")]
    u: Option<String>,
    /// Regulate the controlled coordinates instead of holding the inputs constant.
    #[arg(long, value_enum, requires_all = ["target", "kp", "kd"])]
    controller: Option<ControllerChoice>,
    /// Target ȳ of the controlled coordinates, one value each [1/m].
    #[arg(long, allow_hyphen_values = true, requires = "controller")]
    target: Option<String>,
    /// Proportional gain(s), generalised force per unit of the coordinate: one value or one per controlled coordinate.
    #[arg(long, allow_hyphen_values = true, requires = "controller")]
    kp: Option<String>,
    /// Derivative gain(s): one value or one per controlled coordinate.
    #[arg(long, allow_hyphen_values = true, requires = "controller")]
    kd: Option<String>,
    /// The controlled coordinates, "1_0,2_0" (default: each segment's constant curvature).
    #[arg(long, requires = "controller")]
    control: Option<String>,
    /// Integration method.
    #[arg(long, value_enum, default_value_t = Method::Auto)]
    method: Method,
    /// Print the summary as JSON (one object per run).
    #[arg(long)]
    json: bool,
    /// Simulated time [s].
    #[arg(long)]
    duration: f64,
    /// Time between rows of the CSV [s] (default: duration / 500).
    #[arg(long)]
    output_interval: Option<f64>,
    /// Expansion order N, overriding the arm file.
    #[arg(long)]
    order: Option<u32>,
    /// Change named numbers of the arm file for this run, without editing it:
    /// "payload.mass=0.05,gravity=0,-9.81,segment[2].bending_stiffness=0.01".
    #[arg(long, value_name = "FIELD=VALUE,…", allow_hyphen_values = true)]
    set: Option<String>,
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

#[derive(Clone, Copy, Debug, PartialEq, Eq, ValueEnum)]
enum ControllerChoice {
    Baseline,
    Compensated,
    Both,
}

/// How `simulate` integrates.
#[derive(Clone, Copy, Debug, PartialEq, Eq, ValueEnum)]
pub enum Method {
    /// Stiff when the arm is damped or regulated (its fast modes then decay fast and
    /// set an explicit method's step), explicit otherwise.
    Auto,
    /// Extrapolated linearly implicit Euler, for stiff systems.
    Stiff,
    /// Dormand–Prince 5(4).
    Explicit,
}

/// One output row: time, state, inputs and what is derived from them.
struct Row {
    t: f64,
    q: Vec<f64>,
    qd: Vec<f64>,
    u: Vec<f64>,
    tip: [f64; 3],
    kinetic: f64,
    potential: f64,
}

/// Where the inputs come from.
enum Drive<'r> {
    Constant(Vec<f64>),
    Regulated(&'r Regulator),
}

impl Drive<'_> {
    fn inputs(&self, terms: &crate::terms::Terms, q: &[f64], qd: &[f64]) -> Vec<f64> {
        match self {
            Drive::Constant(u) => u.clone(),
            Drive::Regulated(reg) => reg.input(&terms.k, &terms.g, &terms.a, q, qd).allocation.u,
        }
    }
}

/// One simulation: its rows and the work it took.
struct Run {
    rows: Vec<Row>,
    stats: Stats,
    seconds: f64,
}

/// Integrates one run and evaluates its rows.
/// What every run of one command shares: start, span, output times, tolerances.
struct Span<'a> {
    y0: &'a [f64],
    duration: f64,
    times: &'a [f64],
    opts: &'a Options,
    method: Method,
}

fn simulate(ev: &Evaluator, drive: &Drive, span: &Span, label: &str) -> Result<Run, CliError> {
    let Span {
        y0,
        duration,
        times,
        opts,
        method,
    } = *span;
    let n = y0.len() / 2;
    let rhs = |_t: f64, y: &[f64], dy: &mut [f64]| -> Result<(), String> {
        let (q, qd) = y.split_at(n);
        let terms = ev.terms(q, qd);
        let u = drive.inputs(&terms, q, qd);
        let qdd = forward_dynamics(&terms, q, qd, &u).map_err(|e| e.to_string())?;
        dy[..n].copy_from_slice(qd);
        dy[n..].copy_from_slice(&qdd);
        Ok(())
    };
    let bar = progress::fraction_bar(label);
    let started = Instant::now();
    let on_step = |t: f64| {
        bar.set_position((t / duration * 1000.0) as u64);
        bar.set_message(format!("t = {t:.4} s"));
    };
    let result: Result<(Samples, Stats), IntegrateError<String>> = match method {
        Method::Stiff | Method::Auto => {
            integrate_stiff(rhs, y0, 0.0, duration, times, opts, on_step)
        }
        Method::Explicit => integrate(rhs, y0, 0.0, duration, times, opts, on_step),
    };
    bar.finish_and_clear();
    let (solution, stats) = result.map_err(|e| {
        let hint = match &e {
            IntegrateError::MaxSteps { .. } => {
                " (the arm's fast bending modes force small steps: shorten --duration, \
                 lower --order, loosen --rtol/--atol or raise --max-steps)"
            }
            IntegrateError::StepTooSmall { .. } | IntegrateError::NonFinite { .. } => {
                " (the motion became singular or unbounded: check the start state, inputs and gains)"
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
                u: drive.inputs(&terms, q, qd),
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
    Ok(Run {
        rows,
        stats,
        seconds,
    })
}

/// One value, or one per controlled coordinate.
fn gains(option: &str, text: &str, h: usize) -> Result<Vec<f64>, CliError> {
    let count = text.split(',').count();
    let v = parse_vector(option, text, if count == 1 { 1 } else { h })?;
    let v = if v.len() == 1 { vec![v[0]; h] } else { v };
    if let Some(x) = v.iter().find(|x| !(**x > 0.0 && x.is_finite())) {
        return Err(CliError::Input(format!(
            "--{option}: gains must be positive and finite, got {}",
            super::num(*x)
        )));
    }
    Ok(v)
}

/// The regulators asked for, in run order.
fn regulators(args: &SimulateArgs, arm: &Arm) -> Result<Vec<Regulator>, CliError> {
    let Some(choice) = args.controller else {
        return Ok(Vec::new());
    };
    let controlled = match &args.control {
        Some(c) => super::parse_outputs("control", arm, c)?,
        None => default_outputs(arm),
    };
    let h = controlled.len();
    let target = parse_vector("target", args.target.as_deref().unwrap_or(""), h)?;
    let kp = gains("kp", args.kp.as_deref().unwrap_or(""), h)?;
    let kd = gains("kd", args.kd.as_deref().unwrap_or(""), h)?;
    let laws: &[Law] = match choice {
        ControllerChoice::Baseline => &[Law::Baseline],
        ControllerChoice::Compensated => &[Law::Compensated],
        ControllerChoice::Both => &[Law::Baseline, Law::Compensated],
    };
    laws.iter()
        .map(|law| {
            Regulator::new(
                arm,
                *law,
                controlled.clone(),
                target.clone(),
                kp.clone(),
                kd.clone(),
            )
            .map_err(|e| CliError::Input(format!("--controller: {e}")))
        })
        .collect()
}

/// What a closed-loop run reached, and what statics predicted.
#[derive(Serialize)]
struct Summary {
    controller: &'static str,
    controlled: Vec<String>,
    target: Vec<f64>,
    final_y: Vec<f64>,
    /// `ȳ − y` at the end of the run.
    steady_state_error: Vec<f64>,
    /// Time after which each controlled coordinate stays within 2 % of its step
    /// (`|y_end − y(0)|`) around its final value [s].
    settling_time: Vec<f64>,
    /// Largest excursion beyond the final value, as a fraction of the step.
    overshoot: Vec<f64>,
    /// Largest |u_i| along the run.
    peak_input: Vec<f64>,
    final_q: Vec<f64>,
    final_u: Vec<f64>,
    /// `‖q̇‖∞` at the end: small when the run has settled.
    final_speed: f64,
    predicted_rest: Predicted,
    /// `max |q_end − q_predicted|`.
    prediction_gap: f64,
    steps: usize,
    seconds: f64,
}

#[derive(Serialize)]
struct Predicted {
    /// `statics --hold` for the compensated law, the closed-loop rest shape for the baseline.
    source: &'static str,
    q: Vec<f64>,
    u: Vec<f64>,
    y: Vec<f64>,
}

fn summarise(reg: &Regulator, arm: &Arm, run: &Run, model: &Derived) -> Result<Summary, CliError> {
    let rows = &run.rows;
    let last = rows.last().expect("the end time is an output");
    let h = reg.outputs.len();
    let y_of = |r: &Row, c: usize| -> f64 { reg.s[c].iter().zip(&r.q).map(|(a, b)| a * b).sum() };
    let mut settling = Vec::with_capacity(h);
    let mut overshoot = Vec::with_capacity(h);
    for c in 0..h {
        let (y0, y1) = (y_of(&rows[0], c), y_of(last, c));
        let step = (y1 - y0).abs().max(1e-12);
        let band = 0.02 * step;
        let settled = rows
            .iter()
            .rposition(|r| (y_of(r, c) - y1).abs() > band)
            .map_or(0.0, |i| rows[(i + 1).min(rows.len() - 1)].t);
        settling.push(settled);
        let beyond = rows
            .iter()
            .map(|r| (y_of(r, c) - y1) * (y1 - y0).signum())
            .fold(0.0f64, f64::max);
        overshoot.push(beyond / step);
    }
    let k = arm.n_inputs();
    let peak_input = (0..k)
        .map(|i| rows.iter().map(|r| r.u[i].abs()).fold(0.0, f64::max))
        .collect();
    let opts = crate::statics::Options::default();
    let (source, rest) = match reg.law {
        Law::Compensated => (
            "statics --hold",
            hold(model, &reg.outputs, &reg.target, &opts),
        ),
        Law::Baseline => (
            "closed-loop rest shape",
            closed_loop_rest(model, reg, &opts),
        ),
    };
    let rest = rest.map_err(|e| {
        CliError::Failed(format!(
            "the {} regulator's rest shape could not be predicted: {e}",
            reg.law.name()
        ))
    })?;
    let gap = rest
        .q
        .iter()
        .zip(&last.q)
        .map(|(a, b)| (a - b).abs())
        .fold(0.0, f64::max);
    Ok(Summary {
        controller: reg.law.name(),
        controlled: reg.outputs.iter().map(|o| o.label(arm)).collect(),
        target: reg.target.clone(),
        final_y: (0..h).map(|c| y_of(last, c)).collect(),
        steady_state_error: (0..h).map(|c| reg.target[c] - y_of(last, c)).collect(),
        settling_time: settling,
        overshoot,
        peak_input,
        final_q: last.q.clone(),
        final_u: last.u.clone(),
        final_speed: last.qd.iter().map(|v| v.abs()).fold(0.0, f64::max),
        predicted_rest: Predicted {
            source,
            y: reg
                .s
                .iter()
                .map(|row| row.iter().zip(&rest.q).map(|(a, b)| a * b).sum())
                .collect(),
            q: rest.q,
            u: rest.u,
        },
        prediction_gap: gap,
        steps: run.stats.accepted,
        seconds: run.seconds,
    })
}

pub fn run(args: &SimulateArgs) -> Result<(), CliError> {
    let arm = load_arm_with(&args.arm, args.order, args.set.as_deref())?;
    let n = arm.n_coords();
    let k = arm.n_inputs();
    let q0 = match &args.q0 {
        Some(t) => parse_vector("q0", t, n)?,
        None => vec![0.0; n],
    };
    let qd0 = match &args.qd0 {
        Some(t) => parse_vector("qd0", t, n)?,
        None => vec![0.0; n],
    };
    let u = match &args.u {
        Some(t) => super::parse_inputs(&arm, t)?,
        None => vec![0.0; k],
    };
    let regs = regulators(args, &arm)?;
    let damped = arm.segments.iter().any(|seg| !seg.damping.is_zero());
    let method = match args.method {
        Method::Auto if damped || !regs.is_empty() => Method::Stiff,
        Method::Auto => Method::Explicit,
        m => m,
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
    // The regulators' predicted rest shapes need the statics derivatives.
    let model = if regs.is_empty() {
        derive(&arm)
    } else {
        derive_statics(&arm)
    };
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
    let y0: Vec<f64> = q0.iter().chain(&qd0).copied().collect();
    let span = Span {
        y0: &y0,
        duration,
        times: &times,
        opts: &opts,
        method,
    };
    let names = coordinate_names(&arm);
    let svg_path = out_dir.join("trajectory.svg");

    if regs.is_empty() {
        let run = simulate(&ev, &Drive::Constant(u.clone()), &span, "simulating")?;
        let csv_path = out_dir.join("trajectory.csv");
        super::write_file(&csv_path, &csv(&names, k, &run.rows))?;
        write_plot(&svg_path, &arm, &names, &run.rows, &ev, args.snapshots)
            .map_err(CliError::Failed)?;
        progress::wrote(&csv_path);
        progress::wrote(&svg_path);
        let text = open_loop_summary(&arm, &run, &u, duration, method, &csv_path, &svg_path);
        return if args.json {
            let last = run.rows.last().expect("the end time is an output");
            let value = serde_json::json!({
                "final_q": last.q, "final_qd": last.qd, "u": u, "tip_pose": last.tip,
                "steps": run.stats.accepted, "rejected": run.stats.rejected,
                "evaluations": run.stats.evaluations, "seconds": run.seconds,
            });
            super::print_stdout(&super::json::to_string(&value))
        } else {
            super::print_stdout(&text)
        };
    }

    let derived = Derived(Evaluator::new(&model));
    let mut runs = Vec::with_capacity(regs.len());
    for reg in &regs {
        let label = format!("{} regulator", reg.law.name());
        let run = simulate(&ev, &Drive::Regulated(reg), &span, &label)?;
        let summary = summarise(reg, &arm, &run, &derived)?;
        runs.push((run, summary));
    }
    let mut paths = Vec::new();
    for (reg, (run, _)) in regs.iter().zip(&runs) {
        let file = if regs.len() == 1 {
            "trajectory.csv".to_string()
        } else {
            format!("trajectory_{}.csv", reg.law.name())
        };
        let path = out_dir.join(file);
        super::write_file(&path, &csv(&names, k, &run.rows))?;
        paths.push(path);
    }
    let pairs: Vec<(&Regulator, &Run)> = regs.iter().zip(runs.iter().map(|(r, _)| r)).collect();
    write_closed_loop_plot(&svg_path, &arm, &pairs, &ev).map_err(CliError::Failed)?;
    for p in &paths {
        progress::wrote(p);
    }
    progress::wrote(&svg_path);
    let summaries: Vec<&Summary> = runs.iter().map(|(_, s)| s).collect();
    if args.json {
        let value =
            serde_json::to_value(&summaries).map_err(|e| CliError::Failed(e.to_string()))?;
        if let Some(path) = super::json::first_null(&value) {
            return Err(CliError::Failed(format!(
                "{path} of the summary is not a finite number"
            )));
        }
        super::print_stdout(&super::json::to_string(&value))
    } else {
        super::print_stdout(&closed_loop_text(
            &arm, &summaries, duration, &paths, &svg_path,
        ))
    }
}

fn open_loop_summary(
    arm: &Arm,
    run: &Run,
    u: &[f64],
    duration: f64,
    method: Method,
    csv_path: &Path,
    svg_path: &Path,
) -> String {
    let rows = &run.rows;
    let stats = run.stats;
    let mut s = String::new();
    let _ = writeln!(
        s,
        "{}, order {}: simulated {} s in {} steps ({} rejected, {} evaluations, {} method), {:.2} s of computing",
        progress::bold(&arm.name),
        arm.expansion_order,
        super::num(duration),
        stats.accepted,
        stats.rejected,
        stats.evaluations,
        match method {
            Method::Explicit => "explicit",
            _ => "stiff",
        },
        run.seconds
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
    s
}

fn closed_loop_text(
    arm: &Arm,
    summaries: &[&Summary],
    duration: f64,
    csv: &[PathBuf],
    svg: &Path,
) -> String {
    let num = super::num;
    let list = |v: &[f64], f: &dyn Fn(f64) -> String| {
        v.iter().map(|x| f(*x)).collect::<Vec<_>>().join(", ")
    };
    let mut s = String::new();
    let _ = writeln!(
        s,
        "{}, order {}: {} s in closed loop, controlled {} → target [{}]",
        progress::bold(&arm.name),
        arm.expansion_order,
        num(duration),
        summaries[0].controlled.join(", "),
        list(&summaries[0].target, &|x| num(x))
    );
    for m in summaries {
        let _ = writeln!(
            s,
            "\n{}",
            progress::bold(&format!("{} regulator", m.controller))
        );
        let _ = writeln!(
            s,
            "  final y              [{}]",
            list(&m.final_y, &|x| format!("{x:.6}"))
        );
        let _ = writeln!(
            s,
            "  steady-state error   [{}]",
            list(&m.steady_state_error, &|x| format!("{x:.3e}"))
        );
        let _ = writeln!(
            s,
            "  settling time (2 %)  [{}] s",
            list(&m.settling_time, &|x| format!("{x:.3}"))
        );
        let _ = writeln!(
            s,
            "  overshoot            [{}] %",
            list(&m.overshoot, &|x| format!("{:.1}", 100.0 * x))
        );
        let _ = writeln!(
            s,
            "  peak input           [{}]",
            list(&m.peak_input, &|x| format!("{x:.4}"))
        );
        let _ = writeln!(
            s,
            "  predicted rest ({}): y = [{}], reached within {:.2e} (final speed {:.1e})",
            m.predicted_rest.source,
            list(&m.predicted_rest.y, &|x| format!("{x:.6}")),
            m.prediction_gap,
            m.final_speed
        );
        let _ = writeln!(s, "  {} steps, {:.2} s of computing", m.steps, m.seconds);
    }
    let files: Vec<String> = csv.iter().map(|p| p.display().to_string()).collect();
    let _ = writeln!(s, "\ntrajectory: {}, {}", files.join(", "), svg.display());
    s
}

/// `q1_0, q1_1, …`: segment (1-based) and curvature coefficient.
fn coordinate_names(arm: &crate::arm::Arm) -> Vec<String> {
    arm.coordinate_labels()
        .into_iter()
        .map(|l| format!("q{l}"))
        .collect()
}

fn csv(names: &[String], inputs: usize, rows: &[Row]) -> String {
    let mut s = String::from("t");
    for q in names {
        let _ = write!(s, ",{q}");
    }
    for q in names {
        let _ = write!(s, ",qd{}", &q[1..]);
    }
    s.push_str(",tip_x,tip_y,tip_angle,kinetic_energy,potential_energy,total_energy");
    for i in 0..inputs {
        let _ = write!(s, ",u{}", i + 1);
    }
    s.push('\n');
    for r in rows {
        s.push_str(&super::num(r.t));
        let energies = [r.kinetic, r.potential, r.kinetic + r.potential];
        for v in
            r.q.iter()
                .chain(&r.qd)
                .chain(&r.tip)
                .chain(&energies)
                .chain(&r.u)
        {
            s.push(',');
            s.push_str(&super::num(*v));
        }
        s.push('\n');
    }
    s
}

/// The backbone at `q`, base to tip.
fn backbone(ev: &Evaluator, arm: &Arm, q: &[f64]) -> Vec<(f64, f64)> {
    let mut pts = vec![(0.0, 0.0)];
    for j in 0..arm.segments.len() {
        for s in 1..=24 {
            let p = ev.pose(q, j, s as f64 / 24.0);
            pts.push((p[0], p[1]));
        }
    }
    pts
}

fn write_plot(
    path: &Path,
    arm: &Arm,
    names: &[String],
    rows: &[Row],
    ev: &Evaluator,
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
        let pts = backbone(ev, arm, &r.q);
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

/// One picture of closed-loop runs: backbones, controlled coordinates against the
/// target, inputs.
fn write_closed_loop_plot(
    path: &Path,
    arm: &Arm,
    runs: &[(&Regulator, &Run)],
    ev: &Evaluator,
) -> Result<(), String> {
    let mut shapes = Vec::new();
    let first = &runs[0].1.rows[0];
    shapes.push(
        Line::new(
            Some("start".into()),
            backbone(ev, arm, &first.q),
            plot::colour(7),
        )
        .width(1),
    );
    let mut coords = Vec::new();
    let mut inputs = Vec::new();
    let (t0, t1) = (first.t, runs[0].1.rows.last().map_or(0.0, |r| r.t));
    let reg0 = runs[0].0;
    for (c, target) in reg0.target.iter().enumerate() {
        coords.push(
            Line::new(
                Some(format!("target {}", reg0.outputs[c].label(arm))),
                vec![(t0, *target), (t1, *target)],
                plot::colour(7),
            )
            .width(1),
        );
    }
    for (r, (reg, run)) in runs.iter().enumerate() {
        let law = reg.law.name();
        let last = run.rows.last().expect("the end time is an output");
        shapes.push(Line::new(
            Some(format!("{law}, t = {} s", super::num(last.t))),
            backbone(ev, arm, &last.q),
            plot::colour(r),
        ));
        for (c, (out, srow)) in reg.outputs.iter().zip(&reg.s).enumerate() {
            coords.push(
                Line::new(
                    Some(format!("{law} {}", out.label(arm))),
                    run.rows
                        .iter()
                        .map(|row| (row.t, srow.iter().zip(&row.q).map(|(a, b)| a * b).sum()))
                        .collect(),
                    plot::colour(r + 2 * c),
                )
                .width(if c == 0 { 2 } else { 1 }),
            );
        }
        for i in 0..arm.n_inputs() {
            inputs.push(
                Line::new(
                    Some(format!("{law} u{}", i + 1)),
                    run.rows.iter().map(|row| (row.t, row.u[i])).collect(),
                    plot::colour(r + 2 * i),
                )
                .width(if r == 0 { 1 } else { 2 }),
            );
        }
    }
    let panels = [
        Panel {
            title: format!("{}: start and final backbones", arm.name),
            x_label: "x [m]".into(),
            y_label: "y [m]".into(),
            axes: Axes::Equal,
            integer_x: false,
            lines: shapes,
            gravity: Some(arm.gravity_f64()),
        },
        Panel {
            title: "controlled coordinates against the target".into(),
            x_label: "t [s]".into(),
            y_label: "y [1/m]".into(),
            axes: Axes::Linear,
            integer_x: false,
            lines: coords,
            gravity: None,
        },
        Panel {
            title: "inputs".into(),
            x_label: "t [s]".into(),
            y_label: "u [N, N m]".into(),
            axes: Axes::Linear,
            integer_x: false,
            lines: inputs,
            gravity: None,
        },
    ];
    plot::write_svg(path, &panels, 3, (1500, 480))
}
