//! Regulators of the controlled coordinates `y = S q`, and the rest shapes they lead to.
//!
//! Two laws, with `S` the rows of the controlled outputs and `⁺` the bounded
//! minimum-norm allocation of [`crate::allocation`]:
//! - baseline: `u = (S A(q))⁺ [Kp (ȳ − y) − Kd ẏ]`, a PD that knows only the
//!   controlled coordinates;
//! - compensated: `u = (S A(q))⁺ [Kp (ȳ − y) − Kd ẏ + S (K q + G(q))]`, the same PD
//!   plus the elastic and gravity load of the model on the controlled coordinates.
//!
//! At rest the compensated law puts `y` at `ȳ` exactly (when the limits allow the
//! inputs): projecting `K q + G = A u` with `S` leaves `Kp (ȳ − y) = 0`. The other
//! coordinates rest where the *zero dynamics* put them, which is what [`hold`] solves
//! directly. The baseline leaves `Kp (ȳ − y) = S (K q + G)`, a steady-state error
//! [`closed_loop_rest`] predicts.
//!
//! The default outputs are each segment's *mean curvature* `κ̄_j = Σ_i q_{j,i}/(i+1)`,
//! which is the constant-curvature coordinate `q_{j,0}` itself for a segment of
//! degree 0. For higher degrees `q_{j,0}` alone is a poor thing to regulate: tendons
//! and distributed moments act on a segment through its end angle `L_j κ̄_j`, so the
//! generalised force they exert is `Sᵀ`-shaped only for `S` = mean curvature. With
//! `q_{j,0}` the loop is not collocated and the PD excites the higher coefficients
//! (measured on the degree-2 demo arm: both laws diverge within 0.05 s at gains that
//! settle its constant-curvature twin). A coordinate can still be chosen by label.

use crate::allocation::{allocate, Allocation};
use crate::arm::{Arm, InputLimits};
use crate::continuation::{continue_root, Residual};
use crate::linalg::{norm, symmetric_eigenvalues};
use crate::statics::{most_bent, Options, StaticModel, StaticsError};
use crate::terms::Matrix;
use std::fmt;

/// Which law a [`Regulator`] applies.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Law {
    Baseline,
    Compensated,
}

impl Law {
    pub fn name(self) -> &'static str {
        match self {
            Law::Baseline => "baseline",
            Law::Compensated => "compensated",
        }
    }
}

/// One controlled output, a row of `S`.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Output {
    /// A coordinate, by index in `q` (label `2_1`).
    Coordinate(usize),
    /// A segment's mean curvature `Σ_i q_{j,i}/(i+1)` (label `2_mean`; 0-based here).
    MeanCurvature(usize),
}

impl Output {
    /// The output's row of `S`.
    pub fn row(&self, arm: &Arm) -> Vec<f64> {
        let mut r = vec![0.0; arm.n_coords()];
        match *self {
            Output::Coordinate(i) => r[i] = 1.0,
            Output::MeanCurvature(j) => {
                let at = arm.coord_offset(j);
                for i in 0..arm.segments[j].n_coords() {
                    r[at + i] = 1.0 / (i + 1) as f64;
                }
            }
        }
        r
    }
    pub fn label(&self, arm: &Arm) -> String {
        match *self {
            Output::Coordinate(i) => arm.coordinate_labels()[i].clone(),
            Output::MeanCurvature(j) => format!("{}_mean", j + 1),
        }
    }
    /// Reads `2_0` (or `q2_0`) and `2_mean`.
    pub fn parse(arm: &Arm, label: &str) -> Result<Output, String> {
        let l = label.trim();
        if let Some(j) = l.strip_suffix("_mean") {
            return match j.parse::<usize>() {
                Ok(j) if (1..=arm.segments.len()).contains(&j) => Ok(Output::MeanCurvature(j - 1)),
                _ => Err(format!(
                    "unknown output `{l}` (segments are numbered 1..={})",
                    arm.segments.len()
                )),
            };
        }
        coordinate_index(arm, l).map(Output::Coordinate)
    }
}

/// Each segment's mean curvature, written as the coordinate `q_{j,0}` for a
/// constant-curvature segment (where the two are the same).
pub fn default_outputs(arm: &Arm) -> Vec<Output> {
    (0..arm.segments.len())
        .map(|j| {
            if arm.segments[j].n_coords() == 1 {
                Output::Coordinate(arm.coord_offset(j))
            } else {
                Output::MeanCurvature(j)
            }
        })
        .collect()
}

/// The rows of `S` for `outputs`.
pub fn selection(arm: &Arm, outputs: &[Output]) -> Matrix {
    outputs.iter().map(|o| o.row(arm)).collect()
}

fn dot(a: &[f64], b: &[f64]) -> f64 {
    a.iter().zip(b).map(|(x, y)| x * y).sum()
}

/// The index in `q` of a coordinate label such as `2_0` (also `q2_0`).
pub fn coordinate_index(arm: &Arm, label: &str) -> Result<usize, String> {
    let l = label.trim();
    let l = l.strip_prefix('q').unwrap_or(l);
    let labels = arm.coordinate_labels();
    labels.iter().position(|x| x == l).ok_or_else(|| {
        format!(
            "unknown coordinate `{}` (this arm has {}: segment_coefficient, counted from 1_0)",
            label.trim(),
            labels.join(", ")
        )
    })
}

/// A regulator's law, controlled coordinates, target and gains.
#[derive(Clone, Debug)]
pub struct Regulator {
    pub law: Law,
    /// The controlled outputs (distinct) and their rows of `S`.
    pub outputs: Vec<Output>,
    pub s: Matrix,
    /// `ȳ`, one per controlled coordinate.
    pub target: Vec<f64>,
    /// Positive gains, one per controlled coordinate.
    pub kp: Vec<f64>,
    pub kd: Vec<f64>,
    pub limits: Vec<InputLimits>,
}

impl Regulator {
    /// Checks lengths and signs: gains must be positive and finite, coordinates distinct.
    pub fn new(
        arm: &Arm,
        law: Law,
        outputs: Vec<Output>,
        target: Vec<f64>,
        kp: Vec<f64>,
        kd: Vec<f64>,
    ) -> Result<Regulator, String> {
        let h = outputs.len();
        if h == 0 {
            return Err("no controlled outputs".into());
        }
        for (i, c) in outputs.iter().enumerate() {
            if outputs[..i].contains(c) {
                return Err(format!("output {} is listed twice", c.label(arm)));
            }
        }
        for (name, v) in [("target", &target), ("kp", &kp), ("kd", &kd)] {
            if v.len() != h {
                return Err(format!(
                    "{name}: {h} controlled coordinates need {h} values, got {}",
                    v.len()
                ));
            }
            if !v.iter().all(|x| x.is_finite()) {
                return Err(format!("{name}: values must be finite"));
            }
        }
        for (name, v) in [("kp", &kp), ("kd", &kd)] {
            if let Some(x) = v.iter().find(|x| **x <= 0.0) {
                return Err(format!("{name}: gains must be positive, got {x}"));
            }
        }
        if arm.n_inputs() == 0 {
            return Err("the arm has no actuators: there is nothing to regulate with".into());
        }
        Ok(Regulator {
            law,
            s: selection(arm, &outputs),
            outputs,
            target,
            kp,
            kd,
            limits: arm.input_limits.clone(),
        })
    }

    /// The inputs at state `(q, q̇)` given `K`, `G(q)` and `A(q)`; the wanted
    /// generalised force on the controlled coordinates is `b`.
    pub fn input(&self, k: &Matrix, g: &[f64], a: &Matrix, q: &[f64], qd: &[f64]) -> Control {
        self.input_scaled(k, g, a, q, qd, 1.0)
    }

    /// As [`Regulator::input`] with target and gravity scaled by λ (continuation).
    fn input_scaled(
        &self,
        k: &Matrix,
        g: &[f64],
        a: &Matrix,
        q: &[f64],
        qd: &[f64],
        lambda: f64,
    ) -> Control {
        let load: Vec<f64> = match self.law {
            Law::Baseline => Vec::new(),
            Law::Compensated => (0..q.len())
                .map(|i| dot(&k[i], q) + lambda * g[i])
                .collect(),
        };
        let b: Vec<f64> = self
            .s
            .iter()
            .enumerate()
            .map(|(c, row)| {
                let pd = self.kp[c] * (lambda * self.target[c] - dot(row, q))
                    - self.kd[c] * dot(row, qd);
                match self.law {
                    Law::Baseline => pd,
                    Law::Compensated => pd + dot(row, &load),
                }
            })
            .collect();
        let m = s_times(&self.s, a);
        let allocation = allocate(&m, &b, &self.limits);
        Control { b, allocation }
    }
}

/// What a regulator asks for and gets.
#[derive(Clone, Debug)]
pub struct Control {
    /// The wanted generalised force on the controlled coordinates.
    pub b: Vec<f64>,
    pub allocation: Allocation,
}

/// A rest shape with the inputs that hold it.
#[derive(Clone, Debug)]
pub struct Rest {
    pub q: Vec<f64>,
    pub u: Vec<f64>,
    pub tip_pose: [f64; 3],
    /// `‖K q + G − A u‖₂` over all coordinates.
    pub residual: f64,
    pub relative_residual: f64,
    pub iterations: usize,
    pub load_steps: usize,
    /// Smallest eigenvalue of the symmetric part of `K + ∂G/∂q − ∂(A u)/∂q` with the
    /// inputs held constant, and whether it is positive.
    pub min_eigenvalue: f64,
    pub stable: bool,
    /// Which inputs sit at a limit.
    pub at_limit: Vec<bool>,
}

/// Why a held shape or target cannot be had.
#[derive(Clone, Debug, PartialEq)]
pub enum ControlError {
    Statics(StaticsError),
    /// No input acts on the held coordinates independently.
    Unactuated(String),
    /// The limits do not allow the inputs the shape needs.
    Infeasible {
        message: String,
        shortfall: Vec<f64>,
    },
    /// The tip cannot be put there.
    Unreachable(String),
}

impl fmt::Display for ControlError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            ControlError::Statics(e) => e.fmt(f),
            ControlError::Unactuated(m)
            | ControlError::Unreachable(m)
            | ControlError::Infeasible { message: m, .. } => f.write_str(m),
        }
    }
}

impl std::error::Error for ControlError {}

impl From<StaticsError> for ControlError {
    fn from(e: StaticsError) -> Self {
        ControlError::Statics(e)
    }
}

/// Step limiter shared by the solvers: at most `max_bending_step` of bending change.
fn bending_limit<'a>(arm: &'a Arm, opts: &'a Options) -> impl Fn(&[f64]) -> f64 + 'a {
    move |dq: &[f64]| {
        let worst = most_bent(arm, dq);
        if worst > opts.max_bending_step {
            opts.max_bending_step / worst
        } else {
            1.0
        }
    }
}

/// `S A`, h×k.
pub fn s_times(s: &Matrix, a: &Matrix) -> Matrix {
    let k = a.first().map_or(0, |r| r.len());
    s.iter()
        .map(|row| {
            (0..k)
                .map(|c| (0..a.len()).map(|i| row[i] * a[i][c]).sum())
                .collect()
        })
        .collect()
}

fn times(m: &Matrix, x: &[f64]) -> Vec<f64> {
    m.iter()
        .map(|r| r.iter().zip(x).map(|(a, b)| a * b).sum())
        .collect()
}

/// The equilibrium residual `K q + λ G − A u` and its scale.
fn static_residual(kq: &[f64], g: &[f64], au: &[f64], lambda: f64) -> Residual {
    let r = (0..kq.len())
        .map(|i| kq[i] + lambda * g[i] - au[i])
        .collect();
    Residual {
        r,
        scale: norm(kq) + lambda * norm(g) + norm(au) + f64::MIN_POSITIVE,
    }
}

/// Finishes a rest shape: residual over all coordinates and stability with the
/// inputs held constant.
fn finish(
    model: &dyn StaticModel,
    k: &Matrix,
    q: Vec<f64>,
    u: Vec<f64>,
    at_limit: Vec<bool>,
    root: &crate::continuation::Root,
) -> Result<Rest, ControlError> {
    let t = model.at(&q).map_err(StaticsError::OutOfRange)?;
    let res = static_residual(&times(k, &q), &t.g, &times(&t.a, &u), 1.0);
    let n = q.len();
    let jac: Matrix = (0..n)
        .map(|i| {
            (0..n)
                .map(|x| {
                    let dau: f64 = t.da[x][i].iter().zip(&u).map(|(a, b)| a * b).sum();
                    k[i][x] + t.dg[i][x] - dau
                })
                .collect()
        })
        .collect();
    let min_eigenvalue = symmetric_eigenvalues(&jac)
        .first()
        .copied()
        .unwrap_or(f64::INFINITY);
    let residual = norm(&res.r);
    Ok(Rest {
        tip_pose: t.tip_pose,
        residual,
        relative_residual: residual / res.scale,
        q,
        u,
        iterations: root.iterations,
        load_steps: root.load_steps,
        min_eigenvalue,
        stable: min_eigenvalue > 0.0,
        at_limit,
    })
}

/// The rest shape of the closed loop under `reg` (q̇ = 0): `K q + G = A u(q)`,
/// reached by raising target and gravity together from the straight shape.
pub fn closed_loop_rest(
    model: &dyn StaticModel,
    reg: &Regulator,
    opts: &Options,
) -> Result<Rest, ControlError> {
    let arm = model.arm();
    let n = arm.n_coords();
    let k = model.stiffness();
    let zero = vec![0.0; n];
    let mut residual = |q: &[f64], lambda: f64| -> Result<Residual, StaticsError> {
        let t = model.at(q).map_err(StaticsError::OutOfRange)?;
        let c = reg.input_scaled(&k, &t.g, &t.a, q, &zero, lambda);
        Ok(static_residual(
            &times(&k, q),
            &t.g,
            &times(&t.a, &c.allocation.u),
            lambda,
        ))
    };
    let limit = bending_limit(arm, opts);
    let root = continue_root(&mut residual, &limit, zero.clone(), opts)?;
    let t = model.at(&root.x).map_err(StaticsError::OutOfRange)?;
    let c = reg.input(&k, &t.g, &t.a, &root.x, &zero);
    finish(
        model,
        &k,
        root.x.clone(),
        c.allocation.u,
        c.allocation.at_limit,
        &root,
    )
}

/// Holds the outputs at values (`S q = ȳ`) and solves for the rest of the shape and
/// the inputs that keep the arm there: with `N` an orthonormal basis of the null space
/// of `S`, `q = S⁺ ȳ + N z` and `Nᵀ (K q + G − A u) = 0` for `u = (S A)⁺ S (K q + G)`,
/// the rest shape of the zero dynamics under the compensated regulator. More inputs
/// than outputs: the minimum-norm inputs.
pub fn hold(
    model: &dyn StaticModel,
    outputs: &[Output],
    values: &[f64],
    opts: &Options,
) -> Result<Rest, ControlError> {
    let arm = model.arm();
    let n = arm.n_coords();
    let k = model.stiffness();
    let names: Vec<String> = outputs.iter().map(|o| o.label(arm)).collect();
    if arm.n_inputs() == 0 {
        return Err(ControlError::Unactuated(
            "the arm has no actuators: no shape can be held".into(),
        ));
    }
    if outputs.len() > arm.n_inputs() {
        return Err(ControlError::Unactuated(format!(
            "{} held outputs need at least as many inputs; the arm has {}",
            outputs.len(),
            arm.n_inputs()
        )));
    }
    let s = selection(arm, outputs);
    let basis = crate::linalg::null_space(&s, n);
    if basis.len() + outputs.len() != n {
        return Err(ControlError::Unactuated(format!(
            "the held outputs {} are not independent",
            names.join(", ")
        )));
    }
    // A particular solution S⁺ ȳ = Sᵀ (S Sᵀ)⁻¹ ȳ.
    let sst: Matrix = s
        .iter()
        .map(|a| s.iter().map(|b| dot(a, b)).collect())
        .collect();
    let w = crate::linalg::solve(&sst, values).ok_or_else(|| {
        ControlError::Unactuated(format!(
            "the held outputs {} are not independent",
            names.join(", ")
        ))
    })?;
    let particular: Vec<f64> = (0..n)
        .map(|i| (0..s.len()).map(|r| s[r][i] * w[r]).sum())
        .collect();
    let assemble = |z: &[f64], lambda: f64| -> Vec<f64> {
        (0..n)
            .map(|i| {
                lambda * particular[i] + basis.iter().zip(z).map(|(b, z)| b[i] * z).sum::<f64>()
            })
            .collect()
    };
    // S A must have full row rank where the solve starts and ends.
    let independent = |q: &[f64]| -> Result<(), ControlError> {
        let t = model.at(q).map_err(StaticsError::OutOfRange)?;
        let m = s_times(&s, &t.a);
        let gram: Matrix = m
            .iter()
            .map(|a| m.iter().map(|b| dot(a, b)).collect())
            .collect();
        let eig = symmetric_eigenvalues(&gram);
        let top = eig.last().copied().unwrap_or(0.0);
        if !(eig[0] > 1e-20 * top.max(f64::MIN_POSITIVE)) || top == 0.0 {
            return Err(ControlError::Unactuated(format!(
                "the inputs cannot hold {} independently (S A {})",
                names.join(", "),
                if top == 0.0 {
                    "is zero: no input acts on them"
                } else {
                    "is rank-deficient"
                }
            )));
        }
        Ok(())
    };
    independent(&assemble(&vec![0.0; basis.len()], 1.0))?;
    let alloc_at = |q: &[f64], g: &[f64], a: &Matrix, lambda: f64| -> (Vec<f64>, Allocation) {
        let kq = times(&k, q);
        let load: Vec<f64> = (0..n).map(|i| kq[i] + lambda * g[i]).collect();
        let b: Vec<f64> = s.iter().map(|row| dot(row, &load)).collect();
        let al = allocate(&s_times(&s, a), &b, &arm.input_limits);
        (b, al)
    };
    let mut residual = |z: &[f64], lambda: f64| -> Result<Residual, StaticsError> {
        let q = assemble(z, lambda);
        let t = model.at(&q).map_err(StaticsError::OutOfRange)?;
        let (_, al) = alloc_at(&q, &t.g, &t.a, lambda);
        let full = static_residual(&times(&k, &q), &t.g, &times(&t.a, &al.u), lambda);
        Ok(Residual {
            r: basis.iter().map(|b| dot(b, &full.r)).collect(),
            scale: full.scale,
        })
    };
    let full_limit = bending_limit(arm, opts);
    let limit = |dz: &[f64]| full_limit(&assemble(dz, 0.0));
    let root = continue_root(&mut residual, &limit, vec![0.0; basis.len()], opts)?;
    let q = assemble(&root.x, 1.0);
    independent(&q)?;
    let t = model.at(&q).map_err(StaticsError::OutOfRange)?;
    let (b, al) = alloc_at(&q, &t.g, &t.a, 1.0);
    if !al.met(&b, 1e-9) {
        let parts: Vec<String> = names
            .iter()
            .zip(&al.shortfall)
            .map(|(l, s)| format!("{l}: {s:.3e}"))
            .collect();
        let limited: Vec<String> = (0..arm.n_inputs())
            .filter(|i| al.at_limit[*i])
            .map(|i| arm.input_name(i))
            .collect();
        return Err(ControlError::Infeasible {
            message: format!(
                "the actuator limits cannot hold this shape: the generalised force still \
                 missing is {} (inputs at their limits: {})",
                parts.join(", "),
                if limited.is_empty() {
                    "none".to_string()
                } else {
                    limited.join(", ")
                }
            ),
            shortfall: al.shortfall,
        });
    }
    finish(model, &k, q, al.u, al.at_limit, &root)
}

/// A rest shape and the held values that give it, for a tip target.
#[derive(Clone, Debug)]
pub struct TipSolution {
    pub rest: Rest,
    /// The held values of the outputs.
    pub held: Vec<f64>,
    /// Distance of the reached tip from the target [m].
    pub miss: f64,
}

/// Finds values of the controlled coordinates whose held shape puts the tip at
/// `(x, y)`. The target is approached from the tip of the straight held shape in
/// steps, each solved by Gauss–Newton with minimum-norm steps: of several solutions
/// (elbow up or down), the one found is the one connected to the straight shape along
/// that path, and with more controlled coordinates than two, the one with the least
/// change of them along the way.
pub fn reach_tip(
    model: &dyn StaticModel,
    outputs: &[Output],
    tip: [f64; 2],
    opts: &Options,
) -> Result<TipSolution, ControlError> {
    let h = outputs.len();
    let s = selection(model.arm(), outputs);
    let solve_at = |y: &[f64]| -> Result<Rest, ControlError> { hold(model, outputs, y, opts) };
    let tip_of = |r: &Rest| [r.tip_pose[0], r.tip_pose[1]];
    let mut y = vec![0.0; h];
    let mut rest = solve_at(&y)?;
    let start = tip_of(&rest);
    let reach: f64 = model
        .arm()
        .segments
        .iter()
        .map(|s| num_traits::ToPrimitive::to_f64(&s.length).unwrap_or(0.0))
        .sum();
    let tolerance = 1e-9 * reach;
    let stages = 8;
    for stage in 1..=stages {
        let f = stage as f64 / stages as f64;
        let goal = [
            start[0] + f * (tip[0] - start[0]),
            start[1] + f * (tip[1] - start[1]),
        ];
        for _ in 0..40 {
            let p = tip_of(&rest);
            let e = [goal[0] - p[0], goal[1] - p[1]];
            if e[0].hypot(e[1]) <= tolerance {
                break;
            }
            // Jacobian of the tip in y, by central differences through `hold`.
            let mut jac = vec![vec![0.0; h]; 2];
            for c in 0..h {
                let d = 1e-6 * (1.0 + y[c].abs());
                let (mut yp, mut ym) = (y.clone(), y.clone());
                yp[c] += d;
                ym[c] -= d;
                let (tp, tm) = (tip_of(&solve_at(&yp)?), tip_of(&solve_at(&ym)?));
                for r in 0..2 {
                    jac[r][c] = (tp[r] - tm[r]) / (2.0 * d);
                }
            }
            // Minimum-norm Gauss–Newton step: dy = Jᵀ (J Jᵀ + εI)⁻¹ e (or the
            // least-squares step when h = 1).
            let dy = min_norm_step(&jac, &e);
            let limit = bending_limit(model.arm(), opts);
            let full: Vec<f64> = (0..model.arm().n_coords())
                .map(|i| (0..h).map(|c| s[c][i] * dy[c]).sum())
                .collect();
            let mut alpha = limit(&full);
            let err = e[0].hypot(e[1]);
            let mut moved = false;
            for _ in 0..20 {
                let cand: Vec<f64> = (0..h).map(|c| y[c] + alpha * dy[c]).collect();
                if let Ok(r) = solve_at(&cand) {
                    let q = tip_of(&r);
                    if (goal[0] - q[0]).hypot(goal[1] - q[1]) < err {
                        y = cand;
                        rest = r;
                        moved = true;
                        break;
                    }
                }
                alpha *= 0.5;
            }
            if !moved {
                break;
            }
        }
    }
    let p = tip_of(&rest);
    let miss = (tip[0] - p[0]).hypot(tip[1] - p[1]);
    if miss > tolerance.max(1e-9) * 10.0 {
        return Err(ControlError::Unreachable(format!(
            "the tip cannot be put at ({}, {}) by holding {} output{}: the nearest found \
             is ({:.6}, {:.6}), {:.3e} m away",
            tip[0],
            tip[1],
            h,
            if h == 1 { "" } else { "s" },
            p[0],
            p[1],
            miss
        )));
    }
    Ok(TipSolution {
        rest,
        held: y,
        miss,
    })
}

/// `Jᵀ (J Jᵀ)⁻¹ e` for a 2×h Jacobian, falling back to least squares when `J Jᵀ` is
/// singular (h = 1, or a straight-line configuration).
fn min_norm_step(jac: &Matrix, e: &[f64; 2]) -> Vec<f64> {
    let h = jac[0].len();
    let jjt: Matrix = (0..2)
        .map(|a| {
            (0..2)
                .map(|b| (0..h).map(|c| jac[a][c] * jac[b][c]).sum())
                .collect()
        })
        .collect();
    let tr = jjt[0][0] + jjt[1][1];
    let det = jjt[0][0] * jjt[1][1] - jjt[0][1] * jjt[1][0];
    if h >= 2 && det > 1e-10 * tr * tr {
        let w = crate::linalg::solve(&jjt, e).unwrap_or_else(|| vec![0.0; 2]);
        (0..h)
            .map(|c| jac[0][c] * w[0] + jac[1][c] * w[1])
            .collect()
    } else {
        // Least squares: (JᵀJ + εI)⁻¹ Jᵀ e.
        let mut jtj: Matrix = (0..h)
            .map(|a| {
                (0..h)
                    .map(|b| jac[0][a] * jac[0][b] + jac[1][a] * jac[1][b])
                    .collect()
            })
            .collect();
        for (i, r) in jtj.iter_mut().enumerate() {
            r[i] += 1e-12 * tr.max(f64::MIN_POSITIVE);
        }
        let rhs: Vec<f64> = (0..h)
            .map(|c| jac[0][c] * e[0] + jac[1][c] * e[1])
            .collect();
        crate::linalg::solve(&jtj, &rhs).unwrap_or_else(|| vec![0.0; h])
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::arm::parse_arm_str;
    use crate::derive::derive_statics;
    use crate::evaluate::Evaluator;
    use crate::statics::Derived;

    /// Two segments of degree 1, an antagonistic tendon pair to the tip and one to the
    /// end of segment 1, mounted sideways (gravity along −y). Invented numbers.
    const ARM: &str = "name = \"pair\"\ngravity = [0, -9.81]\nexpansion_order = 3\n\
        [[segment]]\nlength = 0.1\ncurvature_degree = 1\ndensity = 0.3\nbending_stiffness = 0.01\n\
        [[segment]]\nlength = 0.08\ncurvature_degree = 1\ndensity = 0.2\nbending_stiffness = 0.006\n\
        [[actuator]]\nkind = \"tendon\"\noffset = 0.01\nthrough_segment = 2\npretension = 0.1\n\
        [[actuator]]\nkind = \"tendon\"\noffset = -0.01\nthrough_segment = 2\npretension = 0.1\n\
        [[actuator]]\nkind = \"tendon\"\noffset = 0.008\nthrough_segment = 1\n\
        [[actuator]]\nkind = \"tendon\"\noffset = -0.008\nthrough_segment = 1\n";

    fn regulator(arm: &Arm, law: Law) -> Regulator {
        Regulator::new(
            arm,
            law,
            default_outputs(arm),
            vec![4.0, -3.0],
            vec![0.004, 0.004],
            vec![0.001, 0.001],
        )
        .unwrap()
    }

    #[test]
    fn the_compensated_rest_is_on_target_and_is_the_held_shape() {
        let arm = parse_arm_str(ARM, "pair.toml").unwrap();
        let model = derive_statics(&arm);
        let m = Derived(Evaluator::new(&model));
        let opts = Options::default();
        let reg = regulator(&arm, Law::Compensated);
        let rest = closed_loop_rest(&m, &reg, &opts).unwrap();
        let y = times(&reg.s, &rest.q);
        assert!(
            (y[0] - 4.0).abs() < 1e-9 && (y[1] + 3.0).abs() < 1e-9,
            "{y:?}"
        );
        assert!(rest.relative_residual < 1e-10);
        let held = hold(&m, &reg.outputs, &[4.0, -3.0], &opts).unwrap();
        for (a, b) in held.q.iter().zip(&rest.q) {
            assert!((a - b).abs() < 1e-8, "{:?} {:?}", held.q, rest.q);
        }
        for (a, b) in held.u.iter().zip(&rest.u) {
            assert!(
                (a - b).abs() < 1e-8 * (1.0 + a.abs()),
                "{:?} {:?}",
                held.u,
                rest.u
            );
        }
        // Tendons pull only, and each pair leaves one at its lower bound.
        assert!(held.u.iter().all(|u| *u >= 0.0));
        assert!(held.at_limit[0] || held.at_limit[1]);
        assert!(held.at_limit[2] || held.at_limit[3]);
    }

    #[test]
    fn the_baseline_rests_off_target_by_the_load_it_does_not_know() {
        let arm = parse_arm_str(ARM, "pair.toml").unwrap();
        let model = derive_statics(&arm);
        let m = Derived(Evaluator::new(&model));
        let reg = regulator(&arm, Law::Baseline);
        let rest = closed_loop_rest(&m, &reg, &Options::default()).unwrap();
        // At rest Kp (ȳ − y) = S (K q + G): the error is the controlled load over Kp.
        let t = m.at(&rest.q).unwrap();
        let k = m.stiffness();
        let kq = times(&k, &rest.q);
        for (c, row) in reg.s.iter().enumerate() {
            let load: f64 = (0..kq.len()).map(|i| row[i] * (kq[i] + t.g[i])).sum();
            let error = reg.target[c] - dot(row, &rest.q);
            assert!(error.abs() > 0.1, "the baseline should miss, error {error}");
            assert!((reg.kp[c] * error - load).abs() < 1e-9 * load.abs().max(1e-6));
        }
    }

    #[test]
    fn holds_that_cannot_be_had_say_why() {
        let arm = parse_arm_str(ARM, "pair.toml").unwrap();
        let model = derive_statics(&arm);
        let m = Derived(Evaluator::new(&model));
        let opts = Options::default();
        // Three held coordinates, four inputs, but the tendons act on each segment's
        // two coefficients in a fixed ratio: the rows are dependent.
        let three = [
            Output::Coordinate(0),
            Output::Coordinate(1),
            Output::Coordinate(2),
        ];
        let e = hold(&m, &three, &[1.0, 0.0, 1.0], &opts).unwrap_err();
        assert!(matches!(e, ControlError::Unactuated(_)), "{e}");
        // A limit too low for the shape: the shortfall is reported.
        let limited = ARM.replace(
            "through_segment = 2\npretension = 0.1\n",
            "through_segment = 2\npretension = 0.1\nmax = 0.3\n",
        );
        let arm = parse_arm_str(&limited, "pair.toml").unwrap();
        let model = derive_statics(&arm);
        let m = Derived(Evaluator::new(&model));
        match hold(&m, &default_outputs(&arm), &[10.0, -8.0], &opts).unwrap_err() {
            ControlError::Infeasible { message, shortfall } => {
                assert!(norm(&shortfall) > 1e-4, "{shortfall:?}");
                assert!(
                    message.contains("u1 (actuator[1])") || message.contains("u2"),
                    "{message}"
                );
            }
            e => panic!("expected infeasible, got {e}"),
        }
    }

    #[test]
    fn a_reachable_tip_target_is_met_and_an_unreachable_one_is_refused() {
        let arm = parse_arm_str(ARM, "pair.toml").unwrap();
        let model = derive_statics(&arm);
        let m = Derived(Evaluator::new(&model));
        let opts = Options::default();
        let c = default_outputs(&arm);
        let s = reach_tip(&m, &c, [0.12, 0.09], &opts).unwrap();
        assert!(s.miss < 1e-9, "{}", s.miss);
        assert!((s.rest.tip_pose[0] - 0.12).abs() < 1e-9);
        let e = reach_tip(&m, &c, [0.3, 0.0], &opts).unwrap_err();
        assert!(matches!(e, ControlError::Unreachable(_)), "{e}");
    }
}
