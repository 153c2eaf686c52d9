//! What every target language emits, decided once: the functions, their schedules,
//! the shared moment-kernel table and each function's operation count. The language
//! modules only print a [`Plan`].

use super::number::Precision;
use super::ops::Ops;
use super::schedule::{Block, KernelRow, KernelTable, KernelUse, NuLayout, Scheduler};
use crate::derive::Model;
use crate::exact::{int, Q};
use crate::ir::{Id, Program};
use crate::kernel_matrix::{resolved_band, MatrixTable};
use crate::moments::{MILLER_EXTRA, SERIES_TERMS};
use num_traits::Zero;
use std::collections::BTreeMap;

/// The generated functions whose result depends on a runtime parameter: each has a
/// `_with` variant taking the parameters, and its old form means the arm file's values.
/// (The hand-written ones, forward dynamics and the statics, take them too.)
pub const PARAMETRIC_FUNCTIONS: [&str; 10] = [
    "stiffness",
    "damping",
    "inertia",
    "gravity",
    "gravity_jacobian",
    "potential_energy",
    "terms",
    "kinetic_energy",
    "coriolis",
    "regressor",
];

/// One emitted function's schedule and its cost.
#[derive(Clone, Debug)]
pub struct Func {
    /// The schedule; its `kernels` are moved out into [`Func::dots`] and the families,
    /// and its `nu_count` is what the function reads beyond `FAST_BENDING`.
    pub block: Block,
    /// Length of the function's `kern[]`: the dot products and the families' kernels.
    pub kern_len: usize,
    /// The kernels that are dot products over the moments at every bending, by range
    /// of `kern[]`.
    pub dots: Vec<DotRange>,
    /// The double-kernel groups (one per segment and weight) that come from the
    /// kernel recurrence ([`crate::kernel_matrix`]) at every bending.
    pub families: Vec<Family>,
    /// Everything the function executes: straight-line code, kernel rows, moment
    /// routines, angles, and the function's own loops (Cholesky); the kernels of every
    /// family by the recurrence from the cut top row (every segment with `|a_j| ≤
    /// FAST_BENDING`).
    pub ops: Ops,
    /// The same with every family's recurrence from both ends' whole rows (the worst
    /// case, every segment beyond).
    pub ops_beyond: Ops,
    /// Moments per segment on the fast path, `|a_j| ≤ FAST_BENDING`: what the code
    /// besides the family rows reads, and the top rows' bands as the precision resolves
    /// them ([`crate::kernel_matrix::resolved_band`]). `block.nu_count` beyond.
    pub nu_fast: Vec<usize>,
    /// Whether the function first calls the plan's shares helper ([`Plan::shares`])
    /// and reads its values as `s[k]`; such a function has no preamble of its own, and
    /// its `ops` include the helper's.
    pub over_shares: bool,
}

/// What the emitted kernel rows need: rows evaluated one at a time (`singles`), rows
/// evaluated at both parts of a segment's moments into `kern[]` (`pairs`, see
/// [`DotRange::reim`]), and the families' half-kernel rows, evaluated the same way into
/// two arrays (`families`).
#[derive(Clone, Copy, Debug, serde::Serialize)]
pub struct KernelRoutines {
    pub singles: bool,
    pub pairs: bool,
    pub families: bool,
}

/// Kernels `start .. start + uses.len()` of a function's `kern[]`, each the dot
/// product of a table row with the moments.
#[derive(Clone, Debug)]
pub struct DotRange {
    pub start: usize,
    pub uses: Vec<KernelUse>,
    /// The first `2 · reim` uses are (real, imaginary) pairs of one row
    /// ([`Block::reim`]), evaluated together.
    pub reim: usize,
}

impl DotRange {
    /// The uses evaluated one at a time, after the pairs.
    pub fn singles(&self) -> &[KernelUse] {
        &self.uses[2 * self.reim..]
    }
}

impl Func {
    /// The dot-product uses evaluated one at a time, in `kern[]` order.
    pub fn single_uses(&self) -> impl Iterator<Item = &KernelUse> {
        self.dots.iter().flat_map(|d| d.singles())
    }

    /// Every dot-product use in `kern[]` order.
    pub fn dot_uses(&self) -> impl Iterator<Item = &KernelUse> {
        self.dots.iter().flat_map(|d| &d.uses)
    }

    /// Segment `seg`'s moment count on the fast path and beyond, when they differ.
    pub fn moment_counts(&self, seg: usize) -> Option<(usize, usize)> {
        let (fast, full) = (self.nu_fast[seg], self.block.nu_count[seg]);
        (fast != full).then_some((fast, full))
    }

    /// Moments per segment that the code besides the families reads, and the families'
    /// rows `rows` (their cut seeds, or both ends' whole rows), where a segment has a
    /// family; `block.nu_count` elsewhere.
    fn moments_with<'f>(
        block: &Block,
        dots: &'f [DotRange],
        families: &'f [Family],
        rows: impl Fn(&'f Family) -> &'f [KernelUse],
        layout: &NuLayout,
        table: &KernelTable,
    ) -> Vec<usize> {
        let mut count = block.nu_read.clone();
        let dot_uses = dots.iter().flat_map(|d| &d.uses);
        for u in dot_uses.chain(families.iter().flat_map(rows)) {
            table.note_reach(u, layout, &mut count);
        }
        for (seg, c) in count.iter_mut().enumerate() {
            if !families.iter().any(|f| f.seg == seg) {
                *c = block.nu_count[seg];
            }
        }
        count
    }

    /// Reals of scratch the families' half-kernel matrices need (one at a time).
    pub fn matrix_scratch(&self, plan_tables: &[MatrixTable]) -> usize {
        self.families
            .iter()
            .map(|f| 2 * plan_tables[f.table].size.pow(2))
            .max()
            .unwrap_or(0)
    }
}

/// The uses of `kernels` outside the families, by range.
fn dot_ranges(kernels: &[KernelUse], reim: usize, families: &[Family]) -> Vec<DotRange> {
    let mut out = Vec::new();
    let mut at = 0;
    let mut range = |from: usize, to: usize| {
        if to > from {
            // The pairs lead kern[], ahead of every family.
            let reim = if from == 0 { reim } else { 0 };
            debug_assert!(2 * reim <= to);
            out.push(DotRange {
                start: from,
                uses: kernels[from..to].to_vec(),
                reim,
            });
        }
    };
    for f in families {
        range(at, f.start);
        at = f.start + f.count;
    }
    range(at, kernels.len());
    out
}

/// Kernel uses `start .. start + count` of a function: parts of segment `seg`'s double
/// kernels of one weight, read off the half kernels `F` (`F[s·size + t]`, real parts
/// then imaginary parts) that the recurrence fills. With `|a_seg| ≤ FAST_BENDING` it
/// runs down from the top row `seeds`, cut to the precision; beyond, from both ends'
/// whole rows `ends`, split at `s = ⌊|a|⌋` ([`crate::kernel_matrix::recur_split`]).
#[derive(Clone, Debug)]
pub struct Family {
    pub seg: usize,
    /// Index into [`Plan::matrix_tables`].
    pub table: usize,
    pub start: usize,
    pub count: usize,
    /// The top row's real parts (`size` uses, at the segment's real moment base), then
    /// its imaginary parts, bands cut to the precision.
    pub seeds: Vec<KernelUse>,
    /// The top row's whole uses (real parts, imaginary parts), then the bottom row's.
    pub ends: Vec<KernelUse>,
    /// Per use: `kern = F[first] + F[second]` (a real part), or `F[first] − F[second]`
    /// with both indices into the imaginary half.
    pub entries: Vec<FamilyEntry>,
    /// How many of `entries`, the first ones, are real parts (sums); the rest are
    /// imaginary parts (differences).
    pub sums: usize,
    /// Operations of the family's kernels by the recurrence (rows, recurrence, entries)
    /// from the cut top row and from both ends, and by their own rows (what the
    /// scheduler counted, and no path runs).
    pub fast: Ops,
    pub beyond: Ops,
    pub own: Ops,
}

#[derive(Clone, Debug)]
pub struct FamilyEntry {
    pub first: usize,
    pub second: usize,
}

/// One controlled output of the emitted regulators, `y = Σ c_i q[index_i]`: a row
/// of `S` (see [`crate::control::default_outputs`]).
#[derive(Clone, Debug)]
pub struct OutputRow {
    /// The label of `simulate` and `statics` (`2_0`, `2_mean`).
    pub label: String,
    pub terms: Vec<(Q, usize)>,
}

/// One segment's contribution to the cumulative angle: `Φ_j = Φ_{j−1} + Σ_i c_i q[index_i]`.
#[derive(Clone, Debug)]
pub struct AngleStep {
    pub terms: Vec<(Q, usize)>,
}

#[derive(Clone, Debug)]
pub struct Plan {
    pub name: String,
    pub n: usize,
    pub k: usize,
    pub segments: usize,
    /// `L_j` and the index of `q_{j,0}` per segment (moment argument `a_j = L_j q_{j,0}`).
    pub seg_length: Vec<Q>,
    pub seg_offset: Vec<usize>,
    /// Coordinates per segment.
    pub seg_coords: Vec<usize>,
    /// The regulators' controlled outputs and the actuators' limits.
    pub outputs: Vec<OutputRow>,
    pub limits: Vec<crate::arm::InputLimits>,
    /// The arm file's `[sampling]` bounds (or the defaults): the workspace the model is
    /// tested in, which the emitted range check enforces.
    pub range: crate::arm::Sampling,
    pub angle_steps: Vec<AngleStep>,
    pub layout: NuLayout,
    /// The runtime parameters and the arm file's values of them.
    pub params: crate::params::ParamLayout,
    pub param_defaults: Vec<Q>,
    /// Size of the scratch array for one moment evaluation (largest count anywhere).
    pub moment_max: usize,
    pub table: KernelTable,
    /// The kernel recurrence's tables, by weight and size ([`Family::table`]).
    pub matrix_tables: Vec<MatrixTable>,
    pub inertia: Func,
    /// `G` (n), and after it `A` (n×k row-major) when [`Plan::gravity_with_actuation`].
    pub gravity: Func,
    /// Whether `A` depends on `q` (end forces) and so is scheduled with `G`: the statics'
    /// residual and the regulator need both at one point, and such an `A` lies inside
    /// `G`'s schedule (on hanging_taper `G` and `A` together cost the 4,366 operations
    /// of `G` alone, against 2,252 for `A` apart).
    pub gravity_with_actuation: bool,
    pub stiffness: Func,
    pub damping: Func,
    pub actuation: Func,
    pub tip_jacobian: Func,
    /// `G` (n) and then `∂G/∂q` (n×n row-major) in one schedule, and `A` (n×k) after them
    /// when [`Plan::gravity_with_actuation`]: a Newton step of the statics needs them at
    /// one point, and they share the moments, the kernels and most sums (on reach_arm
    /// 4,901 operations against 3,190 + 4,436 apart). The emitted `gravity_jacobian` is
    /// this one keeping `∂G/∂q`.
    pub gravity_jacobian: Func,
    /// `∂A_ik/∂q_x` flattened `[x][i][k]`, when any entry is not identically zero (end
    /// forces): the static Jacobian's `−∂(A u)/∂q`.
    pub actuation_jacobian: Option<Func>,
    /// The kinetic energy is `½ q̇ᵀ B q̇` over the emitted inertia function, not code of
    /// its own (it would repeat all of `B`): its cost is `B`'s plus the quadratic form.
    pub kinetic_energy: Ops,
    /// The same with every segment beyond `FAST_BENDING` ([`Func::ops_beyond`]).
    pub kinetic_energy_beyond: Ops,
    pub potential_energy: Func,
    /// `B`, `C` (both n×n row-major) and `G` together: what a model-based controller
    /// asks for at every step, with the moments and kernels they share computed once.
    pub terms: Func,
    /// `B`, `C`, `G` and then `A` (n×k row-major) in one schedule over the shares
    /// helper, when [`Plan::gravity_with_actuation`]: what forward dynamics needs at one
    /// point. An end force's `A` lies inside the sums `terms` computes, so this costs
    /// what `terms` costs (on hanging_taper 20,310 operations, against 2,236 more for
    /// `A` apart); the helper only hands `A`'s values out too. `None` for a constant
    /// `A`, or without a helper.
    pub terms_actuation: Option<Func>,
    /// Forward dynamics over `terms` (or `terms_actuation`), `K`, `D` (and `A`) and a
    /// Cholesky solve.
    pub dynamics: Ops,
    /// The same with every segment beyond `FAST_BENDING` ([`Func::ops_beyond`]).
    pub dynamics_beyond: Ops,
    /// The regressor `Y(q, q̇, q̈)`, n × `params.linear_len()` row-major (a parametric
    /// model's; `None` only in a [`Plan::build`] of a folded one).
    pub regressor: Option<Func>,
    /// What `terms` and the regressor have in common, computed once by a private helper
    /// that both call ([`super::shares`]): its outputs are the values `s[k]` they read.
    /// `None` when the two share nothing (no regressor).
    pub shares: Option<Func>,
    pub pose: Vec<Func>,
}

/// A function whose roots are scheduled over the shares helper's values: straight-line
/// code only, reading what the helper reads (for its callers' signatures). `None` if
/// it would need moments, angles or kernels of its own, which the frontier leaves to
/// the helper ([`super::shares::frontier`]); the caller then schedules it alone.
fn over_shares(
    sched: &mut Scheduler,
    roots: &[Id],
    frontier: &BTreeMap<Id, usize>,
    helper: &Func,
) -> Option<Func> {
    let mut block = sched.block_over(roots, false, frontier);
    let preamble = !block.kernels.is_empty()
        || block.angles > 0
        || block
            .nu_count
            .iter()
            .chain(&block.pose_nu_count)
            .any(|&c| c > 0);
    debug_assert!(!preamble, "the frontier left a preamble to its reader");
    if preamble {
        return None;
    }
    let hb = &helper.block;
    block.reads_q |= hb.reads_q;
    block.reads_qd |= hb.reads_qd;
    block.reads_sigma |= hb.reads_sigma;
    block.reads_params |= hb.reads_params;
    Some(Func {
        kern_len: 0,
        dots: Vec::new(),
        families: Vec::new(),
        ops: block.ops + helper.ops,
        ops_beyond: block.ops + helper.ops_beyond,
        nu_fast: vec![0; block.nu_count.len()],
        block,
        over_shares: true,
    })
}

/// Worst-case operations of one moment evaluation of `count` moments, at argument
/// `scale · q` (scale ≠ 1 costs one multiplication; a pose argument one more).
pub fn moment_ops(count: usize, pose: bool) -> Ops {
    if count == 0 {
        return Ops::default();
    }
    let m = count;
    let terms = SERIES_TERMS - 1;
    // Two scaled series (orders m and m + 1), the scaled recurrence down to 0, and
    // j_n = lead_n H_n with lead_n = lead_{n−1} · x/(2n+1).
    let series = Ops {
        add: 2 * terms + (m - 1),
        mul: 2 + 2 * (2 * terms) + 2 * (m - 1) + 2 * (m - 1) + m,
        ..Ops::default()
    };
    // Miller runs only for |x| < m, so it starts at most m + MILLER_EXTRA orders up.
    let steps = m + MILLER_EXTRA;
    let miller = Ops {
        add: steps + 1,
        mul: 2 * steps + 2 + m,
        div: 2,
        ..Ops::default()
    };
    let upward = Ops {
        add: m,
        mul: 2 * m + 1,
        div: 1,
        ..Ops::default()
    };
    let common = Ops {
        mul: 2 + 2 * m + usize::from(pose),
        trig: 2,
        ..Ops::default()
    };
    series.max(miller).max(upward) + common
}

/// Solving `B q̈ = A u − h` by Cholesky, plus forming the right-hand side.
pub fn dynamics_loop_ops(n: usize, k: usize) -> Ops {
    let mut ops = Ops {
        add: n * k + n,
        mul: n * k,
        ..Ops::default()
    };
    for i in 0..n {
        for j in 0..=i {
            ops.add += j;
            ops.mul += j;
            if i == j {
                ops.sqrt += 1;
            } else {
                ops.div += 1;
            }
        }
        // forward and back substitution
        ops.add += 2 * i;
        ops.mul += 2 * i;
        ops.div += 2;
    }
    ops
}

impl Plan {
    /// The plan of `model`, which must be the emitted model
    /// ([`crate::derive::derive_emitted`]): the statics and regulator functions need its
    /// statics derivatives, and the parameter variants its parameter leaves.
    pub fn new(model: &Model, use_kernels: bool, precision: Precision) -> Result<Plan, String> {
        if !model.parametric || model.regressor.is_none() {
            return Err(
                "the model was derived with its parameters folded in (derive_statics); \
                 the emitted code takes them at run time (derive_emitted)"
                    .into(),
            );
        }
        Self::build(model, use_kernels, precision)
    }

    /// The plan of any model with statics roots, folded or parametric: what
    /// [`Plan::new`] checks and then builds. A folded model's plan is for counting
    /// operations only (the A/B of what the runtime parameters cost); its emitted code
    /// would ignore the parameters.
    pub fn build(model: &Model, use_kernels: bool, precision: Precision) -> Result<Plan, String> {
        let statics = model.statics.as_ref().ok_or(
            "the model was derived without its statics derivatives (derive_statics), which \
             the emitted equilibrium needs",
        )?;
        let arm = &model.arm;
        let n = model.n;
        let segs = arm.segments.len();
        let prog: &Program = &model.program;
        // `terms`: B, C (row-major) and G in one schedule, sharing everything.
        let mut terms_roots: Vec<Id> = model.inertia.iter().flatten().copied().collect();
        terms_roots.extend(model.coriolis.iter().flatten().copied());
        terms_roots.extend(model.gravity.iter().copied());

        let mut all_roots = crate::evaluate::main_roots(model);
        all_roots.extend(statics.gravity_jacobian.iter().flatten().copied());
        all_roots.extend(
            statics
                .actuation_jacobian
                .iter()
                .flatten()
                .flatten()
                .copied(),
        );
        if let Some(y) = &model.regressor {
            all_roots.extend(y.iter().flatten().copied());
        }
        // Room for the kernel recurrence's top rows, which read moments up to the
        // highest power pair of a segment's double kernels (`F_{t,t}`, t the largest).
        let mut reach = vec![0usize; segs];
        for e in model.kernel_entries.values() {
            let tail = model.kernel_weights[e.weight].len();
            reach[e.seg] = reach[e.seg].max(2 * e.t as usize + tail + 2);
        }
        let layout = NuLayout::of(prog, &all_roots, segs).with_reach(&reach);
        let mut sched = Scheduler::new(prog, &layout, &model.kernel_entries);
        let flat = |m: &Vec<Vec<Id>>| -> Vec<Id> { m.iter().flatten().copied().collect() };

        let seg_length: Vec<Q> = arm.segments.iter().map(|s| s.length.clone()).collect();
        let seg_offset: Vec<usize> = (0..segs).map(|j| arm.coord_offset(j)).collect();
        let seg_coords: Vec<usize> = arm.segments.iter().map(|s| s.n_coords()).collect();
        let outputs = crate::control::default_outputs(arm)
            .into_iter()
            .map(|o| OutputRow {
                label: o.label(arm),
                terms: match o {
                    crate::control::Output::Coordinate(i) => vec![(int(1), i)],
                    crate::control::Output::MeanCurvature(j) => (0..seg_coords[j])
                        .map(|i| (Q::new(1.into(), (i as i64 + 1).into()), seg_offset[j] + i))
                        .collect(),
                },
            })
            .collect();
        let angle_steps: Vec<AngleStep> = (0..segs)
            .map(|j| AngleStep {
                terms: (0..arm.segments[j].n_coords())
                    .map(|i| (&seg_length[j] / int(i as i64 + 1), seg_offset[j] + i))
                    .collect(),
            })
            .collect();
        let angle_ops = |count: usize| -> Ops {
            let mut ops = Ops::default();
            for step in &angle_steps[..count] {
                ops.mul += step.terms.len();
                ops.add += step.terms.len();
                ops.trig += 2;
            }
            ops
        };
        let mut matrix_tables: Vec<MatrixTable> = Vec::new();
        let mut func = |sched: &mut Scheduler, roots: &[Id], pose: bool| -> Func {
            // Moment kernels go into the shared table and are evaluated by its loop:
            // straight-line kernels share some sub-sums and so take fewer operations,
            // but the table is shared by all segments and functions. Measured on
            // reach_arm: B, C and G in one call 11 µs straight-line, 12 µs with the table;
            // object 840 KB against 350 KB; gcc -O2 31 s against 10 s.
            let mut block = sched.block(roots, use_kernels && !pose);
            let families = families(
                &block,
                &model.kernel_weights,
                sched,
                &layout,
                &mut matrix_tables,
                precision.unit_roundoff(),
            );
            let kernels = std::mem::take(&mut block.kernels);
            let dots = dot_ranges(&kernels, block.reim, &families);
            let table = &sched.table;
            let nu_fast =
                Func::moments_with(&block, &dots, &families, |f| &f.seeds, &layout, table);
            let nu_beyond =
                Func::moments_with(&block, &dots, &families, |f| &f.ends, &layout, table);
            let mut ops = block.ops + angle_ops(block.angles);
            for &pc in &block.pose_nu_count {
                ops += moment_ops(pc, true);
            }
            let (mut ops_beyond, mut ops_fast) = (ops, ops);
            for (&c, &fc) in nu_beyond.iter().zip(&nu_fast) {
                ops_beyond += moment_ops(c, false);
                ops_fast += moment_ops(fc, false);
            }
            // A family's own rows, which the block counted, give way to its recurrence.
            let ops = families.iter().fold(ops_fast, |o, f| o - f.own + f.fast);
            let ops_beyond = families
                .iter()
                .fold(ops_beyond, |o, f| o - f.own + f.beyond);
            block.nu_count = nu_beyond;
            Func {
                block,
                kern_len: kernels.len(),
                dots,
                families,
                ops,
                ops_beyond,
                nu_fast,
                over_shares: false,
            }
        };
        let mut inertia = func(&mut sched, &flat(&model.inertia), false);
        let mut stiffness = func(&mut sched, &flat(&model.stiffness), false);
        let mut damping = func(&mut sched, &flat(&model.damping), false);
        let mut actuation = func(&mut sched, &flat(&model.actuation), false);
        let gravity_with_actuation = model.n_inputs > 0 && actuation.block.reads_q;
        let mut gravity = {
            let mut roots = model.gravity.clone();
            if gravity_with_actuation {
                roots.extend(flat(&model.actuation));
            }
            func(&mut sched, &roots, false)
        };
        let mut tip_jacobian = func(&mut sched, &flat(&model.tip_jacobian), false);
        let mut gravity_jacobian = {
            let mut roots = model.gravity.clone();
            roots.extend(statics.gravity_jacobian.iter().flatten());
            if gravity_with_actuation {
                roots.extend(flat(&model.actuation));
            }
            func(&mut sched, &roots, false)
        };
        let da: Vec<Id> = statics
            .actuation_jacobian
            .iter()
            .flatten()
            .flatten()
            .copied()
            .collect();
        let mut actuation_jacobian = da
            .iter()
            .any(|&id| !prog.is_zero(id))
            .then(|| func(&mut sched, &da, false));
        let quadratic_form = Ops {
            add: n * n,
            mul: n * n + n + 1,
            ..Ops::default()
        };
        let kinetic_energy = inertia.ops + quadratic_form;
        let kinetic_energy_beyond = inertia.ops_beyond + quadratic_form;
        let mut potential_energy = func(&mut sched, &[model.potential_energy], false);
        // `terms` and the regressor over one helper that computes what they share.
        let regressor_roots = model.regressor.as_ref().map(flat);
        // With an end force, A's values join the helper's outputs, which hands them to
        // `terms_actuation`: they are sums `terms` computes anyway.
        let mut terms_actuation_roots = terms_roots.clone();
        if gravity_with_actuation {
            terms_actuation_roots.extend(flat(&model.actuation));
        }
        let frontier = match &regressor_roots {
            Some(y) => super::shares::frontier(prog, &terms_actuation_roots, y, |i| {
                sched.is_moment_form(i)
            }),
            None => BTreeMap::new(),
        };
        let mut shares = (!frontier.is_empty()).then(|| {
            let roots: Vec<Id> = frontier.keys().copied().collect();
            func(&mut sched, &roots, false)
        });
        let mut over = |sched: &mut Scheduler, roots: &[Id]| -> Func {
            shares
                .as_ref()
                .and_then(|helper| over_shares(sched, roots, &frontier, helper))
                .unwrap_or_else(|| func(sched, roots, false))
        };
        let mut terms = over(&mut sched, &terms_roots);
        let mut terms_actuation = match &shares {
            Some(helper) if gravity_with_actuation => {
                over_shares(&mut sched, &terms_actuation_roots, &frontier, helper)
            }
            _ => None,
        };
        let mut regressor = regressor_roots.map(|y| over(&mut sched, &y));
        if !terms.over_shares && !regressor.as_ref().is_some_and(|y| y.over_shares) {
            shares = None; // no caller: not emitted
            terms_actuation = None;
        }
        let (with_a, with_a_beyond) = match &terms_actuation {
            Some(f) => (f.ops, f.ops_beyond),
            None => (
                terms.ops + actuation.ops,
                terms.ops_beyond + actuation.ops_beyond,
            ),
        };
        let dynamics = with_a + stiffness.ops + damping.ops + dynamics_loop_ops(n, model.n_inputs);
        let dynamics_beyond = with_a_beyond
            + stiffness.ops_beyond
            + damping.ops_beyond
            + dynamics_loop_ops(n, model.n_inputs);
        let mut pose: Vec<Func> = model
            .pose
            .iter()
            .map(|p| func(&mut sched, p, true))
            .collect();
        let mut funcs = vec![
            &mut inertia,
            &mut gravity,
            &mut stiffness,
            &mut damping,
            &mut actuation,
            &mut tip_jacobian,
            &mut gravity_jacobian,
            &mut potential_energy,
            &mut terms,
        ];
        funcs.extend(actuation_jacobian.as_mut());
        funcs.extend(terms_actuation.as_mut());
        funcs.extend(shares.as_mut());
        funcs.extend(regressor.as_mut());
        funcs.extend(pose.iter_mut());
        let table = compact_table(&sched.table, &mut funcs);
        // The emitted row loops test their end after each coefficient.
        if table.rows.iter().any(Vec::is_empty) {
            return Err("internal error: an empty kernel row in the table".into());
        }
        let moment_max = layout
            .count
            .iter()
            .chain(pose.iter().flat_map(|f| f.block.pose_nu_count.iter()))
            .copied()
            .max()
            .unwrap_or(0)
            .max(2);
        debug_assert!(seg_length.iter().all(|l| !l.is_zero()));
        Ok(Plan {
            name: arm.name.clone(),
            n,
            k: model.n_inputs,
            segments: segs,
            seg_length,
            seg_offset,
            seg_coords,
            outputs,
            limits: arm.input_limits.clone(),
            range: arm.sampling_or_default(),
            angle_steps,
            layout,
            params: crate::params::ParamLayout::of(arm),
            param_defaults: crate::params::ParamLayout::of(arm).defaults(arm),
            moment_max,
            table,
            matrix_tables,
            inertia,
            gravity,
            gravity_with_actuation,
            stiffness,
            damping,
            actuation,
            tip_jacobian,
            gravity_jacobian,
            actuation_jacobian,
            kinetic_energy,
            kinetic_energy_beyond,
            potential_energy,
            terms,
            terms_actuation,
            dynamics,
            dynamics_beyond,
            regressor,
            shares,
            pose,
        })
    }

    /// Every function with a schedule of its own.
    pub fn funcs(&self) -> impl Iterator<Item = &Func> {
        [
            &self.inertia,
            &self.gravity,
            &self.stiffness,
            &self.damping,
            &self.actuation,
            &self.tip_jacobian,
            &self.gravity_jacobian,
            &self.potential_energy,
            &self.terms,
        ]
        .into_iter()
        .chain(&self.actuation_jacobian)
        .chain(&self.terms_actuation)
        .chain(&self.shares)
        .chain(&self.regressor)
        .chain(&self.pose)
    }

    /// Which kernel routines the emitted code calls (an unused static routine is a
    /// warning in C and Rust).
    pub fn kernel_routines(&self) -> KernelRoutines {
        KernelRoutines {
            singles: self.funcs().any(|f| f.single_uses().next().is_some()),
            pairs: self.funcs().any(|f| f.dots.iter().any(|d| d.reim > 0)),
            families: self.funcs().any(|f| !f.families.is_empty()),
        }
    }

    /// Every operation of the emitted functions that have code of their own (the
    /// others call these), each counted once: the yardstick for choosing a model.
    pub fn emitted_ops(&self) -> usize {
        let funcs = [
            &self.inertia,
            &self.terms,
            &self.gravity,
            &self.actuation,
            &self.tip_jacobian,
            &self.potential_energy,
            &self.gravity_jacobian,
        ];
        funcs
            .into_iter()
            .chain(&self.actuation_jacobian)
            .chain(&self.regressor)
            .chain(&self.pose)
            .map(|f| f.ops.total())
            .sum()
    }

    /// Total non-zeros of the kernel table.
    pub fn table_nnz(&self) -> usize {
        self.table.rows.iter().map(Vec::len).sum()
    }
}

/// The table rows some function reads (its dot products, its families' rows),
/// renumbered in their first order: the scheduler interned the row of every
/// double-kernel part too, and a family reads those off its half kernels instead.
fn compact_table(table: &KernelTable, funcs: &mut [&mut Func]) -> KernelTable {
    let mut used = vec![false; table.rows.len()];
    for f in funcs.iter() {
        let rows = f
            .families
            .iter()
            .flat_map(|fam| fam.seeds.iter().chain(&fam.ends));
        for u in f.dot_uses().chain(rows) {
            used[u.row] = true;
        }
    }
    let mut out = KernelTable::default();
    let mut new_of = vec![usize::MAX; table.rows.len()];
    for (r, row) in table.rows.iter().enumerate() {
        if used[r] {
            new_of[r] = out.intern(row.clone());
        }
    }
    for f in funcs.iter_mut() {
        let Func { dots, families, .. } = &mut **f;
        let rows = families
            .iter_mut()
            .flat_map(|fam| fam.seeds.iter_mut().chain(fam.ends.iter_mut()));
        for u in dots.iter_mut().flat_map(|d| d.uses.iter_mut()).chain(rows) {
            u.row = new_of[u.row];
        }
    }
    out
}

/// The double-kernel groups of a block (uses `kernels[start..start + count]` with the
/// same segment and weight, as the scheduler orders them), each with its table (added
/// to `tables` when new), the top row's uses and the entries.
fn families(
    block: &Block,
    weights: &[Vec<Q>],
    sched: &mut Scheduler,
    layout: &NuLayout,
    tables: &mut Vec<MatrixTable>,
    unit: f64,
) -> Vec<Family> {
    let mut out: Vec<Family> = Vec::new();
    let mut i = 0;
    while i < block.matrix.len() {
        let Some(first) = &block.matrix[i] else {
            i += 1;
            continue;
        };
        let key = (first.entry.seg, first.entry.weight);
        let start = i;
        while i < block.matrix.len()
            && block.matrix[i]
                .as_ref()
                .is_some_and(|m| (m.entry.seg, m.entry.weight) == key)
        {
            i += 1;
        }
        let group = &block.matrix[start..i];
        let size = group
            .iter()
            .flatten()
            .map(|m| m.entry.t as usize + 1)
            .max()
            .unwrap_or(1);
        let tail = &weights[key.1];
        let known = tables
            .iter()
            .position(|t| t.size == size && t.tail == *tail);
        let candidate = match known {
            Some(t) => tables[t].clone(),
            None => MatrixTable::new(tail, size),
        };
        // The top row reads moments up to the highest power pair; where the moment
        // layout stops short of that, the group stays dot products.
        let reach = candidate
            .seeds
            .iter()
            .chain(&candidate.bottom)
            .map(Vec::len)
            .max()
            .unwrap_or(0);
        if reach > layout.count[key.0] {
            continue;
        }
        // The top row's bands as far as the precision resolves them at `|a| ≤
        // FAST_BENDING`, the only bending at which they are read.
        let bands: Vec<&[Q]> = candidate
            .seeds
            .iter()
            .map(|c| &c[..resolved_band(c, unit)])
            .collect();
        // So does a group whose dot products are cheaper than the recurrence at either
        // bending (few kernels of low powers): the rows' real and imaginary parts, the
        // recurrence, one addition per kernel (`F[first] ± F[second]`).
        let nnz = |rows: &[&[Q]]| -> usize {
            rows.iter()
                .map(|c| c.iter().filter(|c| !c.is_zero()).count())
                .sum()
        };
        let whole: Vec<&[Q]> = candidate
            .seeds
            .iter()
            .chain(&candidate.bottom)
            .map(Vec::as_slice)
            .collect();
        let (add, mul, div) = candidate.recurrence_ops();
        let by_rows = |nnz: usize| Ops {
            add: 2 * nnz + add + (i - start),
            mul: 2 * nnz + mul,
            div,
            ..Ops::default()
        };
        let (fast, beyond) = (by_rows(nnz(&bands)), by_rows(nnz(&whole)));
        let dot_nnz: usize = block.kernels[start..i]
            .iter()
            .map(|u| sched.table.rows[u.row].len())
            .sum();
        let own = Ops {
            add: dot_nnz,
            mul: dot_nnz,
            ..Ops::default()
        };
        if beyond.total().max(fast.total()) >= own.total() {
            continue;
        }
        let seg = key.0 as u16;
        let mut uses = |rows: &[&[Q]]| -> Vec<KernelUse> {
            let mut out = Vec::with_capacity(2 * rows.len());
            for im in [false, true] {
                for c in rows {
                    let row: KernelRow = c
                        .iter()
                        .enumerate()
                        .filter(|(_, c)| !c.is_zero())
                        .map(|(n, c)| (n, c.clone()))
                        .collect();
                    out.push(KernelUse {
                        row: sched.table.intern(row),
                        base: layout.base(seg, im),
                    });
                }
            }
            out
        };
        let seeds = uses(&bands);
        let mut ends = uses(&whole[..size]);
        ends.extend(uses(&whole[size..]));
        let table = known.unwrap_or_else(|| {
            tables.push(candidate);
            tables.len() - 1
        });
        let entries = group
            .iter()
            .flatten()
            .map(|m| {
                let (s, t) = (m.entry.s as usize, m.entry.t as usize);
                let half = if m.entry.im { size * size } else { 0 };
                FamilyEntry {
                    first: half + s * size + t,
                    second: half + t * size + s,
                }
            })
            .collect();
        let sums = group.iter().flatten().filter(|m| !m.entry.im).count();
        debug_assert!(
            group.iter().flatten().skip(sums).all(|m| m.entry.im),
            "a family's real parts come first"
        );
        out.push(Family {
            seg: key.0,
            table,
            start,
            count: i - start,
            seeds,
            ends,
            entries,
            sums,
            fast,
            beyond,
            own,
        });
    }
    out
}

/// The operation-count sentence of a function's comment: one figure, or the fast
/// path's and the worst case's when the kernel recurrence's rows make them differ.
pub fn ops_sentence(ops: Ops, ops_beyond: Ops) -> String {
    if ops == ops_beyond {
        format!("Operations: {ops}.")
    } else {
        format!(
            "Operations: {ops} with every segment's |a_j| <= {} (top rows cut to the \
             precision); {ops_beyond} beyond (whole rows at both ends).",
            crate::kernel_matrix::FAST_BENDING
        )
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The statics' Jacobian schedule computes `G` too (its first n outputs), which a
    /// Newton step then takes from it: the step is counted at less than a trial (the
    /// residual, with `G` on its own) and the Jacobian together. A `q`-dependent `A`
    /// (an end force) is scheduled with `G` in both, a constant one is not.
    #[test]
    fn the_statics_schedules_share_g() {
        let arm = crate::arm::parse_arm_str(
            "name = \"step\"\nexpansion_order = 3\ngravity = [0.0, -9.81]\n\
             [[segment]]\nlength = 0.12\ncurvature_degree = 2\ndensity = 0.3\n\
             bending_stiffness = 0.012\n\
             [[segment]]\nlength = 0.1\ncurvature_degree = 1\ndensity = 0.25\n\
             bending_stiffness = 0.008\n\
             [[actuator]]\nkind = \"end_force\"\nsegment = 2\n",
            "step.toml",
        )
        .unwrap();
        let model = crate::derive::derive_emitted(&arm);
        let plan = Plan::new(&model, true, Precision::F64).unwrap();
        let (n, k) = (plan.n, plan.k);
        // G, ∂G/∂q and (the end force's A depends on q) A.
        assert_eq!(plan.gravity_jacobian.block.outputs.len(), n + n * n + n * k);
        let ops = super::super::control_code::StaticsOps::of(&plan);
        let apart = (ops.trial + ops.jacobian).total();
        assert!(
            ops.newton.total() < apart,
            "a Newton step {:?} against a trial and the Jacobian apart, {apart}",
            ops.newton
        );
        // The end force's A depends on q: it is scheduled with G, and a residual costs
        // less than G's and A's schedules would apart.
        assert!(plan.gravity_with_actuation);
        assert_eq!(plan.gravity.block.outputs.len(), n + n * k);
        let separate = (plan.gravity.ops_beyond + plan.actuation.ops_beyond).total();
        assert!(ops.residual.total() < separate, "{:?}", ops.residual);
        // A constant A (a moment) is not.
        let moment = crate::arm::parse_arm_str(
            "name = \"moment\"\nexpansion_order = 2\ngravity = [0.0, -9.81]\n\
             [[segment]]\nlength = 0.12\ncurvature_degree = 1\ndensity = 0.3\n\
             bending_stiffness = 0.012\n\
             [[actuator]]\nkind = \"moment\"\nsegment = 1\n",
            "moment.toml",
        )
        .unwrap();
        let plan = Plan::new(
            &crate::derive::derive_emitted(&moment),
            true,
            Precision::F64,
        )
        .unwrap();
        assert!(!plan.gravity_with_actuation);
        assert_eq!(plan.gravity.block.outputs.len(), plan.n);
        assert_eq!(
            plan.gravity_jacobian.block.outputs.len(),
            plan.n * (plan.n + 1)
        );
        assert!(plan.terms_actuation.is_none());
    }

    /// An end force at the tip (segment 2) or inside the arm (segment 1): forward
    /// dynamics takes `A` from `terms`' schedule, at no cost beyond `terms`' own.
    #[test]
    fn forward_dynamics_takes_an_end_force_from_the_terms_schedule() {
        for segment in [1, 2] {
            let arm = crate::arm::parse_arm_str(
                &format!(
                    "name = \"fd\"\nexpansion_order = 3\ngravity = [0.0, -9.81]\n\
                     [[segment]]\nlength = 0.12\ncurvature_degree = 2\ndensity = 0.3\n\
                     bending_stiffness = 0.012\n\
                     [[segment]]\nlength = 0.1\ncurvature_degree = 1\ndensity = 0.25\n\
                     bending_stiffness = 0.008\n\
                     [[actuator]]\nkind = \"end_force\"\nsegment = {segment}\n"
                ),
                "fd.toml",
            )
            .unwrap();
            let plan =
                Plan::new(&crate::derive::derive_emitted(&arm), true, Precision::F64).unwrap();
            let (n, k) = (plan.n, plan.k);
            let f = plan
                .terms_actuation
                .as_ref()
                .expect("an end force's A is scheduled with B, C and G");
            assert!(f.over_shares, "segment {segment}");
            assert_eq!(f.block.outputs.len(), 2 * n * n + n + n * k);
            assert_eq!(
                f.ops, plan.terms.ops,
                "segment {segment}: A costs more than terms"
            );
            // Forward dynamics pays for terms, K, D and the solve: nothing for A.
            let solve = plan.stiffness.ops + plan.damping.ops + dynamics_loop_ops(n, k);
            assert_eq!(plan.dynamics, plan.terms.ops + solve, "segment {segment}");
            assert!(plan.actuation.ops.total() > 0, "segment {segment}");
        }
    }
}
