//! The arm description: what the user wrote, validated, with exact numbers.
//!
//! Everything downstream (derivation, reference, emitters) reads an [`Arm`]; nothing
//! downstream ever sees TOML. Numbers are exact rationals because the derivation is
//! exact: a decimal `0.12` in the file is the rational `3/25`, not a binary float.

mod overrides;
mod parse;
mod reserved;
mod validate;

pub use overrides::{apply_overrides, parse_overrides, Override};
pub use parse::{parse_arm_file, parse_arm_str, read_arm_text, ArmError};
pub use validate::check_name;

use num_rational::BigRational;
use num_traits::{ToPrimitive, Zero};

/// Exact rational number used throughout the derivation.
pub type Rational = BigRational;

/// Highest curvature degree an arm file may ask for.
pub const MAX_CURVATURE_DEGREE: u32 = 8;
/// Highest expansion order an arm file may ask for.
pub const MAX_EXPANSION_ORDER: u32 = 10;
/// Expansion order used when the file does not say.
pub const DEFAULT_EXPANSION_ORDER: u32 = 4;

/// A polynomial in the normalised arc coordinate σ ∈ [0, 1], lowest power first.
/// A uniform property is a polynomial of degree 0.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct SigmaPoly {
    pub coeffs: Vec<Rational>,
}

impl SigmaPoly {
    pub fn constant(c: Rational) -> Self {
        SigmaPoly { coeffs: vec![c] }
    }
    pub fn zero() -> Self {
        SigmaPoly {
            coeffs: vec![Rational::zero()],
        }
    }
    pub fn is_zero(&self) -> bool {
        self.coeffs.iter().all(|c| c.is_zero())
    }
    /// Coefficients in double precision, lowest power first.
    pub fn coeffs_f64(&self) -> Vec<f64> {
        self.coeffs
            .iter()
            .map(|c| c.to_f64().unwrap_or(f64::NAN))
            .collect()
    }
}

/// One segment of the backbone, base to tip.
#[derive(Clone, Debug, PartialEq)]
pub struct Segment {
    /// Length `L_j` [m], > 0.
    pub length: Rational,
    /// Degree `m_j` of the curvature polynomial (0 = constant curvature).
    pub curvature_degree: u32,
    /// Linear mass density `ρ_j(σ)` [kg/m], > 0 on [0, 1].
    pub density: SigmaPoly,
    /// Bending stiffness `EI_j(σ)` [N m²], > 0 on [0, 1].
    pub bending_stiffness: SigmaPoly,
    /// Rotary inertia per length `ι_j(σ)` [kg m], ≥ 0 on [0, 1].
    pub rotary_inertia: SigmaPoly,
    /// Bending damping `β_j(σ)` [N m² s], ≥ 0 on [0, 1].
    pub damping: SigmaPoly,
}

impl Segment {
    /// Number of configuration coordinates of this segment, `m_j + 1`.
    pub fn n_coords(&self) -> usize {
        self.curvature_degree as usize + 1
    }
}

/// Optional point payload at the tip.
#[derive(Clone, Debug, PartialEq, Default)]
pub struct Payload {
    /// Mass `M` [kg], ≥ 0.
    pub mass: Rational,
    /// Rotary inertia `J` [kg m²], ≥ 0.
    pub rotary_inertia: Rational,
}

/// One actuator; segments are 0-based here (the file is 1-based).
#[derive(Clone, Debug, PartialEq)]
pub enum Actuator {
    /// Tendon at signed offset `d` [m] from the base to the end of segment `through_segment`.
    Tendon {
        offset: Rational,
        through_segment: usize,
    },
    /// Bending moment spread uniformly over one segment (one input, N m).
    Moment { segment: usize },
    /// Force at the end of one segment, in the base frame (two inputs: Fx, Fy).
    EndForce { segment: usize },
}

impl Actuator {
    /// Number of scalar inputs (columns of A) this actuator contributes.
    pub fn n_inputs(&self) -> usize {
        match self {
            Actuator::EndForce { .. } => 2,
            _ => 1,
        }
    }
}

/// The range one input may take, `lo ≤ u ≤ hi` (±∞ when the file sets no bound).
///
/// Tendons pull only: a tendon's lower bound is its pretension, 0 by default. Every
/// command that chooses inputs (statics holds, tip targets, the regulators) keeps them
/// within these bounds; an input given by hand outside them is refused.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct InputLimits {
    pub lo: f64,
    pub hi: f64,
}

impl InputLimits {
    pub const FREE: InputLimits = InputLimits {
        lo: f64::NEG_INFINITY,
        hi: f64::INFINITY,
    };
    pub fn contains(&self, u: f64) -> bool {
        self.lo <= u && u <= self.hi
    }
}

/// Where `arcwright report` samples configurations: the optional `[sampling]` table.
///
/// A sample bends every segment by a base bending `a_j = L_j q_{j,0}` with
/// `|a_j| ≤ base_bending`, and its higher coefficients add at most `extra_bending` of
/// bending anywhere along the segment: `Σ_{i≥1} |L_j q_{j,i}| / (i+1) ≤ extra_bending`.
#[derive(Clone, Debug, PartialEq)]
pub struct Sampling {
    /// Largest base bending `|L_j q_{j,0}|` of a segment [rad], > 0.
    pub base_bending: f64,
    /// Largest extra bending from the higher curvature coefficients [rad], ≥ 0.
    pub extra_bending: f64,
    /// Number of sampled configurations, ≥ 1.
    pub samples: usize,
    /// Seed of the deterministic sampler.
    pub seed: u64,
}

impl Default for Sampling {
    /// π of base bending, π/2 of extra bending, 200 samples, seed 1.
    fn default() -> Self {
        Sampling {
            base_bending: std::f64::consts::PI,
            extra_bending: std::f64::consts::FRAC_PI_2,
            samples: 200,
            seed: 1,
        }
    }
}

/// Largest number of samples a `[sampling]` table may ask for.
pub const MAX_SAMPLES: usize = 1_000_000;

/// `10^e`, exactly (the ranges the arm file is checked against).
pub(crate) fn pow10(e: i32) -> Rational {
    let p = Rational::from_integer(num_traits::pow(
        num_bigint::BigInt::from(10u32),
        e.unsigned_abs() as usize,
    ));
    if e < 0 {
        p.recip()
    } else {
        p
    }
}

/// A validated arm: every invariant of MODEL.md holds (positive lengths and
/// stiffness, actuators on existing segments, orders within range).
#[derive(Clone, Debug, PartialEq)]
pub struct Arm {
    /// Code prefix, `[a-z][a-z0-9_]*`.
    pub name: String,
    /// Gravity `g` [m/s²] in the base frame.
    pub gravity: [Rational; 2],
    /// Expansion order `N` of the truncated kinematics.
    pub expansion_order: u32,
    pub segments: Vec<Segment>,
    pub payload: Payload,
    pub actuators: Vec<Actuator>,
    /// The limits of every input (column of A), in input order.
    pub input_limits: Vec<InputLimits>,
    /// The `[sampling]` table, if the file has one (sampling bounds for reports).
    pub sampling: Option<Sampling>,
    /// Warnings from reading the file (`file:line:column: field: message`): valid
    /// input that is deprecated or looks like a mistake. Commands print them.
    pub warnings: Vec<String>,
}

impl Arm {
    /// Total number of configuration coordinates `n`.
    pub fn n_coords(&self) -> usize {
        self.segments.iter().map(Segment::n_coords).sum()
    }
    /// Total number of inputs `k` (columns of A).
    pub fn n_inputs(&self) -> usize {
        self.actuators.iter().map(Actuator::n_inputs).sum()
    }
    /// The 1-based actuator (as in the file) that input `i` (0-based) belongs to, and
    /// the input's name: `u3`, or `u3 (actuator[2].x)` for an end force's component.
    pub fn input_name(&self, i: usize) -> String {
        let mut first = 0;
        for (a, act) in self.actuators.iter().enumerate() {
            let w = act.n_inputs();
            if i < first + w {
                return match act {
                    Actuator::EndForce { .. } => format!(
                        "u{} (actuator[{}].{})",
                        i + 1,
                        a + 1,
                        if i == first { "x" } else { "y" }
                    ),
                    _ => format!("u{} (actuator[{}])", i + 1, a + 1),
                };
            }
            first += w;
        }
        format!("u{}", i + 1)
    }
    /// Index in `q` of the first coordinate of segment `j` (0-based).
    pub fn coord_offset(&self, j: usize) -> usize {
        self.segments[..j].iter().map(Segment::n_coords).sum()
    }
    /// Where to sample configurations: the file's `[sampling]` table or the default.
    pub fn sampling_or_default(&self) -> Sampling {
        self.sampling.clone().unwrap_or_default()
    }
    /// The label of every coordinate, in `q`'s order: `2_1` is segment 2's
    /// coefficient of σ¹ (segments counted from 1, as in the arm file).
    pub fn coordinate_labels(&self) -> Vec<String> {
        self.segments
            .iter()
            .enumerate()
            .flat_map(|(j, s)| (0..s.n_coords()).map(move |i| format!("{}_{i}", j + 1)))
            .collect()
    }
    /// Gravity `(g_x, g_y)` [m/s²] in double precision.
    pub fn gravity_f64(&self) -> (f64, f64) {
        let f = |r: &Rational| r.to_f64().unwrap_or(f64::NAN);
        (f(&self.gravity[0]), f(&self.gravity[1]))
    }
    /// The same arm at another expansion order.
    pub fn with_order(&self, order: u32) -> Arm {
        Arm {
            expansion_order: order,
            ..self.clone()
        }
    }
}
