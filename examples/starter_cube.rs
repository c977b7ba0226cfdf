//! Writes `demo-cubes/brimveil-starter.fits`, a tiny synthetic cube (32 × 32 pixels,
//! 8 bands, 0.40–0.96 µm) of an invented surface: a bright plain crossed by a dark flow,
//! with a sky corner of no-data. It exists so `thiomap inspect` has a shipped cube
//! before the scene generator lands; its numbers mean nothing physical.
//!
//! Usage: cargo run --example starter_cube

use ndarray::{Array2, Array3};
use thiomap::cube::{About, Band, BandTable, Cube, CubeInfo, Format, Quantity, Response};

fn main() -> anyhow::Result<()> {
    let (rows, cols) = (32, 32);
    let bands = BandTable::new(
        (0..8)
            .map(|i| Band {
                centre_um: 0.40 + 0.08 * i as f64,
                response: Response::Gaussian { fwhm_um: 0.04 },
            })
            .collect(),
    )?;
    let mut data = Array3::<f32>::zeros((rows, cols, 8));
    for ((r, c, b), v) in data.indexed_iter_mut() {
        let wl = 0.40 + 0.08 * b as f32;
        // a yellowish plain: dark below 0.45 µm, bright beyond 0.52 µm
        let plain = 0.08 + 0.8 / (1.0 + (-(wl - 0.46) / 0.02).exp());
        // a dark flow along a diagonal band
        let flow = 0.06 + 0.02 * wl;
        let d = (r as f32 - c as f32 * 0.6 - 6.0).abs();
        let w = (1.0 - d / 5.0).clamp(0.0, 1.0);
        *v = (1.0 - w) * plain + w * flow;
        if r + c < 6 {
            *v = f32::NAN; // sky
        }
    }
    let valid = Array2::from_shape_fn((rows, cols), |(r, c)| r + c >= 6);
    let cube = Cube {
        info: CubeInfo {
            path: "demo-cubes/brimveil-starter.fits".into(),
            format: Format::Fits { hdu: 0 },
            rows,
            cols,
            bands,
            quantity: Quantity::ReflectanceFactor,
            spatial_wcs: Vec::new(),
            about: About {
                target: Some("Brimveil (fictional)".into()),
                ..Default::default()
            },
        },
        data,
        valid,
        nonfinite_samples: 0,
        backplanes: Default::default(),
    };
    std::fs::create_dir_all("demo-cubes")?;
    thiomap::cube::fits::write_cube("demo-cubes/brimveil-starter.fits".as_ref(), &cube)?;
    println!("wrote demo-cubes/brimveil-starter.fits");
    Ok(())
}
