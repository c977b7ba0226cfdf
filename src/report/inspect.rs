//! The pixel inspector's data: the unit labels, abundances and standard errors of every
//! `step`-th pixel in each direction (the page of a large cube would otherwise not stay
//! small), and, when the cube is at hand, those pixels' spectra and the model columns the
//! page draws each fit from. Sampled, not averaged: the inspector shows the values of real
//! pixels, which can be compared with `abundance.fits` at the row and column it names.

use base64::Engine as _;
use ndarray::{Array2, ArrayView2, ArrayView3};

use super::Folder;

/// The inspector keeps at most this many sampled pixels along a side.
pub const MAX_SIDE: usize = 160;

/// The cube as the solver saw it, and the model it was fitted with, unweighted.
pub struct Spectra<'a> {
    pub data: ArrayView3<'a, f32>,
    pub valid: ArrayView2<'a, bool>,
    pub centres_um: Vec<f64>,
    /// Model columns (bands × columns), in the cube's units (the band weights undone).
    pub e: Array2<f64>,
    /// The columns' ids (members or groups, then `shade` when used).
    pub columns: Vec<String>,
    /// What the spectra are (e.g. "I/F after dividing by the lambert law").
    pub what: String,
}

impl<'a> Spectra<'a> {
    /// From a prepared cube and its model: `weights` are the band weights the model's rows
    /// were scaled by.
    pub fn of(
        cube: &'a crate::cube::Cube,
        model: &crate::unmix::Model,
        weights: &[f64],
        what: String,
    ) -> Spectra<'a> {
        let mut e = model.e.clone();
        for (b, w) in weights.iter().enumerate() {
            e.row_mut(b).mapv_inplace(|v| v / w);
        }
        Spectra {
            data: cube.data.view(),
            valid: cube.valid.view(),
            centres_um: cube.info.bands.centres_um(),
            e,
            columns: model.ids.clone(),
            what,
        }
    }
}

/// The inspector's part of the page: a JSON object, and what it could not include.
pub struct Inspector {
    pub json: String,
    pub step: usize,
    pub notes: Vec<String>,
    /// Full-size rows and columns.
    pub rows: usize,
    pub cols: usize,
}

/// Spectra as 16-bit integers per band: v ≈ lo_b + q × step_b, q in 0..=65534, 65535 for
/// no data. Half the bytes of f32, and a step of (max − min)/65534 per band, far below any
/// cube's noise; the page draws spectra, it does not serve them as data.
fn quantise(obs: &[f32], nb: usize) -> (String, Vec<f64>, Vec<f64>) {
    let (mut lo, mut hi) = (vec![f64::INFINITY; nb], vec![f64::NEG_INFINITY; nb]);
    for px in obs.chunks(nb) {
        for (b, v) in px.iter().enumerate() {
            if v.is_finite() {
                lo[b] = lo[b].min(*v as f64);
                hi[b] = hi[b].max(*v as f64);
            }
        }
    }
    let step: Vec<f64> = (0..nb)
        .map(|b| {
            if hi[b] > lo[b] {
                (hi[b] - lo[b]) / 65534.0
            } else {
                1.0
            }
        })
        .collect();
    let lo: Vec<f64> = lo
        .iter()
        .map(|v| if v.is_finite() { *v } else { 0.0 })
        .collect();
    let mut bytes = Vec::with_capacity(obs.len() * 2);
    for px in obs.chunks(nb) {
        for (b, v) in px.iter().enumerate() {
            let q = if v.is_finite() {
                (((*v as f64 - lo[b]) / step[b]).round()).clamp(0.0, 65534.0) as u16
            } else {
                u16::MAX
            };
            bytes.extend(q.to_le_bytes());
        }
    }
    (
        base64::engine::general_purpose::STANDARD.encode(bytes),
        lo,
        step,
    )
}

fn b64_f32(v: &[f32]) -> String {
    let bytes: Vec<u8> = v.iter().flat_map(|x| x.to_le_bytes()).collect();
    base64::engine::general_purpose::STANDARD.encode(bytes)
}

/// Builds the inspector data; `None` pieces are stated in `notes`.
pub fn build(folder: &Folder, spectra: Option<&Spectra>, note: Option<&str>) -> Inspector {
    let mut notes: Vec<String> = note.into_iter().map(String::from).collect();
    let ids = folder.ids();
    let (rows, cols) = folder
        .abundance
        .as_ref()
        .map(|a| (a.dim().0, a.dim().1))
        .or_else(|| folder.labels.as_ref().map(|l| l.dim()))
        .unwrap_or((0, 0));
    let step = rows.max(cols).div_ceil(MAX_SIDE).max(1);
    let (gr, gc) = (rows.div_ceil(step), cols.div_ceil(step));
    let at = |g: usize| ((g / gc) * step, (g % gc) * step);
    let n = gr * gc;
    let labels: Vec<f32> = (0..n)
        .map(|g| {
            let (r, c) = at(g);
            folder.labels.as_ref().map_or(0.0, |l| l[(r, c)] as f32)
        })
        .collect();
    let planes = |p: &Option<super::folder::Planes>| -> Option<Vec<f32>> {
        let p = p.as_ref()?;
        let np = p.dim().2;
        Some(
            (0..n)
                .flat_map(|g| {
                    let (r, c) = at(g);
                    (0..np).map(move |j| p[(r, c, j)])
                })
                .collect(),
        )
    };
    let ab = planes(&folder.abundance);
    let se = planes(&folder.stderr);
    if folder.labels.is_none() {
        notes.push("units.fits is missing: the inspector map shows no units".into());
    }
    let units: Vec<serde_json::Value> = folder
        .units_csv
        .as_ref()
        .map(|(h, rows)| {
            let col = |name: &str| h.iter().position(|x| x == name);
            let (u, l, c) = (col("unit"), col("label"), col("colour"));
            rows.iter()
                .map(|r| {
                    let get = |i: Option<usize>| i.and_then(|i| r.get(i)).cloned();
                    serde_json::json!({
                        "unit": get(u).and_then(|v| v.parse::<i64>().ok()),
                        "label": get(l),
                        "colour": get(c),
                    })
                })
                .collect()
        })
        .unwrap_or_default();
    let spec = spectra.and_then(|s| {
        let (sr, sc, nb) = s.data.dim();
        if (sr, sc) != (rows, cols) {
            notes.push(format!(
                "the cube is {sr} × {sc} pixels but the products are {rows} × {cols}: \
                 spectra are not shown"
            ));
            return None;
        }
        let mut obs = Vec::with_capacity(n * nb);
        for g in 0..n {
            let (r, c) = at(g);
            for b in 0..nb {
                obs.push(if s.valid[(r, c)] {
                    s.data[(r, c, b)]
                } else {
                    f32::NAN
                });
            }
        }
        // Each model column's plane in the products (shade by name).
        let plane: Vec<Option<usize>> = s
            .columns
            .iter()
            .map(|c| ids.iter().position(|i| i == c))
            .collect();
        let e: Vec<Vec<f64>> = (0..s.e.ncols())
            .map(|j| s.e.column(j).iter().map(|v| round6(*v)).collect())
            .collect();
        let (q, lo, step) = quantise(&obs, nb);
        Some(serde_json::json!({
            "centres_um": s.centres_um,
            "obs_u16": q,
            "obs_lo": lo,
            "obs_step": step,
            "e": e,
            "columns": s.columns,
            "plane": plane,
            "what": s.what,
        }))
    });
    let json = serde_json::json!({
        "rows": rows,
        "cols": cols,
        "step": step,
        "grid_rows": gr,
        "grid_cols": gc,
        "row0_at_bottom": folder.row0_at_bottom(),
        "ids": ids,
        "units": units,
        "labels": b64_f32(&labels),
        "ab": ab.as_deref().map(b64_f32),
        "se": se.as_deref().map(b64_f32),
        "spectra": spec,
        "notes": notes,
    });
    Inspector {
        json: serde_json::to_string(&json).expect("inspector data serialises"),
        step,
        notes,
        rows,
        cols,
    }
}

fn round6(v: f64) -> f64 {
    if v == 0.0 {
        0.0
    } else {
        let m = 10f64.powi(6 - v.abs().log10().ceil() as i32);
        (v * m).round() / m
    }
}
