//! The scoring profile of `thiomap targets`: component weights and the scales that turn a
//! region's numbers into components on 0–1. The shipped default is
//! `spectra-lib/targets-profile.toml`, documented line by line; a user's profile is the
//! same TOML, every key optional (missing keys keep the default), unknown keys refused.

use serde::Deserialize;

/// The shipped default profile's text.
pub const DEFAULT_TEXT: &str = include_str!("../../spectra-lib/targets-profile.toml");

/// Component weights.
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Weights {
    pub activity: f64,
    pub freshness: f64,
    pub novelty: f64,
    pub rarity: f64,
    pub uncertainty: f64,
}

/// The scales of the components and the candidate thresholds.
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Scales {
    pub activity_from_k: f64,
    pub activity_full_k: f64,
    pub fresh_members: Vec<String>,
    pub fresh_full: f64,
    pub fresh_min: f64,
    pub rare_below: f64,
    pub uncertainty_full: f64,
    pub uncertainty_min: f64,
    /// Hot pixels this close (pixels, Chebyshev distance) form one region.
    pub join_pixels: usize,
}

/// A whole profile.
#[derive(Debug, Clone, PartialEq)]
pub struct Profile {
    pub weights: Weights,
    pub scales: Scales,
    /// Where it came from ("embedded" or the file).
    pub origin: String,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct PartialWeights {
    activity: Option<f64>,
    freshness: Option<f64>,
    novelty: Option<f64>,
    rarity: Option<f64>,
    uncertainty: Option<f64>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct PartialScales {
    activity_from_k: Option<f64>,
    activity_full_k: Option<f64>,
    fresh_members: Option<Vec<String>>,
    fresh_full: Option<f64>,
    fresh_min: Option<f64>,
    rare_below: Option<f64>,
    uncertainty_full: Option<f64>,
    uncertainty_min: Option<f64>,
    join_pixels: Option<usize>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct PartialProfile {
    weights: Option<PartialWeights>,
    scales: Option<PartialScales>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct FullProfile {
    weights: Weights,
    scales: Scales,
}

impl Profile {
    /// The shipped default.
    pub fn embedded() -> Profile {
        let full: FullProfile = toml::from_str(DEFAULT_TEXT).expect("the shipped profile parses");
        Profile {
            weights: full.weights,
            scales: full.scales,
            origin: "embedded".into(),
        }
    }

    /// A user's profile over the default; `origin` names it in messages.
    pub fn parse(origin: &str, text: &str) -> Result<Profile, String> {
        let part: PartialProfile =
            toml::from_str(text).map_err(|e| format!("{origin}: {}", e.message()))?;
        let mut p = Profile::embedded();
        p.origin = origin.to_string();
        if let Some(w) = part.weights {
            let set = |dst: &mut f64, v: Option<f64>| {
                if let Some(v) = v {
                    *dst = v;
                }
            };
            set(&mut p.weights.activity, w.activity);
            set(&mut p.weights.freshness, w.freshness);
            set(&mut p.weights.novelty, w.novelty);
            set(&mut p.weights.rarity, w.rarity);
            set(&mut p.weights.uncertainty, w.uncertainty);
        }
        if let Some(s) = part.scales {
            let q = &mut p.scales;
            for (dst, v) in [
                (&mut q.activity_from_k, s.activity_from_k),
                (&mut q.activity_full_k, s.activity_full_k),
                (&mut q.fresh_full, s.fresh_full),
                (&mut q.fresh_min, s.fresh_min),
                (&mut q.rare_below, s.rare_below),
                (&mut q.uncertainty_full, s.uncertainty_full),
                (&mut q.uncertainty_min, s.uncertainty_min),
            ] {
                if let Some(v) = v {
                    *dst = v;
                }
            }
            if let Some(j) = s.join_pixels {
                q.join_pixels = j;
            }
            if let Some(m) = s.fresh_members {
                q.fresh_members = m;
            }
        }
        p.check().map_err(|e| format!("{origin}: {e}"))?;
        Ok(p)
    }

    /// Weights ≥ 0 and not all zero; scales positive and ordered.
    pub fn check(&self) -> Result<(), String> {
        let w = &self.weights;
        for (k, v) in [
            ("activity", w.activity),
            ("freshness", w.freshness),
            ("novelty", w.novelty),
            ("rarity", w.rarity),
            ("uncertainty", w.uncertainty),
        ] {
            if !(v.is_finite() && v >= 0.0) {
                return Err(format!("weights.{k} = {v}: a weight must be a number ≥ 0"));
            }
        }
        if self.weight_sum() <= 0.0 {
            return Err("every weight is 0: at least one must be positive".into());
        }
        let s = &self.scales;
        if !(s.activity_full_k > s.activity_from_k && s.activity_from_k >= 0.0) {
            return Err(format!(
                "scales.activity_from_k = {} and activity_full_k = {}: need 0 ≤ from < full",
                s.activity_from_k, s.activity_full_k
            ));
        }
        for (k, v) in [
            ("fresh_full", s.fresh_full),
            ("fresh_min", s.fresh_min),
            ("rare_below", s.rare_below),
            ("uncertainty_full", s.uncertainty_full),
            ("uncertainty_min", s.uncertainty_min),
        ] {
            if !(v.is_finite() && v > 0.0 && v <= 1.0) {
                return Err(format!("scales.{k} = {v}: must lie in (0, 1]"));
            }
        }
        if s.join_pixels > 10 {
            return Err(format!(
                "scales.join_pixels = {}: at most 10",
                s.join_pixels
            ));
        }
        Ok(())
    }

    pub fn weight_sum(&self) -> f64 {
        let w = &self.weights;
        w.activity + w.freshness + w.novelty + w.rarity + w.uncertainty
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_shipped_profile_parses_and_user_profiles_are_checked() {
        let p = Profile::embedded();
        assert_eq!(p.weights.activity, 4.0);
        assert!(p.check().is_ok());
        let q = Profile::parse("mine.toml", "[weights]\nrarity = 2.5\n").unwrap();
        assert_eq!(q.weights.rarity, 2.5);
        assert_eq!(q.weights.activity, 4.0, "missing keys keep the default");
        let e = Profile::parse("mine.toml", "[weights]\nnovelty = -1\n").unwrap_err();
        assert!(
            e.contains("mine.toml") && e.contains("weights.novelty"),
            "{e}"
        );
        let e = Profile::parse("mine.toml", "[weights]\nbeauty = 1\n").unwrap_err();
        assert!(e.contains("mine.toml") && e.contains("beauty"), "{e}");
    }
}
