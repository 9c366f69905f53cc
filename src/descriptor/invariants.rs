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
    /// [`spectrum_blocks`] of the shells.
    blocks: Vec<(usize, usize)>,
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
            blocks: spectrum_blocks(shells),
            shells,
            degree,
            which,
            triples,
            terms,
        }
    }

    /// Writes the invariants of `c` (`N·(L+1)²` values, layout `[n][l² + l + m]`) to `out`, in the
    /// column order of [`super::Recipe::column_names`] for one scale. `c64` is scratch space.
    ///
    /// Every norm and power-spectrum value is one sum over `m` in ascending order of f64
    /// products, starting from the standard library's empty sum (as `Iterator::sum` does), then
    /// rounded once to f32 (the norm after its square root). The sums run four shells `n'` side
    /// by side over a copy of the coefficients with the shells innermost, in vector code that
    /// changes no single sum (the AVX2 build fuses each product into its sum, exact because
    /// products of f32 values are exact in f64, see [`super::avx2::block_sums`]); a norm is
    /// the square root of the power spectrum's `(n, n)` sum, the same operations.
    pub(crate) fn compute(&self, c: &[f32], c64: &mut Vec<f64>, out: &mut [f32]) {
        let nk = (self.degree + 1) * (self.degree + 1);
        let mut k = 0;
        if self.which.norms || self.which.power_spectrum {
            k = self.spectrum(c, c64, out);
        }
        if self.which.bispectrum {
            c64.clear();
            c64.extend(c[..self.shells * nk].iter().map(|&v| v as f64));
            let c = &c64[..];
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

    /// Norms and power spectrum of `c` into `out` from column 0; returns the number written.
    /// `t` is scratch space.
    fn spectrum(&self, c: &[f32], t: &mut Vec<f64>, out: &mut [f32]) -> usize {
        #[cfg(target_arch = "x86_64")]
        if std::arch::is_x86_feature_detected!("avx2") {
            // SAFETY: the processor reported AVX2.
            return unsafe { self.spectrum_avx2(c, t, out) };
        }
        self.spectrum_impl(c, t, out, self.shape(), block_sums)
    }

    #[cfg(target_arch = "x86_64")]
    #[target_feature(enable = "avx2,fma")]
    fn spectrum_avx2(&self, c: &[f32], t: &mut Vec<f64>, out: &mut [f32]) -> usize {
        // The closure inherits this function's AVX2 and FMA.
        let sums = |rows: &[f64], stride, group: &[(usize, usize); GROUP], zero| {
            super::avx2::block_sums(rows, stride, group, zero)
        };
        // The default recipe's shape with constant bounds, so that the compiler unrolls the
        // loops and keeps the block offsets as constants (same operations, same bits).
        if (self.shells, self.degree) == (6, 4) {
            if self.which.norms && self.which.power_spectrum {
                // The same sums with everything between them in registers.
                if t.len() != 25 * 10 + 30 {
                    t.clear();
                    t.resize(25 * 10 + 30, 0.0);
                }
                let zero: f64 = std::iter::empty::<f64>().sum();
                super::avx2::spectrum_6_4(c, t, zero, out);
                return 135;
            }
            return self.spectrum_impl(c, t, out, (6, 4, &BLOCKS_6), sums);
        }
        self.spectrum_impl(c, t, out, self.shape(), sums)
    }

    /// Shells, degree and [`spectrum_blocks`] of the plan.
    fn shape(&self) -> (usize, usize, &[(usize, usize)]) {
        (self.shells, self.degree, &self.blocks)
    }

    /// `sums(rows, stride, group, zero)` gives the [`block_sums`] of one group of blocks;
    /// `shape` is [`InvariantPlan::shape`] (or the same values as constants).
    #[inline(always)]
    fn spectrum_impl(
        &self,
        c: &[f32],
        t: &mut Vec<f64>,
        out: &mut [f32],
        (ns, degree, blocks): (usize, usize, &[(usize, usize)]),
        sums: impl Fn(&[f64], usize, &[(usize, usize); GROUP], f64) -> [[f64; 4]; GROUP],
    ) -> usize {
        let nk = (degree + 1) * (degree + 1);
        // Shells innermost, padded with zeros so that a block of four starting at any shell
        // (or at `N`, the padding blocks) stays inside the row: t[k·stride + n] = c[n·K + k].
        // The padding is zeroed when the buffer is made and never
        // written after (it only feeds sums that are not kept). The `(L+1)·N` values after
        // the rows keep the `(n, n)` sums whose square roots are the norms.
        let stride = ns + 4;
        let n_diag = (degree + 1) * ns;
        if t.len() != nk * stride + n_diag {
            t.clear();
            t.resize(nk * stride + n_diag, 0.0);
        }
        let (t, diag) = t.split_at_mut(nk * stride);
        for (n, cn) in c[..ns * nk].chunks_exact(nk).enumerate() {
            for (kk, &v) in cn.iter().enumerate() {
                t[kk * stride + n] = v as f64;
            }
        }
        let zero: f64 = std::iter::empty::<f64>().sum();
        // Norms first ((L+1)·N columns), then the power spectrum in the order of the blocks.
        let n_norms = if self.which.norms {
            (degree + 1) * ns
        } else {
            0
        };
        let (norms, ps) = out.split_at_mut(n_norms);
        let mut k = 0;
        // Σ_m c[n][lm] c[n'][lm] for n' ≥ n: eight blocks of four n' at a time, each an
        // independent chain over m (the blocks of `spectrum_blocks`, in column order).
        for l in 0..=degree {
            let rows = &t[l * l * stride..(l + 1) * (l + 1) * stride];
            for group in blocks.chunks_exact(GROUP) {
                let group: &[(usize, usize); GROUP] = group.try_into().expect("a group");
                let acc = sums(rows, stride, group, zero);
                for (a, &(n, n2)) in acc.iter().zip(group) {
                    if n2 == n {
                        diag[l * ns + n] = a[0];
                    }
                    if self.which.power_spectrum {
                        for &v in a.iter().take(ns.saturating_sub(n2)) {
                            ps[k] = v as f32;
                            k += 1;
                        }
                    }
                }
            }
        }
        // The square roots side by side (each correctly rounded, as one at a time).
        for (o, &d) in norms.iter_mut().zip(diag.iter()) {
            *o = d.sqrt() as f32;
        }
        n_norms + k
    }
}

/// Blocks of the power-spectrum sums computed side by side.
pub(crate) const GROUP: usize = 8;

/// [`spectrum_blocks`]`(6)`, the default recipe's six shells, as a constant.
const BLOCKS_6: [(usize, usize); 8] = [
    (0, 0),
    (0, 4),
    (1, 1),
    (1, 5),
    (2, 2),
    (3, 3),
    (4, 4),
    (5, 5),
];

/// The sums of one group of blocks over `rows` (rows of `stride` f64 values, shells
/// innermost): block `(n, n')` gives `Σ_rows row[n] · row[n' + j]` for `j < 4`, each sum from
/// `zero` in row order (`acc + x·v`, a product then a sum, as everywhere here).
fn block_sums(
    rows: &[f64],
    stride: usize,
    group: &[(usize, usize); GROUP],
    zero: f64,
) -> [[f64; 4]; GROUP] {
    let mut acc = [[zero; 4]; GROUP];
    for row in rows.chunks_exact(stride) {
        for (a, &(n, n2)) in acc.iter_mut().zip(group) {
            let x = row[n];
            let v: &[f64; 4] = row[n2..n2 + 4].try_into().expect("four shells");
            for j in 0..4 {
                a[j] += x * v[j];
            }
        }
    }
    acc
}

/// The blocks `(n, n')` of four sums `(n, n'..n' + 4)` covering every pair `n ≤ n'` of `shells`
/// shells (`n'` from `n` in steps of four), padded to a multiple of [`GROUP`] with blocks that
/// write nothing (`n' = shells`).
fn spectrum_blocks(shells: usize) -> Vec<(usize, usize)> {
    let mut v: Vec<(usize, usize)> = (0..shells)
        .flat_map(|n| (n..shells).step_by(4).map(move |n2| (n, n2)))
        .collect();
    while !v.len().is_multiple_of(GROUP) {
        v.push((0, shells));
    }
    v
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::so3::rng::SplitMix64;

    /// The definition summed plainly, one value at a time (`Iterator::sum` over m ascending,
    /// the norm its square root): the vectorised blocks must give these exact bits.
    fn plain(c: &[f32], shells: usize, degree: usize, which: Invariants) -> Vec<f32> {
        let nk = (degree + 1) * (degree + 1);
        let c: Vec<f64> = c.iter().map(|&v| v as f64).collect();
        let part = |n: usize, l: usize| &c[n * nk + l * l..n * nk + (l + 1) * (l + 1)];
        let mut out = Vec::new();
        if which.norms {
            for l in 0..=degree {
                for n in 0..shells {
                    out.push(part(n, l).iter().map(|v| v * v).sum::<f64>().sqrt() as f32);
                }
            }
        }
        if which.power_spectrum {
            for l in 0..=degree {
                for n in 0..shells {
                    for n2 in n..shells {
                        let s: f64 = part(n, l).iter().zip(part(n2, l)).map(|(x, y)| x * y).sum();
                        out.push(s as f32);
                    }
                }
            }
        }
        out
    }

    #[test]
    fn the_constant_blocks_are_those_of_six_shells() {
        assert_eq!(spectrum_blocks(6), BLOCKS_6);
    }

    #[test]
    fn spectrum_blocks_give_the_plain_sums_bit_for_bit() {
        let mut rng = SplitMix64::new(7);
        for (shells, degree) in [
            (1, 0),
            (1, 4),
            (3, 2),
            (4, 4),
            (5, 3),
            (6, 4),
            (8, 6),
            (13, 12),
        ] {
            for which in [
                Invariants::default(),
                Invariants {
                    norms: true,
                    power_spectrum: false,
                    bispectrum: false,
                },
                Invariants {
                    norms: false,
                    power_spectrum: true,
                    bispectrum: false,
                },
            ] {
                let plan = InvariantPlan::new(shells, degree, which);
                let nk = (degree + 1) * (degree + 1);
                let mut scratch = Vec::new();
                for _ in 0..20 {
                    // Values of mixed magnitude and sign, so that rounding order would show.
                    let c: Vec<f32> = (0..shells * nk)
                        .map(|_| {
                            let v = rng.next_f64() * 2.0 - 1.0;
                            (v * 10f64.powf(rng.next_f64() * 6.0 - 3.0)) as f32
                        })
                        .collect();
                    let want = plain(&c, shells, degree, which);
                    let bits = |v: &[f32]| v.iter().map(|x| x.to_bits()).collect::<Vec<_>>();
                    // The build this processor runs, then the portable one.
                    let mut got = vec![f32::NAN; want.len()];
                    plan.compute(&c, &mut scratch, &mut got);
                    assert_eq!(bits(&got), bits(&want), "N {shells}, L {degree}, {which:?}");
                    let mut got = vec![f32::NAN; want.len()];
                    let k =
                        plan.spectrum_impl(&c, &mut scratch, &mut got, plan.shape(), block_sums);
                    assert_eq!(k, want.len());
                    assert_eq!(bits(&got), bits(&want), "portable: N {shells}, L {degree}");
                }
            }
        }
    }
}
