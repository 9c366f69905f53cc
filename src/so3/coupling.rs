//! Coupling (Clebsch–Gordan) coefficients: complex ones by Racah's formula and their real-basis
//! form for the real harmonics of [`super::sh`].
//!
//! **Complex**: [`complex_cg`] gives `⟨j₁ m₁; j₂ m₂ | j m⟩` in the Condon–Shortley convention
//! (the one of the Particle Data Group table), from Racah's closed sum evaluated with
//! log-factorials in `f64` (relative accuracy about 1e-13 for degrees up to 20).
//!
//! **Real**: with `T` the unitary change of basis from complex (Condon–Shortley) harmonics to
//! ours (`Y = T Y_c`; rows given in [`super::wigner`]), the real coupling of degree-`l₁` and
//! degree-`l₂` coefficient vectors into degree `l` is
//! `C_R(l₁m₁, l₂m₂ | l m) = Σ T^l_{mμ} ⟨l₁μ₁; l₂μ₂ | lμ⟩ conj(T^{l₁}_{m₁μ₁}) conj(T^{l₂}_{m₂μ₂})`.
//! It intertwines the real representations, `C_R (D a ⊗ D b) = D C_R (a ⊗ b)`. With our `T`
//! this number is real when `l₁ + l₂ + l` is even and purely imaginary when it is odd; in the odd
//! case we store its imaginary part (i.e. multiply the whole `(l₁, l₂, l)` block by `−i`, a
//! constant factor, which keeps the map equivariant and makes it real). The odd blocks are
//! antisymmetric under swapping the two inputs when `l₁ = l₂`, so they vanish for `a = b`.
//!
//! Nonzero real entries need `|m| ∈ {|m₁| + |m₂|, ||m₁| − |m₂||}`; [`CouplingTable`] stores only
//! those, per `(l₁, l₂, l)` path.

use std::collections::HashMap;
use std::sync::{Arc, Mutex, OnceLock};

const LN_FACT_TABLE: usize = 512;

/// `ln(n!)` for `n ≥ 0` (tabulated up to 511, summed beyond; `-inf`-free: negative `n` gives 0).
pub fn ln_factorial(n: i64) -> f64 {
    static T: OnceLock<Vec<f64>> = OnceLock::new();
    let t = T.get_or_init(|| {
        let mut v = vec![0.0f64; LN_FACT_TABLE];
        for k in 1..LN_FACT_TABLE {
            v[k] = v[k - 1] + (k as f64).ln();
        }
        v
    });
    if n <= 0 {
        0.0
    } else if (n as usize) < LN_FACT_TABLE {
        t[n as usize]
    } else {
        t[LN_FACT_TABLE - 1]
            + (LN_FACT_TABLE as i64..=n)
                .map(|k| (k as f64).ln())
                .sum::<f64>()
    }
}

/// Complex Clebsch–Gordan coefficient `⟨j1 m1; j2 m2 | j m⟩` for integer angular momenta
/// (Condon–Shortley phase convention), by Racah's formula. Zero when a selection rule fails
/// (`m ≠ m1 + m2`, triangle inequality, `|m_i| > j_i`).
pub fn complex_cg(j1: usize, m1: i64, j2: usize, m2: i64, j: usize, m: i64) -> f64 {
    let (j1, j2, j) = (j1 as i64, j2 as i64, j as i64);
    if m != m1 + m2 || m1.abs() > j1 || m2.abs() > j2 || m.abs() > j {
        return 0.0;
    }
    if j < (j1 - j2).abs() || j > j1 + j2 {
        return 0.0;
    }
    let lf = ln_factorial;
    let ln_pre = 0.5
        * (((2 * j + 1) as f64).ln() + lf(j1 + j2 - j) + lf(j1 - j2 + j) + lf(-j1 + j2 + j)
            - lf(j1 + j2 + j + 1)
            + lf(j + m)
            + lf(j - m)
            + lf(j1 - m1)
            + lf(j1 + m1)
            + lf(j2 - m2)
            + lf(j2 + m2));
    let kmin = 0.max(j2 - j - m1).max(j1 - j + m2);
    let kmax = (j1 + j2 - j).min(j1 - m1).min(j2 + m2);
    let mut sum = 0.0;
    for k in kmin..=kmax {
        let ln_den = lf(k)
            + lf(j1 + j2 - j - k)
            + lf(j1 - m1 - k)
            + lf(j2 + m2 - k)
            + lf(j - j2 + m1 + k)
            + lf(j - j1 - m2 + k);
        let t = (ln_pre - ln_den).exp();
        sum += if k % 2 == 0 { t } else { -t };
    }
    sum
}

/// Entry `(m, μ)` of the unitary change of basis `T` (complex → real harmonics), as `(re, im)`.
fn t_entry(m: i64, mu: i64) -> (f64, f64) {
    let h = std::f64::consts::FRAC_1_SQRT_2;
    let sgn = |k: i64| if k % 2 == 0 { 1.0 } else { -1.0 };
    if m == 0 {
        if mu == 0 { (1.0, 0.0) } else { (0.0, 0.0) }
    } else if m > 0 {
        if mu == m {
            (sgn(m) * h, 0.0)
        } else if mu == -m {
            (h, 0.0)
        } else {
            (0.0, 0.0)
        }
    } else {
        let k = -m;
        if mu == k {
            (0.0, -sgn(k) * h)
        } else if mu == -k {
            (0.0, h)
        } else {
            (0.0, 0.0)
        }
    }
}

fn cmul(a: (f64, f64), b: (f64, f64)) -> (f64, f64) {
    (a.0 * b.0 - a.1 * b.1, a.0 * b.1 + a.1 * b.0)
}

fn conj(a: (f64, f64)) -> (f64, f64) {
    (a.0, -a.1)
}

/// Real-basis coupling coefficient `C_R(l1 m1, l2 m2 | l m)` (see the module docs for the
/// convention, including the `−i` factor applied when `l1 + l2 + l` is odd).
pub fn real_cg(l1: usize, m1: i64, l2: usize, m2: i64, l: usize, m: i64) -> f64 {
    let orders = |m: i64| -> Vec<i64> {
        if m == 0 {
            vec![0]
        } else {
            vec![m.abs(), -m.abs()]
        }
    };
    let mut acc = (0.0, 0.0);
    for mu1 in orders(m1) {
        for mu2 in orders(m2) {
            let mu = mu1 + mu2;
            let cg = complex_cg(l1, mu1, l2, mu2, l, mu);
            if cg == 0.0 {
                continue;
            }
            let t = cmul(
                cmul(t_entry(m, mu), conj(t_entry(m1, mu1))),
                conj(t_entry(m2, mu2)),
            );
            acc.0 += t.0 * cg;
            acc.1 += t.1 * cg;
        }
    }
    if (l1 + l2 + l).is_multiple_of(2) {
        acc.0
    } else {
        acc.1
    }
}

/// One nonzero real coupling coefficient of a path `(l1, l2, l)`.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct CouplingEntry {
    /// Order in the first input (`−l1..=l1`).
    pub m1: i32,
    /// Order in the second input.
    pub m2: i32,
    /// Order in the output.
    pub m: i32,
    /// `C_R(l1 m1, l2 m2 | l m)`.
    pub value: f64,
}

/// Sparse real coupling coefficients for all paths `l1, l2, l ≤ l_max` with
/// `|l1 − l2| ≤ l ≤ l1 + l2`.
#[derive(Debug)]
pub struct CouplingTable {
    l_max: usize,
    paths: Vec<Vec<CouplingEntry>>,
}

impl CouplingTable {
    /// The table for degrees up to `l_max`, built once per `l_max` and shared (a global cache);
    /// later calls with the same `l_max` return the same `Arc`.
    #[allow(clippy::new_ret_no_self)]
    pub fn new(l_max: usize) -> Arc<CouplingTable> {
        static CACHE: OnceLock<Mutex<HashMap<usize, Arc<CouplingTable>>>> = OnceLock::new();
        let cache = CACHE.get_or_init(|| Mutex::new(HashMap::new()));
        let mut map = cache.lock().unwrap_or_else(|e| e.into_inner());
        map.entry(l_max)
            .or_insert_with(|| Arc::new(CouplingTable::build(l_max)))
            .clone()
    }

    /// Builds a table without the cache.
    pub fn build(l_max: usize) -> CouplingTable {
        let n = l_max + 1;
        let mut paths = vec![Vec::new(); n * n * n];
        for l1 in 0..=l_max {
            for l2 in 0..=l_max {
                for l in l1.abs_diff(l2)..=(l1 + l2).min(l_max) {
                    paths[(l1 * n + l2) * n + l] = build_path(l1, l2, l);
                }
            }
        }
        CouplingTable { l_max, paths }
    }

    /// Highest degree covered.
    pub fn l_max(&self) -> usize {
        self.l_max
    }

    /// Nonzero coefficients of the path `(l1, l2, l)`; empty when the path is not allowed or a
    /// degree exceeds `l_max`.
    pub fn path(&self, l1: usize, l2: usize, l: usize) -> &[CouplingEntry] {
        let n = self.l_max + 1;
        if l1 > self.l_max || l2 > self.l_max || l > self.l_max {
            return &[];
        }
        &self.paths[(l1 * n + l2) * n + l]
    }
}

/// All nonzero `C_R` of one path, accumulated from the complex coefficients.
fn build_path(l1: usize, l2: usize, l: usize) -> Vec<CouplingEntry> {
    let (i1, i2, il) = (l1 as i64, l2 as i64, l as i64);
    let n1 = 2 * l1 + 1;
    let n2 = 2 * l2 + 1;
    let n = 2 * l + 1;
    let mut acc = vec![(0.0f64, 0.0f64); n1 * n2 * n];
    for mu1 in -i1..=i1 {
        for mu2 in -i2..=i2 {
            let mu = mu1 + mu2;
            if mu.abs() > il {
                continue;
            }
            let cg = complex_cg(l1, mu1, l2, mu2, l, mu);
            if cg == 0.0 {
                continue;
            }
            // real orders reached from these complex orders
            let m1s: &[i64] = if mu1 == 0 {
                &[0]
            } else {
                &[mu1.abs(), -mu1.abs()]
            };
            let m2s: &[i64] = if mu2 == 0 {
                &[0]
            } else {
                &[mu2.abs(), -mu2.abs()]
            };
            let ms: &[i64] = if mu == 0 {
                &[0]
            } else {
                &[mu.abs(), -mu.abs()]
            };
            for &m1 in m1s {
                for &m2 in m2s {
                    for &m in ms {
                        let t = cmul(
                            cmul(t_entry(m, mu), conj(t_entry(m1, mu1))),
                            conj(t_entry(m2, mu2)),
                        );
                        let k = (((m1 + i1) as usize) * n2 + (m2 + i2) as usize) * n
                            + (m + il) as usize;
                        acc[k].0 += t.0 * cg;
                        acc[k].1 += t.1 * cg;
                    }
                }
            }
        }
    }
    let odd = (l1 + l2 + l) % 2 == 1;
    let mut out = Vec::new();
    for m1 in -i1..=i1 {
        for m2 in -i2..=i2 {
            for m in -il..=il {
                let k = (((m1 + i1) as usize) * n2 + (m2 + i2) as usize) * n + (m + il) as usize;
                let v = if odd { acc[k].1 } else { acc[k].0 };
                if v.abs() > 1e-14 {
                    out.push(CouplingEntry {
                        m1: m1 as i32,
                        m2: m2 as i32,
                        m: m as i32,
                        value: v,
                    });
                }
            }
        }
    }
    out
}

/// Real coupling of `a` (degree `l1`, `2l1+1` values, order `m = −l1..=l1`) and `b` (degree
/// `l2`) into degree `l`: `out[m] = Σ C_R(l1 m1, l2 m2 | l m) a[m1] b[m2]`, overwriting
/// `out[..2l+1]`. The degrees of the inputs are read from their lengths. Equivariant:
/// `tensor_product(D a, D b) = D tensor_product(a, b)`. A path outside the triangle rule gives
/// zeros.
///
/// # Panics
/// If an input length is even, a degree exceeds the table's `l_max`, or `out` is shorter than
/// `2l + 1`.
pub fn tensor_product(table: &CouplingTable, a: &[f64], b: &[f64], l: usize, out: &mut [f64]) {
    assert!(
        a.len() % 2 == 1 && b.len() % 2 == 1,
        "tensor_product: inputs need 2l+1 values"
    );
    let (l1, l2) = ((a.len() - 1) / 2, (b.len() - 1) / 2);
    assert!(
        l1.max(l2).max(l) <= table.l_max(),
        "tensor_product: degrees ({l1}, {l2}, {l}) exceed the table's l_max {}",
        table.l_max()
    );
    let out = &mut out[..2 * l + 1];
    out.fill(0.0);
    let (i1, i2, il) = (l1 as i32, l2 as i32, l as i32);
    for e in table.path(l1, l2, l) {
        out[(e.m + il) as usize] += e.value * a[(e.m1 + i1) as usize] * b[(e.m2 + i2) as usize];
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn real_cg_matches_table() {
        let t = CouplingTable::build(3);
        for l1 in 0..=3usize {
            for l2 in 0..=3usize {
                for l in l1.abs_diff(l2)..=(l1 + l2).min(3) {
                    for e in t.path(l1, l2, l) {
                        let v = real_cg(l1, e.m1 as i64, l2, e.m2 as i64, l, e.m as i64);
                        assert!((v - e.value).abs() < 1e-13, "{l1} {l2} {l} {e:?} {v}");
                    }
                }
            }
        }
    }

    /// For l1 = l2 and odd l, the coupling is antisymmetric: a ⊗ a vanishes, a ⊗ b = −b ⊗ a
    /// (CG exchange symmetry (−1)^{l1+l2−l}).
    #[test]
    fn odd_paths_are_antisymmetric() {
        let t = CouplingTable::build(4);
        let mut rng = crate::so3::rng::SplitMix64::new(6);
        for l1 in 1..=4usize {
            for l in (1..=4usize).step_by(2) {
                if l > 2 * l1 {
                    continue;
                }
                let a: Vec<f64> = (0..2 * l1 + 1).map(|_| rng.normal()).collect();
                let b: Vec<f64> = (0..2 * l1 + 1).map(|_| rng.normal()).collect();
                let (mut p, mut q, mut z) = (
                    vec![0.0; 2 * l + 1],
                    vec![0.0; 2 * l + 1],
                    vec![0.0; 2 * l + 1],
                );
                tensor_product(&t, &a, &b, l, &mut p);
                tensor_product(&t, &b, &a, l, &mut q);
                tensor_product(&t, &a, &a, l, &mut z);
                assert!(
                    p.iter().any(|v| v.abs() > 1e-6),
                    "path ({l1},{l1},{l}) is zero"
                );
                for i in 0..p.len() {
                    assert!((p[i] + q[i]).abs() < 1e-13 && z[i].abs() < 1e-13);
                }
            }
        }
    }

    #[test]
    fn cache_shares_tables() {
        let a = CouplingTable::new(2);
        let b = CouplingTable::new(2);
        assert!(Arc::ptr_eq(&a, &b));
    }
}
