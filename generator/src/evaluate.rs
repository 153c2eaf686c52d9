//! Double-precision evaluation of a derived [`Model`].
//!
//! Evaluates exactly the program the emitters will print, node by node in program
//! order; the runtime leaves (trigonometry and Legendre moments) come from
//! [`crate::moments`]. Used by `arcwright eval`, by the cross-checks against the
//! numeric reference, and by later commands.

use crate::derive::Model;
use crate::ir::{Id, Node, Var};
use crate::moments::legendre_moments;
use crate::terms::{Matrix, Terms};
use num_traits::ToPrimitive;

/// A compiled evaluation order for one group of outputs.
struct Tape {
    nodes: Vec<u32>,
}

pub struct Evaluator<'m> {
    model: &'m Model,
    consts: Vec<f64>,
    /// Moments needed per segment (`max n + 1`), main program and pose programs.
    moments: Vec<usize>,
    pose_moments: Vec<usize>,
    main: Tape,
    poses: Vec<Tape>,
}

/// Inputs of one evaluation.
struct State<'a> {
    q: &'a [f64],
    qd: &'a [f64],
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
        let consts = prog
            .nodes()
            .iter()
            .map(|node| match node {
                Node::Const(c) => c.to_f64().unwrap_or(f64::NAN),
                Node::Var(Var::Nu { seg, n, .. }) => {
                    let m = &mut moments[*seg as usize];
                    *m = (*m).max(*n as usize + 1);
                    f64::NAN
                }
                Node::Var(Var::PoseNu { seg, n, .. }) => {
                    let m = &mut pose_moments[*seg as usize];
                    *m = (*m).max(*n as usize + 1);
                    f64::NAN
                }
                _ => f64::NAN,
            })
            .collect();
        let main = Tape::new(model, &main_roots(model));
        let poses = model.pose.iter().map(|p| Tape::new(model, p)).collect();
        Evaluator {
            model,
            consts,
            moments,
            pose_moments,
            main,
            poses,
        }
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
            sigma,
            nu,
            pose_nu,
            cos_phi,
            sin_phi,
        }
    }

    fn run(&self, tape: &Tape, st: &State) -> Vec<f64> {
        let nodes = self.model.program.nodes();
        let mut v = vec![0.0; nodes.len()];
        for &i in &tape.nodes {
            let i = i as usize;
            v[i] = match &nodes[i] {
                Node::Const(_) => self.consts[i],
                Node::Var(var) => match *var {
                    Var::Q(k) => st.q[k as usize],
                    Var::Qd(k) => st.qd[k as usize],
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
                },
                Node::Add(a, b) => v[a.index()] + v[b.index()],
                Node::Mul(a, b) => v[a.index()] * v[b.index()],
                Node::Neg(a) => -v[a.index()],
            };
        }
        v
    }

    /// All terms at `(q, q̇)`.
    pub fn terms(&self, q: &[f64], qd: &[f64]) -> Terms {
        let m = self.model;
        let st = self.state(q, qd, 0.0, None);
        let v = self.run(&self.main, &st);
        let mat = |ids: &Vec<Vec<Id>>| -> Matrix {
            ids.iter()
                .map(|r| r.iter().map(|id| v[id.index()]).collect())
                .collect()
        };
        Terms {
            n: m.n,
            b: mat(&m.inertia),
            c: mat(&m.coriolis),
            g: m.gravity.iter().map(|id| v[id.index()]).collect(),
            k: mat(&m.stiffness),
            d: mat(&m.damping),
            a: mat(&m.actuation),
            tip_pose: [
                v[m.tip_pose[0].index()],
                v[m.tip_pose[1].index()],
                v[m.tip_pose[2].index()],
            ],
            tip_jacobian: mat(&m.tip_jacobian),
            kinetic_energy: v[m.kinetic_energy.index()],
            potential_energy: v[m.potential_energy.index()],
        }
    }

    /// Backbone `[x, y, angle]` at `σ ∈ [0, 1]` of segment `seg` (0-based).
    pub fn pose(&self, q: &[f64], seg: usize, sigma: f64) -> [f64; 3] {
        let st = self.state(q, &[], sigma, Some(seg));
        let v = self.run(&self.poses[seg], &st);
        let p = self.model.pose[seg];
        [v[p[0].index()], v[p[1].index()], v[p[2].index()]]
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
        let live = model.program.live(roots);
        let nodes = live
            .iter()
            .enumerate()
            .filter(|(_, l)| **l)
            .map(|(i, _)| i as u32)
            .collect();
        Tape { nodes }
    }
}
