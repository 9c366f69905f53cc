//! Consistent normal orientation: the signs of unoriented (PCA) normals chosen so that
//! neighbouring normals agree, by propagation along a minimum spanning tree of the k-nearest
//! neighbour graph with edge cost `1 − |nᵢ · nⱼ|` (Hoppe, DeRose, Duchamp, McDonald & Stuetzle
//! 1992, "Surface reconstruction from unorganized points", section 3.3; from memory). Along
//! the tree the orientation crosses smooth regions first and sharp edges last, through the
//! blended normals that a neighbourhood straddling an edge gets.
//!
//! The result is one sign per connected component of the graph, up to a flip of the whole
//! component: either every normal of a one-sided scan points out of the part or every one points
//! in. Components are numbered from 0 in order of their lowest point index.

use std::cmp::Reverse;
use std::collections::BinaryHeap;

use super::KdIndex;

/// Orientation of the normals of one cloud.
#[derive(Debug, Clone, PartialEq)]
pub struct Oriented {
    /// `+1` or `−1` per point: the factor that orients its normal.
    pub sign: Vec<i8>,
    /// Connected component of the neighbour graph per point.
    pub component: Vec<u32>,
}

/// Orients `normals` (unit, one per point of `points`, indexed by `index`) over the graph of
/// each point's `k` nearest neighbours (symmetrised). A point with a zero normal keeps sign +1
/// and takes no part in the propagation (its own component). Deterministic: ties go to the
/// lower index.
pub fn orient_consistently(
    points: &[[f32; 3]],
    normals: &[[f32; 3]],
    index: &KdIndex,
    k: usize,
) -> Oriented {
    let n = points.len();
    let valid = |i: usize| normals[i].iter().map(|x| x * x).sum::<f32>() > 0.5;
    let dot = |i: usize, j: usize| -> f32 { (0..3).map(|a| normals[i][a] * normals[j][a]).sum() };
    let mut adjacency: Vec<Vec<u32>> = vec![Vec::new(); n];
    for i in 0..n {
        if !valid(i) {
            continue;
        }
        for (j, _) in index.nearest(points[i], k + 1) {
            if j != i && valid(j) {
                adjacency[i].push(j as u32);
                adjacency[j].push(i as u32);
            }
        }
    }
    for list in &mut adjacency {
        list.sort_unstable();
        list.dedup();
    }
    let mut sign = vec![1i8; n];
    let mut component = vec![u32::MAX; n];
    let mut next = 0u32;
    // Prim's algorithm per component; the heap holds (cost, to, from), cheapest first.
    let mut heap: BinaryHeap<Reverse<(u32, u32, u32)>> = BinaryHeap::new();
    let cost = |i: usize, j: usize| -> u32 { ((1.0 - dot(i, j).abs()).max(0.0) * 1e6) as u32 };
    for start in 0..n {
        if component[start] != u32::MAX {
            continue;
        }
        component[start] = next;
        if valid(start) {
            for &j in &adjacency[start] {
                heap.push(Reverse((cost(start, j as usize), j, start as u32)));
            }
        }
        while let Some(Reverse((_, to, from))) = heap.pop() {
            let (to, from) = (to as usize, from as usize);
            if component[to] != u32::MAX {
                continue;
            }
            component[to] = next;
            let d = dot(from, to) * sign[from] as f32;
            sign[to] = if d < 0.0 { -1 } else { 1 };
            for &j in &adjacency[to] {
                if component[j as usize] == u32::MAX {
                    heap.push(Reverse((cost(to, j as usize), j, to as u32)));
                }
            }
        }
        next += 1;
    }
    Oriented { sign, component }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A closed box's faces sampled with normals of random sign: after orientation every normal
    /// points out of the box, or every one points in (one component).
    #[test]
    fn a_box_is_oriented_all_out_or_all_in() {
        let mut points = Vec::new();
        let mut normals = Vec::new();
        let mut flip = 0u32;
        for face in 0..6 {
            let axis = face / 2;
            let side = if face % 2 == 0 { -1.0f32 } else { 1.0 };
            for a in 0..15 {
                for b in 0..15 {
                    let (u, v) = (a as f32 / 14.0 - 0.5, b as f32 / 14.0 - 0.5);
                    let mut p = [0.0f32; 3];
                    p[axis] = 0.5 * side;
                    p[(axis + 1) % 3] = u * 0.98;
                    p[(axis + 2) % 3] = v * 0.98;
                    // Outward normal; neighbourhoods at an edge blend the two faces' normals,
                    // as PCA does.
                    let mut nrm = [0.0f32; 3];
                    nrm[axis] = side;
                    if u.abs() > 0.46 {
                        nrm[(axis + 1) % 3] = u.signum();
                    }
                    if v.abs() > 0.46 {
                        nrm[(axis + 2) % 3] = v.signum();
                    }
                    let l = (nrm.iter().map(|x| x * x).sum::<f32>()).sqrt();
                    flip = flip.wrapping_mul(1_103_515_245).wrapping_add(12_345);
                    let random = if (flip >> 16) & 1 == 0 { 1.0 } else { -1.0 };
                    nrm.iter_mut().for_each(|x| *x *= random / l);
                    points.push(p);
                    normals.push(nrm);
                }
            }
        }
        let index = KdIndex::new(&points).unwrap();
        let o = orient_consistently(&points, &normals, &index, 8);
        assert!(o.component.iter().all(|&c| c == 0));
        let outward: Vec<bool> = points
            .iter()
            .zip(&normals)
            .zip(&o.sign)
            .map(|((p, n), &s)| (0..3).map(|a| p[a] * n[a] * s as f32).sum::<f32>() > 0.0)
            .collect();
        let out = outward.iter().filter(|&&x| x).count();
        assert!(
            out == points.len() || out == 0,
            "{out} of {} outward",
            points.len()
        );
    }

    /// Two separate planes form two components, each oriented on its own.
    #[test]
    fn separate_sheets_are_separate_components() {
        let mut points = Vec::new();
        let mut normals = Vec::new();
        for sheet in 0..2 {
            for a in 0..10 {
                for b in 0..10 {
                    points.push([a as f32 * 0.1, b as f32 * 0.1, sheet as f32 * 10.0]);
                    let s = if (a + b) % 3 == 0 { -1.0 } else { 1.0 };
                    normals.push([0.0, 0.0, s]);
                }
            }
        }
        let index = KdIndex::new(&points).unwrap();
        let o = orient_consistently(&points, &normals, &index, 6);
        assert_eq!(o.component[0], 0);
        assert_eq!(o.component[100], 1);
        for sheet in 0..2 {
            let z: Vec<f32> = (0..100)
                .map(|i| normals[sheet * 100 + i][2] * o.sign[sheet * 100 + i] as f32)
                .collect();
            assert!(z.iter().all(|&v| v == z[0]), "sheet {sheet}: {z:?}");
        }
    }
}
