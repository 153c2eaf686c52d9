//! Derivation: from a validated [`Arm`] to the exact dynamics as a [`Program`].
//!
//! The chain is assembled like a hand derivation of a serial mechanism. Each segment
//! contributes a few exact local integrals (mass, first and second moments of its
//! backbone, their Jacobian counterparts), written in its own base frame; the chain
//! rotates them by the cumulative angle and adds the base point's motion. `B` comes
//! out of that composition, and so does `C`, as `∫ρ Jᵀ J̇` (see
//! `Deriver::coriolis_of_segment` for why that is the Christoffel matrix). The other
//! derivatives (`G = ∂U_g/∂q`, the tip and end-force Jacobians, `J̇` of the chain) come
//! from exact symbolic differentiation of the program.

use crate::arm::{Actuator, Arm, Segment};
use crate::exact::{int, Q};
use crate::ir::{Cx, Id, Node, Program, Var};
use crate::local_form::{mono_exp, Atom, CForm, LinForm, Mono, MONO_ONE};
use crate::params::{ParamKind, ParamLayout};
use crate::segment_integrals::{by_power, Field, Reducer, WeightId};
use num_traits::{One, Zero};
use rustc_hash::FxHashMap as HashMap;
use std::collections::BTreeMap;

/// The derived model: output nodes of one program, exact to the expansion order.
#[derive(Clone, Debug)]
pub struct Model {
    pub arm: Arm,
    pub program: Program,
    /// Number of coordinates `n`.
    pub n: usize,
    /// Number of inputs `k`.
    pub n_inputs: usize,
    /// `B`, n×n (symmetric: `inertia[i][k] == inertia[k][i]`).
    pub inertia: Vec<Vec<Id>>,
    /// `C(q, q̇)`, n×n.
    pub coriolis: Vec<Vec<Id>>,
    /// `G = ∂U_g/∂q`, n.
    pub gravity: Vec<Id>,
    /// `K`, n×n, constant.
    pub stiffness: Vec<Vec<Id>>,
    /// `D`, n×n, constant.
    pub damping: Vec<Vec<Id>>,
    /// `A(q)`, n×k.
    pub actuation: Vec<Vec<Id>>,
    /// Tip `[x, y, angle]`.
    pub tip_pose: [Id; 3],
    /// Tip Jacobian, 3×n.
    pub tip_jacobian: Vec<Vec<Id>>,
    /// The derivatives statics needs, when asked for ([`derive_statics`]).
    pub statics: Option<StaticRoots>,
    /// `½ q̇ᵀ B q̇`.
    pub kinetic_energy: Id,
    /// `U_g + ½ qᵀ K q`.
    pub potential_energy: Id,
    /// Backbone `[x, y, angle]` inside each segment, in terms of [`Var::Sigma`] and
    /// [`Var::PoseNu`].
    pub pose: Vec<[Id; 3]>,
    /// Whether the runtime parameters are leaves ([`Var::Param`], laid out by
    /// [`ParamLayout`]) instead of the arm file's numbers folded in.
    pub parametric: bool,
    /// The regressor `Y_ik = ∂τ_i/∂θ_k`, n × [`ParamLayout::linear_len`], of
    /// `τ = B q̈ + C q̇ + G + K q + D q̇` (in [`Var::Qdd`], `q`, `q̇` and the gravity
    /// parameter): `Y θ = τ` exactly, every term of the model being proportional to
    /// one parameter. Derived with the statics roots of a parametric model.
    pub regressor: Option<Vec<Vec<Id>>>,
    /// The nodes that are one part of a double kernel `D_st` (`s ≤ t`) of a segment, as
    /// lowered: what the emitted code may take from the kernel recurrence
    /// ([`crate::kernel_matrix`]) instead of a dot product over the moments.
    pub kernel_entries: BTreeMap<Id, KernelEntry>,
    /// The weights' tail integrals `Ρ` (monomial coefficients), by
    /// [`KernelEntry::weight`].
    pub kernel_weights: Vec<Vec<Q>>,
}

impl Model {
    /// Every node id the model holds: its outputs, then the kernel entries.
    fn ids(&self) -> Vec<Id> {
        let mut v = crate::evaluate::main_roots(self);
        let mat = |v: &mut Vec<Id>, x: &Vec<Vec<Id>>| v.extend(x.iter().flatten());
        if let Some(s) = &self.statics {
            mat(&mut v, &s.gravity_jacobian);
            for a in &s.actuation_jacobian {
                mat(&mut v, a);
            }
        }
        for p in &self.pose {
            v.extend(p);
        }
        if let Some(y) = &self.regressor {
            mat(&mut v, y);
        }
        v.extend(self.kernel_entries.keys());
        v
    }

    /// The same model over the program of [`crate::scaled_factors::share`].
    fn with_shared_scaled_factors(self) -> Model {
        let (program, map) = crate::scaled_factors::share(&self.program, &self.ids());
        let m = |id: &Id| map[id.index()].expect("every id of the model is a root");
        let mat = |x: &Vec<Vec<Id>>| -> Vec<Vec<Id>> {
            x.iter().map(|r| r.iter().map(m).collect()).collect()
        };
        Model {
            inertia: mat(&self.inertia),
            coriolis: mat(&self.coriolis),
            gravity: self.gravity.iter().map(m).collect(),
            stiffness: mat(&self.stiffness),
            damping: mat(&self.damping),
            actuation: mat(&self.actuation),
            tip_pose: self.tip_pose.map(|id| m(&id)),
            tip_jacobian: mat(&self.tip_jacobian),
            statics: self.statics.as_ref().map(|s| StaticRoots {
                gravity_jacobian: mat(&s.gravity_jacobian),
                actuation_jacobian: s.actuation_jacobian.iter().map(mat).collect(),
            }),
            kinetic_energy: m(&self.kinetic_energy),
            potential_energy: m(&self.potential_energy),
            pose: self.pose.iter().map(|p| p.map(|id| m(&id))).collect(),
            regressor: self.regressor.as_ref().map(mat),
            kernel_entries: self
                .kernel_entries
                .iter()
                .map(|(id, e)| (m(id), *e))
                .collect(),
            program,
            ..self
        }
    }
}

/// One part of a double kernel: `Re D_st` (or `Im D_st`, with `im`) of segment `seg`
/// against weight `weight`, `s ≤ t`.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord)]
pub struct KernelEntry {
    pub seg: usize,
    pub weight: usize,
    pub s: u32,
    pub t: u32,
    pub im: bool,
}

/// Derives the model of `arm` at its expansion order, with the arm file's numbers
/// folded into the coefficients (what the commands evaluate).
pub fn derive(arm: &Arm) -> Model {
    derive_in_thread(arm, &|_| {}, Options::default())
}

/// What a derivation produces beyond the dynamics.
#[derive(Clone, Copy, Debug, Default)]
struct Options {
    /// The statics roots ([`Model::statics`]).
    statics: bool,
    /// Runtime parameters as leaves ([`Model::parametric`]).
    parametric: bool,
}

/// How far a derivation is, for a progress bar: one step per segment, then one for
/// the differentiation (gravity, Jacobians) and assembly. [`derive_steps`] counts them.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum DeriveStep {
    /// Segment `j` (0-based) of `of` is composed into the chain.
    Segment { j: usize, of: usize },
    /// Gravity, Jacobians and the remaining terms by exact differentiation.
    Differentiating,
}

/// Steps [`derive_with_progress`] reports for `arm`.
pub fn derive_steps(arm: &Arm) -> u64 {
    arm.segments.len() as u64 + 1
}

/// [`derive_emitted`], calling `progress` before each step.
pub fn derive_with_progress(arm: &Arm, progress: &(dyn Fn(DeriveStep) + Sync)) -> Model {
    derive_in_thread(
        arm,
        progress,
        Options {
            statics: true,
            parametric: true,
        },
    )
}

/// The model the emitters print: with the statics derivatives, and with the runtime
/// parameters as leaves so that the emitted code can take them at run time.
pub fn derive_emitted(arm: &Arm) -> Model {
    derive_with_progress(arm, &|_| {})
}

/// [`derive`] plus the exact derivatives statics needs ([`Model::statics`]): `n²/2`
/// more derivatives of `G`, so only the commands that solve for equilibria pay them.
pub fn derive_statics(arm: &Arm) -> Model {
    derive_in_thread(
        arm,
        &|_| {},
        Options {
            statics: true,
            parametric: false,
        },
    )
}

fn derive_in_thread(arm: &Arm, progress: &(dyn Fn(DeriveStep) + Sync), opts: Options) -> Model {
    // The differentiator recurses over the program's depth; give it room.
    std::thread::scope(|scope| {
        std::thread::Builder::new()
            .stack_size(512 << 20)
            .spawn_scoped(scope, || {
                Deriver::new(arm, opts.parametric)
                    .run(progress, opts.statics)
                    .with_shared_scaled_factors()
            })
            .expect("spawning the derivation thread")
            .join()
            .expect("derivation thread")
    })
}

/// The Jacobian of the static residual `K q + G(q) − A(q) u` needs, beyond `K`:
#[derive(Clone, Debug)]
pub struct StaticRoots {
    /// `∂G_i/∂q_x`, n×n: the Hessian of `U_g`, so symmetric.
    pub gravity_jacobian: Vec<Vec<Id>>,
    /// `∂A_ik/∂q_x` as `[x][i][k]`: zero but for end forces, whose columns are
    /// transposed position Jacobians.
    pub actuation_jacobian: Vec<Vec<Vec<Id>>>,
}

/// One segment's exact local quantities, lowered to program nodes.
struct LocalQuantities {
    /// Local end point `r(1)`.
    end: Cx,
    /// Mass `L ∫ρ`.
    mass: Q,
    /// First moment `L ∫ρ r`.
    first: Cx,
    /// Its derivatives `L ∫ρ ∂r/∂q_{j,i}`.
    first_jac: Vec<Cx>,
    /// Second moment `L ∫ρ |r|²`.
    second: Id,
    /// `L ∫ρ Im(conj(r) ∂r/∂q_{j,i})`: the moment of the segment's own motion about its base.
    swirl: Vec<Id>,
    /// `L ∫ρ Re(conj(∂r/∂q_{j,i}) ∂r/∂q_{j,k})`.
    gram: Vec<Vec<Id>>,
    /// The velocity-dependent local integrals the Coriolis matrix needs.
    rates: LocalRates,
}

/// A segment's local integrals that carry `q̇`: with `r_i = ∂r/∂q_{j,i}` and
/// `ṙ_k = Σ_l r_kl q̇_{j,l}` (the time derivative of `r_k` from the segment's own motion).
struct LocalRates {
    /// `L ∫ρ Re(conj(r) r_i)`.
    rr: Vec<Id>,
    /// `L ∫ρ Im(conj(r_i) r_k)`.
    gram_im: Vec<Vec<Id>>,
    /// `L ∫ρ ṙ_k`.
    first_dot: Vec<Cx>,
    /// `L ∫ρ Im(conj(r) ṙ_k)`.
    swirl_dot: Vec<Id>,
    /// `L ∫ρ Re(conj(r_i) ṙ_k)`.
    gram_dot: Vec<Vec<Id>>,
}

/// A field grouped by power of τ.
type Groups = Vec<(u32, Cx)>;

/// Which runtime parameters each node of a program depends on, a bit set per node
/// (the nodes that exist when it is built; a node is built after its operands).
struct ParamDeps {
    words: usize,
    bits: Vec<u64>,
}

impl ParamDeps {
    fn of(p: &Program, params: usize) -> ParamDeps {
        let words = params.div_ceil(64).max(1);
        let mut bits = vec![0u64; p.len() * words];
        for (i, node) in p.nodes().iter().enumerate() {
            let (lo, rest) = bits.split_at_mut(i * words);
            let own = &mut rest[..words];
            let mut take = |c: Id| {
                let c = c.index() * words;
                for (o, b) in own.iter_mut().zip(&lo[c..c + words]) {
                    *o |= b;
                }
            };
            match *node {
                Node::Var(Var::Param(j)) => own[j as usize / 64] |= 1 << (j % 64),
                Node::Const(_) | Node::Var(_) => {}
                Node::Add(a, b) | Node::Mul(a, b) => {
                    take(a);
                    take(b);
                }
                Node::Neg(a) => take(a),
            }
        }
        ParamDeps { words, bits }
    }

    /// Whether node `id` depends on parameter `k`; nodes built after [`ParamDeps::of`]
    /// (derivatives) count as depending on every parameter.
    fn has(&self, id: Id, k: u16) -> bool {
        let w = id.index() * self.words + k as usize / 64;
        self.bits.get(w).is_none_or(|b| b >> (k % 64) & 1 == 1)
    }
}

/// Which kernel of a segment: a single integral `S_s` or a double integral `D_st`
/// against weight `w`.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
enum KernelKey {
    Single { w: WeightId, s: u32 },
    Double { w: WeightId, s: u32, t: u32 },
}

/// Row `s` of segment `seg`'s kernel matrix (weight `w`) applied to a grouped field.
type AppliedKey = (usize, WeightId, Groups, u32);

struct Deriver<'a> {
    arm: &'a Arm,
    p: Program,
    reducer: Reducer,
    offsets: Vec<usize>,
    lengths: Vec<Q>,
    /// Nodes lowered from an exact local form: their derivatives are taken on the form.
    local: HashMap<Id, (usize, LinForm)>,
    /// Kernel nodes by segment and key, and the key of each kernel part.
    kernels: HashMap<(usize, KernelKey), Cx>,
    kernel_of: HashMap<Id, (usize, KernelKey, bool)>,
    /// Rows of kernel matrices applied to grouped fields, shared across forms.
    applied: HashMap<AppliedKey, Cx>,
    dmemo: HashMap<(Id, usize), Id>,
    /// Whether runtime parameters are leaves (else the arm file's values, folded).
    parametric: bool,
    params: ParamLayout,
    /// The arm file's parameter values (what [`Deriver::param`] folds in).
    param_defaults: Vec<Q>,
}

impl<'a> Deriver<'a> {
    fn new(arm: &'a Arm, parametric: bool) -> Self {
        let layout = ParamLayout::of(arm);
        let offsets = (0..arm.segments.len())
            .map(|j| arm.coord_offset(j))
            .collect();
        Deriver {
            arm,
            p: Program::new(),
            reducer: Reducer::new(),
            offsets,
            lengths: arm.segments.iter().map(|s| s.length.clone()).collect(),
            local: HashMap::default(),
            kernels: HashMap::default(),
            kernel_of: HashMap::default(),
            applied: HashMap::default(),
            dmemo: HashMap::default(),
            param_defaults: layout.defaults(arm),
            parametric,
            params: layout,
        }
    }

    /// Runtime parameter `kind`, element `i`: a leaf, or the arm file's value.
    fn param(&mut self, kind: ParamKind, i: usize) -> Id {
        let k = self.params.index(kind, i);
        if self.parametric {
            self.p.var(Var::Param(k as u16))
        } else {
            self.p.constant(self.param_defaults[k].clone())
        }
    }

    /// Multiplies what was pushed onto each entry of `terms` since `marks` (the entry
    /// lengths then) by the parameter `s`: one share, summed once and scaled once. A
    /// folded derivation leaves the terms as they are (the scale is the arm's).
    fn scale_share(&mut self, terms: &mut [Vec<Vec<Id>>], marks: &[Vec<usize>], s: Id) {
        if !self.parametric {
            return;
        }
        for (row, mrow) in terms.iter_mut().zip(marks) {
            for (entry, &m) in row.iter_mut().zip(mrow) {
                if entry.len() > m {
                    let share = self.p.sum(&entry[m..]);
                    entry.truncate(m);
                    entry.push(self.p.mul(s, share));
                }
            }
        }
    }

    fn n(&self) -> usize {
        self.arm.n_coords()
    }

    /// Segment and local index of coordinate `x`.
    fn coord(&self, x: usize) -> (usize, usize) {
        let j = self.offsets.iter().rposition(|&o| o <= x).unwrap_or(0);
        (j, x - self.offsets[j])
    }

    /// `∂Φ_j/∂q_x`, with Φ_j the angle at the end of segment `j` (exact, linear in q).
    fn dphi(&self, j: usize, x: usize) -> Q {
        let (jx, i) = self.coord(x);
        if jx <= j {
            &self.lengths[jx] / int(i as i64 + 1)
        } else {
            Q::zero()
        }
    }

    fn q(&mut self, x: usize) -> Id {
        self.p.var(Var::Q(x as u16))
    }

    /// `Φ_j` as a linear node (j = −1 → 0 is `None`).
    fn phi_node(&mut self, j: Option<usize>) -> Id {
        let Some(j) = j else { return self.p.zero() };
        let terms: Vec<(Q, Id)> = (0..self.offsets[j] + self.arm.segments[j].n_coords())
            .map(|x| (self.dphi(j, x), self.q(x)))
            .collect();
        self.p.lin_comb(&terms)
    }

    /// `e^{iΦ_{j−1}}`, the rotation of segment `j`'s base frame.
    fn base_rotation(&mut self, j: usize) -> Cx {
        if j == 0 {
            Cx {
                re: self.p.one(),
                im: self.p.zero(),
            }
        } else {
            let s = (j - 1) as u16;
            Cx {
                re: self.p.var(Var::CosPhi(s)),
                im: self.p.var(Var::SinPhi(s)),
            }
        }
    }

    fn mono_node(&mut self, seg: usize, mono: Mono) -> Id {
        let mut factors = Vec::new();
        for i in 1..=self.arm.segments[seg].curvature_degree as usize {
            let e = mono_exp(mono, i);
            let qv = self.q(self.offsets[seg] + i);
            factors.extend(std::iter::repeat_n(qv, e as usize));
        }
        self.p.product(&factors)
    }

    fn atom_node(&mut self, seg: usize, atom: Atom, pose: bool) -> Id {
        let s = seg as u16;
        match (atom, pose) {
            (Atom::One, _) => self.p.one(),
            (Atom::NuRe(n), false) => self.p.var(Var::Nu {
                seg: s,
                n,
                im: false,
            }),
            (Atom::NuIm(n), false) => self.p.var(Var::Nu {
                seg: s,
                n,
                im: true,
            }),
            (Atom::NuRe(n), true) => self.p.var(Var::PoseNu {
                seg: s,
                n,
                im: false,
            }),
            (Atom::NuIm(n), true) => self.p.var(Var::PoseNu {
                seg: s,
                n,
                im: true,
            }),
        }
    }

    /// Lowers a local form: `Σ_mono q^mono · (Σ_atom c·atom)`, and remembers the form
    /// so that derivatives of the node are taken exactly on it.
    fn lower(&mut self, seg: usize, form: &LinForm) -> Id {
        let id = self.lower_with(seg, form, false);
        self.local.entry(id).or_insert_with(|| (seg, form.clone()));
        id
    }

    fn lower_with(&mut self, seg: usize, form: &LinForm, pose: bool) -> Id {
        let mut groups: Vec<(Mono, Vec<(Q, Id)>)> = Vec::new();
        for ((mono, atom), c) in &form.terms {
            let a = self.atom_node(seg, *atom, pose);
            match groups.last_mut() {
                Some((m, v)) if *m == *mono => v.push((c.clone(), a)),
                _ => groups.push((*mono, vec![(c.clone(), a)])),
            }
        }
        let mut terms = Vec::with_capacity(groups.len());
        for (mono, lin) in groups {
            let inner = self.p.lin_comb(&lin);
            let m = self.mono_node(seg, mono);
            terms.push(self.p.mul(m, inner));
        }
        self.p.sum(&terms)
    }

    fn lower_cx(&mut self, seg: usize, form: &CForm) -> Cx {
        Cx {
            re: self.lower(seg, &form.re),
            im: self.lower(seg, &form.im),
        }
    }

    /// A field grouped by power of τ: `V = Σ_s τ^s e^{iaτ} C_s(q)`, each `C_s` a complex
    /// polynomial node in the segment's higher coordinates.
    fn field_groups(&mut self, seg: usize, field: &Field) -> Groups {
        by_power(field)
            .into_iter()
            .map(|(s, terms)| {
                let mut c = CForm::new();
                for t in terms {
                    c.re.add_term(t.mono, Atom::One, &t.re);
                    c.im.add_term(t.mono, Atom::One, &t.im);
                }
                (s, self.lower_cx(seg, &c))
            })
            .collect()
    }

    /// The kernel node of segment `seg` (see [`crate::segment_integrals`]).
    fn kernel(&mut self, seg: usize, key: KernelKey) -> Cx {
        if let Some(k) = self.kernels.get(&(seg, key)) {
            return *k;
        }
        // D_ts = conj(D_st): the kernel matrix is Hermitian, so half of it is free.
        if let KernelKey::Double { w, s, t } = key {
            if s > t {
                let k = self.kernel(seg, KernelKey::Double { w, s: t, t: s });
                let k = Cx {
                    re: k.re,
                    im: self.p.neg(k.im),
                };
                self.kernels.insert((seg, key), k);
                return k;
            }
        }
        let mut re = LinForm::new();
        let mut im = LinForm::new();
        match key {
            KernelKey::Single { w, s } => {
                for (n, c) in self.reducer.single_kernel(w, s).iter().enumerate() {
                    re.add_term(MONO_ONE, Atom::NuRe(n as u16), c);
                    im.add_term(MONO_ONE, Atom::NuIm(n as u16), c);
                }
            }
            KernelKey::Double { w, s, t } => {
                let (sum, diff) = self.reducer.double_kernel(w, s, t);
                for (n, c) in sum.iter().enumerate() {
                    re.add_term(MONO_ONE, Atom::NuRe(n as u16), c);
                }
                for (n, c) in diff.iter().enumerate() {
                    im.add_term(MONO_ONE, Atom::NuIm(n as u16), c);
                }
            }
        }
        let k = Cx {
            re: self.lower_with(seg, &re, false),
            im: self.lower_with(seg, &im, false),
        };
        for (id, part_im) in [(k.re, false), (k.im, true)] {
            if self.p.as_const(id).is_none() {
                self.kernel_of.entry(id).or_insert((seg, key, part_im));
            }
        }
        self.kernels.insert((seg, key), k);
        k
    }

    /// `∂/∂q_{seg,0}` of a kernel part: `L ∂/∂a`, with `S_s' = i S_{s+1}` and
    /// `D_st' = i (D_{s,t+1} − D_{s+1,t})` (differentiate under the integral sign).
    fn d_kernel(&mut self, seg: usize, key: KernelKey, part_im: bool) -> Id {
        let x = match key {
            KernelKey::Single { w, s } => self.kernel(seg, KernelKey::Single { w, s: s + 1 }),
            KernelKey::Double { w, s, t } => {
                let a = self.kernel(seg, KernelKey::Double { w, s, t: t + 1 });
                let b = self.kernel(seg, KernelKey::Double { w, s: s + 1, t });
                Cx {
                    re: self.p.sub(a.re, b.re),
                    im: self.p.sub(a.im, b.im),
                }
            }
        };
        let l = self.lengths[seg].clone();
        // i·X = −Im X + i Re X
        if part_im {
            self.p.scale(&l, x.re)
        } else {
            self.p.scale(&-l, x.im)
        }
    }

    /// `Σ_s C_s S_s`: the single integral of a grouped field against weight `w`.
    fn single(&mut self, seg: usize, f: &Groups, w: WeightId) -> Cx {
        let mut acc = Vec::new();
        for &(s, c) in f {
            let k = self.kernel(seg, KernelKey::Single { w, s });
            acc.push(self.p.cx_mul(c, k));
        }
        self.cx_sum(&acc)
    }

    /// `Re` (or `Im`, with `im`) of `Σ_{s,t} conj(A_s) B_t D_st`: the double integral of
    /// two grouped fields, as `Σ_s conj(A_s) Y_s` with `Y = 𝔻 B` shared by every form
    /// that has `B` on the right (the Gram entries of one column, the swirl terms).
    fn double(&mut self, seg: usize, a: &Groups, b: &Groups, w: WeightId, im: bool) -> Id {
        let mut acc = Vec::with_capacity(a.len());
        for &(s, ca) in a {
            let y = self.kernel_apply(seg, b, w, s);
            acc.push(self.conj_product(ca, y, im));
        }
        self.p.sum(&acc)
    }

    /// The same form as [`Self::double`], `Re`/`Im` of `a^H 𝔻 b`, summed the other way:
    /// `𝔻` is Hermitian, so `a^H 𝔻 b = Σ_t conj((𝔻a)_t) b_t`. Pays when `𝔻a` is already
    /// computed and `b` is new (the `q̇`-carrying fields of the Coriolis terms): `K`
    /// products per form instead of `K²` for a new column.
    fn double_flipped(&mut self, seg: usize, a: &Groups, b: &Groups, w: WeightId, im: bool) -> Id {
        let mut acc = Vec::with_capacity(b.len());
        for &(t, cb) in b {
            let y = self.kernel_apply(seg, a, w, t);
            acc.push(self.conj_product(y, cb, im));
        }
        self.p.sum(&acc)
    }

    /// `Re` (or `Im`, with `im`) of `conj(x)·y`.
    fn conj_product(&mut self, x: Cx, y: Cx, im: bool) -> Id {
        if im {
            let a = self.p.mul(x.re, y.im);
            let b = self.p.mul(x.im, y.re);
            self.p.sub(a, b)
        } else {
            let a = self.p.mul(x.re, y.re);
            let b = self.p.mul(x.im, y.im);
            self.p.add(a, b)
        }
    }

    /// `Y_s = Σ_t D_st B_t`, row `s` of the kernel matrix applied to a grouped field.
    fn kernel_apply(&mut self, seg: usize, b: &Groups, w: WeightId, s: u32) -> Cx {
        let key = (seg, w, b.clone(), s);
        if let Some(y) = self.applied.get(&key) {
            return *y;
        }
        let mut terms = Vec::with_capacity(b.len());
        for &(t, cb) in b {
            let k = self.kernel(seg, KernelKey::Double { w, s, t });
            terms.push(self.p.cx_mul(k, cb));
        }
        let y = self.cx_sum(&terms);
        self.applied.insert(key, y);
        y
    }

    fn cx_sum(&mut self, terms: &[Cx]) -> Cx {
        let re: Vec<Id> = terms.iter().map(|c| c.re).collect();
        let im: Vec<Id> = terms.iter().map(|c| c.im).collect();
        Cx {
            re: self.p.sum(&re),
            im: self.p.sum(&im),
        }
    }

    fn local_quantities(&mut self, j: usize) -> LocalQuantities {
        let seg: &Segment = &self.arm.segments[j];
        let l = seg.length.clone();
        let m = seg.curvature_degree as usize;
        let order = self.arm.expansion_order as usize;
        let field = Field::backbone(&l, m, order);
        let v = self.field_groups(j, &field);
        let derivative = |f: &Field, i: usize| {
            if i == 0 {
                f.derivative_base(&l)
            } else {
                f.derivative_coord(i)
            }
        };
        let jac_fields: Vec<Field> = (0..=m).map(|i| derivative(&field, i)).collect();
        let jac: Vec<Groups> = jac_fields.iter().map(|f| self.field_groups(j, f)).collect();
        // ṙ_k's field: Σ_l q̇_{j,l} ∂V_k/∂q_{j,l}, grouped by power of τ.
        let off = self.offsets[j];
        let jac_dot: Vec<Groups> = jac_fields
            .iter()
            .map(|fk| {
                let mut by_s: std::collections::BTreeMap<u32, Vec<Cx>> = Default::default();
                for ll in 0..=m {
                    let qd = self.p.var(Var::Qd((off + ll) as u16));
                    let g = self.field_groups(j, &derivative(fk, ll));
                    for (s, c) in g {
                        let t = Cx {
                            re: self.p.mul(c.re, qd),
                            im: self.p.mul(c.im, qd),
                        };
                        by_s.entry(s).or_default().push(t);
                    }
                }
                by_s.into_iter()
                    .map(|(s, terms)| (s, self.cx_sum(&terms)))
                    .collect()
            })
            .collect();
        let end_w = self.reducer.end_point();
        // The kernels see the density's shape only (its first non-zero coefficient
        // scaled to 1), so that segments whose densities differ by a factor share their
        // kernel rows in the emitted table; the factor goes into `lw`.
        let scale = seg
            .density
            .coeffs
            .iter()
            .find(|c| !c.is_zero())
            .cloned()
            .unwrap_or_else(Q::one);
        let shape: Vec<Q> = seg.density.coeffs.iter().map(|c| c / &scale).collect();
        let rho = self.reducer.weight(&shape);
        let lw = &l * &scale;

        let end = self.single(j, &v, end_w);
        let first = self.single(j, &v, rho);
        let first = self.p.cx_scale(&lw, first);
        let first_jac = (0..=m)
            .map(|i| {
                let f = self.single(j, &jac[i], rho);
                self.p.cx_scale(&lw, f)
            })
            .collect();
        let second = self.double(j, &v, &v, rho, false);
        let second = self.p.scale(&lw, second);
        let swirl = (0..=m)
            .map(|i| {
                let d = self.double(j, &v, &jac[i], rho, true);
                self.p.scale(&lw, d)
            })
            .collect();
        let mut gram = vec![vec![self.p.zero(); m + 1]; m + 1];
        for a in 0..=m {
            for b in a..=m {
                let d = self.double(j, &jac[a], &jac[b], rho, false);
                let id = self.p.scale(&lw, d);
                gram[a][b] = id;
                gram[b][a] = id;
            }
        }
        let rr: Vec<Id> = (0..=m)
            .map(|i| {
                let d = self.double(j, &v, &jac[i], rho, false);
                self.p.scale(&lw, d)
            })
            .collect();
        let mut gram_im = vec![vec![self.p.zero(); m + 1]; m + 1];
        for a in 0..=m {
            for b in a + 1..=m {
                let d = self.double(j, &jac[a], &jac[b], rho, true);
                let id = self.p.scale(&lw, d);
                gram_im[a][b] = id;
                gram_im[b][a] = self.p.neg(id);
            }
        }
        let first_dot = (0..=m)
            .map(|k| {
                let f = self.single(j, &jac_dot[k], rho);
                self.p.cx_scale(&lw, f)
            })
            .collect();
        let swirl_dot = (0..=m)
            .map(|k| {
                let d = self.double_flipped(j, &v, &jac_dot[k], rho, true);
                self.p.scale(&lw, d)
            })
            .collect();
        let gram_dot = (0..=m)
            .map(|i| {
                (0..=m)
                    .map(|k| {
                        let d = self.double_flipped(j, &jac[i], &jac_dot[k], rho, false);
                        self.p.scale(&lw, d)
                    })
                    .collect()
            })
            .collect();
        let mass = &l * crate::exact::integral01(&seg.density.coeffs);
        LocalQuantities {
            end,
            mass,
            first,
            first_jac,
            second,
            swirl,
            gram,
            rates: LocalRates {
                rr,
                gram_im,
                first_dot,
                swirl_dot,
                gram_dot,
            },
        }
    }

    /// Exact derivative of node `id` with respect to `q[x]`.
    fn d(&mut self, id: Id, x: usize) -> Id {
        if let Some(&r) = self.dmemo.get(&(id, x)) {
            return r;
        }
        let r = if let Some(&(seg, key, part_im)) = self.kernel_of.get(&id) {
            if x == self.offsets[seg] {
                self.d_kernel(seg, key, part_im)
            } else {
                self.p.zero()
            }
        } else if let Some((seg, form)) = self.local.get(&id).cloned() {
            let (jx, i) = self.coord(x);
            if jx != seg {
                self.p.zero()
            } else {
                let df = if i == 0 {
                    scale_form(&form.derivative_a(), &self.lengths[seg])
                } else {
                    form.derivative_coord(i)
                };
                self.lower(seg, &df)
            }
        } else {
            match self.p.node(id).clone() {
                Node::Const(_) => self.p.zero(),
                Node::Var(v) => self.d_var(v, x),
                Node::Add(a, b) => {
                    let (da, db) = (self.d(a, x), self.d(b, x));
                    self.p.add(da, db)
                }
                Node::Mul(a, b) => {
                    let (da, db) = (self.d(a, x), self.d(b, x));
                    let t1 = self.p.mul(da, b);
                    let t2 = self.p.mul(a, db);
                    self.p.add(t1, t2)
                }
                Node::Neg(a) => {
                    let da = self.d(a, x);
                    self.p.neg(da)
                }
            }
        };
        self.dmemo.insert((id, x), r);
        r
    }

    fn d_cx(&mut self, z: Cx, x: usize) -> Cx {
        Cx {
            re: self.d(z.re, x),
            im: self.d(z.im, x),
        }
    }

    fn d_var(&mut self, v: Var, x: usize) -> Id {
        match v {
            Var::Q(i) => {
                if i as usize == x {
                    self.p.one()
                } else {
                    self.p.zero()
                }
            }
            Var::Qd(_) | Var::Qdd(_) | Var::Sigma | Var::Param(_) => self.p.zero(),
            Var::Nu { seg, n, im } | Var::PoseNu { seg, n, im } => {
                let seg = seg as usize;
                if x != self.offsets[seg] {
                    return self.p.zero();
                }
                let pose = matches!(v, Var::PoseNu { .. });
                let mut f = LinForm::new();
                f.add_term(
                    MONO_ONE,
                    if im { Atom::NuIm(n) } else { Atom::NuRe(n) },
                    &Q::one(),
                );
                let df = scale_form(&f.derivative_a(), &self.lengths[seg]);
                let body = self.lower_with(seg, &df, pose);
                if pose {
                    let s = self.p.var(Var::Sigma);
                    self.p.mul(s, body)
                } else {
                    body
                }
            }
            Var::CosPhi(j) => {
                let w = self.dphi(j as usize, x);
                let s = self.p.var(Var::SinPhi(j));
                self.p.scale(&-w, s)
            }
            Var::SinPhi(j) => {
                let w = self.dphi(j as usize, x);
                let c = self.p.var(Var::CosPhi(j));
                self.p.scale(&w, c)
            }
        }
    }

    /// `g · z`, with `g` the arm's gravity or the gravity parameter.
    fn gravity_dot(&mut self, z: Cx) -> Id {
        if !self.parametric {
            let g = &self.arm.gravity;
            let t = [(g[0].clone(), z.re), (g[1].clone(), z.im)];
            return self.p.lin_comb(&t);
        }
        let gx = self.param(ParamKind::Gravity, 0);
        let gy = self.param(ParamKind::Gravity, 1);
        let a = self.p.mul(gx, z.re);
        let b = self.p.mul(gy, z.im);
        self.p.add(a, b)
    }

    fn run(mut self, progress: &(dyn Fn(DeriveStep) + Sync), with_statics: bool) -> Model {
        let n = self.n();
        let arm = self.arm;
        let segs = arm.segments.len();
        // B as lists of terms, summed at the end.
        let mut b_terms: Vec<Vec<Vec<Id>>> = vec![vec![Vec::new(); n]; n];
        let mut b_const: Vec<Vec<Q>> = vec![vec![Q::zero(); n]; n];
        // C = Σ_j ∫ρ Jᵀ J̇ (+ the payload's share), as lists of terms.
        let mut c_terms: Vec<Vec<Vec<Id>>> = vec![vec![Vec::new(); n]; n];
        let qd: Vec<Id> = (0..n).map(|i| self.p.var(Var::Qd(i as u16))).collect();
        let mut potential_terms: Vec<Id> = Vec::new();
        let mut pos = self.p.cx_zero();
        let mut ends: Vec<Cx> = Vec::with_capacity(segs);
        let mut pose = Vec::with_capacity(segs);

        for j in 0..segs {
            progress(DeriveStep::Segment { j, of: segs });
            let seg = &arm.segments[j];
            let off = self.offsets[j];
            let own = off..off + seg.n_coords();
            let lq = self.local_quantities(j);
            let e = self.base_rotation(j);
            let jac_prev: Vec<Cx> = (0..off).map(|x| self.d_cx(pos, x)).collect();
            let omega: Vec<Q> = (0..off)
                .map(|x| {
                    if j == 0 {
                        Q::zero()
                    } else {
                        self.dphi(j - 1, x)
                    }
                })
                .collect();
            let e_first = self.p.cx_mul(e, lq.first);
            let z = self.p.cx_times_i(e_first);
            // Every mass share of this segment is proportional to its density.
            let rho = self.param(ParamKind::DensityScale, j);
            let marks = |t: &[Vec<Vec<Id>>]| -> Vec<Vec<usize>> {
                t.iter().map(|r| r.iter().map(Vec::len).collect()).collect()
            };
            let b_marks = marks(&b_terms);
            // (a) both coordinates before this segment: the segment rides on the base.
            for x in 0..off {
                for y in x..off {
                    let mut t = Vec::new();
                    let dot = self.p.cx_dot(jac_prev[x], jac_prev[y]);
                    t.push(self.p.scale(&lq.mass, dot));
                    let dx = self.p.cx_dot(jac_prev[x], z);
                    t.push(self.p.scale(&omega[y], dx));
                    let dy = self.p.cx_dot(jac_prev[y], z);
                    t.push(self.p.scale(&omega[x], dy));
                    t.push(self.p.scale(&(&omega[x] * &omega[y]), lq.second));
                    b_terms[x][y].extend(t);
                }
            }
            // (b) one coordinate before, one of this segment.
            for x in 0..off {
                for (i, y) in own.clone().enumerate() {
                    let ef = self.p.cx_mul(e, lq.first_jac[i]);
                    let dot = self.p.cx_dot(jac_prev[x], ef);
                    let sw = self.p.scale(&omega[x], lq.swirl[i]);
                    b_terms[x][y].push(dot);
                    b_terms[x][y].push(sw);
                }
            }
            // (c) both of this segment.
            for (i, x) in own.clone().enumerate() {
                for (k, y) in own.clone().enumerate().skip(i) {
                    b_terms[x][y].push(lq.gram[i][k]);
                }
            }
            self.scale_share(&mut b_terms, &b_marks, rho);
            let c_marks = marks(&c_terms);
            self.coriolis_of_segment(j, &lq, e, &jac_prev, &omega, &qd, &mut c_terms);
            self.scale_share(&mut c_terms, &c_marks, rho);
            // Rotary inertia: φ̇ is linear in q̇, so its share of B is constant.
            if !self.parametric {
                self.rotary_inertia(j, &omega, &mut b_const);
            } else if !arm.segments[j].rotary_inertia.is_zero() {
                let mut own_b = vec![vec![Q::zero(); n]; n];
                self.rotary_inertia(j, &omega, &mut own_b);
                let iota = self.param(ParamKind::RotaryInertiaScale, j);
                for x in 0..n {
                    for y in x..n {
                        if !own_b[x][y].is_zero() {
                            b_terms[x][y].push(self.p.scale(&own_b[x][y], iota));
                        }
                    }
                }
            }
            // Gravity: U_g = −g·(m P_{j−1} + e^{iΦ_{j−1}} R1).
            let gp = self.gravity_dot(pos);
            let ge = self.gravity_dot(e_first);
            let gm = self.p.scale(&lq.mass, gp);
            let u = self.p.add(gm, ge);
            let u = if self.parametric {
                self.p.mul(rho, u)
            } else {
                u
            };
            potential_terms.push(self.p.neg(u));
            // Pose inside the segment and the next base point.
            pose.push(self.segment_pose(j, pos, e));
            let e_end = self.p.cx_mul(e, lq.end);
            pos = self.p.cx_add(pos, e_end);
            ends.push(pos);
        }

        // Tip payload: a point mass and a rotary inertia, present in a parametric
        // model even when the arm file has none, so that firmware can add one.
        let tip_jac: Vec<Cx> = (0..n).map(|x| self.d_cx(pos, x)).collect();
        let last = segs - 1;
        let omega_tip: Vec<Q> = (0..n).map(|x| self.dphi(last, x)).collect();
        let with_mass = self.parametric || !arm.payload.mass.is_zero();
        let mass = self.param(ParamKind::PayloadMass, 0);
        let tip_inertia = self.param(ParamKind::PayloadRotaryInertia, 0);
        for x in 0..n {
            for y in x..n {
                if with_mass {
                    let dot = self.p.cx_dot(tip_jac[x], tip_jac[y]);
                    b_terms[x][y].push(self.p.mul(mass, dot));
                }
                let w = &omega_tip[x] * &omega_tip[y];
                if self.parametric {
                    if !w.is_zero() {
                        b_terms[x][y].push(self.p.scale(&w, tip_inertia));
                    }
                } else {
                    b_const[x][y] += &arm.payload.rotary_inertia * w;
                }
            }
        }
        if with_mass {
            let tip_dot: Vec<Cx> = tip_jac.iter().map(|&jy| self.rate(jy, n, &qd)).collect();
            for x in 0..n {
                for y in 0..n {
                    let dot = self.p.cx_dot(tip_jac[x], tip_dot[y]);
                    c_terms[x][y].push(self.p.mul(mass, dot));
                }
            }
            let gp = self.gravity_dot(pos);
            let u = self.p.mul(mass, gp);
            potential_terms.push(self.p.neg(u));
        }

        let mut inertia = vec![vec![self.p.zero(); n]; n];
        for x in 0..n {
            for y in x..n {
                let c = self.p.constant(b_const[x][y].clone());
                let mut t = std::mem::take(&mut b_terms[x][y]);
                t.push(c);
                let id = self.p.sum(&t);
                inertia[x][y] = id;
                inertia[y][x] = id;
            }
        }
        progress(DeriveStep::Differentiating);
        let u_gravity = self.p.sum(&potential_terms);
        let gravity: Vec<Id> = (0..n).map(|x| self.d(u_gravity, x)).collect();

        let half = Q::new(1.into(), 2.into());
        let coriolis: Vec<Vec<Id>> = c_terms
            .into_iter()
            .map(|row| row.into_iter().map(|t| self.p.sum(&t)).collect())
            .collect();

        let stiffness =
            self.block_matrix(ParamKind::StiffnessScale, |s| &s.bending_stiffness.coeffs);
        let damping = self.block_matrix(ParamKind::DampingScale, |s| &s.damping.coeffs);
        let actuation = self.actuation(&ends);
        // Statics: K + ∂G/∂q − ∂(A u)/∂q, by exact differentiation as everything else.
        let statics = with_statics.then(|| {
            let zero = self.p.constant(Q::zero());
            let mut gravity_jacobian = vec![vec![zero; n]; n];
            for x in 0..n {
                for y in x..n {
                    let id = self.d(gravity[x], y);
                    gravity_jacobian[x][y] = id;
                    gravity_jacobian[y][x] = id;
                }
            }
            let actuation_jacobian = (0..n)
                .map(|x| {
                    actuation
                        .iter()
                        .map(|row| row.iter().map(|&a| self.d(a, x)).collect())
                        .collect()
                })
                .collect();
            StaticRoots {
                gravity_jacobian,
                actuation_jacobian,
            }
        });

        let tip_angle = self.phi_node(Some(last));
        let tip_pose = [pos.re, pos.im, tip_angle];
        let tip_jacobian = vec![
            tip_jac.iter().map(|c| c.re).collect(),
            tip_jac.iter().map(|c| c.im).collect(),
            omega_tip
                .iter()
                .map(|w| self.p.constant(w.clone()))
                .collect(),
        ];

        let kinetic_energy = {
            let bq: Vec<Id> = (0..n)
                .map(|i| {
                    let t: Vec<Id> = (0..n).map(|k| self.p.mul(inertia[i][k], qd[k])).collect();
                    self.p.sum(&t)
                })
                .collect();
            let t: Vec<Id> = (0..n).map(|i| self.p.mul(qd[i], bq[i])).collect();
            let s = self.p.sum(&t);
            self.p.scale(&half, s)
        };
        let potential_energy = {
            let qv: Vec<Id> = (0..n).map(|i| self.q(i)).collect();
            let mut t = Vec::new();
            for i in 0..n {
                for k in 0..n {
                    let qq = self.p.mul(qv[i], qv[k]);
                    t.push(self.p.mul(stiffness[i][k], qq));
                }
            }
            let s = self.p.sum(&t);
            let elastic = self.p.scale(&half, s);
            self.p.add(u_gravity, elastic)
        };

        // The regressor: τ_i = Σ_l B_il q̈_l + (C_il + D_il) q̇_l + K_il q_l + G_i, and
        // its derivative in each parameter but gravity.
        let regressor = (with_statics && self.parametric).then(|| {
            let qv: Vec<Id> = (0..n).map(|i| self.q(i)).collect();
            let qdd: Vec<Id> = (0..n).map(|i| self.p.var(Var::Qdd(i as u16))).collect();
            let tau: Vec<Id> = (0..n)
                .map(|i| {
                    let mut t = vec![gravity[i]];
                    for l in 0..n {
                        t.push(self.p.mul(inertia[i][l], qdd[l]));
                        let cd = self.p.add(coriolis[i][l], damping[i][l]);
                        t.push(self.p.mul(cd, qd[l]));
                        t.push(self.p.mul(stiffness[i][l], qv[l]));
                    }
                    self.p.sum(&t)
                })
                .collect();
            let linear = self.params.linear_len();
            let deps = ParamDeps::of(&self.p, self.params.len());
            let mut y = vec![vec![self.p.zero(); linear]; n];
            for k in 0..linear {
                let mut memo = HashMap::default();
                for i in 0..n {
                    y[i][k] = self.d_param(tau[i], k as u16, &deps, &mut memo);
                }
            }
            y
        });
        Model {
            arm: arm.clone(),
            program: self.p,
            n,
            n_inputs: arm.n_inputs(),
            inertia,
            coriolis,
            gravity,
            stiffness,
            damping,
            actuation,
            tip_pose,
            tip_jacobian,
            statics,
            kinetic_energy,
            potential_energy,
            pose,
            parametric: self.parametric,
            regressor,
            kernel_entries: self
                .kernel_of
                .iter()
                .filter_map(|(&id, &(seg, key, im))| match key {
                    KernelKey::Double { w, s, t } if s <= t => Some((
                        id,
                        KernelEntry {
                            seg,
                            weight: w.index(),
                            s,
                            t,
                            im,
                        },
                    )),
                    _ => None,
                })
                .collect(),
            kernel_weights: self.reducer.tails().to_vec(),
        }
    }

    /// `∂/∂θ_k` of a node. The program is linear in each parameter, so this is the
    /// share the parameter multiplies, built from the same nodes. A node that does not
    /// depend on `θ_k` (`deps`) is zero without a walk: most of the program belongs to
    /// one segment's mass share, so each walk visits a small part of it.
    fn d_param(&mut self, id: Id, k: u16, deps: &ParamDeps, memo: &mut HashMap<Id, Id>) -> Id {
        if !deps.has(id, k) {
            return self.p.zero();
        }
        if let Some(&r) = memo.get(&id) {
            return r;
        }
        let r = match self.p.node(id).clone() {
            Node::Var(Var::Param(j)) if j == k => self.p.one(),
            Node::Const(_) | Node::Var(_) => self.p.zero(),
            Node::Add(a, b) => {
                let da = self.d_param(a, k, deps, memo);
                let db = self.d_param(b, k, deps, memo);
                self.p.add(da, db)
            }
            Node::Mul(a, b) => {
                let da = self.d_param(a, k, deps, memo);
                let db = self.d_param(b, k, deps, memo);
                let t1 = self.p.mul(da, b);
                let t2 = self.p.mul(a, db);
                self.p.add(t1, t2)
            }
            Node::Neg(a) => {
                let da = self.d_param(a, k, deps, memo);
                self.p.neg(da)
            }
        };
        memo.insert(id, r);
        r
    }

    /// `Σ_l ∂z/∂q_l q̇_l` for a chain quantity `z` that depends on the first `upto`
    /// coordinates.
    fn rate(&mut self, z: Cx, upto: usize, qd: &[Id]) -> Cx {
        let mut terms = Vec::with_capacity(upto);
        for (l, &qdl) in qd.iter().enumerate().take(upto) {
            let dz = self.d_cx(z, l);
            terms.push(Cx {
                re: self.p.mul(dz.re, qdl),
                im: self.p.mul(dz.im, qdl),
            });
        }
        self.cx_sum(&terms)
    }

    /// Segment `j`'s share of `C_xy = ∫ρ Re(conj(J_x) J̇_y) L dσ`, which for an inertia
    /// of this Gram form equals the Christoffel-symbol Coriolis matrix of MODEL.md:
    /// with `H_xy = ∂²p/∂q_x∂q_y` symmetric, `∂_l B_xy + ∂_y B_xl − ∂_x B_yl =
    /// 2∫ρ J_x·H_yl`. Inside the segment `p = P + E r` (`E = e^{iΦ_{j−1}}`,
    /// `Ė = iΦ̇E`), so an earlier coordinate has `J_x = P_x + iω_x E r`,
    /// `J̇_x = Ṗ_x − ω_x Φ̇ E r + iω_x E ṙ`, and one of the segment's own has
    /// `J_i = E r_i`, `J̇_i = iΦ̇ E r_i + E ṙ_i`; every product of these is one of the
    /// segment's local integrals. The rotary inertia adds nothing: `φ` is linear in `q`.
    #[allow(clippy::too_many_arguments)]
    fn coriolis_of_segment(
        &mut self,
        j: usize,
        lq: &LocalQuantities,
        e: Cx,
        jac_prev: &[Cx],
        omega: &[Q],
        qd: &[Id],
        c: &mut [Vec<Vec<Id>>],
    ) {
        let off = self.offsets[j];
        let own = self.arm.segments[j].n_coords();
        let rt = &lq.rates;
        let phi_dot = {
            let t: Vec<(Q, Id)> = (0..off).map(|x| (omega[x].clone(), qd[x])).collect();
            self.p.lin_comb(&t)
        };
        let p_dot: Vec<Cx> = jac_prev.iter().map(|&px| self.rate(px, off, qd)).collect();
        // E·first, iE·first, iE·L∫ρṙ, and L∫ρ Re(conj(r) ṙ).
        let e_first = self.p.cx_mul(e, lq.first);
        let ie_first = self.p.cx_times_i(e_first);
        let r_dot1 = {
            let t: Vec<Cx> = (0..own)
                .map(|i| Cx {
                    re: self.p.mul(lq.first_jac[i].re, qd[off + i]),
                    im: self.p.mul(lq.first_jac[i].im, qd[off + i]),
                })
                .collect();
            self.cx_sum(&t)
        };
        let e_rdot = self.p.cx_mul(e, r_dot1);
        let ie_rdot = self.p.cx_times_i(e_rdot);
        let s_dot = {
            let t: Vec<Id> = (0..own)
                .map(|i| self.p.mul(rt.rr[i], qd[off + i]))
                .collect();
            self.p.sum(&t)
        };
        let e_first_jac: Vec<Cx> = (0..own)
            .map(|k| self.p.cx_mul(e, lq.first_jac[k]))
            .collect();
        let ie_first_jac: Vec<Cx> = e_first_jac.iter().map(|&z| self.p.cx_times_i(z)).collect();
        let e_first_dot: Vec<Cx> = (0..own)
            .map(|k| self.p.cx_mul(e, rt.first_dot[k]))
            .collect();
        // Σ_k q̇_k L∫ρ Im(conj(r_i) r_k), the swirl of r_i against ṙ.
        let gram_im_dot: Vec<Id> = (0..own)
            .map(|i| {
                let t: Vec<Id> = (0..own)
                    .map(|k| self.p.mul(rt.gram_im[i][k], qd[off + k]))
                    .collect();
                self.p.sum(&t)
            })
            .collect();
        // (a) both coordinates before this segment.
        for x in 0..off {
            for y in 0..off {
                let mut t = Vec::new();
                let d = self.p.cx_dot(jac_prev[x], p_dot[y]);
                t.push(self.p.scale(&lq.mass, d));
                let d = self.p.cx_dot(jac_prev[x], e_first);
                let d = self.p.mul(phi_dot, d);
                t.push(self.p.scale(&-omega[y].clone(), d));
                let d = self.p.cx_dot(jac_prev[x], ie_rdot);
                t.push(self.p.scale(&omega[y], d));
                let d = self.p.cx_dot(ie_first, p_dot[y]);
                t.push(self.p.scale(&omega[x], d));
                t.push(self.p.scale(&(&omega[x] * &omega[y]), s_dot));
                c[x][y].extend(t);
            }
        }
        // (b) x before, y = this segment's coordinate k; (c) the transpose case.
        for x in 0..off {
            for k in 0..own {
                let y = off + k;
                let d = self.p.cx_dot(jac_prev[x], ie_first_jac[k]);
                c[x][y].push(self.p.mul(phi_dot, d));
                c[x][y].push(self.p.cx_dot(jac_prev[x], e_first_dot[k]));
                let d = self.p.mul(phi_dot, rt.rr[k]);
                c[x][y].push(self.p.scale(&omega[x], d));
                c[x][y].push(self.p.scale(&omega[x], rt.swirl_dot[k]));

                let i = k;
                let (xi, yb) = (off + i, x);
                c[xi][yb].push(self.p.cx_dot(e_first_jac[i], p_dot[yb]));
                let d = self.p.mul(phi_dot, rt.rr[i]);
                c[xi][yb].push(self.p.scale(&-omega[yb].clone(), d));
                c[xi][yb].push(self.p.scale(&-omega[yb].clone(), gram_im_dot[i]));
            }
        }
        // (d) both of this segment.
        for i in 0..own {
            for k in 0..own {
                let d = self.p.mul(phi_dot, rt.gram_im[i][k]);
                c[off + i][off + k].push(self.p.neg(d));
                c[off + i][off + k].push(rt.gram_dot[i][k]);
            }
        }
    }

    /// `L ∫ι ∂φ/∂q_x ∂φ/∂q_y dσ`, with `∂φ/∂q_x = ω_x` for earlier coordinates and
    /// `L σ^{i+1}/(i+1)` for this segment's.
    fn rotary_inertia(&self, j: usize, omega: &[Q], b: &mut [Vec<Q>]) {
        let seg = &self.arm.segments[j];
        if seg.rotary_inertia.is_zero() {
            return;
        }
        let l = &seg.length;
        let iota = &seg.rotary_inertia.coeffs;
        let moment = |p: usize| -> Q {
            iota.iter()
                .enumerate()
                .fold(Q::zero(), |acc, (c, ic)| acc + ic / int((p + c + 1) as i64))
        };
        let off = self.offsets[j];
        let own = seg.n_coords();
        for x in 0..off {
            for y in x..off {
                b[x][y] += l * &omega[x] * &omega[y] * moment(0);
            }
            for i in 0..own {
                b[x][off + i] += l * &omega[x] * l / int(i as i64 + 1) * moment(i + 1);
            }
        }
        for i in 0..own {
            for k in i..own {
                b[off + i][off + k] +=
                    l * l * l / int(((i + 1) * (k + 1)) as i64) * moment(i + k + 2);
            }
        }
    }

    /// The block-diagonal `L ∫ f σ^{i+k} dσ` of `K` or `D`, each segment's block
    /// times its scale parameter `kind`.
    fn block_matrix(&mut self, kind: ParamKind, f: impl Fn(&Segment) -> &Vec<Q>) -> Vec<Vec<Id>> {
        let n = self.n();
        let mut m = vec![vec![self.p.zero(); n]; n];
        for (j, seg) in self.arm.segments.iter().enumerate() {
            let off = self.offsets[j];
            let coeffs = f(seg);
            let scale = self.param(kind, j);
            for i in 0..seg.n_coords() {
                for k in 0..seg.n_coords() {
                    let v = coeffs.iter().enumerate().fold(Q::zero(), |acc, (c, fc)| {
                        acc + fc / int((i + k + c + 1) as i64)
                    }) * &seg.length;
                    m[off + i][off + k] = if v.is_zero() {
                        self.p.zero()
                    } else {
                        self.p.scale(&v, scale)
                    };
                }
            }
        }
        m
    }

    fn actuation(&mut self, ends: &[Cx]) -> Vec<Vec<Id>> {
        let n = self.n();
        let mut cols: Vec<Vec<Id>> = Vec::new();
        for act in &self.arm.actuators {
            match act {
                Actuator::Tendon {
                    offset,
                    through_segment,
                } => {
                    let col = (0..n)
                        .map(|x| {
                            let (j, i) = self.coord(x);
                            if j <= *through_segment {
                                let v = offset * &self.lengths[j] / int(i as i64 + 1);
                                self.p.constant(v)
                            } else {
                                self.p.zero()
                            }
                        })
                        .collect();
                    cols.push(col);
                }
                Actuator::Moment { segment } => {
                    let col = (0..n)
                        .map(|x| {
                            let (j, i) = self.coord(x);
                            if j == *segment {
                                let v = &self.lengths[j] / int(i as i64 + 1);
                                self.p.constant(v)
                            } else {
                                self.p.zero()
                            }
                        })
                        .collect();
                    cols.push(col);
                }
                Actuator::EndForce { segment } => {
                    let end = ends[*segment];
                    let jac: Vec<Cx> = (0..n).map(|x| self.d_cx(end, x)).collect();
                    cols.push(jac.iter().map(|c| c.re).collect());
                    cols.push(jac.iter().map(|c| c.im).collect());
                }
            }
        }
        // n×k, rows are coordinates
        (0..n)
            .map(|x| cols.iter().map(|c| c[x]).collect())
            .collect()
    }

    /// Backbone pose inside segment `j` at σ: `P_{j−1} + e^{iΦ_{j−1}} Σ_s σ^{s+1} C_s μ_s(aσ)`,
    /// since `∫_0^σ τ^s e^{iaτ} dτ = σ^{s+1} ∫_0^1 t^s e^{iaσt} dt`, and
    /// `φ = Φ_{j−1} + L Σ_i q_i σ^{i+1}/(i+1)`.
    fn segment_pose(&mut self, j: usize, base: Cx, e: Cx) -> [Id; 3] {
        let seg = &self.arm.segments[j];
        let l = seg.length.clone();
        let m = seg.curvature_degree as usize;
        let field = Field::backbone(&l, m, self.arm.expansion_order as usize);
        let sigma = self.p.var(Var::Sigma);
        let mut acc = self.p.cx_zero();
        for (s, terms) in by_power(&field) {
            // C_s(q)
            let mut cs = CForm::new();
            for t in terms {
                cs.re.add_term(t.mono, Atom::One, &t.re);
                cs.im.add_term(t.mono, Atom::One, &t.im);
            }
            let c = Cx {
                re: self.lower_with(j, &cs.re, true),
                im: self.lower_with(j, &cs.im, true),
            };
            // μ_s on Legendre moments: t^s = Σ λ_n P̃_n
            let mut mono = vec![Q::zero(); s as usize + 1];
            mono[s as usize] = Q::one();
            let lambda = self.reducer.tables().to_legendre(&mono);
            let mut mu = CForm::new();
            for (k, lk) in lambda.iter().enumerate() {
                mu.re.add_term(MONO_ONE, Atom::NuRe(k as u16), lk);
                mu.im.add_term(MONO_ONE, Atom::NuIm(k as u16), lk);
            }
            let mu = Cx {
                re: self.lower_with(j, &mu.re, true),
                im: self.lower_with(j, &mu.im, true),
            };
            let cm = self.p.cx_mul(c, mu);
            let pw = self.p.product(&vec![sigma; s as usize + 1]);
            let term = Cx {
                re: self.p.mul(pw, cm.re),
                im: self.p.mul(pw, cm.im),
            };
            acc = self.p.cx_add(acc, term);
        }
        let rotated = self.p.cx_mul(e, acc);
        let p = self.p.cx_add(base, rotated);
        let prev = if j == 0 { None } else { Some(j - 1) };
        let phi0 = self.phi_node(prev);
        let mut terms = vec![(Q::one(), phi0)];
        for i in 0..=m {
            let q = self.q(self.offsets[j] + i);
            let pw = self.p.product(&vec![sigma; i + 1]);
            let qs = self.p.mul(q, pw);
            terms.push((&l / int(i as i64 + 1), qs));
        }
        let angle = self.p.lin_comb(&terms);
        [p.re, p.im, angle]
    }
}

fn scale_form(f: &LinForm, c: &Q) -> LinForm {
    let mut out = LinForm::new();
    out.add_form(f, c);
    out
}
