//! Reference checks of the SO(3) core against outside sources (each named beside its check) and
//! seeded property tests (the seed is printed on failure).

use equiscan::so3::coupling::{CouplingTable, complex_cg, real_cg, tensor_product};
use equiscan::so3::rng::SplitMix64;
use equiscan::so3::rotation::{
    geodesic_angle, random_rotation, rot_y, rot_z, rotation_vector_to_matrix,
};
use equiscan::so3::search::{RotationSearcher, SearchOptions};
use equiscan::so3::sh::{
    index, num_coeffs, real_sh_f32, real_sh_f64, real_sh_vec_batch_f32, real_sh_vec_f64,
};
use equiscan::so3::wigner::{WignerD, small_d};
use nalgebra::{Matrix3, Vector3};
use serde_json::Value;
use std::f64::consts::PI;

fn fixture(name: &str) -> Value {
    let path = std::path::Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("tests/data/so3")
        .join(name);
    let text = std::fs::read_to_string(&path).expect("fixture file");
    serde_json::from_str(&text).expect("fixture JSON")
}

fn apply_rot(r: &Matrix3<f64>, u: [f64; 3]) -> [f64; 3] {
    let v = r * Vector3::from(u);
    [v.x, v.y, v.z]
}

// ---------------------------------------------------------------------------------------------
// Spherical harmonics

/// Values of degrees 0..=12 at 26 directions from scipy.special.sph_harm_y (scipy 1.17.1),
/// converted to our real convention by tools/fixtures/so3_fixtures.py.
#[test]
fn sh_match_scipy_sph_harm_y() {
    let fx = fixture("sh_scipy.json");
    // Source: scipy 1.17.1, scipy.special.sph_harm_y (recorded in the fixture).
    assert_eq!(fx["scipy_version"].as_str(), Some("1.17.1"));
    let l_max = fx["l_max"].as_u64().unwrap() as usize;
    assert_eq!(l_max, 12);
    let dirs = fx["directions"].as_array().unwrap();
    assert!(dirs.len() >= 20);
    let nc = num_coeffs(l_max);
    let mut y64 = vec![0.0; nc];
    let mut y32 = vec![0.0f32; nc];
    for (d, row) in dirs.iter().enumerate() {
        let u: Vec<f64> = row["u"]
            .as_array()
            .unwrap()
            .iter()
            .map(|v| v.as_f64().unwrap())
            .collect();
        let want: Vec<f64> = row["y"]
            .as_array()
            .unwrap()
            .iter()
            .map(|v| v.as_f64().unwrap())
            .collect();
        assert_eq!(want.len(), nc);
        real_sh_f64(l_max, [u[0], u[1], u[2]], &mut y64);
        real_sh_f32(l_max, [u[0] as f32, u[1] as f32, u[2] as f32], &mut y32);
        for k in 0..nc {
            assert!(
                (y64[k] - want[k]).abs() < 1e-12,
                "direction {d}, k={k}: {} vs scipy {}",
                y64[k],
                want[k]
            );
            assert!(
                (y32[k] as f64 - want[k]).abs() < 1e-5,
                "f32 direction {d}, k={k}: {} vs scipy {}",
                y32[k],
                want[k]
            );
        }
    }
}

/// Closed forms of degrees 0..=3 (from memory: the standard table of real spherical harmonics,
/// orthonormal, no Condon–Shortley phase), 7 significant digits.
#[test]
fn sh_closed_forms_degrees_0_to_3() {
    let mut rng = SplitMix64::new(101);
    let mut y = vec![0.0; num_coeffs(3)];
    for _ in 0..20 {
        let u = rng.unit_vector();
        let [x, yy, z] = u;
        real_sh_f64(3, u, &mut y);
        let table = [
            (0, 0, 0.2820948),
            (1, -1, 0.4886025 * yy),
            (1, 0, 0.4886025 * z),
            (1, 1, 0.4886025 * x),
            (2, -2, 1.0925484 * x * yy),
            (2, -1, 1.0925484 * yy * z),
            (2, 0, 0.3153916 * (3.0 * z * z - 1.0)),
            (2, 1, 1.0925484 * x * z),
            (2, 2, 0.5462742 * (x * x - yy * yy)),
            (3, -3, 0.5900436 * yy * (3.0 * x * x - yy * yy)),
            (3, -2, 2.8906114 * x * yy * z),
            (3, -1, 0.4570458 * yy * (5.0 * z * z - 1.0)),
            (3, 0, 0.3731763 * z * (5.0 * z * z - 3.0)),
            (3, 1, 0.4570458 * x * (5.0 * z * z - 1.0)),
            (3, 2, 1.4453057 * z * (x * x - yy * yy)),
            (3, 3, 0.5900436 * x * (x * x - 3.0 * yy * yy)),
        ];
        for (l, m, v) in table {
            assert!(
                (y[index(l, m)] - v).abs() < 3e-7,
                "Y_{l},{m}: {} vs table {v}",
                y[index(l, m)]
            );
        }
    }
}

/// Gauss–Legendre nodes and weights on [−1, 1] (Newton on P_n; exact for polynomials of degree
/// 2n − 1: Abramowitz & Stegun 25.4.29, from memory).
fn gauss_legendre(n: usize) -> Vec<(f64, f64)> {
    (0..n)
        .map(|i| {
            let mut x = (PI * (i as f64 + 0.75) / (n as f64 + 0.5)).cos();
            let mut dp = 0.0;
            for _ in 0..100 {
                let (mut p0, mut p1) = (1.0, x);
                for k in 2..=n {
                    let p2 = ((2 * k - 1) as f64 * x * p1 - (k - 1) as f64 * p0) / k as f64;
                    p0 = p1;
                    p1 = p2;
                }
                dp = n as f64 * (x * p1 - p0) / (x * x - 1.0);
                let dx = p1 / dp;
                x -= dx;
                if dx.abs() < 1e-16 {
                    break;
                }
            }
            (x, 2.0 / ((1.0 - x * x) * dp * dp))
        })
        .collect()
}

/// Orthonormality ∫ Y_lm Y_l'm' dΩ = δδ for l ≤ 12 by an exact product rule (Gauss–Legendre in
/// cos θ, uniform in φ).
#[test]
fn sh_orthonormal_by_exact_quadrature() {
    let gl = gauss_legendre(14);
    // the rule itself: ∫ z^k dz = 2/(k+1) for even k ≤ 26 (elementary)
    for k in (0..=26).step_by(2) {
        let s: f64 = gl.iter().map(|(x, w)| w * x.powi(k)).sum();
        assert!((s - 2.0 / (k as f64 + 1.0)).abs() < 1e-13, "k={k}");
    }
    let l_max = 12;
    let nc = num_coeffs(l_max);
    let nphi = 2 * l_max + 2;
    let mut gram = vec![0.0; nc * nc];
    let mut y = vec![0.0; nc];
    for &(z, w) in &gl {
        let s = (1.0 - z * z).sqrt();
        for j in 0..nphi {
            let phi = 2.0 * PI * (j as f64 + 0.3) / nphi as f64;
            real_sh_f64(l_max, [s * phi.cos(), s * phi.sin(), z], &mut y);
            let wt = w * 2.0 * PI / nphi as f64;
            for a in 0..nc {
                for b in 0..nc {
                    gram[a * nc + b] += wt * y[a] * y[b];
                }
            }
        }
    }
    for a in 0..nc {
        for b in 0..nc {
            let want = if a == b { 1.0 } else { 0.0 };
            assert!(
                (gram[a * nc + b] - want).abs() < 1e-12,
                "({a},{b}): {}",
                gram[a * nc + b]
            );
        }
    }
}

#[test]
fn sh_of_unnormalised_vectors() {
    let mut y = vec![0.0; num_coeffs(6)];
    let mut w = vec![0.0; num_coeffs(6)];
    let r = real_sh_vec_f64(6, [3.0, 4.0, 12.0], &mut y);
    assert_eq!(r, 13.0);
    real_sh_f64(6, [3.0 / 13.0, 4.0 / 13.0, 12.0 / 13.0], &mut w);
    assert!(y.iter().zip(&w).all(|(a, b)| (a - b).abs() < 1e-14));
    let vecs = [[0.0f32, 0.0, 2.0], [0.0; 3]];
    let mut out = vec![0.0f32; 2 * num_coeffs(2)];
    let mut norms = [0.0f32; 2];
    real_sh_vec_batch_f32(2, &vecs, &mut out, &mut norms);
    assert_eq!(norms, [2.0, 0.0]);
    assert!((out[index(1, 0)] - 0.488_602_5).abs() < 1e-6);
}

// ---------------------------------------------------------------------------------------------
// Clebsch–Gordan

/// Particle Data Group, "Clebsch-Gordan coefficients, spherical harmonics, and d functions"
/// (Review of Particle Physics), 1×1 and 2×1 tables (values from memory; the table lists
/// squares with signs).
#[test]
fn cg_match_pdg_table() {
    let s = |v: f64| v.signum() * v.abs().sqrt();
    let cases = [
        ((1, 0, 1, 0, 2, 0), s(2.0 / 3.0)),
        ((1, 1, 1, -1, 1, 0), s(1.0 / 2.0)),
        ((2, 1, 1, -1, 1, 0), s(3.0 / 10.0)),
        ((1, 1, 1, -1, 2, 0), s(1.0 / 6.0)),
        ((1, 0, 1, 0, 0, 0), s(-1.0 / 3.0)),
        ((1, 1, 1, -1, 0, 0), s(1.0 / 3.0)),
        ((1, 0, 1, 0, 1, 0), 0.0),
        ((2, 0, 1, 0, 1, 0), s(-2.0 / 5.0)),
        ((2, -1, 1, 1, 1, 0), s(3.0 / 10.0)),
        ((1, 1, 1, 0, 2, 1), s(1.0 / 2.0)),
        ((1, 1, 1, 0, 1, 1), s(1.0 / 2.0)),
        ((1, 0, 1, 1, 1, 1), s(-1.0 / 2.0)),
    ];
    for ((j1, m1, j2, m2, j, m), want) in cases {
        let v = complex_cg(j1, m1, j2, m2, j, m);
        assert!(
            (v - want).abs() < 1e-14,
            "<{j1} {m1}; {j2} {m2} | {j} {m}> = {v}, PDG {want}"
        );
    }
}

/// Fixture from sympy.physics.quantum.cg.CG(...).doit() (sympy 1.14.0), 828 coefficients.
#[test]
fn cg_match_sympy() {
    let fx = fixture("cg_sympy.json");
    // Source: sympy 1.14.0, sympy.physics.quantum.cg.CG (recorded in the fixture).
    assert_eq!(fx["sympy_version"].as_str(), Some("1.14.0"));
    let items = fx["items"].as_array().unwrap();
    assert!(items.len() > 800);
    for it in items {
        let v: Vec<f64> = it
            .as_array()
            .unwrap()
            .iter()
            .map(|x| x.as_f64().unwrap())
            .collect();
        let got = complex_cg(
            v[0] as usize,
            v[1] as i64,
            v[2] as usize,
            v[3] as i64,
            v[4] as usize,
            v[5] as i64,
        );
        assert!((got - v[6]).abs() < 1e-12, "{v:?}: {got}");
    }
}

/// Orthogonality of the real coupling coefficients (follows from the CG orthogonality relation,
/// PDG review, and the unitarity of the change of basis).
#[test]
fn real_cg_orthogonality() {
    for l1 in 0..=3usize {
        for l2 in 0..=3usize {
            for l in l1.abs_diff(l2)..=l1 + l2 {
                for lp in l1.abs_diff(l2)..=l1 + l2 {
                    for m in -(l as i64)..=l as i64 {
                        for mp in -(lp as i64)..=lp as i64 {
                            let mut s = 0.0;
                            for m1 in -(l1 as i64)..=l1 as i64 {
                                for m2 in -(l2 as i64)..=l2 as i64 {
                                    s += real_cg(l1, m1, l2, m2, l, m)
                                        * real_cg(l1, m1, l2, m2, lp, mp);
                                }
                            }
                            let want = if l == lp && m == mp { 1.0 } else { 0.0 };
                            assert!(
                                (s - want).abs() < 1e-12,
                                "({l1},{l2}) {l},{m} / {lp},{mp}: {s}"
                            );
                        }
                    }
                }
            }
        }
    }
}

/// Degree 1 ⊗ degree 1: the l = 0 part is the dot product and the l = 1 part the cross product,
/// up to fixed factors (elementary vector algebra; vectors stored in (y, z, x) order).
#[test]
fn tensor_product_of_vectors_is_dot_and_cross() {
    let t = CouplingTable::new(2);
    let mut rng = SplitMix64::new(55);
    let to_yzx = |v: [f64; 3]| [v[1], v[2], v[0]];
    for _ in 0..10 {
        let (p, q) = (rng.unit_vector(), rng.unit_vector());
        let (a, b) = (to_yzx(p), to_yzx(q));
        let mut o0 = [0.0];
        let mut o1 = [0.0; 3];
        tensor_product(&t, &a, &b, 0, &mut o0);
        tensor_product(&t, &a, &b, 1, &mut o1);
        let dotv = p[0] * q[0] + p[1] * q[1] + p[2] * q[2];
        let c = Vector3::from(p).cross(&Vector3::from(q));
        assert!(
            (o0[0] + dotv / 3f64.sqrt()).abs() < 1e-14,
            "{} vs {}",
            o0[0],
            dotv
        );
        let cy = to_yzx([c.x, c.y, c.z]);
        for i in 0..3 {
            assert!((o1[i].abs() - cy[i].abs() / 2f64.sqrt()).abs() < 1e-14);
            assert!((o1[i] - o1[0].signum() * cy[0].signum() * cy[i] / 2f64.sqrt()).abs() < 1e-14);
        }
    }
}

#[test]
fn tensor_product_commutes_with_rotation() {
    let seed = 2024;
    let mut rng = SplitMix64::new(seed);
    let l_max = 4;
    let t = CouplingTable::new(l_max);
    for _ in 0..5 {
        let r = random_rotation(&mut rng);
        let d = WignerD::new(&r, l_max);
        for l1 in 0..=l_max {
            for l2 in 0..=l_max {
                for l in l1.abs_diff(l2)..=(l1 + l2).min(l_max) {
                    let a: Vec<f64> = (0..2 * l1 + 1).map(|_| rng.normal()).collect();
                    let b: Vec<f64> = (0..2 * l2 + 1).map(|_| rng.normal()).collect();
                    let rot = |x: &[f64], l: usize| -> Vec<f64> {
                        let n = 2 * l + 1;
                        let blk = d.block(l);
                        (0..n)
                            .map(|i| (0..n).map(|j| blk[i * n + j] * x[j]).sum())
                            .collect()
                    };
                    let mut p = vec![0.0; 2 * l + 1];
                    let mut q = vec![0.0; 2 * l + 1];
                    tensor_product(&t, &rot(&a, l1), &rot(&b, l2), l, &mut p);
                    tensor_product(&t, &a, &b, l, &mut q);
                    let q = rot(&q, l);
                    let scale = 1.0 + q.iter().map(|v| v.abs()).sum::<f64>();
                    for i in 0..p.len() {
                        assert!(
                            (p[i] - q[i]).abs() < 1e-12 * scale,
                            "seed {seed} path ({l1},{l2},{l})"
                        );
                    }
                    let e: f64 = p.iter().map(|v| v * v).sum();
                    assert!(
                        e > 0.0 || (l1 + l2 + l) % 2 == 1 && l1 == l2,
                        "path ({l1},{l2},{l}) vanished"
                    );
                }
            }
        }
    }
}

// ---------------------------------------------------------------------------------------------
// Wigner-D

/// Particle Data Group table of d functions (same review as above; values from memory), e.g.
/// d¹₁₁ = (1 + cos β)/2, d¹₁₀ = −sin β/√2, d²₀₀ = (3cos²β − 1)/2.
#[test]
fn small_d_matches_pdg() {
    for k in 0..12 {
        let b = -2.9 + 0.53 * k as f64;
        let (c, s) = (b.cos(), b.sin());
        let cases = [
            (1, 1, 1, (1.0 + c) / 2.0),
            (1, 1, 0, -s / 2f64.sqrt()),
            (1, 1, -1, (1.0 - c) / 2.0),
            (1, 0, 0, c),
            (2, 2, 2, ((1.0 + c) / 2.0).powi(2)),
            (2, 2, 1, -(1.0 + c) / 2.0 * s),
            (2, 2, 0, 6f64.sqrt() / 4.0 * s * s),
            (2, 2, -1, -(1.0 - c) / 2.0 * s),
            (2, 2, -2, ((1.0 - c) / 2.0).powi(2)),
            (2, 1, 1, (1.0 + c) / 2.0 * (2.0 * c - 1.0)),
            (2, 1, 0, -(1.5f64).sqrt() * s * c),
            (2, 1, -1, (1.0 - c) / 2.0 * (2.0 * c + 1.0)),
            (2, 0, 0, (3.0 * c * c - 1.0) / 2.0),
        ];
        for (l, mp, m, want) in cases {
            let v = small_d(l, mp, m, b);
            assert!(
                (v - want).abs() < 1e-14,
                "d^{l}_{mp}{m}({b}) = {v}, PDG {want}"
            );
            // symmetry d_{m'm} = (−1)^{m−m'} d_{mm'} (PDG, from memory)
            let sym = if (m - mp) % 2 == 0 { 1.0 } else { -1.0 };
            assert!((small_d(l, m, mp, b) - sym * v).abs() < 1e-14);
        }
    }
}

/// Complex entry of the change of basis T (complex Condon–Shortley harmonics → ours), the
/// conversion scipy's values were checked with above.
fn t_entry(m: i64, mu: i64) -> (f64, f64) {
    let h = std::f64::consts::FRAC_1_SQRT_2;
    let sg = |k: i64| if k % 2 == 0 { 1.0 } else { -1.0 };
    match (m.signum(), mu) {
        (0, 0) => (1.0, 0.0),
        (1, _) if mu == m => (sg(m) * h, 0.0),
        (1, _) if mu == -m => (h, 0.0),
        (-1, _) if mu == -m => (0.0, -sg(-m) * h),
        (-1, _) if mu == m => (0.0, h),
        _ => (0.0, 0.0),
    }
}

/// Our real D for a rotation about y equals T d(β) T† (derivation in the wigner module docs),
/// with d from Wigner's formula checked against the PDG values above.
#[test]
fn real_d_about_y_relates_to_small_d() {
    for beta in [0.3, 1.1, -2.0, 2.9] {
        let l_max = 6;
        let d = WignerD::new(&rot_y(beta), l_max);
        for l in 0..=l_max {
            let li = l as i64;
            for a in -li..=li {
                for b in -li..=li {
                    let (mut re, mut im) = (0.0, 0.0);
                    for mu in -li..=li {
                        for nu in -li..=li {
                            let ta = t_entry(a, mu);
                            let tb = t_entry(b, nu);
                            let dd = small_d(l, mu, nu, beta);
                            // ta * dd * conj(tb)
                            re += dd * (ta.0 * tb.0 + ta.1 * tb.1);
                            im += dd * (ta.1 * tb.0 - ta.0 * tb.1);
                        }
                    }
                    assert!(im.abs() < 1e-13);
                    assert!(
                        (d.get(l, a, b) - re).abs() < 1e-13,
                        "β={beta} l={l} ({a},{b}): {} vs {re}",
                        d.get(l, a, b)
                    );
                }
            }
        }
    }
}

#[test]
fn wigner_d_properties() {
    let seed = 7;
    let mut rng = SplitMix64::new(seed);
    let l_max = 12;
    for _ in 0..10 {
        let (r1, r2) = (random_rotation(&mut rng), random_rotation(&mut rng));
        let (d1, d2, d12) = (
            WignerD::new(&r1, l_max),
            WignerD::new(&r2, l_max),
            WignerD::new(&(r1 * r2), l_max),
        );
        let dt = WignerD::new(&r1.transpose(), l_max);
        for l in 0..=l_max {
            let n = 2 * l + 1;
            let (a, b, c, t) = (d1.block(l), d2.block(l), d12.block(l), dt.block(l));
            for i in 0..n {
                for j in 0..n {
                    let ortho: f64 = (0..n).map(|k| a[i * n + k] * a[j * n + k]).sum();
                    let want = if i == j { 1.0 } else { 0.0 };
                    assert!(
                        (ortho - want).abs() < 1e-12,
                        "seed {seed}: D^{l} not orthogonal"
                    );
                    let prod: f64 = (0..n).map(|k| a[i * n + k] * b[k * n + j]).sum();
                    assert!(
                        (prod - c[i * n + j]).abs() < 1e-12,
                        "seed {seed}: D(R1R2) != D(R1)D(R2) at l={l}"
                    );
                    assert!(
                        (t[i * n + j] - a[j * n + i]).abs() < 1e-12,
                        "seed {seed}: D(Rᵀ) != D(R)ᵀ"
                    );
                }
            }
        }
        // D^1 is R with rows and columns in (y, z, x) order
        let p = [1, 2, 0];
        for i in 0..3 {
            for j in 0..3 {
                assert_eq!(d1.block(1)[i * 3 + j], r1[(p[i], p[j])]);
            }
        }
    }
}

#[test]
fn harmonics_rotate_by_wigner_d() {
    let seed = 12345;
    let mut rng = SplitMix64::new(seed);
    let l_max = 12;
    let nc = num_coeffs(l_max);
    let (mut y, mut yr, mut dy) = (vec![0.0; nc], vec![0.0; nc], vec![0.0; nc]);
    let (mut y32, mut yr32, mut dy32) = (vec![0.0f32; nc], vec![0.0f32; nc], vec![0.0f32; nc]);
    for _ in 0..30 {
        let r = random_rotation(&mut rng);
        let d = WignerD::new(&r, l_max);
        let u = rng.unit_vector();
        let ru = apply_rot(&r, u);
        real_sh_f64(l_max, u, &mut y);
        real_sh_f64(l_max, ru, &mut yr);
        d.apply(&y, &mut dy);
        real_sh_f32(l_max, u.map(|v| v as f32), &mut y32);
        real_sh_f32(l_max, ru.map(|v| v as f32), &mut yr32);
        d.apply_f32(&y32, &mut dy32);
        for k in 0..nc {
            assert!(
                (yr[k] - dy[k]).abs() < 1e-12,
                "seed {seed}, k={k}: {} vs {}",
                yr[k],
                dy[k]
            );
            assert!(
                (yr32[k] - dy32[k]).abs() < 1e-5,
                "f32 seed {seed}, k={k}: {} vs {}",
                yr32[k],
                dy32[k]
            );
        }
    }
}

#[test]
fn f32_shells_and_search() {
    let mut rng = SplitMix64::new(21);
    let l_max = 4;
    let nc = num_coeffs(l_max);
    let r = random_rotation(&mut rng);
    let d = WignerD::new(&r, l_max);
    let a: Vec<f32> = (0..3 * nc).map(|_| rng.normal() as f32).collect();
    let mut b = vec![0.0f32; 3 * nc];
    d.apply_shells_f32(3, &a, &mut b);
    let a64: Vec<f64> = a.iter().map(|&v| v as f64).collect();
    let mut b64 = vec![0.0; 3 * nc];
    d.apply_shells(3, &a64, &mut b64);
    assert!(
        b.iter()
            .zip(&b64)
            .all(|(x, y)| (*x as f64 - y).abs() < 1e-5)
    );
    let res = RotationSearcher::new(l_max).search_f32(&a, &b).unwrap();
    // f32 rounding of the inputs limits the accuracy
    assert!(geodesic_angle(&res.best.rotation, &r).to_degrees() < 0.01);
}

#[test]
fn shells_rotate_together() {
    let mut rng = SplitMix64::new(3);
    let l_max = 4;
    let nc = num_coeffs(l_max);
    let r = random_rotation(&mut rng);
    let d = WignerD::new(&r, l_max);
    let a: Vec<f64> = (0..5 * nc).map(|_| rng.normal()).collect();
    let mut b = vec![0.0; 5 * nc];
    d.apply_shells(5, &a, &mut b);
    let mut back = vec![0.0; nc];
    for s in 0..5 {
        d.apply_transpose(&b[s * nc..(s + 1) * nc], &mut back);
        for k in 0..nc {
            assert!((back[k] - a[s * nc + k]).abs() < 1e-13);
        }
    }
}

// ---------------------------------------------------------------------------------------------
// Rotation search

/// Coefficients `[n][lm]` of a point pattern: Σ_q w_n(q) Y(u_q).
fn pattern_coeffs(points: &[[f64; 3]], l_max: usize, shells: usize) -> Vec<f64> {
    let nc = num_coeffs(l_max);
    let mut c = vec![0.0; shells * nc];
    let mut y = vec![0.0; nc];
    for p in points {
        let r = real_sh_vec_f64(l_max, *p, &mut y);
        for s in 0..shells {
            let mu = (s as f64 + 0.5) / shells as f64;
            let w = (-(r - mu).powi(2) * (shells * shells) as f64 / 2.0).exp();
            for k in 0..nc {
                c[s * nc + k] += w * y[k];
            }
        }
    }
    c
}

#[test]
fn search_recovers_random_rotations() {
    let l_max = 4;
    let shells = 6;
    let nc = num_coeffs(l_max);
    let searcher = RotationSearcher::new(l_max);
    for seed in 0..20u64 {
        let mut rng = SplitMix64::new(1000 + seed);
        // an irregular point pattern in the unit ball
        let pts: Vec<[f64; 3]> = (0..40)
            .map(|_| {
                let u = rng.unit_vector();
                let r = rng.uniform(0.1, 1.0);
                u.map(|v| v * r)
            })
            .collect();
        let a = pattern_coeffs(&pts, l_max, shells);
        let r = random_rotation(&mut rng);
        let rotated: Vec<[f64; 3]> = pts.iter().map(|p| apply_rot(&r, *p)).collect();
        let b = pattern_coeffs(&rotated, l_max, shells);
        assert_eq!(a.len(), shells * nc);
        let res = searcher.search(&a, &b).unwrap();
        let err = geodesic_angle(&res.best.rotation, &r).to_degrees();
        assert!(err <= 0.5, "seed {}: rotation error {err}°", 1000 + seed);
        assert!(
            !res.ambiguous,
            "seed {}: irregular pattern flagged ambiguous",
            1000 + seed
        );
    }
}

#[test]
fn search_flags_fourfold_symmetry() {
    let l_max = 4;
    let shells = 6;
    let searcher = RotationSearcher::new(l_max);
    let mut rng = SplitMix64::new(77);
    // a few generic points and their images under R_z(90°)^k: symmetric under C4 about z
    let base: Vec<[f64; 3]> = (0..5)
        .map(|_| {
            let u = rng.unit_vector();
            let r = rng.uniform(0.2, 0.9);
            u.map(|v| v * r)
        })
        .collect();
    let mut pts = Vec::new();
    for k in 0..4 {
        let q = rot_z(k as f64 * PI / 2.0);
        pts.extend(base.iter().map(|p| apply_rot(&q, *p)));
    }
    let a = pattern_coeffs(&pts, l_max, shells);
    let r = random_rotation(&mut rng);
    let rotated: Vec<[f64; 3]> = pts.iter().map(|p| apply_rot(&r, *p)).collect();
    let b = pattern_coeffs(&rotated, l_max, shells);
    let res = searcher.search(&a, &b).unwrap();
    assert!(res.ambiguous, "C4-symmetric pattern not flagged: {res:?}");
    let second = res.second.as_ref().unwrap();
    // the best is one of R·R_z(k·90°); the second another of them
    let dist_to_family = |m: &Matrix3<f64>| {
        (0..4)
            .map(|k| geodesic_angle(m, &(r * rot_z(k as f64 * PI / 2.0))).to_degrees())
            .fold(f64::MAX, f64::min)
    };
    assert!(dist_to_family(&res.best.rotation) < 0.5);
    assert!(dist_to_family(&second.rotation) < 0.5);
    let ang = res.second_angle_deg.unwrap();
    assert!(
        (ang - 90.0).abs() < 1.0 || (ang - 180.0).abs() < 1.0,
        "second maximum at {ang}°"
    );
}

/// Rotation error against relative Gaussian noise on the target coefficients (prints a table;
/// run with `--nocapture` to see it).
#[test]
fn search_error_vs_noise() {
    let l_max = 4;
    let shells = 6;
    let nc = num_coeffs(l_max);
    let searcher = RotationSearcher::new(l_max);
    let trials = 30;
    println!("relative noise | median error (deg) | 90th pct (deg) | max (deg)");
    for &noise in &[0.0, 0.01, 0.02, 0.05, 0.1, 0.2, 0.3, 0.5, 1.0] {
        let mut errs = Vec::new();
        for t in 0..trials {
            let mut rng = SplitMix64::new(5000 + t);
            let a: Vec<f64> = (0..shells * nc).map(|_| rng.normal()).collect();
            let r = random_rotation(&mut rng);
            let mut b = vec![0.0; a.len()];
            WignerD::new(&r, l_max).apply_shells(shells, &a, &mut b);
            // noise of standard deviation `noise` × RMS coefficient
            let rms = (b.iter().map(|v| v * v).sum::<f64>() / b.len() as f64).sqrt();
            for v in b.iter_mut() {
                *v += noise * rms * rng.normal();
            }
            let res = searcher.search(&a, &b).unwrap();
            errs.push(geodesic_angle(&res.best.rotation, &r).to_degrees());
        }
        errs.sort_by(f64::total_cmp);
        let med = errs[trials as usize / 2];
        let p90 = errs[trials as usize * 9 / 10];
        let max = errs[trials as usize - 1];
        println!("{noise:>14.2} | {med:>18.3} | {p90:>14.3} | {max:>9.3}");
        if noise == 0.0 {
            assert!(max < 0.01, "exact data: max error {max}°");
        }
        if noise <= 0.05 {
            assert!(med < 2.0, "noise {noise}: median error {med}°");
        }
    }
}

#[test]
fn search_options_and_small_perturbation() {
    // a rotation close to identity is found exactly at a finer grid too
    let l_max = 3;
    let nc = num_coeffs(l_max);
    let searcher = RotationSearcher::with_options(
        l_max,
        SearchOptions {
            grid_level: 2,
            ..SearchOptions::default()
        },
    );
    let mut rng = SplitMix64::new(9);
    let a: Vec<f64> = (0..2 * nc).map(|_| rng.normal()).collect();
    let r = rotation_vector_to_matrix([0.01, -0.02, 0.005]);
    let mut b = vec![0.0; a.len()];
    WignerD::new(&r, l_max).apply_shells(2, &a, &mut b);
    let res = searcher.search(&a, &b).unwrap();
    assert!(geodesic_angle(&res.best.rotation, &r).to_degrees() < 0.01);
}
