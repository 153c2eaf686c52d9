//! The numbers of one model at one state: what `eval` prints and what every
//! cross-check compares. Both the derived model and the numeric reference fill it.

use serde::Serialize;

/// Row-major dense matrix as rows, the layout the JSON output uses.
pub type Matrix = Vec<Vec<f64>>;

/// All dynamic terms of `B q̈ + C q̇ + G + K q + D q̇ = A u` at one state,
/// plus tip kinematics and energies.
#[derive(Clone, Debug, Serialize, PartialEq)]
pub struct Terms {
    /// Number of coordinates.
    pub n: usize,
    /// Inertia matrix, n×n.
    #[serde(rename = "B")]
    pub b: Matrix,
    /// Coriolis matrix (Christoffel symbols of the first kind), n×n.
    #[serde(rename = "C")]
    pub c: Matrix,
    /// Gravity vector `∂U_g/∂q`, n.
    #[serde(rename = "G")]
    pub g: Vec<f64>,
    /// Stiffness matrix, n×n.
    #[serde(rename = "K")]
    pub k: Matrix,
    /// Damping matrix, n×n.
    #[serde(rename = "D")]
    pub d: Matrix,
    /// Actuation matrix, n×k (k inputs).
    #[serde(rename = "A")]
    pub a: Matrix,
    /// Tip pose `[x, y, angle]` in the base frame.
    pub tip_pose: [f64; 3],
    /// Tip Jacobian, 3×n: rows ∂x/∂q, ∂y/∂q, ∂angle/∂q.
    pub tip_jacobian: Matrix,
    /// Kinetic energy `½ q̇ᵀ B q̇`.
    pub kinetic_energy: f64,
    /// Potential energy: gravity plus elastic `½ qᵀ K q`.
    pub potential_energy: f64,
}

/// What the static solver needs of a model at one configuration.
#[derive(Clone, Debug, PartialEq)]
pub struct StaticTerms {
    /// `G(q)`, n.
    pub g: Vec<f64>,
    /// `∂G/∂q`, n×n.
    pub dg: Matrix,
    /// `A(q)`, n×k.
    pub a: Matrix,
    /// `∂A/∂q_x` for each `x`: n matrices n×k.
    pub da: Vec<Matrix>,
    /// Tip pose `[x, y, angle]`.
    pub tip_pose: [f64; 3],
}
