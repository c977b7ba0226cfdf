//! `thiomap demo --out FILE`: writes a synthetic scene of Brimveil, a fictional
//! sulfur-volcanic moon — the cube, its truth planes and truth.json, and a true-colour
//! preview — with a chosen band set, size, SNR and seed.

use std::path::PathBuf;
use std::process::ExitCode;

use anyhow::bail;
use thiomap::atomic::WriteError;
use thiomap::cube::bandsets;
use thiomap::demo::files::{scene_files, write_scene, CubeFormat};
use thiomap::demo::{generate, Law, SceneKind, SceneParams};
use thiomap::render::maps;

use super::common::{BandArgs, LibraryArgs};

/// Write a synthetic scene (cube + ground truth) of a fictional sulfur-volcanic moon.
#[derive(Debug, clap::Args)]
#[command(after_help = "Examples:\n  \
    thiomap demo --out scene.fits\n  \
    thiomap demo --out globe.fits --bands mapper-96 --snr 200 --hot-spots 3 --seed 1\n  \
    thiomap demo --out tile.npy --kind tile --bands spectrometer-24 --snr 100 --mismatch 0.03\n\n\
    Besides the cube, writes STEM.truth.fits.gz (true abundances, unit labels, core and \
    hot-spot masks), STEM.truth.json (unit names, member ids, every generation parameter \
    and the command that regenerates the scene) and STEM.true-colour.png.")]
pub struct Args {
    /// The cube to write: .fits, .npy (with a .toml sidecar) or .toml (a band stack of
    /// 16-bit PNGs beside it).
    #[arg(long, value_name = "FILE")]
    out: PathBuf,
    /// `globe` (a disc on dark sky, sky = no data) or `tile` (map-projected, no limb).
    #[arg(long, value_name = "KIND", default_value = "globe", value_parser = ["globe", "tile"])]
    kind: String,
    /// Size in pixels: N (square) or ROWSxCOLS.
    #[arg(long, value_name = "N|ROWSxCOLS", default_value = "96", value_parser = parse_size)]
    size: (usize, usize),
    /// The band set: imager-7, spectrometer-24, mapper-96, or a band-set file.
    #[arg(long, value_name = "BANDSET", default_value = "mapper-96")]
    bands: String,
    #[command(flatten)]
    select: BandArgs,
    /// Signal-to-noise ratio at 0.55 µm, at the mean surface I/F of the band nearest it
    /// (greater than 0); other bands follow a detector model, noisier where the Sun is faint.
    #[arg(
        long,
        value_name = "SNR",
        default_value_t = 200.0,
        allow_hyphen_values = true
    )]
    snr: f64,
    /// Library mismatch amplitude, 0–0.5 (0.03 = smooth ±3 % differences from the library).
    #[arg(
        long,
        value_name = "FRACTION",
        default_value_t = 0.0,
        allow_hyphen_values = true
    )]
    mismatch: f64,
    /// Number of hot-spot pixels (thermal emission at 3–5 µm) on the active vent.
    #[arg(long, value_name = "N", default_value_t = 0)]
    hot_spots: usize,
    /// Hot-spot temperatures, drawn uniformly in MIN-MAX, K.
    #[arg(long, value_name = "MIN-MAX", default_value = "550-850", value_parser = parse_pair)]
    hot_temperature: (f64, f64),
    /// Hot area fractions of a hot-spot pixel, drawn log-uniformly in MIN-MAX.
    #[arg(long, value_name = "MIN-MAX", default_value = "0.0001-0.001", value_parser = parse_pair)]
    hot_fraction: (f64, f64),
    /// The Sun's distance in AU (written as SUNDIST). Default: Brimveil's, 4.8.
    #[arg(long, value_name = "AU", default_value_t = thiomap::demo::SUN_DISTANCE_AU, allow_hyphen_values = true)]
    sun_distance: f64,
    /// Seed of all randomness; the same seed gives byte-identical files.
    #[arg(long, value_name = "N", default_value_t = 1)]
    seed: u64,
    /// Photometric law: lambert (P = cos i) or lommel-seeliger (2 cos i / (cos i + cos e)).
    #[arg(long, value_name = "LAW", default_value = "lambert", value_parser = ["lambert", "lommel-seeliger"])]
    law: String,
    /// Sub-solar point LAT,LON in degrees.
    #[arg(long, value_name = "LAT,LON", default_value = "0,30", value_parser = parse_point, allow_hyphen_values = true)]
    sun: (f64, f64),
    /// Sub-observer point LAT,LON in degrees.
    #[arg(long, value_name = "LAT,LON", default_value = "0,0", value_parser = parse_point, allow_hyphen_values = true)]
    observer: (f64, f64),
    #[command(flatten)]
    library: LibraryArgs,
    /// Replace existing files.
    #[arg(long)]
    overwrite: bool,
}

fn parse_size(s: &str) -> Result<(usize, usize), String> {
    let parse = |t: &str| {
        t.trim()
            .parse::<usize>()
            .map_err(|_| format!("`{s}` is not N or ROWSxCOLS"))
    };
    match s.split_once(['x', 'X']) {
        Some((r, c)) => Ok((parse(r)?, parse(c)?)),
        None => {
            let n = parse(s)?;
            Ok((n, n))
        }
    }
}

fn parse_point(s: &str) -> Result<(f64, f64), String> {
    let (a, b) = s
        .split_once(',')
        .ok_or_else(|| format!("`{s}` is not LAT,LON"))?;
    let num = |t: &str| {
        t.trim()
            .parse::<f64>()
            .map_err(|_| format!("`{t}` is not a number of degrees"))
    };
    Ok((num(a)?, num(b)?))
}

pub fn run(a: Args) -> anyhow::Result<ExitCode> {
    let lower = a.out.to_string_lossy().to_ascii_lowercase();
    let format = if lower.ends_with(".fits") {
        CubeFormat::Fits
    } else if lower.ends_with(".npy") {
        CubeFormat::Npy
    } else if lower.ends_with(".toml") {
        CubeFormat::Stack
    } else {
        bail!(
            "--out {}: the name must end in .fits, .npy or .toml (band stack)",
            a.out.display()
        );
    };
    let mut files = scene_files(&a.out, format);
    let preview = a.out.with_extension("true-colour.png");
    files.push(preview.clone());
    if !a.overwrite {
        if let Some(existing) = files.iter().find(|p| p.exists()) {
            return Err(WriteError::Exists {
                path: existing.clone(),
            }
            .into());
        }
    }
    let params = SceneParams {
        kind: if a.kind == "tile" {
            SceneKind::Tile
        } else {
            SceneKind::Globe
        },
        rows: a.size.0,
        cols: a.size.1,
        snr: a.snr,
        mismatch: a.mismatch,
        hot_spots: a.hot_spots,
        hot_temperature_k: a.hot_temperature,
        hot_fraction: a.hot_fraction,
        sun_distance_au: a.sun_distance,
        seed: a.seed,
        law: if a.law == "lambert" {
            Law::Lambert
        } else {
            Law::LommelSeeliger
        },
        sun: a.sun,
        observer: a.observer,
        row0_at_bottom: format == CubeFormat::Fits,
    };
    params.check()?;
    let library = a.library.load()?;
    let named = bandsets::resolve(&a.bands)?;
    let kept = a
        .select
        .selection()
        .apply(&named.bands)
        .map_err(|e| anyhow::anyhow!("--bands {}: {e}", a.bands))?;
    let bands = named.bands.subset(&kept);
    let scene = generate(&params, &library, &bands, &a.bands)?;
    let command = format!(
        "thiomap demo --out {} --kind {} --size {}x{} --bands {} --snr {} --mismatch {} \
         --hot-spots {} --hot-temperature {}-{} --hot-fraction {}-{} --sun-distance {} \
         --seed {} --law {} --sun {},{} --observer {},{}",
        a.out.display(),
        a.kind,
        a.size.0,
        a.size.1,
        a.bands,
        a.snr,
        a.mismatch,
        a.hot_spots,
        a.hot_temperature.0,
        a.hot_temperature.1,
        a.hot_fraction.0,
        a.hot_fraction.1,
        a.sun_distance,
        a.seed,
        a.law,
        a.sun.0,
        a.sun.1,
        a.observer.0,
        a.observer.1
    );
    write_scene(
        &scene,
        &params,
        &a.out,
        format,
        &a.bands,
        &library.version,
        &command,
    )?;
    let (img, false_colour) = maps::true_colour(&scene.cube);
    thiomap::atomic::write_bytes(&preview, &maps::png_bytes(&img))?;
    let surface = scene.cube.valid.iter().filter(|v| **v).count();
    eprintln!(
        "wrote {} ({} × {} × {} bands, {surface} surface pixels) with its truth and a {} preview",
        a.out.display(),
        params.rows,
        params.cols,
        bands.len(),
        if false_colour {
            "false-colour"
        } else {
            "true-colour"
        }
    );
    Ok(ExitCode::SUCCESS)
}

/// `MIN-MAX` of two numbers.
fn parse_pair(s: &str) -> Result<(f64, f64), String> {
    super::common::min_max(s, "e.g. 550-850")
}
