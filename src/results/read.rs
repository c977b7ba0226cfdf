//! Reading a finished results folder back as an epoch for `compare` and `targets`:
//! abundances (shade dropped), standard errors, covariances when present, units, flags,
//! hot pixels, geometry (the backplanes `abundance.fits` carries) and the true colour.

use std::path::{Path, PathBuf};

use ndarray::{Array2, Array3, Axis};

use crate::backplane::Backplane;
use crate::change::{CovarianceKind, Epoch};
use crate::fits::header::format_card;
use crate::fits::image::{read_all, read_primary};

/// Why a folder cannot be read as an epoch.
#[derive(Debug, thiserror::Error)]
pub enum ReadError {
    #[error(
        "{0}: not a results folder (no run.json: the folder is missing, or its run did not finish)"
    )]
    NotAResult(PathBuf),
    #[error("{path}: {problem}")]
    Bad { path: PathBuf, problem: String },
}

fn bad(path: &Path, problem: impl ToString) -> ReadError {
    ReadError::Bad {
        path: path.to_path_buf(),
        problem: problem.to_string(),
    }
}

/// A results folder read back.
pub struct Read {
    pub epoch: Epoch,
    /// All plane ids of `abundance.fits` (shade included).
    pub planes: Vec<String>,
    pub run: serde_json::Value,
    pub summary: serde_json::Value,
    /// Stored row 0 is drawn at the bottom in pictures.
    pub row0_at_bottom: bool,
    /// Unit id → (label, class), from `units.csv`.
    pub units: Vec<(i16, String, String, f64)>,
}

fn json(path: &Path) -> Result<serde_json::Value, ReadError> {
    let text = std::fs::read_to_string(path).map_err(|e| bad(path, e))?;
    serde_json::from_str(&text).map_err(|e| bad(path, format!("not JSON ({e})")))
}

/// Reads `dir` (which must hold `run.json`: a complete result).
pub fn read_result(dir: &Path) -> Result<Read, ReadError> {
    let run_path = dir.join("run.json");
    if !run_path.is_file() {
        return Err(ReadError::NotAResult(dir.to_path_buf()));
    }
    let run = json(&run_path)?;
    if let Some(cmd @ ("compare" | "targets")) = run["command"].as_str() {
        return Err(bad(
            dir,
            format!(
                "a `{cmd}` folder, not a results folder of `map` (give the folder `map` wrote)"
            ),
        ));
    }
    let summary = json(&dir.join("summary.json"))?;
    let planes: Vec<String> = summary["endmembers"]
        .as_array()
        .ok_or_else(|| bad(&dir.join("summary.json"), "no `endmembers` list"))?
        .iter()
        .filter_map(|v| v.as_str().map(String::from))
        .collect();
    let materials: Vec<usize> = (0..planes.len())
        .filter(|&i| planes[i] != "shade")
        .collect();
    let ab_path = dir.join("abundance.fits");
    let (ab, extensions) = read_all(&ab_path).map_err(|e| bad(&ab_path, e))?;
    if ab.data.dim().2 != planes.len() {
        return Err(bad(
            &ab_path,
            format!(
                "{} planes, but summary.json lists {}",
                ab.data.dim().2,
                planes.len()
            ),
        ));
    }
    let (rows, cols, _) = ab.data.dim();
    let shape = |p: &Path, a: &Array3<f32>| -> Result<(), ReadError> {
        if (a.dim().0, a.dim().1) != (rows, cols) {
            return Err(bad(
                p,
                format!(
                    "{} × {} pixels, abundance.fits has {rows} × {cols}",
                    a.dim().1,
                    a.dim().0
                ),
            ));
        }
        Ok(())
    };
    let se_path = dir.join("stderr.fits");
    let (se_image, se_ext) = read_all(&se_path).map_err(|e| bad(&se_path, e))?;
    let se = se_image.data;
    shape(&se_path, &se)?;
    let pick = |a: &Array3<f32>| a.select(Axis(2), &materials);
    let abundance = pick(&ab.data);
    let variance = pick(&se).mapv(|s| s * s);
    let cov_path = dir.join("covariance.fits");
    let (covariance, covariance_kind) = if cov_path.is_file() {
        let c = read_primary(&cov_path).map_err(|e| bad(&cov_path, e))?.data;
        shape(&cov_path, &c)?;
        let p = planes.len();
        if c.dim().2 != p * (p + 1) / 2 {
            return Err(bad(
                &cov_path,
                format!(
                    "{} planes, expected {} for {p} ids",
                    c.dim().2,
                    p * (p + 1) / 2
                ),
            ));
        }
        // The materials' sub-triangle: plane (i, j) at i·P − i(i − 1)/2 + (j − i).
        let mut keep = Vec::new();
        for (a, &i) in materials.iter().enumerate() {
            for &j in &materials[a..] {
                keep.push(i * p - i * i.saturating_sub(1) / 2 + (j - i));
            }
        }
        (Some(c.select(Axis(2), &keep)), CovarianceKind::Reported)
    } else {
        (None, CovarianceKind::StandardErrors)
    };
    let noise = noise_model(&se_ext, rows, cols, planes.len());
    let covariance_kind = if noise.is_some() {
        CovarianceKind::UnionSet
    } else {
        covariance_kind
    };
    let flags = {
        let flags_path = dir.join("fit-flags.fits");
        if flags_path.is_file() {
            let f = read_primary(&flags_path)
                .map_err(|e| bad(&flags_path, e))?
                .data;
            shape(&flags_path, &f)?;
            f.index_axis(Axis(2), 0).mapv(|v| v as u8)
        } else {
            Array2::zeros((rows, cols))
        }
    };
    let thermal = flags.mapv(|v| v & super::products::flag_bits::THERMAL != 0);
    let shade = planes
        .iter()
        .position(|p| p == "shade")
        .map(|j| ab.data.index_axis(Axis(2), j).to_owned());
    let units_path = dir.join("units.fits");
    let units = read_primary(&units_path)
        .map_err(|e| bad(&units_path, e))?
        .data;
    shape(&units_path, &units)?;
    let units = units.index_axis(Axis(2), 0).mapv(|v| v as i16);
    let unexplained = flags.mapv(|v| v & super::products::flag_bits::UNEXPLAINED != 0);
    let thermal_path = dir.join("thermal.fits");
    let hot = if thermal_path.is_file() {
        let t = read_primary(&thermal_path).map_err(|e| bad(&thermal_path, e))?;
        shape(&thermal_path, &t.data)?;
        let names: Vec<String> = (1..=t.data.dim().2)
            .map(|k| t.header.str(&format!("PLANE{k}")).unwrap_or("").to_string())
            .collect();
        let find = |n: &str| names.iter().position(|x| x == n);
        match (
            find("fraction").or(find("fraction1")),
            find("fraction_stderr").or(find("fraction1_stderr")),
        ) {
            (Some(f), Some(s)) => Array2::from_shape_fn((rows, cols), |(r, c)| {
                let (v, e) = (t.data[(r, c, f)], t.data[(r, c, s)]);
                v.is_finite() && v > 0.0 && (!e.is_finite() || v > 2.0 * e)
            }),
            _ => Array2::from_elem((rows, cols), false),
        }
    } else {
        Array2::from_elem((rows, cols), false)
    };
    let geometry = extensions
        .into_iter()
        .filter_map(|(name, image)| {
            Backplane::ALL
                .into_iter()
                .find(|b| b.extname() == name)
                .filter(|_| (image.data.dim().0, image.data.dim().1) == (rows, cols))
                .map(|b| (b, image.data.index_axis_move(Axis(2), 0)))
        })
        .collect();
    let wcs = crate::cube::fits::spatial_wcs_cards(&ab.header)
        .iter()
        .map(format_card)
        .collect();
    let row0_at_bottom = run["conventions"]["picture_row0"].as_str() == Some("bottom");
    let rgb = read_true_colour(&dir.join("true-colour.png"), rows, cols, row0_at_bottom);
    let name = dir
        .canonicalize()
        .ok()
        .and_then(|p| p.file_name().map(|n| n.to_string_lossy().into_owned()))
        .unwrap_or_else(|| dir.display().to_string());
    Ok(Read {
        epoch: Epoch {
            name,
            ids: materials.iter().map(|&i| planes[i].clone()).collect(),
            abundance,
            variance,
            covariance,
            covariance_kind,
            noise,
            shade,
            thermal,
            unit_edge: Array2::from_elem((rows, cols), false),
            units,
            unexplained,
            hot,
            geometry,
            wcs,
            rgb,
        },
        planes,
        units: read_units(&dir.join("units.csv")),
        run,
        summary,
        row0_at_bottom,
    })
}

/// The model's Gram matrix and each pixel's noise scale, from `stderr.fits`' NOISESCALE
/// extension ([`super::products::stderr_planes`]), when it is there and matches.
fn noise_model(
    ext: &[(String, crate::fits::image::Image)],
    rows: usize,
    cols: usize,
    columns: usize,
) -> Option<(crate::change::Gram, Array2<f32>)> {
    let img = &ext.iter().find(|(n, _)| n == "NOISESCALE")?.1;
    let h = &img.header;
    let m = h.i64("GCOLS")? as usize;
    if m != columns || m > 16 || (img.data.dim().0, img.data.dim().1) != (rows, cols) {
        return None;
    }
    let flag = |k: &str| matches!(h.get(k), Some(crate::fits::header::Value::Logical(true)));
    let mut g = ndarray::Array2::<f64>::zeros((m, m));
    for i in 0..m {
        for j in i..m {
            let v = h.f64(&format!("G{}_{}", i + 1, j + 1))?;
            g[(i, j)] = v;
            g[(j, i)] = v;
        }
    }
    Some((
        crate::change::Gram {
            g,
            sum_to_one: flag("SUMTOONE"),
            shade_column: flag("SHADECOL"),
        },
        img.data.index_axis(Axis(2), 0).to_owned(),
    ))
}

/// The true colour as (row, col, channel) in internal row order, when its size is a whole
/// multiple of the cube's.
fn read_true_colour(path: &Path, rows: usize, cols: usize, flip: bool) -> Option<Array3<f32>> {
    // The picture is the cube's size enlarged by a whole factor (the centre of each block
    // is its pixel).
    let img = image::open(path).ok()?.to_rgb8();
    let (h, w) = (img.height() as usize, img.width() as usize);
    if rows == 0 || cols == 0 || h % rows != 0 || w % cols != 0 || h / rows != w / cols {
        return None;
    }
    let f = h / rows;
    Some(Array3::from_shape_fn((rows, cols, 3), |(r, c, k)| {
        let y = if flip { rows - 1 - r } else { r };
        img.get_pixel((c * f + f / 2) as u32, (y * f + f / 2) as u32)[k] as f32
    }))
}

fn read_units(path: &Path) -> Vec<(i16, String, String, f64)> {
    let Ok(text) = std::fs::read_to_string(path) else {
        return Vec::new();
    };
    let mut r = csv::Reader::from_reader(text.as_bytes());
    let Ok(h) = r.headers().cloned() else {
        return Vec::new();
    };
    let col = |n: &str| h.iter().position(|x| x == n);
    let (Some(u), Some(l), Some(c), Some(a)) = (
        col("unit"),
        col("label"),
        col("class"),
        col("area_fraction"),
    ) else {
        return Vec::new();
    };
    r.records()
        .flatten()
        .filter_map(|rec| {
            Some((
                rec.get(u)?.parse().ok()?,
                rec.get(l)?.to_string(),
                rec.get(c)?.to_string(),
                rec.get(a)?.parse().ok()?,
            ))
        })
        .collect()
}
