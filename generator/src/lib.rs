//! arcwright: exact Lagrangian dynamics of planar polynomial-curvature soft arms,
//! emitted as code.
//!
//! Data flows one way: [`arm`] (parse and validate) → [`derive`] (exact algebra into an
//! [`ir::Program`]) → [`evaluate`] (double-precision evaluation) and, independently,
//! [`reference`] (quadrature, the yardstick every derived number is checked against).

// Numerical code here says `!(x <= limit)` on purpose: a NaN must fail the check, and
// indexed loops read best in the Cholesky and rotation kernels.
#![allow(clippy::neg_cmp_op_on_partial_ord, clippy::needless_range_loop)]

pub mod allocation;
pub mod arm;
pub mod cli;
pub mod continuation;
pub mod control;
pub mod cost;
pub mod derive;
pub mod dynamics;
pub mod emit;
pub mod evaluate;
pub mod exact;
pub mod identify;
pub mod integrate;
pub mod ir;
pub mod kernel_matrix;
pub mod linalg;
pub mod local_form;
pub mod moments;
pub mod optimise;
pub mod outdir;
pub mod params;
pub mod reference;
pub mod scaled_factors;
pub mod segment_integrals;
pub mod stack_usage;
pub mod statics;
pub mod stiff;
pub mod terms;
