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
        let ns = self.shells;
        c64.clear();
        c64.extend(c[..ns * nk].iter().map(|&v| v as f64));
        let mut k = 0;
        if self.which.norms || self.which.power_spectrum {
            // Per degree, the Gram matrix `G[n][n'] = Σ_m c_nlm c_n'lm` (m ascending, as a plain
            // sum): norms are √G[n][n], the power spectrum its upper triangle.
            c64.resize(ns * nk + ns * ns + ns, 0.0);
            let (c, rest) = c64.split_at_mut(ns * nk);
            let (gram, col) = rest.split_at_mut(ns * ns);
            let np = ns * (ns + 1) / 2;
            let ps_at = if self.which.norms {
                ns * (self.degree + 1)
            } else {
                0
            };
            for l in 0..=self.degree {
                for m in l * l..(l + 1) * (l + 1) {
                    for (n, v) in col.iter_mut().enumerate() {
                        *v = c[n * nk + m];
                    }
                    let first = m == l * l;
                    for (row, &x) in gram.chunks_exact_mut(ns).zip(col.iter()) {
                        if first {
                            for (g, &y) in row.iter_mut().zip(col.iter()) {
                                *g = x * y;
                            }
                        } else {
                            for (g, &y) in row.iter_mut().zip(col.iter()) {
                                *g += x * y;
                            }
                        }
                    }
                }
                if self.which.norms {
                    for n in 0..ns {
                        out[l * ns + n] = gram[n * ns + n].sqrt() as f32;
                    }
                }
                if self.which.power_spectrum {
                    let mut at = ps_at + l * np;
                    for n in 0..ns {
                        for &g in &gram[n * ns + n..(n + 1) * ns] {
                            out[at] = g as f32;
                            at += 1;
                        }
                    }
                }
            }
            k = ps_at
                + if self.which.power_spectrum {
                    (self.degree + 1) * np
                } else {
                    0
                };
        }
        let c = &c64[..ns * nk];
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
