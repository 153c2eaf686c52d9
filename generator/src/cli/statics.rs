//! `arcwright statics`: the shape the arm rests in under given inputs and gravity.

use super::eval::load_arm;
use super::{parse_inputs, progress, CliError};
use crate::derive::derive_statics;
use crate::evaluate::Evaluator;
use crate::reference::{Kinematics, Reference};
use crate::statics::{equilibrium, Derived, Options, Quadrature, StaticModel, StaticsError};
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
#[derive(Args, Debug)]
#[command(
    allow_negative_numbers = true,
    after_help = "Examples:\n  arcwright statics examples/reach_arm.toml --u \"0.5,0,0,0\"\n  \
                  arcwright statics examples/hanging_taper.toml --exact --json"
)]
pub struct StaticsArgs {
    /// Arm file (TOML).
    arm: PathBuf,
    /// Inputs u, one per column of A (default zero: gravity alone).
    #[arg(long, allow_hyphen_values = true)]
    u: Option<String>,
    /// Expansion order N, overriding the arm file.
    #[arg(long, conflicts_with = "exact")]
    order: Option<u32>,
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
    let arm = load_arm(&args.arm, args.order)?;
    let u = match &args.u {
        Some(t) => parse_inputs(&arm, t)?,
        None => vec![0.0; arm.n_inputs()],
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
        ("exact".to_string(), solve(&model, &u, &opts))
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
            solve(&model, &u, &opts),
        )
    };
    bar.finish_and_clear();
    let eq = result?;
    let out = StaticsOut {
        arm: arm.name.clone(),
        kinematics,
        labels: arm.coordinate_labels(),
        q: eq.q,
        u,
        tip_pose: eq.tip_pose,
        residual: eq.residual,
        relative_residual: eq.relative_residual,
        iterations: eq.iterations,
        load_steps: eq.load_steps,
        min_eigenvalue: eq.min_eigenvalue,
        stable: eq.stable,
    };
    let value = serde_json::to_value(&out).map_err(|e| CliError::Failed(e.to_string()))?;
    if let Some(path) = super::json::first_null(&value) {
        return Err(CliError::Failed(format!(
            "{path} of the equilibrium is not a finite number"
        )));
    }
    if args.json {
        super::print_stdout(&super::json::to_string(&value))
    } else {
        super::print_stdout(&table(&out))
    }
}

fn solve(
    model: &dyn StaticModel,
    u: &[f64],
    opts: &Options,
) -> Result<crate::statics::Equilibrium, CliError> {
    equilibrium(model, u, opts).map_err(|e| match e {
        StaticsError::BadInput(m) => CliError::Input(m),
        other => CliError::Failed(other.to_string()),
    })
}

fn table(o: &StaticsOut) -> String {
    let num = super::num;
    let mut s = String::new();
    let u: Vec<String> = o.u.iter().map(|v| num(*v)).collect();
    let _ = writeln!(
        s,
        "{} at rest under u = [{}] ({} model)\n",
        progress::bold(&o.arm),
        u.join(", "),
        o.kinematics
    );
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
        "{} (smallest eigenvalue of the Jacobian K + ∂G/∂q − ∂(A u)/∂q: {:.3e})",
        if o.stable {
            "stable: a minimum of the potential energy"
        } else {
            "UNSTABLE: not a minimum of the potential energy; a small disturbance moves the arm away"
        },
        o.min_eigenvalue
    );
    s
}
