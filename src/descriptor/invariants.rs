//! Rotation invariants of one scale's coefficients `c[n][l² + l + m]`.
//!
//! Sums run in `f64` over the `f32` coefficients and are rounded once at the end.

use crate::so3::coupling::CouplingTable;
use crate::so3::sh::index;

use super::recipe::{Invariants, bispectrum_triples};

/// One term of a bispectrum sum: `value · c[i1] · c[i2] · c[i]` with flat indices.
#[derive(Clone, Copy, Debug)]
struct Term {
    i1: u16,
    i2: u16,
    i: u16,
    value: f64,
}

/// Precomputed invariant plan for one `(N, L)` and a set of invariants.
#[derive(Debug)]
pub(crate) struct InvariantPlan {
    shells: usize,
    degree: usize,
    which: Invariants,
    /// Per bispectrum triple, the range of its terms in `terms`.
    triples: Vec<(usize, usize)>,
    terms: Vec<Term>,
}

impl InvariantPlan {
    pub(crate) fn new(shells: usize, degree: usize, which: Invariants) -> Self {
        let mut triples = Vec::new();
        let mut terms = Vec::new();
        if which.bispectrum {
            // Real coupling coefficients from so3 (sparse per path).
            let table = CouplingTable::new(degree);
            for (l1, l2, l) in bispectrum_triples(degree) {
                let start = terms.len();
                // With l1 + l2 + l odd the invariant triple form is antisymmetric under swapping
                // any two of its three inputs (the symmetry of the 3j symbols), so when two
                // degrees are equal (same shell, same vector) the value is exactly 0: no terms,
                // where rounding would leave noise of order 1e-20.
                let odd = (l1 + l2 + l) % 2 == 1;
                let path = if odd && (l1 == l2 || l2 == l || l1 == l) {
                    &[][..]
                } else {
                    table.path(l1, l2, l)
                };
                for e in path {
                    terms.push(Term {
                        i1: index(l1, e.m1 as i64) as u16,
                        i2: index(l2, e.m2 as i64) as u16,
                        i: index(l, e.m as i64) as u16,
                        value: e.value,
                    });
                }
                triples.push((start, terms.len()));
            }
        }
        InvariantPlan {
            shells,
            degree,
            which,
            triples,
            terms,
        }
    }

    /// Writes the invariants of `c` (`N·(L+1)²` values, layout `[n][l² + l + m]`) to `out`, in the
    /// column order of [`super::Recipe::column_names`] for one scale. `c64` is scratch space.
    pub(crate) fn compute(&self, c: &[f32], c64: &mut Vec<f64>, out: &mut [f32]) {
        let nk = (self.degree + 1) * (self.degree + 1);
        c64.clear();
        c64.extend(c[..self.shells * nk].iter().map(|&v| v as f64));
        let c = &c64[..];
        let mut k = 0;
        if self.which.norms {
            for l in 0..=self.degree {
                for n in 0..self.shells {
                    let a = &c[n * nk + l * l..n * nk + (l + 1) * (l + 1)];
                    out[k] = a.iter().map(|v| v * v).sum::<f64>().sqrt() as f32;
                    k += 1;
                }
            }
        }
        if self.which.power_spectrum {
            // Each value is the sum over m in ascending order, starting from the standard
            // library's empty sum (as `Iterator::sum` does), so the bytes do not depend on the
            // blocking: four shells n' are summed side by side (independent chains).
            let zero: f64 = std::iter::empty::<f64>().sum();
            for l in 0..=self.degree {
                let (lo, hi) = (l * l, (l + 1) * (l + 1));
                for n in 0..self.shells {
                    let a = &c[n * nk + lo..n * nk + hi];
                    let mut n2 = n;
                    while n2 + 4 <= self.shells {
                        let mut acc = [zero; 4];
                        for (m, &x) in a.iter().enumerate() {
                            for (j, v) in acc.iter_mut().enumerate() {
                                *v += x * c[(n2 + j) * nk + lo + m];
                            }
                        }
                        for v in acc {
                            out[k] = v as f32;
                            k += 1;
                        }
                        n2 += 4;
                    }
                    for n2 in n2..self.shells {
                        let b = &c[n2 * nk + lo..n2 * nk + hi];
                        out[k] = a.iter().zip(b).map(|(x, y)| x * y).sum::<f64>() as f32;
                        k += 1;
                    }
                }
            }
        }
        if self.which.bispectrum {
            for n in 0..self.shells {
                let cn = &c[n * nk..(n + 1) * nk];
                for &(a, b) in &self.triples {
                    let s: f64 = self.terms[a..b]
                        .iter()
                        .map(|t| t.value * cn[t.i1 as usize] * cn[t.i2 as usize] * cn[t.i as usize])
                        .sum();
                    out[k] = s as f32;
                    k += 1;
                }
            }
        }
        debug_assert_eq!(k, out.len());
    }
}
