//! The cube page's figure sections: the abundance and standard-error maps, the library
//! members and each unit's mean residual.

use ndarray::{s, Array2, Axis};

use super::charts::{self, Line};
use super::inspect::Spectra;
use super::page::{esc, img, missing, section, sig};
use super::Folder;

/// The abundance and error maps keep at most this many pixels a side.
const MAP_SIDE: usize = 256;

/// Every `stride`-th pixel of a plane, so that maps of large cubes stay small.
fn thin(p: ndarray::ArrayView2<f32>) -> Array2<f32> {
    let stride = p.dim().0.max(p.dim().1).div_ceil(MAP_SIDE).max(1);
    p.slice(s![..;stride, ..;stride]).to_owned()
}

pub(super) fn percentile(v: &[f32], q: f64) -> f32 {
    let mut v: Vec<f32> = v.iter().copied().filter(|x| x.is_finite()).collect();
    if v.is_empty() {
        return 1.0;
    }
    v.sort_by(f32::total_cmp);
    v[((v.len() - 1) as f64 * q) as usize]
}

pub(super) fn abundance(f: &Folder) -> String {
    let ids = f.ids();
    let Some(ab) = &f.abundance else {
        return section(
            "abundance",
            "Abundance maps",
            "Each member's abundance beside its standard error.",
            &missing("abundance.fits is missing: no abundance maps."),
        );
    };
    let bottom = f.row0_at_bottom();
    let (rows, cols) = (ab.dim().0, ab.dim().1);
    let stride = rows.max(cols).div_ceil(MAP_SIDE).max(1);
    let mut s = String::new();
    if stride > 1 {
        s += &format!(
            "<p class=\"note\">These maps show every {stride}th pixel in each direction of \
             the {rows} × {cols} cube; the FITS planes hold them all.</p>"
        );
    }
    s += "<div class=\"maps\">";
    // One figure per plane, made in parallel (each encodes two PNGs), joined in order.
    use rayon::prelude::*;
    let figures: Vec<String> = (0..ab.dim().2)
        .into_par_iter()
        .map(|j| {
            let mut s = String::new();
            let id = ids
                .get(j)
                .cloned()
                .unwrap_or_else(|| format!("plane {}", j + 1));
            let a = thin(ab.index_axis(Axis(2), j));
            let valid = a.mapv(|v| v.is_finite());
            let pic = crate::render::maps::grey_map(
                a.view(),
                valid.view(),
                bottom,
                (0.0, 1.0),
                &format!("abundance of {id}"),
            );
            s += "<figure class=\"mappair\"><div class=\"two\">";
            s += &img(
                "image/png",
                &crate::render::maps::png_bytes(&pic),
                &format!("Map of the abundance of {id}, 0 (black) to 1 (white)"),
                "small",
            );
            match &f.stderr {
                Some(se) if se.dim().2 > j => {
                    let e = thin(se.index_axis(Axis(2), j));
                    let hi = percentile(e.as_slice().unwrap_or(&[]), 0.99).max(1e-6);
                    let valid = e.mapv(|v| v.is_finite());
                    let pic = crate::render::maps::grey_map(
                        e.view(),
                        valid.view(),
                        bottom,
                        (0.0, hi),
                        &format!("standard error of {id}"),
                    );
                    s += &img(
                        "image/png",
                        &crate::render::maps::png_bytes(&pic),
                        &format!(
                            "Map of the standard error of {id}, 0 (black) to {} (white, the 99th \
                         percentile)",
                            sig(hi as f64, 3)
                        ),
                        "small",
                    );
                }
                _ => s += &missing("stderr.fits is missing: no standard-error map."),
            }
            s += &format!("<figcaption>{}</figcaption></figure>", esc(&id));
            s
        })
        .collect();
    s += &figures.concat();
    s += "</div>";
    section(
        "abundance",
        "Abundance maps",
        "Each member's (or group's) abundance, left, beside its standard error, right. Both \
         use a grey ramp (lightness only, so it reads the same under every colour-vision \
         deficiency and in greyscale print; common practice); no-data is dark blue. The \
         error bar is clipped at its 99th percentile.",
        &s,
    )
}

pub(super) fn spectra_section(f: &Folder, spectra: Option<&Spectra>) -> String {
    let mut s = String::new();
    match spectra {
        Some(sp) => {
            let series: Vec<Line> = (0..sp.e.ncols())
                .filter(|j| sp.columns[*j] != "shade")
                .map(|j| Line {
                    name: sp.columns[j].clone(),
                    xs: &sp.centres_um,
                    ys: sp.e.column(j).to_vec(),
                    spread: None,
                    style: Some(j),
                })
                .collect();
            s += &charts::lines(
                "Library members resampled to the cube's bands",
                "wavelength, µm",
                "reflectance factor",
                &series,
                false,
            );
            s += &charts::legend(&series);
            if let Some(res) = unit_residuals(f, sp) {
                s += &res;
            }
        }
        None => {
            s += &missing(
                "The input cube is not at hand: the library members and the residuals are not \
             drawn (thiomap report --cube PATH names it).",
            )
        }
    }
    if let Some(svg) = f.svgs.get("units-spectra.svg") {
        s += "<figure>";
        s += &img(
            "image/svg+xml",
            svg.as_bytes(),
            "Each unit's mean observed spectrum with its ±1σ band and its modelled fit",
            "wide",
        );
        s += "<figcaption>units-spectra.svg: each unit's mean spectrum (±1σ shaded) and its \
              modelled fit (black).</figcaption></figure>";
    }
    section(
        "spectra",
        "Spectra",
        "The members as the cube's bands see them; each unit's mean spectrum against its \
         modelled fit; and the mean residual (observed − modelled) per unit, which should \
         scatter about zero. Lines use the Okabe–Ito palette (readable under the common \
         colour-vision deficiencies) with dash patterns.",
        &s,
    )
}

/// Each unit's mean residual (observed − modelled) per band, as a chart.
fn unit_residuals(f: &Folder, sp: &Spectra) -> Option<String> {
    let (labels, ab) = (f.labels.as_ref()?, f.abundance.as_ref()?);
    let ids = f.ids();
    let (rows, cols, nb) = sp.data.dim();
    if labels.dim() != (rows, cols) || ab.dim().0 != rows {
        return None;
    }
    let shade = ids.iter().position(|i| i == "shade");
    let plane: Vec<Option<usize>> = sp
        .columns
        .iter()
        .map(|c| ids.iter().position(|i| i == c))
        .collect();
    let mut sums: std::collections::BTreeMap<i32, (Vec<f64>, f64)> = Default::default();
    for ((r, c), l) in labels.indexed_iter() {
        if *l <= 0 || !sp.valid[(r, c)] {
            continue;
        }
        let s = shade.map_or(0.0, |k| ab[(r, c, k)] as f64);
        let entry = sums.entry(*l).or_insert_with(|| (vec![0.0; nb], 0.0));
        entry.1 += 1.0;
        for b in 0..nb {
            let mut fit = 0.0;
            for (j, p) in plane.iter().enumerate() {
                let Some(p) = p else { continue };
                let raw = if Some(*p) == shade {
                    s
                } else {
                    ab[(r, c, *p)] as f64 * (1.0 - s)
                };
                fit += sp.e[(b, j)] * raw;
            }
            entry.0[b] += sp.data[(r, c, b)] as f64 - fit;
        }
    }
    let names: std::collections::BTreeMap<i32, String> = f
        .units_csv
        .as_ref()
        .map(|(h, rows)| {
            let u = h.iter().position(|x| x == "unit");
            let l = h.iter().position(|x| x == "label");
            rows.iter()
                .filter_map(|r| {
                    Some((
                        r.get(u?)?.parse().ok()?,
                        r.get(l?).cloned().unwrap_or_default(),
                    ))
                })
                .collect()
        })
        .unwrap_or_default();
    let series: Vec<Line> = sums
        .iter()
        .enumerate()
        .map(|(i, (u, (sum, n)))| Line {
            name: format!("{u}: {}", names.get(u).cloned().unwrap_or_default()),
            xs: &sp.centres_um,
            ys: sum.iter().map(|v| v / n).collect(),
            spread: None,
            style: Some(i),
        })
        .collect();
    if series.is_empty() {
        return None;
    }
    Some(
        charts::lines(
            "Mean residual per unit (observed − modelled)",
            "wavelength, µm",
            &sp.what,
            &series,
            true,
        ) + &charts::legend(&series),
    )
}
