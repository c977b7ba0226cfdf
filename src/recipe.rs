//! The recipe: every option that can change a result, as one TOML file (`--recipe`), so a
//! run can be repeated exactly and a batch can apply one recipe to many cubes. `run.json`
//! records the recipe of each result in the same form. Threads, workers, shards, input
//! and output paths and `--overwrite` are not part of it: they never change a result.
//!
//! ```toml
//! library = "embedded"      # or a library folder
//! solver = "fcls"           # unconstrained, sum-to-one, nnls, fcls
//! shade = true
//! subset = "auto"           # auto, off, or a subset size K
//! groups = true
//! group_angle_deg = 1.0
//! # noise = 0.002           # noise σ for standard errors (default: from residuals)
//! force = false
//! # range_um = [0.4, 2.5]
//! exclude_bands = []
//! residuals = false
//! precision = "f32"         # f32 (fast) or f64 (reference)
//! photometry = "none"       # none, lambert or lommel-seeliger (needs the backplanes)
//! # map only:
//! units = "auto"            # or K
//! max_units = 10
//! sample = 20000            # or "all"
//! min_area = 4              # pixels
//! rules = "embedded"        # or a rules file
//! seed = 1
//! method = "kmeans"         # kmeans, gmm (Gaussian mixture) or dbscan
//! eps = 0.05                # dbscan: neighbourhood radius (abundance)
//! min_points = 10           # dbscan: points of a core neighbourhood
//! albedo_feature = false    # cluster on 1 − shade as well
//! rmse_feature = false      # cluster on the scaled fit RMSE as well
//! ```
//! Every key is optional; unknown keys are errors.

use std::path::Path;

use serde::{Deserialize, Serialize};

use crate::cube::select::BandSelection;
use crate::units::UnitParams;
use crate::unmix::{Solver, Subsets, UnmixParams};

/// Every result-changing option of `unmix` (and later `map`).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct Recipe {
    pub library: String,
    pub solver: String,
    pub shade: bool,
    pub subset: String,
    pub groups: bool,
    pub group_angle_deg: f64,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub noise: Option<f64>,
    pub force: bool,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub range_um: Option<[f64; 2]>,
    pub exclude_bands: Vec<usize>,
    pub residuals: bool,
    pub precision: String,
    /// "none", or the photometric law the cube is divided by before unmixing.
    pub photometry: String,
    /// `map` only: the number of units, or "auto".
    pub units: Count,
    /// `map` only: the largest K tried by "auto".
    pub max_units: usize,
    /// `map` only: pixels k-means is fitted on, or "all".
    pub sample: Count,
    /// `map` only: the minimum mapping unit, pixels.
    pub min_area: usize,
    /// `map` only: "embedded" or a rules file.
    pub rules: String,
    /// `map` only: the seed of the clustering sample and initialisation.
    pub seed: u64,
    /// `map` only: "kmeans", "gmm" or "dbscan".
    pub method: String,
    /// `map` only, DBSCAN: neighbourhood radius in abundance units.
    pub eps: f64,
    /// `map` only, DBSCAN: the minimum points of a core neighbourhood.
    pub min_points: usize,
    /// `map` only: add the albedo (1 − shade) to the clustering features.
    pub albedo_feature: bool,
    /// `map` only: add the scaled fit RMSE to the clustering features.
    pub rmse_feature: bool,
}

/// A count, or a word ("auto", "all") that stands for the default choice.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(untagged)]
pub enum Count {
    N(usize),
    Word(String),
}

impl Count {
    /// The number, `None` for the word `word`; any other word is an error.
    pub fn number_or(&self, word: &str, key: &str) -> Result<Option<usize>, String> {
        match self {
            Count::N(n) => Ok(Some(*n)),
            Count::Word(w) if w == word => Ok(None),
            Count::Word(w) => w
                .parse::<usize>()
                .map(Some)
                .map_err(|_| format!("{key} `{w}`: expected a number or \"{word}\"")),
        }
    }
}

impl Default for Recipe {
    fn default() -> Self {
        let p = UnmixParams::default();
        Recipe {
            library: "embedded".into(),
            solver: p.solver.name().into(),
            shade: p.shade,
            subset: p.subsets.name(),
            groups: p.groups,
            group_angle_deg: p.group_angle_deg,
            noise: p.noise,
            force: p.force,
            range_um: None,
            exclude_bands: Vec::new(),
            residuals: false,
            precision: "f32".into(),
            photometry: "none".into(),
            units: Count::Word("auto".into()),
            max_units: crate::units::DEFAULT_MAX_UNITS,
            sample: Count::N(crate::units::DEFAULT_SAMPLE),
            min_area: UnitParams::default().min_area,
            rules: "embedded".into(),
            seed: 1,
            method: "kmeans".into(),
            eps: 0.05,
            min_points: 10,
            albedo_feature: false,
            rmse_feature: false,
        }
    }
}

impl Recipe {
    /// Reads a recipe file; errors name the file and the line.
    pub fn load(path: &Path) -> Result<Recipe, String> {
        let text = std::fs::read_to_string(path)
            .map_err(|e| format!("{}: cannot read: {e}", path.display()))?;
        toml::from_str(&text).map_err(|e| {
            format!(
                "{}: {}",
                path.display(),
                crate::cube::bands::toml_error_line(&text, &e)
            )
        })
    }

    /// The checked unmixing parameters.
    pub fn unmix_params(&self) -> Result<UnmixParams, String> {
        let solver = Solver::parse(&self.solver).ok_or_else(|| {
            format!(
                "solver `{}`: expected unconstrained, sum-to-one, nnls or fcls",
                self.solver
            )
        })?;
        let p = UnmixParams {
            solver,
            shade: self.shade,
            subsets: Subsets::parse(&self.subset)?,
            groups: self.groups,
            group_angle_deg: self.group_angle_deg,
            noise: self.noise,
            force: self.force,
        };
        p.check().map_err(|e| e.to_string())?;
        if self.precision != "f32" && self.precision != "f64" {
            return Err(format!(
                "precision `{}`: expected f32 or f64",
                self.precision
            ));
        }
        self.photometry()?;
        Ok(p)
    }

    /// The photometric law to normalise by, if any.
    pub fn photometry(&self) -> Result<Option<crate::photometry::Law>, String> {
        match self.photometry.as_str() {
            "none" => Ok(None),
            s => crate::photometry::Law::parse(s).map(Some).ok_or_else(|| {
                format!("photometry `{s}`: expected none, lambert or lommel-seeliger")
            }),
        }
    }

    /// The checked units parameters (for `map`).
    pub fn unit_params(&self) -> Result<UnitParams, String> {
        use crate::units::cluster::Method;
        let method = match self.method.as_str() {
            "kmeans" => Method::KMeans,
            "gmm" => Method::GaussianMixture,
            "dbscan" => {
                if !(self.eps.is_finite() && self.eps > 0.0) || self.min_points < 2 {
                    return Err(format!(
                        "dbscan needs eps > 0 and min_points ≥ 2 (got {} and {})",
                        self.eps, self.min_points
                    ));
                }
                Method::Dbscan {
                    eps: self.eps,
                    min_points: self.min_points,
                }
            }
            other => return Err(format!("method `{other}`: expected kmeans, gmm or dbscan")),
        };
        let p = UnitParams {
            units: self.units.number_or("auto", "units")?,
            max_units: self.max_units,
            sample: self.sample.number_or("all", "sample")?,
            min_area: self.min_area,
            seed: self.seed,
            method,
            albedo: self.albedo_feature,
            rmse: self.rmse_feature,
        };
        p.check().map_err(|e| e.to_string())?;
        if self.max_units < 2 {
            return Err(format!("max_units {}: at least 2", self.max_units));
        }
        Ok(p)
    }

    /// The library the recipe names: the embedded default, or a folder.
    pub fn load_library(&self) -> Result<crate::library::Library, crate::library::LibraryError> {
        if self.library == "embedded" {
            Ok(crate::library::Library::embedded())
        } else {
            crate::library::Library::load(Path::new(&self.library))
        }
    }

    /// The naming rules the recipe names.
    pub fn load_rules(&self) -> Result<crate::units::Rules, String> {
        if self.rules == "embedded" {
            return Ok(crate::units::Rules::default_rules());
        }
        let text = std::fs::read_to_string(&self.rules)
            .map_err(|e| format!("{}: cannot read: {e}", self.rules))?;
        crate::units::Rules::parse(&self.rules, &text)
    }

    pub fn selection(&self) -> BandSelection {
        BandSelection {
            range_um: self.range_um.map(|[a, b]| (a, b)),
            exclude: self.exclude_bands.clone(),
        }
    }

    /// The recipe as TOML text.
    pub fn to_toml(&self) -> String {
        toml::to_string(self).expect("recipes serialise")
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_default_recipe_round_trips_and_checks() {
        let r = Recipe::default();
        let back: Recipe = toml::from_str(&r.to_toml()).unwrap();
        assert_eq!(r, back);
        assert_eq!(r.unmix_params().unwrap(), UnmixParams::default());
    }

    #[test]
    fn unknown_keys_and_bad_values_are_refused() {
        assert!(toml::from_str::<Recipe>("solvr = \"fcls\"").is_err());
        let r: Recipe = toml::from_str("solver = \"magic\"").unwrap();
        assert!(r.unmix_params().unwrap_err().contains("magic"));
        let r: Recipe = toml::from_str("photometry = \"hapke\"").unwrap();
        assert!(r.unmix_params().unwrap_err().contains("photometry `hapke`"));
    }
}
