//! One function per product of the results folder: each turns the pipeline's data into
//! the bytes of one file (or, for the abundance pictures, one file per plane) and writes
//! it atomically. The file names are the results-folder contract's; the order in which
//! they are written is [`super::write_folder`]'s.

use std::path::Path;

use ndarray::{Array3, Axis};

use super::CubeResult;
use crate::atomic::{self, WriteError};
use crate::colour::hex;
use crate::cube::CubeInfo;
use crate::fits::header::{Card, Value};
use crate::fits::write::{write_file, Extension, ImageData, ImageHdu};
use crate::render;
use crate::units::{rules::UNEXPLAINED, UnitMap};

/// The cards every output FITS file carries: what it holds, the target, the tool, and the
/// input's spatial WCS.
fn common_cards(info: &CubeInfo, content: &str) -> Vec<Card> {
    let mut cards = vec![Card::new("CONTENT", Value::Text(content.into()), "")];
    if let Some(t) = &info.about.target {
        cards.push(Card::new("OBJECT", Value::Text(t.clone()), ""));
    }
    cards.push(Card::new(
        "ORIGIN",
        Value::Text(format!("thiomap {}", crate::VERSION)),
        "",
    ));
    cards.extend(info.spatial_wcs.iter().cloned());
    cards
}

/// Writes planes (row, col, plane) as an f32 FITS cube with axes x, y, plane; PLANEn
/// cards name each plane. The input's row order and spatial WCS are kept.
fn write_planes(
    path: &Path,
    ids: &[String],
    data: &Array3<f32>,
    info: &CubeInfo,
    content: &str,
) -> Result<(), WriteError> {
    write_planes_with(path, ids, data, info, content, Vec::new())
}

/// [`write_planes`] with `extra` cards before the plane names.
fn write_planes_with(
    path: &Path,
    ids: &[String],
    data: &Array3<f32>,
    info: &CubeInfo,
    content: &str,
    extra: Vec<Card>,
) -> Result<(), WriteError> {
    let mut cards = common_cards(info, content);
    cards.extend(extra);
    for (i, id) in ids.iter().enumerate() {
        cards.push(Card::new(
            &format!("PLANE{}", i + 1),
            Value::Text(id.clone()),
            "",
        ));
    }
    let primary = ImageHdu {
        data: ImageData::Cube(data.view()),
        cards,
    };
    write_file(path, &primary, &[])
}

/// Writes a 2-D plane as FITS: f32 values or int16 labels.
fn write_image(
    path: &Path,
    data: ImageData,
    info: &CubeInfo,
    content: &str,
) -> Result<(), WriteError> {
    let primary = ImageHdu {
        data,
        cards: common_cards(info, content),
    };
    write_file(path, &primary, &[])
}

/// Writes a picture as PNG, creating its folder.
fn write_png(path: &Path, img: &image::RgbImage) -> Result<(), WriteError> {
    if let Some(parent) = path.parent() {
        std::fs::create_dir_all(parent).map_err(|source| WriteError::Io {
            path: parent.to_path_buf(),
            error: source,
        })?;
    }
    atomic::write_bytes(path, &render::maps::png_bytes(img))
}

/// A failure that is not the file system's (a plot or a table that could not be drawn).
fn failed(dir: &Path, name: &str, e: impl ToString) -> WriteError {
    WriteError::Io {
        path: dir.join(name),
        error: std::io::Error::other(e.to_string()),
    }
}

/// `abundance.fits`: one plane per id, materials renormalised, shade last.
/// The cube's geometry backplanes ride along as image extensions named as the cube's
/// (INCIDENCE, EMISSION, PHASE, LATITUDE, LONGITUDE; degrees), so that `compare` and
/// `targets` find the geometry in the result.
pub fn abundance_planes(dir: &Path, r: &CubeResult) -> Result<(), WriteError> {
    let mut cards = common_cards(
        &r.cube.info,
        "abundance: materials sum to 1 without shade; shade last",
    );
    for (i, id) in r.unmixed.ids.iter().enumerate() {
        cards.push(Card::new(
            &format!("PLANE{}", i + 1),
            Value::Text(id.clone()),
            "",
        ));
    }
    let primary = ImageHdu {
        data: ImageData::Cube(r.unmixed.abundance.view()),
        cards,
    };
    let extensions: Vec<Extension> = crate::backplane::Backplane::ALL
        .iter()
        .filter_map(|b| {
            r.cube.backplanes.get(b).map(|plane| {
                Extension::Image(ImageHdu {
                    data: ImageData::Plane(plane.view()),
                    cards: vec![
                        Card::new("EXTNAME", Value::Text(b.extname().into()), ""),
                        Card::new("BUNIT", Value::Text("deg".into()), ""),
                    ],
                })
            })
        })
        .collect();
    write_file(&dir.join("abundance.fits"), &primary, &extensions)
}

/// `stderr.fits`: the standard error of each abundance plane.
///
/// One extension, `NOISESCALE`, lets a reader rebuild each pixel's covariance for any
/// passive set (`compare` needs the union of two epochs' sets): its data are each pixel's
/// σ / Σa, and its header carries the model's Gram matrix G = EᵀE (band-weighted; GCOLS
/// columns named COLn, Gi_j for i ≤ j, 1-based, to 16 digits), SUMTOONE and SHADECOL. The
/// covariance of the reported planes on passive set P is then NOISESCALE² · J K_P Jᵀ, with
/// K_P the top-left block of the inverse of [[G_PP, 1], [1ᵀ, 0]] (without the border when
/// the sum is not constrained) and J the README's renormalisation. Written outside subset
/// mode, whose errors are per-pixel mixtures.
pub fn stderr_planes(dir: &Path, r: &CubeResult, data: &Array3<f32>) -> Result<(), WriteError> {
    let mut cards = common_cards(&r.cube.info, "standard errors of the abundances");
    for (i, id) in r.unmixed.ids.iter().enumerate() {
        cards.push(Card::new(
            &format!("PLANE{}", i + 1),
            Value::Text(id.clone()),
            "",
        ));
    }
    let primary = ImageHdu {
        data: ImageData::Cube(data.view()),
        cards,
    };
    let m = r.model.columns();
    if !(r.unmixed.factored() && r.model.subset_size.is_none() && m <= 16) {
        return write_file(&dir.join("stderr.fits"), &primary, &[]);
    }
    let g = r.model.e.t().dot(&r.model.e);
    let mut cards = vec![
        Card::new(
            "EXTNAME",
            Value::Text("NOISESCALE".into()),
            "sigma over the material sum",
        ),
        Card::new("GCOLS", Value::Integer(m as i64), "model columns"),
        Card::new(
            "SUMTOONE",
            Value::Logical(r.model.solver.sum_to_one()),
            "abundances constrained to sum to 1",
        ),
        Card::new(
            "SHADECOL",
            Value::Logical(r.model.shade),
            "last column is shade",
        ),
    ];
    for (i, id) in r.model.ids.iter().enumerate() {
        cards.push(Card::new(
            &format!("COL{}", i + 1),
            Value::Text(id.clone()),
            "",
        ));
    }
    for i in 0..m {
        for j in i..m {
            cards.push(Card::new(
                &format!("G{}_{}", i + 1, j + 1),
                Value::Real(g[(i, j)]),
                "",
            ));
        }
    }
    let extensions = [Extension::Image(ImageHdu {
        data: ImageData::Plane(r.unmixed.errors.scale.view()),
        cards,
    })];
    write_file(&dir.join("stderr.fits"), &primary, &extensions)
}

/// `covariance.fits` (with `--covariance`): each pixel's covariance of the reported planes,
/// the upper triangle row by row — plane (i, j), i ≤ j, at i·P − i(i − 1)/2 + (j − i) — with
/// PLANEn naming each as "id_i,id_j" and the layout in the header.
pub fn covariance_planes(dir: &Path, r: &CubeResult) -> Result<(), WriteError> {
    if !r.recipe.covariance {
        return Ok(());
    }
    let (ids, planes) = r.unmixed.covariance_planes();
    let layout = vec![
        Card::new(
            "COVORDER",
            Value::Integer(r.unmixed.ids.len() as i64),
            "P: planes of abundance.fits covered",
        ),
        Card::new(
            "COVLAYOU",
            Value::Text("upper triangle, row by row".into()),
            "(i,j) at i*P-i*(i-1)/2+j-i+1",
        ),
    ];
    write_planes_with(
        &dir.join("covariance.fits"),
        &ids,
        &planes,
        &r.cube.info,
        "covariance of the abundance planes, upper triangle per pixel",
        layout,
    )
}

/// The bits of `fit-flags.fits`.
pub mod flag_bits {
    /// A member held at zero whose KKT multiplier is within 2σ of zero: the noise could
    /// have made it non-zero, so the Cramér–Rao errors describe a truncated estimate.
    pub const BOUNDARY: u8 = 1;
    /// Fitted with a thermal term: the abundances are the joint fit's.
    pub const THERMAL: u8 = 2;
    /// Unexplained by the library: the χ² test of the residual failed.
    pub const UNEXPLAINED: u8 = 4;
}

/// `fit-flags.fits`: one uint8 bit plane, bits in [`flag_bits`] and in the header.
pub fn fit_flags_plane(dir: &Path, r: &CubeResult) -> Result<(), WriteError> {
    let out = r.unmixed;
    let flags = ndarray::Array2::from_shape_fn(out.unmixed.dim(), |(y, x)| {
        let at = |a: &ndarray::Array2<bool>| a.get((y, x)).copied().unwrap_or(false);
        let thermal = r
            .thermal
            .is_some_and(|t| t.output.fitted.get((y, x)).copied().unwrap_or(false));
        flag_bits::BOUNDARY * at(&out.boundary) as u8
            + flag_bits::THERMAL * thermal as u8
            + flag_bits::UNEXPLAINED * at(&out.misfit.flagged) as u8
    });
    let mut cards = common_cards(&r.cube.info, "fit flags, bits");
    for (key, bit, what) in [
        (
            "FLAG1",
            flag_bits::BOUNDARY,
            "boundary: member at 0 within 2 sigma",
        ),
        (
            "FLAG2",
            flag_bits::THERMAL,
            "thermal: fitted with a thermal term",
        ),
        (
            "FLAG4",
            flag_bits::UNEXPLAINED,
            "unexplained: chi-square test failed",
        ),
    ] {
        cards.push(Card::new(key, Value::Integer(bit as i64), what));
    }
    let primary = ImageHdu {
        data: ImageData::Bits(flags.view()),
        cards,
    };
    write_file(&dir.join("fit-flags.fits"), &primary, &[])
}

/// `fit-rmse.fits`: the fit RMSE per pixel.
pub fn fit_rmse_plane(dir: &Path, r: &CubeResult) -> Result<(), WriteError> {
    write_image(
        &dir.join("fit-rmse.fits"),
        ImageData::Plane(r.unmixed.rmse.view()),
        &r.cube.info,
        "fit RMSE, reflectance",
    )
}

/// `residual.fits` (when residuals were asked for): y − Ea per band, planes named by the
/// band centres.
pub fn residual_planes(dir: &Path, r: &CubeResult) -> Result<(), WriteError> {
    let Some(res) = &r.unmixed.residual else {
        return Ok(());
    };
    let info = &r.cube.info;
    let ids: Vec<String> = info
        .bands
        .centres_um()
        .iter()
        .map(|c| format!("{c}"))
        .collect();
    write_planes(
        &dir.join("residual.fits"),
        &ids,
        res,
        info,
        "residual y - Ea per band",
    )
}

/// `abundance/<id>.png` of plane `j`: a greyscale map, 0–1.
pub fn abundance_picture(dir: &Path, r: &CubeResult, j: usize) -> Result<(), WriteError> {
    let out = r.unmixed;
    let id = &out.ids[j];
    let img = render::maps::grey_map(
        out.abundance.index_axis(Axis(2), j),
        out.unmixed.view(),
        r.cube.info.format.row0_at_bottom(),
        (0.0, 1.0),
        &format!("abundance of {id}"),
    );
    write_png(&dir.join("abundance").join(format!("{id}.png")), &img)
}

/// `fit-rmse.png`: the fit RMSE, its bar clipped at the 99th percentile.
pub fn fit_rmse_picture(dir: &Path, r: &CubeResult) -> Result<(), WriteError> {
    let out = r.unmixed;
    let mut rm: Vec<f32> = out.rmse.iter().cloned().filter(|v| v.is_finite()).collect();
    rm.sort_by(f32::total_cmp);
    let hi = rm
        .get(rm.len().saturating_sub(1) * 99 / 100)
        .cloned()
        .unwrap_or(1.0)
        .max(1e-6);
    let img = render::maps::grey_map(
        out.rmse.view(),
        out.unmixed.view(),
        r.cube.info.format.row0_at_bottom(),
        (0.0, hi),
        "fit RMSE (reflectance; bar clipped at the 99th percentile)",
    );
    write_png(&dir.join("fit-rmse.png"), &img)
}

/// `units.fits`: the unit id per pixel, 0 = no data.
pub fn units_plane(dir: &Path, r: &CubeResult, map: &UnitMap) -> Result<(), WriteError> {
    write_image(
        &dir.join("units.fits"),
        ImageData::Labels(map.labels.view()),
        &r.cube.info,
        "surface unit (0 = no data)",
    )
}

/// The unit id of the unexplained pixels, if any.
fn unexplained_unit(map: &UnitMap) -> Option<i16> {
    map.units
        .iter()
        .find(|u| u.class == UNEXPLAINED)
        .map(|u| u.unit as i16)
}

/// `units.png`: each unit in its colour, unexplained pixels marked, hot spots ringed on
/// top (labelled by id) when a thermal fit found any.
pub fn units_picture(dir: &Path, r: &CubeResult, map: &UnitMap) -> Result<(), WriteError> {
    let colours = map
        .units
        .iter()
        .map(|u| (u.unit as i16, u.colour))
        .collect();
    let row0_at_bottom = r.cube.info.format.row0_at_bottom();
    let mut img = render::maps::unit_map(
        map.labels.view(),
        &colours,
        unexplained_unit(map),
        row0_at_bottom,
    );
    if let Some(t) = r.thermal.filter(|t| !t.spots.is_empty()) {
        img = render::maps::mark_spots(&img, r.cube.info.rows, row0_at_bottom, &spot_markers(t));
    }
    write_png(&dir.join("units.png"), &img)
}

/// The hot spots as picture markers: id and peak temperature.
fn spot_markers(t: &crate::thermal::ThermalResult) -> Vec<render::maps::Marker> {
    t.spots
        .iter()
        .map(|s| render::maps::Marker {
            row: s.row,
            col: s.col,
            label: format!("{} · {:.0} K", s.id, s.peak_temperature_k),
        })
        .collect()
}

/// The cube rendered under D65, enlarged to about 512 pixels: the ground of
/// `true-colour.png` and `hotspots.png`, made once for both.
pub fn true_colour_image(r: &CubeResult) -> image::RgbImage {
    render::maps::enlarge(&render::maps::true_colour(r.cube).0, 512)
}

/// `true-colour.png`: [`true_colour_image`].
pub fn true_colour_picture(dir: &Path, tc: &image::RgbImage) -> Result<(), WriteError> {
    write_png(&dir.join("true-colour.png"), tc)
}

/// `units-legend.svg`: one row per unit with its colour, label, class and area.
pub fn units_legend(dir: &Path, map: &UnitMap) -> Result<(), WriteError> {
    let unexplained = unexplained_unit(map);
    let rows: Vec<render::units::LegendRow> = map
        .units
        .iter()
        .map(|u| render::units::LegendRow {
            unit: u.unit,
            label: u.label.clone(),
            class: u.class.clone(),
            area_fraction: u.area_fraction,
            colour: u.colour,
            unexplained: Some(u.unit as i16) == unexplained,
        })
        .collect();
    let note = if map.area_basis != crate::units::AreaBasis::Pixels {
        "surface-area weighted"
    } else {
        "pixel fraction"
    };
    let legend =
        render::units::legend_svg(&rows, note).map_err(|e| failed(dir, "units-legend.svg", e))?;
    atomic::write_bytes(&dir.join("units-legend.svg"), legend.as_bytes())
}

/// `units.csv`: unit, label, class, pixels, area_fraction, area_km2 (with a body radius
/// and the cell basis), `mean_<id>`…, `std_<id>`…, mean_rmse, colour.
pub fn units_table(dir: &Path, r: &CubeResult, map: &UnitMap) -> Result<(), WriteError> {
    let km2 = super::summary::unit_areas_km2(r, map);
    let mut w = csv::Writer::from_writer(Vec::new());
    let mut header: Vec<String> = ["unit", "label", "class", "pixels", "area_fraction"]
        .iter()
        .map(|s| s.to_string())
        .collect();
    if km2.is_some() {
        header.push("area_km2".into());
    }
    header.extend(map.ids.iter().map(|id| format!("mean_{id}")));
    header.extend(map.ids.iter().map(|id| format!("std_{id}")));
    header.push("mean_rmse".into());
    header.push("colour".into());
    let csv_err = |e: csv::Error| failed(dir, "units.csv", e);
    w.write_record(&header).map_err(csv_err)?;
    for (i, u) in map.units.iter().enumerate() {
        let mut row = vec![
            u.unit.to_string(),
            u.label.clone(),
            u.class.clone(),
            u.pixels.to_string(),
            format!("{:.6}", u.area_fraction),
        ];
        if let Some(a) = &km2 {
            row.push(format!("{:.6e}", a[i]));
        }
        row.extend(u.mean.iter().map(|v| format!("{v:.6}")));
        row.extend(u.std.iter().map(|v| format!("{v:.6}")));
        row.push(format!("{:.6e}", u.mean_rmse));
        row.push(hex(u.colour));
        w.write_record(&row).map_err(csv_err)?;
    }
    let bytes = w.into_inner().map_err(|e| failed(dir, "units.csv", e))?;
    atomic::write_bytes(&dir.join("units.csv"), &bytes)
}

/// `units-spectra.svg`: per unit, the observed mean ± 1σ and the modelled mean.
pub fn units_spectra(dir: &Path, r: &CubeResult, map: &UnitMap) -> Result<(), WriteError> {
    let (out, info) = (r.unmixed, &r.cube.info);
    let nb = info.bands.len();
    let centres = info.bands.centres_um();
    let mat = out.ids.iter().filter(|i| *i != "shade").count();
    let (planes, cols) = (out.ids.len(), info.cols);
    let shade_plane = out.ids.iter().position(|i| i == "shade");
    // Flat slices and E's material rows copied once: the loop below runs over every
    // pixel, band and material (indexing the arrays element by element there took about
    // 2.5 times the instructions, callgrind).
    let spectra = r
        .cube
        .data
        .as_slice()
        .expect("cube samples are in standard layout");
    let abundance = out
        .abundance
        .as_slice()
        .expect("planes are in standard layout");
    // The model's rows are scaled by the band weights (the weighted problem); the cube's
    // samples are not, so the fit is drawn from the unweighted rows.
    let w = &r.weights.weights;
    let e: Vec<f64> = (0..nb)
        .flat_map(|b| (0..mat).map(move |j| r.model.e[(b, j)] / w[b]))
        .collect();
    // One pass over the labels per unit, the units in parallel (each unit's sums in pixel
    // order, as one by one).
    use rayon::prelude::*;
    let panels: Vec<render::units::UnitSpectrum> = map
        .units
        .par_iter()
        .filter_map(|u| {
            let (mut sum, mut sq, mut model) = (vec![0.0; nb], vec![0.0; nb], vec![0.0; nb]);
            let mut n = 0.0;
            for ((row, col), l) in map.labels.indexed_iter() {
                if *l as usize != u.unit {
                    continue;
                }
                n += 1.0;
                let px = row * cols + col;
                let (y, a) = (
                    &spectra[px * nb..][..nb],
                    &abundance[px * planes..][..planes],
                );
                let bright = shade_plane.map_or(1.0, |s| 1.0 - a[s] as f64);
                for (b, y) in y.iter().enumerate() {
                    let (y, e) = (*y as f64, &e[b * mat..(b + 1) * mat]);
                    sum[b] += y;
                    sq[b] += y * y;
                    let fit: f64 = e.iter().zip(a).map(|(e, a)| e * *a as f64).sum();
                    model[b] += bright * fit;
                }
            }
            if n == 0.0 {
                return None;
            }
            let mean: Vec<f64> = sum.iter().map(|s| s / n).collect();
            let std: Vec<f64> = sq
                .iter()
                .zip(&mean)
                .map(|(q, m)| (q / n - m * m).max(0.0).sqrt())
                .collect();
            Some(render::units::UnitSpectrum {
                title: format!("{}: {} ({} px)", u.unit, u.label, u.pixels),
                colour: u.colour,
                centres_um: centres.clone(),
                mean,
                std,
                model: model.iter().map(|m| m / n).collect(),
            })
        })
        .collect();
    let svg =
        render::units::spectra_svg(&panels).map_err(|e| failed(dir, "units-spectra.svg", e))?;
    atomic::write_bytes(&dir.join("units-spectra.svg"), svg.as_bytes())
}

/// `summary.json`: the unmixing summary, with the units' part for `map`.
pub fn summary(dir: &Path, r: &CubeResult, stderr: &Array3<f32>) -> Result<(), WriteError> {
    let path = dir.join("summary.json");
    let unmixing = super::summary::unmix_summary(r, stderr);
    let Some(map) = r.units else {
        return super::write_json(&path, &unmixing);
    };
    // The units' keys join the unmixing ones (in one JSON object, keys sorted).
    let mut value = serde_json::to_value(unmixing).map_err(|e| failed(dir, "summary.json", e))?;
    if let (Some(s), serde_json::Value::Object(u)) =
        (value.as_object_mut(), super::summary::units_summary(r, map))
    {
        s.extend(u);
    }
    super::write_json(&path, &value)
}

/// `thermal.fits`: T, f and their standard errors per pixel (NaN where not fitted).
pub fn thermal_planes(dir: &Path, r: &CubeResult) -> Result<(), WriteError> {
    let Some(t) = r.thermal else { return Ok(()) };
    let extra = vec![
        Card::new(
            "SUNDIST",
            Value::Real(t.plan.sun_distance_au),
            "Sun distance used, AU",
        ),
        Card::new("EMISSIVT", Value::Real(t.plan.emissivity), "emissivity"),
        Card::new("TMIN", Value::Real(t.plan.range_k.0), "search range, K"),
        Card::new("TMAX", Value::Real(t.plan.range_k.1), "search range, K"),
    ];
    write_planes_with(
        &dir.join("thermal.fits"),
        &t.output.names,
        &t.output.planes,
        &r.cube.info,
        "thermal fit: temperature K, area fraction, standard errors",
        extra,
    )
}

/// `hotspots.csv` and `hotspots.json`: one row per hot spot; the caution heads both.
pub fn hot_spot_tables(dir: &Path, r: &CubeResult) -> Result<(), WriteError> {
    let Some(t) = r.thermal else { return Ok(()) };
    let mut w = csv::Writer::from_writer(Vec::new());
    let csv_err = |e: csv::Error| failed(dir, "hotspots.csv", e);
    w.write_record([
        "id",
        "row",
        "col",
        "lat_deg",
        "lon_deg",
        "pixels",
        "peak_temperature_k",
        "peak_temperature_k_stderr",
        "mean_temperature_k",
        "mean_temperature_k_stderr",
        "hot_area",
        "area_unit",
        "power_w",
        "unit",
    ])
    .map_err(csv_err)?;
    let opt = |v: Option<f64>, p: usize| v.map_or(String::new(), |v| format!("{v:.p$}"));
    for s in &t.spots {
        w.write_record([
            s.id.to_string(),
            format!("{:.2}", s.row),
            format!("{:.2}", s.col),
            opt(s.lat_deg, 4),
            opt(s.lon_deg, 4),
            s.pixels.to_string(),
            format!("{:.1}", s.peak_temperature_k),
            format!("{:.1}", s.peak_temperature_k_stderr),
            format!("{:.1}", s.mean_temperature_k),
            format!("{:.1}", s.mean_temperature_k_stderr),
            format!("{:.6e}", s.hot_area),
            s.area_unit.to_string(),
            s.power_w.map_or(String::new(), |p| format!("{p:.4e}")),
            s.unit.clone().unwrap_or_default(),
        ])
        .map_err(csv_err)?;
    }
    let body = w.into_inner().map_err(|e| failed(dir, "hotspots.csv", e))?;
    let mut bytes = crate::thermal::spots::caution_line().into_bytes();
    bytes.extend(body);
    atomic::write_bytes(&dir.join("hotspots.csv"), &bytes)?;
    super::write_json(
        &dir.join("hotspots.json"),
        &serde_json::json!({
            "caution": crate::thermal::spots::HOT_SPOT_CAUTION,
            "mode": t.plan.mode.name(),
            "sun_distance_au": t.plan.sun_distance_au,
            "sun_distance_source": t.plan.sun_distance_source,
            "emissivity": t.plan.emissivity,
            "temperature_range_k": [t.plan.range_k.0, t.plan.range_k.1],
            "spots": t.spots,
        }),
    )
}

/// `hotspots.png`: the spots ringed on the true-colour picture, labelled by id and peak
/// temperature.
pub fn hot_spot_picture(
    dir: &Path,
    r: &CubeResult,
    tc: &image::RgbImage,
) -> Result<(), WriteError> {
    let Some(t) = r.thermal else { return Ok(()) };
    let img = render::maps::mark_spots(
        tc,
        r.cube.info.rows,
        r.cube.info.format.row0_at_bottom(),
        &spot_markers(t),
    );
    write_png(&dir.join("hotspots.png"), &img)
}
