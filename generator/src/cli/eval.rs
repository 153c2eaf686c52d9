//! `arcwright eval`: the model's numbers at one state, as JSON.

use super::arm_input::load_arm_with;
use super::{parse_vector, CliError};
use crate::derive::derive;
use crate::dynamics::forward_dynamics;
use crate::evaluate::Evaluator;
use crate::reference::{Kinematics, Reference};
use crate::terms::Terms;
use clap::Args;
use serde::Serialize;
use std::path::PathBuf;

/// Evaluate B, C, G, K, D, A, tip pose and Jacobian, energies and q̈ at one state.
///
/// By default the numbers come from the exactly derived model; --reference and --exact
/// evaluate the independent quadrature reference instead (of the truncated and of the
/// untruncated kinematics). Vectors are comma-separated, segment-major.
#[derive(Args, Debug)]
#[command(
    allow_negative_numbers = true,
    after_help = "Example:\n  arcwright eval examples/reach_arm.toml --q \"1,0,0,2,0,0\" --qd \"0,0,0,0.5,0,0\" --u \"0.2,0,0,0\""
)]
pub struct EvalArgs {
    /// Arm file (TOML).
    arm: PathBuf,
    /// Configuration q, n numbers.
    #[arg(long, allow_hyphen_values = true)]
    q: String,
    /// Velocity q̇, n numbers (default zero).
    #[arg(long, allow_hyphen_values = true)]
    qd: Option<String>,
    /// Inputs u, one per column of A (default zero).
    #[arg(long, allow_hyphen_values = true)]
    u: Option<String>,
    /// Expansion order N, overriding the arm file.
    #[arg(long)]
    order: Option<u32>,
    /// Change named numbers of the arm file for this run, without editing it:
    /// "payload.mass=0.05,gravity=0,-9.81,segment[2].bending_stiffness=0.01".
    #[arg(long, value_name = "FIELD=VALUE,…", allow_hyphen_values = true)]
    set: Option<String>,
    /// Evaluate the numeric quadrature reference of the same order instead.
    #[arg(long, conflicts_with = "exact")]
    reference: bool,
    /// Evaluate the untruncated kinematics by quadrature instead.
    #[arg(long)]
    exact: bool,
}

#[derive(Serialize)]
struct EvalOutput {
    #[serde(flatten)]
    terms: Terms,
    qdd: Vec<f64>,
}

pub fn run(args: &EvalArgs) -> Result<(), CliError> {
    let arm = load_arm_with(&args.arm, args.order, args.set.as_deref())?;
    let n = arm.n_coords();
    let q = parse_vector("q", &args.q, n)?;
    let qd = match &args.qd {
        Some(t) => parse_vector("qd", t, n)?,
        None => vec![0.0; n],
    };
    let u = match &args.u {
        Some(t) => super::parse_inputs(&arm, t)?,
        None => vec![0.0; arm.n_inputs()],
    };
    let reference = |kin| {
        let r = Reference::new(&arm, kin);
        r.check_configuration(&q)
            .map_err(|e| CliError::Input(format!("--q: {e}")))?;
        Ok::<_, CliError>(r.terms(&q, &qd))
    };
    let terms = if args.exact {
        reference(Kinematics::Exact)?
    } else if args.reference {
        reference(Kinematics::Truncated(arm.expansion_order))?
    } else {
        let model = derive(&arm);
        Evaluator::new(&model).terms(&q, &qd)
    };
    let qdd = forward_dynamics(&terms, &q, &qd, &u).map_err(|e| CliError::Failed(e.to_string()))?;
    let out = EvalOutput { terms, qdd };
    let value = serde_json::to_value(&out).map_err(|e| CliError::Failed(e.to_string()))?;
    if let Some(path) = super::json::first_null(&value) {
        return Err(CliError::Failed(format!(
            "{path} is not a finite number at this state: the state is beyond what double \
             precision can evaluate for this arm"
        )));
    }
    super::print_stdout(&super::json::to_string(&value))
}
