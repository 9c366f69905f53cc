//! [`KdIndex`]: a read-only k-d tree over a cloud's local positions.

use std::num::NonZeroUsize;

use kiddo::{ImmutableKdTree, SquaredEuclidean};

use crate::error::{Error, Result};

/// A k-d tree over f32 local positions; items are indices into the slice it was built from.
///
/// Built once, then shared by every thread (queries take `&self`). Points must be finite:
/// [`crate::Cloud::validate`] rejects NaN before a tree is built.
pub struct KdIndex {
    tree: ImmutableKdTree<f32, 3>,
    len: usize,
}

impl KdIndex {
    /// Builds the tree. Fails on an empty slice or more than `u32::MAX` points.
    pub fn new(points: &[[f32; 3]]) -> Result<Self> {
        if points.is_empty() {
            return Err(Error::invalid(
                "cannot index an empty cloud",
                "give a cloud with at least one point",
            ));
        }
        if points.len() > u32::MAX as usize {
            return Err(Error::invalid(
                format!("{} points are more than one index holds", points.len()),
                "split the cloud into tiles",
            ));
        }
        let tree = ImmutableKdTree::new_from_slice(points).map_err(|e| {
            Error::invalid(
                format!("the k-d tree could not be built: {e:?}"),
                "check the cloud for non-finite coordinates",
            )
        })?;
        Ok(KdIndex {
            tree,
            len: points.len(),
        })
    }

    /// Number of indexed points.
    pub fn len(&self) -> usize {
        self.len
    }

    /// Always false: an index holds at least one point.
    pub fn is_empty(&self) -> bool {
        self.len == 0
    }

    /// Calls `visit(index, squared_distance)` for every point within `radius` of `centre`
    /// (boundary included), in no particular order. Allocates nothing.
    #[inline]
    pub fn for_each_within(
        &self,
        centre: [f32; 3],
        radius: f32,
        mut visit: impl FnMut(usize, f32),
    ) {
        self.tree
            .query(&centre)
            .within::<SquaredEuclidean<f32>>(radius * radius)
            .unsorted()
            .visit(|hit| visit(hit.item as usize, hit.distance));
    }

    /// Clears `out` and fills it with `(index, squared_distance)` of the points within `radius`,
    /// sorted by index so that downstream sums are independent of the tree's visiting order.
    pub fn within_sorted(&self, centre: [f32; 3], radius: f32, out: &mut Vec<(u32, f32)>) {
        out.clear();
        self.for_each_within(centre, radius, |i, d2| out.push((i as u32, d2)));
        out.sort_unstable_by_key(|&(i, _)| i);
    }

    /// The `k` nearest points as `(index, squared_distance)`, nearest first; ties by index.
    pub fn nearest(&self, centre: [f32; 3], k: usize) -> Vec<(usize, f32)> {
        let Some(k) = NonZeroUsize::new(k.min(self.len)) else {
            return Vec::new();
        };
        let mut hits: Vec<(usize, f32)> = self
            .tree
            .query(&centre)
            .nearest_n::<SquaredEuclidean<f32>>(k)
            .execute()
            .into_iter()
            .map(|h| (h.item as usize, h.distance))
            .collect();
        hits.sort_by(|a, b| a.1.total_cmp(&b.1).then(a.0.cmp(&b.0)));
        hits
    }

    /// The nearest point as `(index, squared_distance)`.
    pub fn nearest_one(&self, centre: [f32; 3]) -> (usize, f32) {
        let h = self
            .tree
            .query(&centre)
            .nearest_one::<SquaredEuclidean<f32>>()
            .execute();
        (h.item as usize, h.distance)
    }

    /// The nearest point as `(index, squared_distance)` when its squared distance is at most
    /// `max_d2`, else `None`. The same point as [`KdIndex::nearest_one`] whenever that one is
    /// within reach (up to ties of exactly equal distance); the search is cut off at the bound,
    /// which makes it much cheaper for centres far from the cloud (a wrong pose in ICP).
    #[inline]
    pub fn nearest_within(&self, centre: [f32; 3], max_d2: f64) -> Option<(usize, f32)> {
        // The f32 bound is rounded up a little, and the f64 test decides, so that the boundary
        // is the caller's.
        let bound = (max_d2 as f32) * (1.0 + 4.0 * f32::EPSILON) + f32::MIN_POSITIVE;
        let hits = self
            .tree
            .query(&centre)
            .nearest_n::<SquaredEuclidean<f32>>(NonZeroUsize::MIN)
            .within(bound)
            .execute();
        hits.first()
            .filter(|h| h.distance as f64 <= max_d2)
            .map(|h| (h.item as usize, h.distance))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Seeded pseudo-random points in the unit cube.
    fn points(n: usize, seed: u64) -> Vec<[f32; 3]> {
        let mut rng = crate::so3::rng::SplitMix64::new(seed);
        (0..n)
            .map(|_| std::array::from_fn(|_| rng.next_f64() as f32))
            .collect()
    }

    /// Bounded nearest = the unbounded nearest when it is within reach, none otherwise
    /// (centres on, near and far from the cloud, bounds on either side of the distance).
    #[test]
    fn bounded_nearest_agrees_with_nearest() {
        let pts = points(3000, 11);
        let index = KdIndex::new(&pts).unwrap();
        let mut rng = crate::so3::rng::SplitMix64::new(12);
        for _ in 0..2000 {
            let c: [f32; 3] = std::array::from_fn(|_| (rng.next_f64() * 3.0 - 1.0) as f32);
            let (j, d2) = index.nearest_one(c);
            for bound in [0.0001f64, 0.001, 0.01, 0.1, d2 as f64, 10.0] {
                match index.nearest_within(c, bound) {
                    Some((k, e2)) => {
                        assert!(e2 as f64 <= bound);
                        assert_eq!(e2, d2);
                        assert!(k == j || pts[k] == pts[j]);
                    }
                    None => assert!(d2 as f64 > bound, "{d2} within {bound} missed"),
                }
            }
        }
    }

    #[test]
    fn radius_and_knn_match_brute_force() {
        let seed = 7;
        let pts = points(2000, seed);
        let idx = KdIndex::new(&pts).unwrap();
        let mut got = Vec::new();
        for (q, c) in pts.iter().enumerate().step_by(97) {
            let r = 0.1;
            idx.within_sorted(*c, r, &mut got);
            let want: Vec<u32> = pts
                .iter()
                .enumerate()
                .filter(|(_, p)| d2(p, c) <= r * r)
                .map(|(i, _)| i as u32)
                .collect();
            let got_ids: Vec<u32> = got.iter().map(|h| h.0).collect();
            assert_eq!(got_ids, want, "seed {seed}, query {q}");
            let knn = idx.nearest(*c, 5);
            let mut all: Vec<(usize, f32)> =
                pts.iter().enumerate().map(|(i, p)| (i, d2(p, c))).collect();
            all.sort_by(|a, b| a.1.total_cmp(&b.1).then(a.0.cmp(&b.0)));
            assert_eq!(knn[4].1, all[4].1, "seed {seed}, query {q}");
        }
    }

    fn d2(a: &[f32; 3], b: &[f32; 3]) -> f32 {
        (0..3).map(|k| (a[k] - b[k]) * (a[k] - b[k])).sum()
    }

    #[test]
    fn empty_cloud_is_an_error() {
        assert!(KdIndex::new(&[]).is_err());
    }
}
