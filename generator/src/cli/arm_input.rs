//! Reading the arm a command works on: the file, an order override and `--set` field
//! overrides, with errors for the user, refused before any algebra when too large.

use super::CliError;
use crate::arm::MAX_EXPANSION_ORDER;
use crate::arm::{apply_overrides, parse_arm_str, parse_overrides, read_arm_text, Arm};
use crate::cost::{estimate, Work};

/// Loads an arm file and applies an order override, with errors for the user; an arm
/// too large to derive within the budget is refused here, before any algebra.
pub(crate) fn load_arm(path: &std::path::Path, order: Option<u32>) -> Result<Arm, CliError> {
    load_arm_with(path, order, None)
}

/// [`load_arm`] with the `--set` overrides `set` (`FIELD=VALUE,…`) applied to the
/// file's text first: the file is read as if it held the new values, and a value the
/// arm format refuses is reported at its field, in `PATH (with --set)`.
pub(crate) fn load_arm_with(
    path: &std::path::Path,
    order: Option<u32>,
    set: Option<&str>,
) -> Result<Arm, CliError> {
    let text = read_arm_text(path).map_err(|e| CliError::Input(e.to_string()))?;
    let (text, label) = match set {
        None => (text, path.display().to_string()),
        Some(spec) => {
            let overrides = parse_overrides(spec).map_err(CliError::Input)?;
            let text = apply_overrides(&text, &overrides).map_err(CliError::Input)?;
            (text, format!("{} (with --set)", path.display()))
        }
    };
    let arm = parse_arm_str(&text, &label).map_err(|e| CliError::Input(e.to_string()))?;
    for w in &arm.warnings {
        super::progress::warning(w);
    }
    let arm = match order {
        Some(n) if n > MAX_EXPANSION_ORDER => {
            return Err(CliError::Input(format!(
                "--order: {n} is above the supported maximum {MAX_EXPANSION_ORDER}"
            )))
        }
        Some(n) => arm.with_order(n),
        None => arm,
    };
    super::within_budget(
        &format!("deriving the model of {}", path.display()),
        estimate(&arm, Work::Derive),
    )?;
    Ok(arm)
}
