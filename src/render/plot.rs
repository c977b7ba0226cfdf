//! Spectrum plots with plotters: labelled lines over wavelength, optionally with a band
//! set drawn as shaded strips (centre ± FWHM/2). SVG keeps text as text; PNG renders text
//! with DejaVu Sans compiled in (plotters measures text with a font from bytes, and the
//! system's font libraries are left out on purpose). Lines are drawn in the colour each
//! material has to the eye; light materials (frost, cold sulfur) get a dark casing so they
//! stay visible on white paper.

use std::path::Path;
use std::sync::Once;

use plotters::prelude::*;

use crate::atomic::WriteError;

const FONT: &[u8] = include_bytes!("../../assets/fonts/DejaVuSans.ttf");
/// The font family every picture's text uses (DejaVu Sans, compiled in).
pub const FAMILY: &str = "sans-serif";
static REGISTER: Once = Once::new();

/// Registers the compiled-in font with plotters (once per process).
pub fn register_font() {
    REGISTER.call_once(|| {
        // The font is compiled in and known to parse (tested).
        let _ = plotters::style::register_font(FAMILY, FontStyle::Normal, FONT);
    });
}

/// One line of a plot.
pub struct Series {
    pub label: String,
    pub x: Vec<f64>,
    pub y: Vec<f64>,
    pub colour: [u8; 3],
}

/// A band drawn as a strip.
pub struct Strip {
    pub lo: f64,
    pub hi: f64,
}

/// What to draw.
pub struct SpectrumPlot<'a> {
    pub title: String,
    pub x_range: (f64, f64),
    pub y_max: f64,
    pub series: &'a [Series],
    pub strips: &'a [Strip],
    pub strip_label: Option<String>,
}

/// Darkens a colour so its relative luminance stays at most 0.35 (visible on white),
/// keeping its hue; a colour that needs darkening is drawn with a casing.
pub fn legible(rgb: [u8; 3]) -> [u8; 3] {
    let lin = rgb.map(|v| {
        let c = v as f64 / 255.0;
        if c <= 0.04045 {
            c / 12.92
        } else {
            ((c + 0.055) / 1.055).powf(2.4)
        }
    });
    let y = 0.2126 * lin[0] + 0.7152 * lin[1] + 0.0722 * lin[2];
    if y <= 0.35 {
        return rgb;
    }
    let k = 0.35 / y;
    lin.map(|c| (crate::colour::encode(c * k) * 255.0).round() as u8)
}

fn draw<DB: DrawingBackend>(
    area: DrawingArea<DB, plotters::coord::Shift>,
    p: &SpectrumPlot,
) -> Result<(), String>
where
    DB::ErrorType: 'static,
{
    let e = |err: &dyn std::fmt::Display| err.to_string();
    area.fill(&WHITE).map_err(|x| e(&x))?;
    let mut chart = ChartBuilder::on(&area)
        .caption(&p.title, (FAMILY, 22))
        .margin(16)
        .x_label_area_size(48)
        .y_label_area_size(64)
        .build_cartesian_2d(p.x_range.0..p.x_range.1, 0.0..p.y_max)
        .map_err(|x| e(&x))?;
    chart
        .configure_mesh()
        .x_desc("wavelength (µm)")
        .y_desc("reflectance factor")
        .label_style((FAMILY, 15))
        .axis_desc_style((FAMILY, 17))
        .light_line_style(RGBColor(235, 235, 235))
        .draw()
        .map_err(|x| e(&x))?;
    if !p.strips.is_empty() {
        let shade = RGBColor(120, 150, 200).mix(0.18);
        let strips = chart
            .draw_series(
                p.strips
                    .iter()
                    .map(|s| Rectangle::new([(s.lo, 0.0), (s.hi, p.y_max)], shade.filled())),
            )
            .map_err(|x| e(&x))?;
        if let Some(label) = &p.strip_label {
            strips.label(label.clone()).legend(move |(x, y)| {
                Rectangle::new([(x, y - 6), (x + 18, y + 6)], shade.filled())
            });
        }
    }
    let (x0, x1) = p.x_range;
    for s in p.series {
        // Points inside the range plus one either side, so lines reach the frame.
        let first = s.x.partition_point(|&x| x < x0).saturating_sub(1);
        let last = (s.x.partition_point(|&x| x <= x1) + 1).min(s.x.len());
        let points: Vec<(f64, f64)> = (first..last).map(|i| (s.x[i], s.y[i])).collect();
        let [r, g, b] = s.colour;
        let colour = RGBColor(r, g, b);
        let light = legible(s.colour) != s.colour;
        if light {
            // A light material keeps its own colour, drawn over a dark casing.
            chart
                .draw_series(LineSeries::new(
                    points.clone(),
                    RGBColor(90, 90, 90).stroke_width(4),
                ))
                .map_err(|x| e(&x))?;
        }
        chart
            .draw_series(LineSeries::new(points, colour.stroke_width(2)))
            .map_err(|x| e(&x))?
            .label(s.label.clone())
            .legend(move |(x, y)| {
                let casing = if light { RGBColor(90, 90, 90) } else { colour };
                EmptyElement::at((x, y))
                    + PathElement::new(vec![(0, 0), (18, 0)], casing.stroke_width(5))
                    + PathElement::new(vec![(0, 0), (18, 0)], colour.stroke_width(3))
            });
    }
    chart
        .configure_series_labels()
        .position(SeriesLabelPosition::UpperRight)
        .label_font((FAMILY, 14))
        .background_style(WHITE.mix(0.9))
        .border_style(RGBColor(160, 160, 160))
        .draw()
        .map_err(|x| e(&x))?;
    area.present().map_err(|x| e(&x))?;
    Ok(())
}

/// Writes the plot as SVG or PNG (by the file's extension), atomically.
pub fn write_plot(path: &Path, plot: &SpectrumPlot) -> Result<(), WriteError> {
    let (w, h) = (1280u32, 760u32);
    let fail = |msg: String| WriteError::Io {
        path: path.to_path_buf(),
        error: std::io::Error::other(msg),
    };
    let is_png = path
        .extension()
        .is_some_and(|e| e.eq_ignore_ascii_case("png"));
    register_font();
    if is_png {
        let mut buf = vec![0u8; (w * h * 3) as usize];
        draw(
            BitMapBackend::with_buffer(&mut buf, (w, h)).into_drawing_area(),
            plot,
        )
        .map_err(fail)?;
        let mut png = Vec::new();
        image::codecs::png::PngEncoder::new(&mut png)
            .write_image(&buf, w, h, image::ExtendedColorType::Rgb8)
            .map_err(|x| fail(x.to_string()))?;
        crate::atomic::write_bytes(path, &png)
    } else {
        let mut svg = String::new();
        draw(
            SVGBackend::with_string(&mut svg, (w, h)).into_drawing_area(),
            plot,
        )
        .map_err(fail)?;
        crate::atomic::write_bytes(path, svg.as_bytes())
    }
}

use image::ImageEncoder as _;

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn light_colours_are_darkened_and_dark_ones_kept() {
        assert_eq!(legible([40, 40, 40]), [40, 40, 40]);
        let w = legible([255, 255, 255]);
        assert!(w[0] < 170 && w[0] == w[1] && w[1] == w[2], "{w:?}");
    }

    #[test]
    fn the_compiled_in_font_parses() {
        assert!(plotters::style::register_font("test-family", FontStyle::Normal, FONT).is_ok());
    }
}
