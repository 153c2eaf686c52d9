//! Identification of the runtime parameters from measurements: measured rest shapes
//! under known inputs, and logged motion.
//!
//! With gravity known, the equations of motion are linear in the parameters
//! ([`crate::params`]): `Σ_k θ_k τ_k(q, q̇, q̈) = A(q) u`, where `τ_k` is the
//! generalized force of the model with every parameter zero but `θ_k = 1`: column `k`
//! of the derived regressor ([`crate::derive::Model::regressor`], the one the emitted
//! code carries; no term of the model is free of a parameter). A rest
//! shape gives `τ_k = K_k q + G_k(q)`, a logged state the whole left-hand side. The fit
//! is weighted linear least squares over every coordinate of every observation:
//! each coordinate's equations are weighted by the inverse of their residual spread
//! (their units differ), and outliers are down-weighted by Huber's rule, iterated.
//! Parameters the data cannot determine are found before they are fitted to noise:
//! a regressor column that is zero (the quantity does not enter the data), a
//! direction of the column-scaled normal matrix with an eigenvalue ratio below
//! [`NULL_RATIO`] (parameters that act alike), and a standard error above half the
//! value. Those stay at the arm file's values and are reported with the experiment
//! that would determine them.

pub mod data;

use crate::arm::Arm;
use crate::derive::Model;
use crate::evaluate::Evaluator;
use crate::params::{ParamKind, ParamLayout};

/// One parameter to fit: a kind, and for the per-segment kinds the segment (0-based).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Unknown {
    pub kind: ParamKind,
    pub segment: usize,
}

impl Unknown {
    /// The arm file's name of the quantity it scales or sets: `segment[2].density`,
    /// `payload.mass` (segments counted from 1, as in the file and in `--set`).
    pub fn name(&self) -> String {
        let field = match self.kind {
            ParamKind::DensityScale => "density",
            ParamKind::RotaryInertiaScale => "rotary_inertia",
            ParamKind::StiffnessScale => "bending_stiffness",
            ParamKind::DampingScale => "damping",
            ParamKind::PayloadMass => return "payload.mass".into(),
            ParamKind::PayloadRotaryInertia => return "payload.rotary_inertia".into(),
            ParamKind::Gravity => return "gravity".into(),
        };
        format!("segment[{}].{field}", self.segment + 1)
    }

    /// Whether the fitted number is a factor on the arm file's profile (else the
    /// value itself, in SI units).
    pub fn is_scale(&self) -> bool {
        !matches!(
            self.kind,
            ParamKind::PayloadMass | ParamKind::PayloadRotaryInertia
        )
    }

    fn index(&self, layout: &ParamLayout) -> usize {
        layout.index(self.kind, self.segment)
    }

    /// What data determines this parameter, for the report of one that was not
    /// (`moving`: the data already holds a logged motion).
    fn advice(&self, moving: bool) -> String {
        let j = self.segment + 1;
        if moving
            && matches!(
                self.kind,
                ParamKind::RotaryInertiaScale
                    | ParamKind::DampingScale
                    | ParamKind::PayloadRotaryInertia
            )
        {
            return format!(
                "a logged motion with faster bending{} than this one: its rates and \
                 accelerations do not determine it",
                if self.kind == ParamKind::PayloadRotaryInertia {
                    " near the tip".to_string()
                } else {
                    format!(" of segment {j}")
                }
            );
        }
        match self.kind {
            ParamKind::DensityScale => format!(
                "rest shapes under loads that bend segment {j} in several directions \
                 against gravity, or a logged motion of it"
            ),
            ParamKind::RotaryInertiaScale => format!(
                "a logged motion (--dynamic) with fast bending of segment {j}: rotary \
                 inertia does not enter rest shapes, and it is small beside the mass"
            ),
            ParamKind::StiffnessScale => {
                format!("rest shapes (--static) under loads that bend segment {j}")
            }
            ParamKind::DampingScale => format!(
                "a logged motion (--dynamic) with bending rates of segment {j}: damping \
                 does not enter rest shapes"
            ),
            ParamKind::PayloadMass => {
                "rest shapes with the tip at several heights, or a logged motion".into()
            }
            ParamKind::PayloadRotaryInertia => {
                "a logged motion (--dynamic) that turns the tip quickly".into()
            }
            ParamKind::Gravity => "gravity is not identified; it is taken as known".into(),
        }
    }
}

/// Every parameter that can be fitted (all but gravity, which is taken as known).
pub fn all_unknowns(arm: &Arm) -> Vec<Unknown> {
    let s = arm.segments.len();
    let mut out = Vec::new();
    for kind in [
        ParamKind::DensityScale,
        ParamKind::RotaryInertiaScale,
        ParamKind::StiffnessScale,
        ParamKind::DampingScale,
    ] {
        out.extend((0..s).map(|segment| Unknown { kind, segment }));
    }
    out.push(Unknown {
        kind: ParamKind::PayloadMass,
        segment: 0,
    });
    out.push(Unknown {
        kind: ParamKind::PayloadRotaryInertia,
        segment: 0,
    });
    out
}

/// Reads `--fit`: names as [`Unknown::name`] gives them, or a field alone
/// (`bending_stiffness`, `density`, `rotary_inertia`, `damping`) for every segment,
/// or `payload` for both payload values.
pub fn parse_fit(list: &str, arm: &Arm) -> Result<Vec<Unknown>, String> {
    let all = all_unknowns(arm);
    let mut out: Vec<Unknown> = Vec::new();
    for item in list.split(',').map(str::trim) {
        let hits: Vec<Unknown> = all
            .iter()
            .copied()
            .filter(|u| {
                let name = u.name();
                name == item
                    || (name.starts_with("segment[") && name.rsplit('.').next() == Some(item))
                    || (item == "payload" && name.starts_with("payload."))
            })
            .collect();
        if hits.is_empty() {
            return Err(format!(
                "--fit: `{item}` is none of {} (or a field alone for every segment, or \
                 `payload`)",
                all.iter().map(Unknown::name).collect::<Vec<_>>().join(", ")
            ));
        }
        for h in hits {
            if !out.contains(&h) {
                out.push(h);
            }
        }
    }
    Ok(out)
}

/// One measurement: a rest shape (`q̇ = q̈ = 0`) or a state of a logged motion, with
/// the inputs applied, and where it came from (for messages).
#[derive(Clone, Debug)]
pub struct Observation {
    pub q: Vec<f64>,
    pub qd: Vec<f64>,
    pub qdd: Vec<f64>,
    pub u: Vec<f64>,
    /// `file:row` of the data line.
    pub origin: String,
    pub at_rest: bool,
}

/// The regression: one row per coordinate of each observation.
pub struct Regression {
    /// `columns[k][r]`: the generalized force of linear parameter `k` (the regressor's
    /// column, [`ParamLayout::linear_len`] of them) in row `r`.
    columns: Vec<Vec<f64>>,
    /// `A(q) u` in row `r`.
    pub measured: Vec<f64>,
    /// Coordinate of row `r`.
    pub coordinate: Vec<usize>,
    /// Observation of row `r`.
    pub observation: Vec<usize>,
    /// Whether any observation is a logged motion.
    pub has_motion: bool,
}

/// Builds the regression from a parametric model ([`crate::derive::derive_emitted`]):
/// its regressor `Y(q, q̇, q̈)` at each observation (gravity as in the arm file), and
/// `A(q) u`.
pub fn regression(model: &Model, observations: &[Observation]) -> Result<Regression, String> {
    let arm = &model.arm;
    let layout = ParamLayout::of(arm);
    let n = arm.n_coords();
    let ev = Evaluator::new(model);
    let rows = observations.len() * n;
    let mut columns = vec![vec![0.0; rows]; layout.linear_len()];
    let mut measured = vec![0.0; rows];
    for (o, obs) in observations.iter().enumerate() {
        let a = ev.terms(&obs.q, &obs.qd).a;
        let y = ev
            .regressor(&obs.q, &obs.qd, &obs.qdd)
            .ok_or("identification needs the parametric model (derive_emitted)")?;
        for i in 0..n {
            measured[o * n + i] = a[i].iter().zip(&obs.u).map(|(x, y)| x * y).sum();
            for (k, v) in y[i].iter().enumerate() {
                columns[k][o * n + i] = *v;
            }
        }
    }
    Ok(Regression {
        columns,
        measured,
        coordinate: (0..rows).map(|r| r % n).collect(),
        observation: (0..rows).map(|r| r / n).collect(),
        has_motion: observations.iter().any(|o| !o.at_rest),
    })
}

/// Eigenvalue ratio of the column-scaled normal matrix below which a direction counts
/// as undetermined (a singular-value ratio of 1e-6: beyond what measured data resolves).
pub const NULL_RATIO: f64 = 1e-12;

/// Huber's tuning constant (95 % efficiency at Gaussian noise; common practice).
const HUBER: f64 = 1.345;

/// A parameter that was not fitted, and why.
#[derive(Clone, Debug)]
pub struct NotIdentified {
    pub unknown: Unknown,
    pub reason: String,
    /// The experiment that would determine it.
    pub advice: String,
}

/// The result of [`fit`].
#[derive(Clone, Debug)]
pub struct Fit {
    /// The fitted parameters, their values and standard errors.
    pub fitted: Vec<(Unknown, f64, f64)>,
    pub not_identified: Vec<NotIdentified>,
    /// The parameter vector after the fit (the arm file's values where not fitted).
    pub theta: Vec<f64>,
    /// 2-norm condition number of the weighted, column-scaled regressor of the fitted set.
    pub condition: f64,
    /// RMS residual relative to the RMS measured force, each coordinate scaled by its
    /// own measured spread (their units differ), at the arm file's values and after
    /// the fit: 1 would explain nothing, 0 everything.
    pub residual_before: f64,
    pub residual_after: f64,
    /// Predicted generalized force per row, at the arm file's values and after.
    pub predicted_before: Vec<f64>,
    pub predicted_after: Vec<f64>,
    /// Rows whose Huber weight fell below 1/2 (outliers), in row order.
    pub outliers: Vec<usize>,
}

/// Fits `wanted` (the others stay at the arm file's values).
pub fn fit(arm: &Arm, reg: &Regression, wanted: &[Unknown]) -> Result<Fit, String> {
    let layout = ParamLayout::of(arm);
    let theta0 = layout.defaults_f64(arm);
    let n = arm.n_coords();
    let rows = reg.measured.len();
    let predict = |theta: &[f64]| -> Vec<f64> {
        (0..rows)
            .map(|r| {
                (0..reg.columns.len())
                    .map(|k| theta[k] * reg.columns[k][r])
                    .sum()
            })
            .collect()
    };
    let predicted_before = predict(&theta0);
    // Per-coordinate scale of the equations: their spread (units differ by coordinate).
    let spread = |res: &[f64]| -> Vec<f64> {
        let mut s = vec![0.0; n];
        let mut c = vec![0usize; n];
        for (r, v) in res.iter().enumerate() {
            s[reg.coordinate[r]] += v * v;
            c[reg.coordinate[r]] += 1;
        }
        let overall = s.iter().sum::<f64>() / (rows.max(1) as f64);
        (0..n)
            .map(|i| {
                let v = (s[i] / c[i].max(1) as f64).sqrt();
                // A coordinate the data never loads gets the overall scale.
                if v > 1e-12 * overall.sqrt() {
                    v
                } else {
                    overall.sqrt().max(f64::MIN_POSITIVE)
                }
            })
            .collect()
    };
    let mut not_identified: Vec<NotIdentified> = Vec::new();
    let mut active: Vec<Unknown> = Vec::new();
    for &u in wanted {
        let k = u.index(&layout);
        if reg.columns[k].iter().all(|v| *v == 0.0) {
            not_identified.push(NotIdentified {
                unknown: u,
                reason: "does not enter this data".into(),
                advice: u.advice(reg.has_motion),
            });
        } else {
            active.push(u);
        }
    }
    let measured_spread = spread(&reg.measured);
    let mut scale = measured_spread.clone();
    loop {
        let solved = solve_weighted(arm, reg, &active, &theta0, &mut scale, &measured_spread)?;
        // Directions the data does not determine: drop every parameter in them.
        if let Some(group) = solved.null_group.clone() {
            let names: Vec<String> = group.iter().map(Unknown::name).collect();
            for u in &group {
                not_identified.push(NotIdentified {
                    unknown: *u,
                    reason: if group.len() > 1 {
                        format!("acts alike with {} in this data", others(&names, u))
                    } else {
                        "is not determined by this data".into()
                    },
                    advice: u.advice(reg.has_motion),
                });
            }
            active.retain(|u| !group.contains(u));
            continue;
        }
        // A standard error above half the value: fitted to noise.
        let weak: Vec<(Unknown, f64, f64)> = solved
            .fitted
            .iter()
            .copied()
            .filter(|(u, v, se)| {
                let k = u.index(&layout);
                *se > 0.5 * v.abs().max(theta0[k].abs())
            })
            .collect();
        if !weak.is_empty() {
            for (u, v, se) in &weak {
                let a = active
                    .iter()
                    .position(|x| x == u)
                    .expect("fitted is active");
                let alike: Vec<String> = (0..active.len())
                    .filter(|&b| b != a && solved.correlation[a][b].abs() > 0.9)
                    .map(|b| active[b].name())
                    .collect();
                let reason = if alike.is_empty() {
                    format!("would be {} ± {} (noise)", sig3(*v), sig3(*se))
                } else {
                    format!(
                        "would be {} ± {}: it acts alike with {} in this data",
                        sig3(*v),
                        sig3(*se),
                        alike.join(", ")
                    )
                };
                not_identified.push(NotIdentified {
                    unknown: *u,
                    reason,
                    advice: u.advice(reg.has_motion),
                });
            }
            active.retain(|u| !weak.iter().any(|(w, _, _)| w == u));
            continue;
        }
        let theta = solved.theta.clone();
        let predicted_after = predict(&theta);
        let relative = |pred: &[f64]| -> f64 {
            let (mut e, mut m) = (0.0, 0.0);
            for r in 0..rows {
                let s = measured_spread[reg.coordinate[r]];
                e += ((reg.measured[r] - pred[r]) / s).powi(2);
                m += (reg.measured[r] / s).powi(2);
            }
            (e / m.max(f64::MIN_POSITIVE)).sqrt()
        };
        return Ok(Fit {
            fitted: solved.fitted,
            not_identified,
            theta,
            condition: solved.condition,
            residual_before: relative(&predicted_before),
            residual_after: relative(&predicted_after),
            predicted_before,
            predicted_after,
            outliers: solved.outliers,
        });
    }
}

fn others(names: &[String], u: &Unknown) -> String {
    let me = u.name();
    names
        .iter()
        .filter(|n| **n != me)
        .cloned()
        .collect::<Vec<_>>()
        .join(", ")
}

struct Solved {
    fitted: Vec<(Unknown, f64, f64)>,
    theta: Vec<f64>,
    condition: f64,
    outliers: Vec<usize>,
    /// Parameters in an undetermined direction (then nothing else is meaningful).
    null_group: Option<Vec<Unknown>>,
    /// Correlations of the estimates, in `active` order.
    correlation: Vec<Vec<f64>>,
}

/// Iteratively reweighted least squares of the `active` parameters: per-coordinate
/// scales from the residuals, then Huber weights on the scaled residuals. Updates
/// `scale` to the final residual spread.
fn solve_weighted(
    arm: &Arm,
    reg: &Regression,
    active: &[Unknown],
    theta0: &[f64],
    scale: &mut Vec<f64>,
    measured_spread: &[f64],
) -> Result<Solved, String> {
    let layout = ParamLayout::of(arm);
    let rows = reg.measured.len();
    let p = active.len();
    let n = arm.n_coords();
    let cols: Vec<usize> = active.iter().map(|u| u.index(&layout)).collect();
    // The right-hand side without the parameters that stay fixed.
    let y: Vec<f64> = (0..rows)
        .map(|r| {
            let fixed: f64 = (0..reg.columns.len())
                .filter(|k| !cols.contains(k))
                .map(|k| theta0[k] * reg.columns[k][r])
                .sum();
            reg.measured[r] - fixed
        })
        .collect();
    let mut theta = theta0.to_vec();
    if p > 0 && y.iter().all(|v| *v == 0.0) {
        return Err(
            "the data holds no known force to fit against (the inputs are zero and every \
             parameter the data carries is fitted): the parameters are then determined only \
             up to a common factor; leave one out of --fit, or measure under known inputs"
                .into(),
        );
    }
    if p == 0 {
        return Ok(Solved {
            fitted: Vec::new(),
            theta,
            condition: 1.0,
            outliers: Vec::new(),
            null_group: None,
            correlation: Vec::new(),
        });
    }
    if rows < p + 1 {
        return Err(format!(
            "{rows} equations for {p} parameters: give more rows (each row gives one \
             equation per coordinate)"
        ));
    }
    let mut huber = vec![1.0; rows];
    let mut x = vec![0.0; p];
    let mut normal = vec![vec![0.0; p]; p];
    let mut col_norm = vec![1.0; p];
    let mut sigma2 = 1.0;
    for iteration in 0..30 {
        let w: Vec<f64> = (0..rows)
            .map(|r| huber[r] / scale[reg.coordinate[r]].powi(2))
            .collect();
        col_norm = cols
            .iter()
            .map(|&k| {
                (0..rows)
                    .map(|r| w[r] * reg.columns[k][r].powi(2))
                    .sum::<f64>()
                    .sqrt()
                    .max(f64::MIN_POSITIVE)
            })
            .collect();
        for a in 0..p {
            for b in 0..p {
                normal[a][b] = (0..rows)
                    .map(|r| w[r] * reg.columns[cols[a]][r] * reg.columns[cols[b]][r])
                    .sum::<f64>()
                    / (col_norm[a] * col_norm[b]);
            }
        }
        let (values, vectors) = crate::linalg::symmetric_eigen(&normal);
        let top = values.last().copied().unwrap_or(0.0).max(f64::MIN_POSITIVE);
        if let Some(i) = values.iter().position(|v| *v < NULL_RATIO * top) {
            let v = &vectors[i];
            let group: Vec<Unknown> = (0..p)
                .filter(|&a| v[a].abs() > 0.2)
                .map(|a| active[a])
                .collect();
            return Ok(Solved {
                fitted: Vec::new(),
                theta,
                condition: f64::INFINITY,
                outliers: Vec::new(),
                null_group: Some(group),
                correlation: Vec::new(),
            });
        }
        let rhs: Vec<f64> = (0..p)
            .map(|a| {
                (0..rows)
                    .map(|r| w[r] * reg.columns[cols[a]][r] * y[r])
                    .sum::<f64>()
                    / col_norm[a]
            })
            .collect();
        let z = crate::linalg::solve(&normal, &rhs)
            .ok_or("the least-squares problem is singular to working precision")?;
        let new: Vec<f64> = (0..p).map(|a| z[a] / col_norm[a]).collect();
        let residual: Vec<f64> = (0..rows)
            .map(|r| {
                y[r] - (0..p)
                    .map(|a| new[a] * reg.columns[cols[a]][r])
                    .sum::<f64>()
            })
            .collect();
        // Per-coordinate noise scale: a robust spread (1.4826 × median absolute
        // residual, common practice), floored by the plain RMS / 100 and by 1e-10 of
        // the measured spread (so that exact data has no "outliers" at rounding).
        let mut next_scale = vec![0.0; n];
        for i in 0..n {
            let mut abs: Vec<f64> = (0..rows)
                .filter(|&r| reg.coordinate[r] == i)
                .map(|r| residual[r].abs())
                .collect();
            abs.sort_by(f64::total_cmp);
            let med = abs.get(abs.len() / 2).copied().unwrap_or(0.0);
            let rms = (abs.iter().map(|v| v * v).sum::<f64>() / abs.len().max(1) as f64).sqrt();
            next_scale[i] = (1.4826 * med)
                .max(0.01 * rms)
                .max(1e-10 * measured_spread[i]);
        }
        let overall = next_scale.iter().copied().fold(0.0f64, f64::max);
        for s in &mut next_scale {
            if !(*s > 1e-9 * overall) {
                *s = overall.max(f64::MIN_POSITIVE);
            }
        }
        for r in 0..rows {
            let e = (residual[r] / next_scale[reg.coordinate[r]]).abs();
            huber[r] = if e <= HUBER { 1.0 } else { HUBER / e };
        }
        let converged = new
            .iter()
            .zip(&x)
            .all(|(a, b)| (a - b).abs() <= 1e-10 * a.abs().max(1e-300));
        x = new;
        *scale = next_scale;
        // σ² of the weighted residuals (1 when the scales are right).
        let dof = (rows - p) as f64;
        sigma2 = (0..rows)
            .map(|r| huber[r] * (residual[r] / scale[reg.coordinate[r]]).powi(2))
            .sum::<f64>()
            / dof;
        if converged && iteration > 2 {
            break;
        }
    }
    let (values, _) = crate::linalg::symmetric_eigen(&normal);
    let condition =
        (values.last().copied().unwrap_or(1.0) / values[0].max(f64::MIN_POSITIVE)).sqrt();
    // Covariance σ² (Xᵀ W X)⁻¹, column by column of the inverse.
    let mut fitted = Vec::with_capacity(p);
    let mut inverse = Vec::with_capacity(p);
    for a in 0..p {
        let mut e = vec![0.0; p];
        e[a] = 1.0;
        let col = crate::linalg::solve(&normal, &e)
            .ok_or("the least-squares problem is singular to working precision")?;
        let var = sigma2 * col[a] / (col_norm[a] * col_norm[a]);
        fitted.push((active[a], x[a], var.max(0.0).sqrt()));
        theta[cols[a]] = x[a];
        inverse.push(col);
    }
    let correlation = (0..p)
        .map(|a| {
            (0..p)
                .map(|b| inverse[a][b] / (inverse[a][a] * inverse[b][b]).sqrt())
                .collect()
        })
        .collect();
    let outliers = (0..rows).filter(|&r| huber[r] < 0.5).collect();
    Ok(Solved {
        fitted,
        theta,
        condition,
        outliers,
        null_group: None,
        correlation,
    })
}

/// Velocities and accelerations of uniformly sampled `values` by a smoothing
/// differentiator: the least-squares cubic over `2·half + 1` samples around each
/// (Savitzky–Golay, common practice; exact for cubics at the centre, and the
/// acceleration is that of the quadratic fit, which is the same). `half ≥ 2`. Returns one `(first, second)`
/// pair per sample from `half` to `len − half − 1`.
pub fn smooth_derivatives(values: &[f64], dt: f64, half: usize) -> Vec<(f64, f64)> {
    let m = half as i64;
    let count = (2 * half + 1) as f64;
    let s2: f64 = (-m..=m).map(|i| (i * i) as f64).sum();
    let s4: f64 = (-m..=m).map(|i| (i * i * i * i) as f64).sum();
    let s6: f64 = (-m..=m).map(|i| (i * i * i * i * i * i) as f64).sum();
    let mut out = Vec::new();
    if values.len() < 2 * half + 1 {
        return out;
    }
    for c in half..values.len() - half {
        let (mut d1, mut d2) = (0.0, 0.0);
        for i in -m..=m {
            let y = values[(c as i64 + i) as usize];
            let fi = i as f64;
            d1 += (s6 * fi - s4 * fi * fi * fi) * y / (s2 * s6 - s4 * s4);
            d2 += 2.0 * (count * fi * fi - s2) * y / (count * s4 - s2 * s2);
        }
        out.push((d1 / dt, d2 / (dt * dt)));
    }
    out
}

#[cfg(test)]
mod tests;

/// Three significant digits, for messages.
fn sig3(v: f64) -> String {
    format!("{v:.3e}")
}
