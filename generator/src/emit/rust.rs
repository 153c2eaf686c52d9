//! Rust output (in progress).
use super::{golden::Golden, plan::Plan, Meta, OutFile};
pub fn emit(_p: &Plan, _m: &Meta, _g: &Golden) -> Result<Vec<OutFile>, String> {
    Ok(vec![])
}
