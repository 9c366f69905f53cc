//! [`Recipe`]: the descriptor's parameters, validated when built, and the column layout they give.

use serde::{Deserialize, Serialize};

use crate::error::{Error, Result};

/// The default recipe version (the descriptor of the design, version 2: terms of degree
/// `l ≥ 1` fade out at the centre). [`OLDEST_RECIPE_VERSION`] up to this one are computable.
pub const RECIPE_VERSION: u32 = 2;

/// The oldest recipe version still computed (version 1: no fade at the centre).
pub const OLDEST_RECIPE_VERSION: u32 = 1;

/// Largest maximum degree `L` accepted.
pub const MAX_DEGREE: usize = 12;

/// Largest number of radial shells `N` accepted.
pub const MAX_SHELLS: usize = 32;

/// Default maximum degree `L`.
pub const DEFAULT_DEGREE: usize = 4;

/// Default number of radial shells `N`.
pub const DEFAULT_SHELLS: usize = 6;

/// Which invariants a recipe outputs.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Invariants {
    /// Norms `‖c_nl‖`, `N(L+1)` values per scale.
    pub norms: bool,
    /// Power spectrum `P_nn'l`, `N(N+1)/2·(L+1)` values per scale.
    pub power_spectrum: bool,
    /// Bispectrum `B_n,l1,l2,l`, one value per shell and admissible `(l1 ≤ l2, l)`.
    pub bispectrum: bool,
}

impl Default for Invariants {
    /// Norms and power spectrum; no bispectrum.
    fn default() -> Self {
        Invariants {
            norms: true,
            power_spectrum: true,
            bispectrum: false,
        }
    }
}

impl Invariants {
    /// Parses a comma-separated list of `norms`, `power` (or `power-spectrum`), `bispectrum`
    /// (or `none`, for coefficients only).
    pub fn parse(list: &str) -> Result<Self> {
        let mut out = Invariants {
            norms: false,
            power_spectrum: false,
            bispectrum: false,
        };
        for word in list.split(',').map(str::trim).filter(|w| !w.is_empty()) {
            match word.to_ascii_lowercase().as_str() {
                "norms" | "norm" => out.norms = true,
                "power" | "power-spectrum" | "ps" => out.power_spectrum = true,
                "bispectrum" | "bs" => out.bispectrum = true,
                "none" => {}
                other => {
                    return Err(Error::invalid(
                        format!("unknown invariant `{other}`"),
                        "choose from norms, power, bispectrum (comma separated)",
                    ));
                }
            }
        }
        Ok(out)
    }

    /// True when at least one invariant is selected.
    pub fn any(&self) -> bool {
        self.norms || self.power_spectrum || self.bispectrum
    }
}

/// The descriptor's parameters (design "the descriptor, exactly", versions 1 and 2).
///
/// Lengths (`radii`) are in the cloud's file units (usually metres). A recipe only exists in a
/// validated state: build it with [`RecipeBuilder::build`] or deserialise it from JSON (which
/// validates too). Its JSON form carries the version (`"version": 2` by default). Column names
/// do not depend on the version: a file's recipe (sidecar or header) says which one it holds.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(try_from = "RecipeBuilderJson", into = "RecipeBuilderJson")]
pub struct Recipe {
    version: u32,
    radii: Vec<f32>,
    degree: usize,
    shells: usize,
    max_neighbours: Option<usize>,
    invariants: Invariants,
    keep_coefficients: bool,
}

/// Builder for [`Recipe`]: defaults version [`RECIPE_VERSION`], `L = 4`, `N = 6`, no neighbour
/// cap, norms + power spectrum, no coefficients. At least one support radius must be given.
#[derive(Debug, Clone, PartialEq)]
pub struct RecipeBuilder {
    /// Descriptor version, [`OLDEST_RECIPE_VERSION`]`..=`[`RECIPE_VERSION`].
    pub version: u32,
    /// Support radii `r`, one scale each (file units).
    pub radii: Vec<f32>,
    /// Maximum degree `L`.
    pub degree: usize,
    /// Number of radial shells `N`.
    pub shells: usize,
    /// Neighbour cap `K`: keep only the `K` nearest neighbours (ties by point index).
    pub max_neighbours: Option<usize>,
    /// Invariants to output.
    pub invariants: Invariants,
    /// Also output the equivariant coefficients `c_nlm`.
    pub keep_coefficients: bool,
}

impl Default for RecipeBuilder {
    fn default() -> Self {
        RecipeBuilder {
            version: RECIPE_VERSION,
            radii: Vec::new(),
            degree: DEFAULT_DEGREE,
            shells: DEFAULT_SHELLS,
            max_neighbours: None,
            invariants: Invariants::default(),
            keep_coefficients: false,
        }
    }
}

impl RecipeBuilder {
    /// Sets the descriptor version (1: the original definition; 2, the default: terms of
    /// degree `l ≥ 1` fade out at the centre).
    pub fn version(mut self, v: u32) -> Self {
        self.version = v;
        self
    }

    /// Adds a support radius (one more scale).
    pub fn radius(mut self, r: f32) -> Self {
        self.radii.push(r);
        self
    }

    /// Replaces the support radii.
    pub fn radii(mut self, radii: impl IntoIterator<Item = f32>) -> Self {
        self.radii = radii.into_iter().collect();
        self
    }

    /// Sets the maximum degree `L`.
    pub fn degree(mut self, l: usize) -> Self {
        self.degree = l;
        self
    }

    /// Sets the number of radial shells `N`.
    pub fn shells(mut self, n: usize) -> Self {
        self.shells = n;
        self
    }

    /// Sets (or clears) the neighbour cap `K`.
    pub fn max_neighbours(mut self, k: Option<usize>) -> Self {
        self.max_neighbours = k;
        self
    }

    /// Sets the invariants to output.
    pub fn invariants(mut self, inv: Invariants) -> Self {
        self.invariants = inv;
        self
    }

    /// Keeps (or not) the equivariant coefficients.
    pub fn keep_coefficients(mut self, keep: bool) -> Self {
        self.keep_coefficients = keep;
        self
    }

    /// Validates the parameters and builds the recipe.
    pub fn build(self) -> Result<Recipe> {
        if !(OLDEST_RECIPE_VERSION..=RECIPE_VERSION).contains(&self.version) {
            return Err(Error::invalid(
                format!("descriptor version {} is not known", self.version),
                format!("choose a version from {OLDEST_RECIPE_VERSION} to {RECIPE_VERSION}"),
            ));
        }
        if self.radii.is_empty() {
            return Err(Error::invalid(
                "no support radius given",
                "give at least one support radius greater than 0",
            ));
        }
        for (i, &r) in self.radii.iter().enumerate() {
            if !(r.is_finite() && r > 0.0) {
                return Err(Error::invalid(
                    format!("support radius {r} is not a finite number greater than 0"),
                    "give radii such as 0.25 (file units)",
                ));
            }
            if self.radii[..i].contains(&r) {
                return Err(Error::invalid(
                    format!("support radius {r} is given twice"),
                    "give each support radius once",
                ));
            }
        }
        if self.degree > MAX_DEGREE {
            return Err(Error::invalid(
                format!("maximum degree {} is above {MAX_DEGREE}", self.degree),
                format!("choose a degree from 0 to {MAX_DEGREE}"),
            ));
        }
        if self.shells == 0 || self.shells > MAX_SHELLS {
            return Err(Error::invalid(
                format!("{} radial shells is outside 1..={MAX_SHELLS}", self.shells),
                format!("choose from 1 to {MAX_SHELLS} shells"),
            ));
        }
        if self.max_neighbours == Some(0) {
            return Err(Error::invalid(
                "a neighbour cap of 0 leaves no neighbour",
                "give a cap of at least 1, or none",
            ));
        }
        if !self.invariants.any() && !self.keep_coefficients {
            return Err(Error::invalid(
                "the recipe outputs nothing (no invariant and no coefficients)",
                "select norms, power or bispectrum, or keep the coefficients",
            ));
        }
        Ok(Recipe {
            version: self.version,
            radii: self.radii,
            degree: self.degree,
            shells: self.shells,
            max_neighbours: self.max_neighbours,
            invariants: self.invariants,
            keep_coefficients: self.keep_coefficients,
        })
    }
}

/// The JSON form of a recipe (the builder's fields plus the version).
#[derive(Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
struct RecipeBuilderJson {
    version: u32,
    radii: Vec<f32>,
    degree: usize,
    shells: usize,
    max_neighbours: Option<usize>,
    invariants: Invariants,
    keep_coefficients: bool,
}

impl TryFrom<RecipeBuilderJson> for Recipe {
    type Error = Error;
    fn try_from(j: RecipeBuilderJson) -> Result<Recipe> {
        RecipeBuilder {
            version: j.version,
            radii: j.radii,
            degree: j.degree,
            shells: j.shells,
            max_neighbours: j.max_neighbours,
            invariants: j.invariants,
            keep_coefficients: j.keep_coefficients,
        }
        .build()
    }
}

impl From<Recipe> for RecipeBuilderJson {
    fn from(r: Recipe) -> Self {
        RecipeBuilderJson {
            version: r.version,
            radii: r.radii,
            degree: r.degree,
            shells: r.shells,
            max_neighbours: r.max_neighbours,
            invariants: r.invariants,
            keep_coefficients: r.keep_coefficients,
        }
    }
}

impl Recipe {
    /// A builder with the defaults.
    pub fn builder() -> RecipeBuilder {
        RecipeBuilder::default()
    }

    /// The recipe's descriptor version ([`OLDEST_RECIPE_VERSION`]`..=`[`RECIPE_VERSION`]).
    pub fn version(&self) -> u32 {
        self.version
    }

    /// Support radii, one per scale, in the order given (file units).
    pub fn radii(&self) -> &[f32] {
        &self.radii
    }

    /// Number of scales (support radii).
    pub fn scales(&self) -> usize {
        self.radii.len()
    }

    /// Maximum degree `L`.
    pub fn degree(&self) -> usize {
        self.degree
    }

    /// Number of radial shells `N`.
    pub fn shells(&self) -> usize {
        self.shells
    }

    /// Neighbour cap `K`, if any.
    pub fn max_neighbours(&self) -> Option<usize> {
        self.max_neighbours
    }

    /// Invariants output.
    pub fn invariants(&self) -> Invariants {
        self.invariants
    }

    /// Whether the equivariant coefficients are kept.
    pub fn keep_coefficients(&self) -> bool {
        self.keep_coefficients
    }

    /// Number of coefficients per scale: `N·(L+1)²`.
    pub fn coefficients_per_scale(&self) -> usize {
        self.shells * (self.degree + 1) * (self.degree + 1)
    }

    /// The recipe as pretty JSON (with its `"version"`).
    pub fn to_json(&self) -> String {
        serde_json::to_string_pretty(self).expect("a recipe always serialises")
    }

    /// Reads and validates a recipe from JSON.
    pub fn from_json(text: &str) -> Result<Recipe> {
        serde_json::from_str(text).map_err(|e| {
            Error::invalid(
                format!("the recipe JSON is not valid: {e}"),
                "check the recipe against the documented fields",
            )
        })
    }

    /// Bispectrum index triples `(l1, l2, l)` with `l1 ≤ l2`, `|l1 − l2| ≤ l ≤ min(l1 + l2, L)`,
    /// ordered by `l1`, then `l2`, then `l`.
    pub fn bispectrum_triples(&self) -> Vec<(usize, usize, usize)> {
        bispectrum_triples(self.degree)
    }

    /// Number of invariant columns per scale.
    pub fn invariants_per_scale(&self) -> usize {
        let (n, l1) = (self.shells, self.degree + 1);
        let mut k = 0;
        if self.invariants.norms {
            k += n * l1;
        }
        if self.invariants.power_spectrum {
            k += n * (n + 1) / 2 * l1;
        }
        if self.invariants.bispectrum {
            k += n * bispectrum_triples(self.degree).len();
        }
        k
    }

    /// The scale prefix of column names: `r` followed by the radius in its shortest exact
    /// decimal form with `p` for the decimal point (names stay plain letters, digits and `_`,
    /// as PLY, LAS and CSV readers expect), e.g. `r0p25` for 0.25, `r1p5`, `r2`.
    pub fn scale_prefix(&self, scale: usize) -> String {
        format!("r{}", self.radii[scale]).replace('.', "p")
    }

    /// Names of the invariant columns, in output order.
    ///
    /// Layout: scales in the order of [`Recipe::radii`]; within a scale, the norms
    /// `{s}_norm_l{l}_n{n}` (`l` outer, `n` inner), then the power spectrum
    /// `{s}_ps_l{l}_n{n}_n{n'}` (`l` outer, then `n`, then `n' ≥ n`), then the bispectrum
    /// `{s}_bs_n{n}_l{l1}_l{l2}_l{l}` (`n` outer, then the triples of
    /// [`Recipe::bispectrum_triples`]), where `{s}` is [`Recipe::scale_prefix`].
    pub fn column_names(&self) -> Vec<String> {
        let mut out = Vec::new();
        for s in 0..self.scales() {
            let p = self.scale_prefix(s);
            let (n_sh, l_max) = (self.shells, self.degree);
            if self.invariants.norms {
                for l in 0..=l_max {
                    for n in 0..n_sh {
                        out.push(format!("{p}_norm_l{l}_n{n}"));
                    }
                }
            }
            if self.invariants.power_spectrum {
                for l in 0..=l_max {
                    for n in 0..n_sh {
                        for n2 in n..n_sh {
                            out.push(format!("{p}_ps_l{l}_n{n}_n{n2}"));
                        }
                    }
                }
            }
            if self.invariants.bispectrum {
                let triples = self.bispectrum_triples();
                for n in 0..n_sh {
                    for &(l1, l2, l) in &triples {
                        out.push(format!("{p}_bs_n{n}_l{l1}_l{l2}_l{l}"));
                    }
                }
            }
        }
        out
    }

    /// Names of the per-scale bookkeeping columns: `{s}_count` (number of neighbours used)
    /// and `{s}_flags` (the [`super::flags`] bits), scale by scale.
    pub fn count_column_names(&self) -> Vec<String> {
        (0..self.scales())
            .flat_map(|s| {
                let p = self.scale_prefix(s);
                [format!("{p}_count"), format!("{p}_flags")]
            })
            .collect()
    }

    /// Names of the coefficient columns, in the layout `[scale][n][l² + l + m]`:
    /// `{s}_c_n{n}_l{l}_m{m}` (`m` from `−l` to `l`, a negative order written with `n`:
    /// `m` = −2 is `mn2`).
    pub fn coefficient_names(&self) -> Vec<String> {
        let mut out = Vec::new();
        for s in 0..self.scales() {
            let p = self.scale_prefix(s);
            for n in 0..self.shells {
                for l in 0..=self.degree as i64 {
                    for m in -l..=l {
                        let m = if m < 0 {
                            format!("n{}", -m)
                        } else {
                            m.to_string()
                        };
                        out.push(format!("{p}_c_n{n}_l{l}_m{m}"));
                    }
                }
            }
        }
        out
    }
}

/// Bispectrum triples for maximum degree `l_max` (see [`Recipe::bispectrum_triples`]).
pub fn bispectrum_triples(l_max: usize) -> Vec<(usize, usize, usize)> {
    let mut out = Vec::new();
    for l1 in 0..=l_max {
        for l2 in l1..=l_max {
            for l in (l2 - l1)..=(l1 + l2).min(l_max) {
                out.push((l1, l2, l));
            }
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn defaults_and_column_counts() {
        let r = Recipe::builder().radius(0.25).build().unwrap();
        assert_eq!((r.degree(), r.shells(), r.max_neighbours()), (4, 6, None));
        let names = r.column_names();
        // 6·5 norms + 21·5 power spectrum
        assert_eq!(names.len(), 30 + 105);
        assert_eq!(names.len(), r.invariants_per_scale());
        assert_eq!(names[0], "r0p25_norm_l0_n0");
        assert_eq!(names[1], "r0p25_norm_l0_n1");
        assert_eq!(names[6], "r0p25_norm_l1_n0");
        assert_eq!(names[30], "r0p25_ps_l0_n0_n0");
        assert_eq!(names[31], "r0p25_ps_l0_n0_n1");
        assert_eq!(names[36], "r0p25_ps_l0_n1_n1");
        assert_eq!(r.count_column_names(), ["r0p25_count", "r0p25_flags"]);
        assert_eq!(r.coefficient_names()[4], "r0p25_c_n0_l2_mn2");
    }

    #[test]
    fn bispectrum_layout() {
        // (0,0,0) (0,1,1) (0,2,2) (1,1,0) (1,1,1) (1,1,2) (1,2,1) (1,2,2) (2,2,0) (2,2,1) (2,2,2)
        let t = bispectrum_triples(2);
        assert_eq!(t.len(), 11);
        assert_eq!(t[3], (1, 1, 0));
        let r = Recipe::builder()
            .radii([1.0, 0.5])
            .degree(2)
            .shells(2)
            .invariants(Invariants::parse("bispectrum").unwrap())
            .build()
            .unwrap();
        let names = r.column_names();
        assert_eq!(names.len(), 2 * 2 * 11);
        assert_eq!(names[3], "r1_bs_n0_l1_l1_l0");
        assert_eq!(names[22], "r0p5_bs_n0_l0_l0_l0");
    }

    #[test]
    fn invalid_recipes_are_refused_with_a_fix() {
        let cases: &[(RecipeBuilder, &str)] = &[
            (Recipe::builder(), "no support radius"),
            (Recipe::builder().radius(0.0), "not a finite number"),
            (Recipe::builder().radius(f32::NAN), "not a finite number"),
            (Recipe::builder().radius(-1.0), "not a finite number"),
            (Recipe::builder().radii([1.0, 1.0]), "given twice"),
            (Recipe::builder().radius(1.0).degree(13), "above 12"),
            (Recipe::builder().radius(1.0).shells(0), "outside 1..=32"),
            (
                Recipe::builder().radius(1.0).version(3),
                "version 3 is not known",
            ),
            (
                Recipe::builder().radius(1.0).max_neighbours(Some(0)),
                "cap of 0",
            ),
            (
                Recipe::builder()
                    .radius(1.0)
                    .invariants(Invariants::parse("none").unwrap()),
                "outputs nothing",
            ),
        ];
        for (b, want) in cases {
            let e = b.clone().build().unwrap_err().to_string();
            assert!(e.contains(want) && e.contains("; "), "{b:?}: {e}");
        }
        assert!(Invariants::parse("norms,curvature").is_err());
    }

    #[test]
    fn json_round_trip_checks_version_and_values() {
        let r = Recipe::builder()
            .radii([0.25, 0.5])
            .max_neighbours(Some(50))
            .keep_coefficients(true)
            .build()
            .unwrap();
        let j = r.to_json();
        assert_eq!(r.version(), 2);
        assert!(j.contains("\"version\": 2"), "{j}");
        assert_eq!(Recipe::from_json(&j).unwrap(), r);
        let v1 = j.replace("\"version\": 2", "\"version\": 1");
        let r1 = Recipe::from_json(&v1).unwrap();
        assert_eq!(r1.version(), 1);
        assert_eq!(r1.column_names(), r.column_names());
        assert!(r1.to_json().contains("\"version\": 1"));
        assert_eq!(
            r1,
            Recipe::builder()
                .version(1)
                .radii([0.25, 0.5])
                .max_neighbours(Some(50))
                .keep_coefficients(true)
                .build()
                .unwrap()
        );
        for bad in [0, 3] {
            let v = j.replace("\"version\": 2", &format!("\"version\": {bad}"));
            let e = Recipe::from_json(&v).unwrap_err().to_string();
            assert!(e.contains(&format!("version {bad}")), "{e}");
        }
        let bad = j.replace("0.25", "-0.25");
        assert!(Recipe::from_json(&bad).is_err());
    }
}
