//! JSON printing for people and scripts alike: objects indented, arrays of numbers
//! (vectors, matrix rows) kept on one line so a matrix reads as a matrix.

use serde_json::Value;
use std::fmt::Write;

/// Pretty JSON with flat numeric arrays.
pub fn to_string(v: &Value) -> String {
    let mut out = String::new();
    write_value(&mut out, v, 0);
    out.push('\n');
    out
}

fn flat(v: &Value) -> bool {
    match v {
        Value::Array(items) => items
            .iter()
            .all(|i| !matches!(i, Value::Array(_) | Value::Object(_))),
        _ => true,
    }
}

fn write_value(out: &mut String, v: &Value, indent: usize) {
    let pad = "  ".repeat(indent + 1);
    match v {
        Value::Object(map) => {
            out.push_str("{\n");
            for (i, (k, val)) in map.iter().enumerate() {
                let _ = write!(out, "{pad}{}: ", Value::String(k.clone()));
                write_value(out, val, indent + 1);
                out.push_str(if i + 1 < map.len() { ",\n" } else { "\n" });
            }
            let _ = write!(out, "{}}}", "  ".repeat(indent));
        }
        Value::Array(items) if !flat(v) => {
            out.push_str("[\n");
            for (i, item) in items.iter().enumerate() {
                out.push_str(&pad);
                write_value(out, item, indent + 1);
                out.push_str(if i + 1 < items.len() { ",\n" } else { "\n" });
            }
            let _ = write!(out, "{}]", "  ".repeat(indent));
        }
        other => out.push_str(&other.to_string()),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn matrices_keep_rows_on_one_line() {
        let v = serde_json::json!({"n": 2, "B": [[1.0, 2.0], [3.0, 4.0]], "g": [0.5]});
        let s = to_string(&v);
        assert!(s.contains("[1.0,2.0]"), "{s}");
        let back: Value = serde_json::from_str(&s).unwrap();
        assert_eq!(back, v);
    }
}
