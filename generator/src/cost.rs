//! What a command will cost on an arm, estimated from the arm's shape before any
//! algebra runs, so that no command runs the machine out of memory by surprise.
//!
//! Two terms dominate, both measured (release build, 2-core machine, all languages):
//! - the chain: every pair of coordinates meets every segment between them, so the
//!   work grows like `S · n²` (S segments, n coordinates);
//! - inside a segment: kernels and fields of about `K = (m+1)·N + 1` powers, growing
//!   like `K⁴`.
//!
//! | arm (S, degree m, order N) | derive + eval: s, MB | generate: s, MB |
//! |---|---|---|
//! | 40, 0, 0 | 0.87, 143 | 35.6, 2730 |
//! | 20, 1, 2 | 0.50, 69 | 15.1, 1648 |
//! | 1, 3, 6 | 0.58, 30 | 2.0, 211 |
//! | 1, 5, 8 | 8.5, 183 | 18.9, 1376 |
//! | 4, 2, 4 | 0.21, 27 | 1.7, 245 |
//!
//! The coefficients below reproduce these within about 20% (memory of small arms, where
//! a fixed base dominates, excepted). An estimate is a guard against the absurd, not a
//! promise. `generate` grew on long chains with the runtime parameters: the regressor
//! (a derivative per parameter, `4·S + 2` of them) and its golden columns (the reference
//! once per parameter and state) scale with the chain too; the generate figures are
//! those of the derivative that skips what a parameter does not touch and the golden
//! columns on shared inner integrals.

use crate::arm::Arm;

/// What a command does with the arm.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Work {
    /// Derive the model and evaluate it (eval, simulate, compare, …).
    Derive,
    /// Derive, schedule and print the code with its golden values (generate, verify).
    Generate,
}

/// Estimated cost of one piece of work.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Estimate {
    pub seconds: f64,
    pub megabytes: f64,
}

impl std::ops::Add for Estimate {
    type Output = Estimate;
    fn add(self, o: Estimate) -> Estimate {
        Estimate {
            seconds: self.seconds + o.seconds,
            megabytes: self.megabytes.max(o.megabytes),
        }
    }
}

/// Largest estimated memory a command takes on without `--allow-large` [MB].
pub const BUDGET_MEGABYTES: f64 = 4096.0;
/// Largest estimated time a command takes on without `--allow-large` [s].
pub const BUDGET_SECONDS: f64 = 600.0;

/// The estimate for `work` on `arm` at its expansion order.
pub fn estimate(arm: &Arm, work: Work) -> Estimate {
    let s = arm.segments.len() as f64;
    let n = arm.n_coords() as f64;
    let chain = s * n * n;
    let local: f64 = arm
        .segments
        .iter()
        .map(|seg| {
            let k = f64::from(seg.curvature_degree + 1) * f64::from(arm.expansion_order) + 1.0;
            k.powi(4)
        })
        .sum();
    match work {
        Work::Derive => Estimate {
            seconds: 1.4e-5 * chain + 1.5e-6 * local,
            megabytes: 6.0 + 2.1e-3 * chain + 3.1e-5 * local,
        },
        Work::Generate => Estimate {
            seconds: 0.9 + 5.0e-4 * chain + 3.2e-6 * local,
            megabytes: 150.0 + 4.2e-2 * chain + 2.1e-4 * local,
        },
    }
}

/// Refuses work whose estimate exceeds the budget, unless `allow_large`; the message
/// gives the estimate, the budget and the option that overrides it.
pub fn check(what: &str, estimate: Estimate, allow_large: bool) -> Result<(), String> {
    if allow_large || (estimate.megabytes <= BUDGET_MEGABYTES && estimate.seconds <= BUDGET_SECONDS)
    {
        return Ok(());
    }
    Err(format!(
        "{what} is estimated to need {} and {}, beyond the budget of {} and {}; \
         fewer segments, a lower curvature degree or expansion order bring it down, or pass \
         --allow-large to go on anyway",
        megabytes(estimate.megabytes),
        duration(estimate.seconds),
        megabytes(BUDGET_MEGABYTES),
        duration(BUDGET_SECONDS),
    ))
}

fn megabytes(mb: f64) -> String {
    if mb >= 1024.0 {
        format!("{:.1} GB", mb / 1024.0)
    } else {
        format!("{mb:.0} MB")
    }
}

fn duration(s: f64) -> String {
    if s >= 3600.0 {
        format!("{:.1} h", s / 3600.0)
    } else if s >= 60.0 {
        format!("{:.0} min", s / 60.0)
    } else {
        format!("{s:.1} s")
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::arm::parse_arm_str;

    fn arm(segments: usize, degree: u32, order: u32) -> Arm {
        let mut text = format!("name = \"c\"\nexpansion_order = {order}\n");
        for _ in 0..segments {
            text.push_str(&format!(
                "[[segment]]\nlength = 0.1\ncurvature_degree = {degree}\ndensity = 0.2\nbending_stiffness = 0.01\n"
            ));
        }
        parse_arm_str(&text, "c.toml").unwrap()
    }

    #[test]
    fn the_estimate_reproduces_the_measurements_it_was_fitted_to() {
        for (shape, derive, generate) in [
            ((40, 0, 0), (0.87, 143.0), (35.6, 2730.0)),
            ((20, 1, 2), (0.50, 69.0), (15.1, 1648.0)),
            ((1, 5, 8), (8.5, 183.0), (18.9, 1376.0)),
        ] {
            let a = arm(shape.0, shape.1, shape.2);
            for (work, (s, mb)) in [(Work::Derive, derive), (Work::Generate, generate)] {
                let e = estimate(&a, work);
                assert!(
                    (e.seconds / s - 1.0).abs() < 0.25,
                    "{shape:?} {work:?}: {e:?}"
                );
                assert!(
                    (e.megabytes / mb - 1.0).abs() < 0.25,
                    "{shape:?} {work:?}: {e:?}"
                );
            }
        }
    }

    #[test]
    fn oversized_arms_are_refused_with_the_override() {
        // The reports: 3,000 segments of degree 8 at order 10, 3,000 plain segments,
        // and generate on 100 segments.
        for (a, work) in [
            (arm(3000, 8, 10), Work::Derive),
            (arm(3000, 0, 0), Work::Derive),
            (arm(100, 0, 0), Work::Generate),
        ] {
            let e = estimate(&a, work);
            let msg = check("generate", e, false).unwrap_err();
            assert!(msg.contains("--allow-large"), "{msg}");
            assert!(check("generate", e, true).is_ok());
        }
        // The demo arms' sizes pass.
        assert!(check("generate", estimate(&arm(2, 2, 4), Work::Generate), false).is_ok());
        assert!(check("eval", estimate(&arm(100, 0, 0), Work::Derive), false).is_ok());
    }
}
