//! `arcwright identify`: the arm's density, rotary inertia, stiffness and damping
//! scales and its payload, fitted to measured rest shapes and logged motion.

use super::plot::Panel;
use super::CliError;
use crate::arm::parse_arm_str;
use crate::arm::{apply_overrides, Override};
use crate::identify::data::{read_motion, read_rest_shapes};
use crate::identify::{all_unknowns, fit, parse_fit, regression, Fit, Unknown};
use crate::params::{ParamKind, ParamLayout};
use clap::Args;
use serde_json::json;
use std::fmt::Write as _;
use std::path::PathBuf;

/// Fit the arm's parameters to measurements: rest shapes under known inputs
/// (--static) and logged motion (--dynamic). Columns as in simulate's CSV: t, q1_0, …,
/// optionally qd1_0, … and qdd1_0, …, and u1, … (other columns are ignored). Gravity is
/// taken from the arm file. Prints the fitted values with standard errors, what the
/// data cannot determine and which experiment would, the condition number and the
/// residuals before and after; --out writes the arm file with the fitted values,
/// --plot measured against predicted generalized forces.
#[derive(Args, Debug)]
#[command(
    after_help = "Examples:\n  arcwright identify arm.toml --static poses.csv\n  \
                  arcwright identify arm.toml --static poses.csv --dynamic log.csv --out fitted.toml\n  \
                  arcwright identify arm.toml --static poses.csv --fit bending_stiffness,payload.mass --json"
)]
pub struct IdentifyArgs {
    /// Arm file (TOML): the model, and the values of what is not fitted.
    arm: PathBuf,
    /// Measured rest shapes: one row per shape, columns q… and u….
    #[arg(long = "static", value_name = "CSV")]
    rest: Option<PathBuf>,
    /// A logged motion: rows at uniform time steps, columns t, q…, u… (qd…, qdd…
    /// optional).
    #[arg(long, value_name = "CSV")]
    dynamic: Option<PathBuf>,
    /// What to fit, comma-separated: segment[j].density, segment[j].rotary_inertia,
    /// segment[j].bending_stiffness, segment[j].damping, payload.mass,
    /// payload.rotary_inertia, or a field alone for every segment, or payload (default:
    /// everything the data can carry: rest shapes alone say nothing of rotary inertia
    /// and damping).
    #[arg(long, value_name = "LIST")]
    fit: Option<String>,
    /// Write the arm file with the fitted values here (a new file: an existing one is
    /// replaced only with --force, and never the arm file itself).
    #[arg(long, value_name = "FILE")]
    out: Option<PathBuf>,
    /// Replace an existing --out or --plot file.
    #[arg(long)]
    force: bool,
    /// Plot measured against predicted generalized forces (SVG).
    #[arg(long, value_name = "SVG")]
    plot: Option<PathBuf>,
    /// Samples of the smoothing differentiator's window (odd, at least 5).
    #[arg(long, default_value_t = 9)]
    window: usize,
    /// Expansion order N, overriding the arm file.
    #[arg(long)]
    order: Option<u32>,
    /// Print JSON instead of a table.
    #[arg(long)]
    json: bool,
}

/// What a parameter's value means, for the table.
fn unit(u: &Unknown) -> &'static str {
    match u.kind {
        _ if u.is_scale() => "x arm file",
        ParamKind::PayloadMass => "kg",
        _ => "kg m^2",
    }
}

pub fn run(args: &IdentifyArgs) -> Result<(), CliError> {
    if args.rest.is_none() && args.dynamic.is_none() {
        return Err(CliError::Input(
            "identify needs data: --static CSV (rest shapes), --dynamic CSV (a logged \
             motion), or both"
                .into(),
        ));
    }
    if args.window < 5 || args.window.is_multiple_of(2) {
        return Err(CliError::Input(format!(
            "--window {}: an odd number of samples, at least 5",
            args.window
        )));
    }
    let arm = super::arm_input::load_arm(&args.arm, args.order)?;
    let text = crate::arm::read_arm_text(&args.arm).map_err(|e| CliError::Input(e.to_string()))?;
    for (what, path) in [("--out", &args.out), ("--plot", &args.plot)] {
        let Some(path) = path else { continue };
        if same_file(path, &args.arm) {
            return Err(CliError::Input(format!(
                "{what} {}: that is the arm file; write the result to a new file",
                path.display()
            )));
        }
        if path.exists() && !args.force {
            return Err(CliError::Input(format!(
                "{what} {}: exists (give --force to replace it)",
                path.display()
            )));
        }
    }
    let mut observations = Vec::new();
    if let Some(p) = &args.rest {
        observations.extend(read_rest_shapes(p, &arm).map_err(CliError::Input)?);
    }
    if let Some(p) = &args.dynamic {
        observations.extend(read_motion(p, &arm, args.window / 2).map_err(CliError::Input)?);
    }
    let wanted = match &args.fit {
        Some(list) => parse_fit(list, &arm).map_err(CliError::Input)?,
        None if args.dynamic.is_some() => all_unknowns(&arm),
        None => all_unknowns(&arm)
            .into_iter()
            .filter(|u| {
                matches!(
                    u.kind,
                    ParamKind::DensityScale | ParamKind::StiffnessScale | ParamKind::PayloadMass
                )
            })
            .collect(),
    };
    let rows = observations.len() * arm.n_coords();
    if rows < wanted.len() + 1 {
        return Err(CliError::Input(format!(
            "{} measurement(s) give {rows} equations for {} parameters: too few rows",
            observations.len(),
            wanted.len()
        )));
    }
    let model = crate::derive::derive_emitted(&arm);
    let reg = regression(&model, &observations).map_err(CliError::Failed)?;
    let result = fit(&arm, &reg, &wanted).map_err(CliError::Failed)?;
    // Everything is computed before anything is written.
    let fitted_text = match &args.out {
        Some(_) => Some(fitted_arm(&arm, &text, &result, args)?),
        None => None,
    };
    let svg = match &args.plot {
        Some(_) => Some(parity_plot(&arm, &reg, &result).map_err(CliError::Failed)?),
        None => None,
    };
    if let (Some(path), Some(t)) = (&args.out, &fitted_text) {
        super::write_file(path, t)?;
    }
    if let (Some(path), Some(s)) = (&args.plot, &svg) {
        super::write_file(path, s)?;
    }
    let layout = ParamLayout::of(&arm);
    let defaults = layout.defaults_f64(&arm);
    if args.json {
        let out = json!({
            "arm": args.arm.display().to_string(),
            "observations": observations.len(),
            "equations": rows,
            "fitted": result.fitted.iter().map(|(u, v, se)| json!({
                "name": u.name(),
                "unit": unit(u),
                "arm_file": defaults[layout.index(u.kind, u.segment)],
                "value": v,
                "standard_error": se,
            })).collect::<Vec<_>>(),
            "not_identified": result.not_identified.iter().map(|m| json!({
                "name": m.unknown.name(),
                "reason": m.reason,
                "would_need": m.advice,
            })).collect::<Vec<_>>(),
            "condition_number": result.condition,
            "residual_before": result.residual_before,
            "residual_after": result.residual_after,
            "outliers": result.outliers.iter().map(|&r| json!({
                "at": observations[reg.observation[r]].origin,
                "coordinate": arm.coordinate_labels()[reg.coordinate[r]],
            })).collect::<Vec<_>>(),
            "fitted_arm": args.out.as_ref().map(|p| p.display().to_string()),
            "plot": args.plot.as_ref().map(|p| p.display().to_string()),
        });
        println!("{}", super::json::to_string(&out));
        return Ok(());
    }
    let mut s = String::new();
    let _ = writeln!(
        s,
        "{}: {} measurement(s), {rows} equations; gravity ({}, {}) m/s^2 from the arm file",
        args.arm.display(),
        observations.len(),
        super::num(arm.gravity_f64().0),
        super::num(arm.gravity_f64().1)
    );
    let _ = writeln!(
        s,
        "\n  {:<30} {:>14} {:>14} {:>12}  unit",
        "parameter", "arm file", "fitted", "std. error"
    );
    for (u, v, se) in &result.fitted {
        let _ = writeln!(
            s,
            "  {:<30} {:>14} {:>14} {:>12}  {}",
            u.name(),
            short(defaults[layout.index(u.kind, u.segment)]),
            short(*v),
            short(*se),
            unit(u)
        );
    }
    if !result.not_identified.is_empty() {
        let _ = writeln!(
            s,
            "\nnot determined by this data (kept at the arm file's value; the values above \
             assume it):"
        );
        for m in &result.not_identified {
            let _ = writeln!(
                s,
                "  {}: {}\n    would need {}",
                m.unknown.name(),
                m.reason,
                m.advice
            );
        }
    }
    let _ = writeln!(
        s,
        "\ncondition number {} (of the weighted regressor, columns scaled to one)",
        short(result.condition)
    );
    let _ = writeln!(
        s,
        "residual, relative to the measured forces (RMS): {} at the arm file's values, {} fitted",
        short(result.residual_before),
        short(result.residual_after)
    );
    if !result.outliers.is_empty() {
        let labels = arm.coordinate_labels();
        let shown: Vec<String> = result
            .outliers
            .iter()
            .take(5)
            .map(|&r| {
                format!(
                    "{} ({})",
                    observations[reg.observation[r]].origin, labels[reg.coordinate[r]]
                )
            })
            .collect();
        let more = result.outliers.len().saturating_sub(5);
        let _ = writeln!(
            s,
            "{} equation(s) down-weighted as outliers (Huber weight below 1/2): {}{}",
            result.outliers.len(),
            shown.join(", "),
            if more > 0 {
                format!(" and {more} more")
            } else {
                String::new()
            }
        );
    }
    if let Some(p) = &args.out {
        let _ = writeln!(s, "fitted arm file: {}", p.display());
    }
    if let Some(p) = &args.plot {
        let _ = writeln!(s, "plot: {}", p.display());
    }
    print!("{s}");
    Ok(())
}

/// Four significant digits.
fn short(v: f64) -> String {
    if v == 0.0 {
        return "0".into();
    }
    if !v.is_finite() {
        return format!("{v}");
    }
    let a = v.abs();
    if (1e-3..1e5).contains(&a) {
        let digits = (3 - a.log10().floor() as i32).max(0) as usize;
        format!("{v:.digits$}")
    } else {
        format!("{v:.3e}")
    }
}

fn same_file(a: &std::path::Path, b: &std::path::Path) -> bool {
    match (std::fs::canonicalize(a), std::fs::canonicalize(b)) {
        (Ok(x), Ok(y)) => x == y,
        _ => false,
    }
}

/// A number for the arm file: ten significant digits, the shortest text of them.
fn toml_number(v: f64) -> String {
    let rounded: f64 = format!("{v:.9e}").parse().unwrap_or(v);
    let s = format!("{rounded:?}");
    if s.contains('e') && !s.contains('.') {
        s.replace('e', ".0e")
    } else {
        s
    }
}

/// The arm file with the fitted values written in (its layout and comments kept),
/// read back through the parser so that `generate` accepts it.
fn fitted_arm(
    arm: &crate::arm::Arm,
    text: &str,
    result: &Fit,
    args: &IdentifyArgs,
) -> Result<String, CliError> {
    use num_traits::ToPrimitive;
    let mut overrides = Vec::new();
    for (u, v, _) in &result.fitted {
        let bad = |what: &str| {
            CliError::Failed(format!(
                "the fitted {} is {} ({what}): nothing written; check the data or fix it \
                 with --fit",
                u.name(),
                short(*v)
            ))
        };
        let values: Vec<String> = if !u.is_scale() {
            if *v < 0.0 {
                return Err(bad("negative"));
            }
            vec![toml_number(*v)]
        } else {
            if !(*v > 0.0) {
                return Err(bad("a scale must be positive"));
            }
            let seg = &arm.segments[u.segment];
            let poly = match u.kind {
                ParamKind::DensityScale => &seg.density,
                ParamKind::RotaryInertiaScale => &seg.rotary_inertia,
                ParamKind::StiffnessScale => &seg.bending_stiffness,
                _ => &seg.damping,
            };
            poly.coeffs
                .iter()
                .map(|c| toml_number(c.to_f64().unwrap_or(f64::NAN) * v))
                .collect()
        };
        overrides.push(Override {
            path: u.name(),
            values,
        });
    }
    let mut out = if overrides.is_empty() {
        text.to_string()
    } else {
        apply_overrides(text, &overrides).map_err(CliError::Failed)?
    };
    let mut files: Vec<String> = Vec::new();
    if let Some(p) = &args.rest {
        files.push(p.display().to_string());
    }
    if let Some(p) = &args.dynamic {
        files.push(p.display().to_string());
    }
    let mut head = format!(
        "# Fitted by `arcwright identify` to {} (gravity as in the arm file):\n",
        files.join(" and ")
    );
    for (u, v, se) in &result.fitted {
        let _ = writeln!(
            head,
            "#   {} {} ± {} {}",
            u.name(),
            short(*v),
            short(*se),
            unit(u)
        );
    }
    for m in &result.not_identified {
        let _ = writeln!(head, "#   {} not determined: kept", m.unknown.name());
    }
    out.insert_str(0, &head);
    parse_arm_str(&out, "the fitted arm file").map_err(|e| {
        CliError::Failed(format!(
            "the fitted values make an invalid arm file ({e}): nothing written"
        ))
    })?;
    Ok(out)
}

/// Measured (`A u`) against predicted generalized force, one panel per coordinate,
/// at the arm file's values and fitted, with the line of perfect agreement.
fn parity_plot(
    arm: &crate::arm::Arm,
    reg: &crate::identify::Regression,
    result: &Fit,
) -> Result<String, String> {
    use super::plot::{colour, Axes, Line};
    let labels = arm.coordinate_labels();
    let n = arm.n_coords();
    let mut panels = Vec::new();
    for (i, label) in labels.iter().enumerate() {
        let pick = |pred: &[f64]| -> Vec<(f64, f64)> {
            (0..reg.measured.len())
                .filter(|&r| reg.coordinate[r] == i)
                .map(|r| (reg.measured[r], pred[r]))
                .collect()
        };
        let before = pick(&result.predicted_before);
        let after = pick(&result.predicted_after);
        let (lo, hi) = before
            .iter()
            .chain(&after)
            .flat_map(|(a, b)| [*a, *b])
            .fold((f64::INFINITY, f64::NEG_INFINITY), |(l, h), v| {
                (l.min(v), h.max(v))
            });
        let (lo, hi) = if lo < hi {
            (lo, hi)
        } else {
            (lo - 1.0, hi + 1.0)
        };
        panels.push(Panel {
            title: format!("coordinate {label}"),
            x_label: "measured A u".into(),
            y_label: "predicted".into(),
            axes: Axes::Linear,
            integer_x: false,
            lines: vec![
                Line::new(None, vec![(lo, lo), (hi, hi)], colour(7)).width(1),
                Line::new(Some("arm file".into()), before, colour(1))
                    .width(0)
                    .markers(),
                Line::new(Some("fitted".into()), after, colour(0))
                    .width(0)
                    .markers(),
            ],
            gravity: None,
        });
    }
    let cols = n.clamp(1, 3);
    let rows = n.div_ceil(cols);
    super::plot::render_svg(&panels, cols, (420 * cols as u32, 340 * rows as u32))
}
