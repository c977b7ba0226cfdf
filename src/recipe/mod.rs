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
//! subset_truncation = 1e-6  # subset mode: BIC weights below this are left out (0: none)
//! groups = true
//! group_angle_deg = 1.0
//! # noise = 0.002           # noise σ for standard errors (default: from residuals)
//! force = false
//! # range_um = [0.4, 2.5]
//! exclude_bands = []
//! residuals = false
//! covariance = false
//! unexplained_p = 0.001     # false-alarm probability of the unexplained test
//! precision = "f32"         # f32 (fast) or f64 (reference)
//! photometry = "none"       # none, lambert or lommel-seeliger (needs the backplanes)
//! band_weights = "auto"     # 1/σ per band (band table, else estimated) or "none"
//! thermal = "auto"          # off, auto, one or two temperatures of emission
//! thermal_range_k = [300.0, 1800.0]
//! emissivity = 1.0
//! # sun_distance_au = 4.8   # overrides the cube's SUNDIST / sun_distance_au
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
//! # body_radius_km = 1821.6 # unit areas in km² as well as fractions
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

mod draft;

use serde::de::Error as _;
use serde::{Deserialize, Deserializer, Serialize, Serializer};

pub use draft::{CheckedRecipe, Draft, RecipeError, Scope};

use crate::photometry::Law;
use crate::units::UnitParams;
use crate::unmix::{Precision, Solver, Subsets, UnmixParams};

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
    /// Subset mode: subsets whose BIC weight exp(−ΔBIC/2) relative to the best falls below
    /// this are left out of the average (and need not be solved); 0 keeps every subset.
    pub subset_truncation: f64,
    pub groups: bool,
    pub group_angle_deg: f64,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub noise: Option<f64>,
    pub force: bool,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub range_um: Option<[f64; 2]>,
    pub exclude_bands: Vec<usize>,
    pub residuals: bool,
    /// Also write covariance.fits, the full covariance of the reported planes per pixel.
    pub covariance: bool,
    /// The unexplained test's false-alarm probability.
    pub unexplained_p: f64,
    pub precision: Precision,
    /// The photometric law the cube is divided by before unmixing ("none" for none).
    #[serde(with = "law_word")]
    pub photometry: Option<Law>,
    /// Bands weighted by 1/σ ("auto") or all alike ("none").
    pub band_weights: crate::unmix::weights::BandWeighting,
    /// Thermal emission fitted with the reflected light ([`crate::thermal`]).
    pub thermal: crate::thermal::Mode,
    /// The temperature range searched, K.
    pub thermal_range_k: [f64; 2],
    /// The emitting surface's emissivity, (0, 1].
    pub emissivity: f64,
    /// The Sun's distance, AU, over the cube's own.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub sun_distance_au: Option<f64>,
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
    /// `map` only: the body's radius, km, for unit areas in km² (fractions only without).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub body_radius_km: Option<f64>,
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
            subset_truncation: crate::unmix::DEFAULT_SUBSET_TRUNCATION,
            groups: p.groups,
            group_angle_deg: p.group_angle_deg,
            noise: p.noise,
            force: p.force,
            range_um: None,
            exclude_bands: Vec::new(),
            residuals: false,
            covariance: false,
            unexplained_p: crate::unmix::misfit::DEFAULT_FALSE_ALARM,
            precision: Precision::F32,
            photometry: None,
            band_weights: crate::unmix::weights::BandWeighting::Auto,
            thermal: crate::thermal::Mode::Auto,
            thermal_range_k: [
                crate::thermal::DEFAULT_RANGE_K.0,
                crate::thermal::DEFAULT_RANGE_K.1,
            ],
            emissivity: 1.0,
            sun_distance_au: None,
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
            body_radius_km: None,
        }
    }
}

impl Recipe {
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
