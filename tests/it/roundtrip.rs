//! Writers read back by thiomap's own readers (astropy reads them too, in
//! `tests/external/check_fits_output.py`, run by `.ci/run`), and band stacks built here.

use std::path::Path;

use thiomap::cube::{self, Cube, OpenOptions};
use thiomap::fits::{self, Source};

use super::support::fixture;

fn load(path: &Path) -> Cube {
    cube::load(path, &OpenOptions::default()).unwrap_or_else(|e| panic!("{e}"))
}

fn same_samples(a: &Cube, b: &Cube) {
    assert_eq!(a.data.dim(), b.data.dim());
    for (x, y) in a.data.iter().zip(b.data.iter()) {
        assert!(x == y || (x.is_nan() && y.is_nan()), "{x} != {y}");
    }
    assert_eq!(a.valid, b.valid);
}

fn primary_ctype3(path: &Path) -> String {
    let src = Source::open(path).unwrap();
    let hdus = fits::scan(&src).unwrap();
    hdus[0].header.str("CTYPE3").unwrap().to_string()
}

#[test]
fn fits_written_with_a_linear_axis_reads_back_unchanged() {
    let dir = tempfile::tempdir().unwrap();
    let original = load(&fixture("external/astropy-f32.fits"));
    let out = dir.path().join("copy.fits");
    cube::fits::write_cube(&out, &original).unwrap();
    let copy = load(&out);
    same_samples(&original, &copy);
    assert_eq!(primary_ctype3(&out), "WAVE");
    assert_eq!(
        original.info.bands.centres_um(),
        copy.info.bands.centres_um()
    );
    assert_eq!(original.backplanes, copy.backplanes);
    assert_eq!(original.info.spatial_wcs, copy.info.spatial_wcs);
    assert_eq!(original.info.about, copy.info.about);
    assert_eq!(original.info.quantity, copy.info.quantity);
}

#[test]
fn fits_with_irregular_bands_is_written_as_wave_tab() {
    let dir = tempfile::tempdir().unwrap();
    let original = load(&fixture("external/astropy-wavetab.fits"));
    let out = dir.path().join("copy.fits");
    cube::fits::write_cube(&out, &original).unwrap();
    assert_eq!(primary_ctype3(&out), "WAVE-TAB");
    let copy = load(&out);
    same_samples(&original, &copy);
    assert_eq!(original.info.bands, copy.info.bands);
}

#[test]
fn band_noise_and_the_suns_distance_survive_fits_and_npy() {
    // Our own keys: the band table's NOISE column / `noise_sigma`, and SUNDIST /
    // `[about] sun_distance_au`. A linear axis is written as a table when noise is stated.
    let dir = tempfile::tempdir().unwrap();
    let mut original = load(&fixture("external/astropy-f32.fits"));
    let n = original.info.bands.len();
    let sigma: Vec<f64> = (0..n).map(|i| 0.001 * (i + 1) as f64).collect();
    original.info.bands = original
        .info
        .bands
        .clone()
        .with_noise_sigma(sigma.clone())
        .unwrap();
    original.info.about.sun_distance_au = Some(4.95);
    for name in ["copy.fits", "copy.npy"] {
        let out = dir.path().join(name);
        if name.ends_with(".fits") {
            cube::fits::write_cube(&out, &original).unwrap();
            assert_eq!(primary_ctype3(&out), "WAVE-TAB");
        } else {
            cube::npy::write_cube(&out, &original).unwrap();
        }
        let copy = load(&out);
        same_samples(&original, &copy);
        assert_eq!(copy.info.bands.noise_sigma(), Some(&sigma[..]), "{name}");
        assert_eq!(copy.info.about.sun_distance_au, Some(4.95), "{name}");
        assert_eq!(
            original.info.bands.centres_um(),
            copy.info.bands.centres_um()
        );
    }
}

#[test]
fn a_sidecar_with_noise_on_some_bands_only_is_refused() {
    let table = thiomap::bands::BandTableFile::parse(
        "kind = \"band-set\"\n[[band]]\ncentre_um = 0.5\nnoise_sigma = 0.01\n\
         [[band]]\ncentre_um = 0.6\n",
    )
    .unwrap();
    let e = table.band_table().unwrap_err();
    assert!(e.contains("every band or for none"), "{e}");
    let table = thiomap::bands::BandTableFile::parse(
        "kind = \"band-set\"\n[[band]]\ncentre_um = 0.5\nnoise_sigma = -1\n\
         [[band]]\ncentre_um = 0.6\nnoise_sigma = 0.01\n",
    )
    .unwrap();
    let e = table.band_table().unwrap_err();
    assert!(e.contains("band 1: noise_sigma -1"), "{e}");
}

#[test]
fn npy_with_sidecar_reads_back_unchanged() {
    let dir = tempfile::tempdir().unwrap();
    let original = load(&fixture("external/astropy-wavetab.fits"));
    let out = dir.path().join("copy.npy");
    cube::npy::write_cube(&out, &original).unwrap();
    assert!(dir.path().join("copy.toml").is_file());
    let copy = load(&out);
    same_samples(&original, &copy);
    assert_eq!(original.info.bands, copy.info.bands);
    // Opening the sidecar opens the same cube.
    let via_sidecar = load(&dir.path().join("copy.toml"));
    same_samples(&original, &via_sidecar);
}

#[test]
fn band_stack_of_png_and_tiff_applies_scale_offset_and_nodata() {
    let dir = tempfile::tempdir().unwrap();
    let (w, h) = (4u32, 3u32);
    // band 1: 16-bit PNG, raw = 1000 + 10 x + 100 y, with raw 0 marking no data at (0, 0)
    let png = image::ImageBuffer::<image::Luma<u16>, Vec<u16>>::from_fn(w, h, |x, y| {
        image::Luma([if x == 0 && y == 0 {
            0
        } else {
            1000 + 10 * x as u16 + 100 * y as u16
        }])
    });
    png.save(dir.path().join("b1.png")).unwrap();
    // band 2: 8-bit PNG, raw = 20 + x
    let png8 = image::ImageBuffer::<image::Luma<u8>, Vec<u8>>::from_fn(w, h, |x, _| {
        image::Luma([20 + x as u8])
    });
    png8.save(dir.path().join("b2.png")).unwrap();
    // band 3: f32 TIFF, value = 0.5 + 0.01 y
    let values: Vec<f32> = (0..h)
        .flat_map(|y| (0..w).map(move |_| 0.5 + 0.01 * y as f32))
        .collect();
    let file = std::fs::File::create(dir.path().join("b3.tif")).unwrap();
    let mut enc = tiff::encoder::TiffEncoder::new(file).unwrap();
    enc.write_image::<tiff::encoder::colortype::Gray32Float>(w, h, &values)
        .unwrap();
    let sidecar = r#"
kind = "band-stack"
quantity = "reflectance-factor"
nodata = 0

[[band]]
file = "b1.png"
centre_um = 0.45
fwhm_um = 0.02
scale = 0.0001

[[band]]
file = "b2.png"
centre_um = 0.55
fwhm_um = 0.02
scale = 0.01
offset = 0.1

[[band]]
file = "b3.tif"
centre_um = 0.65
scale = 1.0
"#;
    let side = dir.path().join("stack.toml");
    std::fs::write(&side, sidecar).unwrap();
    let cube = load(&side);
    assert_eq!(cube.data.dim(), (3, 4, 3));
    assert!(!cube.valid[(0, 0)]);
    assert_eq!(cube.nodata_pixels(), 1);
    let expect1 = (0.0001 * (1000.0 + 10.0 * 2.0 + 100.0 * 1.0)) as f32;
    assert_eq!(cube.data[(1, 2, 0)], expect1);
    assert_eq!(cube.data[(1, 3, 1)], (0.1 + 0.01 * 23.0) as f32);
    assert_eq!(cube.data[(2, 0, 2)], 0.5 + 0.01 * 2.0);
    let block = cube::open(&side, &OpenOptions::default())
        .unwrap()
        .read_rows(1, 1)
        .unwrap();
    assert_eq!(block.data[(0, 2, 0)], expect1);
}
