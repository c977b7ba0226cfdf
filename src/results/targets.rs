//! Writing a `targets` folder: `targets.csv` and `targets.json` (both headed by the
//! caution), `targets.png` (numbered markers over the true colour, keep-out areas striped,
//! the caution in a band at the top) and, last, `run.json`.

use std::path::Path;

use ndarray::Array2;

use crate::atomic::{self, WriteError};
use crate::change::Epoch;
use crate::render::maps::{png_bytes, Marker};
use crate::targets::{Constraints, Profile, Status, Target, CAUTION};

/// What `run.json` of a targets folder records.
pub struct TargetsRun<'a> {
    /// (role, folder name, SHA-256 of its run.json).
    pub inputs: Vec<(&'a str, String, String)>,
    pub profile: &'a Profile,
    pub constraints: &'a Constraints,
    /// Where the keep-out area came from.
    pub keep_out: Option<String>,
    pub row0_at_bottom: bool,
    pub target: Option<String>,
}

fn num(v: f64, p: usize) -> String {
    if v.is_finite() {
        format!("{v:.p$}")
    } else {
        String::new()
    }
}

fn status_text(s: &Status) -> (String, String) {
    match s {
        Status::Ranked(r) => (r.to_string(), "ranked".into()),
        Status::Excluded(why) => (String::new(), format!("excluded: {why}")),
    }
}

/// `targets.csv`'s bytes: the caution as `#` lines, then one row per candidate.
pub fn targets_csv(targets: &[Target]) -> Result<Vec<u8>, WriteError> {
    let fail = |e: &dyn std::fmt::Display| WriteError::Io {
        path: "targets.csv".into(),
        error: std::io::Error::other(e.to_string()),
    };
    let mut w = csv::Writer::from_writer(Vec::new());
    w.write_record([
        "rank",
        "id",
        "kind",
        "kinds",
        "centroid_row",
        "centroid_col",
        "lat_deg",
        "lon_deg",
        "pixels",
        "area_fraction",
        "score",
        "activity",
        "freshness",
        "novelty",
        "rarity",
        "uncertainty",
        "key_value",
        "key_stderr",
        "key_unit",
        "reason",
        "status",
    ])
    .map_err(|e| fail(&e))?;
    for t in targets {
        let (rank, status) = status_text(&t.status);
        let (lat, lon) = t.lat_lon.map_or((String::new(), String::new()), |(a, b)| {
            (num(a, 2), num(b, 2))
        });
        let c = &t.components;
        w.write_record([
            rank,
            t.id.to_string(),
            t.lead.name().to_string(),
            t.kinds
                .iter()
                .map(|k| k.name())
                .collect::<Vec<_>>()
                .join(";"),
            num(t.centroid.0, 1),
            num(t.centroid.1, 1),
            lat,
            lon,
            t.pixels.to_string(),
            num(t.area_fraction, 6),
            num(t.score, 4),
            num(c.activity, 3),
            num(c.freshness, 3),
            num(c.novelty, 3),
            num(c.rarity, 3),
            num(c.uncertainty, 3),
            num(t.key.0, 3),
            num(t.key.1, 3),
            t.key.2.to_string(),
            t.reason.clone(),
            status,
        ])
        .map_err(|e| fail(&e))?;
    }
    let body = w.into_inner().map_err(|e| fail(&e))?;
    let mut out = format!("# CAUTION: {CAUTION}\n").into_bytes();
    out.extend(body);
    Ok(out)
}

fn targets_json(targets: &[Target], run: &TargetsRun) -> serde_json::Value {
    serde_json::json!({
        "caution": CAUTION,
        "profile": run.profile.origin,
        "targets": targets.iter().map(|t| {
            let (rank, status) = status_text(&t.status);
            serde_json::json!({
                "rank": rank.parse::<usize>().ok(),
                "id": t.id,
                "kind": t.lead.name(),
                "kinds": t.kinds.iter().map(|k| k.name()).collect::<Vec<_>>(),
                "centroid": [t.centroid.0, t.centroid.1],
                "lat_lon_deg": t.lat_lon.map(|(a, b)| [a, b]),
                "pixels": t.pixels,
                "area_fraction": t.area_fraction,
                "score": t.score,
                "components": {
                    "activity": t.components.activity,
                    "freshness": t.components.freshness,
                    "novelty": t.components.novelty,
                    "rarity": t.components.rarity,
                    "uncertainty": t.components.uncertainty,
                },
                "key": {"value": finite(t.key.0), "stderr": finite(t.key.1), "unit": t.key.2},
                "reason": t.reason,
                "status": status,
            })
        }).collect::<Vec<_>>(),
    })
}

fn finite(v: f64) -> Option<f64> {
    v.is_finite().then_some(v)
}

/// `targets.png`'s bytes.
pub fn targets_png(
    epoch: &Epoch,
    targets: &[Target],
    keep_out: Option<&Array2<bool>>,
    row0_at_bottom: bool,
) -> Vec<u8> {
    let dim = epoch.units.dim();
    let has_data = epoch.units.mapv(|u| u != 0);
    let none = Array2::from_elem(dim, false);
    let markers: Vec<Marker> = targets
        .iter()
        .filter_map(|t| match t.status {
            Status::Ranked(r) => Some(Marker {
                row: t.centroid.0,
                col: t.centroid.1,
                label: r.to_string(),
            }),
            Status::Excluded(_) => None,
        })
        .collect();
    let img = crate::render::overlay::targets_picture(
        epoch.rgb.as_ref(),
        &has_data,
        keep_out.unwrap_or(&none),
        row0_at_bottom,
        &markers,
    );
    let img = crate::render::overlay::with_caution(
        &img,
        "Model-based suggestions. Pointing: flight rules. Fieldwork: local codes.",
    );
    png_bytes(&img)
}

/// Writes the folder (prepared by [`super::prepare`]), `run.json` last.
pub fn write_targets(
    dir: &Path,
    targets: &[Target],
    run: &TargetsRun,
    png: &[u8],
) -> Result<(), WriteError> {
    atomic::write_bytes(&dir.join("targets.csv"), &targets_csv(targets)?)?;
    super::write_json(&dir.join("targets.json"), &targets_json(targets, run))?;
    atomic::write_bytes(&dir.join("targets.png"), png)?;
    let k = run.constraints;
    super::write_json(
        &dir.join("run.json"),
        &serde_json::json!({
            "tool": "thiomap",
            "version": crate::VERSION,
            "command": "targets",
            "caution": CAUTION,
            "inputs": run.inputs.iter().map(|(role, name, sha)| serde_json::json!({
                "role": role, "folder": name, "run_json_sha256": sha})).collect::<Vec<_>>(),
            "profile": {
                "origin": run.profile.origin,
                "weights": {
                    "activity": run.profile.weights.activity,
                    "freshness": run.profile.weights.freshness,
                    "novelty": run.profile.weights.novelty,
                    "rarity": run.profile.weights.rarity,
                    "uncertainty": run.profile.weights.uncertainty,
                },
                "scales": {
                    "activity_from_k": run.profile.scales.activity_from_k,
                    "activity_full_k": run.profile.scales.activity_full_k,
                    "fresh_members": run.profile.scales.fresh_members,
                    "fresh_full": run.profile.scales.fresh_full,
                    "fresh_min": run.profile.scales.fresh_min,
                    "rare_below": run.profile.scales.rare_below,
                    "uncertainty_full": run.profile.scales.uncertainty_full,
                    "uncertainty_min": run.profile.scales.uncertainty_min,
                },
            },
            "constraints": {
                "keep_out": run.keep_out,
                "max_emission_deg": k.max_emission_deg,
                "max_incidence_deg": k.max_incidence_deg,
                "min_pixels": k.min_pixels,
                "max_targets": k.max_targets,
            },
            "candidates": targets.len(),
            "ranked": targets.iter().filter(|t| matches!(t.status, Status::Ranked(_))).count(),
            "conventions": {"picture_row0": if run.row0_at_bottom { "bottom" } else { "top" }},
        }),
    )
}
