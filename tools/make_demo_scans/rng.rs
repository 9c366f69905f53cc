//! A small deterministic random source: SplitMix64 for integers, Box–Muller for normal
//! deviates, Shoemake's method for uniformly random rotations.
//!
//! Every stream is derived from a seed with [`Rng::derive`], so that the numbers a ray or a
//! sample sees depend only on its own index, never on the order in which threads run.

use equiscan::so3::rng::SplitMix64;
use nalgebra::{Matrix3, UnitQuaternion};

/// The library's SplitMix64 generator with a cached second Box–Muller deviate.
#[derive(Debug, Clone)]
pub struct Rng {
    bits: SplitMix64,
    spare: Option<f64>,
}

impl Rng {
    /// A generator started at `seed`.
    pub fn new(seed: u64) -> Self {
        Rng {
            bits: SplitMix64::new(seed),
            spare: None,
        }
    }

    /// An independent stream for item `index` of the stream family `seed`.
    pub fn derive(seed: u64, index: u64) -> Self {
        let mut mix = Rng::new(seed ^ index.wrapping_mul(0xD1B5_4A32_D192_ED03));
        let s = mix.next_u64();
        Rng::new(s)
    }

    /// Next 64 random bits.
    pub fn next_u64(&mut self) -> u64 {
        self.bits.next_u64()
    }

    /// Uniform in [0, 1), 53 random bits.
    pub fn uniform(&mut self) -> f64 {
        self.bits.next_f64()
    }

    /// Uniform in [lo, hi).
    pub fn range(&mut self, lo: f64, hi: f64) -> f64 {
        lo + (hi - lo) * self.uniform()
    }

    /// Standard normal deviate (Box–Muller, both values used).
    pub fn normal(&mut self) -> f64 {
        if let Some(z) = self.spare.take() {
            return z;
        }
        let u1 = 1.0 - self.uniform(); // (0, 1]
        let u2 = self.uniform();
        let r = (-2.0 * u1.ln()).sqrt();
        let a = std::f64::consts::TAU * u2;
        self.spare = Some(r * a.sin());
        r * a.cos()
    }

    /// A uniformly random rotation (Shoemake 1992, "Uniform random rotations").
    pub fn rotation(&mut self) -> Matrix3<f64> {
        let u1 = self.uniform();
        let u2 = self.uniform();
        let u3 = self.uniform();
        let tau = std::f64::consts::TAU;
        let a = (1.0 - u1).sqrt();
        let b = u1.sqrt();
        let q = nalgebra::Quaternion::new(
            b * (tau * u3).cos(),
            a * (tau * u2).sin(),
            a * (tau * u2).cos(),
            b * (tau * u3).sin(),
        );
        *UnitQuaternion::from_quaternion(q)
            .to_rotation_matrix()
            .matrix()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn normal_deviates_have_unit_variance() {
        let mut rng = Rng::new(7);
        let n = 200_000;
        let (mut s, mut s2) = (0.0, 0.0);
        for _ in 0..n {
            let z = rng.normal();
            s += z;
            s2 += z * z;
        }
        let mean = s / n as f64;
        let var = s2 / n as f64 - mean * mean;
        assert!(mean.abs() < 0.01, "mean {mean}");
        assert!((var - 1.0).abs() < 0.02, "variance {var}");
    }

    #[test]
    fn rotations_are_proper() {
        let mut rng = Rng::new(3);
        for _ in 0..100 {
            let r = rng.rotation();
            assert!((r.determinant() - 1.0).abs() < 1e-12);
            assert!((r.transpose() * r - Matrix3::identity()).norm() < 1e-12);
        }
    }
}
