//! Regulators of the controlled coordinates `y = S q`, and the rest shapes they lead to.
//!
//! Two laws, with `S` the selection of the controlled coordinates (by default each
//! segment's constant-curvature coordinate `q_{j,0}`) and `⁺` the bounded
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

use crate::allocation::{allocate, Allocation};
use crate::arm::{Arm, InputLimits};
use crate::continuation::{continue_root, Residual};
use crate::linalg::{norm, symmetric_eigenvalues};
use crate::statics::{segment_bending, Options, StaticModel, StaticsError};
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

/// The indices in `q` of each segment's constant-curvature coordinate `q_{j,0}`.
pub fn default_controlled(arm: &Arm) -> Vec<usize> {
    (0..arm.segments.len())
        .map(|j| arm.coord_offset(j))
        .collect()
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
    /// Indices in `q` of the controlled coordinates (distinct).
    pub controlled: Vec<usize>,
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
        controlled: Vec<usize>,
        target: Vec<f64>,
        kp: Vec<f64>,
        kd: Vec<f64>,
    ) -> Result<Regulator, String> {
        let h = controlled.len();
        if h == 0 {
            return Err("no controlled coordinates".into());
        }
        for (i, c) in controlled.iter().enumerate() {
            if controlled[..i].contains(c) {
                return Err(format!(
                    "coordinate {} is listed twice",
                    arm.coordinate_labels()[*c]
                ));
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
            controlled,
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
        let b: Vec<f64> = self
            .controlled
            .iter()
            .enumerate()
            .map(|(c, &i)| {
                let pd = self.kp[c] * (lambda * self.target[c] - q[i]) - self.kd[c] * qd[i];
                match self.law {
                    Law::Baseline => pd,
                    Law::Compensated => {
                        let kq: f64 = k[i].iter().zip(q).map(|(a, b)| a * b).sum();
                        pd + kq + lambda * g[i]
                    }
                }
            })
            .collect();
        let m: Matrix = self.controlled.iter().map(|&i| a[i].clone()).collect();
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
        let worst = segment_bending(arm, dq).into_iter().fold(0.0f64, f64::max);
        if worst > opts.max_bending_step {
            opts.max_bending_step / worst
        } else {
            1.0
        }
    }
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

/// Holds the coordinates `held` (index, value) and solves for the other coordinates
/// and the inputs that keep the arm there: the free rows of `K q + G = A u` with
/// `u = (S A)⁺ S (K q + G)`, the rest shape of the zero dynamics under the
/// compensated regulator. More inputs than held coordinates: the minimum-norm inputs.
pub fn hold(
    model: &dyn StaticModel,
    held: &[(usize, f64)],
    opts: &Options,
) -> Result<Rest, ControlError> {
    let arm = model.arm();
    let labels = arm.coordinate_labels();
    let n = arm.n_coords();
    let k = model.stiffness();
    if arm.n_inputs() == 0 {
        return Err(ControlError::Unactuated(
            "the arm has no actuators: no shape can be held".into(),
        ));
    }
    if held.len() > arm.n_inputs() {
        return Err(ControlError::Unactuated(format!(
            "{} held coordinates need at least as many inputs; the arm has {}",
            held.len(),
            arm.n_inputs()
        )));
    }
    let rows: Vec<usize> = held.iter().map(|(i, _)| *i).collect();
    let free: Vec<usize> = (0..n).filter(|i| !rows.contains(i)).collect();
    let assemble = |x: &[f64], lambda: f64| -> Vec<f64> {
        let mut q = vec![0.0; n];
        for (c, &i) in free.iter().enumerate() {
            q[i] = x[c];
        }
        for (i, v) in held {
            q[*i] = lambda * v;
        }
        q
    };
    // The held rows of A must be independent where the solve starts and ends.
    let independent = |q: &[f64]| -> Result<(), ControlError> {
        let t = model.at(q).map_err(StaticsError::OutOfRange)?;
        let m: Matrix = rows.iter().map(|&i| t.a[i].clone()).collect();
        let gram: Matrix = m
            .iter()
            .map(|a| {
                m.iter()
                    .map(|b| a.iter().zip(b).map(|(x, y)| x * y).sum())
                    .collect()
            })
            .collect();
        let eig = symmetric_eigenvalues(&gram);
        let top = eig.last().copied().unwrap_or(0.0);
        if !(eig[0] > 1e-20 * top.max(f64::MIN_POSITIVE)) || top == 0.0 {
            let names: Vec<&str> = rows.iter().map(|&i| labels[i].as_str()).collect();
            return Err(ControlError::Unactuated(format!(
                "the inputs cannot hold {} independently (the rows of A for them are {})",
                names.join(", "),
                if top == 0.0 {
                    "zero: no input acts on them"
                } else {
                    "dependent"
                }
            )));
        }
        Ok(())
    };
    independent(&assemble(&vec![0.0; free.len()], 1.0))?;
    let alloc_at = |q: &[f64], g: &[f64], a: &Matrix, lambda: f64| -> (Vec<f64>, Allocation) {
        let kq = times(&k, q);
        let b: Vec<f64> = rows.iter().map(|&i| kq[i] + lambda * g[i]).collect();
        let m: Matrix = rows.iter().map(|&i| a[i].clone()).collect();
        (b.clone(), allocate(&m, &b, &arm.input_limits))
    };
    let mut residual = |x: &[f64], lambda: f64| -> Result<Residual, StaticsError> {
        let q = assemble(x, lambda);
        let t = model.at(&q).map_err(StaticsError::OutOfRange)?;
        let (_, al) = alloc_at(&q, &t.g, &t.a, lambda);
        let full = static_residual(&times(&k, &q), &t.g, &times(&t.a, &al.u), lambda);
        Ok(Residual {
            r: free.iter().map(|&i| full.r[i]).collect(),
            scale: full.scale,
        })
    };
    let full_limit = bending_limit(arm, opts);
    let limit = |dx: &[f64]| {
        let mut dq = vec![0.0; n];
        for (c, &i) in free.iter().enumerate() {
            dq[i] = dx[c];
        }
        full_limit(&dq)
    };
    let root = continue_root(&mut residual, &limit, vec![0.0; free.len()], opts)?;
    let q = assemble(&root.x, 1.0);
    independent(&q)?;
    let t = model.at(&q).map_err(StaticsError::OutOfRange)?;
    let (b, al) = alloc_at(&q, &t.g, &t.a, 1.0);
    if !al.met(&b, 1e-9) {
        let parts: Vec<String> = rows
            .iter()
            .zip(&al.shortfall)
            .map(|(&i, s)| format!("{}: {s:.3e}", labels[i]))
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
    /// The held values of the controlled coordinates.
    pub held: Vec<(usize, f64)>,
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
    controlled: &[usize],
    tip: [f64; 2],
    opts: &Options,
) -> Result<TipSolution, ControlError> {
    let h = controlled.len();
    let solve_at = |y: &[f64]| -> Result<Rest, ControlError> {
        let held: Vec<(usize, f64)> = controlled.iter().copied().zip(y.iter().copied()).collect();
        hold(model, &held, opts)
    };
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
            let mut full = vec![0.0; model.arm().n_coords()];
            for (c, &i) in controlled.iter().enumerate() {
                full[i] = dy[c];
            }
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
            "the tip cannot be put at ({}, {}) by holding {} coordinate{}: the nearest found \
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
        held: controlled.iter().copied().zip(y).collect(),
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
            default_controlled(arm),
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
        assert!(
            (rest.q[0] - 4.0).abs() < 1e-9 && (rest.q[2] + 3.0).abs() < 1e-9,
            "{:?}",
            rest.q
        );
        assert!(rest.relative_residual < 1e-10);
        let held = hold(&m, &[(0, 4.0), (2, -3.0)], &opts).unwrap();
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
        for (c, &i) in reg.controlled.iter().enumerate() {
            let load: f64 = times(&k, &rest.q)[i] + t.g[i];
            let error = reg.target[c] - rest.q[i];
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
        let e = hold(&m, &[(0, 1.0), (1, 0.0), (2, 1.0)], &opts).unwrap_err();
        assert!(matches!(e, ControlError::Unactuated(_)), "{e}");
        // A limit too low for the shape: the shortfall is reported.
        let limited = ARM.replace(
            "through_segment = 2\npretension = 0.1\n",
            "through_segment = 2\npretension = 0.1\nmax = 0.3\n",
        );
        let arm = parse_arm_str(&limited, "pair.toml").unwrap();
        let model = derive_statics(&arm);
        let m = Derived(Evaluator::new(&model));
        match hold(&m, &[(0, 10.0), (2, -8.0)], &opts).unwrap_err() {
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
        let c = default_controlled(&arm);
        let s = reach_tip(&m, &c, [0.12, 0.09], &opts).unwrap();
        assert!(s.miss < 1e-9, "{}", s.miss);
        assert!((s.rest.tip_pose[0] - 0.12).abs() < 1e-9);
        let e = reach_tip(&m, &c, [0.3, 0.0], &opts).unwrap_err();
        assert!(matches!(e, ControlError::Unreachable(_)), "{e}");
    }
}
