//! Measurement files for identification: CSV with a header row whose labels are those
//! of `simulate`'s trajectory.csv (`t`, `q1_0`, …, `qd1_0`, …, `u1`, …; other columns,
//! such as the tip pose, are ignored), one measurement per row.
//!
//! Rest shapes need every `q` and `u` column. A logged motion needs `t` as well, at
//! uniform steps; its velocities `qd…` and accelerations `qdd…` are read when given
//! and otherwise estimated from `q` by the smoothing differentiator
//! ([`super::smooth_derivatives`]), which drops `half` rows at either end.

use super::{smooth_derivatives, Observation};
use crate::arm::Arm;

/// The rows of a CSV file: header labels, and per data row its line number and cells.
struct Table {
    labels: Vec<String>,
    rows: Vec<(usize, Vec<f64>)>,
}

/// Largest measurement file read (bytes): a million rows of a dozen columns.
const MAX_BYTES: u64 = 256 << 20;

fn read_table(path: &std::path::Path) -> Result<Table, String> {
    let file = path.display().to_string();
    let meta = std::fs::metadata(path).map_err(|e| format!("{file}: {e}"))?;
    if !meta.is_file() {
        return Err(format!("{file}: not a file"));
    }
    if meta.len() > MAX_BYTES {
        return Err(format!(
            "{file}: {} bytes, more than the {MAX_BYTES} a measurement file may have",
            meta.len()
        ));
    }
    let text = std::fs::read_to_string(path).map_err(|e| format!("{file}: {e}"))?;
    let mut lines = text
        .lines()
        .enumerate()
        .map(|(i, l)| (i + 1, l.trim()))
        .filter(|(_, l)| !l.is_empty() && !l.starts_with('#'));
    let (_, header) = lines
        .next()
        .ok_or_else(|| format!("{file}: empty (a header row of column labels is needed)"))?;
    let labels: Vec<String> = header.split(',').map(|s| s.trim().to_string()).collect();
    for (c, l) in labels.iter().enumerate() {
        if l.is_empty() {
            return Err(format!("{file}:1: column {} has no label", c + 1));
        }
        if labels[..c].contains(l) {
            return Err(format!("{file}:1: column `{l}` appears twice"));
        }
    }
    let mut rows = Vec::new();
    for (line, l) in lines {
        let cells: Vec<&str> = l.split(',').map(str::trim).collect();
        if cells.len() != labels.len() {
            return Err(format!(
                "{file}:{line}: {} cells, the header has {}",
                cells.len(),
                labels.len()
            ));
        }
        let mut values = Vec::with_capacity(cells.len());
        for (c, cell) in cells.iter().enumerate() {
            let v: f64 = cell.parse().map_err(|_| {
                format!(
                    "{file}:{line}: column {}: `{cell}` is not a number",
                    labels[c]
                )
            })?;
            if !v.is_finite() {
                return Err(format!(
                    "{file}:{line}: column {}: {cell} (every value must be finite)",
                    labels[c]
                ));
            }
            values.push(v);
        }
        rows.push((line, values));
    }
    Ok(Table { labels, rows })
}

/// Where each label the arm needs sits in a file (`None`: optional and absent).
struct Columns {
    q: Vec<usize>,
    u: Vec<usize>,
    qd: Option<Vec<usize>>,
    qdd: Option<Vec<usize>>,
    t: Option<usize>,
}

/// The [`Columns`] of `table`, refusing labels of coordinates or inputs the arm lacks.
fn columns(file: &str, table: &Table, arm: &Arm, dynamic: bool) -> Result<Columns, String> {
    let coords: Vec<String> = arm.coordinate_labels();
    let k = arm.n_inputs();
    let find = |l: &str| table.labels.iter().position(|x| x == l);
    // Labels that look like ours but name what the arm does not have.
    for l in &table.labels {
        let known = l == "t"
            || coords.iter().any(|c| {
                *l == format!("q{c}") || *l == format!("qd{c}") || *l == format!("qdd{c}")
            })
            || (1..=k).any(|i| *l == format!("u{i}"));
        let ours = l.starts_with('u') && l[1..].parse::<usize>().is_ok()
            || ["qdd", "qd", "q"].iter().any(|p| {
                l.strip_prefix(p).is_some_and(|rest| {
                    let mut it = rest.split('_');
                    matches!(
                        (
                            it.next().map(str::parse::<usize>),
                            it.next().map(str::parse::<usize>),
                            it.next()
                        ),
                        (Some(Ok(_)), Some(Ok(_)), None)
                    )
                })
            });
        if ours && !known {
            return Err(if l.starts_with('u') {
                format!(
                    "{file}:1: column {l}: the arm has {k} input(s), u1 .. u{k} (one per \
                     column of A)"
                )
            } else {
                format!(
                    "{file}:1: column {l}: the arm has no such coordinate (its coordinates \
                     are {})",
                    coords.join(", ")
                )
            });
        }
    }
    let need = |l: String| find(&l).ok_or_else(|| format!("{file}:1: no column {l}"));
    let q = coords
        .iter()
        .map(|c| need(format!("q{c}")))
        .collect::<Result<Vec<_>, _>>()?;
    let u = (1..=k)
        .map(|i| need(format!("u{i}")))
        .collect::<Result<Vec<_>, _>>()?;
    let all = |prefix: &str| -> Result<Option<Vec<usize>>, String> {
        let found: Vec<Option<usize>> = coords
            .iter()
            .map(|c| find(&format!("{prefix}{c}")))
            .collect();
        match found.iter().filter(|f| f.is_some()).count() {
            0 => Ok(None),
            m if m == coords.len() => Ok(Some(found.into_iter().flatten().collect())),
            _ => Err(format!(
                "{file}:1: some {prefix}… columns but not all: give all {} or none",
                coords.len()
            )),
        }
    };
    let (qd, qdd) = if dynamic {
        (all("qd")?, all("qdd")?)
    } else {
        (None, None)
    };
    let t = if dynamic {
        Some(need("t".into())?)
    } else {
        None
    };
    Ok(Columns { q, u, qd, qdd, t })
}

/// Rest shapes: one observation per row.
pub fn read_rest_shapes(path: &std::path::Path, arm: &Arm) -> Result<Vec<Observation>, String> {
    let file = path.display().to_string();
    let table = read_table(path)?;
    let Columns { q, u, .. } = columns(&file, &table, arm, false)?;
    if table.rows.is_empty() {
        return Err(format!("{file}: no data rows"));
    }
    let n = arm.n_coords();
    Ok(table
        .rows
        .iter()
        .map(|(line, v)| Observation {
            q: q.iter().map(|&c| v[c]).collect(),
            qd: vec![0.0; n],
            qdd: vec![0.0; n],
            u: u.iter().map(|&c| v[c]).collect(),
            origin: format!("{file}:{line}"),
            at_rest: true,
        })
        .collect())
}

/// A logged motion: one observation per row, less `half` rows at either end when the
/// derivatives are estimated.
pub fn read_motion(
    path: &std::path::Path,
    arm: &Arm,
    half: usize,
) -> Result<Vec<Observation>, String> {
    let file = path.display().to_string();
    let table = read_table(path)?;
    let Columns { q, u, qd, qdd, t } = columns(&file, &table, arm, true)?;
    let t = t.expect("dynamic data has a time column");
    let rows = &table.rows;
    let estimate = qd.is_none() || qdd.is_none();
    let least = if estimate { 2 * half + 1 } else { 1 };
    if rows.len() < least {
        return Err(format!(
            "{file}: {} data rows; the smoothing differentiator needs at least {least} \
             (--window)",
            rows.len()
        ));
    }
    let dt = if rows.len() > 1 {
        (rows[rows.len() - 1].1[t] - rows[0].1[t]) / (rows.len() - 1) as f64
    } else {
        1.0
    };
    if estimate {
        if !(dt > 0.0) {
            return Err(format!("{file}: column t must increase"));
        }
        for (i, (line, v)) in rows.iter().enumerate() {
            let want = rows[0].1[t] + i as f64 * dt;
            if !((v[t] - want).abs() <= 1e-3 * dt) {
                return Err(format!(
                    "{file}:{line}: column t: {} breaks the uniform step {dt} that the \
                     differentiator needs (give qd… and qdd… columns for uneven steps)",
                    v[t]
                ));
            }
        }
    }
    let n = arm.n_coords();
    // Derivatives by coordinate, estimated where not given.
    let derivative =
        |c: usize| smooth_derivatives(&rows.iter().map(|r| r.1[c]).collect::<Vec<_>>(), dt, half);
    let estimated: Vec<Vec<(f64, f64)>> = if estimate {
        q.iter().map(|&c| derivative(c)).collect()
    } else {
        Vec::new()
    };
    let (from, to) = if estimate {
        (half, rows.len() - half)
    } else {
        (0, rows.len())
    };
    Ok((from..to)
        .map(|r| {
            let (line, v) = &rows[r];
            let e = |i: usize| estimated[i][r - half];
            Observation {
                q: q.iter().map(|&c| v[c]).collect(),
                qd: match &qd {
                    Some(cols) => cols.iter().map(|&c| v[c]).collect(),
                    None => (0..n).map(|i| e(i).0).collect(),
                },
                qdd: match &qdd {
                    Some(cols) => cols.iter().map(|&c| v[c]).collect(),
                    None => (0..n).map(|i| e(i).1).collect(),
                },
                u: u.iter().map(|&c| v[c]).collect(),
                origin: format!("{file}:{line}"),
                at_rest: false,
            }
        })
        .collect())
}
