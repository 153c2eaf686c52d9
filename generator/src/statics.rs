//! Statics of the model: where the arm comes to rest under given inputs.
//!
//! The equilibrium solves `R(q) = K q + G(q) − A(q) u = 0` by damped Newton with the
//! Jacobian `K + ∂G/∂q − ∂(A u)/∂q` and load continuation: gravity and inputs are
//! scaled by a load factor λ raised from 0 (the straight rest shape) to 1, each step
//! started from the previous equilibrium along its tangent, so that the branch found
//! is the one the arm reaches when the load is applied slowly. Every load here is
//! conservative, so the Jacobian is the Hessian of the potential energy: the
//! equilibrium is stable when its smallest eigenvalue is positive.
//!
//! Two models answer the solver's questions ([`StaticModel`]): the derived model with
//! exact derivatives ([`Derived`], from [`crate::derive::derive_statics`]), and the
//! quadrature reference of the exact or truncated kinematics ([`Quadrature`]), with the
//! exact derivatives of its integrands.
//!
//! Also the linear estimate around the straight rest shape, `K q = A(0) u`, which
//! tells cheaply (no derivation) whether an input is anywhere near what the arm's
//! stiffness can take.

use crate::arm::Arm;
use crate::dynamics::{cholesky_solve, DynamicsError};
use crate::evaluate::Evaluator;
use crate::linalg::{norm, solve, symmetric_eigenvalues};
use crate::reference::{Kinematics, Reference};
use crate::terms::{Matrix, StaticTerms};
use std::fmt;

/// A model the static solver can question.
pub trait StaticModel {
    fn arm(&self) -> &Arm;
    /// `K`, n×n.
    fn stiffness(&self) -> Matrix;
    /// `G`, `A`, their derivatives and the tip pose at `q`; an error when `q` is beyond
    /// what the model evaluates.
    fn at(&self, q: &[f64]) -> Result<StaticTerms, String>;
}

/// The derived model, with exact derivatives.
pub struct Derived<'m>(pub Evaluator<'m>);

impl StaticModel for Derived<'_> {
    fn arm(&self) -> &Arm {
        self.0.arm()
    }
    fn stiffness(&self) -> Matrix {
        let n = self.0.arm().n_coords();
        self.0.terms(&vec![0.0; n], &vec![0.0; n]).k
    }
    fn at(&self, q: &[f64]) -> Result<StaticTerms, String> {
        self.0.static_terms(q).ok_or_else(|| {
            "the model was derived without its statics derivatives (derive_statics)".into()
        })
    }
}

/// The quadrature reference (exact or truncated kinematics), with the exact
/// derivatives of its integrands.
pub struct Quadrature<'a>(pub Reference<'a>);

impl StaticModel for Quadrature<'_> {
    fn arm(&self) -> &Arm {
        self.0.arm()
    }
    fn stiffness(&self) -> Matrix {
        self.0.stiffness()
    }
    fn at(&self, q: &[f64]) -> Result<StaticTerms, String> {
        self.0.check_configuration(q)?;
        Ok(self.0.static_terms(q))
    }
}

/// How hard the solver tries.
#[derive(Clone, Copy, Debug)]
pub struct Options {
    /// Converged when `‖R‖ ≤ tolerance · (‖K q‖ + ‖G‖ + ‖A u‖)`.
    pub tolerance: f64,
    /// Newton iterations per continuation step before the step is halved.
    pub iterations_per_step: usize,
    /// Most Newton iterations in all.
    pub max_iterations: usize,
    /// Smallest load step before giving up.
    pub min_step: f64,
    /// Largest change of any segment's bending `L Σ|Δq|` in one Newton iteration
    /// [rad]: keeps the iteration on the branch it follows.
    pub max_bending_step: f64,
}

impl Default for Options {
    fn default() -> Self {
        Options {
            tolerance: 1e-12,
            iterations_per_step: 12,
            max_iterations: 2000,
            min_step: 1e-6,
            max_bending_step: 0.5,
        }
    }
}

/// A solved equilibrium.
#[derive(Clone, Debug)]
pub struct Equilibrium {
    pub q: Vec<f64>,
    pub tip_pose: [f64; 3],
    /// `‖K q + G − A u‖₂` at `q`.
    pub residual: f64,
    /// The residual over `‖K q‖ + ‖G‖ + ‖A u‖`.
    pub relative_residual: f64,
    /// Newton iterations in all, and continuation steps taken.
    pub iterations: usize,
    pub load_steps: usize,
    /// Smallest eigenvalue of the symmetric part of the Jacobian at `q`.
    pub min_eigenvalue: f64,
    /// `min_eigenvalue > 0`: a local minimum of the potential energy.
    pub stable: bool,
}

/// Why no equilibrium was returned.
#[derive(Clone, Debug, PartialEq)]
pub enum StaticsError {
    /// The continuation stalled: the load fraction reached, the last residual, and
    /// where the shape is known (the equilibria of [`equilibrium`]) the segment that
    /// turns most at the last equilibrium on the way ([`most_turned`]).
    NotConverged {
        load: f64,
        residual: f64,
        iterations: usize,
        turn: Option<(usize, f64)>,
    },
    /// A configuration the model cannot evaluate (the reference's bending bound).
    OutOfRange(String),
    /// Wrong number of inputs, or non-finite ones.
    BadInput(String),
}

impl fmt::Display for StaticsError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            StaticsError::NotConverged {
                load,
                residual,
                iterations,
                turn,
            } => {
                write!(
                    f,
                    "no equilibrium found: the load continuation stalled at {:.1}% of the load",
                    100.0 * load
                )?;
                if let Some((j, t)) = turn {
                    write!(f, ", where segment {} turns by {t:.2} rad,", j + 1)?;
                }
                write!(
                    f,
                    " after {iterations} Newton iterations, last residual {residual:.3e}"
                )
            }
            StaticsError::OutOfRange(m) | StaticsError::BadInput(m) => f.write_str(m),
        }
    }
}

impl std::error::Error for StaticsError {}

/// Residual and Jacobian of `K q + λ (G(q) − A(q) u)`, and the scale the residual is
/// measured against.
struct Linearised {
    r: Vec<f64>,
    jac: Matrix,
    /// `G − A u`, the residual's derivative in λ.
    load: Vec<f64>,
    scale: f64,
    tip_pose: [f64; 3],
}

fn linearise(
    model: &dyn StaticModel,
    k: &Matrix,
    q: &[f64],
    u: &[f64],
    lambda: f64,
) -> Result<Linearised, StaticsError> {
    let t = model.at(q).map_err(StaticsError::OutOfRange)?;
    let n = q.len();
    let kq: Vec<f64> = (0..n)
        .map(|i| (0..n).map(|c| k[i][c] * q[c]).sum())
        .collect();
    let au: Vec<f64> = (0..n)
        .map(|i| t.a[i].iter().zip(u).map(|(a, u)| a * u).sum())
        .collect();
    let load: Vec<f64> = (0..n).map(|i| t.g[i] - au[i]).collect();
    let r: Vec<f64> = (0..n).map(|i| kq[i] + lambda * load[i]).collect();
    let jac: Matrix = (0..n)
        .map(|i| {
            (0..n)
                .map(|x| {
                    let dau: f64 = t.da[x][i].iter().zip(u).map(|(a, u)| a * u).sum();
                    k[i][x] + lambda * (t.dg[i][x] - dau)
                })
                .collect()
        })
        .collect();
    let scale = norm(&kq) + lambda * (norm(&t.g) + norm(&au)) + f64::MIN_POSITIVE;
    if !(r.iter().chain(jac.iter().flatten()).all(|v| v.is_finite())) {
        return Err(StaticsError::OutOfRange(
            "the model is not finite at a configuration the solver reached".into(),
        ));
    }
    Ok(Linearised {
        r,
        jac,
        load,
        scale,
        tip_pose: t.tip_pose,
    })
}

/// The equilibrium under inputs `u` (and the arm's gravity), reached by raising the
/// load from the straight rest shape.
pub fn equilibrium(
    model: &dyn StaticModel,
    u: &[f64],
    opts: &Options,
) -> Result<Equilibrium, StaticsError> {
    let arm = model.arm();
    let n = arm.n_coords();
    if u.len() != arm.n_inputs() || !u.iter().all(|v| v.is_finite()) {
        return Err(StaticsError::BadInput(format!(
            "expected {} finite inputs, got {:?}",
            arm.n_inputs(),
            u
        )));
    }
    let k = model.stiffness();
    // The largest factor ≤ 1 that keeps every segment's bending change within bounds.
    let limit = |dq: &[f64]| -> f64 {
        let worst = most_bent(arm, dq);
        if worst > opts.max_bending_step {
            opts.max_bending_step / worst
        } else {
            1.0
        }
    };
    let mut q = vec![0.0; n];
    let (mut lambda, mut step) = (0.0f64, 1.0f64);
    let mut iterations = 0usize;
    let mut load_steps = 0usize;
    let mut last_residual = 0.0;
    while lambda < 1.0 {
        // Predictor: along the tangent dq/dλ = −J⁻¹ (G − A u) at the last equilibrium,
        // with the load step cut so that it bends no segment by more than the limit:
        // the continuation then follows the branch instead of jumping to another.
        let here = linearise(model, &k, &q, u, lambda)?;
        let tangent: Vec<f64> = solve(&here.jac, &here.load)
            .map(|t| t.iter().map(|v| -v).collect())
            .unwrap_or_else(|| vec![0.0; n]);
        let mut dl = step.min(1.0 - lambda);
        let reach = most_bent(arm, &tangent);
        if reach * dl > opts.max_bending_step {
            dl = (opts.max_bending_step / reach).max(opts.min_step);
        }
        let target = if lambda + dl >= 1.0 - 1e-15 {
            1.0
        } else {
            lambda + dl
        };
        let mut trial: Vec<f64> = (0..n)
            .map(|i| q[i] + (target - lambda) * tangent[i])
            .collect();
        // Corrector: damped Newton at λ = target.
        let mut converged = false;
        for _ in 0..opts.iterations_per_step {
            if iterations >= opts.max_iterations {
                break;
            }
            iterations += 1;
            let lin = linearise(model, &k, &trial, u, target)?;
            let res = norm(&lin.r);
            last_residual = res;
            if res <= opts.tolerance * lin.scale {
                converged = true;
                break;
            }
            let Some(s) = solve(&lin.jac, &lin.r) else {
                break;
            };
            let dq: Vec<f64> = s.iter().map(|v| -v).collect();
            let mut alpha = limit(&dq);
            // Backtracking on ‖R‖: accept the first step that lowers it.
            let mut accepted = false;
            for _ in 0..20 {
                let cand: Vec<f64> = (0..n).map(|i| trial[i] + alpha * dq[i]).collect();
                match linearise(model, &k, &cand, u, target) {
                    Ok(c) if norm(&c.r) < res || norm(&c.r) <= opts.tolerance * c.scale => {
                        trial = cand;
                        accepted = true;
                        break;
                    }
                    _ => alpha *= 0.5,
                }
            }
            if !accepted {
                break;
            }
        }
        if converged {
            q = trial;
            lambda = target;
            load_steps += 1;
            step = (2.0 * dl).min(1.0);
        } else {
            step = 0.5 * dl;
            if step < opts.min_step || iterations >= opts.max_iterations {
                return Err(StaticsError::NotConverged {
                    load: lambda,
                    residual: last_residual,
                    iterations,
                    turn: (lambda > 0.0).then(|| most_turned(arm, &q)),
                });
            }
        }
    }
    finish(model, &k, q, u, iterations, load_steps)
}

/// The equilibrium at `q` (full load): its residual, tip pose and stability.
fn finish(
    model: &dyn StaticModel,
    k: &Matrix,
    q: Vec<f64>,
    u: &[f64],
    iterations: usize,
    load_steps: usize,
) -> Result<Equilibrium, StaticsError> {
    let lin = linearise(model, k, &q, u, 1.0)?;
    let residual = norm(&lin.r);
    let min_eigenvalue = symmetric_eigenvalues(&lin.jac)
        .first()
        .copied()
        .unwrap_or(f64::INFINITY);
    Ok(Equilibrium {
        tip_pose: lin.tip_pose,
        residual,
        relative_residual: residual / lin.scale,
        q,
        iterations,
        load_steps,
        min_eigenvalue,
        stable: min_eigenvalue > 0.0,
    })
}

/// Newton at full load from `start`, a nearby equilibrium of a model that agrees with
/// `model` (the derived model's, refined on the reference's equations): the root of
/// `model` on the branch `start` lies on, in a few iterations instead of a whole
/// continuation. Fails when it does not converge within `2 · iterations_per_step`.
pub fn refine(
    model: &dyn StaticModel,
    start: &[f64],
    u: &[f64],
    opts: &Options,
) -> Result<Equilibrium, StaticsError> {
    let k = model.stiffness();
    let mut q = start.to_vec();
    let mut residual = f64::INFINITY;
    for iteration in 0..2 * opts.iterations_per_step {
        let lin = linearise(model, &k, &q, u, 1.0)?;
        residual = norm(&lin.r);
        if residual <= opts.tolerance * lin.scale {
            return finish(model, &k, q, u, iteration, 0);
        }
        let Some(s) = solve(&lin.jac, &lin.r) else {
            break;
        };
        q = q.iter().zip(&s).map(|(a, b)| a - b).collect();
    }
    Err(StaticsError::NotConverged {
        load: 1.0,
        residual,
        iterations: 2 * opts.iterations_per_step,
        turn: None,
    })
}

/// How many expansion orders above the arm's own [`order_advice`] tries.
pub const ADVICE_ORDERS: u32 = 4;

/// What a truncated model that found no equilibrium is missing, when the arm's exact
/// kinematics do have one: the expansion does not hold at the bending the arm reaches.
/// A heavy arm standing against gravity at orders 1 and 2 stalls this way at a fold of
/// its truncated model (four of 200 invented arms did), while the exact kinematics
/// and the orders above rest with a segment bent by 3–4 rad.
#[derive(Clone, Debug, PartialEq)]
pub struct OrderAdvice {
    /// The segment that turns most at the exact kinematics' equilibrium, and its turn
    /// [rad] ([`most_turned`]).
    pub exact_turn: (usize, f64),
    /// The lowest order above the arm's (at most [`ADVICE_ORDERS`] above, and at most
    /// [`crate::arm::MAX_EXPANSION_ORDER`]) whose truncated model has an equilibrium.
    pub order: Option<u32>,
    /// The highest order tried.
    pub tried_up_to: u32,
}

/// Advice for an arm whose order-`N` model found no equilibrium under `u`: `None` when
/// the exact kinematics (quadrature) find none either, so that the order is not the
/// cause. Costs a few continuations of the quadrature reference (about 0.1 s on a
/// three-segment arm).
pub fn order_advice(arm: &Arm, u: &[f64], opts: &Options) -> Option<OrderAdvice> {
    let exact = equilibrium(&Quadrature(Reference::new(arm, Kinematics::Exact)), u, opts).ok()?;
    let from = arm.expansion_order + 1;
    let tried_up_to = (arm.expansion_order + ADVICE_ORDERS).min(crate::arm::MAX_EXPANSION_ORDER);
    let order = (from..=tried_up_to).find(|&m| {
        let model = Quadrature(Reference::new(arm, Kinematics::Truncated(m)));
        equilibrium(&model, u, opts).is_ok()
    });
    Some(OrderAdvice {
        exact_turn: most_turned(arm, &exact.q),
        order,
        tried_up_to,
    })
}

impl OrderAdvice {
    /// The advice as a clause for an error message, for an arm file read at `order`.
    pub fn sentence(&self, order: u32) -> String {
        let (j, turn) = self.exact_turn;
        let head = format!(
            "the exact kinematics do rest, where segment {} turns by {turn:.2} rad, beyond \
             what the order-{order} expansion holds",
            j + 1
        );
        match self.order {
            Some(m) => format!(
                "{head}; order {m} finds the rest shape: set expansion_order = {m} in the arm \
                 file, or pass --order {m}"
            ),
            None if self.tried_up_to > order => format!(
                "{head}, and no order up to {} finds it either",
                self.tried_up_to
            ),
            None => format!("{head}, and no higher order is supported"),
        }
    }
}

/// How far the shape of an equilibrium `q` under `u` can move per unit of the relative
/// residual the solver stops at (`‖R‖ / scale`, see [`equilibrium`]): `‖J⁻¹‖₁ · scale /
/// ‖q‖₂` (`J` the residual's Jacobian), at least 1; 1e300 where `J` is singular to
/// working precision. An estimate up to the norms' `√n`: what the emitted code's tests
/// scale their equilibrium tolerance by.
pub fn shape_gain(model: &dyn StaticModel, q: &[f64], u: &[f64]) -> Result<f64, StaticsError> {
    let lin = linearise(model, &model.stiffness(), q, u, 1.0)?;
    let n = q.len();
    let mut inverse = 0.0f64;
    for col in 0..n {
        let e: Vec<f64> = (0..n).map(|i| f64::from(u8::from(i == col))).collect();
        match solve(&lin.jac, &e) {
            Some(x) => inverse = inverse.max(x.iter().map(|v| v.abs()).sum()),
            None => return Ok(1e300),
        }
    }
    let size = norm(q);
    Ok(if size > 0.0 {
        (inverse * lin.scale / size).max(1.0)
    } else {
        1.0
    })
}

/// The rest shape of the linear model around `q = 0` under inputs `u`, gravity left
/// out: `q = K⁻¹ A(0) u`.
pub fn linear_rest_shape(arm: &Arm, u: &[f64]) -> Result<Vec<f64>, DynamicsError> {
    let r = Reference::new(arm, Kinematics::Truncated(arm.expansion_order));
    let n = arm.n_coords();
    let a = r.actuation(&vec![0.0; n]);
    let rhs: Vec<f64> = a
        .iter()
        .map(|row| row.iter().zip(u).map(|(aik, uk)| aik * uk).sum())
        .collect();
    cholesky_solve(&r.stiffness(), &rhs)
}

/// The segment whose end tangent turns most against its base tangent at `q`, and that
/// turn `|Φ_j − Φ_{j−1}| = |L_j Σ_i q_{j,i}/(i+1)|` [rad]: how bent a shape is, in words
/// a user can picture.
pub fn most_turned(arm: &Arm, q: &[f64]) -> (usize, f64) {
    let mut worst = (0, 0.0f64);
    for (j, s) in arm.segments.iter().enumerate() {
        let off = arm.coord_offset(j);
        let l = num_traits::ToPrimitive::to_f64(&s.length).unwrap_or(f64::NAN);
        let turn = (l * q[off..off + s.n_coords()]
            .iter()
            .enumerate()
            .map(|(i, v)| v / (i + 1) as f64)
            .sum::<f64>())
        .abs();
        if turn > worst.1 {
            worst = (j, turn);
        }
    }
    worst
}

/// The largest [`segment_bending`] at `q` [rad].
pub fn most_bent(arm: &Arm, q: &[f64]) -> f64 {
    segment_bending(arm, q).into_iter().fold(0.0f64, f64::max)
}

/// Total bending `L_j Σ_i |q_{j,i}|` [rad] of each segment at `q`.
pub fn segment_bending(arm: &Arm, q: &[f64]) -> Vec<f64> {
    arm.segments
        .iter()
        .enumerate()
        .map(|(j, s)| {
            let off = arm.coord_offset(j);
            let l = num_traits::ToPrimitive::to_f64(&s.length).unwrap_or(f64::NAN);
            l * q[off..off + s.n_coords()]
                .iter()
                .map(|v| v.abs())
                .sum::<f64>()
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::arm::parse_arm_str;
    use crate::derive::derive_statics;

    fn arm(text: &str) -> Arm {
        parse_arm_str(text, "t.toml").unwrap()
    }

    #[test]
    fn a_uniform_moment_bends_to_m_over_ei_through_the_nonlinear_solver() {
        // Pure bending by an end moment: κ = M/EI exactly, a circular arc (common
        // practice). Degree 2 must find the higher coefficients zero.
        let a = arm(
            "name = \"m\"\n[[segment]]\nlength = 0.2\ncurvature_degree = 2\n\
                     density = 0.1\nbending_stiffness = 0.04\n[[actuator]]\nkind = \"moment\"\n\
                     segment = 1\n",
        );
        let model = derive_statics(&a);
        let eq = equilibrium(
            &Derived(Evaluator::new(&model)),
            &[0.3],
            &Options::default(),
        )
        .unwrap();
        let kappa = 0.3 / 0.04;
        assert!((eq.q[0] - kappa).abs() < 1e-12 * kappa, "{:?}", eq.q);
        assert!(eq.q[1].abs() < 1e-10 && eq.q[2].abs() < 1e-10, "{:?}", eq.q);
        let theta = kappa * 0.2;
        assert!((eq.tip_pose[0] - theta.sin() / kappa).abs() < 1e-12);
        assert!((eq.tip_pose[1] - (1.0 - theta.cos()) / kappa).abs() < 1e-12);
        assert!(eq.stable && eq.min_eigenvalue > 0.0);
    }

    #[test]
    fn exact_static_derivatives_agree_with_the_reference() {
        // ∂G/∂q and ∂A/∂q of the derivation against the independent quadrature's own
        // exact derivatives (same truncated kinematics), and those against central
        // differences of the quadrature's G and A, so that neither derivative is only
        // checked against itself.
        let a = arm(include_str!("../../examples/hanging_taper.toml"));
        let model = derive_statics(&a);
        let derived = Derived(Evaluator::new(&model));
        let quad = Reference::new(&a, Kinematics::Truncated(a.expansion_order));
        let n = a.n_coords();
        let bent: Vec<f64> = (0..n)
            .map(|i| 3.0 * ((i as f64 + 1.0) * 1.3).sin())
            .collect();
        let max = |v: &mut dyn Iterator<Item = f64>| v.fold(0.0f64, |m, x| m.max(x.abs()));
        for q in [vec![0.0; n], bent] {
            let d = derived.at(&q).unwrap();
            let r = Quadrature(Reference::new(&a, Kinematics::Truncated(a.expansion_order)))
                .at(&q)
                .unwrap();
            let size = max(&mut d.dg.iter().flatten().copied());
            for (x, y) in d.dg.iter().flatten().zip(r.dg.iter().flatten()) {
                assert!((x - y).abs() <= 1e-12 * size, "dG: {x} vs {y}");
            }
            let size = max(&mut d.da.iter().flatten().flatten().copied());
            assert!(size > 0.0, "the tip force makes A depend on q");
            for (x, y) in
                d.da.iter()
                    .flatten()
                    .flatten()
                    .zip(r.da.iter().flatten().flatten())
            {
                assert!((x - y).abs() <= 1e-12 * size, "dA: {x} vs {y}");
            }
            // Central differences, step 1e-5: truncation error about 1e-10 relative.
            let h = 1e-5;
            for x in 0..n {
                let (mut qp, mut qm) = (q.clone(), q.clone());
                qp[x] += h;
                qm[x] -= h;
                let (gp, gm) = (quad.gravity(&qp), quad.gravity(&qm));
                let (ap, am) = (quad.actuation(&qp), quad.actuation(&qm));
                let gsize = max(&mut r.dg.iter().flatten().copied());
                for i in 0..n {
                    let fd = (gp[i] - gm[i]) / (2.0 * h);
                    assert!((fd - r.dg[i][x]).abs() <= 1e-7 * gsize, "dG[{i}][{x}]");
                    for c in 0..a.n_inputs() {
                        let fd = (ap[i][c] - am[i][c]) / (2.0 * h);
                        assert!((fd - r.da[x][i][c]).abs() <= 1e-7, "dA[{x}][{i}][{c}]");
                    }
                }
            }
        }
    }

    #[test]
    fn an_arm_bent_beyond_its_order_is_told_the_order_that_rests() {
        // Invented: mounted 70° above the horizontal with a heavy payload. Its order-1
        // model stalls at a fold on the way to the load; the exact kinematics rest.
        let upright = arm(include_str!(
            "../../tests/hostile/upright_at_order_one.toml"
        ));
        let model = derive_statics(&upright);
        let err =
            equilibrium(&Derived(Evaluator::new(&model)), &[], &Options::default()).unwrap_err();
        let StaticsError::NotConverged {
            load,
            turn: Some((0, stalled)),
            ..
        } = err
        else {
            panic!("{err:?}");
        };
        assert!(load > 0.3 && load < 0.9 && stalled > 0.5, "{err:?}");
        let advice = order_advice(&upright, &[], &Options::default()).unwrap();
        assert_eq!(advice.order, Some(2), "{advice:?}");
        assert_eq!(advice.exact_turn.0, 0);
        assert!(advice.exact_turn.1 > stalled, "{advice:?}");
        // What the advice promises holds: order 2 rests.
        let two = derive_statics(&upright.with_order(2));
        assert!(equilibrium(&Derived(Evaluator::new(&two)), &[], &Options::default()).is_ok());
        // A limp arm is not the order's fault: no advice.
        let limp = arm(include_str!(
            "../../tests/hostile/too_soft_to_hold_itself.toml"
        ));
        assert_eq!(order_advice(&limp, &[], &Options::default()), None);
    }

    #[test]
    fn a_column_standing_on_its_base_buckles_under_its_own_weight() {
        // A uniform column standing on its clamped base buckles under its own weight
        // at ρ g L³/EI = 7.837 (Greenhill; Timoshenko & Gere, Theory of Elastic
        // Stability, §2.12; quoted from memory). Gravity along −x pushes the straight
        // arm (along +x) onto its base; the straight shape stays an equilibrium by
        // symmetry, and its stability flips at the critical load.
        let (l, rho, ei) = (0.2, 0.5, 0.01);
        for (factor, stable) in [(0.9, true), (1.1, false)] {
            let g = factor * 7.837 * ei / (rho * l * l * l);
            let a = arm(&format!(
                "name = \"column\"\nexpansion_order = 2\ngravity = [{}, 0.0]\n[[segment]]\n\
                 length = {l}\ncurvature_degree = 4\ndensity = {rho}\nbending_stiffness = {ei}\n",
                -(g * 1e6f64).round() / 1e6
            ));
            let model = derive_statics(&a);
            let eq =
                equilibrium(&Derived(Evaluator::new(&model)), &[], &Options::default()).unwrap();
            assert_eq!(
                eq.stable, stable,
                "factor {factor}: {:?}",
                eq.min_eigenvalue
            );
            assert!(eq.q.iter().all(|v| v.abs() < 1e-12), "{:?}", eq.q);
        }
    }

    #[test]
    fn a_uniform_end_moment_bends_a_segment_to_m_over_ei() {
        // Pure bending of a uniform segment: κ = M / EI (common practice).
        let arm = parse_arm_str(
            "name = \"m\"\n[[segment]]\nlength = 0.2\ncurvature_degree = 2\ndensity = 0.1\n\
             bending_stiffness = 0.04\n[[actuator]]\nkind = \"moment\"\nsegment = 1\n",
            "m.toml",
        )
        .unwrap();
        let q = linear_rest_shape(&arm, &[0.01]).unwrap();
        assert!((q[0] - 0.01 / 0.04).abs() < 1e-12, "{q:?}");
        assert!(q[1].abs() < 1e-12 && q[2].abs() < 1e-12, "{q:?}");
        assert!((segment_bending(&arm, &q)[0] - 0.2 * 0.25).abs() < 1e-12);
    }
}
