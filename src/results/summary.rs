//! What `summary.json` holds: the unmixing part (members, groups, per-member statistics,
//! masked pixels, the model used, the unexplained test, the boundary count) and, for `map`,
//! the units part (units, classes, regions, the unit-count scores, the area weighting). Dedicated output
//! types: the file format is a promise, the numeric internals may change.

use serde::Serialize;

use super::CubeResult;
use crate::colour::hex;
use crate::units::UnitMap;
use crate::unmix;

#[derive(Serialize)]
struct GroupRecord<'a> {
    id: &'a str,
    members: &'a [String],
}

/// What `summary.json` holds after unmixing (extended by `map`).
#[derive(Serialize)]
pub struct UnmixSummary<'a> {
    pub cube: String,
    /// The observation time the cube declares, if any.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub observation_time: Option<String>,
    /// The target and instrument the cube declares, if any.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub target: Option<String>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub instrument: Option<String>,
    pub endmembers: &'a [String],
    pub groups: serde_json::Value,
    pub per_member: Vec<unmix::PlaneStats>,
    pub nodata_pixels: usize,
    pub masked_pixels: serde_json::Value,
    pub unmixed_pixels: usize,
    pub mean_rmse: f64,
    pub solver: &'static str,
    pub shade: bool,
    pub subset_size: Option<usize>,
    pub bands_used: usize,
    pub condition_number: Option<f64>,
    /// The model's closest column pairs by spectral angle (at most five).
    pub closest_pairs: Vec<serde_json::Value>,
    pub enumerated_pixels: usize,
    /// The χ² test of the residuals: its probability, noise model and count.
    pub unexplained_test: &'a unmix::misfit::MisfitSummary,
    /// Pixels whose solution sits on a constraint boundary the noise could move (bit 1 of
    /// fit-flags.fits).
    pub boundary_pixels: usize,
    /// Per column (member, group or shade): the pixels where it is the boundary case —
    /// held at zero, its multiplier within 2σ of zero. Near-twin members show up here.
    pub boundary_by_column: std::collections::BTreeMap<String, usize>,
    /// Each band's weight 1/σ (median 1) and where σ came from.
    pub band_weights: &'a unmix::weights::BandWeights,
    /// The thermal fit, when one ran: its settings, the pixels screened and fitted, the
    /// hot-spot count and the hottest spot.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub thermal: Option<serde_json::Value>,
    pub warnings: &'a [String],
}

/// Builds the unmixing part of `summary.json`.
/// `stderr`: the standard-error planes ([`crate::unmix::UnmixOutput::stderr`]).
pub fn unmix_summary<'a>(r: &CubeResult<'a>, stderr: &ndarray::Array3<f32>) -> UnmixSummary<'a> {
    let (out, model) = (r.unmixed, r.model);
    let c = out.counts;
    let (mut s, mut n) = (0.0, 0usize);
    for ((row, col), ok) in out.unmixed.indexed_iter() {
        if *ok {
            s += out.rmse[(row, col)] as f64;
            n += 1;
        }
    }
    UnmixSummary {
        cube: super::provenance::file_name(&r.cube.info.path),
        observation_time: r.cube.info.about.time.clone(),
        target: r.cube.info.about.target.clone(),
        instrument: r.cube.info.about.instrument.clone(),
        endmembers: &out.ids,
        groups: serde_json::to_value(
            model
                .groups
                .iter()
                .map(|g| GroupRecord {
                    id: &g.id,
                    members: &g.members,
                })
                .collect::<Vec<_>>(),
        )
        .expect("groups serialise"),
        per_member: unmix::plane_stats(out, stderr),
        nodata_pixels: c.nodata + c.zero_signal + c.dark,
        masked_pixels: serde_json::json!({
            "input_nodata": c.nodata,
            "zero_signal": c.zero_signal,
            "too_dark": c.dark,
        }),
        unmixed_pixels: c.unmixed,
        mean_rmse: if n > 0 { s / n as f64 } else { f64::NAN },
        solver: model.solver.name(),
        shade: model.shade,
        subset_size: model.subset_size,
        bands_used: model.bands(),
        condition_number: model.condition.is_finite().then_some(model.condition),
        closest_pairs: model
            .closest_pairs
            .iter()
            .take(5)
            .map(|p| serde_json::json!({"a": p.a, "b": p.b, "angle_deg": p.angle_deg}))
            .collect(),
        enumerated_pixels: c.enumerated,
        unexplained_test: &out.misfit.summary,
        boundary_pixels: out.boundary.iter().filter(|b| **b).count(),
        boundary_by_column: model
            .ids
            .iter()
            .enumerate()
            .map(|(j, id)| {
                let n = out
                    .boundary_columns
                    .iter()
                    .filter(|m| **m & (1 << j) != 0)
                    .count();
                (id.clone(), n)
            })
            .collect(),
        band_weights: r.weights,
        thermal: r.thermal.map(|t| {
            let hottest = t.spots.first();
            serde_json::json!({
                "mode": t.plan.mode.name(),
                "temperature_range_k": [t.plan.range_k.0, t.plan.range_k.1],
                "emissivity": t.plan.emissivity,
                "sun_distance_au": t.plan.sun_distance_au,
                "sun_distance_source": t.plan.sun_distance_source,
                "column": t.plan.column_note,
                "screened_pixels": t.output.screened,
                "fitted_pixels": t.output.fitted.iter().filter(|f| **f).count(),
                "hot_spots": t.spots.len(),
                "hottest": hottest.map(|s| serde_json::json!({
                    "id": s.id,
                    "peak_temperature_k": s.peak_temperature_k,
                    "peak_temperature_k_stderr": s.peak_temperature_k_stderr,
                    "lat_deg": s.lat_deg,
                    "lon_deg": s.lon_deg,
                })),
            })
        }),
        warnings: r.warnings,
    }
}

/// Each unit's area in km², when the recipe gives a body radius and the areas are
/// spherical cells (sr × R²).
pub fn unit_areas_km2(r: &CubeResult, map: &UnitMap) -> Option<Vec<f64>> {
    let radius = r.recipe.body_radius_km?;
    map.units
        .iter()
        .map(|u| u.area_sr.map(|sr| sr * radius * radius))
        .collect()
}

/// The units part of `summary.json` (merged into the unmixing summary by `map`).
pub fn units_summary(r: &CubeResult, map: &UnitMap) -> serde_json::Value {
    let km2 = unit_areas_km2(r, map);
    let units: Vec<serde_json::Value> = map
        .units
        .iter()
        .enumerate()
        .map(|(i, u)| {
            let mut row = serde_json::json!({
                "unit": u.unit, "label": u.label, "class": u.class, "pixels": u.pixels,
                "area_fraction": u.area_fraction, "mean_rmse": u.mean_rmse,
                "colour": hex(u.colour),
            });
            if let Some(a) = &km2 {
                row["area_km2"] = serde_json::json!(a[i]);
            }
            for (i, id) in map.ids.iter().enumerate() {
                row[format!("mean_{id}")] = serde_json::json!(u.mean[i]);
                row[format!("std_{id}")] = serde_json::json!(u.std[i]);
            }
            row
        })
        .collect();
    let mut summary = serde_json::json!({
        "units": units,
        "classes": map.classes,
        "unexplained_pixels": map.unexplained_pixels,
        "regions_before_min_area": map.regions_before,
        "regions_after_min_area": map.regions_after,
        "unit_count_scores": map.scores.iter().map(|(k, s)| serde_json::json!({"units": k, "score": s})).collect::<Vec<_>>(),
        "area_weighting": map.area_basis.describe(),
        "area_missing_pixels": map.area_missing_pixels,
    });
    if let Some(a) = &km2 {
        summary["total_area_km2"] = serde_json::json!(a.iter().sum::<f64>());
    }
    summary
}
