//! Readers against files written by other programs: astropy 8.0.2 and numpy 2.4.6
//! (`tests/fixtures/external/make_fixtures.py`; versions in PROVENANCE.md there). Each
//! test recomputes the values the script wrote and demands them exactly.

use thiomap::cube::{self, Backplane, Cube, OpenOptions};

use super::support::fixture;

fn load(name: &str) -> Cube {
    cube::load(
        &fixture(&format!("external/{name}")),
        &OpenOptions::default(),
    )
    .unwrap_or_else(|e| panic!("{name}: {e}"))
}

/// The float fixtures' formula: v = 0.25 (c + 10 r + 100 b).
fn float_value(r: usize, c: usize, b: usize) -> f32 {
    (0.25 * (c + 10 * r + 100 * b) as f64) as f32
}

fn assert_values(cube: &Cube, expected: impl Fn(usize, usize, usize) -> Option<f32>) {
    assert_eq!(cube.data.dim(), (3, 5, 4));
    for ((r, c, b), v) in cube.data.indexed_iter() {
        match expected(r, c, b) {
            Some(e) => assert_eq!(*v, e, "row {r} col {c} band {b}"),
            None => assert!(v.is_nan(), "row {r} col {c} band {b} should be no-data"),
        }
    }
}

fn assert_centres(cube: &Cube, expected_um: &[f64]) {
    let got = cube.info.bands.centres_um();
    for (g, e) in got.iter().zip(expected_um) {
        assert!(
            (g - e).abs() < 1e-12,
            "centres {got:?}, expected {expected_um:?}"
        );
    }
}

#[test]
fn astropy_float32_cube_reads_exactly_with_nan_masked_and_backplanes() {
    // astropy 8.0.2, BITPIX -32, CUNIT3 = 'nm'
    let cube = load("astropy-f32.fits");
    assert_values(&cube, |r, c, b| {
        (!(r == 1 && c == 2 && b == 3)).then(|| float_value(r, c, b))
    });
    assert_centres(&cube, &[0.45, 0.5, 0.55, 0.6]);
    assert_eq!(cube.nodata_pixels(), 1);
    assert!(!cube.valid[(1, 2)]);
    assert_eq!(cube.nonfinite_samples, 1);
    assert_eq!(cube.info.about.target.as_deref(), Some("Brimveil"));
    let inc = &cube.backplanes[&Backplane::Incidence];
    assert_eq!(inc[(2, 4)], 24.0);
    assert_eq!(cube.backplanes[&Backplane::Emission][(1, 0)], 21.0);
    assert!(!cube.backplanes.contains_key(&Backplane::Phase));
    let keys: Vec<&str> = cube
        .info
        .spatial_wcs
        .iter()
        .map(|c| c.key.as_str())
        .collect();
    for k in ["CTYPE1", "CTYPE2", "CRPIX1", "CRVAL2", "CDELT1"] {
        assert!(keys.contains(&k), "{k} missing from {keys:?}");
    }
}

#[test]
fn astropy_int16_applies_blank_before_bscale_and_bzero() {
    // astropy 8.0.2, BITPIX 16, BSCALE 0.001, BZERO 0.5, BLANK -32768 (FITS Standard 4.0, 5.3)
    let cube = load("astropy-i16-scaled.fits");
    assert_values(&cube, |r, c, b| {
        let raw = (c + 10 * r + 100 * b) as f64 - 200.0;
        (!(r == 0 && c == 0 && b == 0)).then_some((0.5 + 0.001 * raw) as f32)
    });
    // CRPIX3 = 2, CRVAL3 = 0.55, CDELT3 = 0.1: band 1 lies one step below the reference.
    assert_centres(&cube, &[0.45, 0.55, 0.65, 0.75]);
    assert_eq!(cube.nodata_pixels(), 1);
}

#[test]
fn astropy_unsigned_16_bit_uses_bzero_32768() {
    // astropy 8.0.2 stores numpy uint16 as BITPIX 16 with BZERO = 32768; CD3_3 in Angstrom
    let cube = load("astropy-u16.fits");
    assert_values(&cube, |r, c, b| Some(((c + 10 * r + 100 * b) * 150) as f32));
    assert_centres(&cube, &[0.4, 0.5, 0.6, 0.7]);
}

#[test]
fn astropy_8_and_32_bit_integers_read_exactly() {
    // astropy 8.0.2; CUNIT3 = 'm'
    let cube = load("astropy-u8.fits");
    assert_values(&cube, |r, c, b| Some((c + 10 * r + 60 * b) as f32));
    assert_centres(&cube, &[0.4, 0.5, 0.6, 0.7]);
    let cube = load("astropy-i32.fits");
    assert_values(&cube, |r, c, b| {
        Some(((c + 10 * r + 100 * b) as i64 - 100_000) as f32)
    });
}

#[test]
fn astropy_wave_tab_gives_irregular_centres_and_widths() {
    // astropy 8.0.2 BinTableHDU; the script checks the same table with astropy.wcs
    // (Greisen et al. 2006, FITS WCS Paper III, -TAB convention)
    let cube = load("astropy-wavetab.fits");
    assert_values(&cube, |r, c, b| Some(float_value(r, c, b)));
    assert_centres(&cube, &[0.41, 0.55, 0.9, 2.2]);
    let widths: Vec<f64> = cube
        .info
        .bands
        .bands()
        .iter()
        .map(|b| b.fwhm_um().unwrap())
        .collect();
    assert_eq!(widths, vec![0.02, 0.03, 0.05, 0.1]);
}

#[test]
fn astropy_gzip_float64_reads_directly() {
    // astropy 8.0.2 writes .fits.gz with gzip when the name ends in .gz; BITPIX -64
    let cube = load("astropy-f64.fits.gz");
    assert_values(&cube, |r, c, b| Some(float_value(r, c, b)));
    assert_centres(&cube, &[0.45, 0.5, 0.55, 0.6]);
}

#[test]
fn numpy_c_fortran_and_big_endian_arrays_read_exactly() {
    // numpy 2.4.6 np.save: '<f4' C order, '<f8' Fortran order, '>f4' C order
    for name in [
        "numpy-c-f32.npy",
        "numpy-fortran-f64.npy",
        "numpy-bigendian-f32.npy",
    ] {
        let cube = load(name);
        assert_values(&cube, |r, c, b| Some(float_value(r, c, b)));
        assert_centres(&cube, &[0.45, 0.5, 0.55, 0.6]);
        assert_eq!(cube.info.quantity, cube::Quantity::ReflectanceFactor);
    }
}

#[test]
fn block_reads_match_whole_reads_for_every_format() {
    for name in [
        "astropy-f32.fits",
        "astropy-f64.fits.gz",
        "numpy-c-f32.npy",
        "numpy-fortran-f64.npy",
    ] {
        let path = fixture(&format!("external/{name}"));
        let reader = cube::open(&path, &OpenOptions::default()).unwrap();
        let whole = reader.load().unwrap();
        let block = reader.read_rows(1, 2).unwrap();
        assert_eq!(block.first_row, 1);
        for ((r, c, b), v) in block.data.indexed_iter() {
            let w = whole.data[(r + 1, c, b)];
            assert!(
                v == &w || (v.is_nan() && w.is_nan()),
                "{name} ({r},{c},{b})"
            );
        }
        assert!(
            reader.read_rows(2, 2).is_err(),
            "{name}: reading past the end must fail"
        );
    }
}
