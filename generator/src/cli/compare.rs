//! `arcwright compare`: what changes between two arm files, for code review.
//!
//! Three answers: which parameters changed (field by field, with the path a reviewer
//! finds in the file), which emitted functions change (their outputs differ at some
//! sampled state, or the arms differ in shape), and by how much each quantity moves
//! over sampled configurations.

use super::arm_input::load_arm;
use super::report::sample_configurations;
use super::{progress, CliError};
use crate::arm::{Actuator, Arm, SigmaPoly, MAX_SAMPLES};
use crate::derive::{derive, derive_statics};
use crate::dynamics::forward_dynamics;
use crate::emit::golden::SIGMAS;
use crate::emit::FUNCTIONS;
use crate::evaluate::Evaluator;
use clap::Args;
use num_traits::ToPrimitive;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use serde::Serialize;
use std::fmt::Write as _;
use std::path::{Path, PathBuf};

/// Compare two arm files (or two output folders that record theirs): changed
/// parameters, changed functions, and how much each quantity moves.
///
/// States are sampled in OLD's [sampling] ranges (else the default ones) with
/// random velocities and inputs, the same for both arms. A function changes when its
/// outputs differ (beyond 1e-12 relative) at any sampled state, or when the arms differ
/// in shape (segments' curvature degrees, number of inputs); then only the parameters
/// and the tip pose (at the same bending angle of each segment) are compared. Exit 1
/// when --tolerance is given and a relative change (or a change of shape) exceeds it.
#[derive(Args, Debug)]
#[command(
    allow_negative_numbers = true,
    after_help = "Examples:\n  arcwright compare old/reach_arm.toml examples/reach_arm.toml\n  \
                        arcwright compare old.toml new.toml --tolerance 1e-3 --json"
)]
pub struct CompareArgs {
    /// The arm before the change: an arm file, or an output folder holding arm.toml.
    old: PathBuf,
    /// The arm after the change.
    new: PathBuf,
    /// Largest accepted relative change of any quantity (default: report only).
    #[arg(long)]
    tolerance: Option<f64>,
    /// Number of sampled states (default: 50).
    #[arg(long, default_value_t = 50)]
    samples: usize,
    /// Seed of the sampler (default: OLD's [sampling] seed, else 1).
    #[arg(long)]
    seed: Option<u64>,
    /// Print JSON instead of text.
    #[arg(long)]
    json: bool,
}

/// Relative change below which two outputs count as equal (rounding only).
const SAME: f64 = 1e-12;

#[derive(Debug, Serialize)]
struct ParamChange {
    path: String,
    old: String,
    new: String,
}

#[derive(Debug, Serialize)]
struct Shape {
    n: usize,
    k: usize,
    curvature_degrees: Vec<u32>,
}

#[derive(Debug, Serialize)]
struct QuantityChange {
    name: String,
    changed: bool,
    /// Max over states of max |new − old| over the entries.
    max_abs_change: f64,
    /// Max over states of max |new − old| / max |old| (floored at 1e-3 of the largest
    /// max |old| over the states); `null` (JSON) when OLD is zero everywhere and NEW not.
    max_rel_change: f64,
    /// Why a function changes without numbers (shape change).
    #[serde(skip_serializing_if = "Option::is_none")]
    note: Option<String>,
}

#[derive(Debug, Serialize)]
struct CompareOut {
    old: String,
    new: String,
    samples: usize,
    seed: u64,
    parameters: Vec<ParamChange>,
    structural_change: bool,
    old_shape: Shape,
    new_shape: Shape,
    quantities: Vec<QuantityChange>,
    changed_functions: Vec<String>,
    tolerance: Option<f64>,
    exceeds_tolerance: bool,
}

/// An arm file, or the arm.toml an output folder records.
fn arm_source(p: &Path) -> Result<PathBuf, CliError> {
    if p.is_dir() {
        let f = p.join("arm.toml");
        if f.is_file() {
            Ok(f)
        } else {
            Err(CliError::Input(format!(
                "{}: folder does not record its arm file (no arm.toml); pass the arm file",
                p.display()
            )))
        }
    } else {
        Ok(p.to_path_buf())
    }
}

fn num(r: &crate::arm::Rational) -> String {
    match r.to_f64() {
        Some(x) => format!("{x}"),
        None => r.to_string(),
    }
}

fn poly(p: &SigmaPoly) -> String {
    if p.coeffs.len() == 1 {
        num(&p.coeffs[0])
    } else {
        format!(
            "[{}]",
            p.coeffs.iter().map(num).collect::<Vec<_>>().join(", ")
        )
    }
}

/// Every parameter as `(path, value)`, in file order; segments and actuators 1-based.
fn parameters(arm: &Arm) -> Vec<(String, String)> {
    let mut v = vec![
        ("name".to_string(), arm.name.clone()),
        (
            "gravity".to_string(),
            format!("[{}, {}]", num(&arm.gravity[0]), num(&arm.gravity[1])),
        ),
        (
            "expansion_order".to_string(),
            arm.expansion_order.to_string(),
        ),
    ];
    for (j, s) in arm.segments.iter().enumerate() {
        let p = |f: &str| format!("segment[{}].{f}", j + 1);
        v.push((p("length"), num(&s.length)));
        v.push((p("curvature_degree"), s.curvature_degree.to_string()));
        v.push((p("density"), poly(&s.density)));
        v.push((p("bending_stiffness"), poly(&s.bending_stiffness)));
        v.push((p("rotary_inertia"), poly(&s.rotary_inertia)));
        v.push((p("damping"), poly(&s.damping)));
    }
    v.push(("payload.mass".into(), num(&arm.payload.mass)));
    v.push((
        "payload.rotary_inertia".into(),
        num(&arm.payload.rotary_inertia),
    ));
    for (i, a) in arm.actuators.iter().enumerate() {
        let p = |f: &str| format!("actuator[{}].{f}", i + 1);
        match a {
            Actuator::Tendon {
                offset,
                through_segment,
            } => {
                v.push((p("kind"), "tendon".into()));
                v.push((p("offset"), num(offset)));
                v.push((p("through_segment"), (through_segment + 1).to_string()));
            }
            Actuator::Moment { segment } => {
                v.push((p("kind"), "moment".into()));
                v.push((p("segment"), (segment + 1).to_string()));
            }
            Actuator::EndForce { segment } => {
                v.push((p("kind"), "end_force".into()));
                v.push((p("segment"), (segment + 1).to_string()));
            }
        }
    }
    let ws = arm.sampling_or_default();
    v.push((
        "sampling.base_bending".into(),
        format!("{}", ws.base_bending),
    ));
    v.push((
        "sampling.extra_bending".into(),
        format!("{}", ws.extra_bending),
    ));
    v.push(("sampling.samples".into(), ws.samples.to_string()));
    v.push(("sampling.seed".into(), ws.seed.to_string()));
    v
}

fn parameter_changes(old: &Arm, new: &Arm) -> Vec<ParamChange> {
    let (a, b) = (parameters(old), parameters(new));
    let absent = "(absent)".to_string();
    let mut out = Vec::new();
    for (path, v) in &a {
        let w = b
            .iter()
            .find(|(p, _)| p == path)
            .map(|(_, w)| w)
            .unwrap_or(&absent);
        if v != w {
            out.push(ParamChange {
                path: path.clone(),
                old: v.clone(),
                new: w.clone(),
            });
        }
    }
    for (path, w) in &b {
        if !a.iter().any(|(p, _)| p == path) {
            out.push(ParamChange {
                path: path.clone(),
                old: absent.clone(),
                new: w.clone(),
            });
        }
    }
    out
}

fn shape(arm: &Arm) -> Shape {
    Shape {
        n: arm.n_coords(),
        k: arm.n_inputs(),
        curvature_degrees: arm.segments.iter().map(|s| s.curvature_degree).collect(),
    }
}

/// Running max of |Δ| and of |old| per state, for one quantity.
#[derive(Default)]
struct Acc {
    per_state: Vec<(f64, f64)>,
}

fn max_abs(v: &[f64]) -> f64 {
    v.iter().fold(0.0, |a: f64, x| {
        if a.is_nan() || x.is_nan() {
            f64::NAN
        } else {
            a.max(x.abs())
        }
    })
}

impl Acc {
    fn add(&mut self, old: &[f64], new: &[f64]) {
        let d: Vec<f64> = old.iter().zip(new).map(|(a, b)| b - a).collect();
        self.per_state.push((max_abs(&d), max_abs(old)));
    }
    fn finish(&self, name: &str) -> QuantityChange {
        let nan = |a: f64, x: f64| {
            if a.is_nan() || x.is_nan() {
                f64::NAN
            } else {
                a.max(x)
            }
        };
        let max_abs_change = self.per_state.iter().fold(0.0, |a, s| nan(a, s.0));
        let floor = 1e-3 * self.per_state.iter().fold(0.0f64, |a, s| a.max(s.1));
        let max_rel_change = self.per_state.iter().fold(0.0, |a, &(d, o)| {
            let r = if d == 0.0 {
                0.0
            } else if o.max(floor) == 0.0 {
                f64::INFINITY
            } else {
                d / o.max(floor)
            };
            nan(a, r)
        });
        QuantityChange {
            name: name.to_string(),
            changed: !(max_rel_change <= SAME),
            max_abs_change,
            max_rel_change,
            note: None,
        }
    }
}

fn flat(m: &[Vec<f64>]) -> Vec<f64> {
    m.iter().flatten().copied().collect()
}

/// Same shape: every function at the same sampled states.
fn compare_functions(old: &Arm, new: &Arm, samples: usize, seed: u64) -> Vec<QuantityChange> {
    let (n, k) = (old.n_coords(), old.n_inputs());
    let ws = old.sampling_or_default();
    let qs = sample_configurations(old, &ws, samples, seed);
    let mut rng = ChaCha8Rng::seed_from_u64(seed ^ 0xc0ffee);
    let (mo, mn) = (derive_statics(old), derive_statics(new));
    let (eo, en) = (Evaluator::new(&mo), Evaluator::new(&mn));
    let mut acc: Vec<Acc> = FUNCTIONS.iter().map(|_| Acc::default()).collect();
    let bar = progress::bar(samples as u64, "sampled states");
    for q in &qs {
        let qd: Vec<f64> = (0..n).map(|_| rng.gen_range(-1.0..=1.0)).collect();
        let u: Vec<f64> = (0..k).map(|_| rng.gen_range(-0.1..=0.1)).collect();
        let eval = |ev: &Evaluator, segs: usize| -> Vec<Vec<f64>> {
            let t = ev.terms(q, &qd);
            let mut pose = Vec::new();
            for j in 0..segs {
                for &s in &SIGMAS {
                    pose.extend(ev.pose(q, j, s));
                }
            }
            let qdd = forward_dynamics(&t, q, &qd, &u).unwrap_or_else(|_| vec![f64::NAN; n]);
            vec![
                flat(&t.b),
                flat(&t.c),
                t.g.clone(),
                flat(&t.k),
                flat(&t.d),
                flat(&t.a),
                pose,
                flat(&t.tip_jacobian),
                vec![t.kinetic_energy],
                vec![t.potential_energy],
                qdd,
                ev.static_terms(q).map(|s| flat(&s.dg)).unwrap_or_default(),
            ]
        };
        let (a, b) = (eval(&eo, old.segments.len()), eval(&en, new.segments.len()));
        for ((acc, x), y) in acc.iter_mut().zip(&a).zip(&b) {
            acc.add(x, y);
        }
        bar.inc(1);
    }
    bar.finish_and_clear();
    acc.iter()
        .zip(FUNCTIONS)
        .map(|(a, f)| a.finish(f))
        .collect()
}

/// Different shapes: the tip pose at the straight configuration and, with as many
/// segments on both sides, at the same constant-curvature bending of each segment.
fn compare_tip_pose(old: &Arm, new: &Arm, samples: usize, seed: u64) -> QuantityChange {
    let ws = old.sampling_or_default();
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let (mo, mn) = (derive(old), derive(new));
    let (eo, en) = (Evaluator::new(&mo), Evaluator::new(&mn));
    let mut acc = Acc::default();
    let same_segments = old.segments.len() == new.segments.len();
    let count = if same_segments { samples.max(1) } else { 1 };
    for s in 0..count {
        let angles: Vec<f64> = (0..old.segments.len())
            .map(|_| {
                if s == 0 {
                    0.0
                } else {
                    rng.gen_range(-1.0..=1.0) * ws.base_bending
                }
            })
            .collect();
        let q_of = |arm: &Arm| -> Vec<f64> {
            let mut q = vec![0.0; arm.n_coords()];
            for (j, seg) in arm.segments.iter().enumerate() {
                let l = seg.length.to_f64().unwrap_or(f64::NAN);
                q[arm.coord_offset(j)] = angles.get(j).copied().unwrap_or(0.0) / l;
            }
            q
        };
        let (qo, qn) = (q_of(old), q_of(new));
        let a = eo.terms(&qo, &vec![0.0; qo.len()]).tip_pose;
        let b = en.terms(&qn, &vec![0.0; qn.len()]).tip_pose;
        acc.add(&a, &b);
    }
    let mut q = acc.finish("tip_pose");
    q.note = Some(if same_segments {
        "each segment at the same constant-curvature bending angle".into()
    } else {
        "straight configuration only (different number of segments)".into()
    });
    q
}

pub fn run(args: &CompareArgs) -> Result<(), CliError> {
    if args.samples == 0 || args.samples > MAX_SAMPLES {
        return Err(CliError::Input(format!(
            "--samples: must be in 1..={MAX_SAMPLES}, got {}",
            args.samples
        )));
    }
    if let Some(t) = args.tolerance {
        if !(t.is_finite() && t >= 0.0) {
            return Err(CliError::Input(format!(
                "--tolerance: must be a non-negative number, got {t}"
            )));
        }
    }
    let (po, pn) = (arm_source(&args.old)?, arm_source(&args.new)?);
    let old = load_arm(&po, None)?;
    let new = load_arm(&pn, None)?;
    let seed = args.seed.unwrap_or(old.sampling_or_default().seed);
    let parameters = parameter_changes(&old, &new);
    let (so, sn) = (shape(&old), shape(&new));
    let structural = so.k != sn.k || so.curvature_degrees != sn.curvature_degrees;
    let quantities = if structural {
        let note = format!(
            "shape changes: n×k {}×{} → {}×{}, curvature degrees {:?} → {:?}",
            so.n, so.k, sn.n, sn.k, so.curvature_degrees, sn.curvature_degrees
        );
        let mut v: Vec<QuantityChange> = FUNCTIONS
            .iter()
            .map(|f| QuantityChange {
                name: f.to_string(),
                changed: true,
                max_abs_change: f64::NAN,
                max_rel_change: f64::NAN,
                note: Some(note.clone()),
            })
            .collect();
        v.push(compare_tip_pose(&old, &new, args.samples, seed));
        v
    } else {
        compare_functions(&old, &new, args.samples, seed)
    };
    let changed_functions: Vec<String> = quantities
        .iter()
        .filter(|q| q.changed && FUNCTIONS.contains(&q.name.as_str()))
        .map(|q| q.name.clone())
        .collect();
    let exceeds = match args.tolerance {
        None => false,
        Some(t) => {
            structural
                || quantities
                    .iter()
                    .any(|q| q.max_rel_change.is_nan() || q.max_rel_change > t)
        }
    };
    let out = CompareOut {
        old: po.display().to_string(),
        new: pn.display().to_string(),
        samples: args.samples,
        seed,
        parameters,
        structural_change: structural,
        old_shape: so,
        new_shape: sn,
        quantities,
        changed_functions,
        tolerance: args.tolerance,
        exceeds_tolerance: exceeds,
    };
    if args.json {
        let value = serde_json::to_value(&out).map_err(|e| CliError::Failed(e.to_string()))?;
        super::print_stdout(&super::json::to_string(&value))?;
    } else {
        super::print_stdout(&text(&out))?;
    }
    if exceeds {
        Err(CliError::Failed(format!(
            "the change exceeds --tolerance {:e}",
            args.tolerance.unwrap_or(0.0)
        )))
    } else {
        Ok(())
    }
}

fn sci(x: f64) -> String {
    if x.is_nan() {
        return "-".into();
    }
    if x.is_infinite() {
        return "inf".into();
    }
    let s = format!("{x:.1e}");
    match s.split_once('e') {
        Some((m, e)) => {
            let (sign, d) = e.strip_prefix('-').map(|d| ('-', d)).unwrap_or(('+', e));
            format!("{m}e{sign}{d:0>2}")
        }
        None => s,
    }
}

fn text(r: &CompareOut) -> String {
    let mut s = String::new();
    let _ = writeln!(s, "{} {} → {}", progress::bold("compare"), r.old, r.new);
    let _ = writeln!(s, "\n{}", progress::bold("parameters"));
    if r.parameters.is_empty() {
        let _ = writeln!(s, "  (none changed)");
    }
    let width = r.parameters.iter().map(|p| p.path.len()).max().unwrap_or(0);
    for p in &r.parameters {
        let _ = writeln!(s, "  {:<width$}  {} → {}", p.path, p.old, p.new);
    }
    if r.structural_change {
        let _ = writeln!(
            s,
            "\nstructural change: n×k {}×{} → {}×{}, curvature degrees {:?} → {:?}; every function \
             changes shape, only parameters and the tip pose are compared",
            r.old_shape.n,
            r.old_shape.k,
            r.new_shape.n,
            r.new_shape.k,
            r.old_shape.curvature_degrees,
            r.new_shape.curvature_degrees
        );
    }
    let _ = writeln!(
        s,
        "\n{} over {} sampled states (seed {}; change counted above {SAME:e} relative)",
        progress::bold("quantities"),
        r.samples,
        r.seed
    );
    let header = format!(
        "  {:<18} {:<9} {:>14} {:>14}",
        "function", "status", "max abs change", "max rel change"
    );
    let _ = writeln!(s, "{}", progress::bold(&header));
    for q in &r.quantities {
        let _ = writeln!(
            s,
            "  {:<18} {:<9} {:>14} {:>14}{}",
            q.name,
            if q.changed { "changed" } else { "same" },
            sci(q.max_abs_change),
            sci(q.max_rel_change),
            q.note
                .as_ref()
                .map(|n| format!("  ({n})"))
                .unwrap_or_default()
        );
    }
    let _ = writeln!(
        s,
        "\nchanged functions: {}",
        if r.changed_functions.is_empty() {
            "none".to_string()
        } else {
            r.changed_functions.join(", ")
        }
    );
    if let Some(t) = r.tolerance {
        let _ = writeln!(
            s,
            "tolerance {t:e}: {}",
            if r.exceeds_tolerance {
                "exceeded"
            } else {
                "within"
            }
        );
    }
    s
}
