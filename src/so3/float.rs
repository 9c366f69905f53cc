//! A small floating-point trait so that the spherical-harmonic kernels are written once and
//! monomorphised for `f32` and `f64`.

use core::ops::{Add, AddAssign, Div, Mul, Neg, Sub};

/// The floating-point operations the harmonic kernels need; implemented for `f32` and `f64` only.
pub trait Real:
    Copy
    + PartialOrd
    + Add<Output = Self>
    + Sub<Output = Self>
    + Mul<Output = Self>
    + Div<Output = Self>
    + Neg<Output = Self>
    + AddAssign
    + Send
    + Sync
    + 'static
{
    /// Additive identity.
    const ZERO: Self;
    /// Multiplicative identity.
    const ONE: Self;
    /// Conversion from `f64` (rounding to nearest for `f32`).
    fn from_f64(v: f64) -> Self;
    /// Widening conversion to `f64`.
    fn to_f64(self) -> f64;
    /// Square root.
    fn sqrt(self) -> Self;
}

impl Real for f32 {
    const ZERO: Self = 0.0;
    const ONE: Self = 1.0;
    #[inline(always)]
    fn from_f64(v: f64) -> Self {
        v as f32
    }
    #[inline(always)]
    fn to_f64(self) -> f64 {
        self as f64
    }
    #[inline(always)]
    fn sqrt(self) -> Self {
        f32::sqrt(self)
    }
}

impl Real for f64 {
    const ZERO: Self = 0.0;
    const ONE: Self = 1.0;
    #[inline(always)]
    fn from_f64(v: f64) -> Self {
        v
    }
    #[inline(always)]
    fn to_f64(self) -> f64 {
        self
    }
    #[inline(always)]
    fn sqrt(self) -> Self {
        f64::sqrt(self)
    }
}

/// The arithmetic of a polynomial kernel (the closed-form harmonics): products, sums,
/// differences and constants. Implemented for `f32`, `f64` and [`Lanes8`].
pub(crate) trait Poly:
    Copy + Add<Output = Self> + Sub<Output = Self> + Mul<Output = Self>
{
    /// Multiplicative identity.
    const UNIT: Self;
    /// A constant, from `f64` (rounded to nearest for `f32` values).
    fn constant(v: f64) -> Self;
}

impl Poly for f32 {
    const UNIT: Self = 1.0;
    #[inline(always)]
    fn constant(v: f64) -> Self {
        v as f32
    }
}

impl Poly for f64 {
    const UNIT: Self = 1.0;
    #[inline(always)]
    fn constant(v: f64) -> Self {
        v
    }
}

/// Eight `f32` values operated on lane by lane: the same IEEE operations as on one `f32`, so
/// each lane's result is bit-identical to the scalar one. Inlined into a caller compiled for
/// AVX2 each operation is one 256-bit instruction.
#[derive(Clone, Copy, Debug, PartialEq)]
pub(crate) struct Lanes8(pub [f32; 8]);

impl Lanes8 {
    /// All lanes `v`.
    #[inline(always)]
    pub(crate) fn splat(v: f32) -> Self {
        Lanes8([v; 8])
    }
}

macro_rules! lanes_op {
    ($tr:ident, $f:ident, $op:tt) => {
        impl $tr for Lanes8 {
            type Output = Lanes8;
            #[inline(always)]
            fn $f(self, o: Lanes8) -> Lanes8 {
                let mut r = self.0;
                for (a, b) in r.iter_mut().zip(o.0) {
                    *a $op b;
                }
                Lanes8(r)
            }
        }
    };
}
lanes_op!(Add, add, +=);
lanes_op!(Sub, sub, -=);
lanes_op!(Mul, mul, *=);

impl Poly for Lanes8 {
    const UNIT: Self = Lanes8([1.0; 8]);
    #[inline(always)]
    fn constant(v: f64) -> Self {
        Lanes8::splat(v as f32)
    }
}
