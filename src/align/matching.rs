//! Correspondences by nearest neighbours in feature space (brute force, blocked, parallel).
//!
//! A few thousand keypoints per cloud make an exhaustive search cheap (a few million distance
//! evaluations) and exact, with any feature length. Each source row finds its nearest and
//! second-nearest target rows; the ratio of the two distances measures distinctiveness
//! (Lowe's ratio test). A pair is mutual when the target row's nearest source row is the same.

use nalgebra::DMatrix;
use rayon::prelude::*;

/// One source keypoint matched to one target keypoint.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Correspondence {
    /// Source keypoint index.
    pub source: u32,
    /// Target keypoint index.
    pub target: u32,
    /// Nearest over second-nearest feature distance (lower is more distinctive).
    pub ratio: f32,
    /// The target's nearest source row is this source row as well.
    pub mutual: bool,
}

/// Which correspondences to keep.
#[derive(Debug, Clone, Copy)]
pub struct MatchParams {
    /// Keep pairs whose distance ratio is at most this.
    pub max_ratio: f32,
    /// Keep only mutual pairs.
    pub mutual: bool,
    /// When the filters leave fewer than this, the most distinctive remaining pairs are added.
    pub min_keep: usize,
    /// Keep at most this many (most distinctive first).
    pub max_keep: usize,
}

const BLOCK: usize = 128;

/// The `count` nearest rows of `b` per row of `a` (flat, `count` entries per row, nearest
/// first, `(row of b, squared distance)`; missing entries are `(0, ∞)`), and the nearest row of
/// `a` per row of `b`, from one pass over the distance matrix. Squared distances are formed as
/// `|a|² + |b|² − 2 a·b` with a blocked matrix product (f32), clamped at zero; ties keep the
/// lower index and blocks are combined in order, so the result does not depend on the thread
/// count.
type Near = (Vec<(u32, f32)>, Vec<(u32, f32)>);

fn nearest_both(a: &[f32], b: &[f32], dim: usize, count: usize) -> Near {
    let m = b.len() / dim;
    let bm = DMatrix::from_column_slice(dim, m, b);
    let bn: Vec<f32> = b
        .chunks_exact(dim)
        .map(|r| r.iter().map(|x| x * x).sum())
        .collect();
    let blocks: Vec<Near> = a
        .par_chunks(BLOCK * dim)
        .enumerate()
        .map(|(blk, chunk)| {
            let start = blk * BLOCK;
            let n = chunk.len() / dim;
            let am = DMatrix::from_column_slice(dim, n, chunk);
            let dots = am.transpose() * &bm;
            let mut rows = vec![(0u32, f32::INFINITY); n * count];
            let mut cols = vec![(0u32, f32::INFINITY); m];
            for (k, s) in rows.chunks_exact_mut(count).enumerate() {
                let an: f32 = chunk[k * dim..(k + 1) * dim].iter().map(|x| x * x).sum();
                for j in 0..m {
                    let d = (an + bn[j] - 2.0 * dots[(k, j)]).max(0.0);
                    if d < s[count - 1].1 {
                        let at = s.iter().position(|e| d < e.1).unwrap_or(count - 1);
                        s.copy_within(at..count - 1, at + 1);
                        s[at] = (j as u32, d);
                    }
                    if d < cols[j].1 {
                        cols[j] = ((start + k) as u32, d);
                    }
                }
            }
            (rows, cols)
        })
        .collect();
    let mut rows = Vec::with_capacity(a.len() / dim * count);
    let mut cols = vec![(0u32, f32::INFINITY); m];
    for (r, c) in blocks {
        rows.extend(r);
        for (slot, x) in cols.iter_mut().zip(c) {
            if x.1 < slot.1 {
                *slot = x;
            }
        }
    }
    (rows, cols)
}

/// Nearest over a farther neighbour's feature distance, from the two squared distances (0 when
/// the farther is infinite, i.e. fewer rows than asked; 1 when both are zero).
fn distance_ratio(d1: f32, dk: f32) -> f32 {
    if dk > 0.0 && dk.is_finite() {
        (d1 / dk).sqrt()
    } else if d1 == 0.0 && dk == 0.0 {
        1.0
    } else {
        0.0
    }
}

/// Matches source feature rows to target feature rows. Deterministic; ties keep the lower index.
pub fn match_features(
    source: &[f32],
    target: &[f32],
    dim: usize,
    params: &MatchParams,
) -> Vec<Correspondence> {
    match_features_with_neighbours(source, target, dim, params, 1).kept
}

/// The matches of [`match_features_with_neighbours`].
pub struct Matched {
    /// The pairs that pass the filters of [`MatchParams`], most distinctive first.
    pub kept: Vec<Correspondence>,
    /// For every source row (in order) its nearest target row with the squared distances to
    /// the nearest and second-nearest target rows `(target, d₁², d₂²)`.
    pub nearest: Vec<(u32, f32, f32)>,
    /// Pairs of each source row with each of its `k` nearest target rows that are not in
    /// `kept`, for rows whose nearest over (k+1)-th nearest distance is at most
    /// [`MatchParams::max_ratio`] (`ratio` holds that figure), most distinctive first, at most
    /// [`MatchParams::max_keep`]. A keypoint on a part with a near-symmetry has its true
    /// match and the symmetric twin about equally near, so the plain ratio test drops both;
    /// against the (k+1)-th row it keeps them. Empty for `k` ≤ 1.
    pub neighbours: Vec<Correspondence>,
}

/// [`match_features`], the nearest target rows of every source row, and the pairs of each
/// source row with its `k` nearest target rows ([`Matched::neighbours`]).
pub fn match_features_with_neighbours(
    source: &[f32],
    target: &[f32],
    dim: usize,
    params: &MatchParams,
    k: usize,
) -> Matched {
    if dim == 0 || source.len() < dim || target.len() < dim {
        return Matched {
            kept: Vec::new(),
            nearest: Vec::new(),
            neighbours: Vec::new(),
        };
    }
    let count = k.max(1) + 1;
    let (fwd, back) = nearest_both(source, target, dim, count);
    let mutual = |i: usize, j: u32| back[j as usize].0 == i as u32;
    let nearest: Vec<(u32, f32, f32)> = fwd
        .chunks_exact(count)
        .map(|r| (r[0].0, r[0].1, r[1].1))
        .collect();
    let mut all: Vec<Correspondence> = nearest
        .iter()
        .enumerate()
        .map(|(i, &(j, d1, d2))| Correspondence {
            source: i as u32,
            target: j,
            ratio: distance_ratio(d1, d2),
            mutual: mutual(i, j),
        })
        .collect();
    all.sort_by(|a, b| a.ratio.total_cmp(&b.ratio).then(a.source.cmp(&b.source)));
    let (mut keep, rest): (Vec<_>, Vec<_>) = all
        .into_iter()
        .partition(|c| c.ratio <= params.max_ratio && (c.mutual || !params.mutual));
    if keep.len() < params.min_keep {
        let need = params.min_keep - keep.len();
        keep.extend(rest.into_iter().take(need));
        keep.sort_by(|a, b| a.ratio.total_cmp(&b.ratio).then(a.source.cmp(&b.source)));
    }
    keep.truncate(params.max_keep);
    let mut neighbours = Vec::new();
    if k > 1 {
        let taken: std::collections::HashSet<(u32, u32)> =
            keep.iter().map(|c| (c.source, c.target)).collect();
        for (i, row) in fwd.chunks_exact(count).enumerate() {
            let ratio = distance_ratio(row[0].1, row[k].1);
            if ratio > params.max_ratio {
                continue;
            }
            for &(j, d) in &row[..k] {
                if d.is_finite() && !taken.contains(&(i as u32, j)) {
                    neighbours.push(Correspondence {
                        source: i as u32,
                        target: j,
                        ratio,
                        mutual: mutual(i, j),
                    });
                }
            }
        }
        // Stable: equal ratios keep source order, then nearness order.
        neighbours.sort_by(|a, b| a.ratio.total_cmp(&b.ratio));
        neighbours.truncate(params.max_keep);
    }
    Matched {
        kept: keep,
        nearest,
        neighbours,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn brute_force_nearest_mutual_and_ratio() {
        // Target rows are the source rows permuted, plus a near-duplicate of row 0.
        let src = [0.0f32, 0.0, 10.0, 0.0, 0.0, 10.0, 5.0, 5.0];
        let tgt = [0.0f32, 10.0, 5.0, 5.0, 10.0, 0.0, 0.0, 0.0, 0.1, 0.0];
        let params = MatchParams {
            max_ratio: 0.8,
            mutual: true,
            min_keep: 0,
            max_keep: 100,
        };
        let m = match_features(&src, &tgt, 2, &params);
        // Row 0 is ambiguous (ratio 0): exact match at target 3, second at 0.1 → ratio 0.
        let got: Vec<(u32, u32)> = m.iter().map(|c| (c.source, c.target)).collect();
        assert!(got.contains(&(0, 3)));
        assert!(got.contains(&(1, 2)));
        assert!(got.contains(&(2, 0)));
        assert!(got.contains(&(3, 1)));
        assert!(m.iter().all(|c| c.mutual));
        // Against a brute-force loop on random data.
        let mut rng = crate::so3::rng::SplitMix64::new(11);
        let a: Vec<f32> = (0..200 * 5).map(|_| rng.next_f64() as f32).collect();
        let b: Vec<f32> = (0..150 * 5).map(|_| rng.next_f64() as f32).collect();
        let (near, back) = nearest_both(&a, &b, 5, 2);
        for (i, ra) in a.chunks(5).enumerate() {
            let mut d: Vec<(f32, usize)> = b
                .chunks(5)
                .enumerate()
                .map(|(j, rb)| (ra.iter().zip(rb).map(|(x, y)| (x - y) * (x - y)).sum(), j))
                .collect();
            d.sort_by(|x, y| x.0.total_cmp(&y.0).then(x.1.cmp(&y.1)));
            assert_eq!(near[2 * i].0 as usize, d[0].1, "seed 11 row {i}");
            assert!((near[2 * i + 1].1 - d[1].0).abs() < 1e-5, "seed 11 row {i}");
        }
        for (j, rb) in b.chunks(5).enumerate() {
            let best = a
                .chunks(5)
                .enumerate()
                .map(|(i, ra)| {
                    (
                        ra.iter()
                            .zip(rb)
                            .map(|(x, y)| (x - y) * (x - y))
                            .sum::<f32>(),
                        i,
                    )
                })
                .min_by(|x, y| x.0.total_cmp(&y.0).then(x.1.cmp(&y.1)))
                .unwrap();
            assert_eq!(back[j].0 as usize, best.1, "seed 11 column {j}");
        }
    }

    /// A source row with two equally near target rows (a symmetric twin) fails the ratio test
    /// but gives both pairs among the 2-nearest pairs; with k = 1 there are none.
    #[test]
    fn twin_rows_give_both_pairs_among_the_neighbours() {
        let src = [0.0f32, 0.0, 5.0, 5.0];
        // Target rows 0 and 1 are twins of source row 0; row 2 matches source row 1.
        let tgt = [0.1f32, 0.0, -0.1, 0.0, 5.0, 5.0, 9.0, -9.0];
        let params = MatchParams {
            max_ratio: 0.9,
            mutual: true,
            min_keep: 0,
            max_keep: 100,
        };
        let m = match_features_with_neighbours(&src, &tgt, 2, &params, 2);
        let kept: Vec<(u32, u32)> = m.kept.iter().map(|c| (c.source, c.target)).collect();
        assert_eq!(kept, vec![(1, 2)]);
        let extra: Vec<(u32, u32)> = m.neighbours.iter().map(|c| (c.source, c.target)).collect();
        // Source row 1 (its nearest kept, its third row ≈ 7.1 away): its second row (target 0)
        // comes first with ratio 0; then source row 0: target rows 0 and 1 at 0.1 against its
        // third (target 2) at ≈ 7.1, ratio ≈ 0.014. Every row that passes brings its k − 1
        // next rows as well.
        assert_eq!(extra, vec![(1, 0), (0, 0), (0, 1)]);
        assert!(m.neighbours[1].ratio < 0.02);
        assert!(
            match_features_with_neighbours(&src, &tgt, 2, &params, 1)
                .neighbours
                .is_empty()
        );
        // The k nearest rows against a sorted brute-force list (seed 12).
        let mut rng = crate::so3::rng::SplitMix64::new(12);
        let a: Vec<f32> = (0..130 * 4).map(|_| rng.next_f64() as f32).collect();
        let b: Vec<f32> = (0..90 * 4).map(|_| rng.next_f64() as f32).collect();
        let (near, _) = nearest_both(&a, &b, 4, 3);
        for (i, ra) in a.chunks(4).enumerate() {
            let mut d: Vec<(f32, usize)> = b
                .chunks(4)
                .enumerate()
                .map(|(j, rb)| (ra.iter().zip(rb).map(|(x, y)| (x - y) * (x - y)).sum(), j))
                .collect();
            d.sort_by(|x, y| x.0.total_cmp(&y.0).then(x.1.cmp(&y.1)));
            for r in 0..3 {
                assert_eq!(
                    near[3 * i + r].0 as usize,
                    d[r].1,
                    "seed 12 row {i} rank {r}"
                );
            }
        }
    }
}
