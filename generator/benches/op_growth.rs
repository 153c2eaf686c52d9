//! How the emitted `terms` grows with the arm: its operation count (fast path and worst
//! case) over a grid of invented arms (1–4 equal segments, curvature degree 0–3,
//! expansion order 2–6), and the exponents of a least-squares fit
//! `ops ≈ c · S^α · ((m+1)N)^β` over the arms with `m ≥ 1` (constant curvature has no
//! expansion: its cost does not depend on `N`). Operation counts are exact and stable, so
//! one run says it all. Runs with `cargo bench --bench op_growth`.

use arcwright::arm::parse_arm_str;
use arcwright::derive::derive_emitted;
use arcwright::emit::plan::Plan;
use arcwright::emit::Precision;

/// An invented arm of `segments` equal segments (made-up numbers, as in the demos).
fn arm_text(segments: usize, degree: usize, order: usize) -> String {
    let mut t = format!("name = \"growth\"\ngravity = [0.0, -9.81]\nexpansion_order = {order}\n");
    for _ in 0..segments {
        t.push_str(&format!(
            "[[segment]]\nlength = 0.1\ncurvature_degree = {degree}\ndensity = 0.3\n\
             bending_stiffness = 0.01\nrotary_inertia = 1e-5\ndamping = 2e-4\n"
        ));
    }
    t.push_str("[[actuator]]\nkind = \"moment\"\nsegment = 1\n");
    t
}

/// Least squares of `y = c + Σ b_k x_k` (normal equations; a handful of unknowns).
fn fit(rows: &[(Vec<f64>, f64)]) -> Vec<f64> {
    let k = rows[0].0.len() + 1;
    let mut a = vec![vec![0.0; k + 1]; k];
    for (x, y) in rows {
        let mut v = vec![1.0];
        v.extend(x);
        for i in 0..k {
            for j in 0..k {
                a[i][j] += v[i] * v[j];
            }
            a[i][k] += v[i] * y;
        }
    }
    for c in 0..k {
        let p = (c..k)
            .max_by(|&i, &j| a[i][c].abs().total_cmp(&a[j][c].abs()))
            .unwrap();
        a.swap(c, p);
        let pivot = a[c].clone();
        for (r, row) in a.iter_mut().enumerate() {
            if r != c {
                let f = row[c] / pivot[c];
                for (x, p) in row[c..].iter_mut().zip(&pivot[c..]) {
                    *x -= f * p;
                }
            }
        }
    }
    (0..k).map(|i| a[i][k] / a[i][i]).collect()
}

fn main() {
    println!("terms operations (fast path / every segment beyond |a| = 4):");
    println!("  S  m  N  (m+1)N       fast      worst");
    let mut rows = Vec::new();
    for segments in 1..=4 {
        for degree in 0..=3 {
            for order in [2, 4, 6] {
                // Keep the grid to arms that derive in seconds.
                if segments * (degree + 1) * order > 48 {
                    continue;
                }
                let text = arm_text(segments, degree, order);
                let arm = parse_arm_str(&text, "op_growth").expect("invented arm parses");
                let plan = Plan::new(&derive_emitted(&arm), true, Precision::F64).unwrap();
                let fast = plan.terms.ops.total();
                let worst = plan.terms.ops_beyond.total();
                let mn = (degree + 1) * order;
                println!("  {segments}  {degree}  {order}  {mn:>6} {fast:>10} {worst:>10}");
                if degree >= 1 {
                    rows.push((
                        vec![(segments as f64).ln(), (mn as f64).ln()],
                        (fast as f64).ln(),
                    ));
                }
            }
        }
    }
    let b = fit(&rows);
    println!(
        "fit over {} arms with m >= 1: fast-path ops ≈ {:.0} · S^{:.2} · ((m+1)N)^{:.2}",
        rows.len(),
        b[0].exp(),
        b[1],
        b[2]
    );
}
