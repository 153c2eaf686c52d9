//! Double-precision evaluation of a derived [`Model`].
//!
//! Evaluates exactly the program the emitters will print, node by node in program
//! order; the runtime leaves (trigonometry and Legendre moments) come from
//! [`crate::moments`]. Used by `arcwright eval`, by the cross-checks against the
//! numeric reference, and by later commands.

use crate::derive::Model;
use crate::ir::{Id, Node, Var};
use crate::moments::legendre_moments;
use crate::terms::{Matrix, StaticTerms, Terms};
use num_traits::ToPrimitive;

/// One step of a tape; operands are positions in the tape's value array.
#[derive(Clone, Copy, Debug)]
enum Step {
    Load(Var),
    Add(u32, u32),
    Mul(u32, u32),
    Neg(u32),
}

/// A compiled evaluation order for one group of outputs: the live constants first
/// (copied, not recomputed), then one step per live input or operation, each reading
/// earlier positions. Compact and in order, so one evaluation streams through it
/// instead of visiting the whole program's node table.
struct Tape {
    consts: Vec<f64>,
    steps: Vec<Step>,
    /// Position of each program node in the value array (`u32::MAX`: not on this tape).
    at: Vec<u32>,
}

/// Values of one tape's evaluation, read by program node.
struct Values<'t> {
    tape: &'t Tape,
    v: Vec<f64>,
}

impl Values<'_> {
    fn get(&self, id: Id) -> f64 {
        self.v[self.tape.at[id.index()] as usize]
    }
}

pub struct Evaluator<'m> {
    model: &'m Model,
    /// Moments needed per segment (`max n + 1`), main program and pose programs.
    moments: Vec<usize>,
    pose_moments: Vec<usize>,
    main: Tape,
    poses: Vec<Tape>,
    /// The statics roots, when the model has them.
    statics: Option<Tape>,
    /// The regressor, when the model has it (a parametric model's).
    regressor: Option<Tape>,
    /// Values of the runtime parameters a parametric model reads (the arm file's,
    /// unless [`Evaluator::with_params`] changed them).
    params: Vec<f64>,
}

/// Inputs of one evaluation.
struct State<'a> {
    q: &'a [f64],
    qd: &'a [f64],
    /// Accelerations, read by the regressor only (empty elsewhere).
    qdd: &'a [f64],
    sigma: f64,
    nu: Vec<(Vec<f64>, Vec<f64>)>,
    pose_nu: Vec<(Vec<f64>, Vec<f64>)>,
    cos_phi: Vec<f64>,
    sin_phi: Vec<f64>,
}

impl<'m> Evaluator<'m> {
    pub fn new(model: &'m Model) -> Self {
        let prog = &model.program;
        let segs = model.arm.segments.len();
        let mut moments = vec![0usize; segs];
        let mut pose_moments = vec![0usize; segs];
        for node in prog.nodes() {
            match node {
                Node::Var(Var::Nu { seg, n, .. }) => {
                    let m = &mut moments[*seg as usize];
                    *m = (*m).max(*n as usize + 1);
                }
                Node::Var(Var::PoseNu { seg, n, .. }) => {
                    let m = &mut pose_moments[*seg as usize];
                    *m = (*m).max(*n as usize + 1);
                }
                _ => {}
            }
        }
        let main = Tape::new(model, &main_roots(model));
        let poses = model.pose.iter().map(|p| Tape::new(model, p)).collect();
        let statics = model.statics.as_ref().map(|s| {
            let mut roots = model.gravity.clone();
            roots.extend(model.actuation.iter().flatten());
            roots.extend(model.tip_pose);
            roots.extend(s.gravity_jacobian.iter().flatten());
            roots.extend(s.actuation_jacobian.iter().flatten().flatten());
            Tape::new(model, &roots)
        });
        Evaluator {
            model,
            moments,
            pose_moments,
            main,
            poses,
            statics,
            regressor: model
                .regressor
                .as_ref()
                .map(|y| Tape::new(model, &y.iter().flatten().copied().collect::<Vec<_>>())),
            params: crate::params::ParamLayout::of(&model.arm).defaults_f64(&model.arm),
        }
    }

    /// The same evaluator at parameter values `theta` ([`crate::params::ParamLayout`]
    /// order). Only a parametric model ([`Model::parametric`]) reads them.
    pub fn with_params(mut self, theta: &[f64]) -> Self {
        self.set_params(theta);
        self
    }

    /// Changes the runtime parameters in place (see [`Evaluator::with_params`]).
    pub fn set_params(&mut self, theta: &[f64]) {
        assert_eq!(theta.len(), self.params.len(), "parameter vector length");
        self.params.copy_from_slice(theta);
    }

    fn state<'a>(
        &self,
        q: &'a [f64],
        qd: &'a [f64],
        sigma: f64,
        pose_seg: Option<usize>,
    ) -> State<'a> {
        let arm = &self.model.arm;
        let mut nu = Vec::new();
        let mut pose_nu = Vec::new();
        let mut cos_phi = Vec::new();
        let mut sin_phi = Vec::new();
        let mut phi = 0.0;
        for (j, seg) in arm.segments.iter().enumerate() {
            let off = arm.coord_offset(j);
            let l = seg.length.to_f64().unwrap_or(f64::NAN);
            let a = l * q[off];
            let mut re = vec![0.0; self.moments[j]];
            let mut im = vec![0.0; self.moments[j]];
            legendre_moments(a, &mut re, &mut im);
            nu.push((re, im));
            let pm = if pose_seg == Some(j) {
                self.pose_moments[j]
            } else {
                0
            };
            let mut re = vec![0.0; pm];
            let mut im = vec![0.0; pm];
            if pm > 0 {
                legendre_moments(a * sigma, &mut re, &mut im);
            }
            pose_nu.push((re, im));
            for i in 0..seg.n_coords() {
                phi += l * q[off + i] / (i + 1) as f64;
            }
            cos_phi.push(phi.cos());
            sin_phi.push(phi.sin());
        }
        State {
            q,
            qd,
            qdd: &[],
            sigma,
            nu,
            pose_nu,
            cos_phi,
            sin_phi,
        }
    }

    fn run<'t>(&self, tape: &'t Tape, st: &State) -> Values<'t> {
        let mut v = Vec::with_capacity(tape.consts.len() + tape.steps.len());
        v.extend_from_slice(&tape.consts);
        for step in &tape.steps {
            let x = match *step {
                Step::Load(var) => match var {
                    Var::Q(k) => st.q[k as usize],
                    Var::Qd(k) => st.qd[k as usize],
                    // Only the regressor reads accelerations; NaN shows a mistake.
                    Var::Qdd(k) => st.qdd.get(k as usize).copied().unwrap_or(f64::NAN),
                    Var::Sigma => st.sigma,
                    Var::Nu { seg, n, im } => {
                        let (re, imv) = &st.nu[seg as usize];
                        if im {
                            imv[n as usize]
                        } else {
                            re[n as usize]
                        }
                    }
                    Var::PoseNu { seg, n, im } => {
                        let (re, imv) = &st.pose_nu[seg as usize];
                        if im {
                            imv[n as usize]
                        } else {
                            re[n as usize]
                        }
                    }
                    Var::CosPhi(j) => st.cos_phi[j as usize],
                    Var::SinPhi(j) => st.sin_phi[j as usize],
                    Var::Param(k) => self.params[k as usize],
                },
                Step::Add(a, b) => v[a as usize] + v[b as usize],
                Step::Mul(a, b) => v[a as usize] * v[b as usize],
                Step::Neg(a) => -v[a as usize],
            };
            v.push(x);
        }
        Values { tape, v }
    }

    /// The arm the model was derived for.
    pub fn arm(&self) -> &'m crate::arm::Arm {
        &self.model.arm
    }

    /// All terms at `(q, q̇)`.
    pub fn terms(&self, q: &[f64], qd: &[f64]) -> Terms {
        let m = self.model;
        let st = self.state(q, qd, 0.0, None);
        let v = self.run(&self.main, &st);
        let mat = |ids: &Vec<Vec<Id>>| -> Matrix {
            ids.iter()
                .map(|r| r.iter().map(|id| v.get(*id)).collect())
                .collect()
        };
        Terms {
            n: m.n,
            b: mat(&m.inertia),
            c: mat(&m.coriolis),
            g: m.gravity.iter().map(|id| v.get(*id)).collect(),
            k: mat(&m.stiffness),
            d: mat(&m.damping),
            a: mat(&m.actuation),
            tip_pose: [
                v.get(m.tip_pose[0]),
                v.get(m.tip_pose[1]),
                v.get(m.tip_pose[2]),
            ],
            tip_jacobian: mat(&m.tip_jacobian),
            kinetic_energy: v.get(m.kinetic_energy),
            potential_energy: v.get(m.potential_energy),
        }
    }

    /// The regressor `Y(q, q̇, q̈)`, n × [`crate::params::ParamLayout::linear_len`], at
    /// the evaluator's gravity; `None` for a model without it (a folded one).
    pub fn regressor(&self, q: &[f64], qd: &[f64], qdd: &[f64]) -> Option<Matrix> {
        let (tape, y) = (self.regressor.as_ref()?, self.model.regressor.as_ref()?);
        let mut st = self.state(q, qd, 0.0, None);
        st.qdd = qdd;
        let v = self.run(tape, &st);
        Some(
            y.iter()
                .map(|r| r.iter().map(|id| v.get(*id)).collect())
                .collect(),
        )
    }

    /// `G`, `A`, their `q`-derivatives and the tip pose at `q`; `None` for a model
    /// derived without them (see [`crate::derive::derive_statics`]).
    pub fn static_terms(&self, q: &[f64]) -> Option<StaticTerms> {
        let (m, tape, s) = (
            self.model,
            self.statics.as_ref()?,
            self.model.statics.as_ref()?,
        );
        let st = self.state(q, &[], 0.0, None);
        let v = self.run(tape, &st);
        let mat = |ids: &Vec<Vec<Id>>| -> Matrix {
            ids.iter()
                .map(|r| r.iter().map(|id| v.get(*id)).collect())
                .collect()
        };
        Some(StaticTerms {
            g: m.gravity.iter().map(|id| v.get(*id)).collect(),
            dg: mat(&s.gravity_jacobian),
            a: mat(&m.actuation),
            da: s.actuation_jacobian.iter().map(mat).collect(),
            tip_pose: [
                v.get(m.tip_pose[0]),
                v.get(m.tip_pose[1]),
                v.get(m.tip_pose[2]),
            ],
        })
    }

    /// Backbone `[x, y, angle]` at `σ ∈ [0, 1]` of segment `seg` (0-based).
    pub fn pose(&self, q: &[f64], seg: usize, sigma: f64) -> [f64; 3] {
        let st = self.state(q, &[], sigma, Some(seg));
        let v = self.run(&self.poses[seg], &st);
        let p = self.model.pose[seg];
        [v.get(p[0]), v.get(p[1]), v.get(p[2])]
    }
}

/// Every output of the model except the pose programs.
pub fn main_roots(m: &Model) -> Vec<Id> {
    let mut roots = Vec::new();
    for mat in [
        &m.inertia,
        &m.coriolis,
        &m.stiffness,
        &m.damping,
        &m.actuation,
        &m.tip_jacobian,
    ] {
        roots.extend(mat.iter().flatten().copied());
    }
    roots.extend(m.gravity.iter().copied());
    roots.extend(m.tip_pose.iter().copied());
    roots.push(m.kinetic_energy);
    roots.push(m.potential_energy);
    roots
}

impl Tape {
    fn new(model: &Model, roots: &[Id]) -> Tape {
        let nodes = model.program.nodes();
        let live = model.program.live(roots);
        let mut at = vec![u32::MAX; nodes.len()];
        let mut consts = Vec::new();
        for (i, node) in nodes.iter().enumerate() {
            if let (true, Node::Const(c)) = (live[i], node) {
                at[i] = consts.len() as u32;
                consts.push(c.to_f64().unwrap_or(f64::NAN));
            }
        }
        let mut steps = Vec::new();
        for (i, node) in nodes.iter().enumerate() {
            if !live[i] {
                continue;
            }
            let pos = |id: &Id| at[id.index()];
            let step = match node {
                Node::Const(_) => continue,
                Node::Var(v) => Step::Load(*v),
                Node::Add(a, b) => Step::Add(pos(a), pos(b)),
                Node::Mul(a, b) => Step::Mul(pos(a), pos(b)),
                Node::Neg(a) => Step::Neg(pos(a)),
            };
            at[i] = (consts.len() + steps.len()) as u32;
            steps.push(step);
        }
        Tape { consts, steps, at }
    }
}
