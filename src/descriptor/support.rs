//! The support radius suggested from a measured point spacing: one rule for every command.

use crate::spatial::suggested_support_radius;

/// The suggested support radius for a point spacing (file units): 5 × the spacing
/// ([`crate::spatial::SUPPORT_RADIUS_PER_SPACING`], common practice: a few to ten sampling
/// distances give 60–100 neighbours on a scanned surface), rounded to two significant digits
/// (a rule of thumb needs no more, and a round value gives readable column names such as
/// `r1p4`). `info`, `features` and `align` all use this value.
pub fn suggested_radius(spacing: f32) -> f32 {
    round_2_significant(suggested_support_radius(spacing))
}

/// `x` rounded to two significant digits; non-finite or non-positive values unchanged.
pub fn round_2_significant(x: f32) -> f32 {
    if !(x.is_finite() && x > 0.0) {
        return x;
    }
    let e = (x as f64).log10().floor() as i32 - 1;
    let p = 10f64.powi(e);
    ((x as f64 / p).round() * p) as f32
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn two_significant_digits() {
        assert_eq!(round_2_significant(0.012345), 0.012);
        assert_eq!(round_2_significant(1.449), 1.4);
        assert_eq!(round_2_significant(1.45), 1.5);
        assert_eq!(round_2_significant(987.0), 990.0);
        assert_eq!(suggested_radius(0.28), 1.4);
        assert!(round_2_significant(f32::NAN).is_nan());
    }
}
