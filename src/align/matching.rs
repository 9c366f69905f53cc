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

/// Nearest/second-nearest per row of `a` among the rows of `b`, and the nearest row of `a` per
/// row of `b`, from one pass over the distance matrix. Squared distances are formed as
/// `|a|² + |b|² − 2 a·b` with a blocked matrix product (f32), clamped at zero; blocks are
/// combined in order, so the result does not depend on the thread count.
type Near = (Vec<(u32, f32, f32)>, Vec<(u32, f32)>);

fn nearest_both(a: &[f32], b: &[f32], dim: usize) -> Near {
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
            let mut rows = vec![(0u32, f32::INFINITY, f32::INFINITY); n];
            let mut cols = vec![(0u32, f32::INFINITY); m];
            for (k, s) in rows.iter_mut().enumerate() {
                let an: f32 = chunk[k * dim..(k + 1) * dim].iter().map(|x| x * x).sum();
                for j in 0..m {
                    let d = (an + bn[j] - 2.0 * dots[(k, j)]).max(0.0);
                    if d < s.1 {
                        *s = (j as u32, d, s.1);
                    } else if d < s.2 {
                        s.2 = d;
                    }
                    if d < cols[j].1 {
                        cols[j] = ((start + k) as u32, d);
                    }
                }
            }
            (rows, cols)
        })
        .collect();
    let mut rows = Vec::with_capacity(a.len() / dim);
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

/// Matches source feature rows to target feature rows. Deterministic; ties keep the lower index.
pub fn match_features(
    source: &[f32],
    target: &[f32],
    dim: usize,
    params: &MatchParams,
) -> Vec<Correspondence> {
    match_features_with_nearest(source, target, dim, params).0
}

/// [`match_features`], and for every source row (in order) its nearest target row with the
/// squared distances to the nearest and second-nearest target rows `(target, d₁², d₂²)`.
pub fn match_features_with_nearest(
    source: &[f32],
    target: &[f32],
    dim: usize,
    params: &MatchParams,
) -> (Vec<Correspondence>, Vec<(u32, f32, f32)>) {
    if dim == 0 || source.len() < dim || target.len() < dim {
        return (Vec::new(), Vec::new());
    }
    let (fwd, back) = nearest_both(source, target, dim);
    let mut all: Vec<Correspondence> = fwd
        .iter()
        .enumerate()
        .map(|(i, &(j, d1, d2))| Correspondence {
            source: i as u32,
            target: j,
            ratio: if d2 > 0.0 && d2.is_finite() {
                (d1 / d2).sqrt()
            } else if d1 == 0.0 && d2 == 0.0 {
                1.0
            } else {
                0.0
            },
            mutual: back[j as usize].0 == i as u32,
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
    (keep, fwd)
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
        let (near, back) = nearest_both(&a, &b, 5);
        for (i, ra) in a.chunks(5).enumerate() {
            let mut d: Vec<(f32, usize)> = b
                .chunks(5)
                .enumerate()
                .map(|(j, rb)| (ra.iter().zip(rb).map(|(x, y)| (x - y) * (x - y)).sum(), j))
                .collect();
            d.sort_by(|x, y| x.0.total_cmp(&y.0).then(x.1.cmp(&y.1)));
            assert_eq!(near[i].0 as usize, d[0].1, "seed 11 row {i}");
            assert!((near[i].2 - d[1].0).abs() < 1e-5, "seed 11 row {i}");
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
}
