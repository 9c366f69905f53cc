//! [`NearestTrack`]: the bounded nearest-point query of [`KdIndex::nearest_within`] for a point
//! that moves a little from one query to the next (the SOURCE points of an ICP run), answered
//! without a tree search while a certificate from the last search holds.
//!
//! A search from `q₀` (the two nearest points within 1.5 × the cutoff) leaves the nearest point
//! `j` at distance `d₁` and the distance `g` within which no other point lies (the second
//! nearest, or the search reach). From a new position `q₁` at distance `δ` from `q₀` every
//! other point is at least `g − δ` away and `j` at most `d₁ + δ` (triangle inequality), so `j`
//! is still the nearest while `d₁ + 2δ < g`; with no point within `g` of `q₀`, none lies
//! within `g − δ` of `q₁`. Every test keeps a relative margin ([`MARGIN`]) far above the f32
//! rounding of the tree's distances, and so does the cutoff test on the new distance to `j`;
//! where a margin is not met the tree is searched again, and where that search finds a
//! near-tie or a distance near the cutoff the answer is [`KdIndex::nearest_within`]'s own.
//! The answers are therefore those of [`KdIndex::nearest_within`] (the tests below compare
//! them on points moving by steps from a thousandth of the cutoff to twice the cutoff).

use super::KdIndex;

/// Relative safety margin of the certificate and cutoff tests (the tree's f32 squared
/// distances are exact to about 1e-7 relative).
pub const MARGIN: f64 = 1e-4;

/// Each search reaches this many times the cutoff, so that a point outside the cutoff is
/// answered without a search until it has moved half a cutoff.
const REACH: f64 = 1.5;

/// What the last search of one moving point found (see the module documentation).
#[derive(Debug, Clone, Copy, Default)]
pub struct NearestTrack {
    last: Option<Memory>,
}

#[derive(Debug, Clone, Copy)]
struct Memory {
    /// Where the last search was made.
    at: [f32; 3],
    /// The nearest point then, and its distance; `None` when nothing lay within the reach.
    hit: Option<(u32, f64)>,
    /// No point other than `hit` lies within this distance of `at`.
    gap: f64,
}

fn distance(a: [f32; 3], b: [f32; 3]) -> f64 {
    (0..3)
        .map(|k| (a[k] as f64 - b[k] as f64).powi(2))
        .sum::<f64>()
        .sqrt()
}

impl NearestTrack {
    /// The answer of `index.nearest_within(centre, max_d2)` (its index only), `points` being
    /// the slice `index` was built from; searches the tree only when the certificate from the
    /// last search of this track does not decide.
    pub fn nearest_within(
        &mut self,
        index: &KdIndex,
        points: &[[f32; 3]],
        centre: [f32; 3],
        max_d2: f64,
    ) -> Option<usize> {
        let cutoff = max_d2.sqrt();
        if let Some(m) = self.last {
            let moved = distance(centre, m.at);
            match m.hit {
                Some((j, d1)) if d1 + 2.0 * moved < m.gap * (1.0 - MARGIN) => {
                    let e2 = distance(centre, points[j as usize]).powi(2);
                    if e2 <= max_d2 * (1.0 - MARGIN) {
                        return Some(j as usize);
                    }
                    if e2 >= max_d2 * (1.0 + MARGIN) {
                        return None;
                    }
                }
                None if m.gap - moved > cutoff * (1.0 + MARGIN) => return None,
                _ => {}
            }
        }
        let reach = REACH * cutoff;
        let hits = index.nearest_two_within(centre, reach * reach);
        let Some(&(j, d2)) = hits.first() else {
            self.last = Some(Memory {
                at: centre,
                hit: None,
                gap: reach,
            });
            return None;
        };
        let d1 = (d2 as f64).sqrt();
        let gap = hits.get(1).map_or(reach, |&(_, e2)| (e2 as f64).sqrt());
        self.last = Some(Memory {
            at: centre,
            hit: Some((j as u32, d1)),
            gap,
        });
        let tie = gap <= d1 * (1.0 + MARGIN) + f64::MIN_POSITIVE;
        let at_cutoff = (d2 as f64 - max_d2).abs() <= MARGIN * max_d2;
        if tie || at_cutoff {
            index.nearest_within(centre, max_d2).map(|(i, _)| i)
        } else {
            (d2 as f64 <= max_d2).then_some(j)
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::so3::rng::SplitMix64;

    /// Points drifting through and around a noisy unit cube of 3 000 points (with exact
    /// duplicates, for ties), by steps that shrink as in a converging ICP run and by jumps:
    /// every tracked answer is the untracked one.
    #[test]
    fn tracked_answers_are_the_bounded_nearest() {
        let mut rng = SplitMix64::new(5);
        let mut pts: Vec<[f32; 3]> = (0..3000)
            .map(|_| std::array::from_fn(|_| rng.next_f64() as f32))
            .collect();
        pts.extend_from_slice(&pts[..100].to_vec());
        let index = KdIndex::new(&pts).unwrap();
        let mut searched = 0usize;
        let mut asked = 0usize;
        for cutoff in [0.02f64, 0.05, 0.2] {
            let max_d2 = cutoff * cutoff;
            for walker in 0..200 {
                let mut track = NearestTrack::default();
                let mut c: [f32; 3] = std::array::from_fn(|_| (rng.next_f64() * 1.4 - 0.2) as f32);
                if walker % 7 == 0 {
                    c = pts[walker];
                }
                for step in 0..40 {
                    let size = match step % 10 {
                        9 => 2.0 * cutoff,
                        _ => cutoff * 0.5f64.powi(step / 3),
                    };
                    for k in 0..3 {
                        c[k] += ((rng.next_f64() - 0.5) * size) as f32;
                    }
                    let want = index.nearest_within(c, max_d2).map(|(i, _)| i);
                    let before = track.last.map(|m| m.at);
                    let got = track.nearest_within(&index, &pts, c, max_d2);
                    asked += 1;
                    if track.last.map(|m| m.at) != before {
                        searched += 1;
                    }
                    match (got, want) {
                        (Some(g), Some(w)) => assert!(g == w || pts[g] == pts[w], "{c:?}"),
                        (g, w) => assert_eq!(g, w, "{c:?}, cutoff {cutoff}"),
                    }
                }
            }
        }
        // The certificate saves searches (otherwise the track would be pointless).
        assert!(
            searched * 2 < asked,
            "{searched} searches for {asked} queries"
        );
    }
}
