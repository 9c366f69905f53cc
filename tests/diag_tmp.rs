use equiscan::Cloud;
use equiscan::align::*;
#[test]
fn diag() {
    let grid = |dx: f64| -> Cloud {
        let pts: Vec<[f64; 3]> = (0..80)
            .flat_map(|i| (0..80).map(move |j| [i as f64 * 0.05 + dx, j as f64 * 0.05, 0.0]))
            .collect();
        Cloud::from_global(&pts)
    };
    for m in [Method::Equivariant, Method::Fpfh] {
        let a = align_pair(
            &grid(0.0),
            &grid(0.7),
            &AlignParams {
                method: m,
                ..Default::default()
            },
        )
        .unwrap();
        eprintln!(
            "{:?} {:?} {:?} voxel {} kp {:?} angle {} t {:?}",
            m,
            a.figures,
            a.verdict,
            a.voxel,
            a.keypoints,
            a.transform.angle_deg(),
            a.transform.translation
        );
    }
}
