//! Colours: a qualitative palette for layers and colour maps for scalar values.
//!
//! The layer palette keeps hues apart for the common forms of colour-blindness (orange against
//! blue first). The colour maps are piecewise-linear through a few hand-picked anchors; the
//! sequential map rises steadily in lightness from dark violet to pale yellow, so it also reads
//! in grey, and the diverging map runs from blue through a light neutral to red.

use super::canvas::Rgb;

/// Layer colours in order of use: orange, blue, bluish green, vermilion, sky blue, purple.
pub const LAYER_PALETTE: [Rgb; 6] = [
    [230, 145, 20],
    [20, 105, 185],
    [0, 155, 115],
    [205, 85, 10],
    [95, 175, 230],
    [170, 90, 150],
];

/// SOURCE in registration pictures: plum, dark (CIELAB L* 33).
///
/// With [`TARGET_COLOUR`] it differs in lightness as well as hue, so the pair stays apart for
/// colour-blind readers: simulated with the Machado, Oliveira & Fernandes (2009) matrices at
/// full severity (coefficients from memory), the CIELAB ΔE between the two is 101 for
/// deuteranopia and 126 for protanopia (144 with normal vision).
pub const SOURCE_COLOUR: Rgb = [122, 40, 140];

/// TARGET in registration pictures: leaf green, light (CIELAB L* 70). See [`SOURCE_COLOUR`].
pub const TARGET_COLOUR: Rgb = [120, 190, 40];

/// Colour for points without a value (NaN).
pub const NO_VALUE: Rgb = [150, 150, 150];

/// A map from a value in `0..=1` to a colour.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ColourMap {
    /// Dark violet → blue → teal → green → pale yellow, lightness rising throughout.
    Sequential,
    /// Blue → light neutral (at 0.5) → red, for signed values such as deviations.
    Diverging,
}

const SEQUENTIAL: [Rgb; 7] = [
    [50, 15, 75],
    [62, 55, 135],
    [45, 100, 150],
    [30, 140, 140],
    [60, 178, 110],
    [160, 208, 65],
    [245, 230, 80],
];

const DIVERGING: [Rgb; 5] = [
    [35, 75, 160],
    [125, 165, 215],
    [235, 232, 225],
    [225, 140, 110],
    [175, 35, 40],
];

impl ColourMap {
    /// The colour for `t`, clamped to `0..=1`; NaN gives [`NO_VALUE`].
    pub fn colour(self, t: f32) -> Rgb {
        if t.is_nan() {
            return NO_VALUE;
        }
        let anchors: &[Rgb] = match self {
            ColourMap::Sequential => &SEQUENTIAL,
            ColourMap::Diverging => &DIVERGING,
        };
        let x = t.clamp(0.0, 1.0) * (anchors.len() - 1) as f32;
        let i = (x.floor() as usize).min(anchors.len() - 2);
        let f = x - i as f32;
        let (a, b) = (anchors[i], anchors[i + 1]);
        std::array::from_fn(|k| (a[k] as f32 + (b[k] as f32 - a[k] as f32) * f).round() as u8)
    }
}

/// `colour` darkened towards black by `amount` (0 = unchanged, 1 = black).
pub fn darken(colour: Rgb, amount: f32) -> Rgb {
    let keep = 1.0 - amount.clamp(0.0, 1.0);
    colour.map(|c| (c as f32 * keep).round() as u8)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn lightness(c: Rgb) -> f32 {
        // Rec. 709 luma, good enough to check monotonicity.
        0.2126 * c[0] as f32 + 0.7152 * c[1] as f32 + 0.0722 * c[2] as f32
    }

    #[test]
    fn sequential_map_rises_in_lightness() {
        let mut last = -1.0;
        for i in 0..=100 {
            let l = lightness(ColourMap::Sequential.colour(i as f32 / 100.0));
            assert!(l > last, "lightness falls at {i}%");
            last = l;
        }
    }

    #[test]
    fn maps_hit_their_ends_and_clamp() {
        assert_eq!(ColourMap::Sequential.colour(0.0), SEQUENTIAL[0]);
        assert_eq!(ColourMap::Sequential.colour(1.0), SEQUENTIAL[6]);
        assert_eq!(ColourMap::Sequential.colour(7.0), SEQUENTIAL[6]);
        assert_eq!(ColourMap::Diverging.colour(-1.0), DIVERGING[0]);
        assert_eq!(ColourMap::Diverging.colour(0.5), DIVERGING[2]);
        assert_eq!(ColourMap::Diverging.colour(f32::NAN), NO_VALUE);
    }

    #[test]
    fn darken_scales_towards_black() {
        assert_eq!(darken([200, 100, 50], 0.5), [100, 50, 25]);
        assert_eq!(darken([200, 100, 50], 0.0), [200, 100, 50]);
        assert_eq!(darken([200, 100, 50], 2.0), [0, 0, 0]);
    }
}
