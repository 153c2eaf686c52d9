//! Statics of the model: where the arm comes to rest under given inputs.
//!
//! For now the linear estimate around the straight rest shape, `K q = A(0) u`, which
//! tells cheaply (no derivation) whether an input is anywhere near what the arm's
//! stiffness can take.

use crate::arm::Arm;
use crate::dynamics::{cholesky_solve, DynamicsError};
use crate::reference::{Kinematics, Reference};

/// The rest shape of the linear model around `q = 0` under inputs `u`, gravity left
/// out: `q = K⁻¹ A(0) u`.
pub fn linear_rest_shape(arm: &Arm, u: &[f64]) -> Result<Vec<f64>, DynamicsError> {
    let r = Reference::new(arm, Kinematics::Truncated(arm.expansion_order));
    let n = arm.n_coords();
    let a = r.actuation(&vec![0.0; n]);
    let rhs: Vec<f64> = a
        .iter()
        .map(|row| row.iter().zip(u).map(|(aik, uk)| aik * uk).sum())
        .collect();
    cholesky_solve(&r.stiffness(), &rhs)
}

/// Total bending `L_j Σ_i |q_{j,i}|` [rad] of each segment at `q`.
pub fn segment_bending(arm: &Arm, q: &[f64]) -> Vec<f64> {
    arm.segments
        .iter()
        .enumerate()
        .map(|(j, s)| {
            let off = arm.coord_offset(j);
            let l = num_traits::ToPrimitive::to_f64(&s.length).unwrap_or(f64::NAN);
            l * q[off..off + s.n_coords()]
                .iter()
                .map(|v| v.abs())
                .sum::<f64>()
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::arm::parse_arm_str;

    #[test]
    fn a_uniform_end_moment_bends_a_segment_to_m_over_ei() {
        // Pure bending of a uniform segment: κ = M / EI (common practice).
        let arm = parse_arm_str(
            "name = \"m\"\n[[segment]]\nlength = 0.2\ncurvature_degree = 2\ndensity = 0.1\n\
             bending_stiffness = 0.04\n[[actuator]]\nkind = \"moment\"\nsegment = 1\n",
            "m.toml",
        )
        .unwrap();
        let q = linear_rest_shape(&arm, &[0.01]).unwrap();
        assert!((q[0] - 0.01 / 0.04).abs() < 1e-12, "{q:?}");
        assert!(q[1].abs() < 1e-12 && q[2].abs() < 1e-12, "{q:?}");
        assert!((segment_bending(&arm, &q)[0] - 0.2 * 0.25).abs() < 1e-12);
    }
}
