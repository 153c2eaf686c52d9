//! Field overrides (`--set "payload.mass=0.05,gravity=0,-9.81"`): named numbers of an
//! arm file changed for one run, without editing the file.
//!
//! The override edits the file's text (its TOML document, comments and layout kept)
//! and the result is read like any arm file, so every limit and every message of the
//! parser applies to the new values, and a field keeps its line. Only numbers (and
//! lists of numbers) are set: a change of kind, name or shape is an edit of the file.

use toml_edit::{ArrayOfTables, DocumentMut, Item, Table, Value};

/// One override: the field's path and its value, one number or several.
#[derive(Clone, Debug, PartialEq)]
pub struct Override {
    /// `gravity`, `payload.mass`, `segment[2].bending_stiffness` (1-based, as the
    /// parser's messages name them).
    pub path: String,
    pub values: Vec<String>,
}

/// Reads `FIELD=VALUE,FIELD=V1,V2,…`: a comma-separated item without `=` continues
/// the previous field's list (so `gravity=0,-9.81` sets both components).
pub fn parse_overrides(spec: &str) -> Result<Vec<Override>, String> {
    let mut out: Vec<Override> = Vec::new();
    for item in spec.split(',').map(str::trim) {
        if item.is_empty() {
            return Err(format!("--set: an empty item in `{spec}`"));
        }
        match item.split_once('=') {
            Some((path, value)) => {
                let path = path.trim();
                if path.is_empty() {
                    return Err(format!("--set: `{item}` names no field"));
                }
                if out.iter().any(|o| o.path == path) {
                    return Err(format!("--set: {path} is set twice"));
                }
                out.push(Override {
                    path: path.to_string(),
                    values: vec![value.trim().to_string()],
                });
            }
            None => match out.last_mut() {
                Some(last) => last.values.push(item.to_string()),
                None => return Err(format!("--set: `{item}` is not FIELD=VALUE")),
            },
        }
    }
    if out.is_empty() {
        return Err("--set: nothing to set".into());
    }
    Ok(out)
}

/// A number as TOML: the text as written (the arm parser reads decimals exactly).
fn number(text: &str, path: &str) -> Result<Value, String> {
    let v: Value = text
        .parse()
        .map_err(|_| format!("--set: {path}: `{text}` is not a number"))?;
    match v {
        Value::Integer(_) | Value::Float(_) => Ok(v),
        _ => Err(format!("--set: {path}: `{text}` is not a number")),
    }
}

/// One step of a path: a key, and for `segment[2]` the 1-based index.
fn step(part: &str, path: &str) -> Result<(String, Option<usize>), String> {
    match part.split_once('[') {
        None => Ok((part.to_string(), None)),
        Some((key, rest)) => {
            let index = rest
                .strip_suffix(']')
                .and_then(|i| i.parse::<usize>().ok())
                .filter(|i| *i >= 1)
                .ok_or_else(|| {
                    format!("--set: {path}: `{part}` is not key[k] with k counted from 1")
                })?;
            Ok((key.to_string(), Some(index)))
        }
    }
}

/// The text of the arm file with every override applied.
pub fn apply_overrides(text: &str, overrides: &[Override]) -> Result<String, String> {
    let mut doc: DocumentMut = text
        .parse()
        .map_err(|e| format!("--set: re-reading the arm file: {e}"))?;
    for o in overrides {
        let value = if o.values.len() == 1 && !o.path.ends_with("gravity") {
            number(&o.values[0], &o.path)?
        } else {
            let mut array = toml_edit::Array::new();
            for v in &o.values {
                array.push(number(v, &o.path)?);
            }
            Value::Array(array)
        };
        let parts: Vec<&str> = o.path.split('.').map(str::trim).collect();
        let (last, tables) = parts.split_last().expect("split yields one part");
        if last.contains('[') {
            return Err(format!("--set: {}: ends in a table, not a field", o.path));
        }
        let mut table: &mut Table = doc.as_table_mut();
        for part in tables {
            let (key, index) = step(part, &o.path)?;
            table = match index {
                None => {
                    let item = table
                        .entry(&key)
                        .or_insert_with(|| Item::Table(Table::new()));
                    item.as_table_mut()
                        .ok_or_else(|| format!("--set: {}: `{key}` is not a table", o.path))?
                }
                Some(k) => {
                    let tables: &mut ArrayOfTables = table
                        .get_mut(&key)
                        .and_then(Item::as_array_of_tables_mut)
                        .ok_or_else(|| {
                            format!("--set: {}: the arm file has no [[{key}]]", o.path)
                        })?;
                    let count = tables.len();
                    tables.get_mut(k - 1).ok_or_else(|| {
                        format!(
                            "--set: {}: the arm file has {count} [[{key}]] table(s)",
                            o.path
                        )
                    })?
                }
            };
        }
        match table.get_mut(last) {
            Some(item) if item.is_table_like() || item.is_array_of_tables() => {
                return Err(format!("--set: {}: is a table, not a field", o.path));
            }
            Some(item) => *item = Item::Value(value),
            None => {
                table.insert(last, Item::Value(value));
            }
        }
    }
    Ok(doc.to_string())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::arm::parse_arm_str;

    const ARM: &str = "name = \"a\"\ngravity = [0.0, 0.0]\n# a comment\n[[segment]]\n\
                       length = 0.2\ncurvature_degree = 1\ndensity = 0.1\n\
                       bending_stiffness = 0.04\n[[segment]]\nlength = 0.1\n\
                       curvature_degree = 0\ndensity = 0.1\nbending_stiffness = 0.02\n";

    #[test]
    fn overrides_change_the_named_fields_and_keep_the_rest() {
        let o =
            parse_overrides("gravity=0,-9.81, segment[2].length=0.15,payload.mass=0.05").unwrap();
        assert_eq!(o[0].values, vec!["0", "-9.81"]);
        let text = apply_overrides(ARM, &o).unwrap();
        assert!(text.contains("# a comment"), "{text}");
        let arm = parse_arm_str(&text, "a.toml").unwrap();
        let f = |q: &crate::arm::Rational| num_traits::ToPrimitive::to_f64(q).unwrap();
        assert_eq!(f(&arm.gravity[1]), -9.81);
        assert_eq!(f(&arm.segments[1].length), 0.15);
        assert_eq!(f(&arm.segments[0].length), 0.2);
        assert_eq!(f(&arm.payload.mass), 0.05);
    }

    #[test]
    fn bad_overrides_say_what_is_wrong() {
        let err = |spec: &str| {
            parse_overrides(spec)
                .and_then(|o| apply_overrides(ARM, &o))
                .unwrap_err()
        };
        assert!(err("segment[3].length=0.1").contains("has 2 [[segment]]"));
        assert!(err("segment[0].length=0.1").contains("counted from 1"));
        assert!(err("segment[1].length=short").contains("is not a number"));
        assert!(err("name=b").contains("is not a number"));
        assert!(err("-9.81").contains("is not FIELD=VALUE"));
        assert!(err("gravity=0,,1").contains("empty item"));
        assert!(err("gravity=0,1,gravity=1,0").contains("set twice"));
        assert!(
            err("segment=1").contains("is a table"),
            "{}",
            err("segment=1")
        );
        // A value the parser refuses is refused with the parser's message.
        let o = parse_overrides("segment[1].length=-0.2").unwrap();
        let text = apply_overrides(ARM, &o).unwrap();
        let e = parse_arm_str(&text, "a.toml (with --set)").unwrap_err();
        assert!(e.to_string().contains("segment[1].length"), "{e}");
    }
}
