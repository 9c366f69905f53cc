//! More than two scans: pairwise alignments of scans prepared once each, a maximum spanning tree on pair confidence, every
//! scan placed in the frame of the first, and the residual of every loop the tree does not use.
//!
//! For scans `0..n`, each pair `i < j` is aligned (`j` onto `i`). Confident pairs are edges
//! weighted by their confidence; Kruskal's algorithm keeps the maximum spanning tree (ties go to
//! the lower pair index). Poses compose along the tree from scan 0. A confident pair left out of
//! the tree closes a loop: composing the tree path with that pair's transform should give the
//! identity; its rotation angle and its displacement at the scan's centroid are the loop
//! residual.

use nalgebra::Vector3;
use serde::{Deserialize, Serialize};

use std::collections::HashMap;

use rayon::prelude::*;

use super::pipeline::{AlignParams, Alignment, Clock, prepare_timed, register};
use super::prepared_scan::{PreparedScan, checked_voxel, scan_voxel, support_radius};
use super::quality::Verdict;
use super::rigid::Rigid;
use crate::cloud::Cloud;
use crate::error::{Error, Result};

/// One aligned pair: `moving` onto `fixed` (`fixed < moving`).
#[derive(Debug, Clone)]
pub struct PairAlignment {
    /// The scan whose frame the transform maps into.
    pub fixed: usize,
    /// The scan the transform moves.
    pub moving: usize,
    /// The pair's result.
    pub alignment: Alignment,
}

/// Composition around a loop compared with the identity.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LoopResidual {
    /// Scans around the loop, first repeated at the end.
    pub cycle: Vec<usize>,
    /// Rotation angle of the composed transform, degrees.
    pub rotation_deg: f64,
    /// Displacement of the first scan's centroid by the composed transform, file units.
    pub translation: f64,
}

/// The registration of several scans.
#[derive(Debug, Clone)]
pub struct MultiAlignment {
    /// Every pair, in the order (0,1), (0,2), …, (1,2), …
    pub pairs: Vec<PairAlignment>,
    /// Tree edges as `(fixed, moving)`.
    pub tree: Vec<(usize, usize)>,
    /// Per scan, the transform into scan 0's frame (file coordinates); `None` when no chain of
    /// confident pairs reaches it.
    pub poses: Vec<Option<Rigid>>,
    /// Residuals of the loops closed by confident pairs outside the tree.
    pub loops: Vec<LoopResidual>,
}

/// Registers every scan into the frame of the first; messages call the scans "scan 1",
/// "scan 2", … ([`align_many_named`] names them).
pub fn align_many(clouds: &[Cloud], params: &AlignParams) -> Result<MultiAlignment> {
    let names: Vec<String> = (1..=clouds.len()).map(|k| format!("scan {k}")).collect();
    let scans: Vec<(&str, &Cloud)> = names.iter().map(String::as_str).zip(clouds).collect();
    align_many_named(&scans, params)
}

/// Registers every scan (display name, cloud) into the frame of the first.
///
/// Each cloud is prepared once per voxel size it is used at ([`PreparedScan`], kept while a
/// later pair needs it): a pair is registered at the voxel size given in `params`, or else at
/// the larger of its two clouds' automatic voxel sizes, each measured once per cloud. The
/// results are those of [`super::align_named`] on every pair; a pair's timings include the
/// preparations it triggered.
pub fn align_many_named(scans: &[(&str, &Cloud)], params: &AlignParams) -> Result<MultiAlignment> {
    let params = &AlignParams {
        viewpoints: Default::default(),
        ..*params
    };
    let n = scans.len();
    if n < 2 {
        return Err(Error::invalid(
            format!("{n} scan given"),
            "give at least two scans",
        ));
    }
    let voxels: Vec<f64> = match params.voxel {
        Some(v) => vec![checked_voxel(v)?; n],
        None => {
            let each: Vec<Result<f64>> = scans
                .par_iter()
                .map(|&(name, cloud)| scan_voxel(name, cloud))
                .collect();
            each.into_iter().collect::<Result<_>>()?
        }
    };
    // Pairs in order (0,1), (0,2), …, (1,2), …, each with its voxel size; how often each
    // (scan, voxel size) is still needed.
    let order: Vec<(usize, usize, f64)> = (0..n)
        .flat_map(|i| (i + 1..n).map(move |j| (i, j)))
        .map(|(i, j)| (i, j, voxels[i].max(voxels[j])))
        .collect();
    let mut uses: HashMap<(usize, u64), usize> = HashMap::new();
    for &(i, j, v) in &order {
        for k in [i, j] {
            *uses.entry((k, v.to_bits())).or_default() += 1;
        }
    }
    let mut prepared: HashMap<(usize, u64), PreparedScan> = HashMap::new();
    let mut pairs = Vec::new();
    for &(i, j, v) in &order {
        let mut clock = Clock::new();
        support_radius(params, v)?;
        let todo: Vec<usize> = [j, i]
            .into_iter()
            .filter(|&k| !prepared.contains_key(&(k, v.to_bits())))
            .collect();
        let clouds: Vec<(&str, &Cloud)> = todo.iter().map(|&k| scans[k]).collect();
        let fresh = prepare_timed(&clouds, params, v, &mut clock)?;
        for (k, scan) in todo.into_iter().zip(fresh) {
            prepared.insert((k, v.to_bits()), scan);
        }
        let (Some(moving), Some(fixed)) = (
            prepared.get(&(j, v.to_bits())),
            prepared.get(&(i, v.to_bits())),
        ) else {
            return Err(Error::internal(
                "a prepared scan went missing",
                "report this as a bug",
            ));
        };
        let alignment = register(moving, fixed, params, clock)?;
        pairs.push(PairAlignment {
            fixed: i,
            moving: j,
            alignment,
        });
        for k in [i, j] {
            let key = (k, v.to_bits());
            if let Some(u) = uses.get_mut(&key) {
                *u -= 1;
                if *u == 0 {
                    prepared.remove(&key);
                }
            }
        }
    }
    let edges: Vec<(usize, usize, f64, Rigid)> = pairs
        .iter()
        .filter(|p| p.alignment.verdict == Verdict::Confident)
        .map(|p| {
            (
                p.fixed,
                p.moving,
                p.alignment.figures.confidence,
                p.alignment.transform,
            )
        })
        .collect();
    let (tree, rest) = spanning_tree(n, &edges);
    let poses = compose_poses(n, &tree);
    let centroids: Vec<Vector3<f64>> = scans.iter().map(|(_, c)| c.centroid()).collect();
    let loops = rest
        .iter()
        .filter_map(|&(i, j, _, t)| {
            let (pi, pj) = (poses[i]?, poses[j]?);
            // Scan j → i by the pair, then into frame 0, then back into j by the tree.
            let e = pj.inverse().compose(&pi.compose(&t));
            let c = centroids[j];
            let mut cycle = tree_path(n, &tree, j, i);
            cycle.push(j);
            Some(LoopResidual {
                cycle,
                rotation_deg: e.angle_deg(),
                translation: (e.apply(&c) - c).norm(),
            })
        })
        .collect();
    Ok(MultiAlignment {
        pairs,
        tree: tree.iter().map(|e| (e.0, e.1)).collect(),
        poses,
        loops,
    })
}

type Edge = (usize, usize, f64, Rigid);

/// Kruskal's maximum spanning forest: the tree edges and the edges left out.
fn spanning_tree(n: usize, edges: &[Edge]) -> (Vec<Edge>, Vec<Edge>) {
    let mut order: Vec<usize> = (0..edges.len()).collect();
    order.sort_by(|&a, &b| edges[b].2.total_cmp(&edges[a].2).then(a.cmp(&b)));
    let mut parent: Vec<usize> = (0..n).collect();
    fn find(p: &mut [usize], mut x: usize) -> usize {
        while p[x] != x {
            p[x] = p[p[x]];
            x = p[x];
        }
        x
    }
    let (mut tree, mut rest) = (Vec::new(), Vec::new());
    for k in order {
        let (a, b) = (find(&mut parent, edges[k].0), find(&mut parent, edges[k].1));
        if a != b {
            parent[a] = b;
            tree.push(edges[k]);
        } else {
            rest.push(edges[k]);
        }
    }
    (tree, rest)
}

/// Poses into scan 0's frame by walking the tree from scan 0.
fn compose_poses(n: usize, tree: &[Edge]) -> Vec<Option<Rigid>> {
    let mut poses = vec![None; n];
    poses[0] = Some(Rigid::identity());
    let mut changed = true;
    while changed {
        changed = false;
        for &(i, j, _, t) in tree {
            match (poses[i], poses[j]) {
                (Some(pi), None) => {
                    poses[j] = Some(pi.compose(&t));
                    changed = true;
                }
                (None, Some(pj)) => {
                    poses[i] = Some(pj.compose(&t.inverse()));
                    changed = true;
                }
                _ => {}
            }
        }
    }
    poses
}

/// Scans on the tree path from `from` to `to` (both included).
fn tree_path(n: usize, tree: &[Edge], from: usize, to: usize) -> Vec<usize> {
    let mut prev = vec![usize::MAX; n];
    let mut queue = std::collections::VecDeque::from([from]);
    prev[from] = from;
    while let Some(x) = queue.pop_front() {
        for &(a, b, _, _) in tree {
            for (u, v) in [(a, b), (b, a)] {
                if u == x && prev[v] == usize::MAX {
                    prev[v] = x;
                    queue.push_back(v);
                }
            }
        }
    }
    let mut path = vec![to];
    let mut x = to;
    while x != from && prev[x] != usize::MAX {
        x = prev[x];
        path.push(x);
    }
    path.reverse();
    path
}

#[cfg(test)]
mod tests {
    use super::*;
    use nalgebra::Rotation3;

    fn rigid(w: [f64; 3], t: [f64; 3]) -> Rigid {
        Rigid::new(*Rotation3::new(Vector3::from(w)).matrix(), Vector3::from(t))
    }

    /// Three scans with exact pair transforms: the tree places them, the loop closes to zero;
    /// a perturbed third pair shows up as the loop residual.
    #[test]
    fn tree_poses_and_loop_residual() {
        let p1 = rigid([0.1, 0.2, -0.3], [1.0, 2.0, 3.0]); // scan 1 into scan 0
        let p2 = rigid([-0.4, 0.1, 0.2], [-2.0, 0.5, 1.0]); // scan 2 into scan 0
        let t12 = p1.inverse().compose(&p2); // scan 2 into scan 1
        let edges = vec![(0, 1, 0.9, p1), (0, 2, 0.8, p2), (1, 2, 0.5, t12)];
        let (tree, rest) = spanning_tree(3, &edges);
        assert_eq!(tree.len(), 2);
        assert_eq!((rest[0].0, rest[0].1), (1, 2));
        let poses = compose_poses(3, &tree);
        assert!((poses[2].unwrap().rotation - p2.rotation).norm() < 1e-12);
        // Loop residual of the left-out edge.
        let e = poses[2]
            .unwrap()
            .inverse()
            .compose(&poses[1].unwrap().compose(&t12));
        assert!(e.angle_deg() < 1e-9);
        let bent = rigid([0.0, 0.0, 0.01], [0.0, 0.0, 0.0]).compose(&t12);
        let e = poses[2]
            .unwrap()
            .inverse()
            .compose(&poses[1].unwrap().compose(&bent));
        assert!((e.angle_deg() - 0.01f64.to_degrees()).abs() < 1e-6);
        assert_eq!(tree_path(3, &tree, 2, 1), vec![2, 0, 1]);
        // An unreachable scan has no pose.
        let poses = compose_poses(3, &tree[..1]);
        assert!(poses[2].is_none() || poses[1].is_none());
    }
}
