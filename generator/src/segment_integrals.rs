//! The exact local integrals of one segment, reduced to Legendre moments.
//!
//! In its own base frame a segment's backbone is `r(σ) = ∫_0^σ V(τ) dτ` with a
//! *field* `V(τ) = Σ c · q^α · τ^s · e^{iaτ}` (the truncated `L e^{iφ}`, or one of its
//! partial derivatives). Everything the dynamics need from a segment is one of
//!
//! * a single integral `∫_0^1 P(σ) ∫_0^σ V dτ dσ = ∫_0^1 V(τ) Ρ(τ) dτ`, with
//!   `Ρ(τ) = ∫_τ^1 P`, and
//! * a double integral `∫_0^1 P(σ) conj(∫_0^σ V₁) (∫_0^σ V₂) dσ`, which the
//!   substitution `u = τ' − τ` on each half of the square turns into
//!   `∫_0^1 Q_A(u) e^{iau} du + ∫_0^1 Q_B(u) e^{−iau} du` with polynomials `Q_A`, `Q_B`.
//!
//! Both are sums over the field's powers `s, t` of polynomial coefficients times
//! *kernels* that depend on `a` alone: `S_s = ∫_0^1 τ^s Ρ(τ) e^{iaτ} dτ` and
//! `D_st = ∫_0^1 P(σ) conj(I_s(σ)) I_t(σ) dσ` with `I_s(σ) = ∫_0^σ τ^s e^{iaτ} dτ`. Each
//! kernel is an exact rational combination `Σ c_n ν_n(a)` of shifted-Legendre moments:
//! no powers of `1/a`, no special case at the straight segment.

use crate::exact::{int, tail_integral, Tables, Q};
use crate::local_form::{mono_exp, mono_mul, mono_unit, Mono, MONO_ONE};
use num_traits::{One, Zero};
use std::collections::{BTreeMap, HashMap};

/// One term `(re + i·im) · q^mono · τ^s · e^{iaτ}` of a field.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct FieldTerm {
    pub mono: Mono,
    pub s: u32,
    pub re: Q,
    pub im: Q,
}

/// A local field, terms merged by `(mono, s)`.
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub struct Field {
    pub terms: Vec<FieldTerm>,
}

impl Field {
    fn from_map(map: BTreeMap<(Mono, u32), (Q, Q)>) -> Field {
        let terms = map
            .into_iter()
            .filter(|(_, (re, im))| !(re.is_zero() && im.is_zero()))
            .map(|((mono, s), (re, im))| FieldTerm { mono, s, re, im })
            .collect();
        Field { terms }
    }

    /// `L · e^{iaτ} · Σ_{k=0..N} (iδ(τ))^k / k!` with `δ(τ) = L Σ_{i≥1} q_i τ^{i+1}/(i+1)`:
    /// the truncated backbone tangent of MODEL.md, times the segment length.
    pub fn backbone(length: &Q, degree: usize, order: usize) -> Field {
        // δ as (mono, power) → coefficient
        let delta: Vec<(Mono, u32, Q)> = (1..=degree)
            .map(|i| (mono_unit(i), (i + 1) as u32, length / int(i as i64 + 1)))
            .collect();
        let mut power: BTreeMap<(Mono, u32), Q> = BTreeMap::new();
        power.insert((MONO_ONE, 0), Q::one());
        let mut out: BTreeMap<(Mono, u32), (Q, Q)> = BTreeMap::new();
        let mut k_fact = Q::one();
        for k in 0..=order {
            if k > 0 {
                k_fact *= int(k as i64);
                let mut next: BTreeMap<(Mono, u32), Q> = BTreeMap::new();
                for ((m, s), c) in &power {
                    for (dm, ds, dc) in &delta {
                        let e = next
                            .entry((mono_mul(*m, *dm), s + ds))
                            .or_insert_with(Q::zero);
                        *e += c * dc;
                    }
                }
                power = next;
            }
            // i^k / k!, times L
            let scale = length / &k_fact;
            for (key, c) in &power {
                let v = c * &scale;
                let e = out.entry(*key).or_insert_with(|| (Q::zero(), Q::zero()));
                match k % 4 {
                    0 => e.0 += v,
                    1 => e.1 += v,
                    2 => e.0 -= v,
                    _ => e.1 -= v,
                }
            }
        }
        Field::from_map(out)
    }

    /// `∂V/∂q_{j,0}`: the exponent `e^{iaτ}` gives `i L τ V`.
    pub fn derivative_base(&self, length: &Q) -> Field {
        let terms = self
            .terms
            .iter()
            .map(|t| FieldTerm {
                mono: t.mono,
                s: t.s + 1,
                re: -(&t.im * length),
                im: &t.re * length,
            })
            .collect();
        Field { terms }
    }

    /// `∂V/∂q_{j,i}` for `i ≥ 1`: differentiate the monomials.
    pub fn derivative_coord(&self, i: usize) -> Field {
        let mut map: BTreeMap<(Mono, u32), (Q, Q)> = BTreeMap::new();
        for t in &self.terms {
            let e = mono_exp(t.mono, i);
            if e == 0 {
                continue;
            }
            let k = int(i64::from(e));
            let entry = map
                .entry((t.mono - mono_unit(i), t.s))
                .or_insert_with(|| (Q::zero(), Q::zero()));
            entry.0 += &t.re * &k;
            entry.1 += &t.im * &k;
        }
        Field::from_map(map)
    }

    /// Largest power of τ in the field.
    pub fn max_power(&self) -> u32 {
        self.terms.iter().map(|t| t.s).max().unwrap_or(0)
    }
}

/// Reduces a segment's integrals to Legendre moments, caching the exact kernels.
///
/// A weight is a polynomial in σ (monomial coefficients); kernels are cached per
/// weight and power, because every quantity of a segment reuses the same few.
pub struct Reducer {
    tables: Tables,
    weights: Vec<Vec<Q>>,
    single_cache: HashMap<(usize, u32), Vec<Q>>,
    double_cache: HashMap<(usize, u32, u32), DoubleKernel>,
}

/// A double kernel's coefficients over the moments: its real and imaginary rows.
pub type DoubleKernel = (Vec<Q>, Vec<Q>);

/// A weight registered with a [`Reducer`].
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub struct WeightId(usize);

impl WeightId {
    /// Its position in the order of registration ([`Reducer::tails`]).
    pub fn index(self) -> usize {
        self.0
    }
}

impl Default for Reducer {
    fn default() -> Self {
        Self::new()
    }
}

impl Reducer {
    pub fn new() -> Self {
        Reducer {
            tables: Tables::new(),
            weights: Vec::new(),
            single_cache: HashMap::new(),
            double_cache: HashMap::new(),
        }
    }

    pub fn tables(&mut self) -> &mut Tables {
        &mut self.tables
    }

    /// Registers the weight `P(σ)`; stores its tail integral `Ρ`.
    pub fn weight(&mut self, p: &[Q]) -> WeightId {
        self.weight_of_tail(&tail_integral(p))
    }

    /// Registers a weight by its tail integral `Ρ` directly (a tail of
    /// [`Reducer::tails`], read back by the emitters).
    pub fn weight_of_tail(&mut self, tail: &[Q]) -> WeightId {
        if let Some(i) = self.weights.iter().position(|w| w == tail) {
            return WeightId(i);
        }
        self.weights.push(tail.to_vec());
        WeightId(self.weights.len() - 1)
    }

    /// The tail integrals `Ρ` of the weights registered so far, by [`WeightId::index`].
    pub fn tails(&self) -> &[Vec<Q>] {
        &self.weights
    }

    /// Legendre coefficients of `F_st = ∫_0^1 Q_A^{st}(u) e^{iau} du`, one half of
    /// `D_st = F_st + conj(F_ts)` (see [`crate::kernel_matrix`]).
    pub fn half_kernel(&mut self, w: WeightId, s: u32, t: u32) -> Vec<Q> {
        let qa = self.qa_poly(w, s, t);
        self.tables.to_legendre(&qa)
    }

    /// `m_k = ∫_0^1 τ^k Ρ(τ) dτ`.
    pub fn tail_moment(&self, w: WeightId, k: u32) -> Q {
        self.weights[w.0]
            .iter()
            .enumerate()
            .map(|(c, rc)| rc / int(k as i64 + c as i64 + 1))
            .fold(Q::zero(), |a, b| a + b)
    }

    /// The weight that picks the segment's end: `Ρ ≡ 1`, so the single integral is
    /// `∫_0^1 V` (the field's integral up to σ = 1).
    pub fn end_point(&mut self) -> WeightId {
        self.weight_of_tail(&[Q::one()])
    }

    /// Legendre coefficients of `τ^s Ρ(τ)`.
    pub fn single_kernel(&mut self, w: WeightId, s: u32) -> Vec<Q> {
        if let Some(k) = self.single_cache.get(&(w.0, s)) {
            return k.clone();
        }
        let tail = &self.weights[w.0];
        let mut poly = vec![Q::zero(); s as usize + tail.len()];
        for (c, rc) in tail.iter().enumerate() {
            poly[s as usize + c] += rc;
        }
        let k = self.tables.to_legendre(&poly);
        self.single_cache.insert((w.0, s), k.clone());
        k
    }

    /// Monomial coefficients of `Q_A^{st}(u) = ∫_u^1 (v−u)^s v^t Ρ(v) dv`.
    fn qa_poly(&mut self, w: WeightId, s: u32, t: u32) -> Vec<Q> {
        let tail = self.weights[w.0].clone();
        let (s, t) = (s as usize, t as usize);
        let mut poly = vec![Q::zero(); s + t + tail.len() + 2];
        for i in 0..=s {
            // C(s,i) (−u)^{s−i} ∫_u^1 v^{i+t} Ρ(v) dv
            let mut b = Q::from_integer(self.tables.binomial(s, i));
            if (s - i) % 2 == 1 {
                b = -b;
            }
            for (c, rc) in tail.iter().enumerate() {
                if rc.is_zero() {
                    continue;
                }
                let e = i + t + c + 1;
                let v = &b * rc / int(e as i64);
                poly[s - i] += &v;
                poly[s - i + e] -= v;
            }
        }
        poly
    }

    /// `(Σ, Δ)` with `Re D = Σ_n Σ_n·Re ν_n`, `Im D = Σ_n Δ_n·Im ν_n` where
    /// `D = ∫_0^1 P(σ) conj(I_s(σ)) I_t(σ) dσ` and `I_s(σ) = ∫_0^σ τ^s e^{iaτ} dτ`.
    pub fn double_kernel(&mut self, w: WeightId, s: u32, t: u32) -> DoubleKernel {
        if let Some(k) = self.double_cache.get(&(w.0, s, t)) {
            return k.clone();
        }
        let qa = self.qa_poly(w, s, t);
        let qb = self.qa_poly(w, t, s);
        let a = self.tables.to_legendre(&qa);
        let b = self.tables.to_legendre(&qb);
        let len = a.len().max(b.len());
        let get = |v: &Vec<Q>, n: usize| v.get(n).cloned().unwrap_or_else(Q::zero);
        let sum: Vec<Q> = (0..len).map(|n| get(&a, n) + get(&b, n)).collect();
        let diff: Vec<Q> = (0..len).map(|n| get(&a, n) - get(&b, n)).collect();
        self.double_cache
            .insert((w.0, s, t), (sum.clone(), diff.clone()));
        // D_ts = conj(D_st)
        let neg: Vec<Q> = diff.iter().map(|d| -d).collect();
        self.double_cache.insert((w.0, t, s), (sum.clone(), neg));
        (sum, diff)
    }
}

/// The field's terms grouped by power of τ: `Σ_s τ^s C_s(q)`, for pose queries.
pub fn by_power(field: &Field) -> BTreeMap<u32, Vec<&FieldTerm>> {
    let mut map: BTreeMap<u32, Vec<&FieldTerm>> = BTreeMap::new();
    for t in &field.terms {
        map.entry(t.s).or_default().push(t);
    }
    map
}
