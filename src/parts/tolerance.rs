//! ISO 2768-1 general tolerances for linear dimensions (permissible deviations, ± mm).
//!
//! Table of ISO 2768-1:1989, "General tolerances — Part 1: Tolerances for linear and angular
//! dimensions without individual tolerance indications", table 1 (linear dimensions), values
//! **from memory** (not copied from the standard; check against your copy before relying on
//! them). Nominal size ranges in millimetres; a dash in the standard (no value) is `None`.
//! The class letters: f fine, m medium, c coarse, v very coarse.
//!
//! equiscan applies the class to the part's largest bounding-box dimension, taking file units
//! as millimetres, and uses the ± value as the deviation band.

use serde::Serialize;

/// Upper ends of the nominal size ranges, mm (the first range starts at 0.5 mm).
pub const RANGE_UPPER_MM: [f64; 8] = [3.0, 6.0, 30.0, 120.0, 400.0, 1000.0, 2000.0, 4000.0];

/// Permissible deviations (± mm) per class and range (ISO 2768-1 table 1, from memory).
pub const TABLE: [(char, [Option<f64>; 8]); 4] = [
    (
        'f',
        [
            Some(0.05),
            Some(0.05),
            Some(0.1),
            Some(0.15),
            Some(0.2),
            Some(0.3),
            Some(0.5),
            None,
        ],
    ),
    (
        'm',
        [
            Some(0.1),
            Some(0.1),
            Some(0.2),
            Some(0.3),
            Some(0.5),
            Some(0.8),
            Some(1.2),
            Some(2.0),
        ],
    ),
    (
        'c',
        [
            Some(0.2),
            Some(0.3),
            Some(0.5),
            Some(0.8),
            Some(1.2),
            Some(2.0),
            Some(3.0),
            Some(4.0),
        ],
    ),
    (
        'v',
        [
            None,
            Some(0.5),
            Some(1.0),
            Some(1.5),
            Some(2.5),
            Some(4.0),
            Some(6.0),
            Some(8.0),
        ],
    ),
];

/// A tolerance chosen from the table.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct GeneralTolerance {
    /// Class letter.
    pub class: char,
    /// The nominal size looked up, mm.
    pub size_mm: f64,
    /// The range `(lower, upper]` it falls in, mm.
    pub range_mm: [f64; 2],
    /// Permissible deviation, ± mm.
    pub tolerance_mm: f64,
}

/// Looks up class `class` (`f`, `m`, `c`, `v`) for a nominal size in mm. `Err` says why
/// not (unknown class, size outside 0.5–4000 mm, or no value in the table).
pub fn general_tolerance(class: char, size_mm: f64) -> Result<GeneralTolerance, String> {
    let row = TABLE
        .iter()
        .find(|r| r.0 == class)
        .ok_or_else(|| format!("tolerance class {class} is not one of f, m, c, v"))?;
    if !(0.5..=4000.0).contains(&size_mm) {
        return Err(format!(
            "the part's size {size_mm:.1} mm is outside the table's 0.5–4000 mm"
        ));
    }
    let k = RANGE_UPPER_MM
        .iter()
        .position(|&u| size_mm <= u)
        .expect("size at most 4000");
    let lower = if k == 0 { 0.5 } else { RANGE_UPPER_MM[k - 1] };
    let t = row.1[k].ok_or_else(|| {
        format!(
            "class {class} gives no value for sizes over {lower} up to {} mm",
            RANGE_UPPER_MM[k]
        )
    })?;
    Ok(GeneralTolerance {
        class,
        size_mm,
        range_mm: [lower, RANGE_UPPER_MM[k]],
        tolerance_mm: t,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// ISO 2768-1 table 1 (from memory): medium class, 30–120 mm is ±0.3 mm; fine class,
    /// 6–30 mm ±0.1; very coarse has no value below 3 mm; range ends belong to the lower range.
    #[test]
    fn iso_2768_lookups() {
        assert_eq!(general_tolerance('m', 80.0).unwrap().tolerance_mm, 0.3);
        assert_eq!(general_tolerance('f', 10.0).unwrap().tolerance_mm, 0.1);
        assert_eq!(general_tolerance('c', 120.0).unwrap().tolerance_mm, 0.8);
        assert_eq!(general_tolerance('c', 120.1).unwrap().tolerance_mm, 1.2);
        assert_eq!(general_tolerance('v', 1000.0).unwrap().tolerance_mm, 4.0);
        assert!(general_tolerance('v', 2.0).is_err());
        assert!(general_tolerance('f', 3000.0).is_err());
        assert!(general_tolerance('x', 10.0).is_err());
        assert!(general_tolerance('m', 5000.0).is_err());
    }
}
