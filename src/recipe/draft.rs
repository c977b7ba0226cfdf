//! A recipe put together in layers — the defaults, then the recipe file, then the flags
//! given — remembering where each key's value came from, and checked once into a
//! [`CheckedRecipe`] whose errors name the file and the key, or the flag.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use super::{Clustering, Recipe};
use crate::cube::select::BandSelection;
use crate::library::Library;
use crate::photometry::Law;
use crate::units::cluster::Method;
use crate::units::{Rules, UnitParams, UnitsError};
use crate::unmix::{ParamError, Precision, RunOptions, UnmixParams};

/// Where the value of a key came from, for error messages.
#[derive(Debug, Clone, PartialEq)]
enum Origin {
    Default,
    File(PathBuf),
    Flag(&'static str),
}

/// A recipe that names a broken rule, a word it does not know, or a file it cannot read.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum RecipeError {
    /// A value that breaks a rule: the message names the file and key, or the flag.
    #[error("{place}{value}: {rule}")]
    Rule {
        place: String,
        value: String,
        rule: String,
    },
    /// A recipe, library or rules file that cannot be read or parsed (the message names it).
    #[error("{0}")]
    File(String),
}

/// A recipe being put together: the defaults, then a file, then flags. [`Draft::check`]
/// turns it into a [`CheckedRecipe`].
#[derive(Debug, Clone, Default)]
pub struct Draft {
    /// The values so far.
    pub recipe: Recipe,
    origins: BTreeMap<String, Origin>,
}

/// Which stages a recipe serves: `unmix` checks and loads only what unmixing uses.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Scope {
    Unmix,
    Map,
}

impl Draft {
    /// A draft holding `recipe` (a run's recorded recipe, to check and use again).
    pub fn from_recipe(recipe: Recipe) -> Draft {
        Draft {
            recipe,
            origins: BTreeMap::new(),
        }
    }

    /// The defaults, overlaid with the recipe file when one is given.
    pub fn new(file: Option<&Path>) -> Result<Draft, RecipeError> {
        match file {
            Some(p) => Draft::from_file(p),
            None => Ok(Draft::default()),
        }
    }

    pub(super) fn from_file(path: &Path) -> Result<Draft, RecipeError> {
        let text = std::fs::read_to_string(path)
            .map_err(|e| RecipeError::File(format!("{}: cannot read: {e}", path.display())))?;
        let located = |e: toml::de::Error| {
            RecipeError::File(format!(
                "{}: {}",
                path.display(),
                crate::bands::toml_error_line(&text, &e)
            ))
        };
        let recipe: Recipe = toml::from_str(&text).map_err(located)?;
        let keys: toml::Table = toml::from_str(&text).map_err(located)?;
        Ok(Draft {
            recipe,
            origins: keys
                .keys()
                .map(|k| (k.clone(), Origin::File(path.to_path_buf())))
                .collect(),
        })
    }

    /// Sets `key` from `flag` when the flag was given (`value` is `Some`).
    pub fn flag<T>(
        &mut self,
        key: &'static str,
        flag: &'static str,
        value: Option<T>,
        set: impl FnOnce(&mut Recipe, T),
    ) {
        if let Some(v) = value {
            set(&mut self.recipe, v);
            self.origins.insert(key.into(), Origin::Flag(flag));
        }
    }

    /// A broken rule of `key`, worded for where its value came from.
    fn broken(&self, key: &str, rule: impl Into<String>) -> RecipeError {
        let value = serde_json::to_value(&self.recipe).expect("recipes serialise")[key].clone();
        let origin = self.origins.get(key).cloned().unwrap_or(Origin::Default);
        let (place, value) = match origin {
            // The file's own spelling: `units = 0`, `method = "dbscan"`.
            Origin::File(p) => (format!("{}: {key} = ", p.display()), toml_value(&value)),
            // The flag as typed: `--units 0`.
            Origin::Flag(f) => (
                format!("{f} "),
                match value {
                    serde_json::Value::String(s) => s,
                    serde_json::Value::Number(n) if n.is_f64() => {
                        format!("{}", n.as_f64().unwrap_or(f64::NAN))
                    }
                    v => v.to_string(),
                },
            ),
            Origin::Default => (format!("{key} = "), toml_value(&value)),
        };
        RecipeError::Rule {
            place,
            value,
            rule: rule.into(),
        }
    }

    /// Checks every rule once and reads the library and (for `map`) the naming rules the
    /// recipe names. The first broken rule is the error.
    pub fn check(self, scope: Scope) -> Result<CheckedRecipe, RecipeError> {
        let r = &self.recipe;
        let unmix = UnmixParams {
            solver: r.solver,
            shade: r.shade,
            subsets: r.subset,
            groups: r.groups,
            group_angle_deg: r.group_angle_deg,
            noise: r.noise,
            force: r.force,
        };
        unmix.check().map_err(|e| match e {
            ParamError::Noise(_) => self.broken("noise", "the noise level must be greater than 0"),
            ParamError::GroupAngle(_) => {
                self.broken("group_angle_deg", "must be a non-negative angle in degrees")
            }
            ParamError::SubsetSolver(_) => self.broken(
                "subset",
                "subset mode needs the fcls solver (it compares constrained fits)",
            ),
        })?;
        if !(r.subset_truncation >= 0.0 && r.subset_truncation < 1e-2) {
            return Err(self.broken(
                "subset_truncation",
                "the weight truncation must lie in 0 ≤ t < 0.01 (1e-6 is the default; 0 keeps \
                 every subset)",
            ));
        }
        if !(r.unexplained_p > 0.0 && r.unexplained_p < 0.5) {
            return Err(self.broken(
                "unexplained_p",
                "the false-alarm probability must lie between 0 and 0.5 (0.001 is usual)",
            ));
        }
        let [t_lo, t_hi] = r.thermal_range_k;
        if !(t_lo.is_finite() && t_hi.is_finite() && t_lo > 0.0 && t_hi > t_lo) {
            return Err(self.broken(
                "thermal_range_k",
                "the range must run from a lower to a higher temperature above 0 K, e.g. 300-1800",
            ));
        }
        if !(r.emissivity > 0.0 && r.emissivity <= 1.0) {
            return Err(self.broken("emissivity", "the emissivity must lie in (0, 1]"));
        }
        if let Some(d) = r.sun_distance_au {
            if !(d.is_finite() && d > 0.0) {
                return Err(self.broken(
                    "sun_distance_au",
                    "the Sun's distance must be greater than 0 AU",
                ));
            }
        }
        let units = match scope {
            Scope::Unmix => None,
            Scope::Map => Some((self.unit_params()?, self.load_rules()?)),
        };
        let library = if r.library == "embedded" {
            Library::embedded()
        } else {
            Library::load(Path::new(&r.library)).map_err(|e| RecipeError::File(e.to_string()))?
        };
        Ok(CheckedRecipe {
            unmix,
            run: RunOptions {
                report_shade: r.shade,
                noise: r.noise,
                stated_noise: None,
                residuals: r.residuals,
                false_alarm: r.unexplained_p,
                subset_truncation: r.subset_truncation,
                exhaustive_subsets: false,
            },
            selection: BandSelection {
                range_um: r.range_um.map(|[a, b]| (a, b)),
                exclude: r.exclude_bands.clone(),
            },
            units,
            library,
            recipe: self.recipe,
        })
    }

    fn unit_params(&self) -> Result<UnitParams, RecipeError> {
        let r = &self.recipe;
        let method = match r.method {
            Clustering::KMeans => Method::KMeans,
            Clustering::Gmm => Method::GaussianMixture,
            Clustering::Dbscan => {
                if !(r.eps.is_finite() && r.eps > 0.0) {
                    return Err(self.broken("eps", "dbscan needs eps > 0"));
                }
                if r.min_points < 2 {
                    return Err(self.broken("min_points", "dbscan needs min_points ≥ 2"));
                }
                Method::Dbscan {
                    eps: r.eps,
                    min_points: r.min_points,
                }
            }
        };
        let p = UnitParams {
            units: r.units.number(),
            max_units: r.max_units,
            sample: r.sample.number(),
            min_area: r.min_area,
            seed: r.seed,
            method,
            albedo: r.albedo_feature,
            rmse: r.rmse_feature,
        };
        p.check().map_err(|e| match e {
            UnitsError::ZeroUnits => self.broken("units", e.to_string()),
            UnitsError::ZeroArea => self.broken("min_area", e.to_string()),
            UnitsError::ZeroSample => self.broken("sample", e.to_string()),
            UnitsError::Cluster(c) => self.broken("method", c.to_string()),
        })?;
        if r.max_units < 2 {
            return Err(self.broken("max_units", "at least 2"));
        }
        if let Some(radius) = r.body_radius_km {
            if !(radius.is_finite() && radius > 0.0) {
                return Err(self.broken("body_radius_km", "the radius must be greater than 0 km"));
            }
        }
        Ok(p)
    }

    fn load_rules(&self) -> Result<Rules, RecipeError> {
        let path = &self.recipe.rules;
        if path == "embedded" {
            return Ok(Rules::default_rules());
        }
        let text = std::fs::read_to_string(path)
            .map_err(|e| RecipeError::File(format!("{path}: cannot read: {e}")))?;
        Rules::parse(path, &text).map_err(RecipeError::File)
    }
}

/// A JSON value spelled as TOML writes it (strings quoted, arrays bracketed).
fn toml_value(v: &serde_json::Value) -> String {
    match v {
        serde_json::Value::String(s) => format!("{s:?}"),
        v => v.to_string(),
    }
}

/// A recipe whose every rule holds, with the parameters of each stage made from it and the
/// library and naming rules it names, read once. Built only by [`Draft::check`].
#[derive(Debug, Clone)]
pub struct CheckedRecipe {
    recipe: Recipe,
    unmix: UnmixParams,
    run: RunOptions,
    selection: BandSelection,
    /// The units stage's parameters and naming rules (`map` only).
    units: Option<(UnitParams, Rules)>,
    library: Library,
}

impl CheckedRecipe {
    /// The recipe as written to `run.json`.
    pub fn recipe(&self) -> &Recipe {
        &self.recipe
    }

    pub fn unmix_params(&self) -> &UnmixParams {
        &self.unmix
    }

    pub fn run_options(&self) -> &RunOptions {
        &self.run
    }

    pub fn precision(&self) -> Precision {
        self.recipe.precision
    }

    /// The photometric law the cube is divided by first, if any.
    pub fn photometry(&self) -> Option<Law> {
        self.recipe.photometry
    }

    /// How bands are weighted.
    pub fn band_weighting(&self) -> crate::unmix::weights::BandWeighting {
        self.recipe.band_weights
    }

    pub fn selection(&self) -> &BandSelection {
        &self.selection
    }

    /// The units stage's parameters and naming rules; `None` for a recipe checked for
    /// `unmix` only.
    pub fn units(&self) -> Option<(&UnitParams, &Rules)> {
        self.units.as_ref().map(|(p, r)| (p, r))
    }

    pub fn library(&self) -> &Library {
        &self.library
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::recipe::UnitCount;

    #[test]
    fn each_broken_rule_names_the_file_and_key_or_the_flag() {
        let dir = tempfile::tempdir().unwrap();
        let file = dir.path().join("recipe.toml");
        let cases = [
            ("units = 0", "units = 0: at least one unit is needed"),
            (
                "min_area = 0",
                "min_area = 0: the minimum mapping unit is at least one pixel",
            ),
            (
                "sample = 0",
                "sample = 0: the sample needs at least one pixel",
            ),
            ("max_units = 1", "max_units = 1: at least 2"),
            (
                "noise = 0.0",
                "noise = 0.0: the noise level must be greater than 0",
            ),
            (
                "group_angle_deg = -1.0",
                "group_angle_deg = -1.0: must be a non-negative angle in degrees",
            ),
            (
                "subset = 2\nsolver = \"nnls\"",
                "subset = \"2\": subset mode needs the fcls solver (it compares constrained fits)",
            ),
            (
                "method = \"dbscan\"\neps = 0.0",
                "eps = 0.0: dbscan needs eps > 0",
            ),
            (
                "method = \"dbscan\"\nmin_points = 1",
                "min_points = 1: dbscan needs min_points ≥ 2",
            ),
        ];
        for (text, expected) in cases {
            std::fs::write(&file, text).unwrap();
            let e = Draft::new(Some(&file))
                .unwrap()
                .check(Scope::Map)
                .unwrap_err();
            assert_eq!(
                e.to_string(),
                format!("{}: {expected}", file.display()),
                "{text}"
            );
        }
        // The same value from a flag names the flag.
        std::fs::write(&file, "units = 3").unwrap();
        let mut d = Draft::new(Some(&file)).unwrap();
        d.flag("units", "--units", Some(UnitCount::K(0)), |r, v| {
            r.units = v
        });
        let e = d.check(Scope::Map).unwrap_err();
        assert_eq!(e.to_string(), "--units 0: at least one unit is needed");
        // Numbers read as typed: `--noise -1`, not `-1.0`.
        let mut d = Draft::default();
        d.flag("noise", "--noise", Some(-1.0), |r, v| r.noise = Some(v));
        let e = d.check(Scope::Unmix).unwrap_err();
        assert_eq!(
            e.to_string(),
            "--noise -1: the noise level must be greater than 0"
        );
    }

    #[test]
    fn unmix_checks_only_what_unmixing_uses() {
        let mut d = Draft::default();
        d.flag("units", "--units", Some(UnitCount::K(0)), |r, v| {
            r.units = v
        });
        let checked = d.clone().check(Scope::Unmix).unwrap();
        assert!(checked.units().is_none());
        assert!(d.check(Scope::Map).is_err());
    }
}
