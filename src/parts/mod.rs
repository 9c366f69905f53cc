//! Part identification and inspection: which catalogued part a scan shows (or none), its pose
//! in the part's frame, and how its surface deviates from the part's reference.
//!
//! - [`reference`](mod@reference): a part's reference surface (points with outward normals, the mesh when
//!   there is one) and its search structures ([`reference::Prepared`]);
//! - [`absence`]: absence evidence (reference surface inside a seen face with no scan point);
//! - [`catalogue`]: the versioned catalogue file (`catalogue build` / `show`);
//! - [`signature`]: whole-shape rotation invariants (diameter, D2 shape distribution) for the
//!   shortlist;
//! - [`scan`]: a scan's samples, noise level and size;
//! - [`lookup`]: closest-point lookup grid of a reference (constant-time pairing in the
//!   global pose search);
//! - [`register`]: partial scan onto a complete reference, global search + ICP, pose verdict;
//! - [`identify`]: shortlist, registration, verdict (`identified`, `ambiguous`, `unknown`);
//! - [`deviation`], [`triangles`]: residuals and signed deviations (positive outside the
//!   material), exact to a mesh;
//! - [`inspect`]: deviation statistics, tolerance, clusters of out-of-tolerance points;
//! - [`report`]: the JSON records of `identify` and `inspect`;
//! - [`tolerance`]: ISO 2768-1 general tolerances for linear dimensions.
//!
//! Units are file units throughout (the demo parts: millimetres). Transforms are row-major
//! 4×4 and carry scan file coordinates into the part's (reference file's) coordinates.
//! Results support, and do not replace, inspection with calibrated equipment: see
//! [`CAUTION`].

pub mod absence;
pub mod catalogue;
pub mod deviation;
pub mod identify;
pub mod inspect;
pub mod lookup;
pub mod reference;
pub mod register;
pub mod report;
pub mod scan;
pub mod signature;
pub mod tolerance;
pub mod triangles;

use deviation::Residuals;

/// The caution printed on every inspection picture and report.
pub const CAUTION: &str = "Results support, and do not replace, inspection with calibrated equipment under the shop's quality procedure; deviations include scanner noise and registration error.";

/// Points of the same sample that one fit explains and the other does not: `(a over b, b over
/// a)`, where explained means a residual within `tau` and not explained a residual beyond
/// `2 tau`. A scan that shows the difference between two parts (a hole, a step) or two poses
/// gives one of them such points; a scan that does not gives neither.
pub fn evidence(a: &Residuals, b: &Residuals, tau: f64) -> (usize, usize) {
    let (mut ab, mut ba) = (0, 0);
    for (&x, &y) in a.distance.iter().zip(&b.distance) {
        let (x, y) = (x as f64, y as f64);
        if x <= tau && y > 2.0 * tau {
            ab += 1;
        } else if y <= tau && x > 2.0 * tau {
            ba += 1;
        }
    }
    (ab, ba)
}
