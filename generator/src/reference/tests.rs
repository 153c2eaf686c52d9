//! Tests of the numeric reference against closed-form physics and against itself
//! (quadrature convergence, exact derivative formulas vs finite differences).

use super::*;
use crate::arm::{Payload, Rational, Segment, SigmaPoly};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

fn rat(x: f64) -> Rational {
    Rational::from_float(x).unwrap()
}

fn poly(c: &[f64]) -> SigmaPoly {
    SigmaPoly {
        coeffs: c.iter().map(|&v| rat(v)).collect(),
    }
}

fn seg(l: f64, deg: u32, rho: &[f64], ei: &[f64], iota: &[f64], beta: &[f64]) -> Segment {
    Segment {
        length: rat(l),
        curvature_degree: deg,
        density: poly(rho),
        bending_stiffness: poly(ei),
        rotary_inertia: poly(iota),
        damping: poly(beta),
    }
}

fn make_arm(segments: Vec<Segment>, order: u32, mass: f64, jp: f64, g: [f64; 2]) -> Arm {
    let s = segments.len();
    Arm {
        name: "test".into(),
        gravity: [rat(g[0]), rat(g[1])],
        expansion_order: order,
        segments,
        payload: Payload {
            mass: rat(mass),
            rotary_inertia: rat(jp),
        },
        actuators: vec![
            Actuator::Tendon {
                offset: rat(0.01),
                through_segment: s - 1,
            },
            Actuator::Moment { segment: 0 },
            Actuator::EndForce { segment: 0 },
            Actuator::EndForce { segment: s - 1 },
        ],
        input_limits: vec![crate::arm::InputLimits::FREE; 6],
        sampling: None,
        warnings: Vec::new(),
    }
}

/// Uniform single segment of degree `deg`.
fn single(l: f64, deg: u32) -> Arm {
    make_arm(
        vec![seg(l, deg, &[0.3], &[0.02], &[0.0], &[0.001])],
        4,
        0.0,
        0.0,
        [0.0, -9.81],
    )
}

/// Three segments with varying properties, payload and rotary inertia.
fn rich_arm(degs: &[u32], order: u32) -> Arm {
    let segs = degs
        .iter()
        .enumerate()
        .map(|(j, &d)| {
            let l = 0.2 + 0.05 * j as f64;
            seg(
                l,
                d,
                &[0.3, -0.1, 0.02],
                &[0.05, -0.02],
                &[1e-4, 2e-5],
                &[0.002, 0.001],
            )
        })
        .collect();
    make_arm(segs, order, 0.05, 2e-4, [3.0, -9.0])
}

fn random_q(arm: &Arm, rng: &mut ChaCha8Rng, scale: f64) -> Vec<f64> {
    let mut q = Vec::new();
    for s in &arm.segments {
        let l = s.length.to_f64().unwrap();
        for _ in 0..s.n_coords() {
            q.push(rng.gen_range(-1.0..1.0) * scale / l);
        }
    }
    q
}

fn max_abs(m: &[Vec<f64>]) -> f64 {
    m.iter().flatten().fold(0.0f64, |a, v| a.max(v.abs()))
}

fn max_diff(a: &[Vec<f64>], b: &[Vec<f64>]) -> f64 {
    a.iter()
        .flatten()
        .zip(b.iter().flatten())
        .fold(0.0f64, |m, (x, y)| m.max((x - y).abs()))
}

/// Relative difference (max-norm) with an absolute floor.
fn rel(a: &[Vec<f64>], b: &[Vec<f64>], floor: f64) -> f64 {
    max_diff(a, b) / max_abs(a).max(max_abs(b)).max(floor)
}

fn rel_v(a: &[f64], b: &[f64], floor: f64) -> f64 {
    rel(&[a.to_vec()], &[b.to_vec()], floor)
}

/// Worst relative difference between two sets of terms.
fn terms_diff(t1: &Terms, t2: &Terms, qd: &[f64]) -> f64 {
    terms_diff_parts(t1, t2, qd)
        .iter()
        .fold(0.0f64, |a, b| a.max(*b))
}

/// Relative differences per component: B C G K D A tip_pose tip_jacobian T U.
/// C is measured against a floor of 1e-12 ‖B‖ (it vanishes at q = 0), T against
/// ½ ‖B‖ ‖q̇‖₁² (q̇ᵀBq̇ cancels for ill-conditioned B).
fn terms_diff_parts(t1: &Terms, t2: &Terms, qd: &[f64]) -> [f64; 10] {
    let floor_c = 1e-12 * max_abs(&t1.b).max(1e-300);
    let floor_t = 0.5 * max_abs(&t1.b) * qd.iter().map(|v| v.abs()).sum::<f64>().powi(2);
    [
        rel(&t1.b, &t2.b, 0.0),
        rel(&t1.c, &t2.c, floor_c),
        rel_v(&t1.g, &t2.g, 1e-12),
        rel(&t1.k, &t2.k, 0.0),
        rel(&t1.d, &t2.d, 0.0),
        rel(&t1.a, &t2.a, 1e-12),
        rel_v(&t1.tip_pose, &t2.tip_pose, 1e-12),
        rel(&t1.tip_jacobian, &t2.tip_jacobian, 1e-12),
        rel_v(
            &[t1.kinetic_energy],
            &[t2.kinetic_energy],
            floor_t.max(1e-300),
        ),
        rel_v(&[t1.potential_energy], &[t2.potential_energy], 1e-12),
    ]
}

#[test]
fn gauss_legendre_rule_is_exact_for_degree_2n_minus_1() {
    for n in [1usize, 2, 5, 20, 31] {
        let (x, w) = gauss_legendre(n);
        for d in 0..2 * n {
            let num: f64 = x.iter().zip(&w).map(|(x, w)| w * x.powi(d as i32)).sum();
            let exact = if d % 2 == 1 {
                0.0
            } else {
                2.0 / (d as f64 + 1.0)
            };
            assert!((num - exact).abs() < 4e-15, "n={n} d={d}: {num} vs {exact}");
        }
    }
}

/// Circular-arc kinematics of constant curvature (common practice):
/// x = sin(κs)/κ, y = (1 − cos(κs))/κ, angle κs.
#[test]
fn constant_curvature_is_a_circular_arc() {
    let l = 0.7;
    let arm = single(l, 0);
    let mut kins = vec![Kinematics::Exact];
    kins.extend((0..=10).map(Kinematics::Truncated));
    for kin in kins {
        let r = Reference::new(&arm, kin);
        for kappa in [
            0.0,
            1e-9,
            -1e-9,
            2.3,
            -4.1,
            3.0 * std::f64::consts::PI / l,
            -13.0,
        ] {
            for sigma in [0.0, 0.13, 0.5, 0.77, 1.0] {
                let s = l * sigma;
                let (x, y) = if kappa == 0.0 {
                    (s, 0.0)
                } else {
                    let h = 0.5 * kappa * s;
                    ((kappa * s).sin() / kappa, 2.0 * h.sin() * h.sin() / kappa)
                };
                let p = r.pose(&[kappa], 0, sigma);
                let err = (p[0] - x)
                    .abs()
                    .max((p[1] - y).abs())
                    .max((p[2] - kappa * s).abs());
                assert!(
                    err < 2e-15,
                    "{kin:?} κ={kappa} σ={sigma}: {p:?} vs ({x}, {y})"
                );
            }
        }
    }
}

/// Two constant-curvature segments compose as two arcs, the second rotated by Φ_1.
#[test]
fn two_arcs_compose() {
    let arm = make_arm(
        vec![
            seg(0.4, 0, &[1.0], &[1.0], &[0.0], &[0.0]),
            seg(0.3, 0, &[1.0], &[1.0], &[0.0], &[0.0]),
        ],
        3,
        0.0,
        0.0,
        [0.0, 0.0],
    );
    let arc = |k: f64, s: f64| {
        if k == 0.0 {
            C64::new(s, 0.0)
        } else {
            C64::new((k * s).sin() / k, (1.0 - (k * s).cos()) / k)
        }
    };
    for (k1, k2) in [(2.0, -3.0), (0.0, 5.0), (-7.0, 0.0), (4.0, 4.0)] {
        let p1 = arc(k1, 0.4);
        for sigma in [0.25, 1.0] {
            let p = p1 + C64::cis(k1 * 0.4) * arc(k2, 0.3 * sigma);
            for kin in [Kinematics::Exact, Kinematics::Truncated(2)] {
                let got = Reference::new(&arm, kin).pose(&[k1, k2], 1, sigma);
                assert!((got[0] - p.re).abs() < 2e-15 && (got[1] - p.im).abs() < 2e-15);
                assert!((got[2] - (k1 * 0.4 + k2 * 0.3 * sigma)).abs() < 1e-15);
            }
        }
    }
}

/// Straight uniform segment, constant curvature: ∂p/∂κ = i L² σ²/2 at q = 0, so
/// B = ρ L ∫ L⁴σ⁴/4 dσ = ρ L⁵/20 and, with g = (0, −g₀), G = g₀ ρ L³/6;
/// K = EI L, D = β L.
#[test]
fn straight_segment_closed_forms() {
    let (l, rho, ei, beta) = (0.7, 0.3, 0.02, 0.001);
    let arm = single(l, 0);
    for kin in [
        Kinematics::Exact,
        Kinematics::Truncated(0),
        Kinematics::Truncated(4),
    ] {
        let t = Reference::new(&arm, kin).terms(&[0.0], &[1.0]);
        assert!((t.b[0][0] - rho * l.powi(5) / 20.0).abs() < 1e-16);
        assert!((t.g[0] - 9.81 * rho * l.powi(3) / 6.0).abs() < 1e-15);
        assert!((t.k[0][0] - ei * l).abs() < 1e-17);
        assert!((t.d[0][0] - beta * l).abs() < 1e-18);
        assert!(t.c[0][0].abs() < 1e-18);
        assert!((t.tip_pose[0] - l).abs() < 2e-15 && t.tip_pose[1] == 0.0 && t.tip_pose[2] == 0.0);
        // Potential at q = 0 straight horizontal arm: gravity does no work along x.
        assert!(t.potential_energy.abs() < 1e-16);
    }
    // Uniform EI, degree 3: K_ik = EI L/(i+k+1) (MODEL.md).
    let arm = single(l, 3);
    let k = Reference::new(&arm, Kinematics::Exact).stiffness();
    for i in 0..4 {
        for j in 0..4 {
            assert!((k[i][j] - ei * l / (i + j + 1) as f64).abs() < 1e-17);
        }
    }
}

/// Small-deflection cantilever with a tip force P (Euler–Bernoulli, textbook):
/// tip deflection P L³/(3 EI), tip slope P L²/(2 EI). The exact curvature
/// P (L − s)/EI is linear, so degree 1 reproduces it: q = K⁻¹ A(0) F.
#[test]
fn cantilever_tip_load_linear() {
    let (l, ei, p) = (0.7, 0.02, 1e-3);
    let arm = single(l, 1);
    let r = Reference::new(&arm, Kinematics::Exact);
    let k = r.stiffness();
    let a = r.actuation(&[0.0, 0.0]);
    // Column 3 = Fy at the end of segment 0 (tendon, moment, Fx, Fy).
    let f = [a[0][3] * p, a[1][3] * p];
    let det = k[0][0] * k[1][1] - k[0][1] * k[1][0];
    let q = [
        (k[1][1] * f[0] - k[0][1] * f[1]) / det,
        (k[0][0] * f[1] - k[1][0] * f[0]) / det,
    ];
    let jt = r.tip_jacobian(&[0.0, 0.0]);
    let w = jt[1][0] * q[0] + jt[1][1] * q[1];
    let slope = jt[2][0] * q[0] + jt[2][1] * q[1];
    assert!((w - p * l.powi(3) / (3.0 * ei)).abs() < 1e-14 * w.abs());
    assert!((slope - p * l * l / (2.0 * ei)).abs() < 1e-14 * slope.abs());
    assert!(
        (q[0] - p * l / ei).abs() < 1e-13 * q[0].abs()
            && (q[1] + p * l / ei).abs() < 1e-13 * q[0].abs()
    );
}

#[test]
fn inertia_is_symmetric_positive_definite() {
    let mut rng = ChaCha8Rng::seed_from_u64(7);
    let arm = rich_arm(&[2, 1, 3], 4);
    for kin in [
        Kinematics::Exact,
        Kinematics::Truncated(4),
        Kinematics::Truncated(1),
    ] {
        let r = Reference::new(&arm, kin);
        for scale in [0.0, 1.0, 4.0] {
            let q = random_q(&arm, &mut rng, scale);
            let b = r.inertia(&q);
            let n = b.len();
            // Cholesky.
            let mut lmat = vec![vec![0.0; n]; n];
            for i in 0..n {
                for j in 0..n {
                    assert_eq!(b[i][j], b[j][i]);
                }
                for j in 0..=i {
                    let mut s = b[i][j];
                    for k in 0..j {
                        s -= lmat[i][k] * lmat[j][k];
                    }
                    if i == j {
                        assert!(s > 0.0, "{kin:?}: B not positive definite (pivot {i}: {s})");
                        lmat[i][i] = s.sqrt();
                    } else {
                        lmat[i][j] = s / lmat[j][j];
                    }
                }
            }
        }
    }
}

/// Central differences of B, G (from U_g), tip pose and end-force columns against
/// the exact derivative formulas.
#[test]
fn derivatives_match_finite_differences() {
    let mut rng = ChaCha8Rng::seed_from_u64(11);
    let arm = rich_arm(&[2, 0, 3], 4);
    for kin in [
        Kinematics::Exact,
        Kinematics::Truncated(4),
        Kinematics::Truncated(2),
    ] {
        let r = Reference::new(&arm, kin);
        for _ in 0..3 {
            let q = random_q(&arm, &mut rng, 2.0);
            let n = q.len();
            let db = r.inertia_derivative(&q);
            let g = r.gravity(&q);
            let a = r.actuation(&q);
            let jt = r.tip_jacobian(&q);
            let bscale = max_abs(&r.inertia(&q));
            let k = r.stiffness();
            let ug = |q: &[f64]| r.potential_energy(q) - 0.5 * quad_form(&k, q);
            for l in 0..n {
                let h = 1e-5
                    / arm
                        .segments
                        .iter()
                        .map(|s| s.length.to_f64().unwrap())
                        .fold(1.0, f64::min);
                let mut qp = q.clone();
                let mut qm = q.clone();
                qp[l] += h;
                qm[l] -= h;
                let (bp, bm) = (r.inertia(&qp), r.inertia(&qm));
                for i in 0..n {
                    for kk in 0..n {
                        let fd = (bp[i][kk] - bm[i][kk]) / (2.0 * h);
                        assert!(
                            (fd - db[l][i][kk]).abs() < 1e-7 * bscale,
                            "{kin:?} dB[{l}][{i}][{kk}]: {} vs fd {fd}",
                            db[l][i][kk]
                        );
                    }
                }
                let gfd = (ug(&qp) - ug(&qm)) / (2.0 * h);
                assert!(
                    (gfd - g[l]).abs() < 1e-7 * rel_scale(&g),
                    "{kin:?} G[{l}]: {} vs {gfd}",
                    g[l]
                );
                let (tp, tm) = (r.tip_pose(&qp), r.tip_pose(&qm));
                for row in 0..3 {
                    let fd = (tp[row] - tm[row]) / (2.0 * h);
                    assert!((fd - jt[row][l]).abs() < 1e-8, "{kin:?} J_tip[{row}][{l}]");
                }
                // End-force columns of segment 0 (columns 2, 3) against ∂P_1/∂q.
                let (pp, pm) = (r.pose(&qp, 0, 1.0), r.pose(&qm, 0, 1.0));
                for (c, row) in [(2, 0), (3, 1)] {
                    let fd = (pp[row] - pm[row]) / (2.0 * h);
                    assert!((fd - a[l][c]).abs() < 1e-8, "{kin:?} A[{l}][{c}]");
                }
                // Last segment end force equals the tip Jacobian.
                assert_eq!(a[l][4], jt[0][l]);
                assert_eq!(a[l][5], jt[1][l]);
            }
        }
    }
}

fn rel_scale(v: &[f64]) -> f64 {
    v.iter().fold(0.0f64, |a, x| a.max(x.abs())).max(1e-12)
}

/// Ḃ − 2C is skew-symmetric (MODEL.md), with Ḃ = Σ_l ∂_l B q̇_l.
#[test]
fn bdot_minus_2c_is_skew() {
    let mut rng = ChaCha8Rng::seed_from_u64(3);
    let arm = rich_arm(&[2, 3], 5);
    let r = Reference::new(&arm, Kinematics::Truncated(5));
    let q = random_q(&arm, &mut rng, 2.0);
    let qd = random_q(&arm, &mut rng, 3.0);
    let db = r.inertia_derivative(&q);
    let c = r.coriolis(&q, &qd);
    let n = q.len();
    let mut scale: f64 = 0.0;
    for i in 0..n {
        for k in 0..n {
            let bd = |i: usize, k: usize| (0..n).map(|l| db[l][i][k] * qd[l]).sum::<f64>();
            let s1 = bd(i, k) - 2.0 * c[i][k];
            let s2 = bd(k, i) - 2.0 * c[k][i];
            scale = scale.max(s1.abs());
            assert!(
                (s1 + s2).abs() < 1e-14 * max_abs(&c).max(1e-300),
                "({i},{k}) {s1} {s2}"
            );
        }
    }
    assert!(scale > 0.0);
    // C vanishes at q = 0 (mirror symmetry).
    let c0 = r.coriolis(&vec![0.0; n], &qd);
    assert!(max_abs(&c0) < 1e-15 * max_abs(&r.inertia(&vec![0.0; n])));
}

/// A constant-curvature arm has δ ≡ 0: every order equals the exact kinematics.
#[test]
fn constant_curvature_truncation_is_exact() {
    let mut rng = ChaCha8Rng::seed_from_u64(5);
    let arm = rich_arm(&[0, 0, 0], 4);
    let exact = Reference::new(&arm, Kinematics::Exact);
    for _ in 0..3 {
        let q = random_q(&arm, &mut rng, 5.0);
        let qd = random_q(&arm, &mut rng, 1.0);
        let te = exact.terms(&q, &qd);
        for n in 0..=10 {
            let tn = Reference::new(&arm, Kinematics::Truncated(n)).terms(&q, &qd);
            let d = terms_diff(&te, &tn, &qd);
            assert!(d < 1e-14, "order {n}: {d}");
        }
    }
}

/// Truncated(N) → Exact as N grows, at moderate curvature.
#[test]
fn truncation_converges_to_exact() {
    let mut rng = ChaCha8Rng::seed_from_u64(9);
    let arm = rich_arm(&[2, 3], 4);
    let exact = Reference::new(&arm, Kinematics::Exact);
    let q = random_q(&arm, &mut rng, 1.5);
    let qd = random_q(&arm, &mut rng, 1.0);
    let te = exact.terms(&q, &qd);
    let mut prev = f64::INFINITY;
    let mut errs = vec![];
    for n in 0..=14 {
        let d = terms_diff(
            &te,
            &Reference::new(&arm, Kinematics::Truncated(n)).terms(&q, &qd),
            &qd,
        );
        errs.push(d);
        if d > 1e-13 {
            assert!(d < prev, "order {n}: {d} not below {prev}");
        }
        prev = d;
    }
    println!(
        "truncation error by order: {:?}",
        errs.iter().map(|e| format!("{e:.1e}")).collect::<Vec<_>>()
    );
    assert!(
        errs[4] < 1e-2 && errs[10] < 1e-8 && errs[14] < 1e-12,
        "{errs:?}"
    );
}

/// Doubling the panels changes nothing beyond ~1e-13 relative, at a = 0, 1e-9,
/// ±π, ±3π and random higher coefficients, for small and large degree/order.
#[test]
fn quadrature_is_converged() {
    use std::f64::consts::PI;
    let mut rng = ChaCha8Rng::seed_from_u64(1);
    let cases: Vec<(Arm, Vec<Kinematics>)> = vec![
        (
            rich_arm(&[2, 2], 4),
            vec![Kinematics::Truncated(4), Kinematics::Exact],
        ),
        (
            rich_arm(&[8, 0, 8], 10),
            vec![Kinematics::Truncated(10), Kinematics::Exact],
        ),
        (
            rich_arm(&[1, 5], 7),
            vec![Kinematics::Truncated(7), Kinematics::Truncated(1)],
        ),
    ];
    let mut worst: f64 = 0.0;
    for (arm, kins) in &cases {
        for &kin in kins {
            let r1 = Reference::new(arm, kin);
            let r2 = Reference::new(arm, kin).with_panel_factor(2);
            let r3 = Reference::new(arm, kin).with_panel_factor(3);
            for a in [0.0, 1e-9, PI, -PI, 3.0 * PI, -3.0 * PI] {
                for hs in [0.0, 1.0] {
                    let mut q = random_q(arm, &mut rng, hs);
                    for (j, s) in arm.segments.iter().enumerate() {
                        q[arm.coord_offset(j)] = a / s.length.to_f64().unwrap();
                    }
                    let qd = random_q(arm, &mut rng, 1.0);
                    let t1 = r1.terms(&q, &qd);
                    let t2 = r2.terms(&q, &qd);
                    let t3 = r3.terms(&q, &qd);
                    let d = terms_diff(&t1, &t2, &qd).max(terms_diff(&t1, &t3, &qd));
                    worst = worst.max(d);
                    assert!(d < 1e-13, "{kin:?} a={a} hs={hs}: {d:e}");
                    let p1 = r1.pose(&q, arm.segments.len() - 1, 0.37);
                    let p2 = r2.pose(&q, arm.segments.len() - 1, 0.37);
                    assert!(rel_v(&p1, &p2, 1e-12) < 1e-13);
                }
            }
        }
    }
    println!("worst relative change under panel refinement: {worst:.2e}");
}

#[test]
fn timing_two_segments_degree2_order4() {
    let mut rng = ChaCha8Rng::seed_from_u64(2);
    let arm = rich_arm(&[2, 2], 4);
    let r = Reference::new(&arm, Kinematics::Truncated(4));
    let q = random_q(&arm, &mut rng, 2.0);
    let qd = random_q(&arm, &mut rng, 1.0);
    let t0 = std::time::Instant::now();
    let reps = 20;
    for _ in 0..reps {
        std::hint::black_box(r.terms(&q, &qd));
    }
    let dt = t0.elapsed().as_secs_f64() / reps as f64;
    let big = rich_arm(&[8, 8, 8, 8], 10);
    let rb = Reference::new(&big, Kinematics::Truncated(10));
    let qb = random_q(&big, &mut rng, 2.0);
    let qdb = random_q(&big, &mut rng, 1.0);
    let t1 = std::time::Instant::now();
    std::hint::black_box(rb.terms(&qb, &qdb));
    let dtb = t1.elapsed().as_secs_f64();
    println!(
        "terms(): 2 seg deg 2 order 4: {:.3} ms; 4 seg deg 8 order 10: {:.1} ms",
        dt * 1e3,
        dtb * 1e3
    );
    assert!(dt < 0.05);
}

/// Panel refinement at large curvature (up to 15 rad of bending per coefficient):
/// the automatic panel count grows with the bandwidth and stays converged.
#[test]
fn quadrature_is_converged_at_large_curvature() {
    let mut rng = ChaCha8Rng::seed_from_u64(4);
    for (degs, order) in [(vec![8u32, 8], 10u32), (vec![0, 3], 6)] {
        let arm = rich_arm(&degs, order);
        for kin in [Kinematics::Truncated(order), Kinematics::Exact] {
            for scale in [4.0, 15.0] {
                let q = random_q(&arm, &mut rng, scale);
                let qd = random_q(&arm, &mut rng, 1.0);
                let t1 = Reference::new(&arm, kin).terms(&q, &qd);
                let t2 = Reference::new(&arm, kin)
                    .with_panel_factor(2)
                    .terms(&q, &qd);
                let d = terms_diff(&t1, &t2, &qd);
                assert!(d < 1e-13, "{degs:?} {kin:?} scale {scale}: {d:e}");
            }
        }
    }
}

/// Terms of parameter variants on shared inner integrals equal each variant's own
/// evaluation (what the golden regressor columns rely on).
#[test]
fn variants_share_the_kinematics() {
    let arm = rich_arm(&[2, 1], 4);
    let layout = crate::params::ParamLayout::of(&arm);
    let defaults = layout.defaults(&arm);
    let variants: Vec<Arm> = (0..layout.len())
        .map(|k| {
            let mut t = defaults.clone();
            // one parameter at a time: 0, or three halves of the arm file's value
            t[k] = if k % 2 == 0 {
                crate::exact::int(0)
            } else {
                &t[k] * crate::exact::Q::new(3.into(), 2.into())
            };
            crate::params::apply(&arm, &t)
        })
        .collect();
    let kin = Kinematics::Truncated(arm.expansion_order);
    let refs: Vec<Reference> = variants.iter().map(|a| Reference::new(a, kin)).collect();
    let base = Reference::new(&arm, kin);
    let mut rng = ChaCha8Rng::seed_from_u64(41);
    let q = random_q(&arm, &mut rng, 1.5);
    let qd = random_q(&arm, &mut rng, 2.0);
    let shared = base.terms_of_variants(&refs, &q, &qd);
    for (r, t) in refs.iter().zip(&shared) {
        let own = r.terms(&q, &qd);
        let d = terms_diff(&own, t, &qd);
        assert!(d < 1e-13, "variant differs by {d:e}");
    }
}
