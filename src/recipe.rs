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
//! Every key is optional; unknown keys and unknown words are errors that name the file
//! and the line.
//!
//! A recipe is built in layers — the defaults, then the recipe file, then the flags given
//! ([`Draft`]) — and checked once into a [`CheckedRecipe`] (private fields, one error per
//! broken rule, as linfa's checked parameters do), which also holds the library and the
//! naming rules it names, each read once. A broken rule names where its value came from:
//! `recipe.toml: units = 0: at least one unit is needed` for the file,
//! `--units 0: at least one unit is needed` for the flag.
//!
//! Adding a key: a field of [`Recipe`] (with its default and, if it has one, its rule in
//! [`Draft::check`]), and one line in the command line's flag table.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use serde::de::Error as _;
use serde::{Deserialize, Deserializer, Serialize, Serializer};

use crate::cube::select::BandSelection;
use crate::library::Library;
use crate::photometry::Law;
use crate::units::cluster::Method;
use crate::units::{Rules, UnitParams, UnitsError};
use crate::unmix::{ParamError, Precision, RunOptions, Solver, Subsets, UnmixParams};

/// Every result-changing option of `unmix` and `map`, as the recipe file and `run.json`
/// write it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct Recipe {
    /// "embedded" or a library folder.
    pub library: String,
    pub solver: Solver,
    pub shade: bool,
    pub subset: Subsets,
    pub groups: bool,
    pub group_angle_deg: f64,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub noise: Option<f64>,
    pub force: bool,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub range_um: Option<[f64; 2]>,
    pub exclude_bands: Vec<usize>,
    pub residuals: bool,
    pub precision: Precision,
    /// The photometric law the cube is divided by before unmixing ("none" for none).
    #[serde(with = "law_word")]
    pub photometry: Option<Law>,
    /// `map` only: the number of units, or "auto".
    pub units: UnitCount,
    /// `map` only: the largest K tried by "auto".
    pub max_units: usize,
    /// `map` only: pixels k-means is fitted on, or "all".
    pub sample: SampleSize,
    /// `map` only: the minimum mapping unit, pixels.
    pub min_area: usize,
    /// `map` only: "embedded" or a rules file.
    pub rules: String,
    /// `map` only: the seed of the clustering sample and initialisation.
    pub seed: u64,
    /// `map` only: the clustering method.
    pub method: Clustering,
    /// `map` only, DBSCAN: neighbourhood radius in abundance units.
    pub eps: f64,
    /// `map` only, DBSCAN: the minimum points of a core neighbourhood.
    pub min_points: usize,
    /// `map` only: add the albedo (1 − shade) to the clustering features.
    pub albedo_feature: bool,
    /// `map` only: add the scaled fit RMSE to the clustering features.
    pub rmse_feature: bool,
}

/// `units`: a number of units, or "auto" (chosen by the method's score).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum UnitCount {
    Auto,
    K(usize),
}

/// `sample`: the pixels the clustering is fitted on, or "all".
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum SampleSize {
    All,
    N(usize),
}

/// A count or its word, serialised as a number or as the word.
macro_rules! count_serde {
    ($ty:ident, $word:literal, $n:ident, $other:ident, $key:literal) => {
        impl $ty {
            /// The number, `None` for the word.
            pub fn number(self) -> Option<usize> {
                match self {
                    $ty::$n(n) => Some(n),
                    $ty::$other => None,
                }
            }

            /// A flag's text: the word or a number.
            pub fn parse(s: &str) -> Option<$ty> {
                match s {
                    $word => Some($ty::$other),
                    n => n.parse().ok().map($ty::$n),
                }
            }
        }
        impl Serialize for $ty {
            fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
                match self {
                    $ty::$n(n) => s.serialize_u64(*n as u64),
                    $ty::$other => s.serialize_str($word),
                }
            }
        }
        impl<'de> Deserialize<'de> for $ty {
            fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
                let w = Word::deserialize(d)?.0;
                $ty::parse(&w).ok_or_else(|| {
                    D::Error::custom(format!(
                        concat!($key, " \"{}\": expected a number or \"", $word, "\""),
                        w
                    ))
                })
            }
        }
    };
}

count_serde!(UnitCount, "auto", K, Auto, "units");
count_serde!(SampleSize, "all", N, All, "sample");

/// The clustering methods of the units stage, by the words the recipe uses.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Clustering {
    /// k-means; K by silhouette.
    #[default]
    KMeans,
    /// Gaussian mixture; K by BIC.
    Gmm,
    /// DBSCAN with `eps` and `min_points`.
    Dbscan,
}

impl Clustering {
    pub fn name(self) -> &'static str {
        match self {
            Clustering::KMeans => "kmeans",
            Clustering::Gmm => "gmm",
            Clustering::Dbscan => "dbscan",
        }
    }

    pub fn parse(s: &str) -> Option<Clustering> {
        [Clustering::KMeans, Clustering::Gmm, Clustering::Dbscan]
            .into_iter()
            .find(|c| c.name() == s)
    }
}

/// Serialises a typed choice as its word, and reads it back naming the key and the words
/// it takes, so that a bad word in a file reads `line 2: solver "magic": expected …`.
macro_rules! word_serde {
    ($ty:ty, $key:literal, $expected:literal, $name:expr, $parse:expr) => {
        impl Serialize for $ty {
            fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
                s.serialize_str(&$name(*self))
            }
        }
        impl<'de> Deserialize<'de> for $ty {
            fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
                let w = Word::deserialize(d)?.0;
                $parse(&w).ok_or_else(|| {
                    D::Error::custom(format!(concat!($key, " \"{}\": expected ", $expected), w))
                })
            }
        }
    };
}

/// A word, or a whole number written without quotes (`subset = 3`).
struct Word(String);

impl<'de> Deserialize<'de> for Word {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        #[derive(Deserialize)]
        #[serde(untagged)]
        enum Raw {
            S(String),
            N(u64),
        }
        Ok(Word(match Raw::deserialize(d)? {
            Raw::S(s) => s,
            Raw::N(n) => n.to_string(),
        }))
    }
}

word_serde!(
    Solver,
    "solver",
    "unconstrained, sum-to-one, nnls or fcls",
    Solver::name,
    Solver::parse
);
word_serde!(
    Subsets,
    "subset",
    "auto, off or a subset size K ≥ 1",
    Subsets::name,
    |s: &str| Subsets::parse(s).ok()
);
word_serde!(
    Precision,
    "precision",
    "f32 or f64",
    Precision::name,
    Precision::parse
);
word_serde!(
    Clustering,
    "method",
    "kmeans, gmm or dbscan",
    Clustering::name,
    Clustering::parse
);

/// `photometry`: the law's name, or "none".
mod law_word {
    use super::*;

    pub fn serialize<S: Serializer>(law: &Option<Law>, s: S) -> Result<S::Ok, S::Error> {
        s.serialize_str(law.map_or("none", |l| l.name()))
    }

    pub fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<Option<Law>, D::Error> {
        let w = String::deserialize(d)?;
        match w.as_str() {
            "none" => Ok(None),
            s => Law::parse(s).map(Some).ok_or_else(|| {
                D::Error::custom(format!(
                    "photometry \"{s}\": expected none, lambert or lommel-seeliger"
                ))
            }),
        }
    }
}

impl Default for Recipe {
    fn default() -> Self {
        let p = UnmixParams::default();
        let u = UnitParams::default();
        Recipe {
            library: "embedded".into(),
            solver: p.solver,
            shade: p.shade,
            subset: p.subsets,
            groups: p.groups,
            group_angle_deg: p.group_angle_deg,
            noise: p.noise,
            force: p.force,
            range_um: None,
            exclude_bands: Vec::new(),
            residuals: false,
            precision: Precision::F32,
            photometry: None,
            units: UnitCount::Auto,
            max_units: u.max_units,
            sample: SampleSize::N(crate::units::DEFAULT_SAMPLE),
            min_area: u.min_area,
            rules: "embedded".into(),
            seed: u.seed,
            method: Clustering::KMeans,
            eps: 0.05,
            min_points: 10,
            albedo_feature: u.albedo,
            rmse_feature: u.rmse,
        }
    }
}

impl Recipe {
    /// Reads a recipe file; errors name the file and the line.
    pub fn load(path: &Path) -> Result<Recipe, RecipeError> {
        Draft::from_file(path).map(|d| d.recipe)
    }

    /// The recipe as TOML text.
    pub fn to_toml(&self) -> String {
        toml::to_string(self).expect("recipes serialise")
    }
}

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
    /// The defaults, overlaid with the recipe file when one is given.
    pub fn new(file: Option<&Path>) -> Result<Draft, RecipeError> {
        match file {
            Some(p) => Draft::from_file(p),
            None => Ok(Draft::default()),
        }
    }

    fn from_file(path: &Path) -> Result<Draft, RecipeError> {
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
                residuals: r.residuals,
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

    #[test]
    fn the_default_recipe_round_trips_and_checks() {
        let r = Recipe::default();
        let back: Recipe = toml::from_str(&r.to_toml()).unwrap();
        assert_eq!(r, back);
        let checked = Draft::default().check(Scope::Map).unwrap();
        assert_eq!(checked.unmix_params(), &UnmixParams::default());
        assert_eq!(checked.units().unwrap().0, &UnitParams::default());
    }

    #[test]
    fn unknown_keys_and_bad_words_are_refused_naming_the_key() {
        assert!(toml::from_str::<Recipe>("solvr = \"fcls\"").is_err());
        let e = toml::from_str::<Recipe>("solver = \"magic\"").unwrap_err();
        assert!(e.message().contains("solver \"magic\""), "{e}");
        let e = toml::from_str::<Recipe>("photometry = \"hapke\"").unwrap_err();
        assert!(e.message().contains("photometry \"hapke\""), "{e}");
        let e = toml::from_str::<Recipe>("precision = \"f16\"").unwrap_err();
        assert!(e.message().contains("precision \"f16\""), "{e}");
    }

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

    #[test]
    fn counts_spell_their_words_per_key() {
        let r = Recipe {
            sample: SampleSize::All,
            ..Recipe::default()
        };
        let w = serde_json::to_value(&r).unwrap();
        assert_eq!(w["units"], "auto");
        assert_eq!(w["sample"], "all");
        let back: Recipe = serde_json::from_value(w).unwrap();
        assert_eq!(back, r);
    }
}
