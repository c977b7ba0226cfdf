//! Shared helpers: running the binary, fixture paths, building small FITS files by hand.

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

pub fn thiomap(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_thiomap"))
        .args(args)
        .output()
        .expect("the thiomap binary runs")
}

pub fn stderr(out: &Output) -> String {
    String::from_utf8_lossy(&out.stderr).into_owned()
}

pub fn fixture(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("tests/fixtures")
        .join(name)
}

/// Header cards as (keyword, value text) pairs, formatted in fixed format.
pub fn fits_header(cards: &[(&str, &str)]) -> Vec<u8> {
    let mut text = String::new();
    for (k, v) in cards {
        text.push_str(&format!("{k:<8}= {v:>20}{:50}", ""));
    }
    text.push_str(&format!("{:<80}", "END"));
    let mut bytes = text.into_bytes();
    bytes.resize(bytes.len().div_ceil(2880) * 2880, b' ');
    bytes
}

/// A minimal cube header: BITPIX, axes, a linear µm spectral axis, plus extra cards.
pub fn cube_header(bitpix: i32, axes: &[usize], extra: &[(&str, &str)]) -> Vec<u8> {
    let mut cards: Vec<(String, String)> = vec![
        ("SIMPLE".into(), "T".into()),
        ("BITPIX".into(), bitpix.to_string()),
        ("NAXIS".into(), axes.len().to_string()),
    ];
    for (i, n) in axes.iter().enumerate() {
        cards.push((format!("NAXIS{}", i + 1), n.to_string()));
    }
    let defaults = [
        ("CTYPE3", "'WAVE    '"),
        ("CUNIT3", "'um      '"),
        ("CRPIX3", "1.0"),
        ("CRVAL3", "0.5"),
        ("CDELT3", "0.1"),
    ];
    for (k, v) in defaults {
        if !extra.iter().any(|(ek, _)| *ek == k) {
            cards.push((k.into(), v.into()));
        }
    }
    for (k, v) in extra {
        cards.push((k.to_string(), v.to_string()));
    }
    let refs: Vec<(&str, &str)> = cards
        .iter()
        .map(|(k, v)| (k.as_str(), v.as_str()))
        .collect();
    fits_header(&refs)
}

/// A whole f32 FITS cube file (axes cols, rows, bands) with the given samples in FITS
/// order, padded to a block.
pub fn f32_fits(axes: [usize; 3], samples: &[f32], extra: &[(&str, &str)]) -> Vec<u8> {
    let mut bytes = cube_header(-32, &axes, extra);
    for v in samples {
        bytes.extend_from_slice(&v.to_be_bytes());
    }
    bytes.resize(bytes.len().div_ceil(2880) * 2880, 0);
    bytes
}

/// The model and band weights `map` would use for `cube` (automatic weights), with the
/// cube's bands already scaled by them, and the run options with their stated noise.
pub fn as_map_runs(
    cube: &mut thiomap::cube::Cube,
    resampled: &thiomap::library::resample::Resampled,
    params: &thiomap::unmix::UnmixParams,
    opts: thiomap::unmix::RunOptions,
) -> (thiomap::unmix::Model, thiomap::unmix::RunOptions) {
    let (model, weights, _) = thiomap::pipeline::weighted_model(
        cube,
        resampled,
        params,
        thiomap::unmix::weights::BandWeighting::Auto,
        &mut Default::default(),
    )
    .unwrap();
    thiomap::pipeline::scale_bands(&mut cube.data, &weights.weights, false);
    (model, weights.apply(opts))
}
