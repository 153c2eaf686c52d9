//! Runtime parameters: the numbers of an arm that the emitted code lets a firmware
//! change without regenerating (an object picked up, the arm mounted at another angle,
//! stiffness identified on the bench).
//!
//! The dynamics are linear in each of them: every mass property of segment `j` is
//! proportional to its density profile, so scaling `ρ_j` scales that segment's share of
//! `B`, `C` and `G`; the same holds for the rotary inertia `ι_j`, the bending stiffness
//! `EI_j` (its block of `K`), the damping `β_j` (its block of `D`), the payload's mass
//! and rotary inertia, and the gravity vector. The derivation therefore keeps each
//! share apart and multiplies it by a parameter leaf ([`crate::ir::Var::Param`]) once,
//! instead of folding the arm file's number into every coefficient: exact, and a few
//! multiplications per matrix entry.
//!
//! Scales are dimensionless and 1 in the arm file; the payload and gravity are
//! absolute (kg, kg m², m/s²), so an arm without a payload can still pick one up.

use crate::arm::Arm;
use crate::exact::{int, Q};
use num_traits::{ToPrimitive, Zero};

/// One kind of runtime parameter. Per-segment kinds have one value per segment,
/// gravity has two components, the payload kinds one value.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum ParamKind {
    /// Factor on the linear mass density `ρ_j(σ)`.
    DensityScale,
    /// Factor on the rotary inertia per length `ι_j(σ)`.
    RotaryInertiaScale,
    /// Factor on the bending stiffness `EI_j(σ)`.
    StiffnessScale,
    /// Factor on the bending damping `β_j(σ)`.
    DampingScale,
    /// Tip payload mass [kg].
    PayloadMass,
    /// Tip payload rotary inertia [kg m²].
    PayloadRotaryInertia,
    /// Gravity `(g_x, g_y)` [m/s²] in the base frame.
    Gravity,
}

impl ParamKind {
    /// In struct order: what the emitted parameter structs hold, field by field.
    pub const ALL: [ParamKind; 7] = [
        ParamKind::DensityScale,
        ParamKind::RotaryInertiaScale,
        ParamKind::StiffnessScale,
        ParamKind::DampingScale,
        ParamKind::PayloadMass,
        ParamKind::PayloadRotaryInertia,
        ParamKind::Gravity,
    ];

    /// The field name in every language (and the `--fit` name of `identify`).
    pub fn field(self) -> &'static str {
        match self {
            ParamKind::DensityScale => "density_scale",
            ParamKind::RotaryInertiaScale => "rotary_inertia_scale",
            ParamKind::StiffnessScale => "stiffness_scale",
            ParamKind::DampingScale => "damping_scale",
            ParamKind::PayloadMass => "payload_mass",
            ParamKind::PayloadRotaryInertia => "payload_rotary_inertia",
            ParamKind::Gravity => "gravity",
        }
    }

    /// What the field means, with its unit, for the emitted doc comments.
    pub fn doc(self) -> &'static str {
        match self {
            ParamKind::DensityScale => "factor on each segment's mass density (1 = arm file)",
            ParamKind::RotaryInertiaScale => {
                "factor on each segment's rotary inertia per length (1 = arm file)"
            }
            ParamKind::StiffnessScale => {
                "factor on each segment's bending stiffness (1 = arm file)"
            }
            ParamKind::DampingScale => "factor on each segment's bending damping (1 = arm file)",
            ParamKind::PayloadMass => "tip payload mass [kg]",
            ParamKind::PayloadRotaryInertia => "tip payload rotary inertia [kg m^2]",
            ParamKind::Gravity => "gravity (g_x, g_y) in the base frame [m/s^2]",
        }
    }

    /// Values of this kind for an arm of `segments` segments (`None`: a scalar).
    pub fn len(self, segments: usize) -> Option<usize> {
        match self {
            ParamKind::DensityScale
            | ParamKind::RotaryInertiaScale
            | ParamKind::StiffnessScale
            | ParamKind::DampingScale => Some(segments),
            ParamKind::Gravity => Some(2),
            ParamKind::PayloadMass | ParamKind::PayloadRotaryInertia => None,
        }
    }
}

/// Where each parameter sits in the flat vector `θ` the program's
/// [`crate::ir::Var::Param`] leaves index: the fields of [`ParamKind::ALL`] in order,
/// arrays element by element.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct ParamLayout {
    pub segments: usize,
}

/// One field of the layout, with its place in `θ`.
#[derive(Clone, Debug, PartialEq)]
pub struct ParamField {
    pub kind: ParamKind,
    /// First index in `θ`.
    pub start: usize,
    /// `None` for a scalar, else the array length.
    pub len: Option<usize>,
}

impl ParamField {
    /// This field's entries of a whole parameter vector.
    pub fn of<'a, T>(&self, theta: &'a [T]) -> &'a [T] {
        &theta[self.start..self.start + self.len.unwrap_or(1)]
    }
}

impl ParamLayout {
    pub fn of(arm: &Arm) -> Self {
        ParamLayout {
            segments: arm.segments.len(),
        }
    }

    /// The fields in struct order.
    pub fn fields(&self) -> Vec<ParamField> {
        let mut start = 0;
        ParamKind::ALL
            .iter()
            .map(|&kind| {
                let len = kind.len(self.segments);
                let f = ParamField { kind, start, len };
                start += len.unwrap_or(1);
                f
            })
            .collect()
    }

    /// Length of `θ`.
    pub fn len(&self) -> usize {
        4 * self.segments + 4
    }

    pub fn is_empty(&self) -> bool {
        false
    }

    /// The parameters the dynamics are linear in, with gravity known: all but
    /// gravity, which comes last in `θ`, so these are `θ[0 .. linear_len)`.
    pub fn linear_len(&self) -> usize {
        4 * self.segments + 2
    }

    /// Index in `θ` of `kind`, element `i` (segment or gravity component; 0 for scalars).
    pub fn index(&self, kind: ParamKind, i: usize) -> usize {
        let s = self.segments;
        let base = match kind {
            ParamKind::DensityScale => 0,
            ParamKind::RotaryInertiaScale => s,
            ParamKind::StiffnessScale => 2 * s,
            ParamKind::DampingScale => 3 * s,
            ParamKind::PayloadMass => 4 * s,
            ParamKind::PayloadRotaryInertia => 4 * s + 1,
            ParamKind::Gravity => 4 * s + 2,
        };
        debug_assert!(i < kind.len(s).unwrap_or(1));
        base + i
    }

    /// Field and element of index `k` of `θ`.
    pub fn locate(&self, k: usize) -> (ParamKind, Option<usize>) {
        for f in self.fields() {
            let width = f.len.unwrap_or(1);
            if k < f.start + width {
                return (f.kind, f.len.map(|_| k - f.start));
            }
        }
        panic!("parameter index {k} beyond the layout's {}", self.len())
    }

    /// `density_scale[1]`, `payload_mass`: the spelling of index `k` as a field access.
    pub fn spelling(&self, k: usize) -> String {
        match self.locate(k) {
            (kind, Some(i)) => format!("{}[{i}]", kind.field()),
            (kind, None) => kind.field().to_string(),
        }
    }

    /// The arm file's values: scales 1, the payload and gravity as written.
    pub fn defaults(&self, arm: &Arm) -> Vec<Q> {
        let mut v = vec![int(1); 4 * self.segments];
        v.push(arm.payload.mass.clone());
        v.push(arm.payload.rotary_inertia.clone());
        v.extend(arm.gravity.iter().cloned());
        v
    }

    /// [`ParamLayout::defaults`] in double precision.
    pub fn defaults_f64(&self, arm: &Arm) -> Vec<f64> {
        self.defaults(arm)
            .iter()
            .map(|q| q.to_f64().unwrap_or(f64::NAN))
            .collect()
    }
}

/// The arm with parameter values `theta` written into it: densities, rotary inertias,
/// stiffnesses and dampings scaled, payload and gravity replaced. The reference
/// evaluated on this arm is what the parameter variants of the emitted code must match.
pub fn apply(arm: &Arm, theta: &[Q]) -> Arm {
    let layout = ParamLayout::of(arm);
    assert_eq!(theta.len(), layout.len(), "parameter vector length");
    let mut out = arm.clone();
    for (j, seg) in out.segments.iter_mut().enumerate() {
        let scale = |poly: &mut crate::arm::SigmaPoly, kind: ParamKind| {
            let s = &theta[layout.index(kind, j)];
            for c in &mut poly.coeffs {
                *c = &*c * s;
            }
        };
        scale(&mut seg.density, ParamKind::DensityScale);
        scale(&mut seg.rotary_inertia, ParamKind::RotaryInertiaScale);
        scale(&mut seg.bending_stiffness, ParamKind::StiffnessScale);
        scale(&mut seg.damping, ParamKind::DampingScale);
    }
    out.payload.mass = theta[layout.index(ParamKind::PayloadMass, 0)].clone();
    out.payload.rotary_inertia = theta[layout.index(ParamKind::PayloadRotaryInertia, 0)].clone();
    out.gravity = [
        theta[layout.index(ParamKind::Gravity, 0)].clone(),
        theta[layout.index(ParamKind::Gravity, 1)].clone(),
    ];
    out
}

/// A second parameter set for the shipped tests, different in every field: each
/// segment heavier or lighter by a different factor, stiffer and less damped, a payload
/// of a fifth of the arm's mass (or more of what it has), and gravity turned by about
/// 30°. Exact rationals, so the reference on [`apply`]'s arm is exact in its inputs.
pub fn test_values(arm: &Arm) -> Vec<Q> {
    let layout = ParamLayout::of(arm);
    let s = layout.segments;
    let frac = |a: i64, b: i64| Q::new(a.into(), b.into());
    let mut v = Vec::with_capacity(layout.len());
    v.extend((0..s).map(|j| frac(11 + 2 * j as i64, 10)));
    v.extend((0..s).map(|j| frac(9 - j as i64, 10).max(frac(1, 2))));
    v.extend((0..s).map(|j| frac(13 + j as i64, 10)));
    v.extend((0..s).map(|j| frac(7 + j as i64, 10)));
    let arm_mass: Q = arm
        .segments
        .iter()
        .map(|seg| {
            seg.density
                .coeffs
                .iter()
                .enumerate()
                .fold(Q::zero(), |acc, (c, r)| acc + r / int(c as i64 + 1))
                * &seg.length
        })
        .fold(Q::zero(), |a, b| a + b);
    let m = &arm.payload.mass * frac(3, 2) + arm_mass / int(5);
    let tip_l = &arm.segments[s - 1].length;
    v.push(m.clone());
    v.push(&arm.payload.rotary_inertia * frac(3, 2) + &m * tip_l * tip_l / int(50));
    // (cos 30°, sin 30°) ≈ (0.866, 0.5): g rotated, same magnitude to 1e-3.
    let (c, sn) = (frac(866, 1000), frac(1, 2));
    let (gx, gy) = (&arm.gravity[0], &arm.gravity[1]);
    v.push(&c * gx - &sn * gy);
    v.push(&sn * gx + &c * gy);
    v
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::arm::parse_arm_str;

    fn arm() -> Arm {
        parse_arm_str(
            r#"
name = "lay"
gravity = [0.0, -9.81]
expansion_order = 2
[[segment]]
length = 0.1
curvature_degree = 1
density = 0.3
bending_stiffness = 0.01
[[segment]]
length = 0.08
curvature_degree = 0
density = [0.2, -0.05]
bending_stiffness = 0.008
damping = 0.001
[payload]
mass = 0.02
"#,
            "lay.toml",
        )
        .unwrap()
    }

    #[test]
    fn layout_indices_spell_and_locate_each_other() {
        let a = arm();
        let l = ParamLayout::of(&a);
        assert_eq!(l.len(), 12);
        assert_eq!(l.spelling(0), "density_scale[0]");
        assert_eq!(l.spelling(3), "rotary_inertia_scale[1]");
        assert_eq!(l.spelling(8), "payload_mass");
        assert_eq!(l.spelling(11), "gravity[1]");
        for k in 0..l.len() {
            let (kind, i) = l.locate(k);
            assert_eq!(l.index(kind, i.unwrap_or(0)), k);
        }
        let d = l.defaults(&a);
        assert_eq!(
            d[l.index(ParamKind::PayloadMass, 0)],
            Q::new(1.into(), 50.into())
        );
        assert_eq!(
            d[l.index(ParamKind::Gravity, 1)],
            Q::new((-981).into(), 100.into())
        );
    }

    #[test]
    fn applying_the_defaults_gives_the_arm_back_and_test_values_change_every_field() {
        let a = arm();
        let l = ParamLayout::of(&a);
        assert_eq!(apply(&a, &l.defaults(&a)), a);
        let t = test_values(&a);
        let d = l.defaults(&a);
        assert!(t.iter().zip(&d).all(|(x, y)| x != y), "{t:?}");
        let b = apply(&a, &t);
        assert_eq!(
            b.segments[1].density.coeffs[1],
            Q::new((-13).into(), 200.into())
        );
    }
}

#[cfg(test)]
mod cost_tests {
    use crate::arm::parse_arm_file;
    use crate::derive::{derive_emitted, derive_statics};
    use crate::emit::plan::Plan;
    use crate::emit::Precision;
    use num_traits::ToPrimitive;

    /// What taking the parameters at run time costs `terms`, against the same arm with
    /// them folded in: at most 15 % more operations (the aim of the design; the
    /// figures are printed for the record).
    #[test]
    fn runtime_parameters_cost_terms_at_most_fifteen_percent() {
        for name in ["reach_arm", "hanging_taper", "twin_tendon"] {
            let path = format!("{}/../examples/{name}.toml", env!("CARGO_MANIFEST_DIR"));
            let (arm, _) = parse_arm_file(std::path::Path::new(&path)).unwrap();
            let count = |p: &Plan| {
                let o = &p.terms.ops;
                o.add + o.mul + o.div + o.sqrt + o.trig
            };
            let folded = count(&Plan::build(&derive_statics(&arm), true, Precision::F64).unwrap());
            let with = count(&Plan::new(&derive_emitted(&arm), true, Precision::F64).unwrap());
            let ratio = with as f64 / folded as f64;
            println!("{name}: terms {folded} ops folded, {with} with parameters ({ratio:.3}x)");
            assert!(
                ratio <= 1.15,
                "{name}: {folded} -> {with} ops ({ratio:.3}x)"
            );
        }
    }

    /// The parametric program at the second parameter set is the folded program of
    /// the arm with those values written in: linearity, checked on the derivation
    /// itself (the shipped tests check the emitted code against the reference).
    #[test]
    fn parametric_model_at_test_values_is_the_folded_model_of_the_changed_arm() {
        let path = format!("{}/../examples/reach_arm.toml", env!("CARGO_MANIFEST_DIR"));
        let (arm, _) = parse_arm_file(std::path::Path::new(&path)).unwrap();
        let theta = super::test_values(&arm);
        let theta_f64: Vec<f64> = theta.iter().map(|v| v.to_f64().unwrap()).collect();
        let parametric = derive_emitted(&arm);
        let folded = derive_statics(&super::apply(&arm, &theta));
        let ev = crate::evaluate::Evaluator::new(&parametric).with_params(&theta_f64);
        let ef = crate::evaluate::Evaluator::new(&folded);
        let q: Vec<f64> = (0..arm.n_coords()).map(|i| 2.0 - 0.7 * i as f64).collect();
        let qd: Vec<f64> = (0..arm.n_coords()).map(|i| 0.3 * i as f64 - 0.5).collect();
        let (a, b) = (ev.terms(&q, &qd), ef.terms(&q, &qd));
        let close = |x: &[Vec<f64>], y: &[Vec<f64>], what: &str| {
            let scale = y.iter().flatten().fold(0.0f64, |m, v| m.max(v.abs()));
            for (u, v) in x.iter().flatten().zip(y.iter().flatten()) {
                assert!((u - v).abs() <= 1e-12 * scale, "{what}: {u} against {v}");
            }
        };
        close(&a.b, &b.b, "B");
        close(&a.c, &b.c, "C");
        close(std::slice::from_ref(&a.g), std::slice::from_ref(&b.g), "G");
        close(&a.k, &b.k, "K");
        close(&a.d, &b.d, "D");
        // And at the defaults the parametric program is the arm file's model.
        let e0 = crate::evaluate::Evaluator::new(&parametric);
        let folded0 = derive_statics(&arm);
        let f0 = crate::evaluate::Evaluator::new(&folded0);
        close(
            &e0.terms(&q, &qd).b,
            &f0.terms(&q, &qd).b,
            "B at the defaults",
        );
    }
}
