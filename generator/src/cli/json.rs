//! JSON printing for people and scripts alike: objects indented, arrays of numbers
//! (vectors, matrix rows) kept on one line so a matrix reads as a matrix.

use serde_json::Value;
use std::fmt::Write;

/// Where `v` holds a `null`, as a path (`qdd[2]`, `B[0][1]`). serde_json writes a
/// non-finite number as `null`; outputs whose fields are all numbers use this to refuse
/// rather than print one.
pub fn first_null(v: &Value) -> Option<String> {
    fn at(v: &Value, path: String) -> Option<String> {
        match v {
            Value::Null => Some(path),
            Value::Array(items) => items
                .iter()
                .enumerate()
                .find_map(|(i, x)| at(x, format!("{path}[{i}]"))),
            Value::Object(map) => map.iter().find_map(|(k, x)| {
                at(
                    x,
                    if path.is_empty() {
                        k.clone()
                    } else {
                        format!("{path}.{k}")
                    },
                )
            }),
            _ => None,
        }
    }
    at(v, String::new())
}

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
        Value::Array(items) => {
            out.push('[');
            for (i, item) in items.iter().enumerate() {
                if i > 0 {
                    out.push(',');
                }
                write_value(out, item, indent + 1);
            }
            out.push(']');
        }
        // -0.0 is the same number as 0.0 to every reader, and looks like a sign error.
        Value::Number(x) if x.is_f64() && x.as_f64() == Some(0.0) => out.push_str("0.0"),
        other => out.push_str(&other.to_string()),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_non_finite_number_is_found_by_its_path() {
        let v = serde_json::to_value(serde_json::json!({"B": [[1.0, 2.0]], "qdd": [0.0, 1.0]}))
            .unwrap();
        assert_eq!(first_null(&v), None);
        #[derive(serde::Serialize)]
        struct Out {
            b: Vec<Vec<f64>>,
        }
        let v = serde_json::to_value(Out {
            b: vec![vec![1.0], vec![2.0, f64::NAN]],
        })
        .unwrap();
        assert_eq!(first_null(&v).as_deref(), Some("b[1][1]"));
    }

    #[test]
    fn minus_zero_prints_as_zero() {
        let v = serde_json::json!({"q": [-0.0, 0.0, -1.5], "n": 0});
        assert_eq!(
            to_string(&v),
            "{\n  \"q\": [0.0,0.0,-1.5],\n  \"n\": 0\n}\n"
        );
    }

    #[test]
    fn matrices_keep_rows_on_one_line() {
        let v = serde_json::json!({"n": 2, "B": [[1.0, 2.0], [3.0, 4.0]], "g": [0.5]});
        let s = to_string(&v);
        assert!(s.contains("[1.0,2.0]"), "{s}");
        let back: Value = serde_json::from_str(&s).unwrap();
        assert_eq!(back, v);
    }
}
