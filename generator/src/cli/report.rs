//! `arcwright report`: what each expansion order costs and how accurate it is, so a
//! user can choose one.
//!
//! For every order up to the maximum the arm is derived (timed), the program's
//! operations are counted, and the model is evaluated over a deterministic sample of
//! the [sampling] ranges and compared with the exact (untruncated) kinematics evaluated by
//! quadrature. Errors are the maximum over the samples of:
//!
//! - tip position: `|p_N − p| / ℓ`, ℓ the arm's total length (the tip angle is exact
//!   at every order, so it is not listed);
//! - inertia: `‖B_N − B‖_F / max(‖B‖_F, f_B)`;
//! - gravity: `‖G_N − G‖ / max(‖G‖, f_G)`;
//!
//! where the floors `f` are a thousandth of the largest norm over the samples, so a
//! configuration where `G` happens to vanish does not make the error meaningless.

use super::arm_input::load_arm;
use super::plot::{self, Axes, Line, Panel};
use super::{progress, CliError};
use crate::arm::{Arm, Sampling, MAX_EXPANSION_ORDER, MAX_SAMPLES};
use crate::derive::{derive, Model};
use crate::evaluate::{main_roots, Evaluator};
use crate::ir::OpCount;
use crate::reference::{Kinematics, Reference};
use clap::Args;
use num_traits::{ToPrimitive, Zero};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use serde::Serialize;
use std::fmt::Write as _;
use std::path::{Path, PathBuf};
use std::time::Instant;

/// Accuracy and cost of each expansion order over sampled configurations.
///
/// Derives the arm at orders 0..=N, compares tip position, inertia B and gravity G
/// with the exact kinematics over sampled configurations (bounds from the arm file's
/// [sampling] table, else each segment bends by at most π, plus π/2 from its higher
/// curvature coefficients), counts the operations of the derived program and times
/// the derivation. Prints a table (or JSON with --json) and writes error_vs_order.svg,
/// backbones.svg and report.json into the output folder.
#[derive(Args, Debug)]
#[command(
    allow_negative_numbers = true,
    after_help = "Example:\n  arcwright report examples/reach_arm.toml --max-order 6 --samples 100\n  \
                        arcwright report examples/reach_arm.toml --json --out /tmp/reach_report"
)]
pub struct ReportArgs {
    /// Arm file (TOML).
    arm: PathBuf,
    /// Highest order to derive (default: the file's expansion_order; at most 10).
    #[arg(long)]
    max_order: Option<u32>,
    /// Number of sampled configurations (default: the [sampling] table's, else 200).
    #[arg(long)]
    samples: Option<usize>,
    /// Seed of the sampler (default: the [sampling] table's, else 1).
    #[arg(long)]
    seed: Option<u64>,
    /// Error level for the suggested order: the lowest order with every error below it.
    #[arg(long, default_value_t = 1e-3)]
    tolerance: f64,
    /// Print JSON instead of a table.
    #[arg(long)]
    json: bool,
    /// Folder for the plots and report.json (default: <arm name>_report beside the arm file).
    #[arg(long)]
    out: Option<PathBuf>,
}

/// Operation counts of a derived program.
#[derive(Clone, Copy, Debug, Serialize)]
pub(crate) struct Ops {
    pub adds: usize,
    pub muls: usize,
    pub negs: usize,
    pub total: usize,
}

impl From<OpCount> for Ops {
    fn from(c: OpCount) -> Self {
        Ops {
            adds: c.adds,
            muls: c.muls,
            negs: c.negs,
            total: c.adds + c.muls + c.negs,
        }
    }
}

/// One row of the report.
#[derive(Clone, Debug, Serialize)]
pub(crate) struct OrderRow {
    pub order: u32,
    /// Max over samples of `|Δp_tip| / arm length`.
    pub tip_position_error: f64,
    /// Max over samples of the relative Frobenius error of `B`.
    pub inertia_error: f64,
    /// Max over samples of the relative error of `G`; `None` without gravity.
    pub gravity_error: Option<f64>,
    /// Operations for `B`, `C` and `G`.
    pub ops_dynamics: Ops,
    /// Operations for every output (adds `K`, `D`, `A`, tip pose and Jacobian, energies).
    pub ops_all: Ops,
    pub derive_seconds: f64,
}

#[derive(Debug, Serialize)]
struct SamplingOut {
    base_bending: f64,
    extra_bending: f64,
    /// `"file"` (the arm file's [sampling] table) or `"default"`.
    source: &'static str,
}

#[derive(Debug, Serialize)]
struct ReportOut {
    arm: String,
    file: String,
    n: usize,
    arm_length: f64,
    samples: usize,
    seed: u64,
    sampling: SamplingOut,
    orders: Vec<OrderRow>,
    tolerance: f64,
    /// Lowest order whose errors are all at most `tolerance` (`None`: none is).
    suggested_order: Option<u32>,
    /// When no order shown is enough: the lowest higher order that is (the
    /// `--max-order` to ask for), if any up to the maximum is.
    needed_order: Option<u32>,
    plots: Vec<String>,
}

/// `count` configurations inside the [sampling] ranges, the same for the same seed.
///
/// Per segment: base bending `a = L q0` uniform in `[−base, base]`; the higher
/// coefficients get a random direction (uniform weights, normalised in ℓ¹) and a
/// total extra bending `Σ_{i≥1} |L q_i|/(i+1)` uniform in `[0, extra]`.
pub(crate) fn sample_configurations(
    arm: &Arm,
    ws: &Sampling,
    count: usize,
    seed: u64,
) -> Vec<Vec<f64>> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    (0..count)
        .map(|_| {
            let mut q = vec![0.0; arm.n_coords()];
            for (j, seg) in arm.segments.iter().enumerate() {
                let off = arm.coord_offset(j);
                let l = seg.length.to_f64().unwrap_or(f64::NAN);
                q[off] = rng.gen_range(-1.0..=1.0) * ws.base_bending / l;
                let m = seg.curvature_degree as usize;
                if m == 0 {
                    continue;
                }
                let w: Vec<f64> = (0..m).map(|_| rng.gen_range(-1.0..=1.0)).collect();
                let extra = rng.gen_range(0.0..=1.0) * ws.extra_bending;
                let norm: f64 = w.iter().map(|x| x.abs()).sum();
                if norm > 0.0 {
                    for i in 1..=m {
                        q[off + i] = w[i - 1] / norm * extra * (i + 1) as f64 / l;
                    }
                }
            }
            q
        })
        .collect()
}

fn frob(m: &[Vec<f64>]) -> f64 {
    m.iter().flatten().map(|x| x * x).sum::<f64>().sqrt()
}

fn frob_diff(a: &[Vec<f64>], b: &[Vec<f64>]) -> f64 {
    a.iter()
        .flatten()
        .zip(b.iter().flatten())
        .map(|(x, y)| (x - y) * (x - y))
        .sum::<f64>()
        .sqrt()
}

fn norm(v: &[f64]) -> f64 {
    v.iter().map(|x| x * x).sum::<f64>().sqrt()
}

fn norm_diff(a: &[f64], b: &[f64]) -> f64 {
    a.iter()
        .zip(b)
        .map(|(x, y)| (x - y) * (x - y))
        .sum::<f64>()
        .sqrt()
}

/// Max of NaN-aware values: any NaN makes the result NaN (a broken model shows).
fn worst(acc: f64, x: f64) -> f64 {
    if acc.is_nan() || x.is_nan() {
        f64::NAN
    } else {
        acc.max(x)
    }
}

/// Points along the backbone (base to tip), `per_segment` intervals per segment.
fn backbone(
    pose: impl Fn(usize, f64) -> [f64; 3],
    segments: usize,
    per_segment: usize,
) -> Vec<(f64, f64)> {
    let mut pts = vec![(0.0, 0.0)];
    for j in 0..segments {
        for k in 1..=per_segment {
            let p = pose(j, k as f64 / per_segment as f64);
            pts.push((p[0], p[1]));
        }
    }
    pts
}

/// How many sample configurations the backbone figure shows.
const SHAPES: usize = 6;
const SHAPE_POINTS: usize = 24;

/// The exact values at one sample.
struct ExactSample {
    tip: [f64; 3],
    b: Vec<Vec<f64>>,
    g: Vec<f64>,
}

pub fn run(args: &ReportArgs) -> Result<(), CliError> {
    let arm = load_arm(&args.arm, None)?;
    let max_order = match args.max_order {
        Some(n) if n > MAX_EXPANSION_ORDER => {
            return Err(CliError::Input(format!(
                "--max-order: {n} is above the supported maximum {MAX_EXPANSION_ORDER}"
            )))
        }
        Some(n) => n,
        None => arm.expansion_order.min(MAX_EXPANSION_ORDER),
    };
    super::within_budget(
        "report on this arm (one derivation per order)",
        (0..=max_order)
            .map(|n| crate::cost::estimate(&arm.with_order(n), crate::cost::Work::Derive))
            .reduce(|a, b| a + b)
            .expect("at least order 0"),
    )?;
    let ws = arm.sampling_or_default();
    let samples = args.samples.unwrap_or(ws.samples);
    if samples == 0 || samples > MAX_SAMPLES {
        return Err(CliError::Input(format!(
            "--samples: must be in 1..={MAX_SAMPLES}, got {samples}"
        )));
    }
    if !(args.tolerance.is_finite() && args.tolerance > 0.0) {
        return Err(CliError::Input(format!(
            "--tolerance: must be a positive number, got {}",
            args.tolerance
        )));
    }
    let seed = args.seed.unwrap_or(ws.seed);
    let out_dir = match &args.out {
        Some(d) => d.clone(),
        None => default_out_dir(&args.arm, &arm.name, "report"),
    };
    super::prepare_out_dir(&out_dir)?;

    let qs = sample_configurations(&arm, &ws, samples, seed);
    let n = arm.n_coords();
    let segs = arm.segments.len();
    let arm_length: f64 = arm
        .segments
        .iter()
        .map(|s| s.length.to_f64().unwrap_or(f64::NAN))
        .sum();
    let has_gravity = !(arm.gravity[0].is_zero() && arm.gravity[1].is_zero());
    let zeros = vec![0.0; n];

    // The yardstick: exact kinematics by quadrature, once per sample.
    let exact_ref = Reference::new(&arm, Kinematics::Exact);
    let bar = progress::bar(samples as u64, "exact kinematics");
    let mut exact = Vec::with_capacity(samples);
    for q in &qs {
        exact.push(ExactSample {
            tip: exact_ref.tip_pose(q),
            b: exact_ref.inertia(q),
            g: if has_gravity {
                exact_ref.gravity(q)
            } else {
                Vec::new()
            },
        });
        bar.inc(1);
    }
    bar.finish_and_clear();
    let floor_b = 1e-3 * exact.iter().map(|e| frob(&e.b)).fold(0.0, f64::max);
    let floor_g = 1e-3 * exact.iter().map(|e| norm(&e.g)).fold(0.0, f64::max);
    let shown: Vec<usize> = (0..samples.min(SHAPES)).collect();
    let exact_shapes: Vec<Vec<(f64, f64)>> = shown
        .iter()
        .map(|&s| backbone(|j, sig| exact_ref.pose(&qs[s], j, sig), segs, SHAPE_POINTS))
        .collect();

    // Worst errors of one order's model over the samples: tip position, B, G.
    let errors_of = |ev: &Evaluator, tick: &dyn Fn()| {
        let (mut e_tip, mut e_b, mut e_g) = (0.0f64, 0.0f64, 0.0f64);
        for (q, ex) in qs.iter().zip(&exact) {
            let t = ev.terms(q, &zeros);
            let dp =
                ((t.tip_pose[0] - ex.tip[0]).powi(2) + (t.tip_pose[1] - ex.tip[1]).powi(2)).sqrt();
            e_tip = worst(e_tip, dp / arm_length);
            e_b = worst(e_b, frob_diff(&t.b, &ex.b) / frob(&ex.b).max(floor_b));
            if has_gravity {
                e_g = worst(e_g, norm_diff(&t.g, &ex.g) / norm(&ex.g).max(floor_g));
            }
            tick();
        }
        (e_tip, e_b, e_g)
    };
    let within = |(t, b, g): (f64, f64, f64)| {
        t <= args.tolerance && b <= args.tolerance && (!has_gravity || g <= args.tolerance)
    };

    // Each order: derive, count, evaluate over the samples.
    let orders = max_order as u64 + 1;
    let bar = progress::bar(orders * samples as u64, "orders");
    let mut rows = Vec::new();
    let mut shapes: Vec<Vec<Vec<(f64, f64)>>> = Vec::new();
    for order in 0..=max_order {
        bar.set_message(format!("deriving order {order}"));
        let t0 = Instant::now();
        let model: Model = derive(&arm.with_order(order));
        let derive_seconds = t0.elapsed().as_secs_f64();
        let dyn_roots: Vec<_> = model
            .inertia
            .iter()
            .flatten()
            .chain(model.coriolis.iter().flatten())
            .chain(model.gravity.iter())
            .copied()
            .collect();
        let ops_dynamics = Ops::from(model.program.count_ops(&dyn_roots));
        let ops_all = Ops::from(model.program.count_ops(&main_roots(&model)));
        bar.set_message(format!("evaluating order {order}"));
        let ev = Evaluator::new(&model);
        let (e_tip, e_b, e_g) = errors_of(&ev, &|| bar.inc(1));
        shapes.push(
            shown
                .iter()
                .map(|&s| backbone(|j, sig| ev.pose(&qs[s], j, sig), segs, SHAPE_POINTS))
                .collect(),
        );
        rows.push(OrderRow {
            order,
            tip_position_error: e_tip,
            inertia_error: e_b,
            gravity_error: has_gravity.then_some(e_g),
            ops_dynamics,
            ops_all,
            derive_seconds,
        });
    }
    bar.finish_and_clear();
    for r in &rows {
        let errors = [
            r.tip_position_error,
            r.inertia_error,
            r.gravity_error.unwrap_or(0.0),
        ];
        if !errors.iter().all(|e| e.is_finite()) {
            return Err(CliError::Failed(format!(
                "order {}: the truncation error is not a finite number over the sampled \
                 configurations; the arm's numbers or its [sampling] bounds are beyond what \
                 double precision can evaluate",
                r.order
            )));
        }
    }

    let suggested_order = rows
        .iter()
        .find(|r| {
            within((
                r.tip_position_error,
                r.inertia_error,
                r.gravity_error.unwrap_or(0.0),
            ))
        })
        .map(|r| r.order);
    // None of the orders shown is enough: find the --max-order that would be (errors
    // only), as far as the supported maximum and the cost budget go.
    let mut needed_order = None;
    if suggested_order.is_none() {
        let bar = progress::bar(u64::from(MAX_EXPANSION_ORDER - max_order), "higher orders");
        for order in max_order + 1..=MAX_EXPANSION_ORDER {
            let higher = arm.with_order(order);
            if super::within_budget(
                "",
                crate::cost::estimate(&higher, crate::cost::Work::Derive),
            )
            .is_err()
            {
                break;
            }
            bar.set_message(format!("order {order}"));
            let model = derive(&higher);
            let e = errors_of(&Evaluator::new(&model), &|| {});
            bar.inc(1);
            if e.0.is_finite() && within(e) {
                needed_order = Some(order);
                break;
            }
        }
        bar.finish_and_clear();
    }

    let errors_svg = out_dir.join("error_vs_order.svg");
    let shapes_svg = out_dir.join("backbones.svg");
    let json_path = out_dir.join("report.json");
    write_error_plot(&errors_svg, &arm.name, &rows).map_err(CliError::Failed)?;
    write_shape_plot(&shapes_svg, &arm, &shown, &exact_shapes, &shapes)
        .map_err(CliError::Failed)?;

    let report = ReportOut {
        arm: arm.name.clone(),
        file: args.arm.display().to_string(),
        n,
        arm_length,
        samples,
        seed,
        sampling: SamplingOut {
            base_bending: ws.base_bending,
            extra_bending: ws.extra_bending,
            source: if arm.sampling.is_some() {
                "file"
            } else {
                "default"
            },
        },
        orders: rows,
        tolerance: args.tolerance,
        suggested_order,
        needed_order,
        plots: [&errors_svg, &shapes_svg]
            .iter()
            .map(|p| p.display().to_string())
            .collect(),
    };
    let value = serde_json::to_value(&report).map_err(|e| CliError::Failed(e.to_string()))?;
    let json = super::json::to_string(&value);
    super::write_file(&json_path, &json)?;
    for p in [&errors_svg, &shapes_svg, &json_path] {
        progress::wrote(p);
    }
    if args.json {
        super::print_stdout(&json)
    } else {
        super::print_stdout(&table(&report))
    }
}

/// `<dir of the arm file>/<arm name>_<what>`.
pub(crate) fn default_out_dir(arm_file: &Path, name: &str, what: &str) -> PathBuf {
    let dir = arm_file
        .parent()
        .filter(|d| !d.as_os_str().is_empty())
        .unwrap_or(Path::new("."));
    dir.join(format!("{name}_{what}"))
}

/// `2.2e-03`: one decimal, a two-digit exponent, so columns line up.
fn sci(x: f64) -> String {
    if x.is_nan() {
        return "NaN".to_string();
    }
    let s = format!("{x:.1e}");
    match s.split_once('e') {
        Some((m, e)) => {
            let (sign, digits) = e.strip_prefix('-').map(|d| ('-', d)).unwrap_or(('+', e));
            format!("{m}e{sign}{digits:0>2}")
        }
        None => s,
    }
}

fn table(r: &ReportOut) -> String {
    let mut s = String::new();
    let _ = writeln!(
        s,
        "{}: truncation error against the exact kinematics, {} sampled configurations (seed {})",
        progress::bold(&r.arm),
        r.samples,
        r.seed
    );
    let _ = writeln!(
        s,
        "sampling ({}): |L q0| ≤ {:.4} rad per segment, ≤ {:.4} rad more from higher coefficients\n",
        if r.sampling.source == "file" { "from the arm file" } else { "default" },
        r.sampling.base_bending,
        r.sampling.extra_bending
    );
    let header = format!(
        "{:>5}  {:>12}  {:>10}  {:>10}  {:>10}  {:>10}  {:>10}",
        "order", "tip position", "inertia B", "gravity G", "ops B+C+G", "ops all", "derive [s]"
    );
    let _ = writeln!(s, "{}", progress::bold(&header));
    for row in &r.orders {
        let _ = writeln!(
            s,
            "{:>5}  {:>12}  {:>10}  {:>10}  {:>10}  {:>10}  {:>10.3}",
            row.order,
            sci(row.tip_position_error),
            sci(row.inertia_error),
            row.gravity_error
                .map(sci)
                .unwrap_or_else(|| "-".to_string()),
            row.ops_dynamics.total,
            row.ops_all.total,
            row.derive_seconds
        );
    }
    let _ = writeln!(
        s,
        "\nerrors: worst over the samples; tip position relative to the arm's length ({:.4} m), \
         B and G relative to their norm (floored at 1e-3 of the largest over the samples)",
        r.arm_length
    );
    match r.suggested_order {
        Some(o) => {
            let _ = writeln!(
                s,
                "lowest order with every error ≤ {:e}: {o} (expansion_order = {o})",
                r.tolerance
            );
        }
        None => {
            let _ = writeln!(
                s,
                "no order up to {} keeps every error ≤ {:e}",
                r.orders.len() - 1,
                r.tolerance
            );
            let _ = match r.needed_order {
                Some(o) => writeln!(
                    s,
                    "order {o} does: rerun with --max-order {o} to see it, or set expansion_order = {o}"
                ),
                None => writeln!(
                    s,
                    "nor does any order up to {MAX_EXPANSION_ORDER}: narrow the [sampling] bounds to \
                     the bending the arm really does, or loosen --tolerance"
                ),
            };
        }
    }
    let _ = writeln!(s, "plots: {}", r.plots.join(", "));
    s
}

fn write_error_plot(path: &Path, name: &str, rows: &[OrderRow]) -> Result<(), String> {
    let pts = |f: &dyn Fn(&OrderRow) -> Option<f64>| -> Vec<(f64, f64)> {
        rows.iter()
            .filter_map(|r| f(r).map(|v| (r.order as f64, v)))
            .collect()
    };
    let mut lines = vec![
        Line::new(
            Some("tip position".into()),
            pts(&|r| Some(r.tip_position_error)),
            plot::colour(0),
        )
        .markers(),
        Line::new(
            Some("inertia B".into()),
            pts(&|r| Some(r.inertia_error)),
            plot::colour(1),
        )
        .markers(),
    ];
    if rows.iter().any(|r| r.gravity_error.is_some()) {
        lines.push(
            Line::new(
                Some("gravity G".into()),
                pts(&|r| r.gravity_error),
                plot::colour(2),
            )
            .markers(),
        );
    }
    let errors = Panel {
        title: format!("{name}: truncation error (worst over the samples)"),
        x_label: "expansion order".into(),
        y_label: "relative error".into(),
        axes: Axes::LogY,
        integer_x: true,
        lines,
        gravity: None,
    };
    let cost = Panel {
        title: format!("{name}: cost of the derived program"),
        x_label: "expansion order".into(),
        y_label: "operations".into(),
        axes: Axes::LogY,
        integer_x: true,
        gravity: None,
        lines: vec![
            Line::new(
                Some("B + C + G".into()),
                pts(&|r| Some(r.ops_dynamics.total as f64)),
                plot::colour(3),
            )
            .markers(),
            Line::new(
                Some("all outputs".into()),
                pts(&|r| Some(r.ops_all.total as f64)),
                plot::colour(4),
            )
            .markers(),
        ],
    };
    plot::write_svg(path, &[errors, cost], 2, (1200, 480))
}

fn write_shape_plot(
    path: &Path,
    arm: &Arm,
    shown: &[usize],
    exact: &[Vec<(f64, f64)>],
    by_order: &[Vec<Vec<(f64, f64)>>],
) -> Result<(), String> {
    let panels: Vec<Panel> = shown
        .iter()
        .enumerate()
        .map(|(k, s)| {
            let mut lines = vec![Line::new(
                (k == 0).then(|| "exact".to_string()),
                exact[k].clone(),
                plotters::style::RGBColor(190, 190, 190),
            )
            .width(7)];
            // Orders are a sequence: one colour ramp, so every order has its own.
            let last = by_order.len().saturating_sub(1).max(1) as f64;
            for (order, shapes) in by_order.iter().enumerate() {
                lines.push(Line::new(
                    (k == 0).then(|| format!("order {order}")),
                    shapes[k].clone(),
                    plot::ramp(order as f64 / last),
                ));
            }
            Panel {
                title: format!("{}: sample {}", arm.name, s + 1),
                x_label: "x [m]".into(),
                y_label: "y [m]".into(),
                axes: Axes::Equal,
                integer_x: false,
                lines,
                gravity: Some(arm.gravity_f64()),
            }
        })
        .collect();
    let cols = panels.len().clamp(1, 3);
    let rows = panels.len().div_ceil(cols).max(1) as u32;
    plot::write_svg(path, &panels, cols, (420 * cols as u32, 400 * rows))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::arm::parse_arm_str;

    #[test]
    fn samples_stay_inside_the_ranges_and_repeat() {
        let arm = parse_arm_str(
            include_str!("../../../examples/reach_arm.toml"),
            "reach_arm.toml",
        )
        .unwrap();
        let ws = Sampling {
            base_bending: 2.0,
            extra_bending: 0.5,
            samples: 50,
            seed: 9,
        };
        let a = sample_configurations(&arm, &ws, 300, 9);
        assert_eq!(a, sample_configurations(&arm, &ws, 300, 9));
        assert_ne!(a, sample_configurations(&arm, &ws, 300, 10));
        let mut max_base: f64 = 0.0;
        for q in &a {
            for (j, seg) in arm.segments.iter().enumerate() {
                let off = arm.coord_offset(j);
                let l = seg.length.to_f64().unwrap();
                let base = (l * q[off]).abs();
                assert!(base <= 2.0 + 1e-12);
                max_base = max_base.max(base);
                let extra: f64 = (1..seg.n_coords())
                    .map(|i| (l * q[off + i]).abs() / (i + 1) as f64)
                    .sum();
                assert!(extra <= 0.5 + 1e-12, "{extra}");
            }
        }
        assert!(max_base > 1.9, "samples should reach the bound: {max_base}");
    }

    #[test]
    fn default_folder_sits_beside_the_arm_file() {
        assert_eq!(
            default_out_dir(Path::new("examples/reach_arm.toml"), "reach_arm", "report"),
            PathBuf::from("examples/reach_arm_report")
        );
        assert_eq!(
            default_out_dir(Path::new("arm.toml"), "arm", "simulation"),
            PathBuf::from("./arm_simulation")
        );
    }
}
