//! Writing a `compare` folder: `change.fits`, `change-units.fits`, `change-regions.csv`,
//! `change.png` and, last, `run.json` (its presence marks the folder complete).

use std::path::Path;

use ndarray::{Array2, Array3};

use crate::atomic::{self, WriteError};
use crate::backplane::Backplane;
use crate::change::{regions::Region, Comparison, Grid};
use crate::fits::header::{parse_card, Card, Value};
use crate::fits::write::{write_file, Extension, ImageData, ImageHdu};
use crate::render::maps::{png_bytes, Marker};

/// What `run.json` of a compare folder records besides the comparison.
pub struct CompareRun<'a> {
    /// (role, folder name, SHA-256 of its run.json).
    pub inputs: Vec<(&'a str, String, String)>,
    pub params: &'a crate::change::Params,
    pub target: Option<String>,
    /// The later result drew its row 0 at the bottom.
    pub later_row0_at_bottom: bool,
}

fn text(v: &str) -> Value {
    Value::Text(v.to_string())
}

/// The cards that place the common grid: the later epoch's spatial WCS on its own pixels,
/// or a linear longitude/latitude WCS on a latitude/longitude grid.
fn grid_cards(c: &Comparison) -> Vec<Card> {
    match c.grid {
        Grid::Pixels { .. } => c
            .later
            .wcs
            .iter()
            .filter_map(|s| parse_card(s.as_bytes()).ok())
            .collect(),
        Grid::LatLon {
            cell_deg,
            lat0,
            lon0,
            ..
        } => vec![
            Card::new("CTYPE1", text("LON"), "planetocentric longitude, east"),
            Card::new("CUNIT1", text("deg"), ""),
            Card::new("CRPIX1", Value::Real(1.0), ""),
            Card::new("CRVAL1", Value::Real(lon0), "centre of column 1"),
            Card::new("CDELT1", Value::Real(cell_deg), ""),
            Card::new("CTYPE2", text("LAT"), "planetocentric latitude"),
            Card::new("CUNIT2", text("deg"), ""),
            Card::new("CRPIX2", Value::Real(1.0), ""),
            Card::new("CRVAL2", Value::Real(lat0), "centre of row 1 (south)"),
            Card::new("CDELT2", Value::Real(cell_deg), ""),
        ],
    }
}

fn common(content: &str, c: &Comparison, target: &Option<String>) -> Vec<Card> {
    let mut cards = vec![Card::new("CONTENT", text(content), "")];
    if let Some(t) = target {
        cards.push(Card::new("OBJECT", text(t), ""));
    }
    cards.push(Card::new(
        "ORIGIN",
        text(&format!("thiomap {}", crate::VERSION)),
        "",
    ));
    cards.extend(grid_cards(c));
    cards
}

/// Writes every product of `c` into `dir` (prepared by [`super::prepare`]), `run.json`
/// last.
pub fn write_compare(
    dir: &Path,
    c: &Comparison,
    run: &CompareRun,
    png: &[u8],
) -> Result<(), WriteError> {
    let (rows, cols) = c.grid.dim();
    let m = c.ids.len();
    // change.fits: Δ per member, z per member, χ², its degrees of freedom, p, significant.
    let mut planes = Array3::<f32>::from_elem((rows, cols, 2 * m + 4), f32::NAN);
    let mut names = Vec::new();
    for (j, id) in c.ids.iter().enumerate() {
        names.push(format!("delta:{id}"));
        planes
            .index_axis_mut(ndarray::Axis(2), j)
            .assign(&c.delta.index_axis(ndarray::Axis(2), j));
    }
    for (j, id) in c.ids.iter().enumerate() {
        names.push(format!("z:{id}"));
        planes
            .index_axis_mut(ndarray::Axis(2), m + j)
            .assign(&c.z.index_axis(ndarray::Axis(2), j));
    }
    names.extend([
        "chi2".into(),
        "dof".into(),
        "p".into(),
        "significant".into(),
    ]);
    for ((r, col), v) in c.chi2.indexed_iter() {
        planes[(r, col, 2 * m)] = *v;
        planes[(r, col, 2 * m + 2)] = c.p[(r, col)];
        if v.is_finite() {
            planes[(r, col, 2 * m + 1)] = c.dof_plane[(r, col)] as f32;
            planes[(r, col, 2 * m + 3)] = c.significant[(r, col)] as u8 as f32;
        }
    }
    let mut cards = common(
        "change later minus earlier: delta and z per member, chi2, dof, p, significant",
        c,
        &run.target,
    );
    cards.push(Card::new(
        "CHIDOF",
        Value::Integer(c.dof as i64),
        "chi-square degrees of freedom",
    ));
    cards.push(Card::new(
        "FDR",
        Value::Real(run.params.fdr),
        "Benjamini-Hochberg rate",
    ));
    cards.push(Card::new(
        "PTHRESH",
        Value::Real(c.p_threshold),
        "largest p called significant",
    ));
    for (i, n) in names.iter().enumerate() {
        cards.push(Card::new(&format!("PLANE{}", i + 1), text(n), ""));
    }
    let geometry: Vec<(Backplane, &Array2<f32>)> = Backplane::ALL
        .iter()
        .filter_map(|b| c.later.geometry.get(b).map(|p| (*b, p)))
        .collect();
    let extensions: Vec<Extension> = geometry
        .iter()
        .map(|(b, p)| {
            Extension::Image(ImageHdu {
                data: ImageData::Plane(p.view()),
                cards: vec![
                    Card::new("EXTNAME", text(b.extname()), "later epoch, on this grid"),
                    Card::new("BUNIT", text("deg"), ""),
                ],
            })
        })
        .collect();
    write_file(
        &dir.join("change.fits"),
        &ImageHdu {
            data: ImageData::Cube(planes.view()),
            cards,
        },
        &extensions,
    )?;

    // change-units.fits: from-unit × 100 + to-unit.
    let code = Array2::from_shape_fn((rows, cols), |(r, col)| {
        let (a, b) = (c.from_units[(r, col)], c.to_units[(r, col)]);
        if a == 0 || b == 0 {
            0
        } else {
            a * 100 + b
        }
    });
    let mut cards = common(
        "unit change: earlier unit x 100 + later unit; 0 = no data in either",
        c,
        &run.target,
    );
    cards.push(Card::new(
        "CODING",
        text("FROM*100+TO"),
        "unit ids as in each units.csv",
    ));
    write_file(
        &dir.join("change-units.fits"),
        &ImageHdu {
            data: ImageData::Labels(code.view()),
            cards,
        },
        &[],
    )?;

    atomic::write_bytes(&dir.join("change-regions.csv"), &regions_csv(c)?)?;

    atomic::write_bytes(&dir.join("change.png"), png)?;

    super::write_json(&dir.join("run.json"), &run_json(c, run))
}

/// `change.png`'s bytes: change over the later true colour, the twelve largest regions
/// numbered.
pub fn change_png(c: &Comparison, run: &CompareRun) -> Vec<u8> {
    let (rows, cols) = c.grid.dim();
    let has_data = Array2::from_shape_fn((rows, cols), |(r, col)| {
        c.to_units[(r, col)] != 0 || c.chi2[(r, col)].is_finite()
    });
    let labels: Vec<Marker> = c
        .regions
        .iter()
        .filter(|r| r.kind == crate::change::regions::Kind::Composition)
        .take(12)
        .map(|r| Marker {
            row: r.centroid.0,
            col: r.centroid.1,
            label: r.id.to_string(),
        })
        .collect();
    let img = crate::render::overlay::change_picture(
        c.later.rgb.as_ref(),
        &has_data,
        &c.significant,
        &c.hot_change,
        picture_row0_at_bottom(c, run),
        &labels,
    );
    png_bytes(&img)
}

/// Pictures put row 0 at the bottom on a latitude/longitude grid (south) and wherever the
/// later result did.
pub fn picture_row0_at_bottom(c: &Comparison, run: &CompareRun) -> bool {
    matches!(c.grid, Grid::LatLon { .. }) || run.later_row0_at_bottom
}

fn num(v: f64, p: usize) -> String {
    if v.is_finite() {
        format!("{v:.p$}")
    } else {
        String::new()
    }
}

/// `change-regions.csv`: one row per region.
pub fn regions_csv(c: &Comparison) -> Result<Vec<u8>, WriteError> {
    let fail = |e: csv::Error| WriteError::Io {
        path: "change-regions.csv".into(),
        error: std::io::Error::other(e.to_string()),
    };
    let mut w = csv::Writer::from_writer(Vec::new());
    let mut head: Vec<String> = [
        "region",
        "kind",
        "pixels",
        "area_fraction",
        "centroid_row",
        "centroid_col",
        "lat_deg",
        "lon_deg",
        "unexplained_before",
        "unexplained_after",
    ]
    .map(String::from)
    .to_vec();
    for id in &c.ids {
        head.push(format!("delta_{id}"));
        head.push(format!("delta_{id}_stderr"));
    }
    head.push("sentence".into());
    w.write_record(&head).map_err(fail)?;
    for r in &c.regions {
        w.write_record(region_row(c, r)).map_err(fail)?;
    }
    w.into_inner().map_err(|e| WriteError::Io {
        path: "change-regions.csv".into(),
        error: std::io::Error::other(e.to_string()),
    })
}

fn region_row(c: &Comparison, r: &Region) -> Vec<String> {
    let (lat, lon) = r.lat_lon.map_or((String::new(), String::new()), |(a, b)| {
        (num(a, 2), num(b, 2))
    });
    let mut row = vec![
        r.id.to_string(),
        r.kind.name().to_string(),
        r.pixels.to_string(),
        num(r.area_fraction, 6),
        num(r.centroid.0, 1),
        num(r.centroid.1, 1),
        lat,
        lon,
        num(r.unexplained.0, 3),
        num(r.unexplained.1, 3),
    ];
    for id in &c.ids {
        let m = r.changes.iter().find(|x| &x.id == id);
        row.push(m.map_or(String::new(), |m| num(m.delta, 4)));
        row.push(m.map_or(String::new(), |m| num(m.error, 4)));
    }
    row.push(r.sentence.clone());
    row
}

/// The `run.json` of a compare folder.
pub fn run_json(c: &Comparison, run: &CompareRun) -> serde_json::Value {
    let grid = match c.grid {
        Grid::Pixels { rows, cols } => serde_json::json!({
            "kind": "pixels", "rows": rows, "cols": cols,
            "why": "both results share their shape, spatial WCS and latitude/longitude backplanes"}),
        Grid::LatLon {
            cell_deg,
            lat0,
            lon0,
            rows,
            cols,
        } => serde_json::json!({
            "kind": "latitude-longitude", "cell_deg": cell_deg,
            "first_cell_centre_deg": [lat0, lon0], "rows": rows, "cols": cols,
            "row0": "south",
            "resampling": "bilinear abundances, variances as the sum of squared weights times the variances; nearest units, flags and hot pixels"}),
    };
    serde_json::json!({
        "tool": "thiomap",
        "version": crate::VERSION,
        "command": "compare",
        "inputs": run.inputs.iter().map(|(role, name, sha)| serde_json::json!({
            "role": role, "folder": name, "run_json_sha256": sha})).collect::<Vec<_>>(),
        "parameters": {
            "fdr": run.params.fdr,
            "max_emission_deg": run.params.max_emission_deg,
            "grid_deg": run.params.grid_deg,
            "force_grid": run.params.force_grid,
        },
        "grid": grid,
        "members": c.ids,
        "test": {
            "statistic": "chi-square = delta^T (C1 + C2)^+ delta over the materials (shade excluded), on the rank of C",
            "degrees_of_freedom": c.dof,
            "covariance": c.covariance.describe(),
            "false_discovery": "Benjamini & Hochberg (1995) over every tested cell",
            "p_threshold": c.p_threshold,
            "z": "delta / sqrt(sigma1^2 + sigma2^2) per member",
        },
        "counts": {
            "cells": c.counts.cells,
            "with_data_in_both": c.counts.both,
            "left_out_for_emission": c.counts.emission_left_out,
            "left_out_at_unit_boundaries": c.counts.edge_left_out,
            "tested": c.counts.tested,
            "significant": c.counts.significant,
        },
        "significant_area_fraction": c.significant_area_fraction,
        "area": c.area_basis.describe(),
        "regions": c.regions.len(),
        "conventions": {
            "picture_row0": if picture_row0_at_bottom(c, run) { "bottom" } else { "top" },
            "change": "later minus earlier",
        },
    })
}
