//! Pictures for planners: change over the later true colour, and targets with keep-out
//! areas shaded. Both start from a true-colour image in internal row order (grey where
//! none), greyed so that the overlay colours read on it; colours are from the Okabe–Ito
//! palette (Okabe & Ito 2008, "Color Universal Design"), safe for colour-blind readers.

use image::RgbImage;
use ndarray::{Array2, Array3};

use super::maps::{mark_spots, Marker, NODATA_RGB};

/// Significant change (vermillion).
pub const CHANGE_RGB: [u8; 3] = [213, 94, 0];
/// A hot spot that appeared (yellow).
pub const HOT_ON_RGB: [u8; 3] = [240, 228, 66];
/// A hot spot that went out (blue).
pub const HOT_OFF_RGB: [u8; 3] = [0, 114, 178];
/// Keep-out areas: stripes of this colour.
pub const KEEP_OUT_RGB: [u8; 3] = [204, 121, 167];

/// The enlargement factor for a grid of this size (about 512 pixels across, at least 2).
fn factor(rows: usize, cols: usize) -> usize {
    (512 / rows.max(cols).max(1)).max(2)
}

/// The greyed background: true colour at 60 % toward its own grey, dimmed, or no-data grey.
fn background(rgb: Option<&Array3<f32>>, r: usize, c: usize, has_data: bool) -> [u8; 3] {
    match rgb {
        Some(t) if has_data => {
            let px = [t[(r, c, 0)], t[(r, c, 1)], t[(r, c, 2)]];
            let grey = 0.2126 * px[0] + 0.7152 * px[1] + 0.0722 * px[2];
            px.map(|v| ((0.4 * v + 0.6 * grey) * 0.8).clamp(0.0, 255.0) as u8)
        }
        None if has_data => [120, 120, 120],
        _ => NODATA_RGB,
    }
}

fn mix(a: [u8; 3], b: [u8; 3], t: f32) -> [u8; 3] {
    [0, 1, 2].map(|k| (a[k] as f32 * (1.0 - t) + b[k] as f32 * t) as u8)
}

/// Paints each cell with `paint(r, c, background) -> colour`, enlarged.
fn paint(
    rows: usize,
    cols: usize,
    row0_at_bottom: bool,
    f: usize,
    colour: impl Fn(usize, usize, usize, usize) -> [u8; 3],
) -> RgbImage {
    let mut img = RgbImage::new((cols * f) as u32, (rows * f) as u32);
    for r in 0..rows {
        let pr = if row0_at_bottom { rows - 1 - r } else { r };
        for c in 0..cols {
            for dy in 0..f {
                for dx in 0..f {
                    img.put_pixel(
                        (c * f + dx) as u32,
                        (pr * f + dy) as u32,
                        image::Rgb(colour(r, c, dx, dy)),
                    );
                }
            }
        }
    }
    img
}

/// The change picture: significant cells in [`CHANGE_RGB`], hot spots that appeared or
/// went out in [`HOT_ON_RGB`] / [`HOT_OFF_RGB`], the largest regions numbered.
pub fn change_picture(
    rgb: Option<&Array3<f32>>,
    has_data: &Array2<bool>,
    significant: &Array2<bool>,
    hot_change: &Array2<i8>,
    row0_at_bottom: bool,
    labels: &[Marker],
) -> RgbImage {
    let (rows, cols) = significant.dim();
    let f = factor(rows, cols);
    let img = paint(rows, cols, row0_at_bottom, f, |r, c, _, _| {
        let bg = background(rgb, r, c, has_data[(r, c)]);
        match hot_change[(r, c)] {
            1 => HOT_ON_RGB,
            -1 => HOT_OFF_RGB,
            _ if significant[(r, c)] => mix(bg, CHANGE_RGB, 0.7),
            _ => bg,
        }
    });
    mark_spots(&img, rows, row0_at_bottom, labels)
}

/// The targets picture: keep-out cells striped in [`KEEP_OUT_RGB`], numbered markers.
pub fn targets_picture(
    rgb: Option<&Array3<f32>>,
    has_data: &Array2<bool>,
    keep_out: &Array2<bool>,
    row0_at_bottom: bool,
    markers: &[Marker],
) -> RgbImage {
    let (rows, cols) = keep_out.dim();
    let f = factor(rows, cols);
    let img = paint(rows, cols, row0_at_bottom, f, |r, c, dx, dy| {
        let bg = background(rgb, r, c, has_data[(r, c)]);
        if keep_out[(r, c)] && ((c * f + dx) + (r * f + dy)) % 8 < 3 {
            KEEP_OUT_RGB
        } else {
            bg
        }
    });
    mark_spots(&img, rows, row0_at_bottom, markers)
}

/// `img` with a dark band on top holding `text` (a short caution) in the compiled-in font.
pub fn with_caution(img: &RgbImage, text: &str) -> RgbImage {
    use plotters::prelude::*;
    super::plot::register_font();
    let band = 26u32;
    let (w, h) = img.dimensions();
    let mut out = RgbImage::from_pixel(w, h + band, image::Rgb([20, 20, 20]));
    image::imageops::overlay(&mut out, img, 0, band as i64);
    let mut buf = out.as_raw().clone();
    {
        let root = BitMapBackend::with_buffer(&mut buf, (w, h + band)).into_drawing_area();
        let size = if w >= 640 { 15.0 } else { 12.0 };
        let font = (super::plot::FAMILY, size).into_font().color(&WHITE);
        let _ = root.draw(&Text::new(text.to_string(), (6, 6), font));
        let _ = root.present();
    }
    RgbImage::from_raw(w, h + band, buf).expect("the buffer keeps its size")
}
