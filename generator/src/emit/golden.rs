//! Golden values for the cross-check tests that ship with the emitted code, computed
//! by the independent numeric reference (quadrature of the truncated kinematics of the
//! arm's own order), never by the derived program the code was printed from.

use super::number::{golden_literal, Precision};
use crate::arm::Arm;
use crate::dynamics::generalized_force;
use crate::reference::{Kinematics, Reference};
use num_traits::ToPrimitive;

/// Arc coordinates at which every segment's pose is checked.
pub const SIGMAS: [f64; 3] = [0.0, 0.37, 1.0];

/// One named array of golden numbers: `cases × len` values.
pub struct Array {
    pub name: &'static str,
    pub len: usize,
    pub values: Vec<Vec<f64>>,
}

pub struct Golden {
    pub labels: Vec<String>,
    pub arrays: Vec<Array>,
}

/// Bend angles `α_i` per segment turned into coordinates: `q_{j,i} = α_i (i+1)/L_j`, so
/// that `α_0 = a_j` is the moment argument and `α_i` the angle coordinate `i` adds.
fn coords(arm: &Arm, alpha: impl Fn(usize, usize) -> f64) -> Vec<f64> {
    let mut q = Vec::new();
    for (j, s) in arm.segments.iter().enumerate() {
        let l = s.length.to_f64().unwrap_or(f64::NAN);
        for i in 0..s.n_coords() {
            q.push(alpha(j, i) * (i + 1) as f64 / l);
        }
    }
    q
}

/// A fixed, irregular pattern in [−1, 1].
fn pattern(i: usize, salt: usize) -> f64 {
    let v = ((i * 7 + salt * 13 + 3) % 17) as f64 / 8.0 - 1.0;
    if v == 0.0 {
        0.3
    } else {
        v
    }
}

/// The configurations: straight, tiny (`a_j = 1e-9`), small, large and mixed curvature
/// (`a_j = 0` exactly with bent higher terms, `a_j = 1e-9`, large), and `a_j = 2` (the
/// moment routine's branch switch).
fn configurations(arm: &Arm) -> Vec<(String, Vec<f64>)> {
    vec![
        ("straight".into(), coords(arm, |_, _| 0.0)),
        (
            "tiny a = 1e-9".into(),
            coords(arm, |_, i| if i == 0 { 1e-9 } else { 0.0 }),
        ),
        (
            "small".into(),
            coords(
                arm,
                |j, i| if i == 0 { 0.2 } else { 0.1 } * pattern(j * 5 + i, 1),
            ),
        ),
        (
            "large".into(),
            coords(arm, |j, i| {
                if i == 0 {
                    if j % 2 == 0 {
                        3.5
                    } else {
                        -2.6
                    }
                } else {
                    0.8 * pattern(j * 5 + i, 2)
                }
            }),
        ),
        (
            "mixed".into(),
            coords(arm, |j, i| match (j % 3, i) {
                (0, 0) => 0.0,
                (0, _) => 0.5,
                (1, 0) => 1e-9,
                (1, _) => -0.4,
                (_, 0) => 3.0,
                (_, _) => 0.3,
            }),
        ),
        (
            "branch switch a = 2".into(),
            coords(arm, |_, i| if i == 0 { 2.0 } else { 0.2 }),
        ),
    ]
}

fn flat(m: &[Vec<f64>]) -> Vec<f64> {
    m.iter().flatten().copied().collect()
}

impl Golden {
    pub fn compute(arm: &Arm) -> Golden {
        let reference = Reference::new(arm, Kinematics::Truncated(arm.expansion_order));
        let n = arm.n_coords();
        let k = arm.n_inputs();
        let mut labels = Vec::new();
        let names: [(&'static str, usize); 15] = [
            ("q", n),
            ("qd", n),
            ("u", k),
            ("B", n * n),
            ("C", n * n),
            ("G", n),
            ("K", n * n),
            ("D", n * n),
            ("A", n * k),
            ("J", 3 * n),
            ("T", 1),
            ("V", 1),
            ("rhs", n),
            ("pose", arm.segments.len() * SIGMAS.len() * 3),
            ("Bnorm", 1),
        ];
        let mut arrays: Vec<Array> = names
            .iter()
            .map(|&(name, len)| Array {
                name,
                len,
                values: Vec::new(),
            })
            .collect();
        for (c, (label, q)) in configurations(arm).into_iter().enumerate() {
            let qd: Vec<f64> = (0..n).map(|i| 0.7 * pattern(i, c + 5)).collect();
            let u: Vec<f64> = (0..k).map(|i| 0.05 * pattern(i, c + 9)).collect();
            let t = reference.terms(&q, &qd);
            let rhs = generalized_force(&t, &q, &qd, &u);
            let mut pose = Vec::new();
            for j in 0..arm.segments.len() {
                for &s in &SIGMAS {
                    pose.extend(reference.pose(&q, j, s));
                }
            }
            let bnorm =
                t.b.iter()
                    .map(|r| r.iter().map(|v| v.abs()).sum::<f64>())
                    .fold(0.0, f64::max);
            let values = [
                q.clone(),
                qd,
                u,
                flat(&t.b),
                flat(&t.c),
                t.g.clone(),
                flat(&t.k),
                flat(&t.d),
                flat(&t.a),
                flat(&t.tip_jacobian),
                vec![t.kinetic_energy],
                vec![t.potential_energy],
                rhs,
                pose,
                vec![bnorm],
            ];
            for (a, v) in arrays.iter_mut().zip(values) {
                a.values.push(v);
            }
            labels.push(label);
        }
        Golden { labels, arrays }
    }

    pub fn array(&self, name: &str) -> &Array {
        self.arrays
            .iter()
            .find(|a| a.name == name)
            .unwrap_or_else(|| panic!("no golden array {name}"))
    }

    /// Relative tolerance of the cross-checks at a precision.
    pub fn rtol(&self, precision: Precision) -> String {
        match precision {
            Precision::F64 => "1e-9".into(),
            Precision::F32 => "2e-3".into(),
        }
    }

    /// Absolute floor per checked quantity: the largest magnitude of that quantity
    /// over all configurations (times the relative tolerance in the tests), so that
    /// entries that vanish (C at q = 0) are judged against the quantity's scale.
    pub fn scale(&self, name: &str) -> f64 {
        self.array(name)
            .values
            .iter()
            .flatten()
            .fold(0.0f64, |m, v| m.max(v.abs()))
            .max(f64::MIN_POSITIVE)
    }

    /// Values of one case as literals.
    pub fn literals(&self, name: &str, case: usize) -> Vec<String> {
        let a = self.array(name);
        if a.len == 0 {
            return vec!["0.0".into()];
        }
        a.values[case].iter().map(|v| golden_literal(*v)).collect()
    }

    /// The golden data as C arrays (`static const double g_<name>[cases][len]`).
    pub fn c_data(&self, _precision: Precision) -> String {
        let mut out = String::new();
        let cases = self.labels.len();
        out.push_str(&format!("#define NCASES {cases}\n"));
        let labels: Vec<String> = self.labels.iter().map(|l| format!("\"{l}\"")).collect();
        out.push_str(&format!(
            "static const char *const case_label[NCASES] = {{\n{}\n}};\n",
            super::c::wrap_list(&labels, 4)
        ));
        for a in &self.arrays {
            out.push_str(&format!(
                "static const double g_{}[NCASES][{}] = {{\n",
                a.name,
                a.len.max(1)
            ));
            for c in 0..cases {
                out.push_str(&format!(
                    "    {{\n{}\n    }},\n",
                    super::c::wrap_list(&self.literals(a.name, c), 8)
                ));
            }
            out.push_str("};\n");
        }
        for name in ["B", "C", "G", "K", "D", "A", "J", "T", "V", "pose"] {
            out.push_str(&format!(
                "static const double scale_{name} = {};\n",
                golden_literal(self.scale(name))
            ));
        }
        out
    }
}
