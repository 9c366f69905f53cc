//! The descriptor-recipe options shared by `features` and `batch` (everything but the radius,
//! which `features` may choose and `batch` requires).

use equiscan::Result;
use equiscan::descriptor::{Invariants, Recipe};

/// Degree, shells, version, neighbour cap, invariants and coefficients of the recipe.
#[derive(Debug, clap::Args)]
pub struct RecipeArgs {
    /// Maximum degree L of the spherical harmonics (0 to 12).
    #[arg(long, default_value_t = equiscan::descriptor::DEFAULT_DEGREE, value_name = "L")]
    pub degree: usize,
    /// Number of radial shells N.
    #[arg(long, default_value_t = equiscan::descriptor::DEFAULT_SHELLS, value_name = "N")]
    pub shells: usize,
    /// Descriptor version (1: the original definition; 2: degrees l ≥ 1 fade out at the
    /// centre). The output's recipe records it.
    #[arg(long, value_name = "V", default_value_t = equiscan::descriptor::RECIPE_VERSION)]
    pub descriptor_version: u32,
    /// Keep only the K nearest neighbours within the support radius (default: all).
    #[arg(long, value_name = "K")]
    pub max_neighbours: Option<usize>,
    /// Invariants to output, comma separated: norms, power, bispectrum.
    #[arg(long, default_value = "norms,power", value_name = "LIST")]
    pub invariants: String,
    /// Also output the equivariant coefficients c_nlm.
    #[arg(long)]
    pub keep_coefficients: bool,
}

impl RecipeArgs {
    /// The validated recipe with these options and the support radii `radii` (file units).
    pub fn recipe(&self, radii: Vec<f32>) -> Result<Recipe> {
        Recipe::builder()
            .radii(radii)
            .version(self.descriptor_version)
            .degree(self.degree)
            .shells(self.shells)
            .max_neighbours(self.max_neighbours)
            .invariants(Invariants::parse(&self.invariants)?)
            .keep_coefficients(self.keep_coefficients)
            .build()
    }
}
