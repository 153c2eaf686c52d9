//! Gauss–Legendre rules on [-1, 1], computed by Newton iteration on the Legendre
//! polynomial in double precision.

use std::sync::OnceLock;

/// Number of points of the rule used on every panel.
pub const GL_POINTS: usize = 20;

/// `(P_n(x), P_n'(x))` by the three-term recurrence.
fn legendre(n: usize, x: f64) -> (f64, f64) {
    let mut p0 = 1.0;
    let mut p1 = x;
    if n == 0 {
        return (1.0, 0.0);
    }
    for k in 2..=n {
        let kf = k as f64;
        let p2 = ((2.0 * kf - 1.0) * x * p1 - (kf - 1.0) * p0) / kf;
        p0 = p1;
        p1 = p2;
    }
    let nf = n as f64;
    let dp = nf * (x * p1 - p0) / (x * x - 1.0);
    (p1, dp)
}

/// Nodes (ascending) and weights of the `n`-point Gauss–Legendre rule on [-1, 1].
pub fn gauss_legendre(n: usize) -> (Vec<f64>, Vec<f64>) {
    assert!(n >= 1);
    let mut x = vec![0.0; n];
    let mut w = vec![0.0; n];
    let m = n.div_ceil(2);
    for k in 0..m {
        // Tricomi's initial guess for the k-th largest root.
        let mut z = (std::f64::consts::PI * (k as f64 + 0.75) / (n as f64 + 0.5)).cos();
        for _ in 0..100 {
            let (p, dp) = legendre(n, z);
            let dz = p / dp;
            z -= dz;
            if dz.abs() <= 1e-16 * z.abs().max(1e-300) {
                break;
            }
        }
        // One last polish step and the weight from the derivative at the root.
        let (p, dp) = legendre(n, z);
        z -= p / dp;
        let (_, dp) = legendre(n, z);
        let wk = 2.0 / ((1.0 - z * z) * dp * dp);
        x[k] = -z;
        x[n - 1 - k] = z;
        w[k] = wk;
        w[n - 1 - k] = wk;
    }
    if n % 2 == 1 {
        x[n / 2] = 0.0;
    }
    (x, w)
}

/// The cached rule with [`GL_POINTS`] points.
pub fn standard_rule() -> &'static (Vec<f64>, Vec<f64>) {
    static RULE: OnceLock<(Vec<f64>, Vec<f64>)> = OnceLock::new();
    RULE.get_or_init(|| gauss_legendre(GL_POINTS))
}
