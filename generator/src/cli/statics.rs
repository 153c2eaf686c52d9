//! `arcwright statics`: the shape the arm rests in under given inputs and gravity.

use super::arm_input::load_arm_with;
use super::{parse_inputs, progress, CliError};
use crate::control::{hold, reach_tip, ControlError, Output, Rest};
use crate::derive::derive_statics;
use crate::evaluate::Evaluator;
use crate::reference::{Kinematics, Reference};
use crate::statics::{
    equilibrium, order_advice, Derived, Options, Quadrature, StaticModel, StaticsError,
};
use clap::Args;
use serde::Serialize;
use std::fmt::Write as _;
use std::path::PathBuf;

/// The equilibrium K q + G(q) = A(q) u the arm reaches when the inputs and gravity are
/// applied slowly.
///
/// Damped Newton with the exact Jacobian K + ∂G/∂q − ∂(A u)/∂q and load continuation
/// from the straight rest shape. Prints q, the tip pose, the residual, the iterations
/// and whether the equilibrium is stable (the smallest eigenvalue of the Jacobian).
/// By default the derived model of the file's order (or --order); --exact solves the
/// untruncated kinematics by quadrature, with difference derivatives. Exit 1 when no
/// equilibrium is found, with the last residual.
///
/// --hold fixes named coordinates and solves for the others and for the inputs that
/// keep them there (the rest shape under the compensated regulator); --tip finds held
/// values of the controlled coordinates (--control, default each segment's constant
/// curvature) that put the tip at a point. Inputs stay within the arm file's limits
/// (tendons pull only); a shape the limits cannot hold is exit 2 with the shortfall.
#[derive(Args, Debug)]
#[command(
    allow_negative_numbers = true,
    after_help = "Examples:\n  arcwright statics examples/reach_arm.toml --u \"0.5,0,0,0\"\n  \
                  arcwright statics examples/reach_arm.toml --hold \"1_0=4,2_0=-3\"\n  \
                  arcwright statics examples/reach_arm.toml --tip \"0.15,0.12\" --json\n  \
                  arcwright statics examples/hanging_taper.toml --exact --json"
)]
pub struct StaticsArgs {
    /// Arm file (TOML).
    arm: PathBuf,
    /// Inputs u, one per column of A (default zero: gravity alone).
    #[arg(long, allow_hyphen_values = true, conflicts_with_all = ["hold", "tip"])]
    u: Option<String>,
    /// Hold outputs at values, "1_0=4,2_mean=-3" (coordinate labels as in simulate's
    /// CSV, or a segment's mean curvature j_mean), and solve for the rest of the shape
    /// and the inputs.
    #[arg(long, allow_hyphen_values = true, conflicts_with = "tip")]
    hold: Option<String>,
    /// Put the tip at "x,y" [m] by holding the controlled coordinates.
    #[arg(long, allow_hyphen_values = true)]
    tip: Option<String>,
    /// The outputs --tip holds, "1_0,2_mean" (default: each segment's mean curvature,
    /// its constant curvature 1_0 for a segment of degree 0).
    #[arg(long, requires = "tip")]
    control: Option<String>,
    /// Expansion order N, overriding the arm file.
    #[arg(long, conflicts_with = "exact")]
    order: Option<u32>,
    /// Change named numbers of the arm file for this run, without editing it:
    /// "payload.mass=0.05,gravity=0,-9.81,segment[2].bending_stiffness=0.01".
    #[arg(long, value_name = "FIELD=VALUE,…", allow_hyphen_values = true)]
    set: Option<String>,
    /// Solve the untruncated kinematics (quadrature reference) instead.
    #[arg(long)]
    exact: bool,
    /// Converged when the residual is at most this fraction of ‖K q‖ + ‖G‖ + ‖A u‖.
    #[arg(long, default_value_t = 1e-12)]
    tolerance: f64,
    /// Print JSON instead of a table.
    #[arg(long)]
    json: bool,
}

#[derive(Serialize)]
struct StaticsOut {
    arm: String,
    kinematics: String,
    /// "inputs" (u given), "hold" or "tip".
    mode: &'static str,
    /// The held coordinates and their values (hold and tip).
    #[serde(skip_serializing_if = "Vec::is_empty")]
    held: Vec<(String, f64)>,
    /// Inputs at a limit of the arm file (hold and tip).
    #[serde(skip_serializing_if = "Vec::is_empty")]
    at_limit: Vec<bool>,
    labels: Vec<String>,
    q: Vec<f64>,
    u: Vec<f64>,
    tip_pose: [f64; 3],
    residual: f64,
    relative_residual: f64,
    iterations: usize,
    load_steps: usize,
    min_eigenvalue: f64,
    stable: bool,
}

pub fn run(args: &StaticsArgs) -> Result<(), CliError> {
    let arm = load_arm_with(&args.arm, args.order, args.set.as_deref())?;
    let u = match &args.u {
        Some(t) => parse_inputs(&arm, t)?,
        None => vec![0.0; arm.n_inputs()],
    };
    let goal = match (&args.hold, &args.tip) {
        (Some(h), _) => Goal::Hold(super::parse_assignments("hold", &arm, h)?),
        (None, Some(t)) => {
            let p = super::parse_vector("tip", t, 2)?;
            let controlled = match &args.control {
                Some(c) => super::parse_outputs("control", &arm, c)?,
                None => crate::control::default_outputs(&arm),
            };
            Goal::Tip([p[0], p[1]], controlled)
        }
        (None, None) => Goal::Inputs(u),
    };
    if !(args.tolerance > 0.0 && args.tolerance < 1.0) {
        return Err(CliError::Input(format!(
            "--tolerance: must be in (0, 1), got {}",
            args.tolerance
        )));
    }
    let opts = Options {
        tolerance: args.tolerance,
        ..Options::default()
    };
    let bar = progress::bar(1, "statics");
    let (kinematics, result) = if args.exact {
        bar.set_message("solving the exact kinematics (quadrature)");
        let model = Quadrature(Reference::new(&arm, Kinematics::Exact));
        ("exact".to_string(), solve(&model, &goal, &opts, false))
    } else {
        bar.set_message(format!(
            "deriving order {} with its statics",
            arm.expansion_order
        ));
        let derived = derive_statics(&arm);
        bar.set_message("solving");
        let model = Derived(Evaluator::new(&derived));
        (
            format!("order {}", arm.expansion_order),
            solve(&model, &goal, &opts, true),
        )
    };
    bar.finish_and_clear();
    let mut out = result?;
    out.arm = arm.name.clone();
    out.kinematics = kinematics;
    let value = serde_json::to_value(&out).map_err(|e| CliError::Failed(e.to_string()))?;
    if let Some(path) = super::json::first_null(&value) {
        return Err(CliError::Failed(format!(
            "{path} of the equilibrium is not a finite number"
        )));
    }
    if args.json {
        super::print_stdout(&super::json::to_string(&value))
    } else {
        super::print_stdout(&table(&arm, &out))
    }
}

/// What the user asked for.
enum Goal {
    Inputs(Vec<f64>),
    Hold(Vec<(Output, f64)>),
    Tip([f64; 2], Vec<Output>),
}

/// `truncated`: the model is the arm's order-`N` expansion, so that an equilibrium it
/// cannot reach gets [`order_advice`] when the exact kinematics do rest.
fn solve(
    model: &dyn StaticModel,
    goal: &Goal,
    opts: &Options,
    truncated: bool,
) -> Result<StaticsOut, CliError> {
    let arm = model.arm();
    let labels = arm.coordinate_labels();
    let failed = |e: ControlError| match e {
        ControlError::Statics(StaticsError::BadInput(m)) => CliError::Input(m),
        ControlError::Statics(other) => CliError::Failed(other.to_string()),
        other => CliError::Input(other.to_string()),
    };
    let from_rest = |mode, outputs: &[Output], values: &[f64], r: Rest| StaticsOut {
        arm: String::new(),
        kinematics: String::new(),
        mode,
        held: outputs
            .iter()
            .zip(values)
            .map(|(o, v)| (o.label(arm), *v))
            .collect(),
        at_limit: r.at_limit,
        labels: labels.clone(),
        q: r.q,
        u: r.u,
        tip_pose: r.tip_pose,
        residual: r.residual,
        relative_residual: r.relative_residual,
        iterations: r.iterations,
        load_steps: r.load_steps,
        min_eigenvalue: r.min_eigenvalue,
        stable: r.stable,
    };
    match goal {
        Goal::Inputs(u) => {
            let eq = equilibrium(model, u, opts).map_err(|e| match e {
                StaticsError::NotConverged { .. } if truncated => {
                    match order_advice(arm, u, opts) {
                        Some(advice) => CliError::Failed(format!(
                            "{e}: {}",
                            advice.sentence(arm.expansion_order)
                        )),
                        None => failed(e.into()),
                    }
                }
                e => failed(e.into()),
            })?;
            Ok(StaticsOut {
                arm: String::new(),
                kinematics: String::new(),
                mode: "inputs",
                held: Vec::new(),
                at_limit: Vec::new(),
                labels: labels.clone(),
                q: eq.q,
                u: u.clone(),
                tip_pose: eq.tip_pose,
                residual: eq.residual,
                relative_residual: eq.relative_residual,
                iterations: eq.iterations,
                load_steps: eq.load_steps,
                min_eigenvalue: eq.min_eigenvalue,
                stable: eq.stable,
            })
        }
        Goal::Hold(held) => {
            let (outputs, values): (Vec<Output>, Vec<f64>) = held.iter().copied().unzip();
            let r = hold(model, &outputs, &values, opts).map_err(failed)?;
            Ok(from_rest("hold", &outputs, &values, r))
        }
        Goal::Tip(p, controlled) => {
            let s = reach_tip(model, controlled, *p, opts).map_err(failed)?;
            Ok(from_rest("tip", controlled, &s.held, s.rest))
        }
    }
}

fn table(arm: &crate::arm::Arm, o: &StaticsOut) -> String {
    let num = super::num;
    let mut s = String::new();
    let u: Vec<String> = o.u.iter().map(|v| num(*v)).collect();
    if o.held.is_empty() {
        let _ = writeln!(
            s,
            "{} at rest under u = [{}] ({} model)\n",
            progress::bold(&o.arm),
            u.join(", "),
            o.kinematics
        );
    } else {
        let held: Vec<String> = o
            .held
            .iter()
            .map(|(l, v)| format!("{l} = {}", num(*v)))
            .collect();
        let _ = writeln!(
            s,
            "{} held at {} ({} model)\n",
            progress::bold(&o.arm),
            held.join(", "),
            o.kinematics
        );
        let _ = writeln!(s, "{}", progress::bold("input                      u"));
        for (i, v) in o.u.iter().enumerate() {
            let _ = writeln!(
                s,
                "{:<22} {v:>14.8e}{}",
                arm.input_name(i),
                if o.at_limit[i] { "  at its limit" } else { "" }
            );
        }
        s.push('\n');
    }
    let _ = writeln!(s, "{}", progress::bold("coordinate   q [1/m]"));
    for (l, q) in o.labels.iter().zip(&o.q) {
        let _ = writeln!(s, "{l:<12} {q:>14.8e}");
    }
    let _ = writeln!(
        s,
        "\ntip: x = {:.6} m, y = {:.6} m, angle = {:.6} rad",
        o.tip_pose[0], o.tip_pose[1], o.tip_pose[2]
    );
    let _ = writeln!(
        s,
        "residual {:.2e} (relative {:.2e}) after {} Newton iterations in {} load steps",
        o.residual, o.relative_residual, o.iterations, o.load_steps
    );
    let _ = writeln!(
        s,
        "{} (smallest eigenvalue of the Jacobian K + ∂G/∂q − ∂(A u)/∂q, inputs constant: {:.3e})",
        if o.stable {
            "stable: a minimum of the potential energy"
        } else {
            "UNSTABLE: not a minimum of the potential energy; a small disturbance moves the arm away"
        },
        o.min_eigenvalue
    );
    s
}
