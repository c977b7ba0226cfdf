//! Pictures of surface units: the legend (SVG) and each unit's mean spectrum with ±1σ and
//! its modelled fit (SVG, one panel per unit). Text uses the compiled-in font.

use plotters::prelude::*;

/// One legend row.
pub struct LegendRow {
    pub unit: usize,
    pub label: String,
    pub class: String,
    pub area_fraction: f64,
    pub colour: [u8; 3],
    /// Drawn as the unexplained pattern.
    pub unexplained: bool,
}

/// The legend as SVG text.
pub fn legend_svg(rows: &[LegendRow], area_note: &str) -> Result<String, String> {
    super::plot::register_font();
    let h = 70 + 30 * rows.len() as u32 + 50;
    let w = 760u32;
    let mut svg = String::new();
    {
        let area = SVGBackend::with_string(&mut svg, (w, h)).into_drawing_area();
        area.fill(&WHITE).map_err(|e| e.to_string())?;
        let font = |size| (super::plot::FAMILY, size).into_font().color(&BLACK);
        area.draw_text("Surface units", &font(20), (16, 14))
            .map_err(|e| e.to_string())?;
        area.draw_text(
            &format!("unit — label [class] — area ({area_note})"),
            &font(13),
            (16, 42),
        )
        .map_err(|e| e.to_string())?;
        for (i, r) in rows.iter().enumerate() {
            let y = 70 + 30 * i as i32;
            if r.unexplained {
                for k in 0..4 {
                    let (x0, y0) = (16 + (k % 2) * 11, y + (k / 2) * 11);
                    let c = if (k % 2 + k / 2) % 2 == 0 {
                        RGBColor(255, 0, 255)
                    } else {
                        BLACK
                    };
                    area.draw(&Rectangle::new([(x0, y0), (x0 + 11, y0 + 11)], c.filled()))
                        .map_err(|e| e.to_string())?;
                }
            } else {
                let [cr, cg, cb] = r.colour;
                area.draw(&Rectangle::new(
                    [(16, y), (38, y + 22)],
                    RGBColor(cr, cg, cb).filled(),
                ))
                .map_err(|e| e.to_string())?;
            }
            area.draw(&Rectangle::new(
                [(16, y), (38, y + 22)],
                RGBColor(90, 90, 90),
            ))
            .map_err(|e| e.to_string())?;
            area.draw_text(
                &format!(
                    "{}  {} [{}] — {:.1} %",
                    r.unit,
                    r.label,
                    r.class,
                    100.0 * r.area_fraction
                ),
                &font(14),
                (50, y + 4),
            )
            .map_err(|e| e.to_string())?;
        }
        let foot = h as i32 - 40;
        area.draw_text(
            "Colours: each unit in the sRGB colour of its mean modelled spectrum (CIE 1931 2°, D65),",
            &font(12),
            (16, foot),
        )
        .map_err(|e| e.to_string())?;
        area.draw_text(
            "nudged apart below ΔE*ab 10 — thiomap's own scheme. Unexplained pixels: magenta/black checks.",
            &font(12),
            (16, foot + 16),
        )
        .map_err(|e| e.to_string())?;
        area.present().map_err(|e| e.to_string())?;
    }
    Ok(svg)
}

/// One panel of the spectra figure.
pub struct UnitSpectrum {
    pub title: String,
    pub colour: [u8; 3],
    pub centres_um: Vec<f64>,
    pub mean: Vec<f64>,
    pub std: Vec<f64>,
    pub model: Vec<f64>,
}

/// Each unit's mean observed spectrum (±1σ shaded) and modelled fit (black), as SVG text.
pub fn spectra_svg(panels: &[UnitSpectrum]) -> Result<String, String> {
    super::plot::register_font();
    let n = panels.len().max(1);
    let ncols = n.min(3);
    let nrows = n.div_ceil(ncols);
    let (w, h) = (420 * ncols as u32, 300 * nrows as u32);
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (w, h)).into_drawing_area();
        root.fill(&WHITE).map_err(|e| e.to_string())?;
        let cells = root.split_evenly((nrows, ncols));
        for (p, area) in panels.iter().zip(cells.iter()) {
            let x0 = p.centres_um.first().copied().unwrap_or(0.0);
            let x1 = p.centres_um.last().copied().unwrap_or(1.0).max(x0 + 1e-3);
            let top = p
                .mean
                .iter()
                .zip(&p.std)
                .map(|(m, s)| m + s)
                .chain(p.model.iter().cloned())
                .fold(0.05, f64::max)
                * 1.1;
            let mut chart = ChartBuilder::on(area)
                .caption(&p.title, (super::plot::FAMILY, 14))
                .margin(8)
                .x_label_area_size(30)
                .y_label_area_size(44)
                .build_cartesian_2d(x0..x1, 0.0..top)
                .map_err(|e| e.to_string())?;
            chart
                .configure_mesh()
                .x_desc("wavelength (µm)")
                .y_desc("reflectance")
                .label_style((super::plot::FAMILY, 11))
                .axis_desc_style((super::plot::FAMILY, 12))
                .light_line_style(RGBColor(238, 238, 238))
                .draw()
                .map_err(|e| e.to_string())?;
            let [r, g, b] = super::plot::legible(p.colour);
            let colour = RGBColor(r, g, b);
            let band: Vec<(f64, f64)> = p
                .centres_um
                .iter()
                .zip(p.mean.iter().zip(&p.std))
                .map(|(x, (m, s))| (*x, m + s))
                .chain(
                    p.centres_um
                        .iter()
                        .zip(p.mean.iter().zip(&p.std))
                        .rev()
                        .map(|(x, (m, s))| (*x, (m - s).max(0.0))),
                )
                .collect();
            chart
                .draw_series(std::iter::once(Polygon::new(
                    band,
                    colour.mix(0.25).filled(),
                )))
                .map_err(|e| e.to_string())?;
            chart
                .draw_series(LineSeries::new(
                    p.centres_um.iter().zip(&p.mean).map(|(x, y)| (*x, *y)),
                    colour.stroke_width(2),
                ))
                .map_err(|e| e.to_string())?;
            chart
                .draw_series(LineSeries::new(
                    p.centres_um.iter().zip(&p.model).map(|(x, y)| (*x, *y)),
                    BLACK.stroke_width(1),
                ))
                .map_err(|e| e.to_string())?;
        }
        root.present().map_err(|e| e.to_string())?;
    }
    Ok(svg)
}
