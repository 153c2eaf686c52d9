//! Independent numeric reference: the quantities of MODEL.md by Gauss–Legendre
//! quadrature, for the exact kinematics or the order-`N` truncated kinematics.
//!
//! Nothing here shares code with the symbolic derivation. Every integral of MODEL.md
//! is evaluated by composite Gauss–Legendre quadrature (20 points per panel); inner
//! integrals `∫_0^σ` at each outer node are the full panels before `σ` plus the same
//! 20-point rule mapped onto the partial panel. Derivatives with respect to `q`
//! (Jacobians, Hessians of positions, `∂B/∂q`) are exact derivative formulas of the
//! integrands, not finite differences.
//!
//! Planar vectors are complex numbers `z = x + i y`.

#![allow(clippy::needless_range_loop)] // index-heavy numerics read better with indices

mod complex;
mod quadrature;
#[cfg(test)]
mod tests;

use crate::arm::{Actuator, Arm};
use crate::terms::{Matrix, Terms};
use complex::C64;
use num_traits::ToPrimitive;

pub use quadrature::{gauss_legendre, GL_POINTS};

/// Which kinematics the reference integrates.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Kinematics {
    /// The order-`N` truncated kinematics of MODEL.md: `e^{iδ} ≈ Σ_{k≤N} (iδ)^k/k!`.
    Truncated(u32),
    /// `e^{iφ}` exactly.
    Exact,
}

/// One segment's parameters in double precision.
#[derive(Clone, Debug)]
struct SegParams {
    l: f64,
    /// Index of `q_{j,0}` in `q`.
    off: usize,
    /// `m_j + 1`.
    nc: usize,
    rho: Vec<f64>,
    ei: Vec<f64>,
    iota: Vec<f64>,
    beta: Vec<f64>,
}

#[derive(Clone, Debug)]
enum ActF64 {
    Tendon { d: f64, through: usize },
    Moment { segment: usize },
    EndForce { segment: usize },
}

/// Horner evaluation of a polynomial in σ, lowest power first.
fn horner(c: &[f64], s: f64) -> f64 {
    c.iter().rev().fold(0.0, |acc, &v| acc * s + v)
}

fn to_f64(r: &crate::arm::Rational) -> f64 {
    r.to_f64().unwrap_or(f64::NAN)
}

/// Kinematic parameters of one segment at one `q`.
#[derive(Clone, Debug)]
struct SegGeom {
    /// `Φ_{j-1}`.
    phi0: f64,
    /// `a_j = L_j q_{j,0}`.
    a: f64,
    /// `δ_j(τ) = Σ_{i≥1} dcoef[i] τ^{i+1}` (`dcoef[0]` unused, 0).
    dcoef: Vec<f64>,
    /// `∂Φ_{j-1}/∂q_x` for the coordinates of earlier segments (`x < off`).
    alpha_const: Vec<f64>,
    /// Number of coordinates the segment depends on: `off + nc`.
    r: usize,
}

/// Inner integrals of one segment at its outer quadrature nodes.
struct SegKin {
    r: usize,
    sig: Vec<f64>,
    wq: Vec<f64>,
    /// Per node: `[F, F_x (r), F_xy (r·r)]` with `F = ∫_0^σ f dτ` (truncated to level).
    vals: Vec<Vec<C64>>,
    /// `P_{j-1}`, `∂P_{j-1}/∂q` (n), `∂²P_{j-1}/∂q²` (n·n, row-major; empty below level 2).
    base: C64,
    dbase: Vec<C64>,
    ddbase: Vec<C64>,
}

/// Everything the assembly needs at one `q`.
struct Kin {
    level: u8,
    segs: Vec<SegKin>,
    /// `(P_j, ∂P_j/∂q, ∂²P_j/∂q²)` at the end of every segment.
    ends: Vec<(C64, Vec<C64>, Vec<C64>)>,
    /// `Φ_S`.
    tip_angle: f64,
}

fn vec_len(level: u8, r: usize) -> usize {
    1 + if level >= 1 { r } else { 0 } + if level >= 2 { r * r } else { 0 }
}

/// Largest total bending `L_j Σ_i |q_{j,i}|` [rad] of one segment that the reference
/// evaluates: about 160 turns, far beyond any soft arm, and few enough panels
/// (about 130 per segment) that one evaluation stays cheap.
pub const MAX_SEGMENT_BENDING: f64 = 1e3;

/// Numeric reference for one arm and one choice of kinematics.
pub struct Reference<'a> {
    arm: &'a Arm,
    kin: Kinematics,
    segs: Vec<SegParams>,
    acts: Vec<ActF64>,
    n: usize,
    g: C64,
    mass: f64,
    j_payload: f64,
    /// Gauss–Legendre rule on [-1, 1].
    nodes: Vec<f64>,
    weights: Vec<f64>,
    /// Multiplies the automatically chosen panel count (convergence studies).
    panel_factor: usize,
}

impl<'a> Reference<'a> {
    pub fn new(arm: &'a Arm, kin: Kinematics) -> Self {
        let mut off = 0;
        let segs = arm
            .segments
            .iter()
            .map(|s| {
                let p = SegParams {
                    l: to_f64(&s.length),
                    off,
                    nc: s.n_coords(),
                    rho: s.density.coeffs_f64(),
                    ei: s.bending_stiffness.coeffs_f64(),
                    iota: s.rotary_inertia.coeffs_f64(),
                    beta: s.damping.coeffs_f64(),
                };
                off += s.n_coords();
                p
            })
            .collect();
        let acts = arm
            .actuators
            .iter()
            .map(|a| match a {
                Actuator::Tendon {
                    offset,
                    through_segment,
                } => ActF64::Tendon {
                    d: to_f64(offset),
                    through: *through_segment,
                },
                Actuator::Moment { segment } => ActF64::Moment { segment: *segment },
                Actuator::EndForce { segment } => ActF64::EndForce { segment: *segment },
            })
            .collect();
        let (nodes, weights) = quadrature::standard_rule().clone();
        Reference {
            arm,
            kin,
            segs,
            acts,
            n: arm.n_coords(),
            g: C64::new(to_f64(&arm.gravity[0]), to_f64(&arm.gravity[1])),
            mass: to_f64(&arm.payload.mass),
            j_payload: to_f64(&arm.payload.rotary_inertia),
            nodes,
            weights,
            panel_factor: 1,
        }
    }

    /// Whether the reference can evaluate at `q`: every entry finite, and no segment
    /// bent by more than [`MAX_SEGMENT_BENDING`] in all (its panel count grows with
    /// the bending). The error names the coordinate by its label (`2_0`).
    pub fn check_configuration(&self, q: &[f64]) -> Result<(), String> {
        if q.len() != self.n {
            return Err(format!("expected {} coordinates, got {}", self.n, q.len()));
        }
        for (j, s) in self.segs.iter().enumerate() {
            let qs = &q[s.off..s.off + s.nc];
            let bending: f64 = qs.iter().map(|v| v.abs()).sum::<f64>() * s.l;
            if !(bending <= MAX_SEGMENT_BENDING) {
                let (i, v) = qs
                    .iter()
                    .enumerate()
                    .max_by(|a, b| a.1.abs().total_cmp(&b.1.abs()))
                    .map(|(i, v)| (i, *v))
                    .unwrap_or((0, f64::NAN));
                return Err(format!(
                    "coordinate {}_{i} = {v:e} bends segment {} by {bending:.3e} rad; the \
                     quadrature reference resolves at most {MAX_SEGMENT_BENDING:e} rad per \
                     segment (L·Σ|q|)",
                    j + 1,
                    j + 1
                ));
            }
        }
        Ok(())
    }

    /// The same reference with `factor` times as many quadrature panels everywhere
    /// (for convergence checks; the default is already converged).
    pub fn with_panel_factor(mut self, factor: usize) -> Self {
        self.panel_factor = factor.max(1);
        self
    }

    pub fn arm(&self) -> &'a Arm {
        self.arm
    }

    pub fn kinematics(&self) -> Kinematics {
        self.kin
    }

    /// Number of coordinates `n`.
    pub fn n(&self) -> usize {
        self.n
    }

    // ------------------------------------------------------------------ kinematics

    fn geoms(&self, q: &[f64]) -> Vec<SegGeom> {
        assert_eq!(q.len(), self.n, "q has the wrong length");
        let mut phi0 = 0.0;
        let mut alpha_const = Vec::with_capacity(self.n);
        let mut out = Vec::with_capacity(self.segs.len());
        for s in &self.segs {
            let qs = &q[s.off..s.off + s.nc];
            let mut dcoef = vec![0.0; s.nc];
            for i in 1..s.nc {
                dcoef[i] = s.l * qs[i] / (i as f64 + 1.0);
            }
            out.push(SegGeom {
                phi0,
                a: s.l * qs[0],
                dcoef,
                alpha_const: alpha_const.clone(),
                r: s.off + s.nc,
            });
            for (i, &qi) in qs.iter().enumerate() {
                phi0 += s.l * qi / (i as f64 + 1.0);
                alpha_const.push(s.l / (i as f64 + 1.0));
            }
        }
        out
    }

    /// Panel count for segment `j` at this `q`: enough that the polynomial degree and
    /// the oscillation of the (outer, product) integrand per panel stay small
    /// compared with what 20 Gauss points resolve.
    fn panels(&self, j: usize, q: &[f64]) -> usize {
        let s = &self.segs[j];
        let m = (s.nc - 1) as f64;
        let deg = match self.kin {
            Kinematics::Truncated(n) => (m + 1.0) * n as f64,
            Kinematics::Exact => 0.0,
        };
        // Clamped, so that no state can ask for unbounded work (callers check states
        // first with `check_configuration` and get a clear error instead).
        let bandwidth: f64 = (q[s.off..s.off + s.nc].iter().map(|v| v.abs()).sum::<f64>() * s.l)
            .min(MAX_SEGMENT_BENDING);
        let props = [&s.rho, &s.iota]
            .iter()
            .map(|c| c.len() as f64)
            .sum::<f64>();
        let k = 2.0 * deg + 2.0 * bandwidth + 2.0 * (m + 1.0) + props + 20.0;
        let p = if k.is_finite() {
            (k / 16.0).ceil().max(4.0) as usize
        } else {
            4
        };
        p * self.panel_factor
    }

    /// Adds `w ·` integrand vector of segment `s` at `τ` to `out`.
    /// Layout: `[f, f_x (x < r), f_xy (x, y < r, row-major)]`, truncated to `level`.
    fn add_integrand(
        &self,
        s: &SegParams,
        gm: &SegGeom,
        tau: f64,
        level: u8,
        w: f64,
        out: &mut [C64],
    ) {
        let theta = gm.phi0 + gm.a * tau;
        let mut delta = 0.0;
        for i in (1..gm.dcoef.len()).rev() {
            delta = (delta + gm.dcoef[i]) * tau;
        }
        delta *= tau;
        let e = C64::cis(theta).scale(w);
        let (tn, tn1, tn2) = match self.kin {
            Kinematics::Exact => {
                let ed = C64::cis(delta);
                (ed, ed, ed)
            }
            Kinematics::Truncated(n) => {
                let z = C64::new(0.0, delta);
                let mut term = C64::ONE;
                let mut sum = C64::ZERO;
                let (mut t1, mut t2) = (C64::ZERO, C64::ZERO);
                for k in 0..=n {
                    if k > 0 {
                        term = (term * z).scale(1.0 / k as f64);
                    }
                    sum += term;
                    if k + 2 == n {
                        t2 = sum;
                    }
                    if k + 1 == n {
                        t1 = sum;
                    }
                }
                (sum, t1, t2)
            }
        };
        let etn = e * tn;
        out[0] += etn;
        if level == 0 {
            return;
        }
        let r = gm.r;
        let etn1 = e * tn1;
        let etn2 = e * tn2;
        // (α_x, β_x) = (∂θ/∂q_x, ∂δ/∂q_x) at τ.
        let mut alpha = vec![0.0; r];
        let mut beta = vec![0.0; r];
        alpha[..s.off].copy_from_slice(&gm.alpha_const);
        alpha[s.off] = s.l * tau;
        let mut tp = tau;
        for i in 1..s.nc {
            tp *= tau;
            beta[s.off + i] = s.l * tp / (i as f64 + 1.0);
        }
        for x in 0..r {
            out[1 + x] += (etn.scale(alpha[x]) + etn1.scale(beta[x])).mul_i();
        }
        if level < 2 {
            return;
        }
        let b2 = 1 + r;
        for x in 0..r {
            let (ax, bx) = (alpha[x], beta[x]);
            for y in x..r {
                let (ay, by) = (alpha[y], beta[y]);
                let v = -(etn.scale(ax * ay) + etn1.scale(ax * by + ay * bx) + etn2.scale(bx * by));
                out[b2 + x * r + y] += v;
                if y != x {
                    out[b2 + y * r + x] += v;
                }
            }
        }
    }

    /// Adds `∫_lo^hi` of the integrand vector to `out` (one Gauss–Legendre rule).
    fn add_integral(
        &self,
        s: &SegParams,
        gm: &SegGeom,
        lo: f64,
        hi: f64,
        level: u8,
        out: &mut [C64],
    ) {
        let h = 0.5 * (hi - lo);
        if h == 0.0 {
            return;
        }
        for (t, w) in self.nodes.iter().zip(&self.weights) {
            self.add_integrand(s, gm, lo + h * (1.0 + t), level, h * w, out);
        }
    }

    /// `∫_0^σ` of the integrand vector by the composite rule with `p` panels.
    fn integral_to(
        &self,
        s: &SegParams,
        gm: &SegGeom,
        p: usize,
        sigma: f64,
        level: u8,
    ) -> Vec<C64> {
        let mut out = vec![C64::ZERO; vec_len(level, gm.r)];
        let h = 1.0 / p as f64;
        let k = ((sigma / h).floor() as usize).min(p - 1);
        for i in 0..k {
            self.add_integral(s, gm, i as f64 * h, (i + 1) as f64 * h, level, &mut out);
        }
        self.add_integral(s, gm, k as f64 * h, sigma, level, &mut out);
        out
    }

    /// Inner integrals at every outer node and the chained segment ends.
    fn kinematics_at(&self, q: &[f64], level: u8) -> Kin {
        let n = self.n;
        let geoms = self.geoms(q);
        let mut base = C64::ZERO;
        let mut dbase = vec![C64::ZERO; if level >= 1 { n } else { 0 }];
        let mut ddbase = vec![C64::ZERO; if level >= 2 { n * n } else { 0 }];
        let mut segs = Vec::with_capacity(self.segs.len());
        let mut ends = Vec::with_capacity(self.segs.len());
        for (j, (s, gm)) in self.segs.iter().zip(&geoms).enumerate() {
            let r = gm.r;
            let len = vec_len(level, r);
            let p = self.panels(j, q);
            let h = 1.0 / p as f64;
            let mut prefix = vec![C64::ZERO; len];
            let mut sig = Vec::with_capacity(p * self.nodes.len());
            let mut wq = Vec::with_capacity(p * self.nodes.len());
            let mut vals = Vec::with_capacity(p * self.nodes.len());
            for pi in 0..p {
                let lo = pi as f64 * h;
                for (t, w) in self.nodes.iter().zip(&self.weights) {
                    let sg = lo + 0.5 * h * (1.0 + t);
                    let mut v = prefix.clone();
                    self.add_integral(s, gm, lo, sg, level, &mut v);
                    sig.push(sg);
                    wq.push(0.5 * h * w);
                    vals.push(v);
                }
                self.add_integral(s, gm, lo, lo + h, level, &mut prefix);
            }
            segs.push(SegKin {
                r,
                sig,
                wq,
                vals,
                base,
                dbase: dbase.clone(),
                ddbase: ddbase.clone(),
            });
            base += prefix[0].scale(s.l);
            if level >= 1 {
                for x in 0..r {
                    dbase[x] += prefix[1 + x].scale(s.l);
                }
            }
            if level >= 2 {
                for x in 0..r {
                    for y in 0..r {
                        ddbase[x * n + y] += prefix[1 + r + x * r + y].scale(s.l);
                    }
                }
            }
            ends.push((base, dbase.clone(), ddbase.clone()));
        }
        let tip_angle = self.tip_angle(q);
        Kin {
            level,
            segs,
            ends,
            tip_angle,
        }
    }

    fn tip_angle(&self, q: &[f64]) -> f64 {
        self.segs
            .iter()
            .map(|s| {
                (0..s.nc)
                    .map(|i| s.l * q[s.off + i] / (i as f64 + 1.0))
                    .sum::<f64>()
            })
            .sum()
    }

    /// `∂Φ_S/∂q` (constant).
    fn tip_angle_gradient(&self) -> Vec<f64> {
        let mut v = vec![0.0; self.n];
        for s in &self.segs {
            for i in 0..s.nc {
                v[s.off + i] = s.l / (i as f64 + 1.0);
            }
        }
        v
    }

    /// `∂φ_j(σ)/∂q_x` for `x < r`.
    fn angle_gradient(&self, j: usize, sigma: f64, out: &mut [f64]) {
        let s = &self.segs[j];
        for sp in &self.segs[..j] {
            for i in 0..sp.nc {
                out[sp.off + i] = sp.l / (i as f64 + 1.0);
            }
        }
        let mut tp = sigma;
        for i in 0..s.nc {
            out[s.off + i] = s.l * tp / (i as f64 + 1.0);
            tp *= sigma;
        }
    }

    // ------------------------------------------------------------------ assembly

    fn inertia_from(&self, k: &Kin) -> Matrix {
        assert!(k.level >= 1);
        let n = self.n;
        let mut b = vec![vec![0.0; n]; n];
        let mut jv = vec![C64::ZERO; n];
        let mut ph = vec![0.0; n];
        for (j, sk) in k.segs.iter().enumerate() {
            let s = &self.segs[j];
            let r = sk.r;
            for (node, v) in sk.vals.iter().enumerate() {
                let sg = sk.sig[node];
                let c1 = sk.wq[node] * s.l * horner(&s.rho, sg);
                let c2 = sk.wq[node] * s.l * horner(&s.iota, sg);
                for x in 0..r {
                    jv[x] = sk.dbase[x] + v[1 + x].scale(s.l);
                }
                self.angle_gradient(j, sg, &mut ph);
                for x in 0..r {
                    for y in x..r {
                        b[x][y] += c1 * jv[x].dot(jv[y]) + c2 * ph[x] * ph[y];
                    }
                }
            }
        }
        let dp = &k.ends.last().expect("arm has segments").1;
        let dphi = self.tip_angle_gradient();
        for x in 0..n {
            for y in x..n {
                b[x][y] += self.mass * dp[x].dot(dp[y]) + self.j_payload * dphi[x] * dphi[y];
            }
        }
        for x in 0..n {
            for y in 0..x {
                b[x][y] = b[y][x];
            }
        }
        b
    }

    fn inertia_derivative_from(&self, k: &Kin) -> Vec<Matrix> {
        assert!(k.level >= 2);
        let n = self.n;
        // s[l][x][y] = Σ ρ Re(conj(H_lx) J_y); ∂_l B_xy = s[l][x][y] + s[l][y][x].
        let mut acc = vec![vec![vec![0.0; n]; n]; n];
        let mut jv = vec![C64::ZERO; n];
        let mut hv = vec![C64::ZERO; n * n];
        for (j, sk) in k.segs.iter().enumerate() {
            let s = &self.segs[j];
            // A massless segment adds nothing (the golden regressor's variants are
            // massless but for one segment; this loop is n³ per node).
            if s.rho.iter().all(|c| *c == 0.0) {
                continue;
            }
            let r = sk.r;
            for (node, v) in sk.vals.iter().enumerate() {
                let c1 = sk.wq[node] * s.l * horner(&s.rho, sk.sig[node]);
                for x in 0..r {
                    jv[x] = sk.dbase[x] + v[1 + x].scale(s.l);
                }
                for l in 0..r {
                    for x in 0..r {
                        hv[l * n + x] = sk.ddbase[l * n + x] + v[1 + r + l * r + x].scale(s.l);
                    }
                }
                for l in 0..r {
                    for x in 0..r {
                        let h = hv[l * n + x].scale(c1);
                        let row = &mut acc[l][x];
                        for y in 0..r {
                            row[y] += h.dot(jv[y]);
                        }
                    }
                }
            }
        }
        let (_, dp, ddp) = k.ends.last().expect("arm has segments");
        if self.mass != 0.0 {
            for l in 0..n {
                for x in 0..n {
                    for y in 0..n {
                        acc[l][x][y] += self.mass * ddp[l * n + x].dot(dp[y]);
                    }
                }
            }
        }
        (0..n)
            .map(|l| {
                (0..n)
                    .map(|x| (0..n).map(|y| acc[l][x][y] + acc[l][y][x]).collect())
                    .collect()
            })
            .collect()
    }

    fn coriolis_from_db(&self, db: &[Matrix], qd: &[f64]) -> Matrix {
        let n = self.n;
        assert_eq!(qd.len(), n, "qd has the wrong length");
        let mut c = vec![vec![0.0; n]; n];
        for i in 0..n {
            for k in 0..n {
                let mut v = 0.0;
                for l in 0..n {
                    v += 0.5 * (db[l][i][k] + db[k][i][l] - db[i][k][l]) * qd[l];
                }
                c[i][k] = v;
            }
        }
        c
    }

    fn gravity_from(&self, k: &Kin) -> Vec<f64> {
        assert!(k.level >= 1);
        let n = self.n;
        let mut gv = vec![0.0; n];
        for (j, sk) in k.segs.iter().enumerate() {
            let s = &self.segs[j];
            for (node, v) in sk.vals.iter().enumerate() {
                let c1 = sk.wq[node] * s.l * horner(&s.rho, sk.sig[node]);
                for x in 0..sk.r {
                    gv[x] -= c1 * self.g.dot(sk.dbase[x] + v[1 + x].scale(s.l));
                }
            }
        }
        let dp = &k.ends.last().expect("arm has segments").1;
        for x in 0..n {
            gv[x] -= self.mass * self.g.dot(dp[x]);
        }
        gv
    }

    /// `∂G_x/∂q_y`: the gravity integrand with the second derivatives of position.
    fn gravity_jacobian_from(&self, k: &Kin) -> Matrix {
        assert!(k.level >= 2);
        let n = self.n;
        let mut dg = vec![vec![0.0; n]; n];
        for (j, sk) in k.segs.iter().enumerate() {
            let s = &self.segs[j];
            let r = sk.r;
            for (node, v) in sk.vals.iter().enumerate() {
                let c1 = sk.wq[node] * s.l * horner(&s.rho, sk.sig[node]);
                for x in 0..r {
                    for y in 0..r {
                        let h = sk.ddbase[x * n + y] + v[1 + r + x * r + y].scale(s.l);
                        dg[x][y] -= c1 * self.g.dot(h);
                    }
                }
            }
        }
        let ddp = &k.ends.last().expect("arm has segments").2;
        for x in 0..n {
            for y in 0..n {
                dg[x][y] -= self.mass * self.g.dot(ddp[x * n + y]);
            }
        }
        dg
    }

    /// `∂A_ik/∂q_x` as `[x][i][k]`: zero but for end forces, whose columns are the
    /// transposed position Jacobians of their segment's end.
    fn actuation_jacobian_from(&self, k: &Kin) -> Vec<Matrix> {
        assert!(k.level >= 2);
        let n = self.n;
        let mut cols: Vec<Option<(usize, bool)>> = Vec::new();
        for a in &self.acts {
            match *a {
                ActF64::Tendon { .. } | ActF64::Moment { .. } => cols.push(None),
                ActF64::EndForce { segment } => {
                    cols.push(Some((segment, false)));
                    cols.push(Some((segment, true)));
                }
            }
        }
        (0..n)
            .map(|x| {
                (0..n)
                    .map(|i| {
                        cols.iter()
                            .map(|c| match *c {
                                None => 0.0,
                                Some((seg, imag)) => {
                                    let z = k.ends[seg].2[i * n + x];
                                    if imag {
                                        z.im
                                    } else {
                                        z.re
                                    }
                                }
                            })
                            .collect()
                    })
                    .collect()
            })
            .collect()
    }

    fn gravity_energy_from(&self, k: &Kin) -> f64 {
        let mut u = 0.0;
        for (j, sk) in k.segs.iter().enumerate() {
            let s = &self.segs[j];
            for (node, v) in sk.vals.iter().enumerate() {
                let c1 = sk.wq[node] * s.l * horner(&s.rho, sk.sig[node]);
                u -= c1 * self.g.dot(sk.base + v[0].scale(s.l));
            }
        }
        u - self.mass * self.g.dot(k.ends.last().expect("arm has segments").0)
    }

    fn actuation_from(&self, k: &Kin) -> Matrix {
        assert!(k.level >= 1);
        let n = self.n;
        let cols: Vec<Vec<f64>> = self
            .acts
            .iter()
            .flat_map(|a| -> Vec<Vec<f64>> {
                match *a {
                    ActF64::Tendon { d, through } => {
                        let mut c = vec![0.0; n];
                        for s in &self.segs[..=through] {
                            for i in 0..s.nc {
                                c[s.off + i] = d * s.l / (i as f64 + 1.0);
                            }
                        }
                        vec![c]
                    }
                    ActF64::Moment { segment } => {
                        let mut c = vec![0.0; n];
                        let s = &self.segs[segment];
                        for i in 0..s.nc {
                            c[s.off + i] = s.l / (i as f64 + 1.0);
                        }
                        vec![c]
                    }
                    ActF64::EndForce { segment } => {
                        let dp = &k.ends[segment].1;
                        vec![
                            dp.iter().map(|z| z.re).collect(),
                            dp.iter().map(|z| z.im).collect(),
                        ]
                    }
                }
            })
            .collect();
        (0..n)
            .map(|x| cols.iter().map(|c| c[x]).collect())
            .collect()
    }

    fn tip_jacobian_from(&self, k: &Kin) -> Matrix {
        let dp = &k.ends.last().expect("arm has segments").1;
        vec![
            dp.iter().map(|z| z.re).collect(),
            dp.iter().map(|z| z.im).collect(),
            self.tip_angle_gradient(),
        ]
    }

    fn tip_pose_from(&self, k: &Kin) -> [f64; 3] {
        let p = k.ends.last().expect("arm has segments").0;
        [p.re, p.im, k.tip_angle]
    }

    fn property_matrix(&self, prop: impl Fn(&SegParams) -> &Vec<f64>) -> Matrix {
        let n = self.n;
        let mut m = vec![vec![0.0; n]; n];
        for s in &self.segs {
            let c = prop(s);
            // Polynomial integrand of degree ≤ 2 m + deg(prop): composite rule, exact.
            let p = 1 + (2 * s.nc + c.len()) / 30;
            let h = 1.0 / p as f64;
            for pi in 0..p {
                for (t, w) in self.nodes.iter().zip(&self.weights) {
                    let sg = h * (pi as f64 + 0.5 * (1.0 + t));
                    let wt = 0.5 * h * w * s.l * horner(c, sg);
                    for i in 0..s.nc {
                        for k in 0..s.nc {
                            m[s.off + i][s.off + k] += wt * sg.powi((i + k) as i32);
                        }
                    }
                }
            }
        }
        m
    }

    // ------------------------------------------------------------------ public API

    /// Every term of [`Terms`] at `(q, qd)`.
    pub fn terms(&self, q: &[f64], qd: &[f64]) -> Terms {
        let k = self.kinematics_at(q, 2);
        self.terms_from(&k, q, qd)
    }

    /// [`Reference::terms`] of each of `variants` at `(q, qd)`: references of arms that
    /// differ from this one in densities, rotary inertias, stiffnesses, dampings,
    /// payload or gravity only (`params::apply`), so that the inner integrals, which
    /// hold the geometry alone, are computed once on this reference's nodes. Those
    /// nodes must be at least as fine as each variant's own, which holds when a
    /// variant's property polynomials have no more coefficients than this arm's (a
    /// scale of 0 or more). The golden regressor columns are `4·NSEG + 2` such
    /// variants per state; sharing the kinematics made them about 10× cheaper.
    pub fn terms_of_variants(&self, variants: &[Reference], q: &[f64], qd: &[f64]) -> Vec<Terms> {
        for v in variants {
            assert!(
                v.kin == self.kin
                    && v.segs.len() == self.segs.len()
                    && v.segs.iter().zip(&self.segs).all(|(a, b)| {
                        a.l == b.l
                            && a.nc == b.nc
                            && a.rho.len() <= b.rho.len()
                            && a.iota.len() <= b.iota.len()
                    }),
                "terms_of_variants needs variants of this arm's geometry"
            );
        }
        let k = self.kinematics_at(q, 2);
        variants.iter().map(|v| v.terms_from(&k, q, qd)).collect()
    }

    /// Every term of [`Terms`] from the inner integrals `k` at `q`.
    fn terms_from(&self, k: &Kin, q: &[f64], qd: &[f64]) -> Terms {
        let b = self.inertia_from(k);
        let db = self.inertia_derivative_from(k);
        let c = self.coriolis_from_db(&db, qd);
        let stiff = self.stiffness();
        let ug = self.gravity_energy_from(k);
        Terms {
            n: self.n,
            kinetic_energy: 0.5 * quad_form(&b, qd),
            potential_energy: ug + 0.5 * quad_form(&stiff, q),
            b,
            c,
            g: self.gravity_from(k),
            k: stiff,
            d: self.damping(),
            a: self.actuation_from(k),
            tip_pose: self.tip_pose_from(k),
            tip_jacobian: self.tip_jacobian_from(k),
        }
    }

    /// Inertia matrix `B(q)`.
    pub fn inertia(&self, q: &[f64]) -> Matrix {
        self.inertia_from(&self.kinematics_at(q, 1))
    }

    /// `dB[l][i][k] = ∂B_ik/∂q_l`, by the exact derivative of the integrands.
    pub fn inertia_derivative(&self, q: &[f64]) -> Vec<Matrix> {
        self.inertia_derivative_from(&self.kinematics_at(q, 2))
    }

    /// Coriolis matrix `C_ik = Σ_l ½(∂_l B_ik + ∂_k B_il − ∂_i B_kl) qd_l`.
    pub fn coriolis(&self, q: &[f64], qd: &[f64]) -> Matrix {
        self.coriolis_from_db(&self.inertia_derivative(q), qd)
    }

    /// Gravity vector `G = ∂U_g/∂q`.
    pub fn gravity(&self, q: &[f64]) -> Vec<f64> {
        self.gravity_from(&self.kinematics_at(q, 1))
    }

    /// `∂G/∂q`, n×n, by the exact second derivatives of the integrands (the Hessian of
    /// the gravity potential, so symmetric).
    pub fn gravity_jacobian(&self, q: &[f64]) -> Matrix {
        self.gravity_jacobian_from(&self.kinematics_at(q, 2))
    }

    /// `∂A_ik/∂q_x` as `[x][i][k]`, exact (zero but for end forces).
    pub fn actuation_jacobian(&self, q: &[f64]) -> Vec<Matrix> {
        self.actuation_jacobian_from(&self.kinematics_at(q, 2))
    }

    /// What the static solver needs at `q`, from one evaluation of the kinematics.
    pub fn static_terms(&self, q: &[f64]) -> crate::terms::StaticTerms {
        let k = self.kinematics_at(q, 2);
        crate::terms::StaticTerms {
            g: self.gravity_from(&k),
            dg: self.gravity_jacobian_from(&k),
            a: self.actuation_from(&k),
            da: self.actuation_jacobian_from(&k),
            tip_pose: self.tip_pose_from(&k),
        }
    }

    /// Actuation matrix `A(q)`, n×k.
    pub fn actuation(&self, q: &[f64]) -> Matrix {
        self.actuation_from(&self.kinematics_at(q, 1))
    }

    /// `[x, y, angle]` of the backbone at `σ ∈ [0, 1]` of `segment` (0-based).
    pub fn pose(&self, q: &[f64], segment: usize, sigma: f64) -> [f64; 3] {
        assert!(segment < self.segs.len(), "segment out of range");
        assert!((0.0..=1.0).contains(&sigma), "sigma outside [0, 1]");
        let geoms = self.geoms(q);
        let mut p = C64::ZERO;
        for j in 0..segment {
            let v = self.integral_to(&self.segs[j], &geoms[j], self.panels(j, q), 1.0, 0);
            p += v[0].scale(self.segs[j].l);
        }
        let s = &self.segs[segment];
        let gm = &geoms[segment];
        let v = self.integral_to(s, gm, self.panels(segment, q), sigma, 0);
        p += v[0].scale(s.l);
        let mut angle = gm.phi0 + gm.a * sigma;
        let mut tp = sigma;
        for i in 1..s.nc {
            tp *= sigma;
            angle += gm.dcoef[i] * tp;
        }
        [p.re, p.im, angle]
    }

    /// Tip Jacobian, 3×n: rows `∂x/∂q`, `∂y/∂q`, `∂Φ_S/∂q`.
    pub fn tip_jacobian(&self, q: &[f64]) -> Matrix {
        self.tip_jacobian_from(&self.kinematics_at(q, 1))
    }

    /// Tip pose `[x, y, Φ_S]`.
    pub fn tip_pose(&self, q: &[f64]) -> [f64; 3] {
        self.tip_pose_from(&self.kinematics_at(q, 0))
    }

    /// Stiffness matrix `K` (block diagonal).
    pub fn stiffness(&self) -> Matrix {
        self.property_matrix(|s| &s.ei)
    }

    /// Damping matrix `D` (block diagonal).
    pub fn damping(&self) -> Matrix {
        self.property_matrix(|s| &s.beta)
    }

    /// `½ qdᵀ B(q) qd`.
    pub fn kinetic_energy(&self, q: &[f64], qd: &[f64]) -> f64 {
        0.5 * quad_form(&self.inertia(q), qd)
    }

    /// Gravity potential plus elastic `½ qᵀ K q`.
    pub fn potential_energy(&self, q: &[f64]) -> f64 {
        self.gravity_energy_from(&self.kinematics_at(q, 0)) + 0.5 * quad_form(&self.stiffness(), q)
    }
}

fn quad_form(m: &Matrix, v: &[f64]) -> f64 {
    m.iter()
        .zip(v)
        .map(|(row, &vi)| vi * row.iter().zip(v).map(|(a, b)| a * b).sum::<f64>())
        .sum()
}
