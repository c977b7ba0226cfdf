//! FITS cubes: reading a 3-axis image (x, y, band) with its spectral WCS, geometry
//! backplanes and description, and writing a cube back out.
//!
//! Band centres come from the standard spectral axis (FITS WCS Paper III, Greisen et al.
//! 2006, A&A 446:747): either linear (`CTYPE3 = 'WAVE'`, `CRVAL3`, `CDELT3` or `CD3_3`,
//! `CRPIX3`, `CUNIT3`) or the lookup-table convention (`CTYPE3 = 'WAVE-TAB'`, with
//! `PS3_0` naming the binary table, `PS3_1` its coordinate column and `PS3_2` an optional
//! index column). Band widths are our own addition: a `FWHM` column in that same table,
//! or a `BANDFWHM` keyword (in `CUNIT3` units) when every band has the same width.
//! Spectral units: m (the WCS default), um, nm, Angstrom.
//!
//! Our own keywords: `QUANTITY` (what the samples are, see [`Quantity`]), `BANDFWHM` and
//! `SUNDIST` (the Sun's distance at the observation, AU); our own band-table column:
//! `NOISE` (each band's noise σ in the samples' units).
//! Description comes from the standard `OBJECT`, `DATE-OBS` and `INSTRUME`.

use std::path::Path;

use ndarray::{Array2, Array3, Axis};
use rayon::prelude::*;

use super::{
    check_rows, check_shape, interleave_into, About, Backplane, Backplanes, Band, BandTable, Block,
    Cube, CubeError, CubeInfo, CubeReader, Format, Quantity, Response,
};
use crate::fits::header::{Card, Header, Value};
use crate::fits::write::{Extension, ImageData, ImageHdu, TableColumn, TableHdu};
use crate::fits::{self, read_elements, FitsError, Hdu, HduKind, Scaling, Source};

/// A FITS file opened for reading one cube HDU.
pub struct FitsCube {
    info: CubeInfo,
    src: Source,
    hdus: Vec<Hdu>,
    cube: usize,
    scaling: Scaling,
}

fn wrap(path: &Path) -> impl Fn(FitsError) -> CubeError + '_ {
    move |e| match e {
        FitsError::Io(source) if source.kind() == std::io::ErrorKind::UnexpectedEof => {
            CubeError::malformed(
                path,
                "the file ends before the data it declares (truncated)",
            )
        }
        FitsError::Io(source) => CubeError::io(path, source),
        FitsError::Malformed(reason) => CubeError::malformed(path, reason),
    }
}

impl FitsCube {
    /// Opens `path` and selects the cube HDU: the one `hdu` names (EXTNAME or index), or
    /// else the first HDU with NAXIS = 3.
    pub fn open(path: &Path, hdu: Option<&str>) -> Result<FitsCube, CubeError> {
        let src = Source::open(path).map_err(wrap(path))?;
        let hdus = fits::scan(&src).map_err(wrap(path))?;
        let cube = select_hdu(path, &hdus, hdu)?;
        let h = &hdus[cube].header;
        let scaling = Scaling::from_header(h).map_err(|e| CubeError::Unsupported {
            path: path.to_path_buf(),
            reason: format!("HDU {cube}: {e}"),
        })?;
        let axes = hdus[cube].axes();
        let to_usize = |v: u64| usize::try_from(v).unwrap_or(usize::MAX);
        let (cols, rows, nbands) = (to_usize(axes[0]), to_usize(axes[1]), to_usize(axes[2]));
        check_shape(path, rows, cols, nbands)?;
        hdus[cube].check_within(src.len()).map_err(wrap(path))?;
        let bands = spectral_axis(path, &src, &hdus, h, nbands)?;
        let quantity = match h.str("QUANTITY") {
            None => Quantity::Undeclared,
            Some(q) => Quantity::parse(q).ok_or_else(|| {
                CubeError::malformed(
                    path,
                    format!(
                        "QUANTITY = '{q}' is not one of reflectance-factor, i-over-f, \
                         radiance-factor, undeclared"
                    ),
                )
            })?,
        };
        let about = About {
            target: h.str("OBJECT").map(str::to_string),
            time: h.str("DATE-OBS").map(str::to_string),
            instrument: h.str("INSTRUME").map(str::to_string),
            sun_distance_au: match h.f64("SUNDIST") {
                Some(d) if d.is_finite() && d > 0.0 => Some(d),
                Some(d) => {
                    return Err(CubeError::malformed(
                        path,
                        format!(
                            "SUNDIST = {d}: the Sun's distance must be a positive number of AU"
                        ),
                    ))
                }
                None => None,
            },
            extra: Default::default(),
        };
        let info = CubeInfo {
            path: path.to_path_buf(),
            format: Format::Fits { hdu: cube },
            rows,
            cols,
            bands,
            quantity,
            spatial_wcs: spatial_wcs_cards(h),
            about,
            inputs: vec![path.to_path_buf()],
        };
        Ok(FitsCube {
            info,
            src,
            hdus,
            cube,
            scaling,
        })
    }
}

fn select_hdu(path: &Path, hdus: &[Hdu], wanted: Option<&str>) -> Result<usize, CubeError> {
    let is_image = |h: &Hdu| matches!(h.kind, HduKind::Primary | HduKind::Image);
    let naxis = |h: &Hdu| h.header.i64("NAXIS").unwrap_or(0);
    match wanted {
        Some(sel) => {
            let found = match sel.trim().parse::<usize>() {
                Ok(i) => hdus.get(i),
                Err(_) => hdus
                    .iter()
                    .find(|h| h.name().as_deref() == Some(&sel.trim().to_ascii_uppercase())),
            };
            let h = found.ok_or_else(|| {
                CubeError::malformed(
                    path,
                    format!(
                        "--hdu {sel}: no such HDU (the file has {}: {})",
                        hdus.len(),
                        describe_hdus(hdus)
                    ),
                )
            })?;
            if !is_image(h) || naxis(h) != 3 {
                return Err(CubeError::malformed(
                    path,
                    format!(
                        "--hdu {sel}: HDU {} is not a 3-axis image (NAXIS = {}); a cube needs \
                         axes x, y, band",
                        h.index,
                        naxis(h)
                    ),
                ));
            }
            Ok(h.index)
        }
        None => hdus
            .iter()
            .find(|h| is_image(h) && naxis(h) == 3)
            .map(|h| h.index)
            .ok_or_else(|| {
                CubeError::malformed(
                    path,
                    format!(
                        "no HDU holds a 3-axis image (x, y, band), so there is no band axis \
                         (found: {})",
                        describe_hdus(hdus)
                    ),
                )
            }),
    }
}

fn describe_hdus(hdus: &[Hdu]) -> String {
    hdus.iter()
        .map(|h| {
            let axes: Vec<String> = h.axes().iter().map(|a| a.to_string()).collect();
            format!(
                "HDU {} {} NAXIS={} [{}]",
                h.index,
                h.name().unwrap_or_default(),
                axes.len(),
                axes.join("×")
            )
        })
        .collect::<Vec<_>>()
        .join("; ")
}

/// Micrometres per unit of a FITS spectral unit string.
fn um_per_unit(unit: &str) -> Option<f64> {
    match unit.trim().to_ascii_lowercase().as_str() {
        "m" => Some(1e6),
        "um" => Some(1.0),
        "nm" => Some(1e-3),
        "angstrom" => Some(1e-4),
        _ => None,
    }
}

fn spectral_axis(
    path: &Path,
    src: &Source,
    hdus: &[Hdu],
    h: &Header,
    n: usize,
) -> Result<BandTable, CubeError> {
    let bad = |reason: String| CubeError::malformed(path, reason);
    let ctype = h.str("CTYPE3").map(str::trim).ok_or_else(|| {
        bad("CTYPE3 is missing: the band axis needs wavelengths ('WAVE' or 'WAVE-TAB')".into())
    })?;
    let unit_name = h.str("CUNIT3").map(str::trim).unwrap_or("m");
    let scale = um_per_unit(unit_name).ok_or_else(|| {
        bad(format!(
            "CUNIT3 = '{unit_name}' is an unknown spectral unit (expected m, um, nm or Angstrom)"
        ))
    })?;
    let crval = h.f64("CRVAL3").unwrap_or(0.0);
    let crpix = h.f64("CRPIX3").unwrap_or(0.0);
    let cdelt = match h.f64("CD3_3") {
        Some(cd) => cd,
        None => h.f64("CDELT3").unwrap_or(1.0) * h.f64("PC3_3").unwrap_or(1.0),
    };
    let psi = |p: usize| crval + cdelt * (p as f64 - crpix);
    let mut noise: Option<Vec<f64>> = None;
    let (centres, widths): (Vec<f64>, Option<Vec<f64>>) = match ctype {
        "WAVE" => {
            let centres = (1..=n).map(|p| psi(p) * scale).collect();
            let widths = h.f64("BANDFWHM").map(|w| vec![w * scale; n]);
            (centres, widths)
        }
        "WAVE-TAB" => {
            let ext = h.str("PS3_0").map(str::trim).ok_or_else(|| {
                bad("CTYPE3 = 'WAVE-TAB' but PS3_0 (the table's EXTNAME) is missing".into())
            })?;
            let coord_col = h.str("PS3_1").map(str::trim).ok_or_else(|| {
                bad("CTYPE3 = 'WAVE-TAB' but PS3_1 (the coordinate column) is missing".into())
            })?;
            let table = hdus
                .iter()
                .find(|t| {
                    t.kind == HduKind::BinTable
                        && t.name().as_deref() == Some(&ext.to_ascii_uppercase())
                })
                .ok_or_else(|| bad(format!("WAVE-TAB: no binary table named '{ext}'")))?;
            let read = |name: &str| fits::read_table_column(src, table, name).map_err(wrap(path));
            let coord = read(coord_col)?;
            let index = match h.str("PS3_2").map(str::trim) {
                Some(name) if !name.is_empty() => Some(read(name)?.values),
                _ => None,
            };
            let mut centres = Vec::with_capacity(n);
            for p in 1..=n {
                let mut upsilon = psi(p);
                if let Some(index) = &index {
                    upsilon = locate(index, upsilon).ok_or_else(|| {
                        bad(format!("WAVE-TAB: band {p} falls outside the index column"))
                    })?;
                }
                let value = interpolate(&coord.values, upsilon).ok_or_else(|| {
                    bad(format!(
                        "WAVE-TAB: band {p} (table position {upsilon}) falls outside the \
                         {}-entry coordinate column",
                        coord.values.len()
                    ))
                })?;
                centres.push(value * scale);
            }
            let widths = match fits::read_table_column(src, table, "FWHM") {
                Ok(col) => {
                    if col.values.len() != n {
                        return Err(bad(format!(
                            "WAVE-TAB: the FWHM column has {} values for {n} bands",
                            col.values.len()
                        )));
                    }
                    let wscale = match &col.unit {
                        Some(u) => um_per_unit(u)
                            .ok_or_else(|| bad(format!("WAVE-TAB: FWHM unit '{u}' is unknown")))?,
                        None => scale,
                    };
                    Some(col.values.iter().map(|w| w * wscale).collect())
                }
                Err(_) => None,
            };
            if let Ok(col) = fits::read_table_column(src, table, "NOISE") {
                if col.values.len() != n {
                    return Err(bad(format!(
                        "WAVE-TAB: the NOISE column has {} values for {n} bands",
                        col.values.len()
                    )));
                }
                noise = Some(col.values);
            }
            (centres, widths)
        }
        other => {
            return Err(bad(format!(
                "CTYPE3 = '{other}': the band axis must be wavelength, 'WAVE' or 'WAVE-TAB'"
            )))
        }
    };
    let bands = centres
        .iter()
        .enumerate()
        .map(|(i, &c)| Band {
            centre_um: c,
            response: match &widths {
                Some(w) => Response::Gaussian { fwhm_um: w[i] },
                None => Response::Point,
            },
        })
        .collect();
    let table = BandTable::new(bands).map_err(|source| CubeError::Bands {
        path: path.to_path_buf(),
        error: source,
    })?;
    match noise {
        Some(sigma) => table
            .with_noise_sigma(sigma)
            .map_err(|e| bad(format!("WAVE-TAB NOISE column: {e}"))),
        None => Ok(table),
    }
}

/// Linear interpolation in a 1-based table at fractional position `x`.
fn interpolate(table: &[f64], x: f64) -> Option<f64> {
    let k = table.len();
    if k == 0 || !(x >= 1.0 - 1e-9 && x <= k as f64 + 1e-9) {
        return None;
    }
    let x = x.clamp(1.0, k as f64);
    let i = (x.floor() as usize).min(k);
    if i == k {
        return Some(table[k - 1]);
    }
    let f = x - i as f64;
    Some(table[i - 1] + f * (table[i] - table[i - 1]))
}

/// The 1-based fractional position where a monotonic index column takes the value `v`.
fn locate(index: &[f64], v: f64) -> Option<f64> {
    for i in 0..index.len().saturating_sub(1) {
        let (a, b) = (index[i], index[i + 1]);
        if (a <= v && v <= b) || (b <= v && v <= a) {
            let f = if b == a { 0.0 } else { (v - a) / (b - a) };
            return Some(i as f64 + 1.0 + f);
        }
    }
    (index.len() == 1 && index[0] == v).then_some(1.0)
}

/// Keywords of the spatial WCS (axes 1 and 2), copied through to outputs (and compared by
/// `compare` to tell whether two results share a grid).
pub(crate) fn spatial_wcs_cards(h: &Header) -> Vec<Card> {
    const SINGLE: [&str; 9] = [
        "WCSNAME", "RADESYS", "RADECSYS", "EQUINOX", "LONPOLE", "LATPOLE", "MJDREF", "DATEREF",
        "WCSAXES",
    ];
    const PER_AXIS: [&str; 6] = ["CTYPE", "CUNIT", "CRVAL", "CRPIX", "CDELT", "CROTA"];
    h.cards
        .iter()
        .filter(|c| {
            let k = c.key.as_str();
            if k == "WCSAXES" {
                return false;
            }
            SINGLE.contains(&k)
                || PER_AXIS
                    .iter()
                    .any(|p| k == format!("{p}1") || k == format!("{p}2"))
                || [
                    "CD1_1", "CD1_2", "CD2_1", "CD2_2", "PC1_1", "PC1_2", "PC2_1", "PC2_2",
                ]
                .contains(&k)
                || k.starts_with("PV1_")
                || k.starts_with("PV2_")
        })
        .cloned()
        .collect()
}

/// Rows per parallel task: about 1 MiB of f32 samples.
fn rows_per_task(cols: usize, bands: usize) -> usize {
    ((1usize << 18) / (cols * bands).max(1)).max(1)
}

impl CubeReader for FitsCube {
    fn info(&self) -> &CubeInfo {
        &self.info
    }

    fn read_rows(&self, first: usize, count: usize) -> Result<Block, CubeError> {
        check_rows(&self.info, first, count)?;
        let (rows, cols, nb) = (self.info.rows, self.info.cols, self.info.bands.len());
        let hdu = &self.hdus[self.cube];
        let mut data = Array3::<f32>::zeros((count, cols, nb));
        let group = rows_per_task(cols, nb);
        data.axis_chunks_iter_mut(Axis(0), group)
            .into_par_iter()
            .enumerate()
            .try_for_each(|(g, chunk)| {
                let r0 = first + g * group;
                let per_band = chunk.dim().0 * cols;
                let mut planes = vec![0f32; per_band * nb];
                let mut scratch = Vec::new();
                for (b, plane) in planes.chunks_exact_mut(per_band).enumerate() {
                    let start = ((b * rows + r0) * cols) as u64;
                    read_elements(&self.src, hdu, &self.scaling, start, plane, &mut scratch)
                        .map_err(wrap(&self.info.path))?;
                }
                interleave_into(chunk, &planes);
                Ok(())
            })?;
        Ok(Block::from_samples(first, data))
    }

    fn backplanes(&self) -> Result<Backplanes, CubeError> {
        let path = &self.info.path;
        let mut out = Backplanes::new();
        for plane in Backplane::ALL {
            let Some(hdu) = self
                .hdus
                .iter()
                .find(|h| h.kind == HduKind::Image && h.name().as_deref() == Some(plane.extname()))
            else {
                continue;
            };
            let axes = hdu.axes();
            if axes != [self.info.cols as u64, self.info.rows as u64] {
                return Err(CubeError::malformed(
                    path,
                    format!(
                        "backplane {} has axes {:?}, but the cube is {} columns × {} rows",
                        plane.extname(),
                        axes,
                        self.info.cols,
                        self.info.rows
                    ),
                ));
            }
            hdu.check_within(self.src.len()).map_err(wrap(path))?;
            let scaling = Scaling::from_header(&hdu.header).map_err(wrap(path))?;
            let mut values = vec![0f32; self.info.pixels()];
            read_elements(&self.src, hdu, &scaling, 0, &mut values, &mut Vec::new())
                .map_err(wrap(path))?;
            let arr = Array2::from_shape_vec((self.info.rows, self.info.cols), values)
                .expect("length matches rows × cols");
            out.insert(plane, arr);
        }
        Ok(out)
    }
}

/// Writes a cube as FITS: the samples as the primary HDU (BITPIX −32, axes x, y, band),
/// the spectral axis as linear WCS when the centres are evenly spaced and the widths equal,
/// otherwise as `WAVE-TAB` with WAVELENGTH and FWHM columns (µm); spatial WCS cards,
/// description and backplanes copied through. The file appears whole or not at all; a
/// name ending in `.gz` is gzip-compressed.
pub fn write_cube(path: &Path, cube: &Cube) -> Result<(), crate::atomic::WriteError> {
    let info = &cube.info;
    let mut cards = Vec::new();
    let text = |s: &str| Value::Text(s.to_string());
    let bands = &info.bands;
    let mut extensions = Vec::new();
    let linear = match (bands.regular_step_um(), bands.uniform_fwhm_um()) {
        // Per-band noise needs the table.
        _ if bands.noise_sigma().is_some() => None,
        (Some(step), Some(w)) => Some((step, Some(w))),
        (Some(step), None) if bands.bands().iter().all(|b| b.response == Response::Point) => {
            Some((step, None))
        }
        _ => None,
    };
    match linear {
        Some((step, width)) => {
            cards.push(Card::new("CTYPE3", text("WAVE"), "wavelength"));
            cards.push(Card::new("CUNIT3", text("um"), ""));
            cards.push(Card::new("CRPIX3", Value::Real(1.0), ""));
            cards.push(Card::new(
                "CRVAL3",
                Value::Real(bands.bands()[0].centre_um),
                "first band centre",
            ));
            cards.push(Card::new("CDELT3", Value::Real(step), "band step"));
            if let Some(w) = width {
                cards.push(Card::new(
                    "BANDFWHM",
                    Value::Real(w),
                    "band FWHM, CUNIT3 units",
                ));
            }
        }
        None => {
            cards.push(Card::new(
                "CTYPE3",
                text("WAVE-TAB"),
                "wavelength from a table",
            ));
            cards.push(Card::new("CUNIT3", text("um"), ""));
            cards.push(Card::new("CRPIX3", Value::Real(1.0), ""));
            cards.push(Card::new("CRVAL3", Value::Real(1.0), ""));
            cards.push(Card::new("CDELT3", Value::Real(1.0), ""));
            cards.push(Card::new("PS3_0", text("WCS-TAB"), "table extension"));
            cards.push(Card::new("PS3_1", text("WAVELENGTH"), "coordinate column"));
            let mut columns = vec![TableColumn {
                name: "WAVELENGTH".into(),
                unit: "um".into(),
                values: bands.centres_um(),
            }];
            if bands.bands().iter().all(|b| b.fwhm_um().is_some()) {
                columns.push(TableColumn {
                    name: "FWHM".into(),
                    unit: "um".into(),
                    values: bands.bands().iter().filter_map(|b| b.fwhm_um()).collect(),
                });
            }
            if let Some(sigma) = bands.noise_sigma() {
                columns.push(TableColumn {
                    name: "NOISE".into(),
                    unit: "".into(),
                    values: sigma.to_vec(),
                });
            }
            extensions.push(Extension::Table(TableHdu {
                extname: "WCS-TAB".into(),
                columns,
            }));
        }
    }
    if info.quantity != Quantity::Undeclared {
        cards.push(Card::new(
            "QUANTITY",
            text(info.quantity.as_str()),
            "what the samples are",
        ));
    }
    for (key, value) in [
        ("OBJECT", &info.about.target),
        ("DATE-OBS", &info.about.time),
        ("INSTRUME", &info.about.instrument),
    ] {
        if let Some(v) = value {
            cards.push(Card::new(key, text(v), ""));
        }
    }
    if let Some(d) = info.about.sun_distance_au {
        cards.push(Card::new(
            "SUNDIST",
            Value::Real(d),
            "distance from the Sun, AU",
        ));
    }
    cards.extend(info.spatial_wcs.iter().cloned());
    for (plane, values) in &cube.backplanes {
        extensions.push(Extension::Image(ImageHdu {
            data: ImageData::Plane(values.view()),
            cards: vec![
                Card::new("EXTNAME", text(plane.extname()), ""),
                Card::new("BUNIT", text("deg"), ""),
            ],
        }));
    }
    let primary = ImageHdu {
        data: ImageData::Cube(cube.data.view()),
        cards,
    };
    crate::fits::write::write_file(path, &primary, &extensions)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn interpolation_in_a_one_based_table() {
        let t = [10.0, 20.0, 40.0];
        assert_eq!(interpolate(&t, 1.0), Some(10.0));
        assert_eq!(interpolate(&t, 2.5), Some(30.0));
        assert_eq!(interpolate(&t, 3.0), Some(40.0));
        assert_eq!(interpolate(&t, 3.5), None);
        assert_eq!(locate(&[1.0, 2.0, 3.0], 2.5), Some(2.5));
    }

    #[test]
    fn spectral_units_convert_to_micrometres() {
        assert_eq!(um_per_unit("m"), Some(1e6));
        assert_eq!(um_per_unit("nm"), Some(1e-3));
        assert_eq!(um_per_unit("Angstrom"), Some(1e-4));
        assert_eq!(um_per_unit("furlong"), None);
    }
}
