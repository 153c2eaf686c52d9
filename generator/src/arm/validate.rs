//! Physical validation of a parsed arm file: signs, ranges, identifiers and
//! references between sections. Produces the [`Arm`] every other module reads.
//!
//! Sign conditions on polynomial properties (density, stiffness, …) are decided
//! exactly: rational evaluation at σ = 0 and σ = 1, and a Sturm sequence with
//! bisection to isolate the real roots inside (0, 1).

use num_bigint::BigInt;
use num_traits::{Signed, ToPrimitive, Zero};

use super::parse::{ArmError, Ctx, RawActuator, RawArm, RawLimits, RawSampling, Sp};
use super::{
    pow10, Actuator, Arm, InputLimits, Payload, Rational, Sampling, Segment, SigmaPoly,
    DEFAULT_EXPANSION_ORDER, MAX_CURVATURE_DEGREE, MAX_EXPANSION_ORDER, MAX_SAMPLES,
};

/// Highest polynomial degree accepted for a property along σ (density, EI, …).
pub(crate) const MAX_PROPERTY_DEGREE: usize = 8;
/// Longest accepted arm name (it prefixes every emitted identifier).
pub(crate) const MAX_NAME_LEN: usize = 64;

/// Shortest and longest segment accepted, as powers of ten [m]: with every other number
/// within 10^±9, the model's constants stay finite and normal in single precision.
pub const MIN_LENGTH_EXP: i32 = -4;
pub const MAX_LENGTH_EXP: i32 = 3;
/// Largest gravity component accepted, as a power of ten [m/s²] (a hundred g).
pub const MAX_GRAVITY_EXP: i32 = 3;

/// Checks the physical facts of `raw` and builds the [`Arm`].
pub(super) fn validate(raw: RawArm, ctx: &Ctx) -> Result<Arm, ArmError> {
    // name
    let name = &raw.name;
    if let Err(why) = check_name(&name.value) {
        return Err(ctx.field_err(name.at, "name", why));
    }

    // gravity
    let gravity = match raw.gravity {
        Some([gx, gy]) => {
            for g in [&gx, &gy] {
                if g.value.abs() > pow10(MAX_GRAVITY_EXP) {
                    return Err(ctx.field_err(
                        g.at,
                        "gravity",
                        format!(
                            "each component must be at most 1e{MAX_GRAVITY_EXP} m/s² in magnitude, got {}",
                            g.raw
                        ),
                    ));
                }
            }
            [gx.value, gy.value]
        }
        None => [Rational::zero(), Rational::zero()],
    };

    // expansion order
    let expansion_order = match &raw.expansion_order {
        Some(o) => {
            if o.value < 0 || o.value > MAX_EXPANSION_ORDER as i64 {
                return Err(ctx.field_err(
                    o.at,
                    "expansion_order",
                    format!(
                        "must be an integer in 0..={MAX_EXPANSION_ORDER}, got {}",
                        o.raw
                    ),
                ));
            }
            o.value as u32
        }
        None => DEFAULT_EXPANSION_ORDER,
    };

    // segments
    if raw.segments.is_empty() {
        return Err(ctx.field_err(
            raw.segments_at,
            "segment",
            "at least one [[segment]] table is required",
        ));
    }
    let n_seg = raw.segments.len();
    let mut warnings = raw.warnings;
    let mut segments = Vec::with_capacity(n_seg);
    for (j, s) in raw.segments.into_iter().enumerate() {
        let path = format!("segment[{}]", j + 1);
        if !s.length.value.is_positive() {
            return Err(ctx.field_err(
                s.length.at,
                &format!("{path}.length"),
                format!("must be positive, got {}", s.length.raw),
            ));
        }
        if s.length.value < pow10(MIN_LENGTH_EXP) || s.length.value > pow10(MAX_LENGTH_EXP) {
            return Err(ctx.field_err(
                s.length.at,
                &format!("{path}.length"),
                format!(
                    "must be in [1e{MIN_LENGTH_EXP}, 1e{MAX_LENGTH_EXP}] m, got {}",
                    s.length.raw
                ),
            ));
        }
        if s.length.value > pow10(1) {
            warnings.push(
                ctx.field_err(
                    s.length.at,
                    &format!("{path}.length"),
                    format!(
                        "{} m is a long soft segment; lengths are in metres (did you give \
                         millimetres?)",
                        s.length.raw
                    ),
                )
                .to_string(),
            );
        }
        let d = &s.curvature_degree;
        if d.value < 0 || d.value > MAX_CURVATURE_DEGREE as i64 {
            return Err(ctx.field_err(
                d.at,
                &format!("{path}.curvature_degree"),
                format!(
                    "must be an integer in 0..={MAX_CURVATURE_DEGREE}, got {}",
                    d.raw
                ),
            ));
        }
        let density = property(ctx, &s.density, &format!("{path}.density"), true)?;
        let bending_stiffness = property(
            ctx,
            &s.bending_stiffness,
            &format!("{path}.bending_stiffness"),
            true,
        )?;
        let rotary_inertia = match &s.rotary_inertia {
            Some(p) => property(ctx, p, &format!("{path}.rotary_inertia"), false)?,
            None => SigmaPoly::zero(),
        };
        let damping = match &s.damping {
            Some(p) => property(ctx, p, &format!("{path}.damping"), false)?,
            None => SigmaPoly::zero(),
        };
        segments.push(Segment {
            length: s.length.value,
            curvature_degree: d.value as u32,
            density,
            bending_stiffness,
            rotary_inertia,
            damping,
        });
    }

    // payload
    let mut payload = Payload::default();
    if let Some(p) = raw.payload {
        if let Some(m) = p.mass {
            payload.mass = non_negative_number(ctx, m, "payload.mass")?;
        }
        if let Some(j) = p.rotary_inertia {
            payload.rotary_inertia = non_negative_number(ctx, j, "payload.rotary_inertia")?;
        }
    }

    // actuators
    let mut actuators = Vec::with_capacity(raw.actuators.len());
    let mut input_limits = Vec::with_capacity(raw.actuators.len());
    for (i, (a, lim)) in raw.actuators.into_iter().zip(raw.limits).enumerate() {
        let path = format!("actuator[{}]", i + 1);
        let bounds = limits(ctx, lim, &path, matches!(a, RawActuator::Tendon { .. }))?;
        let width = if matches!(a, RawActuator::EndForce { .. }) {
            2
        } else {
            1
        };
        input_limits.extend(std::iter::repeat_n(bounds, width));
        actuators.push(match a {
            RawActuator::Tendon {
                offset,
                through_segment,
            } => {
                if offset.value.is_zero() {
                    return Err(ctx.field_err(
                        offset.at,
                        &format!("{path}.offset"),
                        format!(
                            "must be non-zero (a tendon on the backbone does nothing), got {}",
                            offset.raw
                        ),
                    ));
                }
                let k = segment_ref(
                    ctx,
                    &through_segment,
                    &format!("{path}.through_segment"),
                    n_seg,
                )?;
                // The offset model is first order in d·κ: an offset beyond the
                // shortest segment it passes is almost surely a unit slip.
                let shortest = segments[..=k]
                    .iter()
                    .map(|s: &Segment| &s.length)
                    .min()
                    .expect("at least one segment");
                if &offset.value.abs() > shortest {
                    warnings.push(
                        ctx.field_err(
                            offset.at,
                            &format!("{path}.offset"),
                            format!(
                                "|{}| m is more than the length of a segment it runs along \
                                 ({} m); the tendon model assumes offsets small against the \
                                 bending radius (check the units: metres)",
                                offset.raw,
                                shortest.to_f64().unwrap_or(f64::NAN)
                            ),
                        )
                        .to_string(),
                    );
                }
                Actuator::Tendon {
                    offset: offset.value,
                    through_segment: k,
                }
            }
            RawActuator::Moment { segment } => Actuator::Moment {
                segment: segment_ref(ctx, &segment, &format!("{path}.segment"), n_seg)?,
            },
            RawActuator::EndForce { segment } => Actuator::EndForce {
                segment: segment_ref(ctx, &segment, &format!("{path}.segment"), n_seg)?,
            },
        });
    }

    let sampling = match raw.sampling {
        Some(w) => Some(sampling(ctx, w)?),
        None => None,
    };

    Ok(Arm {
        name: name.value.clone(),
        gravity,
        expansion_order,
        segments,
        payload,
        actuators,
        input_limits,
        sampling,
        warnings,
    })
}

/// An actuator's input range. A tendon pulls only: its lower bound is the pretension
/// (default 0, never negative), and it takes no `min`; `max` must exceed the lower bound.
fn limits(ctx: &Ctx, raw: RawLimits, path: &str, tendon: bool) -> Result<InputLimits, ArmError> {
    let f = |x: &Rational| x.to_f64().unwrap_or(f64::NAN);
    let lo = if tendon {
        match &raw.pretension {
            Some(p) if p.value.is_negative() => {
                return Err(ctx.field_err(
                    p.at,
                    &format!("{path}.pretension"),
                    format!("must be at least 0 (a tendon pulls only), got {}", p.raw),
                ))
            }
            Some(p) => f(&p.value),
            None => 0.0,
        }
    } else {
        raw.min.as_ref().map_or(f64::NEG_INFINITY, |m| f(&m.value))
    };
    let hi = match &raw.max {
        Some(m) => {
            let hi = f(&m.value);
            if hi <= lo {
                let what = if tendon {
                    format!("the pretension {lo}")
                } else {
                    format!("min = {lo}")
                };
                return Err(ctx.field_err(
                    m.at,
                    &format!("{path}.max"),
                    format!("must be greater than {what}, got {}", m.raw),
                ));
            }
            hi
        }
        None => f64::INFINITY,
    };
    Ok(InputLimits { lo, hi })
}

/// Largest bending a `[sampling]` bound may ask for: two full turns [rad].
pub(crate) const MAX_SAMPLING_BENDING: f64 = 4.0 * std::f64::consts::PI;

/// The `[sampling]` table: bending bounds in (0, 4π] (extra bending may be 0),
/// a sample count in 1..=MAX_SAMPLES and a non-negative seed.
fn sampling(ctx: &Ctx, w: RawSampling) -> Result<Sampling, ArmError> {
    let field = |key: &str| format!("{}.{key}", w.table);
    let mut out = Sampling::default();
    let bending = |b: &Sp<Rational>, field: &str, zero_ok: bool| -> Result<f64, ArmError> {
        let x = b.value.to_f64().unwrap_or(f64::INFINITY);
        let low_ok = if zero_ok {
            !b.value.is_negative()
        } else {
            b.value.is_positive()
        };
        if !low_ok || x > MAX_SAMPLING_BENDING {
            let low = if zero_ok { "[0" } else { "(0" };
            return Err(ctx.field_err(
                b.at,
                field,
                format!(
                    "must be in {low}, 4π] rad (4π ≈ {MAX_SAMPLING_BENDING:.4}), got {}",
                    b.raw
                ),
            ));
        }
        Ok(x)
    };
    if let Some(b) = &w.base_bending {
        out.base_bending = bending(b, &field("base_bending"), false)?;
    }
    if let Some(b) = &w.extra_bending {
        out.extra_bending = bending(b, &field("extra_bending"), true)?;
    }
    if let Some(s) = &w.samples {
        if s.value < 1 || s.value > MAX_SAMPLES as i64 {
            return Err(ctx.field_err(
                s.at,
                &field("samples"),
                format!("must be an integer in 1..={MAX_SAMPLES}, got {}", s.raw),
            ));
        }
        out.samples = s.value as usize;
    }
    if let Some(s) = &w.seed {
        if s.value < 0 {
            return Err(ctx.field_err(
                s.at,
                &field("seed"),
                format!("must be a non-negative integer, got {}", s.raw),
            ));
        }
        out.seed = s.value as u64;
    }
    Ok(out)
}

/// Whether `name` can name an arm: a code prefix, and reserved by none of the
/// emitted languages or the libraries they use. The error says why not.
pub fn check_name(name: &str) -> Result<(), String> {
    if !is_prefix_identifier(name) {
        return Err(format!(
            "must be a code prefix matching [a-z][a-z0-9_]* (at most {MAX_NAME_LEN} characters), got {name:?}"
        ));
    }
    if let Some(why) = super::reserved::reserved_by(name) {
        return Err(format!(
            "must not be {why}: `{name}` prefixes the emitted C, names the Rust crate and \
             the Python module; choose another (for example `{name}_arm`)"
        ));
    }
    Ok(())
}

/// `[a-z][a-z0-9_]*`, at most [`MAX_NAME_LEN`] characters.
fn is_prefix_identifier(s: &str) -> bool {
    let b = s.as_bytes();
    !b.is_empty()
        && b.len() <= MAX_NAME_LEN
        && b[0].is_ascii_lowercase()
        && b.iter()
            .all(|c| c.is_ascii_lowercase() || c.is_ascii_digit() || *c == b'_')
}

/// A 1-based segment reference in the file, returned 0-based.
fn segment_ref(ctx: &Ctx, k: &Sp<i64>, field: &str, n_seg: usize) -> Result<usize, ArmError> {
    if k.value < 1 || k.value > n_seg as i64 {
        let have = if n_seg == 1 {
            "the arm has 1 segment, numbered 1".to_string()
        } else {
            format!("the arm has {n_seg} segments, numbered 1..={n_seg}")
        };
        return Err(ctx.field_err(
            k.at,
            field,
            format!("segment {} does not exist ({have})", k.raw),
        ));
    }
    Ok(k.value as usize - 1)
}

fn non_negative_number(ctx: &Ctx, x: Sp<Rational>, field: &str) -> Result<Rational, ArmError> {
    if x.value.is_negative() {
        return Err(ctx.field_err(x.at, field, format!("must be non-negative, got {}", x.raw)));
    }
    Ok(x.value)
}

/// A property along σ: degree cap, then the sign condition on [0, 1]
/// (`strict`: > 0, otherwise ≥ 0). Trailing zero coefficients are dropped.
fn property(
    ctx: &Ctx,
    p: &Sp<Vec<Rational>>,
    field: &str,
    strict: bool,
) -> Result<SigmaPoly, ArmError> {
    if p.value.len() > MAX_PROPERTY_DEGREE + 1 {
        return Err(ctx.field_err(
            p.at,
            field,
            format!(
                "at most {} coefficients (degree {MAX_PROPERTY_DEGREE} in σ), got {}",
                MAX_PROPERTY_DEGREE + 1,
                p.value.len()
            ),
        ));
    }
    let coeffs = trim(p.value.clone());
    let result = if strict {
        check_positive(&coeffs)
    } else {
        check_non_negative(&coeffs)
    };
    if let Err(v) = result {
        let want = if strict { "positive" } else { "non-negative" };
        let msg = if p.value.len() == 1 {
            format!("must be {want}, got {}", p.raw)
        } else {
            match v {
                SignViolation::At { sigma, value } => format!(
                    "must be {want} for all σ in [0, 1], got {} at σ = {}",
                    fmt_q(&value),
                    fmt_q(&sigma)
                ),
                SignViolation::TouchesZeroNear(s) => {
                    format!("must be {want} for all σ in [0, 1], but it reaches 0 near σ ≈ {s:.6}")
                }
                SignViolation::NegativeAfterZero => format!(
                    "must be {want} for all σ in [0, 1], but it is negative just after σ = 0"
                ),
                SignViolation::NegativeBeforeOne => format!(
                    "must be {want} for all σ in [0, 1], but it is negative just before σ = 1"
                ),
                SignViolation::Undecided => format!(
                    "could not decide whether it is {want} on [0, 1] (roots too close together)"
                ),
            }
        };
        return Err(ctx.field_err(p.at, field, msg));
    }
    Ok(SigmaPoly { coeffs })
}

/// A rational for messages: integers exactly, others as the nearest double.
fn fmt_q(q: &Rational) -> String {
    if q.is_integer() {
        q.to_integer().to_string()
    } else {
        match q.to_f64() {
            Some(x) if x.is_finite() => format!("{x}"),
            _ => q.to_string(),
        }
    }
}

// ---------------------------------------------------------------------------
// Exact sign conditions for polynomials on [0, 1]
// ---------------------------------------------------------------------------

/// Why a polynomial fails a sign condition on [0, 1].
#[derive(Clone, Debug, PartialEq)]
pub(super) enum SignViolation {
    /// The polynomial has this (bad) exact value at this σ.
    At { sigma: Rational, value: Rational },
    /// Positive elsewhere but reaches zero inside (0, 1), near this σ.
    TouchesZeroNear(f64),
    /// Zero at σ = 0 and negative right after it.
    NegativeAfterZero,
    /// Zero at σ = 1 and negative right before it.
    NegativeBeforeOne,
    /// Bisection budget exhausted (pathologically close roots).
    Undecided,
}

/// Total bisection steps allowed per check.
const BISECTION_BUDGET: usize = 20_000;

/// Is `p(σ) > 0` for every σ in [0, 1]? (`p` lowest power first.)
#[allow(clippy::result_large_err)]
pub(super) fn check_positive(p: &[Rational]) -> Result<(), SignViolation> {
    let p = trim(p.to_vec());
    let zero = Rational::zero();
    let one = Rational::from_integer(BigInt::from(1));
    let v0 = eval(&p, &zero);
    if !v0.is_positive() {
        return Err(SignViolation::At {
            sigma: zero,
            value: v0,
        });
    }
    let v1 = eval(&p, &one);
    if !v1.is_positive() {
        return Err(SignViolation::At {
            sigma: one,
            value: v1,
        });
    }
    if p.len() == 1 {
        return Ok(());
    }
    let seq = sturm(&p);
    if variations(&seq, &zero) == variations(&seq, &one) {
        return Ok(());
    }
    let mut budget = BISECTION_BUDGET;
    let mut ivs = isolate(&p, &seq, &mut budget).ok_or(SignViolation::Undecided)?;
    ivs.sort_by(|a, b| a.0.cmp(&b.0));
    for (a, b) in &ivs {
        for x in [a, b] {
            if x.is_positive() && *x < one {
                let v = eval(&p, x);
                if v.is_negative() {
                    return Err(SignViolation::At {
                        sigma: x.clone(),
                        value: v,
                    });
                }
            }
        }
    }
    // Roots of even multiplicity only: p touches zero without changing sign.
    let (a, b) = ivs[0].clone();
    Err(SignViolation::TouchesZeroNear(refine(&p, &seq, a, b)))
}

/// Is `p(σ) ≥ 0` for every σ in [0, 1]? (`p` lowest power first.)
#[allow(clippy::result_large_err)]
pub(super) fn check_non_negative(p: &[Rational]) -> Result<(), SignViolation> {
    let p = trim(p.to_vec());
    if p.iter().all(Zero::is_zero) {
        return Ok(());
    }
    let zero = Rational::zero();
    let one = Rational::from_integer(BigInt::from(1));
    let v0 = eval(&p, &zero);
    if v0.is_negative() {
        return Err(SignViolation::At {
            sigma: zero,
            value: v0,
        });
    }
    let v1 = eval(&p, &one);
    if v1.is_negative() {
        return Err(SignViolation::At {
            sigma: one,
            value: v1,
        });
    }
    // r = p / (σ^a (1-σ)^b) has the sign of p on (0, 1) and no zero at 0 or 1.
    let mut r = p.clone();
    while r[0].is_zero() {
        r.remove(0);
    }
    while eval(&r, &one).is_zero() {
        r = div_one_minus_sigma(&r);
    }
    let half = Rational::new(BigInt::from(1), BigInt::from(2));
    if eval(&r, &zero).is_negative() {
        // p(0) = 0 and p dips below 0 right after: find a concrete point.
        let mut t = half.clone();
        for _ in 0..400 {
            let v = eval(&p, &t);
            if v.is_negative() {
                return Err(SignViolation::At { sigma: t, value: v });
            }
            t = &t * &half;
        }
        return Err(SignViolation::NegativeAfterZero);
    }
    if eval(&r, &one).is_negative() {
        let mut h = half.clone();
        for _ in 0..400 {
            let t = &one - &h;
            let v = eval(&p, &t);
            if v.is_negative() {
                return Err(SignViolation::At { sigma: t, value: v });
            }
            h = &h * &half;
        }
        return Err(SignViolation::NegativeBeforeOne);
    }
    if r.len() == 1 {
        return Ok(());
    }
    let seq = sturm(&r);
    if variations(&seq, &zero) == variations(&seq, &one) {
        return Ok(());
    }
    // r > 0 at 0 and 1; its sign is constant between consecutive roots, and every
    // such gap contains an endpoint of an isolating interval.
    let mut budget = BISECTION_BUDGET;
    let mut ivs = isolate(&r, &seq, &mut budget).ok_or(SignViolation::Undecided)?;
    ivs.sort_by(|a, b| a.0.cmp(&b.0));
    for (a, b) in &ivs {
        for x in [a, b] {
            if x.is_positive() && *x < one && eval(&r, x).is_negative() {
                return Err(SignViolation::At {
                    sigma: x.clone(),
                    value: eval(&p, x),
                });
            }
        }
    }
    Ok(())
}

/// Drops trailing zero coefficients, keeping at least one.
fn trim(mut p: Vec<Rational>) -> Vec<Rational> {
    while p.len() > 1 && p.last().is_some_and(Zero::is_zero) {
        p.pop();
    }
    if p.is_empty() {
        p.push(Rational::zero());
    }
    p
}

fn eval(p: &[Rational], x: &Rational) -> Rational {
    p.iter().rev().fold(Rational::zero(), |acc, c| acc * x + c)
}

fn deriv(p: &[Rational]) -> Vec<Rational> {
    if p.len() <= 1 {
        return vec![Rational::zero()];
    }
    p.iter()
        .enumerate()
        .skip(1)
        .map(|(i, c)| c * Rational::from_integer(BigInt::from(i)))
        .collect()
}

/// Remainder of `a` divided by `b` (`b` non-zero, trimmed).
fn rem(a: &[Rational], b: &[Rational]) -> Vec<Rational> {
    let mut r = trim(a.to_vec());
    let db = b.len() - 1;
    if db == 0 {
        // Division by a non-zero constant leaves no remainder.
        return vec![Rational::zero()];
    }
    let lead = b[db].clone();
    while r.len() > db && !(r.len() == 1 && r[0].is_zero()) {
        let dr = r.len() - 1;
        let f = &r[dr] / &lead;
        let shift = dr - db;
        for (i, bc) in b.iter().enumerate() {
            r[shift + i] = &r[shift + i] - &f * bc;
        }
        r.pop();
        if r.is_empty() {
            r.push(Rational::zero());
        }
        r = trim(r);
    }
    r
}

/// Scales by 1/|leading coefficient| (keeps the sign pattern, shrinks numbers).
fn normalise(p: Vec<Rational>) -> Vec<Rational> {
    let lead = p.last().cloned().unwrap_or_else(Rational::zero).abs();
    if lead.is_zero() {
        return p;
    }
    p.into_iter().map(|c| c / &lead).collect()
}

/// Sturm sequence p, p', -rem(…), … (valid for non-square-free p as well).
fn sturm(p: &[Rational]) -> Vec<Vec<Rational>> {
    let mut seq = vec![p.to_vec()];
    let d = trim(deriv(p));
    if d.len() == 1 && d[0].is_zero() {
        return seq;
    }
    seq.push(normalise(d));
    loop {
        let n = seq.len();
        let r = rem(&seq[n - 2], &seq[n - 1]);
        if r.len() == 1 && r[0].is_zero() {
            break;
        }
        seq.push(normalise(r.into_iter().map(|c| -c).collect()));
    }
    seq
}

/// Number of sign changes of the Sturm sequence at `x` (zeros skipped).
fn variations(seq: &[Vec<Rational>], x: &Rational) -> usize {
    let mut count = 0;
    let mut last: Option<bool> = None;
    for q in seq {
        let v = eval(q, x);
        if v.is_zero() {
            continue;
        }
        let pos = v.is_positive();
        if let Some(l) = last {
            if l != pos {
                count += 1;
            }
        }
        last = Some(pos);
    }
    count
}

/// A point strictly inside (a, b) where p does not vanish.
fn split_point(p: &[Rational], a: &Rational, b: &Rational) -> Rational {
    let mid = (a + b) / Rational::from_integer(BigInt::from(2));
    if !eval(p, &mid).is_zero() {
        return mid;
    }
    // p has at most deg(p) roots, so one of these deg(p) + 1 points is not a root.
    let k = p.len() + 1;
    for i in 1..k {
        let t = a + (b - a) * Rational::new(BigInt::from(i), BigInt::from(k));
        if !eval(p, &t).is_zero() {
            return t;
        }
    }
    mid
}

/// Disjoint intervals (a, b) ⊂ [0, 1], each holding exactly one distinct root of
/// `p` in (0, 1), with p(a), p(b) ≠ 0. Requires p(0), p(1) ≠ 0.
fn isolate(
    p: &[Rational],
    seq: &[Vec<Rational>],
    budget: &mut usize,
) -> Option<Vec<(Rational, Rational)>> {
    let zero = Rational::zero();
    let one = Rational::from_integer(BigInt::from(1));
    let v0 = variations(seq, &zero);
    let v1 = variations(seq, &one);
    let mut stack = vec![(zero, v0, one, v1)];
    let mut out = Vec::new();
    while let Some((a, va, b, vb)) = stack.pop() {
        let c = va.saturating_sub(vb);
        if c == 0 {
            continue;
        }
        if c == 1 {
            out.push((a, b));
            continue;
        }
        if *budget == 0 {
            return None;
        }
        *budget -= 1;
        let m = split_point(p, &a, &b);
        let vm = variations(seq, &m);
        stack.push((a, va, m.clone(), vm));
        stack.push((m, vm, b, vb));
    }
    Some(out)
}

/// Approximate location of the single root of p in (a, b).
fn refine(p: &[Rational], seq: &[Vec<Rational>], mut a: Rational, mut b: Rational) -> f64 {
    let mut va = variations(seq, &a);
    for _ in 0..60 {
        let m = split_point(p, &a, &b);
        let vm = variations(seq, &m);
        if va > vm {
            b = m;
        } else {
            a = m;
            va = vm;
        }
    }
    ((&a + &b) / Rational::from_integer(BigInt::from(2)))
        .to_f64()
        .unwrap_or(f64::NAN)
}

/// Exact quotient p / (1 - σ) when p(1) = 0.
fn div_one_minus_sigma(p: &[Rational]) -> Vec<Rational> {
    // Synthetic division by (σ - 1), highest power first, then negate.
    let n = p.len() - 1;
    if n == 0 {
        return p.to_vec();
    }
    let mut q = vec![Rational::zero(); n];
    let mut carry = Rational::zero();
    for k in (1..=n).rev() {
        carry = &carry + &p[k];
        q[k - 1] = carry.clone();
    }
    q.into_iter().map(|c| -c).collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::arm::parse_arm_str;

    fn q(n: i64, d: i64) -> Rational {
        Rational::new(BigInt::from(n), BigInt::from(d))
    }

    fn qs(v: &[i64]) -> Vec<Rational> {
        v.iter().map(|&n| q(n, 1)).collect()
    }

    /// Product of polynomials (lowest power first).
    fn mul(a: &[Rational], b: &[Rational]) -> Vec<Rational> {
        let mut out = vec![Rational::zero(); a.len() + b.len() - 1];
        for (i, x) in a.iter().enumerate() {
            for (j, y) in b.iter().enumerate() {
                out[i + j] = &out[i + j] + x * y;
            }
        }
        out
    }

    /// (σ - r)
    fn lin(r: Rational) -> Vec<Rational> {
        vec![-r, q(1, 1)]
    }

    const SEG: &str = "[[segment]]\nlength = 0.12\ncurvature_degree = 2\ndensity = 0.3\nbending_stiffness = 0.012\n";

    fn err_at(text: &str, line: usize, column: usize, field: &str, message: &str) {
        let e = parse_arm_str(text, "arm.toml").expect_err("expected an error");
        assert_eq!(
            (e.line, e.column),
            (line, column),
            "wrong position for: {e}"
        );
        assert_eq!(e.field.as_deref(), Some(field), "wrong field for: {e}");
        assert_eq!(e.message, message);
        assert_eq!(
            e.to_string(),
            format!("arm.toml:{line}:{column}: {message}")
        );
    }

    /// A two-segment arm whose second segment carries `extra` lines.
    fn seg2(extra: &str) -> String {
        format!("name = \"a\"\n{SEG}[[segment]]\n{extra}")
    }

    #[test]
    fn names() {
        for bad in ["Reach", "9arm", "", "a-b", "_a", "arm name", "ärm"] {
            let text = format!("name = \"{bad}\"\n{SEG}");
            let e = parse_arm_str(&text, "arm.toml").unwrap_err();
            assert_eq!(
                (e.line, e.column, e.field.as_deref()),
                (1, 8, Some("name")),
                "{e}"
            );
            assert!(
                e.message
                    .starts_with("name: must be a code prefix matching [a-z][a-z0-9_]*"),
                "{e}"
            );
        }
        let long = "a".repeat(MAX_NAME_LEN + 1);
        assert!(parse_arm_str(&format!("name = \"{long}\"\n{SEG}"), "f").is_err());
        for good in ["a", "reach_arm", "arm_2_", "x9"] {
            assert_eq!(
                parse_arm_str(&format!("name = '{good}'\n{SEG}"), "f")
                    .unwrap()
                    .name,
                good
            );
        }
    }

    #[test]
    fn orders_and_degrees() {
        err_at(
            &format!("name = \"a\"\nexpansion_order = 11\n{SEG}"),
            2,
            19,
            "expansion_order",
            "expansion_order: must be an integer in 0..=10, got 11",
        );
        err_at(
            &format!("name = \"a\"\nexpansion_order = -1\n{SEG}"),
            2,
            19,
            "expansion_order",
            "expansion_order: must be an integer in 0..=10, got -1",
        );
        let arm =
            parse_arm_str(&format!("name = \"a\"\nexpansion_order = 10\n{SEG}"), "f").unwrap();
        assert_eq!(arm.expansion_order, 10);
        err_at(
            &seg2("length = 0.1\ncurvature_degree = 9\ndensity = 1\nbending_stiffness = 1\n"),
            9,
            20,
            "segment[2].curvature_degree",
            "segment[2].curvature_degree: must be an integer in 0..=8, got 9",
        );
        let arm = parse_arm_str(
            &seg2("length = 0.1\ncurvature_degree = 8\ndensity = 1\nbending_stiffness = 1\n"),
            "f",
        )
        .unwrap();
        assert_eq!(arm.segments[1].curvature_degree, 8);
        assert_eq!(arm.n_coords(), 12);
    }

    #[test]
    fn lengths() {
        err_at(
            &seg2("length = -0.1\ncurvature_degree = 1\ndensity = 1\nbending_stiffness = 1\n"),
            8,
            10,
            "segment[2].length",
            "segment[2].length: must be positive, got -0.1",
        );
        err_at(
            &seg2("length = 0.0\ncurvature_degree = 1\ndensity = 1\nbending_stiffness = 1\n"),
            8,
            10,
            "segment[2].length",
            "segment[2].length: must be positive, got 0.0",
        );
    }

    #[test]
    fn property_signs_in_files() {
        let base = "length = 1\ncurvature_degree = 1\n";
        err_at(
            &seg2(&format!("{base}density = 0\nbending_stiffness = 1\n")),
            10,
            11,
            "segment[2].density",
            "segment[2].density: must be positive, got 0",
        );
        err_at(
            &seg2(&format!(
                "{base}density = [0.3, -0.6]\nbending_stiffness = 1\n"
            )),
            10,
            11,
            "segment[2].density",
            "segment[2].density: must be positive for all σ in [0, 1], got -0.3 at σ = 1",
        );
        // 1 - 3σ + 2.1σ² is positive at both ends but dips below zero inside.
        let text = seg2(&format!(
            "{base}density = 1\nbending_stiffness = [1, -3, 2.1]\n"
        ));
        let e = parse_arm_str(&text, "arm.toml").unwrap_err();
        assert_eq!((e.line, e.column), (11, 21), "{e}");
        assert!(
            e.message.starts_with(
                "segment[2].bending_stiffness: must be positive for all σ in [0, 1], got -"
            ),
            "{e}"
        );
        // (1 - 2σ)² touches zero at σ = 1/2.
        err_at(
            &seg2(&format!("{base}density = [1, -4, 4]\nbending_stiffness = 1\n")),
            10,
            11,
            "segment[2].density",
            "segment[2].density: must be positive for all σ in [0, 1], but it reaches 0 near σ ≈ 0.500000",
        );
        err_at(
            &seg2(&format!(
                "{base}density = 1\nbending_stiffness = 1\nrotary_inertia = -1e-5\n"
            )),
            12,
            18,
            "segment[2].rotary_inertia",
            "segment[2].rotary_inertia: must be non-negative, got -1e-5",
        );
        err_at(
            &seg2(&format!(
                "{base}density = 1\nbending_stiffness = 1\ndamping = [0, -1, 2]\n"
            )),
            12,
            11,
            "segment[2].damping",
            "segment[2].damping: must be non-negative for all σ in [0, 1], got -0.125 at σ = 0.25",
        );
        err_at(
            &seg2(&format!(
                "{base}density = [1,1,1,1,1,1,1,1,1,1]\nbending_stiffness = 1\n"
            )),
            10,
            11,
            "segment[2].density",
            "segment[2].density: at most 9 coefficients (degree 8 in σ), got 10",
        );
        // zeros allowed where only ≥ 0 is asked; trailing zero coefficients dropped
        let arm = parse_arm_str(
            &seg2(&format!("{base}density = [2, -1, 0, 0]\nbending_stiffness = 1\nrotary_inertia = [0, 1, -1]\ndamping = [1, -2, 1]\n")),
            "f",
        )
        .unwrap();
        let s = &arm.segments[1];
        assert_eq!(s.density.coeffs, qs(&[2, -1]));
        assert_eq!(s.rotary_inertia.coeffs, qs(&[0, 1, -1]));
        assert_eq!(s.damping.coeffs, qs(&[1, -2, 1]));
    }

    #[test]
    fn payload_signs() {
        err_at(
            &format!("name = \"a\"\n{SEG}[payload]\nmass = -0.01\n"),
            8,
            8,
            "payload.mass",
            "payload.mass: must be non-negative, got -0.01",
        );
        err_at(
            &format!("name = \"a\"\n{SEG}[payload]\nmass = 0\nrotary_inertia = -2e-7\n"),
            9,
            18,
            "payload.rotary_inertia",
            "payload.rotary_inertia: must be non-negative, got -2e-7",
        );
        let arm = parse_arm_str(
            &format!("name = \"a\"\n{SEG}[payload]\nrotary_inertia = 2e-7\n"),
            "f",
        )
        .unwrap();
        assert_eq!(arm.payload.rotary_inertia, q(2, 10_000_000));
        assert_eq!(arm.payload.mass, q(0, 1));
    }

    #[test]
    fn actuator_limits() {
        let tendon = |extra: &str| {
            format!("name = \"a\"\n{SEG}[[actuator]]\nkind = \"tendon\"\noffset = 0.01\nthrough_segment = 1\n{extra}")
        };
        let arm = parse_arm_str(&tendon(""), "f").unwrap();
        assert_eq!(
            arm.input_limits,
            vec![InputLimits {
                lo: 0.0,
                hi: f64::INFINITY
            }]
        );
        let arm = parse_arm_str(&tendon("pretension = 0.2\nmax = 12\n"), "f").unwrap();
        assert_eq!(arm.input_limits, vec![InputLimits { lo: 0.2, hi: 12.0 }]);
        err_at(
            &tendon("pretension = -0.1\n"),
            11,
            14,
            "actuator[1].pretension",
            "actuator[1].pretension: must be at least 0 (a tendon pulls only), got -0.1",
        );
        err_at(
            &tendon("pretension = 2\nmax = 1\n"),
            12,
            7,
            "actuator[1].max",
            "actuator[1].max: must be greater than the pretension 2, got 1",
        );
        let arm = parse_arm_str(
            &format!("name = \"a\"\n{SEG}[[actuator]]\nkind = \"end_force\"\nsegment = 1\nmin = -3\nmax = 3\n[[actuator]]\nkind = \"moment\"\nsegment = 1\n"),
            "f",
        )
        .unwrap();
        assert_eq!(
            arm.input_limits,
            vec![
                InputLimits { lo: -3.0, hi: 3.0 },
                InputLimits { lo: -3.0, hi: 3.0 },
                InputLimits::FREE
            ]
        );
        assert_eq!(arm.input_name(1), "u2 (actuator[1].y)");
        assert_eq!(arm.input_name(2), "u3 (actuator[2])");
    }

    #[test]
    fn actuator_references() {
        let seg = "length = 1\ncurvature_degree = 0\ndensity = 1\nbending_stiffness = 1\n";
        let two = seg2(seg); // 11 lines
        err_at(
            &format!("{two}[[actuator]]\nkind = \"tendon\"\noffset = 0.01\nthrough_segment = 3\n"),
            15,
            19,
            "actuator[1].through_segment",
            "actuator[1].through_segment: segment 3 does not exist (the arm has 2 segments, numbered 1..=2)",
        );
        err_at(
            &format!("{two}[[actuator]]\nkind = \"moment\"\nsegment = 1\n[[actuator]]\nkind = \"end_force\"\nsegment = 0\n"),
            17,
            11,
            "actuator[2].segment",
            "actuator[2].segment: segment 0 does not exist (the arm has 2 segments, numbered 1..=2)",
        );
        err_at(
            &format!("name = \"a\"\n{SEG}[[actuator]]\nkind = \"moment\"\nsegment = 2\n"),
            9,
            11,
            "actuator[1].segment",
            "actuator[1].segment: segment 2 does not exist (the arm has 1 segment, numbered 1)",
        );
        err_at(
            &format!("{two}[[actuator]]\nkind = \"tendon\"\noffset = 0.0\nthrough_segment = 1\n"),
            14,
            10,
            "actuator[1].offset",
            "actuator[1].offset: must be non-zero (a tendon on the backbone does nothing), got 0.0",
        );
    }

    #[test]
    fn sign_checks_exact() {
        // positive
        assert_eq!(check_positive(&qs(&[1])), Ok(()));
        assert_eq!(check_positive(&[q(3, 10), q(-3, 10) + q(1, 1000)]), Ok(()));
        assert_eq!(check_positive(&qs(&[1, -2, 2])), Ok(())); // min 1/2 at σ = 1/2
        assert!(check_positive(&qs(&[0])).is_err());
        assert!(check_positive(&qs(&[1, -1])).is_err()); // zero at σ = 1
        assert_eq!(
            check_positive(&qs(&[1, -4, 4])),
            Err(SignViolation::TouchesZeroNear(0.5))
        );
        // two close simple roots inside (0, 1): negative in a gap of width 1e-12
        let a = q(2, 5);
        let b = q(2, 5) + q(1, 1_000_000_000_000);
        let p = mul(&lin(a.clone()), &lin(b.clone()));
        match check_positive(&p) {
            Err(SignViolation::At { sigma, value }) => {
                assert!(value.is_negative() && sigma > a && sigma < b);
                assert_eq!(eval(&p, &sigma), value);
            }
            other => panic!("{other:?}"),
        }
        // the same pair shifted just outside [0, 1] is positive on it
        let p = mul(&lin(q(-1, 1_000_000)), &lin(q(-2, 1_000_000)));
        assert_eq!(check_positive(&p), Ok(()));
        let p = mul(&lin(q(1_000_001, 1_000_000)), &lin(q(1_000_002, 1_000_000)));
        assert_eq!(check_positive(&p), Ok(()));

        // non-negative
        assert_eq!(check_non_negative(&qs(&[0])), Ok(()));
        assert_eq!(check_non_negative(&qs(&[0, 0, 1, -1])), Ok(())); // σ²(1-σ)
        assert_eq!(check_non_negative(&qs(&[1, -2, 1])), Ok(())); // (1-σ)²
        assert_eq!(check_non_negative(&qs(&[1, -4, 4])), Ok(())); // (1-2σ)²
        let half = q(1, 2);
        let sq = mul(&lin(half.clone()), &lin(half.clone()));
        let bump = mul(&qs(&[0, 1, -1]), &sq); // σ(1-σ)(σ-1/2)²
        assert_eq!(check_non_negative(&bump), Ok(()));
        let odd = mul(&qs(&[0, 1, -1]), &lin(half.clone())); // σ(1-σ)(σ-1/2)
        match check_non_negative(&odd) {
            Err(SignViolation::At { sigma, value }) => {
                assert!(value.is_negative());
                assert_eq!(eval(&odd, &sigma), value);
            }
            other => panic!("{other:?}"),
        }
        // zero at 0 then negative right after, needing a tiny σ to show it
        let p = vec![q(0, 1), q(-1, 1 << 40), q(1, 1)]; // σ(σ - 2^-40)
        match check_non_negative(&p) {
            Err(SignViolation::At { sigma, value }) => {
                assert!(value.is_negative() && sigma.is_positive());
            }
            other => panic!("{other:?}"),
        }
        // mirror image at σ = 1: (1-σ)(1-σ-2^-40)
        let p = mul(&qs(&[1, -1]), &[q(1, 1) - q(1, 1 << 40), q(-1, 1)]);
        match check_non_negative(&p) {
            Err(SignViolation::At { sigma, value }) => {
                assert!(value.is_negative() && sigma < q(1, 1));
            }
            other => panic!("{other:?}"),
        }
    }

    #[test]
    fn sign_checks_agree_with_sampling() {
        // Random small integer polynomials of degree ≤ 5: any violation reported
        // must be genuine, and a grid point with a bad value must be detected.
        let mut state: u64 = 0x9e37_79b9_7f4a_7c15;
        let mut next = move || {
            state ^= state << 13;
            state ^= state >> 7;
            state ^= state << 17;
            state
        };
        let grid: Vec<Rational> = (0..=64).map(|i| q(i, 64)).collect();
        for _ in 0..1500 {
            let deg = (next() % 6) as usize;
            let p: Vec<Rational> = (0..=deg).map(|_| q((next() % 21) as i64 - 8, 1)).collect();
            let min_on_grid = grid.iter().map(|x| eval(&p, x)).min().unwrap();
            for strict in [true, false] {
                let r = if strict {
                    check_positive(&p)
                } else {
                    check_non_negative(&p)
                };
                let grid_bad = if strict {
                    !min_on_grid.is_positive()
                } else {
                    min_on_grid.is_negative()
                };
                if grid_bad {
                    assert!(r.is_err(), "missed violation of {p:?} (strict {strict})");
                }
                match r {
                    Ok(()) => {}
                    Err(SignViolation::At { sigma, value }) => {
                        assert_eq!(eval(&p, &sigma), value);
                        assert!(sigma >= q(0, 1) && sigma <= q(1, 1));
                        assert!(if strict {
                            !value.is_positive()
                        } else {
                            value.is_negative()
                        });
                    }
                    Err(SignViolation::TouchesZeroNear(s)) => {
                        assert!(strict && (0.0..=1.0).contains(&s), "{p:?}");
                    }
                    Err(other) => panic!("{p:?}: {other:?}"),
                }
            }
        }
    }
}
