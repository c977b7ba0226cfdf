//! Writing a scene: the cube (FITS, `.npy` + sidecar, or a band stack of 16-bit PNGs),
//! the truth planes as `<stem>.truth.fits.gz` and the description as `<stem>.truth.json`.
//!
//! Truth planes: the primary array holds the abundances (axes x, y, member; one plane per
//! id in `truth.json` `members`, named by PLANEn cards; NaN on sky); image extensions
//! UNITS (int16 label, 0 = sky), CORE (int16 0/1), HOTSPOT (int16 0/1) and HOTTHERM (f32,
//! planes temperature K and hot area fraction per hot pixel, NaN elsewhere). Group truth is
//! not stored: sum the member planes of each group listed in `truth.json`.

use std::path::{Path, PathBuf};

use ndarray::Array2;
use serde::Serialize;

use super::{world, Scene, SceneKind, SceneParams};
use crate::atomic::WriteError;
use crate::fits::header::{Card, Value};
use crate::fits::write::{Extension, ImageData, ImageHdu};

/// Output format of the cube.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum CubeFormat {
    Fits,
    Npy,
    Stack,
}

/// The files a scene written at `cube_path` consists of.
pub fn scene_files(cube_path: &Path, format: CubeFormat) -> Vec<PathBuf> {
    let stem = stem(cube_path);
    let mut v = vec![cube_path.to_path_buf()];
    match format {
        CubeFormat::Fits => {}
        CubeFormat::Npy => v.push(cube_path.with_extension("toml")),
        CubeFormat::Stack => {}
    }
    v.push(stem.with_file_name(format!("{}.truth.fits.gz", name(&stem))));
    v.push(stem.with_file_name(format!("{}.truth.json", name(&stem))));
    v
}

fn stem(p: &Path) -> PathBuf {
    p.with_extension("")
}

fn name(p: &Path) -> String {
    p.file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_default()
}

#[derive(Serialize)]
struct UnitOut {
    label: usize,
    name: &'static str,
    composition: std::collections::BTreeMap<&'static str, f64>,
}

#[derive(Serialize)]
struct GroupOut {
    id: String,
    members: Vec<String>,
}

#[derive(Serialize)]
struct NoiseOut {
    band: usize,
    centre_um: f64,
    mean_signal: f64,
    sigma_at_mean: f64,
    read_sigma: f64,
    signal_coeff: f64,
}

#[derive(Serialize)]
struct HotSpotOut {
    row: usize,
    col: usize,
    temperature_k: f64,
    fraction: f64,
}

#[derive(Serialize)]
struct TruthJson<'a> {
    world: &'static str,
    note: &'static str,
    command: &'a str,
    members: &'a [String],
    groups: Vec<GroupOut>,
    units: Vec<UnitOut>,
    features: Vec<&'static str>,
    hot_spot_pixels: Vec<[usize; 2]>,
    hot_spots: Vec<HotSpotOut>,
    parameters: serde_json::Value,
    #[serde(skip_serializing_if = "Option::is_none")]
    epoch: Option<serde_json::Value>,
    noise: Vec<NoiseOut>,
    files: serde_json::Value,
}

/// The earlier epoch a later scene was made from.
#[derive(Debug, Clone)]
pub struct EpochOf {
    /// The earlier cube's file name.
    pub file: String,
    pub sha256: String,
}

/// Writes the cube, truth planes and truth.json. `command` is the command line that
/// regenerates the scene, recorded in truth.json; `epoch_of` names the earlier epoch of a
/// later scene.
#[allow(clippy::too_many_arguments)]
pub fn write_scene(
    scene: &Scene,
    params: &SceneParams,
    cube_path: &Path,
    format: CubeFormat,
    band_set: &str,
    library_version: &str,
    command: &str,
    epoch_of: Option<&EpochOf>,
) -> Result<(), WriteError> {
    match format {
        CubeFormat::Fits => crate::cube::fits::write_cube(cube_path, &scene.cube)?,
        CubeFormat::Npy => crate::cube::npy::write_cube(cube_path, &scene.cube)?,
        CubeFormat::Stack => write_stack(cube_path, scene)?,
    }
    let files = scene_files(cube_path, format);
    let truth_fits = &files[files.len() - 2];
    let truth_json = &files[files.len() - 1];
    write_truth_planes(truth_fits, scene, epoch_of.is_some())?;
    let t = &scene.truth;
    let hot: Vec<[usize; 2]> = t
        .hot
        .indexed_iter()
        .filter(|(_, h)| **h)
        .map(|((r, c), _)| [r, c])
        .collect();
    let json = TruthJson {
        world: "Brimveil (fictional sulfur-volcanic moon; synthetic data)",
        note: "Internal row 0 is the first row stored; FITS pictures put it at the bottom, so north is up.",
        command,
        members: &t.ids,
        groups: t
            .groups
            .iter()
            .map(|g| GroupOut {
                id: g.id.clone(),
                members: g.members.clone(),
            })
            .collect(),
        units: world::UNITS
            .iter()
            .enumerate()
            .map(|(i, u)| UnitOut {
                label: i + 1,
                name: u.name,
                composition: u.composition.iter().cloned().collect(),
            })
            .collect(),
        features: world::FEATURES.iter().map(|f| f.name).collect(),
        hot_spot_pixels: hot,
        hot_spots: t
            .hot_spots
            .iter()
            .map(|h| HotSpotOut {
                row: h.row,
                col: h.col,
                temperature_k: h.temperature_k,
                fraction: h.fraction,
            })
            .collect(),
        parameters: serde_json::json!({
            "kind": match params.kind { SceneKind::Globe => "globe", SceneKind::Tile => "tile" },
            "rows": params.rows,
            "cols": params.cols,
            "band_set": band_set,
            "library_version": library_version,
            "snr": params.snr,
            "noise_model": "detected signal D = I/F × g_b, g_b ∝ band solar irradiance × FWHM × wavelength (1 in the band nearest 0.55 µm); σ_D² = σ_read² + k·D, half of each at the SNR's reference (mean surface I/F of that band)",
            "snr_reference_um": 0.55,
            "mismatch": params.mismatch,
            "hot_spots": params.hot_spots,
            "hot_spot_temperature_range_k": [params.hot_temperature_k.0, params.hot_temperature_k.1],
            "hot_spot_fraction_range": [params.hot_fraction.0, params.hot_fraction.1],
            "hot_spot_emissivity": 1.0,
            "sun_distance_au": params.sun_distance_au,
            "seed": params.seed,
            "photometric_law": params.law.name(),
            "topographic_shading_depth": super::SHADING_DEPTH,
            "sub_solar_point_deg": [params.sun.0, params.sun.1],
            "sub_observer_point_deg": [params.observer.0, params.observer.1],
            "quantity": "i-over-f",
        }),
        epoch: epoch_of.map(|e| {
            let spot = |h: &super::HotSpot| {
                serde_json::json!({"row": h.row, "col": h.col,
                    "temperature_k": h.temperature_k, "fraction": h.fraction})
            };
            serde_json::json!({
                "earlier_cube": e.file,
                "earlier_sha256": e.sha256,
                "noise_seed": params.noise_seed,
                "changes": params.changes.iter().map(|c| serde_json::json!({
                    "name": c.name(), "bit": c.bit(), "what": c.describe()})).collect::<Vec<_>>(),
                "changed_plane": "truth FITS extension CHANGED: per pixel the bits of the changes that altered its composition or its hot spots",
                "stranger_plane": "truth FITS extension STRANGER: the cover of material outside the library; the abundance planes then sum to 1 minus it",
                "hot_spots_off": t.hot_spots_off.iter().map(spot).collect::<Vec<_>>(),
            })
        }),
        noise: t
            .noise
            .iter()
            .enumerate()
            .map(|(b, n)| NoiseOut {
                band: b + 1,
                centre_um: scene.cube.info.bands.bands()[b].centre_um,
                mean_signal: n.mean_signal,
                sigma_at_mean: n.sigma(n.mean_signal),
                read_sigma: n.read_sigma,
                signal_coeff: n.signal_coeff,
            })
            .collect(),
        files: serde_json::json!({
            "cube": name(cube_path),
            "truth_planes": name(truth_fits),
        }),
    };
    let text = serde_json::to_string_pretty(&json).expect("truth serialises") + "\n";
    crate::atomic::write_bytes(truth_json, text.as_bytes())
}

fn write_truth_planes(path: &Path, scene: &Scene, later: bool) -> Result<(), WriteError> {
    let t = &scene.truth;
    let mut cards = vec![Card::new(
        "CONTENT",
        Value::Text("true abundances".into()),
        "one plane per member",
    )];
    for (i, id) in t.ids.iter().enumerate() {
        cards.push(Card::new(
            &format!("PLANE{}", i + 1),
            Value::Text(id.clone()),
            "",
        ));
    }
    let as_i16 = |m: &Array2<bool>| m.mapv(|v| v as i16);
    let core = as_i16(&t.core);
    let hot = as_i16(&t.hot);
    fn ext<'a>(name: &str, data: &'a Array2<i16>) -> Extension<'a> {
        Extension::Image(ImageHdu {
            data: ImageData::Labels(data.view()),
            cards: vec![Card::new("EXTNAME", Value::Text(name.into()), "")],
        })
    }
    // Each hot pixel's temperature (K) and hot area fraction, NaN elsewhere.
    let (rows, cols) = t.labels.dim();
    let mut therm = ndarray::Array3::<f32>::from_elem((rows, cols, 2), f32::NAN);
    for h in &t.hot_spots {
        therm[(h.row, h.col, 0)] = h.temperature_k as f32;
        therm[(h.row, h.col, 1)] = h.fraction as f32;
    }
    let mut extensions = vec![
        ext("UNITS", &t.labels),
        ext("CORE", &core),
        ext("HOTSPOT", &hot),
        Extension::Image(ImageHdu {
            data: ImageData::Cube(therm.view()),
            cards: vec![
                Card::new("EXTNAME", Value::Text("HOTTHERM".into()), ""),
                Card::new("PLANE1", Value::Text("temperature_k".into()), ""),
                Card::new("PLANE2", Value::Text("fraction".into()), ""),
            ],
        }),
    ];
    // A later epoch's truth of what changed (a first epoch's files stay as they were).
    if later {
        extensions.push(ext("CHANGED", &t.changed));
        extensions.push(Extension::Image(ImageHdu {
            data: ImageData::Plane(t.stranger.view()),
            cards: vec![Card::new("EXTNAME", Value::Text("STRANGER".into()), "")],
        }));
    }
    let primary = ImageHdu {
        data: ImageData::Cube(t.abundance.view()),
        cards,
    };
    crate::fits::write::write_file(path, &primary, &extensions)
}

/// Scale of the 16-bit band-stack PNGs: reflectance = stored × 1/20000 (0 = no data).
pub const STACK_SCALE: f64 = 1.0 / 20_000.0;

fn write_stack(sidecar: &Path, scene: &Scene) -> Result<(), WriteError> {
    use crate::bands::{BandEntry, BandTableFile, TableKind};
    let cube = &scene.cube;
    let (rows, cols, _) = cube.data.dim();
    let base = name(&stem(sidecar));
    let mut entries = BandTableFile::entries(&cube.info.bands);
    for (b, entry) in entries.iter_mut().enumerate() {
        let file = format!("{base}.band-{:03}.png", b + 1);
        let mut img =
            image::ImageBuffer::<image::Luma<u16>, Vec<u16>>::new(cols as u32, rows as u32);
        for r in 0..rows {
            // PNG rows run top-down; internal row 0 is drawn at the bottom for FITS-like
            // orientation only, so a stack keeps internal order (row 0 at the top).
            for c in 0..cols {
                let v = cube.data[(r, c, b)];
                let raw = if v.is_finite() {
                    ((v as f64 / STACK_SCALE).round()).clamp(1.0, 65535.0) as u16
                } else {
                    0
                };
                img.put_pixel(c as u32, r as u32, image::Luma([raw]));
            }
        }
        let mut bytes = Vec::new();
        image::DynamicImage::ImageLuma16(img)
            .write_to(
                &mut std::io::Cursor::new(&mut bytes),
                image::ImageFormat::Png,
            )
            .map_err(|e| WriteError::Io {
                path: sidecar.with_file_name(&file),
                error: std::io::Error::other(e.to_string()),
            })?;
        crate::atomic::write_bytes(&sidecar.with_file_name(&file), &bytes)?;
        *entry = BandEntry {
            file: Some(file),
            scale: Some(STACK_SCALE),
            offset: Some(0.0),
            ..entry.clone()
        };
    }
    let table = BandTableFile {
        kind: TableKind::BandStack,
        name: None,
        quantity: Some(cube.info.quantity),
        nodata: Some(0.0),
        about: cube.info.about.clone(),
        bands: entries,
    };
    let text = toml::to_string(&table).expect("band tables serialise");
    crate::atomic::write_bytes(sidecar, text.as_bytes())
}

/// Truth read back from `<stem>.truth.fits.gz` and `<stem>.truth.json`.
#[derive(Debug, Clone)]
pub struct TruthFiles {
    /// Member ids in plane order.
    pub ids: Vec<String>,
    /// (row, col, member); NaN on sky.
    pub abundance: ndarray::Array3<f32>,
    pub labels: Array2<i16>,
    pub core: Array2<bool>,
    pub hot: Array2<bool>,
    /// A later epoch's CHANGED bits per pixel (zeros for a first epoch).
    pub changed: Array2<i16>,
    /// Groups as (group id, member ids).
    pub groups: Vec<(String, Vec<String>)>,
    pub unit_names: Vec<String>,
    pub json: serde_json::Value,
}

impl TruthFiles {
    /// Reads the truth of the cube at `cube_path`.
    pub fn read(cube_path: &Path) -> Result<TruthFiles, crate::cube::CubeError> {
        use crate::cube::CubeError;
        use crate::fits::{read_elements, scan, Scaling, Source};
        let stem = stem(cube_path);
        let planes = stem.with_file_name(format!("{}.truth.fits.gz", name(&stem)));
        let json_path = stem.with_file_name(format!("{}.truth.json", name(&stem)));
        let bad = |p: &Path, e: String| CubeError::malformed(p, e);
        let text = std::fs::read_to_string(&json_path).map_err(|e| CubeError::io(&json_path, e))?;
        let json: serde_json::Value =
            serde_json::from_str(&text).map_err(|e| bad(&json_path, e.to_string()))?;
        let strings = |v: &serde_json::Value| -> Vec<String> {
            v.as_array()
                .map(|a| {
                    a.iter()
                        .filter_map(|x| x.as_str().map(String::from))
                        .collect()
                })
                .unwrap_or_default()
        };
        let ids = strings(&json["members"]);
        let groups = json["groups"]
            .as_array()
            .map(|a| {
                a.iter()
                    .map(|g| {
                        (
                            g["id"].as_str().unwrap_or("").to_string(),
                            strings(&g["members"]),
                        )
                    })
                    .collect()
            })
            .unwrap_or_default();
        let unit_names = json["units"]
            .as_array()
            .map(|a| {
                a.iter()
                    .filter_map(|u| u["name"].as_str().map(String::from))
                    .collect()
            })
            .unwrap_or_default();
        let src = Source::open(&planes).map_err(|e| bad(&planes, e.to_string()))?;
        let hdus = scan(&src).map_err(|e| bad(&planes, e.to_string()))?;
        let read = |index: usize| -> Result<(Vec<u64>, Vec<f32>), CubeError> {
            let h = &hdus[index];
            h.check_within(src.len())
                .map_err(|e| bad(&planes, e.to_string()))?;
            let axes = h.axes();
            let n: u64 = axes.iter().product();
            let scaling =
                Scaling::from_header(&h.header).map_err(|e| bad(&planes, e.to_string()))?;
            let mut v = vec![0f32; n as usize];
            read_elements(&src, h, &scaling, 0, &mut v, &mut Vec::new())
                .map_err(|e| bad(&planes, e.to_string()))?;
            Ok((axes, v))
        };
        let (axes, values) = read(0)?;
        if axes.len() != 3 || axes[2] as usize != ids.len() {
            return Err(bad(
                &planes,
                "the abundance planes do not match truth.json's members".into(),
            ));
        }
        let (cols, rows, n) = (axes[0] as usize, axes[1] as usize, axes[2] as usize);
        let abundance = ndarray::Array3::from_shape_fn((rows, cols, n), |(r, c, b)| {
            values[(b * rows + r) * cols + c]
        });
        let plane = |extname: &str| -> Result<Array2<i16>, CubeError> {
            let i = hdus
                .iter()
                .position(|h| h.name().as_deref() == Some(extname))
                .ok_or_else(|| bad(&planes, format!("extension {extname} is missing")))?;
            let (_, v) = read(i)?;
            Ok(Array2::from_shape_fn((rows, cols), |(r, c)| {
                v[r * cols + c] as i16
            }))
        };
        Ok(TruthFiles {
            ids,
            abundance,
            labels: plane("UNITS")?,
            core: plane("CORE")?.mapv(|v| v != 0),
            hot: plane("HOTSPOT")?.mapv(|v| v != 0),
            changed: if hdus.iter().any(|h| h.name().as_deref() == Some("CHANGED")) {
                plane("CHANGED")?
            } else {
                Array2::zeros((rows, cols))
            },
            groups,
            unit_names,
            json,
        })
    }

    /// Truth expressed over `ids` where each may be a member id or a group id (members
    /// joined with `+`): the sum of the member planes.
    pub fn over(&self, ids: &[String]) -> ndarray::Array3<f32> {
        let (rows, cols, _) = self.abundance.dim();
        let mut out = ndarray::Array3::<f32>::zeros((rows, cols, ids.len()));
        for (k, id) in ids.iter().enumerate() {
            for part in id.split('+') {
                if let Some(j) = self.ids.iter().position(|x| x == part) {
                    let src = self.abundance.index_axis(ndarray::Axis(2), j);
                    let mut dst = out.index_axis_mut(ndarray::Axis(2), k);
                    dst += &src;
                }
            }
        }
        out
    }
}
