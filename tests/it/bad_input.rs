//! Malformed inputs: each gets one clear message naming the file and what is wrong,
//! exit code 2, no panic, and no output file left behind. Every file is built here.

use std::path::{Path, PathBuf};

use super::support::{cube_header, f32_fits, fits_header, stderr, thiomap};

/// Runs `convert` on `input` into the same folder and checks the refusal.
fn assert_refused(input: &Path, phrase: &str) {
    assert_refused_naming(input, input, phrase)
}

/// As `assert_refused`, where the message must name `culprit` (a sidecar, say).
fn assert_refused_naming(input: &Path, culprit: &Path, phrase: &str) {
    let dir = input.parent().unwrap();
    let before: Vec<PathBuf> = listing(dir);
    let out = dir.join("converted.fits");
    let run = thiomap(&[
        "convert",
        input.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
    ]);
    let err = stderr(&run);
    assert_eq!(run.status.code(), Some(2), "stderr: {err}");
    assert!(!err.contains("panicked"), "{err}");
    assert!(err.starts_with("thiomap: "), "{err}");
    let name = culprit.file_name().unwrap().to_str().unwrap();
    assert!(err.contains(name), "{name} not named in: {err}");
    assert!(
        err.to_lowercase().contains(&phrase.to_lowercase()),
        "expected '{phrase}' in: {err}"
    );
    assert_eq!(err.trim_end().lines().count(), 1, "one message, got: {err}");
    assert_eq!(listing(dir), before, "an output file was left behind");
}

fn listing(dir: &Path) -> Vec<PathBuf> {
    let mut v: Vec<PathBuf> = std::fs::read_dir(dir)
        .unwrap()
        .map(|e| e.unwrap().path())
        .collect();
    v.sort();
    v
}

fn write(dir: &tempfile::TempDir, name: &str, bytes: &[u8]) -> PathBuf {
    let p = dir.path().join(name);
    std::fs::write(&p, bytes).unwrap();
    p
}

fn samples(n: usize) -> Vec<f32> {
    (0..n).map(|i| i as f32 * 0.01).collect()
}

#[test]
fn truncated_fits_data_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    let mut bytes = cube_header(-32, &[5, 3, 4], &[]);
    bytes.extend_from_slice(&[0u8; 100]); // 240 bytes declared
    let p = write(&dir, "short.fits", &bytes);
    assert_refused(&p, "truncated");
}

#[test]
fn a_header_claiming_a_terabyte_is_refused_before_allocating() {
    let dir = tempfile::tempdir().unwrap();
    let bytes = cube_header(-32, &[1_000_000, 1_000_000, 100], &[]);
    let p = write(&dir, "huge.fits", &bytes);
    assert_refused(&p, "claims more data than the file holds");
}

#[test]
fn a_twelve_byte_npy_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    let p = write(&dir, "tiny.npy", b"\x93NUMPY\x01\x00\x76\x00{'");
    assert_refused(&p, "header runs past the end");
}

#[test]
fn an_npy_header_claiming_a_terabyte_is_refused_before_allocating() {
    let dir = tempfile::tempdir().unwrap();
    let dict = "{'descr': '<f4', 'fortran_order': False, 'shape': (100000, 100000, 100), }";
    let mut header = format!("{dict:<117}\n").into_bytes();
    let mut bytes = b"\x93NUMPY\x01\x00".to_vec();
    bytes.extend_from_slice(&(header.len() as u16).to_le_bytes());
    bytes.append(&mut header);
    let p = write(&dir, "huge.npy", &bytes);
    write(
        &dir,
        "huge.toml",
        b"kind = \"npy-sidecar\"\n[[band]]\ncentre_um = 0.5\n",
    );
    assert_refused(&p, "truncated");
}

#[test]
fn unsupported_bitpix_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    let mut bytes = cube_header(24, &[5, 3, 4], &[]);
    bytes.resize(bytes.len() + 2880, 0);
    let p = write(&dir, "bitpix24.fits", &bytes);
    assert_refused(&p, "BITPIX = 24 is not supported");
}

#[test]
fn an_image_without_a_band_axis_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    let mut bytes = fits_header(&[
        ("SIMPLE", "T"),
        ("BITPIX", "-32"),
        ("NAXIS", "2"),
        ("NAXIS1", "5"),
        ("NAXIS2", "3"),
    ]);
    bytes.resize(bytes.len() + 2880, 0);
    let p = write(&dir, "flat.fits", &bytes);
    assert_refused(&p, "no band axis");
}

#[test]
fn decreasing_band_centres_are_refused() {
    let dir = tempfile::tempdir().unwrap();
    let p = write(
        &dir,
        "down.fits",
        &f32_fits([5, 3, 4], &samples(60), &[("CDELT3", "-0.1")]),
    );
    assert_refused(&p, "must increase strictly");
}

#[test]
fn a_zero_band_centre_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    let p = write(
        &dir,
        "zero.fits",
        &f32_fits([5, 3, 4], &samples(60), &[("CRVAL3", "0.0")]),
    );
    assert_refused(&p, "not a positive finite wavelength");
}

#[test]
fn a_negative_band_centre_in_a_sidecar_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    let npy = dir.path().join("neg.npy");
    ndarray_npy::write_npy(&npy, &ndarray::Array3::<f32>::zeros((2, 2, 2))).unwrap();
    write(
        &dir,
        "neg.toml",
        b"kind = \"npy-sidecar\"\n[[band]]\ncentre_um = -0.5\n[[band]]\ncentre_um = 0.6\n",
    );
    let side = dir.path().join("neg.toml");
    assert_refused_naming(&npy, &side, "not a positive finite wavelength");
}

#[test]
fn an_unknown_spectral_unit_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    let p = write(
        &dir,
        "unit.fits",
        &f32_fits([5, 3, 4], &samples(60), &[("CUNIT3", "'furlong '")]),
    );
    assert_refused(&p, "unknown spectral unit");
}

#[test]
fn a_sidecar_missing_a_field_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    let npy = dir.path().join("nofield.npy");
    ndarray_npy::write_npy(&npy, &ndarray::Array3::<f32>::zeros((2, 2, 2))).unwrap();
    write(
        &dir,
        "nofield.toml",
        b"kind = \"npy-sidecar\"\n[[band]]\nfwhm_um = 0.01\n[[band]]\ncentre_um = 0.6\n",
    );
    let side = dir.path().join("nofield.toml");
    assert_refused_naming(&npy, &side, "line 2: missing field `centre_um`");
}

#[test]
fn a_missing_sidecar_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    let npy = dir.path().join("alone.npy");
    ndarray_npy::write_npy(&npy, &ndarray::Array3::<f32>::zeros((2, 2, 2))).unwrap();
    assert_refused(&npy, "sidecar");
}

#[test]
fn a_stack_naming_a_missing_file_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    let p = write(
        &dir,
        "stack.toml",
        b"kind = \"band-stack\"\n[[band]]\nfile = \"gone.png\"\ncentre_um = 0.5\nscale = 1.0\n",
    );
    assert_refused(&p, "gone.png does not exist");
}

#[test]
fn band_images_of_different_sizes_are_refused() {
    let dir = tempfile::tempdir().unwrap();
    image::GrayImage::new(4, 3)
        .save(dir.path().join("a.png"))
        .unwrap();
    image::GrayImage::new(5, 3)
        .save(dir.path().join("b.png"))
        .unwrap();
    let p = write(
        &dir,
        "sizes.toml",
        b"kind = \"band-stack\"\n[[band]]\nfile = \"a.png\"\ncentre_um = 0.5\nscale = 1.0\n\
          [[band]]\nfile = \"b.png\"\ncentre_um = 0.6\nscale = 1.0\n",
    );
    assert_refused(&p, "differ in size");
}

#[test]
fn an_empty_cube_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    let p = write(&dir, "empty.fits", &cube_header(-32, &[5, 0, 4], &[]));
    assert_refused(&p, "empty");
}

#[test]
fn a_one_band_cube_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    let p = write(&dir, "one.fits", &f32_fits([5, 3, 1], &samples(15), &[]));
    assert_refused(&p, "single band");
}

#[test]
fn nan_and_infinite_samples_are_masked_and_counted_not_refused() {
    let dir = tempfile::tempdir().unwrap();
    let mut s = samples(60);
    s[7] = f32::NAN; // band 1, row 1, col 2
    s[15 + 7] = f32::INFINITY; // band 2, same pixel
    s[30] = f32::NEG_INFINITY; // band 3, row 0, col 0
    let p = write(&dir, "holes.fits", &f32_fits([5, 3, 4], &s, &[]));
    let run = thiomap(&["inspect", p.to_str().unwrap(), "--json"]);
    assert_eq!(run.status.code(), Some(0), "{}", stderr(&run));
    let json: serde_json::Value = serde_json::from_slice(&run.stdout).unwrap();
    assert_eq!(json["nodata_pixels"], 2);
    assert_eq!(json["nonfinite_samples"], 3);
    assert!((json["nodata_fraction"].as_f64().unwrap() - 2.0 / 15.0).abs() < 1e-12);
}
